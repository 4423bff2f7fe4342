"""Reading rut layers and writing results, through pyogrio (GDAL).

Reads GeoJSON (RFC 7946, and a legacy ``crs`` member), GeoPackage (any layer, any CRS), GPX
tracks, FlatGeobuf, zipped Shapefiles and whatever else GDAL's vector drivers read. Keeps each
input feature's id. Writes GeoPackage (layers plus a metadata table) or GeoJSON, atomically
(temporary file, then rename). Coordinates stay in the file's CRS here; :mod:`geoops.frame`
handles projections. No inference happens in this module.
"""

from __future__ import annotations

import json
import os
import tempfile
import warnings as _warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pyogrio
import pyogrio.errors
import shapely
from pyogrio.raw import read as raw_read
from pyogrio.raw import write as raw_write

from .curves import Array
from .errors import BadInput
from .limits import check_zip, is_zip

LINE_TYPES = {
    "LineString",
    "MultiLineString",
    "LineString Z",
    "MultiLineString Z",
    "LineString M",
    "MultiLineString M",
    "LineString ZM",
    "MultiLineString ZM",
}


@dataclass
class InputLayer:
    """One vector layer as read from a file, in the file's own CRS.

    Attributes
    ----------
    ids
        Source feature id per feature, as text: the ``--id-field`` value when given, else the
        GeoPackage fid, the GeoJSON ``id``, or the 0-based index.
    parts
        Per feature, its line parts as ``(n, 2)`` arrays of x, y.
    z
        Per feature, its parts' z values (None when the layer has none): kept, not used.
    skipped
        ``(id, reason)`` of features that hold no line (point, polygon, empty geometry).
    """

    path: str
    layer: str
    driver: str
    crs: str | None
    ids: list[str]
    parts: list[list[Array]]
    z: list[list[Array] | None]
    fields: dict[str, np.ndarray] = field(default_factory=dict)
    skipped: list[tuple[str, str]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.ids)

    def all_xy(self) -> Array:
        arrays = [p for f in self.parts for p in f]
        return np.concatenate(arrays) if arrays else np.empty((0, 2))


#: shapely geometry type ids, for messages
_TYPE_NAMES = {
    0: "Point",
    1: "LineString",
    2: "LinearRing",
    3: "Polygon",
    4: "MultiPoint",
    5: "MultiLineString",
    6: "MultiPolygon",
    7: "GeometryCollection",
}


def _is_line_type(geometry_type: str | None) -> bool:
    # None: a table without geometry (e.g. run_metadata of our own output)
    return geometry_type is not None and (geometry_type in LINE_TYPES or geometry_type == "Unknown")


def choose_layer(path: str, layer: str | None) -> str:
    """The layer to read: the named one, else the only line layer with features.

    Raises
    ------
    BadInput
        Unreadable file, unknown layer, no line layer, or several line layers and none named.
    """
    try:
        layers = pyogrio.list_layers(path)
    except (pyogrio.errors.DataSourceError, OSError, UnicodeDecodeError) as exc:
        raise BadInput(
            f"Cannot read {path!r} as a vector layer ({_short(exc)}).",
            "Give a GeoJSON, GeoPackage, GPX, FlatGeobuf or zipped Shapefile.",
        ) from None
    names = [str(n) for n, _ in layers]
    if layer is not None:
        if layer not in names:
            raise BadInput(
                f"No layer named {layer!r} in {path!r}; it has: {_names(names)}.",
                "Pick one of those with --layer.",
            )
        return layer
    candidates = []
    for name, gtype in layers:
        if not _is_line_type(gtype):
            continue
        try:
            # GPX and other drivers without a fast count report -1 unless forced
            info = pyogrio.read_info(path, layer=str(name), force_feature_count=True)
            count = info.get("features", 0)
        except pyogrio.errors.DataSourceError:
            continue
        # found by fuzzing: field names that are not UTF-8, a layer missing from gpkg_contents
        except (UnicodeDecodeError, pyogrio.errors.CRSError) as exc:
            raise BadInput(
                f"Cannot read layer {str(name)!r} of {path!r} ({_short(exc)}).",
                "Check that the file is complete and valid, with UTF-8 text.",
            ) from None
        if count != 0:
            candidates.append(str(name))
    if len(candidates) == 1:
        return candidates[0]
    if not candidates:
        if len(names) == 1:
            return names[0]  # let the reader say what is wrong with its geometries
        raise BadInput(
            f"{path!r} has no layer of lines; its layers are: {_names(names)}.",
            "Give a layer of LineString or MultiLineString features.",
        )
    raise BadInput(
        f"{path!r} has several line layers: {_names(candidates)}.",
        "Name the one to analyse with --layer.",
    )


def _names(names: list[str]) -> str:
    """Layer names for a message; names with line breaks, terminal escapes or commas quoted,
    so that they cannot forge output or hide among the others.

    >>> print(_names(["ruts", "two\\nlines", "a, b"]))
    ruts, 'two\\nlines', 'a, b'
    """
    plain = [n if n.isprintable() and not set(n) & set(",'\"") else repr(n) for n in names]
    return ", ".join(plain) or "none"


def _short(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    # GDAL's advice to prefix a driver name ('CSV:path') does not apply to rutwise users
    text = text.split("; It might help to specify the correct driver")[0]
    return text[:200]


def read_layer(
    path: str | os.PathLike[str],
    layer: str | None = None,
    id_field: str | None = None,
    max_features: int | None = None,
) -> InputLayer:
    """Read a layer of lines from a file.

    Parameters
    ----------
    path
        Any file GDAL reads as vectors.
    layer
        Layer name; needed when the file holds several line layers.
    id_field
        Attribute whose values identify features in the output's ``source_fids``.
    max_features
        Refuse layers with more features (a limit, not a sample).

    Raises
    ------
    BadInput
        When the file cannot be read, the layer is missing or empty, or holds no lines.
    """
    path = os.fspath(path)
    if not Path(path).exists() and not path.startswith("/vsi"):
        raise BadInput(f"No file at {path!r}.", "Check the path and try again.")
    if Path(path).is_dir():
        raise BadInput(
            f"{path!r} is a folder, not a layer file.",
            "Give one layer file inside it.",
        )
    if is_zip(path):
        check_zip(path)  # before GDAL's /vsizip/ reads it: names, member count, expansion
    name = choose_layer(path, layer)
    try:
        # GPX and other drivers without a fast count report -1 unless forced
        info = pyogrio.read_info(path, layer=name, force_feature_count=max_features is not None)
        if max_features is not None and info.get("features", 0) > max_features:
            from .errors import LimitExceeded

            raise LimitExceeded(
                f"The layer has {info['features']} features; the limit is {max_features}.",
                "Split the layer or raise the limit.",
            )
        with _warnings.catch_warnings(record=True) as gdal_notes:
            # GDAL reports what it changed (e.g. duplicate GeoJSON ids renumbered) as warnings
            _warnings.simplefilter("always", RuntimeWarning)
            meta, fids, wkb, field_data = raw_read(path, layer=name, return_fids=True)
    except (
        pyogrio.errors.DataSourceError,
        pyogrio.errors.DataLayerError,
        pyogrio.errors.FieldError,
        pyogrio.errors.GeometryError,
        pyogrio.errors.CRSError,
        OSError,
        UnicodeDecodeError,  # names or text values that are not UTF-8 (found by fuzzing)
    ) as exc:
        raise BadInput(
            f"Cannot read layer {name!r} of {path!r} ({_short(exc)}).",
            "Check that the file is complete and valid.",
        ) from None
    driver = str(meta.get("driver") or info.get("driver") or "")
    fields = {str(k): v for k, v in zip(meta["fields"], field_data, strict=True)}
    n = len(wkb) if wkb is not None else 0
    if n == 0:
        raise BadInput(f"Layer {name!r} of {path!r} is empty.", "Give a layer with rut lines.")
    ids = _feature_ids(driver, fids, fields, id_field, n)
    geoms = shapely.from_wkb(wkb, on_invalid="ignore")
    parts, zs, skipped = _line_parts(geoms, ids)
    if not any(len(p) >= 2 and (p != p[0]).any() for f in parts for p in f):
        raise BadInput(
            f"Layer {name!r} of {path!r} {_why_unusable(geoms, parts, wkb)}.",
            "Give LineString or MultiLineString features of at least two distinct vertices "
            "(GPX: tracks or routes).",
        )
    warnings = [
        "While reading: " + str(n.message).split(" This warning will not")[0][:200]
        for n in gdal_notes
        if issubclass(n.category, RuntimeWarning)
    ]
    if len(set(ids)) != len(ids):
        warnings.append("Feature ids are not unique; source_fids may name several features.")
    keep = [i for i, p in enumerate(parts) if p]
    warnings.extend(_repeated_geometries(wkb, ids, keep))
    return InputLayer(
        path=path,
        layer=name,
        driver=driver,
        crs=meta.get("crs"),
        ids=[ids[i] for i in keep],
        parts=[parts[i] for i in keep],
        z=[zs[i] for i in keep],
        fields={k: v[keep] for k, v in fields.items()},
        skipped=skipped,
        warnings=warnings,
    )


def _repeated_geometries(wkb: np.ndarray, ids: list[str], keep: list[int]) -> list[str]:
    """A warning when features repeat an earlier feature's geometry byte for byte."""
    first: dict[bytes, int] = {}
    twins = []
    for i in keep:
        twin = first.setdefault(bytes(wkb[i]), i)
        if twin != i:
            twins.append((ids[i], ids[twin]))
    if not twins:
        return []
    return [f"{len(twins)} feature(s) repeat the geometry of an earlier one (feature "
            f"{twins[0][0]} repeats {twins[0][1]}); check for lines digitised twice."]


def _why_unusable(geoms: np.ndarray, parts: list[list[Array]], wkb: np.ndarray) -> str:
    """What the features of a layer without a usable line hold instead, counted by kind."""
    missing = shapely.is_missing(geoms)
    invalid = missing & np.array([w is not None for w in wkb], dtype=bool)
    empty = ~missing & shapely.is_empty(geoms)
    kinds = shapely.get_type_id(geoms)
    lines = np.isin(kinds, (1, 2, 5))  # LineString, LinearRing, MultiLineString
    if not (lines & ~empty).any() and not (missing | empty).any():
        present = sorted({_TYPE_NAMES.get(int(t), "other") for t in kinds[~missing]})
        return "holds no line geometries" + (f" (it holds: {', '.join(present)})"
                                             if present else "")
    finite = np.array([bool(f) for f in parts])
    reasons = {
        "without geometry": int((missing & ~invalid).sum()),
        "with a geometry that cannot be built, such as a line of one vertex": int(invalid.sum()),
        "with an empty geometry": int(empty.sum()),
        "with a coordinate that is not a finite number (NaN or infinity)": int(
            (~missing & ~empty & lines & ~finite).sum()
        ),
        "with a line of fewer than two distinct vertices": int((finite & lines).sum()),
    }
    other = ~missing & ~empty & ~lines
    for t in sorted(set(kinds[other].tolist())):
        reasons[_TYPE_NAMES.get(int(t), "other") + " (not a line)"] = int((kinds == t).sum())
    text = ", ".join(f"{n} {what}" for what, n in reasons.items() if n)
    return f"holds no usable line among its {len(geoms)} features ({text})"


def _feature_ids(
    driver: str, fids: Any, fields: dict[str, np.ndarray], id_field: str | None, n: int
) -> list[str]:
    if id_field is not None:
        if id_field not in fields:
            raise BadInput(
                f"No attribute {id_field!r}; the layer has: {', '.join(fields) or 'none'}.",
                "Name one of those with --id-field.",
            )
        return [_id_text(v) for v in fields[id_field]]
    if driver == "GeoJSON" and "id" in fields and fields["id"].dtype == object:
        # string ids of GeoJSON features surface as an `id` field; fill gaps with the index
        return [str(v) if v is not None else str(i) for i, v in enumerate(fields["id"])]
    if driver in ("GPKG", "GeoJSON", "GeoJSONSeq") and fids is not None:
        return [str(int(f)) for f in fids]
    return [str(i) for i in range(n)]


def _id_text(value: Any) -> str:
    """An attribute value as an id: integers read back as floats (a column with nulls) lose
    their ``.0``; null and NaN give an empty string."""
    if value is None:
        return ""
    if isinstance(value, float | np.floating):
        if not np.isfinite(value):
            return ""
        if float(value).is_integer():
            return str(int(value))
    return str(value)


def _line_parts(
    geoms: np.ndarray, ids: list[str]
) -> tuple[list[list[Array]], list[list[Array] | None], list[tuple[str, str]]]:
    """Split geometries into line parts (vectorised), noting features that hold no line."""
    n = len(geoms)
    parts: list[list[Array]] = [[] for _ in range(n)]
    zs: list[list[Array] | None] = [None] * n
    skipped: list[tuple[str, str]] = []
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    present = geoms.copy()
    present[missing] = None
    flat, owner = shapely.get_parts(present, return_index=True)
    # GeometryCollections may nest one level more
    nested = shapely.get_type_id(flat) == 7
    if nested.any():
        sub, sub_owner = shapely.get_parts(flat[nested], return_index=True)
        flat = np.concatenate([flat[~nested], sub])
        owner = np.concatenate([owner[~nested], owner[nested][sub_owner]])
    is_line = np.isin(shapely.get_type_id(flat), (1, 2))  # LineString, LinearRing
    lines, line_owner = flat[is_line], owner[is_line]
    has_line = np.zeros(n, dtype=bool)
    has_line[line_owner] = True
    if len(lines):
        has_z = bool(shapely.has_z(lines).any())
        coords, which = shapely.get_coordinates(lines, include_z=has_z, return_index=True)
        finite = np.isfinite(coords[:, :2]).all(axis=1)
        bad_owner = set(line_owner[np.unique(which[~finite])].tolist())
        cuts = np.flatnonzero(np.diff(which)) + 1
        starts = np.concatenate([[0], cuts]).astype(np.int64)
        chunk_owner = line_owner[which[starts]] if len(coords) else np.empty(0, dtype=np.int64)
        for chunk, i in zip(np.split(coords, cuts), chunk_owner.tolist(), strict=True):
            if i in bad_owner:
                continue
            parts[i].append(np.ascontiguousarray(chunk[:, :2]))
            if has_z:
                zs[i] = (zs[i] or []) + [chunk[:, 2].copy()]
        for i in sorted(bad_owner):
            parts[i] = []
            zs[i] = None
            skipped.append((ids[i], "non_finite_coordinates"))
    for i in np.flatnonzero(~has_line):
        skipped.append((ids[i], "empty_geometry" if missing[i] else "not_a_line"))
    return parts, zs, skipped


# ---------------------------------------------------------------------------------------------
# writing


@dataclass
class OutputLayer:
    """A layer to write: geometries (shapely, in the target CRS), fields in order, and types."""

    name: str
    geometries: np.ndarray
    fields: Mapping[str, Sequence[Any]]
    types: dict[str, str]  # field -> "int", "real", "text"
    description: str = ""


def _field_arrays(layer: OutputLayer) -> tuple[list[np.ndarray], list[np.ndarray]]:
    data, masks = [], []
    for name, values in layer.fields.items():
        kind = layer.types[name]
        # v != v: NaN (np.isnan costs a microsecond a value)
        mask = np.array(
            [v is None or (isinstance(v, float) and v != v) for v in values], dtype=bool
        )
        if kind == "int":
            arr: np.ndarray = np.array(
                [0 if m else int(v) for v, m in zip(values, mask, strict=True)], dtype=np.int64
            )
        elif kind == "real":
            arr = np.array(
                [np.nan if m else float(v) for v, m in zip(values, mask, strict=True)],
                dtype=np.float64,
            )
        else:
            arr = np.array(
                [None if m else str(v) for v, m in zip(values, mask, strict=True)], dtype=object
            )
        data.append(arr)
        masks.append(mask)
    return data, masks


def _atomic_target(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    os.unlink(tmp)
    return Path(tmp)


def write_geopackage(
    path: str | os.PathLike[str], layers: list[OutputLayer], crs: str, metadata: dict[str, str]
) -> Path:
    """Write line layers and a ``run_metadata`` table to a GeoPackage, atomically."""
    target = Path(path)
    tmp = _atomic_target(target)
    try:
        for layer in layers:
            data, masks = _field_arrays(layer)
            raw_write(
                str(tmp),
                shapely.to_wkb(layer.geometries),
                data,
                list(layer.fields),
                field_mask=masks,
                layer=layer.name,
                driver="GPKG",
                crs=crs,
                geometry_type="LineString",
                layer_options={"DESCRIPTION": layer.description},
                nan_as_null=True,
            )
        keys = np.array(list(metadata), dtype=object)
        vals = np.array([metadata[k] for k in metadata], dtype=object)
        raw_write(
            str(tmp),
            None,
            [keys, vals],
            ["key", "value"],
            layer="run_metadata",
            driver="GPKG",
            layer_options={"DESCRIPTION": "rutwise run metadata"},
        )
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()
    return target


def geojson_document(
    layer: OutputLayer, metadata: dict[str, str], decimals: int = 8
) -> dict[str, Any]:
    """An RFC 7946 FeatureCollection (geometries must already be lon/lat WGS84), with the run
    metadata as a foreign member ``rutwise_metadata``."""
    data, masks = _field_arrays(layer)
    names = list(layer.fields)
    coords_all = shapely.get_coordinates(layer.geometries)
    counts = shapely.get_num_coordinates(layer.geometries)
    rounded = np.round(coords_all, decimals).tolist()
    features = []
    start = 0
    for i, cnt in enumerate(counts):
        props = {}
        for name, arr, m in zip(names, data, masks, strict=True):
            v = arr[i]
            props[name] = None if m[i] else (v.item() if hasattr(v, "item") else v)
        features.append(
            {
                "type": "Feature",
                "id": i + 1,
                "properties": props,
                "geometry": {
                    "type": "LineString",
                    "coordinates": rounded[start : start + int(cnt)],
                },
            }
        )
        start += int(cnt)
    return {
        "type": "FeatureCollection",
        "name": layer.name,
        "features": features,
        "rutwise_metadata": metadata,
    }


def write_geojson(
    path: str | os.PathLike[str], layer: OutputLayer, metadata: dict[str, str]
) -> Path:
    """Write one layer as RFC 7946 GeoJSON (lon/lat WGS84 expected), atomically."""
    target = Path(path)
    tmp = _atomic_target(target)
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(
                geojson_document(layer, metadata), fh, ensure_ascii=False, separators=(",", ":")
            )
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()
    return target
