"""Throughput and peak memory of rut extraction from elevation models of growing size.

For each of four sizes a synthetic drone elevation model (4 cm pixels, UTM 33N, float32, tiled
GeoTIFF) is written strip by strip: a simulated car's four wheel ruts (12 cm deep, 20 cm wide)
repeated every 34 x 30 m, on a sloping, undulating ground with 2 cm of noise. Each size is then
extracted in a fresh subprocess with the default memory budget (256 MB per window), twice: once
for the time and the peak resident set size (``resource.getrusage``), once under ``tracemalloc``
for the peak of the memory Python and numpy allocate. Prints a table and writes bench/raster.md.

Run: ``.venv/bin/python bench/raster.py [--sizes 2000 4000 6000 8000]`` (pixels per side).
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine
from scipy.spatial import cKDTree

from geoops.kinematics import simulate_steering
from geoops.scenarios import CAR, single_turn

REPO = Path(__file__).resolve().parents[1]
PX = 0.04
TILE_M = (34.0, 30.0)  # one car scene, repeated
DEPTH, WIDTH, NOISE = 0.12, 0.20, 0.02


def scene_tile() -> np.ndarray:
    """Depth below ground of one 34 x 30 m scene (rows from the north edge)."""
    sim = simulate_steering(CAR, single_turn(30.0, 0.02, 30.0, 8.0), 0.02, start=(3.0, 4.0, 0.0))
    pts = np.vstack(list(sim.wheels().values()))
    nx, ny = round(TILE_M[0] / PX), round(TILE_M[1] / PX)
    x, y = np.meshgrid((np.arange(nx) + 0.5) * PX, TILE_M[1] - (np.arange(ny) + 0.5) * PX)
    d, _ = cKDTree(pts).query(np.column_stack([x.ravel(), y.ravel()]), distance_upper_bound=WIDTH)
    d = np.minimum(d, WIDTH).reshape(x.shape)
    s = np.clip((WIDTH / 2 + 0.25 * WIDTH - d) / (0.5 * WIDTH), 0.0, 1.0)
    return np.asarray(DEPTH * s * s * (3 - 2 * s), dtype=np.float32)


def write_dem(path: Path, side: int, tile: np.ndarray, seed: int = 1) -> None:
    """A side x side pixel DEM, written in strips of one scene height (bounded memory)."""
    rng = np.random.default_rng(seed)
    th, tw = tile.shape
    profile = {
        "driver": "GTiff",
        "width": side,
        "height": side,
        "count": 1,
        "dtype": "float32",
        "crs": "EPSG:32633",
        "transform": Affine(PX, 0.0, 500000.0, 0.0, -PX, 5000000.0 + side * PX),
        "nodata": -9999.0,
        "tiled": True,
        "blockxsize": 512,
        "blockysize": 512,
        "BIGTIFF": "IF_SAFER",
    }
    reps = -(-side // tw)
    with rasterio.open(path, "w", **profile) as dst:
        for r0 in range(0, side, th):
            h = min(th, side - r0)
            x = (np.arange(side) + 0.5) * PX
            y = (side - r0 - np.arange(h) - 0.5)[:, None] * PX
            ground = 250.0 + 0.03 * x[None, :] + 0.01 * y + 0.05 * np.sin(x / 3.0) * np.cos(y / 4)
            ruts = np.tile(tile[:h], (1, reps))[:, :side]
            z = ground - ruts + rng.normal(0.0, NOISE, (h, side))
            dst.write(z.astype(np.float32), 1, window=rasterio.windows.Window(0, r0, side, h))


CHILD = r"""
import json, resource, sys, time, tracemalloc
from geoops.raster import extract_ruts
path, trace = sys.argv[1], sys.argv[2] == "1"
if trace:
    tracemalloc.start()
t0 = time.perf_counter()
lines = extract_ruts(path)
wall = time.perf_counter() - t0
peak = tracemalloc.get_traced_memory()[1] if trace else 0
opts = lines.options
# VmHWM: this process's own peak; ru_maxrss would also carry the parent's size at the fork
try:
    hwm = next(int(x.split()[1]) for x in open("/proc/self/status") if x.startswith("VmHWM"))
except (OSError, StopIteration):
    hwm = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({"seconds": wall, "lines": len(lines), "km": float(lines.length_m.sum()) / 1000,
                  "window": opts["window_px_used"], "overlap": opts["overlap_px_used"],
                  "maxrss_mb": hwm / 1024, "traced_mb": peak / 2**20}))
"""


def run_child(path: Path, trace: bool) -> dict[str, float]:
    out = subprocess.run(
        [sys.executable, "-c", CHILD, str(path), "1" if trace else "0"],
        check=True,
        capture_output=True,
        text=True,
        cwd=REPO,
    )
    return dict(json.loads(out.stdout.strip().splitlines()[-1]))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[2000, 4000, 6000, 8000])
    args = parser.parse_args()
    tile = scene_tile()
    load = os.getloadavg()[0]
    rows = []
    with tempfile.TemporaryDirectory(prefix="rutwise-bench-") as tmp:
        for side in args.sizes:
            path = Path(tmp) / f"dem_{side}.tif"
            t0 = time.perf_counter()
            write_dem(path, side, tile)
            made = time.perf_counter() - t0
            timed = run_child(path, trace=False)
            traced = run_child(path, trace=True)
            mp = side * side / 1e6
            row = {
                "side": side,
                "mp": mp,
                "file_mb": path.stat().st_size / 2**20,
                "seconds": timed["seconds"],
                "mp_per_s": mp / timed["seconds"],
                "maxrss_mb": timed["maxrss_mb"],
                "traced_mb": traced["traced_mb"],
                "lines": timed["lines"],
                "km": timed["km"],
                "window": timed["window"],
                "overlap": timed["overlap"],
                "made_s": made,
            }
            rows.append(row)
            print(
                f"{side:>6} px  {mp:7.1f} MP  {row['seconds']:7.1f} s  {row['mp_per_s']:5.2f} MP/s"
                f"  RSS {row['maxrss_mb']:6.0f} MB  traced {row['traced_mb']:6.0f} MB"
                f"  {row['lines']:>5} lines  {row['km']:.2f} km",
                flush=True,
            )
            path.unlink()
    write_markdown(rows, load)


def write_markdown(rows: list[dict[str, float]], load: float) -> None:
    when = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC")
    lines = [
        "# Rut extraction from elevation models (bench/raster.py)",
        "",
        "Synthetic drone elevation models, 4 cm pixels, float32 tiled GeoTIFF, UTM 33N: a "
        "car's four wheel ruts (12 cm deep, 20 cm wide) repeated every 34 x 30 m on sloping, "
        "undulating ground with 2 cm noise. Each size is extracted in a fresh process with the "
        "default options (memory budget 256 MB per window, so every raster here is cut into "
        "windows). Time is the wall time of `extract_ruts`; peak RSS is the process's "
        "own high-water mark (VmHWM: Python, numpy, GDAL and the libraries included, about "
        "170 MB before any work); traced peak is the largest amount of memory Python and "
        "numpy held at once (tracemalloc, a separate run).",
        "",
        "| raster (pixels) | megapixels | file | time | megapixels/s | peak RSS | traced peak "
        "| lines | rut length | window + overlap |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for r in rows:
        lines.append(
            f"| {r['side']} x {r['side']} | {r['mp']:.1f} | {r['file_mb']:.0f} MB "
            f"| {r['seconds']:.1f} s | {r['mp_per_s']:.2f} | {r['maxrss_mb']:.0f} MB "
            f"| {r['traced_mb']:.0f} MB | {r['lines']:.0f} | {r['km']:.2f} km "
            f"| {r['window']:.0f} + 2 x {r['overlap']:.0f} px |"
        )
    lines += [
        "",
        "Memory is set by the window, not by the raster: the traced peak (one window's arrays "
        "plus the lines found so far, a few tens of bytes per metre of rut) and the RSS stay "
        "nearly flat while the raster grows sixteenfold. GDAL's block cache is capped at a "
        "quarter of the budget. Speed varies with the machine's other load (the CPUs are "
        "shared); work per pixel does not grow with the raster.",
        "",
        f"Machine: {os.cpu_count()} CPUs, Python {platform.python_version()}, "
        f"{platform.system()} {platform.machine()}; load average {load:.2f} before the run; "
        f"run {when}.",
        "",
        "Run: `.venv/bin/python bench/raster.py`",
        "",
    ]
    out = REPO / "bench" / "raster.md"
    out.write_text("\n".join(lines))
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
