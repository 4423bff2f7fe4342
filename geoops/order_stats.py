"""Median and percentiles of small arrays, equal to numpy's to the last bit, without numpy's
overhead per call (tens of microseconds, which adds up over a call per candidate pair or per
pass record). Sort once, then read as many order statistics as needed.
"""

from __future__ import annotations

import math

import numpy as np


def median_of_sorted(v: np.ndarray) -> float:
    """``np.median`` of an ascending array (not empty).

    >>> median_of_sorted(np.array([1.0, 2.0, 4.0, 8.0])), median_of_sorted(np.array([3.0]))
    (3.0, 3.0)
    """
    half = len(v) // 2
    return float(v[half]) if len(v) % 2 else (float(v[half - 1]) + float(v[half])) / 2.0


def percentile_of_sorted(v: np.ndarray, q: float) -> float:
    """``np.percentile(v, 100 * q)`` (linear interpolation) of an ascending array (not
    empty): numpy's virtual index ``(n - 1) q`` and its two-sided interpolation. ``q`` is the
    fraction numpy would compute, e.g. 0.95 for the 95th percentile (95 / 100).

    >>> percentile_of_sorted(np.array([0.0, 1.0, 2.0, 10.0]), 0.75)
    4.0
    """
    at = (len(v) - 1) * q
    lo = math.floor(at)
    hi = min(lo + 1, len(v) - 1)
    t = at - lo
    a, b = float(v[lo]), float(v[hi])
    return b - (b - a) * (1.0 - t) if t >= 0.5 else a + (b - a) * t
