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

from .curves import Array, as_linestrings

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


def _line_ends(lines: list[Array | None]) -> tuple[np.ndarray, ...]:
    """Both ends of every line of three or more vertices and at least MIN_PIECE_M, all lines
    at once: per end (a line's start, then its end) the owning line, whether the line is too
    short for a heading of its own, the end point, the unit heading leaving the line there
    (the principal axis of the vertices within END_FIT_M of that end, a third of the line at
    most, two vertices at least: a least-squares line) and the innermost of those vertices."""
    keep = [k for k, xy in enumerate(lines) if xy is not None and len(xy) >= 3]
    kept = [xy for xy in lines if xy is not None and len(xy) >= 3]
    if not kept:
        empty = np.empty((0, 2))
        return np.empty(0, dtype=np.int64), np.empty(0, dtype=bool), empty, empty, empty
    counts = np.array([len(xy) for xy in kept])
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])
    last = first + counts - 1
    flat = np.concatenate(kept).astype(np.float64)
    seg = np.hypot(*np.diff(flat, axis=0).T)
    s = np.zeros(len(flat))  # arc length along each line
    for a, b in zip(first.tolist(), last.tolist(), strict=True):
        np.cumsum(seg[a:b], out=s[a + 1 : b + 1])
    total = s[last]
    reach = np.minimum(END_FIT_M, np.maximum(total / 3.0, 1e-9))
    line_of = np.repeat(np.arange(len(keep)), counts)
    # vertices within reach of each end: a run from that end (arc length only grows)
    m_start = np.maximum(np.add.reduceat(s <= reach[line_of], first), 2)
    m_end = np.maximum(np.add.reduceat(s >= (total - reach)[line_of], first), 2)
    used = np.flatnonzero(total >= MIN_PIECE_M)  # shorter: too little to say where it leads
    lo = np.column_stack([first[used], last[used] - m_end[used] + 1]).ravel()
    size = np.column_stack([m_start[used], m_end[used]]).ravel()
    point = flat[np.column_stack([first[used], last[used]]).ravel()]
    inner = flat[np.column_stack([first[used] + m_start[used] - 1, lo[1::2]]).ravel()]
    # principal axis of each end's vertices, from their scatter about their mean
    offset = np.cumsum(size) - size
    pts = flat[np.repeat(lo - offset, size) + np.arange(int(size.sum()))]
    centred = pts - np.repeat(np.add.reduceat(pts, offset) / size[:, None], size, axis=0)
    sxx, syy, sxy = (np.add.reduceat(v, offset) for v in (
        centred[:, 0] ** 2, centred[:, 1] ** 2, centred[:, 0] * centred[:, 1]))
    angle = 0.5 * np.arctan2(2.0 * sxy, sxx - syy)
    heading = np.column_stack([np.cos(angle), np.sin(angle)])
    # leaving the line: from the inner vertices towards the end
    outward = point - inner
    heading[heading[:, 0] * outward[:, 0] + heading[:, 1] * outward[:, 1] < 0] *= -1.0
    owner = np.repeat(np.asarray(keep)[used], 2)
    short = np.repeat(total[used] < SHORT_PIECE_M, 2)
    return owner, short, point, heading, inner


def _beyond(p: Array, hp: Array, q: Array, inner_q: Array) -> np.ndarray:
    """Per row, whether the piece ending at q runs on beyond p along p's outward heading (end
    to end: its vertices a few metres in from q lie farther along), rather than back
    alongside p's own line (a front track sticking out ahead of its rear track at a pass's
    start)."""
    ahead_inner = (inner_q[:, 0] - p[:, 0]) * hp[:, 0] + (inner_q[:, 1] - p[:, 1]) * hp[:, 1]
    ahead_end = (q[:, 0] - p[:, 0]) * hp[:, 0] + (q[:, 1] - p[:, 1]) * hp[:, 1]
    return np.asarray(ahead_inner > ahead_end + BEYOND_M)


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
    owner, short, pts, heads, inner = _line_ends(lines)
    if len(pts) < 4:
        return []
    # end pairs within the gap (shapely's tree: scipy.spatial would cost 0.2 s to import)
    ends = shapely.points(pts)
    i, j = shapely.STRtree(ends).query(ends, predicate="dwithin", distance=MAX_GAP_M)
    pairs = np.unique(np.column_stack([i, j])[i < j], axis=0).reshape(-1, 2)
    # a short piece's heading does not count: it is the far end (q) of its pairs
    p = np.where(short[pairs[:, 0]], pairs[:, 1], pairs[:, 0])
    q = np.where(short[pairs[:, 0]], pairs[:, 0], pairs[:, 1])
    ok = (owner[p] != owner[q]) & ~(short[p] & short[q])
    ok &= _beyond(pts[p], heads[p], pts[q], inner[q])
    ok &= short[q] | _beyond(pts[q], heads[q], pts[p], inner[p])
    best: dict[int, list[tuple[float, int]]] = {}
    for a, b in zip(p[ok].tolist(), q[ok].tolist(), strict=True):
        cost = _cost(pts[a], heads[a], pts[b], heads[b], bool(short[b]))
        if cost is not None:
            best.setdefault(a, []).append((cost, b))
            best.setdefault(b, []).append((cost, a))
    choice: dict[int, int] = {}
    for a, options in best.items():
        options.sort()
        if len(options) > 1 and options[1][0] - options[0][0] < AMBIGUITY_MARGIN_M:
            continue
        choice[a] = options[0][1]
    facing = [(a, b) for a, b in choice.items() if a < b and choice.get(b) == a]
    if not facing:
        return []
    ends_of = owner.tolist()
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
            if usable[i] in (ends_of[a], ends_of[b]):
                continue
            d = shapely.distance(geoms[i], ends)
            if abs(float(d[0] - d[1])) <= WITNESS_STEP_M:
                return True
        return False

    for a, b in facing:
        if witnessed(a, b):
            ra, rb = find(ends_of[a]), find(ends_of[b])
            if ra != rb:  # no rings
                parent[max(ra, rb)] = min(ra, rb)
    groups: dict[int, list[int]] = {}
    for k in range(len(lines)):
        groups.setdefault(find(k), []).append(k)
    return sorted(g for g in groups.values() if len(g) > 1)
