"""Accuracy benchmark of the pair solver on seeded simulated passes.

Prints a table and writes bench/accuracy.md: direction precision and share decided by noise
level, vehicle and direction-signal band; wheelbase error (median, 90th percentile); expected
calibration error of `confidence`; verdicts on circles and straights.

Direction signal (for scoring): on the noise-free map geometry, the RMS distance by which the
best wrong-direction hypothesis (its wheelbase refitted) misses the other track. Signal / noise
sigma says how decidable a pass is.

Run: ``.venv/bin/python bench/accuracy.py [--reps N]`` (default 4 per cell).
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from geoops.clean import clean_rut
from geoops.inference import solve_pair
from geoops.kinematics import SimulatedPass, Vehicle, simulate_steering
from geoops.scenarios import (
    PRESETS,
    circle,
    mapped_lines,
    random_smooth,
    s_curve,
    single_turn,
    slalom,
    straight,
)

STEP = 0.02
NOISES = (0.01, 0.03, 0.1, 0.3)
PATHS = ("slalom", "s_curve", "random", "single_turn", "circle", "straight")


@dataclass
class Case:
    vehicle: str
    path: str
    noise: float
    verdict: str
    right: bool | None
    confidence: float
    wb_err: float | None
    signal: float


def _steer(path: str, vehicle: Vehicle, rng: np.random.Generator) -> np.ndarray:
    length = float(rng.uniform(50, 80))
    lock = min(vehicle.max_steer_deg, 30.0)
    if path == "slalom":
        return slalom(
            length,
            STEP,
            rng.uniform(6, lock * 0.7),
            rng.uniform(10, 30),
            phase_deg=rng.uniform(0, 360),
        )
    if path == "s_curve":
        return s_curve(
            length, STEP, rng.uniform(8, lock * 0.8), rng.uniform(8, 16), ramp_m=rng.uniform(3, 6)
        )
    if path == "random":
        return random_smooth(length, STEP, rng, lock * 0.8, rng.uniform(2, 6))
    if path == "single_turn":
        return single_turn(
            length, STEP, rng.uniform(10, lock * 0.8), rng.uniform(8, 20), ramp_m=rng.uniform(2, 5)
        )
    if path == "circle":
        return circle(length, STEP, rng.uniform(10, lock * 0.8))
    return straight(length, STEP)


def _keys(sim: SimulatedPass) -> tuple[str, str]:
    return ("rear", "front") if sim.vehicle.is_single_track else ("rear_left", "front_left")


def _follows(line: np.ndarray, path: np.ndarray) -> bool:
    return bool(np.hypot(*(line[0] - path[0])) < np.hypot(*(line[-1] - path[0])))


def _signal(sim: SimulatedPass) -> float:
    rear, front = _keys(sim)
    lines = mapped_lines(
        sim, 0.0, 0.25, np.random.default_rng(0), reverse_prob=0.0, which=[rear, front]
    )
    res = solve_pair(clean_rut([lines[rear]], 0.001), clean_rut([lines[front]], 0.001))
    wrong = [f.raw_mse for f in res.fits if not f.follows_first and np.isfinite(f.mse)]
    return float(np.sqrt(min(wrong))) if wrong else 0.0


def run_case(vehicle: str, path: str, noise: float, seed: int) -> Case:
    rng = np.random.default_rng(seed)
    v = PRESETS[vehicle]
    sim = simulate_steering(v, _steer(path, v, rng), STEP)
    rear, front = _keys(sim)
    lines = mapped_lines(sim, noise, (0.3, 0.7), rng, which=[rear, front])
    keys = [rear, front] if rng.random() < 0.5 else [front, rear]
    res = solve_pair(*(clean_rut([lines[k]]) for k in keys))
    truth = _follows(lines[keys[0]], sim.wheels()[keys[0]])
    right = None if res.verdict != "decided" else res.follows_first == truth
    wb_err = None if res.wheelbase is None else abs(res.wheelbase / v.wheelbase - 1)
    return Case(
        vehicle,
        path,
        noise,
        res.verdict,
        right,
        res.p_follows_first if truth else 1 - res.p_follows_first,
        wb_err,
        _signal(sim),
    )


def _ece(cases: list[Case]) -> float:
    """Expected calibration error of the reported confidence among decided passes."""
    dec = [c for c in cases if c.verdict == "decided"]
    if not dec:
        return float("nan")
    conf = np.array([max(c.confidence, 1 - c.confidence) for c in dec])
    right = np.array([bool(c.right) for c in dec], dtype=float)
    bins = np.linspace(0.5, 1.0, 6)
    idx = np.clip(np.digitize(conf, bins) - 1, 0, len(bins) - 2)
    err = 0.0
    for b in range(len(bins) - 1):
        m = idx == b
        if m.any():
            err += m.mean() * abs(conf[m].mean() - right[m].mean())
    return float(err)


def summarise(cases: list[Case]) -> list[str]:
    rows = [
        "| group | cases | decided | decided right | precision | wb median err | wb p90 err |",
        "| --- | --- | --- | --- | --- | --- | --- |",
    ]

    def row(name: str, sel: list[Case]) -> None:
        dec = [c for c in sel if c.verdict == "decided"]
        right = [c for c in dec if c.right]
        errs = [c.wb_err for c in sel if c.wb_err is not None]
        prec = f"{len(right) / len(dec):.3f}" if dec else "-"
        med = f"{np.median(errs) * 100:.1f} %" if errs else "-"
        p90 = f"{np.percentile(errs, 90) * 100:.1f} %" if errs else "-"
        rows.append(
            f"| {name} | {len(sel)} | {len(dec) / len(sel):.2f} | "
            f"{len(right) / len(sel):.2f} | {prec} | {med} | {p90} |"
        )

    moving = [c for c in cases if c.path not in ("circle", "straight")]
    row("all curved paths", moving)
    for n in NOISES:
        row(f"noise {n} m", [c for c in moving if c.noise == n])
    for v in PRESETS:
        row(f"vehicle {v}", [c for c in moving if c.vehicle == v])
    for lo, hi in ((0, 1), (1, 3), (3, np.inf)):
        row(f"signal/noise {lo}-{hi}", [c for c in moving if lo <= c.signal / c.noise < hi])
    for p in PATHS:
        row(f"path {p}", [c for c in cases if c.path == p])
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=4)
    ap.add_argument("--out", default=str(Path(__file__).with_name("accuracy.md")))
    args = ap.parse_args()
    t0 = time.perf_counter()
    cases = []
    seed = 0
    for vehicle in PRESETS:
        for path in PATHS:
            for noise in NOISES:
                for _ in range(args.reps):
                    seed += 1
                    cases.append(run_case(vehicle, path, noise, seed))
    took = time.perf_counter() - t0
    rows = summarise(cases)
    circles = [c.verdict for c in cases if c.path == "circle"]
    straights = [c.verdict for c in cases if c.path == "straight"]
    conf95 = [
        c for c in cases if c.verdict == "decided" and max(c.confidence, 1 - c.confidence) >= 0.95
    ]
    wrong95 = sum(1 for c in conf95 if not c.right)
    lines = [
        "# Accuracy benchmark (bench/accuracy.py)",
        "",
        f"{len(cases)} seeded cases ({args.reps} per vehicle x path x noise), {took:.0f} s. "
        "One front/rear pair per case (a four-wheeled vehicle seen from its left side), "
        "irregular vertex spacing 0.3-0.7 m, white vertex noise, random vertex order.",
        "",
        *rows,
        "",
        f"- Expected calibration error of confidence (decided): {_ece(cases):.3f}",
        f"- Decided with confidence >= 0.95: {len(conf95)}, wrong: {wrong95}",
        f"- Circles: {', '.join(f'{v} {circles.count(v)}' for v in sorted(set(circles)))}",
        f"- Straights: {', '.join(f'{v} {straights.count(v)}' for v in sorted(set(straights)))}",
        "",
        "Not yet covered (issue 4): correlated GNSS noise, fragments, merged stretches, "
        "four-wheel evidence, three-point turns.",
    ]
    text = "\n".join(lines) + "\n"
    print(text)
    Path(args.out).write_text(text)


if __name__ == "__main__":
    main()
