"""Load trial: the MOSES training split (1.58 M records) given twice in one run.

    python benchmarks/bench_load.py --scratch /tmp/bench

Uses the training split that `bench_annotate.py` downloads into SCRATCH; reports wall
time, records, and the peak RSS of the whole process tree (target: within the 1.5 GB
bound of the batch job).
"""

from __future__ import annotations

import argparse
import shutil
from pathlib import Path

from bench_annotate import fetch_training_split, run_annotate


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--scratch", type=Path, required=True)
    ap.add_argument("--jobs", type=int, default=2)
    args = ap.parse_args()
    train = fetch_training_split(args.scratch)
    twin = args.scratch / "moses_train_again.csv.gz"
    if not twin.exists():
        shutil.copyfile(train, twin)
    r = run_annotate([train, twin], args.scratch / "run_load", args.jobs)
    c = r["counts"]
    print(
        f"- 2 x MOSES training split, `annotate --jobs {args.jobs}`: {c['records']:,} records "
        f"({c['molecules']:,} molecules, {c['errors']:,} errors) in {r['wall_s'] / 60:.1f} min, "
        f"peak RSS of the process tree {r['peak_rss_mb']:,.0f} MB"
    )


if __name__ == "__main__":
    main()
