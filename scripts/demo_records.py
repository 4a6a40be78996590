"""Demo tail: process the sample lot into the default records store, then write its certificates and lot report.

Usage: python scripts/demo_records.py [LOT_FOLDER] [--out demo_output] [--certificates N]

The scenario is invented: the Fernhill Optical Workshop inspects lot L-0042 of plano-convex lenses
(part PCX-25-1000, nominal radius 1000 mm ± 0.5 %) for the Harbour Optics Guild. When LOT_FOLDER is not
given, ``sample_images/lot-L0042`` is used if it holds images; otherwise a small lot is generated with the
synthetic interferogram model (seeded, so every run makes the same images). The folder's ``lot.json`` (the lot
sheet, read by ``ringgauge batch`` itself) gives the bench set-up, the lot details, the radius tolerance and the
decision rule; every part gets a radius verdict under that rule.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from ringgauge.cli import main as ringgauge  # noqa: E402
from ringgauge.errors import RinggaugeError  # noqa: E402
from ringgauge.imaging import IMAGE_SUFFIXES, save_png  # noqa: E402
from ringgauge.shop import load_shop, save_shop, shop_path  # noqa: E402

DEMO_SHOP = {
    "name": "Fernhill Optical Workshop",
    "address": ["Unit 4, Quarry Lane", "Millbrook"],
    "contact": "inspection@fernhill.invalid",
    "accreditation": "Demonstration data — invented shop, not an accredited laboratory",
    "certificate_prefix": "FOW",
    "approver": "M. Oriel (quality manager)",
    "paper": "A4",
}
DEMO_LOT = {
    "lot": "L-0042", "part": "PCX-25-1000", "drawing": "FOW-D-1204 rev C", "surface": "S1",
    "operator": "A. Kestrel", "customer": "Harbour Optics Guild", "order": "HOG-PO-5531",
    "temperature_c": 20.3, "source": "sodium-d", "pixel_size_um": 10.0, "pixel_size_u_um": 0.01,
    "radius_tolerance": "1000 ± 0.5 %", "decision_rule": "guard-banded",
}


def make_lot(folder: Path, n: int = 10) -> None:
    """A seeded synthetic lot: lenses near R = 1000 mm on an optical flat, plus one damaged file."""
    import numpy as np

    from ringgauge import synth

    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(42)
    for i in range(n):
        radius = float(rng.normal(1000.0, 1.2))
        img = synth.newton_rings(
            radius, source="sodium-d", camera=synth.Camera(width=640, height=512, pixel_um=10.0),
            centre_px=(float(rng.uniform(300, 340)), float(rng.uniform(236, 276))),
            contact_offset_nm=float(rng.uniform(0, 80)), dust=synth.Dust(count=int(rng.integers(0, 3))), rng=i,
        )
        save_png(folder / f"PCX{i + 1:04d}.png", img.image01)
    # a file that went wrong on its way from the camera: the lot must record it as failed and go on
    (folder / f"PCX{n + 1:04d}.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\0" * 64)
    (folder / "lot.json").write_text(json.dumps(DEMO_LOT, indent=2) + "\n")


def has_images(folder: Path) -> bool:
    return folder.is_dir() and any(p.suffix.lower() in IMAGE_SUFFIXES for p in folder.iterdir())


def run(argv: list[str]) -> int:
    rc = ringgauge(argv)
    if rc != 0:
        raise SystemExit(f"demo: 'ringgauge {' '.join(argv)}' exited with {rc}")
    return rc


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("folder", nargs="?", help="lot folder (default: sample_images/lot-L0042, made if missing)")
    ap.add_argument("--out", default=str(ROOT / "demo_output"), help="where certificates and the report go")
    ap.add_argument("--certificates", type=int, default=3, help="how many certificates to write (default 3)")
    a = ap.parse_args()
    out = Path(a.out)
    out.mkdir(parents=True, exist_ok=True)
    folder = Path(a.folder) if a.folder else ROOT / "sample_images" / "lot-L0042"
    if not has_images(folder):
        if a.folder:
            raise SystemExit(f"demo: {folder} holds no images")
        print(f"demo: generating a synthetic sample lot in {folder}", file=sys.stderr)
        make_lot(folder)
    lot = dict(DEMO_LOT)
    if (folder / "lot.json").exists():
        lot.update(json.loads((folder / "lot.json").read_text()))
    if not shop_path().exists():
        save_shop(DEMO_SHOP)
        print(f"demo: wrote the invented shop's details to {shop_path()}", file=sys.stderr)
    shop = load_shop()
    t0 = time.monotonic()
    if not (folder / "lot.json").exists():
        (folder / "lot.json").write_text(json.dumps(DEMO_LOT, indent=2, ensure_ascii=False) + "\n")
    # the lot sheet beside the images carries the details, set-up, radius tolerance and decision rule
    print(f"demo: ringgauge batch {folder} (details, set-up and tolerance from {folder / 'lot.json'})",
          file=sys.stderr)
    run(["batch", str(folder), "--chart", str(out / f"{lot['lot']}-control-chart.png")])
    print(f"demo: lot processed in {time.monotonic() - t0:.1f} s", file=sys.stderr)

    from ringgauge.records import RecordFilter, open_store
    from ringgauge.certificates import issue_certificate, issue_lot_report

    written = []
    with open_store() as store:
        ok = [r for r in store.find(RecordFilter(lot=lot["lot"], status="ok"))]
        for rec in ok[: max(0, a.certificates)]:
            tmp = out / f".certificate-{rec.id}.pdf"
            doc, path, _ = issue_certificate(store, rec.id, tmp, shop)
            final = path.replace(out / f"{doc.number}.pdf")
            written.append(final)
        _print_radius_verdicts(store.find(RecordFilter(lot=lot["lot"])))
        doc, path = issue_lot_report(store, lot["lot"], out / ".lot-report.pdf", shop)
        written.append(path.replace(out / f"{doc.number}-lot-report.pdf"))
        where = store.where
    print(f"demo: records store {where}")
    for p in written:
        print(f"demo: wrote {p}")
    # the first certificate and the lot report, as a customer would check them: each line a named check, and
    # "verified: signature valid and trusted" at the end (the first issue made the shop's signing key)
    for p in dict.fromkeys(written[:1] + written[-1:]):
        run(["certificate", "verify", str(p)])
    return 0


def _print_radius_verdicts(records) -> None:
    """Each part's radius verdict, by serial, as the lot report lists them."""
    from ringgauge.records.lot import lot_tables, summarise_lot

    if not records:
        return
    summary = summarise_lot(records, records[0].meta.lot or "")
    t = lot_tables(records, summary)
    print(f"demo: radius verdicts against {summary.radius_tolerance or 'no tolerance'} "
          f"({summary.decision_rule or 'no rule'}):")
    for r in t["rows"]:
        acc = "" if r["accepted"] is None else (" (accepted)" if r["accepted"] else " (not accepted)")
        print(f"  {r['serial']:<14} R = {r['radius']:<18} mm  {r['radius_verdict']}{acc}")
    print("  counts: " + ", ".join(f"{k} {v}" for k, v in t["radius_counts"])
          + (f"; accepted {t['accepted']}" if t["accepted"] else ""))


if __name__ == "__main__":
    try:
        sys.exit(main())
    except RinggaugeError as exc:
        print(f"demo: {exc}", file=sys.stderr)
        sys.exit(exc.exit_code)
