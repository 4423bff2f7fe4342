"""A second, independent wheelbase estimate from steady turns.

In a steady turn the rear- and front-axle midpoints run on concentric circles with
R_front^2 = R_rear^2 + L^2 (kinematic bicycle model: R_rear = L / tan(delta), R_front =
L / sin(delta); references.md). Reading both radii off the two tracks where the rear's
curvature holds steady gives L without the tangent-extension fit, so the two estimates can
check each other. Radii come from the heading change across a window, never from neighbouring
vertices.

This module does not pair ruts or decide directions.
"""

from __future__ import annotations

import numpy as np

from .clean import CleanRut

#: largest relative change of curvature across a window for a turn to count as steady
STEADY_SPREAD = 0.1
#: smallest heading change over a window for a turn to count at all, radians (about 6 degrees)
MIN_TURN_RAD = 0.1
#: only turns tighter than this many wheelbases (rear radius) are read: on wider turns
#: R_front - R_rear (about L^2 / 2R) drowns in the radii's noise
MAX_RADIUS_IN_WHEELBASES = 3.0


Curvature = tuple[np.ndarray, np.ndarray, float]


def steady_turn_wheelbase(
    rear: CleanRut,
    front: CleanRut,
    wheelbase_hint: float | None = None,
    rear_curvature: Curvature | None = None,
) -> float | None:
    """Median wheelbase from R_front^2 = R_rear^2 + L^2 over the rear's steady-turn stretches.

    Returns None when the rear track has no steady turn sharp enough to read: tighter than
    :data:`MAX_RADIUS_IN_WHEELBASES` times ``wheelbase_hint`` (the other estimate, used only
    to judge whether the turn is tight enough), or than that many times its own estimate.
    ``rear_curvature``: ``rear.curvature()`` when the caller has it already.

    Examples
    --------
    >>> import numpy as np
    >>> from geoops.clean import clean_rut
    >>> t = np.linspace(0, 4.0, 400)
    >>> r_rear, wheelbase = 6.0, 2.5
    >>> r_front = np.hypot(r_rear, wheelbase)
    >>> rear = clean_rut([np.column_stack([r_rear * np.cos(t), r_rear * np.sin(t)])], 0.002)
    >>> front = clean_rut([np.column_stack([r_front * np.cos(t), r_front * np.sin(t)])], 0.002)
    >>> round(steady_turn_wheelbase(rear, front), 2)
    2.5
    """
    k_r, c_r, _ = rear.curvature() if rear_curvature is None else rear_curvature
    half = max(rear.window_pts // 2, 1)
    base = 2 * half * rear.step
    # steady: the curvature one window ahead and one behind agree with the centre's
    lo, hi = 2 * half, len(k_r) - 2 * half
    if hi - lo < 3:
        return None
    mid = k_r[lo:hi]
    spread = STEADY_SPREAD * np.abs(mid)
    steady = lo + np.flatnonzero(
        (np.abs(mid) * base > MIN_TURN_RAD)
        & (np.abs(k_r[lo + 2 * half :] - mid) <= spread)
        & (np.abs(k_r[: hi - 2 * half] - mid) <= spread)
        & rear.has_data[c_r[lo:hi]]
    )
    if len(steady) < 3:
        return None
    # the front's curvature only now: most tracks have no steady turn
    k_f, c_f, _ = front.curvature()
    if len(k_f) < 3:
        return None
    # the front's curvature where it runs beside those rear points
    _, s_front = front.index.distance_and_position(rear.xy[c_r[steady]])
    j = np.clip(np.rint(s_front / front.step).astype(np.int64) - c_f[0], 0, len(k_f) - 1)
    r_rear = 1.0 / np.abs(k_r[steady])
    r_front = 1.0 / np.maximum(np.abs(k_f[j]), 1e-9)
    l2 = r_front**2 - r_rear**2
    ok = l2 > 0
    if ok.sum() < 3:
        return None
    estimate = float(np.median(np.sqrt(l2[ok])))
    scale = min(estimate, wheelbase_hint) if wheelbase_hint else estimate
    if np.median(r_rear[ok]) > MAX_RADIUS_IN_WHEELBASES * scale:
        return None
    return estimate
