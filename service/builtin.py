"""The processes rutwise ships: ``analyze`` (the main job), ``extract-ruts`` (rut lines from a
drone elevation model or rut mask), ``simulate`` (planning: wheel tracks a vehicle would leave)
and ``echo`` (the standard's test process).

Their ``run`` functions execute in worker processes and write result files atomically into
the job folder; their ``check`` functions run in the service before a job is made.
"""

from __future__ import annotations

import base64
import binascii
import json
import math
import time
from collections.abc import Callable
from functools import partial
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import numpy as np
import pyproj
import shapely

from geoops.errors import LimitExceeded, RutwiseError
from geoops.integrity import bytes_sha256, file_sha256, with_layer_checksums
from geoops.io import InputLayer, OutputLayer, geojson_document, read_layer, write_geopackage
from geoops.kinematics import Vehicle, simulate_steering
from geoops.pipeline import CAUTION, AnalyzeOptions, analyze_layer, result_layers, write_result
from geoops.raster_defaults import DEPTH_LIMITS_M, MIN_LENGTH_M
from geoops.scenarios import PRESETS, circle, mapped_lines, s_curve, slalom, straight

from .jobs import is_id, json_bytes, write_atomic, write_json
from .processes import (
    FEATURE_COLLECTION_SCHEMA,
    GEOJSON,
    GEOPACKAGE,
    GEOTIFF,
    JSON,
    RASTER_SUFFIXES,
    TEXT,
    CheckContext,
    InputProblem,
    InputSpec,
    Manifest,
    OutputSpec,
    Process,
    RunContext,
    version,
)

WGS84 = pyproj.CRS.from_epsg(4326)

# --- analyze ---------------------------------------------------------------------------------


def count_vertices(coords: Any, limit: int) -> int:
    """Number of positions in nested GeoJSON coordinates (stops counting past ``limit``).

    Examples
    --------
    >>> count_vertices([[0, 0], [1, 1], [2, 2]], 100)
    3
    >>> count_vertices([[[0, 0], [1, 1]], [[5, 5], [6, 6]]], 100)
    4
    """
    total = 0
    stack = [coords]
    while stack and total <= limit:
        item = stack.pop()
        if not isinstance(item, list) or not item:
            continue
        if all(isinstance(v, int | float) and not isinstance(v, bool) for v in item):
            total += 1
        else:
            stack.extend(item)
    return total


def _geometry_vertices(geometry: Any, limit: int) -> int:
    if not isinstance(geometry, dict):
        return 0
    if geometry.get("type") == "GeometryCollection":
        return sum(_geometry_vertices(g, limit) for g in geometry.get("geometries") or [])
    return count_vertices(geometry.get("coordinates"), limit)


def upload_id_of(href: str) -> str | None:
    """The upload id an ``href`` names, when it points at this service's ``/uploads/{id}``.

    Only the path is looked at; the host is ignored and nothing is fetched.

    Examples
    --------
    >>> upload_id_of("http://127.0.0.1:8000/uploads/" + "a" * 32)
    'aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa'
    >>> upload_id_of("/uploads/../../etc/passwd") is None
    True
    """
    parts = urlsplit(href).path.rstrip("/").split("/")
    if len(parts) >= 2 and parts[-2] == "uploads" and is_id(parts[-1]):
        return parts[-1]
    return None


#: suffix of an inline (base64) layer or raster file by media type (without parameters)
INLINE_FILE_TYPES = {GEOPACKAGE: ".gpkg", "application/flatgeobuf": ".fgb",
                     "application/gpx+xml": ".gpx", GEOJSON: ".geojson", "image/tiff": ".tif"}


def _bare_media(media: Any) -> Any:
    """A media type without its parameters ('image/tiff; application=geotiff' -> 'image/tiff').

    >>> _bare_media("image/tiff; application=geotiff")
    'image/tiff'
    """
    return media.split(";")[0].strip().lower() if isinstance(media, str) else media


def _check_inline_file(value: dict[str, Any], input_id: str = "ruts",
                       types: dict[str, str] = INLINE_FILE_TYPES) -> dict[str, Any]:
    """A file sent inline as base64 (the standard's qualified binary value)."""
    media = _bare_media(value.get("mediaType"))
    if media not in types:
        raise InputProblem(input_id, f"a base64 {input_id!r} value needs a mediaType, one of "
                                     f"{', '.join(types)}; got {value.get('mediaType')!r}.")
    try:
        data = base64.b64decode(value["value"], validate=True)
    except (binascii.Error, ValueError):
        raise InputProblem(input_id, f"the base64 {input_id!r} value is not valid base64; "
                                     "encode the file with standard base64 (RFC 4648).") from None
    if not data:
        raise InputProblem(input_id, f"the base64 {input_id!r} value is empty.")
    return {"base64": value["value"], "suffix": types[media]}


def _check_upload_ref(input_id: str, href: Any, ctx: CheckContext) -> dict[str, Any]:
    """``{"upload": id, "file": name}`` for an href naming one of the caller's uploads."""
    upload_id = upload_id_of(href) if isinstance(href, str) else None
    if upload_id is None:
        raise InputProblem(input_id, f"{input_id!r} by reference must name a file uploaded to "
                                     "this service ({'href': '/uploads/<id>'}); other URLs are "
                                     "not fetched. POST the file to /uploads first.")
    path = ctx.find_upload(upload_id)
    if path is None:
        raise InputProblem(input_id, f"there is no upload {upload_id!r} for this caller. "
                                     "POST the file to /uploads and use the href it returns.")
    return {"upload": upload_id, "file": path.name}


def _input_file(ref: dict[str, Any], ctx: RunContext, name: str = "input") -> Path:
    """The file a checked file input names: an upload, or an inline value written to the job
    folder."""
    if "upload" in ref:
        return ctx.data_dir / "uploads" / ref["upload"] / Path(ref["file"]).name
    path = ctx.work_dir / (name + ref["suffix"])
    write_atomic(path, base64.b64decode(ref["base64"]))
    return path


def input_checksums(inputs: dict[str, Any], data_dir: Path) -> dict[str, str]:
    """SHA-256 of each checked input, by input id: of the file's bytes for a file input (an
    upload, or a base64 value as decoded), else of the input's JSON text as the job folder
    stores it (:func:`service.jobs.json_bytes`; for an inline GeoJSON layer that is the
    ``input.geojson`` the analysis reads)."""
    sums = {}
    for key, ref in inputs.items():
        if isinstance(ref, dict) and "upload" in ref:
            sums[key] = file_sha256(data_dir / "uploads" / ref["upload"] / Path(ref["file"]).name)
        elif isinstance(ref, dict) and "base64" in ref:
            sums[key] = bytes_sha256(base64.b64decode(ref["base64"]))
        else:
            value = ref["value"] if isinstance(ref, dict) and set(ref) == {"value"} else ref
            sums[key] = bytes_sha256(json_bytes(value))
    return sums


def check_raster(path: Path) -> str:
    """The CRS of an uploaded raster that rut extraction can read (geoops.raster's checks)."""
    from geoops.raster import check_raster as engine_check

    return engine_check(path)


def _check_analyze(values: dict[str, Any], ctx: CheckContext) -> dict[str, Any]:
    ruts = values["ruts"]
    if isinstance(ruts, list) and len(ruts) == 1:
        ruts = ruts[0]
    if isinstance(ruts, dict) and "href" in ruts:
        values["ruts"] = _check_upload_ref("ruts", ruts["href"], ctx)
    elif (isinstance(ruts, dict) and isinstance(ruts.get("value"), str)
          and ruts.get("encoding") == "base64"):
        values["ruts"] = _check_inline_file(ruts)
    else:
        doc = ruts.get("value") if isinstance(ruts, dict) and "value" in ruts else ruts
        if not (isinstance(doc, dict) and doc.get("type") == "FeatureCollection"
                and isinstance(doc.get("features"), list)):
            raise InputProblem("ruts", "'ruts' must be a GeoJSON FeatureCollection (bare or as "
                                       "{'value': {...}}) or {'href': '/uploads/<id>'}.")
        n = len(doc["features"])
        if n > ctx.max_features:
            raise LimitExceeded(f"'ruts' has {n} features; the limit is {ctx.max_features}.",
                                "Split the layer, or ask the operator to raise max_features.")
        vertices = 0
        for feature in doc["features"]:
            if isinstance(feature, dict):
                vertices += _geometry_vertices(feature.get("geometry"), ctx.max_vertices)
            if vertices > ctx.max_vertices:
                raise LimitExceeded(
                    f"'ruts' has more than {ctx.max_vertices} vertices (the limit).",
                    "Simplify or split the layer, or ask the operator to raise max_vertices.")
        values["ruts"] = {"value": doc}
    # fail early on options the engine would reject later
    AnalyzeOptions(accuracy=values.get("accuracy"))
    for key in ("crs", "out_crs"):
        if values.get(key):
            try:
                pyproj.CRS.from_user_input(values[key])
            except pyproj.exceptions.CRSError:
                raise InputProblem(key, f"{key} {values[key]!r} is not a CRS PROJ knows; give "
                                        "an EPSG code such as EPSG:27700, or WKT.") from None
    return values


#: the CLI's option names in engine hints, and what a service caller sets instead
_OPTION_WORDS = (
    ("--accuracy-field", "an accuracy attribute"), ("--out-crs", "the 'out_crs' input"),
    ("--dem", "the 'dem' input"), ("--kind", "the 'kind' input"),
    ("--id-field", "the 'id_field' input"), ("--accuracy", "the 'accuracy' input"),
    ("--layer", "the 'layer' input"), ("--crs", "the 'crs' input"),
)


def _in_service_words(exc: RutwiseError) -> RutwiseError:
    for option, words in _OPTION_WORDS:
        exc.message = exc.message.replace(option, words)
        exc.hint = exc.hint.replace(option, words)
    return exc


def _in_service_terms(
    run: Callable[[dict[str, Any], RunContext], Manifest], inputs: dict[str, Any], ctx: RunContext
) -> Manifest:
    """Run a process function so engine advice names the service's inputs, not CLI options.
    Bound with functools.partial: process functions are pickled into the worker processes."""
    try:
        return run(inputs, ctx)
    except RutwiseError as exc:
        raise _in_service_words(exc) from None


def _analyze(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    ctx.progress(5, "reading the layer")
    ruts = inputs["ruts"]
    if "value" in ruts:
        path = ctx.work_dir / "input.geojson"
        write_json(path, ruts["value"])
    else:
        path = _input_file(ruts, ctx)
    options = AnalyzeOptions(layer=inputs.get("layer"), crs=inputs.get("crs"),
                             out_crs=inputs.get("out_crs"), accuracy=inputs.get("accuracy"),
                             id_field=inputs.get("id_field"))
    layer: InputLayer
    if path.suffix.lower() in RASTER_SUFFIXES:
        from geoops.raster import extract_ruts

        ctx.progress(5, "extracting rut lines from the raster")
        layer = extract_ruts(path).as_input_layer()
        if len(layer) > ctx.max_features:
            raise LimitExceeded(f"The raster gave {len(layer)} rut lines; the limit is "
                                f"{ctx.max_features}.", "Cut the raster into smaller parts.")
    else:
        layer = read_layer(path, layer=options.layer, id_field=options.id_field,
                           max_features=ctx.max_features)
    vertices = sum(len(p) for parts in layer.parts for p in parts)
    if vertices > ctx.max_vertices:
        raise LimitExceeded(f"The layer has {vertices} vertices; the limit is "
                            f"{ctx.max_vertices}.", "Simplify or split the layer.")
    if ctx.scheduler and path.suffix.lower() not in RASTER_SUFFIXES:
        return _analyze_on_cluster(path, options, ctx)
    ctx.progress(15, "analysing the ruts")
    result = analyze_layer(layer, options)
    ctx.progress(70, "writing the results")
    passes, rut_layer = result_layers(result, WGS84)
    meta = with_layer_checksums(dict(result.metadata, output_crs="EPSG:4326"),
                                [passes, rut_layer])
    write_json(ctx.work_dir / "passes.geojson", geojson_document(passes, meta))
    write_json(ctx.work_dir / "ruts.geojson", geojson_document(rut_layer, meta))
    manifest: Manifest = {"passes": {GEOJSON: "passes.geojson"},
                          "ruts": {GEOJSON: "ruts.geojson"}}
    if GEOPACKAGE in ctx.wanted or not ctx.wanted:
        write_result(result, ctx.work_dir / "result.gpkg", out_crs=options.out_crs)
        for formats in manifest.values():
            formats[GEOPACKAGE] = "result.gpkg"
    return manifest


def _analyze_on_cluster(path: Path, options: AnalyzeOptions, ctx: RunContext) -> Manifest:
    """The analysis on the Dask cluster (setting ``scheduler``): the cluster writes the
    GeoPackage in the input's CRS into the job folder; the outputs are made from it."""
    from .cluster import read_result, reproject, run_on_cluster

    ctx.progress(15, "analysing the ruts on the cluster")
    gpkg = ctx.work_dir / "result.gpkg"
    run_on_cluster(path, options, gpkg, ctx.scheduler)
    ctx.progress(70, "writing the results")
    layers, metadata, crs = read_result(gpkg)
    passes, rut_layer = (reproject(layer, crs, WGS84) for layer in layers)
    meta = with_layer_checksums(dict(metadata, output_crs="EPSG:4326"), [passes, rut_layer])
    write_json(ctx.work_dir / "passes.geojson", geojson_document(passes, meta))
    write_json(ctx.work_dir / "ruts.geojson", geojson_document(rut_layer, meta))
    manifest: Manifest = {"passes": {GEOJSON: "passes.geojson"},
                          "ruts": {GEOJSON: "ruts.geojson"}}
    if GEOPACKAGE not in ctx.wanted and ctx.wanted:
        gpkg.unlink()
        return manifest
    if options.out_crs:
        target = pyproj.CRS.from_user_input(options.out_crs)
        moved = [reproject(layer, crs, target) for layer in layers]
        write_geopackage(gpkg, moved, target.to_wkt(), with_layer_checksums(
            dict(metadata, output_crs=target.to_string()), moved))
    for formats in manifest.values():
        formats[GEOPACKAGE] = "result.gpkg"
    return manifest


def _num(description: str, default: float, lo: float, hi: float, exclusive: bool = False
         ) -> dict[str, Any]:
    bound = {"exclusiveMinimum": lo} if exclusive else {"minimum": lo}
    return {"type": "number", "description": description, "default": default, **bound,
            "maximum": hi}


def _text(description: str, **extra: Any) -> dict[str, Any]:
    return {"type": "string", "description": description, **extra}


_LAYER_OUTPUT_SCHEMA = {"oneOf": [
    FEATURE_COLLECTION_SCHEMA,
    {"type": "string", "contentEncoding": "binary", "contentMediaType": GEOPACKAGE},
]}

ANALYZE = Process(
    id="analyze",
    version=version(),
    title="Read vehicle passes from mapped ruts",
    description=(
        "Pairs mapped wheel ruts into vehicle passes and estimates travel direction, wheelbase "
        "and how sure that is. Results are estimates from geometry: " + CAUTION
    ),
    keywords=("ruts", "vehicle passes", "wheelbase", "travel direction"),
    inputs={
        "ruts": InputSpec(
            "Rut lines",
            "The mapped ruts: a GeoJSON FeatureCollection of LineStrings (bare or as "
            "{\"value\": ...}), or {\"href\": \"/uploads/<id>\"} naming a GeoPackage, GeoJSON, "
            "GPX or FlatGeobuf file uploaded to this service, or a GeoTIFF elevation model or "
            "rut mask, whose rut lines are extracted first (as extract-ruts does with its "
            "defaults).",
            {"oneOf": [
                FEATURE_COLLECTION_SCHEMA,
                {"type": "string", "contentEncoding": "binary", "contentMediaType": GEOPACKAGE},
                {"type": "string", "contentEncoding": "binary",
                 "contentMediaType": "application/gpx+xml"},
                {"type": "string", "contentEncoding": "binary",
                 "contentMediaType": "application/flatgeobuf"},
                {"type": "string", "contentEncoding": "binary", "contentMediaType": GEOTIFF},
            ]},
        ),
        "id_field": InputSpec("Id attribute", "Attribute whose values identify features in "
                              "source_fids.", _text("attribute name", maxLength=200),
                              min_occurs=0),
        "accuracy": InputSpec("Vertex accuracy", "Horizontal accuracy of the vertices, one "
                              "sigma per axis, metres (default: estimated from the data).",
                              {"type": "number", "exclusiveMinimum": 0, "maximum": 1000},
                              min_occurs=0),
        "crs": InputSpec("Input CRS", "CRS of the input when it has none, or to override it "
                         "(e.g. EPSG:27700).", _text("EPSG code, WKT or PROJ", maxLength=5000),
                         min_occurs=0),
        "out_crs": InputSpec("Output CRS", "CRS of the GeoPackage output (default: the "
                             "input's). GeoJSON output is always lon/lat WGS 84.",
                             _text("EPSG code, WKT or PROJ", maxLength=5000), min_occurs=0),
        "layer": InputSpec("Layer", "Layer to read when the uploaded file has several line "
                           "layers.", _text("layer name", maxLength=200), min_occurs=0),
    },
    outputs={
        "passes": OutputSpec("Vehicle passes", "One line per pass (rear-axle path) with verdict, "
                             "confidence, wheelbase and its range, and more.",
                             _LAYER_OUTPUT_SCHEMA, (GEOJSON, GEOPACKAGE), GEOPACKAGE),
        "ruts": OutputSpec("Ruts", "The cleaned ruts with the pass and wheel each belongs to.",
                           _LAYER_OUTPUT_SCHEMA, (GEOJSON, GEOPACKAGE), GEOPACKAGE),
    },
    run=partial(_in_service_terms, _analyze),
    check=_check_analyze,
)

# --- extract-ruts ----------------------------------------------------------------------------

_RASTER_TYPES = {"image/tiff": ".tif"}


def _check_raster_input(input_id: str, value: Any, ctx: CheckContext) -> dict[str, Any]:
    """An uploaded GeoTIFF by reference, or a base64 GeoTIFF by value."""
    if isinstance(value, list) and len(value) == 1:
        value = value[0]
    if isinstance(value, dict) and "href" in value:
        ref = _check_upload_ref(input_id, value["href"], ctx)
        if Path(ref["file"]).suffix.lower() not in RASTER_SUFFIXES:
            raise InputProblem(input_id, f"{input_id!r} names an uploaded vector layer; upload "
                                         "the GeoTIFF (Content-Type: image/tiff) and use its "
                                         "href.")
        return ref
    if (isinstance(value, dict) and isinstance(value.get("value"), str)
            and value.get("encoding", "base64") == "base64"):
        return _check_inline_file(value, input_id, _RASTER_TYPES)
    raise InputProblem(input_id, f"{input_id!r} must be {{'href': '/uploads/<id>'}} naming an "
                                 "uploaded GeoTIFF, or {'value': '<base64>', 'encoding': "
                                 f"'base64', 'mediaType': '{GEOTIFF}'}}.")


def _check_extract(values: dict[str, Any], ctx: CheckContext) -> dict[str, Any]:
    from geoops.raster import ExtractOptions

    values["raster"] = _check_raster_input("raster", values["raster"], ctx)
    if values.get("dem") is not None:
        values["dem"] = _check_raster_input("dem", values["dem"], ctx)
    # fail early on options the engine would reject later
    ExtractOptions(kind=values["kind"], threshold=values.get("threshold"),
                   min_length_m=float(values["min_length"]))
    return values


def _rut_lines_document(lines: Any) -> dict[str, Any]:
    """The rut lines as a GeoJSON document in lon/lat with the run metadata and the caution."""
    from geoops.raster import LAYER_NAME, LINE_FIELDS

    to_lonlat = pyproj.Transformer.from_crs(lines.crs, WGS84, always_xy=True)
    geoms = shapely.transform(lines.lines, lambda xy: np.column_stack(
        to_lonlat.transform(xy[:, 0], xy[:, 1])))
    fields = {"line_id": list(range(1, len(lines) + 1)), "length_m": lines.length_m.tolist(),
              "width_m": lines.width_m.tolist(),
              "depth_median_m": lines.depth_median_m.tolist(),
              "depth_max_m": lines.depth_max_m.tolist(),
              "depth_class": lines.depth_class.tolist()}
    layer = OutputLayer(LAYER_NAME, geoms, fields, LINE_FIELDS,
                        "rutwise rut centrelines extracted from a raster. " + CAUTION)
    meta = {"tool": "rutwise", "version": version(), "raster_kind": lines.kind,
            "pixel_size_m": json.dumps([round(v, 6) for v in lines.pixel_size_m]),
            "options": json.dumps(dict(lines.options)),
            "depth_classes": json.dumps({
                "limits_m": list(lines.options.get("depth_limits_m", DEPTH_LIMITS_M)),
                "measure": "median depth below the local ground along the line"}),
            "lines_found": str(len(lines)), "warnings": json.dumps(list(lines.warnings)),
            "input_crs": pyproj.CRS.from_user_input(lines.crs).to_string(),
            "output_crs": "EPSG:4326", "input_sha256": file_sha256(lines.source),
            "caution": CAUTION}
    return geojson_document(layer, with_layer_checksums(meta, [layer]))


def _extract(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    from geoops.raster import extract_ruts, write_rut_lines

    ctx.progress(5, "reading the raster")
    raster = _input_file(inputs["raster"], ctx, "raster")
    dem = _input_file(inputs["dem"], ctx, "dem") if inputs.get("dem") else None
    ctx.progress(10, "extracting rut lines")
    lines = extract_ruts(raster, dem_path=dem, kind=inputs["kind"],
                         threshold=inputs.get("threshold"),
                         min_length_m=float(inputs["min_length"]))
    ctx.progress(80, "writing the results")
    write_json(ctx.work_dir / "rut_lines.geojson", _rut_lines_document(lines))
    manifest: Manifest = {"rut_lines": {GEOJSON: "rut_lines.geojson"}}
    if GEOPACKAGE in ctx.wanted or not ctx.wanted:
        write_rut_lines(lines, ctx.work_dir / "rut_lines.gpkg")
        manifest["rut_lines"][GEOPACKAGE] = "rut_lines.gpkg"
    return manifest


_RASTER_SCHEMA = {"oneOf": [
    {"type": "string", "contentEncoding": "binary", "contentMediaType": GEOTIFF},
]}

EXTRACT_RUTS = Process(
    id="extract-ruts",
    version=version(),
    title="Find rut lines in a drone elevation model or rut mask",
    description=(
        "Finds rut centrelines in a single-band GeoTIFF, either an elevation model (DEM/DSM, "
        "metres; ruts are narrow depressions below the local ground) or a rut mask / "
        "probability raster, and measures their length, width and depth below the local "
        "ground, with a depth class. Results are estimates from geometry: " + CAUTION
    ),
    keywords=("ruts", "elevation model", "rut mask", "rut depth", "GeoTIFF"),
    inputs={
        "raster": InputSpec(
            "Raster", "The elevation model or rut mask: {\"href\": \"/uploads/<id>\"} naming a "
            "GeoTIFF uploaded to this service, or the file inline as {\"value\": \"<base64>\", "
            "\"encoding\": \"base64\", \"mediaType\": \"image/tiff\"}.", _RASTER_SCHEMA),
        "dem": InputSpec(
            "Elevation model", "With a rut mask: the elevation model to measure depths from "
            "(same forms as 'raster'; resampled onto the mask's grid when they differ).",
            _RASTER_SCHEMA, min_occurs=0),
        "kind": InputSpec(
            "Raster kind", "How to read 'raster': 'dem', 'mask', or 'auto' (boolean and 8-bit "
            "rasters and rasters with values within 0..1 are masks; the rest elevation models "
            "in metres).", {"type": "string", "enum": ["auto", "dem", "mask"],
                            "default": "auto"}, min_occurs=0),
        "threshold": InputSpec(
            "Threshold", "Elevation model: least depth below the local ground that counts as "
            "rut, metres (default 0.03). Mask: least value that counts as rut, 0..1 (default "
            "0.5).", {"type": "number", "exclusiveMinimum": 0, "maximum": 100}, min_occurs=0),
        "min_length": InputSpec(
            "Shortest line", "Lines shorter than this are dropped, metres.",
            _num("metres", MIN_LENGTH_M, 0.0, 10000.0, exclusive=True), min_occurs=0),
    },
    outputs={
        "rut_lines": OutputSpec(
            "Rut lines", "One line per rut with length_m, width_m, depth_median_m, depth_max_m "
            "and depth_class; GeoJSON in lon/lat WGS 84, the GeoPackage in the raster's CRS.",
            _LAYER_OUTPUT_SCHEMA, (GEOJSON, GEOPACKAGE), GEOPACKAGE),
    },
    run=partial(_in_service_terms, _extract),
    check=_check_extract,
)

# --- simulate --------------------------------------------------------------------------------

_MANOEUVRES = ("straight", "circle", "slalom", "s_curve")


def _check_simulate(values: dict[str, Any], ctx: CheckContext) -> dict[str, Any]:
    vehicle = _vehicle(values)
    steer = float(values["steer_deg"])
    if steer > vehicle.max_steer_deg:
        raise InputProblem("steer_deg", f"steer_deg {steer} exceeds the vehicle's lock of "
                                        f"{vehicle.max_steer_deg} degrees.")
    if values["manoeuvre"] == "s_curve" and 2 * values["turn_m"] + 6.0 > values["length_m"]:
        raise InputProblem("turn_m", "an s_curve needs length_m >= 2 * turn_m + 6; lengthen the "
                                     "path or shorten turn_m.")
    n_steps = values["length_m"] / 0.05
    if n_steps * 4 > ctx.max_vertices:
        raise LimitExceeded("the simulated tracks would exceed the vertex limit.",
                            "Shorten length_m.")
    return values


def _vehicle(values: dict[str, Any]) -> Vehicle:
    preset = PRESETS[values["vehicle"]]
    wheelbase = values.get("wheelbase_m") or preset.wheelbase
    return Vehicle(float(wheelbase), preset.track_front, preset.track_rear,
                   preset.max_steer_deg, preset.name)


def _run_simulate(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    ctx.progress(10, "simulating")
    vehicle = _vehicle(inputs)
    ds = 0.05
    length, steer_deg = float(inputs["length_m"]), float(inputs["steer_deg"])
    kind = inputs["manoeuvre"]
    if kind == "straight":
        steer = straight(length, ds)
    elif kind == "circle":
        steer = circle(length, ds, steer_deg)
    elif kind == "slalom":
        steer = slalom(length, ds, steer_deg, float(inputs["period_m"]))
    else:
        steer = s_curve(length, ds, steer_deg, float(inputs["turn_m"]))
    heading = math.radians(90.0 - float(inputs["bearing_deg"]))
    sim = simulate_steering(vehicle, steer, ds, start=(0.0, 0.0, heading))
    rng = np.random.default_rng(int(inputs["seed"]))
    lines = mapped_lines(sim, float(inputs["noise_m"]), float(inputs["spacing_m"]), rng,
                         reverse_prob=0.0)
    local = pyproj.CRS.from_proj4(
        f"+proj=aeqd +lat_0={inputs['lat']} +lon_0={inputs['lon']} +datum=WGS84 +units=m")
    to_lonlat = pyproj.Transformer.from_crs(local, WGS84, always_xy=True)
    features = []
    for n, (wheel, xy) in enumerate(lines.items(), start=1):
        lon, lat = to_lonlat.transform(xy[:, 0], xy[:, 1])
        coords = np.round(np.column_stack([lon, lat]), 9).tolist()
        features.append({"type": "Feature", "id": n,
                         "properties": {"wheel": wheel, "vehicle": vehicle.name,
                                        "wheelbase_m": vehicle.wheelbase,
                                        "track_rear_m": vehicle.track_rear},
                         "geometry": {"type": "LineString", "coordinates": coords}})
    doc = {"type": "FeatureCollection", "name": "wheel_tracks", "features": features,
           "rutwise_metadata": {"tool": "rutwise", "version": version(),
                                "simulation": json.dumps({k: v for k, v in inputs.items()}),
                                "caution": "Simulated tracks for planning, not observations. "
                                           + CAUTION}}
    write_json(ctx.work_dir / "wheel_tracks.geojson", doc)
    return {"wheel_tracks": {GEOJSON: "wheel_tracks.geojson"}}


SIMULATE = Process(
    id="simulate",
    version=version(),
    title="Simulate the wheel tracks of a manoeuvre",
    description="Drives the kinematic bicycle model through a steering manoeuvre and returns "
                "the tyre tracks it would leave, placed at a given longitude and latitude: for "
                "planning surveys and for trying the analysis.",
    keywords=("simulation", "kinematic bicycle model", "planning"),
    inputs={
        "lon": InputSpec("Start longitude", "WGS 84 degrees.",
                         {"type": "number", "minimum": -180, "maximum": 180}),
        "lat": InputSpec("Start latitude", "WGS 84 degrees.",
                         {"type": "number", "minimum": -85, "maximum": 85}),
        "bearing_deg": InputSpec("Start bearing", "Clockwise from north, degrees.",
                                 _num("degrees", 90.0, -360, 360), min_occurs=0),
        "vehicle": InputSpec("Vehicle", "Vehicle preset.",
                             {"type": "string", "enum": sorted(PRESETS), "default": "car"},
                             min_occurs=0),
        "wheelbase_m": InputSpec("Wheelbase", "Overrides the preset's wheelbase, metres.",
                                 {"type": "number", "exclusiveMinimum": 0.2, "maximum": 15},
                                 min_occurs=0),
        "manoeuvre": InputSpec("Manoeuvre", "Steering profile.",
                               {"type": "string", "enum": list(_MANOEUVRES),
                                "default": "slalom"}, min_occurs=0),
        "length_m": InputSpec("Path length", "Rear-axle path length, metres.",
                              _num("metres", 60.0, 1.0, 5000.0), min_occurs=0),
        "steer_deg": InputSpec("Steering angle", "Steady or peak steering angle, degrees.",
                               _num("degrees", 12.0, 0.0, 60.0), min_occurs=0),
        "period_m": InputSpec("Slalom period", "Length of one full weave, metres.",
                              _num("metres", 25.0, 1.0, 1000.0), min_occurs=0),
        "turn_m": InputSpec("Turn length", "Length of each turn of an s_curve, metres.",
                            _num("metres", 10.0, 0.5, 1000.0), min_occurs=0),
        "spacing_m": InputSpec("Vertex spacing", "Distance between mapped vertices, metres.",
                               _num("metres", 0.5, 0.05, 50.0), min_occurs=0),
        "noise_m": InputSpec("Position noise", "Per-axis standard deviation, metres.",
                             _num("metres", 0.0, 0.0, 5.0), min_occurs=0),
        "seed": InputSpec("Seed", "Seed of the noise.",
                          {"type": "integer", "default": 0, "minimum": 0,
                           "maximum": 2**32 - 1}, min_occurs=0),
    },
    outputs={
        "wheel_tracks": OutputSpec("Wheel tracks", "One line per tyre, lon/lat WGS 84.",
                                   FEATURE_COLLECTION_SCHEMA, (GEOJSON,), GEOJSON),
    },
    run=_run_simulate,
    check=_check_simulate,
)

# --- echo (the standard's test process) ------------------------------------------------------


def _run_echo(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    pause = float(inputs["pause_s"])
    ctx.progress(10, f"waiting {pause:g} s as asked")
    time.sleep(pause)
    write_atomic(ctx.work_dir / "echo.txt", inputs["message"].encode("utf-8"))
    write_json(ctx.work_dir / "echo.json", {"message": inputs["message"]})
    return {"echo": {TEXT: "echo.txt", JSON: "echo.json"}}


ECHO = Process(
    id="echo",
    version=version(),
    title="Echo (test process)",
    description="Returns its text input after an optional pause; for testing clients.",
    keywords=("test",),
    inputs={
        "message": InputSpec("Text", "Any text.", {"type": "string", "maxLength": 10000}),
        "pause_s": InputSpec("Pause", "Seconds to wait before answering.",
                             _num("seconds", 0.0, 0.0, 600.0), min_occurs=0),
    },
    outputs={"echo": OutputSpec("Text", "The input text.", {"type": "string"}, (TEXT, JSON),
                                TEXT)},
    run=_run_echo,
)
