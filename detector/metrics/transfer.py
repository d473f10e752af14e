"""Transfer function (neutral current over applied voltage) of a shot and comparison of two of them.

``H(f) = I(f) / V(f)`` is a property of the winding and the test connection, not of the applied wave:
a chopped test shot can therefore be compared with a full reduced-level reference shot. Both signals get
the same exponential window, which makes the ratio exact for a linear network (see
:func:`transfer_function`); the estimate is kept only where the voltage spectrum stands well above the
noise.

Indices (:func:`compare_transfer`) work on the magnitude in dB: correlation coefficient ``rho``, the factor
``R = -log10(1 - rho)``, RMS and maximum dB deviation, per frequency band, and the shift of matched
resonance peaks.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from types import MappingProxyType
from typing import NamedTuple

import numpy as np
import scipy.fft as sfft
from scipy.signal import find_peaks

from .._validation import ShotcheckError, check_range
from ..preprocess import MIN_NOISE_SAMPLES, _second_difference_noise, noise_estimate

__all__ = [
    "DLT911_BANDS_HZ",
    "DLT911_NORMAL_R",
    "R_MAX",
    "BandIndices",
    "PeakMatch",
    "TransferComparison",
    "TransferFunction",
    "band_indices",
    "compare_transfer",
    "default_window_tau_s",
    "transfer_function",
]

#: Frequency bands of DL/T 911-2016 (frequency response analysis of transformer windings, China's power
#: industry standard; band limits seen in a secondary source). Made for swept-frequency FRA, not for
#: transfer functions from impulse records: use the bands, recalibrate the limits on healthy pairs.
DLT911_BANDS_HZ: Mapping[str, tuple[float, float]] = MappingProxyType(
    {"low": (1e3, 100e3), "medium": (100e3, 600e3), "high": (600e3, 1000e3)}
)
#: DL/T 911-2016 "normal winding" limits of R per band (seen in a secondary source); for swept FRA.
DLT911_NORMAL_R: Mapping[str, float] = MappingProxyType({"low": 2.0, "medium": 1.0, "high": 0.6})
#: R is capped at this value when ``1 - rho < 10**-R_MAX`` (identical curves), as DL/T 911 does (from
#: memory).
R_MAX = 10.0
#: Default ratio of the record duration to the window time constant.
TAU_DIVISOR = 5.0


class TransferFunction(NamedTuple):
    """A transfer function estimate.

    Attributes
    ----------
    frequency_Hz : numpy.ndarray
        Frequencies of the FFT grid [Hz].
    H_S : numpy.ndarray
        Complex ``I(f)/V(f)`` [S when the inputs are in A and V; A/V per p.u. for normalised records];
        NaN where the voltage spectrum is not above its noise (and at 0 Hz).
    """

    frequency_Hz: np.ndarray
    H_S: np.ndarray


def default_window_tau_s(n_samples: int, dt: float) -> float:
    """Default time constant of the exponential window [s]: one fifth of the record duration.

    Parameters
    ----------
    n_samples : int
        Record length.
    dt : float
        Sample interval [s].

    Returns
    -------
    float
        ``n_samples * dt / 5`` [s].

    Notes
    -----
    The window falls to ``exp(-5) = 0.7 %`` at the record end, so the truncated tail of the impulse (often
    still 20-40 % of the peak) leaks little; the price is a damping of ``1/(2 pi tau)`` in frequency
    (4 kHz for a 200 us record), small against winding resonances above about 50 kHz.
    """
    return n_samples * dt / TAU_DIVISOR


def transfer_function(
    voltage: np.ndarray,
    current: np.ndarray,
    dt: float,
    *,
    window_tau_s: float | None = None,
    pretrigger_samples: int = 0,
    voltage_noise: float | None = None,
    snr: float = 10.0,
    current_noise: float | None = None,
    snr_current: float | None = None,
    noise_floor_rel: float = 1e-6,
    n_fft: int | None = None,
) -> TransferFunction:
    """Transfer function current/voltage of one shot with an exponential window.

    Parameters
    ----------
    voltage : array_like
        Applied voltage [V or p.u.], baseline removed.
    current : array_like
        Neutral current [A or A/V], same length.
    dt : float
        Sample interval [s].
    window_tau_s : float, optional
        Time constant of the window ``w(t) = exp(-t / tau)``, t from the first sample [s]; default
        :func:`default_window_tau_s`. Records compared with each other must use the same value.
    pretrigger_samples : int
        Samples before the front; with at least 32 the voltage noise is estimated there (MAD), otherwise
        from the second differences of the last fifth of the record (the tail).
    voltage_noise : float, optional
        Standard deviation of the voltage noise [unit of ``voltage``], e.g.
        ``AlignedPair.ref_noise.voltage_mad_pu``; overrides the estimate from ``pretrigger_samples``.
    snr : float
        The estimate is kept where ``|V(f)| >= snr * noise`` [1].
    current_noise : float, optional
        Standard deviation of the current noise [unit of ``current``]; estimated like the voltage
        noise if not given. Used only with ``snr_current``.
    snr_current : float, optional
        If given, the estimate is also dropped where ``|I(f)| < snr_current * current noise`` [1]: where
        the current is within its noise, H is noise whatever the voltage. Off by default (the band is
        limited by the voltage only); 3 is a reasonable value when the neutral current is weak at high
        frequencies.
    noise_floor_rel : float
        Lower bound of the voltage noise standard deviation relative to the voltage peak [1] (1e-6, about a
        20-bit recorder), so that noise-free records do not keep rounding errors.
    n_fft : int, optional
        FFT length (zero padding); default the next fast length >= the record length.

    Returns
    -------
    TransferFunction
        ``(frequency_Hz, H_S)``.

    Notes
    -----
    For a linear network with impulse response ``h``, ``i = h * v``; multiplying by
    ``w(t) = exp(-t/tau)`` gives ``i w = (h w) * (v w)``, so the windowed ratio is exactly
    ``H(s)`` at ``s = 1/tau + j 2 pi f``: the true transfer function with its resonances damped by
    ``1/(2 pi tau)`` Hz. The white-noise spectrum level of the windowed voltage is
    ``sigma * sqrt(sum(w**2))``.

    References
    ----------
    The exponential window for impulse-response measurements is standard practice in modal analysis
    (common practice); the damping shift follows from the Laplace shift theorem.
    """
    v = np.asarray(voltage, dtype=np.float64)
    i = np.asarray(current, dtype=np.float64)
    if v.ndim != 1 or i.ndim != 1 or v.size != i.size:
        raise ShotcheckError(
            f"voltage and current must be 1-D arrays of equal length, got shapes {v.shape} and {i.shape}"
        )
    if v.size < 16:
        raise ShotcheckError(f"a transfer function needs at least 16 samples, got {v.size}")
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    n = v.size
    tau = default_window_tau_s(n, dt) if window_tau_s is None else check_range(
        "window_tau_s", window_tau_s, 0.0, None, low_inclusive=False, unit="s")
    snr = check_range("snr", snr, 0.0, None)
    nf = sfft.next_fast_len(n, real=True) if n_fft is None else int(n_fft)
    if nf < n:
        raise ShotcheckError(f"n_fft must be at least the record length {n}, got {n_fft!r}")
    w = np.exp(-np.arange(n) * (dt / tau))
    spec = sfft.rfft(np.stack((v * w, i * w)), nf, axis=-1)
    f = sfft.rfftfreq(nf, dt)
    if voltage_noise is not None:
        sigma = check_range("voltage_noise", voltage_noise, 0.0, None)
    elif pretrigger_samples >= MIN_NOISE_SAMPLES:
        sigma = noise_estimate(v[:pretrigger_samples]).mad
    else:
        sigma = _second_difference_noise(v[-max(n // 5, 16):]).mad
    sigma = max(sigma if np.isfinite(sigma) else 0.0, noise_floor_rel * float(np.max(np.abs(v))))
    noise = sigma * math.sqrt(float(np.einsum('i,i->', w, w)))
    vf = spec[0]
    valid = np.abs(vf) >= snr * noise
    if snr_current is not None:
        snr_current = check_range("snr_current", snr_current, 0.0, None)
        if current_noise is not None:
            sig_i = check_range("current_noise", current_noise, 0.0, None)
        elif pretrigger_samples >= MIN_NOISE_SAMPLES:
            sig_i = noise_estimate(i[:pretrigger_samples]).mad
        else:
            sig_i = _second_difference_noise(i[-max(n // 5, 16):]).mad
        sig_i = max(sig_i if np.isfinite(sig_i) else 0.0, noise_floor_rel * float(np.max(np.abs(i))))
        valid &= np.abs(spec[1]) >= snr_current * sig_i * math.sqrt(float(np.einsum("i,i->", w, w)))
    valid[0] = False
    with np.errstate(divide="ignore", invalid="ignore"):
        h = np.where(valid, spec[1] / np.where(valid, vf, 1.0), np.nan + 0j)
    return TransferFunction(f, h)


class BandIndices(NamedTuple):
    """Comparison indices of two dB curves over one band.

    Attributes
    ----------
    f_low_Hz, f_high_Hz : float
        Band limits [Hz].
    n_points : int
        Frequencies where both estimates are valid.
    rho : float
        Pearson correlation coefficient of the dB curves [1]; NaN with fewer than 3 points.
    R : float
        ``-log10(1 - rho)`` capped at ``R_MAX`` (DL/T 911-2016) [1].
    rms_dB, max_dB : float
        RMS and maximum absolute difference test minus reference [dB].
    mean_dB : float
        Mean difference [dB] (a level offset between the curves).
    """

    f_low_Hz: float
    f_high_Hz: float
    n_points: int
    rho: float
    R: float
    rms_dB: float
    max_dB: float
    mean_dB: float


def band_indices(ref_dB: np.ndarray, test_dB: np.ndarray, f_low_Hz: float = 0.0,
                 f_high_Hz: float = math.inf) -> BandIndices:
    """Correlation, R factor and dB deviations of two magnitude curves.

    Parameters
    ----------
    ref_dB, test_dB : array_like
        Magnitudes in dB on the same frequency grid, NaN where invalid; only points valid in both count.
    f_low_Hz, f_high_Hz : float
        Band limits, reported only [Hz].

    Returns
    -------
    BandIndices
    """
    a = np.asarray(ref_dB, dtype=np.float64)
    b = np.asarray(test_dB, dtype=np.float64)
    ok = np.isfinite(a) & np.isfinite(b)
    a, b = a[ok], b[ok]
    n = int(a.size)
    if n == 0:
        nan = float("nan")
        return BandIndices(f_low_Hz, f_high_Hz, 0, nan, nan, nan, nan, nan)
    d = b - a
    rms, mx, mean = float(np.sqrt(np.mean(d * d))), float(np.max(np.abs(d))), float(np.mean(d))
    if n < 3:
        rho = float("nan")
    else:
        da, db = a - a.mean(), b - b.mean()
        den = math.sqrt(float(np.einsum('i,i->', da, da)) * float(np.einsum('i,i->', db, db)))
        if den == 0.0:
            rho = 1.0 if np.array_equal(da, db) else float("nan")
        else:
            rho = float(np.clip(np.einsum('i,i->', da, db) / den, -1.0, 1.0))
    if np.isfinite(rho):
        r = min(R_MAX, -math.log10(max(1.0 - rho, 10.0**-R_MAX)))
    else:
        r = float("nan")
    return BandIndices(f_low_Hz, f_high_Hz, n, rho, r, rms, mx, mean)


class PeakMatch(NamedTuple):
    """A resonance peak of the reference and its counterpart in the test.

    Attributes
    ----------
    f_ref_Hz, f_test_Hz : float
        Peak frequencies (parabolic interpolation on the dB curve) [Hz]; NaN if unmatched.
    shift_rel : float
        ``f_test / f_ref - 1`` [1]; NaN if unmatched.
    ref_dB, test_dB : float
        Peak heights [dB].
    """

    f_ref_Hz: float
    f_test_Hz: float
    shift_rel: float
    ref_dB: float
    test_dB: float


@dataclasses.dataclass(frozen=True)
class TransferComparison:
    """Comparison of two transfer functions.

    Attributes
    ----------
    overall : BandIndices
        Indices over the union of the bands.
    bands : mapping of str to BandIndices
        Indices per band.
    peaks : tuple of PeakMatch
        Reference peaks with their matched test peaks, then unmatched test peaks (``f_ref_Hz`` NaN).
    max_peak_shift_rel : float
        Largest ``|shift_rel|`` of the matched peaks [1]; 0 if none matched.
    n_unmatched : int
        Peaks present in only one of the curves.
    ref_dB, test_dB : numpy.ndarray
        The magnitude curves [dB] (NaN where invalid), for plots.
    frequency_Hz : numpy.ndarray
        Their frequencies [Hz].
    """

    overall: BandIndices
    bands: Mapping[str, BandIndices]
    peaks: tuple[PeakMatch, ...]
    max_peak_shift_rel: float
    n_unmatched: int
    ref_dB: np.ndarray
    test_dB: np.ndarray
    frequency_Hz: np.ndarray


def _to_dB(h: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        m = 20.0 * np.log10(np.abs(h))
    m[~np.isfinite(m)] = np.nan
    return m


def _peaks(db: np.ndarray, f: np.ndarray, prominence_dB: float) -> tuple[np.ndarray, np.ndarray]:
    """Peak frequencies and heights, parabolic interpolation on the three points around each maximum."""
    ok = np.isfinite(db)
    if ok.sum() < 3:
        return np.empty(0), np.empty(0)
    filled = np.where(ok, db, np.nanmin(db))
    idx, _ = find_peaks(filled, prominence=prominence_dB)
    idx = idx[ok[idx] & ok[idx - 1] & ok[idx + 1]] if idx.size else idx
    if idx.size == 0:
        return np.empty(0), np.empty(0)
    y0, y1, y2 = db[idx - 1], db[idx], db[idx + 1]
    den = y0 - 2.0 * y1 + y2
    p = np.where(den != 0.0, 0.5 * (y0 - y2) / np.where(den != 0.0, den, 1.0), 0.0)
    df = f[1] - f[0]
    return f[idx] + p * df, y1 - 0.25 * (y0 - y2) * p


def compare_transfer(
    H_ref: np.ndarray,
    H_test: np.ndarray,
    f: np.ndarray,
    *,
    bands: Mapping[str, tuple[float, float]] | None = None,
    peak_prominence_dB: float = 3.0,
    max_peak_shift_rel: float = 0.1,
) -> TransferComparison:
    """Compare two transfer functions on the same frequency grid.

    Parameters
    ----------
    H_ref, H_test : array_like
        Complex (or magnitude) transfer functions, NaN where not valid [S or A/V per p.u.].
    f : array_like
        Frequencies [Hz], uniform grid, same length.
    bands : mapping of str to (float, float), optional
        Named bands ``(f_low_Hz, f_high_Hz)``; default ``DLT911_BANDS_HZ``.
    peak_prominence_dB : float
        Prominence a resonance peak needs on the dB curve [dB].
    max_peak_shift_rel : float
        Largest relative frequency distance at which a test peak is matched to a reference peak [1].

    Returns
    -------
    TransferComparison

    Notes
    -----
    ``rho`` is the Pearson correlation of the dB curves over the points valid in both, ``R = -log10(1 -
    rho)`` is the factor of DL/T 911-2016 (capped at ``R_MAX``); a level offset between the curves moves
    ``mean_dB`` and ``rms_dB`` but not ``rho``. Peaks are found with :func:`scipy.signal.find_peaks`
    (prominence) within the union of the bands and matched greedily, nearest first, in log frequency.
    """
    hr, ht = np.asarray(H_ref), np.asarray(H_test)
    f = np.asarray(f, dtype=np.float64)
    if not (hr.shape == ht.shape == f.shape) or f.ndim != 1:
        raise ShotcheckError(
            f"H_ref, H_test and f must be 1-D arrays of one length, got {hr.shape}, {ht.shape}, {f.shape}"
        )
    if f.size < 3:
        raise ShotcheckError(f"at least 3 frequencies are needed, got {f.size}")
    bands = DLT911_BANDS_HZ if bands is None else bands
    for name, (lo, hi) in bands.items():
        if not (0.0 <= lo < hi):
            raise ShotcheckError(f"band {name!r}: need 0 <= f_low_Hz < f_high_Hz, got ({lo!r}, {hi!r})")
    peak_prominence_dB = check_range("peak_prominence_dB", peak_prominence_dB, 0.0, None,
                                     low_inclusive=False, unit="dB")
    max_peak_shift_rel = check_range("max_peak_shift_rel", max_peak_shift_rel, 0.0, None,
                                     low_inclusive=False)
    a, b = _to_dB(hr), _to_dB(ht)
    per_band = {}
    for name, (lo, hi) in bands.items():
        sel = (f >= lo) & (f <= hi)
        per_band[name] = band_indices(a[sel], b[sel], lo, hi)
    f_lo = min(lo for lo, _ in bands.values())
    f_hi = max(hi for _, hi in bands.values())
    in_union = np.zeros(f.size, dtype=bool)
    for lo, hi in bands.values():
        in_union |= (f >= lo) & (f <= hi)
    overall = band_indices(a[in_union], b[in_union], f_lo, f_hi)

    # resonance peaks within the span of the bands
    span = (f >= f_lo) & (f <= f_hi)
    fs = f[span]
    fr, yr = _peaks(np.where(in_union[span], a[span], np.nan), fs, peak_prominence_dB)
    ft, yt = _peaks(np.where(in_union[span], b[span], np.nan), fs, peak_prominence_dB)
    matches: list[PeakMatch] = []
    used = np.zeros(ft.size, dtype=bool)
    if fr.size and ft.size:
        dist = np.abs(np.log(ft[None, :] / fr[:, None]))
        order = np.argsort(dist, axis=None)
        pair_of = -np.ones(fr.size, dtype=int)
        for flat in order:  # loop over candidate peak pairs (a handful), not samples
            r, t = divmod(int(flat), ft.size)
            if dist[r, t] > math.log1p(max_peak_shift_rel):
                break
            if pair_of[r] < 0 and not used[t]:
                pair_of[r] = t
                used[t] = True
    else:
        pair_of = -np.ones(fr.size, dtype=int)
    nan = float("nan")
    for r in range(fr.size):
        t = pair_of[r]
        if t >= 0:
            matches.append(PeakMatch(float(fr[r]), float(ft[t]), float(ft[t] / fr[r] - 1.0),
                                     float(yr[r]), float(yt[t])))
        else:
            matches.append(PeakMatch(float(fr[r]), nan, nan, float(yr[r]), nan))
    for t in np.flatnonzero(~used):
        matches.append(PeakMatch(nan, float(ft[t]), nan, nan, float(yt[t])))
    shifts = [abs(m.shift_rel) for m in matches if np.isfinite(m.shift_rel)]
    n_unmatched = sum(1 for m in matches if not np.isfinite(m.shift_rel))
    return TransferComparison(
        overall=overall,
        bands=MappingProxyType(per_band),
        peaks=tuple(matches),
        max_peak_shift_rel=max(shifts) if shifts else 0.0,
        n_unmatched=n_unmatched,
        ref_dB=a,
        test_dB=b,
        frequency_Hz=f,
    )
