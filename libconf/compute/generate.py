"""Generator stage 2: both chairs of the harvested model compounds, at GFN2-xTB.

Reads the harvest table (``datasets/computed/harvest.parquet``: groups-in-context with
their bare model compound), takes the most frequent ones whose group sits on a ring
carbon, builds both chairs of each model compound (`chairs.both_chairs`: ETKDG +
MMFF94, forced flip, rotor scan) and re-optimises them at GFN2-xTB
(`xtb.axial_minus_equatorial`), and appends one CSV row per compound:
ΔE = E(chair with the group axial) − E(chair with it equatorial), kJ/mol.

Resumable: a compound already in the output (same settings) is skipped, rows are
appended as compounds finish, so a killed run loses at most the compounds in flight.

    python -m libconf.compute.generate --top 536 --out datasets/computed/chair_energies_v3.csv \
        --skip-in datasets/computed/chair_energies_v2.csv
"""

from __future__ import annotations

import argparse
import csv
import os
import sys
import time
from pathlib import Path

import pandas as pd

from .csvrows import finished_keys, superseding_rows

GENERATOR = "libconf.compute.generate 4"
HARVEST = Path(__file__).resolve().parents[2] / "datasets" / "computed" / "harvest.parquet"
SEED = 20261201
# version 1 (datasets/computed/chair_energies.csv) used 24 / 4 / 3, MMFF94's order: too
# thin for groups with several rotors (a meta- and a para-fluoroanilide on piperidine C4
# came out 6 kJ/mol apart; the conformer that optimises lowest was often MMFF94's 5th).
# Version 2 (chair_energies_v2.csv) kept 8 per chair from 48 embeddings and re-optimised
# all 8. Version 3 (chair_energies_v3.csv) keeps the same 8 but re-optimises only the 4
# lowest by a GFN2-xTB single point: about half the cost of version 2.
N_CONFORMERS = 48
KEEP = 8
N_BEST = 4
PRERANK = True  # order each chair's conformers by GFN2-xTB single point before n_best
CROSS_SEED = True  # each chair also from the other chair's best GFN2-xTB optimum (generator 4)
GTOL = 1e-4
COLUMNS = [
    "model_smiles",
    "group",
    "ring_class",
    "position",
    "harvest_count",
    "a_value_source_now",
    "mmff94_dE_kjmol",
    "gfn2_dE_kjmol",
    "n_axial_usable",
    "n_equatorial_usable",
    "status",
    "seconds",
    "settings",
]


def settings_string(level: str) -> str:
    return (
        f"generator={GENERATOR.split()[-1]};level={level};seed={SEED};n_conformers={N_CONFORMERS};"
        f"keep={KEEP};n_best={N_BEST};gtol={GTOL:g}"
        + (";prerank=gfn2-single-point" if PRERANK else "")
        + (";cross_seed=1" if CROSS_SEED else "")
    )


def _site(smiles: str):
    """(mol, ring atoms in locant order, first atom of the one substituent) of a model compound."""
    from rdkit import Chem

    from ..chem.molview import MolView
    from ..chem.rings import describe_ring, saturated_six_rings
    from ..chem.substituents import ring_substituents

    mol = Chem.MolFromSmiles(smiles)
    view = MolView(mol)
    rings = saturated_six_rings(mol, view)
    if len(rings) < 1:
        raise ValueError("no saturated six-membered ring")
    ring = describe_ring(view, rings[0], mol.GetRingInfo().AtomRings())
    subs = [s for s in ring_substituents(view, ring) if s.face != "planar"]
    if len(subs) != 1:
        raise ValueError(f"expected one substituent on the ring, found {len(subs)}")
    return mol, ring.atoms, subs[0].first_atom


def compute_one(row: dict, level: str) -> dict:
    from .chairs import both_chairs

    t0 = time.perf_counter()
    out = {k: row.get(k) for k in ("model_smiles", "group", "ring_class", "position")}
    out.update(
        harvest_count=row.get("count"),
        a_value_source_now=row.get("a_value_source"),
        mmff94_dE_kjmol="",
        gfn2_dE_kjmol="",
        n_axial_usable="",
        n_equatorial_usable="",
        settings=settings_string(level),
    )
    try:
        mol, ring, atom = _site(row["model_smiles"])
        pair = both_chairs(mol, ring, n_conformers=N_CONFORMERS, seed=SEED, keep=KEEP)
        out["mmff94_dE_kjmol"] = f"{pair.delta_mmff_kj(atom):.3f}"
        if level == "xtb":
            from .xtb import axial_minus_equatorial

            res = axial_minus_equatorial(
                pair, atom, n_best=N_BEST, gtol=GTOL, prerank=PRERANK, cross_seed=CROSS_SEED
            )
            ua, ue = res.n_usable
            out["n_axial_usable"], out["n_equatorial_usable"] = ua, ue
            if res.delta_kj is None:
                out["status"] = "no usable GFN2-xTB optimum for one chair"
            else:
                out["gfn2_dE_kjmol"] = f"{res.delta_kj:.3f}"
                out["status"] = "ok"
        else:
            out["status"] = "ok"
    except Exception as exc:  # one failed compound is recorded, the run goes on
        out["status"] = f"failed: {type(exc).__name__}: {exc}"[:300]
    out["seconds"] = f"{time.perf_counter() - t0:.1f}"
    return out


def pick(harvest: pd.DataFrame, top: int) -> pd.DataFrame:
    """The most frequent groups-in-context on ring carbons that have a model compound."""
    h = harvest[(~harvest["on_ring_nitrogen"]) & harvest["model_smiles"].notna()]
    h = h.drop_duplicates("model_smiles")
    return h.sort_values("count", ascending=False, kind="stable").head(top)


def run(
    out_path: Path,
    top: int = 400,
    level: str = "xtb",
    jobs: int = 2,
    harvest_path: Path = HARVEST,
    skip_in: list[Path] | None = None,
) -> int:
    from joblib import Parallel, delayed

    todo = pick(pd.read_parquet(harvest_path), top)
    settings = settings_string(level)
    done = finished_keys(out_path, settings, lambda r: r["model_smiles"])
    elsewhere = {r["model_smiles"] for r in superseding_rows(skip_in or [])} - done
    rows = [r for r in todo.to_dict("records") if r["model_smiles"] not in done | elsewhere]
    print(
        f"{len(todo)} model compounds picked, {len(done)} already done, {len(elsewhere)} computed in "
        f"--skip-in files, {len(rows)} to compute",
        flush=True,
    )
    new = not out_path.exists()
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    with open(out_path, "a", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=COLUMNS)
        if new:
            w.writeheader()
        t0 = time.perf_counter()
        results = Parallel(n_jobs=jobs, return_as="generator")(delayed(compute_one)(r, level) for r in rows)
        for n, res in enumerate(results, 1):
            w.writerow(res)
            fh.flush()
            rate = n / (time.perf_counter() - t0)
            print(
                f"[{n}/{len(rows)}] {res['status'][:40]:<40} {res['model_smiles']}  "
                f"(ETA {(len(rows) - n) / rate / 60:.0f} min)",
                flush=True,
            )
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, required=True)
    ap.add_argument("--top", type=int, default=400)
    ap.add_argument("--level", choices=("mmff", "xtb"), default="xtb")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--harvest", type=Path, default=HARVEST)
    ap.add_argument(
        "--skip-in",
        type=Path,
        action="append",
        default=[],
        metavar="CSV",
        help="skip compounds this chair-energy file already holds (e.g. one made by an earlier, "
        "at least as thorough generator version); repeatable",
    )
    args = ap.parse_args(argv)
    return run(args.out, args.top, args.level, args.jobs, args.harvest, args.skip_in)


if __name__ == "__main__":
    sys.exit(main())
