"""A measured sweep as the plant of a study (``[plant] data``): check, balance and
explore on the data against the same study given as the model (docs/measured-data.md,
"Wiring").

References: the frequency figures on the data are compared with
``tests/reference_loop.py`` (scipy.signal.freqresp + brentq on a dense grid, no code
shared with loopscout) on the model the data were sampled from, within the
interpolation bound the data path reports; time figures with ``explorer.time_domain.timeresp``
on the model (itself checked against scipy.signal in tests/test_timeresp.py).
The scenario (a drying-drum exhaust temperature) is invented.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from explorer.cli import main
from explorer.core.loop import Rational
from explorer.evaluation.records import evaluated_record
from explorer.model.study import load_study
from explorer.model.sweep import MeasuredResponse
from tests.reference_loop import reference_metrics

ROOT = Path(__file__).resolve().parent.parent

#: invented: drum exhaust temperature per burner command, lags of 20 s and 4 s, 2 s delay
MODEL = Rational(gain=0.01, poles=(-0.05, -0.25), delay_s=2.0)
PI = Rational(gain=1.2, zeros=(-0.05,), poles=(0.0,))
PI_LEAD = Rational(gain=2.0, zeros=(-0.05, -0.25), poles=(0.0, -0.6))

TARGETS = """
[targets]
crossover    = 0.12
phase_margin = 50
integrators  = 1

[limits]
sensitivity_peak = 1.8
gain_margin_db   = 6
"""

COMPS = """
[[compensator]]
name  = "PI"
gain  = 1.2
zeros = [-0.05]
poles = [0]

[[compensator]]
name  = "PI + lead"
gain  = 2.0
zeros = [-0.05, -0.25]
poles = [0, -0.6]
"""


def _write_sweep(path: Path, model: Rational, w: np.ndarray, *, noise: float = 0.0,
                 seed: int = 1, negate: bool = False) -> None:
    data = MeasuredResponse.from_model(model, w)
    mag = np.abs(data.response)
    ph = np.degrees(data.phase_rad) + (180.0 if negate else 0.0)
    if noise:
        rng = np.random.default_rng(seed)
        mag = mag * (1.0 + noise * rng.standard_normal(w.size))
        ph = ph + np.degrees(noise * rng.standard_normal(w.size))
    lines = ["# generated in a test from an invented model", "frequency_rad_s,magnitude,phase_deg"]
    lines += [f"{a:.17g},{b:.17g},{c:.17g}" for a, b, c in zip(w, mag, ph, strict=True)]
    path.write_text("\n".join(lines) + "\n")


def _grid(per_decade: int, lo: float = 1e-3, hi: float = 3.0) -> np.ndarray:
    n = int(round(per_decade * math.log10(hi / lo))) + 1
    return np.logspace(math.log10(lo), math.log10(hi), n)


def _studies(tmp_path: Path, per_decade: int = 20, **kw) -> tuple[Path, Path]:
    _write_sweep(tmp_path / "sweep.csv", MODEL, _grid(per_decade), **kw)
    data = tmp_path / "drum_data.toml"
    data.write_text('name = "drum on data"\n[plant]\ndata = "sweep.csv"\n' + TARGETS + COMPS)
    model = tmp_path / "drum_model.toml"
    model.write_text('name = "drum on model"\n[plant]\ngain = 0.01\npoles = [-0.05, -0.25]\n'
                     "delay = 2.0\n" + TARGETS + COMPS)
    return data, model


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


FREQ_KEYS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db",
             "phase_crossover_rad_s", "delay_margin_s", "sensitivity_peak")
_REF = {"crossover_rad_s": "wc", "phase_margin_deg": "pm", "gain_margin_db": "gm",
        "phase_crossover_rad_s": "wpc", "delay_margin_s": "dm", "sensitivity_peak": "ms"}


def _within_bound(rec: dict, ref: dict, key: str) -> None:
    got = rec["metrics"][key]
    bound = rec["interpolation_error"][key]
    want = ref[key]
    assert got is not None and want is not None, key
    # the bound, plus the reference's own precision (dense grid + brentq: ~1e-9 relative)
    assert abs(got - want) <= bound + 1e-7 * max(1.0, abs(want)), (key, got, want, bound)


@pytest.mark.parametrize("per_decade", [15, 20])
def test_check_on_data_agrees_with_the_model_within_the_bound(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], per_decade: int) -> None:
    data_study, _ = _studies(tmp_path, per_decade)
    code, out, err = _run(capsys, "check", str(data_study), "--json")
    assert code == 0, err
    obj = json.loads(out)
    for rec, comp in zip(obj["designs"], (PI, PI_LEAD), strict=True):
        ref = _reference(MODEL * comp)
        for key in FREQ_KEYS:
            _within_bound(rec, ref, key)
        assert rec["metrics"]["closed_loop_stable"] is True
        assert rec["band_rad_s"] == pytest.approx([1e-3, 3.0])
        assert rec["time_from_fit"] is True and rec["fit"]["poor"] is False
        assert rec["assumptions"] and isinstance(rec["outside_band"], list)


def _reference(loop: Rational) -> dict[str, float]:
    """The reference_loop figures under the METRICS names."""
    r = reference_metrics(loop, 1e-4, 1e2, points=4000)
    return {k: r[k] for k in FREQ_KEYS}


def test_bound_shrinks_with_denser_data(tmp_path: Path) -> None:
    errs = []
    for n in (10, 20, 40):
        d = tmp_path / str(n)
        d.mkdir()
        data_study, _ = _studies(d, n)
        rec = evaluated_record(load_study(data_study), PI, name="PI", origin="given",
                               structure="PI")
        errs.append(rec["interpolation_error"]["phase_margin_deg"])
    assert errs[0] > errs[1] > errs[2]


def test_time_figures_from_a_good_fit_match_the_model(tmp_path: Path) -> None:
    data_study, model_study = _studies(tmp_path, 20)
    sd, sm = load_study(data_study), load_study(model_study)
    for comp in (PI, PI_LEAD):
        rd = evaluated_record(sd, comp, name="x", origin="given", structure="x")
        rm = evaluated_record(sm, comp, name="x", origin="given", structure="x")
        assert rd["time_from_fit"] is True
        for key in ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control",
                    "iae_load"):
            a, b = rd["metrics"][key], rm["metrics"][key]
            assert a == pytest.approx(b, rel=1e-3, abs=1e-3), key


def test_poor_fit_leaves_time_figures_null(tmp_path: Path) -> None:
    # 20 % multiplicative noise: the fit's relative RMS error is far above 5 %
    data_study, _ = _studies(tmp_path, 20, noise=0.2)
    study = load_study(data_study)
    assert study.measured.fit.poor
    rec = evaluated_record(study, PI, name="PI", origin="given", structure="PI")
    assert rec["time_from_fit"] is False
    assert "withheld" in rec["time_note"]
    for key in ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control",
                "iae_load", "final_value"):
        assert rec["metrics"][key] is None, key
    # the frequency figures are still read on the data
    assert rec["metrics"]["phase_margin_deg"] is not None


def test_crossover_above_the_band_is_not_met(tmp_path: Path) -> None:
    w = _grid(20, 1e-3, 0.05)  # the band ends far below the 0.12 rad/s crossover
    _write_sweep(tmp_path / "sweep.csv", MODEL, w)
    path = tmp_path / "short.toml"
    path.write_text('[plant]\ndata = "sweep.csv"\n' + TARGETS + COMPS)
    fast = Rational(gain=6.0, zeros=(-0.05,), poles=(0.0,))  # crossover near 0.2 rad/s
    rec = evaluated_record(load_study(path), fast, name="PI", origin="given", structure="PI")
    assert rec["meets_targets"] is False
    assert rec["metrics"]["phase_margin_deg"] is None
    assert rec["metrics"]["closed_loop_stable"] is False
    assert any("above the measured band" in o for o in rec["outside_band"])
    assert any("not established" in m and "above the measured band" in m
               for m in rec["misses"])


def test_balance_on_data_meets_the_targets_on_the_data(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    data_study, _ = _studies(tmp_path, 20)
    code, out, err = _run(capsys, "balance", str(data_study), "--json")
    assert code == 0, err
    obj = json.loads(out)
    assert obj["designs"]
    for rec in obj["designs"]:
        m = rec["metrics"]
        # placed on the fit matched to the data at ωc: exact on the data
        assert m["crossover_rad_s"] == pytest.approx(0.12, rel=1e-4)
        assert m["phase_margin_deg"] == pytest.approx(50.0, abs=0.05)
        comp = Rational(gain=rec["compensator"]["gain"],
                        zeros=[complex(z) for z in rec["compensator"]["zeros"]],
                        poles=[complex(p) for p in rec["compensator"]["poles"]])
        ref = _reference(MODEL * comp)
        for key in FREQ_KEYS:
            _within_bound(rec, ref, key)
        assert any("measured plant" in s for s in rec["steps"])


def test_reverse_acting_twin_gets_the_mirror_design(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    a, b = tmp_path / "a", tmp_path / "b"
    a.mkdir()
    b.mkdir()
    _studies(a, 20)
    _studies(b, 20, negate=True)  # the same sweep with the gain negated: phase + 180°
    recs = []
    for d in (a, b):
        code, out, err = _run(capsys, "balance", str(d / "drum_data.toml"), "--json")
        assert code == 0, err
        recs.append(json.loads(out)["designs"])
    assert [r["name"] for r in recs[0]] == [r["name"] for r in recs[1]]
    for r0, r1 in zip(*recs, strict=True):
        assert r1["compensator"]["gain"] == pytest.approx(-r0["compensator"]["gain"],
                                                          rel=1e-6)
        for key in (*FREQ_KEYS, "complementary_peak", "overshoot_pct"):
            assert r1["metrics"][key] == pytest.approx(r0["metrics"][key], rel=1e-6), key
        assert r1["meets_targets"] == r0["meets_targets"]


@pytest.mark.parametrize("plant, needle", [
    ('data = "sweep.csv"\ngain = 2.0', "`plant.data` and `plant.gain` are both given"),
    ('data = "sweep.csv"\npoles = [-1]', "`plant.data` and `plant.poles` are both given"),
    ('data = "missing.csv"', "`plant.data` cannot read measured data file missing.csv"),
    ('data = "sweep.csv"\nunstable_poles = -1', "`plant.unstable_poles` must be"),
    ('data = "sweep.csv"\nunstable_poles = 1.5', "`plant.unstable_poles` must be"),
    ('data = "sweep.csv"\nunstable_poles = "one"', "`plant.unstable_poles` must be"),
    ('data = "sweep.csv"\nintegrators = 9', "`plant.integrators` must be at most"),
    ("data = 3", "`plant.data` must be a string"),
    ('gain = 1.0\npoles = [-1]\nunstable_poles = 0', "`plant.unstable_poles` is only used"),
])
def test_bad_measured_studies_are_refused_in_one_line(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], plant: str, needle: str) -> None:
    _write_sweep(tmp_path / "sweep.csv", MODEL, _grid(10))
    path = tmp_path / "bad.toml"
    path.write_text("[plant]\n" + plant + "\n" + TARGETS + COMPS)
    code, out, err = _run(capsys, "check", str(path))
    assert code == 2
    assert out == ""
    assert len(err.strip().splitlines()) == 1, err
    assert needle in err, err


def test_bad_csv_row_is_refused_with_its_row(tmp_path: Path,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    rows = ["frequency_rad_s,magnitude,phase_deg"] + [
        f"{w},{1.0 / w},-90" for w in (0.1, 0.2, 0.3, 0.3, 0.5, 0.6, 0.7, 0.8, 0.9)]
    (tmp_path / "sweep.csv").write_text("\n".join(rows) + "\n")
    path = tmp_path / "bad.toml"
    path.write_text('[plant]\ndata = "sweep.csv"\n' + TARGETS + COMPS)
    code, _, err = _run(capsys, "check", str(path))
    assert code == 2
    assert "sweep.csv row 5" in err and "repeats" in err


def test_variation_with_data_is_refused(tmp_path: Path,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    _write_sweep(tmp_path / "sweep.csv", MODEL, _grid(10))
    path = tmp_path / "bad.toml"
    path.write_text('[plant]\ndata = "sweep.csv"\n' + TARGETS
                    + "\n[variation]\ngain = [0.8, 1.2]\n")
    code, _, err = _run(capsys, "check", str(path))
    assert code == 2 and "`variation` is not supported with a measured plant" in err


@pytest.mark.slow
def test_explore_on_data_agrees_with_the_model(tmp_path: Path) -> None:
    from explorer.search.exploration import explore

    data_study, model_study = _studies(tmp_path, 20)
    res = explore(str(data_study), tmp_path / "out", trials=12, seed=3, progress=False)
    obj = json.loads((tmp_path / "out" / "designs.json").read_text())
    sm = load_study(model_study)
    assert res is not None and obj["designs"]
    checked = 0
    for rec in obj["designs"]:
        assert "interpolation_error" in rec and "time_from_fit" in rec
        if rec["meets_targets"]:
            m = rec["metrics"]
            assert m["crossover_rad_s"] == pytest.approx(0.12, rel=1e-4)
            assert m["phase_margin_deg"] >= 50.0 - 0.05
        c = rec["compensator"]
        comp = Rational(gain=c["gain"], zeros=[complex(z) for z in c["zeros"]],
                        poles=[complex(p) for p in c["poles"]])
        on_model = evaluated_record(sm, comp, name="x", origin="given", structure="x")
        for key in ("crossover_rad_s", "phase_margin_deg", "sensitivity_peak"):
            a, b = rec["metrics"][key], on_model["metrics"][key]
            if a is None:
                continue
            assert abs(a - b) <= rec["interpolation_error"][key] + 1e-6 * abs(b), key
        checked += 1
    assert checked >= 3


@pytest.mark.slow
def test_bundled_hopper_study_runs_through_every_command(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    study = str(ROOT / "studies" / "hopper_gate.toml")
    code, out, err = _run(capsys, "check", study)
    assert code == 0, err
    assert "measured sweep" in out and "assumptions about the data" in out
    assert "low coherence" in out and "fit error over the band" in out
    code, out, err = _run(capsys, "balance", study, "--json")
    assert code == 0, err
    bal = json.loads(out)
    assert any(d["meets_targets"] for d in bal["designs"])
    code, out, err = _run(capsys, "explore", study, "--out", str(tmp_path / "x"),
                          "--trials", "8", "--json")
    assert code == 0, err
    ex = json.loads(out)
    assert ex["answer"]["design"] is not None
    assert all(d["time_from_fit"] for d in ex["designs"])
    html = (tmp_path / "x" / "report.html").read_text()
    assert "measured" in html
    code, out, err = _run(capsys, "report", study,
                          "--designs", str(tmp_path / "x" / "designs.json"),
                          "--out", str(tmp_path / "again.html"))
    assert code == 0, err


def test_report_points_are_the_measured_data(tmp_path: Path) -> None:
    from explorer.outputs.report import measured_frame, plant_chart, plant_frame

    data_study, _ = _studies(tmp_path, 20)
    st = load_study(data_study)
    w = _grid(20)
    md = measured_frame(st)
    # the points are the sweep (here: the invented model's closed form), not the fit
    np.testing.assert_allclose(md["mag_db"], 20 * np.log10(np.abs(MODEL.freqresp(w))),
                               rtol=1e-12, atol=1e-9)
    # on the fitted model's phase branch (within the fit's phase error, far below a turn)
    assert np.all(np.abs(md["phase_deg"] - np.degrees(st.plant.phase_rad(w))) < 5.0)
    loop = measured_frame(st, PI)
    np.testing.assert_allclose(loop["mag_db"],
                               20 * np.log10(np.abs((MODEL * PI).freqresp(w))), atol=1e-9)
    spec = json.dumps(plant_chart(plant_frame(st), st).to_dict())
    assert "measured band" in spec and "coherence" in spec


@pytest.mark.slow
def test_search_constraints_and_record_check_agree_on_data(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """One meaning of "meets" on a measured plant as well: the search's batch
    constraints (frequency_batch, margin floors) and the record's check
    (design_figures, unknown reasons) on random designs of every structure of the
    hopper study, its limits tightened so that random designs both meet and miss."""
    import tests.test_targets_agree as agree

    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "hopper_gate_sweep.csv").write_text(
        (ROOT / "studies" / "data" / "hopper_gate_sweep.csv").read_text())
    text = (ROOT / "studies" / "hopper_gate.toml").read_text()
    text = text.replace("sensitivity_peak = 1.7", "sensitivity_peak = 1.35")
    text = text.replace("gain_margin_db   = 8", "gain_margin_db   = 21.5")
    assert "1.35" in text and "21.5" in text
    (tmp_path / "hopper_tight.toml").write_text(text)
    monkeypatch.setattr(agree, "STUDIES", tmp_path)
    agree.test_batch_constraints_and_record_check_agree("hopper_tight")


def test_unstable_plant_on_data_needs_its_declared_pole(tmp_path: Path) -> None:
    """An open-loop unstable plant (invented: a levitated load, 2/((s − 1)(s + 5)))
    stabilised by a lead: with unstable_poles = 1 the data give the model's verdict
    (closed-form check: the closed-loop characteristic polynomial's roots, numpy);
    declared 0, the Nyquist count calls the same loop unstable — the data cannot
    show the pole, which is why the key is required."""
    model = Rational(gain=2.0, poles=(1.0, -5.0))
    lead = Rational(gain=60.0, zeros=(-1.5,), poles=(-15.0,))
    num = np.polymul([lead.gain * model.gain], np.poly(lead.zeros))
    den = np.polymul(np.poly(model.poles), np.poly(lead.poles))
    roots = np.roots(np.polyadd(den, num))
    assert np.all(roots.real < 0)  # the true closed loop is stable
    _write_sweep(tmp_path / "sweep.csv", model, _grid(20, 1e-2, 1e3))
    out = {}
    for n in (1, 0):
        path = tmp_path / f"u{n}.toml"
        path.write_text(f'[plant]\ndata = "sweep.csv"\nunstable_poles = {n}\n'
                        "[targets]\nintegrators = 0\n")
        rec = evaluated_record(load_study(path), lead, name="lead", origin="given",
                               structure="lead")
        out[n] = rec
    assert out[1]["metrics"]["closed_loop_stable"] is True
    assert out[1]["metrics"]["closed_loop_rhp_poles"] == 0
    assert out[0]["metrics"]["closed_loop_stable"] is False
    ref = _reference(model * lead)
    _within_bound(out[1], ref, "phase_margin_deg")


@pytest.mark.parametrize("other", [
    Rational(gain=1.2, poles=(-1.0, -1.2), delay_s=0.3),  # more lag: the delay shrinks
    Rational(gain=1.2, poles=(-1.0, -1.2)),  # more lag, no delay: a far zero is added
    Rational(gain=0.9, poles=(-1.0, -0.9), delay_s=0.1),  # less lag: the delay grows
])
def test_hand_plant_matches_the_data_at_the_crossover(other: Rational) -> None:
    """The model the hand designs are placed on equals the data's interpolant at ωc
    in magnitude and phase (mod 360°), whatever model it started from (closed form:
    the sampled model's own value at a measured point)."""
    from explorer.evaluation.plant_source import hand_plant
    from explorer.model.measured_plant import measured_plant

    true = Rational(gain=1.0, poles=(-1.0, -1.0), delay_s=0.2)
    w = _grid(20, 1e-2, 1e2)
    mp = measured_plant(MeasuredResponse.from_model(true, w))
    wc = float(w[30])  # a measured point: the interpolant is the data there
    hp, step = hand_plant(other, mp, wc)
    assert step is not None and "match the data" in step
    want = complex(true.freqresp(np.array([wc]))[0])
    got = complex(hp.freqresp(np.array([wc]))[0])
    assert abs(got) == pytest.approx(abs(want), rel=1e-12)
    dphi = float(hp.phase_rad(np.array([wc]))[0] - true.phase_rad(np.array([wc]))[0])
    assert abs(math.remainder(dphi, 2 * math.pi)) < 1e-9
    assert hp.delay_s >= 0.0


def test_report_page_lists_the_data_assumptions(tmp_path: Path) -> None:
    from explorer.outputs.report_page import _data_assumptions

    data_study, model_study = _studies(tmp_path, 20)
    st = load_study(data_study)
    rec = evaluated_record(st, PI, name="PI", origin="given", structure="PI")
    page = _data_assumptions(st, [rec])
    for text in ("measured sweep sweep.csv", "fitted to the sweep", "plant integrators",
                 "open-loop right-half-plane poles", "below the band", "above the band"):
        assert text in page, text
    assert "Nyquist count" not in page
    assert _data_assumptions(load_study(model_study), []) == ""
