"""The command line: docs/interface.md JSON, readable tables, one-line errors with exit 2."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from explorer.cli import main
from explorer.core.loop import Rational
from explorer.evaluation.records import METRIC_KEYS
from explorer.frequency.metrics import frequency_metrics
from explorer.model.study import load_study

ROOT = Path(__file__).resolve().parents[1]
STUDIES = sorted((ROOT / "studies").glob("*.toml"))
DESIGN_KEYS = {
    "name",
    "origin",
    "structure",
    "order",
    "compensator",
    "meets_targets",
    "pareto",
    "metrics",
}


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("path", STUDIES, ids=[p.stem for p in STUDIES])
def test_check_json_follows_interface(path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = run(capsys, "check", str(path), "--json")
    assert code == 0, err
    obj = json.loads(out)  # exactly one JSON object
    study = load_study(path)
    assert len(obj["designs"]) == len(study.compensators)
    for design, entry in zip(obj["designs"], study.compensators, strict=True):
        assert DESIGN_KEYS <= set(design)
        assert design["origin"] == "given"
        assert design["name"] == entry.name
        assert design["order"] == entry.compensator.order
        assert set(METRIC_KEYS) <= set(design["metrics"])
        assert isinstance(design["meets_targets"], bool)
        # the numbers are the metric engine's, not a re-typed copy
        if study.measured is None:
            fm = frequency_metrics(study.plant, entry.compensator)
        else:  # a measured plant: read on the data (explorer.frequency.on_data)
            from explorer.frequency.on_data import loop_metrics_on_data

            fm = loop_metrics_on_data(study.measured.data, entry.compensator,
                                      unstable_poles=study.measured.unstable_poles,
                                      plant_integrators=study.measured.integrators)
        assert design["metrics"]["phase_margin_deg"] == fm["phase_margin_deg"]
        c = design["compensator"]
        again = Rational(
            gain=c["gain"],
            zeros=[complex(z) for z in c["zeros"]],
            poles=[complex(p) for p in c["poles"]],
        )
        assert again == entry.compensator


def test_check_table_shows_units_and_caution(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(capsys, "check", str(ROOT / "studies" / "kiln_damper.toml"))
    assert code == 0
    for text in (
        "phase margin [deg]",
        "crossover [rad/s]",
        "gain margin [dB]",
        "delay margin [s]",
        "Ms",
        "Caution",
    ):
        assert text in out


def test_integral_gain_sign(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    """integral_gain = lim s·C(s) = 0.85·0.02 for C = 0.85(s+0.02)/s (docs/interface.md)."""
    f = tmp_path / "s.toml"
    f.write_text(
        "[plant]\ngain = 1.0\npoles = [-1.0]\n[targets]\nintegrators = 1\n"
        '[[compensator]]\nname = "pi"\ngain = 0.85\nzeros = [-0.02]\npoles = [0]\n'
    )
    code, out, _ = run(capsys, "check", str(f), "--json")
    assert code == 0
    assert json.loads(out)["designs"][0]["metrics"]["integral_gain"] == pytest.approx(0.017)


BAD = {
    "missing_integrators": (
        "[plant]\ngain=1\npoles=[-1]\n[targets]\ncrossover=1\n",
        "targets.integrators",
    ),
    "lone_complex": (
        '[plant]\ngain=1\npoles=[-1, "-2+1j"]\n[targets]\nintegrators=1\n',
        "plant.poles",
    ),
    "negative_delay": (
        "[plant]\ngain=1\npoles=[-1]\ndelay=-1\n[targets]\nintegrators=1\n",
        "plant.delay",
    ),
    "unknown_key": (
        "[plant]\ngain=1\npoles=[-1]\n[targets]\nintegrators=1\nfoo=2\n",
        "targets.foo",
    ),
    "nan": ("[plant]\ngain=nan\npoles=[-1]\n[targets]\nintegrators=1\n", "plant.gain"),
    "improper": ("[plant]\ngain=1\nzeros=[-1,-2]\npoles=[-1]\n[targets]\nintegrators=1\n", "plant"),
    "syntax": ("[plant\ngain=1\n", "TOML"),
    "text_number": ('[plant]\ngain="two"\npoles=[-1]\n[targets]\nintegrators=1\n', "plant.gain"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_study_one_line_exit_2(
    case: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    text, needle = BAD[case]
    f = tmp_path / f"{case}.toml"
    f.write_text(text + '[[compensator]]\nname="a"\ngain=1\n' if case != "syntax" else text)
    code, out, err = run(capsys, "check", str(f))
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1 and err.startswith("loopscout: error:")
    assert needle in err
    assert "Traceback" not in err


def test_unreadable_and_usage_errors(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    code, _, err = run(capsys, "check", str(tmp_path / "absent.toml"))
    assert code == 2 and err.count("\n") == 1 and "absent.toml" in err
    code, _, err = run(capsys, "check", str(tmp_path))
    assert code == 2 and "directory" in err
    with pytest.raises(SystemExit) as exc:
        main(["check"])
    assert exc.value.code == 2
    assert capsys.readouterr().err.count("\n") == 1


def test_help_has_an_example(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as exc:
        main(["check", "--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    assert "loopscout check studies/" in out and "Caution" in out


def test_python_dash_m_and_console_script_agree(tmp_path: Path) -> None:
    """`python -m explorer` behaves like `loopscout` (docs/interface.md names)."""
    study = str(ROOT / "studies" / "dome_drive.toml")
    res = subprocess.run(
        [sys.executable, "-m", "explorer", "check", study, "--json"],
        capture_output=True,
        text=True,
    )
    assert res.returncode == 0, res.stderr
    assert json.loads(res.stdout)["designs"]
    bad = tmp_path / "b.toml"
    bad.write_text("[plant]\ngain=1\n")
    res = subprocess.run(
        [sys.executable, "-m", "explorer", "check", str(bad)], capture_output=True, text=True
    )
    assert res.returncode == 2 and res.stderr.count("\n") == 1


def test_a_console_that_cannot_encode_the_symbols_still_gets_the_table() -> None:
    """ω, ∞ and — become '?' on an ASCII console instead of an internal error."""
    import os

    env = dict(os.environ, PYTHONIOENCODING="ascii")
    run_ = subprocess.run(
        [sys.executable, "-m", "explorer", "check", str(ROOT / "studies" / "kiln_damper.toml")],
        capture_output=True, env=env, cwd=ROOT, check=False,
    )
    assert run_.returncode == 0, run_.stderr
    assert b"hf gain |C(j?)|" in run_.stdout and b"Caution" in run_.stdout


def test_margins_of_an_unstable_loop_are_marked(tmp_path, capsys) -> None:
    """A pure integral gain of 50 on 1/((s+1)(s+2)) is unstable (Routh: s³+3s²+2s+50
    has 3·2 < 50); its 'phase margin' is printed, but marked as no margin."""
    f = tmp_path / "hot.toml"
    f.write_text('[plant]\ngain=1\npoles=[-1,-2]\n[targets]\ncrossover=1\nphase_margin=50\n'
                 'integrators=1\n[[compensator]]\nname="hot"\ngain=50\npoles=[0]\n')
    assert main(["check", str(f)]) == 0
    out = capsys.readouterr().out
    pm_row = next(line for line in out.splitlines() if line.startswith("phase margin"))
    assert pm_row.rstrip().endswith("*") and "closed loop unstable" in out
    assert main(["check", str(f), "--json"]) == 0
    (d,) = json.loads(capsys.readouterr().out)["designs"]
    assert d["metrics"]["closed_loop_stable"] is False and d["margins_valid"] is False


def test_a_hidden_unstable_mode_is_not_a_stable_loop(tmp_path, capsys) -> None:
    """Plant s/((s+1)(s+2)) (a zero at s = 0) under C = k(s+0.5)²/s²: L = C·P shows one
    integrator and a Nyquist-stable loop, but the compensator's second integrator
    cancels the plant's zero. Independent check with numpy polynomials: the transfer
    from the reference to the control signal, C/(1+CP) = k(s+0.5)²(s+1)(s+2) /
    (s²(s+1)(s+2) + k·s(s+0.5)²), keeps a pole at s = 0 — the control signal ramps for
    a step, so the closed loop is not internally stable."""
    k = 2.0
    den_u = np.polyadd(np.polymul([1, 0, 0], np.polymul([1, 1], [1, 2])),
                       k * np.polymul([1, 0], np.polymul([1, 0.5], [1, 0.5])))
    assert np.min(np.abs(np.roots(den_u))) < 1e-12
    f = tmp_path / "hidden.toml"
    f.write_text('[plant]\ngain=1\nzeros=[0]\npoles=[-1,-2]\n[targets]\ncrossover=1\n'
                 'phase_margin=50\nintegrators=1\n[[compensator]]\nname="double I"\n'
                 f'gain={k}\nzeros=[-0.5,-0.5]\npoles=[0,0]\n')
    assert main(["check", str(f), "--json"]) == 0
    (d,) = json.loads(capsys.readouterr().out)["designs"]
    assert d["metrics"]["closed_loop_stable"] is False and d["meets_targets"] is False
    assert d["metrics"]["peak_control"] is None
    assert any("hidden unstable mode" in m for m in d["misses"])


def test_a_missing_dependency_is_named_not_called_a_defect(capsys, monkeypatch) -> None:
    """An environment without a required package (here: the report module made
    unimportable for this call) gets one line naming the package and the install
    command, exit 1 — not 'internal error (a defect of loopscout)'."""
    import builtins

    real_import = builtins.__import__

    def no_altair(name, *args, **kwargs):
        if name == "explorer.outputs.report" or name.startswith("altair"):
            raise ModuleNotFoundError(f"No module named {name!r}", name="altair")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_altair)
    code = main(["report", str(ROOT / "studies" / "kiln_damper.toml"), "--out", "/dev/null"])
    err = capsys.readouterr().err
    assert code == 1 and err.count("\n") == 1
    assert "'altair' is not installed" in err and "defect" not in err
