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

from ._validation import RecordError
from ._waveshape_signal import _Prepared

__all__ = ["DoubleExponential", "filter_residual", "test_voltage_factor"]

#: Largest fit sample count; the tail is thinned beyond this (weights keep the time integral).
_MAX_FIT_POINTS = 1500
#: Time constant of the impulse response of the test voltage function k(f) [s]:
#: (2 pi tau)^2 = 2.2 us^2.
_K_FILTER_TAU_S = math.sqrt(2.2e-12) / (2.0 * math.pi)
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


def _levenberg_marquardt(fun_jac: Any, x0: np.ndarray, *, f_scale: float | None, xtol: float, ftol: float,
                         max_iter: int) -> np.ndarray:
    """Minimise ``sum r^2`` (``f_scale`` None) or the soft-L1 cost ``f^2 sum(sqrt(1 + (r/f)^2) - 1)``.

    Levenberg-Marquardt with Marquardt's diagonal scaling (Nocedal & Wright, Numerical Optimization,
    2nd ed., section 10.3); for the soft-L1 cost the Gauss-Newton model of the robust cost with its
    second-order correction (Triggs et al., Bundle adjustment - a modern synthesis, 2000, section 4.3):
    gradient ``J^T rho' r``, curvature ``J^T (rho' + 2 z rho'') J`` with ``rho' = (1+z)^-1/2`` and
    ``rho' + 2 z rho'' = (1+z)^-3/2``, ``z = (r/f)^2``; a step is kept only if it lowers the cost itself. ``fun_jac(x)`` returns the residuals and their
    transposed Jacobian (parameters x residuals) together (they share the exponentials). A few parameters and a few thousand residuals:
    written out because ``scipy.optimize.least_squares`` spends most of its time here in per-iteration
    bookkeeping. Returns the last accepted point.
    """

    inv_f = None if f_scale is None else 1.0 / f_scale

    def evaluate(par: np.ndarray) -> tuple[float, np.ndarray, np.ndarray, np.ndarray | None]:
        """Cost, residuals, Jacobian and (robust) sqrt(1 + z) at ``par``."""
        r, jt = fun_jac(par)
        if inv_f is None:
            return float(r @ r), r, jt, None
        s1 = np.sqrt(1.0 + np.square(r * inv_f))
        return float(f_scale * f_scale * (s1.sum() - s1.size)), r, jt, s1

    x = np.array(x0, dtype=np.float64)
    c, r, Jt, s1 = evaluate(x)
    if not math.isfinite(c):
        return x
    mu = 1e-3
    eye = np.eye(x.size)
    for _ in range(max_iter):
        if s1 is None:
            A, g = Jt @ Jt.T, Jt @ r
        else:  # gradient weights rho' = (1+z)^-1/2, curvature rho' + 2 z rho'' = (1+z)^-3/2
            sq = 1.0 / s1
            A = (Jt * sq**3) @ Jt.T
            g = Jt @ (r * sq)
        damp = eye * np.maximum(A.diagonal(), 1e-300)
        improved = False
        while mu < 1e12:
            try:
                step = np.linalg.solve(A + mu * damp, -g)
            except np.linalg.LinAlgError:
                mu *= 10.0
                continue
            x_new = x + step
            c_new, r_new, Jt_new, s1_new = evaluate(x_new)
            if c_new <= c:  # False for NaN
                improved = True
                break
            mu *= 10.0
        if not improved:
            return x
        small_step = bool((np.abs(step) <= xtol * (np.abs(x) + xtol)).all())
        small_gain = (c - c_new) <= ftol * c
        x, r, Jt, c, s1 = x_new, r_new, Jt_new, c_new, s1_new
        mu = max(mu * 0.3, 1e-12)
        if small_step or small_gain:
            break
    return x


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

    n_pts = x.size
    prior_rows = np.diag(prior)

    def fun_jac(par: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Residuals (data, then prior) and the transposed Jacobian, shape (4, n + 4)."""
        t1, t2 = taus(par)
        s = x - par[3]
        np.maximum(s, 0.0, out=s)
        e1 = np.exp(s * (-1.0 / t1))
        e2 = np.exp(s * (-1.0 / t2))
        jt = np.empty((4, n_pts + 4))
        np.subtract(e1, e2, out=jt[0, :n_pts])
        np.multiply(e1, s, out=jt[1, :n_pts])
        jt[1, :n_pts] *= par[0] / t1
        np.multiply(e2, s, out=jt[2, :n_pts])
        jt[2, :n_pts] *= -par[0] / t2
        # d/d(origin): zero before the origin (s == 0 there, and e1 = e2 = 1)
        jt[3, :n_pts] = e1 * (par[0] / t1) - e2 * (par[0] / t2)
        jt[3, :n_pts][s <= 0.0] = 0.0
        r = np.empty(n_pts + 4)
        np.multiply(jt[0, :n_pts], par[0], out=r[:n_pts])
        r[:n_pts] -= y
        r[:n_pts] *= wts
        r[n_pts:] = prior * (par - x0)
        jt[:, :n_pts] *= wts
        jt[:, n_pts:] = prior_rows
        return r, jt

    f_scale = max(3.0 * p.sigma / p.peak, 0.005)
    if not np.all(np.isfinite(x0)):
        raise failed

    def sane(par: np.ndarray) -> bool:
        return bool(np.all(np.isfinite(par)) and 1e-3 < abs(par[0]) < 1e3 and -300 < par[1] < 300
                    and -300 < par[2] < 300)

    def robust(start: np.ndarray) -> np.ndarray:
        return _levenberg_marquardt(fun_jac, start, f_scale=f_scale, xtol=1e-9, ftol=1e-12, max_iter=200)

    try:
        with np.errstate(all="ignore"):  # overflow to inf / 0 * inf = nan on wild trial steps is rejected
            # a plain least-squares start, then the robust loss from there; if that wanders off (little
            # data, e.g. chopped on the front), the robust fit from the start values
            first = _levenberg_marquardt(fun_jac, x0, f_scale=None, xtol=1e-6, ftol=1e-6, max_iter=100)
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

    The residual is detrended by the straight line through its end points and zero padded (by 25 time
    constants of the filter's impulse response, 5.9 us, at most by its own length) before the FFT, so
    that the filter does not wrap its end onto its start; the line
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
    # k(f) = 1 / (1 + (2 pi f tau)^2) is the spectrum of exp(-|t| / tau) / (2 tau), tau = 0.236 us: zero
    # padding of 25 tau (or the record's length, if shorter) keeps the wrap-around below exp(-25)
    pad = min(m, int(math.ceil(25.0 * _K_FILTER_TAU_S / sample_interval_s)))
    nfft = _fft.next_fast_len(m + pad, real=True)
    spec = _fft.rfft(r - ramp, nfft)
    spec *= test_voltage_factor(_fft.rfftfreq(nfft, sample_interval_s))
    return _fft.irfft(spec, nfft)[:m] + ramp


def _test_voltage_curve(p: _Prepared, base_u: np.ndarray, i_end: int) -> np.ndarray:
    """Return base curve + residual filtered with k(f) over ``[0, i_end)``."""
    return base_u[:i_end] + filter_residual(p.u[:i_end] - base_u[:i_end], p.dt)
