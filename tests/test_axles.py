"""Four-wheeled vehicles seen as four ruts: the two sides join into one pass.

The physics relied on: every point of a rigid axle moves along the heading, so rear-left and
rear-right tracks are parallel curves one rear track width apart, and each side's front track
is its rear track plus one wheelbase along the tangent, shifted sideways by half the
difference of the track widths (references.md: four-wheel vehicle, derived from the kinematic
bicycle model; Finn, Mathematics Magazine 2004). The simulator is checked against published
closed forms in test_reference_kinematics.py.
"""

from __future__ import annotations

import numpy as np
import pyproj
import pytest

from geoops.io import InputLayer
from geoops.kinematics import simulate_steering
from geoops.pipeline import analyze_layer
from geoops.scenarios import ATV, CAR, PICKUP, TRACTOR, mapped_lines, random_smooth, slalom

TO_LONLAT = pyproj.Transformer.from_crs(
    "+proj=aeqd +lat_0=55.4 +lon_0=-3.0 +datum=WGS84", "EPSG:4326", always_xy=True
)


def _four_ruts(seed: int, vehicle):
    rng = np.random.default_rng(seed)
    if seed % 2:
        steer = slalom(60.0, 0.02, rng.uniform(8, 20), rng.uniform(12, 25))
    else:
        steer = random_smooth(60.0, 0.02, rng, 20.0, 4.0)
    sim = simulate_steering(vehicle, steer, 0.02)
    lines = mapped_lines(sim, 0.02, (0.3, 0.6), rng)
    keys = list(lines)
    rng.shuffle(keys)
    parts = []
    for k in keys:
        x, y = TO_LONLAT.transform(lines[k][:, 0], lines[k][:, 1])
        parts.append([np.column_stack([x, y])])
    ids = [str(i) for i in range(len(keys))]
    layer = InputLayer("mem", "four", "GeoJSON", "EPSG:4326", ids, parts, [None] * len(keys))
    return sim, keys, analyze_layer(layer)


@pytest.mark.parametrize(
    ("seed", "vehicle", "cls"),
    [(0, CAR, "car"), (1, PICKUP, "pickup"), (2, ATV, "atv"), (3, TRACTOR, "tractor")],
)
def test_four_ruts_make_one_pass_with_track_width(seed, vehicle, cls):
    sim, keys, result = _four_ruts(seed, vehicle)
    assert len(result.passes) == 1
    p = result.passes[0]
    assert p.wheel_tracks == 4
    assert p.verdict == "decided"
    # source: kinematic bicycle model - rear tracks are parallel curves one track apart
    assert p.track_width_m == pytest.approx(vehicle.track_rear, abs=0.05)
    assert p.wheelbase_m == pytest.approx(vehicle.wheelbase, rel=0.04)
    # common practice: dimension ranges of geoops.vehicles.VEHICLE_CLASSES
    assert p.vehicle_class == cls
    # every rut labelled with its own wheel
    assert {keys[r.rut_id - 1]: r.wheel for r in result.ruts} == {k: k for k in keys}


def test_axle_pass_geometry_is_the_rear_axle_midpoint_path():
    sim, keys, result = _four_ruts(4, CAR)
    (p,) = result.passes
    x, y = TO_LONLAT.transform(sim.rear[:, 0], sim.rear[:, 1])
    tx, ty = result.frame.to_local(x, y)
    truth = np.column_stack([tx, ty])
    d = np.min(np.hypot(*(p.geometry[:, None, :] - truth[None, :, :]).transpose(2, 0, 1)), axis=1)
    assert np.median(d) < 0.05
    # drawn in the direction of travel
    first = int(np.argmin(np.hypot(*(truth - p.geometry[0]).T)))
    last = int(np.argmin(np.hypot(*(truth - p.geometry[-1]).T)))
    assert first < last


def _blossom(costs):
    import networkx as nx

    g = nx.Graph()
    top = max(costs.values()) + 1.0
    for (a, b), c in costs.items():
        g.add_edge(a, b, weight=top - c)
    return sorted(tuple(sorted(e)) for e in nx.max_weight_matching(g, maxcardinality=True))


@pytest.mark.parametrize("seed", range(40))
def test_axle_choice_is_the_maximum_cardinality_minimum_cost_matching(seed):
    # source: networkx 3.x max_weight_matching (maxcardinality=True), Edmonds' blossom
    # algorithm: small groups are searched exhaustively, large ones handed to networkx
    from geoops.axles import SEARCH_MAX_EDGES, choose_axles

    rng = np.random.default_rng(seed)
    n_nodes = int(rng.integers(3, 12))
    n_edges = int(rng.integers(2, 2 * SEARCH_MAX_EDGES))
    costs = {}
    for _ in range(n_edges):
        a, b = sorted(rng.choice(n_nodes, 2, replace=False).tolist())
        costs[(a, b)] = float(rng.uniform(0.0, 2.0))
    expected = _blossom(costs)
    got = choose_axles(costs)
    assert len(got) == len(expected)
    assert sum(costs[e] for e in got) == pytest.approx(sum(costs[e] for e in expected), abs=1e-12)
    assert got == expected  # continuous costs: the optimum is unique
