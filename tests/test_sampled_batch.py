"""Batched sampled-loop readings (explorer.frequency.sampled_batch) equal the one-design
explorer.frequency.sampled.sampled_loop_metrics (itself checked against scipy.signal and the
ZOH formulas of Åström & Wittenmark, Computer-Controlled Systems, 3rd ed. 1997, §2.3),
and the batched closed-loop matrices have the one-design matrix's eigenvalues."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from explorer.core.loop import Rational
from explorer.frequency.sampled import (
    closed_loop_matrix,
    cont_loop_with,
    discretize,
    sample_plant,
    sampled_loop_metrics,
)
from explorer.frequency.sampled_batch import (
    closed_loop_matrices,
    discretize_batch,
    sampled_metrics_batch,
)

KEYS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db", "phase_crossover_rad_s",
        "delay_margin_s", "sensitivity_peak", "complementary_peak", "closed_loop_stable")

# invented plants: a belt drive with a transport delay, a lightly damped positioning
# stage, an integrating level loop
PLANTS = [
    Rational(gain=0.05 / 0.375, zeros=(), poles=(-1 / 3, -2.0, -4.0), delay_s=0.13),
    Rational(gain=40.0, zeros=(), poles=(-0.4 + 6j, -0.4 - 6j, -1.5), delay_s=0.0),
    Rational(gain=0.8, zeros=(-3.0,), poles=(0.0, -0.7), delay_s=0.42),
]


def _random_designs(rng: np.random.Generator, n: int) -> tuple[np.ndarray, ...]:
    k = 10 ** rng.uniform(-0.5, 1.5, n)
    z = np.stack([-(10 ** rng.uniform(-1, 0.5, n)), -(10 ** rng.uniform(-0.5, 1, n))], 1)
    p = np.stack([np.zeros(n), -(10 ** rng.uniform(0.5, 1.5, n))], 1)
    wp = 10 ** rng.uniform(-0.5, 0.6, n)
    return k, z.astype(complex), p.astype(complex), wp


@pytest.mark.parametrize("pi", range(len(PLANTS)))
@pytest.mark.parametrize("T,tc", [(0.05, 0.01), (0.2, 0.0), (0.011, 0.003)])
def test_batch_equals_one_by_one(pi: int, T: float, tc: float) -> None:
    plant = PLANTS[pi]
    rng = np.random.default_rng(100 * pi + int(T * 1000))
    k, z, p, wp = _random_designs(rng, 24)
    sp = sample_plant(plant, T, tc)
    dc = discretize_batch(k, z, p, T, wp)
    mb = sampled_metrics_batch(sp, dc, k, z, p)
    checked = 0
    for i in range(k.size):
        comp = Rational(gain=k[i], zeros=tuple(z[i]), poles=tuple(p[i]))
        if not (0 < wp[i] < np.pi / T):
            assert not dc.valid[i] and not mb["closed_loop_stable"][i]
            continue
        d1 = discretize(comp, T, "tustin-prewarp", wp[i])
        assert np.isclose(dc.gain[i], d1.gain, rtol=1e-12)
        assert np.allclose(np.sort_complex(dc.poles[i]), np.sort_complex(np.array(d1.poles)))
        m1 = sampled_loop_metrics(sp, d1, cont_loop_with(plant, comp, tc))
        for key in KEYS:
            a = np.nan if m1[key] is None else float(m1[key])
            assert np.isclose(a, float(mb[key][i]), rtol=1e-7, equal_nan=True), (i, key)
        xs = mb["crossovers_rad_s"][i]
        assert np.allclose(np.sort(xs[np.isfinite(xs)]), np.sort(m1["crossovers_rad_s"]))
        checked += 1
    assert checked > 10


def test_closed_loop_matrices_have_the_one_design_eigenvalues() -> None:
    plant = PLANTS[0]
    rng = np.random.default_rng(7)
    k, z, p, wp = _random_designs(rng, 6)
    sp = sample_plant(plant, 0.05, 0.02)
    dc = discretize_batch(k, z, p, 0.05, np.clip(wp, 0.1, 10))
    F = closed_loop_matrices(sp, dc)
    for i in range(k.size):
        comp = Rational(gain=k[i], zeros=tuple(z[i]), poles=tuple(p[i]))
        wpi = float(np.clip(wp[i], 0.1, 10))
        f1 = closed_loop_matrix(sp, discretize(comp, 0.05, "tustin-prewarp", wpi))
        e1 = np.sort_complex(np.linalg.eigvals(f1))
        e2 = np.sort_complex(np.linalg.eigvals(F[i]))
        assert np.allclose(np.abs(e1), np.abs(e2), atol=1e-8)


def test_stability_against_scipy_zoh_characteristic_roots() -> None:
    """Independent: the delay-free plant discretised by scipy.signal.cont2discrete
    ('zoh'), the loop closed as polynomials, its roots by numpy: the batch's verdict
    agrees on stable and unstable gains."""
    plant = Rational(gain=2.0, zeros=(), poles=(-1.0, -3.0, -0.5), delay_s=0.0)
    T = 0.1
    gains = np.array([0.2, 1.0, 3.0, 6.0, 10.0, 20.0])
    z = np.tile(np.array([-0.5 + 0j]), (gains.size, 1))
    p = np.tile(np.array([0.0 + 0j]), (gains.size, 1))
    sp = sample_plant(plant, T)
    dc = discretize_batch(gains, z, p, T, np.full(gains.size, 1.0))
    mb = sampled_metrics_batch(sp, dc, gains, z, p)
    num = plant.gain * np.real(np.poly(np.array(plant.zeros, complex)))
    den = np.real(np.poly(np.array(plant.poles, complex)))
    nd, dd, _ = signal.cont2discrete((num, den), T, method="zoh")
    nd = np.trim_zeros(np.ravel(nd), "f")
    verdicts = []
    for i in range(gains.size):
        cn = dc.gain[i] * np.real(np.poly(dc.zeros[i]))
        cd = np.real(np.poly(dc.poles[i]))
        chi = np.polyadd(np.polymul(cd, dd), np.polymul(cn, nd))
        verdicts.append(bool(np.max(np.abs(np.roots(chi))) < 1.0))
    assert list(mb["closed_loop_stable"]) == verdicts
    assert any(verdicts) and not all(verdicts)


def test_long_delay_argument_count_agrees_with_eigenvalues() -> None:
    """Past MAX_EIG_STATES states the batch counts by the argument principle; the
    eigenvalues of the (large) one-design closed-loop matrix decide independently."""
    from explorer.frequency.sampled import MAX_EIG_STATES

    plant = Rational(gain=1.0, zeros=(), poles=(-0.2,), delay_s=14.0)  # a long dryer belt
    T = 0.05
    sp = sample_plant(plant, T, 0.0)
    assert sp.n + 1 + sp.d + 1 > MAX_EIG_STATES
    gains = np.array([0.02, 0.05, 0.1, 0.2, 0.4])
    z = np.tile(np.array([-0.2 + 0j]), (gains.size, 1))
    p = np.tile(np.array([0.0 + 0j]), (gains.size, 1))
    dc = discretize_batch(gains, z, p, T, np.full(gains.size, 0.08))
    mb = sampled_metrics_batch(sp, dc, gains, z, p)
    verdicts = []
    for i in range(gains.size):
        comp = Rational(gain=gains[i], zeros=(-0.2,), poles=(0.0,))
        F = closed_loop_matrix(sp, discretize(comp, T, "tustin-prewarp", 0.08))
        verdicts.append(bool(np.max(np.abs(np.linalg.eigvals(F))) < 1 - 1e-9))
    assert list(mb["closed_loop_stable"]) == verdicts
    assert any(verdicts) and not all(verdicts)


@pytest.mark.parametrize("seed", range(6))
def test_batch_equals_one_by_one_on_random_plants(seed: int) -> None:
    """Random plants (real lags, an integrator, a lightly damped pair, a zero, a delay
    of 0 to 1 s), random T and computation delay (0 to 1.5 T), random PI + lead
    designs: the batch equals the one-design evaluator (an exploratory run over 30 such
    plants and 360 designs agreed as well)."""
    import math

    rng = np.random.default_rng(seed)
    poles = list(-(10 ** rng.uniform(-1, 1, rng.integers(1, 4))))
    if rng.random() < 0.3:
        poles.append(0.0)
    if rng.random() < 0.3:
        wn, zeta = 10 ** rng.uniform(0, 1), rng.uniform(0.05, 0.5)
        im = wn * math.sqrt(1 - zeta * zeta)
        poles += [complex(-zeta * wn, im), complex(-zeta * wn, -im)]
    zeros = [complex(-(10 ** rng.uniform(-0.5, 1)))] if rng.random() < 0.3 else []
    delay = 0.0 if rng.random() < 0.4 else float(10 ** rng.uniform(-2, 0))
    plant = Rational(gain=float(10 ** rng.uniform(-1, 1)), zeros=tuple(zeros),
                     poles=tuple(complex(x) for x in poles), delay_s=delay)
    T = float(10 ** rng.uniform(-2, -0.5))
    tc = float(rng.choice([0.0, T * rng.uniform(0, 1.5)]))
    k, z, p, wp = _random_designs(rng, 12)
    sp = sample_plant(plant, T, tc)
    dc = discretize_batch(k, z, p, T, wp)
    mb = sampled_metrics_batch(sp, dc, k, z, p)
    for i in np.flatnonzero(dc.valid):
        comp = Rational(gain=k[i], zeros=tuple(z[i]), poles=tuple(p[i]))
        m1 = sampled_loop_metrics(sp, discretize(comp, T, "tustin-prewarp", wp[i]),
                                  cont_loop_with(plant, comp, tc))
        for key in KEYS:
            a = np.nan if m1[key] is None else float(m1[key])
            assert np.isclose(a, float(mb[key][i]), rtol=1e-6, equal_nan=True), (i, key)


@pytest.mark.parametrize("pi", range(len(PLANTS)))
def test_modal_plant_evaluator_equals_the_linear_solve(pi: int) -> None:
    """The batch's fast H(z) (partial fractions over the eigenvalues of Φ) is the
    SampledPlant's H(z) (one linear solve per point) on and off the unit circle; a
    plant with a repeated pole (defective Φ) falls back to the solve."""
    from explorer.frequency.sampled_batch import plant_evaluator

    sp = sample_plant(PLANTS[pi], 0.05, 0.013)
    z = np.concatenate([np.exp(1j * np.linspace(1e-3, np.pi, 500)),
                        0.97 * np.exp(1j * np.linspace(0, np.pi, 50))])
    a, b = plant_evaluator(sp)(z), sp.at_z(z)
    assert np.allclose(a, b, rtol=1e-9, atol=1e-12 * np.max(np.abs(b)))
    double = sample_plant(Rational(gain=2.0, zeros=(), poles=(-1.0, -1.0)), 0.1)
    assert plant_evaluator(double) == double.at_z
