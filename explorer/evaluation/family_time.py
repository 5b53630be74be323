"""Worst step-response figures of one design over the box of a plant family
(``[variation]``): an adaptive refinement with a stated tolerance (docs/metrics.md,
"Worst case over a plant family", "Step figures over the box").

There is no geometry for a step response over a box, so the worst overshoot, settling
time and load IAE are *estimated* by refining a lattice of members:

* The box's active axes (gain factor g and delay τ linear, time scale σ in ln σ) are
  mapped to [0, 1] and cut on a dyadic lattice of 2^``TIME_DEPTH`` steps per axis.
  The refinement starts from the corners, the centre and the edge midpoints (the
  3^D lattice points of the box), i.e. 2^D cells.
* Every lattice point is simulated by :func:`explorer.time_domain.timeresp.step_metrics_batch`:
  the points sharing a delay and a time scale are one batch, the gain factor folded
  into the compensator gain (g·C·P is the same loop; the load response
  g·P/(1 + g·C·P) is g times that of P under g·C, so its IAE is scaled by g).
* Per cell and figure, a local Lipschitz constant per axis is estimated from the
  secants along the cell's edges and its parent's, times ``TIME_SAFETY``; the cell's
  estimate of its largest value is the maximum of the Lipschitz envelope
  min over corners (f(c) + Σ_k L_k·|x_k − c_k|) over the cell.
* A cell whose estimate exceeds the largest value found so far by more than the
  tolerance (overshoot 0.2 percentage points, settling time 1 %, IAE 1 %: the
  requirement tolerances of explorer.evaluation.records) is split in two along the axis of the
  largest L_k·width_k, until no cell does, or the cells reach 1/2^``TIME_DEPTH`` of
  each range, or ``MAX_TIME_POINTS`` members have been simulated.

What this guarantees: every value reported is reached by a member (it is a maximum of
simulated members, never an extrapolation), so it is never above the true worst by
more than the simulation's error; it is not a proven upper bound — a feature narrower
than a cell that no secant sees can be missed. :class:`TimeWorst` says whether the
refinement converged, how many members it took, and what is left (cells still above
the tolerance, their largest estimated excess). Settling time jumps where a ripple of
the response touches the band edge: the secants across a jump do not shrink when a
cell is halved, so such cells are split down to the finest width and left there,
counted as unresolved; the largest value found (the upper side of the jump) is
reported.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from explorer.core.loop import Rational
from explorer.core.metric_registry import OVERSHOOT_TOL_PCT, SETTLING_REL_TOL
from explorer.model.family_members import factor_ranges, scaled_plant
from explorer.model.study import Variation
from explorer.time_domain.timeresp import step_metrics_batch

__all__ = ["TIME_KEYS", "TIME_TOLERANCES", "TimeWorst", "box_time_worst"]

#: The figures refined, in this order.
TIME_KEYS = ("overshoot_pct", "settling_time_s", "iae_load")
#: Tolerance per figure: (absolute, relative to the worst found).
TIME_TOLERANCES: dict[str, tuple[float, float]] = {
    "overshoot_pct": (OVERSHOOT_TOL_PCT, 0.0),
    "settling_time_s": (0.0, SETTLING_REL_TOL),
    "iae_load": (0.0, 0.01),
}
#: Factor on the secant estimates of the local Lipschitz constants.
TIME_SAFETY = 2.0
#: Finest cell: 1/2^TIME_DEPTH of each range.
TIME_DEPTH = 8
#: Most members simulated per design (the box lattice; nominal and listed members apart).
MAX_TIME_POINTS = 160
#: A cell's secant along an axis that keeps at least this share of its parent's (a
#: smooth figure's halves) for ``JUMP_LEVELS`` halvings in a row marks a jump.
JUMP_RATIO = 0.75
JUMP_LEVELS = 2
#: Sub-grid points per axis on which a cell's Lipschitz envelope is maximised.
_SUB = 5
_R = 2 ** TIME_DEPTH


@dataclass(frozen=True, kw_only=True)
class TimeWorst:
    """The refined worst step figures of one design (None = null somewhere)."""

    values: dict[str, float | None]
    #: where each worst was found: gain factor, delay (s), time scale
    at: dict[str, tuple[float, float, float] | None]
    points: int
    converged: bool
    cap_hit: bool
    #: per figure: cells left above the tolerance, and the largest estimated excess of
    #: such a cell over the reported worst (0 when none)
    unresolved: dict[str, int] = field(default_factory=dict)
    #: per figure: cells left because they straddle a jump (module doc)
    jumps: dict[str, int] = field(default_factory=dict)
    excess: dict[str, float] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {
            "method": "adaptive refinement of the box (Lipschitz estimate per cell, "
                      f"safety ×{TIME_SAFETY:g}); an estimate, not a proven bound",
            "members_simulated": self.points,
            "tolerance": {"overshoot_pct": TIME_TOLERANCES["overshoot_pct"][0],
                          "settling_time_rel": TIME_TOLERANCES["settling_time_s"][1],
                          "iae_load_rel": TIME_TOLERANCES["iae_load"][1]},
            "finest_cell": 1.0 / _R,
            "converged": self.converged,
            "cap_hit": self.cap_hit,
            "unresolved_cells": dict(self.unresolved),
            "jump_cells": dict(self.jumps),
            "largest_excess": dict(self.excess),
            "worst_at": {k: None if a is None else
                         {"gain_factor": a[0], "delay_s": a[1], "time_scale": a[2]}
                         for k, a in self.at.items()},
        }


def _tol(key: str, worst: float) -> float:
    a, r = TIME_TOLERANCES[key]
    return max(a, r * abs(worst), 1e-12)


def box_time_worst(plant: Rational, v: Variation, comp: Rational,
                   extra: list[dict[str, Any]] | None = None) -> TimeWorst:
    """Worst overshoot, settling time and load IAE over the box of ``v`` for ``comp``
    (module doc). The family must be closed-loop stable (every member is simulated as
    stable). ``extra``: step figures of members evaluated elsewhere (nominal, listed
    members): they count in the worst (a larger value found there only ends the
    refinement sooner)."""

    rng = list(factor_ranges(plant, v))
    axes = [a for a in range(3) if rng[a][0] < rng[a][1]]
    dim = len(axes)
    nk = len(TIME_KEYS)
    cz = np.array(comp.zeros, dtype=complex).reshape(1, -1)
    cp = np.array(comp.poles, dtype=complex).reshape(1, -1)
    cache: dict[tuple[int, ...], np.ndarray] = {}
    where: dict[tuple[int, ...], tuple[float, float, float]] = {}

    def member(pt: tuple[int, ...]) -> tuple[float, float, float]:
        x = [rng[0][0], rng[1][0], rng[2][0]]
        for a, i in zip(axes, pt, strict=True):
            f = i / _R
            lo, hi = rng[a]
            x[a] = lo + (hi - lo) * f if a < 2 else lo * (hi / lo) ** f
            if i == _R:
                x[a] = hi
        return x[0], x[1], x[2]

    def simulate(points: list[tuple[int, ...]]) -> None:
        groups: dict[tuple[float, float], list[tuple[tuple[int, ...], float]]] = {}
        for pt in points:
            g, tau, sg = member(pt)
            where[pt] = (g, tau, sg)
            groups.setdefault((tau, sg), []).append((pt, g))
        for (tau, sg), items in groups.items():
            n = len(items)
            gf = np.array([g for _, g in items])
            res = step_metrics_batch(scaled_plant(plant, 1.0, tau, sg), comp.gain * gf,
                                     np.repeat(cz, n, axis=0), np.repeat(cp, n, axis=0),
                                     stable=np.ones(n, bool))
            vals = np.stack([res["overshoot_pct"], res["settling_time_s"],
                             res["iae_load"] * gf], axis=1)
            for j, (pt, _) in enumerate(items):
                cache[pt] = vals[j]

    # extra members: their values count in the worst
    ext = np.full((0, nk), np.nan)
    if extra:
        ext = np.array([[np.nan if e.get(k) is None else float(e[k]) for k in TIME_KEYS]
                        for e in extra], float).reshape(-1, nk)

    bits = np.array(list(itertools.product((0, 1), repeat=dim)), int).reshape(-1, dim)
    # pairs of corners along each axis: (k, index with bit 0, index with bit 1)
    pairs = [(k, i, int(np.flatnonzero((bits == np.where(np.arange(dim) == k, 1, b))
                                       .all(axis=1))[0]))
             for k in range(dim) for i, b in enumerate(bits) if b[k] == 0]
    sub = np.array(list(itertools.product(np.linspace(0.0, 1.0, _SUB), repeat=dim)))
    sub = sub.reshape(-1, dim)

    half = _R // 2
    simulate(list(itertools.product((0, half, _R), repeat=dim)))
    lo = np.array([b * half for b in bits], int).reshape(-1, dim)
    hi = lo + half

    def corner_values(lo, hi):
        pts = lo[:, None, :] + bits[None, :, :] * (hi - lo)[:, None, :]
        return np.array([[cache[tuple(int(c) for c in p)] for p in cell] for cell in pts])

    def secants(f, w):
        s = np.zeros((f.shape[0], dim, nk))
        for k, i0, i1 in pairs:
            s[:, k, :] = np.maximum(s[:, k, :], np.abs(f[:, i1, :] - f[:, i0, :])
                                    / w[:, k, None])
        return s

    def estimate(f, w, slope):
        """Max over each cell of its Lipschitz envelope (cells, keys)."""
        lw = slope * w[:, :, None]  # (cells, dim, keys)
        d = np.abs(sub[:, None, :] - bits[None, :, :])  # (sub, corners, dim)
        env = f[:, None, :, :] + np.einsum("scd,ndk->nsck", d, lw)
        top = env.min(axis=2).max(axis=1)
        return top + lw.sum(axis=1) / (2.0 * (_SUB - 1))

    def worst_now() -> np.ndarray:
        vals = np.array(list(cache.values()))
        allv = np.vstack([vals, ext])
        return np.where(np.isnan(allv).any(axis=0), np.nan,
                        np.max(np.where(np.isnan(allv), -np.inf, allv), axis=0))

    # the whole box as the first cells' parent: the secants of the 3^D lattice
    f0 = corner_values(lo, hi)
    w0 = (hi - lo) / _R
    par = np.broadcast_to(secants(f0, w0).max(axis=0), (lo.shape[0], dim, nk)).copy()
    pdelta = par * (2.0 * w0)[:, :, None]  # the parent's differences (cells, dim, keys)
    runs = np.zeros((lo.shape[0], dim, nk), int)  # halvings in a row that kept a jump
    last = np.full(lo.shape[0], -1)  # the axis the cell was cut from its parent along
    cap_hit = False
    left_u: list[np.ndarray] = []  # estimates of the cells left above the tolerance
    left_jump: list[np.ndarray] = []  # and whether they straddle a jump, per key
    while lo.shape[0]:
        fstar = worst_now()
        tol = np.array([_tol(k, x) if np.isfinite(x) else np.inf
                        for k, x in zip(TIME_KEYS, fstar, strict=True)])
        live = np.isfinite(fstar)
        f = corner_values(lo, hi)
        w = (hi - lo) / _R
        own = secants(f, w)
        delta = own * w[:, :, None]
        # a jump: along the axis just halved the difference did not shrink
        cut = np.arange(dim)[None, :] == last[:, None]
        kept = (delta >= JUMP_RATIO * pdelta) & (delta > 5.0 * tol) & cut[:, :, None]
        runs = np.where(cut[:, :, None], np.where(kept, runs + 1, 0), runs)
        jump = runs >= JUMP_LEVELS  # (cells, dim, keys)
        slope = TIME_SAFETY * np.maximum(own, par)
        slope = np.where(np.isnan(slope), 0.0, slope)
        f_ok = np.where(np.isnan(f), 0.0, f)
        u = estimate(f_ok, w, slope)
        # across a jump no Lipschitz envelope: the largest corner plus the other axes'
        # slopes (each side of a jump taken as continuous)
        crude = f_ok.max(axis=1) + np.where(jump, 0.0, slope * w[:, :, None]).sum(axis=1) / 2
        has_jump: np.ndarray = np.asarray(jump.any(axis=1))
        u = np.where(has_jump, crude, u)
        need = (u > fstar + tol) & live  # (cells, keys)
        todo = np.flatnonzero(need.any(axis=1))
        if todo.size == 0:
            break
        # an axis is cut for the figures that need it and do not jump along it
        use = need[:, None, :] & ~jump  # (cells, dim, keys)
        score = np.einsum("ndk,ndk->nd", slope * w[:, :, None],
                          np.where(use, 1.0 / tol, 0.0))
        free = use.any(axis=2) & ((hi - lo) >= 2)
        score = np.where(free, score, -1.0)
        axis = score.argmax(axis=1)
        final: np.ndarray = np.asarray(score[np.arange(lo.shape[0]), axis] < 0)
        for i in todo[final[todo]]:
            left_u.append(u[i])
            left_jump.append(has_jump[i])
        todo = todo[~final[todo]]
        # the cells most above the tolerance first, within the cap
        with np.errstate(invalid="ignore"):
            excess = np.where(need, (u - fstar - tol) / tol, -np.inf)[todo].max(axis=1)
        todo = todo[np.argsort(-excess, kind="stable")]
        n_lo, n_hi, n_par, n_pd, n_runs, n_last = [], [], [], [], [], []
        new: set[tuple[int, ...]] = set()
        for i in todo:
            k = axis[i]
            mid = (lo[i, k] + hi[i, k]) // 2
            a_hi = hi[i].copy()
            a_hi[k] = mid
            b_lo = lo[i].copy()
            b_lo[k] = mid
            pts = {tuple(int(c) for c in b_lo + bb * (hi[i] - b_lo)) for bb in bits}
            fresh = {p for p in pts if p not in cache} - new
            if len(cache) + len(new) + len(fresh) > MAX_TIME_POINTS:
                cap_hit = True
                left_u.append(u[i])
                left_jump.append(has_jump[i])
                continue
            new |= fresh
            n_lo += [lo[i], b_lo]
            n_hi += [a_hi, hi[i]]
            n_par += [own[i], own[i]]
            n_pd += [delta[i], delta[i]]
            n_runs += [runs[i], runs[i]]
            n_last += [k, k]
        if new:
            simulate(sorted(new))
        lo = np.array(n_lo, int).reshape(-1, dim)
        hi = np.array(n_hi, int).reshape(-1, dim)
        par = np.array(n_par).reshape(-1, dim, nk)
        pdelta = np.array(n_pd).reshape(-1, dim, nk)
        runs = np.array(n_runs, int).reshape(-1, dim, nk)
        last = np.array(n_last, int)

    fstar = worst_now()
    values: dict[str, float | None] = {}
    at: dict[str, tuple[float, float, float] | None] = {}
    unresolved: dict[str, int] = {}
    jumps: dict[str, int] = {}
    excess_out: dict[str, float] = {}
    lu = np.array(left_u).reshape(-1, nk)
    lj = np.array(left_jump, bool).reshape(-1, nk)
    for j, k in enumerate(TIME_KEYS):
        x = float(fstar[j])
        if not math.isfinite(x):
            values[k], at[k] = None, None
            unresolved[k], jumps[k], excess_out[k] = 0, 0, 0.0
            continue
        values[k] = x
        best = max(cache, key=lambda p: cache[p][j])
        at[k] = where[best] if cache[best][j] >= x else None
        over = lu[:, j] - x - _tol(k, x) > 0
        unresolved[k] = int(np.sum(over & ~lj[:, j]))
        jumps[k] = int(np.sum(over & lj[:, j]))
        excess_out[k] = float(max(0.0, np.max(lu[over, j] - x))) if over.any() else 0.0
    converged = not cap_hit and not any(unresolved.values()) and not any(jumps.values())
    return TimeWorst(values=values, at=at, points=len(cache), converged=converged,
                     cap_hit=cap_hit, unresolved=unresolved, jumps=jumps, excess=excess_out)
