"""The flat tree walk for small batches gives scikit-learn's predictions to the last bit.

The reference is scikit-learn's own HistGradientBoosting prediction (the library the models are made
with): each estimator is scored before and after :func:`detector._fastpredict.install`.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor

from detector import _fastpredict
from detector._validation import ShotcheckError
from detector.model import FaultClassifier, LocationRegressor, ShotModel, load_model, save_model


def _data(n: int = 600, n_features: int = 7, seed: int = 0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, n_features))
    X[rng.random(X.shape) < 0.08] = np.nan  # missing values take the learned side of each split
    score = np.nan_to_num(X[:, 0]) + 0.5 * np.nan_to_num(X[:, 1]) ** 2 - np.isnan(X[:, 2])
    return X, score


def _rows(X):
    return [X[i:i + 1] for i in range(X.shape[0])] + [X[:5], X[:_fastpredict.SMALL_BATCH]]


@pytest.mark.parametrize("n_classes", [2, 4])
def test_classifier_probabilities_bit_identical(n_classes):
    X, score = _data()
    y = np.digitize(score, np.quantile(score, np.linspace(0, 1, n_classes + 1)[1:-1]))
    est = HistGradientBoostingClassifier(max_iter=40, random_state=0).fit(X, y)
    Xq, _ = _data(80, seed=1)
    before = [est.predict_proba(x) for x in _rows(Xq)]
    assert _fastpredict.install(est) == 1
    after = [est.predict_proba(x) for x in _rows(Xq)]
    for a, b in zip(before, after, strict=True):
        assert np.array_equal(a, b)


def test_regressor_and_large_batch_bit_identical():
    X, score = _data()
    est = HistGradientBoostingRegressor(loss="absolute_error", max_iter=60, random_state=0).fit(X, score)
    Xq, _ = _data(300, seed=2)
    before_rows = [est.predict(x) for x in _rows(Xq)]
    before_all = est.predict(Xq)  # larger than SMALL_BATCH: scikit-learn's own parallel code
    _fastpredict.install(est)
    assert all(np.array_equal(a, est.predict(x)) for a, x in zip(before_rows, _rows(Xq), strict=True))
    assert np.array_equal(before_all, est.predict(Xq))


def test_shot_model_install_and_save_round_trip(tmp_path):
    X, score = _data(900)
    y = np.where(score > 1.0, "turn_to_turn", np.where(score < -0.5, "to_ground", "none"))
    clf = FaultClassifier(max_iter=30, fault_detector=True, detector_iterations=30,
                          detector_min_pairs=50).fit(X, y)
    loc = LocationRegressor(max_iter=30).fit(X, np.clip(0.5 + 0.2 * np.nan_to_num(X[:, 0]), 0, 1))
    model = ShotModel(classifier=clf, locator=loc, feature_names=[f"f{i}" for i in range(X.shape[1])],
                      schema_version="test")
    Xq, _ = _data(30, seed=3)
    p0 = np.vstack([clf.predict_proba(x) for x in _rows(Xq)[:30]])
    n = clf.n_members + 2  # the booster of each calibrated member, the fault detector and the locator's
    assert _fastpredict.install(model) == n
    assert _fastpredict.install(model) == n  # idempotent
    p1 = np.vstack([clf.predict_proba(x) for x in _rows(Xq)[:30]])
    assert np.array_equal(p0, p1)
    # a model in use can be saved: the file holds scikit-learn's estimators as they are
    save_model(model, tmp_path / "m.skops")
    assert all("_predict_iterations" in e.__dict__ for e in _fastpredict.estimators_of(model))
    again = load_model(tmp_path / "m.skops")
    assert not any("_predict_iterations" in e.__dict__ for e in _fastpredict.estimators_of(again))
    assert np.array_equal(np.vstack([again.classifier.predict_proba(x) for x in _rows(Xq)[:30]]), p0)


@pytest.mark.parametrize("detector", [False, True])
@pytest.mark.parametrize("calibration", ["isotonic", "sigmoid"])
@pytest.mark.parametrize("n_classes", [2, 4])
def test_score_equals_scikit_learn(calibration, n_classes, detector):
    """score() leaves out scikit-learn's checks and calibrates itself: same numbers, to the last bit
    (also with the fault-against-none detector, whose P(none) replaces the classes')."""
    from detector.model import InstantRegressor

    X, score_ = _data(1200)
    names = np.array(["none", "turn_to_turn", "to_ground", "discharge_only"])[:n_classes]
    y = names[np.digitize(score_, np.quantile(score_, np.linspace(0, 1, n_classes + 1)[1:-1]))]
    clf = FaultClassifier(max_iter=30, calibration=calibration, fault_detector=detector,
                          detector_iterations=40, detector_min_pairs=50).fit(X, y)
    assert (clf.detector_ is not None) == detector
    loc = LocationRegressor(max_iter=30).fit(X, np.clip(0.5 + 0.3 * np.nan_to_num(X[:, 0]), 0, 1))
    timer = InstantRegressor(max_iter=30).fit(X, 3.0 + np.nan_to_num(X[:, 1]))
    model = ShotModel(classifier=clf, locator=loc, timer=timer, feature_names=[f"f{i}" for i in range(7)],
                      schema_version="test")
    Xq, _ = _data(100, seed=5)
    for x in [Xq[i:i + 1] for i in range(60)] + [Xq[:7], Xq]:  # the last: larger than SMALL_BATCH
        p, pos, t = _fastpredict.score(model, x)
        assert np.array_equal(p, clf.predict_proba(x))
        assert np.array_equal(pos, loc.predict(x))
        assert np.array_equal(t, timer.predict(x))


def test_score_of_a_choosing_timer_equals_its_predict():
    """A timer that picks among onset columns: the fast path gives the instants of its predict()."""
    from detector.model import InstantRegressor

    X, _ = _data(900)
    rng = np.random.default_rng(3)
    truth = rng.uniform(0.5, 20.0, X.shape[0])
    # columns 0-2 are onsets: one of them right, which one told by column 3; NaN where unseen
    which = np.digitize(np.nan_to_num(X[:, 3]), [-0.4, 0.4])
    X[:, :3] = truth[:, None] + rng.uniform(1.0, 3.0, (X.shape[0], 3))
    X[np.arange(X.shape[0]), which] = truth
    X[:, 2] = np.where(rng.random(X.shape[0]) < 0.2, np.nan, X[:, 2])
    timer = InstantRegressor(max_iter=30, candidate_columns=(0, 1, 2)).fit(X, truth)
    assert timer.chooser_ is not None
    clf = FaultClassifier(max_iter=10).fit(X, np.where(truth > 10, "turn_to_turn", "none"))
    model = ShotModel(classifier=clf, locator=None, timer=timer, feature_names=[f"f{i}" for i in range(7)],
                      schema_version="test")
    # and a locator fitted on the timing inputs (the instant, each onset's delay after it)
    loc = LocationRegressor(max_iter=30).fit(timer.timing_inputs(X, timer.predict(X)), np.clip(truth / 20, 0, 1))
    model.locator = loc
    chosen = 0
    for x in [X[i:i + 1] for i in range(80)] + [X[:7], X]:
        _, pos, t = _fastpredict.score(model, x)
        assert np.array_equal(t, timer.predict(x))
        assert np.array_equal(pos, loc.predict(timer.timing_inputs(x, timer.predict(x))))
        chosen += int(np.sum(np.isin(t, x[:, :3])))
    assert chosen > 0.5 * (80 + 7 + X.shape[0])  # mostly a column's own value, not the regression
    # a locator that also takes inputs measured at the instant gets them from the callable, at the
    # timer's instants
    def at(inst):
        return np.column_stack([np.sin(inst), np.cos(inst)])

    loc2 = LocationRegressor(max_iter=30).fit(
        np.hstack([timer.timing_inputs(X, timer.predict(X)), at(timer.predict(X))]), np.clip(truth / 20, 0, 1))
    model.locator = loc2
    for x in [X[i:i + 1] for i in range(20)] + [X]:
        _, pos, t = _fastpredict.score(model, x, at)
        assert np.array_equal(pos, loc2.predict(np.hstack([timer.timing_inputs(x, t), at(t)])))
    with pytest.raises(ShotcheckError, match="inputs at the instant"):
        _fastpredict.score(model, X[:1])


def test_score_without_calibration_and_regressors():
    """A classifier fitted on too few samples keeps the raw booster (no calibration): still the same."""
    X, score_ = _data(40)
    y = np.where(score_ > 0.3, "turn_to_turn", "none")
    clf = FaultClassifier(max_iter=20).fit(X, y)
    assert isinstance(clf.calibrated_, HistGradientBoostingClassifier)
    model = ShotModel(classifier=clf, locator=None, feature_names=[f"f{i}" for i in range(7)],
                      schema_version="test")
    Xq, _ = _data(20, seed=6)
    for i in range(20):
        p, pos, t = _fastpredict.score(model, Xq[i:i + 1])
        assert np.array_equal(p, clf.predict_proba(Xq[i:i + 1])) and pos is None and t is None


def test_a_locator_per_fault_class_scores_each_row_with_its_classs_booster(tmp_path):
    """A locator fitted with fault classes keeps a booster per class; the fast path asks each row's
    booster of the classifier's most likely fault class, bit for bit as its predict() with those
    classes, and a saved and loaded model gives the same."""
    X, score_ = _data(1500)
    names = np.array(["none", "turn_to_turn", "to_ground", "discharge_only"])
    y = names[np.digitize(score_, np.quantile(score_, [0.25, 0.5, 0.75]))]
    clf = FaultClassifier(max_iter=30).fit(X, y)
    fault = y != "none"
    pos = np.clip(0.5 + 0.2 * np.nan_to_num(X[:, 3]) * np.where(y == "to_ground", -1.0, 1.0), 0, 1)
    loc = LocationRegressor(max_iter=30).fit(X[fault], pos[fault], fault_class=y[fault])
    assert sorted(loc.models_) == ["discharge_only", "to_ground", "turn_to_turn"] and loc.model_ is None
    model = ShotModel(classifier=clf, locator=loc, feature_names=[f"f{i}" for i in range(7)],
                      schema_version="test")
    Xq, _ = _data(100, seed=5)
    for x in [Xq[i:i + 1] for i in range(40)] + [Xq[:7], Xq]:  # the last: larger than SMALL_BATCH
        p, got, _ = _fastpredict.score(model, x)
        assert np.array_equal(got, loc.predict(x, _fastpredict.fault_classes(p, clf.classes_)))
    path = tmp_path / "m.skops"
    save_model(model, path)
    loaded = load_model(path, expected_schema="test")
    assert sorted(loaded.locator.models_) == sorted(loc.models_)
    assert np.array_equal(_fastpredict.score(loaded, Xq)[1], _fastpredict.score(model, Xq)[1])


def test_fault_classes_leave_none_aside():
    proba = np.array([[0.9, 0.02, 0.05, 0.03], [0.1, 0.5, 0.1, 0.3]])
    classes = ["none", "turn_to_turn", "to_ground", "discharge_only"]
    assert list(_fastpredict.fault_classes(proba, classes)) == ["to_ground", "turn_to_turn"]
    # in another column order too
    assert list(_fastpredict.fault_classes(proba[:, ::-1], classes[::-1])) == ["to_ground", "turn_to_turn"]
