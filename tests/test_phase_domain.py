"""The numerical domain's limit on ω·τ at a given compensator's crossover
(explorer/evaluation/phase_domain.py, docs/study-file.md "Numerical domain").

Just inside the limit the phase margin agrees with an independent evaluation whose
delay phase is exact: ω·τ is formed from the two floats without rounding (Decimal) and
reduced modulo 2π with π to 110 digits (the series of the Python `decimal` module's
documentation, "Recipes"). Just outside, the study is refused in one line, exit 2.
"""

from __future__ import annotations

import json
import math
from decimal import Decimal, localcontext

import pytest

from explorer.cli import main
from explorer.evaluation.phase_domain import PHASE_REACH_RAD, load_checked_study


def _pi(prec: int) -> Decimal:
    """π to ``prec`` digits (Python decimal documentation, "Recipes")."""
    with localcontext() as ctx:
        ctx.prec = prec + 2
        three = Decimal(3)
        lasts, t, s, n, na, d, da = 0, three, 3, 1, 0, 0, 24
        while s != lasts:
            lasts = s
            n, na = n + na, na + 8
            d, da = d + da, da + 32
            t = (t * n) / d
            s += t
    return +s


def _delay_phase_exact_deg(w: float, tau: float) -> float:
    """−ω·τ modulo 360°, in (−360, 0], from the exact product of the floats ω and τ."""
    with localcontext() as ctx:
        ctx.prec = 120
        x = Decimal(w) * Decimal(tau)  # exact: two 53-bit significands
        two_pi = 2 * _pi(110)
        r = x - two_pi * (x // two_pi)  # in [0, 2π)
        return -float(r * 180 / _pi(110))


def _study(tmp_path, gain: float) -> str:
    # plant K/(s(s+10)) behind 0.01 s; compensator 1: crossover ≈ √K rad/s
    p = tmp_path / f"k{gain:g}.toml"
    p.write_text(f'[plant]\ngain = {gain!r}\npoles = [0, -10]\ndelay = 0.01\n'
                 f'[targets]\nintegrators = 1\n[[compensator]]\nname = "A"\ngain = 1.0\n')
    return str(p)


def test_pi_recipe():
    assert str(_pi(30))[:20] == "3.141592653589793238"  # π, 19 digits, from memory
    assert float(_pi(50)) == math.pi


def test_inside_the_limit_pm_agrees_with_exact_delay_phase(tmp_path, capsys):
    gain, tau = 8.1e19, 0.01  # ωc ≈ 9e9 rad/s, ωc·τ ≈ 9e7 rad: just inside 1e8
    assert main(["check", _study(tmp_path, gain), "--json"]) == 0
    m = json.loads(capsys.readouterr().out)["designs"][0]["metrics"]
    wc = m["crossover_rad_s"]
    assert 0.5 * PHASE_REACH_RAD < wc * tau <= PHASE_REACH_RAD
    # |L(jωc)| = 1: K / (ω·|jω + 10|), evaluated in logs
    assert abs(math.log(gain) - math.log(wc) - 0.5 * math.log(wc * wc + 100.0)) < 1e-12
    phase = -90.0 - math.degrees(math.atan2(wc, 10.0)) + _delay_phase_exact_deg(wc, tau)
    pm = (180.0 + phase + 180.0) % 360.0 - 180.0
    diff = (m["phase_margin_deg"] - pm + 180.0) % 360.0 - 180.0
    # rounding allowed by the domain: ωτ·2⁻⁵² rad = 1.2e-6° here
    assert abs(diff) < 1e-5, (m["phase_margin_deg"], pm)


def test_outside_the_limit_refused_in_one_line(tmp_path, capsys):
    assert main(["check", _study(tmp_path, 1.21e20), "--json"]) == 2  # ωc·τ ≈ 1.1e8 rad
    cap = capsys.readouterr()
    assert cap.out == ""
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1
    assert "`compensator[0]`" in lines[0] and "1e+08 rad" in lines[0]


def test_limit_only_applies_behind_a_delay(tmp_path):
    p = tmp_path / "free.toml"
    p.write_text('[plant]\ngain = 1.21e20\npoles = [0, -10]\n[targets]\nintegrators = 1\n'
                 '[[compensator]]\nname = "A"\ngain = 1.0\n')
    assert load_checked_study(p).compensators[0].name == "A"


@pytest.mark.parametrize("gain", [1e-3, 1.0, 1e6])
def test_ordinary_loops_pass(tmp_path, gain):
    assert load_checked_study(_study(tmp_path, gain)).compensators[0].name == "A"


def _family_study(tmp_path, gain: float, variation: str) -> str:
    p = tmp_path / "fam.toml"
    p.write_text(f'[plant]\ngain = {gain!r}\npoles = [0, -10]\ndelay = 0.01\n'
                 f'[targets]\nintegrators = 1\n[variation]\n{variation}'
                 f'[[compensator]]\nname = "A"\ngain = 1.0\n')
    return str(p)


@pytest.mark.parametrize("variation", [
    "gain = [0.5, 2.0]\n",  # 2·8.1e19: ωc ≈ 1.27e10 rad/s, ωc·τ ≈ 1.27e8 rad
    "delay = [0.005, 0.02]\n",  # ωc ≈ 9e9 rad/s behind 0.02 s: 1.8e8 rad
    "[[variation.member]]\ngain = 8.1e19\npoles = [0, -10]\ndelay = 0.015\n",
])
def test_family_plants_past_the_limit_are_refused(tmp_path, capsys, variation):
    assert main(["check", _family_study(tmp_path, 8.1e19, variation)]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and "`compensator[0]`" in lines[0] and "1e+08 rad" in lines[0]


def test_family_inside_the_limit_passes(tmp_path):
    # ωc ≈ √(8.1e19·1.1) = 9.4e9 rad/s at σ = 1; slower at σ = 1.2
    text = "gain = [0.5, 1.1]\ntime_scale = [1.0, 1.2]\n"
    study = load_checked_study(_family_study(tmp_path, 8.1e19, text))
    assert study.variation is not None


def test_reading_alone_does_not_judge_the_crossover(tmp_path):
    """The file reader (model layer) parses; the ω·τ rule needs the frequency engine and
    is applied by load_checked_study, which every command uses."""
    from explorer.core.errors import StudyFileError
    from explorer.model.study import load_study

    path = _study(tmp_path, 1.21e20)  # ωc·τ ≈ 1.1e8 rad
    assert load_study(path).compensators[0].name == "A"
    with pytest.raises(StudyFileError, match="compensator"):
        load_checked_study(path)
