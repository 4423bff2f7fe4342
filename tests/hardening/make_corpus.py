"""A corpus of bad inputs for rutwise's readers, written at test time (nothing is committed).

Each :class:`Case` is one file that a user or a caller of the service could hand over by
mistake or on purpose: broken JSON, GeoJSON nested the wrong way, geometries that are not
lines, impossible coordinates, a GeoPackage that is not one, hostile layer names, zip files
that climb out of their folder or expand a thousandfold, a raster header with absurd
dimensions. Each case says what the command line must answer (exit status and a word of the
message) and what the service must answer to an upload (HTTP status and the problem type).

The two large cases (a million vertices, a zip bomb) are made only when asked for
(``large=True``), always into a temporary folder.

Run ``python tests/hardening/make_corpus.py FOLDER`` to write the corpus into FOLDER.
"""

from __future__ import annotations

import json
import sqlite3
import struct
import sys
import zipfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import shapely
from pyogrio.raw import write as raw_write

#: an invented survey area on real ground (moorland in the Southern Uplands), lon/lat
LON0, LAT0 = -3.045, 55.4175
#: metres per degree of latitude, and of longitude at LAT0 (spherical approximation; only
#: used to place invented lines a few metres long)
M_PER_DEG_LAT = 111_320.0
M_PER_DEG_LON = M_PER_DEG_LAT * float(np.cos(np.radians(LAT0)))


@dataclass(frozen=True)
class Case:
    """One bad input and the answers expected to it.

    Attributes
    ----------
    name
        Short id, also the file's stem.
    group
        The class of problem (the rows of bench/robustness.md).
    file
        The file written.
    cli_exit
        Exit status of ``rutwise analyze``: 2 (user error) or 0 (accepted, with a warning).
    cli_words
        Words (lower case) that the one-line message (or, when accepted, a warning) contains.
    status
        HTTP status of the service: of ``POST /uploads`` when it refuses the file, else of
        executing ``analyze`` on the upload (200 when the analysis runs).
    problem
        End of the problem ``type`` URI (e.g. ``bad-input``); empty for 200.
    """

    name: str
    group: str
    file: Path
    cli_exit: int
    cli_words: tuple[str, ...]
    status: int
    problem: str


def _lonlat(xy_m: Any) -> list[list[float]]:
    """Local metres east/north of (LON0, LAT0) -> lon/lat positions."""
    xy = np.asarray(xy_m, dtype=float)
    return [[LON0 + x / M_PER_DEG_LON, LAT0 + y / M_PER_DEG_LAT] for x, y in xy]


def _line(length_m: float = 20.0, n: int = 41, offset_m: float = 0.0) -> list[list[float]]:
    """A gently curving line of ``n`` vertices, ``offset_m`` north of the origin."""
    x = np.linspace(0.0, length_m, n)
    y = offset_m + 0.5 * np.sin(x / 5.0)
    return _lonlat(np.column_stack([x, y]))


def _feature(geometry: Any, fid: int, **props: Any) -> dict[str, Any]:
    return {"type": "Feature", "id": fid, "properties": props, "geometry": geometry}


def _fc(*geometries: Any) -> dict[str, Any]:
    return {
        "type": "FeatureCollection",
        "features": [_feature(g, i + 1) for i, g in enumerate(geometries)],
    }


def _ls(coords: Any) -> dict[str, Any]:
    return {"type": "LineString", "coordinates": coords}


def _write_json(path: Path, doc: Any) -> None:
    # allow_nan: NaN and Infinity literals are exactly what some cases are about
    path.write_text(json.dumps(doc, allow_nan=True), encoding="utf-8")


def _write_gpkg(path: Path, layer: str, geoms: list[Any], crs: str = "EPSG:4326") -> None:
    """Write a GeoPackage layer (no spatial index); any name GDAL refuses is set with SQL."""
    wkb = shapely.to_wkb(np.asarray(geoms, dtype=object))
    safe = layer if layer.isidentifier() and layer.isascii() else f"tmp_{abs(hash(layer))}"
    raw_write(
        str(path),
        wkb,
        [np.arange(len(geoms))],
        ["n"],
        layer=safe,
        driver="GPKG",
        crs=crs,
        geometry_type="Unknown",
        append=path.exists(),
        layer_options={"SPATIAL_INDEX": "NO"},
    )
    if safe != layer:
        db = sqlite3.connect(path)
        with db:
            db.execute(f'ALTER TABLE "{safe}" RENAME TO "{layer.replace(chr(34), chr(34) * 2)}"')
            for table in ("gpkg_contents", "gpkg_geometry_columns", "gpkg_ogr_contents"):
                db.execute(f"UPDATE {table} SET table_name = ? WHERE table_name = ?", (layer, safe))
        db.close()


# --- the cases --------------------------------------------------------------------------------

Maker = Callable[[Path], Path]
_MAKERS: list[Maker] = []


def _case(maker: Maker) -> Maker:
    _MAKERS.append(maker)
    return maker


@_case
def truncated_json(folder: Path) -> Path:
    f = folder / "truncated_json.geojson"
    f.write_text(json.dumps(_fc(_ls(_line()), _ls(_line(offset_m=1.5))))[:300])
    return f


@_case
def invalid_json(folder: Path) -> Path:
    f = folder / "invalid_json.geojson"
    f.write_text("{'type': 'FeatureCollection', features: [}}} trailing")
    return f


@_case
def binary_garbage_json(folder: Path) -> Path:
    f = folder / "binary_garbage.geojson"
    f.write_bytes(bytes(np.random.default_rng(1).integers(0, 256, 4096, dtype=np.uint8)))
    return f


@_case
def empty_file(folder: Path) -> Path:
    f = folder / "empty_file.geojson"
    f.write_bytes(b"")
    return f


@_case
def long_number(folder: Path) -> Path:
    """A coordinate with 5000 digits (beyond Python's int-from-text limit)."""
    f = folder / "long_number.geojson"
    line = json.dumps(_line())
    f.write_text(
        '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},'
        '"geometry":{"type":"LineString","coordinates":[[' + "9" * 5000 + ",1]," + line[1:] + "}}]}"
    )
    return f


@_case
def deeply_nested(folder: Path) -> Path:
    """Coordinates nested 100 000 arrays deep."""
    f = folder / "deeply_nested.geojson"
    depth = 100_000
    f.write_text(
        '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},'
        '"geometry":{"type":"LineString","coordinates":' + "[" * depth + "0" + "]" * depth + "}}]}"
    )
    return f


@_case
def features_not_a_list(folder: Path) -> Path:
    f = folder / "features_not_a_list.geojson"
    _write_json(f, {"type": "FeatureCollection", "features": _feature(_ls(_line()), 1)})
    return f


@_case
def coordinates_too_deep(folder: Path) -> Path:
    """LineStrings whose coordinates are nested one level too deep (polygon-like)."""
    f = folder / "coordinates_too_deep.geojson"
    _write_json(f, _fc(_ls([_line()]), _ls([_line(offset_m=1.5)])))
    return f


@_case
def coordinates_are_text(folder: Path) -> Path:
    f = folder / "coordinates_are_text.geojson"
    _write_json(f, _fc(_ls("0 0, 1 1"), _ls([["a", "b"], ["c", "d"]])))
    return f


@_case
def unknown_geometry_type(folder: Path) -> Path:
    f = folder / "unknown_geometry_type.geojson"
    _write_json(f, _fc({"type": "Spline", "coordinates": _line()}))
    return f


@_case
def points_and_polygons(folder: Path) -> Path:
    f = folder / "points_and_polygons.geojson"
    ring = _lonlat([[0, 0], [5, 0], [5, 5], [0, 0]])
    _write_json(
        f,
        _fc(
            {"type": "Point", "coordinates": ring[0]},
            {"type": "Polygon", "coordinates": [ring]},
            {"type": "MultiPoint", "coordinates": ring},
        ),
    )
    return f


@_case
def mixed_types(folder: Path) -> Path:
    """Two lines among points and a polygon: the lines are used, the rest reported."""
    f = folder / "mixed_types.geojson"
    ring = _lonlat([[0, 0], [5, 0], [5, 5], [0, 0]])
    _write_json(
        f,
        _fc(
            _ls(_line()),
            {"type": "Point", "coordinates": ring[0]},
            {"type": "Polygon", "coordinates": [ring]},
            _ls(_line(offset_m=1.5)),
        ),
    )
    return f


@_case
def null_and_empty_geometries(folder: Path) -> Path:
    f = folder / "null_and_empty.geojson"
    _write_json(
        f,
        _fc(
            None,
            _ls([]),
            {"type": "MultiLineString", "coordinates": []},
            {"type": "GeometryCollection", "geometries": []},
        ),
    )
    return f


@_case
def nan_coordinates(folder: Path) -> Path:
    f = folder / "nan_coordinates.geojson"
    bad = [[float("nan"), LAT0], *_line()[1:]]
    _write_json(f, _fc(_ls(bad), _ls([[LON0, float("nan")], [float("nan"), float("nan")]])))
    return f


@_case
def infinite_coordinates(folder: Path) -> Path:
    f = folder / "infinite_coordinates.geojson"
    f.write_text(
        json.dumps(_fc(_ls(_line()), _ls(_line(offset_m=1.5))))
        .replace(str(_line()[3][0]), "1e999", 1)
        .replace(str(_line()[5][1]), "-1e999", 1)
    )
    return f


@_case
def nan_in_geopackage(folder: Path) -> Path:
    f = folder / "nan_in_geopackage.gpkg"
    xy = np.asarray(_line())
    xy_nan, xy_inf = xy.copy(), xy.copy()
    xy_nan[4, 0] = np.nan
    xy_inf[7, 1] = np.inf
    with np.errstate(invalid="ignore"):
        _write_gpkg(f, "ruts", [shapely.linestrings(xy_nan), shapely.linestrings(xy_inf)])
    return f


@_case
def out_of_range(folder: Path) -> Path:
    """Longitude 600 and latitude 95 in a lon/lat layer."""
    f = folder / "out_of_range.geojson"
    line = [[600.0 + k * 1e-5, 95.0] for k in range(10)]
    _write_json(f, _fc(_ls(line), _ls([[x, y + 1e-5] for x, y in line])))
    return f


@_case
def absurd_magnitudes(folder: Path) -> Path:
    f = folder / "absurd_magnitudes.geojson"
    line = [[1e300 * (k + 1), -1e300 * (k + 1)] for k in range(5)]
    _write_json(f, _fc(_ls(line), _ls([[x, y * 2] for x, y in line])))
    return f


@_case
def planet_sized_line(folder: Path) -> Path:
    """Two vertices 19 000 km apart in Web Mercator: valid numbers, absurd for a rut."""
    f = folder / "planet_sized_line.gpkg"
    _write_gpkg(
        f,
        "ruts",
        [
            shapely.linestrings([[-9.5e6, 0.0], [9.5e6, 10.0]]),
            shapely.linestrings([[-9.5e6, 3.0], [9.5e6, 13.0]]),
        ],
        crs="EPSG:3857",
    )
    return f


@_case
def xyz_and_xyzm(folder: Path) -> Path:
    """Positions with 3 and 4 numbers (heights and measures): x and y are used."""
    f = folder / "xyz_and_xyzm.geojson"
    a = [[x, y, 210.0 + k * 0.01] for k, (x, y) in enumerate(_line())]
    b = [[x, y, 210.0, float(k)] for k, (x, y) in enumerate(_line(offset_m=1.5))]
    _write_json(f, _fc(_ls(a), _ls(b)))
    return f


@_case
def one_number_positions(folder: Path) -> Path:
    f = folder / "one_number_positions.geojson"
    _write_json(f, _fc(_ls([[LON0], [LON0 + 1e-4], [LON0 + 2e-4]])))
    return f


@_case
def single_vertex_lines(folder: Path) -> Path:
    f = folder / "single_vertex_lines.geojson"
    p = _line()[0]
    _write_json(
        f, _fc(_ls([p]), _ls([p, p, p]), {"type": "MultiLineString", "coordinates": [[p], [p, p]]})
    )
    return f


@_case
def duplicate_lines(folder: Path) -> Path:
    """The same line three times: nothing to pair, but nothing to crash on either."""
    f = folder / "duplicate_lines.geojson"
    _write_json(f, _fc(_ls(_line()), _ls(_line()), _ls(_line())))
    return f


@_case
def self_overlapping(folder: Path) -> Path:
    """Lines that run back and forth over themselves five times."""
    f = folder / "self_overlapping.geojson"
    x = np.concatenate([np.linspace(0, 20, 41), np.linspace(20, 0, 41)] * 5)
    y = 0.5 * np.sin(x / 5.0)
    _write_json(
        f, _fc(_ls(_lonlat(np.column_stack([x, y]))), _ls(_lonlat(np.column_stack([x, y + 1.5]))))
    )
    return f


@_case
def gpkg_not_sqlite(folder: Path) -> Path:
    f = folder / "gpkg_not_sqlite.gpkg"
    f.write_bytes(b"PK\x03\x04 this is no database " * 100)
    return f


@_case
def gpkg_plain_sqlite(folder: Path) -> Path:
    """An SQLite database without GeoPackage tables."""
    f = folder / "gpkg_plain_sqlite.gpkg"
    with sqlite3.connect(f) as db:
        db.execute("CREATE TABLE ruts (id INTEGER PRIMARY KEY, wkt TEXT)")
        db.execute("INSERT INTO ruts (wkt) VALUES ('LINESTRING (0 0, 1 1)')")
    db.close()
    return f


@_case
def gpkg_truncated(folder: Path) -> Path:
    whole = folder / "_whole.gpkg"
    _write_gpkg(
        whole, "ruts", [shapely.linestrings(_line()), shapely.linestrings(_line(offset_m=1.5))]
    )
    f = folder / "gpkg_truncated.gpkg"
    data = whole.read_bytes()
    f.write_bytes(data[: len(data) // 3])
    whole.unlink()
    return f


#: layer names that try SQL, paths, terminal escapes, line breaks and length
HOSTILE_NAMES = (
    'ruts"; DROP TABLE gpkg_contents; --',
    "../../../etc/passwd",
    "\x1b[2J\x1b[31mred alert",
    "two\nlines",
    "x" * 200,
)


@_case
def gpkg_hostile_layer_names(folder: Path) -> Path:
    """Several line layers with hostile names: the answer lists them quoted."""
    f = folder / "gpkg_hostile_layer_names.gpkg"
    for k, name in enumerate(HOSTILE_NAMES):
        _write_gpkg(f, name, [shapely.linestrings(_line(offset_m=3.0 * k))])
    return f


@_case
def gpkg_odd_layer_name(folder: Path) -> Path:
    """One layer with an odd (quote, SQL, unicode) name: read like any other."""
    f = folder / "gpkg_odd_layer_name.gpkg"
    _write_gpkg(
        f,
        "sp\u00e4r \u8f4d'; SELECT 1; --",
        [shapely.linestrings(_line()), shapely.linestrings(_line(offset_m=1.5))],
    )
    return f


def _shapefile_members() -> dict[str, bytes]:
    """The files of a small Shapefile of two lines, written by GDAL in a scratch folder."""
    import tempfile

    wkb = shapely.to_wkb(
        np.asarray(
            [shapely.linestrings(_line()), shapely.linestrings(_line(offset_m=1.5))], dtype=object
        )
    )
    with tempfile.TemporaryDirectory() as scratch:
        raw_write(
            str(Path(scratch) / "ruts.shp"),
            wkb,
            [np.arange(2)],
            ["n"],
            layer="ruts",
            driver="ESRI Shapefile",
            crs="EPSG:4326",
            geometry_type="LineString",
        )
        return {p.name: p.read_bytes() for p in sorted(Path(scratch).iterdir())}


@_case
def zip_path_traversal(folder: Path) -> Path:
    f = folder / "zip_path_traversal.zip"
    with zipfile.ZipFile(f, "w") as z:
        for name, data in _shapefile_members().items():
            z.writestr("../../../tmp/rutwise_escape/" + name, data)
        z.writestr("/etc/cron.d/rutwise", b"* * * * * root true\n")
    return f


@_case
def zip_not_a_zip(folder: Path) -> Path:
    f = folder / "zip_not_a_zip.zip"
    f.write_bytes(b"PK\x05\x06" + b"\x00" * 40 + b"not really")
    return f


@_case
def gpx_entity_expansion(folder: Path) -> Path:
    """A GPX file whose XML entities expand a billionfold."""
    f = folder / "gpx_entity_expansion.gpx"
    entities = ['<!ENTITY e0 "lol">'] + [
        f'<!ENTITY e{k} "{"".join(f"&e{k - 1};" for _ in range(10))}">' for k in range(1, 10)
    ]
    f.write_text(
        '<?xml version="1.0"?>\n<!DOCTYPE gpx [\n' + "\n".join(entities) + "\n]>\n"
        '<gpx version="1.1" creator="x"><trk><name>&e9;</name><trkseg>'
        '<trkpt lat="55.4" lon="-3.0"/><trkpt lat="55.41" lon="-3.0"/>'
        "</trkseg></trk></gpx>\n"
    )
    return f


@_case
def fgb_garbage(folder: Path) -> Path:
    """FlatGeobuf magic bytes, then a header claiming a huge size."""
    f = folder / "fgb_garbage.fgb"
    f.write_bytes(b"fgb\x03fgb\x00" + struct.pack("<I", 0x7FFFFFF0) + b"\xff" * 512)
    return f


def _patch_tiff_size(data: bytes, width: int, height: int) -> bytes:
    """A classic little-endian TIFF with its first image's size tags (and its rows per
    strip) rewritten: the header then declares ``width`` x ``height`` pixels in one strip."""
    out = bytearray(data)
    assert out[:4] == b"II*\x00", "a classic little-endian TIFF"
    ifd = struct.unpack_from("<I", out, 4)[0]
    (count,) = struct.unpack_from("<H", out, ifd)
    wanted = {256: width, 257: height, 278: height}  # ImageWidth, ImageLength, RowsPerStrip
    for k in range(count):
        at = ifd + 2 + 12 * k
        tag = struct.unpack_from("<H", out, at)[0]
        if tag in wanted:
            struct.pack_into("<HHII", out, at, tag, 4, 1, wanted[tag])  # one LONG
    return bytes(out)


@_case
def raster_absurd_dimensions(folder: Path) -> Path:
    """A 1 kB GeoTIFF whose header declares 4 000 000 x 4 000 000 pixels."""
    import rasterio
    from rasterio.transform import Affine

    f = folder / "raster_absurd_dimensions.tif"
    with rasterio.open(
        f,
        "w",
        driver="GTiff",
        width=16,
        height=16,
        count=1,
        dtype="uint8",
        crs="EPSG:32630",
        blockysize=16,
        transform=Affine(0.05, 0.0, 500_000.0, 0.0, -0.05, 6_100_000.0),
    ) as ds:
        ds.write(np.zeros((1, 16, 16), dtype=np.uint8))
    f.write_bytes(_patch_tiff_size(f.read_bytes(), 4_000_000, 4_000_000))
    return f


@_case
def raster_not_a_tiff(folder: Path) -> Path:
    f = folder / "raster_not_a_tiff.tif"
    f.write_bytes(b"II*\x00" + b"\xff\xff\xff\x7f" + b"\x00" * 64)
    return f


# --- the large cases (made at test or bench time only) --------------------------------------


def million_vertices(folder: Path, vertices: int = 1_000_000) -> Path:
    """Two lines of half a million vertices each, 2 mm apart (1 km of rut each)."""
    f = folder / "million_vertices.gpkg"
    n = vertices // 2
    x = np.arange(n) * 0.002
    y = 0.5 * np.sin(x / 5.0)
    lines = [
        shapely.linestrings(np.column_stack([x, y + dy]) + [500_000.0, 6_100_000.0])
        for dy in (0.0, 1.5)
    ]
    _write_gpkg(f, "ruts", lines, crs="EPSG:32630")
    return f


def zip_bomb(folder: Path, megabytes: int = 64) -> Path:
    """A zipped Shapefile whose .dbf member expands from a few kB to ``megabytes`` MB."""
    f = folder / "zip_bomb.zip"
    chunk = b"\x20" * (1 << 20)
    with zipfile.ZipFile(f, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=9) as z:
        for name, data in _shapefile_members().items():
            if not name.endswith(".dbf"):
                z.writestr(name, data)
        with z.open("ruts.dbf", "w", force_zip64=True) as member:
            for _ in range(megabytes):
                member.write(chunk)
    return f


#: per case: group, CLI exit status, words of the CLI's answer, HTTP status, problem type
EXPECTED: dict[str, tuple[str, int, tuple[str, ...], int, str]] = {
    "truncated_json": ("JSON syntax", 2, ("cannot read", "unterminated"), 400, "bad-input"),
    "invalid_json": ("JSON syntax", 2, ("cannot read",), 400, "bad-input"),
    "binary_garbage_json": ("JSON syntax", 2, ("cannot read",), 400, "bad-input"),
    "empty_file": ("JSON syntax", 2, ("cannot read",), 400, "empty-upload"),
    "long_number": ("absurd magnitudes", 2, ("unrecognized number",), 400, "bad-input"),
    "deeply_nested": ("JSON nesting", 2, ("too many nested",), 400, "bad-input"),
    "features_not_a_list": ("GeoJSON structure", 2, ("cannot read", "features"), 400, "bad-input"),
    "coordinates_too_deep": (
        "GeoJSON structure",
        2,
        ("no usable line", "without geometry"),
        400,
        "bad-input",
    ),
    "coordinates_are_text": (
        "GeoJSON structure",
        2,
        ("no usable line", "without geometry"),
        400,
        "bad-input",
    ),
    "unknown_geometry_type": ("GeoJSON structure", 2, ("no usable line",), 400, "bad-input"),
    "points_and_polygons": (
        "not lines",
        2,
        ("no line geometries", "point, polygon"),
        400,
        "bad-input",
    ),
    "mixed_types": ("mixed types (accepted)", 0, ("skipped: not a line",), 200, ""),
    "null_and_empty_geometries": (
        "empty geometries",
        2,
        ("no usable line", "empty geometry"),
        400,
        "bad-input",
    ),
    "nan_coordinates": ("NaN and infinity", 2, ("not a finite number",), 400, "bad-input"),
    "infinite_coordinates": (
        "NaN and infinity",
        2,
        ("unrecognized number: 1e999",),
        400,
        "bad-input",
    ),
    "nan_in_geopackage": ("NaN and infinity", 2, ("not a finite number",), 400, "bad-input"),
    "out_of_range": ("coordinates out of range", 2, ("latitude beyond",), 400, "crs-error"),
    "absurd_magnitudes": ("absurd magnitudes", 2, ("latitude beyond",), 400, "crs-error"),
    "planet_sized_line": (
        "absurd magnitudes",
        2,
        ("km long", "rutwise_max_layer_km"),
        413,
        "limit-exceeded",
    ),
    "xyz_and_xyzm": ("3D/4D coordinates (accepted)", 0, ("ruts read",), 200, ""),
    "one_number_positions": ("3D/4D coordinates", 2, ("no usable line",), 400, "bad-input"),
    "single_vertex_lines": ("degenerate lines", 2, ("two distinct vertices",), 400, "bad-input"),
    "duplicate_lines": ("degenerate lines (accepted)", 0, ("repeat the geometry",), 200, ""),
    "self_overlapping": ("degenerate lines (accepted)", 0, ("ruts read",), 200, ""),
    "gpkg_not_sqlite": ("GeoPackage", 2, ("cannot read",), 400, "bad-input"),
    "gpkg_plain_sqlite": ("GeoPackage", 2, ("cannot read", "geopackage tables"), 400, "bad-input"),
    "gpkg_truncated": ("GeoPackage", 2, ("cannot read", "malformed"), 400, "bad-input"),
    "gpkg_hostile_layer_names": (
        "GeoPackage layer names",
        2,
        ("several line layers",),
        400,
        "bad-input",
    ),
    "gpkg_odd_layer_name": ("GeoPackage layer names (accepted)", 0, ("ruts read",), 200, ""),
    "zip_path_traversal": (
        "zip archives",
        2,
        ("outside the archive",),
        415,
        "unsupported-media-type",
    ),
    "zip_not_a_zip": ("zip archives", 2, ("empty zip archive",), 415, "unsupported-media-type"),
    "gpx_entity_expansion": ("GPX / XML", 2, ("cannot read", "laugh"), 400, "bad-input"),
    "fgb_garbage": ("FlatGeobuf", 2, ("no layer of lines",), 400, "bad-input"),
    "raster_absurd_dimensions": ("raster", 2, ("pixels",), 413, "limit-exceeded"),
    "raster_not_a_tiff": ("raster", 2, ("cannot read",), 400, "bad-input"),
    "million_vertices": ("a million vertices", 0, ("ruts read",), 413, "limit-exceeded"),
    "zip_bomb": ("zip archives", 2, ("would expand",), 415, "unsupported-media-type"),
}


def case(name: str, file: Path) -> Case:
    """The case ``name`` (a key of :data:`EXPECTED`) for its written ``file``."""
    group, cli_exit, words, status, problem = EXPECTED[name]
    return Case(name, group, file, cli_exit, words, status, problem)


def write_corpus(folder: Path, large: bool = False) -> list[Case]:
    """Write every case into ``folder`` (created); with ``large``, also the two large ones."""
    folder.mkdir(parents=True, exist_ok=True)
    makers = _MAKERS + ([million_vertices, zip_bomb] if large else [])
    return [case(make.__name__, make(folder)) for make in makers]


if __name__ == "__main__":  # pragma: no cover
    target = Path(sys.argv[1] if len(sys.argv) > 1 else "corpus")
    for case in write_corpus(target, large="--large" in sys.argv):
        print(f"{case.file.stat().st_size:>10}  {case.file}")
