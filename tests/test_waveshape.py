"""Reference-value tests of the IEC 60060-1 wave-shape evaluation (detector.waveshape).

Check values come from outside the code under test: the standard's definitions (IEC 60060-1:2010),
textbook double-exponential constants (Kuffel, Zaengl & Kuffel, High Voltage Engineering: Fundamentals,
2nd ed., recalled table), or are computed here independently from the analytic wave with ``brentq``.
"""

from __future__ import annotations

import functools
import json
import math

import numpy as np
import pytest
from scipy import optimize

from detector._validation import RecordError, ShotcheckError
from detector.record import Channel, Record
from detector.waveshape import (
    check_tolerances,
    evaluate_lightning,
    evaluate_switching,
    evaluate_waveshape,
    filter_residual,
    test_voltage_factor,
)


# ---------------------------------------------------------------------------------------------
# Analytic waves and their parameters computed independently (brentq on the analytic function)
# ---------------------------------------------------------------------------------------------
def dexp(t, tau1, tau2, amplitude=1.0, t0=0.0):
    s = np.clip(np.asarray(t, dtype=float) - t0, 0.0, None)
    return amplitude * (np.exp(-s / tau1) - np.exp(-s / tau2))


def analytic_times(tau1, tau2):
    """t30, t90, t50 (tail), crest time and crest value of the unit double exponential starting at 0."""
    tp = math.log(tau1 / tau2) * tau1 * tau2 / (tau1 - tau2)
    peak = float(dexp(tp, tau1, tau2))
    f = lambda x, lvl: float(dexp(x, tau1, tau2)) - lvl * peak  # noqa: E731
    t30 = optimize.brentq(f, 0.0, tp, args=(0.3,), xtol=1e-16)
    t90 = optimize.brentq(f, 0.0, tp, args=(0.9,), xtol=1e-16)
    t50 = optimize.brentq(f, tp, 50 * tau1, args=(0.5,), xtol=1e-16)
    return t30, t90, t50, tp, peak


def analytic_lightning(tau1, tau2):
    """T1 = 1.67 (t90 - t30), O1 = t30 - 0.3 T1, T2 = t50 - O1 (IEC 60060-1:2010 definitions)."""
    t30, t90, t50, _, peak = analytic_times(tau1, tau2)
    t1 = 1.67 * (t90 - t30)
    o1 = t30 - 0.3 * t1
    return t1, t50 - o1, o1, peak


@functools.cache
def taus_for(t1_us, t2_us):
    """Time constants [s] of the double exponential with the given T1/T2 (solved here with brentq)."""

    def resid(logs):
        t1, t2, _, _ = analytic_lightning(math.exp(logs[0]), math.exp(logs[1]))
        return [t1 / (t1_us * 1e-6) - 1.0, t2 / (t2_us * 1e-6) - 1.0]

    x0 = [math.log(t2_us / 0.733 * 1e-6), math.log(t1_us * 0.3375 * 1e-6)]
    sol = optimize.least_squares(resid, x0, xtol=1e-14, ftol=1e-14)
    return math.exp(sol.x[0]), math.exp(sol.x[1])


def lightning_wave(tau1=68.22e-6, tau2=0.405e-6, amplitude=1e5, dt=1e-8, pre_s=2e-6, dur_s=150e-6, t_start=0.0):
    t = t_start + np.arange(-round(pre_s / dt), round(dur_s / dt)) * dt
    return t, dexp(t, tau1, tau2, amplitude, t_start)


def quantise(v, full_scale, bits, rng=None, noise=0.0):
    """Bipolar recorder: codes over [-full_scale, full_scale], step 2 full_scale / 2**bits, clipped there."""
    q = 2 * full_scale / 2**bits
    if rng is not None and noise:
        v = v + rng.normal(0.0, noise, v.size)
    return np.clip(np.round(v / q) * q, -full_scale, full_scale - q)


def record_of(t, v, **meta):
    ch = Channel("U1", "voltage", v)
    return Record(start_time_s=float(t[0]), sample_interval_s=float(t[1] - t[0]), channels=(ch,), meta=meta,
                  source="lab7/shot12.cfg")


# ---------------------------------------------------------------------------------------------
# Test voltage function
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("f_MHz", "k"),
    # IEC 60060-1:2010, test voltage function k(f) = 1/(1 + 2.2 f^2); values computed in REFERENCE.md
    [(0.1, 0.9785), (0.5, 0.6452), (1.0, 0.3125), (2.0, 0.1020), (0.0, 1.0)],
)
def test_test_voltage_factor_values(f_MHz, k):
    assert test_voltage_factor(f_MHz * 1e6) == pytest.approx(k, abs=5e-5)


# ---------------------------------------------------------------------------------------------
# Textbook double exponentials (Kuffel, Zaengl & Kuffel, recalled table: from memory)
# ---------------------------------------------------------------------------------------------
def test_kuffel_lightning_1_2_50():
    """tau1 = 68.22 us, tau2 = 0.405 us give 1.2/50 us (Kuffel, Zaengl & Kuffel, table recalled: from memory).

    The table reads T1 as (t90 - t30)/0.6; we report the standard's 1.67 (t90 - t30) (IEC 60060-1:2010),
    0.2 % longer (1.67 x 0.6 = 1.002). Both readings are checked within 1 % of 1.2 us, and the IEC reading
    within 0.1 % of 1.002 x 1.2 us, which the 4-digit table constants allow.
    """
    t, v = lightning_wave()
    ws = evaluate_lightning(t, v)
    assert ws.kind == "lightning_full" and ws.polarity == "positive"
    assert ws.front_time_s == pytest.approx(1.2e-6, rel=0.01)  # IEC reading, 1.67 factor
    assert ws.front_time_s / 1.67 / 0.6 == pytest.approx(1.2e-6, rel=0.01)  # textbook reading, /0.6
    assert ws.front_time_s == pytest.approx(1.67 * 0.6 * 1.2e-6, rel=1e-3)  # the 0.2 % between readings
    assert ws.time_to_half_s == pytest.approx(50e-6, rel=0.01)
    # the fit recovers the generating constants (a pure double exponential, no noise)
    assert ws.base_curve.tau1_s == pytest.approx(68.22e-6, rel=1e-4)
    assert ws.base_curve.tau2_s == pytest.approx(0.405e-6, rel=1e-3)
    assert ws.overshoot_percent == pytest.approx(0.0, abs=0.01)
    assert ws.within_tolerance


def test_kuffel_switching_250_2500():
    """tau1 = 3155 us, tau2 = 62.5 us give 250/2500 us in the time-to-peak reading (Kuffel, Zaengl & Kuffel,
    table recalled: from memory).

    T2 from the true origin within 1 %. Tp = K (t90 - t30) with K = 2.42 - 3.08e-3 T_AB + 1.51e-4 T2
    (IEC 60060-1:2010, formula from memory) is an empirical approximation of the true crest time; we allow
    2 % against 250 us for it, and 1 % for the crest time of the fitted base curve.
    """
    t = np.arange(-100e-6, 8000e-6, 0.5e-6)
    v = dexp(t, 3155e-6, 62.5e-6, 2e5)
    ws = evaluate_switching(t, v)
    assert ws.kind == "switching"
    assert ws.time_to_half_s == pytest.approx(2500e-6, rel=0.01)
    assert ws.time_to_peak_s == pytest.approx(250e-6, rel=0.02)
    assert ws.base_curve.peak_time_s - ws.origin_s == pytest.approx(250e-6, rel=0.01)
    assert ws.origin_s == pytest.approx(0.0, abs=1e-6)
    assert ws.front_time_s is None and ws.virtual_origin_s is None and ws.overshoot_percent is None
    assert ws.within_tolerance


# ---------------------------------------------------------------------------------------------
# Analytic waves, parameters computed independently
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("sign", [1.0, -1.0])
@pytest.mark.parametrize(
    ("t1_us", "t2_us"),
    # tolerance boundaries of the 1.2/50 us wave: 0.84-1.56 us and 40-60 us (IEC 60060-1:2010)
    [(0.84, 40.0), (1.56, 60.0), (1.2, 50.0), (0.84, 60.0), (1.56, 40.0)],
)
def test_analytic_lightning_shapes(t1_us, t2_us, sign):
    tau1, tau2 = taus_for(t1_us, t2_us)
    t1, t2, o1, peak = analytic_lightning(tau1, tau2)  # computed here with brentq
    t, v = lightning_wave(tau1, tau2, sign * 3e5, dur_s=130e-6)
    ws = evaluate_lightning(t, v)
    assert ws.front_time_s == pytest.approx(t1, rel=2e-3)
    assert ws.time_to_half_s == pytest.approx(t2, rel=2e-3)
    assert ws.virtual_origin_s == pytest.approx(o1, abs=5e-9)
    assert ws.test_voltage_V == pytest.approx(sign * 3e5 * peak, rel=1e-4)
    assert ws.polarity == ("positive" if sign > 0 else "negative")


def test_noisy_12_bit_record(global_random_seed):
    """1.2/50 us at 100 MS/s, 12 bits over +/- 250 kV, noise 0.1 % of the peak (invented recorder).

    T1, T2 within 1 % of the analytic values and the test voltage within 0.5 % of the clean crest (no
    overshoot, so the test voltage is the crest of the smooth curve; IEC 60060-1:2010).
    """
    rng = np.random.default_rng(global_random_seed)
    tau1, tau2 = 68.22e-6, 0.405e-6  # Kuffel, Zaengl & Kuffel (recalled)
    t1, t2, _, peak = analytic_lightning(tau1, tau2)
    t, v = lightning_wave(tau1, tau2, -1.9e5, dt=1e-8, pre_s=20e-6, dur_s=180e-6)
    vq = quantise(v, 2.5e5, 12, rng, noise=1.9e5 * 1e-3)
    ws = evaluate_lightning(t, vq, bits=12, full_scale_V=2.5e5)
    assert ws.front_time_s == pytest.approx(t1, rel=0.01)
    assert ws.time_to_half_s == pytest.approx(t2, rel=0.01)
    assert ws.test_voltage_V == pytest.approx(-1.9e5 * peak, rel=0.005)
    assert ws.warnings == ()
    assert ws.within_tolerance


@pytest.mark.parametrize("chop_us", [3.0, 6.0])
@pytest.mark.parametrize("collapse_ns", [100.0, 200.0])
@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_chopped_wave(chop_us, collapse_ns, sign, global_random_seed):
    """1.2/50 us chopped at 3 and 6 us after O1 by a linear collapse (chopping at 3-6 us: common practice).

    For a linear collapse, the line through its 70 % and 10 % points meets the voltage at chopping at the
    collapse's start (IEC 60060-1:2010 definition, recalled), so the start is the expected instant; within 50 ns.
    """
    rng = np.random.default_rng(global_random_seed)
    tau1, tau2 = 68.22e-6, 0.405e-6
    t1, _, o1, _ = analytic_lightning(tau1, tau2)
    t, v = lightning_wave(tau1, tau2, sign * 1.2e5, dur_s=30e-6)
    t_chop = o1 + chop_us * 1e-6
    v = v * np.clip(1.0 - (t - t_chop) / (collapse_ns * 1e-9), 0.0, 1.0)
    v = quantise(v, 1.5e5, 12, rng, noise=100.0)
    ws = evaluate_lightning(t, v)
    assert ws.kind == "lightning_chopped"
    assert ws.chopping_instant_s == pytest.approx(t_chop, abs=50e-9)
    assert ws.time_to_chopping_s == pytest.approx(chop_us * 1e-6, abs=50e-9)
    assert ws.front_time_s == pytest.approx(t1, rel=0.01)
    assert ws.time_to_half_s is None
    d = ws.to_dict()
    assert d["chopping_time_us"] == pytest.approx(t_chop * 1e6, abs=0.05)  # on the record's axis
    assert d["time_to_half_us"] is None
    if chop_us < 6.0:  # 6 us sits on the upper limit of 2-6 us (IEC 60076-3, recalled): either outcome
        assert d["tolerance"]["time_to_chopping_us"]["pass"]


def _lowpass_k(x, dt):
    """k(f) applied by time-domain convolution with its impulse response pi f0 exp(-2 pi f0 |t|),
    f0 = 1/sqrt(2.2) MHz (inverse Fourier transform of 1/(1 + (f/f0)^2); computed), independent of the FFT."""
    f0 = 1e6 / math.sqrt(2.2)
    half = int(12 / (2 * math.pi * f0 * dt))
    tk = np.arange(-half, half + 1) * dt
    h = math.pi * f0 * np.exp(-2 * math.pi * f0 * np.abs(tk)) * dt
    return np.convolve(x, h, mode="same")


@pytest.mark.parametrize("f_osc_MHz", [0.5, 1.0])
def test_oscillating_wave_test_voltage(f_osc_MHz):
    """1.2/50 us plus a damped oscillation at the crest: test voltage between the base-curve peak and the
    extreme value (IEC 60060-1:2010 test voltage function; its example shows this ordering, recalled)."""
    tau1, tau2 = 68.22e-6, 0.405e-6
    t, base = lightning_wave(tau1, tau2, 1e5, dur_s=120e-6)
    s = np.clip(t - 1.6e-6, 0.0, None)
    osc = 7e3 * np.sin(2 * np.pi * f_osc_MHz * 1e6 * s) * np.exp(-s / 2e-6)
    v = base + osc
    ws = evaluate_lightning(t, v)
    base_peak = base.max()
    extreme = v.max()
    assert base_peak < ws.test_voltage_V < extreme
    assert ws.peak_V == pytest.approx(extreme, rel=2e-3)
    # expected test voltage: true base + k-filtered true residual, filtered here by convolution
    expected_tv = (base + _lowpass_k(osc, t[1] - t[0])).max()
    assert ws.test_voltage_V == pytest.approx(expected_tv, rel=5e-3)
    assert ws.base_curve.peak_V == pytest.approx(base_peak, rel=5e-3)
    beta = 100 * (extreme - base_peak) / extreme  # relative overshoot, IEC 60060-1:2010 definition
    assert ws.overshoot_percent == pytest.approx(beta, abs=0.5)
    assert ws.overshoot_percent > 2.0
    assert ws.to_dict()["overshoot_percent"] == pytest.approx(ws.overshoot_percent)


# ---------------------------------------------------------------------------------------------
# Tolerances
# ---------------------------------------------------------------------------------------------
def _passed(checks):
    return {c.name: c.passed for c in checks}


@pytest.mark.parametrize(
    ("t1", "t2", "ok1", "ok2"),
    # 1.2 us +/- 30 % and 50 us +/- 20 % (IEC 60060-1:2010), limits inclusive
    [(0.84e-6, 40e-6, True, True), (1.56e-6, 60e-6, True, True), (0.8399e-6, 39.99e-6, False, False),
     (1.5601e-6, 60.01e-6, False, False)],
)
def test_lightning_tolerance_boundaries(t1, t2, ok1, ok2):
    r = _passed(check_tolerances("lightning_full", front_time_s=t1, time_to_half_s=t2, overshoot_percent=0.0))
    assert r == {"front_time_us": ok1, "time_to_half_us": ok2, "overshoot_percent": True}


def test_switching_and_voltage_tolerance_boundaries():
    # 250 us +/- 20 %, 2500 us +/- 60 %, test voltage +/- 3 % (IEC 60060-1:2010, recalled)
    ok = _passed(check_tolerances("switching", time_to_peak_s=200e-6, time_to_half_s=4000e-6,
                                  test_voltage_V=-1.03e6, specified_test_voltage_V=-1e6))
    assert all(ok.values())
    bad = _passed(check_tolerances("switching", time_to_peak_s=300.1e-6, time_to_half_s=999e-6,
                                   test_voltage_V=0.9699e6, specified_test_voltage_V=1e6))
    assert not any(bad.values())
    # overshoot at most 10 % (IEC 60060-1:2010, recalled)
    assert _passed(check_tolerances("lightning_full", front_time_s=1.2e-6, time_to_half_s=50e-6,
                                    overshoot_percent=10.0))["overshoot_percent"]
    assert not _passed(check_tolerances("lightning_full", front_time_s=1.2e-6, time_to_half_s=50e-6,
                                        overshoot_percent=10.01))["overshoot_percent"]
    # chopping at 2-6 us (IEC 60076-3, recalled)
    assert not _passed(check_tolerances("lightning_chopped", front_time_s=1.2e-6, time_to_chopping_s=1.9e-6,
                                        overshoot_percent=0.0))["time_to_chopping_us"]


def test_specified_voltage_and_out_of_tolerance_wave():
    tau1, tau2 = taus_for(1.8, 50.0)  # front 1.8 us: outside 1.2 us +/- 30 % (IEC 60060-1:2010)
    t, v = lightning_wave(tau1, tau2, 1e5)
    ws = evaluate_lightning(t, v, specified_test_voltage_V=1.05e5)
    d = ws.to_dict()
    assert not d["within_tolerance"]
    assert d["tolerance"]["front_time_us"] == pytest.approx(
        {"value": 1.8, "low": 0.84, "high": 1.56, "pass": False}, rel=1e-3)
    assert d["tolerance"]["time_to_half_us"]["pass"]
    # test voltage about 0.96 x 100 kV, more than 3 % below 105 kV
    assert not d["tolerance"]["test_voltage_kV"]["pass"]


# ---------------------------------------------------------------------------------------------
# Recorder adequacy warnings (IEC 61083-1)
# ---------------------------------------------------------------------------------------------
def test_low_sample_rate_warning():
    # 20 MS/s < 30/Tx = 41.7 MS/s for Tx = 0.72 us (IEC 61083-1; computed in REFERENCE.md)
    t, v = lightning_wave(dt=5e-8)
    ws = evaluate_lightning(t, v)
    assert any(w.startswith("sample rate 20 MS/s is below 30/Tx") for w in ws.warnings)
    t, v = lightning_wave(dt=2e-8)  # 50 MS/s is enough
    assert not any("sample rate" in w for w in evaluate_lightning(t, v).warnings)


def test_eight_bit_warnings():
    t, v = lightning_wave(amplitude=1e5)
    v8 = quantise(v, 1.1e5, 8)
    for ws in (evaluate_lightning(t, v8), evaluate_lightning(t, v8, bits=8, full_scale_V=1.1e5)):
        assert any(w.startswith("fewer than 8 effective bits") for w in ws.warnings)  # IEC 61083-1
    # 10 bits: enough for IEC 61083-1 but below the usual 10 bits for compared records (common practice)
    v10 = quantise(v, 1.1e5, 10)
    ws = evaluate_lightning(t, v10)
    assert any(w.startswith("fewer than 10 bits") for w in ws.warnings)
    assert not any("fewer than" in w for w in evaluate_lightning(t, v10, for_comparison=False).warnings)


def test_clipping_and_low_range_warnings():
    t, v = lightning_wave(amplitude=1e5)
    vc = quantise(v, 0.9e5, 12)  # range top 90 kV < crest 96.4 kV
    ws = evaluate_lightning(t, vc)
    assert any(w.startswith("clipping:") for w in ws.warnings)
    ok = quantise(v, 1.1e5, 12)
    assert not any(w.startswith("clipping:") for w in evaluate_lightning(t, ok).warnings)
    # exact float repeats at the extreme also count
    assert any(w.startswith("clipping:") for w in evaluate_lightning(t, np.minimum(v, 9e4)).warnings)
    # 12-bit codes stored again in a file's 16-bit integers (41.53 of them per code, so the values' gaps
    # are 41 or 42 of the file's steps and no uniform step exists): a smooth crest is no clipping (the
    # demo's records read without their .inf once were); clipped codes stored that way still are
    file_step = 2 * 1.1e5 / 4096 / 41.53
    for codes, clipped in ((quantise(v, 1.1e5, 12), False), (quantise(v, 0.9e5, 12), True)):
        stored = np.round(codes / file_step) * file_step
        told = [w for w in evaluate_lightning(t, stored).warnings if w.startswith("clipping:")]
        assert bool(told) == clipped, told
    # peak below 20 % of full scale (IEC 61083-1)
    ws = evaluate_lightning(t, quantise(v, 6e5, 14), bits=14, full_scale_V=6e5)
    assert any("below 20 % of the full scale" in w for w in ws.warnings)


def test_short_pretrigger_and_short_record():
    t, v = lightning_wave(pre_s=0.05e-6)
    ws = evaluate_lightning(t, v)
    assert any(w.startswith("pre-trigger too short") for w in ws.warnings)
    t, v = lightning_wave(dur_s=30e-6)
    ws = evaluate_lightning(t, v)
    assert ws.time_to_half_s is None
    assert any(w.startswith("record too short") for w in ws.warnings)
    assert not ws.within_tolerance and not ws.to_dict()["tolerance"]["time_to_half_us"]["pass"]


# ---------------------------------------------------------------------------------------------
# Errors
# ---------------------------------------------------------------------------------------------
def test_errors_name_source_and_expectation():
    t, v = lightning_wave()
    with pytest.raises(RecordError, match=r"lab7/shot12.cfg: voltage: no impulse: the voltage is constant"):
        evaluate_waveshape(record_of(t, np.zeros_like(v)))
    noise = np.random.default_rng(3).normal(0, 1.0, v.size)
    with pytest.raises(RecordError, match=r"lab7/shot12.cfg: .*no impulse found.*noise"):
        evaluate_waveshape(record_of(t, noise))
    with pytest.raises(RecordError, match=r"record too short: it ends before the crest"):
        evaluate_waveshape(record_of(t[:250], v[:250]))
    with pytest.raises(RecordError, match=r"starts on or after the impulse's front"):
        evaluate_waveshape(record_of(t[300:], v[300:]))
    dip = v - 6e4 * np.exp(-np.clip(t - 0.5e-6, 0, None) / 0.3e-6) * (t > 0.5e-6) * (t < 2e-6)
    with pytest.raises(RecordError, match=r"non-monotone front"):
        evaluate_waveshape(record_of(t, dip))
    with pytest.raises(RecordError, match=r"no voltage collapse found"):
        evaluate_waveshape(record_of(t, v), kind="lightning_chopped")
    with pytest.raises(ShotcheckError, match=r"Invalid value for 'kind'"):
        evaluate_waveshape(record_of(t, v), kind="lightning")
    with pytest.raises(ShotcheckError, match=r"bits must be an integer"):
        evaluate_lightning(t, v, bits=0)
    tb = t.copy()
    tb[100] += 0.5e-8
    with pytest.raises(RecordError, match=r"time: .*uniform"):
        evaluate_lightning(tb, v, source="a.csv")


def test_full_kind_refuses_chopped_record():
    t, v = lightning_wave(dur_s=20e-6)
    v = v * np.clip(1 - (t - 4e-6) / 1e-7, 0, 1)
    with pytest.raises(RecordError, match=r"collapses at t = (3\.99|4\.00)\d us"):
        evaluate_waveshape(record_of(t, v, shot_kind="full"), kind="lightning_full")
    assert evaluate_waveshape(record_of(t, v, shot_kind="full")).kind == "lightning_chopped"
    # a reduced-level chopped wave declared in the metadata is evaluated as a chopped wave
    assert evaluate_waveshape(record_of(t, v, shot_kind="reduced_chopped")).kind == "lightning_chopped"


# ---------------------------------------------------------------------------------------------
# Record interface and JSON
# ---------------------------------------------------------------------------------------------
def test_record_interface_kinds_and_json():
    t, v = lightning_wave(amplitude=-4e5)
    ws = evaluate_waveshape(record_of(t, v, shot_kind="reduced", level_percent=60))
    d = ws.to_dict()
    assert list(d) == ["kind", "polarity", "peak_kV", "test_voltage_kV", "front_time_us", "time_to_half_us",
                       "overshoot_percent", "chopping_time_us", "time_to_peak_us", "virtual_origin_us",
                       "within_tolerance", "tolerance", "warnings"]  # DESIGN.md section 6 and the issue
    assert d["kind"] == "lightning_full" and d["polarity"] == "negative"
    assert d["test_voltage_kV"] < 0 and d["chopping_time_us"] is None and d["time_to_peak_us"] is None
    json.dumps(d, allow_nan=False)
    # switching found from the front time alone, and from meta
    ts = np.arange(-100e-6, 6000e-6, 1e-6)
    vs = dexp(ts, 3155e-6, 62.5e-6, 5e5)
    assert evaluate_waveshape(record_of(ts, vs)).kind == "switching"
    assert evaluate_waveshape(record_of(ts, vs, shot_kind="switching")).to_dict()["time_to_peak_us"] > 200
    with pytest.raises(ShotcheckError, match="expected a Record"):
        evaluate_waveshape((ts, vs))  # type: ignore[arg-type]


def test_offset_baseline_removed():
    t, v = lightning_wave(amplitude=2e5)
    ws0 = evaluate_lightning(t, v)
    ws = evaluate_lightning(t, v + 3e3)  # 1.5 % baseline offset
    assert ws.baseline_V == pytest.approx(3e3, rel=1e-6)
    assert ws.test_voltage_V == pytest.approx(ws0.test_voltage_V, rel=1e-6)
    assert ws.front_time_s == pytest.approx(ws0.front_time_s, rel=1e-6)


def test_filter_residual_no_wraparound():
    """k(f) filter of the residual: a straight line passes unchanged (k(0) = 1, k even; IEC 60060-1:2010
    test voltage function) and an oscillation matches an independent time-domain convolution with the
    filter's impulse response, up to both ends of the window. A circular FFT filter would turn the line
    into a saw-tooth jump at the ends and fail here."""
    dt = 1e-8
    t = np.arange(3000) * dt
    line = 2e3 - 1.5e3 * t / t[-1]
    s = np.clip(t - 8e-6, 0.0, None)
    osc = 4e3 * np.sin(2 * np.pi * 0.7e6 * s) * np.exp(-s / 2e-6) * (t > 8e-6)
    out = filter_residual(line + osc, dt)
    expected = line + _lowpass_k(osc, dt)
    assert np.max(np.abs(out - expected)) < 5.0  # volts, on a 2 kV line + 4 kV oscillation
    assert np.max(np.abs(filter_residual(line, dt) - line)) < 1e-6


def test_recorder_settings_from_meta_and_step_check():
    """``meta['bits']``/``meta['voltage_range_V']`` (written by synthetic.digitiser) are used when the caller
    gives none; a full scale that does not match the samples' step is reported."""
    t, v = lightning_wave(amplitude=1e5)
    v10 = quantise(v, 1.1e5, 10)  # 8.8 effective bits: below the usual 10 for compared records
    ws = evaluate_waveshape(record_of(t, v10, bits=10, voltage_range_V=1.1e5))
    assert ws.effective_bits == pytest.approx(math.log2(v.max() / (2 * 1.1e5 / 2**10)), abs=0.01)
    assert any(w.startswith("fewer than 10 bits") for w in ws.warnings)
    ws = evaluate_lightning(t, v10, bits=10, full_scale_V=2.2e5)  # twice the real range
    assert any("not in whole steps" in w for w in ws.warnings)
    with pytest.raises(RecordError, match=r"lab7/shot12.cfg: meta: recorder settings in meta: bits must be"):
        evaluate_waveshape(record_of(t, v10, bits=0, voltage_range_V=1.1e5))
    with pytest.raises(ShotcheckError, match=r"specified_test_voltage_V must be a non-zero number"):
        evaluate_lightning(t, v10, specified_test_voltage_V="high")


def test_tail_oscillation_is_not_a_chop_and_low_level_chop_is():
    """A 1 MHz oscillation of 10 % of the peak riding on the tail is no collapse; a gap firing late at a
    low voltage (after a fault pulled the wave down) is one, and its instant is still found within 50 ns
    (70 %/10 % construction, IEC 60060-1:2010, recalled)."""
    t, v = lightning_wave(amplitude=1e5, dur_s=120e-6)
    s = np.clip(t - 30e-6, 0.0, None)
    ws = evaluate_lightning(t, v + 1e4 * np.sin(2 * np.pi * 1e6 * s) * np.exp(-s / 5e-6) * (t > 30e-6))
    assert ws.kind == "lightning_full"
    assert ws.time_to_half_s == pytest.approx(analytic_lightning(68.22e-6, 0.405e-6)[1], rel=0.02)
    # a fault at 8 us drags the voltage down to about a quarter, the gap fires at 14 us
    sag = np.where(t > 8e-6, 0.25 + 0.75 * np.exp(-np.clip(t - 8e-6, 0, None) / 1e-6), 1.0)
    vf = v * sag * np.clip(1.0 - (t - 14e-6) / 100e-9, 0.0, 1.0)
    ws = evaluate_lightning(t, vf)
    assert ws.kind == "lightning_chopped"
    assert ws.chopping_instant_s == pytest.approx(14e-6, abs=50e-9)
    assert any(w.startswith("the record departs from a double-exponential") for w in ws.warnings)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_polarity_from_the_impulse_not_from_the_swing_after_a_chop(sign):
    """The swing after a chop can exceed the crest (lead inductance of the gap; common practice): the
    polarity is that of the impulse, which comes first."""
    t, v = lightning_wave(amplitude=sign * 1e5, dur_s=20e-6)
    t_chop = 4e-6
    s = np.clip(t - t_chop - 1e-7, 0.0, None)
    v = v * np.clip(1.0 - (t - t_chop) / 1e-7, 0.0, 1.0)
    v = v - sign * 1.1e5 * np.sin(2 * np.pi * 1.5e6 * s) * np.exp(-s / 2e-6) * (t > t_chop + 1e-7)
    ws = evaluate_lightning(t, v)
    assert ws.polarity == ("positive" if sign > 0 else "negative")
    assert ws.kind == "lightning_chopped"
    assert ws.chopping_instant_s == pytest.approx(t_chop, abs=50e-9)
    assert abs(ws.test_voltage_V) == pytest.approx(1e5 * analytic_lightning(68.22e-6, 0.405e-6)[3], rel=5e-3)
