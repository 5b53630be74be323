"""Loop metrics: refined crossovers, margins, sensitivity peaks and Nyquist stability.

Every key follows docs/interface.md (METRICS) exactly; docs/metrics.md gives each
definition and how it is computed. The engine works on a :class:`LoopBatch` — many
loops with the same root counts — and never loops over designs in Python:

1. **Grid.** Each design gets its own frequency grid with the same number of points:
   a log grid (``POINTS_PER_DECADE``) spanning its characteristic frequencies (root
   moduli, 1/τ, the low- and high-frequency asymptote crossings), points clustered
   on each lightly damped complex root at ``b·exp(u·ζ)``, linear points that resolve
   the delay's phase rotation (at most ``DELAY_STEP_RAD`` per step) and one very low
   point for the indentation at s = 0.
2. **Brackets.** Gain crossovers are sign changes of ln|L|; phase crossovers are
   sign changes of Im L where Re L < 0 (−180° mod 360°).
3. **Refinement.** Safeguarded Newton in ln ω, batched over all brackets of all
   designs, with the exact slope d ln L / d ln ω = jω(Σ 1/(jω−z) − Σ 1/(jω−p) − τ).
4. **Peaks.** Ms = 1/min|1+L| and Mt = 1/min|1+1/L|: the grid's smallest local minima
   are refined by safeguarded Newton on the derivative (exact first and second
   derivatives in ln ω); the limits ω → 0 and ω → ∞ are included.
5. **Stability** by the Nyquist criterion on the D contour indented to the right of
   imaginary-axis poles: Z = P + N, N the clockwise encirclements of −1 counted from
   signed crossings of the ray (−∞, −1) — twice the positive-frequency crossings
   (conjugate symmetry), plus the crossings made by the infinite arcs of the
   indentations at s = 0 and at s = ±jb, plus the crossing at ω → ∞ of a biproper
   loop. A biproper loop with a delay and |L(j∞)| ≥ 1 is refused as unstable
   (neutral type). Sources: Nyquist, "Regeneration theory", Bell Syst. Tech. J. 11
   (1932); Åström & Murray, *Feedback Systems* (2008), §9.2 (indentations, delay).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from explorer.core.errors import DesignError
from explorer.core.loop import ROOT_TOL, LoopBatch, Rational

__all__ = [
    "lower_per_row",
    "FREQUENCY_KEYS",
    "POINTS_PER_DECADE",
    "loop_metrics_batch",
    "frequency_metrics",
    "frequency_metrics_batch",
    "compensator_metrics",
    "design_grid",
]

#: Log-grid density of the bracketing grid (points per decade).
POINTS_PER_DECADE = 14
#: Largest phase rotation of the delay between neighbouring grid points (rad).
DELAY_STEP_RAD = 1.0
#: Offsets (in units of the damping ratio, in ln ω) of the points clustered on each
#: lightly damped complex root, around the frequency Im r.
_CLUSTER_U = np.array([-8.0, -4.0, -2.0, -1.0, -0.4, 0.4, 1.0, 2.0, 4.0, 8.0])
_CLUSTER_ZETA_MAX = 0.6
_MAX_DELAY_POINTS = 20000
_NEWTON_ITERS = 40
_PEAK_CANDIDATES = 3

#: Frequency-domain METRICS keys produced by :func:`loop_metrics_batch`.
FREQUENCY_KEYS = (
    "crossover_rad_s",
    "crossovers_rad_s",
    "phase_margin_deg",
    "gain_margin_db",
    "phase_crossover_rad_s",
    "lower_gain_margin_db",
    "delay_margin_s",
    "sensitivity_peak",
    "sensitivity_peak_rad_s",
    "complementary_peak",
    "complementary_peak_rad_s",
    "closed_loop_stable",
    "closed_loop_rhp_poles",
)


# --------------------------------------------------------------------------------------
# evaluation helpers at (row, ω) points
# --------------------------------------------------------------------------------------
def _eval_points(
    loops: LoopBatch, rows: np.ndarray, omega: np.ndarray, second: bool = True
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """L, D = d ln L / d ln ω and dD/d ln ω at points ``(rows[i], omega[i])``
    (dD is zeros unless ``second``)."""
    s = 1j * omega
    tau = loops.delay_s[rows]
    val = loops.gain[rows] * np.exp(-1j * omega * tau)
    g = -tau.astype(complex)
    g1 = np.zeros_like(g)
    # column by column on contiguous (k,) arrays: cheaper than reductions over a
    # short trailing axis
    for roots, sign in ((loops.zeros[rows].T, 1.0), (loops.poles[rows].T, -1.0)):
        for r in roots:
            d = s - r
            inv = 1.0 / d
            if sign > 0:
                val *= d
                g += inv
                if second:
                    g1 -= inv * inv
            else:
                val *= inv
                g -= inv
                if second:
                    g1 += inv * inv
    d = s * g
    if not second:
        return val, d, np.zeros_like(d)
    dd = s * g + s * s * g1
    return val, d, dd


def _newton_roots(
    func: Any,
    rows: np.ndarray,
    x_lo: np.ndarray,
    x_hi: np.ndarray,
    f_lo: np.ndarray,
) -> np.ndarray:
    """Roots of ``func(rows, x) -> (f, df/dx)`` bracketed in [x_lo, x_hi] (x = ln ω).

    Safeguarded Newton: a step leaving the current bracket is replaced by bisection;
    the bracket shrinks every iteration. ``f_lo`` is f at ``x_lo`` (only its sign is
    used). Converges to a relative frequency error near machine precision.
    """
    a = x_lo.copy()
    b = x_hi.copy()
    sa = np.sign(f_lo)
    x = 0.5 * (a + b)
    active = np.ones(x.shape, dtype=bool)
    for _ in range(_NEWTON_ITERS):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        f, df = func(rows[idx], x[idx])
        same = np.sign(f) == sa[idx]
        a[idx] = np.where(same, x[idx], a[idx])
        b[idx] = np.where(same, b[idx], x[idx])
        with np.errstate(divide="ignore", invalid="ignore"):
            step = x[idx] - f / df
        ok = np.isfinite(step) & (step > a[idx]) & (step < b[idx])
        x_new = np.where(ok, step, 0.5 * (a[idx] + b[idx]))
        x_new = np.where(f == 0, x[idx], x_new)
        done = (np.abs(x_new - x[idx]) < 1e-14 * np.maximum(1.0, np.abs(x[idx]))) | (f == 0)
        done |= (b[idx] - a[idx]) < 1e-15 * np.maximum(1.0, np.abs(x[idx]))
        x[idx] = x_new
        active[idx[done]] = False
    return x


def _peak_refine(
    loops: LoopBatch,
    rows: np.ndarray,
    x_lo: np.ndarray,
    x_hi: np.ndarray,
    x0: np.ndarray,
    inverse: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """Minimise f = |1 + W|² in x = ln ω on [x_lo, x_hi], W = L (Ms) or 1/L (Mt).

    Safeguarded Newton on f'(x) = 0 with exact f' and f''. Returns (x, f(x)).
    """
    a = x_lo.copy()
    b = x_hi.copy()
    x = x0.copy()
    best_x = x0.copy()
    best_f = np.full(x.shape, np.inf)
    for _ in range(25):
        val, d, dd = _eval_points(loops, rows, np.exp(x))
        if inverse:
            w = 1.0 / val
            d, dd = -d, -dd
        else:
            w = val
        w1 = w * d
        w2 = w * (d * d + dd)
        one_w = 1.0 + w
        f = np.abs(one_w) ** 2
        f1 = 2.0 * (np.conj(one_w) * w1).real
        f2 = 2.0 * np.abs(w1) ** 2 + 2.0 * (np.conj(one_w) * w2).real
        better = f < best_f
        best_f = np.where(better, f, best_f)
        best_x = np.where(better, x, best_x)
        a = np.where(f1 < 0, x, a)
        b = np.where(f1 > 0, x, b)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = x - f1 / f2
        ok = np.isfinite(step) & (f2 > 0) & (step > a) & (step < b)
        x_new = np.where(ok, step, 0.5 * (a + b))
        if np.all(np.abs(x_new - x) < 1e-13):
            break
        x = x_new
    return best_x, best_f


# --------------------------------------------------------------------------------------
# the grid
# --------------------------------------------------------------------------------------
def _asymptote_scales(loops: LoopBatch) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies where the low- and high-frequency asymptotes of |L| cross 1 (in
    logarithms, so a gain of 1e300 or roots spanning 1e±8 do not overflow; the plain
    value L(0) is :meth:`LoopBatch.dc_gain`)."""
    zm = np.abs(loops.zeros)
    pm = np.abs(loops.poles)
    with np.errstate(divide="ignore"):
        log_k0 = (
            np.log(np.abs(loops.gain))
            + np.sum(np.where(zm > 0, np.log(np.where(zm > 0, zm, 1.0)), 0.0), axis=1)
            - np.sum(np.where(pm > 0, np.log(np.where(pm > 0, pm, 1.0)), 0.0), axis=1)
        )
        m0 = loops.n_origin_poles().astype(float)
        w_lo = np.where(m0 != 0, np.exp(log_k0 / np.where(m0 != 0, m0, 1.0)), np.nan)
        rd = float(loops.relative_degree)
        w_hi = np.exp(np.log(np.abs(loops.gain)) / rd) if rd > 0 else np.full(loops.n, np.nan)
    if rd == 0:
        # biproper: |L|² ≈ K²(1 + (Σ|z|² − Σ|p|²)/ω²) far above the roots, so with |K|
        # near 1 the crossover lies at ω² = K²·D/(1 − K²), arbitrarily far above them
        # (K = 1.0000003 on (s+1)/(s+10): 1.34e4 rad/s, beyond a grid over the roots)
        w_hi = np.fmax(w_hi, _second_order_crossing(
            loops.gain ** 2, np.sum(zm**2, axis=1) - np.sum(pm**2, axis=1)))
    if np.any(m0 == 0):
        # no loop integrator: |L|² ≈ K0²(1 + ω²(Σ1/|z|² − Σ1/|p|²)) far below the
        # nonzero roots; with |K0| near 1 the crossover lies arbitrarily far below them
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            inv = (np.sum(np.where(zm > 0, 1.0 / np.where(zm > 0, zm, 1.0) ** 2, 0.0), axis=1)
                   - np.sum(np.where(pm > 0, 1.0 / np.where(pm > 0, pm, 1.0) ** 2, 0.0), axis=1))
            k0sq = np.exp(2.0 * log_k0)
            w2 = (1.0 - k0sq) / (k0sq * inv)
            w_low = np.where((m0 == 0) & np.isfinite(w2) & (w2 > 0), np.sqrt(w2), np.nan)
        w_lo = np.fmin(w_lo, w_low)
    return w_lo, w_hi


def _second_order_crossing(k2: np.ndarray, d: np.ndarray) -> np.ndarray:
    """ω with k2·(1 + d/ω²) = 1 (NaN where there is none)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        w2 = k2 * d / (1.0 - k2)
        return np.where(np.isfinite(w2) & (w2 > 0), np.sqrt(w2), np.nan)


def _monotone_from(loops: LoopBatch, hi: np.ndarray) -> np.ndarray:
    """A frequency above which |L(jω)| decreases monotonically (strictly proper
    loops): c·max|r| with c − 1 > (number of roots)/(relative degree); else ``hi``.
    Also above the asymptote crossing, so |L| < 1 there as well."""
    rd = loops.relative_degree
    if rd <= 0:
        return hi
    n_roots = loops.zeros.shape[1] + loops.poles.shape[1]
    c = 1.0 + n_roots / rd + 0.5
    rmax = np.max(np.abs(np.concatenate([loops.zeros, loops.poles], axis=1)), axis=1, initial=0.0)
    _, w_hi = _asymptote_scales(loops)
    w_m = np.fmax(c * rmax, 2.0 * w_hi)
    return np.minimum(hi, np.where(np.isfinite(w_m) & (w_m > 0), w_m, hi))


def design_grid(loops: LoopBatch) -> np.ndarray:
    """Per-design bracketing grid, shape ``(n, m)``, sorted, all ω > 0 (rad/s).

    Column 0 is the indentation point ε, far below every characteristic frequency.
    """
    n = loops.n
    roots = np.concatenate([loops.zeros, loops.poles], axis=1)
    mag = np.abs(roots)
    tau = loops.delay_s
    w_lo, w_hi = _asymptote_scales(loops)
    cand = np.concatenate(
        [
            np.where(mag > 0, mag, np.nan),
            np.where(tau > 0, 1.0 / np.where(tau > 0, tau, 1.0), np.nan)[:, None],
            w_lo[:, None],
            w_hi[:, None],
        ],
        axis=1,
    )
    cand = np.where(np.isfinite(cand) & (cand > 0), cand, np.nan)
    have = np.any(np.isfinite(cand), axis=1)
    cand[~have, 0] = 1.0
    lo = np.nanmin(cand, axis=1) / 30.0
    hi = np.nanmax(cand, axis=1) * 20.0
    hi = np.maximum(hi, lo * 100.0)
    decades = np.log10(hi / lo)
    m_base = int(math.ceil(float(np.max(decades)) * POINTS_PER_DECADE)) + 1
    t = np.linspace(0.0, 1.0, m_base)
    base = np.exp(np.log(lo)[:, None] + np.outer(np.log(hi / lo), t))
    parts = [(lo / 1e3)[:, None], base]

    # clusters on lightly damped complex roots (upper members)
    upper = (roots.imag > 0) & (mag > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        zeta = np.where(mag > 0, np.abs(roots.real) / np.where(mag > 0, mag, 1.0), 1.0)
    light = upper & (zeta < _CLUSTER_ZETA_MAX)
    cols = np.flatnonzero(np.any(light, axis=0))
    if cols.size:
        centre = np.where(light[:, cols], roots.imag[:, cols], hi[:, None])
        width = np.where(light[:, cols], np.maximum(zeta[:, cols], 1e-7), 0.0)
        pts = centre[:, :, None] * np.exp(width[:, :, None] * _CLUSTER_U[None, None, :])
        parts.append(pts.reshape(n, -1))

    # linear points resolving the delay where the log grid is too coarse for it
    if np.any(tau > 0):
        q = 10.0 ** (1.0 / POINTS_PER_DECADE) - 1.0
        t_safe = np.where(tau > 0, tau, 1.0)
        w_a = np.maximum(lo, DELAY_STEP_RAD / (t_safe * q))
        # above w_m the magnitude falls monotonically (each root's share of the slope
        # d ln|L|/d ln ω is within 1/(c − 1) of its asymptote for ω ≥ c·|r|), so
        # the first phase crossover above it has the smallest margin of all later ones
        w_b = _monotone_from(loops, hi) + 2.5 * np.pi / t_safe
        need = np.where(tau > 0, np.maximum(0.0, (w_b - w_a) * tau / DELAY_STEP_RAD), 0.0)
        count = int(min(_MAX_DELAY_POINTS, math.ceil(float(np.max(need))) + 2))
        lin = np.linspace(0.0, 1.0, count)
        w_a = np.where(tau > 0, np.minimum(w_a, w_b), hi)
        w_b = np.where(tau > 0, w_b, hi)
        parts.append(w_a[:, None] + np.outer(w_b - w_a, lin))

    grid = np.sort(np.concatenate(parts, axis=1), axis=1)
    return grid


# --------------------------------------------------------------------------------------
# the engine
# --------------------------------------------------------------------------------------
def _odd_count(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Number of odd integers strictly inside (lo, hi)."""
    return np.maximum(0, np.ceil((hi - 1.0) / 2.0) - np.floor((lo - 1.0) / 2.0) - 1).astype(int)


#: |Im L| ≤ this × |L|: the curve lies on the real axis to rounding (an undamped mode,
#: pure integrators: L = 1/(s²(s² + 1)) is real at every ω)
_ON_REAL_AXIS = 1e-12


def _tiebroken_imag(loops: LoopBatch, rows: np.ndarray, omega: np.ndarray,
                    val: np.ndarray) -> np.ndarray:
    """Im L(jω) at points ``(rows[i], omega[i])``; where L lies on the real axis to
    rounding, the sign the Nyquist contour shifted an infinitesimal σ > 0 into the
    right half plane gives it (Im L(σ + jω) ≈ Im L(jω) + σ·Im(dL/ds)), as a value of
    magnitude 1e-9·|L| (an angle 1e-9 rad off the axis, so arcs that start or end
    there count their crossings). The same convention puts imaginary-axis poles outside the
    contour (not in P); a curve lying along the negative real axis then crosses it
    where it really does, not by the sign of rounding noise."""
    im = np.array(val.imag, dtype=float, copy=True)
    flat = np.abs(im) <= _ON_REAL_AXIS * np.abs(val)
    if np.any(flat):
        k = np.flatnonzero(flat.ravel())
        r, w = np.asarray(rows).ravel()[k], np.asarray(omega, float).ravel()[k]
        with np.errstate(all="ignore"):
            v, d, _ = _eval_points(loops, r, w, second=False)
            slope = (v * d / (1j * w)).imag  # Im(dL/ds) = Im(L · (d ln L/d ln ω) / s)
        flat_im = im.ravel()
        flat_im[k] = np.where(np.isfinite(slope) & (slope != 0.0),
                              np.copysign(1e-9 * np.abs(v), slope), flat_im[k])
        im = flat_im.reshape(im.shape)
    return im


def _arc_crossings(start_angle: np.ndarray, end_angle: np.ndarray, turns: np.ndarray) -> np.ndarray:
    """Signed crossings of the negative real axis (clockwise +1) by an arc that
    rotates by about −``turns``·π from ``start_angle`` to ``end_angle`` (rad)."""
    # exact rotation: end − start shifted by the multiple of 2π nearest −turns·π
    raw = end_angle - start_angle
    k = np.round((-turns * np.pi - raw) / (2.0 * np.pi))
    delta = raw + 2.0 * np.pi * k
    end = start_angle + delta
    cw = _odd_count(end / np.pi, start_angle / np.pi)
    ccw = _odd_count(start_angle / np.pi, end / np.pi)
    return np.where(delta < 0, cw, -ccw)


def loop_metrics_batch(loops: LoopBatch) -> dict[str, np.ndarray]:
    """Frequency-domain metrics of every loop in the batch.

    Returns arrays of shape ``(n,)`` (NaN where docs/interface.md has null, i.e. "does not
    exist or infinite"), ``crossovers_rad_s`` as ``(n, k)`` padded with NaN,
    ``closed_loop_stable`` as bool and ``closed_loop_rhp_poles`` as int.
    """
    if loops.relative_degree < 0:
        raise DesignError(
            "loop is improper (more zeros than poles): its frequency response grows without bound"
        )
    n = loops.n
    grid = design_grid(loops)
    m = grid.shape[1]
    lval = loops.freqresp(grid)
    x = np.log(grid)

    # axis poles s = ±jb (b > 0): their intervals are arcs, not ordinary segments
    axis_arc = np.zeros(n, dtype=int)
    # "on the axis" within ROOT_TOL of the modulus, the split explorer.core.loop uses for
    # open-loop right-half-plane poles: a pole at 1e-297 ± 1j is an undamped mode, and
    # counting it both as an open-loop RHP pole and by its (unresolvable) phase jump
    # gave a wrong Nyquist count
    on_axis = np.abs(loops.poles.real) <= ROOT_TOL * np.abs(loops.poles)
    ax_pole = on_axis & (loops.poles.imag > 0)
    skip = np.zeros((n, m - 1), dtype=bool)
    if np.any(ax_pole):
        # rare: a loop with an undamped mode; handled per design
        for i, k in zip(*np.nonzero(ax_pole), strict=True):
            b = loops.poles[i, k].imag
            if np.any(np.isclose(loops.poles[i, :k].imag, b) & on_axis[i, :k]):
                continue  # multiplicity handled with the first column
            mult = int(np.sum(np.isclose(loops.poles[i].imag, b) & on_axis[i]))
            below = np.searchsorted(grid[i], b) - 1
            if 0 <= below < m - 1:
                skip[i, below] = True
            w_pair = np.array([b * (1 - 1e-7), b * (1 + 1e-7)])
            v = loops.take(np.array([i])).freqresp(w_pair)[0]
            v_im = _tiebroken_imag(loops, np.array([i, i]), w_pair, v)
            a0 = np.arctan2(v_im[0], v[0].real)
            a1 = np.arctan2(v_im[1], v[1].real)
            axis_arc[i] += 2 * int(
                _arc_crossings(np.array([a0]), np.array([a1]), np.array([float(mult)]))[0]
            )
            # make sure the two grid points around b are where the arc starts/ends
            if 0 <= below < m - 1:
                grid[i, below] = min(grid[i, below], w_pair[0])
                grid[i, below + 1] = max(grid[i, below + 1], w_pair[1])
        lval = loops.freqresp(grid)
        x = np.log(grid)

    mag = np.abs(lval)
    logm = np.log(np.where(mag > 0, mag, 1e-300))

    def log_mag(rows: np.ndarray, xx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        val, d, _ = _eval_points(loops, rows, np.exp(xx), second=False)
        return np.log(np.abs(val)), d.real

    def neg_angle(rows: np.ndarray, xx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        val, d, _ = _eval_points(loops, rows, np.exp(xx), second=False)
        return np.angle(-val), d.imag

    # -- gain crossovers ----------------------------------------------------------------
    sg = np.where(logm >= 0, 1, -1)
    brk = (sg[:, :-1] != sg[:, 1:]) & ~skip
    gi, gk = np.nonzero(brk)
    xa, xb, fa = x[gi, gk], x[gi, gk + 1], logm[gi, gk]
    # a resonance peak (or notch dip) that pokes through |L| = 1 between grid points
    hr, hk, hx, hv = _hidden_pairs(loops, x, logm, skip, "real", 0.7)
    gi = np.concatenate([gi, hr, hr])
    gk = np.concatenate([gk, hk - 1, hk])
    xa = np.concatenate([xa, x[hr, hk - 1], hx])
    xb = np.concatenate([xb, hx, x[hr, hk + 1]])
    fa = np.concatenate([fa, logm[hr, hk - 1], hv])
    xg = _newton_roots(log_mag, gi, xa, xb, fa) if gi.size else np.zeros(0)
    wg = np.exp(xg)

    # -- phase crossovers (L real negative) -----------------------------------------------
    im = _tiebroken_imag(loops, np.repeat(np.arange(n), m).reshape(n, m), grid, lval)
    re = lval.real
    si = np.where(im >= 0, 1, -1)
    pb = (si[:, :-1] != si[:, 1:]) & ~skip
    with np.errstate(invalid="ignore", divide="ignore"):
        tt = im[:, :-1] / (im[:, :-1] - im[:, 1:])
    tt = np.where(np.isfinite(tt), tt, 0.5)
    re_cross = re[:, :-1] + tt * (re[:, 1:] - re[:, :-1])
    pb &= re_cross < 0
    pi_, pk = np.nonzero(pb)
    direction = np.where(im[pi_, pk] < 0, 1, -1)  # Im − → + : clockwise (phase falls)
    # interpolated ln|L| at each crossing; refine only the crossings that matter:
    # those near |L| = 1 (Nyquist side and Ms candidates) and the GM candidates
    t_c = tt[pi_, pk]
    lp_est = logm[pi_, pk] + t_c * (logm[pi_, pk + 1] - logm[pi_, pk])
    xpa, xpb = x[pi_, pk], x[pi_, pk + 1]
    xp = xpa + t_c * (xpb - xpa)
    fpa = np.angle(-lval[pi_, pk])
    force = np.zeros(pi_.size, dtype=bool)
    # a phase extremum that touches −180° between grid points: two crossings
    with np.errstate(invalid="ignore", divide="ignore"):
        hval = np.angle(-lval)
    qr, qk, qx, qv = _hidden_pairs(loops, x, hval, skip, "imag", 0.5)
    if qr.size:
        first_dir = np.where(im[qr, qk - 1] < 0, 1, -1)
        q_est = np.log(np.abs(_eval_points(loops, qr, np.exp(qx), second=False)[0]))
        pi_ = np.concatenate([pi_, qr, qr])
        pk = np.concatenate([pk, qk - 1, qk])
        direction = np.concatenate([direction, first_dir, -first_dir])
        lp_est = np.concatenate([lp_est, q_est, q_est])
        xpa = np.concatenate([xpa, x[qr, qk - 1], qx])
        xpb = np.concatenate([xpb, qx, x[qr, qk + 1]])
        xp = np.concatenate([xp, qx, qx])
        fpa = np.concatenate([fpa, hval[qr, qk - 1], qv])
        force = np.concatenate([force, np.ones(2 * qr.size, dtype=bool)])
    gm_est = np.where(lp_est < 0, -lp_est, np.inf)
    gm_min = np.full(n, np.inf)
    np.minimum.at(gm_min, pi_, gm_est)
    lgm_est = np.where(lp_est > 0, lp_est, np.inf)
    lgm_min = np.full(n, np.inf)
    np.minimum.at(lgm_min, pi_, lgm_est)
    refine = force | (np.abs(lp_est) < 1.2)  # Nyquist side and Ms candidates
    refine |= (gm_est < gm_min[pi_] + 0.35) | (lgm_est < lgm_min[pi_] + 0.35)  # 0.35 Np ≈ 3 dB
    ri = np.flatnonzero(refine)
    if ri.size:
        xp[ri] = _newton_roots(neg_angle, pi_[ri], xpa[ri], xpb[ri], fpa[ri])
    wp = np.exp(xp)
    lp = np.exp(lp_est)
    if ri.size:
        lp[ri] = np.abs(_eval_points(loops, pi_[ri], wp[ri], second=False)[0])
    # unrefined crossings are only kept for the Nyquist count
    pi_all, direction_all, lp_all = pi_, direction, lp
    pi_, pk, xp, wp, lp = pi_[ri], pk[ri], xp[ri], wp[ri], lp[ri]

    # -- margins per design ---------------------------------------------------------------
    nan = np.full(n, np.nan)
    pm_deg = nan.copy()
    wc = nan.copy()
    dm = nan.copy()
    pm_c = np.zeros(0)
    if gi.size:
        phase_c = np.angle(_eval_points(loops, gi, wg, second=False)[0])
        pm_c = np.degrees(phase_c) + 180.0
        pm_c = np.where(pm_c > 180.0, pm_c - 360.0, pm_c)
        order = np.lexsort((pm_c, gi))
        gi_s, pm_s, wg_s = gi[order], pm_c[order], wg[order]
        first = np.r_[True, gi_s[1:] != gi_s[:-1]]
        pm_deg[gi_s[first]] = pm_s[first]
        wc[gi_s[first]] = wg_s[first]
        dm_c = np.radians(pm_c) / wg
        dm_c = np.where(pm_c <= 0, 0.0, dm_c)
        np.fmin.at(dm, gi, dm_c)
        # fmin.at with NaN start: NaN is ignored by fmin, so the result is the min
    gm_db = nan.copy()
    wpc = nan.copy()
    lgm_db = nan.copy()
    if pi_.size:
        below = (lp < 1.0) & (lp > 0)
        gm_c = -20.0 * np.log10(np.where(below, lp, 1.0))
        gm_c = np.where(below, gm_c, np.inf)
        order = np.lexsort((gm_c, pi_))
        ps, gs, ws = pi_[order], gm_c[order], wp[order]
        first = np.r_[True, ps[1:] != ps[:-1]] & np.isfinite(gs)
        gm_db[ps[first]] = gs[first]
        wpc[ps[first]] = ws[first]
        above = lp > 1.0
        lg = np.where(above, -20.0 * np.log10(np.where(above, lp, 1.0)), -np.inf)
        tmp = np.full(n, -np.inf)
        np.maximum.at(tmp, pi_, lg)
        lgm_db = np.where(np.isfinite(tmp), tmp, np.nan)

    _pm_all = pm_c

    # crossovers list (ascending), padded
    if gi.size:
        order = np.lexsort((wg, gi))
        gs_i, gs_w = gi[order], wg[order]
        counts = np.bincount(gs_i, minlength=n)
        kmax = int(counts.max())
        starts = np.r_[0, np.cumsum(counts)[:-1]]
        pos = np.arange(gs_i.size) - starts[gs_i]
        xs = np.full((n, kmax), np.nan)
        xs[gs_i, pos] = gs_w
    else:
        xs = np.full((n, 0), np.nan)

    # -- peaks ------------------------------------------------------------------------------
    hf = loops.hf_value()
    tau = loops.delay_s
    m0 = loops.n_origin_poles()
    # extra peak candidates: the closest approaches to −1 lie near phase crossovers
    # with |L| near 1 and near gain crossovers with a small phase margin
    near_p = (lp > 0.3) & (lp < 3.0) if pi_.size else np.zeros(0, dtype=bool)
    small_pm = np.abs(_pm_all) < 60.0
    ex_rows = np.concatenate([pi_[near_p], gi[small_pm]])
    ex_k = np.concatenate([pk[near_p], gk[small_pm]])
    ex_x = np.concatenate([xp[near_p], xg[small_pm]])
    extra = (ex_rows, ex_k, ex_x)
    ms, ms_w = _peak(loops, grid, x, np.abs(1.0 + lval), extra, inverse=False)
    with np.errstate(divide="ignore", invalid="ignore"):
        mt, mt_w = _peak(loops, grid, x, np.abs(1.0 + 1.0 / lval), extra, inverse=True)
    # limits ω → 0 and ω → ∞
    l0 = np.where(m0 > 0, np.inf, np.where(m0 < 0, 0.0, loops.dc_gain()))
    with np.errstate(divide="ignore", invalid="ignore"):
        s0 = np.where(np.isinf(l0), 0.0, 1.0 / np.abs(1.0 + l0))
        t0 = np.where(np.isinf(l0), 1.0, np.abs(l0) / np.abs(1.0 + l0))
        habs = np.abs(hf)
        s_inf = np.where(tau > 0, 1.0 / (1.0 - habs), 1.0 / np.abs(1.0 + hf))
        t_inf = np.where(tau > 0, habs / (1.0 - habs), habs / np.abs(1.0 + hf))
        s_inf = np.where(np.isfinite(s_inf) & (s_inf > 0), s_inf, np.inf)
        t_inf = np.where(np.isfinite(t_inf) & (t_inf >= 0), t_inf, np.inf)
        s0 = np.where(np.isfinite(s0), s0, np.inf)
        t0 = np.where(np.isfinite(t0), t0, np.inf)
    ms_w = np.where(s0 > ms, 0.0, ms_w)
    ms = np.maximum(ms, s0)
    ms_w = np.where(s_inf > ms, np.inf, ms_w)
    ms = np.maximum(ms, s_inf)
    mt_w = np.where(t0 > mt, 0.0, mt_w)
    mt = np.maximum(mt, t0)
    mt_w = np.where(t_inf > mt, np.inf, mt_w)
    mt = np.maximum(mt, t_inf)

    # -- Nyquist ----------------------------------------------------------------------------
    p_rhp = loops.n_rhp_poles()
    n_cw = np.zeros(n, dtype=int)
    if pi_all.size:
        left = lp_all > 1.0
        np.add.at(n_cw, pi_all[left], 2 * direction_all[left])
    # through s = 0: for m0 > 0 an infinite arc rotating clockwise by m0·π; for
    # m0 = 0 the curve passes through the real value L(0) (a crossing if L(0) < −1)
    eps_angle = np.arctan2(im[:, 0], re[:, 0])
    arc0 = _arc_crossings(-eps_angle, eps_angle, np.maximum(m0, 0).astype(float))
    n_cw += np.where((m0 > 0) | ((m0 == 0) & (mag[:, 0] > 1.0)), arc0, 0)
    n_cw += axis_arc
    # ω → ∞ for a biproper loop without delay: L(j∞) is real
    degenerate = np.zeros(n, dtype=bool)
    if loops.relative_degree == 0:
        last_im = im[:, -1]
        through = (tau == 0) & (hf.real < -1.0)
        n_cw += np.where(through, np.where(last_im < 0, 1, -1), 0)
        # the curve reaches L(j∞) < −1 along the real axis with no side to read (a
        # constant loop, L = −10 after a cancellation): without a delay the closed-loop
        # polynomial den + num decides, as in tests/nyquist_oracle.py
        degenerate = through & (np.abs(last_im) <= _ON_REAL_AXIS * np.abs(lval[:, -1]))
    z_rhp = p_rhp + n_cw
    on_axis_cl = np.zeros(n, dtype=bool)
    for i in np.flatnonzero(degenerate):
        num = loops.gain[i] * np.poly(loops.zeros[i]).real
        den = np.poly(loops.poles[i]).real
        size = max(num.size, den.size)
        cl = np.roots(np.pad(den, (size - den.size, 0)) + np.pad(num, (size - num.size, 0)))
        z_rhp[i] = int(np.sum(cl.real > 0))
        on_axis_cl[i] = bool(np.any(np.abs(cl.real) <= 1e-9 * np.maximum(1.0, np.abs(cl))))
    marginal = ~np.isfinite(ms) | (ms > 1e12) | on_axis_cl
    neutral = (tau > 0) & (np.abs(hf) >= 1.0)
    stable = (z_rhp == 0) & ~marginal & ~neutral
    ms = np.where(np.isfinite(ms) & (ms < 1e12), ms, np.nan)
    mt = np.where(np.isfinite(mt) & (mt < 1e12), mt, np.nan)

    # biproper loop with delay: phase crossovers accumulate at |L(j∞)|
    if loops.relative_degree == 0 and np.any(tau > 0):
        lim = np.abs(hf)
        ok = (tau > 0) & (lim < 1.0) & (lim > 0)
        gm_lim = np.where(ok, -20.0 * np.log10(np.where(ok, lim, 1.0)), np.nan)
        take = ok & ~(gm_db <= gm_lim)
        gm_db = np.where(take, gm_lim, gm_db)
        wpc = np.where(take, np.inf, wpc)

    return {
        "crossover_rad_s": wc,
        "crossovers_rad_s": xs,
        "phase_margin_deg": pm_deg,
        "gain_margin_db": gm_db,
        "phase_crossover_rad_s": wpc,
        "lower_gain_margin_db": lgm_db,
        "delay_margin_s": dm,
        "sensitivity_peak": ms,
        "sensitivity_peak_rad_s": ms_w,
        "complementary_peak": mt,
        "complementary_peak_rad_s": mt_w,
        "closed_loop_stable": stable,
        "closed_loop_rhp_poles": np.maximum(z_rhp, 0),
    }


def _hidden_pairs(
    loops: LoopBatch,
    x: np.ndarray,
    vals: np.ndarray,
    skip: np.ndarray,
    part: str,
    window: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Grid local extrema of ``vals`` (ln|L| for part "real", the phase offset from
    −180° for "imag") within ``window`` of 0 whose refined extremum has the other
    sign: two crossings hide between grid points k−1 and k+1.

    Returns (rows, k, ln ω of the extremum, value there) of the hidden pairs."""
    d1 = vals[:, 1:-1] - vals[:, :-2]
    d2 = vals[:, 2:] - vals[:, 1:-1]
    mid = vals[:, 1:-1]
    same = (np.sign(vals[:, :-2]) == np.sign(mid)) & (np.sign(vals[:, 2:]) == np.sign(mid))
    cand = (d1 * d2 < 0) & (np.abs(mid) < window) & same & ~skip[:, :-1] & ~skip[:, 1:]
    r, k = np.nonzero(cand)
    k = k + 1
    empty = np.zeros(0, dtype=int)
    if r.size == 0:
        return empty, empty, np.zeros(0), np.zeros(0)

    def slope(rows: np.ndarray, xx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        _, d, dd = _eval_points(loops, rows, np.exp(xx))
        return (d.real, dd.real) if part == "real" else (d.imag, dd.imag)

    s_lo, _ = slope(r, x[r, k - 1])
    xe = _newton_roots(slope, r, x[r, k - 1], x[r, k + 1], s_lo)
    val = _eval_points(loops, r, np.exp(xe), second=False)[0]
    ve = np.log(np.abs(val)) if part == "real" else np.angle(-val)
    hit = np.sign(ve) != np.sign(vals[r, k])
    return r[hit], k[hit], xe[hit], ve[hit]


def _peak(
    loops: LoopBatch,
    grid: np.ndarray,
    x: np.ndarray,
    dist: np.ndarray,
    extra: tuple[np.ndarray, np.ndarray, np.ndarray],
    inverse: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """1/min over ω of ``dist`` (|1+L| or |1+1/L|), refined; returns (peak, ω at peak).

    Candidates: the grid's smallest local minima, plus ``extra`` = (rows, grid
    interval index, ln ω start) points known to lie near a close approach to −1."""
    n, m = dist.shape
    d = np.where(np.isfinite(dist), dist, np.inf)
    interior = np.zeros_like(d, dtype=bool)
    interior[:, 1:-1] = (d[:, 1:-1] <= d[:, :-2]) & (d[:, 1:-1] <= d[:, 2:])
    cand = np.where(interior, d, np.inf)
    k = min(_PEAK_CANDIDATES, m - 2)
    idx = np.argpartition(cand, k - 1, axis=1)[:, :k] if k > 0 else np.zeros((n, 0), int)
    ci = np.repeat(np.arange(n), idx.shape[1])
    ck = idx.ravel()
    valid = np.isfinite(cand[ci, ck])
    ci, ck = ci[valid], ck[valid]
    best = np.full(n, np.inf)
    best_w = np.full(n, np.nan)
    # grid values first (also covers designs with no interior minimum)
    kmin = np.argmin(d, axis=1)
    best = d[np.arange(n), kmin] ** 2
    best_w = grid[np.arange(n), kmin]
    er, ek, ex = extra
    lo_k = np.concatenate([ck - 1, np.maximum(ek - 1, 0)])
    hi_k = np.concatenate([ck + 1, np.minimum(ek + 2, m - 1)])
    x0 = np.concatenate([x[ci, ck], ex])
    ci = np.concatenate([ci, er])
    if ci.size:
        xr, fr = _peak_refine(loops, ci, x[ci, lo_k], x[ci, hi_k], x0, inverse)
        lower_per_row(ci, fr, xr, best, best_w)
    with np.errstate(divide="ignore"):
        peak = 1.0 / np.sqrt(best)
    return peak, best_w


# --------------------------------------------------------------------------------------
# compensator metrics and JSON-ready front ends
# --------------------------------------------------------------------------------------
def compensator_metrics(comp: Rational) -> dict[str, float | None]:
    """``hf_gain`` (|C(j∞)|, None if improper) and ``integral_gain`` (lim s·C(s) for
    exactly one pole at s = 0, else None)."""
    n_origin_p = sum(1 for p in comp.poles if p == 0)
    n_origin_z = sum(1 for z in comp.zeros if z == 0)
    ki: float | None = None
    if n_origin_p == 1 and n_origin_z == 0:
        ki = comp.dc_gain()
    return {"hf_gain": comp.hf_gain(), "integral_gain": ki}


def _compensator_batch(
    gain: np.ndarray, zeros: np.ndarray, poles: np.ndarray
) -> dict[str, np.ndarray]:
    n = gain.shape[0]
    rd = poles.shape[1] - zeros.shape[1]
    if rd < 0:
        hf = np.full(n, np.nan)
    elif rd == 0:
        hf = np.abs(gain)
    else:
        hf = np.zeros(n)
    n_p0 = np.sum(poles == 0, axis=1)
    n_z0 = np.sum(zeros == 0, axis=1)
    z = np.where(zeros == 0, 1.0, -zeros)
    p = np.where(poles == 0, 1.0, -poles)
    ki = (gain * np.prod(z, axis=1) / np.prod(p, axis=1)).real
    ki = np.where((n_p0 == 1) & (n_z0 == 0), ki, np.nan)
    return {"hf_gain": hf, "integral_gain": ki}


def frequency_metrics_batch(
    plant: Rational,
    comp_gain: np.ndarray,
    comp_zeros: np.ndarray,
    comp_poles: np.ndarray,
    *,
    chunk: int = 1024,
) -> dict[str, np.ndarray]:
    """Frequency metrics (and ``hf_gain``, ``integral_gain``) of a batch of
    compensators of one structure on one plant. Evaluated in chunks of ``chunk``
    designs to bound memory; results are concatenated arrays (NaN = null)."""
    comp_gain = np.asarray(comp_gain, dtype=float).ravel()
    n = comp_gain.shape[0]
    cz = np.asarray(comp_zeros, dtype=complex).reshape(n, -1)
    cp = np.asarray(comp_poles, dtype=complex).reshape(n, -1)
    pieces: list[dict[str, np.ndarray]] = []
    for start in range(0, n, chunk):
        sl = slice(start, start + chunk)
        loops = LoopBatch.series(plant, comp_gain[sl], cz[sl], cp[sl])
        # a refinement step may land exactly on an axis zero or pole (L = 0 or ∞ there):
        # the values are handled as such (non-finite → not a crossing, not a peak)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            out = loop_metrics_batch(loops)
        out.update(_compensator_batch(comp_gain[sl], cz[sl], cp[sl]))
        pieces.append(out)
    return _concat(pieces)


def _concat(pieces: Sequence[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
    if not pieces:
        return {}
    out: dict[str, np.ndarray] = {}
    for key in pieces[0]:
        arrs = [p[key] for p in pieces]
        if arrs[0].ndim == 2:
            width = max(a.shape[1] for a in arrs)
            arrs = [
                np.pad(a, ((0, 0), (0, width - a.shape[1])), constant_values=np.nan) for a in arrs
            ]
        out[key] = np.concatenate(arrs, axis=0)
    return out


def _scalar(v: Any) -> Any:
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    f = float(v)
    return f if math.isfinite(f) else None


def frequency_metrics(plant: Rational, comp: Rational) -> dict[str, Any]:
    """Frequency metrics of one design, JSON-ready (None = null, lists for
    ``crossovers_rad_s``)."""
    if comp.relative_degree < 0:
        raise DesignError("compensator is improper (more zeros than poles)")
    batch = frequency_metrics_batch(
        plant,
        np.array([comp.gain]),
        np.array([comp.zeros], dtype=complex).reshape(1, -1),
        np.array([comp.poles], dtype=complex).reshape(1, -1),
    )
    out: dict[str, Any] = {}
    for key, arr in batch.items():
        if key == "crossovers_rad_s":
            out[key] = [float(w) for w in arr[0] if np.isfinite(w)]
        else:
            out[key] = _scalar(arr[0])
    # ω at a peak may be a limit (0 or ∞): keep 0.0, null for ∞
    return out


def lower_per_row(rows: np.ndarray, values: np.ndarray, ln_w: np.ndarray,
                  best: np.ndarray, best_w: np.ndarray) -> None:
    """For each row, the smallest of ``values`` (candidates of that row at ln ω
    ``ln_w``) replaces ``best[row]`` (and ω replaces ``best_w[row]``) when lower; in
    place. Ties between candidates go to the first in (row, value) order."""
    order = np.lexsort((values, rows))
    rs, fs, xs = rows[order], values[order], ln_w[order]
    first = np.r_[True, rs[1:] != rs[:-1]]
    rs, fs, xs = rs[first], fs[first], xs[first]
    better = fs < best[rs]
    best[rs[better]] = fs[better]
    best_w[rs[better]] = np.exp(xs[better])
