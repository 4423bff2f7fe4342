"""A reduced, seeded run of the accuracy benchmark's scenarios (bench/accuracy.py), with
thresholds that catch a regression. The full run and its table live in bench/accuracy.md.

The simulator behind these scenarios is checked against published closed forms in
test_reference_kinematics.py; the property relied on is the kinematic bicycle model's (front
track = rear track + L * unit tangent in the travel direction; Finn, Mathematics Magazine 2004).
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.accuracy import run_case

# (path, noise sigma m, noise model) per vehicle: curved paths under each noise model
CURVED = [("slalom", 0.03, "white"), ("random", 0.03, "gnss"), ("s_curve", 0.01, "fragments")]
VEHICLES = ["bicycle", "motorcycle", "atv", "car", "pickup", "tractor"]


@pytest.fixture(scope="module")
def curved_cases():
    seed = 70_000
    out = []
    for vehicle in VEHICLES:
        for path, noise, model in CURVED:
            seed += 1
            out.append(run_case(vehicle, path, noise, seed, model))
    return out


def test_no_wrong_decided_direction(curved_cases):
    wrong = [c for c in curved_cases if c.verdict == "decided" and not c.right]
    # source: Finn 2004 (front = rear + L * tangent); a wrong `decided` is the worst output
    assert wrong == []


def test_most_curved_passes_are_decided(curved_cases):
    decided = sum(c.verdict == "decided" for c in curved_cases)
    assert decided >= 0.6 * len(curved_cases), f"{decided} of {len(curved_cases)}"


def test_wheelbase_error_median_and_p90(curved_cases):
    errors = [c.wb_err for c in curved_cases if c.wb_err is not None]
    assert len(errors) >= 0.6 * len(curved_cases)
    # common practice: wheelbase within a few percent is what tells a car from a pickup
    assert np.median(errors) <= 0.03
    assert np.percentile(errors, 90) <= 0.08


@pytest.mark.parametrize("vehicle", ["bicycle", "car", "tractor"])
def test_circles_are_never_confidently_decided(vehicle):
    for k, model in enumerate(("white", "gnss")):
        case = run_case(vehicle, "circle", 0.03, 71_000 + k + 10 * len(vehicle), model)
        # source: Finn 2004 / Tabachnikov arXiv math/0405445 - a circle fits both directions
        assert case.verdict != "decided" or max(case.confidence, 1 - case.confidence) < 0.99
