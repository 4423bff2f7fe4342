"""Checksums of results: recorded on writing, verified on reading, broken by any tampering."""

from __future__ import annotations

import hashlib
import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from geoops.integrity import file_sha256, main, verify_result
from geoops.pipeline import analyze_file, write_result

from .conftest import two_track_file, two_tracks

FAR = two_tracks().lines["rear"] + np.array([600.0, 350.0])  # a lone rut, far off


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, Path]:
    """(input, GeoPackage result in the national grid, GeoJSON result in lon/lat)."""
    tmp = tmp_path_factory.mktemp("integrity")
    src = two_track_file(tmp, crs="EPSG:27700", fmt="gpkg", extra=[FAR])
    result = analyze_file(src)
    gpkg = write_result(result, tmp / "out" / "result.gpkg")[0]
    geojson = write_result(result, tmp / "out" / "result.geojson")[0]
    return src, gpkg, geojson


def _metadata(gpkg: Path) -> dict[str, str]:
    with sqlite3.connect(gpkg) as db:
        return dict(db.execute("SELECT key, value FROM run_metadata").fetchall())


def test_input_checksum_is_that_of_the_file_bytes(written: tuple[Path, Path, Path]) -> None:
    src, gpkg, _ = written
    # source: hashlib (FIPS 180-4 SHA-256) over the whole file
    assert _metadata(gpkg)["input_sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()


def test_a_fresh_result_verifies_with_its_input(written: tuple[Path, Path, Path]) -> None:
    src, gpkg, geojson = written
    found = verify_result(gpkg, src)
    assert found.ok, found.report()
    assert len(found.checked) == 3  # passes, ruts, input
    sibling = geojson.with_name("result.ruts.geojson")
    for path in (geojson, sibling):
        one = verify_result(path, src)
        assert one.ok and len(one.checked) == 2, one.report()


def test_the_content_checksum_does_not_depend_on_the_format(tmp_path: Path,
                                                           written: tuple[Path, Path, Path]
                                                           ) -> None:
    src, _, geojson = written
    lonlat = write_result(analyze_file(src), tmp_path / "lonlat.gpkg", out_crs="EPSG:4326")[0]
    from_geojson = json.loads(geojson.read_text())["rutwise_metadata"]["layer_sha256"]
    assert json.loads(_metadata(lonlat)["layer_sha256"]) == json.loads(from_geojson)


@pytest.mark.parametrize("sql", [
    "UPDATE passes SET wheelbase_m = wheelbase_m + 0.01",
    "UPDATE ruts SET wheel = 'front' WHERE wheel = 'rear'",
    "DELETE FROM ruts WHERE fid = (SELECT MAX(fid) FROM ruts)",
])
def test_a_changed_geopackage_fails(tmp_path: Path, written: tuple[Path, Path, Path],
                                    sql: str) -> None:
    copy = tmp_path / "tampered.gpkg"
    copy.write_bytes(written[1].read_bytes())
    with sqlite3.connect(copy) as db:
        for name in ("ST_IsEmpty", "ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY"):
            db.create_function(name, 1, lambda _g: 0)  # the GeoPackage's spatial index triggers
        assert db.execute(sql).rowcount > 0
    found = verify_result(copy)
    assert not found.ok
    assert any("does not match" in p for p in found.problems), found.report()


def test_a_moved_vertex_or_a_wrong_input_fails(tmp_path: Path,
                                              written: tuple[Path, Path, Path]) -> None:
    src, _, geojson = written
    doc = json.loads(geojson.read_text())
    doc["features"][0]["geometry"]["coordinates"][3][0] += 1e-6  # about 7 cm of longitude
    moved = tmp_path / "moved.geojson"
    moved.write_text(json.dumps(doc))
    assert not verify_result(moved).ok
    other = tmp_path / "other.gpkg"
    other.write_bytes(src.read_bytes() + b"\0")
    found = verify_result(written[1], other)
    assert not found.ok and "input_sha256 differs" in found.problems[0]


def test_damaged_and_unstamped_files_fail(tmp_path: Path, written: tuple[Path, Path, Path]
                                          ) -> None:
    cut = tmp_path / "cut.gpkg"
    cut.write_bytes(written[1].read_bytes()[:5000])
    assert not verify_result(cut).ok
    bare = tmp_path / "bare.geojson"
    bare.write_text(json.dumps({"type": "FeatureCollection", "features": []}))
    found = verify_result(bare)
    assert not found.ok and "no layer_sha256" in found.problems[0]


def test_command_line_exit_codes(tmp_path: Path, written: tuple[Path, Path, Path],
                                 capsys: pytest.CaptureFixture[str]) -> None:
    src, gpkg, _ = written
    assert main([str(gpkg), "--input", str(src)]) == 0
    assert "verified" in capsys.readouterr().out
    assert main([str(gpkg), "--input", str(gpkg)]) == 1


def test_a_folder_checksum_lists_its_files(tmp_path: Path) -> None:
    (tmp_path / "b").mkdir()
    (tmp_path / "a.txt").write_bytes(b"one")
    (tmp_path / "b" / "c.txt").write_bytes(b"two")
    listing = "".join(f"{hashlib.sha256(data).hexdigest()}  {name}\n"
                      for name, data in (("a.txt", b"one"), ("b/c.txt", b"two")))
    # source: the line format of GNU coreutils sha256sum
    assert file_sha256(tmp_path) == hashlib.sha256(listing.encode()).hexdigest()
    assert file_sha256(tmp_path / "missing") == ""


@pytest.mark.parametrize("column", [
    [1, 2.5, None, float("nan"), -0.0, np.float32(1.1), np.int64(7), float("inf"), 2**70],
    [None, None], ["a", None, "b,\"c\""], [True, 2, np.bool_(False)], [1, "a", None], [],
    [np.uint64(2**64 - 1), np.float32("nan"), np.longdouble("0.1")],
])
def test_whole_columns_take_the_canonical_form_of_each_value(column: list[object]) -> None:
    """The checksum's definition is per value (``_plain``); columns are converted at once."""
    from geoops.integrity import _plain, _plain_column

    expected = [_plain(v) for v in column]
    got = _plain_column(column)
    assert [type(v) for v in got] == [type(v) for v in expected]
    assert got == expected
