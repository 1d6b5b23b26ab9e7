"""Coverage of A-values on a real open library: which share of substituents gets a value,
and from where (increment table, regression model, analogy fallback).

    python benchmarks/model_coverage.py                      # RDKit's bundled NCI subset
    python benchmarks/model_coverage.py --moses-test WHEEL   # + the MOSES scaffold test split

The MOSES scaffold test split (inside the molsets 0.3.1 wheel; fetch it with
`pip download --no-deps molsets==0.3.1 -d DIR`) was not used to build the training data.
"""

from __future__ import annotations

import argparse
import gzip
import io
import os
import sys
import zipfile
from collections import Counter

from rdkit import RDConfig

from libconf import analyze
from libconf.errors import InputError


def nci():
    with open(os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")) as fh:
        for line in fh:
            parts = line.split()
            if parts:
                yield parts[0]


def moses_test(wheel: str, limit: int):
    with zipfile.ZipFile(wheel) as z:
        raw = z.read("moses/dataset/data/test_scaffolds.csv.gz")
    with gzip.open(io.BytesIO(raw), "rt") as fh:
        next(fh)
        for n, line in enumerate(fh):
            if n >= limit:
                break
            yield line.split(",")[0].strip()


def coverage(smiles) -> Counter:
    c = Counter()
    for smi in smiles:
        c["molecules"] += 1
        try:
            res = analyze(smi)
        except InputError:
            c["unreadable"] += 1
            continue
        for ring in res.rings:
            for s in ring.substituents:
                if s.face == "planar":
                    continue  # a group on a flat ring atom has no axial/equatorial choice
                if s.group.count("*") > 1:
                    # a bond of a fused, spiro or bridging partner ring, not a group
                    c["ring-system bonds"] += 1
                    c["ring-system bonds with a value"] += s.a_value_kjmol is not None
                    continue
                if s.face == "invertible":
                    c["on ring N"] += 1
                c["substituents"] += 1
                if s.a_value_kjmol is None:
                    c["no value"] += 1
                elif s.a_value_source == "table":
                    c["table"] += 1
                elif "regression model" in s.source_ref:
                    c["regression model"] += 1
                else:
                    c["analogy"] += 1
    return c


def line(name: str, c: Counter) -> str:
    n = c["substituents"] or 1
    got = n - c["no value"]
    return (
        f"| {name} | {c['molecules']:,} | {c['substituents']:,} | {100 * got / n:.2f} % | "
        f"{100 * c['table'] / n:.1f} % | {100 * c['regression model'] / n:.1f} % | {100 * c['analogy'] / n:.1f} % | "
        f"{c['on ring N']:,} | {c['ring-system bonds']:,} ({c['ring-system bonds with a value']:,}) |"
    )


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--moses-test", metavar="WHEEL", help="the molsets 0.3.1 wheel")
    ap.add_argument("--limit", type=int, default=50_000)
    args = ap.parse_args(argv)
    print(
        "| library | molecules | substituents (non-planar, one attachment) | with an A-value | table | "
        "regression model | analogy | of them on a ring N | ring-system bonds (with a value) |"
    )
    print("|---|---|---|---|---|---|---|---|---|")
    print(line("RDKit NCI first_5K", coverage(nci())))
    if args.moses_test:
        print(
            line(
                f"MOSES scaffold test split (first {args.limit:,})",
                coverage(moses_test(args.moses_test, args.limit)),
            )
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
