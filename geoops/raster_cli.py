"""The ``rutwise extract-ruts`` command: a raster in, a GeoPackage of rut lines out.

A thin adapter over :func:`geoops.raster.extract_ruts` and :func:`geoops.raster.write_rut_lines`.
User errors are raised as :class:`geoops.errors.RutwiseError`; the main CLI prints them.
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

from .errors import RutwiseError, writing_to
from .raster_defaults import (
    DEM_THRESHOLD_M,
    DEPTH_LIMITS_M,
    GROUND_M,
    MASK_THRESHOLD,
    MAX_MEMORY_MB,
    MIN_LENGTH_M,
    SPUR_M,
)


def _cmd_extract(args: argparse.Namespace) -> int:
    from .pipeline import CAUTION
    from .raster import extract_ruts, write_rut_lines

    output = Path(args.output)
    if output.suffix.lower() != ".gpkg":
        raise RutwiseError(
            f"Unknown output type {output.suffix!r}.", "Name the output .gpkg (GeoPackage)."
        )
    for given in (args.raster, args.dem):
        if given and output.exists() and Path(given).exists():
            if os.path.samefile(output, given):
                raise RutwiseError(
                    f"The output {str(output)!r} would overwrite an input.",
                    "Name another output file with -o.",
                )
    lines = extract_ruts(
        args.raster,
        dem_path=args.dem,
        kind=args.kind,
        threshold=args.threshold,
        window_px=args.window,
        overlap_px=args.overlap,
        min_length_m=args.min_length,
        spur_m=args.spur,
        ground_m=args.ground,
        max_memory_mb=args.max_memory,
        depth_limits_m=tuple(args.depth_limits),
        through_junctions=not args.split_at_junctions,
    )
    with writing_to(output):
        written = write_rut_lines(lines, output)
    if not args.quiet:
        total = float(lines.length_m.sum())
        print(f"{args.raster}: read as {'an elevation model' if lines.kind == 'dem' else 'a mask'}")
        print(f"  {len(lines)} rut lines, {total:.1f} m in all -> {written}")
        classes = {str(c): int((lines.depth_class == c).sum()) for c in set(lines.depth_class)}
        if classes:
            print("  depth classes: " + ", ".join(f"{k} {v}" for k, v in sorted(classes.items())))
        for note in lines.warnings:
            print(f"  note: {note}")
        print(f"  caution: {CAUTION}")
    return 0


def add_extract_parser(sub: argparse._SubParsersAction) -> None:
    """Register ``extract-ruts`` on the main parser's sub-commands."""
    e = sub.add_parser(
        "extract-ruts",
        help="find rut lines in a drone elevation model or rut mask raster",
        description="Find rut centrelines in an elevation model (DEM/DSM) or a rut mask / "
        "probability raster and write them, with width and depth, to a GeoPackage. "
        "--kind auto reads boolean and 8-bit rasters and rasters with values within 0..1 "
        "as masks, anything else as an elevation model in metres.",
    )
    e.add_argument("raster", help="single-band GeoTIFF or other GDAL raster")
    e.add_argument("-o", "--output", required=True, help="output GeoPackage (.gpkg)")
    e.add_argument("--dem", help="elevation model to measure depths from, when RASTER is a mask")
    e.add_argument(
        "--kind", choices=("auto", "dem", "mask"), default="auto", help="how to read RASTER"
    )
    e.add_argument(
        "--threshold",
        type=float,
        help="elevation model: least depth below the local ground in metres (default "
        f"{DEM_THRESHOLD_M}); mask: least value that counts as rut, 0..1 "
        f"(default {MASK_THRESHOLD})",
    )
    e.add_argument(
        "--min-length",
        type=float,
        default=MIN_LENGTH_M,
        metavar="METRES",
        help=f"drop lines shorter than this (default {MIN_LENGTH_M})",
    )
    e.add_argument(
        "--spur",
        type=float,
        default=SPUR_M,
        metavar="METRES",
        help=f"prune side branches shorter than this (default {SPUR_M})",
    )
    e.add_argument(
        "--ground",
        type=float,
        default=GROUND_M,
        metavar="METRES",
        help="size of the neighbourhood the local ground is taken from; ruts narrower than "
        f"about a third of it are found (default {GROUND_M})",
    )
    e.add_argument(
        "--depth-limits",
        type=float,
        nargs="+",
        default=list(DEPTH_LIMITS_M),
        metavar="METRES",
        help="depth class limits (default 0.10 0.20: Finnish guideline, mineral soil / peat)",
    )
    e.add_argument(
        "--split-at-junctions",
        action="store_true",
        help="keep every skeleton branch a line of its own (default: join the branches that "
        "continue each other through a junction)",
    )
    e.add_argument("--window", type=int, metavar="PIXELS", help="window side (default: auto)")
    e.add_argument("--overlap", type=int, metavar="PIXELS", help="window overlap (default: auto)")
    e.add_argument(
        "--max-memory",
        type=float,
        default=MAX_MEMORY_MB,
        metavar="MB",
        help=f"working memory per window (default {MAX_MEMORY_MB:g})",
    )
    e.add_argument("-q", "--quiet", action="store_true", help="print nothing on success")
    e.set_defaults(func=_cmd_extract)
