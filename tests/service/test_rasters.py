"""GeoTIFF uploads, the extract-ruts process, and analyze on a raster.

The scene is simulated: the left rear and left front tyre paths of a car weaving (kinematic
bicycle model, geoops.scenarios.slalom) cut 12 cm deep into flat ground with 2 cm of surface
noise, a 300 x 300 px elevation model at 4 cm in UTM 33N. It exercises the service; the
engine's accuracy is checked in tests/test_raster.py.
"""

from __future__ import annotations

import base64
import json
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pytest
from fastapi.testclient import TestClient

from geoops.kinematics import simulate_steering
from geoops.scenarios import CAR, slalom

from ..test_raster import rut_depth, write_raster

PROBLEM = "application/problem+json"
PX = 0.04  # m per pixel
SIZE = (12.0, 12.0)  # m


def scene(path: Path, crs: str | None = "EPSG:32633") -> Path:
    """A flat elevation model with two simulated ruts (module docstring)."""
    sim = simulate_steering(CAR, slalom(10.0, 0.02, 30.0, 10.0), 0.02, start=(1.0, 6.0, 0.0))
    wheels = sim.wheels()
    paths = {k: wheels[k] for k in ("rear_left", "front_left")}
    n = int(round(SIZE[0] / PX))
    x, y = np.meshgrid((np.arange(n) + 0.5) * PX, SIZE[1] - (np.arange(n) + 0.5) * PX)
    rng = np.random.default_rng(5)
    z = 120.0 - rut_depth(x, y, paths) + rng.normal(0.0, 0.02, x.shape)
    return write_raster(path, z.astype(np.float32), PX, SIZE, crs=crs)


@pytest.fixture(scope="module")
def dem_bytes(tmp_path_factory: pytest.TempPathFactory) -> bytes:
    return scene(tmp_path_factory.mktemp("scene") / "dem.tif").read_bytes()


def _upload(client: TestClient, data: bytes, media: str, **params: str) -> Any:
    return client.post("/uploads", content=data, params=params,
                       headers={"Content-Type": media})


@pytest.fixture
def dem_href(client: TestClient, dem_bytes: bytes) -> str:
    r = _upload(client, dem_bytes, "image/tiff; application=geotiff")
    assert r.status_code == 201, r.text
    assert r.json()["mediaType"] == "image/tiff" and "32633" in r.json()["crs"]
    return str(r.json()["href"])


def test_extract_ruts_by_value(client: TestClient, dem_href: str) -> None:
    r = client.post("/processes/extract-ruts/execution", json={
        "inputs": {"raster": {"href": dem_href}}, "outputs": {"rut_lines": {}}})
    assert r.status_code == 200, r.text
    doc = r.json()
    assert doc["type"] == "FeatureCollection" and len(doc["features"]) == 2
    meta = doc["rutwise_metadata"]
    assert "qualified examiner" in meta["caution"] and meta["raster_kind"] == "dem"
    for feature in doc["features"]:
        lon, lat = np.asarray(feature["geometry"]["coordinates"]).T
        # UTM 33N easting 500 km lies on its central meridian, 15 degrees east
        assert np.all(np.abs(lon - 15.0) < 0.001) and np.all((lat > 45) & (lat < 45.2))
        props = feature["properties"]
        assert props["length_m"] > 9.0
        # the scene cuts the ruts 12 cm deep (simulation truth, 2 cm noise)
        assert 0.08 < props["depth_median_m"] < 0.16


def test_extract_ruts_geopackage_by_reference(client: TestClient, dem_href: str,
                                              tmp_path: Path) -> None:
    r = client.post("/processes/extract-ruts/execution", json={
        "inputs": {"raster": {"href": dem_href}, "kind": "dem", "min_length": 2.0},
        "outputs": {"rut_lines": {"transmissionMode": "reference"}}, "response": "document"})
    assert r.status_code == 200, r.text
    gpkg = client.get(r.json()["rut_lines"]["href"])
    assert gpkg.headers["content-type"] == "application/geopackage+sqlite3"
    path = tmp_path / "lines.gpkg"
    path.write_bytes(gpkg.content)
    lines = gpd.read_file(path, layer="rut_lines")
    assert len(lines) == 2 and lines.crs.to_epsg() == 32633
    meta = gpd.read_file(path, layer="run_metadata")
    assert "qualified examiner" in dict(zip(meta["key"], meta["value"], strict=True))["caution"]


def test_extract_ruts_inline_base64(client: TestClient, dem_bytes: bytes) -> None:
    value = {"value": base64.b64encode(dem_bytes).decode(), "encoding": "base64",
             "mediaType": "image/tiff; application=geotiff"}
    r = client.post("/processes/extract-ruts/execution",
                    json={"inputs": {"raster": value}, "outputs": {"rut_lines": {}}})
    assert r.status_code == 200, r.text
    assert len(r.json()["features"]) == 2


def test_analyze_a_raster_upload(client: TestClient, dem_href: str) -> None:
    r = client.post("/processes/analyze/execution", json={
        "inputs": {"ruts": {"href": dem_href}}, "outputs": {"passes": {}, "ruts": {}},
        "response": "document"})
    assert r.status_code == 200, r.text
    ruts = r.json()["ruts"]["value"]
    assert len(ruts["features"]) == 2  # the two extracted rut lines
    assert "qualified examiner" in ruts["rutwise_metadata"]["caution"]
    passes = r.json()["passes"]["value"]["features"]
    assert len(passes) == 1
    props = passes[0]["properties"]
    # the car preset's wheelbase is 2.7 m (simulation truth)
    assert props["wheelbase_low_m"] <= 2.7 <= props["wheelbase_high_m"]


def test_bad_geotiff_uploads_are_refused(client: TestClient, tmp_path: Path) -> None:
    noise = np.random.default_rng(1).bytes(4096)
    r = _upload(client, noise, "image/tiff")
    assert r.status_code == 400 and r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"].endswith("bad-input") and "raster" in body["detail"]
    assert "/uploads/" not in body["detail"]  # no server paths in messages
    no_crs = scene(tmp_path / "no_crs.tif", crs=None).read_bytes()
    r = _upload(client, no_crs, "application/octet-stream", name="survey.tiff")
    assert r.status_code == 400 and r.json()["type"].endswith("crs-error")
    assert "survey.tiff" in r.json()["detail"] and "EPSG" in r.json()["detail"]
    data_dir = client.app.state.service.store.data_dir  # type: ignore[attr-defined]
    assert list((data_dir / "uploads").iterdir()) == []  # refused uploads leave nothing


def test_extract_ruts_input_problems(client: TestClient, dem_href: str,
                                     ruts_fc: dict[str, Any]) -> None:
    layer = _upload(client, json.dumps(ruts_fc).encode(), "application/geo+json").json()
    for inputs, name in (({"raster": {"href": layer["href"]}}, "raster"),
                         ({"raster": ruts_fc}, "raster"),
                         ({"raster": {"href": dem_href}, "kind": "slope"}, "kind"),
                         ({"raster": {"href": dem_href}, "dem": {"href": "/uploads/x"}}, "dem")):
        r = client.post("/processes/extract-ruts/execution", json={"inputs": inputs})
        assert r.status_code == 400, r.text
        assert r.json()["input"] == name
    # a DEM given as 'dem' for a raster read as an elevation model: the engine's advice, in
    # the service's words
    r = client.post("/processes/extract-ruts/execution", json={
        "inputs": {"raster": {"href": dem_href}, "dem": {"href": dem_href}}})
    assert r.status_code == 400 and "the 'dem' input" in r.json()["detail"]
    assert "--" not in r.json()["detail"]
