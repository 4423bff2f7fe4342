"""Crash safety: the real service killed with SIGKILL in the middle of an upload, of a running
job and of writing a result, then restarted.

After each restart: the database passes SQLite's integrity check, every job is either
successful with result files that match their checksums or failed with a reason, nothing
half-written is served or left behind, and the service keeps working.
"""

from __future__ import annotations

import hashlib
import signal
import socket
import sqlite3
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from geoops.integrity import verify_result
from service.jobs import PAUSE_VAR

from .conftest import LiveServer, poll, two_track_layer


@pytest.fixture
def server(tmp_path: Path) -> Iterator[LiveServer]:
    live = LiveServer(tmp_path / "data", env={"RUTWISE_BODY_TIMEOUT_S": "1.5"})
    live.start()
    yield live
    live.stop(signal.SIGKILL)


def _database_sound(data_dir: Path) -> None:
    with sqlite3.connect(data_dir / "rutwise.sqlite") as db:
        # source: SQLite documentation, PRAGMA integrity_check answers one row 'ok'
        assert db.execute("PRAGMA integrity_check").fetchall() == [("ok",)]


def _async(base: str, process: str, inputs: dict[str, Any], **extra: Any) -> str:
    r = httpx.post(f"{base}/processes/{process}/execution", timeout=30,
                   headers={"Prefer": "respond-async"}, json={"inputs": inputs, **extra})
    assert r.status_code == 201, r.text
    return str(r.headers["location"])


def _status(url: str, wanted: set[str]) -> dict[str, Any]:
    doc: dict[str, Any] = poll(lambda: (d := httpx.get(url, timeout=10).json())["status"]
                               in wanted and d, timeout=60)
    return doc


def _slow_upload(server: LiveServer, first: bytes) -> socket.socket:
    """An upload whose chunked body stops after its first chunk (the socket stays open)."""
    sock = socket.create_connection(("127.0.0.1", server.port), timeout=10)
    sock.sendall(f"POST /uploads HTTP/1.1\r\nHost: 127.0.0.1:{server.port}\r\n"
                 "Content-Type: application/geo+json\r\nTransfer-Encoding: chunked\r\n\r\n"
                 f"{len(first):x}\r\n".encode() + first + b"\r\n")
    return sock


def _truthful(server: LiveServer, url: str, tmp_path: Path) -> str:
    """Check one job after a restart; returns its status."""
    job = httpx.get(url, timeout=10).json()
    results = httpx.get(url + "/results", timeout=10)
    if job["status"] == "failed":
        assert results.status_code >= 400 and results.json()["detail"], job
        assert job["message"].startswith("failed")
        assert "result_sha256" not in job
        return "failed"
    assert job["status"] == "successful", job
    assert results.status_code in (200, 204)
    for name, expected in job["result_sha256"].items():
        served = httpx.get(f"{url}/downloads/{name}", timeout=10).content
        assert hashlib.sha256(served).hexdigest() == expected, name
        (tmp_path / name).write_bytes(served)
        if name.endswith((".gpkg", ".geojson")):
            assert verify_result(tmp_path / name).ok, name
    return "successful"


def test_kills_leave_no_corrupt_job_or_file(server: LiveServer, tmp_path: Path) -> None:
    base, data = server.url, server.data_dir
    layer = httpx.Request("POST", "/", json=two_track_layer(n_passes=2, seed=5)).read()
    upload = httpx.post(f"{base}/uploads", content=layer, timeout=30,
                        headers={"Content-Type": "application/geo+json"}).json()
    done = _async(base, "analyze", {"ruts": {"href": upload["href"]}},
                  outputs={"ruts": {"transmissionMode": "reference"}})
    _status(done, {"successful"})

    # a body that stalls past body_timeout_s is refused and leaves nothing behind
    with _slow_upload(server, layer[:500]) as sock:
        answer = sock.recv(4096)
    assert answer.startswith(b"HTTP/1.1 408"), answer[:80]
    assert len(list((data / "uploads").iterdir())) == 1

    # kill 1: a job running and an upload half received
    running = _async(base, "echo", {"message": "x", "pause_s": 120})
    _status(running, {"running"})
    with _slow_upload(server, layer[:500]):
        poll(lambda: list((data / "uploads").glob("*/.partial")), timeout=10)
        server.stop(signal.SIGKILL)
    _database_sound(data)

    # kill 2: two jobs each stopped between writing a result file and renaming it into place
    server.env[PAUSE_VAR] = "120:passes.geojson,results.json"
    server.start()
    assert [p.name for p in (data / "uploads").iterdir()] == [upload["id"]]
    writing = _async(base, "analyze", {"ruts": {"href": upload["href"]}})
    committing = _async(base, "echo", {"message": "y"})
    for url, temp in ((writing, ".passes.geojson.*"), (committing, ".results.json.*")):
        folder = data / "jobs" / url.rsplit("/", 1)[1]

        def held_or_ended(folder: Path = folder, temp: str = temp, url: str = url) -> Any:
            return list(folder.glob(temp)) or httpx.get(url, timeout=10).json()["status"] in (
                "successful", "failed")

        held = poll(held_or_ended, timeout=60)
        assert held is not True, httpx.get(url, timeout=10).json()  # it ended without pausing
    server.stop(signal.SIGKILL)
    _database_sound(data)

    del server.env[PAUSE_VAR]
    server.start()
    outcome = {url: _truthful(server, url, tmp_path)
               for url in (done, running, writing, committing)}
    assert outcome == {done: "successful", running: "failed", writing: "failed",
                       committing: "failed"}
    for url in (writing, committing):
        assert httpx.get(url + "/downloads/passes.geojson", timeout=10).status_code >= 400
    assert not list((data / "jobs").glob("*/.*")), "temporary files left behind"
    assert [p.name for p in (data / "uploads").iterdir()] == [upload["id"]]
    again = httpx.post(f"{base}/processes/echo/execution", timeout=30,
                       json={"inputs": {"message": "still here"}})
    assert again.status_code == 200 and again.text == "still here"
    _database_sound(data)
