"""Noise figures (explorer.frequency.noise) against closed forms and a dense scipy evaluation."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from explorer.core.loop import Rational
from explorer.frequency.noise import noise_figures, pole_ratio


def _dense_sup(comp: Rational, wc: float) -> float:
    """sup |C(jω)| for ω ≥ ωc on a very dense grid with scipy.signal.freqs_zpk (shares
    no code with explorer.frequency.noise), and the limit ω → ∞."""
    w = np.geomspace(wc, wc * 1e7, 400_000)
    _, h = signal.freqs_zpk(list(comp.zeros), list(comp.poles), comp.gain, worN=w)
    hf = abs(comp.gain) if len(comp.zeros) == len(comp.poles) else 0.0
    return max(float(np.abs(h).max()), hf)


def test_lead_noise_gain_is_its_high_frequency_gain() -> None:
    # C = k (s + a)/(s + b), b > a: |C| rises monotonically to k (closed form)
    k, a, b, wc = 4.0, 0.5, 6.0, 1.7
    ng, ratio = noise_figures(Rational(gain=k, zeros=(-a,), poles=(-b,)), wc)
    at_wc = k * math.hypot(wc, a) / math.hypot(wc, b)
    assert ng == pytest.approx(k, rel=1e-12)
    assert ratio == pytest.approx(k / at_wc, rel=1e-12)


def test_pi_noise_gain_is_its_gain_at_crossover() -> None:
    # C = k (s + a)/s falls monotonically: the supremum above ωc is |C(jωc)|
    k, a, wc = 2.5, 0.3, 0.9
    ng, ratio = noise_figures(Rational(gain=k, zeros=(-a,), poles=(0.0,)), wc)
    assert ng == pytest.approx(k * math.hypot(wc, a) / wc, rel=1e-12)
    assert ratio == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize(
    "comp, wc",
    [
        # strictly proper: lead followed by two roll-off poles (hf_gain 0, peak inside)
        (Rational(gain=300.0, zeros=(-1.0,), poles=(-8.0, -15.0, -40.0)), 2.0),
        # PID·filter with complex zeros near crossover and a filter pole
        (Rational(gain=6.0, zeros=(complex(-0.3, 0.4), complex(-0.3, -0.4)),
                  poles=(0.0, -9.0)), 0.8),
        # a notch with well-damped poles: the peak sits around the notch's poles
        (Rational(gain=1.0, zeros=(complex(-0.2, 6.0), complex(-0.2, -6.0)),
                  poles=(complex(-4.0, 4.0), complex(-4.0, -4.0))), 1.0),
    ],
)
def test_noise_gain_matches_a_dense_scipy_supremum(comp: Rational, wc: float) -> None:
    ng, _ = noise_figures(comp, wc)
    assert ng == pytest.approx(_dense_sup(comp, wc), rel=1e-6)


def test_pole_ratio_and_missing_crossover() -> None:
    comp = Rational(gain=1.0, zeros=(-1.0,), poles=(0.0, -30.0))
    assert pole_ratio(comp, 1.5) == pytest.approx(20.0)
    assert pole_ratio(Rational(gain=2.0), 1.0) == 0.0
    assert pole_ratio(comp, None) is None
    assert noise_figures(comp, None) == (None, None)
