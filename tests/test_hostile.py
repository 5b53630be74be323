"""Hostile and extreme input (issue 19): every bad file is refused with one line and exit
status 2, never a traceback, a hang or an unbounded read; extreme but valid plants inside
the numerical domain (docs/study-file.md, "Numerical domain") get answers that agree with
the independent scipy-only evaluator ``tests/reference_loop.py``.

(a) a corpus of hostile study files generated here from templates, run in-process through
    ``explorer.cli.main`` (one subprocess per case would take minutes);
(b) Hypothesis-generated TOML documents fed to ``parse_study``: a Study or a
    StudyFileError, nothing else;
(c) a FIFO and /dev/zero as the study file (subprocess with a timeout as a guard only);
(d) extreme valid loops: `check --json` against ``reference_loop.reference_metrics``.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import os
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from reference_loop import reference_metrics

from explorer import study as study_mod
from explorer.cli import main
from explorer.errors import StudyFileError
from explorer.loop import Rational
from explorer.study import parse_study

ROOT = Path(__file__).resolve().parents[1]

PLANT = "gain = 8.0\nzeros = []\npoles = [-0.5, -4, -12]\n"
TARGETS = "crossover = 1.5\nphase_margin = 50\nintegrators = 1\n"
COMP = '[[compensator]]\nname = "A"\ngain = 1.2\nzeros = [-0.5]\npoles = [0]\n'


def make(plant: str = PLANT, targets: str = TARGETS, rest: str = COMP, top: str = "") -> str:
    return f"{top}\n[plant]\n{plant}\n[targets]\n{targets}\n{rest}"


def _roots(values: list[float]) -> str:
    return "[" + ", ".join(repr(float(v)) for v in values) + "]"


# ======================================================================================
# (a) the hostile corpus
def _corpus() -> list[tuple[str, str | bytes]]:
    cases: list[tuple[str, str | bytes]] = []

    def add(name: str, text: str | bytes) -> None:
        cases.append((name, text))

    # -- wrong types at every scalar key -----------------------------------------------
    wrong = {"string": '"7"', "bool": "true", "list": "[1]", "table": "{ a = 1 }",
             "date": "1979-05-27", "datetime": "1979-05-27T07:32:00Z"}
    scalar_sites = {
        "plant.gain": lambda v: make(plant=f"gain = {v}\npoles = [-1]\n"),
        "plant.delay": lambda v: make(plant=PLANT + f"delay = {v}\n"),
        "targets.phase_margin": lambda v: make(
            targets=f"crossover = 1.5\nphase_margin = {v}\nintegrators = 1\n"),
        "targets.integrators": lambda v: make(targets=f"crossover = 1.5\nintegrators = {v}\n"),
        "targets.overshoot": lambda v: make(targets=f"overshoot = {v}\nintegrators = 1\n"),
        "limits.sensitivity_peak": lambda v: make(
            rest=COMP + f"[limits]\nsensitivity_peak = {v}\n"),
        "limits.gain_margin_db": lambda v: make(rest=COMP + f"[limits]\ngain_margin_db = {v}\n"),
        "search.max_order": lambda v: make(rest=COMP + f"[search]\nmax_order = {v}\n"),
        "search.seed": lambda v: make(rest=COMP + f"[search]\nseed = {v}\n"),
        "compensator.gain": lambda v: make(rest=f"[[compensator]]\ngain = {v}\npoles = [0]\n"),
    }
    for site, build in scalar_sites.items():
        for kind, value in wrong.items():
            if site == "targets.overshoot" and kind == "bool":
                continue
            add(f"type {site} {kind}", build(value))
    for kind, value in wrong.items():
        if kind != "string":
            add(f"type name {kind}", make(top=f"name = {value}\n"))
        if kind != "string":
            add(f"type root {kind}", make(plant=f"gain = 1\npoles = [{value}]\n"))
    for section in ("plant", "targets", "limits", "search"):
        if section in ("limits", "search"):
            add(f"section {section} as value", make(top=f"{section} = 3\n"))
        else:
            add(f"section {section} as value",
                f"{section} = 3\n" + make().replace(f"[{section}]", "[other]"))
    add("compensator as table", make(rest="[compensator]\ngain = 1\n"))
    add("compensator as number", make(rest="compensator = 1\n"))
    add("compensator list of numbers", make(rest="compensator = [1, 2]\n"))

    # -- NaN and infinities ---------------------------------------------------------------
    for bad in ("nan", "inf", "-inf", "+nan"):
        add(f"nonfinite gain {bad}", make(plant=f"gain = {bad}\npoles = [-1]\n"))
        add(f"nonfinite delay {bad}", make(plant=PLANT + f"delay = {bad}\n"))
        add(f"nonfinite root {bad}", make(plant=f"gain = 1\npoles = [{bad}]\n"))
        add(f"nonfinite crossover {bad}",
            make(targets=f"crossover = {bad}\nintegrators = 1\n"))
        add(f"nonfinite pm {bad}", make(targets=f"phase_margin = {bad}\nintegrators = 1\n"))
        add(f"nonfinite num {bad}", make(plant=f"num = [{bad}]\nden = [1, 1]\n"))
        add(f"nonfinite limit {bad}", make(rest=COMP + f"[limits]\niae_load = {bad}\n"))
        add(f"nonfinite complex {bad}",
            make(plant=f'gain = 1\npoles = ["{bad}+1j", "{bad}-1j"]\n'))

    # -- huge and tiny numbers (outside the numerical domain) ------------------------------
    for g in ("1e308", "-1e308", "5e-324", "1e-101", "1e101", "-1e-200"):
        add(f"domain gain {g}", make(plant=f"gain = {g}\npoles = [-1, -2]\n"))
        add(f"domain compensator gain {g}",
            make(rest=f"[[compensator]]\ngain = {g}\npoles = [0]\n"))
    for r in ("-1e300", "-1e-300", "-1e-9", "-2e8", "1e9", "-5e-324"):
        add(f"domain pole {r}", make(plant=f"gain = 1\npoles = [{r}, -1]\n"))
        add(f"domain zero {r}", make(plant=f"gain = 1\nzeros = [{r}]\npoles = [-1, -2]\n"))
    add("domain complex pair 1e200",
        make(plant='gain = 1\npoles = ["-1e200+1e200j", "-1e200-1e200j", -1]\n'))
    for d in ("1e300", "1e-300", "1e9", "1e-9"):
        add(f"domain delay {d}", make(plant=PLANT + f"delay = {d}\n"))
    for w in ("1e300", "1e-300", "1e9"):
        add(f"domain crossover {w}", make(targets=f"crossover = {w}\nintegrators = 1\n"))
    add("domain settling time tiny",
        make(targets="overshoot = 10\nsettling_time = 1e-12\nintegrators = 1\n"))
    add("domain span plant", make(plant="gain = 1\npoles = [-1e-5, -1e5]\n"))
    add("domain span delay", make(plant="gain = 1\npoles = [-1e5]\ndelay = 1e4\n"))
    add("domain span compensator",
        make(rest="[[compensator]]\ngain = 1\nzeros = [-1e-7]\npoles = [0]\n"))
    add("domain delay short", make(plant=PLANT + "delay = 1e-6\n"))
    add("domain delay short vs compensator",
        make(plant=PLANT + "delay = 1e-3\n",
             rest="[[compensator]]\ngain = 1\nzeros = [-1e-3]\npoles = [0]\n"))
    add("domain span crossover", make(targets="crossover = 1e-7\nintegrators = 1\n"))
    add("domain magnitude budget",
        make(plant="gain = 1\npoles = " + _roots([-1e6] * 40) + "\n",
             targets="crossover = 1e6\nintegrators = 0\n",
             rest="[[compensator]]\ngain = 1\npoles = " + _roots([-1e6] * 40) + "\n"))
    add("domain num/den gain inf", make(plant="num = [1e300]\nden = [1e-300, 1]\n"))
    add("domain num/den LinAlg", make(plant="num = [1]\nden = [1e-300, 1, 1]\n"))
    add("domain num/den (s+1)^200",
        make(plant="num = [1]\nden = " + _roots(list(np.poly([-1.0] * 200))) + "\n"))
    add("domain num/den 41 leading zeros", make(plant="num = [1]\nden = " +
                                                _roots([0.0] * 41 + [1.0, 1.0]) + "\n"))
    add("domain integrators 1e8", make(targets="integrators = 100000000\n"))
    add("domain integrators 4", make(targets="integrators = 4\n"))
    add("domain integrators 10**30", make(targets="integrators = " + "9" * 18 + "\n"))
    add("domain too many poles", make(plant="gain = 1\npoles = " + _roots([-1.0] * 41) + "\n"))
    add("domain 20000 poles",
        make(plant="gain = 1\npoles = " + _roots([-1 - 1e-3 * i for i in range(20000)]) + "\n"))
    add("domain too many zeros",
        make(plant="gain = 1\nzeros = " + _roots([-2.0] * 41) + "\npoles = "
             + _roots([-1.0] * 40) + "\n"))
    add("domain too many compensators",
        make(rest="".join(f'[[compensator]]\nname = "C{i}"\ngain = 1\npoles = [0]\n'
                          for i in range(101))))

    # -- nesting ---------------------------------------------------------------------------
    for depth in (50, 500, 5000):
        add(f"nesting array {depth}", make(top="x = " + "[" * depth + "]" * depth + "\n"))
        add(f"nesting in plant {depth}",
            make(plant="gain = 1\npoles = " + "[" * depth + "]" * depth + "\n"))
    add("nesting inline table 600", make(top="x = " + "{a = " * 600 + "1" + "}" * 600 + "\n"))
    add("nesting dotted tables", make(top="[" + ".".join(["a"] * 300) + "]\nb = 1\n"))

    # -- unknown keys at every level -----------------------------------------------------
    for where, build in {
        "top": lambda k: make(top=f"{k} = 1\n"),
        "plant": lambda k: make(plant=PLANT + f"{k} = 1\n"),
        "targets": lambda k: make(targets=TARGETS + f"{k} = 1\n"),
        "limits": lambda k: make(rest=COMP + f"[limits]\n{k} = 1\n"),
        "search": lambda k: make(rest=COMP + f"[search]\n{k} = 1\n"),
        "compensator": lambda k: make(rest=COMP + f"{k} = 1\n"),
    }.items():
        for k in ("dealy", '"\\u001b[2J"', '"a.b"', '"' + "k" * 500 + '"', '""'):
            add(f"unknown key {where} {k[:12]}", build(k))

    # -- lone and unpaired complex roots, bad root strings ----------------------------------
    for roots in ('["-2+3j"]', '["-2+3j", "-2-3.1j"]', '["-2+3j", "-2+3j", "-2-3j"]',
                  '["-2+3i", "-2-3i"]', '["3j-2", "-3j-2"]', '["1e999+1j", "1e999-1j"]',
                  '["--1"]', '["-1" ]', '[""]', '["nanj", "-nanj"]', '["\\u001b"]'):
        if roots == '["-1" ]':
            continue
        add(f"roots {roots}", make(plant=f"gain = 1\npoles = {roots}\n"))
        add(f"compensator roots {roots}", make(rest=f"[[compensator]]\ngain = 1\nzeros = []\n"
                                                    f"poles = {roots}\n"))

    # -- bad ranges, limits, search, requirements --------------------------------------------
    for rng in ("[3, 1]", "[1]", "[1, 2, 3]", "[0, 1]", "[-1, 1]", "[1e-7, 1]", "[1, 1]",
                "[]", '["a", 2]', "[nan, 2]"):
        add(f"range {rng}", make(targets=f"crossover = {rng}\nintegrators = 1\n"))
    add("range with tolerance",
        make(targets="crossover = [1, 2]\ncrossover_tolerance = 0.1\nintegrators = 1\n"))
    for key, v in (("sensitivity_peak", "0.5"), ("phase_margin_deg", "200"),
                   ("gain_margin_db", "-3"), ("settling_time_s", "0"),
                   ("hf_gain", "-1"), ("overshoot_pct", "-1"), ("complementary_peak", "0"),
                   ("delay_margin_s", "-1e-300"), ("bandwidth", "3")):
        add(f"limit {key} {v}", make(rest=COMP + f"[limits]\n{key} = {v}\n"))
    for key, v in (("max_order", "7"), ("max_order", "-1"), ("trials", "0"),
                   ("trials", "1000000000"), ("seed", "-5"), ("seed", "4294967296"),
                   ("seed", "1.5"), ("max_pole_ratio", "1"), ("max_pole_ratio", "1e300"),
                   ("cancel_lightly_damped", "1")):
        add(f"search {key} {v}", make(rest=COMP + f"[search]\n{key} = {v}\n"))
    for tg in ("phase_margin = 90\nintegrators = 1\n", "phase_margin = 0\nintegrators = 1\n",
               "overshoot = 100\nintegrators = 1\n", "overshoot = -1\nintegrators = 1\n",
               "overshoot = 10\nphase_margin = 50\nintegrators = 1\n",
               "settling_time = 2\nintegrators = 1\n",
               "overshoot = 10\nsettling_time = 2\nsettling_band = 0.03\nintegrators = 1\n",
               "overshoot = 10\npm_rule = \"guess\"\nintegrators = 1\n",
               "error_constant = 0\nintegrators = 1\n", "error_constant = 1e300\nintegrators = 1\n",
               "crossover = 1\ncrossover_tolerance = 0.9\nintegrators = 1\n",
               "crossover = 1\n", "integrators = -1\n"):
        add(f"targets {tg.splitlines()[0]} {len(cases)}", make(targets=tg))

    # -- bad [[compensator]] -------------------------------------------------------------------
    for body in ("gain = 0\npoles = [0]\n", "zeros = [-1]\npoles = [0]\n",
                 "gain = 1\nzeros = [-1, -2]\npoles = [0]\n", "gain = 1\ndelay = 1\n",
                 "num = [1, 2, 1]\nden = [1, 0]\n", "gain = 1\nnum = [1]\nden = [1, 1]\n",
                 "num = [1]\n", 'name = ""\ngain = 1\n', 'name = "  "\ngain = 1\n',
                 'name = "\\u001b]0;pwned\\u0007"\ngain = 1\n', 'name = "\\u009b2J"\ngain = 1\n',
                 'name = "a\\rb"\ngain = 1\n', 'name = "' + "n" * 300 + '"\ngain = 1\n',
                 "num = [0, 0]\nden = [1]\n"):
        add(f"compensator {body.splitlines()[0][:20]} {len(cases)}",
            make(rest="[[compensator]]\n" + body))
    add("compensator duplicate names", make(rest=COMP + COMP))
    add("no compensators", make(rest=""))
    add("name escape", make(top='name = "\\u001b[2J\\u001b[31mred"\n'))
    add("name bell", make(top='name = "ding\\u0007"\n'))

    # -- bytes: encodings, syntax -----------------------------------------------------------------
    good = make().encode()
    add("bytes latin-1", make(top='name = "Ofen\xe4"\n').encode("latin-1"))
    add("bytes lone continuation", b"\x80" + good)
    add("bytes overlong slash", b'name = "\xc0\xaf"\n' + good)
    add("bytes encoded surrogate", b'name = "\xed\xa0\x80"\n' + good)
    add("bytes utf-16", make().encode("utf-16"))
    add("bytes BOM then garbage", b"\xef\xbb\xbf" + b"\x00\x01\x02")
    add("bytes double BOM", b"\xef\xbb\xbf\xef\xbb\xbf" + good)
    add("bytes NUL", good.replace(b"8.0", b"8\x00.0"))
    add("bytes random", bytes(np.random.default_rng(19).integers(0, 256, 4096, dtype=np.uint8)))
    add("bytes empty", b"")
    add("bytes only BOM", b"\xef\xbb\xbf")
    add("bytes over 1 MiB", good + b"#" + b"x" * (1 << 20) + b"\n")
    add("syntax duplicate key", make(plant=PLANT + "gain = 2\n"))
    add("syntax bare escape", b'name = "\x1b[31m"\n' + good)
    add("syntax unterminated", make() + '\nname = "open\n')
    return cases


CORPUS = _corpus()


def test_corpus_is_large_and_ids_unique() -> None:
    assert len(CORPUS) >= 150
    ids = [c[0] for c in CORPUS]
    assert len(ids) == len(set(ids)), [i for i in ids if ids.count(i) > 1]


@pytest.mark.parametrize(("name", "content"), CORPUS, ids=[c[0] for c in CORPUS])
def test_hostile_file_refused_in_one_line(name, content, tmp_path, capsys) -> None:
    path = tmp_path / "hostile.toml"
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    code = main(["check", str(path)])
    out, err = capsys.readouterr()
    assert code == 2, (name, out[-500:], err)
    assert out == ""
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert err.endswith("\n")
    assert lines[0].startswith("loopscout: error: "), err
    assert "Traceback" not in err and "internal error" not in err
    assert len(lines[0]) < 700, lines[0]
    # nothing that steers a terminal; no 300-digit numbers
    assert not any(ord(c) < 0x20 or 0x7F <= ord(c) < 0xA0 for c in lines[0]), repr(lines[0])
    assert not any(len(tok) > 30 and tok.strip("-+.").isdigit() for tok in lines[0].split())


def test_domain_messages_state_the_limit(tmp_path, capsys) -> None:
    """A refusal at the domain's edge says what the limit is (6 significant digits)."""
    expect = {
        "domain gain 1e308": "[1e-100, 1e+100]",
        "domain pole -1e300": "[1e-08, 1e+08] rad/s",
        "domain delay 1e300": "[1e-08, 1e+08] s",
        "domain span plant": "at most 1e+08",
        "domain delay short": "delay ≥ 0.0002 s",
        "domain integrators 1e8": "at most 3",
        "domain too many poles": "at most 40",
        "domain 20000 poles": "at most 40",
        "range [1e-7, 1]": "at most 10000",
        "domain num/den (s+1)^200": "at most 41",
        "domain magnitude budget": "1e±250",
        "domain too many compensators": "at most 100",
        "bytes over 1 MiB": "1048576 bytes",
        "nesting array 5000": "nested too deeply",
        "search seed 4294967296": "at most 4294967295",
    }
    corpus = dict(CORPUS)
    for name, fragment in expect.items():
        path = tmp_path / "s.toml"
        content = corpus[name]
        (path.write_bytes if isinstance(content, bytes) else path.write_text)(content)
        assert main(["check", str(path)]) == 2
        err = capsys.readouterr().err
        assert fragment in err, (name, err)


def test_bom_is_accepted(tmp_path, capsys) -> None:
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + make().encode())
    assert main(["check", str(path), "--json"]) == 0, capsys.readouterr().err
    assert json.loads(capsys.readouterr().out)["designs"][0]["name"] == "A"


def test_polynomial_conversion_accuracy_is_checked() -> None:
    """(s+1)^40 is within the coefficient count but its clustered roots still reproduce
    the coefficients (numpy.roots is backward stable); a polynomial whose coefficients
    span 600 decades cannot be converted and is refused with a hint to give roots."""
    c = np.poly([-1.0] * 40)
    s = parse_study(tomllib.loads(make(plant=f"num = [1]\nden = {_roots(list(c))}\n")))
    again = np.poly(np.array(s.plant.poles))
    assert np.linalg.norm(again - c) <= 1e-8 * np.linalg.norm(c)  # numpy.poly as reference
    with pytest.raises(StudyFileError) as info:
        parse_study(tomllib.loads(make(plant="num = [1]\nden = [1e-300, 0, 0, 1e300]\n")))
    assert info.value.key == "plant.den"


def test_seed_option_like_search_seed(tmp_path, capsys) -> None:
    path = tmp_path / "s.toml"
    path.write_text(make())
    for argv in (["--seed", "-1"], ["--seed", str(2**40)], ["--trials", "0"]):
        code = main(["explore", str(path), "--out", str(tmp_path / "o"), *argv])
        err = capsys.readouterr().err
        assert code == 2 and len(err.splitlines()) == 1, err
        assert f"`{argv[0]}` must be an integer in" in err
    assert not (tmp_path / "o").exists()


def test_control_characters_never_reach_the_terminal(tmp_path, capsys) -> None:
    """The study path is printed in the table header and in errors: escaped."""
    path = tmp_path / "x\x1b[2Jy.toml"
    path.write_text(make())
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and "x\\x1b[2Jy" in out
    bad = tmp_path / "z\x1b]0;t\x07.toml"
    bad.write_text(make(plant="gain = nan\n"))
    assert main(["check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "\x1b" not in err and "\x07" not in err and len(err.splitlines()) == 1


@pytest.mark.parametrize(
    "content",
    [
        b"\x00\xff" * 100,
        b"[1, 2]",
        b'{"designs": {}}',
        b'{"designs": []}',
        b'{"designs": [1]}',
        b'{"designs": [{"name": "a", "compensator": 5, "metrics": {}}]}',
        b'{"designs": [{"name": "a", "compensator": {"gain": "x"}, "metrics": {}}]}',
        b'{"designs": [{"name": "a", "compensator": {"gain": 1, "poles": ["q"]}, '
        b'"metrics": {}}]}',
        b'{"designs": [{"name": 5, "compensator": {"gain": 1}, "metrics": {}}]}',
        b'{"designs": [{"name": "a", "compensator": {"gain": 1}, "metrics": []}]}',
        b"[" * 100000 + b"]" * 100000,
        b"{",
    ],
    ids=lambda c: repr(c[:24]),
)
def test_report_designs_file_refused_in_one_line(content, tmp_path, capsys) -> None:
    designs = tmp_path / "designs.json"
    designs.write_bytes(content)
    code = main(["report", str(ROOT / "studies" / "kiln_damper.toml"), "--designs",
                 str(designs), "--out", str(tmp_path / "r.html")])
    err = capsys.readouterr().err
    assert code == 2, err
    assert len(err.splitlines()) == 1 and "--designs" in err, err
    assert not (tmp_path / "r.html").exists()


# ======================================================================================
# (b) Hypothesis: anything TOML can hold gives a Study or a StudyFileError
_KEYS = st.sampled_from([
    "name", "plant", "targets", "limits", "search", "compensator", "gain", "zeros", "poles",
    "num", "den", "delay", "crossover", "phase_margin", "integrators", "overshoot",
    "settling_time", "settling_band", "pm_rule", "error_constant", "crossover_tolerance",
    "max_order", "trials", "seed", "cancel_lightly_damped", "max_pole_ratio",
    "sensitivity_peak", "gain_margin_db", "x", "",
]) | st.text(max_size=8)
_SCALARS = (
    st.integers(min_value=-(2**70), max_value=2**70)
    | st.floats()
    | st.booleans()
    | st.text(max_size=12)
    | st.sampled_from(["-2+3j", "-2-3j", "nan", "1e400j", "0"])
    | st.just(dt.date(1979, 5, 27))
    | st.just(dt.datetime(1979, 5, 27, 7, 32))
    | st.just(dt.time(7, 32))
)
_VALUES = st.recursive(
    _SCALARS,
    lambda inner: st.lists(inner, max_size=5) | st.dictionaries(_KEYS, inner, max_size=5),
    max_leaves=25,
)
_ROOTS = st.lists(st.floats(-1e3, 1e3) | st.sampled_from(["-1+2j", "-1-2j"]), max_size=4)
_PLANT = st.fixed_dictionaries(
    {"gain": st.floats(-1e3, 1e3) | _SCALARS},
    optional={"poles": _ROOTS | _VALUES, "zeros": _ROOTS, "delay": st.floats(0, 10) | _SCALARS,
              "num": st.lists(st.floats(-10, 10), max_size=4),
              "den": st.lists(st.floats(-10, 10), max_size=5)},
)
_TARGETS = st.fixed_dictionaries(
    {"integrators": st.integers(-1, 5) | _SCALARS},
    optional={"crossover": st.floats(1e-3, 1e3) | st.lists(st.floats(1e-3, 1e3), max_size=3)
              | _SCALARS, "phase_margin": st.floats(-10, 100) | _SCALARS,
              "overshoot": st.floats(-1, 101), "settling_time": st.floats(-1, 100),
              "crossover_tolerance": st.floats(0, 1)},
)
_DOCS = st.fixed_dictionaries(
    {},
    optional={"plant": _PLANT | _VALUES, "targets": _TARGETS | _VALUES,
              "limits": st.dictionaries(st.sampled_from(sorted(study_mod.LIMIT_KEYS)) | _KEYS,
                                        st.floats() | _SCALARS, max_size=4),
              "search": st.dictionaries(_KEYS, _SCALARS, max_size=4),
              "compensator": st.lists(st.fixed_dictionaries(
                  {}, optional={"name": _SCALARS, "gain": st.floats(-10, 10) | _SCALARS,
                                "poles": _ROOTS, "zeros": _ROOTS}), max_size=3) | _VALUES,
              "name": _SCALARS},
) | st.dictionaries(_KEYS, _VALUES, max_size=6)


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_DOCS)
def test_any_document_parses_or_is_refused_in_one_line(doc) -> None:
    try:
        s = parse_study(doc)
    except StudyFileError as exc:
        text = str(exc)
        assert "\n" not in text and "\r" not in text, text
        assert exc.key == "" or text.startswith(f"`{exc.key}` "), text
        return
    # accepted: inside the numerical domain
    for r in (*s.plant.zeros, *s.plant.poles):
        assert r == 0 or study_mod.FREQ_MIN <= abs(r) <= study_mod.FREQ_MAX
    assert study_mod.GAIN_MIN <= abs(s.plant.gain) <= study_mod.GAIN_MAX
    assert 0 <= s.targets.integrators <= study_mod.MAX_INTEGRATORS


# ======================================================================================
# (c) files that never end or never open
def _run_check(path: str) -> subprocess.CompletedProcess[str]:
    # the timeout only guards the test run against the old behaviour (a hang)
    return subprocess.run([sys.executable, "-m", "explorer", "check", path],
                          capture_output=True, text=True, timeout=120, cwd=ROOT)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs on this system")
def test_fifo_is_refused_without_blocking(tmp_path) -> None:
    fifo = tmp_path / "study.toml"
    os.mkfifo(fifo)
    res = _run_check(str(fifo))
    assert res.returncode == 2 and res.stdout == ""
    assert res.stderr.splitlines() == [
        f"loopscout: error: cannot read study file {fifo}: not a regular file (a FIFO)"
    ]


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="no /dev/zero")
def test_endless_device_is_refused() -> None:
    res = _run_check("/dev/zero")
    assert res.returncode == 2
    assert len(res.stderr.splitlines()) == 1 and "not a regular file" in res.stderr


# ======================================================================================
# (d) extreme but valid: answers agree with the scipy-only reference evaluator
EXTREME = [
    # (id, plant, compensator, reference grid)
    ("roots 1e-3..1e3", Rational(gain=1.0, poles=[-1e-3, -1e3]),
     Rational(gain=1e3, zeros=[-1e-3], poles=[0]), (1e-5, 1e5)),
    ("gain 1e-12", Rational(gain=1e-12, poles=[-1, -2]),
     Rational(gain=2e12, zeros=[-1], poles=[0]), (1e-4, 1e4)),
    ("gain 1e12", Rational(gain=1e12, poles=[-1, -2]),
     Rational(gain=2e-12, zeros=[-1], poles=[0]), (1e-4, 1e4)),
    ("delay 100 s", Rational(gain=1.0, poles=[-0.01], delay_s=100.0),
     Rational(gain=0.004, zeros=[-0.01], poles=[0]), (1e-5, 1.0)),
    ("delay 1e-3 s", Rational(gain=1.0, poles=[-1.0, -10.0], delay_s=1e-3),
     Rational(gain=5.0, zeros=[-1.0], poles=[0]), (1e-3, 1e3)),
    ("lightly damped 1e5", Rational(gain=1e10, poles=[-0.5e3 + 1e5j, -0.5e3 - 1e5j, -1e2]),
     Rational(gain=0.1, zeros=[-1e2], poles=[0, -5e3]), (1e-7, 1e7)),
    ("twelve poles", Rational(gain=1.0, poles=[-1.0] * 12),
     Rational(gain=0.5, zeros=[-1.0], poles=[0]), (1e-4, 1e2)),
]


def _write_study(path: Path, plant: Rational, comp: Rational) -> None:
    def roots(rs):
        return "[" + ", ".join(f'"{r.real!r}{r.imag:+.17g}j"' if r.imag else repr(r.real)
                               for r in rs) + "]"

    path.write_text(
        f"[plant]\ngain = {plant.gain!r}\nzeros = {roots(plant.zeros)}\n"
        f"poles = {roots(plant.poles)}\ndelay = {plant.delay_s!r}\n"
        "[targets]\nintegrators = 1\n"
        f'[[compensator]]\nname = "X"\ngain = {comp.gain!r}\nzeros = {roots(comp.zeros)}\n'
        f"poles = {roots(comp.poles)}\n"
    )


@pytest.mark.parametrize(("name", "plant", "comp", "grid"), EXTREME, ids=[e[0] for e in EXTREME])
def test_extreme_valid_loop_agrees_with_reference(name, plant, comp, grid, tmp_path,
                                                  capsys) -> None:
    path = tmp_path / "x.toml"
    _write_study(path, plant, comp)
    code = main(["check", str(path), "--json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    m = json.loads(out)["designs"][0]["metrics"]
    ref = reference_metrics(plant * comp, w_lo=grid[0], w_hi=grid[1], points=4000)
    assert m["phase_margin_deg"] is not None and ref["phase_margin_deg"] is not None
    assert m["phase_margin_deg"] == pytest.approx(ref["phase_margin_deg"], abs=1e-4)
    assert m["crossover_rad_s"] == pytest.approx(ref["crossover_rad_s"], rel=1e-6)
    assert m["sensitivity_peak"] == pytest.approx(ref["sensitivity_peak"], rel=1e-5)
    for v in m.values():  # every number printed is finite (null where it does not exist)
        if isinstance(v, float):
            assert math.isfinite(v)
