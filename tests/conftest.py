"""Shared builders for the I/O, CLI and pipeline tests: simulated two-track layers on Earth.

A seeded pass of the kinematic bicycle model (:mod:`geoops.kinematics`) is mapped as two lines
(:func:`geoops.scenarios.mapped_lines`) in a local azimuthal equidistant frame, then placed on
Earth with pyproj in whatever CRS a test needs and written in the format it needs. Simulated
data only feeds simulation-based checks; reference checks name their own sources.
"""

from __future__ import annotations

import json
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pyproj
import shapely
from pyogrio.raw import write as raw_write

from geoops.kinematics import simulate_steering
from geoops.scenarios import BICYCLE, CAR, mapped_lines, slalom

SIM_STEP = 0.02  # m of rear travel per simulation step, well below the vertex spacing
SPACING = (0.3, 0.6)  # m between mapped vertices, irregular
NOISE = 0.02  # m per axis

#: where the layers are placed, per CRS (inside each CRS's area of use), lon/lat degrees
PLACES: dict[str, tuple[float, float]] = {
    "EPSG:4326": (-3.045, 55.4175),  # Southern Uplands moorland
    "EPSG:27700": (-3.030, 55.409),  # the same moorland, British National Grid
    "EPSG:2227": (-122.05, 37.45),  # inside California zone 3 (US survey feet)
    "EPSG:32633": (15.0, 45.0),  # UTM zone 33N
}


@dataclass(frozen=True)
class TwoTracks:
    """A simulated single-front/rear pair in the local metric frame, with its truth.

    ``lines`` maps ``"rear"``/``"front"`` to mapped (n, 2) lines (vertex order randomised);
    ``rear_path``/``front_path`` are the simulated paths in travel order.
    """

    wheelbase: float
    lines: dict[str, np.ndarray]
    rear_path: np.ndarray
    front_path: np.ndarray


@cache
def two_tracks(vehicle: str = "bicycle", seed: int = 7) -> TwoTracks:
    """A seeded slalom pass of a bicycle (or a car's left-hand tracks) mapped as two lines."""
    veh = BICYCLE if vehicle == "bicycle" else CAR
    sim = simulate_steering(veh, slalom(40.0, SIM_STEP, 14.0, 16.0), SIM_STEP)
    keys = ("rear", "front") if veh.is_single_track else ("rear_left", "front_left")
    lines = mapped_lines(sim, NOISE, SPACING, np.random.default_rng(seed), which=list(keys))
    wheels = sim.wheels()
    return TwoTracks(
        wheelbase=veh.wheelbase,
        lines={"rear": lines[keys[0]], "front": lines[keys[1]]},
        rear_path=wheels[keys[0]],
        front_path=wheels[keys[1]],
    )


def local_crs(crs: str) -> pyproj.CRS:
    """The local azimuthal equidistant frame the simulated lines live in, for ``crs``."""
    lon0, lat0 = PLACES.get(crs, PLACES["EPSG:4326"])
    return pyproj.CRS.from_proj4(f"+proj=aeqd +lat_0={lat0} +lon_0={lon0} +datum=WGS84 +units=m")


def place(xy: np.ndarray, crs: str) -> np.ndarray:
    """Local metric (n, 2) coordinates to ``crs`` (x/y or lon/lat order)."""
    tr = pyproj.Transformer.from_crs(local_crs(crs), crs, always_xy=True)
    x, y = tr.transform(xy[:, 0], xy[:, 1])
    return np.column_stack([x, y])


def unplace(xy: np.ndarray, crs: str) -> np.ndarray:
    """Coordinates in ``crs`` back to the local metric frame of :func:`place`."""
    tr = pyproj.Transformer.from_crs(crs, local_crs(crs), always_xy=True)
    x, y = tr.transform(xy[:, 0], xy[:, 1])
    return np.column_stack([x, y])


def write_geojson(
    path: Path,
    geometries: Sequence[dict[str, Any]],
    ids: Sequence[Any] | None = None,
    properties: Sequence[dict[str, Any]] | None = None,
    crs_member: str | None = None,
) -> Path:
    """Write a GeoJSON FeatureCollection by hand (``ids=None``: features carry no ``id``)."""
    features = []
    for k, geom in enumerate(geometries):
        feat: dict[str, Any] = {
            "type": "Feature",
            "properties": dict(properties[k]) if properties else {"note": f"line {k}"},
            "geometry": geom,
        }
        if ids is not None:
            feat["id"] = ids[k]
        features.append(feat)
    doc: dict[str, Any] = {"type": "FeatureCollection", "features": features}
    if crs_member is not None:
        doc["crs"] = {"type": "name", "properties": {"name": crs_member}}
    path.write_text(json.dumps(doc))
    return path


def line_geojson(xy: np.ndarray) -> dict[str, Any]:
    return {"type": "LineString", "coordinates": np.asarray(xy).tolist()}


def write_ogr(
    path: Path,
    geometries: Sequence[shapely.Geometry],
    driver: str,
    crs: str | None,
    layer: str | None = None,
    fields: dict[str, np.ndarray] | None = None,
    geometry_type: str = "LineString",
    append: bool = False,
) -> Path:
    """Write shapely geometries as one layer with pyogrio (any OGR driver)."""
    fields = fields or {"note": np.array([f"line {k}" for k in range(len(geometries))], object)}
    with warnings.catch_warnings():
        # writing a layer without a CRS is the point of some tests
        warnings.filterwarnings("ignore", "'crs' was not provided", UserWarning)
        raw_write(
            str(path),
            shapely.to_wkb(np.array(list(geometries), dtype=object)),
            list(fields.values()),
            list(fields),
            layer=layer,
            driver=driver,
            crs=crs,
            geometry_type=geometry_type,
            append=append,
        )
    return path


def two_track_file(
    tmp_path: Path,
    crs: str = "EPSG:4326",
    fmt: str = "geojson",
    ids: Sequence[Any] | None = None,
    vehicle: str = "bicycle",
    extra: Sequence[np.ndarray] = (),
    name: str = "tracks",
    write_crs: bool = True,
    layer: str = "ruts",
) -> Path:
    """Write the simulated rear and front lines (then any ``extra`` local lines) to a file.

    ``fmt`` is ``geojson`` (hand-written; ``ids`` become feature ids, a non-4326 ``crs`` is
    written as a legacy ``crs`` member), ``gpkg`` (layer ``layer``; ``ids`` become the fids) or
    ``fgb``. ``write_crs=False`` leaves the CRS out of the file.
    """
    case = two_tracks(vehicle)
    local = [case.lines["rear"], case.lines["front"], *extra]
    placed = [place(xy, crs) for xy in local]
    if fmt == "geojson":
        path = tmp_path / f"{name}.geojson"
        member = (
            None if crs == "EPSG:4326" or not write_crs else f"urn:ogc:def:crs:{crs[:4]}::{crs[5:]}"
        )
        return write_geojson(path, [line_geojson(xy) for xy in placed], ids, crs_member=member)
    suffix, driver = {"gpkg": (".gpkg", "GPKG"), "fgb": (".fgb", "FlatGeobuf")}[fmt]
    path = tmp_path / f"{name}{suffix}"
    geoms = [shapely.LineString(xy) for xy in placed]
    fields: dict[str, np.ndarray] = {
        "ref": np.array([f"R-{k}" for k in range(len(geoms))], dtype=object)
    }
    if ids is not None and fmt == "gpkg":
        # a GeoPackage keeps a written fid column as the feature id
        fields = {"fid": np.array(ids, dtype=np.int64), **fields}
    return write_ogr(path, geoms, driver, crs if write_crs else None, layer=layer, fields=fields)


def follows(line: np.ndarray, path: np.ndarray) -> bool:
    """Whether a line's vertex order follows a path's travel order (start nearer its start)."""
    return bool(np.hypot(*(line[0] - path[0])) < np.hypot(*(line[-1] - path[0])))
