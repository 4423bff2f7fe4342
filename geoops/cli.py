"""The `rutwise` command line: a thin adapter over :mod:`geoops.pipeline`.

User errors (:class:`geoops.errors.RutwiseError`) print one line saying what is wrong and what
to do, and exit with status 2; no traceback. Anything else is a bug: one line, exit status 1,
and the traceback only with ``--debug``.
"""

from __future__ import annotations

import argparse
import os
import sys
import warnings
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from . import __version__
from .batch_cli import add_batch_parser
from .errors import RutwiseError, writing_to
from .raster_cli import add_extract_parser

EXIT_USER_ERROR = 2
EXIT_BUG = 1

_COMPASS = ["N", "NE", "E", "SE", "S", "SW", "W", "NW"]


def _heading(xy: np.ndarray) -> str:
    """Compass direction from the first to the last vertex (local frame: y is north)."""
    d = xy[-1] - xy[0]
    az = (np.degrees(np.arctan2(d[0], d[1])) + 360.0) % 360.0
    return _COMPASS[int(((az + 22.5) % 360) // 45)]


def _fmt(v: float | None, digits: int = 2) -> str:
    return "-" if v is None else f"{v:.{digits}f}"


def print_summary(result: object, outputs: Sequence[Path], source: str) -> None:
    """A readable summary of an analysis for a terminal."""
    from .pipeline import CAUTION, AnalysisResult

    assert isinstance(result, AnalysisResult)
    meta = result.metadata
    print(f"rutwise {__version__}: {source} (layer {meta['input_layer']}, {meta['input_crs']})")
    print(
        f"{meta['ruts_read']} ruts read, {len(result.passes)} passes; noise {meta['noise_sigma_m']}"
    )
    if result.passes:
        print(
            f"  {'pass':>4} {'leg':>3}  {'verdict':<12} {'conf':>5}  {'travel':<6} {'gear':<7} "
            f"{'wheelbase m (95 %)':<21} {'track m':>7}  {'class':<16} source ids"
        )
        for p in result.passes:
            travel = _heading(p.geometry) if p.verdict == "decided" else "?"
            wb = (
                "-"
                if p.wheelbase_m is None
                else f"{p.wheelbase_m:.2f} ({_fmt(p.wheelbase_low_m)}-{_fmt(p.wheelbase_high_m)})"
            )
            conf = f"{p.confidence:.2f}" if p.verdict == "decided" else "-"
            print(
                f"  {p.pass_id:>4} {p.leg:>3}  {p.verdict:<12} {conf:>5}  {travel:<6} {p.gear:<7} "
                f"{wb:<21} {_fmt(p.track_width_m):>7}  {p.vehicle_class:<16} {p.source_fids}"
            )
    unpaired = [r for r in result.ruts if r.pass_id is None]
    if unpaired:
        reasons: dict[str, list[str]] = {}
        for r in unpaired:
            reasons.setdefault(r.reason or "unpaired", []).append(r.source_fids)
        parts = [
            f"{k}: {', '.join(v[:8])}{' ...' if len(v) > 8 else ''}"
            for k, v in sorted(reasons.items())
        ]
        print(f"  unpaired ruts ({len(unpaired)}): " + "; ".join(parts))
    for w in result.warnings:
        print(f"  warning: {w}")
    for out in outputs:
        print(f"  written: {out}")
    print(f"  caution: {CAUTION}")


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number of at least 1, got {text!r}")
    return value


#: modules pyogrio imports for its optional dataframe functions only
_DATAFRAME_MODULES = ("geopandas", "pandas")


def _import_pyogrio_without_dataframes() -> None:
    """Import pyogrio without the geopandas and pandas it loads for its dataframe functions.

    pyogrio's package imports both whenever they are installed, a quarter of a second of
    every start; rutwise reads and writes through ``pyogrio.raw`` (numpy arrays) only. While
    pyogrio is imported here those modules are marked as missing, then unmarked: they stay
    importable for anything else, but pyogrio's own dataframe functions are unavailable in
    this process. Only the ``analyze`` command does this (a library user may need both);
    nothing when pyogrio is imported already."""
    if "pyogrio" in sys.modules:
        return
    hidden = [name for name in _DATAFRAME_MODULES if name not in sys.modules]
    for name in hidden:
        sys.modules[name] = None  # type: ignore[assignment]  # import raises ImportError
    try:
        import pyogrio  # noqa: F401
    except ImportError:
        # a pyogrio that cannot do without them: forget what it half loaded, import it whole
        for name in [m for m in sys.modules if m == "pyogrio" or m.startswith("pyogrio.")]:
            del sys.modules[name]
    finally:
        for name in hidden:
            if sys.modules.get(name, ...) is None:
                del sys.modules[name]
    import pyogrio  # noqa: F401, F811


def _cmd_analyze(args: argparse.Namespace) -> int:
    _import_pyogrio_without_dataframes()
    from .pipeline import AnalyzeOptions, analyze_file, write_result

    options = AnalyzeOptions.from_args(args)
    output = Path(args.output) if args.output else Path(Path(args.input).stem + "_rutwise.gpkg")
    if output.suffix.lower() not in (".gpkg", ".geojson", ".json"):
        raise RutwiseError(
            f"Unknown output type {output.suffix!r}.",
            "Name the output .gpkg (GeoPackage) or .geojson.",
        )
    targets = [output]
    if output.suffix.lower() != ".gpkg":
        targets.append(output.with_name(output.stem + ".ruts" + output.suffix))
    source = Path(args.input)
    if source.is_file() and any(t.exists() and os.path.samefile(t, source) for t in targets):
        raise RutwiseError(
            f"The output {str(output)!r} would overwrite the input.",
            "Name another output file with -o.",
        )
    from .parallel import default_workers

    workers = args.workers if args.workers is not None else default_workers()
    result = analyze_file(args.input, options, workers=workers)
    with writing_to(output):
        outputs = write_result(result, output, out_crs=args.out_crs)
    if not args.quiet:
        print_summary(result, outputs, args.input)
    return 0


def _cmd_serve(args: argparse.Namespace) -> int:
    try:
        from service.app import run_server
    except ImportError as exc:  # pragma: no cover - depends on the installed extras
        raise RutwiseError(
            f"The HTTP service is not installed ({exc}).",
            "Install with: pip install 'rutwise[service]'.",
        ) from None
    run_server(host=args.host, port=args.port)
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="rutwise",
        description="Read vehicle passes from mapped wheel ruts: which ruts go together, which "
        "way the vehicle went, its wheelbase, and how sure that is.",
    )
    parser.add_argument("--version", action="version", version=f"rutwise {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    sub = parser.add_subparsers(dest="command", required=True)

    a = sub.add_parser(
        "analyze",
        help="analyse one layer of rut lines",
        description="Analyse one layer of rut lines and write the passes and ruts layers.",
    )
    a.add_argument("input", help="GeoJSON, GeoPackage, GPX, FlatGeobuf, zipped Shapefile, ...")
    a.add_argument(
        "-o",
        "--output",
        help="output .gpkg (default) or .geojson (default: <input name>_rutwise.gpkg here)",
    )
    a.add_argument("--layer", help="layer to read when the file has several line layers")
    a.add_argument(
        "--crs",
        help="CRS of the input when the file has none (e.g. EPSG:27700); overrides the file's",
    )
    a.add_argument(
        "--out-crs",
        help="CRS of the output (default: the input's; GeoJSON output is always lon/lat WGS 84)",
    )
    a.add_argument(
        "--accuracy",
        type=float,
        metavar="METRES",
        help="horizontal accuracy of the vertices, one sigma per axis, metres "
        "(default: estimated from the data)",
    )
    a.add_argument(
        "--accuracy-field",
        metavar="NAME",
        help="attribute holding each feature's horizontal accuracy in metres",
    )
    a.add_argument(
        "--id-field", metavar="NAME", help="attribute whose values identify features in source_fids"
    )
    a.add_argument(
        "--workers",
        type=_positive_int,
        default=None,
        metavar="N",
        help="processes for a large layer (default: one per core, up to 8; the result is the "
        "same with any number)",
    )
    a.add_argument("-q", "--quiet", action="store_true", help="print nothing on success")
    a.set_defaults(func=_cmd_analyze)

    add_extract_parser(sub)
    add_batch_parser(sub)

    s = sub.add_parser("serve", help="start the HTTP processing service (OGC API - Processes)")
    s.add_argument("--host", default=None, help="address to listen on (default 127.0.0.1)")
    s.add_argument("--port", type=int, default=None, help="port (default 8000)")
    s.set_defaults(func=_cmd_serve)
    return parser


def run_command(args: argparse.Namespace, interrupted: str = "rutwise: interrupted") -> int:
    """Run a parsed command: user errors -> one line and exit 2; bugs -> one line and exit 1
    (the traceback only with ``--debug``)."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return int(args.func(args))
    except RutwiseError as exc:
        print(f"rutwise: error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print(interrupted, file=sys.stderr)
        return 130
    except Exception as exc:  # a bug: say so in one line unless debugging
        if args.debug:
            raise
        print(
            f"rutwise: internal error: {type(exc).__name__}: {exc} "
            "(rerun with --debug for details and report it)",
            file=sys.stderr,
        )
        return EXIT_BUG


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    return run_command(parser.parse_args(argv))


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
