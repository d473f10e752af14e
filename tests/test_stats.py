"""detector._stats.median1d gives numpy.median's numbers to the last bit (the reference is numpy itself)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from detector._stats import median1d


@pytest.mark.parametrize("n", [1, 2, 3, 8, 55, 56, 1553, 1554, 20_000])
def test_median_equals_numpy(n):
    rng = np.random.default_rng(n)
    for x in (rng.normal(size=n), rng.integers(-3, 4, size=n).astype(float), np.full(n, 2.5)):
        assert median1d(x) == np.median(x)


def test_nan_and_empty_like_numpy():
    x = np.arange(9.0)
    x[4] = np.nan
    assert math.isnan(median1d(x)) and math.isnan(np.median(x))
    x = np.arange(10.0)
    x[0] = np.nan
    assert math.isnan(median1d(x))
    assert math.isnan(median1d(np.array([])))
