"""Unit and property tests of geoops.kinematics and geoops.scenarios.

Checks against published formulas live in test_reference_kinematics.py; this module checks
shapes, consistency, invariants, determinism, the survey simulation and input validation.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import numpy.typing as npt
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from geoops.errors import BadInput
from geoops.kinematics import (
    KinematicsInputError,
    SimulatedPass,
    Vehicle,
    simulate_front_path,
    simulate_steering,
    steady_turn_radii,
)
from geoops.scenarios import (
    ATV,
    BICYCLE,
    CAR,
    MOTORCYCLE,
    PICKUP,
    PRESETS,
    TRACTOR,
    circle,
    correlated_noise,
    fragment,
    mapped_lines,
    random_smooth,
    s_curve,
    single_turn,
    slalom,
    straight,
    three_point_turn,
)

FloatArray = npt.NDArray[np.float64]


def _steps(points: FloatArray) -> FloatArray:
    return np.asarray(np.diff(points, axis=0), dtype=np.float64)


def _lengths(points: FloatArray) -> FloatArray:
    d = _steps(points)
    return np.asarray(np.hypot(d[:, 0], d[:, 1]), dtype=np.float64)


# --- simulate_steering -----------------------------------------------------------------------


def test_simulate_steering_shapes_and_types() -> None:
    steer = slalom(20.0, 0.1, 15.0, 8.0)
    run = simulate_steering(CAR, steer, 0.1, start=(5.0, -2.0, 0.3))
    n = steer.size + 1
    assert isinstance(run, SimulatedPass) and len(run) == n
    assert run.s.shape == (n,) and run.heading.shape == (n,) and run.gear.shape == (n,)
    assert run.rear.shape == (n, 2) and run.front.shape == (n, 2)
    assert run.gear.dtype == np.int8 and np.all(run.gear == 1)
    assert run.s[0] == 0.0 and run.s[-1] == pytest.approx(steer.size * 0.1, rel=1e-12)
    assert np.all(np.diff(run.s) > 0.0)
    assert run.rear[0].tolist() == [5.0, -2.0] and run.heading[0] == 0.3
    bar = run.front - run.rear
    assert np.allclose(np.hypot(bar[:, 0], bar[:, 1]), CAR.wheelbase, rtol=1e-12)
    assert np.allclose(np.arctan2(bar[:, 1], bar[:, 0]), np.angle(np.exp(1j * run.heading)))
    # each step moves the rear by a chord no longer than the step's path length
    assert np.all(_lengths(run.rear) <= 0.1 * (1.0 + 1e-12))


def test_simulate_steering_accepts_per_step_lengths() -> None:
    ds = np.array([0.5, 1.0, 2.0])
    run = simulate_steering(CAR, np.zeros(3), ds)
    assert run.s.tolist() == [0.0, 0.5, 1.5, 3.5]
    assert np.allclose(run.rear[:, 0], [0.0, 0.5, 1.5, 3.5])


@settings(max_examples=30, deadline=None)
@given(
    st.lists(st.floats(-0.69, 0.69), min_size=1, max_size=12),
    st.lists(st.floats(0.01, 3.0), min_size=12, max_size=12),
    st.lists(st.sampled_from([-1, 1]), min_size=12, max_size=12),
    st.integers(2, 7),
)
def test_substeps_land_on_the_same_poses(
    steer: list[float], ds: list[float], gear: list[int], k: int
) -> None:
    # exact arc integration: splitting every step into k equal sub-steps changes nothing
    m = len(steer)
    coarse = simulate_steering(CAR, np.array(steer), np.array(ds[:m]), np.array(gear[:m]))
    fine = simulate_steering(
        CAR,
        np.repeat(steer, k),
        np.repeat(np.array(ds[:m]) / k, k),
        np.repeat(np.array(gear[:m]), k),
    )
    assert np.allclose(fine.rear[::k], coarse.rear, atol=1e-9)
    assert np.allclose(fine.heading[::k], coarse.heading, atol=1e-12)
    assert np.allclose(fine.s[::k], coarse.s, rtol=1e-12)


def test_simulate_steering_matches_ode_integration() -> None:
    # independent check: integrate x' = cos psi, y' = sin psi, psi' = tan(delta(s)) / L with a
    # general-purpose solver, for a smooth steering function sampled at step midpoints
    length, ds, total = CAR.wheelbase, 0.005, 30.0

    def delta(s: npt.ArrayLike) -> FloatArray:
        return np.asarray(0.5 * np.sin(0.4 * np.asarray(s)), dtype=np.float64)

    n = round(total / ds)
    run = simulate_steering(CAR, delta((np.arange(n) + 0.5) * ds), ds)

    def rhs(s: float, y: FloatArray) -> list[float]:
        return [math.cos(y[2]), math.sin(y[2]), math.tan(float(delta(s))) / length]

    sol = solve_ivp(rhs, (0.0, total), [0.0, 0.0, 0.0], rtol=1e-11, atol=1e-12, dense_output=True)
    ref = sol.sol(run.s).T
    assert np.allclose(run.rear, ref[:, :2], atol=1e-5)
    assert np.allclose(run.heading, ref[:, 2], atol=1e-6)


def test_reversing_the_profile_retraces_the_path() -> None:
    steer = random_smooth(25.0, 0.05, np.random.default_rng(2), 35.0, 3.0)
    there = np.ones(steer.size, dtype=np.int8)
    run = simulate_steering(
        CAR,
        np.concatenate([steer, steer[::-1]]),
        0.05,
        gear=np.concatenate([there, -there]),
        start=(1.0, 2.0, 0.5),
    )
    half = steer.size
    # pose i of the way out is pose 2*half - i of the way back
    assert np.allclose(run.rear[: half + 1], run.rear[half:][::-1], atol=1e-9)
    assert np.allclose(run.heading[: half + 1], run.heading[half:][::-1], atol=1e-12)
    assert np.allclose(run.rear[-1], [1.0, 2.0], atol=1e-9)
    assert run.heading[-1] == pytest.approx(0.5, abs=1e-12)
    assert run.s[-1] == pytest.approx(2 * half * 0.05)


def test_three_point_turn_has_cusps_exactly_at_gear_changes() -> None:
    steer, gear = three_point_turn(CAR.wheelbase, 0.02, steer_deg=35.0)
    run = simulate_steering(CAR, steer, 0.02, gear=gear)
    changes = np.flatnonzero(np.diff(run.gear[:-1])) + 1  # poses where the gear changes
    assert changes.size == 2
    d = _steps(run.rear)
    turning_back = np.flatnonzero(np.einsum("ij,ij->i", d[:-1], d[1:]) < 0.0) + 1
    assert turning_back.tolist() == changes.tolist()
    # the rear path's direction flips by 180 degrees at each cusp (heading is continuous)
    for j in changes:
        u, v = d[j - 1] / np.linalg.norm(d[j - 1]), d[j] / np.linalg.norm(d[j])
        assert float(u @ v) < -0.999
    # the heading turns left throughout and ends reversed
    assert np.all(np.diff(run.heading) >= 0.0)
    assert np.all(np.diff(run.heading)[steer != 0.0] > 0.0)
    assert run.heading[-1] == pytest.approx(math.pi, abs=0.02)
    assert run.gear[changes[0] : changes[1]].tolist() == [-1] * int(changes[1] - changes[0])


# --- wheels ----------------------------------------------------------------------------------


def test_single_track_wheels_are_the_axle_midpoints() -> None:
    run = simulate_steering(BICYCLE, circle(5.0, 0.1, 20.0), 0.1)
    wheels = run.wheels()
    assert list(wheels) == ["rear", "front"]
    assert np.array_equal(wheels["rear"], run.rear) and np.array_equal(wheels["front"], run.front)


def test_four_wheel_rear_tracks_are_parallel_curves() -> None:
    steer = random_smooth(60.0, 0.02, np.random.default_rng(4), 30.0, 5.0)
    run = simulate_steering(TRACTOR, steer, 0.02)
    w = run.wheels()
    gap = w["rear_left"] - w["rear_right"]
    assert np.allclose(np.hypot(gap[:, 0], gap[:, 1]), TRACTOR.track_rear, rtol=1e-12)
    # the axle is square to the rear track: offset direction is normal to the travel tangent
    chord = run.rear[2:] - run.rear[:-2]
    tangent = chord / np.hypot(chord[:, 0], chord[:, 1])[:, None]
    assert np.allclose(np.einsum("ij,ij->i", gap[1:-1], tangent), 0.0, atol=1e-4)
    # and each left point lies one rear track from the right track as a whole (parallel curve)
    right = shapely.linestrings(w["rear_right"])
    dist = shapely.distance(shapely.points(w["rear_left"][5:-5]), right)
    assert np.allclose(dist, TRACTOR.track_rear, atol=1e-4)


def test_four_wheel_front_offsets_follow_the_track_difference() -> None:
    run = simulate_steering(TRACTOR, slalom(30.0, 0.1, 25.0, 15.0), 0.1)
    w = run.wheels()
    u = np.column_stack([np.cos(run.heading), np.sin(run.heading)])
    n = np.column_stack([-u[:, 1], u[:, 0]])
    shift = 0.5 * (TRACTOR.track_front - TRACTOR.track_rear)
    expected = w["rear_left"] + TRACTOR.wheelbase * u + shift * n
    assert np.allclose(w["front_left"], expected, atol=1e-12)
    assert np.allclose(w["front_right"], w["rear_right"] + TRACTOR.wheelbase * u - shift * n)
    # left is +90 degrees from the heading
    assert np.allclose(w["front_left"] - run.front, 0.5 * TRACTOR.track_front * n)


# --- simulate_front_path ---------------------------------------------------------------------


def _bar_ode(front: FloatArray, rear0: FloatArray, length: float) -> FloatArray:
    """Reference: integrate the rear's no-slip ODE segment by segment with a generic solver."""
    rear = [rear0]
    for a, b in zip(front[:-1], front[1:], strict=True):
        seg = b - a
        p = float(np.hypot(*seg))
        u = seg / p

        def rhs(t: float, r: FloatArray, a: FloatArray = a, u: FloatArray = u) -> FloatArray:
            e = (r - (a + t * u)) / length
            return np.asarray((u @ e) * e, dtype=np.float64)  # rear velocity along the bar

        sol = solve_ivp(rhs, (0.0, p), rear[-1], rtol=1e-12, atol=1e-12)
        rear.append(sol.y[:, -1])
    return np.array(rear)


def test_front_path_matches_ode_integration() -> None:
    rng = np.random.default_rng(8)
    front = np.cumsum(rng.normal(0.0, 1.0, (25, 2)), axis=0)
    length = 1.7
    bar0 = rng.normal(size=2)
    rear0 = front[0] + length * bar0 / np.linalg.norm(bar0)
    run = simulate_front_path(Vehicle(length), front, rear0)
    ref = _bar_ode(front, rear0, length)
    assert np.allclose(run.rear, ref, atol=1e-7)
    assert np.array_equal(run.front, front)


def test_front_path_scan_agrees_with_a_sequential_loop() -> None:
    # the vectorised scan over 3000 segments reproduces the per-segment closed form applied
    # one segment after the other
    rng = np.random.default_rng(9)
    ang = np.cumsum(rng.normal(0.0, 0.1, 3000))
    front = np.vstack([[0.0, 0.0], np.cumsum(0.2 * np.column_stack([np.cos(ang), np.sin(ang)]), 0)])
    length = 2.0
    run = simulate_front_path(Vehicle(length), front, [0.0, length])
    r = np.array([0.0, length])
    out = [r]
    for a, b in zip(front[:-1], front[1:], strict=True):
        back = (a - b) / np.linalg.norm(a - b)
        e = (r - a) / length
        theta = math.atan2(back[0] * e[1] - back[1] * e[0], float(back @ e))
        theta = 2.0 * math.atan(math.tan(0.5 * theta) * math.exp(-np.linalg.norm(b - a) / length))
        gamma = math.atan2(back[1], back[0])
        r = b + length * np.array([math.cos(gamma + theta), math.sin(gamma + theta)])
        out.append(r)
    assert np.allclose(run.rear, np.array(out), atol=1e-9)


def test_front_path_pushing_sets_reverse_gear_and_path_length() -> None:
    # front drives 10 m along +x with the rear trailing, then backs 1 m: the rear is pushed
    length = 2.0
    x = np.r_[np.linspace(0.0, 10.0, 11), np.linspace(9.8, 9.0, 5)]
    front = np.column_stack([x, np.zeros_like(x)])
    run = simulate_front_path(Vehicle(length), front, [-length, 0.0])
    assert run.gear[:10].tolist() == [1] * 10
    assert run.gear[10:].tolist() == [-1] * 6
    assert np.allclose(run.rear[:, 0], front[:, 0] - length)  # stays on the line, straight
    assert np.allclose(run.s, np.r_[np.arange(11.0), 10.0 + 0.2 * np.arange(1, 6)])
    assert np.allclose(run.heading, 0.0)


def test_front_path_reversal_inside_a_segment_is_counted_in_both_senses() -> None:
    # the rear starts ahead of the bar's normal (bar 120 degrees off the backward direction):
    # it is first pushed back, then dragged; the path length adds both parts
    length = 1.0
    th0 = math.radians(120.0)
    rear0 = np.array([math.cos(math.pi + th0), math.sin(math.pi + th0)]) * length
    single = simulate_front_path(Vehicle(length), [[0.0, 0.0], [3.0, 0.0]], rear0)
    dense = simulate_front_path(
        Vehicle(length), np.column_stack([np.linspace(0.0, 3.0, 30001), np.zeros(30001)]), rear0
    )
    assert single.s[-1] == pytest.approx(np.sum(_lengths(dense.rear)), rel=1e-6)
    assert single.gear.tolist() == [1, 1]
    assert dense.gear[0] == -1 and dense.gear[-1] == 1
    assert np.allclose(single.rear[-1], dense.rear[-1], atol=1e-12)


def test_front_path_repeated_vertices_keep_the_rear_still() -> None:
    front = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 0.0], [2.0, 0.5]])
    run = simulate_front_path(CAR, front, [-CAR.wheelbase, 0.0])
    assert np.array_equal(run.rear[1], run.rear[2])
    assert run.s[1] == run.s[2]


def test_front_path_handles_many_segments_quickly() -> None:
    rng = np.random.default_rng(10)
    ang = np.cumsum(rng.normal(0.0, 0.05, 100_000))
    front = np.vstack([[0.0, 0.0], np.cumsum(0.3 * np.column_stack([np.cos(ang), np.sin(ang)]), 0)])
    run = simulate_front_path(CAR, front, [-CAR.wheelbase, 0.0])
    bar = run.front - run.rear
    assert np.allclose(np.hypot(bar[:, 0], bar[:, 1]), CAR.wheelbase, rtol=1e-9)
    assert np.all(np.isfinite(run.s)) and np.all(np.diff(run.s) >= 0.0)


# --- validation --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kwargs",
    [
        {"wheelbase": 0.0},
        {"wheelbase": -1.0},
        {"wheelbase": math.nan},
        {"wheelbase": 2.0, "track_front": -0.1, "track_rear": 1.0},
        {"wheelbase": 2.0, "track_front": 1.5},
        {"wheelbase": 2.0, "max_steer_deg": 90.0},
        {"wheelbase": 2.0, "max_steer_deg": 0.0},
    ],
)
def test_vehicle_rejects_bad_dimensions(kwargs: dict[str, Any]) -> None:
    with pytest.raises(ValueError):
        Vehicle(**kwargs)


def test_errors_are_value_errors_and_carry_a_hint() -> None:
    with pytest.raises(KinematicsInputError) as info:
        simulate_steering(CAR, [1.2], 0.1)
    assert isinstance(info.value, ValueError) and isinstance(info.value, BadInput)
    assert info.value.hint


@pytest.mark.parametrize(
    ("steer", "ds", "gear"),
    [
        ([], 0.1, None),
        ([[0.0]], 0.1, None),
        ([0.0, 0.0], [0.1, 0.1, 0.1], None),
        ([0.0, 0.0], 0.0, None),
        ([0.0, 0.0], -0.1, None),
        ([0.0, math.nan], 0.1, None),
        ([0.0, math.radians(41.0)], 0.1, None),
        ([0.0, 0.0], 0.1, [1, 0]),
        ([0.0, 0.0], 0.1, [1]),
    ],
)
def test_simulate_steering_rejects_bad_input(
    steer: list[float], ds: float | list[float], gear: list[int] | None
) -> None:
    with pytest.raises(ValueError):
        simulate_steering(CAR, steer, ds, gear)


def test_simulate_front_path_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="wheelbase"):
        simulate_front_path(CAR, [[0.0, 0.0], [1.0, 0.0]], [-2.0, 0.0])
    with pytest.raises(ValueError):
        simulate_front_path(CAR, [[0.0, 0.0]], [-2.7, 0.0])
    with pytest.raises(ValueError):
        simulate_front_path(CAR, [0.0, 1.0, 2.0], [-2.7, 0.0])
    with pytest.raises(ValueError):
        simulate_front_path(CAR, [[0.0, 0.0], [math.inf, 0.0]], [-2.7, 0.0])
    with pytest.raises(ValueError):
        simulate_front_path(CAR, [[0.0, 0.0], [1.0, 0.0]], [-2.7, 0.0, 0.0])


def test_steady_turn_radii_rejects_bad_input() -> None:
    with pytest.raises(ValueError):
        steady_turn_radii(0.0, 0.1)
    with pytest.raises(ValueError):
        steady_turn_radii(2.0, math.pi / 2)
    with pytest.raises(ValueError):
        steady_turn_radii(2.0, math.radians(-95.0))
    r_rear, r_front = steady_turn_radii(2.0, -0.3)
    assert r_rear < 0.0 and r_front < 0.0  # signed like the steering


# --- steering profiles -------------------------------------------------------------------------


def test_profiles_have_one_value_per_step() -> None:
    assert straight(10.0, 0.1).shape == (100,)
    assert circle(10.0, 0.3, 10.0).shape == (33,)
    assert slalom(10.0, 0.1, 10.0, 5.0).shape == (100,)
    assert single_turn(30.0, 0.1, 20.0, 10.0).shape == (300,)
    assert s_curve(30.0, 0.1, 20.0, 5.0).shape == (300,)
    assert straight(0.01, 0.1).shape == (1,)
    with pytest.raises(ValueError):
        single_turn(10.0, 0.1, 20.0, 9.0, ramp_m=2.0)
    with pytest.raises(ValueError):
        straight(0.0, 0.1)
    with pytest.raises(ValueError):
        slalom(10.0, 0.1, 10.0, 0.0)


def test_circle_closes_after_one_turn() -> None:
    r_rear, _ = steady_turn_radii(CAR.wheelbase, math.radians(30.0))
    n = 1000
    ds = 2 * math.pi * r_rear / n
    run = simulate_steering(CAR, circle(n * ds, ds, 30.0), ds)
    assert len(run) == n + 1
    assert np.allclose(run.rear[-1], run.rear[0], atol=1e-9)
    assert run.heading[-1] == pytest.approx(2 * math.pi, rel=1e-12)


def test_turn_profiles_turn_the_heading_by_their_integral() -> None:
    ds = 0.05
    for steer in (single_turn(40.0, ds, 25.0, 12.0), s_curve(40.0, ds, 25.0, 6.0)):
        run = simulate_steering(CAR, steer, ds)
        assert run.heading[-1] == pytest.approx(np.sum(np.tan(steer)) * ds / CAR.wheelbase)
        assert steer[0] == 0.0 and steer[-1] == 0.0
        assert np.max(np.abs(steer)) == pytest.approx(math.radians(25.0))
    # an S-curve is a lane change: it ends with the heading it started with
    run = simulate_steering(CAR, s_curve(40.0, ds, 25.0, 6.0), ds)
    assert run.heading[-1] == pytest.approx(0.0, abs=1e-12)
    assert run.rear[-1, 1] > 1.0


def test_random_smooth_is_seeded_smooth_and_limited() -> None:
    a = random_smooth(100.0, 0.05, np.random.default_rng(1), 30.0, 4.0)
    b = random_smooth(100.0, 0.05, np.random.default_rng(1), 30.0, 4.0)
    c = random_smooth(100.0, 0.05, np.random.default_rng(2), 30.0, 4.0)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    assert np.all(np.abs(a) < math.radians(30.0))
    assert np.max(np.abs(np.diff(a))) < 0.01  # rad per 5 cm step: a smooth hand on the wheel
    assert np.std(a) > math.radians(5.0)


def test_three_point_turn_rejects_bad_input() -> None:
    with pytest.raises(ValueError):
        three_point_turn(2.7, 0.1, steer_deg=95.0)
    with pytest.raises(ValueError):
        three_point_turn(0.0, 0.1)


def test_presets_lie_in_the_trade_ranges() -> None:
    assert set(PRESETS) == {"bicycle", "motorcycle", "atv", "car", "pickup", "tractor"}
    # common practice: trade ranges listed in references.md (Vehicle dimensions)
    assert 0.96 <= BICYCLE.wheelbase <= 1.30 and BICYCLE.is_single_track
    assert 1.30 <= MOTORCYCLE.wheelbase <= 1.65 and MOTORCYCLE.is_single_track
    assert 1.15 <= ATV.wheelbase <= 1.35 and 0.85 <= ATV.track_rear <= 1.00
    assert 2.4 <= CAR.wheelbase <= 3.0 and 1.45 <= CAR.track_front <= 1.65
    assert 3.1 <= PICKUP.wheelbase <= 4.2 and 1.55 <= PICKUP.track_rear <= 1.75
    assert 2.0 <= TRACTOR.wheelbase <= 3.2 and 1.5 <= TRACTOR.track_front <= 2.3
    assert TRACTOR.track_rear > TRACTOR.track_front


# --- mapped lines --------------------------------------------------------------------------------


def _car_run() -> SimulatedPass:
    steer = random_smooth(80.0, 0.02, np.random.default_rng(21), 25.0, 6.0)
    return simulate_steering(CAR, steer, 0.02)


def test_mapped_lines_regular_spacing_without_noise() -> None:
    run = _car_run()
    lines = mapped_lines(run, 0.0, 1.5, np.random.default_rng(0), reverse_prob=0.0)
    assert list(lines) == ["rear_left", "rear_right", "front_left", "front_right"]
    wheels = run.wheels()
    for name, line in lines.items():
        assert np.array_equal(line[0], wheels[name][0]) and np.allclose(line[-1], wheels[name][-1])
        # spacing measured along the wheel path is exact; chords are a little shorter
        path = shapely.linestrings(wheels[name])
        along = shapely.line_locate_point(path, shapely.points(line))
        assert np.allclose(np.diff(along)[:-1], 1.5, atol=1e-9)  # the last gap is the remainder
        assert 0.0 < np.diff(along)[-1] <= 1.5 + 1e-9
        assert np.all(_lengths(line) <= 1.5 + 1e-9)
        # vertices lie on the simulated path
        assert np.max(shapely.distance(shapely.points(line), path)) < 1e-9


def test_mapped_lines_irregular_spacing_stays_in_range() -> None:
    run = _car_run()
    lines = mapped_lines(run, 0.0, (0.5, 3.0), np.random.default_rng(3), reverse_prob=0.0)
    gaps = np.concatenate([_lengths(line)[:-1] for line in lines.values()])
    assert np.all(gaps <= 3.0 + 1e-9) and np.all(gaps >= 0.5 * 0.999)
    assert np.std(gaps) > 0.4  # uniform on [0.5, 3]: sd about 0.72


def test_mapped_lines_noise_is_isotropic_with_the_given_sigma() -> None:
    run = simulate_steering(MOTORCYCLE, straight(400.0, 0.5), 0.5)  # along +x
    lines = mapped_lines(run, 0.05, 0.5, np.random.default_rng(5), reverse_prob=0.0)
    rear = lines["rear"]
    err_y = rear[:, 1]
    err_x = rear[:, 0] - np.r_[np.arange(rear.shape[0] - 1) * 0.5, 400.0]
    for err in (err_x, err_y):
        assert abs(np.mean(err)) < 0.01
        assert np.std(err) == pytest.approx(0.05, rel=0.1)
    assert abs(np.corrcoef(err_x, err_y)[0, 1]) < 0.15


def test_mapped_lines_reversal_frequency() -> None:
    run = simulate_steering(BICYCLE, straight(5.0, 0.5), 0.5)
    rng = np.random.default_rng(6)
    flips = 0
    trials = 400
    for _ in range(trials):
        lines = mapped_lines(run, 0.0, 1.0, rng, reverse_prob=0.3)
        flips += sum(int(line[0, 0] > line[-1, 0]) for line in lines.values())
    assert flips / (2 * trials) == pytest.approx(0.3, abs=0.05)  # binomial sd about 0.016
    for prob, expected in ((0.0, False), (1.0, True)):
        lines = mapped_lines(run, 0.0, 1.0, rng, reverse_prob=prob)
        assert all((line[0, 0] > line[-1, 0]) == expected for line in lines.values())


def test_mapped_lines_is_deterministic_and_selects_wheels() -> None:
    run = _car_run()
    a = mapped_lines(run, 0.03, (0.5, 2.0), np.random.default_rng(7), drift_m=0.1)
    b = mapped_lines(run, 0.03, (0.5, 2.0), np.random.default_rng(7), drift_m=0.1)
    c = mapped_lines(run, 0.03, (0.5, 2.0), np.random.default_rng(8), drift_m=0.1)
    assert a.keys() == b.keys() and all(np.array_equal(a[k], b[k]) for k in a)
    assert not np.array_equal(a["rear_left"], c["rear_left"])
    some = mapped_lines(run, 0.0, 1.0, np.random.default_rng(7), which=["front_right"])
    assert list(some) == ["front_right"]


def test_mapped_lines_rejects_bad_input() -> None:
    run = _car_run()
    rng = np.random.default_rng(0)
    with pytest.raises(ValueError, match="rear"):
        mapped_lines(run, 0.0, 1.0, rng, which=["rear"])
    with pytest.raises(ValueError):
        mapped_lines(run, -0.1, 1.0, rng)
    with pytest.raises(ValueError):
        mapped_lines(run, 0.0, 0.0, rng)
    with pytest.raises(ValueError):
        mapped_lines(run, 0.0, (2.0, 1.0), rng)
    with pytest.raises(ValueError):
        mapped_lines(run, 0.0, 1.0, rng, reverse_prob=1.5)


def _gauss_markov_reference(
    eps: FloatArray, steps: FloatArray, sigma: float, corr: float
) -> FloatArray:
    out = np.empty_like(eps)
    out[0] = sigma * eps[0]
    for k in range(1, eps.shape[0]):
        keep = math.exp(-steps[k - 1] / corr)
        out[k] = keep * out[k - 1] + sigma * math.sqrt(1.0 - keep * keep) * eps[k]
    return out


@pytest.mark.parametrize("corr", [3.0, 0.02])  # 0.02 m: many overflow-safe chunks
def test_correlated_noise_matches_the_ar1_recursion(corr: float) -> None:
    steps = np.random.default_rng(1).uniform(0.1, 2.0, 499)
    got = correlated_noise(500, steps, 0.2, corr, np.random.default_rng(12))
    eps = np.random.default_rng(12).standard_normal((500, 2))
    assert np.allclose(got, _gauss_markov_reference(eps, steps, 0.2, corr), atol=1e-12)


def test_correlated_noise_statistics() -> None:
    e = correlated_noise(40_000, 1.0, 0.3, 10.0, np.random.default_rng(13))
    assert e.shape == (40_000, 2)
    assert np.std(e, axis=0) == pytest.approx([0.3, 0.3], rel=0.1)
    lag1 = [np.corrcoef(e[:-1, i], e[1:, i])[0, 1] for i in range(2)]
    assert lag1 == pytest.approx([math.exp(-0.1)] * 2, abs=0.01)
    with pytest.raises(ValueError):
        correlated_noise(5, [1.0, 1.0], 0.3, 10.0, np.random.default_rng(0))
    with pytest.raises(ValueError):
        correlated_noise(0, 1.0, 0.3, 10.0, np.random.default_rng(0))


def test_fragment_cuts_gaps_and_keeps_order() -> None:
    line = np.column_stack([np.arange(0.0, 100.5, 0.5), np.zeros(201)])
    pieces = fragment(line, np.random.default_rng(14), n_gaps=3, gap_m=4.0)
    assert 1 <= len(pieces) <= 4
    joined = np.vstack(pieces)
    assert np.all(np.diff(joined[:, 0]) > 0.0)  # vertex order kept
    removed = 201 - joined.shape[0]
    assert 3 * 7 <= removed <= 3 * 9  # each 4 m gap swallows 8 or 9 vertices; gaps may overlap
    for before, after in zip(pieces[:-1], pieces[1:], strict=True):
        assert after[0, 0] - before[-1, 0] > 4.0
    assert len(fragment(line, np.random.default_rng(0), 0, 1.0)) == 1
    with pytest.raises(ValueError):
        fragment(line, np.random.default_rng(0), 1, 200.0)
    with pytest.raises(ValueError):
        fragment(line[:1], np.random.default_rng(0), 1, 1.0)
