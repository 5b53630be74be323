"""Structures and the phase/gain elimination, checked against a direct evaluation of
L(jωc) = C(jωc)·P(jωc)·e^{−jωcθ} with numpy (closed form, independent of explorer.core.loop)."""

from __future__ import annotations

import numpy as np
import pytest

from explorer.core.loop import Rational
from explorer.design.structures import balance, candidate_structures
from explorer.model.study import SearchOptions, Targets


def _direct(
    plant: Rational, k: np.ndarray, z: np.ndarray, p: np.ndarray, w: np.ndarray
) -> np.ndarray:
    s = 1j * w
    c = k * np.prod(s[:, None] - z, axis=1) / np.prod(s[:, None] - p, axis=1)
    pz = np.array(plant.zeros, complex)
    pp = np.array(plant.poles, complex)
    g = (
        plant.gain
        * np.prod(s[:, None] - pz[None, :], axis=1)
        / np.prod(s[:, None] - pp[None, :], axis=1)
    )
    return c * g * np.exp(-s * plant.delay_s)


PLANTS = [
    Rational(gain=0.05 / 0.375, poles=(-1 / 3, -2.0, -4.0)),
    Rational(gain=2.0, poles=(-0.5, -0.2 + 2j, -0.2 - 2j), delay_s=0.1),
    Rational(gain=1.0, poles=(-1.0,), delay_s=1.0),
]


@pytest.mark.parametrize("plant", PLANTS)
def test_every_feasible_trial_meets_crossover_and_pm_exactly(plant: Rational) -> None:
    wc, pm = 0.4, 50.0
    targets = Targets(crossover_rad_s=wc, phase_margin_deg=pm, integrators=1)
    structs = candidate_structures(plant, targets, SearchOptions(max_order=3))
    rng = np.random.default_rng(5)
    n_feasible = 0
    for s in structs:
        params = {k: rng.uniform(lo, hi, 64) for k, (lo, hi) in s.params.items()}
        b = balance(plant, s, params, np.full(64, wc), pm)
        ok = b.shortfall_deg == 0
        n_feasible += ok.sum()
        if not ok.any():
            continue
        L = _direct(plant, b.gain[ok], b.zeros[ok], b.poles[ok], np.full(ok.sum(), wc))
        assert np.allclose(np.abs(L), 1.0, rtol=1e-9)
        # phase ≡ −180 + PM (mod 360): compare on the unit circle
        assert np.allclose(L, np.exp(1j * np.radians(-180.0 + pm)), atol=1e-8)
        assert np.all(b.zeros[ok].real <= 0) and np.all(b.poles[ok].real <= 0)
    assert n_feasible > 0


def test_impossible_phase_gives_shortfall_in_degrees() -> None:
    # PI on 1/(s+1)^3 at wc = 10: plant phase ≈ −3·84.3°, the integrator −90°; a zero adds
    # at most atan(10^2.5)≈89.8°: phase at best ≈ −253 −90 +89.8 => PM ≈ −163 instead of +45
    plant = Rational(gain=1.0, poles=(-1.0, -1.0, -1.0))
    targets = Targets(crossover_rad_s=10.0, phase_margin_deg=45.0, integrators=1)
    pi = candidate_structures(plant, targets, SearchOptions(max_order=1))[0]
    assert pi.label == "PI"
    b = balance(plant, pi, {}, np.array([10.0]), 45.0)
    plant_deg = -3 * np.degrees(np.arctan(10.0))
    need = -180 + 45 - (plant_deg - 90)  # lead the zero must give
    best = np.degrees(np.arctan(10**2.5))
    assert b.shortfall_deg[0] == pytest.approx(need - best, abs=1e-9)
    assert np.isnan(b.gain[0])


def test_candidates_proper_ordered_labelled() -> None:
    plant = Rational(gain=3.0, poles=(-0.3, -0.1 + 1.5j, -0.1 - 1.5j))  # ζ ≈ 0.067 mode
    targets = Targets(crossover_rad_s=0.5, phase_margin_deg=45.0, integrators=1)
    structs = candidate_structures(plant, targets, SearchOptions(max_order=3))
    labels = [s.label for s in structs]
    assert len(labels) == len(set(labels))
    assert labels[0] == "PI" and "PID·filter" in labels and "I+lead" in labels
    assert any("notch" in lab for lab in labels)
    assert any("cancel" in lab for lab in labels)
    orders = [s.order for s in structs]
    assert orders == sorted(orders) and max(orders) <= 3
    for s in structs:
        assert s.n_zeros <= s.order  # proper
        assert s.integrators == 1


def test_plant_integrator_counts_towards_required() -> None:
    plant = Rational(gain=1.0, poles=(0.0, -2.0))
    targets = Targets(crossover_rad_s=0.5, phase_margin_deg=50.0, integrators=1)
    structs = candidate_structures(plant, targets, SearchOptions(max_order=1))
    # the plant's integrator makes the loop's type: P-type structures suffice for it...
    assert any(s.integrators == 0 for s in structs)
    # ...and structures with one integrator more are offered for load rejection
    # (a constant load at the plant input leaves an offset under P-type control)
    assert {s.integrators for s in structs} == {0, 1}
    # a loop type the plant does not reach is never offered without its integrators
    plain = Rational(gain=1.0, poles=(-1.0, -2.0))
    assert all(s.integrators == 1 for s in candidate_structures(plain, targets,
                                                               SearchOptions(max_order=2)))


def test_pid_filter_plus_notch_offered_for_a_lightly_damped_mode() -> None:
    # a motion axis of our own: rigid body plus a 80 Hz mode at damping 0.02
    wn = 2 * 3.141592653589793 * 80.0
    mode = complex(-0.02 * wn, wn * (1 - 0.02**2) ** 0.5)
    plant = Rational(gain=wn**2, poles=(0.0, -5.0, mode, mode.conjugate()))
    targets = Targets(crossover_rad_s=60.0, phase_margin_deg=45.0, integrators=2)
    labels = {s.label: s for s in candidate_structures(plant, targets, SearchOptions(max_order=4))}
    s = labels["PID·filter+notch"]
    assert (s.integrators, s.order, s.n_zeros) == (1, 4, 4) and s.notch is not None
