"""Left and right: two front/rear pairs that are the two sides of one four-wheeled vehicle.

Every point of a rigid axle moves along the heading, so the rear-left and rear-right tracks
are parallel (offset) curves one rear track width apart; the front tracks likewise, one front
track width apart (references.md: four-wheel vehicle, derived from the kinematic bicycle
model). Two judged front/rear pairs whose rear tracks run at a near-constant spacing of a
plausible track width, with compatible wheelbases, are one vehicle seen as four ruts.

This module finds such pairs of pairs and measures their spacing; it does not pair ruts,
decide directions or write output.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .clean import CleanRut

#: plausible centre-to-centre track widths, metres: ATV about 0.85 to a forwarder about 2.8
#: (references.md vehicle table)  # common practice
TRACK_MIN_M = 0.6
TRACK_MAX_M = 3.2
#: largest spread of the spacing (interquartile range over median) of true parallel tracks
MAX_SPACING_SPREAD = 0.12
#: largest relative difference of the two sides' wheelbases
MAX_WHEELBASE_MISMATCH = 0.15


@dataclass(frozen=True)
class Spacing:
    """How one rear track runs beside another: median spacing (m), its relative spread, the
    share of the first track with the second beside it, and whether their vertex orders agree.
    """

    median: float
    spread: float
    shared: float
    same_order: bool


def spacing(a: CleanRut, b: CleanRut) -> Spacing:
    """Spacing profile of track ``b`` seen from track ``a``.

    Examples
    --------
    >>> import numpy as np
    >>> from geoops.clean import clean_rut
    >>> x = np.linspace(0, 30, 61)
    >>> a = clean_rut([np.column_stack([x, np.sin(x / 5)])], 0.01)
    >>> b = clean_rut([np.column_stack([x, np.sin(x / 5) + 1.6])], 0.01)
    >>> s = spacing(a, b)
    >>> round(s.median, 1), s.same_order
    (1.6, True)
    """
    d, s, _ = b.index.query(a.xy)
    edge = 2.0 * b.step
    inside = (s > edge) & (s < b.length - edge) & a.has_data
    if inside.sum() < 8:
        return Spacing(float("inf"), float("inf"), 0.0, True)
    dd = d[inside]
    med = float(np.median(dd))
    q75, q25 = np.percentile(dd, [75, 25])
    j = np.clip(np.rint(s[inside] / b.step).astype(np.int64), 0, len(b.tangents) - 1)
    dots = np.einsum("ij,ij->i", a.tangents[inside], b.tangents[j])
    return Spacing(
        med, float((q75 - q25) / max(med, 1e-9)), float(inside.mean()), bool(dots.mean() > 0)
    )


def same_vehicle(
    rear_a: CleanRut, rear_b: CleanRut, wheelbase_a: float | None, wheelbase_b: float | None
) -> Spacing | None:
    """The spacing of two rear tracks if they look like the two sides of one axle, else None."""
    if wheelbase_a is not None and wheelbase_b is not None:
        mean = 0.5 * (wheelbase_a + wheelbase_b)
        if abs(wheelbase_a - wheelbase_b) > MAX_WHEELBASE_MISMATCH * mean:
            return None
    sp = spacing(rear_a, rear_b)
    if sp.shared < 0.5 or not TRACK_MIN_M <= sp.median <= TRACK_MAX_M:
        return None
    if sp.spread > MAX_SPACING_SPREAD:
        return None
    return sp
