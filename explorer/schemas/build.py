"""Write the JSON Schemas of explorer/schemas/ (``python -m explorer.schemas.build``).

The schemas are data; this module is their one source, so the shared parts (a root,
a factor, the metrics, a DESIGN record, the study header) are written once. After a
change here, rerun it and commit the JSON files; tests/test_schemas.py checks that
the files equal what this module builds.

Reading guide: keys marked "stable" in a description are fixed by docs/interface.md
(never renamed or re-typed); the others are the project's extensions, documented in
docs/interface.md too. Every object we own refuses unknown keys
(``additionalProperties: false``): a new key is written down here and in the docs
before it ships. The echoed study (``study``) is open: it repeats the input.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

__all__ = ["schemas", "write"]

DRAFT = "https://json-schema.org/draft/2020-12/schema"
HERE = Path(__file__).resolve().parent

Schema = dict[str, Any]


def _num(desc: str, *, null: bool = True, **bounds: Any) -> Schema:
    out: Schema = {"type": ["number", "null"] if null else "number", "description": desc}
    out.update(bounds)
    return out


def _int(desc: str, *, null: bool = False, minimum: int = 0) -> Schema:
    return {"type": ["integer", "null"] if null else "integer", "minimum": minimum,
            "description": desc}


def _str_list(desc: str) -> Schema:
    return {"type": "array", "items": {"type": "string"}, "description": desc}


def _obj(props: dict[str, Schema], required: list[str] | tuple[str, ...], desc: str = "",
         *, closed: bool = True) -> Schema:
    out: Schema = {"type": "object"}
    if desc:
        out["description"] = desc
    out["properties"] = props
    out["required"] = list(required)
    if closed:
        out["additionalProperties"] = False
    return out


# a real root is a number; a complex one a string in Python's complex syntax
_FLOAT = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
ROOT: Schema = {
    "description": "a root: a real root as a number, a complex one as a string in "
                   "Python's complex syntax (\"-2+3j\"), listed with its conjugate",
    "oneOf": [
        {"type": "number"},
        {"type": "string", "pattern": f"^{_FLOAT}[+-](?:\\d+\\.?\\d*|\\.\\d+)"
                                      f"(?:[eE][+-]?\\d+)?j$"},
    ],
}

FACTOR: Schema = _obj(
    {
        "gain": {"type": "number", "description": "k in k·Π(x − zero)/Π(x − pole)"},
        "zeros": {"type": "array", "items": {"$ref": "#/$defs/root"}},
        "poles": {"type": "array", "items": {"$ref": "#/$defs/root"}},
    },
    ["gain", "zeros", "poles"],
    "a rational factor in roots form (s-plane, or z-plane for discrete ones)",
)

_W: dict[str, Any] = {"exclusiveMinimum": 0}  # a frequency, rad/s
_NONNEG: dict[str, Any] = {"minimum": 0}

#: stable METRICS keys (docs/interface.md, "Metrics")
STABLE_METRICS: dict[str, Schema] = {
    "crossover_rad_s": _num("stable: the gain crossover with the smallest phase margin", **_W),
    "crossovers_rad_s": {"type": "array", "items": {"type": "number", **_W},
                         "description": "stable: every gain crossover, ascending"},
    "phase_margin_deg": _num("stable: the smallest phase margin, in (-180, 180]",
                             exclusiveMinimum=-180, maximum=180),
    "gain_margin_db": _num("stable: smallest upward gain margin at a finite phase crossover "
                           "with |L| < 1 (so positive)", exclusiveMinimum=0),
    "phase_crossover_rad_s": _num("stable: the phase crossover that sets gain_margin_db", **_W),
    "delay_margin_s": _num("stable: smallest extra loop delay that destabilises", **_NONNEG),
    "sensitivity_peak": _num("stable: Ms = max |1/(1+L)|, absolute", **_NONNEG),
    "complementary_peak": _num("stable: Mt = max |L/(1+L)|, absolute", **_NONNEG),
    "closed_loop_stable": {"type": "boolean", "description": "stable: delay included"},
    "overshoot_pct": _num("stable: unit reference step, percent of the final value, >= 0",
                          **_NONNEG),
    "settling_time_s": _num("stable: last time outside the ±2 % band", **_NONNEG),
    "rise_time_s": _num("stable: 10 % to 90 % of the final value", **_NONNEG),
    "peak_control": _num("stable: max |u(t)| for the unit reference step", **_NONNEG),
    "hf_gain": _num("stable: |C(j∞)|", **_NONNEG),
    "integral_gain": _num("stable: lim s·C(s) for exactly one compensator pole at 0"),
    "iae_load": _num("stable: ∫|y| for a unit load step at the plant input", **_NONNEG),
}

#: extension keys of the metrics (docs/metrics.md)
EXTRA_METRICS: dict[str, Schema] = {
    "lower_gain_margin_db": _num("extension: at phase crossovers with |L| > 1, how far the "
                                 "gain may fall (negative)", exclusiveMaximum=0),
    "sensitivity_peak_rad_s": _num("extension: where Ms occurs (0 = the limit ω → 0)",
                                   **_NONNEG),
    "complementary_peak_rad_s": _num("extension: where Mt occurs (0 = the limit ω → 0)",
                                     **_NONNEG),
    "closed_loop_rhp_poles": _int("extension: closed-loop right-half-plane poles (Nyquist); "
                                  "null on a measured plant when not established", null=True),
    "final_value": _num("extension: final value of the unit reference step response"),
    "noise_gain": _num("extension: sup of |C(jω)| for ω ≥ crossover", **_NONNEG),
    "noise_gain_ratio": _num("extension: noise_gain / |C(j crossover)|", **_NONNEG),
    "pole_ratio": _num("extension: fastest compensator pole off 0 / crossover", **_NONNEG),
    "hidden_unstable_mode": {"type": "boolean",
                             "description": "extension: a compensator root cancels a plant "
                                            "root in the closed right half plane (then "
                                            "closed_loop_stable is false)"},
}

METRICS: Schema = _obj(
    {**STABLE_METRICS, **EXTRA_METRICS},
    [*STABLE_METRICS, *EXTRA_METRICS],
    "every METRICS key of one design on the continuous loop; null = does not exist or "
    "infinite; time-domain keys null when the closed loop is unstable",
)

#: December addition, not built yet: the worst value over an uncertain plant family
WORST_KEYS = ("sensitivity_peak", "complementary_peak", "phase_margin_deg", "gain_margin_db",
              "delay_margin_s", "closed_loop_stable", "overshoot_pct", "settling_time_s",
              "iae_load")
WORST: Schema = _obj(
    {k: STABLE_METRICS[k] for k in WORST_KEYS}, list(WORST_KEYS),
    "stable (December addition, [variation]; being built): each key at its worst over "
    "the plant family",
)

#: extension beside "worst": the family member where Ms is worst (factors null for a
#: listed member) and what the worst values were taken over (explorer/evaluation/family.py)
WORST_MEMBER: Schema = _obj(
    {"gain_factor": _num("factor on the plant gain", exclusiveMinimum=0),
     "delay_s": _num("the member's delay", minimum=0),
     "time_scale": _num("factor on every time constant", exclusiveMinimum=0),
     "where": {"type": "string"}},
    ["gain_factor", "delay_s", "time_scale", "where"],
    "extension ([variation]): the member with the worst sensitivity peak",
)
_TIME_FIGURES = ("overshoot_pct", "settling_time_s", "iae_load")
TIME_REFINEMENT: Schema = _obj(
    {"method": {"type": "string"},
     "members_simulated": _int("members of the box whose step responses were simulated"),
     "tolerance": _obj({"overshoot_pct": _num("percentage points", null=False, minimum=0),
                        "settling_time_rel": _num("", null=False, minimum=0),
                        "iae_load_rel": _num("", null=False, minimum=0)},
                       ["overshoot_pct", "settling_time_rel", "iae_load_rel"]),
     "finest_cell": _num("smallest cell, share of each range", null=False,
                         exclusiveMinimum=0),
     "converged": {"type": "boolean"},
     "cap_hit": {"type": "boolean"},
     "unresolved_cells": _obj({k: _int("") for k in _TIME_FIGURES}, list(_TIME_FIGURES)),
     "jump_cells": _obj({k: _int("") for k in _TIME_FIGURES}, list(_TIME_FIGURES)),
     "largest_excess": _obj({k: _num("", null=False, minimum=0) for k in _TIME_FIGURES},
                            list(_TIME_FIGURES)),
     "worst_at": _obj({k: {"oneOf": [{"type": "null"}, _obj(
         {"gain_factor": _num("", null=False, exclusiveMinimum=0),
          "delay_s": _num("", null=False, minimum=0),
          "time_scale": _num("", null=False, exclusiveMinimum=0)},
         ["gain_factor", "delay_s", "time_scale"])]} for k in _TIME_FIGURES},
         list(_TIME_FIGURES), "the member of the box where each worst was found (null: "
         "at the nominal plant or a listed member)")},
    ["method", "members_simulated", "tolerance", "finest_cell", "converged", "cap_hit",
     "unresolved_cells", "jump_cells", "largest_excess", "worst_at"],
    "extension ([variation] with a range): the adaptive refinement of the step figures "
    "over the box (docs/metrics.md)",
)
WORST_BASIS: Schema = _obj(
    {"frequency": {"type": "string"},
     "time": _str_list("the members whose step responses were simulated one by one, "
                       "then one line on the refinement over the box"),
     "time_scale_bound": _num("", minimum=0),
     "time_scale_gap": _num("", minimum=0),
     "time_refinement": TIME_REFINEMENT},
    ["frequency", "time"],
    "extension ([variation], being built, so open to new keys): the members the worst "
    "values were taken over",
    closed=False,
)

#: extension ([search] sample_time): the design's sampled loop, what meets_targets
#: judges (explorer/design/sampled_design.py; docs/explore.md "Sampled controller")
DESIGN_SAMPLED_KEYS = ("crossover_rad_s", "crossovers_rad_s", "phase_margin_deg",
                       "gain_margin_db", "phase_crossover_rad_s", "delay_margin_s",
                       "sensitivity_peak", "complementary_peak", "closed_loop_stable",
                       "overshoot_pct", "settling_time_s", "rise_time_s", "peak_control",
                       "iae_load")
DESIGN_SAMPLED: Schema = _obj(
    {**{k: STABLE_METRICS[k] for k in DESIGN_SAMPLED_KEYS},
     "lower_gain_margin_db": EXTRA_METRICS["lower_gain_margin_db"]},
    list(DESIGN_SAMPLED_KEYS),
    "extension ([search] sample_time): the METRICS readings of the sampled loop (C(z) by "
    "Tustin with prewarping, zero-order hold, plant and computation delay); step figures "
    "from the exact sampled simulation, between samples too",
)

ORIGINS = ["given", "phase-balanced", "hand", "optimized"]

DESIGN: Schema = _obj(
    {
        "name": {"type": "string", "description": "stable"},
        "origin": {"enum": ORIGINS, "description": "stable"},
        "structure": {"type": "string", "description": "stable: a short structure label"},
        "order": _int("stable: number of compensator poles"),
        "compensator": {"$ref": "#/$defs/factor", "description": "stable: C(s)"},
        "meets_targets": {"type": ["boolean", "null"], "description": "stable"},
        "pareto": {"type": ["boolean", "null"], "description": "stable"},
        "metrics": {"$ref": "#/$defs/metrics"},
        "worst": {"$ref": "#/$defs/worst"},
        "worst_member": {"$ref": "#/$defs/worst_member"},
        "worst_basis": {"$ref": "#/$defs/worst_basis"},
        "sample_time_s": _num("extension ([search] sample_time): the controller's sample "
                              "period", null=False, exclusiveMinimum=0),
        "compute_delay_s": _num("extension ([search] compute_delay)", null=False, minimum=0),
        "sampled_prewarp_rad_s": _num("extension: the Tustin prewarp frequency (the "
                                      "continuous crossover; null: plain Tustin)",
                                      exclusiveMinimum=0),
        "sampled_metrics": {"$ref": "#/$defs/design_sampled"},
        "sampled_note": {"type": "string",
                         "description": "extension: why the sampled loop has no figures"},
        "margins_valid": {"type": "boolean",
                          "description": "extension: false when the closed loop is unstable "
                                         "(margins and peaks are then no robustness margins)"},
        "misses": _str_list("extension: why meets_targets is false (empty when true)"),
        "practical_misses": _str_list("extension (explore): practical limits broken"),
        "steps": _str_list("extension (balance): the hand procedure step by step"),
        "gain_factor": _num("extension (balance --trim-overshoot): gain multiplier", null=False,
                            exclusiveMinimum=0),
        "trial": _int("extension (explore, optimized): the trial number, null when the "
                      "design came from refining a hand design", null=True),
        "refined": {"type": "boolean",
                    "description": "extension (explore, optimized): locally refined"},
        "dominates": _str_list("extension (explore, optimized): hand designs it dominates"),
        # a measured plant ([plant] data, docs/measured-data.md)
        "band_rad_s": {"type": "array", "items": {"type": "number", **_W}, "minItems": 2,
                       "maxItems": 2,
                       "description": "extension (measured plant): the measured band [low, "
                                      "high]"},
        "interpolation_error": {"type": "object", "additionalProperties": {"type": "number"},
                                "description": "extension (measured plant): the bound on "
                                               "each frequency metric from the "
                                               "interpolation between measured points, "
                                               "same units as the metric"},
        "outside_band": _str_list("extension (measured plant): why a frequency metric is "
                                  "null or not established (the loop outside the band)"),
        "assumptions": _str_list("extension (measured plant): what the figures assume "
                                 "about the plant beyond the data"),
        "low_coherence_points": {"type": "array", "items": _obj(
            {"row_index": _int("0-based index of the measured point"),
             "frequency_rad_s": _num("", null=False, **_W),
             "coherence": _num("", null=False, minimum=0, maximum=1)},
            ["row_index", "frequency_rad_s", "coherence"]),
            "description": "extension (measured plant): points with coherence < 0.6"},
        "time_from_fit": {"type": "boolean",
                          "description": "extension (measured plant): the time-domain "
                                         "metrics come from the fitted model; false: they "
                                         "are null (see time_note)"},
        "time_note": {"type": ["string", "null"],
                      "description": "extension (measured plant): why time-domain metrics "
                                     "are withheld"},
        "fit": {"$ref": "#/$defs/fit"},
    },
    ["name", "origin", "structure", "order", "compensator", "meets_targets", "pareto",
     "metrics", "margins_valid", "misses"],
    "one DESIGN record",
)
DESIGN["allOf"] = [{
    "if": {"properties": {"origin": {"const": "optimized"}}, "required": ["origin"]},
    "then": {"required": ["trial", "refined"]},
}]

STUDY: Schema = _obj(
    {
        "name": {"type": ["string", "null"]},
        "source": {"type": "string", "description": "the study file as given"},
        "plant": {"type": "object", "description": "the plant: gain, zeros, poles, delay"},
        "targets": _obj(
            {
                "crossover_rad_s": {"oneOf": [
                    {"type": "number", **_W},
                    {"type": "array", "items": {"type": "number"}, "minItems": 2,
                     "maxItems": 2},
                    {"type": "null"}]},
                "phase_margin_deg": _num("the phase-margin target"),
                "integrators": _int("free integrators the loop must have"),
                "crossover_tolerance": _num("relative", null=False, exclusiveMinimum=0),
                "requirements": {"type": "object",
                                 "additionalProperties": {"type": "number"}},
                "derived_from": _str_list("conversion lines, requirement → target"),
            },
            ["crossover_rad_s", "phase_margin_deg", "integrators", "crossover_tolerance",
             "requirements", "derived_from"], closed=False,
        ),
        "limits": {"type": "object", "additionalProperties": {"type": "number"}},
    },
    ["name", "source", "plant", "targets", "limits"],
    "extension: the study as read (an echo of the input, open to new keys)",
    closed=False,
)
STUDY["properties"]["plant"] = {"oneOf": [_obj(
    {"gain": {"type": "number"}, "zeros": {"type": "array", "items": {"$ref": "#/$defs/root"}},
     "poles": {"type": "array", "items": {"$ref": "#/$defs/root"}},
     "delay": {"type": "number", "minimum": 0}},
    ["gain", "zeros", "poles", "delay"], closed=False,
), _obj(
    {"data": {"type": "string", "description": "the CSV as written in the study"},
     "points": _int("measured points"),
     "band_rad_s": {"type": "array", "items": {"type": "number"}},
     "unstable_poles": _int("open-loop right-half-plane poles (given)"),
     "integrators": _int("plant integrators (given or estimated)"),
     "integrators_given": {"type": "boolean"},
     "fit": {"$ref": "#/$defs/fit"}},
    ["data", "points", "band_rad_s", "unstable_poles", "integrators", "fit"], closed=False,
)]}

#: the model fitted to a measured plant and its error over the band (explorer/model/fit.py)
FIT: Schema = _obj(
    {"model": _obj({"gain": {"type": "number"},
                    "zeros": {"type": "array", "items": {"$ref": "#/$defs/root"}},
                    "poles": {"type": "array", "items": {"$ref": "#/$defs/root"}},
                    "delay": {"type": "number", "minimum": 0}},
                   ["gain", "zeros", "poles", "delay"]),
     "order": _int("poles of the fitted rational part"),
     "rel_rms": _num("RMS of |model/data - 1| over the band", null=False, minimum=0),
     "rel_max": _num("max of |model/data - 1|", null=False, minimum=0),
     "mag_rms_db": _num("", null=False, minimum=0),
     "mag_max_db": _num("", null=False, minimum=0),
     "phase_rms_deg": _num("", null=False, minimum=0),
     "phase_max_deg": _num("", null=False, minimum=0),
     "poor": {"type": "boolean"},
     "time_from_fit": {"type": "boolean"},
     "threshold_rel_rms": _num("the poor-fit threshold of rel_rms", null=False),
     "notes": _str_list("how the fit was made, and why it is poor")},
    ["model", "order", "rel_rms", "rel_max", "mag_rms_db", "mag_max_db", "phase_rms_deg",
     "phase_max_deg", "poor", "time_from_fit", "threshold_rel_rms", "notes"],
    "extension (measured plant): the rational-plus-delay model fitted to the data",
)

CAUTION: Schema = {"type": "string", "minLength": 1,
                   "description": "extension: the safety caution"}


def _designs(item: Schema | None = None) -> Schema:
    return {"type": "array", "items": item or {"$ref": "#/$defs/design"},
            "description": "stable: the DESIGN records"}


def _defs() -> dict[str, Schema]:
    return {"root": ROOT, "factor": FACTOR, "metrics": METRICS, "worst": WORST,
            "worst_member": WORST_MEMBER, "worst_basis": WORST_BASIS,
            "design_sampled": DESIGN_SAMPLED, "design": DESIGN, "study": STUDY, "fit": FIT}


def _top(name: str, title: str, props: dict[str, Schema], required: list[str],
         defs: dict[str, Schema]) -> Schema:
    body = _obj(props, required)
    return {"$schema": DRAFT, "title": title,
            "description": f"The object `loopscout {name} --json` prints (docs/interface.md).",
            **body, "$defs": defs}


def check_schema() -> Schema:
    return _top(
        "check", "loopscout check --json",
        {"designs": _designs(), "study": {"$ref": "#/$defs/study"}, "caution": CAUTION},
        ["designs", "study", "caution"], _defs(),
    )


REFUSED: Schema = _obj(
    {"name": {"type": "string"}, "origin": {"enum": ORIGINS}, "structure": {"type": "string"},
     "reason": {"type": "string", "minLength": 1}, "steps": _str_list("steps before the refusal")},
    ["name", "origin", "structure", "reason", "steps"],
    "extension: a hand method that refused, with the failed step",
)


def balance_schema() -> Schema:
    defs = _defs()
    defs["balance_design"] = {"allOf": [{"$ref": "#/$defs/design"},
                                        {"required": ["steps"],
                                         "properties": {"origin": {"enum": ["phase-balanced",
                                                                            "hand"]}}}]}
    defs["refused"] = REFUSED
    return _top(
        "balance", "loopscout balance --json",
        {"designs": _designs({"$ref": "#/$defs/balance_design"}),
         "refused": {"type": "array", "items": {"$ref": "#/$defs/refused"}},
         "study": {"$ref": "#/$defs/study"}, "caution": CAUTION},
        ["designs", "refused", "study", "caution"], defs,
    )


ANSWER: Schema = _obj(
    {"design": {"type": ["string", "null"], "description": "name of a listed design"},
     "order": _int("its order", null=True),
     "why": {"type": "string", "minLength": 1},
     "worst_member": {"$ref": "#/$defs/worst_member"},
     "alternatives": {
         "type": "array",
         "description": "extension: per criterion, the design best at it and what it "
                        "buys and costs against the answer",
         "items": _obj({"criterion": {"type": "string", "minLength": 1},
                        "design": {"type": "string", "minLength": 1},
                        "trade_off": {"type": "string", "minLength": 1}},
                       ["criterion", "design", "trade_off"])}},
    ["design", "order", "why"],
    "stable (December addition): the one recommended design and why",
)


def explore_schema() -> Schema:
    defs = _defs()
    defs["answer"] = ANSWER
    defs["explore_design"] = {"allOf": [
        {"$ref": "#/$defs/design"},
        {"required": ["practical_misses"], "properties": {"pareto": {"type": "boolean"}}},
        {"if": {"properties": {"origin": {"const": "optimized"}}},
         "then": {"required": ["dominates"]}},
    ]}
    return _top(
        "explore", "loopscout explore --json (and DIR/designs.json)",
        {"answer": {"$ref": "#/$defs/answer"},
         "designs": _designs({"$ref": "#/$defs/explore_design"}),
         "study": {"$ref": "#/$defs/study"},
         "summary": _str_list("extension: the text summary, the answer first"),
         "caution": CAUTION},
        ["answer", "designs", "study", "summary", "caution"], defs,
    )


SAMPLED: dict[str, Schema] = {
    "crossover_rad_s": STABLE_METRICS["crossover_rad_s"],
    "phase_margin_deg": STABLE_METRICS["phase_margin_deg"],
    "gain_margin_db": _num("stable: as METRICS, for 0 < ω ≤ π/T", exclusiveMinimum=0),
    "sensitivity_peak": STABLE_METRICS["sensitivity_peak"],
    "closed_loop_stable": {"type": "boolean",
                           "description": "stable: from the sampled closed loop"},
    "crossovers_rad_s": STABLE_METRICS["crossovers_rad_s"],
    "phase_crossover_rad_s": STABLE_METRICS["phase_crossover_rad_s"],
    "lower_gain_margin_db": EXTRA_METRICS["lower_gain_margin_db"],
    "delay_margin_s": STABLE_METRICS["delay_margin_s"],
    "delay_margin_samples": _num("extension: delay_margin_s / T", **_NONNEG),
    "sensitivity_peak_rad_s": EXTRA_METRICS["sensitivity_peak_rad_s"],
    "complementary_peak": STABLE_METRICS["complementary_peak"],
    "complementary_peak_rad_s": EXTRA_METRICS["complementary_peak_rad_s"],
    "closed_loop_pole_radius": _num("extension: largest |z| of the closed-loop poles (null "
                                    "with the argument principle)", **_NONNEG),
    "closed_loop_unstable_poles": _int("extension: closed-loop poles with |z| >= 1"),
    "stability_method": {"enum": ["eigenvalues", "argument principle"]},
    "nyquist_rad_s": _num("extension: π/T", null=False, **_W),
}

#: explorer/frequency/sampled.py's stage kinds
_STAGE_KINDS = ["gain", "integrator", "pi", "pid", "washout", "rhp zero", "lead", "lag",
                "roll-off", "notch", "peak", "second-order"]

INDUSTRIAL: Schema = {"oneOf": [{"type": "null"}, _obj(
    {"structure": {"enum": ["P", "I", "PI", "PD with derivative filter",
                            "PID with derivative filter"]},
     "standard": {"type": ["object", "null"], "additionalProperties": {"type": "number"},
                  "propertyNames": {"enum": ["Kp", "Ti_s", "Td_s", "N"]}},
     "parallel": {"type": "object", "additionalProperties": {"type": "number"},
                  "propertyNames": {"enum": ["kp", "ki_per_s", "kd_s", "Tf_s"]}},
     "formulas": _obj({"standard": {"type": ["string", "null"]},
                       "parallel": {"type": "string"}}, ["standard", "parallel"]),
     "note": {"type": "string"}},
    ["structure", "standard", "parallel", "formulas", "note"],
    "extension: PI/PID parameters when C(s) is one (continuous-time)",
)]}


def implement_schema() -> Schema:
    defs = _defs()
    defs["sampled_metrics"] = _obj(SAMPLED, list(SAMPLED),
                                   "the sampled loop: C(z), hold, plant with delays")
    coeffs = {"type": "array", "items": {"type": "number"}, "minItems": 3, "maxItems": 3}
    defs["section"] = _obj({"b": coeffs, "a": {**coeffs, "prefixItems": [{"const": 1.0}]},
                            "stage": {"type": "string", "description": "extension"}},
                           ["b", "a", "stage"],
                           "stable: (b0 + b1 z^-1 + b2 z^-2)/(1 + a1 z^-1 + a2 z^-2)")
    defs["stage"] = _obj(
        {"section": _int("section number, from 1", minimum=1),
         "kind": {"enum": _STAGE_KINDS},
         "label": {"type": "string"},
         "continuous": {"$ref": "#/$defs/factor"}, "discrete": {"$ref": "#/$defs/factor"}},
        ["section", "kind", "label", "continuous", "discrete"],
        "extension: one stage, as a section",
    )
    vec = {"type": "array", "items": {"type": "number"}, "minItems": 1}
    props: dict[str, Schema] = {
        "design": {"type": "string", "description": "stable"},
        "sample_time_s": _num("stable", null=False, exclusiveMinimum=0),
        "compute_delay_s": _num("stable", null=False, minimum=0),
        "method": {"enum": ["tustin-prewarp", "tustin", "matched"],
                   "description": "stable key; tustin and matched are extensions"},
        "prewarp_rad_s": _num("stable: null unless tustin-prewarp", **_W),
        "discrete": {"$ref": "#/$defs/factor", "description": "stable: C(z), z-plane roots"},
        "sections": {"type": "array", "items": {"$ref": "#/$defs/section"}, "minItems": 1},
        "continuous_metrics": {"$ref": "#/$defs/metrics", "description": "stable"},
        "sampled_metrics": {"$ref": "#/$defs/sampled_metrics", "description": "stable"},
        "phase_loss_deg": _num("stable: continuous minus sampled phase margin"),
        "phase_loss_rule_deg": _num("extension: ωc·(T/2 + compute delay) in degrees",
                                    **_NONNEG),
        "wc_T_rad": _num("extension: ωc·T", **_NONNEG),
        "nyquist_rad_s": _num("extension: π/T", null=False, **_W),
        "continuous": {"$ref": "#/$defs/factor", "description": "extension: C(s)"},
        "structure": {"type": "string", "description": "extension"},
        "stages": {"type": "array", "items": {"$ref": "#/$defs/stage"}, "minItems": 1},
        "difference_equation": _str_list("extension: one line per section"),
        "sections_note": {"type": "string"},
        "direct_form": _obj({"b": vec, "a": vec}, ["b", "a"],
                            "extension: C(z) as one numerator/denominator in z^-1"),
        "industrial_form": INDUSTRIAL,
        "warnings": _str_list("extension: each with its figures"),
        "notes": _str_list("extension: what the sampled model leaves out"),
        "study": {"$ref": "#/$defs/study"},
        "source": _obj({"study": {"type": "string"}, "from": {"type": ["string", "null"]}},
                       ["study", "from"]),
        "caution": CAUTION,
    }
    return _top("implement", "loopscout implement --json", props, list(props), defs)


def schemas() -> dict[str, Schema]:
    """Every schema, by command."""
    return {"check": check_schema(), "balance": balance_schema(),
            "explore": explore_schema(), "implement": implement_schema()}


def render(schema: Schema) -> str:
    return json.dumps(schema, indent=2, ensure_ascii=False) + "\n"


def write(folder: Path = HERE) -> list[Path]:
    out = []
    for name, schema in schemas().items():
        path = folder / f"{name}.json"
        path.write_text(render(schema), encoding="utf-8")
        out.append(path)
    return out


if __name__ == "__main__":
    for p in write():
        print(p.name)
