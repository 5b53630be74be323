"""Charts and the offline HTML report (the only module that imports altair).

Data flow: DESIGN dicts (interface.md) -> tidy pandas frames (one function each)
-> small chart functions (frame in, chart out) -> one concatenated dashboard whose
selection parameter ``pick`` (click a point or line, shift-click for more) highlights
the same designs in every view -> one self-contained HTML page (the Vega bundle from
vl-convert inlined, data inline, no network at view time).

Closed-loop magnitude contours on the gain-phase chart: |T| = |L/(1+L)| = M is the
circle of centre -M^2/(M^2-1) and radius M/|M^2-1| in the L plane (the classical
M-circles, e.g. Franklin, Powell & Emami-Naeini, "Feedback Control of Dynamic
Systems", sec. 6.7); the sensitivity limit |1+L| >= 1/Ms is the circle of centre -1,
radius 1/Ms (Astrom & Murray, "Feedback Systems", 2008, sec. 12.2). Both are mapped
point by point to (phase deg, magnitude dB).
"""

from __future__ import annotations

import html
import json
import math
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Literal, cast

import altair as alt
import numpy as np
import pandas as pd

from explorer.caution import CAUTION
from explorer.errors import DesignError, LoopscoutError
from explorer.evaluate import METRIC_UNITS
from explorer.loop import Rational
from explorer.study import Study
from explorer.timeresp import fold_threshold_rad_s

__all__ = [
    "DEFAULT_MS",
    "MAX_RESPONSE_DESIGNS",
    "N_FREQ",
    "design_frame",
    "response_designs",
    "frequency_frame",
    "step_frame",
    "m_contour_frame",
    "ms_circle_frame",
    "chart_specs",
    "dashboard",
    "export_charts",
    "lowest_order_meeting",
    "write_report",
]

#: Ms drawn on the gain-phase chart when the study sets no limit (common practice).
DEFAULT_MS = 1.7
MAX_RESPONSE_DESIGNS = 12
N_FREQ = 300
_HAND = ("hand", "phase-balanced")
_PALETTE = ["#1b6f6a", "#d9822b", "#5b4b9a", "#b8404f", "#3f7fbf", "#7a8c2e", "#a0627a", "#2f4858"]
_MISS_GREY = "#b9b9b4"
_INK = "#24302e"
_FONT = "Source Sans 3, Segoe UI, Helvetica, Arial, sans-serif"


# ------------------------------------------------------------------------------------
# tidy frames
# ------------------------------------------------------------------------------------
def _root(v: Any) -> complex:
    try:
        return complex(v.replace(" ", "")) if isinstance(v, str) else complex(float(v))
    except (TypeError, ValueError, AttributeError):
        raise LoopscoutError(f"compensator root {v!r} is not a number or complex string") from None


def _comp(d: dict[str, Any]) -> Rational:
    try:
        c = d["compensator"]
        return Rational(
            gain=float(c["gain"]),
            zeros=tuple(_root(z) for z in c["zeros"]),
            poles=tuple(_root(p) for p in c["poles"]),
        )
    except (KeyError, TypeError) as exc:
        raise LoopscoutError(f"design {d.get('name', '?')!r}: bad compensator ({exc})") from None


def _num(v: Any) -> float:
    return float("nan") if v is None else float(v)


def design_frame(designs: Sequence[dict[str, Any]]) -> pd.DataFrame:
    """One row per design: name, origin, structure, order, meets, pareto, hand, key metrics."""
    rows = []
    for d in designs:
        if not isinstance(d, dict) or "name" not in d or "metrics" not in d:
            raise LoopscoutError("every design needs at least 'name' and 'metrics'")
        m = d["metrics"]
        rows.append(
            {
                "name": str(d["name"]),
                "origin": str(d.get("origin", "given")),
                "structure": str(d.get("structure", "?")),
                "order": f"order {int(d.get('order', 0))}",
                "meets": bool(d.get("meets_targets")),
                "pareto": bool(d.get("pareto")),
                "hand": d.get("origin") in _HAND,
                "status": "meets targets" if d.get("meets_targets") else "misses targets",
                "Ms": _num(m.get("sensitivity_peak")),
                "hf_gain": _num(m.get("hf_gain")),
                "iae_load": _num(m.get("iae_load")),
                "crossover_rad_s": _num(m.get("crossover_rad_s")),
                "phase_margin_deg": _num(m.get("phase_margin_deg")),
                "overshoot_pct": _num(m.get("overshoot_pct")),
            }
        )
    return pd.DataFrame(rows)


def response_designs(designs: Sequence[dict[str, Any]]) -> list[dict[str, Any]]:
    """At most MAX_RESPONSE_DESIGNS: Pareto designs and hand designs first, then the rest."""
    first = [d for d in designs if d.get("pareto") or d.get("origin") in _HAND]
    rest = [d for d in designs if d not in first]
    return (first + rest if len(first) < 3 else first)[:MAX_RESPONSE_DESIGNS]


def _grid(study: Study, designs: Sequence[dict[str, Any]]) -> np.ndarray:
    wcs = [_num(d["metrics"].get("crossover_rad_s")) for d in designs]
    tc = study.targets.crossover_rad_s
    if isinstance(tc, tuple):
        wcs += list(tc)
    elif tc is not None:
        wcs.append(float(tc))
    wcs = [w for w in wcs if math.isfinite(w) and w > 0] or [1.0]
    return np.logspace(math.log10(min(wcs)) - 2, math.log10(max(wcs)) + 2, N_FREQ)


def frequency_frame(study: Study, designs: Sequence[dict[str, Any]]) -> pd.DataFrame:
    """Long frame: name, omega_rad_s, mag_db, phase_deg, S_db, T_db per design and frequency."""
    w = _grid(study, designs)
    parts = []
    for d in designs:
        loop = study.plant * _comp(d)
        lv = loop.freqresp(w)
        with np.errstate(divide="ignore"):
            parts.append(
                pd.DataFrame(
                    {
                        "name": str(d["name"]),
                        "omega_rad_s": w,
                        "mag_db": 20 * np.log10(np.abs(lv)),
                        "phase_deg": np.degrees(loop.phase_rad(w)),
                        "S_db": -20 * np.log10(np.abs(1 + lv)),
                        "T_db": 20 * np.log10(np.abs(lv / (1 + lv))),
                    }
                )
            )
    return (
        pd.concat(parts, ignore_index=True)
        if parts
        else pd.DataFrame(columns=["name", "omega_rad_s", "mag_db", "phase_deg", "S_db", "T_db"])
    )


def step_frame(
    study: Study, designs: Sequence[dict[str, Any]], n_points: int = 400
) -> pd.DataFrame:
    """Long frame: name, t_s, y, u for the unit reference step of each stable design."""
    from explorer.timeresp import simulate_steps

    stable = [d for d in designs if d["metrics"].get("closed_loop_stable")]
    ts = [_num(d["metrics"].get("settling_time_s")) for d in stable]
    ts = [t for t in ts if math.isfinite(t) and t > 0]
    t_end = 1.5 * max(ts) if ts else None
    parts = []
    for d in stable:
        try:
            r = simulate_steps(study.plant, _comp(d), t_end_s=t_end)
        except DesignError:  # a response the simulator cannot resolve is left out
            continue
        idx = np.unique(np.linspace(0, r.t_s.size - 1, min(n_points, r.t_s.size)).astype(int))
        parts.append(
            pd.DataFrame(
                {"name": str(d["name"]), "t_s": r.t_s[idx], "y": r.y_ref[idx], "u": r.u_ref[idx]}
            )
        )
    return (
        pd.concat(parts, ignore_index=True)
        if parts
        else pd.DataFrame(columns=["name", "t_s", "y", "u"])
    )


def _to_gain_phase(lv: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """L values -> (phase deg in (-360, 0], magnitude dB)."""
    ph = np.degrees(np.angle(lv))
    ph = np.where(ph > 0, ph - 360.0, ph)
    return ph, 20 * np.log10(np.abs(lv))


def m_contour_frame(m_db: Sequence[float] = (-6, -3, -1, 0.5, 1, 2, 3, 6, 12)) -> pd.DataFrame:
    """Closed-loop |T| = M contours in gain-phase coordinates (M-circles, module doc)."""
    parts = []
    th = np.linspace(-math.pi, math.pi, 361)
    for mdb in m_db:
        m = 10 ** (mdb / 20)
        c, r = -m * m / (m * m - 1), m / abs(m * m - 1)
        ph, mag = _to_gain_phase(c + r * np.exp(1j * th))
        seg = np.concatenate([[0], np.cumsum(np.abs(np.diff(ph)) > 180)])
        keep = np.isfinite(mag) & (mag > -40) & (mag < 40)
        parts.append(
            pd.DataFrame(
                {
                    "M_db": mdb,
                    "label": f"|T| {mdb:g} dB",
                    "curve": [f"{mdb:g}/{s}" for s in seg],
                    "k": np.arange(th.size),
                    "phase_deg": ph,
                    "mag_db": mag,
                }
            )[keep]
        )
    return pd.concat(parts, ignore_index=True)


def ms_circle_frame(ms: float) -> pd.DataFrame:
    """The locus |1 + L| = 1/Ms in gain-phase coordinates."""
    th = np.linspace(-math.pi, math.pi, 361)
    ph, mag = _to_gain_phase(-1 + np.exp(1j * th) / ms)
    return pd.DataFrame(
        {"k": np.arange(th.size), "phase_deg": ph, "mag_db": mag, "label": f"Ms = {ms:g}"}
    )


# ------------------------------------------------------------------------------------
# charts (frame in, chart out)
# ------------------------------------------------------------------------------------
def _pick() -> alt.Parameter:
    return alt.selection_point(name="pick", fields=["name"], on="click", clear="dblclick")


def _opacity(pick: alt.Parameter) -> Any:
    return alt.condition(pick, alt.value(1.0), alt.value(0.12))


def pareto_chart(df: pd.DataFrame, x: str, x_title: str, pick: alt.Parameter) -> alt.LayerChart:
    """Ms against one objective; colour = structure (grey if targets missed), shape = order."""
    base = alt.Chart(df).encode(
        x=alt.X(f"{x}:Q", title=x_title, scale=alt.Scale(zero=False, nice=True, padding=24)),
        y=alt.Y("Ms:Q", title="Ms (sensitivity peak)", scale=alt.Scale(zero=False, padding=24)),
        tooltip=[
            "name:N",
            "origin:N",
            "structure:N",
            "order:N",
            "status:N",
            alt.Tooltip("Ms:Q", format=".3f"),
            alt.Tooltip(f"{x}:Q", format=".4g"),
        ],
    )
    pts = base.mark_point(filled=True, size=110, stroke=_INK, strokeWidth=0.6).encode(
        color=alt.condition(
            "datum.meets",
            alt.Color("structure:N", title="structure", scale=alt.Scale(range=_PALETTE)),
            alt.value(_MISS_GREY),
        ),
        shape=alt.Shape("order:N", title="order"),
        opacity=_opacity(pick),
    )
    if x == "hf_gain":
        pts = pts.add_params(pick)
    ring = (
        base.transform_filter("datum.hand")
        .mark_point(shape="diamond", filled=False, size=420, stroke=_INK, strokeWidth=1.8)
        .encode(opacity=_opacity(pick))
    )
    title = f"Ms against {x_title}" + ("" if len(df) else " — no design has a finite value")
    return (pts + ring).properties(width=330, height=240, title=title)


def _line(
    df: pd.DataFrame,
    y: str,
    y_title: str,
    pick: alt.Parameter,
    *,
    logx: bool = True,
    x: str = "omega_rad_s",
    x_title: str = "frequency ω (rad/s)",
    y_domain: tuple[float, float] | None = None,
) -> alt.Chart:
    y_scale = alt.Scale(zero=False) if y_domain is None else alt.Scale(domain=list(y_domain))
    return (
        alt.Chart(df)
        .mark_line(strokeWidth=2, clip=y_domain is not None)
        .encode(
            x=alt.X(
                f"{x}:Q",
                title=x_title,
                scale=alt.Scale(type="log") if logx else alt.Scale(),
                # "~g" only on log axes: on a linear time axis it printed "1e+2"
                axis=(
                    alt.Axis(format="~g", values=_decades(df[x]))
                    if logx
                    else alt.Axis(labelOverlap=True)
                ),
            ),
            y=alt.Y(f"{y}:Q", title=y_title, scale=y_scale),
            color=alt.Color("name:N", title="design", scale=alt.Scale(range=_PALETTE)),
            opacity=_opacity(pick),
            tooltip=[
                "name:N",
                alt.Tooltip(f"{x}:Q", format=".4g"),
                alt.Tooltip(f"{y}:Q", format=".4g"),
            ],
        )
    )


def _decades(values: pd.Series) -> list[float]:
    """Tick values of a log axis: the powers of ten spanned by ``values`` (labels at
    1-2-5 steps crowded each other on a six-decade axis)."""
    v = values[values > 0]
    if v.empty:
        return [1.0]
    lo, hi = math.floor(math.log10(float(v.min()))), math.ceil(math.log10(float(v.max())))
    return [10.0**k for k in range(lo, hi + 1)]


def _kick_clipped_domain(st: pd.DataFrame, col: str) -> tuple[float, float, float] | None:
    """(lo, hi, peak) when the first 2 % of the horizon holds a peak |col| over five
    times the largest |col| after it — a derivative kick that would flatten the rest of
    the chart — else None. The chart then shows [lo, hi] and says it is clipped."""
    if st.empty:
        return None
    t_max = float(st["t_s"].max())
    tail = st.loc[st["t_s"] > 0.02 * t_max, col]
    peak = float(st[col].abs().max())
    if tail.empty or peak <= 5.0 * float(tail.abs().max()):
        return None
    lo, hi = float(min(tail.min(), 0.0)), float(tail.max())
    pad = 0.1 * max(hi - lo, 1e-12)
    return lo - pad, hi + pad, peak


def _rules(
    values: Sequence[float], axis: str, label: str, dash: Sequence[int] = (5, 4)
) -> alt.Chart:
    df = pd.DataFrame({"v": list(values), "label": label})
    enc = {axis: alt.X("v:Q") if axis == "x" else alt.Y("v:Q")}
    return (
        alt.Chart(df)
        .mark_rule(color=_INK, strokeDash=list(dash), strokeWidth=1.2)
        .encode(**enc, tooltip=["label:N", alt.Tooltip("v:Q", format=".4g")])
    )


def bode_charts(fr: pd.DataFrame, study: Study, pick: alt.Parameter) -> alt.VConcatChart:
    """|L| (dB) and continuous phase (deg) against log ω with the target marks."""
    tc = study.targets.crossover_rad_s
    wc = list(tc) if isinstance(tc, tuple) else ([] if tc is None else [float(tc)])
    mag = _line(fr, "mag_db", "|L| (dB)", pick).add_params(pick) + _rules([0.0], "y", "0 dB")
    # the delay drives the phase without bound; show down to -450 deg (one turn past -90)
    ph: alt.Chart | alt.LayerChart | alt.FacetChart = _line(
        fr[fr["phase_deg"] >= -450.0], "phase_deg", "phase of L (deg)", pick
    )
    if wc:
        mag = mag + _rules(wc, "x", "target crossover")
        ph = ph + _rules(wc, "x", "target crossover")
    pm = study.targets.phase_margin_deg or study.limits.get("phase_margin_deg")
    if pm is not None:
        ph = ph + _rules([-180.0 + pm], "y", f"-180° + PM target ({pm:g}°)", (2, 3))
    return alt.vconcat(
        mag.properties(width=420, height=200, title="Loop gain"),
        ph.properties(width=420, height=200, title="Loop phase (continuous)"),
    )


def nichols_chart(fr: pd.DataFrame, ms: float, pick: alt.Parameter) -> alt.LayerChart:
    """Gain-phase chart: loops, |T| contours and the Ms locus."""
    sub = fr[(fr["mag_db"] > -30) & (fr["mag_db"] < 30)]
    cont = (
        alt.Chart(m_contour_frame())
        .mark_line(color="#9aa7a3", strokeWidth=0.8, clip=True)
        .encode(x="phase_deg:Q", y="mag_db:Q", detail="curve:N", order="k:Q", tooltip=["label:N"])
    )
    msl = (
        alt.Chart(ms_circle_frame(ms))
        .mark_line(color="#b8404f", strokeWidth=2, clip=True, strokeDash=[6, 3])
        .encode(x="phase_deg:Q", y="mag_db:Q", order="k:Q", tooltip=["label:N"])
    )
    loops = (
        alt.Chart(sub)
        .mark_line(strokeWidth=2, clip=True)
        .encode(
            x=alt.X(
                "phase_deg:Q",
                title="phase of L (deg)",
                scale=alt.Scale(domain=[-360, 0], nice=False),
            ),
            y=alt.Y("mag_db:Q", title="|L| (dB)", scale=alt.Scale(domain=[-30, 30])),
            color=alt.Color("name:N", title="design", scale=alt.Scale(range=_PALETTE)),
            order="omega_rad_s:Q",
            opacity=_opacity(pick),
            tooltip=["name:N", alt.Tooltip("omega_rad_s:Q", format=".4g")],
        )
    )
    return (cont + msl + loops).properties(
        width=420, height=300, title=f"Gain-phase chart, |T| contours, Ms = {ms:g} locus (red)"
    )


def sensitivity_chart(
    fr: pd.DataFrame, ms: float, pick: alt.Parameter
) -> alt.LayerChart | alt.FacetChart:
    """|S| and |T| (dB) against log ω; solid |S|, dashed |T|."""
    long = fr.melt(
        id_vars=["name", "omega_rad_s"], value_vars=["S_db", "T_db"], var_name="fn", value_name="db"
    )
    long.loc[:, "fn"] = long["fn"].map({"S_db": "|S|", "T_db": "|T|"})
    ch = _line(long, "db", "magnitude (dB)", pick).encode(
        strokeDash=alt.StrokeDash("fn:N", title="function"), detail="fn:N"
    )
    return (ch + _rules([20 * math.log10(ms)], "y", f"Ms = {ms:g}")).properties(
        width=420, height=220, title="Sensitivity |S| and complementary |T|"
    )


def step_charts(st: pd.DataFrame, study: Study, pick: alt.Parameter) -> alt.VConcatChart:
    """Unit reference step: output y with the ±2 % band and peaks, control signal u."""
    t_max = float(st["t_s"].max()) if len(st) else 1.0
    band = (
        alt.Chart(pd.DataFrame({"t0": [0.0], "t1": [t_max], "lo": [0.98], "hi": [1.02]}))
        .mark_rect(color="#1b6f6a", opacity=0.13)
        .encode(x="t0:Q", x2="t1:Q", y="lo:Q", y2="hi:Q")
    )
    y = _line(st, "y", "output y", pick, logx=False, x="t_s", x_title="time (s)")
    peaks = st.loc[st.groupby("name")["y"].idxmax()] if len(st) else st
    pk = (
        alt.Chart(peaks)
        .mark_point(shape="triangle-down", filled=True, size=70)
        .encode(
            x="t_s:Q",
            y="y:Q",
            color=alt.Color("name:N", scale=alt.Scale(range=_PALETTE)),
            opacity=_opacity(pick),
            tooltip=["name:N", alt.Tooltip("y:Q", format=".4f", title="peak y")],
        )
    )
    layers = band + y + pk
    os_lim = study.limits.get("overshoot_pct")
    if os_lim is not None:
        layers = layers + _rules([1 + os_lim / 100], "y", f"overshoot limit {os_lim:g} %", (2, 3))
    clip = _kick_clipped_domain(st, "u")
    u_title = "Reference step: control signal"
    if clip is not None:
        u_title += f" (initial kick up to |u| = {clip[2]:.3g} clipped; see peak control)"
    u = _line(
        st, "u", "control u", pick, logx=False, x="t_s", x_title="time (s)",
        y_domain=None if clip is None else (clip[0], clip[1]),
    )
    return alt.vconcat(
        layers.properties(width=420, height=220, title="Reference step: output (±2 % band)"),
        u.properties(width=420, height=180, title=u_title),
    )


def _ms(study: Study) -> float:
    return float(study.limits.get("sensitivity_peak", DEFAULT_MS))


def chart_specs(study: Study, designs: Sequence[dict[str, Any]]) -> dict[str, alt.TopLevelMixin]:
    """Every chart by name (each standalone, sharing the ``pick`` parameter definition)."""
    if not designs:
        raise LoopscoutError("no designs to chart")
    df = design_frame(designs)
    sel = response_designs(designs)
    fr = frequency_frame(study, sel)
    st = step_frame(study, sel)
    ms = _ms(study)
    pick = _pick()
    out: dict[str, Any] = {
        "pareto_hf": pareto_chart(df, "hf_gain", "hf_gain (noise gain)", pick),
        "pareto_iae": pareto_chart(
            df.dropna(subset=["iae_load"]), "iae_load", "iae_load (load IAE)", pick
        ),
        "bode": bode_charts(fr, study, pick),
        "nichols": nichols_chart(fr, ms, pick),
        "sensitivity": sensitivity_chart(fr, ms, pick),
        "steps": step_charts(st, study, pick),
    }
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Automatically deduplicated")
        for key in ("pareto_iae", "nichols", "sensitivity", "steps"):
            out[key] = out[key].add_params(pick)
    return out


def _theme(ch: alt.TopLevelMixin) -> alt.TopLevelMixin:
    return (
        ch.configure(font=_FONT, background="#fbfaf6")
        .configure_view(stroke="#d8d4c8", fill="#ffffff")
        .configure_axis(
            labelColor=_INK,
            titleColor=_INK,
            gridColor="#ecebe4",
            domainColor="#8d958f",
            labelFontSize=11,
            titleFontSize=12,
            titleFontWeight="normal",
        )
        .configure_title(color=_INK, fontSize=14, anchor="start", fontWeight=600)
        .configure_legend(labelColor=_INK, titleColor=_INK, orient="right")
    )


def dashboard(study: Study, designs: Sequence[dict[str, Any]]) -> alt.TopLevelMixin:
    """All charts in one concatenated, themed chart with one shared ``pick`` selection."""
    if not designs:
        raise LoopscoutError("no designs to chart")
    df = design_frame(designs)
    sel = response_designs(designs)
    fr, st, ms, pick = frequency_frame(study, sel), step_frame(study, sel), _ms(study), _pick()
    top = alt.hconcat(
        pareto_chart(df, "hf_gain", "hf_gain (noise gain)", pick),
        pareto_chart(df.dropna(subset=["iae_load"]), "iae_load", "iae_load (load IAE)", pick),
    )
    mid = alt.hconcat(bode_charts(fr, study, pick), nichols_chart(fr, ms, pick))
    low = alt.hconcat(sensitivity_chart(fr, ms, pick), step_charts(st, study, pick))
    ch = alt.vconcat(top, mid, low).resolve_scale(
        color="independent", shape="independent", strokeDash="independent"
    )
    return _theme(ch)


def export_charts(
    study: Study,
    designs: Sequence[dict[str, Any]],
    out_dir: Path,
    formats: Sequence[str] = ("png", "svg"),
) -> list[Path]:
    """Each chart as ``<name>.<fmt>`` in ``out_dir`` (png, svg) for slides."""
    bad = [f for f in formats if f not in ("png", "svg")]
    if bad:
        raise LoopscoutError(f"--format must be png or svg, got {bad[0]!r}")
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = []
    with alt.data_transformers.enable("default", max_rows=200_000):
        for name, ch in chart_specs(study, designs).items():
            for fmt in formats:
                p = out_dir / f"{name}.{fmt}"
                with warnings.catch_warnings():
                    warnings.filterwarnings("ignore", message="Automatically deduplicated")
                    opts: dict[str, Any] = {"scale_factor": 2} if fmt == "png" else {}
                    # fmt is "png" or "svg": checked above
                    _theme(ch).save(p, format=cast(Literal["png", "svg"], fmt), **opts)
                paths.append(p)
    return paths


# ------------------------------------------------------------------------------------
# HTML
# ------------------------------------------------------------------------------------
def lowest_order_meeting(designs: Sequence[dict[str, Any]]) -> int | None:
    """Smallest compensator order among designs with meets_targets true (None: none)."""
    orders = [int(d.get("order", 0)) for d in designs if d.get("meets_targets")]
    return min(orders) if orders else None


def _fmt_roots(roots: Sequence[Any]) -> str:
    out = []
    for r in roots:
        c = _root(r)
        if abs(c) == 0:
            out.append("s")
        elif c.imag == 0:
            out.append(f"(s {'+' if c.real < 0 else '−'} {abs(c.real):.4g})")
        elif c.imag > 0:
            out.append(
                f"(s² {'+' if c.real < 0 else '−'} {abs(2 * c.real):.4g}s + {abs(c) ** 2:.4g})"
            )
    return " ".join(out) or "1"


def factored(comp: dict[str, Any]) -> str:
    """A compensator written as gain · ∏(s − z) / ∏(s − p), complex pairs as quadratics."""
    num, den = _fmt_roots(comp.get("zeros", [])), _fmt_roots(comp.get("poles", []))
    g = f"{float(comp['gain']):.5g}"
    return g if num == den == "1" else f"{g} · {num} / {den}" if den != "1" else f"{g} · {num}"


_TABLE_KEYS = (
    "crossover_rad_s",
    "phase_margin_deg",
    "gain_margin_db",
    "sensitivity_peak",
    "hf_gain",
    "iae_load",
    "overshoot_pct",
    "settling_time_s",
)


def _cell(v: Any) -> str:
    if v is None:
        return "—"
    if isinstance(v, bool):
        return "yes" if v else "no"
    return f"{float(v):.4g}"


def _table(designs: Sequence[dict[str, Any]]) -> str:
    ranked = sorted(
        designs,
        key=lambda d: (
            not d.get("meets_targets"),
            not d.get("pareto"),
            _num(d["metrics"].get("sensitivity_peak"))
            if d["metrics"].get("sensitivity_peak") is not None
            else 1e9,
        ),
    )
    head = "".join(
        f"<th>{html.escape(METRIC_UNITS.get(k, (k, ''))[0])}"
        f"<span>{html.escape(METRIC_UNITS.get(k, (k, ''))[1])}</span></th>"
        for k in _TABLE_KEYS
    )
    rows = []
    for i, d in enumerate(ranked, 1):
        cls = "ok" if d.get("meets_targets") else "miss"
        why = "; ".join(d.get("misses") or [])
        cells = "".join(f"<td>{_cell(d['metrics'].get(k))}</td>" for k in _TABLE_KEYS)
        rows.append(
            f"<tr class='{cls}'><td>{i}</td><td><b>{html.escape(str(d['name']))}</b>"
            f"<div class='sub'>{html.escape(str(d.get('origin', '')))} · "
            f"{html.escape(str(d.get('structure', '')))}"
            f"</div></td><td class='tf'>{html.escape(factored(d['compensator']))}</td>"
            f"<td>{'yes' if d.get('meets_targets') else 'no'}"
            f"{'<div class=sub>' + html.escape(why) + '</div>' if why else ''}</td>{cells}</tr>"
        )
    return (
        f"<table><thead><tr><th>#</th><th>design</th><th>compensator C(s)</th><th>meets</th>{head}"
        f"</tr></thead><tbody>{''.join(rows)}</tbody></table>"
    )


def _targets_html(study: Study) -> str:
    t = study.targets
    tc = t.crossover_rad_s
    if isinstance(tc, tuple):
        tc_txt = f"{tc[0]:g}–{tc[1]:g} rad/s"
    else:
        tc_txt = "free" if tc is None else f"{tc:g} rad/s"
    items = [
        f"crossover: {tc_txt}",
        f"phase margin: {'—' if t.phase_margin_deg is None else f'{t.phase_margin_deg:g}°'}",
        f"integrators in the loop: {t.integrators}",
    ] + [f"limit {k}: {v:g}" for k, v in study.limits.items()]
    conv = "".join(f"<li>{html.escape(s)}</li>" for s in t.derived_from)
    return (
        "<ul>"
        + "".join(f"<li>{html.escape(s)}</li>" for s in items)
        + "</ul>"
        + (
            f"<p class='sub'>How the targets were obtained:</p><ul class='sub'>{conv}</ul>"
            if conv
            else ""
        )
    )


_CSS = """
body{margin:0;background:#fbfaf6;color:#24302e;\
font:15px/1.45 'Source Sans 3','Segoe UI',Helvetica,Arial,sans-serif}
header{background:#1b3a38;color:#f3efe2;padding:22px 36px}
header h1{margin:0;font-weight:600;font-size:26px;letter-spacing:.01em}
header p{margin:4px 0 0;opacity:.8}
main{padding:10px 36px 40px;max-width:1500px}
section{margin:22px 0}
h2{font-size:17px;font-weight:600;border-bottom:2px solid #d9822b;\
display:inline-block;padding-bottom:2px}
.cards{display:flex;gap:18px;flex-wrap:wrap}
.card{background:#fff;border:1px solid #e0dccf;border-radius:6px;padding:10px 18px;min-width:260px}
.big{font-size:22px;font-weight:600;color:#1b6f6a}
table{border-collapse:collapse;font-size:13px;background:#fff}
th,td{border-bottom:1px solid #e6e2d6;padding:5px 8px;text-align:right;vertical-align:top}
th{background:#f1eee4;font-weight:600}th span{display:block;font-weight:normal;color:#6b726e}
td:nth-child(2),td:nth-child(3),td:nth-child(4),th:nth-child(2),th:nth-child(3),th:nth-child(4){text-align:left}
tr.miss td{color:#8a8f8b}.tf{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:12px}
.sub{font-size:12px;color:#6b726e}
.caution{background:#fff4e0;border-left:5px solid #d9822b;padding:10px 16px}
#errors:empty{display:none}#errors{color:#b8404f}
"""


def write_report(study: Study, designs: list[dict[str, Any]], path: Path) -> Path:
    """Write the self-contained HTML report; returns ``path``."""
    import vl_convert as vlc

    path = Path(path)
    with alt.data_transformers.enable("default", max_rows=200_000), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Automatically deduplicated")
        spec = dashboard(study, designs).to_dict()
    from altair.utils._importers import vl_version_for_vl_convert

    # vl_convert's stub (__init__.pyi) declares `snippet` required, but the compiled
    # function defaults it to None (the default snippet, which puts vegaEmbed, vegaLite
    # and vega on window and which the page relies on): the stub is wrong, not the call
    bundle = vlc.javascript_bundle(vl_version=vl_version_for_vl_convert())  # type: ignore[call-arg]
    low = lowest_order_meeting(designs)
    low_txt = "none" if low is None else f"order {low}"
    fold_txt = ""
    if study.plant.delay_s > 0:
        w_far = fold_threshold_rad_s(study.plant.delay_s)
        fold_txt = (
            f"; stable roots above {w_far:.3g} rad/s may be folded into the delay there "
            "(same DC gain; docs/time-response.md)"
        )
    n_meet = sum(bool(d.get("meets_targets")) for d in designs)
    spec_js = json.dumps(spec).replace("</", "<\\/")
    bundle_js = bundle.replace("</script", "<\\/script")
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>loopscout report — {html.escape(study.name)}</title>
<style>{_CSS}</style>
<script>window.__errors=[];window.addEventListener('error',function(e){{window.__errors.push(String(e.message))}});</script>
<script>{bundle_js}</script>
</head><body>
<header><h1>{html.escape(study.name)}</h1>\
<p>loopscout design report · {len(designs)} designs, {n_meet} meet the targets</p></header>
<main>
<section class="cards">
<div class="card"><h2>Targets</h2>{_targets_html(study)}</div>
<div class="card"><h2>Lowest order that meets spec</h2>\
<div class="big" id="lowest-order">{low_txt}</div>
<p class="sub">smallest compensator order among designs that meet every target and limit</p></div>
<div class="card"><h2>Assumptions</h2><ul>
<li>linear time-invariant plant model as given in the study</li>
<li>the transport delay is exact in the frequency domain and a sampled transport delay \
in the step responses{fold_txt}</li>
<li>unit steps on the reference (and at the plant input for load IAE), applied at t = 0</li>\
</ul></div>
</section>
<section><h2>Designs, ranked</h2>\
<p class="sub">meeting designs first, then Pareto designs, then by Ms</p>{_table(designs)}</section>
<section><h2>Charts</h2><p class="sub">Click a design (point or curve) to highlight it everywhere; \
shift-click adds more; double-click clears. Grey points miss targets; \
diamonds mark hand designs.</p>
<div id="dash" class="vega-chart"></div></section>
<section class="caution" id="caution"><b>{html.escape(CAUTION)}</b></section>
<pre id="errors"></pre>
</main>
<script>
vegaEmbed('#dash', {spec_js}, {{renderer:'svg', actions:false}})
 .then(function(){{document.body.setAttribute('data-rendered','yes')}})
 .catch(function(e){{window.__errors.push(String(e))}})
 .finally(function(){{document.getElementById('errors').textContent=window.__errors.join(' | ')}});
</script>
</body></html>
"""
    try:
        path.write_text(page, encoding="utf-8")
    except OSError as exc:
        raise LoopscoutError(f"cannot write report {path}: {exc.strerror}") from None
    return path
