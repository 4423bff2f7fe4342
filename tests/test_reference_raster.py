"""Reference checks of geoops.raster: each assertion names its outside source.

The geotransform convention of GDAL rasters, CRS units from the EPSG definitions, geodesic
pixel sizes against geographiclib, and the depth classes of the published rutting guidelines.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio
import shapely
from affine import Affine
from geographiclib.geodesic import Geodesic

from geoops.raster import DEPTH_LIMITS_M, depth_classes, extract_ruts


def _mask_raster(path: Path, transform: Affine, crs: str, shape=(100, 200)) -> Path:
    """A straight rut, 5 pixels wide, centred on row 50, from column 20 to column 179."""
    mask = np.zeros(shape, dtype=np.uint8)
    mask[48:53, 20:180] = 1
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=shape[1],
        height=shape[0],
        count=1,
        dtype="uint8",
        crs=crs,
        transform=transform,
    ) as dst:
        dst.write(mask, 1)
    return path


def test_line_sits_on_pixel_centres_of_the_geotransform(tmp_path: Path) -> None:
    x0, y0, px = 500010.0, 5000020.0, 0.05
    path = _mask_raster(tmp_path / "m.tif", Affine(px, 0.0, x0, 0.0, -px, y0), "EPSG:32633")
    lines = extract_ruts(path)
    assert len(lines) == 1
    xy = shapely.get_coordinates(shapely.segmentize(lines.lines[0], px))
    inner = (xy[:, 0] > x0 + 30 * px) & (xy[:, 0] < x0 + 170 * px)
    # source: GDAL raster data model: Xgeo = GT0 + col*GT1 + row*GT2 and
    # Ygeo = GT3 + col*GT4 + row*GT5 at the pixel's top-left corner; the centre is col+0.5, row+0.5
    # (lines are simplified to a quarter pixel, well inside the half pixel the convention moves)
    assert np.all(np.abs(xy[inner, 1] - (y0 - 50.5 * px)) <= 0.25 * px)
    assert np.all(np.abs(xy[:, 1] - (y0 - 50.5 * px)) < 0.5 * px)  # the ends: within half a pixel
    assert xy[:, 0].min() >= x0 + 20.5 * px - 1e-6
    assert xy[:, 0].max() <= x0 + 179.5 * px + 1e-6
    assert lines.length_m[0] == pytest.approx(160 * px, abs=6 * px)
    # width: the mask's 5 pixels
    assert lines.width_m[0] == pytest.approx(5 * px, abs=0.5 * px)


def test_foot_based_crs_pixels_in_metres(tmp_path: Path) -> None:
    ft = 0.15  # US survey feet per pixel
    path = _mask_raster(
        tmp_path / "ft.tif", Affine(ft, 0.0, 6100000.0, 0.0, -ft, 2000000.0), "EPSG:2227"
    )
    lines = extract_ruts(path)
    # source: EPSG:2227 uses the US survey foot, EPSG:9003, 1200/3937 m
    assert lines.pixel_size_m == pytest.approx((ft * 1200 / 3937, ft * 1200 / 3937), rel=1e-9)
    assert lines.length_m[0] == pytest.approx(160 * ft * 1200 / 3937, abs=6 * ft * 0.31)


def test_geographic_pixel_size_is_geodesic(tmp_path: Path) -> None:
    dlon, dlat = 5e-7, 4e-7  # degrees per pixel, about 4 cm
    lon0, lat0 = 15.0, 45.0
    path = _mask_raster(
        tmp_path / "geo.tif", Affine(dlon, 0.0, lon0, 0.0, -dlat, lat0), "EPSG:4326"
    )
    lines = extract_ruts(path)
    lon_c, lat_c = lon0 + 100 * dlon, lat0 - 50 * dlat  # the raster's centre
    geod = Geodesic.WGS84
    along_x = geod.Inverse(lat_c, lon_c, lat_c, lon_c + dlon)["s12"]
    along_y = geod.Inverse(lat_c, lon_c, lat_c - dlat, lon_c)["s12"]
    # source: geographiclib 2.x geodesic inverse on WGS 84
    assert lines.pixel_size_m == pytest.approx((along_x, along_y), rel=1e-6)


def test_depth_classes_follow_the_guidelines() -> None:
    # source: Finland, Ministry of Agriculture and Forestry 1996 (via Silva Fennica): a rut
    # deeper than 10 cm on mineral soil or 20 cm on peat marks a damaged strip-road section
    assert DEPTH_LIMITS_M == (0.10, 0.20)
    got = depth_classes(np.array([0.09, 0.11, 0.19, 0.21, np.nan]))
    assert got == ["shallow", "deep", "deep", "very_deep", "unmeasured"]
    # source: Quebec RADF, section 45: a rut deeper than 200 mm on mineral soil
    assert depth_classes(np.array([0.19, 0.21]), limits=(0.20,)) == ["shallow", "deep"]


def test_rotated_geotransform(tmp_path: Path) -> None:
    px, angle = 0.05, 30.0
    x0, y0 = 500010.0, 5000020.0
    transform = Affine.translation(x0, y0) @ Affine.rotation(angle) @ Affine.scale(px, -px)
    lines = extract_ruts(_mask_raster(tmp_path / "rot.tif", transform, "EPSG:32633"))
    assert len(lines) == 1
    # source: GDAL raster data model: with rotation terms GT2 and GT4 the pixel (col, row)
    # centre lies at GT0 + (col+0.5)*GT1 + (row+0.5)*GT2, GT3 + (col+0.5)*GT4 + (row+0.5)*GT5
    centre_row = np.array([transform @ (c + 0.5, 50.5) for c in (20.0, 179.0)])
    direction = np.subtract(*centre_row[::-1])
    unit = direction / np.hypot(*direction)
    rel = shapely.get_coordinates(shapely.segmentize(lines.lines[0], px)) - centre_row[0]
    off = unit[0] * rel[:, 1] - unit[1] * rel[:, 0]  # distance from the pixel-centre line
    along = rel @ unit
    inner = (along > 10 * px) & (along < 150 * px)
    assert np.all(np.abs(off[inner]) <= 0.25 * px)
    assert np.all(np.abs(off) < 0.5 * px)
    assert lines.pixel_size_m == pytest.approx((px, px), rel=1e-9)
