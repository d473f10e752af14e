"""Small robust statistics on 1-D arrays, without numpy's general-purpose wrappers.

``np.median`` handles any axis, masked and object arrays; for the one-dimensional float arrays of a
comparison (about 60 medians per pair) its bookkeeping costs more than the selection itself. The
functions here give the same numbers to the last bit (a test checks it).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["agreeing_onset", "median1d"]


def median1d(x: np.ndarray) -> float:
    """Median of a 1-D array, as ``np.median``: NaN if it holds a NaN or is empty.

    Parameters
    ----------
    x : numpy.ndarray
        One-dimensional float array (any unit; the result has the same unit).

    Returns
    -------
    float
    """
    a = np.asarray(x, dtype=np.float64).ravel()
    n = a.size
    if n == 0:
        return math.nan
    k = n // 2
    if n % 2:
        p = np.partition(a, (k, n - 1))  # NaN sorts last: partitioning the last place finds it
        return math.nan if math.isnan(p[-1]) else float(p[k])
    p = np.partition(a, (k - 1, k, n - 1))
    return math.nan if math.isnan(p[-1]) else float(0.5 * (p[k - 1] + p[k]))


def agreeing_onset(onsets: np.ndarray, *, agree_us: float = 0.05, count: int = 3) -> np.ndarray:
    """Earliest time at which ``count`` onsets of a row agree within ``agree_us``, NaN where none do.

    Parameters
    ----------
    onsets : numpy.ndarray, shape (n_rows, n_detectors)
        Onset times of independent detectors [us]; NaN where a detector saw nothing.
    agree_us : float
        Largest spread of the agreeing onsets [us].
    count : int
        Number of agreeing detectors (at least 1).

    Returns
    -------
    numpy.ndarray, shape (n_rows,)
        The earliest onset of the first agreeing group of each row [us].
    """
    C = np.sort(np.atleast_2d(np.asarray(onsets, dtype=np.float64)), axis=1)  # NaN sort last
    if C.shape[1] < count:
        return np.full(C.shape[0], np.nan)
    spread = C[:, count - 1:] - C[:, : C.shape[1] - count + 1]
    ok = np.isfinite(spread) & (spread <= agree_us)
    first = np.argmax(ok, axis=1)
    return np.where(ok.any(axis=1), C[np.arange(C.shape[0]), first], np.nan)
