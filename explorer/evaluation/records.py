"""One design → every METRICS key of docs/interface.md, and the target check.

:func:`design_metrics` joins the frequency metrics (:mod:`explorer.frequency.metrics`) and the
step metrics (:mod:`explorer.time_domain.timeresp`); :func:`meets_targets` applies the reading
of docs/interface.md ("meets_targets is true when ...") and says why a design misses;
:func:`evaluated_record` builds the DESIGN record
(:class:`explorer.evaluation.design_record.DesignRecord`).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from explorer.core import metric_registry as _registry
from explorer.core.loop import Rational, hidden_unstable_mask
from explorer.design.sampled_design import sampled_record
from explorer.evaluation.design_record import DesignRecord
from explorer.evaluation.family import worst_of_design
from explorer.evaluation.plant_source import design_figures
from explorer.frequency.metrics import frequency_metrics
from explorer.frequency.noise import noise_figures, pole_ratio
from explorer.model.study import DEFAULT_CROSSOVER_TOLERANCE, LIMIT_KEYS, Study, Targets
from explorer.time_domain.timeresp import step_metrics

__all__ = [
    "METRIC_KEYS",
    "METRIC_UNITS",
    "CROSSOVER_REL_TOL",
    "design_metrics",
    "meets_targets",
    "describe_structure",
    "given_designs",
    "study_header",
]

#: docs/interface.md METRICS keys in table order, and each key's label and unit: from
#: the one metric list (explorer.core.metric_registry).
METRIC_KEYS = _registry.METRIC_KEYS
METRIC_UNITS = _registry.METRIC_UNITS

#: docs/interface.md: a numeric target crossover must be a gain crossover within this
#: (the default of ``targets.crossover_tolerance``).
CROSSOVER_REL_TOL = DEFAULT_CROSSOVER_TOLERANCE

_TIME_KEYS = _registry.TIME_KEYS


def design_metrics(plant: Rational, comp: Rational) -> dict[str, Any]:
    """Every METRICS key (None = null) plus the extras ``lower_gain_margin_db``,
    ``sensitivity_peak_rad_s``, ``complementary_peak_rad_s``, ``closed_loop_rhp_poles``
    and ``final_value``. Time-domain keys are None when the closed loop is unstable."""

    # the hidden-mode check (a right-half-plane or origin cancellation: L hides a mode
    # the loop keeps), the noise figures and the pole ratio
    out = _with_compensator_figures(plant, comp, frequency_metrics(plant, comp))
    stable = bool(out["closed_loop_stable"])
    if stable:
        tm = step_metrics(plant, comp, stable=True)
    else:
        tm = {key: None for key in (*_TIME_KEYS, "final_value")}
    for key in (*_TIME_KEYS, "final_value"):
        value = tm.get(key)
        out[key] = None if value is None or not math.isfinite(float(value)) else float(value)
    return {key: out.get(key) for key in (*METRIC_KEYS, *sorted(set(out) - set(METRIC_KEYS)))}


def meets_targets(
    metrics: dict[str, Any],
    targets: Targets,
    limits: dict[str, float],
    loop_integrators: int,
    worst: dict[str, Any] | None = None,
    unknown: dict[str, str] | None = None,
) -> tuple[bool, list[str]]:
    """docs/interface.md's test, with the reasons a design misses (empty when it meets).

    ``worst``: for a plant family, the worst values over the family (DESIGN
    ``"worst"``); then closed-loop stability and every limit are read from it, the
    targets from ``metrics`` (the nominal plant).

    A lower-bound limit on a margin that is null ("does not exist": no crossover or
    no phase crossover, i.e. infinite) holds; an upper-bound limit on a null value
    (unstable, improper, never settles) fails.

    ``unknown``: for a measured plant, METRICS keys whose null value the data do not
    establish (outside the measured band; explorer.evaluation.plant_source), with the reason. Such
    a null never meets a target or a limit, and the reason is given.
    """
    why: list[str] = []
    unknown = unknown or {}

    def because(key: str) -> str:
        return f" (not established: {unknown[key]})" if key in unknown else ""

    lim_src = metrics if worst is None else worst
    tag = "" if worst is None else " (worst over the plant family)"
    if metrics.get("hidden_unstable_mode"):
        why.append("closed loop internally unstable: a compensator root cancels a plant "
                   "root in the right half plane or at s = 0 (a hidden unstable mode)")
    elif "closed_loop_stable" in unknown and not metrics.get("closed_loop_stable"):
        why.append("closed-loop stability" + because("closed_loop_stable"))
    elif not metrics.get("closed_loop_stable"):
        why.append("closed loop unstable")
    elif worst is not None and not worst.get("closed_loop_stable"):
        why.append("closed loop unstable for some member of the plant family")
    if loop_integrators < targets.integrators:
        why.append(f"loop has {loop_integrators} integrator(s), needs {targets.integrators}")
    wc = targets.crossover_rad_s
    xs = metrics.get("crossovers_rad_s") or []
    if isinstance(wc, (int, float)):
        tol = targets.crossover_tolerance
        if not any(abs(x / wc - 1.0) <= tol for x in xs):
            if xs:
                near = min(xs, key=lambda x: abs(x / wc - 1.0))
                got = (f"nearest gain crossover {near:.6g} rad/s is "
                       f"{100.0 * (near / wc - 1.0):+.3g} % off; tolerance ±{100.0 * tol:.3g} %")
            else:
                got = "no gain crossover"
            why.append(f"crossover {wc:.6g} rad/s missed: {got}" + because("crossover_rad_s"))
    elif isinstance(wc, tuple):
        c = metrics.get("crossover_rad_s")
        if c is None or not (wc[0] <= c <= wc[1]):
            why.append(
                f"crossover {c if c is None else f'{c:.4g}'} "
                f"outside [{wc[0]:.4g}, {wc[1]:.4g}] rad/s" + because("crossover_rad_s")
            )
    pm_t = targets.phase_margin_deg
    if pm_t is not None:
        pm = metrics.get("phase_margin_deg")
        if pm is None or pm < pm_t - _registry.PHASE_MARGIN_TOL_DEG:
            why.append(
                f"phase margin {'none' if pm is None else f'{pm:.2f}'} deg "
                f"< target {pm_t:.2f} deg" + because("phase_margin_deg")
            )
    for key, req in targets.requirements.items():
        value = metrics.get(key)
        slack = (_registry.OVERSHOOT_TOL_PCT if key == "overshoot_pct"
                 else _registry.SETTLING_REL_TOL * req)
        if value is None or value > req + slack:
            unit = METRIC_UNITS[key][1]
            why.append(f"{key} {_fmt(value)} > required {req:g} {unit}" + because(key))
    for key, bound in limits.items():
        value = lim_src.get(key) if key in lim_src else metrics.get(key)
        kind = LIMIT_KEYS[key]
        unit = METRIC_UNITS.get(key, (key, ""))[1].strip("-")
        if kind == "upper":
            if value is None or value > bound:
                why.append(f"{key} {_fmt(value)} > limit {bound:g} {unit}".rstrip() + tag
                           + because(key))
        elif value is not None and value < bound:
            why.append(f"{key} {_fmt(value)} < limit {bound:g} {unit}".rstrip() + tag)
        elif value is None and key in unknown:
            why.append(f"{key} none, limit {bound:g} {unit}".rstrip() + because(key))
    return (not why), why


def _fmt(v: Any) -> str:
    return "none" if v is None else f"{float(v):.4g}"


def describe_structure(comp: Rational) -> str:
    """A short label of a compensator's structure, from its roots: integrators,
    real zeros/poles, complex pairs. E.g. ``I + 2z/1p``, ``P + 1z/1p``, ``I + notch``."""
    n_int = sum(1 for p in comp.poles if p == 0)
    n_dif = sum(1 for z in comp.zeros if z == 0)
    rz = sum(1 for z in comp.zeros if z != 0 and z.imag == 0)
    rp = sum(1 for p in comp.poles if p != 0 and p.imag == 0)
    cz = sum(1 for z in comp.zeros if z.imag > 0)
    cp = sum(1 for p in comp.poles if p.imag > 0)
    head = {0: "P", 1: "I", 2: "I2"}.get(n_int, f"I{n_int}")
    parts = [head]
    if n_dif:
        parts.append(f"{n_dif}s")
    if rz or rp:
        parts.append(f"{rz}z/{rp}p")
    if cz:
        parts.append("notch" if cz == 1 else f"{cz} zero pairs")
    if cp:
        parts.append(f"{cp} pole pair{'s' if cp > 1 else ''}")
    return " + ".join(parts)


def evaluated_record(
    study: Study,
    comp: Rational,
    *,
    name: str,
    origin: str,
    structure: str,
    extra: dict[str, Any] | None = None,
) -> DesignRecord:
    """A DESIGN record of ``comp`` on the study's plant with every metric
    (:func:`design_metrics`) and the target check (:func:`meets_targets`); raises
    what ``design_metrics`` raises. A measured plant (``study.measured``) is read through
    :func:`explorer.evaluation.plant_source.design_figures`: frequency metrics on the data, time
    metrics from the fitted model when it is good, the data extras beside ``metrics``."""
    unknown: dict[str, str] = {}
    n_plant = study.plant.n_integrators
    if study.measured is not None:
        metrics, data_extra, unknown = design_figures(study.measured, comp, study.limits)
        metrics = _with_compensator_figures(study.plant, comp, metrics)
        extra = {**data_extra, **(extra or {})}
        n_plant = study.measured.plant_integrators
    else:
        metrics = design_metrics(study.plant, comp)
    fam: dict[str, Any] = {}
    if study.variation is not None:
        fam = worst_of_design(study.plant, study.variation, comp, metrics)
    judged = metrics
    if getattr(study.search, "sample_time_s", None) is not None:
        # a sampled controller: judged on the sampled loop (explorer.design.sampled_design)

        sr = sampled_record(study, comp, metrics)
        judged = sr["judged"]
        extra = {**sr["extra"], **(extra or {})}
    ok, why = meets_targets(
        judged, study.targets, study.limits, n_plant + comp.n_integrators,
        worst=fam.get("worst"), unknown=unknown,
    )
    if judged is not metrics:
        why = [f"sampled loop: {w}" for w in why]
    if fam:
        extra = {**fam, **(extra or {})}
    return DesignRecord(name=name, origin=origin, structure=structure, compensator=comp,
                        meets_targets=ok, metrics=metrics, misses=tuple(why),
                        extras=dict(extra or {}))


def _with_compensator_figures(plant: Rational, comp: Rational,
                              metrics: dict[str, Any]) -> dict[str, Any]:
    """A measured plant's METRICS completed as :func:`design_metrics` completes a
    model's: the hidden-mode check (on the fitted model's roots), the noise figures
    and the pole ratio; keys in design_metrics' order."""
    out = dict(metrics)
    out["hidden_unstable_mode"] = bool(hidden_unstable_mask(
        plant, np.array([comp.zeros], complex), np.array([comp.poles], complex))[0])
    if out["hidden_unstable_mode"]:
        out["closed_loop_stable"] = False
    wc = out.get("crossover_rad_s")
    out["noise_gain"], out["noise_gain_ratio"] = noise_figures(comp, wc)
    out["pole_ratio"] = pole_ratio(comp, wc)
    return {key: out.get(key) for key in (*METRIC_KEYS, *sorted(set(out) - set(METRIC_KEYS)))}


def given_designs(study: Study) -> list[DesignRecord]:
    """The study's ``[[compensator]]`` entries as DESIGN records (origin "given"),
    each with every metric and the target check."""
    return [
        evaluated_record(
            study, e.compensator, name=e.name, origin="given",
            structure=describe_structure(e.compensator),
        )
        for e in study.compensators
    ]


def study_header(study: Study) -> dict[str, Any]:
    """The ``study`` part of the JSON objects: name, plant, targets (with their
    conversion lines) and limits."""
    t = study.targets
    wc = list(t.crossover_rad_s) if isinstance(t.crossover_rad_s, tuple) else t.crossover_rad_s
    return {
        "name": study.name,
        "source": study.source,
        "plant": (study.plant.to_dict() | {"delay": study.plant.delay_s}
                  if study.measured is None else study.measured.to_dict()),
        "targets": {
            "crossover_rad_s": wc,
            "phase_margin_deg": t.phase_margin_deg,
            "integrators": t.integrators,
            "crossover_tolerance": t.crossover_tolerance,
            "requirements": t.requirements,
            "derived_from": list(t.derived_from),
        },
        "limits": dict(study.limits),
    }
