"""Time and peak memory of `libconf report` on a large finished run.

    python benchmarks/bench_report.py RUN_DIR

RUN_DIR is an `annotate --out` directory (the benchmark of the batch job leaves one
of 1.58 M molecules in its scratch folder: SCRATCH/run_full). Peak RSS is read from
the child process's resource usage.
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import time
from pathlib import Path


def main() -> None:
    run = Path(sys.argv[1])
    out = run.parent / "bench_report.html"
    counts = json.loads((run / "manifest.json").read_text())["counts"]
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "libconf", "report", str(run), "-o", str(out)], check=True)
    wall = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(
        f"report on {counts['records']:,} molecule rows, {counts['rings']:,} ring rows, "
        f"{counts['substituents']:,} substituent rows: {wall:.1f} s, peak RSS {peak_mb:,.0f} MB, "
        f"page {out.stat().st_size / 1e6:.2f} MB"
    )


if __name__ == "__main__":
    main()
