"""Detection with the bundled model on controlled simulated pairs (one change at a time).

Facts of the trade used as check values (common practice): an arc between turns or to ground changes the
impulse wave shape; a partial discharge adds high-frequency oscillations without changing the wave shape;
the winding's impulse strength is the same for either polarity, so a pair and its polarity mirror must get
the same verdict. Harmless differences between levels (IEC 60076-4, recalled): generator wave-shape drift
within the IEC 60060-1 tolerances, core effects on the tail, recorder range and noise, chopping-time
scatter when chopped shots are compared.
"""

from __future__ import annotations

import copy
import dataclasses
import json
import re

import numpy as np
import pytest
from detection_cases import make_case, mirrored

from detector._validation import RecordError
from detector.cli import main
from detector.compare import compare, default_model
from detector.features import FEATURE_NAMES, extract
from detector.formats import write
from detector.metrics.compensated import compensated_difference
from detector.scoring import DECISIVE

pytestmark = pytest.mark.slow


_CASES: dict[str, object] = {}


def case(**kw):
    """make_case(**kw), simulated once per session."""
    key = json.dumps(kw, sort_keys=True)
    if key not in _CASES:
        _CASES[key] = make_case(**kw)
    return _CASES[key]


def verdict(**kw):
    c = case(**kw)
    return compare(c.reference, c.test, model=default_model()), c


BENIGN = {
    "identical conditions": {},
    "front 5 % slower at reduced level (generator drift, IEC 60060-1 allows +/-30 %)": {"front_drift": 0.05},
    "tail resistor 5 % lower at reduced level": {"tail_drift": -0.05},
    "core magnetising inductance 15 % lower at full level": {"magnetising_ratio": 0.85},
    "recorder noise three times higher on the test shot": {"test_recorder": {"noise_lsb": 1.8}},
    "reference recorded on a 30 % smaller current range": {"reference_recorder": {"current_range_A": 120.0}},
    "test chopped at 4 us, reference full": {"chop_test_s": 4e-6},
    "both chopped, 0.15 us chopping-time scatter": {"chop_test_s": 4e-6, "chop_reference_s": 4.15e-6},
    "another noise realisation": {"seed": 5},
    "test record with half the pre-trigger (4 us against 8 us)": {"test_recorder": {"pretrigger_s": 4e-6}},
    "reference record with a longer pre-trigger (15 us against 8 us)": {"reference_recorder": {"pretrigger_s": 15e-6}},
    "test chopped at 4 us, its current recorder clipping on the tail (range 20 A of a 34 A peak)": {
        "chop_test_s": 4e-6, "test_recorder": {"current_range_A": 20.0}},
}


def test_clipped_samples_are_not_compared():
    """A recorder driven beyond its range does not measure: the samples at its limit are left out of the
    comparison (a clipped current differs from its prediction by up to ~50 noise units here), so the
    features of a healthy chopped pair whose test current clips match those of the same pair recorded on
    a range that does not clip."""
    names = ("cd_max_z", "cd_scale64_z", "wv_fine_peak_sigma", "wv_coarse_peak_sigma")
    free = extract(case(chop_test_s=4e-6, test_recorder={"current_range_A": 40.0}).reference,
                   case(chop_test_s=4e-6, test_recorder={"current_range_A": 40.0}).test)
    c = case(chop_test_s=4e-6, test_recorder={"current_range_A": 20.0})
    clipped = extract(c.reference, c.test)
    assert not free.pair.clipped.any() and clipped.pair.clipped.sum() > 500
    assert clipped.features[FEATURE_NAMES.index("clip_test_current_us")] > 5.0
    assert free.features[FEATURE_NAMES.index("clip_test_current_us")] == 0.0
    # what the clipped samples would have scored, compared as recorded (extract gives them the prediction
    # before the noise weight could spread their error: their own z is about 0 there)
    p = clipped.pair
    raw = compensated_difference(p.ref_voltage_pu, p.ref_current_pu, p.test_voltage_pu, p.test_current_pu,
                                 p.sample_interval_s, pretrigger_samples=p.pretrigger_samples)
    z_clipped = float(abs(raw.z[p.clipped]).max())
    assert float(abs(clipped.compensated.z[p.clipped]).max()) < 0.5 * z_clipped
    for n in names:
        a, b = (float(x.features[FEATURE_NAMES.index(n)]) for x in (free, clipped))
        assert b == pytest.approx(a, rel=0.25), n
        assert z_clipped > 3.0 * b, n  # what the clipped samples would have scored


def test_clipped_current_beyond_the_predicted_span_leaves_the_transfer_function_alone():
    """A 40 us record whose test current is clipped at 60 % of its peak: most clipped samples lie past the
    span the compensated prediction covers; the transfer function takes the reference current there (per
    unit, the same for a healthy winding) and stays as it was unclipped."""
    c = case(n_samples=4000)
    i = c.test.current.samples
    k = int(np.argmax(np.abs(i)))
    limit = 0.6 * abs(i[k])
    cut = np.clip(i, -limit, limit)
    test = c.test.replace(channels=(c.test.voltage, c.test.current.with_samples(cut)))
    free, clipped = extract(c.reference, c.test), extract(c.reference, test)
    beyond = clipped.pair.clipped & ~np.isfinite(clipped.compensated.predicted)
    assert beyond.sum() > 500
    for n, tol in (("tf_rho", 0.01), ("tf_rms_dB", 0.05), ("tf_mean_dB", 0.05), ("tf_max_dB", 0.3)):
        a, b = (float(x.features[FEATURE_NAMES.index(n)]) for x in (free, clipped))
        assert b == pytest.approx(a, abs=tol), n


def test_a_discharge_train_rings_the_winding_where_averages_see_little():
    """Discharge pulses between two discs move charge inside the winding, which then rings at its own
    slowest resonance (here about 50 kHz) for tens of microseconds. The damped-oscillation scan of the
    compensated difference finds that ringing where its moving averages (up to 1024 samples, 10 us)
    stay under three sigma; healthy pairs stay at the noise level of the scan (chi-square sized)."""
    c = case(fault="discharge_only", discharge_charge_C=3e-6)
    d = extract(c.reference, c.test).as_dict()
    assert d["osc_low_z"] > 10.0, d["osc_low_z"]
    assert 35.0 < d["osc_frequency_kHz"] < 65.0
    assert max(d["cd_scale256_z"], d["cd_scale1024_z"]) < 3.0
    for name in ("identical conditions", "another noise realisation",
                 "core magnetising inductance 15 % lower at full level"):
        b = case(**BENIGN[name])
        assert extract(b.reference, b.test).as_dict()["osc_low_z"] < 5.0, name


@pytest.mark.parametrize("name", list(BENIGN))
def test_harmless_differences_give_no_fault(name):
    v, _ = verdict(**BENIGN[name])
    assert not v.fault_indicated, (name, v.probabilities)
    assert v.event == "none"
    assert v.fault_time_s is None and v.location is None


@pytest.mark.parametrize(
    ("kw", "event"),
    [
        # 5 turns of 1000 at mid-winding (section 21): the models up to the one of 32000 pairs put it
        # between turn-to-turn and discharge (0.44-0.8 turn-to-turn), so only that was asserted; the
        # model of 64000 pairs names it. A retrained model that does not has lost ground here (the
        # README gives the measured confusion)
        ({"fault": "turn_to_turn"}, "turn_to_turn"),
        ({"fault": "turn_to_turn", "section": 8, "turns": 3}, "turn_to_turn"),
        ({"fault": "to_ground"}, "to_ground"),
        ({"fault": "to_ground", "section": 30}, "to_ground"),
    ],
)
def test_faults_are_indicated_classified_and_timed(kw, event):
    v, c = verdict(**kw)
    assert v.fault_indicated, v.probabilities
    assert v.event == event, v.probabilities
    assert v.location is not None and 0.0 <= v.location <= 1.0
    assert v.fault_time_s is not None and abs(1e6 * v.fault_time_s - c.fault_time_us) < 3.0


def test_a_discharge_is_indicated_and_named_with_wave_shape_and_transfer_function_unchanged():
    """Discharges between two discs (12 pulses of 30 ns from section 21): a fault, named a discharge,
    while the wave shape of the test record stays that of the healthy pair's and neither the transfer
    function nor the coarse wavelet levels pass their thresholds (the fact of the trade in the module
    docstring: a partial discharge leaves the wave shape). The charge they move inside the winding
    rings its slowest resonance (``test_a_discharge_train_rings_the_winding_where_averages_see_little``),
    which is what the classifier sees here; no metric passes its threshold alone."""
    v, c = verdict(fault="discharge_only")
    assert v.fault_indicated and v.event == "discharge_only", v.probabilities
    assert v.location is not None and 0.0 <= v.location <= 1.0
    assert v.fault_time_s is not None and abs(1e6 * v.fault_time_s - c.fault_time_us) < 3.0
    h = case()
    healthy = extract(h.reference, h.test).as_dict()
    d = extract(c.reference, c.test).as_dict()
    for name in ("ws_front_time_change", "ws_time_to_half_change", "ws_test_voltage_ratio_change"):
        assert abs(d[name] - healthy[name]) < 0.002, (name, d[name], healthy[name])
    thresholds = default_model().thresholds
    for name in ("tf_rms_dB", "tf_low_rms_dB", "tf_medium_rms_dB", "tf_max_peak_shift", "wv_coarse_peak_sigma"):
        assert d[name] < thresholds[name], (name, d[name], thresholds[name])
    assert v.exceeded == []


def test_a_burst_late_in_the_tail_is_indicated_after_the_compensated_span():
    """The compensated prediction ends about 70 % into the record; a damped 4 MHz burst of 30 noise
    standard deviations added to the test current at 90 us of the 100 us record (a discharge that late
    is rare in training) is indicated, explained by the decisive features and timed at its onset. The
    bundled model's classifier sees it too (since its fault-against-none detector); where it does not
    (here: a copy whose decision threshold no pair reaches), the decisive features decide alone, the
    instant is their difference's onset, and the verdict says so."""
    c = case()
    quiet = compare(c.reference, c.test, model=default_model())
    assert not quiet.fault_indicated
    cur = c.test.current
    t = c.test.times()
    t_burst = t[0] + 90e-6
    s = np.clip(t - t_burst, 0.0, None)
    burst = np.where(t >= t_burst, np.exp(-s / 0.3e-6) * np.sin(2 * np.pi * 4e6 * s), 0.0)
    noise = float(np.std(np.diff(cur.samples[:200]))) / np.sqrt(2.0)
    late = c.test.replace(channels=tuple(ch.with_samples(ch.samples + 30.0 * noise * burst) if ch is cur else ch
                                         for ch in c.test.channels), step="late burst")
    model = default_model()
    deaf = copy.copy(model)
    deaf.none_threshold = deaf.none_threshold_chopped = 1e-12  # the classifier alone indicates nothing
    for m in (model, deaf):
        v = compare(c.reference, late, model=m)
        assert v.fault_indicated
        assert any(e["metric"] in DECISIVE for e in v.exceeded)
        assert v.model["none_threshold"] == m.none_threshold  # a full test shot's threshold
        alone = v.probabilities["none"] >= m.none_threshold
        assert alone == any("after the span the compensated prediction covers" in w for w in v.warnings)
        assert alone == (m is deaf)
        assert v.fault_time_s == pytest.approx(t_burst, abs=0.3e-6)


def test_faults_are_located_roughly_along_the_winding():
    """Ten faults spread along the winding: the median location error stays under 0.2 of its length.

    The location is a regression with a measured median error of about 0.1 and a 90th percentile of
    about 0.33 on the held-out set (README), so one case alone says little; the bound is twice the
    measured median, set from the held-out figures before these cases were run.
    """
    errors = []
    for fault in ("turn_to_turn", "to_ground"):
        for section in (3, 11, 20, 28, 36):  # of 40, 0 at the line end
            v, c = verdict(fault=fault, section=section)
            assert v.fault_indicated and v.location is not None, (fault, section, v.probabilities)
            errors.append(abs(v.location - c.location))
    errors.sort()
    assert 0.5 * (errors[4] + errors[5]) < 0.2, [round(e, 3) for e in errors]


def test_a_chopped_shot_against_a_full_reference_carries_the_sensitivity_warning():
    from detector.compare import CHOPPED_AGAINST_FULL_WARNING

    full_ref, _ = verdict(chop_test_s=4e-6)
    chopped_ref, _ = verdict(chop_test_s=4e-6, chop_reference_s=4.15e-6)
    both_full, _ = verdict()
    assert CHOPPED_AGAINST_FULL_WARNING in full_ref.warnings
    assert CHOPPED_AGAINST_FULL_WARNING not in chopped_ref.warnings
    assert CHOPPED_AGAINST_FULL_WARNING not in both_full.warnings
    # each kind of comparison is decided at its own threshold (the bundled model has both)
    m = default_model()
    assert m.none_threshold_chopped is not None
    assert full_ref.model["none_threshold"] == chopped_ref.model["none_threshold"] == m.none_threshold_chopped
    assert both_full.model["none_threshold"] == m.none_threshold
    from detector.cli import verdict_text
    from detector.compare import COLLAPSED_TEST_KIND

    assert full_ref.model["none_threshold_kind"] == chopped_ref.model["none_threshold_kind"] == COLLAPSED_TEST_KIND
    assert both_full.model["none_threshold_kind"] == "full test shots"
    text = verdict_text(full_ref.to_dict(), "ref", "test")
    assert (f"decision: P(none) {full_ref.probabilities['none']:.4f} against the threshold "
            f"{m.none_threshold_chopped:.4f} for {COLLAPSED_TEST_KIND}") in text
    # a reduced-level chopped wave compared with the reduced full wave is the chopped reference's own
    # check, not a test shot: no advice to use a chopped reference
    import dataclasses

    from detection_cases import REDUCED

    c = case(chop_test_s=4e-6)
    reduced_chopped = c.test.replace(
        channels=tuple(dataclasses.replace(ch, samples=ch.samples * REDUCED) for ch in c.test.channels),
        step="scaled to the reduced level")
    v = compare(c.reference, reduced_chopped, model=default_model())
    assert CHOPPED_AGAINST_FULL_WARNING not in v.warnings


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("kw", [{"fault": "turn_to_turn", "turns": 10}, {"fault": "to_ground"}],
                         ids=["turn_to_turn_10_turns", "to_ground"])
def test_breakdown_after_chopping_is_indicated(kw, seed):
    """A chopped test shot against a full reference: healthy gives no fault (see the benign cases), a
    breakdown about 20 us after the chop gives one, in every noise realisation: a short of 10 turns
    (1 % of the winding) between turns, or a breakdown to ground. Its location and instant are less
    certain after a chop (the README lists the measured errors), so only the verdict is asserted."""
    v, c = verdict(chop_test_s=3e-6, seed=seed, **kw)
    assert c.fault_time_us is not None and c.fault_time_us > 15.0
    assert v.fault_indicated, v.probabilities
    assert v.event == kw["fault"], v.probabilities


def test_five_turn_breakdown_after_chopping_is_indicated_in_every_realisation():
    """A 5-turn short (0.5 % of the winding) 20 us after the chop, against a full-wave reference, in three
    noise realisations. Such shorts behind a chop are found in 60-75 % of cases (README, sensitivity
    table: chopped test shots against a full reference), so this was a known shortfall until the model
    of 64000 pairs found all three; a retrained model that misses one has lost ground here."""
    for seed in (0, 1, 2):
        v, _ = verdict(fault="turn_to_turn", chop_test_s=3e-6, seed=seed)
        assert v.fault_indicated, (seed, v.probabilities)


def test_polarity_mirror_gives_the_same_verdict():
    for kw in ({}, {"fault": "turn_to_turn"}, {"fault": "to_ground"}):
        c = case(**kw)
        a = compare(c.reference, c.test, model=default_model())
        b = compare(mirrored(c.reference), mirrored(c.test), model=default_model())
        # the features are the same to the last bit (every metric takes magnitudes or per-unit values of
        # records normalised by their own signed test voltage), and so is everything the model makes of them
        assert (a.fault_indicated, a.event) == (b.fault_indicated, b.event)
        assert a.probabilities == b.probabilities, (kw, a.probabilities, b.probabilities)
        assert (a.fault_time_s, a.location) == (b.fault_time_s, b.location), kw


def test_positive_polarity_simulation_gives_the_same_verdict():
    """The same winding simulated and recorded in positive polarity (its own noise realisation): the
    same indication, and the same event where the classifier is decisive (see the sample-rate test)."""
    for kw in ({}, {"fault": "turn_to_turn"}, {"fault": "turn_to_turn", "section": 8, "turns": 3}):
        a, _ = verdict(**kw)
        b, _ = verdict(polarity=1, **kw)
        assert a.fault_indicated == b.fault_indicated, (kw, a.probabilities, b.probabilities)
        top = sorted(a.probabilities.values(), reverse=True)
        if top[0] - top[1] > 0.3:
            assert a.event == b.event, (kw, a.probabilities, b.probabilities)


@pytest.mark.parametrize("which", ["test_recorder", "reference_recorder"])
@pytest.mark.parametrize("rate_Hz", [50e6, 125e6, 250e6])
def test_verdict_does_not_depend_on_either_records_sample_rate(rate_Hz, which):
    """The same shots recorded at 50-250 MS/s: the same indication, and the same event wherever the
    classifier is decisive. The 5-turn short at mid-winding sits between turn-to-turn and discharge for
    every model trained so far (0.5-0.8 turn-to-turn), so there the event may change with the rate."""
    for kw in ({}, {"fault": "turn_to_turn"}, {"fault": "to_ground"}):
        a, _ = verdict(**kw)
        b, _ = verdict(**{which: {"sample_rate_Hz": rate_Hz}}, **kw)
        assert a.fault_indicated == b.fault_indicated, (kw, a.probabilities, b.probabilities)
        top = sorted(a.probabilities.values(), reverse=True)
        if top[0] - top[1] > 0.3:
            assert a.event == b.event, (kw, a.probabilities, b.probabilities)


def test_verdict_does_not_depend_on_trigger_offset_or_units(tmp_path):
    c = case(fault="turn_to_turn")
    base = compare(c.reference, c.test, model=default_model())
    shifted = c.test.replace(start_time_s=c.test.start_time_s + 37.3e-6, step="shift(37.3e-6)")
    v = compare(c.reference, shifted, model=default_model())
    assert (v.fault_indicated, v.event) == (base.fault_indicated, base.event)
    assert 1e6 * v.fault_time_s == pytest.approx(1e6 * base.fault_time_s + 37.3, abs=0.05)
    # the same records written in V and A instead of kV: units change nothing
    for rec, name in ((c.reference, "ref"), (c.test, "test")):
        chans = tuple(dataclass_replace_unit(ch) for ch in rec.channels)
        write(rec.replace(channels=chans), tmp_path / f"{name}_V.csv")
    from detector.formats import read

    w = compare(read(tmp_path / "ref_V.csv"), read(tmp_path / "test_V.csv"), model=default_model())
    assert (w.fault_indicated, w.event) == (base.fault_indicated, base.event)
    for k, p in base.probabilities.items():  # written as text and read back: the numbers, not just the verdict
        assert w.probabilities[k] == pytest.approx(p, abs=1e-6), k
    assert 1e6 * w.fault_time_s == pytest.approx(1e6 * base.fault_time_s, abs=0.01)


def dataclass_replace_unit(ch):
    import dataclasses

    return dataclasses.replace(ch, source_unit={"voltage": "V", "current": "mA"}[ch.quantity])


def test_turn_to_turn_changes_the_wave_shape_lastingly():
    """An arc between turns changes the network: the compensated current difference is largest at the
    coarse averaging lengths (a lasting change of the wave shape) and the low-band transfer function
    departs from the reference, both well beyond a healthy pair."""
    healthy = extract(case().reference, case().test).as_dict()
    fault = extract(case(fault="turn_to_turn").reference, case(fault="turn_to_turn").test).as_dict()
    assert fault["cd_scale1024_z"] > 10 * max(healthy["cd_scale1024_z"], 1.0)
    assert fault["cd_scale1024_z"] > fault["cd_scale1_z"]
    assert fault["tf_low_rms_dB"] > 3 * healthy["tf_low_rms_dB"]


def test_cli_end_to_end_on_comtrade_and_csv(tmp_path, capsys):
    for kw, expected in (({}, 0), ({"fault": "turn_to_turn"}, 1)):
        c = case(**kw)
        for suffix, opts in ((".cfg", {"data_format": "BINARY"}), (".csv", {})):
            r, t = tmp_path / f"r{expected}{suffix}", tmp_path / f"t{expected}{suffix}"
            write(c.reference, r, **opts)
            write(c.test, t, **opts)
            code = main(["compare", str(r), str(t), "--json"])
            d = json.loads(capsys.readouterr().out)
            assert code == expected
            assert set(d) >= {"fault_indicated", "event", "probabilities", "fault_time_us", "location", "metrics",
                              "exceeded", "waveshape", "warnings", "model"}
            assert d["fault_indicated"] is bool(expected)
    assert main(["compare", str(tmp_path / "r0.csv"), str(tmp_path / "missing.csv")]) == 2


def _with(record, *, voltage=None, current=None, dt=None):
    new = {"voltage": voltage, "current": current}
    chans = tuple(c if new[c.quantity] is None else dataclasses.replace(c, samples=new[c.quantity])
                  for c in record.channels)
    return dataclasses.replace(record, channels=chans, sample_interval_s=dt or record.sample_interval_s)


@pytest.mark.parametrize("what, match", [
    ("flat voltage", r"t\.csv: voltage: no impulse found"),
    ("noise only", r"t\.csv: voltage: no impulse found"),
    ("dead current", r"t\.csv: .*the current is constant at 0 A: no neutral current was recorded"),
    ("time in us labelled s", r"t\.csv: sample rate: 100 Hz .* is outside the 5 MS/s to 20 GS/s"),
    ("1 MS/s", r"t\.csv: sample rate: 1e\+06 Hz \(1 MS/s\) is outside"),
    ("picosecond grid", r"t\.csv: sample rate: 1e\+12 Hz .* is outside"),
    ("9 us long", r"t\.csv: time: the record spans 8\.99 us \(900 samples\); a comparison needs at least 10 us"),
    ("unit error", r"t\.csv: .*peak magnitude .* V is beyond any impulse test"),
    # kilovolts in a column labelled V: the per-unit current a thousand times larger read as a fault
    ("kV read as V", r"t\.csv: voltage: the test voltage value is .* 0\.00167 times the reference's \(.*r\.csv\); "
                     r".*not comparable as given"),
    # milliamperes in a column labelled A: no fault raises the per-unit neutral current twentyfold (the
    # held-out pairs reach 2.6); it was a confident 'to ground' verdict
    ("mA read as A", r"t\.csv: current: the test record's neutral current, scaled to the reference's level, "
                     r"peaks 1000 times as high .*r\.csv.*shunt ratio"),
    ("the reference given twice", r"t\.csv: samples: the reference and the test record hold the same samples "
                                  r"\(.*r\.csv and .*t\.csv\): one shot was given twice"),
])
def test_records_no_comparison_can_use_exit_2_naming_file_and_field(tmp_path, capsys, what, match):
    """A voltage without an impulse, a dead current channel, a sample rate no impulse recorder has, a
    record too short to hold an impulse or values beyond any impulse test used to give a verdict all the
    same (a fault, or none) or a message without the file; they are input errors now. So are a voltage
    channel in the wrong unit (values in kV under a V header: its test voltage value a thousandth of the
    reference's) and the same shot given as both records."""
    c = case()
    test = c.test
    rng = np.random.default_rng(0)
    n = test.n_samples
    if what == "flat voltage":
        test = _with(test, voltage=rng.normal(0, 300.0, n))
    elif what == "noise only":
        test = _with(test, voltage=rng.normal(0, 1e5, n), current=rng.normal(0, 1.0, n))
    elif what == "dead current":
        test = _with(test, current=np.zeros(n))
    elif what == "time in us labelled s":
        test = _with(test, dt=test.sample_interval_s * 1e6)
    elif what == "1 MS/s":
        test = dataclasses.replace(test, channels=tuple(
            dataclasses.replace(ch, samples=ch.samples[::100]) for ch in test.channels),
            sample_interval_s=test.sample_interval_s * 100)
    elif what == "9 us long":
        test = dataclasses.replace(test, channels=tuple(
            dataclasses.replace(ch, samples=ch.samples[1000:1900]) for ch in test.channels))
    elif what == "unit error":
        test = _with(test, voltage=test.voltage.samples * 1e6)
    elif what == "kV read as V":
        test = _with(test, voltage=test.voltage.samples * 1e-3)
    elif what == "mA read as A":
        test = _with(test, current=test.current.samples * 1e3)
    elif what == "the reference given twice":
        test = c.reference
    else:
        test = _with(test, dt=1e-12)
    r, t = tmp_path / "r.csv", tmp_path / "t.csv"
    write(c.reference, r)
    write(test, t)
    assert main(["compare", str(r), str(t), "--json"]) == 2
    err = capsys.readouterr().err
    assert re.search(match, err), err
    assert "Traceback" not in err
    # the same record as the reference is refused alike
    assert main(["compare", str(t), str(r), "--json"]) == 2


def test_wave_shape_warnings_name_their_record():
    """The reduced-level reference spans fewer codes of the same recorder range (60 % of 1/1.3 of the
    range: log2(0.6 * 4096 / 2.6) = 9.9 bits), the test shot more: the warning must say which record it
    concerns (it used to read the same for either, and merged when both had it)."""
    v, _ = verdict()
    bits = [w for w in v.warnings if "fewer than 10 bits" in w]
    assert bits and all(w.startswith("reference record: ") for w in bits), v.warnings


def test_files_in_the_wrong_order_by_their_metadata_exit_2(tmp_path, capsys):
    """A full-level shot given as the reference and a reduced-level one as the test used to give a verdict
    (a discharge, on the demo's files) with a warning only; where the records declare their kind and
    level, the swap is an input error naming the file and the field. Two full-level shots may still be
    compared, and records that declare nothing are judged by their test voltages alone."""
    from detector.compare import check_roles

    c = case()
    ref = dataclasses.replace(c.reference, meta={**c.reference.meta, "shot_kind": "reduced", "level_percent": 60})
    test = dataclasses.replace(c.test, meta={**c.test.meta, "shot_kind": "full", "level_percent": 100})
    r, t = tmp_path / "reduced.csv", tmp_path / "full.csv"
    write(ref, r)
    write(test, t)
    assert main(["compare", str(t), str(r)]) == 2
    err = capsys.readouterr().err
    assert re.search(r"full\.csv: meta\.shot_kind: the reference \(.*full\.csv\) is declared a full-level shot "
                     r"\(meta\.shot_kind 'full', meta\.level_percent 100\) and the test record \(.*reduced\.csv\) a "
                     r"reduced-level one .*wrong order", err), err
    assert "Traceback" not in err
    assert main(["compare", str(r), str(t)]) in (0, 1)  # the right order compares
    capsys.readouterr()
    # the level alone declares it too; 80-100 % may be either kind of shot, and two full shots compare
    by_level = dataclasses.replace(test, meta={"level_percent": 100})
    with pytest.raises(RecordError, match="meta.level_percent"):
        check_roles(by_level, dataclasses.replace(ref, meta={"level_percent": 62.5}))
    check_roles(by_level, dataclasses.replace(ref, meta={"level_percent": 90}))
    check_roles(test, dataclasses.replace(ref, meta={"shot_kind": "full", "level_percent": 100}))
    check_roles(dataclasses.replace(test, meta={}), ref)


def test_a_record_outside_the_validated_sample_rates_is_compared_with_a_warning():
    """25 MS/s lies within what a comparison can use (5 MS/s up) but below the 50-250 MS/s the verdicts
    are validated for: the verdict comes with a warning naming the record and its rate; at the validated
    rates there is none."""
    v, _ = verdict(test_recorder={"sample_rate_Hz": 25e6})
    told = [w for w in v.warnings if "validated for" in w]
    assert len(told) == 1 and told[0].startswith("the test record is sampled at 25 MS/s, outside the 50-250 MS/s")
    for kw in ({}, {"reference_recorder": {"sample_rate_Hz": 250e6}}, {"test_recorder": {"sample_rate_Hz": 50e6}}):
        v, _ = verdict(**kw)
        assert not any("validated for" in w for w in v.warnings), (kw, v.warnings)


def test_levels_out_of_order_or_in_other_units_give_a_warning():
    from detector.compare import level_warnings

    # a reduced-level reference of 50-75 % of the test level, or a full-level one within the generator's
    # scatter, and a chopped test shot up to about twice the reference (common practice): no warning
    for r, t in ((330e3, 550e3), (-412e3, -550e3), (550e3, 530e3), (300e3, 660e3)):
        assert level_warnings(r, t) == []
    assert "right order" in level_warnings(550e3, 330e3)[0]  # the files swapped
    assert "units" in level_warnings(330e3, 330.0)[0]  # kilovolts written as volts
    assert "units" in level_warnings(330.0, 550e3)[0]
    c = case()
    assert not any("test voltage" in w for w in compare(c.reference, c.test).warnings)
    # records that do not declare their kind and level: a warning (declared ones are refused, see
    # test_files_in_the_wrong_order_by_their_metadata_exit_2)
    swapped = compare(dataclasses.replace(c.test, meta={}), dataclasses.replace(c.reference, meta={}))
    assert any("right order" in w for w in swapped.warnings)


def test_wave_shapes_beyond_the_tolerances_give_a_warning():
    """IEC 60060-1, 7.1 (lightning impulse: T1 1.2 us +-30 %, T2 50 us +-20 %, overshoot at most 10 %,
    from memory): a record outside them, or two records whose T1 or T2 differ by more than those
    widths, is named in the warnings; a pair of the same generator setting is not."""
    from detector.features import shape_warnings

    c = case()
    a = extract(c.reference, c.test)
    assert shape_warnings(a.reference_shape, a.test_shape) == []
    assert not any("tolerances" in w or "differ by more" in w for w in a.warnings)
    slower = dataclasses.replace(a.test_shape, front_time_s=1.45 * a.reference_shape.front_time_s)
    w = shape_warnings(a.reference_shape, slower)
    assert len(w) == 1 and "front times T1 of the two records differ by more than 30 %" in w[0]
    longer = dataclasses.replace(a.test_shape, time_to_half_s=1.25 * a.reference_shape.time_to_half_s)
    assert "times to half-value T2" in shape_warnings(a.reference_shape, longer)[0]
    bad = dataclasses.replace(a.test_shape, within_tolerance=False, tolerance=tuple(
        dataclasses.replace(t, passed=False, value=3e-6) if t.name == "front_time_us" else t
        for t in a.test_shape.tolerance))
    w = shape_warnings(a.reference_shape, bad)
    assert w == ["test record: wave shape outside the IEC 60060-1 tolerances: front_time_us 3 (limits 0.84..1.56)"]
    # the channels of the test file swapped: its 'voltage' is the current's wave
    swapped = dataclasses.replace(c.test, channels=tuple(
        dataclasses.replace(ch, quantity="current" if ch.quantity == "voltage" else "voltage",
                            samples=ch.samples * (1e5 if ch.quantity == "current" else 1e-5))
        for ch in c.test.channels))
    warnings = extract(c.reference, swapped).warnings
    assert any("front times T1 of the two records differ" in w for w in warnings), warnings


def test_report_from_the_cli(tmp_path, capsys):
    c = case(fault="turn_to_turn")
    r, t = tmp_path / "r.cfg", tmp_path / "t.cfg"
    write(c.reference, r)
    write(c.test, t)
    assert main(["compare", str(r), str(t), "--report", str(tmp_path / "x.html")]) == 1
    html = (tmp_path / "x.html").read_text(encoding="utf-8")
    assert "turn" in html and "<img" in html


def test_a_test_current_a_thousand_times_too_small_is_warned_about():
    """Amperes under a mA header in the test record: the per-unit current peaks at a thousandth of the
    reference's. A breakdown to ground near the line end can take the neutral current away (held-out
    pairs down to 0.005), so it is not refused, but the verdict says to check the units."""
    c = case()
    v = compare(c.reference, _with(c.test, current=c.test.current.samples * 1e-3))
    assert any("peaks at only 0.001 of the reference's" in w and "shunt ratio" in w for w in v.warnings), v.warnings
    assert not any("shunt ratio" in w for w in compare(c.reference, c.test).warnings)

