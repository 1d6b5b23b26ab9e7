"""Which level of theory reproduces experimental A-values: MMFF94 or GFN2-xTB?

For every monosubstituted cyclohexane in ``datasets/computed/level_of_theory_groups.csv``
(experimental A-values, each with its source and flag), build both chairs
(ETKDG + MMFF94, forced flip when sampling misses one), take the MMFF94 energy
difference E(axial) - E(equatorial), re-optimise the best few conformers of each
chair with GFN2-xTB in the gas phase and with ALPB water, and write one CSV row
per group. The run is resumable: rows are appended as groups finish, and groups
already in the output (with the same settings) are skipped.

    python -m libconf.compute.level_of_theory --out datasets/computed/level_of_theory.csv
    python -m libconf.compute.level_of_theory --out datasets/computed/level_of_theory.csv --summary
"""

from __future__ import annotations

import argparse
import csv
import os
import sys
import time
from pathlib import Path

GENERATOR = "libconf.compute.level_of_theory 5"  # bump when a change alters the numbers
GROUPS = Path(__file__).resolve().parents[2] / "datasets" / "computed" / "level_of_theory_groups.csv"
SEED = 20261201
N_CONFORMERS = 50
KEEP = 6
N_BEST = 6  # every kept conformer: MMFF94's order of rotamers is not GFN2-xTB's (seen for OH)
ROTOR_STEP = 30.0
GTOL = 1e-4  # Eh/bohr; 1e-3 leaves ~0.6 kJ/mol of noise in the methyl value (measured here)
SOLVENT = "water"
MIN_ABS_A = 1.0  # kJ/mol: smaller A-values are within experimental scatter of zero

COLUMNS = [
    "group",
    "name",
    "exp_kjmol",
    "exp_range_kjmol",
    "exp_water_kjmol",
    "exp_source",
    "exp_flag",
    "mmff94_dE_kjmol",
    "gfn2_sp_on_mmff94_dE_kjmol",
    "gfn2_dE_kjmol",
    "gfn2_alpb_water_dE_kjmol",
    "n_axial_conformers",
    "n_equatorial_conformers",
    "n_forced",
    "gfn2_usable",
    "gfn2_water_usable",
    "status",
    "seconds",
    "settings",
]


def settings_string(seed: int = SEED) -> str:
    return (
        f"generator={GENERATOR.split()[-1]};seed={seed};n_conformers={N_CONFORMERS};keep={KEEP};"
        f"rotor_step={ROTOR_STEP};n_best={N_BEST};"
        f"gtol={GTOL};solvent=alpb-{SOLVENT}"
    )


def cyclohexyl(group: str):
    """Cyclohexane carrying ``group`` (SMILES with one *) on ring atom 0; ring atoms are 0..5."""
    from rdkit import Chem

    frag = Chem.MolFromSmiles(group)
    if frag is None:
        raise ValueError(f"bad group SMILES {group!r}")
    dummies = [a.GetIdx() for a in frag.GetAtoms() if a.GetAtomicNum() == 0]
    if len(dummies) != 1:
        raise ValueError(f"group {group!r} needs exactly one *")
    d = dummies[0]
    first = frag.GetAtomWithIdx(d).GetNeighbors()[0].GetIdx()
    core = Chem.MolFromSmiles("C1CCCCC1")
    rw = Chem.RWMol(Chem.CombineMols(core, frag))
    rw.AddBond(0, 6 + first, Chem.BondType.SINGLE)
    rw.RemoveAtom(6 + d)
    mol = rw.GetMol()
    Chem.SanitizeMol(mol)
    sub = 6 + first - (1 if first > d else 0)
    return mol, (0, 1, 2, 3, 4, 5), sub


def _fmt(x: float | None) -> str:
    return "" if x is None else f"{x:.2f}"


def compute_group(row: dict, seed: int = SEED) -> dict:
    """One output row for one group (runs in a worker process)."""
    os.environ["OMP_NUM_THREADS"] = "1"
    from .chairs import both_chairs
    from .xtb import axial_minus_equatorial, single_point_delta

    t0 = time.time()
    out = {k: row.get(k, "") for k in ("group", "name", "exp_kjmol", "exp_range_kjmol", "exp_water_kjmol")}
    out.update(exp_source=row["source"], exp_flag=row["flag"], settings=settings_string(seed))
    notes = []
    try:
        mol, ring, sub = cyclohexyl(row["group"])
        pair = both_chairs(mol, ring, n_conformers=N_CONFORMERS, seed=seed, keep=KEEP, rotor_step=ROTOR_STEP)
        ax = pair.axial_chair(sub)
        out.update(
            n_axial_conformers=len(pair.chairs[ax]),
            n_equatorial_conformers=len(pair.chairs[1 - ax]),
            n_forced=pair.n_forced,
        )
        if not pair.chairs[0] or not pair.chairs[1]:
            raise RuntimeError("one chair could not be built even by a forced flip")
        for c in (0, 1):
            for conf in pair.chairs[c]:
                want = "axial" if c == ax else "equatorial"
                if conf.placements[sub] != want:
                    raise RuntimeError(
                        f"face bookkeeping broken: substituent {conf.placements[sub]} in chair {c}"
                    )
        out["mmff94_dE_kjmol"] = _fmt(pair.delta_mmff_kj(sub))
        out["gfn2_sp_on_mmff94_dE_kjmol"] = _fmt(single_point_delta(pair, sub, n_best=N_BEST))
        for key, solvent in (("gfn2", None), ("gfn2_water", SOLVENT)):
            res = axial_minus_equatorial(pair, sub, n_best=N_BEST, solvent=solvent, gtol=GTOL)
            col = "gfn2_dE_kjmol" if solvent is None else "gfn2_alpb_water_dE_kjmol"
            out[col] = _fmt(res.delta_kj)
            na, ne = res.n_usable
            out[f"{key}_usable"] = f"{na}/{len(res.axial)} ax, {ne}/{len(res.equatorial)} eq"
            left = [o for o in res.axial + res.equatorial if o.chair_after != o.start.chair]
            if left:
                notes.append(f"{key}: {len(left)} conformer(s) left the chair on optimisation")
            if res.delta_kj is None:
                notes.append(f"{key}: no usable optimum for one chair")
        out["status"] = (
            "; ".join(["ok"] + notes) if not any("no usable" in n for n in notes) else "; ".join(notes)
        )
    except Exception as exc:  # recorded, so that a restart does not retry it forever
        out["status"] = f"failed: {type(exc).__name__}: {exc}"
    out["seconds"] = f"{time.time() - t0:.1f}"
    return out


def _read(path: Path) -> list[dict]:
    if not path.exists() or path.stat().st_size == 0:
        return []
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def run(out_path: Path, jobs: int = 2, only: list[str] | None = None, seed: int = SEED) -> None:
    from joblib import Parallel, delayed

    groups = _read(GROUPS)
    if only:
        groups = [g for g in groups if g["group"] in only or g["name"] in only]
    done_rows = _read(out_path)
    other = {r["settings"] for r in done_rows} - {settings_string(seed)}
    if other:
        sys.exit(f"{out_path} was made with other settings ({sorted(other)}); write to another file")
    done = {r["group"] for r in done_rows}
    todo = [g for g in groups if g["group"] not in done]
    print(
        f"{len(groups)} groups, {len(groups) - len(todo)} already in {out_path}, {len(todo)} to compute",
        flush=True,
    )
    if not todo:
        return
    out_path.parent.mkdir(parents=True, exist_ok=True)
    new = not out_path.exists() or out_path.stat().st_size == 0
    os.environ["OMP_NUM_THREADS"] = "1"
    with open(out_path, "a", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=COLUMNS)
        if new:
            w.writeheader()
            fh.flush()
        results = Parallel(n_jobs=jobs, return_as="generator_unordered")(
            delayed(compute_group)(g, seed) for g in todo
        )
        for i, row in enumerate(results, 1):
            w.writerow(row)
            fh.flush()
            os.fsync(fh.fileno())
            print(
                f"[{i}/{len(todo)}] {row['name']:<22} exp {row.get('exp_kjmol', ''):>5}  MMFF94 {row.get('mmff94_dE_kjmol', ''):>6}"
                f"  GFN2 {row.get('gfn2_dE_kjmol', ''):>6}  GFN2/ALPB(water) {row.get('gfn2_alpb_water_dE_kjmol', ''):>6}"
                f"  {row.get('seconds', '')} s  {row['status']}",
                flush=True,
            )


LEVELS = (
    ("mmff94_dE_kjmol", False),
    ("gfn2_sp_on_mmff94_dE_kjmol", False),
    ("gfn2_dE_kjmol", False),
    ("gfn2_alpb_water_dE_kjmol", True),
)


def summary(path: Path, min_abs: float = MIN_ABS_A, confirmed_only: bool = False) -> dict:
    """MAE and sign agreement against experiment for each level, over groups with |A| >= min_abs.

    Every level is scored on the same groups (those with an MMFF94 and a gas-phase GFN2-xTB
    value). ``confirmed_only`` leaves out rows whose experimental value is flagged from memory.
    """
    rows = [r for r in _read(path) if r["mmff94_dE_kjmol"] and r["gfn2_dE_kjmol"]]
    if confirmed_only:
        rows = [r for r in rows if r["exp_flag"].startswith("confirmed")]
    out = {}
    for col, water in LEVELS:
        pairs = []
        for r in rows:
            if not r[col]:
                continue
            # the water column is compared with the protic-solvent value where the table has one
            exp_col = "exp_water_kjmol" if water and r["exp_water_kjmol"] else "exp_kjmol"
            exp = float(r[exp_col])
            if abs(exp) >= min_abs:
                pairs.append((r["name"], exp, float(r[col])))
        n = len(pairs)
        wrong = [name for name, e, c in pairs if (e > 0) != (c > 0)]
        out[col] = {
            "n": n,
            "mae_kjmol": sum(abs(e - c) for _, e, c in pairs) / n if n else float("nan"),
            "mean_signed_kjmol": sum(c - e for _, e, c in pairs) / n if n else float("nan"),
            "sign_agree": n - len(wrong),
            "wrong_sign": wrong,
        }
    return out


def markdown_table(path: Path) -> str:
    """The per-group comparison as a Markdown table (kJ/mol)."""
    lines = [
        "| group | name | exp | MMFF94 | GFN2-xTB//MMFF94 | GFN2-xTB | GFN2-xTB/ALPB(water) | exp flag |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for r in _read(path):
        exp = r["exp_kjmol"] + (f" (water {r['exp_water_kjmol']})" if r["exp_water_kjmol"] else "")
        lines.append(
            f"| `{r['group']}` | {r['name']} | {exp} | {r['mmff94_dE_kjmol']} "
            f"| {r['gfn2_sp_on_mmff94_dE_kjmol']} | {r['gfn2_dE_kjmol']} "
            f"| {r['gfn2_alpb_water_dE_kjmol']} | {r['exp_flag']} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, default=Path("datasets/computed/level_of_theory.csv"))
    ap.add_argument("--jobs", type=int, default=2, help="worker processes (default 2)")
    ap.add_argument("--only", nargs="*", help="group SMILES or names to compute (default: all)")
    ap.add_argument("--seed", type=int, default=SEED, help=f"ETKDG seed (default {SEED})")
    ap.add_argument("--summary", action="store_true", help="print the comparison with experiment and stop")
    ap.add_argument("--markdown", action="store_true", help="also print the per-group table as Markdown")
    a = ap.parse_args(argv)
    if not a.summary:
        run(a.out, a.jobs, a.only, a.seed)
    for title, confirmed in (("all groups", False), ("experimental value confirmed", True)):
        print(f"|A| >= {MIN_ABS_A} kJ/mol, {title}:")
        for col, s in summary(a.out, confirmed_only=confirmed).items():
            print(
                f"  {col:<26} n={s['n']:>2}  MAE {s['mae_kjmol']:.2f} kJ/mol  "
                f"mean signed {s['mean_signed_kjmol']:+.2f}  sign {s['sign_agree']}/{s['n']}  "
                f"wrong: {', '.join(s['wrong_sign']) or '-'}"
            )
    if a.markdown:
        print(markdown_table(a.out))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
