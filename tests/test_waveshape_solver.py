"""The base-curve fit's own Levenberg-Marquardt solver reaches scipy.optimize.least_squares' minimum.

Reference: scipy.optimize.least_squares (the library's trust-region solver, with ``loss="soft_l1"`` for
the robust cost and ``method="lm"`` for plain least squares) on the same problems.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from detector._waveshape_fit import _levenberg_marquardt


def _problem(seed: int):
    """Double exponential in log time constants with noise and 3 % wild outliers."""
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 60.0, 1200)
    true = np.array([1.04, np.log(68.0 / 1.2), np.log(0.405 / 1.2)])

    def curve(p):
        return p[0] * (np.exp(-t / np.exp(p[1])) - np.exp(-t / np.exp(p[2])))

    y = curve(true) + rng.normal(0.0, 0.004, t.size)
    out = rng.random(t.size) < 0.03
    y[out] += rng.normal(0.0, 0.3, int(out.sum()))

    def resid(p):
        return curve(p) - y

    def jac(p):
        e1, e2 = np.exp(-t / np.exp(p[1])), np.exp(-t / np.exp(p[2]))
        return np.stack([e1 - e2, p[0] * e1 * t / np.exp(p[1]), -p[0] * e2 * t / np.exp(p[2])], axis=1)

    return resid, jac, true + np.array([0.1, 0.3, -0.4])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_soft_l1_minimum_matches_scipy(seed):
    resid, jac, start = _problem(seed)
    f = 0.012
    ref = optimize.least_squares(resid, start, jac=jac, loss="soft_l1", f_scale=f, x_scale="jac",
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=500).x
    ours = _levenberg_marquardt(lambda p: (resid(p), jac(p).T), start, f_scale=f, xtol=1e-10, ftol=1e-14,
                                max_iter=200)
    assert ours == pytest.approx(ref, rel=1e-6, abs=1e-8)


@pytest.mark.parametrize("seed", [0, 3])
def test_plain_least_squares_matches_minpack(seed):
    resid, jac, start = _problem(seed)
    ref = optimize.least_squares(resid, start, jac=jac, method="lm", xtol=1e-12, ftol=1e-12).x
    ours = _levenberg_marquardt(lambda p: (resid(p), jac(p).T), start, f_scale=None, xtol=1e-10, ftol=1e-14,
                                max_iter=200)
    assert ours == pytest.approx(ref, rel=1e-6, abs=1e-8)
