"""Whole layers: seeded scenes of many trails, several passes per trail, crossing trails and
distractors (geoops.trails), analysed end to end and compared with their truth.

The simulator behind the scenes is checked against published closed forms in
test_reference_kinematics.py; the property these tests rely on is the kinematic bicycle
model's (Finn, "Which Way Did You Say That Bicycle Went?", Mathematics Magazine 77(5), 2004):
the front track is the rear track plus one wheelbase along the rear track's tangent.
"""

from __future__ import annotations

import math
from functools import cache
from pathlib import Path

import numpy as np
import pyogrio
import pytest

from geoops.pipeline import analyze_file, write_result
from geoops.trails import Scene, SceneScore, drive_parallel, make_scene, score_output, write_scene

CRS = "EPSG:32633"
ORIGIN = (500_000.0, 5_500_000.0)


@cache
def _analysed(seed: int, trails: int, tmp: str) -> tuple[Scene, SceneScore, str]:
    # a fifth of the passes have one rut mapped in two pieces (geoops.chaining joins them)
    scene = make_scene(seed, trails, origin=ORIGIN, split_share=0.2)
    src = str(Path(tmp) / f"scene_{seed}.gpkg")
    out = str(Path(tmp) / f"scene_{seed}_out.gpkg")
    write_scene(scene, src, CRS)
    write_result(analyze_file(src), out)
    return scene, score_output(scene, out), out


def _by_feature(out: str) -> dict[int, dict]:
    """The ruts layer's record of each input feature (pieces of one rut share a record),
    keyed by the feature's position (write_scene makes the fid the position plus one)."""
    ruts = pyogrio.read_dataframe(out, layer="ruts")
    return {
        int(f) - 1: row
        for row in ruts.to_dict("records")
        for f in str(row["source_fids"]).split(",")
    }


@pytest.fixture(scope="module")
def scenes(tmp_path_factory):
    tmp = str(tmp_path_factory.mktemp("multipass"))
    return [_analysed(seed, 24, tmp) for seed in (21, 22)]


def test_passes_are_reconstructed_with_their_own_ruts(scenes):
    for _scene, score, _ in scenes:
        assert score.true_passes >= 30
        assert score.reconstructed_share >= 0.9, score


def test_no_distractor_is_forced_into_a_pass(scenes):
    for scene, score, out in scenes:
        assert score.distractors > 0
        assert score.distractors_in_passes == 0, score
        ruts = _by_feature(out)
        for k in scene.distractors():
            row = ruts[k]
            assert row["verdict"] == "unpaired"
            assert row["reason"] in {"no_partner", "not_a_pair"}


def test_every_decided_pass_points_the_right_way(scenes):
    decided = sum(score.decided for _, score, _ in scenes)
    right = sum(score.decided_right for _, score, _ in scenes)
    assert decided >= 30
    # the tangent property holds for every pass (Finn 2004): a decided direction is never wrong
    assert right == decided


def test_attributes_of_reconstructed_passes_match_the_vehicles(scenes):
    checked = 0
    for scene, _, out in scenes:
        ruts = _by_feature(out)
        passes = pyogrio.read_dataframe(out, layer="passes").set_index("pass_id")
        for p in scene.passes:
            ids = {ruts[k]["pass_id"] for k in p.lines}
            if len(ids) != 1 or any(isinstance(i, float) and math.isnan(i) for i in ids):
                continue
            row = passes.loc[int(next(iter(ids)))]
            if row["verdict"] != "decided":
                continue
            checked += 1
            assert row["wheel_tracks"] == (2 if p.vehicle.is_single_track else 4)
            # source: Finn 2004 - the fitted wheelbase is the tangent-to-front distance
            assert row["wheelbase_m"] == pytest.approx(p.vehicle.wheelbase, rel=0.1)
            if not p.vehicle.is_single_track:
                # the rear tracks are parallel curves one rear track width apart
                # (references.md: four-wheel vehicle, derived from the kinematic model)
                assert row["track_width_m"] == pytest.approx(p.vehicle.track_rear, rel=0.08)
            assert row["min_turn_radius_m"] > 0
    assert checked >= 20


def test_two_vehicles_side_by_side_in_opposite_directions_are_not_one_vehicle(tmp_path):
    """Two bicycles driving exact parallels 1 m apart, one each way: geometrically two sides
    of a 1 m-track vehicle with a bicycle's wheelbase, but a rigid vehicle's sides travel
    together, so their opposite evidence must not become one vehicle's direction."""
    from geoops.scenarios import BICYCLE, follows_path, mapped_lines
    from geoops.trails import SceneLine, ScenePass, _trail

    rng = np.random.default_rng(3)
    trail = _trail(rng, 90.0)
    scene = Scene()
    for k, (offset, back) in enumerate(((0.5, False), (-0.5, True))):
        sim = drive_parallel(trail, BICYCLE, offset, back)
        lines = mapped_lines(sim, 0.01, (0.3, 0.6), rng)
        idx = []
        for wheel, xy in lines.items():
            idx.append(len(scene.lines))
            path = sim.wheels()[wheel]
            scene.lines.append(
                SceneLine(xy + np.array(ORIGIN), k, wheel, "bicycle", follows_path(xy, path))
            )
        scene.passes.append(ScenePass(k, BICYCLE, 0, offset, back, tuple(idx)))
    src, out = str(tmp_path / "two.gpkg"), str(tmp_path / "two_out.gpkg")
    write_scene(scene, src, CRS)
    write_result(analyze_file(src), out)
    passes = pyogrio.read_dataframe(out, layer="passes")
    score = score_output(scene, out)
    # exact parallels at a plausible track width: either two passes, or one joined pass that
    # says its sides disagree; never one vehicle with a direction
    assert score.decided_right == score.decided
    joined = passes[passes["wheel_tracks"] == 4]
    assert (joined["verdict"] == "mixed").all()
    assert score.reconstructed == 2 or len(joined) == 1


def test_workers_give_the_same_result(tmp_path, monkeypatch):
    import geoops.parallel

    monkeypatch.setattr(geoops.parallel, "MIN_ITEMS_PER_WORKER", 4)
    monkeypatch.setattr(geoops.parallel, "MIN_ITEMS_PER_THREAD", 4)
    scene = make_scene(23, 10, origin=ORIGIN)
    src = str(tmp_path / "scene.gpkg")
    write_scene(scene, src, CRS)
    outs = []
    for workers in (1, 2):
        out = str(tmp_path / f"out_{workers}.gpkg")
        write_result(analyze_file(src, workers=workers), out)
        outs.append(out)
    for layer in ("passes", "ruts"):
        a, b = (pyogrio.read_dataframe(o, layer=layer) for o in outs)
        assert len(a) > 5
        assert a.drop(columns="geometry").equals(b.drop(columns="geometry"))
        assert a.geometry.geom_equals_exact(b.geometry, 0.0).all()


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_two_vehicles_on_one_line_come_out_mixed(tmp_path, seed):
    """Two bicycles ride the same line, one each way: one rear track for both, two front
    tracks (each one wheelbase along the rear tangent in its own direction, Finn 2004). Which
    front belongs to which ride, and so the direction, is beyond the geometry."""
    from geoops.scenarios import BICYCLE, mapped_lines
    from geoops.trails import SceneLine, _trail, drive_wandering

    rng = np.random.default_rng(seed)
    trail = _trail(rng, 90.0)
    rides = [drive_wandering(trail, BICYCLE, 0.0, 0.2, 35.0, 0.3, back) for back in (False, True)]
    la, lb = (mapped_lines(r, 0.02, (0.3, 0.6), rng) for r in rides)
    scene = Scene()
    for wheel, xy in (("rear", la["rear"]), ("front", la["front"]), ("front", lb["front"])):
        scene.lines.append(SceneLine(xy + np.array(ORIGIN), 0, wheel, "bicycle", None))
    src, out = str(tmp_path / "one_line.gpkg"), str(tmp_path / "one_line_out.gpkg")
    write_scene(scene, src, CRS)
    write_result(analyze_file(src), out)
    passes = pyogrio.read_dataframe(out, layer="passes")
    ruts = pyogrio.read_dataframe(out, layer="ruts")
    assert list(passes["verdict"]) == ["mixed"]
    assert passes["rut_ids"].iloc[0] == "1,2,3"
    assert set(ruts["verdict"]) == {"mixed"}


def test_a_rut_mapped_in_pieces_is_one_rut(tmp_path):
    """The front track of a car mapped as two features (lost on hard ground for 3 m): the
    pieces lie end to end, not alongside each other, and the rear track runs past the gap at
    the same distance from both, so they are one rut of one pass."""
    from geoops.scenarios import CAR, fragment, mapped_lines
    from geoops.trails import SceneLine, _trail, drive_wandering

    for seed in range(4):
        rng = np.random.default_rng(seed)
        sim = drive_wandering(_trail(rng, 90.0), CAR, 0.0, 0.2, 35.0, 0.3, False)
        lines = mapped_lines(sim, 0.02, (0.3, 0.6), rng)
        scene = Scene()
        for xy in [lines["rear_left"], *fragment(lines["front_left"], rng, 1, 3.0)]:
            scene.lines.append(SceneLine(xy + np.array(ORIGIN), 0, "", "car", None))
        src = str(tmp_path / f"pieces_{seed}.gpkg")
        write_scene(scene, src, CRS)
        result = analyze_file(src)
        assert [p.verdict for p in result.passes] == ["decided"]
        assert result.passes[0].source_fids.split(",") == ["1", "2", "3"]
        assert len(result.ruts) == 2  # the pieces are one rut, listing both features


def test_only_pairs_that_come_together_reach_the_solver():
    """Front and rear tracks of one side coincide wherever the vehicle runs straight; the
    left and right tracks of one axle stay a track width apart (references.md: four-wheel
    vehicle, derived from the kinematic bicycle model)."""
    from geoops.clean import clean_rut
    from geoops.pairing import candidate_pairs
    from geoops.scenarios import CAR, mapped_lines
    from geoops.trails import _trail, drive_wandering

    rng = np.random.default_rng(9)
    sim = drive_wandering(_trail(rng, 80.0), CAR, 0.0, 0.2, 35.0, 0.3, False)
    lines = mapped_lines(sim, 0.02, (0.3, 0.6), rng)
    names = list(lines)
    ruts = [clean_rut([lines[n]]) for n in names]
    verdicts = {
        frozenset((names[c.i], names[c.j])): c.may_be_front_rear(ruts)
        for c in candidate_pairs(ruts)
    }
    assert verdicts[frozenset(("rear_left", "front_left"))]
    assert verdicts[frozenset(("rear_right", "front_right"))]
    assert not verdicts[frozenset(("rear_left", "rear_right"))]
    assert not verdicts[frozenset(("front_left", "front_right"))]



def test_spacing_profiles_match_a_direct_measurement(monkeypatch):
    """The compiled spacing profile of candidate pairs against shapely distances and numpy's
    percentile, measured from the shorter rut of each pair; the same in threads."""
    import shapely

    import geoops.parallel
    from geoops.clean import clean_rut
    from geoops.pairing import NEAR_QUANTILE, NEIGHBOUR_DISTANCE_M, candidate_pairs

    scene = make_scene(11, 8)
    ruts = [clean_rut([line.xy]) for line in scene.lines]
    cands = candidate_pairs(ruts)
    assert len(cands) >= 5
    monkeypatch.setattr(geoops.parallel, "MIN_ITEMS_PER_THREAD", 2)
    assert candidate_pairs(ruts, workers=3) == cands
    for c in cands:
        a, b = sorted((ruts[c.i], ruts[c.j]), key=lambda r: r.length)
        pts = a.xy[:: max(len(a.xy) // 200, 1)]
        # source: shapely 2.x distance (GEOS) and numpy.percentile (linear interpolation)
        d = shapely.distance(shapely.points(pts), shapely.LineString(b.xy))
        within = d <= NEIGHBOUR_DISTANCE_M
        assert c.shared == pytest.approx(float(np.mean(within)), abs=1e-12)
        assert c.near == pytest.approx(float(np.percentile(d[within], NEAR_QUANTILE)), abs=1e-9)
