"""Processes the service offers, as plugins in one registry.

A :class:`Process` is a small unit: id, version, texts, input and output descriptions with
JSON schemas, the job control options, an optional ``check`` that validates the inputs in the
service before a job is created, and a ``run`` function. ``run`` executes in a worker process
(see :mod:`service.worker`), writes its result files into the job folder and returns a
manifest ``{output id: {media type: file name}}``.

Other installed packages add processes through the entry-point group ``rutwise.processes``:
each entry point names a :class:`Process` (or a function returning one or a list of them).
This module knows nothing of HTTP; it raises :class:`InputProblem` or
:class:`geoops.errors.RutwiseError` for bad inputs.
"""

from __future__ import annotations

import importlib.metadata
import json
import logging
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geoops

log = logging.getLogger("service")

ENTRY_POINT_GROUP = "rutwise.processes"
GEOJSON = "application/geo+json"
GEOPACKAGE = "application/geopackage+sqlite3"
JSON = "application/json"
TEXT = "text/plain"
GEOTIFF = "image/tiff; application=geotiff"
#: file suffixes of rasters (GeoTIFF), as uploaded or written from an inline value
RASTER_SUFFIXES = (".tif", ".tiff")
#: media types that can be sent inline (by value); others only by reference
INLINE_TYPES = (GEOJSON, JSON, TEXT)
ALL_JOB_CONTROL = ("sync-execute", "async-execute", "dismiss")

FEATURE_COLLECTION_SCHEMA: dict[str, Any] = {
    "type": "object",
    "format": "geojson-feature-collection",
    "contentMediaType": GEOJSON,
    "$ref": "http://schemas.opengis.net/ogcapi/features/part1/1.0/openapi/schemas/"
            "featureCollectionGeoJSON.yaml",
}


class InputProblem(ValueError):
    """An input value is missing or unusable; ``input_id`` names it."""

    def __init__(self, input_id: str, message: str) -> None:
        super().__init__(message)
        self.input_id = input_id
        self.message = message


@dataclass(frozen=True)
class InputSpec:
    title: str
    description: str
    schema: dict[str, Any]
    min_occurs: int = 1
    max_occurs: int = 1


@dataclass(frozen=True)
class OutputSpec:
    title: str
    description: str
    schema: dict[str, Any]
    #: media types this output is produced in; the first one is sent by value by default
    formats: tuple[str, ...]
    #: media type sent when the output is asked for by reference without a format
    reference_format: str | None = None


@dataclass(frozen=True)
class CheckContext:
    """What an input check may consult: the caller, the limits, the caller's uploads."""

    owner: str
    max_features: int
    max_vertices: int
    #: upload id -> file path of that caller's upload, or None when it has no such upload
    find_upload: Callable[[str], Path | None]


@dataclass(frozen=True)
class RunContext:
    """What a running process gets: its folder, the data folder, limits, a progress sink."""

    work_dir: Path
    data_dir: Path
    max_features: int
    max_vertices: int
    progress: Callable[[int, str], None]
    #: media types the request asked for; a process may skip making the others
    wanted: frozenset[str] = frozenset()
    #: address of the Dask scheduler to run analyses on; empty: run them in this process
    scheduler: str = ""


Manifest = dict[str, dict[str, str]]
RunFunction = Callable[[dict[str, Any], RunContext], Manifest]
CheckFunction = Callable[[dict[str, Any], CheckContext], dict[str, Any]]


@dataclass(frozen=True)
class Process:
    """One process the service can execute (module docstring says how it runs)."""

    id: str
    version: str
    title: str
    description: str
    inputs: dict[str, InputSpec]
    outputs: dict[str, OutputSpec]
    run: RunFunction
    check: CheckFunction | None = None
    keywords: tuple[str, ...] = ()
    job_control: tuple[str, ...] = ALL_JOB_CONTROL
    output_transmission: tuple[str, ...] = ("value", "reference")

    def summary(self) -> dict[str, Any]:
        """The processSummary fields (without links)."""
        return {
            "id": self.id, "version": self.version, "title": self.title,
            "description": self.description, "keywords": list(self.keywords),
            "jobControlOptions": list(self.job_control),
            "outputTransmission": list(self.output_transmission),
        }

    def document(self) -> dict[str, Any]:
        """The process description fields (without links)."""
        doc = self.summary()
        doc["inputs"] = {
            k: {"title": v.title, "description": v.description, "schema": v.schema,
                "minOccurs": v.min_occurs,
                "maxOccurs": "unbounded" if v.max_occurs < 0 else v.max_occurs}
            for k, v in self.inputs.items()
        }
        doc["outputs"] = {
            k: {"title": v.title, "description": v.description, "schema": v.schema}
            for k, v in self.outputs.items()
        }
        return doc

    def validate(self, raw: Any, ctx: CheckContext) -> dict[str, Any]:
        """Plain inputs after the generic checks (known ids, required ones, simple types) and
        the process's own ``check``."""
        if raw is None:
            raw = {}
        if not isinstance(raw, dict):
            raise InputProblem("inputs", "'inputs' must be an object keyed by input id.")
        unknown = sorted(set(raw) - set(self.inputs))
        if unknown:
            raise InputProblem(unknown[0], f"process {self.id!r} has no input {unknown[0]!r}; "
                                           f"its inputs are: {', '.join(self.inputs)}.")
        values: dict[str, Any] = {}
        for key, spec in self.inputs.items():
            if key not in raw or raw[key] is None:
                if spec.min_occurs > 0 and "default" not in spec.schema:
                    raise InputProblem(key, f"input {key!r} is required: "
                                            f"{spec.description}")
                if "default" in spec.schema:
                    values[key] = spec.schema["default"]
                continue
            values[key] = _check_simple(key, raw[key], spec)
        return self.check(values, ctx) if self.check is not None else values


def _unwrap(value: Any) -> Any:
    """The value of a qualified input ``{"value": ...}``; other values unchanged."""
    if isinstance(value, dict) and "value" in value and "href" not in value:
        return value["value"]
    return value


def _check_simple(key: str, value: Any, spec: InputSpec) -> Any:
    """Validate a value against a simple schema (string/number/integer/boolean, enum, bounds).
    Other schemas pass unchanged to the process's own check."""
    schema = spec.schema
    kind = schema.get("type")
    if kind not in ("string", "number", "integer", "boolean"):
        return value
    value = _unwrap(value)
    if isinstance(value, list) and spec.max_occurs == 1 and len(value) == 1:
        value = value[0]
    ok = {
        "string": isinstance(value, str),
        "boolean": isinstance(value, bool),
        "integer": isinstance(value, int) and not isinstance(value, bool),
        "number": isinstance(value, int | float) and not isinstance(value, bool)
        and math.isfinite(float(value)),
    }[kind]
    if not ok:
        raise InputProblem(key, f"input {key!r} must be a {kind}, got {json.dumps(value)[:80]}.")
    if "enum" in schema and value not in schema["enum"]:
        raise InputProblem(key, f"input {key!r} must be one of "
                                f"{', '.join(map(str, schema['enum']))}; got {value!r}.")
    if kind in ("number", "integer"):
        lo, hi = schema.get("minimum"), schema.get("maximum")
        xlo = schema.get("exclusiveMinimum")
        if (lo is not None and value < lo) or (hi is not None and value > hi) or (
                xlo is not None and value <= xlo):
            bounds = f"{'>' if xlo is not None else '>='} {xlo if xlo is not None else lo}"
            raise InputProblem(key, f"input {key!r} must be {bounds}"
                                    + (f" and <= {hi}" if hi is not None else "")
                                    + f"; got {value}.")
    if kind == "string" and len(value) > int(schema.get("maxLength", 10_000)):
        raise InputProblem(key, f"input {key!r} is too long.")
    return value


# --- registry -------------------------------------------------------------------------------


@dataclass
class ProcessRegistry:
    """The processes of one service, by id."""

    processes: dict[str, Process] = field(default_factory=dict)

    def add(self, process: Process) -> None:
        if not isinstance(process, Process):
            raise TypeError(f"not a Process: {process!r}")
        if process.id in self.processes:
            raise ValueError(f"two processes use the id {process.id!r}")
        self.processes[process.id] = process

    def get(self, process_id: str) -> Process | None:
        return self.processes.get(process_id)

    def all(self) -> list[Process]:
        return [self.processes[k] for k in sorted(self.processes)]


def _from_entry_point(obj: Any) -> list[Process]:
    if isinstance(obj, Process):
        return [obj]
    if callable(obj):
        made = obj()
        return [made] if isinstance(made, Process) else list(made)
    return list(obj)


def load_registry(builtin: Iterable[Process] | None = None, plugins: bool = True
                  ) -> ProcessRegistry:
    """The built-in processes plus those of the ``rutwise.processes`` entry points.

    A plugin that fails to load, or reuses an id, is skipped with a logged error: one broken
    package does not take the service down.
    """
    registry = ProcessRegistry()
    for process in (builtin_processes() if builtin is None else builtin):
        registry.add(process)
    if plugins:
        for ep in importlib.metadata.entry_points(group=ENTRY_POINT_GROUP):
            try:
                for process in _from_entry_point(ep.load()):
                    registry.add(process)
            except Exception:
                log.exception("skipping process plugin %s (%s)", ep.name, ep.value)
    return registry


def builtin_processes() -> list[Process]:
    from . import builtin

    return [builtin.ANALYZE, builtin.EXTRACT_RUTS, builtin.SIMULATE, builtin.ECHO]


# --- helpers for process functions ----------------------------------------------------------


def version() -> str:
    return geoops.__version__
