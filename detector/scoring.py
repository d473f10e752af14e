"""Thresholds on the difference metrics, calibrated on benign pairs to a stated false-alarm rate.

A thresholded feature grows with the difference between the reference and the test record (a larger
value means less alike). :func:`calibrate_thresholds` chooses one common quantile level ``q`` of the
benign (label ``none``) distribution of every thresholded feature such that the share of benign pairs
exceeding *any* threshold is at most the target rate; so the thresholds alone keep the stated
false-alarm rate on pairs like the calibration set. :func:`exceeded` lists which metrics of one pair
exceed their thresholds and by how much, so the engineer sees why a verdict was reached.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ._validation import ShotcheckError, check_range
from .features import FEATURE_NAMES

__all__ = ["THRESHOLDED", "DECISIVE", "DECISIVE_MIN_SIGMA", "calibrate_thresholds", "decisive_thresholds",
           "decisive_exceeded", "exceeded", "false_alarm_rate"]

#: Thresholded features and what they measure (all grow with the difference).
THRESHOLDED: Mapping[str, str] = {
    "td_i_max_sigma": "largest neutral-current difference, in noise standard deviations",
    "td_v_max_sigma": "largest voltage difference, in noise standard deviations",
    "td_i_max_percent": "largest neutral-current difference, in % of the reference peak",
    "tf_rms_dB": "RMS difference of the transfer-function magnitudes [dB]",
    "tf_low_rms_dB": "RMS transfer-function difference, 1-100 kHz [dB]",
    "tf_medium_rms_dB": "RMS transfer-function difference, 100-600 kHz [dB]",
    "tf_max_peak_shift": "largest relative shift of a matched resonance",
    "wv_fine_peak_sigma": "largest wavelet difference at the finest levels D1-D2, in noise units",
    "wv_coarse_peak_sigma": "largest wavelet difference at levels D4 and coarser, in noise units",
    "osc_low_z": "damped oscillation of the winding below 210 kHz from one instant, in noise units",
    "osc_high_z": "damped oscillation of the winding at 210 kHz-2 MHz from one instant, in noise units",
}

#: Features that indicate a fault on their own, above thresholds of their own (:func:`decisive_thresholds`):
#: the plain current difference's wavelet peaks after the span the compensated prediction covers (about
#: the last 30 % of the record). Faults there are too rare in a training set (under 1 % of its faults)
#: for the classifier to learn them, while benign pairs stay within a few noise units there.
DECISIVE: Mapping[str, str] = {
    "wv_beyond_fine_peak_sigma": "largest wavelet difference at D1-D3 after the compensated span, in noise units",
    "wv_beyond_mid_peak_sigma": "largest wavelet difference at D4-D6 after the compensated span, in noise units",
}

#: Lowest threshold of a decisive feature [noise units], so that a small benign set's largest value cannot
#: put it within reach of noise (Gaussian noise exceeds 10 standard deviations with a probability of
#: about 2e-23 per coefficient; a recorder's is not quite Gaussian). In the cross-validation of 12000
#: training pairs a floor of 8 let a benign pair of 8.4 through in its fold.
DECISIVE_MIN_SIGMA = 10.0


def _matrix(X: Any, names: Sequence[str]) -> np.ndarray:
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2 or X.shape[1] != len(names):
        raise ShotcheckError(f"feature matrix must have shape (n, {len(names)}), got {X.shape}")
    return X


def _thresholds_at(Xb: np.ndarray, cols: list[int], q: float) -> np.ndarray:
    with np.errstate(all="ignore"):
        return np.array([np.nanquantile(Xb[:, c], q) if np.isfinite(Xb[:, c]).any() else np.inf for c in cols])


def _any_exceeded(X: np.ndarray, cols: list[int], thr: np.ndarray) -> np.ndarray:
    # as in :func:`exceeded`: a value that is not finite is no measurement and exceeds nothing
    v = X[:, cols]
    with np.errstate(invalid="ignore"):
        return np.any(np.where(np.isfinite(v), v, -np.inf) > thr, axis=1)


def calibrate_thresholds(
    X_benign: Any,
    *,
    false_alarm_rate: float = 0.01,
    names: Sequence[str] = FEATURE_NAMES,
    features: Sequence[str] | None = None,
) -> dict[str, float]:
    """Thresholds that the benign pairs exceed (any of them) at most ``false_alarm_rate`` of the time.

    Parameters
    ----------
    X_benign : array-like of shape (n_pairs, n_features)
        Feature vectors of pairs without a fault.
    false_alarm_rate : float
        Target share of benign pairs that exceed at least one threshold [1], in (0, 0.5].
    names : sequence of str
        Column names of ``X_benign``.
    features : sequence of str, optional
        Features to threshold; default :data:`THRESHOLDED`.

    Returns
    -------
    dict
        Feature name -> threshold.

    Notes
    -----
    One quantile level ``q`` serves every feature; it is found by bisection so that the empirical
    share of benign pairs with any exceedance is at most the target. With ``n`` benign pairs the
    smallest rate that can be resolved is about ``1/n``: calibrate on at least ``10/false_alarm_rate``
    pairs.
    """
    rate = check_range("false_alarm_rate", false_alarm_rate, 0.0, 0.5, low_inclusive=False)
    Xb = _matrix(X_benign, names)
    if Xb.shape[0] < 10:
        raise ShotcheckError(f"at least 10 benign pairs are needed to calibrate thresholds, got {Xb.shape[0]}")
    feats = list(THRESHOLDED if features is None else features)
    cols = [list(names).index(f) for f in feats]
    lo, hi = 1.0 - rate, 1.0
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        if _any_exceeded(Xb, cols, _thresholds_at(Xb, cols, mid)).mean() > rate:
            lo = mid
        else:
            hi = mid
    thr = _thresholds_at(Xb, cols, hi)
    # a threshold at the sample maximum is exceeded by nothing in the set; keep a small margin above it
    return {f: float(t) for f, t in zip(feats, thr, strict=True)}


def false_alarm_rate(X_benign: Any, thresholds: Mapping[str, float], names: Sequence[str] = FEATURE_NAMES) -> float:
    """Share of pairs exceeding at least one threshold [1]."""
    X = _matrix(X_benign, names)
    cols = [list(names).index(f) for f in thresholds]
    return float(_any_exceeded(X, cols, np.array(list(thresholds.values()))).mean())


def decisive_thresholds(X_benign: Any, names: Sequence[str] = FEATURE_NAMES) -> dict[str, float]:
    """Thresholds of the :data:`DECISIVE` features that no benign pair of a training set exceeds.

    Parameters
    ----------
    X_benign : array-like of shape (n_pairs, n_features)
        Feature vectors of pairs without a fault.
    names : sequence of str
        Column names of ``X_benign``.

    Returns
    -------
    dict
        Feature name -> threshold [noise units]: the largest benign value, at least
        :data:`DECISIVE_MIN_SIGMA`. A decisive feature adds no false alarm on the benign pairs it was set on;
        the classifier's operating point keeps the whole false-alarm budget.
    """
    Xb = _matrix(X_benign, names)
    out = {}
    for f in DECISIVE:
        v = Xb[:, list(names).index(f)]
        v = v[np.isfinite(v)]
        out[f] = float(max(DECISIVE_MIN_SIGMA, float(v.max()) if v.size else 0.0))
    return out


def decisive_exceeded(X: Any, thresholds: Mapping[str, float], names: Sequence[str] = FEATURE_NAMES) -> np.ndarray:
    """Whether each pair has a :data:`DECISIVE` feature above its threshold.

    Parameters
    ----------
    X : array-like of shape (n_pairs, n_features)
        Feature vectors.
    thresholds : mapping
        Feature name -> threshold; decisive features without one never decide (a model file written
        before they existed).
    names : sequence of str
        Column names of ``X``.

    Returns
    -------
    numpy.ndarray of bool, shape (n_pairs,)
    """
    Xm = _matrix(X, names)
    cols = [list(names).index(f) for f in DECISIVE if f in thresholds]
    if not cols:
        return np.zeros(Xm.shape[0], dtype=bool)
    return _any_exceeded(Xm, cols, np.array([thresholds[f] for f in DECISIVE if f in thresholds]))


def exceeded(features: Any, thresholds: Mapping[str, float], names: Sequence[str] = FEATURE_NAMES) -> list[dict]:
    """Metrics of one pair above their thresholds.

    Parameters
    ----------
    features : array-like of shape (n_features,)
        Feature vector.
    thresholds : mapping
        Feature name -> threshold.
    names : sequence of str
        Names of the vector's entries.

    Returns
    -------
    list of dict
        ``metric``, ``description``, ``value``, ``threshold``, ``ratio`` (value / threshold), largest ratio
        first.
    """
    x = np.asarray(features, dtype=np.float64)
    idx = {n: k for k, n in enumerate(names)}
    out = []
    for name, thr in thresholds.items():
        v = float(x[idx[name]])
        if math.isfinite(v) and v > thr:
            out.append({
                "metric": name,
                "description": THRESHOLDED.get(name, DECISIVE.get(name, "")),
                "value": v,
                "threshold": float(thr),
                "ratio": v / thr if thr > 0 else math.inf,
            })
    out.sort(key=lambda d: -d["ratio"])
    return out
