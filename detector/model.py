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

import dataclasses
import datetime as _dt
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
from sklearn.utils.validation import check_is_fitted, validate_data

from . import _fastpredict
from ._stats import agreeing_onset
from ._validation import ShotcheckError, check_option

__all__ = [
    "EVENT_CLASSES",
    "FaultClassifier",
    "InstantRegressor",
    "LocationRegressor",
    "ShotModel",
    "save_model",
    "load_model",
    "TRUSTED_TYPES",
]

#: Event classes in a fixed order (the classifier's probability columns follow it when all are seen).
EVENT_CLASSES = ("none", "turn_to_turn", "to_ground", "discharge_only")

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
    """

    _constraints = {
        "max_iter": (int, 1, None),
        "learning_rate": (float, 1e-6, 1.0),
        "max_leaf_nodes": (int, 2, None),
        "l2_regularization": (float, 0.0, None),
        "calibration_fraction": (float, 0.05, 0.5),
        "n_members": (int, 1, 50),
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
    ):
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.l2_regularization = l2_regularization
        self.calibration = calibration
        self.calibration_fraction = calibration_fraction
        self.random_state = random_state
        self.n_members = n_members

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
                base.fit(X[idx_fit], y[idx_fit], sample_weight=None if sw is None else sw[idx_fit])
                member = CalibratedClassifierCV(FrozenEstimator(base), method=self.calibration)
                member.fit(X[idx_cal], y[idx_cal], sample_weight=None if sw is None else sw[idx_cal])
            else:  # too few samples of a class to hold some out: keep the raw probabilities
                member = base.fit(X, y, sample_weight=sample_weight)
            self.members_.append(member)
            n_iter.append(base.n_iter_)
        self.calibrated_ = self.members_[0]
        self.n_iter_ = int(round(float(np.mean(n_iter))))  # mean boosting iterations of the members
        return self

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
        return proba / len(members) if len(members) > 1 else proba

    def predict(self, X: Any) -> np.ndarray:
        """Most probable event class of each sample."""
        check_is_fitted(self)
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]


class LocationRegressor(RegressorMixin, BaseEstimator):
    """Gradient-boosting regressor of the fault position along the winding (0 line end .. 1 neutral end).

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
    model_ : HistGradientBoostingRegressor
    n_features_in_ : int
    """

    _constraints = {
        "max_iter": (int, 1, None),
        "learning_rate": (float, 1e-6, 1.0),
        "max_leaf_nodes": (int, 2, None),
    }

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

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> LocationRegressor:
        """Fit on feature vectors of faulted pairs and their positions (fraction 0..1 of the winding).

        Returns
        -------
        self
        """
        _check_params(self, self._constraints)
        check_option("loss", self.loss, ("absolute_error", "squared_error"))
        X, y = validate_data(self, X, y, ensure_min_samples=2, y_numeric=True, ensure_all_finite="allow-nan")
        self.model_ = HistGradientBoostingRegressor(
            loss=self.loss,
            max_iter=self.max_iter,
            learning_rate=self.learning_rate,
            max_leaf_nodes=self.max_leaf_nodes,
            early_stopping=bool(y.size >= 200),
            random_state=self.random_state,
        ).fit(X, y, sample_weight=sample_weight)
        self.n_iter_ = self.model_.n_iter_
        return self

    def __sklearn_tags__(self):  # missing features (NaN) are handled by the boosted trees
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        return tags

    #: Range the predictions are clipped to (None: not clipped).
    _clip: tuple[float, float] | None = (0.0, 1.0)

    def predict(self, X: Any) -> np.ndarray:
        """Position along the winding, clipped to [0, 1] (fraction of its length from the line end)."""
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, ensure_all_finite="allow-nan")
        y = self.model_.predict(X)
        return y if self._clip is None else np.clip(y, *self._clip)


class InstantRegressor(LocationRegressor):
    """Fault instant relative to the voltage front [us]: an onset chosen among the detectors', or regressed.

    The onset a record shows lags the fault by the time its effect needs to travel through the winding
    and to grow above the noise; which detector marks it best depends on the event and the records.
    Given ``candidate_columns`` (the onset features, ``*_after_front_us``) a gradient-boosting classifier
    learns which candidate lies nearest the true instant (within ``tolerance_us``), or that none does;
    the instant is then that candidate's value, keeping the detector's own precision (a few samples),
    else the regressor's prediction. Without candidates it is a plain regressor (the parameters of
    :class:`LocationRegressor`; predictions are not clipped).

    Parameters
    ----------
    candidate_columns : tuple of int, optional
        Columns of ``X`` holding onset times [us after the front] (NaN where a detector saw nothing).
    sharp_columns : tuple of int, optional
        Columns whose earliest agreement of three within 0.05 us is one more candidate
        (:func:`detector._stats.agreeing_onset`).
    tolerance_us : float, default=0.3
        A candidate counts as right when it lies this close to the true instant [us].
    max_iter, learning_rate, max_leaf_nodes, loss, random_state
        As :class:`LocationRegressor` (the chooser uses the same boosting settings).

    Attributes
    ----------
    model_ : HistGradientBoostingRegressor
        Regressor of the instant (used where no candidate is chosen).
    chooser_ : HistGradientBoostingClassifier or None
        Classifier over the candidate index (``n_candidates`` meaning "none: regress").
    """

    _clip = None
    _constraints = {**LocationRegressor._constraints, "tolerance_us": (float, 0.0, None)}

    def __init__(
        self,
        *,
        candidate_columns: tuple[int, ...] | None = None,
        sharp_columns: tuple[int, ...] | None = None,
        tolerance_us: float = 0.3,
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

    @property
    def chooses(self) -> bool:
        """Whether the instant is chosen among onset candidates (False: plain regression)."""
        return bool(getattr(self, "candidate_columns", None) or getattr(self, "sharp_columns", None))

    def candidates(self, X: np.ndarray) -> np.ndarray:
        """Onset candidates of each row [us after the front], shape (n_samples, n_candidates)."""
        X = np.atleast_2d(np.asarray(X, dtype=np.float64))
        parts = [X[:, list(self.candidate_columns or ())]]
        if self.sharp_columns:
            parts.append(agreeing_onset(X[:, list(self.sharp_columns)])[:, None])
        return np.concatenate(parts, axis=1)

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
        C = self.candidates(Xv)
        err = np.abs(C - np.asarray(y, dtype=np.float64)[:, None])
        err = np.where(np.isfinite(err), err, np.inf)
        K = C.shape[1]
        label = self._labels(err)
        # a candidate that is rarely the best one is left out (its rows go to the next best): every
        # class costs trees, and a handful of examples teaches the chooser nothing
        counts = np.bincount(label, minlength=K + 1)
        rare = counts[:K] < self.MIN_CHOICES
        if rare.any():
            label = self._labels(np.where(rare[None, :], np.inf, err))
        if np.unique(label).size < 2:  # every row the same choice: the rule needs no classifier
            self.constant_choice_ = int(label[0])
            return self
        self.chooser_ = HistGradientBoostingClassifier(
            max_iter=self.CHOOSER_ITERATIONS,
            learning_rate=0.1,
            max_leaf_nodes=self.CHOOSER_LEAVES,
            early_stopping=False,
            random_state=self.random_state,
        ).fit(Xv, label, sample_weight=sample_weight)
        return self

    #: Rows a candidate must be the best for to stay a choice; boosting iterations and leaves of the chooser.
    MIN_CHOICES = 20
    CHOOSER_ITERATIONS = 50
    CHOOSER_LEAVES = 15

    def _labels(self, err: np.ndarray) -> np.ndarray:
        """Index of the candidate nearest the truth if within tolerance, else ``n_candidates``."""
        best = np.argmin(err, axis=1)
        return np.where(err[np.arange(best.size), best] <= self.tolerance_us, best, err.shape[1])

    def choose(self, X: np.ndarray, regressed: np.ndarray, choice_proba: np.ndarray | None) -> np.ndarray:
        """Combine the regressed instants with the chooser's probabilities (see the class notes).

        Parameters
        ----------
        X : numpy.ndarray, shape (n_samples, n_features)
            Feature vectors.
        regressed : numpy.ndarray, shape (n_samples,)
            The regressor's instants [us after the front].
        choice_proba : numpy.ndarray or None
            The chooser's probabilities in ``chooser_.classes_`` order (None without a chooser).

        Returns
        -------
        numpy.ndarray
            Instant of each row [us after the front].
        """
        if not self.chooses:
            return regressed
        C = self.candidates(X)
        K = C.shape[1]
        full = np.zeros((C.shape[0], K + 1))
        if choice_proba is None:
            full[:, getattr(self, "constant_choice_", K)] = 1.0
        else:
            full[:, self.chooser_.classes_.astype(int)] = choice_proba
        full[:, :K] = np.where(np.isfinite(C), full[:, :K], 0.0)  # a detector that saw nothing is no choice
        full[:, K] = np.maximum(full[:, K], 1e-12)  # the regressor is always available
        k = np.argmax(full, axis=1)
        picked = C[np.arange(C.shape[0]), np.minimum(k, K - 1)]
        return np.where(k < K, picked, regressed)

    def predict(self, X: Any) -> np.ndarray:
        """Fault instant of each row [us after the front]."""
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, ensure_all_finite="allow-nan")
        regressed = self.model_.predict(X)
        chooser = getattr(self, "chooser_", None)
        return self.choose(X, regressed, None if chooser is None else chooser.predict_proba(X))


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
        training on cross-validated benign pairs to keep the stated false-alarm rate.
    """

    classifier: FaultClassifier
    locator: LocationRegressor | None
    feature_names: Sequence[str]
    schema_version: str
    thresholds: Mapping[str, float] = dataclasses.field(default_factory=dict)
    card: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    timer: InstantRegressor | None = None
    none_threshold: float = 0.5


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
    }
    with _fastpredict.detached(model):  # the file holds scikit-learn's estimators as they are
        sio.dump(payload, Path(path), compression=zipfile.ZIP_DEFLATED, compresslevel=9)


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
    ShotcheckError
        If the file is missing, not a skops file, contains untrusted types, is not a shotcheck model, or
        was trained on another feature schema.
    """
    import skops.io as sio

    p = Path(path)
    if not p.is_file():
        raise ShotcheckError(f"{p}: model file not found")
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
    loc = payload.get("locator")
    if loc is not None and (not isinstance(loc, LocationRegressor) or isinstance(loc, InstantRegressor)):
        raise ShotcheckError(f"{p}: the 'locator' entry is not a LocationRegressor")
    timer = payload.get("timer")
    if timer is not None and not isinstance(timer, InstantRegressor):
        raise ShotcheckError(f"{p}: the 'timer' entry is not an InstantRegressor")
    thr = payload.get("none_threshold", 0.5)
    if not isinstance(thr, float) or not 0.0 < thr <= 1.0:
        raise ShotcheckError(f"{p}: 'none_threshold' must be a probability in (0, 1], got {thr!r}")
    return ShotModel(
        none_threshold=thr,
        timer=timer,
        classifier=clf,
        locator=loc,
        feature_names=tuple(payload.get("feature_names", ())),
        schema_version=str(schema),
        thresholds=dict(payload.get("thresholds", {})),
        card=dict(payload.get("card", {})),
    )
