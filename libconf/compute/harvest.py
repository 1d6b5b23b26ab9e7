"""Harvest substituents-in-context from open compound collections.

The first stage of the training-data generator: run the engine over an open library
(RDKit's bundled NCI subset, the MOSES/ZINC-derived set of the molsets wheel, any
SMILES or CSV file), collect every ring substituent with its context (ring class,
locant, the kind of ring atom it sits on) and whether its A-value came from the
tables or from the analogy fallback, and count them. The most frequent untabulated
groups-in-context are the model compounds worth computing.

    python -m libconf.compute.harvest INPUT [INPUT ...] --limit 200000 \\
        --out datasets/computed/harvest.parquet

Each model compound is the bare ring of that class carrying only that group at that
locant (column ``model_smiles``), so that both chairs of one small molecule can be
computed for it.
"""

from __future__ import annotations

import argparse
import csv
import gzip
import os
import sys
from collections import Counter

import pandas as pd
from rdkit import Chem, RDConfig

from ..engine import analyze
from ..errors import InputError

# Bare rings of each class, atoms in locant order 1..6 (the engine's numbering).
RING_TEMPLATES = {
    "cyclohexane": "C",
    "piperidine": "N",
    "oxane": "O",
    "thiane": "S",
    "silinane": "[SiH2]",
    "piperazine": "N.N@4",
    "morpholine": "O.N@4",
    "thiomorpholine": "S.N@4",
    "1,3-dioxane": "O.O@3",
    "1,4-dioxane": "O.O@4",
    "1,3-dithiane": "S.S@3",
    "hexahydropyrimidine": "N.N@3",
    "1,3-oxazinane": "O.N@3",
}


def ring_with_group(ring_class: str, locant: int, group: str) -> str | None:
    """SMILES of the bare ring of ``ring_class`` with ``group`` (one ``*``) at ``locant``."""
    spec = RING_TEMPLATES.get(ring_class)
    if spec is None or group.count("*") != 1:
        return None
    atoms = ["C"] * 6
    first, *rest = spec.split(".")
    atoms[0] = first
    for r in rest:
        el, at = r.split("@")
        atoms[int(at) - 1] = el
    # explicit branches put the attachment on the right ring atom
    parts = []
    for i, a in enumerate(atoms):
        tok = a + ("1" if i == 0 else "")
        if i == locant - 1:
            tok += "([*:1])"
        parts.append(tok)
    ring = "".join(parts) + "1"
    ring_mol = Chem.MolFromSmiles(ring)
    grp_mol = Chem.MolFromSmiles(group.replace("*", "[*:1]", 1))
    if ring_mol is None or grp_mol is None:
        return None
    try:
        joined = Chem.molzip(ring_mol, grp_mol)
        Chem.SanitizeMol(joined)
    except Exception:  # a group RDKit cannot join back (odd valence): skip it
        return None
    return Chem.MolToSmiles(joined)


def iter_smiles(path: str, limit: int | None):
    opener = gzip.open if path.endswith(".gz") else open
    n = 0
    with opener(path, "rt", encoding="utf-8", errors="replace") as fh:
        if ".csv" in path:
            reader = csv.reader(fh)
            header = next(reader, [])
            col = next((i for i, h in enumerate(header) if h.lower() in ("smiles", "canonical_smiles")), 0)
            rows = (r[col] for r in reader if r)
        else:
            rows = (line.split()[0] for line in fh if line.strip() and not line.startswith("#"))
        for s in rows:
            if limit is not None and n >= limit:
                return
            n += 1
            yield s


def harvest(paths: list[str], limit: int | None = None, medium: str = "water") -> tuple[pd.DataFrame, dict]:
    counts: Counter = Counter()
    source: dict = {}
    totals = Counter()
    for path in paths:
        for smi in iter_smiles(path, limit):
            totals["molecules"] += 1
            try:
                res = analyze(smi, medium=medium)
            except InputError:
                totals["unreadable"] += 1
                continue
            for ring in res.rings:
                for s in ring.substituents:
                    if s.a_value_source is None or s.group.count("*") != 1:
                        totals["not_valued"] += 1  # planar, constrained or partner-ring bonds
                        continue
                    key = (s.group, ring.ring_class, s.position, s.face == "invertible")
                    counts[key] += 1
                    source[key] = s.a_value_source
                    totals[s.a_value_source] += 1
    rows = [
        {
            "group": g,
            "ring_class": c,
            "position": p,
            "on_ring_nitrogen": n_inv,
            "count": n,
            "a_value_source": source[(g, c, p, n_inv)],
        }
        for (g, c, p, n_inv), n in counts.most_common()
    ]
    df = pd.DataFrame(rows)
    if len(df):
        df["model_smiles"] = [
            ring_with_group(c, p, g) for g, c, p in zip(df["group"], df["ring_class"], df["position"])
        ]
    valued = totals["table"] + totals["model"]
    summary = {
        "inputs": [os.path.basename(p) for p in paths],
        "molecules": totals["molecules"],
        "unreadable": totals["unreadable"],
        "substituents_with_a_value": valued,
        "share_table": totals["table"] / valued if valued else None,
        "share_model": totals["model"] / valued if valued else None,
        "without_a_value": totals["not_valued"],
        "distinct_groups_in_context": len(df),
    }
    return df, summary


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("inputs", nargs="*", help="SMILES or CSV files (default: RDKit's NCI subset)")
    ap.add_argument("--limit", type=int, default=None, help="molecules per input")
    ap.add_argument("--out", default=None, help="Parquet file for the harvested table")
    args = ap.parse_args(argv)
    paths = args.inputs or [os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")]
    df, summary = harvest(paths, args.limit)
    if args.out:
        df.to_parquet(args.out, index=False)
    for k, v in summary.items():
        print(f"{k}: {v:.4f}" if isinstance(v, float) else f"{k}: {v}")
    if len(df):
        print(df.head(15).to_string(index=False))
    return 0


if __name__ == "__main__":
    sys.exit(main())
