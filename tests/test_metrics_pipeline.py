"""The metrics chained as compare() will chain them: self-comparison, level and sample-rate invariance."""

from __future__ import annotations

import numpy as np
import pytest
from metrics_signals import FAULTY, make_record

from detector.metrics import (
    R_MAX,
    compare_transfer,
    time_domain_metrics,
    transfer_function,
    wavelet_difference,
)
from detector.preprocess import align_pair


def _all(ref, test):
    p = align_pair(ref, test)
    dt = p.sample_interval_s
    kw = dict(pretrigger_samples=p.pretrigger_samples)
    a = transfer_function(p.ref_voltage_pu, p.ref_current_pu, dt, **kw)
    b = transfer_function(p.test_voltage_pu, p.test_current_pu, dt, **kw)
    return (p, time_domain_metrics(p), compare_transfer(a.H_S, b.H_S, a.frequency_Hz),
            wavelet_difference(p.ref_current_pu, p.test_current_pu, dt, t0_s=p.times_s[0]))


def test_a_record_against_itself_gives_perfect_indices():
    rec = make_record(amplitude_V=400e3, noise_v=5e-4, noise_i=5e-4, seed=4)
    p, td, tf, wl = _all(rec, rec)
    assert p.delay_s == 0.0 and p.warnings == ()
    assert td.onset_s is None and td.current["all"].max_abs == 0.0 and td.voltage["all"].max_abs == 0.0
    assert all(b.rho == 1.0 and b.R == R_MAX and b.max_dB == 0.0 for b in tf.bands.values())
    assert tf.max_peak_shift_rel == 0.0
    assert not wl.energy_ratio.any() and wl.fault_time_s is None


def test_a_scaled_copy_is_a_perfect_match():
    """Reduced and full level of a linear object differ by the level only: identical per unit."""
    rec = make_record(amplitude_V=400e3, noise_v=5e-4, noise_i=5e-4, seed=4)
    full = rec.replace(channels=tuple(c.with_samples(-2.5 * c.samples) for c in rec.channels))
    p, td, tf, wl = _all(rec, full)
    np.testing.assert_allclose(p.test_current_pu, p.ref_current_pu, rtol=0, atol=1e-15)
    assert td.onset_s is None
    assert all(b.rho > 1 - 1e-12 for b in tf.bands.values())
    assert np.max(wl.energy_ratio) < 1e-20


@pytest.mark.parametrize(("ref_rate", "test_rate"), [(100e6, 250e6), (250e6, 100e6), (50e6, 100e6)])
def test_sample_rate_of_either_record(ref_rate, test_rate):
    """Healthy and faulty pairs recorded at different rates give the indices of the same-rate pair.

    Tolerances: the resampled record carries the anti-alias filter; per-band rho stays above 0.999 for
    the healthy pair and the resonance shift of the faulty one is found within 0.3 % (absolute).
    """
    def rec(rate, amp, seed, **kw):
        return make_record(rate_Hz=rate, n=int(200e-6 * rate), amplitude_V=amp, noise_v=5e-4,
                           noise_i=5e-4, seed=seed, **kw)

    _, td, tf, _ = _all(rec(ref_rate, 300e3, 1), rec(test_rate, 600e3, 2))
    assert td.onset_s is None
    assert td.current["all"].max_sigma < 7
    assert all(b.rho > 0.999 for b in tf.bands.values())
    _, td_f, tf_f, _ = _all(rec(ref_rate, 300e3, 1), rec(test_rate, 600e3, 2, branches=FAULTY))
    same_rate = _all(rec(100e6, 300e3, 1), rec(100e6, 600e3, 2, branches=FAULTY))[2]
    assert tf_f.max_peak_shift_rel == pytest.approx(same_rate.max_peak_shift_rel, abs=3e-3)
    assert tf_f.bands["medium"].rho == pytest.approx(same_rate.bands["medium"].rho, abs=5e-3)
    assert td_f.current_onset_s == pytest.approx(2e-6 + 0.6e-6, abs=0.5e-6)
