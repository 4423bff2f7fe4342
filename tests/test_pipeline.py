"""The output contract of the pipeline (design section 4) and atomic writing.

Inputs are simulated passes (tests/conftest.py) with known travel direction; vertex order is
varied on purpose, since it says nothing about the travel direction.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyogrio
import pyproj
import pytest
import shapely

import geoops.io
from geoops import __version__
from geoops.kinematics import simulate_steering
from geoops.pipeline import (
    CAUTION,
    PASS_FIELDS,
    RUT_FIELDS,
    AnalyzeOptions,
    analyze_file,
    write_result,
)
from geoops.scenarios import BICYCLE, circle, mapped_lines, straight

from .conftest import (
    NOISE,
    SIM_STEP,
    SPACING,
    follows,
    line_geojson,
    place,
    two_track_file,
    two_tracks,
    unplace,
    write_geojson,
)

#: pyogrio/OGR field types for the contract types  # from memory: OGC 12-128 data types
OGR_TYPES = {"int": {"OFTInteger", "OFTInteger64"}, "real": {"OFTReal"}, "text": {"OFTString"}}
PY_TYPES = {"int": int, "real": float, "text": str}

#: lines that must never pair with the simulated pass: far away, and a straight crossing path
FAR = two_tracks().lines["rear"] + np.array([600.0, 350.0])
CROSSING = np.column_stack([np.linspace(12.0, 14.0, 50), np.linspace(-25.0, 25.0, 50)])


def _layer(path: Path, name: str) -> list[dict]:
    """Features of an output layer as dicts, with geometry as a local-frame array."""
    df = pyogrio.read_dataframe(path, layer=name)
    info = pyogrio.read_info(path, layer=name)
    crs = pyproj.CRS.from_user_input(info["crs"]).to_string()
    out = []
    records = df.drop(columns="geometry").to_dict("records")
    for rec, geom in zip(records, df.geometry.values, strict=True):
        rec["xy"] = unplace(shapely.get_coordinates(geom), crs)
        out.append(rec)
    return out


@pytest.fixture(scope="module")
def contract_output(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The simulated pass plus two distractor lines, national grid in, GeoPackage out."""
    tmp = tmp_path_factory.mktemp("contract")
    src = two_track_file(
        tmp, crs="EPSG:27700", fmt="gpkg", ids=[11, 22, 33, 44], extra=[FAR, CROSSING]
    )
    out = tmp / "out" / "result.gpkg"
    write_result(analyze_file(src), out)
    return out


def test_layer_names(contract_output: Path) -> None:
    names = [str(n) for n, _ in pyogrio.list_layers(contract_output)]
    assert sorted(names) == ["passes", "run_metadata", "ruts"]  # design section 4


@pytest.mark.parametrize(("layer", "spec"), [("passes", PASS_FIELDS), ("ruts", RUT_FIELDS)])
def test_fields_and_types(contract_output: Path, layer: str, spec: dict[str, str]) -> None:
    info = pyogrio.read_info(contract_output, layer=layer)
    assert list(info["fields"]) == list(spec)  # design section 4, in order
    for name, ogr_type in zip(info["fields"], info["ogr_types"], strict=True):
        assert ogr_type in OGR_TYPES[spec[name]], name  # from memory: OGC 12-128 data types
    assert info["geometry_type"] == "LineString"
    # source: pyproj EPSG:27700 definition (output in the input's CRS)
    assert pyproj.CRS.from_user_input(info["crs"]).equals(pyproj.CRS.from_epsg(27700))


def test_geojson_property_types(tmp_path: Path) -> None:
    src = two_track_file(tmp_path, ids=[1, 2, 3], extra=[FAR])
    out = write_result(analyze_file(src), tmp_path / "r.geojson")
    for path, spec in zip(out, (PASS_FIELDS, RUT_FIELDS), strict=True):
        for feat in json.loads(path.read_text())["features"]:
            props = feat["properties"]
            assert list(props) == list(spec)
            for name, value in props.items():
                assert value is None or isinstance(value, PY_TYPES[spec[name]]), (name, value)
                assert not isinstance(value, bool)


def test_distractors_stay_in_ruts_with_a_reason(contract_output: Path) -> None:
    ruts = _layer(contract_output, "ruts")
    assert len(ruts) == 4  # every input line feature, none dropped
    assert [r["source_fids"] for r in ruts] == ["11", "22", "33", "44"]  # source: OGC 12-128 fid
    unpaired = [r for r in ruts if r["source_fids"] in ("33", "44")]
    for r in unpaired:
        assert np.isnan(r["pass_id"]) and r["wheel"] == "unassigned"
        assert r["reason"] in ("no_partner", "not_a_pair")
    passes = _layer(contract_output, "passes")
    assert len(passes) == 1
    assert passes[0]["source_fids"] == "11,22" and passes[0]["rut_ids"] == "1,2"


def test_degenerate_and_non_line_features_are_not_dropped(tmp_path: Path) -> None:
    lines = {k: place(v, "EPSG:4326") for k, v in two_tracks().lines.items()}
    stub = place(np.array([[30.0, 30.0], [30.0, 30.0]]), "EPSG:4326")  # a zero-length line
    geoms = [
        line_geojson(lines["rear"]),
        line_geojson(lines["front"]),
        line_geojson(stub),
        {"type": "Point", "coordinates": [-3.04, 55.41]},
    ]
    src = write_geojson(tmp_path / "odd.geojson", geoms, ids=[1, 2, 3, 4])
    result = analyze_file(src)
    assert [r.source_fids for r in result.ruts] == ["1", "2", "3"]
    stub_rec = result.ruts[2]
    assert stub_rec.pass_id is None and stub_rec.reason
    assert any("Feature 4" in w for w in result.warnings)  # the point: reported, not silent
    assert "Feature 4" in result.metadata["warnings"]
    write_result(result, tmp_path / "odd.gpkg")
    assert pyogrio.read_info(tmp_path / "odd.gpkg", layer="ruts")["features"] == 3


@pytest.mark.parametrize("flip", [(False, False), (True, False), (False, True), (True, True)])
def test_pass_and_ruts_follow_travel_direction(tmp_path: Path, flip: tuple[bool, bool]) -> None:
    """Whatever the vertex order of the input, decided output runs in the travel direction."""
    case = two_tracks()
    rear, front = (
        xy[::-1] if f else xy
        for xy, f in zip((case.lines["rear"], case.lines["front"]), flip, strict=True)
    )
    # front first in the file: the order of features says nothing about the wheels either
    geoms = [line_geojson(place(front, "EPSG:4326")), line_geojson(place(rear, "EPSG:4326"))]
    src = write_geojson(tmp_path / "pass.geojson", geoms, ids=["front-7", "rear-3"])
    out = tmp_path / "pass.gpkg"
    write_result(analyze_file(src), out)
    (p,) = _layer(out, "passes")
    assert p["verdict"] == "decided" and p["confidence"] > 0.9
    # simulation truth: the simulated rear path starts where the vehicle started
    assert follows(p["xy"], case.rear_path)
    # the pass geometry is the rear-axle path: it lies on the rear track
    d = shapely.distance(shapely.points(p["xy"]), shapely.LineString(case.rear_path))
    assert np.max(d) < 0.1
    ruts = {r["source_fids"]: r for r in _layer(out, "ruts")}
    assert ruts["rear-3"]["wheel"] == "rear" and ruts["front-7"]["wheel"] == "front"
    assert follows(ruts["rear-3"]["xy"], case.rear_path)
    assert follows(ruts["front-7"]["xy"], case.front_path)
    assert ruts["rear-3"]["pass_id"] == p["pass_id"] == ruts["front-7"]["pass_id"]
    assert p["source_fids"] == "front-7,rear-3"  # source: RFC 7946 section 3.2 (Feature id)


def test_metadata(contract_output: Path) -> None:
    df = pyogrio.read_dataframe(contract_output, layer="run_metadata")
    meta = dict(zip(df["key"], df["value"], strict=True))
    assert meta["caution"] == CAUTION
    assert meta["version"] == __version__
    frame = json.loads(meta["local_frame"])
    assert frame["local_proj"].startswith("+proj=aeqd")
    assert pyproj.CRS.from_wkt(frame["local_wkt"]).is_projected  # rebuildable definition
    assert json.loads(meta["options"]) == {}
    assert meta["input_crs"] == "EPSG:27700" and meta["output_crs"] == "EPSG:27700"
    for layer in ("passes", "ruts"):
        assert (
            CAUTION
            in pyogrio.read_info(contract_output, layer=layer)["layer_metadata"]["DESCRIPTION"]
        )


def test_metadata_records_options(tmp_path: Path) -> None:
    src = two_track_file(tmp_path, ids=[1, 2])
    options = AnalyzeOptions(accuracy=0.02, id_field="note")
    result = analyze_file(src, options)
    assert json.loads(result.metadata["options"]) == {"accuracy": 0.02, "id_field": "note"}
    assert [r.source_fids for r in result.ruts] == ["line 0", "line 1"]


# --- atomic writing -----------------------------------------------------------------------------


def test_no_leftover_files(contract_output: Path) -> None:
    assert sorted(p.name for p in contract_output.parent.iterdir()) == ["result.gpkg"]


def test_geojson_no_leftover_files(tmp_path: Path) -> None:
    src = two_track_file(tmp_path, ids=[1, 2])
    out_dir = tmp_path / "out"
    write_result(analyze_file(src), out_dir / "r.geojson")
    assert sorted(p.name for p in out_dir.iterdir()) == ["r.geojson", "r.ruts.geojson"]


def test_failing_gpkg_write_keeps_the_old_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    result = analyze_file(two_track_file(tmp_path, ids=[1, 2]))
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    target = out_dir / "result.gpkg"
    target.write_bytes(b"an earlier result")
    real_write = geoops.io.raw_write
    calls = []

    def write_then_fail(*args: object, **kwargs: object) -> None:
        calls.append(kwargs.get("layer"))
        if len(calls) == 2:
            raise OSError(28, "No space left on device")
        real_write(*args, **kwargs)

    monkeypatch.setattr(geoops.io, "raw_write", write_then_fail)
    with pytest.raises(OSError, match="No space"):
        write_result(result, target)
    assert calls == ["passes", "ruts"]  # the first layer had been written to the temporary file
    assert target.read_bytes() == b"an earlier result"
    assert sorted(p.name for p in out_dir.iterdir()) == ["result.gpkg"]


def test_failing_geojson_write_keeps_the_old_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    result = analyze_file(two_track_file(tmp_path, ids=[1, 2]))
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    target = out_dir / "r.geojson"
    target.write_text('{"earlier": true}')

    def fail(obj: object, fh: object, **kwargs: object) -> None:
        fh.write('{"type": "FeatureCollection", "feat')  # type: ignore[attr-defined]
        raise RuntimeError("interrupted")

    monkeypatch.setattr(geoops.io.json, "dump", fail)
    with pytest.raises(RuntimeError):
        write_result(result, target)
    assert target.read_text() == '{"earlier": true}'
    assert sorted(p.name for p in out_dir.iterdir()) == ["r.geojson"]


def test_turn_radius_of_a_steady_turn(tmp_path: Path) -> None:
    """A bicycle held at 15 degrees of steering: the rear wheel runs on a circle."""
    sim = simulate_steering(BICYCLE, circle(60.0, SIM_STEP, 15.0), SIM_STEP)
    lines = mapped_lines(sim, NOISE, SPACING, np.random.default_rng(5), which=["rear", "front"])
    geoms = [line_geojson(place(lines[k], "EPSG:4326")) for k in ("rear", "front")]
    (p,) = analyze_file(write_geojson(tmp_path / "circle.geojson", geoms, ids=[1, 2])).passes
    delta = np.radians(15.0)
    # source: kinematic bicycle model steady turn R_rear = L / tan(delta) (Lynch & Park, Modern
    # Robotics, 2017, wheeled mobile robots; references.md)
    assert p.min_turn_radius_m == pytest.approx(BICYCLE.wheelbase / np.tan(delta), rel=0.1)
    assert p.max_steer_deg == pytest.approx(15.0, abs=1.5)


def test_straight_pass_has_no_minimum_turn_radius(tmp_path: Path) -> None:
    """A straight pass never turns: its minimum turning radius is not estimable (null)."""
    sim = simulate_steering(BICYCLE, straight(40.0, SIM_STEP), SIM_STEP)
    lines = mapped_lines(sim, NOISE, SPACING, np.random.default_rng(6), which=["rear", "front"])
    geoms = [line_geojson(place(lines[k], "EPSG:4326")) for k in ("rear", "front")]
    passes = analyze_file(write_geojson(tmp_path / "straight.geojson", geoms, ids=[1, 2])).passes
    assert len(passes) == 1
    # common practice: a straight line has zero curvature (an infinite radius)
    assert passes[0].verdict == "undetermined"
    assert passes[0].min_turn_radius_m is None
    assert passes[0].max_steer_deg is None
