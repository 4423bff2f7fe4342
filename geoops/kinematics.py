"""Low-speed vehicle kinematics: simulate where the axles and wheels of a pass go.

This module holds the physics that the rest of rutwise reasons with, in executable form:

* the kinematic bicycle model with the rear-axle midpoint as reference point, integrated
  exactly (each step is a constant-curvature arc) by :func:`simulate_steering`;
* the rigid-bar (tractrix) problem, the rear-axle midpoint dragged by a front-axle midpoint
  that moves along a given polyline, solved exactly per straight front segment by
  :func:`simulate_front_path`;
* the steady-turn radii of both axle midpoints, :func:`steady_turn_radii`.

All of it assumes low speed and no tyre slip: the rear axle never moves sideways. The module is
pure computation over numpy arrays. It must not read files, draw random numbers (scenario
building lives in :mod:`geoops.scenarios`) or know anything about ruts as mapped features.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from geoops.errors import BadInput

FloatArray = npt.NDArray[np.float64]

__all__ = [
    "KinematicsInputError",
    "SimulatedPass",
    "Vehicle",
    "simulate_front_path",
    "simulate_steering",
    "steady_turn_radii",
]

#: front travel per segment, in wheelbases, beyond which the decay factor exp(-p/L) is held at
#: exp(-300); the bar is then aligned with the segment to far below float precision anyway.
_MAX_DECAY_WHEELBASES = 300.0


class KinematicsInputError(BadInput, ValueError):
    """A vehicle or simulation input is out of range or inconsistent.

    It is both a :class:`geoops.errors.BadInput` (so adapters report it with its hint) and a
    :class:`ValueError` (so plain numerical callers can catch it as usual).
    """

    kind = "bad-kinematics-input"


def _fail(message: str, hint: str) -> KinematicsInputError:
    return KinematicsInputError(message, hint)


@dataclass(frozen=True)
class Vehicle:
    """A rigid two-axle vehicle as the kinematic bicycle model sees it.

    Parameters
    ----------
    wheelbase
        Distance from the rear-axle midpoint to the front-axle midpoint, m.
    track_front, track_rear
        Distance between the tyre centres across the front and rear axle, m. ``0`` on both
        means a single-track vehicle (bicycle, motorcycle).
    max_steer_deg
        Largest steering angle of the front-axle midpoint, degrees, in ``(0, 90)``.
    name
        Free label.

    Examples
    --------
    >>> Vehicle(2.7, 1.55, 1.55, name="car").is_single_track
    False
    >>> Vehicle(1.05).is_single_track
    True
    """

    wheelbase: float
    track_front: float = 0.0
    track_rear: float = 0.0
    max_steer_deg: float = 40.0
    name: str = ""

    def __post_init__(self) -> None:
        if not (math.isfinite(self.wheelbase) and self.wheelbase > 0.0):
            raise _fail(
                f"wheelbase must be a positive number of metres, got {self.wheelbase!r}.",
                "Give the rear-axle to front-axle distance in metres.",
            )
        for label, value in (("track_front", self.track_front), ("track_rear", self.track_rear)):
            if not (math.isfinite(value) and value >= 0.0):
                raise _fail(
                    f"{label} must be zero or a positive number of metres, got {value!r}.",
                    "Use 0 for a single-track vehicle, else the tyre centre-to-centre distance.",
                )
        if (self.track_front == 0.0) != (self.track_rear == 0.0):
            raise _fail(
                "track_front and track_rear must both be zero (single track) or both positive.",
                "Give both track widths of a four-wheel vehicle.",
            )
        if not (0.0 < self.max_steer_deg < 90.0):
            raise _fail(
                f"max_steer_deg must lie in (0, 90), got {self.max_steer_deg!r}.",
                "Give the steering lock of the front-axle midpoint in degrees.",
            )

    @property
    def is_single_track(self) -> bool:
        """True for a vehicle with one wheel per axle (both track widths zero)."""
        return self.track_front == 0.0 and self.track_rear == 0.0


@dataclass(frozen=True, eq=False)
class SimulatedPass:
    """Poses of one simulated vehicle pass, sampled at ``n`` instants.

    Attributes
    ----------
    vehicle
        The vehicle that made the pass.
    s
        ``(n,)`` cumulative unsigned path length of the rear-axle midpoint, m, starting at 0.
    rear, front
        ``(n, 2)`` rear-axle and front-axle midpoints; ``front = rear + L * (cos, sin)(heading)``.
    heading
        ``(n,)`` body heading from rear to front, radians, continuous (not wrapped).
    gear
        ``(n,)`` int8, ``+1`` when the rear-axle midpoint moves along the heading (forward),
        ``-1`` when it moves against it (reverse). ``gear[i]`` describes the motion from pose
        ``i`` to pose ``i + 1``; the last pose repeats the last step's value.
    """

    vehicle: Vehicle
    s: FloatArray
    rear: FloatArray
    front: FloatArray
    heading: FloatArray
    gear: npt.NDArray[np.int8]

    def __len__(self) -> int:
        return int(self.s.shape[0])

    def wheels(self) -> dict[str, FloatArray]:
        """Paths of the tyre centres.

        Returns
        -------
        dict of str to (n, 2) float arrays
            Single-track vehicle: ``'rear'`` and ``'front'`` (the axle midpoints). Four-wheel
            vehicle: ``'rear_left'``, ``'rear_right'``, ``'front_left'``, ``'front_right'``,
            left being +90 degrees from the heading; ``front_left = front + (track_front/2) n``
            and ``rear_left = rear + (track_rear/2) n`` with ``n`` the left unit normal.

        Examples
        --------
        >>> import numpy as np
        >>> car = Vehicle(2.5, 1.5, 1.5)
        >>> w = simulate_steering(car, np.zeros(2), 1.0).wheels()
        >>> sorted(w)
        ['front_left', 'front_right', 'rear_left', 'rear_right']
        >>> w["rear_left"][0].tolist(), w["front_right"][-1].tolist()
        ([0.0, 0.75], [4.5, -0.75])
        """
        if self.vehicle.is_single_track:
            return {"rear": self.rear.copy(), "front": self.front.copy()}
        normal = np.column_stack([-np.sin(self.heading), np.cos(self.heading)])
        half_r = 0.5 * self.vehicle.track_rear * normal
        half_f = 0.5 * self.vehicle.track_front * normal
        return {
            "rear_left": self.rear + half_r,
            "rear_right": self.rear - half_r,
            "front_left": self.front + half_f,
            "front_right": self.front - half_f,
        }


def _sinc(x: FloatArray) -> FloatArray:
    """sin(x)/x with the removable singularity filled (numpy's sinc is sin(pi x)/(pi x))."""
    return np.sinc(x / np.pi)


def simulate_steering(
    vehicle: Vehicle,
    steer: npt.ArrayLike,
    ds: float | npt.ArrayLike,
    gear: npt.ArrayLike | None = None,
    start: tuple[float, float, float] = (0.0, 0.0, 0.0),
) -> SimulatedPass:
    """Drive the kinematic bicycle model with a piecewise-constant steering profile.

    The rear-axle midpoint ``R`` moves along the heading ``psi`` and the heading turns by
    ``tan(delta) / L`` per metre of signed rear travel. Step ``i`` holds ``steer[i]`` for a rear
    path length ``ds[i]`` in the sense ``gear[i]``; the rear then runs along a circular arc (or a
    straight), which is integrated in closed form, so the poses are exact to rounding whatever
    the step length. The whole run is vectorised with cumulative sums.

    Parameters
    ----------
    vehicle
        The vehicle; its wheelbase ``L`` and steering lock are used.
    steer
        ``(m,)`` steering angle of the front-axle midpoint per step, radians, positive to the
        left; ``|steer|`` must not exceed ``vehicle.max_steer_deg``.
    ds
        Rear path length per step, m, positive: a scalar or an ``(m,)`` array.
    gear
        ``(m,)`` values ``+1`` (forward) or ``-1`` (reverse); default all forward.
    start
        Initial rear-axle midpoint and heading ``(x, y, heading_rad)``.

    Returns
    -------
    SimulatedPass
        ``m + 1`` poses.

    Raises
    ------
    KinematicsInputError
        (a ``ValueError``) on empty, non-finite, mis-shaped or out-of-range input.

    Examples
    --------
    A quarter circle of rear radius ``L / tan(45 deg) = 2`` m:

    >>> import numpy as np
    >>> car = Vehicle(2.0, max_steer_deg=45.0)
    >>> run = simulate_steering(car, np.full(4, np.pi / 4), np.pi / 4)
    >>> np.round(run.rear[-1], 12).tolist(), round(float(run.heading[-1]), 12)
    ([2.0, 2.0], 1.570796326795)
    """
    steer_a = np.asarray(steer, dtype=np.float64)
    if steer_a.ndim != 1 or steer_a.size == 0:
        raise _fail("steer must be a non-empty 1-D array of angles.", "Pass one angle per step.")
    m = steer_a.size
    try:
        ds_a = np.broadcast_to(np.asarray(ds, dtype=np.float64), (m,))
    except ValueError:
        raise _fail(
            f"ds must be a scalar or have one value per step ({m}).",
            "Give one rear path length per steering value.",
        ) from None
    if not (np.all(np.isfinite(steer_a)) and np.all(np.isfinite(ds_a))):
        raise _fail("steer and ds must be finite.", "Remove NaN or infinite values.")
    if np.any(ds_a <= 0.0):
        raise _fail("ds must be positive.", "Give the gear (+1/-1) to drive backwards.")
    lock = math.radians(vehicle.max_steer_deg)
    if np.any(np.abs(steer_a) > lock * (1.0 + 1e-12)):
        raise _fail(
            f"steering exceeds the vehicle's lock of {vehicle.max_steer_deg} degrees "
            f"(largest |steer| = {math.degrees(float(np.max(np.abs(steer_a)))):.3f} degrees).",
            "Clip the profile to the lock or raise Vehicle.max_steer_deg.",
        )
    if gear is None:
        gear_a = np.ones(m, dtype=np.int8)
    else:
        gear_in = np.asarray(gear)
        if gear_in.shape != (m,) or not np.all(np.isin(gear_in, (-1, 1))):
            raise _fail(
                f"gear must hold one value +1 or -1 per step ({m}).",
                "Use +1 for forward and -1 for reverse.",
            )
        gear_a = gear_in.astype(np.int8)
    x0, y0, h0 = (float(v) for v in start)
    if not all(math.isfinite(v) for v in (x0, y0, h0)):
        raise _fail("start must be three finite numbers (x, y, heading).", "Fix the start pose.")

    signed = gear_a * ds_a  # signed rear travel per step
    dpsi = np.tan(steer_a) / vehicle.wheelbase * signed
    heading = h0 + np.concatenate([[0.0], np.cumsum(dpsi)])
    # exact chord of a constant-curvature arc: length d*sinc(dpsi/2), direction psi + dpsi/2
    chord = signed * _sinc(0.5 * dpsi)
    mid = heading[:-1] + 0.5 * dpsi
    rear = np.empty((m + 1, 2))
    rear[0] = (x0, y0)
    rear[1:, 0] = x0 + np.cumsum(chord * np.cos(mid))
    rear[1:, 1] = y0 + np.cumsum(chord * np.sin(mid))
    front = rear + vehicle.wheelbase * np.column_stack([np.cos(heading), np.sin(heading)])
    s = np.concatenate([[0.0], np.cumsum(ds_a)])
    gear_out = np.concatenate([gear_a, gear_a[-1:]]).astype(np.int8)
    return SimulatedPass(vehicle, s, rear, front, heading, gear_out)


def _half_angle_transfer(gamma: FloatArray, q: FloatArray) -> FloatArray:
    """Per-segment 2x2 maps acting on the half-angle vector (cos(phi/2), sin(phi/2)).

    Along a straight front segment whose backward direction has angle ``gamma`` the bar angle
    ``phi`` obeys ``tan((phi - gamma)/2) -> q * tan((phi - gamma)/2)``: a rotation by
    ``-gamma/2``, a scaling ``diag(1, q)`` and a rotation back, i.e. a linear map of the
    half-angle vector (up to a positive factor).
    """
    c, s = np.cos(0.5 * gamma), np.sin(0.5 * gamma)
    one_minus_q = 1.0 - q
    out = np.empty(gamma.shape + (2, 2))
    out[..., 0, 0] = 1.0 - one_minus_q * s * s
    out[..., 1, 1] = 1.0 - one_minus_q * c * c
    out[..., 0, 1] = one_minus_q * c * s
    out[..., 1, 0] = one_minus_q * c * s
    return out


def _prefix_products(mats: FloatArray) -> FloatArray:
    """Inclusive prefix products ``P[k] = M[k] @ ... @ M[0]``, each scaled to unit max-norm.

    A Hillis-Steele scan: ``ceil(log2(m))`` vectorised rounds instead of ``m`` Python
    iterations, with the 2x2 products written out entry by entry (much faster than batched
    ``matmul`` on tiny matrices). The scale of each product is irrelevant (the maps act
    projectively), so every partial product is renormalised to keep it away from underflow.
    """
    a, b = mats[:, 0, 0].copy(), mats[:, 0, 1].copy()
    c, d = mats[:, 1, 0].copy(), mats[:, 1, 1].copy()
    m = a.size
    offset = 1
    while offset < m:
        la, lb, lc, ld = a[offset:], b[offset:], c[offset:], d[offset:]
        ra, rb, rc, rd = a[:-offset], b[:-offset], c[:-offset], d[:-offset]
        na = la * ra + lb * rc
        nb = la * rb + lb * rd
        nc = lc * ra + ld * rc
        nd = lc * rb + ld * rd
        scale = np.maximum(np.maximum(np.abs(na), np.abs(nb)), np.maximum(np.abs(nc), np.abs(nd)))
        scale[scale == 0.0] = 1.0
        a[offset:], b[offset:] = na / scale, nb / scale
        c[offset:], d[offset:] = nc / scale, nd / scale
        offset *= 2
    out = np.empty_like(mats)
    out[:, 0, 0], out[:, 0, 1], out[:, 1, 0], out[:, 1, 1] = a, b, c, d
    return out


def simulate_front_path(
    vehicle: Vehicle, front: npt.ArrayLike, rear_start: npt.ArrayLike
) -> SimulatedPass:
    """Drag the rear-axle midpoint behind a front-axle midpoint that follows a polyline.

    The bar from front to rear keeps the wheelbase ``L`` and the rear never slips sideways, so
    the rear moves along the bar (the tractrix problem). Along one straight front segment, with
    ``theta`` the angle between the bar (front -> rear) and the direction opposite to the motion,
    ``tan(theta / 2)`` shrinks as ``exp(-p / L)`` over front travel ``p``. That closed form is
    applied exactly per segment; the chain of segments is composed as a product of 2x2 maps on
    the half-angle vector, evaluated with a logarithmic-depth vectorised scan (about 0.07 s for
    1e5 segments on one core), so there is no Python loop over segments.

    The rear path length within a segment is also closed-form: the signed rear travel along the
    heading is ``L ln(sin theta0 / sin theta1)``.

    Parameters
    ----------
    vehicle
        The vehicle; only its wheelbase is used (no steering lock is enforced, since the front
        path fixes the motion).
    front
        ``(n, 2)`` polyline of the front-axle midpoint, in the order it is driven, ``n >= 2``.
        Repeated vertices are allowed (the rear stays put).
    rear_start
        ``(2,)`` rear-axle midpoint at the first front vertex; must lie one wheelbase from it.

    Returns
    -------
    SimulatedPass
        ``n`` poses, one per front vertex. ``gear[i]`` is the motion sense of the rear at the end
        of segment ``i`` (the rear may reverse once inside a segment when the bar starts more
        than 90 degrees off the backward direction; that shows at the next pose).

    Raises
    ------
    KinematicsInputError
        (a ``ValueError``) when ``|front[0] - rear_start|`` differs from the wheelbase by more
        than ``1e-9 * L`` or the input is mis-shaped or not finite.

    Notes
    -----
    When the front drives *towards* the rear (bar angle above 90 degrees from the backward
    direction) the rear is pushed, an unstable motion: small input differences grow like
    ``exp(p / L)``, as they do in the physics. Per segment the decay factor is floored at
    ``exp(-300)``, far below float precision for any bar not exactly pushed.

    Examples
    --------
    The front drives 1000 wheelbases along +x; the rear, starting beside the line, ends up
    trailing on it:

    >>> import numpy as np
    >>> run = simulate_front_path(Vehicle(1.0), [[0.0, 0.0], [1000.0, 0.0]], [0.0, -1.0])
    >>> np.round(run.rear[-1], 9).tolist(), float(run.s[-1] - (1000.0 - 1.0 * np.log(2.0)))
    ([999.0, -0.0], 0.0)
    """
    length = vehicle.wheelbase
    f = np.asarray(front, dtype=np.float64)
    r0 = np.asarray(rear_start, dtype=np.float64)
    if f.ndim != 2 or f.shape[1] != 2 or f.shape[0] < 2:
        raise _fail("front must be an (n, 2) polyline with n >= 2.", "Pass x, y columns.")
    if r0.shape != (2,):
        raise _fail("rear_start must be one (x, y) point.", "Pass a length-2 sequence.")
    if not (np.all(np.isfinite(f)) and np.all(np.isfinite(r0))):
        raise _fail("front and rear_start must be finite.", "Remove NaN or infinite values.")
    bar0 = r0 - f[0]
    dist0 = float(np.hypot(bar0[0], bar0[1]))
    if abs(dist0 - length) > 1e-9 * length:
        raise _fail(
            f"rear_start lies {dist0:.9g} m from the first front vertex, not one wheelbase "
            f"({length:.9g} m).",
            "Place the rear start exactly one wheelbase from front[0].",
        )

    seg = np.diff(f, axis=0)
    p = np.hypot(seg[:, 0], seg[:, 1])
    moving = p > 0.0
    # unit direction opposite to the motion; any unit vector for a zero-length segment
    back = np.zeros_like(seg)
    back[moving] = -seg[moving] / p[moving, None]
    back[~moving, 0] = 1.0
    gamma = np.arctan2(back[:, 1], back[:, 0])
    q = np.exp(-np.minimum(p / length, _MAX_DECAY_WHEELBASES))

    phi0 = math.atan2(bar0[1], bar0[0])
    v0 = np.array([math.cos(0.5 * phi0), math.sin(0.5 * phi0)])
    prods = _prefix_products(_half_angle_transfer(gamma, q))
    v = np.vstack([v0, prods @ v0])
    # bar unit vector from the half-angle vector: (c^2 - s^2, 2 c s) / (c^2 + s^2)
    norm2 = v[:, 0] ** 2 + v[:, 1] ** 2
    bar = np.column_stack([v[:, 0] ** 2 - v[:, 1] ** 2, 2.0 * v[:, 0] * v[:, 1]]) / norm2[:, None]
    rear = f + length * bar
    heading = np.unwrap(np.arctan2(-bar[:, 1], -bar[:, 0]))

    # rear travel per segment from the bar angle at its start (cos c0, signed sin s0)
    c0 = np.clip(np.einsum("ij,ij->i", back, bar[:-1]), -1.0, 1.0)
    s0 = back[:, 0] * bar[:-1, 1] - back[:, 1] * bar[:-1, 0]
    q2 = q * q
    denom = (1.0 + c0) + (1.0 - c0) * q2
    c1 = ((1.0 + c0) - (1.0 - c0) * q2) / denom
    with np.errstate(divide="ignore"):
        # signed rear travel along the heading: L ln(sin t0 / sin t1) = L ln(D / 2) + p with
        # D / 2 = (1 + c0)/2 + (1 - c0)/2 exp(-2p/L), summed in the log domain (exact p, no floor)
        log_half_d = np.logaddexp(
            np.log1p(-0.5 * (1.0 - c0)), np.log(0.5 * (1.0 - c0)) - 2.0 * p / length
        )
        signed = np.where(moving, length * log_half_d + p, 0.0)
        # a reversal inside the segment (theta passes 90 deg): L(-ln|sin t0|) + L(-ln|sin t1|),
        # which equals signed - 2 L ln|sin t0|
        through = signed - 2.0 * length * np.log(np.abs(s0))
    crosses = moving & (c0 < 0.0) & (c1 > 0.0)
    travel = np.where(crosses, through, np.abs(signed))
    s = np.concatenate([[0.0], np.cumsum(travel)])
    # motion sense at the end of each segment; a standing segment keeps the previous sense
    sense = np.where(c1 < 0.0, -1, 1)
    last_moving = np.maximum.accumulate(np.where(moving, np.arange(moving.size), -1))
    gear_step = np.where(last_moving >= 0, sense[np.maximum(last_moving, 0)], 1).astype(np.int8)
    gear_out = np.concatenate([gear_step, gear_step[-1:]]).astype(np.int8)
    return SimulatedPass(vehicle, s, rear, f.copy(), heading, gear_out)


def steady_turn_radii(wheelbase: float, steer: float) -> tuple[float, float]:
    """Turn radii of the rear-axle and front-axle midpoints at a constant steering angle.

    ``R_rear = L / tan(delta)`` and ``R_front = L / sin(delta)``, so that
    ``R_front**2 = R_rear**2 + L**2``. Both are signed like ``delta`` (positive for a left
    turn) and infinite for ``delta = 0``.

    Parameters
    ----------
    wheelbase
        ``L``, m, positive.
    steer
        ``delta``, radians, ``|delta| < pi/2``.

    Returns
    -------
    tuple of float
        ``(R_rear, R_front)`` in metres.

    Examples
    --------
    >>> import math
    >>> r_rear, r_front = steady_turn_radii(3.0, math.radians(45.0))
    >>> round(r_rear, 12), round(r_front ** 2 - r_rear ** 2, 12)
    (3.0, 9.0)
    """
    if not (math.isfinite(wheelbase) and wheelbase > 0.0):
        raise _fail(f"wheelbase must be positive, got {wheelbase!r}.", "Give metres.")
    if not (math.isfinite(steer) and abs(steer) < 0.5 * math.pi):
        raise _fail(
            f"steer must be finite with |steer| < pi/2 radians, got {steer!r}.",
            "Give the steering angle in radians, not degrees.",
        )
    if steer == 0.0:
        return math.inf, math.inf
    return wheelbase / math.tan(steer), wheelbase / math.sin(steer)
