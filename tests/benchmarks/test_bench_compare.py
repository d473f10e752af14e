"""Speed of compare() on a pair of 20 000-sample records with the model loaded (DESIGN section 7).

Prints the median time per pair and the share of each stage. The budget is a median under 30 ms on one
core. The assertion is a guard against the code getting slower, not a test of the machine: the machines
this runs on differ in speed by a factor of three or more (the same code took 19 ms on one, 55-98 ms on
another, whose own speed drifted by a third within minutes), so each run of ``compare`` is timed beside a
fixed reference workload of the same kinds of work (:func:`reference_workload`) and the guard is on the
ratio of their medians, which stayed within 4.6-6.3 on that machine where the times alone spread over
55-103 ms. (How well the ratio carries over to other processors, whose FFTs and per-call overheads
scale differently, is not yet measured; the times printed here follow a run of the workload, so they
are not strictly comparable with earlier figures taken without it.)
"""

from __future__ import annotations

import time

import numpy as np
import pytest
import scipy.fft as sfft
from threadpoolctl import threadpool_limits

from detector.compare import compare, default_model
from detector.features import extract

pytestmark = pytest.mark.benchmark

BUDGET_S = 0.030

#: Largest median time of a comparison in units of the reference workload's median time. Measured on
#: 2026-12-04 on a 2-core machine: 4.6-5.3 for the clean pair, 5.7-6.3 with the interference tone
#: (five runs each); the limit leaves room for the scatter, and fails when the code gets some 60 %
#: slower for the pair with the tone, some 90 % for the clean pair.
RATIO_LIMIT = 10.0


def reference_workload() -> None:
    """A fixed piece of work of the kinds ``compare`` spends its time on, to time the machine with.

    Real FFTs of four 20 000-sample rows padded to 40 000 points and back (three times), a median, a
    sort and a cumulative sum of 20 000 samples, and 300 rounds of small-array numpy calls (the per-call
    overhead that makes up much of a comparison of one pair).
    """
    rng = np.random.default_rng(0)
    x = rng.standard_normal((4, 20000))
    for _ in range(3):
        s = sfft.rfft(x, 40000, axis=-1)
        back = sfft.irfft(s * s.conj(), 40000, axis=-1)
    np.median(x[0])
    np.cumsum(back[0])
    np.sort(x[1])
    small = x[2, :200]
    for _ in range(300):
        float(np.mean(small))
        np.flatnonzero(small > 1.0)


@pytest.fixture(scope="module", params=["clean", "interference"])
def pair(request):
    """The pair, and the same shots with a 300 kHz interference tone of 3 codes on both recorders (the
    compensated difference then finds the tone, corrects the baselines and predicts a second time)."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from detection_cases import make_case

    rec = {"sample_rate_Hz": 200e6}
    if request.param == "interference":
        rec.update(interference_amplitude_lsb=3.0, interference_frequency_Hz=300e3, pretrigger_s=3e-6)
    c = make_case(fault="turn_to_turn", test_recorder=rec, reference_recorder=rec, n_samples=20000)
    return c.reference, c.test


def test_compare_speed(pair):
    ref, test = pair
    assert ref.n_samples >= 19000
    model = default_model()
    with threadpool_limits(1):
        compare(ref, test, model=model)  # warm caches and imports
        reference_workload()
        runs, units = [], []
        stages: dict[str, float] = {}
        for _ in range(9):  # interleaved, so that a drift of the machine's speed touches both alike
            t0 = time.perf_counter()
            reference_workload()
            t1 = time.perf_counter()
            compare(ref, test, model=model)
            runs.append(time.perf_counter() - t1)
            units.append(t1 - t0)
        for _ in range(5):
            extract(ref, test, timings=stages)
    med = float(np.median(runs))
    unit = float(np.median(units))
    total = sum(stages.values())
    shares = ", ".join(f"{k} {100 * v / total:.0f} %" for k, v in sorted(stages.items(), key=lambda kv: -kv[1]))
    tones = extract(ref, test).compensated.tones
    print(f"\ncompare of two {ref.n_samples}-sample records ({len(tones)} interference tone(s) found): "
          f"median {1e3 * med:.1f} ms "
          f"(target {1e3 * BUDGET_S:.0f} ms: {'met' if med < BUDGET_S else 'NOT met'} on this machine); "
          f"stages: {shares}; reference workload {1e3 * unit:.1f} ms, ratio {med / unit:.2f} "
          f"(guard {RATIO_LIMIT:g})")
    assert med / unit < RATIO_LIMIT, f"compare takes {med / unit:.2f} reference workloads (guard {RATIO_LIMIT:g})"
