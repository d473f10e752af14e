"""Speed of the wave-shape evaluation on a 20 000-sample record (target: a few ms, DESIGN.md section 7).

Quick by default; ``SHOTCHECK_BENCH_FULL=1`` repeats more often. The assertion (best run under 3x the
target) leaves room for a loaded CI machine; the printed median and best run are what to watch.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pytest

from detector.record import Channel, Record
from detector.waveshape import evaluate_waveshape

TARGET_MS = 10.0  # per record, 20 000 samples, one core


def _record(chopped: bool) -> Record:
    rng = np.random.default_rng(7)
    dt = 1e-8  # 100 MS/s, 200 us
    t = np.arange(-1000, 19000) * dt
    s = np.clip(t, 0.0, None)
    v = -4.2e5 * (np.exp(-s / 68.22e-6) - np.exp(-s / 0.405e-6))
    v += 6e3 * np.sin(2e6 * np.pi * s) * np.exp(-s / 2e-6)
    if chopped:
        v *= np.clip(1 - (t - 4e-6) / 1.5e-7, 0, 1)
    q = 1e6 / 2**12
    v = np.round((v + rng.normal(0, 300, t.size)) / q) * q
    return Record(start_time_s=t[0], sample_interval_s=dt, channels=(Channel("U", "voltage", v),),
                  meta={"shot_kind": "chopped" if chopped else "full"}, source="bench.cfg")


@pytest.mark.benchmark
@pytest.mark.parametrize("chopped", [False, True])
def test_bench_evaluate_waveshape(chopped):
    rec = _record(chopped)
    evaluate_waveshape(rec)  # warm-up
    reps = 200 if os.environ.get("SHOTCHECK_BENCH_FULL") else 20
    times = []
    for _ in range(reps):
        t0 = time.perf_counter()
        evaluate_waveshape(rec)
        times.append(time.perf_counter() - t0)
    med = 1e3 * float(np.median(times))
    kind = "chopped" if chopped else "full"
    print(f"\nevaluate_waveshape, 20 000 samples, {kind}: median {med:.2f} ms, "
          f"min {1e3 * min(times):.2f} ms over {reps} runs (target {TARGET_MS:g} ms)")
    # the best run is the cost without the other engineers' jobs on the two shared cores; the median is
    # printed for the record
    assert 1e3 * min(times) < 3 * TARGET_MS
