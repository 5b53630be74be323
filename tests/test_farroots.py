"""explorer.time_domain.farroots: far roots replaced by their delay equivalents.

Reference: the exact frequency responses of the original factors, evaluated here
with numpy (np.polyval on np.poly of the roots), against the first-order Taylor
identities 1/(1 − s/p) = e^{s/p}(1 + O((s/p)²)) and (1 − s/z) = e^{−s/z}(1 + O((s/z)²))
(closed forms); the delay approximation of a fast lag is the basis of the half rule
in S. Skogestad, J. Process Control 13 (2003) 291–309, §2 (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest

from explorer.core.loop import Rational
from explorer.time_domain.farroots import FOLD_MIN_DAMPING, fold_far_roots

W_FAR = 100.0  # rad/s


def _resp(gain, zeros, poles, delay, w):
    s = 1j * np.asarray(w)
    num = np.polyval(np.poly(np.array(zeros, dtype=complex)), s) if len(zeros) else 1.0
    den = np.polyval(np.poly(np.array(poles, dtype=complex)), s) if len(poles) else 1.0
    return gain * num / den * np.exp(-s * delay)


def _pair(wn, zeta):
    re, im = -zeta * wn, wn * np.sqrt(1 - zeta**2)
    return [complex(re, im), complex(re, -im)]


def test_plant_far_roots_keep_dc_gain_and_low_frequency_response():
    # a pump skid: slow lag, a fast real actuator pole, a damped fast pair, a fast LHP
    # zero and a fast RHP zero (sensor lead and a small inverse response)
    zeros = [-400.0, 900.0]
    poles = [-0.7, -300.0, *_pair(500.0, 0.6), -2.0]
    gain = 3.0 * 300.0 * 500.0**2 * 0.7 * 2.0 / (400.0 * 900.0)
    plant = Rational(gain=-gain, zeros=zeros, poles=poles, delay_s=0.8)
    (grp,) = fold_far_roots(plant, np.ones(1), np.zeros((1, 0)), np.zeros((1, 0)), W_FAR)
    fp = grp.plant
    assert grp.folded
    assert sorted(p.real for p in fp.poles) == [-2.0, -0.7] and fp.zeros == ()
    # delay equivalents: +1/300 (pole), +2ζ/ωn (pair), −1/400 (LHP zero), +1/900 (RHP zero)
    assert fp.delay_s == pytest.approx(0.8 + 1 / 300 + 1.2 / 500 - 1 / 400 + 1 / 900, rel=1e-12)
    assert fp.dc_gain() == pytest.approx(plant.dc_gain(), rel=1e-12)
    w = np.logspace(-2, 0, 30)  # up to ω_far/100
    exact = _resp(plant.gain, zeros, poles, 0.8, w)
    folded = _resp(fp.gain, fp.zeros, fp.poles, fp.delay_s, w)
    bound = sum((w / abs(r)) ** 2 for r in [*zeros, -300.0, 500.0, 500.0])
    assert np.all(np.abs(folded / exact - 1) <= bound)
    assert np.max(np.abs(folded / exact - 1)) > 0.01 * np.max(bound)  # not vacuous


def test_lightly_damped_unstable_and_slow_roots_stay():
    poles = [*_pair(400.0, FOLD_MIN_DAMPING / 2), 250.0, -50.0]
    plant = Rational(gain=1.0, poles=poles, delay_s=0.3)
    (grp,) = fold_far_roots(plant, np.ones(1), np.zeros((1, 0)), np.zeros((1, 0)), W_FAR)
    assert grp.plant is plant and not grp.folded


def test_properness_limits_what_folds_farthest_first():
    plant = Rational(gain=1.0, poles=(-1.0,), delay_s=1.0)
    # lead with a far pole: folding it would leave an improper compensator
    g, z, p = np.array([2500.0]), np.array([[-1.0]], complex), np.array([[-5000.0]], complex)
    (grp,) = fold_far_roots(plant, g, z, p, W_FAR)
    assert not grp.folded and grp.plant is plant
    # lag pair at 5000 and 6000 with one zero: only the farther pole folds
    g, p = np.array([1.5e7]), np.array([[-5000.0, -6000.0]], complex)
    (grp,) = fold_far_roots(plant, g, z, p, W_FAR)
    assert grp.folded and grp.poles.tolist() == [[-5000.0]]
    assert grp.plant.delay_s == pytest.approx(1.0 + 1 / 6000, rel=1e-12)
    assert grp.gain[0] == pytest.approx(1.5e7 / 6000, rel=1e-12)


def test_rows_partition_near_rows_stay_one_batch():
    plant = Rational(gain=1.0, poles=(-1.0,), delay_s=1.0)
    rng = np.random.default_rng(7)
    n = 12
    poles = np.stack([np.zeros(n), -rng.uniform(2, 50, n)], axis=1).astype(complex)
    far = [3, 8]
    poles[far, 1] = [-3000.0, -800.0]
    zeros = -rng.uniform(0.1, 2, (n, 1)).astype(complex)
    gain = rng.uniform(0.5, 2, n)
    groups = fold_far_roots(plant, gain, zeros, poles, W_FAR)
    assert len(groups) == 3 and not groups[0].folded
    assert sorted(np.concatenate([g.rows for g in groups]).tolist()) == list(range(n))
    assert set(groups[0].rows.tolist()) == set(range(n)) - set(far)
    for grp in groups[1:]:
        (i,) = grp.rows
        assert grp.plant.delay_s == pytest.approx(1.0 - 1 / poles[i, 1].real, rel=1e-12)
        # compensator DC behaviour kept: K·z/p of the PI-with-lag at low frequency
        assert grp.gain[0] == pytest.approx(gain[i] / -poles[i, 1].real, rel=1e-12)
