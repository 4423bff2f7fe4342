"""The processes rutwise ships: ``analyze`` (the main job), ``simulate`` (planning: wheel
tracks a vehicle would leave) and ``echo`` (the standard's test process).

Their ``run`` functions execute in worker processes and write result files atomically into
the job folder; their ``check`` functions run in the service before a job is made.
"""

from __future__ import annotations

import base64
import binascii
import json
import math
import time
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import numpy as np
import pyproj

from geoops.errors import LimitExceeded, RutwiseError
from geoops.io import geojson_document, read_layer
from geoops.kinematics import Vehicle, simulate_steering
from geoops.pipeline import CAUTION, AnalyzeOptions, analyze_layer, result_layers, write_result
from geoops.scenarios import PRESETS, circle, mapped_lines, s_curve, slalom, straight

from .jobs import is_id, write_atomic, write_json
from .processes import (
    FEATURE_COLLECTION_SCHEMA,
    GEOJSON,
    GEOPACKAGE,
    JSON,
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


#: suffix of an inline (base64) layer file by media type
INLINE_FILE_TYPES = {GEOPACKAGE: ".gpkg", "application/flatgeobuf": ".fgb",
                     "application/gpx+xml": ".gpx", GEOJSON: ".geojson"}


def _check_inline_file(ruts: dict[str, Any]) -> dict[str, Any]:
    """A layer file sent inline as base64 (the standard's qualified binary value)."""
    media = ruts.get("mediaType")
    if media not in INLINE_FILE_TYPES:
        raise InputProblem("ruts", f"a base64 'ruts' value needs a mediaType, one of "
                                   f"{', '.join(INLINE_FILE_TYPES)}; got {media!r}.")
    try:
        data = base64.b64decode(ruts["value"], validate=True)
    except (binascii.Error, ValueError):
        raise InputProblem("ruts", "the base64 'ruts' value is not valid base64; encode the "
                                   "file with standard base64 (RFC 4648).") from None
    if not data:
        raise InputProblem("ruts", "the base64 'ruts' value is empty.")
    return {"base64": ruts["value"], "suffix": INLINE_FILE_TYPES[media]}


def _check_analyze(values: dict[str, Any], ctx: CheckContext) -> dict[str, Any]:
    ruts = values["ruts"]
    if isinstance(ruts, list) and len(ruts) == 1:
        ruts = ruts[0]
    if isinstance(ruts, dict) and "href" in ruts:
        href = ruts["href"]
        upload_id = upload_id_of(href) if isinstance(href, str) else None
        if upload_id is None:
            raise InputProblem("ruts", "'ruts' by reference must name a file uploaded to this "
                                       "service ({'href': '/uploads/<id>'}); other URLs are not "
                                       "fetched. POST the file to /uploads first.")
        path = ctx.find_upload(upload_id)
        if path is None:
            raise InputProblem("ruts", f"there is no upload {upload_id!r} for this caller. "
                                       "POST the file to /uploads and use the href it returns.")
        values["ruts"] = {"upload": upload_id, "file": path.name}
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
    ("--id-field", "the 'id_field' input"), ("--accuracy", "the 'accuracy' input"),
    ("--layer", "the 'layer' input"), ("--crs", "the 'crs' input"),
)


def _in_service_words(exc: RutwiseError) -> RutwiseError:
    for option, words in _OPTION_WORDS:
        exc.message = exc.message.replace(option, words)
        exc.hint = exc.hint.replace(option, words)
    return exc


def _run_analyze(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    try:
        return _analyze(inputs, ctx)
    except RutwiseError as exc:
        raise _in_service_words(exc) from None


def _analyze(inputs: dict[str, Any], ctx: RunContext) -> Manifest:
    ctx.progress(5, "reading the layer")
    ruts = inputs["ruts"]
    if "upload" in ruts:
        path = ctx.data_dir / "uploads" / ruts["upload"] / Path(ruts["file"]).name
    elif "base64" in ruts:
        path = ctx.work_dir / ("input" + ruts["suffix"])
        write_atomic(path, base64.b64decode(ruts["base64"]))
    else:
        path = ctx.work_dir / "input.geojson"
        write_json(path, ruts["value"])
    options = AnalyzeOptions(layer=inputs.get("layer"), crs=inputs.get("crs"),
                             out_crs=inputs.get("out_crs"), accuracy=inputs.get("accuracy"),
                             id_field=inputs.get("id_field"))
    layer = read_layer(path, layer=options.layer, id_field=options.id_field,
                       max_features=ctx.max_features)
    vertices = sum(len(p) for parts in layer.parts for p in parts)
    if vertices > ctx.max_vertices:
        raise LimitExceeded(f"The layer has {vertices} vertices; the limit is "
                            f"{ctx.max_vertices}.", "Simplify or split the layer.")
    ctx.progress(15, "analysing the ruts")
    result = analyze_layer(layer, options)
    ctx.progress(70, "writing the results")
    meta = dict(result.metadata, output_crs="EPSG:4326")
    passes, rut_layer = result_layers(result, WGS84)
    write_json(ctx.work_dir / "passes.geojson", geojson_document(passes, meta))
    write_json(ctx.work_dir / "ruts.geojson", geojson_document(rut_layer, meta))
    manifest: Manifest = {"passes": {GEOJSON: "passes.geojson"},
                          "ruts": {GEOJSON: "ruts.geojson"}}
    if GEOPACKAGE in ctx.wanted or not ctx.wanted:
        write_result(result, ctx.work_dir / "result.gpkg", out_crs=options.out_crs)
        for formats in manifest.values():
            formats[GEOPACKAGE] = "result.gpkg"
    return manifest


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
            "GPX or FlatGeobuf file uploaded to this service.",
            {"oneOf": [
                FEATURE_COLLECTION_SCHEMA,
                {"type": "string", "contentEncoding": "binary", "contentMediaType": GEOPACKAGE},
                {"type": "string", "contentEncoding": "binary",
                 "contentMediaType": "application/gpx+xml"},
                {"type": "string", "contentEncoding": "binary",
                 "contentMediaType": "application/flatgeobuf"},
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
    run=_run_analyze,
    check=_check_analyze,
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


def _num(description: str, default: float, lo: float, hi: float, exclusive: bool = False
         ) -> dict[str, Any]:
    bound = {"exclusiveMinimum": lo} if exclusive else {"minimum": lo}
    return {"type": "number", "description": description, "default": default, **bound,
            "maximum": hi}


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
