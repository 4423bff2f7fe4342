"""`rutwise analyze` on the bad-input corpus: one clear line and exit 2, never a traceback.

Runs in-process through :func:`geoops.cli.main`; two cases also run the console script in a
subprocess, to see what a user sees. The corpus is written at test time (make_corpus.py).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from geoops.cli import EXIT_USER_ERROR, main

from .make_corpus import _MAKERS, Case, million_vertices, write_corpus, zip_bomb

RUTWISE = Path(sys.executable).with_name("rutwise")


@pytest.fixture(scope="module")
def corpus(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Case]:
    return {c.name: c for c in write_corpus(tmp_path_factory.mktemp("corpus"))}


def _analyze(capsys: pytest.CaptureFixture[str], src: Path, out: Path) -> tuple[int, str, str]:
    rc = main(["analyze", str(src), "-o", str(out)])
    stdout, stderr = capsys.readouterr()
    return rc, stdout, stderr


@pytest.mark.parametrize("name", [m.__name__ for m in _MAKERS])
def test_each_bad_input_gets_one_clear_line(
    corpus: dict[str, Case], name: str, capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    case = corpus[name]
    rc, stdout, stderr = _analyze(capsys, case.file, tmp_path / "out.gpkg")
    assert "Traceback" not in stderr and "internal error" not in stderr
    assert rc == case.cli_exit, stderr
    if case.cli_exit == EXIT_USER_ERROR:
        assert stdout == ""
        lines = stderr.splitlines()
        assert len(lines) == 1 and lines[0].startswith("rutwise: error: "), stderr
        text = lines[0].lower()
        assert not (tmp_path / "out.gpkg").exists()
    else:
        text = stdout.lower()
        assert (tmp_path / "out.gpkg").exists()
    for word in case.cli_words:
        assert word in text, (word, text)


def test_hostile_layer_names_are_quoted_not_printed_raw(
    corpus: dict[str, Case], capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    rc, _, stderr = _analyze(capsys, corpus["gpkg_hostile_layer_names"].file, tmp_path / "o.gpkg")
    assert rc == EXIT_USER_ERROR
    assert "\x1b" not in stderr and stderr.count("\n") == 1  # no escape codes, no forged lines
    assert r"'\x1b[2J\x1b[31mred alert'" in stderr and r"'two\nlines'" in stderr


def test_zip_traversal_writes_nothing_outside(
    corpus: dict[str, Case], capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    escape = Path("/tmp/rutwise_escape")
    assert _analyze(capsys, corpus["zip_path_traversal"].file, tmp_path / "o.gpkg")[0] == 2
    assert not escape.exists()


def test_zip_bomb_is_refused_from_its_directory(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """A 64 MB member against a 16 MB limit (the default, 512 MB, is checked by the bench)."""
    bomb = zip_bomb(tmp_path, megabytes=64)
    monkeypatch.setenv("RUTWISE_ZIP_MAX_MB", "16")
    rc, _, stderr = _analyze(capsys, bomb, tmp_path / "o.gpkg")
    assert rc == EXIT_USER_ERROR and "would expand" in stderr and "RUTWISE_ZIP_MAX_MB" in stderr
    monkeypatch.setenv("RUTWISE_ZIP_MAX_MB", "128")  # under the limit it is read as a layer
    rc, stdout, _ = _analyze(capsys, bomb, tmp_path / "o.gpkg")
    assert rc == 0 and "2 ruts read" in stdout


@pytest.mark.slow
def test_a_million_vertices_are_analysed(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """Accepted on the command line: time grows with line length, not vertex count (bench/
    robustness.md has the time and memory)."""
    rc, stdout, stderr = _analyze(capsys, million_vertices(tmp_path), tmp_path / "o.gpkg")
    assert rc == 0, stderr
    assert "2 ruts read" in stdout


def test_length_limit_is_configurable(
    corpus: dict[str, Case],
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
    tmp_path: Path,
) -> None:
    monkeypatch.setenv("RUTWISE_MAX_LAYER_KM", "0.01")  # 10 m: the 20 m lines are over it
    rc, _, stderr = _analyze(capsys, corpus["mixed_types"].file, tmp_path / "o.gpkg")
    assert rc == EXIT_USER_ERROR and "the limit is 0.01 km" in stderr
    monkeypatch.setenv("RUTWISE_MAX_LAYER_KM", "lots")
    rc, _, stderr = _analyze(capsys, corpus["mixed_types"].file, tmp_path / "o.gpkg")
    assert rc == EXIT_USER_ERROR and "RUTWISE_MAX_LAYER_KM" in stderr


@pytest.mark.parametrize("name", ["deeply_nested", "gpkg_hostile_layer_names"])
def test_console_script_shows_one_line(corpus: dict[str, Case], name: str, tmp_path: Path) -> None:
    proc = subprocess.run(
        [str(RUTWISE), "analyze", str(corpus[name].file), "-o", str(tmp_path / "o.gpkg")],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert proc.returncode == EXIT_USER_ERROR
    assert proc.stderr.startswith("rutwise: error: ") and proc.stderr.count("\n") == 1
