"""Access control with API keys: every route audited with two keys, the rate limit per key,
the sync time limit, and the security headers."""

from __future__ import annotations

import json
from typing import Any

import pytest
from fastapi.testclient import TestClient

from .conftest import poll

AILSA = {"Authorization": "Bearer key-of-ailsa"}
BRODIE = {"Authorization": "Bearer key-of-brodie"}
KEYS = "key-of-ailsa,key-of-brodie"
NOBODY = "0" * 32  # an id that exists for no one

#: every route of the service -> who may use it when keys are on
OPEN_ROUTES = {("GET", "/"), ("GET", "/conformance"), ("GET", "/processes"),
               ("GET", "/processes/{process_id}"), ("GET", "/health")}
KEYED_ROUTES = {("POST", "/processes/{process_id}/execution"), ("GET", "/jobs"),
                ("GET", "/jobs/{job_id}"), ("GET", "/jobs/{job_id}/results"),
                ("GET", "/jobs/{job_id}/downloads/{name}"), ("DELETE", "/jobs/{job_id}"),
                ("POST", "/uploads"), ("GET", "/uploads/{upload_id}"), ("GET", "/metrics")}


def _routes(client: TestClient) -> set[tuple[str, str]]:
    """(method, path) of every operation the API definition lists."""
    paths = client.get("/openapi.json").json()["paths"]
    return {(method.upper(), path) for path, ops in paths.items() for method in ops}


def _same_answer(mine: Any, unknown: Any, hidden_id: str) -> None:
    """Someone else's resource must answer exactly as one that does not exist."""
    assert mine.status_code == unknown.status_code == 404
    a, b = mine.json(), unknown.json()
    assert a["type"] == b["type"] and a["title"] == b["title"]
    assert a["detail"].replace(hidden_id, NOBODY) == b["detail"]


@pytest.fixture
def guarded(make_client: Any) -> TestClient:
    client: TestClient = make_client(api_keys=KEYS)
    return client


def test_every_route_is_audited(guarded: TestClient) -> None:
    assert _routes(guarded) == OPEN_ROUTES | KEYED_ROUTES  # a new route joins this audit
    for method, path in sorted(KEYED_ROUTES):
        url = (path.replace("{process_id}", "echo").replace("{job_id}", NOBODY)
               .replace("{upload_id}", NOBODY).replace("{name}", "x.json"))
        r = guarded.request(method, url, headers={"Content-Type": "application/json"},
                            content=b'{"inputs": {"message": "x"}}')
        assert r.status_code == 401, (method, path)
    for method, path in OPEN_ROUTES:
        assert guarded.request(method, path.replace("{process_id}", "echo")).status_code == 200


def test_no_route_shows_one_keys_job_or_upload_to_another(guarded: TestClient,
                                                         ruts_fc: dict[str, Any]) -> None:
    upload = guarded.post("/uploads", content=json.dumps(ruts_fc).encode(),
                          headers={**AILSA, "Content-Type": "application/geo+json"}).json()
    r = guarded.post("/processes/analyze/execution", headers={**AILSA, "Prefer": "respond-async"},
                     json={"inputs": {"ruts": {"href": upload["href"]}},
                           "outputs": {"ruts": {"transmissionMode": "reference"}}})
    job_id = r.json()["jobID"]
    poll(lambda: guarded.get(f"/jobs/{job_id}", headers=AILSA).json()["status"] == "successful")
    own = guarded.get(f"/jobs/{job_id}", headers=AILSA).json()
    assert len(own["result_sha256"]) == 3  # passes and ruts GeoJSON, the GeoPackage
    for method, path in (("GET", "/jobs/{}"), ("GET", "/jobs/{}/results"),
                         ("GET", "/jobs/{}/downloads/result.gpkg"), ("DELETE", "/jobs/{}")):
        theirs = guarded.request(method, path.format(job_id), headers=BRODIE)
        unknown = guarded.request(method, path.format(NOBODY), headers=BRODIE)
        _same_answer(theirs, unknown, job_id)
        assert guarded.request(method, path.format(job_id), headers=AILSA).status_code in (
            200, 204)
    _same_answer(guarded.get(f"/uploads/{upload['id']}", headers=BRODIE),
                 guarded.get(f"/uploads/{NOBODY}", headers=BRODIE), upload["id"])
    assert guarded.get("/jobs", headers=BRODIE).json()["jobs"] == []
    theirs = guarded.post("/processes/analyze/execution", headers=BRODIE,
                          json={"inputs": {"ruts": {"href": upload["href"]}}})
    unknown = guarded.post("/processes/analyze/execution", headers=BRODIE,
                           json={"inputs": {"ruts": {"href": f"/uploads/{NOBODY}"}}})
    assert theirs.status_code == unknown.status_code == 400
    assert theirs.json()["detail"].replace(upload["id"], NOBODY) == unknown.json()["detail"]
    # the dismissal above was Ailsa's own; Brodie's attempt changed nothing before it
    assert guarded.get(f"/jobs/{job_id}", headers=AILSA).json()["status"] == "dismissed"
    # job counts only to key holders, and only as totals
    assert "jobs_running" not in guarded.get("/health").json()
    assert guarded.get("/metrics").status_code == 401
    metrics = guarded.get("/metrics", headers=BRODIE).text
    assert 'rutwise_jobs{status="dismissed"} 1' in metrics and job_id not in metrics


def test_rate_limit_per_key(make_client: Any) -> None:
    client = make_client(api_keys=KEYS, rate_per_s=0.01, rate_burst=3)
    answers = [client.get("/jobs", headers=AILSA).status_code for _ in range(4)]
    assert answers == [200, 200, 200, 429]
    r = client.get("/jobs", headers=AILSA)
    assert r.status_code == 429 and r.headers["content-type"] == "application/problem+json"
    assert int(r.headers["retry-after"]) >= 60  # one token takes 100 s at 0.01 per second
    assert client.get("/jobs", headers=BRODIE).status_code == 200  # another key's bucket
    wrong = [client.get("/jobs", headers={"Authorization": f"Bearer guess-{n}"}).status_code
             for n in range(4)]
    assert wrong == [401, 401, 401, 429]  # guessing keys spends the address's tokens


def test_no_rate_limit_without_keys(make_client: Any) -> None:
    client = make_client(rate_per_s=0.01, rate_burst=1)
    assert {client.get("/jobs").status_code for _ in range(5)} == {200}


def test_a_slow_synchronous_execution_answers_504_and_keeps_its_job(make_client: Any) -> None:
    client = make_client(sync_timeout_s=0.3)
    r = client.post("/processes/echo/execution",
                    json={"inputs": {"message": "late", "pause_s": 1.5}})
    assert r.status_code == 504 and r.headers["content-type"] == "application/problem+json"
    job_url = r.headers["location"]
    assert r.json()["jobID"] in job_url and 'rel="monitor"' in r.headers["link"]
    poll(lambda: client.get(job_url).json()["status"] == "successful", timeout=30)
    assert client.get(job_url + "/results").text == "late"


def test_security_headers(make_client: Any) -> None:
    client = make_client()
    job_url = client.post("/processes/echo/execution", json={"inputs": {"message": "x"}},
                          headers={"Prefer": "respond-async"}).headers["location"]
    for path, private in (("/processes", False), (job_url, True), ("/jobs/" + NOBODY, True)):
        r = client.get(path)
        assert r.headers["x-content-type-options"] == "nosniff"
        assert r.headers["referrer-policy"] == "no-referrer"
        assert r.headers["content-security-policy"].startswith("default-src 'none'")
        assert (r.headers.get("cache-control") == "no-store") is private, path
        assert "strict-transport-security" not in r.headers
    docs = client.get("/docs")
    assert docs.status_code == 200 and "content-security-policy" not in docs.headers
    hsts = make_client(hsts_max_age_s=31536000).get("/")
    assert hsts.headers["strict-transport-security"] == "max-age=31536000"
