"""The inputs of a batch: which layers, under which names, with which options and keys.

:func:`find_inputs` turns a folder (searched recursively by file extension), a manifest (YAML,
JSON or CSV; one layer per entry with its own options) or one layer file into
:class:`BatchInput` items in a stable order, each with a unique result name. :func:`input_key`
is the key a result is filed under: the input's bytes, its options, the tool version, the
engine's source and the work-unit size. Nothing is analysed or written here.
"""

from __future__ import annotations

import csv
import fnmatch
import functools
import hashlib
import json
import os
import re
from collections.abc import Sequence
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Any

from . import __version__
from .errors import BadInput
from .pipeline import AnalyzeOptions

#: file extensions searched for in a folder
LAYER_SUFFIXES = (".geojson", ".json", ".gpkg", ".gpx", ".fgb", ".zip", ".tif", ".tiff")
#: file extensions read as a manifest when given as SOURCE (.json only when it lists layers)
MANIFEST_SUFFIXES = (".yaml", ".yml", ".csv", ".json")
#: manifest entry keys besides ``path``
MANIFEST_OPTIONS = ("layer", "crs", "accuracy", "id_field", "accuracy_field")
#: changes whenever the meaning of a key or the layout of the output folder changes
KEY_SCHEME = "rutwise-batch-1"


@dataclass(frozen=True)
class BatchInput:
    """One layer to analyse: where it is, how it is named in outputs, and its options.

    ``source`` is the input's path relative to the folder or manifest (``#layer`` appended
    when a layer is named); it fills the merged layers' ``source`` field. ``name`` is the stem
    of its result file under ``layers/``, derived from ``source``.
    """

    path: Path
    source: str
    options: AnalyzeOptions
    name: str = ""


def _slug(source: str) -> str:
    """A file stem from a source label, stable and readable.

    Examples
    --------
    >>> _slug("block 7/north.geojson#ruts")
    'block_7__north.geojson--ruts'
    """
    text = source.replace("/", "__").replace("#", "--")
    return re.sub(r"[^A-Za-z0-9._-]", "_", text).lstrip(".") or "layer"


def _name_inputs(items: list[BatchInput]) -> list[BatchInput]:
    """Give every input a unique result name: its slug, plus a short hash of its source when
    two sources would share one (case-insensitive, for file systems that fold case)."""
    slugs = [_slug(it.source) for it in items]
    seen: dict[str, int] = {}
    for s in slugs:
        seen[s.lower()] = seen.get(s.lower(), 0) + 1
    out = []
    for it, s in zip(items, slugs, strict=True):
        if seen[s.lower()] > 1:
            s = f"{s}-{hashlib.sha1(it.source.encode()).hexdigest()[:8]}"
        out.append(replace(it, name=s))
    return out


def _merge_options(defaults: AnalyzeOptions, entry: dict[str, Any], where: str) -> AnalyzeOptions:
    unknown = sorted(set(entry) - set(MANIFEST_OPTIONS) - {"path"})
    if unknown:
        raise BadInput(
            f"{where}: unknown manifest keys {', '.join(unknown)}.",
            f"Use path and any of: {', '.join(MANIFEST_OPTIONS)}.",
        )
    values = {k: v for k, v in asdict(defaults).items()}
    for key in MANIFEST_OPTIONS:
        value = entry.get(key)
        if value is None or (isinstance(value, str) and value.strip() == ""):
            continue
        if key == "accuracy":
            try:
                value = float(value)
            except (TypeError, ValueError):
                raise BadInput(
                    f"{where}: accuracy {value!r} is not a number.",
                    "Give the horizontal accuracy in metres, e.g. 0.02.",
                ) from None
        else:
            value = str(value).strip()
        values[key] = value
    return AnalyzeOptions(**values)


def _manifest_entries(path: Path) -> list[dict[str, Any]] | None:
    """Entries of a manifest file, or None when ``path`` is a .json layer, not a manifest."""
    suffix = path.suffix.lower()
    try:
        if suffix == ".csv":
            with open(path, newline="", encoding="utf-8-sig") as fh:
                rows = list(csv.DictReader(fh))
            if rows and "path" not in rows[0]:
                raise BadInput(
                    f"The manifest {str(path)!r} has no 'path' column.",
                    "Put a header row first: path,layer,crs,accuracy,id_field.",
                )
            return [{k.strip(): v for k, v in row.items() if k} for row in rows]
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise BadInput(
            f"Cannot read the manifest {str(path)!r} ({exc}).", "Check the path and the file."
        ) from None
    if suffix == ".json":
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise BadInput(
                f"{str(path)!r} is not valid JSON ({exc}).", "Give a manifest or a layer file."
            ) from None
        if isinstance(doc, dict) and "layers" not in doc:
            return None  # a GeoJSON layer
    else:
        import yaml

        try:
            doc = yaml.safe_load(text)
        except yaml.YAMLError as exc:
            raise BadInput(
                f"{str(path)!r} is not valid YAML ({exc}).", "Fix the manifest's syntax."
            ) from None
    if isinstance(doc, dict):
        doc = doc.get("layers")
    if not isinstance(doc, list):
        raise BadInput(
            f"The manifest {str(path)!r} lists no layers.",
            "Give a list of entries (or a mapping with a 'layers' list), each a path or a "
            "mapping with a 'path'.",
        )
    entries = []
    for n, item in enumerate(doc, start=1):
        entry = {"path": item} if isinstance(item, str) else item
        if not isinstance(entry, dict) or not entry.get("path"):
            raise BadInput(
                f"Entry {n} of the manifest {str(path)!r} has no path.", "Give each entry a 'path'."
            )
        entries.append(entry)
    return entries


def find_inputs(
    source: str | os.PathLike[str],
    patterns: Sequence[str] = (),
    defaults: AnalyzeOptions | None = None,
    exclude: str | os.PathLike[str] | None = None,
) -> list[BatchInput]:
    """The layers a batch over ``source`` analyses, in a stable order.

    Parameters
    ----------
    source
        A folder (searched recursively for the ``LAYER_SUFFIXES``, hidden entries skipped,
        sorted by relative path), a manifest (``.yaml``/``.yml``/``.csv``, or ``.json`` holding
        a list or a ``layers`` list; relative paths are relative to the manifest; order kept),
        or one layer file.
    patterns
        Shell patterns; a folder's file is kept when its relative path or its name matches
        one (all files when empty).
    defaults
        Options for every input; manifest entries override them per layer.
    exclude
        A folder never searched (the batch's own output folder).
    """
    defaults = defaults or AnalyzeOptions()
    root = Path(source)
    if not root.exists():
        raise BadInput(f"No file or folder at {str(root)!r}.", "Check the path and try again.")
    items: list[BatchInput] = []
    if root.is_dir():
        skip = Path(exclude).resolve() if exclude is not None else None
        for dirpath, dirnames, filenames in os.walk(root):
            here = Path(dirpath)
            dirnames[:] = sorted(
                d
                for d in dirnames
                if not d.startswith(".") and (skip is None or (here / d).resolve() != skip)
            )
            for fname in filenames:
                if fname.startswith(".") or Path(fname).suffix.lower() not in LAYER_SUFFIXES:
                    continue
                rel = (here / fname).relative_to(root).as_posix()
                if patterns and not any(
                    fnmatch.fnmatch(rel, p) or fnmatch.fnmatch(fname, p) for p in patterns
                ):
                    continue
                items.append(BatchInput((here / fname).resolve(), rel, defaults))
        items.sort(key=lambda it: it.source)
    else:
        entries = _manifest_entries(root) if root.suffix.lower() in MANIFEST_SUFFIXES else None
        if entries is None:
            items.append(BatchInput(root.resolve(), root.name, defaults))
        else:
            for n, entry in enumerate(entries, start=1):
                where = f"Entry {n} of {root.name}"
                options = _merge_options(defaults, entry, where)
                rel = str(entry["path"]).strip()
                path = Path(rel) if Path(rel).is_absolute() else root.parent / rel
                label = Path(rel).as_posix() + (f"#{options.layer}" if entry.get("layer") else "")
                items.append(BatchInput(path.resolve(), label, options))
    seen: set[str] = set()
    for it in items:
        if it.source in seen:
            raise BadInput(
                f"{it.source!r} is listed twice in {str(root)!r}.",
                "List each layer once (name the layer in each entry of a file with several).",
            )
        seen.add(it.source)
    if not items:
        raise BadInput(
            f"No layers found in {str(root)!r}.",
            f"Put files ending in {', '.join(LAYER_SUFFIXES)} there, or check --pattern.",
        )
    return _name_inputs(items)


def content_hash(path: str | os.PathLike[str]) -> str:
    """sha256 of a file's bytes (hex)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


@functools.cache
def engine_fingerprint() -> str:
    """sha256 over the source of every ``geoops`` module that shapes a result (all but the
    command line and the batch's own bookkeeping), so that a changed engine is never mistaken
    for the one that made a result, even while the version number stays the same."""
    digest = hashlib.sha256()
    for module in sorted(Path(__file__).parent.glob("*.py")):
        if module.name.startswith("cli") or module.name in _BOOKKEEPING:
            continue
        digest.update(module.name.encode() + b"\0" + module.read_bytes() + b"\0")
    return digest.hexdigest()


#: batch modules that do not change what a result holds (batch_units.py does: it is hashed)
_BOOKKEEPING = {
    "batch.py",
    "batch_cli.py",
    "batch_defaults.py",
    "batch_inputs.py",
    "batch_report.py",
}


def input_key(path: str | os.PathLike[str], options: AnalyzeOptions, unit_ruts: int | None) -> str:
    """The key of one input's result: its content, its options, the tool version, the
    engine's source and the work-unit size. Raises OSError when the file cannot be read."""
    doc = {
        "scheme": KEY_SCHEME,
        "content_sha256": content_hash(path),
        "options": asdict(options),
        "version": __version__,
        "engine_sha256": engine_fingerprint(),
        "unit_ruts": unit_ruts,
    }
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()
