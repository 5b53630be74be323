"""A lightly damped resonance far above the crossover (issue 19, "lightly damped 1e5").

The plant 1e10/((s + 500 ∓ 1e5j)(s + 100)) (ζ = 0.005 at 1e5 rad/s) under compensators
that cross over at 200–5000 rad/s leaves closed-loop modes near 1e5 rad/s with ζ down
to 4e-5: they ring through the whole settling horizon at 0.01–4 % of the step. The
step grid follows each mode's amplitude (explorer/time_domain/modal_step.py), so these responses
take a few thousand intervals instead of 20,000–30,000 (explore --trials 4: 369 s and
1.1 GB before, about 40 s and 0.5 GB after; docs/hostile-input.md).

Checked against scipy.signal (lsim of the closed-loop transfer functions on a grid of
0.2 µs, tests/test_timeresp.py), against scipy's partial fractions for the modal
amplitudes, and against the loop time-scaled by 1e-4 (every root × 1e-4): the same
figures, times × 1e4.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

sys.path.insert(0, str(Path(__file__).resolve().parent))

from hostile_corpus import _time_scaled  # noqa: E402
from test_timeresp import _scipy_metrics  # noqa: E402

from explorer.core.loop import Rational  # noqa: E402
from explorer.frequency.metrics import frequency_metrics  # noqa: E402
from explorer.time_domain.modal_step import hermite_bound, modal_amplitudes, switch_time  # noqa: E402
from explorer.time_domain.timeresp import step_metrics, step_metrics_batch  # noqa: E402

PLANT = Rational(gain=1e10, poles=[-0.5e3 + 1e5j, -0.5e3 - 1e5j, -1e2])
# designs an exploration of this plant produced (explore --trials 4 --seed 1)
COMPS = {
    "PI 200 rad/s": Rational(gain=118.59278112046178, zeros=[-319.70943203025263], poles=[0.0]),
    "PI 1820 rad/s": Rational(gain=905.3918319049374, zeros=[-3872.676908220242], poles=[0.0]),
    "I+cancel+roll-off": Rational(gain=459070.75989648857, zeros=[-100.0],
                                  poles=[-2286.556212984655, 0.0]),
    "I+lead+roll-off": Rational(gain=1542578852421.6082, zeros=[-70.98740056700778],
                                poles=[-58805.71339695392, -7363.244222787795, 0.0]),
}
KEYS = ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control")


@pytest.mark.slow
@pytest.mark.parametrize("name", ["PI 200 rad/s", "PI 1820 rad/s", "I+cancel+roll-off"])
def test_step_figures_against_scipy(name):
    comp = COMPS[name]
    got = step_metrics(PLANT, comp)
    assert all(got[k] is not None for k in (*KEYS, "iae_load")), got
    t_end = max(3.0 * got["settling_time_s"], 0.06)
    *_, ref = _scipy_metrics(PLANT, comp, t_end, n=int(t_end / 2e-7))
    # the bounds of tests/test_timeresp.py
    assert abs(got["overshoot_pct"] - ref["overshoot_pct"]) < 1e-3
    for k, tol in (("settling_time_s", 1e-5), ("rise_time_s", 1e-5), ("peak_control", 1e-6)):
        assert got[k] == pytest.approx(ref[k], rel=tol), k


def test_time_scaled_twin_gives_the_same_figures():
    k = 1e-4  # every root × k: the same loop 1e4 times slower
    names = list(COMPS)
    for name in names:
        comp = COMPS[name]
        slow_p, slow_c = _time_scaled(PLANT, k), _time_scaled(comp, k)
        f, g = frequency_metrics(PLANT, comp), frequency_metrics(slow_p, slow_c)
        assert g["phase_margin_deg"] == pytest.approx(f["phase_margin_deg"], abs=1e-8)
        assert g["sensitivity_peak"] == pytest.approx(f["sensitivity_peak"], rel=1e-10)
        assert g["crossover_rad_s"] == pytest.approx(f["crossover_rad_s"] * k, rel=1e-10)
        a, b = step_metrics(PLANT, comp), step_metrics(slow_p, slow_c)
        assert b["overshoot_pct"] == pytest.approx(a["overshoot_pct"], abs=1e-6)
        for key in ("settling_time_s", "rise_time_s", "iae_load"):
            assert b[key] == pytest.approx(a[key] / k, rel=1e-8), key
        assert b["peak_control"] == pytest.approx(a["peak_control"], rel=1e-8)


def test_batch_equals_one_by_one():
    comp = [COMPS["PI 200 rad/s"], COMPS["PI 1820 rad/s"]]
    batch = step_metrics_batch(PLANT, np.array([c.gain for c in comp]),
                               np.array([c.zeros for c in comp], dtype=complex),
                               np.array([c.poles for c in comp], dtype=complex))
    for i, c in enumerate(comp):
        one = step_metrics(PLANT, c)
        assert batch["overshoot_pct"][i] == pytest.approx(one["overshoot_pct"], abs=1e-3)
        for key in ("settling_time_s", "rise_time_s", "peak_control", "iae_load"):
            assert batch[key][i] == pytest.approx(one[key], rel=1e-4), key


def test_modal_amplitudes_are_the_partial_fraction_residues():
    rng = np.random.default_rng(7)
    lam = np.array([-0.5 + 40j, -0.5 - 40j, -2.0, -7.0])
    t = rng.normal(size=(4, 4))
    diag = np.array([[lam[0].real, lam[0].imag, 0, 0], [-lam[0].imag, lam[0].real, 0, 0],
                     [0, 0, -2.0, 0], [0, 0, 0, -7.0]])
    a = t @ diag @ np.linalg.inv(t)
    out = rng.normal(size=(2, 4))
    xi0 = rng.normal(size=(4, 2))
    got_lam, amp = modal_amplitudes(a[None], out[None], xi0[None], np.array([True]))
    for j, (row, exp) in enumerate(((0, 0), (1, 0), (0, 1))):
        # c·(sI − A)⁻¹·ξ0: the free response's Laplace transform; its residue at λ is
        # the amplitude of e^{λt}
        num, den = signal.ss2tf(a, xi0[:, [exp]], out[[row]], np.zeros((1, 1)))
        res, poles, _ = signal.residue(num[0], den)
        for lam_i, r_i in zip(poles, res, strict=True):
            i = int(np.argmin(np.abs(got_lam[0] - lam_i)))
            assert amp[0, i, j] == pytest.approx(abs(r_i), rel=1e-6, abs=1e-9)


def test_switch_time_rule():
    lam = np.array([[-4.0 + 1e5j, -4.0 - 1e5j, -200.0]])
    scale = np.ones((1, 3))
    h = 1.5e-6 * 4  # |λ|h = 0.6 for the fast pair
    # amplitude unknown: the plain rule, 23/σ
    assert switch_time(lam, None, scale, h, 0.15) == pytest.approx(23.0 / 4.0)
    # a pair at 3e-3 of the signal: x = 0.6 allowed at once (3e-3·B(0.6) < B(0.15))
    amp = np.array([[[3e-3] * 3, [3e-3] * 3, [1.0] * 3]])
    assert 3e-3 * hermite_bound(0.6) <= hermite_bound(0.15)
    assert switch_time(lam, amp, scale, h, 0.15) == 0.0
    # a pair as large as the signal: allowed once it has decayed to B(0.15)/B(0.6)
    amp1 = np.ones((1, 3, 3))
    want = np.log(hermite_bound(0.6) / hermite_bound(0.15)) / 4.0
    assert switch_time(lam, amp1, scale, h, 0.15) == pytest.approx(want)
    # an unknown signal size (0) keeps the plain rule
    assert switch_time(lam, amp, np.zeros((1, 3)), h, 0.15) == pytest.approx(23.0 / 4.0)
    # Hermite bound: x⁴/384 for small x, against the cubic interpolant of cos(x·t/h)
    x = 0.6
    tt = np.linspace(0.0, 1.0, 2001)
    f0, f1, d0, d1 = 1.0, np.cos(x), 0.0, -x * np.sin(x)
    hh = ((2 * tt**3 - 3 * tt**2 + 1) * f0 + (tt**3 - 2 * tt**2 + tt) * d0
          + (-2 * tt**3 + 3 * tt**2) * f1 + (tt**3 - tt**2) * d1)
    assert np.max(np.abs(np.cos(x * tt) - hh)) <= hermite_bound(x)


@pytest.mark.slow
def test_explore_and_its_time_scaled_twin_give_the_same_answer(tmp_path):
    """explore --trials 4 on the 1e5 rad/s study and on its twin 1e4 times slower
    (every root × 1e-4, the same compensator roots × 1e-4): the same answer with the
    same PM, Ms and overshoot and its times × 1e4 (within the refinement's rounding)."""
    from hostile_corpus import extreme_study

    from explorer.model.study import load_study
    from explorer.search.exploration import explore

    comp = Rational(gain=0.1, zeros=[-1e2], poles=[0, -5e3])
    k = 1e-4
    fast, slow = tmp_path / "fast.toml", tmp_path / "slow.toml"
    fast.write_text(extreme_study(PLANT, comp), encoding="utf-8")
    slow.write_text(extreme_study(_time_scaled(PLANT, k), _time_scaled(comp, k)),
                    encoding="utf-8")
    a = explore(load_study(fast), tmp_path / "a", trials=4, seed=1, progress=False)
    b = explore(load_study(slow), tmp_path / "b", trials=4, seed=1, progress=False)
    name = a.obj["answer"]["design"]
    assert name is not None and b.obj["answer"]["design"] == name
    (ma,) = [d["metrics"] for d in a.designs if d["name"] == name]
    (mb,) = [d["metrics"] for d in b.designs if d["name"] == name]
    assert mb["phase_margin_deg"] == pytest.approx(ma["phase_margin_deg"], abs=1e-4)
    assert mb["sensitivity_peak"] == pytest.approx(ma["sensitivity_peak"], rel=1e-6)
    assert mb["overshoot_pct"] == pytest.approx(ma["overshoot_pct"], abs=1e-4)
    assert mb["settling_time_s"] * k == pytest.approx(ma["settling_time_s"], rel=1e-5)
    assert mb["crossover_rad_s"] / k == pytest.approx(ma["crossover_rad_s"], rel=1e-5)
    for m in (ma, mb):
        assert all(m[key] is not None for key in (*KEYS, "iae_load"))
