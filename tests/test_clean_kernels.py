"""The compiled cleaner (geoops.kernels_clean) against the same recipe written with reference
libraries: scipy.signal.savgol_filter for every Savitzky-Golay step, shapely (GEOS) for the
distances of the raw vertices to the smoothed line, numpy.interp for resampling.

The recipe is the one :func:`geoops.clean.clean_line` documents: noise from the median distance
of the raw vertices to a first smoothing (a median absolute deviation, 0.6745 sigma for a normal
error), window from the noise and the vertex spacing, resample, smooth positions over half the
window, tangents from the derivative over the whole window, tangent variance from seeded white
noise pushed through the same resampling and derivative filter.
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from scipy.signal import savgol_filter

from geoops import kernels_clean
from geoops.clean import NOISE_SEED, clean_line
from geoops.errors import BadInput
from geoops.reversals import REVERSAL_TURN_DEG, find_reversals


def _resample(xy: np.ndarray, step: float) -> tuple[np.ndarray, np.ndarray]:
    s0 = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(xy, axis=0).T))])
    n = max(int(np.ceil(s0[-1] / step - 1e-9)), 1)
    s = np.linspace(0.0, s0[-1], n + 1)
    return np.column_stack([np.interp(s, s0, xy[:, 0]), np.interp(s, s0, xy[:, 1])]), s


def _odd(points: int, n: int) -> int:
    w = min(points, n if n % 2 else n - 1)
    return max(w if w % 2 else w - 1, 5)


def _savgol(y: np.ndarray, window: int, deriv: int = 0) -> np.ndarray:
    # source: scipy.signal.savgol_filter, cubic fits, polynomial ends ("interp")
    return savgol_filter(y, window, 3, deriv, axis=0, mode="interp")


def _window(sigma: float, spacing: float, length: float) -> float:
    w = max(8.0 * spacing, 25.0 * sigma, kernels_clean.MIN_WINDOW_M)
    return min(w, kernels_clean.MAX_WINDOW_M, max(length / 3.0, kernels_clean.MIN_WINDOW_M))


def _reference(xy: np.ndarray, gap: np.ndarray, sigma: float | None) -> dict[str, object]:
    s_raw = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(xy, axis=0).T))])
    seg = np.diff(s_raw)[~gap[:-1]]
    spacing, total = float(np.median(seg)), float(s_raw[-1])
    if sigma is None:
        w0 = _window(0.0, spacing, total)
        step0 = float(np.clip(min(w0 / 10.0, spacing / 2.0), 0.02, 0.5))
        pts0, _ = _resample(xy, step0)
        sm0 = _savgol(pts0, _odd(max(round(w0 / step0), 5), len(pts0)))
        d = shapely.distance(shapely.points(xy), shapely.LineString(sm0))
        n_in = max(w0 / max(spacing, 1e-6), 5.0)
        sigma = float(np.median(d) / 0.6745 / np.sqrt(max(1.0 - 4.0 / n_in, 0.2)))
    window = _window(sigma, spacing, total)
    step = float(np.clip(window / 12.0, 0.02, 0.5))
    pts, s = _resample(xy, step)
    win_pts = max(round(window / step), 5)
    sm = _savgol(pts, _odd(max(round(0.5 * window / step), 5), len(pts)))
    d = _savgol(pts, _odd(win_pts, len(pts)), 1)
    tangents = d / np.hypot(*d.T)[:, None]
    noise = np.random.default_rng(NOISE_SEED).normal(0.0, sigma, size=xy.shape)
    noise_pts = np.column_stack([np.interp(s, s_raw, noise[:, k]) for k in (0, 1)])
    w = min(win_pts | 1, len(pts) - (1 - len(pts) % 2))
    dt, dn = _savgol(pts, w, 1), _savgol(noise_pts, w, 1)
    theta = (dt[:, 0] * dn[:, 1] - dt[:, 1] * dn[:, 0]) / np.einsum("ij,ij->i", dt, dt)
    has_data = np.ones(len(s), dtype=bool)
    for i in np.flatnonzero(gap[:-1]):
        has_data &= ~((s > s_raw[i] - window / 2) & (s < s_raw[i + 1] + window / 2))
    return {"sigma": sigma, "window": window, "xy": sm, "tangents": tangents,
            "tangent_var": float(np.mean(theta**2)), "has_data": has_data,
            "raw_length": float(seg.sum())}


def _wavy(rng: np.random.Generator, n: int, spacing: float, noise: float) -> np.ndarray:
    t = np.cumsum(rng.uniform(0.5, 1.5, n)) * spacing
    xy = np.column_stack([t, 3.0 * np.sin(t / 9.0) + 0.02 * t])
    return xy + rng.normal(0.0, noise, xy.shape)


CASES = [(1, 120, 0.8, 0.03, None), (2, 60, 0.3, 0.01, None), (3, 300, 1.0, 0.1, None),
         (4, 80, 0.5, 0.02, 0.05), (5, 12, 0.4, 0.01, None), (6, 200, 0.7, 0.3, None)]


@pytest.mark.parametrize(("seed", "n", "spacing", "noise", "stated"), CASES)
@pytest.mark.parametrize("with_gap", [False, True])
def test_compiled_cleaning_matches_the_reference_recipe(
    seed: int, n: int, spacing: float, noise: float, stated: float | None, with_gap: bool
) -> None:
    rng = np.random.default_rng(seed)
    xy = _wavy(rng, n, spacing, noise)
    gap = np.zeros(n, dtype=bool)
    if with_gap:
        xy[n // 2 :] += [4.0, 0.0]  # a 4 m gap bridged between two parts
        gap[n // 2 - 1] = True
    ref = _reference(xy, gap, stated)
    got = clean_line(xy, gap, accuracy=stated)
    assert got.sigma_source == ("stated" if stated else "estimated")
    assert got.sigma == pytest.approx(ref["sigma"], rel=1e-9)
    assert got.window_m == pytest.approx(ref["window"], rel=1e-12)
    assert got.raw_length == pytest.approx(ref["raw_length"], rel=1e-12)
    np.testing.assert_allclose(got.xy, ref["xy"], atol=1e-9)
    np.testing.assert_allclose(got.tangents, ref["tangents"], atol=1e-9)
    assert got.tangent_var == pytest.approx(ref["tangent_var"], rel=1e-9)
    np.testing.assert_array_equal(got.has_data, ref["has_data"])
    assert (~got.has_data).any() == with_gap


def test_wide_windows_stay_exact() -> None:
    # the filter's least-squares fit is solved on positions scaled to [-1, 1]; check a window
    # far wider than cleaning uses against scipy to the same tolerance
    y = np.random.default_rng(8).normal(size=(400, 2)).cumsum(axis=0)
    for deriv in (0, 1, 2):
        ref = savgol_filter(y, 151, 3, deriv, axis=0, mode="interp")
        np.testing.assert_allclose(kernels_clean.savgol(y, 151, 3, deriv), ref, atol=1e-9)


def test_zero_length_line_is_bad_input() -> None:
    with pytest.raises(BadInput, match="zero length"):
        clean_line(np.array([[1.0, 1.0], [1.0, 1.0]]), np.zeros(2, dtype=bool))


@pytest.mark.parametrize("turn_deg", [60.0, 79.0, 81.0, 120.0, 178.0])
def test_quick_turn_check_agrees_with_the_full_measurement(turn_deg: float) -> None:
    # a line that turns by turn_deg at one vertex: the compiled pre-check must let exactly the
    # lines through that the numpy measurement finds a reversal on
    a = np.radians(180.0 - turn_deg)
    out = np.column_stack([np.linspace(0.0, 5.0, 11), np.zeros(11)])
    back = out[-1] + np.outer(np.linspace(0.0, 5.0, 11)[1:], [-np.cos(a), np.sin(a)])
    xy = np.vstack([out, back])
    least = kernels_clean.least_turn_cosine(xy, 0.6)
    assert np.degrees(np.arccos(least)) == pytest.approx(turn_deg, abs=0.5)
    assert bool(find_reversals(xy)) == (turn_deg > REVERSAL_TURN_DEG)


def _spikes_reference(xy: np.ndarray, passes: int = 2) -> np.ndarray:
    """Spike removal written with numpy (heading changes wrapped through complex numbers)."""
    for _ in range(passes):
        if len(xy) < 4:
            return xy
        d = np.diff(xy, axis=0)
        turn = np.abs(np.angle(np.exp(1j * np.diff(np.arctan2(d[:, 1], d[:, 0])))))
        sharp = turn > 2.5
        spike = sharp & (np.r_[False, turn[:-1] > 1.2] | np.r_[turn[1:] > 1.2, False])
        beaten = np.r_[False, spike[:-1] & (turn[:-1] > turn[1:] + 1e-9)]
        ahead = np.r_[spike[1:] & (turn[1:] > turn[:-1] + 1e-9), False]
        spike = spike & ~(beaten | ahead)
        if not spike.any():
            return xy
        xy = xy[np.r_[True, ~spike, True]]
    return xy


@pytest.mark.parametrize("seed", range(8))
def test_repeats_and_spikes_are_dropped_as_the_numpy_formulation_does(seed: int) -> None:
    from geoops.clean import drop_spikes, join_parts

    rng = np.random.default_rng(seed)
    xy = _wavy(rng, 150, 0.6, 0.02)
    at = rng.choice(np.arange(2, 148), 12, replace=False)
    xy[at] += rng.normal(0.0, 3.0, (12, 2))  # outliers, some of them neighbours
    xy = np.repeat(xy, rng.integers(1, 3, len(xy)), axis=0)  # repeated vertices
    plain = xy[np.r_[True, np.hypot(*np.diff(xy, axis=0).T) > 1e-9]]
    expected = _spikes_reference(plain)
    assert len(expected) < len(plain)  # the case has spikes to drop
    np.testing.assert_array_equal(drop_spikes(plain), expected)
    joined, gaps = join_parts([xy])
    np.testing.assert_array_equal(joined, expected)
    assert not gaps.any()


@pytest.mark.parametrize("seed", range(5))
def test_quick_turn_check_equals_the_resampled_measurement(seed: int) -> None:
    # the compiled pre-check walks the line without resampling it; the numpy measurement of
    # find_reversals (chords over base_m at samples base_m / 8 apart) is the reference,
    # on wandering lines with repeated vertices and turn-backs
    from geoops.curves import resample

    rng = np.random.default_rng(seed)
    steps = rng.normal(0.0, 1.0, (80, 2)) + [0.6, 0.0]
    steps[rng.integers(0, 80, 5)] = 0.0  # repeated vertices
    steps[40:44] *= -1.0  # a turn-back
    xy = np.cumsum(steps, axis=0)
    for base in (0.6, 1.7):
        pts, _ = resample(xy, base / 8.0)
        arrive = pts[8:-8] - pts[:-16]
        leave = pts[16:] - pts[8:-8]
        norm = np.maximum(np.hypot(*arrive.T) * np.hypot(*leave.T), 1e-12)
        expected = min(1.0, float(np.min(np.einsum("ij,ij->i", arrive, leave) / norm)))
        got = kernels_clean.least_turn_cosine(np.ascontiguousarray(xy), base)
        assert got == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("workers", [1, 3])
def test_many_lines_at_once_equal_one_at_a_time(workers: int, monkeypatch) -> None:
    # clean_lines (one compiled call per group of lines, groups in threads) must give every
    # line exactly what clean_line gives it: arrays, numbers, the index and the turn check
    import geoops.clean
    from geoops.clean import clean_lines
    from geoops.curves import NearestOnPolyline

    monkeypatch.setattr(geoops.clean, "MIN_LINES_PER_THREAD", 4)
    rng = np.random.default_rng(7)
    lines, accuracies = [], []
    for r in range(24):
        n = int(rng.integers(2, 150))
        xy = np.cumsum(rng.normal(0.0, 0.4, (n, 2)) + [0.7, 0.0], axis=0)
        gaps = np.zeros(n, dtype=bool)
        if r % 5 == 0 and n > 10:
            gaps[n // 2] = True
        if r == 9:
            xy[:] = xy[0]  # zero length
        lines.append((xy, gaps))
        accuracies.append(None if r % 3 else 0.04)
    cleaned, least = clean_lines(lines, accuracies, (0.6, 5.0), workers)
    for (xy, gaps), acc, rut, turn in zip(lines, accuracies, cleaned, least, strict=True):
        try:
            one = clean_line(xy, gaps, accuracy=acc)
        except BadInput as exc:
            assert rut == exc.message
            continue
        assert not isinstance(rut, str)
        for name in ("xy", "has_data", "tangents", "raw_xy", "raw_gap_after"):
            np.testing.assert_array_equal(getattr(rut, name), getattr(one, name))
        for name in ("step", "sigma", "sigma_source", "window_m", "raw_length", "tangent_var"):
            assert getattr(rut, name) == getattr(one, name)
        fresh = NearestOnPolyline(rut.xy)
        np.testing.assert_array_equal(rut.index.poly, fresh.poly)
        assert rut.index.geo == fresh.geo and rut.index.grid[:4] == fresh.grid[:4]
        np.testing.assert_array_equal(rut.index.grid[4], fresh.grid[4])
        base = max(0.6, 5.0 * one.sigma)
        assert turn == kernels_clean.least_turn_cosine(np.ascontiguousarray(xy), base)
    assert sum(isinstance(r, str) for r in cleaned) == 1
