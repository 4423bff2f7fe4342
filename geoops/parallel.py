"""Spreading one layer's per-rut and per-pair work over the machine's cores.

The pipeline's two costly stages are independent item by item: cleaning each input rut, and
judging each candidate pair. :func:`pool_map` runs such a stage in forked worker processes that
inherit the stage's inputs (nothing large is pickled on the way in), in order, so a run with
workers gives exactly the result of a run without. It falls back to a plain loop where forking
is not possible or not worth it: one worker asked for, few items, no ``fork`` start method, or
inside a daemonic process (Dask workers and the service's job processes cannot have children).
"""

from __future__ import annotations

import multiprocessing as mp
import os
from collections.abc import Callable, Sequence
from typing import Any, TypeVar

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


def pool_map(
    fn: Callable[[dict[str, Any], T], R],
    items: Sequence[T],
    state: dict[str, Any],
    workers: int | None,
) -> list[R]:
    """``[fn(state, item) for item in items]``, spread over ``workers`` forked processes.

    ``fn`` must be a module-level function (it is sent by reference); ``state`` reaches the
    workers through the fork. ``workers`` None or 1 runs in this process.
    """
    n = 1 if workers is None else max(1, int(workers))
    n = min(n, max(1, len(items) // MIN_ITEMS_PER_WORKER))
    if n <= 1 or not can_fork():
        return [fn(state, item) for item in items]
    global _STATE
    _STATE = state
    try:
        with mp.get_context("fork").Pool(n) as pool:
            return list(pool.imap(_call, [(fn, item) for item in items], chunksize=CHUNK))
    finally:
        _STATE = {}
