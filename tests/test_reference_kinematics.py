"""Reference checks of geoops.kinematics against published and derived closed forms.

Each assertion names its reference beside it. The simulated passes here are only the object
under test; the expected values come from the formulas, never from other simulations.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
import pytest

from geoops.kinematics import (
    Vehicle,
    simulate_front_path,
    simulate_steering,
    steady_turn_radii,
)
from geoops.scenarios import CAR, random_smooth, three_point_turn

FloatArray = npt.NDArray[np.float64]


def _fit_circle(points: FloatArray) -> tuple[FloatArray, float]:
    """Algebraic least-squares circle (exact for points that lie on a circle)."""
    x, y = points[:, 0], points[:, 1]
    design = np.column_stack([2.0 * x, 2.0 * y, np.ones_like(x)])
    (cx, cy, k), *_ = np.linalg.lstsq(design, x * x + y * y, rcond=None)
    return np.array([cx, cy]), float(np.sqrt(k + cx * cx + cy * cy))


def _rel(a: FloatArray | float, b: FloatArray | float) -> float:
    a_arr, b_arr = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return float(np.max(np.abs(a_arr - b_arr)) / max(float(np.max(np.abs(b_arr))), 1e-300))


# --- (a) tractrix ----------------------------------------------------------------------------


@pytest.mark.parametrize("a", [0.8, 2.7])
@pytest.mark.parametrize("n_vertices", [2, 401])
def test_tractrix_closed_form(a: float, n_vertices: int) -> None:
    # puller (front) moves along +y from the origin; the object (rear) starts at (a, 0)
    p_end = 6.0 * a
    if n_vertices == 2:
        p = np.array([0.0, p_end])
    else:  # uneven collinear vertices exercise the composition of segments
        p = np.sort(np.concatenate([[0.0, p_end], np.random.default_rng(5).uniform(0, p_end, 399)]))
    front = np.column_stack([np.zeros_like(p), p])
    run = simulate_front_path(Vehicle(a), front, [a, 0.0])

    x_expected = a / np.cosh(p / a)
    y_expected = p - a * np.tanh(p / a)
    # source: tractrix (Newton 1676, Huygens 1692) closed form, (a sech(p/a), p - a tanh(p/a))
    assert _rel(run.rear[:, 0], x_expected) < 1e-6
    assert _rel(run.rear[:, 1], y_expected) < 1e-6
    # source: tractrix (Newton 1676, Huygens 1692) closed form, path length a ln(cosh(p/a))
    assert _rel(run.s[1:], a * np.log(np.cosh(p[1:] / a))) < 1e-6
    # source: tractrix (Newton 1676, Huygens 1692) closed form, y = a arsech(x/a) - sqrt(a^2 - x^2)
    x = run.rear[1:, 0]
    y_curve = a * np.arccosh(a / x) - np.sqrt(a * a - x * x)
    assert _rel(run.rear[1:, 1], y_curve) < 1e-6
    # der: the bar is tangent to the tractrix, so the heading is the bar direction rear -> front
    bar = run.front - run.rear
    wrapped = np.angle(np.exp(1j * (np.arctan2(bar[:, 1], bar[:, 0]) - run.heading)))
    assert np.allclose(wrapped, 0.0, atol=1e-12)


# --- (b) steady turn -------------------------------------------------------------------------


@pytest.mark.parametrize("steer_deg", [5.0, 25.0, -38.0])
def test_steady_turn_radii(steer_deg: float) -> None:
    delta = math.radians(steer_deg)
    length = CAR.wheelbase
    run = simulate_steering(CAR, np.full(300, delta), 0.05, start=(3.0, -1.0, 0.4))
    centre_r, r_rear = _fit_circle(run.rear)
    centre_f, r_front = _fit_circle(run.front)
    want_rear, want_front = steady_turn_radii(length, delta)
    # source: kinematic bicycle model, Lynch & Park, Modern Robotics, 2017 (rear-axle reference)
    # der: steady turn R_rear = L / tan(delta), derived from the kinematic bicycle model
    assert r_rear == pytest.approx(abs(length / math.tan(delta)), rel=1e-6)
    # der: R_front^2 = R_rear^2 + L^2, derived from the kinematic bicycle model
    assert r_front**2 == pytest.approx(r_rear**2 + length**2, rel=1e-6)
    # der: R_front = L / sin(delta), derived from the kinematic bicycle model
    assert r_front == pytest.approx(abs(want_front), rel=1e-6)
    assert abs(want_rear) == pytest.approx(r_rear, rel=1e-6)
    # der: both axle midpoints turn about one centre, derived from the kinematic bicycle model
    assert np.allclose(centre_r, centre_f, atol=1e-6 * length)


def test_steady_turn_radii_function() -> None:
    r_rear, r_front = steady_turn_radii(2.0, math.radians(30.0))
    # der: R_rear = L / tan(delta), R_front = L / sin(delta), from the kinematic bicycle model
    assert r_rear == pytest.approx(2.0 * math.sqrt(3.0), rel=1e-12)
    assert r_front == pytest.approx(4.0, rel=1e-12)
    assert steady_turn_radii(2.0, 0.0) == (math.inf, math.inf)


# --- (c) small weave -------------------------------------------------------------------------


def test_small_weave_amplitude_and_phase_lead() -> None:
    # The front is driven along a small sinusoid chosen so that, by the derived small-amplitude
    # relation, the steady rear track is y = A sin(k x): front amplitude A sqrt(1 + (kL)^2),
    # phase lead atan(kL) over the rear point of the same instant. That rear point lies L behind
    # in x, so in a common x the front's phase is atan(kL) - kL. After the start-up transient
    # has died out (exp(-s/L)) the rear is fitted and compared.
    length, wavelength, amp = 1.0, 20.0, 0.02
    k = 2.0 * math.pi / wavelength
    amp_front = amp * math.sqrt(1.0 + (k * length) ** 2)
    phase = math.atan(k * length) - k * length
    x = np.arange(0.0, 12 * wavelength, 0.02)
    front = np.column_stack([x, amp_front * np.sin(k * x + phase)])
    run = simulate_front_path(Vehicle(length), front, front[0] - [length, 0.0])
    settled = run.rear[:, 0] > 8 * wavelength
    xr, yr = run.rear[settled, 0], run.rear[settled, 1]
    (c_sin, c_cos), *_ = np.linalg.lstsq(
        np.column_stack([np.sin(k * xr), np.cos(k * xr)]), yr, rcond=None
    )
    # der: small weave, rear y = A sin(kx) <-> front amplitude A sqrt(1 + (kL)^2), lead atan(kL)
    assert math.hypot(c_sin, c_cos) == pytest.approx(amp, rel=1e-4)
    # der: same relation; the rear shows no phase offset relative to sin(k x)
    assert abs(math.atan2(c_cos, c_sin)) < 1e-5


# --- (d) exponential decay of the sideways offset ----------------------------------------------


def test_offset_decays_like_exp_minus_travel_over_wheelbase() -> None:
    length, radius = 2.5, 12.0
    # front: a quarter turn onto the x-axis, then 40 m straight along +x
    ang = np.linspace(-0.5 * math.pi, 0.0, 200)  # left turn about (0, R), ends at 0 heading +x
    arc = np.column_stack([radius * np.sin(ang), radius * (1.0 - np.cos(ang))])
    line = np.column_stack([np.linspace(0.0, 40.0, 801), np.zeros(801)])
    front = np.vstack([arc, line[1:]])
    tangent0 = front[1] - front[0]
    rear0 = front[0] - length * tangent0 / np.hypot(*tangent0)
    run = simulate_front_path(Vehicle(length), front, rear0)

    on_line = np.arange(arc.shape[0] - 1, front.shape[0])
    p = front[on_line, 0]  # front travel since the end of the turn
    offset = run.rear[on_line, 1]
    window = (p > 2.0 * length) & (p < 12.0 * length)
    slope = np.polyfit(p[window], np.log(np.abs(offset[window])), 1)[0]
    # der: the rear's sideways offset decays like exp(-p/L) behind a straight front path
    assert -1.0 / slope == pytest.approx(length, rel=1e-4)
    # der: half-distance L ln 2
    half = np.interp(0.5 * abs(offset[window][0]), np.abs(offset[window])[::-1], p[window][::-1])
    assert half - p[window][0] == pytest.approx(length * math.log(2.0), rel=1e-3)
    # the offset keeps one sign (the rear approaches the line from one side, never crosses)
    assert np.all(offset[1:] > 0.0) or np.all(offset[1:] < 0.0)


# --- (e) front = rear + L * unit tangent of the rear track -------------------------------------


def _central_tangent(points: FloatArray) -> FloatArray:
    chord = points[2:] - points[:-2]
    return np.asarray(chord / np.hypot(chord[:, 0], chord[:, 1])[:, None], dtype=np.float64)


def test_front_is_rear_plus_wheelbase_along_travel_tangent() -> None:
    steer = random_smooth(150.0, 0.01, np.random.default_rng(11), 35.0, 4.0)
    run = simulate_steering(CAR, steer, 0.01, start=(10.0, 20.0, 1.0))
    tangent = _central_tangent(run.rear)  # tangent in the direction of travel (forward run)
    # source: Finn, "Which Way Did You Say That Bicycle Went?", Mathematics Magazine, 2004
    assert np.allclose(run.front[1:-1], run.rear[1:-1] + CAR.wheelbase * tangent, atol=1e-4)
    # the same relation followed backward does not hold (this is what fixes the direction)
    miss = np.hypot(*(run.front[1:-1] - (run.rear[1:-1] - CAR.wheelbase * tangent)).T)
    assert np.min(miss) > 1.9 * CAR.wheelbase


def test_front_tangent_relation_in_reverse_uses_heading_direction() -> None:
    steer, gear = three_point_turn(CAR.wheelbase, 0.01)
    run = simulate_steering(CAR, steer, 0.01, gear=gear)
    tangent = _central_tangent(run.rear)
    # a central chord is a tangent only where gear and steering agree on both sides of the pose
    g_before, g_after = run.gear[:-2], run.gear[1:-1]
    steady = (g_before == g_after) & (steer[:-1] == steer[1:])
    heading_tangent = tangent * g_after[:, None]
    rear, front = run.rear[1:-1][steady], run.front[1:-1][steady]
    # source: Finn, Mathematics Magazine, 2004; der: in reverse the tangent points along the
    # heading, i.e. against the travel direction (kinematic bicycle model)
    assert np.allclose(front, rear + CAR.wheelbase * heading_tangent[steady], atol=1e-4)
    reversing = (g_after == -1)[steady]
    assert reversing.sum() > 100
    travel = tangent[steady][reversing]
    # der: while reversing, front = rear - L * (unit tangent in the direction of travel)
    assert np.allclose(front[reversing], rear[reversing] - CAR.wheelbase * travel, atol=1e-4)


def test_front_path_solver_keeps_rear_velocity_along_the_bar() -> None:
    # dense, curving front path; the rear's track tangent must be the bar direction
    t = np.linspace(0.0, 30.0, 30001)
    front = np.column_stack([t, 3.0 * np.sin(0.3 * t) + 0.02 * t**2])
    length = 1.4
    tangent0 = front[1] - front[0]
    run = simulate_front_path(
        Vehicle(length), front, front[0] - length * tangent0 / np.hypot(*tangent0)
    )
    tangent = _central_tangent(run.rear)
    # source: Finn, Mathematics Magazine, 2004 (front = rear + L * unit tangent of the rear)
    assert np.allclose(run.front[1:-1], run.rear[1:-1] + length * tangent, atol=1e-4)


def test_steady_turn_wheelbase_estimator_on_mapped_circles():
    """The second wheelbase estimator reads R_front^2 = R_rear^2 + L^2 off mapped tracks."""
    import numpy as np

    from geoops.clean import clean_rut
    from geoops.crosscheck import steady_turn_wheelbase
    from geoops.kinematics import simulate_steering
    from geoops.scenarios import BICYCLE, circle, mapped_lines

    for seed in range(3):
        sim = simulate_steering(BICYCLE, circle(40.0, 0.02, 30.0), 0.02)
        lines = mapped_lines(sim, 0.005, (0.2, 0.4), np.random.default_rng(seed))
        est = steady_turn_wheelbase(clean_rut([lines["rear"]]), clean_rut([lines["front"]]))
        # source: kinematic bicycle model steady turn R_front^2 = R_rear^2 + L^2 (Lynch & Park,
        # Modern Robotics, 2017; references.md)
        assert est is not None
        assert abs(est / BICYCLE.wheelbase - 1) < 0.05
