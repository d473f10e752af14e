"""Training and evaluation figures on a small feature matrix whose answers are known.

The rows are not simulated pairs: each class has its own distribution on a few feature columns, so
the counts that :func:`detector.training.evaluate` reports can be checked against a direct count of
the model's own decisions.
"""

from __future__ import annotations

import numpy as np
import pytest

from detector._validation import ShotcheckError
from detector.features import FEATURE_NAMES, SCHEMA_VERSION
from detector.model import ShotModel
from detector.scoring import DECISIVE
from detector.training import (
    COMPARISONS,
    QUALITY_TARGETS,
    LabelledFeatures,
    _decide,
    _predict,
    cross_fitted_decisions,
    evaluate,
    operating_point,
    report_text,
    train,
)
from detector.uncertainty import proportion_interval, target_status

KINDS = list(COMPARISONS)  # (reference_kind, test_kind)
EVENTS = ("none", "turn_to_turn", "to_ground", "discharge_only")


def _data(n_per_class: int, seed: int) -> LabelledFeatures:
    rng = np.random.default_rng(seed)
    rows, events, labels = [], [], []
    for k, ev in enumerate(EVENTS):
        x = rng.normal(0.0, 1.0, (n_per_class, len(FEATURE_NAMES)))
        x[:, k] += 3.5  # each class shifted on its own column: separable, not perfectly
        rows.append(x)
        events += [ev] * n_per_class
        for j in range(n_per_class):
            ref, test = KINDS[j % len(KINDS)]
            labels.append({"case_id": len(labels), "event": ev, "reference_kind": ref, "test_kind": test})
    X = np.vstack(rows)
    n = X.shape[0]
    ev = np.array(events)
    fault = ev != "none"
    position = np.where(fault, rng.uniform(0, 1, n), np.nan)
    front = np.full(n, 5.0)
    fault_time = np.where(fault, front + rng.uniform(1, 30, n), np.nan)
    groups = np.array([f"design-{i // 2}" for i in range(n)])
    effect = np.where(fault, np.where(np.arange(n) % 10 == 0, 0.4, 50.0), np.inf)  # a tenth invisible
    return LabelledFeatures(X, ev, position, fault_time, np.full(n, np.nan), groups, labels, [],
                            effect, front)


def _told_chopped(data: LabelledFeatures) -> np.ndarray:
    """Set the feature that tells a chopped test shot from each row's label; returns those rows."""
    from detector.model import CHOPPED_TEST_FEATURE

    chopped = np.array([lab["test_kind"] == "chopped" for lab in data.labels])
    data.X[:, FEATURE_NAMES.index(CHOPPED_TEST_FEATURE)] = chopped.astype(float)
    return chopped


@pytest.fixture(scope="module")
def trained():
    """A model trained on the toy rows, their test shots told chopped by their labels, with the rule for a
    threshold per kind of test shot lowered from 1000 benign pairs of each kind (at 1 %) to 20."""
    from detector import training

    data = _data(60, 0)
    chopped = _told_chopped(data)
    assert min(int((chopped & (data.event == "none")).sum()), int((~chopped & (data.event == "none")).sum())) >= 20
    saved = training.MIN_FALSE_ALARMS_PER_KIND
    training.MIN_FALSE_ALARMS_PER_KIND = 0.2
    try:
        model, cv = train(data, cv_folds=3, description="test rows")
    finally:
        training.MIN_FALSE_ALARMS_PER_KIND = saved
    return model, cv, data.X, chopped


def test_operating_point_keeps_the_false_alarm_share():
    p = np.linspace(0.01, 1.0, 100)  # cross-validated P(none) of 100 benign pairs
    thr = operating_point(p, 0.05)
    assert np.sum(p < thr) <= 5  # at most 5 % of the benign pairs fall below the threshold
    assert np.sum(p < thr) == 5  # and no lower threshold than needed
    assert operating_point(np.array([]), 0.01) == 0.5


def test_evaluation_counts_match_the_models_decisions(trained):
    model, *_ = trained
    data = _data(40, 1)
    _told_chopped(data)  # each kind at its threshold
    rep = evaluate(model, data)
    visible = data.effect_lsb >= rep["min_effect_lsb"]
    _, pred = _predict(model, data.X[visible])
    ev = data.event[visible]
    for c in EVENTS[1:]:
        assert rep["detection_rate"][c] == pytest.approx(np.mean(pred[ev == c] != "none"))
    assert rep["false_alarm_rate"] == pytest.approx(np.mean(pred[ev == "none"] != "none"))
    assert rep["all_faults_including_invisible"]["n_pairs"] == data.X.shape[0]
    assert rep["n_pairs"] == int(visible.sum())
    # the per-comparison figures partition the visible pairs, and each is a direct count
    byc = rep["by_comparison"]
    assert set(byc) == set(COMPARISONS.values())
    assert sum(e["n_pairs"] for e in byc.values()) == rep["n_pairs"]
    kind = np.array([COMPARISONS[(r["reference_kind"], r["test_kind"])] for r, v in zip(data.labels, visible,
                                                                                         strict=True) if v])
    for name, e in byc.items():
        sel = kind == name
        assert e["false_alarm_rate"] == pytest.approx(np.mean(pred[sel & (ev == "none")] != "none"))
        for c in EVENTS[1:]:
            assert e["detection_rate"][c] == pytest.approx(np.mean(pred[sel & (ev == c)] != "none"))
    # the invisible faults sit in the lowest effect bin
    assert rep["detection_by_effect_lsb"]["0-0.5"]["n"] == int(np.sum(data.effect_lsb < 0.5))
    # every rate carries its count and its exact interval, which holds the rate
    for c in EVENTS[1:]:
        k, n = int(np.sum(pred[ev == c] != "none")), int(np.sum(ev == c))
        assert rep["detection_counts"][c] == {"k": k, "n": n}
        lo, hi = rep["detection_rate_interval"][c]
        assert (lo, hi) == proportion_interval(k, n) and lo <= k / n <= hi
    k = int(np.sum(pred[ev == "none"] != "none"))
    assert rep["false_alarm_counts"] == {"k": k, "n": int(np.sum(ev == "none"))}
    assert tuple(rep["false_alarm_rate_interval"]) == proportion_interval(k, int(np.sum(ev == "none")))
    for e in byc.values():
        c = e["false_alarm_counts"]
        assert tuple(e["false_alarm_rate_interval"]) == proportion_interval(c["k"], c["n"])
    # each target read against its interval
    assert [t["figure"] for t in rep["targets"]] == [name for name, *_ in QUALITY_TARGETS]
    for t in rep["targets"]:
        assert t["status"] == ("not measured" if t["measured"] is None else "undecided" if t["interval"] is None
                               else target_status(*t["interval"], t["target"], t["better"]))
    assert rep["targets"][3]["interval"] == rep["false_alarm_rate_interval"]
    text = report_text(rep)
    assert "targets (met / not met" in text and "95 % confidence interval" in text
    assert f"{k} of {int(np.sum(ev == 'none'))}" in text
    assert "full reference, chopped test" in text and "confusion matrix" in text
    assert text.count("by class: turn_to_turn") == 2
    assert (rep["none_threshold"], rep["none_threshold_chopped"]) == (model.none_threshold, model.none_threshold_chopped)
    assert (f"fault indicated below P(none) {model.none_threshold:.4f} (full test shots), "
            f"{model.none_threshold_chopped:.4f} (chopped)\n") in text


def test_the_locator_takes_the_instant_and_each_onsets_delay(trained):
    from detector.features import INSTANT_CANDIDATE_FEATURES

    model, cv, *_ = trained
    assert model.timer is not None and model.timer.chooses
    n_cand = len(INSTANT_CANDIDATE_FEATURES) + 1  # and the agreeing sharp onset
    assert model.locator.n_features_in_ == len(FEATURE_NAMES) + 1 + n_cand
    assert cv["location_error_median"] is not None


def test_the_model_keeps_the_thresholds_of_all_out_of_fold_benign_pairs(trained):
    """``train`` sets a threshold for each kind of test shot (given enough benign pairs of each; the
    fixture lowers the rule), and the model, its card and the report carry the same values; each row is
    decided at its kind's threshold. (With too few, one threshold: :func:`kind_operating_points`.)"""
    model, cv, X, chopped = trained
    assert model.none_threshold_chopped is not None
    assert (model.none_threshold, model.none_threshold_chopped) == (cv["none_threshold"], cv["none_threshold_chopped"])
    assert (model.card["none_threshold"], model.card["none_threshold_chopped"]) == (
        model.none_threshold, model.none_threshold_chopped)
    thr = model.none_thresholds(X)
    np.testing.assert_array_equal(thr, np.where(chopped, model.none_threshold_chopped, model.none_threshold))
    assert "(full test shots)" in report_text(cv) and "(chopped)" in report_text(cv)
    # the classes are separable: far above chance. (Not a detection rate: each kind's threshold at 1 %
    # of some 30 benign pairs is their lowest out-of-fold P(none), which one outlier row of the random
    # features can put at the floor.)
    assert cv["roc_auc"] > 0.9


def test_training_takes_p_none_from_a_fault_detector_given_enough_pairs(trained):
    """With 1000 pairs of each kind or more the trained classifier decides fault against none with its
    own booster (FaultClassifier's ``fault_detector``); the fixture's 60 pairs per class are too few,
    and the model card says where P(none) comes from."""
    model, *_ = trained
    assert model.classifier.fault_detector and model.classifier.detector_min_pairs == 1000
    assert model.classifier.detector_ is None
    assert model.card["none_probability_from"] == "the four-class models"


def test_cross_validated_false_alarms_are_measured_not_met_by_construction():
    """Each fold is decided at the threshold the other folds' benign pairs give: a fold whose benign
    pairs look more like faults than the others' raises the reported rate above the target, which a
    threshold set on all rows could never do."""
    rng = np.random.default_rng(3)
    n = 3000
    folds_of = np.repeat(np.arange(3), n // 3)
    folds = [(np.flatnonzero(folds_of != k), np.flatnonzero(folds_of == k)) for k in range(3)]
    benign = np.ones(n, dtype=bool)
    p_none = rng.uniform(0.3, 1.0, n)
    p_none[folds_of == 2] = rng.uniform(0.0, 1.0, n // 3)  # the third fold's benign pairs are less sure
    proba = np.column_stack([p_none, (1 - p_none) / 3, (1 - p_none) / 3, (1 - p_none) / 3])
    same_rows = _decide(proba, operating_point(p_none, 0.01))
    assert np.mean(same_rows != "none") <= 0.01  # by construction
    pred = cross_fitted_decisions(proba, benign, folds, 0.01)
    for tr, te in folds:
        want = _decide(proba[te], operating_point(p_none[tr], 0.01))
        assert list(pred[te]) == list(want)
    assert np.mean(pred != "none") > 0.05  # the third fold: about a third of its pairs below 0.3


def test_figures_give_each_fault_classs_own_median_errors():
    """The per-class medians are taken over that class's detected faults only (the overall median is a
    mixture's): known errors per class, one undetected fault and one without a position left out."""
    from detector.training import _figures

    event = np.array(["none", "turn_to_turn", "turn_to_turn", "turn_to_turn", "to_ground", "to_ground",
                      "discharge_only", "discharge_only"])
    n = event.size
    position = np.where(event == "none", np.nan, 0.5)
    position[5] = np.nan  # a to-ground fault without a position: not located
    loc = np.array([np.nan, 0.6, 0.8, 0.5, 0.45, 0.0, 0.9, 0.5])  # errors 0.1, 0.3, 0, 0.05, -, 0.4, 0
    fault_time = np.where(event == "none", np.nan, 10.0)
    inst = np.array([np.nan, 10.2, 10.4, 13.0, 10.05, 10.1, 11.0, 10.0])
    pred = np.array(["none", "turn_to_turn", "turn_to_turn", "none", "to_ground", "to_ground",
                     "discharge_only", "discharge_only"], dtype=object)  # the third short missed
    proba = np.tile([0.25, 0.25, 0.25, 0.25], (n, 1))
    data = LabelledFeatures(np.zeros((n, len(FEATURE_NAMES))), event, position, fault_time, np.full(n, np.nan),
                            np.array([f"d{i}" for i in range(n)]), [], [], np.full(n, 50.0), np.zeros(n))
    rep = _figures(data, proba, pred, loc, inst)
    loc_by = rep["location_error_median_by_class"]
    assert loc_by["turn_to_turn"] == pytest.approx(0.2)  # 0.1 and 0.3; the missed short's 0 left out
    assert loc_by["to_ground"] == pytest.approx(0.05)  # the fault without a position left out
    assert loc_by["discharge_only"] == pytest.approx(0.2)
    inst_by = rep["fault_time_error_median_us_by_class"]
    assert inst_by["turn_to_turn"] == pytest.approx(0.3)
    assert inst_by["to_ground"] == pytest.approx(0.075)
    assert inst_by["discharge_only"] == pytest.approx(0.5)
    assert rep["location_error_median"] == pytest.approx(0.1)  # of 0.1, 0.3, 0.05, 0.4, 0.0
    # five errors are too few for a 95 % interval of their median; six detections, each of the right
    # class, give the exact interval [0.025^(1/6), 1] of the class accuracy
    assert rep["location_error_median_interval"] is None
    assert rep["class_accuracy_interval"] == [pytest.approx(0.025 ** (1 / 6)), 1.0]
    assert rep["detection_counts"]["turn_to_turn"] == {"k": 2, "n": 3}


def _two_kinds(n_per_kind: int, seed: int = 5):
    """Benign P(none) of full test shots (uniform 0.3..1) and chopped ones (uniform 0.1..1: less sure)."""
    rng = np.random.default_rng(seed)
    chopped = np.repeat([False, True], n_per_kind)
    p_none = np.where(chopped, rng.uniform(0.1, 1.0, 2 * n_per_kind), rng.uniform(0.3, 1.0, 2 * n_per_kind))
    return p_none, chopped


def test_each_kind_of_comparison_gets_its_own_threshold():
    """One threshold over a mixture gives the less sure kind (chopped test shots) more than the target
    and the other kind less; each kind's own threshold keeps the target for each."""
    from detector.training import kind_operating_points

    p_none, chopped = _two_kinds(3000)
    benign = np.ones(p_none.size, dtype=bool)
    pooled = operating_point(p_none, 0.01)
    assert np.mean(p_none[chopped] < pooled) > 0.015 and np.mean(p_none[~chopped] < pooled) < 0.005
    full, chop = kind_operating_points(p_none, benign, chopped, 0.01)
    assert chop is not None and chop < full  # the less sure kind is held to a lower P(none)
    for sel, thr in ((~chopped, full), (chopped, chop)):
        assert 0.009 <= np.mean(p_none[sel] < thr) <= 0.01
    # too few of a kind (fewer than 10 false alarms' worth: 1000 at 1 %): one threshold over all
    few = np.concatenate([np.flatnonzero(~chopped), np.flatnonzero(chopped)[:999]])
    assert kind_operating_points(p_none[few], benign[few], chopped[few], 0.01) == (
        operating_point(p_none[few], 0.01), None)
    # faults never set a threshold
    faults = np.concatenate([p_none, np.zeros(500)])
    flags = np.concatenate([benign, np.zeros(500, dtype=bool)])
    kinds = np.concatenate([chopped, np.ones(500, dtype=bool)])
    assert kind_operating_points(faults, flags, kinds, 0.01) == (full, chop)


def test_cross_validated_decisions_take_each_kinds_threshold_from_the_other_folds():
    from detector.training import kind_operating_points

    p_none, chopped = _two_kinds(4500, seed=6)
    n = p_none.size
    folds_of = np.arange(n) % 3
    folds = [(np.flatnonzero(folds_of != k), np.flatnonzero(folds_of == k)) for k in range(3)]
    benign = np.ones(n, dtype=bool)
    proba = np.column_stack([p_none, (1 - p_none) / 3, (1 - p_none) / 3, (1 - p_none) / 3])
    pred = cross_fitted_decisions(proba, benign, folds, 0.01, chopped=chopped)
    for tr, te in folds:
        full, chop = kind_operating_points(p_none[tr], benign[tr], chopped[tr], 0.01)
        thr = np.where(chopped[te], chop, full)
        assert list(pred[te]) == list(_decide(proba[te], thr))
    for sel in (chopped, ~chopped):  # measured, so near the target rather than at it by construction
        assert 0.005 < np.mean(pred[sel] != "none") < 0.015
    # without the kinds: one threshold, under which the chopped shots raise more false alarms
    one = cross_fitted_decisions(proba, benign, folds, 0.01)
    assert np.mean(one[chopped] != "none") > 0.015


def test_a_model_applies_the_chopped_threshold_where_the_test_voltage_collapsed():
    from detector.model import CHOPPED_TEST_FEATURE

    X = np.zeros((3, len(FEATURE_NAMES)))
    X[1, FEATURE_NAMES.index(CHOPPED_TEST_FEATURE)] = 1.0
    X[2, FEATURE_NAMES.index(CHOPPED_TEST_FEATURE)] = np.nan  # not measured: a full shot's threshold
    model = ShotModel(None, None, FEATURE_NAMES, SCHEMA_VERSION, none_threshold=0.2)
    np.testing.assert_array_equal(model.none_thresholds(X), [0.2, 0.2, 0.2])
    model.none_threshold_chopped = 0.1
    np.testing.assert_array_equal(model.none_thresholds(X), [0.2, 0.1, 0.2])


def test_cross_validated_decisions_take_the_decisive_features_at_each_folds_own_thresholds():
    """A pair whose decisive feature lies above every benign pair of the other folds is a fault whatever
    the classifier says; a benign pair's own value never sets its fold's threshold."""
    n = 300
    folds_of = np.repeat(np.arange(3), n // 3)
    folds = [(np.flatnonzero(folds_of != k), np.flatnonzero(folds_of == k)) for k in range(3)]
    benign = np.arange(n) % 2 == 0
    proba = np.tile([0.9, 0.05, 0.03, 0.02], (n, 1))  # the classifier sees nothing anywhere
    X = np.zeros((n, len(FEATURE_NAMES)))
    col = FEATURE_NAMES.index(next(iter(DECISIVE)))
    X[:, col] = 3.0
    X[1, col] = 50.0  # a fault late in the record (odd rows are faults)
    X[0, col] = 9.0  # a benign pair under the floor: no false alarm
    X[150, col] = 30.0  # a benign pair far out, in the second fold: it raises the other folds' thresholds
    pred = cross_fitted_decisions(proba, benign, folds, 0.01, X=X)
    assert pred[1] == "turn_to_turn"  # the classifier's most probable fault class
    assert pred[0] == "none"
    assert pred[150] == "turn_to_turn"  # its own value is not among those that set its threshold
    X[1, col] = 25.0  # under the 30 of the second fold's benign pair: the first fold keeps it benign
    assert cross_fitted_decisions(proba, benign, folds, 0.01, X=X)[1] == "none"
    assert (cross_fitted_decisions(proba, benign, folds, 0.01) == "none").all()


def test_too_small_a_training_set_is_an_input_error():
    # 5 pairs per class, of which the faults lose a tenth as invisible: fewer than 6 usable of a class
    with pytest.raises(ShotcheckError, match=r"too few usable pairs \(discharge_only \d, none 5, "
                                             r".*at least 6 of each class present"):
        train(_data(5, 0), cv_folds=3)
    # the message says how many faults were left out as too small to see, and by class (a family whose
    # discharges are all invisible gets the reason, not only 'make more pairs')
    with pytest.raises(ShotcheckError, match=r"faulted pairs were left out because their effect is under 1 "
                                             r"recorder code\(s\) \(.*\).*discharge_charge_C"):
        train(_data(5, 0), cv_folds=3)


def test_train_command_checks_its_options_before_the_work(tmp_path, capsys, monkeypatch):
    from detector import cli, training

    called = []
    monkeypatch.setattr(training, "extract_dataset", lambda *a, **k: called.append(1) or _data(10, 0))
    assert cli.main(["train", str(tmp_path), "--out", str(tmp_path / "no" / "m.skops")]) == 2
    assert "the folder" in capsys.readouterr().err and not called
    assert cli.main(["train", str(tmp_path), "--out", str(tmp_path / "m.skops"), "--false-alarm-rate", "5"]) == 2
    assert "--false-alarm-rate" in capsys.readouterr().err and not called
    # without cross-validation the threshold would stay at an untuned 0.5, the target ignored
    assert cli.main(["train", str(tmp_path), "--out", str(tmp_path / "m.skops"), "--cv-folds", "0"]) == 2
    assert "--cv-folds: must be at least 2" in capsys.readouterr().err and not called

    def refuse(*a, **k):
        raise ValueError("window shape cannot be larger than input array shape")

    # an estimator refusing the data becomes an input error naming the set and its class counts
    monkeypatch.setattr(training, "train", refuse)
    assert cli.main(["train", str(tmp_path), "--out", str(tmp_path / "m.skops")]) == 2
    err = capsys.readouterr().err
    assert "training failed on this data set (discharge_only 10, none 10" in err and "Traceback" not in err


def test_decide_uses_the_threshold_on_p_none():
    proba = np.array([[0.2, 0.5, 0.2, 0.1], [0.6, 0.1, 0.1, 0.2], [0.05, 0.1, 0.05, 0.8]])
    assert list(_decide(proba, 0.1)) == ["none", "none", "discharge_only"]
    assert list(_decide(proba, 0.5)) == ["turn_to_turn", "none", "discharge_only"]


def test_sensitivity_study_reports_each_kind_of_comparison(tmp_path):
    from detector.compare import default_model
    from detector.training import sensitivity_turns

    res = sensitivity_turns(default_model(), tmp_path, turns=(5,), cases=8, seed=3, workers=1)
    r = res["per_turns"]["5"]
    assert r["n"] == 8 and r["fraction_of_winding"] == 0.005
    by = r["by_comparison"]
    assert set(by) <= set(COMPARISONS.values())
    n_faults = sum(b["n_faults"] for b in by.values())
    assert n_faults == 4  # half of the pairs are faulted
    # the overall rate is the faults-weighted mean of the per-comparison rates
    assert r["detected"] == pytest.approx(sum(b["detected"] * b["n_faults"] for b in by.values()) / n_faults)
    # with its count and exact interval; four faults can never show 95 % (0.025^(1/4) = 0.40 at best)
    c = r["detected_counts"]
    assert c["n"] == 4 and c["k"] / 4 == pytest.approx(r["detected"])
    assert tuple(r["detected_interval"]) == proportion_interval(c["k"], 4)
    assert r["detected_interval"][0] <= 0.025 ** 0.25 + 1e-12 and res["smallest_shown_95"] is None


@pytest.mark.slow
def test_the_locator_takes_inputs_measured_at_the_instant_when_the_records_are_at_hand(tmp_path):
    """Trained on a data-set folder, the locator also takes the inputs at the timer's instant, measured on
    the records (cached in the folder); evaluation and comparison measure them the same way."""
    import dataclasses

    from detector._validation import ShotcheckError
    from detector.compare import compare
    from detector.features import INSTANT_INPUT_NAMES
    from detector.training import MIN_EFFECT_LSB, extract_dataset
    from synthetic.dataset import generate, load_dataset

    d = tmp_path / "set"
    generate(36, d, seed=5, workers=1, progress=False)
    data = extract_dataset(d, workers=1, progress=False)
    assert data.source == str(d)
    model, cv = train(data, cv_folds=3, description="36 synthetic pairs")
    assert model.locator_at_instant and tuple(model.instant_input_names) == INSTANT_INPUT_NAMES
    assert model.locator.n_features_in_ == model.timer.timing_inputs(data.X[:1], [0.0]).shape[1] + len(
        INSTANT_INPUT_NAMES)
    assert all(n in model.card["locator_inputs"] for n in INSTANT_INPUT_NAMES)
    # measured once for every located fault: at the final instants, the cross-validated ones, and the
    # instants of each fold's training rows (from timers that did not see them); kept for the next run
    (cache,) = d.glob("instant_inputs_v*.npz")
    values = np.load(cache)["values"]
    used = np.isfinite(data.X).any(axis=1) & (data.effect_lsb >= MIN_EFFECT_LSB)  # the rows train() keeps
    located = ((data.event != "none") & np.isfinite(data.position))[used]
    assert values.shape == (used.sum(), 2 + 3, len(INSTANT_INPUT_NAMES))
    assert np.isnan(values[~located]).all()
    assert np.isfinite(values[located][:, :2, 0]).mean() > 0.8  # an instant outside the record gives NaN
    nested = np.isfinite(values[located][:, 2:, 0]).sum(axis=1)
    assert (nested <= 2).all() and (nested == 2).mean() > 0.8, nested  # 2 of 3 folds train on a row
    # 9 benign pairs set no useful operating point: decide by the most probable class, so that faults
    # are indicated and located
    model.none_threshold = 0.5
    rep = evaluate(model, data)
    assert rep["location_error_median"] is not None
    # without the folder the inputs cannot be measured: a clear error, not a silent figure
    with pytest.raises(ShotcheckError, match="data-set folder"):
        evaluate(model, dataclasses.replace(data, source=None))
    # a comparison measures them on its own pair
    ref, test, lab = next((r, t, lab) for r, t, lab in load_dataset(d) if lab["event"] == "to_ground")
    v = compare(ref, test, model=model)
    assert v.fault_indicated and v.location is not None and 0.0 <= v.location <= 1.0


def test_location_medians_by_effect_and_by_position_take_their_bins_detected_faults():
    """The location error's medians by effect (codes) and by position (fifths of the winding) are those of
    each bin's detected faults with a position: known errors, an undetected fault left out, a fault at
    the neutral end (position 1) in the last fifth, and empty bins not listed."""
    from detector.training import _figures, report_text

    event = np.array(["none", "turn_to_turn", "turn_to_turn", "to_ground", "to_ground", "discharge_only",
                      "discharge_only"])
    n = event.size
    position = np.array([np.nan, 0.1, 0.15, 0.5, 1.0, 0.1, 0.9])
    loc = np.array([np.nan, 0.2, 0.35, 0.5, 0.8, 0.1, 0.3])  # errors -, 0.1, 0.2, 0, 0.2, 0, 0.6
    effect = np.array([np.inf, 3.0, 4.0, 500.0, 200.0, 2.0, 50.0])
    pred = np.array(["none", "turn_to_turn", "turn_to_turn", "to_ground", "to_ground", "none",
                     "discharge_only"], dtype=object)  # the first discharge missed
    data = LabelledFeatures(np.zeros((n, len(FEATURE_NAMES))), event, position, np.full(n, np.nan),
                            np.full(n, np.nan), np.array([f"d{i}" for i in range(n)]), [], [], effect, np.zeros(n))
    rep = _figures(data, np.tile([0.25] * 4, (n, 1)), pred, loc)
    by_eff = rep["location_error_median_by_effect_lsb"]
    assert list(by_eff) == ["1-5", "10-100", "100-inf"]
    assert by_eff["1-5"]["n"] == 2 and by_eff["1-5"]["median"] == pytest.approx(0.15)  # 0.1, 0.2
    assert by_eff["10-100"]["median"] == pytest.approx(0.6)
    assert by_eff["100-inf"]["n"] == 2 and by_eff["100-inf"]["median"] == pytest.approx(0.1)  # 0, 0.2
    by_pos = rep["location_error_median_by_position"]
    assert list(by_pos) == ["0-0.2", "0.4-0.6", "0.8-1"]
    assert by_pos["0-0.2"]["median"] == pytest.approx(0.15)
    assert by_pos["0.8-1"]["n"] == 2 and by_pos["0.8-1"]["median"] == pytest.approx(0.4)  # 0.2, 0.6
    text = report_text(rep)
    assert "by effect [codes]: 1-5 0.150 (2)" in text and "0.8-1 0.400 (2)" in text


def test_the_default_training_description_names_the_families(tmp_path):
    """A retrained model's card said only 'data set data/nv25'; it names what the set holds now."""
    import json

    from detector.cli import _data_description

    (tmp_path / "manifest.json").write_text(json.dumps({"n_cases": 1200, "seed": 7, "families": [
        {"name": "nv25_hv", "source": "nv25_hv.toml", "values": {}}]}))
    assert _data_description(str(tmp_path)) == f"1200 pairs of the family nv25_hv (seed 7), data set {tmp_path}"
    assert _data_description(str(tmp_path / "missing")) == f"data set {tmp_path / 'missing'}"


def test_the_evaluation_text_says_how_many_faults_it_left_out():
    """`evaluate` printed 'pairs evaluated: 152' of 200 without saying that 48 faults were too small to
    see and left out; the figure with them was only in the JSON."""
    from detector.training import report_text

    rep = {"n_pairs": 152, "min_effect_lsb": 1.0, "detection_rate": {"discharge_only": 0.5},
           "all_faults_including_invisible": {"n_pairs": 200, "detection_rate": {"discharge_only": 0.02}}}
    text = report_text(rep)
    assert ("left out: 48 faulted pairs whose effect is under 1 recorder code(s) (noise-free); detection with "
            "them: discharge_only 0.020") in text.splitlines()


def test_threshold_notes_say_when_the_benign_pairs_are_too_few():
    from detector.training import MIN_FALSE_ALARMS_PER_KIND, threshold_notes

    # 75 benign pairs cannot set a 1 % threshold on ten false alarms' worth; nor can either kind of test
    # shot get its own (a retrain for one design of a few hundred pairs met both without a word)
    data = _data(75, 0)
    chopped = _told_chopped(data)
    notes = threshold_notes(data, 0.01)
    assert len(notes) == 2
    assert notes[0].startswith("only 75 benign pairs") and "the lowest P(none)" in notes[0]
    assert f"make at least {int(MIN_FALSE_ALARMS_PER_KIND / 0.01)} benign pairs" in notes[0]
    n_c = int((chopped & (data.event == "none")).sum())
    assert f"this set has {75 - n_c} full and {n_c} chopped" in notes[1]
    # enough of both kinds: nothing to say
    big = _data(3000, 1)  # a third full test shots, two thirds chopped
    _told_chopped(big)
    assert threshold_notes(big, 0.01) == []


def test_a_data_set_of_which_no_pair_compares_says_why(tmp_path, monkeypatch):
    """Every pair failing to compare (records of a family too short to hold the impulse, say) used to
    surface later as a message about the locator's inputs; the first pair's reason is named now."""
    from detector import training
    from synthetic.dataset import generate

    generate(3, tmp_path / "d", seed=5, workers=1, progress=False)
    monkeypatch.setattr(training, "_one", lambda ref, test: (np.full(len(FEATURE_NAMES), np.nan), (np.nan, np.nan),
                                                             "time: the record spans 9.99 us"))
    with pytest.raises(ShotcheckError, match=r"d: no pair of the data set could be compared \(3 pairs\); the first, "
                                             r"case 0: time: the record spans 9\.99 us"):
        training.extract_dataset(tmp_path / "d", workers=1, progress=False, use_cache=False)


def test_roc_figure_marks_the_models_own_decisions(trained, tmp_path):
    """The curve sweeps one threshold on P(none); the model decides at a threshold per kind of test shot
    and by its decisive features, so its detection and false-alarm rates can lie off the curve: the
    figure marks them (a reader took the curve's 0.985 at zero false alarms for the model's)."""
    import matplotlib.image as mpimg

    from detector.training import plot_roc

    _, cv, *_ = trained
    op = cv["operating_point"]
    assert op["false_alarm_rate"] == pytest.approx(cv["false_alarm_rate"])
    n_det = sum(cv["detection_counts"][c]["k"] for c in EVENTS if c != "none")
    n_fault = sum(cv["detection_counts"][c]["n"] for c in EVENTS if c != "none")
    assert op["detection_rate"] == pytest.approx(n_det / n_fault)
    plot_roc(cv, tmp_path / "roc.png")
    img = mpimg.imread(tmp_path / "roc.png")[..., :3]
    vermillion = np.array([0xD5, 0x5E, 0x00]) / 255.0  # the marker (Okabe & Ito)
    assert (np.abs(img - vermillion).sum(axis=-1) < 0.05).sum() > 20
