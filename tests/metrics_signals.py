"""Analytic test signals for the pre-processing and metric tests (not collected by pytest).

Voltage: the double exponential ``u(t) = A (exp(-t/tau1) - exp(-t/tau2))`` with the 1.2/50 us constants
tau1 = 68.22 us, tau2 = 0.405 us (Kuffel, Zaengl & Kuffel, High Voltage Engineering: Fundamentals, 2nd ed.,
table of double-exponential constants).

Network: a sum of series R-L-C branches between the terminal and the neutral shunt, each

    Y_k(s) = (1 / R_k) * (s w_k / Q_k) / (s^2 + s w_k / Q_k + w_k^2),   w_k = 2 pi f_k,

so ``H(s) = sum_k Y_k(s)`` is known in closed form. The current for the double-exponential voltage is
computed exactly from the residues of ``Y_k(s) V(s)`` (all poles simple); for any other sampled voltage it
is computed with the first-order-hold discretisation of ``Y(s)`` (scipy.signal.cont2discrete, exact for
a voltage linear between samples). A "fault" is the same network with one branch's inductance changed.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy import signal

from detector.record import Channel, Record

TAU1_S = 68.22e-6  # Kuffel, Zaengl & Kuffel, 2nd ed.: 1.2/50 us double exponential
TAU2_S = 0.405e-6


@dataclasses.dataclass(frozen=True)
class Branch:
    """Series R-L-C branch given by resonance frequency [Hz], quality factor and resistance [ohm]."""

    f0_Hz: float
    Q: float
    R_ohm: float

    def with_inductance_factor(self, k: float) -> Branch:
        """Same R and C, inductance multiplied by k: f0 / sqrt(k), Q / sqrt(k)."""
        return Branch(self.f0_Hz / np.sqrt(k), self.Q / np.sqrt(k), self.R_ohm)


HEALTHY = (Branch(150e3, 8.0, 400.0), Branch(420e3, 12.0, 900.0), Branch(800e3, 10.0, 1500.0))
#: inductance of the 420 kHz branch lowered by 6 % (a few shorted turns lower L): resonance up by ~3 %
FAULTY = (HEALTHY[0], HEALTHY[1].with_inductance_factor(0.94), HEALTHY[2])


def admittance_S(s: np.ndarray, branches=HEALTHY) -> np.ndarray:
    """Closed-form Y(s) [S] of the network at complex frequencies s [1/s]."""
    y = np.zeros_like(np.asarray(s, dtype=complex))
    for b in branches:
        w = 2 * np.pi * b.f0_Hz
        y = y + (1.0 / b.R_ohm) * (s * w / b.Q) / (s * s + s * w / b.Q + w * w)
    return y


def double_exponential(t_s: np.ndarray, amplitude_V: float, t0_s: float = 0.0) -> np.ndarray:
    """1.2/50 double exponential starting at t0 [V]."""
    tt = np.asarray(t_s, dtype=np.float64) - t0_s
    out = amplitude_V * (np.exp(-np.maximum(tt, 0) / TAU1_S) - np.exp(-np.maximum(tt, 0) / TAU2_S))
    return np.where(tt > 0, out, 0.0)


def current_exact(t_s: np.ndarray, amplitude_V: float, t0_s: float = 0.0, branches=HEALTHY) -> np.ndarray:
    """Exact current [A] of the network for the double exponential, by residues (time in microseconds)."""
    tt = (np.asarray(t_s, dtype=np.float64) - t0_s) * 1e6  # us
    a, b = 1e-6 / TAU1_S, 1e-6 / TAU2_S  # 1/us
    total = np.zeros_like(tt)
    for br in branches:
        w = 2 * np.pi * br.f0_Hz * 1e-6  # rad/us
        g = w / (br.Q * br.R_ohm)
        # I(s) = amplitude (b - a) g s / ((s^2 + s w/Q + w^2)(s + a)(s + b))
        poles = np.concatenate((np.roots([1.0, w / br.Q, w * w]), [-a, -b])).astype(complex)
        diff = poles[:, None] - poles[None, :]
        np.fill_diagonal(diff, 1.0)
        res = amplitude_V * (b - a) * g * poles / np.prod(diff, axis=1)
        total += np.real(np.exp(np.outer(np.maximum(tt, 0), poles)) @ res)
    return np.where(tt > 0, total, 0.0)


def current_foh(v: np.ndarray, dt: float, branches=HEALTHY) -> np.ndarray:
    """Current [A] for any sampled voltage, first-order-hold discretisation of Y(s) (exact for a voltage
    linear between samples), time in microseconds for conditioning."""
    out = np.zeros_like(v, dtype=np.float64)
    for br in branches:
        w = 2 * np.pi * br.f0_Hz * 1e-6
        num = [w / (br.Q * br.R_ohm), 0.0]
        den = [1.0, w / br.Q, w * w]
        bd, ad, _ = signal.cont2discrete((num, den), dt * 1e6, method="foh")
        out += signal.lfilter(np.ravel(bd), ad, v)
    return out


def chopped(v: np.ndarray, t_s: np.ndarray, chop_s: float, fall_s: float = 0.2e-6) -> np.ndarray:
    """The voltage collapsing linearly to zero in ``fall_s`` from ``chop_s`` on [V]."""
    ramp = np.clip(1.0 - (t_s - chop_s) / fall_s, 0.0, 1.0)
    return v * ramp


def make_record(
    *,
    rate_Hz: float = 100e6,
    n: int = 20000,
    pretrigger_s: float = 2e-6,
    amplitude_V: float = 500e3,
    branches=HEALTHY,
    noise_v: float = 0.0,
    noise_i: float = 0.0,
    seed: int = 0,
    chop_s: float | None = None,
    polarity: int = 1,
    start_time_s: float = 0.0,
    extra_current=None,
    source: str | None = None,
) -> Record:
    """A record with a double-exponential voltage through the network, sampled exactly.

    ``noise_v`` and ``noise_i`` are Gaussian noise standard deviations relative to the voltage amplitude and
    to the current peak. ``extra_current(t_rel_s)`` adds a current [A] (e.g. discharge pulses).
    """
    dt = 1.0 / rate_Hz
    t = np.arange(n) * dt
    v = double_exponential(t, amplitude_V, pretrigger_s)
    if chop_s is None:
        i = current_exact(t, amplitude_V, pretrigger_s, branches)
    else:
        v = chopped(v, t, pretrigger_s + chop_s)
        i = current_foh(v, dt, branches)
    if extra_current is not None:
        i = i + extra_current(t - pretrigger_s)
    rng = np.random.default_rng(seed)
    ipk = np.max(np.abs(i))
    v = v + noise_v * amplitude_V * rng.standard_normal(n)
    i = i + noise_i * ipk * rng.standard_normal(n)
    return Record(
        start_time_s,
        dt,
        (Channel("U", "voltage", polarity * v), Channel("I", "current", polarity * i)),
        meta={"shot_kind": "chopped" if chop_s is not None else "full"},
        source=source,
    )


def gaussian_pulses(times_s, charges_C, width_s=20e-9):
    """Discharge-like current pulses: Gaussians of standard deviation ``width_s`` carrying ``charges_C``."""

    def f(t):
        out = np.zeros_like(t)
        for t0, q in zip(times_s, charges_C, strict=True):
            out += q / (np.sqrt(2 * np.pi) * width_s) * np.exp(-0.5 * ((t - t0) / width_s) ** 2)
        return out

    return f
