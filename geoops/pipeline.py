"""The analysis pipeline: read -> frame -> clean -> pair -> infer -> attribute -> write.

:func:`analyze_layer` and :func:`analyze_file` return an :class:`AnalysisResult` holding the
``passes`` and ``ruts`` records of the output contract in the local metric frame;
:func:`write_result` writes them (GeoPackage or GeoJSON) in the requested CRS, and
:func:`result_layers` gives them as :class:`geoops.io.OutputLayer` for other writers (the HTTP
service). No HTTP, no printing here.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

import numpy as np
import pyproj
import shapely

from . import __version__
from .axles import TRACK_MAX_M, Side, choose_axles, join_cost, spacing
from .chaining import chain_features
from .clean import CleanRut, clean_lines, join_parts
from .crosscheck import Curvature, steady_turn_wheelbase
from .curves import Array, as_linestrings, box_neighbours
from .errors import BadInput, CrsError
from .frame import LocalFrame, build_frame, resolve_crs
from .inference import DECIDE_AT, MAX_LOG_ODDS, PairResult
from .integrity import file_sha256, with_layer_checksums
from .io import InputLayer, OutputLayer, read_layer, write_geojson, write_geopackage
from .limits import add_length
from .order_stats import percentile_of_sorted
from .pairing import choose_pairs
from .parallel import Mapper, worker_pool
from .passes import LEG_TURN_BASE, Leg, LegPass, assemble, logit, split_into_legs
from .vehicles import suggest_class

CAUTION = (
    "rutwise results are estimates computed from line geometry. Where they feed an "
    "investigation, an enforcement action or a safety decision, a qualified examiner must "
    "interpret them, and local law and licensed practice decide. Do not walk active machine "
    "routes or unstable ground to collect data."
)
GEAR_ASSUMPTION = (
    "gear: the geometry fixes which end of the vehicle was in front, not whether it was driven "
    "forwards. Ruts are cut into legs where they turn back (reversals); legs alternate between "
    "forward and reverse, and the reading in which the greater distance was driven forward is "
    "taken, so a pass without cusps is assumed to have been driven forward."
)

#: contract field types, in order (design section 4)
PASS_FIELDS = {
    "pass_id": "int",
    "verdict": "text",
    "confidence": "real",
    "wheelbase_m": "real",
    "wheelbase_low_m": "real",
    "wheelbase_high_m": "real",
    "track_width_m": "real",
    "wheel_tracks": "int",
    "vehicle_class": "text",
    "gear": "text",
    "reversals": "int",
    "min_turn_radius_m": "real",
    "max_steer_deg": "real",
    "residual_m": "real",
    "length_m": "real",
    "rut_ids": "text",
    "source_fids": "text",
    "leg": "int",
    "pass_group": "int",
    "wheelbase_turn_m": "real",
}
RUT_FIELDS = {
    "rut_id": "int",
    "pass_id": "int",
    "wheel": "text",
    "verdict": "text",
    "reason": "text",
    "source_fids": "text",
    "length_m": "real",
}


@dataclass(frozen=True)
class AnalyzeOptions:
    """Options of one analysis; the CLI and the service map their arguments onto these."""

    layer: str | None = None
    crs: str | None = None
    out_crs: str | None = None
    accuracy: float | None = None
    id_field: str | None = None
    accuracy_field: str | None = None

    @classmethod
    def from_args(cls, args: object) -> AnalyzeOptions:
        """Options from parsed command-line arguments of the same names (missing ones None)."""
        return cls(**{f.name: getattr(args, f.name, None) for f in fields(cls)})

    def __post_init__(self) -> None:
        if self.accuracy is not None and not (0 < self.accuracy < 1000):
            raise BadInput(
                f"accuracy must be a positive number of metres, got {self.accuracy}.",
                "Give the horizontal accuracy (one sigma) in metres, e.g. 0.02.",
            )


@dataclass
class PassRecord:
    pass_id: int
    verdict: str
    confidence: float
    wheelbase_m: float | None
    wheelbase_low_m: float | None
    wheelbase_high_m: float | None
    track_width_m: float | None
    wheel_tracks: int
    vehicle_class: str
    gear: str
    reversals: int
    min_turn_radius_m: float | None
    max_steer_deg: float | None
    residual_m: float
    length_m: float
    rut_ids: str
    source_fids: str
    geometry: Array = field(repr=False)  # local frame, vertex order = travel when decided
    leg: int = 1  # position along the manoeuvre, 1-based (legs are split at reversals)
    pass_group: int = 0  # pass_id of the first leg of the same manoeuvre
    wheelbase_turn_m: float | None = None  # independent estimate from steady turns


@dataclass
class RutRecord:
    rut_id: int
    pass_id: int | None
    wheel: str
    verdict: str
    reason: str | None
    source_fids: str
    length_m: float
    geometry: Array = field(repr=False)  # local frame


@dataclass
class AnalysisResult:
    passes: list[PassRecord]
    ruts: list[RutRecord]
    frame: LocalFrame
    source_crs: pyproj.CRS
    metadata: dict[str, str]
    warnings: list[str]


def _rear_attributes(
    rut: CleanRut, wheelbase: float | None, curvature: Curvature
) -> tuple[float | None, float | None]:
    """Minimum turning radius of the rear path and the largest steering angle it implies;
    ``curvature`` is ``rut.curvature()``.

    Curvature is the heading change across one smoothing window (not between neighbouring
    samples, which only measures noise); its noise follows from the tangent variance. A path
    whose curvature never rises clearly above that noise has no minimum radius (null).
    """
    kappa, centres, noise = curvature
    kappa = np.abs(kappa[rut.has_data[centres]])
    if len(kappa) < 5:
        return None, None
    # the 95th percentile keeps a sharp turn but not a single noisy sample
    kmax = percentile_of_sorted(np.sort(kappa), 0.95)
    if kmax <= 3.0 * noise or kmax < 1e-4:
        return None, None
    steer = float(np.degrees(np.arctan(wheelbase * kmax))) if wheelbase is not None else None
    return 1.0 / kmax, steer


def _make_pass(pass_id: int, lp: LegPass, legs: list[Leg], ids: list[str]) -> PassRecord:
    """A `passes` record for one leg of a pass."""
    res = lp.result
    rear = legs[lp.rear_leg].track
    geom = rear.xy if lp.motion_follows_rear in (None, True) else rear.xy[::-1]
    curvature = rear.curvature()
    radius, steer = _rear_attributes(rear, res.wheelbase, curvature)
    tol = max(rear.sigma, 0.005)
    simple = shapely.get_coordinates(shapely.simplify(shapely.linestrings(geom), tol * 0.5))
    ruts = sorted({legs[lp.rear_leg].rut, legs[lp.front_leg].rut})
    return PassRecord(
        pass_id=pass_id,
        verdict=lp.verdict,
        confidence=lp.confidence,
        wheelbase_m=res.wheelbase,
        wheelbase_low_m=res.wheelbase_low,
        wheelbase_high_m=res.wheelbase_high,
        track_width_m=None,
        wheel_tracks=2,
        vehicle_class=suggest_class(res.wheelbase, None, True),
        gear=lp.gear,
        reversals=lp.reversals,
        min_turn_radius_m=radius,
        max_steer_deg=steer,
        residual_m=res.residual,
        length_m=float(rear.raw_length),
        rut_ids=",".join(str(k + 1) for k in ruts),
        source_fids=",".join(ids[k] for k in ruts),
        geometry=simple,
        leg=lp.order + 1,
        wheelbase_turn_m=steady_turn_wheelbase(
            rear, legs[lp.front_leg].track, res.wheelbase, curvature
        ),
    )


def _mark_overlapping(
    record: PassRecord,
    labels: dict[int, tuple[str, bool | None]],
    extra_ruts: list[int],
    ids: list[str],
) -> None:
    """Make a pass `mixed`: more ruts fit it than one vehicle leaves (two vehicles drove one
    line), so which rut belongs to which vehicle, and the direction, are beyond the geometry."""
    record.verdict = "mixed"
    record.confidence = 0.5
    for k, (wheel, _) in list(labels.items()):
        labels[k] = (wheel, None)
    for k in extra_ruts:
        labels[k] = ("unassigned", None)
    ruts = sorted(labels)
    record.rut_ids = ",".join(str(k + 1) for k in ruts)
    record.source_fids = ",".join(ids[k] for k in ruts)


def _estimates_disagree(record: PassRecord) -> bool:
    a, b = record.wheelbase_turn_m, record.wheelbase_m
    return a is not None and b is not None and abs(a - b) > 0.25 * b


def _leg_labels(lp: LegPass, legs: list[Leg]) -> dict[int, tuple[str, bool | None]]:
    """Wheel label of each rut of one leg pair, and whether travel follows its vertex order."""
    res = lp.result
    rear_pos = 0 if lp.pair[0] == lp.rear_leg else 1
    out: dict[int, tuple[str, bool | None]] = {}
    for leg_index, wheel_pos in ((lp.rear_leg, rear_pos), (lp.front_leg, 1 - rear_pos)):
        wheel = "unassigned" if res.rear is None else ("rear" if wheel_pos == res.rear else "front")
        follows = None
        if lp.motion_follows_rear is not None:
            # leg vertex order = rut vertex order; relate the two tracks' orders
            same = True if leg_index == lp.rear_leg else res.same_order
            follows = lp.motion_follows_rear == same
        out[legs[leg_index].rut] = (wheel, follows)
    return out


def _join_cost(state: dict[str, Any], pair: tuple[int, int]) -> float | None:
    """:func:`geoops.axles.join_cost` of two leg passes (by index), in a worker."""
    leg_passes, legs = state["leg_passes"], state["legs"]
    joined = join_cost(_side(leg_passes[pair[0]], legs), _side(leg_passes[pair[1]], legs))
    return None if joined is None else joined[0]


def _axle_units(
    leg_passes: list[LegPass], legs: list[Leg], run: Mapper | None = None
) -> list[tuple[int, ...]]:
    """Leg passes grouped into units: two side pairs of one four-wheeled vehicle, or one pair.

    Only passes without reversals are joined for now. Candidates are rear tracks within a
    track width of each other that can be one axle (:func:`geoops.axles.join_cost`, measured
    by ``run``, a :func:`geoops.parallel.worker_pool` mapper, whose state holds the
    ``leg_passes`` and ``legs``); the choice is a matching over all of them
    (:func:`geoops.axles.choose_axles`), so that two vehicles on one trail are not read as
    one vehicle plus two halves.
    """
    single = [i for i, lp in enumerate(leg_passes) if lp.reversals == 0]
    costs: dict[tuple[int, int], float] = {}
    if len(single) > 1:
        # only rear tracks within a track width of each other can be two sides of one axle
        rears = [legs[leg_passes[i].rear_leg].track.xy for i in single]
        left, right = box_neighbours(rears, TRACK_MAX_M)
        pairs = [(single[a], single[b]) for a, b in zip(left.tolist(), right.tolist(),
                                                         strict=True)]
        state = {"leg_passes": leg_passes, "legs": legs}
        found = run(_join_cost, pairs) if run else [_join_cost(state, p) for p in pairs]
        costs = {p: c for p, c in zip(pairs, found, strict=True) if c is not None}
    units: list[tuple[int, ...]] = list(choose_axles(costs))
    used = {k for u in units for k in u}
    units.extend((i,) for i in range(len(leg_passes)) if i not in used)
    return sorted(units, key=lambda u: min(u))


def _side(lp: LegPass, legs: list[Leg]) -> Side:
    r = lp.result
    follows = lp.motion_follows_rear if lp.verdict == "decided" else None
    return Side(legs[lp.rear_leg].track, r.wheelbase, r.wheelbase_low, r.wheelbase_high, follows)


def _combined_wheelbase(
    results: list[PairResult],
) -> tuple[float | None, float | None, float | None]:
    """Inverse-variance mean of the sides' wheelbases; the 95 % half-widths give the variances."""
    est = [
        (r.wheelbase, r.wheelbase_low, r.wheelbase_high)
        for r in results
        if r.wheelbase is not None and r.wheelbase_low is not None and r.wheelbase_high is not None
    ]
    if not est:
        return None, None, None
    w = np.array([1.0 / max((hi - lo) / 3.92, 1e-6) ** 2 for _, lo, hi in est])
    value = float(np.sum(w * np.array([e[0] for e in est])) / w.sum())
    half = 1.96 / float(np.sqrt(w.sum()))
    return value, value - half, value + half


def _side_log_odds(lp: LegPass) -> float:
    """Log-odds that travel follows the rear leg's vertex order (0 when not decided)."""
    if lp.verdict != "decided" or lp.motion_follows_rear is None:
        return 0.0
    lo = logit(lp.confidence)
    return lo if lp.motion_follows_rear else -lo


#: log-odds (p = 0.7) from which two sides' opposite direction evidence makes a joined pass
#: `mixed` rather than one vehicle's verdict
SIDE_CONFLICT_LOG_ODDS = logit(0.7)


def _side_evidence(lp: LegPass) -> float:
    """Log-odds, from the pair's own fit whatever its verdict, that travel follows the rear
    leg's vertex order."""
    r = lp.result
    lo = logit(r.p_follows_first)
    return lo if lp.rear_leg == lp.pair[0] or r.same_order else -lo


def _unit_record(
    state: dict[str, Any], numbered: tuple[int, tuple[int, ...]]
) -> tuple[PassRecord, dict[int, tuple[str, bool | None]]]:
    """The `passes` record of unit ``numbered = (pass id, leg pass indices)`` and the labels
    of its ruts (:func:`_make_pass` or :func:`_make_axle_pass`), in a worker."""
    n, unit = numbered
    leg_passes, legs, ids = state["leg_passes"], state["legs"], state["ids"]
    lp = leg_passes[unit[0]]
    if len(unit) == 1:
        return _make_pass(n, lp, legs, ids), _leg_labels(lp, legs)
    return _make_axle_pass(n, lp, leg_passes[unit[1]], legs, ids)


def _make_axle_pass(
    pass_id: int, a: LegPass, b: LegPass, legs: list[Leg], ids: list[str]
) -> tuple[PassRecord, dict[int, tuple[str, bool | None]]]:
    """One `passes` record for a four-wheeled vehicle seen as two side pairs, and the labels
    of its four ruts. Geometry: the rear-axle midpoint path (midway between the rear tracks)."""
    rear_a, rear_b = legs[a.rear_leg].track, legs[b.rear_leg].track
    d, s, _, foot = rear_b.index.nearest(rear_a.xy)
    sp = spacing(rear_a, rear_b, (d, s))
    lo = _side_log_odds(a) + _side_log_odds(b) * (1 if sp.same_order else -1)
    lo = float(np.clip(lo, -MAX_LOG_ODDS, MAX_LOG_ODDS))
    p = 1.0 / (1.0 + np.exp(-lo))
    decided = max(p, 1 - p) >= DECIDE_AT
    # the sides of one rigid vehicle travel together: when each side's own evidence points
    # the other way, the four ruts hold two passes that the geometry cannot separate
    ea, eb = _side_evidence(a), _side_evidence(b) * (1 if sp.same_order else -1)
    mixed = ea * eb < 0 and min(abs(ea), abs(eb)) >= SIDE_CONFLICT_LOG_ODDS
    follows_a = (lo > 0) if decided and not mixed else None
    inside = (s > 2 * rear_b.step) & (s < rear_b.length - 2 * rear_b.step)
    mid = 0.5 * (rear_a.xy[inside] + foot[inside])
    geom = mid if follows_a in (None, True) else mid[::-1]
    wb, wb_low, wb_high = _combined_wheelbase([a.result, b.result])
    if mixed:
        verdict = "mixed"
    elif follows_a is not None:
        verdict = "decided"
    elif wb is not None:
        verdict = "ambiguous"
    else:
        verdict = "undetermined"
    curvature = rear_a.curvature()
    radius, steer = _rear_attributes(rear_a, wb, curvature)
    simple = shapely.get_coordinates(
        shapely.simplify(shapely.linestrings(geom), 0.5 * max(rear_a.sigma, 0.005))
    )
    # sides: with the travel direction known, the rear track to the right of it is rear_right
    labels: dict[int, tuple[str, bool | None]] = {}
    side_a = side_b = ""
    if follows_a is not None and inside.any():
        k = int(np.flatnonzero(inside)[inside.sum() // 2])
        u = rear_a.tangents[k] * (1 if follows_a else -1)
        v = foot[k] - rear_a.xy[k]
        b_is_left = u[0] * v[1] - u[1] * v[0] > 0
        side_a, side_b = ("_right", "_left") if b_is_left else ("_left", "_right")
    for lp, side, rear_follows in (
        (a, side_a, follows_a),
        (b, side_b, None if follows_a is None else follows_a == sp.same_order),
    ):
        for leg_index, role in ((lp.rear_leg, "rear"), (lp.front_leg, "front")):
            follows = None
            if rear_follows is not None:
                same = True if leg_index == lp.rear_leg else lp.result.same_order
                follows = rear_follows == same
            wheel = role + side if lp.result.rear is not None else "unassigned"
            labels[legs[leg_index].rut] = (wheel, follows)
    ruts = sorted(labels)
    record = PassRecord(
        pass_id=pass_id,
        verdict=verdict,
        confidence=float(max(p, 1 - p)) if verdict == "decided" else 0.5,
        wheelbase_m=wb,
        wheelbase_low_m=wb_low,
        wheelbase_high_m=wb_high,
        track_width_m=sp.median,
        wheel_tracks=4,
        vehicle_class=suggest_class(wb, sp.median, False),
        gear="forward",
        reversals=0,
        min_turn_radius_m=radius,
        max_steer_deg=steer,
        residual_m=max(a.result.residual, b.result.residual),
        length_m=float(0.5 * (rear_a.raw_length + rear_b.raw_length)),
        rut_ids=",".join(str(k + 1) for k in ruts),
        source_fids=",".join(ids[k] for k in ruts),
        geometry=simple,
        wheelbase_turn_m=steady_turn_wheelbase(rear_a, legs[a.front_leg].track, wb, curvature),
    )
    return record, labels


def _joined(parts: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray] | None:
    """A feature's parts joined into one line with its gaps (see
    :func:`geoops.clean.join_parts`), None if degenerate."""
    try:
        return join_parts(parts)
    except BadInput:
        return None


def _line_of(
    parts: list[np.ndarray], joined: tuple[np.ndarray, np.ndarray] | None
) -> tuple[np.ndarray, np.ndarray] | str:
    """A rut's line to clean: its ``joined`` line when it is one feature, else its pieces'
    parts joined; or why it cannot be used."""
    if joined is not None:
        return joined
    try:
        return join_parts(parts)
    except BadInput as exc:
        return exc.message


def analyze_layer(
    layer: InputLayer, options: AnalyzeOptions = AnalyzeOptions(), workers: int | None = None
) -> AnalysisResult:
    """Run the whole analysis on a layer already read from a file.

    ``workers`` > 1 spreads the pair judging over that many forked processes
    (:mod:`geoops.parallel`); the result is the same as with one. Cleaning stays in this
    process, in as many threads (:func:`geoops.clean.clean_lines`): compiled, it costs about
    0.1 ms a rut, less than sending its result back from another process would.
    """
    crs = resolve_crs(layer.crs, options.crs)
    xy_all = layer.all_xy()
    frame, warnings = build_frame(xy_all[:, 0], xy_all[:, 1], crs)
    warnings = list(layer.warnings) + list(warnings)
    accuracies = _accuracies(layer, options)
    ruts: dict[int, CleanRut] = {}
    legs: list[Leg] = []
    bad: list[tuple[int, str]] = []
    local: list[list[np.ndarray]] = []
    # one transformation for the whole layer (a call per part costs more than the work)
    flat = [p for parts in layer.parts for p in parts]
    if flat:
        lx, ly = frame.to_local(xy_all[:, 0], xy_all[:, 1])
        pieces = np.split(np.column_stack([lx, ly]), np.cumsum([len(p) for p in flat])[:-1])
    it = iter(pieces if flat else [])
    for parts in layer.parts:
        local.append([next(it) for _ in parts])
    add_length(0.0, pieces if flat else [])  # time and memory grow with length: bounded
    # pieces of one rut mapped as separate features are cleaned as one rut, named by its
    # first piece; its source ids list every piece
    ids = list(layer.ids)
    pieces_of: dict[int, list[int]] = {}
    joined = [_joined(parts) for parts in local]
    for group in chain_features([None if j is None else j[0] for j in joined]):
        first = group[0]
        pieces_of[first] = group
        local[first] = [p for k in group for p in local[k]]
        joined[first] = None  # cleaned from the pieces' parts
        known = [a for a in (accuracies[k] for k in group) if a is not None]
        accuracies[first] = float(np.median(known)) if known else None
        ids[first] = ",".join(layer.ids[k] for k in group)
    if pieces_of:
        warnings.append(
            f"{sum(len(g) for g in pieces_of.values())} features are pieces of "
            f"{len(pieces_of)} ruts (end to end across short gaps) and were analysed as "
            "such: " + "; ".join(ids[k] for k in list(pieces_of)[:20])
            + (" ..." if len(pieces_of) > 20 else "")
        )
    merged = {k for g in pieces_of.values() for k in g[1:]}
    keys: list[int] = []
    lines: list[tuple[np.ndarray, np.ndarray]] = []
    for k in range(len(local)):
        if k in merged:
            continue
        line = _line_of(local[k], joined[k])
        if isinstance(line, str):
            bad.append((k, line))
        else:
            keys.append(k)
            lines.append(line)
    cleaned, least = clean_lines(lines, [accuracies[k] for k in keys], LEG_TURN_BASE, workers)
    for k, rut, turn in zip(keys, cleaned, least.tolist(), strict=True):
        if isinstance(rut, str):
            bad.append((k, rut))
            continue
        ruts[k] = rut
        legs.extend(split_into_legs(k, rut, accuracies[k], turn))
    bad.sort()
    pairing = choose_pairs([leg.track for leg in legs], [leg.rut for leg in legs], workers)
    leg_passes = assemble(pairing.pairs, legs)
    passes: list[PassRecord] = []
    group_first: dict[int, int] = {}
    # per input rut: pass group id, wheel, verdict, and whether motion follows its vertex order
    rut_info: dict[int, tuple[int, str, str, bool | None]] = {}
    # legs that fit a rut of a pair as well as its partner does: overlapping passes
    overlapping = {
        pairing.pairs[n][:2]: extra for n, extra in pairing.overlaps.items()
    }
    # the axle candidates and the records are measured in forked workers (one fork for both)
    state = {"leg_passes": leg_passes, "legs": legs, "ids": ids}
    with worker_pool(state, workers, 2 * len(leg_passes)) as run:
        units = list(enumerate(_axle_units(leg_passes, legs, run), start=1))
        made = run(_unit_record, units)
    for (n, unit), (record, labels) in zip(units, made, strict=True):
        lp = leg_passes[unit[0]]
        extra = [k for u in unit for k in overlapping.get(leg_passes[u].pair, [])]
        if extra:
            _mark_overlapping(record, labels, [legs[k].rut for k in extra], ids)
        record.pass_group = group_first.setdefault(lp.group, n)
        passes.append(record)
        if _estimates_disagree(record):
            warnings.append(
                f"Pass {n}: the steady-turn wheelbase ({record.wheelbase_turn_m:.2f} m) and the "
                f"fitted one ({record.wheelbase_m:.2f} m) differ by more than 25 %; check "
                "the ruts' pairing and noise."
            )
        for rut_k, (wheel, follows) in labels.items():
            if rut_k not in rut_info or (rut_info[rut_k][3] is None and follows is not None):
                rut_info[rut_k] = (record.pass_group, wheel, record.verdict, follows)
    unpaired_reason: dict[int, str] = {}
    for leg_index, reason in pairing.unpaired.items():
        rut_k = legs[leg_index].rut
        unpaired_reason.setdefault(rut_k, reason)
        if reason == "not_a_pair":
            unpaired_reason[rut_k] = reason
    ruts_out: list[RutRecord] = []
    for k, rut in ruts.items():
        if k in rut_info:
            pid, wheel, verdict, follows = rut_info[k]
            geom = rut.raw_xy[::-1] if follows is False else rut.raw_xy
            ruts_out.append(
                RutRecord(k + 1, pid, wheel, verdict, None, ids[k], rut.raw_length, geom)
            )
        else:
            ruts_out.append(
                RutRecord(
                    k + 1,
                    None,
                    "unassigned",
                    "unpaired",
                    unpaired_reason.get(k, "no_partner"),
                    ids[k],
                    rut.raw_length,
                    rut.raw_xy,
                )
            )
    for k, message in bad:
        xy = np.column_stack(frame.to_local(*np.concatenate(layer.parts[k]).T))
        ruts_out.append(
            RutRecord(
                k + 1, None, "unassigned", "unpaired", "degenerate_line", ids[k], 0.0, xy
            )
        )
        warnings.append(f"Feature {ids[k]}: {message}")
    ruts_out.sort(key=lambda r: r.rut_id)
    for fid, reason in layer.skipped:
        warnings.append(f"Feature {fid} skipped: {reason.replace('_', ' ')}.")
    metadata = _metadata(layer, options, frame, crs, list(ruts.values()), warnings, len(passes))
    return AnalysisResult(passes, ruts_out, frame, crs, metadata, warnings)


def _accuracies(layer: InputLayer, options: AnalyzeOptions) -> list[float | None]:
    n = len(layer)
    if options.accuracy_field is None:
        return [options.accuracy] * n
    if options.accuracy_field not in layer.fields:
        raise BadInput(
            f"No attribute {options.accuracy_field!r} for the accuracy; the layer has: "
            f"{', '.join(layer.fields) or 'none'}.",
            "Name one of those with --accuracy-field.",
        )
    out: list[float | None] = []
    for v in layer.fields[options.accuracy_field]:
        try:
            f = float(v)
        except (TypeError, ValueError):
            f = float("nan")
        out.append(f if np.isfinite(f) and f > 0 else options.accuracy)
    return out


def _metadata(
    layer: InputLayer,
    options: AnalyzeOptions,
    frame: LocalFrame,
    crs: pyproj.CRS,
    ruts: list[CleanRut],
    warnings: list[str],
    n_passes: int,
) -> dict[str, str]:
    sig = [r.sigma for r in ruts]
    est = [r.sigma for r in ruts if r.sigma_source == "estimated"]
    return {
        "tool": "rutwise",
        "version": __version__,
        "created_utc": _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat(),
        "input": os.path.basename(layer.path),
        "input_sha256": file_sha256(layer.path),
        "input_layer": layer.layer,
        "input_crs": crs.to_string(),
        "options": json.dumps({k: v for k, v in asdict(options).items() if v is not None}),
        "local_frame": json.dumps(frame.describe()),
        "ruts_read": str(len(layer)),
        "passes_found": str(n_passes),
        "noise_sigma_m": (f"median {np.median(sig):.4f}" if sig else "n/a")
        + (f" ({len(est)} of {len(sig)} estimated from the data)" if est else " (stated)"),
        "assumptions": GEAR_ASSUMPTION,
        "warnings": json.dumps(warnings),
        "caution": CAUTION,
    }


def read_input(path: str | os.PathLike[str], options: AnalyzeOptions = AnalyzeOptions()
               ) -> InputLayer:
    """The rut layer in ``path``: a vector layer as read, or the rut lines extracted from a
    drone raster (elevation model or rut mask) with the default extraction options."""
    from .raster_defaults import VECTOR_SUFFIXES

    # rasterio and scikit-image take a second to import: only for what may be a raster
    if Path(path).suffix.lower() not in VECTOR_SUFFIXES:
        from .raster import extract_ruts, is_raster

        if is_raster(path):
            return extract_ruts(path).as_input_layer()
    return read_layer(path, layer=options.layer, id_field=options.id_field)


def analyze_file(
    path: str | os.PathLike[str],
    options: AnalyzeOptions = AnalyzeOptions(),
    workers: int | None = None,
) -> AnalysisResult:
    """Read a layer (or extract one from a raster) from ``path`` and analyse it (``workers``
    as for :func:`analyze_layer`)."""
    return analyze_layer(read_input(path, options), options, workers)


def _target_crs(result: AnalysisResult, out_crs: str | None, geojson: bool) -> pyproj.CRS:
    if geojson:
        return pyproj.CRS.from_epsg(4326)
    if out_crs is None:
        return result.source_crs
    try:
        return pyproj.CRS.from_user_input(out_crs)
    except pyproj.exceptions.CRSError:
        raise CrsError(
            f"Unknown output CRS {out_crs!r}.",
            "Give an EPSG code such as EPSG:27700, or a WKT/PROJ definition.",
        ) from None


def _to_geoms(arrays: list[Array], frame: LocalFrame, crs: pyproj.CRS) -> np.ndarray:
    """Local lines as linestrings in ``crs``, transformed in one call (a call per line costs
    more than the work)."""
    if not arrays:
        return as_linestrings([])
    flat = np.concatenate(arrays)
    x, y = frame.from_local(flat[:, 0], flat[:, 1], crs)
    return as_linestrings(
        np.split(np.column_stack([x, y]), np.cumsum([len(a) for a in arrays])[:-1])
    )


def result_layers(result: AnalysisResult, crs: pyproj.CRS) -> list[OutputLayer]:
    """The ``passes`` and ``ruts`` layers with geometries in ``crs``."""

    def fields(records: list[Any], spec: dict[str, str]) -> dict[str, list[Any]]:
        return {name: [getattr(r, name) for r in records] for name in spec}

    passes = OutputLayer(
        "passes",
        _to_geoms([p.geometry for p in result.passes], result.frame, crs),
        fields(result.passes, PASS_FIELDS),
        PASS_FIELDS,
        "rutwise vehicle passes (rear-axle path). " + CAUTION,
    )
    ruts = OutputLayer(
        "ruts",
        _to_geoms([r.geometry for r in result.ruts], result.frame, crs),
        fields(result.ruts, RUT_FIELDS),
        RUT_FIELDS,
        "rutwise cleaned ruts. " + CAUTION,
    )
    return [passes, ruts]


def write_result(
    result: AnalysisResult, path: str | os.PathLike[str], out_crs: str | None = None
) -> list[Path]:
    """Write the result to a GeoPackage, or to GeoJSON when ``path`` ends in .geojson/.json.

    GeoJSON output is lon/lat WGS84 (RFC 7946): the passes go to ``path`` and the ruts to a
    sibling file ``<stem>.ruts.geojson``; both carry the run metadata.
    """
    target = Path(path)
    geojson = target.suffix.lower() in (".geojson", ".json")
    if not geojson and target.suffix.lower() != ".gpkg":
        raise BadInput(
            f"Unknown output type {target.suffix!r}.",
            "Name the output .gpkg (GeoPackage) or .geojson.",
        )
    crs = _target_crs(result, out_crs, geojson)
    layers = result_layers(result, crs)
    meta = with_layer_checksums(dict(result.metadata, output_crs=crs.to_string()), layers)
    if geojson:
        ruts_path = target.with_name(target.stem + ".ruts" + target.suffix)
        return [write_geojson(target, layers[0], meta), write_geojson(ruts_path, layers[1], meta)]
    return [write_geopackage(target, layers, crs.to_wkt(), meta)]
