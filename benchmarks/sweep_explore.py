"""On-demand sweep of explore's promises over randomly drawn loops of our own.

For each drawn study (process loops with delay, motion axes with an integrating plant
and sometimes a lightly damped mode, delay-free thermal lags, open-loop unstable
plants, plants with a right-half-plane zero, and reverse-acting ones: a cooling
process with delay and an unstable plant, both with a negative gain; random targets
and limits) it runs ``explore`` and checks:

* every design claiming ``meets_targets`` is re-checked with the metric engine;
* where a hand design (phase-balanced, lead, PI + lead) meets the targets and limits
  and keeps the practical pole limit, some optimized design meets them with an Ms no
  higher than the best such hand design;
* where none does, whether explore still finds a design meeting them (reported);
* the study's twin with the plant gain negated gets the same answer (design name,
  order) — explore must not care about the loop's sign (``--no-twins`` skips it).

Run: ``python benchmarks/sweep_explore.py [N_CASES] [--trials T] [--jobs J]``
(default 24 cases, 100 trials, 2 processes). Prints one line per case and a tally;
the exit status is 1 when a promise is broken. Not a test: the cases are random.
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np


def draw_study(k: int, rng: np.random.Generator) -> dict[str, Any]:
    """Study k: one of seven loop families, with random targets and limits."""
    kinds = ("process", "motion", "thermal", "unstable", "inverse", "cooling",
             "reverse unstable")
    kind = kinds[k % len(kinds)]
    pm = float(rng.uniform(45.0, 65.0))
    limits: dict[str, float] = {}
    if rng.random() < 0.5:
        limits["sensitivity_peak"] = round(float(rng.uniform(1.5, 2.0)), 2)
    if rng.random() < 0.3:
        limits["gain_margin_db"] = 6.0
    if kind == "process":
        t1 = float(10 ** rng.uniform(0, 2))
        poles = [-1.0 / t1]
        if rng.random() < 0.6:
            poles.append(-1.0 / (t1 * float(rng.uniform(0.05, 0.5))))
        theta = t1 * float(rng.uniform(0.03, 0.4))
        gain = float(10 ** rng.uniform(-1, 1)) * math.prod(-p for p in poles)
        wc = float(rng.uniform(0.2, 0.7)) / theta
        plant: dict[str, Any] = {"gain": gain, "poles": poles, "delay": theta}
        integrators = 1
    elif kind == "motion":
        a = float(10 ** rng.uniform(-0.5, 1.5))
        wc = a * float(10 ** rng.uniform(-0.3, 0.7))
        poles_c: list[Any] = [0.0, -a]
        gain = float(10 ** rng.uniform(-1, 1)) * a
        if rng.random() < 0.5:
            wr = wc * float(rng.uniform(3.0, 10.0))
            z = float(rng.uniform(0.02, 0.1))
            re, im = -z * wr, wr * math.sqrt(1 - z * z)
            poles_c += [f"{re}+{im}j", f"{re}-{im}j"]
            gain *= wr * wr
        plant = {"gain": gain, "poles": poles_c}
        if rng.random() < 0.5:
            plant["delay"] = float(rng.uniform(0.0, 0.25)) / wc
        integrators = 1 if rng.random() < 0.6 else 2
    elif kind == "cooling":  # reverse acting: more cooling, lower temperature; with delay
        t1 = float(10 ** rng.uniform(0, 2))
        poles = [-1.0 / t1, -1.0 / (t1 * float(rng.uniform(0.1, 0.5)))]
        theta = t1 * float(rng.uniform(0.03, 0.3))
        gain = -float(10 ** rng.uniform(-1, 1)) * math.prod(-p for p in poles)
        wc = float(rng.uniform(0.2, 0.6)) / theta
        plant = {"gain": gain, "poles": poles, "delay": theta}
        integrators = 1
    elif kind == "reverse unstable":  # an exothermic mode at +a; the actuator removes heat
        a = float(10 ** rng.uniform(-0.5, 1.0))
        poles = [a, -a * float(rng.uniform(8.0, 30.0))]
        gain = -float(10 ** rng.uniform(-1, 1)) * math.prod(abs(p) for p in poles)
        wc = a * float(rng.uniform(2.5, 5.0))
        plant = {"gain": gain, "poles": poles}
        integrators = 1
    elif kind == "unstable":  # a falling mode at +a, a slower stable lag, an actuator lag
        a = float(10 ** rng.uniform(-0.5, 1.0))
        poles = [a, -a * float(rng.uniform(0.3, 1.5)), -a * float(rng.uniform(8.0, 30.0))]
        gain = float(10 ** rng.uniform(-1, 1)) * math.prod(abs(p) for p in poles)
        wc = a * float(rng.uniform(2.5, 5.0))
        plant = {"gain": gain, "poles": poles}
        integrators = 1
    elif kind == "inverse":  # a right-half-plane zero above the crossover (inverse response)
        ts = sorted(float(10 ** rng.uniform(0, 2)) for _ in range(2))
        poles = [-1.0 / t for t in ts]
        wc = float(10 ** rng.uniform(-0.3, 0.3)) / ts[0]
        zero = wc * float(rng.uniform(3.0, 8.0))
        gain = -float(10 ** rng.uniform(-1, 1)) * math.prod(-p for p in poles) / zero
        plant = {"gain": gain, "zeros": [zero], "poles": poles}
        integrators = 1
    else:
        ts = sorted(float(10 ** rng.uniform(0, 2.5)) for _ in range(3))
        poles = [-1.0 / t for t in ts]
        gain = float(10 ** rng.uniform(-1, 1)) * math.prod(-p for p in poles)
        wc = float(10 ** rng.uniform(-0.3, 0.5)) / ts[1]
        plant = {"gain": gain, "poles": poles}
        integrators = 1
    study: dict[str, Any] = {
        "name": f"sweep case {k} ({kind})",
        "plant": plant,
        "targets": {"crossover": wc, "phase_margin": pm, "integrators": integrators},
        "search": {"max_order": int(rng.choice([2, 3]))},
    }
    if limits:
        study["limits"] = limits
    return study


def _answer(study: Any, trials: int) -> tuple[Any, Any] | str:
    from explorer.core.errors import LoopscoutError
    from explorer.search.exploration import explore

    with tempfile.TemporaryDirectory() as tmp:
        try:
            res = explore(study, Path(tmp), trials=trials, seed=1, progress=False)
        except LoopscoutError as exc:
            return str(exc)
    return res, (res.obj["answer"]["design"], res.obj["answer"]["order"])


def run_case(args: tuple[int, dict[str, Any], int, bool]) -> dict[str, Any]:
    from explorer.core.loop import Rational
    from explorer.evaluation.records import evaluated_record
    from explorer.model.study import parse_study

    k, data, trials, twins = args
    study = parse_study(data)
    got = _answer(study, trials)
    if isinstance(got, str):
        return {"k": k, "name": data["name"], "refused": got}
    res, answer = got
    twin_differs = None
    if twins:
        mirror = {**data, "plant": {**data["plant"], "gain": -data["plant"]["gain"]}}
        other = _answer(parse_study(mirror), trials)
        other_answer = other if isinstance(other, str) else other[1]
        if other_answer != answer:
            twin_differs = f"{answer} vs negated gain {other_answer}"
    false_claims = []
    for d in res.designs:  # re-check from the JSON-form records (compensator roots as written)
        c = d["compensator"]
        comp = Rational(gain=c["gain"], zeros=[complex(z) for z in c["zeros"]],
                        poles=[complex(p) for p in c["poles"]])
        again = evaluated_record(study, comp, name=d["name"], origin="", structure="")
        if again["meets_targets"] != d["meets_targets"]:
            false_claims.append(d["name"])
    hand = [d for d in res.designs if d["origin"] in ("hand", "phase-balanced")
            and d["meets_targets"] and not d["practical_misses"]]
    opt = [d for d in res.designs if d["origin"] == "optimized" and d["meets_targets"]]
    return {
        "k": k,
        "name": data["name"],
        "hand_ms": min((d["metrics"]["sensitivity_peak"] for d in hand), default=None),
        "opt_ms": min((d["metrics"]["sensitivity_peak"] for d in opt), default=None),
        "opt_order": min((d["order"] for d in opt), default=None),
        "false_claims": false_claims,
        "twin_differs": twin_differs,
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("cases", nargs="?", type=int, default=24)
    ap.add_argument("--trials", type=int, default=100)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--no-twins", action="store_true", help="skip the negated-gain twins")
    a = ap.parse_args()
    rng = np.random.default_rng(a.seed)
    cases = [(k, draw_study(k, rng), a.trials, not a.no_twins) for k in range(a.cases)]
    broken = hand_solved = hand_beaten = hand_refused = found_anyway = 0
    with ProcessPoolExecutor(max_workers=a.jobs) as pool:
        for r in pool.map(run_case, cases):
            if "refused" in r:
                print(f"{r['k']:3d} {r['name']:28s} refused: {r['refused']}")
                continue
            verdict = "ok"
            if r["false_claims"]:
                verdict = f"FALSE CLAIM {r['false_claims']}"
                broken += 1
            if r["twin_differs"]:
                verdict = f"TWIN DIFFERS {r['twin_differs']}"
                broken += 1
            if r["hand_ms"] is not None:
                hand_solved += 1
                if r["opt_ms"] is not None and r["opt_ms"] <= r["hand_ms"] * (1 + 1e-9):
                    hand_beaten += 1
                else:
                    verdict = "OPTIMIZED WORSE THAN HAND"
                    broken += 1
            else:
                hand_refused += 1
                found_anyway += r["opt_ms"] is not None
            fmt = lambda v: "-" if v is None else f"{v:.3f}"  # noqa: E731
            print(
                f"{r['k']:3d} {r['name']:28s} hand Ms {fmt(r['hand_ms']):>6}  "
                f"optimized Ms {fmt(r['opt_ms']):>6} (order {r['opt_order']})  {verdict}"
            )
            sys.stdout.flush()
    print(
        f"hand solved {hand_solved}: optimized Ms ≤ hand in {hand_beaten}; "
        f"hand failed {hand_refused}: explore met the targets in {found_anyway}; "
        f"broken promises {broken}"
    )
    return 1 if broken else 0


if __name__ == "__main__":
    sys.exit(main())
