"""The ``annotate`` sub-command: argument parsing and exit status.

``libconf.cli`` adds it with :func:`add_annotate_parser` and runs it with
:func:`run_annotate`. ``python -m libconf.pipeline.cli annotate ...`` runs it alone.
"""

from __future__ import annotations

import argparse
import sys

from libconf.pipeline.failures import FatalError, UsageError

EXIT_OK, EXIT_FATAL, EXIT_USAGE, EXIT_INTERRUPTED = 0, 1, 2, 130


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected seconds, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 (no limit) or more")
    return value


def add_annotate_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "annotate",
        help="annotate a compound library with ring-conformation descriptors",
        description=(
            "Analyse every saturated six-membered ring of every record in the inputs "
            "and write the molecules, rings, substituents and errors tables as Parquet "
            "datasets under --out. Bad records become rows of the errors table; the run "
            "goes on."
        ),
    )
    p.add_argument(
        "inputs",
        nargs="*",
        metavar="INPUT",
        help="SMILES (.smi/.smiles/.txt), .csv, .tsv, .sdf/.sd (each optionally "
        ".gz) or .parquet files; - reads SMILES from stdin. With --resume "
        "they may be left out.",
    )
    p.add_argument("--out", required=True, metavar="DIR", help="output directory")
    p.add_argument(
        "--jobs", type=_positive_int, default=None, metavar="N", help="worker processes (default: all cores)"
    )
    p.add_argument(
        "--chunk-size",
        type=_positive_int,
        default=None,
        metavar="N",
        help="records per chunk, the unit of work and of --resume (default: about four "
        "chunks per worker, 10 to 2000 records)",
    )
    p.add_argument(
        "--temperature", type=float, default=None, metavar="K", help="temperature in kelvin (default: 298.15)"
    )
    p.add_argument(
        "--medium", choices=("nonpolar", "water"), default=None, help="solvent setting (default: water)"
    )
    p.add_argument(
        "--smiles-column",
        default=None,
        metavar="NAME",
        help="SMILES column of CSV/TSV/Parquet inputs (default: found by name)",
    )
    p.add_argument(
        "--id-column",
        default=None,
        metavar="NAME",
        help="id column of CSV/TSV/Parquet inputs, or SDF data field (default: "
        "found by name; the SDF title line)",
    )
    p.add_argument(
        "--record-timeout",
        type=_seconds,
        default=None,
        metavar="SECONDS",
        help="stop analysing one record after this long and record it as an "
        "error (default: 10; 0 = no limit)",
    )
    p.add_argument(
        "--max-heavy-atoms",
        type=_positive_int,
        default=None,
        metavar="N",
        help="records with more heavy atoms become errors (default: 500)",
    )
    p.add_argument(
        "--max-stereo-assignments",
        type=_positive_int,
        default=None,
        metavar="N",
        help="cap on stereo assignments tried for unspecified centres (default: 64)",
    )
    mode = p.add_mutually_exclusive_group()
    mode.add_argument("--resume", action="store_true", help="continue an interrupted run in DIR")
    mode.add_argument("--overwrite", action="store_true", help="replace the results of an earlier run in DIR")
    p.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="run the chunks on the workers of a Dask cluster, e.g. tcp://10.0.0.5:8786 "
        "(instead of --jobs; needs the 'cluster' extra; this machine still reads the "
        "inputs and writes the tables)",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bar and no summary line")
    p.set_defaults(command_func=run_annotate)
    return p


def _fail(message: str, status: int) -> int:
    print(f"libconf annotate: error: {message}", file=sys.stderr)
    return status


def run_annotate(args: argparse.Namespace) -> int:
    from libconf.pipeline.run import annotate, format_summary

    if not args.inputs and not args.resume:
        return _fail("give at least one INPUT file (or - for SMILES on stdin)", EXIT_USAGE)
    try:
        summary = annotate(
            args.inputs,
            args.out,
            jobs=args.jobs,
            chunk_size=args.chunk_size,
            temperature=args.temperature,
            medium=args.medium,
            smiles_column=args.smiles_column,
            id_column=args.id_column,
            record_timeout=args.record_timeout,
            max_heavy_atoms=args.max_heavy_atoms,
            max_stereo_assignments=args.max_stereo_assignments,
            resume=args.resume,
            overwrite=args.overwrite,
            progress=not args.quiet and sys.stderr.isatty(),
            scheduler=args.scheduler,
        )
    except UsageError as exc:
        return _fail(str(exc), EXIT_USAGE)
    except FatalError as exc:
        return _fail(str(exc), EXIT_FATAL)
    except KeyboardInterrupt:
        return _fail(
            f"interrupted; continue with: libconf annotate --resume --out {args.out}",
            EXIT_INTERRUPTED,
        )
    if not args.quiet:
        print(format_summary(summary))
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="libconf")
    sub = parser.add_subparsers(dest="command", required=True)
    add_annotate_parser(sub)
    args = parser.parse_args(argv)
    return run_annotate(args)


if __name__ == "__main__":
    sys.exit(main())
