"""Wave-shape-compensated current difference: the test current against the current the reference
winding would have drawn under the test voltage.

The winding and its test connection are linear and time-invariant as long as the insulation holds, so
the neutral current is the applied voltage convolved with one impulse response, ``i = h * v``. The
reference shot gives ``h``; applied to the test shot's own voltage it predicts the test current
``i_pred = h_ref * v_test``. The difference ``i_test - i_pred`` is then free of everything that comes
from the applied wave: a generator drift between levels, a different front, a chopped test shot against
a full reference, chopping-time scatter. What is left is a change of the winding (a fault) or of
non-linear elements (the core's magnetising branch on the tail), and noise.

Method
------
Both records get the same exponential window ``w(t) = exp(-(t - t0)/tau)`` (as for the transfer
function, :mod:`detector.metrics.transfer`), which makes the spectra of the truncated records
well-defined. With ``V_r, I_r, V_t`` the windowed, zero-padded spectra, the prediction is a Wiener
(regularised) deconvolution

    ``I_pred(f) = I_r(f) V_r*(f) V_t(f) / (|V_r(f)|^2 + lambda)``,

``lambda`` being the noise power of the windowed reference voltage per frequency bin (from its
pre-trigger), so frequencies where the reference voltage holds no signal are not amplified. The
difference is formed in the windowed domain and unwindowed, ``d(t) = (w i_t - irfft(I_pred)) / w``.
Each frequency bin of the difference is then weighted so that its noise is white (:func:`noise_weight`,
the weighting of generalised least squares): behind a chopped test shot the prediction filter
``K = V_r* V_t / (|V_r|^2 + lambda)`` amplifies the reference's noise where the test wave holds
frequencies the reference barely does, and that noise would otherwise fill the whole record.
Its noise standard deviation is taken from the pre-trigger and grows as ``1/w(t)`` towards the end of
the record (the regularised prediction is least certain there); deviations are reported in units of
that time-dependent sigma.

References
----------
N. Wiener, Extrapolation, Interpolation and Smoothing of Stationary Time Series, MIT Press, 1949
(regularised deconvolution). The exponential window: the Laplace transform evaluated on the line
``s = 1/tau + j 2 pi f`` (any text on Laplace transforms).
"""

from __future__ import annotations

import dataclasses
import functools
import itertools
import math

import numpy as np
import scipy.fft as sfft
from scipy.ndimage import uniform_filter1d

from .._fourier import phasor
from .._stats import median1d, quantisation_step
from .._validation import ShotcheckError, check_range

__all__ = ["CompensatedDifference", "compensated_difference", "core_term", "driven_fraction", "multiscale_z",
           "noise_weight", "quantisation_step", "remove_stationary_tones", "remove_voltage_tones",
           "tone_aware_offsets", "SCALES"]

#: Averaging lengths of :func:`multiscale_z` [samples]: a slow change of a few per mille of the peak
#: current lies in the noise sample by sample but stands out once averaged over microseconds.
SCALES = (1, 4, 16, 64, 256, 1024)


@dataclasses.dataclass(frozen=True)
class CompensatedDifference:
    """Test current minus the current predicted from the reference under the test voltage.

    Attributes
    ----------
    predicted : numpy.ndarray
        Predicted test current ``h_ref * v_test`` [unit of the currents].
    difference : numpy.ndarray
        ``i_test - predicted`` [unit of the currents].
    sigma : numpy.ndarray
        Noise standard deviation of ``difference`` at each sample [unit of the currents].
    z : numpy.ndarray
        ``difference / sigma`` [1].
    onset_index : int or None
        First sample where ``|z| > k_sigma`` for at least ``min_samples`` consecutive samples.
    window_tau_s : float
        Time constant of the exponential window [s].
    tones : tuple of (float, float)
        Stationary tones (interference) removed from the difference: (frequency [Hz], amplitude).
    voltage_tones : tuple of (float, float, str)
        Tones removed from a voltage channel before the prediction (:func:`remove_voltage_tones`):
        (frequency [Hz], amplitude [per unit of that record's test voltage], ``"test"`` or
        ``"reference"``).
    """

    predicted: np.ndarray
    difference: np.ndarray
    sigma: np.ndarray
    z: np.ndarray
    onset_index: int | None
    window_tau_s: float
    tones: tuple[tuple[float, float], ...] = ()
    voltage_tones: tuple[tuple[float, float, str], ...] = ()


def _robust_sigma(x: np.ndarray) -> float:
    """MAD-based standard deviation (Donoho & Johnstone 1994: sigma = MAD / 0.6745)."""
    if x.size < 8:
        return math.nan
    return median1d(np.abs(x - median1d(x))) / 0.6745


def compensated_difference(
    ref_voltage: np.ndarray,
    ref_current: np.ndarray,
    test_voltage: np.ndarray,
    test_current: np.ndarray,
    dt: float,
    *,
    pretrigger_samples: int,
    window_tau_s: float | None = None,
    k_sigma: float = 6.0,
    min_duration_s: float = 50e-9,
    sigma_floor_rel: float = 1e-4,
    max_gain: float = 8.0,
    timing_tolerance_s: float = 2e-9,
    level_tolerance: float = 0.001,
    remove_tones: bool = True,
) -> CompensatedDifference:
    """Wave-shape-compensated current difference of an aligned, level-normalised pair.

    Parameters
    ----------
    ref_voltage, ref_current, test_voltage, test_current : array_like
        Aligned records on one time grid, each normalised by its own test voltage value: voltages in
        per unit [1], currents in [A/V].
    dt : float
        Sample interval [s].
    pretrigger_samples : int
        Samples before the voltage front (noise estimate, and the window origin).
    window_tau_s : float, optional
        Time constant of the exponential window [s]; default one third of the record after the front.
    k_sigma : float
        Onset threshold in noise standard deviations [1].
    min_duration_s : float
        Minimum time above the threshold for an onset [s].
    sigma_floor_rel : float
        Lower bound of the noise sigma relative to the peak reference current [1] (noise-free records).
    max_gain : float
        Largest unwindowing factor ``1/w`` used [1]; later samples are not compared (sigma infinite).
    timing_tolerance_s : float
        Timing uncertainty of the alignment [s]; adds ``timing_tolerance_s * |d i_pred / dt|`` to sigma.
    level_tolerance : float
        Relative uncertainty of the level normalisation [1]; adds ``level_tolerance * |i_pred|`` to sigma.
    remove_tones : bool
        Remove interference: tones on either voltage channel first, before the prediction
        (:func:`remove_voltage_tones`), then stationary tones of the difference
        (:func:`remove_stationary_tones`). When tones of the difference are found, the pre-trigger
        baselines are corrected for them (:func:`tone_aware_offsets`) and the prediction is made
        again.

    Returns
    -------
    CompensatedDifference

    Raises
    ------
    ShotcheckError
        Arrays of unequal length or too short.
    """
    rv = np.asarray(ref_voltage, dtype=np.float64)
    ri = np.asarray(ref_current, dtype=np.float64)
    tv = np.asarray(test_voltage, dtype=np.float64)
    ti = np.asarray(test_current, dtype=np.float64)
    n = rv.size
    if not (ri.size == tv.size == ti.size == n) or rv.ndim != 1:
        raise ShotcheckError("compensated_difference: the four arrays must be 1-D and of one length")
    if n < 32:
        raise ShotcheckError(f"compensated_difference: at least 32 samples are needed, got {n}")
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    n0 = int(min(max(pretrigger_samples, 0), n - 16))
    span = (n - n0) * dt
    tau = span / 3.0 if window_tau_s is None else check_range("window_tau_s", window_tau_s, 0.0, None,
                                                                low_inclusive=False, unit="s")
    k = np.arange(n, dtype=np.float64)
    w = np.exp(-np.clip(k - n0, 0.0, None) * dt / tau)
    gain = 1.0 / w
    valid = gain <= max_gain
    span_idx = np.flatnonzero(valid & (k < n - max(8, n // 50))) if remove_tones else None
    n_fft = sfft.next_fast_len(2 * n, real=True)
    voltage_tones: list[tuple[float, float, str]] = []
    if remove_tones:
        rv, tv, voltage_tones = remove_voltage_tones(rv, tv, dt, n0, span_idx)
    pred, pred_b, diff, tones, kg2, spec = _prediction(rv, ri, tv, ti, w, gain, valid, n0, n_fft, dt, span_idx)
    if tones and n0 >= 16:
        # the pre-trigger baselines were biased by the tones: correct them and predict again (the
        # spectra shift by offset x spectrum of the window)
        off = tone_aware_offsets(np.stack((rv, ri, tv, ti))[:, :n0], dt, [f for f, _ in tones])
        if off is not None:
            spec2 = spec - off[:, None] * sfft.rfft(w, n_fft)[None, :]
            again = _prediction(rv - off[0], ri - off[1], tv - off[2], ti - off[3], w, gain, valid, n0, n_fft,
                                dt, span_idx, spec=spec2)
            # the corrected baselines stand only if the tones that justified them are found again
            if again[3]:
                rv, ri, tv, ti = rv - off[0], ri - off[1], tv - off[2], ti - off[3]
                pred, pred_b, diff, tones, kg2, spec = again
    peak_i = float(np.max(np.abs(ri))) or 1.0
    s0 = _robust_sigma(diff[:n0]) if n0 >= 8 else math.nan
    if not math.isfinite(s0):  # no pre-trigger: second differences of the test current
        s0 = _robust_sigma(np.diff(ti, 2)) / math.sqrt(6.0)
    s0 = max(s0 if math.isfinite(s0) else 0.0, sigma_floor_rel * peak_i)
    # The prediction's own noise grows with the unwindowing gain; the test's noise does not. On top, a
    # model tolerance: a timing uncertainty of the alignment (times the slope of the prediction) and a
    # relative level uncertainty of the normalisation (times the prediction itself).
    # the slope's largest magnitude over the sample and its two neighbours: a timing error of a fraction of
    # a sample moves a sharp peak of the prediction, where the slope itself passes through zero
    slope = np.abs(np.gradient(np.nan_to_num(pred_b), dt))
    slope[1:-1] = np.maximum(slope[1:-1], np.maximum(slope[:-2], slope[2:]))
    sig2 = s0 * s0 * (1.0 + kg2 * gain * gain) / (1.0 + kg2) + (timing_tolerance_s * slope) ** 2 \
        + (level_tolerance * np.nan_to_num(pred_b)) ** 2
    valid &= k < n - max(8, n // 50)  # the last samples carry the shift and padding end effects
    sig = np.where(valid, np.sqrt(sig2), np.inf)
    z = np.where(valid, diff / sig, 0.0)
    m = max(1, int(round(min_duration_s / dt)))
    over = (np.abs(z) > k_sigma).astype(np.int64)
    c = np.concatenate(([0], np.cumsum(over)))
    full = np.flatnonzero(c[m:] - c[:-m] == m)
    onset = int(full[0]) if full.size else None
    return CompensatedDifference(pred, diff, sig, z, onset, tau, tuple(tones), tuple(voltage_tones))


def _prediction(rv: np.ndarray, ri: np.ndarray, tv: np.ndarray, ti: np.ndarray, w: np.ndarray,
                gain: np.ndarray, valid: np.ndarray, n0: int, n_fft: int, dt: float,
                tone_span: np.ndarray | None, *, spec: np.ndarray | None = None,
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[tuple[float, float]], float, np.ndarray]:
    """Predicted test current, the same weighted as in the difference (:func:`noise_weight`), difference,
    removed tones, the prediction's noise gain and the four windowed spectra (see the caller: ``w`` the
    window, ``gain`` = 1 / w, ``valid`` where the gain is allowed); ``spec`` if given holds those spectra
    already."""
    n = rv.size
    if spec is None:
        spec = sfft.rfft(np.stack((rv * w, ri * w, tv * w, ti * w)), n_fft, axis=-1)  # one call, four rows
    Vr, Ir, Vt, It = spec[0], spec[1], spec[2], spec[3]
    # noise power of the windowed reference voltage per bin: sigma^2 * sum(w^2)
    sv = _robust_sigma(rv[:n0]) if n0 >= 8 else _robust_sigma(np.diff(rv, 2)) / math.sqrt(6.0)
    peak_v = float(np.max(np.abs(rv))) or 1.0
    sv = max(sv if math.isfinite(sv) else 0.0, 1e-6 * peak_v)
    lam = sv * sv * float(np.sum(w * w))
    p_r = np.abs(Vr) ** 2
    g = p_r / (p_r + lam)  # how well the reference resolves each frequency, 0..1
    # the prediction, and the test current compared only within the band the reference resolves:
    # components the reference never excited (the steep collapse of a chopped wave) cannot be predicted
    K = np.conj(Vr) * Vt / (p_r + lam)
    b = noise_weight(ri, ti, n0, g, K, 1.0 / (n_fft * dt))  # the difference's noise made white
    back = sfft.irfft(np.stack((Ir * K, Ir * (K * b), It * (g * b))), n_fft, axis=-1)
    pred = np.where(valid, back[0, :n] * gain, np.nan)
    pred_b = np.where(valid, back[1, :n] * gain, np.nan)
    diff = back[2, :n] * gain - pred_b
    tones: list[tuple[float, float]] = []
    if tone_span is not None:
        diff, tones = remove_stationary_tones(diff, dt, tone_span, n0,
                                              routes=ToneRoutes(w, gain, g, K, n_fft, b))
    # noise gain of the weighted prediction filter b K, K = V_t V_r* / (|V_r|^2 + lambda) (RMS over
    # frequency, Parseval): about 1 when both waves have one shape; without the weight b, far larger when
    # the test wave excites frequencies the reference barely does (a chopped test shot)
    kg2 = float(np.mean(np.abs(K * b) ** 2) / max(np.mean((g * b) ** 2), 1e-12))
    return pred, pred_b, diff, tones, kg2, spec


#: Width of the moving average over frequency that smooths ``|K|^2`` and ``g^2`` before they weight the
#: difference [Hz]. ``|K|^2`` of a chopped test shot ripples every ``1/T_c`` in frequency (a chop 2-6 us
#: after the origin: 170-500 kHz); a weight with that ripple is a filter with echoes at the chopping
#: time, which copied the front's residual onto the chop (seen: a healthy chopped pair's difference
#: 20 times its noise there). Averaged over 2 MHz the weight's impulse response stays within about
#: 0.5 us.
NOISE_WEIGHT_SMOOTHING_HZ = 2e6


def noise_weight(ref_current: np.ndarray, test_current: np.ndarray, pretrigger_samples: int, band: np.ndarray,
                 prediction: np.ndarray, bin_Hz: float) -> np.ndarray:
    """Weight per frequency bin that evens out the compensated difference's noise.

    Per frequency bin the difference ``g I_t - K I_r`` carries the test current's noise times ``g`` and
    the reference current's times ``|K|``. Where the test wave holds a frequency the reference barely
    does (above a few MHz behind a chop), ``|K|`` is large and the reference's noise, amplified, fills
    the whole record. Weighting each bin by ``1 / sqrt(g^2 + rho |K|^2)`` (``rho`` the ratio of the two
    currents' noise variances, from their pre-triggers) makes the noise of the difference white
    (the weighted least-squares, or whitening, filter); a change of the winding in the bands the
    prediction holds well keeps its size. The weight is scaled to 1 where ``g = |K| = 1`` (the two waves
    of one shape) and never exceeds 1, so a pair of full waves is left nearly as it was. ``|K|^2`` and
    ``g^2`` are averaged over :data:`NOISE_WEIGHT_SMOOTHING_HZ` first.

    Parameters
    ----------
    ref_current, test_current : numpy.ndarray
        The aligned, level-normalised currents [A/V]; their first ``pretrigger_samples`` give the noise.
    pretrigger_samples : int
        Samples before the voltage front.
    band : numpy.ndarray
        ``g`` per frequency bin [1].
    prediction : numpy.ndarray of complex
        ``K`` per frequency bin [1].
    bin_Hz : float
        Width of a frequency bin [Hz].

    Returns
    -------
    numpy.ndarray
        The weight per bin, 0..1 [1].
    """
    n0 = int(pretrigger_samples)
    sr = _robust_sigma(ref_current[:n0]) if n0 >= 8 else math.nan
    st = _robust_sigma(test_current[:n0]) if n0 >= 8 else math.nan
    rho = (sr / st) ** 2 if (math.isfinite(sr) and math.isfinite(st) and st > 0 and sr > 0) else 1.0
    k2 = prediction.real ** 2 + prediction.imag ** 2
    g2 = band * band
    m = int(round(NOISE_WEIGHT_SMOOTHING_HZ / bin_Hz))
    if m > 1:
        k2 = uniform_filter1d(k2, m, mode="nearest")
        g2 = uniform_filter1d(g2, m, mode="nearest")
    return np.minimum(1.0, np.sqrt((1.0 + rho) / (g2 + rho * k2 + 1e-300)))


def core_term(cd: CompensatedDifference, test_voltage: np.ndarray, dt: float, scored: np.ndarray,
              *, start: int = 0) -> tuple[float, CompensatedDifference]:
    """Fit and remove a change of the magnetising inductance from the compensated difference.

    The core's magnetising branch draws ``i_m = (1/L_m) * integral(v dt)``; its inductance depends on the
    level (saturation, remanence), so between a reduced-level and a full-level shot ``1/L_m`` changes
    and the difference holds ``a * integral(v_test dt)`` (``a`` the change of ``1/L_m`` in the per-unit
    currents' units per second), a slow, harmless difference on the tail (IEC 60076-4 lists core
    effects among the differences between levels that do not indicate a failure). A short between
    turns also lowers the winding's inductance, so ``a`` is a measure of the fault too; what is left
    after removing it tells the two apart. ``a`` is the weighted least-squares fit over the scored
    samples (weights ``1/sigma^2``).

    Parameters
    ----------
    cd : CompensatedDifference
        From :func:`compensated_difference`.
    test_voltage : numpy.ndarray
        The test voltage it was made with (per unit) [1].
    dt : float
        Sample interval [s].
    scored : numpy.ndarray of bool
        Samples used for the fit (after the front, away from an intended chop, finite sigma).
    start : int
        Sample from which the voltage is integrated (the front) [samples].

    Returns
    -------
    coefficient : float
        ``a`` [unit of the difference per second] (0 if fewer than 16 samples are scored).
    residual : CompensatedDifference
        ``cd`` with ``a * integral(v_test dt)`` removed from ``difference`` and ``z``.
    """
    v = np.asarray(test_voltage, dtype=np.float64)
    q = np.zeros(v.size)
    q[start:] = np.cumsum(v[start:]) * dt  # flux per unit [s]
    m = np.asarray(scored, dtype=bool) & np.isfinite(cd.sigma) & (cd.sigma > 0)
    if m.sum() < 16:
        return 0.0, cd
    w = 1.0 / cd.sigma[m] ** 2
    den = float(np.sum(w * q[m] ** 2))
    if den <= 0:
        return 0.0, cd
    a = float(np.sum(w * q[m] * np.nan_to_num(cd.difference[m])) / den)
    diff = cd.difference - a * q
    z = np.where(np.isfinite(cd.sigma), diff / cd.sigma, 0.0)
    return a, dataclasses.replace(cd, difference=diff, z=z)


def driven_fraction(cd: CompensatedDifference, test_voltage: np.ndarray, dt: float, scored: np.ndarray,
                    onset: int) -> tuple[float, float]:
    """How much of the difference after its onset the test voltage drives through a changed admittance.

    A short between turns or to ground changes the winding: from the fault on, the difference is the
    changed admittance's response to the applied voltage, largely ``a * integral(v) + b * v + c * dv/dt``
    from the fault instant (inductive, resistive and capacitive parts). A discharge adds charge pulses
    that no admittance applied to the voltage explains. The three regressors, each starting at
    ``onset``, are fitted by weighted least squares (weights ``1/sigma^2``) over the scored samples
    from the onset on.

    Parameters
    ----------
    cd : CompensatedDifference
        From :func:`compensated_difference`.
    test_voltage : numpy.ndarray
        The test voltage it was made with (per unit) [1].
    dt : float
        Sample interval [s].
    scored : numpy.ndarray of bool
        Samples that may be used (after the front, away from an intended chop, finite sigma).
    onset : int
        First sample of the change [samples].

    Returns
    -------
    explained : float
        Weighted share of the difference's energy after the onset that the fit explains, 0..1 [1]
        (NaN with fewer than 32 samples).
    inductive_percent : float
        The inductive part at the last scored sample, in percent of the difference's largest absolute
        value after the onset [%] (NaN with fewer than 32 samples).
    """
    v = np.asarray(test_voltage, dtype=np.float64)
    m = np.asarray(scored, dtype=bool) & np.isfinite(cd.sigma) & (cd.sigma > 0)
    m[: max(int(onset), 0)] = False
    idx = np.flatnonzero(m)
    if idx.size < 32:
        return math.nan, math.nan
    o = int(onset)
    vv = np.zeros(v.size)
    vv[o:] = v[o:]
    q = np.cumsum(vv) * dt
    dv = np.gradient(vv, dt)
    w = 1.0 / cd.sigma[idx]
    d = np.nan_to_num(cd.difference[idx]) * w
    A = np.stack((q[idx], vv[idx], dv[idx])) * w  # (3, m), weighted
    scale = np.sqrt(np.einsum("ij,ij->i", A, A))
    scale = np.where(scale > 0, scale, 1.0)
    A /= scale[:, None]
    # normal equations of three well-scaled columns (lstsq's SVD of an m x 3 matrix costs more; einsum:
    # no BLAS threads)
    coef = np.linalg.lstsq(np.einsum("ik,jk->ij", A, A), np.einsum("ik,k->i", A, d), rcond=None)[0]
    tot = float(np.einsum("i,i->", d, d))
    if tot <= 0:
        return math.nan, math.nan
    r = d - np.einsum("i,ij->j", coef, A)
    res = float(np.einsum("i,i->", r, r))
    coef = coef / scale
    peak = float(np.max(np.abs(cd.difference[idx]))) or 1.0
    return max(0.0, 1.0 - res / tot), 100.0 * float(coef[0] * q[idx[-1]]) / peak


def multiscale_z(cd: CompensatedDifference, *, start: int, scales: tuple[int, ...] = SCALES,
                 pretrigger_samples: int = 0, return_robust: bool = False,
                 floor_sigma: float = 0.0, exclude: np.ndarray | None = None,
                 return_onset: bool = False, extra: np.ndarray | None = None,
                 extra_scales: tuple[int, ...] = ()) -> tuple[np.ndarray, ...]:
    """Largest noise-normalised compensated difference after centred moving averages of several lengths.

    Parameters
    ----------
    cd : CompensatedDifference
        From :func:`compensated_difference`.
    start : int
        First sample scored (after the front window).
    scales : tuple of int
        Averaging lengths [samples].
    pretrigger_samples : int
        Samples before the front, used to measure how the noise averages down (its correlation).
    floor_sigma : float
        Part of the noise that does not average down [unit of the difference]: the quantisation error
        of a slowly varying record without noise is a deterministic function of the signal and stays
        correlated over long spans (step/sqrt(12) of each record; far less with half a code of noise
        or more, see ``features._quantisation_floor`` for what the floor holds in practice).
    exclude : numpy.ndarray of bool, optional
        Samples not scored (e.g. around an intended chop, where the test wave holds frequencies the
        reference never had).

    Returns
    -------
    max_z : numpy.ndarray
        Largest ``|mean(d)| / sigma_m`` per scale after ``start`` [1] (NaN if the span is shorter
        than the scale).
    first_index : numpy.ndarray
        First sample where each scale exceeds 6 sigma (-1 if never).
    robust_z : numpy.ndarray
        Only with ``return_robust``: largest deviation of the averages from their median over the span,
        in units of their own MAD-based spread [1].
    extra_z : numpy.ndarray
        Only with ``extra`` (last output): largest ``|mean|/sigma_m`` of that second difference trace
        (same noise as ``cd``, e.g. ``cd.difference`` with a fitted term removed) at each of
        ``extra_scales`` (a subset of ``scales``), scored exactly as ``max_z`` would score it; cheaper
        than a second call, which repeats the running sums of the noise.
    onset_index : numpy.ndarray
        Only with ``return_onset``: where each scale's 6-sigma excursion began (-1 if never):
        walking back from the first crossing to the last average whose signed value (sign of the
        excursion) was below one sigma, the last sample of the next window. A change that grows from
        zero crosses 6 sigma late by the time it needs to grow; this estimate is late only by the time
        to grow past one sigma of the average (for a step larger than ``m`` sigma, the step's sample).
        Where the excursion is already under way at ``start`` or right after excluded samples, the
        first sample scored after them (the change began there or earlier).

    Notes
    -----
    For noise with correlation length ``c`` samples the standard deviation of an average over ``m``
    samples is ``sigma sqrt(c / m)`` (``m >> c``); ``c`` is measured from the pre-trigger as
    ``m0 var(mean_m0) / var`` with ``m0 = 8`` (at least 1). The systematic parts of ``sigma`` (timing and
    level tolerance) are averaged like noise, which is why the front is excluded by ``start``.
    """
    if not set(extra_scales) <= set(scales):
        raise ShotcheckError(f"multiscale_z: extra_scales {extra_scales} must be among scales {scales}")
    d = np.nan_to_num(cd.difference, nan=0.0)
    fin = np.isfinite(cd.sigma)
    if exclude is not None:
        fin = fin & ~exclude
        d = np.where(fin, d, 0.0)
    n = d.size
    var = np.where(fin, cd.sigma, 0.0) ** 2
    n0 = int(pretrigger_samples)
    c = _correlation_length(d, n0)
    cs_d = np.concatenate(([0.0], np.cumsum(d)))
    out_x = np.full(len(extra_scales), np.nan)
    if extra is not None:
        d2 = np.nan_to_num(extra, nan=0.0)
        if exclude is not None:
            d2 = np.where(fin, d2, 0.0)
        c2 = _correlation_length(d2, n0)
        cs_d2 = np.concatenate(([0.0], np.cumsum(d2)))
    cs_v = np.concatenate(([0.0], np.cumsum(var)))
    cs_f = np.concatenate(([0], np.cumsum(fin.astype(np.int64))))
    out_z = np.full(len(scales), np.nan)
    out_zr = np.full(len(scales), np.nan)
    out_i = np.full(len(scales), -1, dtype=np.int64)
    out_b = np.full(len(scales), -1, dtype=np.int64)
    for j, m in enumerate(scales):  # loop over a handful of scales, vectorised over samples
        if n - start < m:
            continue
        # windows [lo, lo + m) for lo = start .. n - m, as slices of the running sums
        ok = (cs_f[start + m:] - cs_f[start:n - m + 1]) == m
        mean_d = (cs_d[start + m:] - cs_d[start:n - m + 1]) / m
        mean_v = (cs_v[start + m:] - cs_v[start:n - m + 1]) / m
        sig = np.sqrt(mean_v * min(c, m) / m + floor_sigma * floor_sigma)
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(ok & (sig > 0), np.abs(mean_d) / sig, 0.0)
        out_z[j] = float(z.max()) if z.size else np.nan
        if extra is not None and m in extra_scales:
            mean_2 = (cs_d2[start + m:] - cs_d2[start:n - m + 1]) / m
            sig_2 = sig if c2 == c else np.sqrt(mean_v * min(c2, m) / m + floor_sigma * floor_sigma)
            with np.errstate(divide="ignore", invalid="ignore"):
                z_2 = np.where(ok & (sig_2 > 0), np.abs(mean_2) / sig_2, 0.0)
            out_x[extra_scales.index(m)] = float(z_2.max()) if z_2.size else np.nan
        # the same averages against their own typical size over the span (MAD): blind to a change that
        # lasts most of the span, but immune to noise that does not average down (interference, drift)
        # (averages over m samples barely change from one sample to the next: every (m // 8)-th serves
        # the median and the MAD as well as all of them, the maximum below still sees every one)
        md = mean_d[ok]
        md_s = md[:: max(1, m // 8)]
        if md_s.size >= 8:
            centre = median1d(md_s)
            scale_m = median1d(np.abs(md_s - centre)) / 0.6745
            if scale_m > 0:
                out_zr[j] = float(np.max(np.abs(md - centre)) / scale_m)
        hit = np.flatnonzero(z > 6.0)
        if hit.size:
            h = int(hit[0])
            out_i[j] = start + h + m // 2
            if return_onset:
                # signed z of the windows before the crossing; the excursion began after the last one
                # below 1 (windows [lo, lo + m): the first window past it ends on the onset sample)
                s_z = np.sign(mean_d[h]) * mean_d[:h] / np.where(sig[:h] > 0, sig[:h], np.inf)
                quiet = (s_z < 1.0) & ok[:h]
                stop = np.flatnonzero(quiet | ~ok[:h])
                k = int(stop[-1]) if stop.size else -1
                if k >= 0 and quiet[k]:
                    out_b[j] = start + k + m
                else:  # excursion already under way where scoring (re)starts: no later than there
                    out_b[j] = start + k + 1
    out: tuple[np.ndarray, ...] = (out_z, out_i, out_zr) if return_robust else (out_z, out_i)
    if return_onset:
        out = (*out, out_b)
    return (*out, out_x) if extra is not None else out


def _correlation_length(d: np.ndarray, n0: int) -> float:
    """Correlation length of the noise in samples from the pre-trigger: ``m0 var(mean_m0) / var``
    with ``m0 = 8``, within 1..8 (1 with fewer than 64 pre-trigger samples)."""
    c = 1.0
    if n0 >= 64:
        seg = d[:n0] - np.mean(d[:n0])
        m0 = 8
        k = n0 // m0
        means = seg[: k * m0].reshape(k, m0).mean(axis=1)
        v1 = float(np.var(seg))
        if v1 > 0:
            c = float(np.clip(m0 * np.var(means) / v1, 1.0, m0))
    return c


def tone_aware_offsets(pretrigger: np.ndarray, dt: float, freqs_Hz: list[float], *,
                       min_periods: float = 0.25, f_accept: float = 8.0,
                       min_offset_se: float = 3.0) -> np.ndarray | None:
    """Baseline errors left by interference tones in pre-trigger means.

    A baseline taken as the mean of a short pre-trigger is biased when the channel carries a tone
    that does not complete whole periods there (up to about 0.2 of the tone's amplitude for 1.3
    periods). The bias is harmless in a current channel (a constant in the difference, removed with
    the tone) but not in a voltage channel: the impulse response turns a constant voltage error into
    a slowly growing current (the winding's inductance). Each channel's pre-trigger is fitted with a
    constant plus the given tones by least squares; where the tones explain significantly more than
    a constant alone (F statistic above ``f_accept``) and the fitted constant is determined (at least
    ``min_offset_se`` standard errors from zero), it is the channel's offset.

    Parameters
    ----------
    pretrigger : numpy.ndarray, shape (channels, samples)
        Pre-trigger samples of each channel (any unit), for example of an aligned pair whose records
        had their baselines removed over their own, possibly longer, pre-triggers.
    dt : float
        Sample interval [s].
    freqs_Hz : list of float
        Tone frequencies [Hz], for example those :func:`remove_stationary_tones` found.
    min_periods : float
        Tones completing fewer periods in the pre-trigger are left out (they cannot be told from an
        offset) [1].
    f_accept : float
        Smallest F statistic (tones against a constant) that accepts the fit [1].
    min_offset_se : float
        An accepted fit's constant is applied only where it lies at least this many of its standard
        errors from zero [1]. Under about a period, a tone and a constant are nearly collinear over the
        pre-trigger, and the fitted constant then follows the noise and the tone's phase (seen: a test
        voltage's offset 13 times the tone that was removed from it, from two tones of 0.3 and 0.6
        periods, which the prediction turned into a slow false difference).

    Returns
    -------
    numpy.ndarray or None
        Offset to subtract from each channel (same unit), zero where the tones were not accepted;
        None when no channel changes.
    """
    pre = np.asarray(pretrigger, dtype=np.float64)
    n0 = pre.shape[1]
    fs = [f for f in freqs_Hz if f * n0 * dt >= min_periods]
    if not fs or n0 < 2 * len(fs) + 8:
        return None
    t = np.arange(n0) * dt
    A = np.stack([np.ones(n0)] + [h(2 * np.pi * f * t) for f in fs for h in (np.cos, np.sin)], axis=1)
    coef, *_ = np.linalg.lstsq(A, pre.T, rcond=None)
    rss1 = np.sum((pre.T - A @ coef) ** 2, axis=0)
    mean = pre.mean(axis=1)
    rss0 = np.sum((pre - mean[:, None]) ** 2, axis=1)
    p = A.shape[1] - 1
    s2 = rss1 / (n0 - p - 1)  # residual variance per channel
    f_stat = (rss0 - rss1) / p / np.maximum(s2, 1e-300)
    # standard error of the fitted constant: residual variance times the (0, 0) entry of (A'A)^-1
    se = np.sqrt(s2 * float(np.linalg.pinv(A.T @ A)[0, 0]))
    off = np.where((f_stat > f_accept) & (np.abs(coef[0]) > min_offset_se * se), coef[0], 0.0)
    return off if np.any(off != 0.0) else None


#: Largest ``|K|`` at which a tone is fitted through the reference's route [1]. Where the test wave
#: holds far more of a frequency than the reference, the prediction there is the reference's noise
#: times ``|K|`` and a fit through that route follows the amplified noise (or a fault's ringing the
#: test wave excites); the tones of the training families that needed the route had ``|K|`` up to 4.
MAX_ROUTE_GAIN = 10.0


@dataclasses.dataclass(frozen=True)
class ToneRoutes:
    """How a tone in either record's current reaches the compensated difference.

    A tone in the test current passes the band limit ``g`` only; a tone in the reference current is
    part of the measured impulse response and reaches the difference through the prediction
    ``K = V_r* V_t / (|V_r|^2 + lambda)``, with the opposite sign. Where the test wave has the
    reference's shape, ``K`` is close to ``g`` and both routes give the same sinusoid; for a chopped
    test shot ``K`` is not (the chopped wave's spectrum has zeros about every ``1/T_c``) and the
    reference's tone arrives with an envelope that changes along the record. See
    :func:`compensated_difference` for the symbols (all arrays are those it uses).

    Attributes
    ----------
    window : numpy.ndarray
        The exponential window ``w`` [1].
    gain : numpy.ndarray
        ``1 / w`` [1].
    band : numpy.ndarray
        ``g = |V_r|^2 / (|V_r|^2 + lambda)`` per frequency bin [1].
    prediction : numpy.ndarray
        ``K`` per frequency bin [1].
    n_fft : int
        Transform length the spectra were taken with [samples].
    weight : numpy.ndarray, optional
        :func:`noise_weight` per frequency bin, applied to both routes as to the difference [1].
    """

    window: np.ndarray
    gain: np.ndarray
    band: np.ndarray
    prediction: np.ndarray
    n_fft: int
    weight: np.ndarray | None = None

    def matter(self, f: float, dt: float, span_samples: int) -> bool:
        """Whether the routes can change how a tone of frequency ``f`` [Hz] looks over a span of
        ``span_samples``: the reference resolves ``f`` (``g >= 0.5``; beyond, neither route passes a tone),
        ``|K|`` there is at most :data:`MAX_ROUTE_GAIN`, and ``K`` changes by at least 20 % within one over
        the span's duration of ``f``. Where ``K`` is nearly constant across the tone's line, the
        reference's tone arrives as a scaled sinusoid, which the plain test already judges."""
        k = int(round(f * self.n_fft * dt))
        d = max(1, int(round(self.n_fft / span_samples)))
        if not (d <= k < self.band.size - d) or self.band[k] < 0.5:
            return False
        K = self.prediction
        if abs(K[k]) > MAX_ROUTE_GAIN:
            return False
        return bool(max(abs(K[k + d] - K[k]), abs(K[k - d] - K[k])) >= 0.2 * abs(K[k]))

    def basis(self, f: float, dt: float) -> np.ndarray:
        """Rows of a tone of frequency ``f`` [Hz] as it appears in the difference [unit of the tone].

        Returns
        -------
        numpy.ndarray, shape (5, samples)
            Cosine and sine in the test current, cosine and sine in the reference current (sign
            included), and a constant.
        """
        n = self.window.size
        z = phasor(f, dt, 0, n) * self.window
        spec = sfft.rfft(np.stack((z.real, z.imag)), self.n_fft, axis=-1)
        band, pred = self.band, self.prediction
        if self.weight is not None:
            band, pred = band * self.weight, pred * self.weight
        back = sfft.irfft(np.concatenate((spec * band, -spec * pred)), self.n_fft, axis=-1)
        return np.vstack((back[:, :n] * self.gain, np.ones(n)))


def _least_squares(B: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Coefficients ``c`` minimising ``|x - c @ B|`` (rows of ``B`` the regressors), by the normal
    equations with a tiny ridge (rows that are nearly collinear share their weight)."""
    G = B @ B.T
    return np.linalg.solve(G + 1e-12 * np.trace(G) * np.eye(G.shape[0]), B @ x)


def _basis(n: int, dt: float, f: float) -> np.ndarray:
    """Rows cosine, sine and one of a tone of ``f`` [Hz] at the samples ``0 .. n - 1`` of a record."""
    z = phasor(f, dt, 0, n)
    B = np.empty((3, int(n)))
    B[0] = z.real
    B[1] = z.imag
    B[2] = 1.0
    return B


def _fit_tone(x: np.ndarray, B: np.ndarray) -> tuple[float, float, np.ndarray]:
    """Least-squares amplitude and phase of a tone (with an offset) in ``x``; ``B`` its :func:`_basis`
    over the samples of ``x``."""
    coef = np.linalg.solve(B @ B.T + 1e-12 * np.eye(3) * B.shape[1], B @ x)  # normal equations, 3 x 3
    return float(np.hypot(coef[0], coef[1])), float(np.arctan2(coef[1], coef[0])), coef


@functools.lru_cache(maxsize=8)
def _hann(m: int) -> np.ndarray:
    """``np.hanning(m)``, made once per length (read-only)."""
    w = np.hanning(m)
    w.flags.writeable = False
    return w


def remove_stationary_tones(
    d: np.ndarray, dt: float, span: np.ndarray, pretrigger_samples: int, *, max_tones: int = 3,
    min_periods: float = 2.0, stationarity: float = 0.35, candidates: int = 3,
    routes: ToneRoutes | None = None,
) -> tuple[np.ndarray, list[tuple[float, float]]]:
    """Remove narrow-band interference (constant-amplitude tones) from a difference trace.

    A tone is taken as interference, not as an effect of the winding, when it has the same amplitude
    and phase in each third of the compared span (a fault's difference begins at the
    fault and the winding damps its oscillations). Each accepted tone is fitted by least squares over
    the whole span (frequency refined by parabolic interpolation of the spectral peak) and subtracted
    from the whole record; a constant offset left by a biased baseline goes with it.

    With ``routes``, a tone may also sit in the reference current, which reaches the difference
    through the prediction (:class:`ToneRoutes`): where a peak is no plain sinusoid and the routes
    matter at its frequency (:meth:`ToneRoutes.matter`), the two routes' cosines and sines are fitted
    together, and the tone is accepted when the signal fitted over each third alone (and over the
    pre-trigger alone, when it holds two periods) departs from the whole span's fit by at most
    ``stationarity`` of the latter (RMS over that segment), and when it stands above the noise sample
    by sample. The test is the plain one (a fault's difference starts at the fault and no fixed
    combination of the two routes follows it), applied to what interference looks like there.

    When no single tone of the ``candidates`` peaks passes, the largest peak is tried as two close
    tones (two records' interference at nearby frequencies below :data:`PAIR_MAX_HZ`, whose beating
    over the span fails the single tone's test): see :func:`_stationary_pair`.

    Parameters
    ----------
    d : numpy.ndarray
        Difference trace (NaN outside the span allowed).
    dt : float
        Sample interval [s].
    span : numpy.ndarray of int
        Indices of the compared span.
    pretrigger_samples : int
        Samples before the front (kept in the span's fit; with ``routes``, also a segment of its own).
    max_tones : int
        Tones are searched while fewer than this many were removed (a pair found last may make one more).
    min_periods : float
        A tone must complete this many periods in each third of the span [1].
    stationarity : float
        Largest relative deviation of a third's amplitude from the whole span's [1].
    candidates : int
        Spectral peaks tried, largest first, before the search ends (a difference whose largest peak
        is not stationary, a chop's oscillation for instance, may hold a tone at a smaller one).
    routes : ToneRoutes, optional
        How a tone in either record's current reaches ``d``; without it, tones are plain sinusoids.

    Returns
    -------
    cleaned : numpy.ndarray
    tones : list of (frequency_Hz, amplitude)
        Amplitude in the unit of ``d``: of the sinusoid, or ``sqrt(2)`` times the RMS of a two-route fit.
    """
    out = np.array(d, dtype=np.float64, copy=True)
    if span.size < 64:
        return out, []
    idx = np.arange(int(span[0]), int(span[-1]) + 1)
    x = np.nan_to_num(out[idx])
    m = idx.size
    third = m // 3
    f_min = min_periods / (third * dt)
    tones: list[tuple[float, float]] = []
    n_fft = sfft.next_fast_len(2 * m, real=True)
    win = _hann(m)
    freqs = sfft.rfftfreq(n_fft, dt)
    df = float(freqs[1] - freqs[0])
    while len(tones) < max_tones:  # loop over a few tones
        mag = np.abs(sfft.rfft((x - x.mean()) * win, n_fft))
        mag[freqs < f_min] = 0.0
        peaks = np.flatnonzero((mag[1:-1] > mag[:-2]) & (mag[1:-1] >= mag[2:])) + 1
        peaks = peaks[np.argsort(mag[peaks])[::-1][:candidates]]
        for kpk in peaks:
            f = _peak_Hz(mag, int(kpk), df)
            found = _stationary_tone(x, idx, out.size, dt, f, third, stationarity, routes, pretrigger_samples)
            if found is not None:
                break
        else:
            # no single tone passed: the largest peak may be two close tones beating over the span
            pair = _stationary_pair(x, idx, out.size, dt, _peak_Hz(mag, int(peaks[0]), df), third, stationarity,
                                    pretrigger_samples) if peaks.size else None
            if pair is None:
                break
            tone, (f1, f2), amp = pair
            out = out - tone
            x = x - tone[idx]
            tones += [(f1, amp), (f2, amp)]
            continue
        tone, amp = found
        out = out - tone
        x = x - tone[idx]
        tones.append((f, amp))
    return out, tones


def _stationary_pair(x: np.ndarray, idx: np.ndarray, n: int, dt: float, f0: float, third: int,
                     stationarity: float, pretrigger_samples: int) -> tuple[np.ndarray, tuple[float, float], float] | None:
    """Two close tones around ``f0`` [Hz], if ``x`` holds them as interference.

    The pair is searched on 25-ns-scale block means of the span (frequencies on a grid of 0.1/T around
    ``f0``, T the span's duration [s], at least 0.2/T apart, then refined to 0.02/T), each candidate pair
    scored by its least-squares fit (the normal equations of all pairs solved at once). The best pair is
    fitted jointly with a constant over the span and accepted when (1) the fit over each third alone
    departs from the whole span's by at most ``stationarity`` of the latter (RMS), (2) its amplitude
    stands above the noise of the residual, and (3) over the pre-trigger it takes out more power than
    :data:`VOLTAGE_TONE_PENALTY` noise variances: interference was there before the front, while two
    close tones can also draw the envelope of a fault's slow ringing over the span (so a pre-trigger of
    fewer than 16 samples gives no pair).

    Parameters
    ----------
    x : numpy.ndarray
        Difference over the span (NaN already replaced).
    idx : numpy.ndarray of int
        Record indices of the span (contiguous).
    n : int
        Record length [samples].
    dt : float
        Sample interval [s].
    f0 : float
        Frequency of the largest spectral peak [Hz].
    third : int
        Length of a third of the span [samples].
    stationarity : float
        Largest relative RMS deviation of a third's fit from the whole span's [1].
    pretrigger_samples : int
        Samples before the front.

    Returns
    -------
    (tone, (f1_Hz, f2_Hz), amplitude) or None
        ``tone`` over the whole record (with the constant), the two frequencies [Hz] and ``sqrt(2)``
        times the RMS of the pair over the span, in the unit of ``x``.
    """
    m = idx.size
    T = m * dt
    pre = int(np.searchsorted(idx, pretrigger_samples))  # pre-trigger samples of the span
    if f0 > PAIR_MAX_HZ or f0 * T < 4.0 or pre < 16:
        return None
    B = max(1, int(round(0.05 / (PAIR_MAX_HZ * dt))))  # blocks well below the tones' period
    kb = m // B
    xb = x[: kb * B].reshape(kb, B).mean(axis=1)
    tb = (np.arange(kb) * B + 0.5 * (B - 1)) * dt
    xb = xb - xb.mean()  # the constant fitted out once (the tones' projection on it is small over 4+ periods)

    def best_pair(fs: np.ndarray, E: np.ndarray, sep: float) -> tuple[float, float, float]:
        A = np.vstack([E.real, E.imag])  # cos, sin of each frequency at the block times
        return _best_pair(A - A.mean(axis=1, keepdims=True), xb, fs, sep)

    coarse = f0 + np.arange(-16, 17) * 0.1 / T
    _, f1, f2 = best_pair(coarse, _grid_phasors(coarse[0], 0.1 / T, coarse.size, tb), 0.2 / T)
    fine = np.arange(-5, 6) * 0.02 / T
    E = np.vstack([_grid_phasors(f + fine[0], 0.02 / T, fine.size, tb) for f in (f1, f2)])
    _, f1, f2 = best_pair(np.concatenate((f1 + fine, f2 + fine)), E, 0.15 / T)
    rows = np.vstack([_basis(n, dt, f1)[:2], _basis(n, dt, f2)])  # cos, sin, cos, sin, one
    Bs = rows[:, idx[0]:idx[-1] + 1]
    coef = _least_squares(Bs, x)
    whole = coef[:-1] @ Bs[:-1]
    for i in range(3):
        sl = slice(i * third, (i + 1) * third)
        own = _least_squares(Bs[:, sl], x[sl])
        if not np.linalg.norm(own[:-1] @ Bs[:-1, sl] - whole[sl]) <= stationarity * np.linalg.norm(whole[sl]):
            return None
    noise = _robust_sigma(np.diff(x - coef @ Bs)) / math.sqrt(2.0)
    amp = float(math.sqrt(2.0) * np.std(whole))
    if not amp > max(4.0 * noise * math.sqrt(2.0 / m) * 3.0, 0.5 * noise):
        return None
    # interference was there before the front, a change of the winding was not: over the pre-trigger the
    # pair must take out more power than a sinusoid a record does not hold would (two close tones can
    # also draw the envelope of a fault's slow ringing over the span, thirds and all)
    if not noise > 0:
        return None
    xp = x[:pre] - np.mean(x[:pre])
    wp = whole[:pre] - np.mean(whole[:pre])
    if not (xp @ xp - (xp - wp) @ (xp - wp)) / noise**2 > VOLTAGE_TONE_PENALTY:
        return None
    return coef @ rows, (float(f1), float(f2)), amp


def _best_pair(A: np.ndarray, y: np.ndarray, fs: np.ndarray, sep_Hz: float) -> tuple[float, float, float]:
    """Of all pairs of the frequencies ``fs`` [Hz] (ascending) at least ``sep_Hz`` apart, the one whose
    four regressors fit ``y`` best by least squares.

    Rows ``k`` and ``k + K`` of ``A`` (``K = fs.size``) are the cosine and sine of ``fs[k]`` at the
    samples of ``y``, other regressors already projected out. The normal equations of all pairs are
    solved at once (a tiny ridge keeps near-collinear pairs solvable).

    Returns
    -------
    (reduction, f_low_Hz, f_high_Hz)
        Reduction of the squared residual in the unit of ``y`` squared (-1 when no pair is far enough
        apart, with the grid's ends) and the pair's frequencies [Hz].
    """
    K = fs.size
    G = A @ A.T
    b = A @ y
    i, k = np.triu_indices(K, 1)
    ok = fs[k] - fs[i] >= sep_Hz
    i, k = i[ok], k[ok]
    if not i.size:
        return -1.0, float(fs[0]), float(fs[-1])
    ix = np.stack((i, i + K, k, k + K), axis=1)
    Gp = G[ix[:, :, None], ix[:, None, :]] + 1e-12 * np.trace(G) / (2 * K) * np.eye(4)
    bp = b[ix]
    red = np.einsum("pi,pi->p", bp, np.linalg.solve(Gp, bp[..., None])[..., 0])
    p = int(np.argmax(red))
    return float(red[p]), float(fs[i[p]]), float(fs[k[p]])


def _grid_phasors(f_first_Hz: float, step_Hz: float, count: int, t_s: np.ndarray) -> np.ndarray:
    """``exp(2 pi i f t)`` for the frequencies ``f_first_Hz + j step_Hz``, ``j < count`` [Hz], at the
    times ``t_s`` [s]: one row of complex exponentials per frequency (shape ``(count, t_s.size)``).

    Two exponentials are evaluated and the other rows follow by products (a rounding error of about
    ``count`` machine epsilons), several times faster than a cosine and a sine per entry.
    """
    rows = np.empty((count, t_s.size), dtype=np.complex128)
    rows[0] = np.exp(2j * np.pi * f_first_Hz * t_s)
    rows[1:] = np.exp(2j * np.pi * step_Hz * t_s)
    return np.cumprod(rows, axis=0)


#: Highest frequency [Hz] at which two close tones are searched as a pair (the slow tones whose
#: beating over the span fails the single tone's test).
PAIR_MAX_HZ = 2e6


def _peak_Hz(mag: np.ndarray, k: int, df: float) -> float:
    """Frequency [Hz] of the spectral peak at bin ``k`` of a Hann-windowed, 2x zero-padded magnitude
    spectrum with bins ``df`` [Hz] apart: Gaussian (log-parabolic) interpolation, to a small fraction
    of a bin, so that a tone fitted at it keeps its phase over the whole span."""
    a, b, c = np.log(mag[k - 1:k + 2] + 1e-300)
    den = a - 2 * b + c
    shift = 0.5 * (a - c) / den if den != 0 else 0.0
    return float((k + np.clip(shift, -0.5, 0.5)) * df)


#: A line of the two voltages' difference is a candidate tone when it stands this many times above the
#: median magnitude of its neighbourhood (bins 5-24 on either side of a Hann-windowed, 2x zero-padded
#: spectrum): the wave shapes' own difference is smooth there.
VOLTAGE_LINE_PROMINENCE = 8.0

#: Pre-trigger power [noise variances] a voltage tone must take out of its record to be removed. A
#: sinusoid ``t`` that a record does not hold takes out ``2 <n, t> - |t|^2`` of its noise ``n``: more than
#: 18 needs a standard normal deviate above ``(18 + T) / (2 sqrt(T))`` with ``T = |t|^2``, at least 4.24.
VOLTAGE_TONE_PENALTY = 18.0

#: The same for a line of one amplitude and phase over each third of the span's last three quarters
#: (interference, whichever record holds it; the pre-trigger only has to say which).
STEADY_TONE_PENALTY = 2.0


@functools.lru_cache(maxsize=8)
def _smooth_rows(m: int) -> np.ndarray:
    """Legendre polynomials of degrees 0-3 over ``m`` samples (rows; read-only): the smooth part of a
    difference of two wave shapes over a few tens of microseconds."""
    P = np.polynomial.legendre.legvander(np.linspace(-1.0, 1.0, m), 3).T.copy()
    P.flags.writeable = False
    return P


def _voltage_lines(rv: np.ndarray, tv: np.ndarray, dt: float, idx: np.ndarray, count: int = 2) -> tuple[float, ...]:
    """Frequencies [Hz] of the (at most ``count``) most prominent narrow lines of ``tv - rv`` over the
    consecutive samples ``idx``, refined by Gaussian interpolation of the peak."""
    m = idx.size
    d = tv[idx[0]:idx[-1] + 1] - rv[idx[0]:idx[-1] + 1]
    P = _smooth_rows(m)
    d = d - _least_squares(P, d) @ P  # the wave shapes' smooth difference (a tail, a collapse's remainder)
    n_fft = sfft.next_fast_len(2 * m, real=True)
    mag = np.abs(sfft.rfft(d * _hann(m), n_fft))
    if mag.size < 64:
        return ()
    k = np.flatnonzero((mag[1:-1] > mag[:-2]) & (mag[1:-1] >= mag[2:])) + 1
    k = k[(k > 8) & (k < mag.size - 25)]
    if not k.size:
        return ()
    k = k[np.argsort(mag[k])[::-1][: 8 * count]]
    df = 1.0 / (n_fft * dt)
    out: list[float] = []
    for kk in k:  # the few largest peaks
        local = np.median(np.concatenate((mag[max(1, kk - 24):kk - 4], mag[kk + 5:kk + 25])))
        if mag[kk] > VOLTAGE_LINE_PROMINENCE * local:
            out.append(_peak_Hz(mag, int(kk), df))
            if len(out) == count:
                break
    return tuple(out)


def remove_voltage_tones(ref_voltage: np.ndarray, test_voltage: np.ndarray, dt: float, pretrigger_samples: int,
                         span: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, list[tuple[float, float, str]]]:
    """Find and remove interference tones on either voltage channel, before the current is predicted.

    A tone picked up by a voltage channel is a voltage the winding never saw; the prediction answers it
    through the winding's admittance (whose inductive part integrates it, and the window's transients
    grow along the record), so it reaches the compensated difference as a slow residual, not as a
    sinusoid the difference's tone search can find. The two per-unit voltages have one shape when the
    winding is healthy, so a tone on either shows as a narrow line of their difference, once that
    difference's smooth part (cubic polynomial) is taken out; the record whose pre-trigger holds that
    sinusoid owns it (a wave shape's own oscillation, of the generator or of a chop, is not there before
    the front). The sinusoid is removed from the owner's whole record, and that record's baseline is
    taken again from its pre-trigger (the tone had biased it). The fitted sinusoid is the two records'
    tones' difference: where both hold a tone of one frequency, both voltages keep the same tone
    afterwards, which the prediction (made from their ratio) does not see.

    Lines are looked for over the whole span (at most two; it resolves two close lines best) and over
    its last three quarters (at most two more), and fitted together, beside the smooth part, over those
    three quarters with a Hann taper. A chopped test shot against a full-wave reference, or a collapse
    to ground, makes the difference a step whose spectrum buries a line over the whole span, and a
    sinusoid fitted there without the taper takes in the smooth remainder's leakage (in the training
    families such tones were missed, or fitted at 0.2 to 34 times their size).

    Each line is given to the record whose pre-trigger it explains, or to neither: of every such
    assignment, the one kept takes the most power out of the pre-triggers (each record's in units of
    its own noise variance, the sinusoids removed from their owners), less
    :data:`VOLTAGE_TONE_PENALTY` noise variances per line removed (where a record holds no such tone,
    removing one adds power on average; with white Gaussian noise of the estimated variance, a line
    that a record does not hold is given to it with a probability of at most about 1e-5, whatever its
    size). A line whose fit over each third of those three quarters has the whole fit's amplitude and
    phase (within 35 % of its size) is interference whoever holds it (a change of the winding begins
    at the fault and is damped, a chop's oscillation decays), and pays only
    :data:`STEADY_TONE_PENALTY`: a pre-trigger of a quarter period holds an almost straight stretch of
    a slow tone, which takes out fewer than 18 noise variances at some phases. The lines are decided
    together because a pre-trigger shorter than a period cannot tell one sinusoid from another: the
    test record's tone of one frequency may explain part of a sinusoid of another that the reference
    holds, and judged alone such a line was left in or given to the wrong record.

    Two recorders' tones less than about 1.5 periods of their difference apart over the three quarters
    (20 kHz over 50 us) are not resolved there: their difference of voltages shows one line whose
    envelope beats, or two lines each pulled towards the other. Fitted as one sinusoid such a line
    explained neither pre-trigger and was left in, or was given to one record at a frequency between
    the two. A line with no neighbour within two periods whose fit is not steady, and two lines
    within two periods of each other, are therefore searched as a pair of frequencies (on block means
    of the difference, over a grid of pairs within 1.6 periods of the line); a single line is replaced
    where the pair explains :data:`SPLIT_GAIN` noise variances more than the line. The pairs are kept
    only where each of them then goes to a record and more pre-trigger power is taken out than
    without them.

    Parameters
    ----------
    ref_voltage, test_voltage : numpy.ndarray
        Aligned voltages, each in per unit of its own test voltage [1].
    dt : float
        Sample interval [s].
    pretrigger_samples : int
        Samples before the front [samples].
    span : numpy.ndarray of int or None
        Consecutive sample indices over which the lines are looked for and fitted (the compared span).

    Returns
    -------
    ref_voltage, test_voltage : numpy.ndarray
        The voltages with the tones found removed (copies).
    tones : list of (float, float, str)
        Frequency [Hz], amplitude [1], and the record it was on (``"test"`` or ``"reference"``).

    Raises
    ------
    ShotcheckError
        Voltages of unequal length, a sample interval that is not positive.
    """
    rv = np.array(ref_voltage, dtype=np.float64, copy=True)
    tv = np.array(test_voltage, dtype=np.float64, copy=True)
    if rv.ndim != 1 or rv.shape != tv.shape:
        raise ShotcheckError(f"remove_voltage_tones: the voltages must be 1-D arrays of one length, got {rv.shape} "
                             f"and {tv.shape}")
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    n0 = int(pretrigger_samples)
    found: list[tuple[float, float, str]] = []
    if span is None or span.size < 256 or n0 < 16:
        return rv, tv, found
    # the lines are looked for over the whole span (which resolves two close ones better) and over
    # its last three quarters, where they are fitted: a chopped test shot (or a collapse to ground)
    # makes the two voltages' difference a step whose spectrum buries any line over the whole span,
    # and over its smooth remainder that difference leaks into a sinusoid fitted without a taper
    seg = span[span.size // 4:]
    lines: list[float] = []
    for f in _voltage_lines(rv, tv, dt, span) + _voltage_lines(rv, tv, dt, seg):  # at most two each
        if all(abs(f - g) * seg.size * dt > 1.0 for g in lines):  # a period apart over the segment
            lines.append(f)
    if not lines:
        return rv, tv, found
    sl = slice(int(seg[0]), int(seg[-1]) + 1)
    d = tv[sl] - rv[sl]
    rows = np.vstack([_basis(rv.size, dt, f)[:2] for f in lines])  # cosine and sine of each line
    coef, steady = _fit_lines(d, rows[:, sl])
    xs = [x[:n0] - x[:n0].mean() for x in (tv, rv)]
    # each record's noise variance (a quantised pre-trigger with little noise has mostly equal
    # neighbours, so the mean absolute difference bounds it from below)
    var = [max(_robust_sigma(np.diff(x[:n0])) ** 2, float(np.mean(np.abs(np.diff(x[:n0])))) ** 2 * math.pi / 2.0,
               1e-30) / 2.0 for x in (tv, rv)]
    best, best_gain, tones = _owners(rows, coef, steady, n0, xs, var)
    # two recorders' tones closer than the segment resolves show as one line whose envelope beats (its
    # fit changes along the segment), or as two lines pulled apart: searched as a pair of frequencies,
    # kept where each of the pair then goes to a record and more pre-trigger power is taken out
    lines2, k = _close_pairs(d, int(seg[0]), dt, lines, steady)
    if k < len(lines2):  # lines2[k:] are the pairs found
        rows2 = np.vstack([_basis(rv.size, dt, f)[:2] for f in lines2])
        coef2, steady2 = _fit_lines(d, rows2[:, sl])
        best2, gain2, tones2 = _owners(rows2, coef2, steady2, n0, xs, var)
        if best2 and all(o is not None for o in best2[k:]) and gain2 > best_gain:
            lines, coef, best, best_gain, tones = lines2, coef2, best2, gain2, tones2
    if not best:
        return rv, tv, found
    for f, c, tone, owner in zip(lines, coef[:2 * len(lines)].reshape(-1, 2), tones, best, strict=True):
        if owner is None:
            continue
        if owner == 0:
            tv -= tone
        else:
            rv += tone
        found.append((f, float(np.hypot(c[0], c[1])), "test" if owner == 0 else "reference"))
    if 0 in best:
        tv -= tv[:n0].mean()
    if 1 in best:
        rv -= rv[:n0].mean()
    return rv, tv, found


#: Noise variances of the tapered difference that a pair of sinusoids must explain beyond the one line
#: it replaces (:func:`_close_pairs`): a fault's difference or a chop's remainder, fitted as two
#: sinusoids, gains a little anywhere.
SPLIT_GAIN = 50.0


def _fit_lines(d: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Tapered least-squares fit of lines (``rows``: the cosine and sine of each over the samples of
    ``d``) beside a cubic to ``d``, and whether each line keeps the whole fit's amplitude and phase
    (within 35 %) over each third of ``d``.

    Returns
    -------
    coef : numpy.ndarray
        Cosine and sine coefficient of each line in turn [unit of ``d``], then the cubic's four.
    steady : numpy.ndarray of bool
        One per line.
    """
    m = d.size
    B = np.vstack([rows, _smooth_rows(m)])
    w = np.sqrt(_hann(m))
    coef = _least_squares(B * w, d * w)  # T_test - T_ref and a smooth part, tapered
    third = m // 3
    n = rows.shape[0]
    steady = np.ones(n // 2, bool)
    z_all = coef[0:n:2] + 1j * coef[1:n:2]
    wq = np.sqrt(_hann(third))
    for i in range(3):
        q = slice(i * third, (i + 1) * third)
        Bq = np.vstack([B[:n, q], _smooth_rows(third)])
        cq = _least_squares(Bq * wq, d[q] * wq)
        zq = cq[0:n:2] + 1j * cq[1:n:2]
        steady &= np.abs(zq - z_all) <= 0.35 * np.abs(z_all)
    return coef, steady


def _owners(rows: np.ndarray, coef: np.ndarray, steady: np.ndarray, n0: int, xs: list[np.ndarray],
            var: list[float]) -> tuple[tuple, float, list[np.ndarray]]:
    """The assignment of each line to the test record (0), the reference (1) or neither (None) that takes
    the most noise-normalised power out of the two pre-triggers ``xs`` (means removed; noise variances
    ``var``) less the lines' penalties (``()`` if none gains), its gain [noise variances], and each
    line's sinusoid over the whole record (``rows``: each line's cosine and sine there; ``coef`` and
    ``steady`` from :func:`_fit_lines`)."""
    # a line of constant amplitude and phase over each third of the segment is interference, whether
    # or not a short pre-trigger can tell whose: it needs less evidence there
    penalty = np.where(steady, STEADY_TONE_PENALTY, VOLTAGE_TONE_PENALTY)
    tones = [coef[2 * j:2 * j + 2] @ rows[2 * j:2 * j + 2] for j in range(steady.size)]
    pre = [t[:n0] - t[:n0].mean() for t in tones]
    best, best_gain = (), 0.0
    for owners in itertools.product((0, 1, None), repeat=steady.size):  # test, reference or neither
        gain = -float(sum(pj for pj, o in zip(penalty, owners, strict=True) if o is not None))
        for r, sign in ((0, 1.0), (1, -1.0)):  # noise variances taken out of each pre-trigger
            mine = [p for p, o in zip(pre, owners, strict=True) if o == r]
            if mine:
                t = sign * np.sum(mine, axis=0)
                gain += (2.0 * float(np.dot(xs[r], t)) - float(np.dot(t, t))) / var[r]
        if gain > best_gain:
            best, best_gain = owners, gain
    return best, best_gain, tones


def _close_pairs(d: np.ndarray, start: int, dt: float, lines: list[float], steady: np.ndarray,
                 ) -> tuple[list[float], int]:
    """Lines that may be two tones closer than ``d`` resolves, searched as pairs of frequencies.

    Over ``T`` (the duration of ``d``) two sinusoids less than about ``1.5 / T`` apart make one line
    whose envelope beats; a little further apart, two lines each pulled away from its tone by the
    other's. Candidates are a line with no other within ``2 / T`` whose fit is not steady, and two
    lines within ``2 / T`` of each other and of no third (:func:`_split_line`).

    Returns
    -------
    lines : list of float
        The lines not replaced, then the pairs found [Hz].
    first_pair : int
        Index of the first line of the pairs (``len(lines)`` when none was found).
    """
    T = d.size * dt
    groups = []
    for j in range(len(lines)):
        near = [k for k in range(len(lines)) if k != j and abs(lines[k] - lines[j]) * T <= 2.0]
        if not near and not steady[j]:
            groups.append((j,))
        elif len(near) == 1 and near[0] > j and not any(
                abs(lines[k] - lines[near[0]]) * T <= 2.0 for k in range(len(lines)) if k not in (j, near[0])):
            groups.append((j, near[0]))
    found = {}
    if groups:  # most pairs have none: the noise's median is not taken for them
        sig2 = _robust_sigma(np.diff(d)) ** 2 / 2.0  # noise variance of d per sample (the lines are slow)
    for grp in groups:
        pair = _split_line(d, start, dt, lines, grp, sig2)
        if pair is not None:
            found[grp] = pair
    gone = {j for grp in found for j in grp}
    kept = [f for j, f in enumerate(lines) if j not in gone]
    return kept + [f for pair in found.values() for f in pair], len(kept)


def _split_line(d: np.ndarray, start: int, dt: float, lines: list[float], group: tuple[int, ...], sig2: float,
                ) -> tuple[float, float] | None:
    """Two frequencies [Hz] within 1.6 over the segment's duration of the lines ``group`` (one line, or
    two close ones) whose sinusoids fit ``d`` better than those lines by :data:`SPLIT_GAIN` noise
    variances ``sig2`` (one line) or at all (two), or None."""
    m = d.size
    T = m * dt
    q = max(1, int(1.0 / (10.0 * (max(lines) + 2.0 / T) * dt)))  # block means: 10 per period of the top line
    md = m // q
    if md < 32:
        return None
    dd = d[:md * q].reshape(md, q).mean(axis=1)
    w = np.sqrt(_hann(md))
    t0 = (start + (q - 1) / 2.0) * dt  # time of the first block's centre [s]

    def cs(fs: np.ndarray) -> np.ndarray:  # cosines and sines of fs at the block centres, tapered
        z = np.exp(2j * np.pi * np.outer(fs, t0 + np.arange(md) * q * dt))
        return np.concatenate((z.real, z.imag)) * w

    others = np.array([f for i, f in enumerate(lines) if i not in group])
    R = np.vstack([cs(others), _smooth_rows(md) * w]) if others.size else _smooth_rows(md) * w
    Q, _ = np.linalg.qr(R.T)
    y = dd * w
    y = y - Q @ (Q.T @ y)

    def best_pair(fs: np.ndarray, sep: float) -> tuple[float, float, float]:
        Bt = cs(fs)
        return _best_pair(Bt - (Bt @ Q) @ Q.T, y, fs, sep)

    f0 = float(np.mean([lines[j] for j in group]))
    _, f1, f2 = best_pair(f0 + np.arange(-16, 17) * 0.1 / T, 0.2 / T)
    fine = np.arange(-5, 6) * 0.02 / T
    red2, f1, f2 = best_pair(np.concatenate((f1 + fine, f2 + fine)), 0.15 / T)
    now = cs(np.array([lines[j] for j in group]))
    now = now - (now @ Q) @ Q.T
    c1 = np.linalg.lstsq(now.T, y, rcond=None)[0]
    red1 = float(y @ (now.T @ c1))
    if (red2 - red1) / (sig2 / q) > (SPLIT_GAIN if len(group) == 1 else 0.0):
        return f1, f2
    return None


def _stationary_tone(x: np.ndarray, idx: np.ndarray, n: int, dt: float, f: float, third: int,
                     stationarity: float, routes: ToneRoutes | None, pretrigger_samples: int = 0,
                     ) -> tuple[np.ndarray, float] | None:
    """The tone of frequency ``f`` [Hz] over the whole record of ``n`` samples (its constant included)
    and its amplitude, if ``x`` (the difference over the span ``idx``, consecutive samples) holds it as
    interference."""
    rows = _basis(n, dt, f)  # the whole record's, of which the span's are a view
    B = rows[:, idx[0]:idx[-1] + 1]
    amp, ph, coef = _fit_tone(x, B)
    parts = [_fit_tone(x[i * third:(i + 1) * third], B[:, i * third:(i + 1) * third]) for i in range(3)]
    amps = np.array([q[0] for q in parts])
    phases = np.array([q[1] for q in parts])
    dphase = float(np.max(np.abs(np.angle(np.exp(1j * (phases - ph))))))
    # interference: the same amplitude and phase in every third of the span, and significant against
    # the noise (a record without interference fails one of these)
    plain = bool(np.all(np.abs(amps - amp) <= stationarity * amp) and dphase < 0.6)
    if not (plain or (routes is not None and routes.matter(f, dt, idx.size))):
        return None
    noise = _robust_sigma(np.diff(x - coef @ B)) / math.sqrt(2.0)
    if not amp > 4.0 * noise * math.sqrt(2.0 / idx.size) * 3.0:
        return None
    if plain:
        return coef @ rows, amp
    # the two-route fit below must stand above the noise sample by sample; a peak whose sinusoid is
    # under half that is not worth its cost (no accepted tone of the training families was)
    if amp > 0.5 * noise:
        full = routes.basis(f, dt)
        B = full[:, idx]
        coef = _least_squares(B, x)
        tone_span = coef[:-1] @ B[:-1]  # without the constant
        # each third's own fit against the whole span's, constants aside; and the pre-trigger's when it
        # holds two periods: interference is there before the front, a change of the winding is not
        segments = [slice(i * third, (i + 1) * third) for i in range(3)]
        pre = int(np.searchsorted(idx, pretrigger_samples))
        if f * pre * dt >= 2.0:
            segments.append(slice(0, pre))
        for sl in segments:
            own = _least_squares(B[:, sl], x[sl])
            if not np.linalg.norm(own[:-1] @ B[:-1, sl] - tone_span[sl]) <= stationarity * np.linalg.norm(
                    tone_span[sl]):
                return None
        amp = float(math.sqrt(2.0) * np.std(tone_span))
        noise = _robust_sigma(np.diff(x - coef @ B)) / math.sqrt(2.0)
        # twice the freedom of a sinusoid: where the prediction amplifies the reference (|K| >> 1 at
        # frequencies the test wave holds more of) the reference's route fits noise shaped by that
        # gain, so the tone must also stand above the noise sample by sample
        if amp > max(4.0 * noise * math.sqrt(2.0 / idx.size) * 3.0, noise):
            return coef @ full, amp
    return None
