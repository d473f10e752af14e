"""Speed of compare() on a pair of 20 000-sample records with the model loaded (DESIGN section 7).

Prints the median time per pair and the share of each stage. The budget is a median under 30 ms on one
core; on the shared 2-core CI machine the assertion allows three times that.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from detector.compare import compare, default_model
from detector.features import extract

pytestmark = pytest.mark.benchmark

BUDGET_S = 0.030


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
        runs = []
        stages: dict[str, float] = {}
        for _ in range(9):
            t0 = time.perf_counter()
            compare(ref, test, model=model)
            runs.append(time.perf_counter() - t0)
        for _ in range(5):
            extract(ref, test, timings=stages)
    med = float(np.median(runs))
    total = sum(stages.values())
    shares = ", ".join(f"{k} {100 * v / total:.0f} %" for k, v in sorted(stages.items(), key=lambda kv: -kv[1]))
    tones = extract(ref, test).compensated.tones
    print(f"\ncompare of two {ref.n_samples}-sample records ({len(tones)} interference tone(s) found): "
          f"median {1e3 * med:.1f} ms "
          f"(target {1e3 * BUDGET_S:.0f} ms); stages: {shares}")
    assert med < 3 * BUDGET_S
