"""Turn a raw rut (one input feature, possibly multi-part, in the local metric frame) into a
clean, uniformly resampled, noise-aware smoothed track ready for inference.

What it does: chain the parts of one feature into one line (gaps remembered), drop repeated
vertices and one-vertex spikes, estimate the horizontal noise when none is stated, resample by
arc length, smooth with a window chosen from the noise and the vertex spacing, and give tangents
from the smoothed curve. It must not pair, orient or judge ruts.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from . import kernels_clean
from .curves import (
    REPEAT_TOL_M,
    Array,
    NearestOnPolyline,
    arc_length,
    windowed_curvature,
)
from .errors import BadInput

# the cleaning constants, defined beside the compiled code that uses them
from .kernels_clean import MAX_WINDOW_M, MIN_WINDOW_M, POSITION_WINDOW_SHARE  # noqa: F401

NDArrayBool = np.ndarray


@dataclass(frozen=True)
class CleanRut:
    """A cleaned rut in the local metric frame.

    Attributes
    ----------
    xy
        Smoothed points at uniform arc-length spacing ``step``, in the input's vertex order.
    has_data
        False for samples that fall inside a gap between parts (no observation there).
    sigma
        Horizontal noise (metres, one axis) used for smoothing: stated or estimated.
    sigma_source
        ``"stated"`` or ``"estimated"``.
    window_m
        Smoothing window, metres.
    raw_length
        Length of the raw line(s) without the gaps, metres.
    raw_xy
        The input vertices after joining parts and dropping repeats and spikes, unsmoothed.
    """

    xy: Array
    step: float
    has_data: NDArrayBool
    sigma: float
    sigma_source: str
    window_m: float
    raw_length: float
    raw_xy: Array = field(repr=False)
    raw_gap_after: NDArrayBool = field(repr=False)
    tangents: Array = field(repr=False)
    tangent_var: float
    index: NearestOnPolyline = field(repr=False, compare=False)

    @property
    def length(self) -> float:
        return self.index.length

    @property
    def window_pts(self) -> int:
        return max(int(round(self.window_m / self.step)), 5)

    def curvature(self) -> tuple[Array, np.ndarray, float]:
        """Curvature across one smoothing window: (signed curvature 1/m, the sample index of
        each value, its noise standard deviation from the tangent variance). Computed once
        per rut and kept (the arrays are read-only): every pair a rut is judged in, and its
        pass record, ask for it."""
        kept = self.__dict__.get("_curvature")
        if kept is None:
            half = max(self.window_pts // 2, 1)
            kappa = windowed_curvature(self.tangents, self.step, half)
            centres = np.arange(half, half + len(kappa))
            noise = float(np.sqrt(2.0 * self.tangent_var) / (2 * half * self.step))
            kappa.setflags(write=False)
            centres.setflags(write=False)
            kept = (kappa, centres, noise)
            object.__setattr__(self, "_curvature", kept)  # frozen: a cache, not a field
        return kept


#: metres of extra gap a radian of heading change costs when chaining parts: a part that
#: continues the line's heading across a gap wins over a nearer one that turns away
TURN_COST_M_PER_RAD = 2.0
#: arc length over which a part's end heading is read, metres
END_HEADING_M = 1.0


def _end_heading(p: Array, at_start: bool) -> Array:
    """Unit heading leaving a part at one end, away from the part (over END_HEADING_M)."""
    s = arc_length(p)
    if at_start:
        k = int(np.searchsorted(s, min(END_HEADING_M, s[-1])))
        v = p[0] - p[min(k, len(p) - 1)]
    else:
        k = int(np.searchsorted(s, s[-1] - min(END_HEADING_M, s[-1])))
        v = p[-1] - p[max(k, 0)] if k < len(p) - 1 else p[-1] - p[0]
    n = float(np.hypot(*v))
    return v / n if n > 0 else v


def _angle(a: Array, b: Array) -> float:
    return float(np.arccos(np.clip(np.dot(a, b), -1.0, 1.0)))


def chain_parts(parts: list[Array]) -> tuple[Array, Array]:
    """Join the parts of one rut end to end, reversing parts as needed.

    Parts are attached to the growing line (longest first) by the cheapest join: the gap's
    length plus :data:`TURN_COST_M_PER_RAD` for each radian the line would have to turn to
    cross the gap and carry on along the part. Heading continuity keeps a looping rut in order
    where the nearest end belongs to another turn of the loop.

    Returns
    -------
    xy, gap_after
        The joined vertices, and a boolean per vertex that is True where the segment starting
        at that vertex bridges a gap between two parts.

    Examples
    --------
    >>> a = np.array([[0.0, 0.0], [1.0, 0.0]])
    >>> b = np.array([[3.0, 0.0], [2.0, 0.0]])
    >>> xy, gap = chain_parts([a, b])
    >>> xy[:, 0].tolist(), gap.tolist()
    ([0.0, 1.0, 2.0, 3.0], [False, True, False, False])
    """
    parts = [p for p in parts if len(p) >= 2]
    if not parts:
        return np.empty((0, 2)), np.empty(0, dtype=bool)
    if len(parts) == 1:
        return parts[0], np.zeros(len(parts[0]), dtype=bool)
    lengths = [float(arc_length(p)[-1]) for p in parts]
    order = sorted(range(len(parts)), key=lambda i: -lengths[i])
    chain = [parts[order[0]]]
    rest = [parts[i] for i in order[1:]]
    while rest:
        # leaving the line at its tail (forwards) or its head (backwards)
        ends = [(chain[-1][-1], _end_heading(chain[-1], at_start=False), True),
                (chain[0][0], _end_heading(chain[0], at_start=True), False)]
        best: tuple[float, int, bool, bool] | None = None
        for k, p in enumerate(rest):
            for point, heading, at_tail in ends:
                for flip in (False, True):
                    q = p[::-1] if flip else p
                    # the part's end that meets the line, and its heading into the part
                    meet = q[0] if at_tail else q[-1]
                    into = -_end_heading(q, at_start=at_tail)
                    bridge = meet - point
                    gap = float(np.hypot(*bridge))
                    turn = _angle(heading, into)
                    if gap > 1e-9:
                        b = bridge / gap
                        turn = _angle(heading, b) + _angle(b, into)
                    cost = gap + TURN_COST_M_PER_RAD * turn
                    if best is None or cost < best[0]:
                        best = (cost, k, at_tail, flip)
        assert best is not None
        _, k, at_tail, flip = best
        p = rest.pop(k)
        p = p[::-1] if flip else p
        if at_tail:
            chain.append(p)
        else:
            chain.insert(0, p)
    gap_after = []
    for i, p in enumerate(chain):
        g = np.zeros(len(p), dtype=bool)
        if i < len(chain) - 1:
            g[-1] = True
        gap_after.append(g)
    return np.concatenate(chain), np.concatenate(gap_after)


def drop_spikes(xy: Array, passes: int = 2) -> Array:
    """Remove single-vertex spikes: a vertex where the line turns back sharply and turns
    straight back again at a neighbour (a GNSS outlier), keeping real out-and-back turns
    (see :func:`geoops.kernels_clean.tidy_part`).

    Examples
    --------
    >>> line = np.array([[0.0, 0], [1, 0], [2, 0], [2.5, 3], [3, 0], [4, 0], [5, 0]])
    >>> drop_spikes(line)[:, 1].tolist()
    [0.0, 0.0, 0.0, 0.0, 0.0, 0.0]
    """
    return np.asarray(
        kernels_clean.tidy_part(np.ascontiguousarray(xy, dtype=np.float64), -1.0, passes)
    )


#: seed of the white noise that :func:`clean_line` propagates to find the tangent variance:
#: fixed, so the same rut gives the same answer
NOISE_SEED = 20_26_12
_normals = np.empty((0, 2))


def _standard_normals(rows: int) -> Array:
    """The first ``rows`` pairs of standard normal draws from :data:`NOISE_SEED` (the same
    numbers ``default_rng(NOISE_SEED).normal(0, 1, (rows, 2))`` gives), kept between calls."""
    global _normals
    if len(_normals) < rows:
        size = max(rows, 2 * len(_normals), 4096)
        _normals = np.random.default_rng(NOISE_SEED).standard_normal((size, 2))
    return _normals


def join_parts(parts: list[Array]) -> tuple[Array, Array]:
    """Join a rut's parts into one line: drop repeats (see :func:`geoops.curves.drop_repeats`)
    and spikes (:func:`drop_spikes`), chain the parts.

    Returns
    -------
    xy, gap_after
        Vertices, and per vertex whether the segment starting there bridges a gap.

    Raises
    ------
    BadInput
        When fewer than two distinct vertices remain.
    """
    cleaned_parts = [
        kernels_clean.tidy_part(np.ascontiguousarray(p, dtype=np.float64), REPEAT_TOL_M, 2)
        for p in parts
    ]
    xy, gap_after = chain_parts(cleaned_parts)
    if len(xy) < 2:
        raise BadInput("A rut has fewer than two distinct vertices.", "Remove or fix that line.")
    keep = np.concatenate([[True], np.hypot(*np.diff(xy, axis=0).T) > 1e-9])
    return xy[keep], gap_after[keep]


def clean_rut(parts: list[Array], accuracy: float | None = None) -> CleanRut:
    """Clean one rut given as one or more parts in the local metric frame.

    Parameters
    ----------
    parts
        ``(n, 2)`` vertex arrays, metres.
    accuracy
        Stated horizontal accuracy (one-sigma per axis, metres). Estimated when None.

    Raises
    ------
    BadInput
        When the rut has fewer than two distinct vertices.
    """
    return clean_line(*join_parts(parts), accuracy=accuracy)


def clean_line(
    xy: Array,
    gap_after: np.ndarray,
    accuracy: float | None = None,
    estimated_sigma: float | None = None,
) -> CleanRut:
    """Clean one joined line (see :func:`join_parts`).

    Without a stated ``accuracy`` the noise is estimated: the median distance of the raw
    vertices to a first smoothing, over 0.6745 (the median absolute deviation of a normal
    error, per axis), corrected for the share of the noise that smoothing over few vertices
    keeps. The smoothing window follows from the noise and the vertex spacing; the line is
    resampled at a twelfth of it, the positions smoothed over half the window and the tangents
    taken from the derivative over the whole window (cubic Savitzky-Golay fits). The tangents'
    variance comes from seeded white noise of the same sigma pushed through the same
    resampling and filter. The arithmetic runs compiled
    (:func:`geoops.kernels_clean.clean_track`).

    ``estimated_sigma`` reuses a noise estimate made on a longer line (e.g. the whole rut when
    this is one leg of it); it is reported as estimated, not stated.
    """
    if len(xy) < 2:
        raise BadInput("A rut has fewer than two distinct vertices.", "Remove or fix that line.")
    sigma_in, source = _sigma_in(accuracy)
    if source != "stated" and estimated_sigma is not None:
        sigma_in = float(estimated_sigma)
    xy = np.ascontiguousarray(xy, dtype=np.float64)
    gap_after = np.ascontiguousarray(gap_after, dtype=np.bool_)
    status, sm, _, tangents, has_data, numbers = kernels_clean.clean_track(
        xy, gap_after, sigma_in, _standard_normals(len(xy))
    )
    if status == kernels_clean.ZERO_LENGTH:
        raise BadInput(ZERO_LENGTH_MESSAGE, "Remove or fix that line.")
    return _cleaned(sm, tangents, has_data, numbers, source, xy, gap_after)


#: why a line of zero length cannot be cleaned
ZERO_LENGTH_MESSAGE = "A rut has zero length."


def _sigma_in(accuracy: float | None) -> tuple[float, str]:
    """The noise to clean with (NaN: estimate it) and what it is, from a stated accuracy."""
    if accuracy is not None and accuracy > 0:
        return float(accuracy), "stated"
    return float("nan"), "estimated"


def _cleaned(
    sm: Array, tangents: Array, has_data: np.ndarray, numbers: Array | tuple[float, ...],
    source: str, raw_xy: Array, raw_gap_after: np.ndarray,
) -> CleanRut:
    """A CleanRut from the outputs of :func:`geoops.kernels_clean.clean_track` (or of one line
    of ``clean_tracks``) and the line it cleaned."""
    sigma, window, step, tangent_var, raw_length, _ = (float(v) for v in numbers)
    return CleanRut(
        xy=sm,
        step=step,
        has_data=has_data,
        sigma=sigma,
        sigma_source=source,
        window_m=window,
        raw_length=raw_length,
        raw_xy=raw_xy,
        raw_gap_after=raw_gap_after,
        tangents=tangents,
        tangent_var=tangent_var,
        index=NearestOnPolyline(sm),
    )


#: fewest lines per thread for which :func:`clean_lines` starts threads
MIN_LINES_PER_THREAD = 64


def clean_lines(
    lines: list[tuple[Array, np.ndarray]],
    accuracies: list[float | None],
    turn_base: tuple[float, float],
    workers: int | None = None,
) -> tuple[list[CleanRut | str], Array]:
    """:func:`clean_line` for many joined lines (see :func:`join_parts`), each with its stated
    accuracy or None, and the least turn cosine of each (see
    :func:`geoops.kernels_clean.least_turn_cosine`), measured over ``max(turn_base[0],
    turn_base[1] * sigma)``. Returns per line its cleaned rut or why it cannot be used
    (same as :func:`clean_line`), and the cosines.

    The lines go to :func:`geoops.kernels_clean.clean_tracks` a group at a time, in up to
    ``workers`` threads (the kernels release the GIL), groups cut by vertex count; the ruts'
    arrays are views of the group's arrays."""
    n = len(lines)
    out: list[CleanRut | str] = ["" for _ in range(n)]
    least = np.full(n, 2.0)
    if n == 0:
        return out, least
    if any(len(xy) < 2 for xy, _ in lines):
        raise ValueError("every line to clean needs two or more vertices (see join_parts)")
    sizes = np.array([len(xy) for xy, _ in lines], dtype=np.int64)
    k = 1 if workers is None else max(1, min(int(workers), n // MIN_LINES_PER_THREAD))
    # contiguous groups of about equal vertex counts
    edges = np.searchsorted(np.cumsum(sizes), np.arange(1, k) * sizes.sum() / k)
    cuts = [0, *sorted({int(e) + 1 for e in edges if 0 < e + 1 < n}), n]
    z = _standard_normals(int(sizes.max()))
    sigma = [_sigma_in(a) for a in accuracies]

    def clean_group(lo: int, hi: int) -> None:
        xy = np.ascontiguousarray(np.concatenate([lines[r][0] for r in range(lo, hi)]),
                                  dtype=np.float64)
        gaps = np.ascontiguousarray(np.concatenate([lines[r][1] for r in range(lo, hi)]),
                                    dtype=np.bool_)
        starts = np.concatenate([[0], np.cumsum(sizes[lo:hi])]).astype(np.int64)
        status, numbers, turn, at, pts, tangents, has_data = kernels_clean.clean_tracks(
            xy, gaps, starts, np.array([sigma[r][0] for r in range(lo, hi)]), z,
            float(turn_base[0]), float(turn_base[1]))
        least[lo:hi] = turn
        for g, r in enumerate(range(lo, hi)):
            if status[g] == kernels_clean.ZERO_LENGTH:
                out[r] = ZERO_LENGTH_MESSAGE
                continue
            a, b = at[g], at[g + 1]
            out[r] = _cleaned(pts[a:b], tangents[a:b], has_data[a:b], numbers[g], sigma[r][1],
                              xy[starts[g]:starts[g + 1]], gaps[starts[g]:starts[g + 1]])

    if len(cuts) == 2:
        clean_group(0, n)
    else:
        with ThreadPoolExecutor(len(cuts) - 1) as pool:
            list(pool.map(lambda ab: clean_group(*ab), zip(cuts[:-1], cuts[1:], strict=True)))
    return out, least
