"""How far a measured rate or median can be trusted: exact confidence intervals for evaluation figures.

A detection rate of 0.990 measured on 500 faults and a false-alarm rate of 3 in 500 benign pairs are
counts, not the model's true rates: another 500 pairs of the same families would give other counts. The
figures ``shotcheck evaluate`` prints carry two-sided intervals that hold the true value with at least
the stated probability, so that a figure can be read against its target:

- a rate (detections among faults, false alarms among benign pairs): the Clopper-Pearson interval, the
  exact binomial one (never shorter than its nominal coverage requires);
- a median (location and fault-instant errors): the distribution-free interval between two order
  statistics, whose ranks come from the binomial distribution with p = 1/2.

A target is *met* when the whole interval lies on its side, *not met* when the whole interval lies on
the other side, and *undecided* when the interval straddles it: then the data set is too small to tell,
whatever the measured value says.

References
----------
C. J. Clopper and E. S. Pearson, The use of confidence or fiducial limits illustrated in the case of the
binomial, Biometrika 26 (4), 1934, 404-413 (the exact interval: the bounds solve
``P(X >= k | p_lo) = alpha/2`` and ``P(X <= k | p_hi) = alpha/2``).
W. J. Conover, Practical Nonparametric Statistics, 3rd ed., Wiley, 1999, section 3.2 (confidence interval
for a quantile from order statistics).
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from scipy import stats

from ._validation import ShotcheckError

__all__ = ["proportion_interval", "median_interval", "target_status", "LEVEL"]

#: Confidence level of the intervals reported by ``shotcheck evaluate`` and ``train`` [1].
LEVEL = 0.95


def _check_level(level: float) -> float:
    if not (isinstance(level, (int, float)) and 0.0 < float(level) < 1.0):
        raise ShotcheckError(f"confidence level must lie strictly between 0 and 1, got {level!r}")
    return float(level)


def proportion_interval(k: int, n: int, level: float = LEVEL) -> tuple[float, float]:
    """Exact (Clopper-Pearson) confidence interval of a rate measured as ``k`` successes in ``n`` trials.

    Parameters
    ----------
    k : int
        Successes (for example detected faults, or false alarms) [1].
    n : int
        Trials (faults, or benign pairs) [1], at least 1.
    level : float
        Two-sided confidence level [1], for example 0.95.

    Returns
    -------
    (low, high) : tuple of float
        Bounds of the rate [1]; ``low`` is 0 when ``k`` is 0 and ``high`` is 1 when ``k`` is ``n``.

    Raises
    ------
    ShotcheckError
        ``n`` below 1, ``k`` outside ``0..n``, or a level outside (0, 1).
    """
    level = _check_level(level)
    if int(n) != n or int(k) != k:
        raise ShotcheckError(f"proportion_interval: k and n must be whole numbers, got k={k!r}, n={n!r}")
    k, n = int(k), int(n)
    if n < 1 or not 0 <= k <= n:
        raise ShotcheckError(f"proportion_interval: need 0 <= k <= n and n >= 1, got k={k}, n={n}")
    a = 1.0 - level
    # the bounds are quantiles of beta distributions (the binomial tail sums written as incomplete
    # beta functions)
    low = 0.0 if k == 0 else float(stats.beta.ppf(a / 2.0, k, n - k + 1))
    high = 1.0 if k == n else float(stats.beta.ppf(1.0 - a / 2.0, k + 1, n - k))
    return low, high


def median_interval(values: np.ndarray, level: float = LEVEL) -> tuple[float, float]:
    """Distribution-free confidence interval of the median of ``values`` from two order statistics.

    With ``x_(1) <= ... <= x_(n)`` the sorted values, the interval is ``[x_(r), x_(n - r + 1)]`` with
    ``r`` the largest rank for which ``P(B <= r - 1) <= (1 - level) / 2``, ``B`` binomial with ``n`` trials
    and ``p = 1/2``; it covers the median of any continuous distribution with at least ``level``.

    Parameters
    ----------
    values : array_like
        Sample (any unit; NaN values are left out).
    level : float
        Two-sided confidence level [1].

    Returns
    -------
    (low, high) : tuple of float
        Bounds in the unit of ``values``; NaN when fewer values are given than the level needs
        (six at 95 %: with five, even the smallest and largest cover only 94 %).
    """
    level = _check_level(level)
    x = np.sort(np.asarray(values, dtype=np.float64).ravel())
    x = x[np.isfinite(x)]
    n = x.size
    a = 1.0 - level
    if n == 0:
        return math.nan, math.nan
    # r - 1 = largest j with P(B <= j) <= a/2; the ppf gives the smallest j with P(B <= j) >= a/2
    j = int(stats.binom.ppf(a / 2.0, n, 0.5))
    if stats.binom.cdf(j, n, 0.5) > a / 2.0:
        j -= 1
    r = j + 1
    if r < 1:
        return math.nan, math.nan
    return float(x[r - 1]), float(x[n - r])


def target_status(low: float, high: float, target: float,
                  better: Literal["higher", "lower"]) -> Literal["met", "not met", "undecided"]:
    """Whether an interval shows a figure meeting its target.

    Parameters
    ----------
    low, high : float
        Confidence interval of the figure (its unit).
    target : float
        The target (same unit): at least it (``better="higher"``, a detection rate) or at most it
        (``better="lower"``, a false-alarm rate or an error).
    better : {"higher", "lower"}
        Which side of the target is good.

    Returns
    -------
    str
        ``"met"`` if the whole interval is on the good side (bounds equal to the target count as on
        it), ``"not met"`` if the whole interval is on the other side, else ``"undecided"`` (also for a
        NaN bound).
    """
    if better not in ("higher", "lower"):
        raise ShotcheckError(f"target_status: better must be 'higher' or 'lower', got {better!r}")
    if not (math.isfinite(low) and math.isfinite(high)):
        return "undecided"
    if better == "higher":
        return "met" if low >= target else "not met" if high < target else "undecided"
    return "met" if high <= target else "not met" if low > target else "undecided"
