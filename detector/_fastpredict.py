"""Scoring of a few samples with fitted histogram gradient-boosting models, without per-tree overhead.

scikit-learn's ``HistGradientBoosting*`` estimators add up their trees one Python call at a time (and
start an OpenMP team for each). That is right for large batches; for the one sample a comparison scores,
the ~500 calls cost a few milliseconds, far more than the arithmetic. Here all trees of an estimator are
flattened into one node table and walked together, one numpy step per tree level.

:func:`install` puts the flat walk in front of an estimator's own ``_predict_iterations`` for batches of
up to :data:`SMALL_BATCH` samples (larger batches, and the binned data used while fitting, go to
scikit-learn's own code). The sum over trees is taken in the same order as scikit-learn's, so the
predictions are the same to the last bit (a test checks it). :func:`uninstall` removes it again, which
:func:`detector.model.save_model` does before writing a file.

:func:`score` goes one step further for the few samples of a comparison: it also leaves out
scikit-learn's input checks (about half of the remaining time) and applies the probability calibration
itself, exactly as scikit-learn 1.9 does (isotonic or sigmoid, per class, normalised, averaged over the
calibrated copies); anything else falls back to the estimators' own ``predict``. A test checks the
results against scikit-learn's to the last bit.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
from scipy.special import expit
from sklearn.calibration import CalibratedClassifierCV
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.isotonic import IsotonicRegression

__all__ = ["SMALL_BATCH", "install", "uninstall", "estimators_of", "detached", "score", "fault_classes"]

#: Largest batch scored by the flat walk; larger ones use scikit-learn's parallel predictor.
SMALL_BATCH = 64

_HGB = (HistGradientBoostingClassifier, HistGradientBoostingRegressor)
_ATTR = "_predict_iterations"


class _FlatForest:
    """All trees of one fitted estimator as one node table (tree ``j`` starts at ``roots[j]``)."""

    def __init__(self, est: Any):
        per_iter = est._predictors
        n_k = int(est.n_trees_per_iteration_)
        tables = [pred.nodes for it in per_iter for pred in it]
        if not tables:
            raise ValueError("the estimator has no trees")
        if any(bool(np.any(t["is_categorical"])) for t in tables):
            raise ValueError("categorical splits are not supported by the flat walk")
        sizes = np.array([t.size for t in tables])
        start = np.concatenate([[0], np.cumsum(sizes)[:-1]])
        nodes = np.concatenate(tables)
        shift = np.repeat(start, sizes)
        self.roots = start.astype(np.intp)
        self.feature = nodes["feature_idx"].astype(np.intp)
        self.threshold = nodes["num_threshold"].astype(np.float64)
        self.missing_left = nodes["missing_go_to_left"].astype(bool)
        self.leaf = nodes["is_leaf"].astype(bool)
        own = np.arange(nodes.size, dtype=np.intp)
        # a leaf points to itself, so that walking past it changes nothing
        self.left = np.where(self.leaf, own, nodes["left"].astype(np.intp) + shift)
        self.right = np.where(self.leaf, own, nodes["right"].astype(np.intp) + shift)
        self.value = nodes["value"].astype(np.float64)
        self.depth = int(nodes["depth"].max())
        # trees of output k, in iteration order (scikit-learn adds them in that order)
        k_of_tree = np.tile(np.arange(n_k), len(per_iter))
        self.trees_of = [np.flatnonzero(k_of_tree == k) for k in range(n_k)]

    def add_to(self, X: np.ndarray, raw: np.ndarray) -> None:
        """Add the leaf values of every tree for the rows of ``X`` to ``raw`` (n_samples, n_outputs)."""
        if X.shape[0] == 1:
            # each node's decision at once (NaN: the side learned for missing values), then the walk
            # from the roots is one lookup per level
            xv = X[0, self.feature]
            with np.errstate(invalid="ignore"):
                go_left = (xv <= self.threshold) | (np.isnan(xv) & self.missing_left)
            step = np.where(go_left, self.left, self.right)
            node = self.roots
            for _ in range(self.depth):
                node = step[node]
            values = self.value[node][None, :]
        else:
            # several rows (the onset candidates of a pair): deciding every node for every row costs
            # more than deciding, level by level, only the nodes the rows are at
            n, n_features = X.shape
            flat = X.ravel()
            node = np.tile(self.roots, n)
            offset = np.repeat(np.arange(n, dtype=np.intp) * n_features, self.roots.size)
            for _ in range(self.depth):
                xv = flat[offset + self.feature[node]]
                with np.errstate(invalid="ignore"):
                    go_left = (xv <= self.threshold[node]) | (np.isnan(xv) & self.missing_left[node])
                node = np.where(go_left, self.left[node], self.right[node])
            values = self.value[node].reshape(n, self.roots.size)
        for k, trees in enumerate(self.trees_of):
            # running sum from the current value, tree by tree: the same additions as scikit-learn's loop
            seq = np.concatenate([raw[:, k : k + 1], values[:, trees]], axis=1)
            raw[:, k] = np.cumsum(seq, axis=1)[:, -1]


def _make_walker(est: Any, forest: _FlatForest) -> Any:
    original = type(est)._predict_iterations.__get__(est)

    def _predict_iterations(X, predictors, raw_predictions, is_binned, n_threads):
        if (is_binned or predictors is not est._predictors or X.shape[0] > SMALL_BATCH
                or X.dtype != np.float64):
            return original(X, predictors, raw_predictions, is_binned, n_threads)
        forest.add_to(X, raw_predictions)
        return None

    _predict_iterations._shotcheck_forest = forest  # type: ignore[attr-defined]  # marks our walk
    return _predict_iterations


def _forest(est: Any) -> _FlatForest | None:
    """The flat walk installed on ``est``, or None."""
    return getattr(est.__dict__.get(_ATTR), "_shotcheck_forest", None)


def estimators_of(obj: Any) -> list[Any]:
    """Every fitted histogram gradient-boosting estimator inside ``obj`` (a ShotModel or an estimator)."""
    found: list[Any] = []
    seen: set[int] = set()

    def walk(o: Any, depth: int) -> None:
        if o is None or id(o) in seen or depth > 10:
            return
        seen.add(id(o))
        if isinstance(o, _HGB):
            if hasattr(o, "_predictors"):
                found.append(o)
            return
        if isinstance(o, (list, tuple, dict)):
            for v in (o.values() if isinstance(o, dict) else o):
                walk(v, depth + 1)
            return
        for name in ("classifier", "locator", "timer", "members_", "calibrated_", "calibrated_classifiers_",
                     "estimator", "model_", "models_", "chooser_", "detector_"):
            walk(getattr(o, name, None), depth + 1)

    walk(obj, 0)
    return found


def install(obj: Any) -> int:
    """Give every fitted gradient-boosting estimator inside ``obj`` the flat walk for small batches.

    Idempotent. Estimators the walk cannot handle (categorical splits) are left as they are.

    Returns
    -------
    int
        Number of estimators that now use the flat walk.
    """
    n = 0
    for est in estimators_of(obj):
        if _forest(est) is not None:
            n += 1
            continue
        try:
            forest = _FlatForest(est)
        except ValueError:
            continue
        est.__dict__[_ATTR] = _make_walker(est, forest)
        n += 1
    return n


def uninstall(obj: Any) -> None:
    """Remove the flat walk from every estimator inside ``obj`` (back to scikit-learn's own code)."""
    for est in estimators_of(obj):
        est.__dict__.pop(_ATTR, None)


@contextlib.contextmanager
def detached(obj: Any) -> Iterator[None]:
    """Context in which ``obj`` carries no flat walk (for pickling-like serialisation); restored after."""
    had = [est for est in estimators_of(obj) if _ATTR in est.__dict__]
    uninstall(obj)
    try:
        yield
    finally:
        for est in had:
            install(est)


# ------------------------------------------------------------------------------------------ scoring
def _raw(est: Any, X: np.ndarray) -> np.ndarray | None:
    """The booster's raw prediction (sum of leaves), shape (n, n_trees_per_iteration), or None."""
    forest = _forest(est)
    if forest is None or getattr(est, "_in_fit", False):
        return None
    raw = np.zeros((X.shape[0], est.n_trees_per_iteration_), dtype=est._baseline_prediction.dtype, order="F")
    raw += est._baseline_prediction
    forest.add_to(X, raw)
    return raw


def _calibrate(calibrator: Any, t: np.ndarray) -> np.ndarray | None:
    if isinstance(calibrator, IsotonicRegression):
        t = t.astype(calibrator.X_thresholds_.dtype, copy=False)
        if calibrator.out_of_bounds == "clip":
            t = np.clip(t, calibrator.X_min_, calibrator.X_max_)
        return calibrator.f_(t).astype(t.dtype)
    if type(calibrator).__name__ == "_SigmoidCalibration":
        return expit(-(calibrator.a_ * t + calibrator.b_))
    return None


def _calibrated_proba(cal: CalibratedClassifierCV, X: np.ndarray) -> np.ndarray | None:
    n_classes = cal.classes_.shape[0]
    mean = np.zeros((X.shape[0], n_classes))
    for cc in cal.calibrated_classifiers_:
        if cc.method not in ("sigmoid", "isotonic"):
            return None
        est = getattr(cc.estimator, "estimator", cc.estimator)  # FrozenEstimator -> booster
        if not isinstance(est, HistGradientBoostingClassifier):
            return None
        pred = _raw(est, X)
        if pred is None:
            return None
        proba = np.zeros((X.shape[0], n_classes))
        pos = np.searchsorted(np.unique(cc.classes), est.classes_)
        for class_idx, this_pred, calibrator in zip(pos, pred.T, cc.calibrators, strict=False):
            if n_classes == 2:  # binary: one column, for the second class
                class_idx += 1
            col = _calibrate(calibrator, this_pred)
            if col is None:
                return None
            proba[:, class_idx] = col
        if n_classes == 2:
            proba[:, 0] = 1.0 - proba[:, 1]
        else:
            den = np.sum(proba, axis=1)[:, np.newaxis]
            proba = np.divide(proba, den, out=np.full_like(proba, 1 / n_classes), where=den != 0)
        proba[(1.0 < proba) & (proba <= 1.0 + 1e-5)] = 1.0
        mean += proba
    mean /= len(cal.calibrated_classifiers_)
    return mean


def _member_proba(member: Any, X: np.ndarray) -> np.ndarray | None:
    """Probabilities of one member of a FaultClassifier, or None if the fast path does not know it."""
    if isinstance(member, CalibratedClassifierCV):
        return _calibrated_proba(member, X)
    if isinstance(member, HistGradientBoostingClassifier):
        raw = _raw(member, X)
        if raw is not None:
            return member._loss.predict_proba(raw.ravel() if raw.shape[1] == 1 else raw)
    return None


def score(model: Any, X: np.ndarray, at_instant: Callable[[np.ndarray], np.ndarray] | None = None
          ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """Class probabilities, positions and fault instants of a few feature vectors.

    Parameters
    ----------
    model : detector.model.ShotModel
        A loaded model (the flat walk is installed if it is not yet).
    X : numpy.ndarray of shape (n_samples, n_features)
        Feature vectors (float64, NaN for missing values).
    at_instant : callable, optional
        Maps the timer's instants [us after the front], shape (n_samples,), to the inputs the locator
        takes at them (:func:`detector.features.instant_inputs`); needed by a locator trained on them.

    Returns
    -------
    proba : numpy.ndarray of shape (n_samples, n_classes)
        In ``model.classifier.classes_`` order [1].
    position : numpy.ndarray or None
        Position along the winding [fraction of its length], clipped to 0..1; None without a locator.
    instant_us : numpy.ndarray or None
        Fault instant after the voltage front [us]; None without a timer.
    """
    install(model)
    X = np.ascontiguousarray(X, dtype=np.float64)
    clf = model.classifier
    members = getattr(clf, "members_", None) or [getattr(clf, "calibrated_", None)]
    proba = None
    if X.shape[0] <= SMALL_BATCH and X.shape[1] == getattr(clf, "n_features_in_", -1):
        parts = [_member_proba(m, X) for m in members]
        if all(p is not None for p in parts):
            # the same additions, in the same order, as FaultClassifier.predict_proba
            proba = parts[0]
            for p in parts[1:]:
                proba = proba + p
            if len(parts) > 1:
                proba = proba / len(parts)
        detector = getattr(clf, "detector_", None)
        if proba is not None and detector is not None:  # P(none) from the fault-against-none detector
            from .model import with_detector  # (model imports this module)

            raw_d = _raw(detector, X)
            proba = (None if raw_d is None else
                     with_detector(proba, detector._loss.predict_proba(raw_d.ravel())[:, 0], clf.classes_))
    if proba is None:
        proba = clf.predict_proba(X)

    small = X.shape[0] <= SMALL_BATCH

    def regress(reg: Any, X: np.ndarray = X, booster: Any = None) -> np.ndarray | None:
        # ``booster``: the one of ``reg``'s boosters that answers these rows (a locator's per class)
        if reg is None:
            return None
        est = getattr(reg, "model_", None) if booster is None else booster
        raw = None
        if small and X.shape[1] == getattr(reg, "n_features_in_", -1) and est is not None:
            raw = _raw(est, X)
        if raw is None:
            if booster is not None:
                y = booster.predict(X)
                return y if reg._clip is None else np.clip(y, *reg._clip)
            return reg.predict(X)
        y = est._loss.link.inverse(raw.ravel())
        if hasattr(reg, "choose"):  # the instant: a detector's onset where the scorer trusts one
            chooser = getattr(reg, "chooser_", None)

            def proba(rows: np.ndarray) -> np.ndarray:
                raw_c = _raw(chooser, rows)  # at most SMALL_BATCH pairs reach here
                if raw_c is None:
                    return chooser.predict_proba(rows)
                return chooser._loss.predict_proba(raw_c.ravel() if raw_c.shape[1] == 1 else raw_c)

            return reg.choose(X, y, reg.candidate_scores(X, proba if chooser is not None else None))
        return y if reg._clip is None else np.clip(y, *reg._clip)

    instant = regress(model.timer)
    position = None
    if model.locator is not None:
        extra = at_instant(instant) if at_instant is not None and instant is not None else None
        Xl = model.locator_input(X, instant, extra)
        # each row's booster: that of its most likely fault class (a locator of one booster: that one)
        position = np.full(X.shape[0], np.nan)
        for booster, rows in model.locator.routes(X.shape[0], fault_classes(proba, clf.classes_)):
            if booster is not None and rows.size:
                position[rows] = regress(model.locator, Xl[rows], booster)
    return proba, position, instant


def fault_classes(proba: np.ndarray, classes: Any) -> np.ndarray:
    """The most likely fault class of each row (``none`` left aside) of probabilities in ``classes`` order."""
    names = np.asarray(classes).astype(str)
    faults = np.flatnonzero(names != "none")
    return names[faults][np.argmax(np.asarray(proba)[:, faults], axis=1)]
