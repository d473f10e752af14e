"""Time-domain metrics on analytic pairs (double exponential through a known R-L-C network)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from metrics_signals import FAULTY, TAU1_S, TAU2_S, chopped, double_exponential, make_record
from scipy.optimize import brentq

from detector._validation import ShotcheckError
from detector.metrics.timedomain import (
    deviation_onset,
    noise_floor,
    time_domain_metrics,
    voltage_collapse,
    voltage_steps,
    voltage_windows,
    window_deviations,
)
from detector.preprocess import align_pair

DT = 1e-8
NOISE = 5e-4


def _pair(**test_kw):
    ref = make_record(amplitude_V=300e3, noise_v=NOISE, noise_i=NOISE, seed=1)
    kw = dict(amplitude_V=600e3, noise_v=NOISE, noise_i=NOISE, seed=2)
    kw.update(test_kw)
    return align_pair(ref, make_record(**kw))


def test_identical_records_give_zero_deviation():
    rec = make_record(amplitude_V=300e3, noise_v=NOISE, noise_i=NOISE, seed=1)
    m = time_domain_metrics(align_pair(rec, rec))
    assert not m.dv_pu.any() and not m.di_pu.any()
    for dev in (*m.voltage.values(), *m.current.values()):
        assert dev.max_abs == 0.0 and dev.max_sigma == 0.0
    assert m.onset_s is None
    assert m.ref_collapse is None and m.test_collapse is None


def test_noise_only_pair_stays_below_threshold():
    p = _pair()
    m = time_domain_metrics(p)
    # independent noise of the two records adds in power: sqrt(2) * 5e-4 of the amplitude, per unit of
    # the peak (0.963 of the amplitude for 1.2/50; computed from Kuffel's constants)
    expected = math.sqrt(2) * NOISE * 300e3 / p.ref_test_voltage_V
    assert m.voltage_noise.mad == pytest.approx(expected, rel=0.15)
    assert m.voltage_noise.rms == pytest.approx(expected, rel=0.15)
    assert m.voltage["all"].max_sigma < 6 and m.current["all"].max_sigma < 6
    assert m.onset_s is None


def test_clipped_samples_are_not_scored():
    """A test current clipped at 70 % of its peak differs from the reference by ~30 % there; those
    samples were not measured, so they neither raise the deviations nor set an onset (the trace itself
    keeps them, for the figures)."""
    ref = make_record(amplitude_V=300e3, noise_v=NOISE, noise_i=NOISE, seed=1)
    test = make_record(amplitude_V=600e3, noise_v=NOISE, noise_i=NOISE, seed=2)
    i = test.current.samples
    test = test.replace(channels=(test.voltage, test.current.with_samples(np.minimum(i, 0.7 * i.max()))))
    p = align_pair(ref, test)
    assert p.clipped.any()
    m = time_domain_metrics(p)
    assert np.abs(m.di_pu[p.clipped]).max() > 100 * m.current_sigma_pu
    assert m.current["all"].max_sigma < 6 and m.onset_s is None
    # the same pair with the mask cleared: the clipped samples dominate
    unmasked = time_domain_metrics(dataclasses.replace(p, clipped=None))
    assert unmasked.current["all"].max_sigma > 100 and unmasked.onset_s is not None


def test_winding_change_shows_in_the_current_not_the_voltage():
    m = time_domain_metrics(_pair(branches=FAULTY))
    assert m.current["all"].max_sigma > 50
    assert m.current["crest"].max_percent > 2.0
    assert m.voltage["all"].max_sigma < 6
    assert m.voltage_onset_s is None
    # the changed branch responds from the first microsecond of the front (front starts at 2 us)
    assert 2e-6 <= m.current_onset_s < 3.5e-6
    assert m.onset_s == m.current_onset_s
    dev = m.current["all"]
    assert dev.max_percent == pytest.approx(100 * dev.max_abs / np.abs(align_pair(
        make_record(amplitude_V=300e3, noise_v=NOISE, noise_i=NOISE, seed=1),
        make_record(amplitude_V=300e3, noise_v=NOISE, noise_i=NOISE, seed=1)).ref_current_pu).max(),
        rel=1e-9)


def test_onset_time_of_a_sudden_event():
    t_event = 25e-6  # after the start of the front

    def ring(t):
        tt = t - t_event
        return np.where(tt > 0, 2.0 * np.exp(-tt / 3e-6) * np.sin(2 * np.pi * 2e6 * tt), 0.0)

    m = time_domain_metrics(_pair(extra_current=ring))
    # the front starts 2 us after the first sample of the reference time axis
    assert m.current_onset_s == pytest.approx(2e-6 + t_event, abs=0.1e-6)
    assert m.voltage_onset_s is None


def test_deviation_onset_needs_the_minimum_duration():
    d = np.zeros(1000)
    d[100:103] = 10.0  # 3 samples: a spike
    d[500:510] = -10.0  # 10 samples
    assert deviation_onset(d, 1.0, DT, k_sigma=5, min_duration_s=50e-9) == 500
    assert deviation_onset(d, 1.0, DT, k_sigma=5, min_duration_s=0.0) == 100
    assert deviation_onset(d, 1.0, DT, k_sigma=20) is None
    assert deviation_onset(d, 1.0, DT, stop=400) is None
    with pytest.raises(ShotcheckError, match="sigma"):
        deviation_onset(d, 0.0, DT)


def test_windows_follow_the_analytic_wave():
    t = np.arange(20000) * DT
    t0 = 2e-6
    v = double_exponential(t, 1.0, t0)
    w = voltage_windows(v / v.max(), pretrigger_samples=180)
    # time to peak of A (exp(-t/tau1) - exp(-t/tau2)): tau1 tau2 ln(tau1/tau2) / (tau1 - tau2) (computed)
    t_peak = TAU1_S * TAU2_S * math.log(TAU1_S / TAU2_S) / (TAU1_S - TAU2_S)
    assert w["front"].start == 180
    assert abs(w["front"].stop * DT - (t0 + t_peak)) <= 1.5 * DT
    vpk = math.exp(-t_peak / TAU1_S) - math.exp(-t_peak / TAU2_S)
    t90 = brentq(lambda x: math.exp(-x / TAU1_S) - math.exp(-x / TAU2_S) - 0.9 * vpk, t_peak, 100e-6)
    assert abs(w["crest"].stop * DT - (t0 + t90)) <= 1.5 * DT
    assert w["tail"] == slice(w["crest"].stop, 20000) and w["all"] == slice(0, 20000)


def test_window_deviations_units():
    d = np.zeros(100)
    d[40] = -0.02
    out = window_deviations(d, 0.001, 0.5, {"a": slice(0, 50), "b": slice(50, 100), "e": slice(5, 5)},
                            np.arange(100) * DT)
    assert out["a"].max_sigma == pytest.approx(20.0)
    assert out["a"].max_percent == pytest.approx(4.0)
    assert out["a"].time_s == pytest.approx(40 * DT)
    assert out["b"].max_abs == 0.0 and math.isnan(out["e"].time_s)


@pytest.mark.parametrize("chop_s", [2e-6, 3.3e-6, 6e-6])
def test_collapse_instant_of_a_linear_chop(chop_s):
    """A linear fall from U to 0 in 0.2 us: the 70 %-10 % line meets U at the start of the fall.

    IEC 60060-1 chopping instant from the 70 % and 10 % points (from memory); exact for a linear fall
    up to the slow decay of the tail during the 0.2 us (a few 1e-3 of a sample).
    """
    t = np.arange(20000) * DT
    v = chopped(double_exponential(t, 1.0, 2e-6), t, 2e-6 + chop_s, fall_s=0.2e-6)
    c = voltage_collapse(v / v.max(), DT)
    assert c.time_s == pytest.approx(2e-6 + chop_s, abs=0.05 * DT)
    assert c.fall_time_s == pytest.approx(0.2e-6, rel=0.01)
    assert c.voltage_after_pu == pytest.approx(0.0, abs=1e-9)
    assert voltage_collapse(double_exponential(t, 1.0, 2e-6), DT) is None


def test_partial_collapse_and_threshold():
    t = np.arange(5000) * DT
    v = double_exponential(t, 1.0, 1e-6)
    v = v * np.clip(1.0 - 0.6 * (t - 10e-6) / 0.1e-6, 0.4, 1.0)  # falls to 40 % in 0.1 us
    c = voltage_collapse(v / v.max(), DT)
    assert c.time_s == pytest.approx(10e-6, abs=0.5 * DT)
    assert c.voltage_after_pu == pytest.approx(0.4 * c.voltage_before_pu, rel=0.03)  # tail decays 2 us
    assert voltage_collapse(v / v.max(), DT, min_drop_pu=0.7) is None


def test_chopped_test_against_full_reference():
    p = _pair(chop_s=3e-6)
    m = time_domain_metrics(p)
    assert m.ref_collapse is None
    assert m.test_collapse.time_s == pytest.approx(5e-6, abs=0.3 * DT)
    assert m.compared_until_s < 5e-6 - 0.15e-6
    # before the chop the records hold the same wave through the same network: noise only
    assert m.voltage["all"].max_sigma < 6 and m.current["all"].max_sigma < 6
    assert m.onset_s is None


def test_noise_floor_adds_in_power():
    nf = noise_floor((3.0, 4.0), (4.0, 3.0))
    assert nf == (5.0, 5.0)


def test_noise_free_records_use_the_sigma_floor():
    """Synthetic records without noise: sigma falls back to 1e-5 of the reference peak, numbers stay
    finite, a healthy pair shows no onset and a changed winding does."""
    ref = make_record(amplitude_V=300e3)
    healthy = time_domain_metrics(align_pair(ref, make_record(amplitude_V=600e3)))
    assert healthy.voltage_noise.mad == 0.0
    assert healthy.voltage_sigma_pu == pytest.approx(1e-5 * np.abs(align_pair(ref, ref).ref_voltage_pu).max())
    assert np.isfinite(healthy.current["all"].max_sigma) and healthy.onset_s is None
    faulty = time_domain_metrics(align_pair(ref, make_record(amplitude_V=600e3, branches=FAULTY)))
    assert faulty.current_onset_s is not None and faulty.current["all"].max_sigma > 1e3


def test_collapse_instant_of_a_slow_noisy_chop():
    """A linear chop over 25 samples after a noisy crest: the IEC 60060-1 construction (line through the
    70 % and 10 % points, taken at the voltage before the fall) puts the instant at the start of the
    ramp. Noise steps before the fall that exceed a tenth of the steepest step must not be taken for the
    knee (they once gave instants tens of seconds off)."""
    dt = 5e-9
    n_lead, n_fall = 300, 25
    for seed in range(60):
        rng = np.random.default_rng(seed)
        ramp = 1.0 - 1.75 * np.arange(1, n_fall + 1) / n_fall  # 1.0 -> -0.75
        after = -0.75 * np.cos(np.arange(200) * 0.05)
        v = np.concatenate([np.ones(n_lead), ramp, after]) + rng.normal(0.0, 0.004, n_lead + n_fall + 200)
        c = voltage_collapse(v, dt)
        assert c is not None
        t_true = (n_lead - 1) * dt  # last sample at the crest level: the ramp starts there
        assert abs(c.time_s - t_true) < 2.5 * dt, (seed, c)
        assert 0.0 < c.fall_time_s < 2 * n_fall * dt


def test_noise_under_one_code_uses_the_rms_not_a_zero_mad():
    """Pre-trigger noise smaller than one recorder code: most samples sit on one code, the MAD is 0 and
    the sigma used must come from the rms (it once fell to the 1e-5 floor, overstating every voltage
    deviation in noise units about 70-fold). Difference of two independent records: the rms add in power."""
    rng = np.random.default_rng(3)
    code = 2e-3  # of the voltage amplitude
    recs = []
    for amp, seed in ((300e3, 1), (600e3, 2)):
        rec = make_record(amplitude_V=amp, seed=seed)
        q = code * amp
        v = np.round((rec.voltage.samples + rng.normal(0.0, 0.3 * q, rec.n_samples)) / q) * q
        chans = tuple(c.with_samples(v) if c is rec.voltage else c for c in rec.channels)
        recs.append(dataclasses.replace(rec, channels=chans))
    pair = align_pair(*recs)
    assert pair.ref_noise.voltage_mad_pu == 0.0 and pair.test_noise.voltage_mad_pu == 0.0
    m = time_domain_metrics(pair)
    expected = math.hypot(pair.ref_noise.voltage_rms_pu, pair.test_noise.voltage_rms_pu)
    assert m.voltage_sigma_pu == pytest.approx(expected)
    assert m.voltage_sigma_pu > 1e-4  # far above the 1e-5 floor
    assert m.voltage["all"].max_sigma < 10.0  # healthy pair: a few sigma, not hundreds


def _steps_by_loops(dv, vr, sigma, dt, L, start, stop, k_sigma=6.0, tt=2e-9, lt=1e-3):
    """The statistic of voltage_steps written out sample by sample (means of the two windows; the
    derivative as the backward difference, zero at the first sample)."""
    d = np.concatenate(([0.0], np.diff(vr))) / dt
    ks = list(range(max(start, L), min(stop, dv.size) - L + 1))
    scores = []
    for k in ks:
        h = np.mean(dv[k:k + L]) - np.mean(dv[k - L:k])
        hv = lt * (np.mean(vr[k:k + L]) - np.mean(vr[k - L:k]))
        hs = tt * (np.mean(d[k:k + L]) - np.mean(d[k - L:k]))
        scores.append(abs(h) / math.sqrt(sigma ** 2 * 2.0 / L + hv ** 2 + hs ** 2))
    return ks, np.array(scores)


@pytest.mark.parametrize("L_samples", [2, 5, 16])
def test_voltage_steps_equal_the_statistic_written_out(L_samples):
    """The cumulative-sum form gives the same scores, first crossing and step position as the two
    window means computed sample by sample, on a steep non-flat reference with noise, a level and a
    timing error, and a step (the tolerance terms matter on the front)."""
    rng = np.random.default_rng(L_samples)
    t = np.arange(3000) * DT
    vr = double_exponential(t, 1.0, 2e-6)
    sigma = 3e-4
    dv = 2e-3 * vr + 0.05 * np.gradient(vr) + rng.normal(0.0, sigma, t.size) + 8e-3 * (t >= 20e-6)
    start, stop = 150, 2800
    (res,) = voltage_steps(dv, vr, sigma, DT, scales_s=(L_samples * DT,), start=start, stop=stop)
    ks, scores = _steps_by_loops(dv, vr, sigma, DT, L_samples, start, stop)
    assert res.max_score == pytest.approx(scores.max(), rel=1e-9)
    over = np.flatnonzero(scores > 6.0)
    assert over.size and res.first_index == ks[over[0]]
    j = over[0]
    assert res.step_index == ks[j + int(np.argmax(scores[j:j + L_samples]))]


def test_a_step_after_the_compared_span_is_not_scored():
    """Samples from ``stop`` on (a chop) never enter either window: a large step at ``stop`` scores
    nothing, the same step L samples inside the span is found there."""
    n, L, sigma = 4000, 64, 1e-3
    rng = np.random.default_rng(5)
    noise = rng.normal(0.0, sigma, n)
    flat = np.zeros(n)
    stop = 3000
    dv = noise + 0.5 * (np.arange(n) >= stop)
    (res,) = voltage_steps(dv, flat, sigma, DT, scales_s=(L * DT,), start=0, stop=stop)
    assert res.max_score < 6.0 and res.first_index == -1 and res.step_index == -1
    dv_in = noise + 0.5 * (np.arange(n) >= stop - L)
    (res_in,) = voltage_steps(dv_in, flat, sigma, DT, scales_s=(L * DT,), start=0, stop=stop)
    assert res_in.step_index == stop - L


def test_voltage_steps_refuse_bad_traces():
    with pytest.raises(ShotcheckError, match="one length"):
        voltage_steps(np.zeros(10), np.zeros(11), 1.0, DT, scales_s=(2 * DT,), start=0, stop=10)
    with pytest.raises(ShotcheckError, match="finite"):
        voltage_steps(np.full(10, np.nan), np.zeros(10), 1.0, DT, scales_s=(2 * DT,), start=0, stop=10)


@pytest.mark.parametrize("L_samples", [4, 16, 64])
def test_voltage_step_score_follows_the_two_sample_mean_statistic(L_samples):
    """A step of height A in white noise sigma: the difference of the means of L samples after and before
    has standard deviation sigma*sqrt(2/L) (variance of a difference of two independent means; any
    statistics textbook), so the score at the step is A / (sigma sqrt(2/L)); on noise alone the largest
    score over 10 000 samples stays below the threshold of 6."""
    rng = np.random.default_rng(L_samples)
    n, k0, sigma = 10000, 6000, 1e-3
    ref = np.zeros(n)  # flat reference: no level or timing tolerance
    noise = rng.normal(0.0, sigma, n)
    ((z0, i0, _),) = voltage_steps(noise, ref, sigma, DT, scales_s=(L_samples * DT,), start=0, stop=n)
    assert z0 < 6.0 and i0 == -1
    A = 12.0 * sigma * math.sqrt(2.0 / L_samples)
    dv = noise + A * (np.arange(n) >= k0)
    ((z, i, step),) = voltage_steps(dv, ref, sigma, DT, scales_s=(L_samples * DT,), start=0, stop=n)
    assert 9.0 < z < 16.0  # 12 expected, noise of the two means adds about +-1 (and the max a little)
    assert k0 - L_samples <= i <= k0
    assert abs(step - k0) <= max(1, L_samples // 8)  # the peak sits at the step


def test_voltage_steps_tolerate_level_and_timing_errors():
    """The reference wave itself, scaled by 1.0005 and shifted by 1 ns (within the tolerances of 0.1 %
    and 2 ns), scores below the threshold; the same plus a 1 % step at 30 us scores above it there."""
    t = np.arange(20000) * DT
    v = double_exponential(t, 1.0, 2e-6)
    sigma = 1e-4
    rng = np.random.default_rng(0)
    shifted = 1.0005 * double_exponential(t - 1e-9, 1.0, 2e-6) + rng.normal(0.0, sigma, t.size)
    dv = shifted - v
    scores = voltage_steps(dv, v, sigma, DT, scales_s=(40e-9, 160e-9), start=150, stop=19000)
    assert all(z < 6.0 and i == -1 for z, i, _ in scores)
    dv2 = dv - 0.01 * (t >= 30e-6)
    scores2 = voltage_steps(dv2, v, sigma, DT, scales_s=(40e-9, 160e-9), start=150, stop=19000)
    assert all(z > 6.0 and abs(i * DT - 30e-6) < 0.2e-6 and abs(k * DT - 30e-6) <= 2 * DT for z, i, k in scores2)
