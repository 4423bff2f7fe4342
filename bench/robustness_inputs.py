"""Bad inputs against the command line and the service: answer, time and peak memory.

Writes the hardening corpus (tests/hardening/make_corpus.py) with its two large cases (a
million vertices; a zip bomb over the default 512 MB limit) into a temporary folder, then

- runs `rutwise analyze` on each file in a fresh process (exit status, the start of its
  message, wall time, peak RSS of that process from wait4);
- uploads each file to the service in one fresh process (FastAPI TestClient, default
  settings) and, when the upload is taken, executes `analyze` on it (HTTP status, problem
  type, time); the service process's own peak RSS is reported once;
- runs the fuzzer (bench/fuzz_inputs.py) for ``--fuzz-seconds``.

Rewrites only the section between ``<!-- inputs:begin -->`` and ``<!-- inputs:end -->`` in
bench/robustness.md (another script owns the rest of that file).

Run: ``.venv/bin/python bench/robustness_inputs.py [--fuzz-seconds 120]``.
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
from typing import Any

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from bench.fuzz_inputs import fuzz  # noqa: E402
from tests.hardening.make_corpus import (  # noqa: E402
    Case,
    case,
    million_vertices,
    write_corpus,
    zip_bomb,
)

MD = REPO / "bench" / "robustness.md"
TITLE = "# Robustness (issue 9)\n"
BEGIN, END = "<!-- inputs:begin -->", "<!-- inputs:end -->"
TIMEOUT_S = 300.0
SCRATCH = tempfile.gettempdir()

#: what the corpus and the fuzzer found, and how each was fixed (kept by hand)
FIXED = [
    "A two-vertex line 19 000 km long (Web Mercator) ran for minutes with growing memory: "
    "work follows line length. Now refused past `RUTWISE_MAX_LAYER_KM` (1000 km).",
    "Zips: `../` and absolute member names reached GDAL; a zip bomb was read whole. Now the "
    "zip directory is checked first (names, `RUTWISE_ZIP_MAX_MEMBERS`, `RUTWISE_ZIP_MAX_MB`).",
    "Service: an execute body nested 500 levels parsed, then failed pickling into the worker "
    "(500); ~1000 levels or a 5000-digit number failed `json.loads` (500). Now 400 "
    "malformed-json, nesting checked before parsing (`RUTWISE_JSON_MAX_DEPTH`, 64).",
    "Layer names with terminal escapes and line breaks were printed raw; now quoted.",
    "A layer of NaN lines 'held no line geometries (it holds: LineString)'; single-vertex "
    "lines were accepted with nothing to analyse. Now one message counts what each feature "
    "holds instead.",
    "Fuzzer: non-UTF-8 field names (pyogrio), a corrupt TIFF header's error text (rasterio), "
    "an unknown zip version (zipfile) and a GeoPackage layer missing from gpkg_contents "
    "(pyogrio) raised UnicodeDecodeError / NotImplementedError / CRSError (exit 1, HTTP "
    "500). Now BadInput.",
    "Property tests: two neighbouring spike vertices were dropped by vertex order, so a rut "
    "and the same rut reversed cleaned differently. Now the sharper one is dropped.",
]

_SERVICE_DRIVER = r"""
import json, sys, time, resource, warnings
from pathlib import Path
warnings.simplefilter("ignore")
from fastapi.testclient import TestClient
from service.app import create_app
from service.settings import load_settings

def main():
    files = [Path(p) for p in sys.argv[2:]]
    settings = load_settings({}, data_dir=Path(sys.argv[1]))
    with TestClient(create_app(settings), raise_server_exceptions=False) as client:
        for f in files:
            t0 = time.monotonic()
            r = client.post("/uploads", content=f.read_bytes(), params={"name": f.name},
                            headers={"Content-Type": "application/octet-stream"})
            if r.status_code == 201:
                r = client.post("/processes/analyze/execution", json={
                    "inputs": {"ruts": {"href": r.json()["href"]}}, "outputs": {"passes": {}}})
            kind = ""
            if r.headers.get("content-type", "").startswith("application/problem+json"):
                kind = r.json()["type"].rsplit(":", 1)[-1]
            print(json.dumps({"file": f.name, "status": r.status_code, "problem": kind,
                              "seconds": time.monotonic() - t0}), flush=True)
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"peak_rss_mb": rss}), flush=True)

if __name__ == "__main__":
    main()
"""


def run_cli(c: Case, out: Path) -> dict[str, Any]:
    """`rutwise analyze` on one file in a fresh process: exit, message, time, peak RSS."""
    t0 = time.monotonic()
    proc = subprocess.Popen(
        [sys.executable, "-m", "geoops.cli", "analyze", str(c.file), "-o", str(out), "-q"],
        cwd=REPO,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    assert proc.stderr is not None
    err = proc.stderr.read().decode("utf-8", "replace")
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    first = err.strip().splitlines()[0] if err.strip() else ""
    return {
        "rc": proc.returncode,
        "message": first,
        "seconds": time.monotonic() - t0,
        "rss_mb": usage.ru_maxrss / 1024,
    }


def run_service(cases: list[Case], data_dir: Path) -> tuple[dict[str, dict[str, Any]], float]:
    proc = subprocess.run(
        [sys.executable, "-c", _SERVICE_DRIVER, str(data_dir), *[str(c.file) for c in cases]],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=TIMEOUT_S * 4,
        check=True,
    )
    rows = [json.loads(line) for line in proc.stdout.splitlines() if line.startswith("{")]
    return {r["file"]: r for r in rows if "file" in r}, rows[-1]["peak_rss_mb"]


def _cell(text: str, width: int = 90) -> str:
    text = text.replace("rutwise: error: ", "").replace("|", "\\|").replace(SCRATCH, "")
    return (text[:width] + " ...") if len(text) > width else text


def section(
    cases: list[Case],
    cli: dict[str, dict[str, Any]],
    svc: dict[str, dict[str, Any]],
    svc_rss: float,
    fz: Any,
    fuzz_seconds: float,
) -> str:
    lines = [
        BEGIN,
        "## Bad inputs (bench/robustness_inputs.py)",
        "",
        f"{len(cases)} hand-made bad inputs (tests/hardening/make_corpus.py) and {fz.tried} "
        f"fuzzed mutants of them ({fuzz_seconds:.0f} s of bench/fuzz_inputs.py): "
        f"**{len(cases) + fz.tried} bad inputs tried**. Expected answers are asserted by "
        "tests/hardening (the CLI in-process, the service through TestClient).",
        "",
        "CLI: `rutwise analyze FILE` in a fresh process; exit 2 is a user error (one line, no "
        "traceback), 0 means the file was analysed (by design: extra dimensions, duplicates, "
        "mixed types are used and reported). Peak RSS is the whole process (Python, numpy, "
        "GDAL: about 150 MB before any work). Service: `POST /uploads`, then, when the upload "
        "is taken, `analyze` on it; status and the problem `type` (urn:rutwise:problem:...).",
        "",
        "| input | class | CLI exit | CLI message (start) | CLI s | CLI peak MB | HTTP | "
        "problem type | service s |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for c in cases:
        r, s = cli[c.name], svc.get(c.file.name, {})
        lines.append(
            f"| {c.name} | {c.group} | {r['rc']} | {_cell(r['message']) or '(analysed)'} | "
            f"{r['seconds']:.1f} | {r['rss_mb']:.0f} | {s.get('status', '-')} | "
            f"{s.get('problem') or '-'} | {s.get('seconds', float('nan')):.2f} |"
        )
    slow = max(cases, key=lambda c: cli[c.name]["seconds"])
    big = max(cases, key=lambda c: cli[c.name]["rss_mb"])
    slow_svc = max(cases, key=lambda c: svc.get(c.file.name, {}).get("seconds", 0.0))
    bad_cli = [c.name for c in cases if cli[c.name]["rc"] not in (0, 2)]
    bad_svc = [c.name for c in cases if svc.get(c.file.name, {}).get("status", 500) >= 500]
    lines += [
        "",
        f"- Slowest (CLI): {slow.name}, {cli[slow.name]['seconds']:.1f} s (start-up "
        f"included); slowest (service): {slow_svc.name}, "
        f"{svc[slow_svc.file.name]['seconds']:.2f} s.",
        f"- Largest memory (CLI): {big.name}, {cli[big.name]['rss_mb']:.0f} MB peak RSS; "
        f"the service process peaked at {svc_rss:.0f} MB over the whole corpus (analyses run "
        "in its worker processes).",
        f"- Fuzzer: {fz.tried} mutants in {fz.seconds:.0f} s, answers "
        + ", ".join(f"{k} {v}" for k, v in fz.answers.most_common())
        + f"; slowest mutant {fz.slowest_s:.2f} s; findings now: {len(fz.findings)}.",
        f"- Crashes now (CLI exit other than 0/2, HTTP 5xx): "
        f"{', '.join(bad_cli + bad_svc) or 'none'}.",
        "- Found and fixed:",
        *[f"  - {text}" for text in FIXED],
        "",
        f"Machine: {os.cpu_count()} CPUs, Python {platform.python_version()}, "
        f"{platform.system()} {platform.machine()}; load average "
        f"{os.getloadavg()[0]:.2f}; run {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} "
        "UTC.",
        "",
        "Run: `.venv/bin/python bench/robustness_inputs.py [--fuzz-seconds 120]`",
        END,
    ]
    return "\n".join(lines)


def write_section(text: str, path: Path = MD) -> None:
    """Replace the marked section of ``path`` (append it, or create the file, when missing)."""
    doc = path.read_text(encoding="utf-8") if path.exists() else TITLE
    if BEGIN in doc and END in doc:
        head, rest = doc.split(BEGIN, 1)
        tail = rest.split(END, 1)[1]
        doc = head + text + tail
    else:
        doc = doc.rstrip("\n") + "\n\n" + text + "\n"
    path.write_text(doc, encoding="utf-8")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--fuzz-seconds", type=float, default=120.0)
    args = parser.parse_args(argv)
    global SCRATCH
    with tempfile.TemporaryDirectory(prefix="rutwise-robust-") as scratch:
        folder = Path(scratch) / "corpus"
        SCRATCH = str(folder) + "/"
        cases = write_corpus(folder)
        cases += [
            case("million_vertices", million_vertices(folder)),
            case("zip_bomb", zip_bomb(folder, megabytes=600)),
        ]
        cli = {}
        for c in cases:
            cli[c.name] = run_cli(c, Path(scratch) / "out.gpkg")
            print(
                f"{c.name:<28} exit {cli[c.name]['rc']}  {cli[c.name]['seconds']:5.1f} s  "
                f"{cli[c.name]['rss_mb']:5.0f} MB  {_cell(cli[c.name]['message'], 60)}"
            )
        svc, svc_rss = run_service(cases, Path(scratch) / "data")
        for c in cases:
            s = svc.get(c.file.name, {})
            print(f"{c.name:<28} HTTP {s.get('status')}  {s.get('problem')}")
        report = fuzz(seconds=args.fuzz_seconds, seed=1, keep=REPO / "out" / "fuzz-findings")
    write_section(section(cases, cli, svc, svc_rss, report, args.fuzz_seconds))
    print(f"fuzzer: {report.tried} mutants, {len(report.findings)} findings; wrote {MD}")


if __name__ == "__main__":
    main()
