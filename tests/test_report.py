"""Report: chart specs, offline HTML, slide export, and real renders in Chromium.

The gain-phase contour geometry is checked against the defining relations
(|T| = |L/(1+L)| for the M-circles, |1+L| = 1/Ms for the sensitivity locus), the
load-step response against the closed form of a first-order loop, i.e. closed forms,
not against our own plotting. Slide images are decoded here (zlib and the row
filters of the PNG spec, W3C 2nd ed. sec. 9) and their title band must differ from
the same chart drawn with all text transparent.
"""

from __future__ import annotations

import json
import re
import shutil
import struct
import subprocess
import tempfile
import tomllib
import xml.etree.ElementTree as ET
import zlib
from pathlib import Path

import numpy as np
import pytest

from explorer.cli.app import CAUTION as CLI_CAUTION
from explorer.cli.explore import ranked_table
from explorer.cli.report import given_designs, load_designs
from explorer.core.caution import CAUTION
from explorer.core.errors import LoopscoutError
from explorer.core.json_text import json_text
from explorer.core.loop import Rational
from explorer.evaluation.records import evaluated_record
from explorer.model.study import load_study, parse_study
from explorer.outputs.report import (
    DEFAULT_MS,
    chart_specs,
    dashboard,
    design_frame,
    design_styles,
    export_charts,
    factored,
    lowest_order_meeting,
    m_contour_frame,
    m_contour_labels,
    ms_circle_frame,
    recommended_name,
    step_frame,
    write_report,
)
from explorer.outputs.report_page import readable, requirement_rows, requirements, script_json

STUDIES = Path(__file__).resolve().parent.parent / "studies"
ALL_STUDIES = sorted(STUDIES.glob("*.toml"))


@pytest.fixture(scope="module")
def kiln():
    study = load_study(STUDIES / "kiln_damper.toml")
    ds = given_designs(study)
    ds[0] = ds[0].with_changes(origin="hand")  # relabelled for the look: one hand design
    ds[1] = ds[1].with_changes(origin="optimized", pareto=True)
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


def _texts(spec) -> set[str]:
    """Every string in a spec (titles, labels, datasets)."""
    out: set[str] = set()
    for d in _walk(spec):
        for v in d.values():
            if isinstance(v, str):
                out.add(v)
            elif isinstance(v, list):
                out.update(x for x in v if isinstance(x, str))
    return out


def _simple_study(delay: float = 0.0, limits: dict | None = None):
    """Plant 1/(s + 1) (an invented first-order lag), unit integrator target 0."""
    return parse_study({
        "name": "first-order lag",
        "plant": {"gain": 1.0, "zeros": [], "poles": [-1.0], "delay": delay},
        "targets": {"integrators": 0},
        "limits": limits or {},
    })


def _p_design(study, k: float, name: str) -> dict:
    return evaluated_record(study, Rational(gain=k, zeros=(), poles=()), name=name,
                            origin="given", structure="P")


# ------------------------------------------------------------------------------------
# geometry and frames
# ------------------------------------------------------------------------------------
def test_caution_text_matches_cli():
    assert CAUTION == CLI_CAUTION


def test_m_contours_satisfy_closed_loop_magnitude():
    df = m_contour_frame((-3.0, 2.0, 6.0))
    lv = 10 ** (df["mag_db"].to_numpy() / 20) * np.exp(1j * np.radians(df["phase_deg"].to_numpy()))
    t_db = 20 * np.log10(np.abs(lv / (1 + lv)))
    np.testing.assert_allclose(t_db, df["M_db"].to_numpy(), atol=1e-9)
    assert df["phase_deg"].between(-360, 0).all()


def test_contour_labels_sit_on_their_contours_inside_the_chart():
    df = m_contour_frame()
    lab = m_contour_labels(df)
    assert sorted(lab["M_db"]) == sorted(set(df["M_db"]))  # every level labelled once
    lv = 10 ** (lab["mag_db"].to_numpy() / 20) * np.exp(1j * np.radians(lab["phase_deg"]))
    np.testing.assert_allclose(20 * np.log10(np.abs(lv / (1 + lv))), lab["M_db"], atol=1e-9)
    assert lab["mag_db"].between(-30, 30).all() and lab["phase_deg"].between(-360, 0).all()
    assert all(t.endswith("dB") for t in lab["text"])


def test_ms_locus_is_sensitivity_circle():
    df = ms_circle_frame(1.7)
    lv = 10 ** (df["mag_db"].to_numpy() / 20) * np.exp(1j * np.radians(df["phase_deg"].to_numpy()))
    np.testing.assert_allclose(np.abs(1 + lv), 1 / 1.7, rtol=1e-9)


def test_load_step_matches_the_closed_form_of_a_first_order_loop():
    # P = 1/(s+1), C = k: Y_load = P/(1 + kP) = 1/(s + 1 + k), so
    # y(t) = (1 - exp(-(1+k) t)) / (1 + k)  (inverse Laplace transform, closed form)
    study = _simple_study()
    k = 3.0
    st = step_frame(study, [_p_design(study, k, "P3")])
    t = st["t_s"].to_numpy()
    np.testing.assert_allclose(
        st["y_load"].to_numpy(), (1 - np.exp(-(1 + k) * t)) / (1 + k), atol=1e-6
    )
    # and the reference step of the same loop: y = k/(1+k) (1 - exp(-(1+k) t))
    np.testing.assert_allclose(st["y"], k / (1 + k) * (1 - np.exp(-(1 + k) * t)), atol=1e-6)


def test_load_step_keeps_the_delay():
    # with a delay tau the load reaches the output only after tau (the delay sits in
    # the plant, before the lag): y(t) = 0 for t < tau, and the first-order rise after
    study = _simple_study(delay=0.5)
    st = step_frame(study, [_p_design(study, 0.5, "P")])
    early = st[st["t_s"] < 0.5 - 1e-9]
    assert len(early) and np.allclose(early["y_load"], 0.0, atol=1e-12)
    mid = st[(st["t_s"] > 0.5) & (st["t_s"] < 1.0)]  # before the feedback returns (2 tau)
    np.testing.assert_allclose(mid["y_load"], 1 - np.exp(-(mid["t_s"] - 0.5)), atol=1e-6)


def test_time_axis_follows_the_recommended_design_and_marks_slower_ones():
    study = _simple_study(limits={"settling_time_s": 2.0})  # the slow design misses it
    fast, slow = _p_design(study, 9.0, "fast"), _p_design(study, 0.2, "slow")
    assert fast["meets_targets"] and not slow["meets_targets"]
    st = step_frame(study, [fast, slow], focus=["fast"])
    t_fast = fast["metrics"]["settling_time_s"]
    t_slow = slow["metrics"]["settling_time_s"]
    assert t_fast < st["t_s"].max() < t_slow
    assert set(st["name"]) == {"fast", "slow"}
    assert st.attrs["beyond"] == {"slow": pytest.approx(t_slow)}
    # the chart says so, and marks the slow design at the axis end
    steps = _spec(chart_specs(study, [fast, slow], {"design": "fast"})["steps"])
    assert any("slow (settles at" in s for s in _texts(steps))


def test_design_styles_are_distinct_for_many_designs():
    ds = [{"name": f"d{i}", "origin": "hand" if i % 5 == 0 else "optimized"} for i in range(45)]
    st = design_styles(ds)
    looks = {(s.colour, s.dash) for s in st.values()}
    assert len(looks) == 45
    assert st["d0"].dash != (1, 0) and st["d1"].dash == (1, 0)  # hand designs dashed


def test_lowest_order_recommended_and_factored_form(kiln):
    _, ds = kiln
    meeting = [d["order"] for d in ds if d["meets_targets"]]
    assert lowest_order_meeting(ds) == (min(meeting) if meeting else None)
    assert lowest_order_meeting([{"order": 1, "meets_targets": False}]) is None
    rec = recommended_name(ds)
    ok = [d for d in ds if d["meets_targets"]]
    assert (rec is None) == (not ok)
    if ok:
        assert min(d["order"] for d in ok) == next(d for d in ds if d["name"] == rec)["order"]
    assert recommended_name(ds, {"design": None, "order": None, "why": "x"}) is None
    assert recommended_name(ds, {"design": ds[-1]["name"]}) == ds[-1]["name"]
    assert factored({"gain": 2.0, "zeros": [-1.0, "-2+3j", "-2-3j"], "poles": [0.0]}) == (
        "2 · (s + 1) (s² + 4s + 13) / s"
    )
    assert factored({"gain": 0.5, "zeros": [], "poles": [-0.1, 0.0]}) == "0.5 / [s (s + 0.1)]"


def test_requirements_read_from_the_study_file():
    # the outside reference is the study file itself, read here with tomllib
    path = STUDIES / "conveyor_speed.toml"
    raw = tomllib.loads(path.read_text(encoding="utf-8"))["targets"]
    req = requirements(load_study(path))
    assert req.overshoot_pct == pytest.approx(raw["overshoot"])
    assert req.settling_time_s == pytest.approx(raw["settling_time"])
    free = requirements(load_study(STUDIES / "kiln_damper.toml"))
    assert free.overshoot_pct is None and free.settling_time_s is None


@pytest.mark.parametrize("stem", ["kiln_damper", "dome_drive", "balance_platform"])
def test_requirement_rows_agree_with_the_target_check(stem):
    # evaluate.meets_targets is the reference: a design meets its targets exactly
    # when every row with a bound holds
    study = load_study(STUDIES / f"{stem}.toml")
    rows = requirement_rows(study)
    assert any("limit" in r.requirement for r in rows)
    for d in given_designs(study):
        oks = [r.check(d)[1] for r in rows]
        assert all(ok is not False for ok in oks) == bool(d["meets_targets"]), d["name"]


def test_script_json_is_inert_in_html_and_same_value():
    obj = {"name": "</script><!--<script>&\u2028", "v": [1.5, None]}
    text = script_json(obj)
    assert not re.search(r"[<>&\u2028\u2029]", text)
    assert json.loads(text) == obj


def test_readable_uses_display_names():
    assert readable("sensitivity_peak 1.83 > limit 1.7") == "Ms 1.83 > limit 1.7"
    assert readable("no key here") == "no key here"


# ------------------------------------------------------------------------------------
# chart specs
# ------------------------------------------------------------------------------------
def test_chart_specs_layers_encodings_params(kiln):
    study, ds = kiln
    charts = chart_specs(study, ds)
    assert {"plant", "bode", "nichols", "sensitivity", "steps", "load"} <= set(charts)
    specs = {k: _spec(c) for k, c in charts.items()}
    # every design chart uses the pick selection in an opacity condition
    for name, spec in specs.items():
        if name == "plant":
            continue
        conds = [
            d["opacity"]["condition"]
            for d in _walk(spec)
            if isinstance(d.get("opacity"), dict) and "condition" in d["opacity"]
        ]
        assert any(c.get("param") == "pick" for c in conds), name
    # each design has one colour and one dash everywhere, lines distinguishable
    doms = [
        (tuple(d["scale"]["domain"]), tuple(map(tuple, d["scale"]["range"])))
        for d in _walk(specs["bode"])
        if d.get("field") == "name" and isinstance(d.get("scale"), dict)
        and "domain" in d["scale"] and isinstance(d["scale"]["range"][0], list)
    ]
    assert doms and len(set(doms[0][1])) >= 1
    bode = json.dumps(specs["bode"])
    assert '"type": "log"' in bode and "target crossover" in bode and "PM target (55" in bode
    datasets = specs["bode"]["datasets"]
    vals = [r["v"] for rows in datasets.values() for r in rows if "label" in r and "v" in r]
    assert 0.06 in vals and -125.0 in vals
    nich = _texts(specs["nichols"])
    assert any(f"Ms = {study.limits['sensitivity_peak']:g}" in s for s in nich)
    assert "3 dB" in nich  # a contour label drawn on the chart
    steps = json.dumps(specs["steps"])
    assert '"lo": 0.98' in steps and '"hi": 1.02' in steps and '"field": "u"' in steps
    assert '"field": "y_load"' in json.dumps(specs["load"])
    # the plant's own response: the plant appears
    assert any("Plant gain" in s for s in _texts(specs["plant"]))


def test_pareto_has_the_ms_limit_line_and_log_axis_for_spread_values(kiln):
    study, ds = kiln
    ds = json.loads(json_text(ds))
    for d, hf in zip(ds, (0.0, 2.0, 300.0), strict=True):
        d["metrics"]["noise_gain"] = hf
    spec = _spec(chart_specs(study, ds)["pareto_hf"])
    assert f"Ms limit {study.limits['sensitivity_peak']:g}" in _texts(spec)
    scales = [d["scale"] for d in _walk(spec)
              if d.get("field") == "noise_gain" and isinstance(d.get("scale"), dict)]
    assert scales and scales[0]["type"] == "symlog"  # 0 and 2..300: spans decades


def test_a_chart_with_one_point_is_left_out(kiln):
    study, ds = kiln
    one = json.loads(json_text(ds))
    for d in one[1:]:
        d["metrics"]["iae_load"] = None
    charts = chart_specs(study, one)
    assert "pareto_iae" not in charts and "pareto_hf" in charts


def test_default_ms_when_no_limit(kiln):
    study, ds = kiln
    from dataclasses import replace

    free = replace(study, limits={})
    assert any(f"Ms = {DEFAULT_MS:g}" in s for s in _texts(_spec(chart_specs(free, ds)["nichols"])))


@pytest.mark.slow
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


# ------------------------------------------------------------------------------------
# HTML page
# ------------------------------------------------------------------------------------
def _markup(page: str) -> str:
    return re.sub(r"(<script[^>]*>).*?(</script>)", r"\1\2", page, flags=re.S | re.I)


def test_html_is_offline_and_has_text(kiln, tmp_path):
    study, ds = kiln
    page = write_report(study, ds, tmp_path / "r.html").read_text(encoding="utf-8")
    # outside inline script bodies, no tag may load anything
    markup = _markup(page)
    assert markup.count("<script") == 3
    assert not re.search(r"<script[^>]*\ssrc\s*=", markup, re.I)
    assert not re.search(r"\s(src|href)\s*=", markup, re.I)
    assert "@import" not in markup and not re.search(r"url\(", markup)
    assert CAUTION in page and study.name in page
    assert "Lowest order that meets spec" in page and "sampled transport delay" in page
    assert "PI + lead" in page and "rad/s" in page
    low = lowest_order_meeting(ds)
    got = re.search(r'id="lowest-order"[^>]*>([^<]*)<', page)
    assert got and got.group(1) == ("none" if low is None else f"order {low}")
    # the plant in factored form, with its delay
    assert "P(s) = 0.005 / [(s + 0.1) (s + 0.02)] · e^(−6s)" in page


def test_page_table_follows_the_given_order_and_terminal_columns(kiln, tmp_path):
    study, ds = kiln
    ds = list(reversed(ds))  # whatever order the caller ranked them in is kept
    page = write_report(study, ds, tmp_path / "r.html").read_text(encoding="utf-8")
    table = page[page.index("<table class='ranked'>"):]
    table = table[: table.index("</table>")]
    heads = re.findall(r"<th>(.*?)</th>", table)
    term_head = ranked_table(ds).splitlines()[0].split()
    assert " ".join(heads).split() == term_head
    names = re.findall(r"<td class='name'>.*?<b>(.*?)</b>", table)
    assert names == [d["name"] for d in ds]


def test_recommended_first_with_reasons_and_summary(kiln, tmp_path):
    study, ds = kiln
    name = ds[1]["name"]
    answer = {"design": name, "order": ds[1]["order"], "why": "lowest order; calm control"}
    page = write_report(study, ds, tmp_path / "r.html", answer=answer,
                        summary=["answer: order 2 suffices", "explored 1 structure"])
    text = page.read_text(encoding="utf-8")
    rec = text.index("id='recommended'")
    assert text.index("Recommended: " + name) > rec
    assert "lowest order; calm control" in text and "explored 1 structure" in text
    assert rec < text.index('id="plant"')  # the answer comes first
    assert "class='rec ok'" in text or "class='rec miss'" in text  # the row is highlighted


def test_the_answers_alternatives_are_the_cards_beside_it(kiln, tmp_path):
    study, ds = kiln
    name, other = ds[1]["name"], ds[2]["name"]
    answer = {"design": name, "order": ds[1]["order"], "why": "calm control",
              "alternatives": [{"criterion": "lowest load IAE", "design": other,
                                "trade_off": "9 % less load IAE for 30 % more noise gain"}]}
    page = write_report(study, ds, tmp_path / "r.html", answer=answer, summary=["answer: x"])
    text = page.read_text(encoding="utf-8")
    card = text[text.index(f"<div class='card alt'><h3>{other}"):]
    card = card[: card.index("(±: against the recommended)")]
    assert "lowest load IAE" in card and "9 % less load IAE for 30 % more noise gain" in card


def test_nothing_meets_and_empty_pages(kiln, tmp_path):
    study, ds = kiln
    missing = json.loads(json_text(ds))
    for d in missing:
        d["meets_targets"] = False
        d["misses"] = ["sensitivity_peak 1.9 > limit 1.7"]
    summary = ["answer: no explored structure meets the targets and limits",
               "PI: breaks the limit sensitivity_peak in 8/8 trials; best Ms reached 1.82"]
    page = write_report(study, missing, tmp_path / "n.html",
                        answer={"design": None, "order": None, "why": "nothing meets"},
                        summary=summary).read_text(encoding="utf-8")
    assert "id='nothing-meets'" in page and "nothing meets" in page
    assert "Ms 1.9 &gt; limit 1.7" in page and "best Ms reached 1.82" in page
    assert '"chart-bode"' not in page or "chart-bode" in page  # charts of what exists
    assert "id='chart-bode'" in page
    empty = write_report(study, [], tmp_path / "e.html", summary=summary).read_text(
        encoding="utf-8"
    )
    assert "id='nothing-meets'" in empty and "<style>" in empty and CAUTION in empty
    assert "id='chart-plant'" in empty and "id='chart-bode'" not in empty
    assert "best Ms reached 1.82" in empty and "P(s) = " in empty


def test_hostile_design_name_cannot_break_the_page(kiln, tmp_path):
    study, ds = kiln
    ds = json.loads(json_text(ds))
    ds[0]["name"] = "<!--<script>"
    ds[1]["name"] = "</script><b>x</b>"
    page = write_report(study, ds, tmp_path / "h.html").read_text(encoding="utf-8")
    assert _markup(page).count("<script") == 3 and page.count("</script>") == 3
    assert "<b>x</b>" not in page and "&lt;/script&gt;&lt;b&gt;x&lt;/b&gt;" in page


def test_bad_input(tmp_path, kiln):
    study, ds = kiln
    with pytest.raises(LoopscoutError, match="'name' and 'metrics'"):
        write_report(study, [{"name": "x"}], tmp_path / "x.html")
    with pytest.raises(LoopscoutError, match="cannot write report"):
        write_report(study, ds, tmp_path / "no" / "such" / "x.html")
    bad = tmp_path / "d.json"
    bad.write_text("{nope")
    with pytest.raises(LoopscoutError, match="not JSON"):
        load_designs(bad)
    bad.write_text(json.dumps({"designs": [{"name": "a"}]}))
    with pytest.raises(LoopscoutError, match="lacks 'compensator'"):
        load_designs(bad)
    with pytest.raises(LoopscoutError, match="--format"):
        export_charts(study, ds, tmp_path, formats=("gif",))
    d = ds[0].to_json()
    d["compensator"]["zeros"] = ["abc"]
    with pytest.raises(LoopscoutError, match="not a number"):
        chart_specs(study, [d])


def test_designs_json_roundtrip(kiln, tmp_path):
    study, ds = kiln
    p = tmp_path / "designs.json"
    p.write_text(json_text({"designs": ds}))
    assert [d["name"] for d in load_designs(p)] == [d["name"] for d in ds]


def test_log_axes_tick_at_decades_and_a_control_kick_is_clipped_and_said() -> None:
    import pandas as pd

    from explorer.outputs.report import _decades, _kick_clipped_domain

    assert _decades(pd.Series([5e-4, 0.3, 7.0])) == [1e-4, 1e-3, 1e-2, 1e-1, 1.0, 10.0]
    t = np.linspace(0.0, 100.0, 1001)
    calm = pd.DataFrame({"t_s": t, "u": 1.0 - np.exp(-t / 10.0)})
    assert _kick_clipped_domain(calm, "u") is None
    kick = calm.assign(u=calm["u"] + 200.0 * np.exp(-t / 0.2))
    lo, hi, peak = _kick_clipped_domain(kick, "u")
    assert peak == pytest.approx(200.0)
    assert lo < 0.0 < 1.0 < hi < 1.5


# ------------------------------------------------------------------------------------
# slide images: text must be drawn
# ------------------------------------------------------------------------------------
def _png_rows(data: bytes, n_rows: int) -> np.ndarray:
    """The top ``n_rows`` of an 8-bit RGB/RGBA non-interlaced PNG as (rows, w, c):
    zlib-inflate the IDAT stream and undo the five row filters (PNG spec, W3C 2nd ed.
    sec. 9). Each row depends only on the rows above, so the top band suffices."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, idat, hdr = 8, b"", None
    while pos < len(data):
        n, kind = struct.unpack(">I4s", data[pos : pos + 8])
        body = data[pos + 8 : pos + 8 + n]
        if kind == b"IHDR":
            hdr = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
        pos += 12 + n
    assert hdr is not None
    w, h, depth, ctype, _, _, interlace = hdr
    assert depth == 8 and ctype in (2, 6) and interlace == 0
    c = 3 if ctype == 2 else 4
    stride = w * c
    n_rows = min(n_rows, h)
    raw = zlib.decompressobj().decompress(idat, n_rows * (stride + 1))
    out = np.zeros((n_rows, stride), np.int64)
    prev = [0] * stride
    for y in range(n_rows):
        f = raw[y * (stride + 1)]
        line = raw[y * (stride + 1) + 1 : (y + 1) * (stride + 1)]
        cur = [0] * stride
        for x in range(stride):
            a = cur[x - c] if x >= c else 0
            b = prev[x]
            if f == 0:
                pred = 0
            elif f == 1:
                pred = a
            elif f == 2:
                pred = b
            elif f == 3:
                pred = (a + b) // 2
            else:
                cc = prev[x - c] if x >= c else 0
                p = a + b - cc
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - cc)
                pred = a if pa <= pb and pa <= pc else (b if pb <= pc else cc)
            cur[x] = (line[x] + pred) & 0xFF
        out[y] = cur
        prev = cur
    return out.reshape(n_rows, w, c)


def _without_text(spec: dict) -> dict:
    """The same chart with every title, axis and legend text transparent (same layout)."""
    out = json.loads(json.dumps(spec))
    cfg = out.setdefault("config", {})
    cfg.setdefault("title", {}).update(color="transparent", subtitleColor="transparent")
    cfg.setdefault("axis", {}).update(labelColor="transparent", titleColor="transparent")
    cfg.setdefault("legend", {}).update(labelColor="transparent", titleColor="transparent")
    return out


#: Top band of a 2x slide image holding the first title (10 px padding, 14 px font).
_BAND = 64


def _title_ink(png: bytes, spec: dict) -> int:
    """Pixels in the title band that differ from the same chart drawn without text."""
    import vl_convert as vlc

    a = _png_rows(png, _BAND)[..., :3]
    b = _png_rows(vlc.vegalite_to_png(_without_text(spec), scale=2), _BAND)[..., :3]
    assert a.shape == b.shape
    return int(np.sum(np.abs(a - b).max(axis=2) > 40))


@pytest.mark.slow
def test_png_and_svg_slides_carry_text(kiln, tmp_path):
    import vl_convert as vlc

    from explorer.outputs.report import _theme

    study, ds = kiln
    paths = export_charts(study, ds, tmp_path, formats=("png", "svg"))
    names = set(chart_specs(study, ds))
    assert {p.stem for p in paths} == names and len(paths) == 2 * len(names)
    specs = {k: _spec(_theme(c)) for k, c in chart_specs(study, ds).items()}
    for p in paths:
        if p.suffix == ".svg":
            root = ET.parse(p).getroot()
            texts = ["".join(t.itertext()).strip() for t in root.iter()
                     if t.tag.endswith("text")]
            assert sum(bool(t) for t in texts) >= 5, p.name  # titles, ticks, labels
            continue
        assert _title_ink(p.read_bytes(), specs[p.stem]) > 60, p.name
    # the check fails on a text-less image: the same chart with the font list that
    # reached the renderer before (an unquoted family starting with a digit)
    bad = json.loads(json.dumps(specs["plant"]))
    bad["config"]["font"] = "Source Sans 3, Segoe UI, Helvetica, Arial, sans-serif"
    assert _title_ink(vlc.vegalite_to_png(bad, scale=2), bad) == 0


# ------------------------------------------------------------------------------------
# headless Chromium
# ------------------------------------------------------------------------------------
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
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium not installed (CI installs it from Debian packages)"
)


def _dom(page: Path, width: int) -> str:
    with tempfile.TemporaryDirectory() as prof:
        return subprocess.run(
            [CHROMIUM, *FLAGS, f"--user-data-dir={prof}", "--virtual-time-budget=15000",
             f"--window-size={width},2000", "--dump-dom", page.as_uri()],
            capture_output=True, text=True, timeout=300,
        ).stdout


def _check_rendered(dom: str) -> None:
    assert 'data-rendered="yes"' in dom, "vega-embed did not finish"
    errors = re.search(r'<pre id="errors">(.*?)</pre>', dom, re.S)
    assert errors is not None and errors.group(1).strip() == "", (
        errors.group(1) if errors else dom[-500:]
    )
    slots = re.findall(r'<div id="chart-([a-z_]+)"([^>]*)>(.*?)</div>', dom, re.S)
    assert slots
    for name, attrs, body in slots:
        assert 'data-drawn="yes"' in attrs, name
        # drawn: an svg with marks and text
        assert "<svg" in body and ('class="mark-line' in body or 'class="mark-symbol' in body), name
        assert re.search(r"<text[^>]*>[^<]+</text>", body), name


@pytest.mark.slow
@needs_chromium
@pytest.mark.parametrize("path", ALL_STUDIES, ids=lambda p: p.stem)
def test_every_bundled_study_renders_at_two_widths(path, tmp_path):
    study = load_study(path)
    ds = given_designs(study)
    ds[0] = ds[0].with_changes(pareto=True)
    page = write_report(study, ds, tmp_path / "r.html")
    html_text = page.read_text(encoding="utf-8")
    expected = set(re.findall(r"id='chart-([a-z_]+)'", html_text))
    assert {"plant", "bode", "nichols", "sensitivity"} <= expected
    for width in (1400, 820):
        dom = _dom(page, width)
        _check_rendered(dom)
        drawn = set(re.findall(r'<div id="chart-([a-z_]+)"[^>]*data-drawn="yes"', dom))
        assert drawn == expected, (width, expected - drawn)


@pytest.mark.slow
@needs_chromium
def test_nothing_meets_empty_and_hostile_pages_render_styled(kiln, tmp_path):
    study, ds = kiln
    hostile = json.loads(json_text(ds))
    hostile[0]["name"], hostile[1]["name"] = "<!--<script>", "</script>"
    for d in hostile:
        d["meets_targets"] = False
    pages = [
        write_report(study, hostile, tmp_path / "h.html",
                     answer={"design": None, "order": None, "why": "none meets"},
                     summary=["answer: none", "PI: no feasible trial"]),
        write_report(study, [], tmp_path / "e.html", summary=["answer: none"]),
    ]
    for page in pages:
        dom = _dom(page, 1000)
        _check_rendered(dom)
        assert "id=\"nothing-meets\"" in dom or "id='nothing-meets'" in dom
        assert "<style>" in dom and "header" in dom
    dom = _dom(pages[0], 1000)
    assert "&lt;!--&lt;script&gt;" in dom  # shown as text, charts drawn (checked above)


@pytest.mark.slow
@needs_chromium
def test_screenshot_is_a_png(kiln, tmp_path):
    study, ds = kiln
    page = write_report(study, ds, tmp_path / "r.html")
    shot = tmp_path / "shot.png"
    with tempfile.TemporaryDirectory() as prof:
        subprocess.run(
            [CHROMIUM, *FLAGS, f"--user-data-dir={prof}", "--virtual-time-budget=15000",
             f"--screenshot={shot}", "--window-size=1400,3000", page.as_uri()],
            capture_output=True, timeout=300,
        )
    px = _png_rows(shot.read_bytes(), 70) if shot.exists() else None
    assert px is not None and px.shape[1] == 1400
    # the page header band is drawn in its dark colour (styled, not a bare page)
    assert px[20:60, 20:200, :3].mean() < 80
