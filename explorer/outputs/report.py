"""Charts and the offline HTML report (the only module that imports altair).

Data flow: DESIGN dicts (docs/interface.md) -> tidy pandas frames (one function each)
-> small chart functions (frame in, chart out) -> the charts by name
(:func:`chart_specs`), each embedded in the page on its own and sharing the click
selection ``pick`` (the page copies the selection between the charts), and
exported one by one as PNG/SVG for slides. The page itself (tables, cards, text)
is built in :mod:`explorer.outputs.report_page`, which has no altair.

Every design keeps one line style in every chart and in the page's key
(:func:`design_styles`): a colour per design and a dash per origin (solid for
optimized and given designs, dashed for hand-style ones), a second dash when the
colours run out, so two designs never look alike.

Closed-loop magnitude contours on the gain-phase chart: |T| = |L/(1+L)| = M is the
circle of centre -M^2/(M^2-1) and radius M/|M^2-1| in the L plane (the classical
M-circles, e.g. Franklin, Powell & Emami-Naeini, "Feedback Control of Dynamic
Systems", sec. 6.7); the sensitivity limit |1+L| >= 1/Ms is the circle of centre -1,
radius 1/Ms (Astrom & Murray, "Feedback Systems", 2008, sec. 12.2). Both are mapped
point by point to (phase deg, magnitude dB).
"""

from __future__ import annotations

import json
import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, cast

import altair as alt
import numpy as np
import pandas as pd
import vl_convert as vlc

from explorer.core.errors import DesignError, LoopscoutError
from explorer.core.loop import Rational
from explorer.evaluation.family import sector_distance
from explorer.model.family_members import factor_ranges, sampled_members, scaled_plant
from explorer.model.study import Study
from explorer.outputs import report_page
from explorer.outputs.report_page import compensator_root, factored, requirements
from explorer.outputs.report_sampled import sample_time_of, sampled_loop_frame, sampled_step_frames
from explorer.time_domain.timeresp import simulate_steps

__all__ = [
    "DEFAULT_MS",
    "MAX_RESPONSE_DESIGNS",
    "N_FREQ",
    "FONT",
    "PALETTE",
    "DesignStyle",
    "design_styles",
    "design_frame",
    "response_designs",
    "recommended_name",
    "frequency_frame",
    "family_frame",
    "family_gain_phase_frame",
    "family_step_frame",
    "plant_frame",
    "step_frame",
    "m_contour_frame",
    "m_contour_labels",
    "ms_circle_frame",
    "chart_specs",
    "dashboard",
    "export_charts",
    "lowest_order_meeting",
    "factored",
    "write_report",
]

#: Ms drawn on the gain-phase chart when the study sets no limit (common practice).
DEFAULT_MS = 1.7
MAX_RESPONSE_DESIGNS = 12
N_FREQ = 300
_HAND = ("hand", "phase-balanced")
#: Line colours, one per design in rank order (ten hues far apart, then dashes vary).
PALETTE = (
    "#1b6f6a",  # deep teal
    "#d9822b",  # orange
    "#5b4b9a",  # violet
    "#b8404f",  # brick red
    "#3f7fbf",  # blue
    "#7a8c2e",  # olive
    "#c2569c",  # magenta
    "#8c5a2b",  # brown
    "#2b2b2b",  # near black
    "#c9a21a",  # mustard
)
#: Dash patterns: the first is by origin, the next ones are used when colours repeat.
_DASHES = ([1, 0], [7, 3], [2, 2], [10, 3, 2, 3])
_SHAPES = {"optimized": "circle", "given": "square", "hand": "diamond",
           "phase-balanced": "triangle-up"}
_INK = "#24302e"
_LIMIT_RED = "#b8404f"
#: Quoted family names: an unquoted name starting with a digit ("Source Sans 3")
#: makes the whole list invalid CSS, and the PNG renderer then draws no text at all.
FONT = "'Source Sans 3', 'Segoe UI', Helvetica, Arial, 'Liberation Sans', sans-serif"
_W = 400  # width of one chart (px)


# ------------------------------------------------------------------------------------
# designs: parsing, styles, selection
# ------------------------------------------------------------------------------------
def _comp(d: Mapping[str, Any]) -> Rational:
    try:
        c = d["compensator"]
        return Rational(
            gain=float(c["gain"]),
            zeros=tuple(compensator_root(z) for z in c["zeros"]),
            poles=tuple(compensator_root(p) for p in c["poles"]),
        )
    except (KeyError, TypeError) as exc:
        raise LoopscoutError(f"design {d.get('name', '?')!r}: bad compensator ({exc})") from None


def _num(v: Any) -> float:
    try:
        return float("nan") if v is None else float(v)
    except (TypeError, ValueError):
        return float("nan")


def _check_designs(designs: Sequence[Any]) -> None:
    for d in designs:
        if (not isinstance(d, Mapping) or "name" not in d
                or not isinstance(d.get("metrics"), Mapping)):
            raise LoopscoutError("every design needs at least 'name' and 'metrics'")


@dataclass(frozen=True, kw_only=True)
class DesignStyle:
    """How one design is drawn everywhere: line colour, dash pattern, point shape."""

    colour: str
    dash: tuple[int, ...]
    shape: str


def design_styles(designs: Sequence[Mapping[str, Any]]) -> dict[str, DesignStyle]:
    """One distinct style per design name, in the given (rank) order: colour by
    position, dash by origin (hand-style designs dashed), and the next dash whenever a
    (colour, dash) pair is already taken — no two designs share a look."""
    out: dict[str, DesignStyle] = {}
    taken: set[tuple[str, tuple[int, ...]]] = set()
    for i, d in enumerate(designs):
        name = str(d["name"])
        if name in out:
            continue
        colour = PALETTE[i % len(PALETTE)]
        k = 1 if d.get("origin") in _HAND else 0
        while (colour, tuple(_DASHES[k % len(_DASHES)])) in taken and k < 16:
            k += 1
        dash = tuple(_DASHES[k % len(_DASHES)])
        if (colour, dash) in taken:  # more than 40 designs: vary the colour instead
            colour = f"hsl({(37 * i) % 360}, 55%, 38%)"
        taken.add((colour, dash))
        out[name] = DesignStyle(
            colour=colour, dash=dash, shape=_SHAPES.get(str(d.get("origin")), "circle")
        )
    return out


def recommended_name(
    designs: Sequence[Mapping[str, Any]], answer: dict[str, Any] | None = None
) -> str | None:
    """The recommended design: ``answer["design"]`` when an answer is given (None
    stays None), else the lowest-order design meeting every target, lowest Ms first
    (the report's own pick for designs that come without an exploration answer)."""
    names = {str(d["name"]) for d in designs}
    if answer is not None:
        n = answer.get("design")
        return str(n) if n is not None and str(n) in names else None
    ok = [d for d in designs if d.get("meets_targets")]
    if not ok:
        return None
    best = min(
        ok,
        key=lambda d: (int(d.get("order", 0)), _num(d["metrics"].get("sensitivity_peak"))
                       if d["metrics"].get("sensitivity_peak") is not None else math.inf),
    )
    return str(best["name"])


def design_frame(
    designs: Sequence[Mapping[str, Any]], recommended: str | None = None
) -> pd.DataFrame:
    """One row per design: name, origin, structure, order, meets, pareto, hand, key metrics."""
    _check_designs(designs)
    rows = []
    for d in designs:
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
                "recommended": str(d["name"]) == recommended,
                "status": "meets targets" if d.get("meets_targets") else "misses targets",
                "Ms": _num(m.get("sensitivity_peak")),
                "hf_gain": _num(m.get("hf_gain")),
                "noise_gain": _num(m.get("noise_gain")),
                "iae_load": _num(m.get("iae_load")),
                "crossover_rad_s": _num(m.get("crossover_rad_s")),
                "phase_margin_deg": _num(m.get("phase_margin_deg")),
                "overshoot_pct": _num(m.get("overshoot_pct")),
                "peak_control": _num(m.get("peak_control")),
            }
        )
    return pd.DataFrame(rows)


def response_designs(
    designs: Sequence[Mapping[str, Any]], recommended: str | None = None
) -> list[Mapping[str, Any]]:
    """At most MAX_RESPONSE_DESIGNS, in the given order: the recommended design, the
    Pareto and hand designs, then (when fewer than three of those) the rest."""
    first = [
        d for d in designs
        if d.get("pareto") or d.get("origin") in _HAND or str(d["name"]) == recommended
    ]
    rest = [d for d in designs if d not in first]
    chosen = (first + rest if len(first) < 3 else first)[:MAX_RESPONSE_DESIGNS]
    if recommended is not None and all(str(d["name"]) != recommended for d in chosen):
        rec = [d for d in designs if str(d["name"]) == recommended]
        chosen = rec + chosen[: MAX_RESPONSE_DESIGNS - 1]
    order = {id(d): i for i, d in enumerate(designs)}
    return sorted(chosen, key=lambda d: order[id(d)])


# ------------------------------------------------------------------------------------
# tidy frames
# ------------------------------------------------------------------------------------
def _grid(study: Study, designs: Sequence[Mapping[str, Any]]) -> np.ndarray:
    wcs = [_num(d["metrics"].get("crossover_rad_s")) for d in designs]
    tc = study.targets.crossover_rad_s
    if isinstance(tc, tuple):
        wcs += list(tc)
    elif tc is not None:
        wcs.append(float(tc))
    wcs = [w for w in wcs if math.isfinite(w) and w > 0]
    mp = getattr(study, "measured", None)
    if mp is not None:  # a measured plant: the whole band, and a decade either side
        lo, hi = mp.data.band_rad_s
        lo_w = min([lo, *wcs]) if wcs else lo
        hi_w = max([hi, *wcs]) if wcs else hi
        return np.logspace(math.log10(lo_w) - 1, math.log10(hi_w) + 0.5, N_FREQ)
    if not wcs:  # no crossover known: span the plant's own corner frequencies
        p = study.plant
        wcs = [abs(r) for r in (*p.poles, *p.zeros) if abs(r) > 0]
        if p.delay_s > 0:
            wcs.append(1.0 / p.delay_s)
        wcs = wcs or [1.0]
        return np.logspace(math.log10(min(wcs)) - 1.5, math.log10(max(wcs)) + 1.5, N_FREQ)
    return np.logspace(math.log10(min(wcs)) - 2, math.log10(max(wcs)) + 2, N_FREQ)


#: Time scales drawn in the family bands (sampled, ends included).
_FAMILY_SIGMAS = 5


def _family_plants(study: Study) -> list[tuple[str, Rational]]:
    """Sampled members drawn in the bands: the nominal plant, every gain and delay end
    at a few time scales (ends included), and the listed members."""

    v = study.variation
    assert v is not None
    g, d, sg = factor_ranges(study.plant, v)
    sigmas = np.geomspace(sg[0], sg[1], _FAMILY_SIGMAS) if sg[0] < sg[1] else np.array([1.0])
    out = [("nominal", study.plant)]
    out += [(f"g×{gi:g}, τ={di:g} s, σ×{si:.3g}", scaled_plant(study.plant, gi, di, si))
            for gi in sorted(set(g)) for di in sorted(set(d)) for si in sigmas]
    out += [(f"member[{i}]", m) for i, m in enumerate(v.members)]
    return out


def family_frame(study: Study, design: Mapping[str, Any]) -> pd.DataFrame:
    """Bands over the plant family for one design, per ω: ``mag_lo/mag_hi`` (dB) and
    ``phase_lo/phase_hi`` (deg) of the loop over the sampled members (the nominal
    plant, every gain and delay end at five time scales, the listed members: the gain
    band is exact for
    gain × delay, the delay only turns the phase); ``S_lo/T_lo`` the smallest |S|, |T|
    over them; ``S_hi/T_hi`` the largest over the whole gain × delay box at those time
    scales (explorer.evaluation.family.sector_distance) and the listed members; and the nominal
    ``mag_db, phase_deg, S_db, T_db``."""

    v = study.variation
    assert v is not None
    comp = _comp(design)
    w = _grid(study, [design])
    g, d, sg = factor_ranges(study.plant, v)
    mags, phases, ss, ts = [], [], [], []
    for _, pl in _family_plants(study):
        loop = pl * comp
        lv = loop.freqresp(w)
        mags.append(np.abs(lv))
        phases.append(loop.phase_rad(w))
        ss.append(np.abs(1.0 / (1.0 + lv)))
        ts.append(np.abs(lv / (1.0 + lv)))
    s_hi = np.max(ss, axis=0)
    t_hi = np.max(ts, axis=0)
    sigmas = np.geomspace(sg[0], sg[1], _FAMILY_SIGMAS) if sg[0] < sg[1] else np.array([1.0])
    for si in sigmas:
        lv = (scaled_plant(study.plant, 1.0, d[1], si) * comp).freqresp(w)
        th, span = np.angle(lv), w * (d[1] - d[0])
        with np.errstate(divide="ignore"):
            s_hi = np.maximum(s_hi, 1.0 / sector_distance(th, span, np.abs(lv) * g[0],
                                                          np.abs(lv) * g[1]))
            t_hi = np.maximum(t_hi, 1.0 / sector_distance(
                -(th + span), span, 1.0 / (np.abs(lv) * g[1]), 1.0 / (np.abs(lv) * g[0])))
    nom = study.plant * comp
    lv = nom.freqresp(w)
    with np.errstate(divide="ignore"):
        db = lambda x: 20 * np.log10(x)  # noqa: E731
        return pd.DataFrame({
            "omega_rad_s": w,
            "mag_lo": db(np.min(mags, axis=0)), "mag_hi": db(np.max(mags, axis=0)),
            "phase_lo": np.degrees(np.min(phases, axis=0)),
            "phase_hi": np.degrees(np.max(phases, axis=0)),
            "S_lo": db(np.min(ss, axis=0)), "S_hi": db(np.minimum(s_hi, 1e6)),
            "T_lo": db(np.min(ts, axis=0)), "T_hi": db(np.minimum(t_hi, 1e6)),
            "mag_db": db(np.abs(lv)), "phase_deg": np.degrees(nom.phase_rad(w)),
            "S_db": db(np.abs(1 / (1 + lv))), "T_db": db(np.abs(lv / (1 + lv))),
        })


def family_step_frame(study: Study, design: Mapping[str, Any], n_points: int = 400
                      ) -> pd.DataFrame:
    """Long frame: member, t_s, y (unit reference step) of the design on the nominal
    plant, every corner of the box, the listed members and its worst-Ms member
    (``worst_member``); the horizon 1.25× the worst settling time."""

    v = study.variation
    assert v is not None
    comp = _comp(design)
    plants = [(m.label, m.plant) for m in sampled_members(study.plant, v)]
    wm = design.get("worst_member") or {}
    if wm.get("gain_factor") is not None and wm.get("where") == "inside the box":
        plants.append(("worst Ms (inside the box)", scaled_plant(
            study.plant, wm["gain_factor"], wm["delay_s"], wm["time_scale"])))
    ts = (design.get("worst") or {}).get("settling_time_s")
    t_end = 1.25 * ts if ts else None
    parts = []
    for label, pl in plants:
        try:
            r = simulate_steps(pl, comp, t_end_s=t_end)
        except Exception:  # a member whose response cannot be drawn is left out
            continue
        end = t_end if t_end else float(r.t_s[-1])
        t = np.linspace(0.0, end, n_points)
        parts.append(pd.DataFrame({"member": label, "t_s": t,
                                   "y": np.interp(t, r.t_s, r.y_ref)}))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(
        columns=["member", "t_s", "y"])


def family_gain_phase_frame(fb: pd.DataFrame) -> pd.DataFrame:
    """Per ω the box the family's loop values fill in gain-phase coordinates: phase
    from ``phase_lo`` to ``phase_hi`` and gain from ``mag_lo`` to ``mag_hi`` (for a gain
    × delay family exactly the set of (∠L, |L|) at that ω: the gain moves the dB, the
    delay only the phase), kept where it meets the chart's window."""
    keep = ((fb["mag_hi"] > _GP_MAG[0]) & (fb["mag_lo"] < _GP_MAG[1])
            & (fb["phase_hi"] > _GP_PHASE[0]) & (fb["phase_lo"] < _GP_PHASE[1]))
    return fb.loc[keep, ["omega_rad_s", "phase_lo", "phase_hi", "mag_lo", "mag_hi",
                         "phase_deg", "mag_db"]].reset_index(drop=True)


def family_gain_phase_chart(fb: pd.DataFrame, name: str) -> Any:
    """The family on the gain-phase chart: one translucent box per frequency
    (:func:`family_gain_phase_frame`), the nominal loop, and the critical point
    (−180°, 0 dB) the boxes must keep away from."""
    gp = family_gain_phase_frame(fb)
    x = alt.X("phase_lo:Q", title="phase of L (deg)",
              scale=alt.Scale(domain=list(_GP_PHASE), nice=False),
              axis=alt.Axis(values=list(range(-360, 1, 45))))
    y = alt.Y("mag_lo:Q", title="|L| (dB)", scale=alt.Scale(domain=list(_GP_MAG)))
    boxes = alt.Chart(gp).mark_rect(opacity=0.12, color=PALETTE[0], clip=True).encode(
        x=x, x2="phase_hi:Q", y=y, y2="mag_hi:Q",
        tooltip=[alt.Tooltip("omega_rad_s:Q", format=".4g", title="ω (rad/s)")])
    nominal = alt.Chart(gp).mark_line(color=_INK, strokeWidth=1.6, clip=True).encode(
        x="phase_deg:Q", y="mag_db:Q", order="omega_rad_s:Q")
    critical = alt.Chart(pd.DataFrame({"phase_deg": [-180.0], "mag_db": [0.0]})).mark_point(
        shape="cross", size=120, color=_LIMIT_RED, filled=True).encode(
        x="phase_deg:Q", y="mag_db:Q")
    return (boxes + nominal + critical).properties(
        width=2 * _W, height=260,
        title=alt.TitleParams(f"{name}: the family on the gain-phase chart",
                              subtitle="one box per frequency: every gain and delay of the "
                                       "family; black: nominal; red cross: (−180°, 0 dB)"))


def family_charts(fb: pd.DataFrame, st: pd.DataFrame, name: str) -> tuple[Any, Any]:
    """Bands of the family (loop gain and phase, |S| and |T|, and its boxes on the
    gain-phase chart) and the step responses of its corners and worst member, for
    design ``name``."""
    x_scale, x_axis = _log_x(fb["omega_rad_s"])
    x = alt.X("omega_rad_s:Q", title="frequency ω (rad/s)", scale=x_scale, axis=x_axis)

    def band(lo: str, hi: str, nom: str, title: str, ytitle: str) -> Any:
        base = alt.Chart(fb)
        area = base.mark_area(opacity=0.28, color=PALETTE[0], clip=True).encode(
            x=x, y=alt.Y(f"{lo}:Q", title=ytitle, scale=alt.Scale(zero=False)),
            y2=f"{hi}:Q")
        line = base.mark_line(color=_INK, strokeWidth=1.6, clip=True).encode(
            x=x, y=f"{nom}:Q")
        return (area + line).properties(width=_W, height=160, title=title)

    bands = alt.vconcat(
        alt.hconcat(band("mag_lo", "mag_hi", "mag_db", f"{name}: loop gain over the family",
                         "|L| (dB)"),
                    band("phase_lo", "phase_hi", "phase_deg", "loop phase over the family",
                         "∠L (deg)")),
        alt.hconcat(band("S_lo", "S_hi", "S_db", "|S| over the family", "|S| (dB)"),
                    band("T_lo", "T_hi", "T_db", "|T| over the family", "|T| (dB)")),
        family_gain_phase_chart(fb, name),
    )
    steps = (
        alt.Chart(st).mark_line(clip=True).encode(
            x=alt.X("t_s:Q", title="time (s)"),
            y=alt.Y("y:Q", title="y (unit reference step)", scale=alt.Scale(zero=False)),
            color=alt.Color("member:N", title="operating point",
                            legend=alt.Legend(orient="bottom", columns=2)),
            strokeDash=alt.condition(alt.datum.member == "nominal", alt.value([1, 0]),
                                     alt.value([5, 3])),
        ).properties(width=2 * _W, height=220,
                     title=f"{name}: step responses at the corners and the worst member")
    )
    return bands, steps


def frequency_frame(study: Study, designs: Sequence[Mapping[str, Any]]) -> pd.DataFrame:
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


def plant_frame(study: Study, designs: Sequence[Mapping[str, Any]] = ()) -> pd.DataFrame:
    """The plant's own frequency response: omega_rad_s, mag_db, phase_deg (delay
    included, continuous phase), on the same grid as the loops."""
    w = _grid(study, designs)
    pv = study.plant.freqresp(w)
    with np.errstate(divide="ignore"):
        mag = 20 * np.log10(np.abs(pv))
    return pd.DataFrame(
        {"omega_rad_s": w, "mag_db": mag, "phase_deg": np.degrees(study.plant.phase_rad(w))}
    )


def _last_outside(t: np.ndarray, y: np.ndarray, centre: float, half: float) -> float:
    """Last time y is outside centre ± half (0 when never; the end when still outside)."""
    out = np.flatnonzero(np.abs(y - centre) > half)
    if out.size == 0:
        return 0.0
    k = int(out[-1])
    return float(t[min(k + 1, t.size - 1)])


def step_frame(
    study: Study,
    designs: Sequence[Mapping[str, Any]],
    n_points: int = 400,
    focus: Sequence[str] | None = None,
) -> pd.DataFrame:
    """Long frame: name, t_s, y, u (unit reference step) and y_load (unit load step at
    the plant input, delay included) of each stable design.

    The horizon is sized to the transients of the ``focus`` designs (default: the
    stable designs meeting their targets, else all stable ones): 1.25 times the latest
    of their 2 % settling times of y and of the load response (last time |y_load| is
    above 2 % of its peak). Slower designs are cut there and listed in
    ``frame.attrs["beyond"]`` (reference step: name -> its settling time, s) and
    ``frame.attrs["beyond_load"]`` (names still recovering from the load step)."""

    stable = [d for d in designs if d["metrics"].get("closed_loop_stable")]
    names = [str(d["name"]) for d in stable]
    if focus is not None:
        want = {str(n) for n in focus} & set(names)
    else:
        want = {str(d["name"]) for d in stable if d.get("meets_targets")}
    want = want or set(names)
    sims: dict[str, Any] = {}
    need: dict[str, float] = {}
    for d in stable:
        n = str(d["name"])
        if n not in want:
            continue
        try:
            sims[n] = simulate_steps(study.plant, _comp(d))
        except DesignError:  # a response the simulator cannot resolve is left out
            continue
        r0 = sims[n]
        t_ref = _num(d["metrics"].get("settling_time_s"))
        if not math.isfinite(t_ref):
            t_ref = _last_outside(r0.t_s, r0.y_ref, float(r0.y_ref[-1]), 0.02)
        peak = float(np.max(np.abs(r0.y_load))) if r0.y_load.size else 0.0
        t_load = _last_outside(r0.t_s, r0.y_load, float(r0.y_load[-1]), 0.02 * peak)
        need[n] = max(t_ref, t_load)
    known = [v for v in need.values() if math.isfinite(v) and v > 0]
    t_view = 1.25 * max(known) if known else None
    beyond: dict[str, float | None] = {}
    beyond_load: list[str] = []
    parts = []
    for d in stable:
        n = str(d["name"])
        r = sims.get(n)
        if r is None and n not in want:
            try:
                r = simulate_steps(study.plant, _comp(d), t_end_s=t_view)
            except DesignError:
                continue
            ts = _num(d["metrics"].get("settling_time_s"))
            peak = float(np.max(np.abs(r.y_load))) if r.y_load.size else 0.0
            late = (
                t_view is not None and r.y_load.size > 0
                and abs(float(r.y_load[-1])) > 0.02 * peak
            )
            if t_view is not None and (not math.isfinite(ts) or ts > t_view):
                beyond[n] = ts if math.isfinite(ts) else None
            if late:
                beyond_load.append(n)
        if r is None:
            continue
        keep = np.ones(r.t_s.size, bool) if t_view is None else r.t_s <= t_view * (1 + 1e-12)
        t, y, u, yl = r.t_s[keep], r.y_ref[keep], r.u_ref[keep], r.y_load[keep]
        idx = np.unique(np.linspace(0, t.size - 1, min(n_points, t.size)).astype(int))
        parts.append(
            pd.DataFrame({"name": n, "t_s": t[idx], "y": y[idx], "u": u[idx], "y_load": yl[idx]})
        )
    out = (
        pd.concat(parts, ignore_index=True)
        if parts
        else pd.DataFrame(columns=["name", "t_s", "y", "u", "y_load"])
    )
    out.attrs["beyond"] = beyond
    out.attrs["beyond_load"] = beyond_load
    out.attrs["t_view"] = t_view
    return out


def _to_gain_phase(lv: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """L values -> (phase deg in (-360, 0], magnitude dB)."""
    ph = np.degrees(np.angle(lv))
    ph = np.where(ph > 0, ph - 360.0, ph)
    return ph, 20 * np.log10(np.abs(lv))


#: |T| contour levels (dB) of the gain-phase chart.
M_CONTOURS_DB = (-6.0, -3.0, -1.0, 1.0, 3.0, 6.0)
#: Visible window of the gain-phase chart: phase (deg) and magnitude (dB).
_GP_PHASE = (-360.0, 0.0)
_GP_MAG = (-30.0, 30.0)


def m_contour_frame(m_db: Sequence[float] = M_CONTOURS_DB) -> pd.DataFrame:
    """Closed-loop |T| = M contours in gain-phase coordinates (M-circles, module doc)."""
    parts = []
    th = np.linspace(-math.pi, math.pi, 721)
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


def m_contour_labels(contours: pd.DataFrame) -> pd.DataFrame:
    """One label point per contour inside the chart window: for |T| > 1 the top of
    the closed contour (at −180°, where the levels are spread apart), else the point
    nearest −100° (the right-hand side, where the open contours are spread apart)."""
    rows = []
    lo, hi = _GP_MAG[0] + 2, _GP_MAG[1] - 2
    for mdb, g in contours.groupby("M_db", sort=True):
        v = g[(g["mag_db"] > lo) & (g["mag_db"] < hi)
              & (g["phase_deg"] > _GP_PHASE[0] + 10) & (g["phase_deg"] < _GP_PHASE[1] - 10)]
        if v.empty:
            continue
        if float(mdb) > 0:
            p = v.loc[v["mag_db"].idxmax()]
        else:
            p = v.loc[(v["phase_deg"] + 100.0).abs().idxmin()]
        rows.append({"M_db": float(mdb), "text": f"{float(mdb):g} dB",
                     "phase_deg": float(p["phase_deg"]), "mag_db": float(p["mag_db"])})
    return pd.DataFrame(rows, columns=["M_db", "text", "phase_deg", "mag_db"])


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
    return alt.condition(pick, alt.value(1.0), alt.value(0.15))


def _is(name: str | None) -> str:
    """Vega expression: this datum is design ``name`` (false when None)."""

    return "false" if name is None else f"datum.name === {json.dumps(name)}"


#: Labels of log axes: plain numbers (10, 100, 1,000; 0.001), never "1e+1".
_LOG_LABELS = "datum.value >= 1 ? format(datum.value, ',') : format(datum.value, '~g')"


def _log_axis(values: list[float], **kw: Any) -> alt.Axis:
    return alt.Axis(values=values, labelExpr=_LOG_LABELS, **kw)


def _log_x(values: pd.Series) -> tuple[alt.Scale, alt.Axis]:
    """A log frequency axis over exactly the values' range, labelled at the decades."""
    v = values[values > 0]
    if v.empty:
        return alt.Scale(type="log"), _log_axis([1.0])
    lo, hi = float(v.min()), float(v.max())
    ticks = [t for t in _decades(v) if lo * (1 - 1e-9) <= t <= hi * (1 + 1e-9)]
    return alt.Scale(type="log", domain=[lo, hi], nice=False), _log_axis(ticks or [lo, hi])


def _legend() -> alt.Legend:
    return alt.Legend(labelLimit=0, symbolStrokeWidth=2.5, symbolSize=260, orient="right")


def _style_encodings(styles: dict[str, DesignStyle]) -> dict[str, Any]:
    names = list(styles)
    return {
        "color": alt.Color(
            "name:N", title="design", legend=_legend(),
            scale=alt.Scale(domain=names, range=[s.colour for s in styles.values()]),
        ),
        "strokeDash": alt.StrokeDash(
            "name:N", title="design", legend=_legend(),
            scale=alt.Scale(domain=names, range=[list(s.dash) for s in styles.values()]),
        ),
    }


def _spread(values: pd.Series) -> tuple[alt.Scale, alt.Axis, str]:
    """Scale, axis and a title note for values that may span decades: a log scale
    when the positive values span 20× or more (symlog, linear near 0, when some are
    0), else linear around the values."""
    v = values[np.isfinite(values)]
    pos = v[v > 0]
    if pos.size >= 2 and float(pos.max()) / float(pos.min()) >= 20.0:
        ticks = _decades(pos)
        if (v <= 0).any():
            c = float(pos.min())
            return (
                alt.Scale(type="symlog", constant=c, domain=[0.0, ticks[-1]], nice=False),
                _log_axis([0.0, *[t for t in ticks if t >= c / 10]]),
                " (log scale; linear below " + f"{c:.2g})",
            )
        return (
            alt.Scale(type="log", domain=[ticks[0], ticks[-1]], nice=False),
            _log_axis(ticks),
            " (log scale)",
        )
    return (alt.Scale(zero=False, nice=True, padding=24),
            alt.Axis(format=",~r", labelOverlap=True, tickCount=6), "")


def _hrule(value: float, label: str, *, colour: str = _INK, dash: Sequence[int] = (5, 4),
           width: float = _W) -> alt.LayerChart:
    """A horizontal reference line with its label written at the right end."""
    df = pd.DataFrame({"v": [value], "label": [label]})
    base = alt.Chart(df).encode(y="v:Q")
    rule = base.mark_rule(color=colour, strokeDash=list(dash), strokeWidth=1.4).encode(
        tooltip=["label:N", alt.Tooltip("v:Q", format=".4g")]
    )
    text = base.mark_text(
        align="right", baseline="bottom", dx=-4, dy=-2, color=colour, fontSize=11
    ).encode(x=alt.value(width), text="label:N")
    return rule + text


def _vrule(values: Sequence[float], label: str, *, colour: str = _INK,
           dash: Sequence[int] = (5, 4)) -> alt.LayerChart:
    """Vertical reference lines, the label written at the top of the first one."""
    df = pd.DataFrame({"v": list(values), "label": label})
    base = alt.Chart(df).encode(x="v:Q")
    rule = base.mark_rule(color=colour, strokeDash=list(dash), strokeWidth=1.4).encode(
        tooltip=["label:N", alt.Tooltip("v:Q", format=".4g")]
    )
    text = alt.Chart(df.iloc[:1]).mark_text(
        align="left", baseline="top", dx=4, dy=4, color=colour, fontSize=11
    ).encode(x="v:Q", y=alt.value(0), text="label:N")
    return rule + text


def pareto_chart(
    df: pd.DataFrame,
    x: str,
    x_title: str,
    pick: alt.Parameter,
    *,
    ms_limit: float | None = None,
    x_limit: float | None = None,
    styles: dict[str, DesignStyle] | None = None,
) -> alt.LayerChart:
    """Ms against one objective: each design in its colour (:func:`design_styles`),
    hollow when it misses its targets; shape = origin, size = order; a ring and a
    label on the recommended design, the Ms limit as a line (and the objective's
    limit when set)."""
    styles = styles or design_styles(df.to_dict("records"))
    names = list(styles)
    colours = [s.colour for s in styles.values()]
    x_scale, x_axis, note = _spread(df[x])
    base = alt.Chart(df).encode(
        x=alt.X(f"{x}:Q", title=x_title + note, scale=x_scale, axis=x_axis),
        y=alt.Y("Ms:Q", title="Ms (sensitivity peak)",
                scale=alt.Scale(zero=False, padding=24), axis=alt.Axis(format="~g")),
        tooltip=[
            "name:N", "origin:N", "structure:N", "order:N", "status:N",
            alt.Tooltip("Ms:Q", format=".3f"),
            alt.Tooltip(f"{x}:Q", format=".4g"),
        ],
    )
    pts = base.mark_point(filled=True, strokeWidth=1.8).encode(
        fill=alt.Fill("name:N", title="design", legend=_legend(),
                      scale=alt.Scale(domain=names, range=colours)),
        stroke=alt.Stroke("name:N", legend=None, scale=alt.Scale(domain=names, range=colours)),
        fillOpacity=alt.condition("datum.meets", alt.value(0.9), alt.value(0.0)),
        shape=alt.Shape(
            "origin:N", title="origin",
            scale=alt.Scale(domain=list(_SHAPES), range=list(_SHAPES.values())),
        ),
        size=alt.Size("order:N", title="order", scale=alt.Scale(range=[70, 260])),
        opacity=_opacity(pick),
    ).add_params(pick)
    rec = df[df["recommended"]]
    layers: Any = pts
    if len(rec):
        ring = alt.Chart(rec).encode(x=f"{x}:Q", y="Ms:Q")
        layers = layers + ring.mark_point(
            shape="circle", filled=False, size=700, stroke=_INK, strokeWidth=2
        ) + ring.mark_text(
            align="left", dx=16, dy=-12, fontSize=11, fontWeight="bold", color=_INK
        ).encode(text=alt.value("recommended"))
    if ms_limit is not None:
        layers = layers + _hrule(ms_limit, f"Ms limit {ms_limit:g}", colour=_LIMIT_RED,
                                 width=_W - 60)
    if x_limit is not None:
        layers = layers + _vrule([x_limit], f"limit {x_limit:g}", colour=_LIMIT_RED)
    return layers.properties(width=_W - 60, height=250, title=alt.TitleParams(
        f"Ms against {x_title}", subtitle="hollow: misses its targets; shape: origin"))


def _decades(values: pd.Series) -> list[float]:
    """Tick values of a log axis: the powers of ten spanned by ``values`` (labels at
    1-2-5 steps crowded each other on a six-decade axis)."""
    v = values[values > 0]
    if v.empty:
        return [1.0]
    lo, hi = math.floor(math.log10(float(v.min()))), math.ceil(math.log10(float(v.max())))
    return [10.0**k for k in range(lo, max(hi, lo + 1) + 1)]


def _line(
    df: pd.DataFrame,
    y: str,
    y_title: str,
    pick: alt.Parameter,
    styles: dict[str, DesignStyle],
    recommended: str | None,
    *,
    logx: bool = True,
    x: str = "omega_rad_s",
    x_title: str = "frequency ω (rad/s)",
    y_domain: tuple[float, float] | None = None,
    x_domain: tuple[float, float] | None = None,
) -> alt.Chart:
    """One line per design in its own style; the recommended design drawn thicker."""
    y_scale = alt.Scale(zero=False) if y_domain is None else alt.Scale(domain=list(y_domain))
    if logx:
        x_scale, x_axis = _log_x(df[x])
    else:
        x_scale = alt.Scale() if x_domain is None else alt.Scale(domain=list(x_domain), nice=False)
        # "~g" only on log axes: on a linear time axis it printed "1e+2"
        x_axis = alt.Axis(labelOverlap=True)
    return (
        alt.Chart(df)
        .mark_line(clip=True)
        .encode(
            x=alt.X(f"{x}:Q", title=x_title, scale=x_scale, axis=x_axis),
            y=alt.Y(f"{y}:Q", title=y_title, scale=y_scale),
            **_style_encodings(styles),
            strokeWidth=alt.condition(_is(recommended), alt.value(3.4), alt.value(1.8)),
            opacity=_opacity(pick),
            tooltip=[
                "name:N",
                alt.Tooltip(f"{x}:Q", format=".4g"),
                alt.Tooltip(f"{y}:Q", format=".4g"),
            ],
        )
    )


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


def _target_wc(study: Study) -> list[float]:
    tc = study.targets.crossover_rad_s
    return list(tc) if isinstance(tc, tuple) else ([] if tc is None else [float(tc)])


def measured_frame(study: Study, comp: Rational | None = None) -> pd.DataFrame:
    """A measured plant's points (``[plant] data``): omega_rad_s, mag_db, phase_deg,
    coherence_low — of the plant, or of the loop C·P with ``comp``; the phase moved by
    whole turns onto the branch of the fitted model drawn beside it. Empty without data."""
    mp = getattr(study, "measured", None)
    if mp is None:
        return pd.DataFrame(columns=["omega_rad_s", "mag_db", "phase_deg", "coherence_low"])
    w = mp.data.omega_rad_s
    val = mp.data.response
    ph = np.degrees(mp.data.phase_rad)
    model = study.plant
    if comp is not None:
        val = val * comp.freqresp(w)
        ph = ph + np.degrees(comp.phase_rad(w))
        model = model * comp
    ph = ph + 360.0 * np.round((np.degrees(model.phase_rad(w)) - ph) / 360.0)
    low = np.zeros(w.size, bool)
    low[mp.data.low_coherence_rows()] = True
    return pd.DataFrame({"omega_rad_s": w, "mag_db": 20 * np.log10(np.abs(val)),
                         "phase_deg": ph, "coherence_low": low})


def _measured_marks(md: pd.DataFrame, x: Any, band: tuple[float, float]) -> tuple[Any, Any]:
    """Measured points (hollow where the coherence is low) and the band's limits, for
    the gain and the phase panel."""
    md = md.assign(point=np.where(md["coherence_low"], "measured, coherence < 0.6",
                                  "measured"))
    enc = dict(x=x, shape=alt.Shape("point:N", title=None, legend=alt.Legend(orient="bottom")),
               tooltip=[alt.Tooltip("omega_rad_s:Q", format=".4g", title="ω (rad/s)"),
                        alt.Tooltip("mag_db:Q", format=".4g", title="dB"),
                        alt.Tooltip("phase_deg:Q", format=".4g", title="deg")])
    pts = alt.Chart(md).mark_point(color=_INK, size=28, filled=False)
    mag = pts.encode(y="mag_db:Q", **enc)
    ph = pts.encode(y="phase_deg:Q", **enc)
    df = pd.DataFrame({"v": list(band), "label": ["measured band: low end",
                                                   "measured band: high end"]})
    lim = alt.Chart(df).mark_rule(color=_INK, strokeDash=[1, 2], strokeWidth=1.4).encode(
        x="v:Q", tooltip=["label:N", alt.Tooltip("v:Q", format=".4g")])
    # the label inside the band, at the top of its high end (clear of the target marks)
    text = alt.Chart(df.iloc[1:].assign(label="measured band")).mark_text(
        align="right", baseline="top", dx=-4, dy=4, color=_INK, fontSize=11
    ).encode(x="v:Q", y=alt.value(0), text="label:N")
    return mag + lim + text, ph + lim + text


def plant_chart(pf: pd.DataFrame, study: Study) -> alt.VConcatChart:
    """The plant alone: |P| (dB) and continuous phase (deg, delay included) against log ω.
    A measured plant: the fitted model as the line, the measured points and the band's
    limits over it."""
    x_scale, x_axis = _log_x(pf["omega_rad_s"])
    x = alt.X("omega_rad_s:Q", title="frequency ω (rad/s)", scale=x_scale, axis=x_axis)
    tip = [alt.Tooltip("omega_rad_s:Q", format=".4g", title="ω (rad/s)")]
    base = alt.Chart(pf.assign(name="plant P"))
    mag = base.mark_line(color=_INK, strokeWidth=2.2).encode(
        x=x, y=alt.Y("mag_db:Q", title="|P| (dB)", scale=alt.Scale(zero=False)),
        tooltip=[*tip, alt.Tooltip("mag_db:Q", format=".4g", title="|P| dB")],
    )
    ph_df = pf[pf["phase_deg"] >= -720.0].assign(name="plant P")
    ph = alt.Chart(ph_df).mark_line(color=_INK, strokeWidth=2.2).encode(
        x=x, y=alt.Y("phase_deg:Q", title="phase of P (deg)", scale=alt.Scale(zero=False)),
        tooltip=[*tip, alt.Tooltip("phase_deg:Q", format=".4g", title="phase deg")],
    )
    wc = _target_wc(study)
    mag_l: Any = mag + _hrule(0.0, "0 dB", dash=(2, 3))
    ph_l: Any = ph
    if wc:
        mag_l = mag_l + _vrule(wc, "target crossover")
        ph_l = ph_l + _vrule(wc, "target crossover")
    mp = getattr(study, "measured", None)
    what = "|P(jω)|"
    if mp is not None:
        m_pts, p_pts = _measured_marks(measured_frame(study), x, mp.data.band_rad_s)
        mag_l, ph_l = mag_l + m_pts, ph_l + p_pts
        what = "|P(jω)|: measured points, the fitted model as the line"
    return alt.vconcat(
        mag_l.properties(width=_W, height=170, title=f"Plant gain {what}"),
        ph_l.properties(width=_W, height=170, title="Plant phase (continuous, delay included)"),
    )


def bode_charts(
    fr: pd.DataFrame, study: Study, pick: alt.Parameter,
    styles: dict[str, DesignStyle] | None = None, recommended: str | None = None,
    measured_loop: tuple[str, pd.DataFrame] | None = None,
) -> alt.VConcatChart:
    """|L| (dB) and continuous phase (deg) against log ω with the target marks;
    ``measured_loop``: (design name, :func:`measured_frame` of its loop) for a measured
    plant, drawn as points with the band's limits."""
    styles = styles or design_styles([{"name": n} for n in dict.fromkeys(fr["name"])])
    wc = _target_wc(study)
    mag: Any = _line(fr, "mag_db", "|L| (dB)", pick, styles, recommended).add_params(pick)
    mag = mag + _hrule(0.0, "0 dB", dash=(2, 3))
    # the delay drives the phase without bound; show down to -450 deg (one turn past -90)
    ph: Any = _line(fr[fr["phase_deg"] >= -450.0], "phase_deg", "phase of L (deg)", pick,
                    styles, recommended)
    if wc:
        mag = mag + _vrule(wc, "target crossover")
        ph = ph + _vrule(wc, "target crossover")
    pm = study.targets.phase_margin_deg or study.limits.get("phase_margin_deg")
    if pm is not None:
        ph = ph + _hrule(-180.0 + pm, f"−180° + PM target ({pm:g}°)", dash=(2, 3))
    mp = getattr(study, "measured", None)
    title = "Loop gain |L(jω)|"
    if mp is not None and measured_loop is not None:
        # one design's loop on the measured points (the recommended, or the first drawn)
        name, md = measured_loop
        md = md[md["phase_deg"] >= -450.0]
        x_scale, x_axis = _log_x(fr["omega_rad_s"])
        x = alt.X("omega_rad_s:Q", scale=x_scale, axis=x_axis)
        m_pts, p_pts = _measured_marks(md, x, mp.data.band_rad_s)
        mag, ph = mag + m_pts, ph + p_pts
        title += f" (points: {name} on the measured data; lines: with the fitted model)"
    return alt.vconcat(
        mag.properties(width=_W, height=200, title=title),
        ph.properties(width=_W, height=200, title="Loop phase (continuous, delay included)"),
    )


def nichols_chart(
    fr: pd.DataFrame, ms: float, pick: alt.Parameter,
    styles: dict[str, DesignStyle] | None = None, recommended: str | None = None,
) -> alt.LayerChart:
    """Gain-phase chart: loops, labelled |T| contours and the Ms locus."""
    styles = styles or design_styles([{"name": n} for n in dict.fromkeys(fr["name"])])
    sub = fr[(fr["mag_db"] > _GP_MAG[0]) & (fr["mag_db"] < _GP_MAG[1])]
    x, y = _gain_phase_axes()
    cf = m_contour_frame()
    cont = (
        alt.Chart(cf)
        .mark_line(color="#9aa7a3", strokeWidth=0.8, clip=True)
        .encode(x=x, y=y, detail="curve:N", order="k:Q", tooltip=["label:N"])
    )
    labels = alt.Chart(m_contour_labels(cf)).mark_text(
        color="#5f6b67", fontSize=10, dy=-6, align="center"
    ).encode(x="phase_deg:Q", y="mag_db:Q", text="text:N")
    msl = (
        alt.Chart(ms_circle_frame(ms))
        .mark_line(color=_LIMIT_RED, strokeWidth=2, clip=True, strokeDash=[6, 3])
        .encode(x="phase_deg:Q", y="mag_db:Q", order="k:Q", tooltip=["label:N"])
    )
    loops = (
        alt.Chart(sub)
        .mark_line(clip=True)
        .encode(
            x=x, y=y,
            **_style_encodings(styles),
            strokeWidth=alt.condition(_is(recommended), alt.value(3.4), alt.value(1.8)),
            order="omega_rad_s:Q",
            opacity=_opacity(pick),
            tooltip=["name:N", alt.Tooltip("omega_rad_s:Q", format=".4g", title="ω (rad/s)")],
        )
    )
    return (cont + labels + msl + loops).properties(
        width=_W, height=300,
        title=alt.TitleParams(
            "Gain-phase chart",
            subtitle=f"grey: closed-loop |T| contours (dB); red dashed: |1+L| = 1/Ms, Ms = {ms:g}",
        ),
    )


def sensitivity_chart(
    fr: pd.DataFrame, ms: float, pick: alt.Parameter,
    styles: dict[str, DesignStyle] | None = None, recommended: str | None = None,
    mt_limit: float | None = None,
) -> alt.VConcatChart:
    """|S| and |T| (dB) against log ω, one panel each, with the Ms (and Mt) limit."""
    styles = styles or design_styles([{"name": n} for n in dict.fromkeys(fr["name"])])
    s: Any = _line(fr, "S_db", "|S| (dB)", pick, styles, recommended)
    s = s + _hrule(20 * math.log10(ms), f"Ms = {ms:g}", colour=_LIMIT_RED)
    t: Any = _line(fr, "T_db", "|T| (dB)", pick, styles, recommended)
    if mt_limit is not None:
        t = t + _hrule(20 * math.log10(mt_limit), f"Mt limit {mt_limit:g}", colour=_LIMIT_RED)
    return alt.vconcat(
        s.properties(width=_W, height=180, title="Sensitivity |S(jω)|"),
        t.properties(width=_W, height=180, title="Complementary sensitivity |T(jω)|"),
    )


def _beyond_note(st: pd.DataFrame, load: bool = False) -> list[str]:
    """Subtitle lines naming the designs cut at the axis end (▸ marks them there)."""
    if load:
        items = [str(n) for n in st.attrs.get("beyond_load") or []]
        head = "▸ still recovering at the axis end: "
    else:
        ref: dict[str, float | None] = st.attrs.get("beyond") or {}
        items = [f"{n} ({'settles at ' + format(v, '.3g') + ' s' if v is not None else 'slower'})"
                 for n, v in ref.items()]
        head = "▸ slower, cut at the axis end: "
    if not items:
        return []
    if len(items) > 4:
        items = [*items[:3], f"{len(items) - 3} more (hover the ▸ marks)"]
    lines, cur = [], head
    for i, it in enumerate(items):
        piece = it + (", " if i < len(items) - 1 else "")
        if len(cur) + len(piece) > 78 and cur.strip():
            lines.append(cur.rstrip())
            cur = "   "
        cur += piece
    lines.append(cur.rstrip())
    return lines


def _edge_marks(st: pd.DataFrame, col: str, styles: dict[str, DesignStyle],
                pick: alt.Parameter, load: bool = False) -> alt.Chart | None:
    """A right-pointing mark at the axis end on each design that is still moving there."""
    ref: dict[str, float | None] = st.attrs.get("beyond") or {}
    names = list(st.attrs.get("beyond_load") or []) if load else list(ref)
    if not names or st.empty:
        return None
    last = st[st["name"].isin(names)].groupby("name").tail(1)
    if last.empty:
        return None
    last = last.assign(needs=[ref.get(n) for n in last["name"]])
    return alt.Chart(last).mark_point(shape="triangle-right", filled=True, size=90).encode(
        x="t_s:Q", y=f"{col}:Q",
        color=_style_encodings(styles)["color"],
        opacity=_opacity(pick),
        tooltip=["name:N", alt.Tooltip("needs:Q", format=".4g", title="settles at (s)")],
    )


def step_charts(
    st: pd.DataFrame, study: Study, pick: alt.Parameter,
    styles: dict[str, DesignStyle] | None = None, recommended: str | None = None,
) -> alt.VConcatChart:
    """Unit reference step: output y with the ±2 % band, peaks, the overshoot and
    settling requirements; control signal u (an initial kick clipped and named)."""

    styles = styles or design_styles([{"name": n} for n in dict.fromkeys(st["name"])])
    t_max = float(st["t_s"].max()) if len(st) else 1.0
    xd = (0.0, t_max)
    band = (
        alt.Chart(pd.DataFrame({"t0": [0.0], "t1": [t_max], "lo": [0.98], "hi": [1.02]}))
        .mark_rect(color="#1b6f6a", opacity=0.13)
        .encode(x="t0:Q", x2="t1:Q", y="lo:Q", y2="hi:Q")
    )
    y = _line(st, "y", "output y", pick, styles, recommended, logx=False, x="t_s",
              x_title="time (s)", x_domain=xd)
    peaks = st.loc[st.groupby("name")["y"].idxmax()] if len(st) else st
    pk = (
        alt.Chart(peaks)
        .mark_point(shape="triangle-down", filled=True, size=70)
        .encode(
            x="t_s:Q",
            y="y:Q",
            color=_style_encodings(styles)["color"],
            opacity=_opacity(pick),
            tooltip=["name:N", alt.Tooltip("y:Q", format=".4f", title="peak y"),
                     alt.Tooltip("t_s:Q", format=".4g", title="at t (s)")],
        )
    )
    layers: Any = band + y + pk
    req = requirements(study)
    os_lim = study.limits.get("overshoot_pct")
    if req.overshoot_pct is not None:
        os_lim = req.overshoot_pct if os_lim is None else min(os_lim, req.overshoot_pct)
    if os_lim is not None:
        layers = layers + _hrule(1 + os_lim / 100, f"overshoot limit {os_lim:g} %",
                                 colour=_LIMIT_RED, dash=(2, 3))
    ts_lim = study.limits.get("settling_time_s")
    if req.settling_time_s is not None:
        ts_lim = req.settling_time_s if ts_lim is None else min(ts_lim, req.settling_time_s)
    if ts_lim is not None and ts_lim <= t_max:
        layers = layers + _vrule([ts_lim], f"settling limit {ts_lim:g} s", colour=_LIMIT_RED,
                                 dash=(2, 3))
    edge = _edge_marks(st, "y", styles, pick)
    if edge is not None:
        layers = layers + edge
    clip = _kick_clipped_domain(st, "u")
    u_sub = "" if clip is None else (
        f"initial kick up to |u| = {clip[2]:.3g} is cut off "
        "(peak |u| of each design in the tooltip)"
    )
    u = _line(
        st.merge(_peak_u(st), on="name") if len(st) else st.assign(peak_u=[]),
        "u", "control u", pick, styles, recommended, logx=False, x="t_s", x_title="time (s)",
        y_domain=None if clip is None else (clip[0], clip[1]), x_domain=xd,
    ).encode(tooltip=["name:N", alt.Tooltip("t_s:Q", format=".4g"),
                      alt.Tooltip("u:Q", format=".4g"),
                      alt.Tooltip("peak_u:Q", format=".4g", title="peak |u|")])
    note = _beyond_note(st)
    return alt.vconcat(
        layers.properties(width=_W, height=220, title=alt.TitleParams(
            "Reference step: output (±2 % band)",
            subtitle=note or ["unit step on the reference"])),
        u.properties(width=_W, height=170, title=alt.TitleParams(
            "Reference step: control signal", subtitle=u_sub or "compensator output u")),
    )


def _peak_u(st: pd.DataFrame) -> pd.DataFrame:
    return st.groupby("name", as_index=False)["u"].agg(lambda s: float(s.abs().max())).rename(
        columns={"u": "peak_u"}
    )


def load_chart(
    st: pd.DataFrame, pick: alt.Parameter,
    styles: dict[str, DesignStyle] | None = None, recommended: str | None = None,
    iae: dict[str, float] | None = None,
) -> alt.LayerChart:
    """Unit load step at the plant input: plant output y (delay included)."""
    styles = styles or design_styles([{"name": n} for n in dict.fromkeys(st["name"])])
    t_max = float(st["t_s"].max()) if len(st) else 1.0
    df = st.assign(iae=[(iae or {}).get(n, float("nan")) for n in st["name"]])
    ln = _line(df, "y_load", "output y", pick, styles, recommended, logx=False, x="t_s",
               x_title="time (s)", x_domain=(0.0, t_max)).encode(
        tooltip=["name:N", alt.Tooltip("t_s:Q", format=".4g"),
                 alt.Tooltip("y_load:Q", format=".4g", title="y"),
                 alt.Tooltip("iae:Q", format=".4g", title="IAE load")])
    layers: Any = ln + _hrule(0.0, "", dash=(2, 3))
    edge = _edge_marks(st, "y_load", styles, pick, load=True)
    if edge is not None:
        layers = layers + edge
    note = _beyond_note(st, load=True)
    return layers.properties(width=_W, height=220, title=alt.TitleParams(
        "Load step at the plant input: output",
        subtitle=note or ["unit step added to the control signal; ∫|y| dt is the load IAE"],
    ))


def sampled_nichols_chart(
    sf: pd.DataFrame, ms: float, pick: alt.Parameter, styles: dict[str, DesignStyle],
    recommended: str | None, T: float, tc: float,
) -> alt.LayerChart:
    """Gain-phase chart of the continuous design C(s)·P(s) (solid) against the sampled
    loop C(z)·H(z) (dashed; hold, plant delay, computation delay; up to π/T) for each
    design of ``sf`` (explorer.outputs.report_sampled.sampled_loop_frame), on the |T| contours
    and the Ms locus of the gain-phase chart."""
    sub = sf[(sf["mag_db"] > _GP_MAG[0]) & (sf["mag_db"] < _GP_MAG[1])]
    x, y = _gain_phase_axes()
    cf = m_contour_frame()
    cont = alt.Chart(cf).mark_line(color="#9aa7a3", strokeWidth=0.8, clip=True).encode(
        x=x, y=y, detail="curve:N", order="k:Q", tooltip=["label:N"])
    labels = alt.Chart(m_contour_labels(cf)).mark_text(
        color="#5f6b67", fontSize=10, dy=-6, align="center"
    ).encode(x="phase_deg:Q", y="mag_db:Q", text="text:N")
    msl = alt.Chart(ms_circle_frame(ms)).mark_line(
        color=_LIMIT_RED, strokeWidth=2, clip=True, strokeDash=[6, 3]
    ).encode(x="phase_deg:Q", y="mag_db:Q", order="k:Q", tooltip=["label:N"])
    names = [n for n in styles if n in set(sub["name"])]
    loops = alt.Chart(sub).mark_line(clip=True).encode(
        x=x, y=y,
        color=alt.Color("name:N", title="design", legend=_legend(),
                        scale=alt.Scale(domain=names,
                                        range=[styles[n].colour for n in names])),
        strokeDash=alt.StrokeDash("loop:N", title="loop", legend=_legend(),
                                  scale=alt.Scale(domain=["continuous", "sampled"],
                                                  range=[[1, 0], [6, 3]])),
        strokeWidth=alt.condition(_is(recommended), alt.value(3.0), alt.value(1.6)),
        order="omega_rad_s:Q",
        opacity=_opacity(pick),
        tooltip=["name:N", "loop:N",
                 alt.Tooltip("omega_rad_s:Q", format=".4g", title="ω (rad/s)"),
                 alt.Tooltip("phase_deg:Q", format=".4g", title="phase (deg)"),
                 alt.Tooltip("mag_db:Q", format=".3g", title="|L| (dB)")],
    )
    delay = f", computation delay {tc:g} s" if tc else ""
    return (cont + labels + msl + loops).properties(
        width=_W, height=300,
        title=alt.TitleParams(
            "Continuous against sampled loop",
            subtitle=[f"sampled every T = {T:g} s{delay}; solid: the design C(s)·P(s), "
                      "dashed: C(z) with hold",
                      f"and delays, up to π/T = {math.pi / T:.4g} rad/s; red dashed: "
                      f"|1+L| = 1/Ms, Ms = {ms:g}"],
        ),
    )


def sampled_step_chart(
    ys: pd.DataFrame, us: pd.DataFrame, pick: alt.Parameter,
    styles: dict[str, DesignStyle], recommended: str | None, T: float,
) -> alt.VConcatChart:
    """The sampled loop's unit reference step: the plant output between samples too
    (smooth; a dot at each sample instant when there are at most 150), and the
    controller output u[k] as the staircase the hold applies."""
    names = [n for n in styles if n in set(ys["name"])]
    colour = alt.Color("name:N", title="design", legend=_legend(),
                       scale=alt.Scale(domain=names, range=[styles[n].colour for n in names]))
    t_max = float(ys["t_s"].max()) if len(ys) else 1.0
    xs = alt.X("t_s:Q", title="time (s)", scale=alt.Scale(domain=[0.0, t_max], nice=False))
    width = alt.condition(_is(recommended), alt.value(3.0), alt.value(1.6))
    y_line = alt.Chart(ys).mark_line(clip=True).encode(
        x=xs, y=alt.Y("y:Q", title="output y"), color=colour, strokeWidth=width,
        opacity=_opacity(pick),
        tooltip=["name:N", alt.Tooltip("t_s:Q", format=".4g"), alt.Tooltip("y:Q", format=".4g")],
    )
    layers: Any = y_line + _hrule(1.0, "", dash=(2, 3))
    if len(ys) and t_max / T <= 150:
        at = ys[np.isclose(np.mod(ys["t_s"] / T + 0.5, 1.0), 0.5, atol=1e-6)]
        layers = layers + alt.Chart(at).mark_point(filled=True, size=18, clip=True).encode(
            x=xs, y="y:Q", color=colour, opacity=_opacity(pick),
            tooltip=["name:N", alt.Tooltip("t_s:Q", format=".4g", title="sample at (s)"),
                     alt.Tooltip("y:Q", format=".4g")])
    u_line = alt.Chart(us).mark_line(clip=True, interpolate="step-after").encode(
        x=xs, y=alt.Y("u:Q", title="controller output u[k]"), color=colour,
        strokeWidth=width, opacity=_opacity(pick),
        tooltip=["name:N", alt.Tooltip("t_s:Q", format=".4g", title="t_k (s)"),
                 alt.Tooltip("u:Q", format=".4g", title="u[k]")],
    )
    return alt.vconcat(
        layers.properties(width=_W, height=200, title=alt.TitleParams(
            "Sampled loop: unit reference step",
            subtitle=[f"plant output between samples (exact); dots: the samples every "
                      f"T = {T:g} s" if t_max / T <= 150 else
                      "plant output between samples (exact)"])),
        u_line.properties(width=_W, height=140, title=alt.TitleParams(
            "controller output, held between samples",
            subtitle=["u[k] reaches the plant after the computation and plant delays"])),
    )


def _ms(study: Study) -> float:
    return float(study.limits.get("sensitivity_peak", DEFAULT_MS))


def _charts(
    study: Study, designs: Sequence[Mapping[str, Any]], recommended: str | None
) -> tuple[dict[str, Any], list[str]]:
    """The charts that have something to show, by name, and a note for each left out."""
    _check_designs(designs)
    pick = _pick()
    out: dict[str, Any] = {"plant": plant_chart(plant_frame(study, designs), study)}
    notes: list[str] = []
    if not designs:
        notes.append("No design to draw: only the plant is charted.")
        return out, notes
    df = design_frame(designs, recommended)
    all_styles = design_styles(designs)
    ms_lim = study.limits.get("sensitivity_peak")
    for key, x, title in (("pareto_hf", "noise_gain", "noise gain (largest |C| above crossover)"),
                          ("pareto_iae", "iae_load", "load IAE")):
        sub = df.dropna(subset=[x, "Ms"])
        if len(sub) >= 2:
            out[key] = pareto_chart(sub, x, title, pick, ms_limit=ms_lim,
                                    x_limit=study.limits.get(x), styles=all_styles)
        else:
            notes.append(
                f"Ms against {title}: {len(sub)} design(s) with a finite value — "
                "no trade-off to draw."
            )
    sel = response_designs(designs, recommended)
    styles = {str(d["name"]): all_styles[str(d["name"])] for d in sel}
    fr = frequency_frame(study, sel)
    m_loop = None
    if getattr(study, "measured", None) is not None and sel:
        first = next((d for d in sel if str(d["name"]) == recommended), sel[0])
        m_loop = (str(first["name"]), measured_frame(study, _comp(first)))
        mp = study.measured
        lo, hi = mp.data.band_rad_s
        notes.append(
            f"Measured plant ({mp.shown}, {mp.data.omega_rad_s.size} points, band "
            f"{lo:.4g} to {hi:.4g} rad/s): every frequency figure in the tables is read on "
            "the data; the curves are drawn with the model fitted to it (relative RMS error "
            f"{100 * mp.fit.rel_rms:.2g} % over the band), the measured points over them.")
        if mp.fit.time_from_fit:
            notes.append("Step and load responses come from the fitted model "
                         "(time_from_fit), not from the data.")
    out["bode"] = bode_charts(fr, study, pick, styles, recommended, m_loop)
    out["nichols"] = nichols_chart(fr, _ms(study), pick, styles, recommended)
    out["sensitivity"] = sensitivity_chart(
        fr, _ms(study), pick, styles, recommended, study.limits.get("complementary_peak")
    )
    focus = [str(d["name"]) for d in sel if d.get("meets_targets")]
    if recommended is not None:
        focus = [recommended] + [n for n in focus if n != recommended][:2]
    no_time = getattr(study, "measured", None) is not None and \
        not study.measured.fit.time_from_fit
    st = step_frame(study, sel, focus=focus or None) if not no_time else pd.DataFrame()
    if no_time:
        notes.append("No step responses: the model fitted to the measured data is poor "
                     "(time-domain figures withheld).")
    elif len(st):
        out["steps"] = step_charts(st, study, pick, styles, recommended)
        iae = {str(d["name"]): _num(d["metrics"].get("iae_load")) for d in sel}
        out["load"] = load_chart(st, pick, styles, recommended, iae)
    else:
        notes.append("No design has a stable closed loop: no step responses to draw.")
    if len(sel) < len(designs):
        notes.append(
            f"Response charts show {len(sel)} of {len(designs)} designs: the recommended, "
            "Pareto and hand designs."
        )
    _sampled_charts(study, designs, sel, recommended, styles, pick, out, notes)
    fam = _family_design(study, designs, recommended)
    if fam is not None:
        bands, steps = family_charts(family_frame(study, fam), family_step_frame(study, fam),
                                     str(fam["name"]))
        out["family"] = bands
        out["family_steps"] = steps
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Automatically deduplicated")
        for key in ("pareto_iae", "nichols", "sensitivity", "steps", "load",
                    "sampled_nichols", "sampled_steps"):
            if key in out and key != "pareto_iae":
                out[key] = out[key].add_params(pick)
    return out, notes


def _sampled_charts(study: Study, designs: Sequence[Mapping[str, Any]],
                    sel: Sequence[Mapping[str, Any]], recommended: str | None,
                    styles: dict[str, DesignStyle], pick: alt.Parameter,
                    out: dict[str, Any], notes: list[str]) -> None:
    """With a sample time (the study's ``[search] sample_time``, or the designs'):
    continuous against sampled loop for the recommended design and up to two others
    meeting the targets, and their sampled step responses (explorer.outputs.report_sampled)."""

    ts = sample_time_of(study, designs)
    if ts is None or not sel:
        return
    T, tc = ts
    focus = [d for d in sel if str(d["name"]) == recommended]
    focus += [d for d in sel if d.get("meets_targets") and d not in focus][:3 - len(focus)]
    focus = focus or list(sel[:3])
    try:
        sf = sampled_loop_frame(study, focus, T, tc)
        ys, us = sampled_step_frames(study, focus, T, tc)
    except Exception as exc:  # noqa: BLE001 — the continuous charts stand without these
        notes.append(f"Sampled-loop charts left out: {type(exc).__name__}: {exc}")
        return
    if len(sf):
        out["sampled_nichols"] = sampled_nichols_chart(sf, _ms(study), pick, styles,
                                                       recommended, T, tc)
    if len(ys):
        out["sampled_steps"] = sampled_step_chart(ys, us, pick, styles, recommended, T)
    notes.append(f"Sampled controller (T = {T:g} s, computation delay {tc:g} s): the "
                 "designs were judged on the sampled loop — Tustin with prewarping at each "
                 "design's crossover, zero-order hold, plant and computation delay; the "
                 "continuous charts above show the designs C(s)·P(s).")


def _family_design(study: Study, designs: Sequence[Mapping[str, Any]],
                   recommended: str | None) -> Mapping[str, Any] | None:
    """The design whose family bands are drawn: the recommended one, else the first
    stable one; None without a plant family."""
    if getattr(study, "variation", None) is None:
        return None
    by_name = {str(d["name"]): d for d in designs}
    if recommended in by_name:
        return by_name[recommended]
    stable = [d for d in designs if d["metrics"].get("closed_loop_stable")]
    return stable[0] if stable else None


def chart_specs(
    study: Study, designs: Sequence[Mapping[str, Any]], answer: dict[str, Any] | None = None
) -> dict[str, alt.TopLevelMixin]:
    """Every chart that has something to show, by name, each standalone and sharing
    the ``pick`` parameter definition: ``plant`` always; ``pareto_hf``/``pareto_iae``
    when two or more designs have finite values; ``bode``, ``nichols``,
    ``sensitivity`` with any design; ``steps`` and ``load`` with a stable one."""
    return _charts(study, designs, recommended_name(designs, answer))[0]


def _theme(ch: alt.TopLevelMixin, *, legends: bool = True) -> alt.TopLevelMixin:
    """The look of every chart; ``legends=False`` for the page, whose key and table
    name every design (slides keep their legends)."""
    return (
        ch.configure(font=FONT, background="#fbfaf6", padding=10)
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
        .configure_title(color=_INK, fontSize=14, anchor="start", fontWeight=600,
                         subtitleColor="#5f6b67", subtitleFontSize=11)
        .configure_legend(labelColor=_INK, titleColor=_INK, labelFontSize=11, labelLimit=0,
                          disable=not legends)
    )


def _drop_legends(spec: Any) -> Any:
    """The spec with every channel's legend off (the page's key names the designs)."""
    if isinstance(spec, dict):
        out = {k: _drop_legends(v) for k, v in spec.items()}
        if "field" in out and isinstance(out.get("legend"), dict):
            out["legend"] = None
        return out
    if isinstance(spec, list):
        return [_drop_legends(v) for v in spec]
    return spec


def dashboard(
    study: Study, designs: Sequence[Mapping[str, Any]], answer: dict[str, Any] | None = None
) -> alt.TopLevelMixin:
    """All charts in one concatenated, themed chart with one shared ``pick`` selection."""
    charts = list(_charts(study, designs, recommended_name(designs, answer))[0].values())
    rows = [alt.hconcat(*charts[i : i + 2]) for i in range(0, len(charts), 2)]
    ch = alt.vconcat(*rows).resolve_scale(
        color="independent", shape="independent", strokeDash="independent", size="independent"
    )
    return _theme(ch)


def export_charts(
    study: Study,
    designs: Sequence[Mapping[str, Any]],
    out_dir: Path,
    formats: Sequence[str] = ("png", "svg"),
    answer: dict[str, Any] | None = None,
) -> list[Path]:
    """Each chart of :func:`chart_specs` as ``<name>.<fmt>`` in ``out_dir`` (png, svg)."""
    bad = [f for f in formats if f not in ("png", "svg")]
    if bad:
        raise LoopscoutError(f"--format must be png or svg, got {bad[0]!r}")
    out_dir = Path(out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise LoopscoutError(f"cannot create {out_dir}: {exc.strerror}") from None
    paths = []
    with alt.data_transformers.enable("default", max_rows=200_000):
        for name, ch in chart_specs(study, designs, answer).items():
            for fmt in formats:
                p = out_dir / f"{name}.{fmt}"
                with warnings.catch_warnings():
                    warnings.filterwarnings("ignore", message="Automatically deduplicated")
                    opts: dict[str, Any] = {"scale_factor": 2} if fmt == "png" else {}
                    try:
                        # fmt is "png" or "svg": checked above
                        _theme(ch).save(p, format=cast(Literal["png", "svg"], fmt), **opts)
                    except OSError as exc:
                        raise LoopscoutError(f"cannot write {p}: {exc.strerror}") from None
                paths.append(p)
    return paths


# ------------------------------------------------------------------------------------
# HTML
# ------------------------------------------------------------------------------------
def lowest_order_meeting(designs: Sequence[Mapping[str, Any]]) -> int | None:
    """Smallest compensator order among designs with meets_targets true (None: none)."""
    orders = [int(d.get("order", 0)) for d in designs if d.get("meets_targets")]
    return min(orders) if orders else None


def write_report(
    study: Study,
    designs: Sequence[Mapping[str, Any]],
    path: Path,
    *,
    answer: dict[str, Any] | None = None,
    summary: Sequence[str] | None = None,
) -> Path:
    """Write the self-contained HTML report; returns ``path``.

    ``answer`` is the exploration's answer (docs/interface.md: ``design``, ``order``,
    ``why``); without one the report recommends the lowest-order design meeting every
    target (lowest Ms first). ``summary`` lines (the exploration's summary, the answer
    first) are shown as they are. ``designs`` may be empty, and none may meet the
    targets: the page then says what each reached and what stopped it."""


    designs = list(designs)
    _check_designs(designs)
    if answer is not None and not isinstance(answer, Mapping):
        raise LoopscoutError("answer must be an object with 'design', 'order' and 'why'")
    path = Path(path)
    rec = recommended_name(designs, answer)
    with alt.data_transformers.enable("default", max_rows=200_000), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Automatically deduplicated")
        charts, notes = _charts(study, designs, rec)
        specs = {k: _drop_legends(_theme(c, legends=False).to_dict()) for k, c in charts.items()}
    # vl_convert's stub (__init__.pyi) declares `snippet` required, but the compiled
    # function defaults it to None (the default snippet, which puts vegaEmbed, vegaLite
    # and vega on window and which the page relies on): the stub is wrong, not the call
    bundle = vlc.javascript_bundle(vl_version=_vl_version())  # type: ignore[call-arg]
    shown = {str(d["name"]) for d in response_designs(designs, rec)} if designs else set()
    page = report_page.page(
        study,
        designs,
        specs=specs,
        notes=notes,
        answer=answer,
        summary=list(summary) if summary is not None else None,
        recommended=rec,
        styles={n: (s.colour, s.dash, s.shape) for n, s in design_styles(designs).items()},
        in_responses=shown,
        bundle=bundle,
        font=FONT,
    )
    try:
        path.write_text(page, encoding="utf-8")
    except OSError as exc:
        raise LoopscoutError(f"cannot write report {path}: {exc.strerror}") from None
    return path


def _vl_version() -> str:
    """vl-convert's name of the Vega-Lite version Altair writes: 'v6.4.1' → 'v6_4'."""
    return "_".join(alt.SCHEMA_VERSION.split(".")[:2])


def _gain_phase_axes() -> tuple[alt.X, alt.Y]:
    """The gain-phase chart's axes: phase of L (deg) every 45°, |L| (dB)."""
    x = alt.X("phase_deg:Q", title="phase of L (deg)",
              scale=alt.Scale(domain=list(_GP_PHASE), nice=False),
              axis=alt.Axis(values=list(range(-360, 1, 45))))
    y = alt.Y("mag_db:Q", title="|L| (dB)", scale=alt.Scale(domain=list(_GP_MAG)))
    return x, y
