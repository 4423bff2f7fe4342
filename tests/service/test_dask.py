"""``analyze`` jobs on a Dask cluster (setting ``scheduler``): same results as a local run,
same problem documents, dismissal cancels the cluster task, an unreachable scheduler is a 503.

The cluster is a LocalCluster on loopback with one single-threaded worker process; it shares
the test's file system, as the service's data_dir must be shared with real Dask workers.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient
from pyogrio.raw import read as raw_read

from service.settings import load_settings

from .conftest import free_port, poll
from .test_jobs import _gone

distributed = pytest.importorskip("distributed")

ASYNC = {"Prefer": "respond-async"}
DEADLINE_S = 40.0


@pytest.fixture(scope="module")
def cluster(request: pytest.FixtureRequest) -> Any:
    local = distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                     host="127.0.0.1", dashboard_address=None)
    request.addfinalizer(local.close)
    return local


@pytest.fixture
def dask_client(cluster: Any) -> Iterator[Any]:
    client = distributed.Client(cluster.scheduler_address, set_as_default=False)
    yield client
    client.close()


def _analysis_keys(client: Any) -> list[str]:
    """Keys of analysis tasks the scheduler still holds."""
    def keys(dask_scheduler: Any) -> list[str]:
        return [str(k) for k in dask_scheduler.tasks if str(k).startswith("first_step")]

    found: list[str] = client.run_on_scheduler(keys)
    return found


def _run_async(client: TestClient, inputs: dict[str, Any], outputs: dict[str, Any]) -> str:
    r = client.post("/processes/analyze/execution", headers=ASYNC,
                    json={"inputs": inputs, "outputs": outputs, "response": "document"})
    assert r.status_code == 201, r.text
    url: str = r.headers["location"]
    return url


def _finished(client: TestClient, url: str) -> Callable[[], str | None]:
    def check() -> str | None:
        status: str = client.get(url).json()["status"]
        return status if status in ("successful", "failed", "dismissed") else None
    return check


def test_a_cluster_job_gives_the_local_results(make_client: Any, cluster: Any,
                                               ruts_fc: dict[str, Any], tmp_path: Path) -> None:
    remote = make_client(scheduler=cluster.scheduler_address)
    health = remote.get("/health").json()
    assert health["cluster"] == {"configured": True, "reachable": True}
    url = _run_async(remote, {"ruts": ruts_fc},
                     {"passes": {}, "ruts": {"transmissionMode": "reference"}})
    assert poll(_finished(remote, url), timeout=DEADLINE_S) == "successful", \
        remote.get(url).json()
    got = remote.get(url + "/results").json()

    local = make_client(data_dir=tmp_path / "local")
    assert local.get("/health").json()["cluster"] == {"configured": False}
    r = local.post("/processes/analyze/execution",
                   json={"inputs": {"ruts": ruts_fc}, "outputs": {"passes": {}},
                         "response": "document"})
    assert r.status_code == 200, r.text
    # reference: the same request computed in the service's own worker process
    want = r.json()["passes"]["value"]
    have = got["passes"]["value"]
    assert len(have["features"]) == len(want["features"]) >= 1
    for h, w in zip(have["features"], want["features"], strict=True):
        assert h["properties"]["verdict"] == w["properties"]["verdict"]
        if w["properties"]["wheelbase_m"] is None:
            assert h["properties"]["wheelbase_m"] is None
        else:
            assert h["properties"]["wheelbase_m"] == pytest.approx(
                w["properties"]["wheelbase_m"], abs=1e-9)
        assert h["properties"] == pytest.approx(w["properties"], abs=1e-9)
        # GeoJSON coordinates are rounded to 1e-8 degrees
        np.testing.assert_allclose(h["geometry"]["coordinates"], w["geometry"]["coordinates"],
                                   rtol=0, atol=1.01e-8)
    meta = have["rutwise_metadata"]
    assert meta["output_crs"] == "EPSG:4326" and "qualified examiner" in meta["caution"]
    assert meta["passes_found"] == want["rutwise_metadata"]["passes_found"]

    gpkg = remote.get(got["ruts"]["href"])
    assert gpkg.status_code == 200
    path = tmp_path / "result.gpkg"
    path.write_bytes(gpkg.content)
    _m, _f, _g, (keys, values) = raw_read(str(path), layer="run_metadata",
                                          read_geometry=False)
    assert "qualified examiner" in dict(zip(keys, values, strict=True))["caution"]


def test_a_failure_on_the_cluster_is_the_local_problem(make_client: Any, cluster: Any,
                                                       ruts_fc: dict[str, Any],
                                                       tmp_path: Path) -> None:
    # a geocentric CRS passes the service's check and is refused by the engine's analysis
    body = {"inputs": {"ruts": ruts_fc, "crs": "EPSG:4978"}}
    remote = make_client(scheduler=cluster.scheduler_address)
    local = make_client(data_dir=tmp_path / "local")
    r_remote = remote.post("/processes/analyze/execution", json=body)
    r_local = local.post("/processes/analyze/execution", json=body)
    assert r_local.status_code == 400 and r_local.json()["type"].endswith("crs-error")
    assert r_remote.status_code == r_local.status_code
    def same(doc: dict[str, Any]) -> dict[str, Any]:
        return {k: v for k, v in doc.items() if k != "jobID"}

    assert same(r_remote.json()) == same(r_local.json())


def test_dismissing_a_cluster_job_cancels_its_task(make_client: Any, cluster: Any,
                                                   dask_client: Any,
                                                   ruts_fc: dict[str, Any]) -> None:
    hold = distributed.Event("rutwise-test-hold", client=dask_client)
    # occupy the only worker thread so that the job's task waits on the cluster
    blocker = dask_client.submit(lambda: distributed.Event("rutwise-test-hold").wait(60),
                                 pure=False)
    try:
        remote = make_client(scheduler=cluster.scheduler_address)
        url = _run_async(remote, {"ruts": ruts_fc}, {"passes": {}})
        poll(lambda: _analysis_keys(dask_client), timeout=DEADLINE_S)
        job = remote.get(url).json()
        assert job["status"] == "running"
        pid = remote.app.state.service.store.get_job(job["jobID"]).worker_pid
        r = remote.delete(url)
        assert r.status_code == 200 and r.json()["status"] == "dismissed"
        poll(lambda: not _analysis_keys(dask_client), timeout=10)
        assert remote.get(url).json()["status"] == "dismissed"
        poll(lambda: _gone(pid), timeout=10)
    finally:
        hold.set()
        blocker.result(timeout=30)


def test_the_scheduler_setting_comes_from_the_file_or_the_environment(tmp_path: Path) -> None:
    assert load_settings({}).scheduler == ""
    toml = tmp_path / "rutwise.toml"
    toml.write_text('scheduler = "tcp://10.0.0.5:8786"\n', encoding="utf-8")
    env = {"RUTWISE_SETTINGS": str(toml)}
    assert load_settings(env).scheduler == "tcp://10.0.0.5:8786"
    env["RUTWISE_SCHEDULER"] = "tcp://10.0.0.6:8786"
    assert load_settings(env).scheduler == "tcp://10.0.0.6:8786"


def test_an_unreachable_scheduler_answers_503(make_client: Any,
                                              ruts_fc: dict[str, Any]) -> None:
    client = make_client(scheduler=f"tcp://127.0.0.1:{free_port()}")
    assert client.get("/health").json()["cluster"] == {"configured": True, "reachable": False}
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": ruts_fc}})
    assert r.status_code == 503, r.text
    problem = r.json()
    assert problem["type"] == "urn:rutwise:problem:cluster-unavailable"
    assert "does not answer" in problem["detail"] and "RUTWISE_SCHEDULER" in problem["detail"]
    # the other processes do not use the cluster
    assert client.post("/processes/echo/execution",
                       json={"inputs": {"message": "x"}}).status_code == 200
