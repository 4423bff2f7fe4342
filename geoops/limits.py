"""Limits that keep reading and analysing an input bounded in time and memory.

Each limit has a default in :data:`DEFAULTS` and can be changed with an environment variable
``RUTWISE_<NAME>`` (e.g. ``RUTWISE_MAX_LAYER_KM=5000``), read when the check runs. The service
has its own upload, feature and vertex limits (:mod:`service.settings`); these apply to every
caller, the command line included. The checks here look at sizes only (zip directories, line
lengths); they never read layers or compute anything heavy.
"""

from __future__ import annotations

import json
import os
import zipfile
from pathlib import Path, PurePosixPath, PureWindowsPath

import numpy as np

from .errors import BadInput, LimitExceeded, RutwiseError

ENV_PREFIX = "RUTWISE_"

#: default limits; the environment variable ``RUTWISE_<NAME upper case>`` overrides each
DEFAULTS: dict[str, float] = {
    # total uncompressed size of a zip archive's members, MB (a zipped Shapefile of a few
    # million vertices is tens of MB; larger archives are zip bombs or not rut layers)
    "zip_max_mb": 512.0,
    # members of a zip archive (a Shapefile has 3 to 8 files)
    "zip_max_members": 1000.0,
    # nesting of JSON documents the service parses (GeoJSON needs under 10 levels; deeper
    # documents make Python's json, pickle and copy recurse past their limits)
    "json_max_depth": 64.0,
    # total length of a layer's lines in the local metric frame, km (the throughput bench's
    # largest layer holds 147 km; a line thousands of km long is a wrong CRS or a wrong file)
    "max_layer_km": 1000.0,
}

#: what every limit message advises besides splitting the input
_RAISE = "or raise the limit with the environment variable {var}."


def limit(name: str) -> float:
    """The limit ``name`` (a key of :data:`DEFAULTS`), from the environment when set there.

    Examples
    --------
    >>> limit("zip_max_members")
    1000.0
    """
    var = ENV_PREFIX + name.upper()
    text = os.environ.get(var, "").strip()
    if not text:
        return DEFAULTS[name]
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not value > 0:
        raise RutwiseError(f"The environment variable {var} is {text!r}, not a positive number.",
                           f"Set {var} to a positive number or unset it.")
    return value


def _escapes(name: str) -> bool:
    """Whether a zip member name is absolute or climbs out of the archive's folder.

    Examples
    --------
    >>> [_escapes(n) for n in ("ruts.shp", "a/ruts.shp", "../ruts.shp", "/etc/x", "C:\\\\x")]
    [False, False, True, True, True]
    """
    for path in (PurePosixPath(name), PureWindowsPath(name)):
        if path.is_absolute() or path.drive or path.root or ".." in path.parts:
            return True
    return False


def is_zip(path: str | os.PathLike[str]) -> bool:
    """Whether ``path`` is a local file that GDAL will read as a zip archive (by its name)."""
    p = Path(path)
    return p.suffix.lower() in (".zip", ".shz") and p.is_file()


def check_zip(path: str | os.PathLike[str]) -> None:
    """Refuse a zip archive before GDAL reads it: not a zip, member names that point outside
    the archive, too many members, or members that expand beyond ``zip_max_mb`` (a zip bomb).

    Only the archive's directory is read; nothing is extracted.

    Raises
    ------
    BadInput
        Not a readable zip archive, or a member name that is absolute or contains ``..``.
    LimitExceeded
        More members or more uncompressed bytes than the limits allow.
    """
    name = os.fspath(path)
    try:
        with zipfile.ZipFile(name) as archive:
            members = archive.infolist()
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, ValueError, EOFError,
            NotImplementedError) as exc:  # e.g. 'zip file version 10.6' (found by fuzzing)
        raise BadInput(f"{name!r} is not a readable zip archive ({exc}).",
                       "Zip the Shapefile's files (.shp, .shx, .dbf, .prj) again.") from None
    if not members:
        raise BadInput(f"{name!r} is an empty zip archive.",
                       "Zip the Shapefile's files (.shp, .shx, .dbf, .prj) into it.")
    most = limit("zip_max_members")
    if len(members) > most:
        raise LimitExceeded(
            f"{name!r} holds {len(members)} files; the limit is {most:g}.",
            "Zip only the layer's own files, " + _RAISE.format(var="RUTWISE_ZIP_MAX_MEMBERS"))
    bad = [m.filename for m in members if _escapes(m.filename)]
    if bad:
        raise BadInput(
            f"{name!r} holds {len(bad)} file name(s) pointing outside the archive's folder "
            f"(absolute or with '..'), e.g. {bad[0]!r}.",
            "Zip the layer's files again with plain relative names.")
    expanded = sum(m.file_size for m in members)
    cap = limit("zip_max_mb") * 2**20
    if expanded > cap:
        packed = sum(m.compress_size for m in members)
        raise LimitExceeded(
            f"{name!r} would expand from {packed / 2**20:.3g} MB to {expanded / 2**20:.6g} MB; "
            f"the limit is {cap / 2**20:g} MB.",
            "Give the layer unzipped or split it, " + _RAISE.format(var="RUTWISE_ZIP_MAX_MB"))


def add_length(total_m: float, parts: list[np.ndarray]) -> float:
    """``total_m`` plus the length of ``parts`` (``(n, 2)`` arrays in metres), refusing a layer
    whose lines together are longer than ``max_layer_km``: the analysis resamples every line
    at a fixed spacing, so its time and memory grow with length, not with vertices.

    Examples
    --------
    >>> add_length(10.0, [np.array([[0.0, 0.0], [3.0, 4.0]])])
    15.0
    >>> add_length(0.0, [np.array([[0.0, 0.0], [3.0, 4.0]]), np.array([[900.0, 0.0]]),
    ...                  np.array([[0.0, 0.0], [0.0, 2.0]])])  # gaps between parts not counted
    7.0
    >>> add_length(0.0, [np.array([[0.0, 0.0], [3.0e6, 4.0e6]])])
    Traceback (most recent call last):
    ...
    geoops.errors.LimitExceeded: The lines of the layer are at least 5000 km long...
    """
    total = total_m
    if parts:
        # one pass over all parts: the segments that would join two parts count nothing
        seg = np.hypot(*np.diff(np.concatenate(parts), axis=0).T)
        joins = np.cumsum([len(p) for p in parts])[:-1] - 1
        seg[joins[(joins >= 0) & (joins < len(seg))]] = 0.0
        total += float(seg.sum())
    cap_km = limit("max_layer_km")
    if not total <= cap_km * 1000.0:  # NaN counts as over
        raise LimitExceeded(
            f"The lines of the layer are at least {total / 1000:.6g} km long together; the "
            f"limit is {cap_km:g} km. Lines that long suggest a wrong CRS or unit.",
            "Check the layer's CRS; split a large survey into parts, "
            + _RAISE.format(var="RUTWISE_MAX_LAYER_KM"))
    return total


def json_depth(data: bytes) -> int:
    r"""How deeply the arrays and objects of a JSON text nest, without parsing it.

    Vectorised over the positions of brackets, quotes and backslashes only (brackets inside
    strings do not count), so a 50 MB document takes a fraction of a second.

    Examples
    --------
    >>> json_depth(b'{"a": [[1, 2], {"b": "[[[["}]}'), json_depth(b"[" * 5000), json_depth(b"7")
    (3, 5000, 0)
    >>> json_depth(b'["\\\\", ["x\\"]"]]')  # an escaped backslash, then an escaped quote
    2
    """
    raw = np.frombuffer(data, dtype=np.uint8)
    quotes = np.flatnonzero(raw == ord('"'))
    slashes = np.flatnonzero(raw == ord("\\"))
    if len(quotes) and len(slashes):
        # a quote is escaped when an odd run of backslashes ends right before it
        starts = slashes[np.concatenate([[True], np.diff(slashes) != 1])]
        ends = slashes[np.concatenate([np.diff(slashes) != 1, [True]])]
        run = np.searchsorted(ends, quotes - 1)
        hit = run < len(ends)
        hit[hit] = ends[run[hit]] == quotes[hit] - 1
        escaped = np.zeros(len(quotes), dtype=bool)
        escaped[hit] = (ends[run[hit]] - starts[run[hit]] + 1) % 2 == 1
        quotes = quotes[~escaped]
    # '[' and '{' are 0x5B and 0x7B, ']' and '}' 0x5D and 0x7D: one mask picks all four
    folded = raw & 0xDF
    brackets = np.flatnonzero((folded == 0x5B) | (folded == 0x5D))
    brackets = brackets[np.searchsorted(quotes, brackets) % 2 == 0]  # outside strings
    step = np.where((raw[brackets] & 0xDF) == 0x5B, 1, -1).astype(np.int32)
    return int(np.cumsum(step).max()) if len(step) else 0


def parse_json(data: bytes | str) -> object:
    """``json.loads`` after refusing documents nested deeper than ``json_max_depth``.

    Raises
    ------
    ValueError
        Not JSON (``json.JSONDecodeError``, a ValueError), or nested too deeply.
    """
    raw = data.encode("utf-8", "surrogatepass") if isinstance(data, str) else data
    depth, most = json_depth(raw), limit("json_max_depth")
    if depth > most:
        raise ValueError(f"arrays and objects nested {depth} levels deep; the limit is "
                         f"{most:g} (RUTWISE_JSON_MAX_DEPTH)")
    return json.loads(data)
