"""Execution of analyze and simulate: uploads, references, limits, error bodies."""

from __future__ import annotations

import base64
import json
from pathlib import Path
from typing import Any

import geopandas as gpd
import pytest
from fastapi.testclient import TestClient

PROBLEM = "application/problem+json"


def _gpkg(fc: dict[str, Any], path: Path, crs: str | None = "EPSG:4326") -> bytes:
    frame = gpd.GeoDataFrame.from_features(fc["features"], crs=crs)
    frame.to_file(path, driver="GPKG", layer="ruts")
    return path.read_bytes()


def _upload(client: TestClient, data: bytes, media: str, **params: str) -> Any:
    return client.post("/uploads", content=data, params=params,
                       headers={"Content-Type": media})


def test_upload_then_analyze_by_reference(client: TestClient, ruts_fc: dict[str, Any],
                                          tmp_path: Path) -> None:
    r = _upload(client, _gpkg(ruts_fc, tmp_path / "moor.gpkg"),
                "application/geopackage+sqlite3")
    assert r.status_code == 201, r.text
    up = r.json()
    assert up["features"] == 2 and up["layer"] == "ruts" and "4326" in up["crs"]
    assert r.headers["location"] == up["href"]
    assert client.get(up["href"]).json()["id"] == up["id"]
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"href": up["href"], "type": "application/geopackage+sqlite3"},
                   "out_crs": "EPSG:27700"},
        "outputs": {"passes": {}, "ruts": {"transmissionMode": "reference"}},
        "response": "document"})
    assert r.status_code == 200, r.text
    doc = r.json()
    assert doc["passes"]["value"]["features"][0]["properties"]["verdict"] == "decided"
    gpkg = client.get(doc["ruts"]["href"])
    assert gpkg.headers["content-type"] == "application/geopackage+sqlite3"
    path = tmp_path / "result.gpkg"
    path.write_bytes(gpkg.content)
    ruts = gpd.read_file(path, layer="ruts")
    assert len(ruts) == 2 and ruts.crs.to_epsg() == 27700
    meta = gpd.read_file(path, layer="run_metadata")
    assert "qualified examiner" in dict(zip(meta["key"], meta["value"], strict=True))["caution"]


@pytest.mark.parametrize("media,suffix", [("application/geo+json", None),
                                          ("application/octet-stream", "ruts.geojson")])
def test_upload_geojson(client: TestClient, ruts_fc: dict[str, Any], media: str,
                        suffix: str | None) -> None:
    params = {"name": suffix} if suffix else {}
    r = _upload(client, json.dumps(ruts_fc).encode(), media, **params)
    assert r.status_code == 201 and r.json()["features"] == 2


def test_upload_refusals(make_client: Any, ruts_fc: dict[str, Any]) -> None:
    client = make_client(max_upload_mb=0.01, max_features=1)
    r = _upload(client, b"not a layer at all", "application/geo+json")
    assert r.status_code == 400 and r.headers["content-type"] == PROBLEM
    assert "/uploads/" not in r.json()["detail"]  # no server paths in messages
    r = _upload(client, b"x" * 20_000, "application/geo+json")
    assert r.status_code == 413 and "max_upload_mb" in r.json()["detail"]
    r = _upload(client, json.dumps(ruts_fc).encode()[:10_000], "image/png")
    assert r.status_code == 415
    small = {"type": "FeatureCollection", "features": [
        {**f, "geometry": {**f["geometry"], "coordinates": f["geometry"]["coordinates"][:20]}}
        for f in ruts_fc["features"]]}
    r = _upload(client, json.dumps(small).encode(), "application/geo+json")
    assert r.status_code == 413 and "features" in r.json()["detail"]
    data_dir = client.app.state.service.store.data_dir  # type: ignore[attr-defined]
    assert list((data_dir / "uploads").iterdir()) == []  # refused uploads leave nothing


def test_limits_on_inline_layers(make_client: Any, ruts_fc: dict[str, Any]) -> None:
    client = make_client(max_vertices=100)
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": ruts_fc}})
    assert r.status_code == 413 and "vertices" in r.json()["detail"]
    client = make_client(max_upload_mb=0.001)
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": ruts_fc}})
    assert r.status_code == 413 and r.headers["content-type"] == PROBLEM


@pytest.mark.parametrize("href", ["https://example.org/ruts.gpkg", "/uploads/../../etc/passwd",
                                  "file:///etc/passwd", "/uploads/" + "a" * 32])
def test_references_never_leave_the_service(client: TestClient, href: str) -> None:
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": {"href": href}}})
    assert r.status_code == 400 and r.json()["input"] == "ruts"
    assert "/uploads" in r.json()["detail"]


@pytest.mark.filterwarnings("ignore:'crs' was not provided")
def test_layer_without_crs_is_refused_with_advice(client: TestClient, ruts_fc: dict[str, Any],
                                                  tmp_path: Path) -> None:
    shifted = {"type": "FeatureCollection", "features": [
        {**f, "geometry": {"type": "LineString", "coordinates": [
            [(x + 3.6) * 1e5, (y - 57.1) * 1e5] for x, y in f["geometry"]["coordinates"]]}}
        for f in ruts_fc["features"]]}
    up = _upload(client, _gpkg(shifted, tmp_path / "local.gpkg", crs=None),
                 "application/geopackage+sqlite3").json()
    r = client.post("/processes/analyze/execution", json={"inputs": {"ruts": {
        "href": up["href"]}}})
    assert r.status_code == 400 and r.json()["type"].endswith("crs-error"), r.text
    assert "crs" in r.json()["detail"].lower()


def test_bad_options_are_refused_before_a_job(client: TestClient,
                                              ruts_fc: dict[str, Any]) -> None:
    for inputs, name in (({"accuracy": -1}, "accuracy"), ({"accuracy": "fine"}, "accuracy"),
                         ({"out_crs": "EPSG:0"}, "out_crs"), ({"crs": "somewhere"}, "crs"),
                         ({"ruts": {"type": "Feature"}}, "ruts"), ({"ruts": 5}, "ruts")):
        r = client.post("/processes/analyze/execution",
                        json={"inputs": {"ruts": ruts_fc, **inputs}})
        assert r.status_code == 400, r.text
        assert r.json().get("input", name) == name
        assert name in r.json()["detail"]
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": ruts_fc}, "outputs": {"passes": {"format": {
            "mediaType": "application/geopackage+sqlite3"}}}})
    assert r.status_code == 400 and "reference" in r.json()["detail"]
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": ruts_fc}, "outputs": {"speed": {}}})
    assert r.status_code == 400 and "speed" in r.json()["detail"]
    assert client.get("/jobs").json()["jobs"] == []


def test_simulate_then_analyze_the_simulated_tracks(client: TestClient) -> None:
    r = client.post("/processes/simulate/execution", json={"inputs": {
        "lon": -3.6, "lat": 57.1, "vehicle": "pickup", "manoeuvre": "slalom", "length_m": 60,
        "noise_m": 0.01, "seed": 4}, "outputs": {"wheel_tracks": {}}, "response": "raw"})
    assert r.status_code == 200, r.text
    tracks = r.json()
    assert {f["properties"]["wheel"] for f in tracks["features"]} == {
        "rear_left", "rear_right", "front_left", "front_right"}
    left = [f for f in tracks["features"] if f["properties"]["wheel"].endswith("left")]
    result = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"type": "FeatureCollection", "features": left}},
        "outputs": {"passes": {}}})
    passes = result.json()["features"]
    assert len(passes) == 1
    # the pickup preset's wheelbase is 3.6 m; the estimate's range should hold it
    props = passes[0]["properties"]
    assert props["wheelbase_low_m"] <= 3.6 <= props["wheelbase_high_m"]


def test_simulate_refuses_steering_past_the_lock(client: TestClient) -> None:
    r = client.post("/processes/simulate/execution",
                    json={"inputs": {"lon": 0, "lat": 0, "steer_deg": 55}})
    assert r.status_code == 400 and r.json()["input"] == "steer_deg"


def test_inline_base64_geopackage(client: TestClient, ruts_fc: dict[str, Any],
                                  tmp_path: Path) -> None:
    data = base64.b64encode(_gpkg(ruts_fc, tmp_path / "inline.gpkg")).decode()
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"value": data, "encoding": "base64",
                            "mediaType": "application/geopackage+sqlite3"}},
        "outputs": {"passes": {}}})
    assert r.status_code == 200 and len(r.json()["features"]) == 1
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"value": "not base64!", "encoding": "base64",
                            "mediaType": "application/geopackage+sqlite3"}}})
    assert r.status_code == 400 and r.json()["input"] == "ruts"
    assert "base64" in r.json()["detail"]
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"value": base64.b64encode(b"SQLite format 3\x00 junk").decode(),
                            "encoding": "base64",
                            "mediaType": "application/geopackage+sqlite3"}}})
    assert r.status_code == 400 and r.headers["content-type"] == "application/problem+json"
    assert "/jobs/" not in r.json()["detail"] and "input.gpkg" in r.json()["detail"]


def test_engine_hints_name_service_inputs_not_cli_options(client: TestClient,
                                                          ruts_fc: dict[str, Any]) -> None:
    r = client.post("/processes/analyze/execution",
                    json={"inputs": {"ruts": ruts_fc, "id_field": "plot"}})
    assert r.status_code == 400
    assert "'id_field' input" in r.json()["detail"] and "--" not in r.json()["detail"]
