"""Skeleton stretches to rut lines: cut to a window's core, joined across window seams and
through junctions, and smoothed.

A :class:`Piece` is a stretch of skeleton owned by one window core, in global (row, col) pixel
coordinates, with the depth and rut area of each vertex. Pieces whose seam ends meet are joined
(:func:`seam_partners`, :func:`chain`); tracks that a junction of the skeleton cut are joined
again by heading continuity (:func:`node_links`, :func:`join_tracks`); :func:`polish` takes
the pixel staircase out. Pure numpy and scipy: no files, no rasters, no CRS here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from itertools import combinations

import numpy as np
import numpy.typing as npt
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from .curves import savgol

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]


@dataclass
class Piece:
    """A stretch of skeleton owned by one window core, in global (row, col) pixel coordinates.

    ``start``/``end`` say what each end is: ``free`` (a rut end), ``node`` (a junction),
    ``seam`` (crosses into another core; the end vertex then lies in that core).
    """

    rc: FloatArray
    depth: FloatArray
    area: FloatArray
    start: str
    end: str
    tile: int
    ring: bool = False

    def reversed(self) -> Piece:
        """The same stretch in the opposite vertex order."""
        return Piece(
            self.rc[::-1], self.depth[::-1], self.area[::-1], self.end, self.start, self.tile
        )


def step_m(rc: FloatArray, px_m: tuple[float, float]) -> FloatArray:
    """Lengths in metres of the steps between consecutive (row, col) vertices.

    Examples
    --------
    >>> step_m(np.array([[0.0, 0.0], [3.0, 4.0]]), (0.5, 0.5)).tolist()
    [2.5]
    """
    d = np.diff(rc, axis=0)
    return np.asarray(np.hypot(d[:, 0] * px_m[1], d[:, 1] * px_m[0]), dtype=np.float64)


def clip_to_core(
    rc: FloatArray,
    dep: FloatArray,
    ar: FloatArray,
    start: str,
    end: str,
    ring: bool,
    tile: int,
    core: tuple[int, int, int, int],
) -> list[Piece]:
    """Cut a branch to the runs of vertices inside a window's core (row0, row1, col0, col1).

    A run that leaves the core keeps one vertex beyond it at that end (a ``seam`` end), so the
    neighbouring window's run can be matched to it; that vertex carries no depth or area.
    """
    cr0, cr1, cc0, cc1 = core
    ri = np.floor(rc[:, 0] + 0.5)
    ci = np.floor(rc[:, 1] + 0.5)
    inside = (ri >= cr0) & (ri < cr1) & (ci >= cc0) & (ci < cc1)
    if inside.all():
        return [Piece(rc, dep, ar, start, end, tile, ring)]
    if not inside.any():
        return []
    if ring:  # open the ring at a vertex outside the core, so every run has seam ends
        k = int(np.flatnonzero(~inside[:-1])[0])
        order = np.concatenate([np.arange(k, rc.shape[0] - 1), np.arange(0, k + 1)])
        rc, dep, ar, inside = rc[order], dep[order], ar[order], inside[order]
    step = np.diff(np.concatenate([[0], inside.astype(np.int8), [0]]))
    out = []
    n = rc.shape[0]
    for a, b in zip(np.flatnonzero(step == 1), np.flatnonzero(step == -1), strict=True):
        lo = a - 1 if a > 0 else a
        hi = b + 1 if b < n else b
        dd, aa = dep[lo:hi].copy(), ar[lo:hi].copy()
        # the seam vertex belongs to the neighbour: it joins, it does not count
        if a > 0:
            dd[0], aa[0] = np.nan, 0.0
        if b < n:
            dd[-1], aa[-1] = np.nan, 0.0
        out.append(
            Piece(
                rc[lo:hi],
                dd,
                aa,
                "seam" if a > 0 else start,
                "seam" if b < n else end,
                tile,
            )
        )
    return out


# ---------------------------------------------------------------------------------------------
# joining pieces across seams


End = tuple[int, int]  # (piece index, 0 for its start / 1 for its end)


def _greedy_pairs(ends: list[End], a: IntArray, b: IntArray, cost: FloatArray) -> dict[End, End]:
    """Match ends in pairs, cheapest first, each end at most once."""
    partner: dict[End, End] = {}
    used = np.zeros(len(ends), dtype=bool)
    for k in np.argsort(cost, kind="stable").tolist():
        if used[a[k]] or used[b[k]]:
            continue
        used[a[k]] = used[b[k]] = True
        partner[ends[a[k]]] = ends[b[k]]
        partner[ends[b[k]]] = ends[a[k]]
    return partner


def seam_partners(pieces: list[Piece], tol_px: float) -> tuple[dict[End, End], int]:
    """Seam ends of pieces from different windows that meet: each seam end carries its last
    segment across the seam, so partners' segments lie on top of each other, reversed."""
    ends: list[End] = []
    mids: list[FloatArray] = []
    dirs: list[FloatArray] = []
    for i, p in enumerate(pieces):
        if p.rc.shape[0] < 2:
            continue
        if p.start == "seam":
            ends.append((i, 0))
            mids.append((p.rc[0] + p.rc[1]) / 2)
            dirs.append(p.rc[0] - p.rc[1])
        if p.end == "seam":
            ends.append((i, 1))
            mids.append((p.rc[-1] + p.rc[-2]) / 2)
            dirs.append(p.rc[-1] - p.rc[-2])
    if not ends:
        return {}, 0
    mid, direction = np.array(mids), np.array(dirs)
    tile = np.array([pieces[i].tile for i, _ in ends])
    pairs = cKDTree(mid).query_pairs(tol_px, output_type="ndarray")
    if pairs.size == 0:
        return {}, len(ends)
    a, b = pairs[:, 0], pairs[:, 1]
    ok = (tile[a] != tile[b]) & (np.einsum("ij,ij->i", direction[a], direction[b]) < 0)
    a, b = a[ok], b[ok]
    partner = _greedy_pairs(ends, a, b, np.hypot(*(mid[a] - mid[b]).T))
    return partner, len(ends) - len(partner)


def _end_direction(rc: FloatArray, at_end: bool, px_m: tuple[float, float]) -> FloatArray:
    """Unit direction (metres, row/col axes) pointing out of a line at one end, measured over
    the stretch 0.3-1.0 m from the end (the first decimetres bend into the junction)."""
    pts = rc[::-1] if at_end else rc
    s = np.concatenate([[0.0], np.cumsum(step_m(pts, px_m))])
    total = s[-1]
    near = np.interp(min(0.3, 0.3 * total), s, np.arange(s.size))
    far = np.interp(min(1.0, total), s, np.arange(s.size))

    def at(u: float) -> FloatArray:
        i = min(int(u), s.size - 2)
        f = u - i
        return np.asarray(pts[i] * (1 - f) + pts[i + 1] * f, dtype=np.float64)

    d = (at(near) - at(far)) * (px_m[1], px_m[0])
    norm = float(np.hypot(*d))
    return d / norm if norm > 0 else d


#: a piece between two junctions shorter than this is the middle of one crossing (two ruts
#: crossing make two junctions joined by a short stretch): its junctions count as one, metres
BRIDGE_M = 0.5


def node_links(
    pieces: list[Piece], px_m: tuple[float, float], max_turn_deg: float
) -> tuple[dict[End, End], dict[End, End], frozenset[int]]:
    """Links between ends meeting at one junction that continue each other (change of heading
    at most ``max_turn_deg``): ``primary`` pairs them one to one, the straightest first;
    ``secondary`` links an end left over at a fork to the matched end it continues, so the
    stretch before the fork (two wheels in one rut) belongs to both tracks. The third item
    lists the short pieces between two junctions of one crossing (see :data:`BRIDGE_M`),
    whose junctions are treated as one."""
    bridges = frozenset(
        i
        for i, p in enumerate(pieces)
        if p.start == "node"
        and p.end == "node"
        and p.rc.shape[0] >= 2
        and float(step_m(p.rc, px_m).sum()) < BRIDGE_M
        and not np.allclose(p.rc[0], p.rc[-1])
    )
    ends: list[End] = []
    pts: list[FloatArray] = []
    dirs: list[FloatArray] = []
    for i, p in enumerate(pieces):
        if p.rc.shape[0] < 2 or i in bridges:
            continue
        for side, kind in ((0, p.start), (1, p.end)):
            if kind == "node":
                ends.append((i, side))
                pts.append(p.rc[-1] if side else p.rc[0])
                dirs.append(_end_direction(p.rc, bool(side), px_m))
    if len(ends) < 2:
        return {}, {}, bridges
    # junctions: ends at one point, then junctions joined by a bridge
    xy = np.array(pts)
    close = cKDTree(xy).query_pairs(1.5, output_type="ndarray")
    links = [close]
    if bridges:
        tree = cKDTree(xy)
        for i in bridges:
            near0 = tree.query_ball_point(pieces[i].rc[0], 1.5)
            near1 = tree.query_ball_point(pieces[i].rc[-1], 1.5)
            if near0 and near1:
                links.append(np.array([[near0[0], near1[0]]]))
    edges = np.vstack([x.reshape(-1, 2) for x in links])
    graph = coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(len(ends),) * 2)
    _, node = connected_components(graph, directed=False)
    groups: dict[int, list[int]] = {}
    for k, n in enumerate(node.tolist()):
        groups.setdefault(n, []).append(k)
    pair_list = [(u, v) for g in groups.values() for u, v in combinations(g, 2)]
    if not pair_list:
        return {}, {}, bridges
    pairs = np.array(pair_list, dtype=np.int64)
    a, b = pairs[:, 0], pairs[:, 1]
    direction = np.array(dirs)
    # two ends continue each other when one points out where the other points in
    cos = -np.einsum("ij,ij->i", direction[a], direction[b])
    distinct = np.array([ends[i][0] != ends[j][0] for i, j in zip(a, b, strict=True)], bool)
    ok = distinct & (cos >= math.cos(math.radians(max_turn_deg)))
    a, b, cos = a[ok], b[ok], cos[ok]
    primary = _greedy_pairs(ends, a, b, -cos)
    # a fork: an end left over that continues a matched end shares that end's track
    secondary: dict[End, End] = {}
    for k in np.argsort(-cos, kind="stable").tolist():
        for u, v in ((ends[a[k]], ends[b[k]]), (ends[b[k]], ends[a[k]])):
            if u not in primary and u not in secondary and v in primary:
                secondary[u] = v
    return primary, secondary, bridges


def _walks(
    pieces: list[Piece], primary: dict[End, End], secondary: dict[End, End]
) -> list[tuple[list[tuple[int, bool]], bool]]:
    """Tracks through junctions: from every end that leads nowhere, follow the links (the
    primary one, else the fork's shared one) until a piece would repeat. A track that came onto
    a shared stretch by a fork's link leaves it by the other fork's link where there is one
    (two ruts crossing at a shallow angle share the stretch between their two junctions).
    Returns, per track, its pieces with their reversal flags and whether it closes into a
    ring; a track found from both of its ends is kept once."""
    joiners: dict[End, End] = {}  # matched end -> a left-over end that shares its track
    for u, v in secondary.items():
        joiners.setdefault(v, u)

    def walk(i: int, entry: int) -> tuple[list[tuple[int, bool]], bool]:
        out = [(i, entry == 1)]
        seen = {i}
        cur_end: End = (i, 1 - entry)
        shared = False  # on a stretch entered by a fork's link
        while True:
            if shared and cur_end in joiners:
                nxt: End | None = joiners[cur_end]
                shared = False
            elif cur_end in primary:
                nxt, shared = primary[cur_end], False
            else:
                nxt = secondary.get(cur_end)
                shared = nxt is not None
            if nxt is None:
                return out, False
            j, t = nxt
            if j in seen:
                return out, j == i and t == entry
            out.append((j, t == 1))
            seen.add(j)
            cur_end = (j, 1 - t)

    tracks: dict[tuple[int, ...], tuple[list[tuple[int, bool]], bool]] = {}
    covered = np.zeros(len(pieces), dtype=bool)

    def add(track: list[tuple[int, bool]], ring: bool) -> None:
        ids = tuple(k for k, _ in track)
        key = tuple(sorted(ids)) if ring else min(ids, ids[::-1])
        tracks.setdefault(key, (track, ring))
        covered[list(ids)] = True

    for i in range(len(pieces)):  # from every end that leads nowhere
        for s in (0, 1):
            if (i, s) not in primary and (i, s) not in secondary:
                add(*walk(i, s))
    for i in range(len(pieces)):  # pieces no such walk reached: walk both ways from them
        if covered[i]:
            continue
        fwd, ring = walk(i, 0)
        back, _ = walk(i, 1)
        if ring or {k for k, _ in back[1:]} & {k for k, _ in fwd}:
            add(fwd, ring)
            continue
        add([(k, not r) for k, r in reversed(back[1:])] + fwd, False)
    return list(tracks.values())


def join_tracks(
    pieces: list[Piece],
    primary: dict[End, End],
    secondary: dict[End, End],
    bridges: frozenset[int] = frozenset(),
) -> list[Piece]:
    """Concatenate the pieces of each track found by :func:`_walks` (junction vertex shared;
    across a crossing's bridge, the ends on either side are simply joined)."""
    lines = []
    for track, ring in _walks(pieces, primary, secondary):
        if len(track) == 1 and track[0][0] in bridges:
            continue
        chain = [pieces[i].reversed() if rev else pieces[i] for i, rev in track]
        lines.append(_concat(chain, 0, ring))
    return lines


def chain(pieces: list[Piece], partner: dict[End, End], seam: bool) -> list[Piece]:
    """Concatenate pieces along matched ends. Across a seam each side carries one vertex of
    the other's core, dropped on both sides; at a junction both share the junction vertex."""
    done = np.zeros(len(pieces), dtype=bool)
    lines: list[Piece] = []

    def oriented(i: int, reverse: bool) -> Piece:
        return pieces[i].reversed() if reverse else pieces[i]

    for i in range(len(pieces)):
        if done[i]:
            continue
        first, side = i, 0  # walk back to the first piece of the chain (or once round a ring)
        seen = {i}
        while (first, side) in partner:
            j, t = partner[(first, side)]
            if j in seen:
                break
            seen.add(j)
            first, side = j, 1 - t
        chain = [oriented(first, side == 1)]
        done[first] = True
        cur, out_side = first, 1 - side
        ring = False
        while (cur, out_side) in partner:
            j, t = partner[(cur, out_side)]
            if done[j]:
                ring = j == first
                break
            chain.append(oriented(j, t == 1))
            done[j] = True
            cur, out_side = j, 1 - t
        lines.append(_concat(chain, 1 if seam else 0, ring))
    return lines


def _concat(chain: list[Piece], cut_tail: int, ring: bool) -> Piece:
    """Join pieces, dropping ``cut_tail`` last vertices of each but the last piece and the
    first vertex of each but the first."""
    if len(chain) == 1 and not ring:
        p = chain[0]
        return Piece(p.rc.copy(), p.depth.copy(), p.area.copy(), p.start, p.end, p.tile, p.ring)
    n = len(chain)
    if ring:  # a seam ring drops both borrowed vertices; a junction ring closes by itself
        keep = [
            slice(1 if (k > 0 or cut_tail) else 0, p.rc.shape[0] - cut_tail)
            for k, p in enumerate(chain)
        ]
    else:
        keep = [
            slice(0 if k == 0 else 1, p.rc.shape[0] - (cut_tail if k < n - 1 else 0))
            for k, p in enumerate(chain)
        ]
    rc = np.vstack([p.rc[s] for p, s in zip(chain, keep, strict=True)])
    dep = np.concatenate([p.depth[s] for p, s in zip(chain, keep, strict=True)])
    ar = np.concatenate([p.area[s] for p, s in zip(chain, keep, strict=True)])
    if ring:
        if cut_tail:
            rc = np.vstack([rc, rc[:1]])
            dep, ar = np.append(dep, np.nan), np.append(ar, 0.0)
        return Piece(rc, dep, ar, "free", "free", -1, True)
    return Piece(rc, dep, ar, chain[0].start, chain[-1].end, -1)


def drop_loose_seam_vertices(lines: list[Piece]) -> None:
    """An unmatched seam end still carries a vertex in the other core: drop it."""
    for p in lines:
        if p.start == "seam" and p.rc.shape[0] > 2:
            p.rc, p.depth, p.area = p.rc[1:], p.depth[1:], p.area[1:]
        if p.end == "seam" and p.rc.shape[0] > 2:
            p.rc, p.depth, p.area = p.rc[:-1], p.depth[:-1], p.area[:-1]


def polish(rc: FloatArray, closed: bool, window: int, pin: tuple[bool, bool]) -> FloatArray:
    """Take the pixel staircase out: a 3-point running mean (kills the two-pixel zigzag of
    diagonal stretches), then a quadratic Savitzky-Golay fit over ``window`` vertices, which
    keeps curvature. Ends flagged in ``pin`` (junctions) stay where they are."""
    n = rc.shape[0]
    if n < 5:
        return rc
    w = min(window, n if n % 2 else n - 1)
    if closed:
        core = rc[:-1]
        pad = min(w, core.shape[0])
        wrap = np.vstack([core[-pad:], core, core[:pad]])
        mean = (wrap[:-2] + wrap[1:-1] + wrap[2:]) / 3.0
        sm = savgol(mean, min(w, mean.shape[0] - (1 - mean.shape[0] % 2)), 2)
        sm = sm[pad - 1 : pad - 1 + core.shape[0]]
        return np.asarray(np.vstack([sm, sm[:1]]), dtype=np.float64)
    mean = rc.copy()
    mean[1:-1] = (rc[:-2] + rc[1:-1] + rc[2:]) / 3.0
    sm = savgol(mean, w, 2)
    if pin[0]:
        sm[0] = rc[0]
    if pin[1]:
        sm[-1] = rc[-1]
    return np.asarray(sm, dtype=np.float64)
