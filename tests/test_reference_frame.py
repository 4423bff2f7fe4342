"""Reference checks of geoops.frame against geographiclib geodesics and pyproj/EPSG definitions.

The main promise of the local frame: a line's length measured in it is within 1 mm per km of
its geodesic length on the ellipsoid, for layers up to 20 km across, anywhere from the equator
to 70 degrees of latitude, in both hemispheres and across the antimeridian, whatever units the
layer's CRS uses. The layers here are seeded random polylines (50-500 m segments, so chord and
geodesic agree to far below a micrometre) plus lines that cross the whole box, run along its
edges, or sit at its corners square to the radius (the worst case: the projection's scale
error is largest across the radius, far from the centre: about rho**2 / (6 R**2)).
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
import pyproj
import pytest
from geographiclib.geodesic import Geodesic

from geoops.frame import build_frame

HALF_BOX_M = 10_000.0  # the layers span 20 km by 20 km
MM_PER_KM = 1e-6

Line = tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]


def polylines(rng: np.random.Generator, lon0: float, lat0: float, walks: int = 3) -> list[Line]:
    """Lon/lat polylines filling a 20 km box centred on (lon0, lat0); lon may leave [-180, 180].

    Positions come from a rough metres-to-degrees scale; they are just points on the ellipsoid,
    the reference lengths are computed from them exactly.
    """
    m_per_deg_lat = 111_132.0
    m_per_deg_lon = 111_320.0 * math.cos(math.radians(lat0))
    lines: list[npt.NDArray[np.float64]] = []
    for _ in range(walks):
        n = int(rng.integers(20, 50))
        steps = rng.uniform(50.0, 500.0, n)
        heading = rng.uniform(0.0, 2 * math.pi) + np.cumsum(rng.normal(0.0, 0.4, n))
        start = rng.uniform(-0.8 * HALF_BOX_M, 0.8 * HALF_BOX_M, 2)
        xy = start + np.cumsum(np.c_[steps * np.cos(heading), steps * np.sin(heading)], axis=0)
        lines.append(np.clip(np.vstack([start, xy]), -HALF_BOX_M, HALF_BOX_M))
    t = np.linspace(-HALF_BOX_M, HALF_BOX_M, 41)  # 500 m segments
    edge = np.full_like(t, HALF_BOX_M)
    lines += [
        np.c_[t, t],  # diagonals, crossing the whole box
        np.c_[t, -t],
        np.c_[t, edge],  # the four edges
        np.c_[t, -edge],
        np.c_[edge, t],
        np.c_[-edge, t],
    ]
    # short segments at the corners, square to the line from the centre: the worst case
    for sx, sy in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
        corner = np.array([sx, sy]) * HALF_BOX_M
        tangent = np.array([-sy, sx]) / math.sqrt(2.0)
        lines.append(np.vstack([corner - 250.0 * tangent, corner + 250.0 * tangent]))
    return [(lon0 + xy[:, 0] / m_per_deg_lon, lat0 + xy[:, 1] / m_per_deg_lat) for xy in lines]


def geodesic_length(
    geod: Geodesic, lon: npt.NDArray[np.float64], lat: npt.NDArray[np.float64]
) -> float:
    return sum(
        geod.Inverse(lat[i], lon[i], lat[i + 1], lon[i + 1], Geodesic.DISTANCE)["s12"]
        for i in range(len(lon) - 1)
    )


def geodesic_for(crs: pyproj.CRS) -> Geodesic:
    ellipsoid = crs.ellipsoid
    assert ellipsoid is not None
    return Geodesic(ellipsoid.semi_major_metre, 1.0 / ellipsoid.inverse_flattening)


def worst_relative_error(
    lines_src: list[Line], lines_lonlat: list[Line], crs: pyproj.CRS, geod: Geodesic
) -> float:
    x = np.concatenate([ln[0] for ln in lines_src])
    y = np.concatenate([ln[1] for ln in lines_src])
    frame, notes = build_frame(x, y, crs)
    assert notes == []
    worst = 0.0
    for (xs, ys), (lon, lat) in zip(lines_src, lines_lonlat, strict=True):
        lx, ly = frame.to_local(xs, ys)
        local = float(np.hypot(np.diff(lx), np.diff(ly)).sum())
        reference = geodesic_length(geod, lon, lat)
        worst = max(worst, abs(local - reference) / reference)
    return worst


# (centre lon, centre lat): both hemispheres, 0 to 70 degrees, boxes straddling the
# antimeridian (lon 180 and -180), and one in the 0..360 longitude convention (lon 360).
POSITIONS = [
    (180.0, -70.0),
    (31.0, -70.0),
    (101.5, -45.0),
    (-180.0, 0.0),
    (0.0, 0.0),
    (-75.2, 20.0),
    (7.3, 45.0),
    (180.0, 45.0),
    (-122.0, 37.5),
    (25.0, 60.0),
    (179.99, 60.0),
    (-180.0, 70.0),
    (25.0, 70.0),
    (360.0, 52.0),
]


@pytest.mark.parametrize(("lon0", "lat0"), POSITIONS)
def test_lengths_in_wgs84_layer_match_geodesics(lon0: float, lat0: float) -> None:
    rng = np.random.default_rng(abs(int(lon0 * 100 + lat0)))
    lines = polylines(rng, lon0, lat0)
    # wrap into [-180, 180) as a file would hold them, except the 0..360 case
    src = [(((lon + 180.0) % 360.0) - 180.0 if lon0 != 360.0 else lon, lat) for lon, lat in lines]
    worst = worst_relative_error(src, lines, pyproj.CRS("EPSG:4326"), Geodesic.WGS84)
    assert worst <= MM_PER_KM  # source: geographiclib 2.x geodesic inverse (Karney 2013)


@pytest.mark.parametrize(
    ("code", "lon0", "lat0", "metres_per_unit"),
    [
        # source: NIST, US survey foot = 1200/3937 m
        ("EPSG:2227", -121.9, 37.6, 1200.0 / 3937.0),
        # source: international yard and pound agreement 1959, foot = 0.3048 m
        ("EPSG:2222", -110.4, 34.2, 0.3048),
        ("EPSG:32733", 15.0, -20.0, 1.0),
    ],
)
def test_lengths_in_projected_layers_are_true_metres(
    code: str, lon0: float, lat0: float, metres_per_unit: float
) -> None:
    crs = pyproj.CRS(code)
    assert math.isclose(crs.axis_info[0].unit_conversion_factor, metres_per_unit, rel_tol=1e-12)
    base = crs.geodetic_crs
    assert base is not None
    # lon/lat on the CRS's own datum, so making the test layer involves no datum shift
    to_crs = pyproj.Transformer.from_crs(base, crs, always_xy=True)
    lines = polylines(np.random.default_rng(7), lon0, lat0)
    src: list[Line] = []
    for lon, lat in lines:
        x, y = to_crs.transform(lon, lat)
        src.append((np.asarray(x), np.asarray(y)))
    worst = worst_relative_error(src, lines, crs, geodesic_for(crs))
    assert worst <= MM_PER_KM  # source: geographiclib 2.x geodesic inverse (Karney 2013)


def test_lengths_in_grads_from_paris_layer() -> None:
    # NTF (Paris): latitude/longitude in grads, longitude counted from the Paris meridian.
    crs = pyproj.CRS("EPSG:4807")
    lines = polylines(np.random.default_rng(3), 2.0, 47.0)  # degrees east of Greenwich
    paris = 2.5969213 * 0.9  # source: EPSG:4807 prime meridian Paris, 2.5969213 grad
    src = [((lon - paris) / 0.9, lat / 0.9) for lon, lat in lines]
    worst = worst_relative_error(src, lines, crs, geodesic_for(crs))
    assert worst <= MM_PER_KM  # source: geographiclib 2.x geodesic inverse (Karney 2013)


def test_distance_and_azimuth_from_centre_are_geodesic() -> None:
    # An azimuthal equidistant projection keeps distance and azimuth from its centre true
    # (Snyder 1987, Map Projections: A Working Manual, USGS Professional Paper 1395).
    lon0, lat0 = 24.5, -33.2
    rng = np.random.default_rng(11)
    lon = lon0 + rng.uniform(-0.12, 0.12, 50)
    lat = lat0 + rng.uniform(-0.09, 0.09, 50)
    frame, _ = build_frame(
        np.r_[lon, lon0 - 0.12, lon0 + 0.12], np.r_[lat, lat0, lat0], pyproj.CRS("EPSG:4326")
    )
    x, y = frame.to_local(lon, lat)
    for i in range(lon.size):
        inv = Geodesic.WGS84.Inverse(frame.lat0, frame.lon0, lat[i], lon[i])
        dist, azi = math.hypot(x[i], y[i]), math.degrees(math.atan2(x[i], y[i]))
        assert (
            abs(dist - inv["s12"]) <= 1e-6
        )  # source: geographiclib 2.x geodesic inverse (Karney 2013)
        assert (
            abs(azi - inv["azi1"]) <= 1e-9
        )  # source: geographiclib 2.x geodesic inverse (Karney 2013)


def test_utm_zone_31_origin_through_the_frame() -> None:
    utm = pyproj.CRS("EPSG:32631")
    frame, _ = build_frame(np.array([499_000.0, 501_000.0]), np.array([0.0, 1000.0]), utm)
    lx, ly = frame.to_local([500_000.0], [0.0])
    lon, lat = frame.from_local(lx, ly, crs="EPSG:4326")
    assert abs(lon[0] - 3.0) <= 1e-9  # source: pyproj / EPSG UTM zone 31N definition
    assert abs(lat[0]) <= 1e-9  # source: pyproj / EPSG UTM zone 31N definition

    geo_frame, _ = build_frame(
        np.array([2.99, 3.01]), np.array([-0.01, 0.01]), pyproj.CRS("EPSG:4326")
    )
    assert (geo_frame.lon0, geo_frame.lat0) == (3.0, 0.0)
    e, n = geo_frame.from_local([0.0], [0.0], crs=utm)
    assert abs(e[0] - 500_000.0) <= 1e-6  # source: pyproj / EPSG UTM zone 31N definition
    assert abs(n[0]) <= 1e-6  # source: pyproj / EPSG UTM zone 31N definition
