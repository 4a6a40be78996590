"""The import contracts in pyproject.toml ([tool.importlinter]) hold, and they can fail.

The contracts: Qt only in ringgauge.gui, a database only in ringgauge.records, and the layers (each package
imports only from the layers below it). `make test` runs `lint-imports` before pytest; this test runs it too,
and proves each contract bites by breaking a copy of the package on purpose and checking the copy fails with
the contract named.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
LINT = Path(sys.executable).parent / "lint-imports"

QT = "Qt is imported only by the window (ringgauge.gui)"
DB = "Only the inspection records (ringgauge.records) talk to a database"
ARGPARSE = "Only the command line (ringgauge.cli, ringgauge.commands) uses argparse"
LAYERS = "Layers: each package imports only from the layers below it"
FORBIDDEN = (QT, DB, ARGPARSE)

def lint(where: Path) -> subprocess.CompletedProcess:
    """lint-imports with the project's own contracts, on the ``ringgauge`` package found in ``where``."""
    assert LINT.exists(), "lint-imports is missing: install the test extra (pip install -e '.[test]')"
    env = {**os.environ, "PYTHONPATH": str(where), "NO_COLOR": "1"}
    return subprocess.run([str(LINT), "--no-cache", str(where / "pyproject.toml")], cwd=where, env=env,
                          capture_output=True, text=True, timeout=300)


def broken_copy(tmp_path: Path, module: str, line: str) -> Path:
    """A copy of the package and its pyproject.toml with ``line`` added to the top of ``module``'s file."""
    shutil.copytree(ROOT / "ringgauge", tmp_path / "ringgauge", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / "pyproject.toml", tmp_path / "pyproject.toml")
    target = tmp_path / "ringgauge" / module
    text = target.read_text(encoding="utf-8")
    head, sep, rest = text.partition("from __future__ import annotations\n")
    target.write_text(head + sep + line + "\n" + rest if sep else line + "\n" + text, encoding="utf-8")
    return tmp_path


def status(out: str, contract: str) -> str:
    """KEPT or BROKEN, as lint-imports reports the contract in its summary."""
    for ln in out.splitlines():
        if ln.startswith(contract + " "):
            return ln[len(contract):].split()[0]
    raise AssertionError(f"contract {contract!r} not in the report:\n{out[-3000:]}")


def test_the_contracts_hold():
    proc = lint(ROOT)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 0, out[-3000:]
    assert [status(out, c) for c in (*FORBIDDEN, LAYERS)] == ["KEPT"] * 4


@pytest.mark.parametrize("module, line, contract, where, what", [
    ("pipeline.py", "import PySide6  # noqa", QT, "ringgauge.pipeline", "PySide6"),
    ("report/content.py", "import sqlite3  # noqa", DB, "ringgauge.report.content", "sqlite3"),
    # the set-up builder and the window take typed options; argparse stays in cli.py and commands/
    ("setup_options.py", "import argparse  # noqa", ARGPARSE, "ringgauge.setup_options", "argparse"),
])
def test_a_forbidden_import_breaks_the_build(tmp_path, module, line, contract, where, what):
    proc = lint(broken_copy(tmp_path, module, line))
    out = proc.stdout + proc.stderr
    assert proc.returncode != 0
    assert [status(out, c) for c in FORBIDDEN] == ["BROKEN" if c == contract else "KEPT" for c in FORBIDDEN]
    assert where in out and what in out


def test_an_upward_import_breaks_the_layers(tmp_path):
    # the fringe-order fit reaching up into the pipeline that calls it
    proc = lint(broken_copy(tmp_path, "fit/orders.py", "from ..pipeline import analyse  # noqa"))
    out = proc.stdout + proc.stderr
    assert proc.returncode != 0
    assert status(out, LAYERS) == "BROKEN"
    assert "ringgauge.fit is not allowed to import ringgauge.pipeline" in out


@pytest.mark.parametrize("module, line, words", [
    # the two package cycles this layering removed: rings <-> fit, records <-> report
    ("rings/profile.py", "from ..fit import orders  # noqa", "ringgauge.rings is not allowed to import ringgauge.fit"),
    ("records/store.py", "from ..report import layout  # noqa",
     "ringgauge.records is not allowed to import ringgauge.report"),
    # issuing certificates sits above both; neither may reach up to it
    ("report/verify.py", "from .. import certificates  # noqa",
     "ringgauge.report is not allowed to import ringgauge.certificates"),
])
def test_the_removed_cycles_cannot_come_back(tmp_path, module, line, words):
    proc = lint(broken_copy(tmp_path, module, line))
    out = proc.stdout + proc.stderr
    assert proc.returncode != 0
    assert status(out, LAYERS) == "BROKEN"
    assert words in out
