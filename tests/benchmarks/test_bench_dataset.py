"""Benchmark: record pairs per second of data set generation (simulation + recording + storage).

Quick mode (CI) generates a few pairs; ``SHOTCHECK_BENCH_FULL=1`` generates 100 pairs on 2 workers.
The DESIGN.md budget is 20 simulated pairs per second per core for a 40-section winding; generation adds
the generator design, the gap-stress run and the recorder, so the printed figure is the one to watch.
"""

from __future__ import annotations

import os
import time

import pytest

from synthetic.dataset import generate

#: Loose floor asserted in CI (pairs per second per worker); the printed number is the real result.
FLOOR_PAIRS_PER_S = 0.5


@pytest.mark.benchmark
def test_bench_generate_pairs_per_second(tmp_path):
    full = os.environ.get("SHOTCHECK_BENCH_FULL") == "1"
    n, workers = (100, 2) if full else (8, 1)
    t0 = time.perf_counter()
    man = generate(n, tmp_path / "bench", seed=123, workers=workers, progress=False)
    elapsed = time.perf_counter() - t0
    rate = n / elapsed
    print(f"\n[bench] dataset generation: {n} pairs, {workers} worker(s): {elapsed:.2f} s, "
          f"{rate:.2f} pairs/s ({rate / workers:.2f} pairs/s per worker); runner {man['runner']}")
    assert rate / workers > FLOOR_PAIRS_PER_S
