"""Loop metrics against the outside world: closed forms, Routh–Hurwitz limits,
numpy closed-loop polynomial roots, an independent scipy-only evaluator
(tests/reference_loop.py) and metamorphic properties (Hypothesis)."""

from __future__ import annotations

import math
from math import factorial

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from reference_loop import reference_metrics

from explorer.core.errors import DesignError
from explorer.core.loop import LoopBatch, Rational
from explorer.frequency.metrics import (
    compensator_metrics,
    frequency_metrics,
    frequency_metrics_batch,
    loop_metrics_batch,
)

ONE = Rational(gain=1.0)


def metrics_of(loop: Rational) -> dict:
    return frequency_metrics(loop, ONE)


# --------------------------------------------------------------------------------------
# closed forms
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("zeta", [0.1, 0.2593, 0.3579, 0.4559, 0.5, 0.5912, 0.6901, 0.9])
@pytest.mark.parametrize("wn", [0.05, 1.0, 40.0])
def test_standard_second_order_loop(zeta: float, wn: float) -> None:
    """L = ωn²/(s(s+2ζωn)): ωc = ωn·√(√(1+4ζ⁴) − 2ζ²), PM = atan(2ζ/√(√(1+4ζ⁴) − 2ζ²)),
    Mt = Mr = 1/(2ζ√(1−ζ²)) for ζ ≤ 1/√2, no phase crossover.
    Source: Ogata, Modern Control Engineering, 5th ed. (2010), ch. 7; Nise, Control
    Systems Engineering, ch. 10 (phase margin vs damping ratio) — formulas from memory,
    recomputed in docs/references.md §1 (ζ = 0.4559: ωc/ωn 0.8168, PM 48.15°, Mr 1.2321)."""
    m = metrics_of(Rational(gain=wn**2, poles=(0.0, -2 * zeta * wn)))
    root = math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)
    assert m["crossover_rad_s"] == pytest.approx(wn * root, rel=1e-10)
    assert m["crossovers_rad_s"] == pytest.approx([wn * root], rel=1e-10)
    assert m["phase_margin_deg"] == pytest.approx(
        math.degrees(math.atan(2 * zeta / root)), abs=1e-8
    )
    mr = 1 / (2 * zeta * math.sqrt(1 - zeta**2)) if zeta <= 1 / math.sqrt(2) else 1.0
    assert m["complementary_peak"] == pytest.approx(mr, rel=1e-9)
    assert m["gain_margin_db"] is None and m["phase_crossover_rad_s"] is None
    assert m["closed_loop_stable"] is True
    assert m["delay_margin_s"] == pytest.approx(
        math.radians(m["phase_margin_deg"]) / m["crossover_rad_s"], rel=1e-12
    )


def test_standard_loop_table_values() -> None:
    """docs/references.md §1, 20 % overshoot row [RECOMP of Ogata/Nise formulas]:
    ζ = 0.4559 → ωc/ωn = 0.8168, PM = 48.15°, Mr = 1.2321, Ms = 1.538."""
    zeta = -math.log(0.2) / math.sqrt(math.pi**2 + math.log(0.2) ** 2)  # 20 % overshoot
    m = metrics_of(Rational(gain=1.0, poles=(0.0, -2 * zeta)))
    assert m["crossover_rad_s"] == pytest.approx(0.8168, abs=1e-4)
    assert m["phase_margin_deg"] == pytest.approx(48.15, abs=0.01)
    assert m["complementary_peak"] == pytest.approx(1.2321, abs=1e-4)
    assert m["sensitivity_peak"] == pytest.approx(1.538, abs=1e-3)


@pytest.mark.parametrize("k, tau", [(0.1, 1.0), (0.7, 1.0), (1.2, 1.0), (2.0, 0.3), (0.05, 20.0)])
def test_integrator_plus_delay(k: float, tau: float) -> None:
    """L = k·e^(−sτ)/s: ωc = k, PM = π/2 − kτ, delay margin = π/(2k) − τ, phase
    crossover π/(2τ) with GM = 20·log10(π/(2kτ)); closed loop stable iff kτ < π/2.
    Closed forms: |L(jω)| = k/ω and ∠L = −π/2 − ωτ (Åström & Murray, Feedback Systems,
    2008, §10.2 example of an integrator with delay — common practice)."""
    m = metrics_of(Rational(gain=k, poles=(0.0,), delay_s=tau))
    assert m["crossover_rad_s"] == pytest.approx(k, rel=1e-12)
    pm = math.degrees(math.pi / 2 - k * tau)
    assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-9)
    if pm > 0:
        assert m["delay_margin_s"] == pytest.approx(math.pi / (2 * k) - tau, rel=1e-9)
    else:
        assert m["delay_margin_s"] == 0.0
    assert m["phase_crossover_rad_s"] == pytest.approx(math.pi / (2 * tau), rel=1e-12)
    assert m["gain_margin_db"] == pytest.approx(20 * math.log10(math.pi / (2 * k * tau)), abs=1e-9)
    assert m["closed_loop_stable"] is (k * tau < math.pi / 2)


def test_integrator_delay_stability_limit_both_sides() -> None:
    """kτ < π/2 is the exact stability limit (same closed form); probe ±1e-6."""
    lim = math.pi / 2
    assert metrics_of(Rational(gain=lim * (1 - 1e-6), poles=(0.0,), delay_s=1.0))[
        "closed_loop_stable"
    ]
    assert not metrics_of(Rational(gain=lim * (1 + 1e-6), poles=(0.0,), delay_s=1.0))[
        "closed_loop_stable"
    ]
    # far beyond the limit several closed-loop pole pairs are unstable
    m = metrics_of(Rational(gain=9.0, poles=(0.0,), delay_s=1.0))
    # the phase −90° − ω (deg of ω rad) crosses −180° at ω = π/2 + 2πn; twice while
    # |L| = 9/ω > 1 (ω = 1.57 and 7.85), each a pair of right-half-plane poles: 4
    # (closed form of the Nyquist count for k·e^(−s)/s)
    assert m["closed_loop_rhp_poles"] == 4


@pytest.mark.parametrize("k", [1.0, 3.0, 7.9, 8.1])
def test_triple_lag_routh_limit(k: float) -> None:
    """L = k/(s+1)³: phase crossover at √3 rad/s, GM = 8/k (Routh–Hurwitz: the closed
    loop s³+3s²+3s+1+k is stable iff k < 8; Routh & Hurwitz criterion, e.g. Ogata 5e
    §5-6 — common practice)."""
    m = metrics_of(Rational(gain=k, poles=(-1.0, -1.0, -1.0)))
    if k < 8:
        assert m["phase_crossover_rad_s"] == pytest.approx(math.sqrt(3), rel=1e-12)
        assert m["gain_margin_db"] == pytest.approx(20 * math.log10(8 / k), abs=1e-9)
    else:
        assert m["gain_margin_db"] is None
        assert m["lower_gain_margin_db"] == pytest.approx(20 * math.log10(8 / k), abs=1e-9)
    assert m["closed_loop_stable"] is (k < 8)


@pytest.mark.parametrize("k", [0.6, 2.0, 10.0])
def test_conditionally_stable_loop(k: float) -> None:
    """L = k(s+1)²/s³: closed loop s³ + k s² + 2k s + k, stable iff 2k² > k, i.e.
    k > 1/2 (Routh–Hurwitz); at k = 1/2 the auxiliary equation gives ω = 1. So the
    phase crossover is at 1 rad/s with |L| = 2k: a lower gain margin of
    20·log10(1/(2k)) dB and no upward one."""
    m = metrics_of(Rational(gain=k, zeros=(-1.0, -1.0), poles=(0.0, 0.0, 0.0)))
    assert m["closed_loop_stable"] is True
    assert m["gain_margin_db"] is None
    assert m["lower_gain_margin_db"] == pytest.approx(20 * math.log10(1 / (2 * k)), abs=1e-9)
    assert not metrics_of(Rational(gain=0.45, zeros=(-1.0, -1.0), poles=(0.0, 0.0, 0.0)))[
        "closed_loop_stable"
    ]


@pytest.mark.parametrize("k", [0.2, 0.8, 1.3])
def test_non_minimum_phase_zero(k: float) -> None:
    """L = k(1−s)/(s(s+1)): closed loop s² + (1−k)s + k, stable iff 0 < k < 1;
    at k = 1 the poles are ±j, so the phase crossover is 1 rad/s with GM = −20·log10 k
    (Routh–Hurwitz)."""
    m = metrics_of(Rational(gain=-k, zeros=(1.0,), poles=(0.0, -1.0)))
    if k < 1:
        assert m["phase_crossover_rad_s"] == pytest.approx(1.0, rel=1e-12)
        assert m["gain_margin_db"] == pytest.approx(-20 * math.log10(k), abs=1e-9)
    else:
        assert m["gain_margin_db"] is None
        assert m["lower_gain_margin_db"] == pytest.approx(-20 * math.log10(k), abs=1e-9)
    assert m["closed_loop_stable"] is (k < 1)


@pytest.mark.parametrize("k", [0.5, 1.5, 4.0])
def test_open_loop_unstable_pole(k: float) -> None:
    """L = k/(s−1): closed-loop pole at 1 − k, stable iff k > 1. The phase starts at
    −180° (natural branch) so there is no finite phase crossover."""
    m = metrics_of(Rational(gain=k, poles=(1.0,)))
    assert m["closed_loop_stable"] is (k > 1)
    assert m["gain_margin_db"] is None
    if k > 1:
        assert m["crossover_rad_s"] == pytest.approx(math.sqrt(k * k - 1), rel=1e-12)


@pytest.mark.parametrize("zeta, k", [(0.05, 0.05), (0.02, 0.3), (0.2, 0.5)])
def test_lightly_damped_mode(zeta: float, k: float) -> None:
    """L = k·ωn²/(s(s²+2ζωn s+ωn²)): phase −180° exactly at ωn, where
    |L| = k/(2ζωn); GM = 20·log10(2ζωn/k) (closed form of the factors)."""
    wn = 3.0
    a, b = -zeta * wn, wn * math.sqrt(1 - zeta**2)
    m = metrics_of(Rational(gain=k * wn**2, poles=(0.0, complex(a, b), complex(a, -b))))
    gm = 20 * math.log10(2 * zeta * wn / k)
    if gm > 0:
        assert m["phase_crossover_rad_s"] == pytest.approx(wn, rel=1e-12)
        assert m["gain_margin_db"] == pytest.approx(gm, abs=1e-9)
    else:
        assert m["lower_gain_margin_db"] == pytest.approx(gm, abs=1e-9)
    assert m["closed_loop_stable"] is (gm > 0)


def test_resonance_poking_through_gives_three_crossovers() -> None:
    """A lightly damped mode whose peak pokes above |L| = 1 above the main crossover:
    three crossings, each |L(jω)| = 1 exactly (checked by direct evaluation) and
    listed ascending; the reported one has the smallest phase margin."""
    zeta, wn = 0.01, 5.0
    a, b = -zeta * wn, wn * math.sqrt(1 - zeta**2)
    loop = Rational(
        gain=0.3 * wn**2, zeros=(-0.5,), poles=(0.0, 0.0, complex(a, b), complex(a, -b))
    )
    m = metrics_of(loop)
    xs = m["crossovers_rad_s"]
    assert len(xs) == 3 and xs == sorted(xs)
    for w in xs:
        assert abs(loop.freqresp(w)[0]) == pytest.approx(1.0, rel=1e-12)
    ref = reference_metrics(loop, points=20000)
    assert xs == pytest.approx(ref["crossovers_rad_s"], rel=1e-9)
    assert m["phase_margin_deg"] == pytest.approx(ref["phase_margin_deg"], abs=1e-6)


def test_biproper_loop_limits() -> None:
    """L = 0.5(s+4)/(s+1) is biproper: L(j∞) = 0.5, so Ms includes 1/|1+0.5| at ω → ∞
    and L(0) = 2 gives S(0) = 1/3, T(0) = 2/3 — all direct evaluations."""
    m = metrics_of(Rational(gain=0.5, zeros=(-4.0,), poles=(-1.0,)))
    w = np.logspace(-4, 4, 200001)
    h = 0.5 * (1j * w + 4) / (1j * w + 1)
    assert m["sensitivity_peak"] == pytest.approx(max(np.max(1 / np.abs(1 + h)), 1 / 1.5), rel=1e-6)
    assert m["complementary_peak"] == pytest.approx(np.max(np.abs(h / (1 + h))), rel=1e-6)
    assert m["closed_loop_stable"] is True


def test_biproper_with_delay_neutral_refused_as_unstable() -> None:
    """|L(j∞)| ≥ 1 with a delay: the closed loop is of neutral type with infinitely
    many poles near or right of the imaginary axis — not stable (Hale & Verduyn Lunel,
    Introduction to Functional Differential Equations, 1993, ch. 9 — from memory)."""
    assert not metrics_of(Rational(gain=1.2, zeros=(-1.0,), poles=(-2.0,), delay_s=0.5))[
        "closed_loop_stable"
    ]
    assert metrics_of(Rational(gain=0.5, zeros=(-1.0,), poles=(-2.0,), delay_s=0.5))[
        "closed_loop_stable"
    ]


def test_improper_loop_is_refused() -> None:
    with pytest.raises(DesignError):
        frequency_metrics(Rational(gain=1.0, poles=(-1.0,)), Rational(gain=1.0, zeros=(-1.0, -2.0)))


def test_compensator_metrics() -> None:
    """hf_gain = |C(j∞)|, integral_gain = lim s·C(s) (docs/interface.md definitions)."""
    pi_lead = Rational(gain=3.0, zeros=(-0.5, -2.0), poles=(0.0, -10.0))
    cm = compensator_metrics(pi_lead)
    assert cm["hf_gain"] == 3.0
    assert cm["integral_gain"] == pytest.approx(3.0 * 0.5 * 2.0 / 10.0)
    assert (
        compensator_metrics(Rational(gain=2.0, zeros=(-1.0,), poles=(-3.0, -4.0)))["hf_gain"]
        == 0.0
    )
    assert compensator_metrics(Rational(gain=2.0, poles=(0.0, 0.0)))["integral_gain"] is None


# --------------------------------------------------------------------------------------
# random loops against independent references
# --------------------------------------------------------------------------------------
def _random_roots(rng: np.random.Generator, k: int, rhp: bool) -> list[complex]:
    out: list[complex] = []
    while len(out) < k:
        if k - len(out) >= 2 and rng.random() < 0.3:
            wn = 10 ** rng.uniform(-1, 1)
            zeta = 10 ** rng.uniform(-2, -0.05)
            a, b = -zeta * wn, wn * math.sqrt(1 - zeta**2)
            out += [complex(a, b), complex(a, -b)]
        else:
            r = 10 ** rng.uniform(-1, 1)
            u = rng.random()
            out.append(complex(r) if rhp and u < 0.15 else 0j if u < 0.3 else complex(-r))
    return out


def _random_loop(rng: np.random.Generator, delay: bool) -> Rational:
    npol = int(rng.integers(1, 6))
    nz = int(rng.integers(0, npol))
    return Rational(
        gain=float(10 ** rng.uniform(-1, 1.5) * (1 if rng.random() < 0.9 else -1)),
        zeros=_random_roots(rng, nz, True),
        poles=_random_roots(rng, npol, True),
        delay_s=float(10 ** rng.uniform(-1.5, 0.5)) if delay else 0.0,
    )


def _closed_loop_roots(loop: Rational) -> np.ndarray:
    num = loop.gain * np.poly(loop.zeros) if loop.zeros else np.array([loop.gain])
    den = np.poly(loop.poles)
    return np.roots(den + np.pad(num, (len(den) - len(num), 0)))


def _pade(order: int, tau: float) -> tuple[np.ndarray, np.ndarray]:
    """[N/N] Padé approximant of e^(−sτ) (closed-form coefficients; Baker & Graves-
    Morris, Padé Approximants, 2nd ed., 1996, §1.2)."""
    c = [
        factorial(2 * order - k)
        * factorial(order)
        / (factorial(2 * order) * factorial(k) * factorial(order - k))
        for k in range(order + 1)
    ]
    num = np.array([c[k] * (-tau) ** k for k in range(order + 1)])[::-1]
    den = np.array([c[k] * tau**k for k in range(order + 1)])[::-1]
    return num, den


def test_frequency_response_matches_scipy_signal() -> None:
    """LoopBatch.freqresp == scipy.signal.freqresp (zpk form) on random loops."""
    from scipy import signal

    rng = np.random.default_rng(11)
    loops = [_random_loop(rng, delay=False) for _ in range(30)]
    w = np.logspace(-2, 2, 300)
    for loop in loops:
        _, h = signal.freqresp(
            signal.ZerosPolesGain(np.array(loop.zeros), np.array(loop.poles), loop.gain), w
        )
        mask = np.isfinite(h)
        np.testing.assert_allclose(loop.freqresp(w)[mask], h[mask], rtol=1e-9)


def test_stability_matches_closed_loop_roots_delay_free() -> None:
    """Nyquist count == number of RHP roots of den + k·num (numpy.roots), 600 random
    delay-free loops with integrators, RHP poles/zeros and lightly damped modes."""
    rng = np.random.default_rng(2)
    checked = 0
    for _ in range(600):
        loop = _random_loop(rng, delay=False)
        cl = _closed_loop_roots(loop)
        scale = max(1.0, float(np.max(np.abs(cl))))
        if np.min(np.abs(cl.real)) < 1e-6 * scale:
            continue  # marginal: no reference answer
        m = loop_metrics_batch(loop.batch())
        assert int(m["closed_loop_rhp_poles"][0]) == int(np.sum(cl.real > 0)), loop
        assert bool(m["closed_loop_stable"][0]) is bool(np.all(cl.real < 0)), loop
        checked += 1
    assert checked > 500


def test_stability_with_delay_matches_pade_roots() -> None:
    """With a delay: stability == closed-loop roots with a [14/14] Padé approximant,
    on random loops whose gain is small where the approximant is inexact (ωτ > 12)."""
    rng = np.random.default_rng(3)
    checked = 0
    while checked < 200:
        loop = _random_loop(rng, delay=True)
        tau = loop.delay_s
        if np.max(np.abs(loop.freqresp(np.array([12, 20, 40]) / tau))) > 0.05:
            continue
        pn, pd = _pade(14, tau)
        num = np.polymul(loop.gain * np.poly(loop.zeros) if loop.zeros else [loop.gain], pn)
        den = np.polymul(np.poly(loop.poles), pd)
        cl = np.roots(den + np.pad(num, (len(den) - len(num), 0)))
        if np.min(np.abs(cl.real)) < 1e-4 * max(1.0, float(np.max(np.abs(cl)))):
            continue
        m = loop_metrics_batch(loop.batch())
        assert bool(m["closed_loop_stable"][0]) is bool(np.all(cl.real < 0)), loop
        checked += 1


@pytest.mark.parametrize("seed", [21, 22])
@pytest.mark.parametrize("delay", [False, True])
def test_metrics_match_independent_reference(seed: int, delay: bool) -> None:
    """Every metric against the scipy-only evaluator (brentq-refined crossovers,
    bounded-scalar-refined peaks), to the acceptance tolerances or better:
    crossovers 1e-6 relative, PM/GM 1e-4 deg/dB, delay margin 1e-6, Ms/Mt 1e-6."""
    rng = np.random.default_rng(seed)
    done = 0
    while done < 25:
        loop = _random_loop(rng, delay)
        # keep every event inside the reference's grid (1e-4 … 1e4 rad/s)
        if abs(loop.freqresp(1e4)[0]) > 0.5:
            continue
        m = metrics_of(loop)
        if m["crossovers_rad_s"] and min(m["crossovers_rad_s"]) < 1e-3:
            continue
        ref = reference_metrics(loop, points=3000)
        assert m["crossovers_rad_s"] == pytest.approx(ref["crossovers_rad_s"], rel=1e-6), loop
        for key, tol in [("phase_margin_deg", 1e-4), ("gain_margin_db", 1e-4)]:
            if ref[key] is None:
                assert m[key] is None, (key, loop)
            else:
                assert m[key] == pytest.approx(ref[key], abs=tol), (key, loop)
        for key in ("crossover_rad_s", "phase_crossover_rad_s", "delay_margin_s"):
            if ref[key] is None:
                assert m[key] is None, (key, loop)
            else:
                assert m[key] == pytest.approx(ref[key], rel=1e-6, abs=1e-12), (key, loop)
        for key in ("sensitivity_peak", "complementary_peak"):
            if m[key] is not None and m[key] < 1e6:
                assert m[key] == pytest.approx(ref[key], rel=1e-6), (key, loop)
        done += 1


# --------------------------------------------------------------------------------------
# metamorphic properties (Hypothesis)
# --------------------------------------------------------------------------------------
real_pole = st.floats(min_value=0.05, max_value=20.0)


@st.composite
def stable_plants(draw: st.DrawFn) -> Rational:
    n = draw(st.integers(min_value=2, max_value=4))
    poles = [-draw(real_pole) for _ in range(n)]
    if draw(st.booleans()):
        wn = draw(st.floats(min_value=0.2, max_value=10.0))
        zeta = draw(st.floats(min_value=0.02, max_value=0.7))
        poles += [
            complex(-zeta * wn, wn * math.sqrt(1 - zeta**2)),
            complex(-zeta * wn, -wn * math.sqrt(1 - zeta**2)),
        ]
    integ = draw(st.integers(min_value=0, max_value=1))
    poles += [0.0] * integ
    zeros = [-draw(real_pole)] if draw(st.booleans()) else []
    k = draw(st.floats(min_value=0.05, max_value=30.0))
    tau = draw(st.sampled_from([0.0, 0.0, 0.05, 0.3, 1.0]))
    return Rational(gain=k, zeros=zeros, poles=poles, delay_s=tau)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(stable_plants())
def test_raising_gain_by_gain_margin_is_marginal(loop: Rational) -> None:
    """Scaling the loop gain by the reported gain margin puts a closed-loop pole on
    the imaginary axis at the phase crossover: 1 + g·L(jω_pc) = 0; without delay the
    closed-loop polynomial (numpy.roots) has a root at ±jω_pc."""
    m = metrics_of(loop)
    assume(m["gain_margin_db"] is not None and m["phase_crossover_rad_s"] is not None)
    g = 10 ** (m["gain_margin_db"] / 20)
    wpc = m["phase_crossover_rad_s"]
    assert abs(1 + g * loop.freqresp(wpc)[0]) < 1e-9
    if loop.delay_s == 0:
        cl = _closed_loop_roots(Rational(gain=loop.gain * g, zeros=loop.zeros, poles=loop.poles))
        assert np.min(np.abs(cl - 1j * wpc)) < 1e-6 * max(1.0, wpc)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(stable_plants())
def test_adding_delay_margin_is_marginal(loop: Rational) -> None:
    """Adding an extra delay equal to the delay margin makes 1 + L(jωc)e^(−jωc·DM) = 0
    at the crossover that sets it; a little less extra delay keeps a stable loop
    stable and a little more destabilises it."""
    m = metrics_of(loop)
    dm = m["delay_margin_s"]
    assume(dm is not None and dm != 0.0 and m["closed_loop_stable"])
    vals = [abs(1 + loop.freqresp(w)[0] * np.exp(-1j * w * dm)) for w in m["crossovers_rad_s"]]
    assert min(vals) < 1e-9
    less = Rational(
        gain=loop.gain, zeros=loop.zeros, poles=loop.poles, delay_s=loop.delay_s + dm * 0.999
    )
    more = Rational(
        gain=loop.gain, zeros=loop.zeros, poles=loop.poles, delay_s=loop.delay_s + dm * 1.001
    )
    assert metrics_of(less)["closed_loop_stable"] is True
    assert metrics_of(more)["closed_loop_stable"] is False


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(stable_plants(), st.lists(st.floats(min_value=-3, max_value=3), min_size=5, max_size=20))
def test_peaks_bound_every_frequency(loop: Rational, log_w: list[float]) -> None:
    """Ms ≥ |1/(1+L(jω))| and Mt ≥ |L/(1+L)| at any frequency (definition of a peak)."""
    m = metrics_of(loop)
    w = 10 ** np.array(log_w)
    h = loop.freqresp(w)
    if m["sensitivity_peak"] is not None:
        assert np.all(1 / np.abs(1 + h) <= m["sensitivity_peak"] * (1 + 1e-9))
    if m["complementary_peak"] is not None:
        assert np.all(np.abs(h / (1 + h)) <= m["complementary_peak"] * (1 + 1e-9))


def test_batch_equals_one_by_one() -> None:
    """frequency_metrics_batch over 40 compensators == frequency_metrics one by one."""
    rng = np.random.default_rng(5)
    plant = Rational(
        gain=2.0, poles=(-0.3, -1.5, complex(-0.2, 4.0), complex(-0.2, -4.0)), delay_s=0.4
    )
    n = 40
    k = rng.uniform(0.05, 1.5, n)
    zeros = np.stack([-rng.uniform(0.1, 1.0, n), -rng.uniform(1.0, 5.0, n)], axis=1).astype(complex)
    poles = np.stack([np.zeros(n), -rng.uniform(5.0, 30.0, n)], axis=1).astype(complex)
    batch = frequency_metrics_batch(plant, k, zeros, poles, chunk=16)
    for i in range(n):
        one = frequency_metrics(plant, Rational(gain=k[i], zeros=zeros[i], poles=poles[i]))
        for key, value in one.items():
            got = batch[key][i]
            if key == "crossovers_rad_s":
                assert value == pytest.approx([w for w in got if np.isfinite(w)], rel=1e-12)
            elif value is None:
                assert not np.isfinite(got)
            elif key.endswith("_peak_rad_s"):  # a flat maximum: its location is looser
                assert got == pytest.approx(value, rel=1e-6), key
            else:
                assert got == pytest.approx(value, rel=1e-10, abs=1e-15), key


def test_loopbatch_stack_mixed_designs() -> None:
    """A stacked batch of different loops gives each loop's own metrics."""
    a = Rational(gain=0.7, poles=(0.0, -1.0), delay_s=0.2)
    b = Rational(gain=3.0, poles=(-0.5, -2.0), delay_s=0.2)
    both = loop_metrics_batch(LoopBatch.stack([a, b]))
    for i, loop in enumerate((a, b)):
        one = metrics_of(loop)
        assert both["phase_margin_deg"][i] == pytest.approx(one["phase_margin_deg"], rel=1e-12)
        assert both["sensitivity_peak"][i] == pytest.approx(one["sensitivity_peak"], rel=1e-12)


@pytest.mark.parametrize(("gain", "zero", "pole"), [
    (1.0000002744895709, -1.0, -10.0),  # |L(∞)| just above 1: crossover far above the roots
    (0.10000003, -10.0, -1.0),  # |L(0)| just above 1: crossover far below the roots
])
def test_biproper_loop_near_unity_finds_the_far_crossover(gain, zero, pole):
    """Closed form: |K(jω − z)/(jω − p)| = 1 at ω² = (K²z² − p²)/(1 − K²). The grid used
    to cover the roots only (found by the engine/oracle comparison of test_balance)."""
    loop = Rational(gain=gain, zeros=(zero,), poles=(pole,))
    k2 = gain * gain
    wc = math.sqrt((k2 * zero**2 - pole**2) / (1.0 - k2))
    m = frequency_metrics(loop, Rational(gain=1.0))
    assert m["crossovers_rad_s"] == pytest.approx([wc], rel=1e-6)


@pytest.mark.parametrize("delay_s", [0.0, 0.5])
def test_every_figure_scales_as_theory_says(delay_s):
    """The same loop s times faster (every root × s, the delay ÷ s, gains × s^(poles −
    zeros)): frequencies × s, times and the load IAE ÷ s, the integral gain × s, every
    ratio (margins, peaks, overshoot, noise figures) unchanged. The gain moved from
    plant to compensator (P·a, C/a): the loop and its figures unchanged, the control
    signal and the compensator's gains ÷ a, the load response × a."""
    from explorer.evaluation.records import design_metrics

    plant = Rational(gain=2.0, poles=(-1.0, -2.0), delay_s=delay_s)
    comp = Rational(gain=9.6 if delay_s else 30.0, zeros=(-0.8, -1.25), poles=(0.0, -10.0))

    def faster(r, s):
        k = len(r.poles) - len(r.zeros)
        return Rational(gain=r.gain * s**k, zeros=tuple(z * s for z in r.zeros),
                        poles=tuple(p * s for p in r.poles), delay_s=r.delay_s / s)

    base = design_metrics(plant, comp)
    assert base["closed_loop_stable"] and base["settling_time_s"] is not None
    per_s = {"crossover_rad_s", "phase_crossover_rad_s", "complementary_peak_rad_s",
             "sensitivity_peak_rad_s", "integral_gain"}
    times = {"delay_margin_s", "settling_time_s", "rise_time_s", "iae_load"}

    def check(got, factor):
        for k, v in base.items():
            if v is None or isinstance(v, bool):
                assert got[k] == v, k
            elif isinstance(v, list):
                assert got[k] == pytest.approx([x * factor(k) for x in v], rel=1e-8), k
            elif k == "overshoot_pct":
                assert got[k] == pytest.approx(v, abs=1e-6), k
            else:
                assert got[k] == pytest.approx(v * factor(k), rel=1e-8), k

    for s in (1e-3, 2.0**7, 1e3):
        check(design_metrics(faster(plant, s), faster(comp, s)),
              lambda k, s=s: s if k in per_s or k == "crossovers_rad_s" else
              1.0 / s if k in times else 1.0)
    for a in (1e-9, 1e9):
        moved = (Rational(gain=plant.gain * a, poles=plant.poles, delay_s=delay_s),
                 Rational(gain=comp.gain / a, zeros=comp.zeros, poles=comp.poles))
        check(design_metrics(*moved),
              lambda k, a=a: 1.0 / a if k in ("peak_control", "hf_gain", "integral_gain",
                                             "noise_gain") else a if k == "iae_load" else 1.0)
