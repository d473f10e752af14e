"""Training and evaluation of the model on synthetic data sets.

A data set is a folder written by ``shotcheck synth`` (:mod:`synthetic.dataset`). Feature extraction
runs in parallel over pairs (joblib processes) and is cached in the folder as
``features_v<schema>.npz``, so training and evaluation on the same set extract once.

Training splits by winding design: each synthetic case has its own randomly drawn winding, and the
cross-validation groups by that design (the case's ``unit_id``), so no design is in both the training
and the validation folds.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import time
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ._fastpredict import fault_classes
from ._validation import ShotcheckError
from .features import (
    FEATURE_NAMES,
    INSTANT_INPUT_NAMES,
    INSTANT_INPUTS_REVISION,
    SCHEMA_VERSION,
    extract,
    instant_candidates,
    instant_inputs,
    sharp_onset_after_front_us,
)
from .model import (
    EVENT_CLASSES,
    FaultClassifier,
    InstantRegressor,
    LocationRegressor,
    ShotModel,
    chopped_test,
)
from .scoring import calibrate_thresholds, decisive_exceeded, decisive_thresholds, false_alarm_rate
from .uncertainty import LEVEL, median_interval, proportion_interval, target_status

__all__ = ["extract_dataset", "train", "evaluate", "LabelledFeatures"]

#: Pairs per feature-extraction task.
TASK_SIZE = 50

#: Fewest usable pairs of each class present that :func:`train` accepts (its estimators and folds need
#: some; a useful model needs hundreds).
MIN_PAIRS_PER_CLASS = 6


@dataclasses.dataclass
class LabelledFeatures:
    """Feature matrix of a data set with its labels (one row per pair).

    Attributes
    ----------
    X : numpy.ndarray, shape (n, n_features)
    event : numpy.ndarray of str
    position : numpy.ndarray
        Fault position 0..1 (NaN for none).
    fault_time_us : numpy.ndarray
        True fault instant on the test record's time axis [us] (NaN for none or no ignition).
    onset_us : numpy.ndarray
        Onset of the difference measured by the metrics, on the test record's axis [us] (NaN if none).
    groups : numpy.ndarray of str
        Winding design of each case (for grouped splits).
    labels : list of dict
        Full label rows.
    failed : list of tuple
        (case_id, message) of pairs whose extraction failed.
    effect_lsb : numpy.ndarray or None
        Noise-free size of each fault's effect in recorder codes (inf for benign pairs and for data sets
        without that label; None means all inf).
    front_us : numpy.ndarray or None
        Time of the voltage front (30 % point of the reference) on the test record's axis [us].
    source : str or None
        Data-set folder the rows come from (needed for the locator's inputs at the fault instant,
        which are measured on the records: :func:`instant_inputs_of_dataset`).
    at_instant : numpy.ndarray or None, shape (n, len(INSTANT_INPUT_NAMES))
        Those inputs at a model's instants, where :func:`evaluate` has measured them.
    workers : int or None
        Processes for measuring those inputs (as the features were extracted with; None: all cores).
    """

    X: np.ndarray
    event: np.ndarray
    position: np.ndarray
    fault_time_us: np.ndarray
    onset_us: np.ndarray
    groups: np.ndarray
    labels: list
    failed: list
    effect_lsb: np.ndarray | None = None
    front_us: np.ndarray | None = None
    source: str | None = None
    at_instant: np.ndarray | None = None
    workers: int | None = None

    def __post_init__(self) -> None:
        n = len(self.event)
        self.effect_lsb = np.full(n, np.inf) if self.effect_lsb is None else np.asarray(self.effect_lsb, float)
        self.front_us = np.full(n, np.nan) if self.front_us is None else np.asarray(self.front_us, float)


def _one(ref, test) -> tuple[np.ndarray, tuple[float, float], str | None]:
    """Features, heuristic onset and front time [us, test axis] of one pair, or NaNs and the error."""
    from ._validation import ShotcheckError as _E
    from .compare import _fault_time_pair_s

    try:
        a = extract(ref, test)
    except _E as exc:
        return np.full(len(FEATURE_NAMES), np.nan), (math.nan, math.nan), str(exc)
    t = a.to_test_time_s(_fault_time_pair_s(a))
    return a.features, (math.nan if t is None else 1e6 * t, 1e6 * a.front_test_time_s), None


def _chunk(directory: str, case_ids: list[int]) -> list[tuple[int, np.ndarray, tuple[float, float], str | None]]:
    import warnings

    from synthetic.dataset import load_dataset

    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for ref, test, lab in load_dataset(directory, case_ids=case_ids):
            f, on, err = _one(ref, test)
            out.append((int(lab["case_id"]), f, on, err))
    return out


def _instant_chunk(directory: str, items: list[tuple[int, np.ndarray]]) -> list[tuple[int, np.ndarray]]:
    import warnings

    from synthetic.dataset import load_dataset

    want = dict(items)
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for ref, test, lab in load_dataset(directory, case_ids=list(want)):
            cid = int(lab["case_id"])
            try:
                vals = instant_inputs(extract(ref, test), want[cid])
            except ShotcheckError:
                vals = np.full((want[cid].size, len(INSTANT_INPUT_NAMES)), np.nan)
            out.append((cid, vals))
    return out


def instant_inputs_of_dataset(directory: str | Path, case_ids: np.ndarray, instants_us: np.ndarray, *,
                              workers: int | None = None, progress: bool = True,
                              use_cache: bool = True) -> np.ndarray:
    """The locator's inputs at given fault instants (:func:`detector.features.instant_inputs`) of pairs of
    a data set, measured on their records (one pass, in parallel).

    Parameters
    ----------
    directory : str or Path
        Folder written by ``shotcheck synth``.
    case_ids : numpy.ndarray of int, shape (n,)
        Pairs to measure.
    instants_us : numpy.ndarray, shape (n,) or (n, k)
        Instants of each pair [us after the reference front]; rows without a finite one are skipped.
    workers : int, optional
        Processes; default all cores.
    progress : bool
        Print the time taken on stderr.
    use_cache : bool
        Keep the result in the folder (``instant_inputs_v<schema>_<key>.npz``, keyed by the inputs' names
        and revision, the case ids and the instants) and reuse it.

    Returns
    -------
    numpy.ndarray, shape (n, k, len(INSTANT_INPUT_NAMES))
        NaN where an instant is not finite or the pair could not be measured.
    """
    import hashlib

    from joblib import Parallel, delayed

    from synthetic.dataset import read_labels

    d = Path(directory)
    ids = np.asarray(case_ids, dtype=np.int64).ravel()
    inst = np.asarray(instants_us, dtype=np.float64)
    inst = inst.reshape(ids.size, -1)
    if np.unique(ids).size != ids.size:
        raise ShotcheckError("instant_inputs_of_dataset: the case ids repeat; give each pair once")
    out = np.full((ids.size, inst.shape[1], len(INSTANT_INPUT_NAMES)), np.nan)
    key = hashlib.sha1(f"{INSTANT_INPUTS_REVISION}|{'|'.join(INSTANT_INPUT_NAMES)}".encode() + ids.tobytes()
                       + np.ascontiguousarray(inst).tobytes()).hexdigest()[:16]
    cache = d / f"instant_inputs_v{SCHEMA_VERSION}_{key}.npz"
    if use_cache and cache.is_file():
        z = np.load(cache, allow_pickle=False)
        if z["values"].shape == out.shape:
            return z["values"]
    todo = np.flatnonzero(np.isfinite(inst).any(axis=1))
    if todo.size:
        shard_of = {int(r["case_id"]): int(r["shard"]) for r in read_labels(d)}
        missing = [int(ids[i]) for i in todo if int(ids[i]) not in shard_of]
        if missing:
            raise ShotcheckError(f"{d}: case ids {missing[:5]} are not in labels.csv")
        by_shard: dict[int, list[int]] = {}
        for i in todo:
            by_shard.setdefault(shard_of[int(ids[i])], []).append(int(i))
        tasks = [[(int(ids[i]), inst[i]) for i in rows[j:j + TASK_SIZE]]
                 for rows in by_shard.values() for j in range(0, len(rows), TASK_SIZE)]
        t0 = time.perf_counter()
        results = Parallel(n_jobs=workers or os.cpu_count() or 1, return_as="generator_unordered")(
            delayed(_instant_chunk)(str(d), t) for t in tasks)
        row_of = {int(ids[i]): int(i) for i in todo}
        for chunk in results:
            for cid, vals in chunk:
                out[row_of[cid]] = vals
        if progress:
            print(f"inputs at the instant of {todo.size} pairs in {time.perf_counter() - t0:.1f} s",
                  file=__import__("sys").stderr)
    if use_cache:
        np.savez_compressed(cache, values=out)
    return out


def extract_dataset(directory: str | Path, *, workers: int | None = None, progress: bool = True,
                    use_cache: bool = True) -> LabelledFeatures:
    """Extract (or load cached) features of every pair of a synthetic data set.

    Parameters
    ----------
    directory : str or Path
        Folder written by ``shotcheck synth``.
    workers : int, optional
        Processes; default all cores.
    progress : bool
        Print a progress bar on stderr.
    use_cache : bool
        Reuse ``features_v<schema>.npz`` in the folder when it matches the label table.

    Returns
    -------
    LabelledFeatures

    Raises
    ------
    ShotcheckError
        The folder is not a data set, or not one pair of it could be compared (names the first reason).
    """
    from synthetic.dataset import read_labels

    d = Path(directory)
    if not (d / "labels.csv").is_file():
        raise ShotcheckError(f"{d}: not a data set folder (no labels.csv); make one with `shotcheck synth`")
    labels = read_labels(d)
    ids = [int(r["case_id"]) for r in labels]
    cache = d / f"features_v{SCHEMA_VERSION}.npz"
    X = onset = None
    failed: list[tuple[int, str]] = []
    if use_cache and cache.is_file():
        z = np.load(cache, allow_pickle=False)
        if list(z["case_id"]) == ids and list(z["names"]) == list(FEATURE_NAMES):
            X, onset, front = z["X"], z["onset_us"], z["front_us"]
            failed = [(int(i), str(m)) for i, m in zip(z["failed_id"], z["failed_msg"], strict=True)]
    if X is None:
        from joblib import Parallel, delayed

        n_workers = workers or os.cpu_count() or 1
        # tasks of consecutive cases (each within one shard, so a task reads one shard)
        shards: dict[int, list[int]] = {}
        for r in labels:
            shards.setdefault(int(r["shard"]), []).append(int(r["case_id"]))
        tasks = [cids[i:i + TASK_SIZE] for cids in shards.values() for i in range(0, len(cids), TASK_SIZE)]
        t0 = time.perf_counter()
        results = Parallel(n_jobs=n_workers, return_as="generator_unordered")(
            delayed(_chunk)(str(d), t) for t in tasks
        )
        got: dict[int, tuple[np.ndarray, float, str | None]] = {}
        bar = None
        if progress:
            from tqdm import tqdm

            bar = tqdm(total=len(ids), desc="features", unit="pair", file=__import__("sys").stderr)
        for chunk in results:
            for cid, f, on, err in chunk:
                got[cid] = (f, on, err)
            if bar is not None:
                bar.update(len(chunk))
        if bar is not None:
            bar.close()
        X = np.vstack([got[i][0] for i in ids])
        onset = np.array([got[i][1][0] for i in ids])
        front = np.array([got[i][1][1] for i in ids])
        failed = [(i, got[i][2]) for i in ids if got[i][2] is not None]
        np.savez_compressed(
            cache, X=X, onset_us=onset, front_us=front, case_id=np.array(ids), names=np.array(FEATURE_NAMES),
            failed_id=np.array([f[0] for f in failed], dtype=int), failed_msg=np.array([f[1] for f in failed], dtype=str),
        )
        if progress:
            dt = time.perf_counter() - t0
            print(f"features of {len(ids)} pairs in {dt:.1f} s ({len(ids) / dt:.1f} pairs/s)",
                  file=__import__("sys").stderr)
    event = np.array([str(r["event"]) for r in labels])
    position = np.array([float(r["position"]) if r["position"] not in ("", None) else math.nan for r in labels])
    ft = np.array([float(r["fault_time_us"]) if r["fault_time_us"] not in ("", None) else math.nan for r in labels])
    groups = np.array([f"{r.get('family', '')}-{r.get('seed', '')}-{r['case_id']}" for r in labels])
    if failed and len(failed) == len(ids):
        cid, msg = failed[0]
        raise ShotcheckError(f"{d}: no pair of the data set could be compared ({len(ids)} pairs); the first, case "
                             f"{cid}: {msg}; check the winding family's recorder and record settings")
    out = LabelledFeatures(X, event, position, ft, onset, groups, labels, failed,
                           np.array([_effect(r) for r in labels]), front, source=str(d), workers=workers)
    return out


def _effect(row: dict[str, Any]) -> float:
    """Noise-free size of a fault's effect in recorder codes (largest of current and voltage); inf for none."""
    if row.get("event") == "none":
        return math.inf
    vals = [row.get("effect_current_lsb"), row.get("effect_voltage_lsb")]
    vals = [float(v) for v in vals if v not in (None, "") and math.isfinite(float(v))]
    return max(vals) if vals else math.inf


def _usable(data: LabelledFeatures) -> np.ndarray:
    return np.isfinite(data.X).any(axis=1)


def _subset(data: LabelledFeatures, keep: np.ndarray) -> LabelledFeatures:
    labels = [r for r, k in zip(data.labels, keep, strict=True) if k] if data.labels else []
    rows = {f.name: getattr(data, f.name)[keep] for f in dataclasses.fields(data)
            if f.name not in ("labels", "failed", "source", "workers") and getattr(data, f.name) is not None}
    return LabelledFeatures(labels=labels, failed=data.failed, source=data.source, workers=data.workers, **rows)


#: Faults whose noise-free effect stays below this many recorder codes are invisible to any comparison
#: of records; they are left out of training (they would teach the model that "no difference" can be a
#: fault) and reported apart in the evaluation.
MIN_EFFECT_LSB = 1.0


def class_counts(events: np.ndarray) -> str:
    """Pairs per event class, for messages (``'discharge_only 4, none 5, ...'``, classes sorted)."""
    classes, counts = np.unique(np.asarray(events), return_counts=True)
    return ", ".join(f"{c} {n}" for c, n in zip(classes, counts, strict=True))


def train(data: LabelledFeatures, *, false_alarm_rate_target: float = 0.01, seed: int = 0,
          cv_folds: int = 3, description: str = "", min_effect_lsb: float = MIN_EFFECT_LSB
          ) -> tuple[ShotModel, dict[str, Any]]:
    """Fit thresholds, classifier and locator; report grouped cross-validated figures.

    Parameters
    ----------
    data : LabelledFeatures
        From :func:`extract_dataset`.
    false_alarm_rate_target : float
        Target false-alarm rate of the thresholds on benign pairs [1].
    seed : int
        Seed of the estimators.
    cv_folds : int
        Folds of the grouped cross-validation; 0 skips it, and the decision threshold then stays at
        0.5 instead of being set to ``false_alarm_rate_target`` (quick models for tests only; the CLI
        refuses it).
    description : str
        Training-data description for the model card.

    Returns
    -------
    model : ShotModel
    report : dict
        Cross-validated figures (same keys as :func:`evaluate`).
    """
    from sklearn.model_selection import GroupKFold

    invisible = data.effect_lsb < min_effect_lsb
    n_invisible = int(invisible.sum())
    left_out = class_counts(data.event[invisible]) if n_invisible else ""
    data = _subset(data, _usable(data) & (data.effect_lsb >= min_effect_lsb))
    X, y, pos, groups = data.X, data.event, data.position, data.groups
    if len(set(y)) < 2:
        raise ShotcheckError("the training set needs at least two event classes")
    if np.unique(y, return_counts=True)[1].min() < MIN_PAIRS_PER_CLASS:
        where = f"{data.source}: " if data.source else ""
        why = (f"; {n_invisible} faulted pairs were left out because their effect is under {min_effect_lsb:g} "
               f"recorder code(s) ({left_out}): if most of a class is, its faults are too small to see (for "
               "discharges, the [faults] discharge_charge_C range of the winding family)") if n_invisible else ""
        raise ShotcheckError(f"{where}the training set has too few usable pairs ({class_counts(y)}); at least "
                             f"{MIN_PAIRS_PER_CLASS} of each class present are needed, and hundreds for a "
                             f"useful model (make more with `shotcheck synth --cases N`){why}")
    report: dict[str, Any] = {}
    none_threshold, none_threshold_chopped = 0.5, None
    chopped = chopped_test(X, FEATURE_NAMES)
    rel = data.fault_time_us - data.front_us  # target of the instant regressor [us after the front]
    located = (y != "none") & np.isfinite(pos)
    folds = list(GroupKFold(n_splits=cv_folds).split(X, y, groups)) if cv_folds and cv_folds >= 2 else []
    # the timers come first: the locator learns from instants they did not see fitted, and its inputs
    # at those instants are measured on the records in one pass over the data set
    inst_rel = np.full(y.size, np.nan)  # out-of-fold instants [us after the front]
    nested: list[np.ndarray | None] = []  # per fold: instants of its training rows from timers without them
    fold_timers: list[InstantRegressor | None] = []
    for tr, te in folds:
        ta = (y[tr] != "none") & np.isfinite(rel[tr])
        timer_tr = None
        if ta.sum() >= 10:
            timer_tr = InstantRegressor(random_state=seed, **instant_candidates()).fit(X[tr][ta], rel[tr][ta])
            inst_rel[te] = _instant(X[te], timer_tr)
        fold_timers.append(timer_tr)
        nested.append(_out_of_fold_instants(X[tr], rel[tr], y[tr], groups[tr], seed, cv_folds)
                      if timer_tr is not None and located[tr].sum() >= 10 else None)
    ta = (y != "none") & np.isfinite(rel)
    timer = (InstantRegressor(random_state=seed, **instant_candidates()).fit(X[ta], rel[ta])
             if ta.sum() >= 10 else None)
    # the final locator's instants: the cross-validation's out-of-fold ones when it ran with 3+ folds
    final_inst = inst_rel if len(folds) >= 3 else _out_of_fold_instants(X, rel, y, groups, seed, 3)
    at = None  # inputs at the instants: column 0 final, 1 cross-validated, 2.. nested per fold
    if data.source is not None and data.labels and timer is not None and located.sum() >= 10:
        cols = np.full((y.size, 2 + len(folds)), np.nan)
        cols[:, 0] = final_inst
        cols[:, 1] = inst_rel
        for k, ((tr, _), nk) in enumerate(zip(folds, nested, strict=True)):
            if nk is not None:
                cols[tr, 2 + k] = nk
        cols[~located] = np.nan  # only located faults train the locator or enter its figures
        ids = np.array([int(r["case_id"]) for r in data.labels])
        at = instant_inputs_of_dataset(data.source, ids, cols, workers=data.workers, progress=False)

    def locator_rows(rows: np.ndarray, timer_: InstantRegressor, instants: np.ndarray, col: int) -> np.ndarray:
        Xl = timer_.timing_inputs(X[rows], instants)
        return Xl if at is None else np.concatenate([Xl, at[rows, col]], axis=1)

    if folds:
        proba = np.zeros((y.size, len(EVENT_CLASSES)))
        loc = np.full(y.size, np.nan)
        for k, (tr, te) in enumerate(folds):
            clf = _classifier(seed).fit(X[tr], y[tr])
            p = clf.predict_proba(X[te])
            for j, c in enumerate(clf.classes_):
                proba[te, EVENT_CLASSES.index(str(c))] = p[:, j]
            fa = located[tr]
            if fa.sum() >= 10:
                timer_tr = fold_timers[k]
                if timer_tr is not None and nested[k] is not None:  # instants it did not see fitted
                    Xl_tr = locator_rows(tr, timer_tr, nested[k], 2 + k)
                    Xl_te = locator_rows(te, timer_tr, inst_rel[te], 1)
                else:
                    Xl_tr, Xl_te = X[tr], X[te]
                loc[te] = _locator(seed).fit(Xl_tr[fa], pos[tr][fa], fault_class=y[tr][fa]).predict(
                    Xl_te, fault_classes(proba[te], EVENT_CLASSES))
        none_threshold, none_threshold_chopped = kind_operating_points(proba[:, 0], y == "none", chopped,
                                                                       false_alarm_rate_target)
        pred = cross_fitted_decisions(proba, y == "none", folds, false_alarm_rate_target, X=X, chopped=chopped)
        report = _figures(data, proba, pred, loc, data.front_us + inst_rel)
        report["none_threshold"] = none_threshold
        report["none_threshold_chopped"] = none_threshold_chopped
        report["cv_folds"] = cv_folds
    benign = X[y == "none"]
    thresholds = calibrate_thresholds(benign, false_alarm_rate=false_alarm_rate_target) if benign.shape[0] >= 10 else {}
    if thresholds:
        thresholds.update(decisive_thresholds(benign))
    clf = _classifier(seed).fit(X, y)
    all_rows = np.arange(y.size)
    Xl = locator_rows(all_rows, timer, final_inst, 0) if timer is not None and located.sum() >= 10 else X
    locator = (_locator(seed).fit(Xl[located], pos[located], fault_class=y[located]) if located.sum() >= 10
               else None)
    card = {
        "name": "shotcheck synthetic model",
        "training_data": description,
        "n_pairs": int(y.size),
        "class_counts": {c: int((y == c).sum()) for c in EVENT_CLASSES},
        "n_failed_extractions": len(data.failed),
        "n_invisible_faults_left_out": n_invisible,
        "min_effect_lsb": min_effect_lsb,
        "false_alarm_rate_target": false_alarm_rate_target,
        "threshold_false_alarm_rate_on_training": false_alarm_rate(benign, thresholds) if thresholds else None,
        "cross_validation": {k: v for k, v in report.items() if k != "roc"},
        "none_probability_from": (
            "the four-class models" if getattr(clf, "detector_", None) is None else
            "a booster of fault against none fitted on all training pairs"),
        "locator_inputs": ("features" if locator is None or Xl is X else
                           "features, instant and onset delays" + ("" if at is None else
                                                                   ", " + ", ".join(INSTANT_INPUT_NAMES))),
    }
    card["none_threshold"] = none_threshold
    card["none_threshold_chopped"] = none_threshold_chopped
    model = ShotModel(clf, locator, FEATURE_NAMES, SCHEMA_VERSION, thresholds, card, timer, none_threshold,
                      INSTANT_INPUT_NAMES if at is not None else (), none_threshold_chopped)
    return model, report


#: Boosting iterations of each fault class's locator (three boosters instead of one: capped to keep the
#: model file under 10 MB; grouped 3-fold on the training families 250 iterations located as well as 400).
LOCATOR_ITERATIONS = 250


def _locator(seed: int) -> LocationRegressor:
    """The location regressor as training fits it (a booster per fault class)."""
    return LocationRegressor(random_state=seed, max_iter=LOCATOR_ITERATIONS)


def _classifier(seed: int) -> FaultClassifier:
    """The event classifier as training fits it: P(none) from its fault-against-none detector."""
    return FaultClassifier(random_state=seed, fault_detector=True)


def _out_of_fold_instants(X: np.ndarray, rel: np.ndarray, y: np.ndarray, groups: np.ndarray, seed: int,
                          folds: int) -> np.ndarray:
    """Fault instants [us after the front] of every row from timers fitted without its winding design
    (grouped folds), so that a locator trained on them sees instants as good as in use; NaN where a
    fold had too few faults."""
    from sklearn.model_selection import GroupKFold

    out = np.full(X.shape[0], np.nan)
    k = min(folds, np.unique(groups).size)
    if k < 2:
        return out
    for tr, te in GroupKFold(n_splits=k).split(X, y, groups):
        ta = (y[tr] != "none") & np.isfinite(rel[tr])
        if ta.sum() >= 10:
            out[te] = _instant(X[te], InstantRegressor(random_state=seed, **instant_candidates()).fit(
                X[tr][ta], rel[tr][ta]))
    return out


def _decide(proba: np.ndarray, none_threshold: float | np.ndarray = 0.5, forced: np.ndarray | None = None
            ) -> np.ndarray:
    out = np.empty(proba.shape[0], dtype=object)
    fault = proba[:, 0] < none_threshold
    if forced is not None:  # a decisive feature above its threshold (scoring.DECISIVE)
        fault |= forced
    out[~fault] = "none"
    out[fault] = np.array(EVENT_CLASSES[1:], dtype=object)[np.argmax(proba[fault, 1:], axis=1)]
    return out


def _median_by_class(err: np.ndarray, counted: np.ndarray, y: np.ndarray) -> dict[str, float | None]:
    """Median of ``err`` over the ``counted`` rows of each fault class (None where it has none)."""
    return {c: (float(np.median(err[counted & (y == c)])) if (counted & (y == c)).any() else None)
            for c in EVENT_CLASSES[1:]}


#: Bins of the location error's medians by the fault's effect [recorder codes] and by its position along
#: the winding [fraction from the line end] (``evaluate``'s ``location_error_median_by_effect_lsb`` and
#: ``location_error_median_by_position``).
LOCATION_EFFECT_EDGES_LSB = (0.0, 1.0, 5.0, 10.0, 100.0, math.inf)
LOCATION_POSITION_EDGES = (0.0, 0.2, 0.4, 0.6, 0.8, 1.0)


def _median_by_bins(err: np.ndarray, counted: np.ndarray, value: np.ndarray, edges: Sequence[float]
                    ) -> dict[str, dict[str, Any]]:
    """Median of ``err`` over the ``counted`` rows whose ``value`` lies in each bin ``[lo, hi)`` of
    ``edges`` (the last bin closed), with its count and confidence interval; empty bins left out."""
    out: dict[str, dict[str, Any]] = {}
    for j, (lo, hi) in enumerate(zip(edges[:-1], edges[1:], strict=True)):
        last = j == len(edges) - 2
        sel = counted & (value >= lo) & ((value <= hi) if last else (value < hi))
        if sel.any():
            out[f"{lo:g}-{hi:g}"] = {"n": int(sel.sum()), "median": float(np.median(err[sel])),
                                     "median_interval": _median_ci(err[sel])}
    return out


def _count(hits: np.ndarray) -> dict[str, int]:
    """Successes and trials of a boolean array (``{"k": ..., "n": ...}``)."""
    return {"k": int(np.count_nonzero(hits)), "n": int(hits.size)}


def _rate_interval(hits: np.ndarray) -> list[float] | None:
    """Exact confidence interval of the rate of ``True`` in ``hits`` (None if empty)."""
    return list(proportion_interval(int(np.count_nonzero(hits)), int(hits.size))) if hits.size else None


def _median_ci(values: np.ndarray) -> list[float] | None:
    """Confidence interval of the median of ``values`` (None if too few values)."""
    lo, hi = median_interval(values)
    return None if not (math.isfinite(lo) and math.isfinite(hi)) else [lo, hi]


def _figures(data: LabelledFeatures, proba: np.ndarray, pred: np.ndarray, loc: np.ndarray,
             instant_us: np.ndarray | None = None) -> dict[str, Any]:
    from sklearn.metrics import confusion_matrix, roc_auc_score, roc_curve

    y = data.event
    rep: dict[str, Any] = {"n_pairs": int(y.size), "confidence_level": LEVEL}
    det, det_n, det_ci = {}, {}, {}
    for c in EVENT_CLASSES[1:]:
        hits = pred[y == c] != "none"
        det[c] = float(hits.mean()) if hits.size else None
        det_n[c] = _count(hits)
        det_ci[c] = _rate_interval(hits)
    rep["detection_rate"] = det
    rep["detection_counts"] = det_n
    rep["detection_rate_interval"] = det_ci
    none = y == "none"
    alarms = pred[none] != "none"
    rep["false_alarm_rate"] = float(alarms.mean()) if alarms.size else None
    rep["false_alarm_counts"] = _count(alarms)
    rep["false_alarm_rate_interval"] = _rate_interval(alarms)
    detected = (y != "none") & (pred != "none")
    rep["class_accuracy_on_detected"] = float((pred[detected] == y[detected]).mean()) if detected.any() else None
    rep["class_accuracy_interval"] = _rate_interval(pred[detected] == y[detected])
    rep["confusion_matrix"] = {
        "labels": list(EVENT_CLASSES),
        "counts": confusion_matrix(y, pred.astype(str), labels=list(EVENT_CLASSES)).tolist(),
    }
    fa = detected & np.isfinite(data.position) & np.isfinite(loc)
    loc_err = np.abs(loc - data.position)
    rep["location_error_median"] = float(np.median(loc_err[fa])) if fa.any() else None
    rep["location_error_median_interval"] = _median_ci(loc_err[fa])
    rep["location_error_p90"] = float(np.quantile(loc_err[fa], 0.9)) if fa.any() else None
    # per class: the overall median is that of a mixture, and the classes differ by a factor of three
    rep["location_error_median_by_class"] = _median_by_class(loc_err, fa, y)
    # by the fault's size and by where it sits, to read the target against the effect (as the detection
    # rates by effect) and along the winding
    if data.effect_lsb is not None:
        rep["location_error_median_by_effect_lsb"] = _median_by_bins(loc_err, fa, data.effect_lsb,
                                                                     LOCATION_EFFECT_EDGES_LSB)
    rep["location_error_median_by_position"] = _median_by_bins(loc_err, fa, data.position, LOCATION_POSITION_EDGES)
    est = data.onset_us if instant_us is None else instant_us
    ft = detected & np.isfinite(data.fault_time_us) & np.isfinite(est)
    t_err = np.abs(est - data.fault_time_us)
    rep["fault_time_error_median_us"] = float(np.median(t_err[ft])) if ft.any() else None
    rep["fault_time_error_median_interval_us"] = _median_ci(t_err[ft])
    rep["fault_time_error_p90_us"] = float(np.quantile(t_err[ft], 0.9)) if ft.any() else None
    rep["fault_time_error_median_us_by_class"] = _median_by_class(t_err, ft, y)
    rep["fault_time_found_share"] = float(ft.sum() / max(1, detected.sum()))
    score = 1.0 - proba[:, 0]
    if none.any() and (~none).any():
        fpr, tpr, _ = roc_curve(~none, score)
        rep["roc_auc"] = float(roc_auc_score(~none, score))
        rep["roc"] = {"fpr": fpr.tolist(), "tpr": tpr.tolist()}
        # where the model's own decision lies (its thresholds per kind of test shot and the decisive
        # features; the curve sweeps one threshold on P(none) over all pairs)
        rep["operating_point"] = {"false_alarm_rate": float(alarms.mean()),
                                  "detection_rate": float(((y != "none") & (pred != "none")).sum() / (~none).sum())}
    return rep


def evaluate(model: ShotModel, data: LabelledFeatures, *, min_effect_lsb: float = MIN_EFFECT_LSB) -> dict[str, Any]:
    """Figures of a model on a labelled set (held out from its training).

    Returns
    -------
    dict
        ``detection_rate`` per class, ``false_alarm_rate``, ``class_accuracy_on_detected``,
        ``confusion_matrix``, ``location_error_median`` (fraction of the winding), ``location_error_p90``,
        ``location_error_median_by_class``, ``location_error_median_by_effect_lsb`` and
        ``location_error_median_by_position`` (bins of :data:`LOCATION_EFFECT_EDGES_LSB` and
        :data:`LOCATION_POSITION_EDGES`, each with its count and interval),
        ``fault_time_error_median_us``, ``fault_time_error_p90_us``,
        ``fault_time_error_median_us_by_class`` (each per fault class, over its detected faults),
        ``roc_auc``, ``roc``,
        ``threshold_false_alarm_rate``, ``detection_by_effect_lsb`` (all faults by the size of their
        effect in recorder codes), ``by_comparison`` (false alarms and detection per kind of
        comparison: full or chopped reference and test shots), and the model's decision thresholds
        ``none_threshold`` and ``none_threshold_chopped`` (None with one threshold for all) [1].
        Rates come with their counts (``detection_counts``, ``false_alarm_counts``: ``k`` of ``n``)
        and exact confidence intervals at ``confidence_level`` (``*_interval``, [low, high]), medians
        with distribution-free ones (:mod:`detector.uncertainty`); ``targets`` reads each of
        :data:`QUALITY_TARGETS` against its interval (:func:`target_checks`).
    """
    ok = _usable(data)
    n_failed = int((~ok).sum())
    full = _subset(data, ok)
    if model.locator_at_instant and full.at_instant is None:  # measured on the records, at the model's instants
        if full.source is None or not full.labels:
            raise ShotcheckError("this model's locator takes inputs measured on the records at the fault "
                                 "instant; evaluate it on a data-set folder (shotcheck evaluate MODEL DATA)")
        inst = _instant(full.X, model.timer)
        inst[~((full.event != "none") & np.isfinite(full.position))] = np.nan  # only faults are located
        ids = np.array([int(r["case_id"]) for r in full.labels])
        full.at_instant = instant_inputs_of_dataset(full.source, ids, inst, workers=full.workers, progress=False)[:, 0]
    rep = _evaluate_subset(model, _subset(full, full.effect_lsb >= min_effect_lsb))
    rep["min_effect_lsb"] = min_effect_lsb
    rep["n_failed_extractions"] = n_failed
    rep["none_threshold"] = float(model.none_threshold)
    rep["none_threshold_chopped"] = (None if model.none_threshold_chopped is None
                                     else float(model.none_threshold_chopped))
    rep["all_faults_including_invisible"] = {
        k: v for k, v in _evaluate_subset(model, full).items() if k in ("detection_rate", "n_pairs")
    }
    rep["detection_by_effect_lsb"] = _by_effect(model, full)
    rep["by_comparison"] = _by_comparison(model, _subset(full, full.effect_lsb >= min_effect_lsb))
    rep["targets"] = target_checks(rep)
    return rep


#: The quality the bundled model is to reach on a held-out set (README, "Measured quality of the bundled
#: model"): name, the evaluation report's value and interval keys, the target, and which side is good.
QUALITY_TARGETS: tuple[tuple[str, tuple[str, ...], tuple[str, ...], float, str], ...] = (
    ("detection rate, turn_to_turn", ("detection_rate", "turn_to_turn"),
     ("detection_rate_interval", "turn_to_turn"), 0.98, "higher"),
    ("detection rate, to_ground", ("detection_rate", "to_ground"), ("detection_rate_interval", "to_ground"),
     0.98, "higher"),
    ("detection rate, discharge_only", ("detection_rate", "discharge_only"),
     ("detection_rate_interval", "discharge_only"), 0.95, "higher"),
    ("false alarms on benign pairs", ("false_alarm_rate",), ("false_alarm_rate_interval",), 0.01, "lower"),
    ("class accuracy on detected faults", ("class_accuracy_on_detected",), ("class_accuracy_interval",), 0.95,
     "higher"),
    ("median fault-instant error [us]", ("fault_time_error_median_us",), ("fault_time_error_median_interval_us",),
     0.5, "lower"),
    ("median location error [winding length]", ("location_error_median",), ("location_error_median_interval",),
     0.05, "lower"),
)


def _dig(rep: Mapping[str, Any], keys: Sequence[str]) -> Any:
    for k in keys:
        if not isinstance(rep, Mapping) or rep.get(k) is None:
            return None
        rep = rep[k]
    return rep


def target_checks(rep: Mapping[str, Any]) -> list[dict[str, Any]]:
    """Each of :data:`QUALITY_TARGETS` against an evaluation report, with its confidence interval.

    Parameters
    ----------
    rep : mapping
        From :func:`evaluate` (or the figures of :func:`train`).

    Returns
    -------
    list of dict
        Per target: ``figure`` (name), ``target``, ``better`` ("higher" or "lower"), ``measured``,
        ``interval`` ([low, high], or None), and ``status``: "met" or "not met" when the whole interval
        lies on one side of the target, "undecided" when it straddles it (the set is too small to
        tell), "not measured" when the report lacks the figure.
    """
    out = []
    for name, value_keys, ci_keys, target, better in QUALITY_TARGETS:
        v, ci = _dig(rep, value_keys), _dig(rep, ci_keys)
        if v is None:
            status = "not measured"
        elif ci is None:
            status = "undecided"
        else:
            status = target_status(float(ci[0]), float(ci[1]), target, better)  # type: ignore[arg-type]
        out.append({"figure": name, "target": target, "better": better, "measured": v, "interval": ci,
                    "status": status})
    return out


#: Names of the three comparisons a test sequence makes, by the labels' reference and test shot kinds.
COMPARISONS: dict[tuple[str, str], str] = {
    ("reduced", "full"): "full reference, full test",
    ("reduced", "chopped"): "full reference, chopped test",
    ("chopped", "chopped"): "chopped reference, chopped test",
}


def _comparison_kinds(labels: Sequence[Mapping[str, Any]]) -> np.ndarray:
    """Name of each pair's kind of comparison (:data:`COMPARISONS`), '' where the labels do not say."""
    return np.array([COMPARISONS.get((str(r.get("reference_kind", "")), str(r.get("test_kind", ""))), "")
                     for r in labels])


def _by_comparison(model: ShotModel, data: LabelledFeatures) -> dict[str, Any]:
    """False alarms and detection rate per fault class for each kind of comparison (full or chopped shots).

    The kind comes from the label columns ``reference_kind`` and ``test_kind``; pairs without them are
    left out.
    """
    if data.X.shape[0] == 0 or not data.labels:
        return {}
    kind = _comparison_kinds(data.labels)
    _, pred = _predict(model, data.X)
    out: dict[str, Any] = {}
    for name in COMPARISONS.values():
        sel = kind == name
        if not sel.any():
            continue
        entry: dict[str, Any] = {"n_pairs": int(sel.sum())}
        benign = sel & (data.event == "none")
        alarms = pred[benign] != "none"
        entry["false_alarm_rate"] = float(alarms.mean()) if alarms.size else None
        entry["false_alarm_counts"] = _count(alarms)
        entry["false_alarm_rate_interval"] = _rate_interval(alarms)
        entry["detection_rate"], entry["detection_counts"], entry["detection_rate_interval"] = {}, {}, {}
        for c in EVENT_CLASSES[1:]:
            hits = pred[sel & (data.event == c)] != "none"
            entry["detection_rate"][c] = float(hits.mean()) if hits.size else None
            entry["detection_counts"][c] = _count(hits)
            entry["detection_rate_interval"][c] = _rate_interval(hits)
        out[name] = entry
    return out


def _instant(X: np.ndarray, timer: InstantRegressor) -> np.ndarray:
    """Fault instant after the front [us]: the timer's, or for a timer without onset candidates (a model
    file written before they existed) agreeing sharp onsets where there are, else its regression."""
    if timer.chooses:
        return timer.predict(X)
    sharp = sharp_onset_after_front_us(X)
    return np.where(np.isfinite(sharp), sharp, timer.predict(X))


def cross_fitted_decisions(proba: np.ndarray, benign: np.ndarray, folds: list[tuple[np.ndarray, np.ndarray]],
                           false_alarm_rate: float, *, X: np.ndarray | None = None,
                           chopped: np.ndarray | None = None) -> np.ndarray:
    """Decisions for the cross-validated figures, each fold's at a threshold set without its rows.

    The model's thresholds are set on all out-of-fold benign probabilities (:func:`operating_point`, or
    :func:`kind_operating_points` for each kind of test shot); scored
    on those same rows, the false-alarm rate could never exceed the target. Here the rows of each fold are
    decided at the threshold the other folds' benign rows give, so the reported false-alarm rate (and the
    detection rates beside it) is measured, not met by construction.

    Parameters
    ----------
    proba : numpy.ndarray, shape (n, len(EVENT_CLASSES))
        Out-of-fold class probabilities, columns in :data:`EVENT_CLASSES` order (``none`` first).
    benign : numpy.ndarray of bool, shape (n,)
        Rows without a fault.
    folds : list of (train_rows, test_rows)
        The cross-validation's folds (each row in one test part).
    false_alarm_rate : float
        Target share of benign pairs indicated as faults [1].
    X : numpy.ndarray, shape (n, len(FEATURE_NAMES)), optional
        Feature matrix: with it, each fold's rows are also faults where a decisive feature exceeds the
        threshold the other folds' benign rows give (:func:`detector.scoring.decisive_thresholds`).
    chopped : numpy.ndarray of bool, shape (n,), optional
        Rows whose test shot is chopped (:func:`detector.model.chopped_test`): with it, each kind of
        comparison is decided at its own threshold as the model sets them (:func:`kind_operating_points`).

    Returns
    -------
    numpy.ndarray of str (object), shape (n,)
        Decided event of each row.
    """
    pred = np.empty(proba.shape[0], dtype=object)
    if chopped is None:  # one kind: kind_operating_points gives the one threshold over all benign rows
        chopped = np.zeros(proba.shape[0], dtype=bool)
    for tr, te in folds:
        thr_full, thr_chopped = kind_operating_points(proba[tr, 0], benign[tr], chopped[tr], false_alarm_rate)
        thr = np.where(chopped[te], thr_full if thr_chopped is None else thr_chopped, thr_full)
        forced = None
        if X is not None and benign[tr].any():
            forced = decisive_exceeded(X[te], decisive_thresholds(X[tr][benign[tr]]))
        pred[te] = _decide(proba[te], thr, forced)
    return pred


def operating_point(p_none_benign: np.ndarray, false_alarm_rate: float) -> float:
    """Decision threshold on P(none) that cross-validated benign pairs fall below at most at the given rate.

    Parameters
    ----------
    p_none_benign : numpy.ndarray
        Cross-validated probability of ``none`` of benign pairs.
    false_alarm_rate : float
        Target share of benign pairs indicated as faults [1].

    Returns
    -------
    float
        Threshold in (0, 0.5]: a fault is indicated when P(none) is below it.
    """
    p = np.sort(np.asarray(p_none_benign, dtype=float))
    if p.size == 0:
        return 0.5
    k = int(math.floor(false_alarm_rate * p.size))  # at most k benign pairs below the threshold
    thr = float(p[k]) if k < p.size else 0.5
    return float(min(max(thr, 1e-6), 0.5))


#: Fewest benign pairs of each kind of comparison (full or chopped test shot), in false alarms' worth at
#: the target rate, for each kind to get its own threshold: 10 (1000 pairs at 1 %), so that the tail
#: it is set in holds ten pairs, not one or two.
MIN_FALSE_ALARMS_PER_KIND = 10


def kind_operating_points(p_none: np.ndarray, benign: np.ndarray, chopped: np.ndarray, false_alarm_rate: float
                          ) -> tuple[float, float | None]:
    """Thresholds on P(none) for comparisons of a full and of a chopped test shot, each at the target rate.

    Chopped test shots hold more that no prediction from a full or chopped reference fully explains
    (the chop's oscillation, chopping-time scatter), so one threshold over both kinds gives them more
    than the target rate of false alarms and full shots fewer (cross-validated on the bundled training
    set: 1.6 % against 0.4 %). Each kind's own threshold keeps the rate for each, whatever the
    share of chopped shots in the training set or in a lab's use.

    Parameters
    ----------
    p_none : numpy.ndarray, shape (n,)
        Cross-validated probability of ``none`` of each row [1].
    benign : numpy.ndarray of bool, shape (n,)
        Rows without a fault.
    chopped : numpy.ndarray of bool, shape (n,)
        Rows whose test shot is chopped (:func:`detector.model.chopped_test`).
    false_alarm_rate : float
        Target share of benign pairs indicated as faults, for each kind [1].

    Returns
    -------
    none_threshold : float
        For full test shots; for all comparisons when the second value is None [1].
    none_threshold_chopped : float or None
        For chopped test shots [1]; None when either kind has fewer than
        ``MIN_FALSE_ALARMS_PER_KIND / false_alarm_rate`` benign pairs (then one threshold over all).
    """
    p_none = np.asarray(p_none, dtype=float)
    benign = np.asarray(benign, dtype=bool)
    chopped = np.asarray(chopped, dtype=bool)
    need = MIN_FALSE_ALARMS_PER_KIND / max(false_alarm_rate, 1e-12)
    if min(int((benign & chopped).sum()), int((benign & ~chopped).sum())) < need:
        return operating_point(p_none[benign], false_alarm_rate), None
    return (operating_point(p_none[benign & ~chopped], false_alarm_rate),
            operating_point(p_none[benign & chopped], false_alarm_rate))


def threshold_notes(data: LabelledFeatures, false_alarm_rate: float) -> list[str]:
    """What the data set's benign pairs allow the decision thresholds to be, in words for the trainer.

    Parameters
    ----------
    data : LabelledFeatures
        The training set.
    false_alarm_rate : float
        Target share of benign pairs indicated as faults [1].

    Returns
    -------
    list of str
        A note when the benign pairs are too few for the threshold to rest on
        :data:`MIN_FALSE_ALARMS_PER_KIND` false alarms' worth, and when either kind of test shot (full,
        chopped) has too few for a threshold of its own (then one serves both).
    """
    ok = _usable(data)
    benign = (data.event == "none") & ok
    chopped = chopped_test(data.X, FEATURE_NAMES)
    need = int(math.ceil(MIN_FALSE_ALARMS_PER_KIND / max(false_alarm_rate, 1e-12)))
    n_b, n_c = int(benign.sum()), int((benign & chopped).sum())
    notes = []
    if n_b < need:
        k = int(math.floor(false_alarm_rate * n_b))
        notes.append(f"only {n_b} benign pairs: at a false-alarm rate of {false_alarm_rate:g} the threshold rests on "
                     f"{k} of them below it (the {'lowest' if k == 0 else f'{k + 1}th lowest'} P(none)), so the rate a "
                     f"lab will see is uncertain; make at least {need} benign pairs ({4 * need} pairs in all, the "
                     "classes are balanced)")
    if min(n_c, n_b - n_c) < need:
        notes.append(f"one threshold for full and chopped test shots: each kind needs {need} benign pairs for its own "
                     f"(this set has {n_b - n_c} full and {n_c} chopped); chopped test shots then raise more false "
                     "alarms than the target rate and full ones fewer")
    return notes


def _predict(model: ShotModel, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    p = model.classifier.predict_proba(X)
    proba = np.zeros((X.shape[0], len(EVENT_CLASSES)))
    for k, c in enumerate(model.classifier.classes_):
        proba[:, EVENT_CLASSES.index(str(c))] = p[:, k]
    return proba, _decide(proba, model.none_thresholds(X), decisive_exceeded(X, model.thresholds))


def _by_effect(model: ShotModel, data: LabelledFeatures) -> dict[str, Any]:
    """Detection rate of faults by the size of their effect in recorder codes."""
    if data.X.shape[0] == 0:
        return {}
    _, pred = _predict(model, data.X)
    out: dict[str, Any] = {}
    edges = [0.0, 0.5, 1.0, 2.0, 5.0, 10.0, 100.0, math.inf]
    fault = data.event != "none"
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        sel = fault & (data.effect_lsb >= lo) & (data.effect_lsb < hi)
        if sel.any():
            out[f"{lo:g}-{hi:g}"] = {"n": int(sel.sum()), "detected": float((pred[sel] != "none").mean()),
                                     "detected_interval": _rate_interval(pred[sel] != "none")}
    return out


def _evaluate_subset(model: ShotModel, data: LabelledFeatures) -> dict[str, Any]:
    X = data.X
    sub = data
    if X.shape[0] == 0:
        return {"n_pairs": 0}
    proba, pred = _predict(model, X)
    rel_inst = _instant(X, model.timer) if model.timer is not None else None
    loc = (model.locator.predict(model.locator_input(X, rel_inst, sub.at_instant), fault_classes(proba, EVENT_CLASSES))
           if model.locator is not None else np.full(X.shape[0], np.nan))
    inst = (data.front_us + rel_inst) if rel_inst is not None else None
    rep = _figures(sub, proba, pred, loc, inst)
    benign = X[sub.event == "none"]
    if model.thresholds and benign.shape[0]:
        rep["threshold_false_alarm_rate"] = false_alarm_rate(benign, model.thresholds)
    return rep


def report_text(rep: dict[str, Any]) -> str:
    """Readable summary of an evaluation report."""
    lines = []
    dr = rep.get("detection_rate", {})
    level = rep.get("confidence_level")
    lines.append(f"pairs evaluated: {rep.get('n_pairs')}"
                 + ("" if level is None else f" (in brackets: {100 * level:g} % confidence interval, count)"))
    allf = rep.get("all_faults_including_invisible") or {}
    if allf.get("n_pairs") is not None and rep.get("n_pairs") is not None and allf["n_pairs"] > rep["n_pairs"]:
        # the faults no comparison of records can see are left out of the figures below: say how many,
        # and what detection is with them
        lines.append(f"left out: {allf['n_pairs'] - rep['n_pairs']} faulted pairs whose effect is under "
                     f"{rep.get('min_effect_lsb', 1):g} recorder code(s) (noise-free); detection with them: "
                     + ", ".join(f"{c} {'-' if v is None else f'{v:.3f}'}"
                                 for c, v in (allf.get("detection_rate") or {}).items()))

    def _ci(ci: Sequence[float] | None, counts: Mapping[str, int] | None = None, unit: str = "") -> str:
        out = "" if ci is None else f"  [{ci[0]:.3f}, {ci[1]:.3f}]{unit}"
        return out + ("" if counts is None else f"  {counts['k']} of {counts['n']}")

    for c, v in dr.items():
        lines.append(f"detection rate {c:<15} {'-' if v is None else f'{v:.3f}'}"
                     + _ci((rep.get("detection_rate_interval") or {}).get(c), (rep.get("detection_counts") or {}).get(c)))
    far = rep.get("false_alarm_rate")
    lines.append(f"false alarms on benign pairs   {'-' if far is None else f'{far:.3f}'}"
                 + _ci(rep.get("false_alarm_rate_interval"), rep.get("false_alarm_counts")))
    acc = rep.get("class_accuracy_on_detected")
    lines.append(f"class accuracy on detected     {'-' if acc is None else f'{acc:.3f}'}"
                 + _ci(rep.get("class_accuracy_interval")))
    for k, lab, ci_key in (("location_error_median", "median location error", "location_error_median_interval"),
                           ("fault_time_error_median_us", "median fault-instant error",
                            "fault_time_error_median_interval_us"),
                           ("roc_auc", "ROC AUC (fault vs none)", "")):
        v = rep.get(k)
        unit = " us" if k.endswith("_us") and v is not None else ""
        lines.append(f"{lab:<31}{'-' if v is None else f'{v:.3f}'}{unit}" + _ci(rep.get(ci_key), unit=unit))
        per = rep.get(f"{k}_by_class")
        if per:
            lines.append(" " * 31 + "by class: " + ", ".join(
                f"{c} {'-' if x is None else f'{x:.3f}'}{unit if x is not None else ''}" for c, x in per.items()))
        for key, title in (("by_effect_lsb", "by effect [codes]"), ("by_position", "by position")):
            bins = rep.get(f"{k}_{key}")
            if bins:
                lines.append(" " * 31 + f"{title}: " + ", ".join(
                    f"{b} {e['median']:.3f} ({e['n']})" for b, e in bins.items()))
    if rep.get("none_threshold") is not None:
        thr = rep["none_threshold"]
        chop = rep.get("none_threshold_chopped")
        lines.append("fault indicated below P(none) " + (f"{thr:.4f}" if chop is None else
                                                         f"{thr:.4f} (full test shots), {chop:.4f} (chopped)"))
    byc = rep.get("by_comparison")
    if byc:
        classes = list(next(iter(byc.values()))["detection_rate"])
        lines.append(f"by comparison ({'pairs, false alarms, ' + ', '.join(classes)}):")
        for name, e in byc.items():
            vals = [e["false_alarm_rate"], *e["detection_rate"].values()]
            lines.append(f"  {name:<32}{e['n_pairs']:>6d}" + "".join(
                f"{'-' if v is None else f'{v:.3f}':>8}" for v in vals)
                + ("" if e.get("false_alarm_rate_interval") is None else
                   f"   false alarms{_ci(e['false_alarm_rate_interval'], e.get('false_alarm_counts'))}"))
    tg = rep.get("targets")
    if tg:
        lines.append("targets (met / not met: the whole interval on one side; undecided: too few pairs to tell):")
        for t in tg:
            side = ">=" if t["better"] == "higher" else "<="
            lines.append(f"  {t['figure']:<40} {side} {t['target']:<6g} {t['status']}")
    cm = rep.get("confusion_matrix")
    if cm:
        labs = cm["labels"]
        lines.append("confusion matrix (rows true, columns predicted): " + ", ".join(labs))
        for lab, row in zip(labs, cm["counts"], strict=True):
            lines.append(f"  {lab:<15}" + "".join(f"{n:>8d}" for n in row))
    return "\n".join(lines)


def save_report(rep: dict[str, Any], path: str | Path) -> None:
    """Write a report as JSON."""
    Path(path).write_text(json.dumps(rep, indent=2), encoding="utf-8")


def plot_roc(rep: dict[str, Any], path: str | Path) -> None:
    """Write the ROC curve (fault vs none) of an evaluation report as a PNG figure.

    Parameters
    ----------
    rep : dict
        From :func:`evaluate` (needs ``roc``; ``operating_point``, where given, is marked: the false-alarm
        and detection rates of the model's own decisions, which the curve of one threshold on P(none)
        need not pass through).
    path : str or Path
        PNG file.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    roc = rep.get("roc")
    if not roc:
        raise ShotcheckError("the evaluation has no ROC curve (it needs both benign and faulted pairs)")
    fig, ax = plt.subplots(figsize=(5, 4.5))
    ax.plot(roc["fpr"], roc["tpr"], color="#0072B2", lw=2, label=f"AUC {rep.get('roc_auc', float('nan')):.3f}")
    # chance: detection rate equal to the false-alarm rate, drawn through many points (two points joined
    # by a straight line on the symlog axis would show 0.5 detection at 1 % false alarms)
    chance = np.linspace(0.0, 1.0, 1001)
    ax.plot(chance, chance, color="#999999", ls=":", lw=1, label="chance")
    op = rep.get("operating_point")
    if op:
        ax.plot([op["false_alarm_rate"]], [op["detection_rate"]], ls="none", marker="o", ms=7, color="#D55E00",
                label=f"the model's decisions ({op['false_alarm_rate']:.3f}, {op['detection_rate']:.3f})")
    ax.set_xscale("symlog", linthresh=0.01)
    ax.set_xlabel("false-alarm rate on benign pairs [1]")
    ax.set_ylabel("detection rate of faults [1]")
    ax.set_title("fault vs none")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="lower right")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def sensitivity_family(shorted_turns: int, *, base: str = "power") -> dict[str, Any]:
    """Winding family of 1000 turns (40 sections of 25) recorded at 12 bits, 100 MS/s, with only healthy
    pairs and shorts of exactly ``shorted_turns`` turns inside one section (as a TOML-like dict)."""
    import tomllib

    from synthetic.scenario import DESIGN_DIR

    doc = tomllib.loads((DESIGN_DIR / f"{base}.toml").read_text(encoding="utf-8"))
    doc["family"] = {"name": f"sensitivity_{shorted_turns}", "description": "1000-turn sensitivity study"}
    doc["winding"].update(sections=40, turns_per_section=25)
    doc["recorder"].update(sample_rate_Hz=[100e6], bits=[12])
    doc["faults"].update(classes=["none", "turn_to_turn"], shorted_turns=shorted_turns, section_short_fraction=0.0)
    return doc


def sensitivity_turns(model: ShotModel, out_dir: str | Path, *, turns: Sequence[int] = (1, 2, 3, 5, 10),
                      cases: int = 40, seed: int = 11, workers: int | None = None) -> dict[str, Any]:
    """Detection rate of one-section shorts of a few turns in a 1000-turn winding at 12 bits, 100 MS/s.

    Parameters
    ----------
    model : ShotModel
        Model to evaluate.
    out_dir : str or Path
        Folder for the simulated data sets (one per number of turns).
    turns : sequence of int
        Numbers of shorted turns.
    cases : int
        Pairs per number of turns (half healthy, half faulted).
    seed : int
        Root seed.
    workers : int, optional
        Processes.

    Returns
    -------
    dict
        Per number of turns: ``fraction_of_winding``, ``detected`` (share of faulted pairs indicated),
        ``false_alarms`` (share of healthy pairs indicated), ``n``, ``by_comparison`` (detected share
        and number of faulted pairs per kind of comparison, see :data:`COMPARISONS`), the counts and
        exact confidence intervals of both shares (``detected_counts``, ``detected_interval``,
        ``false_alarm_counts``, ``false_alarms_interval``); ``smallest_detected_95`` (turns: the
        smallest short detected in at least 95 % of its pairs) and ``smallest_shown_95`` (turns: the
        smallest whose interval's lower bound reaches 95 %, None if none), at ``confidence_level``.
    """
    import tomllib  # noqa: F401  (documented dependency of sensitivity_family)

    from synthetic.dataset import generate
    from synthetic.scenario import family_from_dict

    out = Path(out_dir)
    res: dict[str, Any] = {"per_turns": {}}
    smallest = confident = None
    for k in turns:
        d = out / f"turns_{k}"
        if not (d / "labels.csv").is_file():
            fam = family_from_dict(sensitivity_family(k), source=f"sensitivity({k} turns)")
            toml_path = out / f"turns_{k}.toml"
            out.mkdir(parents=True, exist_ok=True)
            toml_path.write_text(_to_toml(sensitivity_family(k)), encoding="utf-8")
            del fam
            generate(cases, d, seed=seed + k, design_file=toml_path, workers=workers, progress=False)
        data = extract_dataset(d, workers=workers, progress=False)
        _, pred = _predict(model, data.X)
        fault = data.event != "none"
        hits, alarms = pred[fault] != "none", pred[~fault] != "none"
        det = float(hits.mean()) if hits.size else math.nan
        fa = float(alarms.mean()) if alarms.size else math.nan
        kind = _comparison_kinds(data.labels)
        by = {}
        for name in COMPARISONS.values():
            found = pred[fault & (kind == name)] != "none"
            if found.size:
                by[name] = {"n_faults": int(found.size), "detected": float(found.mean())}
        det_ci = _rate_interval(hits)
        res["per_turns"][str(k)] = {"fraction_of_winding": k / 1000.0, "detected": det, "false_alarms": fa,
                                    "n": int(data.X.shape[0]), "by_comparison": by,
                                    "detected_counts": _count(hits), "detected_interval": det_ci,
                                    "false_alarm_counts": _count(alarms),
                                    "false_alarms_interval": _rate_interval(alarms)}
        if smallest is None and det >= 0.95:
            smallest = k
        if confident is None and det_ci is not None and det_ci[0] >= 0.95:
            confident = k
    res["smallest_detected_95"] = smallest
    res["smallest_shown_95"] = confident
    res["confidence_level"] = LEVEL
    return res


def _to_toml(doc: dict[str, Any]) -> str:
    """Minimal TOML writer for a family dict (tables of numbers, strings and lists)."""
    def val(v: Any) -> str:
        if isinstance(v, str):
            return json.dumps(v)
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, list | tuple):
            return "[" + ", ".join(val(x) for x in v) + "]"
        return repr(float(v)) if isinstance(v, float) else str(v)

    lines = []
    for table, items in doc.items():
        lines.append(f"[{table}]")
        lines += [f"{k} = {val(v)}" for k, v in items.items()]
        lines.append("")
    return "\n".join(lines)
