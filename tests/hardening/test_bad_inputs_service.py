"""The service on the bad-input corpus: each file is uploaded and, when the upload is taken,
analysed; every refusal is a specific 4xx problem document (application/problem+json) whose
type names the problem, never a 500.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.settings import load_settings

from ..service.conftest import make_client  # noqa: F401 - a fixture used below
from .make_corpus import _MAKERS, Case, million_vertices, write_corpus

PROBLEM = "application/problem+json"


@pytest.fixture(scope="module")
def corpus(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Case]:
    return {c.name: c for c in write_corpus(tmp_path_factory.mktemp("corpus"))}


@pytest.fixture(scope="module")
def shared_client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[TestClient]:
    """One service (default settings) for the whole corpus, as tests/service builds them."""
    settings = load_settings({}, data_dir=tmp_path_factory.mktemp("svc") / "data")
    with TestClient(create_app(settings), raise_server_exceptions=False) as client:
        yield client


def upload_then_analyze(client: TestClient, path: Path) -> Any:
    """POST the file to /uploads; when taken, execute analyze on it (synchronously)."""
    r = client.post(
        "/uploads",
        content=path.read_bytes(),
        params={"name": path.name},
        headers={"Content-Type": "application/octet-stream"},
    )
    if r.status_code != 201:
        return r
    return client.post(
        "/processes/analyze/execution",
        json={"inputs": {"ruts": {"href": r.json()["href"]}}, "outputs": {"passes": {}}},
    )


def check_answer(r: Any, case: Case) -> None:
    assert r.status_code == case.status, r.text
    if case.status == 200:
        assert r.json()["type"] == "FeatureCollection"
        return
    assert r.headers["content-type"] == PROBLEM
    doc = r.json()
    assert doc["type"].endswith(":" + case.problem), doc
    assert doc["title"] and doc["detail"] and doc["status"] == case.status
    assert "/uploads/" not in doc["detail"] and "Traceback" not in doc["detail"]


@pytest.mark.parametrize("name", [m.__name__ for m in _MAKERS])
def test_each_bad_input_gets_a_specific_problem(
    corpus: dict[str, Case], shared_client: TestClient, name: str
) -> None:
    check_answer(upload_then_analyze(shared_client, corpus[name].file), corpus[name])


@pytest.mark.parametrize(
    "name",
    ["truncated_json", "invalid_json", "binary_garbage_json", "long_number", "deeply_nested"],
)
def test_broken_json_bodies_are_400_malformed_json(
    corpus: dict[str, Case], shared_client: TestClient, name: str
) -> None:
    """The same broken GeoJSON sent inline in an execute request (Python's json, not GDAL's)."""
    body = b'{"inputs": {"ruts": ' + corpus[name].file.read_bytes() + b"}}"
    r = shared_client.post(
        "/processes/analyze/execution", content=body, headers={"Content-Type": "application/json"}
    )
    assert r.status_code == 400 and r.headers["content-type"] == PROBLEM, r.text
    assert r.json()["type"].endswith(":malformed-json")


@pytest.mark.parametrize("depth", [65, 500, 900])
def test_deep_nesting_inside_valid_json_is_refused_before_a_job(
    shared_client: TestClient, depth: int
) -> None:
    """Found by the corpus: 500 levels parsed, then failed pickling into the worker (500)."""
    nested = "[" * depth + "0" + "]" * depth
    fc = (
        '{"type": "FeatureCollection", "features": [{"type": "Feature", "properties": '
        '{"deep": ' + nested + '}, "geometry": null}]}'
    )
    r = shared_client.post(
        "/processes/analyze/execution",
        content='{"inputs": {"ruts": ' + fc + "}}",
        headers={"Content-Type": "application/json"},
    )
    assert r.status_code == 400 and r.json()["type"].endswith(":malformed-json"), r.text
    assert f"nested {depth + 6} levels" in r.json()["detail"]
    jobs = shared_client.get("/jobs").json()["jobs"]
    assert all(j["status"] != "failed" or "Recursion" not in j["message"] for j in jobs)


def test_shallow_properties_still_pass_the_depth_check(
    shared_client: TestClient, corpus: dict[str, Case]
) -> None:
    fc = json.loads(corpus["mixed_types"].file.read_text())
    fc["features"][0]["properties"] = {"a": [[[[[[[[1]]]]]]]]}
    r = shared_client.post("/processes/analyze/execution", json={"inputs": {"ruts": fc}})
    assert r.status_code == 200, r.text


def test_a_million_vertices_meet_the_vertex_limit(
    make_client: Callable[..., TestClient],  # noqa: F811 - the fixture imported above
    tmp_path: Path,
) -> None:
    """max_vertices (service setting, default 2 000 000) refuses the layer at upload."""
    client = make_client(max_vertices=500_000)
    r = upload_then_analyze(client, million_vertices(tmp_path))
    assert r.status_code == 413 and r.json()["type"].endswith(":limit-exceeded")
    assert "1000000 vertices" in r.json()["detail"]
