"""Small robust statistics on 1-D arrays, without numpy's general-purpose wrappers.

``np.median`` handles any axis, masked and object arrays; for the one-dimensional float arrays of a
comparison (about 60 medians per pair) its bookkeeping costs more than the selection itself. The
functions here give the same numbers to the last bit (a test checks it).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["agreeing_onset", "code_grid", "median1d", "quantisation_step"]


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


def quantisation_step(samples: np.ndarray) -> float:
    """Code step of recorded samples [their unit]: the typical spacing of their distinct values.

    Returns 0 for samples that are not quantised (e.g. simulated floats). The median of the smaller
    half of the spacings between distinct values is the step when the samples sit on a grid (most
    neighbours differ by one code). Samples near a grid but not on it count too: see :func:`code_grid`.

    Parameters
    ----------
    samples : numpy.ndarray
        Samples of one channel [any unit].

    Returns
    -------
    float
        The step [unit of ``samples``], 0 when the samples sit on no grid.
    """
    return code_grid(samples)[0]


def code_grid(samples: np.ndarray) -> tuple[float, bool]:
    """Code step of recorded samples [their unit], and whether they sit exactly on its grid.

    Samples near a grid but not on it (a record converted to other units or stored as 32-bit floats and
    back, a few digits printed and read again: the values of one code then differ by a small fraction
    of it) have two kinds of spacing, within a code and between codes, with none in between: where the
    sorted spacings show such a gap (a jump by a factor of 20 or more, with a tenth of them below it),
    the step is read from the spacings of the codes' mean values, and it counts when those are whole
    multiples of it and the values of one code lie within a tenth of it.

    Parameters
    ----------
    samples : numpy.ndarray
        Samples of one channel [any unit].

    Returns
    -------
    (step, exact) : (float, bool)
        The step [unit of ``samples``] (0 when the samples sit on no grid), and True when every spacing
        is a whole number of steps within 5 % (False for a grid found from the codes' means).
    """
    u = np.unique(np.asarray(samples, dtype=np.float64))
    if u.size < 16:
        return 0.0, False
    d = np.diff(u)
    span = float(u[-1] - u[0])
    if span <= 0:
        return 0.0, False
    g = np.sort(d)
    q = float(np.median(g[: max(1, d.size // 2)]))
    # on a grid most spacings are whole multiples of q; a float record has spacings of every size
    if q > 0 and q >= 1e-9 * span and np.mean(np.abs(d / q - np.round(d / q)) < 0.05) >= 0.8:
        return q, True
    return _near_grid_step(u, d, g, span), False


def _near_grid_step(u: np.ndarray, d: np.ndarray, g: np.ndarray, span: float) -> float:
    """Step of values scattered slightly about a grid, or 0: ``u`` the distinct values (ascending),
    ``d`` their spacings and ``g`` those sorted."""
    lo = max(1, g.size // 10)  # at least a tenth of the spacings within codes
    hi = g.size - 16  # and 16 between codes
    if hi <= lo or not g[0] > 0:
        return 0.0
    jump = g[lo:hi] / g[lo - 1:hi - 1]
    k = int(np.argmax(jump))
    if not jump[k] >= 20.0:
        return 0.0
    # the values of one code, and the step from the spacings of their means (the spacings between the
    # edges of neighbouring codes are shorter by the codes' scatter)
    code = np.concatenate(([0], np.cumsum(d > math.sqrt(g[lo - 1 + k] * g[lo + k]))))
    centre = np.bincount(code, weights=u) / np.bincount(code)
    dc = np.diff(centre)
    q = float(np.median(np.sort(dc)[: max(1, dc.size // 2)]))
    if q < 1e-9 * span or g[lo - 1 + k] > 0.1 * q or np.mean(np.abs(dc / q - np.round(dc / q)) < 0.1) < 0.8:
        return 0.0
    # refined: the slope of the codes' means over their code numbers (least squares)
    n_code = np.concatenate(([0.0], np.cumsum(np.round(dc / q))))  # each spacing a whole number of codes
    nc = n_code - n_code.mean()
    return float(nc @ (centre - centre.mean()) / (nc @ nc))
