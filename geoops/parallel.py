"""Spreading one layer's per-rut and per-pair work over the machine's cores.

Judging candidate pairs is independent pair by pair and mostly Python: :func:`pool_map` runs
such a stage in forked worker processes that inherit the stage's inputs (nothing large is
pickled on the way in), in order, so a run with workers gives exactly the result of a run
without. It falls back to a plain loop where forking is not possible or not worth it: one
worker asked for, few items, no ``fork`` start method, or inside a daemonic process (Dask
workers and the service's job processes cannot have children).

A compiled kernel that releases the GIL (``nogil=True``, see :mod:`geoops.kernels`) over an
array of independent items runs in threads instead (:func:`thread_slices`): no fork, nothing
pickled.
"""

from __future__ import annotations

import gc
import multiprocessing as mp
import os
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from typing import Any, TypeVar

import numpy as np

T = TypeVar("T")
R = TypeVar("R")

#: fewest items per worker for which forking pays for itself
MIN_ITEMS_PER_WORKER = 64
#: items handed to a worker at a time (small enough to even out uneven items)
CHUNK = 16

_STATE: dict[str, Any] = {}


def default_workers() -> int:
    """Cores this process may use (at most 8)."""
    try:
        n = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        n = os.cpu_count() or 1
    return max(1, min(n, 8))


def can_fork() -> bool:
    """Whether worker processes can be forked from here."""
    return "fork" in mp.get_all_start_methods() and not mp.current_process().daemon


def _call(args: tuple[Callable[[dict[str, Any], Any], Any], Any]) -> Any:
    fn, item = args
    return fn(_STATE, item)


#: what :func:`worker_pool` yields: ``run(fn, items)`` -> ``[fn(state, item) for item in items]``
Mapper = Callable[[Callable[[dict[str, Any], Any], Any], Sequence[Any]], list[Any]]


@contextmanager
def worker_pool(state: dict[str, Any], workers: int | None, items: int) -> Iterator[Mapper]:
    """Forked worker processes that inherit ``state``, for one or more maps over about
    ``items`` items in all: yields ``run(fn, items)``, which returns ``[fn(state, item) for
    item in items]`` computed in the workers (in order). ``fn`` must be a module-level
    function (it is sent by reference). ``workers`` None or 1, or too few items, runs in
    this process."""
    n = 1 if workers is None else max(1, int(workers))
    n = min(n, max(1, items // MIN_ITEMS_PER_WORKER))
    if n <= 1 or not can_fork():
        yield lambda fn, todo: [fn(state, item) for item in todo]
        return
    global _STATE
    _STATE = state
    # the workers' garbage collector must not walk the parent's objects: it would touch (and
    # so copy, page by page) all of the inherited heap; frozen objects are left alone
    gc.freeze()
    try:
        with mp.get_context("fork").Pool(n) as pool:
            yield lambda fn, todo: list(
                pool.imap(_call, [(fn, item) for item in todo], chunksize=CHUNK)
            )
    finally:
        gc.unfreeze()
        _STATE = {}


def pool_map(
    fn: Callable[[dict[str, Any], T], R],
    items: Sequence[T],
    state: dict[str, Any],
    workers: int | None,
) -> list[R]:
    """``[fn(state, item) for item in items]``, spread over ``workers`` forked processes
    (one map of :func:`worker_pool`); ``state`` reaches the workers through the fork."""
    with worker_pool(state, workers, len(items)) as run:
        return run(fn, items)


#: fewest items per thread for which threading a kernel pays for itself
MIN_ITEMS_PER_THREAD = 256


def thread_slices(
    fn: Callable[..., tuple[np.ndarray, ...]],
    split: Sequence[np.ndarray],
    rest: tuple[Any, ...],
    workers: int | None,
) -> tuple[np.ndarray, ...]:
    """``fn(*split, *rest)`` for a kernel that releases the GIL and maps equal-length item
    arrays ``split`` to a tuple of per-item output arrays: the items are cut into one
    contiguous slice per thread, and each output is the slices' outputs joined in order (the
    same arrays as one call gives)."""
    n = len(split[0]) if split else 0
    k = 1 if workers is None else max(1, int(workers))
    k = min(k, max(1, n // MIN_ITEMS_PER_THREAD))
    if k <= 1:
        return tuple(fn(*split, *rest))
    cuts = np.linspace(0, n, k + 1).round().astype(np.int64)
    with ThreadPoolExecutor(k) as pool:
        parts = list(
            pool.map(
                lambda a_b: fn(*(np.ascontiguousarray(x[a_b[0] : a_b[1]]) for x in split), *rest),
                zip(cuts[:-1].tolist(), cuts[1:].tolist(), strict=True),
            )
        )
    return tuple(np.concatenate([p[c] for p in parts]) for c in range(len(parts[0])))
