"""Default options of rut extraction from rasters, with their sources.

Kept apart from :mod:`geoops.raster` so the command line can show them without importing
rasterio and scikit-image. Numbers only; nothing here reads or computes.
"""

from __future__ import annotations

#: Depth class limits, metres. source: Finland, Ministry of Agriculture and Forestry 1996
#: guideline on harvesting damage (as reported in Silva Fennica): a strip-road section counts as
#: damaged where a rut over 1 m long is deeper than 10 cm on mineral soil or 20 cm on peat.
#: (Quebec's RADF, section 45, uses 200 mm on mineral soil; pass ``depth_limits_m=(0.2,)``.)
DEPTH_LIMITS_M: tuple[float, ...] = (0.10, 0.20)
#: class names for depths below the first limit, between the limits, above the last limit
DEPTH_CLASS_NAMES: tuple[str, ...] = ("shallow", "deep", "very_deep")
#: shortest rut the same guideline counts, metres: also the default shortest line kept
MIN_LENGTH_M = 1.0
#: side branches of the skeleton shorter than this are pruned, metres (a skeleton's spurs are
#: about half as long as the rut is wide; common practice: ruts of 0.1-0.8 m width)
SPUR_M = 0.5
#: size of the neighbourhood the local ground is taken from, metres
GROUND_M = 1.5
#: Gaussian smoothing of the depth below ground, metres (one sigma)
SMOOTH_M = 0.04
#: least depth below the local ground that counts as rut in an elevation model, metres
DEM_THRESHOLD_M = 0.03
#: least value that counts as rut in a mask or probability raster
MASK_THRESHOLD = 0.5
#: working memory budget, MB
MAX_MEMORY_MB = 256.0
#: largest change of heading through a junction that still counts as one track, degrees
MAX_TURN_DEG = 60.0

#: file suffixes that are vector layers, never rasters (a cheap answer for `analyze`)
VECTOR_SUFFIXES = {
    ".geojson",
    ".json",
    ".gpkg",
    ".gpx",
    ".fgb",
    ".shp",
    ".zip",
    ".parquet",
    ".csv",
    ".kml",
    ".gml",
}
