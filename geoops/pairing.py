"""Candidate front/rear pairs among the ruts of a layer, and the choice of pairs.

A spatial index (shapely STRtree) proposes neighbours within a plausible distance; each
candidate is judged by :func:`geoops.inference.solve_pair`; pairs are accepted best first so
that no rut ends up in two passes. Ruts left over keep a reason. This module does not read
files or write output.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from .clean import CleanRut
from .curves import as_linestrings
from .inference import PairResult, solve_pair

#: largest distance between a rear track and its front track, metres. Off-tracking is about
#: L^2 / (2 R): 6 m wheelbase on a 8 m radius gives 2.25 m.  # common practice (SAE J695 terms)
NEIGHBOUR_DISTANCE_M = 2.5
#: share of the shorter rut that must lie within that distance of the other
MIN_SHARED_FRACTION = 0.3


@dataclass(frozen=True)
class Pairing:
    """Accepted pairs ``(i, j, result)`` (i, j rut indices; result on (i, j) in that order),
    and a reason for each rut left unpaired."""

    pairs: list[tuple[int, int, PairResult]]
    unpaired: dict[int, str]


def candidate_pairs(ruts: list[CleanRut]) -> list[tuple[int, int]]:
    """Index pairs ``(i, j)``, ``i < j``, of ruts that run near each other for a good part of
    the shorter one."""
    if len(ruts) < 2:
        return []
    lines = as_linestrings([r.xy for r in ruts])
    tree = shapely.STRtree(lines)
    left, right = tree.query(lines, predicate="dwithin", distance=NEIGHBOUR_DISTANCE_M)
    keep = left < right
    out = []
    for i, j in zip(left[keep].tolist(), right[keep].tolist(), strict=True):
        a, b = (ruts[i], ruts[j]) if ruts[i].length <= ruts[j].length else (ruts[j], ruts[i])
        d, _, _ = b.index.query(a.xy[:: max(len(a.xy) // 200, 1)])
        if np.mean(d <= NEIGHBOUR_DISTANCE_M) >= MIN_SHARED_FRACTION:
            out.append((i, j))
    return out


def _rank(result: PairResult) -> tuple[int, float]:
    order = {"decided": 0, "ambiguous": 1, "undetermined": 2}
    return order.get(result.verdict, 3), result.residual / max(result.tolerance, 1e-9)


def choose_pairs(ruts: list[CleanRut]) -> Pairing:
    """Pair ruts: judge every candidate pair, accept the best fitting first, each rut once."""
    cands = candidate_pairs(ruts)
    judged = [(i, j, solve_pair(ruts[i], ruts[j])) for i, j in cands]
    fitting = [c for c in judged if c[2].verdict != "not_a_pair"]
    fitting.sort(key=lambda c: _rank(c[2]))
    used: set[int] = set()
    pairs = []
    for i, j, res in fitting:
        if i in used or j in used:
            continue
        used.update((i, j))
        pairs.append((i, j, res))
    had_neighbour = {k for i, j in cands for k in (i, j)}
    unpaired = {
        k: ("not_a_pair" if k in had_neighbour else "no_partner")
        for k in range(len(ruts))
        if k not in used
    }
    pairs.sort(key=lambda c: min(c[0], c[1]))
    return Pairing(pairs, unpaired)
