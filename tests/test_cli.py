"""The `rutwise analyze` command: user errors (one line, exit 2, no traceback) and happy paths.

Most runs call :func:`geoops.cli.main` in-process; one runs the installed console script.
Inputs are simulated two-track passes (tests/conftest.py); where the CRS matters the check names
the CRS definition it relies on.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyogrio
import pyproj
import pytest
import shapely

from geoops.cli import EXIT_USER_ERROR, main
from geoops.pipeline import CAUTION

from .conftest import (
    place,
    two_track_file,
    two_tracks,
    unplace,
    write_geojson,
    write_ogr,
)

RUTWISE = Path(sys.executable).with_name("rutwise")


def _run(capsys: pytest.CaptureFixture[str], *args: object) -> tuple[int, str, str]:
    rc = main(["analyze", *map(str, args)])
    out, err = capsys.readouterr()
    return rc, out, err


def _user_error(capsys: pytest.CaptureFixture[str], *args: object) -> str:
    """Run, expect a user error, and return its one line."""
    rc, out, err = _run(capsys, *args)
    assert rc == EXIT_USER_ERROR
    assert out == ""
    assert "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("rutwise: error: ")
    return lines[0]


def _passes(path: Path) -> tuple[dict, list[dict]]:
    """Info and records of the passes layer of an output GeoPackage."""
    info = pyogrio.read_info(path, layer="passes")
    df = pyogrio.read_dataframe(path, layer="passes")
    return info, df.to_dict("records")


# --- user errors --------------------------------------------------------------------------------


def test_unreadable_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    junk = tmp_path / "survey.gpkg"
    junk.write_bytes(np.random.default_rng(3).bytes(4096))
    line = _user_error(capsys, junk, "-o", tmp_path / "out.gpkg")
    assert "Cannot read" in line and "Give a GeoJSON, GeoPackage" in line
    assert not (tmp_path / "out.gpkg").exists()


def test_missing_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    line = _user_error(capsys, tmp_path / "nowhere.geojson", "-o", tmp_path / "out.gpkg")
    assert "No file at" in line and "Check the path" in line


def test_missing_layer(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path, fmt="gpkg")
    line = _user_error(capsys, path, "--layer", "tyre_marks", "-o", tmp_path / "out.gpkg")
    assert "'tyre_marks'" in line and "it has: ruts" in line and "--layer" in line


def test_no_crs_asks_for_crs(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg", write_crs=False)
    line = _user_error(capsys, path, "-o", tmp_path / "out.gpkg")
    assert "no coordinate reference system" in line and "--crs" in line


def test_shapefile_without_prj_asks_for_crs(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    lines = [place(two_tracks().lines[k], "EPSG:27700") for k in ("rear", "front")]
    shp = write_ogr(
        tmp_path / "ruts.shp", [shapely.LineString(xy) for xy in lines], "ESRI Shapefile", None
    )
    assert not shp.with_suffix(".prj").exists()
    assert "--crs" in _user_error(capsys, shp, "-o", tmp_path / "out.gpkg")


def test_points_only(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    pts = write_geojson(
        tmp_path / "pts.geojson", [{"type": "Point", "coordinates": [-3.04, 55.41]}] * 3
    )
    line = _user_error(capsys, pts, "-o", tmp_path / "out.gpkg")
    assert "no line geometries" in line and "Give LineString or MultiLineString" in line


def test_empty_layer(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    empty = write_geojson(tmp_path / "empty.geojson", [])
    line = _user_error(capsys, empty, "-o", tmp_path / "out.gpkg")
    assert "is empty" in line and "Give a layer with rut lines" in line


def test_unknown_output_extension(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path)
    line = _user_error(capsys, path, "-o", tmp_path / "out.shp")
    assert "'.shp'" in line and ".gpkg" in line and ".geojson" in line


def test_output_that_would_overwrite_the_input(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = two_track_file(tmp_path, fmt="gpkg")
    before = path.read_bytes()
    assert "overwrite the input" in _user_error(capsys, path, "-o", path)
    assert path.read_bytes() == before
    # the GeoJSON ruts file sits beside the named output: OUT.ruts.geojson
    gj = two_track_file(tmp_path, name="walk.ruts")
    assert "overwrite the input" in _user_error(capsys, gj, "-o", tmp_path / "walk.geojson")


def test_unwritable_output(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path)
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder")
    line = _user_error(capsys, path, "-o", blocker / "out.gpkg")
    assert "Cannot write" in line and "-o" in line


def test_bad_crs_and_accuracy(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path)
    assert "not recognised" in _user_error(
        capsys, path, "--crs", "EPSG:0", "-o", tmp_path / "o.gpkg"
    )
    assert "Unknown output CRS" in _user_error(
        capsys, path, "--out-crs", "EPSG:99999", "-o", tmp_path / "o.gpkg"
    )
    assert "accuracy" in _user_error(capsys, path, "--accuracy", "-1", "-o", tmp_path / "o.gpkg")


# --- happy paths --------------------------------------------------------------------------------


def test_geojson_lonlat_in_gpkg_out(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path, ids=[101, 102])
    out = tmp_path / "result.gpkg"
    rc, stdout, err = _run(capsys, path, "-o", out)
    assert rc == 0, err
    assert f"written: {out}" in stdout and "caution:" in stdout
    info, passes = _passes(out)
    # source: pyproj EPSG:4326 definition (output in the input's CRS)
    assert pyproj.CRS.from_user_input(info["crs"]).equals(pyproj.CRS.from_epsg(4326))
    assert len(passes) == 1 and passes[0]["verdict"] == "decided"
    assert passes[0]["source_fids"] == "101,102"  # source: RFC 7946 section 3.2 (Feature id)
    # simulation truth: the simulated bicycle's wheelbase (kinematic bicycle model)
    assert passes[0]["wheelbase_m"] == pytest.approx(two_tracks().wheelbase, rel=0.05)


def test_analyst_gpkg_national_grid_stays_in_national_grid(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg", ids=[931, 932])
    out = tmp_path / "bng.gpkg"
    rc, _, err = _run(capsys, path, "-o", out, "-q", "--id-field", "ref")
    assert rc == 0, err
    info, passes = _passes(out)
    # source: pyproj EPSG:27700 definition (output in the input's CRS by default)
    assert pyproj.CRS.from_user_input(info["crs"]).equals(pyproj.CRS.from_epsg(27700))
    assert passes[0]["source_fids"] == "R-0,R-1"  # the --id-field attribute
    ruts = pyogrio.read_info(out, layer="ruts")
    assert pyproj.CRS.from_user_input(ruts["crs"]).equals(pyproj.CRS.from_epsg(27700))
    x, y = pyogrio.read_dataframe(out, layer="ruts").total_bounds[:2]
    assert 300_000 < x < 400_000 and 550_000 < y < 650_000  # source: pyproj EPSG:27700


def test_out_crs(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg")
    out = tmp_path / "ll.gpkg"
    assert _run(capsys, path, "-o", out, "-q", "--out-crs", "EPSG:4326")[0] == 0
    info, _ = _passes(out)
    # source: pyproj EPSG:4326 definition
    assert pyproj.CRS.from_user_input(info["crs"]).equals(pyproj.CRS.from_epsg(4326))
    ruts = pyogrio.read_dataframe(out, layer="ruts")
    first = shapely.get_coordinates(ruts.geometry.values[ruts["rut_id"].values == 1][0])
    want = place(two_tracks().lines["rear"], "EPSG:27700")
    # back through pyproj: the output lon/lat is the input national grid position
    back = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:27700", always_xy=True)
    x, y = back.transform(first[:, 0], first[:, 1])
    got = np.column_stack([x, y])
    ends = {tuple(np.round(got[0], 2)), tuple(np.round(got[-1], 2))}
    # source: pyproj EPSG:27700 <-> EPSG:4326 transformation (rut ends kept to the centimetre)
    assert ends == {tuple(np.round(want[0], 2)), tuple(np.round(want[-1], 2))}


def test_geojson_output_is_two_rfc7946_files(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg")
    out = tmp_path / "result.geojson"
    rc, stdout, err = _run(capsys, path, "-o", out, "--out-crs", "EPSG:27700")
    assert rc == 0, err
    ruts_path = tmp_path / "result.ruts.geojson"
    assert f"written: {out}" in stdout and f"written: {ruts_path}" in stdout
    for file, n in ((out, 1), (ruts_path, 2)):
        doc = json.loads(file.read_text())
        assert doc["type"] == "FeatureCollection" and len(doc["features"]) == n
        assert "crs" not in doc  # source: RFC 7946 section 4 (no crs member; WGS 84 lon/lat)
        coords = np.concatenate([f["geometry"]["coordinates"] for f in doc["features"]])
        lon, lat = coords.mean(axis=0)
        # source: RFC 7946 section 3.1.1 (longitude first) and pyproj EPSG:27700 -> 4326
        assert lon == pytest.approx(-3.030, abs=0.01) and lat == pytest.approx(55.409, abs=0.01)
        meta = doc["rutwise_metadata"]
        assert meta["caution"] == CAUTION and meta["output_crs"] == "EPSG:4326"


def test_foot_based_crs_reports_metres(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    feet = two_track_file(tmp_path, crs="EPSG:2227", fmt="gpkg", name="feet")
    metres = two_track_file(tmp_path, crs="EPSG:4326", fmt="gpkg", name="metres")
    for path in (feet, metres):
        assert _run(capsys, path, "-o", tmp_path / f"{path.stem}_out.gpkg", "-q")[0] == 0
    info, ft = _passes(tmp_path / "feet_out.gpkg")
    _, m = _passes(tmp_path / "metres_out.gpkg")
    # source: pyproj EPSG:2227 definition (NAD83 / California zone 3, US survey foot)
    assert pyproj.CRS.from_user_input(info["crs"]).equals(pyproj.CRS.from_epsg(2227))
    # from memory: US survey foot = 1200/3937 m (NIST Handbook 44, App. C). The same geometry
    # gives the same wheelbase in metres whatever unit the file holds (3.44 would mean feet)
    assert ft[0]["wheelbase_m"] == pytest.approx(m[0]["wheelbase_m"], rel=2e-3)
    assert ft[0]["length_m"] == pytest.approx(m[0]["length_m"], rel=1e-4)
    # simulation truth: the simulated bicycle's wheelbase
    assert ft[0]["wheelbase_m"] == pytest.approx(two_tracks().wheelbase, rel=0.05)
    # the output geometry is back in feet: the rear rut start in EPSG:2227 -> local metres
    ruts = pyogrio.read_dataframe(tmp_path / "feet_out.gpkg", layer="ruts")
    geom = shapely.get_coordinates(ruts.geometry.values[ruts["rut_id"].values == 1][0])
    local = unplace(geom, "EPSG:2227")
    rear = two_tracks().lines["rear"]
    ends = min(np.hypot(*(local[0] - rear[0])), np.hypot(*(local[0] - rear[-1])))
    assert ends < 1e-3  # source: pyproj EPSG:2227 transformation (round trip to a millimetre)


def test_crs_option_for_a_file_without_crs(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = two_track_file(tmp_path, crs="EPSG:27700", fmt="gpkg", write_crs=False)
    out = tmp_path / "given.gpkg"
    rc, _, err = _run(capsys, path, "-o", out, "-q", "--crs", "EPSG:27700")
    assert rc == 0, err
    info, passes = _passes(out)
    # source: pyproj EPSG:27700 definition (the named CRS is the output's)
    assert pyproj.CRS.from_user_input(info["crs"]).equals(pyproj.CRS.from_epsg(27700))
    assert passes[0]["wheelbase_m"] == pytest.approx(two_tracks().wheelbase, rel=0.05)
    meta = pyogrio.read_dataframe(out, layer="run_metadata")
    options = json.loads(meta.loc[meta["key"] == "options", "value"].item())
    assert options == {"crs": "EPSG:27700"}


def test_installed_console_script(tmp_path: Path) -> None:
    path = two_track_file(tmp_path, ids=[7, 8])
    out = tmp_path / "script.gpkg"
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    proc = subprocess.run(
        [str(RUTWISE), "analyze", str(path), "-o", str(out)],
        capture_output=True,
        text=True,
        timeout=60,
        env=env,
        check=False,
    )
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "decided" in proc.stdout and f"written: {out}" in proc.stdout
    assert pyogrio.read_info(out, layer="passes")["features"] == 1


def test_analyze_leaves_pandas_and_geopandas_importable(tmp_path: Path) -> None:
    # the command imports pyogrio without its dataframe modules (start-up time); they must
    # stay importable, and usable, for anything else in the process
    path = two_track_file(tmp_path, ids=[7, 8])
    script = (
        "import sys\nfrom geoops import cli\n"
        "assert cli.main(['analyze', sys.argv[1], '-q', '-o', sys.argv[2]]) == 0\n"
        "print('pandas' in sys.modules, 'geopandas' in sys.modules)\n"
        "import geopandas\n"
        "print(len(geopandas.GeoDataFrame({'a': [1, 2]}, geometry=geopandas.points_from_xy("
        "[0, 1], [0, 1]))))\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", script, str(path), str(tmp_path / "out.gpkg")],
        capture_output=True, text=True, timeout=120, check=False,
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == ["False", "False", "2"]
    assert pyogrio.read_info(tmp_path / "out.gpkg", layer="passes")["features"] == 1


def test_a_pyogrio_that_needs_pandas_is_imported_whole(tmp_path: Path) -> None:
    # should a pyogrio ever import pandas unconditionally, hiding pandas must not break the
    # command: the lean import falls back to the ordinary one
    fake = tmp_path / "pyogrio"
    fake.mkdir()
    (fake / "__init__.py").write_text("import pandas\nfrom pyogrio import part\n")
    (fake / "part.py").write_text("")
    script = (
        "import sys\nsys.path.insert(0, sys.argv[1])\nfrom geoops import cli\n"
        "cli._import_pyogrio_without_dataframes()\n"
        "import pyogrio\nprint(pyogrio.__file__.startswith(sys.argv[1]), 'pandas' in sys.modules,"
        " sys.modules['pandas'] is not None)\n"
    )
    proc = subprocess.run([sys.executable, "-c", script, str(tmp_path)], capture_output=True,
                          text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == ["True", "True", "True"]
