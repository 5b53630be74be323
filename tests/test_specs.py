"""Tests of explorer.model.specs against published relations and independent computation.

Sources named beside each check:
- "recomputed": the numbers of docs/references.md §1, recomputed there with plain
  numpy/scipy from the formulas of Ogata, *Modern Control Engineering* 5e, Ch. 5/7,
  Nise, *Control Systems Engineering*, Ch. 4/10, and Skogestad & Postlethwaite,
  *Multivariable Feedback Control* 2e (2005) §2.4.
- "from memory": book values recalled but not re-read.
- "common practice": trade facts with no single source.
- "independent": computed here with scipy (root finding on the loop, step response
  of the closed loop), not with the formulas under test.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, signal

from explorer.model import specs

# --------------------------------------------------------------------------------------
# docs/references.md §1, "Numbers [RECOMP, ωn = 1]" (recomputed):
# OS %, ζ, Mr, PM exact (deg), 2·asin(1/2Mr) (deg), ωc/ωn
SECOND_ORDER_TABLE = [
    (5.0, 0.6901, 1.0011, 64.63, 59.93, 0.6546),
    (10.0, 0.5912, 1.0487, 58.59, 56.95, 0.7219),
    (20.0, 0.4559, 1.2321, 48.15, 47.88, 0.8168),
    (30.0, 0.3579, 1.4963, 39.09, 39.04, 0.8810),
]


@pytest.mark.parametrize(("os_pct", "zeta", "mr", "pm", "pm_mc", "ratio"), SECOND_ORDER_TABLE)
def test_second_order_table_recomputed(os_pct, zeta, mr, pm, pm_mc, ratio):
    # recomputed: docs/references.md §1 table (Ogata Ch. 5/7, Nise Ch. 4/10, S&P §2.4)
    z = specs.zeta_from_overshoot(os_pct)
    assert z == pytest.approx(zeta, abs=6e-5)
    assert specs.mr_from_zeta(z) == pytest.approx(mr, abs=6e-5)
    assert specs.pm_from_zeta(z) == pytest.approx(pm, abs=6e-3)
    assert specs.pm_from_mr_mcircle(specs.mr_from_zeta(z)) == pytest.approx(pm_mc, abs=6e-3)
    assert specs.crossover_ratio(z) == pytest.approx(ratio, abs=6e-5)


@pytest.mark.parametrize(
    ("zeta", "mr", "pm"),
    [(0.5996, 1.0420, 59.16), (0.5000, 1.1547, 51.83)],  # recomputed rows 9.5 % and ζ = 0.5
)
def test_second_order_table_rows_given_by_zeta(zeta, mr, pm):
    # recomputed: docs/references.md §1 (rows labelled "Nise's ζ = 0.6 case" and "ζ = 0.5")
    assert specs.mr_from_zeta(zeta) == pytest.approx(mr, abs=6e-5)
    assert specs.pm_from_zeta(zeta) == pytest.approx(pm, abs=6e-3)


def test_zeta_06_pairing_from_memory():
    # from memory: Nise, Control Systems Engineering, Ch. 4/10 — ζ = 0.6 ↔ 9.5 %
    # overshoot ↔ PM 59.2° (docs/references.md §1 recomputes 9.48 % and 59.19°).
    assert specs.overshoot_from_zeta(0.6) == pytest.approx(9.48, abs=0.01)
    assert specs.pm_from_zeta(0.6) == pytest.approx(59.2, abs=0.05)
    assert specs.zeta_from_overshoot(9.5) == pytest.approx(0.6, abs=1e-3)


@pytest.mark.parametrize(
    ("pm", "zeta", "os_pct"),
    [(30.0, 0.2686, 41.6), (45.0, 0.4204, 23.3), (50.0, 0.4777, 18.1), (60.0, 0.6124, 8.8)],
)
def test_inverse_pm_table_recomputed(pm, zeta, os_pct):
    # recomputed: docs/references.md §1 "Inverse, PM → ζ (exact relation)"
    z = specs.zeta_from_pm(pm)
    assert z == pytest.approx(zeta, abs=6e-5)
    assert specs.overshoot_from_zeta(z) == pytest.approx(os_pct, abs=0.06)


@pytest.mark.parametrize(("mt", "pm"), [(1.25, 47.16), (1.3, 45.24), (2.0, 28.96)])
def test_mcircle_bound_table_recomputed(mt, pm):
    # recomputed of the S&P 2e §2.4 formula (from memory): docs/references.md §1 Ms/Mt table
    assert specs.pm_from_mr_mcircle(mt) == pytest.approx(pm, abs=6e-3)
    assert specs.mr_from_pm_mcircle(pm) == pytest.approx(mt, abs=1e-3)


def test_pm_rule_of_thumb_from_memory():
    # from memory: Franklin, Powell & Emami-Naeini, Ch. 6 — PM[deg] ≈ 100ζ below ~60°.
    z = np.linspace(0.1, 0.6, 26)
    assert np.max(np.abs(specs.pm_from_zeta(z) - 100 * z)) < 4.0


def test_common_practice_20_percent_chain():
    # common practice: 20 % overshoot ↔ ζ ≈ 0.456 ↔ Mr ≈ 1.23 ↔ PM ≈ 47.9° (M-circle)
    z = specs.zeta_from_overshoot(20.0)
    assert z == pytest.approx(0.456, abs=5e-4)
    mr = specs.mr_from_zeta(z)
    assert mr == pytest.approx(1.23, abs=5e-3)
    assert specs.pm_from_mr_mcircle(mr) == pytest.approx(47.9, abs=0.05)


def test_common_practice_settling_4s():
    # common practice (Ogata Ch. 5, Nise Ch. 4): 2 % settling in 4 s ↔ σ = 1 (poles at −1 ± ·j)
    assert specs.sigma_from_settling(4.0, 0.02) == pytest.approx(1.0)
    assert specs.sigma_from_settling(3.0, 0.05) == pytest.approx(1.0)
    assert specs.settling_from_sigma(1.0, 0.02) == pytest.approx(4.0)
    # the constants are the envelope e^(-σt) reaching the band, rounded:
    # ln(1/0.02) = 3.91 → 4, ln(1/0.05) = 3.00 → 3 (docs/references.md §1)
    assert specs.settling_from_sigma(1.0, 0.02) == pytest.approx(math.log(1 / 0.02), abs=0.1)
    assert specs.settling_from_sigma(1.0, 0.05) == pytest.approx(math.log(1 / 0.05), abs=0.01)


def test_bad_settling_band():
    with pytest.raises(ValueError, match="band"):
        specs.sigma_from_settling(4.0, 0.01)


# --------------------------------------------------------------------------------------
# independent: the standard loop ωn²/(s(s+2ζωn)) evaluated directly with scipy
def _numeric_pm_and_wc(zeta: float, wn: float) -> tuple[float, float]:
    def loop(w: float) -> complex:
        s = 1j * w
        return wn**2 / (s * (s + 2 * zeta * wn))

    wc = optimize.brentq(lambda w: abs(loop(w)) - 1.0, 1e-6 * wn, 10.0 * wn, xtol=1e-14)
    # the phase of this loop lies in (−180°, −90°), so np.angle needs no unwrapping
    return 180.0 + math.degrees(np.angle(loop(wc))), wc


@pytest.mark.parametrize("zeta", [0.05, 0.2, 0.4559, 0.7071, 1.0, 2.0])
@pytest.mark.parametrize("wn", [0.3, 1.0, 25.0])
def test_exact_pm_against_numeric_loop(zeta, wn):
    # independent: brentq on |L(jω)| = 1 for the standard loop, phase by np.angle
    pm_num, wc_num = _numeric_pm_and_wc(zeta, wn)
    assert specs.pm_from_zeta(zeta) == pytest.approx(pm_num, abs=1e-8)
    assert specs.crossover_ratio(zeta) * wn == pytest.approx(wc_num, rel=1e-10)
    assert specs.crossover_from_sigma(zeta * wn, zeta) == pytest.approx(wc_num, rel=1e-10)


@pytest.mark.parametrize("pm", [5.0, 30.0, 47.9, 60.0, 76.0, 85.0])
def test_zeta_from_pm_against_root_finding(pm):
    # independent: ζ found by brentq on the numerically evaluated loop's phase margin
    z_num = optimize.brentq(lambda z: _numeric_pm_and_wc(z, 1.0)[0] - pm, 1e-4, 20.0, xtol=1e-13)
    assert specs.zeta_from_pm(pm) == pytest.approx(z_num, rel=1e-8)


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.4559, 0.6, 0.7])
def test_mr_against_numeric_peak(zeta):
    # independent: peak of |T(jω)| by bounded scalar minimisation
    def neg_t(w: float) -> float:
        s = 1j * w
        return -abs(1.0 / (s * s + 2 * zeta * s + 1.0))

    res = optimize.minimize_scalar(neg_t, bounds=(1e-3, 1.0), method="bounded",
                                   options={"xatol": 1e-12})
    assert specs.mr_from_zeta(zeta) == pytest.approx(-res.fun, rel=1e-8)


def test_mr_is_one_above_sqrt_half():
    # Ogata Ch. 7 (from memory): no resonant peak for ζ ≥ 1/√2; independent: |T| ≤ 1
    w = np.logspace(-3, 3, 2001)
    for zeta in (0.7072, 0.9, 1.5):
        t = np.abs(1.0 / ((1j * w) ** 2 + 2 * zeta * 1j * w + 1.0))
        assert t.max() <= 1.0 + 1e-12
        assert specs.mr_from_zeta(zeta) == 1.0


def _step(zeta: float, t_end: float, n: int = 200_001) -> tuple[np.ndarray, np.ndarray]:
    t = np.linspace(0.0, t_end, n)
    t, y = signal.step(signal.lti([1.0], [1.0, 2 * zeta, 1.0]), T=t)
    return t, y


@pytest.mark.parametrize("os_pct", [2.0, 9.5, 20.0, 45.0, 70.0])
def test_overshoot_against_step_response(os_pct):
    # independent: peak of the scipy.signal step response of T(s) = 1/(s² + 2ζs + 1)
    zeta = specs.zeta_from_overshoot(os_pct)
    _, y = _step(zeta, 20.0)
    assert 100 * (y.max() - 1.0) == pytest.approx(os_pct, abs=2e-3)


@pytest.mark.parametrize(
    ("os_pct", "ts2_wn", "ts5_wn"),
    [(5.0, 6.00, 2.86), (10.0, 5.93, 5.25), (20.0, 8.33, 5.25), (30.0, 10.90, 7.85)],
)
def test_settling_estimate_accuracy(os_pct, ts2_wn, ts5_wn):
    # recomputed: docs/references.md §1 exact settling times; independent: scipy step here.
    # The textbook estimate 4/σ (3/σ) is within −50 %…+15 % of the exact value
    # (the accuracy docs/specs.md states).
    zeta = specs.zeta_from_overshoot(os_pct)
    t, y = _step(zeta, 40.0)
    for band, ref in ((0.02, ts2_wn), (0.05, ts5_wn)):
        outside = np.nonzero(np.abs(y - 1.0) > band)[0]
        ts_exact = t[outside[-1] + 1]
        assert ts_exact == pytest.approx(ref, abs=0.011)
        est = specs.settling_from_sigma(zeta, band)  # ωn = 1, so σ = ζ
        assert 0.5 * est <= ts_exact <= 1.15 * est


# --------------------------------------------------------------------------------------
# round trips and invariants (Hypothesis)
@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=1e-6, max_value=99.9))
def test_roundtrip_overshoot_zeta(os_pct):
    z = specs.zeta_from_overshoot(os_pct)
    assert 0.0 < z < 1.0
    assert specs.overshoot_from_zeta(z) == pytest.approx(os_pct, rel=1e-9)


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=1e-4, max_value=50.0))
def test_roundtrip_zeta_pm(zeta):
    assert specs.zeta_from_pm(specs.pm_from_zeta(zeta)) == pytest.approx(zeta, rel=1e-7)


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=1e-3, max_value=1 / math.sqrt(2.0) - 1e-6))
def test_roundtrip_zeta_mr(zeta):
    assert specs.zeta_from_mr(specs.mr_from_zeta(zeta)) == pytest.approx(zeta, rel=1e-6)


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=0.5, max_value=1e3))
def test_roundtrip_mcircle(mr):
    assert specs.mr_from_pm_mcircle(specs.pm_from_mr_mcircle(mr)) == pytest.approx(mr, rel=1e-9)


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=1e-3, max_value=1e3), st.floats(min_value=0.01, max_value=5.0),
       st.sampled_from([0.02, 0.05]))
def test_roundtrip_settling_crossover(ts, zeta, band):
    sigma = specs.sigma_from_settling(ts, band)
    assert specs.settling_from_sigma(sigma, band) == pytest.approx(ts, rel=1e-12)
    wc = specs.crossover_from_sigma(sigma, zeta)
    assert specs.sigma_from_crossover(wc, zeta) == pytest.approx(sigma, rel=1e-12)


@settings(max_examples=100, deadline=None)
@given(st.floats(min_value=0.01, max_value=0.7))
def test_mcircle_is_a_lower_bound_on_standard_loop(zeta):
    # S&P §2.4 (from memory): 2·asin(1/(2Mt)) is a guaranteed (lower) bound
    assert specs.pm_from_mr_mcircle(specs.mr_from_zeta(zeta)) <= specs.pm_from_zeta(zeta) + 1e-9


def test_monotone():
    z = np.linspace(0.01, 3.0, 500)
    assert np.all(np.diff(specs.pm_from_zeta(z)) > 0)
    assert np.all(np.diff(specs.overshoot_from_zeta(z[z < 1])) < 0)
    assert np.all(np.diff(specs.crossover_ratio(z)) < 0)


def test_batch_equals_one_by_one():
    os_arr = np.array([0.0, 1.0, 9.5, 20.0, 60.0, 99.0])
    z_arr = specs.zeta_from_overshoot(os_arr)
    assert isinstance(z_arr, np.ndarray) and z_arr.shape == os_arr.shape
    for fn, arg in [
        (specs.zeta_from_overshoot, os_arr),
        (specs.overshoot_from_zeta, z_arr),
        (specs.mr_from_zeta, z_arr),
        (specs.pm_from_zeta, z_arr),
        (specs.crossover_ratio, z_arr),
        (specs.zeta_from_pm, np.array([1.0, 30.0, 60.0, 89.0])),
        (specs.pm_from_mr_mcircle, np.array([0.6, 1.0, 1.3, 4.0])),
        (specs.mr_from_pm_mcircle, np.array([10.0, 60.0, 120.0])),
        (specs.zeta_from_mr, np.array([1.0, 1.2, 3.0])),
        (specs.sigma_from_settling, np.array([0.5, 4.0, 100.0])),
    ]:
        batch = fn(arg)
        one = np.array([fn(float(a)) for a in arg])
        np.testing.assert_array_equal(batch, one)
        assert all(isinstance(fn(float(a)), float) for a in arg)


def test_out_of_domain_is_nan():
    assert math.isnan(specs.zeta_from_overshoot(100.0))
    assert math.isnan(specs.zeta_from_overshoot(-1.0))
    assert math.isnan(specs.zeta_from_pm(90.0))
    assert math.isnan(specs.zeta_from_mr(0.9))
    assert math.isnan(specs.mr_from_zeta(0.0))
    assert math.isnan(specs.pm_from_mr_mcircle(0.4))
    assert math.isnan(specs.sigma_from_settling(0.0))
    assert specs.zeta_from_overshoot(0.0) == 1.0
    assert specs.overshoot_from_zeta(1.0) == 0.0


# --------------------------------------------------------------------------------------
# targets_from_requirements
def test_targets_exact_rule():
    # recomputed (docs/references.md §1, 20 % row) + common practice (ts 4 s ↔ σ = 1)
    c = specs.targets_from_requirements(20.0, 4.0)
    assert c.zeta == pytest.approx(0.4559, abs=6e-5)
    assert c.mr == pytest.approx(1.2321, abs=6e-5)
    assert c.phase_margin_deg == pytest.approx(48.15, abs=6e-3)
    assert c.sigma_per_s == pytest.approx(1.0)
    # ωc = (σ/ζ)·0.8168
    assert c.crossover_rad_s == pytest.approx(0.8168 / 0.4559, rel=2e-4)
    assert c.explanation[0] == "overshoot 20 % → ζ = 0.456 (exact 2nd-order step response)"
    assert "PM 48.1°" in c.explanation[1] and "exact" in c.explanation[1]
    assert any("4/σ" in line for line in c.explanation)
    with pytest.raises(dataclasses.FrozenInstanceError):
        c.zeta = 1.0  # type: ignore[misc]


def test_targets_mcircle_rule_and_5pct_band():
    c = specs.targets_from_requirements(20.0, 3.0, band=0.05, rule="m-circle")
    assert c.phase_margin_deg == pytest.approx(47.88, abs=6e-3)  # recomputed, §1
    assert c.sigma_per_s == pytest.approx(1.0)  # common practice: 3/σ for 5 %
    assert any(line.startswith("Mr 1.23 → PM 47.9° (M-circle rule") for line in c.explanation)
    # the crossover does not depend on the PM rule
    c_exact = specs.targets_from_requirements(20.0, 3.0, band=0.05)
    assert c.crossover_rad_s == c_exact.crossover_rad_s


def test_targets_without_settling():
    c = specs.targets_from_requirements(10.0, None)
    assert c.crossover_rad_s is None and c.sigma_per_s is None
    assert c.phase_margin_deg == pytest.approx(58.59, abs=6e-3)  # recomputed, §1
    c0 = specs.targets_from_requirements(0.0, None)
    assert c0.zeta == 1.0 and c0.mr == 1.0
    assert c0.phase_margin_deg == pytest.approx(76.345, abs=1e-3)


@pytest.mark.parametrize(
    ("args", "kw", "word"),
    [
        ((100.0, 1.0), {}, "overshoot"),
        ((-1.0, 1.0), {}, "overshoot"),
        ((float("nan"), 1.0), {}, "overshoot"),
        ((20.0, 0.0), {}, "settling"),
        ((20.0, float("inf")), {}, "settling"),
        ((20.0, 1.0), {"band": 0.1}, "band"),
        ((20.0, 1.0), {"rule": "rough"}, "rule"),
    ],
)
def test_targets_bad_input(args, kw, word):
    with pytest.raises(ValueError, match=word):
        specs.targets_from_requirements(*args, **kw)
