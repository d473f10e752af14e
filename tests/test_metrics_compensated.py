"""Wave-shape-compensated current difference on analytic networks.

The currents are computed with ``scipy.signal.lsim`` (an independent LTI solver) from a series R-L-C
admittance driven by the voltage; the compensated difference must vanish (within noise) for the same
network under a different applied wave, and stand out for a changed network.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from detector._validation import ShotcheckError
from detector.metrics.compensated import compensated_difference, multiscale_z, quantisation_step

DT = 1e-8
N = 8000
PRE = 500


def _wave(t, *, tau1=68.22e-6, tau2=0.405e-6, chop_s=None):
    # 1.2/50 us double exponential (Kuffel, Zaengl & Kuffel, table of wave constants; recalled)
    s = np.clip(t, 0.0, None)
    v = np.exp(-s / tau1) - np.exp(-s / tau2)
    if chop_s is not None:
        v = v * 0.5 * (1 - np.tanh((t - chop_s) / 30e-9))
    return v / v.max()


def _current(v, t, L=2e-3, C=1e-9, R=300.0, Cp=0.3e-9):
    """Series R-L-C branch in parallel with a capacitance: Y(s) = s Cp + s C / (s^2 L C + s R C + 1)."""
    # lsim needs a proper system: the branch s C / (s^2 L C + s R C + 1) goes to lsim, the parallel
    # capacitance's current Cp dv/dt is added from the derivative of the (smooth) wave
    _, y_rest, _ = signal.lsim(signal.TransferFunction([C, 0.0], [L * C, R * C, 1.0]), v, t - t[0])
    return Cp * np.gradient(v, t) + y_rest, None


def _pair(*, test_kwargs, network_test=None, noise=1e-4, seed=0):
    rng = np.random.default_rng(seed)
    t = (np.arange(N) - PRE) * DT
    v_r = _wave(t)
    v_t = _wave(t, **test_kwargs)
    i_r, _ = _current(v_r, t)
    i_t, _ = _current(v_t, t, **(network_test or {}))
    scale = np.abs(i_r).max()
    i_r = i_r + rng.normal(0, noise * scale, N)
    i_t = i_t + rng.normal(0, noise * scale, N)
    v_r = v_r + rng.normal(0, noise, N)
    v_t = v_t + rng.normal(0, noise, N)
    return v_r, i_r, v_t, i_t


@pytest.mark.parametrize(
    ("test_kwargs", "limit"),
    [
        ({"tau2": 0.36e-6}, 6.0),  # front 10 % steeper: a generator drift well inside IEC 60060-1's +/-30 %
        ({"tau1": 60e-6}, 6.0),  # shorter tail
        # chopped at 4 us (chopping at 2-6 us: common practice); the collapse excites frequencies the
        # full reference wave barely holds, so the prediction there is noisier: the noise weighting
        # (noise_weight) keeps that noise out (without it the largest score here was 6.1)
        ({"chop_s": 4e-6}, 6.0),
    ],
)
def test_same_network_other_wave_leaves_no_difference(test_kwargs, limit):
    v_r, i_r, v_t, i_t = _pair(test_kwargs=test_kwargs)
    cd = compensated_difference(v_r, i_r, v_t, i_t, DT, pretrigger_samples=PRE)
    assert cd.onset_index is None
    start = PRE + 150  # after the front window
    z, first = multiscale_z(cd, start=start, pretrigger_samples=PRE)
    assert np.nanmax(z) < limit


def test_changed_network_is_found_with_its_onset():
    # the same wave on a branch whose inductance dropped 3 % (a shorted part of a winding)
    v_r, i_r, v_t, i_t = _pair(test_kwargs={}, network_test={"L": 2e-3 * 0.97})
    cd = compensated_difference(v_r, i_r, v_t, i_t, DT, pretrigger_samples=PRE)
    z, first = multiscale_z(cd, start=PRE + 150, pretrigger_samples=PRE)
    assert np.nanmax(z) > 20.0
    # with its onset: the change is there from the front on, so the difference's first significant
    # sample lies within the first few samples scored
    assert cd.onset_index is not None
    assert 0 <= int(np.nanmin(first)) - (PRE + 150) < 10, first


def test_backtracked_onset_finds_where_a_growing_change_began():
    # a change that starts at a known sample and grows linearly: the 6-sigma crossing comes late by the
    # time to grow to 6 sigma, the backtracked onset by the time to grow past about one sigma
    n, pre, k0 = 6000, 500, 3000
    rng = np.random.default_rng(3)
    sigma = 1e-3
    d = rng.normal(0.0, sigma, n)
    slope = 6 * sigma / 40  # 6 sigma after 40 samples
    d[k0:] += slope * np.arange(n - k0)
    nan = np.full(n, np.nan)
    from detector.metrics.compensated import CompensatedDifference

    cd = CompensatedDifference(predicted=nan, difference=d, sigma=np.full(n, sigma), z=d / sigma, onset_index=None,
                              window_tau_s=0.0)
    z, first, onset = multiscale_z(cd, start=pre + 100, scales=(1, 4), pretrigger_samples=pre,
                                   return_onset=True)
    # (seed 3: crossings 30 and 29 samples late; these bounds hold for seeds 0-7 as well)
    assert first[0] - k0 >= 25  # the single-sample crossing lags by the time to grow to 6 sigma
    assert 0 <= onset[0] - k0 <= 20 and first[0] - onset[0] >= 8  # noise dips below 1 sigma a while longer
    assert 0 <= onset[1] - k0 <= 14  # the 4-sample average dips less
    # a step of 40 sigma: the onset is the step's own sample
    d2 = rng.normal(0.0, sigma, n)
    d2[k0:] += 40 * sigma
    cd2 = CompensatedDifference(predicted=nan, difference=d2, sigma=np.full(n, sigma), z=d2 / sigma,
                               onset_index=None, window_tau_s=0.0)
    _, _, onset2 = multiscale_z(cd2, start=pre + 100, scales=(1, 16), pretrigger_samples=pre, return_onset=True)
    # (to within the few samples before it whose noise happens to exceed one sigma of the same sign)
    assert -3 <= onset2[0] - k0 <= 0 and abs(onset2[1] - k0) <= 3


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_backtracked_onset_of_a_clean_step_is_its_sample_at_every_scale(sign):
    from detector.metrics.compensated import CompensatedDifference

    n, pre, k0 = 6000, 500, 3000
    start = pre + 100

    def onsets(d, exclude=None):
        cd = CompensatedDifference(predicted=np.full(n, np.nan), difference=d, sigma=np.full(n, 1e-3),
                                   z=d / 1e-3, onset_index=None, window_tau_s=0.0)
        return multiscale_z(cd, start=start, pretrigger_samples=pre, exclude=exclude, return_onset=True)[2]

    step = np.where(np.arange(n) >= k0, sign * 0.04, 0.0)
    np.testing.assert_array_equal(onsets(step), k0)
    # already under way where scoring starts: the first scored sample (it began there or earlier)
    np.testing.assert_array_equal(onsets(np.full(n, sign * 0.04)), start)
    # right after excluded samples (e.g. around a chop), or inside them: the first sample after them
    ex = (np.arange(n) >= k0 - 100) & (np.arange(n) < k0)
    np.testing.assert_array_equal(onsets(step, ex), k0)
    np.testing.assert_array_equal(onsets(np.where(np.arange(n) >= k0 - 50, sign * 0.04, 0.0), ex), k0)


def test_prediction_reproduces_the_current_for_a_scaled_wave():
    # linearity: a wave at another level (here 1/0.6) predicts the current scaled by the same factor
    t = (np.arange(N) - PRE) * DT
    v = _wave(t)
    i, _ = _current(v, t)
    cd = compensated_difference(v * 0.6, i * 0.6, v, i, DT, pretrigger_samples=PRE)
    ok = np.isfinite(cd.predicted)
    err = np.max(np.abs(cd.predicted[ok] - i[ok])) / np.abs(i).max()
    assert err < 2e-3


def test_bad_input():
    with pytest.raises(ShotcheckError, match="one length"):
        compensated_difference(np.ones(100), np.ones(100), np.ones(99), np.ones(100), DT, pretrigger_samples=10)
    with pytest.raises(ShotcheckError, match="at least 32 samples"):
        compensated_difference(np.ones(10), np.ones(10), np.ones(10), np.ones(10), DT, pretrigger_samples=2)


def test_quantisation_step_of_recorded_and_of_simulated_samples():
    from detector.metrics.compensated import quantisation_step

    rng = np.random.default_rng(1)
    x = np.sin(np.linspace(0, 20, 5000)) * 300.0
    q = 0.7324
    assert quantisation_step(np.round(x / q) * q) == pytest.approx(q, rel=1e-6)
    assert quantisation_step(x + rng.normal(0, 1e-3, x.size)) == 0.0  # floats: no grid


def test_stationary_interference_is_removed_but_a_fault_is_kept():
    from detector.metrics.compensated import remove_stationary_tones

    dt = 1e-8
    n = 8000
    t = np.arange(n) * dt
    rng = np.random.default_rng(2)
    tone = 3.0 * np.sin(2 * np.pi * 150e3 * t + 0.4)
    noise = rng.normal(0, 1.0, n)
    # a fault: a damped oscillation that starts at 30 us (not stationary)
    s = np.clip(t - 30e-6, 0, None)
    fault = np.where(t > 30e-6, 8.0 * np.exp(-s / 10e-6) * np.sin(2 * np.pi * 400e3 * s), 0.0)
    cleaned, tones = remove_stationary_tones(tone + noise + fault, dt, np.arange(n), 500)
    assert len(tones) >= 1 and tones[0][0] == pytest.approx(150e3, rel=0.02)
    assert np.std((cleaned - fault - noise)[:2500]) < 0.3  # the tone is gone
    # the fault's oscillation survives (its amplitude changes along the span, so it is no tone)
    assert np.max(np.abs(cleaned[3000:4000])) > 5.0


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_two_close_tones_are_removed_as_a_pair_but_the_same_pair_from_the_front_on_is_kept(seed, monkeypatch):
    """Two records' interference at 112 and 124 kHz over a 100 us span: 1.2 cycles of the span apart,
    they beat once over it, so neither passes the single tone's test (each third sees another
    amplitude). Searched as a pair they are found and removed. The same two tones beginning at the
    front (a changed winding's slow ringing, beating) pass the thirds test as well but are absent from
    the pre-trigger, and are kept."""
    import detector.metrics.compensated as cm

    dt, n, pre = 1e-8, 10000, 500
    t = np.arange(n) * dt
    noise = np.random.default_rng(seed).normal(0.0, 1.0, n)
    two = 3.0 * np.sin(2 * np.pi * 112e3 * t + 0.7) + 3.0 * np.sin(2 * np.pi * 124e3 * t + 2.1)
    cleaned, tones = cm.remove_stationary_tones(two + noise, dt, np.arange(n), pre)
    assert sorted(round(f / 1e3) for f, _ in tones) == [112, 124]
    assert np.std(cleaned - noise) < 0.1  # of a tone pair RMS 3.0
    fault = np.where(t > pre * dt, two, 0.0)
    cleaned, tones = cm.remove_stationary_tones(fault + noise, dt, np.arange(n), pre)
    assert tones == [] and np.array_equal(cleaned, fault + noise)
    # the single tone's test alone leaves the interference in (so the pair search is what removes it)
    monkeypatch.setattr(cm, "PAIR_MAX_HZ", 0.0)
    cleaned, tones = cm.remove_stationary_tones(two + noise, dt, np.arange(n), pre)
    assert tones == [] and np.std(cleaned - noise) > 2.5


def test_grid_phasors_by_products_equal_the_exponentials():
    """The pair search's rows of ``exp(2 pi i f t)`` on a frequency grid, made by products from two
    exponentials, against one exponential per entry (Euler's formula; 33 frequencies, 4000 times)."""
    from detector.metrics.compensated import _grid_phasors

    t = (np.arange(4000) * 5 + 2) * 5e-9
    f = 300e3 + np.arange(-16, 17) * 1e3
    direct = np.exp(2j * np.pi * f[:, None] * t)
    assert np.max(np.abs(_grid_phasors(f[0], 1e3, f.size, t) - direct)) < 1e-12


def test_tone_aware_offset_recovers_the_baseline_a_short_pretrigger_biases():
    from detector.metrics.compensated import tone_aware_offsets

    dt = 1e-8
    n0 = 260  # 2.6 us of pre-trigger: 0.52 periods of a 200 kHz tone
    t = np.arange(n0) * dt
    rng = np.random.default_rng(3)
    noise = rng.normal(0, 0.3, (2, n0))
    tone = np.stack((3.0 * np.sin(2 * np.pi * 200e3 * t + 0.9), np.zeros(n0)))
    x = tone + noise + np.array([[1.5], [1.5]])  # the true offset of both channels: 1.5
    pre = x - x.mean(axis=1, keepdims=True)  # baselines removed by the mean, as the records are
    bias = 1.5 - x.mean(axis=1)  # what the mean got wrong
    assert abs(bias[0]) > 1.0  # the tone biases the first channel's mean by a third of its amplitude
    off = tone_aware_offsets(pre, dt, [200e3])
    assert off is not None
    # the first channel is corrected to within the noise of a 4-parameter fit; the second, with
    # no tone, is left alone (the tone explains nothing there)
    assert abs(off[0] - bias[0]) < 0.15  # the offset to subtract is the bias
    assert off[1] == 0.0
    assert tone_aware_offsets(pre, dt, [20e3]) is None  # 0.05 periods: cannot be told from an offset


def test_tone_aware_offset_is_not_applied_where_the_pretrigger_does_not_determine_it():
    # Two slow tones of 0.33 and 0.58 periods in a 3.15 us pre-trigger (the difference's tones of a
    # healthy chopped pair) and a channel that holds only the remainder of a third one near them, as a
    # voltage channel does after its own tone was taken out: the F test accepts the two-tone fit, but
    # a constant and tones under a period are nearly collinear there, and the fitted constant was off
    # by many noise units (its standard error is that large). Applied, such an offset moved the
    # prediction's baseline and the healthy pair's difference grew into a slow false alarm.
    from detector.metrics.compensated import tone_aware_offsets

    dt, n0 = 8e-9, 394
    t = np.arange(n0) * dt
    err_free, err_guard, bias_all, applied = [], [], [], 0
    for seed in range(100):
        rng = np.random.default_rng(seed)
        x = np.sin(2 * np.pi * 179e3 * t + rng.uniform(0, 2 * np.pi)) + rng.normal(0, 1.0, n0) + 1.5
        pre = (x - x.mean())[None, :]
        bias = 1.5 - x.mean()
        free = tone_aware_offsets(pre, dt, [106e3, 183e3], min_offset_se=0.0)
        guarded = tone_aware_offsets(pre, dt, [106e3, 183e3])
        applied += guarded is not None
        err_free.append((0.0 if free is None else free[0]) - bias)
        err_guard.append((0.0 if guarded is None else guarded[0]) - bias)
        bias_all.append(bias)
    rms = lambda v: float(np.sqrt(np.mean(np.square(v))))  # noqa: E731
    assert rms(err_free) > 5.0 * rms(bias_all)  # without the guard: far worse than the bias itself
    assert applied <= 2  # with it the offset is (nearly) never applied
    assert rms(err_guard) < 0.35 * rms(err_free)


@pytest.mark.parametrize("test_pre", [260, 400])
def test_interference_biased_voltage_baseline_leaves_no_ramp(test_pre):
    # the same network and wave in both shots, the network with an inductive path to ground (a
    # 20 mH shunt, as a winding's magnetising branch); each recorder adds its own 200 kHz tone of
    # 1 % of the peak to the voltage, and baselines are the means of each record's own pre-trigger
    # (2.6 us = 0.52 periods for the reference; the test record has 2.6 or 4 us), as
    # detector.preprocess takes them; the pair is then compared over the common 2.6 us. Uncorrected,
    # the voltage-baseline errors reach the difference as a slow ramp through the shunt (z 14-16 at
    # the longest averages).
    pre = 260
    rng = np.random.default_rng(4)

    def shot(level, phase, own_pre):
        t = (np.arange(N + own_pre - pre) - own_pre) * DT
        v = _wave(t)
        i = _current(v, t)[0] + np.cumsum(v) * DT / 20e-3
        scale = np.abs(i[own_pre:]).max()
        vv = level * (v + 1e-2 * np.sin(2 * np.pi * 200e3 * t + phase) + rng.normal(0, 3e-4, t.size))
        ii = level * (i + rng.normal(0, 3e-4 * scale, t.size))
        vv, ii = vv - vv[:own_pre].mean(), ii - ii[:own_pre].mean()
        return vv[own_pre - pre:] / level, ii[own_pre - pre:] / level  # aligned: fronts at sample `pre`

    v_r, i_r = shot(0.6, 0.3, pre)
    v_t, i_t = shot(1.0, 2.2, test_pre)
    cd = compensated_difference(v_r, i_r, v_t, i_t, DT, pretrigger_samples=pre)
    # the two tones (one frequency, two phases) differ by a line of the voltages' difference, which is
    # taken out of the test voltage: both voltages then hold the same tone, which the prediction (from
    # their ratio) does not see, and the baselines are taken again without it
    assert [f for f, _, _ in cd.voltage_tones] == [pytest.approx(200e3, rel=0.002)]
    z, _ = multiscale_z(cd, start=pre + 150, pretrigger_samples=pre)
    assert np.nanmax(z) < 4.0  # 2.4-2.8 (7.0-7.4 left to the difference's tone search and its correction)


def test_baseline_correction_needs_the_tones_found_again():
    """A healthy pair of the bundled training families (seed 1, case 1368: 10-bit recorder, 3 us of
    pre-trigger) whose first prediction shows two slow oscillations (134 and 102 kHz, under half a
    period in the pre-trigger). Fitted there, they cannot be told from a constant, and the 'corrected'
    baselines once shifted the whole difference by 15 % of the peak current (long-average z 56, a false
    alarm). The correction now stands only if the tones are found again after it."""
    from detector.features import extract
    from synthetic.dataset import _families, make_case

    ref, test, lab = make_case(1, 1368, _families(None))
    assert lab["event"] == "none"
    a = extract(ref, test)
    cd, n0 = a.compensated, a.pair.pretrigger_samples
    # the pre-trigger mean of the difference is noise: within 5 standard errors of a mean over n0 samples
    assert abs(np.mean(cd.difference[:n0])) < 5 * np.nanmedian(cd.sigma) / np.sqrt(n0)
    assert a.as_dict()["cd_scale1024_z"] < 3.0


def test_tone_routes_of_an_identity_and_of_a_pure_delay():
    # With K = g = 1 and no window the two routes give the tone itself (the test's with +, the
    # reference's with -); with K = exp(-j 2 pi f D dt) the reference's route is the tone delayed by D
    # samples (the shift theorem of the discrete Fourier transform, any signal-processing text).
    from detector.metrics.compensated import ToneRoutes

    n, dt, f, delay = 4000, 1e-8, 310e3, 37
    n_fft = 8192
    freqs = np.fft.rfftfreq(n_fft, dt)
    ones = np.ones(n)
    t = np.arange(n) * dt
    B = ToneRoutes(ones, ones, np.ones(freqs.size), np.ones(freqs.size, complex), n_fft).basis(f, dt)
    assert B.shape == (5, n)
    np.testing.assert_allclose(B[0], np.cos(2 * np.pi * f * t), atol=1e-12)
    np.testing.assert_allclose(B[1], np.sin(2 * np.pi * f * t), atol=1e-12)
    np.testing.assert_allclose(B[2:4], -B[0:2], atol=1e-12)
    np.testing.assert_allclose(B[4], 1.0)
    shift = np.exp(-2j * np.pi * freqs * delay * dt)
    B = ToneRoutes(ones, ones, np.ones(freqs.size), shift, n_fft).basis(f, dt)
    np.testing.assert_allclose(B[2, delay:], -np.cos(2 * np.pi * f * t[:-delay]), atol=1e-12)
    np.testing.assert_allclose(B[2, :delay], 0.0, atol=1e-12)  # zero padding: nothing wraps around


def test_tone_routes_matter_only_where_the_prediction_changes_the_tone():
    from detector.metrics.compensated import MAX_ROUTE_GAIN, ToneRoutes

    n, dt, n_fft = 4000, 1e-8, 8192
    freqs = np.fft.rfftfreq(n_fft, dt)
    ones = np.ones(n)
    band = np.where(freqs < 5e6, 1.0, 0.0)
    # a chopped wave's K: ripples every 1/T_c (here T_c = 5 us, so every 200 kHz)
    rippled = 1.5 + np.cos(2 * np.pi * freqs * 5e-6)
    assert ToneRoutes(ones, ones, band, rippled.astype(complex), n_fft).matter(275e3, dt, n)
    assert not ToneRoutes(ones, ones, band, np.full(freqs.size, 1.2 + 0j), n_fft).matter(275e3, dt, n)
    assert not ToneRoutes(ones, ones, band, rippled.astype(complex), n_fft).matter(8e6, dt, n)  # beyond the band
    loud = (2 * MAX_ROUTE_GAIN * rippled).astype(complex)
    assert not ToneRoutes(ones, ones, band, loud, n_fft).matter(275e3, dt, n)


@pytest.mark.parametrize("case_id, tones_kHz", [(5620, (279, 468)), (29948, (182,))])
def test_a_reference_tone_is_found_across_a_chop(case_id, tones_kHz):
    """Healthy pairs of the bundled training families (seed 1) with a chopped test shot and tones of
    2-4 codes, that the plain search missed (false alarms out of fold). A tone in the reference current
    reaches the difference through the prediction, which for a chopped test wave changes its envelope
    along the record; fitted through that route it is found and removed."""
    from detector.features import extract
    from synthetic.dataset import _families, make_case

    ref, test, lab = make_case(1, case_id, _families(None))
    assert lab["event"] == "none" and lab["test_kind"] == "chopped"
    a = extract(ref, test)
    found = [f for f, _ in a.compensated.tones]
    for f_kHz in tones_kHz:  # the scenario's frequencies (synthetic.scenario draws them)
        assert any(abs(f - 1e3 * f_kHz) < 0.01 * 1e3 * f_kHz for f in found), found
    # the slow difference they left is gone (the plain search left 3.9 and 5.2 here)
    assert a.as_dict()["cd_scale1024_z"] < 1.5


@pytest.mark.parametrize("chop_s", [None, 6e-6])
def test_a_faults_ringing_is_no_tone(chop_s):
    """A turn-to-turn short rings at the winding's frequencies for the whole record. Through the
    reference's route, where the test wave holds far more of a frequency than the reference (|K| of 200
    at 14 MHz here), such ringing was once fitted as 'interference'; none may be."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    rec = {"sample_rate_Hz": 100e6, "pretrigger_s": 5e-6}
    c = make_case(fault="turn_to_turn", chop_test_s=chop_s, reference_recorder=rec, test_recorder=rec)
    assert extract(c.reference, c.test).compensated.tones == ()


def _long_averages(a):
    """Largest |z| of the compensated difference of a :class:`~detector.features.PairAnalysis`
    averaged over 64, 256 and 1024 samples after the front window, one per scale, without the
    quantisation floor [noise units]."""
    from detector.features import FRONT_WINDOW_S

    start = int(np.searchsorted(a.pair.times_s, a.front_time_s + FRONT_WINDOW_S[1], side="right"))
    return multiscale_z(a.compensated, start=start, scales=(64, 256, 1024), pretrigger_samples=a.pair.pretrigger_samples)[0]


def _with_tone(rec, channel, codes, f_Hz, phase=0.7):
    """The record with a sinusoid of ``codes`` recorder codes added to one channel (and quantised again)."""
    ch = rec.voltage if channel == "voltage" else rec.current
    q = quantisation_step(ch.samples)
    x = ch.samples + codes * q * np.sin(2 * np.pi * f_Hz * rec.times() + phase)
    new = ch.with_samples(np.round(x / q) * q)
    return rec.replace(channels=tuple(new if c is ch else c for c in rec.channels))


@pytest.mark.parametrize("channel, f_Hz, record", [
    ("current", 120e3, "reference"), ("voltage", 120e3, "reference"), ("voltage", 300e3, "reference"),
    ("voltage", 120e3, "test"), ("voltage", 1e6, "test"),
])
def test_a_tone_on_either_record_leaves_no_slow_difference(channel, f_Hz, record):
    """A tone of 3 codes on one channel of one record of a healthy pair (12 bits, 100 MS/s, 0.6 codes of
    noise). Scored without the quantisation floor, the difference averaged over 64 to 1024 samples must
    stay near the healthy pair's (1.1-2.5 noise units). A tone on a current channel is found in the
    difference and removed; one on a voltage channel is a voltage the winding never saw, which the
    prediction answers through the admittance: it is found as a line of the two voltages' difference,
    owned by the record whose pre-trigger holds it, and removed there. Without that, the reference
    voltage's 120 kHz tone read 9.5 noise units here (``remove_voltage_tones`` switched off, below)."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    c = make_case(seed=3)
    ref, test = c.reference, c.test
    if record == "reference":
        ref = _with_tone(ref, channel, 3.0, f_Hz)
    else:
        test = _with_tone(test, channel, 3.0, f_Hz)
    a = extract(ref, test)
    z = _long_averages(a)
    assert float(np.max(z)) < 3.5, z
    if channel == "voltage":  # the tone put there (weaker lines of the wave shapes may come along)
        f, amp, owner = min(a.compensated.voltage_tones, key=lambda vt: abs(vt[0] - f_Hz))
        assert f == pytest.approx(f_Hz, rel=0.005) and owner == record
        ut = a.pair.ref_test_voltage_V if record == "reference" else a.pair.test_test_voltage_V
        step = quantisation_step((ref if record == "reference" else test).voltage.samples)
        assert amp == pytest.approx(3.0 * step / ut, rel=0.05)  # the tone's size, per unit
        told = [w for w in a.warnings if "voltage channel" in w]  # the tone, not its leakage
        assert len(told) == 1 and f"{f_Hz / 1e3:.0f} kHz on the {record} record's voltage channel" in told[0], told


def test_two_close_current_tones_on_a_healthy_pair_leave_no_slow_difference(monkeypatch):
    """Interference of 3 codes at 112 kHz on the reference current and at 133 kHz on the test current
    of a healthy pair (12 bits, 100 MS/s): the difference holds two close tones that beat over the
    span, which the single tone's test turns down. Found as a pair, the slow averages stay near the
    healthy pair's; left in, the 256-sample average read 5.3 noise units (checked below)."""
    import sys
    from pathlib import Path

    import detector.metrics.compensated as cm
    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    c = make_case(seed=3)
    ref = _with_tone(c.reference, "current", 3.0, 112e3, phase=0.7)
    test = _with_tone(c.test, "current", 3.0, 133e3, phase=2.1)
    a = extract(ref, test)
    assert sorted(round(f / 1e3) for f, _ in a.compensated.tones) == [112, 133]
    assert float(np.max(_long_averages(a))) < 3.5
    monkeypatch.setattr(cm, "PAIR_MAX_HZ", 0.0)
    a = extract(ref, test)
    assert a.compensated.tones == () and float(np.max(_long_averages(a))) > 4.5


@pytest.mark.parametrize("record", ["reference", "test"])
def test_a_voltage_tone_behind_a_chop_is_found_on_its_record(record):
    """A full-wave reference against a chopped test shot (chopped 4 us after the start): the two
    voltages' difference is then a step whose spectrum buries any line over the whole span, and a
    sinusoid fitted there without a taper takes in the step's leakage (in the training families such
    tones were missed or fitted at 0.2-34 times their size). Looked for over the span's last three
    quarters, with the smooth part of the difference fitted beside it, a 3-code 300 kHz tone on either
    voltage channel is found on its record at its size, and the long averages stay near the healthy
    pair's."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    c = make_case(seed=3, chop_test_s=4e-6)
    ref, test = c.reference, c.test
    if record == "reference":
        ref = _with_tone(ref, "voltage", 3.0, 300e3)
    else:
        test = _with_tone(test, "voltage", 3.0, 300e3)
    a = extract(ref, test)
    f, amp, owner = min(a.compensated.voltage_tones, key=lambda vt: abs(vt[0] - 300e3))
    assert f == pytest.approx(300e3, rel=0.005) and owner == record
    ut = a.pair.ref_test_voltage_V if record == "reference" else a.pair.test_test_voltage_V
    step = quantisation_step((ref if record == "reference" else test).voltage.samples)
    assert amp == pytest.approx(3.0 * step / ut, rel=0.05)
    z = _long_averages(a)
    assert float(np.max(z)) < 3.5, z


@pytest.mark.parametrize("f_ref_Hz, phase_ref, f_test_Hz, phase_test", [
    (180e3, 1.0, 480e3, 3.0), (220e3, 2.0, 480e3, 3.0), (150e3, 2.0, 400e3, 3.0),
])
def test_two_voltage_tones_under_a_short_pretrigger_go_to_their_records(f_ref_Hz, phase_ref, f_test_Hz, phase_test):
    """A pre-trigger of 2.5 us holds less than 0.6 of a period of a 2-code tone on the reference's
    voltage channel and about one period of a 3-code tone on the test's. Over so short a stretch the
    two sinusoids are far from orthogonal: judged one at a time, the reference's line was explained
    partly by the test's pre-trigger (through its other tone) and not taken out (17 of 60 phase pairs
    of these frequencies; these are three of them). Decided together, each goes to its own record."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    rec = {"pretrigger_s": 2.5e-6}
    c = make_case(seed=3, reference_recorder=rec, test_recorder=rec)
    a = extract(_with_tone(c.reference, "voltage", 2.0, f_ref_Hz, phase=phase_ref),
                _with_tone(c.test, "voltage", 3.0, f_test_Hz, phase=phase_test))
    got = sorted((round(f / 1e4), owner) for f, _, owner in a.compensated.voltage_tones)
    assert got == [(round(f_ref_Hz / 1e4), "reference"), (round(f_test_Hz / 1e4), "test")], a.compensated.voltage_tones


def test_a_steady_voltage_tone_under_a_quarter_period_of_pretrigger_is_taken_out():
    """A 3-code 130 kHz tone on the reference's voltage channel with 2 us of pre-trigger (a quarter of
    its period): at this phase the pre-trigger holds almost a straight stretch of it, and removing the
    sinusoid takes out less than the 18 noise variances asked of a line in general (schema 23 left it
    in). Its line has one amplitude and phase over each third of the span's last three quarters, which
    a change of the winding or a chop's oscillation does not, so it needs less evidence there
    (``STEADY_TONE_PENALTY``) and is taken out of the reference. The long averages (64-1024 samples)
    then read 2.7-3.7 noise units, the healthy pair with this pre-trigger 2.4-3.3; left in, 15-53."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    rec = {"pretrigger_s": 2.0e-6}
    c = make_case(seed=3, reference_recorder=rec, test_recorder=rec)
    ref = _with_tone(c.reference, "voltage", 3.0, 130e3, phase=0.8)
    a = extract(ref, c.test)
    f, amp, owner = min(a.compensated.voltage_tones, key=lambda vt: abs(vt[0] - 130e3))
    assert f == pytest.approx(130e3, rel=0.005) and owner == "reference"
    assert amp == pytest.approx(3.0 * quantisation_step(ref.voltage.samples) / a.pair.ref_test_voltage_V, rel=0.05)
    z = _long_averages(a)
    assert float(np.max(z)) < 4.5, z


@pytest.mark.parametrize("f_ref_Hz, phase_ref, f_test_Hz, phase_test", [
    (150e3, 0.3, 170e3, 2.0), (150e3, 2.5, 170e3, 0.5), (250e3, 2.5, 270e3, 0.5), (500e3, 0.3, 520e3, 2.0),
])
def test_two_voltage_tones_closer_than_the_span_resolves_are_fitted_as_two(f_ref_Hz, phase_ref, f_test_Hz,
                                                                          phase_test):
    """Two recorders' 3-code tones 20 kHz apart, one on each voltage channel: over the 53 us where the
    lines are fitted they are about one period of their difference apart, so the difference of the two
    voltages shows one line whose envelope beats (or two lines pulled apart). Fitted as one sinusoid
    (schema 24) the line explained neither pre-trigger and was left in, or was given to one record at a
    frequency between the two, and the long averages read 4.5-42 noise units. Searched as a pair of
    frequencies, each tone is found within 1 % and goes to its own record; the long averages then read
    at most 2.9 (the healthy pair 2.6, 2.0, 1.2)."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    rec = {"pretrigger_s": 4.0e-6}
    c = make_case(seed=3, reference_recorder=rec, test_recorder=rec)
    a = extract(_with_tone(c.reference, "voltage", 3.0, f_ref_Hz, phase=phase_ref),
                _with_tone(c.test, "voltage", 3.0, f_test_Hz, phase=phase_test))
    for f_Hz, record in ((f_ref_Hz, "reference"), (f_test_Hz, "test")):
        f, _, owner = min(a.compensated.voltage_tones, key=lambda vt: abs(vt[0] - f_Hz))
        assert f == pytest.approx(f_Hz, rel=0.01) and owner == record, a.compensated.voltage_tones
    z = _long_averages(a)
    assert float(np.max(z)) < 3.5, z


def test_a_voltage_tone_left_in_reads_as_a_slow_difference(monkeypatch):
    """The reason for ``remove_voltage_tones`` (so that the test above can fail): switched off, the
    reference voltage's 120 kHz tone of 3 codes leaves about 9.5 noise units in the long averages."""
    import sys
    from pathlib import Path

    import detector.metrics.compensated as compensated
    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    monkeypatch.setattr(compensated, "remove_voltage_tones", lambda rv, tv, dt, n0, span: (rv, tv, []))
    c = make_case(seed=3)
    a = extract(_with_tone(c.reference, "voltage", 3.0, 120e3), c.test)
    z = _long_averages(a)
    assert float(np.max(z)) > 6.0, z


@pytest.mark.parametrize("kind", ["healthy", "chopped", "turn_to_turn", "to_ground", "discharge_only"])
def test_no_voltage_tone_is_found_where_there_is_none(kind):
    """Without interference nothing is removed from the voltages: not the healthy pair's small
    differences of wave shape, not a chop (a broad difference that is not in the pre-trigger), not a
    breakdown's voltage step or a discharge."""
    import sys
    from pathlib import Path

    from detector.features import extract

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from detection_cases import make_case

    if kind == "healthy":
        c = make_case(seed=3, front_drift=0.02, tail_drift=-0.02)
    elif kind == "chopped":
        c = make_case(seed=3, chop_test_s=4e-6)
    else:
        c = make_case(fault=kind, seed=3)
    assert extract(c.reference, c.test).compensated.voltage_tones == ()


def _flat_cd(d, sigma=1.0):
    from detector.metrics.compensated import CompensatedDifference

    s = np.full(d.size, float(sigma))
    return CompensatedDifference(np.zeros(d.size), d, s, d / s, None, 1.0)


def _impulse(n, dt):
    """Double-exponential 1.2/50-like voltage (per unit) starting at sample 500."""
    t = np.clip(np.arange(n) - 500, 0, None) * dt
    return np.where(np.arange(n) >= 500, 1.04 * (np.exp(-t / 68e-6) - np.exp(-t / 0.4e-6)), 0.0)


def test_core_term_recovers_a_magnetising_change():
    # a change of 1/L_m by a = 2e3 (per-unit current per second) leaves a * integral(v) in the difference
    # (the magnetising branch: i = (1/L) * integral(v dt), any circuits text)
    from detector.metrics.compensated import core_term

    n, dt = 20000, 5e-9
    v = _impulse(n, dt)
    q = np.concatenate((np.zeros(500), np.cumsum(v[500:]) * dt))
    rng = np.random.default_rng(21)
    d = 2e3 * q + rng.normal(0, 1e-5, n)
    scored = np.arange(n) >= 800
    a, rest = core_term(_flat_cd(d, 1e-5), v, dt, scored, start=500)
    assert a == pytest.approx(2e3, rel=1e-3)
    assert np.std(rest.z[scored]) == pytest.approx(1.0, rel=0.05)  # only the noise is left
    assert core_term(_flat_cd(d, 1e-5), v, dt, np.zeros(n, bool))[0] == 0.0  # nothing scored: nothing fitted


def test_driven_fraction_tells_a_changed_admittance_from_charge_pulses():
    from detector.metrics.compensated import driven_fraction

    n, dt, onset = 20000, 5e-9, 6000
    v = _impulse(n, dt)
    rng = np.random.default_rng(22)
    noise = rng.normal(0, 1e-6, n)
    after = np.arange(n) >= onset
    q = np.cumsum(np.where(after, v, 0.0)) * dt
    scored = np.arange(n) >= 800
    # a short from sample 6000 on: a lower inductance and a little resistance in parallel
    short = 0.5 * q + 2e-5 * np.where(after, v, 0.0)
    explained, ind = driven_fraction(_flat_cd(short + noise, 1e-6), v, dt, scored, onset)
    assert explained > 0.95
    assert ind == pytest.approx(100.0 * 0.5 * q[-1] / np.max(np.abs(short + noise)[after]), rel=0.05)
    # a train of charge pulses after sample 6000, each ringing down (the winding's response)
    k = np.arange(n)
    pulses = np.zeros(n)
    for start in range(onset, onset + 8 * 1500, 1500):  # eight pulses, a loop over pulses, not samples
        s = np.clip(k - start, 0, None) * dt
        pulses += np.where(k >= start, 3e-5 * np.exp(-s / 2e-6) * np.sin(2 * np.pi * 400e3 * s), 0.0)
    explained_p, _ = driven_fraction(_flat_cd(pulses + noise, 1e-6), v, dt, scored, onset)
    assert explained_p < 0.2
    assert np.isnan(driven_fraction(_flat_cd(noise), v, dt, scored, n - 10)[0])  # too few samples


def test_extra_trace_is_scored_as_a_second_call_would():
    from detector.metrics.compensated import CompensatedDifference

    rng = np.random.default_rng(23)
    n = 6000
    d = rng.normal(0, 1.0, n)
    d[3000:4000] += 0.4  # a slow excursion
    sigma = np.where(np.arange(n) < 5800, 1.0 + np.arange(n) / n, np.inf)
    cd = CompensatedDifference(np.zeros(n), d, sigma, d / sigma, None, 1.0)
    other = d - 0.3 * np.linspace(0, 1, n)
    ex = np.zeros(n, bool)
    ex[2000:2100] = True
    first = multiscale_z(cd, start=500, pretrigger_samples=400, floor_sigma=0.01, exclude=ex, return_robust=True,
                         return_onset=True, extra=other, extra_scales=(64, 1024))
    second = multiscale_z(CompensatedDifference(np.zeros(n), other, sigma, other / sigma, None, 1.0), start=500,
                          scales=(64, 1024), pretrigger_samples=400, floor_sigma=0.01, exclude=ex)[0]
    np.testing.assert_array_equal(first[-1], second)  # bit for bit
    np.testing.assert_array_equal(first[0], multiscale_z(cd, start=500, pretrigger_samples=400, floor_sigma=0.01,
                                                         exclude=ex)[0])
    with pytest.raises(ShotcheckError, match="extra_scales"):
        multiscale_z(cd, start=500, extra=other, extra_scales=(100,))


def _noise_draws(test_kwargs, draws, seed, noise=1e-4):
    """Spread of the compensated difference over independent noise draws (Monte Carlo), per sample, and
    the largest sigma the draws reported."""
    t = (np.arange(N) - PRE) * DT
    v_r, v_t = _wave(t), _wave(t, **test_kwargs)
    i_r, _ = _current(v_r, t)
    i_t, _ = _current(v_t, t)
    scale = np.abs(i_r).max()
    rng = np.random.default_rng(seed)
    out, sigma = [], None
    for _ in range(draws):
        cd = compensated_difference(v_r + rng.normal(0, noise, N), i_r + rng.normal(0, noise * scale, N),
                                    v_t + rng.normal(0, noise, N), i_t + rng.normal(0, noise * scale, N), DT,
                                    pretrigger_samples=PRE, remove_tones=False)
        out.append(cd.difference)
        sigma = cd.sigma if sigma is None else np.maximum(sigma, cd.sigma)
    return np.std(np.array(out), axis=0), sigma


def _difference_spread(test_kwargs, draws=40):
    """:func:`_noise_draws`' spread past the front window, where the difference is compared."""
    spread, sigma = _noise_draws(test_kwargs, draws, seed=5)
    ok = np.isfinite(sigma)
    ok[: PRE + 150] = False  # past the front window
    return spread[ok]


def test_a_chopped_test_shot_leaves_the_difference_about_as_noisy_as_a_full_one():
    # Behind a chop the prediction K = V_r* V_t / (|V_r|^2 + lambda) amplifies the reference's noise at
    # the frequencies the chop excites; weighted least squares (each bin by the inverse of its noise's
    # standard deviation) keeps the difference's noise near that of a full test shot. Measured by
    # independent noise draws: without the weighting the chopped pair's median spread was 3.1 times the
    # full pair's, with it 1.2.
    full = np.median(_difference_spread({}))
    chopped = np.median(_difference_spread({"chop_s": 4e-6}))
    assert chopped < 1.4 * full


def test_noise_weight_is_one_for_one_wave_shape_and_has_no_echo_of_the_chop(monkeypatch):
    from detector.metrics.compensated import NOISE_WEIGHT_SMOOTHING_HZ, noise_weight

    rng = np.random.default_rng(0)
    ri, ti = rng.normal(0, 2.0, 500), rng.normal(0, 1.0, 500)  # rho = 4
    n_fft, dt = 32768, 1e-8
    f = np.fft.rfftfreq(n_fft, dt)
    g = np.ones(f.size)
    np.testing.assert_allclose(noise_weight(ri, ti, 500, g, np.ones(f.size, complex), 1 / (n_fft * dt)), 1.0,
                               atol=0.05)  # rho is estimated from 500 samples
    # |K| far above 1: the weight is the inverse of the noise's standard deviation, scaled
    big = noise_weight(ri, ti, 500, g, np.full(f.size, 30.0 + 0j), 1 / (n_fft * dt))
    rho = (np.std(ri) / np.std(ti)) ** 2
    np.testing.assert_allclose(big, np.sqrt((1 + rho) / (1 + rho * 900)), rtol=0.05)
    # |K|^2 of a wave chopped at T_c = 4 us ripples every 1/T_c; smoothed over 2 MHz, the weight's
    # impulse response (its inverse transform) keeps almost nothing at the chopping time's lag
    tc = 4e-6
    K = 10.0 * (1.2 + np.cos(2 * np.pi * f * tc)) * (f > 2e6) + 1.0
    w = noise_weight(ri, ti, 500, g, K.astype(complex), 1 / (n_fft * dt))
    h = np.fft.irfft(w, n_fft)
    lag = int(round(tc / dt))
    assert np.max(np.abs(h[lag - 5:lag + 6])) < 0.01 * np.abs(h[0])
    assert NOISE_WEIGHT_SMOOTHING_HZ >= 2 / tc  # two ripples at least in the average
    # without smoothing (one bin), the echo is there: the test can tell
    monkeypatch.setattr("detector.metrics.compensated.NOISE_WEIGHT_SMOOTHING_HZ", 0.0)
    h0 = np.fft.irfft(noise_weight(ri, ti, 500, g, K.astype(complex), 1 / (n_fft * dt)), n_fft)
    assert np.max(np.abs(h0[lag - 5:lag + 6])) > 0.05 * np.abs(h0[0])


@pytest.mark.xfail(strict=True, reason="known shortfall: the noise sigma of the compensated difference is the "
                   "difference's pre-trigger noise grown with the unwindowing gain; across a chop the reference "
                   "barely resolves it is nowhere too small since the noise weighting (schema 20; before, up to "
                   "1.5 times around the chop) but about twice the spread over most of the record (median ratio "
                   "0.48). Carrying each record's noise through the deconvolution's filters passed this test "
                   "before the weighting but did not improve cross-validated detection; with the weighting, all "
                   "four channels carried through their routes make the ratio flat along the record (0.67-0.79 "
                   "with the tolerance terms off) but lowered detection too (DEVELOPERS.md, 'The default "
                   "model').")
def test_noise_model_matches_the_spread_of_noise_draws_across_a_chop():
    # sigma should be the spread of the difference over independent noise draws (Monte Carlo) for a full
    # reference against a chopped test wave, where the chop excites frequencies the reference barely
    # resolves and the prediction's noise is far from white
    spread, sigma = _noise_draws({"chop_s": 4e-6}, 200, seed=1)
    after = np.flatnonzero(np.isfinite(sigma))
    after = after[after > PRE + 150]  # past the front window
    ratio = spread[after] / sigma[after]
    assert ratio.max() < 1.35  # nowhere far too small (200 draws: the spread is itself uncertain by ~5 %)
    assert 0.85 < np.median(ratio) < 1.15  # nor much too conservative
