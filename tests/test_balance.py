"""Tests of explorer.design.hand_designs against references we did not write.

Sources named beside each check:
- "independent": computed here with plain numpy/scipy, sharing no code with
  explorer.design.hand_designs or explorer.core.loop: the loop as a product of factors (or
  ``np.polyval`` on expanded polynomials, ``scipy.signal.freqs_zpk`` for delay-free
  loops), crossovers and phase margins on a dense log grid (np.angle/np.unwrap),
  closed-loop stability from the roots of the closed-loop polynomial (delay-free) or
  from the winding number of 1 + L along the line Re s = σ (delay).
- "closed form": arithmetic from the stated formulas (atan, tan) by hand.
- Skogestad (2003), "Simple analytic rules for model reduction and PID controller
  tuning", J. Process Control 13:291–309 — SIMC PI rule (formulas as recorded in
  docs/references.md §3, [FOUND]); its PM 61.35° for L = e^{−θs}/(2θs) is recomputed there.
- Ogata, Modern Control Engineering 5e (2010), Example 7-26 (lead) and Example 7-27
  (lag): the book's numbers are FROM MEMORY (docs/references.md §5 tags them [MEM]); they are
  compared at the book's rounding.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from nyquist_oracle import check_loop
from scipy import signal

from explorer.core.errors import DesignError
from explorer.core.loop import Rational
from explorer.design.hand_designs import (
    MAX_LEAD_BOOST_DEG,
    PI_ZERO_RATIO,
    BalanceResult,
    HandDesign,
    hand_designs,
    lag_for_error_constant,
    lead_at_crossover,
    loop_check,
    phase_balanced,
    pi_plus_lead,
)
from explorer.model.study import Targets

#: The package's loop check (the batch engine) and the independent oracle: both must
#: agree with the outside references below.
CHECKERS = {
    "engine": lambda loop: loop_check(loop, Rational(gain=1.0)),
    "oracle": check_loop,
}


# ---------------------------------------------------------------------------------------
# independent references (plain numpy / scipy)
def ref_response(k, zeros, poles, delay, s):
    """k·Π(s − z)/Π(s − p)·exp(−sτ) at complex points s (numpy only)."""
    s = np.asarray(s, dtype=complex)
    out = np.full(s.shape, k, dtype=complex)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        for z in zeros:
            out = out * (s - z)
        for p in poles:
            out = out / (s - p)
        return out * np.exp(-s * delay)


def loop_parts(plant: Rational, comp: Rational):
    return (plant.gain * comp.gain, list(plant.zeros) + list(comp.zeros),
            list(plant.poles) + list(comp.poles), plant.delay_s)


def ref_polyval_abs(plant: Rational, comp: Rational, w: float) -> float:
    """|L(jω)| from expanded polynomials with np.polyval (delay-free factors)."""
    k, z, p, _ = loop_parts(plant, comp)
    num = k * np.poly(z) if z else np.array([k])
    den = np.poly(p) if p else np.array([1.0])
    return float(abs(np.polyval(num, 1j * w) / np.polyval(den, 1j * w)))


def ref_scipy_abs(plant: Rational, comp: Rational, w: float) -> float:
    """|L(jω)| from scipy.signal.freqs_zpk (rational part; the delay has |.| = 1)."""
    k, z, p, _ = loop_parts(plant, comp)
    _, h = signal.freqs_zpk(z, p, k, worN=np.array([w]))
    return float(abs(h[0]))


def ref_margins(plant: Rational, comp: Rational, points_per_decade: int = 1500):
    """All gain crossovers and their phase margins (deg) on a dense log grid.

    Crossovers by linear interpolation of ln|L| in ln ω; the phase there by linear
    interpolation of the unwrapped np.angle; PM = 180° + phase reduced into (−180, 180].
    """
    k, z, p, tau = loop_parts(plant, comp)
    mags = [abs(r) for r in z + p if abs(r) > 0] + ([1 / tau] if tau > 0 else [])
    lo, hi = min(mags) * 1e-5, max(mags) * 1e4
    w = np.geomspace(lo, hi, int(points_per_decade * math.log10(hi / lo)))
    h = ref_response(k, z, p, tau, 1j * w)
    with np.errstate(divide="ignore"):
        lm = np.log(np.abs(h))
    ph = np.unwrap(np.angle(h))
    out = []
    for i in np.flatnonzero(np.sign(lm[:-1]) * np.sign(lm[1:]) < 0):
        t = lm[i] / (lm[i] - lm[i + 1])
        wc = math.exp(math.log(w[i]) + t * (math.log(w[i + 1]) - math.log(w[i])))
        phase = ph[i] + t * (ph[i + 1] - ph[i])
        pm = math.degrees(phase) + 180.0
        pm = (pm + 180.0) % 360.0 - 180.0
        pm = 180.0 if pm == -180.0 else pm
        out.append((wc, pm))
    return out


def ref_closed_loop_roots(plant: Rational, comp: Rational) -> np.ndarray:
    """Roots of den + num of L = C·P (delay-free): the closed-loop poles."""
    k, z, p, tau = loop_parts(plant, comp)
    assert tau == 0
    num = (k * np.poly(z)).real if z else np.array([k])
    den = np.poly(p).real
    num = np.pad(num, (len(den) - len(num), 0))
    return np.roots(den + num)


def ref_rhp_count_winding(k, zeros, poles, delay) -> int:
    """Closed-loop poles with Re s > σ (σ tiny) from the winding of 1 + L(σ + jω), ω ≥ 0
    doubled by conjugate symmetry: Z = P_σ − Δarg/(2π) along the upward line."""
    mags = [abs(r) for r in list(zeros) + list(poles) if abs(r) > 0]
    mags += [1 / delay] if delay > 0 else []
    sigma = 1e-7 * min(mags)
    top = 1e4 * max(mags)
    while abs(ref_response(k, zeros, poles, delay, sigma + 1j * top)) > 1e-4:
        top *= 10
    w = np.concatenate([[0.0], np.geomspace(sigma * 1e-3, top, 60000)])
    if delay > 0:
        lm = np.abs(ref_response(k, zeros, poles, delay, sigma + 1j * w))
        w_big = w[lm >= 0.4].max() if np.any(lm >= 0.4) else 0.0
        w = np.union1d(w, np.linspace(0, 1.5 * w_big, int(1.5 * w_big * delay / 0.05) + 2))
    f = 1.0 + ref_response(k, zeros, poles, delay, sigma + 1j * w)
    darg = 2.0 * (np.unwrap(np.angle(f))[-1] - np.angle(f[0]))
    p_sigma = sum(1 for p in poles if p.real > sigma)
    return int(round(p_sigma - darg / (2 * math.pi)))


def ref_stable(plant: Rational, comp: Rational) -> bool:
    if plant.delay_s == 0:
        r = ref_closed_loop_roots(plant, comp)
        return bool(np.all(r.real < 0))
    k, z, p, tau = loop_parts(plant, comp)
    return ref_rhp_count_winding(k, z, p, tau) == 0


def assert_meets(plant: Rational, comp: Rational, wc: float, pm: float, required: int):
    """Targets met, each by an independent reference."""
    # proper, integrators
    assert len(comp.zeros) <= len(comp.poles)
    n_int = sum(1 for r in plant.poles + comp.poles if r == 0) - sum(
        1 for r in plant.zeros + comp.zeros if r == 0)
    assert n_int >= required
    # |L(jωc)| = 1 within 1e-6 relative (product of factors; polyval/scipy delay-free)
    k, z, p, tau = loop_parts(plant, comp)
    assert abs(ref_response(k, z, p, tau, 1j * wc)) == pytest.approx(1.0, rel=1e-6)
    if tau == 0:
        assert ref_polyval_abs(plant, comp, wc) == pytest.approx(1.0, rel=1e-6)
        assert ref_scipy_abs(plant, comp, wc) == pytest.approx(1.0, rel=1e-6)
    # PM at ωc exactly (np.angle), and the smallest PM over all crossovers (dense grid)
    pm_wc = math.degrees(np.angle(ref_response(k, z, p, tau, 1j * wc))) + 180.0
    pm_wc = (pm_wc + 180.0) % 360.0 - 180.0
    assert pm_wc == pytest.approx(pm, abs=0.01)
    xs = ref_margins(plant, comp)
    assert xs, "no crossover found by the dense grid"
    assert min(abs(x / wc - 1) for x, _ in xs) < 1e-4
    assert min(m for _, m in xs) >= pm - 0.01
    # closed loop stable
    assert ref_stable(plant, comp)


# ---------------------------------------------------------------------------------------
# phase-balanced: closed forms and published rules
def test_closed_form_one_cancellation():
    # closed form: P = 1/((s+1)(s+10)), 1 integrator, ωc = 1, PM = 45°.
    # phase with the integrator −90 − 45 − atan(0.1); cancel −1 (+45°) → surplus
    # 45° − atan(0.1) on one pole → p = 1/tan(surplus); k = √(1+p²)·√101
    plant = Rational(gain=1.0, poles=(-1.0, -10.0))
    res = phase_balanced(plant, Targets(crossover_rad_s=1.0, phase_margin_deg=45.0,
                                        integrators=1))
    surplus = math.radians(45.0) - math.atan(0.1)
    p = 1.0 / math.tan(surplus)
    assert res.design is not None and res.reason is None
    assert res.cancelled == (-1.0,)
    assert res.balancing_pole_rad_s == pytest.approx(p, rel=1e-12)
    assert res.design.gain == pytest.approx(math.sqrt(1 + p * p) * math.sqrt(101), rel=1e-12)
    assert sorted(res.design.poles, key=abs) == pytest.approx([0.0, -p])
    assert_meets(plant, res.design, 1.0, 45.0, 1)
    assert any("cancel pole -1" in s for s in res.steps)


def test_simc_pi_for_first_order_plus_delay():
    # Skogestad (2003) SIMC PI for k e^{-θs}/(τ1 s + 1) with τc = θ: Kc = τ1/(k(τc+θ)),
    # τI = min(τ1, 4(τc+θ)) (docs/references.md §3 [FOUND]). k = 1, τ1 = 5, θ = 1 → Kc = 2.5,
    # τI = 5, i.e. C = 2.5(s + 0.2)/s; its loop is e^{-s}/(2s): ωc = 0.5, PM = 90° − 0.5 rad
    # = 61.35° (docs/references.md §3 [RECOMP]; published 61.4°, from memory). The phase-balanced
    # procedure for that ωc and PM cancels the plant pole and needs no balancing pole.
    plant = Rational(gain=0.2, poles=(-0.2,), delay_s=1.0)
    pm = 90.0 - math.degrees(0.5)
    assert pm == pytest.approx(61.35, abs=0.005)
    res = phase_balanced(plant, Targets(crossover_rad_s=0.5, phase_margin_deg=pm, integrators=1))
    assert res.design is not None
    assert res.design.gain == pytest.approx(2.5, rel=1e-9)
    assert res.design.zeros == pytest.approx((-0.2,))
    assert res.design.poles == (0j,)
    assert res.balancing_pole_rad_s is None
    assert_meets(plant, res.design, 0.5, pm, 1)


def test_pure_delay_integrating_loop():
    # Pure delay e^{-θs}, one integrator: the only design is k/s, and for PM = 90° − ωcθ it
    # is the SIMC loop e^{-θs}/(2θs) at ωcθ = 0.5 (Skogestad 2003, docs/references.md §3).
    plant = Rational(gain=1.0, delay_s=1.0)
    pm = 90.0 - math.degrees(0.5)
    res = phase_balanced(plant, Targets(crossover_rad_s=0.5, phase_margin_deg=pm, integrators=1))
    assert res.design is not None
    assert res.design.gain == pytest.approx(0.5, rel=1e-9)  # 1/(2θ)
    assert_meets(plant, res.design, 0.5, pm, 1)
    # any other PM: a surplus (PM too small) with nothing to spend it on, or a shortfall
    res = phase_balanced(plant, Targets(crossover_rad_s=0.5, phase_margin_deg=40.0,
                                        integrators=1))
    assert res.design is None and res.failed_step == "balance"
    assert -res.shortfall_deg == pytest.approx(pm - 40.0, abs=1e-9)  # closed form
    assert "surplus" in res.reason and f"{pm - 40.0:.2f}°" in res.reason
    res = phase_balanced(plant, Targets(crossover_rad_s=0.5, phase_margin_deg=70.0,
                                        integrators=1))
    assert res.design is None and res.failed_step == "cancel"
    assert res.shortfall_deg == pytest.approx(70.0 - pm, abs=1e-9)
    assert "delay takes 28.65°" in res.reason  # closed form: 0.5 rad


# ---------------------------------------------------------------------------------------
# phase-balanced: random feasible plants (Hypothesis)
@st.composite
def plants_and_targets(draw):
    n = draw(st.integers(1, 4))
    poles = [-(10.0 ** draw(st.floats(-2, 2))) for _ in range(n)]
    plant_int = draw(st.integers(0, 1))
    gain = draw(st.sampled_from([1.0, -1.0])) * 10.0 ** draw(st.floats(-2, 2))
    wc = 10.0 ** draw(st.floats(-1.5, 1.5))
    delay = draw(st.sampled_from([0.0, 1.0])) * draw(st.floats(0.01, 0.3)) / wc
    pm = draw(st.floats(30.0, 70.0))
    required = draw(st.integers(0, 2))
    plant = Rational(gain=gain, poles=tuple(poles) + (0.0,) * plant_int, delay_s=delay)
    return plant, Targets(crossover_rad_s=wc, phase_margin_deg=pm, integrators=required)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(plants_and_targets())
def test_phase_balanced_random_plants(case):
    plant, t = case
    wc, pm = t.crossover_rad_s, t.phase_margin_deg
    # closed form: the procedure's phase bookkeeping with atan
    m = max(t.integrators, plant.n_integrators)
    real = sorted(-p.real for p in plant.poles if p != 0)
    phi = -90.0 * m - sum(math.degrees(math.atan(wc / a)) for a in real)
    phi -= math.degrees(wc * plant.delay_s)
    target = -180.0 + pm
    n = 0
    for a in real:
        if phi >= target:
            break
        phi += math.degrees(math.atan(wc / a))
        n += 1
    res = phase_balanced(plant, t)
    assert isinstance(res, BalanceResult)
    if phi < target - 1e-6:
        assert res.design is None and res.failed_step == "cancel"
        assert res.shortfall_deg == pytest.approx(target - phi, abs=1e-7)
        return
    if abs(phi - target) <= 1e-6:  # on target: no balancing pole
        assert res.design is not None and res.balancing_pole_rad_s is None, res.reason
        assert_meets(plant, res.design, wc, pm, t.integrators)
        return
    if n == 0:
        assert res.design is None and res.failed_step == "balance"
        assert -res.shortfall_deg == pytest.approx(phi - target, abs=1e-7)
        return
    assert res.design is not None, res.reason
    comp = res.design
    assert len(res.cancelled) == n and len(comp.zeros) == n
    # all balancing poles at one place p = ωc / tan(surplus / n)
    p = wc / math.tan(math.radians((phi - target) / n))
    bal = [q for q in comp.poles if q != 0]
    assert len(bal) == n and bal == pytest.approx([-p] * n, rel=1e-9)
    # compensator gain sign: positive for a positive-DC plant, negative otherwise
    assert np.sign(comp.gain) == np.sign(plant.gain)
    assert_meets(plant, comp, wc, pm, t.integrators)


# ---------------------------------------------------------------------------------------
# phase-balanced: which poles are cancelled, and refusals
def test_refuses_non_numeric_targets():
    plant = Rational(gain=8.0, poles=(-0.5, -4.0, -12.0))
    for t in (
        Targets(crossover_rad_s=(1.0, 2.0), phase_margin_deg=50.0, integrators=1),
        Targets(crossover_rad_s=None, phase_margin_deg=50.0, integrators=1),
        Targets(crossover_rad_s=1.5, phase_margin_deg=None, integrators=1),
    ):
        res = phase_balanced(plant, t)
        assert res.design is None and res.failed_step == "targets"
        assert "numeric crossover" in res.reason
        for d in hand_designs(plant, t, error_constant=2.0):
            assert d.compensator is None and "numeric crossover" in d.reason


def test_shortfall_when_nothing_left_to_cancel():
    # closed form: 1/(s+1), 2 integrators, ωc = 1: −180 − 45 → cancel −1 → −180;
    # the target −135° is 45° away
    plant = Rational(gain=1.0, poles=(-1.0,))
    res = phase_balanced(plant, Targets(crossover_rad_s=1.0, phase_margin_deg=45.0,
                                        integrators=2))
    assert res.design is None and res.failed_step == "cancel"
    assert res.shortfall_deg == pytest.approx(45.0, abs=1e-9)
    assert "45.00° short" in res.reason


def test_shortfall_names_rhp_zero_lag():
    # closed form: P = (2 − s)/((s+0.1)(s+10)), ωc = 1.5, PM = 60°, no integrator.
    # Phase −atan(ωc/2) − atan(15) − atan(0.15); cancelling −0.1 gives +atan(15), −10 is
    # cancelled next (+atan(0.15)): −atan(0.75) = −36.87° > −120°... so that is feasible;
    # with 2 integrators it is not: −180 − 36.87 = −216.87 vs −120 → 96.87° short.
    plant = Rational(gain=-1.0, zeros=(2.0,), poles=(-0.1, -10.0))
    res = phase_balanced(plant, Targets(crossover_rad_s=1.5, phase_margin_deg=60.0,
                                        integrators=2))
    assert res.design is None and res.failed_step == "cancel"
    short = -120.0 + 180.0 + math.degrees(math.atan(0.75))
    assert res.shortfall_deg == pytest.approx(short, abs=1e-9)
    # all-pass lag 2·atan(ωc/z) (docs/references.md §6 [RECOMP]) = 73.74°
    assert f"{2 * math.degrees(math.atan(0.75)):.2f}°" in res.reason
    assert "right-half-plane zero" in res.reason


def test_unstable_pole_never_cancelled():
    # P = 1/((s − 1)(s + 5)), ωc = 4, PM = 40°, no integrator: the unstable pole stays,
    # −5 is cancelled; stability checked by closed-loop polynomial roots
    plant = Rational(gain=1.0, poles=(1.0, -5.0))
    t = Targets(crossover_rad_s=4.0, phase_margin_deg=40.0, integrators=0)
    res = phase_balanced(plant, t)
    assert res.design is not None, res.reason
    assert res.cancelled == (-5.0,)
    assert any("pole 1 (unstable)" in s for s in res.steps)
    assert res.design.gain > 0  # 1/(s − 1) needs a positive gain
    assert_meets(plant, res.design, 4.0, 40.0, 0)
    assert res.check.open_loop_rhp_poles == 1


def test_imaginary_axis_pole_never_cancelled():
    # an undamped pair ±2j: never cancelled (mentioned in the steps)
    plant = Rational(gain=4.0, poles=(2j, -2j, -0.1, -3.0))
    res = phase_balanced(plant, Targets(crossover_rad_s=0.5, phase_margin_deg=45.0,
                                        integrators=0))
    assert any("imaginary axis" in s for s in res.steps)
    assert all(abs(c.imag) == 0 for c in res.cancelled)
    if res.design is not None:
        assert ref_stable(plant, res.design)


def test_pole_near_nmp_zero_not_cancelled():
    # −1.5 is within a factor 2 of the RHP zero at 2; −0.1 is cancelled instead
    plant = Rational(gain=-1.0, zeros=(2.0,), poles=(-1.5, -0.1))
    t = Targets(crossover_rad_s=0.4, phase_margin_deg=50.0, integrators=1)
    res = phase_balanced(plant, t)
    assert any("near the non-minimum-phase zero 2" in s for s in res.steps)
    assert -1.5 not in res.cancelled
    assert res.design is not None, res.reason
    assert res.cancelled == (-0.1,)
    assert_meets(plant, res.design, 0.4, 50.0, 1)


def test_lightly_damped_pair_only_on_request():
    # P = 1/((s² + 0.2 s + 1)(s + 5)) (ζ = 0.1), ωc = 2, PM = 45°, no integrator.
    plant = Rational(gain=5.0, poles=(-0.1 + 0.99498744j, -0.1 - 0.99498744j, -5.0))
    t = Targets(crossover_rad_s=2.0, phase_margin_deg=45.0, integrators=0)
    off = phase_balanced(plant, t)
    assert off.design is None and off.failed_step == "cancel"
    assert any("lightly damped" in s for s in off.steps)
    on = phase_balanced(plant, t, cancel_lightly_damped=True)
    assert on.design is not None, on.reason
    assert len(on.cancelled) == 2 and on.cancelled[0] == on.cancelled[1].conjugate()
    # pair cancelled first (slowest), surplus spread over two poles
    assert on.n_balancing_poles == 2
    assert_meets(plant, on.design, 2.0, 45.0, 0)


def test_negative_gain_and_double_rhp_zero_plants():
    # negative DC plant: the compensator gain is negative, targets met
    plant = Rational(gain=-2.0, poles=(-1.0, -3.0))
    t = Targets(crossover_rad_s=2.0, phase_margin_deg=50.0, integrators=1)
    res = phase_balanced(plant, t)
    assert res.design is not None and res.design.gain < 0
    assert_meets(plant, res.design, 2.0, 50.0, 1)
    # two RHP zeros (natural branch starts at +360°): the same margin is met
    plant = Rational(gain=1.0, zeros=(20.0, 30.0), poles=(-0.2, -0.5, -40.0))
    t = Targets(crossover_rad_s=1.0, phase_margin_deg=45.0, integrators=1)
    res = phase_balanced(plant, t)
    assert res.design is not None, res.reason
    assert res.design.gain > 0
    assert_meets(plant, res.design, 1.0, 45.0, 1)


def test_check_refuses_a_resonance_above_crossover():
    # A resonance at 5 rad/s with ζ = 2e-4 lifts |L| above 1 far above ωc = 0.5. The design
    # the procedure builds (closed form below) has more crossovers with a worse margin or is
    # unstable (independent grid / polynomial); the procedure must refuse it.
    plant = Rational(gain=25.0, poles=(-0.5, -0.001 + 4.9999999j, -0.001 - 4.9999999j))
    t = Targets(crossover_rad_s=0.5, phase_margin_deg=50.0, integrators=1)
    res = phase_balanced(plant, t)
    assert res.design is None and res.failed_step == "check"
    # closed form of the rejected design: cancel −0.5, one balancing pole
    pair = Rational(gain=25.0, poles=(-0.001 + 4.9999999j, -0.001 - 4.9999999j))
    ph_pair = math.degrees(np.angle(ref_response(25.0, [], list(pair.poles), 0.0, 0.5j)))
    surplus = -90.0 + ph_pair + 130.0
    p = 0.5 / math.tan(math.radians(surplus))
    unit = Rational(gain=1.0, zeros=(-0.5,), poles=(0.0, -p))
    k = 1.0 / abs(ref_response(25.0, [-0.5], [0.0, -p, -0.5, *pair.poles], 0.0, 0.5j))
    comp = Rational(gain=k, zeros=unit.zeros, poles=unit.poles)
    xs = ref_margins(plant, comp, points_per_decade=4000)
    assert len(xs) > 1
    assert (min(m for _, m in xs) < 50.0 - 0.01) or not ref_stable(plant, comp)


def test_bad_input_raises_one_line_errors():
    plant = Rational(gain=1.0, poles=(-1.0,))
    with pytest.raises(DesignError, match="improper"):
        phase_balanced(Rational(gain=1.0, zeros=(-1.0, -2.0), poles=(-3.0,)),
                       Targets(crossover_rad_s=1.0, phase_margin_deg=45.0, integrators=0))
    with pytest.raises(DesignError, match="crossover"):
        phase_balanced(plant, Targets(crossover_rad_s=-1.0, phase_margin_deg=45.0,
                                      integrators=0))
    with pytest.raises(DesignError, match="phase_margin"):
        lead_at_crossover(plant, Targets(crossover_rad_s=1.0, phase_margin_deg=200.0,
                                         integrators=0))
    with pytest.raises(DesignError, match="error_constant"):
        lag_for_error_constant(plant, Targets(crossover_rad_s=1.0, phase_margin_deg=45.0,
                                              integrators=1), -3.0)
    with pytest.raises(DesignError, match="gain"):
        phase_balanced(Rational(gain=0.0, poles=(-1.0,)),
                       Targets(crossover_rad_s=1.0, phase_margin_deg=45.0, integrators=0))


def test_origin_zero_plant_refuses_integrator():
    plant = Rational(gain=1.0, zeros=(0.0,), poles=(-1.0, -2.0))
    res = phase_balanced(plant, Targets(crossover_rad_s=1.0, phase_margin_deg=45.0,
                                        integrators=1))
    assert res.design is None and res.failed_step == "integrators"
    assert "zero(s) at s = 0" in res.reason


# ---------------------------------------------------------------------------------------
# lead at crossover, PI plus lead
def test_lead_ogata_example_7_26_from_memory():
    # Ogata 5e Example 7-26 (FROM MEMORY; docs/references.md §5A): G = 4/(s(s+2)); the book
    # picks the new crossover ω = 9 rad/s and a lead of φm = 38° (50° − 17° + 5°), giving
    # α = 0.24 and Gc = 41.7(s + 4.41)/(s + 18.4), Kv ≈ 20. Same crossover and boost here:
    # PM target = uncompensated margin at 9 rad/s + 38°.
    plant = Rational(gain=4.0, poles=(0.0, -2.0))
    pm = 180.0 - 90.0 - math.degrees(math.atan(4.5)) + 38.0
    d = lead_at_crossover(plant, Targets(crossover_rad_s=9.0, phase_margin_deg=pm,
                                         integrators=1))
    assert d.compensator is not None and d.origin == "hand" and d.structure == "lead"
    (z,), (p,) = d.compensator.zeros, d.compensator.poles
    s38 = math.sin(math.radians(38.0))
    assert p.real / z.real == pytest.approx((1 + s38) / (1 - s38), rel=1e-12)  # 1/α
    assert (1 - s38) / (1 + s38) == pytest.approx(0.24, abs=0.005)  # book α
    assert -z.real == pytest.approx(4.41, rel=0.015)  # book zero (3 figures, plot reading)
    assert -p.real == pytest.approx(18.4, rel=0.015)  # book pole
    assert d.compensator.gain == pytest.approx(41.7, rel=0.03)  # book gain
    kv = d.compensator.gain * 4.0 * z.real / (2.0 * p.real)
    assert kv == pytest.approx(20.0, rel=0.03)  # book Kv spec
    assert_meets(plant, d.compensator, 9.0, pm, 1)


@st.composite
def lead_cases(draw):
    n = draw(st.integers(1, 3))
    poles = [-(10.0 ** draw(st.floats(-1.5, 1.5))) for _ in range(n)]
    plant_int = draw(st.integers(0, 1))
    wc = 10.0 ** draw(st.floats(-1, 1))
    delay = draw(st.sampled_from([0.0, 1.0])) * draw(st.floats(0.01, 0.3)) / wc
    plant = Rational(gain=10.0 ** draw(st.floats(-1, 1)),
                     poles=tuple(poles) + (0.0,) * plant_int, delay_s=delay)
    t = Targets(crossover_rad_s=wc, phase_margin_deg=draw(st.floats(30, 70)),
                integrators=draw(st.integers(0, 1)))
    return plant, t


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(lead_cases(), st.booleans())
def test_lead_and_pi_lead_random(case, with_pi):
    plant, t = case
    wc, pm = t.crossover_rad_s, t.phase_margin_deg
    # closed form: phase before the lead, natural branch of the stable-pole part:
    # −90° per integrator − Σ atan(ωc/a) − ωcτ
    m = max(t.integrators - (1 if with_pi else 0), plant.n_integrators) - plant.n_integrators
    phi = (-90.0 * (plant.n_integrators + m)
           - sum(math.degrees(math.atan(wc / -q.real)) for q in plant.poles if q != 0)
           - math.degrees(wc * plant.delay_s))
    if with_pi:
        phi += -90.0 + math.degrees(math.atan(PI_ZERO_RATIO))
    boost = -180.0 + pm - phi
    d = pi_plus_lead(plant, t) if with_pi else lead_at_crossover(plant, t)
    assert isinstance(d, HandDesign)
    if boost <= 0 or boost > MAX_LEAD_BOOST_DEG:
        assert d.compensator is None and d.reason
        return
    assert d.compensator is not None, d.reason
    comp = d.compensator
    zl = max(comp.zeros, key=lambda r: abs(r + wc / PI_ZERO_RATIO))  # not the PI zero
    (pl,) = [r for r in comp.poles if r != 0]
    # maximum phase at ωc: corners' geometric mean is ωc, and the lead's phase there is
    # the boost (independent np.angle)
    assert math.sqrt(zl.real * pl.real) == pytest.approx(wc, rel=1e-9)
    lead_phase = math.degrees(np.angle((1j * wc - zl) / (1j * wc - pl)))
    assert lead_phase == pytest.approx(boost, abs=1e-7)
    for f in (0.98, 1.02):
        assert math.degrees(np.angle((1j * wc * f - zl) / (1j * wc * f - pl))) < lead_phase
    if with_pi:
        assert any(abs(r + wc / PI_ZERO_RATIO) < 1e-12 * wc for r in comp.zeros)
    assert_meets(plant, comp, wc, pm, t.integrators)


def test_lead_refusals():
    # closed form: 1/(s+1), no integrator, ωc = 0.5: phase −26.57°; PM 50° → surplus
    plant = Rational(gain=1.0, poles=(-1.0,))
    d = lead_at_crossover(plant, Targets(crossover_rad_s=0.5, phase_margin_deg=50.0,
                                         integrators=0))
    assert d.compensator is None and "already" in d.reason
    # 1/(s(s+1)(s+2)) at ωc = 3: −90 − 71.57 − 56.31 = −217.88°; PM 50° needs 87.88° > 65°
    plant = Rational(gain=1.0, poles=(0.0, -1.0, -2.0))
    d = lead_at_crossover(plant, Targets(crossover_rad_s=3.0, phase_margin_deg=50.0,
                                         integrators=1))
    need = 50.0 - 180.0 + 90.0 + math.degrees(math.atan(3.0) + math.atan(1.5))
    assert d.compensator is None and f"{need:.2f}°" in d.reason and "65°" in d.reason


# ---------------------------------------------------------------------------------------
# lag for an error constant
def _error_constant(plant: Rational, comp: Rational) -> float:
    """lim s^m L(s), m = loop integrators, by evaluation at a tiny s (independent)."""
    k, z, p, tau = loop_parts(plant, comp)
    m = sum(1 for r in p if r == 0) - sum(1 for r in z if r == 0)
    s = 1e-9j
    return float(abs(s**m * ref_response(k, z, p, tau, s)))


def test_lag_ogata_example_7_27_from_memory():
    # Ogata 5e Example 7-27 (FROM MEMORY; docs/references.md §5B): G = 1/(s(s+1)(0.5s+1)),
    # Kv = 5, PM ≥ 40°; the book puts the crossover near 0.5 rad/s and uses
    # Gc = 0.5(s + 0.1)/(s + 0.01) in our roots form (β = 10). Here ωc = 0.5, PM = 40°,
    # Kv = 5 exactly; the book rounds the lag to one figure.
    plant = Rational(gain=2.0, poles=(0.0, -1.0, -2.0))
    t = Targets(crossover_rad_s=0.5, phase_margin_deg=40.0, integrators=1)
    d = lag_for_error_constant(plant, t, 5.0)
    assert d.compensator is not None, d.reason
    assert d.structure == "lag"
    (z,), (p,) = d.compensator.zeros, d.compensator.poles
    assert 0.08 < -z.real < 0.12  # book zero 0.1
    assert 0.008 < -p.real < 0.012  # book pole 0.01
    assert 7.0 < z.real / p.real < 13.0  # book β = 10
    assert _error_constant(plant, d.compensator) == pytest.approx(5.0, rel=1e-6)
    assert_meets(plant, d.compensator, 0.5, 40.0, 1)


def test_lag_closed_form_equations():
    # closed form: with x = ωc/z, a = atan x, b = atan(βx): phase a − b = −S and gain
    # ratio cos a / cos b = R (independent re-check of the returned corners)
    plant = Rational(gain=2.0, poles=(0.0, -1.0, -2.0))
    wc = 0.5
    d = lag_for_error_constant(plant, Targets(crossover_rad_s=wc, phase_margin_deg=40.0,
                                              integrators=1), 5.0)
    (z,), (p,) = d.compensator.zeros, d.compensator.poles
    x, beta = wc / -z.real, z.real / p.real
    # surplus of the gain-only loop at ωc: 180 − 90 − atan(0.5/1) − atan(0.5/2) − 40
    s_deg = 180.0 - 90.0 - math.degrees(math.atan(0.5) + math.atan(0.25)) - 40.0
    assert math.degrees(math.atan(beta * x) - math.atan(x)) == pytest.approx(s_deg, abs=1e-9)
    # Kv of the gain-only loop: |s·P(s)| at s → 0 is 1; divided by |P(jωc)|
    k0 = 1.0 / (2.0 / (wc * math.hypot(wc, 1.0) * math.hypot(wc, 2.0)))
    assert math.cos(math.atan(x)) / math.cos(math.atan(beta * x)) == pytest.approx(5.0 / k0)


def test_lag_lead_when_phase_is_short():
    # 1/(s(s+1)(s+2)) at ωc = 1.5: phase short of PM 45° → lag (zero at ωc/10) plus lead;
    # Kv = 10 exactly (independent evaluation)
    plant = Rational(gain=1.0, poles=(0.0, -1.0, -2.0))
    t = Targets(crossover_rad_s=1.5, phase_margin_deg=45.0, integrators=1)
    d = lag_for_error_constant(plant, t, 10.0)
    assert d.compensator is not None, d.reason
    assert d.structure == "lag + lead"
    assert any(abs(r + 0.15) < 1e-12 for r in d.compensator.zeros)
    assert _error_constant(plant, d.compensator) == pytest.approx(10.0, rel=1e-6)
    assert_meets(plant, d.compensator, 1.5, 45.0, 1)
    # the lead alone already gives Kv ≥ 0.5: refused (no lag needed)
    d = lag_for_error_constant(plant, t, 0.5)
    assert d.compensator is None and "no lag" in d.reason


def test_lag_refuses_when_gain_alone_suffices():
    plant = Rational(gain=2.0, poles=(0.0, -1.0, -2.0))
    t = Targets(crossover_rad_s=0.5, phase_margin_deg=40.0, integrators=1)
    d = lag_for_error_constant(plant, t, 0.3)  # a pure gain gives Kv = 0.576
    assert d.compensator is None and "no lag is needed" in d.reason


# ---------------------------------------------------------------------------------------
# check_loop against closed-loop polynomial roots and the winding reference
@st.composite
def random_loops(draw, with_delay: bool):
    def roots(n, origin):
        out = []
        while len(out) < n:
            if origin and draw(st.floats(0, 1)) < 0.15:
                out.append(0j)
            elif n - len(out) >= 2 and draw(st.booleans()):
                w0 = 10 ** draw(st.floats(-1, 1))
                zeta = draw(st.floats(-0.7, 0.7) if not with_delay else st.floats(0.2, 0.8))
                r = complex(-zeta * w0, w0 * math.sqrt(1 - zeta * zeta))
                out += [r, r.conjugate()]
            else:
                sgn = draw(st.sampled_from([-1.0, -1.0, 1.0]))
                out.append(complex(sgn * 10 ** draw(st.floats(-1, 1)), 0))
        return out

    npole = draw(st.integers(1, 5))
    poles = roots(npole, True)
    zeros = roots(draw(st.integers(0, npole - (1 if with_delay else 0))), False)
    k = draw(st.sampled_from([-1.0, 1.0])) * 10 ** draw(st.floats(-1.5, 2))
    delay = 10 ** draw(st.floats(-2, 0.3)) if with_delay else 0.0
    return Rational(gain=k, zeros=zeros, poles=poles, delay_s=delay)


@pytest.mark.parametrize("checker", sorted(CHECKERS))
@settings(max_examples=150, deadline=None)
@given(loop=random_loops(with_delay=False))
def test_check_loop_matches_closed_loop_roots(checker, loop):
    assume(len(loop.zeros) < len(loop.poles) or abs(1.0 + loop.gain) > 1e-3)  # well-posed
    num = loop.gain * np.poly(loop.zeros) if loop.zeros else np.array([loop.gain])
    den = np.poly(loop.poles).real
    num = np.pad(num.real, (len(den) - len(num), 0))
    cl = np.roots(den + num)
    assume(np.all(np.abs(cl.real) > 1e-6 * np.maximum(1.0, np.abs(cl))))  # not marginal
    chk = CHECKERS[checker](loop)
    assert chk.closed_loop_rhp_poles == int(np.sum(cl.real > 0))
    assert chk.closed_loop_stable == bool(np.all(cl.real < 0))


@pytest.mark.parametrize("checker", sorted(CHECKERS))
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(loop=random_loops(with_delay=True))
def test_check_loop_with_delay_matches_winding(checker, loop):
    chk = CHECKERS[checker](loop)
    assume(all(abs(m) > 0.5 for m in chk.phase_margins_deg))  # not near marginal
    assume(loop.n_integrators != 0 or abs(1.0 + loop.dc_gain()) > 1e-3)  # L(0) ≠ −1
    ref = ref_rhp_count_winding(loop.gain, loop.zeros, loop.poles, loop.delay_s)
    assert chk.closed_loop_rhp_poles == ref


@pytest.mark.parametrize("checker", sorted(CHECKERS))
def test_check_loop_crossovers_match_dense_grid(checker):
    # conditionally stable loop, docs/references.md §2 system 8 with P control k = 20:
    # (s+6)²/(s(s+1)²(s+36)) — unstable for 6.045 < k < 52.26 (recomputed there)
    plant = Rational(gain=1.0, zeros=(-6.0, -6.0), poles=(0.0, -1.0, -1.0, -36.0))
    for k, stable in ((3.0, True), (20.0, False), (80.0, True)):
        chk = CHECKERS[checker](plant * Rational(gain=k))
        assert chk.closed_loop_stable is stable
        ref = ref_margins(plant, Rational(gain=k))
        assert [x for x, _ in ref] == pytest.approx(chk.crossovers_rad_s, rel=1e-5)
        assert [m for _, m in ref] == pytest.approx(chk.phase_margins_deg, abs=1e-3)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(loop=st.one_of(random_loops(with_delay=False), random_loops(with_delay=True)))
def test_engine_and_oracle_agree(loop):
    """One engine answers loop questions in the package; the oracle, written
    independently, must find the same crossovers, margins and Nyquist count."""
    assume(len(loop.zeros) < len(loop.poles) or abs(1.0 + loop.gain) > 1e-3)
    ref = check_loop(loop)
    assume(all(abs(m) > 0.05 for m in ref.phase_margins_deg))  # not near marginal
    assume(loop.n_integrators != 0 or abs(1.0 + loop.dc_gain()) > 1e-3)
    # |L(0)| within 1e-6 of 1: a crossover near ω = 0 whose very existence hangs on the
    # last digits (hypothesis found 1/(s + 0.999999999999986): the engine's crossover at
    # 1.67e-7 rad/s is right, the oracle's grid does not resolve it); not a comparison
    assume(loop.n_integrators != 0 or abs(abs(loop.dc_gain()) - 1.0) > 1e-6)
    assume(ref.closed_loop_rhp_poles >= 0)  # the oracle's own count is consistent
    if loop.delay_s == 0:  # closed-loop poles (almost) on the axis: marginal, no verdict
        num = loop.gain * np.poly(loop.zeros) if loop.zeros else np.array([loop.gain])
        den = np.poly(loop.poles).real
        cl = np.roots(den + np.pad(num.real, (len(den) - len(num), 0)))
        assume(np.all(np.abs(cl.real) > 1e-6 * np.maximum(1.0, np.abs(cl))))
    got = CHECKERS["engine"](loop)
    assert got.crossovers_rad_s == pytest.approx(ref.crossovers_rad_s, rel=1e-7)
    assert got.phase_margins_deg == pytest.approx(ref.phase_margins_deg, abs=1e-6)
    assert got.open_loop_rhp_poles == ref.open_loop_rhp_poles
    assert got.closed_loop_stable == ref.closed_loop_stable
    if ref.closed_loop_rhp_poles >= 0:
        assert got.closed_loop_rhp_poles == ref.closed_loop_rhp_poles


# ---------------------------------------------------------------------------------------
# hand_designs
def test_hand_designs_labels():
    plant = Rational(gain=8.0, poles=(-0.5, -4.0, -12.0))
    t = Targets(crossover_rad_s=1.5, phase_margin_deg=50.0, integrators=1)
    ds = hand_designs(plant, t, error_constant=3.0)
    assert [d.name for d in ds] == ["phase-balanced", "lead", "PI+lead", "lag"]
    assert [d.origin for d in ds] == ["phase-balanced", "hand", "hand", "hand"]
    for d in ds:
        assert d.structure and d.steps
        assert (d.compensator is None) == (d.reason is not None)
        if d.compensator is not None:
            assert_meets(plant, d.compensator, 1.5, 50.0, 1)
    assert ds[0].structure == "integrator + 1 cancelling zero + 1 balancing pole"
    assert ds[2].compensator is None and "already" in ds[2].reason  # PI eats too little


# ---------------------------------------------------------------------------------------
# overshoot trim (needs explorer.time_domain.timeresp)
def test_overshoot_trim_standard_second_order_loop():
    # Standard loop k/(s(s+1)) = ωn²/(s(s + 2ζωn)): ωn = √k, ζ = 1/(2√k). Overshoot
    # Mp = exp(−ζπ/√(1−ζ²)) (Ogata 5e Ch. 5, docs/references.md §1) → for 20 %: ζ = 0.4559,
    # k = 1/(4ζ²); docs/references.md §1 [RECOMP] row 20 %: ωc/ωn = 0.8168, PM = 48.15°.
    pytest.importorskip("explorer.time_domain.timeresp")
    from explorer.design.hand_designs import trim_gain_for_overshoot

    plant = Rational(gain=1.0, poles=(0.0, -1.0))
    res = trim_gain_for_overshoot(plant, Rational(gain=1.0), 20.0)
    assert res.compensator is not None, res.reason
    ln = math.log(0.20)
    zeta = -ln / math.sqrt(math.pi**2 + ln**2)
    k = 1.0 / (4.0 * zeta**2)
    assert res.gain_factor == pytest.approx(k, rel=2e-3)
    assert res.overshoot_pct == pytest.approx(20.0, abs=1e-6)
    assert res.crossover_rad_s == pytest.approx(0.8168 * math.sqrt(k), rel=2e-3)
    assert res.phase_margin_deg == pytest.approx(48.15, abs=0.05)
    # a target no stable gain in the range reaches: 1/(s+1)² cannot overshoot 60 %
    # (closed-loop damping 1/√(1+k) ≥ 1/√21 for k ≤ 20, so Mp < 50 %: closed form)
    res = trim_gain_for_overshoot(Rational(gain=1.0, poles=(-1.0, -1.0)), Rational(gain=1.0),
                                  60.0)
    assert res.compensator is None and "no stable gain factor" in res.reason
