"""Seeded scenario builders: steering profiles, vehicle presets and simulated survey lines.

Tests, benchmarks and the demo-data script use these to make passes whose truth is known:
a steering profile drives :func:`geoops.kinematics.simulate_steering`, and
:func:`mapped_lines` turns the simulated wheel paths into what a field survey or a digitiser
would hand over (resampled vertices, position noise, either vertex order, gaps).

Everything random takes an explicit ``numpy.random.Generator``; nothing here touches global
random state. Simulated data is for the demo and for simulation-based tests only; it never
serves as the reference that proves the engine right.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np
import numpy.typing as npt
import shapely
from scipy.ndimage import gaussian_filter1d

from geoops.kinematics import KinematicsInputError, SimulatedPass, Vehicle

FloatArray = npt.NDArray[np.float64]

__all__ = [
    "ATV",
    "BICYCLE",
    "CAR",
    "MOTORCYCLE",
    "PICKUP",
    "PRESETS",
    "TRACTOR",
    "circle",
    "correlated_noise",
    "follows_path",
    "fragment",
    "mapped_lines",
    "merged_lines",
    "random_smooth",
    "s_curve",
    "single_turn",
    "slalom",
    "straight",
    "three_point_turn",
]

# --- vehicle presets (metres; wheelbase, then track front / rear, centre to centre) ------------
# common practice: road bicycle wheelbase 0.96-1.05 m, single track (references.md, trade)
BICYCLE = Vehicle(1.05, name="bicycle")
# common practice: motorcycle wheelbase 1.30-1.65 m, single track (references.md, trade)
MOTORCYCLE = Vehicle(1.45, name="motorcycle")
# common practice: ATV / quad wheelbase 1.15-1.35 m, track 0.85-1.00 m (references.md, trade)
ATV = Vehicle(1.25, 0.9, 0.9, name="atv")
# common practice: passenger car wheelbase 2.4-3.0 m, track 1.45-1.65 m (references.md, trade)
CAR = Vehicle(2.7, 1.55, 1.55, name="car")
# common practice: pickup wheelbase 3.1-4.2 m, track 1.55-1.75 m (references.md, trade)
PICKUP = Vehicle(3.6, 1.65, 1.65, name="pickup")
# common practice: farm tractor wheelbase 2.0-3.2 m, track 1.5-2.3 m, adjustable (references.md)
TRACTOR = Vehicle(2.5, 1.6, 1.9, name="tractor")
# (every preset keeps the default 40 degree lock; common practice: road steering 35-45 degrees)

#: the presets by name
PRESETS: dict[str, Vehicle] = {v.name: v for v in (BICYCLE, MOTORCYCLE, ATV, CAR, PICKUP, TRACTOR)}


def _fail(message: str, hint: str) -> KinematicsInputError:
    return KinematicsInputError(message, hint)


def _stations(length_m: float, ds: float) -> FloatArray:
    """Rear path length at the middle of each of ``round(length_m / ds)`` steps (at least 1)."""
    if not (math.isfinite(length_m) and length_m > 0.0):
        raise _fail(f"path length must be positive, got {length_m!r}.", "Give metres.")
    if not (math.isfinite(ds) and ds > 0.0):
        raise _fail(f"ds must be positive, got {ds!r}.", "Give the step length in metres.")
    n = max(1, round(length_m / ds))
    return np.asarray((np.arange(n) + 0.5) * ds, dtype=np.float64)


# --- steering profiles: one angle (radians) per step of rear path length ds -------------------


def straight(length_m: float, ds: float) -> FloatArray:
    """Zero steering over ``round(length_m / ds)`` steps.

    Examples
    --------
    >>> straight(1.0, 0.25).tolist()
    [0.0, 0.0, 0.0, 0.0]
    """
    return np.zeros_like(_stations(length_m, ds))


def circle(length_m: float, ds: float, steer_deg: float) -> FloatArray:
    """Constant steering (a steady turn), positive to the left.

    Examples
    --------
    >>> import numpy as np
    >>> np.degrees(circle(1.0, 0.5, 20.0)).round(9).tolist()
    [20.0, 20.0]
    """
    return np.full_like(_stations(length_m, ds), math.radians(steer_deg))


def slalom(
    length_m: float, ds: float, amplitude_deg: float, period_m: float, phase_deg: float = 0.0
) -> FloatArray:
    """Sinusoidal steering ``amplitude * sin(2 pi s / period + phase)`` (a weave).

    Examples
    --------
    >>> import numpy as np
    >>> steer = slalom(8.0, 1.0, 10.0, 4.0, phase_deg=45.0)
    >>> np.degrees(steer[:2]).round(6).tolist()
    [10.0, 0.0]
    """
    if not (math.isfinite(period_m) and period_m > 0.0):
        raise _fail(f"period_m must be positive, got {period_m!r}.", "Give metres.")
    s = _stations(length_m, ds)
    arg = 2.0 * math.pi * s / period_m + math.radians(phase_deg)
    return np.asarray(math.radians(amplitude_deg) * np.sin(arg), dtype=np.float64)


def _trapezoids(
    length_m: float, ds: float, pieces: list[tuple[float, float]], ramp_m: float
) -> FloatArray:
    """Straight lead-in, then ``(steer_deg, hold_m)`` pieces joined by linear ramps, centred."""
    if not (math.isfinite(ramp_m) and ramp_m >= 0.0):
        raise _fail(f"ramp_m must be zero or positive, got {ramp_m!r}.", "Give metres.")
    s = _stations(length_m, ds)
    busy = sum(hold for _, hold in pieces) + ramp_m * (len(pieces) + 1)
    if any(hold < 0.0 for _, hold in pieces) or busy > length_m:
        raise _fail(
            f"the turns and ramps need {busy:.3f} m but the path is {length_m:.3f} m long.",
            "Lengthen the path or shorten turn_m / ramp_m.",
        )
    knots_s = [0.0, 0.5 * (length_m - busy)]
    knots_v = [0.0, 0.0]
    for steer_deg, hold in pieces:
        knots_s += [knots_s[-1] + ramp_m, knots_s[-1] + ramp_m + hold]
        knots_v += [math.radians(steer_deg)] * 2
    knots_s += [knots_s[-1] + ramp_m, length_m]
    knots_v += [0.0, 0.0]
    return np.asarray(np.interp(s, knots_s, knots_v), dtype=np.float64)


def single_turn(
    length_m: float, ds: float, steer_deg: float, turn_m: float, ramp_m: float = 2.0
) -> FloatArray:
    """Straight, then a steady turn held for ``turn_m`` of rear travel, then straight.

    The steering ramps linearly over ``ramp_m`` into and out of the turn (a driver turns the
    wheel over some distance); the turn sits in the middle of the path.

    Examples
    --------
    >>> import numpy as np
    >>> np.degrees(single_turn(10.0, 1.0, 30.0, turn_m=4.0, ramp_m=1.0)).round(6).tolist()
    [0.0, 0.0, 15.0, 30.0, 30.0, 30.0, 30.0, 15.0, 0.0, 0.0]
    """
    return _trapezoids(length_m, ds, [(steer_deg, turn_m)], ramp_m)


def s_curve(
    length_m: float, ds: float, steer_deg: float, turn_m: float, ramp_m: float = 2.0
) -> FloatArray:
    """Straight, a turn one way, the same turn the other way, straight (a lane change).

    Examples
    --------
    >>> import numpy as np
    >>> steer = np.degrees(s_curve(10.0, 1.0, 20.0, turn_m=2.0, ramp_m=1.0))
    >>> steer.round(6).tolist()
    [0.0, 0.0, 20.0, 20.0, 20.0, -20.0, -20.0, -20.0, 0.0, 0.0]
    """
    return _trapezoids(length_m, ds, [(steer_deg, turn_m), (-steer_deg, turn_m)], ramp_m)


def random_smooth(
    length_m: float, ds: float, rng: np.random.Generator, max_deg: float, corr_len_m: float
) -> FloatArray:
    """Smooth random steering: Gaussian-filtered white noise, soft-limited to ``max_deg``.

    White noise per step is smoothed by a Gaussian kernel of standard deviation ``corr_len_m``
    (in metres of rear travel), scaled to unit sample standard deviation and mapped through
    ``max_deg * tanh(0.8 x)``, so the profile stays smooth and strictly inside the limits.

    Examples
    --------
    >>> import numpy as np
    >>> steer = random_smooth(50.0, 0.1, np.random.default_rng(7), 30.0, 5.0)
    >>> steer.shape, bool(np.all(np.abs(steer) < np.radians(30.0)))
    ((500,), True)
    """
    if not (0.0 < max_deg < 90.0):
        raise _fail(f"max_deg must lie in (0, 90), got {max_deg!r}.", "Give degrees.")
    if not (math.isfinite(corr_len_m) and corr_len_m > 0.0):
        raise _fail(f"corr_len_m must be positive, got {corr_len_m!r}.", "Give metres.")
    s = _stations(length_m, ds)
    white = rng.standard_normal(s.size)
    smooth = gaussian_filter1d(white, sigma=corr_len_m / ds, mode="reflect")
    spread = float(np.std(smooth))
    unit = smooth / spread if spread > 0.0 else smooth
    return np.asarray(math.radians(max_deg) * np.tanh(0.8 * unit), dtype=np.float64)


def three_point_turn(
    wheelbase: float, ds: float, steer_deg: float = 35.0, lead_m: float = 4.0
) -> tuple[FloatArray, npt.NDArray[np.int8]]:
    """Steering and gear of a three-point turn that reverses the heading.

    A straight lead-in, a forward arc at full left steering, a reverse arc at full right
    steering, a forward arc at full left steering and a straight lead-out, all forward except
    the middle arc. Each arc turns the heading by 60 degrees (arc length
    ``(pi/3) L / tan(steer)``), so the vehicle ends facing back the way it came. The rear-axle
    path has a cusp at each of the two gear changes.

    Returns
    -------
    steer : (m,) float array, radians
    gear : (m,) int8 array of +1 / -1

    Examples
    --------
    >>> import numpy as np
    >>> steer, gear = three_point_turn(2.7, 0.1)
    >>> int((gear == -1).sum()) > 0, int(abs(np.diff(gear)).astype(bool).sum())
    (True, 2)
    """
    if not (0.0 < steer_deg < 90.0):
        raise _fail(f"steer_deg must lie in (0, 90), got {steer_deg!r}.", "Give degrees.")
    if not (math.isfinite(wheelbase) and wheelbase > 0.0):
        raise _fail(f"wheelbase must be positive, got {wheelbase!r}.", "Give metres.")
    delta = math.radians(steer_deg)
    arc = (math.pi / 3.0) * wheelbase / math.tan(delta)
    n_arc = max(1, round(arc / ds))
    n_lead = round(lead_m / ds) if lead_m > 0.0 else 0
    steer = np.concatenate(
        [
            np.zeros(n_lead),
            np.full(n_arc, delta),
            np.full(n_arc, -delta),
            np.full(n_arc, delta),
            np.zeros(n_lead),
        ]
    )
    gear = np.ones(steer.size, dtype=np.int8)
    gear[n_lead + n_arc : n_lead + 2 * n_arc] = -1
    return steer, gear


# --- from simulated wheel paths to mapped lines ------------------------------------------------


def _arc_length(line: FloatArray) -> FloatArray:
    step = np.hypot(*np.diff(line, axis=0).T)
    return np.concatenate([[0.0], np.cumsum(step)])


def _survey_stations(
    total: float, spacing_m: float | tuple[float, float], rng: np.random.Generator
) -> FloatArray:
    """Positions along a line of length ``total`` where a surveyor records a vertex."""
    if isinstance(spacing_m, tuple):
        lo, hi = (float(v) for v in spacing_m)
        if not (0.0 < lo <= hi and math.isfinite(hi)):
            raise _fail(
                f"spacing range must satisfy 0 < low <= high, got {spacing_m!r}.",
                "Give (shortest, longest) vertex spacing in metres.",
            )
        gaps = rng.uniform(lo, hi, size=int(math.ceil(total / lo)) + 1)
        inner = np.cumsum(gaps)
        inner = inner[inner < total]
    else:
        step = float(spacing_m)
        if not (math.isfinite(step) and step > 0.0):
            raise _fail(f"spacing must be positive, got {spacing_m!r}.", "Give metres.")
        inner = np.arange(step, total, step)
    if inner.size and total - inner[-1] < 1e-6:
        inner = inner[:-1]
    return np.concatenate([[0.0], inner, [total]])


def follows_path(line: npt.ArrayLike, path: npt.ArrayLike) -> bool:
    """Whether a mapped line's vertex order follows a simulated path's travel order (its
    first vertex lies nearer the path's start than its last does).

    Examples
    --------
    >>> import numpy as np
    >>> path = np.column_stack([np.arange(5.0), np.zeros(5)])
    >>> follows_path(path[::2], path), follows_path(path[::-1], path)
    (True, False)
    """
    xy, start = np.asarray(line), np.asarray(path)[0]
    return bool(np.hypot(*(xy[0] - start)) < np.hypot(*(xy[-1] - start)))


def mapped_lines(
    sim: SimulatedPass,
    noise_m: float,
    spacing_m: float | tuple[float, float],
    rng: np.random.Generator,
    reverse_prob: float = 0.5,
    which: Iterable[str] | None = None,
    drift_m: float = 0.0,
    drift_corr_m: float = 25.0,
) -> dict[str, FloatArray]:
    """Turn simulated wheel paths into mapped lines as a survey delivers them.

    For each wheel path (see :meth:`SimulatedPass.wheels`):

    1. resample it along its own arc length at vertex spacing ``spacing_m``: a fixed spacing,
       or, for a ``(low, high)`` range, independent uniform spacings in that range; the first
       and last vertices sit at the ends of the path (the last gap is the remainder);
    2. add position noise, independent per vertex and isotropic in the plane: a Gaussian of
       standard deviation ``noise_m`` on each of x and y (so the radial error has RMS
       ``sqrt(2) * noise_m``); plus, if ``drift_m > 0``, a slowly wandering GNSS-like error
       from :func:`correlated_noise` with correlation length ``drift_corr_m``;
    3. reverse the vertex order with probability ``reverse_prob`` (a surveyor walks either way).

    The simulated path is interpolated linearly between poses, so simulate with steps well
    below the vertex spacing. Random draws are made wheel by wheel in the order of
    ``sim.wheels()``, so a seed fixes the result.

    Parameters
    ----------
    sim
        The simulated pass.
    noise_m
        Per-axis standard deviation of the independent vertex noise, m, ``>= 0``.
    spacing_m
        Vertex spacing, m, or a ``(low, high)`` range of spacings.
    rng
        Random generator.
    reverse_prob
        Probability of reversing each line, in ``[0, 1]``.
    which
        Names of the wheels to map (default all of them).
    drift_m, drift_corr_m
        Per-axis standard deviation and correlation length of the correlated error, m.

    Returns
    -------
    dict of str to (k, 2) float arrays
        One line per wheel, keyed by wheel name.

    Examples
    --------
    >>> import numpy as np
    >>> from geoops.kinematics import simulate_steering
    >>> sim = simulate_steering(CAR, np.zeros(100), 0.1)
    >>> lines = mapped_lines(sim, 0.0, 2.5, np.random.default_rng(1), reverse_prob=0.0)
    >>> lines["rear_left"][:, 0].round(9).tolist()
    [0.0, 2.5, 5.0, 7.5, 10.0]
    """
    if not (math.isfinite(noise_m) and noise_m >= 0.0):
        raise _fail(f"noise_m must be zero or positive, got {noise_m!r}.", "Give metres.")
    if not (math.isfinite(drift_m) and drift_m >= 0.0):
        raise _fail(f"drift_m must be zero or positive, got {drift_m!r}.", "Give metres.")
    if not (0.0 <= reverse_prob <= 1.0):
        raise _fail(f"reverse_prob must lie in [0, 1], got {reverse_prob!r}.", "Give a fraction.")
    paths = sim.wheels()
    names = list(paths) if which is None else list(which)
    unknown = [name for name in names if name not in paths]
    if unknown:
        raise _fail(
            f"no wheel named {', '.join(map(repr, unknown))} on this vehicle.",
            f"Choose from {', '.join(paths)}.",
        )
    out: dict[str, FloatArray] = {}
    for name in names:
        path = paths[name]
        along = _arc_length(path)
        keep = np.concatenate([[True], np.diff(along) > 0.0])
        path, along = path[keep], along[keep]
        total = float(along[-1])
        if total <= 0.0:
            raise _fail(f"wheel path {name!r} has zero length.", "Simulate a longer pass.")
        stations = _survey_stations(total, spacing_m, rng)
        line = np.column_stack(
            [np.interp(stations, along, path[:, 0]), np.interp(stations, along, path[:, 1])]
        )
        if noise_m > 0.0:
            line += rng.normal(0.0, noise_m, size=line.shape)
        if drift_m > 0.0:
            line += correlated_noise(line.shape[0], np.diff(stations), drift_m, drift_corr_m, rng)
        if rng.random() < reverse_prob:
            line = line[::-1]
        out[name] = np.ascontiguousarray(line)
    return out


def merged_lines(
    sim: SimulatedPass,
    rear: str,
    front: str,
    noise_m: float,
    spacing_m: float | tuple[float, float],
    rng: np.random.Generator,
    merge_m: float = 0.04,
    reverse_prob: float = 0.5,
) -> dict[str, FloatArray]:
    """Map a front and a rear wheel path as a digitiser does where the two run together.

    Both paths are mapped as in :func:`mapped_lines` (vertex spacing, white noise of
    ``noise_m``), but wherever the front path runs within ``merge_m`` of the rear path, the
    map shows one line for both: the front line takes the rear line's vertices over that
    stretch, so the two lines are identical there, noise included. Where the paths part, the
    front line steps across to its own vertices: a small jog of about ``merge_m`` plus noise.
    Each line's vertex order is then reversed with probability ``reverse_prob``.

    Returns
    -------
    dict of str to (k, 2) float arrays
        ``{rear: ..., front: ...}``.

    Examples
    --------
    >>> import numpy as np
    >>> from geoops.kinematics import simulate_steering
    >>> sim = simulate_steering(BICYCLE, np.zeros(500), 0.02)  # 10 m straight
    >>> lines = merged_lines(sim, "rear", "front", 0.01, 0.5, np.random.default_rng(0),
    ...                      reverse_prob=0.0)
    >>> # the front line shares the rear line's vertices from the front wheel's start on,
    >>> # then runs on alone over the last wheelbase
    >>> shared = (lines["front"][:, None, :] == lines["rear"][None, :, :]).all(axis=2).any(axis=1)
    >>> int(shared.sum()), len(lines["front"]) - int(shared.sum())
    (18, 3)
    """
    lines = mapped_lines(sim, 0.0, spacing_m, rng, reverse_prob=0.0, which=[rear, front])
    clean_rear, clean_front = lines[rear], lines[front]
    rear_path = shapely.LineString(sim.wheels()[rear])
    together = shapely.distance(shapely.points(clean_front), rear_path) < merge_m
    noisy_rear = clean_rear + rng.normal(0.0, noise_m, size=clean_rear.shape)
    noisy_front = clean_front + rng.normal(0.0, noise_m, size=clean_front.shape)
    # runs of front vertices that run together with the rear path
    edges = np.diff(np.concatenate([[0], together.astype(np.int8), [0]]))
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    tree_rear = shapely.STRtree(shapely.points(clean_rear))
    pieces: list[FloatArray] = []
    at = 0
    for a, b in zip(starts, stops, strict=True):
        pieces.append(noisy_front[at:a])
        ra, rb = (int(tree_rear.nearest(shapely.Point(clean_front[k]))) for k in (a, b - 1))
        if rb >= ra:
            pieces.append(noisy_rear[ra : rb + 1])
        at = int(b)
    pieces.append(noisy_front[at:])
    out = {rear: noisy_rear, front: np.concatenate(pieces)}
    for name in out:
        if rng.random() < reverse_prob:
            out[name] = out[name][::-1]
        out[name] = np.ascontiguousarray(out[name])
    return out


def correlated_noise(
    n: int,
    spacing: float | npt.ArrayLike,
    sigma: float,
    corr_len_m: float,
    rng: np.random.Generator,
) -> FloatArray:
    """Slowly wandering 2-D position error along a line (a first-order Gauss-Markov process).

    Each axis is an independent stationary AR(1) process in distance: between vertices ``d``
    metres apart the error keeps a fraction ``exp(-d / corr_len_m)`` and gains fresh noise so
    the standard deviation stays ``sigma``. The process is evaluated exactly for irregular
    spacings without a per-vertex Python loop. One ``(n, 2)`` block of standard normals is
    drawn from ``rng``: the first row starts the process, the others are the innovations.

    Parameters
    ----------
    n
        Number of vertices.
    spacing
        Distance between consecutive vertices, m: a scalar or an ``(n - 1,)`` array.
    sigma
        Stationary per-axis standard deviation, m.
    corr_len_m
        Correlation length, m.
    rng
        Random generator.

    Returns
    -------
    (n, 2) float array

    Examples
    --------
    >>> import numpy as np
    >>> e = correlated_noise(5, 1.0, 0.02, 1e9, np.random.default_rng(3))
    >>> bool(np.allclose(e, e[0], atol=1e-5))  # a very long correlation: a near-constant offset
    True
    """
    if n < 1:
        raise _fail(f"n must be at least 1, got {n!r}.", "Ask for one or more vertices.")
    if not (math.isfinite(sigma) and sigma >= 0.0):
        raise _fail(f"sigma must be zero or positive, got {sigma!r}.", "Give metres.")
    if not (corr_len_m > 0.0):
        raise _fail(f"corr_len_m must be positive, got {corr_len_m!r}.", "Give metres.")
    try:
        steps = np.broadcast_to(np.asarray(spacing, dtype=np.float64), (n - 1,))
    except ValueError:
        raise _fail(
            f"spacing must be a scalar or have n - 1 = {n - 1} values.",
            "Give the distance between each pair of consecutive vertices.",
        ) from None
    if not (np.all(np.isfinite(steps)) and np.all(steps >= 0.0)):
        raise _fail("spacing must be finite and not negative.", "Give metres.")
    eps = rng.standard_normal((n, 2))
    keep = np.exp(-steps / corr_len_m)
    innov = np.empty((n, 2))
    innov[0] = sigma * eps[0]
    innov[1:] = sigma * np.sqrt(-np.expm1(-2.0 * steps / corr_len_m))[:, None] * eps[1:]
    # x_k = sum_j exp(-(d_k - d_j)/c) w_j, evaluated in chunks whose distance span stays below
    # 600 c so that exp(+(d_j - d_a)/c) cannot overflow; the state is carried across chunks.
    dist = np.concatenate([[0.0], np.cumsum(steps)]) / corr_len_m
    out = np.empty((n, 2))
    start = 0
    carry = np.zeros(2)
    while start < n:
        stop = int(np.searchsorted(dist, dist[start] + 600.0, side="left"))
        stop = max(stop, start + 1)
        rel = dist[start:stop] - dist[start]
        acc = np.cumsum(np.exp(rel)[:, None] * innov[start:stop], axis=0)
        into = keep[start - 1] * carry if start > 0 else carry
        out[start:stop] = np.exp(-rel)[:, None] * (into + acc)
        carry = out[stop - 1]
        start = stop
    return out


def fragment(
    line: npt.ArrayLike, rng: np.random.Generator, n_gaps: int, gap_m: float
) -> list[FloatArray]:
    """Cut a mapped line into pieces by dropping the vertices inside random gaps.

    ``n_gaps`` gaps of length ``gap_m`` are placed uniformly along the line's arc length
    (overlapping gaps merge); vertices inside a gap are removed and the line is split there.
    Pieces with fewer than two vertices are dropped.

    Returns
    -------
    list of (k, 2) float arrays
        The pieces, in the line's vertex order.

    Examples
    --------
    >>> import numpy as np
    >>> line = np.column_stack([np.arange(21.0), np.zeros(21)])
    >>> pieces = fragment(line, np.random.default_rng(0), n_gaps=1, gap_m=3.0)
    >>> len(pieces), sum(len(p) for p in pieces) < 21
    (2, True)
    """
    arr = np.asarray(line, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 2:
        raise _fail("line must be an (n, 2) array with n >= 2.", "Pass x, y columns.")
    if n_gaps < 0 or not (math.isfinite(gap_m) and gap_m > 0.0):
        raise _fail("n_gaps must be >= 0 and gap_m positive.", "Give a count and metres.")
    along = _arc_length(arr)
    total = float(along[-1])
    if n_gaps == 0:
        return [arr.copy()]
    if gap_m >= total:
        raise _fail(
            f"a gap of {gap_m} m does not fit in a line {total:.3f} m long.",
            "Use shorter gaps.",
        )
    starts = rng.uniform(0.0, total - gap_m, size=n_gaps)
    inside = np.any((along[:, None] >= starts) & (along[:, None] <= starts + gap_m), axis=1)
    # label each run of kept vertices; a new run starts after every removed vertex
    run = np.cumsum(inside)
    kept = np.flatnonzero(~inside)
    cuts = np.flatnonzero(np.diff(run[kept]) > 0) + 1
    pieces = np.split(arr[kept], cuts)
    return [piece for piece in pieces if piece.shape[0] >= 2]
