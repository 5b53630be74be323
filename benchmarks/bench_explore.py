"""Wall time of a whole exploration (tuning, re-check, ranking, files, report).

A bundled study with a lightly damped mode (dome drive on a flexible mount, our own
scenario) and max_order 3 gives ≥ 6 structures; 100 trials each, batched (32) and
unbatched (1). Run: ``python benchmarks/bench_explore.py [STUDY.toml]`` — with a
study file (e.g. studies/kiln_damper.toml, a loop with transport delay) that study is
timed instead.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

from explorer.explore import explore
from explorer.structures import candidate_structures
from explorer.study import load_study, parse_study

STUDY = {
    "name": "Dome drive on a flexible mount (benchmark)",
    "plant": {"gain": 40.0, "poles": [-0.5, -3.0, "-1.2+8j", "-1.2-8j"]},
    "targets": {"crossover": 1.0, "phase_margin": 50, "integrators": 1},
    "limits": {"sensitivity_peak": 2.0},
    "search": {"max_order": 3},
}


def main() -> None:
    study = load_study(sys.argv[1]) if len(sys.argv) > 1 else parse_study(STUDY)
    n_struct = len(candidate_structures(study.plant, study.targets, study.search))
    for batch in (32, 1):
        tmp = Path(tempfile.mkdtemp(prefix="bench-explore-"))
        t0 = time.perf_counter()
        res = explore(study, tmp, trials=100, seed=1, batch=batch, progress=False)
        dt = time.perf_counter() - t0
        print(
            f"{n_struct} structures x 100 trials, batch {batch:>2}: {dt:6.2f} s wall, "
            f"{n_struct * 100 / dt:5.1f} trials/s "
            f"({len(res.designs)} designs kept; {res.summary[0]})"
        )
        shutil.rmtree(tmp, ignore_errors=True)
    sys.stdout.flush()


if __name__ == "__main__":
    main()
