"""The package's layering: the plain-Python models of the window import no Qt, and nothing outside
ringgauge/gui imports PySide6."""

import ast
import pathlib
import subprocess
import sys

import ringgauge

PLAIN = ("model", "display", "lot", "training", "integrations", "recording")


def test_window_models_import_no_qt():
    code = ("import sys\n"
            + "".join(f"import ringgauge.gui.{m}\n" for m in PLAIN)
            + "assert not [m for m in sys.modules if m.startswith('PySide6')], 'Qt was imported'\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]


def test_only_the_gui_package_imports_pyside6():
    root = pathlib.Path(ringgauge.__file__).parent
    offenders = []
    for p in root.rglob("*.py"):
        if "gui" in p.relative_to(root).parts[:1]:
            continue
        tree = ast.parse(p.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            if any(n.split(".")[0] == "PySide6" for n in names):
                offenders.append(str(p.relative_to(root)))
    assert offenders == []
