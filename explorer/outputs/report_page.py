"""The HTML page of the report (no altair here): answer, plant, requirements,
ranked table, charts, assumptions and the caution.

:func:`page` assembles one self-contained document from chart specs made by
:mod:`explorer.outputs.report`. Everything user-given (design and study names, reasons,
summary lines) is HTML-escaped in the markup; the chart data is embedded in a
script with ``<``, ``>``, ``&`` (and U+2028/U+2029) written as ``\\uXXXX`` escapes
(:func:`script_json`), so no design name can end the script or open a comment.
"""

from __future__ import annotations

import html
import json
import math
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from explorer.core.caution import CAUTION
from explorer.core.errors import LoopscoutError
from explorer.core.factored import factored as factored_text
from explorer.core.loop import root_from_json
from explorer.core.metric_registry import (
    OVERSHOOT_TOL_PCT,
    PHASE_MARGIN_TOL_DEG,
    SETTLING_REL_TOL,
    ranked_cell,
)
from explorer.core.metric_registry import RANKED_COLUMNS as TERMINAL_COLUMNS
from explorer.design.sampled_design import judged_metrics
from explorer.evaluation.records import CROSSOVER_REL_TOL, METRIC_UNITS
from explorer.model.study import LIMIT_KEYS, Study
from explorer.time_domain.timeresp import fold_threshold_rad_s

__all__ = [
    "compensator_root",
    "Requirements",
    "requirements",
    "script_json",
    "factored",
    "plant_factored",
    "requirement_rows",
    "page",
]

# the order charts appear in on the page, with a one-line caption each
_CHART_ORDER = {
    "pareto_hf": "Each point is a design. Lower is more robust; left is quieter.",
    "pareto_iae": "Lower is more robust; left rejects a load step with less output error.",
    "bode": "Loop L = C·P. The thick line is the recommended design.",
    "nichols": "A loop passing outside the red locus keeps |S| below the Ms value.",
    "sensitivity": "|S| peak is Ms; |T| peak is Mt.",
    "steps": "Time axis sized to the recommended designs' transients.",
    "load": "A unit step added at the plant input (a load change), delay included.",
    "sampled_nichols": "The margins the sampled controller really has: the dashed loop "
                       "includes the hold, the sampling and the delays.",
    "sampled_steps": "The sampled loop simulated exactly: output between the samples, "
                     "controller output as held.",
    "family": "Bands: every operating point of the plant family ([variation]); the line "
              "is the nominal plant. The upper |S| and |T| edges are the worst over the "
              "whole gain × delay box at sampled time scales.",
    "family_steps": "The same design at the nominal point (solid), every corner of the "
                    "box, the listed members and the worst-Ms member (dashed).",
}


# ------------------------------------------------------------------------------------
# requirements and formulas
# ------------------------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class Requirements:
    """Time-domain requirements the loop targets were derived from (None: not given)."""

    overshoot_pct: float | None = None
    settling_time_s: float | None = None
    band: float = 0.02


_OS_LINE = re.compile(r"^overshoot\s+([-+0-9.eE]+)\s*%")
_TS_LINE = re.compile(r"^settling\s+([-+0-9.eE]+)\s*s\s*\(([0-9.]+)\s*%\s*band\)")


def requirements(study: Study) -> Requirements:
    """The overshoot and settling-time requirements of the study: read from
    ``Targets`` attributes when it carries them, else from the conversion lines
    (``Targets.derived_from``, written by
    :func:`explorer.model.specs.targets_from_requirements`)."""
    t = study.targets
    os_v = getattr(t, "overshoot_pct", None)
    ts_v = getattr(t, "settling_time_s", None)
    band = getattr(t, "settling_band", None)
    for line in t.derived_from:
        m = _OS_LINE.match(line)
        if m and os_v is None:
            os_v = float(m.group(1))
        elif line.startswith("overshoot 0 %") and os_v is None:
            os_v = 0.0
        m = _TS_LINE.match(line)
        if m and ts_v is None:
            ts_v = float(m.group(1))
            band = band if band is not None else float(m.group(2)) / 100.0
    return Requirements(
        overshoot_pct=None if os_v is None else float(os_v),
        settling_time_s=None if ts_v is None else float(ts_v),
        band=0.02 if band is None else float(band),
    )


def script_json(obj: Any) -> str:
    """JSON safe inside an HTML ``<script>``: ``<``, ``>``, ``&``, U+2028 and U+2029
    as ``\\u`` escapes (still valid JSON and JavaScript, same values)."""
    text = json.dumps(obj, allow_nan=False)
    for ch, esc in (("<", "\\u003c"), (">", "\\u003e"), ("&", "\\u0026"),
                    ("\u2028", "\\u2028"), ("\u2029", "\\u2029")):
        text = text.replace(ch, esc)
    return text


def compensator_root(v: Any) -> complex:
    try:
        return root_from_json(v)
    except (TypeError, ValueError):
        raise LoopscoutError(f"compensator root {v!r} is not a number or complex string") from None


def factored(comp: dict[str, Any]) -> str:
    """A compensator written as gain · ∏(s − z) / ∏(s − p), complex pairs as quadratics
    (:func:`explorer.core.factored.factored`, typeset)."""
    return factored_text(float(comp["gain"]), [compensator_root(z) for z in comp.get("zeros", [])],
                         [compensator_root(p) for p in comp.get("poles", [])], typeset=True)


def plant_factored(study: Study) -> str:
    """The plant in factored form, with its delay as e^(−τs); a measured plant is named
    by its file and band, with the model fitted to it."""
    p = study.plant
    txt = factored({"gain": p.gain, "zeros": list(p.zeros), "poles": list(p.poles)})
    if p.delay_s > 0:
        txt += f" · e^(−{p.delay_s:.4g}s)"
    mp = getattr(study, "measured", None)
    if mp is not None:
        lo, hi = mp.data.band_rad_s
        txt = (f"measured sweep {mp.shown} ({mp.data.omega_rad_s.size} points, "
               f"{lo:.4g} to {hi:.4g} rad/s); fitted model {txt}, relative RMS error "
               f"{100 * mp.fit.rel_rms:.2g} % over the band"
               + ("" if mp.fit.time_from_fit else " (poor: no step responses)"))
    return txt


def _data_assumptions(study: Study, designs: Sequence[Mapping[str, Any]]) -> str:
    """A measured plant's assumptions as list items (docs/measured-data.md): where the
    figures come from, and what the data cannot show (from the first design that
    lists them; the Nyquist count, per design, is left out). Empty for a model."""
    mp = getattr(study, "measured", None)
    if mp is None:
        return ""
    lo, hi = mp.data.band_rad_s
    items = [
        f"the plant is the measured sweep {mp.shown} ({lo:.4g} to {hi:.4g} rad/s): every "
        "frequency figure is read on the data, with an interpolation error bound per "
        "figure in designs.json (interpolation_error); nothing beyond the band is measured",
        ("step and load responses come from the model fitted to the sweep (vector "
         f"fitting; relative RMS error {100 * mp.fit.rel_rms:.2g} % over the band)"
         if mp.fit.time_from_fit else
         "no step or load responses: the model fitted to the sweep is poor"),
    ]
    listed = next((d.get("assumptions") for d in designs if d.get("assumptions")), None)
    items += [a for a in (listed or []) if not str(a).startswith("Nyquist count")]
    low = mp.data.low_coherence_rows()
    if low:
        items.append(f"{len(low)} measured point(s) with coherence below 0.6 "
                     "(hollow squares in the plant chart)")
    return "".join(f"<li>{html.escape(str(a))}</li>" for a in items)


def _plant_facts(study: Study) -> list[str]:
    p = study.plant
    facts = []
    n_int = p.n_integrators
    if n_int > 0:
        facts.append(f"{n_int} integrator(s) in the plant")
    else:
        try:
            facts.append(f"static gain {p.dc_gain():.4g}")
        except (ZeroDivisionError, FloatingPointError, ValueError):
            pass
    rhp_p = [r for r in p.poles if r.real > 0]
    rhp_z = [r for r in p.zeros if r.real > 0]
    if rhp_p:
        facts.append("open-loop unstable: pole(s) at " + ", ".join(_c(r) for r in rhp_p)
                     + " (the loop must stabilise it)")
    if rhp_z:
        facts.append("right-half-plane zero(s) at " + ", ".join(_c(r) for r in rhp_z)
                     + " (inverse response; caps the usable crossover)")
    light = [r for r in p.poles if r.imag > 0 and -r.real / abs(r) < 0.2]
    if light:
        facts.append("lightly damped mode(s) near " + ", ".join(f"{abs(r):.3g}" for r in light)
                     + " rad/s")
    if p.delay_s > 0:
        facts.append(f"transport delay {p.delay_s:.4g} s (phase lag ω·{p.delay_s:.4g} rad)")
    return facts


# names read in a sentence ("settling 2 % 6.5 > ..." would be confusing)
_SAY = {"settling_time_s": "settling time", "rise_time_s": "rise time",
        "iae_load": "load IAE"}
_KEY_RE = re.compile(r"\b(" + "|".join(sorted(METRIC_UNITS, key=len, reverse=True)) + r")\b")


def readable(text: str) -> str:
    """A reason or summary line with METRICS keys written as their display names
    (``sensitivity_peak 1.83 > limit 1.7`` -> ``Ms 1.83 > limit 1.7``)."""
    return _KEY_RE.sub(lambda m: _SAY.get(m.group(1), METRIC_UNITS[m.group(1)][0]), str(text))


def _c(r: complex) -> str:
    return f"{r.real:.4g}" if r.imag == 0 else f"{r.real:.4g}{r.imag:+.4g}j"


# ------------------------------------------------------------------------------------
# requirements against what each design achieves
# ------------------------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class _Row:
    requirement: str
    target: str
    check: Callable[[Mapping[str, Any]], tuple[str, bool | None]]


def _val(d: Mapping[str, Any], key: str, *, worst: bool = False) -> Any:
    if worst and isinstance(d.get("worst"), Mapping) and key in d["worst"]:
        return d["worst"][key]
    # a sampled controller is judged on its sampled loop ([search] sample_time)
    if isinstance(d.get("sampled_metrics"), Mapping) and key in d["sampled_metrics"]:
        return d["sampled_metrics"][key]
    return d.get("metrics", {}).get(key)


def _g(v: Any, digits: int = 4) -> str:
    if v is None:
        return "none"
    if isinstance(v, bool):
        return "yes" if v else "no"
    try:
        f = float(v)
    except (TypeError, ValueError):
        return html.escape(str(v))
    return f"{f:.{digits}g}" if math.isfinite(f) else "∞"


def _comp_integrators(d: Mapping[str, Any]) -> int:
    c = d.get("compensator", {})
    return sum(1 for p in c.get("poles", []) if abs(compensator_root(p)) == 0) - sum(
        1 for z in c.get("zeros", []) if abs(compensator_root(z)) == 0
    )


def requirement_rows(study: Study) -> list[_Row]:
    """One row per requirement: the study's text, the loop target it became, and a
    check giving each design's achieved value and whether it holds (None: no bound)."""
    t, req = study.targets, requirements(study)
    rows: list[_Row] = []

    def upper(key: str, bound: float, tol_abs: float = 0.0, tol_rel: float = 0.0,
              worst: bool = False) -> Callable[[Mapping[str, Any]], tuple[str, bool | None]]:
        def f(d: Mapping[str, Any]) -> tuple[str, bool | None]:
            v = _val(d, key, worst=worst)
            return _g(v), (v is not None and float(v) <= bound * (1 + tol_rel) + tol_abs)
        return f

    def lower(key: str, bound: float, tol_abs: float = 0.0, worst: bool = False,
              none_holds: bool = True) -> Callable[[Mapping[str, Any]], tuple[str, bool | None]]:
        def f(d: Mapping[str, Any]) -> tuple[str, bool | None]:
            v = _val(d, key, worst=worst)
            if v is None:
                return ("none (∞)" if none_holds else "none"), none_holds
            return _g(v), float(v) >= bound - tol_abs
        return f

    rows.append(_Row(
        requirement="closed loop stable", target="required",
        check=lambda d: (_g(_val(d, "closed_loop_stable", worst=True)),
                         bool(_val(d, "closed_loop_stable", worst=True))),
    ))
    if req.overshoot_pct is not None:
        rows.append(_Row(
            requirement=f"overshoot ≤ {req.overshoot_pct:g} %",
            target=f"phase margin {t.phase_margin_deg:.3g}°"
            if t.phase_margin_deg is not None else "—",
            check=upper("overshoot_pct", req.overshoot_pct, tol_abs=OVERSHOOT_TOL_PCT),
        ))
    if req.settling_time_s is not None:
        wc = t.crossover_rad_s
        rows.append(_Row(
            requirement=f"settling ≤ {req.settling_time_s:g} s ({100 * req.band:g} % band)",
            target=f"crossover {wc:.3g} rad/s" if isinstance(wc, (int, float)) else "—",
            check=upper("settling_time_s", req.settling_time_s, tol_rel=SETTLING_REL_TOL),
        ))
    wc = t.crossover_rad_s
    tol = float(getattr(t, "crossover_tolerance", None) or CROSSOVER_REL_TOL)
    from_req = " (from the settling time)" if req.settling_time_s is not None else ""
    if isinstance(wc, (int, float)):
        w0 = float(wc)

        def xo(d: Mapping[str, Any]) -> tuple[str, bool | None]:
            xs = [float(x) for x in (_val(d, "crossovers_rad_s") or [])]
            hit = [x for x in xs if abs(x / w0 - 1.0) <= tol]
            shown = hit[0] if hit else _val(d, "crossover_rad_s")
            extra = f" (of {len(xs)})" if len(xs) > 1 else ""
            return _g(shown) + extra, bool(hit)

        rows.append(_Row(requirement=f"crossover {w0:.4g} rad/s{from_req}",
                         target=f"{w0:.4g} rad/s (±{100 * tol:.2g} %)", check=xo))
    elif isinstance(wc, tuple):
        lo, hi = float(wc[0]), float(wc[1])

        def xr(d: Mapping[str, Any]) -> tuple[str, bool | None]:
            c = _val(d, "crossover_rad_s")
            return _g(c), c is not None and lo <= float(c) <= hi

        rows.append(_Row(requirement=f"crossover in [{lo:.4g}, {hi:.4g}] rad/s",
                         target="searched in the range", check=xr))
    else:
        rows.append(_Row(requirement="crossover free", target="searched",
                         check=lambda d: (_g(_val(d, "crossover_rad_s")), None)))
    if t.phase_margin_deg is not None:
        src = " (from the overshoot)" if req.overshoot_pct is not None else ""
        rows.append(_Row(
            requirement=f"phase margin ≥ {t.phase_margin_deg:.3g}°{src}",
            target=f"{t.phase_margin_deg:.3g}° at the crossover",
            check=lower("phase_margin_deg", float(t.phase_margin_deg),
                        tol_abs=PHASE_MARGIN_TOL_DEG, none_holds=False),
        ))
    n_plant = study.plant.n_integrators
    rows.append(_Row(
        requirement=f"integrators in the loop ≥ {t.integrators}",
        target=f"plant has {n_plant}; compensator adds {max(t.integrators - n_plant, 0)}+",
        check=lambda d: (str(n_plant + _comp_integrators(d)),
                         n_plant + _comp_integrators(d) >= t.integrators),
    ))
    for key, bound in study.limits.items():
        name, unit = METRIC_UNITS.get(key, (key, ""))
        unit = "" if unit in ("-", "") else f" {unit}"
        kind = LIMIT_KEYS.get(key, "upper")
        sign = "≤" if kind == "upper" else "≥"
        rows.append(_Row(
            requirement=f"limit: {name} {sign} {bound:g}{unit}",
            target="bound on every design",
            check=upper(key, bound, worst=True) if kind == "upper"
            else lower(key, bound, worst=True),
        ))
    return rows


def _requirements_html(study: Study, designs: Sequence[Mapping[str, Any]], rec: str | None) -> str:
    rows = requirement_rows(study)
    heads = "".join(
        f"<th class='{'rec' if str(d['name']) == rec else ''}'>"
        f"{html.escape(str(d['name']))}{_badge(str(d['name']) == rec)}</th>"
        for d in designs
    )
    body = []
    for r in rows:
        cells = []
        for d in designs:
            txt, ok = r.check(d)
            cls = "" if ok is None else ("pass" if ok else "fail")
            mark = "" if ok is None else ("✓ " if ok else "✗ ")
            rc = " rec" if str(d["name"]) == rec else ""
            cells.append(f"<td class='{cls}{rc}'>{mark}{html.escape(txt)}</td>")
        body.append(
            f"<tr><th class='req'>{html.escape(r.requirement)}</th>"
            f"<td class='tgt'>{html.escape(r.target)}</td>{''.join(cells)}</tr>"
        )
    derived = "".join(f"<li>{html.escape(s)}</li>" for s in study.targets.derived_from)
    how = (f"<details><summary>How the loop targets were derived</summary><ul class='sub'>"
           f"{derived}</ul></details>") if derived else ""
    worst = any(isinstance(d.get("worst"), Mapping) for d in designs)
    worst_txt = (
        "<p class='sub'>Limits and stability are checked at the worst plant of the "
        "family ([variation]); the other rows at the nominal plant.</p>" if worst else ""
    )
    note = "" if designs else "<p class='sub'>No design to compare yet.</p>"
    return (
        "<div class='scroll'><table class='reqs'><thead><tr><th>requirement</th>"
        f"<th>loop target</th>{heads}</tr></thead><tbody>{''.join(body)}</tbody></table></div>"
        f"{note}{worst_txt}{how}"
    )


# ------------------------------------------------------------------------------------
# the answer, the ranked table
# ------------------------------------------------------------------------------------
def _badge(on: bool) -> str:
    return " <span class='badge'>recommended</span>" if on else ""


_Style = tuple[str, tuple[int, ...], str]
_MARKS = {
    "circle": "<circle cx='{x}' cy='6' r='4'{a}/>",
    "square": "<rect x='{x0}' y='2' width='8' height='8'{a}/>",
    "diamond": "<polygon points='{x},1 {x5},6 {x},11 {x_5},6'{a}/>",
    "triangle-up": "<polygon points='{x},1 {x5},10 {x_5},10'{a}/>",
}


def _swatch(style: _Style | None, line: bool = True) -> str:
    """The design's look: its line (colour, dash) when it is in the response charts,
    and its point shape in the Ms charts."""
    if style is None:
        return ""
    colour, dash, shape = style
    c = html.escape(colour)
    da = "" if tuple(dash) == (1, 0) else f" stroke-dasharray='{','.join(str(x) for x in dash)}'"
    ln = (f"<line x1='1' y1='6' x2='33' y2='6' stroke='{c}' stroke-width='3'{da}/>"
          if line else "")
    mark = _MARKS.get(shape, _MARKS["circle"]).format(
        x=46, x0=42, x5=51, x_5=41, a=f" fill='{c}' stroke='{c}'"
    )
    return (f"<svg class='swatch' width='54' height='12' aria-hidden='true'>{ln}{mark}</svg>")


_KEY_FIGS = (
    ("sensitivity_peak", "Ms", "{:.3g}"),
    ("phase_margin_deg", "phase margin", "{:.1f}°"),
    ("crossover_rad_s", "crossover", "{:.3g} rad/s"),
    ("gain_margin_db", "gain margin", "{:.1f} dB"),
    ("noise_gain", "noise gain", "{:.3g}"),
    ("iae_load", "load IAE", "{:.3g}"),
    ("overshoot_pct", "overshoot", "{:.1f} %"),
    ("settling_time_s", "settling 2 %", "{:.3g} s"),
    ("peak_control", "peak |u|", "{:.3g}"),
)


def _fmt(v: Any, fmt: str) -> str:
    if v is None:
        return "—"
    try:
        return fmt.format(float(v))
    except (TypeError, ValueError):
        return html.escape(str(v))


def _figures(d: Mapping[str, Any], ref: Mapping[str, Any] | None = None) -> str:
    rows = []
    for key, label, fmt in _KEY_FIGS:
        v = d["metrics"].get(key)
        diff = ""
        if ref is not None and v is not None and ref["metrics"].get(key) is not None:
            dv = float(v) - float(ref["metrics"][key])
            if abs(dv) > 1e-12 * max(abs(float(v)), 1.0):
                diff = f" <span class='diff'>({dv:+.3g})</span>"
        rows.append(f"<tr><th>{label}</th><td>{_fmt(v, fmt)}{diff}</td></tr>")
    sm = d.get("sampled_metrics")
    if isinstance(sm, Mapping):  # the loop that runs ([search] sample_time)
        for key, label, fmt in _KEY_FIGS[:4] + _KEY_FIGS[6:8]:
            rows.append(f"<tr><th>sampled {label}</th><td>{_fmt(sm.get(key), fmt)}</td></tr>")
    return f"<table class='figs'>{''.join(rows)}</table>"


def _design_head(d: Mapping[str, Any]) -> str:
    return (
        f"<div class='sub'>{html.escape(str(d.get('origin', '')))} · "
        f"{html.escape(str(d.get('structure', '')))} · order {int(d.get('order', 0))}</div>"
        f"<div class='tf'>C(s) = {html.escape(factored(d['compensator']))}</div>"
    )


def _misses(d: Mapping[str, Any]) -> str:
    why = d.get("misses") or []
    if not why:
        return "" if d.get("meets_targets") else "<p class='miss'>misses the targets</p>"
    items = "".join(f"<li>{html.escape(readable(w))}</li>" for w in why)
    return f"<ul class='miss'>{items}</ul>"


def _answer_html(
    designs: Sequence[Mapping[str, Any]],
    answer: dict[str, Any] | None,
    summary: list[str] | None,
    rec: str | None,
) -> str:
    by_name = {str(d["name"]): d for d in designs}
    cards = []
    if rec is not None:
        d = by_name[rec]
        if answer is not None and answer.get("why"):
            why = str(answer["why"])
        else:
            why = ("The lowest-order design that meets every target and limit, the one "
                   "with the lowest Ms among those (no exploration answer was given).")
        cards.append(
            f"<div class='card answer' id='recommended'><h2>Recommended: "
            f"{html.escape(rec)}</h2>{_design_head(d)}"
            f"<p class='why'>{html.escape(why)}</p>{_figures(d)}</div>"
        )
        # the answer's own alternatives (what each buys), else the next ranked designs
        named = [(a, by_name[str(a.get("design"))]) for a in (answer or {}).get(
            "alternatives", []) if str(a.get("design")) in by_name][:3]
        if named:
            alts = [x for _, x in named]
            roles = {str(x["name"]): (str(a.get("criterion", "alternative")),
                                      str(a.get("trade_off", ""))) for a, x in named}
        else:
            alts = [x for x in designs if x.get("meets_targets") and str(x["name"]) != rec][:2]
            roles = {}
        hand = [x for x in designs if x.get("origin") in ("hand", "phase-balanced")
                and x not in alts and str(x["name"]) != rec][:1]
        for x in alts + hand:
            role, trade = roles.get(str(x["name"]), (
                "hand design, for reference" if x in hand else "alternative", ""))
            buys = f"<p class='why'>{html.escape(trade)}</p>" if trade else ""
            cards.append(
                f"<div class='card alt'><h3>{html.escape(str(x['name']))} "
                f"<span class='role'>{html.escape(role)}</span></h3>{_design_head(x)}{buys}"
                f"{_misses(x)}{_figures(x, by_name[rec])}"
                "<p class='sub'>(±: against the recommended)</p></div>"
            )
    else:
        if answer is not None and answer.get("why"):
            why = str(answer["why"])
        elif summary and str(summary[0]).startswith("answer:"):
            why = str(summary[0])[len("answer:"):].strip()
        else:
            why = ("No design meets every target and limit." if designs
                   else "There are no designs to judge.")
        why = readable(why)
        cards.append(
            "<div class='card nothing' id='nothing-meets'><h2>No design meets the targets"
            f"</h2><p class='why'>{html.escape(why)}</p>"
            + ("<p class='sub'>The closest designs and what stopped them are beside this; "
               "the summary below says per structure what it reached.</p>" if designs else
               "<p class='sub'>The summary below says per structure what it reached.</p>")
            + "</div>"
        )
        close = sorted(designs, key=lambda x: (len(x.get("misses") or [1, 1, 1]),
                                               not x.get("metrics", {}).get("closed_loop_stable")))
        for x in close[:3]:
            cards.append(
                f"<div class='card alt'><h3>{html.escape(str(x['name']))} "
                f"<span class='role'>closest</span></h3>{_design_head(x)}{_misses(x)}"
                f"{_figures(x)}</div>"
            )
    lines = ""
    if summary:
        lines = (
            "<div class='summary'><h3>Exploration summary</h3><ul>"
            + "".join(f"<li>{html.escape(readable(s))}</li>" for s in summary)
            + "</ul></div>"
        )
    elif rec is None and not designs:
        lines = "<p class='sub'>No exploration summary was given.</p>"
    return f"<div class='cards'>{''.join(cards)}</div>{lines}"


def _cell(v: Any, fmt: str) -> str:
    """The terminal table's cell text (explorer.core.metric_registry.ranked_cell), an
    em dash for null, escaped for HTML."""
    return html.escape(ranked_cell(v, fmt, none="—"))


def _ranked_html(
    designs: Sequence[Mapping[str, Any]],
    rec: str | None,
    styles: dict[str, _Style],
    in_responses: set[str],
) -> str:
    """The designs in the order given (the exploration's ranking), with the terminal
    table's columns (explorer.cli.explore); C(s) and the reasons of a miss beneath."""
    if not designs:
        return "<p class='sub'>No designs.</p>"
    heads = ["design", "origin", "structure", *[h for _, h, _ in TERMINAL_COLUMNS],
             "meets", "pareto"]
    head = "".join(f"<th>{html.escape(h)}</th>" for h in heads)
    rows = []
    for d in designs:
        name = str(d["name"])
        m = {**judged_metrics(d["metrics"], d.get("sampled_metrics")), "order": d.get("order")}
        cls = ("rec " if name == rec else "") + ("ok" if d.get("meets_targets") else "miss")
        cells = "".join(f"<td class='n'>{_cell(m.get(k), f)}</td>" for k, _, f in TERMINAL_COLUMNS)
        why = "; ".join(readable(w) for w in d.get("misses") or [])
        rows.append(
            f"<tr class='{cls}'><td class='name'>{_swatch(styles.get(name), name in in_responses)}"
            f"<b>{html.escape(name)}</b>{_badge(name == rec)}"
            f"<div class='tf'>{html.escape(factored(d['compensator']))}</div></td>"
            f"<td>{html.escape(str(d.get('origin', '')))}</td>"
            f"<td>{html.escape(str(d.get('structure', '')))}</td>{cells}"
            f"<td>{_cell(d.get('meets_targets'), '')}"
            f"{'<div class=sub>' + html.escape(why) + '</div>' if why else ''}</td>"
            f"<td>{_cell(d.get('pareto'), '')}</td></tr>"
        )
    return (
        f"<div class='scroll'><table class='ranked'><thead><tr>{head}</tr></thead>"
        f"<tbody>{''.join(rows)}</tbody></table></div>"
    )


_CSS = """
body{margin:0;background:#fbfaf6;color:#24302e;font:15px/1.45 %(font)s}
header{background:#1b3a38;color:#f3efe2;padding:22px 36px}
header h1{margin:0;font-weight:600;font-size:26px;letter-spacing:.01em}
header p{margin:4px 0 0;opacity:.85}
main{padding:10px 36px 40px;max-width:1500px}
section{margin:26px 0}
h2{font-size:18px;font-weight:600;margin:0 0 8px}
section>h2{border-bottom:2px solid #d9822b;display:inline-block;padding-bottom:2px}
h3{font-size:15px;font-weight:600;margin:0 0 6px}
.cards{display:flex;gap:16px;flex-wrap:wrap;align-items:flex-start}
.card{background:#fff;border:1px solid #e0dccf;border-radius:6px;padding:12px 16px;
min-width:220px;max-width:360px;flex:1 1 230px}
.card.answer{border:2px solid #1b6f6a;background:#f3faf8;flex:1.6 1 340px;max-width:520px}
.card.nothing{border:2px solid #b8404f;background:#fdf3f2;flex:1.6 1 340px;max-width:520px}
.lowest{margin:0 0 12px}.lowest b{color:#1b6f6a;font-size:17px}.lowest b.none{color:#8f2d3a}
.key{background:#fff;border:1px solid #e0dccf;border-radius:6px;padding:8px 14px;
margin:10px 0 14px}
.key ul{list-style:none;margin:4px 0;padding:0;display:flex;flex-wrap:wrap;gap:4px 22px}
.key li{font-size:13px;white-space:nowrap}.key li.rec{font-weight:600}
.card.answer h2{color:#1b6f6a}.card.nothing h2{color:#8f2d3a}
.why{font-size:15px;margin:8px 0}
.role{font-size:12px;font-weight:normal;color:#6b726e;margin-left:6px}
.badge{display:inline-block;font-size:11px;font-weight:600;color:#fff;background:#1b6f6a;
border-radius:9px;padding:0 7px;margin-left:6px;vertical-align:1px}
.big{font-size:22px;font-weight:600;color:#1b6f6a}
table{border-collapse:collapse;font-size:13px;background:#fff}
th,td{border-bottom:1px solid #e6e2d6;padding:5px 8px;text-align:left;vertical-align:top}
th{background:#f1eee4;font-weight:600}
td.n{text-align:right;font-variant-numeric:tabular-nums}
table.figs{background:none;font-size:13px}table.figs th{background:none;font-weight:normal;
color:#5f6b67;padding:2px 10px 2px 0}table.figs td{padding:2px 0;text-align:right}
.diff{color:#6b726e;font-size:12px}
tr.miss td{color:#7d837f}tr.rec td{background:#eaf5f2}
tr.rec td:first-child{box-shadow:inset 4px 0 0 #1b6f6a}
table.ranked td.name{min-width:240px}table.ranked td .sub{min-width:170px}
.tf{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:12px;color:#3d4a47}
.sub{font-size:12px;color:#6b726e}
ul.miss,p.miss{color:#8f2d3a;font-size:13px;margin:6px 0;padding-left:18px}
.swatch{vertical-align:middle;margin-right:6px}
.noswatch{display:inline-block;width:34px;margin-right:6px}
table.reqs td{white-space:nowrap}table.reqs td.pass{color:#1d6b3a}
table.reqs td.fail{color:#a3293a;font-weight:600}
table.reqs th.req{background:#f7f5ee;font-weight:normal}
table.reqs th.rec,table.reqs td.rec{background:#eaf5f2}
td.tgt{color:#3d4a47}
.scroll{overflow-x:auto;max-width:100%%}
.summary{background:#fff;border:1px solid #e0dccf;border-radius:6px;padding:10px 18px;
margin-top:16px;max-width:1100px}
.summary ul{margin:4px 0;padding-left:20px}
.plant{display:flex;flex-wrap:wrap;gap:20px;align-items:flex-start}
.formula{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:15px;background:#fff;
border:1px solid #e0dccf;border-radius:6px;padding:10px 14px;display:inline-block}
.charts{display:flex;flex-wrap:wrap;gap:18px}
.chart{background:#fbfaf6;max-width:100%%;overflow-x:auto}
.chart p{margin:2px 0 0 10px}
.caution{background:#fff4e0;border-left:5px solid #d9822b;padding:10px 16px}
#errors:empty{display:none}#errors{color:#b8404f}
details{margin-top:8px;font-size:13px}
"""

_JS = """
(function(){
var SPECS = %(specs)s;
var views = window.loopscoutViews = [], last = '[]', keys = Object.keys(SPECS);
function share(src){return function(name, value){
  var vals = (value || []).slice();
  var key = JSON.stringify(vals.map(function(t){return t.values;}));
  if (key === last) return;
  last = key;
  views.forEach(function(v){
    if (v === src) return;
    try { v.data('pick_store', vals.slice()).runAsync(); } catch (e) {}  // no selection here
  });
};}
Promise.all(keys.map(function(k){
  return vegaEmbed('#chart-' + k, SPECS[k], {renderer:'svg', actions:false}).then(function(r){
    views.push(r.view);
    try { r.view.addDataListener('pick_store', share(r.view)); } catch (e) {}
    document.getElementById('chart-' + k).setAttribute('data-drawn', 'yes');
  });
})).then(function(){document.body.setAttribute('data-rendered','yes')})
 .catch(function(e){window.__errors.push(String(e))})
 .finally(function(){document.getElementById('errors').textContent=window.__errors.join(' | ')});
})();
"""


def page(
    study: Study,
    designs: Sequence[Mapping[str, Any]],
    *,
    specs: dict[str, Any],
    notes: Sequence[str],
    answer: dict[str, Any] | None,
    summary: list[str] | None,
    recommended: str | None,
    styles: dict[str, _Style],
    in_responses: set[str],
    bundle: str,
    font: str,
) -> str:
    """The whole HTML document."""
    n_meet = sum(bool(d.get("meets_targets")) for d in designs)
    orders = [int(d.get("order", 0)) for d in designs if d.get("meets_targets")]
    low_txt = f"order {min(orders)}" if orders else "none"
    low_note = "smallest compensator order among designs meeting every target and limit"
    if orders and answer and answer.get("order") is not None and answer["order"] > min(orders):
        low_note += (f"; the answer is order {answer['order']}: the order-{min(orders)} "
                     "designs leave an offset under a constant load at the plant input")
    fold_txt = ""
    if study.plant.delay_s > 0:
        w_far = fold_threshold_rad_s(study.plant.delay_s)
        fold_txt = (
            f"; stable roots above {w_far:.3g} rad/s may be folded into the delay there "
            "(same DC gain; docs/time-response.md)"
        )
    facts = "".join(f"<li>{html.escape(f)}</li>" for f in _plant_facts(study))
    design_charts = "".join(
        f"<div class='chart'><div id='chart-{k}' class='vega-chart'></div>"
        f"<p class='sub'>{html.escape(cap)}</p></div>"
        for k, cap in _CHART_ORDER.items() if k in specs
    )
    note_html = "".join(f"<li>{html.escape(n)}</li>" for n in notes)
    key = "".join(
        f"<li class='{'rec' if str(d['name']) == recommended else ''}'>"
        f"{_swatch(styles.get(str(d['name'])), str(d['name']) in in_responses)}"
        f"{html.escape(str(d['name']))}{_badge(str(d['name']) == recommended)}"
        f"{'' if d.get('meets_targets') else ' <span class=sub>(misses)</span>'}</li>"
        for d in designs
    )
    key_html = (
        "<div class='key'><h3>Key</h3><ul>" + key + "</ul><p class='sub'>Line: response "
        "charts (dashed: hand-style designs). Point: Ms charts — circle optimized, square "
        "given, diamond hand, triangle phase-balanced; hollow when the design misses its "
        "targets. The thick line is the recommended design.</p></div>"
        if key else ""
    )
    plant_chart = (
        "<div class='chart'><div id='chart-plant' class='vega-chart'></div></div>"
        if "plant" in specs else ""
    )
    ordered = {k: specs[k] for k in ("plant", *_CHART_ORDER) if k in specs}
    js = _JS % {"specs": script_json(ordered)}
    bundle_js = bundle.replace("</script", "<\\/script").replace("<!--", "<\\!--")
    status = (
        f"{len(designs)} design{'s' if len(designs) != 1 else ''}, {n_meet} meet the targets"
        + (f" · recommended: {recommended}" if recommended else "")
    )
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>loopscout report — {html.escape(study.name)}</title>
<style>{_CSS % {"font": font}}</style>
<script>window.__errors=[];window.addEventListener('error',function(e){{window.__errors.push(String(e.message))}});\
window.addEventListener('unhandledrejection',function(e){{window.__errors.push(String(e.reason))}});</script>
<script>{bundle_js}</script>
</head><body>
<header><h1>{html.escape(study.name)}</h1>\
<p>loopscout design report · {html.escape(status)}</p></header>
<main>
<section id="answer"><h2>Answer</h2>
<p class="lowest">Lowest order that meets spec: <b id="lowest-order" \
class="{'ok' if orders else 'none'}">{low_txt}</b> <span class="sub">({html.escape(low_note)})\
</span></p>
{_answer_html(designs, answer, summary, recommended)}</section>
<section id="plant"><h2>Plant</h2><div class="plant"><div>
<p class="formula">P(s) = {html.escape(plant_factored(study))}</p><ul>{facts}</ul></div>
{plant_chart}</div></section>
<section id="requirements"><h2>Requirements and what each design achieves</h2>
{_requirements_html(study, designs, recommended)}</section>
<section id="designs"><h2>Designs, ranked</h2>\
<p class="sub">Same order and columns as the terminal table. The line next to a name is \
its style in the response charts.</p>
{_ranked_html(designs, recommended, styles, in_responses)}</section>
<section id="charts"><h2>Charts</h2><p class="sub">Hover for full names and values. \
Click a design (point or curve) to highlight it in every chart; shift-click adds more; \
double-click clears.</p>
{'<ul class="sub">' + note_html + '</ul>' if note_html else ''}
{key_html}<div class="charts">{design_charts}</div></section>
<section id="assumptions"><h2>Assumptions</h2><ul>
<li>linear time-invariant plant model as given in the study</li>{_data_assumptions(study, designs)}
<li>the transport delay is exact in the frequency domain and a sampled transport delay \
in the step responses{html.escape(fold_txt)}</li>
<li>unit steps on the reference and at the plant input (load), applied at t = 0</li>
</ul></section>
<section class="caution" id="caution"><b>{html.escape(CAUTION)}</b></section>
<pre id="errors"></pre>
</main>
<script>{js}</script>
</body></html>
"""
