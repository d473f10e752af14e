"""Time-domain comparison of an aligned reference/test pair.

Difference traces of the per-unit voltage and of the level-normalised current, their noise floor from the
pre-triggers, the largest deviation in the front, crest and tail windows (in noise units and in percent of
the reference peak), the onset of the deviation, and detection of a voltage collapse (chopping, or a
breakdown to ground).

Windows (defined on the reference voltage, per unit, positive polarity):

``front``
    From the foot of the front (end of the pre-trigger) to the reference voltage maximum.
``crest``
    From the maximum to the first sample after it where the voltage has fallen below 90 % of the maximum
    (the region of the overshoot oscillation and the first winding oscillations).
``tail``
    From there to the end of the compared span.
``all``
    The whole compared span, pre-trigger included.

The compared span ends where either record's voltage collapses (a chopped test shot compared with a full
reference differs trivially after the chop), less a guard of ``collapse_guard_s``.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from types import MappingProxyType
from typing import NamedTuple

import numpy as np

from .._validation import ShotcheckError, check_range
from ..preprocess import AlignedPair, _median3

__all__ = [
    "WINDOW_NAMES",
    "Collapse",
    "NoiseFloor",
    "TimeDomainMetrics",
    "WindowDeviation",
    "deviation_onset",
    "difference_traces",
    "noise_floor",
    "time_domain_metrics",
    "VoltageStep",
    "voltage_steps",
    "voltage_collapse",
    "voltage_windows",
    "window_deviations",
]

#: Window names in order.
WINDOW_NAMES = ("front", "crest", "tail", "all")


class NoiseFloor(NamedTuple):
    """Standard deviation of the noise on a difference trace (unit of the trace).

    ``rms`` and ``mad`` combine the two records' estimates as ``sqrt(s_ref**2 + s_test**2)``
    (independent noise adds in power).
    """

    rms: float
    mad: float


def noise_floor(ref_sigma: tuple[float, float], test_sigma: tuple[float, float]) -> NoiseFloor:
    """Noise floor of a difference trace from the noise of its two records.

    Parameters
    ----------
    ref_sigma, test_sigma : (float, float)
        ``(rms, mad)`` noise standard deviations of the reference and test records [p.u. or A/V], e.g. from
        :func:`detector.preprocess.noise_estimate` on the pre-triggers.

    Returns
    -------
    NoiseFloor
        Standard deviations of ``test - ref`` [same unit].
    """
    (r1, m1), (r2, m2) = ref_sigma, test_sigma
    return NoiseFloor(math.hypot(r1, r2), math.hypot(m1, m2))


def _difference_sigma(rms_ref: float, mad_ref: float, rms_test: float, mad_test: float) -> float:
    """Noise standard deviation of a difference trace from its two records' pre-trigger estimates.

    Each record's MAD-based estimate (robust to a few spikes), unless it is zero: when the noise is
    smaller than one recorder code, more than half of the pre-trigger sits on one code and the MAD
    says nothing; the rms (which then holds the code flicker) stands in. NaN counts as zero.
    """
    def one(rms: float, mad: float) -> float:
        mad = mad if math.isfinite(mad) else 0.0
        return mad if mad > 0.0 else (rms if math.isfinite(rms) else 0.0)

    return math.hypot(one(rms_ref, mad_ref), one(rms_test, mad_test))


class VoltageStep(NamedTuple):
    """Result of :func:`voltage_steps` at one time scale.

    Attributes
    ----------
    max_score : float
        Largest score in the scored span [1] (0 if the span is empty).
    first_index : int
        First sample whose score exceeds the threshold (-1 if none).
    step_index : int
        Where the step is: the largest score within ``L`` samples from ``first_index`` (the statistic
        peaks with the step midway between its two windows; the first crossing comes earlier the larger
        the step), -1 if none.
    """

    max_score: float
    first_index: int
    step_index: int


def voltage_steps(
    dv: np.ndarray,
    ref_voltage: np.ndarray,
    sigma: float,
    dt: float,
    *,
    scales_s: tuple[float, ...],
    start: int,
    stop: int,
    k_sigma: float = 6.0,
    timing_tolerance_s: float = 2e-9,
    level_tolerance: float = 1e-3,
) -> list[VoltageStep]:
    """Abrupt changes of the voltage difference: a Haar step detector at several time scales.

    A breakdown in the winding changes the load on the generator at once, so the test voltage steps
    away from the scaled reference at the fault instant (strongly for a fault near the line end, whose
    effect on the neutral current is delayed by the travel through the winding). Benign differences
    (a level or timing error of the normalisation) are smooth. At each scale of ``L`` samples the
    statistic at sample ``k`` is the mean of ``dv[k:k+L]`` minus the mean of ``dv[k-L:k]``, divided by
    its standard deviation under white noise, ``sigma sqrt(2/L)``, with the same statistic of a level
    error (``level_tolerance * v_ref``) and of a timing error (``timing_tolerance_s * dv_ref/dt``, the
    derivative as the backward difference over ``dt``) added in quadrature.

    Parameters
    ----------
    dv : numpy.ndarray
        Voltage difference, test minus reference [p.u.].
    ref_voltage : numpy.ndarray
        Reference voltage on the same grid [p.u.].
    sigma : float
        Noise standard deviation of ``dv`` per sample [p.u.], > 0.
    dt : float
        Sample interval [s].
    scales_s : tuple of float
        Averaging lengths [s]; ``L = round(scale / dt)`` samples, at least 2 (so at a low sample rate
        the shortest scales coincide).
    start, stop : int
        The compared span: a step is scored at ``k >= start``, and both of its windows lie before
        ``stop`` (``k + L <= stop``; samples from ``stop`` on, e.g. a chop, never enter) and in the
        record (``k >= L``).
    k_sigma : float
        Threshold of the first time [1].
    timing_tolerance_s, level_tolerance : float
        Tolerance of the alignment [s] and of the level normalisation [1].

    Returns
    -------
    list of VoltageStep
        One per scale.

    Raises
    ------
    ShotcheckError
        Traces of unequal length, or not finite.

    Notes
    -----
    With the cumulative sum ``C`` of a trace, the statistic at ``k`` is
    ``(C[k+L] - 2 C[k] + C[k-L]) / L``; for the timing term the cumulative sum of the backward
    difference is the reference itself shifted by one sample, ``(v[k+L-1] - 2 v[k-1] + v[k-L-1]) /
    (L dt)``.
    """
    sigma = check_range("sigma", sigma, 0.0, None, low_inclusive=False)
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    dv = np.asarray(dv, dtype=np.float64)
    vr = np.asarray(ref_voltage, dtype=np.float64)
    if dv.ndim != 1 or vr.shape != dv.shape:
        raise ShotcheckError(f"voltage_steps: the voltage difference ({dv.shape}) and the reference "
                             f"({vr.shape}) must be 1-D traces of one length")
    if not (np.isfinite(dv).all() and np.isfinite(vr).all()):
        raise ShotcheckError("voltage_steps: the voltage traces must be finite")
    n = dv.size
    c_dv = np.concatenate(([0.0], np.cumsum(dv)))
    c_v = np.concatenate(([0.0], np.cumsum(vr)))
    v0 = np.concatenate((vr[:1], vr))  # v0[k] = v[k-1]: the derivative's cumulative sum, up to a constant
    k2 = k_sigma * k_sigma
    out: list[VoltageStep] = []
    for s in scales_s:
        L = max(2, int(round(s / dt)))
        a, b = max(int(start), L), min(int(stop), n) - L + 1
        if b <= a:
            out.append(VoltageStep(0.0, -1, -1))
            continue
        h = (c_dv[a + L : b + L] - 2.0 * c_dv[a:b] + c_dv[a - L : b - L]) / L
        hv = (c_v[a + L : b + L] - 2.0 * c_v[a:b] + c_v[a - L : b - L]) * (level_tolerance / L)
        hs = (v0[a + L : b + L] - 2.0 * v0[a:b] + v0[a - L : b - L]) * (timing_tolerance_s / (L * dt))
        r = h * h / (sigma * sigma * 2.0 / L + hv * hv + hs * hs)  # score squared
        hit = np.flatnonzero(r > k2)
        if hit.size:
            j = int(hit[0])
            out.append(VoltageStep(math.sqrt(float(np.max(r))), a + j, a + j + int(np.argmax(r[j : j + L]))))
        else:
            out.append(VoltageStep(math.sqrt(float(np.max(r))), -1, -1))
    return out


def difference_traces(pair: AlignedPair) -> tuple[np.ndarray, np.ndarray]:
    """Difference traces test minus reference.

    Parameters
    ----------
    pair : AlignedPair
        Aligned, level-normalised records.

    Returns
    -------
    dv_pu : numpy.ndarray
        Voltage difference [p.u. of each record's test voltage].
    di_pu : numpy.ndarray
        Current difference [A/V], i.e. current per volt of test voltage.
    """
    return pair.test_voltage_pu - pair.ref_voltage_pu, pair.test_current_pu - pair.ref_current_pu


@dataclasses.dataclass(frozen=True)
class Collapse:
    """A steep fall of the voltage (chopping or breakdown).

    Attributes
    ----------
    index : int
        Sample index at (just before) the collapse instant.
    time_s : float
        Instant of the collapse [s, from the first sample]: the line through the 70 % and 10 % points of
        the fall, extended to the voltage before the fall.
    voltage_before_pu : float
        Voltage at the knee where the steep fall begins [p.u.].
    voltage_after_pu : float
        Lowest voltage within ``4 * max_fall_time_s`` after the fall began [p.u.].
    fall_time_s : float
        Duration of the fall from 100 % to 0 on that line [s] (``(t10 - t70) / 0.6``; for a collapse
        that stops above 10 % the lowest point replaces the 10 % point).
    """

    index: int
    time_s: float
    voltage_before_pu: float
    voltage_after_pu: float
    fall_time_s: float


def voltage_collapse(
    voltage_pu: np.ndarray,
    dt: float,
    *,
    min_drop_pu: float = 0.3,
    max_fall_time_s: float = 0.5e-6,
) -> Collapse | None:
    """Find the first steep fall of the voltage: chopping or a breakdown to ground.

    Parameters
    ----------
    voltage_pu : array_like
        Voltage, positive polarity [p.u.; any unit works, the drop is relative to the maximum].
    dt : float
        Sample interval [s].
    min_drop_pu : float
        Smallest fall, as a fraction of the maximum of the record, that counts [1].
    max_fall_time_s : float
        The fall must happen within this time [s]. A 1.2/50 tail loses about 0.01 p.u. per microsecond;
        a chopping gap removes the voltage in well under a microsecond (common practice).

    Returns
    -------
    Collapse or None
        None if the voltage never falls by ``min_drop_pu`` within ``max_fall_time_s``.

    Notes
    -----
    The instant follows the IEC 60060-1 construction for chopped impulses (from memory): the straight
    line through the points where the fall passes 70 % and 10 % of the voltage before the fall, taken at
    the voltage before the fall. That voltage is read at the knee, the last sample before the steep run
    (fall per sample at least 10 % of the steepest); a fall that stops above 10 % uses the end of the
    steep run instead of the 10 % point.
    """
    v = np.asarray(voltage_pu, dtype=np.float64)
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    min_drop_pu = check_range("min_drop_pu", min_drop_pu, 0.0, 1.0, low_inclusive=False)
    max_fall_time_s = check_range("max_fall_time_s", max_fall_time_s, 0.0, None, low_inclusive=False,
                                  unit="s")
    w = max(1, int(round(max_fall_time_s / dt)))
    if v.size <= w:
        return None
    peak = float(np.max(_median3(v)))
    if peak <= 0.0:
        return None
    drop = v[:-w] - v[w:]
    hits = np.flatnonzero(drop >= min_drop_pu * peak)
    if hits.size == 0:
        return None
    i = int(hits[0])
    seg = v[i : i + 2 * w + 2]  # holds the whole fall: it starts within w samples and lasts <= w
    fall_step = -np.diff(seg)
    # the steep run is the contiguous run of steps around the steepest one (a noise step before a slow
    # fall may also exceed a tenth of the steepest step; it must not be taken for the start of the fall)
    steep = fall_step >= 0.1 * fall_step.max()
    top = int(np.argmax(fall_step))
    before = np.flatnonzero(~steep[:top])
    k0 = int(before[-1]) + 1 if before.size else 0  # knee: the last sample before the steep fall
    after = np.flatnonzero(~steep[top:])
    k1 = top + (int(after[0]) if after.size else steep.size - top)  # first sample after the steep run
    u = float(seg[k0])
    fall_seg = seg[k0 : k1 + 1]
    frac_end = float(fall_seg[-1] / u) if u > 0 else 1.0
    below70 = fall_seg < 0.7 * u
    if u <= 0 or not below70.any() or frac_end > 0.6:
        # a fall that ends above 60 %: the 70 % point is too close to its end for the construction, so
        # the line through the knee and the end of the steep run is used; it meets u at the knee
        fall = (fall_seg.size - 1) / max(1.0 - frac_end, 1e-3)
        t_c = float(i + k0)
    else:
        j70 = int(np.argmax(below70))
        t70 = j70 - 1 + (fall_seg[j70 - 1] - 0.7 * u) / (fall_seg[j70 - 1] - fall_seg[j70])
        below10 = fall_seg < 0.1 * u
        if below10.any():
            j10 = int(np.argmax(below10))
            frac_end = 0.1
            t10 = j10 - 1 + (fall_seg[j10 - 1] - 0.1 * u) / (fall_seg[j10 - 1] - fall_seg[j10])
        else:
            # partial collapse: the line through the 70 % point and the end of the steep fall
            t10 = float(fall_seg.size - 1)
        fall = (t10 - t70) / (0.7 - frac_end)  # samples from 100 % to 0 on that line (0.7 - frac_end >= 0.1)
        t_c = float(min(max(i + k0 + t70 - 0.3 * fall, i), i + seg.size - 1))
    k = int(min(max(math.floor(t_c), 0), v.size - 1))
    low = float(np.min(v[i : i + 4 * w + 1]))
    return Collapse(k, float(t_c * dt), u, low, float(fall * dt))


def voltage_windows(voltage_pu: np.ndarray, *, pretrigger_samples: int = 0, stop: int | None = None,
                    crest_fraction: float = 0.9) -> dict[str, slice]:
    """Front, crest and tail windows of the reference voltage.

    Parameters
    ----------
    voltage_pu : array_like
        Reference voltage, positive polarity [p.u.].
    pretrigger_samples : int
        Samples before the foot of the front.
    stop : int, optional
        End of the compared span (exclusive); default the record length.
    crest_fraction : float
        The crest ends where the voltage first falls below this fraction of its maximum [1].

    Returns
    -------
    dict of str to slice
        ``{"front", "crest", "tail", "all"}`` as index slices; a window may be empty.
    """
    v = np.asarray(voltage_pu, dtype=np.float64)
    n = v.size if stop is None else int(min(max(stop, 1), v.size))
    vv = _median3(v[:n])
    i_pk = int(np.argmax(vv))
    start = int(min(max(pretrigger_samples, 0), i_pk))
    fallen = np.flatnonzero(vv[i_pk:] < crest_fraction * vv[i_pk])
    i_fall = i_pk + int(fallen[0]) if fallen.size else n
    return {
        "front": slice(start, i_pk),
        "crest": slice(i_pk, i_fall),
        "tail": slice(i_fall, n),
        "all": slice(0, n),
    }


class WindowDeviation(NamedTuple):
    """Largest deviation within one window.

    Attributes
    ----------
    max_abs : float
        Largest ``|test - ref|`` [p.u. or A/V].
    max_sigma : float
        The same in units of the noise standard deviation of the difference [1].
    max_percent : float
        The same in percent of the reference peak magnitude [%].
    time_s : float
        Time of the largest deviation on the pair's time axis [s]; NaN for an empty window.
    """

    max_abs: float
    max_sigma: float
    max_percent: float
    time_s: float


def window_deviations(
    diff: np.ndarray,
    sigma: float,
    ref_peak: float,
    windows: Mapping[str, slice],
    times_s: np.ndarray,
) -> dict[str, WindowDeviation]:
    """Largest deviation per window in noise units and in percent of the reference peak.

    Parameters
    ----------
    diff : array_like
        Difference trace [p.u. or A/V].
    sigma : float
        Noise standard deviation of the difference [same unit], > 0.
    ref_peak : float
        Reference peak magnitude [same unit], > 0.
    windows : mapping of str to slice
        Windows, e.g. from :func:`voltage_windows`.
    times_s : array_like
        Sample times [s].

    Returns
    -------
    dict of str to WindowDeviation
    """
    sigma = check_range("sigma", sigma, 0.0, None, low_inclusive=False)
    ref_peak = check_range("ref_peak", ref_peak, 0.0, None, low_inclusive=False)
    a = np.abs(np.asarray(diff, dtype=np.float64))
    out = {}
    for name, sl in windows.items():
        seg = a[sl]
        if seg.size == 0:
            out[name] = WindowDeviation(0.0, 0.0, 0.0, float("nan"))
            continue
        k = int(np.argmax(seg))
        m = float(seg[k])
        out[name] = WindowDeviation(m, m / sigma, 100.0 * m / ref_peak, float(times_s[sl.start + k]))
    return out


def deviation_onset(
    diff: np.ndarray,
    sigma: float,
    dt: float,
    *,
    k_sigma: float = 5.0,
    min_duration_s: float = 50e-9,
    stop: int | None = None,
) -> int | None:
    """First sample from which the difference stays beyond ``k_sigma`` noise deviations for a while.

    Parameters
    ----------
    diff : array_like
        Difference trace [p.u. or A/V].
    sigma : float
        Noise standard deviation of the difference [same unit], > 0.
    dt : float
        Sample interval [s].
    k_sigma : float
        Threshold in noise standard deviations [1].
    min_duration_s : float
        The difference must exceed the threshold for at least this long without a break [s]
        (rounded to whole samples, at least one).
    stop : int, optional
        Search only before this index.

    Returns
    -------
    int or None
        Index of the onset, None if there is none.
    """
    sigma = check_range("sigma", sigma, 0.0, None, low_inclusive=False)
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    k_sigma = check_range("k_sigma", k_sigma, 0.0, None, low_inclusive=False)
    min_duration_s = check_range("min_duration_s", min_duration_s, 0.0, None, unit="s")
    a = np.abs(np.asarray(diff, dtype=np.float64))
    if stop is not None:
        a = a[: max(int(stop), 0)]
    m = max(1, int(round(min_duration_s / dt)))
    if a.size < m:
        return None
    over = (a > k_sigma * sigma).astype(np.int64)
    c = np.concatenate(([0], np.cumsum(over)))
    full = np.flatnonzero(c[m:] - c[:-m] == m)
    return int(full[0]) if full.size else None


@dataclasses.dataclass(frozen=True)
class TimeDomainMetrics:
    """Time-domain comparison of one aligned pair.

    Attributes
    ----------
    dv_pu, di_pu : numpy.ndarray
        Difference traces, test minus reference [p.u.] and [A/V].
    voltage_noise, current_noise : NoiseFloor
        Noise of the difference traces from the two pre-triggers.
    voltage_sigma_pu, current_sigma_pu : float
        Noise standard deviation actually used (from each record's MAD, or its rms where the MAD is
        zero, see ``_difference_sigma``; not below ``sigma_floor_rel`` of the reference peak) [p.u.],
        [A/V].
    windows : mapping of str to (float, float)
        Start and end time of each window on the pair's time axis [s].
    voltage, current : mapping of str to WindowDeviation
        Largest deviations per window.
    voltage_onset_s, current_onset_s, onset_s : float or None
        Deviation onset of each trace and the earlier of the two [s, pair time axis].
    ref_collapse, test_collapse : Collapse or None
        Voltage collapse of each record (times on the pair's time axis).
    compared_until_s : float
        End of the compared span [s, pair time axis].
    compared_stop : int
        Index one past the compared span's last sample (``compared_until_s`` is its time) [samples].
    """

    dv_pu: np.ndarray
    di_pu: np.ndarray
    voltage_noise: NoiseFloor
    current_noise: NoiseFloor
    voltage_sigma_pu: float
    current_sigma_pu: float
    windows: Mapping[str, tuple[float, float]]
    voltage: Mapping[str, WindowDeviation]
    current: Mapping[str, WindowDeviation]
    voltage_onset_s: float | None
    current_onset_s: float | None
    onset_s: float | None
    ref_collapse: Collapse | None
    test_collapse: Collapse | None
    compared_until_s: float
    compared_stop: int


def _shift_collapse(c: Collapse | None, t0: float) -> Collapse | None:
    return None if c is None else dataclasses.replace(c, time_s=c.time_s + t0)


def time_domain_metrics(
    pair: AlignedPair,
    *,
    k_sigma: float = 5.0,
    min_duration_s: float = 50e-9,
    sigma_floor_rel: float = 1e-5,
    collapse_guard_s: float = 0.2e-6,
) -> TimeDomainMetrics:
    """All time-domain metrics of an aligned pair.

    Parameters
    ----------
    pair : AlignedPair
        From :func:`detector.preprocess.align_pair`.
    k_sigma : float
        Onset threshold in noise standard deviations [1].
    min_duration_s : float
        Minimum duration above the threshold for an onset [s].
    sigma_floor_rel : float
        Lower bound of the noise standard deviation as a fraction of the reference peak of each trace
        [1], so that noise-free (synthetic) records give finite numbers.
    collapse_guard_s : float
        The compared span ends this long before the earlier voltage collapse [s].

    Returns
    -------
    TimeDomainMetrics
    """
    check_range("sigma_floor_rel", sigma_floor_rel, 0.0, None, low_inclusive=False)
    check_range("collapse_guard_s", collapse_guard_s, 0.0, None, unit="s")
    dt = pair.sample_interval_s
    t = pair.times_s
    dv, di = difference_traces(pair)
    nv = noise_floor((pair.ref_noise.voltage_rms_pu, pair.ref_noise.voltage_mad_pu),
                     (pair.test_noise.voltage_rms_pu, pair.test_noise.voltage_mad_pu))
    ni = noise_floor((pair.ref_noise.current_rms_pu, pair.ref_noise.current_mad_pu),
                     (pair.test_noise.current_rms_pu, pair.test_noise.current_mad_pu))
    pk_v = float(np.max(np.abs(pair.ref_voltage_pu)))
    pk_i = float(np.max(np.abs(pair.ref_current_pu)))
    if pk_v == 0.0 or pk_i == 0.0:
        raise ShotcheckError("the reference voltage or current is identically zero after alignment")
    sv = max(_difference_sigma(pair.ref_noise.voltage_rms_pu, pair.ref_noise.voltage_mad_pu,
                               pair.test_noise.voltage_rms_pu, pair.test_noise.voltage_mad_pu), sigma_floor_rel * pk_v)
    si = max(_difference_sigma(pair.ref_noise.current_rms_pu, pair.ref_noise.current_mad_pu,
                               pair.test_noise.current_rms_pu, pair.test_noise.current_mad_pu), sigma_floor_rel * pk_i)

    c_ref = voltage_collapse(pair.ref_voltage_pu, dt)
    c_test = voltage_collapse(pair.test_voltage_pu, dt)
    stop = t.size
    for c in (c_ref, c_test):
        if c is not None:
            stop = min(stop, c.index - int(round(collapse_guard_s / dt)))
    stop = max(stop, 1)
    wins = voltage_windows(pair.ref_voltage_pu, pretrigger_samples=pair.pretrigger_samples, stop=stop)
    win_times = {k: (float(t[s.start]) if s.stop > s.start else float("nan"),
                     float(t[s.stop - 1]) if s.stop > s.start else float("nan")) for k, s in wins.items()}
    # samples at a recorder's clipping limit were not measured: scored as no difference
    clip_v, clip_i = pair.voltage_clipped, pair.clipped
    dv_s = np.where(clip_v, 0.0, dv) if clip_v.any() else dv
    di_s = np.where(clip_i, 0.0, di) if clip_i.any() else di
    dev_v = window_deviations(dv_s, sv, pk_v, wins, t)
    dev_i = window_deviations(di_s, si, pk_i, wins, t)
    ov = deviation_onset(dv_s, sv, dt, k_sigma=k_sigma, min_duration_s=min_duration_s, stop=stop)
    oi = deviation_onset(di_s, si, dt, k_sigma=k_sigma, min_duration_s=min_duration_s, stop=stop)
    ov_s = None if ov is None else float(t[ov])
    oi_s = None if oi is None else float(t[oi])
    onsets = [x for x in (ov_s, oi_s) if x is not None]
    return TimeDomainMetrics(
        dv_pu=dv,
        di_pu=di,
        voltage_noise=nv,
        current_noise=ni,
        voltage_sigma_pu=sv,
        current_sigma_pu=si,
        windows=MappingProxyType(win_times),
        voltage=MappingProxyType(dev_v),
        current=MappingProxyType(dev_i),
        voltage_onset_s=ov_s,
        current_onset_s=oi_s,
        onset_s=min(onsets) if onsets else None,
        ref_collapse=_shift_collapse(c_ref, float(t[0])),
        test_collapse=_shift_collapse(c_test, float(t[0])),
        compared_until_s=float(t[stop - 1]),
        compared_stop=int(stop),
    )
