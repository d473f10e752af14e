"""Feature vector schema and threshold calibration."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from detector._validation import ShotcheckError
from detector.data import example_record
from detector.features import FEATURE_NAMES, SCHEMA_VERSION, extract
from detector.scoring import THRESHOLDED, calibrate_thresholds, exceeded, false_alarm_rate


def test_feature_names_are_unique_and_match_the_vector():
    assert len(set(FEATURE_NAMES)) == len(FEATURE_NAMES)
    assert set(THRESHOLDED) <= set(FEATURE_NAMES)
    a = extract(example_record("full", seed=1), example_record("full", seed=2))
    assert a.features.shape == (len(FEATURE_NAMES),)
    assert SCHEMA_VERSION


def test_a_record_against_another_noise_realisation_of_itself_shows_nothing():
    a = extract(example_record("full", seed=1), example_record("full", seed=2))
    d = a.as_dict()
    # same wave, same network: only noise differs, so every scale of the compensated difference and
    # the time-domain deviations stay within a few noise standard deviations
    assert max(d[f"cd_scale{m}_z"] for m in (1, 4, 16, 64, 256, 1024)) < 6.0
    assert d["td_i_max_percent"] < 1.0


def test_chopped_example_against_full_example_is_compared_across_the_chop():
    a = extract(example_record("full", seed=1), example_record("chopped", seed=2))
    d = a.as_dict()
    assert d["td_test_collapse"] == 1.0 and d["test_declared_chopped"] == 1.0
    assert np.isfinite(d["cd_compared_span_us"]) and d["cd_compared_span_us"] > 20.0
    # a chopped wave declared as a reduced-level chopped wave is a declared chopped wave too
    chopped = example_record("chopped", seed=2)
    rc = chopped.replace(meta={**chopped.meta, "shot_kind": "reduced_chopped"})
    assert extract(example_record("full", seed=1), rc).as_dict()["test_declared_chopped"] == 1.0


@given(rate=st.sampled_from([0.002, 0.01, 0.05]), seed=st.integers(0, 10_000))
def test_calibrated_thresholds_keep_the_false_alarm_rate(rate, seed):
    rng = np.random.default_rng(seed)
    X = rng.lognormal(size=(2000, len(FEATURE_NAMES)))
    thr = calibrate_thresholds(X, false_alarm_rate=rate)
    assert set(thr) == set(THRESHOLDED)
    far = false_alarm_rate(X, thr)
    assert far <= rate
    if rate * X.shape[0] >= 10 * len(thr):  # resolvable: not needlessly loose
        assert far >= 0.5 * rate


def test_exceeded_lists_the_largest_ratio_first():
    x = np.zeros(len(FEATURE_NAMES))
    names = list(FEATURE_NAMES)
    x[names.index("td_i_max_sigma")] = 30.0
    x[names.index("tf_rms_dB")] = 4.0
    out = exceeded(x, {"td_i_max_sigma": 10.0, "tf_rms_dB": 2.0, "wv_fine_peak_sigma": 5.0})
    assert [e["metric"] for e in out] == ["td_i_max_sigma", "tf_rms_dB"]
    assert out[0]["ratio"] == pytest.approx(3.0)
    assert "noise" in out[0]["description"]


def test_calibration_input_errors():
    with pytest.raises(ShotcheckError, match="at least 10 benign pairs"):
        calibrate_thresholds(np.ones((3, len(FEATURE_NAMES))))
    with pytest.raises(ShotcheckError, match="shape"):
        calibrate_thresholds(np.ones((30, 3)))
    with pytest.raises(ShotcheckError, match="false_alarm_rate"):
        calibrate_thresholds(np.ones((30, len(FEATURE_NAMES))), false_alarm_rate=0.9)


def test_interference_tones_are_described_for_the_classifier():
    """A 300 kHz tone of 3 codes on both recorders, 3 us of pre-trigger: under one period of the tone
    fits in the pre-trigger, so its means (the baselines) are biased by it; the features say so."""
    from detection_cases import make_case

    rec = {"interference_amplitude_lsb": 3.0, "interference_frequency_Hz": 300e3, "pretrigger_s": 3e-6}
    c = make_case(test_recorder=rec, reference_recorder=rec)
    a = extract(c.reference, c.test)
    d = a.as_dict()
    pre_s = a.pair.pretrigger_samples * a.pair.sample_interval_s
    assert d["tone_count"] == 1.0
    assert d["tone_pretrigger_periods"] == pytest.approx(300e3 * pre_s, rel=0.02)
    assert d["tone_pretrigger_periods"] < 1.0
    assert d["tone_amplitude_sigma"] > 3.0
    # and the engineer is told, with what to do about it
    assert any(w.startswith("interference at") and "of a period in the" in w and "pre-trigger of several periods" in w
               for w in a.warnings), a.warnings
    clean = make_case()
    a = extract(clean.reference, clean.test)
    d = a.as_dict()
    assert d["tone_count"] == 0.0 and np.isnan(d["tone_pretrigger_periods"]) and d["tone_amplitude_sigma"] == 0.0
    assert not any("interference" in w for w in a.warnings)
