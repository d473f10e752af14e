"""The damped-oscillation scan against a brute-force least-squares fit and against detection theory.

The statistic is the generalised likelihood ratio of a signal with unknown amplitude and phase (Kay,
Fundamentals of Statistical Signal Processing, Vol. II, 1998, ch. 7): with the regressors known (one
frequency, one onset) and white Gaussian noise of the stated sigma, ``T`` is chi-square with two
degrees of freedom without a signal, and ``E[T] = SNR^2 + 2`` with one, ``SNR^2`` being the signal's
energy over the noise variance.
"""

from __future__ import annotations

import numpy as np
import pytest

from detector._validation import ShotcheckError
from detector.metrics.oscillation import OSCILLATION_FREQUENCIES_HZ, damped_oscillation_scan

DT = 10e-9
BLOCK = 10  # samples per 100 ns block


def _oscillation(n, onset, f, quality, amp=1.0, phase=0.3):
    t = (np.arange(n) - onset) * DT
    a = np.pi * f / quality
    return np.where(t >= 0, amp * np.exp(-a * t) * np.cos(2 * np.pi * f * t + phase), 0.0)


def _brute_force(d, sigma, scored, f, quality):
    """T(s) at every block onset from numpy's least squares on the block sums (weights 1/sigma^2)."""
    K = d.size // BLOCK
    w = np.where(scored, 1.0 / sigma ** 2, 0.0)[: K * BLOCK].reshape(K, BLOCK).sum(axis=1)
    wr = (np.where(scored, 1.0 / sigma ** 2, 0.0) * d)[: K * BLOCK].reshape(K, BLOCK).sum(axis=1)
    r = np.divide(wr, w, out=np.zeros(K), where=w > 0)  # weighted block means
    tb = np.arange(K) * BLOCK * DT
    a = np.pi * f / quality
    out = np.zeros(K)
    for s in range(K):  # the reference computation may loop: it is the slow, obvious one
        tau = tb[s:] - tb[s]
        A = np.stack((np.exp(-a * tau) * np.cos(2 * np.pi * f * tau), np.exp(-a * tau) * np.sin(2 * np.pi * f * tau)), 1)
        sw = np.sqrt(w[s:])
        if np.count_nonzero(sw) < 2:
            continue
        coef, *_ = np.linalg.lstsq(A * sw[:, None], r[s:] * sw, rcond=None)
        fit = A @ coef
        out[s] = float(np.sum(w[s:] * fit * fit))  # explained weighted energy = b' G^-1 b
    return out


@pytest.mark.parametrize("n_blocks, f, quality", [(300, 150e3, 4.0), (3000, 2e6, 4.0)])
def test_scan_equals_a_brute_force_least_squares_fit(n_blocks, f, quality):
    # the second case spans several segments of the reverse sums (2 MHz decays fast per block)
    rng = np.random.default_rng(1)
    n = n_blocks * BLOCK
    sigma = 1.0 + np.arange(n) / n  # noise growing along the record, as the compensated difference's
    scored = np.ones(n, dtype=bool)
    scored[: n // 10] = False
    d = rng.normal(0.0, sigma) + _oscillation(n, n // 2, f, quality, amp=0.8)
    d[~scored] = 1e6  # unscored samples weigh nothing, whatever they hold
    scan = damped_oscillation_scan(d, sigma, scored, DT, frequencies_Hz=(f,), quality=quality,
                                   block_s=BLOCK * DT)
    T = _brute_force(d, sigma, scored, f, quality)
    T[: n // 10 // BLOCK] = 0.0  # onsets before the scored samples are not reported
    assert scan.z[0] == pytest.approx(np.sqrt(T.max()), rel=1e-6)
    assert scan.onset_s[0] == pytest.approx(np.argmax(T) * BLOCK * DT, abs=1e-12)


def test_noise_alone_gives_chi_square_sized_statistics():
    # maximum over 1000 onsets of chi-square(2) at one frequency: sqrt(2 ln 1000) = 3.7 typical
    rng = np.random.default_rng(2)
    n = 1000 * BLOCK
    zs = np.array([damped_oscillation_scan(rng.normal(0, 1, n), np.ones(n), np.ones(n, bool), DT,
                                           frequencies_Hz=(100e3,)).z[0] for _ in range(40)])
    assert 2.5 < np.median(zs) < 4.5
    assert zs.max() < 6.0


def test_an_oscillation_is_found_at_its_frequency_onset_and_expected_size():
    rng = np.random.default_rng(3)
    n = 1500 * BLOCK
    f0 = OSCILLATION_FREQUENCIES_HZ[6]
    onset = 600 * BLOCK  # on a block boundary
    sig = _oscillation(n, onset, f0, 4.0, amp=1.0)
    snr = float(np.sqrt(np.sum(sig ** 2)))  # unit noise: the signal's energy over the noise variance
    assert 12 < snr < 20
    zs, on = [], []
    for _ in range(20):
        scan = damped_oscillation_scan(sig + rng.normal(0, 1, n), np.ones(n), np.ones(n, bool), DT)
        k = scan.strongest()
        assert k == 6
        zs.append(scan.z[k])
        on.append(scan.onset_s[k])
    # E[T] = SNR^2 + 2 at the true onset; the maximum over onsets adds a little
    assert np.sqrt(np.mean(np.square(zs)) - 2.0) == pytest.approx(snr, rel=0.12)
    assert np.median(on) == pytest.approx(onset * DT, abs=2 * BLOCK * DT)


def test_bad_arguments_are_named():
    n = 100
    with pytest.raises(ShotcheckError, match="one length"):
        damped_oscillation_scan(np.zeros(n), np.ones(n - 1), np.ones(n, bool), DT)
    with pytest.raises(ShotcheckError, match="half the block rate"):
        damped_oscillation_scan(np.zeros(n), np.ones(n), np.ones(n, bool), DT, frequencies_Hz=(6e6,))
    empty = damped_oscillation_scan(np.zeros(n), np.ones(n), np.zeros(n, bool), DT)
    assert np.all(empty.z == 0) and np.all(np.isnan(empty.onset_s))
