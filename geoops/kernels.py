"""Compiled geometry kernels for the solver's hot path (numba).

The pair solver asks, tens of millions of times per large layer, for the point of a densely
sampled polyline nearest to a predicted front-axle position. A k-d tree answers with the
nearest *vertex* at about 0.2 microseconds a point plus numpy's per-call cost; this kernel
answers with the exact nearest point on the polyline, from a uniform grid of buckets over the
line's segments, in a fraction of that and with no per-call array temporaries.

Exactness (the grid search): each segment is listed in every cell its bounding box overlaps,
so after the rings of cells up to ``r`` around the query's cell have been scanned, every
segment that enters that square has been measured; one that was not lies wholly outside it,
at least as far from the query as the square's nearest side. Once that side is farther than
the best distance found, no unseen segment can be closer (a near query is settled in its own
cell). ``tests/test_curves.py`` checks the result against GEOS (shapely) distances and
positions, on lines that loop and cross themselves.

How the kernels become machine code (built ahead of time at set-up, or by numba at import)
is :mod:`geoops.kernel_loader`'s business; forked workers inherit them either way.
"""

from __future__ import annotations

import numpy as np

from .kernel_loader import compiled, inline

#: largest number of grid cells per vertex of the line (bounds the grid's memory on long,
#: winding lines: the cell grows instead)
CELLS_PER_VERTEX = 16


@inline
def _cell_span(a, b, origin, cell):
    """First and last cell index, along one axis, of the span between ``a`` and ``b``."""
    return int((min(a, b) - origin) / cell), int((max(a, b) - origin) / cell)


@compiled("Tuple((int64, int64, int32[::1], int32[::1]))(float64[::1], float64[::1], "
           "float64, float64, float64)")
def build_grid(x, y, x0, y0, cell):
    """Bucket the segments of the polyline of vertices ``x, y`` (two or more; ``x0, y0`` their
    least coordinates): grid size (nx, ny), CSR ``start`` offsets per cell and, in cell
    order, the index of each segment in every cell its bounding box overlaps (32-bit: the
    grids are the largest arrays a cleaned rut keeps)."""
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
    counts = np.zeros(nx * ny + 1, dtype=np.int32)
    for sg in range(n - 1):
        ax, bx = _cell_span(x[sg], x[sg + 1], x0, cell)
        ay, by = _cell_span(y[sg], y[sg + 1], y0, cell)
        for cy in range(ay, by + 1):
            for cx in range(ax, bx + 1):
                counts[cy * nx + cx + 1] += 1
    start = np.cumsum(counts).astype(np.int32)
    fill = start[:-1].copy()
    items = np.empty(start[-1], dtype=np.int32)
    for sg in range(n - 1):
        ax, bx = _cell_span(x[sg], x[sg + 1], x0, cell)
        ay, by = _cell_span(y[sg], y[sg + 1], y0, cell)
        for cy in range(ay, by + 1):
            for cx in range(ax, bx + 1):
                c = cy * nx + cx
                items[fill[c]] = sg
                fill[c] += 1
    return nx, ny, start, items


#: rings of the fine grid scanned before the search moves to the coarse one
FINE_RINGS = 2
#: coarse cell, in fine cells
COARSE = 8
#: how much farther (relative, and in metres) than the best distance found the scanned square's
#: nearest side must lie before the search stops: a margin for the rounding of cell positions
STOP_MARGIN_REL = 1e-9
STOP_MARGIN_M = 1e-9


#: the columns of a polyline's array (see :func:`closest`)
X, Y, ABX, ABY, INV_DEN, ARC, SEG_LEN = range(7)


@inline
def _search(px, py, poly, x0, y0, size, gnx, gny, cells, st, it, most_rings, limit, best,
            best_seg, best_t):
    """Scan rings of one grid's cells around ``(px, py)``, projecting the query onto each
    segment listed there, until no unseen segment can be closer (or none can be within
    ``limit``, or ``most_rings`` rings beyond the first have been scanned). The grid is
    ``gnx`` by ``gny`` cells of ``size``; ``cells[st + c]`` is where cell ``c``'s segments
    start in ``cells[it:]``. Returns the best (squared distance, segment, fraction) and
    whether it is final."""
    fx = (px - x0) / size
    fy = (py - y0) / size
    # far off the grid (or not a number): clamped so that the cell index stays an int
    fx = min(max(fx, -1e9), 1e9) if np.isfinite(fx) else 0.0
    fy = min(max(fy, -1e9), 1e9) if np.isfinite(fy) else 0.0
    cx = int(np.floor(fx))
    cy = int(np.floor(fy))
    # Chebyshev distance (in cells) from the query's cell to the grid
    r = max(0, -cx, cx - (gnx - 1), -cy, cy - (gny - 1))
    last = r + most_rings
    while r <= last:
        for gy in range(max(cy - r, 0), min(cy + r, gny - 1) + 1):
            edge_row = gy == cy - r or gy == cy + r
            gx = max(cx - r, 0) if edge_row else cx - r
            gx_end = min(cx + r, gnx - 1)
            while gx <= gx_end:
                if gx >= 0:
                    c = st + gy * gnx + gx
                    for k in range(it + cells[c], it + cells[c + 1]):
                        sg = cells[k]
                        ax = poly[sg, X]
                        ay = poly[sg, Y]
                        vx = poly[sg, ABX]
                        vy = poly[sg, ABY]
                        t = ((px - ax) * vx + (py - ay) * vy) * poly[sg, INV_DEN]
                        t = min(max(t, 0.0), 1.0)
                        dx = px - ax - t * vx
                        dy = py - ay - t * vy
                        d2 = dx * dx + dy * dy
                        if d2 < best or (d2 == best and sg < best_seg):
                            best = d2
                            best_seg = sg
                            best_t = t
                # edge rows: every cell; inner rows: the ring's two side cells
                if edge_row or r == 0:
                    gx += 1
                elif gx == cx - r:
                    gx += 2 * r
                else:
                    gx = gx_end + 1
        if cx - r <= 0 and cx + r >= gnx - 1 and cy - r <= 0 and cy + r >= gny - 1:
            return best, best_seg, best_t, True  # the whole grid has been scanned
        if best < np.inf or limit < np.inf:
            # every point within this distance of the query lies in the rings scanned
            reach = size * min(fx - (cx - r), cx + r + 1 - fx, fy - (cy - r), cy + r + 1 - fy)
            if reach > min(np.sqrt(best), limit) * (1.0 + STOP_MARGIN_REL) + STOP_MARGIN_M:
                return best, best_seg, best_t, True
        r += 1
    return best, best_seg, best_t, False


@inline
def _nearest(px, py, poly, geo, grid, limit):
    """Squared distance, segment and fraction along it of the point of the polyline nearest to
    ``(px, py)`` (see :func:`closest`); inf (segment 0) when nothing lies within ``limit``."""
    x0, y0, cell = geo
    nx, ny, nx2, ny2, cells = grid
    items = nx * ny + 1
    start2 = items + cells[nx * ny]
    best, best_seg, best_t, done = _search(
        px, py, poly, x0, y0, cell, nx, ny, cells, 0, items, FINE_RINGS, limit, np.inf, 0, 0.0)
    if not done:
        best, best_seg, best_t, done = _search(
            px, py, poly, x0, y0, cell * COARSE, nx2, ny2, cells, start2,
            start2 + nx2 * ny2 + 1, 1 << 40, limit, best, best_seg, best_t)
    if best > limit * limit:
        return np.inf, 0, 0.0
    return best, best_seg, best_t


#: the numba types of a polyline's array and of its two bucket grids, as passed to the kernels
_POLY = "float64[:, ::1]"
_GEO = "UniTuple(float64, 3)"
_GRID = "Tuple((int64, int64, int64, int64, int32[::1]))"


@compiled(f"Tuple((float64[::1], int64[::1], float64[::1]))(float64[:, ::1], {_POLY}, {_GEO}, "
           f"{_GRID}, float64)")
def closest(pts, poly, geo, grid, limit):
    """Per query point: squared distance to the polyline, the segment holding the nearest
    point and the fraction along it (ties go to the lower segment); a query with nothing
    within ``limit`` gets an infinite distance (segment 0, fraction 0), found without
    searching farther (pass inf for no limit).

    ``poly`` holds one row per vertex (columns :data:`X` ... :data:`SEG_LEN`): its ``x, y``,
    the vector ``abx, aby`` to the next vertex, the inverse of its squared length (0 for a
    zero-length segment), the vertex's arc length and the segment's length (the last row's
    segment columns are 0); ``geo`` the grid origin ``x0, y0`` and the fine cell. The segments
    are bucketed twice from the same origin (``grid``): ``nx, ny`` fine cells and ``nx2, ny2``
    cells :data:`COARSE` times larger, and one array that holds the fine grid's cell starts
    (``nx * ny + 1``), its bucketed segments, then the same two for the coarse grid (see
    :func:`build_grid`). A query still unresolved after :data:`FINE_RINGS` rings of fine
    cells (far from the line) continues on the coarse grid, where fewer, fuller cells cover
    the same distance. One array per line, not one per column, because every array a helper
    is handed costs a reference count in and out per query."""
    m = pts.shape[0]
    out_d2 = np.empty(m)
    out_seg = np.empty(m, dtype=np.int64)
    out_t = np.empty(m)
    for q in range(m):
        out_d2[q], out_seg[q], out_t[q] = _nearest(pts[q, 0], pts[q, 1], poly, geo, grid, limit)
    return out_d2, out_seg, out_t


@inline
def _landing(px, py, poly, geo, grid, usable, step, edge):
    """Where a predicted front point lands on the target polyline: whether it counts (its
    nearest point more than ``edge`` from either end, on a sample marked ``usable``, the
    target's samples ``step`` apart), the squared distance, the segment and fraction along it
    of the nearest point, and its arc-length position."""
    d2, sg, t = _nearest(px, py, poly, geo, grid, np.inf)
    s = poly[sg, ARC] + t * poly[sg, SEG_LEN]
    at = min(max(int(np.rint(s / step)), 0), usable.shape[0] - 1)
    valid = s > edge and s < poly[poly.shape[0] - 1, ARC] - edge and usable[at]
    return valid, d2, sg, t, s


@compiled(f"Tuple((float64, boolean[::1], float64[::1]))(float64[:, ::1], float64[:, ::1], "
          f"boolean[::1], {_POLY}, {_GEO}, {_GRID}, float64[:, ::1], boolean[::1], float64)")
def alignment(xy, tangents, has_data, poly, geo, grid, other_tangents, other_has_data,
              other_step):
    """How one track (points ``xy``, unit ``tangents``, ``has_data`` per sample) lies along
    another (the polyline of ``poly``/``geo``/``grid``, its samples ``other_step`` apart):
    the mean dot product of the tangents where the track overlaps the other, the mask of that
    overlap (samples with data whose nearest point on the other lies more than two samples
    from either end, on a sample with data) and every sample's distance to the other."""
    m = xy.shape[0]
    dist = np.empty(m)
    inside = np.zeros(m, dtype=np.bool_)
    last_t = other_tangents.shape[0] - 1
    total = 0.0
    count = 0
    for q in range(m):
        valid, d2, _seg, _frac, s = _landing(xy[q, 0], xy[q, 1], poly, geo, grid,
                                             other_has_data, other_step, 2.0 * other_step)
        dist[q] = np.sqrt(d2)
        if not (valid and has_data[q]):
            continue
        inside[q] = True
        j = min(max(int(np.rint(s / other_step)), 0), last_t)
        total += tangents[q, 0] * other_tangents[j, 0] + tangents[q, 1] * other_tangents[j, 1]
        count += 1
    return (total / count if count else 0.0), inside, dist


#: what :func:`misfit_sums` accumulates per wheelbase: plain, with the Gauss-Newton sums, or
#: with the best lateral shift profiled out
PLAIN, NEWTON, PROFILED = 0, 1, 2
#: its output columns
USED, SUM_SQ, GE, GG, HE, GH, HH, SHIFT = range(8)


@compiled(f"float64[:, ::1](float64[:, ::1], float64[:, ::1], float64[:, ::1], float64, "
           f"float64[::1], int64, {_POLY}, {_GEO}, {_GRID}, boolean[::1], float64, float64, "
           f"float64, float64)")
def misfit_sums(base, u, nrm, shift, lengths, mode, poly, geo, grid, usable, step, edge, cap2,
                shift_max):
    """Per wheelbase L in ``lengths``: sums over the rear samples of the misses of the
    predicted front points ``base + shift * nrm + L * u`` against the target polyline.

    A prediction counts (column USED) where its nearest point lies on the target more than
    ``edge`` from either end, on a sample marked ``usable`` (the target is ``step`` apart
    samples); SUM_SQ sums its squared distance truncated at ``cap2``. NEWTON adds, over the
    untruncated ones, the sums of e*g, g*g, h*e, g*h and h*h, with e the signed miss along
    the target's normal n_t, g = u . n_t and h = nrm . n_t (the miss's slopes in L and in a
    lateral shift). PROFILED replaces the squared distance by the squared lateral miss along
    ``nrm`` less the best constant shift (their mean over the untruncated predictions,
    within +- ``shift_max``), reported in column SHIFT."""
    m = base.shape[0]
    k = lengths.shape[0]
    out = np.zeros((k, 8))
    lateral = np.empty(m)
    ok = np.empty(m, dtype=np.bool_)
    for j in range(k):
        L = lengths[j]
        close_sum = 0.0
        close_n = 0
        for i in range(m):
            px = base[i, 0] + shift * nrm[i, 0] + L * u[i, 0]
            py = base[i, 1] + shift * nrm[i, 1] + L * u[i, 1]
            valid, d2, sg, t, _at = _landing(px, py, poly, geo, grid, usable, step, edge)
            ok[i] = valid
            if not valid:
                continue
            out[j, USED] += 1.0
            inner = d2 < cap2
            fx = poly[sg, X] + t * poly[sg, ABX]
            fy = poly[sg, Y] + t * poly[sg, ABY]
            if mode == PROFILED:
                lateral[i] = (fx - px) * nrm[i, 0] + (fy - py) * nrm[i, 1]
                if inner:
                    close_sum += lateral[i]
                    close_n += 1
                continue
            out[j, SUM_SQ] += min(d2, cap2)
            if mode == NEWTON and inner:
                inv = 1.0 / max(poly[sg, SEG_LEN], 1e-12)
                tnx = -poly[sg, ABY] * inv
                tny = poly[sg, ABX] * inv
                e = (px - fx) * tnx + (py - fy) * tny
                g = u[i, 0] * tnx + u[i, 1] * tny
                h = nrm[i, 0] * tnx + nrm[i, 1] * tny
                out[j, GE] += e * g
                out[j, GG] += g * g
                out[j, HE] += h * e
                out[j, GH] += g * h
                out[j, HH] += h * h
        if mode == PROFILED:
            c = close_sum / max(close_n, 1)
            c = min(max(c, -shift_max), shift_max)
            out[j, SHIFT] = c
            for i in range(m):
                if ok[i]:
                    r = lateral[i] - c
                    out[j, SUM_SQ] += min(r * r, cap2)
    return out


@inline
def _best_on_grid(base, u, nrm, shift, lengths, poly, geo, grid, usable, step, edge, cap2, tvar,
                  need):
    """The wheelbase of ``lengths`` with the least misfit: :func:`misfit_sums`' PLAIN mean
    truncated squared miss less the tangent-noise term ``L^2 tvar``, infinite where fewer
    than ``need`` predictions count. Returns its index (-1 when none is finite; the first of
    equals) and the misfit per wheelbase, where a wheelbase that cannot be the best is left
    infinite, unfinished.

    That cut is exact: after some predictions, the squared misses summed so far over the most
    predictions that can count (all ``m``), less ``L^2 tvar``, is a lower bound of the
    wheelbase's misfit; once it exceeds the best misfit found, the rest is not needed. A
    wrong wheelbase sends predictions off the target, each truncated miss a large share of a
    good fit's whole sum, so most are cut after a few predictions."""
    m = base.shape[0]
    k = lengths.shape[0]
    mse = np.full(k, np.inf)
    best = np.inf
    best_j = -1
    for j in range(k):
        L = lengths[j]
        noise = L * L * tvar
        total = 0.0
        used = 0
        cut = False
        for i in range(m):
            px = base[i, 0] + shift * nrm[i, 0] + L * u[i, 0]
            py = base[i, 1] + shift * nrm[i, 1] + L * u[i, 1]
            valid, d2, _seg, _frac, _at = _landing(px, py, poly, geo, grid, usable, step, edge)
            if not valid:
                continue
            used += 1
            total += min(d2, cap2)
            if total / m - noise > best:
                cut = True
                break
        if cut or used < need:
            continue
        mse[j] = total / used - noise
        if mse[j] < best:
            best = mse[j]
            best_j = j
    return best_j, mse


#: Gauss-Newton evaluations at most per fit, and the relative change of the wheelbase at which
#: it stops (see :func:`newton_fit`)
NEWTON_STEPS = 6
NEWTON_TOL = 1e-4


@inline
def _newton_fit(base, u, nrm, shift0, start, lo, hi, free_shift, poly, geo, grid, usable, step,
                edge, cap2, shift_max, tvar, need):
    lengths = np.empty(1)
    x0 = start
    x1 = 0.0
    b0 = start
    b1 = 0.0
    best_len = np.nan
    best_mse = np.inf
    best_used = 0.0
    best_shift = shift0
    for _ in range(NEWTON_STEPS):
        shift = shift0 + (x1 if free_shift else 0.0)
        lengths[0] = x0
        sums = misfit_sums(base, u, nrm, shift, lengths, NEWTON, poly, geo, grid, usable, step,
                           edge, cap2, shift_max)
        used = sums[0, USED]
        mse = np.inf
        if used >= need:
            mse = sums[0, SUM_SQ] / max(used, 1.0) - x0 * x0 * tvar
        if mse < best_mse:
            b0, b1 = x0, x1
            best_len, best_mse, best_used, best_shift = x0, mse, used, shift
        elif np.isfinite(best_mse):
            # worse than the best point: go half way back to it
            x0 = 0.5 * (x0 + b0)
            x1 = 0.5 * (x1 + b1)
            continue
        if used < need:
            break
        g0 = 2.0 * sums[0, GE] / used - 2.0 * x0 * tvar
        h00 = 2.0 * sums[0, GG] / used - 2.0 * tvar
        # a flat or concave misfit in the wheelbase (a straight) steps to the bracket's end
        h00 = max(h00, 1e-12 * max(abs(g0), 1e-12))
        if free_shift:
            g1 = 2.0 * sums[0, HE] / used
            h01 = 2.0 * sums[0, GH] / used
            h11 = 2.0 * sums[0, HH] / used
            det = h00 * h11 - h01 * h01
            if det == 0.0:
                break
            s0 = -(h11 * g0 - h01 * g1) / det
            s1 = -(h00 * g1 - h01 * g0) / det
        else:
            s0 = -g0 / h00
            s1 = 0.0
        n0 = min(max(b0 + s0, lo), hi)
        n1 = 0.0
        if free_shift:
            n1 = min(max(shift0 + b1 + s1, -shift_max), shift_max) - shift0
        if abs(n0 - b0) <= NEWTON_TOL * max(b0, 1.0) and abs(n1 - b1) <= NEWTON_TOL * max(
            b0, 1.0
        ):
            break
        x0 = n0
        x1 = n1
    return best_len, best_mse, best_used, best_shift


@compiled(f"UniTuple(float64, 4)(float64[:, ::1], float64[:, ::1], float64[:, ::1], float64, "
           f"float64, float64, float64, boolean, {_POLY}, {_GEO}, {_GRID}, boolean[::1], "
           f"float64, float64, float64, float64, float64, int64)")
def newton_fit(base, u, nrm, shift0, start, lo, hi, free_shift, poly, geo, grid, usable, step,
               edge, cap2, shift_max, tvar, need):
    """Refine a wheelbase (and, with ``free_shift``, a lateral shift added to ``shift0``) by
    Gauss-Newton steps on the truncated misfit of :func:`misfit_sums` (minus the expected
    tangent-noise term ``L^2 tvar``), from ``start``, the wheelbase kept within ``[lo, hi]``
    and the total shift within ``shift_max``. A step that makes the fit worse is halved back
    towards the best point. Returns the best (wheelbase, mse, samples used, total shift)
    seen; mse is inf when fewer than ``need`` samples count."""
    return _newton_fit(base, u, nrm, shift0, start, lo, hi, free_shift, poly, geo, grid, usable,
                       step, edge, cap2, shift_max, tvar, need)


@inline
def _travel_and_left(along, tangents):
    """Unit vectors of travel (``along`` = +1 or -1 times the ``tangents``) and a quarter turn
    to their left."""
    u = along * tangents
    n = np.empty_like(u)
    n[:, 0] = -u[:, 1]
    n[:, 1] = u[:, 0]
    return u, n


@compiled(f"UniTuple(float64, 4)(float64[:, ::1], float64[:, ::1], float64[:, ::1], "
          f"float64[:, ::1], float64, float64[::1], {_POLY}, {_GEO}, {_GRID}, boolean[::1], "
          f"float64, float64, float64, float64, float64, int64, int64)")
def fit_direction(coarse_base, coarse_tangents, fine_base, fine_tangents, along, lengths, poly,
                  geo, grid, usable, step, edge, cap2, shift_max, tvar, coarse_need, fine_need):
    """One hypothesis's wheelbase without a lateral shift, in one call: the rear samples
    predict one wheelbase ``along`` (+1 or -1) their tangents; the coarse samples place it on
    the grid ``lengths`` (:func:`_best_on_grid`), the fine ones refine it between the grid
    neighbours (:func:`newton_fit`). Returns (wheelbase, mse, samples used, shift), NaN and
    inf when no grid wheelbase has enough samples."""
    coarse_u, coarse_n = _travel_and_left(along, coarse_tangents)
    j, _mse = _best_on_grid(coarse_base, coarse_u, coarse_n, 0.0, lengths, poly, geo, grid,
                            usable, step, edge, cap2, tvar, coarse_need)
    if j < 0:
        return np.nan, np.inf, 0.0, 0.0
    k = lengths.shape[0]
    fine_u, fine_n = _travel_and_left(along, fine_tangents)
    return _newton_fit(fine_base, fine_u, fine_n, 0.0, lengths[j], lengths[max(j - 1, 0)],
                       lengths[min(j + 1, k - 1)], False, poly, geo, grid, usable, step, edge,
                       cap2, shift_max, tvar, fine_need)


#: the numba types of a set of polylines (see :func:`spacing_profiles`)
_SET = "int64[::1], float64[:, ::1], float64[:, ::1], int64[:, ::1], int64[::1], int32[::1]"


@compiled(f"UniTuple(float64[::1], 2)(int64[::1], int64[::1], {_SET}, int64, int64, float64, "
           f"float64)")
def spacing_profiles(first, second, vstart, polys, geos, sizes, cstart, cells, glance, samples,
                     reach, q):
    """For each pair ``(first[k], second[k])`` of lines of a set: the share of the first's
    sampled vertices within ``reach`` of the second, and the ``q``-th percentile (numpy's
    linear interpolation) of the distances of those within (inf when none is).

    Every ``len // glance``-th vertex is looked at first; when none of those is within reach
    the pair gets (0, inf) without the full profile over every ``len // samples``-th vertex.
    The set (``geoops.curves.polyline_set``) holds each line's arrays of :func:`closest`
    concatenated: ``polys`` its rows from ``vstart`` (the first :data:`INV_DEN` + 1 columns
    are enough), ``geos`` one row per line, ``sizes`` one row of (nx, ny, nx2, ny2) per line,
    ``cells`` its cell array from ``cstart``."""
    m = first.shape[0]
    shared = np.zeros(m)
    near = np.full(m, np.inf)
    for k in range(m):
        a = first[k]
        b = second[k]
        va0 = vstart[a]
        na = vstart[a + 1] - va0
        poly = polys[vstart[b]:vstart[b + 1]]
        geo = (geos[b, 0], geos[b, 1], geos[b, 2])
        grid = (sizes[b, 0], sizes[b, 1], sizes[b, 2], sizes[b, 3],
                cells[cstart[b]:cstart[b + 1]])
        found = False
        for i in range(va0, va0 + na, max(na // glance, 1)):
            d2, _seg, _frac = _nearest(polys[i, X], polys[i, Y], poly, geo, grid, reach)
            if np.sqrt(d2) <= reach:
                found = True
                break
        if not found:
            continue
        stride = max(na // samples, 1)
        total = 0
        within = np.empty((na + stride - 1) // stride)
        count = 0
        for i in range(va0, va0 + na, stride):
            d2, _seg, _frac = _nearest(polys[i, X], polys[i, Y], poly, geo, grid, reach)
            total += 1
            d = np.sqrt(d2)
            if d <= reach:
                within[count] = d
                count += 1
        shared[k] = count / total
        if count:
            vals = np.sort(within[:count])
            pos = q / 100.0 * (count - 1)
            lo = int(pos)
            hi = min(lo + 1, count - 1)
            lo_v = vals[lo]
            hi_v = vals[hi]
            t = pos - lo
            near[k] = hi_v - (hi_v - lo_v) * (1.0 - t) if t >= 0.5 else lo_v + (hi_v - lo_v) * t
    return shared, near
