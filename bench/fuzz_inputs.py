"""Fuzz the input readers for a bounded time: mutate the bad-input corpus and valid layers,
read each mutant the way `rutwise analyze` and the service's upload check do, and count every
answer that is not a domain error (geoops.errors.RutwiseError) as a finding.

Mutations (seeded): flip, insert or delete bytes, truncate, splice two files, and for JSON
also swap values, nest deeper and change geometry types. Each mutant is written under the
suffix of its parent or of another format (a GeoJSON named .gpkg, a GeoPackage named .tif).

Run: ``.venv/bin/python bench/fuzz_inputs.py --seconds 300 [--seed 1]``; prints a summary and
exits 1 when there are findings (each saved under --keep for replay). The test suite runs a
short fixed-count version (tests/hardening/test_fuzz_short.py).
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
import traceback
import warnings
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from geoops.errors import RutwiseError  # noqa: E402
from geoops.limits import parse_json  # noqa: E402
from tests.hardening.make_corpus import write_corpus  # noqa: E402

SUFFIXES = (".geojson", ".gpkg", ".gpx", ".fgb", ".zip", ".tif")


@dataclass
class FuzzReport:
    """What a run tried and what it found."""

    tried: int = 0
    seconds: float = 0.0
    slowest_s: float = 0.0
    slowest: str = ""
    answers: Counter[str] = field(default_factory=Counter)
    findings: list[tuple[str, str]] = field(default_factory=list)  # (file, traceback tail)


def _mutate_bytes(rng: np.random.Generator, data: bytes, other: bytes) -> bytes:
    buf = bytearray(data or b"{}")
    kind = rng.integers(0, 5)
    if kind == 0:  # flip a few bytes
        for at in rng.integers(0, len(buf), size=int(rng.integers(1, 9))):
            buf[at] = int(rng.integers(0, 256))
    elif kind == 1:  # truncate
        del buf[int(rng.integers(0, len(buf))) :]
    elif kind == 2:  # insert a run of one byte
        at = int(rng.integers(0, len(buf) + 1))
        buf[at:at] = bytes([int(rng.integers(0, 256))]) * int(rng.integers(1, 64))
    elif kind == 3:  # delete a slice
        at = int(rng.integers(0, len(buf)))
        del buf[at : at + int(rng.integers(1, 64))]
    else:  # splice the head of one file onto the tail of another
        cut = int(rng.integers(0, len(buf)))
        buf = buf[:cut] + other[int(rng.integers(0, max(len(other), 1))) :]
    return bytes(buf)


_JSON_SWAPS: list[object] = [
    None,
    0,
    -1e308,
    1e308,
    "",
    "LineString",
    [],
    {},
    [[]],
    [[0]],
    True,
    "NaN",
    [[1e308, -1e308], [0, 0]],
]


def _mutate_json(rng: np.random.Generator, doc: object) -> object:
    """Replace one random node of a JSON document, or nest it deeper."""
    nodes: list[tuple[object, object]] = []  # (container, key)
    stack = [doc]
    while stack and len(nodes) < 5000:
        item = stack.pop()
        children = (
            list(item.items())
            if isinstance(item, dict)
            else list(enumerate(item))
            if isinstance(item, list)
            else []
        )
        for key, value in children:
            nodes.append((item, key))
            stack.append(value)
    if not nodes:
        return _JSON_SWAPS[int(rng.integers(0, len(_JSON_SWAPS)))]
    parent, key = nodes[int(rng.integers(0, len(nodes)))]
    old = parent[key]  # type: ignore[index]
    if rng.random() < 0.2:
        new: object = old
        for _ in range(int(rng.integers(1, 80))):
            new = [new]
    else:
        new = _JSON_SWAPS[int(rng.integers(0, len(_JSON_SWAPS)))]
    parent[key] = new  # type: ignore[index]
    return doc


def read_like_the_tools(path: Path) -> str:
    """Read ``path`` as `rutwise analyze` reads it (raster or vector) and answer with the
    domain error's kind, or 'read' when it is a usable layer."""
    from geoops.pipeline import read_input

    try:
        read_input(path)
    except RutwiseError as exc:
        return exc.kind
    return "read"


def fuzz(
    seconds: float | None = None,
    iterations: int | None = None,
    seed: int = 1,
    keep: Path | None = None,
    reader: Callable[[Path], str] = read_like_the_tools,
) -> FuzzReport:
    """Mutate and read until ``seconds`` pass or ``iterations`` are done (whichever first)."""
    report = FuzzReport()
    rng = np.random.default_rng(seed)
    start = time.monotonic()
    with tempfile.TemporaryDirectory(prefix="rutwise-fuzz-") as scratch:
        work = Path(scratch)
        seeds = [c.file for c in write_corpus(work / "corpus")]
        seeds = [p for p in seeds if p.stat().st_size < 200_000]
        blobs = [p.read_bytes() for p in seeds]
        while True:
            if seconds is not None and time.monotonic() - start > seconds:
                break
            if iterations is not None and report.tried >= iterations:
                break
            k = int(rng.integers(0, len(seeds)))
            parent, data = seeds[k], blobs[k]
            suffix = parent.suffix if rng.random() < 0.8 else str(rng.choice(SUFFIXES))
            mutant: bytes
            if parent.suffix == ".geojson" and rng.random() < 0.5:
                try:
                    doc = parse_json(data)
                    mutant = json.dumps(_mutate_json(rng, doc)).encode()
                except (ValueError, RecursionError):
                    mutant = _mutate_bytes(rng, data, blobs[int(rng.integers(0, len(blobs)))])
            else:
                mutant = _mutate_bytes(rng, data, blobs[int(rng.integers(0, len(blobs)))])
            path = work / f"mutant{report.tried % 50}{suffix}"
            path.write_bytes(mutant)
            t0 = time.monotonic()
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    answer = reader(path)
            except Exception as exc:  # noqa: BLE001 - every other exception is a finding
                answer = "FINDING " + type(exc).__name__
                tail = "".join(traceback.format_exception(exc)[-3:])
                name = path.name
                if keep is not None:
                    keep.mkdir(parents=True, exist_ok=True)
                    name = str(keep / f"finding{len(report.findings)}{suffix}")
                    shutil.copy(path, name)
                report.findings.append((name, tail))
            took = time.monotonic() - t0
            if took > report.slowest_s:
                report.slowest_s, report.slowest = took, f"{parent.name} -> {suffix}"
            report.answers[answer] += 1
            report.tried += 1
    report.seconds = time.monotonic() - start
    return report


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=60.0, help="time budget (default 60)")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument(
        "--keep",
        type=Path,
        default=REPO / "out" / "fuzz-findings",
        help="folder for the files that gave findings",
    )
    args = parser.parse_args(argv)
    report = fuzz(seconds=args.seconds, seed=args.seed, keep=args.keep)
    print(
        f"{report.tried} mutants in {report.seconds:.0f} s (seed {args.seed}); slowest "
        f"{report.slowest_s:.2f} s ({report.slowest})"
    )
    for answer, n in report.answers.most_common():
        print(f"  {n:>7}  {answer}")
    for name, tail in report.findings[:20]:
        print(f"FINDING {name}\n{tail}")
    return 1 if report.findings else 0


if __name__ == "__main__":
    sys.exit(main())
