"""Cost of a plant family in explore, with the share of the step-figure refinement.

``OMP_NUM_THREADS=1 python benchmarks/bench_family.py [STUDY.toml] [TRIALS]``
(default studies/kiln_family.toml, 100 trials): explore with batch 32 and seed 1 on

* the nominal plant alone (the study without ``[variation]``; the reference),
* the study as written,
* its gain × delay box alone,
* the box with 2, 4 and 8 listed members (operating points made up around the
  nominal plant, as in bench_explore.py),

printing each run's wall time, its ratio to the nominal run of the same session, and
the time spent in the box refinement of the step figures
(explorer.evaluation.family_time.box_time_worst: calls, members simulated, seconds). The
nominal run is repeated at the end: the spread of the two nominal times says how
noisy the machine was. A benchmark run on demand, never a test.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import explorer.evaluation.family_time as family_time
from explorer.model.study import Variation, load_study
from explorer.search.exploration import explore

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_explore import _members  # noqa: E402  (the same made-up members)

_stats = {"calls": 0, "members": 0, "seconds": 0.0}
_inner = family_time.box_time_worst


def _timed(*args, **kwargs):
    t0 = time.perf_counter()
    out = _inner(*args, **kwargs)
    _stats["seconds"] += time.perf_counter() - t0
    _stats["calls"] += 1
    _stats["members"] += out.points
    return out


def main() -> None:
    path = sys.argv[1] if len(sys.argv) > 1 else "studies/kiln_family.toml"
    trials = int(sys.argv[2]) if len(sys.argv) > 2 else 100
    study = load_study(path)
    v = study.variation
    if v is None or v.gain is None or v.delay_s is None:
        raise SystemExit(f"{path}: needs a [variation] with a gain and a delay range")
    family_time.box_time_worst = _timed  # explorer.evaluation.family imports it at call time
    box = Variation(gain=v.gain, delay_s=v.delay_s)
    runs = [("nominal plant", replace(study, variation=None)),
            ("study as written", study),
            ("gain x delay box", replace(study, variation=box))]
    runs += [(f"box + {k} listed members", replace(
        study, variation=replace(box, members=_members(study.plant, k)))) for k in (2, 4, 8)]
    runs.append(("nominal plant (again)", replace(study, variation=None)))
    base = None
    for name, st in runs:
        for k in _stats:
            _stats[k] = 0
        tmp = Path(tempfile.mkdtemp(prefix="bench-family-"))
        t0 = time.perf_counter()
        res = explore(st, tmp, trials=trials, seed=1, batch=32, progress=False)
        dt = time.perf_counter() - t0
        base = dt if base is None else base
        print(f"{name:<26} {dt:7.2f} s  {dt / base:5.2f}x nominal  refinement: "
              f"{_stats['calls']} designs, {_stats['members']} members, "
              f"{_stats['seconds']:.2f} s  answer: {res.obj['answer']['design']}",
              flush=True)
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
