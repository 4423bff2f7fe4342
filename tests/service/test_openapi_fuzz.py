"""Property-based API test (schemathesis) of /openapi.json against the running service:
no generated request may cause a server error."""

from __future__ import annotations

import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from schemathesis.checks import not_a_server_error

from service.app import create_app
from service.settings import load_settings

from .conftest import LiveServer


def _served_schema() -> dict[str, Any]:
    """The OpenAPI document the server serves (built with a throw-away data folder)."""
    with tempfile.TemporaryDirectory() as folder:
        doc: dict[str, Any] = create_app(load_settings({}, data_dir=Path(folder))).openapi()
    return doc


schema = schemathesis.openapi.from_dict(_served_schema())
# uploads: broken files behind the real magic numbers, so the readers are exercised too
schemathesis.openapi.media_type(
    "application/geopackage+sqlite3",
    st.binary(max_size=2048).map(lambda b: b"SQLite format 3\x00" + b))
schemathesis.openapi.media_type(
    "application/flatgeobuf", st.binary(max_size=2048).map(lambda b: b"fgb\x03fgb\x00" + b))


@pytest.fixture(scope="module")
def fuzz_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveServer]:
    server = LiveServer(tmp_path_factory.mktemp("fuzz") / "data",
                        env={"RUTWISE_JOB_TIMEOUT_S": "5", "RUTWISE_MAX_UPLOAD_MB": "1"})
    server.start()
    yield server
    server.stop()


@schema.parametrize()
@settings(max_examples=30, deadline=None, derandomize=True,
          suppress_health_check=list(HealthCheck))
def test_no_server_errors(case: Any, fuzz_server: LiveServer) -> None:
    case.call_and_validate(base_url=fuzz_server.url, checks=[not_a_server_error], timeout=30)
