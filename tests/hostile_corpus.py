"""The hostile-input corpus of issue 19 and its tally runner.

Every input is run through the real command line, each run in its own process, and
sorted into one of: clean refusal (exit 2, nothing on stdout, exactly one stderr line
with no control characters and no 30-digit numbers), correct answer (exit 0, the
output agrees with an independent evaluation), honest "cannot" (a valid input some
command cannot design for, refused in one line), internal error (exit 1, a traceback,
a signal), hang, blow-up, wrong answer (a hostile input accepted, or an answer the
independent evaluation contradicts) or messy refusal (exit 2 but not one clean line).

Budgets (docs/hostile-input.md):

* ``HANG_LIMIT_S`` = 120 s wall per run is a hang detector only, not a speed goal: a
  run still going after it is killed and counted as a hang.
* ``RSS_BUDGET`` = 1.5 GiB peak resident set per run (the child's own ``ru_maxrss``
  from ``os.wait4``; a forked child's count includes the pre-imported runner, about
  0.2 GB). Above it: a blow-up.
* ``RSS_KILL`` = 3 GiB: the runner reads each child's resident set (/proc/PID/statm)
  while it runs and kills it above this, to protect the machine (a blow-up). An
  address-space limit cannot do this job: the chart renderer's JavaScript engine
  reserves more address space than that at start.

Runs are forked from one runner process that has imported loopscout (0.9 s of imports
per run otherwise), two at a time; the FIFO, /dev/zero and a sample of the rest also
run in a fresh interpreter (``python -m explorer``), as a user would start them.

``python tests/hostile_corpus.py [--json] [--group G] [--jobs N]`` prints the tally;
``benchmarks/hostile_tally.py`` is the same; ``tests/test_hostile.py`` runs it (slow).
"""

from __future__ import annotations

import io
import json
import math
import os
import subprocess
import sys
import tempfile
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

if __name__ == "__main__":  # one BLAS thread per run (set before numpy is imported)
    for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

from explorer.core.loop import Rational  # noqa: E402

HANG_LIMIT_S = 120.0
RSS_BUDGET = 3 << 29  # 1.5 GiB
RSS_KILL = 3 << 30
_PAGE = os.sysconf("SC_PAGE_SIZE") if hasattr(os, "sysconf") else 4096

PLANT = "gain = 8.0\nzeros = []\npoles = [-0.5, -4, -12]\n"
TARGETS = "crossover = 1.5\nphase_margin = 50\nintegrators = 1\n"
COMP = '[[compensator]]\nname = "A"\ngain = 1.2\nzeros = [-0.5]\npoles = [0]\n'


def make(plant: str = PLANT, targets: str = TARGETS, rest: str = COMP, top: str = "") -> str:
    return f"{top}\n[plant]\n{plant}\n[targets]\n{targets}\n{rest}"


def _roots(values: list[float]) -> str:
    return "[" + ", ".join(repr(float(v)) for v in values) + "]"


# ======================================================================================
# (a) the hostile corpus
def hostile_files() -> list[tuple[str, str | bytes]]:
    """The hand-written hostile study files: (id, content), every one to be refused."""
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
    # added last, so that the every-third-input command choice of the others stays put
    # ω·τ at a given compensator's crossover: (8e30)^(1/3) = 2e10 rad/s behind 18 ms is
    # 3.6e8 rad, beyond the domain's 1e8 rad (explorer/evaluation/phase_domain.py)
    add("domain crossover far past the delay",
        make(plant=PLANT + "delay = 0.018\n",
             rest='[[compensator]]\ngain = 1e30\nzeros = [-0.5]\npoles = [0]\n'))
    return cases



# ======================================================================================
# Extreme but valid loops (inside the numerical domain of docs/study-file.md)
# ======================================================================================
# (id, plant, compensator, reference grid in rad/s, step reference)
#   step reference "scipy": delay-free, step figures against scipy.signal (lsim of the
#   closed-loop transfer functions, tests/test_timeresp.py); "" : frequency figures only
EXTREME: list[tuple[str, Rational, Rational, tuple[float, float], str]] = [
    ("roots 1e-3..1e3", Rational(gain=1.0, poles=[-1e-3, -1e3]),
     Rational(gain=1e3, zeros=[-1e-3], poles=[0]), (1e-5, 1e5), ""),
    ("gain 1e-12", Rational(gain=1e-12, poles=[-1, -2]),
     Rational(gain=2e12, zeros=[-1], poles=[0]), (1e-4, 1e4), "scipy"),
    ("gain 1e12", Rational(gain=1e12, poles=[-1, -2]),
     Rational(gain=2e-12, zeros=[-1], poles=[0]), (1e-4, 1e4), "scipy"),
    ("delay 100 s", Rational(gain=1.0, poles=[-0.01], delay_s=100.0),
     Rational(gain=0.004, zeros=[-0.01], poles=[0]), (1e-5, 1.0), ""),
    ("delay 1e-3 s", Rational(gain=1.0, poles=[-1.0, -10.0], delay_s=1e-3),
     Rational(gain=5.0, zeros=[-1.0], poles=[0]), (1e-3, 1e3), ""),
    ("lightly damped 1e5", Rational(gain=1e10, poles=[-0.5e3 + 1e5j, -0.5e3 - 1e5j, -1e2]),
     Rational(gain=0.1, zeros=[-1e2], poles=[0, -5e3]), (1e-7, 1e7), ""),
    ("twelve poles", Rational(gain=1.0, poles=[-1.0] * 12),
     Rational(gain=0.5, zeros=[-1.0], poles=[0]), (1e-4, 1e2), "scipy"),
    ("twelve poles slow PI", Rational(gain=1.0, poles=[-1.0] * 12),
     Rational(gain=0.05, zeros=[-1.0], poles=[0]), (1e-4, 1e2), "scipy"),
    ("gain 1e-12 delayed", Rational(gain=1e-12, poles=[-1, -2], delay_s=0.3),
     Rational(gain=2e12, zeros=[-1], poles=[0]), (1e-4, 1e4), ""),
    ("kiln x 1e6 no delay", Rational(gain=0.005, poles=[-0.02, -0.1]),
     Rational(gain=0.85e6, zeros=[-0.02], poles=[0]), (1e-5, 1e4), ""),
    ("kiln x 1e10 no delay", Rational(gain=0.005, poles=[-0.02, -0.1]),
     Rational(gain=0.85e10, zeros=[-0.02], poles=[0]), (1e-5, 1e6), ""),
    ("roots 1e-4..1e4", Rational(gain=1.0, poles=[-1e-4, -1e4]),
     Rational(gain=1e6, zeros=[-1e-4], poles=[0]), (1e-6, 1e6), ""),
    ("time scale 1e4", Rational(gain=9e12, poles=[-1.5e3 + 29962.4j, -1.5e3 - 29962.4j, -1e4]),
     Rational(gain=3e3, zeros=[-1e4], poles=[0, -5e4]), (1e-1, 1e7), "scipy"),
    ("time scale 1e-4", Rational(gain=9e-12, poles=[-1.5e-5 + 2.99624e-4j,
                                                   -1.5e-5 - 2.99624e-4j, -1e-4]),
     Rational(gain=3e-5, zeros=[-1e-4], poles=[0, -5e-4]), (1e-9, 1e-1), ""),
]


# extreme loops also run under `explore --trials 4` (about 40–60 s each; the others are
# left out to keep the tally near 3 min; "lightly damped 1e5" took 369 s and 1.1 GB before
# explorer/time_domain/modal_step.py, docs/hostile-input.md)
EXPLORED = ("gain 1e-12", "lightly damped 1e5")
# extreme loops whose report is written (about 6 s each): the page holds the design and
# the safety caution
REPORTED = ("lightly damped 1e5", "kiln x 1e10 no delay", "time scale 1e-4")


def _verify_page(run_dir: Path) -> Verdict:
    from explorer.core.caution import CAUTION

    page = (run_dir / "r.html").read_text(encoding="utf-8")
    ok = CAUTION.split(".")[0] in page and '"X"' in page
    return ok, "" if ok else "the page lacks the design or the caution"


def _root_list(rs: tuple[complex, ...]) -> str:
    return "[" + ", ".join(f'"{r.real!r}{r.imag:+.17g}j"' if r.imag else repr(r.real)
                           for r in rs) + "]"


def extreme_study(plant: Rational, comp: Rational, targets: str = "integrators = 1\n") -> str:
    """A study file holding ``plant`` and one compensator "X" (exact reprs)."""
    return (
        f"[plant]\ngain = {plant.gain!r}\nzeros = {_root_list(plant.zeros)}\n"
        f"poles = {_root_list(plant.poles)}\ndelay = {plant.delay_s!r}\n"
        f"[targets]\n{targets}"
        f'[[compensator]]\nname = "X"\ngain = {comp.gain!r}\nzeros = {_root_list(comp.zeros)}\n'
        f"poles = {_root_list(comp.poles)}\n"
    )


# ======================================================================================
# Verifiers: an answer against an independent evaluation (True, "") or (False, why)
# ======================================================================================
Verdict = tuple[bool, str]


def _finite_numbers(obj: Any) -> bool:
    if isinstance(obj, float):
        return math.isfinite(obj)
    if isinstance(obj, dict):
        return all(_finite_numbers(v) for v in obj.values())
    if isinstance(obj, list):
        return all(_finite_numbers(v) for v in obj)
    return True


def _closed_loop_poles(plant: Rational, comp: Rational) -> np.ndarray:
    """Roots of Dp·Dc + Np·Nc (numpy polynomials; delay-free loops only)."""
    def poly(rs):
        return np.poly(np.array(rs, dtype=complex)).real if len(rs) else np.array([1.0])
    num = plant.gain * comp.gain * np.polymul(poly(plant.zeros), poly(comp.zeros))
    den = np.polymul(poly(plant.poles), poly(comp.poles))
    return np.roots(np.polyadd(den, num))


def _time_scaled(r: Rational, s: float) -> Rational:
    """r(σ/s): every root × s, the delay ÷ s — the same loop s times faster."""
    k = len(r.poles) - len(r.zeros)
    return Rational(gain=r.gain * s**k, zeros=tuple(z * s for z in r.zeros),
                    poles=tuple(p * s for p in r.poles), delay_s=r.delay_s / s)


def verify_frequency(plant: Rational, comp: Rational, grid: tuple[float, float],
                     metrics: dict[str, Any]) -> Verdict:
    """Crossover, phase margin and Ms against tests/reference_loop.py (scipy only)."""
    from reference_loop import reference_metrics

    if not _finite_numbers(metrics):
        return False, "a printed number is not finite"
    # the reference runs on the loop time-scaled to a crossover near 1 rad/s (its root
    # refinement has absolute tolerances); frequencies are scaled back
    w0 = math.sqrt(grid[0] * grid[1])
    loop = _time_scaled(plant * comp, 1.0 / w0)
    ref = reference_metrics(loop, w_lo=grid[0] / w0, w_hi=grid[1] / w0, points=4000)
    if ref.get("crossover_rad_s") is not None:
        ref["crossover_rad_s"] *= w0
    pairs = (("phase_margin_deg", 1e-4, "abs"), ("crossover_rad_s", 1e-6, "rel"),
             ("sensitivity_peak", 1e-5, "rel"))
    for key, tol, kind in pairs:
        got, want = metrics.get(key), ref.get(key)
        if (got is None) != (want is None):
            return False, f"{key}: {got} vs reference {want}"
        if got is None:
            continue
        err = abs(got - want) if kind == "abs" else abs(got - want) / abs(want)
        if err > tol:
            return False, f"{key}: {got} vs reference {want}"
    return True, ""


def verify_step_scipy(plant: Rational, comp: Rational, metrics: dict[str, Any]) -> Verdict:
    """Delay-free: stability from the closed-loop polynomial's roots; step figures from
    scipy.signal (dense lsim of the closed-loop transfer functions)."""
    from test_timeresp import _scipy_metrics

    stable = bool(np.all(_closed_loop_poles(plant, comp).real < 0))
    if bool(metrics["closed_loop_stable"]) != stable:
        return False, f"closed_loop_stable {metrics['closed_loop_stable']} vs roots {stable}"
    keys = ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control", "iae_load")
    if not stable:
        ok = all(metrics[k] is None for k in keys)
        return ok, "" if ok else "step figures of an unstable loop"
    if any(metrics[k] is None for k in keys[:4]):
        return False, "a step figure of a stable loop is null"
    *_, ref = _scipy_metrics(plant, comp, max(3.0 * metrics["settling_time_s"], 10.0 / max(
        abs(metrics["crossover_rad_s"] or 1.0), 1e-300)))
    tol = {"overshoot_pct": (1e-3, "abs"), "settling_time_s": (1e-5, "rel"),
           "rise_time_s": (1e-5, "rel"), "peak_control": (1e-6, "rel"),
           "iae_load": (1e-4, "rel")}
    for k, (t, kind) in tol.items():
        got, want = metrics[k], ref[k]
        if got is None:
            return False, f"{k} null"
        err = abs(got - want) if kind == "abs" else abs(got - want) / abs(want)
        if err > t:
            return False, f"{k}: {got} vs scipy {want}"
    return True, ""


def verify_claims(plant: Rational, grid: tuple[float, float], out: dict[str, Any]) -> Verdict:
    """Every design the output says meets its targets: stable, no hidden unstable mode,
    and crossover / phase margin / Ms as the scipy reference recomputes them."""
    from explorer.core.loop import Rational as R

    for d in out.get("designs", []):
        if not d.get("meets_targets"):
            continue
        m = d["metrics"]
        if not m.get("closed_loop_stable") or m.get("hidden_unstable_mode"):
            return False, f"{d['name']}: meets with an unstable or hidden mode"
        c = d["compensator"]

        def roots(v):
            return tuple(complex(x.replace(" ", "")) if isinstance(x, str) else float(x)
                         for x in v)
        comp = R(gain=float(c["gain"]), zeros=roots(c.get("zeros", [])),
                 poles=roots(c.get("poles", [])))
        ok, why = verify_frequency(plant, comp, grid, m)
        if not ok:
            return False, f"{d['name']}: {why}"
    return True, ""


# ======================================================================================
# Cases
# ======================================================================================
@dataclass(frozen=True)
class Case:
    """One run: ``argv`` after ``loopscout`` with ``{dir}`` for the run's own folder."""

    id: str
    input: str  # the input it exercises (one input may run under several commands)
    argv: tuple[str, ...]
    files: tuple[tuple[str, bytes], ...] = ()
    # "refuse" | "answer" | "answer-or-cannot" | "answer-or-refuse" (a random document:
    # inside the domain it must be answered correctly, outside refused cleanly)
    expect: str = "refuse"
    verify: Callable[[dict[str, Any], Path], Verdict] | None = None
    fresh: bool = False  # a fresh interpreter instead of a fork
    setup: str = ""  # "fifo": make {dir}/study.toml a FIFO
    group: str = "corpus"


_STUDY = "{dir}/study.toml"


def _command_argv(cmd: str) -> tuple[str, ...]:
    return {
        "check": ("check", _STUDY),
        "balance": ("balance", _STUDY),
        "explore": ("explore", _STUDY, "--out", "{dir}/out", "--trials", "4", "--seed", "1"),
        "report": ("report", _STUDY, "--out", "{dir}/r.html"),
        "implement": ("implement", _STUDY, "--design", "A", "--sample-time", "0.1"),
    }[cmd]


def _as_bytes(content: str | bytes) -> bytes:
    return content if isinstance(content, bytes) else content.encode("utf-8")


def _json_out(run_dir: Path) -> dict[str, Any]:
    return json.loads((run_dir / "stdout").read_text(encoding="utf-8"))


BAD_DESIGNS: list[tuple[str, bytes]] = [
    ("binary", b"\x00\xff" * 100),
    ("list", b"[1, 2]"),
    ("designs object", b'{"designs": {}}'),
    ("designs empty", b'{"designs": []}'),
    ("designs of numbers", b'{"designs": [1]}'),
    ("compensator number", b'{"designs": [{"name": "a", "compensator": 5, "metrics": {}}]}'),
    ("gain string", b'{"designs": [{"name": "a", "compensator": {"gain": "x"}, '
                    b'"metrics": {}}]}'),
    ("root string", b'{"designs": [{"name": "a", "compensator": {"gain": 1, "poles": ["q"]}, '
                    b'"metrics": {}}]}'),
    ("name number", b'{"designs": [{"name": 5, "compensator": {"gain": 1}, "metrics": {}}]}'),
    ("metrics list", b'{"designs": [{"name": "a", "compensator": {"gain": 1}, '
                     b'"metrics": []}]}'),
    ("nested 1e5", b"[" * 100000 + b"]" * 100000),
    ("truncated", b"{"),
    ("gain nan", b'{"designs": [{"name": "a", "compensator": {"gain": NaN}, "metrics": {}}]}'),
    ("gain 1e400", b'{"designs": [{"name": "a", "compensator": {"gain": 1e400}, '
                   b'"metrics": {}}]}'),
]

_KILN = (ROOT / "studies" / "kiln_damper.toml").read_bytes()

# command-line values on a valid study: (id, argv after the study path's command)
CLI_VALUES: list[tuple[str, tuple[str, ...]]] = [
    ("explore --seed -1", ("explore", _STUDY, "--out", "{dir}/o", "--seed", "-1")),
    ("explore --seed 2^40", ("explore", _STUDY, "--out", "{dir}/o", "--seed", str(2**40))),
    ("explore --trials 0", ("explore", _STUDY, "--out", "{dir}/o", "--trials", "0")),
    ("explore --trials 1e9", ("explore", _STUDY, "--out", "{dir}/o", "--trials", "1000000000")),
    ("explore --trials abc", ("explore", _STUDY, "--out", "{dir}/o", "--trials", "abc")),
    ("explore --batch 0", ("explore", _STUDY, "--out", "{dir}/o", "--batch", "0")),
    ("explore --batch 1e3", ("explore", _STUDY, "--out", "{dir}/o", "--batch", "1e3")),
    ("explore --storage bad scheme", ("explore", _STUDY, "--out", "{dir}/o", "--storage",
                                      "nosuchdb://x")),
    ("explore no --out", ("explore", _STUDY)),
    ("explore --out is a file", ("explore", _STUDY, "--out", _STUDY, "--trials", "2")),
    ("balance --trim-overshoot -5", ("balance", _STUDY, "--trim-overshoot", "-5")),
    ("balance --trim-overshoot nan", ("balance", _STUDY, "--trim-overshoot", "nan")),
    ("balance --trim-overshoot 1e300", ("balance", _STUDY, "--trim-overshoot", "1e300")),
    ("implement --sample-time 0", ("implement", _STUDY, "--design", "PI cautious",
                                   "--sample-time", "0")),
    ("implement --sample-time nan", ("implement", _STUDY, "--design", "PI cautious",
                                     "--sample-time", "nan")),
    ("implement --sample-time 1e-300", ("implement", _STUDY, "--design", "PI cautious",
                                        "--sample-time", "1e-300")),
    ("implement --sample-time 1e300", ("implement", _STUDY, "--design", "PI cautious",
                                       "--sample-time", "1e300")),
    ("implement --sample-time 1e-4 (60000 delay samples)",
     ("implement", _STUDY, "--design", "PI cautious", "--sample-time", "1e-4")),
    ("implement --compute-delay 1e300", ("implement", _STUDY, "--design", "PI cautious",
                                         "--sample-time", "0.5", "--compute-delay", "1e300")),
    ("implement --compute-delay -1", ("implement", _STUDY, "--design", "PI cautious",
                                      "--sample-time", "0.5", "--compute-delay", "-1")),
    ("implement --prewarp 1e300", ("implement", _STUDY, "--design", "PI cautious",
                                   "--sample-time", "0.5", "--prewarp", "1e300")),
    ("implement --prewarp inf", ("implement", _STUDY, "--design", "PI cautious",
                                 "--sample-time", "0.5", "--prewarp", "inf")),
    ("implement unknown design", ("implement", _STUDY, "--design", "\x1b[2Jnope",
                                  "--sample-time", "0.5")),
    ("implement --method bogus", ("implement", _STUDY, "--design", "PI cautious",
                                  "--sample-time", "0.5", "--method", "bogus")),
    ("implement --from missing", ("implement", _STUDY, "--design", "x", "--sample-time", "0.5",
                                  "--from", "{dir}/nope.json")),
    ("report --designs missing", ("report", _STUDY, "--designs", "{dir}/nope.json", "--out",
                                  "{dir}/r.html")),
    ("report --out in a missing folder", ("report", _STUDY, "--out", "{dir}/no/such/r.html")),
    ("check two studies", ("check", _STUDY, _STUDY)),
    ("check unknown option", ("check", _STUDY, "--frobnicate")),
    ("unknown command", ("frobnicate", _STUDY)),
    ("check missing file", ("check", "{dir}/missing.toml")),
    ("check a directory", ("check", "{dir}")),
    ("check empty path", ("check", "")),
]

DEVICES: list[tuple[str, str]] = [
    ("/dev/zero", "/dev/zero"),
    ("/dev/urandom", "/dev/urandom"),
    ("/dev/null", "/dev/null"),
    ("/dev/stdin", "/dev/stdin"),
    ("/proc/self/status", "/proc/self/status"),
]


def _verify_extreme(plant: Rational, comp: Rational, grid, step: str):
    def check(run_dir: Path) -> Verdict:
        m = _json_out(run_dir)["designs"][0]["metrics"]
        ok, why = verify_frequency(plant, comp, grid, m)
        if ok and step == "scipy":
            ok, why = verify_step_scipy(plant, comp, m)
        return ok, why
    return check


def _verify_claims_of(plant: Rational, grid):
    def check(run_dir: Path) -> Verdict:
        return verify_claims(plant, grid, _json_out(run_dir))
    return check


def _found_cases() -> list[Case]:
    """The issue's "Found" list, item by item (tests/hostile_corpus.py --group found)."""
    cases: list[Case] = []

    def add(name: str, content: str | bytes, cmds=("check", "balance", "explore"), **kw):
        for cmd in cmds:
            argv = _command_argv(cmd)
            if cmd in ("check", "balance", "explore") and kw.get("expect", "refuse") != "refuse":
                argv = (*argv, "--json")
            cases.append(Case(id=f"found: {name} × {cmd}", input=f"found: {name}", argv=argv,
                              files=(("study.toml", _as_bytes(content)),), group="found", **kw))

    deep = "[" * 500 + "]" * 500
    add("500-level nested array", make(top=f"x = {deep}\n"))
    g12 = EXTREME[1]
    add("plant gain 1e-12 (compensator 2e12)", extreme_study(g12[1], g12[2]), cmds=("check",),
        expect="answer", verify=_verify_extreme(g12[1], g12[2], g12[3], "scipy"))
    add("roots spanning 1e-5..1e5", make(plant="gain = 1\npoles = [-1e-5, -1e5]\n"))
    add("plant gain 5e-324", make(plant="gain = 5e-324\npoles = [-1, -2]\n"))
    add("pole at -1e-200", make(plant="gain = 1\npoles = [-1e-200, -1]\n"))
    add("den = [1e-300, 1, 1]", make(plant="num = [1]\nden = [1e-300, 1, 1]\n"))
    add("complex pole pair at ±1e200",
        make(plant='gain = 1\npoles = ["-1e200+1e200j", "-1e200-1e200j"]\n'))
    add("pole at -1e300", make(plant="gain = 1\npoles = [-1e300, -1]\n"))
    add("integrators = 100000000", make(targets="integrators = 100000000\n"))
    kiln_range = _KILN.decode().replace("crossover    = 0.06", "crossover    = [1e-7, 1]")
    add("kiln crossover range [1e-7, 1]", kiln_range)
    add("20000 plant poles",
        make(plant="gain = 1\npoles = " + _roots([-1 - 1e-3 * i for i in range(20000)]) + "\n"))
    add("num = [1e300], den = [1e-300, 1]", make(plant="num = [1e300]\nden = [1e-300, 1]\n"))
    add("den = (s+1)^200",
        make(plant="num = [1]\nden = " + _roots(list(np.poly([-1.0] * 200))) + "\n"))
    add("200 poles, gain 1", make(plant="gain = 1\npoles = " + _roots([-1.0] * 200) + "\n"))
    add("gain 1e308", make(plant="gain = 1e308\npoles = [-1, -2]\n"))
    add("delay 1e300", make(plant=PLANT + "delay = 1e300\n"))
    add("roots 1e-6..1e6", make(plant="gain = 1\npoles = [-1e-6, -1e6]\n",
                                targets="crossover = 1\nphase_margin = 50\nintegrators = 1\n"))
    add("name with terminal escapes", make(top='name = "\\u001b[2J\\u001b[31mred"\n'))
    add("[search] seed = -5", make(rest=COMP + "[search]\nseed = -5\n"))
    add("refusal with a 300-digit number", make(plant="gain = 1e300\npoles = [-1]\n"))

    # a zero at s = 0 under a double integrator: a hidden unstable mode, never "meets"
    hidden = make(plant="gain = 8.0\nzeros = [0]\npoles = [-0.5, -4, -12]\n",
                  targets="crossover = 1.5\nphase_margin = 50\nintegrators = 1\n",
                  rest='[[compensator]]\nname = "A"\ngain = 1.2\nzeros = [-0.5, -0.3]\n'
                       "poles = [0, 0]\n")

    def hidden_check(run_dir: Path) -> Verdict:
        d = _json_out(run_dir)["designs"][0]
        m = d["metrics"]
        ok = (not d["meets_targets"] and m["closed_loop_stable"] is False
              and m["hidden_unstable_mode"] is True and m["peak_control"] is None)
        return ok, "" if ok else f"claims {d['meets_targets']}, stable {m['closed_loop_stable']}"

    cases.append(Case(id="found: zero at 0 + double integrator × check", group="found",
                      input="found: zero at s = 0 under a double integrator",
                      argv=("check", _STUDY, "--json"), files=(("study.toml", hidden.encode()),),
                      expect="answer", verify=hidden_check))
    hp = Rational(gain=8.0, zeros=[0.0], poles=[-0.5, -4, -12])
    for cmd in ("balance", "explore"):
        cases.append(Case(id=f"found: zero at 0 + double integrator × {cmd}", group="found",
                          input="found: zero at s = 0 under a double integrator",
                          argv=(*_command_argv(cmd), "--json"),
                          files=(("study.toml", hidden.encode()),), expect="answer-or-cannot",
                          verify=_verify_claims_of(hp, (1e-4, 1e4))))
    # roots 1e-4..1e4 (inside the domain): explore's answer, failure reasons as they are
    wide = extreme_study(Rational(gain=1.0, poles=[-1e-4, -1e4]),
                         Rational(gain=1e4, zeros=[-1e-4], poles=[0]),
                         targets="crossover = 1\nphase_margin = 50\nintegrators = 1\n")
    wp = Rational(gain=1.0, poles=[-1e-4, -1e4])
    for cmd in ("check", "balance", "explore"):
        cases.append(Case(id=f"found: roots 1e-4..1e4 × {cmd}", group="found",
                          input="found: roots 1e-4..1e4 with targets",
                          argv=(*_command_argv(cmd), "--json"),
                          files=(("study.toml", wide.encode()),), expect="answer-or-cannot",
                          verify=_verify_claims_of(wp, (1e-6, 1e6))))

    # a compensator named <!--<script>: the report's charts still render (escaped data)
    script = make(rest='[[compensator]]\nname = "<!--<script>"\ngain = 1.2\nzeros = [-0.5]\n'
                       "poles = [0]\n")

    def report_check(run_dir: Path) -> Verdict:
        html = (run_dir / "r.html").read_text(encoding="utf-8")
        bad = "<!--<script>" in html
        return not bad, "raw <!--<script> in the page" if bad else ""

    cases.append(Case(id="found: <!--<script> name × report", group="found",
                      input="found: compensator named <!--<script>",
                      argv=("report", _STUDY, "--out", "{dir}/r.html"),
                      files=(("study.toml", script.encode()),), expect="answer",
                      verify=report_check))

    def bom_check(run_dir: Path) -> Verdict:
        ok = _json_out(run_dir)["designs"][0]["name"] == "A"
        return ok, "" if ok else "BOM study misread"

    cases.append(Case(id="found: UTF-8 BOM × check", group="found", input="found: UTF-8 BOM",
                      argv=("check", _STUDY, "--json"),
                      files=(("study.toml", b"\xef\xbb\xbf" + make().encode()),),
                      expect="answer", verify=bom_check))
    cases.append(Case(id="found: --seed -1 × explore", group="found", input="found: --seed -1",
                      argv=("explore", _STUDY, "--out", "{dir}/o", "--seed", "-1"),
                      files=(("study.toml", make().encode()),)))
    for name, content in BAD_DESIGNS[:2] + BAD_DESIGNS[5:6]:
        cases.append(Case(id=f"found: report --designs {name}", group="found",
                          input=f"found: report --designs {name}",
                          argv=("report", _STUDY, "--designs", "{dir}/designs.json", "--out",
                                "{dir}/r.html"),
                          files=(("study.toml", _KILN), ("designs.json", content))))
    cases.append(Case(id="found: check a FIFO", group="found", input="found: FIFO",
                      argv=("check", _STUDY), setup="fifo", fresh=True))
    cases.append(Case(id="found: check /dev/zero", group="found", input="found: /dev/zero",
                      argv=("check", "/dev/zero"), fresh=True))
    return cases


def all_cases() -> list[Case]:
    cases: list[Case] = []
    files = hostile_files()
    # every hostile file under check; every third one under each other command too
    for i, (name, content) in enumerate(files):
        cmds = ["check"] + (["balance", "explore", "report", "implement"] if i % 3 == 0 else [])
        for cmd in cmds:
            cases.append(Case(id=f"{name} × {cmd}", input=f"file: {name}",
                              argv=_command_argv(cmd),
                              files=(("study.toml", _as_bytes(content)),),
                              fresh=(cmd == "check" and i % 37 == 0)))
    for name, content in BAD_DESIGNS:
        cases.append(Case(id=f"designs {name} × report", input=f"designs: {name}",
                          argv=("report", _STUDY, "--designs", "{dir}/designs.json", "--out",
                                "{dir}/r.html"),
                          files=(("study.toml", _KILN), ("designs.json", content))))
        if name == "metrics list":  # implement reads only the compensator: valid for it
            continue
        cases.append(Case(id=f"designs {name} × implement", input=f"designs: {name}",
                          argv=("implement", _STUDY, "--from", "{dir}/designs.json", "--design",
                                "a", "--sample-time", "0.5"),
                          files=(("study.toml", _KILN), ("designs.json", content))))
    for name, argv in CLI_VALUES:
        cases.append(Case(id=f"cli: {name}", input=f"cli: {name}", argv=argv,
                          files=(("study.toml", _KILN),)))
    for name, path in DEVICES:
        cases.append(Case(id=f"device: {name} × check", input=f"device: {name}",
                          argv=("check", path), fresh=name == "/dev/urandom"))
    cases.append(Case(id="device: FIFO × check", input="device: FIFO", argv=("check", _STUDY),
                      setup="fifo", fresh=True))
    cases.append(Case(id="device: FIFO × explore", input="device: FIFO",
                      argv=("explore", _STUDY, "--out", "{dir}/o"), setup="fifo"))
    for name, plant, comp, grid, step in EXTREME:
        text = extreme_study(plant, comp)
        cases.append(Case(id=f"extreme: {name} × check", input=f"extreme: {name}",
                          argv=("check", _STUDY, "--json"), files=(("study.toml", text.encode()),),
                          expect="answer", verify=_verify_extreme(plant, comp, grid, step)))
        cases.append(Case(id=f"extreme: {name} × balance", input=f"extreme: {name}",
                          argv=("balance", _STUDY, "--json"),
                          files=(("study.toml", text.encode()),), expect="answer-or-cannot",
                          verify=_verify_claims_of(plant, grid)))
        if name in REPORTED:
            cases.append(Case(id=f"extreme: {name} × report", input=f"extreme: {name}",
                              argv=("report", _STUDY, "--out", "{dir}/r.html"),
                              files=(("study.toml", text.encode()),), expect="answer",
                              verify=_verify_page))
        if name in EXPLORED:
            cases.append(Case(id=f"extreme: {name} × explore", input=f"extreme: {name}",
                              argv=(*_command_argv("explore"), "--json"),
                              files=(("study.toml", text.encode()),), expect="answer-or-cannot",
                              verify=_verify_claims_of(plant, grid)))
    for name, text, plant, comp in random_documents():
        cases.append(Case(id=f"{name} × check", input=name, argv=("check", _STUDY, "--json"),
                          files=(("study.toml", text.encode()),), expect="answer-or-refuse",
                          verify=_verify_random(plant, comp), group="random"))
    return cases + _found_cases()


# ======================================================================================
# Running
# ======================================================================================
@dataclass
class Result:
    case: Case
    code: int | None = None
    signal: int | None = None
    wall_s: float = 0.0
    rss_bytes: int = 0
    stdout: str = ""
    stderr: str = ""
    outcome: str = ""
    why: str = ""
    extra: dict[str, Any] = field(default_factory=dict)


def _prepare_dir(case: Case, run_dir: Path) -> list[str]:
    run_dir.mkdir(parents=True)
    for name, content in case.files:
        (run_dir / name).write_bytes(content)
    if case.setup == "fifo":
        os.mkfifo(run_dir / "study.toml")
    return [a.replace("{dir}", str(run_dir)) for a in case.argv]


def _rss_now(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/statm") as f:
            return int(f.read().split()[1]) * _PAGE
    except (OSError, ValueError, IndexError):
        return 0


def _fork_run(argv: list[str], run_dir: Path) -> int:
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid:
        return pid
    code = 1
    try:  # the child: the real entry point with its own stdio
        os.chdir(run_dir)
        for fd, name, mode in ((0, os.devnull, os.O_RDONLY),
                               (1, str(run_dir / "stdout"), os.O_WRONLY | os.O_CREAT),
                               (2, str(run_dir / "stderr"), os.O_WRONLY | os.O_CREAT)):
            os.dup2(os.open(name, mode, 0o600), fd)
        sys.stdin = io.TextIOWrapper(io.FileIO(0, "r", closefd=False), encoding="utf-8")
        sys.stdout = io.TextIOWrapper(io.FileIO(1, "w", closefd=False), encoding="utf-8",
                                      write_through=True)
        sys.stderr = io.TextIOWrapper(io.FileIO(2, "w", closefd=False), encoding="utf-8",
                                      write_through=True)
        sys.argv = ["loopscout", *argv]
        from explorer.cli.app import main

        code = main(argv)
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    except BaseException:  # noqa: BLE001 - a raw traceback is what the tally counts
        traceback.print_exc()
        code = 1
    finally:
        try:
            sys.stdout.flush()
            sys.stderr.flush()
        finally:
            os._exit(int(code) & 0xFF)
    return 0  # not reached


def _fresh_run(argv: list[str], run_dir: Path) -> int:
    env = {**os.environ, "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
           "MKL_NUM_THREADS": "1", "PYTHONIOENCODING": "utf-8"}
    with open(run_dir / "stdout", "wb") as out, open(run_dir / "stderr", "wb") as err:
        p = subprocess.Popen([sys.executable, "-m", "explorer", *argv], cwd=run_dir,
                             stdin=subprocess.DEVNULL, stdout=out, stderr=err, env=env)
    return p.pid


def _classify(r: Result, run_dir: Path) -> None:
    c = r.case
    err = r.stderr
    lines = err.splitlines()
    if r.outcome in ("hang", "blow-up"):
        return
    if r.rss_bytes > RSS_BUDGET:
        r.outcome, r.why = "blow-up", f"peak RSS {r.rss_bytes / 2**30:.2f} GiB"
        return
    if r.signal is not None or r.code not in (0, 2) or "Traceback" in err \
            or "internal error" in err:
        r.outcome, r.why = "internal error", (lines[-1] if lines else f"signal {r.signal}")
        return
    if r.code == 2:
        clean = (r.stdout == "" and len(lines) == 1 and err.endswith("\n")
                 and lines[0].startswith("loopscout")
                 and not any(ord(ch) < 0x20 or 0x7F <= ord(ch) < 0xA0 for ch in lines[0])
                 and not any(len(t) > 30 and t.strip("-+.,;:()[]").isdigit()
                             for t in lines[0].split()))
        if not clean:
            r.outcome, r.why = "messy refusal", err[:300]
        elif c.expect == "answer":
            r.outcome, r.why = "wrong answer", "a valid input refused: " + lines[0]
        else:
            r.outcome = "cannot" if c.expect == "answer-or-cannot" else "refused"
            r.why = lines[0]
        return
    # exit 0
    if c.expect == "refuse":
        r.outcome, r.why = "wrong answer", "a hostile input was accepted"
        return
    try:
        ok, why = c.verify(run_dir) if c.verify else (True, "")
    except Exception as exc:  # noqa: BLE001 - an unreadable answer is a wrong one
        ok, why = False, f"{type(exc).__name__}: {exc}"
    r.outcome, r.why = ("answered", "") if ok else ("wrong answer", why)


def run_cases(cases: list[Case], jobs: int = 2, hang_limit_s: float = HANG_LIMIT_S,
              progress: bool = False) -> list[Result]:
    """Run every case (``jobs`` at a time) and classify it."""
    for mod in ("explorer.cli.app", "explorer.cli.balance", "explorer.cli.explore",
                "explorer.cli.report", "explorer.cli.implement", "explorer.search.exploration",
                "explorer.design.hand_designs", "explorer.outputs.report", "explorer.search.tune",
                "explorer.frequency.sampled",
                "explorer.evaluation.records", "explorer.model.study"):
        __import__(mod)
    results: list[Result] = []
    with tempfile.TemporaryDirectory(prefix="hostile-") as tmp:
        pending = list(enumerate(cases))
        running: dict[int, tuple[Result, Path, float]] = {}
        while pending or running:
            while pending and len(running) < jobs:
                i, case = pending.pop(0)
                run_dir = Path(tmp) / f"run{i:05d}"
                argv = _prepare_dir(case, run_dir)
                pid = (_fresh_run if case.fresh else _fork_run)(argv, run_dir)
                running[pid] = (Result(case), run_dir, time.monotonic())
            time.sleep(0.003)
            for pid in list(running):
                r, run_dir, t0 = running[pid]
                done, status, usage = os.wait4(pid, os.WNOHANG)
                if done == 0:
                    if time.monotonic() - t0 > hang_limit_s:
                        os.kill(pid, 9)
                        _, status, usage = os.wait4(pid, 0)
                        r.outcome, r.why = "hang", f"killed after {hang_limit_s:g} s"
                    elif _rss_now(pid) > RSS_KILL:
                        os.kill(pid, 9)
                        _, status, usage = os.wait4(pid, 0)
                        r.outcome, r.why = "blow-up", f"killed above {RSS_KILL >> 20} MiB"
                    else:
                        continue
                del running[pid]
                r.wall_s = time.monotonic() - t0
                r.rss_bytes = int(usage.ru_maxrss) * 1024
                if os.WIFSIGNALED(status):
                    r.signal = os.WTERMSIG(status)
                else:
                    r.code = os.WEXITSTATUS(status)
                r.stdout = (run_dir / "stdout").read_text(encoding="utf-8", errors="replace")
                r.stderr = (run_dir / "stderr").read_text(encoding="utf-8", errors="replace")
                _classify(r, run_dir)
                results.append(r)
                if progress:
                    print(f"{len(results):4d}/{len(cases)} {r.outcome:15s} {r.wall_s:6.2f} s "
                          f"{r.case.id[:70]}", file=sys.stderr)
    return results


OUTCOMES = ("refused", "answered", "cannot", "internal error", "hang", "blow-up",
            "wrong answer", "messy refusal")
FAILURES = ("internal error", "hang", "blow-up", "wrong answer", "messy refusal")


def tally(results: list[Result]) -> dict[str, Any]:
    counts = {o: 0 for o in OUTCOMES}
    for r in results:
        counts[r.outcome] += 1
    fresh = [r for r in results if r.case.fresh]
    return {
        "inputs": len({r.case.input for r in results}),
        "runs": len(results),
        "counts": counts,
        "by_command": _by_command(results),
        "max_wall_s": max((r.wall_s for r in results), default=0.0),
        "max_rss_mib": max((r.rss_bytes for r in results), default=0) / 2**20,
        "fresh_runs": len(fresh),
        "hang_limit_s": HANG_LIMIT_S,
        "rss_budget_mib": RSS_BUDGET / 2**20,
        "failures": [{"id": r.case.id, "outcome": r.outcome, "why": r.why}
                     for r in results if r.outcome in FAILURES],
    }


def _by_command(results: list[Result]) -> dict[str, dict[str, int]]:
    table: dict[str, dict[str, int]] = {}
    for r in results:
        cmd = r.case.argv[0] if r.case.argv else "(none)"
        row = table.setdefault(cmd, {o: 0 for o in OUTCOMES})
        row[r.outcome] += 1
    return table


def format_table(t: dict[str, Any]) -> str:
    cols = OUTCOMES
    head = f"{'command':10s} " + " ".join(f"{c:>14s}" for c in cols)
    lines = [head, "-" * len(head)]
    for cmd, row in sorted(t["by_command"].items()):
        lines.append(f"{cmd:10s} " + " ".join(f"{row[c]:14d}" for c in cols))
    lines.append(f"{'all':10s} " + " ".join(f"{t['counts'][c]:14d}" for c in cols))
    lines.append("")
    lines.append(f"{t['inputs']} inputs, {t['runs']} runs ({t['fresh_runs']} in a fresh "
                 f"interpreter); slowest run {t['max_wall_s']:.1f} s (hang limit "
                 f"{t['hang_limit_s']:g} s), largest peak RSS {t['max_rss_mib']:.0f} MiB "
                 f"(budget {t['rss_budget_mib']:.0f} MiB)")
    for f in t["failures"]:
        lines.append(f"FAIL {f['outcome']}: {f['id']}: {f['why'][:200]}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    import argparse

    ap = argparse.ArgumentParser(description="the hostile-input tally (issue 19)")
    ap.add_argument("--json", action="store_true", help="print the tally as JSON")
    ap.add_argument("--group", choices=("all", "corpus", "found", "random"), default="all")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--progress", action="store_true")
    args = ap.parse_args(argv)
    cases = all_cases()
    if args.group != "all":
        cases = [c for c in cases if c.group == args.group]
    t0 = time.monotonic()
    results = run_cases(cases, jobs=args.jobs, progress=args.progress)
    t = tally(results)
    t["total_wall_s"] = time.monotonic() - t0
    if args.json:
        print(json.dumps(t))
    else:
        print(format_table(t))
        print(f"total {t['total_wall_s']:.0f} s on {args.jobs} jobs")
    return 1 if any(t["counts"][o] for o in FAILURES) else 0



# ======================================================================================
# Random study documents (seeded): refused in one line, or answered correctly
# ======================================================================================
def _random_roots(rng: np.random.Generator, n: int, lo: float, hi: float) -> list[complex]:
    out: list[complex] = []
    while len(out) < n:
        mag = 10.0 ** rng.uniform(lo, hi)
        if len(out) + 2 <= n and rng.random() < 0.4:
            zeta = rng.uniform(0.01, 0.95)
            re, im = -zeta * mag, mag * math.sqrt(1 - zeta * zeta)
            out += [complex(re, im), complex(re, -im)]
        else:
            out.append(complex(-mag if rng.random() < 0.85 else mag, 0.0))
    return out


def random_documents(n: int = 60, seed: int = 19) -> list[tuple[str, str, Rational, Rational]]:
    """(id, study text, plant, compensator): root magnitudes drawn over 1e±5 rad/s, plant
    gains over 1e±40, delays over 1e±4 s, so that part falls outside the numerical
    domain (spans, delays) and part inside."""
    rng = np.random.default_rng(seed)
    docs = []
    for i in range(n):
        npl = int(rng.integers(0, 7))
        plant = Rational(gain=float((-1) ** rng.integers(0, 2) * 10.0 ** rng.uniform(-40, 40)),
                         zeros=tuple(_random_roots(rng, int(rng.integers(0, npl + 1)), -5, 5)),
                         poles=tuple(_random_roots(rng, npl, -5, 5)),
                         delay_s=0.0 if rng.random() < 0.5 else float(10.0 ** rng.uniform(-4, 4)))
        nc = int(rng.integers(1, 4))
        comp = Rational(gain=float(10.0 ** rng.uniform(-10, 10)),
                        zeros=tuple(_random_roots(rng, int(rng.integers(0, nc + 1)), -4, 4)),
                        poles=(0.0, *_random_roots(rng, nc - 1, -4, 4)))
        docs.append((f"random {i:02d}", extreme_study(plant, comp), plant, comp))
    return docs


def _direct(loop: Rational, w: float) -> tuple[float, float, complex]:
    """ln|L(jω)|, phase (deg, unwrapped sum of root angles) and L(jω), root by root."""
    s = 1j * w
    lm = math.log(abs(loop.gain)) + sum(math.log(abs(s - z)) for z in loop.zeros) \
        - sum(math.log(abs(s - p)) for p in loop.poles)
    ph = sum(np.angle(s - z) for z in loop.zeros) - sum(np.angle(s - p) for p in loop.poles) \
        - w * loop.delay_s + (math.pi if loop.gain < 0 else 0.0)
    return lm, math.degrees(ph), complex(math.exp(lm) * np.exp(1j * ph))


def verify_attained(plant: Rational, comp: Rational, m: dict[str, Any]) -> Verdict:
    """Checks that hold for any loop, however extreme: every reported crossover has
    |L| = 1 and the phase margin is 180° + its phase (mod 360°), both evaluated root by
    root here; the reference's crossovers (magnitude only, on the loop time-scaled to
    its crossover) are the reported ones; Ms is attained at the reported frequency and
    no point of the reference's dense grid exceeds it (a grid can miss a narrow peak,
    never exceed the true one)."""
    from reference_loop import reference_metrics

    if not _finite_numbers(m):
        return False, "a printed number is not finite"
    loop = plant * comp
    wcs = m["crossovers_rad_s"]
    for w in wcs:
        if abs(_direct(loop, w)[0]) > 1e-8:
            return False, f"|L| ≠ 1 at the reported crossover {w}"
    if m["crossover_rad_s"] is not None:
        ph = _direct(loop, m["crossover_rad_s"])[1]
        if abs((m["phase_margin_deg"] - 180.0 - ph + 180.0) % 360.0 - 180.0) > 1e-6 * max(
                1.0, abs(ph)):
            return False, f"phase margin {m['phase_margin_deg']} vs phase {ph} at wc"
    roots = [abs(r) for r in (*loop.zeros, *loop.poles) if r] + list(wcs)
    w0 = m["crossover_rad_s"] or (math.sqrt(min(roots) * max(roots)) if roots else 1.0)
    lo, hi = (min(roots) / w0 / 1e3, max(roots) / w0 * 1e3) if roots else (1e-3, 1e3)
    scaled = _time_scaled(Rational(gain=loop.gain, zeros=loop.zeros, poles=loop.poles),
                          1.0 / w0)
    ref = reference_metrics(scaled, w_lo=min(lo, 1e-3), w_hi=max(hi, 1e3), points=2000)
    got = sorted(w / w0 for w in wcs)
    want = sorted(ref["crossovers_rad_s"])
    if len(got) != len(want) or any(abs(a - b) > 1e-6 * b for a, b in zip(got, want,
                                                                          strict=True)):
        return False, f"crossovers {got} vs reference {want} (× {w0:g} rad/s)"
    if m["sensitivity_peak_rad_s"] is not None:
        w = m["sensitivity_peak_rad_s"]
        val = _direct(loop, w)[2]
        at = 1.0 / abs(1.0 + val)
        # the phase of e^{-jωτ} is known to ωτ·2⁻⁵² rad only: at ωτ = 1e12 rad (a
        # crossover of 5e13 rad/s behind 18 ms) Ms is rounding-limited; the bound allows
        # for that conditioning (docs/hostile-input.md, "Left")
        dphi = 8.0 * 2.0**-52 * (w * loop.delay_s + len(loop.zeros) + len(loop.poles))
        if abs(at - m["sensitivity_peak"]) > (1e-6 + 10.0 * at * abs(val) * dphi) * at:
            return False, f"Ms {m['sensitivity_peak']} not attained ({at})"
    if loop.delay_s == 0 and ref["sensitivity_peak"] > m["sensitivity_peak"] * (1 + 1e-6):
        return False, f"Ms {m['sensitivity_peak']} below the reference {ref['sensitivity_peak']}"
    return True, ""


def _verify_random(plant: Rational, comp: Rational):
    def check(run_dir: Path) -> Verdict:
        return verify_attained(plant, comp, _json_out(run_dir)["designs"][0]["metrics"])
    return check


if __name__ == "__main__":
    raise SystemExit(main())
