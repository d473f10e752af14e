"""Tests of the recorder model (synthetic.digitiser) on analytic waveforms."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from detector._validation import ShotcheckError
from synthetic.digitiser import Digitiser, band_limit, digitise_waveforms, quantise

FINE_DT = 1e-9


def double_exp(t, peak_V=-100e3):
    """Standard 1.2/50 us double exponential (Kuffel, Zaengl & Kuffel, 2nd ed.: tau1 68.22 us, tau2 0.405 us)."""
    u = np.exp(-t / 68.22e-6) - np.exp(-t / 0.405e-6)
    return peak_V * u / u.max()


def grid(t_end_s=60e-6):
    return np.arange(0, t_end_s, FINE_DT)


def test_record_layout_and_reproducible():
    t = grid()
    v = double_exp(t)
    dg = Digitiser(voltage_range_V=150e3, current_range_A=20.0, bandwidth_Hz=40e6)
    r1 = digitise_waveforms(t, v, v / 1e4, dg, rng=np.random.default_rng(5), meta={"shot_kind": "full"})
    r2 = digitise_waveforms(t, v, v / 1e4, dg, rng=np.random.default_rng(5), meta={"shot_kind": "full"})
    assert [c.name for c in r1.channels] == ["U", "I_N"]
    assert r1.voltage.source_unit == "kV" and r1.current.source_unit == "A"
    assert r1.sampling_rate_Hz == pytest.approx(100e6)
    assert r1.meta["shot_kind"] == "full" and r1.meta["bits"] == 12
    np.testing.assert_array_equal(r1.voltage.samples, r2.voltage.samples)
    np.testing.assert_array_equal(r1.current.samples, r2.current.samples)
    # the crest of the record is the crest of the wave within noise + filter smoothing
    assert r1.voltage.samples.min() == pytest.approx(-100e3, rel=0.01)


def test_quantisation_noise_rms_is_lsb_over_sqrt12():
    # Widrow & Kollar, Quantization Noise (2008), ch. 4: for a busy input the quantisation error is
    # uniform on one LSB, RMS = LSB / sqrt(12); also IEEE Std 1241-2010 (ideal ADC), from memory.
    x = np.random.default_rng(1).uniform(-0.9, 0.9, 200_000)
    codes, lsb, n_clip = quantise(x, 10, 1.0)
    err = codes * lsb - x
    assert n_clip == 0
    assert np.sqrt(np.mean(err**2)) == pytest.approx(lsb / np.sqrt(12), rel=0.01)
    assert np.abs(err).max() <= lsb / 2 + 1e-15


@pytest.mark.parametrize("bits", [8, 10, 12, 14])
def test_full_scale_sine_snr_is_602b_plus_176(bits):
    # IEEE Std 1241-2010, ideal ADC SNR for a full-scale sine = 6.02 b + 1.76 dB (from memory;
    # also Widrow & Kollar, Quantization Noise, 2008). Frequency incommensurate with the rate.
    n = 100_000
    t = np.arange(n) * 1e-8
    fs_amp = 1.0 - 2.0**-bits  # just inside the top code so nothing clips
    x = fs_amp * np.sin(2 * np.pi * 1.234567e6 * t + 0.3)
    codes, lsb, n_clip = quantise(x, bits, 1.0)
    assert n_clip == 0
    snr_dB = 10 * np.log10(np.mean(x**2) / np.mean((codes * lsb - x) ** 2))
    assert snr_dB == pytest.approx(6.02 * bits + 1.76, abs=0.3)


def test_same_range_reduced_shot_uses_fewer_codes():
    t = np.arange(0, 700e-6, 10e-9)  # the tail decays to below one LSB, visiting every code
    dg = Digitiser(voltage_range_V=120e3, current_range_A=20.0, bits=10, noise_lsb=0.0, bandwidth_Hz=None)
    full = digitise_waveforms(t, double_exp(t), double_exp(t) / 1e4, dg, rng=np.random.default_rng(0))
    red = digitise_waveforms(t, 0.5 * double_exp(t), 0.5 * double_exp(t) / 1e4, dg, rng=np.random.default_rng(0))
    n_full = np.unique(full.voltage.samples).size
    n_red = np.unique(red.voltage.samples).size
    # 100 kV in a +/-120 kV 10-bit range spans 100/240*1024 = 427 codes; 50 kV about 213 (computed)
    assert n_full == pytest.approx(427, abs=3)
    assert n_red == pytest.approx(n_full / 2, abs=3)
    lsb = 240e3 / 1024
    steps = np.diff(np.unique(full.voltage.samples))
    np.testing.assert_allclose(steps, lsb, rtol=1e-9)
    assert np.diff(np.unique(red.voltage.samples)).min() == pytest.approx(lsb)
    assert full.meta["voltage_range_V"] == red.meta["voltage_range_V"]


def test_clipping_at_range_ends_is_counted():
    t = grid()
    dg = Digitiser(voltage_range_V=80e3, current_range_A=20.0, bits=10, noise_lsb=0.0)
    r = digitise_waveforms(t, double_exp(t), double_exp(t) / 1e4, dg, rng=np.random.default_rng(0))
    assert r.voltage.samples.min() == pytest.approx(-80e3)
    assert r.meta["clipped_samples"] > 0


def test_noise_level_measured_matches_setting():
    t = grid(40e-6)
    zero = np.zeros_like(t)
    for noise_lsb in (0.5, 2.0, 8.0):
        dg = Digitiser(voltage_range_V=100e3, current_range_A=10.0, bits=12, noise_lsb=noise_lsb, bandwidth_Hz=None)
        r = digitise_waveforms(t, zero, zero, dg, rng=np.random.default_rng(3))
        for ch, lsb in ((r.voltage, dg.lsb_V()), (r.current, dg.lsb_A())):
            measured = ch.samples.std() / lsb
            # Gaussian noise plus independent quantisation noise of variance 1/12 LSB^2 (Widrow &
            # Kollar, Quantization Noise, ch. 4; the 1/12 law holds once noise >= 0.5 LSB)
            assert measured == pytest.approx(np.sqrt(noise_lsb**2 + 1 / 12), rel=0.05)


def test_baseline_offset_and_interference():
    t = grid(40e-6)
    zero = np.zeros_like(t)
    dg = Digitiser(voltage_range_V=100e3, current_range_A=10.0, bits=12, noise_lsb=0.0, bandwidth_Hz=None,
                   baseline_offset_lsb=7.0, interference_amplitude_lsb=20.0, interference_frequency_Hz=2.5e6)
    r = digitise_waveforms(t, zero, zero, dg, rng=np.random.default_rng(3))
    x = r.voltage.samples / dg.lsb_V()
    assert x.mean() == pytest.approx(7.0, abs=0.3)
    tt = r.times()
    basis = np.stack([np.sin(2 * np.pi * 2.5e6 * tt), np.cos(2 * np.pi * 2.5e6 * tt), np.ones_like(tt)], axis=1)
    coef, *_ = np.linalg.lstsq(basis, x, rcond=None)
    assert np.hypot(coef[0], coef[1]) == pytest.approx(20.0, rel=0.02)
    assert np.std(x - basis @ coef) == pytest.approx(1 / np.sqrt(12), rel=0.1)  # only quantisation left


def test_trigger_jitter_is_sub_sample_and_tracked_in_meta():
    t = grid(30e-6)
    v = double_exp(t)
    dg = Digitiser(sample_rate_Hz=50e6, voltage_range_V=120e3, current_range_A=20.0, bits=14,
                   noise_lsb=0.0, pretrigger_s=2e-6)
    rng = np.random.default_rng(11)
    crossings, triggers = [], []
    for _ in range(40):
        r = digitise_waveforms(t, v, v / 1e4, dg, rng=rng)
        y = -r.voltage.samples
        k = int(np.argmax(y >= 50e3))
        crossings.append((k - 1 + (50e3 - y[k - 1]) / (y[k] - y[k - 1])) * r.sample_interval_s)
        triggers.append(r.meta["trigger_time_s"])
    crossings, triggers = np.array(crossings), np.array(triggers)
    dt = dg.sample_interval_s
    assert np.all(np.abs(triggers - dg.pretrigger_s) <= dt / 2)
    frac = (crossings / dt) % 1.0
    assert frac.std() > 0.2  # spread over the whole sample interval, not stuck to the grid
    # the 50 % crossing moves with the trigger instant (same waveform, shifted)
    resid = (crossings - triggers) - np.mean(crossings - triggers)
    assert np.abs(resid).max() < 0.05 * dt


def test_band_limit_is_minus_3dB_at_bandwidth():
    # bandwidth = -3 dB frequency of the magnitude response (IEC 61083-1 uses the same definition for
    # recorders, from memory). The bilinear design pre-warps the cut-off, so it holds exactly.
    fs = 1e9
    t = np.arange(20_000) / fs
    for f in (10e6, 40e6):
        y = band_limit(np.sin(2 * np.pi * f * t), 1 / fs, f)
        assert np.abs(y[10_000:]).max() == pytest.approx(1 / np.sqrt(2), rel=0.01)
    # low frequencies pass, the step response of a Bessel filter hardly overshoots (< 1 %, from memory)
    step = band_limit(np.ones(5000), 1 / fs, 40e6)
    assert step[-1] == pytest.approx(1.0, abs=1e-9)
    assert step.max() < 1.01


def test_bad_settings_and_inputs_raise():
    with pytest.raises(ShotcheckError, match="bits"):
        Digitiser(bits=20)
    with pytest.raises(ShotcheckError, match="sample_rate_Hz"):
        Digitiser(sample_rate_Hz=0)
    with pytest.raises(ShotcheckError, match="bandwidth_Hz"):
        Digitiser(sample_rate_Hz=50e6, bandwidth_Hz=30e6)
    t = np.arange(0, 20e-6, 10e-9)  # 100 MS/s grid cannot carry a 40 MHz band limit
    with pytest.raises(ShotcheckError, match="time step"):
        digitise_waveforms(t, np.zeros_like(t), np.zeros_like(t), Digitiser(bandwidth_Hz=40e6),
                           rng=np.random.default_rng(0))
    t = grid(20e-6)
    with pytest.raises(ShotcheckError, match="current_A"):
        digitise_waveforms(t, np.zeros_like(t), np.zeros(3), Digitiser(), rng=np.random.default_rng(0))
    with pytest.raises(ShotcheckError, match="n_samples"):
        digitise_waveforms(t, np.zeros_like(t), np.zeros_like(t), Digitiser(), rng=np.random.default_rng(0),
                           n_samples=10_000)


@given(
    bits=st.integers(8, 14),
    full_scale=st.floats(1.0, 1e6),
    scale=st.floats(0.01, 3.0),
    seed=st.integers(0, 2**32 - 1),
)
def test_quantiser_properties(bits, full_scale, scale, seed):
    """Every output is a whole code inside the range; unclipped samples err by at most LSB/2
    (definition of a mid-tread quantiser, IEEE Std 1241-2010 ideal ADC, from memory)."""
    x = np.random.default_rng(seed).uniform(-1, 1, 500) * full_scale * scale
    codes, lsb, n_clip = quantise(x, bits, full_scale)
    assert codes.min() >= -(2 ** (bits - 1)) and codes.max() <= 2 ** (bits - 1) - 1
    inside = (x / lsb > -(2 ** (bits - 1)) - 0.5) & (x / lsb < 2 ** (bits - 1) - 0.5)
    assert np.all(np.abs(codes[inside] * lsb - x[inside]) <= lsb / 2 * (1 + 1e-12))
    assert n_clip == np.count_nonzero(~inside)


def test_cubic_interpolation_is_exact_for_cubics_and_fourth_order_accurate():
    # a 4-point Lagrange interpolant reproduces polynomials up to degree 3 exactly and errs by
    # O(h^4) for smooth signals (Lagrange four-point formula, Abramowitz & Stegun ch. 25; from memory)
    from synthetic.digitiser import interpolate_uniform

    tg = np.arange(50) * 0.1
    tq = np.random.default_rng(0).uniform(0, 4.9, 300)
    poly = 0.3 * tg**3 - tg**2 + 2 * tg - 1
    np.testing.assert_allclose(interpolate_uniform(poly, 0.0, 0.1, tq), 0.3 * tq**3 - tq**2 + 2 * tq - 1,
                               rtol=1e-10, atol=1e-10)
    errs = []
    for h in (0.1, 0.05):
        tg = np.arange(0, 10 + h / 2, h)
        errs.append(np.abs(interpolate_uniform(np.sin(tg), 0.0, h, tq) - np.sin(tq)).max())
    assert errs[0] / errs[1] == pytest.approx(16, rel=0.25)
    # two channels at once
    both = interpolate_uniform(np.stack([np.sin(tg), np.cos(tg)], axis=1), 0.0, 0.05, tq)
    assert both.shape == (300, 2)
