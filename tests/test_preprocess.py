"""Pre-processing: grid, baseline, alignment, per unit, and the invariances of the aligned pair."""

from __future__ import annotations

import numpy as np
import pytest
from metrics_signals import (
    TAU1_S,
    TAU2_S,
    current_exact,
    double_exponential,
    make_record,
)
from scipy import stats

from detector._validation import RecordError, ShotcheckError
from detector.preprocess import (
    CLIP_GUARD_S,
    CLIP_GUARD_SAMPLES,
    MAD_NORMAL_CONSTANT,
    align_pair,
    clipped_near,
    clipped_samples,
    clipping_warning,
    common_grid,
    detect_pretrigger_samples,
    front_delay_s,
    noise_estimate,
    normalise,
    remove_baseline,
    robust_peak_V,
    shift_fourier,
)
from detector.record import Channel, Record

DT = 1e-8


# ---------------------------------------------------------------------------------------- helpers
def test_mad_constant_is_the_normal_quartile():
    # Donoho & Johnstone 1994: sigma = MAD / 0.6745; 0.6745 is the 75 % quantile of N(0, 1)
    assert MAD_NORMAL_CONSTANT == pytest.approx(stats.norm.ppf(0.75), abs=5e-5)


def test_noise_estimate_gaussian_and_outliers():
    rng = np.random.default_rng(3)
    x = 2.5 * rng.standard_normal(100_000)
    est = noise_estimate(x)
    assert est.rms == pytest.approx(2.5, rel=0.02)
    assert est.mad == pytest.approx(2.5, rel=0.02)
    x[::100] = 1e3  # 1 % outliers move the RMS, not the MAD estimate
    est = noise_estimate(x)
    assert est.rms > 50
    assert est.mad == pytest.approx(2.5, rel=0.05)


def test_robust_peak_ignores_a_single_spike_and_keeps_sign():
    t = np.arange(4000) * DT
    v = double_exponential(t, -300e3, 1e-6)
    spiky = v.copy()
    spiky[2500] = -900e3
    assert robust_peak_V(spiky) == pytest.approx(v.min(), rel=1e-3)
    assert robust_peak_V(spiky) < 0
    with pytest.raises(ShotcheckError, match="flat"):
        robust_peak_V(np.zeros(100))


def test_detect_pretrigger_stops_before_the_front():
    for n_pre in (50, 200, 1000):
        rec = make_record(pretrigger_s=n_pre * DT, noise_v=2e-3, n=6000)
        k = detect_pretrigger_samples(rec.voltage.samples)
        assert n_pre - 40 <= k <= n_pre  # never inside the front, not far before it


def test_remove_baseline_and_history():
    rec = make_record(pretrigger_s=3e-6, noise_v=1e-3, n=5000)
    shifted = rec.replace(channels=tuple(c.with_samples(c.samples + off) for c, off in
                                         zip(rec.channels, (-7e3, 0.3), strict=True)))
    out = remove_baseline(shifted)
    k = detect_pretrigger_samples(shifted.voltage.samples)
    assert abs(out.voltage.samples[:k].mean()) < 1e-9 * 500e3  # exactly the pre-trigger mean
    assert abs(out.voltage.samples[:250].mean()) < 4 * 500.0 / np.sqrt(250)  # offset gone, noise left
    assert abs(out.current.samples[:250].mean()) < 1e-3 * 0.3
    assert out.processing[-1].startswith("baseline(pretrigger_s=")
    fixed = remove_baseline(shifted, pretrigger_s=2e-6)
    assert fixed.processing[-1] == "baseline(pretrigger_s=2e-06)"
    with pytest.raises(RecordError, match="longer than the record"):
        remove_baseline(shifted, pretrigger_s=1.0)
    with pytest.raises(ShotcheckError, match="pretrigger_s"):
        remove_baseline(shifted, pretrigger_s=-1e-6)


def test_normalise_divides_by_the_given_test_voltage():
    rec = make_record(amplitude_V=800e3, n=3000)
    pu = normalise(rec, 750e3)
    np.testing.assert_allclose(pu.voltage_pu, rec.voltage.samples / 750e3)
    np.testing.assert_allclose(pu.current_pu, rec.current.samples / 750e3)
    with pytest.raises(ShotcheckError, match="test_voltage_V"):
        normalise(rec, 0.0)


# -------------------------------------------------------------------------------- shift, delay
def test_shift_fourier_matches_an_analytic_shift():
    t = np.arange(2048) * DT
    width = 40 * DT  # well oversampled Gaussian: band limited to float precision

    def pulse(t0):
        return np.exp(-0.5 * ((t - t0) / width) ** 2)

    for d in (3.37 * DT, -11.81 * DT, 0.5 * DT):
        np.testing.assert_allclose(shift_fourier(pulse(10e-6), d, DT), pulse(10e-6 + d), atol=1e-9)


def test_shift_fourier_has_no_wrap_around():
    # an impulse record ends high (tail); a plain circular shift would bring the tail to the start
    rec = make_record(n=4000, pretrigger_s=2e-6)
    v = rec.voltage.samples / 500e3
    y = shift_fourier(v, 50 * DT, DT)
    assert np.max(np.abs(y[:150])) < 0.02 * v[-1] + 1e-3  # still pre-trigger, not the tail
    np.testing.assert_allclose(y[250:3900], v[200:3850], atol=2e-3)


@pytest.mark.parametrize("delay_samples", [0.0, 0.237, -0.61, 7.5, -123.25])
def test_front_delay_is_sub_sample_accurate(delay_samples):
    t = np.arange(6000) * DT
    rng = np.random.default_rng(11)
    ref = double_exponential(t, 400e3, 5e-6) + 400e3 * 1e-3 * rng.standard_normal(t.size)
    # test: other polarity, level and offset, delayed front, its own noise
    test = -2.2 * double_exponential(t, 400e3, 5e-6 + delay_samples * DT) + 3e3
    test = test + 880e3 * 1e-3 * rng.standard_normal(t.size)
    d = front_delay_s(ref, test, DT)
    assert d / DT == pytest.approx(delay_samples, abs=0.03)


# --------------------------------------------------------------------------------------- grid
@pytest.mark.parametrize("method", ["polyphase", "fourier"])
def test_common_grid_resamples_the_finer_record(method):
    ref = make_record(rate_Hz=100e6, n=20000)
    fine = make_record(rate_Hz=250e6, n=50000)
    g = common_grid(ref, fine, method=method)
    assert g.test.sample_interval_s == ref.sample_interval_s
    assert g.reference is ref
    assert len(g.warnings) == 1 and "resampled to 100 MS/s" in g.warnings[0]
    assert "resample(up=2, down=5" in g.test.processing[-1]
    # against the exact samples at 100 MS/s, away from the record ends; the double exponential has a
    # kink at its start (not band limited), where the anti-alias filter rounds it by ~0.2 %
    exact = ref.voltage.samples
    got = g.test.voltage.samples[: exact.size]
    np.testing.assert_allclose(got[100:-100], exact[100:-100], atol=3e-3 * 500e3)
    assert np.sqrt(np.mean((got[100:-100] - exact[100:-100]) ** 2)) < 1e-4 * 500e3


@pytest.mark.parametrize("n_fine", [50001, 50003])
def test_fourier_resampling_keeps_the_time_base_for_any_length(n_fine):
    # scipy.signal.resample spaces its output len(in)/len(out) input samples apart; for a length that is
    # no multiple of the ratio's denominator that is not 5/2, and a time base labelled 10 ns drifted by
    # half a sample towards the end. Against the exact samples at 100 MS/s, including the last 2000.
    def tone_record(rate_Hz, n):
        t = np.arange(n) / rate_Hz
        x = np.sin(2 * np.pi * 3e6 * t)  # 3 MHz, well inside both bands
        return Record(0.0, 1.0 / rate_Hz, (Channel("U", "voltage", 1e5 * x), Channel("I", "current", x)))

    ref = tone_record(100e6, 20000)
    g = common_grid(ref, tone_record(250e6, n_fine), method="fourier")
    exact = ref.current.samples
    got = g.test.current.samples[: exact.size]
    # a drift of half a sample at 10 ns is 0.09 rad of the tone; the ends ring (the tone is not periodic
    # in the record)
    np.testing.assert_allclose(got[-4000:-400], exact[-4000:-400], atol=1e-3)


@pytest.mark.parametrize("method", ["polyphase", "fourier"])
@pytest.mark.parametrize("fine_rate_Hz", [7.5e9, 20e9])
def test_common_grid_rates_more_than_a_thousand_times_apart(method, fine_rate_Hz):
    # 5 MS/s and 20 GS/s are both accepted record rates; a fraction with a denominator of at most 1000
    # cannot approximate 1:4000 (it gave up = 0 and a traceback, or 1/1000 and a time base stretched by
    # half). The finer record is first decimated by an integer factor.
    coarse = make_record(rate_Hz=5e6, n=600, pretrigger_s=10e-6)
    n = int(round(60e-6 * fine_rate_Hz))
    fine = make_record(rate_Hz=fine_rate_Hz, n=n, pretrigger_s=10e-6)
    g = common_grid(coarse, fine, method=method)
    assert g.test.sample_interval_s == coarse.sample_interval_s
    assert g.test.n_samples * g.test.sample_interval_s == pytest.approx(60e-6, abs=0.21e-6)
    exact = coarse.voltage.samples[: g.test.n_samples]
    got = g.test.voltage.samples[: exact.size]
    # the front of 1.2 us is 6 samples at 5 MS/s, its kink at the start is not band limited: away from
    # it (and from the ends) the anti-alias filters change the wave by under 1 %
    keep = np.abs(np.arange(exact.size) * 0.2e-6 - 10e-6) > 2e-6
    keep[:5] = keep[-10:] = False
    np.testing.assert_allclose(got[keep], exact[keep], atol=1e-2 * 500e3)
    assert "resampled to 5 MS/s" in g.warnings[0]


def test_common_grid_refuses_a_ratio_it_cannot_approximate(monkeypatch):
    import detector.preprocess as pp

    # with denominators of at most 3, 100/137 can only be read as 2/3: a time base stretched by some
    # 1800 samples, refused rather than compared
    monkeypatch.setattr(pp, "MAX_RESAMPLE_DENOMINATOR", 3)
    with pytest.raises(ShotcheckError, match=r"137 MS/s \(test\).*half a sample.*resample one record"):
        common_grid(make_record(rate_Hz=100e6, n=20000), make_record(rate_Hz=137e6, n=27400))


def test_snap_to_codes_puts_scattered_values_back_on_their_grid():
    from detector.preprocess import snap_to_codes

    rng = np.random.default_rng(3)
    rec = make_record(noise_v=2e-4, noise_i=2e-4)
    steps = (2 * 600e3 / 2**12, 2 * 80.0 / 2**12)  # 12-bit codes of a 600 kV and an 80 A range
    coded = rec.replace(channels=tuple(c.with_samples(np.round(c.samples / q) * q)
                                       for c, q in zip(rec.channels, steps, strict=True)))
    same, got = snap_to_codes(coded)
    assert same is coded and got == pytest.approx(steps, rel=1e-9)  # on the grid: untouched
    scattered = coded.replace(channels=tuple(c.with_samples(c.samples * (1 + 1e-9) + rng.uniform(-1e-3, 1e-3, c.samples.size) * q)
                                             for c, q in zip(coded.channels, steps, strict=True)))
    snapped, got = snap_to_codes(scattered)
    assert got == pytest.approx(steps, rel=1e-6)
    for a, b, q in zip(snapped.channels, coded.channels, steps, strict=True):
        np.testing.assert_allclose(a.samples, b.samples, rtol=0, atol=2e-3 * q)
        assert np.unique(np.round(a.samples / q, 6)).size == np.unique(b.samples).size  # one value per code
    assert snapped.processing[-1].startswith("snap_to_codes(U ")
    floats, got = snap_to_codes(rec)  # simulated floats: no grid, untouched
    assert floats is rec and got == (0.0, 0.0)


def test_common_grid_same_rate_and_bad_method():
    a, b = make_record(n=1000), make_record(n=1200)
    g = common_grid(a, b)
    assert g.reference is a and g.test is b and g.warnings == ()
    with pytest.raises(ShotcheckError, match="Did you mean 'fourier'"):
        common_grid(a, b, method="fourrier")


# ------------------------------------------------------------------------------- aligned pair
def _base_pair(**test_kw):
    ref = make_record(amplitude_V=300e3, noise_v=5e-4, noise_i=5e-4, seed=1)
    kw = dict(amplitude_V=600e3, noise_v=5e-4, noise_i=5e-4, seed=2)
    kw.update(test_kw)
    return ref, make_record(**kw)


def test_align_pair_identical_shapes_give_unit_per_unit():
    ref, test = _base_pair()
    p = align_pair(ref, test)
    assert p.warnings == ()
    assert p.ref_polarity == p.test_polarity == 1
    assert abs(p.delay_s) < 0.05 * DT
    assert p.ref_test_voltage_V == pytest.approx(300e3 * 0.963, rel=0.01)  # 1.2/50 peak ~0.963 A
    np.testing.assert_allclose(p.test_voltage_pu, p.ref_voltage_pu, atol=6e-3)
    i_scale = np.max(np.abs(p.ref_current_pu))
    np.testing.assert_allclose(p.test_current_pu, p.ref_current_pu, atol=6e-3 * i_scale)
    assert p.ref_noise.source == "pretrigger"
    assert p.ref_noise.voltage_mad_pu == pytest.approx(5e-4 * 300e3 / p.ref_test_voltage_V, rel=0.15)
    assert p.times_s.size == p.ref_voltage_pu.size == p.test_current_pu.size
    with pytest.raises(ValueError):
        p.ref_voltage_pu[0] = 1.0  # read-only


def _assert_same_pair(p, q, *, v_tol=2e-3, i_tol=2e-3):
    """Compare two aligned pairs over the reference-axis instants they share."""
    kp = np.rint(p.times_s / p.sample_interval_s).astype(int)
    kq = np.rint(q.times_s / q.sample_interval_s).astype(int)
    _, ip, iq = np.intersect1d(kp, kq, return_indices=True)
    assert ip.size > 0.9 * min(kp.size, kq.size)
    np.testing.assert_allclose(q.ref_voltage_pu[iq], p.ref_voltage_pu[ip], atol=v_tol)
    np.testing.assert_allclose(q.test_voltage_pu[iq], p.test_voltage_pu[ip], atol=v_tol)
    ipk = np.max(np.abs(p.ref_current_pu))
    np.testing.assert_allclose(q.test_current_pu[iq], p.test_current_pu[ip], atol=i_tol * ipk)


def test_invariance_polarity():
    ref, test = _base_pair()
    p = align_pair(ref, test)
    q = align_pair(ref, make_record(amplitude_V=600e3, noise_v=5e-4, noise_i=5e-4, seed=2, polarity=-1))
    assert q.test_polarity == -1
    _assert_same_pair(p, q, v_tol=1e-12, i_tol=1e-12)


def test_invariance_units_and_level():
    # a record read in kV and A holds the same SI samples; a record at another level is the same per unit
    ref, test = _base_pair()
    p = align_pair(ref, test)
    scaled = test.replace(channels=tuple(c.with_samples(c.samples * 1e-3) for c in test.channels))
    q = align_pair(ref, scaled)
    _assert_same_pair(p, q, v_tol=1e-12, i_tol=1e-12)
    assert q.test_test_voltage_V == pytest.approx(p.test_test_voltage_V * 1e-3)


def test_invariance_trigger_offset():
    ref, test = _base_pair()
    p = align_pair(ref, test)
    # 1.234 us more pre-trigger and another time origin on the test record
    later = make_record(amplitude_V=600e3, noise_v=5e-4, noise_i=5e-4, seed=2, pretrigger_s=3.234e-6,
                        start_time_s=-3e-6)
    q = align_pair(ref, later)
    assert q.delay_s == pytest.approx(1.234e-6, abs=0.05 * DT)
    _assert_same_pair(p, q, v_tol=6e-3, i_tol=6e-3)  # independent noise samples are shifted in
    # the same sample instant on the two time axes: test axis = reference axis + 1.234 us - 3 us
    np.testing.assert_allclose(q.test_times_s - q.times_s, 1.234e-6 - 3e-6, atol=0.05 * DT)


@pytest.mark.parametrize("rate_Hz", [50e6, 125e6, 250e6])
def test_invariance_sample_rate(rate_Hz):
    """Test record at another rate: after resampling, the aligned pair matches the same-rate pair.

    The 50 MS/s case compares on a 50 MS/s grid, so it is checked against the analytic signals on that
    grid; tolerances allow for the anti-alias filter on the 1.2 us front.
    """
    ref = make_record(amplitude_V=300e3, seed=1)
    test = make_record(rate_Hz=rate_Hz, n=int(20000 * rate_Hz / 100e6), amplitude_V=600e3, seed=2)
    q = align_pair(ref, test)
    assert any("resampled" in w for w in q.warnings)
    assert q.sample_interval_s == pytest.approx(max(1 / rate_Hz, DT))
    assert abs(q.delay_s) < 0.05 * q.sample_interval_s
    # the kink at the start of the analytic front is rounded by the anti-alias filter (about 0.5 % at
    # 50 MS/s); elsewhere the records agree to a few 1e-4 p.u.
    np.testing.assert_allclose(q.test_voltage_pu, q.ref_voltage_pu, atol=6e-3)
    assert np.sqrt(np.mean((q.test_voltage_pu - q.ref_voltage_pu) ** 2)) < 3e-4
    ipk = np.max(np.abs(q.ref_current_pu))
    np.testing.assert_allclose(q.test_current_pu, q.ref_current_pu, atol=6e-3 * ipk)
    assert np.sqrt(np.mean((q.test_current_pu - q.ref_current_pu) ** 2)) < 3e-4 * ipk


def test_align_uses_given_test_voltages():
    ref, test = _base_pair()
    p = align_pair(ref, test, ref_test_voltage_V=-290e3, test_test_voltage_V=580e3)
    assert p.ref_test_voltage_V == 290e3 and p.test_test_voltage_V == 580e3
    assert p.ref_voltage_pu.max() == pytest.approx(300e3 * 0.963 / 290e3, rel=0.01)
    with pytest.raises(ShotcheckError, match="ref_test_voltage_V"):
        align_pair(ref, test, ref_test_voltage_V=0.0)


# ----------------------------------------------------------------------------------- warnings
def test_warning_current_clipping():
    ref, test = _base_pair()
    i = test.current.samples
    clipped = np.clip(i, None, 0.7 * i.max())
    test = test.replace(channels=(test.voltage, test.current.with_samples(clipped)))
    p = align_pair(ref, test)
    assert any("test current 'I' looks clipped" in w for w in p.warnings)
    assert clipping_warning(ref.current.samples, "x") is None


def test_clipped_samples_are_flagged_on_the_aligned_grid():
    """The samples at a clipping limit, and only those (within the guard), are flagged on the aligned
    grid, also when the test record starts at another time and is shifted by a fraction of a sample."""
    ref, test = _base_pair(start_time_s=-0.337e-6)
    i = test.current.samples
    limit = 0.7 * i.max()
    test = test.replace(channels=(test.voltage, test.current.with_samples(np.minimum(i, limit))))
    raw = clipped_samples(test.current.samples)
    assert raw.sum() == np.count_nonzero(i >= limit)
    assert not clipped_samples(ref.current.samples).any()
    p = align_pair(ref, test)
    # brute force: an aligned sample is flagged when a raw clipped sample lies within the guard of its
    # time on the test record's axis (away from the guard's edge, where rounding decides)
    t_raw = test.start_time_s + np.arange(i.size) * test.sample_interval_s
    guard = max(CLIP_GUARD_S, CLIP_GUARD_SAMPLES * test.sample_interval_s)
    dist = np.abs(np.subtract.outer(p.test_times_s, t_raw[raw])).min(axis=1)
    assert p.clipped[dist < guard - 1e-12].all()
    assert not p.clipped[dist > guard + 1e-12].any()
    assert 0 < p.clipped.sum() < p.n_samples
    assert p.test_clipped_current_s == pytest.approx(raw.sum() * test.sample_interval_s)
    assert p.ref_clipped_current_s == 0.0
    # an unclipped pair flags nothing
    assert not align_pair(*_base_pair()).clipped.any()


def test_clipping_mask_follows_resampling_and_a_fractional_shift():
    """The test record at 250 MS/s against a 100 MS/s reference, its trigger offset by a non-integer number
    of samples: every aligned sample that the clipping changed (against the same record not clipped,
    aligned the same way) is flagged, and nothing well below the limit is."""
    ref = make_record(amplitude_V=300e3, seed=1)
    test = make_record(amplitude_V=600e3, seed=2, rate_Hz=250e6, n=50000, start_time_s=-0.3373e-6,
                       pretrigger_s=2.0037e-6)
    i = test.current.samples
    limit = 0.7 * i.max()
    clipped = test.replace(channels=(test.voltage, test.current.with_samples(np.minimum(i, limit))))
    a, b = align_pair(ref, test), align_pair(ref, clipped)
    assert abs(a.delay_s / a.sample_interval_s - round(a.delay_s / a.sample_interval_s)) > 0.05  # fractional
    np.testing.assert_array_equal(a.test_times_s, b.test_times_s)
    changed = np.abs(b.test_current_pu - a.test_current_pu) > 1e-3 * np.abs(a.test_current_pu).max()
    assert changed.any() and b.clipped[changed].all()
    limit_pu = limit / a.test_test_voltage_V
    assert np.all(a.test_current_pu[b.clipped] > 0.9 * limit_pu)


def test_clipped_voltage_warns_that_the_verdict_is_not_reliable():
    ref, test = _base_pair()
    v = test.voltage.samples
    test = test.replace(channels=(test.voltage.with_samples(np.minimum(v, 0.97 * v.max())), test.current))
    p = align_pair(ref, test)
    w = [m for m in p.warnings if "looks clipped" in m]
    assert len(w) == 1 and "test voltage 'U'" in w[0] and "verdict is not reliable" in w[0]
    # its own mask: the currents were measured there
    assert p.voltage_clipped.any() and not p.clipped.any()
    assert p.test_clipped_current_s == 0.0


def test_clipped_near_counts_neighbours():
    mask = np.zeros(20, dtype=bool)
    mask[[5, 6]] = True
    # record samples at 1 + 0.1 k s; queried times on the same axis
    t = 1.0 + 0.1 * np.array([2.0, 2.9, 3.0, 4.5, 6.0, 7.9, 8.0, 8.1, 19.0, -3.0, 40.0])
    got = clipped_near(mask, 1.0, 0.1, t, 0.2)
    assert got.tolist() == [False, False, True, True, True, True, True, False, False, False, False]
    assert not clipped_near(np.zeros(20, dtype=bool), 1.0, 0.1, t, 0.2).any()


def test_quantised_crest_is_not_clipping():
    """An 8-bit record (IEC 61083-1 minimum resolution for approved systems, recalled) has a flat crest
    many samples long at its top code; it is not clipping, a signal held at 60 % of its peak is."""
    rec = make_record(n=6000, noise_v=2e-3, seed=5)
    v = rec.voltage.samples
    lsb = 2 * 600e3 / 256  # +-600 kV range, 8 bits
    q = np.round(v / lsb) * lsb
    top = np.flatnonzero(q == q.max())
    assert top.size >= 3  # the flat crest exists
    assert clipping_warning(q, "v", unit="V") is None
    clipped = np.minimum(q, np.round(0.6 * q.max() / lsb) * lsb)
    assert "looks clipped" in clipping_warning(clipped, "v", unit="V")


def test_warning_short_pretrigger():
    ref = make_record(amplitude_V=300e3, noise_v=5e-4, seed=1)
    test = make_record(amplitude_V=600e3, noise_v=5e-4, seed=2, pretrigger_s=0.15e-6)
    p = align_pair(ref, test)
    assert any("pre-trigger" in w and "too short" in w for w in p.warnings)
    assert p.test_noise.source == "second difference"
    # the fallback still finds the noise level (second differences of the smooth record)
    assert p.test_noise.voltage_mad_pu == pytest.approx(5e-4 * 600e3 / p.test_test_voltage_V, rel=0.2)


def test_missing_current_names_the_file():
    rec = make_record(n=2000)
    only_v = Record(0.0, DT, (rec.voltage,), source="lab7/shot12.cfg")
    with pytest.raises(RecordError, match="lab7/shot12.cfg.*no current channel"):
        align_pair(rec, only_v)
    # two voltages (a divider's two ranges): both named, not only the one a comparison would take
    two_v = Record(0.0, DT, (rec.voltage, Channel("U_low", "voltage", rec.voltage.samples / 10)),
                   source="lab7/shot13.cfg")
    with pytest.raises(RecordError, match=r"no current channel among 'U' \(V\), 'U_low' \(V\)"):
        align_pair(rec, two_v)


def test_short_overlap_warns_and_no_front_is_refused():
    ref = make_record(n=3000, pretrigger_s=1e-6)
    test = make_record(n=3000, pretrigger_s=20e-6)
    p = align_pair(ref, test)
    assert p.delay_s == pytest.approx(19e-6, abs=0.05 * DT)
    assert any("overlap for 11 us only" in w for w in p.warnings)
    flat = Record(0.0, DT, (Channel("U", "voltage", np.ones(3000)), Channel("I", "current", np.ones(3000))),
                  source="bench/flat.csv")
    with pytest.raises(RecordError, match="bench/flat.csv: test voltage: .*flat"):
        align_pair(ref, flat)


def test_analytic_current_helper_is_consistent():
    """The residue formula of the test helper against direct numerical convolution (sanity of the
    reference signal itself, Y(s) closed form)."""
    dt = 5e-9
    t = np.arange(60000) * dt
    i = current_exact(t, 1.0)
    assert i[0] == 0.0
    # i(t) -> the capacitive charging current C dv/dt near t = 0+: v'(0+) = A (1/tau2 - 1/tau1) and
    # Y(s) ~ sum(1/(R Q w)) s for small s is not the limit here; instead check the slow limit: for
    # t >> resonance periods, i ~ sum_k (1/(R_k Q_k w_k)) dv/dt (each branch behaves as its capacitance)
    from metrics_signals import HEALTHY

    c_total = sum(1.0 / (b.R_ohm * b.Q * 2 * np.pi * b.f0_Hz) for b in HEALTHY)
    k = t > 150e-6
    dvdt = -np.exp(-t[k] / TAU1_S) / TAU1_S + np.exp(-t[k] / TAU2_S) / TAU2_S
    np.testing.assert_allclose(i[k], c_total * dvdt, rtol=2e-3, atol=1e-3 * np.abs(i).max())
