"""OGC API - Processes Part 1 (1.0) checklist items, against the in-process app.

source: OGC 18-062r2 (OGC API - Processes - Part 1: Core 1.0), requirement classes core,
ogc-process-description, json, job-list, dismiss; numbers refer to the checklist in
shared/ogcapi-processes.md.
"""

from __future__ import annotations

from typing import Any

from fastapi.testclient import TestClient

from .conftest import poll

OGC_REL = "http://www.opengis.net/def/rel/ogc/1.0/"
EXC = "http://www.opengis.net/def/exceptions/ogcapi-processes-1/1.0/"
PROBLEM = "application/problem+json"


def rels(doc: dict[str, Any]) -> dict[str, str]:
    return {link["rel"]: link["href"] for link in doc["links"]}


def test_1_landing_page_links(client: TestClient) -> None:
    r = client.get("/")
    assert r.status_code == 200
    links = rels(r.json())
    assert links["service-desc"].endswith("/openapi.json")
    for rel in ("conformance", "processes", "job-list"):
        assert OGC_REL + rel in links
    assert client.get(links[OGC_REL + "processes"]).status_code == 200


def test_2_conformance_claims(client: TestClient) -> None:
    claims = client.get("/conformance").json()["conformsTo"]
    prefix = "http://www.opengis.net/spec/ogcapi-processes-1/1.0/conf/"
    assert {prefix + c for c in ("core", "ogc-process-description", "json", "job-list",
                                 "dismiss")} == set(claims)
    assert prefix + "oas30" not in claims  # the API definition is OpenAPI 3.1


def test_3_api_definition_resolves_as_openapi_31(client: TestClient) -> None:
    doc = client.get("/openapi.json").json()
    assert doc["openapi"].startswith("3.1")
    assert "/processes/{process_id}/execution" in doc["paths"]


def test_4_5_process_list_limit_and_next(client: TestClient) -> None:
    r = client.get("/processes")
    body = r.json()
    assert r.status_code == 200 and "self" in rels(body)
    ids = [p["id"] for p in body["processes"]]
    assert {"analyze", "simulate", "echo"} <= set(ids)
    one = client.get("/processes", params={"limit": 1}).json()
    assert len(one["processes"]) == 1
    nxt = client.get(rels(one)["next"]).json()
    assert nxt["processes"][0]["id"] == ids[1]
    for bad in ("0", "abc", "10001"):
        r = client.get("/processes", params={"limit": bad})
        assert r.status_code == 400 and r.headers["content-type"] == PROBLEM
        assert "limit" in r.json()["detail"]


def test_6_summaries(client: TestClient) -> None:
    for summary in client.get("/processes").json()["processes"]:
        assert summary["id"] and summary["version"]
        assert set(summary["jobControlOptions"]) <= {"sync-execute", "async-execute",
                                                     "dismiss"}
        assert summary["outputTransmission"]
        assert rels(summary)["self"].endswith(f"/processes/{summary['id']}")


def test_7_description_has_schemas_and_execute_link(client: TestClient) -> None:
    doc = client.get("/processes/analyze").json()
    assert set(doc["inputs"]) == {"ruts", "id_field", "accuracy", "crs", "out_crs", "layer"}
    assert set(doc["outputs"]) == {"passes", "ruts"}
    for item in [*doc["inputs"].values(), *doc["outputs"].values()]:
        assert isinstance(item["schema"], dict)
    for item in doc["inputs"].values():
        assert item["minOccurs"] >= 0 and (item["maxOccurs"] == "unbounded"
                                           or item["maxOccurs"] >= 1)
    assert doc["inputs"]["ruts"]["minOccurs"] == 1
    assert rels(doc)[OGC_REL + "execute"].endswith("/processes/analyze/execution")
    assert "qualified examiner" in doc["description"]


def test_8_unknown_process(client: TestClient) -> None:
    for r in (client.get("/processes/unknown"),
              client.post("/processes/unknown/execution", json={"inputs": {}})):
        assert r.status_code == 404 and r.headers["content-type"] == PROBLEM
        assert r.json()["type"] == EXC + "no-such-process"


def test_9_10_echo_test_process_runs_synchronously(client: TestClient) -> None:
    r = client.post("/processes/echo/execution", json={"inputs": {"message": "Glen Corrie"}})
    assert r.status_code == 200 and r.text == "Glen Corrie"
    assert r.headers["content-type"].startswith("text/plain")
    assert 'rel="monitor"' in r.headers["link"]  # 31: a sync run makes a job


def test_11_13_async_with_prefer_list(client: TestClient) -> None:
    r = client.post("/processes/echo/execution", json={"inputs": {"message": "x"}},
                    headers={"Prefer": "wait=5, respond-async"})
    assert r.status_code == 201
    assert r.headers["preference-applied"] == "respond-async"
    body = r.json()
    assert r.headers["location"].endswith(f"/jobs/{body['jobID']}")
    assert body["type"] == "process" and body["status"] in ("accepted", "running")


def test_14_object_input_qualified_and_simple_values(client: TestClient,
                                                     ruts_fc: dict[str, Any]) -> None:
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"value": ruts_fc, "mediaType": "application/geo+json"},
                   "accuracy": {"value": 0.02}},
        "outputs": {"passes": {}}, "response": "raw"})
    assert r.status_code == 200
    assert r.headers["content-type"] == "application/geo+json"
    assert r.json()["features"][0]["properties"]["verdict"] == "decided"


def test_18_single_element_array_for_a_single_value(client: TestClient) -> None:
    r = client.post("/processes/echo/execution", json={"inputs": {"message": ["one"]}})
    assert r.status_code == 200 and r.text == "one"


def test_19_invalid_input_names_it(client: TestClient) -> None:
    r = client.post("/processes/echo/execution",
                    json={"inputs": {"message": "x", "pause_s": "soon"}})
    assert r.status_code == 400 and r.headers["content-type"] == PROBLEM
    assert r.json()["input"] == "pause_s" and "pause_s" in r.json()["detail"]
    r = client.post("/processes/echo/execution", json={"inputs": {}})
    assert r.status_code == 400 and r.json()["input"] == "message"
    r = client.post("/processes/echo/execution", json={"inputs": {"message": "x", "tone": 1}})
    assert r.status_code == 400 and r.json()["input"] == "tone"


def test_20_22_document_with_all_outputs(client: TestClient, ruts_fc: dict[str, Any]) -> None:
    r = client.post("/processes/analyze/execution",
                    json={"inputs": {"ruts": ruts_fc}, "response": "document"})
    assert r.status_code == 200 and r.headers["content-type"] == "application/json"
    doc = r.json()
    assert set(doc) == {"passes", "ruts"}
    assert doc["passes"]["mediaType"] == "application/geo+json"
    assert "qualified examiner" in doc["passes"]["value"]["rutwise_metadata"]["caution"]
    assert len(doc["ruts"]["value"]["features"]) == 2


def test_raw_several_values_is_multipart(client: TestClient, ruts_fc: dict[str, Any]) -> None:
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": ruts_fc}})
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("multipart/related")
    assert r.text.count("Content-ID:") == 2


def test_23_raw_reference_is_204_with_links(client: TestClient,
                                            ruts_fc: dict[str, Any]) -> None:
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": ruts_fc}, "response": "raw",
        "outputs": {"passes": {"transmissionMode": "reference"}}})
    assert r.status_code == 204 and r.content == b""
    link = [part for part in r.headers["link"].split(",") if "results" in part][0]
    href = link.split(">")[0].strip(" <")
    gpkg = client.get(href)
    assert gpkg.status_code == 200 and gpkg.content.startswith(b"SQLite format 3")


def test_24_25_28_job_status_and_unknown_job(client: TestClient) -> None:
    r = client.post("/processes/echo/execution", json={"inputs": {"message": "x"}},
                    headers={"Prefer": "respond-async"})
    url = r.headers["location"]
    status = poll(lambda: (s := client.get(url).json())["status"] == "successful" and s)
    assert status["progress"] == 100
    assert status["created"] <= status["started"] <= status["finished"] <= status["updated"]
    assert OGC_REL + "results" in rels(status)
    for path in ("/jobs/" + "0" * 32, "/jobs/nope", "/jobs/nope/results"):
        r = client.get(path)
        assert r.status_code == 404 and r.json()["type"] == EXC + "no-such-job"


def test_26_results_not_ready(client: TestClient) -> None:
    r = client.post("/processes/echo/execution",
                    json={"inputs": {"message": "x", "pause_s": 30}},
                    headers={"Prefer": "respond-async"})
    url = r.headers["location"]
    r = client.get(url + "/results")
    assert r.status_code == 404 and r.json()["type"] == EXC + "result-not-ready"
    assert client.delete(url).json()["status"] == "dismissed"


def test_27_28_failed_job_results_carry_the_cause(client: TestClient) -> None:
    # a line far too short to pair makes the engine refuse the layer
    bad = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {},
           "geometry": {"type": "Point", "coordinates": [-3.6, 57.1]}}]}
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": bad}},
                    headers={"Prefer": "respond-async"})
    url = r.headers["location"]
    status = poll(lambda: (s := client.get(url).json())["status"] == "failed" and s)
    assert OGC_REL + "exceptions" in rels(status)
    assert "line" in status["message"]
    r = client.get(url + "/results")
    assert r.status_code == 400 and r.json()["type"].endswith("bad-input")
    assert "LineString" in r.json()["detail"]


def test_29_job_list_filters(client: TestClient) -> None:
    ids = []
    for text in ("a", "b"):
        r = client.post("/processes/echo/execution", json={"inputs": {"message": text}})
        ids.append(r.headers["link"].split(">")[0].rsplit("/", 1)[1])
    client.post("/processes/echo/execution", json={"inputs": {"message": ""},
                                                   "outputs": {"echo": {"format": {
                                                       "mediaType": "image/png"}}}})
    body = client.get("/jobs").json()
    assert {j["jobID"] for j in body["jobs"]} == set(ids) and "self" in rels(body)
    assert client.get("/jobs", params={"processID": "analyze"}).json()["jobs"] == []
    assert len(client.get("/jobs", params={"status": "successful"}).json()["jobs"]) == 2
    assert client.get("/jobs", params={"status": "failed"}).json()["jobs"] == []
    assert client.get("/jobs", params={"type": "process", "limit": 1}).json()["jobs"]
    page = client.get("/jobs", params={"limit": 1}).json()
    assert len(page["jobs"]) == 1 and len(client.get(rels(page)["next"]).json()["jobs"]) == 1
    assert client.get("/jobs", params={"datetime": "2000-01-01T00:00:00Z/.."}).json()["jobs"]
    assert client.get("/jobs", params={"datetime": "../2000-01-01T00:00:00Z"}).json()[
        "jobs"] == []
    assert client.get("/jobs", params={"minDuration": 3600}).json()["jobs"] == []
    assert len(client.get("/jobs", params={"maxDuration": 3600}).json()["jobs"]) == 2
    for bad in ({"status": "done"}, {"datetime": "yesterday"}, {"limit": 0}):
        assert client.get("/jobs", params=bad).status_code == 400


def test_33_not_acceptable_and_wrong_media_type(client: TestClient) -> None:
    r = client.get("/processes", headers={"Accept": "text/html"})
    assert r.status_code == 406 and r.headers["content-type"] == PROBLEM
    r = client.post("/processes/echo/execution", content=b"message=x",
                    headers={"Content-Type": "application/x-www-form-urlencoded"})
    assert r.status_code == 415 and r.headers["content-type"] == PROBLEM
    r = client.post("/processes/echo/execution", content=b'{"inputs": ',
                    headers={"Content-Type": "application/json"})
    assert r.status_code == 400 and r.json()["type"].endswith("malformed-json")


def test_35_geojson_outputs_are_lon_lat(client: TestClient, ruts_fc: dict[str, Any]) -> None:
    doc = client.post("/processes/analyze/execution",
                      json={"inputs": {"ruts": ruts_fc, "out_crs": "EPSG:32630"},
                            "response": "document"}).json()
    coords = doc["passes"]["value"]["features"][0]["geometry"]["coordinates"]
    lon, lat = coords[0]
    # source: RFC 7946 section 4 (GeoJSON positions are WGS 84 longitude, latitude)
    assert -3.7 < lon < -3.5 and 57.0 < lat < 57.2


def test_other_http_errors_are_problems_too(client: TestClient) -> None:
    r = client.get("/no/such/resource")
    assert r.status_code == 404 and r.headers["content-type"] == PROBLEM
    r = client.put("/processes")
    assert r.status_code == 405 and r.headers["content-type"] == PROBLEM
    assert r.json()["status"] == 405 and r.json()["detail"]
