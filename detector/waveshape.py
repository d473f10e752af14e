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

Chopped lightning impulse: a collapse is a fall of the (5-sample smoothed) curve, from 10 % of the peak or
more, to below half its value within 0.5 us, after which it stays low. The voltage at chopping is the
largest value in the 0.5 us before the collapse's 50 % point; the instant of chopping is where the line
through the collapse's 70 % and 10 % points meets that voltage (IEC 60060-1:2010, from memory). The fit and
the test voltage curve use the part before the collapse; T2 does not apply.

Switching impulse (IEC 60060-1:2010 clause 8, from memory): test voltage = peak of the smoothed curve;
time to peak ``Tp = K (t90 - t30)`` with ``K = 2.42 - 3.08e-3 T_AB + 1.51e-4 T2`` (T_AB = t90 - t30 and
T2 in us); T2 from the true origin, taken as the start of the fitted double exponential.

Recorder adequacy (IEC 61083-1, recalled): sample rate at least 30/Tx for the front (Tx = t90 - t30),
at least 8 effective bits over the impulse (10 for records to be compared, common practice), peak at least
20 % of full scale, no clipping, and a pre-trigger of at least 20 samples (common practice).

Times returned (virtual origin, chopping instant) are on the input's own time axis; intervals
(front time, time to half-value, time to chopping, time to peak) are durations.

The signal helpers live in ``detector._waveshape_signal``, the base-curve fit and the k(f) filter in
``detector._waveshape_fit``.

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

from ._validation import RecordError, ShotcheckError, check_option
from ._waveshape_fit import (
    DoubleExponential,
    _fit_base,
    _test_voltage_curve,
    filter_residual,
    test_voltage_factor,
)
from ._waveshape_signal import (
    _check_monotone_front,
    _chopping,
    _error,
    _find_collapse,
    _first_fall,
    _last_rise,
    _prepare,
    _Prepared,
)
from .record import Record

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
        w.append(f"fewer than 10 bits ({eff:.2f}) over the impulse; a record to be compared with another "
                 "should have 10 bits or more (common practice)")
    if full_scale_V is not None and amp < 0.2 * full_scale_V:
        w.append(f"peak {amp / 1e3:.4g} kV is below 20 % of the full scale {full_scale_V / 1e3:.4g} kV "
                 "(IEC 61083-1)")
    # clipping: many samples at the extreme code, few per code in the three below (a smooth crest: ratio < 2)
    top = float(p.u.max())
    q = p.q if p.q is not None else q  # the step seen in the samples is the one that tells clipping
    if q is None or not q > 0:
        # no uniform step: float samples, or codes stored again on a finer grid that is no whole multiple
        # of them (12-bit codes in a file's 16-bit integers: gaps of 41 and 42 of its steps). The smallest
        # gap between distinct values then stands for the step; a smooth crest passes the values below
        # its top as a recorded one does, a clipped channel sits at its limit
        vals = np.unique(p.u)
        gaps = np.diff(vals)
        gaps = gaps[gaps > 1e-12 * max(abs(top), 1e-300)]
        q = float(gaps.min()) if gaps.size else 0.0
    if q > 0:
        n_top = int(np.count_nonzero(p.u >= top - 0.5 * q))
        n_next3 = int(np.count_nonzero((p.u < top - 0.5 * q) & (p.u >= top - 3.5 * q)))
        clipped = n_top >= 5 and n_top > 4 * max(n_next3 / 3.0, 1.0)
    else:
        n_top = int(p.u.size)
        clipped = n_top >= 3  # every sample at one value
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


_META_KIND = {"chopped": "lightning_chopped", "reduced_chopped": "lightning_chopped", "switching": "switching"}


#: Sample rates a record must have for a wave-shape evaluation [Hz]: at 100 kS/s the front of a
#: switching impulse (250 us) holds 25 samples; no impulse recorder samples above 20 GS/s. Outside, the
#: time column is in another unit than it says (microseconds read as seconds give 100 Hz).
MIN_SAMPLE_RATE_HZ = 100e3
MAX_SAMPLE_RATE_HZ = 20e9


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
        Naming ``record.source`` and what was expected (also for a sample rate outside
        ``MIN_SAMPLE_RATE_HZ``..``MAX_SAMPLE_RATE_HZ``).

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
    fs = record.sampling_rate_Hz
    if not MIN_SAMPLE_RATE_HZ <= fs <= MAX_SAMPLE_RATE_HZ:
        raise RecordError(
            f"{fs:.4g} Hz is outside the {MIN_SAMPLE_RATE_HZ / 1e3:g} kS/s to {MAX_SAMPLE_RATE_HZ / 1e9:g} GS/s "
            "an impulse record can have; check the time column's unit or the sample interval",
            path=record.source, field="sample rate")
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
