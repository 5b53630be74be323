"""Local refinement of chosen designs: a batched compass search with pattern moves.

The Optuna search samples; the best designs it finds usually sit a little inside the
active limit (an Ms ceiling, the crossover range). From each start point this module
minimises one criterion in the structure's parameter space (the sampled location
parameters, plus log ωc and the phase margin when those are searched) while every
constraint of :func:`explorer.search.tune.evaluate_batch` holds — an infeasible point is
never accepted ("extreme barrier"). Directions ±e_i (and ±e_i ± e_j when there are at
most three parameters), plus a pattern move along the last successful step (Hooke &
Jeeves, "Direct search solution of numerical and statistical problems", J. ACM 8(2),
1961); the step halves when no direction improves (compass search: Kolda, Lewis &
Torczon, "Optimization by direct search", SIAM Review 45(3), 2003, §3). Every start of
one structure is evaluated in one batch per iteration; each iteration also polls a
turning orthonormal basis so that a design pressed against a curved limit can slide
along it (the step doubles after a success, halves after a failure). Deterministic: the same starts
give the same result, so workers sharing an exploration rank the same designs.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import minimize

from explorer.core.loop import Rational
from explorer.core.metric_registry import PHASE_MARGIN_TOL_DEG
from explorer.design.structures import Structure
from explorer.model.study import LIMIT_KEYS
from explorer.search.tune import TIME_KEYS, Problem, evaluate_batch

__all__ = ["CRITERIA", "Start", "coordinates", "evaluate_points", "iae_load_floor", "refine"]

#: Criteria the refinement can optimise: +1 minimise, −1 maximise.
CRITERIA = {
    "sensitivity_peak": +1.0,
    "hf_gain": +1.0,
    "integral_gain": -1.0,
    "crossover_rad_s": -1.0,
    "iae_load": +1.0,
}
#: Initial and final step, as fractions of each parameter's range.
STEP0 = 1.0 / 8.0
MIN_STEP = 1.0 / 2048.0
#: Final step for a criterion that needs a step response per point (iae_load): each
#: poll costs a delayed-loop simulation, and on the bundled kiln study the last two
#: halvings bought < 0.2 % of IAE for 5× the time (docs/performance.md).
TIME_MIN_STEP = 1.0 / 512.0
MAX_ITER = 80
#: Skip a candidate's step responses when its iae_load floor (iae_load_floor) shows it
#: cannot beat the current point; the margin covers the IAE's numerical error.
PRUNE_BY_IE = True
_FLOOR_MARGIN = 1e-4  # the IAE test bound of docs/time-response.md (accuracy table)


@dataclass(frozen=True, kw_only=True)
class Start:
    """A start point (parameter name → value, wc_rad_s in rad/s, pm_deg in deg) and the
    criterion to optimise from it (a key of ``CRITERIA``)."""

    params: dict[str, float]
    criterion: str


def coordinates(problem: Problem, s: Structure) -> list[tuple[str, float, float, bool]]:
    """(name, low, high, log) of every refined coordinate."""
    out = [(k, lo, hi, False) for k, (lo, hi) in s.params.items()]
    if problem.searched_wc:
        lo, hi = problem.wc_range_rad_s  # type: ignore[misc]
        out.append(("wc_rad_s", float(np.log10(lo)), float(np.log10(hi)), True))
    if problem.searched_pm:
        lo, hi = problem.pm_range_deg  # type: ignore[misc]
        out.append(("pm_deg", float(lo), float(hi), False))
    return out


def _to_x(coords, params: dict[str, float]) -> np.ndarray:
    return np.array(
        [np.log10(params[k]) if log else params[k] for k, _, _, log in coords], float
    )


def _to_params(coords, x: np.ndarray) -> dict[str, np.ndarray]:
    return {k: (10.0 ** x[:, i] if log else x[:, i]) for i, (k, _, _, log) in enumerate(coords)}


def evaluate_points(
    problem: Problem, s: Structure, coords, x: np.ndarray, *, time_domain: bool
) -> dict[str, Any]:
    """``evaluate_batch`` at coordinate rows ``x`` (n, d)."""
    p = _to_params(coords, x)
    n = x.shape[0]
    wc = p.pop("wc_rad_s") if problem.searched_wc else np.full(n, float(problem.wc_rad_s))  # type: ignore[arg-type]
    pm = p.pop("pm_deg") if problem.searched_pm else None
    return evaluate_batch(problem, s, p, wc, pm, time_domain=time_domain)


def _evaluate_lazily(
    problem: Problem,
    s: Structure,
    coords,
    x: np.ndarray,
    crit: list[str],
    f_now: np.ndarray,
    td: bool,
) -> dict[str, Any]:
    """``evaluate_points`` with the step responses only where they can matter: a row
    minimising ``iae_load`` needs them for its score; under a time-domain limit, a row
    needs them only when its frequency-domain score beats ``f_now`` (the others cannot
    be accepted anyway), and a row minimising ``iae_load`` only when its floor
    (:func:`iae_load_floor`) lies below ``f_now``. The rows skipped could not have been
    accepted; the rest may differ from a full evaluation at rounding level, since the
    designs of one batch share a time grid."""
    res = evaluate_points(problem, s, coords, x, time_domain=False)
    if not td:
        return res
    f_freq = _scores(res, [c if c != "iae_load" else "sensitivity_peak" for c in crit])
    feasible_freq = np.isfinite(f_freq)
    needs_iae = np.array([c == "iae_load" for c in crit]) & feasible_freq
    if PRUNE_BY_IE:
        # ∫|y| ≥ |∫y| = 1/|k_i|: a row whose floor is not below f_now cannot be accepted
        floor = iae_load_floor(problem.plant, res["metrics"]["integral_gain"])
        needs_iae &= ~(floor > f_now * (1.0 + _FLOOR_MARGIN))
    need = needs_iae | (bool(problem.time_limits) & (_scores(res, crit) < f_now))
    idx = np.flatnonzero(need)
    if idx.size:
        full = evaluate_points(problem, s, coords, x[idx], time_domain=True)
        res["feasible"][idx] = full["feasible"]
        for j, i in enumerate(idx):
            res["fail"][i] = full["fail"][j]
        for k, v in full["metrics"].items():
            res["metrics"][k][idx] = v
    return res


#: Central-difference step of the polish, as a fraction of each coordinate's range.
_FD_STEP = 1e-6
#: Margin kept inside each smooth constraint by the polish (relative to its scale).
_POLISH_MARGIN = 1e-9


def _smooth_constraints(problem: Problem, res: dict[str, Any]) -> np.ndarray:
    """Signed, smooth forms (≥ 0 where they hold) of the constraints that bind at a
    refined optimum: the smallest phase margin against its target, and every
    frequency-domain ``[limits]`` bound, each relative to its scale. The others
    (phase balance, stability, the crossover, the practical pole ratio) are checked by
    feasibility, not followed."""
    m = res["metrics"]
    cols = [m["phase_margin_deg"] - (problem.pm_deg - PHASE_MARGIN_TOL_DEG)]
    for key, bound in problem.limits.items():
        if key in TIME_KEYS or key not in m:
            continue
        v = m.get("worst_" + key, m[key])
        scale = max(abs(bound), 1e-9)
        if LIMIT_KEYS[key] == "upper":
            cols.append(np.where(np.isnan(v), -1.0, (bound - v) / scale))
        else:
            cols.append(np.where(np.isnan(v), 1.0, (v - bound) / scale))
    g = np.stack(cols, axis=1)
    return np.where(np.isnan(g), -1.0, g) - _POLISH_MARGIN


def _polish(
    problem: Problem,
    s: Structure,
    coords,
    x0: np.ndarray,
    f0: float,
    crit: str,
    lo: np.ndarray,
    hi: np.ndarray,
    span: np.ndarray,
) -> tuple[np.ndarray, float]:
    """Converge a compass-search result onto its active constraints: SLSQP (Kraft,
    "A software package for sequential quadratic programming", DFVLR-FB 88-28, 1988;
    scipy.optimize.minimize) on the criterion with the smooth constraints of
    :func:`_smooth_constraints`, every value and central-difference gradient from one
    batch of 2d + 1 points. The compass search stops within its mesh of a curved
    limit; this reaches the limit itself. The result is kept only when it is
    feasible (every constraint of evaluate_batch) and better; else the best feasible
    point on the segment from ``x0`` towards it, or ``x0``."""
    d = x0.size
    h = _FD_STEP * span
    cache: dict[bytes, tuple[float, np.ndarray, np.ndarray, np.ndarray]] = {}
    scale = max(abs(f0), 1e-12)

    def point(x: np.ndarray) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
        key = x.tobytes()
        if key not in cache:
            pts = np.concatenate([x[None], x + np.diag(h), x - np.diag(h)], axis=0)
            res = evaluate_points(problem, s, coords, pts, time_domain=False)
            fv = CRITERIA[crit] * np.asarray(res["metrics"][crit], float) / scale
            gv = _smooth_constraints(problem, res)
            grad_f = (fv[1 : d + 1] - fv[d + 1 :]) / (2.0 * h)
            grad_g = ((gv[1 : d + 1] - gv[d + 1 :]) / (2.0 * h)[:, None]).T
            cache[key] = (float(fv[0]), grad_f, gv[0], grad_g)
        return cache[key]

    def ok(v: np.ndarray) -> np.ndarray:
        return np.where(np.isfinite(v), v, -1.0)

    try:
        with np.errstate(all="ignore"):
            opt = minimize(
                lambda x: point(x)[0] if np.isfinite(point(x)[0]) else 1e6,
                x0,
                jac=lambda x: np.nan_to_num(point(x)[1]),
                bounds=list(zip(lo, hi, strict=True)),
                constraints=[{"type": "ineq", "fun": lambda x: ok(point(x)[2]),
                              "jac": lambda x: np.nan_to_num(point(x)[3])}],
                method="SLSQP",
                options={"maxiter": 60, "ftol": 1e-12},
            )
        x1 = np.clip(np.asarray(opt.x, float), lo, hi)
    except (ValueError, np.linalg.LinAlgError):  # a polish that cannot run keeps x0
        return x0, f0
    # the candidates: the SLSQP point and points on the way to it, in one batch
    t = np.linspace(1.0, 0.0, 17)[:-1]
    pts = x0[None] + t[:, None] * (x1 - x0)[None]
    res = evaluate_points(problem, s, coords, pts, time_domain=False)
    fc = _scores(res, [crit] * len(t))
    j = int(np.argmin(fc))
    if fc[j] < f0:
        return pts[j], float(fc[j])
    return x0, f0


def iae_load_floor(plant: Rational, integral_gain: np.ndarray) -> np.ndarray:
    """Lower bound of ``iae_load`` per row: 1/|k_i| (0 where none is known).

    For a unit load step at the plant input, Y = P e^{-sτ} / (s (1 + L)); with a
    stable closed loop the final-value theorem gives the integrated error
    IE = ∫y dt = lim_{s→0} P/(1 + C P) = 1/k_i whenever C has one integrator with
    k_i = lim s·C(s) and P(0) ≠ 0 (finite or infinite), so |C P| → ∞ at s = 0 — the
    relation IE = 1/k_i of Åström & Hägglund, *Advanced PID Control* (ISA, 2006), §4
    (section from memory; the derivation above is the check). IAE = ∫|y| dt ≥ |IE|.
    A plant zero at the origin breaks the premise: the floor is then 0."""
    ki = np.abs(np.asarray(integral_gain, float))
    if any(z == 0 for z in plant.zeros):
        return np.zeros_like(ki)
    with np.errstate(divide="ignore"):
        return np.where(np.isfinite(ki) & (ki > 0.0), 1.0 / ki, 0.0)


def _scores(res: dict[str, Any], crit: list[str]) -> np.ndarray:
    """Signed criterion per row (lower is better); +inf where not acceptable."""
    f = np.array(
        [CRITERIA[c] * float(res["metrics"][c][i]) for i, c in enumerate(crit)], float
    )
    ok = res["feasible"] & np.array([r is None for r in res["fail"]]) & np.isfinite(f)
    return np.where(ok, f, np.inf)


def _halton(k: int, d: int) -> np.ndarray:
    """Point k ≥ 1 of the d-dimensional Halton sequence (radical inverses in the first
    d primes)."""
    primes = [2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41, 43, 47, 53][:d]
    out = np.zeros(d)
    for j, b in enumerate(primes):
        f, n, x = 1.0, k, 0.0
        while n > 0:
            f /= b
            x += f * (n % b)
            n //= b
        out[j] = x
    return out


def _rotated(k: int, d: int) -> np.ndarray:
    """±columns of the Householder matrix I − 2vvᵀ/vᵀv of the k-th Halton direction:
    a deterministic orthonormal basis that turns from one iteration to the next, so
    the polled directions become dense (OrthoMADS: Abramson, Audet, Dennis & Le
    Digabel, SIAM J. Optim. 20(2), 2009)."""
    if d < 2:
        return np.zeros((0, d))
    v = 2.0 * _halton(k, d) - 1.0
    nv = float(v @ v)
    if nv == 0.0:
        return np.zeros((0, d))
    h = np.eye(d) - 2.0 * np.outer(v, v) / nv
    return np.concatenate([h, -h], axis=0)


def _directions(d: int) -> np.ndarray:
    dirs = [v for i in range(d) for v in (np.eye(d)[i], -np.eye(d)[i])]
    if d <= 3:
        for i, j in itertools.combinations(range(d), 2):
            for a, b in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                v = np.zeros(d)
                v[i], v[j] = a, b
                dirs.append(v)
    return np.array(dirs, float).reshape(-1, d)


def refine(
    problem: Problem,
    s: Structure,
    starts: list[Start],
    *,
    step0: float = STEP0,
    min_step: float = MIN_STEP,
    max_iter: int = MAX_ITER,
    progress: Callable[[int, int], None] | None = None,
    polish: bool = True,
) -> list[dict[str, float] | None]:
    """Refined parameters per start (the start itself when nothing better is found),
    or None for a start that is not feasible. Time-domain metrics are computed only
    when a study limit needs them (``problem.time_limits``); the caller re-evaluates
    the result fully. ``progress(iteration, max_iter)`` is called before each
    iteration. ``polish``: finish a frequency-domain criterion on its active
    constraints (:func:`_polish`)."""
    coords = coordinates(problem, s)
    d = len(coords)
    if not starts:
        return []
    td = problem.time_limits or any(st.criterion == "iae_load" for st in starts)
    x = np.array([_to_x(coords, st.params) for st in starts], float).reshape(len(starts), d)
    crit = [st.criterion for st in starts]
    f = _scores(evaluate_points(problem, s, coords, x, time_domain=td), crit)
    if d == 0:
        return [
            dict(st.params) if np.isfinite(fi) else None
            for st, fi in zip(starts, f, strict=True)
        ]
    lo = np.array([c[1] for c in coords])
    hi = np.array([c[2] for c in coords])
    lo_k = np.minimum(lo[None, :], x)  # a start outside the bounds (a hand design) widens them
    hi_k = np.maximum(hi[None, :], x)
    span = np.where(hi_k > lo_k, hi_k - lo_k, 1.0)
    fixed = _directions(d)
    step = np.where(np.isfinite(f), step0, 0.0)
    stop = np.array([max(min_step, TIME_MIN_STEP) if c == "iae_load" else min_step for c in crit])
    last = np.zeros_like(x)
    for it in range(max_iter):
        act = np.flatnonzero(step >= stop)
        if act.size == 0:
            break
        if progress is not None:
            progress(it + 1, max_iter)
        dirs = np.concatenate([fixed, _rotated(it + 1, d)], axis=0)
        cand = x[act, None, :] + step[act, None, None] * span[act, None, :] * dirs[None]
        cand = np.concatenate([cand, (x[act] + 2.0 * last[act])[:, None, :]], axis=1)
        cand = np.clip(cand, lo_k[act, None, :], hi_k[act, None, :])
        m = cand.shape[1]
        flat = cand.reshape(-1, d)
        rows_crit = [crit[k] for k in act for _ in range(m)]
        res = _evaluate_lazily(problem, s, coords, flat, rows_crit, np.repeat(f[act], m), td)
        fc = _scores(res, rows_crit).reshape(act.size, m)
        best = np.argmin(fc, axis=1)
        fb = fc[np.arange(act.size), best]
        better = fb < f[act] - 1e-10 * np.maximum(1.0, np.abs(f[act]))
        for j, k in enumerate(act):
            if better[j]:
                new = cand[j, best[j]]
                last[k] = new - x[k]  # a pattern move doubles the last step
                x[k], f[k] = new, fb[j]
                step[k] = min(2.0 * step[k], step0)  # success: coarser mesh (MADS)
            else:
                last[k] = 0.0
                step[k] *= 0.5
    if polish and not td:
        for i in range(len(starts)):
            if np.isfinite(f[i]):
                x[i], f[i] = _polish(problem, s, coords, x[i], f[i], crit[i],
                                     lo_k[i], hi_k[i], span[i])
    out: list[dict[str, float] | None] = []
    for i in range(len(starts)):
        if not np.isfinite(f[i]):
            out.append(None)
            continue
        p = _to_params(coords, x[i : i + 1])
        out.append({name: float(v[0]) for name, v in p.items()})
    return out
