"""Fault and hostile-input trials with figures for benchmarks/RELIABILITY.md.

    python benchmarks/reliability.py [--kills 20] [--fuzz 20000] [--scratch DIR]

1. Engine fuzz: random SMILES-like strings and mutated real SMILES (RDKit's NCI set)
   through `libconf.analyze`; counted: results, InputErrors, anything else (a crash).
2. kill -9 trials: `libconf annotate` on the Quillan Ridge demo library in a fresh
   process group, SIGKILLed at a random moment, then `--resume`; the four tables must
   equal those of an uninterrupted run.
3. SIGINT: one interrupted run must exit 130 with a resume hint, then resume to the
   same tables.
4. Disk full (needs root and a tmpfs mount): the run directory on a 1 MB tmpfs; the run
   must stop with exit 1 naming the directory, leave no half-written part file, and
   resume to the same tables once the tmpfs is grown.
Rows lost = records of the input without exactly one row in molecules or errors.
"""

from __future__ import annotations

import argparse
import os
import random
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "datasets" / "demo" / "quillan_ridge_library.smi.gz"
TABLES = ("molecules", "rings", "substituents", "errors")


def _annotate(out: Path, *extra: str, jobs: int = 2, chunk: int = 50) -> subprocess.Popen:
    cmd = [
        sys.executable,
        "-m",
        "libconf",
        "annotate",
        str(DEMO),
        "--out",
        str(out),
        "--jobs",
        str(jobs),
        "--chunk-size",
        str(chunk),
        "--quiet",
        *extra,
    ]
    return subprocess.Popen(
        cmd,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )


def _tables(out: Path) -> dict[str, pd.DataFrame]:
    return {t: pd.read_parquet(out / t).reset_index(drop=True) for t in TABLES}


def _same(a: dict, b: dict) -> bool:
    return all(a[t].equals(b[t]) for t in TABLES)


def _lost(tables: dict, n_records: int) -> int:
    keys = pd.concat(
        [tables["molecules"][["input_file", "input_row"]], tables["errors"][["input_file", "input_row"]]]
    )
    return n_records - keys.drop_duplicates().shape[0] + (keys.shape[0] - keys.drop_duplicates().shape[0])


def fuzz_engine(n: int, seed: int) -> dict:
    from rdkit import RDConfig

    import libconf

    rng = random.Random(seed)
    alphabet = "CNOSPFIBrcnos()[]=#@+-/\\%0123456789H.*:$~ "
    with open(os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")) as fh:
        pool = [line.split()[0] for line in fh]
    counts = {"tried": 0, "results": 0, "input_errors": 0, "crashes": 0}
    crashes = []
    for i in range(n):
        if i % 2:
            s = "".join(rng.choice(alphabet) for _ in range(rng.randrange(0, 60)))
        else:
            s = list(rng.choice(pool))
            for _ in range(rng.randrange(1, 5)):
                if not s:
                    break
                p = rng.randrange(len(s))
                op = rng.random()
                if op < 0.33:
                    s.insert(p, rng.choice(alphabet))
                elif op < 0.66:
                    del s[p]
                else:
                    s[p] = rng.choice(alphabet)
            s = "".join(s)
        counts["tried"] += 1
        try:
            libconf.analyze(s)
            counts["results"] += 1
        except libconf.InputError:
            counts["input_errors"] += 1
        except Exception as exc:  # noqa: BLE001 - this is what the trial counts
            counts["crashes"] += 1
            crashes.append((s, repr(exc)))
    counts["examples"] = crashes[:5]
    return counts


def kill_trials(k: int, seed: int, scratch: Path, reference: dict, n_records: int) -> dict:
    rng = random.Random(seed)
    out = {"trials": k, "killed_mid_run": 0, "identical": 0, "rows_lost": 0, "kill_times_s": []}
    for i in range(k):
        run = scratch / f"kill_{i}"
        shutil.rmtree(run, ignore_errors=True)
        p = _annotate(run)
        delay = rng.uniform(0.3, 2.0)
        time.sleep(delay)
        if p.poll() is None:
            os.killpg(p.pid, signal.SIGKILL)
            out["killed_mid_run"] += 1
        p.wait()
        out["kill_times_s"].append(round(delay, 2))
        r = _annotate(run, "--resume")
        r.wait()
        if r.returncode != 0:
            continue
        tables = _tables(run)
        out["identical"] += _same(tables, reference)
        out["rows_lost"] += _lost(tables, n_records)
        shutil.rmtree(run, ignore_errors=True)
    return out


def sigint_trial(scratch: Path, reference: dict) -> dict:
    run = scratch / "sigint"
    shutil.rmtree(run, ignore_errors=True)
    p = _annotate(run)
    time.sleep(1.5)
    os.killpg(p.pid, signal.SIGINT)
    _, err = p.communicate(timeout=60)
    r = _annotate(run, "--resume")
    r.wait()
    return {
        "exit_status": p.returncode,
        "says_resume": "--resume" in err.decode(errors="replace"),
        "identical_after_resume": r.returncode == 0 and _same(_tables(run), reference),
    }


def disk_full_trial(scratch: Path, reference: dict) -> dict:
    if os.geteuid() != 0 or shutil.which("mount") is None:
        return {"skipped": "needs root and mount"}
    mnt = scratch / "tiny"
    mnt.mkdir(exist_ok=True)
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(mnt)]).returncode != 0:
        return {"skipped": "tmpfs mount refused"}
    try:
        run = mnt / "run"
        p = _annotate(run)
        _, err = p.communicate(timeout=300)
        message = err.decode(errors="replace").strip().splitlines()[-1:] or [""]
        half = [f for f in run.rglob(".*.tmp")]
        subprocess.run(["mount", "-o", "remount,size=64m", str(mnt)], check=True)
        r = _annotate(run, "--resume")
        r.wait()
        return {
            "exit_status": p.returncode,
            "message": message[0][:200],
            "names_directory": str(run) in message[0],
            "temp_files_left": len(half),
            "identical_after_resume": r.returncode == 0 and _same(_tables(run), reference),
        }
    finally:
        subprocess.run(["umount", str(mnt)])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--kills", type=int, default=20)
    ap.add_argument("--fuzz", type=int, default=20000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--scratch", type=Path, default=None)
    args = ap.parse_args()
    scratch = args.scratch or Path(tempfile.mkdtemp(prefix="libconf-reliability-"))
    scratch.mkdir(parents=True, exist_ok=True)

    t0 = time.perf_counter()
    print("engine fuzz:", fuzz_engine(args.fuzz, args.seed), flush=True)
    ref_dir = scratch / "reference"
    shutil.rmtree(ref_dir, ignore_errors=True)
    p = _annotate(ref_dir)
    p.wait()
    reference = _tables(ref_dir)
    n_records = len(reference["molecules"]) + len(reference["errors"])
    print(f"reference run: {n_records} records, lost {_lost(reference, n_records)}", flush=True)
    print("kill -9 trials:", kill_trials(args.kills, args.seed, scratch, reference, n_records), flush=True)
    print("SIGINT:", sigint_trial(scratch, reference), flush=True)
    print("disk full:", disk_full_trial(scratch, reference), flush=True)
    print(f"wall {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
