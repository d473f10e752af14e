"""Damped oscillations of the winding that start at an unknown instant in a difference trace.

A charge moved inside the winding (a partial discharge between discs, a discharge to ground) or a
small change of it (a few shorted turns) sets the winding's own natural oscillations going from that
instant: what reaches the neutral is a sum of damped sinusoids at the winding's resonance
frequencies, slow ones (tens to hundreds of kHz) lasting tens of microseconds. A moving average of a
few microseconds sees half a period of such an oscillation at best; a detector matched to a damped
sinusoid sees all of it.

For each trial frequency ``f`` (quality factor ``Q``, so decay rate ``a = pi f / Q``) and each onset
``s``, the difference ``d`` is fitted by weighted least squares (weights ``1/sigma^2``) with the two
regressors ``exp(-a (t - s)) cos(2 pi f (t - s))`` and ``... sin(...)`` for ``t >= s`` (zero before):
unknown amplitude and phase. The statistic ``T(s, f) = b' G^-1 b`` (``b`` the weighted correlations
of ``d`` with the two regressors, ``G`` their weighted Gram matrix) is the generalised likelihood
ratio of "an oscillation from ``s`` on" against "noise only"; under white Gaussian noise of the given
sigma it is chi-square with two degrees of freedom at each ``(s, f)``, and for a present oscillation
its square root is the amplitude in units of its standard error. The scan reports, per frequency, the
largest ``sqrt(T)`` over the onsets and where it was.

Because the regressors restricted to ``t >= s`` are one complex exponential ``c(t) = exp((-a + j 2 pi
f) t)`` times a constant, every sum over ``t >= s`` is a reverse cumulative sum: all onsets at once,
no loop over samples. The trace is first averaged over blocks (``block_s``, well below the period of
the highest trial frequency), which the slow oscillations sought do not notice.

References
----------
S. M. Kay, Fundamentals of Statistical Signal Processing, Vol. II: Detection Theory, Prentice Hall,
1998, ch. 7 (the generalised likelihood ratio test for a signal with unknown amplitude and phase; an
unknown arrival time is one more parameter maximised over).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .._validation import ShotcheckError, check_range

__all__ = ["OscillationScan", "damped_oscillation_scan", "OSCILLATION_FREQUENCIES_HZ"]

#: Trial frequencies [Hz]: 17 log-spaced from 20 kHz to 2 MHz (adjacent ones 1.33 times apart, so a
#: resonance of quality 4 is never more than half its bandwidth from one of them).
OSCILLATION_FREQUENCIES_HZ: tuple[float, ...] = tuple(float(f) for f in np.geomspace(20e3, 2e6, 17))

#: Largest exponent (natural log) the powers of one segment may span, for the fastest-decaying of the
#: three sums (pole |p|^2): exp(300) stays well within double precision.
_MAX_EXPONENT = 300.0


@dataclasses.dataclass(frozen=True)
class OscillationScan:
    """Per trial frequency, the strongest damped oscillation found and where it began.

    Attributes
    ----------
    frequencies_Hz : numpy.ndarray
        Trial frequencies [Hz].
    z : numpy.ndarray
        Largest ``sqrt(T)`` over the onsets at each frequency [noise units] (0 where nothing was
        scored).
    onset_s : numpy.ndarray
        Start of the block where that largest statistic began, on the trace's time axis [s] (NaN where
        nothing was scored).
    """

    frequencies_Hz: np.ndarray
    z: np.ndarray
    onset_s: np.ndarray

    def strongest(self, low_Hz: float = 0.0, high_Hz: float = math.inf) -> int | None:
        """Index of the largest ``z`` among the frequencies in ``[low_Hz, high_Hz)``, None if none."""
        sel = np.flatnonzero((self.frequencies_Hz >= low_Hz) & (self.frequencies_Hz < high_Hz))
        if sel.size == 0:
            return None
        return int(sel[np.argmax(self.z[sel])])


def _onset_sums(wr: np.ndarray, wk: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For every trial pole ``p[f]`` (``|p| < 1``) and onset ``s``: ``sum_{k >= s} p^(k-s) wr[k]``,
    ``sum |p|^(2(k-s)) wk[k]`` and ``sum p^(2(k-s)) wk[k]`` (rows ``f``, columns ``s``).

    Each is a cumulative sum of ``p^-i x`` over the reversed trace rescaled by ``p^i``, segment by
    segment so that no power leaves the range of double precision (what the later segments hold is
    carried in, decayed by ``p^(b - s)``); the powers of ``p`` are formed once and squared for the
    other two.
    """
    K = wr.size
    decay = float(np.max(-np.log(np.abs(p)))) * 2.0  # per block, of the faster-decaying |p|^2
    seg = K if decay * K <= _MAX_EXPONENT else max(1, int(_MAX_EXPONENT / decay))
    types = (np.complex128, np.float64, np.complex128)  # the second sum is real (its pole is |p|^2)
    out = [np.empty((p.size, K), dtype=t) for t in types]
    carry = [np.zeros(p.size, dtype=t) for t in types]
    for b in range(K, 0, -seg):  # a few segments (one for the usual records)
        a = max(0, b - seg)
        # in reversed order within the segment (i = b - 1 - k, contiguous, so the sums run fast):
        # y[i] = sum_{i' <= i} p^(i - i') x[i'] = cumsum(p^-i' x[i'])[i] / p^-i
        inv = np.empty((p.size, b - a), dtype=np.complex128)
        inv[:, 0] = 1.0
        inv[:, 1:] = (1.0 / p)[:, None]
        np.cumprod(inv, axis=1, out=inv)  # p^-i (relative error ~1e-13 after a thousand steps)
        for q, (x, pw, pole) in enumerate(((wr, inv, p), (wk, np.abs(inv) ** 2, np.abs(p) ** 2),
                                           (wk, inv * inv, p * p))):
            y = np.cumsum(pw * x[a:b][::-1], axis=1)
            y += carry[q][:, None] * pole[:, None]  # what the later segments hold, times p^(i + 1) ...
            y /= pw  # ... once divided by p^-i
            out[q][:, a:b] = y[:, ::-1]
            carry[q] = out[q][:, a]
    return out[0], out[1], out[2]


def damped_oscillation_scan(
    difference: np.ndarray,
    sigma: np.ndarray,
    scored: np.ndarray,
    dt: float,
    *,
    t0_s: float = 0.0,
    frequencies_Hz: tuple[float, ...] = OSCILLATION_FREQUENCIES_HZ,
    quality: float = 4.0,
    block_s: float = 100e-9,
) -> OscillationScan:
    """Scan a difference trace for a damped oscillation with unknown onset, amplitude and phase.

    Parameters
    ----------
    difference : numpy.ndarray
        Difference trace [any unit, e.g. per-unit current].
    sigma : numpy.ndarray
        Noise standard deviation of each sample [unit of ``difference``], > 0 where scored.
    scored : numpy.ndarray of bool
        Samples that take part (the others weigh nothing: an oscillation may run through them).
    dt : float
        Sample interval [s].
    t0_s : float
        Time of the first sample [s].
    frequencies_Hz : tuple of float
        Trial frequencies [Hz], each below half the block rate.
    quality : float
        Quality factor of the trial oscillations [1]: they decay as ``exp(-pi f t / quality)``.
    block_s : float
        Length of the blocks the trace is averaged over first [s] (at least one sample).

    Returns
    -------
    OscillationScan

    Raises
    ------
    ShotcheckError
        Arrays of unequal length, or a trial frequency at or above half the block rate.
    """
    d = np.asarray(difference, dtype=np.float64)
    s = np.asarray(sigma, dtype=np.float64)
    m = np.asarray(scored, dtype=bool)
    if not (d.ndim == 1 and s.shape == d.shape and m.shape == d.shape):
        raise ShotcheckError("damped_oscillation_scan: difference, sigma and scored must be 1-D and of one length")
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    quality = check_range("quality", quality, 0.0, None, low_inclusive=False)
    f = np.asarray(frequencies_Hz, dtype=np.float64)
    B = max(1, int(round(block_s / dt)))
    dtb = B * dt
    if f.size == 0 or np.any(f <= 0) or np.any(f >= 0.5 / dtb):
        raise ShotcheckError(f"damped_oscillation_scan: trial frequencies must lie in (0, {0.5 / dtb:g}) Hz "
                             f"(half the block rate), got {f.min() if f.size else 'none'}..{f.max() if f.size else ''}")
    K = d.size // B
    nan_out = OscillationScan(f, np.zeros(f.size), np.full(f.size, np.nan))
    m = m & np.isfinite(s) & (s > 0) & np.isfinite(d)
    if K < 4 or not m.any():
        return nan_out
    w = np.where(m, 1.0 / np.where(m, s, 1.0) ** 2, 0.0)[: K * B]
    Wk = w.reshape(K, B).sum(axis=1)  # weight of each block
    WRk = (w * np.where(m, d, 0.0)[: K * B]).reshape(K, B).sum(axis=1)  # weighted sum of the trace
    om = 2 * np.pi * f
    al = om / (2 * quality)
    p = np.exp((-al + 1j * om) * dtb)  # the complex regressor's step per block
    # b = sum W r c, with c = exp((-a + j w) tau): its real and imaginary parts are the correlations with
    # the cosine and the sine; their Gram matrix follows from g0 = sum W |c|^2 and g2 = sum W c^2
    # (cos^2 = (|c|^2 + Re c^2) / 2, sin^2 = (|c|^2 - Re c^2) / 2, cos sin = Im c^2 / 2), and b' G^-1 b
    # reduces to 2 (g0 |b|^2 - Re(g2 conj(b)^2)) / (g0^2 - |g2|^2)
    b, g0, g2 = _onset_sums(WRk, Wk, p)
    bb = b.conj()
    bb *= bb
    bb *= g2
    num = g0 * (b.real * b.real + b.imag * b.imag) - bb.real
    det = g0 * g0 - (g2.real * g2.real + g2.imag * g2.imag)
    ok = det > 1e-9 * g0 * g0  # at least a few blocks of weight after the onset
    T = np.where(ok, 2.0 * num / np.where(ok, det, 1.0), 0.0)
    # an onset before the first scored block fits the same as that block's (the regressors differ by a
    # constant factor there): the onset is reported no earlier than the scored samples
    T[:, : int(np.argmax(Wk > 0))] = 0.0
    j = np.argmax(T, axis=1)
    best = T[np.arange(f.size), j]
    onset = np.where(best > 0, t0_s + j * dtb, np.nan)
    return OscillationScan(f, np.sqrt(np.maximum(best, 0.0)), onset)
