"""`rutwise batch`: resumable runs on Dask distributed, work units, merge and report.

The inputs are simulated passes (kinematic bicycle model, :mod:`geoops.scenarios`) placed on
Earth with pyproj, as EPSG:4326 GeoJSON and EPSG:27700 GeoPackage, plus one broken file. The
checks are about the batch machinery (resuming, idempotence, merge order and ids), so the
reference is always another run of rutwise itself: a clean run, or the whole-layer analysis.
Clusters listen on loopback only, with their dashboards off. Waiting is by polling with a
deadline, never by sleeping a fixed time.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import shapely
from pyogrio.raw import read as raw_read

from geoops.batch import (
    LAYERS_DIR,
    LEDGER_NAME,
    MERGED_NAME,
    REPORT_JSON,
    REPORT_MD,
    _folder_lock,
    assemble_step,
    find_inputs,
    first_step,
    input_key,
    result_key,
    run_batch,
    submit_analysis,
    unit_step,
)
from geoops.batch_defaults import EXIT_SOME_FAILED
from geoops.errors import BadInput, RutwiseError
from geoops.kinematics import simulate_steering
from geoops.pipeline import AnalyzeOptions, analyze_file, result_layers
from geoops.scenarios import BICYCLE, MOTORCYCLE, mapped_lines, slalom

from .conftest import SIM_STEP, SPACING, line_geojson, place, write_geojson, write_ogr

distributed = pytest.importorskip("distributed")
#: one xdist worker runs this whole module (with ``--dist loadgroup``): its clusters and
#: reference run are built once, not once per worker
pytestmark = pytest.mark.xdist_group("batch")

PYTHON = sys.executable
DASK = Path(sys.executable).with_name("dask")
#: ruts per work unit in these tests: the 8-rut layers are cut in two, the 4-rut ones are not
UNIT_RUTS = 4
DEADLINE_S = 60.0


def _pass_lines(seed: int, offset_m: float) -> list[np.ndarray]:
    """One simulated single-track pass (rear and front lines), shifted north by offset_m."""
    vehicle = BICYCLE if seed % 2 else MOTORCYCLE
    steer = slalom(70.0, SIM_STEP, 13.0 + seed % 5, 15.0 + seed % 7, phase_deg=17.0 * seed)
    sim = simulate_steering(vehicle, steer, SIM_STEP)
    lines = mapped_lines(sim, 0.02, SPACING, np.random.default_rng(seed), which=["rear", "front"])
    # turn the pass so that it runs west to east overall, then shift it north
    rear = sim.wheels()["rear"]
    dx, dy = rear[-1] - rear[0]
    c, s = np.cos(np.arctan2(dy, dx)), np.sin(np.arctan2(dy, dx))
    turn = np.array([[c, -s], [s, c]])
    return [xy @ turn + np.array([0.0, offset_m]) for xy in lines.values()]


def _layer_lines(seed: int, n_passes: int) -> list[np.ndarray]:
    return [xy for k in range(n_passes) for xy in _pass_lines(seed * 10 + k, 20.0 * k)]


def make_source(root: Path) -> dict[str, int]:
    """Write the test inputs under ``root``; returns the number of ruts per good source."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "north").mkdir(exist_ok=True)
    (root / "south").mkdir(exist_ok=True)
    counts: dict[str, int] = {}
    for n in range(6):
        lines = _layer_lines(n + 1, 4 if n % 3 == 0 else 2)
        if n % 2 == 0:
            rel = f"north/block_{n}.geojson"
            write_geojson(root / rel, [line_geojson(place(xy, "EPSG:4326")) for xy in lines])
        else:
            rel = f"south/block_{n}.gpkg"
            geoms = [shapely.LineString(place(xy, "EPSG:27700")) for xy in lines]
            write_ogr(root / rel, geoms, "GPKG", "EPSG:27700", layer="ruts")
        counts[rel] = len(lines)
    # cut off part way: must be reported as a failure, not end the run
    (root / "south" / "torn.geojson").write_text('{"type": "FeatureCollection", "features": [')
    (root / "notes.txt").write_text("not a layer: ignored by extension")
    return counts


def _merged(path: Path) -> dict[str, tuple[list[bytes], dict[str, list[Any]]]]:
    """Per layer of a merged GeoPackage: WKB of every geometry and every field's values."""
    out = {}
    for name in ("passes", "ruts"):
        meta, _, wkb, data = raw_read(str(path), layer=name)
        fields = {
            str(f): [None if isinstance(v, float) and np.isnan(v) else v for v in values.tolist()]
            for f, values in zip(meta["fields"], data, strict=True)
        }
        out[name] = ([bytes(g) for g in wkb], fields)
    return out


def _assert_same_merge(a: Path, b: Path) -> None:
    ma, mb = _merged(a), _merged(b)
    for name in ("passes", "ruts"):
        assert ma[name][1] == mb[name][1], name  # every attribute of every feature, in order
        assert ma[name][0] == mb[name][0], name  # every geometry, byte for byte


def _report(outdir: Path) -> dict[str, Any]:
    return json.loads((outdir / REPORT_JSON).read_text())


# ---------------------------------------------------------------------------------------------
# fixtures


@pytest.fixture(scope="module")
def source(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, int]]:
    root = tmp_path_factory.mktemp("batch_source")
    return root, make_source(root)


@pytest.fixture(scope="module")
def cluster() -> Iterator[Any]:
    """A LocalCluster of 2 single-threaded worker processes on loopback, dashboard off."""
    with distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
    ) as lc:
        yield lc


@pytest.fixture(scope="module")
def clean_run(
    tmp_path_factory: pytest.TempPathFactory, source: tuple[Path, dict[str, int]], cluster: Any
) -> Path:
    """A batch run from scratch, never interrupted: the reference of the other runs."""
    outdir = tmp_path_factory.mktemp("clean") / "out"
    with distributed.Client(cluster, set_as_default=False) as client:
        run_batch(find_inputs(source[0]), outdir, client=client, unit_ruts=UNIT_RUTS)
    return outdir


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _stop(proc: subprocess.Popen[bytes]) -> None:
    """Stop a process this module started (and its own process group), by its id."""
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=15)


@pytest.fixture(scope="module")
def scheduler_address(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A `dask scheduler` and a `dask worker` (2 processes) started as separate programs."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    logs = tmp_path_factory.mktemp("dask_logs")
    procs: list[subprocess.Popen[bytes]] = []
    try:
        procs.append(
            subprocess.Popen(
                [
                    str(DASK),
                    "scheduler",
                    "--host",
                    "127.0.0.1",
                    "--port",
                    str(port),
                    "--no-dashboard",
                    "--dashboard-address",
                    "127.0.0.1:0",
                ],
                stdout=subprocess.DEVNULL,
                stderr=open(logs / "scheduler.log", "wb"),
                start_new_session=True,
            )
        )
        procs.append(
            subprocess.Popen(
                [
                    str(DASK),
                    "worker",
                    address,
                    "--nworkers",
                    "2",
                    "--nthreads",
                    "1",
                    "--host",
                    "127.0.0.1",
                    "--no-dashboard",
                    "--dashboard-address",
                    "127.0.0.1:0",
                ],
                stdout=subprocess.DEVNULL,
                stderr=open(logs / "worker.log", "wb"),
                start_new_session=True,
            )
        )
        deadline = time.monotonic() + DEADLINE_S
        client = None
        while client is None:
            try:
                client = distributed.Client(address, timeout="2s", set_as_default=False)
            except (OSError, TimeoutError):
                if time.monotonic() > deadline:
                    raise
        try:
            client.wait_for_workers(2, timeout=DEADLINE_S)
        finally:
            client.close()
        yield address
    finally:
        for proc in reversed(procs):
            _stop(proc)


def _batch_cli(*args: object) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [PYTHON, "-m", "geoops.batch_cli", *map(str, args)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,
        env={k: v for k, v in os.environ.items() if k != "RUTWISE_SCHEDULER"},
    )


# ---------------------------------------------------------------------------------------------
# whole runs


def test_clean_run_writes_results_merge_and_report(
    clean_run: Path, source: tuple[Path, dict[str, int]]
) -> None:
    counts = source[1]
    report = _report(clean_run)
    assert report["inputs"] == 7 and report["finished"] == 6 and report["failed"] == 1
    assert [f["source"] for f in report["failures"]] == ["south/torn.geojson"]
    assert report["failures"][0]["kind"] == "bad-input" and report["failures"][0]["reason"]
    results = sorted(p.name for p in (clean_run / LAYERS_DIR).iterdir())
    assert results == sorted(s.replace("/", "__") + ".gpkg" for s in counts)
    merged = _merged(clean_run / MERGED_NAME)
    ruts = merged["ruts"][1]
    # every rut of every good input, grouped by source in input order, ids in input order
    expected_sources = [s for s in sorted(counts) for _ in range(counts[s])]
    assert ruts["source"] == expected_sources
    for s, n in counts.items():
        assert [
            r for r, src in zip(ruts["rut_id"], ruts["source"], strict=True) if src == s
        ] == list(range(1, n + 1))
    passes = merged["passes"][1]
    assert len(passes["pass_id"]) == sum(counts.values()) // 2
    assert report["passes"] == len(passes["pass_id"])
    assert sum(report["passes_by_verdict"].values()) == report["passes"]
    # the 8-rut layers went through two work units each
    units = {r["source"]: r["work_units"] for r in report["layers"] if r["status"] != "failed"}
    assert units == {s: (2 if n > UNIT_RUTS else 1) for s, n in counts.items()}
    md = (clean_run / REPORT_MD).read_text()
    assert "south/torn.geojson" in md and "Failures" in md
    # inputs in two CRSs: the merge is in lon/lat WGS 84
    meta = dict(zip(*raw_read(str(clean_run / MERGED_NAME), layer="run_metadata")[3], strict=True))
    assert meta["output_crs"] == "EPSG:4326"
    assert "qualified examiner" in meta["caution"]


def test_killed_run_resumes_to_the_same_merge(
    tmp_path: Path, source: tuple[Path, dict[str, int]], clean_run: Path, cluster: Any
) -> None:
    outdir = tmp_path / "out"
    layers = outdir / LAYERS_DIR
    proc = _batch_cli(source[0], "-o", outdir, "--workers", 2, "--unit-ruts", UNIT_RUTS)
    deadline = time.monotonic() + DEADLINE_S
    try:
        while not (
            layers.is_dir()
            and any(p.suffix == ".gpkg" and not p.name.startswith(".") for p in layers.iterdir())
        ):
            assert time.monotonic() < deadline, "no result appeared in time"
            with contextlib.suppress(subprocess.TimeoutExpired):  # a short pause between looks
                proc.wait(timeout=0.02)
            assert proc.returncode is None, proc.communicate()
        os.killpg(proc.pid, signal.SIGKILL)  # the driver, its scheduler and its workers
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    finished = [p for p in layers.iterdir() if p.suffix == ".gpkg" and not p.name.startswith(".")]
    assert 1 <= len(finished) < 6
    assert not (outdir / MERGED_NAME).exists()
    # whatever was finished is complete and carries its key
    for p in finished:
        assert result_key(p) is not None

    with distributed.Client(cluster, set_as_default=False) as client:
        run_batch(find_inputs(source[0]), outdir, client=client, unit_ruts=UNIT_RUTS)
    report = _report(outdir)
    assert report["skipped"] == len(finished)  # results written before the kill are kept
    assert report["skipped"] + report["finished"] == 6 and report["failed"] == 1
    _assert_same_merge(outdir / MERGED_NAME, clean_run / MERGED_NAME)
    assert not [p for p in layers.iterdir() if p.name.startswith(".")]  # no leftovers


def test_external_scheduler(
    tmp_path: Path, source: tuple[Path, dict[str, int]], clean_run: Path, scheduler_address: str
) -> None:
    outdir = tmp_path / "out"
    proc = _batch_cli(
        source[0], "-o", outdir, "--scheduler", scheduler_address, "--unit-ruts", UNIT_RUTS
    )
    _, err = proc.communicate(timeout=DEADLINE_S * 2)
    assert proc.returncode == EXIT_SOME_FAILED, err.decode()
    report = _report(outdir)
    assert report["cluster"].startswith(f"the scheduler at {scheduler_address}")
    assert report["finished"] == 6 and report["failed"] == 1
    assert "rutwise batch: [7/7]" in err.decode()  # plain log lines: stderr is not a terminal
    _assert_same_merge(outdir / MERGED_NAME, clean_run / MERGED_NAME)


def test_rerun_skips_finished_and_reruns_what_changed(
    tmp_path: Path, source: tuple[Path, dict[str, int]], clean_run: Path, cluster: Any
) -> None:
    root = tmp_path / "src"
    shutil.copytree(source[0], root)
    outdir = tmp_path / "out"
    shutil.copytree(clean_run, outdir)  # a finished run: same inputs, same options
    with distributed.Client(cluster, set_as_default=False) as client:
        again = run_batch(find_inputs(root), outdir, client=client, unit_ruts=UNIT_RUTS)
        report = _report(outdir)
        assert (report["skipped"], report["finished"], report["failed"]) == (6, 0, 1)
        assert "skipped (already finished): 6" in (outdir / REPORT_MD).read_text()
        assert [o.status for o in again.outcomes].count("failed") == 1  # tried again
        _assert_same_merge(outdir / MERGED_NAME, clean_run / MERGED_NAME)

        # one input's bytes change, the broken one is repaired: only those two run
        block = root / "north" / "block_0.geojson"
        block.write_text(json.dumps(json.loads(block.read_text()), indent=1))
        shutil.copy(root / "north" / "block_2.geojson", root / "south" / "torn.geojson")
        run_batch(find_inputs(root), outdir, client=client, unit_ruts=UNIT_RUTS)
        report = _report(outdir)
        assert (report["skipped"], report["finished"], report["failed"]) == (5, 2, 0)
        ran = {r["source"] for r in report["layers"] if r["status"] == "finished"}
        assert ran == {"north/block_0.geojson", "south/torn.geojson"}

        # another option changes every key
        run_batch(
            find_inputs(root, defaults=AnalyzeOptions(accuracy=0.02)),
            outdir,
            client=client,
            unit_ruts=UNIT_RUTS,
        )
        report = _report(outdir)
        assert (report["skipped"], report["finished"], report["failed"]) == (0, 7, 0)
    ledger = json.loads((outdir / LEDGER_NAME).read_text())["entries"]
    assert {e["status"] for e in ledger.values()} == {"finished"}


# ---------------------------------------------------------------------------------------------
# pieces


def test_work_units_give_the_whole_layer_answer(tmp_path: Path) -> None:
    lines = _layer_lines(9, 4)
    path = write_geojson(
        tmp_path / "eight.geojson", [line_geojson(place(xy, "EPSG:4326")) for xy in lines]
    )
    item = find_inputs(path)[0]
    key = input_key(path, item.options, 3)
    step = first_step(item, key, str(tmp_path / "cut.gpkg"), 3)
    assert step.outcome is None
    assert step.units == [[0, 1], [2, 3], [4, 5], [6, 7]]  # one pass per component
    pieces = [unit_step(item, unit, n == 0) for n, unit in enumerate(step.units)]
    outcome = assemble_step(item, key, str(tmp_path / "cut.gpkg"), step, *pieces)
    assert outcome.status == "finished" and outcome.work_units == 4
    whole = analyze_file(path)
    want = result_layers(whole, whole.source_crs)
    got = _merged(tmp_path / "cut.gpkg")
    for layer in want:
        fields = got[layer.name][1]
        for name, values in layer.fields.items():
            if layer.types[name] == "real":
                # each unit has its own local frame: sub-millimetre differences only
                np.testing.assert_allclose(
                    np.array(fields[name], dtype=float),
                    np.array(values, dtype=float),
                    atol=1e-3,
                    rtol=1e-4,
                    equal_nan=True,
                    err_msg=name,
                )
            else:
                assert fields[name] == list(values), name
        geoms = shapely.from_wkb(got[layer.name][0])
        assert len(geoms) == len(layer.geometries)


def test_manifest_formats_and_options(tmp_path: Path) -> None:
    lines = _layer_lines(3, 1)
    write_geojson(tmp_path / "a.geojson", [line_geojson(place(xy, "EPSG:4326")) for xy in lines])
    (tmp_path / "list.yaml").write_text(
        "layers:\n  - a.geojson\n  - path: sub/../b.geojson\n    accuracy: 0.03\n"
        "    crs: EPSG:4326\n"
    )
    (tmp_path / "sub").mkdir()
    shutil.copy(tmp_path / "a.geojson", tmp_path / "b.geojson")
    (tmp_path / "list.csv").write_text("path,layer,crs,accuracy,id_field\na.geojson,,,0.05,\n")
    (tmp_path / "list.json").write_text(json.dumps([{"path": "a.geojson", "accuracy": 0.04}]))
    defaults = AnalyzeOptions(accuracy=0.01)
    yaml_items = find_inputs(tmp_path / "list.yaml", defaults=defaults)
    assert [i.options.accuracy for i in yaml_items] == [0.01, 0.03]
    assert yaml_items[1].options.crs == "EPSG:4326"
    assert [i.source for i in yaml_items] == ["a.geojson", "sub/../b.geojson"]
    assert [i.name for i in yaml_items] == ["a.geojson", "sub__..__b.geojson"]
    assert find_inputs(tmp_path / "list.csv")[0].options.accuracy == 0.05
    assert find_inputs(tmp_path / "list.json")[0].options.accuracy == 0.04
    assert find_inputs(tmp_path / "a.geojson")[0].source == "a.geojson"  # one layer
    (tmp_path / "bad.yaml").write_text("- path: a.geojson\n  speed: 3\n")
    with pytest.raises(BadInput, match="speed"):
        find_inputs(tmp_path / "bad.yaml")
    (tmp_path / "twice.yaml").write_text("- a.geojson\n- path: a.geojson\n  accuracy: 0.1\n")
    with pytest.raises(BadInput, match="twice"):
        find_inputs(tmp_path / "twice.yaml")
    assert [i.source for i in find_inputs(tmp_path, patterns=["a.*"])] == ["a.geojson"]
    # the batch's own output folder inside the source folder is never read as input
    (tmp_path / "out" / LAYERS_DIR).mkdir(parents=True)
    shutil.copy(tmp_path / "a.geojson", tmp_path / "out" / LAYERS_DIR / "a.geojson")
    found = [i.source for i in find_inputs(tmp_path, exclude=tmp_path / "out")]
    assert found == ["a.geojson", "b.geojson", "list.json"]


def test_one_batch_at_a_time_per_output_folder(tmp_path: Path) -> None:
    lines = _layer_lines(5, 1)
    path = write_geojson(
        tmp_path / "a.geojson", [line_geojson(place(xy, "EPSG:4326")) for xy in lines]
    )
    outdir = tmp_path / "out"
    outdir.mkdir()
    with _folder_lock(outdir), pytest.raises(RutwiseError, match="Another batch"):
        run_batch(find_inputs(path), outdir)


def test_submit_analysis_on_a_cluster(tmp_path: Path, cluster: Any) -> None:
    lines = _layer_lines(4, 1)
    path = write_geojson(
        tmp_path / "one.geojson", [line_geojson(place(xy, "EPSG:4326")) for xy in lines]
    )
    out = tmp_path / "one.gpkg"
    outcome = submit_analysis(path, AnalyzeOptions(), out, cluster.scheduler_address).result(
        timeout=DEADLINE_S
    )
    assert outcome.status == "finished" and result_key(out) == outcome.key
    assert len(_merged(out)["passes"][0]) == 1
    torn = tmp_path / "torn.geojson"
    torn.write_text("{")
    future = submit_analysis(
        torn, AnalyzeOptions(), tmp_path / "torn.gpkg", cluster.scheduler_address
    )
    with pytest.raises(BadInput):
        future.result(timeout=DEADLINE_S)
