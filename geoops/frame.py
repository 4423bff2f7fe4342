"""Local metric frame of a layer: where lengths and angles are measured.

Every later step (clean, pair, infer) works in one plane in metres, chosen per layer: an
azimuthal equidistant projection centred on the layer, on the same geodetic datum and ellipsoid
as the layer's own CRS, so no datum shift is ever involved. Within about 15 km of the centre a
length measured in that plane is true to the ellipsoidal geodesic length to better than 1 mm per
km (the projection's scale along circles about the centre is about ``1 + rho**2 / (6 R**2)``, and
exactly 1 along lines through the centre).

This module also decides whether a CRS is usable at all and whether the coordinates fit it
(area of use, swapped axes, degrees labelled as metres). It must not read or write files and
knows nothing of the CLI or the service beyond the wording of its hints. It handles x and y
only: callers keep Z and M values aside themselves.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
import numpy.typing as npt
import pyproj
from pyproj.crs import CoordinateOperation, ProjectedCRS
from pyproj.crs.coordinate_operation import AzimuthalEquidistantConversion
from pyproj.crs.coordinate_system import Ellipsoidal2DCS
from pyproj.exceptions import CRSError as ProjCRSError

from geoops.errors import BadInput, CrsError

__all__ = ["LocalFrame", "build_frame", "resolve_crs"]

FloatArray = npt.NDArray[np.float64]

#: Size of one degree in radians, the unit factor pyproj reports for degree axes.
_DEGREE = math.pi / 180.0

#: Margin around a CRS's area of use before coordinates count as clearly outside it: the larger
#: of this many degrees and :data:`AREA_MARGIN_FRACTION` of the area's width (or height). National
#: grids are routinely used a little beyond their nominal area.
AREA_MARGIN_DEG = 2.0
AREA_MARGIN_FRACTION = 0.1

#: Relative length error the frame promises near the data: 1 mm per km.
LENGTH_TOLERANCE = 1e-6

#: Largest error, in metres on the ground, that a fitted polynomial may make where it stands in
#: for PROJ's conversion of a large array (see :func:`_convert`): a thousandth of a millimetre.
FIT_TOLERANCE_M = 1e-6

#: Fewest points for which fitting a stand-in pays: below this PROJ converts every point.
FIT_MIN_POINTS = 20_000

#: Centre coordinates are rounded to this many decimals of a degree (1e-9 deg is 0.1 mm), so that
#: the PROJ string in :meth:`LocalFrame.describe` rebuilds exactly the same frame.
_CENTRE_DECIMALS = 9

_NO_CRS_HINT = "Name one with --crs, e.g. --crs EPSG:4326 for longitude/latitude."
_WRONG_CRS_HINT = "Check the layer's CRS and name the right one with --crs EPSG:xxxx."


# ---------------------------------------------------------------------------------------------
# Choosing a CRS


def resolve_crs(
    layer_crs: str | pyproj.CRS | None, override: str | pyproj.CRS | None
) -> pyproj.CRS:
    """Return the horizontal CRS to read a layer in.

    Parameters
    ----------
    layer_crs
        The CRS the file declares, or ``None`` when it declares none.
    override
        A CRS the caller names (``--crs``); it wins over ``layer_crs``. Anything
        :meth:`pyproj.CRS.from_user_input` accepts: ``"EPSG:2227"``, WKT, a PROJ string.

    Returns
    -------
    pyproj.CRS
        A two-dimensional geographic or projected CRS. A compound CRS gives its horizontal
        part, a bound CRS (PROJ string with ``+towgs84``) its source CRS, a 3D geographic CRS
        its 2D counterpart.

    Raises
    ------
    CrsError
        When there is no CRS, it cannot be parsed, or it is not a horizontal CRS tied to the
        Earth (engineering/local, vertical-only, geocentric).

    Examples
    --------
    >>> resolve_crs(None, "EPSG:32631").to_epsg()
    32631
    >>> resolve_crs("EPSG:4326", "EPSG:2227").name
    'NAD83 / California zone 3 (ftUS)'
    >>> resolve_crs("EPSG:2227+5703", None).to_epsg()
    2227
    >>> resolve_crs(None, None)
    Traceback (most recent call last):
    ...
    geoops.errors.CrsError: The layer has no coordinate reference system. Name one with --crs, ...
    """
    chosen = override if not _blank(override) else layer_crs
    if _blank(chosen):
        raise CrsError("The layer has no coordinate reference system.", hint=_NO_CRS_HINT)
    assert chosen is not None  # for mypy: _blank(None) is True
    return _horizontal(_parse_crs(chosen))


def _blank(value: str | pyproj.CRS | None) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def _parse_crs(value: str | pyproj.CRS) -> pyproj.CRS:
    if isinstance(value, pyproj.CRS):
        return value
    try:
        return pyproj.CRS.from_user_input(value)
    except (ProjCRSError, TypeError, ValueError) as exc:
        shown = value if len(value) <= 80 else value[:77] + "..."
        raise CrsError(
            f"The coordinate reference system {shown!r} is not recognised.",
            hint="Name one that PROJ knows with --crs: an EPSG code such as --crs EPSG:32633, "
            "a WKT string or a PROJ string.",
        ) from exc


def _horizontal(crs: pyproj.CRS) -> pyproj.CRS:
    """The usable 2D horizontal CRS in ``crs``, or a CrsError saying why there is none."""
    if crs.is_bound and crs.source_crs is not None:
        crs = crs.source_crs
    if crs.is_compound:
        parts = [
            p.source_crs if p.is_bound and p.source_crs is not None else p for p in crs.sub_crs_list
        ]
        horizontal = [p for p in parts if p.is_geographic or p.is_projected]
        if not horizontal:
            raise CrsError(
                f"The compound coordinate reference system {crs.name!r} has no horizontal part.",
                hint=_WRONG_CRS_HINT,
            )
        crs = horizontal[0]
    if crs.is_geocentric:
        raise CrsError(
            f"The coordinate reference system {crs.name!r} is geocentric (X, Y, Z from the "
            "Earth's centre), not a map of horizontal positions.",
            hint=_WRONG_CRS_HINT,
        )
    if crs.is_vertical:
        raise CrsError(
            f"The coordinate reference system {crs.name!r} describes heights only.",
            hint="Name the horizontal CRS with --crs, e.g. --crs EPSG:4326.",
        )
    if crs.is_engineering or crs.geodetic_crs is None:
        raise CrsError(
            f"The coordinate reference system {crs.name!r} is a local or unknown system with no "
            "link to the Earth, so distances cannot be checked against the ellipsoid.",
            hint="Name the geographic or projected CRS the coordinates are really in with "
            "--crs EPSG:xxxx.",
        )
    if not (crs.is_geographic or crs.is_projected):
        raise CrsError(
            f"The coordinate reference system {crs.name!r} ({crs.type_name}) is neither "
            "geographic nor projected.",
            hint=_WRONG_CRS_HINT,
        )
    if len(crs.axis_info) > 2:
        crs = crs.to_2d()
    return crs


def _geodetic_degrees(crs: pyproj.CRS) -> pyproj.CRS:
    """The geographic 2D CRS under ``crs`` with longitude/latitude axes in degrees.

    Same datum (and so the same ellipsoid and prime meridian): converting between the two is
    a change of units and axes only, never a datum shift.
    """
    geo = crs.geodetic_crs
    assert geo is not None  # _horizontal guarantees it
    if len(geo.axis_info) > 2:
        geo = geo.to_2d()
    degrees = all(
        math.isclose(a.unit_conversion_factor, _DEGREE, rel_tol=1e-12) for a in geo.axis_info
    )
    if degrees:
        # Prefer the registered copy of the same CRS: PROJ builds projected CRSs and
        # transformers on it several times faster than on the copy pyproj hands back (which
        # is re-parsed from PROJJSON, slow for datum ensembles such as WGS 84).
        authority = geo.to_authority(min_confidence=100)
        if authority is not None:
            registered = pyproj.CRS.from_authority(*authority)
            if registered == geo:
                return registered
        return geo
    # e.g. grads: keep the datum, replace the coordinate system (the identifier no longer fits).
    spec: dict[str, Any] = geo.to_json_dict()
    spec["coordinate_system"] = Ellipsoidal2DCS().to_json_dict()
    spec.pop("id", None)
    spec.pop("ids", None)
    return pyproj.CRS.from_json_dict(spec)


def _prime_meridian_deg(geo: pyproj.CRS) -> float:
    pm = geo.prime_meridian
    if pm is None:
        return 0.0
    return float(pm.longitude) * float(pm.unit_conversion_factor) / _DEGREE


def _local_crs(geo: pyproj.CRS, lon0: float, lat0: float) -> pyproj.CRS:
    """Azimuthal equidistant CRS in metres centred on (lon0, lat0), based on ``geo``."""
    spec: dict[str, Any] = AzimuthalEquidistantConversion(
        latitude_natural_origin=lat0, longitude_natural_origin=lon0
    ).to_json_dict()
    # pyproj labels this EPSG method 9832 ("Modified Azimuthal Equidistant", approximate
    # formulas for small islands, Snyder 1987); method 1125 is the exact one that PROJ's aeqd
    # computes (with geodesics). Label it so, so that other software reading our WKT computes the
    # same plane.
    spec["method"] = {"name": "Azimuthal Equidistant", "id": {"authority": "EPSG", "code": 1125}}
    spec["name"] = "rutwise layer-centred azimuthal equidistant"
    conversion = CoordinateOperation.from_json_dict(spec)
    return ProjectedCRS(
        conversion=conversion,
        geodetic_crs=geo,
        name=f"Local azimuthal equidistant on {geo.name} at lon {lon0}, lat {lat0}",
    )


# ---------------------------------------------------------------------------------------------
# Converting large arrays

#: total degrees of the stand-in polynomials tried, cheapest first, and the Chebyshev nodes per
#: axis they are fitted on
_FIT_DEGREES = (4, 6)
_FIT_NODES = 10
#: check points per axis, evenly spaced over the fitted square, edges and corners included (an
#: even number, so that none falls on the square's centre, see :func:`_convert`)
_CHECK_POINTS = 20
#: vertices of the data itself that are also checked
_CHECK_SAMPLE = 1024


def _exact(
    transformer: pyproj.Transformer, x: FloatArray, y: FloatArray
) -> tuple[FloatArray, FloatArray]:
    xs, ys = transformer.transform(x, y)
    return np.asarray(xs, dtype=np.float64), np.asarray(ys, dtype=np.float64)


def _monomials(u: FloatArray, v: FloatArray, degree: int) -> FloatArray:
    """Columns u**i * v**j for i + j <= degree."""
    cols = []
    ui = np.ones_like(u)
    for i in range(degree + 1):
        term = ui
        for _ in range(degree + 1 - i):
            cols.append(term)
            term = term * v
        ui = ui * u
    return np.column_stack(cols)


def _evaluate(coef: FloatArray, u: FloatArray, v: FloatArray, degree: int) -> FloatArray:
    """The polynomial with :func:`_monomials` coefficients ``coef``, by Horner's rule in v
    inside Horner's rule in u (no column matrix for the whole array)."""
    offsets = np.cumsum([0] + [degree + 1 - i for i in range(degree + 1)])
    out = np.zeros_like(u)
    for i in range(degree, -1, -1):
        c = coef[offsets[i] : offsets[i + 1]]
        inner = np.full_like(v, c[-1])
        for cj in c[-2::-1]:
            inner *= v
            inner += cj
        out *= u
        out += inner
    return out


def _convert(
    transformer: pyproj.Transformer, x: npt.ArrayLike, y: npt.ArrayLike, *, to_metres: bool
) -> tuple[FloatArray, FloatArray]:
    """``transformer`` applied to (x, y); for a large array, by a fitted polynomial when one is
    shown to match PROJ within :data:`FIT_TOLERANCE_M`.

    PROJ's azimuthal equidistant projection solves a geodesic for each point (about 0.7 us), so
    a whole layer costs a few tenths of a second each way. Over a layer's extent the conversion
    is a smooth function, and a polynomial of low degree, fitted on a grid of Chebyshev nodes
    that PROJ converts, reproduces it to nanometres. It is used only after it matches PROJ
    within the tolerance (converted to output units through its own gradient when the output is
    not metres) on a denser grid over the whole fitted square, edges and corners included, and
    on a sample of the points themselves (except where PROJ itself snaps a point within 0.6 mm
    of the frame's centre onto the centre); otherwise (a layer across the antimeridian or a pole,
    a huge extent, points PROJ cannot convert) every point goes through PROJ.
    """
    xa = np.asarray(x, dtype=np.float64)
    ya = np.asarray(y, dtype=np.float64)
    if xa.size < FIT_MIN_POINTS or xa.shape != ya.shape:
        return _exact(transformer, xa, ya)
    xf, yf = xa.ravel(), ya.ravel()
    if not (np.isfinite(xf).all() and np.isfinite(yf).all()):
        return _exact(transformer, xa, ya)
    lo_x, hi_x, lo_y, hi_y = xf.min(), xf.max(), yf.min(), yf.max()
    cx, cy = 0.5 * (lo_x + hi_x), 0.5 * (lo_y + hi_y)
    half = 0.5 * max(hi_x - lo_x, hi_y - lo_y)
    if not half > 0:
        return _exact(transformer, xa, ya)
    nodes = np.cos(np.pi * (np.arange(_FIT_NODES) + 0.5) / _FIT_NODES)
    grid = np.linspace(-1.0, 1.0, _CHECK_POINTS)
    nu, nv = (a.ravel() for a in np.meshgrid(nodes, nodes))
    gu, gv = (a.ravel() for a in np.meshgrid(grid, grid))
    step = max(xf.size // _CHECK_SAMPLE, 1)
    su, sv = (xf[::step] - cx) / half, (yf[::step] - cy) / half
    cu, cv = np.concatenate([gu, su]), np.concatenate([gv, sv])
    with np.errstate(all="ignore"):
        fx, fy = _exact(transformer, cx + half * nu, cy + half * nv)
        kx, ky = _exact(transformer, cx + half * cu, cy + half * cv)
    if not (np.isfinite(fx).all() and np.isfinite(fy).all()):
        return _exact(transformer, xa, ya)
    if not (np.isfinite(kx).all() and np.isfinite(ky).all()):
        return _exact(transformer, xa, ya)
    if to_metres:
        # PROJ's aeqd returns exactly (0, 0) for any point within 1e-10 radians (0.6 mm) of the
        # centre: a shortcut of its own, not the projection, so not a reference to check by
        keep = (kx != 0.0) | (ky != 0.0)
        cu, cv, kx, ky = cu[keep], cv[keep], kx[keep], ky[keep]
    for degree in _FIT_DEGREES:
        basis = _monomials(nu, nv, degree)
        coef_x = np.asarray(np.linalg.lstsq(basis, fx, rcond=None)[0], dtype=np.float64)
        coef_y = np.asarray(np.linalg.lstsq(basis, fy, rcond=None)[0], dtype=np.float64)
        if to_metres:
            tol_x = tol_y = FIT_TOLERANCE_M
        else:
            # output units per metre: the gradient of the linear terms (input is metres)
            lin = degree + 1  # index of the u term; the v term is index 1
            tol_x = FIT_TOLERANCE_M * float(np.hypot(coef_x[1], coef_x[lin])) / half
            tol_y = FIT_TOLERANCE_M * float(np.hypot(coef_y[1], coef_y[lin])) / half
        err_x = np.abs(_evaluate(coef_x, cu, cv, degree) - kx).max()
        err_y = np.abs(_evaluate(coef_y, cu, cv, degree) - ky).max()
        if err_x <= tol_x and err_y <= tol_y:
            u, v = (xf - cx) / half, (yf - cy) / half
            out_x = _evaluate(coef_x, u, v, degree).reshape(xa.shape)
            out_y = _evaluate(coef_y, u, v, degree).reshape(xa.shape)
            return out_x, out_y
    return _exact(transformer, xa, ya)


# ---------------------------------------------------------------------------------------------
# The frame


@dataclass(frozen=True)
class LocalFrame:
    """A layer's local plane in metres and the conversions to and from it.

    Build one with :func:`build_frame`. Each transformer is created once, on first use, and
    reused for every later call (``always_xy=True``: x is easting/longitude whatever the
    CRS's axis order). Frames compare equal when their CRSs and centre are equal, and pickle by
    their definition (the transformers are rebuilt on the other side).

    Parameters
    ----------
    source_crs
        The layer's horizontal CRS (see :func:`resolve_crs`).
    local_crs
        Azimuthal equidistant projection in metres centred on (``lon0``, ``lat0``), based on
        ``source_crs.geodetic_crs`` (same datum, so converting involves no datum shift).
    lon0, lat0
        The centre in degrees of the source datum's longitude/latitude, ``lon0`` in
        [-180, 180). Longitudes count from the datum's prime meridian (Greenwich for nearly all
        datums).

    Examples
    --------
    >>> import numpy as np
    >>> frame, notes = build_frame(np.array([3.0, 3.01]), np.array([0.0, 0.0]),
    ...                            pyproj.CRS("EPSG:4326"))
    >>> x, y = frame.to_local(np.array([3.0, 3.01]), np.array([0.0, 0.0]))
    >>> round(float(x[1] - x[0]), 3)  # 0.01 degree of longitude on the equator, in metres
    1113.195
    >>> lon, lat = frame.from_local(x, y)
    >>> lon.round(9).tolist(), lat.round(9).tolist()
    ([3.0, 3.01], [0.0, 0.0])
    """

    source_crs: pyproj.CRS
    local_crs: pyproj.CRS
    lon0: float
    lat0: float
    # The transformers are made on first use and then kept: cached_property writes straight to
    # the instance __dict__, which a frozen dataclass allows; they take no part in ==, hash or
    # pickling.

    @cached_property
    def _forward(self) -> pyproj.Transformer:
        return pyproj.Transformer.from_crs(self.source_crs, self.local_crs, always_xy=True)

    @cached_property
    def _inverse(self) -> pyproj.Transformer:
        return pyproj.Transformer.from_crs(self.local_crs, self.source_crs, always_xy=True)

    @cached_property
    def _outputs(self) -> dict[pyproj.CRS, pyproj.Transformer]:
        return {}

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        return (type(self), (self.source_crs, self.local_crs, self.lon0, self.lat0))

    def to_local(self, x: npt.ArrayLike, y: npt.ArrayLike) -> tuple[FloatArray, FloatArray]:
        """Convert coordinates in the source CRS to local metres.

        Parameters
        ----------
        x, y
            Coordinates in the source CRS (x = easting or longitude), any matching shape.

        Returns
        -------
        tuple of numpy.ndarray
            Local easting and northing in metres, same shape as the input, float64.

        Examples
        --------
        >>> frame, _ = build_frame(np.array([500000.0]), np.array([0.0]),
        ...                        pyproj.CRS("EPSG:32631"))
        >>> x, y = frame.to_local([500000.0], [0.0])
        >>> float(np.hypot(x, y)[0]) < 1e-6
        True
        """
        return _convert(self._forward, x, y, to_metres=True)

    def from_local(
        self,
        x: npt.ArrayLike,
        y: npt.ArrayLike,
        crs: pyproj.CRS | str | None = None,
    ) -> tuple[FloatArray, FloatArray]:
        """Convert local metres back to the source CRS, or to ``crs``.

        Parameters
        ----------
        x, y
            Local easting and northing in metres, any matching shape.
        crs
            Target CRS; ``None`` for the source CRS. Output order is always x = easting or
            longitude, y = northing or latitude (so ``"EPSG:4326"`` gives lon, lat as GeoJSON
            wants). A target on another datum goes through the datum transformation PROJ
            chooses.

        Returns
        -------
        tuple of numpy.ndarray
            x and y in the target CRS, same shape as the input, float64.

        Examples
        --------
        >>> frame, _ = build_frame(np.array([500000.0]), np.array([0.0]),
        ...                        pyproj.CRS("EPSG:32631"))
        >>> lon, lat = frame.from_local([0.0], [0.0], crs="EPSG:4326")
        >>> round(float(lon[0]), 9), round(float(lat[0]), 9)
        (3.0, 0.0)
        """
        transformer = self._inverse if crs is None else self._output_transformer(crs)
        return _convert(transformer, x, y, to_metres=False)

    def _output_transformer(self, crs: pyproj.CRS | str) -> pyproj.Transformer:
        target = pyproj.CRS.from_user_input(crs)
        if target == self.source_crs:
            return self._inverse
        transformer = self._outputs.get(target)
        if transformer is None:
            transformer = pyproj.Transformer.from_crs(self.local_crs, target, always_xy=True)
            self._outputs[target] = transformer
        return transformer

    def describe(self) -> dict[str, str]:
        """Describe the frame for output metadata: enough to rebuild it.

        Returns
        -------
        dict of str to str
            ``method``; ``local_proj`` (PROJ string with ``+lat_0``/``+lon_0`` and the
            ellipsoid or datum); ``local_wkt`` (WKT2:2019, with the datum); ``centre_lon``,
            ``centre_lat`` (degrees); ``ellipsoid`` (name, semi-major axis, inverse
            flattening); ``datum``; ``source_crs_name``; ``source_crs_epsg`` (empty when the
            CRS has no EPSG code); ``source_crs_wkt``.

        Examples
        --------
        >>> frame, _ = build_frame(np.array([3.0]), np.array([45.0]), pyproj.CRS("EPSG:4326"))
        >>> info = frame.describe()
        >>> info["local_proj"].split()[:3]
        ['+proj=aeqd', '+lat_0=45', '+lon_0=3']
        >>> info["source_crs_epsg"], info["centre_lat"]
        ('4326', '45.000000000')
        """
        with warnings.catch_warnings():
            # pyproj warns that PROJ strings drop information; the WKT beside it keeps all.
            warnings.simplefilter("ignore", UserWarning)
            proj_string = self.local_crs.to_proj4()
        ellipsoid = self.local_crs.ellipsoid
        datum = self.local_crs.datum
        epsg = self.source_crs.to_epsg()
        return {
            "method": "azimuthal equidistant (EPSG method 1125, PROJ aeqd), metres",
            "local_proj": proj_string,
            "local_wkt": self.local_crs.to_wkt(),
            "centre_lon": f"{self.lon0:.{_CENTRE_DECIMALS}f}",
            "centre_lat": f"{self.lat0:.{_CENTRE_DECIMALS}f}",
            "ellipsoid": (
                ""
                if ellipsoid is None
                else f"{ellipsoid.name}: a={ellipsoid.semi_major_metre!r} m, "
                f"1/f={ellipsoid.inverse_flattening!r}"
            ),
            "datum": "" if datum is None else datum.name,
            "source_crs_name": self.source_crs.name,
            "source_crs_epsg": "" if epsg is None else str(epsg),
            "source_crs_wkt": self.source_crs.to_wkt(),
        }


# ---------------------------------------------------------------------------------------------
# Building a frame from a layer


@dataclass(frozen=True)
class _Area:
    """A CRS's area of use in Greenwich longitude/latitude degrees, with the check margin."""

    west: float
    south: float
    east: float
    north: float

    @property
    def width(self) -> float:
        w = (self.east - self.west) % 360.0
        return 360.0 if w == 0.0 and self.east != self.west else w

    def margins(self) -> tuple[float, float]:
        return (
            max(AREA_MARGIN_DEG, AREA_MARGIN_FRACTION * self.width),
            max(AREA_MARGIN_DEG, AREA_MARGIN_FRACTION * (self.north - self.south)),
        )

    def contains(
        self, lon: FloatArray, lat: FloatArray, *, with_margin: bool
    ) -> npt.NDArray[np.bool_]:
        """Mask of points inside (antimeridian-aware; west > east crosses it)."""
        mlon, mlat = self.margins() if with_margin else (0.0, 0.0)
        span = self.width + 2.0 * mlon
        inside_lat = (lat >= self.south - mlat) & (lat <= self.north + mlat)
        if span >= 360.0:
            return inside_lat & np.isfinite(lon)
        inside_lon = np.mod(lon - (self.west - mlon), 360.0) <= span
        return inside_lat & inside_lon

    def text(self) -> str:
        return (
            f"longitude {self.west:g} to {self.east:g}, latitude {self.south:g} to {self.north:g}"
        )


def _area_of_use(crs: pyproj.CRS) -> _Area | None:
    aou = crs.area_of_use
    if aou is None:
        return None
    return _Area(aou.west, aou.south, aou.east, aou.north)


def build_frame(
    x: npt.ArrayLike, y: npt.ArrayLike, crs: pyproj.CRS
) -> tuple[LocalFrame, list[str]]:
    """Check a layer's coordinates against its CRS and build its local metric frame.

    The centre is the middle of the layer's extent in longitude and latitude of the source
    datum (longitudes taken relative to their circular mean, so a layer across the antimeridian
    is centred on it). The middle of the extent, rather than the mean of the vertices, keeps the
    farthest vertex as close to the centre as possible, and the frame's length error grows with
    the square of that distance.

    Parameters
    ----------
    x, y
        All vertices of the layer in ``crs`` (x = easting or longitude), any matching shapes;
        only x and y: Z and M stay with the caller. All points are used; the work is vectorised.
    crs
        The layer's CRS, usually from :func:`resolve_crs` (applied again here, so a compound or
        bound CRS is reduced to its horizontal part).

    Returns
    -------
    frame : LocalFrame
        The layer's frame.
    notes : list of str
        Human-readable warnings (possible lat/lon swap, degrees in a projected CRS, a layer too
        large for the 1 mm per km promise); empty when all is well.

    Raises
    ------
    BadInput
        When there are no vertices or x and y do not match.
    CrsError
        When coordinates are not finite, are impossible for a geographic CRS (latitude beyond
        90 degrees, longitude beyond 540 degrees), or lie clearly outside the CRS's area of use.
        The message says when swapping x and y, or reading the values as degrees, would fit.

    Examples
    --------
    >>> import numpy as np
    >>> frame, notes = build_frame(np.array([179.95, -179.95]), np.array([-40.0, -40.0]),
    ...                            pyproj.CRS("EPSG:4326"))
    >>> frame.lon0, frame.lat0, notes
    (-180.0, -40.0, [])
    >>> build_frame(np.array([50.1]), np.array([8.7]), pyproj.CRS("EPSG:4258"))
    Traceback (most recent call last):
    ...
    geoops.errors.CrsError: 1 of 1 vertices lie outside ... latitude/longitude swapped...
    """
    xs = np.asarray(x, dtype=np.float64).ravel()
    ys = np.asarray(y, dtype=np.float64).ravel()
    if xs.shape != ys.shape:
        raise BadInput(
            f"The layer has {xs.size} x values but {ys.size} y values.",
            hint="Pass the x and y of every vertex, in the same order.",
        )
    if xs.size == 0:
        raise BadInput(
            "The layer has no vertices.",
            hint="Check that the input holds line features with coordinates.",
        )
    crs = _horizontal(_parse_crs(crs))
    finite = np.isfinite(xs) & np.isfinite(ys)
    if not finite.all():
        first = int(np.flatnonzero(~finite)[0])
        raise CrsError(
            f"{int((~finite).sum())} of {xs.size} vertices have a coordinate that is not a "
            f"finite number (NaN or infinity); the first is vertex {first}.",
            hint="Remove or repair those vertices (empty or corrupt geometries) and load the "
            "layer again.",
        )

    geo = _geodetic_degrees(crs)
    to_geo = pyproj.Transformer.from_crs(crs, geo, always_xy=True)
    area = _area_of_use(crs)
    pm = _prime_meridian_deg(geo)

    def lonlat(a: FloatArray, b: FloatArray) -> tuple[FloatArray, FloatArray]:
        lon, lat = to_geo.transform(a, b)
        return np.asarray(lon, dtype=np.float64), np.asarray(lat, dtype=np.float64)

    def valid(lon: FloatArray, lat: FloatArray) -> npt.NDArray[np.bool_]:
        return np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90.0) & (np.abs(lon) <= 540.0)

    def inside(lon: FloatArray, lat: FloatArray, *, with_margin: bool) -> npt.NDArray[np.bool_]:
        ok = valid(lon, lat)
        if area is not None:
            ok &= area.contains(lon + pm, lat, with_margin=with_margin)
        return ok

    def swapped_inside(*, with_margin: bool) -> bool:
        # only asked on the rare paths that report a problem, so computed on demand
        return bool(inside(*lonlat(ys, xs), with_margin=with_margin).all())

    lon, lat = lonlat(xs, ys)
    geographic = bool(crs.is_geographic)
    degree_like = not geographic and bool(
        np.all(np.abs(xs) <= 180.0) and np.all(np.abs(ys) <= 90.0)
    )

    bad = ~valid(lon, lat)
    if bad.any():
        problem = (
            "have a latitude beyond ±90 or a longitude beyond ±540 degrees"
            if geographic
            else f"cannot be converted from {crs.name} to longitude/latitude"
        )
        raise _outside_error(
            crs,
            xs,
            ys,
            bad,
            problem,
            swapped=swapped_inside(with_margin=True),
            degree_like=degree_like,
        )
    if area is not None:
        bad = ~inside(lon, lat, with_margin=True)
        if bad.any():
            raise _outside_error(
                crs,
                xs,
                ys,
                bad,
                f"lie outside the area of use of {crs.name} ({area.text()}), even allowing "
                f"a margin of {area.margins()[0]:.3g} degrees of longitude and "
                f"{area.margins()[1]:.3g} of latitude",
                swapped=swapped_inside(with_margin=True),
                degree_like=degree_like,
            )

    notes: list[str] = []
    if area is not None:
        off_nominal = ~inside(lon, lat, with_margin=False)
        if off_nominal.any() and not degree_like and swapped_inside(with_margin=False):
            axes = "latitude/longitude" if geographic else "x/y (easting/northing)"
            notes.append(
                f"{int(off_nominal.sum())} of {xs.size} vertices lie just outside the area of "
                f"use of {crs.name} ({area.text()}), but all would lie inside it with x and y "
                f"exchanged: the layer looks like {axes} swapped. Check the axis order of "
                "the source."
            )
        if degree_like and (off_nominal.any() or area.contains(xs, ys, with_margin=True).all()):
            notes.append(
                f"All coordinates lie within 180 of x = 0 and 90 of y = 0 in the projected CRS "
                f"{crs.name}, i.e. a few hundred metres or feet from its false origin; they "
                "look like longitude/latitude degrees. The layer's CRS is probably wrong: if "
                "they are degrees, name it with --crs EPSG:4326."
            )

    lon0, lat0 = _centre(lon, lat)
    frame = LocalFrame(source_crs=crs, local_crs=_local_crs(geo, lon0, lat0), lon0=lon0, lat0=lat0)
    notes.extend(_size_notes(frame, xs, ys, geo))
    return frame, notes


def _wrap180(lon: Any) -> Any:
    """Wrap degrees into [-180, 180)."""
    return np.mod(np.asarray(lon, dtype=np.float64) + 180.0, 360.0) - 180.0


def _centre(lon: FloatArray, lat: FloatArray) -> tuple[float, float]:
    """Middle of the extent; longitudes unwrapped about their circular mean."""
    rad = np.radians(lon)
    reference = math.degrees(math.atan2(float(np.sin(rad).mean()), float(np.cos(rad).mean())))
    offset = _wrap180(lon - reference)
    lon0 = float(_wrap180(reference + 0.5 * (float(offset.min()) + float(offset.max()))))
    lat0 = 0.5 * (float(lat.min()) + float(lat.max()))
    lon0 = float(_wrap180(round(lon0, _CENTRE_DECIMALS)))
    return lon0, round(lat0, _CENTRE_DECIMALS)


def _size_notes(frame: LocalFrame, xs: FloatArray, ys: FloatArray, geo: pyproj.CRS) -> list[str]:
    """A note when the layer reaches so far from the centre that lengths lose the 1 mm/km."""
    lx, ly = frame.to_local(xs, ys)
    reach = float(np.hypot(lx, ly).max())
    ellipsoid = geo.ellipsoid
    a = 6378137.0 if ellipsoid is None else ellipsoid.semi_major_metre
    rf = 0.0 if ellipsoid is None else ellipsoid.inverse_flattening
    f = 1.0 / rf if rf else 0.0
    e2 = f * (2.0 - f)
    w2 = 1.0 - e2 * math.sin(math.radians(frame.lat0)) ** 2
    radius = a * math.sqrt(1.0 - e2) / w2  # Gaussian mean radius sqrt(M N) at the centre
    worst = reach**2 / (6.0 * radius**2)  # scale error along a circle about the centre
    if worst <= LENGTH_TOLERANCE:
        return []
    safe = radius * math.sqrt(6.0 * LENGTH_TOLERANCE)
    return [
        f"The layer reaches {reach / 1000:.1f} km from its centre; there, lengths in the local "
        f"frame can be off by up to {worst * 1e6:.1f} mm per km (they are true to 1 mm per km "
        f"within {safe / 1000:.0f} km of the centre). Split the layer into smaller parts for "
        "full accuracy."
    ]


def _outside_error(
    crs: pyproj.CRS,
    xs: FloatArray,
    ys: FloatArray,
    bad: npt.NDArray[np.bool_],
    problem: str,
    *,
    swapped: bool,
    degree_like: bool,
) -> CrsError:
    """The CrsError for vertices that do not fit ``crs``, with the likeliest explanation."""
    first = int(np.flatnonzero(bad)[0])
    message = (
        f"{int(bad.sum())} of {xs.size} vertices {problem}; the first is at "
        f"x={xs[first]:.10g}, y={ys[first]:.10g}."
    )
    if swapped:
        axes = "latitude/longitude" if crs.is_geographic else "x/y (easting/northing)"
        message += f" The layer looks like {axes} swapped: with x and y exchanged it fits."
        hint = "Swap x and y (x is easting or longitude) or fix the axis order of the source."
    elif degree_like:
        message += " The values look like longitude/latitude degrees, not projected units."
        hint = "If they are degrees, name the CRS with --crs EPSG:4326."
    elif crs.is_geographic and max(float(np.abs(xs).max()), float(np.abs(ys).max())) > 1000.0:
        message += " The values look like projected metres or feet, not degrees."
        hint = "Name the layer's projected CRS with --crs EPSG:xxxx."
    else:
        hint = _WRONG_CRS_HINT
    return CrsError(message, hint=hint)
