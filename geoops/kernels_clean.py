"""Compiled kernels for cleaning a rut (numba): resampling, Savitzky-Golay smoothing, the noise
estimate, tangents and their noise, and the polyline index of :mod:`geoops.kernels`.

:func:`geoops.clean.clean_line` does, per rut, a few dozen small array steps: one or two
resamplings, five Savitzky-Golay filters, a nearest-point search of every raw vertex, a noise
propagation. In numpy each step costs more in calls and temporaries than in arithmetic (about
0.7 ms a rut); here the whole chain is one call. The numpy versions in :mod:`geoops.curves`
remain for everything else, and the tests check both give the same numbers
(``tests/test_clean_kernels.py``).

The cleaning constants live here rather than in :mod:`geoops.clean` (which re-exports them):
numba bakes a module's globals into the compiled code, and both its on-disk cache and the
ahead-of-time build are keyed on the kernel files alone, so a constant changed elsewhere would
silently keep its old value.

Compiled like :mod:`geoops.kernels` (see :mod:`geoops.kernel_loader`).
"""

from __future__ import annotations

import math

import numpy as np

from .kernel_loader import compiled, inline
from .kernels import (
    _GEO,
    _GRID,
    _POLY,
    ABX,
    ABY,
    ARC,
    CELLS_PER_VERTEX,
    COARSE,
    INV_DEN,
    SEG_LEN,
    X,
    Y,
    _nearest,
    build_grid,
)

#: smallest and largest smoothing windows, metres  # common practice: a few tyre footprints
MIN_WINDOW_M = 1.0
MAX_WINDOW_M = 6.0
#: position smoothing window as a share of the tangent window: positions need less smoothing
#: than directions, and heavy smoothing pulls curve extremes inwards
POSITION_WINDOW_SHARE = 0.5
#: order of the local polynomial fits
ORDER = 3

#: what :func:`clean_track` returns besides the arrays: its status
CLEANED, ZERO_LENGTH = 0, 1


@inline
def _arc_length(xy):
    n = xy.shape[0]
    s = np.empty(n)
    s[0] = 0.0
    acc = 0.0
    for i in range(1, n):
        acc += math.hypot(xy[i, 0] - xy[i - 1, 0], xy[i, 1] - xy[i - 1, 1])
        s[i] = acc
    return s


@inline
def _intervals(total, step):
    """How many equal intervals :func:`_resample` cuts a line of length ``total`` into."""
    return max(int(math.ceil(total / step - 1e-9)), 1)


@inline
def _resample(xy, s_raw, step):
    """:func:`geoops.curves.resample` of ``xy`` (arc length ``s_raw``): points and positions."""
    total = s_raw[-1]
    n = _intervals(total, step)
    s = np.linspace(0.0, total, n + 1)
    s0 = s_raw.copy()
    for i in range(1, len(s0)):
        if s0[i] < s0[i - 1]:
            s0[i] = s0[i - 1]
    pts = np.empty((n + 1, 2))
    pts[:, 0] = np.interp(s, s0, xy[:, 0])
    pts[:, 1] = np.interp(s, s0, xy[:, 1])
    return pts, s


@inline
def _odd_window(points, n, order):
    """:func:`geoops.curves._odd_window`: the window made odd, within the line, above the order."""
    w = min(points, n if n % 2 == 1 else n - 1)
    w = w if w % 2 == 1 else w - 1
    low = order + 2 if (order + 2) % 2 == 1 else order + 3
    return max(w, low)


@compiled("float64[:, ::1](int64, int64, int64)")
def savgol_matrix(window, order, deriv):
    """The ``(w, w)`` matrix mapping one window's values to the fitted polynomial's values (or
    ``deriv``-th derivative per sample) at each of its samples: row ``w // 2`` is the centre
    kernel, the rows before and after it serve the line's ends. Positions are scaled to
    [-1, 1] before the least-squares fit, which keeps its normal equations well conditioned;
    they are solved by Gaussian elimination with partial pivoting, in loops (numpy's linear
    algebra would load scipy's LAPACK, 0.1 s, for a 4 x 4 system)."""
    half = window // 2
    scale = max(half, 1)
    p = order + 1
    vander = np.empty((window, p))
    for i in range(window):
        x = (i - half) / scale
        v = 1.0
        for k in range(p):
            vander[i, k] = v
            v *= x
    # normal equations G c = V^T y for every window value at once: G pinv = V^T
    gram = np.zeros((p, p))
    rhs = np.zeros((p, window))
    for a in range(p):
        for b in range(p):
            acc = 0.0
            for i in range(window):
                acc += vander[i, a] * vander[i, b]
            gram[a, b] = acc
        for i in range(window):
            rhs[a, i] = vander[i, a]
    for col in range(p):
        pivot = col
        for r in range(col + 1, p):
            if abs(gram[r, col]) > abs(gram[pivot, col]):
                pivot = r
        if pivot != col:
            for c in range(p):
                gram[col, c], gram[pivot, c] = gram[pivot, c], gram[col, c]
            for c in range(window):
                rhs[col, c], rhs[pivot, c] = rhs[pivot, c], rhs[col, c]
        for r in range(col + 1, p):
            f = gram[r, col] / gram[col, col]
            for c in range(col, p):
                gram[r, c] -= f * gram[col, c]
            for c in range(window):
                rhs[r, c] -= f * rhs[col, c]
    pinv = np.empty((p, window))
    for r in range(p - 1, -1, -1):
        for c in range(window):
            acc = rhs[r, c]
            for k in range(r + 1, p):
                acc -= gram[r, k] * pinv[k, c]
            pinv[r, c] = acc / gram[r, r]
    # derivative of the polynomial in scaled position, then per sample (1 / scale per order)
    out = np.zeros((window, window))
    for i in range(window):
        x = (i - half) / scale
        for k in range(deriv, p):
            falling = 1.0  # k (k - 1) ... (k - deriv + 1)
            for m in range(deriv):
                falling *= k - m
            weight = falling * x ** (k - deriv) / scale**deriv
            for j in range(window):
                out[i, j] += weight * pinv[k, j]
    return out


@inline
def _savgol(y, window, order, deriv):
    """:func:`geoops.curves.savgol` of the columns of ``y`` ("interp" ends)."""
    n = y.shape[0]
    cols = y.shape[1]
    half = window // 2
    mat = savgol_matrix(window, order, deriv)
    out = np.empty((n, cols))
    for i in range(half, n - half):
        for c in range(cols):
            acc = 0.0
            for j in range(window):
                acc += mat[half, j] * y[i - half + j, c]
            out[i, c] = acc
    for i in range(half):
        for c in range(cols):
            head = 0.0
            tail = 0.0
            for j in range(window):
                head += mat[i, j] * y[j, c]
                tail += mat[half + 1 + i, j] * y[n - window + j, c]
            out[i, c] = head
            out[n - half + i, c] = tail
    return out


@compiled("float64[:, ::1](float64[:, ::1], int64, int64, int64)")
def savgol(y, window, order, deriv):
    """Savitzky-Golay filter along axis 0 (see :func:`geoops.curves.savgol`, which checks the
    arguments and calls this)."""
    return _savgol(y, window, order, deriv)


@inline
def _smooth(xy, window_pts, order):
    n = xy.shape[0]
    if n < order + 2:
        return xy.copy()
    w = _odd_window(window_pts, n, order)
    if w > n:
        return xy.copy()
    return _savgol(xy, w, order, 0)


@compiled("float64[:, ::1](float64[:, ::1], int64, int64)")
def smooth(xy, window_pts, order):
    """Savitzky-Golay smoothing of a uniformly resampled polyline (window made odd and clipped
    to the line; the line as it is when too short), see :func:`geoops.curves.smooth`."""
    return _smooth(xy, window_pts, order)


@inline
def _unit_tangents(xy, window_pts, order):
    n = xy.shape[0]
    if n < 2:
        return np.zeros((n, 2))
    if n < order + 2:
        d = np.empty((n, 2))
        for c in range(2):  # numpy.gradient: one-sided at the ends, central inside
            d[0, c] = xy[1, c] - xy[0, c]
            d[n - 1, c] = xy[n - 1, c] - xy[n - 2, c]
            for i in range(1, n - 1):
                d[i, c] = 0.5 * (xy[i + 1, c] - xy[i - 1, c])
    else:
        d = _savgol(xy, _odd_window(window_pts, n, order), order, 1)
    for i in range(n):
        norm = math.hypot(d[i, 0], d[i, 1])
        if norm == 0.0:
            norm = 1.0
        d[i, 0] /= norm
        d[i, 1] /= norm
    return d


@compiled("float64[:, ::1](float64[:, ::1], int64, int64)")
def unit_tangents(xy, window_pts, order):
    """Unit tangents from the derivative of a local polynomial fit, see
    :func:`geoops.curves.unit_tangents`."""
    return _unit_tangents(xy, window_pts, order)


@inline
def _grid_cell(span_x, span_y, n, length, longest):
    """Cell size (m) for the bucket grid of a polyline of ``n`` vertices and total ``length``
    whose vertices span ``span_x`` by ``span_y``: about two vertex spacings, at least half the
    ``longest`` segment (so that no segment is listed in more than 3 x 3 cells), and large
    enough that the grid has at most :data:`geoops.kernels.CELLS_PER_VERTEX` cells per
    vertex."""
    typical = length / max(n - 1, 1)
    area_cell = math.sqrt(max(span_x, 1e-9) * max(span_y, 1e-9) / (CELLS_PER_VERTEX * n))
    linear_cell = max(span_x, span_y, 1e-9) / (CELLS_PER_VERTEX * n)
    cell = max(2.0 * typical, 0.5 * longest, area_cell, linear_cell)
    return cell if cell > 0 and math.isfinite(cell) else 1.0


@inline
def _index(xy):
    n = xy.shape[0]
    poly = np.zeros((n, 7))
    s = _arc_length(xy)
    longest = 0.0
    for i in range(n):
        poly[i, X] = xy[i, 0]
        poly[i, Y] = xy[i, 1]
        poly[i, ARC] = s[i]
        if i == n - 1:
            break
        abx = xy[i + 1, 0] - xy[i, 0]
        aby = xy[i + 1, 1] - xy[i, 1]
        den = abx * abx + aby * aby
        poly[i, ABX] = abx
        poly[i, ABY] = aby
        poly[i, INV_DEN] = 1.0 / den if den > 0 else 0.0
        poly[i, SEG_LEN] = math.sqrt(den)
        longest = max(longest, poly[i, SEG_LEN])
    x = np.ascontiguousarray(xy[:, 0])
    y = np.ascontiguousarray(xy[:, 1])
    x0 = x.min()
    y0 = y.min()
    cell = _grid_cell(x.max() - x0, y.max() - y0, n, s[-1], longest)
    nx, ny, start, items = build_grid(x, y, x0, y0, cell)
    nx2, ny2, start2, items2 = build_grid(x, y, x0, y0, cell * COARSE)
    cells = np.concatenate((start, items, start2, items2))
    return poly, (x0, y0, cell), (nx, ny, nx2, ny2, cells)


@compiled(f"Tuple(({_POLY}, {_GEO}, {_GRID}))(float64[:, ::1])")
def index(xy):
    """A polyline of two or more vertices as the kernels of :mod:`geoops.kernels` take it
    (see :func:`geoops.kernels.closest`): one row per vertex, the grid geometry ``(x0, y0,
    cell)`` and the fine and coarse bucket grids."""
    return _index(xy)


@inline
def _window_for(sigma, spacing, length):
    w = max(8.0 * spacing, 25.0 * sigma, MIN_WINDOW_M)
    return min(w, MAX_WINDOW_M, max(length / 3.0, MIN_WINDOW_M))


@inline
def _median_distance(raw, line):
    """Median distance of the points ``raw`` to the polyline ``line`` (exact nearest points,
    as :meth:`geoops.curves.NearestOnPolyline.query`)."""
    m = raw.shape[0]
    d = np.empty(m)
    if line.shape[0] < 2:
        for q in range(m):
            d[q] = math.hypot(raw[q, 0] - line[0, 0], raw[q, 1] - line[0, 1])
        return np.median(d)
    poly, geo, grid = _index(line)
    for q in range(m):
        d2, _seg, _frac = _nearest(raw[q, 0], raw[q, 1], poly, geo, grid, np.inf)
        d[q] = math.sqrt(d2)
    return np.median(d)


@inline
def _tangent_variance(raw, s_raw, pts, s, sigma, window_pts, z):
    """:func:`geoops.clean._tangent_variance`, the white noise given as standard normal
    draws ``z`` (one row per raw vertex)."""
    n = pts.shape[0]
    if sigma <= 0 or n < 7:
        return 0.0
    w = min(window_pts | 1, n - (1 - n % 2))
    if w < 5:
        return 0.0
    noise_pts = np.empty((n, 2))
    noise_pts[:, 0] = np.interp(s, s_raw, z[: raw.shape[0], 0] * sigma)
    noise_pts[:, 1] = np.interp(s, s_raw, z[: raw.shape[0], 1] * sigma)
    d_true = _savgol(pts, w, ORDER, 1)
    d_noise = _savgol(noise_pts, w, ORDER, 1)
    acc = 0.0
    count = 0
    for i in range(n):
        norm2 = d_true[i, 0] * d_true[i, 0] + d_true[i, 1] * d_true[i, 1]
        if norm2 > 0:
            theta = (d_true[i, 0] * d_noise[i, 1] - d_true[i, 1] * d_noise[i, 0]) / norm2
            acc += theta * theta
            count += 1
    return acc / count if count else 0.0


@inline
def _measure_line(xy, gap_after, sigma_in):
    """Arc length, raw length (gaps left out), median vertex spacing and total length of a
    joined line, and its noise: ``sigma_in``, or estimated when that is NaN (NaN for a line
    of zero length)."""
    s_raw = _arc_length(xy)
    n_raw = xy.shape[0]
    raw_length = 0.0
    plain = 0
    for i in range(n_raw - 1):
        if not gap_after[i]:
            plain += 1
    seg = np.empty(plain)
    k = 0
    for i in range(n_raw - 1):
        if not gap_after[i]:
            seg[k] = s_raw[i + 1] - s_raw[i]
            raw_length += seg[k]
            k += 1
    total = s_raw[-1]
    spacing = np.median(seg) if plain > 0 else total
    if not total > 0:
        return s_raw, raw_length, spacing, total, np.nan
    sigma = sigma_in
    if math.isnan(sigma):
        w0 = _window_for(0.0, spacing, total)
        step0 = min(max(min(w0 / 10.0, spacing / 2.0), 0.02), 0.5)
        pts0, _at0 = _resample(xy, s_raw, step0)
        sm0 = _smooth(pts0, max(int(round(w0 / step0)), 5), ORDER)
        n_in_window = max(w0 / max(spacing, 1e-6), 5.0)
        noise = _median_distance(xy, sm0) / 0.6745
        sigma = noise / math.sqrt(max(1.0 - 4.0 / n_in_window, 0.2))
    return s_raw, raw_length, spacing, total, sigma


@inline
def _window_and_step(sigma, spacing, total):
    """The smoothing window of a line and the step it is resampled at."""
    window = _window_for(sigma, spacing, total)
    return window, min(max(window / 12.0, 0.02), 0.5)


@inline
def _clean_track(xy, gap_after, sigma_in, z):
    s_raw, raw_length, spacing, total, sigma = _measure_line(xy, gap_after, sigma_in)
    if not total > 0:
        empty = np.empty((0, 2))
        return (ZERO_LENGTH, empty, np.empty(0), empty, np.empty(0, dtype=np.bool_),
                (0.0, 0.0, 0.0, 0.0, raw_length, spacing))
    window, step = _window_and_step(sigma, spacing, total)
    pts, s = _resample(xy, s_raw, step)
    win_pts = max(int(round(window / step)), 5)
    pos_pts = max(int(round(POSITION_WINDOW_SHARE * window / step)), 5)
    sm = _smooth(pts, pos_pts, ORDER)
    tangents = _unit_tangents(pts, win_pts, ORDER)
    tangent_var = _tangent_variance(xy, s_raw, pts, s, sigma, win_pts, z)
    # samples inside a bridged gap carry no observation, nor do samples within half a window
    # of a gap: their local fits reach into the bridge
    has_data = np.ones(len(s), dtype=np.bool_)
    half = 0.5 * window
    for i in range(xy.shape[0] - 1):
        if gap_after[i]:
            a = s_raw[i] - half
            b = s_raw[i + 1] + half
            for j in range(len(s)):
                if s[j] > a and s[j] < b:
                    has_data[j] = False
    real_step = s[1] - s[0] if len(s) > 1 else step
    return (CLEANED, sm, s, tangents, has_data,
            (sigma, window, real_step, tangent_var, raw_length, spacing))


@compiled("Tuple((int64, float64[:, ::1], float64[::1], float64[:, ::1], boolean[::1], "
           "UniTuple(float64, 6)))(float64[:, ::1], boolean[::1], float64, float64[:, ::1])")
def clean_track(xy, gap_after, sigma_in, z):
    """The arithmetic of :func:`geoops.clean.clean_line` for one joined line (two or more
    vertices, ``gap_after`` per vertex): ``sigma_in`` is the noise to use, or NaN to estimate
    it; ``z`` standard normal draws, a row per vertex at least (see
    :func:`geoops.clean._tangent_variance`).

    Returns the status (:data:`CLEANED` or :data:`ZERO_LENGTH`), the smoothed points, their
    arc-length positions, unit tangents, which samples hold data, and (sigma, window, step,
    tangent variance, raw length, spacing)."""
    return _clean_track(xy, gap_after, sigma_in, z)


@inline
def _least_turn_cosine(xy, base_m):
    n_raw = xy.shape[0]
    if n_raw < 3:
        return 2.0
    k = 8
    s_raw = _arc_length(xy)
    total = s_raw[-1]
    n = _intervals(total, base_m / k)
    if n + 1 < 2 * k + 1:
        return 2.0
    size = 2 * k + 1
    ring = np.empty((size, 2))
    seg = 0
    least = 1.0
    for j in range(n + 1):
        at = total * j / n
        while seg < n_raw - 2 and s_raw[seg + 1] < at:
            seg += 1
        span = s_raw[seg + 1] - s_raw[seg]
        f = min(max((at - s_raw[seg]) / span, 0.0), 1.0) if span > 0 else 0.0
        ring[j % size, 0] = xy[seg, 0] + f * (xy[seg + 1, 0] - xy[seg, 0])
        ring[j % size, 1] = xy[seg, 1] + f * (xy[seg + 1, 1] - xy[seg, 1])
        if j < 2 * k:
            continue
        a = (j - 2 * k) % size
        b = (j - k) % size
        c = j % size
        ax = ring[b, 0] - ring[a, 0]
        ay = ring[b, 1] - ring[a, 1]
        lx = ring[c, 0] - ring[b, 0]
        ly = ring[c, 1] - ring[b, 1]
        dot = ax * lx + ay * ly
        norm = max(math.sqrt((ax * ax + ay * ay) * (lx * lx + ly * ly)), 1e-12)
        least = min(least, dot / norm)
    return least


@compiled("float64(float64[:, ::1], float64)")
def least_turn_cosine(xy, base_m):
    """The smallest cosine of the turn between the chord arriving over ``base_m`` and the chord
    leaving over ``base_m`` at any sample of ``xy`` (resampled every ``base_m / 8``), as
    :func:`geoops.reversals.find_reversals` measures the turn; 2 when the line is too short
    to measure. The samples are interpolated as the walk along the line reaches them, the
    last ``2 * 8 + 1`` kept in a ring: no resampled copy of the line is made (equal to the
    numpy measurement up to rounding, which the caller's margin covers)."""
    return _least_turn_cosine(xy, base_m)


#: a vertex is a spike where the line turns back by more than SPIKE_TURN radians and a
#: neighbour turns by more than SPIKE_NEIGHBOUR_TURN (a GNSS outlier out and straight back)
SPIKE_TURN = 2.5
SPIKE_NEIGHBOUR_TURN = 1.2


@inline
def _abs_turns(xy):
    """Absolute heading change at each interior vertex, radians in [0, pi]."""
    n = xy.shape[0]
    turn = np.empty(n - 2)
    before = math.atan2(xy[1, 1] - xy[0, 1], xy[1, 0] - xy[0, 0])
    for i in range(1, n - 1):
        after = math.atan2(xy[i + 1, 1] - xy[i, 1], xy[i + 1, 0] - xy[i, 0])
        d = after - before
        turn[i - 1] = abs(math.atan2(math.sin(d), math.cos(d)))
        before = after
    return turn


@compiled("float64[:, ::1](float64[:, ::1], float64, int64)")
def tidy_part(xy, tol, passes):
    """One part of a rut with repeated vertices dropped (each vertex within ``tol`` of the
    vertex before it in the input; none when ``tol`` < 0), then ``passes`` rounds of spike
    removal: a vertex where the line turns back sharply and a neighbour turns sharply too.
    Of two neighbouring spikes only the sharper goes (both when equally sharp), so the
    choice does not depend on the vertex order."""
    n = xy.shape[0]
    if tol >= 0 and n >= 2:
        keep = np.ones(n, dtype=np.bool_)
        for i in range(1, n):
            keep[i] = math.hypot(xy[i, 0] - xy[i - 1, 0], xy[i, 1] - xy[i - 1, 1]) > tol
        out = xy[keep]
    else:
        out = xy.copy()
    for _ in range(passes):
        n = out.shape[0]
        if n < 4:
            break
        turn = _abs_turns(out)
        m = n - 2
        spike = np.zeros(m, dtype=np.bool_)
        for i in range(m):
            near = (i > 0 and turn[i - 1] > SPIKE_NEIGHBOUR_TURN) or (
                i < m - 1 and turn[i + 1] > SPIKE_NEIGHBOUR_TURN)
            spike[i] = turn[i] > SPIKE_TURN and near
        keep = np.ones(n, dtype=np.bool_)
        dropped = False
        for i in range(m):
            beaten = i > 0 and spike[i - 1] and turn[i - 1] > turn[i] + 1e-9
            beaten = beaten or (i < m - 1 and spike[i + 1] and turn[i + 1] > turn[i] + 1e-9)
            if spike[i] and not beaten:
                keep[i + 1] = False
                dropped = True
        if not dropped:
            break
        out = out[keep]
    return np.ascontiguousarray(out)


@compiled("Tuple((int64[::1], float64[:, ::1], float64[::1], int64[::1], float64[:, ::1], "
          "float64[:, ::1], boolean[::1]))(float64[:, ::1], boolean[::1], int64[::1], "
          "float64[::1], float64[:, ::1], float64, float64)")
def clean_tracks(xy, gap_after, starts, sigma_in, z, turn_base_m, turn_base_sigmas):
    """:func:`clean_track` and :func:`least_turn_cosine` for many joined lines in one call:
    line ``r`` is ``xy[starts[r]:starts[r + 1]]`` (with its ``gap_after``) and
    ``sigma_in[r]`` its noise (NaN: estimate it); the turn is measured over
    ``max(turn_base_m, turn_base_sigmas * sigma)``. The same numbers as those calls, one line
    after the other, without a call (and its array wrappers) per line.

    Returns per line the status, the six numbers of :func:`clean_track` and the least turn
    cosine; and the cleaned samples of all lines one after the other (line ``r`` from
    ``out_starts[r]``): points, tangents, has-data. A first pass finds each line's noise and
    sample count, so the outputs are allocated once, at their size (the second pass is handed
    the noise, which gives the same numbers as estimating it again)."""
    lines = starts.shape[0] - 1
    status = np.full(lines, CLEANED, dtype=np.int64)
    sigma = np.empty(lines)
    out_starts = np.zeros(lines + 1, dtype=np.int64)
    for r in range(lines):
        line = xy[starts[r]:starts[r + 1]]
        _s, _raw, spacing, total, sigma[r] = _measure_line(
            line, gap_after[starts[r]:starts[r + 1]], sigma_in[r])
        count = 0
        if total > 0:
            _window, step = _window_and_step(sigma[r], spacing, total)
            count = _intervals(total, step) + 1  # the samples _resample gives
        else:
            status[r] = ZERO_LENGTH
        out_starts[r + 1] = out_starts[r] + count
    used = out_starts[lines]
    numbers = np.zeros((lines, 6))
    least = np.full(lines, 2.0)
    pts = np.empty((used, 2))
    tangents = np.empty((used, 2))
    has_data = np.empty(used, dtype=np.bool_)
    for r in range(lines):
        line = xy[starts[r]:starts[r + 1]]
        st, sm, _s, tg, data, nums = _clean_track(line, gap_after[starts[r]:starts[r + 1]],
                                                  sigma[r], z)
        for c in range(6):
            numbers[r, c] = nums[c]
        if st != CLEANED:
            continue
        a = out_starts[r]
        if sm.shape[0] != out_starts[r + 1] - a:
            raise ValueError("clean_tracks: a line's sample count changed between passes")
        pts[a:a + sm.shape[0]] = sm
        tangents[a:a + sm.shape[0]] = tg
        has_data[a:a + sm.shape[0]] = data
        least[r] = _least_turn_cosine(line, max(turn_base_m, turn_base_sigmas * nums[0]))
    return status, numbers, least, out_starts, pts, tangents, has_data
