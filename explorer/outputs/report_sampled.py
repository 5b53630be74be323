"""The report's sampled-loop data: continuous against sampled loop on the gain-phase
chart, and the sampled loop's step response between samples (docs/report.md,
"Sampled controller"). Frames only — explorer.outputs.report draws them (the only Altair
importer).

A design is sampled as ``loopscout implement`` and the sampled search do it: Tustin
with prewarping at the design's continuous crossover (plain Tustin without one), a
zero-order hold, the plant with its delay and the computation delay
(explorer.frequency.sampled); the step responses come from
explorer.time_domain.sampled_step (exact at and between the samples).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from explorer.core.loop import Rational
from explorer.frequency.sampled import DiscreteCompensator, discretize, sample_plant
from explorer.frequency.sampled_batch import DiscreteBatch
from explorer.outputs.report_page import compensator_root
from explorer.time_domain.sampled_step import simulate_sampled

__all__ = ["sample_time_of", "sampled_loop_frame", "sampled_step_frames", "N_SAMPLED_FREQ"]

#: Points of each sampled frequency response (log-spaced up to π/T).
N_SAMPLED_FREQ = 400


def sample_time_of(study: Any, designs: Sequence[Mapping[str, Any]]) -> tuple[float, float] | None:
    """(T, τc) of the report: the study's ``[search] sample_time`` and
    ``compute_delay``, else the ``sample_time_s`` the designs were explored with; None
    for a continuous study."""
    s = getattr(study, "search", None)
    if s is not None and getattr(s, "sample_time_s", None) is not None:
        return float(s.sample_time_s), float(getattr(s, "compute_delay_s", 0.0))
    for d in designs:
        if d.get("sample_time_s") is not None:
            return float(d["sample_time_s"]), float(d.get("compute_delay_s") or 0.0)
    return None


def _comp(d: Mapping[str, Any]) -> Rational:
    c = d["compensator"]
    return Rational(gain=float(c["gain"]),
                    zeros=tuple(compensator_root(z) for z in c.get("zeros", [])),
                    poles=tuple(compensator_root(p) for p in c.get("poles", [])))


def _discrete(d: Mapping[str, Any], T: float) -> DiscreteCompensator | None:
    """C(z) of a design (None when it cannot be sampled at T: improper, or its
    crossover at or above π/T)."""
    comp = _comp(d)
    wc = d.get("sampled_prewarp_rad_s") or d["metrics"].get("crossover_rad_s")
    try:
        if wc is None:
            return discretize(comp, T, "tustin")
        if wc >= math.pi / T:
            return None
        return discretize(comp, T, "tustin-prewarp", float(wc))
    except Exception:  # noqa: BLE001 — a design that cannot be sampled is left out
        return None


def sampled_loop_frame(study: Any, designs: Sequence[Mapping[str, Any]], T: float,
                       tc: float) -> pd.DataFrame:
    """Long frame: name, loop ("continuous" C(s)·P(s) / "sampled" C(z)·H(z) with the
    hold and the computation delay), omega_rad_s, mag_db, phase_deg (continuous phase;
    the sampled one on the continuous loop's branch at low frequency, as
    explorer.frequency.sampled.sampled_loop_metrics reads it). ω from two decades below the
    lowest crossover up to π/T."""
    sp = sample_plant(study.plant, T, tc)
    wn = math.pi / T
    parts = []
    for d in designs:
        dc = _discrete(d, T)
        if dc is None:
            continue
        comp = _comp(d)
        wc = d["metrics"].get("crossover_rad_s") or wn / 10.0
        lo = min(wc, wn) / 100.0
        w = lo * np.exp(np.log(wn * (1 - 1e-6) / lo) * np.linspace(0.0, 1.0, N_SAMPLED_FREQ))
        cont = study.plant * comp
        lc = cont.freqresp(w)
        ls = dc.freqresp(w) * sp.freqresp(w)
        ph_c = cont.phase_rad(w)
        raw = np.unwrap(np.angle(ls))
        anchor = float(ph_c[0]) + float(np.angle(ls[0] / lc[0]))
        ph_s = raw + 2.0 * math.pi * round((anchor - raw[0]) / (2.0 * math.pi))
        with np.errstate(divide="ignore"):
            for loop, lv, ph in (("continuous", lc, ph_c), ("sampled", ls, ph_s)):
                parts.append(pd.DataFrame({
                    "name": str(d["name"]), "loop": loop, "omega_rad_s": w,
                    "mag_db": 20 * np.log10(np.abs(lv)), "phase_deg": np.degrees(ph),
                }))
    cols = ["name", "loop", "omega_rad_s", "mag_db", "phase_deg"]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)


def sampled_step_frames(study: Any, designs: Sequence[Mapping[str, Any]], T: float, tc: float,
                        *, per_sample: int = 8) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(y frame: name, t_s, y — the plant output of the unit reference step between
    samples too; u frame: name, t_s, u — the controller output u[k], held from t_k) of
    the designs whose sampled loop is stable. The horizon: 1.25× the latest sampled
    settling time of the designs (their ``sampled_metrics``, else the continuous
    settling), at least 20 periods."""
    ok = [d for d in designs if (d.get("sampled_metrics") or {}).get(
        "closed_loop_stable", d["metrics"].get("closed_loop_stable"))]
    ts = []
    for d in ok:
        v = (d.get("sampled_metrics") or {}).get("settling_time_s") or \
            d["metrics"].get("settling_time_s")
        if v is not None and math.isfinite(v):
            ts.append(float(v))
    horizon = max(1.25 * max(ts) if ts else 0.0, 20.0 * T)
    ys, us = [], []
    for d in ok:
        dcomp = _discrete(d, T)
        if dcomp is None:
            continue
        dcb = DiscreteBatch(gain=np.array([dcomp.gain]),
                            zeros=np.array([dcomp.zeros], complex).reshape(1, -1),
                            poles=np.array([dcomp.poles], complex).reshape(1, -1),
                            sample_time_s=T, valid=np.array([True]))
        sim = simulate_sampled(study.plant, dcb, tc, horizon, per_sample=per_sample)
        ys.append(pd.DataFrame({"name": str(d["name"]), "t_s": sim.t_s, "y": sim.y[0]}))
        # the staircase: each u[k] held until t_{k+1} (the last one to the horizon)
        us.append(pd.DataFrame({"name": str(d["name"]),
                                "t_s": np.append(sim.t_samples_s, sim.t_s[-1]),
                                "u": np.append(sim.u[0], sim.u[0, -1])}))
    yf = pd.concat(ys, ignore_index=True) if ys else pd.DataFrame(columns=["name", "t_s", "y"])
    uf = pd.concat(us, ignore_index=True) if us else pd.DataFrame(columns=["name", "t_s", "u"])
    return yf, uf
