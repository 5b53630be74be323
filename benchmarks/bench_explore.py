"""Wall time of a whole exploration (tuning, re-check, ranking, files, report).

A bundled study with a lightly damped mode (dome drive on a flexible mount, our own
scenario) and max_order 3 gives ≥ 6 structures; 100 trials each, batched (32) and
unbatched (1). Run: ``python benchmarks/bench_explore.py [STUDY.toml]`` — with a
study file (e.g. studies/kiln_damper.toml, a loop with transport delay) that study is
timed instead.

``python benchmarks/bench_explore.py STUDY.toml --family [TRIALS]``: a study with a
``[variation]`` (e.g. studies/kiln_family.toml), batch 32, same trials and seed:
the nominal plant alone, the gain × delay box, the box with 2, 4 and 8 listed
members (operating points made up around the nominal plant) and the box with a
time-scale range 0.8…1.25; prints each run's wall time and its ratio to the nominal
run measured in the same session.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

from explorer.core.loop import Rational
from explorer.design.structures import candidate_structures
from explorer.model.study import Variation, load_study, parse_study
from explorer.search.exploration import explore

STUDY = {
    "name": "Dome drive on a flexible mount (benchmark)",
    "plant": {"gain": 40.0, "poles": [-0.5, -3.0, "-1.2+8j", "-1.2-8j"]},
    "targets": {"crossover": 1.0, "phase_margin": 50, "integrators": 1},
    "limits": {"sensitivity_peak": 2.0},
    "search": {"max_order": 3},
}


def _members(plant: Rational, k: int) -> tuple[Rational, ...]:
    """k operating points around the nominal plant: gain −30…+30 %, slowest pole
    −20…+20 %, delay +0…+40 % (the same direction of action and integrators)."""
    out = []
    for i in range(k):
        f = (i + 0.5) / k
        poles = sorted(plant.poles, key=abs)
        slow = poles[0] * (0.8 + 0.4 * f) if poles else None
        out.append(Rational(gain=plant.gain * (0.7 + 0.6 * f),
                            zeros=plant.zeros,
                            poles=tuple([slow, *poles[1:]] if poles else ()),
                            delay_s=plant.delay_s * (1.0 + 0.4 * f)))
    return tuple(out)


def family(path: str, trials: int) -> None:
    study = load_study(path)
    v = study.variation
    if v is None or v.gain is None or v.delay_s is None:
        raise SystemExit(f"{path}: --family needs a [variation] with a gain and a delay range")
    box = Variation(gain=v.gain, delay_s=v.delay_s)
    runs = [("nominal plant", replace(study, variation=None)),
            ("gain x delay box", replace(study, variation=box))]
    runs += [(f"box + {k} listed members", replace(
        study, variation=replace(box, members=_members(study.plant, k)))) for k in (2, 4, 8)]
    runs.append(("box + time scale 0.8-1.25", replace(
        study, variation=replace(box, time_scale=(0.8, 1.25)))))
    base = None
    for name, st in runs:
        tmp = Path(tempfile.mkdtemp(prefix="bench-family-"))
        t0 = time.perf_counter()
        res = explore(st, tmp, trials=trials, seed=1, batch=32, progress=False)
        dt = time.perf_counter() - t0
        base = dt if base is None else base
        print(f"{name:<26} {dt:7.2f} s  {dt / base:5.2f}x nominal  "
              f"answer: {res.obj['answer']['design']}", flush=True)
        shutil.rmtree(tmp, ignore_errors=True)


def main() -> None:
    if "--family" in sys.argv:
        args = [a for a in sys.argv[1:] if a != "--family"]
        family(args[0], int(args[1]) if len(args) > 1 else 100)
        return
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
