"""Small robust statistics on 1-D arrays, without numpy's general-purpose wrappers.

``np.median`` handles any axis, masked and object arrays; for the one-dimensional float arrays of a
comparison (about 60 medians per pair) its bookkeeping costs more than the selection itself. The
functions here give the same numbers to the last bit (a test checks it).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["median1d"]


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
