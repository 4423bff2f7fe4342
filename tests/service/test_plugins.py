"""Processes from other installed packages, through the rutwise.processes entry points."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.processes import load_registry
from service.settings import load_settings


@pytest.fixture
def installed_plugin(tmp_path: Path) -> Iterator[None]:
    """A distribution whose metadata declares one entry point, put on sys.path."""
    dist = tmp_path / "site" / "rutwise_sum-0.0.1.dist-info"
    dist.mkdir(parents=True)
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: rutwise-sum\nVersion: 0.0.1\n")
    (dist / "entry_points.txt").write_text(
        "[rutwise.processes]\nsum = tests.service.plugin_sample:make\n"
        "broken = tests.service.no_such_module:make\n")
    sys.path.insert(0, str(tmp_path / "site"))
    try:
        yield
    finally:
        sys.path.remove(str(tmp_path / "site"))


def test_plugin_is_listed_described_and_run(installed_plugin: None, tmp_path: Path) -> None:
    registry = load_registry()
    assert registry.get("sum-values") is not None  # the broken plugin is skipped, not fatal
    with TestClient(create_app(load_settings({}, data_dir=tmp_path / "d"), registry)) as client:
        ids = [p["id"] for p in client.get("/processes").json()["processes"]]
        assert "sum-values" in ids and "analyze" in ids
        doc = client.get("/processes/sum-values").json()
        assert doc["inputs"]["values"]["maxOccurs"] == "unbounded"
        r = client.post("/processes/sum-values/execution",
                        json={"inputs": {"values": [1.5, 2, 3]}},
                        headers={"Prefer": "respond-async"})
        assert r.status_code == 200  # sync-only: the preference is not applied
        assert "preference-applied" not in r.headers
        assert r.json() == {"total": 6.5}


def test_without_plugins_only_the_builtins() -> None:
    assert [p.id for p in load_registry(plugins=False).all()] == [
        "analyze", "echo", "extract-ruts", "simulate"]


def test_12_async_only_process_runs_async_without_prefer(tmp_path: Path) -> None:
    from dataclasses import replace

    from service.builtin import ECHO

    later = replace(ECHO, id="echo-later", job_control=("async-execute", "dismiss"))
    registry = load_registry(builtin=[ECHO, later], plugins=False)
    with TestClient(create_app(load_settings({}, data_dir=tmp_path / "d"), registry)) as client:
        r = client.post("/processes/echo-later/execution", json={"inputs": {"message": "x"}})
        assert r.status_code == 201 and "location" in r.headers
        assert "preference-applied" not in r.headers  # nothing was asked for
