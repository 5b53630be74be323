"""The recommended design (explorer.search.recommend): the documented rule on records we
build, its invariance under scaling, and near-duplicate removal."""

from __future__ import annotations

import copy
import math

import pytest

from explorer.search.recommend import W_MS, W_NOISE, cost, drop_near_duplicates, recommend


def _d(name, order=2, ms=1.4, noise=3.0, ratio=2.0, iae=20.0, ts=100.0, wc=0.06,
       pole=5.0, meets=True, origin="optimized", structure="S"):
    return {
        "name": name, "order": order, "origin": origin, "structure": structure,
        "meets_targets": meets,
        "metrics": {"sensitivity_peak": ms, "noise_gain": noise, "noise_gain_ratio": ratio,
                    "iae_load": iae, "settling_time_s": ts, "crossover_rad_s": wc,
                    "pole_ratio": pole},
    }


def _pick(designs, searched_wc=False, ratio=20.0):
    return recommend(designs, max_pole_ratio=ratio, searched_wc=searched_wc)[0]["design"]


def test_a_fraction_of_ms_does_not_buy_many_times_the_noise() -> None:
    # the kiln finding: the lowest-Ms design had 0.6 % less Ms for 84× the noise gain
    calm = _d("calm", ms=1.400, noise=2.7, ratio=1.8)
    noisy = _d("noisy", ms=1.392, noise=227.0, ratio=60.0)
    answer, lines = recommend([noisy, calm], max_pole_ratio=20.0, searched_wc=False)
    assert answer["design"] == "calm" and answer["order"] == 2
    assert any(line.strip().startswith("lowest Ms: noisy") and "84× the noise gain" in line
               for line in lines)


def test_weights_say_one_percent_ms_weighs_fifteen_percent_noise() -> None:
    base = _d("a", ms=1.5, noise=10.0, ratio=2.0)
    # 1 % more Ms against about 16 % less noise gain and noise ratio: a tie by the weights
    f = 1.161
    other = _d("b", ms=1.5 * 1.01, noise=10.0 / f, ratio=2.0 / f)
    c = cost([base, other], searched_wc=False)
    assert W_MS * math.log(1.01) == pytest.approx(W_NOISE * math.log(1.15), rel=0.1)
    assert c[0] == pytest.approx(c[1], abs=1e-3)
    # and 2 % more Ms is not bought by it
    worse = _d("c", ms=1.5 * 1.02, noise=10.0 / f, ratio=2.0 / f)
    assert cost([base, worse], searched_wc=False)[1] > cost([base, worse], searched_wc=False)[0]


def test_tiers_practical_then_load_rejection_then_order() -> None:
    fast_pole = _d("fast pole", order=1, ms=1.2, pole=300.0)
    offset = _d("offset", order=1, ms=1.2, iae=None)
    order2 = _d("order 2", order=2, ms=1.6)
    order3 = _d("order 3", order=3, ms=1.2)
    assert _pick([fast_pole, offset, order2, order3]) == "order 2"
    # without the load-rejecting ones the offset design is the lowest order left
    assert _pick([fast_pole, offset]) == "offset"
    # a study that raises max_pole_ratio lets the fast pole back in
    assert _pick([fast_pole, order2], ratio=500.0) == "fast pole"
    # only when no design keeps the practical limit is it waived, and the reason says so
    answer, _ = recommend([fast_pole], max_pole_ratio=20.0, searched_wc=False)
    assert answer["design"] == "fast pole" and "practical limit" in answer["why"]


def test_designs_missing_targets_are_never_recommended() -> None:
    answer, lines = recommend([_d("miss", meets=False, ms=1.01)], max_pole_ratio=20.0,
                              searched_wc=False)
    assert answer["design"] is None and answer["order"] is None and not lines
    assert set(answer) == {"design", "order", "why"}
    assert answer["why"].startswith("no design meets the targets")


def test_a_searched_crossover_is_an_objective() -> None:
    slow = _d("slow", wc=0.04, ts=200.0)
    quick = _d("quick", wc=0.08, ts=200.0, ms=1.41)
    assert _pick([slow, quick], searched_wc=False) == "slow"
    assert _pick([slow, quick], searched_wc=True) == "quick"


def test_choice_unchanged_by_scaling_time_and_gain() -> None:
    """Scaling the plant gain by g scales every compensator's noise gain by 1/g (and
    load IAE by g·…); scaling time by a scales times by 1/a and crossovers by a. The
    rule compares ratios, so the choice must not move."""
    designs = [
        _d("A", ms=1.45, noise=3.0, ratio=2.0, iae=24.0, ts=120.0),
        _d("B", ms=1.38, noise=15.0, ratio=9.0, iae=20.0, ts=90.0),
        _d("C", ms=1.60, noise=1.5, ratio=1.2, iae=40.0, ts=300.0),
        _d("D", order=1, ms=1.7, noise=1.0, iae=None),
    ]
    want = _pick(designs, searched_wc=True)
    for g, a in [(1e3, 1.0), (1e-3, 1.0), (1.0, 100.0), (1.0, 0.01), (-1.0, 1.0)]:
        scaled = copy.deepcopy(designs)
        for d in scaled:
            m = d["metrics"]
            m["noise_gain"] /= abs(g)
            if m["iae_load"] is not None:
                m["iae_load"] *= abs(g) / a
            m["settling_time_s"] /= a
            m["crossover_rad_s"] *= a
        assert _pick(scaled, searched_wc=True) == want


def test_near_duplicates_listed_once_across_structures() -> None:
    a = _d("PID·filter #3 refined", structure="PID·filter")
    b = _d("PID·filter (complex zeros) #7 refined", structure="PID·filter (complex zeros)",
           ms=1.4 * 1.001, noise=3.0 * 1.01)
    c = _d("different", ms=1.5)
    given = _d("given twin", origin="given")
    kept = drop_near_duplicates([a, b, c, given])
    assert [d["name"] for d in kept] == [a["name"], "different", "given twin"]


def test_an_alternative_without_load_rejection_says_so() -> None:
    ans = _d("I-type", order=3, ms=1.8, noise=2.5)
    alt = _d("P-type", order=3, ms=1.5, noise=60.0, iae=None)
    answer, lines = recommend([ans, alt], max_pole_ratio=20.0, searched_wc=False)
    assert answer["design"] == "I-type"
    (line,) = [x for x in lines if x.strip().startswith("lowest Ms: P-type")]
    assert "an offset under a constant load" in line and "24× the noise gain" in line


def test_the_answer_says_why_a_lower_order_was_passed_over_and_lists_its_alternatives() -> None:
    offset = _d("offset", order=1, ms=1.2, iae=None, ts=20.0)
    pid = _d("pid", order=2, ms=1.5, noise=3.0)
    quiet = _d("quiet", order=2, ms=1.8, noise=0.5, ratio=1.2)
    answer, lines = recommend([offset, pid, quiet], max_pole_ratio=20.0, searched_wc=False)
    assert answer["design"] == "pid" and answer["order"] == 2
    assert "order 1 designs meet them too but leave an offset" in answer["why"]
    # one entry per alternative line, in the same order, naming the same design
    alt_lines = [ln.strip() for ln in lines[2:]]
    assert len(answer["alternatives"]) == len(alt_lines) >= 2
    for a, ln in zip(answer["alternatives"], alt_lines, strict=True):
        assert ln == f"{a['criterion']}: {a['design']} — {a['trade_off']}"
    assert {a["design"] for a in answer["alternatives"]} >= {"offset", "quiet"}
