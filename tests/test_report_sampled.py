"""The report's sampled-loop charts (explorer.outputs.report_sampled,
explorer.outputs.report): present with a sample time and absent without; their series
are the sampled loop (the phase at the sampled crossover equals −180° + the sampled
phase margin read by
explorer.frequency.sampled.sampled_loop_metrics; the step frame's overshoot equals the sampled
record's), the controller output drawn as a held staircase."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from explorer.evaluation.records import given_designs
from explorer.model.study import load_study, parse_study
from explorer.outputs.report import chart_specs
from explorer.outputs.report_sampled import sampled_loop_frame, sampled_step_frames

ROOT = Path(__file__).resolve().parents[1]

STUDY = {
    # an invented PLC-driven belt: three lags, one period of computation delay
    "plant": {"num": [0.05], "den": [0.375, 2.375, 3.75, 1.0], "delay": 0.05},
    "targets": {"crossover": 0.8, "phase_margin": 55, "integrators": 1},
    "limits": {"sensitivity_peak": 1.8},
    "search": {"sample_time": 0.1, "compute_delay": 0.03},
    "compensator": [
        {"name": "PI", "gain": 40.0, "zeros": [-0.3333], "poles": [0]},
        {"name": "PI + lead", "num": [150.911, 352.1257, 100.6073], "den": [1.0, 6.0, 0.0]},
    ],
}


@pytest.fixture(scope="module")
def sampled():
    st = parse_study(STUDY, source="belt_plc.toml")
    return st, given_designs(st)


def _datasets(spec: dict) -> list[list[dict]]:
    return list(spec.get("datasets", {}).values())


@pytest.mark.slow
def test_sampled_charts_present_with_their_series(sampled) -> None:
    st, ds = sampled
    specs = chart_specs(st, ds)
    assert {"sampled_nichols", "sampled_steps"} <= set(specs)
    nich = specs["sampled_nichols"].to_dict()
    loops = {r.get("loop") for data in _datasets(nich) for r in data}
    assert {"continuous", "sampled"} <= loops
    steps = specs["sampled_steps"].to_dict()
    text = str(steps)
    assert "step-after" in text  # the held controller output
    names = {r.get("name") for data in _datasets(steps) for r in data}
    assert {"PI", "PI + lead"} <= names


def test_continuous_study_has_no_sampled_charts() -> None:
    st = load_study(ROOT / "studies" / "conveyor_speed.toml")
    specs = chart_specs(st, given_designs(st))
    assert not {"sampled_nichols", "sampled_steps"} & set(specs)


def test_sampled_curve_crosses_at_the_sampled_margin(sampled) -> None:
    st, ds = sampled
    for d in ds:
        sm = d["sampled_metrics"]
        if not sm["closed_loop_stable"]:
            continue
        sf = sampled_loop_frame(st, [d], 0.1, 0.03)
        s = sf[sf["loop"] == "sampled"]
        assert s["omega_rad_s"].max() == pytest.approx(math.pi / 0.1, rel=1e-5)
        mag, ph, w = s["mag_db"].to_numpy(), s["phase_deg"].to_numpy(), s["omega_rad_s"].to_numpy()
        i = np.flatnonzero(np.diff(np.sign(mag)) != 0)
        # the crossover nearest the record's, phase interpolated in ln ω
        j = i[np.argmin(np.abs(w[i] - sm["crossover_rad_s"]))]
        f = (0.0 - mag[j]) / (mag[j + 1] - mag[j])
        phase_x = ph[j] + f * (ph[j + 1] - ph[j])
        assert phase_x + 180.0 == pytest.approx(sm["phase_margin_deg"], abs=0.3)
        # and the continuous curve is the design without the hold: the two agree well
        # below π/T (Tustin's warping and the hold's droop grow towards π/T)
        c = sf[sf["loop"] == "continuous"]
        low = w < 0.2 * math.pi / 0.1
        assert c["mag_db"].to_numpy()[low] == pytest.approx(mag[low], abs=0.5)
        assert np.max(np.abs(c["mag_db"].to_numpy() - mag)) > 0.5


def test_sampled_step_frame_matches_the_record(sampled) -> None:
    st, ds = sampled
    ys, us = sampled_step_frames(st, ds, 0.1, 0.03)
    for d in ds:
        sm = d["sampled_metrics"]
        if not sm["closed_loop_stable"] or sm["overshoot_pct"] is None:
            continue
        y = ys[ys["name"] == d["name"]]["y"].to_numpy()
        assert 100 * (y.max() - 1.0) == pytest.approx(max(sm["overshoot_pct"], 0.0), abs=0.5)
        u = us[us["name"] == d["name"]]
        # one value per sample period: the staircase the hold applies
        assert np.allclose(np.diff(u["t_s"].to_numpy())[:-1], 0.1)


@pytest.mark.slow
def test_requirement_checks_and_answer_card_read_the_sampled_loop(sampled, tmp_path) -> None:
    """The requirements table judges what meets_targets judged (the sampled loop): each
    design's ✓/✗ on every row agrees with its meets_targets, and the answer card lists
    the sampled figures."""
    from explorer.outputs.report import write_report
    from explorer.outputs.report_page import requirement_rows

    st, ds = sampled
    rows = requirement_rows(st)
    for d in ds:
        verdicts = [r.check(d)[1] for r in rows]
        assert all(v is not False for v in verdicts) == bool(d["meets_targets"]), d["misses"]
        pm_row = next(r for r in rows if "phase margin" in r.requirement.lower())
        assert pm_row.check(d)[0] == f"{d['sampled_metrics']['phase_margin_deg']:.4g}"
    page = write_report(st, ds, tmp_path / "r.html").read_text(encoding="utf-8")
    assert "sampled phase margin" in page and "sampled Ms" in page
