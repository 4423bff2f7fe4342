"""API keys, isolation between keys, CORS."""

from __future__ import annotations

import json
from typing import Any

import pytest
from fastapi.testclient import TestClient

ALICE = {"Authorization": "Bearer key-of-ailsa"}
BORIS = {"Authorization": "Bearer key-of-brodie"}


@pytest.fixture
def guarded(make_client: Any) -> TestClient:
    client: TestClient = make_client(api_keys="key-of-ailsa,key-of-brodie")
    return client


def test_keys_guard_execution_uploads_and_jobs(guarded: TestClient) -> None:
    for method, path in (("POST", "/processes/echo/execution"), ("GET", "/jobs"),
                         ("POST", "/uploads"), ("GET", "/jobs/" + "a" * 32)):
        for headers in ({}, {"Authorization": "Bearer wrong"}, {"Authorization": "Basic x"}):
            r = guarded.request(method, path, headers={**headers,
                                                       "Content-Type": "application/json"},
                                content=b'{"inputs": {"message": "x"}}')
            assert r.status_code == 401, (method, path, headers)
            assert r.headers["content-type"] == "application/problem+json"
            assert r.headers["www-authenticate"].startswith("Bearer")
    # discovery stays open
    for path in ("/", "/conformance", "/processes", "/processes/analyze", "/health"):
        assert guarded.get(path).status_code == 200


def test_a_job_is_visible_only_to_its_key(guarded: TestClient) -> None:
    r = guarded.post("/processes/echo/execution", json={"inputs": {"message": "mine"}},
                     headers={**ALICE, "Prefer": "respond-async"})
    url = r.headers["location"]
    assert guarded.get(url, headers=ALICE).status_code == 200
    theirs = guarded.get(url, headers=BORIS)
    unknown = guarded.get("/jobs/" + "f" * 32, headers=BORIS)
    # the same answer as for a job that does not exist: no existence leak
    assert theirs.status_code == unknown.status_code == 404
    assert theirs.json()["type"] == unknown.json()["type"]
    assert guarded.get(url + "/results", headers=BORIS).status_code == 404
    assert guarded.delete(url, headers=BORIS).status_code == 404
    assert guarded.get("/jobs", headers=BORIS).json()["jobs"] == []
    assert len(guarded.get("/jobs", headers=ALICE).json()["jobs"]) == 1
    assert guarded.get(url, headers=ALICE).json()["status"] != "dismissed"


def test_an_upload_is_usable_only_by_its_key(guarded: TestClient,
                                             ruts_fc: dict[str, Any]) -> None:
    r = guarded.post("/uploads", content=json.dumps(ruts_fc).encode(),
                     headers={**ALICE, "Content-Type": "application/geo+json"})
    href = r.json()["href"]
    assert guarded.get(href, headers=BORIS).status_code == 404
    r = guarded.post("/processes/analyze/execution", headers=BORIS,
                     json={"inputs": {"ruts": {"href": href}}})
    assert r.status_code == 400 and "no upload" in r.json()["detail"]
    r = guarded.post("/processes/analyze/execution", headers=ALICE,
                     json={"inputs": {"ruts": {"href": href}}, "response": "document"})
    assert r.status_code == 200


def test_cors_preflight_and_exposed_headers(make_client: Any) -> None:
    client = make_client(cors_origins="https://maps.example")
    r = client.options("/processes/echo/execution", headers={
        "Origin": "https://maps.example", "Access-Control-Request-Method": "POST",
        "Access-Control-Request-Headers": "content-type, prefer, authorization"})
    assert r.status_code == 200
    assert r.headers["access-control-allow-origin"] == "https://maps.example"
    r = client.post("/processes/echo/execution", json={"inputs": {"message": "x"}},
                    headers={"Origin": "https://maps.example", "Prefer": "respond-async"})
    exposed = {h.strip().lower() for h in r.headers["access-control-expose-headers"].split(",")}
    assert {"location", "preference-applied", "link"} <= exposed
    r = client.get("/processes", headers={"Origin": "https://elsewhere.example"})
    assert "access-control-allow-origin" not in r.headers


def test_no_cors_headers_unless_configured(client: TestClient) -> None:
    r = client.get("/processes", headers={"Origin": "https://maps.example"})
    assert "access-control-allow-origin" not in r.headers
