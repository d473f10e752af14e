"""Pre-processing of a reference/test record pair before comparison.

The steps, in the order :func:`align_pair` runs them:

1. **Common time grid** (:func:`common_grid`): the record with the finer sample interval is resampled to the
   coarser interval, so both carry the same bandwidth. The default anti-alias method is polyphase filtering
   (:func:`scipy.signal.resample_poly`, Kaiser-windowed FIR, linear extension at the edges) with a rational
   approximation ``up/down`` of the interval ratio; ``method="fourier"`` uses FFT resampling
   (:func:`scipy.signal.resample`) after removing the straight line through the end samples, so the
   periodic extension has no jump.
2. **Baseline** (:func:`remove_baseline`): the mean of the pre-trigger is subtracted from every channel;
   the pre-trigger ends at the foot of the voltage front, found by :func:`detect_pretrigger_samples`.
3. **Polarity and level** (:func:`normalise`): the voltage is divided by the record's own test-voltage value
   (per unit) and the current by the same value (amperes per volt); the sign is chosen so that the voltage
   is positive, so a negative shot compares like a positive one.
4. **Alignment** (:func:`front_delay_s`, :func:`shift_fourier`): the sub-sample delay of the test voltage
   front relative to the reference front is estimated by a least-squares fit, and the test record is moved
   by it with a Fourier phase shift (integer part by indexing).
5. **Overlap**: both records are cut to the samples they share after alignment, less 16 samples at
   each end of the test record when it was moved by a fraction of a sample.

Every step that changes the data without the user asking (resampling, a short pre-trigger, clipping)
adds a message to :attr:`AlignedPair.warnings`.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from typing import NamedTuple

import numpy as np
import scipy.fft as sfft
from scipy import signal
from scipy.interpolate import CubicSpline

from ._fourier import phasor
from ._stats import code_grid, median1d
from ._validation import RecordError, ShotcheckError, check_option, check_range
from .record import Record

__all__ = [
    "MAD_NORMAL_CONSTANT",
    "MIN_NOISE_SAMPLES",
    "RESAMPLE_METHODS",
    "AlignedPair",
    "GridPair",
    "NoiseEstimate",
    "PerUnit",
    "RecordNoise",
    "align_pair",
    "clipped_near",
    "clipped_samples",
    "clipping_warning",
    "common_grid",
    "detect_pretrigger_samples",
    "front_delay_s",
    "noise_estimate",
    "normalise",
    "remove_baseline",
    "robust_peak_V",
    "shift_fourier",
    "snap_to_codes",
]

#: Median absolute deviation of a standard normal variable: sigma = MAD / 0.6745 (Donoho & Johnstone,
#: "Ideal spatial adaptation by wavelet shrinkage", Biometrika 81(3), 1994).
MAD_NORMAL_CONSTANT = 0.6745
#: Fewer pre-trigger samples than this do not give a usable noise estimate.
MIN_NOISE_SAMPLES = 32
#: Resampling methods of :func:`common_grid` and what they do.
RESAMPLE_METHODS = {
    "polyphase": "scipy.signal.resample_poly with a rational approximation of the interval ratio",
    "fourier": "scipy.signal.resample (FFT) after removing the line through the end samples",
}
#: Largest denominator of the rational approximation of the interval ratio.
MAX_RESAMPLE_DENOMINATOR = 1000
#: Samples dropped at each end of a record moved by a fractional Fourier shift.
SHIFT_EDGE_SAMPLES = 16
#: Samples at the extreme value in a row from which a channel counts as clipped.
CLIP_RUN_SAMPLES = 3
#: A clipped channel holds its extreme value this many times longer than the two codes below it.
CLIP_NEAR_RATIO = 3
#: Neighbourhood of a clipped sample that is not compared either: the larger of ``CLIP_GUARD_S`` [s]
#: and ``CLIP_GUARD_SAMPLES`` of the record's own samples. The sub-sample shift and resampling spread a
#: plateau's edge by about a sample; a wider guard (50 ns) hid the steep rise of fault currents that go
#: on to clip (grouped cross-validation: median fault-instant error 0.075 us against 0.067 us).
CLIP_GUARD_S = 0.0
CLIP_GUARD_SAMPLES = 1


# --------------------------------------------------------------------------------------------------
# small helpers on arrays
# --------------------------------------------------------------------------------------------------
class NoiseEstimate(NamedTuple):
    """Noise standard deviation of one signal, two ways (same unit as the signal).

    Attributes
    ----------
    rms : float
        Standard deviation about the mean.
    mad : float
        Median absolute deviation about the median divided by 0.6745 (robust to spikes and steps).
    n_samples : int
        Samples used.
    """

    rms: float
    mad: float
    n_samples: int


def noise_estimate(samples: np.ndarray) -> NoiseEstimate:
    """Estimate the noise of a signal segment that holds noise only (a pre-trigger).

    Parameters
    ----------
    samples : array_like
        Noise samples [any unit]; at least 2.

    Returns
    -------
    NoiseEstimate
        RMS and MAD-based standard deviations in the unit of ``samples``.

    Notes
    -----
    ``mad = median(|x - median(x)|) / 0.6745``; for Gaussian noise both estimates agree and the MAD one
    ignores a few outliers (Donoho & Johnstone 1994).
    """
    x = np.asarray(samples, dtype=np.float64)
    if x.size < 2:
        raise ShotcheckError(f"a noise estimate needs at least 2 samples, got {x.size}")
    rms = float(np.std(x))
    mad = median1d(np.abs(x - median1d(x))) / MAD_NORMAL_CONSTANT
    return NoiseEstimate(rms, mad, int(x.size))


def _second_difference_noise(samples: np.ndarray) -> NoiseEstimate:
    """Noise of an oversampled smooth signal from its second differences.

    For white noise of standard deviation s, ``x[k+1] - 2 x[k] + x[k-1]`` has standard deviation
    ``sqrt(6) s``; a smooth signal contributes little, and the few large values on a steep front are
    ignored by the MAD.
    """
    d2 = np.diff(np.asarray(samples, dtype=np.float64), 2)
    if d2.size < 2:
        return NoiseEstimate(float("nan"), float("nan"), 0)
    est = noise_estimate(d2)
    return NoiseEstimate(est.rms / math.sqrt(6.0), est.mad / math.sqrt(6.0), est.n_samples)


def _median3(x: np.ndarray) -> np.ndarray:
    """Return the running median of three samples (same length; ends kept)."""
    if x.size < 3:
        return x.copy()
    a, b, c = x[:-2], x[1:-1], x[2:]
    mid = np.maximum(np.minimum(a, b), np.minimum(np.maximum(a, b), c))
    return np.concatenate((x[:1], mid, x[-1:]))


def robust_peak_V(voltage_V: np.ndarray) -> float:
    """Peak of a voltage record, insensitive to single-sample spikes.

    A fallback for the test-voltage value when the IEC 60060-1 evaluation is not at hand; it is the
    extreme of the running median of three samples.

    Parameters
    ----------
    voltage_V : array_like
        Voltage samples [V] (any unit works; the result is in the same unit), baseline removed.

    Returns
    -------
    float
        Signed peak value [V]: negative for a negative impulse.

    Raises
    ------
    ShotcheckError
        If the record is flat (peak zero).
    """
    x = np.asarray(voltage_V, dtype=np.float64)
    m = _median3(x)
    k = int(np.argmax(np.abs(m)))
    if m[k] == 0.0:
        raise ShotcheckError("the voltage record is flat (peak 0 V); no impulse to evaluate")
    return float(m[k])


def _crossing_index(y: np.ndarray, level: float) -> float:
    """Fractional index of the first upward crossing of ``level`` (linear interpolation)."""
    above = y >= level
    i = int(np.argmax(above))
    if not above[i]:
        return float("nan")
    if i == 0:
        return 0.0
    y0, y1 = y[i - 1], y[i]
    return (i - 1) + (level - y0) / (y1 - y0)


def _unit_front(voltage: np.ndarray) -> np.ndarray:
    """Voltage with the initial baseline removed, made positive and scaled to a peak of one."""
    x = np.asarray(voltage, dtype=np.float64)
    n0 = max(4, min(x.size // 50, 64))
    y = x - median1d(x[:n0])
    return y / robust_peak_V(y)


def detect_pretrigger_samples(voltage: np.ndarray) -> int:
    """Count the samples before the foot of the voltage front.

    Parameters
    ----------
    voltage : array_like
        Voltage samples [V] of either polarity, any offset.

    Returns
    -------
    int
        Index of the first sample that may belong to the front; 0 when the record starts on the front.

    Notes
    -----
    With the peak normalised to one, ``t10`` and ``t30`` are the last crossings of 10 % and 30 % before the
    first 50 % crossing. The foot is put at ``t10 - 2 (t30 - t10)`` minus two samples: for a
    double-exponential front (which rises from its first instant) that is before the true start, and for
    an S-shaped front it is earlier still, so the pre-trigger holds noise only.
    """
    y = _unit_front(voltage)
    i50 = int(np.argmax(y >= 0.5))
    head = y[: i50 + 1]
    lo10 = np.flatnonzero(head < 0.1)
    lo30 = np.flatnonzero(head < 0.3)
    if lo10.size == 0 or lo30.size == 0:
        return 0
    i10 = _crossing_index(y[lo10[-1]:], 0.1) + lo10[-1]
    i30 = _crossing_index(y[lo30[-1]:], 0.3) + lo30[-1]
    foot = i10 - 2.0 * (i30 - i10) - 2.0
    return int(max(0, math.floor(foot)))


def _clip_runs(samples: np.ndarray) -> list[tuple[str, float, np.ndarray, int]]:
    """The extremes a channel is clipped at: (name, value, mask of the samples at it, longest run).

    See :func:`clipping_warning` for the criteria.
    """
    x = np.asarray(samples, dtype=np.float64)
    out: list[tuple[str, float, np.ndarray, int]] = []
    lsb = None
    for value, name, sign in ((x.max(), "maximum", 1.0), (x.min(), "minimum", -1.0)):
        if value == 0.0:
            continue
        on = x == value
        if int(np.count_nonzero(on)) < CLIP_RUN_SAMPLES:  # too few samples at the extreme for a run
            continue
        at = np.concatenate(([0], on.astype(np.int8), [0]))
        edges = np.flatnonzero(np.diff(at))
        run = int((edges[1::2] - edges[::2]).max())
        if run < CLIP_RUN_SAMPLES:
            continue
        # a smooth crest spends about as long within the two codes below its top as at the top; a
        # clipped signal sits at the limit far longer than it takes to pass the codes below it
        if lsb is None:
            d = np.abs(np.diff(x))
            nz = d[d > 0.0]
            lsb = float(nz.min()) if nz.size else 0.0  # the quantisation step of a digitised record
        gap = sign * (value - x)
        n_near = int(np.count_nonzero((gap > 0.0) & (gap <= 2.0 * lsb)))
        if int(on.sum()) > CLIP_NEAR_RATIO * n_near:
            out.append((name, float(value), on, run))
    return out


def clipping_warning(samples: np.ndarray, label: str, *, unit: str = "", quantity: str = "") -> str | None:
    """Return a warning if a channel sits at its extreme value for several samples in a row.

    Parameters
    ----------
    samples : array_like
        Channel samples [V or A].
    label : str
        Name used in the message (e.g. ``"test current 'I1'"``).
    unit : str
        Unit printed with the value.
    quantity : {"", "current", "voltage"}
        What the channel measures; the message says what that means for the comparison.

    Returns
    -------
    str or None
        The message, or None when no clipping is seen.

    Notes
    -----
    A digitiser driven beyond its range returns its full-scale code; a run of at least
    ``CLIP_RUN_SAMPLES`` samples equal to the maximum (or minimum) of the channel is taken as clipping
    (common practice) if the channel also spends more than ``CLIP_NEAR_RATIO`` times as many samples at
    that value as within the two quantisation steps below it. The second condition keeps the flat
    crest of a coarsely quantised record (8 bits), which spends comparable times at its top code and
    the codes just below, from counting. Values scattered about their code grid repeat no value: put
    them back on it first (:func:`snap_to_codes`, as :func:`detector.features.extract` does).
    """
    return _clip_message(_clip_runs(samples), label, unit, quantity)


def _clip_message(runs: list[tuple[str, float, np.ndarray, int]], label: str, unit: str,
                  quantity: str) -> str | None:
    """The warning of :func:`clipping_warning` for the clipped extremes ``runs`` of :func:`_clip_runs`."""
    if not runs:
        return None
    name, value, _, run = runs[0]
    head = f"{label} looks clipped: {run} samples in a row at its {name} {value:.6g} {unit}".rstrip()
    head += "; the recorder range was probably exceeded"
    if quantity == "voltage":
        # the voltage is the yardstick of the whole comparison: leaving its clipped samples out does not
        # repair the level normalisation or the current predicted from it
        return head + (": the samples at the limit are left out of the scores, but the test voltage value, "
                       "the alignment and the predicted current rest on the voltage, so the verdict is not "
                       "reliable; repeat the shot on a larger range")
    return head + (": the samples at the limit are left out of the scores (the transfer function takes the "
                   "predicted current there where there is one); the differences next to them are less "
                   "certain")


def clipped_samples(samples: np.ndarray) -> np.ndarray:
    """Mask of the samples of a channel that sit at a limit it is clipped at.

    Parameters
    ----------
    samples : array_like
        Channel samples [V or A].

    Returns
    -------
    numpy.ndarray of bool
        True where the sample equals an extreme value that :func:`clipping_warning` takes as clipping
        (all False when the channel is not clipped).
    """
    x = np.asarray(samples, dtype=np.float64)
    return _runs_mask(_clip_runs(x), x.size)


def _runs_mask(runs: list[tuple[str, float, np.ndarray, int]], n: int) -> np.ndarray:
    """Samples at any clipped extreme of ``runs`` (from :func:`_clip_runs`) of an ``n``-sample channel."""
    mask = np.zeros(n, dtype=bool)
    for _, _, on, _ in runs:
        mask |= on
    return mask


def clipped_near(mask: np.ndarray, start_time_s: float, sample_interval_s: float, times_s: np.ndarray,
                 guard_s: float) -> np.ndarray:
    """Which of the times ``times_s`` lie within ``guard_s`` of a sample flagged in ``mask``.

    Parameters
    ----------
    mask : numpy.ndarray of bool
        Flags of a record's own samples (e.g. from :func:`clipped_samples`).
    start_time_s, sample_interval_s : float
        That record's time axis: sample ``j`` is at ``start_time_s + j * sample_interval_s`` [s].
    times_s : numpy.ndarray
        Times on the same axis (e.g. resampled or shifted sample times) [s].
    guard_s : float
        Half-width of the neighbourhood [s].

    Returns
    -------
    numpy.ndarray of bool
        One flag per entry of ``times_s``.
    """
    m = np.asarray(mask, dtype=bool)
    t = np.asarray(times_s, dtype=np.float64)
    if not m.any():
        return np.zeros(t.size, dtype=bool)
    c = np.concatenate(([0], np.cumsum(m, dtype=np.int64)))
    lo = np.clip(np.ceil((t - guard_s - start_time_s) / sample_interval_s - 1e-9), 0, m.size).astype(np.int64)
    hi = np.clip(np.floor((t + guard_s - start_time_s) / sample_interval_s + 1e-9) + 1, 0, m.size).astype(np.int64)
    return c[np.maximum(hi, lo)] - c[lo] > 0


# --------------------------------------------------------------------------------------------------
# code grid
# --------------------------------------------------------------------------------------------------
def snap_to_codes(record: Record) -> tuple[Record, tuple[float, ...]]:
    """Put samples that sit near their recorder's code grid, but not on it, back on it.

    A record converted to other units, stored as 32-bit floats or printed with a few digits and read
    again holds each code as values a small fraction of a code apart. Nothing measured is in that
    scatter, but the comparison reads the code grid (the median absolute deviation of a pre-trigger on
    one code is zero, a clipped channel repeats its limit, the quantisation floor is a step): values
    0.001 code off their grid turned benign pairs into confident fault verdicts. Each such channel is
    rounded to its grid (step and offset from the channel's own values, :func:`detector._stats.code_grid`),
    which moves no sample by more than a tenth of a code; channels exactly on a grid, and float
    channels on none, are returned as they are.

    Parameters
    ----------
    record : Record
        A recorded impulse (any channels).

    Returns
    -------
    (record, steps)
        The record (the same object when nothing moved; otherwise with a ``snap_to_codes`` history
        entry naming the channels and steps), and each channel's code step [its unit], 0 for a channel
        on no grid.
    """
    steps: list[float] = []
    chans = list(record.channels)
    moved: list[str] = []
    for k, c in enumerate(record.channels):
        x = c.samples
        q, exact = code_grid(x)
        steps.append(q)
        if q > 0.0 and not exact:
            # the grid's offset: the circular mean of the samples' positions within a code
            off = q * float(np.angle(np.mean(np.exp(2j * np.pi * x / q)))) / (2.0 * np.pi)
            chans[k] = c.with_samples(off + q * np.round((x - off) / q))
            moved.append(f"{c.name} {q:.6g}")
    if not moved:
        return record, tuple(steps)
    return record.replace(channels=tuple(chans), step=f"snap_to_codes({', '.join(moved)})"), tuple(steps)


# --------------------------------------------------------------------------------------------------
# time grid
# --------------------------------------------------------------------------------------------------
class GridPair(NamedTuple):
    """Two records on one sample interval, with what was done to get there."""

    reference: Record
    test: Record
    warnings: tuple[str, ...]


def _resample_channels(rec: Record, up: int, down: int, method: str) -> list[np.ndarray]:
    out = []
    n_new = int(math.ceil(rec.n_samples * up / down))
    for c in rec.channels:
        x = c.samples
        if method == "polyphase":
            y = signal.resample_poly(x, up, down, padtype="line")
        else:
            k = np.arange(x.size)
            line = x[0] + (x[-1] - x[0]) * k / (x.size - 1)
            # resample() spaces its output len(in)/len(out) input samples apart: padded to a multiple of
            # ``down`` (zeros continue the detrended record, which ends at 0), that is exactly down/up
            n_pad = -(-x.size // down) * down
            r = np.concatenate((x - line, np.zeros(n_pad - x.size)))
            y = signal.resample(r, n_pad // down * up)[:n_new]
            kn = np.arange(y.size) * (down / up)
            y = y + x[0] + (x[-1] - x[0]) * kn / (x.size - 1)
        out.append(np.ascontiguousarray(y[:n_new], dtype=np.float64))
    return out


def common_grid(reference: Record, test: Record, *, method: str = "polyphase") -> GridPair:
    """Bring two records to one sample interval.

    The record with the finer interval is resampled to the coarser one, so both have the same
    bandwidth; the coarser record is not touched. Lengths may still differ: :func:`align_pair` cuts both to
    their overlap after aligning the fronts.

    Parameters
    ----------
    reference, test : Record
        The two records.
    method : {'polyphase', 'fourier'}
        Anti-alias resampling method, see ``RESAMPLE_METHODS``.

    Returns
    -------
    GridPair
        ``(reference, test, warnings)``; the resampled record has a history entry
        ``"resample(...)"`` and the warnings say which record was resampled.

    Notes
    -----
    The interval ratio is approximated by a fraction ``up/down`` with ``down <= 1000``; the resampled
    record is given exactly the coarser interval, which stretches its time base by the approximation
    error (below 1e-6 for any ratio, zero for the usual 50/100/200/250 MS/s rates). A stretch of more than
    0.05 sample over the record is reported, of more than half a sample refused. Where the rates differ by
    more than 100 times, the finer record is first decimated by an integer factor (with the same method),
    which leaves a ratio of about 1:10 for the fraction.

    Raises
    ------
    ShotcheckError
        If the method is unknown or no fraction keeps the time base within half a sample.
    """
    check_option("method", method, RESAMPLE_METHODS)
    dt_r, dt_t = reference.sample_interval_s, test.sample_interval_s
    if abs(dt_r - dt_t) <= 1e-9 * max(dt_r, dt_t):
        if dt_r != dt_t:
            test = test.replace(sample_interval_s=dt_r, step="interval(set equal to reference)")
        return GridPair(reference, test, ())
    fine, coarse, which = (reference, test, "reference") if dt_r < dt_t else (test, reference, "test")
    dt_c = coarse.sample_interval_s
    dt_f = fine.sample_interval_s
    steps = ""
    q = int(round(dt_c / dt_f)) // 10
    if dt_c / dt_f > MAX_RESAMPLE_DENOMINATOR / 10 and q >= 2:
        # a ratio beyond 1:100 (20 GS/s against 50 MS/s, say): first by an integer factor, which leaves
        # about 1:10 for the fraction (a denominator <= 1000 could not approximate 1:4000 at all)
        chans = _resample_channels(fine, 1, q, method)
        fine = fine.replace(sample_interval_s=dt_f * q,
                            channels=tuple(c.with_samples(y) for c, y in zip(fine.channels, chans, strict=True)),
                            step=f"resample(up=1, down={q}, method={method!r})")
        steps = f"1/{q} then "
    ratio = Fraction(fine.sample_interval_s / dt_c).limit_denominator(MAX_RESAMPLE_DENOMINATOR)
    up, down = ratio.numerator, ratio.denominator
    chans = _resample_channels(fine, up, down, method)
    stretch = abs(fine.sample_interval_s * down / up - dt_c) / dt_c
    new = fine.replace(
        sample_interval_s=dt_c,
        channels=tuple(c.with_samples(y) for c, y in zip(fine.channels, chans, strict=True)),
        step=f"resample(up={up}, down={down}, method={method!r})",
    )
    warnings = [
        f"sample rates differ ({reference.sampling_rate_Hz / 1e6:.6g} MS/s reference, "
        f"{test.sampling_rate_Hz / 1e6:.6g} MS/s test): the {which} record was resampled to "
        f"{1e-6 / dt_c:.6g} MS/s ({method}, ratio {steps}{up}/{down})"
    ]
    if stretch * new.n_samples > 0.5:
        raise ShotcheckError(
            f"sample rates {reference.sampling_rate_Hz / 1e6:.6g} MS/s (reference) and "
            f"{test.sampling_rate_Hz / 1e6:.6g} MS/s (test): no resampling ratio with a denominator of at "
            f"most {MAX_RESAMPLE_DENOMINATOR} keeps the {which} time base within half a sample "
            f"(ratio {up}/{down} stretches it by {stretch * new.n_samples:.2g} samples); "
            "resample one record to the other's rate before comparing")
    if stretch * new.n_samples > 0.05:
        warnings.append(
            f"resampling ratio {up}/{down} approximates the interval ratio with a relative error of "
            f"{stretch:.2g}; the {which} time base is stretched by {stretch * new.n_samples:.2g} samples"
        )
    if which == "reference":
        return GridPair(new, test, tuple(warnings))
    return GridPair(reference, new, tuple(warnings))


# --------------------------------------------------------------------------------------------------
# baseline, level, delay
# --------------------------------------------------------------------------------------------------
def remove_baseline(record: Record, pretrigger_s: float | None = None) -> Record:
    """Subtract the pre-trigger mean from every channel.

    Parameters
    ----------
    record : Record
        Record with a voltage channel.
    pretrigger_s : float, optional
        Duration of the pre-trigger from the first sample [s]. By default it is found from the voltage
        front (:func:`detect_pretrigger_samples`).

    Returns
    -------
    Record
        New record, history entry ``"baseline(pretrigger_s=...)"``. If the pre-trigger is empty the
        samples are unchanged and the entry says so.

    Raises
    ------
    RecordError
        If ``pretrigger_s`` is negative or longer than the record.
    """
    dt = record.sample_interval_s
    if pretrigger_s is None:
        n_pre = detect_pretrigger_samples(record.voltage.samples)
    else:
        p = check_range("pretrigger_s", pretrigger_s, 0.0, None, unit="s")
        n_pre = int(round(p / dt))
        if n_pre > record.n_samples:
            raise RecordError(
                f"pretrigger_s = {p:g} s is longer than the record ({record.duration_s:g} s)",
                path=record.source,
                field="pretrigger_s",
            )
    if n_pre == 0:
        return record.replace(step="baseline(none: no pre-trigger)")
    chans = tuple(c.with_samples(c.samples - c.samples[:n_pre].mean()) for c in record.channels)
    return record.replace(channels=chans, step=f"baseline(pretrigger_s={n_pre * dt:.6g})")


class PerUnit(NamedTuple):
    """Level-normalised channels of one record."""

    voltage_pu: np.ndarray
    current_pu: np.ndarray | None


def normalise(record: Record, test_voltage_V: float) -> PerUnit:
    """Divide the voltage and the current of a record by its test-voltage value.

    Parameters
    ----------
    record : Record
        Baseline-corrected record.
    test_voltage_V : float
        The record's own test-voltage value [V] (IEC 60060-1, from the wave-shape evaluation), signed like
        the record; :func:`robust_peak_V` is a fallback.

    Returns
    -------
    PerUnit
        ``voltage_pu`` [1] and ``current_pu`` [A/V] (None if the record has no current channel).

    Raises
    ------
    ShotcheckError
        If ``test_voltage_V`` is zero or not finite.
    """
    u = float(test_voltage_V)
    if not np.isfinite(u) or u == 0.0:
        raise ShotcheckError(f"test_voltage_V must be a finite non-zero voltage, got {test_voltage_V!r}")
    cur = record.current.samples / u if record.has_current else None
    return PerUnit(record.voltage.samples / u, cur)


def front_delay_s(ref_v: np.ndarray, test_v: np.ndarray, dt: float) -> float:
    """Sub-sample delay of the test voltage front relative to the reference front.

    Parameters
    ----------
    ref_v, test_v : array_like
        Voltage samples of the two records on the same sample interval [any unit; polarity, offset and
        level are removed internally].
    dt : float
        Sample interval [s].

    Returns
    -------
    float
        Delay [s]: positive when the test front comes later (at a higher sample index) than the reference
        front.

    Notes
    -----
    Both fronts are scaled to a unit peak. A first estimate is the difference of the 50 % crossings
    (linear interpolation). It is refined by Gauss-Newton least squares over the reference front region
    (from the last sample below 2 % to the first above 95 %, two samples of margin), fitting
    ``g s(t + d) = r(t)`` with a cubic spline through the test samples: the gain ``g`` absorbs level
    errors and overshoot differences, ``d`` is the delay. This equals the peak of the cross-correlation of
    the front regions without the bias of a parabolic peak fit.
    """
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    r = _unit_front(ref_v)
    s = _unit_front(test_v)
    ir, it = _crossing_index(r, 0.5), _crossing_index(s, 0.5)
    if not (np.isfinite(ir) and np.isfinite(it)):
        raise ShotcheckError("no voltage front found (the voltage never reaches half its peak)")
    d = it - ir
    i50 = int(math.ceil(ir))
    low = np.flatnonzero(r[:i50] < 0.02)
    lo = (int(low[-1]) if low.size else 0) - 2
    hi = i50 + int(np.argmax(r[i50:] >= 0.95)) + 2
    lo, hi = max(lo, 0), min(hi, r.size - 1)
    if hi - lo < 6:
        lo, hi = max(0, i50 - 3), min(r.size - 1, i50 + 3)
    j = np.arange(lo, hi + 1, dtype=np.float64)
    # spline of the test samples around the shifted window, with margin for the iterations
    a = max(0, int(math.floor(lo + d)) - 8)
    b = min(s.size, int(math.ceil(hi + d)) + 9)
    if b - a < 4:
        raise ShotcheckError("the test voltage front lies outside the test record")
    spline = CubicSpline(np.arange(a, b, dtype=np.float64), s[a:b], extrapolate=True)
    rj = r[lo : hi + 1]
    g = 1.0
    for _ in range(8):
        x = np.clip(j + d, a, b - 1)
        sv, sd = spline(x), spline(x, 1)
        e = g * sv - rj
        # Jacobian columns: d/dg -> sv, d/dd -> g sd
        jtj = np.array([[sv @ sv, g * (sv @ sd)], [g * (sv @ sd), g * g * (sd @ sd)]])
        jte = np.array([sv @ e, g * (sd @ e)])
        try:
            dg, dd = np.linalg.solve(jtj, -jte)
        except np.linalg.LinAlgError:
            break
        g += dg
        d += float(np.clip(dd, -2.0, 2.0))
        if abs(dd) < 1e-6:
            break
    return float(d * dt)


def _periodic_extension(x: np.ndarray, n_pad: int, hold: int = 0) -> np.ndarray:
    """Append ``n_pad`` samples (last axis) so that the periodic extension of ``x`` is smooth.

    The padding holds ``x[..., -1]`` for ``hold`` samples, blends to ``x[..., 0]`` with a raised cosine,
    and holds ``x[..., 0]`` for the last ``hold`` samples (``hold`` is reduced if the padding is short).
    """
    if n_pad <= 0:
        return x
    hold = max(0, min(hold, (n_pad - 8) // 2))
    n_blend = n_pad - 2 * hold
    k = np.arange(1, n_blend + 1) / (n_blend + 1)
    first, last = x[..., :1], x[..., -1:]
    blend = last + (first - last) * (0.5 * (1.0 - np.cos(np.pi * k)))
    shape = x.shape[:-1] + (hold,)
    return np.concatenate((x, np.broadcast_to(last, shape), blend, np.broadcast_to(first, shape)), axis=-1)


def shift_fourier(x: np.ndarray, delay_s: float, dt: float) -> np.ndarray:
    """Delay a signal by any amount of time with a Fourier phase shift.

    Parameters
    ----------
    x : array_like
        Samples [any unit], 1-D, or 2-D to shift every row (last axis is time).
    delay_s : float
        Delay [s]; positive moves the content to later samples: ``y(t) = x(t - delay_s)``.
    dt : float
        Sample interval [s].

    Returns
    -------
    numpy.ndarray
        Shifted samples, same length. Samples moved in from outside the record come from a smooth
        extension (a raised-cosine blend between the end values), not from data.

    Notes
    -----
    ``Y(f) = X(f) exp(-j 2 pi f delay_s)``. The signal is padded with the blend (at least the shift plus
    16 samples, and one eighth of its length) before the FFT so that content does not wrap around from
    one end to the other; the padding holds each end value for the length of the shift before blending,
    so what is shifted in equals the nearest end value.
    """
    x = np.asarray(x, dtype=np.float64)
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    delay_s = check_range("delay_s", delay_s, unit="s")
    if delay_s == 0.0:
        return x.copy()
    shift = delay_s / dt
    n = x.shape[-1]
    hold = int(math.ceil(abs(shift))) + 8
    n_fft = sfft.next_fast_len(n + max(2 * hold + 16, n // 8), real=True)
    xp = _periodic_extension(x, n_fft - n, hold)
    spec = sfft.rfft(xp, axis=-1)
    spec *= phasor(-shift / n_fft, 1.0, 0, spec.shape[-1])  # exp(-2j pi k shift / n_fft), bin k
    return sfft.irfft(spec, n_fft, axis=-1)[..., :n]


# --------------------------------------------------------------------------------------------------
# the aligned pair
# --------------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True)
class RecordNoise:
    """Noise of one record after level normalisation.

    Attributes
    ----------
    voltage_rms_pu, voltage_mad_pu : float
        Voltage noise standard deviation [p.u.], RMS and MAD-based.
    current_rms_pu, current_mad_pu : float
        Current noise standard deviation [A/V], RMS and MAD-based.
    n_samples : int
        Samples used.
    source : str
        ``"pretrigger"``, or ``"second difference"`` when the pre-trigger was too short.
    """

    voltage_rms_pu: float
    voltage_mad_pu: float
    current_rms_pu: float
    current_mad_pu: float
    n_samples: int
    source: str


@dataclasses.dataclass(frozen=True)
class AlignedPair:
    """A reference and a test record on one time grid, aligned and in per unit.

    Attributes
    ----------
    times_s : numpy.ndarray
        Sample times on the reference record's own time axis [s].
    test_times_s : numpy.ndarray
        The same samples on the test record's own time axis [s] (for fault times reported on the test).
    sample_interval_s : float
        Common sample interval [s].
    ref_voltage_pu, test_voltage_pu : numpy.ndarray
        Voltages divided by each record's own test-voltage value [p.u.], positive polarity.
    ref_current_pu, test_current_pu : numpy.ndarray
        Currents divided by the same test-voltage values [A/V], same sign change as the voltage.
    ref_noise, test_noise : RecordNoise
        Noise estimates from each record's pre-trigger (before cutting to the overlap).
    delay_s : float
        Delay of the test front relative to the reference front on the common grid [s]; removed here.
    pretrigger_samples : int
        Samples before the front in the aligned arrays (the shorter of the two pre-triggers).
    ref_test_voltage_V, test_test_voltage_V : float
        Test-voltage values used for the normalisation, magnitudes [V].
    ref_polarity, test_polarity : int
        +1 or -1: the sign the records were multiplied by.
    warnings : tuple of str
        Everything done or seen that the user should know about.
    clipped : numpy.ndarray of bool
        Aligned samples within ``CLIP_GUARD_S`` (at least ``CLIP_GUARD_SAMPLES`` of the record's own
        samples) of a sample where the current channel of either record sits at a limit it is clipped
        at (:func:`clipped_samples`): not measured, so not compared. All False by default.
    voltage_clipped : numpy.ndarray of bool
        The same for the voltage channels. A clipped voltage also spoils what rests on it (the test
        voltage value, the alignment, the current predicted from it); the clipping warning says so.
    ref_clipped_current_s, test_clipped_current_s : float
        Time each record's current channel spends at a clipping limit within the aligned span [s].
    """

    times_s: np.ndarray
    test_times_s: np.ndarray
    sample_interval_s: float
    ref_voltage_pu: np.ndarray
    test_voltage_pu: np.ndarray
    ref_current_pu: np.ndarray
    test_current_pu: np.ndarray
    ref_noise: RecordNoise
    test_noise: RecordNoise
    delay_s: float
    pretrigger_samples: int
    ref_test_voltage_V: float
    test_test_voltage_V: float
    ref_polarity: int
    test_polarity: int
    warnings: tuple[str, ...]
    clipped: np.ndarray | None = None
    ref_clipped_current_s: float = 0.0
    test_clipped_current_s: float = 0.0
    voltage_clipped: np.ndarray | None = None

    def __post_init__(self) -> None:
        """Store the arrays as read-only float64 (the clipping masks as read-only bool)."""
        for f in ("times_s", "test_times_s", "ref_voltage_pu", "test_voltage_pu", "ref_current_pu",
                  "test_current_pu"):
            a = np.asarray(getattr(self, f), dtype=np.float64)
            a.flags.writeable = False
            object.__setattr__(self, f, a)
        for f in ("clipped", "voltage_clipped"):
            v = getattr(self, f)
            c = np.zeros(self.times_s.size, dtype=bool) if v is None else np.array(v, dtype=bool)
            if c.shape != self.times_s.shape:
                raise ShotcheckError(f"AlignedPair: {f} has {c.size} flags for {self.times_s.size} samples")
            c.flags.writeable = False
            object.__setattr__(self, f, c)

    @property
    def unmeasured(self) -> np.ndarray:
        """Samples where a current or a voltage channel clipped (``clipped | voltage_clipped``)."""
        return self.clipped | self.voltage_clipped

    @property
    def n_samples(self) -> int:
        """Number of aligned samples."""
        return int(self.times_s.size)


def _prepare(rec: Record, label: str, test_voltage_V: float | None, warnings: list[str]):
    """Baseline, polarity, per unit and noise of one record already on the common grid."""
    v, i = rec.voltage.samples, rec.current.samples
    n_pre = detect_pretrigger_samples(v)
    if n_pre:  # as remove_baseline, on the two arrays only
        v, i = v - v[:n_pre].mean(), i - i[:n_pre].mean()
    peak = robust_peak_V(v)
    polarity = 1 if peak > 0 else -1
    if test_voltage_V is None:
        ut = abs(peak)
    else:
        name = "ref_test_voltage_V" if label == "reference" else "test_test_voltage_V"
        ut = check_range(name, abs(float(test_voltage_V)), 0.0, None, low_inclusive=False, unit="V")
    v_pu, i_pu = v / (polarity * ut), i / (polarity * ut)
    if n_pre >= MIN_NOISE_SAMPLES:
        nv, ni = noise_estimate(v_pu[:n_pre]), noise_estimate(i_pu[:n_pre])
        source = "pretrigger"
    else:
        warnings.append(
            f"{label} record: pre-trigger of {n_pre} samples is too short to estimate the noise (at least "
            f"{MIN_NOISE_SAMPLES} needed); noise taken from second differences of the whole record"
        )
        nv, ni = _second_difference_noise(v_pu), _second_difference_noise(i_pu)
        source = "second difference"
    noise = RecordNoise(nv.rms, nv.mad, ni.rms, ni.mad, nv.n_samples, source)
    return rec, v_pu, i_pu, n_pre, noise, ut, polarity


def align_pair(
    reference: Record,
    test: Record,
    *,
    ref_test_voltage_V: float | None = None,
    test_test_voltage_V: float | None = None,
    method: str = "polyphase",
) -> AlignedPair:
    """Put a reference and a test record on one grid, remove baselines, normalise and align them.

    Parameters
    ----------
    reference, test : Record
        Reduced-level (reference) and full-level (test) records, each with a voltage and a current
        channel, in any polarity, sample rate and trigger offset.
    ref_test_voltage_V, test_test_voltage_V : float, optional
        Test-voltage value of each record [V] (IEC 60060-1, from the wave-shape evaluation); the sign is
        ignored. If not given, :func:`robust_peak_V` of the baseline-corrected record is used.
    method : {'polyphase', 'fourier'}
        Resampling method when the sample rates differ (:func:`common_grid`).

    Returns
    -------
    AlignedPair

    Raises
    ------
    RecordError
        If a record has no current channel, or the records do not overlap after alignment.
    ShotcheckError
        If a test-voltage value is zero or not finite, or no front is found.

    Examples
    --------
    >>> import numpy as np
    >>> from detector.record import Channel, Record
    >>> t = np.arange(4000) * 1e-8 - 2e-6
    >>> v = np.where(t > 0, np.exp(-t / 68e-6) - np.exp(-t / 0.4e-6), 0.0)
    >>> def rec(scale, shift):
    ...     u = np.interp(t - shift, t, v) * scale
    ...     return Record(0.0, 1e-8, (Channel("U", "voltage", u), Channel("I", "current", u / 1e4)))
    >>> pair = align_pair(rec(5e5, 0.0), rec(-1e6, 0.3e-6))
    >>> round(pair.delay_s * 1e6, 3), round(float(pair.test_voltage_pu.max()), 3)
    (0.3, 1.0)
    """
    warnings: list[str] = []
    for rec in (reference, test):
        rec.current  # raises RecordError naming the file and all its channels if there is none  # noqa: B018
    ref, tst = reference.select(), test.select()
    clip_masks = []
    for rec, label in ((ref, "reference"), (tst, "test")):
        masks = []
        for ch in (rec.voltage, rec.current):
            runs = _clip_runs(ch.samples)  # once per channel: the warning and the mask
            w = _clip_message(runs, f"{label} {ch.quantity} {ch.name!r}", ch.unit, ch.quantity)
            if w:
                warnings.append(w)
            masks.append(_runs_mask(runs, ch.samples.size))
        clip_masks.append(masks)
    raw = (ref, tst)  # the masks are on these records' own sample times
    grid = common_grid(ref, tst, method=method)
    warnings.extend(grid.warnings)
    dt = grid.reference.sample_interval_s
    prepared = []
    for rec, label, ut in ((grid.reference, "reference", ref_test_voltage_V),
                           (grid.test, "test", test_test_voltage_V)):
        try:
            prepared.append(_prepare(rec, label, ut, warnings))
        except RecordError:
            raise
        except ShotcheckError as exc:
            raise RecordError(str(exc), path=rec.source, field=f"{label} voltage") from None
    ref, rv, ri, npre_r, noise_r, ut_r, pol_r = prepared[0]
    tst, tv, ti, npre_t, noise_t, ut_t, pol_t = prepared[1]
    try:
        delay = front_delay_s(rv, tv, dt)
    except ShotcheckError as exc:
        raise RecordError(f"{exc} (aligning the test record to the reference)", path=test.source,
                          field="voltage") from None
    shift = delay / dt
    k = int(round(shift))
    frac = shift - k
    if frac != 0.0:
        # move the test content earlier by the fractional part: sample m then holds test(m + frac)
        tv, ti = shift_fourier(np.stack((tv, ti)), -frac * dt, dt)
    # samples within SHIFT_EDGE_SAMPLES of a test record end carry the error of the Fourier
    # interpolation against the padding (it decays only as 1/distance): they are dropped
    edge = SHIFT_EDGE_SAMPLES if frac != 0.0 else 0
    m0 = max(0, -k + edge)
    m1 = min(rv.size, tv.size - k - edge)
    if m1 - m0 < 16:
        raise RecordError(
            f"the records overlap for only {max(m1 - m0, 0)} samples after aligning the voltage fronts "
            f"(test front {delay * 1e6:.3g} us after the reference front); check that both records hold "
            "the same impulse",
            path=test.source,
            field="time",
        )
    if m1 - m0 < 0.5 * rv.size:
        warnings.append(
            f"after alignment the records overlap for {(m1 - m0) * dt * 1e6:.4g} us only "
            f"({100.0 * (m1 - m0) / rv.size:.0f} % of the reference)"
        )
    idx = np.arange(m0, m1)
    times = ref.start_time_s + idx * dt
    test_times = tst.start_time_s + (idx + k + frac) * dt
    pre = max(0, min(npre_r - m0, npre_t - k - m0))
    flags = np.zeros((2, times.size), dtype=bool)  # voltage, current
    clipped_s = [0.0, 0.0]  # each record's current at a limit within the aligned span [s]
    for j, (rec, masks, tt) in enumerate(((raw[0], clip_masks[0], times), (raw[1], clip_masks[1], test_times))):
        guard = max(CLIP_GUARD_S, CLIP_GUARD_SAMPLES * rec.sample_interval_s)
        for q, mk in enumerate(masks):
            flags[q] |= clipped_near(mk, rec.start_time_s, rec.sample_interval_s, tt, guard)
        own_t = rec.start_time_s + np.flatnonzero(masks[1]) * rec.sample_interval_s
        clipped_s[j] = float(np.count_nonzero((own_t >= tt[0]) & (own_t <= tt[-1]))) * rec.sample_interval_s
    return AlignedPair(
        times_s=times,
        test_times_s=test_times,
        sample_interval_s=dt,
        ref_voltage_pu=rv[m0:m1],
        test_voltage_pu=tv[m0 + k : m1 + k],
        ref_current_pu=ri[m0:m1],
        test_current_pu=ti[m0 + k : m1 + k],
        ref_noise=noise_r,
        test_noise=noise_t,
        delay_s=float(delay),
        pretrigger_samples=int(pre),
        ref_test_voltage_V=float(ut_r),
        test_test_voltage_V=float(ut_t),
        ref_polarity=pol_r,
        test_polarity=pol_t,
        warnings=tuple(warnings),
        clipped=flags[1],
        ref_clipped_current_s=clipped_s[0],
        test_clipped_current_s=clipped_s[1],
        voltage_clipped=flags[0],
    )
