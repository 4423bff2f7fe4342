"""Throughput benchmark: a whole `rutwise analyze` of a large seeded multi-pass layer.

The layer comes from :func:`geoops.trails.make_scene`: trails driven by one to three vehicles
each (bicycles, motorcycles, ATVs, cars, pickups, tractors; two or four ruts; either way;
drivers wandering about their line), crossing trails, and distractors (fences, footpaths,
drainage lines, lone single tracks): about 2,000 ruts / 200 km at scale 1, in a projected
CRS. Measured in one run:

- a plain pyogrio read + write of the same layer (the floor),
- the whole `rutwise analyze` in a fresh process (start-up, read, frame, clean, pair, infer,
  write) at 1x, 2x and 4x the layer size with the default workers, and at 1x with one worker,
  with peak memory,
- how the output compares with the scene's truth: passes reconstructed with exactly their
  own ruts, distractors inside a pass, precision of decided directions.

Prints a table and writes bench/throughput.md. Run:
``.venv/bin/python bench/throughput.py [--scale 1.0]``.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from pyogrio.raw import read as raw_read
from pyogrio.raw import write as raw_write

from geoops.parallel import default_workers
from geoops.trails import Scene, SceneScore, make_scene, score_output, write_scene

HERE = Path(__file__).resolve().parent
CRS = "EPSG:32633"
ORIGIN = (500_000.0, 5_500_000.0)
#: trails at scale 1 (about 200 km of rut)
TRAILS = 470
#: share of passes with one rut mapped in two pieces
SPLIT_SHARE = 0.1


def make_layer(path: Path, scale: float, seed: int = 7) -> Scene:
    """Write the seeded layer and return its scene (with the truth)."""
    scene = make_scene(seed, max(int(round(TRAILS * scale)), 1), origin=ORIGIN,
                       split_share=SPLIT_SHARE)
    write_scene(scene, str(path), CRS)
    return scene


#: plain read + writes timed per row (see main)
FLOOR_RUNS = 9


def plain_read_write(src: Path, dst: Path) -> float:
    t0 = time.perf_counter()
    meta, _, wkb, fields = raw_read(str(src), layer="ruts")
    raw_write(str(dst), wkb, fields, list(meta["fields"]), layer="ruts", driver="GPKG",
              crs=meta["crs"], geometry_type="LineString")
    return time.perf_counter() - t0


def timed_analyze(src: Path, out: Path, workers: int) -> tuple[float, float, int]:
    """Wall time, peak resident memory (MiB, largest process) and exit code of `rutwise
    analyze` in a fresh process."""
    code = (
        "import resource, sys; from geoops.cli import main; "
        "rc = main(['analyze', sys.argv[1], '-o', sys.argv[2], '-q', '--workers', sys.argv[3]]); "
        "r = max(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, "
        "resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss); print(r / 1024.0, rc)"
    )
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code, str(src), str(out), str(workers)],
                          capture_output=True, text=True, check=False)
    wall = time.perf_counter() - t0
    if proc.returncode != 0 or not proc.stdout.strip():
        raise RuntimeError(proc.stderr[-2000:])
    peak, rc = proc.stdout.split()
    return wall, float(peak), int(rc)


def _row(label: str, scene: Scene, floor: float, wall: float, base: float, peak: float,
         score: SceneScore) -> tuple[str, ...]:
    km = scene.total_length_m / 1000.0
    return (
        label, str(len(scene.lines)), f"{km:.0f}", f"{floor:.2f}", f"{wall:.1f}",
        f"{km / wall:.1f}", f"{wall / floor:.0f}", f"{wall / base:.2f}", f"{peak:.0f}",
        f"{score.reconstructed}/{score.true_passes} ({100 * score.reconstructed_share:.1f} %)",
        f"{score.distractors_in_passes}/{score.distractors}",
        f"{score.decided_right}/{score.decided}",
    )


def _targets(measured: list[tuple[int, int, float, float, float, float, SceneScore]]
             ) -> list[str]:
    """Each target of the issue with the measured value and whether it holds."""
    first = measured[0]
    four = next(m for m in measured if m[0] == 4)
    scores = [m[6] for m in measured if m[1] == first[1]]
    share = min(s.reconstructed_share for s in scores)
    inside = sum(s.distractors_in_passes for s in scores)
    right = sum(s.decided_right for s in scores)
    decided = sum(s.decided for s in scores)
    rows = [
        ("whole analyze at 1x, km of rut per second", ">= 40", f"{first[2]:.1f}",
         first[2] >= 40),
        ("time / plain pyogrio read+write at 1x", "<= 100", f"{first[3]:.0f}", first[3] <= 100),
        ("time at 4x / time at 1x", "<= 4.6", f"{four[4] / first[4]:.2f}",
         four[4] / first[4] <= 4.6),
        ("peak memory at 1x, MiB", "< 1024", f"{first[5]:.0f}", first[5] < 1024),
        ("passes reconstructed with their own ruts (worst size)", ">= 95 %",
         f"{100 * share:.1f} %", share >= 0.95),
        ("distractors inside a pass (all sizes)", "0", str(inside), inside == 0),
        ("decided passes pointing the right way (all sizes)", ">= 99 %, as bench/accuracy.md",
         f"{right}/{decided} = {right / max(decided, 1):.3f}", right >= 0.99 * decided),
    ]
    out = ["| target | wanted | measured | holds? |", "| --- | --- | --- | --- |"]
    out += [f"| {a} | {b} | {c} | {'yes' if d else '**no**'} |" for a, b, c, d in rows]
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scale", type=float, default=1.0)
    ap.add_argument("--out", default=str(HERE / "throughput.md"))
    ap.add_argument("--repeat", type=int, default=3,
                    help="runs of each analysis; the fastest counts (the machine is shared)")
    args = ap.parse_args()
    workers = default_workers()
    rows = []
    measured: list[tuple[int, int, float, float, float, float, SceneScore]] = []
    with tempfile.TemporaryDirectory() as tmp:
        base = 0.0
        runs = [(1, workers), (1, 1), (2, workers), (4, workers)]
        scenes: dict[int, Scene] = {}
        floors: dict[int, float] = {}
        runs_done: list[tuple[int, int, Scene, float, float, SceneScore]] = []
        for factor, w in runs:
            src = Path(tmp) / f"layer_{factor}.gpkg"
            if factor not in scenes:
                scenes[factor] = make_layer(src, args.scale * factor)
            scene = scenes[factor]
            # the floor of a layer: the fastest of all its read + writes in this run (it is
            # a few hundredths of a second, so one slow run moves the ratio by half)
            floors[factor] = min(
                floors.get(factor, float("inf")),
                *(plain_read_write(src, Path(tmp) / f"copy_{factor}_{k}.gpkg")
                  for k in range(FLOOR_RUNS)),
            )
            out = Path(tmp) / f"out_{factor}_{w}.gpkg"
            wall, peak = min(timed_analyze(src, out, w)[:2] for _ in range(max(args.repeat, 1)))
            base = base or wall
            runs_done.append((factor, w, scene, wall, peak, score_output(scene, str(out))))
            print(f"{factor}x, {w} workers: {wall:.2f} s, floor so far {floors[factor]:.3f} s",
                  flush=True)
        for factor, w, scene, wall, peak, score in runs_done:
            floor = floors[factor]
            label = f"{factor}x, {w} worker{'s' if w > 1 else ''}"
            rows.append(_row(label, scene, floor, wall, base, peak, score))
            km = scene.total_length_m / 1000.0
            measured.append((factor, w, km / wall, wall / floor, wall, peak, score))
    lines = [
        "# Throughput benchmark (bench/throughput.py)",
        "",
        f"Seeded multi-pass layer in {CRS} (geoops.trails: trails driven by 1-3 vehicles each, "
        "crossing trails, fences, footpaths, drains and lone tracks; 0.03 m vertex noise, vertex "
        f"spacing 0.5-1.5 m; {SPLIT_SHARE:.0%} of passes have a rut mapped in two pieces). "
        "Whole `rutwise analyze` in a fresh process (start-up included) "
        "against a plain pyogrio read + write of the same layer, in the same run; each "
        f"analysis run {args.repeat} times, the fastest counted; the read + write {FLOOR_RUNS} "
        "times per row, the fastest of all runs of that layer counted. "
        f"Machine: {os.cpu_count()} cores, shared; scale {args.scale}.",
        "",
        "| run | ruts | km | pyogrio read+write s | analyze s | km/s | ratio to read+write | "
        "time vs first | peak MiB | passes reconstructed | distractors in passes | "
        "decided right |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    lines += ["", "## Targets (issue 5)", "", *_targets(measured)]
    text = "\n".join(lines) + "\n"
    print(text)
    Path(args.out).write_text(text)


if __name__ == "__main__":
    main()
