"""`loopscout implement`: docs/interface.md JSON keys, the sections against the discrete
compensator (scipy.signal.sosfreqz), --from designs.json, the CSV, the caution and
the plain-words notes, the long-sample-time warning, and one-line errors (exit 2)."""

from __future__ import annotations

import csv
import json
import math
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import signal

from explorer.cli import main
from explorer.core.caution import CAUTION
from explorer.frequency.metrics import frequency_metrics
from explorer.model.study import load_study

ROOT = Path(__file__).resolve().parents[1]
CONVEYOR = str(ROOT / "studies" / "conveyor_speed.toml")
KILN = str(ROOT / "studies" / "kiln_damper.toml")

INTERFACE_KEYS = {
    "design", "sample_time_s", "compute_delay_s", "method", "prewarp_rad_s", "discrete",
    "sections", "continuous_metrics", "sampled_metrics", "phase_loss_deg",
}
SAMPLED_KEYS = {"crossover_rad_s", "phase_margin_deg", "gain_margin_db", "sensitivity_peak",
                "closed_loop_stable"}


def _run_json(capsys: pytest.CaptureFixture[str], *argv: str) -> dict[str, Any]:
    assert main(["implement", *argv, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_json_has_interface_keys(capsys: pytest.CaptureFixture[str]) -> None:
    """docs/interface.md "Implementation hand-off": every key, the prewarp at the design's
    crossover (as the metric engine finds it), a0 = 1, the caution and notes."""
    obj = _run_json(capsys, CONVEYOR, "--design", "PI + lead", "--sample-time", "0.05")
    assert INTERFACE_KEYS <= set(obj)
    assert SAMPLED_KEYS <= set(obj["sampled_metrics"])
    assert set(obj["discrete"]) == {"gain", "zeros", "poles"}
    assert obj["design"] == "PI + lead" and obj["method"] == "tustin-prewarp"
    assert obj["sample_time_s"] == 0.05 and obj["compute_delay_s"] == 0.0
    study = load_study(CONVEYOR)
    comp = study.compensators[2].compensator
    wc = frequency_metrics(study.plant, comp)["crossover_rad_s"]
    assert obj["prewarp_rad_s"] == pytest.approx(wc, rel=1e-12)
    assert obj["continuous_metrics"]["crossover_rad_s"] == pytest.approx(wc, rel=1e-12)
    for sec in obj["sections"]:
        assert len(sec["b"]) == 3 and len(sec["a"]) == 3 and sec["a"][0] == 1.0
    assert obj["phase_loss_deg"] == pytest.approx(
        obj["continuous_metrics"]["phase_margin_deg"] - obj["sampled_metrics"]["phase_margin_deg"]
    )
    assert obj["caution"] == CAUTION
    text = " ".join(obj["notes"]).lower()
    for word in ("actuator", "anti-windup", "quantisation", "hold"):
        assert word in text
    assert obj["industrial_form"]["structure"] == "PID with derivative filter"


def test_sections_multiply_to_discrete_compensator(capsys: pytest.CaptureFixture[str]) -> None:
    """The printed sections' product (scipy.signal.sosfreqz) equals C(z) from the
    printed roots form, and the roots form equals C(s) at the prewarp frequency (the
    prewarped map is exact there)."""
    obj = _run_json(capsys, KILN, "--design", "PI + lead", "--sample-time", "1",
                    "--compute-delay", "0.3")
    T = obj["sample_time_s"]
    sos = np.array([[*s["b"], *s["a"]] for s in obj["sections"]])
    w = np.linspace(0.001, 0.99 * math.pi / T, 200)
    _, h = signal.sosfreqz(sos, worN=w * T)
    d = obj["discrete"]
    z = np.exp(1j * w * T)
    cz = d["gain"] * np.prod([z - complex(r) for r in d["zeros"]], axis=0) / np.prod(
        [z - complex(r) for r in d["poles"]], axis=0)
    np.testing.assert_allclose(h, cz, rtol=1e-9)
    study = load_study(KILN)
    comp = next(c.compensator for c in study.compensators if c.name == "PI + lead")
    wp = obj["prewarp_rad_s"]
    zp = np.exp(1j * wp * T)
    cz_p = d["gain"] * np.prod([zp - complex(r) for r in d["zeros"]]) / np.prod(
        [zp - complex(r) for r in d["poles"]])
    assert cz_p == pytest.approx(comp.freqresp(np.array([wp]))[0], rel=1e-9)


def test_from_designs_json_and_csv(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A design read from an exploration's designs.json (complex roots as strings)
    gives the same sections as the same compensator elsewhere; the CSV holds them
    with 17 significant digits and the stage names (read back with the csv module)."""
    designs = {"designs": [
        {"name": "other", "compensator": {"gain": 1.0, "zeros": [], "poles": [-1.0]}},
        {"name": "tuned 2", "origin": "optimized",
         "compensator": {"gain": 60.0, "zeros": ["-0.4+0.3j", "-0.4-0.3j"], "poles": [0, -7.5]}},
    ]}
    path = tmp_path / "designs.json"
    path.write_text(json.dumps(designs))
    out_csv = tmp_path / "sections.csv"
    obj = _run_json(capsys, CONVEYOR, "--from", str(path), "--design", "tuned 2",
                    "--sample-time", "0.02", "--csv", str(out_csv))
    assert obj["design"] == "tuned 2"
    rows = [r for r in csv.reader(out_csv.open()) if r and not r[0].startswith("#")]
    assert rows[0] == ["section", "b0", "b1", "b2", "a0", "a1", "a2", "stage"]
    assert len(rows) - 1 == len(obj["sections"])
    for row, sec in zip(rows[1:], obj["sections"], strict=True):
        assert [float(x) for x in row[1:7]] == [*sec["b"], *sec["a"]]
        assert row[7] == sec["stage"]
    assert CAUTION in out_csv.read_text()


def test_pure_gain_design(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A proportional-only design: one section b = [k, 0, 0], a = [1, 0, 0] (closed
    form: C(z) = k), the P form, and the sampled loop still evaluated."""
    path = tmp_path / "designs.json"
    path.write_text('{"designs": [{"name": "k", "compensator": {"gain": 2.5}}]}')
    obj = _run_json(capsys, str(ROOT / "studies" / "drum_level.toml"), "--from", str(path),
                    "--design", "k", "--sample-time", "0.5")
    assert obj["sections"][0]["b"] == [2.5, 0.0, 0.0] and obj["sections"][0]["a"] == [1, 0, 0]
    assert obj["industrial_form"]["parallel"] == {"kp": 2.5}
    # the sampled verdict against scipy: ZOH of the plant (scipy.signal.cont2discrete),
    # closed-loop poles = roots of den_H(z) + k·num_H(z) (numpy.roots); the drum is
    # direct-acting with a right-half-plane zero: small k stable, large or negative k not
    verdicts = []
    for k in (2.5, 0.05, 0.3, 1.0, -0.3):
        path.write_text(json.dumps({"designs": [{"name": "k", "compensator": {"gain": k}}]}))
        obj = _run_json(capsys, str(ROOT / "studies" / "drum_level.toml"), "--from",
                        str(path), "--design", "k", "--sample-time", "0.5")
        num, den = signal.zpk2tf([0.25], [0.0, -0.5], -1.0)
        num_d, den_d, _ = signal.cont2discrete((num, den), 0.5, method="zoh")
        num_d = np.trim_zeros(np.ravel(num_d), "f")
        char = np.polyadd(den_d, k * num_d)
        stable = bool(np.max(np.abs(np.roots(char))) < 1.0)
        assert obj["sampled_metrics"]["closed_loop_stable"] is stable, k
        verdicts.append(stable)
    assert True in verdicts and False in verdicts  # both verdicts exercised


def test_long_sample_time_warns_with_figures(capsys: pytest.CaptureFixture[str]) -> None:
    """ωc·T above the rule's 0.5 rad (common practice): a warning naming ωc·T and the
    longest sample time within the rule."""
    obj = _run_json(capsys, KILN, "--design", "PI + lead", "--sample-time", "12")
    wc = obj["continuous_metrics"]["crossover_rad_s"]
    assert obj["wc_T_rad"] == pytest.approx(wc * 12)
    msg = next(w for w in obj["warnings"] if "long for the crossover" in w)
    assert f"{wc * 12:.3g}" in msg and f"{0.5 / wc:.3g}" in msg
    obj = _run_json(capsys, KILN, "--design", "PI + lead", "--sample-time", "1")
    assert not any("long for the crossover" in w for w in obj["warnings"])


def test_text_output_readable(capsys: pytest.CaptureFixture[str]) -> None:
    """Plain text: the discrete compensator, the section table, the difference
    equations, the PI form, the loop table, what is not modelled, the caution."""
    assert main(["implement", CONVEYOR, "--design", "PI", "--sample-time", "0.05"]) == 0
    out = capsys.readouterr().out
    for part in ("C(z) =", "sections, run in this order", "difference equations:",
                 "u[k] =", "industrial form", "Ti = 3", "phase lost to sampling",
                 "not modelled:", CAUTION):
        assert part in out


def _error(capsys: pytest.CaptureFixture[str], *argv: str) -> str:
    with pytest.raises(SystemExit) as exc:  # argparse errors exit from the parser
        main(["implement", *argv])
    assert exc.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    return err


@pytest.mark.parametrize("value", ["0", "-0.1", "abc", "nan", "inf"])
def test_bad_sample_time(capsys: pytest.CaptureFixture[str], value: str) -> None:
    err = _error(capsys, CONVEYOR, "--design", "PI", "--sample-time", value)
    assert "--sample-time" in err and "positive number of seconds" in err


def _fails(capsys: pytest.CaptureFixture[str], *argv: str) -> str:
    assert main(["implement", *argv]) == 2
    cap = capsys.readouterr()
    assert cap.out == "" and cap.err.count("\n") == 1 and "Traceback" not in cap.err
    return cap.err


def test_unknown_design_lists_names(capsys: pytest.CaptureFixture[str]) -> None:
    err = _fails(capsys, CONVEYOR, "--design", "PID", "--sample-time", "0.1")
    assert "'PID'" in err and "'PI', 'PI slow integral', 'PI + lead'" in err


def test_prewarp_above_nyquist(capsys: pytest.CaptureFixture[str]) -> None:
    """The design's crossover 0.81 rad/s is above π/T for T = 5 s."""
    err = _fails(capsys, CONVEYOR, "--design", "PI", "--sample-time", "5")
    assert "Nyquist" in err and "π/T" in err


@pytest.mark.parametrize(
    "content, words",
    [
        (None, "no such file"),
        ("", "not JSON"),
        ("{not json", "not JSON"),
        ('[1, 2]', "expected an object"),
        ('{"designs": [{"name": "x", "compensator": {"gain": 1, "zeros": [-1, -2], '
         '"poles": [0]}}]}', "improper"),
        ('{"designs": [{"name": "x", "compensator": {"gain": 1, "zeros": ["-1+2j"], '
         '"poles": [0, -3]}}]}', "conjugate"),
        ('{"designs": [{"name": "x", "compensator": {"gain": 1, "zeros": ["two"], '
         '"poles": [0]}}]}', "not a root"),
        ('{"designs": [{"name": "y", "compensator": {"gain": 1, "poles": [0]}}]}', "'y'"),
    ],
)
def test_bad_from_file(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                       content: str | None, words: str) -> None:
    path = tmp_path / "designs.json"
    if content is not None:
        path.write_text(content)
    err = _fails(capsys, CONVEYOR, "--from", str(path), "--design", "x", "--sample-time", "0.1")
    assert words.lower() in err.lower()


def test_subprocess_one_line_exit_2() -> None:
    """The installed entry point (python -m explorer): one line, exit status 2."""
    proc = subprocess.run(
        [sys.executable, "-m", "explorer", "implement", CONVEYOR, "--design", "nope",
         "--sample-time", "0.1"],
        capture_output=True, text=True, timeout=120,
    )
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and "available" in proc.stderr


def test_sample_time_from_the_study(capsys: pytest.CaptureFixture[str]) -> None:
    """Without --sample-time the study's [search] sample_time and compute_delay are used
    (the sampled controller the exploration judged); a study without one is refused."""
    plc = str(ROOT / "studies" / "conveyor_plc.toml")
    obj = _run_json(capsys, plc, "--design", "PI + lead")
    assert obj["sample_time_s"] == 0.1 and obj["compute_delay_s"] == 0.02
    obj = _run_json(capsys, plc, "--design", "PI + lead", "--compute-delay", "0")
    assert obj["sample_time_s"] == 0.1 and obj["compute_delay_s"] == 0.0
    rc = main(["implement", str(ROOT / "studies" / "conveyor_speed.toml"), "--design", "PI"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and "--sample-time is required" in err and "\n" not in err
