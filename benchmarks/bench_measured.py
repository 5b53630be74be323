"""Benchmark: loop metrics on a measured sweep (explorer.frequency.on_data) against the same
designs on the model fitted to it (explorer.frequency.metrics), in the same run.

Workload: the bundled, invented hopper-gate sweep (studies/hopper_gate.toml, 43
points); lead compensators around the study's crossover, drawn at random.

* batch: ``loop_metrics_on_data_batch`` over all designs at once, and
  ``frequency_metrics_batch`` on the fitted model, designs/s;
* one by one: one design per call, as the exploration's local polish calls it, ms per
  call.

Run: ``python benchmarks/bench_measured.py [n_designs]``. Timings only: nothing here
is asserted (tests never time anything); docs/measured-data.md records the figures.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

from explorer.frequency.metrics import frequency_metrics_batch
from explorer.frequency.on_data import loop_metrics_on_data_batch
from explorer.model.study import load_study

ROOT = Path(__file__).resolve().parents[1]


def main(n: int = 1000) -> None:
    study = load_study(ROOT / "studies" / "hopper_gate.toml")
    data, model = study.measured.data, study.plant
    rng = np.random.default_rng(1)
    gain = rng.uniform(0.05, 0.4, n)
    zeros = -rng.uniform(0.5, 3.0, (n, 1)).astype(complex)
    poles = -rng.uniform(3.0, 20.0, (n, 1)).astype(complex)
    loop_metrics_on_data_batch(data, gain[:2], zeros[:2], poles[:2])  # warm the caches
    t = time.perf_counter()
    loop_metrics_on_data_batch(data, gain, zeros, poles)
    t_data = time.perf_counter() - t
    t = time.perf_counter()
    frequency_metrics_batch(model, gain, zeros, poles)
    t_model = time.perf_counter() - t
    k = min(n, 100)
    t = time.perf_counter()
    for i in range(k):
        loop_metrics_on_data_batch(data, gain[i:i + 1], zeros[i:i + 1], poles[i:i + 1])
    one_data = (time.perf_counter() - t) / k
    t = time.perf_counter()
    for i in range(k):
        frequency_metrics_batch(model, gain[i:i + 1], zeros[i:i + 1], poles[i:i + 1])
    one_model = (time.perf_counter() - t) / k
    print(f"{n} lead designs on the hopper sweep ({data.omega_rad_s.size} points)")
    print(f"batch      data {n / t_data:9.0f} designs/s   fitted model {n / t_model:9.0f} "
          "designs/s")
    print(f"one by one data {1e3 * one_data:9.2f} ms/call    fitted model "
          f"{1e3 * one_model:9.2f} ms/call")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
