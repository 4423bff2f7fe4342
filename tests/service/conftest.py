"""Fixtures of the service tests: simulated rut layers, an in-process client, a real server.

The rut layers are simulated (kinematic bicycle model, geoops.scenarios) and placed in lon/lat
through a local azimuthal equidistant frame; they exercise the service, they are not a
reference for the engine's accuracy.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import pyproj
import pytest
from fastapi.testclient import TestClient

from geoops.kinematics import simulate_steering
from geoops.scenarios import CAR, mapped_lines, slalom
from service.app import create_app
from service.settings import Settings, load_settings

REPO = Path(__file__).resolve().parents[2]
# an invented survey area on real ground (a moor in the Scottish Highlands)
ORIGIN_LON, ORIGIN_LAT = -3.6, 57.1


def two_track_layer(n_passes: int = 1, seed: int = 7, length_m: float = 60.0) -> dict[str, Any]:
    """A GeoJSON FeatureCollection of the left rear and left front tracks of ``n_passes``
    simulated car passes (slalom steering), 30 m apart, in lon/lat WGS 84."""
    local = pyproj.CRS.from_proj4(
        f"+proj=aeqd +lat_0={ORIGIN_LAT} +lon_0={ORIGIN_LON} +datum=WGS84 +units=m")
    to_lonlat = pyproj.Transformer.from_crs(local, "EPSG:4326", always_xy=True)
    rng = np.random.default_rng(seed)
    features = []
    for k in range(n_passes):
        sim = simulate_steering(CAR, slalom(length_m, 0.05, 12.0, 25.0), 0.05,
                                start=(0.0, 30.0 * k, 0.0))
        lines = mapped_lines(sim, 0.02, 0.5, rng, which=["rear_left", "front_left"])
        for wheel, xy in lines.items():
            lon, lat = to_lonlat.transform(xy[:, 0], xy[:, 1])
            features.append({
                "type": "Feature", "id": len(features) + 1,
                "properties": {"surveyor": "Ailsa Corran", "track": f"{k}-{wheel}"},
                "geometry": {"type": "LineString",
                             "coordinates": np.column_stack([lon, lat]).round(9).tolist()},
            })
    return {"type": "FeatureCollection", "features": features}


@pytest.fixture(scope="session")
def ruts_fc() -> dict[str, Any]:
    return two_track_layer()


def poll(check: Callable[[], Any], timeout: float = 30.0, every: float = 0.05) -> Any:
    """Call ``check`` until it returns something truthy; fail after ``timeout`` seconds."""
    deadline = time.monotonic() + timeout
    while True:
        value = check()
        if value:
            return value
        if time.monotonic() > deadline:
            raise AssertionError(f"condition not met within {timeout} s")
        time.sleep(every)


def make_settings(data_dir: Path, **overrides: Any) -> Settings:
    return load_settings({}, data_dir=data_dir, **overrides)


@pytest.fixture
def make_client(tmp_path: Path) -> Iterator[Callable[..., TestClient]]:
    """Build in-process clients (lifespan started) with settings overrides."""
    opened: list[TestClient] = []

    def make(**overrides: Any) -> TestClient:
        overrides.setdefault("data_dir", tmp_path / "data")
        client = TestClient(create_app(load_settings({}, **overrides)))
        client.__enter__()
        opened.append(client)
        return client

    yield make
    for client in opened:
        client.__exit__(None, None, None)


@pytest.fixture
def client(make_client: Callable[..., TestClient]) -> TestClient:
    return make_client()


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


class LiveServer:
    """The real service: ``rutwise serve`` on uvicorn in a subprocess on a loopback port."""

    def __init__(self, data_dir: Path, env: dict[str, str] | None = None) -> None:
        self.data_dir = data_dir
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.env = dict(os.environ, RUTWISE_DATA_DIR=str(data_dir), **(env or {}))
        self.env.pop("RUTWISE_SETTINGS", None)
        self.proc: subprocess.Popen[bytes] | None = None
        self.log = data_dir.parent / f"server-{self.port}.log"

    def start(self) -> None:
        self.data_dir.mkdir(parents=True, exist_ok=True)
        with open(self.log, "ab") as log:
            self.proc = subprocess.Popen(
                [sys.executable, "-m", "geoops.cli", "serve", "--host", "127.0.0.1",
                 "--port", str(self.port)],
                cwd=REPO, env=self.env, stdout=log, stderr=subprocess.STDOUT,
                start_new_session=True)

        def healthy() -> bool:
            assert self.proc is not None and self.proc.poll() is None, self.log.read_text()
            try:
                return httpx.get(self.url + "/health", timeout=2).status_code == 200
            except httpx.TransportError:
                return False

        poll(healthy, timeout=60, every=0.1)

    def stop(self, sig: int = signal.SIGTERM) -> None:
        """Stop the server with ``sig``; SIGKILL also kills its worker processes at once, as
        a crash would take them down with the machine."""
        if self.proc is None:
            return
        pgid = self.proc.pid
        if sig == signal.SIGKILL:
            os.killpg(pgid, signal.SIGKILL)
        else:
            self.proc.send_signal(sig)
        try:
            self.proc.wait(timeout=30)
        finally:
            try:  # leftovers of our own process group (fork server, workers)
                os.killpg(pgid, signal.SIGKILL)
            except ProcessLookupError:
                pass
        self.proc = None


@pytest.fixture
def live_server(tmp_path: Path) -> Iterator[LiveServer]:
    server = LiveServer(tmp_path / "data")
    server.start()
    yield server
    server.stop()
