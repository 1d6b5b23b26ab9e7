"""Does adding ring-conformation descriptors help a QSAR model? Measured, not assumed.

Data: RDKit's bundled NCI subset ``rdkit/Data/NCI/first_5k.tpsa.csv`` (5,000 NCI
structures with their topological polar surface area, TPSA, computed by its authors
with Daylight tools and Ertl's tpsa.c; the file ships inside the rdkit package, so no
download). Target: TPSA. It is a computed property, not an assay; it stands in for a
real endpoint here because it is the property data set a registry package carries.

Two feature sets, one model (histogram gradient boosting, which accepts NaN):
  base   eight RDKit 2D descriptors (none of them TPSA or a polar-surface term)
  +ring  base plus the eleven columns of ``libconf.sklearn.RingConformationFeatures``
Scored by repeated K-fold cross-validation (same folds for both), reporting R^2, MAE
and the paired per-fold difference.

Both feature sets are per-molecule and learn nothing from the data, so they are
computed once for all molecules before the folds are cut (no information crosses
from test to training folds this way); the model is refitted in every fold.

    python examples/qsar_with_ring_descriptors.py [--limit N] [--repeats R]
"""

from __future__ import annotations

import argparse
import csv
import os
import time

import numpy as np
import rdkit
from rdkit import Chem, RDLogger
from rdkit.Chem import Crippen, Descriptors, Lipinski, rdMolDescriptors
from sklearn.ensemble import HistGradientBoostingRegressor
from sklearn.model_selection import RepeatedKFold, cross_validate

from libconf.sklearn import RingConformationFeatures

DATA = os.path.join(os.path.dirname(rdkit.__file__), "Data", "NCI", "first_5k.tpsa.csv")

BASE = {
    "heavy_atoms": lambda m: m.GetNumHeavyAtoms(),
    "mol_wt": Descriptors.MolWt,
    "logp": Crippen.MolLogP,
    "h_donors": Lipinski.NumHDonors,
    "h_acceptors": Lipinski.NumHAcceptors,
    "rotatable_bonds": rdMolDescriptors.CalcNumRotatableBonds,
    "ring_count": rdMolDescriptors.CalcNumRings,
    "fraction_csp3": rdMolDescriptors.CalcFractionCSP3,
}


def load(limit: int | None) -> tuple[list[str], np.ndarray]:
    smiles, tpsa = [], []
    with open(DATA, newline="") as fh:
        for row in csv.reader(line for line in fh if not line.startswith("#")):
            if len(row) == 2:
                smiles.append(row[0])
                tpsa.append(float(row[1]))
    if limit:
        smiles, tpsa = smiles[:limit], tpsa[:limit]
    return smiles, np.array(tpsa)


def base_features(smiles: list[str]) -> np.ndarray:
    RDLogger.DisableLog("rdApp.*")
    out = np.full((len(smiles), len(BASE)), np.nan)
    for i, s in enumerate(smiles):
        mol = Chem.MolFromSmiles(s)
        if mol is not None:
            out[i] = [f(mol) for f in BASE.values()]
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--limit", type=int, default=None, help="first N molecules only")
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--jobs", type=int, default=1, help="processes for the descriptors")
    args = ap.parse_args()

    smiles, y = load(args.limit)
    t0 = time.perf_counter()
    base = base_features(smiles)
    rings_t = RingConformationFeatures(n_jobs=args.jobs)
    rings = rings_t.fit_transform(smiles)
    t_feat = time.perf_counter() - t0
    keep = ~np.isnan(base).any(axis=1)  # RDKit could not parse these: out of both sets
    base, rings, y = base[keep], rings[keep], y[keep]
    with_ring = np.hstack([base, rings])
    n_nan = int(np.isnan(rings).all(axis=1).sum())
    print(f"data: {DATA.split(os.sep + 'rdkit' + os.sep)[-1]}  target: TPSA (A^2)")
    print(
        f"molecules: {len(y)} parsed ({int((~keep).sum())} unparsable dropped); "
        f"{n_nan} rows libconf could not "
        f"analyse (left NaN); features in {t_feat:.1f} s"
    )

    has_ring = rings[:, list(rings_t.get_feature_names_out()).index("has_sat6_ring")] == 1
    evaluate("all molecules", base, with_ring, y, args)
    # Where the descriptors can carry information at all: molecules with such a ring.
    evaluate(
        "molecules with a saturated six-membered ring", base[has_ring], with_ring[has_ring], y[has_ring], args
    )


def evaluate(label: str, base: np.ndarray, with_ring: np.ndarray, y: np.ndarray, args) -> None:
    print(f"\n{label} (n = {len(y)}), {args.repeats} x {args.folds}-fold CV:")
    cv = RepeatedKFold(n_splits=args.folds, n_repeats=args.repeats, random_state=0)
    scores = {}
    for name, X in (("base", base), ("+ring", with_ring)):
        model = HistGradientBoostingRegressor(random_state=0)
        res = cross_validate(model, X, y, cv=cv, scoring=("r2", "neg_mean_absolute_error"))
        scores[name] = (res["test_r2"], -res["test_neg_mean_absolute_error"])
        r2, mae = scores[name]
        print(
            f"  {name:6s} {X.shape[1]:2d} features: R2 {r2.mean():.4f} +/- {r2.std(ddof=1):.4f}   "
            f"MAE {mae.mean():.3f} +/- {mae.std(ddof=1):.3f}"
        )
    d_r2 = scores["+ring"][0] - scores["base"][0]
    d_mae = scores["+ring"][1] - scores["base"][1]
    k = len(d_r2)
    print(
        f"  paired difference (+ring minus base) over {k} folds: "
        f"R2 {d_r2.mean():+.4f} +/- {d_r2.std(ddof=1) / np.sqrt(k):.4f} (s.e.), "
        f"MAE {d_mae.mean():+.3f} +/- {d_mae.std(ddof=1) / np.sqrt(k):.3f} (s.e.); "
        f"+ring better in {int((d_mae < 0).sum())} of {k} folds by MAE"
    )


if __name__ == "__main__":
    main()
