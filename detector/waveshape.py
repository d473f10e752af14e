"""IEC 60060-1:2010 wave-shape parameters of lightning and switching impulse records.

:func:`evaluate_waveshape` takes a :class:`~detector.record.Record`, decides whether it holds a full
lightning impulse, a chopped lightning impulse or a switching impulse, and returns a :class:`WaveShape`
with the standard's parameters, a tolerance check against the standard waves (1.2/50 us and
250/2500 us) and warnings about the recorder's adequacy after IEC 61083-1. The array-level functions
:func:`evaluate_lightning` and :func:`evaluate_switching` do the same on plain arrays.

Method (lightning impulse, IEC 60060-1:2010 clause 7 and annex B, as recalled)
---------------------------------------------------------------------------
1. Baseline from the pre-trigger, polarity from the larger excursion; the impulse is evaluated as a
   positive curve and signs are restored at the end.
2. A base curve ``A (exp(-(t - t0)/tau1) - exp(-(t - t0)/tau2))`` is fitted to the recorded curve from
   20 % on the front to 40 % on the tail (or to the collapse of a chopped wave) with a robust loss.
3. The residual (record - base curve) is filtered in the frequency domain with the test voltage function
   ``k(f) = 1 / (1 + 2.2 f^2)`` (f in MHz) and added back: this is the test voltage curve. Its extreme is
   the test voltage value; the front time ``T1 = 1.67 (t90 - t30)``, the virtual origin
   ``O1 = t30 - 0.3 T1`` and the time to half-value ``T2`` are read from it with sub-sample interpolation.
4. The extreme value comes from the lightly smoothed recorded curve; the relative overshoot is
   ``beta = (extreme - base peak) / extreme``.

Times returned (virtual origin, chopping instant) are on the input's own time axis; intervals
(front time, time to half-value, time to chopping, time to peak) are durations.

Examples
--------
>>> import numpy as np
>>> t = np.arange(-2e-6, 100e-6, 1e-8)
>>> s = np.clip(t, 0.0, None)
>>> v = -1.04e5 * (np.exp(-s / 68.22e-6) - np.exp(-s / 0.405e-6))
>>> ws = evaluate_lightning(t, v)
>>> ws.kind, ws.polarity, round(ws.front_time_s * 1e6, 2), round(ws.time_to_half_s * 1e6, 1)
('lightning_full', 'negative', 1.2, 50.0)
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from scipy import fft as _fft
from scipy import optimize, signal

from ._validation import RecordError, ShotcheckError, check_finite_1d, check_option
from .record import MIN_SAMPLES, Record

__all__ = [
    "KINDS",
    "DoubleExponential",
    "ToleranceCheck",
    "WaveShape",
    "check_tolerances",
    "evaluate_lightning",
    "evaluate_switching",
    "evaluate_waveshape",
    "filter_residual",
    "test_voltage_factor",
]

#: Wave kinds reported in ``WaveShape.kind``.
KINDS = ("lightning_full", "lightning_chopped", "switching")

# Tolerance windows (IEC 60060-1:2010 clauses 7.3.2 and 8.3.2, recalled): 1.2 us +/- 30 %, 50 us +/- 20 %,
# 250 us +/- 20 %, 2500 us +/- 60 %; written out so that boundary values are exact.
LIGHTNING_FRONT_LIMITS_S = (0.84e-6, 1.56e-6)
LIGHTNING_TAIL_LIMITS_S = (40e-6, 60e-6)
SWITCHING_PEAK_LIMITS_S = (200e-6, 300e-6)
SWITCHING_TAIL_LIMITS_S = (1000e-6, 4000e-6)
#: Time to chopping of chopped waves on transformers, IEC 60076-3 (recalled): 2-6 us.
CHOPPING_LIMITS_S = (2e-6, 6e-6)
#: Test voltage value tolerance, relative (IEC 60060-1:2010, recalled).
TEST_VOLTAGE_TOLERANCE = 0.03
#: Largest relative overshoot of a lightning impulse [%] (IEC 60060-1:2010, recalled).
MAX_OVERSHOOT_PERCENT = 10.0

#: Front times 1.67 (t90 - t30) above this are taken as switching impulses when the kind is not given.
_SWITCHING_FRONT_THRESHOLD_S = 20e-6
#: Minimum samples before the virtual origin for a baseline and noise estimate (common practice).
_MIN_PRETRIGGER_SAMPLES = 20
#: Largest fit sample count; the tail is thinned beyond this (weights keep the time integral).
_MAX_FIT_POINTS = 1500


# ---------------------------------------------------------------------------------------------
# Small public building blocks
# ---------------------------------------------------------------------------------------------
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


@dataclasses.dataclass(frozen=True)
class ToleranceCheck:
    """One parameter checked against its tolerance window.

    Parameters
    ----------
    name : str
        Output key, with its display unit (``'front_time_us'``).
    value : float or None
        Measured value in SI units (seconds, volts, percent); None if it could not be measured.
    low, high : float or None
        Inclusive limits in SI units; None means unbounded.
    passed : bool
        Whether ``value`` lies inside the limits (False when ``value`` is None).
    """

    name: str
    value: float | None
    low: float | None
    high: float | None
    passed: bool

    def to_dict(self) -> dict[str, Any]:
        """Return ``{'value', 'low', 'high', 'pass'}`` in the display unit named by ``name``."""
        scale = _display_scale(self.name)

        def conv(x: float | None) -> float | None:
            return None if x is None else float(x) * scale

        return {"value": conv(self.value), "low": conv(self.low), "high": conv(self.high),
                "pass": bool(self.passed)}


def _display_scale(name: str) -> float:
    if name.endswith("_us"):
        return 1e6
    if name.endswith("_kV"):
        return 1e-3
    return 1.0


@dataclasses.dataclass(frozen=True)
class WaveShape:
    """Wave-shape parameters of one impulse record (SI units inside).

    Attributes
    ----------
    kind : {'lightning_full', 'lightning_chopped', 'switching'}
    polarity : {'positive', 'negative'}
    peak_V : float
        Extreme value of the (lightly smoothed) recorded curve above the baseline [V], signed.
    test_voltage_V : float
        Test voltage value [V], signed: extreme of the test voltage curve (lightning) or peak value
        (switching).
    front_time_s : float or None
        Lightning front time T1 = 1.67 (t90 - t30) [s].
    time_to_half_s : float or None
        T2 [s]: from the virtual origin (lightning) or the true origin (switching) to the 50 % point
        on the tail; None for chopped waves or when the record ends before the 50 % point.
    overshoot_percent : float or None
        Relative overshoot beta [%] (lightning).
    chopping_instant_s : float or None
        Instant of chopping on the record's time axis [s] (chopped waves).
    time_to_chopping_s : float or None
        Tc = chopping instant - virtual origin [s] (chopped waves).
    time_to_peak_s : float or None
        Switching time to peak Tp [s].
    virtual_origin_s : float or None
        Virtual origin O1 on the record's time axis [s] (lightning).
    origin_s : float
        Start of the fitted base curve on the record's time axis [s] (the true origin for switching).
    baseline_V : float
        Baseline level removed before the evaluation [V].
    base_curve : DoubleExponential
        Fitted base curve (relative to the baseline), on the record's time axis.
    effective_bits : float or None
        Resolution used by the impulse, log2(|peak| / quantisation step); None if unknown.
    tolerance : tuple of ToleranceCheck
    within_tolerance : bool
        All tolerance checks passed.
    warnings : tuple of str
    """

    kind: str
    polarity: str
    peak_V: float
    test_voltage_V: float
    front_time_s: float | None
    time_to_half_s: float | None
    overshoot_percent: float | None
    chopping_instant_s: float | None
    time_to_chopping_s: float | None
    time_to_peak_s: float | None
    virtual_origin_s: float | None
    origin_s: float
    baseline_V: float
    base_curve: DoubleExponential
    effective_bits: float | None
    tolerance: tuple[ToleranceCheck, ...]
    within_tolerance: bool
    warnings: tuple[str, ...]

    def __post_init__(self) -> None:
        """Store numbers as plain floats (clean reprs and JSON)."""
        for f in dataclasses.fields(self):
            val = getattr(self, f.name)
            if isinstance(val, float | np.floating) and not isinstance(val, bool):
                object.__setattr__(self, f.name, float(val))

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form (DESIGN.md section 6): kV, us, percent; None where not applicable.

        ``chopping_time_us`` is the instant of chopping on the record's own time axis (DESIGN.md
        section 6); the time to chopping Tc of IEC 60060-1 is ``chopping_time_us - virtual_origin_us``
        and is checked in ``tolerance['time_to_chopping_us']``.
        """
        def us(x: float | None) -> float | None:
            return None if x is None else float(x) * 1e6

        return {
            "kind": self.kind,
            "polarity": self.polarity,
            "peak_kV": float(self.peak_V) * 1e-3,
            "test_voltage_kV": float(self.test_voltage_V) * 1e-3,
            "front_time_us": us(self.front_time_s),
            "time_to_half_us": us(self.time_to_half_s),
            "overshoot_percent": None if self.overshoot_percent is None else float(self.overshoot_percent),
            "chopping_time_us": us(self.chopping_instant_s),
            "time_to_peak_us": us(self.time_to_peak_s),
            "virtual_origin_us": us(self.virtual_origin_s),
            "within_tolerance": bool(self.within_tolerance),
            "tolerance": {c.name: c.to_dict() for c in self.tolerance},
            "warnings": list(self.warnings),
        }


# ---------------------------------------------------------------------------------------------
# Tolerances
# ---------------------------------------------------------------------------------------------
def _check(name: str, value: float | None, low: float | None, high: float | None) -> ToleranceCheck:
    if value is None:
        return ToleranceCheck(name, None, low, high, False)
    slack = 1e-9 * max(abs(low or 0.0), abs(high or 0.0), abs(value))  # inclusive limits despite rounding
    ok = (low is None or value >= low - slack) and (high is None or value <= high + slack)
    return ToleranceCheck(name, float(value), low, high, bool(ok))


def check_tolerances(
    kind: str,
    *,
    front_time_s: float | None = None,
    time_to_half_s: float | None = None,
    time_to_peak_s: float | None = None,
    time_to_chopping_s: float | None = None,
    overshoot_percent: float | None = None,
    test_voltage_V: float | None = None,
    specified_test_voltage_V: float | None = None,
) -> tuple[ToleranceCheck, ...]:
    """Check parameters against the standard impulses of IEC 60060-1:2010 (limits inclusive).

    Parameters
    ----------
    kind : {'lightning_full', 'lightning_chopped', 'switching'}
        Lightning: T1 0.84-1.56 us, T2 40-60 us (full only), overshoot at most 10 %, time to chopping
        2-6 us (chopped, IEC 60076-3). Switching: Tp 200-300 us, T2 1000-4000 us.
    front_time_s, time_to_half_s, time_to_peak_s, time_to_chopping_s : float or None
        Measured times [s]; None counts as failed (not measurable).
    overshoot_percent : float or None
        Relative overshoot [%].
    test_voltage_V, specified_test_voltage_V : float or None
        Measured and specified test voltage [V]; compared by magnitude within +/- 3 % when both given.

    Returns
    -------
    tuple of ToleranceCheck
    """
    check_option("kind", kind, KINDS)
    out: list[ToleranceCheck] = []
    if kind == "switching":
        out.append(_check("time_to_peak_us", time_to_peak_s, *SWITCHING_PEAK_LIMITS_S))
        out.append(_check("time_to_half_us", time_to_half_s, *SWITCHING_TAIL_LIMITS_S))
    else:
        out.append(_check("front_time_us", front_time_s, *LIGHTNING_FRONT_LIMITS_S))
        if kind == "lightning_full":
            out.append(_check("time_to_half_us", time_to_half_s, *LIGHTNING_TAIL_LIMITS_S))
        else:
            out.append(_check("time_to_chopping_us", time_to_chopping_s, *CHOPPING_LIMITS_S))
        out.append(_check("overshoot_percent", overshoot_percent, None, MAX_OVERSHOOT_PERCENT))
    if specified_test_voltage_V is not None and test_voltage_V is not None:
        spec = abs(float(specified_test_voltage_V))
        out.append(_check("test_voltage_kV", abs(float(test_voltage_V)),
                          spec * (1 - TEST_VOLTAGE_TOLERANCE), spec * (1 + TEST_VOLTAGE_TOLERANCE)))
    return tuple(out)


# ---------------------------------------------------------------------------------------------
# Crossing helpers (fractional sample indices, linear interpolation)
# ---------------------------------------------------------------------------------------------
def _last_rise(y: np.ndarray, level: float, stop: int) -> float | None:
    """Last upward crossing of ``level`` by ``y[:stop + 1]``."""
    seg = y[: stop + 1]
    c = np.flatnonzero((seg[:-1] < level) & (seg[1:] >= level))
    if c.size == 0:
        return None
    i = int(c[-1])
    return i + (level - y[i]) / (y[i + 1] - y[i])


def _first_rise(y: np.ndarray, level: float, stop: int) -> float | None:
    seg = y[: stop + 1]
    c = np.flatnonzero((seg[:-1] < level) & (seg[1:] >= level))
    if c.size == 0:
        return None
    i = int(c[0])
    return i + (level - y[i]) / (y[i + 1] - y[i])


def _first_fall(y: np.ndarray, level: float, start: int) -> float | None:
    """First downward crossing of ``level`` by ``y[start:]``."""
    seg = y[start:]
    c = np.flatnonzero((seg[:-1] >= level) & (seg[1:] < level))
    if c.size == 0:
        return None
    i = start + int(c[0])
    return i + (y[i] - level) / (y[i] - y[i + 1])


def _fall_at(y: np.ndarray, i: int, level: float) -> float:
    """Fractional index where ``y`` falls through ``level`` between samples ``i`` and ``i + 1``."""
    if i < 0 or i + 1 >= y.size or not y[i] > y[i + 1]:
        return float(max(i, 0))
    return i + min(max((y[i] - level) / (y[i] - y[i + 1]), 0.0), 1.0)


def _interp(y: np.ndarray, x: float) -> float:
    return float(np.interp(x, np.arange(y.size), y))


# ---------------------------------------------------------------------------------------------
# Preparation: validation, baseline, polarity, noise, quantisation, smoothing
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass
class _Prepared:
    t0: float  # time of the first sample [s]
    dt: float
    sign: float
    baseline: float
    u: np.ndarray  # sign * (v - baseline): impulse made positive
    us: np.ndarray  # lightly smoothed u (cubic, about 10 % of t90 - t30)
    uf: np.ndarray  # u smoothed over 5 samples only (for the collapse of chopped waves)
    sigma: float  # noise standard deviation estimate [V]
    q: float | None  # quantisation step [V] if the samples are quantised
    n_pre: int  # samples before the start of the wave
    ipk: int  # index of the smoothed extreme
    peak: float  # smoothed extreme (positive)
    front_s: float  # crude 1.67 (t90 - t30) [s]
    warnings: list[str]


def _error(source: str | None, msg: str, field: str = "voltage") -> RecordError:
    return RecordError(msg, path=source, field=field)


def _smooth(u: np.ndarray, window: int) -> np.ndarray:
    """Savitzky-Golay smoothing (quadratic over 5 samples, cubic above), edges held at the end values."""
    window = max(5, window | 1)
    if window > u.size:
        window = u.size if u.size % 2 else u.size - 1
    if window <= 5:
        return signal.savgol_filter(u, 5, 2, mode="nearest")
    if window <= 63:
        return signal.savgol_filter(u, window, 3, mode="nearest")
    half = window // 2  # long windows (switching impulses): overlap-add convolution is much quicker
    padded = np.pad(u, half, mode="edge")
    return signal.oaconvolve(padded, signal.savgol_coeffs(window, 3), mode="valid")


def _quantisation_step(v: np.ndarray) -> float | None:
    """Step of the sample values if they are quantised, else None (continuous values)."""
    vals = np.unique(v)
    if vals.size < 3:
        return None
    span = vals[-1] - vals[0]
    d = np.diff(vals)
    d = d[d > 1e-9 * span]
    if d.size < 2:
        return None
    q = float(d.min())
    ratio = d / q
    frac = np.abs(ratio - np.round(ratio))
    # quantised: every gap between distinct values is a whole number of steps (continuous values give
    # fractional parts spread over 0-0.5)
    if np.median(frac) < 0.02 and np.percentile(frac, 90) < 0.1:
        return q
    return None


def _prepare(times_s: Any, voltage_V: Any, source: str | None) -> _Prepared:
    t = check_finite_1d("time", times_s, min_len=MIN_SAMPLES, path=source)
    v = check_finite_1d("voltage", voltage_V, min_len=MIN_SAMPLES, path=source)
    if t.size != v.size:
        raise _error(source, f"{v.size} voltage samples but {t.size} time stamps; expected one time per sample",
                     "time")
    n = v.size
    dt = (t[-1] - t[0]) / (n - 1)
    d = np.diff(t)
    if not dt > 0 or (np.abs(d - dt) > 1e-3 * dt).any():
        raise _error(source, "time stamps must be strictly increasing and uniform (resample first)", "time")
    span = float(v.max() - v.min())
    if span == 0.0:
        raise _error(source, f"no impulse: the voltage is constant at {v[0]:.6g} V; expected a lightning "
                     "or switching impulse")
    dv = np.diff(v)
    sigma = float(1.4826 * np.median(np.abs(dv - np.median(dv))) / math.sqrt(2.0))
    # polarity from the larger excursion from the first samples; if those already sit far from zero the
    # record may start on the impulse itself, so take zero as the reference (caught below as no front)
    b0 = float(np.median(v[:8]))
    if abs(b0) > 0.25 * span:
        b0 = 0.0
    dev = v - b0
    iext = int(np.argmax(np.abs(dev)))
    sign = 1.0 if dev[iext] > 0 else -1.0
    u0 = sign * dev
    amp0 = float(u0[iext])
    if amp0 <= 10.0 * sigma:
        raise _error(source, f"no impulse found: the largest excursion ({amp0:.3g} V) is only "
                     f"{amp0 / sigma:.1f} times the noise level ({sigma:.3g} V); expected an impulse well above "
                     "the noise")
    us0 = _smooth(u0, 5)
    ipk0 = int(np.argmax(us0))
    pk0 = float(us0[ipk0])
    i10 = _first_rise(us0, 0.1 * pk0, ipk0)
    i90 = _first_rise(us0, 0.9 * pk0, ipk0)
    if i10 is None or i90 is None:
        raise _error(source, "the record starts on or after the impulse's front (no rise through 10 % and 90 % "
                     "of the peak); expected a pre-trigger before the front")
    # the wave starts well before its 10 % point: leave half the 10-90 % rise as a margin
    n_pre = int(math.floor(i10 - 0.5 * (i90 - i10))) - 1
    warnings: list[str] = []
    if n_pre >= 1:
        baseline = float(np.mean(v[:n_pre]))
    else:
        n_pre = 0
        baseline = 0.0
        warnings.append("no pre-trigger before the front: the baseline is taken as 0 V")
    u = sign * (v - baseline)
    # crude front time to size the smoothing window (about 10 % of t90 - t30, at least 5 samples)
    us1 = _smooth(u, 5)
    uf = _smooth(u, int(round(20e-9 / dt))) if 20e-9 / dt > 5 else us1  # about 20 ns for collapses
    ipk1 = int(np.argmax(us1))
    pk1 = float(us1[ipk1])
    a = _last_rise(us1, 0.3 * pk1, ipk1)
    b = _last_rise(us1, 0.9 * pk1, ipk1)
    if a is None or b is None or ipk1 >= n - 2:
        if ipk1 >= n - 2:
            raise _error(source, "record too short: it ends before the crest of the impulse; expected the "
                         "crest and part of the tail")
        raise _error(source, "the record starts on or after the impulse's front; expected a pre-trigger")
    tab = max(b - a, 1e-3)
    w = int(round(0.1 * tab))
    us = _smooth(u, w) if w > 5 else us1
    ipk = int(np.argmax(us))
    if ipk >= n - 2:
        raise _error(source, "record too short: it ends before the crest of the impulse; expected the crest "
                     "and part of the tail")
    return _Prepared(t0=float(t[0]), dt=float(dt), sign=sign, baseline=baseline, u=u, us=us, uf=uf, sigma=sigma,
                     q=_quantisation_step(v), n_pre=n_pre, ipk=ipk, peak=float(us[ipk]),
                     front_s=1.67 * tab * dt, warnings=warnings)


def _check_monotone_front(p: _Prepared, y: np.ndarray, peak: float, stop: int, limit: float,
                          source: str | None) -> None:
    """Raise if ``y`` falls back by more than ``limit`` x ``peak`` between its 30 % and 90 % points."""
    a = _first_rise(y, 0.3 * peak, stop)
    b = _last_rise(y, 0.9 * peak, stop)
    if a is None or b is None:
        return
    seg = y[int(a): int(math.ceil(b)) + 1]
    if seg.size < 2:
        return
    drop = np.maximum.accumulate(seg) - seg
    k = int(np.argmax(drop))
    if drop[k] > limit * peak + 3 * p.sigma:
        tk = p.t0 + (int(a) + k) * p.dt
        raise _error(source, f"non-monotone front: the voltage falls back by {100 * drop[k] / peak:.0f} % of "
                     f"the peak at t = {tk * 1e6:.3f} us between the 30 % and 90 % points; expected a single "
                     "rising front")


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

    def fun(par: np.ndarray) -> np.ndarray:
        _, e1, e2 = model(par)
        return wts * (par[0] * (e1 - e2) - y)

    def jac(par: np.ndarray) -> np.ndarray:
        s, e1, e2 = model(par)
        t1, t2 = taus(par)
        on = s > 0
        j = np.empty((s.size, 4))
        j[:, 0] = e1 - e2
        j[:, 1] = par[0] * e1 * s / t1
        j[:, 2] = -par[0] * e2 * s / t2
        j[:, 3] = np.where(on, par[0] * (e1 / t1 - e2 / t2), 0.0)
        return j * wts[:, None]

    f_scale = max(3.0 * p.sigma / p.peak, 0.005)
    # unbounded: the log time constants keep them positive, and trf without bounds is much quicker
    if not np.all(np.isfinite(x0)):
        raise failed
    try:
        with np.errstate(all="ignore"):  # overflow to inf / 0 * inf = nan on wild trial steps is rejected
            res = optimize.least_squares(fun, x0, jac=jac, loss="soft_l1", f_scale=f_scale, x_scale="jac",
                                         xtol=1e-9, ftol=1e-9, gtol=1e-9, max_nfev=200)
    except (ValueError, OverflowError, FloatingPointError, np.linalg.LinAlgError):
        raise failed from None
    if not np.all(np.isfinite(res.x)) or not 1e-3 < abs(res.x[0]) < 1e3 or not -300 < res.x[1] < 300 \
            or not -300 < res.x[2] < 300:
        raise failed
    a, l1, l2, o = res.x
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


# ---------------------------------------------------------------------------------------------
# Chopping
# ---------------------------------------------------------------------------------------------
def _find_collapse(p: _Prepared) -> int | None:
    """Index where a collapse starts: the smoothed curve, at 10 % of the peak or more, falls below half
    its value within 0.5 us and stays low (mean over the next 1 us below 30 % of that value), so that a
    decaying tail or an oscillation riding on it is not taken for a chop."""
    m = max(2, int(round(0.5e-6 / p.dt)))
    y = p.uf
    n = y.size
    start = max(p.ipk - m, 0)
    if start + m >= n:
        return None
    y0 = y[start: n - m]
    cand = (y0 >= 0.1 * p.peak) & (y0 - y[start + m:] > 0.5 * y0)
    if not cand.any():
        return None
    j = np.arange(start, n - m)
    csum = np.concatenate(([0.0], np.cumsum(y)))
    a = j + m
    b = np.minimum(j + 3 * m, n)
    after = (csum[b] - csum[a]) / np.maximum(b - a, 1)
    c = np.flatnonzero(cand & (after < 0.3 * y0))
    return None if c.size == 0 else start + int(c[0])


def _chopping(p: _Prepared, i_c: int, source: str | None) -> tuple[float, int]:
    """Instant of chopping (fractional index) and the last index before the collapse.

    The voltage at chopping is the largest value in the 0.5 us before the collapse's 50 % point; the
    70 % point is the last one at or above 70 % before that, the 10 % point the first one below 10 %
    after it, so that ringing after the collapse and noise on it do not move them.
    """
    y = p.uf
    m = max(2, int(round(0.5e-6 / p.dt)))
    hi = min(i_c + 2 * m, y.size - 1)
    ref = float(y[i_c: i_c + m + 1].max())
    below = np.flatnonzero(y[i_c: hi + 1] < 0.5 * ref)
    if below.size == 0:
        raise _error(source, "the voltage collapse does not fall to half the voltage at chopping; expected a "
                     "chopped impulse recorded through its collapse")
    k50 = i_c + int(below[0])
    uc = float(y[max(k50 - m, 0): k50 + 1].max())
    above = np.flatnonzero(y[:k50 + 1] >= 0.7 * uc)
    lo10 = np.flatnonzero(y[k50:] < 0.1 * uc)
    if above.size == 0 or lo10.size == 0:
        raise _error(source, "the voltage collapse does not fall to 10 % of the voltage at chopping; "
                     "expected a chopped impulse recorded through its collapse")
    k70 = _fall_at(y, int(above[-1]), 0.7 * uc)
    k10 = _fall_at(y, k50 + int(lo10[0]) - 1, 0.1 * uc)
    # line through the 70 % and 10 % points, taken back to the voltage at chopping (from memory)
    tc = k70 - 0.5 * (k10 - k70)
    return tc, max(int(math.floor(tc)) - 1, 1)


# ---------------------------------------------------------------------------------------------
# Recorder adequacy (IEC 61083-1)
# ---------------------------------------------------------------------------------------------
def _recorder_warnings(p: _Prepared, tx_s: float, *, full_scale_V: float | None, bits: int | None,
                       for_comparison: bool, n_pre: int) -> tuple[list[str], float | None]:
    w: list[str] = []
    fs = 1.0 / p.dt
    if fs < 30.0 / tx_s:
        w.append(f"sample rate {fs / 1e6:.3g} MS/s is below 30/Tx = {30.0 / tx_s / 1e6:.3g} MS/s for the front "
                 f"(Tx = t90 - t30 = {tx_s * 1e6:.3g} us; IEC 61083-1)")
    amp = abs(p.peak)
    q = p.q
    if bits is not None and full_scale_V is not None:
        q = 2.0 * full_scale_V / 2.0 ** bits  # codes spread over -full_scale_V .. +full_scale_V
        if p.q is not None:
            steps = p.q / q
            if steps < 0.99 or abs(steps - round(steps)) > 0.01 * steps:
                w.append(f"the samples change in steps of {p.q:.4g} V, not in whole steps of "
                         f"2 x full_scale_V / 2**bits = {q:.4g} V; check bits and full_scale_V")
    eff: float | None = None
    if q is not None and q > 0:
        eff = math.log2(amp / q) if amp > q else 0.0
    elif bits is not None:
        eff = float(bits)
    if eff is not None and eff < 8.0:
        w.append(f"fewer than 8 effective bits ({eff:.2f}) over the impulse; IEC 61083-1 asks for at least 8")
    elif eff is not None and for_comparison and eff < 10.0:
        w.append(f"fewer than 10 bits ({eff:.2f}) over the impulse for a record that will be compared "
                 "(common practice: 10 bits or more)")
    if full_scale_V is not None and amp < 0.2 * full_scale_V:
        w.append(f"peak {amp / 1e3:.4g} kV is below 20 % of the full scale {full_scale_V / 1e3:.4g} kV "
                 "(IEC 61083-1)")
    # clipping: many samples at the extreme code, few per code in the three below (a smooth crest: ratio < 2)
    top = float(p.u.max())
    q = p.q if p.q is not None else q  # the step seen in the samples is the one that tells clipping
    if q is not None and q > 0:
        n_top = int(np.count_nonzero(p.u >= top - 0.5 * q))
        n_next3 = int(np.count_nonzero((p.u < top - 0.5 * q) & (p.u >= top - 3.5 * q)))
        clipped = n_top >= 5 and n_top > 4 * max(n_next3 / 3.0, 1.0)
    else:
        n_top = int(np.count_nonzero(p.u == top))
        clipped = n_top >= 3
    if clipped:
        w.append(f"clipping: {n_top} samples sit at the record's extreme {p.sign * top / 1e3:.4g} kV "
                 "(flat top); the recorder range was exceeded")
    if n_pre < _MIN_PRETRIGGER_SAMPLES:
        w.append(f"pre-trigger too short: {max(n_pre, 0)} samples before the origin, at least "
                 f"{_MIN_PRETRIGGER_SAMPLES} are needed to estimate baseline and noise (common practice)")
    return w, eff


def _check_bits(bits: int | None, full_scale_V: float | None,
                specified_test_voltage_V: float | None = None) -> None:
    if bits is not None and (isinstance(bits, bool) or not isinstance(bits, int | np.integer)
                             or not 1 <= int(bits) <= 32):
        raise ShotcheckError(f"bits must be an integer from 1 to 32, got {bits!r}")
    for name, val in (("full_scale_V", full_scale_V), ("specified_test_voltage_V", specified_test_voltage_V)):
        if val is None:
            continue
        try:
            x = float(val)
        except (TypeError, ValueError):
            x = float("nan")
        if not np.isfinite(x) or (x <= 0 if name == "full_scale_V" else x == 0):
            what = "a positive" if name == "full_scale_V" else "a non-zero"
            raise ShotcheckError(f"{name} must be {what} number of volts, got {val!r}")


# ---------------------------------------------------------------------------------------------
# Evaluation
# ---------------------------------------------------------------------------------------------
def _evaluate_lightning(p: _Prepared, chopped: bool | None, *, specified_test_voltage_V: float | None,
                        full_scale_V: float | None, bits: int | None, for_comparison: bool,
                        source: str | None) -> WaveShape:
    n = p.u.size
    i_col = _find_collapse(p)
    if chopped is True and i_col is None:
        raise _error(source, "no voltage collapse found; expected a chopped lightning impulse")
    if chopped is False and i_col is not None:
        tc_idx = _chopping(p, i_col, source)[0]
        raise _error(source, f"the voltage collapses at t = {(p.t0 + tc_idx * p.dt) * 1e6:.3f} us (chopped "
                     "impulse); use kind 'lightning_chopped' or let the kind be detected")
    is_chopped = i_col is not None
    warnings = list(p.warnings)
    if is_chopped:
        tc_idx, i_end = _chopping(p, i_col, source)
    else:
        tc_idx, i_end = None, n
    stop = min(p.ipk, i_end - 1)
    # gross check on the smoothed record before the fit; the standard's check on the test voltage curve
    _check_monotone_front(p, p.us, p.peak, stop, 0.3, source)
    pk = float(p.us[: i_end].max())
    ipk = int(np.argmax(p.us[: i_end]))
    a30 = _last_rise(p.us, 0.3 * pk, ipk)
    a90 = _last_rise(p.us, 0.9 * pk, ipk)
    a20 = _last_rise(p.us, 0.2 * pk, ipk)
    if a30 is None or a90 is None or a20 is None:
        raise _error(source, "the record starts on or after the impulse's front; expected a pre-trigger")
    front = 1.67 * (a90 - a30)  # samples
    o1 = a30 - 0.3 * front
    a50 = None if is_chopped else _first_fall(p.us, 0.5 * pk, ipk)
    tau2 = 0.3375 * front  # 0.405 / 1.2, standard wave (Kuffel, Zaengl & Kuffel; recalled)
    tau1 = (a50 - o1) / 0.733 if a50 is not None else 56.85 * front  # 50 / 68.22 and 68.22 / 1.2
    tau1 = max(tau1, 3.0 * tau2)
    # fit window: 20 % on the front to 40 % on the tail (IEC 60060-1:2010 annex B, from memory)
    a40 = None if is_chopped else _first_fall(p.us, 0.4 * pk, ipk)
    i_lo = max(int(math.floor(a20)), 0)
    i_hi = i_end if a40 is None else int(math.ceil(a40)) + 1
    if i_hi - i_lo < 8:
        raise _error(source, f"too few samples on the impulse ({i_hi - i_lo}) to fit a base curve; expected a "
                     "faster recording")
    base = _fit_base(p, i_lo, i_hi, tau1, tau2, o1 - 0.1 * front, source)
    times = p.t0 + np.arange(n) * p.dt
    base_u = base(times)
    _fit_quality_warning(warnings, p, base_u, i_lo, i_hi)
    tv = _test_voltage_curve(p, base_u, i_end)
    itv = int(np.argmax(tv))
    ut = float(tv[itv])
    _check_monotone_front(p, tv, ut, itv, 0.15, source)
    t30 = _last_rise(tv, 0.3 * ut, itv)
    t90 = _last_rise(tv, 0.9 * ut, itv)
    if t30 is None or t90 is None:
        raise _error(source, "the test voltage curve has no rise through 30 % and 90 %; expected a front")
    front_s = 1.67 * (t90 - t30) * p.dt
    o1_s = p.t0 + t30 * p.dt - 0.3 * front_s
    t2_s = None
    if not is_chopped:
        t50 = _first_fall(tv, 0.5 * ut, itv)
        if t50 is None:
            warnings.append("record too short: it ends before the tail falls to 50 % of the test voltage; "
                            "time to half-value not available")
        else:
            t2_s = p.t0 + t50 * p.dt - o1_s
    # base-curve crest inside the evaluated part
    t_last = p.t0 + (i_end - 1) * p.dt
    base_peak = base.peak_V if base.peak_time_s <= t_last else float(base(t_last))
    extreme = pk
    overshoot = 100.0 * (extreme - base_peak) / extreme
    chop_s = tc_s = None
    if tc_idx is not None:
        chop_s = p.t0 + tc_idx * p.dt
        tc_s = chop_s - o1_s
        if tc_s < front_s:
            warnings.append(f"chopped on the front (time to chopping {tc_s * 1e6:.3g} us)")
    n_pre = int(math.floor((o1_s - p.t0) / p.dt))
    rec_w, eff = _recorder_warnings(p, (t90 - t30) * p.dt, full_scale_V=full_scale_V, bits=bits,
                                    for_comparison=for_comparison, n_pre=n_pre)
    warnings += rec_w
    kind = "lightning_chopped" if is_chopped else "lightning_full"
    tol = check_tolerances(kind, front_time_s=front_s, time_to_half_s=t2_s, time_to_chopping_s=tc_s,
                           overshoot_percent=overshoot, test_voltage_V=ut,
                           specified_test_voltage_V=specified_test_voltage_V)
    _polarity_warning(warnings, p.sign, specified_test_voltage_V)
    return WaveShape(
        kind=kind, polarity="positive" if p.sign > 0 else "negative", peak_V=p.sign * extreme,
        test_voltage_V=p.sign * ut, front_time_s=front_s, time_to_half_s=t2_s, overshoot_percent=overshoot,
        chopping_instant_s=chop_s, time_to_chopping_s=tc_s, time_to_peak_s=None, virtual_origin_s=o1_s,
        origin_s=base.origin_s, baseline_V=p.baseline,
        base_curve=dataclasses.replace(base, amplitude_V=p.sign * base.amplitude_V), effective_bits=eff,
        tolerance=tol, within_tolerance=all(c.passed for c in tol), warnings=tuple(warnings))


def _fit_quality_warning(warnings: list[str], p: _Prepared, base_u: np.ndarray, i_lo: int, i_hi: int) -> None:
    """Warn when the record departs from a double exponential over the fit window (a collapse, a fault)."""
    rms = float(np.sqrt(np.mean((p.u[i_lo:i_hi] - base_u[i_lo:i_hi]) ** 2)))
    if rms > 0.05 * p.peak:
        warnings.append(f"the record departs from a double-exponential impulse (base-curve residual "
                        f"{100 * rms / p.peak:.1f} % rms of the peak): the parameters are uncertain")


def _polarity_warning(warnings: list[str], sign: float, spec: float | None) -> None:
    if spec is not None and spec != 0 and math.copysign(1.0, spec) != sign:
        warnings.append(f"specified test voltage {spec / 1e3:.4g} kV has the opposite polarity of the record")


def _evaluate_switching(p: _Prepared, *, specified_test_voltage_V: float | None, full_scale_V: float | None,
                        bits: int | None, for_comparison: bool, source: str | None) -> WaveShape:
    n = p.u.size
    _check_monotone_front(p, p.us, p.peak, p.ipk, 0.15, source)
    warnings = list(p.warnings)
    pk, ipk = p.peak, p.ipk
    a30 = _last_rise(p.us, 0.3 * pk, ipk)
    a90 = _last_rise(p.us, 0.9 * pk, ipk)
    a20 = _last_rise(p.us, 0.2 * pk, ipk)
    if a30 is None or a90 is None or a20 is None:
        raise _error(source, "the record starts on or after the impulse's front; expected a pre-trigger")
    a50 = _first_fall(p.us, 0.5 * pk, ipk)
    a40 = _first_fall(p.us, 0.4 * pk, ipk)
    tab = a90 - a30  # samples
    origin0 = a30 - 0.8 * tab
    tp0 = ipk - origin0
    tau2 = tp0 / 4.0  # 250 us / 62.5 us (Kuffel, Zaengl & Kuffel; recalled)
    tau1 = max((a50 - origin0) / 0.792 if a50 is not None else 12.6 * tp0, 3.0 * tau2)  # 2500 / 3155
    i_lo = max(int(math.floor(a20)), 0)
    i_hi = n if a40 is None else int(math.ceil(a40)) + 1
    base = _fit_base(p, i_lo, i_hi, tau1, tau2, origin0, source)
    _fit_quality_warning(warnings, p, base(p.t0 + np.arange(n) * p.dt), i_lo, i_hi)
    tab_s = tab * p.dt
    t2_us = None
    t2_s = None
    if a50 is None:
        warnings.append("record too short: it ends before the tail falls to 50 % of the peak; time to "
                        "half-value not available")
    else:
        t2_s = p.t0 + a50 * p.dt - base.origin_s
        t2_us = t2_s * 1e6
    # time to peak Tp = K T_AB, K = 2.42 - 3.08e-3 T_AB + 1.51e-4 T2 (T_AB, T2 in us;
    # IEC 60060-1:2010 clause 8.1, from memory); without T2 the nominal 2500 us is used
    t_ab_us = tab_s * 1e6
    k = 2.42 - 3.08e-3 * t_ab_us + 1.51e-4 * (t2_us if t2_us is not None else 2500.0)
    tp_s = k * tab_s
    n_pre = int(math.floor((base.origin_s - p.t0) / p.dt))
    rec_w, eff = _recorder_warnings(p, tab_s, full_scale_V=full_scale_V, bits=bits,
                                    for_comparison=for_comparison, n_pre=n_pre)
    warnings += rec_w
    tol = check_tolerances("switching", time_to_peak_s=tp_s, time_to_half_s=t2_s, test_voltage_V=pk,
                           specified_test_voltage_V=specified_test_voltage_V)
    _polarity_warning(warnings, p.sign, specified_test_voltage_V)
    return WaveShape(
        kind="switching", polarity="positive" if p.sign > 0 else "negative", peak_V=p.sign * pk,
        test_voltage_V=p.sign * pk, front_time_s=None, time_to_half_s=t2_s, overshoot_percent=None,
        chopping_instant_s=None, time_to_chopping_s=None, time_to_peak_s=tp_s, virtual_origin_s=None,
        origin_s=base.origin_s, baseline_V=p.baseline,
        base_curve=dataclasses.replace(base, amplitude_V=p.sign * base.amplitude_V), effective_bits=eff,
        tolerance=tol, within_tolerance=all(c.passed for c in tol), warnings=tuple(warnings))


def evaluate_lightning(
    times_s: Any,
    voltage_V: Any,
    *,
    chopped: bool | None = None,
    specified_test_voltage_V: float | None = None,
    full_scale_V: float | None = None,
    bits: int | None = None,
    for_comparison: bool = True,
    source: str | None = None,
) -> WaveShape:
    """Evaluate a full or chopped lightning impulse after IEC 60060-1:2010.

    Parameters
    ----------
    times_s : array_like
        Uniform sample times [s] on the record's own axis.
    voltage_V : array_like
        Applied voltage [V], either polarity, with a pre-trigger before the front.
    chopped : bool or None
        None detects a voltage collapse; True requires one; False refuses one.
    specified_test_voltage_V : float, optional
        Specified test voltage [V] for the +/- 3 % check (compared by magnitude).
    full_scale_V : float, optional
        Recorder full scale [V]: the codes span ``-full_scale_V .. +full_scale_V`` (as
        ``synthetic.digitiser`` and ``meta['voltage_range_V']``), one step ``2 full_scale_V / 2**bits``.
    bits : int, optional
        Recorder resolution [bits].
    for_comparison : bool
        Warn below 10 effective bits (records compared to detect failures).
    source : str, optional
        Name of the file, used in error messages.

    Returns
    -------
    WaveShape

    Raises
    ------
    RecordError
        No impulse, record too short, no pre-trigger, non-monotone front, non-uniform time.
    """
    _check_bits(bits, full_scale_V, specified_test_voltage_V)
    p = _prepare(times_s, voltage_V, source)
    return _evaluate_lightning(p, chopped, specified_test_voltage_V=specified_test_voltage_V,
                               full_scale_V=full_scale_V, bits=bits, for_comparison=for_comparison,
                               source=source)


def evaluate_switching(
    times_s: Any,
    voltage_V: Any,
    *,
    specified_test_voltage_V: float | None = None,
    full_scale_V: float | None = None,
    bits: int | None = None,
    for_comparison: bool = True,
    source: str | None = None,
) -> WaveShape:
    """Evaluate a switching impulse after IEC 60060-1:2010 (time to peak Tp, T2 from the true origin).

    Parameters
    ----------
    times_s, voltage_V : array_like
        Uniform sample times [s] and applied voltage [V].
    specified_test_voltage_V, full_scale_V, bits, for_comparison, source
        As for :func:`evaluate_lightning`.

    Returns
    -------
    WaveShape
        ``test_voltage_V`` is the peak value; ``origin_s`` is the true origin (start of the fitted base
        curve); ``front_time_s``, ``overshoot_percent`` and ``virtual_origin_s`` are None.
    """
    _check_bits(bits, full_scale_V, specified_test_voltage_V)
    p = _prepare(times_s, voltage_V, source)
    return _evaluate_switching(p, specified_test_voltage_V=specified_test_voltage_V, full_scale_V=full_scale_V,
                               bits=bits, for_comparison=for_comparison, source=source)


_META_KIND = {"chopped": "lightning_chopped", "switching": "switching"}


def evaluate_waveshape(
    record: Record,
    *,
    kind: str | None = None,
    specified_test_voltage_V: float | None = None,
    full_scale_V: float | None = None,
    bits: int | None = None,
    for_comparison: bool = True,
) -> WaveShape:
    """Evaluate the wave shape of a record's (first) voltage channel after IEC 60060-1:2010.

    Parameters
    ----------
    record : Record
        The shot; ``record.meta['shot_kind']`` ('chopped', 'switching') is used when ``kind`` is None.
    kind : {'lightning_full', 'lightning_chopped', 'switching'} or None
        None detects it: switching if ``meta['shot_kind']`` says so or the front time 1.67 (t90 - t30)
        exceeds 20 us, chopped if the voltage collapses after the crest.
    specified_test_voltage_V, full_scale_V, bits, for_comparison
        As for :func:`evaluate_lightning`; when neither ``bits`` nor ``full_scale_V`` is given,
        ``meta['bits']`` and ``meta['voltage_range_V']`` are used if the record has both.

    Returns
    -------
    WaveShape

    Raises
    ------
    RecordError
        Naming ``record.source`` and what was expected.

    Examples
    --------
    >>> import numpy as np
    >>> from detector.record import Channel, Record
    >>> t = np.arange(-200, 10000) * 1e-8
    >>> s = np.clip(t, 0, None)
    >>> v = Channel("U", "voltage", 5e5 * (np.exp(-s / 68.22e-6) - np.exp(-s / 0.405e-6)))
    >>> r = Record(start_time_s=t[0], sample_interval_s=1e-8, channels=(v,), meta={"shot_kind": "full"})
    >>> ws = evaluate_waveshape(r)
    >>> ws.to_dict()["kind"], round(ws.to_dict()["front_time_us"], 2), ws.within_tolerance
    ('lightning_full', 1.2, True)
    """
    if not isinstance(record, Record):
        raise ShotcheckError(f"expected a Record, got {type(record).__name__}")
    if kind is not None:
        check_option("kind", kind, KINDS)
    _check_bits(bits, full_scale_V, specified_test_voltage_V)
    meta: Mapping[str, Any] = record.meta
    if kind is None:
        kind = _META_KIND.get(str(meta.get("shot_kind")))
    if bits is None and full_scale_V is None and meta.get("bits") is not None \
            and meta.get("voltage_range_V") is not None:
        try:  # recorder settings stored with the record (synthetic.digitiser writes these keys)
            bits, full_scale_V = int(meta["bits"]), float(meta["voltage_range_V"])
        except (TypeError, ValueError):
            raise RecordError(f"meta bits={meta['bits']!r}, voltage_range_V={meta['voltage_range_V']!r}; "
                              "expected an integer and a number of volts", path=record.source,
                              field="meta") from None
        try:
            _check_bits(bits, full_scale_V)
        except ShotcheckError as e:
            raise RecordError(f"recorder settings in meta: {e}", path=record.source, field="meta") from None
    src = record.source
    p = _prepare(record.times(), record.voltage.samples, src)
    if kind is None and p.front_s > _SWITCHING_FRONT_THRESHOLD_S:
        kind = "switching"
    opts = dict(specified_test_voltage_V=specified_test_voltage_V, full_scale_V=full_scale_V, bits=bits,
                for_comparison=for_comparison, source=src)
    if kind == "switching":
        return _evaluate_switching(p, **opts)  # type: ignore[arg-type]
    chopped = {None: None, "lightning_full": False, "lightning_chopped": True}[kind]
    return _evaluate_lightning(p, chopped, **opts)  # type: ignore[arg-type]
