"""Cutting one large layer into independent work units, and putting the pieces back together.

Two ruts can only end up in one pass when the pairing proposes them as a candidate pair
(:func:`geoops.pairing.candidate_pairs`, on cleaned ruts or on their legs), which needs them
within :data:`geoops.pairing.NEIGHBOUR_DISTANCE_M` of each other. :func:`components` joins
features whose raw lines come within that distance plus a margin, a graph that holds every
candidate pair, so its connected components can be analysed apart and give the same passes.
:func:`plan_units` groups whole components, in input order, into units of a bounded number of
ruts; :func:`analyze_unit` runs the ordinary pipeline on one unit's features;
:func:`assemble_units` renumbers the pieces (rut ids back to the input positions, pass ids in
the order a whole-layer run gives them) into one set of output layers.

Each unit gets its own local frame (centred on its own features), so vertices and lengths of a
layer that was cut may differ from an uncut run by far less than a millimetre; pairs, verdicts
and ids stay the same unless a value sits on a decision threshold to within that. This module
computes only; it reads no files and writes none.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np
import pyproj
import shapely
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from .chaining import MAX_GAP_M
from .frame import build_frame, resolve_crs
from .io import InputLayer, OutputLayer
from .pairing import NEIGHBOUR_DISTANCE_M
from .pipeline import AnalyzeOptions, analyze_layer, result_layers

#: features closer than this (metres, anywhere along their raw lines) share a work unit; the
#: margin over the pairing's reach covers smoothing and the cutting of ruts into legs, and the
#: reach covers the gaps bridged between pieces of one rut (geoops.chaining)
NEIGHBOUR_REACH_M = max(NEIGHBOUR_DISTANCE_M + 1.0, MAX_GAP_M + 0.5)
#: fields holding a pass id (renumbered on assembly) in the passes and ruts layers
PASS_ID_FIELDS = ("pass_id", "pass_group")


@dataclass(frozen=True)
class UnitPiece:
    """The analysis of one work unit, ready to be assembled (picklable, no pyproj objects).

    ``features`` are the unit's positions in the input layer (0-based, ascending); the
    layers' geometries are in the CRS named by ``crs_wkt`` (the input's).
    """

    features: tuple[int, ...]
    passes: OutputLayer
    ruts: OutputLayer
    crs_wkt: str
    metadata: dict[str, str]
    warnings: tuple[str, ...]


def subset_layer(layer: InputLayer, features: list[int], first: bool) -> InputLayer:
    """The features at ``features`` of ``layer``; the layer's skipped features and reading
    notes travel with the ``first`` unit only, so they are reported once."""
    keep = np.asarray(features, dtype=np.int64)
    return InputLayer(
        path=layer.path,
        layer=layer.layer,
        driver=layer.driver,
        crs=layer.crs,
        ids=[layer.ids[k] for k in features],
        parts=[layer.parts[k] for k in features],
        z=[layer.z[k] for k in features],
        fields={name: values[keep] for name, values in layer.fields.items()},
        skipped=list(layer.skipped) if first else [],
        warnings=list(layer.warnings) if first else [],
    )


def components(layer: InputLayer, options: AnalyzeOptions) -> list[list[int]]:
    """Feature positions grouped into connected components of the neighbour graph.

    Two features are neighbours when their lines, in the layer's local metric frame, come
    within :data:`NEIGHBOUR_REACH_M` of each other anywhere. That is a superset of the pairs the
    pairing can ever propose (:data:`geoops.pairing.NEIGHBOUR_DISTANCE_M`, on cleaned lines or
    their legs), so a pass never spans two components. Components come in the order of their
    first feature; features inside one ascend.
    """
    crs = resolve_crs(layer.crs, options.crs)
    xy_all = layer.all_xy()
    frame, _ = build_frame(xy_all[:, 0], xy_all[:, 1], crs)
    lines = []
    for parts in layer.parts:
        local = [np.column_stack(frame.to_local(p[:, 0], p[:, 1])) for p in parts]
        lines.append(
            shapely.GeometryCollection(
                [shapely.LineString(xy) if len(xy) > 1 else shapely.Point(xy[0]) for xy in local]
            )
        )
    geoms = np.array(lines, dtype=object)
    left, right = shapely.STRtree(geoms).query(
        geoms, predicate="dwithin", distance=NEIGHBOUR_REACH_M
    )
    n = len(layer)
    graph = coo_matrix((np.ones(len(left)), (left, right)), shape=(n, n))
    _, label = connected_components(graph, directed=False)
    groups: dict[int, list[int]] = {}
    for k, lab in enumerate(label.tolist()):
        groups.setdefault(lab, []).append(k)
    return sorted(groups.values(), key=lambda g: g[0])


def plan_units(groups: list[list[int]], max_ruts: int) -> list[list[int]]:
    """Pack components, in order, into units of at most ``max_ruts`` ruts (a larger component
    is a unit of its own; a component is never split).

    Examples
    --------
    >>> plan_units([[0, 3], [1], [2, 4, 5], [6]], 3)
    [[0, 1, 3], [2, 4, 5], [6]]
    """
    units: list[list[int]] = []
    current: list[int] = []
    for group in groups:
        if current and len(current) + len(group) > max_ruts:
            units.append(sorted(current))
            current = []
        current.extend(group)
    if current:
        units.append(sorted(current))
    return units


def analyze_unit(
    layer: InputLayer, features: list[int], options: AnalyzeOptions, first: bool
) -> UnitPiece:
    """Run the pipeline on one unit of ``layer``; geometries come back in the input CRS."""
    result = analyze_layer(subset_layer(layer, features, first), options)
    passes, ruts = result_layers(result, result.source_crs)
    return UnitPiece(
        features=tuple(features),
        passes=passes,
        ruts=ruts,
        crs_wkt=result.source_crs.to_wkt(),
        metadata=dict(result.metadata),
        warnings=tuple(result.warnings),
    )


def _remap_ids(text: str | None, features: tuple[int, ...]) -> str | None:
    """Comma-separated unit rut ids (1-based within the unit) to input rut ids."""
    if text is None or text == "":
        return text
    return ",".join(str(features[int(v) - 1] + 1) for v in text.split(","))


def assemble_units(
    pieces: list[UnitPiece], n_features: int
) -> tuple[list[OutputLayer], str, dict[str, str]]:
    """One ``passes`` and one ``ruts`` layer from unit pieces, numbered as a whole-layer run.

    Rut ids are input positions plus one. A whole-layer run lists passes group by group
    (``pass_group``: the legs of one manoeuvre; each pass is its own group when the field is
    absent), groups in the order of their smallest rut id; groups never span two units, so
    groups are sorted by that id and keep their passes' order inside. Passes are then numbered
    from 1 and every pass id field (:data:`PASS_ID_FIELDS`) is renumbered to match.

    Returns
    -------
    layers, crs_wkt, metadata
        The two layers, the input CRS as WKT, and the first unit's metadata with the counts
        and warnings of the whole layer.
    """
    if not pieces:
        raise ValueError("no unit pieces to assemble")
    pass_rows: list[tuple[int, int, int]] = []  # (smallest rut id of its group, piece, row)
    for p, piece in enumerate(pieces):
        fields = piece.passes.fields
        groups = fields.get("pass_group", fields["pass_id"])
        smallest: dict[int, int] = {}
        for text, group in zip(fields["rut_ids"], groups, strict=True):
            ids = [int(v) for v in (_remap_ids(str(text), piece.features) or "0").split(",")]
            smallest[int(group)] = min(smallest.get(int(group), ids[0]), *ids)
        for row, group in enumerate(groups):
            pass_rows.append((smallest[int(group)], p, row))
    pass_rows.sort()
    new_pass = {
        (p, int(pieces[p].passes.fields["pass_id"][row])): n
        for n, (_, p, row) in enumerate(pass_rows, start=1)
    }
    p_fields: dict[str, list[object]] = {name: [] for name in pieces[0].passes.types}
    p_geoms = []
    for _, p, row in pass_rows:
        piece = pieces[p]
        for name in p_fields:
            value = piece.passes.fields[name][row]
            if name in PASS_ID_FIELDS and value is not None:
                value = new_pass[(p, int(value))]
            elif name == "rut_ids":
                value = _remap_ids(value, piece.features)
            p_fields[name].append(value)
        p_geoms.append(piece.passes.geometries[row])
    rut_rows: list[tuple[int, int, int]] = []
    for p, piece in enumerate(pieces):
        for row, rid in enumerate(piece.ruts.fields["rut_id"]):
            rut_rows.append((piece.features[int(rid) - 1] + 1, p, row))
    rut_rows.sort()
    r_fields: dict[str, list[object]] = {name: [] for name in pieces[0].ruts.types}
    r_geoms = []
    for rid, p, row in rut_rows:
        piece = pieces[p]
        for name in r_fields:
            value = piece.ruts.fields[name][row]
            if name == "rut_id":
                value = rid
            elif name in PASS_ID_FIELDS and value is not None:
                value = new_pass[(p, int(value))]
            r_fields[name].append(value)
        r_geoms.append(piece.ruts.geometries[row])
    first = pieces[0]
    passes = OutputLayer(
        "passes",
        np.array(p_geoms, dtype=object),
        p_fields,
        dict(first.passes.types),
        first.passes.description,
    )
    ruts = OutputLayer(
        "ruts",
        np.array(r_geoms, dtype=object),
        r_fields,
        dict(first.ruts.types),
        first.ruts.description,
    )
    warnings = [w for piece in pieces for w in piece.warnings]
    metadata = dict(first.metadata)
    metadata.update(
        ruts_read=str(n_features),
        passes_found=str(len(pass_rows)),
        warnings=json.dumps(warnings),
        work_units=str(len(pieces)),
        noise_sigma_m=f"{first.metadata.get('noise_sigma_m', 'n/a')} (first of {len(pieces)} "
        "work units)",
        output_crs=pyproj.CRS.from_wkt(first.crs_wkt).to_string(),
    )
    return [passes, ruts], first.crs_wkt, metadata
