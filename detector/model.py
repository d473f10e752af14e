"""Event classifier, location regressor and their model file.

Two scikit-learn estimators follow the estimator contract (keyword-only ``__init__`` that only stores,
fitted attributes ending in ``_``, ``fit`` returns ``self``):

- :class:`FaultClassifier` gives calibrated probabilities over the event classes
  ``none, turn_to_turn, to_ground, discharge_only``;
- :class:`LocationRegressor` gives the fault position along the winding, 0 at the line end and 1 at the
  neutral end.

:class:`ShotModel` bundles both with the threshold table, the feature names and the feature-schema
version, and a model card. It is saved with skops and loaded with an explicit list of trusted types:
a model file can never run code the way an unpickled file can.
"""

from __future__ import annotations

import copy
import dataclasses
import datetime as _dt
import inspect
import types
import zipfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.calibration import CalibratedClassifierCV
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.frozen import FrozenEstimator
from sklearn.model_selection import train_test_split
from sklearn.utils.multiclass import unique_labels
from sklearn.utils.validation import check_is_fitted, column_or_1d, validate_data

from . import _fastpredict
from ._stats import agreeing_onset
from ._validation import RecordError, ShotcheckError, check_option

__all__ = [
    "EVENT_CLASSES",
    "FaultClassifier",
    "InstantRegressor",
    "LocationRegressor",
    "ShotModel",
    "save_model",
    "load_model",
    "TRUSTED_TYPES",
    "with_detector",
]

#: Event classes in a fixed order (the classifier's probability columns follow it when all are seen).
EVENT_CLASSES = ("none", "turn_to_turn", "to_ground", "discharge_only")
#: How each event class is written for people (the CLI's text, the figures and the report alike).
EVENT_LABELS = {"none": "none", "turn_to_turn": "turn-to-turn", "to_ground": "to ground",
                "discharge_only": "discharge only"}

MODEL_FORMAT = "shotcheck-model"
MODEL_FORMAT_VERSION = 1


def _check_params(est: BaseEstimator, constraints: Mapping[str, tuple[type, float | None, float | None]]) -> None:
    """Check estimator parameters against ``{name: (type, low, high)}`` with sklearn-style messages."""
    for name, (typ, low, high) in constraints.items():
        value = getattr(est, name)
        if value is None and typ is not bool:
            continue
        ok = isinstance(value, typ) and not isinstance(value, bool) or (typ is bool and isinstance(value, bool))
        if ok and low is not None:
            ok = value >= low
        if ok and high is not None:
            ok = value <= high
        if not ok:
            rng = f" in [{low}, {high}]" if (low is not None or high is not None) else ""
            raise ShotcheckError(
                f"The {name!r} parameter of {type(est).__name__} must be a {typ.__name__}{rng}. Got {value!r} instead."
            )



def _fittable(X: np.ndarray) -> np.ndarray:
    """``X`` with every column that holds no finite value set to 0 (a copy only then).

    scikit-learn's histogram boosters refuse such a column ("window shape cannot be larger than input
    array shape"); in a small or one-sided set (a retraining family whose to-ground faults never hold a
    tone, say) a feature may be missing in every row of a class. A constant column is never split on,
    so the fit is the same as without it; where every column has a value, ``X`` is returned as it is
    (the bundled model's fit is unchanged).
    """
    empty = ~np.isfinite(X).any(axis=0)
    if not empty.any():
        return X
    out = np.array(X, dtype=np.float64, copy=True)
    out[:, empty] = 0.0
    return out

class FaultClassifier(ClassifierMixin, BaseEstimator):
    """Calibrated gradient-boosting classifier over the event classes.

    Parameters
    ----------
    max_iter : int, default=200
        Boosting iterations of each gradient-boosting model.
    learning_rate : float, default=0.08
        Shrinkage of each boosting step.
    max_leaf_nodes : int, default=31
        Leaves per tree.
    l2_regularization : float, default=1e-3
        L2 penalty on leaf values.
    calibration : {'isotonic', 'sigmoid'}, default='isotonic'
        Probability calibration method, fitted on a held-out share of the data.
    calibration_fraction : float, default=0.2
        Share of the training set held out (stratified) to calibrate the probabilities.
    random_state : int or None, default=0
        Seed of the boosting models (member ``k`` uses ``random_state + k``).
    n_members : int, default=5
        Calibrated models averaged, each with its own seed and its own split into fitting and calibration
        data. The decision threshold sits in the far tail of the benign pairs' P(none) (1 % false
        alarms), where one model's answer depends on its seed; the average is steadier (grouped
        cross-validation on the bundled training set: AUC 0.975 -> 0.982, turn-to-turn detection at 1 %
        false alarms 0.86 -> 0.89).
    fault_detector : bool, default=False
        Also fit a binary gradient-boosting detector of fault against none (when the training pairs hold
        both), on all of them, and take P(none) from it; the four-class models then only split the rest
        among the fault classes. The decision between fault and none is the one that matters most, and a
        booster trained for it alone, on all pairs (the members hold out a share for calibration and
        early stopping), ranks the pairs better (grouped cross-validation in DEVELOPERS.md).
    detector_iterations : int, default=300
        Boosting iterations of the detector. No early stopping: stopped where a held-out share's log loss
        stops improving (as the members are), it ranked the pairs in the far tail of P(none) no better
        than the members do.
    detector_min_pairs : int, default=1000
        Fewest benign pairs, and fewest faulted pairs, the detector is fitted on; below, P(none) is the
        members'. The detector is made for the far tail of the benign pairs (the 1 % false-alarm
        operating point); with a few hundred pairs that tail holds a handful, and 300 unstopped
        iterations learn their noise.

    Attributes
    ----------
    classes_ : ndarray of str
        Event classes seen in ``fit``.
    n_features_in_ : int
        Number of features seen in ``fit``.
    members_ : list of CalibratedClassifierCV (or HistGradientBoostingClassifier)
        The fitted, calibrated models (uncalibrated boosters if a class was too rare to hold some out).
    calibrated_ : CalibratedClassifierCV or HistGradientBoostingClassifier
        The first member (kept for code that expects one model).
    detector_ : HistGradientBoostingClassifier or None
        The fault-against-none detector (classes 0 none, 1 fault); None without ``fault_detector`` or
        with fewer than ``detector_min_pairs`` pairs of either kind.
    """

    _constraints = {
        "max_iter": (int, 1, None),
        "learning_rate": (float, 1e-6, 1.0),
        "max_leaf_nodes": (int, 2, None),
        "l2_regularization": (float, 0.0, None),
        "calibration_fraction": (float, 0.05, 0.5),
        "n_members": (int, 1, 50),
        "detector_iterations": (int, 1, None),
        "fault_detector": (bool, None, None),
        "detector_min_pairs": (int, 1, None),
    }

    def __init__(
        self,
        *,
        max_iter: int = 200,
        learning_rate: float = 0.08,
        max_leaf_nodes: int = 31,
        l2_regularization: float = 1e-3,
        calibration: str = "isotonic",
        calibration_fraction: float = 0.2,
        random_state: int | None = 0,
        n_members: int = 5,
        fault_detector: bool = False,
        detector_iterations: int = 300,
        detector_min_pairs: int = 1000,
    ):
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.l2_regularization = l2_regularization
        self.calibration = calibration
        self.calibration_fraction = calibration_fraction
        self.random_state = random_state
        self.n_members = n_members
        self.fault_detector = fault_detector
        self.detector_iterations = detector_iterations
        self.detector_min_pairs = detector_min_pairs

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> FaultClassifier:
        """Fit on a feature matrix and event labels.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
            Feature vectors (see :mod:`detector.features`).
        y : array-like of shape (n_samples,)
            Event class of each sample.
        sample_weight : array-like of shape (n_samples,), optional
            Weights.

        Returns
        -------
        self
        """
        _check_params(self, self._constraints)
        check_option("calibration", self.calibration, ("isotonic", "sigmoid"))
        X, y = validate_data(self, X, y, ensure_min_samples=2, ensure_all_finite="allow-nan")
        self.classes_ = unique_labels(y)
        if self.classes_.size < 2:
            raise ValueError(f"FaultClassifier needs at least 2 classes in y, got {self.classes_.size}")
        counts = np.unique(y, return_counts=True)[1]
        # the calibrator's own 5-fold split needs 5+ samples of a class in the held-out share
        held_out = bool(counts.min() * self.calibration_fraction >= 6)
        sw = None if sample_weight is None else np.asarray(sample_weight, dtype=float)
        self.members_ = []
        n_iter = []
        for k in range(self.n_members):  # a handful of models, each vectorised over the samples
            seed = None if self.random_state is None else self.random_state + k
            base = HistGradientBoostingClassifier(
                max_iter=self.max_iter,
                learning_rate=self.learning_rate,
                max_leaf_nodes=self.max_leaf_nodes,
                l2_regularization=self.l2_regularization,
                # stop when a held-out 10 % stops improving (keeps the model file small); needs enough samples
                early_stopping=bool(y.size >= 100 * self.classes_.size),
                random_state=seed,
            )
            # One boosted model fitted on most of the data, calibrated on a stratified held-out share: the
            # model file stays small (a cross-validated calibration would store one model per fold).
            if held_out:
                idx_fit, idx_cal = train_test_split(
                    np.arange(y.size), test_size=self.calibration_fraction, stratify=y, random_state=seed
                )
                base.fit(_fittable(X[idx_fit]), y[idx_fit], sample_weight=None if sw is None else sw[idx_fit])
                member = CalibratedClassifierCV(FrozenEstimator(base), method=self.calibration)
                member.fit(X[idx_cal], y[idx_cal], sample_weight=None if sw is None else sw[idx_cal])
            else:  # too few samples of a class to hold some out: keep the raw probabilities
                member = base.fit(_fittable(X), y, sample_weight=sample_weight)
            self.members_.append(member)
            n_iter.append(base.n_iter_)
        self.calibrated_ = self.members_[0]
        self.n_iter_ = int(round(float(np.mean(n_iter))))  # mean boosting iterations of the members
        self.detector_ = self._fit_detector(X, y, sw)
        return self

    def _fit_detector(self, X: np.ndarray, y: np.ndarray, sw: np.ndarray | None
                      ) -> HistGradientBoostingClassifier | None:
        """The fault-against-none booster, or None (not asked for, or too few pairs of either kind)."""
        fault = (y != "none").astype(np.int64)
        if not self.fault_detector or min(int(fault.sum()), int((1 - fault).sum())) < self.detector_min_pairs:
            return None
        return HistGradientBoostingClassifier(
            max_iter=self.detector_iterations,
            learning_rate=self.learning_rate,
            max_leaf_nodes=self.max_leaf_nodes,
            l2_regularization=self.l2_regularization,
            early_stopping=False,
            random_state=self.random_state,
        ).fit(_fittable(X), fault, sample_weight=sw)

    def __sklearn_tags__(self):  # missing features (NaN) are handled by the boosted trees
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        return tags

    def predict_proba(self, X: Any) -> np.ndarray:
        """Probability of each class in ``classes_`` order, shape (n_samples, n_classes)."""
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, ensure_all_finite="allow-nan")
        members = getattr(self, "members_", None) or [self.calibrated_]
        proba = members[0].predict_proba(X)
        for m in members[1:]:
            proba = proba + m.predict_proba(X)
        proba = proba / len(members) if len(members) > 1 else proba
        detector = getattr(self, "detector_", None)
        if detector is None:
            return proba
        return with_detector(proba, detector.predict_proba(X)[:, 0], self.classes_)

    def predict(self, X: Any) -> np.ndarray:
        """Most probable event class of each sample."""
        check_is_fitted(self)
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]


#: Feature that tells a chopped test shot at run time: the test voltage's collapse was found (1) or not (0).
CHOPPED_TEST_FEATURE = "td_test_collapse"


def chopped_test(X: np.ndarray, feature_names: Sequence[str]) -> np.ndarray:
    """Rows whose test shot is chopped, as measured on the records (:data:`CHOPPED_TEST_FEATURE`).

    Parameters
    ----------
    X : numpy.ndarray, shape (n_samples, n_features)
        Feature vectors in ``feature_names`` order.
    feature_names : sequence of str
        Column names of ``X``.

    Returns
    -------
    numpy.ndarray of bool, shape (n_samples,)
        True where the test voltage collapsed (a chop, or a breakdown to ground that collapses it).
    """
    X = np.atleast_2d(np.asarray(X, dtype=np.float64))
    names = list(feature_names)
    if CHOPPED_TEST_FEATURE not in names:
        return np.zeros(X.shape[0], dtype=bool)
    return X[:, names.index(CHOPPED_TEST_FEATURE)] == 1.0


def with_detector(proba: np.ndarray, p_none: np.ndarray, classes: np.ndarray) -> np.ndarray:
    """Class probabilities whose ``none`` column is a detector's, the rest split as the classes' models do.

    Parameters
    ----------
    proba : numpy.ndarray, shape (n_samples, n_classes)
        Probabilities of the four-class models, columns in ``classes`` order [1].
    p_none : numpy.ndarray, shape (n_samples,)
        The fault-against-none detector's probability of ``none`` [1].
    classes : numpy.ndarray of str
        Class of each column (one of them ``none``).

    Returns
    -------
    numpy.ndarray, shape (n_samples, n_classes)
        Rows summing to 1: ``none`` is ``p_none``; each fault class keeps its share of the fault classes'
        total (equal shares where the four-class models gave them nothing).
    """
    out = np.array(proba, dtype=np.float64, copy=True)
    fault = np.asarray(classes) != "none"
    rest = out[:, fault]
    total = rest.sum(axis=1, keepdims=True)
    share = np.divide(rest, total, out=np.full_like(rest, 1.0 / rest.shape[1]), where=total > 0)
    out[:, fault] = share * (1.0 - p_none)[:, None]
    out[:, ~fault] = np.asarray(p_none, dtype=np.float64)[:, None]
    return out


class LocationRegressor(RegressorMixin, BaseEstimator):
    """Gradient-boosting regressor of the fault position along the winding (0 line end .. 1 neutral end).

    Fitted with each row's fault class, it keeps one booster per class: how a breakdown to ground, a
    short between turns and a discharge show at the two measured terminals differs (a step of the
    line-end voltage, a change of the winding's inductance, a burst of charge), and a booster of its
    own lets each class spend its trees on its own relations (grouped 3-fold on the training families,
    routed by a predicted class: median error 0.066 -> 0.062). It is then asked with the class of each
    row (the classifier's most likely fault class).

    Parameters
    ----------
    max_iter : int, default=400
        Boosting iterations.
    learning_rate : float, default=0.06
        Shrinkage.
    max_leaf_nodes : int, default=31
        Leaves per tree.
    loss : {'absolute_error', 'squared_error'}, default='absolute_error'
        Loss; the absolute error targets the median position.
    random_state : int or None, default=0
        Seed.

    Attributes
    ----------
    model_ : HistGradientBoostingRegressor or None
        Booster of all rows: fitted without classes, or when some class has fewer than
        :attr:`MIN_CLASS_ROWS` rows (it then answers for those); None when every class has its own.
    models_ : dict of str to HistGradientBoostingRegressor
        Booster of each fault class (empty when fitted without classes).
    n_features_in_ : int
    """

    _constraints = {
        "max_iter": (int, 1, None),
        "learning_rate": (float, 1e-6, 1.0),
        "max_leaf_nodes": (int, 2, None),
    }

    #: Fewest rows of a fault class for a booster of its own.
    MIN_CLASS_ROWS = 50

    def __init__(
        self,
        *,
        max_iter: int = 400,
        learning_rate: float = 0.06,
        max_leaf_nodes: int = 31,
        loss: str = "absolute_error",
        random_state: int | None = 0,
    ):
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.loss = loss
        self.random_state = random_state

    def _booster(self, n_rows: int) -> HistGradientBoostingRegressor:
        return HistGradientBoostingRegressor(
            loss=self.loss,
            max_iter=self.max_iter,
            learning_rate=self.learning_rate,
            max_leaf_nodes=self.max_leaf_nodes,
            early_stopping=bool(n_rows >= 200),
            random_state=self.random_state,
        )

    def fit(self, X: Any, y: Any, sample_weight: Any = None, fault_class: Any = None) -> LocationRegressor:
        """Fit on feature vectors of faulted pairs and their positions (fraction 0..1 of the winding).

        Parameters
        ----------
        X : array_like, shape (n_samples, n_features)
        y : array_like, shape (n_samples,)
            Positions [fraction of the winding from the line end].
        sample_weight : array_like, optional
        fault_class : array_like of str, shape (n_samples,), optional
            Each row's fault class: one booster per class (classes with fewer than
            :attr:`MIN_CLASS_ROWS` rows share a booster of all rows).

        Returns
        -------
        self
        """
        _check_params(self, self._constraints)
        check_option("loss", self.loss, ("absolute_error", "squared_error"))
        X, y = validate_data(self, X, y, ensure_min_samples=2, y_numeric=True, ensure_all_finite="allow-nan")
        sw = None if sample_weight is None else np.asarray(sample_weight, dtype=np.float64)
        self.models_ = {}
        covered = fault_class is not None
        if fault_class is not None:
            fc = np.asarray(fault_class).astype(str)
            if fc.shape != y.shape:
                raise ShotcheckError(f"LocationRegressor.fit: {fc.size} fault classes for {y.size} rows")
            for c in np.unique(fc):
                sel = fc == c
                if sel.sum() < self.MIN_CLASS_ROWS:
                    covered = False
                    continue
                self.models_[str(c)] = self._booster(int(sel.sum())).fit(
                    _fittable(X[sel]), y[sel], sample_weight=None if sw is None else sw[sel])
        self.model_ = None if covered else self._booster(y.size).fit(_fittable(X), y, sample_weight=sw)
        self.n_iter_ = (self.model_.n_iter_ if self.model_ is not None else
                        int(round(float(np.mean([m.n_iter_ for m in self.models_.values()])))))
        return self

    def __sklearn_tags__(self):  # missing features (NaN) are handled by the boosted trees
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        return tags

    #: Range the predictions are clipped to (None: not clipped).
    _clip: tuple[float, float] | None = (0.0, 1.0)

    def routes(self, n_rows: int, fault_class: Any = None) -> list[tuple[HistGradientBoostingRegressor | None, np.ndarray]]:
        """Which booster answers which rows.

        Parameters
        ----------
        n_rows : int
            Number of rows asked.
        fault_class : array_like of str, shape (n_rows,), optional
            Each row's fault class; needed when the regressor keeps a booster per class.

        Returns
        -------
        list of (HistGradientBoostingRegressor or None, numpy.ndarray of int)
            Each booster with the indices of its rows; None for rows of a class without a booster of
            its own when there is no booster of all rows.

        Raises
        ------
        ShotcheckError
            If the regressor keeps boosters per class and ``fault_class`` is not given.
        """
        models = getattr(self, "models_", {})
        if not models:
            return [(self.model_, np.arange(n_rows))]
        if fault_class is None:
            raise ShotcheckError("this locator keeps one booster per fault class: give the fault class of each row")
        fc = np.asarray(fault_class).astype(str).ravel()
        if fc.size != n_rows:
            raise ShotcheckError(f"LocationRegressor: {fc.size} fault classes for {n_rows} rows")
        return [(models.get(str(c), self.model_), np.flatnonzero(fc == c)) for c in np.unique(fc)]

    def predict(self, X: Any, fault_class: Any = None) -> np.ndarray:
        """Position along the winding, clipped to [0, 1] (fraction of its length from the line end).

        Parameters
        ----------
        X : array_like, shape (n_samples, n_features)
        fault_class : array_like of str, shape (n_samples,), optional
            Each row's fault class; needed when the regressor was fitted with classes.

        Returns
        -------
        numpy.ndarray, shape (n_samples,)
            NaN for rows of a class the regressor has no booster for.
        """
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, ensure_all_finite="allow-nan")
        y = np.full(X.shape[0], np.nan)
        for booster, rows in self.routes(X.shape[0], fault_class):
            if booster is not None and rows.size:
                y[rows] = booster.predict(X[rows])
        return y if self._clip is None else np.clip(y, *self._clip)


class InstantRegressor(LocationRegressor):
    """Fault instant relative to the voltage front [us]: an onset chosen among the detectors', or regressed.

    The onset a record shows lags the fault by the time its effect needs to travel through the winding
    and to grow above the noise; which detector marks it best depends on the event and the records.
    Given ``candidate_columns`` (the onset features, ``*_after_front_us``), a gradient-boosting
    classifier scores every (pair, candidate): the probability that this candidate lies within
    ``tolerance_us`` of the true instant, from the pair's features, which detector it is, its value,
    how many other candidates agree with it and how it ranks among them. The instant is the
    best-scored candidate if its probability reaches ``min_probability`` (keeping the detector's own
    precision, a few samples), else the regressor's prediction. Without candidates it is a plain
    regressor (the parameters of :class:`LocationRegressor`; predictions are not clipped).

    Parameters
    ----------
    candidate_columns : tuple of int, optional
        Columns of ``X`` holding onset times [us after the front] (NaN where a detector saw nothing).
    sharp_columns : tuple of int, optional
        Columns whose earliest agreement of three within 0.05 us is one more candidate
        (:func:`detector._stats.agreeing_onset`).
    tolerance_us : float, default=0.3
        A candidate counts as right when it lies this close to the true instant [us].
    min_probability : float, default=0.05
        Smallest score of the chosen candidate; below it the regressor answers [1].
    max_iter, learning_rate, max_leaf_nodes, loss, random_state
        As :class:`LocationRegressor` (the regressor's settings).

    Attributes
    ----------
    model_ : HistGradientBoostingRegressor
        Regressor of the instant (used where no candidate is chosen).
    chooser_ : HistGradientBoostingClassifier or None
        Scorer of (pair, candidate) rows (see :meth:`candidate_rows`); None without candidates, or
        when in training no candidate was ever right (or always).
    """

    _clip = None
    _constraints = {**LocationRegressor._constraints, "tolerance_us": (float, 0.0, None),
                    "min_probability": (float, 0.0, 1.0)}

    #: Boosting iterations and leaves of the candidate scorer.
    CHOOSER_ITERATIONS = 200
    CHOOSER_LEAVES = 31

    def __init__(
        self,
        *,
        candidate_columns: tuple[int, ...] | None = None,
        sharp_columns: tuple[int, ...] | None = None,
        tolerance_us: float = 0.3,
        min_probability: float = 0.05,
        max_iter: int = 400,
        learning_rate: float = 0.06,
        max_leaf_nodes: int = 31,
        loss: str = "absolute_error",
        random_state: int | None = 0,
    ):
        super().__init__(max_iter=max_iter, learning_rate=learning_rate, max_leaf_nodes=max_leaf_nodes,
                         loss=loss, random_state=random_state)
        self.candidate_columns = candidate_columns
        self.sharp_columns = sharp_columns
        self.tolerance_us = tolerance_us
        self.min_probability = min_probability

    @property
    def chooses(self) -> bool:
        """Whether the instant is chosen among onset candidates (False: plain regression)."""
        return bool(len(tuple(getattr(self, "candidate_columns", None) or ()))
                    or len(tuple(getattr(self, "sharp_columns", None) or ())))

    def candidates(self, X: np.ndarray) -> np.ndarray:
        """Onset candidates of each row [us after the front], shape (n_samples, n_candidates)."""
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        parts = [X[:, list(self.candidate_columns or ())]]
        if self.sharp_columns:
            parts.append(agreeing_onset(X[:, list(self.sharp_columns)])[:, None])
        return np.concatenate(parts, axis=1)

    def candidate_rows(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The scorer's input: one row per (pair, candidate).

        Parameters
        ----------
        X : numpy.ndarray, shape (n_samples, n_features)

        Returns
        -------
        C : numpy.ndarray, shape (n_samples, n_candidates)
            Candidates [us after the front].
        finite : numpy.ndarray of bool, same shape
            Where a detector saw an onset.
        rows : numpy.ndarray, shape (n_samples * n_candidates, n_features + n_candidates + 4)
            The pair's features, then which candidate it is (one indicator column per candidate), its
            value [us], the number of candidates within ``tolerance_us`` of it (itself included), its
            rank among the pair's candidates (0 earliest) and its distance from the earliest [us].
        """
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        C = self.candidates(X)
        n, k = C.shape
        fin = np.isfinite(C)
        agree = np.sum(np.abs(C[:, :, None] - C[:, None, :]) <= self.tolerance_us, axis=2)  # NaN: False
        order = np.where(fin, C, np.inf)
        rank = np.argsort(np.argsort(order, axis=1, kind="stable"), axis=1, kind="stable")
        earliest = np.min(order, axis=1, keepdims=True)
        rows = np.column_stack([
            np.repeat(X, k, axis=0),
            np.tile(np.eye(k), (n, 1)),
            C.ravel(),
            agree.ravel().astype(np.float64),
            rank.ravel().astype(np.float64),
            np.where(fin, C - earliest, np.nan).ravel(),
        ])
        return C, fin, rows

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> InstantRegressor:
        """Fit on feature vectors of faulted pairs and their true instants [us after the front].

        Returns
        -------
        self
        """
        super().fit(X, y, sample_weight=sample_weight)
        self.chooser_ = None
        if not self.chooses:
            return self
        Xv = np.asarray(validate_data(self, X, reset=False, ensure_all_finite="allow-nan"), dtype=np.float64)
        cols = [*(self.candidate_columns or ()), *(self.sharp_columns or ())]
        if any(not 0 <= int(c) < Xv.shape[1] for c in cols):
            raise ShotcheckError(f"InstantRegressor: candidate columns {cols} do not all lie in the "
                                 f"{Xv.shape[1]} feature columns")
        C, fin, rows = self.candidate_rows(Xv)
        yv = column_or_1d(y).astype(np.float64)
        right = (np.abs(C - yv[:, None]) <= self.tolerance_us).ravel()
        keep = fin.ravel()
        if np.unique(right[keep]).size < 2:  # no candidate ever right (or always): nothing to learn
            return self
        sw = None if sample_weight is None else np.repeat(np.asarray(sample_weight, dtype=float), C.shape[1])[keep]
        self.chooser_ = HistGradientBoostingClassifier(
            max_iter=self.CHOOSER_ITERATIONS,
            learning_rate=0.1,
            max_leaf_nodes=self.CHOOSER_LEAVES,
            early_stopping=False,
            random_state=self.random_state,
        ).fit(_fittable(rows[keep]), right[keep], sample_weight=sw)
        return self

    def choose(self, X: np.ndarray, regressed: np.ndarray, scores: np.ndarray | None) -> np.ndarray:
        """Combine the regressed instants with the scores of the candidates (see the class description).

        Parameters
        ----------
        X : numpy.ndarray, shape (n_samples, n_features)
            Feature vectors.
        regressed : numpy.ndarray, shape (n_samples,)
            The regressor's instants [us after the front].
        scores : numpy.ndarray or None, shape (n_samples, n_candidates)
            Probability that each candidate is right (0 where a detector saw nothing); None without a
            scorer (the regressor answers).

        Returns
        -------
        numpy.ndarray
            Instant of each row [us after the front].
        """
        if not self.chooses or scores is None:
            return regressed
        C = self.candidates(X)
        s = np.where(np.isfinite(C), scores, -1.0)
        j = np.argmax(s, axis=1)
        r = np.arange(C.shape[0])
        use = s[r, j] >= self.min_probability
        return np.where(use, C[r, j], regressed)

    def candidate_scores(self, X: np.ndarray, proba=None) -> np.ndarray | None:
        """Probability that each candidate is right, shape (n_samples, n_candidates); None without a scorer.

        ``proba`` (optional) maps the scorer's input rows to their class probabilities (the fast path
        passes its own); by default the scorer's ``predict_proba``.
        """
        chooser = getattr(self, "chooser_", None)
        if chooser is None:
            return None
        C, fin, rows = self.candidate_rows(X)
        out = np.zeros(fin.size)
        keep = fin.ravel()
        if keep.any():
            p = (proba or chooser.predict_proba)(rows[keep])
            out[keep] = p[:, list(chooser.classes_).index(True)]
        return out.reshape(C.shape)

    def timing_inputs(self, X: np.ndarray, instant_us: np.ndarray) -> np.ndarray:
        """Feature rows extended by the instant and each candidate's delay after it, for the locator.

        The delay between the fault and the moment each detector sees it grows with the distance the
        effect travels through the winding, so it carries the fault's position.

        Parameters
        ----------
        X : numpy.ndarray, shape (n_samples, n_features)
        instant_us : numpy.ndarray, shape (n_samples,)
            Fault instants [us after the front] (this regressor's, out of fold when training).

        Returns
        -------
        numpy.ndarray, shape (n_samples, n_features + 1 + n_candidates)
            ``X``, the instant [us], then every candidate minus the instant [us] (NaN where unseen).
        """
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        t = np.asarray(instant_us, dtype=np.float64).reshape(-1, 1)
        return np.concatenate([X, t, self.candidates(X) - t], axis=1)

    def predict(self, X: Any) -> np.ndarray:
        """Fault instant of each row [us after the front]."""
        check_is_fitted(self)
        X = np.asarray(validate_data(self, X, reset=False, ensure_all_finite="allow-nan"), dtype=np.float64)
        regressed = self.model_.predict(X)
        return self.choose(X, regressed, self.candidate_scores(X))


@dataclasses.dataclass
class ShotModel:
    """Everything ``compare`` needs besides the records.

    Parameters
    ----------
    classifier : FaultClassifier
        Fitted event classifier.
    locator : LocationRegressor or None
        Fitted location regressor (None if the training set had no faults with positions).
    feature_names : sequence of str
        Column order of the feature vectors the estimators were trained on.
    schema_version : str
        Version of the feature schema (:data:`detector.features.SCHEMA_VERSION`).
    thresholds : mapping of str to float
        Calibrated threshold of each thresholded feature (a feature above it counts as exceeded).
    card : mapping
        Model card: training data description, figures, versions, creation time.
    timer : InstantRegressor or None
        Fitted regressor of the fault instant relative to the voltage front [us].
    none_threshold : float
        A fault is indicated when the classifier gives ``none`` a probability below this [1]; chosen in
        training on cross-validated benign pairs to keep the stated false-alarm rate. With
        ``none_threshold_chopped`` set, it applies to comparisons of a full test shot only.
    none_threshold_chopped : float or None
        The same for comparisons whose test shot is chopped (the test voltage's collapse found, feature
        ``td_test_collapse``), chosen on those benign pairs alone, so that the false-alarm rate holds for
        each kind of comparison rather than for the training set's mixture of them; None: ``none_threshold``
        for every comparison (models trained before it, or on too few benign pairs of either kind).
    instant_input_names : sequence of str
        Names of the inputs measured at the fault instant the locator was trained on
        (:data:`detector.features.INSTANT_INPUT_NAMES` when it was trained; empty if none).
    """

    classifier: FaultClassifier
    locator: LocationRegressor | None
    feature_names: Sequence[str]
    schema_version: str
    thresholds: Mapping[str, float] = dataclasses.field(default_factory=dict)
    card: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    timer: InstantRegressor | None = None
    none_threshold: float = 0.5
    instant_input_names: Sequence[str] = ()
    none_threshold_chopped: float | None = None

    def none_thresholds(self, X: np.ndarray) -> np.ndarray:
        """The threshold on P(none) that applies to each row of ``X`` [1].

        Parameters
        ----------
        X : numpy.ndarray, shape (n_samples, n_features)
            Feature vectors in :attr:`feature_names` order.

        Returns
        -------
        numpy.ndarray, shape (n_samples,)
            ``none_threshold_chopped`` where the test shot is chopped (``td_test_collapse`` is 1) and that
            threshold is set, else ``none_threshold``.
        """
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        out = np.full(X.shape[0], float(self.none_threshold))
        if self.none_threshold_chopped is not None:
            out[chopped_test(X, self.feature_names)] = float(self.none_threshold_chopped)
        return out

    def locator_input(self, X: np.ndarray, instant_us: np.ndarray | None,
                      at_instant: np.ndarray | None = None) -> np.ndarray:
        """The rows the locator takes: the features, extended by what it was trained on besides them.

        Parameters
        ----------
        X : numpy.ndarray, shape (n_samples, n_features)
            Feature vectors.
        instant_us : numpy.ndarray or None
            The timer's fault instants [us after the front].
        at_instant : numpy.ndarray, shape (n_samples, len(INSTANT_INPUT_NAMES)), optional
            :func:`detector.features.instant_inputs` at those instants, for a locator trained on them.

        Returns
        -------
        numpy.ndarray
            ``X``; or :meth:`InstantRegressor.timing_inputs` of it; or those followed by ``at_instant``:
            whichever the locator was fitted on.

        Raises
        ------
        ShotcheckError
            If the locator takes inputs that are not given (e.g. a locator trained on the inputs at the
            instant, called without them).
        """
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        n_in = getattr(self.locator, "n_features_in_", X.shape[1])
        if n_in == X.shape[1]:
            return X
        if self.timer is not None and instant_us is not None:
            Xt = self.timer.timing_inputs(X, instant_us)
            if Xt.shape[1] == n_in:
                return Xt
            if at_instant is not None:
                A = np.asarray(at_instant, dtype=np.float64).reshape(X.shape[0], -1)
                if Xt.shape[1] + A.shape[1] == n_in:
                    return np.concatenate([Xt, A], axis=1)
        raise ShotcheckError(f"the locator takes {n_in} inputs; the features ({X.shape[1]}), this model's "
                             "timer and the inputs at the instant given do not make them")

    @property
    def locator_at_instant(self) -> bool:
        """Whether the locator takes :func:`detector.features.instant_inputs` besides the timing inputs."""
        if self.locator is None or self.timer is None:
            return False
        n_in = getattr(self.locator, "n_features_in_", 0)
        n_timing = self.timer.timing_inputs(np.zeros((1, len(self.feature_names))), np.zeros(1)).shape[1]
        return n_in > n_timing


#: Types a model file may contain beyond skops' defaults. Anything else is refused on load.
TRUSTED_TYPES: tuple[str, ...] = (
    "detector.model.FaultClassifier",
    "detector.model.LocationRegressor",
    "detector.model.InstantRegressor",
    "sklearn.calibration._CalibratedClassifier",
    "sklearn.ensemble._hist_gradient_boosting.binning._BinMapper",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
    "sklearn._loss.link.Interval",
    "sklearn._loss.link.IdentityLink",
    "sklearn._loss.link.LogitLink",
    "sklearn._loss.link.MultinomialLogit",
    "sklearn._loss.loss.AbsoluteError",
    "sklearn._loss.loss.HalfSquaredError",
    "sklearn._loss.loss.HalfBinomialLoss",
    "sklearn._loss.loss.HalfMultinomialLoss",
    "sklearn._loss._loss.CyHalfSquaredError",
    "sklearn._loss._loss.CyAbsoluteError",
    "sklearn._loss._loss.CyHalfBinomialLoss",
    "sklearn._loss._loss.CyHalfMultinomialLoss",
    "sklearn.calibration._SigmoidCalibration",
    "sklearn.frozen._frozen.FrozenEstimator",
    "sklearn.isotonic.IsotonicRegression",
    "sklearn.utils._bunch.Bunch",
    "builtins.slice",
)


def save_model(model: ShotModel, path: str | Path) -> None:
    """Write a model file in skops format.

    Parameters
    ----------
    model : ShotModel
        The model to save.
    path : str or Path
        Destination, conventionally ending in ``.skops``.
    """
    import sklearn
    import skops.io as sio

    from . import __version__

    card = dict(model.card)
    card.setdefault("created", _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"))
    card["sklearn_version"] = sklearn.__version__
    card["shotcheck_version"] = __version__
    payload = {
        "format": MODEL_FORMAT,
        "format_version": MODEL_FORMAT_VERSION,
        "schema_version": str(model.schema_version),
        "feature_names": [str(n) for n in model.feature_names],
        "thresholds": {str(k): float(v) for k, v in model.thresholds.items()},
        "card": card,
        "classifier": model.classifier,
        "locator": model.locator,
        "timer": model.timer,
        "none_threshold": float(model.none_threshold),
        "none_threshold_chopped": (None if model.none_threshold_chopped is None
                                   else float(model.none_threshold_chopped)),
        "instant_input_names": [str(n) for n in model.instant_input_names],
    }
    with _fastpredict.detached(model):  # the file holds scikit-learn's estimators as they are
        parts = copy.deepcopy({"classifier": model.classifier, "locator": model.locator, "timer": model.timer})
        _strip_training_statistics(parts)
        payload.update(parts)
        sio.dump(payload, Path(path), compression=zipfile.ZIP_DEFLATED, compresslevel=9)


#: Fields of a fitted tree's nodes that prediction never reads: the split gain and the training-sample
#: count of every node (kept by scikit-learn for inspection and partial dependence).
_TRAINING_ONLY_NODE_FIELDS = ("gain", "count")
#: A tree's category bitsets (used by categorical splits only; read-only when predicting).
_CATEGORY_BITSET_FIELDS = ("binned_left_cat_bitsets", "raw_left_cat_bitsets")


def _strip_training_statistics(parts: Mapping[str, Any]) -> None:
    """Zero, in place, what the trees of ``parts`` hold but never read when predicting; share their empty
    category bitsets.

    A prediction walks each tree from its root by ``feature_idx``/``num_threshold`` (and
    ``missing_go_to_left``, ``left``, ``right``, ``is_leaf``) and returns the leaf's ``value``. The
    split gains, node counts, the values of inner nodes and the split fields of leaves are training
    statistics; zeroed, they compress to almost nothing, which makes a model file about a quarter
    smaller with the same predictions (tested bit for bit). ``depth`` is kept: the flat walk of
    :mod:`detector._fastpredict` reads it. A loaded model therefore cannot serve scikit-learn's
    ``partial_dependence`` by its tree-recursion method (which weighs by the node counts); use
    ``method="brute"``.

    Each tree also holds two arrays of category bitsets, empty where no split is categorical (shotcheck
    has no categorical features). skops stores an object once however often it is referenced, so the
    empty ones are made one shared array: two file entries per tree fewer (the zip entries' headers,
    not their contents: 1.4 MB of a 9.9 MB model file of some 3600 trees).
    """
    empty: dict[tuple[tuple[int, ...], str], np.ndarray] = {}
    for est in _fastpredict.estimators_of(types.SimpleNamespace(**parts)):
        for iteration in est._predictors:
            for predictor in iteration:
                nodes = predictor.nodes
                leaf = nodes["is_leaf"].astype(bool)
                for f in _TRAINING_ONLY_NODE_FIELDS:
                    nodes[f] = 0
                nodes["value"][~leaf] = 0.0
                nodes["num_threshold"][leaf] = 0.0
                nodes["feature_idx"][leaf] = 0
                for name in _CATEGORY_BITSET_FIELDS:  # no categorical splits: one empty array for all
                    bits = getattr(predictor, name)
                    if bits.size == 0:
                        setattr(predictor, name, empty.setdefault((bits.shape, bits.dtype.str), bits))


def missing_model_error(path: Path) -> ShotcheckError:
    """The error for a model path that is no file: a folder, or nothing (names the file)."""
    what = "is a folder; expected a model file (.skops)" if path.is_dir() else "model file not found"
    return RecordError(what, path=str(path))


def _add_missing_parameters(est: Any) -> None:
    """Give one of our estimators, loaded from a file written before some of its parameters existed,
    those parameters at their defaults (which describe how it was fitted: a classifier from before
    ``fault_detector`` has no detector), so that ``get_params``, ``repr`` and ``clone`` work on it."""
    if not isinstance(est, FaultClassifier | LocationRegressor):
        return
    for name, par in inspect.signature(type(est).__init__).parameters.items():
        if par.default is not inspect.Parameter.empty and name not in vars(est):
            setattr(est, name, par.default)
    if isinstance(est, FaultClassifier) and "detector_" not in vars(est):
        est.detector_ = None


def load_model(path: str | Path, *, expected_schema: str | None = None) -> ShotModel:
    """Load a model file written by :func:`save_model`, trusting only :data:`TRUSTED_TYPES`.

    Parameters
    ----------
    path : str or Path
        Model file (skops format).
    expected_schema : str, optional
        Feature-schema version the caller computes; a model trained on another schema is refused.

    Returns
    -------
    ShotModel

    Raises
    ------
    RecordError
        If the file is missing, not a skops file, contains untrusted types, is not a shotcheck model, or
        was trained on another feature schema (the error's ``path`` names the file).
    """
    p = Path(path)
    try:
        return _load_model(p, expected_schema)
    except RecordError:
        raise
    except ShotcheckError as exc:  # every message starts with the file's name: carried as the error's path
        msg = str(exc)
        prefix = f"{p}: "
        raise RecordError(msg[len(prefix):] if msg.startswith(prefix) else msg, path=str(p)) from None


def _load_model(p: Path, expected_schema: str | None) -> ShotModel:
    import skops.io as sio

    if not p.is_file():
        raise missing_model_error(p)
    try:
        untrusted = sio.get_untrusted_types(file=p)
    except Exception as exc:  # a damaged or foreign file: say what it is not
        raise ShotcheckError(f"{p}: not a readable skops model file ({type(exc).__name__}: {exc})") from None
    refused = sorted(set(untrusted) - set(TRUSTED_TYPES))
    if refused:
        raise ShotcheckError(
            f"{p}: the model file contains types that are not on shotcheck's trusted list: "
            f"{', '.join(refused)}; refusing to load it"
        )
    try:
        payload = sio.load(p, trusted=list(untrusted))
    except Exception as exc:
        raise ShotcheckError(f"{p}: could not load the model ({type(exc).__name__}: {exc})") from None
    if not isinstance(payload, dict) or payload.get("format") != MODEL_FORMAT:
        raise ShotcheckError(f"{p}: not a shotcheck model file (missing format tag {MODEL_FORMAT!r})")
    if payload.get("format_version") != MODEL_FORMAT_VERSION:
        raise ShotcheckError(
            f"{p}: model format version {payload.get('format_version')!r}, this shotcheck reads {MODEL_FORMAT_VERSION}"
        )
    schema = payload.get("schema_version")
    if expected_schema is not None and schema != expected_schema:
        raise ShotcheckError(
            f"{p}: the model was trained on feature schema {schema!r}, this shotcheck computes {expected_schema!r}; "
            "retrain it with `shotcheck train`"
        )
    clf = payload.get("classifier")
    if not isinstance(clf, FaultClassifier):
        raise ShotcheckError(f"{p}: the model file holds no FaultClassifier")
    for est in (clf, payload.get("locator"), payload.get("timer")):
        _add_missing_parameters(est)
    loc = payload.get("locator")
    if loc is not None and (not isinstance(loc, LocationRegressor) or isinstance(loc, InstantRegressor)):
        raise ShotcheckError(f"{p}: the 'locator' entry is not a LocationRegressor")
    timer = payload.get("timer")
    if timer is not None and not isinstance(timer, InstantRegressor):
        raise ShotcheckError(f"{p}: the 'timer' entry is not an InstantRegressor")
    thr = payload.get("none_threshold", 0.5)
    if not isinstance(thr, float) or not 0.0 < thr <= 1.0:
        raise ShotcheckError(f"{p}: 'none_threshold' must be a probability in (0, 1], got {thr!r}")
    thr_c = payload.get("none_threshold_chopped")  # absent from files written before it
    if thr_c is not None and (not isinstance(thr_c, float) or not 0.0 < thr_c <= 1.0):
        raise ShotcheckError(f"{p}: 'none_threshold_chopped' must be a probability in (0, 1] or null, got {thr_c!r}")
    if thr_c is not None and CHOPPED_TEST_FEATURE not in payload.get("feature_names", ()):
        raise ShotcheckError(f"{p}: the model has a threshold for chopped test shots but no feature "
                             f"{CHOPPED_TEST_FEATURE!r} to tell them by; retrain it with `shotcheck train`")
    model = ShotModel(
        none_threshold=thr,
        none_threshold_chopped=thr_c,
        timer=timer,
        classifier=clf,
        locator=loc,
        feature_names=tuple(payload.get("feature_names", ())),
        schema_version=str(schema),
        thresholds=dict(payload.get("thresholds", {})),
        card=dict(payload.get("card", {})),
        instant_input_names=tuple(str(n) for n in payload.get("instant_input_names", ())),
    )
    if expected_schema is not None and model.locator_at_instant:
        from .features import INSTANT_INPUT_NAMES

        if tuple(model.instant_input_names) != INSTANT_INPUT_NAMES:
            raise ShotcheckError(
                f"{p}: the model's locator was trained on other inputs at the fault instant "
                f"({len(model.instant_input_names)} named) than this shotcheck measures "
                f"({len(INSTANT_INPUT_NAMES)}); retrain it with `shotcheck train`"
            )
    return model
