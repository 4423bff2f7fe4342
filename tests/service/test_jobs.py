"""Jobs: dismissal stops the worker process, the time limit, recovery, metrics."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient

from service.jobs import JobStore

from .conftest import poll


def _gone(pid: int) -> bool:
    """True once the process no longer runs (gone, or a zombie waiting to be reaped)."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] == "Z"
    except FileNotFoundError:
        return True


def _store(client: TestClient) -> JobStore:
    store: JobStore = client.app.state.service.store  # type: ignore[attr-defined]
    return store


def test_dismiss_stops_the_running_worker(client: TestClient) -> None:
    r = client.post("/processes/echo/execution",
                    json={"inputs": {"message": "x", "pause_s": 120}},
                    headers={"Prefer": "respond-async"})
    url = r.headers["location"]
    job_id = r.json()["jobID"]
    poll(lambda: client.get(url).json()["status"] == "running")
    pid = _store(client).get_job(job_id).worker_pid  # type: ignore[union-attr]
    assert pid is not None and not _gone(pid)
    r = client.delete(url)
    assert r.status_code == 200 and r.json()["status"] == "dismissed"
    poll(lambda: _gone(pid), timeout=10)
    assert client.get(url).json()["status"] == "dismissed"  # documented: stays, reads dismissed
    assert client.get(url + "/results").status_code == 410
    assert not _store(client).job_dir(job_id).exists()


def test_dismiss_a_queued_job_never_starts_it(make_client: Any) -> None:
    client = make_client(workers=1)
    first = client.post("/processes/echo/execution",
                        json={"inputs": {"message": "a", "pause_s": 120}},
                        headers={"Prefer": "respond-async"}).headers["location"]
    second = client.post("/processes/echo/execution", json={"inputs": {"message": "b"}},
                         headers={"Prefer": "respond-async"}).headers["location"]
    assert client.get(second).json()["status"] == "accepted"
    assert client.delete(second).json()["status"] == "dismissed"
    client.delete(first)
    third = client.post("/processes/echo/execution", json={"inputs": {"message": "c"}})
    assert third.status_code == 200  # the slot was freed by the dismissal
    body = client.get(second).json()
    assert body["status"] == "dismissed" and "started" not in body


def test_a_job_over_the_time_limit_fails_with_the_reason(make_client: Any) -> None:
    client = make_client(job_timeout_s=1.0)
    r = client.post("/processes/echo/execution", json={"inputs": {"message": "x",
                                                                  "pause_s": 60}})
    assert r.status_code == 413 and "1 s" in r.json()["detail"]
    assert "job_timeout_s" in r.json()["detail"]


def test_jobs_left_active_are_failed_on_startup(tmp_path: Path, make_client: Any) -> None:
    store = JobStore(tmp_path / "data")
    queued = store.create_job("", "echo", {"inputs": {}, "plan": {}, "response": "raw"})
    running = store.create_job("", "echo", {"inputs": {}, "plan": {}, "response": "raw"})
    store.mark_running(running.id, 999_999)
    client = make_client(data_dir=tmp_path / "data")
    for job in (queued, running):
        body = client.get(f"/jobs/{job.id}").json()
        assert body["status"] == "failed"
        assert "service stopped" in body["message"]
        assert client.get(f"/jobs/{job.id}/results").json()["status"] == 503


def test_metrics_count_jobs_and_durations(client: TestClient) -> None:
    client.post("/processes/echo/execution", json={"inputs": {"message": "x"}})
    client.post("/processes/analyze/execution", json={"inputs": {"ruts": {
        "type": "FeatureCollection", "features": []}}})
    text = client.get("/metrics").text
    assert 'rutwise_jobs{status="successful"} 1' in text
    assert 'rutwise_jobs{status="failed"} 1' in text
    assert "rutwise_job_duration_seconds_count 2" in text
    assert client.get("/health").json()["status"] == "ok"
