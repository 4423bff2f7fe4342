"""The real service: uvicorn in a subprocess on a loopback port, a temporary data folder.

Covers sync and async execution end to end, a restart between submission and retrieval, a
crash while a job runs, and a general-purpose OGC API client (OWSLib).
"""

from __future__ import annotations

import signal
from typing import Any

import httpx
from owslib.ogcapi.processes import Processes

from .conftest import LiveServer, poll, two_track_layer


def _wait_status(url: str, wanted: set[str], timeout: float = 60) -> dict[str, Any]:
    def check() -> dict[str, Any] | None:
        body: dict[str, Any] = httpx.get(url, timeout=10).json()
        return body if body["status"] in wanted else None

    result: dict[str, Any] = poll(check, timeout=timeout)
    return result


def test_sync_and_async_end_to_end(live_server: LiveServer, ruts_fc: dict[str, Any]) -> None:
    base = live_server.url
    r = httpx.post(f"{base}/processes/analyze/execution", timeout=60,
                   json={"inputs": {"ruts": ruts_fc}, "response": "document"})
    assert r.status_code == 200
    sync_doc = r.json()
    assert sync_doc["passes"]["value"]["features"][0]["properties"]["verdict"] == "decided"
    r = httpx.post(f"{base}/processes/analyze/execution", timeout=60,
                   json={"inputs": {"ruts": ruts_fc}, "response": "document"},
                   headers={"Prefer": "respond-async"})
    assert r.status_code == 201 and r.headers["preference-applied"] == "respond-async"
    status = _wait_status(r.headers["location"], {"successful"})
    results = [link["href"] for link in status["links"] if link["rel"].endswith("/results")]
    async_doc = httpx.get(results[0], timeout=10).json()
    assert (async_doc["passes"]["value"]["features"]
            == sync_doc["passes"]["value"]["features"])


def test_results_survive_a_restart_and_a_crash_fails_the_running_job(
        live_server: LiveServer) -> None:
    base = live_server.url
    layer = two_track_layer(n_passes=2, seed=11)
    r = httpx.post(f"{base}/processes/analyze/execution", timeout=30, headers={
        "Prefer": "respond-async"}, json={
        "inputs": {"ruts": layer},
        "outputs": {"passes": {}, "ruts": {"transmissionMode": "reference"}},
        "response": "document"})
    done_url = r.headers["location"]
    _wait_status(done_url, {"successful"})
    before = httpx.get(done_url + "/results", timeout=10).json()

    # a job still queued or running when the service stops gracefully
    r = httpx.post(f"{base}/processes/echo/execution", timeout=30, headers={
        "Prefer": "respond-async"}, json={"inputs": {"message": "x", "pause_s": 120}})
    stopped_url = r.headers["location"]
    _wait_status(stopped_url, {"running"})
    live_server.stop(signal.SIGTERM)
    live_server.start()
    assert httpx.get(done_url, timeout=10).json()["status"] == "successful"
    after = httpx.get(done_url + "/results", timeout=10).json()
    assert after["passes"] == before["passes"]
    gpkg = httpx.get(after["ruts"]["href"], timeout=10)
    assert gpkg.status_code == 200 and gpkg.content.startswith(b"SQLite format 3")
    stopped = httpx.get(stopped_url, timeout=10).json()
    assert stopped["status"] == "failed" and "service stopped" in stopped["message"]

    # a crash: the server and its workers are killed while a job runs
    r = httpx.post(f"{base}/processes/echo/execution", timeout=30, headers={
        "Prefer": "respond-async"}, json={"inputs": {"message": "x", "pause_s": 120}})
    killed_url = r.headers["location"]
    _wait_status(killed_url, {"running"})
    live_server.stop(signal.SIGKILL)
    live_server.start()
    killed = httpx.get(killed_url, timeout=10).json()
    assert killed["status"] == "failed" and "service stopped" in killed["message"]
    problem = httpx.get(killed_url + "/results", timeout=10)
    assert problem.status_code == 503
    assert problem.headers["content-type"] == "application/problem+json"
    assert "Submit it again" in problem.json()["detail"]
    assert httpx.get(done_url, timeout=10).json()["status"] == "successful"


def test_owslib_lists_describes_and_executes(live_server: LiveServer,
                                             ruts_fc: dict[str, Any]) -> None:
    client = Processes(live_server.url + "/")
    assert "analyze" in [p["id"] for p in client.processes()]
    description = client.process("analyze")
    assert set(description["outputs"]) == {"passes", "ruts"}
    result = client.execute("analyze", inputs={"ruts": {"value": ruts_fc}},
                            response="document")
    passes = result["passes"]["value"]["features"]
    assert len(passes) == 1 and passes[0]["properties"]["verdict"] == "decided"
    status = client.execute("echo", inputs={"message": "from a desktop GIS"}, async_=True)
    assert status["status"] in ("accepted", "running", "successful")
    _wait_status(f"{live_server.url}/jobs/{status['jobID']}", {"successful"})
    results = httpx.get(f"{live_server.url}/jobs/{status['jobID']}/results", timeout=10)
    assert results.json()["echo"]["value"] == "from a desktop GIS"  # owslib asks for a document
