"""Terminal text of the command line: design tables, study echoes, JSON on stdout, and
text made safe for a terminal. Shared by every command module of :mod:`explorer.cli`."""

from __future__ import annotations

import sys
from collections.abc import Mapping, Sequence
from typing import Any

from explorer.core.factored import factored, factored_record
from explorer.core.json_text import json_text
from explorer.core.metric_registry import MARGIN_KEYS
from explorer.evaluation.family import WORST_KEYS
from explorer.evaluation.records import METRIC_KEYS, METRIC_UNITS

__all__ = ["print_json", "print_study", "print_measured", "print_data_notes", "design_table",
           "fmt_value", "member_text", "safe", "factored", "factored_record",
           "UNSTABLE_MARGIN_NOTE"]


def print_json(obj: dict[str, Any]) -> None:
    sys.stdout.write(json_text(obj) + "\n")


def print_study(study: Any) -> None:
    t = study.targets
    print(safe(f"study: {study.name}  ({study.source})"))
    p = study.plant
    mp = getattr(study, "measured", None)
    if mp is not None:
        print_measured(mp)
    else:
        print(
            f"plant: {factored(p.gain, p.zeros, p.poles)}"
            + (f" * exp(-{p.delay_s:g} s)" if p.delay_s else "")
        )
    wc = t.crossover_rad_s
    wc_s = (
        "free"
        if wc is None
        else (f"[{wc[0]:.4g}, {wc[1]:.4g}]" if isinstance(wc, tuple) else f"{wc:.4g}")
    )
    pm_s = "none" if t.phase_margin_deg is None else f"{t.phase_margin_deg:.2f} deg"
    print(
        f"targets: crossover {wc_s} rad/s, phase margin {pm_s}, "
        f"loop integrators >= {t.integrators}"
    )
    for line in t.derived_from:
        print(f"  converted: {line}")
    if study.limits:
        print("limits: " + ", ".join(f"{k} {v:g}" for k, v in study.limits.items()))
    v = getattr(study, "variation", None)
    if v is not None:
        parts = []
        if v.gain:
            parts.append(f"gain x[{v.gain[0]:g}, {v.gain[1]:g}]")
        if v.delay_s:
            parts.append(f"delay [{v.delay_s[0]:g}, {v.delay_s[1]:g}] s")
        if v.time_scale:
            parts.append(f"time scale x[{v.time_scale[0]:g}, {v.time_scale[1]:g}]")
        if v.members:
            parts.append(f"{len(v.members)} listed member(s)")
        print("plant family: " + ", ".join(parts)
              + " (limits and stability apply to every member; targets to the nominal)")
    print()


def print_measured(mp: Any) -> None:
    """The measured plant: the file, its band, what is assumed, the fitted model and
    its error over the band (docs/measured-data.md)."""
    lo, hi = mp.data.band_rad_s
    m = mp.fit.model
    print(safe(f"plant: measured sweep {mp.shown}, {mp.data.omega_rad_s.size} points, "
                f"band {lo:.4g} to {hi:.4g} rad/s; frequency figures are read on the data"))
    given = "given" if mp.integrators is not None else "estimated from the lowest points"
    print(f"  assumed: {mp.unstable_poles} open-loop unstable pole(s) (given), "
          f"{mp.plant_integrators} integrator(s) ({given})")
    print(f"  fitted model (vector fitting): {factored(m.gain, m.zeros, m.poles)}"
          + (f" * exp(-{m.delay_s:.4g} s)" if m.delay_s else ""))
    f = mp.fit
    print(f"  fit error over the band: {100 * f.rel_rms:.2f} % RMS ({100 * f.rel_max:.2f} % "
          f"max), magnitude {f.mag_max_db:.2f} dB max, phase {f.phase_max_deg:.2f} deg max")
    if f.time_from_fit:
        print("  time responses (overshoot, settling, rise, peak |u|, IAE) come from the "
              "fitted model")
    else:
        for note in f.notes:
            if "withheld" in note:
                print(safe(f"  {note}"))
    low = mp.data.low_coherence_rows()
    if low:
        w = mp.data.omega_rad_s
        print(f"  low coherence (< 0.6) at {len(low)} point(s): "
              + ", ".join(f"{w[k]:.4g}" for k in low) + " rad/s")


def print_data_notes(designs: Sequence[Mapping[str, Any]]) -> None:
    """Per design on a measured plant: the interpolation error bounds, what lies
    outside the band, why time figures are withheld; then, once, the assumptions (the
    same for every design but the Nyquist count, which is left out here)."""
    data = [d for d in designs if "band_rad_s" in d]
    units = {"crossover_rad_s": "rad/s", "phase_margin_deg": "deg", "gain_margin_db": "dB",
             "delay_margin_s": "s", "sensitivity_peak": "", "complementary_peak": ""}
    for d in data:
        err = d.get("interpolation_error") or {}
        shown = [f"{METRIC_UNITS.get(k, (k, ''))[0]} ±{v:.2g}" + (f" {units[k]}"
                                                                  if units[k] else "")
                 for k, v in err.items() if k in units]
        if shown:
            print(safe(f"  {d['name']} interpolation error bounds: " + ", ".join(shown)))
        for line in d.get("outside_band") or []:
            print(safe(f"  {d['name']} outside the band: {line}"))
        if d.get("time_note"):
            print(safe(f"  {d['name']}: {d['time_note']}"))
    if data:
        print("  assumptions about the data:")
        for line in data[0].get("assumptions") or []:
            if not line.startswith("Nyquist count"):
                print(safe(f"    - {line}"))


def fmt_value(key: str, value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "NO"
    if isinstance(value, (list, tuple)):
        return ", ".join(f"{v:.4g}" for v in value) or "-"
    if isinstance(value, int):
        return str(value)
    return f"{value:.4g}"


def _table_rows() -> tuple[str, ...]:
    """docs/interface.md METRICS keys in their order, with the lower gain margin shown
    right after the phase crossover."""

    keys = list(METRIC_KEYS)
    keys.insert(keys.index("phase_crossover_rad_s") + 1, "lower_gain_margin_db")
    return tuple(keys)


_TABLE_ROWS = _table_rows()


#: Rows of the sampled loop in a design table (a study with [search] sample_time).
_SAMPLED_ROWS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db", "delay_margin_s",
                 "sensitivity_peak", "closed_loop_stable", "overshoot_pct", "settling_time_s",
                 "iae_load")
UNSTABLE_MARGIN_NOTE = (
    "* closed loop unstable: these figures are distances of the Nyquist curve from -1, "
    "not margins of a working loop"
)


def design_table(designs: Sequence[Mapping[str, Any]]) -> str:
    """Metrics as rows, designs as columns, with units."""
    head = ["", *[safe(str(d["name"])) for d in designs]]
    rows = [
        ["structure", *[d["structure"] for d in designs]],
        ["order", *[str(d["order"]) for d in designs]],
        ["compensator", *[factored_record(d["compensator"]) for d in designs]],
    ]
    unstable = [d["metrics"].get("closed_loop_stable") is False for d in designs]
    for key in _TABLE_ROWS:
        label, unit = METRIC_UNITS.get(key, (key, ""))
        name = f"{label} [{unit}]" if unit and unit != "-" else label
        rows.append([name, *[
            fmt_value(key, d["metrics"].get(key))
            + (" *" if bad and key in MARGIN_KEYS and d["metrics"].get(key) is not None else "")
            for d, bad in zip(designs, unstable, strict=True)
        ]])
    if any("worst" in d for d in designs):
        for key in WORST_KEYS:
            label, unit = METRIC_UNITS.get(key, (key, ""))
            name = f"worst {label} [{unit}]" if unit and unit != "-" else f"worst {label}"
            rows.append([name, *[
                fmt_value(key, d["worst"].get(key)) if "worst" in d else "" for d in designs
            ]])
        rows.append(["worst-Ms member", *[member_text(d.get("worst_member")) for d in designs]])
    if any(d.get("sampled_metrics") for d in designs):
        # the loop that runs, the one meets_targets judges (docs/explore.md)
        t = next(d.get("sample_time_s") for d in designs if d.get("sampled_metrics"))
        for key in _SAMPLED_ROWS:
            label, unit = METRIC_UNITS.get(key, (key, ""))
            name = f"sampled {label} [{unit}]" if unit and unit != "-" else f"sampled {label}"
            rows.append([name, *[
                fmt_value(key, (d.get("sampled_metrics") or {}).get(key))
                if d.get("sampled_metrics") else "" for d in designs
            ]])
        rows.append(["sample time [s]", *[f"{t:g}" for _ in designs]])
    rows.append(["meets targets", *[fmt_value("", d["meets_targets"]) for d in designs]])
    table = [head, *rows]
    widths = [max(len(r[i]) for r in table) for i in range(len(head))]
    lines = []
    for j, r in enumerate(table):
        lines.append(
            "  ".join(
                c.ljust(w) if i == 0 else c.rjust(w)
                for i, (c, w) in enumerate(zip(r, widths, strict=True))
            )
        )
        if j == 0:
            lines.append("  ".join("-" * w for w in widths))
    if any(unstable):
        lines.append(UNSTABLE_MARGIN_NOTE)
    return "\n".join(lines)


def member_text(m: dict[str, Any] | None) -> str:
    """A worst member in a table cell: gain factor, delay, time scale (or its label)."""
    if not m:
        return ""
    if m.get("gain_factor") is None:
        return str(m.get("where", ""))
    return f"g x{m['gain_factor']:.3g}, {m['delay_s']:.3g} s, t x{m['time_scale']:.3g}"



_CONTROL = {i: f"\\x{i:02x}" for i in (*range(0x20), *range(0x7F, 0xA0))}
_CONTROL.update({0x2028: "\\u2028", 0x2029: "\\u2029"})
_CONTROL.pop(ord("\n"))


def safe(text: str) -> str:
    """Text for the terminal: C0/C1 control characters (ESC sequences that recolour,
    retitle or move the cursor, bells, carriage returns) shown as ``\\x1b`` escapes;
    newlines kept (callers print lines)."""
    return text.translate(_CONTROL)
