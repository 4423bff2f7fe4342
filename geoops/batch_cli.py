"""`rutwise batch`: the command line of :mod:`geoops.batch` (argument parsing and progress only).

:func:`add_batch_parser` adds the ``batch`` sub-command to the ``rutwise`` parser;
``python -m geoops.batch_cli SOURCE -o OUTDIR`` runs the same command on its own. Exit status:
0 when every input finished, 3 when some failed (the rest are merged and reported), 2 on a
usage error, 1 on a bug.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from .batch_defaults import DEFAULT_UNIT_RUTS, EXIT_SOME_FAILED, SCHEDULER_ENV
from .errors import RutwiseError

if TYPE_CHECKING:  # pragma: no cover
    from .batch import Outcome


def _line(outcome: Outcome, done: int, total: int) -> str:
    if outcome.status == "failed":
        what = f"failed: {outcome.reason}"
    elif outcome.status == "skipped":
        what = "already finished, skipped"
    else:
        units = f", {outcome.work_units} work units" if outcome.work_units > 1 else ""
        what = f"finished in {outcome.seconds:.1f} s{units}"
    return f"rutwise batch: [{done}/{total}] {outcome.source}: {what}"


class _Progress:
    """A tqdm bar on a terminal; one plain line per input otherwise (logs, cron mail)."""

    def __init__(self, total: int, quiet: bool) -> None:
        self.quiet = quiet
        self.bar: Any = None
        if not quiet and sys.stderr.isatty():
            from tqdm import tqdm

            self.bar = tqdm(total=total, file=sys.stderr, unit="layer", desc="rutwise batch")

    def __call__(self, outcome: Outcome, done: int, total: int) -> None:
        if self.quiet:
            return
        if self.bar is not None:
            self.bar.update(1)
            if outcome.status == "failed":
                self.bar.write(_line(outcome, done, total), file=sys.stderr)
            return
        print(_line(outcome, done, total), file=sys.stderr, flush=True)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def _positive_int(text: str) -> int:
    value = int(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 or more, got {value}")
    return value


def configure_parser(b: argparse.ArgumentParser) -> argparse.ArgumentParser:
    """Add the batch arguments to ``b``."""
    b.add_argument(
        "source",
        help="a folder (searched recursively for .geojson .json .gpkg .gpx .fgb .zip, and "
        ".tif .tiff drone rasters) or a manifest (.yaml, .json or .csv: path, layer, crs, "
        "accuracy, id_field per layer)",
    )
    b.add_argument(
        "-o",
        "--output",
        required=True,
        metavar="OUTDIR",
        help="output folder: layers/, merged.gpkg, report.md, report.json",
    )
    b.add_argument(
        "--scheduler",
        metavar="tcp://HOST:PORT",
        help=f"an existing Dask scheduler (default: ${SCHEDULER_ENV}, else a local cluster)",
    )
    b.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="worker processes of the local cluster (default: one per core)",
    )
    b.add_argument(
        "--pattern",
        action="append",
        default=[],
        metavar="GLOB",
        help="only files whose relative path or name matches (repeatable)",
    )
    b.add_argument(
        "--crs",
        help="CRS of every input, for files that have none; it also "
        "overrides a file's own (a manifest entry's crs wins over this)",
    )
    b.add_argument(
        "--accuracy",
        type=float,
        metavar="METRES",
        help="horizontal accuracy, one sigma per axis (a manifest entry overrides)",
    )
    b.add_argument(
        "--accuracy-field",
        metavar="NAME",
        help="attribute holding each feature's accuracy in metres",
    )
    b.add_argument(
        "--id-field", metavar="NAME", help="attribute whose values identify features in source_fids"
    )
    b.add_argument(
        "--merged-crs",
        metavar="CRS",
        help="CRS of merged.gpkg (default: the inputs' common CRS, else EPSG:4326)",
    )
    b.add_argument(
        "--unit-ruts",
        type=_positive_int,
        default=DEFAULT_UNIT_RUTS,
        metavar="N",
        help="cut layers with more ruts into work units of about N ruts, never splitting "
        f"a group of neighbouring ruts (default {DEFAULT_UNIT_RUTS}; 0: never cut)",
    )
    b.add_argument("-q", "--quiet", action="store_true", help="no progress output")
    b.set_defaults(func=run_batch_command)
    return b


def add_batch_parser(sub: Any) -> argparse.ArgumentParser:
    """Add ``batch`` to the sub-commands of the ``rutwise`` parser (``sub`` from
    ``add_subparsers``)."""
    b = sub.add_parser(
        "batch",
        help="analyse a folder or manifest of layers on a Dask cluster, resumably",
        description="Analyse many rut layers into one result per layer, a merged GeoPackage "
        "and a run report. Finished inputs are skipped when run again.",
    )
    return configure_parser(b)


def run_batch_command(args: argparse.Namespace) -> int:
    """Run a batch from parsed arguments; the exit status."""
    from .batch import find_inputs, run_batch
    from .pipeline import AnalyzeOptions

    defaults = AnalyzeOptions.from_args(args)
    if args.workers is not None and args.workers < 1:
        raise RutwiseError(
            f"--workers must be at least 1, got {args.workers}.",
            "Give a number of worker processes.",
        )
    inputs = find_inputs(args.source, args.pattern, defaults, exclude=args.output)
    bar = _Progress(len(inputs), args.quiet)
    try:
        run = run_batch(
            inputs,
            args.output,
            scheduler=args.scheduler,
            workers=args.workers,
            merged_crs=args.merged_crs,
            unit_ruts=args.unit_ruts or None,
            progress=bar,
            source=args.source,
        )
    finally:
        bar.close()
    if not args.quiet:
        r = run.report
        print(
            f"rutwise batch: {r['inputs']} inputs: {r['finished']} analysed, {r['skipped']} "
            f"already finished, {r['failed']} failed; {r['passes']} passes "
            f"({r['undecided_passes']} not decided); report {run.report_md}",
            file=sys.stderr,
        )
    return EXIT_SOME_FAILED if run.failed else 0


def main(argv: Sequence[str] | None = None) -> int:
    parser = configure_parser(
        argparse.ArgumentParser(
            prog="rutwise batch", description="Analyse many rut layers on a Dask cluster."
        )
    )
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    args = parser.parse_args(argv)
    from .cli import run_command  # here: geoops.cli imports this module

    return run_command(args, "rutwise: interrupted (finished inputs are kept; run again to resume)")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
