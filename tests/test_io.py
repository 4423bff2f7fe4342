"""Reading rut layers (geoops.io): formats, layer choice, feature ids, skipped features.

Layers are simulated two-track passes (tests/conftest.py) placed on Earth with pyproj and
written by hand (GeoJSON, GPX) or with pyogrio (GeoPackage, FlatGeobuf, Shapefile).
"""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np
import pyproj
import pytest
import shapely
from pyogrio.raw import write as raw_write

from geoops.errors import BadInput
from geoops.io import choose_layer, read_layer

from .conftest import line_geojson, place, two_track_file, two_tracks, write_geojson, write_ogr


def _lonlat_lines() -> dict[str, np.ndarray]:
    return {k: place(v, "EPSG:4326") for k, v in two_tracks().lines.items()}


# --- GeoJSON ------------------------------------------------------------------------------------


def test_geojson_integer_ids_are_kept(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, ids=[17, 4])
    layer = read_layer(path)
    assert layer.ids == ["17", "4"]  # source: RFC 7946 section 3.2 (a Feature's "id" member)
    assert pyproj.CRS.from_user_input(layer.crs).equals(pyproj.CRS.from_epsg(4326))
    # coordinates come back as written, lon/lat order
    np.testing.assert_allclose(layer.parts[0][0], _lonlat_lines()["rear"], atol=1e-12)
    # source: RFC 7946 section 4 (WGS 84 longitude, latitude)


def test_geojson_string_ids_are_kept(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, ids=["HW-rear", "HW-front"])
    assert read_layer(path).ids == ["HW-rear", "HW-front"]  # source: RFC 7946 section 3.2


def test_geojson_without_ids_uses_the_zero_based_index(tmp_path: Path) -> None:
    far = two_tracks().lines["rear"] + 400.0
    path = two_track_file(tmp_path, extra=[far])
    assert read_layer(path).ids == ["0", "1", "2"]  # common practice: design section 3.1


def test_geojson_legacy_crs_member_is_honoured(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", ids=[1, 2])
    assert '"urn:ogc:def:crs:EPSG::27700"' in path.read_text()
    layer = read_layer(path)
    # from memory: GeoJSON 2008 specification, named `crs` member; source: pyproj EPSG:27700
    assert pyproj.CRS.from_user_input(layer.crs).equals(pyproj.CRS.from_epsg(27700))
    # British National Grid eastings/northings of southern Scotland, not degrees
    x, y = layer.all_xy().mean(axis=0)
    assert 300_000 < x < 400_000 and 550_000 < y < 650_000  # source: pyproj EPSG:27700


def test_multilinestring_parts_are_kept_per_feature(tmp_path: Path) -> None:
    rear = _lonlat_lines()["rear"]
    geoms = [
        {"type": "MultiLineString", "coordinates": [rear[:40].tolist(), rear[40:].tolist()]},
        line_geojson(_lonlat_lines()["front"]),
    ]
    layer = read_layer(write_geojson(tmp_path / "multi.geojson", geoms, ids=[8, 9]))
    assert layer.ids == ["8", "9"]
    # from memory: OGC 06-103r4 Simple Features (a MultiLineString is a set of LineStrings)
    assert [len(p) for p in layer.parts] == [2, 1]
    np.testing.assert_array_equal(np.concatenate(layer.parts[0]), rear)


def test_points_and_polygons_among_lines_are_reported_as_skipped(tmp_path: Path) -> None:
    lines = _lonlat_lines()
    geoms = [
        line_geojson(lines["rear"]),
        {"type": "Point", "coordinates": [-3.04, 55.41]},
        line_geojson(lines["front"]),
        {
            "type": "Polygon",
            "coordinates": [[[-3.0, 55.4], [-3.0, 55.5], [-2.9, 55.4], [-3.0, 55.4]]],
        },
        None,
    ]
    layer = read_layer(write_geojson(tmp_path / "mixed.geojson", geoms, ids=[1, 2, 3, 4, 5]))
    assert layer.ids == ["1", "3"]
    assert sorted(layer.skipped) == [
        ("2", "not_a_line"),
        ("4", "not_a_line"),
        ("5", "empty_geometry"),
    ]


def test_z_values_are_dropped_from_xy_but_kept(tmp_path: Path) -> None:
    lines = _lonlat_lines()
    heights = {k: np.linspace(310.0, 318.0, len(v)) for k, v in lines.items()}
    geoms = [shapely.LineString(np.column_stack([lines[k], heights[k]])) for k in ("rear", "front")]
    path = write_ogr(tmp_path / "z.gpkg", geoms, "GPKG", "EPSG:4326", geometry_type="LineString Z")
    layer = read_layer(path)
    assert all(p.shape[1] == 2 for f in layer.parts for p in f)
    np.testing.assert_array_equal(layer.parts[0][0], lines["rear"])
    assert layer.z[0] is not None
    # from memory: OGC 06-103r4 Simple Features (LineString Z: a height per vertex)
    np.testing.assert_array_equal(layer.z[0][0], heights["rear"])


def test_id_field_values_are_used(tmp_path: Path) -> None:
    lines = _lonlat_lines()
    geoms = [line_geojson(lines["rear"]), line_geojson(lines["front"])]
    props = [{"rut_ref": "HH-0931", "n": 1001}, {"rut_ref": "HH-0932", "n": None}]
    path = write_geojson(tmp_path / "refs.geojson", geoms, ids=[1, 2], properties=props)
    assert read_layer(path, id_field="rut_ref").ids == ["HH-0931", "HH-0932"]
    # an integer column with a null reads back as floats: ids must not grow a ".0" nor say nan
    assert read_layer(path, id_field="n").ids == ["1001", ""]


def test_unknown_id_field_lists_the_fields(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, fmt="gpkg")
    with pytest.raises(BadInput, match=r"'rut_no'.*has: ref\b.*--id-field"):
        read_layer(path, id_field="rut_no")


# --- GeoPackage ---------------------------------------------------------------------------------


def test_geopackage_single_line_layer_keeps_fids(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg", ids=[41, 97])
    layer = read_layer(path)
    assert layer.layer == "ruts" and layer.driver == "GPKG"
    # source: OGC 12-128 GeoPackage (a feature table's INTEGER PRIMARY KEY is its fid)
    assert layer.ids == ["41", "97"]
    assert pyproj.CRS.from_user_input(layer.crs).equals(pyproj.CRS.from_epsg(27700))


def _two_layer_gpkg(tmp_path: Path) -> Path:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg", layer="ruts_digitised")
    fence = place(np.array([[-50.0, 35.0], [60.0, 38.0]]), "EPSG:27700")
    write_ogr(path, [shapely.LineString(fence)], "GPKG", "EPSG:27700", layer="fence_lines")
    return path


def test_geopackage_several_line_layers_and_none_named_lists_them(tmp_path: Path) -> None:
    path = _two_layer_gpkg(tmp_path)
    with pytest.raises(
        BadInput, match=r"several line layers: ruts_digitised, fence_lines.*--layer"
    ):
        read_layer(path)


def test_geopackage_named_layer_is_read(tmp_path: Path) -> None:
    path = _two_layer_gpkg(tmp_path)
    assert read_layer(path, layer="ruts_digitised").ids == ["1", "2"]
    assert read_layer(path, layer="fence_lines").ids == ["1"]


def test_geopackage_missing_layer_lists_the_layers(tmp_path: Path) -> None:
    path = _two_layer_gpkg(tmp_path)
    with pytest.raises(BadInput, match=r"'wheel_ruts'.*ruts_digitised, fence_lines.*--layer"):
        read_layer(path, layer="wheel_ruts")


def test_geopackage_attribute_table_is_not_a_line_layer(tmp_path: Path) -> None:
    """A table without geometry (e.g. run_metadata in our own output) is not a candidate."""
    path = two_track_file(tmp_path, fmt="gpkg")
    raw_write(str(path), None, [np.array(["a note"], dtype=object)], ["text"], layer="notes")
    assert choose_layer(str(path), None) == "ruts"


def test_geopackage_mixed_geometries_reports_skipped_fids(tmp_path: Path) -> None:
    lines = _lonlat_lines()
    geoms = [
        shapely.LineString(lines["rear"]),
        shapely.Point(-3.04, 55.41),
        shapely.MultiLineString([lines["front"][:30], lines["front"][30:]]),
        shapely.Polygon([(-3.0, 55.4), (-3.0, 55.5), (-2.9, 55.4)]),
    ]
    path = write_ogr(tmp_path / "mixed.gpkg", geoms, "GPKG", "EPSG:4326", geometry_type="Unknown")
    layer = read_layer(path)
    assert layer.ids == ["1", "3"]  # source: OGC 12-128 GeoPackage (INTEGER PRIMARY KEY)
    assert layer.skipped == [("2", "not_a_line"), ("4", "not_a_line")]
    assert [len(p) for p in layer.parts] == [1, 2]


# --- GPX, FlatGeobuf, zipped Shapefile ------------------------------------------------------------


def _gpx_track(xy: np.ndarray, name: str) -> str:
    half = len(xy) // 2
    segments = [xy[: half + 1], xy[half:]]
    body = "".join(
        "<trkseg>"
        + "".join(f'<trkpt lat="{lat:.9f}" lon="{lon:.9f}"/>' for lon, lat in seg)
        + "</trkseg>"
        for seg in segments
    )
    return f"<trk><name>{name}</name>{body}</trk>"


def test_gpx_tracks_are_read_without_naming_a_layer(tmp_path: Path) -> None:
    lines = _lonlat_lines()
    path = tmp_path / "walk.gpx"
    path.write_text(
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<gpx version="1.1" creator="rutwise tests" xmlns="http://www.topografix.com/GPX/1/1">'
        + _gpx_track(lines["rear"], "rear rut")
        + _gpx_track(lines["front"], "front rut")
        + "</gpx>\n"
    )
    layer = read_layer(path)  # routes (empty) and point layers exist too
    assert layer.layer == "tracks"
    assert layer.ids == ["0", "1"]
    # from memory: GPX 1.1 schema (trk holds trkseg parts; lat/lon in WGS 84 degrees)
    assert [len(p) for p in layer.parts] == [2, 2]
    np.testing.assert_allclose(
        np.concatenate(layer.parts[0])[[0, -1]], lines["rear"][[0, -1]], atol=1e-9
    )
    assert pyproj.CRS.from_user_input(layer.crs).equals(pyproj.CRS.from_epsg(4326))


def test_flatgeobuf(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, crs="EPSG:32633", fmt="fgb")
    layer = read_layer(path)
    assert layer.driver == "FlatGeobuf" and layer.ids == ["0", "1"]
    # source: pyproj EPSG:32633 definition (CRS carried by the FlatGeobuf header)
    assert pyproj.CRS.from_user_input(layer.crs).equals(pyproj.CRS.from_epsg(32633))
    # the writer's spatial index may reorder features; ids follow the file's order
    written = [place(two_tracks().lines[k], "EPSG:32633") for k in ("rear", "front")]
    read = sorted((f[0] for f in layer.parts), key=len)
    for got, want in zip(read, sorted(written, key=len), strict=True):
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-9)


def test_zipped_shapefile(tmp_path: Path) -> None:
    lines = {k: place(v, "EPSG:27700") for k, v in two_tracks().lines.items()}
    geoms = [shapely.LineString(lines[k]) for k in ("rear", "front")]
    write_ogr(tmp_path / "ruts.shp", geoms, "ESRI Shapefile", "EPSG:27700")
    archive = tmp_path / "ruts.zip"
    with zipfile.ZipFile(archive, "w") as zf:
        for ext in ("shp", "shx", "dbf", "prj"):
            zf.write(tmp_path / f"ruts.{ext}", f"ruts.{ext}")
    layer = read_layer(archive)
    assert layer.ids == ["0", "1"]
    # source: pyproj EPSG:27700 definition (from the .prj in the archive)
    assert pyproj.CRS.from_user_input(layer.crs).equals(pyproj.CRS.from_epsg(27700))


# --- errors -------------------------------------------------------------------------------------


def test_folder_is_refused(tmp_path: Path) -> None:
    with pytest.raises(BadInput, match="folder"):
        read_layer(tmp_path)


def test_points_only_names_what_it_holds(tmp_path: Path) -> None:
    pts = [{"type": "Point", "coordinates": [-3.04, 55.41]}] * 2
    with pytest.raises(BadInput, match=r"no line geometries \(it holds: Point\)"):
        read_layer(write_geojson(tmp_path / "pts.geojson", pts))


def test_duplicate_geojson_ids_are_not_renumbered_silently(tmp_path: Path) -> None:
    """GDAL makes duplicate feature ids unique; the layer must say so, since source_fids then
    name ids the file does not hold."""
    path = two_track_file(tmp_path, ids=[5, 5])
    layer = read_layer(path)
    assert len(set(layer.ids)) == 2
    assert any("id = 5" in w for w in layer.warnings)
