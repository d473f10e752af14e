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
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from typing import Any

import numpy as np
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor

__all__ = ["SMALL_BATCH", "install", "uninstall", "estimators_of", "detached"]

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
        self.left = np.where(self.leaf, 0, nodes["left"].astype(np.intp) + shift)
        self.right = np.where(self.leaf, 0, nodes["right"].astype(np.intp) + shift)
        self.value = nodes["value"].astype(np.float64)
        self.depth = int(nodes["depth"].max())
        # trees of output k, in iteration order (scikit-learn adds them in that order)
        k_of_tree = np.tile(np.arange(n_k), len(per_iter))
        self.trees_of = [np.flatnonzero(k_of_tree == k) for k in range(n_k)]

    def add_to(self, X: np.ndarray, raw: np.ndarray) -> None:
        """Add the leaf values of every tree for the rows of ``X`` to ``raw`` (n_samples, n_outputs)."""
        n = X.shape[0]
        node = np.broadcast_to(self.roots, (n, self.roots.size)).copy()
        rows = np.arange(n)[:, None]
        for _ in range(self.depth):
            inner = ~self.leaf[node]
            if not inner.any():
                break
            xv = X[rows, self.feature[node]]
            with np.errstate(invalid="ignore"):
                go_left = np.where(np.isnan(xv), self.missing_left[node], xv <= self.threshold[node])
            node = np.where(inner, np.where(go_left, self.left[node], self.right[node]), node)
        values = self.value[node]
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

    _predict_iterations._shotcheck_flat = True  # type: ignore[attr-defined]
    return _predict_iterations


def estimators_of(obj: Any) -> list[Any]:
    """Every fitted histogram gradient-boosting estimator inside ``obj`` (a ShotModel or an estimator)."""
    found: list[Any] = []
    seen: set[int] = set()

    def walk(o: Any, depth: int) -> None:
        if o is None or id(o) in seen or depth > 6:
            return
        seen.add(id(o))
        if isinstance(o, _HGB):
            if hasattr(o, "_predictors"):
                found.append(o)
            return
        if isinstance(o, (list, tuple)):
            for v in o:
                walk(v, depth + 1)
            return
        for name in ("classifier", "locator", "timer", "calibrated_", "calibrated_classifiers_", "estimator",
                     "model_"):
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
        current = est.__dict__.get(_ATTR)
        if current is not None and getattr(current, "_shotcheck_flat", False):
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
