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

import math
from dataclasses import dataclass

import numpy as np

from .clean import CleanRut
from .order_stats import median_of_sorted, percentile_of_sorted

#: plausible centre-to-centre track widths, metres: ATV about 0.85 to a forwarder about 2.8
#: (references.md vehicle table)  # common practice
TRACK_MIN_M = 0.6
TRACK_MAX_M = 3.2
#: largest spread of the spacing (interquartile range over median) of true parallel tracks
MAX_SPACING_SPREAD = 0.12
#: largest relative difference of the two sides' wheelbases
MAX_WHEELBASE_MISMATCH = 0.15
#: samples of one rear track glanced at before the spacing of two is measured
GLANCE_SAMPLES = 16


@dataclass(frozen=True)
class Spacing:
    """How one rear track runs beside another: median spacing (m), its relative spread, the
    share of the first track with the second beside it, and whether their vertex orders agree.
    """

    median: float
    spread: float
    shared: float
    same_order: bool


def spacing(
    a: CleanRut, b: CleanRut, near: tuple[np.ndarray, np.ndarray] | None = None
) -> Spacing:
    """Spacing profile of track ``b`` seen from track ``a``. ``near``: the distances and
    positions of ``b.index.distance_and_position(a.xy)`` (or of its ``query``) when the
    caller has them already.

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
    d, s = b.index.distance_and_position(a.xy) if near is None else near
    edge = 2.0 * b.step
    inside = (s > edge) & (s < b.length - edge) & a.has_data
    if inside.sum() < 8:
        return Spacing(float("inf"), float("inf"), 0.0, True)
    dd = np.sort(d[inside])
    med = median_of_sorted(dd)
    q75, q25 = percentile_of_sorted(dd, 0.75), percentile_of_sorted(dd, 0.25)
    j = np.clip(np.rint(s[inside] / b.step).astype(np.int64), 0, len(b.tangents) - 1)
    dots = np.einsum("ij,ij->i", a.tangents[inside], b.tangents[j])
    return Spacing(
        med, float((q75 - q25) / max(med, 1e-9)), float(inside.mean()), bool(dots.mean() > 0)
    )


def same_vehicle(
    rear_a: CleanRut, rear_b: CleanRut, wheelbase_a: float | None, wheelbase_b: float | None
) -> Spacing | None:
    """The spacing of two rear tracks if they look like the two sides of one axle, else None.

    The wheelbases are compared first, then a glance at :data:`GLANCE_SAMPLES` samples of
    ``rear_a``: when none of them lies within :data:`TRACK_MAX_M` of ``rear_b`` the tracks
    are not measured (half of one track beside the other is needed, far more than the glance
    can miss)."""
    if wheelbase_a is not None and wheelbase_b is not None:
        mean = 0.5 * (wheelbase_a + wheelbase_b)
        if abs(wheelbase_a - wheelbase_b) > MAX_WHEELBASE_MISMATCH * mean:
            return None
    glance = rear_a.xy[:: max(len(rear_a.xy) // GLANCE_SAMPLES, 1)]
    near, _ = rear_b.index.distance_and_position(glance, TRACK_MAX_M)
    if not (near <= TRACK_MAX_M).any():
        return None
    sp = spacing(rear_a, rear_b)
    if sp.shared < 0.5 or not TRACK_MIN_M <= sp.median <= TRACK_MAX_M:
        return None
    if sp.spread > MAX_SPACING_SPREAD:
        return None
    return sp


#: largest track width over wheelbase of a four-wheeled vehicle: ATVs and compact tractors
#: reach about 0.8; two single-track vehicles riding side by side often exceed it
#: (common practice)
MAX_TRACK_OVER_WHEELBASE = 1.1
#: largest difference of the two sides' wheelbase estimates, in standard errors
MAX_WHEELBASE_Z = 3.0


@dataclass(frozen=True)
class Side:
    """One judged front/rear pair as a candidate side of a four-wheeled vehicle: its rear
    track, wheelbase estimate and 95 % interval (None when not estimable), and the decided
    travel direction relative to the rear track's vertex order (None when not decided)."""

    rear: CleanRut
    wheelbase: float | None
    low: float | None
    high: float | None
    follows_rear: bool | None


def _wheelbase_z(a: Side, b: Side) -> float:
    var = 0.0
    for s in (a, b):
        if s.wheelbase is None or s.low is None or s.high is None:
            return 0.0
        var += ((s.high - s.low) / 3.92) ** 2  # 95 % interval half-widths -> variances
    assert a.wheelbase is not None and b.wheelbase is not None
    return abs(a.wheelbase - b.wheelbase) / max(float(np.sqrt(var)), 1e-6)


def join_cost(a: Side, b: Side) -> tuple[float, Spacing] | None:
    """Cost of reading two sides as one vehicle (lower is likelier), with their spacing; None
    when they cannot be one: spacing not parallel or not a track width, wheelbases that
    differ, a track too wide for the wheelbase, or decided directions that disagree (a rigid
    vehicle's sides travel together)."""
    sp = same_vehicle(a.rear, b.rear, a.wheelbase, b.wheelbase)
    if sp is None:
        return None
    if a.follows_rear is not None and b.follows_rear is not None:
        if (a.follows_rear == b.follows_rear) != sp.same_order:
            return None
    known = [w for w in (a.wheelbase, b.wheelbase) if w is not None]
    if known and sp.median > MAX_TRACK_OVER_WHEELBASE * float(np.mean(known)):
        return None
    z = _wheelbase_z(a, b)
    if z > MAX_WHEELBASE_Z:
        return None
    return (z / MAX_WHEELBASE_Z) ** 2 + (sp.spread / MAX_SPACING_SPREAD) ** 2, sp


def choose_axles(costs: dict[tuple[int, int], float]) -> list[tuple[int, int]]:
    """Pairs of sides read as one vehicle: the most vehicles first (every side of a trail
    driven by several four-wheeled vehicles finds its partner), then the least total cost.

    Exact maximum-cardinality minimum-cost matching on each connected group of candidates: a
    group of one candidate is taken as it is, a small group (at most
    :data:`SEARCH_MAX_EDGES` candidates, nearly all of them: a trail holds a few vehicles
    side by side) by trying every matching, a larger one by networkx's blossom matching.

    Examples
    --------
    >>> choose_axles({(0, 1): 0.5, (1, 2): 0.1, (2, 3): 0.5})  # two vehicles, not one
    [(0, 1), (2, 3)]
    >>> choose_axles({(0, 1): 0.5, (1, 2): 0.1})
    [(1, 2)]
    """
    if not costs:
        return []
    # connected groups of candidates (union-find; scipy.sparse would cost 0.1 s to import)
    root: dict[int, int] = {}

    def find(k: int) -> int:
        root.setdefault(k, k)
        while root[k] != k:
            root[k] = root[root[k]]
            k = root[k]
        return k

    for a, b in costs:
        root[find(a)] = find(b)
    groups: dict[int, dict[tuple[int, int], float]] = {}
    for e, c in costs.items():
        groups.setdefault(find(e[0]), {})[e] = c
    out: list[tuple[int, int]] = []
    for edges in groups.values():
        if len(edges) == 1:
            out.extend(edges)
        elif len(edges) <= SEARCH_MAX_EDGES:
            out.extend(_matching_by_search(edges))
        else:
            out.extend(_matching_by_blossom(edges))
    return sorted(out)


#: groups of candidates up to this size are matched by trying every matching (a group of n
#: candidates has at most 2^n matchings; networkx takes about 0.2 s to import)
SEARCH_MAX_EDGES = 12


def _matching_by_search(edges: dict[tuple[int, int], float]) -> list[tuple[int, int]]:
    """The maximum-cardinality matching of least total cost, by trying every matching; exact
    ties of the total go to the first pairs in sorted order."""
    cost = {(min(a, b), max(a, b)): c for (a, b), c in edges.items()}
    partners: dict[int, list[int]] = {}
    for a, b in cost:
        partners.setdefault(a, []).append(b)
    nodes = sorted({k for e in cost for k in e})
    best: tuple[int, float, list[tuple[int, int]]] | None = None
    chosen: list[tuple[int, int]] = []
    used: set[int] = set()

    def visit(i: int) -> None:
        nonlocal best
        while i < len(nodes) and nodes[i] in used:
            i += 1
        if i == len(nodes):
            pairs = sorted(chosen)
            key = (-len(pairs), math.fsum(cost[p] for p in pairs), pairs)
            if best is None or key < best:
                best = key
            return
        node = nodes[i]
        visit(i + 1)  # node left unmatched
        used.add(node)
        for other in partners.get(node, []):
            if other not in used:
                used.add(other)
                chosen.append((node, other))
                visit(i + 1)
                chosen.pop()
                used.discard(other)
        used.discard(node)

    visit(0)
    assert best is not None
    return best[2]


def _matching_by_blossom(edges: dict[tuple[int, int], float]) -> list[tuple[int, int]]:
    """The maximum-cardinality matching of least total cost by networkx's blossom matching."""
    import networkx as nx  # only for crowded trails (about 0.2 s to import)

    g = nx.Graph()
    top = max(edges.values()) + 1.0
    for (a, b), c in edges.items():
        g.add_edge(a, b, weight=top - c)
    return [
        (min(a, b), max(a, b)) for a, b in nx.max_weight_matching(g, maxcardinality=True)
    ]
