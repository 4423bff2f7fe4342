"""Robustness of the HTTP service under load, kills and a second key (issue 9, service part).

Starts the real service (``rutwise serve`` on uvicorn, API keys on) with a temporary data
folder and runs three parts, bounded in requests and time:

1. load: small synchronous analyses from concurrent clients (each with its own key) while
   larger asynchronous analyses run; every request must succeed, every job must end
   successful and every result file must match the checksum in its job document;
2. kills: rounds of asynchronous analyses and a half-sent upload, the service killed with
   SIGKILL (process group: server and worker processes) at a random moment, once while a
   result file is written (the test pause hook of ``service.jobs``), then restarted; after
   each restart the database must pass ``PRAGMA integrity_check``, every job must be
   successful with files that verify, or failed with a reason, and no temporary file or
   unrecorded upload may remain;
3. access control: another key's jobs, results, downloads and uploads answer as if they did
   not exist; keyed routes refuse no key; the rate limit answers 429; security headers.

Prints a table and rewrites only the section between ``<!-- service:begin -->`` and
``<!-- service:end -->`` of bench/robustness.md (created with its title when missing).

Run: ``.venv/bin/python bench/robustness_service.py [--requests 120] [--clients 8]
[--rounds 6]``.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import platform
import random
import signal
import socket
import sqlite3
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import httpx
import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from bench.service import layer, start_server  # noqa: E402
from geoops.integrity import verify_result  # noqa: E402
from service.jobs import PAUSE_VAR  # noqa: E402

MARK_BEGIN, MARK_END = "<!-- service:begin -->", "<!-- service:end -->"
TITLE = "# Robustness (issue 9)\n"
TIME_BUDGET_S = 900.0
KEYS = [f"bench-key-{n}" for n in range(4)]


def auth(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


class Service:
    """The service under test; restarts keep the data folder (and the settings)."""

    def __init__(self, data_dir: Path, workers: int) -> None:
        self.data_dir, self.workers = data_dir, workers
        self.proc: subprocess.Popen[bytes] | None = None
        self.url = ""

    def start(self, pause: str = "") -> None:
        os.environ["RUTWISE_API_KEYS"] = ",".join(KEYS)
        os.environ.pop(PAUSE_VAR, None)
        if pause:
            os.environ[PAUSE_VAR] = pause
        self.proc, self.url = start_server(self.data_dir, self.workers)

    def kill(self) -> None:
        if self.proc is not None:
            try:
                os.killpg(self.proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
            self.proc.wait(timeout=30)
            self.proc = None


def wait_done(client: httpx.Client, url: str, key: str, deadline: float) -> dict[str, Any]:
    while True:
        doc: dict[str, Any] = client.get(url, headers=auth(key)).json()
        if doc["status"] not in ("accepted", "running") or time.monotonic() > deadline:
            return doc
        time.sleep(0.3)


def files_verify(client: httpx.Client, job: dict[str, Any], key: str, folder: Path) -> bool:
    """Every result file of a successful job matches its checksum and, for layers, its
    recorded content checksums."""
    for name, expected in job.get("result_sha256", {}).items():
        r = client.get(f"{job['_url']}/downloads/{name}", headers=auth(key))
        if r.status_code != 200 or hashlib.sha256(r.content).hexdigest() != expected:
            return False
        if name.endswith((".gpkg", ".geojson")):
            path = folder / f"{job['jobID']}-{name}"
            path.write_bytes(r.content)
            if not verify_result(path).ok:
                return False
    return bool(job.get("result_sha256"))


def database_sound(data_dir: Path) -> bool:
    with sqlite3.connect(data_dir / "rutwise.sqlite") as db:
        return db.execute("PRAGMA integrity_check").fetchall() == [("ok",)]


# --- 1. load ----------------------------------------------------------------------------------


def run_load(svc: Service, args: argparse.Namespace, work: Path) -> list[tuple[str, str]]:
    small = {"inputs": {"ruts": layer(1, seed=1)}, "outputs": {"passes": {}}}
    medium = layer(args.passes, seed=2)
    deadline = time.monotonic() + TIME_BUDGET_S / 3
    submitted: list[tuple[str, str]] = []
    with httpx.Client(timeout=120) as client:
        for n in range(args.jobs):
            key = KEYS[n % len(KEYS)]
            r = client.post(f"{svc.url}/processes/analyze/execution",
                            headers={**auth(key), "Prefer": "respond-async"},
                            json={"inputs": {"ruts": medium}})
            if r.status_code == 201:
                submitted.append((r.headers["location"], key))

        def one(n: int) -> tuple[float, str]:
            key = KEYS[n % len(KEYS)]
            t0 = time.perf_counter()
            try:
                res = client.post(f"{svc.url}/processes/analyze/execution", json=small,
                                  headers=auth(key))
                ok = res.status_code == 200 and len(res.json()["features"]) == 1
                why = "" if ok else f"{res.status_code} {res.text[:100]}"
            except httpx.HTTPError as exc:
                why = type(exc).__name__
            return time.perf_counter() - t0, why

        t_load = time.perf_counter()
        with ThreadPoolExecutor(args.clients) as pool:
            results = list(pool.map(one, range(args.requests)))
        wall = time.perf_counter() - t_load
        finished = [wait_done(client, url, key, deadline) | {"_url": url, "_key": key}
                    for url, key in submitted]
        lost = args.jobs - sum(1 for j in finished if j["status"] == "successful")
        corrupt = sum(1 for j in finished if j["status"] == "successful"
                      and not files_verify(client, j, j["_key"], work))
    latency = np.array([t for t, _ in results])
    errors = [why for _, why in results if why]
    if errors:
        print("load errors:", *sorted(set(errors))[:5], sep="\n  ")
    p50, p95 = np.percentile(latency, [50, 95])
    return [
        ("load: synchronous analyses", f"{len(results)} from {args.clients} concurrent "
                                       f"clients, {len(KEYS)} keys"),
        ("load: asynchronous analyses beside them", f"{args.jobs} of "
                                                    f"{len(medium['features'])} ruts"),
        ("load: errors", str(len(errors))),
        ("load: lost jobs (not successful)", str(lost)),
        ("load: result files not matching their checksums", str(corrupt)),
        ("load: latency p50 / p95", f"{p50 * 1000:.0f} / {p95 * 1000:.0f} ms"),
        ("load: throughput", f"{len(results) / wall:.1f} requests/s over {wall:.1f} s"),
    ]


# --- 2. kills ---------------------------------------------------------------------------------


def half_upload(url: str, key: str) -> socket.socket:
    """An upload whose chunked body stops after 400 bytes; the socket stays open."""
    host, port = url.removeprefix("http://").split(":")
    sock = socket.create_connection((host, int(port)), timeout=10)
    sock.sendall(f"POST /uploads HTTP/1.1\r\nHost: {host}:{port}\r\nAuthorization: Bearer "
                 f"{key}\r\nContent-Type: application/geo+json\r\nTransfer-Encoding: chunked"
                 "\r\n\r\n190\r\n".encode() + b"{" * 400 + b"\r\n")
    return sock


def run_kills(svc: Service, args: argparse.Namespace, work: Path) -> list[tuple[str, str]]:
    rng = random.Random(9)
    jobs: list[tuple[str, str]] = []
    sizes = [layer(n, seed=10 + n) for n in (1, 20, 60)]
    unsound_db = mid_write = 0
    for round_no in range(args.rounds):
        hold = round_no == 0  # the first round kills while a result file is being written
        svc.start(pause="60:passes.geojson" if hold else "")
        with httpx.Client(timeout=60) as client:
            for n in range(4):
                key = KEYS[n % len(KEYS)]
                r = client.post(f"{svc.url}/processes/analyze/execution",
                                headers={**auth(key), "Prefer": "respond-async"},
                                json={"inputs": {"ruts": sizes[n % len(sizes)]}})
                jobs.append((r.json()["jobID"], key))  # the port changes on each restart
            sock = half_upload(svc.url, KEYS[0])
            if hold:
                deadline = time.monotonic() + 60
                while not list((svc.data_dir / "jobs").glob("*/.passes.geojson.*")):
                    if time.monotonic() > deadline:
                        raise SystemExit("no job reached the result writing within 60 s")
                    time.sleep(0.05)
                mid_write += 1
            else:
                time.sleep(rng.uniform(0.2, 4.0))
        svc.kill()
        sock.close()
        unsound_db += not database_sound(svc.data_dir)
    svc.start()
    states = {"successful": 0, "failed": 0}
    untruthful = corrupt = 0
    with httpx.Client(timeout=60) as client:
        for job_id, key in jobs:
            url = f"{svc.url}/jobs/{job_id}"
            job = client.get(url, headers=auth(key)).json() | {"_url": url}
            results = client.get(url + "/results", headers=auth(key))
            if job["status"] == "failed":
                states["failed"] += 1
                untruthful += not (results.status_code >= 400 and results.json().get("detail"))
            elif job["status"] == "successful":
                states["successful"] += 1
                corrupt += not files_verify(client, job, key, work)
            else:
                untruthful += 1
    leftovers = len(list((svc.data_dir / "jobs").glob("*/.*")))
    orphans = len(list((svc.data_dir / "uploads").iterdir()))
    unsound_db += not database_sound(svc.data_dir)
    svc.kill()
    return [
        ("kills: SIGKILL of server and workers", f"{args.rounds} (1 while a result file was "
                                                 f"being written, {args.rounds - 1} at a "
                                                 "random moment), each with a half-sent "
                                                 "upload"),
        ("kills: jobs caught by them", f"{len(jobs)}: {states['successful']} successful, "
                                       f"{states['failed']} failed with a reason"),
        ("kills: jobs in an untruthful state", str(untruthful)),
        ("kills: corrupt results (files not matching checksums)", str(corrupt)),
        ("kills: temporary files or unrecorded uploads left", str(leftovers + orphans)),
        ("kills: database integrity_check failures", str(unsound_db)),
    ]


# --- 3. access control ------------------------------------------------------------------------


def run_access(svc: Service, work: Path) -> tuple[list[tuple[str, str]], int]:
    svc.start()
    checks: dict[str, bool] = {}
    owner, other = KEYS[0], KEYS[1]
    nobody = "0" * 32
    with httpx.Client(timeout=60, base_url=svc.url) as client:
        up = client.post("/uploads", content=httpx.Request("POST", "/", json=layer(1, 3)).read(),
                         headers={**auth(owner), "Content-Type": "application/geo+json"}).json()
        r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": {
            "href": up["href"]}}}, headers={**auth(owner), "Prefer": "respond-async"})
        job_id = r.json()["jobID"]
        wait_done(client, f"/jobs/{job_id}", owner, time.monotonic() + 120)
        for method, path in (("GET", "/jobs/{}"), ("GET", "/jobs/{}/results"),
                             ("GET", "/jobs/{}/downloads/result.gpkg"), ("DELETE", "/jobs/{}"),
                             ("GET", "/uploads/{}")):
            hidden = up["id"] if "uploads" in path else job_id
            theirs = client.request(method, path.format(hidden), headers=auth(other))
            unknown = client.request(method, path.format(nobody), headers=auth(other))
            checks[f"other key: {method} {path}"] = (
                theirs.status_code == unknown.status_code == 404
                and theirs.json()["detail"].replace(hidden, nobody) == unknown.json()["detail"])
        listed = client.get("/jobs?limit=10000", headers=auth(other)).json()["jobs"]
        checks["other key: job not listed"] = job_id not in {j["jobID"] for j in listed}
        for method, path in (("GET", "/jobs"), ("GET", f"/jobs/{job_id}"), ("POST", "/uploads"),
                             ("POST", "/processes/echo/execution"), ("GET", "/metrics")):
            checks[f"no key: {method} {path}"] = client.request(method, path).status_code == 401
        checks["owner still sees its job"] = client.get(
            f"/jobs/{job_id}", headers=auth(owner)).json()["status"] == "successful"
        burst = [client.get("/jobs", headers=auth(KEYS[3])).status_code for _ in range(80)]
        limited = [c for c in burst if c == 429]
        checks["rate limit answers 429"] = bool(limited) and set(burst) == {200, 429}
        head = client.get(f"/jobs/{job_id}", headers=auth(owner)).headers
        checks["security headers"] = (
            head.get("x-content-type-options") == "nosniff"
            and head.get("cache-control") == "no-store"
            and head.get("content-security-policy", "").startswith("default-src"))
    svc.kill()
    for name, passed in checks.items():
        if not passed:
            print("access check failed:", name)
    rows = [("access: checks run (other key, no key, rate limit, headers)",
             f"{len(checks)}, {sum(checks.values())} passed"),
            ("access: rate limit", f"{len(burst) - len(limited)} of {len(burst)} rapid "
                                   "requests of one key answered, the rest 429")]
    return rows, len(checks) - sum(checks.values())


# --- report -----------------------------------------------------------------------------------


def write_section(path: Path, body: str) -> None:
    """Replace the text between this script's markers (add them at the end when missing)."""
    text = path.read_text(encoding="utf-8") if path.exists() else TITLE
    section = f"{MARK_BEGIN}\n{body.rstrip()}\n{MARK_END}"
    if MARK_BEGIN in text and MARK_END in text:
        head, rest = text.split(MARK_BEGIN, 1)
        text = head + section + rest.split(MARK_END, 1)[1]
    else:
        text = text.rstrip("\n") + "\n\n" + section + "\n"
    path.write_text(text, encoding="utf-8")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--requests", type=int, default=120)
    parser.add_argument("--clients", type=int, default=8)
    parser.add_argument("--jobs", type=int, default=4, help="asynchronous jobs in the load")
    parser.add_argument("--passes", type=int, default=40, help="passes in their layer")
    parser.add_argument("--rounds", type=int, default=6, help="kill rounds")
    parser.add_argument("--workers", type=int, default=3)
    parser.add_argument("--out", type=Path, default=REPO / "bench" / "robustness.md")
    args = parser.parse_args()
    load_before = os.getloadavg()[0]
    t0 = time.monotonic()
    with tempfile.TemporaryDirectory(prefix="rutwise-robust-") as folder:
        work = Path(folder)
        svc = Service(work / "data", args.workers)
        try:
            svc.start()
            rows = run_load(svc, args, work)
            svc.kill()
            rows += run_kills(svc, args, work)
            access_rows, access_failed = run_access(svc, work)
            rows += access_rows
        finally:
            svc.kill()
    rows += [("whole run", f"{time.monotonic() - t0:.0f} s"),
             ("machine", f"{os.cpu_count()} CPUs (load average {load_before:.2f} before), "
                         f"Python {platform.python_version()}, {platform.system()}")]
    table = "| measure | value |\n| --- | --- |\n" + "\n".join(f"| {a} | {b} |" for a, b in rows)
    body = (
        "## HTTP service: load, kills, access control (bench/robustness_service.py)\n\n"
        f"The real service (uvicorn on loopback, API keys on, {args.workers} worker "
        "processes) under three parts: a load of synchronous and asynchronous analyses; "
        "rounds of SIGKILL (server and worker processes together) with jobs queued, running "
        "or writing results and an upload half sent, each followed by a restart; and the "
        "access-control checks with a second key. A result counts as corrupt when a served "
        "file differs from the SHA-256 in its job document or its layers differ from the "
        "`layer_sha256` in its run metadata. A job counts as untruthful when it is neither "
        "successful with such verified files nor failed with a reason.\n\n"
        f"{table}\n\n"
        "Jobs caught by a kill read `failed` (503, 'submit it again') after the restart; "
        "those that finished before it keep their results. The CPUs were shared with other "
        "work.\n\nRun: `.venv/bin/python bench/robustness_service.py`\n")
    print(table)
    write_section(args.out, body)
    bad = {"load: errors", "load: lost jobs (not successful)",
           "load: result files not matching their checksums",
           "kills: jobs in an untruthful state",
           "kills: corrupt results (files not matching checksums)",
           "kills: temporary files or unrecorded uploads left",
           "kills: database integrity_check failures"}
    failed = any(value != "0" for name, value in rows if name in bad) or access_failed
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
