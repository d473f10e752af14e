"""Confidence intervals of evaluation figures (detector.uncertainty), checked against their definitions,
closed forms and their coverage."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

from detector._validation import ShotcheckError
from detector.uncertainty import median_interval, proportion_interval, target_status


def _binom_cdf(k: int, n: int, p: float) -> float:
    """P(X <= k) of a binomial variable, summed term by term (independent of scipy)."""
    return math.fsum(math.comb(n, j) * p**j * (1.0 - p) ** (n - j) for j in range(k + 1))


@pytest.mark.parametrize("n", [10, 500, 2000])
def test_no_successes_gives_the_closed_form_upper_bound(n):
    # Clopper and Pearson (1934), Biometrika 26:404-413: with k = 0 the upper bound solves
    # (1 - p)^n = alpha / 2, so p_hi = 1 - (alpha/2)^(1/n); and symmetrically p_lo = (alpha/2)^(1/n) for k = n
    lo, hi = proportion_interval(0, n)
    assert lo == 0.0
    assert hi == pytest.approx(1.0 - 0.025 ** (1.0 / n), rel=1e-10)
    lo, hi = proportion_interval(n, n)
    assert hi == 1.0
    assert lo == pytest.approx(0.025 ** (1.0 / n), rel=1e-10)


def test_zero_of_ten_is_the_textbook_interval():
    # 0 of 10 at 95 %: [0, 0.3085] (1 - 0.025^(1/10); the usual worked example of the exact interval)
    assert proportion_interval(0, 10) == (0.0, pytest.approx(0.30850, abs=5e-6))


def test_no_false_alarms_in_n_pairs_bounds_the_rate_near_three_over_n():
    # the "rule of three" (Hanley and Lippman-Hand, JAMA 249, 1983, 1743-1745; from memory): with no
    # event in n trials the one-sided 95 % upper bound is about 3/n, the two-sided 90 % interval's upper end
    for n in (300, 500, 2000):
        _, hi = proportion_interval(0, n, level=0.90)
        assert hi == pytest.approx(3.0 / n, rel=0.01)


@pytest.mark.parametrize(("k", "n", "level"), [(3, 500, 0.95), (495, 500, 0.95), (882, 1000, 0.95),
                                               (17, 40, 0.90), (1, 2, 0.95)])
def test_bounds_solve_the_defining_tail_equations(k, n, level):
    # Clopper and Pearson (1934): P(X >= k | p_lo) = alpha/2 and P(X <= k | p_hi) = alpha/2, the tails
    # summed here term by term
    a = 1.0 - level
    lo, hi = proportion_interval(k, n, level)
    assert 0.0 < lo < k / n < hi < 1.0
    assert 1.0 - _binom_cdf(k - 1, n, lo) == pytest.approx(a / 2.0, rel=1e-6)
    assert _binom_cdf(k, n, hi) == pytest.approx(a / 2.0, rel=1e-6)


def test_the_interval_covers_the_true_rate_at_least_as_often_as_stated():
    # exact intervals are conservative: over repeated sets of 500 benign pairs with a true false-alarm
    # rate of 1 %, at least 95 % of the intervals hold 0.01 (the coverage, summed exactly over k)
    n, p = 500, 0.01
    covered = 0.0
    for k in range(0, 40):
        lo, hi = proportion_interval(k, n)
        if lo <= p <= hi:
            covered += math.comb(n, k) * p**k * (1 - p) ** (n - k)
    assert 0.95 <= covered < 0.99


def test_median_interval_takes_the_order_statistics_the_binomial_gives():
    # n = 10: P(B <= 1) = 11/1024 <= 0.025 < P(B <= 2) = 56/1024 (B binomial, p = 1/2), so the 95 %
    # interval runs from the 2nd to the 9th smallest value (Conover 1999, section 3.2)
    assert Fraction(sum(math.comb(10, j) for j in range(2)), 1024) <= Fraction(1, 40) < Fraction(
        sum(math.comb(10, j) for j in range(3)), 1024)
    x = np.array([7.0, 1.0, 9.0, 3.0, 10.0, 2.0, 8.0, 4.0, 6.0, 5.0])
    assert median_interval(x) == (2.0, 9.0)
    # NaN values are left out; five values cannot give 95 % (the extremes cover 1 - 2/32 = 94 %)
    assert median_interval(np.array([np.nan, *range(1, 11)])) == (2.0, 9.0)
    assert all(math.isnan(v) for v in median_interval(np.arange(5.0)))
    assert median_interval(np.arange(6.0)) == (0.0, 5.0)  # 1 - 2/64 = 96.9 %


def test_median_interval_covers_the_true_median_of_a_skewed_distribution():
    # errors are skewed like the location errors: exponential, true median ln 2; over 2000 samples of 25
    # the interval must hold it in at least 95 % of them (within the Monte Carlo's scatter)
    rng = np.random.default_rng(11)
    hits = 0
    for _ in range(2000):
        lo, hi = median_interval(rng.exponential(1.0, 25))
        hits += lo <= math.log(2.0) <= hi
    assert hits / 2000 >= 0.94


def test_target_status_needs_the_whole_interval_on_one_side():
    assert target_status(0.979, 0.996, 0.98, "higher") == "undecided"
    assert target_status(0.981, 0.996, 0.98, "higher") == "met"
    assert target_status(0.861, 0.901, 0.95, "higher") == "not met"
    assert target_status(0.0012, 0.0174, 0.01, "lower") == "undecided"
    assert target_status(0.0, 0.0074, 0.01, "lower") == "met"
    assert target_status(0.058, 0.074, 0.05, "lower") == "not met"
    assert target_status(math.nan, 0.1, 0.05, "lower") == "undecided"


@pytest.mark.parametrize(("call", "match"), [
    (lambda: proportion_interval(5, 4), "0 <= k <= n"),
    (lambda: proportion_interval(0, 0), "n >= 1"),
    (lambda: proportion_interval(1.5, 4), "whole numbers"),
    (lambda: proportion_interval(1, 4, level=1.0), "between 0 and 1"),
    (lambda: median_interval(np.arange(10.0), level=0.0), "between 0 and 1"),
    (lambda: target_status(0.1, 0.2, 0.15, "bigger"), "'higher' or 'lower'"),
])
def test_bad_arguments_are_clear_errors(call, match):
    with pytest.raises(ShotcheckError, match=match):
        call()
