"""Tests of explorer.model.study: the TOML study-file loader.

What is checked against what:
- polynomial (``num``/``den``) input against ``numpy.roots``, ``scipy.signal.tf2zpk``
  and ``numpy.polyval`` (outside references), and closed-form roots of factored
  polynomials;
- overshoot/settling-time targets against :mod:`explorer.model.specs` and against the
  closed forms ζ = −ln Mp/√(π² + ln² Mp), ωc/ωn = √(√(1+4ζ⁴) − 2ζ²), σ = 4/ts
  (Ogata, *Modern Control Engineering* 5e, Ch. 5/7; Nise, *Control Systems
  Engineering*, Ch. 4/10; chapter numbers from memory), with the recomputed table of
  docs/references.md §1 (10 % and 20 % rows);
- every bad input: a :class:`StudyFileError` whose text is one line that starts with
  the dotted key;
- the example studies in ``studies/``: they load, and every given compensator closes
  a stable loop (closed-loop polynomial roots by numpy for delay-free plants; the
  argument principle on D(jω) + N(jω)·e^(−jωτ) for plants with delay) — computed
  here with numpy only, not with loopscout's own metrics.
"""

from __future__ import annotations

import math
import os
import tomllib
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal

from explorer.core.errors import LoopscoutError, StudyFileError
from explorer.model import specs
from explorer.model.study import (
    LIMIT_KEYS,
    NamedCompensator,
    SearchOptions,
    Study,
    Targets,
    load_study,
    parse_study,
)

STUDIES_DIR = Path(__file__).resolve().parent.parent / "studies"

PLANT = 'gain = 8.0\nzeros = []\npoles = [-0.5, -4, -12]\n'
TARGETS = "crossover = 1.5\nphase_margin = 50\nintegrators = 1\n"


def make(plant: str | None = PLANT, targets: str | None = TARGETS, rest: str = "",
         top: str = "") -> str:
    """A study file's text from its sections (None leaves a section out)."""
    parts = [top]
    if plant is not None:
        parts.append("[plant]\n" + plant)
    if targets is not None:
        parts.append("[targets]\n" + targets)
    parts.append(rest)
    return "\n".join(parts)


def loads(text: str, source: str = "t.toml") -> Study:
    return parse_study(tomllib.loads(text), source=source)


def assert_one_line_error(exc: StudyFileError, key: str, fragment: str = "") -> None:
    text = str(exc)
    assert isinstance(exc, LoopscoutError)
    assert "\n" not in text and "\r" not in text, text
    assert exc.key == key, text
    if key:
        assert text.startswith(f"`{key}` "), text
    assert fragment in text, text
    assert "Traceback" not in text


def refuse(text: str, key: str, fragment: str = "") -> StudyFileError:
    with pytest.raises(StudyFileError) as info:
        loads(text)
    assert_one_line_error(info.value, key, fragment)
    return info.value


# ======================================================================================
# good input
def test_minimal_interface_example_and_defaults(tmp_path):
    path = tmp_path / "conveyor_a.toml"
    path.write_text(make(), encoding="utf-8")
    s = load_study(path)
    assert isinstance(s, Study)
    assert s.name == "conveyor_a"  # no `name`: the file's stem
    assert s.source == os.fspath(path)
    assert s.plant.gain == 8.0
    assert s.plant.zeros == ()
    assert s.plant.poles == (-12 + 0j, -4 + 0j, -0.5 + 0j)
    assert s.plant.delay_s == 0.0
    assert s.targets == Targets(crossover_rad_s=1.5, phase_margin_deg=50.0, integrators=1)
    assert s.limits == {}
    assert s.search == SearchOptions()
    assert s.compensators == ()
    # also through a str path
    assert load_study(os.fspath(path)).plant == s.plant


def test_full_interface_example():
    text = make(
        top='name = "Conveyor speed loop"\n',
        plant=PLANT + "delay = 0.25\n",
        rest=(
            "[limits]\nsensitivity_peak = 1.6\ngain_margin_db = 6\n"
            "[search]\nmax_order = 2\n"
            '[[compensator]]\nname = "A"\ngain = 1.2\nzeros = [-0.5, -4]\npoles = [0, -9.1]\n'
        ),
    )
    s = loads(text)
    assert s.name == "Conveyor speed loop"
    assert s.plant.delay_s == 0.25
    assert s.limits == {"sensitivity_peak": 1.6, "gain_margin_db": 6.0}
    assert s.search.max_order == 2
    (c,) = s.compensators
    assert isinstance(c, NamedCompensator) and c.name == "A"
    assert c.compensator.gain == 1.2
    assert Counter(c.compensator.zeros) == Counter([-0.5 + 0j, -4 + 0j])
    assert Counter(c.compensator.poles) == Counter([0j, -9.1 + 0j])
    assert c.compensator.delay_s == 0.0


def test_study_is_frozen():
    s = loads(make())
    with pytest.raises(AttributeError):
        s.name = "x"  # type: ignore[misc]
    with pytest.raises(AttributeError):
        s.targets.integrators = 2  # type: ignore[misc]


@pytest.mark.parametrize(
    "poles",
    [
        '["-0.3+6j", "-0.3-6j", -2]',
        '["-0.3-6j", -2, "-0.3+6j"]',  # conjugate first, a real root in between
        '[-2, "-0.3-6j", "-0.3+6j"]',
        '["(-0.3+6j)", "-0.3 - 6j", -2]',  # Python complex syntax: parentheses, spaces
        '["-0.3+6J", "-0.3-6J", -2.0]',
    ],
)
def test_complex_roots_any_order(poles):
    s = loads(make(plant=f"gain = 57.744\npoles = {poles}\n"))
    assert Counter(s.plant.poles) == Counter([-0.3 + 6j, -0.3 - 6j, -2 + 0j])


def test_repeated_complex_pairs_and_exact_conjugates():
    s = loads(make(plant='gain = 1\nzeros = ["-1+2j", "-1-2j"]\n'
                        'poles = ["-1+2j", "-1-2j", "-1-2j", "-1+2j", -3]\n'))
    assert Counter(s.plant.poles) == Counter([-1 + 2j, -1 + 2j, -1 - 2j, -1 - 2j, -3 + 0j])
    # every complex root has its exact conjugate (real-coefficient polynomial)
    assert Counter(s.plant.poles) == Counter(p.conjugate() for p in s.plant.poles)


def test_real_roots_written_as_strings_or_with_zero_imaginary_part():
    # Python's complex syntax also reads a real number; "+0j" is real too.
    s = loads(make(plant='gain = 1\npoles = ["-2", "-3+0j", -4]\n'))
    assert s.plant.poles == (-4 + 0j, -3 + 0j, -2 + 0j)
    assert all(p.imag == 0.0 for p in s.plant.poles)


def test_integers_accepted_where_numbers_are_expected():
    s = loads(make(plant="gain = 8\npoles = [-1, -2]\ndelay = 2\n",
                   targets="crossover = 2\nphase_margin = 45\nintegrators = 0\n"))
    assert s.plant.gain == 8.0 and isinstance(s.plant.gain, float)
    assert s.plant.delay_s == 2.0
    assert s.targets.crossover_rad_s == 2.0 and s.targets.phase_margin_deg == 45.0
    assert s.targets.integrators == 0


def test_negative_gain_and_rhp_roots_accepted():
    # an inverse-response (right-half-plane zero) plant is written with a negative gain
    s = loads(make(plant="gain = -1.0\nzeros = [0.25]\npoles = [0, -0.5]\n"))
    assert s.plant.gain == -1.0 and s.plant.zeros == (0.25 + 0j,)
    s = loads(make(plant="gain = 2400\npoles = [3, -3, -40]\n"))
    assert 3 + 0j in s.plant.poles


def test_biproper_compensator_accepted():
    s = loads(make(rest="[[compensator]]\ngain = 2\nzeros = [-1]\npoles = [-10]\n"))
    assert s.compensators[0].compensator.hf_gain() == 2.0
    assert s.compensators[0].name == "C1"  # default name


def test_default_compensator_names():
    s = loads(make(rest='[[compensator]]\ngain = 1\n[[compensator]]\ngain = 2\n'
                        '[[compensator]]\nname = "lag"\ngain = 3\n'))
    assert [c.name for c in s.compensators] == ["C1", "C2", "lag"]


# -- num/den --------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("num", "den"),
    [
        ([0.05], [0.375, 2.375, 3.75, 1.0]),
        ([2.0, 3.0], [1.0, 0.6, 36.09, 0.0]),
        ([0.0, 0.0, 1.0, -0.25], [0.0, 2.0, 1.0, 0.0]),  # leading zeros are dropped
        ([1.5, -2.0, 4.0], [1.0, 4.0, 9.0, 10.0, 3.0]),
        ([-3.0], [1.0, 3.0, 3.0, 1.0]),  # a triple pole: numerically fragile roots
    ],
)
def test_num_den_against_numpy_and_scipy(num, den):
    s = loads(make(plant=f"num = {num}\nden = {den}\n"))
    p = s.plant
    # outside reference 1: numpy.roots
    np.testing.assert_allclose(np.sort_complex(np.array(p.zeros)),
                               np.sort_complex(np.roots(np.trim_zeros(num, "f"))), atol=1e-9)
    np.testing.assert_allclose(np.sort_complex(np.array(p.poles)),
                               np.sort_complex(np.roots(np.trim_zeros(den, "f"))), atol=1e-9)
    # outside reference 2: scipy.signal.tf2zpk (zeros, poles, gain)
    z, pl, k = signal.tf2zpk(np.trim_zeros(num, "f"), np.trim_zeros(den, "f"))
    assert p.gain == pytest.approx(k, rel=1e-12)
    assert len(p.zeros) == len(z) and len(p.poles) == len(pl)
    # outside reference 3: the frequency response equals num(jω)/den(jω)
    w = np.logspace(-2, 2, 41)
    expected = np.polyval(num, 1j * w) / np.polyval(den, 1j * w)
    np.testing.assert_allclose(p.freqresp(w), expected, rtol=1e-7)
    # a valid real-coefficient root set
    assert Counter(np.round(p.poles, 9)) == Counter(np.round(np.conj(p.poles), 9))


def test_num_den_closed_form_roots():
    # (3s + 1)(0.5s + 1)(0.25s + 1) = 0.375 s³ + 2.375 s² + 3.75 s + 1: poles −1/3, −2, −4
    s = loads(make(plant="num = [0.05]\nden = [0.375, 2.375, 3.75, 1.0]\ndelay = 0.5\n"))
    np.testing.assert_allclose(np.sort(np.real(s.plant.poles)), [-4.0, -2.0, -1 / 3], rtol=1e-12)
    assert all(p.imag == 0.0 for p in s.plant.poles)
    assert s.plant.gain == pytest.approx(0.05 / 0.375, rel=1e-15)
    assert s.plant.dc_gain() == pytest.approx(0.05, rel=1e-12)
    assert s.plant.delay_s == 0.5
    # s² + 0.6 s + 36.09 = (s + 0.3)² + 36: poles −0.3 ± 6j, exactly conjugate
    s = loads(make(plant="num = [1]\nden = [1, 0.6, 36.09]\n"))
    assert s.plant.poles[0] == s.plant.poles[1].conjugate()
    np.testing.assert_allclose(sorted(s.plant.poles, key=lambda r: r.imag),
                               [-0.3 - 6j, -0.3 + 6j], rtol=1e-12)


def test_num_den_compensator():
    s = loads(make(rest="[[compensator]]\nnum = [150.911, 352.1257, 100.6073]\nden = [1, 6, 0]\n"))
    c = s.compensators[0].compensator
    np.testing.assert_allclose(sorted(np.real(c.poles)), [-6.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(sorted(np.real(c.zeros)),
                               sorted(np.real(np.roots([150.911, 352.1257, 100.6073]))),
                               rtol=1e-12)
    assert c.n_integrators == 1


# -- requirement targets ---------------------------------------------------------------
def _zeta_closed_form(os_pct: float) -> float:
    # Ogata 5e Ch. 5 / Nise Ch. 4 (from memory): ζ = −ln Mp / √(π² + ln² Mp)
    ln_mp = math.log(os_pct / 100.0)
    return -ln_mp / math.sqrt(math.pi**2 + ln_mp**2)


def _ratio_closed_form(zeta: float) -> float:
    # standard loop ωn²/(s(s+2ζωn)): ωc/ωn = √(√(1+4ζ⁴) − 2ζ²) (Ogata Ch. 7, Nise Ch. 10)
    return math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)


def test_overshoot_and_settling_time_targets():
    s = loads(make(targets="overshoot = 10\nsettling_time = 6\nintegrators = 1\n"))
    t = s.targets
    conv = specs.targets_from_requirements(10.0, 6.0)
    assert t.crossover_rad_s == conv.crossover_rad_s
    assert t.phase_margin_deg == conv.phase_margin_deg
    assert t.derived_from == conv.explanation and len(t.derived_from) >= 3
    # closed forms, and the recomputed 10 % row of docs/references.md §1
    zeta = _zeta_closed_form(10.0)
    assert zeta == pytest.approx(0.5912, abs=6e-5)
    pm = math.degrees(math.atan(2 * zeta / _ratio_closed_form(zeta)))
    assert t.phase_margin_deg == pytest.approx(pm, rel=1e-12)
    assert t.phase_margin_deg == pytest.approx(58.59, abs=6e-3)
    sigma = 4.0 / 6.0  # ts ≈ 4/σ, 2 % band (Ogata Ch. 5; common practice)
    assert t.crossover_rad_s == pytest.approx(sigma / zeta * _ratio_closed_form(zeta), rel=1e-12)
    assert t.crossover_rad_s == pytest.approx(sigma / 0.5912 * 0.7219, rel=3e-4)


def test_five_percent_band_and_mcircle_rule():
    s = loads(make(targets='overshoot = 20\nsettling_time = 3\nsettling_band = 0.05\n'
                          'pm_rule = "m-circle"\nintegrators = 2\n'))
    t = s.targets
    zeta = _zeta_closed_form(20.0)
    mr = 1 / (2 * zeta * math.sqrt(1 - zeta**2))  # Ogata Ch. 7 (from memory)
    pm = math.degrees(2 * math.asin(1 / (2 * mr)))  # S&P 2e §2.4 (from memory)
    assert t.phase_margin_deg == pytest.approx(pm, rel=1e-12)
    assert t.phase_margin_deg == pytest.approx(47.88, abs=6e-3)  # docs/references.md §1
    sigma = 3.0 / 3.0  # ts ≈ 3/σ for the 5 % band
    assert t.crossover_rad_s == pytest.approx(sigma / zeta * _ratio_closed_form(zeta), rel=1e-12)
    assert t.integrators == 2


def test_overshoot_without_settling_keeps_crossover_as_given():
    t = loads(make(targets="overshoot = 15\nintegrators = 1\n")).targets
    assert t.crossover_rad_s is None
    assert t.phase_margin_deg == pytest.approx(
        math.degrees(math.atan(2 * _zeta_closed_form(15) / _ratio_closed_form(
            _zeta_closed_form(15)))), rel=1e-12)
    t = loads(make(targets="overshoot = 15\ncrossover = [0.04, 0.1]\nintegrators = 1\n")).targets
    assert t.crossover_rad_s == (0.04, 0.1)
    t = loads(make(targets="overshoot = 0\ncrossover = 2\nintegrators = 1\n")).targets
    assert t.crossover_rad_s == 2.0
    assert t.phase_margin_deg == pytest.approx(76.345, abs=1e-3)  # ζ = 1: test_specs value


def test_crossover_range_and_absent():
    t = loads(make(targets="crossover = [0.5, 3]\nphase_margin = 45\nintegrators = 1\n")).targets
    assert t.crossover_rad_s == (0.5, 3.0)
    t = loads(make(targets="phase_margin = 45\nintegrators = 1\n")).targets
    assert t.crossover_rad_s is None and t.phase_margin_deg == 45.0
    t = loads(make(targets="integrators = 1\n", rest="[limits]\nphase_margin_deg = 40\n"))
    assert t.targets.crossover_rad_s is None and t.targets.phase_margin_deg is None
    assert t.limits == {"phase_margin_deg": 40.0}


# -- limits and search ---------------------------------------------------------------------
# docs/interface.md: the METRICS keys a [limits] table may name
INTERFACE_LIMITS = {
    "sensitivity_peak", "gain_margin_db", "phase_margin_deg", "delay_margin_s",
    "complementary_peak", "hf_gain", "overshoot_pct", "settling_time_s",
}


def test_limit_keys_cover_the_interface_and_bound_kinds():
    assert INTERFACE_LIMITS <= set(LIMIT_KEYS)
    # docs/interface.md: margins are lower bounds; peaks, gains, overshoot and times upper
    for key, kind in LIMIT_KEYS.items():
        assert kind == ("lower" if "margin" in key else "upper"), key


def test_every_limit_key_accepted():
    values = {k: (1.5 if k in ("sensitivity_peak", "complementary_peak") else 2.0)
              for k in LIMIT_KEYS}
    body = "".join(f"{k} = {v}\n" for k, v in values.items())
    s = loads(make(rest="[limits]\n" + body))
    assert s.limits == values


def test_search_keys():
    s = loads(make(rest="[search]\nmax_order = 4\ntrials = 50\nseed = 7\n"
                        "cancel_lightly_damped = true\n"))
    assert s.search == SearchOptions(max_order=4, trials=50, seed=7, cancel_lightly_damped=True)
    for order in (0, 6):
        assert loads(make(rest=f"[search]\nmax_order = {order}\n")).search.max_order == order


# ======================================================================================
# bad input: every case must name its key in one line
BAD_CASES = [
    # (id, text, key, fragment)
    ("missing plant", make(plant=None), "plant", "is required"),
    ("missing targets", make(targets=None), "targets", "is required"),
    ("missing integrators", make(targets="crossover = 1\n"), "targets.integrators",
     "is required"),
    ("unknown top key", make(top="plnat = 1\n"), "plnat", "did you mean `plant`?"),
    ("unknown plant key", make(plant=PLANT + "dealy = 2\n"), "plant.dealy",
     "did you mean `delay`?"),
    ("unknown target key", make(targets=TARGETS + "phase_margn = 3\n"), "targets.phase_margn",
     "did you mean `phase_margin`?"),
    ("unknown limit key", make(rest="[limits]\nsensitivity_pk = 1.5\n"),
     "limits.sensitivity_pk", "did you mean `sensitivity_peak`?"),
    ("limit not a metric", make(rest="[limits]\nbandwidth = 3\n"), "limits.bandwidth",
     "is not a known key in [limits]"),
    ("unknown search key", make(rest="[search]\nmax_ordre = 2\n"), "search.max_ordre",
     "did you mean `max_order`?"),
    ("compensator delay", make(rest="[[compensator]]\ngain = 1\ndelay = 1\n"),
     "compensator[0].delay", "is not a known key"),
    ("unknown key no hint", make(top="colour = 1\n"), "colour", "is not a known key"),
    ("key with newline", make(top='"ta\\nrgets" = 1\n'), '"ta\\nrgets"', "not a known key"),
    ("key with dot", make(plant=PLANT + '"po.les" = 1\n'), 'plant."po.les"', "not a known key"),
    # complex roots
    ("lone complex root", make(plant='gain = 1\npoles = [-1, "-2+3j"]\n'), "plant.poles[1]",
     "needs its conjugate -2-3j"),
    ("lone conjugate", make(plant='gain = 1\nzeros = ["-2-3j"]\npoles = [-1, -2, -3]\n'),
     "plant.zeros[0]", "needs its conjugate -2+3j"),
    ("wrong conjugate", make(plant='gain = 1\npoles = ["-2+3j", "-2-3.1j"]\n'),
     "plant.poles[0]", "needs its conjugate"),
    ("unpaired multiplicity", make(plant='gain = 1\npoles = ["-2+3j", "-2+3j", "-2-3j"]\n'),
     "plant.poles", "conjugate pairs"),
    ("i for j", make(plant='gain = 1\npoles = ["-2+3i", "-2-3i"]\n'), "plant.poles[0]",
     "is not a root"),
    ("j first", make(plant='gain = 1\npoles = ["-2+j3", "-2-j3"]\n'), "plant.poles[0]",
     "is not a root"),
    ("imag first", make(plant='gain = 1\npoles = ["3j-2", "-3j-2"]\n'), "plant.poles[0]",
     "is not a root"),
    ("times j", make(plant='gain = 1\npoles = ["-2+3*j", "-2-3*j"]\n'), "plant.poles[0]",
     "is not a root"),
    ("unicode minus", make(plant='gain = 1\npoles = ["\u22122+3j", "-2-3j"]\n'),
     "plant.poles[0]", "is not a root"),
    ("pair as list", make(plant="gain = 1\npoles = [[-2, 3], [-2, -3]]\n"), "plant.poles[0]",
     'complex string like "-2+3j"'),
    ("pair as table", make(plant="gain = 1\npoles = [{re = -2, im = 3}]\n"), "plant.poles[0]",
     "got a table"),
    ("empty root string", make(plant='gain = 1\npoles = [""]\n'), "plant.poles[0]",
     "is not a root"),
    # proper / improper
    ("improper plant", make(plant="gain = 1\nzeros = [-1, -2]\npoles = [-3]\n"),
     "plant.zeros", "improper plant: 2 zeros but 1 pole"),
    ("improper plant num/den", make(plant="num = [1, 2, 3]\nden = [1, 1]\n"), "plant.num",
     "improper plant"),
    ("improper compensator",
     make(rest="[[compensator]]\ngain = 1\nzeros = [-1, -2]\npoles = [0]\n"),
     "compensator[0].zeros", "high-frequency gain would be infinite"),
    ("improper PID no filter",
     make(rest='[[compensator]]\nname = "ok"\ngain = 1\n'
               '[[compensator]]\ngain = 2\nzeros = [-1, -2]\npoles = [0]\n'),
     "compensator[1].zeros", "improper compensator"),
    ("improper compensator num/den", make(rest="[[compensator]]\nnum = [1, 2, 1]\nden = [1, 0]\n"),
     "compensator[0].num", "improper compensator"),
    # non-finite numbers
    ("nan gain", make(plant="gain = nan\npoles = [-1]\n"), "plant.gain", "must be finite, got nan"),
    ("inf gain", make(plant="gain = inf\npoles = [-1]\n"), "plant.gain", "must be finite, got inf"),
    ("nan root", make(plant="gain = 1\npoles = [nan]\n"), "plant.poles[0]", "must be finite"),
    ("-inf root", make(plant="gain = 1\npoles = [-1, -inf]\n"), "plant.poles[1]",
     "must be finite, got -inf"),
    ("nan in complex string", make(plant='gain = 1\npoles = ["nan+1j", "nan-1j"]\n'),
     "plant.poles[0]", "must be finite"),
    ("inf in complex string", make(plant='gain = 1\npoles = ["-1+infj", "-1-infj"]\n'),
     "plant.poles[0]", "must be finite"),
    ("nan delay", make(plant=PLANT + "delay = nan\n"), "plant.delay", "must be finite"),
    ("inf delay", make(plant=PLANT + "delay = inf\n"), "plant.delay", "must be finite"),
    ("nan coefficient", make(plant="num = [1]\nden = [1, nan]\n"), "plant.den[1]",
     "must be finite"),
    ("nan crossover", make(targets="crossover = nan\nintegrators = 1\n"), "targets.crossover",
     "must be finite"),
    ("inf range end", make(targets="crossover = [1, inf]\nintegrators = 1\n"),
     "targets.crossover[1]", "must be finite"),
    ("nan phase margin", make(targets="phase_margin = nan\nintegrators = 1\n"),
     "targets.phase_margin", "must be finite"),
    ("nan limit", make(rest="[limits]\nsensitivity_peak = nan\n"), "limits.sensitivity_peak",
     "must be finite"),
    ("nan overshoot", make(targets="overshoot = nan\nintegrators = 1\n"), "targets.overshoot",
     "must be finite"),
    # delay
    ("negative delay", make(plant=PLANT + "delay = -0.1\n"), "plant.delay",
     "must be ≥ 0 s, got -0.1"),
    ("delay as string", make(plant=PLANT + 'delay = "6 s"\n'), "plant.delay",
     "must be a number, got '6 s'"),
    # non-numeric values and booleans
    ("gain string", make(plant='gain = "eight"\npoles = [-1]\n'), "plant.gain",
     "must be a number, got 'eight'"),
    ("gain bool", make(plant="gain = true\npoles = [-1]\n"), "plant.gain",
     "must be a number, got true"),
    ("gain datetime", make(plant="gain = 1979-05-27\npoles = [-1]\n"), "plant.gain",
     "must be a number"),
    ("gain zero", make(plant="gain = 0\npoles = [-1]\n"), "plant.gain", "must not be 0"),
    ("compensator gain zero", make(rest="[[compensator]]\ngain = 0.0\n"),
     "compensator[0].gain", "must not be 0"),
    ("root bool", make(plant="gain = 1\npoles = [-1, false]\n"), "plant.poles[1]", "got false"),
    ("coefficient string", make(plant='num = ["1"]\nden = [1, 1]\n'), "plant.num[0]",
     "must be a number"),
    ("coefficient bool", make(plant="num = [1]\nden = [true, 1]\n"), "plant.den[0]",
     "must be a number, got true"),
    ("integrators bool", make(targets="integrators = true\n"), "targets.integrators",
     "must be a non-negative integer, got true"),
    ("integrators float", make(targets="integrators = 1.0\n"), "targets.integrators",
     "must be a non-negative integer, got 1.0"),
    ("integrators negative", make(targets="integrators = -1\n"), "targets.integrators",
     "must be a non-negative integer, got -1"),
    ("integrators string", make(targets='integrators = "one"\n'), "targets.integrators",
     "got 'one'"),
    ("phase margin bool", make(targets="phase_margin = true\nintegrators = 1\n"),
     "targets.phase_margin", "must be a number, got true"),
    ("crossover bool", make(targets="crossover = true\nintegrators = 1\n"), "targets.crossover",
     "got true"),
    ("limit bool", make(rest="[limits]\ngain_margin_db = true\n"), "limits.gain_margin_db",
     "must be a number, got true"),
    ("limit string", make(rest='[limits]\ngain_margin_db = "6 dB"\n'), "limits.gain_margin_db",
     "must be a number"),
    # ranges
    ("phase margin 0", make(targets="phase_margin = 0\nintegrators = 1\n"),
     "targets.phase_margin", "must be in (0, 90) deg, got 0"),
    ("phase margin 90", make(targets="phase_margin = 90\nintegrators = 1\n"),
     "targets.phase_margin", "must be in (0, 90) deg, got 90"),
    ("phase margin 120", make(targets="phase_margin = 120\nintegrators = 1\n"),
     "targets.phase_margin", "must be in (0, 90) deg, got 120"),
    ("phase margin negative", make(targets="phase_margin = -10\nintegrators = 1\n"),
     "targets.phase_margin", "got -10"),
    ("crossover zero", make(targets="crossover = 0\nintegrators = 1\n"), "targets.crossover",
     "must be > 0 rad/s, got 0"),
    ("crossover negative", make(targets="crossover = -1.5\nintegrators = 1\n"),
     "targets.crossover", "must be > 0 rad/s"),
    ("crossover string", make(targets='crossover = "fast"\nintegrators = 1\n'),
     "targets.crossover", "must be a number or a [low, high] range"),
    ("crossover reversed", make(targets="crossover = [3, 1]\nintegrators = 1\n"),
     "targets.crossover", "range must have low < high, got [3, 1]"),
    ("crossover empty range", make(targets="crossover = [2, 2]\nintegrators = 1\n"),
     "targets.crossover", "low < high"),
    ("crossover three values", make(targets="crossover = [1, 2, 3]\nintegrators = 1\n"),
     "targets.crossover", "range must be [low, high], got 3 values"),
    ("crossover one value", make(targets="crossover = [1]\nintegrators = 1\n"),
     "targets.crossover", "range must be [low, high], got 1 value"),
    ("crossover range negative", make(targets="crossover = [-1, 2]\nintegrators = 1\n"),
     "targets.crossover[0]", "must be > 0 rad/s"),
    ("crossover range string", make(targets='crossover = [1, "2"]\nintegrators = 1\n'),
     "targets.crossover[1]", "must be a number"),
    ("max order 7", make(rest="[search]\nmax_order = 7\n"), "search.max_order",
     "must be at most 6, got 7"),
    ("max order -1", make(rest="[search]\nmax_order = -1\n"), "search.max_order",
     "non-negative integer"),
    ("max order float", make(rest="[search]\nmax_order = 2.5\n"), "search.max_order",
     "got 2.5"),
    ("max order bool", make(rest="[search]\nmax_order = true\n"), "search.max_order", "got true"),
    ("trials zero", make(rest="[search]\ntrials = 0\n"), "search.trials", "≥ 1, got 0"),
    ("seed negative", make(rest="[search]\nseed = -3\n"), "search.seed", "got -3"),
    ("cancel not bool", make(rest='[search]\ncancel_lightly_damped = "yes"\n'),
     "search.cancel_lightly_damped", "must be true or false"),
    ("sensitivity peak below 1", make(rest="[limits]\nsensitivity_peak = 0.9\n"),
     "limits.sensitivity_peak", "must be ≥ 1, got 0.9"),
    ("gain margin negative", make(rest="[limits]\ngain_margin_db = -3\n"),
     "limits.gain_margin_db", "must be ≥ 0 dB"),
    ("phase margin limit 180", make(rest="[limits]\nphase_margin_deg = 180\n"),
     "limits.phase_margin_deg", "must be in [0, 180) deg"),
    ("settling limit zero", make(rest="[limits]\nsettling_time_s = 0\n"),
     "limits.settling_time_s", "must be > 0 s"),
    # wrong types for tables and lists
    ("plant not a table", make(plant=None, top="plant = 5\n"), "plant",
     "must be a [plant] table, got 5"),
    ("targets a list", make(targets=None, top="targets = [1, 2]\n"), "targets",
     "must be a [targets] table, got a list"),
    ("limits a string", make(top='limits = "tight"\n'), "limits", "must be a [limits] table"),
    ("search a number", make(top="search = 3\n"), "search", "must be a [search] table"),
    ("single compensator table", make(rest="[compensator]\ngain = 1\n"), "compensator",
     "must be written as [[compensator]] tables"),
    ("compensator list of numbers", make(top="compensator = [1, 2]\n"), "compensator[0]",
     "must be a table, got 1"),
    ("poles not a list", make(plant="gain = 1\npoles = -1\n"), "plant.poles",
     "must be a list of roots, got -1"),
    ("zeros a string", make(plant='gain = 1\nzeros = "-1"\npoles = [-2]\n'), "plant.zeros",
     "must be a list of roots"),
    ("num not a list", make(plant="num = 1\nden = [1, 1]\n"), "plant.num",
     "must be a list of coefficients"),
    ("den a table", make(plant="num = [1]\nden = {a = 1}\n"), "plant.den", "got a table"),
    # forms
    ("no gain", make(plant="poles = [-1]\n"), "plant.gain", "is required"),
    ("both forms", make(plant="gain = 1\nnum = [1]\nden = [1, 1]\n"), "plant.num",
     "cannot be combined with `plant.gain`"),
    ("num without den", make(plant="num = [1]\n"), "plant.den", "is required with `plant.num`"),
    ("den without num", make(plant="den = [1, 1]\n"), "plant.num", "is required with"),
    ("zero polynomial", make(plant="num = [1]\nden = [0, 0]\n"), "plant.den",
     "must have a nonzero coefficient"),
    ("empty polynomial", make(plant="num = []\nden = [1, 1]\n"), "plant.num",
     "must have a nonzero coefficient"),
    # requirement targets
    ("overshoot and phase margin",
     make(targets="overshoot = 10\nphase_margin = 50\nintegrators = 1\n"), "targets.overshoot",
     "ambiguous"),
    ("settling and crossover",
     make(targets="overshoot = 10\nsettling_time = 5\ncrossover = 1\nintegrators = 1\n"),
     "targets.settling_time", "ambiguous"),
    ("settling without overshoot", make(targets="settling_time = 5\nintegrators = 1\n"),
     "targets.settling_time", "only used with `targets.overshoot`"),
    ("rule without overshoot", make(targets='pm_rule = "exact"\nintegrators = 1\n'),
     "targets.pm_rule", "only used with"),
    ("band without settling", make(targets="overshoot = 10\nsettling_band = 0.05\n"
                                            "integrators = 1\n"),
     "targets.settling_band", "only used with `targets.settling_time`"),
    ("band in percent", make(targets="overshoot = 10\nsettling_time = 4\nsettling_band = 2\n"
                                     "integrators = 1\n"),
     "targets.settling_band", "must be 0.02 or 0.05"),
    ("unknown rule", make(targets='overshoot = 10\npm_rule = "rough"\nintegrators = 1\n'),
     "targets.pm_rule", "must be one of 'exact', 'm-circle'"),
    ("overshoot 100", make(targets="overshoot = 100\nintegrators = 1\n"), "targets.overshoot",
     "must be in [0, 100) %"),
    ("overshoot negative", make(targets="overshoot = -5\nintegrators = 1\n"),
     "targets.overshoot", "got -5"),
    ("settling zero", make(targets="overshoot = 10\nsettling_time = 0\nintegrators = 1\n"),
     "targets.settling_time", "must be > 0 s"),
    # names
    ("name not a string", make(top="name = 3\n"), "name", "must be a string, got 3"),
    ("name two lines", make(top='name = """a\nb"""\n'), "name", "single line"),
    ("compensator name empty", make(rest='[[compensator]]\nname = " "\ngain = 1\n'),
     "compensator[0].name", "must not be empty"),
    ("duplicate compensator names",
     make(rest='[[compensator]]\nname = "A"\ngain = 1\n[[compensator]]\nname = "A"\ngain = 2\n'),
     "compensator[1].name", "repeats the name 'A' of compensator[0]"),
]


@pytest.mark.parametrize(("text", "key", "fragment"), [c[1:] for c in BAD_CASES],
                         ids=[c[0] for c in BAD_CASES])
def test_bad_input_names_the_key_in_one_line(text, key, fragment):
    refuse(text, key, fragment)


def test_bad_case_ids_unique():
    ids = [c[0] for c in BAD_CASES]
    assert len(ids) == len(set(ids))


def test_python_values_beyond_toml():
    # parse_study is public: a dict from elsewhere may hold values TOML cannot.
    base = tomllib.loads(make())
    for value, key in ((10**400, "plant.gain"), (float("nan"), "plant.gain")):
        data = {**base, "plant": {**base["plant"], "gain": value}}
        with pytest.raises(StudyFileError) as info:
            parse_study(data)
        assert_one_line_error(info.value, key, "must be finite")
    data = {**base, "plant": {**base["plant"], "poles": [-(10**400)]}}
    with pytest.raises(StudyFileError) as info:
        parse_study(data)
    assert_one_line_error(info.value, "plant.poles[0]", "must be finite")
    with pytest.raises(StudyFileError) as info:
        parse_study([1, 2])  # type: ignore[arg-type]
    assert_one_line_error(info.value, "", "must be a table")


# -- unreadable files ------------------------------------------------------------------
def _refuse_file(path: os.PathLike[str] | str, fragment: str) -> StudyFileError:
    with pytest.raises(StudyFileError) as info:
        load_study(path)
    assert_one_line_error(info.value, "", fragment)
    return info.value


def test_missing_file(tmp_path):
    e = _refuse_file(tmp_path / "nope.toml", "No such file")
    assert "nope.toml" in str(e)


def test_directory(tmp_path):
    _refuse_file(tmp_path, "is a directory")


def test_bad_toml_syntax(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text("[plant]\ngain = = 3\n", encoding="utf-8")
    e = _refuse_file(path, "TOML syntax error")
    assert "bad.toml" in str(e) and "line 2" in str(e)


def test_duplicate_toml_key(tmp_path):
    path = tmp_path / "dup.toml"
    path.write_text(make(plant=PLANT + "gain = 2\n"), encoding="utf-8")
    _refuse_file(path, "TOML syntax error")


def test_not_utf8(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(make(top='name = "Ofen\xe4"\n').encode("latin-1"))
    e = _refuse_file(path, "not UTF-8")
    assert "latin1.toml" in str(e)


def test_binary_garbage(tmp_path):
    path = tmp_path / "garbage.toml"
    path.write_bytes(bytes(range(256)))
    _refuse_file(path, "garbage.toml")


def test_nul_in_path():
    _refuse_file("stud\x00y.toml", "cannot read study file")


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="permission bits do not stop root (or non-POSIX)")
def test_unreadable_permissions(tmp_path):
    path = tmp_path / "locked.toml"
    path.write_text(make(), encoding="utf-8")
    path.chmod(0)
    try:
        _refuse_file(path, "Permission denied")
    finally:
        path.chmod(0o600)


# ======================================================================================
# property: valid roots-form plants round-trip through the TOML text
# inside the numerical domain (docs/study-file.md): 0 or a modulus within a span of 1e8
_real = st.just(0.0) | st.floats(min_value=1e-3, max_value=1e4).flatmap(
    lambda m: st.sampled_from([m, -m]))
_pair = st.tuples(st.floats(min_value=-1e3, max_value=1e3, allow_nan=False),
                  st.floats(min_value=1e-3, max_value=1e3, allow_nan=False))


def _root_items(reals: list[float], pairs: list[tuple[float, float]]) -> list[tuple[str, complex]]:
    items = [(repr(r), complex(r, 0.0)) for r in reals]
    for re, im in pairs:
        items.append((f'"{re!r}+{im!r}j"', complex(re, im)))
        items.append((f'"{re!r}-{im!r}j"', complex(re, -im)))
    return items


@st.composite
def _plants(draw):
    pole_reals = draw(st.lists(_real, max_size=5))
    pole_pairs = draw(st.lists(_pair, max_size=3))
    n_poles = len(pole_reals) + 2 * len(pole_pairs)
    zero_pairs = draw(st.lists(_pair, max_size=n_poles // 2))
    zero_reals = draw(st.lists(_real, max_size=n_poles - 2 * len(zero_pairs)))
    poles = draw(st.permutations(_root_items(pole_reals, pole_pairs)))
    zeros = draw(st.permutations(_root_items(zero_reals, zero_pairs)))
    gain = draw(st.floats(min_value=1e-6, max_value=1e6) | st.floats(min_value=-1e6,
                                                                      max_value=-1e-6))
    delay = draw(st.just(0.0) | st.floats(min_value=0.1, max_value=100.0))
    return gain, zeros, poles, delay


@settings(max_examples=150, deadline=None)
@given(_plants())
def test_roots_form_round_trip(plant):
    gain, zeros, poles, delay = plant
    text = make(plant=(f"gain = {gain!r}\nzeros = [{', '.join(t for t, _ in zeros)}]\n"
                       f"poles = [{', '.join(t for t, _ in poles)}]\ndelay = {delay!r}\n"))
    p = loads(text).plant
    assert p.gain == gain and p.delay_s == delay
    assert Counter(p.zeros) == Counter(v for _, v in zeros)
    assert Counter(p.poles) == Counter(v for _, v in poles)
    assert p.is_proper


@settings(max_examples=100, deadline=None)
@given(_plants(), st.data())
def test_dropping_a_conjugate_is_refused(plant, data):
    gain, zeros, poles, delay = plant
    complex_idx = [i for i, (_, v) in enumerate(poles) if v.imag != 0]
    if not complex_idx:
        poles = [*poles, ('"-1+2j"', -1 + 2j)]
        complex_idx = [len(poles) - 1]
    else:
        drop = data.draw(st.sampled_from(complex_idx))
        poles = [x for i, x in enumerate(poles) if i != drop]
    # keep the plant proper so that only the conjugate is wrong
    zeros = [z for z in zeros if z[1].imag == 0][: max(0, len(poles) - 1)]
    text = make(plant=(f"gain = {gain!r}\nzeros = [{', '.join(t for t, _ in zeros)}]\n"
                       f"poles = [{', '.join(t for t, _ in poles)}]\n"))
    with pytest.raises(StudyFileError) as info:
        loads(text)
    assert info.value.key.startswith("plant.poles")
    assert "\n" not in str(info.value)


# ======================================================================================
# the example studies
STUDY_FILES = sorted(STUDIES_DIR.glob("*.toml"))


def test_there_are_example_studies():
    names = {p.name for p in STUDY_FILES}
    assert {"kiln_damper.toml", "dome_drive.toml", "conveyor_speed.toml"} <= names
    assert len(names) >= 4


def _closed_loop_rhp_count(num: np.ndarray, den: np.ndarray, delay_s: float) -> int:
    """Right-half-plane zeros of D(s) + N(s)·exp(−s·τ), deg N < deg D (independent check).

    Delay-free: numpy roots of the closed-loop polynomial. With delay: the argument
    principle on the imaginary axis, Z = (n − 2·Δarg F(jω)|₀^∞ / π)/2, valid because
    F ~ D on the large right half-circle.
    """
    if delay_s == 0.0:
        return int(np.sum(np.roots(np.polyadd(den, num)).real >= 0.0))
    n = len(den) - 1
    scale = max(1.0, float(np.max(np.abs(np.roots(den)))) if n else 1.0)
    w_lin = np.linspace(0.0, 40.0 / delay_s, 400_001)
    w_log = np.logspace(np.log10(40.0 / delay_s), np.log10(1e6 * scale), 20_001)[1:]
    w = np.concatenate([w_lin, w_log])
    d_val, n_val = np.polyval(den, 1j * w), np.polyval(num, 1j * w)
    # on the coarse log part |N| < |D|/2, so exp(−jωτ) cannot make F wind there
    assert np.all(np.abs(n_val[w_lin.size:]) < 0.5 * np.abs(d_val[w_lin.size:]))
    f = d_val + n_val * np.exp(-1j * w * delay_s)
    assert np.min(np.abs(f)) > 0.0
    darg = np.unwrap(np.angle(f))
    z = (n - 2.0 * (darg[-1] - darg[0]) / np.pi) / 2.0
    assert abs(z - round(z)) < 0.05, z  # the grid resolved the winding
    return int(round(z))


def _poly(gain: float, roots: tuple[complex, ...]) -> np.ndarray:
    return np.real(gain * np.poly(np.array(roots, dtype=complex))) if roots else np.array([gain])


def test_closed_loop_check_itself():
    # SIMC tuning, τc = θ on k·e^(−θs)/(τs+1) with τI = τ gives L = e^(−s)/(2s): stable,
    # GM = π (Skogestad 2003, J. Process Control 13; docs/references.md §3, recomputed).
    # Gains of π/2 (at the limit) ± a little: stable below, unstable above.
    assert _closed_loop_rhp_count(np.array([0.5]), np.array([1.0, 0.0]), 1.0) == 0
    assert _closed_loop_rhp_count(np.array([0.99 * math.pi / 2]), np.array([1.0, 0.0]), 1.0) == 0
    assert _closed_loop_rhp_count(np.array([1.01 * math.pi / 2]), np.array([1.0, 0.0]), 1.0) == 2
    # 4/((s − 1)(s + 5)) with a small delay: 1 + L has a right-half-plane zero
    assert _closed_loop_rhp_count(np.array([4.0]), np.poly([1.0, -5.0]), 0.05) == 1
    # A&M-style 3/(s+1)³: GM 8/3 (docs/references.md §5 F): gain 8 is the limit
    assert _closed_loop_rhp_count(np.array([7.9]), np.poly([-1, -1, -1]), 0.0) == 0
    assert _closed_loop_rhp_count(np.array([8.1]), np.poly([-1, -1, -1]), 0.0) == 2


@pytest.mark.parametrize("path", STUDY_FILES, ids=[p.name for p in STUDY_FILES])
def test_example_study_loads_and_its_compensators_stabilise(path):
    s = load_study(path)
    assert s.name and s.name != path.stem  # each example names itself
    assert s.compensators, "each example carries at least one [[compensator]]"
    assert s.plant.is_proper and s.limits and s.search.max_order >= 1
    text = path.read_text(encoding="utf-8")
    assert text.startswith("#"), "a scenario comment opens every example"
    for machine_dir in ("work", "tmp", "home"):  # no absolute path of a machine
        assert f"/{machine_dir}/" not in text
    for c in s.compensators:
        assert c.compensator.is_proper
        loop_gain = s.plant.gain * c.compensator.gain
        num = _poly(loop_gain, s.plant.zeros + c.compensator.zeros)
        den = _poly(1.0, s.plant.poles + c.compensator.poles)
        assert len(num) < len(den)  # strictly proper loop
        assert _closed_loop_rhp_count(num, den, s.plant.delay_s) == 0, c.name


def test_example_scenarios_have_what_they_promise():
    by = {p.stem: load_study(p) for p in STUDY_FILES}
    kiln = by["kiln_damper"]
    assert kiln.plant.delay_s > 0 and kiln.targets.integrators == 1
    assert {"sensitivity_peak", "gain_margin_db"} <= set(kiln.limits)
    assert 2 <= len(kiln.compensators) <= 3
    dome = by["dome_drive"]
    assert dome.plant.n_integrators == 1
    mode = [p for p in dome.plant.poles if p.imag > 0]
    assert len(mode) == 1 and abs(mode[0].real) / abs(mode[0]) == pytest.approx(0.05, abs=0.005)
    conveyor = by["conveyor_speed"]
    assert conveyor.targets.derived_from  # targets from overshoot + settling time
    assert any(p.stem in ("balance_platform", "drum_level") for p in STUDY_FILES)
    assert any(p.real > 0 for st_ in by.values() for p in st_.plant.poles + st_.plant.zeros)
