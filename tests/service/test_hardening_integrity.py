"""Checksums in the service: the job document names the input's and each result file's
SHA-256, the files verify, and a damaged result file is never sent."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient

from geoops.integrity import verify_result
from service.jobs import json_bytes

from .conftest import poll


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _run(client: TestClient, inputs: dict[str, Any]) -> dict[str, Any]:
    r = client.post("/processes/analyze/execution", headers={"Prefer": "respond-async"},
                    json={"inputs": inputs, "response": "document",
                          "outputs": {"passes": {}, "ruts": {"transmissionMode": "reference"}}})
    url = r.headers["location"]
    doc: dict[str, Any] = poll(lambda: (d := client.get(url).json())["status"] in (
        "successful", "failed") and d)
    assert doc["status"] == "successful", doc
    return doc


def test_job_document_checksums_match_what_is_served(client: TestClient, tmp_path: Path,
                                                     ruts_fc: dict[str, Any]) -> None:
    raw = json.dumps(ruts_fc, indent=1).encode()
    upload = client.post("/uploads", content=raw,
                         headers={"Content-Type": "application/geo+json"}).json()
    job = _run(client, {"ruts": {"href": upload["href"]}})
    # source: hashlib SHA-256 of the bytes as uploaded
    assert job["input_sha256"] == {"ruts": _sha(raw)}
    assert set(job["result_sha256"]) == {"passes.geojson", "ruts.geojson", "result.gpkg"}
    results = client.get(f"/jobs/{job['jobID']}/results").json()
    href = results["ruts"]["href"]
    gpkg = client.get(href).content
    assert _sha(gpkg) == job["result_sha256"]["result.gpkg"] == results["ruts"]["sha256"]
    for name in ("passes.geojson", "ruts.geojson"):
        served = client.get(f"/jobs/{job['jobID']}/downloads/{name}").content
        assert _sha(served) == job["result_sha256"][name]
        (tmp_path / name).write_bytes(served)
        found = verify_result(tmp_path / name)
        assert found.ok, found.report()
    (tmp_path / "result.gpkg").write_bytes(gpkg)
    (tmp_path / "input.geojson").write_bytes(raw)
    found = verify_result(tmp_path / "result.gpkg", tmp_path / "input.geojson")
    assert found.ok and "input matches input_sha256" in found.checked, found.report()


def test_an_inline_layer_is_summed_as_the_service_stored_it(client: TestClient,
                                                            ruts_fc: dict[str, Any]) -> None:
    job = _run(client, {"ruts": {"value": ruts_fc}, "accuracy": 0.02})
    assert job["input_sha256"]["ruts"] == _sha(json_bytes(ruts_fc))
    assert job["input_sha256"]["accuracy"] == _sha(b"0.02")
    passes = client.get(f"/jobs/{job['jobID']}/downloads/passes.geojson").json()
    assert passes["rutwise_metadata"]["input_sha256"] == job["input_sha256"]["ruts"]
    assert "caution" in passes["rutwise_metadata"]


def test_a_damaged_result_is_not_sent(client: TestClient, ruts_fc: dict[str, Any]) -> None:
    job = _run(client, {"ruts": ruts_fc})
    store = client.app.state.service.store  # type: ignore[attr-defined]
    folder: Path = store.job_dir(job["jobID"])
    passes = folder / "passes.geojson"
    passes.write_bytes(passes.read_bytes().replace(b'"decided"', b'"ambiguous"'))
    for path in ("/results", "/downloads/passes.geojson"):
        r = client.get(f"/jobs/{job['jobID']}{path}")
        assert r.status_code == 500 and r.json()["type"].endswith("result-damaged"), path
        assert b"ambiguous" not in r.content
    r = client.get(f"/jobs/{job['jobID']}/downloads/result.gpkg")  # the intact file still goes
    assert r.status_code == 200 and _sha(r.content) == job["result_sha256"]["result.gpkg"]
