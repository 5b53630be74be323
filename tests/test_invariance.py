"""Metamorphic properties (Hypothesis): the answer must not depend on the loop's sign,
the time unit or the plant's gain units.

- Negating the plant gain: the compensator sign that makes negative feedback
  (explorer.core.loop.feedback_sign) flips with it, and C·P is the same loop.
- Scaling time: P_a(s) = P(s/a) has roots × a, delay ÷ a and gain × a^(n_p − n_z);
  with the crossover × a every frequency-domain figure is the same and every time ÷ a.
- Scaling the plant gain by g: every compensator gain ÷ g, the same loop.
These are identities of the loop algebra, so the reference is the untransformed run
itself; the transformed run shares no state with it.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explorer.design.structures import candidate_structures
from explorer.model.study import parse_study
from explorer.search.exploration import explore, make_problem
from explorer.search.tune import evaluate_batch


@st.composite
def studies(draw) -> dict[str, Any]:
    """Random loops of our own: two or three stable real lags, sometimes an integrator,
    a delay or a right-half-plane zero; a crossover and phase margin the loop can take."""
    n = draw(st.integers(2, 3))
    poles = sorted((-(10.0 ** draw(st.floats(-1.5, 1.0))) for _ in range(n)), reverse=True)
    zeros: list[float] = []
    slow = -poles[0]
    if draw(st.booleans()):
        poles = [0.0, *poles[1:]]
    kind = draw(st.sampled_from(["plain", "delay", "rhp zero"]))
    delay = 0.0
    if kind == "delay":
        delay = draw(st.floats(0.05, 0.6)) / max(slow, 0.1)
    wc = slow * 10.0 ** draw(st.floats(-0.3, 0.5))
    if kind == "rhp zero":
        zeros = [wc * 10.0 ** draw(st.floats(0.6, 1.0))]
    if delay:
        wc = min(wc, 0.5 / delay)
    return {
        "plant": {"gain": 10.0 ** draw(st.floats(-2, 2)), "zeros": zeros, "poles": poles,
                  "delay": delay},
        "targets": {"crossover": wc, "phase_margin": draw(st.floats(40.0, 60.0)),
                    "integrators": 1},
        "limits": {"sensitivity_peak": 2.0},
        "search": {"max_order": 2},
    }


def _negated(doc: dict[str, Any]) -> dict[str, Any]:
    out = {k: dict(v) if isinstance(v, dict) else v for k, v in doc.items()}
    out["plant"]["gain"] = -doc["plant"]["gain"]
    return out


def _time_scaled(doc: dict[str, Any], a: float) -> dict[str, Any]:
    out = {k: dict(v) if isinstance(v, dict) else v for k, v in doc.items()}
    p = doc["plant"]
    out["plant"].update(
        gain=p["gain"] * a ** (len(p["poles"]) - len(p["zeros"])),
        zeros=[z * a for z in p["zeros"]], poles=[q * a for q in p["poles"]],
        delay=p["delay"] / a,
    )
    out["targets"]["crossover"] = doc["targets"]["crossover"] * a
    return out


def _gain_scaled(doc: dict[str, Any], g: float) -> dict[str, Any]:
    out = {k: dict(v) if isinstance(v, dict) else v for k, v in doc.items()}
    out["plant"]["gain"] = doc["plant"]["gain"] * g
    return out


def _batch(doc: dict[str, Any]) -> list[dict[str, np.ndarray]]:
    """evaluate_batch of every candidate structure at fixed parameter rows (no time
    domain): the frequency figures and constraint values per row."""
    study = parse_study(doc)
    problem = make_problem(study)
    rng = np.random.default_rng(3)
    out = []
    for s in candidate_structures(study.plant, study.targets, study.search):
        params = {k: rng.uniform(lo, hi, 16) for k, (lo, hi) in s.params.items()}
        wc = np.full(16, float(problem.wc_rad_s))
        res = evaluate_batch(problem, s, params, wc, time_domain=False)
        out.append({"ms": res["metrics"]["sensitivity_peak"],
                    "pm": res["metrics"]["phase_margin_deg"],
                    "feasible": res["feasible"], "gain": res["gain"]})
    return out


@pytest.mark.slow
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(doc=studies(), a=st.sampled_from([0.01, 100.0]), g=st.sampled_from([1e-3, 1e3]))
def test_every_candidate_is_invariant(doc: dict[str, Any], a: float, g: float) -> None:
    base = _batch(doc)
    for kind, other in (("negated", _batch(_negated(doc))),
                        ("time-scaled", _batch(_time_scaled(doc, a))),
                        ("gain-scaled", _batch(_gain_scaled(doc, g)))):
        assert len(other) == len(base), kind
        for b, o in zip(base, other, strict=True):
            assert np.array_equal(b["feasible"], o["feasible"]), kind
            np.testing.assert_allclose(o["ms"], b["ms"], rtol=1e-7, equal_nan=True,
                                       err_msg=kind)
            np.testing.assert_allclose(o["pm"], b["pm"], atol=1e-6, equal_nan=True,
                                       err_msg=kind)
            if kind == "negated":  # the compensator mirrors the plant's sign
                np.testing.assert_allclose(o["gain"], -b["gain"], rtol=1e-9, equal_nan=True)


def _summary(res) -> dict[str, Any]:
    ans = res.obj["answer"]
    d = next((x for x in res.designs if x["name"] == ans["design"]), None)
    meets = sorted((x["name"], x["meets_targets"]) for x in res.designs)
    if d is None:
        return {"answer": None, "meets": meets}
    return {"answer": ans["design"], "structure": d["structure"], "order": ans["order"],
            "ms": d["metrics"]["sensitivity_peak"], "pm": d["metrics"]["phase_margin_deg"],
            "meets": meets}


@pytest.mark.slow
@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                HealthCheck.function_scoped_fixture])
@given(doc=studies())
def test_explore_answer_is_invariant(doc: dict[str, Any], tmp_path_factory) -> None:
    runs = {}
    for kind, d in (("base", doc), ("negated", _negated(doc)),
                    ("time-scaled", _time_scaled(doc, 100.0)),
                    ("gain-scaled", _gain_scaled(doc, 1e3))):
        out = tmp_path_factory.mktemp(kind.replace(" ", "_"))
        runs[kind] = _summary(explore(parse_study(d), out, trials=8, seed=2, batch=8,
                                      progress=False))
    base = runs.pop("base")
    for kind, got in runs.items():
        assert got["answer"] == base["answer"], kind
        assert got["meets"] == base["meets"], kind
        if base["answer"] is not None:
            assert got["structure"] == base["structure"] and got["order"] == base["order"]
            assert math.isclose(got["ms"], base["ms"], rel_tol=1e-6), kind
            assert math.isclose(got["pm"], base["pm"], abs_tol=1e-5), kind
