"""Worst case of a design over a plant family (``[variation]``, docs/metrics.md
"Worst case over a plant family").

The family is every plant g·P(σ·s)·e^(−sτ) with g ∈ [g_lo, g_hi], τ ∈ [τ_lo, τ_hi],
σ ∈ [σ_lo, σ_hi] (P the nominal rational part), plus listed members.

**Exact geometry for gain × delay.** At one frequency the loop values
g·e^(−jωτ)·L_σ(jω) of the gain × delay box fill an annular sector: radii
|L_σ|·[g_lo, g_hi], angles arg L_σ − ω·[τ_lo, τ_hi] (L_σ with no delay). Its distance
to −1 is closed-form (:func:`sector_distance`): radial when the angular span covers
the direction of −1 (always when the span is ≥ 2π), else the distance to the nearer
edge segment (the arcs' nearest points are their ends, which lie on the segments).
max |S| over the box at ω is 1/that distance; max |T| = max 1/|1 + 1/L| is the same
with the inverse sector (radii 1/r, angles negated).

**Time scale: a bound.** d ln P(jσω)/d ln σ = Σ_z jσω/(jσω − z) − Σ_p jσω/(jσω − p);
each term has modulus ≤ |r|/|Re r| = 1/ζ_r (the largest of ω/|jω − r| over ω), and
exactly 1 for a root at the origin. So over a cell |ln σ − ln σ_m| ≤ h,
|ln L_σ − ln L_σm| ≤ δ = h·Σ 1/ζ_r at every ω: the cell lies inside the sector of σ_m
widened by the factor e^(±δ) in radius and ±δ in angle. The σ range is cut into
cells until δ ≤ ``TIME_SCALE_TOL`` (at most ``MAX_CELLS`` cells; the δ reached is
reported), so the value reported is an upper bound of the worst over the cell, and
at most a factor e^(2δ) above it where the peak is radial.

**Frequencies.** Each (design, cell) row is evaluated on the metrics grid of its
loop at the largest delay (docs/metrics.md: it resolves the delay's phase rotation),
then the smallest local minima of the distance are refined by golden-section search
in ln ω between their grid neighbours.

**Stability.** A family whose nominal member is closed-loop stable stays stable
while no member puts −1 on its Nyquist curve: the closed-loop poles move
continuously with (g, τ, σ) over the connected box, and cross into the right half
plane only through the imaginary axis, i.e. where 1 + L(jω) = 0 for some member and
ω — where −1 lies in the sector of that ω (zero exclusion: Barmish, *New Tools for
Robustness of Linear Systems*, Macmillan 1994, ch. 7). The open-loop right-half-plane
poles and the integrators are the same for every member (g > 0, σ > 0), so the
Nyquist count does not change otherwise. Here: the family is stable when every
sampled member (nominal, corners, listed) is stable by the Nyquist engine and the
refined minimum distance from −1 to the sectors is positive (above ``MIN_DISTANCE``).

**Margins.** Worst phase margin: min over ω where some gain of the box makes a
crossover (r_lo ≤ 1 ≤ r_hi) of π + the smallest angle of the sector (wrapped into
(−π, π]); worst delay margin: that margin (≥ 0) over ω; worst gain margin: min over ω
where the sector's angles cover −180° and r_hi < 1 of −20·log10 r_hi. Evaluated on
the grid and at the edges of those frequency sets (crossovers of the extreme
members, refined by bisection), combined with the exact margins of the sampled
members. Time-domain worst values have no such geometry: over the box they are
estimated by an adaptive refinement to a stated tolerance (explorer.evaluation.family_time),
combined with the nominal plant, the listed members and the worst-Ms member
(:func:`worst_of_design`); the search uses the cheaper finite set
:func:`search_time_members`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from explorer.core.loop import LoopBatch, Rational
from explorer.evaluation.family_time import box_time_worst
from explorer.frequency.metrics import (
    design_grid,
    frequency_metrics,
    frequency_metrics_batch,
    lower_per_row,
)
from explorer.model.family_members import (
    Member,
    factor_ranges,
    has_box,
    sampled_members,
    scaled_plant,
)
from explorer.model.study import Variation
from explorer.time_domain.timeresp import step_metrics

__all__ = [
    "sector_distance",
    "box_worst_batch",
    "family_worst_batch",
    "WORST_KEYS",
    "TIME_SCALE_TOL",
]

#: Largest log-deviation δ of a first, coarse time-scale cell (radius factor e^δ,
#: angle δ rad); cells are then split where it matters (TIME_SCALE_DIST_TOL).
TIME_SCALE_TOL = 0.05
MAX_CELLS = 24
#: Below this distance from −1 to a sector the family counts as touching −1.
MIN_DISTANCE = 1e-9
_GOLDEN_ITERS = 40
_BISECT_ITERS = 50
_CANDIDATES = 3

WORST_KEYS = (
    "sensitivity_peak",
    "complementary_peak",
    "phase_margin_deg",
    "gain_margin_db",
    "delay_margin_s",
    "closed_loop_stable",
    "overshoot_pct",
    "settling_time_s",
    "iae_load",
)


def sector_distance(theta_lo: np.ndarray, span: np.ndarray, r_lo: np.ndarray,
                    r_hi: np.ndarray) -> np.ndarray:
    """Distance from −1 to {r·e^(jθ): r_lo ≤ r ≤ r_hi, θ_lo ≤ θ ≤ θ_lo + span}
    (span ≥ 0, radii ≥ 0, broadcast). Closed form, see the module doc."""
    theta_lo, span, r_lo, r_hi = np.broadcast_arrays(
        np.asarray(theta_lo, float), np.asarray(span, float), np.asarray(r_lo, float),
        np.asarray(r_hi, float))
    inside = (span >= 2.0 * np.pi) | (np.mod(np.pi - theta_lo, 2.0 * np.pi) <= span)
    with np.errstate(invalid="ignore"):
        radial = np.maximum(np.maximum(r_lo - 1.0, 1.0 - r_hi), 0.0)
        best = np.full(theta_lo.shape, np.inf)
        for th in (theta_lo, theta_lo + span):
            c = np.cos(th)
            t = np.clip(-c, r_lo, r_hi)
            d2 = 1.0 + 2.0 * t * c + t * t
            best = np.minimum(best, np.sqrt(np.maximum(d2, 0.0)))
    return np.where(inside, radial, best)


def _wrap(a: np.ndarray) -> np.ndarray:
    """Into (−π, π]."""
    return np.pi - np.mod(np.pi - a, 2.0 * np.pi)


@dataclass(frozen=True)
class _Box:
    g: tuple[float, float]
    d: tuple[float, float]
    sig_centres: np.ndarray  # the first, coarse cells of the time-scale range
    half_width: float  # h of those cells in ln σ
    b: float  # Σ 1/ζ_r over the plant's roots: δ = h·b


def _box(plant: Rational, v: Variation) -> _Box:
    g, d, s = factor_ranges(plant, v)
    if s[0] == s[1]:
        return _Box(g, d, np.array([s[0]]), 0.0, 0.0)
    b = 0.0
    for r in (*plant.zeros, *plant.poles):
        b += 1.0 if r == 0 else abs(r) / abs(r.real)
    width = math.log(s[1] / s[0])
    n = max(1, min(MAX_CELLS, math.ceil(width * b / (2.0 * TIME_SCALE_TOL))))
    h = width / (2 * n)
    centres = np.exp(math.log(s[0]) + h * (2 * np.arange(n) + 1))
    return _Box(g, d, centres, h, b)


class _Rows:
    """Rows (design, time-scale cell): the loop at the cell's centre σ with the largest
    delay, and the sector bounds at any ω widened by the cell's δ."""

    def __init__(self, plant: Rational, box: _Box, cg, cz, cp, design: np.ndarray,
                 sig: np.ndarray, delta: np.ndarray) -> None:
        self.box = box
        self.design = design
        self.sig = sig
        self.delta = delta
        nz, npl = len(plant.zeros), len(plant.poles)
        pz = np.array(plant.zeros, dtype=complex)[None, :] / sig[:, None]
        pp = np.array(plant.poles, dtype=complex)[None, :] / sig[:, None]
        self.loops = LoopBatch(
            gain=cg[design] * plant.gain * sig ** (nz - npl),
            zeros=np.concatenate([pz, cz[design]], axis=1),
            poles=np.concatenate([pp, cp[design]], axis=1),
            delay_s=np.full(design.shape[0], box.d[1]),
        )

    def sector(self, lval: np.ndarray, w: np.ndarray, ri: np.ndarray | None = None):
        """(θ_lo, span, r_lo, r_hi) at loop values ``lval`` (largest delay): of the grid
        rows (``ri`` None, shape (rows, m)) or of points of rows ``ri``."""
        b = self.box
        dl = self.delta[:, None] if ri is None else self.delta[ri]
        mag = np.abs(lval)
        e = np.exp(dl)
        theta_lo = np.angle(lval) - dl
        span = w * (b.d[1] - b.d[0]) + 2.0 * dl
        return theta_lo, span, mag * b.g[0] / e, mag * b.g[1] * e

    def values(self, rows: np.ndarray, w: np.ndarray) -> np.ndarray:
        val, _ = self.loops.value_at(rows, w)
        return val


def _dist_s(rows: _Rows, lval, w, ri=None):
    return sector_distance(*rows.sector(lval, w, ri))


def _dist_t(rows: _Rows, lval, w, ri=None):
    th, span, r_lo, r_hi = rows.sector(lval, w, ri)
    with np.errstate(divide="ignore"):
        return sector_distance(-(th + span), span, 1.0 / r_hi, 1.0 / r_lo)


def _pm_fn(rows: _Rows, lval, w, ri=None):
    """Phase margin (rad) of the box where some gain makes a crossover, else +inf: the
    smallest of π + θ reduced into (−π, π] over the sector's angles θ — the reduction
    of its lowest angle, or −π (an infimum) when the angles pass an odd multiple of π
    (the reading's wrap point)."""
    th, span, r_lo, r_hi = rows.sector(lval, w, ri)
    return np.where((r_lo <= 1.0) & (r_hi >= 1.0), _pm_of_span(th, span), np.inf)


def _pm_of_span(th, span):
    """min over θ in [th, th + span] of π + θ reduced into (−π, π]."""
    a = np.pi + th
    x = np.pi + 2.0 * np.pi * np.ceil((a - np.pi) / (2.0 * np.pi))  # first odd k·π ≥ a
    return np.where(x < a + span, -np.pi, _wrap(a))


def _dm_fn(rows: _Rows, lval, w, ri=None):
    """Delay margin (s) of the box where some gain makes a crossover, else +inf."""
    return np.maximum(_pm_fn(rows, lval, w, ri), 0.0) / w


def _gm_fn(rows: _Rows, lval, w, ri=None):
    """Gain margin (dB) of the box where its angles cover −180° and r_hi < 1, else +inf."""
    th, span, _, r_hi = rows.sector(lval, w, ri)
    covers = (span >= 2.0 * np.pi) | (np.mod(np.pi - th, 2.0 * np.pi) <= span)
    with np.errstate(divide="ignore"):
        return np.where(covers & (r_hi < 1.0),
                        -20.0 * np.log10(np.maximum(r_hi, 1e-300)), np.inf)


def _refined_min(rows: _Rows, grid: np.ndarray, dist: np.ndarray, fn) -> tuple:
    """Per row: min over ω of ``fn`` refined from the grid's smallest local minima
    by golden-section search in ln ω; returns (min, ω at min)."""
    nr, m = dist.shape
    d = np.where(np.isfinite(dist), dist, np.inf)
    k0 = np.argmin(d, axis=1)
    best = d[np.arange(nr), k0]
    best_w = grid[np.arange(nr), k0]
    interior = np.zeros_like(d, dtype=bool)
    interior[:, 1:-1] = (d[:, 1:-1] <= d[:, :-2]) & (d[:, 1:-1] <= d[:, 2:])
    cand = np.where(interior, d, np.inf)
    k = min(_CANDIDATES, m - 2)
    if k <= 0:
        return best, best_w
    idx = np.argpartition(cand, k - 1, axis=1)[:, :k]
    ri = np.repeat(np.arange(nr), k)
    ki = idx.ravel()
    ok = np.isfinite(cand[ri, ki])
    ri, ki = ri[ok], ki[ok]
    if ri.size == 0:
        return best, best_w
    a = np.log(grid[ri, ki - 1])
    b = np.log(grid[ri, ki + 1])
    gr = (math.sqrt(5.0) - 1.0) / 2.0
    c = b - gr * (b - a)
    e = a + gr * (b - a)

    def f(x):
        w = np.exp(x)
        return fn(rows, rows.values(ri, w), w, ri)

    fc, fe = f(c), f(e)
    for _ in range(_GOLDEN_ITERS):
        left = fc < fe  # the minimum is in [a, e]: e ← c; else in [c, b]: c ← e
        a, b = np.where(left, a, c), np.where(left, e, b)
        c_new = np.where(left, b - gr * (b - a), e)
        e_new = np.where(left, c, a + gr * (b - a))
        xn = np.where(left, c_new, e_new)
        fn_new = f(xn)
        fc, fe = np.where(left, fn_new, fe), np.where(left, fc, fn_new)
        c, e = c_new, e_new
    xs = np.where(fc < fe, c, e)
    fs = np.minimum(fc, fe)
    lower_per_row(ri, fs, xs, best, best_w)
    return best, best_w


def _edge_points(rows: _Rows, grid: np.ndarray, fval: np.ndarray, fn) -> tuple:
    """Sign changes of ``fval`` along each row's grid refined by bisection on ``fn``
    (rows, ω) → real; returns (rows, ω) of the events."""
    s = np.sign(fval)
    br = (s[:, :-1] * s[:, 1:] < 0)
    ri, ki = np.nonzero(br)
    if ri.size == 0:
        return ri, np.zeros(0)
    a = np.log(grid[ri, ki])
    b = np.log(grid[ri, ki + 1])
    fa = fval[ri, ki]
    for _ in range(_BISECT_ITERS):
        mid = 0.5 * (a + b)
        fm = fn(ri, np.exp(mid))
        same = np.sign(fm) == np.sign(fa)
        a = np.where(same, mid, a)
        fa = np.where(same, fm, fa)
        b = np.where(same, b, mid)
    return ri, np.exp(0.5 * (a + b))


#: Largest number of (design, cell) rows evaluated at once (bounds the memory of the
#: per-row grids).
MAX_ROWS = 512
#: Adaptive time-scale refinement: a cell is split while its bound of the distance
#: |1 + L| (or |1 + 1/L|) lies more than this below the exact distance reached by a
#: member of the family, at most ``MAX_SPLITS`` times.
TIME_SCALE_DIST_TOL = 1e-3
MAX_SPLITS = 8


def box_worst_batch(plant: Rational, v: Variation, cg, cz, cp) -> dict[str, np.ndarray]:
    """:func:`_box_worst` in chunks of designs so that at most ``MAX_ROWS`` (design,
    cell) rows start at once."""
    cg = np.asarray(cg, float).ravel()
    n = cg.shape[0]
    cz = np.asarray(cz, complex).reshape(n, -1)
    cp = np.asarray(cp, complex).reshape(n, -1)
    step = max(1, MAX_ROWS // len(_box(plant, v).sig_centres))
    if n <= step:
        return _box_worst(plant, v, cg, cz, cp)
    parts = [_box_worst(plant, v, cg[i:i + step], cz[i:i + step], cp[i:i + step])
             for i in range(0, n, step)]
    return {k: np.concatenate([q[k] for q in parts]) for k in parts[0]}


def _pass(plant: Rational, box: _Box, cg, cz, cp, design, sig, delta) -> dict[str, Any]:
    """One evaluation of rows (design, σ, δ): per row the bound distances (S and T),
    the exact distances at the cell's centre (δ = 0), the margin bounds and the ω of
    the S bound."""

    rows = _Rows(plant, box, cg, cz, cp, design, sig, delta)
    grid = design_grid(rows.loops)
    lval = rows.loops.freqresp(grid)
    s_min, s_w = _refined_min(rows, grid, _dist_s(rows, lval, grid), _dist_s)
    t_min, _ = _refined_min(rows, grid, _dist_t(rows, lval, grid), _dist_t)
    out: dict[str, Any] = {"s": s_min, "s_w": s_w, "t": t_min, "rows": rows}
    if np.any(delta > 0):
        exact = _Rows(plant, box, cg, cz, cp, design, sig, np.zeros_like(delta))
        out["s_exact"] = _refined_min(exact, grid, _dist_s(exact, lval, grid), _dist_s)[0]
        out["t_exact"] = _refined_min(exact, grid, _dist_t(exact, lval, grid), _dist_t)[0]
    else:
        out["s_exact"], out["t_exact"] = s_min, t_min

    # margins: grid values with their smallest local minima refined (golden section)
    th, span, r_lo, r_hi = rows.sector(lval, grid)
    pm_min = _refined_min(rows, grid, _pm_fn(rows, lval, grid), _pm_fn)[0]
    dm_min = _refined_min(rows, grid, _dm_fn(rows, lval, grid), _dm_fn)[0]
    gm_min = _refined_min(rows, grid, _gm_fn(rows, lval, grid), _gm_fn)[0]

    # edges of the crossover set (ln r_lo = 0, ln r_hi = 0) and of the phase set
    # (an edge angle at −180°), refined by bisection
    def lr(which):
        def f(ri, w):
            _, _, a, b = rows.sector(rows.values(ri, w), w, ri)
            return np.log(np.maximum(a if which == 0 else b, 1e-300))
        return f

    def ang(which):
        def f(ri, w):
            t, sp, _, _ = rows.sector(rows.values(ri, w), w, ri)
            return np.sin(t if which == 0 else t + sp)
        return f

    with np.errstate(divide="ignore"):
        for which, src in ((0, r_lo), (1, r_hi)):
            ri, w = _edge_points(rows, grid, np.log(np.maximum(src, 1e-300)), lr(which))
            if ri.size:
                t, sp, _, _ = rows.sector(rows.values(ri, w), w, ri)
                p = _pm_of_span(t, sp)
                np.minimum.at(pm_min, ri, p)
                np.minimum.at(dm_min, ri, np.maximum(p, 0.0) / w)
        for which in (0, 1):
            edge = th if which == 0 else th + span
            f_grid = np.where(np.cos(edge) < 0, np.sin(edge), np.nan)
            ri, w = _edge_points(rows, grid, np.nan_to_num(f_grid, nan=0.0), ang(which))
            if ri.size:
                t, sp, _, rh = rows.sector(rows.values(ri, w), w, ri)
                e = t if which == 0 else t + sp
                ok = (np.cos(e) < 0) & (rh < 1.0)
                vals = np.where(ok, -20.0 * np.log10(np.maximum(rh, 1e-300)), np.inf)
                np.minimum.at(gm_min, ri, vals)
    out.update(pm=pm_min, dm=dm_min, gm=gm_min)
    return out


def _box_worst(plant: Rational, v: Variation, cg, cz, cp) -> dict[str, np.ndarray]:
    """Worst frequency figures over the box for a batch of compensators (arrays of
    shape (n,), NaN = null/infinite): ``sensitivity_peak``, ``complementary_peak``,
    ``phase_margin_deg``, ``gain_margin_db``, ``delay_margin_s``, ``min_distance``,
    the Ms member ``ms_gain_factor``, ``ms_delay_s``, ``ms_time_scale``, ``ms_rad_s``;
    ``time_scale_bound`` (δ of the cell of the worst Ms) and ``time_scale_gap`` (how
    far the bound of |1 + L| may lie below the exact worst of a member: ≤
    TIME_SCALE_DIST_TOL unless the splits ran out).

    Time scale: the coarse cells are evaluated with their widened sectors and at their
    centres; a cell whose bound distance lies more than TIME_SCALE_DIST_TOL below the
    smallest exact distance of its design is split in two, and so on (at most
    MAX_SPLITS times). Kept cells' bounds are final."""
    n = cg.shape[0]
    box = _box(plant, v)
    k = len(box.sig_centres)
    design = np.repeat(np.arange(n), k)
    sig = np.tile(box.sig_centres, n)
    h = np.full(design.size, box.half_width)
    s_best = np.full(n, np.inf)  # bound of the smallest distance (per design)
    t_best = np.full(n, np.inf)
    s_act = np.full(n, np.inf)  # smallest exact distance of a member (per design)
    t_act = np.full(n, np.inf)
    pm = np.full(n, np.inf)
    gm = np.full(n, np.inf)
    dm = np.full(n, np.inf)
    w_of = np.full(n, np.nan)
    sig_of = np.ones(n)
    dl_of = np.zeros(n)
    for depth in range(MAX_SPLITS + 1):
        delta = h * box.b
        r = _pass(plant, box, cg, cz, cp, design, sig, delta)
        np.minimum.at(s_act, design, r["s_exact"])
        np.minimum.at(t_act, design, r["t_exact"])
        split = (r["s"] < s_act[design] - TIME_SCALE_DIST_TOL) | (
            r["t"] < t_act[design] - TIME_SCALE_DIST_TOL)
        if depth == MAX_SPLITS or not np.any(delta > 0):
            split[:] = False
        keep = ~split
        for i in np.flatnonzero(keep):  # rows kept: their bounds are final
            dsg = design[i]
            if r["s"][i] < s_best[dsg]:
                s_best[dsg] = r["s"][i]
                w_of[dsg] = r["s_w"][i]
                sig_of[dsg] = sig[i]
                dl_of[dsg] = delta[i]
        np.minimum.at(t_best, design[keep], r["t"][keep])
        np.minimum.at(pm, design[keep], r["pm"][keep])
        np.minimum.at(gm, design[keep], r["gm"][keep])
        np.minimum.at(dm, design[keep], r["dm"][keep])
        if not np.any(split):
            break
        # the split cells' margins: the children's bounds replace the parent's
        design = np.repeat(design[split], 2)
        hs = h[split] / 2.0
        sig = np.stack([sig[split] * np.exp(-hs), sig[split] * np.exp(hs)], axis=1).ravel()
        h = np.repeat(hs, 2)
    # the member at the nearest point of the worst sector
    one = _Rows(plant, box, cg, cz, cp, np.arange(n), sig_of, dl_of)
    rr = np.arange(n)
    lv = one.values(rr, w_of)
    th1, sp1, rl1, rh1 = one.sector(lv, w_of, rr)
    g_f, tau = _nearest_member(th1, sp1, rl1, rh1, np.abs(lv), np.angle(lv), w_of, box, dl_of)
    with np.errstate(divide="ignore"):
        out = {
            "sensitivity_peak": 1.0 / s_best,
            "complementary_peak": 1.0 / t_best,
            "phase_margin_deg": np.degrees(pm),
            "gain_margin_db": gm,
            "delay_margin_s": dm,
            "min_distance": s_best,
            "ms_gain_factor": g_f,
            "ms_delay_s": tau,
            "ms_time_scale": sig_of,
            "ms_rad_s": w_of,
        }
    for key in ("phase_margin_deg", "gain_margin_db", "delay_margin_s"):
        out[key] = np.where(np.isfinite(out[key]), out[key], np.nan)
    out["time_scale_bound"] = dl_of
    out["time_scale_gap"] = np.maximum(s_act - s_best, 0.0)
    return out


def _nearest_member(th, span, r_lo, r_hi, mag, arg, w, box: _Box, dl):
    """Gain factor and delay of the sector point nearest −1 (clipped to the box)."""
    inside = (span >= 2.0 * np.pi) | (np.mod(np.pi - th, 2.0 * np.pi) <= span)
    # radial: angle π; else the nearer edge
    d_lo = sector_distance(th, np.zeros_like(th), r_lo, r_hi)
    d_hi = sector_distance(th + span, np.zeros_like(th), r_lo, r_hi)
    ang = np.where(inside, th + np.mod(np.pi - th, 2.0 * np.pi),
                   np.where(d_lo <= d_hi, th, th + span))
    r = np.clip(-np.cos(ang), r_lo, r_hi)
    r = np.where(inside, np.clip(1.0, r_lo, r_hi), r)
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.clip(r / mag, box.g[0], box.g[1])
        # angle of the member = arg(L at τ_hi) + ω(τ_hi − τ)  → τ = τ_hi − (ang − arg)/ω
        extra = np.mod(ang - arg + dl, 2.0 * np.pi) - dl
        tau = np.clip(box.d[1] - extra / np.where(w > 0, w, 1.0), box.d[0], box.d[1])
    return np.where(np.isfinite(g), g, 1.0), np.where(np.isfinite(tau), tau, box.d[1])


def family_worst_batch(plant: Rational, v: Variation, cg, cz, cp, *,
                       nominal: dict[str, np.ndarray] | None = None,
                       members: list[Member] | None = None) -> dict[str, np.ndarray]:
    """Worst frequency figures over the whole family (box and listed members) for a
    batch of compensators: the box geometry combined with the exact metrics of the
    sampled members (``frequency_metrics_batch`` on each). Keys: the frequency
    WORST_KEYS, ``worst_gain_factor``, ``worst_delay_s``, ``worst_time_scale`` (the
    Ms member; NaN factors for a listed member), ``worst_member`` (index into the
    sampled members, −1 for a point inside the box). ``nominal``: the nominal
    frequency metrics when already computed."""

    cg = np.asarray(cg, float).ravel()
    n = cg.shape[0]
    members = sampled_members(plant, v) if members is None else members
    ms = np.full(n, -np.inf)
    mt = np.full(n, -np.inf)
    pm = np.full(n, np.inf)
    gm = np.full(n, np.inf)
    dm = np.full(n, np.inf)
    stable = np.ones(n, bool)
    who = np.zeros(n, int)
    wg = np.full(n, np.nan)
    wd = np.full(n, np.nan)
    ws = np.full(n, np.nan)
    for i, m in enumerate(members):
        fm = nominal if (i == 0 and nominal is not None) else \
            frequency_metrics_batch(m.plant, cg, cz, cp)
        st = np.asarray(fm["closed_loop_stable"], bool)
        stable &= st
        v_ms = np.where(np.isnan(fm["sensitivity_peak"]), np.inf, fm["sensitivity_peak"])
        v_ms = np.where(st, v_ms, np.inf)
        upd = v_ms > ms
        ms = np.where(upd, v_ms, ms)
        who = np.where(upd, i, who)
        wg = np.where(upd, np.nan if m.gain_factor is None else m.gain_factor, wg)
        wd = np.where(upd, m.delay_s, wd)
        ws = np.where(upd, np.nan if m.time_scale is None else m.time_scale, ws)
        v_mt = np.where(np.isnan(fm["complementary_peak"]), np.inf, fm["complementary_peak"])
        mt = np.maximum(mt, np.where(st, v_mt, np.inf))
        for acc, key in ((pm, "phase_margin_deg"), (gm, "gain_margin_db"),
                         (dm, "delay_margin_s")):
            x = np.asarray(fm[key], float)
            np.minimum(acc, np.where(np.isnan(x), np.inf, x), out=acc)
    if has_box(plant, v):
        bx = box_worst_batch(plant, v, cg, cz, cp)
        # a sampled member keeps the label when the box is no worse than it (to 1e-7)
        upd = bx["sensitivity_peak"] > ms * (1.0 + 1e-7)
        ms = np.maximum(ms, bx["sensitivity_peak"])
        who = np.where(upd, -1, who)
        wg = np.where(upd, bx["ms_gain_factor"], wg)
        wd = np.where(upd, bx["ms_delay_s"], wd)
        ws = np.where(upd, bx["ms_time_scale"], ws)
        mt = np.maximum(mt, bx["complementary_peak"])
        for acc, key in ((pm, "phase_margin_deg"), (gm, "gain_margin_db"),
                         (dm, "delay_margin_s")):
            x = bx[key]
            np.minimum(acc, np.where(np.isnan(x), np.inf, x), out=acc)
        touches = ~(bx["min_distance"] > MIN_DISTANCE)
        stable &= ~touches
        # a member with −1 on its Nyquist curve has a crossover with phase margin 0 and a
        # phase crossover with gain margin 0 dB: the worst margins are at most 0 there
        np.minimum(pm, np.where(touches, 0.0, np.inf), out=pm)
        np.minimum(gm, np.where(touches, 0.0, np.inf), out=gm)
        np.minimum(dm, np.where(touches, 0.0, np.inf), out=dm)
        ts_bound, ts_gap = bx["time_scale_bound"], bx["time_scale_gap"]
    else:
        ts_bound = ts_gap = np.zeros(n)
    fin = lambda x: np.where(np.isfinite(x), x, np.nan)  # noqa: E731
    return {
        "sensitivity_peak": fin(ms),
        "complementary_peak": fin(mt),
        "phase_margin_deg": fin(pm),
        "gain_margin_db": fin(gm),
        "delay_margin_s": fin(dm),
        "closed_loop_stable": stable,
        "worst_member": who,
        "worst_gain_factor": wg,
        "worst_delay_s": wd,
        "worst_time_scale": ws,
        "time_scale_bound": ts_bound,
        "time_scale_gap": ts_gap,
    }


def worst_of_design(plant: Rational, v: Variation, comp: Rational,
                    nominal: dict[str, Any]) -> dict[str, Any]:
    """The ``worst``, ``worst_member`` and ``worst_basis`` parts of one DESIGN record.

    ``nominal``: the design's METRICS on the nominal plant (its time-domain values are
    reused). Frequency keys: the whole family (:func:`family_worst_batch`);
    time-domain keys: the worst over the box by adaptive refinement
    (:func:`explorer.evaluation.family_time.box_time_worst`, a stated tolerance, an estimate) and
    over the nominal plant, the listed members and the worst-Ms member (without a box:
    the sampled members), named in ``worst_basis.time`` with a line on the refinement
    and ``worst_basis.time_refinement``. Time-domain keys are None when any member is
    unstable or any value found is None."""

    g = np.array([comp.gain])
    z = np.array([comp.zeros], dtype=complex).reshape(1, -1)
    p = np.array([comp.poles], dtype=complex).reshape(1, -1)
    members = sampled_members(plant, v)
    fw = family_worst_batch(plant, v, g, z, p, members=members)
    who = int(fw["worst_member"][0])
    if who >= 0:
        wm = members[who]
    else:
        gf = float(fw["worst_gain_factor"][0])
        d = float(fw["worst_delay_s"][0])
        sg = float(fw["worst_time_scale"][0])
        wm = Member(gain_factor=gf, delay_s=d, time_scale=sg,
                    plant=scaled_plant(plant, gf, d, sg), label="inside the box")
    stable = bool(fw["closed_loop_stable"][0])
    box = has_box(plant, v)
    # with a box its corners are on the refinement's lattice (explorer.evaluation.family_time)
    tset = [m for m in members if not box or m.gain_factor is None or m.label == "nominal"]
    if who < 0:
        tset.append(wm)
    tkeys = ("overshoot_pct", "settling_time_s", "iae_load")
    tw: dict[str, float | None] = {k: None for k in tkeys}
    refinement = None
    if stable:
        vals: dict[str, list[float | None]] = {k: [] for k in tkeys}
        tms: list[dict[str, Any]] = []
        for i, m in enumerate(tset):
            if i == 0:
                tm = {k: nominal.get(k) for k in tkeys}
            else:
                st = True
                if m.label == "inside the box":
                    st = bool(frequency_metrics(m.plant, comp)["closed_loop_stable"])
                tm = step_metrics(m.plant, comp, stable=st) if st else {k: None for k in tkeys}
            tms.append(tm)
            for k in tkeys:
                x = tm.get(k)
                vals[k].append(None if x is None or not math.isfinite(float(x)) else float(x))
        for k in tkeys:
            tw[k] = None if any(x is None for x in vals[k]) else max(vals[k])  # type: ignore
        if box:
            refinement = box_time_worst(plant, v, comp, extra=tms)
            for k in tkeys:
                r = refinement.values[k]
                tw[k] = None if r is None or tw[k] is None else max(tw[k], r)  # type: ignore
    worst: dict[str, Any] = {}
    for k in WORST_KEYS:
        if k == "closed_loop_stable":
            worst[k] = stable
        elif k in tkeys:
            worst[k] = tw[k]
        else:
            x = float(fw[k][0])
            worst[k] = x if math.isfinite(x) else None
    return {
        "worst": worst,
        "worst_member": {"gain_factor": wm.gain_factor, "delay_s": wm.delay_s,
                         "time_scale": wm.time_scale, "where": wm.label},
        "worst_basis": {
            "frequency": "every member of the box (sector geometry) and every listed member",
            "time": [m.label for m in tset] + ([_refinement_line(refinement)]
                                               if refinement is not None else []),
            "time_scale_bound": float(fw["time_scale_bound"][0]),
            "time_scale_gap": float(fw["time_scale_gap"][0]),
            **({"time_refinement": refinement.to_dict()} if refinement is not None else {}),
        },
    }


def _refinement_line(r: Any) -> str:
    """One line of ``worst_basis.time`` on the box refinement (explorer.evaluation.family_time)."""
    if r.converged:
        state = "converged to the tolerance"
    else:
        left = [f"{k}: {n} cell(s) above the tolerance" for k, n in r.unresolved.items() if n]
        left += [f"{k}: {n} cell(s) across a jump" for k, n in r.jumps.items() if n]
        state = ("not converged (member cap hit" if r.cap_hit else "not converged (") + \
            ("; " if r.cap_hit and left else "") + "; ".join(left) + ")"
    return (f"the box: {r.points} members by adaptive refinement (tolerance: overshoot "
            "0.2 percentage points, settling time 1 %, load IAE 1 %), " + state)
