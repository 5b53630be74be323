"""The whole exploration: structures → tuned trials → re-checked designs → ranking → files.

``explore(study_or_path, out_dir)`` tunes every candidate structure (explorer.search.tune),
keeps per structure the best-Ms design meeting the targets and a few Pareto-best
ones, re-evaluates each kept design with explorer.evaluation.records.design_metrics and
meets_targets (the batch figures are never reported unchecked), adds the hand
designs (explorer.design.hand_designs) as reference points, ranks
(explorer.search.ranking), and writes
``designs.json``, ``designs.csv`` and ``report.html`` into ``out_dir``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from explorer.core.errors import LoopscoutError
from explorer.core.json_text import json_text
from explorer.core.loop import Rational, root_from_json
from explorer.design.sampled_design import judged_metrics
from explorer.design.structures import Structure, candidate_structures
from explorer.evaluation.design_record import DesignRecord
from explorer.evaluation.phase_domain import check_study, load_checked_study
from explorer.evaluation.records import evaluated_record, given_designs
from explorer.model.study import LIMIT_KEYS, MAX_SEARCH_ORDER, Study
from explorer.outputs.report import write_report
from explorer.search.recommend import drop_near_duplicates, practical_misses, recommend

__all__ = ["ExploreResult", "explore", "make_problem", "CAUTION", "PARETO_PICKS"]

from explorer.core.caution import CAUTION  # noqa: E402  (one text everywhere)
from explorer.design.hand_designs import hand_designs
from explorer.design.sampled_design import sampling_line
from explorer.design.structures import locate
from explorer.evaluation.plant_source import hand_plant
from explorer.evaluation.records import study_header
from explorer.search import tune
from explorer.search.ranking import non_dominated_fronts, rank_designs
from explorer.search.refine import CRITERIA, Start, refine
from explorer.search.tune import PM_SEARCH_DEG, Problem, TrialRecord, evaluate_batch, row_design

#: Pareto-best designs kept per structure besides the best Ms (best hf_gain, best iae_load).
PARETO_PICKS = 2


@dataclass(frozen=True, kw_only=True)
class ExploreResult:
    """``designs``: interface DESIGN dicts; ``frame``: the ranked table (pandas);
    ``summary``: text lines, the answer first; ``obj``: the designs.json object."""

    designs: list[DesignRecord]
    frame: Any
    summary: list[str]
    obj: dict[str, Any] = field(repr=False)
    out_dir: Path


def _plant_scale(plant: Rational) -> float:
    mags = [abs(r) for r in (*plant.poles, *plant.zeros) if abs(r) > 0]
    if plant.delay_s > 0:
        mags.append(1.0 / plant.delay_s)
    return float(np.exp(np.mean(np.log(mags)))) if mags else 1.0


def search_limits(study: Study) -> dict[str, float]:
    """The bounds the search enforces: the study's ``[limits]`` and its step-response
    requirements (``targets.overshoot``/``settling_time``, docs/interface.md "Requirements
    are checked"), the tighter one where both bound the same key."""
    out = dict(study.limits)
    for key, req in study.targets.requirements.items():
        out[key] = min(out.get(key, math.inf), req)
    return out


def make_problem(study: Study):  # -> explorer.search.tune.Problem
    """The tuning problem of a study. A phase-margin target is balanced exactly; without
    one the margin is searched from the floor (``limits.phase_margin_deg``, else 30°)
    to 85° (explorer.search.tune.PM_SEARCH_DEG); a crossover range (or none) is searched too.
    A phase margin derived from an overshoot requirement is a floor, searched upward:
    phase-margin designs often overshoot more than the second-order estimate, and a
    larger margin is how a design meets the overshoot it was derived from."""

    t = study.targets
    pm_range: tuple[float, float] | None = None
    if t.phase_margin_deg is not None:
        pm = float(t.phase_margin_deg)
        if t.requirements and pm < PM_SEARCH_DEG[1]:
            pm_range = (pm, PM_SEARCH_DEG[1])
    else:
        pm = float(study.limits.get("phase_margin_deg", PM_SEARCH_DEG[0]))
        if pm < PM_SEARCH_DEG[1]:
            pm_range = (pm, PM_SEARCH_DEG[1])
    common: dict[str, Any] = dict(
        plant=study.plant,
        targets=t,
        limits=search_limits(study),
        pm_deg=pm,
        pm_range_deg=pm_range,
        max_pole_ratio=study.search.max_pole_ratio,
        crossover_tol=t.crossover_tolerance,
        variation=study.variation,
        measured=study.measured,
        sample_time_s=study.search.sample_time_s,
        compute_delay_s=study.search.compute_delay_s,
    )
    wc = t.crossover_rad_s
    if isinstance(wc, (int, float)):
        return Problem(wc_rad_s=float(wc), wc_range_rad_s=None, **common)
    if isinstance(wc, tuple):
        rng = (float(wc[0]), float(wc[1]))
    else:
        s0 = _plant_scale(study.plant)
        hi = 20.0 * s0 if study.plant.delay_s <= 0 else min(20.0 * s0, 2.0 / study.plant.delay_s)
        rng = (s0 / 50.0, hi)
    return Problem(wc_rad_s=None, wc_range_rad_s=rng, **common)


def _pick(records: list[Any], searched_wc: bool) -> list[tuple[Any, str]]:
    """Best Ms among feasible, then the best hf_gain and best iae_load of the
    structure's feasible non-dominated set (and the fastest crossover when it is
    searched), each with the criterion it was picked for."""

    feas = [r for r in records if r.feasible]
    if not feas:
        return []
    keys = ["sensitivity_peak", "hf_gain", "iae_load"]
    x = np.array(
        [
            [np.inf if r.metrics.get(k) is None else r.metrics[k] for k in keys]
            + ([-r.metrics.get("crossover_rad_s") or 0.0] if searched_wc else [])
            for r in feas
        ],
        float,
    )
    front = non_dominated_fronts(x)
    pareto = [r for r, f in zip(feas, front, strict=True) if f == 0]
    chosen = [
        (min(feas, key=lambda r: (r.metrics["sensitivity_peak"], r.number)), "sensitivity_peak")
    ]
    for k in keys[1:][:PARETO_PICKS]:
        if all(r.metrics.get(k) is None for r in pareto):
            continue  # e.g. no design rejects a load step: nothing to pick by iae_load
        chosen.append(
            (
                min(
                    pareto,
                    key=lambda r: (np.inf if r.metrics.get(k) is None else r.metrics[k], r.number),
                ),
                k,
            )
        )
    if searched_wc:
        chosen.append(
            (
                max(pareto, key=lambda r: (r.metrics.get("crossover_rad_s") or 0.0, -r.number)),
                "crossover_rad_s",
            )
        )
    out, seen = [], set()
    for r, k in chosen:
        if id(r) not in seen:
            seen.add(id(r))
            out.append((r, k))
    return out


def _hand_structures(
    study: Study, structures: list[Structure], hand: list[Any]
) -> list[Structure]:
    """A structure for each hand design that none of the searched ones can represent
    (it is of a higher order than search.max_order, or has an integrator the searched
    family leaves to the plant): the first candidate structure of the hand design's
    own order and integrator count that locates it. These get no trials; the hand design
    is refined within them (Ms), so a polished version of every hand design is among
    the optimized designs."""

    wc = study.targets.crossover_rad_s
    if not isinstance(wc, (int, float)):
        return []
    out: list[Structure] = []
    labels = {s.label for s in structures}
    for hd in hand:
        c = hd.compensator
        if any(locate(s, c.zeros, c.poles, float(wc), check_bounds=False) is not None
               for s in structures + out):
            continue
        order = max(len(c.zeros), len(c.poles))
        targets = replace(study.targets, integrators=study.plant.n_integrators + c.n_integrators)
        search = replace(study.search, max_order=order)
        for s in candidate_structures(study.plant, targets, search):
            if s.order == order and s.label not in labels and locate(
                s, c.zeros, c.poles, float(wc), check_bounds=False
            ) is not None:
                out.append(s)
                labels.add(s.label)
                break
    return out


def _near_misses(records: list[Any]) -> list[tuple[Any, str]]:
    """When no trial is feasible: the lowest-Ms trial whose only broken constraint is
    the Ms limit, to be refined for Ms (it may cross below the limit), else none."""
    near = [
        r
        for r in records
        if r.params
        and r.constraints.get("limit:sensitivity_peak", 0.0) > 0.0
        and all(v <= 0.0 for k, v in r.constraints.items() if k != "limit:sensitivity_peak")
        and r.metrics.get("sensitivity_peak") is not None
    ]
    if not near:
        return []
    best = min(near, key=lambda r: (r.metrics["sensitivity_peak"], r.number))
    return [(best, "sensitivity_peak")]


def _refined(
    problem: Any,
    s: Structure,
    si: int,
    picks: list[tuple[Any, str]],
    hand: list[Any],
    progress: Any = None,
) -> list[tuple[Any, str]]:
    """Locally refined versions (explorer.search.refine) of the picks, and of every hand
    design that fits this structure, each as (record, name). A refined design is kept
    only when it is feasible and better in its criterion than where it started.
    ``progress(iteration, max_iter)`` is passed on to the refinement."""

    starts: list[Start] = []
    names: list[str] = []
    base: list[float | None] = []
    numbers: list[int] = []
    for r, crit in picks:
        if r.params and crit in CRITERIA:
            starts.append(Start(params=dict(r.params), criterion=crit))
            names.append(f"{s.label} #{r.number} refined")
            base.append(r.metrics.get(crit))
            numbers.append(r.number)
    if not problem.searched_wc and not problem.searched_pm:
        for hd in hand:
            p = locate(s, hd.compensator.zeros, hd.compensator.poles, problem.wc_rad_s,
                       check_bounds=False)
            if p is not None:
                starts.append(Start(params=p, criterion="sensitivity_peak"))
                names.append(f"{s.label} refined from {hd.name}")
                base.append(None)
                numbers.append(-1)
    if not starts:
        return []
    # Minimising Ms makes the Ms limit redundant from a start that meets it, and lets a
    # start that breaks only that limit (a near miss, a hand design) cross below it;
    # the re-evaluation below applies every limit again.
    ms_only = replace(problem, limits={k: v for k, v in problem.limits.items()
                                       if k != "sensitivity_peak"})
    got: list[dict[str, float] | None] = [None] * len(starts)
    for prob, want_ms in ((ms_only, True), (problem, False)):
        sel = [i for i, st in enumerate(starts) if (st.criterion == "sensitivity_peak") == want_ms]
        if sel:
            got_sel = refine(prob, s, [starts[i] for i in sel], progress=progress)
            for i, p in zip(sel, got_sel, strict=True):
                got[i] = p
    keep = [(i, p) for i, p in enumerate(got) if p is not None]
    if not keep:
        return []
    wc = np.array(
        [p.pop("wc_rad_s") if problem.searched_wc else problem.wc_rad_s for _, p in keep], float
    )
    pm = (
        np.array([p.pop("pm_deg") for _, p in keep], float) if problem.searched_pm else None
    )
    arr = {k: np.array([p[k] for _, p in keep], float) for k in s.params}
    res = evaluate_batch(problem, s, arr, wc, pm)
    out = []
    for j, (i, p) in enumerate(keep):
        rec = row_design(res, j)
        if not res["feasible"][j] or rec["reason"] is not None or rec["gain"] is None:
            continue
        crit = starts[i].criterion
        v, b = rec["metrics"].get(crit), base[i]
        if b is not None and (v is None or CRITERIA[crit] * (v - b) >= 0.0):
            continue  # no better than the trial it started from
        out.append(
            (
                TrialRecord(
                    structure=si,
                    number=numbers[i],
                    state="REFINED",
                    feasible=True,
                    gain=rec["gain"],
                    zeros=tuple(root_from_json(z) for z in rec["zeros"]),
                    poles=tuple(root_from_json(q) for q in rec["poles"]),
                    metrics=rec["metrics"],
                    constraints={},
                    reason=None,
                    params=p,
                ),
                names[i],
            )
        )
    return out


#: How each constraint reads in a "why not" line, in the order a trial's first broken
#: one is taken as its reason (every trial counted once, so the counts add up).
_REASONS = {
    "phase_balance_deg": "phase margin out of reach at the crossover",
    "closed_loop_unstable": "closed loop unstable",
    "crossover_missed": "crossover not where targeted",
    "phase_margin_short_deg": "smallest phase margin below target (another crossover)",
    "practical:max_pole_ratio": "a compensator pole beyond search.max_pole_ratio × ωc",
}


def _why_not(
    s: Structure, records: list[Any], pm_deg: float, required: frozenset[str] = frozenset()
) -> str:
    """Why a structure has no design meeting targets and limits: every trial counted
    once under its first broken constraint (or its failed evaluation), largest count
    first, so the counts add up to the trials."""
    if not records:
        return "no finished trials"
    bal = [r for r in records if r.constraints.get("phase_balance_deg", 0.0) > 0]
    if len(bal) == len(records):
        best = min(r.constraints["phase_balance_deg"] for r in bal)
        return (
            f"cannot reach the phase margin {pm_deg:.1f} deg at the crossover: "
            f"best shortfall {best:.1f} deg"
        )
    counts: dict[str, int] = {}
    for r in records:
        broken = [k for k, v in r.constraints.items() if v > 0]
        first = sorted(broken, key=lambda k: (k not in _REASONS, list(_REASONS).index(k)
                                              if k in _REASONS else 0))
        if r.reason:
            key = "failed evaluation"
        elif first:
            key = first[0]
        else:
            key = "feasible, not kept after the re-check"
        counts[key] = counts.get(key, 0) + 1
    parts = []
    for key, n in sorted(counts.items(), key=lambda kv: -kv[1]):
        label = _REASONS.get(key, key.replace("limit:", "breaks the limit "))
        if key.removeprefix("limit:") in required:
            label = f"misses the required {key.removeprefix('limit:')}"
        extra = ""
        if key == "phase_balance_deg":
            extra = f" (best shortfall {min(r.constraints[key] for r in bal):.1f} deg)"
        elif key.startswith("limit:"):
            m = key.removeprefix("limit:")
            vals = [r.metrics.get(m) for r in records
                    if r.constraints.get(key, 0) > 0 and r.metrics.get(m) is not None]
            if vals:
                best = max(vals) if LIMIT_KEYS.get(m) == "lower" else min(vals)
                extra = f" (best {m} reached {best:.3g})"
        parts.append(f"{n} {label}{extra}")
    return f"{len(records)} trials: " + "; ".join(parts)


def _hand_designs(study: Study) -> list[Any]:
    """The hand designs (explorer.design.hand_designs) with a compensator, for a fixed crossover
    and phase-margin target; none otherwise."""
    t = study.targets
    if not isinstance(t.crossover_rad_s, (int, float)) or t.phase_margin_deg is None:
        return []
    try:
        hp, _ = hand_plant(study.plant, study.measured, float(t.crossover_rad_s))
        hds = hand_designs(hp, t, cancel_lightly_damped=study.search.cancel_lightly_damped)
    except Exception:  # the hand baselines are references; the exploration stands without them
        return []
    return [hd for hd in hds if hd.compensator is not None]


def _hand_records(study: Study, hds: list[Any]) -> list[DesignRecord]:
    out = []
    for hd in hds:
        if hd.compensator is None:
            continue
        try:
            out.append(evaluated_record(study, hd.compensator, name=hd.name,
                                        origin=hd.origin, structure=hd.structure))
        except Exception:  # a reference design that cannot be evaluated is left out
            continue
    return out


def explore(
    study_or_path: Study | str | Path,
    out_dir: str | Path,
    *,
    trials: int | None = None,
    seed: int | None = None,
    storage: str | None = None,
    batch: int = 32,
    progress: Callable[[str], None] | None = None,
) -> ExploreResult:
    """Run (or resume) the exploration of a study and write the result files.

    ``progress`` receives one message per step (None or False: silent); if it has a
    ``close()``, that is called at the end of each stage."""

    study = (check_study(study_or_path) if isinstance(study_or_path, Study)
             else load_checked_study(study_or_path))
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise LoopscoutError(f"--out {str(out)!r} is not a folder")
    n_trials = study.search.trials if trials is None else int(trials)
    if n_trials < 1:
        raise LoopscoutError(f"--trials must be at least 1, got {n_trials}")
    if batch < 1:
        raise LoopscoutError(f"--batch must be at least 1, got {batch}")
    seed = study.search.seed if seed is None else seed
    problem = make_problem(study)
    structures = candidate_structures(study.plant, study.targets, study.search)
    if not structures:
        raise LoopscoutError(
            f"{study.source}: no compensator structure fits `search.max_order` "
            f"{study.search.max_order} with {study.targets.integrators} integrator(s)"
        )
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise LoopscoutError(f"--out {str(out)!r} cannot be created: {exc.strerror}") from None
    show = progress or None
    with tune.quiet_optuna():
        store = tune.open_storage(storage, out)
        studies = tune.create_studies(store, structures, problem, seed, batch)
        tune.run_structures(problem, structures, studies, trials=n_trials, batch=batch,
                            progress=show)
        _end_stage(show)
        records = tune.load_records(studies, n_trials)
    hand = _hand_designs(study)
    polish = _hand_structures(study, structures, hand)
    designs: list[DesignRecord] = []
    why: dict[str, str] = {}
    for si, s in enumerate(structures + polish):
        tick = None
        if show:
            stage = f"refining structure {si + 1}/{len(structures) + len(polish)} {s.label}"
            show(stage)

            def tick(it: int, n: int, stage: str = stage) -> None:
                show(f"{stage}: {it}/{n} iterations")
        recs = [r for r in records if r.structure == si]
        kept = 0
        picks = _pick(recs, problem.searched_wc)
        named = {id(r): f"{s.label} #{r.number}" for r, _ in picks}
        try:
            refined = _refined(problem, s, si, picks or _near_misses(recs), hand, tick)
        except Exception as exc:  # the refinement adds designs; the trials stand without it
            refined = []
            why.setdefault(s.label, f"refinement failed: {type(exc).__name__}")
        named.update({id(r): n for r, n in refined})
        pool = [r for r, _ in picks] + [r for r, _ in refined]
        for r, _ in _pick(pool, problem.searched_wc):
            comp = Rational(gain=r.gain, zeros=r.zeros, poles=r.poles)
            try:
                rec = evaluated_record(
                    study, comp, name=named[id(r)], origin="optimized", structure=s.label,
                    extra={
                        "trial": r.number if r.number >= 0 else None,
                        "refined": r.state == "REFINED",
                    },
                )
            except Exception as exc:  # never report a design that could not be re-checked
                why.setdefault(
                    s.label, f"re-check of {named[id(r)]} failed: {type(exc).__name__}"
                )
                continue
            designs.append(rec)
            kept += bool(rec["meets_targets"])
        if not kept and si < len(structures):
            why[s.label] = _why_not(s, recs, problem.pm_deg, _required_keys(study))
    _end_stage(show)
    designs += _hand_records(study, hand)
    designs += given_designs(study)
    designs = drop_near_duplicates(designs)
    answer, answer_lines = recommend(
        designs, max_pole_ratio=study.search.max_pole_ratio, searched_wc=problem.searched_wc
    )
    designs = [d.with_changes(extras={"practical_misses": practical_misses(
        d, study.search.max_pole_ratio)}) for d in designs]
    # a sampled controller is ranked on its sampled loop (designs.csv shows those figures)
    frame = rank_designs([{**d, "metrics": judged_metrics(d["metrics"], d.get("sampled_metrics"))}
                          for d in designs])
    pareto = dict(zip(frame["name"], frame["pareto"], strict=True)) if len(frame) else {}
    doms = dict(zip(frame["name"], frame["dominates_hand"], strict=True)) if len(frame) else {}
    designs = [d.with_changes(
        pareto=bool(pareto.get(d.name, False)),
        extras={"dominates": list(doms.get(d.name, []))} if d.origin == "optimized" else None,
    ) for d in designs]
    order = {n: i for i, n in enumerate(frame["name"])} if len(frame) else {}
    designs.sort(key=lambda d: (d["name"] != answer["design"], order.get(d["name"], 10**6)))
    summary = _summary(study, structures, designs, why, n_trials, answer_lines)
    obj = {
        "answer": answer,
        "designs": designs,
        "study": study_header(study),
        "summary": summary,
        "caution": CAUTION,
    }
    _write(out, study, obj, frame)
    return ExploreResult(designs=designs, frame=frame, summary=summary, obj=obj, out_dir=out)


def _summary(
    study: Study,
    structures: list[Structure],
    designs: list[DesignRecord],
    why: dict[str, str],
    n_trials: int,
    answer_lines: list[str],
) -> list[str]:
    lines = list(answer_lines)
    ok = [d for d in designs if d["meets_targets"]]
    if not answer_lines:
        lines.append(
            "answer: no explored structure meets the targets and limits "
            f"(up to order {study.search.max_order}); {_relax_hint(study, structures, why)} "
            "(the reasons per structure follow)"
        )
    if study.search.sample_time_s is not None:  # the sampled controller (sampled_search)

        lines.append(sampling_line(study))
    if study.variation is None and answer_lines:
        # a model is one operating point: say so where the answer is read
        lines.append("the answer holds for the nominal plant; a [variation] section checks "
                     "it over ranges of gain, delay and time constants (docs/study-file.md)")
    lines.append(f"explored {len(structures)} structures x {n_trials} trials")
    mp = study.measured
    if mp is not None:  # a measured plant: where the figures come from
        lo, hi = mp.data.band_rad_s
        lines.append(
            f"measured plant {mp.shown} (band {lo:.4g} to {hi:.4g} rad/s): frequency "
            "figures read on the data; "
            + ("time figures from the fitted model (relative RMS error "
               f"{100 * mp.fit.rel_rms:.2g} %)" if mp.fit.time_from_fit else
               "time figures withheld (the fitted model is poor)"))
    for label, reason in why.items():
        lines.append(f"{label}: {reason}")
    for d in ok:
        if d.get("dominates"):
            lines.append(f"{d['name']} dominates the hand design(s): {', '.join(d['dominates'])}")
    return lines


def _required_keys(study: Study) -> frozenset[str]:
    """Search bounds that come from a step-response requirement (not a tighter limit)."""
    return frozenset(k for k, v in study.targets.requirements.items()
                     if v <= study.limits.get(k, math.inf))


def _relax_hint(study: Study, structures: list[Structure], why: dict[str, str]) -> str:
    """What to change when nothing meets: only the changes the reasons point at — a
    higher search.max_order only when it adds structures (and which), a lower
    crossover or phase margin for phase out of reach or instability, the limit that
    was broken, search.max_pole_ratio when that practical limit stopped designs."""
    text = " ".join(why.values())
    hints = []
    if study.search.max_order < MAX_SEARCH_ORDER:
        more = candidate_structures(
            study.plant, study.targets, replace(study.search, max_order=MAX_SEARCH_ORDER)
        )
        have = {s.label for s in structures}
        new = [s for s in more if s.label not in have]
        if new:
            first = min(new, key=lambda s: s.order)
            hints.append(f"raise search.max_order to {first.order} (adds {first.label}"
                         f"{' and others' if len(new) > 1 else ''})")
    if "phase margin" in text or "unstable" in text or "crossover" in text:
        hints.append("lower the crossover or the phase margin")
    broken = sorted({k for k in study.limits if f"limit {k}" in text})
    if any(f"required {k}" in text for k in study.targets.requirements):
        hints.append("ease the overshoot or settling requirement")
    if broken:
        hints.append("loosen " + ", ".join(f"limits.{k}" for k in broken))
    if "max_pole_ratio" in text:
        hints.append(f"raise search.max_pole_ratio (now {study.search.max_pole_ratio:g})")
    return "try: " + "; or ".join(hints) if hints else "no single change is indicated"


def _write(out: Path, study: Study, obj: dict[str, Any], frame: Any) -> None:
    text = json_text(obj)
    (out / "designs.json").write_text(text + "\n", encoding="utf-8")
    csv = frame.copy()
    if len(csv):
        csv["dominates_hand"] = [";".join(x) for x in csv["dominates_hand"]]
    csv.to_csv(out / "designs.csv", index=False)
    write_report(study, obj["designs"], out / "report.html", answer=obj["answer"],
                 summary=obj["summary"])


def _end_stage(progress: Callable[[str], None] | None) -> None:
    close = getattr(progress, "close", None)
    if callable(close):
        close()
