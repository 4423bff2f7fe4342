"""Geometry kernels of geoops.curves checked against shapely's exact distances."""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from geoops.curves import NearestOnPolyline, resample


def _looped_line(step: float) -> np.ndarray:
    """A path that loops and crosses itself twice (an epitrochoid), resampled uniformly."""
    t = np.linspace(0.0, 2.0 * np.pi, 4000)
    xy = np.column_stack([10 * np.cos(t) + 6 * np.cos(3 * t), 10 * np.sin(t) + 6 * np.sin(3 * t)])
    pts, _ = resample(xy, step)
    return pts


def test_nearest_is_exact_where_the_line_crosses_itself():
    line = _looped_line(0.3)
    q = NearestOnPolyline(line)
    rng = np.random.default_rng(5)
    # near the line (where the loops come back within a few segments of each other) and
    # metres off it, where several branches are about as near
    pts = line[rng.integers(0, len(line), 3000)] + rng.normal(0.0, 0.15, (3000, 2))
    pts[::3] += rng.normal(0.0, 3.0, (1000, 2))
    d, s = q.distance_and_position(pts)
    ref = shapely.distance(shapely.points(pts), shapely.LineString(line))
    # source: shapely 2.x distance (GEOS exact point-to-linestring distance)
    assert np.max(np.abs(d - ref)) < 1e-9
    # and the arc-length position names a point at that distance
    ref_s = shapely.line_locate_point(shapely.LineString(line), shapely.points(pts))
    at = shapely.line_interpolate_point(shapely.LineString(line), s)
    assert np.allclose(shapely.distance(at, shapely.points(pts)), ref, atol=1e-9)
    assert np.median(np.abs(s - ref_s)) < 1e-9


def test_nearest_on_a_plain_curve_and_far_from_it():
    t = np.linspace(0, 100, 400)
    line = np.column_stack([t, 5 * np.sin(t / 10)])
    q = NearestOnPolyline(line)
    # next to the line, well off the grid of its buckets, and on one of its vertices
    pts = np.vstack([line[::7] + 0.2, [[-500.0, 40.0], [50.0, 3000.0], [1e7, -1e7]], line[:1]])
    d, _ = q.distance_and_position(pts)
    # source: shapely 2.x distance
    ref = shapely.distance(shapely.points(pts), shapely.LineString(line))
    assert np.max(np.abs(d - ref)) < 1e-9


def test_no_query_points_give_empty_answers():
    q = NearestOnPolyline(np.column_stack([np.arange(5.0), np.zeros(5)]))
    d, s = q.distance_and_position(np.empty((0, 2)))
    assert d.shape == (0,) and s.shape == (0,)


@pytest.mark.parametrize(
    ("window", "order", "deriv"), [(5, 2, 0), (7, 3, 1), (11, 3, 1), (21, 3, 2)]
)
def test_savgol_matches_scipy(window, order, deriv):
    from scipy.signal import savgol_filter

    from geoops.curves import savgol

    y = np.random.default_rng(window).normal(size=(60, 2)).cumsum(axis=0)
    ref = savgol_filter(y, window, order, deriv, axis=0, mode="interp")
    # source: scipy.signal.savgol_filter (mode "interp": polynomial fits at the ends)
    assert np.allclose(savgol(y, window, order, deriv), ref, atol=1e-10)


def test_a_distance_limit_answers_inf_beyond_it_and_exactly_within():
    line = _looped_line(0.3)
    q = NearestOnPolyline(line)
    rng = np.random.default_rng(9)
    pts = line[rng.integers(0, len(line), 2000)] + rng.normal(0.0, 2.0, (2000, 2))
    exact, s_exact = q.distance_and_position(pts)
    d, s = q.distance_and_position(pts, 1.5)
    near = exact <= 1.5
    # source: shapely 2.x distance - the unlimited answer is checked against GEOS above
    assert near.any() and (~near).any()
    assert np.allclose(d[near], exact[near], rtol=0, atol=1e-12)
    assert np.allclose(s[near], s_exact[near], rtol=0, atol=1e-9)
    assert np.isinf(d[~near]).all()


def test_an_index_travels_between_processes_as_its_line_and_answers_the_same():
    import pickle

    line = _looped_line(0.3)
    q = NearestOnPolyline(line)
    pts = line[::50] + 0.4
    copy = pickle.loads(pickle.dumps(q))
    assert len(pickle.dumps(q)) < 1.2 * line.nbytes + 1000  # not the bucket grids
    assert np.array_equal(copy.distance_and_position(pts)[0], q.distance_and_position(pts)[0])
