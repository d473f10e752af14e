"""Signal helpers of the wave-shape evaluation: validation, baseline and polarity, smoothing, level
crossings with sub-sample interpolation, and the collapse of chopped waves.

Private to :mod:`detector.waveshape`; indices are fractional sample numbers of the record.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from typing import Any

import numpy as np
from scipy import ndimage, signal

from ._stats import code_grid, median1d
from ._validation import NoImpulseError, RecordError, check_finite_1d
from .record import MIN_SAMPLES


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


@functools.lru_cache(maxsize=64)
def _savgol_kernel(window: int, order: int) -> np.ndarray:
    """Savitzky-Golay convolution kernel (computed once per window and order: it needs a pseudo-inverse)."""
    k = signal.savgol_coeffs(window, order)
    k.setflags(write=False)
    return k


def _smooth(u: np.ndarray, window: int) -> np.ndarray:
    """Savitzky-Golay smoothing (quadratic over 5 samples, cubic above), edges held at the end values."""
    window = max(5, window | 1)
    if window > u.size:
        window = u.size if u.size % 2 else u.size - 1
    if window <= 63:  # what signal.savgol_filter(u, window, order, mode="nearest") does, kernel cached
        return ndimage.convolve1d(np.asarray(u, dtype=np.float64), _savgol_kernel(window, 2 if window <= 5 else 3),
                                  mode="nearest")
    half = window // 2  # long windows (switching impulses): overlap-add convolution is much quicker
    padded = np.pad(u, half, mode="edge")
    return signal.oaconvolve(padded, _savgol_kernel(window, 3), mode="valid")


def _quantisation_step(v: np.ndarray) -> float | None:
    """Step of the sample values if they are quantised, else None (continuous values); values near a
    grid but not on it count (:func:`detector._stats.code_grid`)."""
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
    # values scattered by a small fraction of a code about a grid (converted, stored as 32-bit floats)
    near, exact = code_grid(v)
    return near if near > 0.0 and not exact else None


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
        raise NoImpulseError(f"no impulse: the voltage is constant at {v[0]:.6g} V; expected a lightning "
                             "or switching impulse", path=source, field="voltage")
    dv = np.diff(v)
    sigma = float(1.4826 * median1d(np.abs(dv - median1d(dv))) / math.sqrt(2.0))
    # polarity from the larger excursion from the first samples; if those already sit far from zero the
    # record may start on the impulse itself, so take zero as the reference (caught below as no front)
    b0 = median1d(v[:8])
    if abs(b0) > 0.25 * span:
        b0 = 0.0
    dev = v - b0
    mag = np.abs(dev)
    # the impulse comes first: the first excursion beyond half the largest one sets the polarity, so that
    # the swing after a chop (which may exceed the crest) does not
    ifirst = int(np.argmax(mag >= 0.5 * float(mag.max())))
    sign = 1.0 if dev[ifirst] > 0 else -1.0
    u0 = sign * dev
    amp0 = float(u0.max())
    if amp0 <= 10.0 * sigma:
        raise NoImpulseError(f"no impulse found: the largest excursion ({amp0:.3g} V) is only "
                             f"{amp0 / sigma:.1f} times the noise level ({sigma:.3g} V); expected an impulse "
                             "well above the noise", path=source, field="voltage")
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
