"""Skeleton pixels to a graph of ordered branches, vectorised (no per-pixel Python loops).

A one-pixel-wide skeleton (from :func:`skimage.morphology.skeletonize`) becomes a graph whose
nodes are pixels. Four-neighbours are always linked; a diagonal neighbour is linked only when no
pixel of the skeleton offers a four-connected way round (so a staircase corner does not look
like a junction). Pixels with three or more links are junction pixels; touching junction pixels
form one junction. The rest fall apart into branches: simple paths (or rings) that are ordered
from one end with a single multi-source shortest-path call. This module knows nothing of files,
windows or metres beyond the step lengths it is given.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components, dijkstra

IntArray = npt.NDArray[np.int64]
FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]


@dataclass(frozen=True)
class SkeletonGraph:
    """Branches of a skeleton image.

    Attributes
    ----------
    rows, cols
        ``(n,)`` pixel indices of the skeleton pixels.
    branches
        Ordered pixel indices (into ``rows``/``cols``) of each branch.
    start_node, end_node
        Per branch, the junction its first / last pixel touches, or -1 (a free end).
    ring
        Per branch, True for a closed loop (no end at all).
    node_rc
        ``(m, 2)`` centroid (row, col) of each junction.
    """

    rows: IntArray
    cols: IntArray
    branches: list[IntArray]
    start_node: IntArray
    end_node: IntArray
    ring: BoolArray
    node_rc: FloatArray


def _edges(sk: BoolArray, rows: IntArray, cols: IntArray) -> tuple[IntArray, IntArray]:
    """Links between skeleton pixels: four-neighbours, and diagonals with no way round."""
    padded = np.pad(sk, 1)
    index = np.full(padded.shape, -1, dtype=np.int64)
    index[rows + 1, cols + 1] = np.arange(rows.size)
    r, c = rows + 1, cols + 1
    src: list[IntArray] = []
    dst: list[IntArray] = []
    for dr, dc in ((0, 1), (1, 0)):
        nb = index[r + dr, c + dc]
        ok = nb >= 0
        src.append(np.flatnonzero(ok))
        dst.append(nb[ok])
    for dc in (1, -1):
        nb = index[r + 1, c + dc]
        ok = (nb >= 0) & ~padded[r, c + dc] & ~padded[r + 1, c]
        src.append(np.flatnonzero(ok))
        dst.append(nb[ok])
    return np.concatenate(src), np.concatenate(dst)


def _components(n: int, a: IntArray, b: IntArray) -> IntArray:
    graph = coo_matrix((np.ones(a.size), (a, b)), shape=(n, n)).tocsr()
    _, labels = connected_components(graph, directed=False)
    return np.asarray(labels, dtype=np.int64)


def skeleton_graph(sk: BoolArray) -> SkeletonGraph:
    """Split a skeleton image into ordered branches between junctions and free ends.

    Parameters
    ----------
    sk
        Boolean image, True on skeleton pixels (one pixel wide).

    Returns
    -------
    SkeletonGraph

    Examples
    --------
    A plus sign: one junction, four branches of two pixels each.

    >>> import numpy as np
    >>> sk = np.zeros((5, 5), dtype=bool)
    >>> sk[2, :] = True
    >>> sk[:, 2] = True
    >>> g = skeleton_graph(sk)
    >>> len(g.branches), g.node_rc.tolist()
    (4, [[2.0, 2.0]])
    >>> sorted(int(x.size) for x in g.branches), sorted(g.start_node.tolist() + g.end_node.tolist())
    ([2, 2, 2, 2], [-1, -1, -1, -1, 0, 0, 0, 0])
    """
    rows, cols = (np.asarray(v, dtype=np.int64) for v in np.nonzero(sk))
    n = rows.size
    empty = np.empty(0, dtype=np.int64)
    if n == 0:
        return SkeletonGraph(rows, cols, [], empty, empty, np.empty(0, bool), np.empty((0, 2)))
    a, b = _edges(sk, rows, cols)
    degree = np.bincount(a, minlength=n) + np.bincount(b, minlength=n)
    junction = degree >= 3
    # junctions: touching junction pixels form one node
    jj = junction[a] & junction[b]
    jlab = _components(n, a[jj], b[jj])
    node_of = np.full(n, -1, dtype=np.int64)
    uniq, inv = np.unique(jlab[junction], return_inverse=True)
    node_of[junction] = inv
    m = uniq.size
    counts = np.bincount(inv, minlength=m).astype(np.float64)
    node_rc = np.column_stack(
        [
            np.bincount(inv, rows[junction], minlength=m) / np.maximum(counts, 1),
            np.bincount(inv, cols[junction], minlength=m) / np.maximum(counts, 1),
        ]
    )
    # branches: the graph without junction pixels
    bb = ~junction[a] & ~junction[b]
    ba, bd = a[bb], b[bb]
    blab = _components(n, ba, bd)
    deg_b = np.bincount(ba, minlength=n) + np.bincount(bd, minlength=n)
    plain = np.flatnonzero(~junction)
    if plain.size == 0:
        return SkeletonGraph(rows, cols, [], empty, empty, np.empty(0, bool), node_rc)
    labels = blab[plain]
    ends = plain[deg_b[plain] <= 1]
    # one source per branch: its lowest-numbered end, or for a ring its lowest pixel
    branch_ids, first = np.unique(labels, return_index=True)
    end_ids, end_first = np.unique(blab[ends], return_index=True)
    source_of = dict(zip(branch_ids.tolist(), plain[first].tolist(), strict=True))
    source_of.update(zip(end_ids.tolist(), ends[end_first].tolist(), strict=True))
    ring_ids = np.setdiff1d(branch_ids, end_ids)
    if ring_ids.size:
        # cut each ring open next to its source: drop one link of the source pixel
        ring_src = np.array([source_of[i] for i in ring_ids.tolist()], dtype=np.int64)
        is_src = np.zeros(n, dtype=bool)
        is_src[ring_src] = True
        hit = np.flatnonzero(is_src[ba] | is_src[bd])
        owner = np.where(is_src[ba[hit]], ba[hit], bd[hit])
        _, first_hit = np.unique(owner, return_index=True)
        keep = np.ones(ba.size, dtype=bool)
        keep[hit[first_hit]] = False
        ba, bd = ba[keep], bd[keep]
    sources = np.array([source_of[i] for i in branch_ids.tolist()], dtype=np.int64)
    graph = coo_matrix((np.ones(ba.size), (ba, bd)), shape=(n, n)).tocsr()
    dist = dijkstra(graph, directed=False, indices=sources, unweighted=True, min_only=True)
    order = plain[np.lexsort((dist[plain], labels))]
    cuts = np.flatnonzero(np.diff(blab[order])) + 1
    branches = [np.asarray(x, dtype=np.int64) for x in np.split(order, cuts)]
    # the junction each branch end touches (an end touches at most one, a lone pixel two)
    aj = junction[a] & ~junction[b]
    bj = junction[b] & ~junction[a]
    pix = np.concatenate([b[aj], a[bj]])
    node = np.concatenate([node_of[a[aj]], node_of[b[bj]]])
    srt = np.argsort(pix, kind="stable")
    pix, node = pix[srt], node[srt]
    first_node = np.full(n, -1, dtype=np.int64)
    last_node = np.full(n, -1, dtype=np.int64)
    first_node[pix[::-1]] = node[::-1]
    last_node[pix] = node
    heads = np.array([x[0] for x in branches], dtype=np.int64)
    tails = np.array([x[-1] for x in branches], dtype=np.int64)
    ring = np.isin(blab[heads], ring_ids)
    start_node = np.where(ring, -1, first_node[heads])
    end_node = np.where(ring, -1, last_node[tails])
    lone = (heads == tails) & (start_node == end_node)
    end_node = np.where(lone & (first_node[tails] != last_node[tails]), -1, end_node)
    return SkeletonGraph(rows, cols, branches, start_node, end_node, ring, node_rc)
