"""Cost of `libconf.analyze` against a bare RDKit SMILES parse of the same molecules.

Molecules: the ring-bearing records of the open sets RDKit ships in its package
data: the NCI subset (rdkit/Data/NCI/first_5K.smi) and the two ChEMBL subsets
(rdkit/Contrib/FreeWilson/data/CHEMBL2321810.smi, rdkit/Contrib/fraggle/data/
ChEMBL_11265_actives.smi), optionally also SMILES files given on the command
line. Each set is reported on its own and together. Both loops run in this one
process, alternately, several times; the best time of each is reported, and their
ratio (target: <= 2.0).

    python benchmarks/bench_analyze.py [--repeat 5] [extra.smi]
"""

from __future__ import annotations

import argparse
import os
import platform
import time

from rdkit import Chem, RDConfig, rdBase

import libconf
from libconf.chem.rings import saturated_six_rings


def load(paths):
    smiles = []
    for path in paths:
        with open(path) as fh:
            for line in fh:
                parts = line.split()
                if parts:
                    smiles.append(parts[0])
    return smiles


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("files", nargs="*")
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    sets = {
        "NCI": [os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")],
        "ChEMBL": [
            os.path.join(RDConfig.RDContribDir, "FreeWilson", "data", "CHEMBL2321810.smi"),
            os.path.join(RDConfig.RDContribDir, "fraggle", "data", "ChEMBL_11265_actives.smi"),
        ],
    }
    if args.files:
        sets["extra"] = args.files
    groups = {}
    everything = []
    for name, paths in sets.items():
        with rdBase.BlockLogs():
            parsed = [(s, Chem.MolFromSmiles(s)) for s in load(paths)]
        rb = [s for s, m in parsed if m is not None and m.GetRingInfo().NumRings() > 0]
        groups[f"{name} ring-bearing"] = rb
        groups[f"{name} with a saturated 6-ring"] = [
            s for s, m in parsed if m is not None and saturated_six_rings(m)
        ]
        everything += rb
    groups["all ring-bearing"] = everything

    def bare(smis):
        with rdBase.BlockLogs():
            for s in smis:
                Chem.MolFromSmiles(s)

    def engine(smis):
        for s in smis:
            try:
                libconf.analyze(s)
            except libconf.InputError:
                pass

    engine(everything[:200])  # warm-up: parameter tables, caches
    print(f"libconf {libconf.__version__}, RDKit {rdBase.rdkitVersion}, Python {platform.python_version()}")
    for label, smis in groups.items():
        best = {"parse": float("inf"), "analyze": float("inf")}
        for _ in range(args.repeat):
            for name, fn in (("parse", bare), ("analyze", engine)):
                t0 = time.perf_counter()
                fn(smis)
                best[name] = min(best[name], time.perf_counter() - t0)
        n = len(smis)
        print(
            f"{label}: {n} molecules; bare parse {best['parse'] / n * 1e6:.1f} us/mol, "
            f"analyze {best['analyze'] / n * 1e6:.1f} us/mol, "
            f"ratio {best['analyze'] / best['parse']:.2f}"
        )


if __name__ == "__main__":
    main()
