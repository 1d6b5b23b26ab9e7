"""Command line: `libconf explain`, `annotate`, `audit`, `report`, `train`."""

from __future__ import annotations

import argparse
import json
import math
import sys

from . import __version__
from .engine import DEFAULT_MEDIUM, DEFAULT_TEMPERATURE, MEDIA, analyze
from .errors import InputError
from .explain import explain_text


def _clean(obj):
    if isinstance(obj, float) and (math.isnan(obj) or math.isinf(obj)):
        return None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    return obj


def _temperature(text: str) -> float:
    t = float(text)
    if not 0 < t < 2000:
        raise argparse.ArgumentTypeError("temperature is in kelvin, between 0 and 2000")
    return t


def _add_conditions(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--temperature",
        type=_temperature,
        default=DEFAULT_TEMPERATURE,
        metavar="K",
        help=f"temperature in kelvin (default {DEFAULT_TEMPERATURE})",
    )
    p.add_argument(
        "--medium",
        choices=MEDIA,
        default=DEFAULT_MEDIUM,
        help=f"solvent setting for medium-dependent increments (default {DEFAULT_MEDIUM})",
    )


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="libconf",
        description="Ring-conformation descriptors for saturated six-membered rings: chair "
        "preference, axial/equatorial substituents, inversion barrier, lock class. "
        "Estimates from published increments; not a substitute for experiment.",
    )
    parser.add_argument("--version", action="version", version=f"libconf {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    ex = sub.add_parser(
        "explain",
        help="one molecule: a readable per-ring breakdown",
        description="Explain the ring conformations of one molecule.",
    )
    ex.add_argument("smiles", metavar="SMILES", help="the molecule (quote it in the shell)")
    ex.add_argument("--json", action="store_true", help="JSON with the output-table field names")
    ex.add_argument("--plot", metavar="FILE.png", help="also draw both chairs' energies and their terms")
    _add_conditions(ex)
    try:
        from .pipeline import cli as pipeline_cli
    except ImportError:  # pragma: no cover - the batch pipeline ships with the package
        pipeline_cli = None
    if pipeline_cli is not None:
        pipeline_cli.add_annotate_parser(sub)
    aud = sub.add_parser(
        "audit",
        help="re-check a random sample of a finished run with a 3D calculation",
        description="Build both chairs of a random sample of rings in 3D (MMFF94, or GFN2-xTB via "
        "tblite) and compare with the run's predictions. A computed reference is a reference, "
        "not the truth.",
    )
    aud.add_argument("run_dir", metavar="DIR", help="the --out directory of `libconf annotate`")
    aud.add_argument("--sample", type=int, default=50, metavar="N", help="rings to check (default 50)")
    aud.add_argument("--seed", type=int, default=0, metavar="S", help="random seed of the sample (default 0)")
    aud.add_argument(
        "--level",
        choices=("mmff", "xtb"),
        default="mmff",
        help="MMFF94 (fast; mis-signs some polar groups) or GFN2-xTB (slower)",
    )
    aud.add_argument(
        "--conformers", type=int, default=20, metavar="N", help="ETKDG embeddings per ring (default 20)"
    )
    rep = sub.add_parser(
        "report",
        help="one self-contained HTML page summarising a finished run",
        description="Summarise an annotate output directory as one HTML file "
        "(plots and depictions embedded; nothing is fetched).",
    )
    rep.add_argument("run_dir", metavar="DIR", help="the --out directory of `libconf annotate`")
    rep.add_argument("-o", "--output", metavar="FILE.html", help="where to write (default: DIR/report.html)")
    tr = sub.add_parser(
        "train",
        help="regenerate computed chair energies (optional) and refit the A-value model",
        description="Refit the A-value regression model on the tabulated A-values and the computed "
        "GFN2-xTB chair energies in datasets/computed; with --compute N, first compute (or resume) "
        "both chairs of the N most frequent harvested model compounds. Writes models/"
        "a_value_model.json and its SHA-256 in models/SHA256SUMS.",
    )
    tr.add_argument(
        "--compute",
        type=int,
        default=0,
        metavar="N",
        help="first compute or resume the N most frequent model compounds at GFN2-xTB (slow: "
        "about 30 s each per core, minutes for a flexible group); 0 (default) refits on the data "
        "already computed",
    )
    tr.add_argument(
        "--jobs", type=int, default=2, metavar="N", help="worker processes for --compute (default 2)"
    )
    tr.add_argument(
        "--chairs",
        metavar="CSV",
        nargs="+",
        help="computed chair energies, newest first; a compound is taken from the first file that "
        "has it, --compute writes into the first (default datasets/computed/chair_energies_v4.csv, "
        "_v3, _v2, chair_energies.csv)",
    )
    tr.add_argument("--out", metavar="DIR", help="folder for the model file (default models/)")
    tr.add_argument(
        "--metrics-only", action="store_true", help="cross-validate and print the metrics; write nothing"
    )
    tr.add_argument(
        "--nested",
        action="store_true",
        help="also run the nested cross-validation that chose the model's setting (about 2 min)",
    )
    return parser


def run_train(args) -> int:
    from .model import train

    chairs = args.chairs or [str(p) for p in train.CHAIR_FILES]
    if args.compute:
        from .compute import generate

        skip = [] if args.chairs else [a for p in train.AS_THOROUGH for a in ("--skip-in", str(p))]
        rc = generate.main(
            [
                "--top",
                str(args.compute),
                "--level",
                "xtb",
                "--out",
                chairs[0],
                "--jobs",
                str(args.jobs),
                *skip,
            ]
        )
        if rc:
            return rc
    argv = ["--chairs", *chairs] + (["--out", args.out] if args.out else [])
    flags = [f for f, on in (("--metrics-only", args.metrics_only), ("--nested", args.nested)) if on]
    return train.main(argv + flags)


def run_explain(args) -> int:
    from .model.artefact import ModelFileError

    try:
        res = analyze(args.smiles, temperature=args.temperature, medium=args.medium)
    except InputError as exc:
        print(f"libconf explain: {exc.reason}", file=sys.stderr)
        return 2
    except ModelFileError as exc:
        print(f"libconf explain: {exc}", file=sys.stderr)
        return 1
    if args.json:
        print(json.dumps(_clean(res.to_dict()), indent=2))
    else:
        print(explain_text(res))
    if args.plot:
        from .explain import plot_chairs

        try:
            plot_chairs(res, args.plot)
        except (OSError, ValueError) as exc:
            print(f"libconf explain: cannot write {args.plot}: {exc}", file=sys.stderr)
            return 1
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command == "explain":
        return run_explain(args)
    if args.command == "audit":
        from .audit import AuditError, audit

        if args.sample < 1:
            print("libconf audit: --sample must be at least 1", file=sys.stderr)
            return 2
        try:
            audit(
                args.run_dir,
                sample=args.sample,
                seed=args.seed,
                level=args.level,
                n_conformers=args.conformers,
            )
        except AuditError as exc:
            print(f"libconf audit: {exc}", file=sys.stderr)
            return 2
        return 0
    if args.command == "report":
        from .report import ReportError, write_report

        try:
            path = write_report(args.run_dir, args.output)
        except ReportError as exc:
            print(f"libconf report: {exc}", file=sys.stderr)
            return 2
        except OSError as exc:
            print(f"libconf report: cannot write the report: {exc}", file=sys.stderr)
            return 1
        print(f"report written to {path}")
        return 0
    if args.command == "train":
        return run_train(args)
    if args.command == "annotate":
        from .pipeline import cli as pipeline_cli

        return pipeline_cli.run_annotate(args)
    parser.print_help()
    return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
