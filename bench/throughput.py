"""Throughput benchmark: a whole `rutwise analyze` of a large seeded layer.

Generates a seeded layer of many vehicle passes (bicycles, motorcycles, ATVs, cars, pickups,
tractors; two or four ruts each) plus distractors (fences, footpaths, drainage lines), about
2,000 ruts / 200 km at scale 1, in a projected CRS. Measures, in one run:

- a plain pyogrio read + write of the same layer (the floor),
- the whole `rutwise analyze` in a fresh process (start-up, read, frame, clean, pair, infer,
  write) at 1x, 2x and 4x the layer size, with its peak memory,

and prints a table, writing bench/throughput.md. Run:
``.venv/bin/python bench/throughput.py [--scale 1.0]``.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyogrio
import shapely
from pyogrio.raw import read as raw_read
from pyogrio.raw import write as raw_write

from geoops.kinematics import simulate_steering
from geoops.scenarios import PRESETS, mapped_lines, random_smooth, slalom

HERE = Path(__file__).resolve().parent
CRS = "EPSG:32633"
ORIGIN = (500_000.0, 5_500_000.0)


def make_layer(path: Path, scale: float, seed: int = 7) -> tuple[int, float]:
    """Write the seeded layer; return (number of ruts, total length in km)."""
    rng = np.random.default_rng(seed)
    geoms: list[shapely.LineString] = []
    kinds: list[str] = []
    n_passes = int(round(450 * scale))
    cell = 120.0  # metres between pass origins on a grid
    side = int(np.ceil(np.sqrt(n_passes * 1.25)))
    vehicles = list(PRESETS.values())
    for k in range(n_passes):
        v = vehicles[k % len(vehicles)]
        length = float(rng.uniform(60, 110))
        if rng.random() < 0.5:
            steer = slalom(length, 0.05, rng.uniform(6, 18), rng.uniform(12, 30),
                           phase_deg=rng.uniform(0, 360))
        else:
            steer = random_smooth(length, 0.05, rng, 18.0, rng.uniform(3, 8))
        sim = simulate_steering(v, steer, 0.05)
        lines = mapped_lines(sim, 0.03, (0.5, 1.5), rng)
        angle = rng.uniform(0, 2 * np.pi)
        rot = np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
        gx, gy = divmod(k, side)
        offset = np.array([ORIGIN[0] + gx * cell, ORIGIN[1] + gy * cell])
        for xy in lines.values():
            geoms.append(shapely.LineString(xy @ rot.T + offset))
            kinds.append(v.name)
    # distractors: fences (straight), footpaths (meandering single lines), drainage lines
    n_distract = int(round(150 * scale))
    span = side * cell
    for _ in range(n_distract):
        start = np.array(ORIGIN) + rng.uniform(0, span, 2)
        kind = rng.choice(["fence", "footpath", "drain"])
        n = 60
        t = np.linspace(0, 1, n)[:, None]
        direction = rng.normal(size=2)
        direction /= np.hypot(*direction)
        length = rng.uniform(80, 200)
        xy = start + t * length * direction
        if kind != "fence":
            normal = np.array([-direction[1], direction[0]])
            xy = xy + normal * (rng.uniform(1, 4) * np.sin(t * rng.uniform(4, 12)))
        geoms.append(shapely.LineString(xy))
        kinds.append(str(kind))
    wkb = shapely.to_wkb(np.array(geoms, dtype=object))
    raw_write(str(path), wkb, [np.array(kinds, dtype=object)], ["kind"], layer="ruts",
              driver="GPKG", crs=CRS, geometry_type="LineString")
    total_km = float(shapely.length(np.array(geoms, dtype=object)).sum()) / 1000.0
    return len(geoms), total_km


def plain_read_write(src: Path, dst: Path) -> float:
    t0 = time.perf_counter()
    meta, _, wkb, fields = raw_read(str(src), layer="ruts")
    raw_write(str(dst), wkb, fields, list(meta["fields"]), layer="ruts", driver="GPKG",
              crs=meta["crs"], geometry_type="LineString")
    return time.perf_counter() - t0


def timed_analyze(src: Path, out: Path) -> tuple[float, float, str]:
    """Wall time and peak resident memory (MiB) of `rutwise analyze` in a fresh process."""
    code = (
        "import resource, sys, time; t0 = time.perf_counter(); "
        "from geoops.cli import main; rc = main(['analyze', sys.argv[1], '-o', sys.argv[2], "
        "'-q']); t = time.perf_counter() - t0; "
        "print(t, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, rc)"
    )
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code, str(src), str(out)], capture_output=True,
                          text=True, check=False)
    wall = time.perf_counter() - t0
    if proc.returncode != 0 or not proc.stdout.strip():
        raise RuntimeError(proc.stderr[-2000:])
    _, peak, rc = proc.stdout.split()
    passes = pyogrio.read_info(str(out), layer="passes")["features"]
    return wall, float(peak), f"rc {rc}, {passes} passes"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scale", type=float, default=1.0)
    ap.add_argument("--out", default=str(HERE / "throughput.md"))
    args = ap.parse_args()
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        base_time = None
        for factor in (1, 2, 4):
            src = Path(tmp) / f"layer_{factor}.gpkg"
            n_ruts, km = make_layer(src, args.scale * factor)
            floor = plain_read_write(src, Path(tmp) / f"copy_{factor}.gpkg")
            wall, peak, note = timed_analyze(src, Path(tmp) / f"out_{factor}.gpkg")
            base_time = base_time or wall
            rows.append((factor, n_ruts, km, floor, wall, km / wall, wall / floor,
                         wall / base_time, peak, note))
            print(rows[-1], flush=True)
    lines = [
        "# Throughput benchmark (bench/throughput.py)",
        "",
        f"Seeded layer in {CRS}: vehicle passes of two or four ruts (0.03 m noise, vertex "
        "spacing 0.5-1.5 m) plus fences, footpaths and drainage lines; whole `rutwise analyze` "
        "in a fresh process (start-up included) against a plain pyogrio read + write of the same "
        "layer, in the same run. 2-core shared machine.",
        "",
        "| size | ruts | km | pyogrio read+write s | analyze s | km/s | ratio to read+write | "
        "time vs 1x | peak MiB | note |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for f, n, km, floor, wall, kms, ratio, rel, peak, note in rows:
        lines.append(f"| {f}x | {n} | {km:.0f} | {floor:.2f} | {wall:.1f} | {kms:.1f} | "
                     f"{ratio:.0f} | {rel:.2f} | {peak:.0f} | {note} |")
    lines += ["", "Targets (issue 5): at least 40 km/s; at most 100 times the read+write; 4x the "
              "layer at most 4.6x the time; peak memory under 1 GiB at 1x."]
    text = "\n".join(lines) + "\n"
    print(text)
    Path(args.out).write_text(text)


if __name__ == "__main__":
    main()
