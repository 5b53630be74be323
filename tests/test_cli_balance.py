"""`loopscout balance`: docs/interface.md JSON with origin "phase-balanced"/"hand", the
designs re-checked by the metric engine, refusals with reasons, one-line errors."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from explorer.cli import main
from explorer.core.loop import Rational
from explorer.evaluation.records import meets_targets
from explorer.frequency.metrics import frequency_metrics
from explorer.model.study import load_study

ROOT = Path(__file__).resolve().parents[1]


def test_balance_json_designs_hit_targets(capsys: pytest.CaptureFixture[str]) -> None:
    """Kiln damper: the phase-balanced design hits ωc (1e-4 relative) and PM (0.05°),
    checked again by the metric engine from the printed compensator."""
    path = ROOT / "studies" / "kiln_damper.toml"
    assert main(["balance", str(path), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    study = load_study(path)
    balanced = [d for d in obj["designs"] if d["origin"] == "phase-balanced"]
    assert len(balanced) == 1
    for d in obj["designs"]:
        assert d["origin"] in ("phase-balanced", "hand")
        c = d["compensator"]
        comp = Rational(
            gain=c["gain"],
            zeros=[complex(z) for z in c["zeros"]],
            poles=[complex(p) for p in c["poles"]],
        )
        m = frequency_metrics(study.plant, comp)
        assert m["crossover_rad_s"] == pytest.approx(study.targets.crossover_rad_s, rel=1e-4)
        assert m["phase_margin_deg"] == pytest.approx(study.targets.phase_margin_deg, abs=0.05)
        assert m["closed_loop_stable"] is True
        ok, why = meets_targets(
            d["metrics"], study.targets, {}, study.plant.n_integrators + comp.n_integrators
        )
        assert ok, why
    for r in obj["refused"]:
        assert r["reason"]


def test_balance_refuses_with_reason(capsys: pytest.CaptureFixture[str]) -> None:
    """Balance platform (unstable pole, crossover 10 rad/s): the cancel-and-balance
    procedure cannot reach the phase; it says so and returns no such design."""
    assert main(["balance", str(ROOT / "studies" / "balance_platform.toml"), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert not any(d["origin"] == "phase-balanced" for d in obj["designs"])
    reasons = [r["reason"] for r in obj["refused"] if r["origin"] == "phase-balanced"]
    assert reasons and "short" in reasons[0]


def test_balance_refuses_a_crossover_range_as_documented(
    capsys: pytest.CaptureFixture[str],
) -> None:
    """docs/balance.md, "Errors": a crossover range is not bad input but a refusal of
    each hand method, with the reason (exit 0, nothing designed)."""
    assert main(["balance", str(ROOT / "studies" / "drum_level.toml"), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert obj["designs"] == [] and len(obj["refused"]) >= 3
    assert all("range" in r["reason"] and "numeric crossover" in r["reason"]
               for r in obj["refused"])


def test_lag_design_reaches_error_constant(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """`targets.error_constant` gives the lag hand design: Kv = lim s·L(s) reaches the
    target exactly while ωc and PM hold (Kv from the roots form; PM by the engine)."""
    f = tmp_path / "lag.toml"
    f.write_text(
        "[plant]\ngain = 2.0\npoles = [0, -1, -2]\n"
        "[targets]\ncrossover = 0.5\nphase_margin = 40\nintegrators = 1\nerror_constant = 5\n"
    )
    assert main(["balance", str(f), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    lag = [d for d in obj["designs"] if d["name"] == "lag"]
    assert len(lag) == 1
    c = lag[0]["compensator"]
    comp = Rational(
        gain=c["gain"],
        zeros=[complex(z) for z in c["zeros"]],
        poles=[complex(p) for p in c["poles"]],
    )
    loop = comp * Rational(gain=2.0, poles=(0.0, -1.0, -2.0))
    assert loop.dc_gain() == pytest.approx(5.0, rel=1e-6)
    assert lag[0]["metrics"]["phase_margin_deg"] == pytest.approx(40.0, abs=0.05)
    f.write_text(f.read_text().replace("error_constant = 5", "error_constant = -1"))
    assert main(["balance", str(f)]) == 2
    assert "targets.error_constant" in capsys.readouterr().err
