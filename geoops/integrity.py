"""Checksums that let anyone check a result against its input and against itself.

Definitions (all SHA-256, written as 64 lowercase hex digits):

``input_sha256`` (run metadata)
    The checksum of the input file's bytes as received: the GeoPackage, GeoJSON, zip or
    GeoTIFF itself. A folder (e.g. of Shapefile parts) gets the checksum of its listing: one
    line ``<sha256 of the file>  <path relative to the folder>\\n`` per file, sorted by path,
    as ``sha256sum`` prints it. Empty when the input is not a file on disk (a GDAL virtual
    path, an in-memory layer).
``layer_sha256`` (run metadata)
    A result cannot hold the checksum of its own bytes, so the metadata records the checksum
    of its *content*: a JSON object ``{layer name: sha256}`` with one checksum per feature
    layer (``passes``, ``ruts``), computed by :func:`layer_sha256` from the features in their
    stored order: the attribute values (numbers as floats, NaN as null) and the coordinates
    rounded to 8 decimals, in the file's own CRS. The same features give the same checksum
    in a GeoPackage and in GeoJSON (lon/lat), so each layer can be checked in either form,
    alone. The metadata table itself is not covered.
``result_sha256`` (the HTTP service's job document)
    The checksum of the exact bytes of each result file the service serves, by file name.

:func:`verify_result` checks a written result (and, when given, its input); run it as
``python -m geoops.integrity RESULT [--input FILE]``. This module only reads files and
computes digests; it writes nothing.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import shapely

#: decimals the coordinates are rounded to before hashing (GeoJSON output keeps 8)
COORD_DECIMALS = 8
_LAYER_TAG = b"rutwise-layer-sha256-v1\n"
_CHUNK = 1 << 20


def bytes_sha256(data: bytes) -> str:
    """SHA-256 of ``data`` as hex.

    Examples
    --------
    >>> bytes_sha256(b"")[:16]
    'e3b0c44298fc1c14'
    """
    return hashlib.sha256(data).hexdigest()


def _file_digest(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


@lru_cache(maxsize=64)
def _cached_digest(path: str, mtime_ns: int, size: int) -> str:
    del mtime_ns, size  # part of the cache key only: a changed file is hashed again
    return _file_digest(Path(path))


def file_sha256(path: str | os.PathLike[str], reuse: bool = True) -> str:
    """``input_sha256`` of a file or folder (module docstring); '' when ``path`` is not on
    disk. With ``reuse``, repeated calls on a file of unchanged size and modification time
    reuse the digest (the work units of one layer); without, the bytes are always read."""
    target = Path(os.fspath(path))
    if target.is_file() and not reuse:
        return _file_digest(target)
    if target.is_file():
        stat = target.stat()
        return _cached_digest(str(target.resolve()), stat.st_mtime_ns, stat.st_size)
    if target.is_dir():
        lines = [f"{_file_digest(p)}  {p.relative_to(target).as_posix()}\n"
                 for p in sorted(target.rglob("*"), key=lambda p: p.as_posix()) if p.is_file()]
        return bytes_sha256("".join(lines).encode("utf-8"))
    return ""


def _plain(value: Any) -> float | str | None:
    """One attribute value in canonical form: None for null and NaN, floats for numbers."""
    if value is None:
        return None
    if isinstance(value, int | float | np.integer | np.floating) and not isinstance(
            value, bool | np.bool_):
        number = float(value)
        return None if np.isnan(number) else number + 0.0  # -0.0 -> 0.0
    return str(value)


#: value types whose canonical form is a float (bool is an int but hashes as text)
_NUMBER_TYPES = (int, float, np.integer, np.floating)


def _plain_column(values: Sequence[Any]) -> list[float | str | None]:
    """:func:`_plain` of every value of a column; numbers, text and nulls without a call per
    value (a result's layers hold tens of thousands of values).

    >>> _plain_column([1, -0.0, None, float("nan"), np.float32(0.5)])
    [1.0, 0.0, None, None, 0.5]
    >>> _plain_column(["a", None]), _plain_column([True, 2])
    (['a', None], ['True', 2.0])
    """
    kinds = {type(v) for v in values}
    kinds.discard(type(None))
    if all(issubclass(k, _NUMBER_TYPES) and not issubclass(k, bool | np.bool_) for k in kinds):
        # None -> NaN -> None; ints and numpy numbers exactly as float() converts them
        numbers = (np.array(values, dtype=np.float64) + 0.0).tolist()  # + 0.0: -0.0 -> 0.0
        return [None if x != x else x for x in numbers]
    if kinds <= {str}:
        return list(values)
    return [_plain(v) for v in values]


def layer_sha256(names: Sequence[str], columns: Sequence[Sequence[Any]],
                 geometries: np.ndarray) -> str:
    """The content checksum of one feature layer.

    Hashes, in order: a version tag; the JSON text (UTF-8, keys sorted, no spaces) of the list
    of features' attributes, one object ``{name: value}`` per feature with the values in
    canonical form (numbers as floats, null and NaN as null, anything else as text); the
    vertex count of each line as little-endian int64; all coordinates (x, y) rounded to
    :data:`COORD_DECIMALS` decimals as little-endian float64.

    Examples
    --------
    >>> lines = shapely.linestrings([[[0, 0], [1, 1]]])
    >>> a = layer_sha256(["n"], [[1]], lines)
    >>> a == layer_sha256(["n"], [[1.0]], lines)
    True
    >>> a == layer_sha256(["n"], [[2]], lines)
    False
    """
    geoms = np.asarray(geometries, dtype=object)
    plain = [_plain_column(c) for c in columns]
    rows = ([dict(zip(names, row, strict=True)) for row in zip(*plain, strict=True)]
            if columns else [{} for _ in geoms])
    if len(rows) != len(geoms):
        raise ValueError(f"{len(rows)} attribute rows but {len(geoms)} geometries")
    counts = shapely.get_num_coordinates(geoms).astype("<i8")
    coords = np.round(shapely.get_coordinates(geoms), COORD_DECIMALS) + 0.0
    digest = hashlib.sha256(_LAYER_TAG)
    digest.update(json.dumps(rows, ensure_ascii=False, sort_keys=True,
                             separators=(",", ":")).encode("utf-8"))
    digest.update(counts.tobytes())
    digest.update(np.ascontiguousarray(coords, dtype="<f8").tobytes())
    return digest.hexdigest()


def with_layer_checksums(metadata: Mapping[str, str], layers: Sequence[Any]
                         ) -> dict[str, str]:
    """``metadata`` plus ``layer_sha256`` for ``layers`` (:class:`geoops.io.OutputLayer`)."""
    sums = {layer.name: layer_sha256(list(layer.fields), list(layer.fields.values()),
                                     layer.geometries) for layer in layers}
    return {**metadata, "layer_sha256": json.dumps(sums, separators=(",", ":"))}


# --- verification ---------------------------------------------------------------------------


@dataclass
class Verification:
    """What :func:`verify_result` found: ``ok`` only when every recorded checksum matched and
    at least one was there to check."""

    path: str
    checked: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return bool(self.checked) and not self.problems

    def report(self) -> str:
        lines = [f"{self.path}: {'verified' if self.ok else 'NOT verified'}"]
        lines += [f"  ok: {c}" for c in self.checked]
        lines += [f"  problem: {p}" for p in self.problems]
        return "\n".join(lines)


def _gpkg_layers(path: Path) -> tuple[dict[str, str], dict[str, tuple[list[str], list[Any],
                                                                       np.ndarray]]]:
    import pyogrio
    from pyogrio.raw import read as raw_read

    metadata: dict[str, str] = {}
    layers = {}
    for name, _kind in pyogrio.list_layers(path):
        meta, _fids, wkb, data = raw_read(path, layer=str(name))
        names = [str(n) for n in meta["fields"]]
        if name == "run_metadata":
            metadata = {str(k): str(v) for k, v in zip(data[0], data[1], strict=True)}
        elif wkb is not None:
            layers[str(name)] = (names, [list(c) for c in data], shapely.from_wkb(wkb))
    return metadata, layers


def _geojson_layers(path: Path) -> tuple[dict[str, str], dict[str, tuple[list[str], list[Any],
                                                                          np.ndarray]]]:
    doc = json.loads(path.read_text(encoding="utf-8"))
    features = doc.get("features") or []
    names = list((features[0].get("properties") or {}) if features else [])
    columns = [[(f.get("properties") or {}).get(n) for f in features] for n in names]
    geoms = np.array([shapely.geometry.shape(f["geometry"]) if f.get("geometry") else None
                      for f in features], dtype=object)
    return dict(doc.get("rutwise_metadata") or {}), {str(doc.get("name", "")): (names, columns,
                                                                                geoms)}


def verify_result(path: str | os.PathLike[str], input_path: str | os.PathLike[str] | None = None
                  ) -> Verification:
    """Check a result file (GeoPackage, or one GeoJSON layer) against the checksums in its
    run metadata: every feature layer it holds against ``layer_sha256`` and, when
    ``input_path`` is given, that file against ``input_sha256``.

    A GeoJSON file holds one layer; the metadata's other layers are then not checked. A file
    that cannot be read, a layer without a recorded checksum, and a recorded layer missing
    from a GeoPackage are problems.
    """
    target = Path(os.fspath(path))
    found = Verification(str(target))
    try:
        if target.suffix.lower() in (".geojson", ".json"):
            metadata, layers = _geojson_layers(target)
        else:
            metadata, layers = _gpkg_layers(target)
    except Exception as exc:  # any unreadable file is a failed verification, not a crash
        found.problems.append(f"cannot read the result ({type(exc).__name__}: {exc})")
        return found
    try:
        recorded: dict[str, str] = json.loads(metadata.get("layer_sha256", "{}"))
    except json.JSONDecodeError:
        recorded = {}
        found.problems.append("layer_sha256 in the run metadata is not JSON")
    if not recorded:
        found.problems.append("the run metadata records no layer_sha256")
    for name, (names, columns, geoms) in layers.items():
        if name not in recorded:
            found.problems.append(f"layer {name!r} has no recorded checksum")
        elif layer_sha256(names, columns, geoms) != recorded[name]:
            found.problems.append(f"layer {name!r} does not match its checksum: it was "
                                  "changed or damaged after it was written")
        else:
            found.checked.append(f"layer {name!r} matches layer_sha256")
    if target.suffix.lower() == ".gpkg":
        found.problems += [f"layer {n!r} is recorded but missing" for n in recorded
                           if n not in layers]
    if input_path is not None:
        expected = metadata.get("input_sha256", "")
        actual = file_sha256(input_path)
        if not expected:
            found.problems.append("the run metadata records no input_sha256")
        elif actual != expected:
            found.problems.append(f"{os.fspath(input_path)!r} is not the input of this result "
                                  "(input_sha256 differs)")
        else:
            found.checked.append("input matches input_sha256")
    return found


def main(argv: list[str] | None = None) -> int:
    """``python -m geoops.integrity RESULT [--input FILE]``: exit 0 when verified, else 1."""
    parser = argparse.ArgumentParser(prog="python -m geoops.integrity",
                                     description="Check a rutwise result against the "
                                                 "checksums in its run metadata.")
    parser.add_argument("result", help="a result GeoPackage or GeoJSON file")
    parser.add_argument("--input", help="the input file, to check input_sha256 as well")
    args = parser.parse_args(argv)
    found = verify_result(args.result, args.input)
    print(found.report())
    return 0 if found.ok else 1


if __name__ == "__main__":
    sys.exit(main())
