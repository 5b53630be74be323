"""Report: chart specs, offline HTML, slide export, and one real render in Chromium.

The gain-phase contour geometry is checked against the defining relations
(|T| = |L/(1+L)| for the M-circles, |1+L| = 1/Ms for the sensitivity locus), i.e.
closed forms, not against our own plotting.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import tempfile
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from explorer.caution import CAUTION
from explorer.cli import CAUTION as CLI_CAUTION
from explorer.cli_report import given_designs, load_designs
from explorer.errors import LoopscoutError
from explorer.report import (
    DEFAULT_MS,
    chart_specs,
    dashboard,
    design_frame,
    export_charts,
    factored,
    lowest_order_meeting,
    m_contour_frame,
    ms_circle_frame,
    write_report,
)
from explorer.study import load_study

STUDIES = Path(__file__).resolve().parent.parent / "studies"


@pytest.fixture(scope="module")
def kiln():
    study = load_study(STUDIES / "kiln_damper.toml")
    ds = given_designs(study)
    ds[0]["origin"] = "hand"  # relabelled for the look: one hand design
    ds[1]["origin"], ds[1]["pareto"] = "optimized", True
    return study, ds


def _spec(chart):
    import altair as alt

    with alt.data_transformers.enable("default", max_rows=100_000):
        return chart.to_dict()


def _walk(obj):
    if isinstance(obj, dict):
        yield obj
        for v in obj.values():
            yield from _walk(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _walk(v)


def test_caution_text_matches_cli():
    assert CAUTION == CLI_CAUTION


def test_m_contours_satisfy_closed_loop_magnitude():
    df = m_contour_frame((-3.0, 2.0, 6.0))
    lv = 10 ** (df["mag_db"].to_numpy() / 20) * np.exp(1j * np.radians(df["phase_deg"].to_numpy()))
    t_db = 20 * np.log10(np.abs(lv / (1 + lv)))
    np.testing.assert_allclose(t_db, df["M_db"].to_numpy(), atol=1e-9)
    assert df["phase_deg"].between(-360, 0).all()


def test_ms_locus_is_sensitivity_circle():
    df = ms_circle_frame(1.7)
    lv = 10 ** (df["mag_db"].to_numpy() / 20) * np.exp(1j * np.radians(df["phase_deg"].to_numpy()))
    np.testing.assert_allclose(np.abs(1 + lv), 1 / 1.7, rtol=1e-9)


def test_lowest_order_and_factored_form(kiln):
    _, ds = kiln
    meeting = [d["order"] for d in ds if d["meets_targets"]]
    assert lowest_order_meeting(ds) == (min(meeting) if meeting else None)
    assert lowest_order_meeting([{"order": 1, "meets_targets": False}]) is None
    assert factored({"gain": 2.0, "zeros": [-1.0, "-2+3j", "-2-3j"], "poles": [0.0]}) == (
        "2 · (s + 1) (s² + 4s + 13) / s"
    )


def test_chart_specs_layers_encodings_params(kiln):
    study, ds = kiln
    charts = chart_specs(study, ds)
    assert set(charts) == {"pareto_hf", "pareto_iae", "bode", "nichols", "sensitivity", "steps"}
    specs = {k: _spec(c) for k, c in charts.items()}
    ph = specs["pareto_hf"]
    enc = ph["layer"][0]["encoding"]
    assert enc["x"]["field"] == "hf_gain" and enc["y"]["field"] == "Ms"
    assert enc["shape"]["field"] == "order"
    assert (
        enc["color"]["condition"]["field"] == "structure"
        and enc["color"]["condition"]["test"] == "datum.meets"
    )
    assert any(
        p.get("name") == "pick" for p in ph.get("params", []) + ph["layer"][0].get("params", [])
    )
    # hand designs get their own outlined layer
    assert ph["layer"][1]["mark"]["filled"] is False
    assert specs["pareto_iae"]["layer"][0]["encoding"]["x"]["field"] == "iae_load"
    # every chart uses the pick selection in an opacity condition
    for name, spec in specs.items():
        conds = [
            d["opacity"]["condition"]
            for d in _walk(spec)
            if isinstance(d.get("opacity"), dict) and "condition" in d["opacity"]
        ]
        assert any(c.get("param") == "pick" for c in conds), name
    # Bode: log frequency axis, target crossover rule at 0.06 rad/s, -180+PM rule
    bode = json.dumps(specs["bode"])
    assert '"type": "log"' in bode and "target crossover" in bode and "PM target (55" in bode
    rules = [
        d
        for d in _walk(specs["bode"])
        if d.get("mark", {}) == {"type": "rule"}
        or (isinstance(d.get("mark"), dict) and d["mark"].get("type") == "rule")
    ]
    assert rules
    datasets = specs["bode"]["datasets"]
    vals = [r["v"] for rows in datasets.values() for r in rows if "label" in r and "v" in r]
    assert 0.06 in vals and -125.0 in vals
    nich = json.dumps(specs["nichols"])
    assert f"Ms = {study.limits['sensitivity_peak']:g}" in nich and "|T| 3 dB" in nich
    steps = json.dumps(specs["steps"])
    assert '"lo": 0.98' in steps and '"hi": 1.02' in steps and '"field": "u"' in steps


def test_default_ms_when_no_limit(kiln):
    study, ds = kiln
    from dataclasses import replace

    free = replace(study, limits={})
    assert f"Ms = {DEFAULT_MS:g}" in json.dumps(_spec(chart_specs(free, ds)["nichols"]))


def test_dashboard_shares_one_selection(kiln):
    study, ds = kiln
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spec = _spec(dashboard(study, ds))
    params = spec.get("params", [])
    assert [p["name"] for p in params] == ["pick"] and len(params[0]["views"]) >= 2


def test_design_frame_flags(kiln):
    _, ds = kiln
    df = design_frame(ds)
    assert df["hand"].tolist() == [True, False, False]
    assert df["meets"].tolist() == [bool(d["meets_targets"]) for d in ds]


def test_html_is_offline_and_has_text(kiln, tmp_path):
    study, ds = kiln
    page = write_report(study, ds, tmp_path / "r.html").read_text(encoding="utf-8")
    # outside inline script bodies, no tag may load anything
    markup = re.sub(r"(<script[^>]*>).*?(</script>)", r"\1\2", page, flags=re.S | re.I)
    assert markup.count("<script") == 3
    assert not re.search(r"<script[^>]*\ssrc\s*=", markup, re.I)
    assert not re.search(r"\s(src|href)\s*=", markup, re.I)
    assert "@import" not in markup and not re.search(r"url\(", markup)
    assert CAUTION in page and study.name in page
    assert "Lowest order that meets spec" in page and "sampled transport delay" in page
    assert "PI + lead" in page and "rad/s" in page
    low = lowest_order_meeting(ds)
    assert f'id="lowest-order">{"none" if low is None else f"order {low}"}<' in page


def test_bad_input(tmp_path, kiln):
    study, ds = kiln
    with pytest.raises(LoopscoutError, match="no designs"):
        write_report(study, [], tmp_path / "x.html")
    bad = tmp_path / "d.json"
    bad.write_text("{nope")
    with pytest.raises(LoopscoutError, match="not JSON"):
        load_designs(bad)
    bad.write_text(json.dumps({"designs": [{"name": "a"}]}))
    with pytest.raises(LoopscoutError, match="lacks 'compensator'"):
        load_designs(bad)
    with pytest.raises(LoopscoutError, match="--format"):
        export_charts(study, ds, tmp_path, formats=("gif",))
    d = json.loads(json.dumps(ds[0]))
    d["compensator"]["zeros"] = ["abc"]
    with pytest.raises(LoopscoutError, match="not a number"):
        chart_specs(study, [d])


def test_designs_json_roundtrip(kiln, tmp_path):
    study, ds = kiln
    p = tmp_path / "designs.json"
    p.write_text(json.dumps({"designs": ds}))
    assert [d["name"] for d in load_designs(p)] == [d["name"] for d in ds]


@pytest.mark.slow
def test_png_svg_export(kiln, tmp_path):
    study, ds = kiln
    paths = export_charts(study, ds, tmp_path, formats=("png", "svg"))
    assert len(paths) == 12
    for p in paths:
        assert p.stat().st_size > 1000
        if p.suffix == ".png":
            assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        else:
            assert ET.parse(p).getroot().tag.endswith("svg")


CHROMIUM = shutil.which("chromium") or (
    "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None
)
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--proxy-server=127.0.0.1:9",
    "--host-resolver-rules=MAP * ~NOTFOUND",
]


@pytest.mark.slow
@pytest.mark.skipif(
    CHROMIUM is None, reason="chromium not installed (CI installs it from Debian packages)"
)
def test_renders_in_headless_chromium(kiln, tmp_path):
    study, ds = kiln
    page = write_report(study, ds, tmp_path / "r.html")
    with tempfile.TemporaryDirectory() as prof:
        dom = subprocess.run(
            [
                CHROMIUM,
                *FLAGS,
                f"--user-data-dir={prof}",
                "--virtual-time-budget=8000",
                "--dump-dom",
                page.as_uri(),
            ],
            capture_output=True,
            text=True,
            timeout=120,
        ).stdout
    assert 'data-rendered="yes"' in dom, "vega-embed did not finish"
    errors = re.search(r'<pre id="errors">(.*?)</pre>', dom, re.S)
    assert errors is not None and errors.group(1).strip() == "", (
        errors.group(1) if errors else dom[-500:]
    )
    dash = dom[dom.index('id="dash"') :]
    svg = re.search(r"<svg.*?</svg>", dash, re.S)
    assert svg is not None
    # every sub-chart drew its marks: one role-mark group per layer, with paths
    assert (
        svg.group(0).count('class="mark-line') >= 8
        and svg.group(0).count('class="mark-symbol') >= 3
    )
    for title in (
        "Loop gain",
        "Loop phase",
        "Gain-phase chart",
        "Sensitivity",
        "Reference step: output",
        "Reference step: control",
        "Ms against hf_gain",
        "Ms against iae_load",
    ):
        assert title in svg.group(0), title
    with tempfile.TemporaryDirectory() as prof:
        shot = tmp_path / "shot.png"
        subprocess.run(
            [
                CHROMIUM,
                *FLAGS,
                f"--user-data-dir={prof}",
                "--virtual-time-budget=8000",
                f"--screenshot={shot}",
                "--window-size=1400,3000",
                page.as_uri(),
            ],
            capture_output=True,
            timeout=120,
        )
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_log_axes_tick_at_decades_and_a_control_kick_is_clipped_and_said() -> None:
    import pandas as pd

    from explorer.report import _decades, _kick_clipped_domain

    assert _decades(pd.Series([5e-4, 0.3, 7.0])) == [1e-4, 1e-3, 1e-2, 1e-1, 1.0, 10.0]
    t = np.linspace(0.0, 100.0, 1001)
    calm = pd.DataFrame({"t_s": t, "u": 1.0 - np.exp(-t / 10.0)})
    assert _kick_clipped_domain(calm, "u") is None
    kick = calm.assign(u=calm["u"] + 200.0 * np.exp(-t / 0.2))
    lo, hi, peak = _kick_clipped_domain(kick, "u")
    assert peak == pytest.approx(200.0)
    assert lo < 0.0 < 1.0 < hi < 1.5
