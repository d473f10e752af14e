"""Digital recorder model: turn a finely simulated waveform into a recorded impulse shot.

The chain follows what an impulse recorder does to the analogue signal, in this order:

1. **Band limit** -- a 4th-order Bessel low-pass (flat group delay, small step overshoot) with its
   -3 dB point at ``bandwidth_Hz``, designed by the bilinear transform on the fine simulation grid
   and run with :func:`scipy.signal.sosfilt` from rest (the simulated network is at rest before the
   generator fires at simulation time 0).
2. **Sampling** -- the band-limited fine waveform is evaluated at the recorder's sample instants by
   4-point (cubic) Lagrange interpolation on the uniform fine grid, local error O(h^4) like a cubic
   spline but without a global solve (:func:`interpolate_uniform`). The recorder's clock is not
   synchronous with the generator: the instant the impulse starts lies ``pretrigger_s`` plus a random
   offset uniform in ``[-jitter_s, +jitter_s]`` after the first sample, so the front falls at a random
   sub-sample position.
3. **Analogue disturbances** -- white Gaussian noise (``noise_lsb`` standard deviation), a narrow-band
   interference sine with random phase, and a constant baseline offset, all in LSB of the channel.
4. **Quantisation** -- a mid-tread quantiser over the fixed input range ``[-range, +range]`` with
   ``2**bits`` codes, clipping at both ends. The range is set once for a test sequence, as labs do,
   so a reduced-level shot uses fewer codes than the full-level one.

The result is a :class:`detector.record.Record` with channels ``"U"`` (applied voltage, volts inside,
``source_unit="kV"``) and ``"I_N"`` (neutral current, amperes, ``source_unit="A"``), first sample at
time 0 on the record's own axis.
"""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Mapping
from typing import Any

import numpy as np
from scipy import signal

from detector._validation import ShotcheckError, check_range
from detector.record import Channel, Record

__all__ = ["Digitiser", "digitise", "digitise_waveforms", "quantise", "band_limit", "interpolate_uniform"]

#: Order of the Bessel anti-alias low-pass.
FILTER_ORDER = 4
#: The filter's -3 dB point must lie below this fraction of the fine grid's Nyquist frequency,
#: otherwise the bilinear transform warps it too much.
MAX_BANDWIDTH_FRACTION_OF_NYQUIST = 0.8


@dataclasses.dataclass(frozen=True)
class Digitiser:
    """Settings of an impulse recorder channel pair (voltage and neutral current).

    Parameters
    ----------
    sample_rate_Hz : float
        Sampling rate [Hz], 1 MS/s to 1 GS/s (impulse recorders: 20-250 MS/s).
    bits : int
        Resolution [bit], 6 to 16.
    voltage_range_V : float
        Full-scale input range of the voltage channel: the quantiser spans ``[-voltage_range_V,
        +voltage_range_V]`` [V], referred to the high-voltage side.
    current_range_A : float
        Full-scale input range of the current channel, ``[-current_range_A, +current_range_A]`` [A].
    noise_lsb : float
        Standard deviation of the white analogue noise [LSB] (0 = none).
    interference_amplitude_lsb : float
        Amplitude of a sinusoidal interference [LSB] (0 = none).
    interference_frequency_Hz : float
        Frequency of the interference [Hz].
    pretrigger_s : float
        Time from the first sample to the start of the impulse [s] (before jitter).
    jitter_s : float
        Half-width of the uniform distribution of the trigger instant relative to the sample clock [s].
        ``None`` means half a sample interval, i.e. a sample clock asynchronous to the generator.
    baseline_offset_lsb : float
        Constant offset added before quantisation [LSB].
    bandwidth_Hz : float or None
        -3 dB bandwidth of the anti-alias low-pass [Hz]; None = no band limit (ideal recorder).
    """

    sample_rate_Hz: float = 100e6
    bits: int = 12
    voltage_range_V: float = 1.0e6
    current_range_A: float = 100.0
    noise_lsb: float = 0.5
    interference_amplitude_lsb: float = 0.0
    interference_frequency_Hz: float = 1.0e6
    pretrigger_s: float = 5e-6
    jitter_s: float | None = None
    baseline_offset_lsb: float = 0.0
    bandwidth_Hz: float | None = None

    def __post_init__(self) -> None:
        fs = check_range("sample_rate_Hz", self.sample_rate_Hz, 1e6, 1e9, unit="Hz")
        if isinstance(self.bits, bool) or not float(self.bits).is_integer():
            raise ShotcheckError(f"bits must be a whole number of bits, got {self.bits!r}")
        check_range("bits", self.bits, 6, 16, unit="bit")
        check_range("voltage_range_V", self.voltage_range_V, 0, None, low_inclusive=False, unit="V")
        check_range("current_range_A", self.current_range_A, 0, None, low_inclusive=False, unit="A")
        check_range("noise_lsb", self.noise_lsb, 0, None, unit="LSB")
        check_range("interference_amplitude_lsb", self.interference_amplitude_lsb, 0, None, unit="LSB")
        check_range("interference_frequency_Hz", self.interference_frequency_Hz, 0, None, unit="Hz")
        check_range("pretrigger_s", self.pretrigger_s, 0, None, unit="s")
        if self.jitter_s is not None:
            check_range("jitter_s", self.jitter_s, 0, self.pretrigger_s, unit="s")
        check_range("baseline_offset_lsb", self.baseline_offset_lsb, None, None, unit="LSB")
        if self.bandwidth_Hz is not None:
            check_range("bandwidth_Hz", self.bandwidth_Hz, 0, fs / 2, low_inclusive=False, unit="Hz")
        object.__setattr__(self, "bits", int(self.bits))

    @property
    def sample_interval_s(self) -> float:
        """Sample interval [s]."""
        return 1.0 / self.sample_rate_Hz

    @property
    def effective_jitter_s(self) -> float:
        """Half-width of the trigger-instant distribution actually used [s]."""
        return 0.5 * self.sample_interval_s if self.jitter_s is None else float(self.jitter_s)

    def lsb_V(self) -> float:
        """Voltage of one code step of the voltage channel [V]."""
        return 2.0 * self.voltage_range_V / 2**self.bits

    def lsb_A(self) -> float:
        """Current of one code step of the current channel [A]."""
        return 2.0 * self.current_range_A / 2**self.bits


def quantise(x: np.ndarray, bits: int, full_scale: float) -> tuple[np.ndarray, float, int]:
    """Mid-tread quantisation over ``[-full_scale, +full_scale]`` with clipping.

    Parameters
    ----------
    x : numpy.ndarray
        Analogue values [V or A].
    bits : int
        Resolution [bit]; the converter has ``2**bits`` codes from ``-2**(bits-1)`` to
        ``2**(bits-1) - 1``.
    full_scale : float
        Half the input span [V or A], > 0.

    Returns
    -------
    codes : numpy.ndarray of int32
        Output codes.
    lsb : float
        Value of one code step, ``2 * full_scale / 2**bits`` [V or A]; the recorded value is
        ``codes * lsb``.
    n_clipped : int
        Number of samples that were outside the range and were clipped.
    """
    lsb = 2.0 * float(full_scale) / 2**bits
    lo, hi = -(2 ** (bits - 1)), 2 ** (bits - 1) - 1
    raw = np.rint(np.asarray(x, dtype=np.float64) / lsb)
    clipped = (raw < lo) | (raw > hi)
    codes = np.clip(raw, lo, hi).astype(np.int32)
    return codes, lsb, int(np.count_nonzero(clipped))


def band_limit(x: np.ndarray, fine_interval_s: float, bandwidth_Hz: float | None) -> np.ndarray:
    """Apply the recorder's anti-alias low-pass to a waveform on a fine uniform grid.

    Parameters
    ----------
    x : numpy.ndarray
        Samples on the fine grid, starting from rest [V or A]; 2-D arrays are filtered along axis 0.
    fine_interval_s : float
        Interval of the fine grid [s].
    bandwidth_Hz : float or None
        -3 dB frequency of the 4th-order Bessel low-pass [Hz]; None returns ``x`` unchanged.

    Returns
    -------
    numpy.ndarray
        Filtered samples, same length.

    Raises
    ------
    ShotcheckError
        If the bandwidth is too close to the fine grid's Nyquist frequency to be represented; the
        simulation must then use a finer time step.
    """
    if bandwidth_Hz is None:
        return np.asarray(x, dtype=np.float64)
    fs = 1.0 / fine_interval_s
    if bandwidth_Hz >= MAX_BANDWIDTH_FRACTION_OF_NYQUIST * fs / 2:
        raise ShotcheckError(
            f"bandwidth_Hz {bandwidth_Hz:g} Hz is too close to the Nyquist frequency {fs / 2:g} Hz of the "
            f"simulated waveform (time step {fine_interval_s:g} s); simulate with a time step below "
            f"{MAX_BANDWIDTH_FRACTION_OF_NYQUIST / (2 * bandwidth_Hz):g} s or lower the bandwidth"
        )
    return signal.sosfilt(_bessel_sos(float(bandwidth_Hz), fs), x, axis=0)


@functools.lru_cache(maxsize=64)
def _bessel_sos(bandwidth_Hz: float, fs_Hz: float) -> np.ndarray:
    sos = signal.bessel(FILTER_ORDER, bandwidth_Hz, btype="low", norm="mag", output="sos", fs=fs_Hz)
    return sos


def interpolate_uniform(y: np.ndarray, t0_s: float, dt_s: float, t_s: np.ndarray) -> np.ndarray:
    """4-point Lagrange (cubic) interpolation of samples on a uniform grid.

    Parameters
    ----------
    y : numpy.ndarray
        Samples, shape (m,) or (m, k) with time along axis 0; m >= 4.
    t0_s : float
        Time of ``y[0]`` [s].
    dt_s : float
        Grid interval [s].
    t_s : numpy.ndarray
        Times to evaluate [s]; times outside the grid are clamped to its ends.

    Returns
    -------
    numpy.ndarray
        Interpolated values, shape ``t_s.shape + y.shape[1:]``.

    Notes
    -----
    Between grid points j and j+1, with u = (t - t_j) / dt in [0, 1), the cubic through
    j-1, j, j+1, j+2 has weights -u(u-1)(u-2)/6, (u+1)(u-1)(u-2)/2, -(u+1)u(u-2)/2, (u+1)u(u-1)/6
    (Lagrange form; four-point formula of Abramowitz & Stegun ch. 25, from memory). The interval is
    shifted at the two ends so the four points stay inside the grid. The error is O(dt^4) times the fourth
    derivative.
    """
    m = y.shape[0]
    x = np.clip((np.asarray(t_s, dtype=np.float64) - t0_s) / dt_s, 0.0, m - 1.0)
    j = np.clip(np.floor(x).astype(np.int64), 1, m - 3)
    u = x - j
    w = (
        -u * (u - 1) * (u - 2) / 6.0,
        (u + 1) * (u - 1) * (u - 2) / 2.0,
        -(u + 1) * u * (u - 2) / 2.0,
        (u + 1) * u * (u - 1) / 6.0,
    )
    extra = (slice(None),) + (None,) * (y.ndim - 1)
    return sum(wk[extra] * y[j + k - 1] for k, wk in enumerate(w))


def _check_waveforms(times_s: Any, voltage_V: Any, current_A: Any) -> tuple[np.ndarray, ...]:
    t = np.asarray(times_s, dtype=np.float64)
    v = np.asarray(voltage_V, dtype=np.float64)
    i = np.asarray(current_A, dtype=np.float64)
    if t.ndim != 1 or t.size < 4:
        raise ShotcheckError(f"times_s must be a 1-D array of at least 4 times, got shape {t.shape}")
    for name, a in (("voltage_V", v), ("current_A", i)):
        if a.shape != t.shape:
            raise ShotcheckError(f"{name} has shape {a.shape}, times_s has {t.shape}; they must match")
        if not np.isfinite(a).all():
            raise ShotcheckError(f"{name} has non-finite values at sample {int(np.argmax(~np.isfinite(a)))}")
    d = np.diff(t)
    if not np.isfinite(t).all() or (d <= 0).any():
        raise ShotcheckError("times_s must be finite and strictly increasing")
    dt = (t[-1] - t[0]) / (t.size - 1)
    if np.abs(d - dt).max() > 1e-6 * dt:
        raise ShotcheckError("times_s must be a uniform grid (the band limit is applied on it)")
    return t, v, i


def digitise_waveforms(
    times_s: np.ndarray,
    voltage_V: np.ndarray,
    current_A: np.ndarray,
    digitiser: Digitiser,
    *,
    rng: np.random.Generator,
    meta: Mapping[str, Any] | None = None,
    n_samples: int | None = None,
) -> Record:
    """Record a simulated voltage and neutral current as a digital recorder would.

    Parameters
    ----------
    times_s : numpy.ndarray
        Uniform simulation time grid [s]; the impulse starts at time 0 and the network is at rest
        before ``times_s[0]``.
    voltage_V : numpy.ndarray
        Applied (terminal) voltage at ``times_s`` [V].
    current_A : numpy.ndarray
        Neutral current at ``times_s`` [A].
    digitiser : Digitiser
        Recorder settings.
    rng : numpy.random.Generator
        Source of the trigger offset, noise and interference phase.
    meta : mapping, optional
        Shot metadata for the record (``shot_kind``, ``level_percent``, ``unit_id``...). Keys added:
        ``trigger_time_s`` (record time of simulation time 0), ``bits``, ``voltage_range_V``,
        ``current_range_A``, ``clipped_samples``.
    n_samples : int, optional
        Record length; by default as many samples as the simulation span covers for any trigger
        offset.

    Returns
    -------
    detector.record.Record
        Channels ``"U"`` [V] and ``"I_N"`` [A], first sample at record time 0.

    Raises
    ------
    ShotcheckError
        Non-uniform or non-finite input, a record longer than the simulation, or a bandwidth the
        fine grid cannot represent.
    """
    t, v, i = _check_waveforms(times_s, voltage_V, current_A)
    dg = digitiser
    fine_dt = (t[-1] - t[0]) / (t.size - 1)
    dt = dg.sample_interval_s
    jit = dg.effective_jitter_s
    if n_samples is None:
        n_samples = int(np.floor((t[-1] + dg.pretrigger_s - jit) / dt)) + 1
    else:
        n_samples = int(n_samples)
        if (n_samples - 1) * dt - (dg.pretrigger_s - jit) > t[-1] * (1 + 1e-12):
            raise ShotcheckError(
                f"n_samples {n_samples} at {dg.sample_rate_Hz:g} S/s needs "
                f"{(n_samples - 1) * dt - dg.pretrigger_s + jit:g} s of simulation after the impulse start, "
                f"the simulation ends at {t[-1]:g} s"
            )
    if n_samples < 16:
        raise ShotcheckError(f"the simulation span gives only {n_samples} samples; at least 16 are needed")
    offset = float(rng.uniform(-jit, jit)) if jit > 0 else 0.0
    trigger_time_s = dg.pretrigger_s + offset
    rec_t = np.arange(n_samples) * dt
    sim_t = rec_t - trigger_time_s

    vi = band_limit(np.stack([v, i], axis=1), fine_dt, dg.bandwidth_Hz)
    # before the first simulated instant the network is at rest: zero
    analog = interpolate_uniform(vi, t[0], fine_dt, sim_t)
    analog[sim_t < t[0]] = 0.0

    lsbs = np.array([dg.lsb_V(), dg.lsb_A()])
    ranges = np.array([dg.voltage_range_V, dg.current_range_A])
    disturb = np.zeros_like(analog)
    if dg.noise_lsb > 0:
        disturb += rng.standard_normal(analog.shape) * dg.noise_lsb
    if dg.interference_amplitude_lsb > 0:
        phase = rng.uniform(0, 2 * np.pi, size=2)
        disturb += dg.interference_amplitude_lsb * np.sin(
            2 * np.pi * dg.interference_frequency_Hz * rec_t[:, None] + phase[None, :]
        )
    disturb += dg.baseline_offset_lsb
    analog = analog + disturb * lsbs[None, :]

    codes_v, lsb_v, clip_v = quantise(analog[:, 0], dg.bits, ranges[0])
    codes_i, lsb_i, clip_i = quantise(analog[:, 1], dg.bits, ranges[1])
    m = dict(meta or {})
    m.update(
        trigger_time_s=trigger_time_s,
        bits=dg.bits,
        voltage_range_V=float(dg.voltage_range_V),
        current_range_A=float(dg.current_range_A),
        clipped_samples=clip_v + clip_i,
    )
    return Record(
        start_time_s=0.0,
        sample_interval_s=dt,
        channels=(
            Channel("U", "voltage", codes_v * lsb_v, source_unit="kV"),
            Channel("I_N", "current", codes_i * lsb_i, source_unit="A"),
        ),
        meta=m,
        processing=(f"digitise(fs={dg.sample_rate_Hz:g} Hz, bits={dg.bits}, bandwidth={dg.bandwidth_Hz} Hz)",),
    )


def digitise(
    sim: Any,
    digitiser: Digitiser,
    *,
    rng: np.random.Generator,
    meta: Mapping[str, Any] | None = None,
    n_samples: int | None = None,
) -> Record:
    """Record a simulation result (:class:`synthetic.simulate.SimResult`) with a digitiser.

    Parameters
    ----------
    sim : SimResult
        Simulation result with ``times_s`` [s], ``terminal_voltage_V`` [V] and
        ``neutral_current_A`` [A] on a uniform grid starting at the generator's firing.
    digitiser : Digitiser
        Recorder settings.
    rng : numpy.random.Generator
        Random source for trigger offset, noise and interference.
    meta : mapping, optional
        Shot metadata, see :func:`digitise_waveforms`.
    n_samples : int, optional
        Record length; see :func:`digitise_waveforms`.

    Returns
    -------
    detector.record.Record
        Channels ``"U"`` [V] and ``"I_N"`` [A].
    """
    return digitise_waveforms(
        sim.times_s, sim.terminal_voltage_V, sim.neutral_current_A, digitiser,
        rng=rng, meta=meta, n_samples=n_samples,
    )
