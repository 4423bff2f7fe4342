"""Seeded multi-pass scenes: trails driven by several vehicles, crossing trails and distractor
lines, with the truth of every line.

For benchmarks (bench/throughput.py), the multi-pass tests and the demo layer; like every
simulated scene it is never the reference that proves the engine right (the simulator itself
is checked against published closed forms in tests/test_reference_kinematics.py).

A trail is the rear-axle path of a reference drive (seeded smooth steering). Each pass on a
trail drives a parallel of it, at its own lateral offset and in either direction: the offset
curve of a circular arc is a circular arc, so the pass is simulated exactly by
:func:`geoops.kinematics.simulate_steering` with the offset curve's curvature
``k / (1 - d k)`` and step ``ds (1 - d k)``, and its front tracks follow from the physics.
Drivers wander slowly about their chosen line (:func:`drive_wandering`), and passes on one
trail keep their ruts apart (at least :data:`MIN_RUT_GAP_M` apart rut to rut), so the
geometry can separate them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .kinematics import SimulatedPass, Vehicle, simulate_steering
from .scenarios import PRESETS, follows_path, fragment, mapped_lines, random_smooth, slalom

FloatArray = np.ndarray

#: metres of rear travel per simulation step
SIM_STEP_M = 0.05
#: reference wheelbase of the trail drive, metres (any value: only the path is kept)
_REF = Vehicle(2.5, name="reference")
#: smallest distance between ruts of two passes on one trail, metres; closer ruts would be
#: mapped as one line
MIN_RUT_GAP_M = 0.5
#: largest lateral offset of a pass from its trail's centre, metres (half a trail's width)
MAX_OFFSET_M = 2.0
#: range of a driver's slow wander about the chosen line, metres (no two drives of a trail
#: are exact parallels)  # common practice
WANDER_M = (0.15, 0.35)
#: distractor kinds: straight fences, meandering footpaths and drainage lines, and a lone
#: single track (one rut of a pass whose partner was never mapped)
DISTRACTOR_KINDS = ("fence", "footpath", "drain", "lone_track")


@dataclass(frozen=True)
class SceneLine:
    """One mapped line: its vertices, the pass it belongs to (-1 for a distractor), the wheel,
    the kind (vehicle name or distractor kind), and whether its vertex order is the travel
    direction (None for distractors)."""

    xy: FloatArray = field(repr=False)
    pass_index: int
    wheel: str
    kind: str
    follows: bool | None


@dataclass(frozen=True)
class ScenePass:
    """One simulated pass: vehicle, trail, offset, whether it drove the trail backwards, and
    the positions of its lines in :attr:`Scene.lines`."""

    index: int
    vehicle: Vehicle
    trail: int
    offset_m: float
    backwards: bool
    lines: tuple[int, ...]


@dataclass
class Scene:
    """Lines (in a projected CRS's metres) and the passes they came from."""

    lines: list[SceneLine] = field(default_factory=list)
    passes: list[ScenePass] = field(default_factory=list)

    @property
    def total_length_m(self) -> float:
        return float(sum(np.hypot(*np.diff(ln.xy, axis=0).T).sum() for ln in self.lines))

    def distractors(self) -> list[int]:
        return [k for k, ln in enumerate(self.lines) if ln.pass_index < 0]


def _rotation(angle: float) -> FloatArray:
    c, s = math.cos(angle), math.sin(angle)
    return np.array([[c, -s], [s, c]])


def _trail(rng: np.random.Generator, length: float) -> SimulatedPass:
    """The reference drive of one trail, starting at the origin heading east."""
    if rng.random() < 0.5:
        steer = slalom(length, SIM_STEP_M, float(rng.uniform(8, 18)), float(rng.uniform(14, 30)),
                       phase_deg=float(rng.uniform(0, 360)))
    else:
        steer = random_smooth(length, SIM_STEP_M, rng, 18.0, float(rng.uniform(3, 8)))
    return simulate_steering(_REF, steer, SIM_STEP_M)


def drive_parallel(trail: SimulatedPass, vehicle: Vehicle, offset_m: float,
                   backwards: bool) -> SimulatedPass:
    """``vehicle`` driving the parallel of ``trail``'s rear path at ``offset_m`` (left
    positive), in the trail's direction or ``backwards``: exact, since the parallel of an arc
    is an arc (curvature ``k / (1 - d k)``, length ``ds (1 - d k)``).

    Raises
    ------
    ValueError
        When the offset reaches a bend's centre (the parallel would have a cusp).
    """
    kappa = np.diff(trail.heading) / SIM_STEP_M  # heading change per metre: the curvature
    shrink = 1.0 - offset_m * kappa
    if np.any(shrink <= 0.05):
        raise ValueError("offset beyond a bend's centre")
    return _drive_curvature(vehicle, kappa / shrink, SIM_STEP_M * shrink,
                            _pose_at(trail, offset_m, 0), _pose_at(trail, offset_m, -1),
                            backwards)


def _pose_at(trail: SimulatedPass, offset_m: float, i: int) -> tuple[float, float, float]:
    h = float(trail.heading[i])
    x, y = trail.rear[i] + offset_m * np.array([-math.sin(h), math.cos(h)])
    return float(x), float(y), h


def _drive_curvature(vehicle: Vehicle, kappa: FloatArray, ds: FloatArray,
                     first: tuple[float, float, float], last: tuple[float, float, float],
                     backwards: bool) -> SimulatedPass:
    """Drive a path given by its curvature per step, from ``first`` (or, ``backwards``, from
    ``last`` turned round, along the reversed steps with the curvature's sign flipped)."""
    if not backwards:
        return simulate_steering(vehicle, np.arctan(vehicle.wheelbase * kappa), ds, start=first)
    x, y, h = last
    return simulate_steering(vehicle, np.arctan(-vehicle.wheelbase * kappa[::-1]), ds[::-1],
                             start=(x, y, h + math.pi))


def drive_wandering(trail: SimulatedPass, vehicle: Vehicle, offset_m: float,
                    wander_m: float, wave_m: float, phase: float,
                    backwards: bool) -> SimulatedPass:
    """Like :func:`drive_parallel`, with a driver who wanders about the offset by up to
    ``wander_m`` in a wave ``wave_m`` long: the wanted line is built from the trail, its
    curvature measured per step, and the vehicle driven along it (the rear path is then exact
    to the model and follows the wanted line to well within a centimetre over a pass)."""
    s = trail.s
    d = offset_m + wander_m * np.sin(2.0 * math.pi * s / wave_m + phase)
    normal = np.column_stack([-np.sin(trail.heading), np.cos(trail.heading)])
    line = trail.rear + d[:, None] * normal
    step = np.diff(line, axis=0)
    ds = np.hypot(step[:, 0], step[:, 1])
    if np.any(ds <= 0.2 * SIM_STEP_M):
        raise ValueError("offset beyond a bend's centre")
    heading = np.unwrap(np.arctan2(step[:, 1], step[:, 0]))
    # heading at the poses (mean of the neighbouring steps' chords), turned per step
    pose_h = np.concatenate([[heading[0]], 0.5 * (heading[1:] + heading[:-1]), [heading[-1]]])
    kappa = np.diff(pose_h) / ds
    first = (float(line[0, 0]), float(line[0, 1]), float(pose_h[0]))
    last = (float(line[-1, 0]), float(line[-1, 1]), float(pose_h[-1]))
    return _drive_curvature(vehicle, kappa, ds, first, last, backwards)


def _offsets(rng: np.random.Generator, vehicles: list[Vehicle]) -> list[float] | None:
    """Lateral offsets for passes sharing a trail, their ruts at least MIN_RUT_GAP_M apart."""
    for _ in range(50):
        d = rng.uniform(-MAX_OFFSET_M, MAX_OFFSET_M, len(vehicles))
        ruts = [
            (d[i] + side * 0.5 * v.track_rear, i)
            for i, v in enumerate(vehicles)
            for side in ((-1, 1) if not v.is_single_track else (0,))
        ]
        ruts += [
            (d[i] + side * 0.5 * v.track_front, i)
            for i, v in enumerate(vehicles)
            for side in ((-1, 1) if not v.is_single_track else ())
        ]
        ok = all(
            abs(a - b) >= MIN_RUT_GAP_M + 2 * WANDER_M[1]
            for x, (a, i) in enumerate(ruts)
            for (b, j) in ruts[x + 1 :]
            if i != j
        )
        if ok:
            return [float(x) for x in d]
    return None


def _distractor(rng: np.random.Generator, kind: str, centre: FloatArray) -> FloatArray:
    start = centre + rng.uniform(-50, 50, 2)
    direction = rng.normal(size=2)
    direction /= np.hypot(*direction)
    length = float(rng.uniform(60, 160))
    n = int(length / rng.uniform(1.0, 3.0)) + 2
    t = np.linspace(0.0, 1.0, n)[:, None]
    xy = start + t * length * direction
    if kind != "fence":
        normal = np.array([-direction[1], direction[0]])
        xy = xy + normal * (rng.uniform(1, 4) * np.sin(t * rng.uniform(4, 12)))
    return np.asarray(xy + rng.normal(0.0, 0.05, xy.shape))


def make_scene(
    seed: int,
    n_trails: int,
    *,
    passes_per_trail: tuple[int, int] = (1, 3),
    crossing_share: float = 0.3,
    distractors_per_trail: float = 0.35,
    noise_m: float = 0.03,
    spacing_m: tuple[float, float] = (0.5, 1.5),
    cell_m: float = 150.0,
    origin: tuple[float, float] = (0.0, 0.0),
    split_share: float = 0.0,
) -> Scene:
    """A seeded scene of ``n_trails`` trails on a grid of ``cell_m`` cells.

    Each trail carries 1-3 passes (vehicles drawn from the presets, either direction); a
    share of the cells hold a second trail crossing the first; distractors (fences,
    footpaths, drainage lines, lone single tracks) are scattered over the cells, crossing the
    trails. Lines come out in random vertex order with ``noise_m`` per-axis vertex noise.
    A ``split_share`` of the passes has one rut mapped in two pieces, 2-6 m apart (lost on
    hard ground), each its own feature.
    """
    rng = np.random.default_rng(seed)
    scene = Scene()
    vehicles = list(PRESETS.values())
    side = max(int(math.ceil(math.sqrt(n_trails / (1.0 + crossing_share)))), 1)
    cell = 0
    trail_no = 0
    while trail_no < n_trails:
        gx, gy = divmod(cell, side)
        centre = np.array(origin) + (np.array([gx, gy]) + 0.5) * cell_m
        cell += 1
        angles = [float(rng.uniform(0, 2 * math.pi))]
        if rng.random() < crossing_share and trail_no + 1 < n_trails:
            angles.append(angles[0] + float(rng.uniform(math.radians(50), math.radians(130))))
        for angle in angles:
            length = float(rng.uniform(70, 120))
            trail = _trail(rng, length)
            mid = trail.rear[len(trail.rear) // 2]
            rot = _rotation(angle)
            k = int(rng.integers(passes_per_trail[0], passes_per_trail[1] + 1))
            chosen = [vehicles[int(i)] for i in rng.integers(0, len(vehicles), k)]
            offsets = _offsets(rng, chosen)
            if offsets is None:
                chosen, offsets = chosen[:1], [0.0]
            for v, d in zip(chosen, offsets, strict=True):
                try:
                    sim = drive_wandering(trail, v, d, float(rng.uniform(*WANDER_M)),
                                          float(rng.uniform(25.0, 50.0)),
                                          float(rng.uniform(0, 2 * math.pi)),
                                          bool(rng.random() < 0.5))
                except ValueError:
                    continue
                lines = mapped_lines(sim, noise_m, spacing_m, rng)
                wheels = sim.wheels()
                split = str(rng.choice(list(lines))) if rng.random() < split_share else None
                idx = []
                for wheel, xy in lines.items():
                    follows = follows_path(xy, wheels[wheel])
                    placed = (xy - mid) @ rot.T + centre
                    pieces = [placed]
                    if wheel == split:
                        pieces = fragment(placed, rng, 1, float(rng.uniform(2.0, 6.0)))
                    for piece in pieces:
                        idx.append(len(scene.lines))
                        scene.lines.append(SceneLine(piece, len(scene.passes), wheel, v.name,
                                                     follows))
                scene.passes.append(ScenePass(len(scene.passes), v, trail_no, d,
                                              not follows_path(sim.rear, trail.rear), tuple(idx)))
            trail_no += 1
        n_d = int(rng.poisson(distractors_per_trail * len(angles)))
        for _ in range(n_d):
            kind = str(rng.choice(DISTRACTOR_KINDS))
            if kind == "lone_track":
                trail = _trail(rng, float(rng.uniform(40, 80)))
                xy = mapped_lines(trail, noise_m, spacing_m, rng, which=["rear"])["rear"]
                xy = (xy - xy[len(xy) // 2]) @ _rotation(float(rng.uniform(0, 6.3))).T
                xy = xy + centre + rng.uniform(-40, 40, 2)
            else:
                xy = _distractor(rng, kind, centre)
            scene.lines.append(SceneLine(xy, -1, "none", kind, None))
    return scene


def write_scene(scene: Scene, path: str, crs: str, layer: str = "ruts") -> None:
    """Write the scene's lines as a GeoPackage layer (fields: kind; the truth stays out of
    the file so that nothing downstream can peek at it)."""
    import shapely
    from pyogrio.raw import write as raw_write

    geoms = shapely.to_wkb(np.array([shapely.LineString(ln.xy) for ln in scene.lines],
                                    dtype=object))
    kinds = np.array([ln.kind if ln.pass_index < 0 else "rut" for ln in scene.lines],
                     dtype=object)
    raw_write(path, geoms, [kinds], ["kind"], layer=layer, driver="GPKG", crs=crs,
              geometry_type="LineString")


@dataclass(frozen=True)
class SceneScore:
    """How an analysis of a scene compares with its truth.

    ``reconstructed``: true passes found as one output pass with exactly their ruts.
    ``distractors_in_passes``: distractor lines that ended up inside a pass.
    ``decided`` / ``decided_right``: output passes decided, and those whose every rut is
    oriented in the true travel direction. ``verdicts``: output passes per verdict.
    """

    true_passes: int
    reconstructed: int
    distractors: int
    distractors_in_passes: int
    decided: int
    decided_right: int
    verdicts: dict[str, int]

    @property
    def reconstructed_share(self) -> float:
        return self.reconstructed / max(self.true_passes, 1)

    @property
    def precision(self) -> float:
        return self.decided_right / self.decided if self.decided else float("nan")


def score_output(scene: Scene, path: str) -> SceneScore:
    """Compare the ``passes`` and ``ruts`` layers written for ``scene`` with the truth.

    Input features are named in ``source_fids`` by their GeoPackage fid, which
    :func:`write_scene` makes the line's position plus one; a rut record lists every piece it
    was made of."""
    import shapely
    from pyogrio.raw import read as raw_read

    def columns(layer: str) -> tuple[dict[str, Any], Any]:
        meta, _, wkb, values = raw_read(path, layer=layer)
        return dict(zip(meta["fields"], values, strict=True)), wkb

    ruts, rut_wkb = columns("ruts")
    passes, _ = columns("passes")
    by_pass: dict[int, set[int]] = {}
    pieces: list[tuple[list[int], FloatArray]] = []
    for fids, pid, wkb in zip(ruts["source_fids"], ruts["pass_id"], rut_wkb, strict=True):
        lines = [int(f) - 1 for f in str(fids).split(",")]
        pieces.append((lines, shapely.get_coordinates(shapely.from_wkb(wkb))))
        if pid is not None and not (isinstance(pid, float) and math.isnan(pid)):
            by_pass.setdefault(int(pid), set()).update(lines)
    found = {frozenset(v) for v in by_pass.values()}
    reconstructed = sum(frozenset(p.lines) in found for p in scene.passes)
    in_pass = {k for v in by_pass.values() for k in v}
    distractors = scene.distractors()
    record_of = {k: n for n, (lines, _) in enumerate(pieces) for k in lines}
    decided = right = 0
    verdicts: dict[str, int] = {}
    for pid, verdict in zip(passes["pass_id"], passes["verdict"], strict=True):
        verdicts[str(verdict)] = verdicts.get(str(verdict), 0) + 1
        if verdict != "decided":
            continue
        decided += 1
        ok = True
        for k in by_pass.get(int(pid), ()):
            line = scene.lines[k]
            out = pieces[record_of[k]][1]
            # the output line runs in the travel direction: it meets the piece's first vertex
            # before its last exactly when the piece was drawn in the travel direction
            near = [int(np.argmin(np.hypot(*(out - v).T))) for v in (line.xy[0], line.xy[-1])]
            ok &= line.follows is not None and (near[0] < near[1]) == line.follows
        right += ok
    return SceneScore(len(scene.passes), reconstructed, len(distractors),
                      len(in_pass.intersection(distractors)), decided, right, verdicts)
