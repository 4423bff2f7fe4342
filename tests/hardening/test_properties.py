"""Property-based tests (hypothesis) of the geometry kernels, the cleaner, the frame and the
readers: no crash and no exception other than the domain errors on any input, and results
that do not depend on how the same ruts are written down (vertex order, feature order,
translation, rotation).

The invariance checks use one seeded simulated pass (kinematic bicycle model, checked against
closed forms in test_reference_kinematics.py); they test equivariance, not accuracy.
"""

from __future__ import annotations

import json
import math
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from pyogrio.raw import write as raw_write

from geoops.clean import CleanRut, clean_rut, join_parts
from geoops.curves import (
    NearestOnPolyline,
    arc_length,
    drop_repeats,
    resample,
    smooth,
    turning_angles,
    unit_tangents,
)
from geoops.errors import BadInput, RutwiseError
from geoops.frame import build_frame
from geoops.inference import PairResult, solve_pair
from geoops.io import InputLayer, read_layer
from geoops.kinematics import simulate_steering
from geoops.pipeline import AnalysisResult, analyze_layer
from geoops.scenarios import CAR, mapped_lines, slalom

QUICK = settings(
    max_examples=40,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.filter_too_much],
)
SLOW = settings(
    max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)

coords = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)
lines = st.integers(0, 60).flatmap(lambda n: arrays(np.float64, (n, 2), elements=coords))
lines2 = st.integers(2, 60).flatmap(lambda n: arrays(np.float64, (n, 2), elements=coords))


# --- kernels ------------------------------------------------------------------------------


@QUICK
@given(lines)
def test_arc_length_grows_and_ignores_vertex_order(xy: np.ndarray) -> None:
    assume(len(xy) >= 1)
    s = arc_length(xy)
    assert s.shape == (len(xy),) and s[0] == 0.0 and np.all(np.diff(s) >= 0)
    assert math.isclose(arc_length(xy[::-1])[-1], s[-1], rel_tol=1e-9, abs_tol=1e-6)


@QUICK
@given(lines2, st.floats(0.5, 5000.0))
def test_resample_keeps_the_ends_and_the_length(xy: np.ndarray, pieces: float) -> None:
    xy = drop_repeats(xy)
    assume(len(xy) >= 2)
    step = float(arc_length(xy)[-1]) / pieces
    pts, s = resample(xy, step)
    assert np.allclose(pts[0], xy[0]) and np.allclose(pts[-1], xy[-1], atol=1e-6)
    assert np.all(np.diff(s) > 0) and np.all(np.diff(s) <= step * (1 + 1e-9))
    assert math.isclose(s[-1], arc_length(xy)[-1], rel_tol=1e-12)


@QUICK
@given(lines2, st.integers(1, 40))
def test_smoothing_and_tangents_are_finite_and_unit(xy: np.ndarray, window: int) -> None:
    xy = drop_repeats(xy)
    assume(len(xy) >= 2)
    pts, _ = resample(xy, max(float(arc_length(xy)[-1]) / 200.0, 1e-3))
    sm = smooth(pts, window)
    t = unit_tangents(pts, window)
    assert sm.shape == pts.shape and np.isfinite(sm).all()
    norm = np.hypot(t[:, 0], t[:, 1])
    assert np.all(np.isclose(norm, 1.0) | (norm == 0.0))
    assert np.isfinite(turning_angles(pts)).all()


graphs = st.integers(2, 40).flatmap(
    lambda n: st.tuples(
        arrays(np.float64, n, elements=st.floats(0.05, 50.0)),
        arrays(np.float64, n, elements=st.floats(-20.0, 20.0)),
    )
)


@QUICK
@given(graphs, st.integers(1, 40))
def test_reversing_a_line_reverses_its_tangents(graph: tuple[np.ndarray, ...], w: int) -> None:
    """Without cusps (x strictly increasing) a local polynomial fit has no direction (at a
    cusp the tangent itself is undefined)."""
    xy = np.column_stack([np.cumsum(graph[0]), graph[1]])
    pts, _ = resample(xy, float(arc_length(xy)[-1]) / 200.0)
    forward = unit_tangents(pts, w)
    assert np.allclose(unit_tangents(pts[::-1], w)[::-1], -forward, atol=1e-6)


@QUICK
@given(lines2, st.integers(0, 59))
def test_nearest_point_of_a_vertex_is_itself(xy: np.ndarray, k: int) -> None:
    xy = drop_repeats(xy)
    assume(len(xy) >= 2)
    q = NearestOnPolyline(xy)
    pt = xy[k % len(xy)][None, :]
    dist, s, _ = q.query(pt)
    assert dist[0] <= 1e-6 * max(1.0, float(np.abs(xy).max()))
    assert 0.0 <= s[0] <= q.length * (1 + 1e-12)


# --- cleaner and frame ----------------------------------------------------------------------


def _clean(parts: list[np.ndarray]) -> CleanRut | None:
    try:
        return clean_rut(parts)
    except BadInput:
        return None


small = st.floats(-500.0, 500.0, allow_nan=False)
parts = st.lists(
    st.integers(1, 40).flatmap(lambda n: arrays(np.float64, (n, 2), elements=small)),
    min_size=1,
    max_size=3,
)


@QUICK
@given(parts)
def test_clean_rut_gives_a_clean_rut_or_bad_input(raw: list[np.ndarray]) -> None:
    rut = _clean(raw)
    if rut is None:
        return
    assert np.isfinite(rut.xy).all() and np.isfinite(rut.tangents).all()
    assert rut.sigma >= 0 and 1.0 <= rut.window_m <= 6.0 + 1e-9
    # reversed, the same rut cleans to the same length, unless it zigzags back and forth
    # over itself: there, which vertex of a run of reversals is a spike depends on the order.
    # That includes parts that lie back over each other once chained (a part from 1 to 0 and
    # another from 2 to 0 join as 2 -> 0 -> 1), not only zigzags within a part
    assume(all(np.abs(turning_angles(drop_repeats(p))).max(initial=0.0) < 2.5 for p in raw))
    joined, _ = join_parts(raw)
    assume(np.abs(turning_angles(joined)).max(initial=0.0) < 2.5)
    back = _clean([p[::-1] for p in raw[::-1]])
    assert back is not None
    assert math.isclose(back.raw_length, rut.raw_length, rel_tol=1e-9, abs_tol=1e-9)


any_float = st.one_of(st.floats(), st.sampled_from([1e300, -1e300, 0.0, 90.0, 180.0]))


@QUICK
@given(
    st.lists(st.tuples(any_float, any_float), min_size=0, max_size=20),
    st.sampled_from(["EPSG:4326", "EPSG:32630", "EPSG:3857", "EPSG:27700"]),
)
def test_build_frame_raises_only_domain_errors(points: list[tuple[float, float]], crs: str) -> None:
    import pyproj

    xy = np.array(points, dtype=float).reshape(-1, 2)
    try:
        frame, _ = build_frame(xy[:, 0], xy[:, 1], pyproj.CRS(crs))
    except RutwiseError:
        return
    lx, ly = frame.to_local(xy[:, 0], xy[:, 1])
    assert np.isfinite(lx).all() and np.isfinite(ly).all()


# --- readers --------------------------------------------------------------------------------

json_leaf = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-(10**6), 10**6),
    st.floats(allow_nan=False, allow_infinity=False),
    st.text(max_size=8),
)
json_any = st.recursive(
    json_leaf,
    lambda kids: st.one_of(
        st.lists(kids, max_size=4), st.dictionaries(st.text(max_size=6), kids, max_size=4)
    ),
    max_leaves=20,
)
position = st.lists(st.floats(-200, 200, allow_nan=False), min_size=0, max_size=5)
geometry = st.fixed_dictionaries(
    {
        "type": st.sampled_from(
            ["LineString", "MultiLineString", "Point", "Polygon", "GeometryCollection", "Nonsense"]
        ),
        "coordinates": st.one_of(
            st.lists(position, max_size=6),
            st.lists(st.lists(position, max_size=4), max_size=3),
            json_any,
        ),
    }
)
feature = st.fixed_dictionaries(
    {
        "type": st.sampled_from(["Feature", "Feature", "feature", "Geometry"]),
        "geometry": st.one_of(st.none(), geometry, json_any),
        "properties": st.one_of(
            st.none(), st.dictionaries(st.text(max_size=6), json_leaf, max_size=3), json_any
        ),
    },
    optional={"id": json_leaf},
)
geojson_doc = st.one_of(
    st.fixed_dictionaries(
        {"type": st.just("FeatureCollection"), "features": st.lists(feature, max_size=5)}
    ),
    feature,
    geometry,
    json_any,
)


def read_or_refuse(path: Path) -> InputLayer | None:
    """Read a layer; a domain error is a fine answer, anything else fails the test."""
    try:
        return read_layer(path)
    except RutwiseError:
        return None


@QUICK
@given(geojson_doc)
def test_geojson_reader_raises_only_domain_errors(tmp_path: Path, doc: Any) -> None:
    path = tmp_path / "fuzz.geojson"
    path.write_text(json.dumps(doc))
    layer = read_or_refuse(path)
    if layer is not None:
        assert len(layer) >= 1 and all(np.isfinite(p).all() for f in layer.parts for p in f)


@cache
def _gpkg_bytes(folder: str) -> bytes:
    path = Path(folder) / "valid.gpkg"
    geoms = [shapely.linestrings([[0, 0], [1, 1], [2, 0]]), shapely.linestrings([[0, 1], [3, 2]])]
    raw_write(
        str(path),
        shapely.to_wkb(np.asarray(geoms, dtype=object)),
        [np.arange(2)],
        ["n"],
        layer="ruts",
        driver="GPKG",
        crs="EPSG:27700",
        geometry_type="LineString",
    )
    return path.read_bytes()


@QUICK
@given(
    st.lists(st.tuples(st.integers(0, 10**6), st.integers(0, 255)), min_size=1, max_size=8),
    st.sampled_from([".gpkg", ".geojson", ".fgb", ".gpx", ".zip"]),
)
def test_corrupted_files_raise_only_domain_errors(
    tmp_path_factory: pytest.TempPathFactory, flips: list[tuple[int, int]], suffix: str
) -> None:
    """A valid GeoPackage with a few bytes overwritten, under several names."""
    folder = tmp_path_factory.getbasetemp()
    data = bytearray(_gpkg_bytes(str(folder)))
    for at, value in flips:
        data[at % len(data)] = value
    path = folder / f"corrupt{suffix}"
    path.write_bytes(bytes(data))
    read_or_refuse(path)


# --- invariance of the verdicts -------------------------------------------------------------


@cache
def _pass_lines() -> tuple[np.ndarray, np.ndarray, float]:
    """Rear and front left tracks of a seeded car slalom (decided in the plain frame)."""
    sim = simulate_steering(CAR, slalom(60.0, 0.02, 14.0, 20.0), 0.02)
    got = mapped_lines(
        sim,
        0.02,
        (0.3, 0.6),
        np.random.default_rng(3),
        reverse_prob=0.0,
        which=["rear_left", "front_left"],
    )
    return got["rear_left"], got["front_left"], CAR.wheelbase


def _moved(xy: np.ndarray, angle: float, shift: tuple[float, float]) -> np.ndarray:
    c, s = math.cos(angle), math.sin(angle)
    return xy @ np.array([[c, s], [-s, c]]) + np.asarray(shift)


@cache
def _base_pair() -> PairResult:
    rear, front, _ = _pass_lines()
    return solve_pair(clean_rut([rear]), clean_rut([front]))


def _same_pair(a: PairResult, b: PairResult, swapped: bool) -> None:
    assert a.verdict == b.verdict
    assert a.wheelbase is not None and b.wheelbase is not None
    assert math.isclose(a.wheelbase, b.wheelbase, rel_tol=0.01, abs_tol=0.02)
    if a.verdict == "decided" and a.rear is not None:
        assert b.rear == (1 - a.rear if swapped else a.rear)


def test_the_base_pass_is_decided_with_the_simulated_wheelbase() -> None:
    base = _base_pair()
    assert base.verdict == "decided" and base.rear == 0 and base.follows_first
    assert base.wheelbase is not None
    assert abs(base.wheelbase - _pass_lines()[2]) < 0.1  # simulation truth, not a reference


@SLOW
@given(
    st.booleans(),
    st.booleans(),
    st.booleans(),
    st.floats(-math.pi, math.pi),
    st.tuples(st.floats(-1e4, 1e4), st.floats(-1e4, 1e4)),
)
def test_solve_pair_ignores_vertex_order_order_of_tracks_and_placement(
    flip_rear: bool, flip_front: bool, swap: bool, angle: float, shift: tuple[float, float]
) -> None:
    rear, front, _ = _pass_lines()
    rear = _moved(rear[::-1] if flip_rear else rear, angle, shift)
    front = _moved(front[::-1] if flip_front else front, angle, shift)
    first, second = (front, rear) if swap else (rear, front)
    got = solve_pair(clean_rut([first]), clean_rut([second]))
    base = _base_pair()
    _same_pair(base, got, swapped=swap)
    if got.verdict == "decided":
        # the travel direction in the world is the same: compare it as a start point
        track = first if got.follows_first else first[::-1]
        start = _moved(_pass_lines()[1 if swap else 0][:1], angle, shift)[0]
        assert np.hypot(*(track[0] - start)) < 1.0


def _layer(xy: list[np.ndarray], ids: list[str]) -> InputLayer:
    return InputLayer(
        path="memory",
        layer="ruts",
        driver="memory",
        crs="EPSG:32630",
        ids=ids,
        parts=[[p] for p in xy],
        z=[None] * len(xy),
    )


UTM_ORIGIN = (500_000.0, 6_150_000.0)  # inside UTM zone 30N (Scottish Southern Uplands)


@cache
def _base_result() -> AnalysisResult:
    rear, front, _ = _pass_lines()
    return analyze_layer(_layer([rear + UTM_ORIGIN, front + UTM_ORIGIN], ["r", "f"]))


@SLOW
@given(
    st.booleans(),
    st.booleans(),
    st.booleans(),
    st.floats(-math.pi, math.pi),
    st.tuples(st.floats(-2e4, 2e4), st.floats(-2e4, 2e4)),
)
def test_analyze_layer_ignores_vertex_order_feature_order_and_placement(
    flip_rear: bool, flip_front: bool, swap: bool, angle: float, shift: tuple[float, float]
) -> None:
    rear, front, _ = _pass_lines()
    moved = [
        _moved(line[::-1] if flip else line, angle, shift) + UTM_ORIGIN
        for line, flip in ((rear, flip_rear), (front, flip_front))
    ]
    ids = ["r", "f"]
    if swap:
        moved, ids = moved[::-1], ids[::-1]
    got = analyze_layer(_layer(moved, ids))
    base = _base_result()
    assert len(got.passes) == len(base.passes) == 1
    a, b = base.passes[0], got.passes[0]
    assert (a.verdict, a.gear) == (b.verdict, b.gear)
    assert a.wheelbase_m is not None and b.wheelbase_m is not None
    assert math.isclose(a.wheelbase_m, b.wheelbase_m, rel_tol=0.01, abs_tol=0.02)
    wheels = {r.source_fids: r.wheel for r in got.ruts}
    assert wheels == {r.source_fids: r.wheel for r in base.ruts}
    if a.verdict == "decided":  # the pass starts where the moved rear track starts
        lx, ly = got.frame.to_local(*(_moved(rear[:1], angle, shift)[0] + UTM_ORIGIN))
        assert np.hypot(b.geometry[0][0] - lx, b.geometry[0][1] - ly) < 1.0
