"""Build the demo library of the (invented) Quillan Ridge Chemistry Lab.

    python datasets/demo/make_demo.py            # writes quillan_ridge_library.smi.gz

Structures are assembled from ``scaffolds.csv`` (saturated six-membered ring systems
with numbered attachment points) and ``substituents.csv``, with a fixed seed, so the
file is the same on every run with the same RDKit. Most records have every ring
stereocentre specified; some are left open, some half open. A handful of deliberately
broken records (unparseable SMILES, valence errors, one beyond the heavy-atom limit)
show what the errors table holds.
The output is gzip with a zero timestamp, so identical content gives identical bytes.
"""

from __future__ import annotations

import argparse
import csv
import gzip
import io
import os
import random

from rdkit import Chem, rdBase
from rdkit.Chem.EnumerateStereoisomers import (
    EnumerateStereoisomers,
    StereoEnumerationOptions,
)

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_NAME = "quillan_ridge_library.smi.gz"
SEED = 20261201
N_MOLECULES = 3000
SHARE_STEREO_OPEN = 0.12  # no stereocentre specified
SHARE_STEREO_PARTIAL = 0.08  # one specified centre removed

#: Records that must fail, each for a reason a chemist recognises; placed at fixed
#: positions in the file.
BAD_RECORDS = [
    ("C1CCC(CC1", "ring bond 1 never closed"),
    ("CC1CCN(C)(C)CC1", "four-bonded neutral nitrogen"),
    ("OC1CCC(C(C)(C)(C)(C)C)CC1", "five-bonded carbon"),
    ("c1cccc1C1CCCCC1", "aromatic ring that cannot be kekulized"),
    ("C1CCXCC1", "unknown element symbol"),
    ("OC1CCC(CC1)O)C", "unbalanced parenthesis"),
    ("C1CCC(CC1)" + "C" * 600, "a 606-atom chain, beyond the heavy-atom limit"),
]


def _read_csv(name: str) -> list[dict]:
    with open(os.path.join(HERE, name), newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _n_points(smiles: str) -> int:
    return sum(f"[*:{k}]" in smiles for k in range(1, 10))


def _attach(scaffold: str, groups: list[str | None]) -> Chem.Mol | None:
    """Join the scaffold with one group (or H) per attachment point."""
    parts = [scaffold]
    for k, group in enumerate(groups, start=1):
        parts.append(f"[*:{k}][H]" if group is None else group.replace("*", f"[*:{k}]", 1))
    joined = Chem.MolFromSmiles(".".join(parts), sanitize=False)
    if joined is None:
        return None
    try:
        mol = Chem.molzip(joined)
        mol = Chem.RemoveHs(mol)
        Chem.SanitizeMol(mol)
    except Exception:
        return None
    return mol


def _assign_stereo(mol: Chem.Mol, rng: random.Random) -> Chem.Mol:
    opts = StereoEnumerationOptions(onlyUnassigned=True, unique=True, tryEmbedding=False)
    isomers = list(EnumerateStereoisomers(mol, options=opts))
    if not isomers:
        return mol
    return Chem.Mol(isomers[rng.randrange(len(isomers))])


def _clear_one_centre(mol: Chem.Mol, rng: random.Random) -> Chem.Mol:
    centres = [a.GetIdx() for a in mol.GetAtoms() if a.GetChiralTag() != Chem.ChiralType.CHI_UNSPECIFIED]
    if len(centres) < 2:
        return mol
    mol = Chem.RWMol(mol)
    mol.GetAtomWithIdx(rng.choice(centres)).SetChiralTag(Chem.ChiralType.CHI_UNSPECIFIED)
    return mol.GetMol()


def build(n_molecules: int = N_MOLECULES, seed: int = SEED) -> list[tuple[str, str, str]]:
    """(SMILES, id, comment) records; the comment is empty except on broken ones."""
    rng = random.Random(seed)
    scaffolds = _read_csv("scaffolds.csv")
    groups = _read_csv("substituents.csv")
    n_groups = [g["smiles"] for g in groups if g["on_nitrogen"] == "yes"]
    c_groups = [g["smiles"] for g in groups]
    seen: set[str] = set()
    records: list[tuple[str, str, str]] = []
    attempts = 0
    while len(records) < n_molecules:
        attempts += 1
        if attempts > 50 * n_molecules:
            raise RuntimeError("scaffold and substituent lists are too small for the count")
        sc = rng.choice(scaffolds)
        smi = sc["smiles"]
        chosen: list[str | None] = []
        for k in range(1, _n_points(smi) + 1):
            on_n = f"[*:{k}]N" in smi or f"N([*:{k}])" in smi or f"N1[*:{k}]" in smi
            if k > 1 and rng.random() < 0.35:
                chosen.append(None)
            else:
                chosen.append(rng.choice(n_groups if on_n else c_groups))
        mol = _attach(smi, chosen)
        if mol is None:
            continue
        draw = rng.random()
        if draw >= SHARE_STEREO_OPEN:
            mol = _assign_stereo(mol, rng)
            if draw < SHARE_STEREO_OPEN + SHARE_STEREO_PARTIAL:
                mol = _clear_one_centre(mol, rng)
        out = Chem.MolToSmiles(mol)
        if out in seen:
            continue
        seen.add(out)
        records.append((out, f"QRCL-{len(records) + 1:05d}", ""))
    # The broken records go in at fixed, spread-out positions.
    for k, (smi, why) in enumerate(BAD_RECORDS):
        at = (k + 1) * len(records) // (len(BAD_RECORDS) + 1)
        records.insert(at, (smi, f"QRCL-X{k + 1:04d}", f"deliberately broken: {why}"))
    return records


def write(records: list[tuple[str, str, str]], path: str, seed: int) -> None:
    text = io.StringIO()
    text.write("# Quillan Ridge Chemistry Lab: ring-rich screening set (invented demo data)\n")
    text.write(f"# generated by datasets/demo/make_demo.py, seed {seed}; SMILES then id\n")
    for smi, ident, comment in records:
        if comment:
            text.write(f"# {comment}\n")
        text.write(f"{smi} {ident}\n")
    data = text.getvalue().encode("utf-8")
    with (
        open(path, "wb") as raw,
        gzip.GzipFile(filename="", mode="wb", fileobj=raw, mtime=0, compresslevel=9) as gz,
    ):
        gz.write(data)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("-n", type=int, default=N_MOLECULES, help="number of good records")
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("-o", default=os.path.join(HERE, OUT_NAME))
    args = parser.parse_args()
    with rdBase.BlockLogs():
        records = build(args.n, args.seed)
    write(records, args.o, args.seed)
    print(f"wrote {len(records)} records to {args.o}")


if __name__ == "__main__":
    main()
