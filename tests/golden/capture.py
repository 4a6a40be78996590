"""Golden outputs: what ``analyze --json`` prints for every sample image and the text of every demo certificate.

``python tests/golden/capture.py`` writes them (run it only when a change of output is intended, and say why in
the commit); ``tests/test_golden.py`` runs the same steps and compares. Volatile parts are normalised away: run
times, the program version, the JSON schema version, the folder the repository sits in, record identifiers,
dates, times, certificate numbers and hashes.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
HERE = Path(__file__).resolve().parent
SAMPLES = ROOT / "sample_images"

#: keys whose values change from run to run (or version to version) and say nothing about the measurement
VOLATILE_KEYS = {"elapsed_s", "ringgauge_version", "schema_version", "latency_ms"}

LOT_OPTIONS = ["--source", "sodium-d", "--pixel-size", "8", "--pixel-size-u", "0.004"]
PLATE_OPTIONS = ["--source", "mercury-e", "--pixel-size", "25", "--pixel-size-u", "0.02", "--test-diameter", "18",
                 "--tolerance", "3/2(0.5)", "--test-plate-radius", "51.68", "--test-plate-radius-u", "0.002",
                 "--test-plate-kind", "convex"]


def cases() -> dict[str, list[str]]:
    """name -> the ``analyze`` arguments, for every sample image (and the test-plate pair as a set)."""
    out: dict[str, list[str]] = {}
    for p in sorted((SAMPLES / "lot-FH2604").glob("*.png")):
        out[p.stem] = [str(p), *LOT_OPTIONS]
    tp = sorted((SAMPLES / "testplate").glob("*.png"))
    out["testplate-pair"] = [*map(str, tp), *PLATE_OPTIONS]
    for p in tp:
        out[p.stem] = [str(p), *PLATE_OPTIONS]
    return out


def normalise(obj):
    """Drop volatile keys and make paths relative to the repository."""
    if isinstance(obj, dict):
        return {k: normalise(v) for k, v in obj.items() if k not in VOLATILE_KEYS}
    if isinstance(obj, list):
        return [normalise(v) for v in obj]
    if isinstance(obj, str):
        return obj.replace(str(ROOT) + os.sep, "")
    return obj


def run_analyze(args: list[str]) -> dict:
    """``ringgauge analyze ARGS --json`` in this process: its exit code and its output (JSON or the message)."""
    from ringgauge.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(["analyze", *args, "--json", "--quiet"])
    text = out.getvalue()
    body = normalise(json.loads(text)) if rc == 0 and text.strip() else None
    return {"exit_code": rc, "json": body, "message": None if rc == 0 else normalise(err.getvalue().strip())}


_VOLATILE_TEXT = [
    (re.compile(r"\b\d{4}-\d{2}-\d{2}[ T]\d{2}:\d{2}(:\d{2})?(\.\d+)?([+-]\d{2}:?\d{2}|Z)?"), "<time>"),
    (re.compile(r"\b\d{4}-\d{2}-\d{2}\b"), "<date>"),
    (re.compile(r"\b[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}\b"), "<uuid>"),
    (re.compile(r"\b[0-9a-f]{16,}\b"), "<hex>"),
    (re.compile(r"\b([0-9A-F]{2}:){8,}[0-9A-F]{2}\b"), "<fingerprint>"),
    (re.compile(r"\b([A-Z]{2,4}-[CL])\d{4}-\d{6}\b"), r"\1<number>"),
    # the record's number in the store follows the order the batch workers finished in
    (re.compile(r"^(Inspection record\n)\d+ \(", re.M), r"\1<n> ("),
    (re.compile(r"^([A-Z]{2}\d{4}-\d{2}\n)\d+$", re.M), r"\1<n>"),  # a lot report's record column
]


def normalise_text(text: str) -> str:
    text = text.replace(str(ROOT) + os.sep, "")
    for rx, sub in _VOLATILE_TEXT:
        text = rx.sub(sub, text)
    return "\n".join(line.rstrip() for line in text.splitlines()).strip() + "\n"


def _cli(args: list[str], env: dict, cwd: Path) -> str:
    import subprocess

    done = subprocess.run([sys.executable, "-m", "ringgauge", *args], env=env, capture_output=True, text=True,
                          cwd=cwd)  # batch writes its control chart in the working folder
    if done.returncode != 0:
        raise RuntimeError(f"ringgauge {' '.join(args)}: exit {done.returncode}: {done.stderr.strip()}")
    return done.stdout


def demo_documents(work: Path) -> dict[str, str]:
    """The demo's records step in ``work``: the sample lot through ``batch`` (its lot sheet gives the set-up and
    tolerance), then a certificate of every measured part, in serial order, and the lot report, all through the
    command line and the demo's invented shop. Returns the text of each document by a stable name."""
    import pypdf

    sys.path.insert(0, str(ROOT / "scripts"))
    from demo_records import DEMO_SHOP

    home = work / "home"
    home.mkdir(parents=True, exist_ok=True)
    (home / "shop.json").write_text(json.dumps(DEMO_SHOP, ensure_ascii=False))
    env = {**os.environ, "RINGGAUGE_HOME": str(home), "PYTHONPATH": str(ROOT)}
    _cli(["batch", str(SAMPLES / "lot-FH2604"), "--quiet"], env, work)
    records = json.loads(_cli(["records", "export", "--json", "--status", "ok"], env, work))["records"]
    out = work / "out"
    out.mkdir()
    pdfs = {}
    for rec in sorted(records, key=lambda r: r["serial"]):
        pdfs[f"certificate-{rec['serial']}"] = out / f"{rec['serial']}.pdf"
        _cli(["certificate", str(rec["id"]), "--out", str(pdfs[f"certificate-{rec['serial']}"]), "--quiet"], env, work)
    pdfs["lot-report-FH-2604"] = out / "lot.pdf"
    _cli(["certificate", "--lot", "FH-2604", "--out", str(pdfs["lot-report-FH-2604"]), "--quiet"], env, work)
    texts = {}
    for name, p in pdfs.items():
        reader = pypdf.PdfReader(str(p))
        texts[name] = normalise_text("\n".join(page.extract_text() for page in reader.pages))
    return texts


def numbers_close(a, b, path="$") -> list[str]:
    """Differences between two normalised JSON values; floats agree to 1e-9 relative (the same arithmetic on
    another BLAS build may differ in the last bits), everything else exactly."""
    if isinstance(a, dict) and isinstance(b, dict):
        diffs = [f"{path}: key {k!r} {'missing' if k in a else 'added'}" for k in sorted(set(a) ^ set(b))]
        for k in a.keys() & b.keys():
            diffs += numbers_close(a[k], b[k], f"{path}.{k}")
        return diffs
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: length {len(a)} != {len(b)}"]
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in numbers_close(x, y, f"{path}[{i}]")]
    if isinstance(a, float) or isinstance(b, float):
        if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool) \
                and math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12):
            return []
        return [f"{path}: {a!r} != {b!r}"]
    return [] if a == b else [f"{path}: {a!r} != {b!r}"]


def main() -> int:
    import tempfile

    sys.path.insert(0, str(ROOT))
    os.environ.setdefault("RINGGAUGE_HOME", tempfile.mkdtemp(prefix="rg-golden-"))
    (HERE / "analyze").mkdir(exist_ok=True)
    for name, args in cases().items():
        got = run_analyze(args)
        (HERE / "analyze" / f"{name}.json").write_text(json.dumps(got, indent=1, ensure_ascii=False) + "\n")
        print(f"golden: analyze {name}: exit {got['exit_code']}")
    (HERE / "documents").mkdir(exist_ok=True)
    with tempfile.TemporaryDirectory() as t:
        for name, text in demo_documents(Path(t)).items():
            (HERE / "documents" / f"{name}.txt").write_text(text)
            print(f"golden: {name}: {len(text.splitlines())} lines")
    return 0


if __name__ == "__main__":
    sys.exit(main())
