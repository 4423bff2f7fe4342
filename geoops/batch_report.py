"""Merging the results of a batch into one GeoPackage, and the run report as markdown.

:func:`merge_results` reads finished result files back (never results held in memory, so a
resumed run merges exactly what a clean run would) and writes their ``passes`` and ``ruts``
with a ``source`` field, in input order, in one CRS. :func:`report_markdown` renders the JSON
report that :func:`geoops.batch.run_batch` builds. No analysis happens here.
"""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path
from typing import Any

import numpy as np
import pyproj
import shapely
from pyogrio.raw import read as raw_read

from . import __version__
from .io import OutputLayer, write_geopackage
from .pipeline import CAUTION, PASS_FIELDS, RUT_FIELDS


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()


def _read_output_layer(
    path: Path, name: str, types: dict[str, str]
) -> tuple[np.ndarray, dict[str, list[Any]], str | None]:
    meta, _, wkb, data = raw_read(str(path), layer=name)
    present = dict(zip([str(f) for f in meta["fields"]], data, strict=True))
    fields: dict[str, list[Any]] = {}
    for fname in types:
        values = present.get(fname)
        fields[fname] = (
            [None] * len(wkb)
            if values is None
            else [
                None if (v is None or (isinstance(v, float) and np.isnan(v))) else v
                for v in values.tolist()
            ]
        )
    return shapely.from_wkb(wkb), fields, meta.get("crs")


def merge_results(
    results: list[tuple[str, Path]], target: Path, crs: str | None = None
) -> tuple[Path | None, dict[str, dict[str, Any]], str | None]:
    """Write the passes and ruts of several result files into one GeoPackage with a
    ``source`` field, in the given order; features keep their ids within their source.

    Returns the merged file (None when there is nothing to merge), per source its counts
    (passes by verdict, unpaired ruts, rut length) and the merged CRS as text.
    """
    if not results:
        return None, {}, None
    read: list[tuple[str, dict[str, tuple[np.ndarray, dict[str, list[Any]]]], pyproj.CRS]] = []
    for source, path in results:
        layers = {}
        crs_in: pyproj.CRS | None = None
        for name, types in (("passes", PASS_FIELDS), ("ruts", RUT_FIELDS)):
            geoms, fields, crs_text = _read_output_layer(path, name, types)
            layers[name] = (geoms, fields)
            if crs_text:
                crs_in = pyproj.CRS.from_user_input(crs_text)
        read.append((source, layers, crs_in or pyproj.CRS.from_epsg(4326)))
    if crs is not None:
        target_crs = pyproj.CRS.from_user_input(crs)
    elif all(c == read[0][2] for _, _, c in read):
        target_crs = read[0][2]
    else:
        target_crs = pyproj.CRS.from_epsg(4326)
    transformers: dict[str, pyproj.Transformer] = {}
    out_layers = []
    per_layer: dict[str, dict[str, Any]] = {}
    for name, types in (("passes", PASS_FIELDS), ("ruts", RUT_FIELDS)):
        all_geoms: list[np.ndarray] = []
        merged: dict[str, list[Any]] = {"source": [], **{f: [] for f in types}}
        for source, layers, crs_in in read:
            geoms, fields = layers[name]
            if crs_in != target_crs:
                wkt = crs_in.to_wkt()
                if wkt not in transformers:
                    transformers[wkt] = pyproj.Transformer.from_crs(
                        crs_in, target_crs, always_xy=True
                    )
                tr = transformers[wkt]
                geoms = shapely.transform(
                    geoms, lambda xy, tr=tr: np.column_stack(tr.transform(xy[:, 0], xy[:, 1]))
                )
            all_geoms.append(geoms)
            merged["source"].extend([source] * len(geoms))
            for f in types:
                merged[f].extend(fields[f])
            stats = per_layer.setdefault(source, {})
            if name == "passes":
                verdicts: dict[str, int] = {}
                for v in fields["verdict"]:
                    verdicts[str(v)] = verdicts.get(str(v), 0) + 1
                stats["passes"] = len(geoms)
                stats["passes_by_verdict"] = dict(sorted(verdicts.items()))
                stats["undecided_passes"] = len(geoms) - verdicts.get("decided", 0)
            else:
                stats["ruts"] = len(geoms)
                stats["unpaired_ruts"] = sum(1 for p in fields["pass_id"] if p is None)
                stats["rut_length_m"] = round(float(sum(v or 0.0 for v in fields["length_m"])), 3)
        geometries = np.concatenate(all_geoms) if all_geoms else np.empty(0, dtype=object)
        out_layers.append(
            OutputLayer(
                name,
                geometries,
                merged,
                {"source": "text", **types},
                f"rutwise merged {name} of a batch; 'source' names the input layer. " + CAUTION,
            )
        )
    metadata = {
        "tool": "rutwise",
        "version": __version__,
        "created_utc": _now(),
        "kind": "batch merge",
        "sources": json.dumps([s for s, _ in results]),
        "output_crs": target_crs.to_string(),
        "caution": CAUTION,
    }
    write_geopackage(target, out_layers, target_crs.to_wkt(), metadata)
    return target, per_layer, target_crs.to_string()


def report_markdown(report: dict[str, Any]) -> str:
    """The run report as markdown."""
    t = report["timings_s"]
    lines = [
        f"# rutwise batch report ({report['finished_utc']})",
        "",
        f"- source: `{report['source']}`; output: `{report['output']}`",
        f"- ran on {report['cluster']}",
        f"- inputs: {report['inputs']}; analysed now: {report['finished']}; "
        f"skipped (already finished): {report['skipped']}; failed: {report['failed']}",
        f"- passes: {report['passes']} ("
        + (", ".join(f"{k} {v}" for k, v in report["passes_by_verdict"].items()) or "none")
        + f"); not decided: {report['undecided_passes']}; unpaired ruts: "
        f"{report['unpaired_ruts']}; rut length {report['rut_length_km']:.3f} km",
        f"- merged: `{report['merged']}` ({report['merged_crs']})"
        if report["merged"]
        else "- merged: nothing finished to merge",
        f"- timings (s): keys {t['keys']}, cluster start {t['cluster_start']}, analysis "
        f"{t['analysis_wall']} wall / "
        f"{t['analysis_worker_total']} worker, merge {t['merge']}, total {t['total']}",
        "",
    ]
    if report["failures"]:
        lines += ["## Failures", "", "| source | kind | reason | what to do |", "|---|---|---|---|"]
        lines += [
            f"| {f['source']} | {f['kind']} | {_cell(f['reason'])} | {_cell(f['hint'])} |"
            for f in report["failures"]
        ]
        lines.append("")
    lines += [
        "## Layers",
        "",
        "| source | status | passes | decided | not decided | unpaired ruts | seconds |",
        "|---|---|---:|---:|---:|---:|---:|",
    ]
    for r in report["layers"]:
        decided = r.get("passes_by_verdict", {}).get("decided", 0)
        lines.append(
            f"| {r['source']} | {r['status']} | {r.get('passes', '-')} | "
            f"{decided if r['status'] != 'failed' else '-'} | {r.get('undecided_passes', '-')} | "
            f"{r.get('unpaired_ruts', '-')} | {r['seconds']:.2f} |"
        )
    lines += ["", f"> {report['caution']}", ""]
    return "\n".join(lines)


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")
