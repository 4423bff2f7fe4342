"""Compiled geometry kernels for the solver's hot path (numba, compiled ahead of first use).

The pair solver asks, tens of millions of times per large layer, for the point of a densely
sampled polyline nearest to a predicted front-axle position. A k-d tree answers with the
nearest *vertex* at about 0.2 microseconds a point plus numpy's per-call cost; this kernel
answers with the exact nearest point on the polyline, from a uniform grid of buckets over the
line's vertices, in a fraction of that and with no per-call array temporaries.

Exactness (the grid search): after the rings of cells up to ``r`` around the query's cell have
been scanned, every vertex within ``r * cell`` of the query has been seen. The closest point of
any segment lies within half the segment's length of one of its two end vertices, so once
``r * cell`` reaches the best distance found plus half the longest segment, no unseen segment
can be closer. ``tests/test_curves.py`` checks the result against GEOS (shapely) distances and
positions, on lines that loop and cross themselves.

The functions are compiled with explicit signatures when this module is imported and cached on
disk (``cache=True``), so a process pays the compilation once per installation (a few seconds)
and then only loads them; forked workers inherit them compiled.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from numba import njit


def _compiled(signature: str) -> Callable[[Callable[..., Any]], Any]:
    """Compile now for ``signature``, cached on disk where numba finds a writable place
    (``NUMBA_CACHE_DIR``, next to this file, or the user's cache); in memory otherwise."""

    def deco(fn: Callable[..., Any]) -> Any:
        try:
            return njit(signature, cache=True, nogil=True)(fn)
        except RuntimeError:  # no writable cache location
            return njit(signature, nogil=True)(fn)

    return deco

#: largest number of grid cells per vertex of the line (bounds the grid's memory on long,
#: winding lines: the cell grows instead)
CELLS_PER_VERTEX = 16


def grid_cell(xy: np.ndarray, longest_segment: float) -> float:
    """Cell size (m) for a polyline's bucket grid: about two vertex spacings, at least half the
    longest segment (so the search stops within a ring or two of the nearest vertex), and
    large enough that the grid has at most :data:`CELLS_PER_VERTEX` cells per vertex."""
    n = len(xy)
    span = np.ptp(xy, axis=0) if n else np.zeros(2)
    typical = float(np.sum(np.hypot(*np.diff(xy, axis=0).T))) / max(n - 1, 1)
    area_cell = float(np.sqrt(max(span[0], 1e-9) * max(span[1], 1e-9) / (CELLS_PER_VERTEX * n)))
    linear_cell = float(max(span.max(), 1e-9)) / (CELLS_PER_VERTEX * n)
    cell = max(2.0 * typical, 0.5 * longest_segment, area_cell, linear_cell)
    return cell if cell > 0 and np.isfinite(cell) else 1.0


@_compiled("Tuple((int64, int64, int64[::1], int64[::1]))(float64[::1], float64[::1], "
           "float64, float64, float64)")
def build_grid(x, y, x0, y0, cell):
    """Bucket the vertices: grid size (nx, ny), CSR ``start`` offsets per cell and the vertex
    indices in cell order."""
    n = len(x)
    nx = 1
    ny = 1
    for i in range(n):
        cx = int((x[i] - x0) / cell)
        cy = int((y[i] - y0) / cell)
        if cx + 1 > nx:
            nx = cx + 1
        if cy + 1 > ny:
            ny = cy + 1
    counts = np.zeros(nx * ny + 1, dtype=np.int64)
    cells = np.empty(n, dtype=np.int64)
    for i in range(n):
        c = int((y[i] - y0) / cell) * nx + int((x[i] - x0) / cell)
        cells[i] = c
        counts[c + 1] += 1
    start = np.cumsum(counts)
    fill = start[:-1].copy()
    items = np.empty(n, dtype=np.int64)
    for i in range(n):
        c = cells[i]
        items[fill[c]] = i
        fill[c] += 1
    return nx, ny, start, items


@njit(nogil=True, inline="always")
def _scan_cell(c, px, py, x, y, abx, aby, inv_den, start, items, half_longest, best, best_seg,
               best_t):
    """Project the query onto both segments of every vertex bucketed in cell ``c`` that is
    near enough to hold a closer point (within the best distance plus half a segment)."""
    nseg = len(abx)
    for k in range(start[c], start[c + 1]):
        v = items[k]
        vx = px - x[v]
        vy = py - y[v]
        if best < np.inf:
            bound = np.sqrt(best) + half_longest
            if vx * vx + vy * vy > bound * bound:
                continue
        for sg in range(v - 1, v + 1):
            if sg < 0 or sg >= nseg:
                continue
            t = ((px - x[sg]) * abx[sg] + (py - y[sg]) * aby[sg]) * inv_den[sg]
            if t < 0.0:
                t = 0.0
            elif t > 1.0:
                t = 1.0
            dx = px - x[sg] - t * abx[sg]
            dy = py - y[sg] - t * aby[sg]
            d2 = dx * dx + dy * dy
            if d2 < best or (d2 == best and sg < best_seg):
                best = d2
                best_seg = sg
                best_t = t
    return best, best_seg, best_t


@njit(nogil=True, inline="always")
def _ring(r, cx, cy, nx, ny, px, py, x, y, abx, aby, inv_den, start, items, half_longest, best,
          best_seg, best_t):
    """Scan the cells at Chebyshev distance ``r`` from cell ``(cx, cy)`` of one grid."""
    ylo = max(cy - r, 0)
    yhi = min(cy + r, ny - 1)
    xlo = max(cx - r, 0)
    xhi = min(cx + r, nx - 1)
    for gy in range(ylo, yhi + 1):
        if gy == cy - r or gy == cy + r:
            for gx in range(xlo, xhi + 1):
                best, best_seg, best_t = _scan_cell(
                    gy * nx + gx, px, py, x, y, abx, aby, inv_den, start, items, half_longest,
                    best, best_seg, best_t)
        else:
            if 0 <= cx - r < nx:
                best, best_seg, best_t = _scan_cell(
                    gy * nx + cx - r, px, py, x, y, abx, aby, inv_den, start, items,
                    half_longest, best, best_seg, best_t)
            if r > 0 and 0 <= cx + r < nx:
                best, best_seg, best_t = _scan_cell(
                    gy * nx + cx + r, px, py, x, y, abx, aby, inv_den, start, items,
                    half_longest, best, best_seg, best_t)
    return best, best_seg, best_t


@njit(nogil=True, inline="always")
def _cell_of(p, origin, cell):
    """Cell coordinate (clamped far off the grid) and the position within it, in cells."""
    f = (p - origin) / cell
    if not np.isfinite(f):
        f = 0.0
    f = min(max(f, -1e9), 1e9)
    return int(np.floor(f)), f


#: rings of the fine grid scanned before the search moves to the coarse one
FINE_RINGS = 2
#: coarse cell, in fine cells
COARSE = 8


@_compiled("Tuple((float64[::1], int64[::1], float64[::1]))(float64[:, ::1], float64[::1], "
           "float64[::1], float64[::1], float64[::1], float64[::1], float64, float64, float64, "
           "float64, int64, int64, int64[::1], int64[::1], int64, int64, int64[::1], "
           "int64[::1])")
def closest(pts, x, y, abx, aby, inv_den, x0, y0, cell, half_longest, nx, ny, start, items,
            nx2, ny2, start2, items2):
    """Per query point: squared distance to the polyline, the segment holding the nearest
    point and the fraction along it (ties go to the lower segment).

    ``x, y`` are the ``n`` vertices; ``abx, aby, inv_den`` describe the ``n - 1`` segments
    (vector and inverse squared length, 0 for a zero-length segment). The vertices are
    bucketed twice from the same origin: in cells of ``cell`` (``nx, ny, start, items``) and
    of ``COARSE * cell`` (``nx2, ny2, start2, items2``); a query still unresolved after
    :data:`FINE_RINGS` rings of fine cells (far from the line) continues on the coarse grid,
    where fewer, fuller cells cover the same distance."""
    m = pts.shape[0]
    out_d2 = np.empty(m)
    out_seg = np.empty(m, dtype=np.int64)
    out_t = np.empty(m)
    for q in range(m):
        px = pts[q, 0]
        py = pts[q, 1]
        best = np.inf
        best_seg = 0
        best_t = 0.0
        done = False
        for level in range(2):
            size = cell if level == 0 else cell * COARSE
            gnx = nx if level == 0 else nx2
            gny = ny if level == 0 else ny2
            cx, fx = _cell_of(px, x0, size)
            cy, fy = _cell_of(py, y0, size)
            # Chebyshev distance (in cells) from the query's cell to the grid
            r = max(0, -cx, cx - (gnx - 1), -cy, cy - (gny - 1))
            first = r
            while True:
                if level == 0:
                    best, best_seg, best_t = _ring(
                        r, cx, cy, nx, ny, px, py, x, y, abx, aby, inv_den, start, items,
                        half_longest, best, best_seg, best_t)
                else:
                    best, best_seg, best_t = _ring(
                        r, cx, cy, nx2, ny2, px, py, x, y, abx, aby, inv_den, start2, items2,
                        half_longest, best, best_seg, best_t)
                if cx - r <= 0 and cx + r >= gnx - 1 and cy - r <= 0 and cy + r >= gny - 1:
                    done = True  # the whole grid has been scanned
                    break
                if best < np.inf:
                    # every point within this distance of the query lies in the rings scanned
                    reach = size * min(fx - (cx - r), cx + r + 1 - fx, fy - (cy - r),
                                       cy + r + 1 - fy)
                    if reach >= np.sqrt(best) + half_longest:
                        done = True
                        break
                r += 1
                if level == 0 and r - first > FINE_RINGS:
                    break
            if done:
                break
        out_d2[q] = best
        out_seg[q] = best_seg
        out_t[q] = best_t
    return out_d2, out_seg, out_t
