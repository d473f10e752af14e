"""Wavelet difference of two aligned neutral currents.

Both currents are decomposed with the same wavelet (stationary transform by default, discrete on
request); the difference of their coefficients is measured per level: energy relative to the reference's
energy at that level, peak in noise standard deviations (noise from the median absolute deviation), and
the time of the first significant coefficient. A partial discharge (pulses of tens of nanoseconds) changes
only the finest levels; a change of the winding's inductance or capacitance (a short between turns)
moves resonances of hundreds of kilohertz and shows in the coarse levels.

Detail level ``j`` of a signal sampled at ``fs`` covers roughly ``fs / 2**(j+1)`` to ``fs / 2**j``; the
approximation at level ``L`` covers 0 to ``fs / 2**(L+1)``.
"""

from __future__ import annotations

import dataclasses
import difflib
import functools
import math
import warnings

import numpy as np
import pywt

from .._stats import median1d
from .._validation import ShotcheckError, check_option, check_range
from ..preprocess import MAD_NORMAL_CONSTANT

__all__ = [
    "DEFAULT_MAX_LEVEL",
    "METHODS",
    "BoundaryEffectWarning",
    "WaveletDifference",
    "burst_counts",
    "level_bands_Hz",
    "level_half_supports",
    "resolve_level",
    "resolve_wavelet",
    "wavelet_difference",
]

#: Deepest level chosen when ``level=None`` (the approximation then holds everything below fs/512,
#: 195 kHz at 100 MS/s); deeper stationary levels cost more than the rest of a comparison.
DEFAULT_MAX_LEVEL = 8
#: The fault time is the earliest first significant difference among this many of the finest detail
#: levels that have one (coarser levels blur the instant by half their wavelet support).
FAULT_TIME_LEVELS = 2
#: Decomposition methods.
METHODS = {"swt": "stationary (undecimated) transform, pywt.swt", "dwt": "discrete transform, pywt.wavedec"}


#: Samples per block over which the local noise of a row (``noise_segments``) is held constant.
_PROFILE_BLOCK = 64


class BoundaryEffectWarning(UserWarning):
    """The requested level is so deep that every coefficient feels the record ends."""


@functools.lru_cache(maxsize=1)
def _discrete_names() -> frozenset[str]:
    return frozenset(pywt.wavelist(kind="discrete"))


@functools.lru_cache(maxsize=16)
def _wavelet(name: str) -> pywt.Wavelet:
    """The wavelet of a name, made once (building it costs more than a comparison's transforms' setup)."""
    return pywt.Wavelet(name)


def resolve_wavelet(wavelet: str | pywt.Wavelet) -> pywt.Wavelet:
    """Return a discrete :class:`pywt.Wavelet` from a name or a wavelet object.

    Parameters
    ----------
    wavelet : str or pywt.Wavelet
        A name from ``pywt.wavelist(kind="discrete")`` or a wavelet object (returned as it is).

    Returns
    -------
    pywt.Wavelet

    Raises
    ------
    ShotcheckError
        For a name that is not a discrete wavelet, with the closest names and how to list all of them.
    """
    if isinstance(wavelet, pywt.Wavelet):
        return wavelet
    if isinstance(wavelet, str) and wavelet in _discrete_names():
        return _wavelet(wavelet)
    names = pywt.wavelist(kind="discrete")
    close = difflib.get_close_matches(str(wavelet), names, n=3)
    hint = f" Did you mean {', '.join(repr(c) for c in close)}?" if close else ""
    raise ShotcheckError(
        f"Invalid value for 'wavelet': {wavelet!r} is not a discrete wavelet.{hint} "
        "Valid names are listed by pywt.wavelist(kind='discrete'), e.g. 'db4', 'sym8', 'coif3'."
    )


def resolve_level(n_samples: int, wavelet: pywt.Wavelet, level: int | None) -> int:
    """Check a decomposition level or choose one.

    Parameters
    ----------
    n_samples : int
        Record length.
    wavelet : pywt.Wavelet
        The wavelet.
    level : int or None
        Requested level; None chooses ``min(DEFAULT_MAX_LEVEL, pywt.dwt_max_level(...))``.

    Returns
    -------
    int
        The level, at least 1.

    Raises
    ------
    ShotcheckError
        For a level below 1, a non-integer, or a record too short for one level.

    Warns
    -----
    BoundaryEffectWarning
        If ``level`` exceeds ``pywt.dwt_max_level``: all coefficients of the deepest levels then depend
        on the record ends.
    """
    max_level = pywt.dwt_max_level(n_samples, wavelet.dec_len)
    if level is None:
        if max_level < 1:
            raise ShotcheckError(
                f"a record of {n_samples} samples is too short for one level of the {wavelet.name!r} "
                f"wavelet (filter length {wavelet.dec_len})"
            )
        return int(min(DEFAULT_MAX_LEVEL, max_level))
    if isinstance(level, bool) or not isinstance(level, int | np.integer):
        raise ShotcheckError(f"level must be an integer or None, got {level!r}")
    if level < 1:
        raise ShotcheckError(f"level must be at least 1, got {level}")
    if level > max_level:
        warnings.warn(
            f"level {level} is too deep for {n_samples} samples and the {wavelet.name!r} wavelet "
            f"(pywt.dwt_max_level = {max_level}): the coarse levels are dominated by boundary effects",
            BoundaryEffectWarning,
            stacklevel=3,
        )
    return int(level)


def level_bands_Hz(level: int, dt: float) -> np.ndarray:
    """Approximate frequency band of each detail level and of the final approximation.

    Parameters
    ----------
    level : int
        Number of levels L.
    dt : float
        Sample interval [s].

    Returns
    -------
    numpy.ndarray
        Shape (L + 1, 2): rows ``[fs/2**(j+1), fs/2**j]`` for details j = 1..L, then ``[0, fs/2**(L+1)]``
        for the approximation [Hz].
    """
    fs = 1.0 / dt
    j = np.arange(1, level + 1, dtype=np.float64)
    det = np.column_stack((fs / 2.0 ** (j + 1), fs / 2.0**j))
    return np.vstack((det, [[0.0, fs / 2.0 ** (level + 1)]]))


def level_half_supports(wavelet: str | pywt.Wavelet, level: int) -> np.ndarray:
    """Half support of each detail level's wavelet and of the final approximation [samples].

    Parameters
    ----------
    wavelet : str or pywt.Wavelet
        Discrete wavelet.
    level : int
        Number of levels L.

    Returns
    -------
    numpy.ndarray
        Shape (L + 1,): ``ceil((filter length - 1) (2**j - 1) / 2)`` for details j = 1..L, then the same
        as level L for the approximation; how far a coefficient's response reaches either side of the
        sample it describes (and how far a record end's padding reaches into a level).
    """
    w = resolve_wavelet(wavelet)
    j = np.arange(1, level + 2)
    return np.ceil((w.dec_len - 1) * (2.0 ** np.minimum(j, level) - 1) / 2.0)


@functools.lru_cache(maxsize=64)
def _swt_centre_offsets(wavelet_name: str, level: int) -> tuple[int, ...]:
    """Index offset of the response of each SWT detail level (1..L) and the approximation to a delta."""
    n = 2**level * 16
    x = np.zeros(n)
    x[n // 2] = 1.0
    c = pywt.swt(x, wavelet_name, level=level, trim_approx=True)
    details = c[1:][::-1]  # D1..DL
    offs = [int(np.argmax(np.abs(d))) - n // 2 for d in details]
    offs.append(int(np.argmax(np.abs(c[0]))) - n // 2)
    return tuple(offs)


@dataclasses.dataclass(frozen=True)
class WaveletDifference:
    """Per-level wavelet difference of two currents.

    Rows of the per-level arrays are detail levels 1..L (finest first), then the approximation at
    level L.

    Attributes
    ----------
    labels : tuple of str
        ``("D1", ..., "DL", "AL")``.
    band_Hz : numpy.ndarray
        (L + 1, 2) approximate band of each row [Hz].
    ref_energy : numpy.ndarray
        Sum of squared reference coefficients per row of the discrete (orthogonal with
        ``mode="periodization"``) transform [(unit of the input)^2].
    energy_ratio : numpy.ndarray
        Sum of squared coefficient differences over ``ref_energy``, same transform [1].
    sigma : numpy.ndarray
        Noise standard deviation of the coefficient differences per row: MAD / 0.6745 of the discrete
        coefficients, not below ``sigma_floor_rel`` times their RMS reference coefficient
        [unit of the input]; it applies to the stationary coefficients too (same filters).
    peak_sigma : numpy.ndarray
        Largest ``|difference| / sigma`` per row [1].
    first_time_s : numpy.ndarray
        Per row, time of the first significant difference [s]: the largest ``|difference|`` within one
        wavelet support after the first crossing of ``k_sigma * sigma``; NaN if never crossed.
    fault_time_s : float or None
        The earliest first significant difference among the ``FAULT_TIME_LEVELS`` finest detail levels
        that have one [s]; None if no detail level has one.
    difference_map : numpy.ndarray
        (L + 1, n) ``|difference| / sigma`` on the input's sample times, for a time-scale figure [1].
    times_s : numpy.ndarray
        Sample times of the map columns [s].
    wavelet : str
        Wavelet name.
    method : str
        ``"swt"`` or ``"dwt"``.
    level : int
        Number of levels L.
    """

    labels: tuple[str, ...]
    band_Hz: np.ndarray
    ref_energy: np.ndarray
    energy_ratio: np.ndarray
    sigma: np.ndarray
    peak_sigma: np.ndarray
    first_time_s: np.ndarray
    fault_time_s: float | None
    difference_map: np.ndarray
    times_s: np.ndarray
    wavelet: str
    method: str
    level: int


def _extend(x: np.ndarray, n_ext: int, m: int) -> np.ndarray:
    """Continue ``x`` past its last sample by ``n_ext`` samples.

    The continuation is the straight line fitted to the last ``m`` samples plus the mirror image of their
    residuals about the last sample.
    """
    m = max(2, min(m, x.size))
    t = np.arange(m, dtype=np.float64)
    slope, icpt = np.polyfit(t, x[-m:], 1)
    resid = x[-m:] - (slope * t + icpt)
    mirrored = np.pad(resid, (0, n_ext), mode="reflect")[m:] if m > 1 else np.zeros(n_ext)
    return slope * (m - 1 + np.arange(1, n_ext + 1)) + icpt + mirrored


def _mirror_pad(x: np.ndarray, n_end: int, n_start: int, m: int) -> np.ndarray:
    """Pad for a periodic transform: ``[x, continuation past the end, continuation before the start]``.

    Each continuation is the local straight-line trend (fitted to ``m`` samples, so its slope carries
    little noise) plus the mirrored residuals: value and trend run on through both record ends, white
    noise keeps its statistics, and the one jump, between the two continuations, lies ``n_end`` samples
    away from the record.
    """
    end = _extend(x, n_end, m)
    start = _extend(x[::-1], n_start, m)[::-1]
    return np.concatenate((x, end, start))


def _swt_rows(x: np.ndarray, w: pywt.Wavelet, level: int) -> np.ndarray:
    """SWT of ``x`` (n,): array (L+1, n) of D1..DL then AL, each centred in time."""
    n = x.shape[-1]
    block = 2**level
    offs = _swt_centre_offsets(w.name, level)
    half_support = (w.dec_len - 1) * 2 ** (level - 1)
    n_pad = int(math.ceil((n + 2 * half_support + max(abs(o) for o in offs) + 32) / block) * block)
    n_end = (n_pad - n) // 2
    xp = _mirror_pad(x, n_end, n_pad - n - n_end, m=half_support)
    coeffs = pywt.swt(xp, w, level=level, trim_approx=True)
    rows = [coeffs[k] for k in range(level, 0, -1)] + [coeffs[0]]
    out = np.empty((level + 1, n))
    for j, (c, off) in enumerate(zip(rows, offs, strict=True)):  # loop over levels: index k holds
        if off >= 0:                                              # the coefficient centred on sample k
            out[j] = c[off : off + n]                             # (the transform is periodic)
        else:
            out[j, :-off] = c[n_pad + off :]
            out[j, -off:] = c[: n + off]
    return out


@functools.lru_cache(maxsize=64)
def _dwt_centre_offsets(wavelet_name: str, level: int, mode: str) -> tuple[int, ...]:
    """Sample on which coefficient 0 of each DWT row (D1..DL, AL) is centred, from a delta response."""
    n = 2**level * 16
    p = n // 2
    x = np.zeros(n)
    x[p] = 1.0
    c = pywt.wavedec(x, wavelet_name, mode=mode, level=level)
    rows = [c[k] for k in range(level, 0, -1)] + [c[0]]
    steps = [2 ** min(j + 1, level) for j in range(level + 1)]
    return tuple(p - int(np.argmax(np.abs(r))) * st for r, st in zip(rows, steps, strict=True))


def _dwt_rows(x2: np.ndarray, w: pywt.Wavelet, level: int, mode: str) -> list[np.ndarray]:
    """DWT of the rows of ``x2``: coefficient arrays (rows, m_j) for D1..DL, then AL."""
    with warnings.catch_warnings():  # resolve_level has already warned in our own words
        warnings.filterwarnings("ignore", message="Level value of", category=UserWarning)
        coeffs = pywt.wavedec(x2, w, mode=mode, level=level, axis=-1)
    return [coeffs[k] for k in range(level, 0, -1)] + [coeffs[0]]


def _dwt_map(rows: list[np.ndarray], w: pywt.Wavelet, level: int, mode: str, n: int) -> np.ndarray:
    """Map DWT rows (1-D each) onto n samples: each sample takes the coefficient centred nearest to it."""
    offs = _dwt_centre_offsets(w.name, level, mode)
    m = np.arange(n)
    out = np.empty((level + 1, n))
    for j, (c, off) in enumerate(zip(rows, offs, strict=True)):  # loop over levels
        step = 2 ** min(j + 1, level)
        k = np.clip((m - off + step // 2) // step, 0, c.shape[-1] - 1)
        out[j] = c[k]
    return out


def _first_event_times(dmap: np.ndarray, k_sigma: float, half_support: np.ndarray) -> np.ndarray:
    """Per row, index of the largest value within one wavelet support after the first crossing.

    -1 where ``k_sigma`` is never crossed. The peak, not the crossing, marks the event: a strong event
    crosses the threshold already at the edge of the wavelet's support.
    """
    over = dmap > k_sigma
    first = np.argmax(over, axis=1)
    out = np.full(dmap.shape[0], -1, dtype=np.int64)
    for j in np.flatnonzero(over.any(axis=1)):  # loop over levels
        stop = min(dmap.shape[1], first[j] + 2 * int(half_support[j]) + 1)
        out[j] = first[j] + int(np.argmax(dmap[j, first[j] : stop]))
    return out


def wavelet_difference(
    ref_current: np.ndarray,
    test_current: np.ndarray,
    dt: float,
    *,
    wavelet: str | pywt.Wavelet = "db4",
    mode: str = "periodization",
    level: int | None = None,
    method: str = "swt",
    k_sigma: float = 6.0,
    sigma_floor_rel: float = 1e-6,
    t0_s: float = 0.0,
    noise_scale: np.ndarray | None = None,
    scored: np.ndarray | None = None,
    noise_segments: int = 1,
) -> WaveletDifference:
    """Per-level wavelet difference of two aligned currents.

    Parameters
    ----------
    ref_current, test_current : array_like
        Aligned, level-normalised currents of equal length [A/V, or any common unit].
    dt : float
        Sample interval [s].
    wavelet : str or pywt.Wavelet
        Discrete wavelet (``pywt.wavelist(kind="discrete")``).
    mode : str
        Signal extension mode of the discrete transform (``pywt.Modes.modes``), which gives the per-level
        energies and noise for both methods; the stationary transform is periodic and pads the record
        with continuations of its two ends instead (local straight-line trend plus mirrored residuals, at
        least the wavelet's half support at the deepest level on each side), so neither end sees a jump
        or a kink. With ``method="dwt"`` prefer ``mode="symmetric"``: periodization joins the two record ends, and a slow benign offset in the
        difference then appears as a step at the end of the deep levels.
    level : int, optional
        Number of levels; default ``min(8, pywt.dwt_max_level(n, filter length))``.
    method : {'swt', 'dwt'}
        Stationary (shift-invariant, one coefficient per sample) or discrete (decimated) transform.
    k_sigma : float
        A coefficient difference is significant above ``k_sigma`` noise standard deviations [1]. For
        Gaussian noise 6 sigma is exceeded with probability 2e-9 per coefficient.
    sigma_floor_rel : float
        Lower bound of each row's sigma relative to the RMS of the reference coefficients of that row
        [1], so that noise-free records give finite numbers.
    t0_s : float
        Time of the first sample [s]; all returned times are on this axis.
    noise_scale : array_like, optional
        Relative noise standard deviation of the difference at each sample [1] (for example the
        time-dependent sigma of a compensated difference, which grows along the record and holds model
        tolerances at the front). The difference is divided by it before the map, the peaks, the noise
        and the first times are taken, so that the map is in units of the local noise; samples where it
        is not finite are set to zero. Energies stay those of the plain difference.
    scored : array_like of bool, optional
        Samples where peaks are taken and the per-row noise is measured (default all), e.g. the span
        after the front without an intended chop; first times too unless ``noise_scale`` is given (the
        map is then in units of the local noise everywhere, and a change on the front is found there).
    noise_segments : int
        With ``noise_scale`` or ``scored``: the scored samples are cut into this many consecutive parts
        of equal count, each row's noise is measured (MAD) in each part and interpolated between the
        parts' centres [1]. Noise that changes along the record differently per row (the test
        record's own noise is stationary, the prediction's grows where the reference resolves the
        frequencies, i.e. in the coarse rows only) is then followed row by row; the median still
        ignores a few sparse events per part.

    Returns
    -------
    WaveletDifference

    Raises
    ------
    ShotcheckError
        Unknown wavelet or mode, level below 1, arrays of unequal length.

    Warns
    -----
    BoundaryEffectWarning
        If ``level`` is deeper than ``pywt.dwt_max_level`` allows.

    Notes
    -----
    Noise per row: ``sigma_j = median(|d_j|) / 0.6745`` of the discrete-transform coefficient
    differences ``d_j`` of detail level j (their median is zero for noise), and the MAD about the median
    for the approximation (Donoho & Johnstone 1994). The median ignores the few coefficients a fault
    changes, so sparse events (discharges, a breakdown) stand out; a change that spreads over the whole
    record (a shifted resonance) raises the MAD too, so judge it by ``energy_ratio``. The same holds for
    the approximation row, whose difference is dominated by small level-normalisation errors (a
    test-voltage value off by 0.05 % leaves 0.05 % of the current there): its ``peak_sigma`` is not a
    noise-referenced quantity. With ``noise_scale`` or ``scored`` the same estimates are taken from the
    (scaled) map over the scored samples instead, every fourth coefficient, and with ``noise_segments``
    per part of the record, interpolated between the parts (the map is then in units of the local
    noise of each row, ``sigma`` holds the median over the parts).

    Stationary coefficients are shifted so that each is centred on the sample it describes (offsets
    from the response to a unit impulse); discrete coefficients are mapped the same way. The time of a
    row is the largest coefficient within one wavelet support after the first threshold crossing; a
    coarse row blurs the instant over its support, which is why ``fault_time_s`` is read from the
    finest significant rows only.

    References
    ----------
    D. L. Donoho and I. M. Johnstone, "Ideal spatial adaptation by wavelet shrinkage", Biometrika 81(3),
    425-455, 1994.
    """
    r = np.asarray(ref_current, dtype=np.float64)
    t = np.asarray(test_current, dtype=np.float64)
    if r.ndim != 1 or r.shape != t.shape:
        raise ShotcheckError(
            f"ref_current and test_current must be 1-D arrays of one length, got {r.shape} and {t.shape}"
        )
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    k_sigma = check_range("k_sigma", k_sigma, 0.0, None, low_inclusive=False)
    check_range("sigma_floor_rel", sigma_floor_rel, 0.0, None, low_inclusive=False)
    check_option("method", method, METHODS)
    check_option("mode", mode, pywt.Modes.modes)
    w = resolve_wavelet(wavelet)
    lev = resolve_level(r.size, w, level)
    n = r.size
    x2 = np.stack((r, t - r))  # the transforms are linear: transform the difference directly
    # energies and noise from the orthogonal DWT (Parseval: the rows' energies add up to the signal's)
    rows = _dwt_rows(x2, w, lev, mode)
    local = noise_scale is not None or scored is not None
    xd = x2[1]
    if noise_scale is not None:
        s_n = np.asarray(noise_scale, dtype=np.float64)
        if s_n.shape != (n,):
            raise ShotcheckError(f"noise_scale must have one value per sample ({n}), got shape {s_n.shape}")
        ok = np.isfinite(s_n) & (s_n > 0)
        xd = np.where(ok, xd / np.where(ok, s_n, 1.0), 0.0)
    mask = np.ones(n, dtype=bool) if scored is None else np.asarray(scored, dtype=bool)
    if mask.shape != (n,):
        raise ShotcheckError(f"scored must have one value per sample ({n}), got shape {mask.shape}")

    def map_rows() -> list[np.ndarray]:
        """DWT rows of the difference the map is made of (scaled by the local noise if asked)."""
        if noise_scale is None:
            return [c[1] for c in rows]
        return [c[0] for c in _dwt_rows(xd[None, :], w, lev, mode)]

    if method == "swt":
        dmap_raw = np.abs(_swt_rows(xd, w, lev))
    else:
        dmap_raw = np.abs(_dwt_map(map_rows(), w, lev, mode, n))
    counts = np.array([c.shape[-1] for c in rows])
    ref_energy = np.array([np.einsum("i,i->", c[0], c[0]) for c in rows])  # einsum: no BLAS threads
    dif_energy = np.array([np.einsum("i,i->", c[1], c[1]) for c in rows])
    ref_rms = np.sqrt(ref_energy / counts)
    # detail coefficients of noise have zero median: MAD = median(|d|) (Donoho & Johnstone 1994);
    # the approximation is centred on its median first. Stationary coefficients of a level have the
    # same distribution as the decimated ones (same filters), so one sigma serves both.
    n_seg = int(check_range("noise_segments", noise_segments, 1, None))
    prof: np.ndarray | None = None
    if local and mask.sum() >= 16:
        # noise of each row over the scored samples of the (locally scaled) map, per part; every 4th
        # sample serves the median as well as all (neighbouring stationary coefficients are correlated).
        # A row is cut into at most as many parts as leave 32 independent coefficients in each (coarse
        # rows have few: one per 2**j samples).
        idx4 = np.flatnonzero(mask)[::4]
        mad = np.empty(lev + 1)
        k_rows = np.array([max(1, min(n_seg, 4 * idx4.size // (32 * 2 ** min(j + 1, lev))))
                           for j in range(lev + 1)])
        for k_j in np.unique(k_rows):  # loop over a few part counts; rows with one count at once
            rows_j = np.flatnonzero(k_rows == k_j)
            L = idx4.size // k_j
            M = idx4[: k_j * L].reshape(k_j, L)  # the parts, as sample indices
            vals = dmap_raw[rows_j[:, None, None], M[None, :, :]]  # (rows, parts, L), no copy of whole rows
            approx = rows_j == lev
            m_p = np.median(vals, axis=-1)
            if approx.any():  # the approximation is centred on its median first
                va = vals[approx]
                m_p[approx] = np.median(np.abs(va - np.median(va, axis=-1, keepdims=True)), axis=-1)
            m_p /= MAD_NORMAL_CONSTANT
            mad[rows_j] = np.median(m_p, axis=-1)
            if k_j > 1:
                if prof is None:  # relative noise per block of _PROFILE_BLOCK samples
                    prof = np.ones((lev + 1, -(-n // _PROFILE_BLOCK)))
                centres = (np.arange(prof.shape[1]) + 0.5) * _PROFILE_BLOCK
                rel = m_p / np.where(mad[rows_j] > 0, mad[rows_j], 1.0)[:, None]
                c_p = M.mean(axis=1)
                # linear interpolation between the parts' centres (held beyond them)
                prof[rows_j] = [np.interp(centres, c_p, r_p) for r_p in rel]
    else:  # from the DWT rows of the difference the map is made of
        d_rows = map_rows()
        mad = np.array([median1d(np.abs(c)) for c in d_rows[:-1]]
                       + [median1d(np.abs(d_rows[-1] - median1d(d_rows[-1])))]) / MAD_NORMAL_CONSTANT
    if noise_scale is not None:  # the floor in the map's units
        typical = s_n[mask & ok]
        ref_rms = ref_rms / (median1d(typical) if typical.size else 1.0)
    sigma = np.maximum(mad, sigma_floor_rel * ref_rms)
    sigma = np.where(sigma > 0.0, sigma, np.finfo(float).tiny)
    with np.errstate(invalid="ignore", divide="ignore"):
        energy_ratio = np.where(ref_energy > 0.0, dif_energy / np.where(ref_energy > 0, ref_energy, 1.0),
                                np.where(dif_energy > 0.0, np.inf, 0.0))
    dmap = dmap_raw
    if prof is not None:  # each row in units of its own local noise, block by block
        np.maximum(prof, 1e-3, out=prof)
        prof *= sigma[:, None]
        nf = n // _PROFILE_BLOCK
        dmap[:, : nf * _PROFILE_BLOCK].reshape(lev + 1, nf, _PROFILE_BLOCK)[...] /= prof[:, :nf, None]
        if nf < prof.shape[1]:
            dmap[:, nf * _PROFILE_BLOCK:] /= prof[:, nf:]
    else:
        dmap /= sigma[:, None]
    scored_map = dmap if scored is None else np.where(mask[None, :], dmap, 0.0)
    peak = scored_map.max(axis=1)
    half_support = level_half_supports(w, lev)
    # in local noise units the map is comparable everywhere, so the first significant difference is
    # looked for over the whole record (a fault on the front is found there); peaks stay on the scored span
    first_idx = _first_event_times(dmap if noise_scale is not None else scored_map, k_sigma, half_support)
    any_over = first_idx >= 0
    times = t0_s + np.arange(n) * dt
    first_time = np.where(any_over, times[np.maximum(first_idx, 0)], np.nan)
    sig_levels = np.flatnonzero(any_over[:lev])[:FAULT_TIME_LEVELS]
    fault = float(np.min(first_time[sig_levels])) if sig_levels.size else None
    labels = tuple(f"D{j}" for j in range(1, lev + 1)) + (f"A{lev}",)
    return WaveletDifference(
        labels=labels,
        band_Hz=level_bands_Hz(lev, dt),
        ref_energy=ref_energy,
        energy_ratio=energy_ratio,
        sigma=sigma,
        peak_sigma=peak,
        first_time_s=first_time,
        fault_time_s=fault,
        difference_map=dmap,
        times_s=times,
        wavelet=w.name,
        method=method,
        level=lev,
    )


def burst_counts(rows: np.ndarray, scored: np.ndarray, dt: float, *, k_sigma: float = 6.0,
                 gap_s: float = 200e-9) -> tuple[np.ndarray, np.ndarray]:
    """Separate bursts in rows of a noise-normalised difference map, and the time they spread over.

    A partial discharge is a train of short current pulses: its finest wavelet levels exceed the noise
    in several separate bursts, each a few tens of nanoseconds long, and not in between. A breakdown
    between turns or to ground is one event whose after-effects (the winding's changed response) stay in
    the coarser levels. Counting the bursts of the finest levels tells the two apart where their sizes
    do not.

    Parameters
    ----------
    rows : numpy.ndarray
        Map rows, shape (levels, samples), in noise units [1] (e.g. ``difference_map[:3]`` of
        :func:`wavelet_difference`).
    scored : numpy.ndarray of bool
        Samples that count (e.g. after the front window, away from a chop and from clipped samples).
    dt : float
        Sample interval [s].
    k_sigma : float
        Threshold [noise units].
    gap_s : float
        Samples above the threshold closer than this belong to one burst [s].

    Returns
    -------
    counts : numpy.ndarray of int
        Bursts per row.
    spans_s : numpy.ndarray
        Time from the first to the last sample above the threshold per row [s] (0 without a burst).

    Examples
    --------
    >>> import numpy as np
    >>> row = np.zeros((1, 1000)); row[0, [100, 101, 110, 400, 900]] = 9.0
    >>> counts, spans = burst_counts(row, np.ones(1000, dtype=bool), 1e-8)
    >>> counts.tolist(), round(float(spans[0]) * 1e6, 2)
    ([3], 8.0)
    """
    r = np.atleast_2d(np.asarray(rows, dtype=np.float64))
    m = np.asarray(scored, dtype=bool)
    if m.shape != r.shape[1:]:
        raise ShotcheckError(f"burst_counts: scored must have one value per sample ({r.shape[1]}), got {m.shape}")
    dt = check_range("dt", dt, 0.0, None, low_inclusive=False, unit="s")
    gap = max(1, int(round(gap_s / dt)))
    counts = np.zeros(r.shape[0], dtype=np.int64)
    spans = np.zeros(r.shape[0])
    for j in range(r.shape[0]):  # loop over a few levels
        idx = np.flatnonzero(m & (r[j] > k_sigma))
        if idx.size:
            counts[j] = 1 + int(np.count_nonzero(np.diff(idx) > gap))
            spans[j] = (idx[-1] - idx[0]) * dt
    return counts, spans
