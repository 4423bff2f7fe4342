"""Vehicle passes from judged pairs of legs: grouping, direction evidence, gear.

A rut that turns back (a reversal) is cut into legs; legs are paired like whole ruts. This
module joins the judged leg pairs of one manoeuvre into a pass group, combines the direction
evidence of every leg and every rear cusp (see :mod:`geoops.reversals`), and assigns each leg
its gear.

Gear: the geometry fixes which end of the vehicle was in front, not whether it was driven
forwards. Legs alternate between forward and reverse at each cusp; rutwise takes the reading
in which the greater distance was driven forward, so a pass without cusps is driven forward.

It does not read files, judge pairs or write output.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field

import numpy as np

from .clean import CleanRut, clean_line
from .errors import BadInput
from .inference import DECIDE_AT, MAX_LOG_ODDS, WHEELBASE_MAX_M, WHEELBASE_MIN_M, PairResult
from .reversals import TURN_BASE_M, Reversal, find_reversals, judge_cusp, split_at

#: log-odds a rear cusp with a front corner where it belongs adds to the heading: the front
#: corner must lie one wheelbase along the cusp line; a chance match is rare.  # common practice
CUSP_LOG_ODDS = 4.6  # probability 0.99


@dataclass
class Leg:
    """One leg of a rut: the whole rut when it never turns back."""

    rut: int  # index of the input feature
    number: int  # 0-based, in the rut's vertex order
    track: CleanRut
    reversals: list[Reversal] = field(default_factory=list)  # of the whole rut


#: a rut's turn-backs are measured over chords of this many noise sigmas, at least
#: :data:`geoops.reversals.TURN_BASE_M` (see :func:`geoops.reversals.find_reversals`)
LEG_TURN_SIGMAS = 5.0
#: (least base, sigmas) as :func:`geoops.clean.clean_lines` takes them
LEG_TURN_BASE = (TURN_BASE_M, LEG_TURN_SIGMAS)


def split_into_legs(
    rut_index: int, rut: CleanRut, accuracy: float | None, least_cosine: float | None = None
) -> list[Leg]:
    """Cut a cleaned rut at its reversals and clean each leg (the noise estimate of the whole
    rut is reused, since legs can be short). ``least_cosine``: the quick turn-back check's
    result when the caller has it (see :func:`geoops.clean.clean_lines`)."""
    base = max(TURN_BASE_M, LEG_TURN_SIGMAS * rut.sigma)
    reversals = find_reversals(rut.raw_xy, base_m=base, least_cosine=least_cosine)
    if not reversals:
        return [Leg(rut_index, 0, rut, [])]
    legs: list[Leg] = []
    pieces = split_at(rut.raw_xy, reversals)
    gaps = split_at(rut.raw_gap_after[:, None].astype(np.float64), reversals)
    for number, (piece, gap) in enumerate(zip(pieces, gaps, strict=True)):
        try:
            track = clean_line(
                piece,
                gap[:, 0].astype(bool),
                accuracy=accuracy,
                estimated_sigma=None if accuracy else rut.sigma,
            )
        except BadInput:
            continue
        legs.append(Leg(rut_index, number, track, reversals))
    return legs or [Leg(rut_index, 0, rut, [])]


@dataclass
class LegPass:
    """One leg of a pass, ready to become a `passes` feature."""

    pair: tuple[int, int]  # leg indices (as given to the pairing)
    result: PairResult
    rear_leg: int  # leg index of the rear (or first) track
    front_leg: int
    verdict: str
    confidence: float
    motion_follows_rear: bool | None  # drawn order: True = rear leg's vertex order
    gear: str
    reversals: int
    group: int
    order: int  # position of the leg along the motion (0-based)


def logit(p: float) -> float:
    """Log-odds of a probability (kept finite at 0 and 1)."""
    p = min(max(p, 1e-13), 1 - 1e-13)
    return float(np.log(p / (1 - p)))


def _groups(pairs: list[tuple[int, int, PairResult]], legs: list[Leg]) -> list[list[int]]:
    """Pair indices grouped by the input ruts they share (union-find over ruts)."""
    parent: dict[int, int] = {}

    def find(a: int) -> int:
        while parent.setdefault(a, a) != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for i, j, _ in pairs:
        parent[find(legs[i].rut)] = find(legs[j].rut)
    groups: dict[int, list[int]] = defaultdict(list)
    for p, (i, _, _) in enumerate(pairs):
        groups[find(legs[i].rut)].append(p)
    return sorted(groups.values(), key=lambda g: min(min(pairs[p][:2]) for p in g))


def assemble(pairs: list[tuple[int, int, PairResult]], legs: list[Leg]) -> list[LegPass]:
    """Join judged leg pairs into pass groups with a direction and a gear per leg."""
    out: list[LegPass] = []
    for group_no, members in enumerate(_groups(pairs, legs)):
        out.extend(_assemble_group(group_no, members, pairs, legs))
    return out


def _rear_and_front(i: int, j: int, res: PairResult) -> tuple[int, int]:
    return (i, j) if res.rear in (None, 0) else (j, i)


def _assemble_group(
    group_no: int, members: list[int], pairs: list[tuple[int, int, PairResult]], legs: list[Leg]
) -> list[LegPass]:
    items = []
    for p in members:
        i, j, res = pairs[p]
        rear, front = _rear_and_front(i, j, res)
        items.append((p, rear, front, res))
    # order along the rear rut (rut, then leg number)
    items.sort(key=lambda it: (legs[it[1]].rut, legs[it[1]].number))
    rear_rut = legs[items[0][1]].rut
    ref_number = legs[items[0][1]].number

    def parity(leg_index: int) -> int:
        return 1 if (legs[leg_index].number - ref_number) % 2 == 0 else -1

    # evidence on h_ref: the heading follows the rear rut's vertex order in the first leg
    log_odds = 0.0
    signs = set()
    for _, rear, _front, res in items:
        if res.verdict != "decided" or legs[rear].rut != rear_rut:
            continue
        pos = 0 if res.rear in (None, 0) else 1
        follows = res.follows(pos)
        lo = logit(res.confidence) * (1 if follows else -1) * parity(rear)
        signs.add(lo > 0)
        log_odds += lo
    lengths = [r.wheelbase for *_, r in items if r.wheelbase is not None]
    wb = float(np.median(lengths)) if lengths else None
    # the front rut of the first leg pair, its reversals in the rear rut's travel order
    _, first_rear, first_front, first_res = items[0]
    rear_leg0 = legs[first_rear]
    corners = sorted(legs[first_front].reversals, key=lambda r: r.s)
    if not first_res.same_order:
        corners = corners[::-1]
    rear_revs = sorted(rear_leg0.reversals, key=lambda r: r.s)
    sigma_pair = float(np.hypot(rear_leg0.track.sigma, legs[first_front].track.sigma))
    for k, cusp in enumerate(rear_revs):
        if not cusp.is_cusp:
            continue
        lo_l, hi_l = (0.6 * wb, 1.6 * wb) if wb else (WHEELBASE_MIN_M, WHEELBASE_MAX_M)
        # the k-th reversal of the rear track happened with the k-th of the front track;
        # when the counts differ, any corner in range may be the one
        candidates = [corners[k]] if len(corners) == len(rear_revs) else corners
        ev = judge_cusp(cusp, candidates, lo_l, hi_l)
        # a cusp is evidence only where the tracks are sharp enough to place it: three sigma
        # of the pair within 15 % of the wheelbase (else noise makes and moves cusps)
        if ev is None or 3.0 * sigma_pair > 0.15 * ev.wheelbase:
            continue
        # the cusp ends leg k of the rear rut (vertex order): its heading follows that order
        # when before_follows; leg k has parity relative to the reference leg
        sign = 1 if (k - ref_number) % 2 == 0 else -1
        log_odds += CUSP_LOG_ODDS * (1 if ev.before_follows else -1) * sign
    log_odds = float(np.clip(log_odds, -MAX_LOG_ODDS, MAX_LOG_ODDS))
    p_ref = 1.0 / (1.0 + np.exp(-log_odds))
    conflicting = len(signs) > 1 and max(p_ref, 1 - p_ref) < DECIDE_AT
    decided = max(p_ref, 1 - p_ref) >= DECIDE_AT
    n_rev = len(rear_leg0.reversals)
    result = []
    if decided:
        h_ref = 1 if p_ref >= 0.5 else -1
        heads = [h_ref * parity(rear) for _, rear, _, _ in items]
        lens = [legs[rear].track.raw_length for _, rear, _, _ in items]
        fwd_if_along = sum(ln for h, ln in zip(heads, lens, strict=True) if h > 0)
        fwd_if_against = sum(ln for h, ln in zip(heads, lens, strict=True) if h < 0)
        t = (
            1
            if fwd_if_along > fwd_if_against or (fwd_if_along == fwd_if_against and heads[0] > 0)
            else -1
        )
        conf = max(p_ref, 1 - p_ref)
        order = list(range(len(items))) if t > 0 else list(range(len(items)))[::-1]
        for pos_in_motion, idx in enumerate(order):
            p, rear, front, res = items[idx]
            result.append(
                LegPass(
                    (pairs[p][0], pairs[p][1]),
                    res,
                    rear,
                    front,
                    "decided",
                    conf,
                    t > 0,
                    "forward" if heads[idx] * t > 0 else "reverse",
                    n_rev,
                    group_no,
                    pos_in_motion,
                )
            )
        return result
    for pos_in_motion, (p, rear, front, res) in enumerate(items):
        verdict = "mixed" if conflicting else res.verdict
        if verdict == "decided":  # cannot happen without the group deciding; keep it honest
            verdict = "mixed"
        result.append(
            LegPass(
                (pairs[p][0], pairs[p][1]),
                res,
                rear,
                front,
                verdict,
                0.5,
                None,
                "forward",
                n_rev,
                group_no,
                pos_in_motion,
            )
        )
    return result
