"""Property tests of the wave-shape evaluation (Hypothesis, deterministic profile from conftest.py).

Invariants of the definitions in IEC 60060-1:2010: the time parameters do not depend on the amplitude or
the polarity, the test voltage scales with the amplitude and changes sign with the polarity, and a shift
of the time axis shifts the virtual origin and the instant of chopping by the same amount.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from detector.waveshape import evaluate_lightning, evaluate_switching

DT = 1e-8


def _wave(front_scale: float, tail_scale: float, chop_us: float | None, seed: int, n: int = 6000):
    """Noisy 1.2/50-like wave (time constants scaled), optionally chopped by a 150 ns linear collapse."""
    t = np.arange(-300, n - 300) * DT
    s = np.clip(t, 0.0, None)
    v = np.exp(-s / (68.22e-6 * tail_scale)) - np.exp(-s / (0.405e-6 * front_scale))
    if chop_us is not None:
        v = v * np.clip(1.0 - (t - chop_us * 1e-6) / 150e-9, 0.0, 1.0)
    v = v + np.random.default_rng(seed).normal(0.0, 2e-3, t.size)
    return t, v


shapes = st.tuples(st.floats(0.75, 1.3), st.floats(0.8, 1.2), st.integers(0, 2**16))


@settings(max_examples=12)
@given(shape=shapes, scale=st.floats(1e-3, 1e4).map(lambda x: x * 1e3))
def test_amplitude_scaling(shape, scale):
    t, v = _wave(*shape[:2], None, shape[2], n=8000)
    a = evaluate_lightning(t, v)
    b = evaluate_lightning(t, v * scale)
    assert b.front_time_s == pytest.approx(a.front_time_s, rel=1e-6)
    if a.time_to_half_s is not None:
        assert b.time_to_half_s == pytest.approx(a.time_to_half_s, rel=1e-6)
    assert b.test_voltage_V == pytest.approx(a.test_voltage_V * scale, rel=1e-6)
    assert b.peak_V == pytest.approx(a.peak_V * scale, rel=1e-6)


@settings(max_examples=12)
@given(shape=shapes, chop_us=st.floats(2.0, 6.0), shift_s=st.floats(-5e-3, 5e-3))
def test_time_shift_moves_origin_and_chopping_instant(shape, chop_us, shift_s):
    t, v = _wave(*shape[:2], chop_us, shape[2], n=2000)
    a = evaluate_lightning(t, v)
    b = evaluate_lightning(t + shift_s, v)
    assert a.kind == b.kind == "lightning_chopped"
    # absolute tolerance: rounding of t + shift_s (up to 5 ms) at double precision is far below 1 ps
    assert b.virtual_origin_s - a.virtual_origin_s == pytest.approx(shift_s, abs=1e-12)
    assert b.chopping_instant_s - a.chopping_instant_s == pytest.approx(shift_s, abs=1e-12)
    assert b.time_to_chopping_s == pytest.approx(a.time_to_chopping_s, abs=1e-12)
    assert b.front_time_s == pytest.approx(a.front_time_s, abs=1e-12)


@settings(max_examples=12)
@given(shape=shapes, chop=st.one_of(st.none(), st.floats(2.5, 5.5)))
def test_polarity_reversal(shape, chop):
    t, v = _wave(*shape[:2], chop, shape[2], n=8000)
    a = evaluate_lightning(t, 3e5 * v)
    b = evaluate_lightning(t, -3e5 * v)
    assert (a.polarity, b.polarity) == ("positive", "negative")
    assert b.test_voltage_V == pytest.approx(-a.test_voltage_V, rel=1e-9)
    assert b.front_time_s == pytest.approx(a.front_time_s, rel=1e-9)
    assert b.virtual_origin_s == pytest.approx(a.virtual_origin_s, rel=1e-9, abs=1e-15)
    for name in ("time_to_half_s", "chopping_instant_s", "overshoot_percent"):
        x, y = getattr(a, name), getattr(b, name)
        assert (x is None and y is None) or y == pytest.approx(x, rel=1e-9, abs=1e-12)


@settings(max_examples=6)
@given(scale=st.floats(0.1, 10.0), sign=st.sampled_from([1.0, -1.0]))
def test_switching_scaling_and_polarity(scale, sign):
    t = np.arange(-100e-6, 5000e-6, 1e-6)
    s = np.clip(t, 0.0, None)
    v = 1e5 * (np.exp(-s / 3155e-6) - np.exp(-s / 62.5e-6))
    a = evaluate_switching(t, v)
    b = evaluate_switching(t, sign * scale * v)
    assert b.time_to_peak_s == pytest.approx(a.time_to_peak_s, rel=1e-6)
    assert b.time_to_half_s == pytest.approx(a.time_to_half_s, rel=1e-6)
    assert b.test_voltage_V == pytest.approx(sign * scale * a.test_voltage_V, rel=1e-6)


@settings(max_examples=40)
@given(
    form=st.sampled_from(["noise", "spike", "step", "sine", "chopped_early", "walk"]),
    n=st.sampled_from([16, 40, 300, 3000]),
    dt_exp=st.floats(-9.0, -5.0),
    seed=st.integers(0, 2**16),
)
def test_any_input_gives_result_or_shotcheck_error(form, n, dt_exp, seed):
    """Whatever the samples, the evaluation returns finite numbers or raises a ShotcheckError naming the
    source; never another exception or a numpy warning (pytest turns warnings into errors)."""
    from detector._validation import ShotcheckError

    rng = np.random.default_rng(seed)
    t = np.arange(n) * 10.0**dt_exp
    k = np.arange(n)
    v = {
        "noise": lambda: rng.normal(0.0, 1.0, n),
        "spike": lambda: np.where(k == rng.integers(0, n), 1e3, 0.0) + rng.normal(0.0, 1.0, n),
        "step": lambda: np.where(k > n // 3, 5e4, 0.0),
        "sine": lambda: 1e3 * np.sin(k * rng.uniform(0.01, 1.0)),
        "chopped_early": lambda: np.where((k > n // 4) & (k < n // 4 + 3), 1e5, 0.0),
        "walk": lambda: np.round(rng.normal(0.0, 1.0, n).cumsum()),
    }[form]()
    try:
        ws = evaluate_lightning(t, v, source="fuzz.csv")
    except ShotcheckError as e:
        assert "fuzz.csv" in str(e) or "must" in str(e)
        return
    d = ws.to_dict()
    for key in ("peak_kV", "test_voltage_kV", "front_time_us"):
        assert np.isfinite(d[key])


def test_distorted_record_fit_is_stable():
    """A record far from a double exponential (breakdown on the front) gets one answer, not one per last bit.

    Scaling the samples by 1 +- 1e-15 or 1e-11 (as V vs kV conversions do) must not move the base-curve
    fit to another local minimum; see tests/data/README.md for the record.
    """
    from pathlib import Path

    with np.load(Path(__file__).parent / "data" / "front_breakdown_voltage.npz") as z:
        v = z["codes"] * float(z["lsb_V"])
        t = np.arange(v.size) * float(z["dt_s"])
    results = [evaluate_lightning(t, v * (1.0 + eps)) for eps in (0.0, 1e-15, -1e-15, 3e-15, 1e-13, 1e-11)]
    tv = np.array([r.test_voltage_V / (1.0 + eps) for r, eps in
                   zip(results, (0.0, 1e-15, -1e-15, 3e-15, 1e-13, 1e-11), strict=True)])
    assert np.ptp(tv) < 1e-6 * abs(tv[0])
    assert all(any("departs from a double-exponential" in w for w in r.warnings) for r in results)
    assert results[0].kind == "lightning_chopped" and results[0].polarity == "negative"
