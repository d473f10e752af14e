"""Wavelet difference: PyWavelets reference properties, noise scale, discharge vs winding change."""

from __future__ import annotations

import math

import numpy as np
import pytest
import pywt
from metrics_signals import FAULTY, gaussian_pulses, make_record

from detector._validation import ShotcheckError
from detector.metrics.wavelet import (
    DEFAULT_MAX_LEVEL,
    BoundaryEffectWarning,
    burst_counts,
    level_bands_Hz,
    resolve_level,
    resolve_wavelet,
    wavelet_difference,
)
from detector.preprocess import MAD_NORMAL_CONSTANT, align_pair

DT = 1e-8
NOISE = 5e-4
PULSES_S = (20e-6, 35e-6, 50e-6)  # after the start of the front (2 us into the record)


@pytest.mark.parametrize("name", ["db4", "sym8", "coif3"])
def test_perfect_reconstruction_of_the_wavelets(name):
    # PyWavelets tests/test_perfect_reconstruction.py: idwt(dwt(x)) == x; and iswt(swt(x)) == x
    x = np.random.default_rng(0).standard_normal(4096)
    rec = pywt.waverec(pywt.wavedec(x, name, mode="periodization", level=6), name, mode="periodization")
    np.testing.assert_allclose(rec, x, atol=1e-10)
    np.testing.assert_allclose(pywt.iswt(pywt.swt(x, name, level=6), name), x, atol=1e-10)


def test_mad_sigma_of_white_noise():
    """Donoho & Johnstone 1994: sigma = MAD / 0.6745 of the finest detail coefficients.

    Difference of two independent N(0, s^2) records has standard deviation sqrt(2) s, and the level-1
    SWT detail filter of an orthogonal wavelet has unit norm, so sigma(D1) = sqrt(2) s.
    """
    rng = np.random.default_rng(4)
    s = 0.3
    a, b = s * rng.standard_normal(50_000), s * rng.standard_normal(50_000)
    w = wavelet_difference(a, b, DT)
    assert MAD_NORMAL_CONSTANT == 0.6745
    assert w.sigma[0] == pytest.approx(math.sqrt(2) * s, rel=0.02)
    # every detail level of an orthogonal filter bank keeps the white-noise variance (unit-norm filters)
    np.testing.assert_allclose(w.sigma[: w.level], math.sqrt(2) * s, rtol=0.06)
    # the largest of 50 000 normal samples is about 4.4 sigma: below the 6-sigma significance
    assert np.all(w.peak_sigma[: w.level] < 5.5) and w.fault_time_s is None


def test_identical_currents_give_zero_difference():
    rec = make_record(noise_i=NOISE, seed=3)
    i = rec.current.samples
    w = wavelet_difference(i, i, DT)
    assert not w.energy_ratio.any() and not w.peak_sigma.any()
    assert w.fault_time_s is None and np.isnan(w.first_time_s).all()
    assert w.difference_map.shape == (w.level + 1, i.size)


def test_time_of_a_single_sample_difference():
    rng = np.random.default_rng(8)
    a = 1e-3 * rng.standard_normal(8192)
    b = a + 1e-3 * rng.standard_normal(8192) * 1e-3
    b[5000] += 0.05
    for method in ("swt", "dwt"):
        w = wavelet_difference(a, b, DT, method=method, t0_s=-1e-6)
        assert w.fault_time_s == pytest.approx(-1e-6 + 5000 * DT, abs=4 * DT), method
        assert w.peak_sigma[0] > 100


def _pair(**test_kw):
    ref = make_record(amplitude_V=300e3, noise_v=NOISE, noise_i=NOISE, seed=1)
    kw = dict(amplitude_V=600e3, noise_v=NOISE, noise_i=NOISE, seed=2)
    kw.update(test_kw)
    p = align_pair(ref, make_record(**kw))
    return p


def _levels(w, f_lo, f_hi):
    """Detail rows whose whole band lies within [f_lo, f_hi]."""
    b = w.band_Hz[: w.level]
    return np.flatnonzero((b[:, 0] >= f_lo) & (b[:, 1] <= f_hi))


@pytest.mark.parametrize("method", ["swt", "dwt"])
def test_discharges_show_in_fine_levels_winding_change_in_coarse(method):
    """15 ns discharge pulses (40 nC, about 14 noise sigma per sample in the current) against a 6 % change
    of one branch inductance (its 420 kHz resonance moves by 3 %)."""
    pulses = gaussian_pulses(PULSES_S, (40e-9,) * 3, width_s=15e-9)
    quiet = _pair()
    dis = _pair(extra_current=pulses)
    wind = _pair(branches=FAULTY)
    kw = dict(method=method)
    wq, wd, ww = (wavelet_difference(p.ref_current_pu, p.test_current_pu, p.sample_interval_s,
                                     t0_s=p.times_s[0], **kw) for p in (quiet, dis, wind))
    fine = _levels(wd, 3e6, 50e6)  # D1-D4 at 100 MS/s
    coarse = _levels(wd, 0.0, 800e3)  # D7, D8
    assert fine.size == 4 and coarse.size == 2
    # discharges: significant only in the fine levels, nothing structural in the coarse ones
    assert wd.peak_sigma[fine].max() > 10
    assert wd.peak_sigma[coarse].max() < 6
    np.testing.assert_allclose(wd.energy_ratio[coarse], wq.energy_ratio[coarse], rtol=0.5)
    # winding change: large and significant in the coarse levels, fine levels stay at noise
    assert ww.peak_sigma[coarse].max() > 100
    assert ww.energy_ratio[coarse].max() > 100 * wq.energy_ratio[coarse].max()
    assert ww.peak_sigma[fine].max() < 6
    # the fault instant is the first pulse (front starts 2 us into the reference record)
    assert wd.fault_time_s == pytest.approx(2e-6 + PULSES_S[0], abs=50e-9)
    assert wq.fault_time_s is None


def test_bursts_count_the_discharge_pulses_and_not_a_winding_change():
    """Each discharge pulse is one burst in the fine levels that hold it (D3, D4: 3-12 MHz for these 15 ns
    pulses at 100 MS/s; the pulses are 15 us apart); a change of the winding's inductance gives none there
    (it stays in the coarse levels)."""
    pulses = gaussian_pulses(PULSES_S, (40e-9,) * len(PULSES_S), width_s=15e-9)
    dis, wind = _pair(extra_current=pulses), _pair(branches=FAULTY)
    for p, expected in ((dis, len(PULSES_S)), (wind, 0)):
        w = wavelet_difference(p.ref_current_pu, p.test_current_pu, p.sample_interval_s, t0_s=p.times_s[0])
        counts, spans = burst_counts(w.difference_map[2:4], np.ones(p.n_samples, dtype=bool), p.sample_interval_s)
        assert counts.tolist() == [expected, expected]
        if expected:
            # first to last pulse, within the spread of a pulse over the level's wavelet support
            np.testing.assert_allclose(spans, PULSES_S[-1] - PULSES_S[0], atol=0.3e-6)


def test_burst_counts_gap_and_scored_samples():
    row = np.zeros((1, 1000))
    row[0, [100, 101, 110, 400, 900]] = 9.0
    every = np.ones(1000, dtype=bool)
    assert burst_counts(row, every, 1e-8)[0].tolist() == [3]  # 100-110 within the 200 ns gap
    assert burst_counts(row, every, 1e-8, gap_s=50e-9)[0].tolist() == [4]
    assert burst_counts(row, every, 1e-8, k_sigma=9.0)[0].tolist() == [0]  # strictly above
    not_900 = every.copy()
    not_900[850:] = False
    counts, spans = burst_counts(row, not_900, 1e-8)
    assert counts.tolist() == [2] and spans[0] == pytest.approx(3e-6)
    with pytest.raises(ShotcheckError, match="one value per sample"):
        burst_counts(row, every[:10], 1e-8)


def test_level_choice_and_bands():
    w = resolve_wavelet("db4")
    assert resolve_level(20000, w, None) == DEFAULT_MAX_LEVEL
    assert resolve_level(64, w, None) == pywt.dwt_max_level(64, 8) == 3
    b = level_bands_Hz(3, 1e-8)
    # detail level j covers fs/2^(j+1)..fs/2^j (dyadic filter bank), approximation 0..fs/2^(L+1)
    np.testing.assert_allclose(b, [[25e6, 50e6], [12.5e6, 25e6], [6.25e6, 12.5e6], [0, 6.25e6]])
    with pytest.warns(BoundaryEffectWarning, match="too deep"):
        resolve_level(1000, w, 9)
    with pytest.raises(ShotcheckError, match="at least 1"):
        resolve_level(1000, w, -1)
    with pytest.raises(ShotcheckError, match="at least 1"):
        resolve_level(1000, w, 0)
    with pytest.raises(ShotcheckError, match="too short"):
        resolve_level(5, w, None)


def test_deep_level_warns_through_the_public_function():
    x = np.sin(np.arange(600) / 7.0)
    with pytest.warns(BoundaryEffectWarning):
        w = wavelet_difference(x, 1.01 * x, DT, level=8)
    assert w.level == 8 and len(w.labels) == 9 and w.labels[-1] == "A8"


def test_wavelet_names_and_options():
    x = np.zeros(256)
    with pytest.raises(ShotcheckError, match=r"'db44'.*Did you mean 'db4'.*pywt.wavelist\(kind='discrete'\)"):
        wavelet_difference(x, x, DT, wavelet="db44")
    with pytest.raises(ShotcheckError, match="not a discrete wavelet"):
        wavelet_difference(x, x, DT, wavelet="morl")
    with pytest.raises(ShotcheckError, match="Invalid value for 'mode'"):
        wavelet_difference(x, x, DT, method="dwt", mode="periodic-ish")
    with pytest.raises(ShotcheckError, match="Invalid value for 'method'"):
        wavelet_difference(x, x, DT, method="cwt")
    with pytest.raises(ShotcheckError, match="one length"):
        wavelet_difference(x, x[:100], DT)
    w = wavelet_difference(x, x, DT, wavelet=pywt.Wavelet("sym4"))
    assert w.wavelet == "sym4"


def test_slow_offset_in_the_difference_leaves_no_end_artefact():
    """A benign slow difference (level-dependent tail) must not turn into a step at the record ends."""
    rng = np.random.default_rng(12)
    n = 10000
    a = 1e-3 * rng.standard_normal(n)
    t = np.arange(n) / n
    # offset and a trend of 100 noise sigma over the record: a plain mirror image would put a kink at
    # each end, which the deep levels see as a 10-sigma event
    b = a + 1e-3 * rng.standard_normal(n) + 3e-3 + 0.1 * t + 0.05 * t**2
    # the stationary transform pads with mirror images; the decimated one needs a non-periodic mode
    for method, mode in (("swt", "periodization"), ("dwt", "symmetric")):
        w = wavelet_difference(a, b, DT, method=method, mode=mode)
        assert np.all(w.peak_sigma[: w.level] < 6), method
        assert w.fault_time_s is None, method


@pytest.mark.parametrize("method", ["swt", "dwt"])
def test_local_noise_scale_and_scored_span(method):
    """A difference whose noise grows eightfold along the record (as an unwindowed prediction's does),
    with a large model artefact at the front (not scored) and a short burst of 20 local sigma early on.
    Scaled by the local noise and scored after the front, the burst is the event and noise alone stays
    near the Gaussian extreme of ~7000 coefficients; with one global noise figure the front artefact
    and the noisy end dominate."""
    n = 8192
    rng = np.random.default_rng(11)
    k = np.arange(n)
    scale = np.exp(np.log(8.0) * np.clip(k - 1000, 0, None) / (n - 1000))  # 1 .. 8
    scale[400:600] = 50.0  # the front: a large tolerance
    noise = rng.standard_normal(n) * scale
    artefact = np.where((k >= 480) & (k < 520), 40.0, 0.0)
    burst = 20.0 * np.exp(-0.5 * ((k - 1500) / 2.0) ** 2)
    scored = k >= 600
    ref = np.zeros(n)
    quiet = wavelet_difference(ref, noise + artefact, DT, method=method, noise_scale=scale, scored=scored)
    event = wavelet_difference(ref, noise + artefact + burst, DT, method=method, noise_scale=scale, scored=scored)
    plain = wavelet_difference(ref, noise + artefact + burst, DT, method=method)
    assert quiet.peak_sigma[:4].max() < 6.5
    assert event.peak_sigma[:5].max() > 8.0
    assert event.fault_time_s == pytest.approx(1500 * DT, abs=32 * DT)  # within a level-4 support
    assert plain.fault_time_s < 600 * DT  # the artefact at the front wins without the options
    # energies are those of the plain difference either way
    np.testing.assert_allclose(event.energy_ratio, plain.energy_ratio)
    with pytest.raises(ShotcheckError, match="noise_scale"):
        wavelet_difference(ref, noise, DT, noise_scale=scale[:-1])
    with pytest.raises(ShotcheckError, match="scored"):
        wavelet_difference(ref, noise, DT, scored=scored[:-1])


def test_noise_followed_per_level_along_the_record():
    """White noise of constant size divided by a scale that grows eightfold (as the prediction's noise
    does, which a compensated difference's sigma follows): in the map that noise shrinks along the
    record, so one noise figure per level makes the early samples look like events. Measured per part
    of the record, the peaks of noise stay at the Gaussian extreme of the samples scored."""
    n = 16384
    rng = np.random.default_rng(12)
    k = np.arange(n)
    scale = np.exp(np.log(8.0) * k / n)
    x = rng.standard_normal(n)
    ref = np.zeros(n)
    one = wavelet_difference(ref, x, DT, noise_scale=scale, scored=k >= 0)
    parts = wavelet_difference(ref, x, DT, noise_scale=scale, scored=k >= 0, noise_segments=8)
    assert one.peak_sigma[:4].min() > 7.0  # the early, relatively noisier samples
    assert parts.peak_sigma[:4].max() < 6.0  # max |N(0,1)| over ~16000 correlated values: about 4.5
    with pytest.raises(ShotcheckError, match="noise_segments"):
        wavelet_difference(ref, x, DT, noise_scale=scale, noise_segments=0)
