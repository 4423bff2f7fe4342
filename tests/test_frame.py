"""Behaviour of geoops.frame: choosing a CRS, checking coordinates, and the local frame itself."""

from __future__ import annotations

import dataclasses
import math
import pickle

import numpy as np
import pyproj
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from geoops import frame as frame_mod
from geoops.errors import BadInput, CrsError
from geoops.frame import LocalFrame, build_frame, resolve_crs

WGS84 = pyproj.CRS("EPSG:4326")
CA_ZONE3_FTUS = pyproj.CRS("EPSG:2227")

ENGINEERING_WKT = (
    'ENGCRS["Site grid",EDATUM["Site datum"],CS[Cartesian,2],'
    'AXIS["x",east,ORDER[1],LENGTHUNIT["metre",1]],'
    'AXIS["y",north,ORDER[2],LENGTHUNIT["metre",1]]]'
)
LOCAL_CS_WKT = (
    'LOCAL_CS["Unknown",LOCAL_DATUM["Unknown",32767],UNIT["metre",1],'
    'AXIS["X",EAST],AXIS["Y",NORTH]]'
)


def arr(*values: float) -> np.ndarray:
    return np.array(values, dtype=np.float64)


def ca_points() -> tuple[np.ndarray, np.ndarray]:
    """A few vertices near 122 W, 37.5 N in EPSG:2227 (US survey feet)."""
    to_feet = pyproj.Transformer.from_crs("EPSG:4269", CA_ZONE3_FTUS, always_xy=True)
    x, y = to_feet.transform(arr(-122.02, -121.98, -122.0), arr(37.48, 37.52, 37.5))
    return np.asarray(x), np.asarray(y)


# --------------------------------------------------------------------------------------------
# resolve_crs


def test_no_crs_is_an_error_that_names_the_option() -> None:
    with pytest.raises(CrsError) as info:
        resolve_crs(None, None)
    assert info.value.message == "The layer has no coordinate reference system."
    assert "--crs" in info.value.hint
    assert "EPSG:4326" in info.value.hint


def test_blank_override_counts_as_none() -> None:
    with pytest.raises(CrsError, match="no coordinate reference system"):
        resolve_crs(None, "  ")
    assert resolve_crs("EPSG:32631", "").to_epsg() == 32631


def test_override_wins_over_the_layer_crs() -> None:
    assert resolve_crs("EPSG:4326", "EPSG:2227") == CA_ZONE3_FTUS
    assert resolve_crs(WGS84, None) == WGS84
    assert resolve_crs(None, CA_ZONE3_FTUS) == CA_ZONE3_FTUS


@pytest.mark.parametrize("text", ["EPSG:999999", "not a crs at all"])
def test_unparseable_crs_is_named_in_the_error(text: str) -> None:
    with pytest.raises(CrsError) as info:
        resolve_crs(None, text)
    assert repr(text) in info.value.message
    assert "--crs" in info.value.hint


@pytest.mark.parametrize(
    ("definition", "words"),
    [
        (ENGINEERING_WKT, "no link to the Earth"),
        (LOCAL_CS_WKT, "no link to the Earth"),
        ("EPSG:5703", "heights only"),  # NAVD88 height
        ("EPSG:4978", "geocentric"),  # WGS 84 geocentric
    ],
)
def test_crs_without_horizontal_positions_is_rejected(definition: str, words: str) -> None:
    with pytest.raises(CrsError, match=words) as info:
        resolve_crs(definition, None)
    assert "--crs" in info.value.hint


def test_compound_crs_gives_its_horizontal_part() -> None:
    assert resolve_crs("EPSG:2227+5703", None) == CA_ZONE3_FTUS
    assert resolve_crs("EPSG:9707", None) == WGS84  # WGS 84 + EGM96 height


def test_bound_and_3d_crs_are_reduced_to_2d_horizontal() -> None:
    bound = resolve_crs("+proj=longlat +ellps=intl +towgs84=-87,-98,-121 +no_defs", None)
    assert bound.is_geographic and not bound.is_bound
    three_d = resolve_crs("EPSG:4979", None)
    assert three_d.is_geographic and len(three_d.axis_info) == 2


# --------------------------------------------------------------------------------------------
# build_frame: rejections


def test_empty_or_mismatched_layers_are_bad_input() -> None:
    with pytest.raises(BadInput, match="no vertices"):
        build_frame(arr(), arr(), WGS84)
    with pytest.raises(BadInput, match="x values"):
        build_frame(arr(1.0, 2.0), arr(1.0), WGS84)


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf])
def test_non_finite_coordinates_are_rejected(bad: float) -> None:
    with pytest.raises(CrsError, match="not a finite number") as info:
        build_frame(arr(3.0, bad, 3.1), arr(45.0, 45.0, 45.1), WGS84)
    assert "vertex 1" in info.value.message


def test_latitude_beyond_90_is_rejected_and_swap_named() -> None:
    # San Francisco given latitude first
    with pytest.raises(CrsError, match="latitude beyond") as info:
        build_frame(arr(37.8, 37.81), arr(-122.4, -122.41), WGS84)
    assert "latitude/longitude swapped" in info.value.message


def test_longitude_up_to_540_is_accepted_beyond_is_not() -> None:
    frame, notes = build_frame(arr(539.9, 539.95), arr(10.0, 10.0), WGS84)
    assert frame.lon0 == pytest.approx(179.925) and notes == []
    with pytest.raises(CrsError, match="longitude beyond"):
        build_frame(arr(541.0), arr(10.0), WGS84)


def test_projected_values_in_a_geographic_crs_are_rejected() -> None:
    with pytest.raises(CrsError, match="projected metres or feet") as info:
        build_frame(arr(500_000.0, 500_100.0), arr(4_000_000.0, 4_000_100.0), WGS84)
    assert "--crs" in info.value.hint


def test_coordinates_outside_the_area_of_use_are_rejected() -> None:
    etrs89 = pyproj.CRS("EPSG:4258")  # Europe
    with pytest.raises(CrsError, match="outside the area of use of ETRS89") as info:
        build_frame(arr(151.2, 151.3), arr(-33.9, -33.8), etrs89)  # Sydney
    assert "swapped" not in info.value.message
    assert "--crs" in info.value.hint


def test_coordinates_slightly_outside_the_area_are_accepted() -> None:
    # Zone 3's nominal area ends at 123.02 W; 124 W is within the margin
    to_feet = pyproj.Transformer.from_crs("EPSG:4269", CA_ZONE3_FTUS, always_xy=True)
    x, y = to_feet.transform(arr(-124.0, -123.99), arr(37.5, 37.51))
    frame, notes = build_frame(np.asarray(x), np.asarray(y), CA_ZONE3_FTUS)
    assert frame.lon0 == pytest.approx(-123.995) and notes == []


def test_outside_the_area_but_swapped_inside_is_named() -> None:
    etrs89 = pyproj.CRS("EPSG:4258")
    with pytest.raises(CrsError, match="latitude/longitude swapped") as info:
        build_frame(arr(50.11, 50.12), arr(8.68, 8.69), etrs89)  # Frankfurt, latitude first
    assert "Swap x and y" in info.value.hint
    x, y = ca_points()
    with pytest.raises(CrsError, match="easting/northing"):
        build_frame(y, x, CA_ZONE3_FTUS)


def test_degrees_outside_a_projected_crs_area_are_rejected_with_hint() -> None:
    with pytest.raises(CrsError, match="look like longitude/latitude degrees") as info:
        build_frame(arr(-122.4, -122.39), arr(37.8, 37.81), CA_ZONE3_FTUS)
    assert "EPSG:4326" in info.value.hint


# --------------------------------------------------------------------------------------------
# build_frame: warnings


def test_ordinary_layers_give_no_warnings() -> None:
    for x, y, crs in [
        (arr(8.68, 8.69), arr(50.11, 50.12), pyproj.CRS("EPSG:4258")),
        (arr(-100.0, -100.01), arr(45.0, 45.01), pyproj.CRS("EPSG:4269")),
        (*ca_points(), CA_ZONE3_FTUS),
        (arr(500_000.0, 500_500.0), arr(5_000_000.0, 5_000_300.0), pyproj.CRS("EPSG:32631")),
    ]:
        _, notes = build_frame(x, y, crs)
        assert notes == []


def test_lat_lon_swap_just_outside_the_area_is_a_warning() -> None:
    # (42 E, 30 N) lies just outside ETRS89's Europe; exchanged, (30 E, 42 N) lies inside
    frame, notes = build_frame(arr(42.0, 42.01), arr(30.0, 30.01), pyproj.CRS("EPSG:4258"))
    assert len(notes) == 1 and "latitude/longitude swapped" in notes[0]
    assert frame.lat0 == pytest.approx(30.005)


def test_no_swap_warning_when_the_exchanged_values_fit_no_better() -> None:
    # NAD83's area runs from 167.65 E across the antimeridian to 40.73 W and from 14.92 N;
    # (-35, 12) lies just outside it, exchanged (12, -35) does not lie inside: no warning
    _, notes = build_frame(arr(-35.0), arr(12.0), pyproj.CRS("EPSG:4269"))
    assert notes == []
    _, notes = build_frame(arr(170.0, 170.01), arr(52.0, 52.01), pyproj.CRS("EPSG:4269"))
    assert notes == []


@pytest.mark.parametrize(
    ("code", "x", "y"),
    [
        ("EPSG:32631", (2.95, 3.05), (44.95, 45.05)),  # UTM 31N: origin lies outside its area
        ("EPSG:27700", (-1.55, -1.45), (52.25, 52.35)),  # British grid: area far from (0, 0)
        ("EPSG:3857", (2.95, 3.05), (44.95, 45.05)),  # world: values fit its area as degrees
    ],
)
def test_degrees_in_a_projected_crs_are_a_warning(
    code: str, x: tuple[float, float], y: tuple[float, float]
) -> None:
    frame, notes = build_frame(arr(*x), arr(*y), pyproj.CRS(code))
    assert len(notes) == 1
    assert "look like longitude/latitude degrees" in notes[0]
    assert "EPSG:4326" in notes[0]
    assert isinstance(frame, LocalFrame)


def test_a_layer_too_large_for_the_promise_is_a_warning() -> None:
    _, notes = build_frame(arr(10.0, 10.6), arr(50.0, 50.0), WGS84)  # about 43 km wide
    assert len(notes) == 1 and "mm per km" in notes[0]
    _, notes = build_frame(arr(10.0, 10.25), arr(50.0, 50.0), WGS84)  # about 18 km wide
    assert notes == []


# --------------------------------------------------------------------------------------------
# The frame


def test_centre_across_the_antimeridian() -> None:
    frame, notes = build_frame(arr(179.95, -179.95, 179.97), arr(-16.0, -16.05, -16.1), WGS84)
    assert notes == []
    assert -180.0 <= frame.lon0 < 180.0
    assert frame.lon0 == -180.0 and frame.lat0 == pytest.approx(-16.05)
    x, _ = frame.to_local(arr(179.95, -179.95), arr(-16.0, -16.0))
    assert 10_000.0 < x[1] - x[0] < 11_000.0  # 0.1 degree east, not 359.9 degrees west


def test_centre_with_longitudes_from_0_to_360() -> None:
    frame, _ = build_frame(arr(359.95, 360.05), arr(51.5, 51.5), WGS84)
    assert frame.lon0 == pytest.approx(0.0, abs=1e-9)


def test_centre_is_the_middle_of_the_extent() -> None:
    # many vertices bunched at the west end do not pull the centre west
    lon = np.r_[np.full(1000, 10.0), 10.2]
    frame, _ = build_frame(lon, np.full(lon.size, 45.0), WGS84)
    assert frame.lon0 == pytest.approx(10.1)


def test_local_crs_is_aeqd_in_metres_on_the_source_datum() -> None:
    x, y = ca_points()
    frame, _ = build_frame(x, y, CA_ZONE3_FTUS)
    assert frame.local_crs.is_projected
    assert frame.local_crs.axis_info[0].unit_conversion_factor == 1.0
    assert frame.local_crs.geodetic_crs == CA_ZONE3_FTUS.geodetic_crs  # NAD83, no datum shift
    conversion = frame.local_crs.coordinate_operation
    assert conversion is not None
    params = {p.name: p.value for p in conversion.params}
    assert params["Latitude of natural origin"] == frame.lat0
    assert params["Longitude of natural origin"] == frame.lon0
    assert conversion.method_code == "1125"  # EPSG Azimuthal Equidistant


@pytest.mark.parametrize("code", ["EPSG:2227", "EPSG:4326", "EPSG:27700", "EPSG:4807"])
def test_conversions_to_and_from_the_frame_involve_no_datum_shift(code: str) -> None:
    crs = pyproj.CRS(code)
    lon, lat = crs.area_of_use.west + 0.5, crs.area_of_use.south + 0.5  # type: ignore[union-attr]
    x, y = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True).transform(lon, lat)
    frame, _ = build_frame(arr(x), arr(y), crs)
    for transformer in (frame._forward, frame._inverse):
        assert transformer.accuracy == 0.0
        assert {op.type_name for op in transformer.operations or ()} == {"Conversion"}


def test_epsg_4326_output_is_longitude_then_latitude() -> None:
    x, y = ca_points()
    frame, _ = build_frame(x, y, CA_ZONE3_FTUS)
    lx, ly = frame.to_local(x, y)
    for target in ("EPSG:4326", WGS84):  # EPSG:4326 itself lists latitude first
        lon, lat = frame.from_local(lx, ly, crs=target)
        # NAD83 to WGS 84 moves points by about a metre at most
        np.testing.assert_allclose(lon, [-122.02, -121.98, -122.0], atol=2e-5)
        np.testing.assert_allclose(lat, [37.48, 37.52, 37.5], atol=2e-5)


def test_round_trip_in_feet_is_within_a_micrometre() -> None:
    x, y = ca_points()
    frame, _ = build_frame(x, y, CA_ZONE3_FTUS)
    bx, by = frame.from_local(*frame.to_local(x, y))
    assert np.abs(bx - x).max() * 0.3048 < 1e-6 and np.abs(by - y).max() * 0.3048 < 1e-6


FRAMES = [
    build_frame(arr(lon - 0.1, lon + 0.1), arr(lat - 0.09, lat + 0.09), WGS84)[0]
    for lon, lat in [(-179.95, -70.0), (0.0, 0.0), (7.3, 45.0), (-122.0, 69.9)]
]


@settings(max_examples=40, deadline=None)
@given(
    which=st.integers(0, len(FRAMES) - 1),
    du=st.lists(st.floats(-1.0, 1.0), min_size=1, max_size=20),
    dv=st.floats(-1.0, 1.0),
)
# points within PROJ's centre tolerance (found by hypothesis in CI): 0.4 mm and 0.04 mm out
@example(which=0, du=[1e-7, 1e-8, 0.5], dv=0.0)
@example(which=3, du=[1e-7], dv=1e-9)
def test_round_trip_within_1e9_degrees_and_1e6_metres(
    which: int, du: list[float], dv: float
) -> None:
    frame = FRAMES[which]
    lon = frame.lon0 + 0.1 * np.asarray(du)
    lat = np.full(lon.size, frame.lat0 + 0.09 * dv)
    x, y = frame.to_local(lon, lat)
    back_lon, back_lat = frame.from_local(x, y)
    dlon = (back_lon - lon + 180.0) % 360.0 - 180.0
    dlat = back_lat - lat
    # PROJ's azimuthal equidistant inverse returns the centre itself for points within its
    # 1e-10 (radians of arc) tolerance, about 0.64 mm: there the round trip is checked in
    # metres (under 1 mm); everywhere else to 1e-9 degrees  # source: PROJ aeqd EPS10
    near = np.hypot(x, y) < 1e-3
    metres = np.hypot(dlon * 111_320.0 * np.cos(np.radians(lat)), dlat * 110_540.0)
    assert metres.max() < 1e-3
    assert np.abs(dlon[~near]).max(initial=0.0) < 1e-9
    assert np.abs(dlat[~near]).max(initial=0.0) < 1e-9
    x2, y2 = frame.to_local(back_lon, back_lat)
    again = np.hypot(x2 - x, y2 - y)
    assert again[~near].max(initial=0.0) < 1e-6
    assert again.max() < 1e-3  # the centre tolerance again, near the centre


def test_shapes_are_kept() -> None:
    frame = FRAMES[2]
    lon = frame.lon0 + np.zeros((3, 4))
    x, y = frame.to_local(lon, lon * 0 + frame.lat0)
    assert x.shape == y.shape == (3, 4) and x.dtype == np.float64
    sx, sy = frame.to_local(frame.lon0, frame.lat0)
    assert sx.shape == () and abs(float(sx)) < 1e-9 and abs(float(sy)) < 1e-9


def test_transformers_are_made_once_and_reused() -> None:
    frame = FRAMES[1]
    frame.to_local(arr(0.0), arr(0.0))
    assert frame._forward is frame._forward
    frame.from_local(arr(0.0), arr(0.0), crs="EPSG:3857")
    first = frame._output_transformer("EPSG:3857")
    assert frame._output_transformer(pyproj.CRS("EPSG:3857")) is first
    assert frame._output_transformer(WGS84) is frame._inverse


def test_frame_is_frozen_comparable_and_picklable() -> None:
    frame = FRAMES[3]
    with pytest.raises(dataclasses.FrozenInstanceError):
        frame.lon0 = 0.0  # type: ignore[misc]
    copy = pickle.loads(pickle.dumps(frame))
    assert copy == frame and hash(copy) == hash(frame)
    lon, lat = arr(frame.lon0 + 0.05), arr(frame.lat0 - 0.05)
    np.testing.assert_array_equal(copy.to_local(lon, lat), frame.to_local(lon, lat))


def test_describe_rebuilds_the_same_frame() -> None:
    x, y = ca_points()
    frame, _ = build_frame(x, y, CA_ZONE3_FTUS)
    info = frame.describe()
    assert info["source_crs_epsg"] == "2227"
    assert info["source_crs_name"] == "NAD83 / California zone 3 (ftUS)"
    assert info["ellipsoid"].startswith("GRS 1980")
    proj = info["local_proj"]
    assert "+proj=aeqd" in proj and "+lat_0=" in proj and "+lon_0=" in proj
    assert float(info["centre_lon"]) == frame.lon0 and float(info["centre_lat"]) == frame.lat0
    lx, ly = frame.to_local(x, y)
    for definition in (proj, info["local_wkt"]):
        rebuilt = pyproj.Transformer.from_crs(CA_ZONE3_FTUS, pyproj.CRS(definition), always_xy=True)
        rx, ry = rebuilt.transform(x, y)
        assert np.hypot(rx - lx, ry - ly).max() < 1e-6
    rebuilt_frame = LocalFrame(CA_ZONE3_FTUS, pyproj.CRS(info["local_wkt"]), frame.lon0, frame.lat0)
    assert rebuilt_frame == frame


def test_describe_without_epsg_code() -> None:
    custom = pyproj.CRS("+proj=tmerc +lat_0=0 +lon_0=15 +k=1 +x_0=0 +y_0=0 +ellps=bessel")
    frame, _ = build_frame(arr(1000.0, 1200.0), arr(5_000_000.0, 5_000_100.0), custom)
    info = frame.describe()
    assert info["source_crs_epsg"] == ""
    assert "+ellps=bessel" in info["local_proj"]


def test_many_vertices_build_quickly_enough_to_use() -> None:
    rng = np.random.default_rng(5)
    lon = rng.uniform(24.9, 25.1, 100_000)
    lat = rng.uniform(60.1, 60.2, 100_000)
    frame, notes = build_frame(lon, lat, WGS84)
    assert notes == []
    assert frame.lon0 == pytest.approx(25.0, abs=1e-4)
    assert frame.lat0 == pytest.approx(60.15, abs=1e-4)


# --- large arrays: the fitted stand-in for PROJ ----------------------------------------------
# Reference: pyproj (PROJ) itself, called point by point through a fresh Transformer; the
# stand-in must agree within FIT_TOLERANCE_M (a micrometre) or not be used at all.


def _exact_local(frame: LocalFrame, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...]:
    t = pyproj.Transformer.from_crs(frame.source_crs, frame.local_crs, always_xy=True)
    return tuple(np.asarray(a) for a in t.transform(x, y))


@pytest.mark.parametrize(
    ("code", "x0", "y0", "size"),
    [
        ("EPSG:32633", 500_000.0, 5_300_000.0, 3_000.0),  # UTM, a survey block
        ("EPSG:32633", 430_000.0, 5_300_000.0, 40_000.0),  # UTM, 40 km, off the central meridian
        ("EPSG:27700", 400_000.0, 300_000.0, 15_000.0),  # British National Grid
        ("EPSG:2227", 6_000_000.0, 2_100_000.0, 30_000.0),  # US survey feet
        ("EPSG:32633", 320_000.0, 6_300_000.0, 360_000.0),  # a UTM zone's width, 57 N
        ("EPSG:4326", 16.5, 47.8, 0.2),  # degrees
        ("EPSG:3031", 0.0, -1_000_000.0, 10_000.0),  # polar stereographic, Antarctica
    ],
)
def test_large_arrays_convert_within_a_micrometre_of_proj(
    code: str, x0: float, y0: float, size: float, monkeypatch: pytest.MonkeyPatch
) -> None:
    rng = np.random.default_rng(5)
    n = frame_mod.FIT_MIN_POINTS + 5_000
    x = x0 + size * rng.random(n)
    y = y0 + size * rng.random(n)
    frame, _ = build_frame(x, y, pyproj.CRS(code))
    sizes: list[int] = []
    exact = frame_mod._exact
    monkeypatch.setattr(
        frame_mod, "_exact", lambda t, a, b: sizes.append(np.size(a)) or exact(t, a, b)
    )
    lx, ly = frame.to_local(x, y)
    assert max(sizes) < n // 10  # the stand-in was used: PROJ saw only the fit's own points
    ex, ey = _exact_local(frame, x, y)
    assert np.abs(lx - ex).max() <= frame_mod.FIT_TOLERANCE_M
    assert np.abs(ly - ey).max() <= frame_mod.FIT_TOLERANCE_M
    # back to the source, and on to lon/lat: within a micrometre expressed in those units
    for target in (code, "EPSG:4326"):
        bx, by = frame.from_local(lx, ly, crs=target)
        t = pyproj.Transformer.from_crs(frame.local_crs, target, always_xy=True)
        ex, ey = (np.asarray(a) for a in t.transform(lx, ly))
        mx, my = _metres_per_unit(target, float(np.median(ey)))
        assert np.abs(bx - ex).max() * mx <= 1.05 * frame_mod.FIT_TOLERANCE_M
        assert np.abs(by - ey).max() * my <= 1.05 * frame_mod.FIT_TOLERANCE_M


def _metres_per_unit(code: str, lat: float) -> tuple[float, float]:
    """Metres per unit along x and y: a US survey foot is 1200/3937 m by definition; a degree
    of latitude is about 111.2 km, and of longitude that times cos(latitude)."""
    if code == "EPSG:2227":
        return 1200 / 3937, 1200 / 3937
    if code == "EPSG:4326":
        return 111_200.0 * math.cos(math.radians(lat)), 111_200.0
    return 1.0, 1.0


def test_large_array_across_the_antimeridian_goes_through_proj() -> None:
    n = frame_mod.FIT_MIN_POINTS
    lon = np.concatenate([np.linspace(179.9, 179.999, n), np.linspace(-179.999, -179.9, n)])
    lat = np.linspace(-40.0, -39.95, 2 * n)
    frame, _ = build_frame(lon, lat, pyproj.CRS("EPSG:4326"))
    lx, ly = frame.to_local(lon, lat)
    ex, ey = _exact_local(frame, lon, lat)
    np.testing.assert_array_equal(lx, ex)
    np.testing.assert_array_equal(ly, ey)
    assert np.abs(lx).max() < 10_000.0  # the frame straddles the antimeridian


def test_stand_in_is_refused_where_a_low_degree_cannot_follow() -> None:
    # ten degrees square (over 1000 km): too curved for degree 6 to stay within a micrometre,
    # so the conversion must be PROJ's own, point for point
    n = frame_mod.FIT_MIN_POINTS
    rng = np.random.default_rng(3)
    x = 10.0 + 10.0 * rng.random(n)
    y = 55.0 + 10.0 * rng.random(n)
    frame, _ = build_frame(x, y, pyproj.CRS("EPSG:4326"))
    lx, ly = frame.to_local(x, y)
    ex, ey = _exact_local(frame, x, y)
    np.testing.assert_array_equal(lx, ex)
    np.testing.assert_array_equal(ly, ey)
