"""On-demand check of the box refinement of the step figures (explorer.evaluation.family_time)
on many random gain × delay families, against an independent simulation of a
15 × 15 grid of each box (tests/test_family.py: _foh_grid, scipy zpk2ss + expm with a
first-order hold of the delayed input).

``OMP_NUM_THREADS=1 python benchmarks/sweep_family_time.py [N]`` (default 20
families, seeds 5…): prints, per family, whether the refinement converged and how
many members it simulated, and every figure whose refined worst lies below the
grid's worst by more than a tenth of the tolerance plus the two simulators'
difference; exit status 1 if there is one. A check run on demand, never a test.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from test_family import _arrays, _foh_grid, _random_family  # noqa: E402

from explorer.evaluation.family import family_worst_batch  # noqa: E402
from explorer.evaluation.family_time import TIME_TOLERANCES, box_time_worst  # noqa: E402
from explorer.model.family_members import scaled_plant  # noqa: E402


def main() -> int:
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 20
    bad = n = conv = 0
    pts: list[int] = []
    seed = 4
    while n < count:
        seed += 1
        plant, v, comp = _random_family(seed)
        if not family_worst_batch(plant, v, *_arrays([comp]))["closed_loop_stable"][0]:
            continue
        got = box_time_worst(plant, v, comp)
        gs = np.linspace(*v.gain, 15)
        ds = np.linspace(*v.delay_s, 15)
        grid = _foh_grid(comp, [scaled_plant(plant, g, d, 1.0) for g in gs for d in ds], 40,
                         3.0 * (got.values["settling_time_s"] or 100.0))
        n += 1
        conv += got.converged
        pts.append(got.points)
        print(f"seed {seed}: {got.points} members, converged {got.converged}", flush=True)
        for k, (a, r) in TIME_TOLERANCES.items():
            top = float(np.max(grid[k]))
            x = got.values[k]
            slack = 0.1 * max(a, r * top) + (0.02 if k == "overshoot_pct" else 0.002 * top)
            if x is None or top - x > slack:
                bad += 1
                print(f"  BELOW THE GRID: {k} refined {x} grid {top:.6g}", flush=True)
    print(f"{n} families, {conv} converged, members {min(pts)}-{max(pts)} "
          f"(median {int(np.median(pts))}), figures below the grid: {bad}")
    return 1 if bad else 0


if __name__ == "__main__":
    raise SystemExit(main())
