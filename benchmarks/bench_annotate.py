"""Benchmark of ``libconf annotate`` on ZINC-derived drug-like molecules.

Set-up (needs the package registry once; never part of the tests): the ``molsets``
package ships the MOSES training split (about 1.58 M SMILES) as a gzipped CSV.

    python benchmarks/bench_annotate.py --scratch /tmp/libconf-bench            # 100 k
    python benchmarks/bench_annotate.py --scratch /tmp/libconf-bench --full     # + 1.58 M
    python benchmarks/bench_annotate.py --scratch /tmp/libconf-bench --pairs 3  # ratio spread

Each run also times two bare loops at once in two processes: on a shared virtual machine
two busy processes may not get two whole cores, and that speed-up is the ceiling for
``--jobs 2``.

Measures, on the first ``--n`` molecules: a bare single-process RDKit
``MolFromSmiles`` loop (the floor any SMILES tool pays), ``annotate --jobs 1`` and
``annotate --jobs 2`` (wall time, records/s, peak resident memory of the whole process
tree), then optionally the full split with ``--jobs 2``. Prints a Markdown section for
benchmarks/RESULTS.md.
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import platform
import shutil
import subprocess
import sys
import threading
import time
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
MEMBER = "moses/dataset/data/train.csv.gz"


def fetch_training_split(scratch: Path) -> Path:
    """The MOSES training split, from the molsets wheel (downloaded once into scratch)."""
    target = scratch / "moses_train.csv.gz"
    if target.exists():
        return target
    scratch.mkdir(parents=True, exist_ok=True)
    wheels = sorted(scratch.glob("molsets-*.whl"))
    if not wheels:
        subprocess.run(
            [sys.executable, "-m", "pip", "download", "--no-deps", "molsets", "-d", str(scratch)],
            check=True,
        )
        wheels = sorted(scratch.glob("molsets-*.whl"))
    with zipfile.ZipFile(wheels[-1]) as whl, whl.open(MEMBER) as src, open(target, "wb") as dst:
        shutil.copyfileobj(src, dst)
    return target


def head(source: Path, n: int, dest: Path) -> Path:
    with gzip.open(source, "rt") as src, gzip.open(dest, "wt") as dst:
        dst.write(next(src))  # header
        for k, line in enumerate(src):
            if k == n:
                break
            dst.write(line)
    return dest


def bare_rdkit_loop(path: Path) -> tuple[float, int]:
    from rdkit import Chem, rdBase

    start = time.perf_counter()
    n = 0
    with rdBase.BlockLogs(), gzip.open(path, "rt") as fh:
        next(fh)
        for line in fh:
            Chem.MolFromSmiles(line.strip())
            n += 1
    return time.perf_counter() - start, n


def two_bare_loops(path: Path) -> tuple[float, list[float]]:
    """Two bare loops at once, each in its own process: (wall until both end, each one's
    own time). Twice the single loop's time over this wall is the speed-up the machine
    itself gives two independent processes, the ceiling for any 1 -> 2 jobs speed-up."""
    cmd = [sys.executable, str(Path(__file__).resolve()), "--scratch", str(path.parent), "--bare-loop", str(path)]
    start = time.perf_counter()
    procs = [subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True) for _ in range(2)]
    outs = [p.communicate()[0] for p in procs]
    wall = time.perf_counter() - start
    if any(p.returncode for p in procs):
        raise SystemExit("a bare loop failed")
    return wall, [float(o.split()[0]) for o in outs]


def _tree_rss_kb(pgid: int) -> int:
    total = 0
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
            if int(fields[2]) != pgid:  # field 5 of stat: process group
                continue
            with open(f"/proc/{entry}/status") as fh:
                for line in fh:
                    if line.startswith("VmRSS:"):
                        total += int(line.split()[1])
        except (OSError, ValueError, IndexError):
            continue
    return total


def run_annotate(inputs: list[Path], out: Path, jobs: int) -> dict:
    cmd = [
        sys.executable,
        "-m",
        "libconf.pipeline.cli",
        "annotate",
        *map(str, inputs),
        "--out",
        str(out),
        "--overwrite",
        "--jobs",
        str(jobs),
        "--quiet",
    ]
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")])
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, start_new_session=True)
    peak = 0
    stop = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not stop.is_set():
            peak = max(peak, _tree_rss_kb(proc.pid))
            stop.wait(0.5)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    rc = proc.wait()
    wall = time.perf_counter() - start
    stop.set()
    sampler.join()
    if rc != 0:
        raise SystemExit(f"annotate exited with {rc}: {' '.join(cmd)}")
    counts = json.loads((out / "manifest.json").read_text())["counts"]
    return {"wall_s": wall, "peak_rss_mb": peak / 1024, "counts": counts, "command": " ".join(cmd[1:])}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scratch", type=Path, required=True, help="download/work directory")
    ap.add_argument("--n", type=int, default=100_000, help="molecules for the comparison")
    ap.add_argument("--full", action="store_true", help="also run the full training split")
    ap.add_argument(
        "--pairs",
        type=int,
        default=0,
        help="only alternate the bare loop and `annotate --jobs 2` this many times (ratio spread on a noisy machine)",
    )
    ap.add_argument("--bare-loop", type=Path, default=None, help=argparse.SUPPRESS)  # one loop, for two_bare_loops
    args = ap.parse_args()
    if args.bare_loop is not None:
        print(f"{bare_rdkit_loop(args.bare_loop)[0]:.3f}")
        return

    train = fetch_training_split(args.scratch)
    sample = head(train, args.n, args.scratch / f"moses_train_{args.n}.csv.gz")
    if args.pairs:
        for _ in range(args.pairs):
            t_rdkit, _n = bare_rdkit_loop(sample)
            r = run_annotate([sample], args.scratch / "run_pair", 2)
            both, _each = two_bare_loops(sample)
            print(
                f"- bare {t_rdkit:.1f} s, `annotate --jobs 2` {r['wall_s']:.1f} s: ratio {r['wall_s'] / t_rdkit:.2f}; "
                f"two bare loops at once {both:.1f} s (the machine's own 2-process speed-up {2 * t_rdkit / both:.2f}x)"
            )
        return
    t_rdkit, n = bare_rdkit_loop(sample)
    runs = {jobs: run_annotate([sample], args.scratch / f"run_{jobs}", jobs) for jobs in (1, 2)}
    both, each = two_bare_loops(sample)
    full = run_annotate([train], args.scratch / "run_full", 2) if args.full else None

    import rdkit

    lines = [
        f"- machine: {os.cpu_count()} cores, {platform.processor() or platform.machine()}, "
        f"Python {platform.python_version()}, RDKit {rdkit.__version__}",
        f"- data: first {n:,} SMILES of the MOSES training split (molsets wheel, ZINC-derived)",
        f"- bare RDKit `MolFromSmiles` loop, 1 process: {t_rdkit:.1f} s ({n / t_rdkit:,.0f} molecules/s)",
    ]
    for jobs, r in runs.items():
        c = r["counts"]
        lines.append(
            f"- `annotate --jobs {jobs}`: {r['wall_s']:.1f} s ({c['records'] / r['wall_s']:,.0f} "
            f"records/s, {r['wall_s'] / t_rdkit:.1f}x the bare parse loop), peak RSS of the "
            f"process tree {r['peak_rss_mb']:,.0f} MB; {c['molecules_with_rings']:,} molecules "
            f"with rings, {c['rings']:,} rings, {c['errors']:,} errors"
        )
    lines.append(f"- speed-up 1 -> 2 jobs: {runs[1]['wall_s'] / runs[2]['wall_s']:.2f}x")
    lines.append(
        f"- two bare loops at once, one process each: {both:.1f} s (each {each[0]:.1f} / {each[1]:.1f} s): "
        f"the machine's own 2-process speed-up {2 * t_rdkit / both:.2f}x, the ceiling for the line above"
    )
    if full:
        c = full["counts"]
        lines.append(
            f"- full split ({c['records']:,} records), `--jobs 2`: {full['wall_s'] / 60:.1f} min "
            f"({c['records'] / full['wall_s']:,.0f} records/s), peak RSS of the process tree "
            f"{full['peak_rss_mb']:,.0f} MB; {c['rings']:,} rings, {c['errors']:,} errors"
        )
    print("\n".join(lines))


if __name__ == "__main__":
    main()
