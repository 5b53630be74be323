"""The sampled loop's step responses (explorer.time_domain.sampled_step) against an independent
simulation: the continuous plant discretised by scipy.signal.cont2discrete ("zoh")
on a sub-step that divides the period and the delays, the controller run as its
direct-form difference equation in a plain loop (Åström & Wittenmark,
Computer-Controlled Systems, 3rd ed. 1997, §2.3: the ZOH discretization is exact for a
piecewise-constant input)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from explorer.core.loop import Rational
from explorer.frequency.sampled import discretize
from explorer.frequency.sampled_batch import discretize_batch
from explorer.time_domain.sampled_step import sampled_step_metrics, simulate_sampled


def _reference(plant: Rational, comp_d, T: float, tc: float, K: int, M: int, load: bool):
    """y on the grid T/M by an independent sub-stepped ZOH simulation (delays must be
    multiples of T/M)."""
    h = T / M
    num = plant.gain * np.real(np.poly(np.array(plant.zeros, complex)))
    den = np.real(np.poly(np.array(plant.poles, complex)))
    A, B, C, D = signal.tf2ss(num, den)
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete((A, B, C, D), h, method="zoh")
    du = round((plant.delay_s + tc) / h)
    dl = round(plant.delay_s / h)
    assert abs(du * h - plant.delay_s - tc) < 1e-12 and abs(dl * h - plant.delay_s) < 1e-12
    b, a = comp_d.coefficients()
    x = np.zeros(A.shape[0])
    e_hist = [0.0] * len(b)
    u_hist = [0.0] * len(a)
    u_samples = []
    y = []
    r = 0.0 if load else 1.0
    for i in range(K * M + 1):
        k = i // M
        # plant input on [i·h, (i+1)·h): u held from sample j, j·T + tau_u ≤ i·h
        j = (i - du) // M
        v = (u_samples[j] if 0 <= j < len(u_samples) else 0.0) + (1.0 if load and i >= dl else 0.0)
        if i % M == 0 and k < K:
            yk = float((Cd @ x)[0]) + float(Dd[0, 0]) * v
            e = r - yk
            e_hist = [e] + e_hist[:-1]
            uk = (sum(bi * ei for bi, ei in zip(b, e_hist, strict=True))
                  - sum(ai * ui for ai, ui in zip(a[1:], u_hist[:-1], strict=True))) / a[0]
            u_hist = [uk] + u_hist[:-1]
            u_samples.append(uk)
            j = (i - du) // M
            v = (u_samples[j] if j >= 0 else 0.0) + (1.0 if load and i >= dl else 0.0)
        y.append(float((Cd @ x)[0]) + float(Dd[0, 0]) * v)
        x = Ad @ x + Bd[:, 0] * v
    return np.array(y), np.array(u_samples)


# the last one: 61 periods of delay, past MAX_DOUBLING_STATES (marched sample by sample)
@pytest.mark.parametrize("tau,tc", [(0.13, 0.02), (0.0, 0.0), (0.2, 0.0), (0.0, 0.03),
                                    (3.0, 0.02)])
@pytest.mark.parametrize("load", [False, True])
def test_steps_match_substepped_zoh(tau: float, tc: float, load: bool) -> None:
    # an invented belt drive: three lags, a PI + lead
    plant = Rational(gain=0.05 / 0.375, zeros=(), poles=(-1 / 3, -2.0, -4.0), delay_s=tau)
    comp = Rational(gain=150.911, zeros=(-1 / 3, -2.0), poles=(0.0, -6.0))
    T, M, K = 0.05, 10, 160
    d1 = discretize(comp, T, "tustin-prewarp", 0.9)
    dc = discretize_batch(np.array([comp.gain]), np.array([comp.zeros]),
                          np.array([comp.poles]), T, np.array([0.9]))
    got = simulate_sampled(plant, dc, tc, K * T, load=load, per_sample=M)
    ref_y, ref_u = _reference(plant, d1, T, tc, K, M, load)
    assert got.y.shape == (1, K * M + 1)
    scale = np.max(np.abs(ref_y))
    assert np.max(np.abs(got.y[0] - ref_y)) <= 1e-9 * scale
    assert np.allclose(got.u[0], ref_u, rtol=1e-9, atol=1e-9 * np.max(np.abs(ref_u)))
    # between the samples the output is not the staircase of its samples
    assert np.max(np.abs(np.diff(got.y[0]))) > 0


def test_metrics_tend_to_continuous_as_T_shrinks() -> None:
    """As T → 0 the sampled loop's overshoot and load IAE tend to the continuous loop's
    (explorer.time_domain.timeresp, an independent method: Hermite-cubic delayed simulation)."""
    from explorer.time_domain.timeresp import step_metrics

    plant = Rational(gain=0.05 / 0.375, zeros=(), poles=(-1 / 3, -2.0, -4.0), delay_s=0.1)
    comp = Rational(gain=60.0, zeros=(-1 / 3,), poles=(0.0,))
    cm = step_metrics(plant, comp)
    errs = []
    for T in (0.02, 0.005):
        dc = discretize_batch(np.array([comp.gain]), np.array([comp.zeros]),
                              np.array([comp.poles]), T, np.array([0.6]))
        sm = sampled_step_metrics(plant, dc, 0.0, np.array([1.0]),
                                  np.array([4 * cm["settling_time_s"]]), per_sample=8)
        errs.append(abs(sm["iae_load"][0] / cm["iae_load"] - 1.0))
        assert math.isfinite(sm["overshoot_pct"][0])
    assert errs[1] < errs[0] and errs[1] < 0.02
