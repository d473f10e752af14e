"""Base curve and test voltage curve of IEC 60060-1:2010: the double exponential, its robust fit and
the test voltage function k(f) applied to the residual.

The public names are re-exported by :mod:`detector.waveshape`.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np
from scipy import fft as _fft
from scipy import optimize

from ._validation import RecordError
from ._waveshape_signal import _Prepared

__all__ = ["DoubleExponential", "filter_residual", "test_voltage_factor"]

#: Largest fit sample count; the tail is thinned beyond this (weights keep the time integral).
_MAX_FIT_POINTS = 1500
#: Weight of the pull of log(tau1), log(tau2) towards their start values (residual units: per unit of
#: the peak, per e-fold of the time constant).
_PRIOR_WEIGHT = 0.02


def test_voltage_factor(frequency_Hz: Any) -> np.ndarray:
    """Test voltage function k(f) of IEC 60060-1:2010 (lightning impulses with overshoot).

    Parameters
    ----------
    frequency_Hz : array_like
        Frequency [Hz]; the sign is ignored.

    Returns
    -------
    numpy.ndarray
        ``k = 1 / (1 + 2.2 f^2)`` with ``f`` in MHz (dimensionless, 1 at 0 Hz).
    """
    f_MHz = np.asarray(frequency_Hz, dtype=np.float64) * 1e-6
    return 1.0 / (1.0 + 2.2 * f_MHz * f_MHz)


test_voltage_factor.__test__ = False  # type: ignore[attr-defined]  # not a pytest test despite its name


@dataclasses.dataclass(frozen=True)
class DoubleExponential:
    """Double-exponential impulse ``A (exp(-(t-t0)/tau1) - exp(-(t-t0)/tau2))`` for ``t >= t0``, else 0.

    Parameters
    ----------
    amplitude_V : float
        A [V]; its sign is the polarity.
    tau1_s, tau2_s : float
        Tail and front time constants [s], ``tau1_s > tau2_s > 0``.
    origin_s : float
        Start time t0 [s].
    """

    amplitude_V: float
    tau1_s: float
    tau2_s: float
    origin_s: float

    def __post_init__(self) -> None:
        """Store plain floats."""
        for name in ("amplitude_V", "tau1_s", "tau2_s", "origin_s"):
            object.__setattr__(self, name, float(getattr(self, name)))

    def __call__(self, times_s: Any) -> np.ndarray:
        """Evaluate the curve at ``times_s`` [s]; returns volts."""
        s = np.clip(np.asarray(times_s, dtype=np.float64) - self.origin_s, 0.0, None)
        return self.amplitude_V * (np.exp(-s / self.tau1_s) - np.exp(-s / self.tau2_s))

    @property
    def peak_time_s(self) -> float:
        """Instant of the crest [s], on the same axis as ``origin_s``."""
        t1, t2 = self.tau1_s, self.tau2_s
        return self.origin_s + math.log(t1 / t2) * t1 * t2 / (t1 - t2)

    @property
    def peak_V(self) -> float:
        """Crest value [V] (signed)."""
        return float(self(self.peak_time_s))


# ---------------------------------------------------------------------------------------------
# Base curve fit
# ---------------------------------------------------------------------------------------------
def _shape_peak(tau1: float, tau2: float) -> float:
    tp = math.log(tau1 / tau2) * tau1 * tau2 / (tau1 - tau2)
    return math.exp(-tp / tau1) - math.exp(-tp / tau2)


def _fit_base(p: _Prepared, i_lo: int, i_hi: int, tau1: float, tau2: float, origin: float,
              source: str | None) -> DoubleExponential:
    """Fit the double exponential to ``p.u[i_lo:i_hi]``; start values in samples. Returns it in SI."""
    # every sample up to a few front times past the crest (thinned if that alone is too many), the tail
    # thinned evenly; weights sqrt(stride) keep the sum over samples close to a time integral
    dense_end = min(i_hi, max(p.ipk + int(6 * p.front_s / p.dt) + 1, i_lo + 1))
    h_step = max(1, int(math.ceil((dense_end - i_lo) / (_MAX_FIT_POINTS // 2))))
    head = np.arange(i_lo, dense_end, h_step)
    room = max(_MAX_FIT_POINTS - head.size, 100)
    t_step = max(h_step, int(math.ceil((i_hi - head[-1] - 1) / room)))
    tail = np.arange(head[-1] + t_step, i_hi, t_step)
    idx = np.concatenate([head, tail])
    wts = np.concatenate([np.full(head.size, math.sqrt(h_step)), np.full(tail.size, math.sqrt(t_step))])
    scale = max(p.front_s / p.dt, 1.0)  # time unit of the fit: one front time, in samples
    x = idx / scale
    y = p.u[idx] / p.peak
    failed = RecordError("the base-curve fit failed; expected an impulse of double-exponential shape "
                         "(a front, a crest and a decaying tail)", path=source, field="voltage")
    try:
        x0 = np.array([1.0 / _shape_peak(tau1, tau2), math.log(tau1 / scale), math.log(tau2 / scale),
                       origin / scale])
    except (ValueError, ZeroDivisionError, OverflowError):
        raise failed from None

    def taus(par: np.ndarray) -> tuple[float, float]:
        return math.exp(min(max(par[1], -300.0), 300.0)), math.exp(min(max(par[2], -300.0), 300.0))

    def model(par: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        s = np.clip(x - par[3], 0.0, None)
        t1, t2 = taus(par)
        return s, np.exp(-s / t1), np.exp(-s / t2)

    # A weak pull of the two log time constants towards their start values: negligible where the record
    # determines them, decisive where it does not (a step-like front, a chopped wave without tail), so
    # that the fit has one well-defined answer instead of drifting along a flat valley, where the last
    # bits of the input (or of a multi-threaded BLAS) would pick the end point.
    prior = np.zeros(4)
    prior[1:3] = _PRIOR_WEIGHT

    def fun(par: np.ndarray) -> np.ndarray:
        _, e1, e2 = model(par)
        return np.concatenate([wts * (par[0] * (e1 - e2) - y), prior * (par - x0)])

    def jac(par: np.ndarray) -> np.ndarray:
        s, e1, e2 = model(par)
        t1, t2 = taus(par)
        on = s > 0
        j = np.empty((s.size, 4))
        j[:, 0] = e1 - e2
        j[:, 1] = par[0] * e1 * s / t1
        j[:, 2] = -par[0] * e2 * s / t2
        j[:, 3] = np.where(on, par[0] * (e1 / t1 - e2 / t2), 0.0)
        return np.concatenate([j * wts[:, None], np.diag(prior)])

    f_scale = max(3.0 * p.sigma / p.peak, 0.005)
    # unbounded: the log time constants keep them positive, and trf without bounds is much quicker
    if not np.all(np.isfinite(x0)):
        raise failed
    def sane(par: np.ndarray) -> bool:
        return bool(np.all(np.isfinite(par)) and 1e-3 < abs(par[0]) < 1e3 and -300 < par[1] < 300
                    and -300 < par[2] < 300)

    def robust(start: np.ndarray) -> np.ndarray:
        return optimize.least_squares(fun, start, jac=jac, loss="soft_l1", f_scale=f_scale, x_scale="jac",
                                      xtol=1e-9, ftol=1e-9, gtol=1e-9, max_nfev=200).x

    try:
        with np.errstate(all="ignore"):  # overflow to inf / 0 * inf = nan on wild trial steps is rejected
            # a plain least-squares start (MINPACK, quick), then the robust loss from there; if that
            # wanders off (little data, e.g. chopped on the front), the robust fit from the start values
            first = optimize.least_squares(fun, x0, jac=jac, method="lm", x_scale="jac", xtol=1e-6,
                                           ftol=1e-6, max_nfev=100).x
            best = robust(first) if sane(first) else None
            if best is None or not sane(best):
                best = robust(x0)
    except (ValueError, OverflowError, FloatingPointError, np.linalg.LinAlgError):
        raise failed from None
    if not sane(best):
        raise failed
    a, l1, l2, o = best
    t1, t2 = math.exp(l1) * scale * p.dt, math.exp(l2) * scale * p.dt
    if t2 > t1:  # the same curve with the constants swapped
        t1, t2, a = t2, t1, -a
    return DoubleExponential(float(a * p.peak), t1, t2, p.t0 + float(o) * scale * p.dt)


def filter_residual(residual_V: Any, sample_interval_s: float) -> np.ndarray:
    """Filter a residual curve with the test voltage function k(f) of IEC 60060-1:2010.

    The residual is detrended by the straight line through its end points and zero padded to at least
    twice its length before the FFT, so that the filter does not wrap its end onto its start; the line
    is added back unchanged (k(0) = 1 and k is even, so a straight line passes the filter as it is).

    Parameters
    ----------
    residual_V : array_like
        Recorded curve minus base curve [V], uniformly sampled.
    sample_interval_s : float
        Sample interval [s].

    Returns
    -------
    numpy.ndarray
        Filtered residual [V], same length.
    """
    r = np.asarray(residual_V, dtype=np.float64)
    m = r.size
    if m == 0:
        return r.copy()
    ramp = r[0] + (r[-1] - r[0]) * np.arange(m) / max(m - 1, 1)
    nfft = _fft.next_fast_len(2 * m, real=True)
    spec = _fft.rfft(r - ramp, nfft)
    spec *= test_voltage_factor(_fft.rfftfreq(nfft, sample_interval_s))
    return _fft.irfft(spec, nfft)[:m] + ramp


def _test_voltage_curve(p: _Prepared, base_u: np.ndarray, i_end: int) -> np.ndarray:
    """Return base curve + residual filtered with k(f) over ``[0, i_end)``."""
    return base_u[:i_end] + filter_residual(p.u[:i_end] - base_u[:i_end], p.dt)
