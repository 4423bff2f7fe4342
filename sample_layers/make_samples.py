"""Build the invented demo scenario in sample_layers/ from the project's own simulator.

Scenario (invented; see sample_layers/README.md): Harrowmere Heath, a moorland reserve in
the Southern Uplands. Ranger Ilse Brannock walks fresh wheel ruts near the north gate with an
RTK rover; analyst Tomas Everleigh digitises ruts from drone imagery of the burn crossing in the
national grid; survey pilot Mairi Castlebeck traces the rut map of the busy track junction by
the old fold from a drone survey. The coordinates are real moorland; the people, the reserve
and every rut are invented. Run: ``python sample_layers/make_samples.py`` (or ``make samples``).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyproj
import shapely
from pyogrio.raw import write

from geoops.kinematics import simulate_steering
from geoops.scenarios import ATV, BICYCLE, CAR, mapped_lines, random_smooth, s_curve, slalom

HERE = Path(__file__).resolve().parent
SEED = 20261202
#: north gate of the invented reserve (real moorland, lon/lat WGS 84)
GATE_LON, GATE_LAT = -3.0450, 55.4175
#: burn crossing, 1.2 km to the south-east
BURN_LON, BURN_LAT = -3.0300, 55.4090
#: the heath's track junction by the old fold, surveyed by drone (2 km south-west of the gate)
FOLD_LON, FOLD_LAT = -3.0700, 55.4030


def _local_to(lon0: float, lat0: float, crs: str) -> pyproj.Transformer:
    local = pyproj.CRS.from_proj4(f"+proj=aeqd +lat_0={lat0} +lon_0={lon0} +datum=WGS84 +units=m")
    return pyproj.Transformer.from_crs(local, crs, always_xy=True)


def _rotate(xy: np.ndarray, deg: float, shift: tuple[float, float]) -> np.ndarray:
    a = np.radians(deg)
    rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    return xy @ rot.T + np.asarray(shift)


def ranger_walk(rng: np.random.Generator) -> dict:
    """GeoJSON (RFC 7946 lon/lat): a bicycle pass and a car pass, walked with an RTK rover."""
    to_ll = _local_to(GATE_LON, GATE_LAT, "EPSG:4326")
    features = []
    step = 0.02
    bike = simulate_steering(BICYCLE, slalom(55.0, step, 14.0, 16.0), step)
    car = simulate_steering(CAR, s_curve(70.0, step, 16.0, 14.0, ramp_m=5.0), step)
    plans = [
        (bike, ("rear", "front"), 35.0, (-20.0, 5.0), "bicycle ruts by the north gate"),
        (car, ("rear_left", "front_left"), -60.0, (10.0, 40.0), "left-hand ruts of a car"),
    ]
    fid = 101
    for sim, wheels, turn, shift, note in plans:
        lines = mapped_lines(sim, 0.02, (0.3, 0.7), rng, which=list(wheels))
        for wheel in wheels:
            xy = _rotate(lines[wheel], turn, shift)
            lon, lat = to_ll.transform(xy[:, 0], xy[:, 1])
            features.append(
                {
                    "type": "Feature",
                    "id": fid,
                    "properties": {
                        "surveyor": "I. Brannock",
                        "accuracy_m": 0.02,
                        "note": note,
                        "walked": "2026-10-14",
                    },
                    "geometry": {
                        "type": "LineString",
                        "coordinates": np.column_stack([lon, lat]).round(8).tolist(),
                    },
                }
            )
            fid += 1
    return {"type": "FeatureCollection", "name": "harrowmere_ranger_walk", "features": features}


def analyst_layers(rng: np.random.Generator) -> dict[str, tuple[list, dict]]:
    """GeoPackage layers in the British National Grid: digitised ruts and fence lines."""
    to_bng = _local_to(BURN_LON, BURN_LAT, "EPSG:27700")
    step = 0.02
    quad = simulate_steering(ATV, random_smooth(80.0, step, rng, 22.0, 4.0), step)
    wheels = ["rear_left", "front_left", "rear_right", "front_right"]
    lines = mapped_lines(quad, 0.03, (0.4, 1.0), rng, which=wheels)
    ruts = [_rotate(lines[w], 110.0, (0.0, 0.0)) for w in wheels]
    # a sheep path crossing the scene: a lone single line, not a vehicle rut
    t = np.linspace(0, 1, 60)
    path = np.column_stack([-30 + 70 * t, -25 + 50 * t + 1.5 * np.sin(9 * t)])
    path += rng.normal(0, 0.05, path.shape)
    ruts.append(path)
    ids = ["HH-0931", "HH-0932", "HH-0933", "HH-0934", "HH-0940"]
    kinds = ["rut", "rut", "rut", "rut", "animal path"]
    geoms, fence = [], []
    for xy in ruts:
        x, y = to_bng.transform(xy[:, 0], xy[:, 1])
        geoms.append(shapely.LineString(np.column_stack([x, y]).round(3)))
    fx, fy = to_bng.transform(np.array([-50.0, 60.0]), np.array([35.0, 38.0]))
    fence.append(shapely.LineString(np.column_stack([fx, fy])))
    return {
        "ruts_digitised": (
            geoms,
            {
                "rut_ref": np.array(ids, dtype=object),
                "kind": np.array(kinds, dtype=object),
                "digitiser": np.array(["T. Everleigh"] * len(ids), dtype=object),
            },
        ),
        "fence_lines": (fence, {"name": np.array(["burn fence"], dtype=object)}),
    }


def drone_block() -> tuple[list, dict]:
    """A rut map of the track junction by the old fold, traced from a drone survey in the
    British National Grid: trails used by several vehicles, a crossing trail, and lines that
    are no vehicle's (a fence, sheep paths, a drain, a lone track). From geoops.trails."""
    from geoops.trails import make_scene

    to_bng = _local_to(FOLD_LON, FOLD_LAT, "EPSG:27700")
    scene = make_scene(SEED, 14, cell_m=130.0, origin=(-250.0, -250.0), distractors_per_trail=0.5)
    geoms = []
    for line in scene.lines:
        x, y = to_bng.transform(line.xy[:, 0], line.xy[:, 1])
        geoms.append(shapely.LineString(np.column_stack([x, y]).round(3)))
    refs = np.array([f"FB-{k + 1:03d}" for k in range(len(geoms))], dtype=object)
    return geoms, {
        "trace_ref": refs,
        "traced_by": np.array(["M. Castlebeck"] * len(geoms), dtype=object),
    }


def main() -> None:
    rng = np.random.default_rng(SEED)
    walk = ranger_walk(rng)
    (HERE / "harrowmere_ranger_walk.geojson").write_text(json.dumps(walk, indent=1) + "\n")
    gpkg = HERE / "harrowmere_analyst.gpkg"
    gpkg.unlink(missing_ok=True)
    for name, (geoms, fields) in analyst_layers(rng).items():
        write(
            str(gpkg),
            shapely.to_wkb(np.array(geoms, dtype=object)),
            list(fields.values()),
            list(fields),
            layer=name,
            driver="GPKG",
            crs="EPSG:27700",
            geometry_type="LineString",
        )
    block = HERE / "harrowmere_drone_block.gpkg"
    block.unlink(missing_ok=True)
    geoms, fields = drone_block()
    write(
        str(block),
        shapely.to_wkb(np.array(geoms, dtype=object)),
        list(fields.values()),
        list(fields),
        layer="rut_map",
        driver="GPKG",
        crs="EPSG:27700",
        geometry_type="LineString",
    )
    print(f"wrote {HERE / 'harrowmere_ranger_walk.geojson'}, {gpkg} and {block}")


if __name__ == "__main__":
    main()
