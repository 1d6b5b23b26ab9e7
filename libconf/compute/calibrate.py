"""Calibration of computed chair energies against experimental A-values.

Pairs every computed ΔE(axial − equatorial) with an experimental value the project
tabulates (`datasets/parameters/a_values.csv`, each with its source and flag):

* the monosubstituted cyclohexanes of ``level_of_theory.csv`` (experimental column
  carried in the file), and
* the model compounds of ``chair_energies.csv`` whose group-in-context has an explicit
  row in the increment table (e.g. 2-, 3-, 4-methylpiperidine, 4-methyloxane).

and fits experiment = slope × computed + intercept (least squares), reporting the fit,
the residuals per group, and the same for the raw (uncalibrated) values.

    python -m libconf.compute.calibrate --out datasets/computed/calibration.csv
"""

from __future__ import annotations

import argparse
import csv
import sys
from pathlib import Path

import numpy as np

from ..chem.molview import group_key_from_smiles
from ..parameters import load
from .csvrows import finite_float, superseding_rows

HERE = Path(__file__).resolve().parents[2] / "datasets" / "computed"
# Chair-energy files, newest first: a compound is taken from the first file that has it.
# Generators 2 and 3 sample the same way (3 re-optimises the GFN2-xTB-preranked half of
# what 2 does, and skips what 2 holds); both supersede generator 1's thinner sampling.
# Generator 4 adds to generator 3 one start per chair made from the other chair's best
# GFN2-xTB optimum (`xtb.cross_seeded`), so it supersedes all of them.
CHAIR_FILES = (
    HERE / "chair_energies_v4.csv",
    HERE / "chair_energies_v3.csv",
    HERE / "chair_energies_v2.csv",
    HERE / "chair_energies.csv",
)
#: files at least as thorough as the current generator: `libconf train --compute` skips their compounds
AS_THOROUGH: tuple[Path, ...] = ()


def pairs(level_csv: Path, chairs_csv, column: str = "gfn2_dE_kjmol") -> list[dict]:
    """``chairs_csv``: None, one chair-energy CSV or several, newest first (a compound is
    taken from the first file that has it)."""
    out = []
    with open(level_csv, newline="", encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            exp, comp = finite_float(r.get("exp_kjmol")), finite_float(r.get(column))
            if exp is not None and comp is not None:
                out.append(
                    {
                        "set": "cyclohexane",
                        "group": r["group"],
                        "context": "cyclohexane",
                        "experiment": exp,
                        "computed": comp,
                        "source": r.get("exp_source", ""),
                    }
                )
    if chairs_csv:
        P = load()
        for r in superseding_rows(chairs_csv):
            comp = finite_float(r.get(column))
            if comp is None or r["ring_class"] == "cyclohexane":
                continue
            row = P.a_value(
                group_key_from_smiles(r["group"]), r["ring_class"], int(r["position"]), "nonpolar"
            )
            if row is None:
                continue
            out.append(
                {
                    "set": "heterocycle",
                    "group": r["group"],
                    "context": f"{r['ring_class']} {r['position']}",
                    "experiment": row.a_value_kjmol,
                    "computed": comp,
                    "source": f"{row.source} ({row.status})",
                }
            )
    return out


def fit(rows: list[dict]) -> dict:
    x = np.array([r["computed"] for r in rows])
    y = np.array([r["experiment"] for r in rows])
    slope, intercept = np.polyfit(x, y, 1)
    pred = slope * x + intercept
    ss_res = float(((y - pred) ** 2).sum())
    ss_tot = float(((y - y.mean()) ** 2).sum())
    return {
        "n": len(rows),
        "slope": float(slope),
        "intercept_kjmol": float(intercept),
        "r2": 1 - ss_res / ss_tot if ss_tot else float("nan"),
        "mae_raw_kjmol": float(np.abs(y - x).mean()),
        "mae_calibrated_kjmol": float(np.abs(y - pred).mean()),
        "max_abs_residual_kjmol": float(np.abs(y - pred).max()),
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--level-of-theory", type=Path, default=HERE / "level_of_theory.csv")
    ap.add_argument(
        "--chairs",
        type=Path,
        nargs="+",
        default=list(CHAIR_FILES),
        help="chair-energy CSVs, newest first",
    )
    ap.add_argument("--column", default="gfn2_dE_kjmol")
    ap.add_argument("--out", type=Path, default=None, help="CSV of the pairs with their residuals")
    args = ap.parse_args(argv)
    rows = pairs(args.level_of_theory, args.chairs, args.column)
    if len(rows) < 3:
        print("fewer than three pairs: nothing to fit", file=sys.stderr)
        return 1
    f = fit(rows)
    for r in rows:
        r["calibrated"] = f["slope"] * r["computed"] + f["intercept_kjmol"]
        r["residual"] = r["experiment"] - r["calibrated"]
    for k, v in f.items():
        print(f"{k}: {v:.3f}" if isinstance(v, float) else f"{k}: {v}")
    worst = sorted(rows, key=lambda r: -abs(r["residual"]))[:8]
    print("largest residuals (experiment - calibrated, kJ/mol):")
    for r in worst:
        print(f"  {r['residual']:+6.2f}  {r['group']:<22} {r['context']}")
    if args.out:
        with open(args.out, "w", newline="", encoding="utf-8") as fh:
            w = csv.DictWriter(fh, fieldnames=list(rows[0]))
            w.writeheader()
            w.writerows(rows)
    return 0


if __name__ == "__main__":
    sys.exit(main())
