"""Order statistics read off a sorted array, against numpy's own functions."""

from __future__ import annotations

import numpy as np
import pytest

from geoops.order_stats import median_of_sorted, percentile_of_sorted


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 8, 9, 10, 11, 17, 20, 21, 64, 101, 250])
def test_median_and_percentiles_match_numpy_to_the_last_bit(n: int) -> None:
    # source: numpy 2.x median and percentile (method="linear", Hyndman & Fan type 7)
    rng = np.random.default_rng(n)
    samples = (rng.uniform(0.5, 3.5, n), rng.lognormal(0.0, 2.0, n), rng.uniform(0, 3, n).round(1),
               -rng.exponential(1e-3, n))
    for values in samples:
        v = np.sort(values)
        assert median_of_sorted(v) == float(np.median(values))
        for percent in (5, 25, 50, 75, 95, 100):
            assert percentile_of_sorted(v, percent / 100) == float(np.percentile(values, percent))
