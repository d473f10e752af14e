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


# ------------------------------------------------------------------------------------- code grid
def _codes(n=5000, sigma_codes=300.0, step=0.7, seed=1):
    rng = np.random.default_rng(seed)
    return np.round(rng.normal(0.0, sigma_codes, n)) * step + 0.123  # a grid with an offset


def test_code_grid_of_exact_near_and_no_grid():
    from detector._stats import code_grid, quantisation_step

    x = _codes()
    q, exact = code_grid(x)
    assert exact and q == pytest.approx(0.7, rel=1e-9)
    rng = np.random.default_rng(2)
    for scatter in (1e-6, 1e-3, 1e-2):  # values a fraction of a code off their grid
        q, exact = code_grid(x + rng.uniform(-scatter, scatter, x.size) * 0.7)
        assert not exact and q == pytest.approx(0.7, rel=1e-5), scatter
    # 32-bit floats of values on a grid (a file's FLOAT32 channel): still the grid
    assert quantisation_step((x * 1e3).astype(np.float32).astype(np.float64)) == pytest.approx(700.0, rel=1e-5)
    # floats on no grid: continuous noise, uniform values, a code grid buried in noise of a code
    assert code_grid(rng.normal(0.0, 1.0, 5000)) == (0.0, False)
    assert code_grid(rng.uniform(0.0, 1.0, 20000)) == (0.0, False)
    assert code_grid(x + rng.normal(0.0, 0.7, x.size)) == (0.0, False)
    # scattered by a quarter of a code: no longer two kinds of spacing
    assert code_grid(x + rng.uniform(-0.25, 0.25, x.size) * 0.7)[0] == 0.0
