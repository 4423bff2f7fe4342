"""Geometry kernels on polylines held as ``(n, 2)`` float arrays in a metric frame.

Arrays in, arrays out, vectorised with numpy and scipy. No file I/O, no CRS handling, no
knowledge of ruts or vehicles: that lives in :mod:`geoops.clean` and :mod:`geoops.inference`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely
from numpy.typing import NDArray

from . import kernels, kernels_clean

Array = NDArray[np.float64]


def arc_length(xy: Array) -> Array:
    """Cumulative arc length at each vertex, starting at 0.

    Examples
    --------
    >>> arc_length(np.array([[0.0, 0.0], [3.0, 4.0], [3.0, 5.0]])).tolist()
    [0.0, 5.0, 6.0]
    """
    seg = np.hypot(*np.diff(xy, axis=0).T)
    return np.concatenate([[0.0], np.cumsum(seg)])


def as_linestrings(arrays: list[Array]) -> np.ndarray:
    """Shapely LineStrings from a list of ``(n, 2)`` arrays, built in one vectorised call.

    Examples
    --------
    >>> g = as_linestrings([np.array([[0.0, 0], [1, 0]]), np.array([[0.0, 1], [1, 1], [2, 1]])])
    >>> shapely.length(g).tolist()
    [1.0, 2.0]
    """
    if not arrays:
        return np.empty(0, dtype=object)
    lens = np.array([len(a) for a in arrays])
    idx = np.repeat(np.arange(len(arrays)), lens)
    return np.asarray(shapely.linestrings(np.concatenate(arrays), indices=idx))


#: vertices closer than this to the one before them are repeats, metres
REPEAT_TOL_M = 1e-9


def drop_repeats(xy: Array, tol: float = REPEAT_TOL_M) -> Array:
    """Remove consecutive vertices closer than ``tol`` to the previous kept vertex's neighbour.

    Only exact or near-exact repeats are removed (``tol`` in metres); shape is otherwise kept.

    Examples
    --------
    >>> drop_repeats(np.array([[0.0, 0], [0, 0], [1, 0], [1, 0], [2, 0]])).tolist()
    [[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]]
    """
    if len(xy) < 2:
        return xy
    return np.asarray(
        kernels_clean.tidy_part(np.ascontiguousarray(xy, dtype=np.float64), float(tol), 0)
    )


def resample(xy: Array, step: float) -> tuple[Array, Array]:
    """Resample a polyline at (nearly) uniform arc-length spacing.

    The spacing is adjusted so that both end points are kept exactly.

    Returns
    -------
    points, s
        The resampled ``(m, 2)`` points and their arc-length positions.

    Examples
    --------
    >>> p, s = resample(np.array([[0.0, 0.0], [10.0, 0.0]]), 2.5)
    >>> s.tolist()
    [0.0, 2.5, 5.0, 7.5, 10.0]
    """
    s0 = arc_length(xy)
    total = float(s0[-1])
    n = max(int(np.ceil(total / step - 1e-9)), 1)
    s = np.linspace(0.0, total, n + 1)
    # np.interp needs strictly increasing positions; repeats were removed upstream, but guard.
    s0 = np.maximum.accumulate(s0)
    pts = np.column_stack([np.interp(s, s0, xy[:, 0]), np.interp(s, s0, xy[:, 1])])
    return pts, s


def savgol(y: Array, window: int, order: int, deriv: int = 0) -> Array:
    """Savitzky-Golay filter along axis 0, with polynomial fits at the ends ("interp" mode).

    Equivalent to ``scipy.signal.savgol_filter(y, window, order, deriv, axis=0,
    mode="interp")`` (derivative per sample), compiled (:func:`geoops.kernels_clean.savgol`)
    and without importing scipy.signal, whose import alone costs most of a second.

    Examples
    --------
    >>> x = np.arange(9.0)
    >>> y = np.column_stack([x**2, 3 * x])
    >>> bool(np.allclose(savgol(y, 5, 2), y)), bool(np.allclose(savgol(y, 5, 2, 1)[:, 1], 3))
    (True, True)
    """
    n = len(y)
    if window % 2 == 0 or window > n or window <= order:
        raise ValueError("window must be odd, at most the length and above the order")
    a = np.ascontiguousarray(y, dtype=np.float64)
    out = kernels_clean.savgol(a.reshape(n, -1), int(window), int(order), int(deriv))
    return np.asarray(out.reshape(a.shape))


def smooth(xy: Array, window_pts: int, order: int = 3) -> Array:
    """Savitzky-Golay smoothing of a uniformly resampled polyline.

    Parameters
    ----------
    xy
        ``(n, 2)`` points at uniform arc-length spacing.
    window_pts
        Window length in samples (made odd and clipped to the line).
    order
        Polynomial order of the local fit.

    Examples
    --------
    >>> line = np.column_stack([np.arange(11.0), np.zeros(11)])
    >>> bool(np.allclose(smooth(line, 5), line))
    True
    """
    a = np.ascontiguousarray(xy, dtype=np.float64)
    return np.asarray(kernels_clean.smooth(a, int(window_pts), int(order)))


def unit_tangents(xy: Array, window_pts: int = 5, order: int = 3) -> Array:
    """Unit tangents of a uniformly resampled polyline, in vertex order.

    Computed from the derivative of a local polynomial fit (Savitzky-Golay), never from raw
    vertex differences, so vertex noise does not swing the tangent.

    Examples
    --------
    >>> t = np.linspace(0, np.pi / 2, 50)
    >>> u = unit_tangents(np.column_stack([np.cos(t), np.sin(t)]), 7)
    >>> bool(np.allclose(u[25], [-np.sin(t[25]), np.cos(t[25])], atol=1e-4))
    True
    """
    a = np.ascontiguousarray(xy, dtype=np.float64)
    return np.asarray(kernels_clean.unit_tangents(a, int(window_pts), int(order)))


def turning_angles(xy: Array) -> Array:
    """Signed heading change at each interior vertex, radians in (-pi, pi].

    Examples
    --------
    >>> turning_angles(np.array([[0.0, 0.0], [1, 0], [1, 1]])).round(4).tolist()
    [1.5708]
    """
    d = np.diff(xy, axis=0)
    h = np.arctan2(d[:, 1], d[:, 0])
    return np.asarray(np.angle(np.exp(1j * np.diff(h))), dtype=np.float64)


def windowed_curvature(tangents: Array, step: float, half: int) -> Array:
    """Signed curvature (1/m, positive to the left) as the heading change across ``2 * half``
    samples, for the samples ``half .. n - half - 1``: the heading change across a smoothing
    window, never between neighbouring samples (which only measures noise).

    Examples
    --------
    >>> t = np.linspace(0, 1, 101)
    >>> r = 5.0
    >>> xy = np.column_stack([r * np.cos(t), r * np.sin(t)])
    >>> step = float(np.hypot(*(xy[1] - xy[0])))
    >>> k = windowed_curvature(unit_tangents(xy, 7), step, 3)
    >>> len(k), bool(np.allclose(k, 1 / r, rtol=1e-3))
    (95, True)
    """
    heading = np.unwrap(np.arctan2(tangents[:, 1], tangents[:, 0]))
    if len(heading) <= 2 * half:
        return np.empty(0)
    return np.asarray((heading[2 * half :] - heading[: -2 * half]) / (2 * half * step))


@dataclass
class NearestOnPolyline:
    """Exact nearest-point queries against one polyline, for many query points at once.

    The segments are bucketed in a uniform grid once; each query scans the rings of cells
    around it until no unseen segment can be closer (:mod:`geoops.kernels`), so a point by one
    branch of a loop or crossing is never measured against the other.

    Examples
    --------
    >>> line = np.column_stack([np.linspace(0, 10, 101), np.zeros(101)])
    >>> q = NearestOnPolyline(line)
    >>> d, s, side = q.query(np.array([[2.55, 1.0], [5.0, -0.5]]))
    >>> d.round(6).tolist(), s.round(6).tolist(), side.tolist()
    ([1.0, 0.5], [2.55, 5.0], [1.0, -1.0])
    """

    xy: Array
    _s: Array = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self.xy = np.ascontiguousarray(self.xy, dtype=np.float64)
        if len(self.xy) >= 2:
            #: the kernels' view of the line (see :func:`geoops.kernels.closest`)
            self.poly, self.geo, self.grid = kernels_clean.index(self.xy)
            self._s = self.poly[:, kernels.ARC]
        else:
            self._s = arc_length(self.xy)

    def __getstate__(self) -> dict[str, Array]:
        # only the line: the derived arrays and bucket grids are rebuilt where they are first
        # used, which costs less than sending them between processes (they are larger than
        # the line), and spreads the rebuilding over the workers that query
        return {"xy": self.xy}

    def __setstate__(self, state: dict[str, Array]) -> None:
        self.xy = state["xy"]

    def __getattr__(self, name: str) -> Any:
        # called only for attributes not set: after unpickling, build them on first use
        if name.startswith("__") or "_s" in self.__dict__ or "xy" not in self.__dict__:
            raise AttributeError(name)
        self.__post_init__()
        return getattr(self, name)

    @property
    def length(self) -> float:
        return float(self._s[-1])

    def query(self, pts: Array) -> tuple[Array, Array, Array]:
        """Distance to the line, arc-length position of the nearest point, and side.

        Returns
        -------
        dist, s, side
            ``side`` is +1 when the point lies left of the line (in vertex order), else -1.
        """
        dist, s, side, _ = self.nearest(pts)
        return dist, s, side

    def _closest(self, pts: Array, limit: float = np.inf) -> tuple[Array, Array, Array]:
        """Squared distance, segment and fraction along it of the closest point (inf, 0, 0
        where nothing lies within ``limit``)."""
        if len(pts) == 0:
            return np.empty(0), np.empty(0, dtype=np.int64), np.empty(0)
        pts = np.ascontiguousarray(pts, dtype=np.float64)
        return kernels.closest(pts, self.poly, self.geo, self.grid, float(limit))

    def distance_and_position(
        self, pts: Array, limit: float = np.inf
    ) -> tuple[Array, Array]:
        """Distance to the line and arc-length position of the nearest point (the lean form
        of :meth:`query`). Points with nothing within ``limit`` get an infinite distance
        (and position 0), found faster than the exact answer."""
        if len(self.xy) < 2:
            d, s, _ = self.query(pts)
            return np.where(d <= limit, d, np.inf), s
        d2, seg, t = self._closest(pts, limit)
        rows = self.poly[seg]
        return np.sqrt(d2), rows[:, kernels.ARC] + t * rows[:, kernels.SEG_LEN]

    def nearest(self, pts: Array) -> tuple[Array, Array, Array, Array]:
        """Like :meth:`query`, plus the nearest points themselves, ``(m, 2)``."""
        m = len(pts)
        if len(self.xy) < 2:
            d = np.hypot(*(pts - self.xy[0]).T)
            foot0 = np.broadcast_to(self.xy[0], pts.shape).copy()
            return d, np.zeros(m), np.ones(m), foot0
        d2, seg, t = self._closest(pts)
        rows = self.poly[seg]
        ax, ay, abx, aby = (rows[:, c] for c in (kernels.X, kernels.Y, kernels.ABX, kernels.ABY))
        foot = np.column_stack([ax + t * abx, ay + t * aby])
        s = rows[:, kernels.ARC] + t * rows[:, kernels.SEG_LEN]
        cross = abx * (pts[:, 1] - ay) - aby * (pts[:, 0] - ax)
        side = np.where(cross >= 0, 1.0, -1.0)
        return np.sqrt(d2), s, side, foot


def box_neighbours(lines: list[Array], reach: float) -> tuple[np.ndarray, np.ndarray]:
    """Pairs ``i < j`` of lines whose bounding boxes come within ``reach`` of each other (a
    superset of the lines that do), from an STRtree of the boxes.

    Examples
    --------
    >>> a = np.array([[0.0, 0.0], [1.0, 0.0]])
    >>> i, j = box_neighbours([a, a + [0.0, 2.0], a + [0.0, 9.0]], 2.5)
    >>> list(zip(i.tolist(), j.tolist()))
    [(0, 1)]
    """
    lo = np.array([xy.min(axis=0) for xy in lines])
    hi = np.array([xy.max(axis=0) for xy in lines])
    tree = shapely.STRtree(shapely.box(lo[:, 0], lo[:, 1], hi[:, 0], hi[:, 1]))
    lo, hi = lo - reach, hi + reach
    left, right = tree.query(shapely.box(lo[:, 0], lo[:, 1], hi[:, 0], hi[:, 1]))
    keep = left < right
    return left[keep].astype(np.int64), right[keep].astype(np.int64)


def polyline_set(indexes: list[NearestOnPolyline]) -> tuple[Any, ...]:
    """Many indexed lines (two or more vertices each) as one set of concatenated arrays, for
    kernels that visit many pairs of lines in one call (see
    :func:`geoops.kernels.spacing_profiles`, which documents the layout)."""
    if any(len(q.xy) < 2 for q in indexes):
        raise ValueError("every line of a polyline set needs two or more vertices")
    cells = [q.grid[4] for q in indexes]

    def starts(counts: list[int]) -> np.ndarray:
        return np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)

    return (
        starts([len(q.xy) for q in indexes]),
        # the search reads the columns up to INV_DEN only
        np.ascontiguousarray(np.concatenate([q.poly[:, : kernels.INV_DEN + 1] for q in indexes]),
                             dtype=np.float64),
        np.ascontiguousarray(np.array([q.geo for q in indexes], dtype=np.float64)),
        np.ascontiguousarray(np.array([q.grid[:4] for q in indexes], dtype=np.int64)),
        starts([len(c) for c in cells]),
        np.ascontiguousarray(np.concatenate(cells), dtype=np.int32),
    )
