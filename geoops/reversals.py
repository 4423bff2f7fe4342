"""Reversals: find where a rut doubles back, and read the heading from a reversal.

When a vehicle stops and reverses, every wheel's track turns back on itself. The rear-axle
track does so in a true cusp: the rear moves along the heading line, so both branches leave the
cusp point along the same line and lie on the same side of it (a road vehicle's rear track can
cusp only when it reverses, since that needs 90 degrees of steering; Tabachnikov, arXiv
1602.06455). A front track turns back at a corner of 180 degrees minus the steering change.

At a rear cusp R the heading h is along the cusp line, and the front axle is at R + L h. So the
front track's corner F, seen from R, gives the heading at the reversal and the wheelbase
L = |F - R|, whatever the legs before and after look like (a three-point turn's legs are short
circular arcs that say little on their own).

This module finds reversal points and judges one rear cusp against a front corner. It does not
pair ruts or write output.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels_clean
from .curves import Array, arc_length, resample

#: arc length on each side of a vertex over which its turn is measured, metres
TURN_BASE_M = 0.6
#: a track that turns back by more than this within the base is reversing, degrees: well above
#: what a wheel turns at full lock over the base (front radius >= L / sin(40 deg): under 55 deg
#: for a bicycle), and below a front corner at a reversal (180 - 2 x lock)  # common practice
REVERSAL_TURN_DEG = 80.0
#: a rear cusp turns back by nearly 180 degrees  # source: Tabachnikov, arXiv 1602.06455
CUSP_TURN_DEG = 150.0


@dataclass(frozen=True)
class Reversal:
    """A place where a track turns back.

    ``s`` is the arc-length position along the track's raw vertices, ``point`` the vertex,
    ``points_to`` the unit vector along which the cusp points (from the two branches towards
    the point), ``turn_deg`` how far the track turns back there (180 = a perfect cusp).
    """

    s: float
    index: int
    point: Array
    points_to: Array
    turn_deg: float

    @property
    def is_cusp(self) -> bool:
        return self.turn_deg >= CUSP_TURN_DEG


def find_reversals(
    xy: Array, base_m: float = TURN_BASE_M, least_cosine: float | None = None
) -> list[Reversal]:
    """Places where a polyline turns back by more than :data:`REVERSAL_TURN_DEG`.

    The turn at each point is the angle between the chord arriving over ``base_m`` and the
    chord leaving over ``base_m``, so single noisy vertices do not count; one reversal is kept
    per run of turning-back points (the sharpest).

    Examples
    --------
    >>> out = np.array([[0.0, 0.0], [5.0, 0.0]])
    >>> back = np.array([[4.0, 0.3], [0.0, 1.5]])
    >>> (r,) = find_reversals(np.vstack([out, back]))
    >>> round(r.turn_deg), r.points_to.round(2).tolist()
    (163, [0.99, -0.15])
    """
    if len(xy) < 3:
        return []
    # most lines never turn back: one compiled pass says so (with a margin, so that what the
    # numpy code below finds is unchanged); ``least_cosine`` is its result when the caller
    # has it already
    least = least_cosine
    if least is None:
        least = kernels_clean.least_turn_cosine(np.ascontiguousarray(xy, dtype=np.float64),
                                                base_m)
    if least > np.cos(np.radians(REVERSAL_TURN_DEG - 1e-6)):
        return []
    step = base_m / 8.0
    pts, s = resample(xy, step)
    k = 8
    if len(pts) < 2 * k + 1:
        return []
    arrive = pts[k:-k] - pts[: -2 * k]
    leave = pts[2 * k :] - pts[k:-k]
    norm = np.hypot(*arrive.T) * np.hypot(*leave.T)
    cos = np.einsum("ij,ij->i", arrive, leave) / np.maximum(norm, 1e-12)
    turn = np.degrees(np.arccos(np.clip(cos, -1.0, 1.0)))
    cand = np.flatnonzero(turn > REVERSAL_TURN_DEG)
    if len(cand) == 0:
        return []
    s_raw = arc_length(xy)
    out = []
    for run in np.split(cand, np.flatnonzero(np.diff(cand) > k) + 1):
        i = int(run[np.argmax(turn[run])])
        j = i + k
        pointing = (pts[j] - pts[j - k]) + (pts[j] - pts[j + k])
        pointing /= max(float(np.hypot(*pointing)), 1e-12)
        raw_i = int(np.argmin(np.abs(s_raw - s[j])))
        if raw_i in (0, len(xy) - 1):
            continue
        out.append(Reversal(float(s[j]), raw_i, pts[j].copy(), pointing, float(turn[i])))
    return out


def split_at(xy: Array, reversals: list[Reversal]) -> list[Array]:
    """Cut a polyline at its reversals; the reversal vertex belongs to both legs.

    Examples
    --------
    >>> line = np.array([[0.0, 0.0], [5.0, 0.0], [4.0, 0.3], [0.0, 1.5]])
    >>> [len(p) for p in split_at(line, find_reversals(line))]
    [2, 3]
    """
    cuts = sorted({r.index for r in reversals})
    legs, start = [], 0
    for c in cuts:
        legs.append(xy[start : c + 1])
        start = c
    legs.append(xy[start:])
    return [leg for leg in legs if len(leg) >= 2]


@dataclass(frozen=True)
class CuspEvidence:
    """What one rear cusp and the matching front corner say.

    ``heading`` is the unit heading at the reversal (rear towards front); ``before_follows``
    whether, in the leg before the cusp (in the rear track's vertex order), the heading points
    along that vertex order; ``wheelbase`` the distance |F - R|; ``alignment`` the cosine
    between the front-corner offset and the cusp line (1 = exactly along it).
    """

    heading: Array
    before_follows: bool
    wheelbase: float
    alignment: float


def judge_cusp(
    rear: Reversal, front_corners: list[Reversal], min_l: float, max_l: float
) -> CuspEvidence | None:
    """Match a rear cusp with the front corner it implies, if one is where it should be.

    The front corner must lie within ``[min_l, max_l]`` of the cusp and along the cusp line
    (|cos| >= 0.9); the closest such corner is used.
    """
    best: CuspEvidence | None = None
    for f in front_corners:
        d = f.point - rear.point
        dist = float(np.hypot(*d))
        if not min_l <= dist <= max_l:
            continue
        heading = d / dist
        cos = float(np.dot(heading, rear.points_to))
        if abs(cos) < 0.9:
            continue
        # the branch before the cusp arrives moving along points_to (in vertex order)
        ev = CuspEvidence(heading, cos > 0, dist, abs(cos))
        if best is None or ev.alignment > best.alignment:
            best = ev
    return best
