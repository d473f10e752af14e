"""One named, versioned feature vector per compared pair.

:func:`extract` runs the whole measurement chain on a reference (reduced-level) and a test
(full-level) record: the IEC 60060-1 wave shape of each, alignment and level normalisation
(:mod:`detector.preprocess`), and the time-domain, transfer-function and wavelet metrics
(:mod:`detector.metrics`). It returns the metric objects (for the verdict and the report) and a flat
feature vector whose names and order are fixed by :data:`FEATURE_NAMES` and versioned by
:data:`SCHEMA_VERSION`. Change either and every model must be retrained: :func:`detector.model.load_model`
refuses a model trained on another schema.

Missing values (no onset found, a band without valid frequencies) are NaN; the gradient-boosting
models handle NaN natively.
"""

from __future__ import annotations

import dataclasses
import math
import time
from typing import Any

import numpy as np
import pywt

from ._stats import agreeing_onset, median1d
from ._validation import NoImpulseError, RecordError, ShotcheckError
from .metrics.compensated import (
    SCALES,
    CompensatedDifference,
    compensated_difference,
    core_term,
    driven_fraction,
    multiscale_z,
)
from .metrics.oscillation import OscillationScan, damped_oscillation_scan
from .metrics.timedomain import TimeDomainMetrics, time_domain_metrics, voltage_steps
from .metrics.transfer import (
    TransferComparison,
    TransferFunction,
    compare_transfer,
    transfer_function,
)
from .metrics.wavelet import (
    WaveletDifference,
    burst_counts,
    level_half_supports,
    wavelet_difference,
)
from .preprocess import AlignedPair, align_pair, snap_to_codes
from .record import Record
from .waveshape import MAX_SAMPLE_RATE_HZ, WaveShape, evaluate_waveshape

__all__ = ["SCHEMA_VERSION", "FEATURE_NAMES", "WAVELET_LEVELS", "LOG_BANDS_HZ", "PairAnalysis", "extract",
           "INSTANT_INPUT_NAMES", "instant_inputs"]

#: Version of the feature schema: bump it whenever a name, its order or its definition changes.
SCHEMA_VERSION = "31"

#: Averaging lengths [samples] scored again after the core term is removed (it is slow).
CORE_SCALES = (64, 256, 1024)

#: Parts of the scored span in which the wavelet difference measures each level's noise (followed along
#: the record: the test's own noise is stationary, the prediction's grows in the coarse levels).
WAVELET_NOISE_SEGMENTS = 8

#: Detail levels of the wavelet difference kept as features (D1 finest .. D8), plus the approximation.
WAVELET_LEVELS = 8

#: Finest wavelet levels whose separate bursts are counted (:func:`detector.metrics.burst_counts`), the
#: threshold of the strong bursts counted in D1/D2 together [noise units], and the gap that separates
#: two bursts [s].
BURST_LEVELS = 3
BURST_STRONG_SIGMA = 10.0
BURST_GAP_S = 200e-9

#: The wavelet difference's last samples before the end of the compared span are not scored [s]: the
#: stationary transform pads the span with a continuation of its end, and an interference tone of a
#: few MHz (one the compensated difference removes, but the wavelet difference, made of the test
#: current and the unweighted prediction, keeps) loses its phase there: benign pairs showed fine-level
#: peaks of 16-60 noise units on the span's last sample. Most of those tones were on a voltage channel,
#: which since schema 22 is taken out before the prediction (``remove_voltage_tones``); the guard stays
#: for the tones that are not.
WAVELET_END_GUARD_S = 0.5e-6

#: Wavelet levels of the plain current difference scored beyond the compensated span (the finest
#: three and the next three are reported), and how many samples of the span go into the transform
#: before the scored part, so that the transform's padded start lies away from it.
BEYOND_LEVELS = 6
BEYOND_LEAD_SAMPLES = 256
#: Fewest samples the part beyond the span must hold to be scored (its noise is a median over them).
BEYOND_MIN_SAMPLES = 256

#: Log-spaced bands for the signed mean dB difference of the transfer functions [Hz].
LOG_BANDS_HZ: tuple[tuple[float, float], ...] = tuple(
    (float(a), float(b)) for a, b in zip(np.geomspace(10e3, 10e6, 10)[:-1], np.geomspace(10e3, 10e6, 10)[1:],
                                         strict=True)
)

_WINDOWS = ("front", "crest", "tail")
_WV_LABELS = tuple(f"D{k}" for k in range(1, WAVELET_LEVELS + 1)) + ("A",)


#: Trial frequencies below this count as the winding's slow oscillations (osc_low_z), the others as
#: its faster ones (osc_high_z, which a chop also excites) [Hz].
OSC_SPLIT_HZ = 210e3

#: Time scales of the voltage step detector (:func:`detector.metrics.timedomain.voltage_steps`) [s].
VOLTAGE_STEP_SCALES_S = (40e-9, 160e-9, 640e-9)


def _ns(s: float) -> int:
    return int(round(s * 1e9))


def _names() -> tuple[str, ...]:
    n: list[str] = []
    for q in ("i", "v"):
        n += [f"td_{q}_{w}_sigma" for w in _WINDOWS]
        n += [f"td_{q}_max_sigma", f"td_{q}_max_percent"]
    n += ["td_onset_after_front_us", "td_v_minus_i_onset_us", "td_test_collapse", "td_ref_collapse",
          "td_collapse_shift_us", "td_compared_span_us", "test_declared_chopped"]
    n += ["tf_rho", "tf_R", "tf_rms_dB", "tf_max_dB", "tf_mean_dB"]
    for b in ("low", "medium", "high"):
        n += [f"tf_{b}_R", f"tf_{b}_rms_dB"]
    n += ["tf_max_peak_shift", "tf_n_unmatched"]
    n += [f"tf_band{k}_mean_dB" for k in range(len(LOG_BANDS_HZ))]
    n += ["cd_front_z", "cd_max_z", "cd_max_percent", "cd_log_energy", "cd_onset_after_front_us",
          "cd_compared_span_us"]
    n += [f"cd_scale{m}_z" for m in SCALES]
    n += [f"cd_scale{m}_robust_z" for m in SCALES]
    n += [f"wv_{lab}_log_energy" for lab in _WV_LABELS]
    n += [f"wv_{lab}_peak_sigma" for lab in _WV_LABELS]
    n += ["wv_fine_peak_sigma", "wv_coarse_peak_sigma", "wv_fault_after_front_us"]
    # onset times of every detector relative to the front [us]: the instant regressor learns which to
    # trust and how late the effect reaches the terminals (propagation through the winding)
    n += [f"wv_{lab}_first_after_front_us" for lab in _WV_LABELS]
    n += [f"cd_scale{m}_first_after_front_us" for m in SCALES]
    n += [f"cd_scale{m}_onset_after_front_us" for m in SCALES]
    # the compensated difference without a fitted change of the magnetising inductance (core effect)
    n += ["cd_core_percent"] + [f"cd_core_scale{m}_z" for m in CORE_SCALES]
    # the difference after its onset as a changed admittance's response to the voltage (a short) or not
    n += ["cd_driven_fraction", "cd_driven_inductive_percent"]
    n += ["td_i_onset_after_front_us", "td_v_onset_after_front_us", "td_collapse_after_front_us"]
    # abrupt steps of the voltage difference: a breakdown changes the generator's load at once
    n += [f"vs_{_ns(s)}ns_z" for s in VOLTAGE_STEP_SCALES_S]
    n += [f"vs_{_ns(s)}ns_step_after_front_us" for s in VOLTAGE_STEP_SCALES_S]
    n += ["ws_front_time_change", "ws_time_to_half_change", "ws_test_voltage_ratio_change",
          "noise_i_ref_ppm", "noise_i_test_ppm"]
    # time each current spends at a clipping limit (those samples are not compared): a healthy chopped
    # shot may clip in the oscillation after the chop, a large fault current anywhere
    n += ["clip_ref_current_us", "clip_test_current_us"]
    # separate bursts of the finest wavelet levels (a discharge train) and the time they spread over
    n += [f"wv_D{k}_bursts" for k in range(1, BURST_LEVELS + 1)]
    n += [f"wv_D{k}_burst_span_us" for k in range(1, BURST_LEVELS + 1)]
    n += ["wv_fine_bursts_strong"]
    # the winding's own slow oscillations set going at one instant (a charge moved inside it), in the
    # compensated difference without its core term: strongest below and above OSC_SPLIT_HZ, and the
    # frequency and onset of the strongest
    n += ["osc_low_z", "osc_high_z", "osc_frequency_kHz", "osc_onset_after_front_us"]
    # interference tones removed from the compensated difference: how many, the fewest periods one of
    # them completes in the pre-trigger (under about one, the pre-trigger means that set the baselines
    # are biased by it and the slow scores of the pair are less to be trusted) and the largest one's
    # amplitude in noise units
    n += ["tone_count", "tone_pretrigger_periods", "tone_amplitude_sigma"]
    # beyond the span the compensated prediction covers (about the last 30 % of the record), the plain
    # difference's finest levels D1-D3 and the next ones D4-D6, each in units of its own noise there
    n += ["wv_beyond_fine_peak_sigma", "wv_beyond_mid_peak_sigma"]
    return tuple(n)


#: Names of the features, in the column order of the feature matrix.
FEATURE_NAMES: tuple[str, ...] = _names()


@dataclasses.dataclass(frozen=True)
class PairAnalysis:
    """Everything measured on one pair.

    Attributes
    ----------
    features : numpy.ndarray
        Feature vector in :data:`FEATURE_NAMES` order.
    reference_shape, test_shape : WaveShape or None
        IEC 60060-1 evaluation of each record; None when the record could not be evaluated (a warning
        says why).
    pair : AlignedPair
        The aligned, per-unit records.
    time_domain : TimeDomainMetrics
    transfer_ref, transfer_test : TransferFunction
    transfer : TransferComparison
    wavelet : WaveletDifference or None
        None if the span before a collapse is too short for a decomposition.
    front_time_s : float
        Time of the reference voltage front (30 % point) on the pair's time axis [s].
    warnings : tuple of str
    compensated : CompensatedDifference
        Test current against the current predicted from the reference under the test voltage.
    compensated_onset_s : float or None
        First significant compensated difference after the front window [s, pair axis].
    beyond_onset_s : float or None
        First significant (6 noise units) wavelet coefficient of the plain current difference after the
        compensated span, levels D1-D6 [s, pair axis]; None where there is none.
    wavelet_scored : numpy.ndarray of bool or None
        Per column of ``wavelet.difference_map``: whether the sample is scored (after the front window,
        measured, away from an intended chop and from the span's last ``WAVELET_END_GUARD_S``); the
        rest of the map is drawn but counts for nothing.
    wavelet_beyond : WaveletDifference or None
        The plain current difference (test minus reference, per unit) after the compensated span,
        levels D1-D6 scored (:func:`_beyond_span_peaks`), its map's columns from the span's end to the
        record's end; None where that part is too short to be scored.
    wavelet_beyond_scored : numpy.ndarray of bool or None
        (levels, columns) of ``wavelet_beyond.difference_map``: the coefficients scored (rows D1-D6;
        each level no closer to the record's end than its half support).
    """

    features: np.ndarray
    reference_shape: WaveShape | None
    test_shape: WaveShape | None
    pair: AlignedPair
    time_domain: TimeDomainMetrics
    transfer_ref: TransferFunction
    transfer_test: TransferFunction
    transfer: TransferComparison
    wavelet: WaveletDifference | None
    front_time_s: float
    warnings: tuple[str, ...]
    compensated: CompensatedDifference | None = None
    compensated_onset_s: float | None = None
    beyond_onset_s: float | None = None
    wavelet_scored: np.ndarray | None = None
    wavelet_beyond: WaveletDifference | None = None
    wavelet_beyond_scored: np.ndarray | None = None

    def as_dict(self) -> dict[str, float]:
        """Feature name -> value (NaN kept)."""
        return dict(zip(FEATURE_NAMES, (float(x) for x in self.features), strict=True))

    @property
    def front_test_time_s(self) -> float:
        """Time of the reference front (30 % point) on the test record's own time axis [s]."""
        return float(self.to_test_time_s(self.front_time_s))

    def to_test_time_s(self, t_pair_s: float | None) -> float | None:
        """Convert a time on the pair's axis to the test record's own time axis [s]."""
        if t_pair_s is None or not math.isfinite(t_pair_s):
            return None
        p = self.pair
        return float(t_pair_s + (p.test_times_s[0] - p.times_s[0]))


def _front_time_s(pair: AlignedPair) -> float:
    """Time of the first 30 % crossing of the reference voltage [s, pair axis]."""
    v = pair.ref_voltage_pu
    i = int(np.argmax(v >= 0.3))
    if i == 0:
        return float(pair.times_s[0])
    v0, v1 = v[i - 1], v[i]
    frac = (0.3 - v0) / (v1 - v0) if v1 != v0 else 0.0
    return float(pair.times_s[i - 1] + frac * pair.sample_interval_s)


def _ratio_change(a: float | None, b: float | None) -> float:
    if a is None or b is None or not a:
        return math.nan
    return float(b / a - 1.0)


def _band_mean_dB(f: np.ndarray, ref_dB: np.ndarray, test_dB: np.ndarray) -> list[float]:
    d = test_dB - ref_dB
    out = []
    for lo, hi in LOG_BANDS_HZ:
        sel = (f >= lo) & (f < hi) & np.isfinite(d)
        out.append(float(np.mean(d[sel])) if sel.sum() >= 2 else math.nan)
    return out


#: The front window of the compensated difference: from 0.3 us before the 30 % point to 1 us after it.
#: The capacitive current spike of the front is the least predictable part (its spectrum reaches
#: beyond what the reduced-level voltage resolves), so it is scored separately.
FRONT_WINDOW_S = (-0.3e-6, 1.0e-6)
#: Around a voltage collapse of the test shot the steep chop excites frequencies the reference barely
#: holds; that window is scored with the front.
CHOP_WINDOW_S = (-0.3e-6, 1.0e-6)


def _channel_step(rec: Record, steps: tuple[float, ...], channel: Any) -> float:
    """The code step of ``channel`` (a channel of ``rec``) from ``steps`` (one per channel of ``rec``)."""
    return next(q for c, q in zip(rec.channels, steps, strict=True) if c is channel)


def _quantisation_floor(reference: Record, test: Record, pair: AlignedPair,
                        steps: tuple[tuple[float, ...], tuple[float, ...]]) -> float:
    """Non-averaging noise of the compensated difference from the code steps of both records [A/V].

    Each current's step, and each voltage's step times the current-to-voltage ratio, in per unit of its
    record's test voltage; uniform quantisation error has the standard deviation step/sqrt(12).
    ``steps`` holds each record's channel steps (:func:`detector.preprocess.snap_to_codes`).

    That is the bound for a record without noise. With noise at the quantiser's input (dither) the
    part of the error that does not average away shrinks fast: its mean for a given input keeps the
    sawtooth's k-th harmonic times exp(-2 pi^2 k^2 sigma^2 / step^2) (Widrow and Kollar, Quantization
    Noise, 2008; from memory), under 1 % of step/sqrt(12) with half a code of analogue noise. For most
    records the floor therefore stands for other slow residuals that do not average down; the largest,
    interference on the voltage channels, is removed before the prediction since schema 22
    (:func:`~detector.metrics.compensated.remove_voltage_tones`). The dithered bias in place of the
    floor lowered cross-validated detection before that and did not raise it after (DEVELOPERS.md).
    """
    ut_r, ut_t = pair.ref_test_voltage_V, pair.test_test_voltage_V
    ratio = float(np.max(np.abs(pair.ref_current_pu)))  # current per unit of voltage [A/V]
    terms = []
    for rec, ut, st in ((reference, ut_r, steps[0]), (test, ut_t, steps[1])):
        qi = _channel_step(rec, st, rec.current) / ut
        qv = _channel_step(rec, st, rec.voltage) / ut * ratio
        terms += [qi, qv]
    return float(np.sqrt(np.sum(np.square(terms)) / 12.0))


def _compensated_features(cd: CompensatedDifference, pair: AlignedPair, front_s: float,
                          floor: float = 0.0, chop_s: float | None = None) -> list[Any]:
    t = pair.times_s
    z = np.abs(cd.z)
    fin = np.isfinite(cd.sigma)
    in_front = (t >= front_s + FRONT_WINDOW_S[0]) & (t <= front_s + FRONT_WINDOW_S[1])
    in_chop = np.zeros(t.size, dtype=bool)
    if chop_s is not None:
        in_chop = (t >= chop_s + CHOP_WINDOW_S[0]) & (t <= chop_s + CHOP_WINDOW_S[1])
        in_front |= in_chop  # scored with the front: the least predictable parts
    # samples at (or next to) a recorder's clipping limit were not measured: never scored (a clipped
    # voltage also spoils the predicted current there)
    in_front &= ~pair.unmeasured
    in_chop = in_chop | pair.unmeasured
    after = fin & (t > front_s + FRONT_WINDOW_S[1]) & ~in_chop
    nan = math.nan
    front_z = float(z[in_front & fin].max()) if (in_front & fin).any() else nan
    max_z = float(z[after].max()) if after.any() else nan
    peak_i = float(np.max(np.abs(pair.ref_current_pu))) or 1.0
    d = cd.difference
    max_pct = float(100.0 * np.max(np.abs(d[after])) / peak_i) if after.any() else nan
    pe = float(np.sum(np.nan_to_num(cd.predicted[after]) ** 2))
    energy = math.log10(max(float(np.sum(d[after] ** 2)) / pe, 1e-12)) if after.any() and pe > 0 else nan
    # onset: the earliest 6-sigma crossing of the compensated difference averaged over any of SCALES
    start = int(np.searchsorted(t, front_s + FRONT_WINDOW_S[1], side="right"))
    # a change of the magnetising inductance between levels, fitted and removed: what is left at the
    # long averaging lengths is not a core effect (scored in the same pass)
    i_front = int(np.searchsorted(t, front_s))
    a, cd_core = core_term(cd, pair.test_voltage_pu, pair.sample_interval_s, after, start=i_front)
    ms_z, ms_i, ms_r, ms_b, core_z = multiscale_z(cd, start=start, pretrigger_samples=pair.pretrigger_samples,
                                                  return_robust=True, floor_sigma=floor, exclude=in_chop,
                                                  return_onset=True, extra=cd_core.difference,
                                                  extra_scales=CORE_SCALES)
    hits = ms_i[ms_i >= 0]
    onset_s = float(t[hits.min()]) if hits.size else None
    onset_us = nan if onset_s is None else 1e6 * (onset_s - front_s)
    span_us = 1e6 * (float(t[np.flatnonzero(fin)[-1]]) - front_s) if fin.any() else nan
    core_end = 0.0
    if after.any() and a != 0.0:
        last = int(np.flatnonzero(after)[-1])
        q_end = float(np.sum(pair.test_voltage_pu[i_front:last + 1])) * pair.sample_interval_s
        core_end = 100.0 * a * q_end / peak_i  # the fitted core term at the end of the span [% of peak]
    starts = ms_b[ms_b >= 0]
    driven = [nan, nan]
    if starts.size:
        driven = list(driven_fraction(cd, pair.test_voltage_pu, pair.sample_interval_s, after, int(starts.min())))
    osc = damped_oscillation_scan(cd_core.difference, cd.sigma, after, pair.sample_interval_s, t0_s=float(t[0]))
    return [front_z, max_z, max_pct, energy, onset_us, span_us, onset_s, ms_z, ms_i, ms_r, ms_b,
            [core_end, *core_z.tolist(), *driven], _oscillation_features(osc, front_s)]


def _oscillation_features(osc: OscillationScan, front_s: float) -> list[float]:
    """osc_low_z, osc_high_z, osc_frequency_kHz, osc_onset_after_front_us of a scan."""
    lo, hi, best = osc.strongest(high_Hz=OSC_SPLIT_HZ), osc.strongest(low_Hz=OSC_SPLIT_HZ), osc.strongest()
    nan = math.nan
    if best is None or not math.isfinite(osc.onset_s[best]):
        return [nan] * 4
    return [float(osc.z[lo]) if lo is not None else nan, float(osc.z[hi]) if hi is not None else nan,
            float(osc.frequencies_Hz[best]) / 1e3, 1e6 * (float(osc.onset_s[best]) - front_s)]


def _clipped_filled(pair: AlignedPair, cd: CompensatedDifference) -> np.ndarray:
    """The test current [A/V] with its clipped samples replaced by the healthy winding's prediction
    (beyond the span the prediction covers, by the reference current)."""
    fill = np.where(np.isfinite(cd.predicted), cd.predicted, pair.ref_current_pu)
    return np.where(pair.clipped, fill, pair.test_current_pu)


def _slow_tone_warning(cd: CompensatedDifference, pretrigger_s: float) -> str | None:
    """A warning when an interference tone completes under one period in the pre-trigger, else None."""
    slow = [(f, f * pretrigger_s) for f, _ in cd.tones if f * pretrigger_s < 1.0]
    if not slow:
        return None
    f, periods = min(slow, key=lambda fp: fp[1])
    return (f"interference at {f / 1e3:.0f} kHz completes only {periods:.2f} of a period in the "
            f"{1e6 * pretrigger_s:.1f} us pre-trigger: the baselines taken there are biased by it and slow "
            "differences are less reliable (record a pre-trigger of several periods of the interference)")


def _tone_features(cd: CompensatedDifference, pretrigger_s: float) -> list[float]:
    """tone_count, tone_pretrigger_periods, tone_amplitude_sigma of a compensated difference."""
    if not cd.tones:
        return [0.0, math.nan, 0.0]
    noise = float(np.nanmin(cd.sigma))  # the difference's noise where it is smallest (the pre-trigger's)
    return [float(len(cd.tones)), min(f * pretrigger_s for f, _ in cd.tones),
            max(a for _, a in cd.tones) / noise if noise > 0 else math.inf]


def _wavelet_features(wd: WaveletDifference | None, front_s: float) -> list[float]:
    nan = math.nan
    if wd is None:
        return [nan] * (3 * len(_WV_LABELS) + 3)
    L = wd.level
    energy = np.full(len(_WV_LABELS), nan)
    peak = np.full(len(_WV_LABELS), nan)
    k = min(L, WAVELET_LEVELS)
    with np.errstate(divide="ignore"):
        energy[:k] = np.log10(np.maximum(wd.energy_ratio[:k], 1e-12))
        energy[-1] = math.log10(max(float(wd.energy_ratio[-1]), 1e-12))
    peak[:k] = wd.peak_sigma[:k]
    peak[-1] = wd.peak_sigma[-1]
    fine = float(np.nanmax(peak[:2]))
    coarse = float(np.nanmax(peak[3:k])) if k > 3 else nan
    ft = nan if wd.fault_time_s is None else 1e6 * (wd.fault_time_s - front_s)
    first = np.full(len(_WV_LABELS), nan)
    first[:k] = 1e6 * (wd.first_time_s[:k] - front_s)
    first[-1] = 1e6 * (wd.first_time_s[-1] - front_s)
    return [*energy.tolist(), *peak.tolist(), fine, coarse, ft, *first.tolist()]


def _beyond_span_peaks(pair: AlignedPair, test_current: np.ndarray, stop: int, chop_s: float | None
                       ) -> tuple[list[float], float | None, WaveletDifference | None, np.ndarray | None]:
    """Peaks of the plain current difference's wavelet levels after the compensated span [noise units].

    The compensated prediction stops where its unwindowing gain reaches its limit (about 70 % into the
    record) and the scores above stop with it. A discharge or a breakdown later in the tail still shows
    in the test current minus the reference current (both per unit): the tail is slow, so its benign
    differences (core effects, generator drift) lie in the coarse levels while the fine levels hold the
    two recorders' noise. Each level is measured in units of its own noise over the scored part (MAD,
    robust to a few events); the last ``WAVELET_END_GUARD_S``, the samples at a clipping limit and an
    intended chop's window are not scored, and each level's peak and onset are taken no closer to the
    record's end than its half support (the transform pads the end with a continuation whose kink the
    coarse levels see: benign peaks of 8-11 noise units at D6 within 0.7 us of the end at 50 MS/s).

    Returns
    -------
    peaks : list of float
        Largest of D1-D3 and of D4-D6 [1]; NaN where fewer than ``BEYOND_MIN_SAMPLES`` are scored.
    onset_s : float or None
        Earliest of the levels' first significant differences (6 noise units; each level's time is its
        largest coefficient within a support after the crossing, as :func:`wavelet_difference` gives it)
        [s, pair axis]; None where there is none.
    beyond : WaveletDifference or None
        The transform with its map's columns from ``stop`` on (for the report's figure); None where the
        part is not scored.
    beyond_scored : numpy.ndarray of bool or None
        (``BEYOND_LEVELS``, columns of ``beyond``): the coefficients the peaks are taken over.
    """
    nan = math.nan
    t = pair.times_s
    n = t.size
    lo = max(0, stop - BEYOND_LEAD_SAMPLES)
    k = np.arange(n - lo)  # index into the part transformed
    scored = (k >= stop - lo) & (t[lo:] < t[-1] - WAVELET_END_GUARD_S) & ~pair.unmeasured[lo:]
    if chop_s is not None:
        scored &= ~((t[lo:] >= chop_s + CHOP_WINDOW_S[0]) & (t[lo:] <= chop_s + CHOP_WINDOW_S[1]))
    if scored.sum() < BEYOND_MIN_SAMPLES or pywt.dwt_max_level(n - lo, 8) < BEYOND_LEVELS:
        return [nan, nan], None, None, None
    wd = wavelet_difference(pair.ref_current_pu[lo:], test_current[lo:], pair.sample_interval_s,
                            level=BEYOND_LEVELS, scored=scored, t0_s=float(t[lo]))
    half_support = level_half_supports(wd.wavelet, BEYOND_LEVELS)[:BEYOND_LEVELS].astype(np.int64)
    counted = scored[None, :] & (k[None, :] < (n - lo) - half_support[:, None])
    rows = np.where(counted, wd.difference_map[:BEYOND_LEVELS], 0.0)
    peak = rows.max(axis=1)
    # each row's first significant coefficient (its time refined to the largest one within a support
    # after the crossing), where the row is scored
    first = wd.first_time_s[:BEYOND_LEVELS]
    limit = float(t[lo]) + ((n - lo) - half_support) * pair.sample_interval_s
    ok = np.isfinite(first) & (first < limit)
    onset = float(np.min(first[ok])) if ok.any() else None
    k0 = stop - lo  # the span's end, in columns of the part transformed
    shown = dataclasses.replace(wd, difference_map=wd.difference_map[:, k0:], times_s=wd.times_s[k0:])
    return [float(np.max(peak[:3])), float(np.max(peak[3:]))], onset, shown, counted[:, k0:]


class _Clock:
    """Adds the wall time since the previous call to ``timings[stage]`` (no-op without a dict)."""

    def __init__(self, timings: dict[str, float] | None):
        self.timings = timings
        self.t = time.perf_counter()

    def __call__(self, stage: str) -> None:
        if self.timings is not None:
            now = time.perf_counter()
            self.timings[stage] = self.timings.get(stage, 0.0) + now - self.t
            self.t = now


#: Lowest sample rate a record must have to be compared [Hz]: below it a lightning impulse's front holds
#: a handful of samples and the detectors' bands do not exist. The upper bound is the wave-shape
#: evaluation's (:data:`detector.waveshape.MAX_SAMPLE_RATE_HZ`: no impulse recorder samples faster; a time
#: column in the wrong unit gives such rates). Verdicts are validated for 50-250 MS/s; the wave-shape
#: evaluation warns below the 30/Tx of IEC 61083-1 for the front.
MIN_COMPARE_SAMPLE_RATE_HZ = 5e6
#: Sample rates the verdicts are validated for [Hz] (the training and evaluation families record at
#: 50-250 MS/s); between them and the limits above a comparison runs with a warning
#: (:func:`detector.compare.rate_warnings`).
VALIDATED_SAMPLE_RATES_HZ = (50e6, 250e6)
#: Shortest record a comparison uses [s]: the front, the crest and some of the tail (or the chop).
MIN_RECORD_S = 10e-6
#: Largest magnitudes a record may hold [V], [A]: beyond any impulse test (a unit or scaling error).
MAX_VOLTAGE_V = 100e6
MAX_CURRENT_A = 1e6


def check_comparable(record: Record, label: str) -> None:
    """Refuse a record no comparison can use, naming its file and field.

    Parameters
    ----------
    record : Record
        A reference or test record.
    label : str
        ``'reference'`` or ``'test'`` (for the message when the record has no file name).

    Raises
    ------
    RecordError
        The sample rate lies outside ``MIN_COMPARE_SAMPLE_RATE_HZ``..``MAX_SAMPLE_RATE_HZ`` [Hz], the record is
        shorter than ``MIN_RECORD_S`` [s], a channel's magnitude exceeds ``MAX_VOLTAGE_V`` [V] or
        ``MAX_CURRENT_A`` [A], or the current channel is constant (a dead channel, an open shunt or the
        wrong channel: no neutral current).
    """
    path = record.source or f"{label} record"
    fs = record.sampling_rate_Hz
    if not MIN_COMPARE_SAMPLE_RATE_HZ <= fs <= MAX_SAMPLE_RATE_HZ:
        raise RecordError(
            f"{fs:.4g} Hz ({fs / 1e6:.4g} MS/s) is outside the {MIN_COMPARE_SAMPLE_RATE_HZ / 1e6:g} MS/s to "
            f"{MAX_SAMPLE_RATE_HZ / 1e9:g} GS/s a lightning-impulse comparison can use (verdicts are validated "
            f"for {VALIDATED_SAMPLE_RATES_HZ[0] / 1e6:g}-{VALIDATED_SAMPLE_RATES_HZ[1] / 1e6:g} MS/s); check the "
            "time column's unit or the sample interval", path=path,
            field="sample rate")
    if record.duration_s < MIN_RECORD_S:
        raise RecordError(
            f"the record spans {1e6 * record.duration_s:.3g} us ({record.n_samples} samples); a comparison "
            f"needs at least {1e6 * MIN_RECORD_S:g} us (the front, the crest and part of the tail or the chop)",
            path=path, field="time")
    for ch in record.channels:
        limit = MAX_VOLTAGE_V if ch.quantity == "voltage" else MAX_CURRENT_A
        peak = float(np.max(np.abs(ch.samples))) if ch.samples.size else 0.0
        if peak > limit:
            raise RecordError(
                f"peak magnitude {peak:.3g} {'V' if ch.quantity == 'voltage' else 'A'} is beyond any impulse "
                f"test (at most {limit:.0e}); check the channel's unit and scale factor", path=path,
                field=ch.name or ch.quantity)
    if record.has_current:
        ch = record.current
        x = ch.samples
        if x.size and float(np.max(x)) == float(np.min(x)):
            raise RecordError(
                f"the current is constant at {x[0]:.6g} {ch.unit}: no neutral current was recorded; expected "
                "the current through the winding (check the channel, the shunt and the recorder input)",
                path=path, field=ch.name or "current")


#: Largest relative difference of the front times T1 and of the times to half-value T2 of the two records
#: before a warning says the wave shapes differ [1]: the widths of the IEC 60060-1 tolerances of a
#: lightning impulse (T1 1.2 us +-30 %, T2 50 us +-20 %).
SHAPE_DIFFERENCE_TOLERANCE = {"front_time_s": 0.30, "time_to_half_s": 0.20}


def shape_warnings(reference_shape: WaveShape | None, test_shape: WaveShape | None) -> list[str]:
    """Warnings about the wave shapes of a pair: a record outside its IEC 60060-1 tolerances, and front
    times or times to half-value of the two records that differ by more than those tolerances' widths.

    Parameters
    ----------
    reference_shape, test_shape : WaveShape or None
        Evaluations of the two records (None: not evaluated; a note already says why).

    Returns
    -------
    list of str
        One warning per finding, values in us (T1, T2) as in the wave-shape table.
    """
    out = []
    for label, ws in (("reference", reference_shape), ("test", test_shape)):
        if ws is None or ws.within_tolerance:
            continue
        failed = []
        for c in ws.tolerance:
            if c.passed:
                continue
            d = c.to_dict()
            lo = "" if d["low"] is None else f"{d['low']:.4g}"
            hi = "" if d["high"] is None else f"{d['high']:.4g}"
            val = "not measured" if d["value"] is None else f"{d['value']:.4g}"
            failed.append(f"{c.name} {val} (limits {lo}..{hi})")
        out.append(f"{label} record: wave shape outside the IEC 60060-1 tolerances: {', '.join(failed)}")
    if reference_shape is not None and test_shape is not None:
        for name, tol in SHAPE_DIFFERENCE_TOLERANCE.items():
            r, t = getattr(reference_shape, name), getattr(test_shape, name)
            if r and t and abs(t - r) > tol * abs(r):
                what = "front times T1" if name == "front_time_s" else "times to half-value T2"
                out.append(f"the {what} of the two records differ by more than {100 * tol:.0f} %: reference "
                           f"{1e6 * r:.4g} us, test {1e6 * t:.4g} us; compare shots of the same generator "
                           "setting (or check the channels)")
    return out


def _shape_or_none(record: Record, label: str, notes: list[str]) -> WaveShape | None:
    """IEC 60060-1 evaluation, or None with a note when the record defeats it (e.g. a breakdown on the front).

    A record whose voltage holds no impulse at all is refused (:class:`NoImpulseError`): there is nothing
    to compare.
    """
    try:
        return evaluate_waveshape(record)
    except NoImpulseError as exc:
        if exc.path is None:
            raise NoImpulseError(exc.detail, path=f"{label} record", field=exc.field) from None
        raise
    except ShotcheckError as exc:
        notes.append(f"{label} record: wave shape not evaluated ({exc}); normalised by its robust peak instead")
        return None


def _get(ws: WaveShape | None, name: str) -> float | None:
    return None if ws is None else getattr(ws, name)


def _overshoot_ratio(ws: WaveShape | None) -> float | None:
    if ws is None or not ws.test_voltage_V:
        return None
    return abs(ws.peak_V / ws.test_voltage_V)


def extract(
    reference: Record,
    test: Record,
    *,
    reference_shape: WaveShape | None = None,
    test_shape: WaveShape | None = None,
    timings: dict[str, float] | None = None,
) -> PairAnalysis:
    """Measure a pair and build its feature vector.

    Parameters
    ----------
    reference : Record
        Reduced-level full wave (voltage and neutral current).
    test : Record
        Full-level full or chopped wave (voltage and neutral current).
    reference_shape, test_shape : WaveShape, optional
        Wave-shape evaluations already made (they are computed otherwise).
    timings : dict, optional
        If given, filled with the wall time of each stage [s] (for the benchmark).

    Returns
    -------
    PairAnalysis

    Raises
    ------
    RecordError
        A record lacks its voltage or current channel, or the records do not overlap; a record fails
        :func:`check_comparable` (sample rate, length, magnitudes, a constant current).
    NoImpulseError
        No impulse found in a record's voltage.
    """
    clock = _Clock(timings)
    check_comparable(reference, "reference")
    check_comparable(test, "test")
    # values scattered about their code grid read as the codes they stand for (snap_to_codes)
    reference, ref_steps = snap_to_codes(reference)
    test, test_steps = snap_to_codes(test)
    notes: list[str] = []
    ws_r = reference_shape if reference_shape is not None else _shape_or_none(reference, "reference", notes)
    ws_t = test_shape if test_shape is not None else _shape_or_none(test, "test", notes)
    notes.extend(shape_warnings(ws_r, ws_t))
    clock("waveshape")
    pair = align_pair(reference, test, ref_test_voltage_V=None if ws_r is None else ws_r.test_voltage_V,
                      test_test_voltage_V=None if ws_t is None else ws_t.test_voltage_V)
    clock("align")
    dt = pair.sample_interval_s
    td = time_domain_metrics(pair)
    clock("time_domain")
    front_s = _front_time_s(pair)

    # wave-shape-compensated current difference: valid across chopping and generator drift
    cd = compensated_difference(pair.ref_voltage_pu, pair.ref_current_pu, pair.test_voltage_pu,
                                pair.test_current_pu, dt, pretrigger_samples=pair.pretrigger_samples)
    if pair.clipped.any():
        # the difference's noise weight is a filter some 0.5 us long, which would carry the error of the
        # samples at a clipping limit into their measured neighbours: those samples take the healthy
        # winding's prediction (beyond its span, the reference current) and the difference is made again
        cd = compensated_difference(pair.ref_voltage_pu, pair.ref_current_pu, pair.test_voltage_pu,
                                    _clipped_filled(pair, cd), dt, pretrigger_samples=pair.pretrigger_samples)
    pretrigger_s = pair.pretrigger_samples * dt
    tone_note = _slow_tone_warning(cd, pretrigger_s)
    if tone_note is not None:
        notes.append(tone_note)
    # the engineer is told of the tones of at least a tenth of the largest (a weak second line next to
    # a strong one is mostly the first one's leakage, removed for what it is worth)
    v_max = max((amp for _, amp, _ in cd.voltage_tones), default=0.0)
    notes += [f"interference at {f / 1e3:.0f} kHz on the {owner} record's voltage channel ({100.0 * amp:.2g} % of "
              "its test voltage) was taken out before the current was predicted"
              for f, amp, owner in cd.voltage_tones if amp >= 0.1 * v_max]
    floor = _quantisation_floor(reference, test, pair, (ref_steps, test_steps))
    chop_s = None
    if td.test_collapse is not None:
        chop_s = td.test_collapse.time_s
    cd_f = _compensated_features(cd, pair, front_s, floor, chop_s)
    # the test current where a recorder clipped is unknown: the transfer function and the wavelet
    # difference take the healthy winding's prediction there (no difference where nothing was measured);
    # beyond the span the prediction covers, the reference current (per unit: the same when healthy)
    test_current = _clipped_filled(pair, cd) if pair.clipped.any() else pair.test_current_pu
    clock("compensated")

    # transfer functions over the whole records: valid across chopping (see metrics.transfer)
    # frequencies where either current is within its noise (snr 3) carry no information on the winding
    tf_r = transfer_function(pair.ref_voltage_pu, pair.ref_current_pu, dt, pretrigger_samples=pair.pretrigger_samples,
                             snr_current=3.0)
    tf_t = transfer_function(pair.test_voltage_pu, test_current, dt,
                             pretrigger_samples=pair.pretrigger_samples, snr_current=3.0)
    tc = compare_transfer(tf_r.H_S, tf_t.H_S, tf_r.frequency_Hz)
    clock("transfer")

    # wavelet difference of the test current against its compensated prediction, over the span where
    # the prediction is valid, in units of its own noise: divided by the compensated difference's
    # time-dependent sigma (which holds the alignment tolerance on the front) and each level's noise
    # followed along the record; scored after the front window and away from an intended chop, like the
    # averaged compensated difference
    valid = np.flatnonzero(np.isfinite(cd.sigma))
    stop = int(valid[-1]) + 1 if valid.size else 0
    wd: WaveletDifference | None = None
    wd_scored: np.ndarray | None = None
    bursts = [math.nan] * (2 * BURST_LEVELS + 1)
    if stop >= 64:
        t = pair.times_s[:stop]
        scored = np.isfinite(cd.sigma[:stop]) & (t > front_s + FRONT_WINDOW_S[1])
        if chop_s is not None:
            scored &= ~((t >= chop_s + CHOP_WINDOW_S[0]) & (t <= chop_s + CHOP_WINDOW_S[1]))
        scored &= ~pair.unmeasured[:stop]
        scored &= t < t[-1] - WAVELET_END_GUARD_S
        wd = wavelet_difference(cd.predicted[:stop], test_current[:stop], dt,
                                t0_s=float(pair.times_s[0]), noise_scale=cd.sigma[:stop], scored=scored,
                                noise_segments=WAVELET_NOISE_SEGMENTS)
        wd_scored = scored
        counts, spans = burst_counts(wd.difference_map[:BURST_LEVELS], scored, dt, gap_s=BURST_GAP_S)
        strong, _ = burst_counts(np.max(wd.difference_map[:2], axis=0)[None, :], scored, dt,
                                 k_sigma=BURST_STRONG_SIGMA, gap_s=BURST_GAP_S)
        bursts = [*counts.astype(float).tolist(), *(1e6 * spans).tolist(), float(strong[0])]
    beyond, beyond_onset_s, wd_beyond, beyond_scored = _beyond_span_peaks(pair, test_current, stop, chop_s)
    clock("wavelet")

    f: list[float] = []
    for dev in (td.current, td.voltage):
        f += [float(dev[w].max_sigma) for w in _WINDOWS]
        f += [float(dev["all"].max_sigma), float(dev["all"].max_percent)]
    nan = math.nan
    onset = nan if td.onset_s is None else 1e6 * (td.onset_s - front_s)
    vi = (1e6 * (td.voltage_onset_s - td.current_onset_s)
          if td.voltage_onset_s is not None and td.current_onset_s is not None else nan)
    cshift = nan
    if td.test_collapse is not None:
        ref_c = td.ref_collapse.time_s if td.ref_collapse is not None else front_s
        cshift = 1e6 * (td.test_collapse.time_s - ref_c)
    f += [onset, vi, float(td.test_collapse is not None), float(td.ref_collapse is not None), cshift,
          1e6 * (td.compared_until_s - front_s), float(test.meta.get("shot_kind") in ("chopped", "reduced_chopped"))]
    ov = tc.overall
    f += [ov.rho, ov.R, ov.rms_dB, ov.max_dB, ov.mean_dB]
    for b in ("low", "medium", "high"):
        bi = tc.bands.get(b)
        f += [nan, nan] if bi is None else [bi.R, bi.rms_dB]
    f += [float(tc.max_peak_shift_rel), float(tc.n_unmatched)]
    f += _band_mean_dB(tc.frequency_Hz, tc.ref_dB, tc.test_dB)
    f += cd_f[:6]
    f += list(cd_f[7])
    f += list(cd_f[9])
    f += _wavelet_features(wd, front_s)
    t_pair = pair.times_s
    f += [nan if i < 0 else 1e6 * (float(t_pair[i]) - front_s) for i in cd_f[8]]
    f += [nan if i < 0 else 1e6 * (float(t_pair[i]) - front_s) for i in cd_f[10]]
    f += list(cd_f[11])

    def _rel(x: float | None) -> float:
        return nan if x is None else 1e6 * (x - front_s)

    f += [_rel(td.current_onset_s), _rel(td.voltage_onset_s),
          _rel(None if td.test_collapse is None else td.test_collapse.time_s)]
    dv_measured = np.where(pair.voltage_clipped, 0.0, td.dv_pu) if pair.voltage_clipped.any() else td.dv_pu
    steps = voltage_steps(dv_measured, pair.ref_voltage_pu, td.voltage_sigma_pu, dt, scales_s=VOLTAGE_STEP_SCALES_S,
                          start=int(np.searchsorted(t_pair, front_s + FRONT_WINDOW_S[0])),
                          stop=td.compared_stop)
    f += [st.max_score for st in steps]
    f += [nan if st.step_index < 0 else 1e6 * (float(t_pair[st.step_index]) - front_s) for st in steps]
    peak_i = float(np.max(np.abs(pair.ref_current_pu))) or 1.0
    f += [
        _ratio_change(_get(ws_r, "front_time_s"), _get(ws_t, "front_time_s")),
        _ratio_change(_get(ws_r, "time_to_half_s"), _get(ws_t, "time_to_half_s")),
        _ratio_change(_overshoot_ratio(ws_r), _overshoot_ratio(ws_t)),
        1e6 * pair.ref_noise.current_mad_pu / peak_i,
        1e6 * pair.test_noise.current_mad_pu / peak_i,
        1e6 * pair.ref_clipped_current_s,
        1e6 * pair.test_clipped_current_s,
        *bursts,
        *cd_f[12],
        *_tone_features(cd, pretrigger_s),
        *beyond,
    ]
    vec = np.asarray(f, dtype=np.float64)
    if vec.size != len(FEATURE_NAMES):  # a programming error, never a user's
        raise AssertionError(f"feature vector has {vec.size} values for {len(FEATURE_NAMES)} names")
    clock("features")
    # each record's own wave-shape warnings name the record (the same words may concern either, or both)
    warnings = tuple(dict.fromkeys([*notes, *(f"reference record: {w}" for w in (ws_r.warnings if ws_r else ())),
                                    *(f"test record: {w}" for w in (ws_t.warnings if ws_t else ())),
                                    *pair.warnings]))
    return PairAnalysis(vec, ws_r, ws_t, pair, td, tf_r, tf_t, tc, wd, front_s, warnings, cd, cd_f[6],
                        beyond_onset_s, wd_scored, wd_beyond, beyond_scored)


#: Onset features that mark a sharp change to within a few samples (fine wavelet levels, short averages).
SHARP_ONSET_FEATURES = tuple(f"wv_D{k}_first_after_front_us" for k in range(2, 8)) + (
    "cd_scale1_first_after_front_us", "cd_scale4_first_after_front_us", "cd_scale16_first_after_front_us")


def sharp_onset_after_front_us(features: np.ndarray, *, agree_us: float = 0.05, count: int = 3) -> np.ndarray:
    """Onset time where several independent detectors agree [us after the front], NaN where they do not.

    A breakdown changes the current abruptly: the fine wavelet levels and the short averages of the
    compensated difference then cross their thresholds within a few samples of each other. The earliest
    time at which ``count`` of them agree within ``agree_us`` is one candidate of the fault instant
    (:class:`detector.model.InstantRegressor` scores it with the others); a model whose instant
    regressor has no candidates takes it as the instant where it exists.

    Parameters
    ----------
    features : numpy.ndarray, shape (n_features,) or (n_pairs, n_features)
        Feature vectors in :data:`FEATURE_NAMES` order.
    agree_us : float
        Largest spread of the agreeing onsets [us].
    count : int
        Number of agreeing detectors.

    Returns
    -------
    numpy.ndarray
        One value per pair [us after the front of the reference, on the pair's axis].
    """
    X = np.atleast_2d(np.asarray(features, dtype=np.float64))
    cols = [FEATURE_NAMES.index(c) for c in SHARP_ONSET_FEATURES]
    return agreeing_onset(X[:, cols], agree_us=agree_us, count=count)


#: Onset features the instant regressor chooses among (every detector's ``*_after_front_us``).
INSTANT_CANDIDATE_FEATURES = tuple(n for n in FEATURE_NAMES if n.endswith("_after_front_us"))


def instant_candidates() -> dict[str, tuple[int, ...]]:
    """Column indices of the onset candidates, as :class:`detector.model.InstantRegressor` takes them.

    Returns
    -------
    dict
        ``candidate_columns`` (:data:`INSTANT_CANDIDATE_FEATURES`) and ``sharp_columns``
        (:data:`SHARP_ONSET_FEATURES`) as column indices of :data:`FEATURE_NAMES`.
    """
    return {
        "candidate_columns": tuple(FEATURE_NAMES.index(c) for c in INSTANT_CANDIDATE_FEATURES),
        "sharp_columns": tuple(FEATURE_NAMES.index(c) for c in SHARP_ONSET_FEATURES),
    }


#: Window before the fault instant, and windows after it, of :func:`instant_inputs` [us after the instant].
INSTANT_BEFORE_WINDOW_US = (-0.4, -0.05)
INSTANT_AFTER_WINDOWS_US = ((0.05, 0.2), (0.2, 0.4), (0.4, 1.0), (1.0, 3.0), (3.0, 10.0))

#: Inputs of the locator measured at the fault instant (see :func:`instant_inputs`).
INSTANT_INPUT_NAMES = tuple(
    f"at_instant_{what}_{lo:g}_{hi:g}us"
    for what in ("voltage_step_z", "current_jump_z", "log_current_over_early_voltage",
                 "log_voltage_over_early_voltage")
    for lo, hi in INSTANT_AFTER_WINDOWS_US
)

#: Revision of how :func:`instant_inputs` computes its values under the same names; raise it when values
#: change, so that no cache of them (:func:`detector.training.instant_inputs_of_dataset`) is reused.
#: 2: the current's columns are NaN where its window before holds fewer than 3 finite values.
INSTANT_INPUTS_REVISION = 2


def _prefix_sums(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Running sums of the finite ``values`` and of their count, each with a leading 0."""
    fin = np.isfinite(values)
    csum = np.zeros(values.size + 1)
    np.cumsum(np.where(fin, values, 0.0), out=csum[1:])
    ccount = np.zeros(values.size + 1, dtype=np.int64)
    np.cumsum(fin, out=ccount[1:])
    return csum, ccount


def _window_means(t: np.ndarray, sums: tuple[np.ndarray, np.ndarray], centre_s: np.ndarray, lo_s: float,
                  hi_s: float, before: bool) -> tuple[np.ndarray, np.ndarray]:
    """Mean of the finite values (given by :func:`_prefix_sums`) in a window around each centre, and its
    count of finite samples.

    ``before`` windows hold ``centre + lo <= t < centre + hi``, the others ``centre + lo < t <= centre + hi``.
    """
    csum, ccount = sums
    side = "left" if before else "right"
    i0 = np.searchsorted(t, centre_s + lo_s, side=side)
    i1 = np.searchsorted(t, centre_s + hi_s, side=side)
    n = ccount[i1] - ccount[i0]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (csum[i1] - csum[i0]) / n
    return np.where(n > 0, mean, np.nan), n


def instant_inputs(analysis: PairAnalysis, instant_after_front_us: np.ndarray | float) -> np.ndarray:
    """Steps of the voltage difference and jumps of the compensated current difference after an instant.

    A breakdown changes the test voltage and the neutral current at once. How much of it reaches the
    neutral in the first few hundred nanoseconds falls off with the fault's distance from the neutral,
    while the voltage step at the line end does not, and the later course of both follows the travel of
    the disturbance through the winding: their sizes after the instant, relative to the early voltage
    step, carry the fault's position along the winding. The locator takes these at the timer's instant
    (:meth:`detector.model.ShotModel.locator_input`).

    Parameters
    ----------
    analysis : PairAnalysis
        From :func:`extract`.
    instant_after_front_us : float or numpy.ndarray, shape (k,)
        Fault instants [us after the reference front, pair axis]; NaN gives a row of NaN.

    Returns
    -------
    numpy.ndarray, shape (k, len(INSTANT_INPUT_NAMES))
        In :data:`INSTANT_INPUT_NAMES` order, for each window of :data:`INSTANT_AFTER_WINDOWS_US`: the mean
        test-voltage difference in it minus its mean in :data:`INSTANT_BEFORE_WINDOW_US`, in voltage noise
        units [1]; the same of the compensated current difference, in units of its median noise [1];
        log10 of the current step over the early voltage step (the sum of the magnitudes of the first two
        windows' voltage steps, all per unit) [1]; log10 of the voltage step over that early step [1].
        NaN where the window before holds fewer than 3 samples, where a window after holds fewer than 3
        finite ones, or where no compensated difference exists; the current's columns also where its
        window before holds fewer than 3 finite values (near the span the difference does not cover).
    """
    inst = np.atleast_1d(np.asarray(instant_after_front_us, dtype=np.float64))
    n_w = len(INSTANT_AFTER_WINDOWS_US)
    out = np.full((inst.size, 4 * n_w), np.nan)
    cd = analysis.compensated
    if cd is None:
        return out
    t = analysis.pair.times_s
    ok = np.isfinite(inst)
    centre = analysis.front_time_s + 1e-6 * np.where(ok, inst, 0.0)
    td = analysis.time_domain
    sv = td.voltage_sigma_pu
    si = median1d(cd.sigma[~np.isnan(cd.sigma)])  # an infinite sigma (no prediction there) counts, as in nanmedian
    v_sums, i_sums = _prefix_sums(td.dv_pu), _prefix_sums(cd.difference)
    b0, b1 = (1e-6 * x for x in INSTANT_BEFORE_WINDOW_US)
    v_pre, n_pre = _window_means(t, v_sums, centre, b0, b1, True)
    i_pre, ni_pre = _window_means(t, i_sums, centre, b0, b1, True)
    ok &= n_pre >= 3
    i_pre = np.where(ni_pre >= 3, i_pre, np.nan)  # the difference is NaN where it is not compared
    dv = np.empty((inst.size, n_w))
    di = np.empty((inst.size, n_w))
    for k, (lo, hi) in enumerate(INSTANT_AFTER_WINDOWS_US):  # five windows, each over all instants at once
        v, nv = _window_means(t, v_sums, centre, 1e-6 * lo, 1e-6 * hi, False)
        c, nc = _window_means(t, i_sums, centre, 1e-6 * lo, 1e-6 * hi, False)
        dv[:, k] = np.where(nv >= 3, v - v_pre, np.nan)
        di[:, k] = np.where(nc >= 3, c - i_pre, np.nan)
    early = np.abs(dv[:, :1]) + np.abs(dv[:, 1:2]) + 1e-30
    with np.errstate(invalid="ignore", divide="ignore"):
        cols = np.concatenate([dv / sv, di / si, np.log10(np.abs(di) + 1e-30) - np.log10(early),
                               np.log10(np.abs(dv) + 1e-30) - np.log10(early)], axis=1)
    cols[~np.isfinite(cols)] = np.nan  # an infinite noise or step is no measurement
    out[ok] = cols[ok]
    return out


def describe(features: np.ndarray) -> dict[str, Any]:
    """Feature name -> value for JSON output (NaN -> None)."""
    return {n: (None if not math.isfinite(float(v)) else float(v)) for n, v in zip(FEATURE_NAMES, features,
                                                                                  strict=True)}
