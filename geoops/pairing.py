"""Candidate front/rear pairs among the ruts of a layer, and the choice of pairs.

A spatial index (shapely STRtree) proposes neighbours within a plausible distance; each
candidate is judged by :func:`geoops.inference.solve_pair`; pairs are accepted best first so
that no rut ends up in two passes. Ruts left over keep a reason. This module does not read
files or write output.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import kernels
from .clean import CleanRut
from .curves import box_neighbours, polyline_set
from .inference import OFFTRACK_MAX_M, SHIFT_MAX_M, PairResult, solve_pair
from .parallel import pool_map, thread_slices

#: largest distance between a rear track and its front track, metres (off-tracking)
NEIGHBOUR_DISTANCE_M = OFFTRACK_MAX_M
#: share of the shorter rut that must lie within that distance of the other
MIN_SHARED_FRACTION = 0.3
#: front and rear tracks of one side coincide wherever the vehicle runs straight, up to the
#: lateral shift of axles with different track widths (inference.SHIFT_MAX_M); a pair whose
#: spacing stays above this (plus three sigma of the pair's noise) over nine tenths of their
#: shared stretch is left/right or unrelated, and is not handed to the solver
FRONT_REAR_NEAR_M = SHIFT_MAX_M + 0.1
#: quantile of the spacing profile compared with FRONT_REAR_NEAR_M
NEAR_QUANTILE = 10.0
#: share of the shorter of two ruts within NEIGHBOUR_DISTANCE_M of the other for a left-over
#: rut to count as running alongside a pair's rut (an overlapping pass, not a fragment)
OVERLAP_ALONGSIDE = 0.6


@dataclass(frozen=True)
class Pairing:
    """Accepted pairs ``(i, j, result)`` (i, j rut indices; result on (i, j) in that order),
    and a reason for each rut left unpaired (``overlapping_pass`` for the ruts in
    :attr:`overlaps`)."""

    pairs: list[tuple[int, int, PairResult]]
    unpaired: dict[int, str]
    #: per accepted pair (its index in ``pairs``), ruts left over that fit one of its ruts as
    #: well: overlapping passes on one line that the geometry cannot separate
    overlaps: dict[int, list[int]] = field(default_factory=dict)


@dataclass(frozen=True)
class Candidate:
    """Two ruts ``i < j`` that run near each other: ``shared`` is the fraction of the shorter
    within :data:`NEIGHBOUR_DISTANCE_M` of the other, ``near`` the :data:`NEAR_QUANTILE`
    percentile of its distance to the other over that shared stretch (metres)."""

    i: int
    j: int
    shared: float
    near: float

    def may_be_front_rear(self, ruts: list[CleanRut]) -> bool:
        """Whether the spacing profile allows a front/rear pair: the tracks come together
        somewhere (straight running), within the pair's noise."""
        sigma = float(np.hypot(ruts[self.i].sigma, ruts[self.j].sigma))
        return self.near <= FRONT_REAR_NEAR_M + 3.0 * sigma


#: samples of the shorter rut looked at before its whole spacing profile is measured: boxes
#: within reach often hold lines that never come near (far queries cost the most); none of a
#: few dozen samples near means far less than the share needed
_GLANCE = 24
#: samples of the shorter rut in its spacing profile (at most about twice as many)
_PROFILE_SAMPLES = 200


#: neighbouring boxes handed to a worker at a time by :func:`choose_pairs`
_BOXES_PER_ITEM = 8


def _neighbours(ruts: list[CleanRut]) -> dict[str, Any]:
    """Pairs of ruts whose boxes lie within reach (``i < j``; exact line-to-line distances
    cost far more than the spacing profile, which measures the distance anyway), each also
    as (``first``, ``second``): its shorter rut first, from which the profile is measured;
    and the ruts as one polyline set (``set``) for :func:`geoops.kernels.spacing_profiles`."""
    i, j = box_neighbours([r.xy for r in ruts], NEIGHBOUR_DISTANCE_M)
    lengths = np.array([r.length for r in ruts])
    shorter = lengths[i] <= lengths[j]
    return {
        "i": i, "j": j, "first": np.where(shorter, i, j), "second": np.where(shorter, j, i),
        "set": polyline_set([r.index for r in ruts]),
    }


def _profile_args(near: dict[str, Any]) -> tuple[Any, ...]:
    return (*near["set"], _GLANCE, _PROFILE_SAMPLES, NEIGHBOUR_DISTANCE_M, NEAR_QUANTILE)


def _as_candidates(
    i: np.ndarray, j: np.ndarray, shared: np.ndarray, near: np.ndarray
) -> list[Candidate]:
    return [
        Candidate(a, b, s, n)
        for a, b, s, n in zip(i.tolist(), j.tolist(), shared.tolist(), near.tolist(), strict=True)
        if s >= MIN_SHARED_FRACTION
    ]


def candidate_pairs(ruts: list[CleanRut], workers: int | None = None) -> list[Candidate]:
    """Pairs of ruts that run near each other (at least :data:`MIN_SHARED_FRACTION` of the
    shorter within :data:`NEIGHBOUR_DISTANCE_M` of the other), with their spacing profile
    (measured in ``workers`` threads, all pairs of a thread in one compiled call)."""
    if len(ruts) < 2:
        return []
    near = _neighbours(ruts)
    shared, quantile = thread_slices(
        kernels.spacing_profiles, (near["first"], near["second"]), _profile_args(near), workers
    )
    return _as_candidates(near["i"], near["j"], shared, quantile)


def _rank(result: PairResult, shared: float) -> float:
    """Smaller is better: misfit relative to the tolerance, plus a penalty for ruts that run
    together only part of the way (legs of a manoeuvre overlap their own partner fully)."""
    return result.residual / max(result.tolerance, 1e-9) + 2.0 * (1.0 - shared)


def _judge(state: dict[str, Any], pair: tuple[int, int]) -> PairResult:
    ruts, cut = state["ruts"], state["cut"]
    return solve_pair(ruts[pair[0]], ruts[pair[1]], legs=pair[0] in cut or pair[1] in cut)


def _profile_and_judge(
    state: dict[str, Any], span: tuple[int, int]
) -> list[tuple[Candidate, PairResult | None]]:
    """The candidates among neighbouring boxes ``span`` (see :func:`_neighbours`), legs of
    one line left out, each with its judgement where its spacing allows a front/rear pair."""
    near, same_line, ruts = state["near"], state["same_line"], state["ruts"]
    lo, hi = span
    shared, quantile = kernels.spacing_profiles(
        near["first"][lo:hi], near["second"][lo:hi], *_profile_args(near)
    )
    out: list[tuple[Candidate, PairResult | None]] = []
    for c in _as_candidates(near["i"][lo:hi], near["j"][lo:hi], shared, quantile):
        if same_line is not None and same_line[c.i] == same_line[c.j]:
            continue
        out.append((c, _judge(state, (c.i, c.j)) if c.may_be_front_rear(ruts) else None))
    return out


def choose_pairs(
    ruts: list[CleanRut], same_line: list[int] | None = None, workers: int | None = None
) -> Pairing:
    """Pair ruts: judge every candidate pair whose spacing allows a front/rear pair, accept
    the best fitting first, each rut once.

    ``same_line`` gives, per rut, the input line it was cut from (legs of one line, split at
    its reversals); legs of one line are never paired with each other. ``workers`` > 1
    measures the spacing profiles (:func:`candidate_pairs`) and judges the candidates in that
    many forked processes, in one pass (same result).
    """
    if len(ruts) < 2:
        return Pairing([], {k: "no_partner" for k in range(len(ruts))})
    # legs of a line cut at its reversals (see solve_pair's ``legs``)
    per_line: dict[int, int] = {}
    for k in same_line or []:
        per_line[k] = per_line.get(k, 0) + 1
    cut = {k for k, line in enumerate(same_line or []) if per_line[line] > 1}
    near = _neighbours(ruts)
    n = len(near["i"])
    spans = [(a, min(a + _BOXES_PER_ITEM, n)) for a in range(0, n, _BOXES_PER_ITEM)]
    state = {"ruts": ruts, "cut": cut, "near": near, "same_line": same_line}
    found = [c for part in pool_map(_profile_and_judge, spans, state, workers) for c in part]
    cands = [c for c, _ in found]
    judged = [(c.i, c.j, c.shared, r) for c, r in found if r is not None]
    fitting = [c for c in judged if c[3].verdict != "not_a_pair"]
    fitting.sort(key=lambda c: _rank(c[3], c[2]))
    used: set[int] = set()
    pairs = []
    for i, j, _, res in fitting:
        if i in used or j in used:
            continue
        used.update((i, j))
        pairs.append((i, j, res))
    pairs.sort(key=lambda c: min(c[0], c[1]))
    alongside = {(c.i, c.j): c.shared for c in cands}
    overlaps = _overlaps(pairs, fitting, used, same_line, alongside)
    had_neighbour = {k for c in cands for k in (c.i, c.j)}
    unpaired = {
        k: ("not_a_pair" if k in had_neighbour else "no_partner")
        for k in range(len(ruts))
        if k not in used
    }
    for extra in overlaps.values():
        unpaired.update((k, "overlapping_pass") for k in extra)
    return Pairing(pairs, unpaired, overlaps)


def _overlaps(
    pairs: list[tuple[int, int, PairResult]],
    fitting: list[tuple[int, int, float, PairResult]],
    used: set[int],
    same_line: list[int] | None,
    alongside: dict[tuple[int, int], float],
) -> dict[int, list[int]]:
    """Ruts left unpaired that fit (wheelbase identifiable) a rut of an accepted pair and run
    alongside its partner over most of their length: two vehicles drove one line (a shared
    rear track, say, with two front tracks), and which of them a rut belongs to is beyond the
    geometry. A fragment of the partner (end to end with it, not alongside) is not one, and
    legs of a line cut at its reversals are left to the manoeuvre logic."""
    lines: dict[int, int] = {}
    if same_line is not None:
        for k in same_line:
            lines[k] = lines.get(k, 0) + 1
    where = {r: n for n, (i, j, _) in enumerate(pairs) for r in (i, j)}
    partner = {a: b for i, j, _ in pairs for a, b in ((i, j), (j, i))}
    out: dict[int, list[int]] = {}
    for i, j, _, res in fitting:
        if res.wheelbase is None:
            continue
        for inside, extra in ((i, j), (j, i)):
            if inside not in where or extra in used:
                continue
            other = partner[inside]
            beside = alongside.get((min(other, extra), max(other, extra)), 0.0)
            if beside >= OVERLAP_ALONGSIDE and (
                same_line is None or lines[same_line[extra]] == 1
            ):
                out.setdefault(where[inside], []).append(extra)
                used.add(extra)
    return out
