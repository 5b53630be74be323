"""The exploration on the sampled loop (``[search] sample_time``; explorer.design.sampled_design).

Checks: bad input at the boundary (one line, exit 2); the search's batch figures against
the one-design evaluator; every design that claims meets_targets on a sampled study
re-checked independently — the one-design explorer.frequency.sampled.sampled_loop_metrics, and a
dense brute-force evaluation of the loop built from scipy.signal.cont2discrete ("zoh"
for the plant, "bilinear" with the prewarped step 2/c for the compensator;
Åström & Wittenmark, Computer-Controlled Systems, 3rd ed. 1997, §2.3 for the ZOH
sampling) with closed-loop stability from the roots of the characteristic polynomial;
and as T → 0 the sampled figures tend to the continuous ones."""

from __future__ import annotations

import math
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from explorer.core.errors import StudyFileError
from explorer.core.loop import Rational
from explorer.model.study import parse_study

ROOT = Path(__file__).resolve().parents[1]

# an invented PLC-driven belt: three lags (as the bundled conveyor study)
BASE = {
    "plant": {"num": [0.05], "den": [0.375, 2.375, 3.75, 1.0]},
    "targets": {"crossover": 0.8, "phase_margin": 55, "integrators": 1},
    "limits": {"sensitivity_peak": 1.7},
}


@pytest.mark.parametrize("search,key,text", [
    ({"sample_time": 0}, "search.sample_time", "must be in (0"),
    ({"sample_time": -0.1}, "search.sample_time", "must be in (0"),
    ({"sample_time": "0.1"}, "search.sample_time", "must be a number"),
    ({"sample_time": True}, "search.sample_time", "must be a number"),
    ({"sample_time": math.inf}, "search.sample_time", "finite"),
    ({"compute_delay": 0.01}, "search.compute_delay", "needs `search.sample_time`"),
    ({"sample_time": 0.1, "compute_delay": -1}, "search.compute_delay", "must be in [0"),
    ({"sample_time": 1e-7, "compute_delay": 0.01}, "search.sample_time", "periods of delay"),
])
def test_bad_sample_time(search: dict, key: str, text: str) -> None:
    with pytest.raises(StudyFileError) as e:
        parse_study({**BASE, "search": search})
    assert e.value.key == key and text in str(e.value)
    assert "\n" not in str(e.value)


def test_refused_with_a_family() -> None:
    with pytest.raises(StudyFileError, match="plant family"):
        parse_study({**BASE, "search": {"sample_time": 0.1}, "variation": {"gain": [0.8, 1.2]}})


def test_refused_with_measured_data_on_the_command_line(tmp_path: Path) -> None:
    src = ROOT / "studies" / "hopper_gate.toml"
    if not src.exists():
        pytest.skip("no measured-plant study in this tree")
    (tmp_path / "data").mkdir()
    shutil.copy(ROOT / "studies" / "data" / "hopper_gate_sweep.csv", tmp_path / "data")
    text = src.read_text(encoding="utf-8").replace("[search]\n", "[search]\nsample_time = 0.05\n")
    study = tmp_path / "gate.toml"
    study.write_text(text, encoding="utf-8")
    r = subprocess.run([sys.executable, "-m", "explorer", "check", str(study)],
                       capture_output=True, text=True, cwd=tmp_path)
    assert r.returncode == 2
    assert r.stderr.strip().count("\n") == 0
    assert "sampled search needs a model plant" in r.stderr


def test_bad_sample_time_exit_2(tmp_path: Path) -> None:
    study = tmp_path / "belt.toml"
    study.write_text('[plant]\nnum = [0.05]\nden = [0.375, 2.375, 3.75, 1.0]\n'
                     '[targets]\ncrossover = 0.8\nphase_margin = 55\nintegrators = 1\n'
                     '[search]\nsample_time = "fast"\n', encoding="utf-8")
    r = subprocess.run([sys.executable, "-m", "explorer", "check", str(study)],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "search.sample_time" in r.stderr
    assert r.stderr.strip().count("\n") == 0 and "Traceback" not in r.stderr


def test_batch_figures_equal_the_record() -> None:
    """The search's batch readings (explorer.frequency.sampled_batch through tune.evaluate_batch)
    equal the re-check of the same design (explorer.frequency.sampled.sampled_loop_metrics)."""
    from explorer.design.structures import candidate_structures
    from explorer.evaluation.records import evaluated_record
    from explorer.search.exploration import make_problem
    from explorer.search.tune import evaluate_batch

    st = parse_study({**BASE, "search": {"sample_time": 0.1, "compute_delay": 0.03}})
    pr = make_problem(st)
    s = next(x for x in candidate_structures(st.plant, st.targets, st.search)
             if x.label == "I+lead")
    rng = np.random.default_rng(5)
    params = {k: rng.uniform(lo, hi, 16) for k, (lo, hi) in s.params.items()}
    res = evaluate_batch(pr, s, params, np.full(16, 0.8), time_domain=False)
    rows = [i for i in range(16) if res["metrics"]["closed_loop_stable"][i]]
    assert len(rows) >= 4
    for i in rows[:4]:
        comp = Rational(gain=float(res["gain"][i]), zeros=tuple(res["zeros"][i]),
                        poles=tuple(res["poles"][i]))
        rec = evaluated_record(st, comp, name="x", origin="optimized", structure=s.label)
        sm = rec["sampled_metrics"]
        for k in ("phase_margin_deg", "sensitivity_peak", "gain_margin_db"):
            assert np.isclose(res["metrics"][k][i], sm[k], rtol=1e-6), k
        # the correction passes put the sampled crossover and margin on target
        assert abs(sm["phase_margin_deg"] - 55.0) <= 0.05
        assert any(abs(x / 0.8 - 1) <= 1e-4 for x in sm["crossovers_rad_s"])


def _brute_force(plant: Rational, comp: Rational, T: float, wp: float, delay_samples: int
                 ) -> tuple[float, bool]:
    """(smallest phase margin on a dense grid, stable) of C(z)·H(z)·z^-m built with
    scipy.signal.cont2discrete only (delay-free plant, computation delay of m periods)."""
    num = plant.gain * np.real(np.poly(np.array(plant.zeros, complex)))
    den = np.real(np.poly(np.array(plant.poles, complex)))
    hn, hd, _ = signal.cont2discrete((num, den), T, method="zoh")
    hn = np.trim_zeros(np.ravel(hn), "f")
    c = wp / math.tan(wp * T / 2)
    cn = comp.gain * np.real(np.poly(np.array(comp.zeros, complex)))
    cd = np.real(np.poly(np.array(comp.poles, complex)))
    dn, dd, _ = signal.cont2discrete((cn, cd), 2.0 / c, method="bilinear")
    dn = np.ravel(dn)
    w = np.linspace(1e-4, math.pi / T, 400001)[:-1]
    z = np.exp(1j * w * T)
    L = (np.polyval(dn, z) / np.polyval(dd, z)) * (np.polyval(hn, z) / np.polyval(hd, z))
    L = L * z ** (-delay_samples)
    mag = np.abs(L)
    i = np.flatnonzero(np.diff(np.sign(mag - 1.0)) != 0)
    pms = [180.0 + math.degrees(np.angle(L[j])) for j in i]
    pms = [(p + 180.0) % 360.0 - 180.0 for p in pms]
    chi = np.polyadd(np.polymul(np.polymul(dd, hd), np.r_[1.0, np.zeros(delay_samples)]),
                     np.polymul(dn, hn))
    return min(pms), bool(np.max(np.abs(np.roots(chi))) < 1.0)


@pytest.fixture(scope="module")
def sampled_run(tmp_path_factory: pytest.TempPathFactory):
    from explorer.search.exploration import explore

    st = parse_study({**BASE, "search": {"sample_time": 0.25, "compute_delay": 0.25,
                                         "max_order": 2, "trials": 16, "seed": 4}},
                     source="belt_plc.toml")
    return st, explore(st, tmp_path_factory.mktemp("plc"), progress=False)


@pytest.mark.slow
def test_every_claim_holds_on_the_sampled_loop(sampled_run) -> None:
    """T = 0.25 s (ωc·T = 0.2 rad) and one period of computation delay: every design
    claiming meets_targets has a stable sampled loop with PM ≥ target − 0.05°, by the
    one-design evaluator and by the scipy-only brute force."""
    from explorer.frequency.sampled import (
        cont_loop_with,
        discretize,
        sample_plant,
        sampled_loop_metrics,
    )

    st, res = sampled_run
    ok = [d for d in res.designs if d["meets_targets"]]
    assert ok and res.obj["answer"]["design"] is not None
    assert "sampled at T = 0.25 s" in res.summary[1]
    sp = sample_plant(st.plant, 0.25, 0.25)
    for d in ok:
        comp = Rational(gain=d["compensator"]["gain"],
                        zeros=tuple(complex(x) for x in d["compensator"]["zeros"]),
                        poles=tuple(complex(x) for x in d["compensator"]["poles"]))
        wp = d["sampled_prewarp_rad_s"]
        one = sampled_loop_metrics(sp, discretize(comp, 0.25, "tustin-prewarp", wp),
                                   cont_loop_with(st.plant, comp, 0.25))
        assert one["closed_loop_stable"] and one["phase_margin_deg"] >= 55 - 0.05
        pm_bf, stable_bf = _brute_force(st.plant, comp, 0.25, wp, 1)
        assert stable_bf
        assert pm_bf >= 55 - 0.05 - 0.02  # the grid reads the crossover to ~1e-5 rad/s
        assert abs(pm_bf - d["sampled_metrics"]["phase_margin_deg"]) < 0.02
        # the continuous design has more margin than the sampled loop keeps
        assert d["metrics"]["phase_margin_deg"] > d["sampled_metrics"]["phase_margin_deg"]


@pytest.mark.slow
def test_short_sample_time_tends_to_continuous(tmp_path: Path) -> None:
    """As T → 0 the answer's sampled figures tend to its continuous ones (the loop
    L(e^{jωT}) → L(jω) for ωT → 0): the gap shrinks about in proportion to T."""
    from explorer.search.exploration import explore

    gaps = []
    for T in (0.04, 0.005):
        st = parse_study({**BASE, "search": {"sample_time": T, "max_order": 1, "trials": 8,
                                             "seed": 2}}, source="belt.toml")
        res = explore(st, tmp_path / f"T{T}", progress=False)
        d = next(x for x in res.designs if x["name"] == res.obj["answer"]["design"])
        m, s = d["metrics"], d["sampled_metrics"]
        gaps.append((abs(m["phase_margin_deg"] - s["phase_margin_deg"]),
                     abs(m["sensitivity_peak"] / s["sensitivity_peak"] - 1)))
        # the phase lost is close to the ωc·T/2 rule of thumb (common practice)
        rule = math.degrees(0.8 * T / 2)
        assert abs(gaps[-1][0] - rule) < 0.25 * rule + 0.02
    assert gaps[1][0] < gaps[0][0] / 4 and gaps[1][1] < gaps[0][1] / 4
    assert gaps[1][0] < 0.2


def test_summary_line_states_the_rule() -> None:
    """ωc·T and the hold's cost ωc·(T/2 + τc) in degrees; a warning past 0.5 rad
    (explorer.frequency.sampled.WC_T_WARN_RAD, common practice)."""
    from explorer.design.sampled_design import sampling_line

    ok = sampling_line(parse_study({**BASE, "search": {"sample_time": 0.1,
                                                       "compute_delay": 0.02}}))
    assert "ωc·T = 0.08 rad" in ok and f"{math.degrees(0.8 * 0.07):.2g}°" in ok
    assert "long" not in ok
    slow = sampling_line(parse_study({**BASE, "search": {"sample_time": 1.0}}))
    assert "ωc·T = 0.8 rad" in slow and "T is long for this crossover" in slow
