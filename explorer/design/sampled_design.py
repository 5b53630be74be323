"""The exploration on the sampled loop (``[search] sample_time``; docs/explore.md,
"Sampled controller").

Method (ours, written down):

1. **Balance with the sampling's phase cost.** Each candidate is balanced on the
   continuous loop with an extra delay T/2 + τc: the zero-order hold behaves like a
   delay of half a period at low frequency (the classical approximation, common
   practice; Åström & Wittenmark, *Computer-Controlled Systems*, 3rd ed. 1997, §7.2 —
   from memory for the section), and the computation delay is a delay.
2. **Correct on the exact sampled loop.** The batch is discretized (Tustin with
   prewarping at each design's balanced crossover, as ``loopscout implement`` does)
   and its sampled loop evaluated exactly (explorer.frequency.sampled_batch). The balancing
   targets are then corrected by what the sampled loop missed — the phase margin by
   the difference in degrees, the crossover by the ratio — and the batch re-balanced,
   up to ``CORRECTIONS`` times (a fixed-point iteration: the approximation error
   changes little between passes, so each pass removes most of what is left).
3. **Constrain and rank on the exact sampled figures.** Stability, crossover, phase
   margin, Ms, Mt, margins and the step-response figures (explorer.time_domain.sampled_step: the
   sampled loop simulated exactly, between samples too) replace the continuous ones;
   the compensator's own figures (hf gain, integral gain, noise gain) stay those of
   C(s).

The re-check of every reported design (:func:`sampled_record`) uses the one-design
evaluator explorer.frequency.sampled.sampled_loop_metrics, independent of the batch code.
"""

from __future__ import annotations

import math
from dataclasses import replace
from functools import lru_cache
from typing import Any

import numpy as np

from explorer.core.loop import Rational
from explorer.design.structures import balance
from explorer.frequency.sampled import (
    WC_T_WARN_RAD,
    DiscreteCompensator,
    SampledPlant,
    cont_loop_with,
    discretize,
    sample_plant,
    sampled_loop_metrics,
)
from explorer.frequency.sampled_batch import (
    FREQ_KEYS,
    DiscreteBatch,
    discretize_batch,
    sampled_metrics_batch,
)
from explorer.time_domain.sampled_step import MAX_SAMPLES, STEP_KEYS, sampled_step_metrics
from explorer.time_domain.timeresp import step_metrics, step_metrics_batch

__all__ = ["CORRECTIONS", "design_plant", "sampled_plant", "sampled_balance",
           "sampled_readings", "sampled_record", "SAMPLED_KEYS", "judged_metrics",
           "sampling_line"]

#: Most correction passes of the balancing targets (step 2).
CORRECTIONS = 4
#: The passes stop when every row's phase margin is within this of its target (deg) …
_PM_TOL_DEG = 0.005
#: … and its crossover within this relative error.
_WC_REL_TOL = 1e-6
#: The sampled figures a DESIGN record's ``sampled_metrics`` carries.
SAMPLED_KEYS = (*FREQ_KEYS, *STEP_KEYS)


def design_plant(plant: Rational, sample_time_s: float, compute_delay_s: float) -> Rational:
    """The plant the candidates are balanced on: its delay plus T/2 + τc."""
    return replace(plant, delay_s=plant.delay_s + sample_time_s / 2.0 + compute_delay_s)


@lru_cache(maxsize=16)
def sampled_plant(plant: Rational, sample_time_s: float, compute_delay_s: float) -> SampledPlant:
    """explorer.frequency.sampled.sample_plant, kept for the next batch of the same study."""
    return sample_plant(plant, sample_time_s, compute_delay_s)


def _nearest(xs: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Per row, the crossover (columns of xs, NaN-padded) nearest the target in ratio."""
    with np.errstate(invalid="ignore", divide="ignore"):
        dist = np.abs(np.log(xs / target[:, None]))
    dist = np.where(np.isfinite(dist), dist, np.inf)
    j = np.argmin(dist, axis=1)
    got = xs[np.arange(xs.shape[0]), j]
    return np.where(np.isfinite(dist[np.arange(xs.shape[0]), j]), got, np.nan)


def sampled_balance(problem: Any, s: Any, params: dict[str, np.ndarray],
                    wc_rad_s: np.ndarray, pm_deg: np.ndarray) -> tuple[Any, dict[str, Any]]:
    """Steps 1 and 2: the balanced batch (explorer.design.structures.Balanced) whose sampled
    loops have their crossover at ``wc_rad_s`` and phase margin ``pm_deg`` (as near as
    the passes get), and the state the readings need (``sm``, ``dc``, ``prewarp``)."""

    T = float(problem.sample_time_s)
    tc = float(problem.compute_delay_s)
    pa = design_plant(problem.plant, T, tc)
    sp = sampled_plant(problem.plant, T, tc)
    wc_b = np.asarray(wc_rad_s, float).copy()
    pm_b = np.asarray(pm_deg, float).copy()
    for it in range(CORRECTIONS + 1):
        b = balance(pa, s, params, wc_b, pm_b)
        idx = np.flatnonzero(b.shortfall_deg == 0.0)
        dc = discretize_batch(b.gain[idx], b.zeros[idx], b.poles[idx], T, wc_b[idx])
        if it == CORRECTIONS or idx.size == 0:
            break
        # a correction pass needs the crossovers and phase margins only
        sm = sampled_metrics_batch(sp, dc, b.gain[idx], b.zeros[idx], b.poles[idx], full=False)
        wx = _nearest(sm["crossovers_rad_s"], wc_rad_s[idx])
        pm_err = pm_deg[idx] - sm["phase_margin_deg"]
        ratio = wc_rad_s[idx] / wx
        good = np.isfinite(pm_err) & np.isfinite(ratio)
        if not np.any(good & ((np.abs(pm_err) > _PM_TOL_DEG)
                              | (np.abs(ratio - 1.0) > _WC_REL_TOL))):
            break
        rows = idx[good]
        pm_b[rows] += np.clip(pm_err[good], -30.0, 30.0)
        wc_b[rows] *= np.clip(ratio[good], 0.5, 2.0)
    sm = sampled_metrics_batch(sp, dc, b.gain[idx], b.zeros[idx], b.poles[idx])
    return b, {"sm": sm, "dc": dc, "prewarp": wc_b, "idx": idx, "sp": sp,
               "gain": b.gain, "zeros": b.zeros, "poles": b.poles}


def _final_values(plant: Rational, g: np.ndarray, z: np.ndarray, p: np.ndarray) -> np.ndarray:
    """The closed-loop DC gain L(0)/(1 + L(0)) per row, 1 for an integrating loop (the
    hold and Tustin keep the DC gain, so the sampled loop's is the continuous one's)."""
    n_int = plant.n_integrators + np.sum(p == 0, axis=1) - np.sum(z == 0, axis=1)
    pz = np.array([r for r in plant.zeros if r != 0], complex)
    pp = np.array([r for r in plant.poles if r != 0], complex)
    kp = plant.gain * np.real(np.prod(-pz) / np.prod(-pp))
    zc = np.where(z == 0, -1.0, z)
    pc = np.where(p == 0, -1.0, p)
    kc = g * np.real(np.prod(-zc, axis=1) / np.prod(-pc, axis=1))
    l0 = kp * kc
    with np.errstate(divide="ignore", invalid="ignore"):
        fv = np.where(n_int > 0, 1.0, np.where(n_int < 0, 0.0, l0 / (1.0 + l0)))
    return fv


def _horizon(wc: np.ndarray, T: float) -> np.ndarray:
    """A first horizon: ten periods of the crossover, at least 40 samples (it doubles
    while a response has not settled)."""
    return np.maximum(20.0 * math.pi / np.where(np.isfinite(wc) & (wc > 0), wc, 1.0 / T),
                      40.0 * T)


def sampled_readings(problem: Any, state: dict[str, Any], fm: dict[str, Any],
                     hidden: np.ndarray, time_domain: bool
                     ) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Step 3 for the rows ``state["idx"]`` (those evaluated): ``fm`` with the sampled
    frequency readings in place of the continuous ones, and the sampled step figures
    (empty without ``time_domain``). ``hidden``: rows with a hidden unstable mode."""
    sm, dc = state["sm"], state["dc"]
    out = dict(fm)
    for k in FREQ_KEYS:
        out[k] = sm[k]
    out["closed_loop_stable"] = np.asarray(sm["closed_loop_stable"], bool) & ~hidden
    if not time_domain:
        return out, {}
    stable = out["closed_loop_stable"]
    tm = {k: np.full(dc.n, np.nan) for k in STEP_KEYS}
    rows = np.flatnonzero(stable)
    if rows.size:
        idx = state["idx"]
        b_g, b_z, b_p = state["gain"][idx], state["zeros"][idx], state["poles"][idx]
        sub = DiscreteBatch(gain=dc.gain[rows], zeros=dc.zeros[rows], poles=dc.poles[rows],
                            sample_time_s=dc.sample_time_s, valid=dc.valid[rows])
        fv = _final_values(problem.plant, b_g[rows], b_z[rows], b_p[rows])
        st = sampled_step_metrics(problem.plant, sub, float(problem.compute_delay_s), fv,
                                  _horizon(sm["crossover_rad_s"][rows], dc.sample_time_s),
                                  per_sample=4)
        cap = np.asarray(st["capped"], bool)
        if cap.any():  # T very short against the loop: the continuous loop with T/2 + τc

            pa = design_plant(problem.plant, dc.sample_time_s, float(problem.compute_delay_s))
            cm = step_metrics_batch(pa, b_g[rows][cap], b_z[rows][cap], b_p[rows][cap],
                                    stable=np.ones(int(cap.sum()), bool))
            for k in STEP_KEYS:
                st[k][cap] = np.asarray(cm[k], float)
        for k in STEP_KEYS:
            tm[k][rows] = st[k]
    return out, tm


# -- one design: the re-check of a reported design -----------------------------------------
def sampled_record(study: Any, comp: Rational, metrics: dict[str, Any]) -> dict[str, Any]:
    """The sampled loop of one design of a study with ``[search] sample_time``:
    ``extra`` (the DESIGN keys ``sample_time_s``, ``compute_delay_s``,
    ``sampled_prewarp_rad_s``, ``sampled_metrics``) and ``judged`` (``metrics`` with the
    sampled figures in place, what meets_targets reads). Tustin with prewarping at the
    continuous crossover (plain Tustin when there is none, as ``loopscout implement``);
    a crossover at or above π/T cannot be sampled: the design is judged unstable."""
    T = float(study.search.sample_time_s)
    tc = float(study.search.compute_delay_s)
    sp = sampled_plant(study.plant, T, tc)
    wc = metrics.get("crossover_rad_s")
    sm: dict[str, Any] = {k: None for k in SAMPLED_KEYS}
    sm["closed_loop_stable"] = False
    sm["crossovers_rad_s"] = []
    note = None
    prewarp = None
    dcomp: DiscreteCompensator | None = None
    try:
        if wc is not None and wc >= math.pi / T:
            note = (f"crossover {wc:.4g} rad/s at or above the Nyquist frequency "
                    f"π/T = {math.pi / T:.4g} rad/s: the sample time is too long")
        else:
            method = "tustin" if wc is None else "tustin-prewarp"
            prewarp = None if wc is None else float(wc)
            dcomp = discretize(comp, T, method, prewarp)
            full = sampled_loop_metrics(sp, dcomp, cont_loop_with(study.plant, comp, tc))
            for k in FREQ_KEYS:
                sm[k] = full.get(k)
            sm["closed_loop_stable"] = bool(full["closed_loop_stable"]) and not metrics.get(
                "hidden_unstable_mode")
            sm["lower_gain_margin_db"] = full.get("lower_gain_margin_db")
    except Exception as exc:  # noqa: BLE001 — a design that cannot be sampled is reported so
        note = f"the sampled loop could not be evaluated: {type(exc).__name__}: {exc}"
    if dcomp is not None and sm["closed_loop_stable"]:
        dcb = DiscreteBatch(gain=np.array([dcomp.gain]), zeros=np.array([dcomp.zeros], complex),
                            poles=np.array([dcomp.poles], complex), sample_time_s=T,
                            valid=np.array([True]))
        fv = _final_values(study.plant, np.array([comp.gain]),
                           np.array([comp.zeros], complex).reshape(1, -1),
                           np.array([comp.poles], complex).reshape(1, -1))
        ts = metrics.get("settling_time_s")
        h = max(float(_horizon(np.array([sm["crossover_rad_s"] or np.nan]), T)[0]),
                2.0 * ts if ts else 0.0)
        st = sampled_step_metrics(study.plant, dcb, tc, fv, np.array([h]), per_sample=8)
        if st["capped"][0]:
            cm = step_metrics(design_plant(study.plant, T, tc), comp, stable=True)
            st = {k: np.array([np.nan if cm.get(k) is None else cm[k]]) for k in STEP_KEYS}
            note = (f"step figures from the continuous loop with the delay T/2 + τc: the "
                    f"response needs more than {MAX_SAMPLES} sample periods")
        for k in STEP_KEYS:
            v = float(st[k][0])
            sm[k] = v if math.isfinite(v) else None
    sm = {k: _plain(v) for k, v in sm.items()}
    extra: dict[str, Any] = {"sample_time_s": T, "compute_delay_s": tc,
                             "sampled_prewarp_rad_s": prewarp, "sampled_metrics": sm}
    if note:
        extra["sampled_note"] = note
    return {"extra": extra, "judged": judged_metrics(metrics, sm)}


def sampling_line(study: Any) -> str:
    """The summary line of a sampled study: T, τc, ωc·T at the target crossover (the
    fastest end of a range) and the phase the hold and delay cost there, with a warning
    when ωc·T exceeds explorer.frequency.sampled.WC_T_WARN_RAD (common practice)."""

    T = float(study.search.sample_time_s)
    tc = float(study.search.compute_delay_s)
    head = f"sampled controller: T = {T:g} s" + (f", computation delay {tc:g} s" if tc else "")
    wc = study.targets.crossover_rad_s
    if isinstance(wc, tuple):
        wc = wc[1]
    if not isinstance(wc, (int, float)):
        return head + "; every design judged on its sampled loop"
    wt = float(wc) * T
    cost = math.degrees(float(wc) * (T / 2.0 + tc))
    line = (f"{head}; ωc·T = {wt:.3g} rad at the target crossover, about {cost:.2g}° of "
            "phase to the hold and delay (ωc·(T/2 + τc)), which the search balances for")
    if wt > WC_T_WARN_RAD:
        line += (f" — T is long for this crossover (ωc·T > {WC_T_WARN_RAD:g} rad, common "
                 "practice): shorten it or lower the crossover")
    return line


def judged_metrics(metrics: dict[str, Any], sampled: dict[str, Any] | None) -> dict[str, Any]:
    """``metrics`` with the sampled figures in place (when a design has them)."""
    if not sampled:
        return metrics
    out = dict(metrics)
    for k in SAMPLED_KEYS:
        if k in sampled:
            out[k] = sampled[k]
    return out


def _plain(v: Any) -> Any:
    if isinstance(v, (list, tuple, np.ndarray)):
        return [float(x) for x in v]
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, float, np.floating)):
        return float(v) if math.isfinite(float(v)) else None
    return v
