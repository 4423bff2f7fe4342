"""Chain the pieces of one rut that were mapped as separate features.

A rut vanishes on hard ground and comes back; a field crew or a digitiser then maps it as
several features, end to end. Two features are pieces of one rut when an end of one faces an
end of the other across a short gap: the ends point at each other (outward headings opposite),
the bridge runs along both headings (a chord of a gentle curve), the gap is short, and another
track of the vehicle runs past both ends at the same distance (a witness: the rut's partner,
unbroken there; a footpath that happens to start where a rut ends has none). The pieces are
chained only when that reading is unambiguous: an end with a second candidate nearly as good
(the front and rear tracks of a single-track vehicle coincide on straights, and a hard patch
cuts both at the same place) is left as it is, since a wrong chain would join the front track
of one stretch to the rear track of the next.

This module only proposes groups of features; :func:`geoops.pipeline.analyze_layer` cleans
each group as one rut (its parts chained with the gaps remembered, see
:func:`geoops.clean.chain_parts`).
"""

from __future__ import annotations

import math

import numpy as np
import shapely
from scipy.spatial import cKDTree

from .curves import Array, arc_length, as_linestrings

#: longest gap bridged between two features' ends, metres  # common practice: ruts fade over
#: a few metres of hard ground or a stony crossing
MAX_GAP_M = 10.0
#: largest turn across a gap: angle between one end's outward heading and the other's
#: reversed (a car's front track turns by 30 degrees over 3.5 m of a tight bend)
MAX_TURN_DEG = 50.0
#: largest angle between an end's outward heading and the bridge: about half the turn (a
#: chord of an arc), so a bridge that steps sideways is refused
MAX_CHORD_DEG = 30.0
#: below this gap the bridge's own direction is noise; the ends' headings and the sideways
#: step across the gap are used instead, metres
SHORT_GAP_M = 1.0
#: largest sideways step across a short gap, metres
MAX_SIDESTEP_M = 0.3
#: length over which an end's heading is read (a straight-line fit), metres
END_FIT_M = 4.0
#: a piece's vertices a few metres in lie at least this much farther along than its end
#: (seen from the end it would join), metres
BEYOND_M = 0.5
#: pieces shorter than this (metres) are never chained
MIN_PIECE_M = 2.0
#: a piece shorter than this (metres) has no heading of its own worth reading
SHORT_PIECE_M = 1.5 * END_FIT_M
#: metres of gap a radian of turn costs when ranking candidate chains
TURN_COST_M_PER_RAD = 4.0
#: a second candidate within this cost (metres) of the best makes an end ambiguous
AMBIGUITY_MARGIN_M = 1.0
#: a witness passes within this distance of both ends of a gap, metres: the farthest a
#: vehicle's other track runs from this one (pairing.NEIGHBOUR_DISTANCE_M)
WITNESS_M = 2.5
#: the witness keeps its distance across the gap to within this, metres: a rut and its
#: partner part slowly, but the end of one vehicle's rut and a piece of another vehicle's
#: beside it sit at different distances from any third track
WITNESS_STEP_M = 0.25


def _end(xy: Array, s: Array, at_start: bool) -> tuple[Array, Array, Array]:
    """An end point, the unit heading leaving the line there (a least-squares line through
    the vertices within END_FIT_M of that end), and the innermost of those vertices; ``s``
    is the line's arc length."""
    total = float(s[-1])
    reach = min(END_FIT_M, max(total / 3.0, 1e-9))
    pts = xy[s <= reach] if at_start else xy[s >= total - reach]
    if len(pts) < 2:
        pts = xy[:2] if at_start else xy[-2:]
    centred = pts - pts.mean(axis=0)
    _, _, vt = np.linalg.svd(centred, full_matrices=False)
    direction = vt[0]
    # leaving the line: from the inner vertices towards the end
    outward = (xy[0] - xy[min(len(xy) - 1, len(pts) - 1)]) if at_start else (
        xy[-1] - xy[max(0, len(xy) - len(pts))]
    )
    if float(np.dot(direction, outward)) < 0:
        direction = -direction
    return (xy[0] if at_start else xy[-1]), direction, pts[-1] if at_start else pts[0]


def _beyond(p: Array, hp: Array, q: Array, inner_q: Array) -> bool:
    """Whether the piece ending at q runs on beyond p along p's outward heading (end to end:
    its vertices a few metres in from q lie farther along), rather than back alongside p's
    own line (a front track sticking out ahead of its rear track at a pass's start)."""
    return float(np.dot(inner_q - p, hp)) > float(np.dot(q - p, hp)) + BEYOND_M


def _cost(
    p: Array, hp: Array, q: Array, hq: Array, q_short: bool = False
) -> float | None:
    """Cost of bridging from an end (p, outward heading hp) to another (q, hq), or None.
    ``q_short``: q's piece is too short for its heading to count; the bridge must then run
    along p's heading alone."""
    cos_max = math.cos(math.radians(MAX_CHORD_DEG))
    v = q - p
    gap = float(np.hypot(*v))
    if q_short:
        if gap < SHORT_GAP_M:
            return None if abs(float(hp[0] * v[1] - hp[1] * v[0])) > MAX_SIDESTEP_M else gap
        a = float(np.dot(hp, v / gap))
        return None if a < cos_max else gap + 2.0 * TURN_COST_M_PER_RAD * math.acos(min(1.0, a))
    if float(np.dot(hp, hq)) > -math.cos(math.radians(MAX_TURN_DEG)):
        return None  # the ends do not face each other
    turn = math.acos(min(1.0, -float(np.dot(hp, hq))))
    if gap < SHORT_GAP_M:
        if abs(float(hp[0] * v[1] - hp[1] * v[0])) > MAX_SIDESTEP_M:
            return None
    else:
        u = v / gap
        a, b = float(np.dot(hp, u)), float(-np.dot(hq, u))
        if a < cos_max or b < cos_max:
            return None
        turn = math.acos(min(1.0, a)) + math.acos(min(1.0, b))
    return gap + TURN_COST_M_PER_RAD * turn


def chain_features(lines: list[Array | None]) -> list[list[int]]:
    """Groups of features (indices into ``lines``) that are pieces of one rut, each of two or
    more; features not in a group stay alone. ``lines`` holds each feature's joined vertices
    in a metric frame (None for a feature that cannot be used).

    Examples
    --------
    >>> x = np.linspace(0, 20, 41)
    >>> a = np.column_stack([x, np.zeros_like(x)])
    >>> b = np.column_stack([x + 24.0, np.zeros_like(x)])[::-1]  # drawn the other way
    >>> side = np.column_stack([2.2 * x, np.full_like(x, 1.5)])   # the partner, unbroken
    >>> chain_features([a, b, side])
    [[0, 1]]
    >>> chain_features([a, b])  # nothing runs past the gap: may be two things end to end
    []
    """
    ends, heads, inner, owner, short = [], [], [], [], []
    for k, xy in enumerate(lines):
        if xy is None or len(xy) < 3:
            continue
        s = arc_length(xy)
        if s[-1] < MIN_PIECE_M:
            continue  # too little of a line to say where it leads
        for at_start in (True, False):
            p, h, i = _end(xy, s, at_start)
            ends.append(p)
            heads.append(h)
            inner.append(i)
            owner.append(k)
            short.append(bool(s[-1] < SHORT_PIECE_M))
    if len(ends) < 4:
        return []
    pts = np.asarray(ends)
    tree = cKDTree(pts)
    best: dict[int, list[tuple[float, int]]] = {}
    for a, b in tree.query_pairs(MAX_GAP_M, output_type="ndarray").tolist():
        if owner[a] == owner[b] or (short[a] and short[b]):
            continue
        if short[a]:
            a, b = b, a
        if not _beyond(pts[a], heads[a], pts[b], inner[b]) or (
            not short[b] and not _beyond(pts[b], heads[b], pts[a], inner[a])
        ):
            continue
        cost = _cost(pts[a], heads[a], pts[b], heads[b], short[b])
        if cost is not None:
            best.setdefault(a, []).append((cost, b))
            best.setdefault(b, []).append((cost, a))
    choice: dict[int, int] = {}
    for a, options in best.items():
        options.sort()
        if len(options) > 1 and options[1][0] - options[0][0] < AMBIGUITY_MARGIN_M:
            continue
        choice[a] = options[0][1]
    parent = list(range(len(lines)))

    def find(k: int) -> int:
        while parent[k] != k:
            parent[k] = parent[parent[k]]
            k = parent[k]
        return k

    usable = [k for k, xy in enumerate(lines) if xy is not None and len(xy) >= 2]  # witnesses
    geoms = as_linestrings([xy for xy in lines if xy is not None and len(xy) >= 2])
    line_tree = shapely.STRtree(geoms)

    def witnessed(a: int, b: int) -> bool:
        ends = shapely.points(pts[[a, b]])
        near = [set(line_tree.query(e, "dwithin", WITNESS_M).tolist()) for e in ends]
        for i in near[0] & near[1]:
            if usable[i] in (owner[a], owner[b]):
                continue
            d = shapely.distance(geoms[i], ends)
            if abs(float(d[0] - d[1])) <= WITNESS_STEP_M:
                return True
        return False

    for a, b in choice.items():
        if a < b and choice.get(b) == a and witnessed(a, b):
            ra, rb = find(owner[a]), find(owner[b])
            if ra != rb:  # no rings
                parent[max(ra, rb)] = min(ra, rb)
    groups: dict[int, list[int]] = {}
    for k in range(len(lines)):
        groups.setdefault(find(k), []).append(k)
    return sorted(g for g in groups.values() if len(g) > 1)
