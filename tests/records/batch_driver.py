"""Run a lot with the stand-in analysis in its own process (the kill test starts and kills this)."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from fakelab import fake_analyse  # noqa: E402

from ringgauge.bench_setup import default_setup  # noqa: E402
from ringgauge.records import RecordMeta, open_store  # noqa: E402
from ringgauge.records.batch import find_images, run_lot  # noqa: E402

if __name__ == "__main__":
    db, folder, workers = sys.argv[1], sys.argv[2], int(sys.argv[3])
    with open_store(db) as store:
        run = run_lot(store, find_images(folder), default_setup(10.0), RecordMeta(lot="K1", part="P"),
                      workers=workers, analyse_fn=fake_analyse)
    print(f"recorded {run.recorded} skipped {run.skipped} interrupted {run.interrupted}")
