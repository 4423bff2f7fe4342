"""Rut lines from drone rasters: an elevation model (DEM/DSM) or a rut mask / probability raster.

:func:`extract_ruts` reads one single-band GDAL raster with rasterio, window by window with an
overlap, so a raster of any size runs in bounded memory; it honours nodata, the geotransform and
any CRS. From an elevation model it finds ruts as narrow depressions below the local ground
(the ground is a robust smooth surface at a scale set in metres); from a mask it thresholds the
values. Then, per window: remove small blobs, skeletonise (scikit-image), turn the skeleton into
branches, prune short spurs, split at junctions; keep only the skeleton the window's core owns
and join line ends across window seams, so the result does not depend on the window size.
Branches that continue each other through a junction are joined again into one wheel track
(``through_junctions``); where two wheels ran in one rut (front and rear on a straight) that
stretch belongs to both tracks, which is what pass reconstruction needs. Lines are smoothed
with a short quadratic fit (0.3 m) and simplified to a quarter pixel, which keeps curvature.
Each line gets its length, width (at half depth, or of the mask), median and maximum depth
below the local ground (when an elevation model is given) and a depth class.
:func:`write_rut_lines` writes them to a GeoPackage; :meth:`RutLines.as_input_layer` hands
them to :func:`geoops.pipeline.analyze_layer`.

What ``kind="auto"`` decides (from the data type and a decimated sample of the values):
boolean and 8-bit unsigned rasters are masks (8-bit values above 1 are read as 0..255 and
scaled to 0..1); any other type whose valid values all lie within 0..1 is a mask or probability
raster; everything else is an elevation model in the units of the CRS's vertical axis, taken
as metres. Force ``kind`` when that guess is wrong (e.g. a DEM of a tidal flat within 0..1 m).

This module pairs no ruts and infers no passes; it prints nothing.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import warnings as _warnings
from collections.abc import Iterator, Mapping
from contextlib import ExitStack
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
import pyproj
import rasterio
import rasterio.errors
import shapely
from rasterio.vrt import WarpedVRT
from rasterio.windows import Window
from scipy import ndimage
from skimage.morphology import skeletonize

from . import __version__
from .errors import BadInput, CrsError, LimitExceeded
from .frame import resolve_crs
from .io import InputLayer, OutputLayer, write_geopackage
from .raster_defaults import (
    DEM_THRESHOLD_M,
    DEPTH_CLASS_NAMES,
    DEPTH_LIMITS_M,
    GROUND_M,
    MASK_THRESHOLD,
    MAX_MEMORY_MB,
    MAX_TURN_DEG,
    MIN_LENGTH_M,
    SMOOTH_M,
    SPUR_M,
)
from .raster_defaults import VECTOR_SUFFIXES as _VECTOR_SUFFIXES
from .raster_graph import skeleton_graph
from .raster_lines import (
    Piece,
    chain,
    clip_to_core,
    drop_loose_seam_vertices,
    join_tracks,
    node_links,
    polish,
    seam_partners,
    step_m,
)

__all__ = [
    "DEPTH_LIMITS_M",
    "ExtractOptions",
    "RutLines",
    "extract_ruts",
    "is_raster",
    "write_rut_lines",
]

FloatArray = npt.NDArray[np.float64]
Float32Array = npt.NDArray[np.float32]
BoolArray = npt.NDArray[np.bool_]
IntArray = npt.NDArray[np.int64]
Kind = Literal["auto", "dem", "mask"]

#: layer name in the written GeoPackage
LAYER_NAME = "rut_lines"
#: output fields and their types, in order
LINE_FIELDS = {
    "line_id": "int",
    "length_m": "real",
    "width_m": "real",
    "depth_median_m": "real",
    "depth_max_m": "real",
    "depth_class": "text",
}

#: working bytes per window pixel (float32 planes, masks, distance-transform indices): about
#: 45 measured with bench/raster.py (tracemalloc peak over window area), doubled for headroom;
#: GDAL's block cache gets a quarter of the budget on top
BYTES_PER_PIXEL = 96
#: rasters beyond this many pixels are refused as absurd (a 2 cm model of 40 km^2)
MAX_PIXELS = 10**11
#: the 0..1 range test of ``kind="auto"`` reads at most this many rows and columns
_SAMPLE_SIDE = 512
#: suffixes of vector formats that :func:`is_raster` rejects without opening the file


@dataclass(frozen=True)
class ExtractOptions:
    """Options of one extraction; the CLI and the service map their arguments onto these.

    Attributes
    ----------
    kind
        ``"dem"`` (elevation model), ``"mask"`` (rut mask or probability) or ``"auto"``.
    threshold
        Elevation model: smallest depth below the local ground that counts as rut, metres
        (default 0.03). Mask: smallest value that counts as rut, 0..1 (default 0.5).
    min_length_m
        Lines shorter than this are dropped.
    spur_m
        Side branches of the skeleton shorter than this (with a free end) are pruned.
    ground_m
        Size of the neighbourhood the local ground is taken from, metres; ruts narrower than
        about a third of it are found.
    smooth_m
        Standard deviation of the Gaussian that smooths the depth below ground, metres
        (damps surface noise; at least 0.7 pixel is used).
    window_px, overlap_px
        Window core side and overlap in pixels; ``None`` picks them from ``max_memory_mb``
        and the scales above.
    max_memory_mb
        Working memory budget: windows are sized to fit it (with room to spare) and GDAL's
        block cache gets a quarter of it; the lines found so far come on top (a few tens of
        bytes per metre of rut).
    depth_limits_m
        Depth class limits (increasing), metres; see :data:`DEPTH_LIMITS_M`.
    through_junctions
        After splitting the skeleton at its junctions, join again the two branches at a
        junction that continue each other best (change of heading at most ``max_turn_deg``),
        so that a wheel track crossed or touched by another stays one line; the other branches
        end at the junction. False keeps every branch a line of its own.
    max_turn_deg
        Largest change of heading at a junction that still counts as one track.
    """

    kind: Kind = "auto"
    threshold: float | None = None
    min_length_m: float = MIN_LENGTH_M
    spur_m: float = SPUR_M
    ground_m: float = GROUND_M
    smooth_m: float = SMOOTH_M
    window_px: int | None = None
    overlap_px: int | None = None
    max_memory_mb: float = MAX_MEMORY_MB
    depth_limits_m: tuple[float, ...] = DEPTH_LIMITS_M
    through_junctions: bool = True
    max_turn_deg: float = MAX_TURN_DEG

    def __post_init__(self) -> None:
        if self.kind not in ("auto", "dem", "mask"):
            raise BadInput(f"Unknown raster kind {self.kind!r}.", "Use auto, dem or mask.")
        positive = {
            "min_length_m": self.min_length_m,
            "spur_m": self.spur_m,
            "ground_m": self.ground_m,
            "smooth_m": self.smooth_m,
            "max_memory_mb": self.max_memory_mb,
        }
        for name, value in positive.items():
            if not (math.isfinite(value) and value > 0):
                raise BadInput(f"{name} must be a positive number, got {value!r}.", "Fix it.")
        if self.threshold is not None and not math.isfinite(self.threshold):
            raise BadInput(f"threshold must be a number, got {self.threshold!r}.", "Fix it.")
        if self.window_px is not None and self.window_px < 16:
            raise BadInput(f"window_px must be at least 16, got {self.window_px}.", "Fix it.")
        if self.overlap_px is not None and self.overlap_px < 0:
            raise BadInput(f"overlap_px must be >= 0, got {self.overlap_px}.", "Fix it.")
        limits = np.asarray(self.depth_limits_m, dtype=float)
        if limits.size == 0 or not np.all(np.isfinite(limits)) or np.any(np.diff(limits) <= 0):
            raise BadInput(
                f"depth_limits_m must be increasing numbers, got {self.depth_limits_m!r}.",
                "Give e.g. 0.10 0.20 (metres).",
            )


@dataclass(frozen=True, eq=False)
class RutLines:
    """Rut lines extracted from a raster, in the raster's CRS.

    Attributes
    ----------
    lines
        Object array of shapely LineStrings.
    length_m, width_m, depth_median_m, depth_max_m
        Per line, metres; depths are NaN without an elevation model.
    depth_class
        Per line: ``shallow``/``deep``/``very_deep`` (see :data:`DEPTH_LIMITS_M`) or
        ``unmeasured``.
    crs
        The raster's CRS as WKT.
    kind
        ``"dem"`` or ``"mask"``: how the raster was read.
    source
        The raster's path.
    pixel_size_m
        Pixel width and height in metres.
    options
        The options used, with the threshold, window and overlap actually chosen.
    warnings
        What the user should know (e.g. a resampled elevation model, unjoined seam ends).
    """

    lines: npt.NDArray[np.object_]
    length_m: FloatArray
    width_m: FloatArray
    depth_median_m: FloatArray
    depth_max_m: FloatArray
    depth_class: npt.NDArray[np.object_]
    crs: str
    kind: str
    source: str
    pixel_size_m: tuple[float, float]
    options: Mapping[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    def __len__(self) -> int:
        return int(self.lines.size)

    def as_input_layer(self) -> InputLayer:
        """The lines as a :class:`geoops.io.InputLayer`, ready for ``analyze_layer``."""
        parts = [[np.asarray(shapely.get_coordinates(g), dtype=np.float64)] for g in self.lines]
        return InputLayer(
            path=self.source,
            layer=LAYER_NAME,
            driver="raster",
            crs=self.crs,
            ids=[str(i + 1) for i in range(len(self))],
            parts=parts,
            z=[None] * len(self),
            fields={"width_m": self.width_m, "depth_median_m": self.depth_median_m},
            warnings=list(self.warnings),
        )


# ---------------------------------------------------------------------------------------------
# opening and checking a raster


def is_raster(path: str | os.PathLike[str]) -> bool:
    """Whether ``path`` is a raster file GDAL can open (a cheap sniff, for ``analyze``).

    TIFF magic bytes answer at once; known vector suffixes answer ``False`` without opening;
    anything else is tried with rasterio.

    Examples
    --------
    >>> is_raster("no/such/file.tif")
    False
    """
    p = Path(path)
    if not p.is_file():
        return False
    with open(p, "rb") as fh:
        head = fh.read(4)
    if head in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        return True
    if p.suffix.lower() in _VECTOR_SUFFIXES:
        return False
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            with rasterio.open(p) as ds:
                return bool(ds.count >= 1 and ds.width > 0 and ds.height > 0)
    except (rasterio.errors.RasterioError, OSError, UnicodeDecodeError):
        return False


def check_raster(path: str | os.PathLike[str]) -> str:
    """The CRS (e.g. ``'EPSG:32633'``) of a raster that rut extraction can read.

    Opens the raster and runs the same checks as :func:`extract_ruts` (one band, a
    geotransform, a CRS, not all nodata) without extracting anything; for validating uploads.

    Raises
    ------
    BadInput, CrsError
        What is wrong with the raster and what to do.
    """
    with _open(str(path)) as ds:
        grid = _grid(ds, str(path))
        _decide_kind(ds, "auto")
    return str(grid.crs.to_string())


def _open(path: str) -> Any:
    if not Path(path).exists():
        raise BadInput(f"No file at {path!r}.", "Check the path and try again.")
    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore", rasterio.errors.NotGeoreferencedWarning)
            return rasterio.open(path)
    # UnicodeDecodeError: GDAL's message quoting bytes of a corrupt header (found by fuzzing)
    except (rasterio.errors.RasterioError, OSError, UnicodeDecodeError) as exc:
        text = str(exc).strip().splitlines()[0][:200] if str(exc).strip() else type(exc).__name__
        raise BadInput(
            f"Cannot read {path!r} as a raster ({text}).",
            "Give a complete GeoTIFF or another raster GDAL reads.",
        ) from None


@dataclass(frozen=True)
class _Grid:
    """What the extraction needs to know of a raster's grid."""

    height: int
    width: int
    transform: Any  # affine.Affine
    crs: pyproj.CRS
    px_m: tuple[float, float]  # metres per column step, per row step


def _grid(ds: Any, path: str) -> _Grid:
    if ds.count != 1:
        raise BadInput(
            f"{path!r} has {ds.count} bands; rut extraction needs one band.",
            "Give the elevation model or the rut mask as a single-band raster "
            "(e.g. gdal_translate -b 1).",
        )
    if ds.width < 3 or ds.height < 3:
        raise BadInput(
            f"{path!r} is only {ds.width} x {ds.height} pixels.", "Give a raster of the ground."
        )
    if ds.width * ds.height > MAX_PIXELS:
        raise LimitExceeded(
            f"{path!r} has {ds.width} x {ds.height} pixels, more than {MAX_PIXELS:.0e}.",
            "Cut the raster into parts (e.g. gdal_translate -srcwin) and extract each.",
        )
    t = ds.transform
    if t.is_identity or not (math.isfinite(t.determinant) and t.determinant != 0):
        raise BadInput(
            f"{path!r} has no geotransform (pixel positions on the ground are unknown).",
            "Georeference it (e.g. gdal_translate -a_ullr or gdalwarp with control points).",
        )
    if ds.crs is None:
        raise CrsError(
            f"{path!r} declares no coordinate reference system.",
            "Assign one, e.g. gdal_edit.py -a_srs EPSG:32633 FILE.",
        )
    try:
        crs = resolve_crs(ds.crs.to_wkt(), None)
    except CrsError as exc:
        raise CrsError(f"{path!r}: {exc.message}", "Assign a projected CRS in metres.") from None
    col = (t.a, t.d)  # one column step in CRS units
    row = (t.b, t.e)
    if crs.is_geographic:
        geod = pyproj.Geod(ellps="WGS84") if crs.get_geod() is None else crs.get_geod()
        assert geod is not None
        x0 = t.a * ds.width / 2.0 + t.b * ds.height / 2.0 + t.c
        y0 = t.d * ds.width / 2.0 + t.e * ds.height / 2.0 + t.f
        px = float(geod.inv(x0, y0, x0 + col[0], y0 + col[1])[2])
        py = float(geod.inv(x0, y0, x0 + row[0], y0 + row[1])[2])
    else:
        factor = float(crs.axis_info[0].unit_conversion_factor or 1.0)
        px = math.hypot(*col) * factor
        py = math.hypot(*row) * factor
    return _Grid(int(ds.height), int(ds.width), t, crs, (px, py))


def _sample(ds: Any) -> Float32Array:
    """A decimated read of the whole raster (nodata as NaN): cheap, for deciding the kind."""
    shape = (min(ds.height, _SAMPLE_SIDE), min(ds.width, _SAMPLE_SIDE))
    try:
        data = ds.read(1, out_shape=shape, masked=True)
    except rasterio.errors.RasterioError as exc:
        raise BadInput(
            f"Cannot read the pixels of {ds.name!r} ({str(exc)[:200]}).",
            "The file looks damaged; export it again.",
        ) from None
    out = np.ma.filled(data.astype(np.float32), np.nan)
    return np.asarray(out, dtype=np.float32)


def _decide_kind(ds: Any, requested: Kind) -> tuple[str, float]:
    """``("dem"|"mask", scale)``: how to read the raster and the factor that maps it to 0..1."""
    sample = _sample(ds)
    vals = sample[np.isfinite(sample)]
    if vals.size == 0:
        raise BadInput(
            f"{ds.name!r} holds only nodata (or its valid area is smaller than a sample cell).",
            "Check the nodata value and the extent of the raster.",
        )
    dtype = np.dtype(ds.dtypes[0])
    if requested == "auto":
        if dtype == np.bool_ or dtype == np.uint8:
            kind = "mask"
        else:
            kind = "mask" if float(vals.min()) >= 0.0 and float(vals.max()) <= 1.0 else "dem"
    else:
        kind = requested
    scale = 1.0 / 255.0 if kind == "mask" and dtype == np.uint8 and float(vals.max()) > 1 else 1.0
    return kind, scale


# ---------------------------------------------------------------------------------------------
# windows


@dataclass(frozen=True)
class _Tile:
    """One window: the core it owns and the larger window it reads (global pixel indices)."""

    index: int
    core: tuple[int, int, int, int]  # row0, row1, col0, col1
    read: tuple[int, int, int, int]

    def window(self) -> Window:
        r0, r1, c0, c1 = self.read
        return Window(c0, r0, c1 - c0, r1 - r0)


@dataclass(frozen=True)
class _Scales:
    """Every scale in pixels, fixed once per raster so windows agree in their overlap."""

    block: int  # coarse ground cell, pixels
    median_cells: int  # coarse median filter size, cells
    ground_sigma_cells: float
    smooth_sigma: tuple[float, float]  # rows, cols, pixels
    spur_m: float
    min_length_m: float
    reach_m: float  # how far from a line its width is sought
    core: int
    overlap: int


def _scales(grid: _Grid, opts: ExtractOptions) -> _Scales:
    px, py = grid.px_m
    pmean = math.sqrt(px * py)
    if pmean > opts.ground_m / 6:
        raise BadInput(
            f"The pixels are {px:.3g} x {py:.3g} m, too coarse to see ruts at a ground scale of "
            f"{opts.ground_m} m.",
            "Give a drone model of a few centimetres per pixel, or raise ground_m.",
        )
    block = max(1, round(opts.ground_m / 8 / pmean))
    cell = block * pmean
    median_cells = max(3, int(math.ceil(opts.ground_m / cell)) | 1)
    ground_sigma = opts.ground_m / 4 / cell
    smooth = (max(0.7, opts.smooth_m / py), max(0.7, opts.smooth_m / px))
    need = int(math.ceil((2.0 * opts.ground_m + opts.spur_m) / pmean))
    overlap = opts.overlap_px if opts.overlap_px is not None else need
    overlap = int(math.ceil(overlap / block) * block)
    budget_px = opts.max_memory_mb * 2**20 / BYTES_PER_PIXEL
    if opts.window_px is None:
        side = int(math.sqrt(budget_px))
        core = side - 2 * overlap
        if core < max(overlap, 16):
            raise LimitExceeded(
                f"A memory budget of {opts.max_memory_mb} MB leaves no room for windows with "
                f"the {overlap}-pixel overlap this raster needs.",
                "Raise max_memory_mb (e.g. 256).",
            )
    else:
        core = opts.window_px
        if (core + 2 * overlap) ** 2 > budget_px:
            raise LimitExceeded(
                f"Windows of {core} + 2 x {overlap} pixels need more than {opts.max_memory_mb} MB.",
                "Use a smaller window_px or raise max_memory_mb.",
            )
    core = max(block, core // block * block)
    return _Scales(
        block=block,
        median_cells=median_cells,
        ground_sigma_cells=ground_sigma,
        smooth_sigma=smooth,
        spur_m=opts.spur_m,
        min_length_m=opts.min_length_m,
        reach_m=opts.ground_m / 2,
        core=core,
        overlap=overlap,
    )


def _tiles(grid: _Grid, sc: _Scales) -> Iterator[_Tile]:
    k = 0
    for r0 in range(0, grid.height, sc.core):
        r1 = min(r0 + sc.core, grid.height)
        for c0 in range(0, grid.width, sc.core):
            c1 = min(c0 + sc.core, grid.width)
            read = (
                max(r0 - sc.overlap, 0),
                min(r1 + sc.overlap, grid.height),
                max(c0 - sc.overlap, 0),
                min(c1 + sc.overlap, grid.width),
            )
            yield _Tile(k, (r0, r1, c0, c1), read)
            k += 1


def _read(ds: Any, tile: _Tile, scale: float = 1.0) -> Float32Array:
    try:
        data = ds.read(1, window=tile.window(), masked=True)
    except rasterio.errors.RasterioError as exc:
        raise BadInput(
            f"Cannot read pixels of {ds.name!r} near row {tile.read[0]}, column "
            f"{tile.read[2]} ({str(exc)[:200]}).",
            "The file looks damaged; export it again.",
        ) from None
    out = np.ma.filled(data.astype(np.float32), np.nan)
    if scale != 1.0:
        out *= np.float32(scale)
    return np.asarray(out, dtype=np.float32)


# ---------------------------------------------------------------------------------------------
# per-window image work


def _normalised_gaussian(
    values: Float32Array, weight: BoolArray, sigma: float | tuple[float, float]
) -> Float32Array:
    """Gaussian mean of ``values`` over the pixels where ``weight`` is True (NaN where none)."""
    w = weight.astype(np.float32)
    num = ndimage.gaussian_filter(np.where(weight, values, 0).astype(np.float32), sigma, truncate=3)
    den = ndimage.gaussian_filter(w, sigma, truncate=3)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(den > 1e-3, num / den, np.nan)
    return np.asarray(out, dtype=np.float32)


def _fill_nearest(a: Float32Array) -> Float32Array:
    bad = ~np.isfinite(a)
    if not bad.any() or bad.all():
        return a
    idx = ndimage.distance_transform_edt(bad, return_distances=False, return_indices=True)
    return np.asarray(a[tuple(idx)], dtype=np.float32)


def _upsample(coarse: Float32Array, block: int, shape: tuple[int, int]) -> Float32Array:
    """Bilinear interpolation of cell-centre values back to pixels (separable, vectorised)."""

    def axis_weights(n: int, m: int) -> tuple[IntArray, IntArray, Float32Array]:
        u = (np.arange(n) + 0.5) / block - 0.5
        u = np.clip(u, 0, m - 1)
        i0 = np.floor(u).astype(np.int64)
        i1 = np.minimum(i0 + 1, m - 1)
        return i0, i1, (u - i0).astype(np.float32)

    r0, r1, fr = axis_weights(shape[0], coarse.shape[0])
    rows = coarse[r0] * (1 - fr)[:, None] + coarse[r1] * fr[:, None]
    c0, c1, fc = axis_weights(shape[1], coarse.shape[1])
    return np.asarray(rows[:, c0] * (1 - fc) + rows[:, c1] * fc, dtype=np.float32)


def _ground(z: Float32Array, sc: _Scales, exclude_m: float) -> Float32Array:
    """Local ground surface: block medians, a median filter, then a Gaussian mean that leaves
    out cells lying clearly below the median ground (the ruts themselves)."""
    b = sc.block
    h, w = z.shape
    hb, wb = -(-h // b), -(-w // b)
    padded = np.full((hb * b, wb * b), np.nan, dtype=np.float32)
    padded[:h, :w] = z
    blocks = padded.reshape(hb, b, wb, b).transpose(0, 2, 1, 3).reshape(hb, wb, b * b)
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore", RuntimeWarning)
        cells = np.nanmedian(blocks, axis=2).astype(np.float32)
    valid = np.isfinite(cells)
    if not valid.any():
        return np.full(z.shape, np.nan, dtype=np.float32)
    med = ndimage.median_filter(_fill_nearest(cells), size=sc.median_cells, mode="nearest")
    keep = valid & (cells - med > -exclude_m)
    smooth = _normalised_gaussian(cells, keep, sc.ground_sigma_cells)
    keep = valid & (cells - _fill_nearest(smooth) > -exclude_m)
    smooth = _fill_nearest(_normalised_gaussian(cells, keep, sc.ground_sigma_cells))
    return _upsample(smooth, b, z.shape)


def _depth_below_ground(z: Float32Array, sc: _Scales, exclude_m: float) -> Float32Array:
    """Depth of each pixel below the local ground, lightly smoothed (NaN on nodata)."""
    valid = np.isfinite(z)
    depth = _ground(z, sc, exclude_m) - z
    out = _normalised_gaussian(depth, valid & np.isfinite(depth), sc.smooth_sigma)
    out[~valid] = np.nan
    return out


def _drop_small(mask: BoolArray, min_extent_px: float) -> BoolArray:
    """Remove blobs whose bounding box is shorter than ``min_extent_px`` on its long side,
    unless they touch the window edge (they may continue outside)."""
    labels, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    if n == 0:
        return mask
    rr, cc = np.nonzero(labels)
    lab = labels[rr, cc]
    big = np.iinfo(np.int64).max
    rmin = np.full(n + 1, big)
    cmin = np.full(n + 1, big)
    rmax = np.full(n + 1, -1)
    cmax = np.full(n + 1, -1)
    np.minimum.at(rmin, lab, rr)
    np.minimum.at(cmin, lab, cc)
    np.maximum.at(rmax, lab, rr)
    np.maximum.at(cmax, lab, cc)
    h, w = mask.shape
    extent = np.maximum(rmax - rmin, cmax - cmin) + 1
    edge = (rmin == 0) | (cmin == 0) | (rmax == h - 1) | (cmax == w - 1)
    keep = (extent >= min_extent_px) | edge
    keep[0] = False
    return np.asarray(keep[labels], dtype=bool)


def _fill_small_holes(mask: BoolArray, max_area_px: float) -> BoolArray:
    """Fill holes (background islands not touching the window edge) smaller than the area."""
    labels, n = ndimage.label(~mask)
    if n == 0:
        return mask
    area = np.bincount(labels.ravel(), minlength=n + 1)
    edge = np.unique(np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]]))
    small = area < max_area_px
    small[edge] = False
    small[0] = False
    return np.asarray(mask | small[labels], dtype=bool)


def _skeleton_pieces(
    mask: BoolArray,
    depth: Float32Array | None,
    tile: _Tile,
    sc: _Scales,
    px_m: tuple[float, float],
    width_from_depth: bool,
) -> list[Piece]:
    """Skeletonise a window's mask, prune spurs, and cut the branches to the window's core.

    The width counts the pixels nearest to each skeleton pixel that lie deeper than half its
    depth (``width_from_depth``, an elevation model) or inside the mask (a rut mask).
    """
    h, w = mask.shape
    sk = skeletonize(mask)
    graph = skeleton_graph(sk)
    for _ in range(3):  # pruning a spur can leave another spur behind; a few rounds suffice
        drop: list[IntArray] = []
        for k, br in enumerate(graph.branches):
            r, c = graph.rows[br], graph.cols[br]
            if graph.ring[k] or r.min() == 0 or c.min() == 0 or r.max() == h - 1:
                continue
            if c.max() == w - 1:
                continue
            free = int(graph.start_node[k] < 0) + int(graph.end_node[k] < 0)
            if free == 0:
                continue
            length = float(step_m(np.column_stack([r, c]).astype(float), px_m).sum())
            if (free == 1 and length < sc.spur_m) or (free == 2 and length < sc.min_length_m):
                drop.append(br)
        if not drop:
            break
        gone = np.concatenate(drop)
        sk[graph.rows[gone], graph.cols[gone]] = False
        graph = skeleton_graph(sk)
    if not graph.branches:
        return []
    # rut area per skeleton pixel: pixels of the rut nearest to it
    dist, (ir, ic) = ndimage.distance_transform_edt(
        ~sk, sampling=(px_m[1], px_m[0]), return_indices=True
    )
    index = np.full(mask.shape, -1, dtype=np.int64)
    index[graph.rows, graph.cols] = np.arange(graph.rows.size)
    near = index[ir, ic]
    member = (dist <= sc.reach_m) & (near >= 0)
    if depth is not None and width_from_depth:
        sk_depth = np.where(near >= 0, depth[ir, ic], np.nan)
        with np.errstate(invalid="ignore"):
            member &= depth >= 0.5 * sk_depth
        del sk_depth
    else:
        member &= mask
    n_sk = graph.rows.size
    owner = near[member]
    area = np.bincount(owner, minlength=n_sk).astype(np.float64)
    # sub-pixel centre: the (depth-weighted) centroid of the rut pixels nearest to each skeleton
    # pixel; a skeleton pixel itself sits up to half a pixel off the middle of the rut
    mr, mc = np.nonzero(member)
    weight = (
        np.maximum(depth[mr, mc], 0.0).astype(np.float64)
        if depth is not None and width_from_depth
        else np.ones(mr.size)
    )
    wsum = np.bincount(owner, weight, minlength=n_sk)
    has = wsum > 0
    centre = np.column_stack([graph.rows, graph.cols]).astype(np.float64)
    centre[has, 0] = np.bincount(owner, weight * mr, minlength=n_sk)[has] / wsum[has]
    centre[has, 1] = np.bincount(owner, weight * mc, minlength=n_sk)[has] / wsum[has]
    del dist, ir, ic, near, member, mr, mc, weight, owner
    pix_depth = (
        np.asarray(depth[graph.rows, graph.cols], dtype=np.float64)
        if depth is not None
        else np.full(graph.rows.size, np.nan)
    )
    r0, c0 = tile.read[0], tile.read[2]
    cr0, cr1, cc0, cc1 = tile.core
    pieces: list[Piece] = []
    for k, br in enumerate(graph.branches):
        rc = centre[br] + (r0, c0)
        dep = pix_depth[br]
        ar = area[br]
        start = "free"
        end = "free"
        if graph.start_node[k] >= 0:
            rc = np.vstack([graph.node_rc[graph.start_node[k]] + (r0, c0), rc])
            dep = np.concatenate([[np.nan], dep])
            ar = np.concatenate([[0.0], ar])
            start = "node"
        if graph.end_node[k] >= 0:
            rc = np.vstack([rc, graph.node_rc[graph.end_node[k]] + (r0, c0)])
            dep = np.concatenate([dep, [np.nan]])
            ar = np.concatenate([ar, [0.0]])
            end = "node"
        ring = bool(graph.ring[k])
        if ring:
            rc, dep, ar = np.vstack([rc, rc[:1]]), np.append(dep, dep[0]), np.append(ar, 0.0)
        pieces.extend(clip_to_core(rc, dep, ar, start, end, ring, tile.index, (cr0, cr1, cc0, cc1)))
    return pieces


# ---------------------------------------------------------------------------------------------
# lines and attributes


def depth_classes(depth_m: FloatArray, limits: tuple[float, ...] = DEPTH_LIMITS_M) -> list[str]:
    """Depth class per line: ``shallow``, ``deep``, ``very_deep`` (``class_<k>`` for more
    limits than names), ``unmeasured`` for NaN.

    Examples
    --------
    >>> depth_classes(np.array([0.05, 0.15, 0.25, np.nan]))
    ['shallow', 'deep', 'very_deep', 'unmeasured']
    >>> depth_classes(np.array([0.15, 0.25]), limits=(0.2,))
    ['shallow', 'deep']
    """
    names = (
        list(DEPTH_CLASS_NAMES[: len(limits) + 1])
        if len(limits) < len(DEPTH_CLASS_NAMES)
        else [f"class_{k}" for k in range(len(limits) + 1)]
    )
    k = np.searchsorted(np.asarray(limits), np.nan_to_num(depth_m, nan=0.0), side="right")
    return [
        names[int(i)] if np.isfinite(d) else "unmeasured" for i, d in zip(k, depth_m, strict=True)
    ]


def _to_lines(
    pieces: list[Piece], grid: _Grid, opts: ExtractOptions, measured: bool
) -> tuple[list[FloatArray], FloatArray]:
    """Polished world coordinates of each line and a (n, 4) table of length, width, depths."""
    coords: list[FloatArray] = []
    table: list[tuple[float, float, float, float]] = []
    pixel_area = grid.px_m[0] * grid.px_m[1]
    t = grid.transform
    # smoothing window: 0.3 m, at least 11 vertices (vertices are about a pixel apart)
    window = max(11, int(math.ceil(0.3 / min(grid.px_m))) | 1)
    for p in pieces:
        closed = p.ring or (p.rc.shape[0] > 3 and np.allclose(p.rc[0], p.rc[-1]))
        rc = polish(p.rc, closed, window, (p.start == "node", p.end == "node"))
        length = float(step_m(rc, grid.px_m).sum())
        if length < opts.min_length_m:
            continue
        cols, rows = rc[:, 1] + 0.5, rc[:, 0] + 0.5
        x = t.a * cols + t.b * rows + t.c
        y = t.d * cols + t.e * rows + t.f
        coords.append(np.column_stack([x, y]))
        dep = p.depth[np.isfinite(p.depth)] if measured else np.empty(0)
        width = float(p.area.sum()) * pixel_area / length
        table.append(
            (
                length,
                width,
                float(np.median(dep)) if dep.size else np.nan,
                float(dep.max()) if dep.size else np.nan,
            )
        )
    return coords, np.array(table, dtype=np.float64).reshape(-1, 4)


def _simplify(coords: list[FloatArray], tol: float) -> npt.NDArray[np.object_]:
    if not coords:
        return np.empty(0, dtype=object)
    lines = shapely.linestrings(
        np.vstack(coords), indices=np.repeat(np.arange(len(coords)), [c.shape[0] for c in coords])
    )
    return np.asarray(shapely.simplify(lines, tol, preserve_topology=False), dtype=object)


# ---------------------------------------------------------------------------------------------
# the public entry points


def extract_ruts(
    raster_path: str | os.PathLike[str],
    *,
    dem_path: str | os.PathLike[str] | None = None,
    kind: Kind = "auto",
    threshold: float | None = None,
    window_px: int | None = None,
    overlap_px: int | None = None,
    min_length_m: float = MIN_LENGTH_M,
    spur_m: float = SPUR_M,
    ground_m: float = GROUND_M,
    smooth_m: float = SMOOTH_M,
    max_memory_mb: float = MAX_MEMORY_MB,
    depth_limits_m: tuple[float, ...] = DEPTH_LIMITS_M,
    through_junctions: bool = True,
    max_turn_deg: float = MAX_TURN_DEG,
) -> RutLines:
    """Extract rut centrelines with width and depth from an elevation model or a rut mask.

    Parameters
    ----------
    raster_path
        Single-band raster: an elevation model (DEM/DSM, metres) or a rut mask / probability.
    dem_path
        With a mask: the elevation model to measure depths from (warped onto the mask's grid
        with bilinear resampling when the grids differ).
    kind
        ``"auto"`` (see the module docstring), ``"dem"`` or ``"mask"``.
    threshold, window_px, overlap_px, min_length_m, spur_m, ground_m, smooth_m, max_memory_mb,
    depth_limits_m, through_junctions, max_turn_deg
        See :class:`ExtractOptions`.

    Returns
    -------
    RutLines

    Raises
    ------
    BadInput
        Missing, corrupt, multi-band, tiny or all-nodata raster, no geotransform, pixels too
        coarse, or a DEM given with an elevation model.
    CrsError
        The raster declares no usable CRS.
    LimitExceeded
        An absurd raster size, or windows that do not fit ``max_memory_mb``.
    """
    opts = ExtractOptions(
        kind=kind,
        threshold=threshold,
        min_length_m=min_length_m,
        spur_m=spur_m,
        ground_m=ground_m,
        smooth_m=smooth_m,
        window_px=window_px,
        overlap_px=overlap_px,
        max_memory_mb=max_memory_mb,
        depth_limits_m=tuple(float(v) for v in depth_limits_m),
        through_junctions=through_junctions,
        max_turn_deg=max_turn_deg,
    )
    path = os.fspath(raster_path)
    warnings: list[str] = []
    with ExitStack() as stack:
        # GDAL's block cache counts against the budget too (its default grows with the RAM)
        cache_mb = max(8, int(opts.max_memory_mb / 4))
        stack.enter_context(rasterio.Env(GDAL_CACHEMAX=cache_mb))
        ds = stack.enter_context(_open(path))
        grid = _grid(ds, path)
        found, scale = _decide_kind(ds, opts.kind)
        dem = None
        if dem_path is not None:
            if found == "dem":
                raise BadInput(
                    f"{path!r} is read as an elevation model; --dem is for rut masks.",
                    "Leave out --dem, or say --kind mask if the raster is a mask.",
                )
            dem = stack.enter_context(_open(os.fspath(dem_path)))
            dgrid = _grid(dem, os.fspath(dem_path))
            if not (
                dgrid.height == grid.height
                and dgrid.width == grid.width
                and dem.transform.almost_equals(ds.transform)
                and dgrid.crs == grid.crs
            ):
                dem = stack.enter_context(
                    WarpedVRT(
                        dem,
                        crs=ds.crs,
                        transform=ds.transform,
                        width=grid.width,
                        height=grid.height,
                        resampling=rasterio.enums.Resampling.bilinear,
                    )
                )
                warnings.append("The elevation model was resampled onto the mask's grid.")
        sc = _scales(grid, opts)
        if found == "dem":
            thr = DEM_THRESHOLD_M if opts.threshold is None else opts.threshold
        else:
            thr = MASK_THRESHOLD if opts.threshold is None else opts.threshold
        exclude_m = 0.5 * thr if found == "dem" else 0.015
        min_extent_px = 0.5 * opts.min_length_m / math.sqrt(grid.px_m[0] * grid.px_m[1])
        hole_px = (0.1 / grid.px_m[0]) * (0.1 / grid.px_m[1])
        pieces: list[Piece] = []
        valid_pixels = 0
        for tile in _tiles(grid, sc):
            values = _read(ds, tile, scale)
            valid = np.isfinite(values)
            n_valid = int(valid.sum())
            valid_pixels += n_valid
            if n_valid == 0:
                continue
            if found == "dem":
                depth: Float32Array | None = _depth_below_ground(values, sc, exclude_m)
                assert depth is not None
                with np.errstate(invalid="ignore"):
                    mask = depth > thr
            else:
                with np.errstate(invalid="ignore"):
                    mask = values >= thr
                depth = None
                if dem is not None:
                    depth = _depth_below_ground(_read(dem, tile), sc, 0.015)
            del values
            mask = _fill_small_holes(_drop_small(mask, min_extent_px), hole_px)
            if not mask.any():
                continue
            pieces.extend(_skeleton_pieces(mask, depth, tile, sc, grid.px_m, found == "dem"))
        if valid_pixels == 0:
            raise BadInput(f"{path!r} holds only nodata.", "Check the nodata value and extent.")
    partner, unmatched = seam_partners(pieces, tol_px=2.5)
    lines = chain(pieces, partner, seam=True)
    drop_loose_seam_vertices(lines)
    if opts.through_junctions:
        lines = join_tracks(lines, *node_links(lines, grid.px_m, opts.max_turn_deg))
    if unmatched:
        warnings.append(
            f"{unmatched} line end(s) at window seams found no partner; a larger overlap_px "
            "may join them."
        )
    measured = found == "dem" or dem is not None
    coords, table = _to_lines(lines, grid, opts, measured)
    tol = 0.25 * math.hypot(grid.transform.a, grid.transform.d)
    geoms = _simplify(coords, tol)
    order = np.argsort(-table[:, 0], kind="stable") if len(table) else np.empty(0, dtype=np.int64)
    depth_median = table[order, 2]
    return RutLines(
        lines=geoms[order],
        length_m=table[order, 0],
        width_m=table[order, 1],
        depth_median_m=depth_median,
        depth_max_m=table[order, 3],
        depth_class=np.array(depth_classes(depth_median, opts.depth_limits_m), dtype=object),
        crs=grid.crs.to_wkt(),
        kind=found,
        source=path,
        pixel_size_m=grid.px_m,
        options={
            **asdict(opts),
            "threshold_used": thr,
            "window_px_used": sc.core,
            "overlap_px_used": sc.overlap,
        },
        warnings=tuple(warnings),
    )


def write_rut_lines(rut_lines: RutLines, out_path: str | os.PathLike[str]) -> Path:
    """Write rut lines to a GeoPackage layer ``rut_lines`` plus ``run_metadata``, atomically.

    Raises
    ------
    BadInput
        When ``out_path`` does not end in ``.gpkg``.
    """
    from .pipeline import CAUTION

    target = Path(out_path)
    if target.suffix.lower() != ".gpkg":
        raise BadInput(f"Unknown output type {target.suffix!r}.", "Name the output .gpkg.")
    fields: dict[str, list[Any]] = {
        "line_id": list(range(1, len(rut_lines) + 1)),
        "length_m": rut_lines.length_m.tolist(),
        "width_m": rut_lines.width_m.tolist(),
        "depth_median_m": rut_lines.depth_median_m.tolist(),
        "depth_max_m": rut_lines.depth_max_m.tolist(),
        "depth_class": rut_lines.depth_class.tolist(),
    }
    layer = OutputLayer(
        LAYER_NAME,
        rut_lines.lines,
        fields,
        LINE_FIELDS,
        "rutwise rut centrelines extracted from a raster. " + CAUTION,
    )
    metadata = {
        "tool": "rutwise",
        "version": __version__,
        "created_utc": _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat(),
        "input": os.path.basename(rut_lines.source),
        "raster_kind": rut_lines.kind,
        "pixel_size_m": json.dumps([round(v, 6) for v in rut_lines.pixel_size_m]),
        "options": json.dumps(dict(rut_lines.options)),
        "depth_classes": json.dumps(
            {
                "limits_m": list(rut_lines.options.get("depth_limits_m", DEPTH_LIMITS_M)),
                "source": "Finland, Ministry of Agriculture and Forestry 1996 (10 cm mineral, "
                "20 cm peat)",
                "measure": "median depth below the local ground along the line",
            }
        ),
        "lines_found": str(len(rut_lines)),
        "warnings": json.dumps(list(rut_lines.warnings)),
        "caution": CAUTION,
    }
    return write_geopackage(target, [layer], rut_lines.crs, metadata)
