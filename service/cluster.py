"""The service's use of a Dask cluster (setting ``scheduler``) for ``analyze`` jobs.

A job's worker process hands the analysis to :func:`geoops.batch.submit_analysis`, waits for
the GeoPackage the cluster writes into the job folder, and reads its layers back with pyogrio
(:func:`read_result`). While it waits, SIGTERM (a dismissal, the time limit, a stopping
service) cancels the task on the cluster before the process ends. :func:`reachable` is the
quick check that ``/health`` and a starting job use. No HTTP and no analysis here.
"""

from __future__ import annotations

import os
import signal
import socket
from pathlib import Path
from types import FrameType
from typing import Any
from urllib.parse import urlsplit

import numpy as np
import pyproj
import shapely
from pyogrio.raw import read as raw_read

from geoops.errors import RutwiseError
from geoops.io import OutputLayer
from geoops.pipeline import CAUTION, PASS_FIELDS, RUT_FIELDS, AnalyzeOptions

#: how long a reachability check waits for the scheduler's port, seconds
PROBE_TIMEOUT_S = 2.0
#: how long cancelling on the cluster may take before the process ends anyway, seconds
_CANCEL_TIMEOUT_S = 2.0


class ClusterUnavailable(RutwiseError):
    """The configured Dask scheduler cannot be reached (answers 503)."""

    kind = "cluster-unavailable"


def reachable(address: str, timeout: float = PROBE_TIMEOUT_S) -> str | None:
    """None when something accepts connections at the scheduler ``address``
    (``tcp://host:port`` or ``tls://host:port``), else the reason.

    Examples
    --------
    >>> reachable("not an address")
    "scheduler address 'not an address' has no host:port"
    """
    parts = urlsplit(address if "://" in address else "tcp://" + address)
    try:
        host, port = parts.hostname, parts.port
    except ValueError:
        host, port = None, None
    if not host or port is None:
        return f"scheduler address {address!r} has no host:port"
    try:
        with socket.create_connection((host, port), timeout=timeout):
            return None
    except OSError as exc:
        return f"{type(exc).__name__}: {exc.strerror or exc}"


def _cancel_and_exit(signum: int, _frame: FrameType | None) -> None:
    """SIGTERM while waiting: cancel this process's task on the cluster, then end."""
    from geoops import batch

    # geoops.batch keeps the Dask futures it submitted until they settle; this process runs
    # one job, so every one of them belongs to it.
    tasks = list(batch._in_flight)
    clients = {id(t.client): t.client for t in tasks}
    try:
        for client in clients.values():
            client.cancel([t for t in tasks if t.client is client], force=True)
            client.close(timeout=_CANCEL_TIMEOUT_S)  # flushes the cancel to the scheduler
    finally:
        os._exit(128 + signum)


def run_on_cluster(path: Path, options: AnalyzeOptions, out_path: Path, scheduler: str) -> None:
    """Analyse ``path`` on the cluster at ``scheduler``; the result GeoPackage (in the
    input's CRS) is at ``out_path`` when this returns.

    Raises
    ------
    ClusterUnavailable
        When the scheduler does not answer.
    RutwiseError
        What the analysis raised on the cluster (same kinds as a local run).
    """
    from geoops.batch import submit_analysis

    reason = reachable(scheduler)
    if reason is not None:
        raise ClusterUnavailable(
            f"The Dask cluster this service is configured to use does not answer ({reason}).",
            "Try again later; the operator should check the Dask scheduler and the service's "
            "scheduler setting (RUTWISE_SCHEDULER).")
    previous = signal.signal(signal.SIGTERM, _cancel_and_exit)
    try:
        future = submit_analysis(path, options, out_path, scheduler=scheduler)
        future.result()
    finally:
        signal.signal(signal.SIGTERM, previous)


def _values(data: np.ndarray, kind: str) -> list[Any]:
    if kind == "text":
        return [None if v is None else str(v) for v in data]
    if data.dtype.kind == "f":  # nulls read as NaN
        return [None if np.isnan(v) else (int(v) if kind == "int" else float(v)) for v in data]
    return [int(v) if kind == "int" else float(v) for v in data]


def read_result(gpkg: Path) -> tuple[list[OutputLayer], dict[str, str], pyproj.CRS]:
    """The ``passes`` and ``ruts`` layers, the run metadata and the CRS of a result
    GeoPackage written by the engine."""
    layers = []
    crs: pyproj.CRS | None = None
    for name, spec, what in (("passes", PASS_FIELDS, "vehicle passes (rear-axle path)"),
                             ("ruts", RUT_FIELDS, "cleaned ruts")):
        meta, _fids, wkb, data = raw_read(str(gpkg), layer=name)
        by_name = dict(zip(meta["fields"], data, strict=True))
        fields = {f: _values(by_name[f], kind) for f, kind in spec.items()}
        geoms = shapely.from_wkb(wkb) if wkb is not None else np.array([], dtype=object)
        layers.append(OutputLayer(name, geoms, fields, spec, f"rutwise {what}. " + CAUTION))
        crs = pyproj.CRS.from_user_input(meta["crs"])
    _m, _f, _g, (keys, values) = raw_read(str(gpkg), layer="run_metadata", read_geometry=False)
    metadata = {str(k): str(v) for k, v in zip(keys, values, strict=True)}
    assert crs is not None
    return layers, metadata, crs


def reproject(layer: OutputLayer, source: pyproj.CRS, target: pyproj.CRS) -> OutputLayer:
    """``layer`` with its geometries moved from ``source`` to ``target``."""
    if source == target:
        return layer
    move = pyproj.Transformer.from_crs(source, target, always_xy=True)
    geoms = shapely.transform(layer.geometries,
                              lambda xy: np.column_stack(move.transform(xy[:, 0], xy[:, 1])))
    return OutputLayer(layer.name, geoms, layer.fields, layer.types, layer.description)
