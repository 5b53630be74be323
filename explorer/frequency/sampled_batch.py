"""The sampled loop of many designs at once: discretization, frequency readings and
stability as numpy batches over the designs (the search's evaluation; docs/implement.md
"The sampled loop" gives every definition, explorer.frequency.sampled the one-design version).

A batch is the compensators of one structure, C(s) = k·Π(s − zᵢ)/Π(s − pᵢ) with arrays
``gain (n,)``, ``zeros (n, nz)``, ``poles (n, np)`` (nz ≤ np), each discretized by Tustin
with prewarping at its own frequency (the design's crossover). The sampled plant H(z)
(explorer.frequency.sampled.sample_plant: exact ZOH, plant delay and computation delay) is one
for the batch: its frequency response on the shared grid is computed once, C(z) of the
batch is one vectorised evaluation, crossovers and phase crossovers are bracketed on
the grid and refined by bisection over all (design, bracket) pairs together, the peaks
by golden-section search, and closed-loop stability comes from the eigenvalues of the
stacked closed-loop matrices (``np.linalg.eigvals`` on an ``(n, N, N)`` stack) — or,
when a long delay makes N large, from a batched argument count on the unit circle.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from explorer.core.loop import LoopBatch, Rational
from explorer.frequency.sampled import (
    MAX_EIG_STATES,
    STABILITY_TOL,
    SampledPlant,
    bracketing_grid,
    contour_angles,
    golden_max,
)

__all__ = [
    "plant_evaluator",
    "DiscreteBatch",
    "discretize_batch",
    "poly_rows",
    "closed_loop_matrices",
    "sampled_metrics_batch",
    "FREQ_KEYS",
]

#: The METRICS keys the sampled loop replaces (the compensator's own figures — hf gain,
#: integral gain, noise — stay those of C(s)).
FREQ_KEYS = ("crossover_rad_s", "crossovers_rad_s", "phase_margin_deg", "gain_margin_db",
             "phase_crossover_rad_s", "delay_margin_s", "sensitivity_peak",
             "complementary_peak", "closed_loop_stable")

_BISECT_ITERS = 64
_PEAK_CANDIDATES = 4


@dataclass(frozen=True, kw_only=True)
class DiscreteBatch:
    """C(z) = gain·Π(z − zeros)/Π(z − poles) for n designs; ``valid`` False where the
    prewarp frequency is outside (0, π/T) or a root maps to z = ∞ (such a row has NaN
    roots)."""

    gain: np.ndarray  # (n,)
    zeros: np.ndarray  # (n, np): the mapped zeros and one −1 per excess pole
    poles: np.ndarray  # (n, np)
    sample_time_s: float
    valid: np.ndarray  # (n,) bool

    @property
    def n(self) -> int:
        return int(self.gain.shape[0])

    def at_z(self, z: np.ndarray) -> np.ndarray:
        """C(z) at points z of shape (n, k) (row i evaluated with design i)."""
        val = np.broadcast_to(self.gain[:, None], z.shape).astype(complex)
        for j in range(self.zeros.shape[1]):
            val = val * (z - self.zeros[:, j, None])
        for j in range(self.poles.shape[1]):
            val = val / (z - self.poles[:, j, None])
        return val


def discretize_batch(gain: np.ndarray, zeros: np.ndarray, poles: np.ndarray,
                     sample_time_s: float, prewarp_rad_s: np.ndarray) -> DiscreteBatch:
    """Tustin with prewarping, row by row: s ← c·(z − 1)/(z + 1), c = ωp/tan(ωp·T/2),
    root r → (c + r)/(c − r), gain k·Π(c − zᵢ)/Π(c − pᵢ), a zero at −1 per excess pole
    (the map of explorer.frequency.sampled.discretize, vectorised)."""
    T = float(sample_time_s)
    g = np.asarray(gain, float).ravel()
    n = g.shape[0]
    zs = _rows(zeros, n)
    ps = _rows(poles, n)
    wp = np.asarray(prewarp_rad_s, float).ravel()
    ok = np.isfinite(wp) & (wp > 0) & (wp < math.pi / T)
    ok &= np.all(np.isfinite(zs), axis=1) & np.all(np.isfinite(ps), axis=1) & np.isfinite(g)
    wps = np.where(ok, wp, 1.0 / T)
    c = wps / np.tan(wps * T / 2.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        roots = np.concatenate([zs, ps], axis=1)
        ok &= np.all(np.abs(c[:, None] - roots) > 1e-12 * c[:, None], axis=1)
        zd = (c[:, None] + zs) / (c[:, None] - zs)
        pd = (c[:, None] + ps) / (c[:, None] - ps)
        gd = np.real(g * np.prod(c[:, None] - zs, axis=1) / np.prod(c[:, None] - ps, axis=1))
    extra = ps.shape[1] - zs.shape[1]
    zd = np.concatenate([zd, -np.ones((n, extra), complex)], axis=1)
    nan = complex(np.nan, np.nan)
    return DiscreteBatch(gain=np.where(ok, gd, np.nan), zeros=np.where(ok[:, None], zd, nan),
                         poles=np.where(ok[:, None], pd, nan), sample_time_s=T, valid=ok)


def _rows(a: np.ndarray, n: int) -> np.ndarray:
    """Roots as (n, k) complex (k from a 2-D input, so that n = 0 works)."""
    x = np.asarray(a, complex)
    if x.ndim == 2:
        return x.reshape(n, x.shape[1])
    return x.reshape(n, -1) if n else np.zeros((0, 0), complex)


def poly_rows(roots: np.ndarray) -> np.ndarray:
    """Monic polynomial coefficients (highest power first) of each row's roots, real
    part (conjugate-closed rows): (n, k) → (n, k + 1)."""
    n, k = roots.shape
    c = np.zeros((n, k + 1), complex)
    c[:, 0] = 1.0
    for j in range(k):
        c[:, 1:j + 2] = c[:, 1:j + 2] - roots[:, j, None] * c[:, 0:j + 1]
    return np.real(c)


def closed_loop_matrices(sp: SampledPlant, dc: DiscreteBatch) -> np.ndarray:
    """The sampled closed-loop state matrices of the batch, (n, N, N): plant states,
    controller states (controllable canonical form of C(z) from its coefficients) and
    the past inputs u[k−1] ... u[k−d−1] — explorer.frequency.sampled.closed_loop_matrix for
    every row at once. Their eigenvalues are the closed-loop poles in z."""
    return closed_loop_parts(sp, dc)["F"]


def closed_loop_parts(sp: SampledPlant, dc: DiscreteBatch) -> dict[str, Any]:
    """:func:`closed_loop_matrices` with the pieces a simulation needs: ``F``; ``Ku``
    and ``y_row`` (u[k] = Ku·X + b0/den·(r − dp·load), y[k] = y_row·X + Yu·(u terms)
    + dp·load); ``b0``, ``den``, ``Yu``, ``dp``; the block sizes ``n``, ``nc``."""
    rows = dc.n
    nc = dc.poles.shape[1]
    a = poly_rows(dc.poles)  # (rows, nc+1), a0 = 1
    b = dc.gain[:, None] * poly_rows(dc.zeros)  # equal degree (zeros padded with −1)
    n, m = sp.n, sp.d + 1
    N = n + nc + m
    b0 = b[:, 0]
    Cc = b[:, 1:] - b0[:, None] * a[:, 1:]  # (rows, nc)
    dp = float(sp.dmat[0, 0])
    Yx = np.zeros(N)
    Yx[:n] = sp.c[0]
    Yu = 0.0
    if sp.eps_s > 0:
        Yx[n + nc + sp.d] += dp
    elif sp.d > 0:
        Yx[n + nc + sp.d - 1] += dp
    else:
        Yu = dp
    den = 1.0 + b0 * Yu
    den = np.where(np.abs(den) < 1e-12, np.nan, den)
    Ku = np.zeros((rows, N))
    Ku[:, n:n + nc] = Cc
    Ku = (Ku - b0[:, None] * Yx[None, :]) / den[:, None]
    y_row = Yx[None, :] + Yu * Ku
    F = np.zeros((rows, N, N))
    F[:, :n, :n] = sp.phi
    eye = np.eye(N)
    v0 = Ku if sp.d == 0 else np.broadcast_to(eye[n + nc + sp.d - 1], (rows, N))
    v1 = eye[n + nc + sp.d]
    F[:, :n, :] += sp.gamma0[None, :, :] * v0[:, None, :] + (sp.gamma1 @ v1[None, :])[None]
    if nc:
        F[:, n, n:n + nc] = -a[:, 1:]
        for i in range(1, nc):
            F[:, n + i, n + i - 1] = 1.0
        F[:, n, :] -= y_row  # Bc = e1: xc' = Ac xc + e1·(−y)
    F[:, n + nc, :] = Ku
    for i in range(1, m):
        F[:, n + nc + i, n + nc + i - 1] = 1.0
    return {"F": F, "Ku": Ku, "y_row": y_row, "b0": b0, "den": den, "Yu": Yu, "dp": dp,
            "n": n, "nc": nc, "gamma0": sp.gamma0[:, 0] if sp.d == 0 else None}


def _grid(sp: SampledPlant, dc: DiscreteBatch, cont: LoopBatch,
          extra_rad_s: np.ndarray) -> np.ndarray:
    """The shared bracketing grid in (0, π/T]
    (explorer.frequency.sampled.bracketing_grid over the union of the batch's roots)."""
    T = sp.sample_time_s
    wn = math.pi / T
    roots = np.concatenate([cont.zeros.ravel(), cont.poles.ravel()])
    roots = roots[np.isfinite(roots)]
    mags = np.abs(roots[roots != 0])
    ex = extra_rad_s[np.isfinite(extra_rad_s) & (extra_rad_s > 0)]
    lo = min(wn, *(ex.tolist() or [wn]), *(mags.tolist() or [wn])) / 300.0
    droots = np.concatenate([dc.zeros.ravel(), dc.poles.ravel(),
                             np.exp(np.unique(roots) * T)])
    droots = droots[np.isfinite(droots)]
    droots = droots[np.abs(droots) > 0.3]
    if droots.size:
        droots = np.unique(np.round(droots, 12))  # many designs share roots
    return bracketing_grid(T, lo, sp.d, droots)


#: The modal form of H(z) is used when the eigenvector matrix of Φ is conditioned better
#: than this (relative error about cond·eps); else the linear solve per point.
MODAL_COND_MAX = 1e6


def plant_evaluator(sp: SampledPlant) -> Any:
    """H(z) of the sampled plant as a vectorised function of z: the modal (partial
    fraction) form Σ rᵢ(z)/(z − λᵢ) over the eigenvalues λᵢ of Φ when its eigenvector
    matrix is well conditioned (cond < MODAL_COND_MAX) — a few array operations per
    call instead of one linear solve per point — else SampledPlant.at_z. Same function
    of z (tests/test_sampled_batch.py compares the two)."""
    n = sp.n
    if n == 0:
        return sp.at_z
    lam, V = np.linalg.eig(sp.phi)
    if not np.all(np.isfinite(V)) or np.linalg.cond(V) >= MODAL_COND_MAX:
        return sp.at_z
    cv = sp.c[0].astype(complex) @ V
    W = np.linalg.solve(V, np.concatenate([sp.gamma0, sp.gamma1], axis=1).astype(complex))
    r0, r1 = cv * W[:, 0], cv * W[:, 1]
    dp = float(sp.dmat[0, 0])
    frac = sp.eps_s > 0
    d = sp.d

    def at_z(z: np.ndarray) -> np.ndarray:
        z = np.asarray(z, complex).ravel()
        zinv = 1.0 / z
        inv = 1.0 / (z[:, None] - lam[None, :])
        val = inv @ r0 + zinv * (inv @ r1) + dp * (zinv if frac else 1.0)
        return val * zinv ** d

    return at_z


def _bisect_pairs(f: Any, rows: np.ndarray, a: np.ndarray, b: np.ndarray,
                  fa: np.ndarray) -> np.ndarray:
    """The root of f(rows, ·) in each bracket [a, b] (f(a), f(b) of opposite signs), to
    machine precision: the Illinois variant of regula falsi (Dowell & Jarratt, BIT 11,
    1971), every fourth step a bisection so the bracket at least halves; stops when
    every bracket is down to a few ulps (at most _BISECT_ITERS steps)."""
    a, b = a.copy(), b.copy()
    fa = np.asarray(fa, float).copy()
    fb = f(rows, b)
    for it in range(_BISECT_ITERS):
        scale = np.maximum(np.abs(a), np.abs(b))
        if np.all((np.abs(b - a) <= 4e-16 * scale) | (fb == 0) | ~np.isfinite(fb)):
            break
        mid = 0.5 * (a + b)
        with np.errstate(divide="ignore", invalid="ignore"):
            c = b - fb * (b - a) / (fb - fa)
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        use = (it % 4 != 3) & np.isfinite(c) & (c > lo) & (c < hi)
        c = np.where(use, c, mid)
        fc = f(rows, c)
        flip = np.sign(fc) != np.sign(fb)
        # opposite signs at c and b: the bracket becomes [b, c]; same sign: [a, c] with
        # f(a) halved (the Illinois step that stops one end from sticking)
        a = np.where(flip, b, a)
        fa = np.where(flip, fb, np.where(use, 0.5 * fa, fa))
        b, fb = c, fc
    return np.where(np.abs(fa) < np.abs(fb), a, b)


def _per_row_min(rows: np.ndarray, vals: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """(min value, index into vals of it) per row; NaN / −1 for rows without entries."""
    best = np.full(n, np.inf)
    np.minimum.at(best, rows, vals)
    arg = np.full(n, -1)
    hit = np.flatnonzero(vals == best[rows])
    arg[rows[hit[::-1]]] = hit[::-1]  # the first index attaining the minimum
    return np.where(np.isinf(best), np.nan, best), arg


def sampled_metrics_batch(sp: SampledPlant, dc: DiscreteBatch, comp_gain: np.ndarray,
                          comp_zeros: np.ndarray, comp_poles: np.ndarray, *,
                          full: bool = True) -> dict[str, np.ndarray]:
    """The sampled-loop readings of explorer.frequency.sampled.sampled_loop_metrics for every row:
    arrays (n,) with NaN for null, ``crossovers_rad_s`` (n, k) padded with NaN,
    ``closed_loop_stable`` bool. ``comp_*`` is C(s) (it anchors the phase branch at low
    frequency, as in the one-design version). Rows with ``dc.valid`` False are unstable
    with NaN readings. ``full=False`` stops after the gain crossovers (crossovers, phase
    and delay margins only; the other keys NaN, stability False): what a correction
    pass of explorer.design.sampled_design needs."""
    T = sp.sample_time_s
    wn = math.pi / T
    n = dc.n
    out: dict[str, Any] = {k: np.full(n, np.nan) for k in FREQ_KEYS}
    out["closed_loop_stable"] = np.zeros(n, bool)
    out["crossovers_rad_s"] = np.full((n, 1), np.nan)
    out["closed_loop_pole_radius"] = np.full(n, np.nan)
    ok = np.flatnonzero(dc.valid)
    if ok.size == 0:
        return out
    d = DiscreteBatch(gain=dc.gain[ok], zeros=dc.zeros[ok], poles=dc.poles[ok],
                      sample_time_s=T, valid=dc.valid[ok])
    cont = LoopBatch.series(sp.plant, np.asarray(comp_gain, float).ravel()[ok],
                            _rows(comp_zeros, n)[ok], _rows(comp_poles, n)[ok])
    cont = LoopBatch(gain=cont.gain, zeros=cont.zeros, poles=cont.poles,
                     delay_s=np.full(ok.size, sp.delay_s))
    m = ok.size
    grid = _grid(sp, d, cont, np.array([np.nan]))
    zg = np.exp(1j * grid * T)
    H = plant_evaluator(sp)
    Hg = H(zg)

    def loop_at(rows: np.ndarray, w: np.ndarray) -> np.ndarray:
        z = np.exp(1j * w * T)
        sub = DiscreteBatch(gain=d.gain[rows], zeros=d.zeros[rows], poles=d.poles[rows],
                            sample_time_s=T, valid=d.valid[rows])
        return sub.at_z(z[:, None])[:, 0] * H(z)

    L = d.at_z(np.broadcast_to(zg, (m, grid.size))) * Hg[None, :]
    with np.errstate(divide="ignore"):
        logmag = np.log(np.abs(L))
    raw = np.unwrap(np.angle(L), axis=1)
    r0 = np.arange(m)
    w0 = np.full(m, grid[0])
    anchor = cont.phase_at(r0, w0)
    lc0 = cont.freqresp(grid[:1])[:, 0]
    anchor = anchor + np.angle(L[:, 0] / lc0)
    phase = raw + 2.0 * math.pi * np.round((anchor - raw[:, 0]) / (2.0 * math.pi))[:, None]
    fin = np.isfinite(logmag)

    def local_phase(rows: np.ndarray, cols: np.ndarray, w: np.ndarray) -> np.ndarray:
        return phase[rows, cols] + np.angle(loop_at(rows, w) / L[rows, cols])

    # gain crossovers over every (row, bracket)
    sg = np.sign(np.where(fin, logmag, -np.inf))
    ri, ci = np.nonzero((sg[:, :-1] * sg[:, 1:] < 0) & fin[:, :-1] & fin[:, 1:])
    if ri.size:
        wx = _bisect_pairs(lambda r, w: np.log(np.abs(loop_at(r, w))), ri,
                           grid[ci], grid[ci + 1], logmag[ri, ci])
        pm = np.degrees(local_phase(ri, ci, wx)) + 180.0
        pm = pm - 360.0 * np.ceil((pm - 180.0) / 360.0)
        pm_min, arg = _per_row_min(ri, pm, m)
        has = arg >= 0
        wc = np.where(has, wx[np.maximum(arg, 0)], np.nan)
        dm = np.where(pm > 0, np.radians(pm) / wx, 0.0)
        dmin, _ = _per_row_min(ri, dm, m)
        counts = np.bincount(ri, minlength=m)
        xs = np.full((m, max(1, int(counts.max()))), np.nan)
        pos = np.arange(ri.size) - np.concatenate([[0], np.cumsum(counts)[:-1]])[ri]
        xs[ri, pos] = wx
    else:
        pm_min = wc = dmin = np.full(m, np.nan)
        xs = np.full((m, 1), np.nan)
    if not full:
        for k, v in (("crossover_rad_s", wc), ("phase_margin_deg", pm_min),
                     ("delay_margin_s", dmin)):
            out[k][ok] = v
        cx = np.full((n, xs.shape[1]), np.nan)
        cx[ok] = xs
        out["crossovers_rad_s"] = cx
        return out
    # phase crossovers (phase ≡ −180° mod 360°) with |L| < 1, and z = −1
    lev = np.floor((phase + math.pi) / (2.0 * math.pi))
    rj, cj = np.nonzero((lev[:, :-1] != lev[:, 1:]) & fin[:, :-1] & fin[:, 1:])
    gm_r, gm_v, gm_w = [], [], []
    if rj.size:
        level = -math.pi + 2.0 * math.pi * np.maximum(lev[rj, cj], lev[rj, cj + 1])
        wp = _bisect_pairs(lambda r, w: local_phase(r, cj, w) - level, rj, grid[cj],
                           grid[cj + 1], phase[rj, cj] - level)
        gm_r.append(rj)
        gm_v.append(np.abs(loop_at(rj, wp)))
        gm_w.append(wp)
        last = np.full(m, -np.inf)
        np.maximum.at(last, rj, wp)
    else:
        last = np.full(m, -np.inf)
    l_end = L[:, -1]
    end = (l_end.real < 0) & (np.abs(l_end) > 0) & (last < wn * (1 - 1e-9))
    gm_r.append(np.flatnonzero(end))
    gm_v.append(np.abs(l_end[end]))
    gm_w.append(np.full(int(end.sum()), wn))
    pr, pv, pw = (np.concatenate(gm_r), np.concatenate(gm_v), np.concatenate(gm_w))
    below = pv < 1.0
    gm_db, garg = _per_row_min(pr[below], -20.0 * np.log10(pv[below]), m)
    w_gm = np.where(garg >= 0, pw[below][np.maximum(garg, 0)] if below.any() else np.nan, np.nan)
    # peaks |S| and |T|
    (ms, w_ms), (mt, w_mt) = _peaks(loop_at, L, grid)
    # stability
    N = sp.n + d.poles.shape[1] + sp.d + 1
    if N <= MAX_EIG_STATES:
        F = closed_loop_matrices(sp, d)
        bad = ~np.all(np.isfinite(F), axis=(1, 2))
        eig = np.linalg.eigvals(np.where(bad[:, None, None], 0.0, F)) if N else np.zeros((m, 0))
        radius = np.max(np.abs(eig), axis=1) if N else np.zeros(m)
        radius = np.where(bad, np.inf, radius)
        stable = radius < 1.0 - STABILITY_TOL
    else:
        radius = np.full(m, np.nan)
        stable = _argument_count(sp, d, grid) == 0
    res = {
        "crossover_rad_s": wc, "phase_margin_deg": pm_min, "gain_margin_db": gm_db,
        "phase_crossover_rad_s": w_gm, "delay_margin_s": dmin, "sensitivity_peak": ms,
        "complementary_peak": mt, "closed_loop_stable": stable,
        "closed_loop_pole_radius": radius, "sensitivity_peak_rad_s": w_ms,
        "complementary_peak_rad_s": w_mt,
    }
    for k, v in res.items():
        if k not in out:
            out[k] = np.full(n, np.nan)
        out[k][ok] = v
    cx = np.full((n, xs.shape[1]), np.nan)
    cx[ok] = xs
    out["crossovers_rad_s"] = cx
    return out


def _peaks(loop_at: Any, L: np.ndarray, grid: np.ndarray
           ) -> tuple[tuple[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]:
    """Per row, (value, ω) of the peaks of |S| = 1/|1 + L| and |T| = |L/(1 + L)|: the
    largest value over the grid (the first point standing for ω → 0), the
    _PEAK_CANDIDATES largest interior grid maxima refined by golden-section search in
    ln ω (explorer.frequency.sampled._peak, vectorised; both peaks in one search)."""
    m = L.shape[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        both = (1.0 / np.abs(1.0 + L), np.abs(L / (1.0 + L)))
    bests, rr_all, cc_all, flag_all = [], [], [], []
    for which, vals in enumerate(both):
        v = np.where(np.isfinite(vals), vals, np.inf)
        best_i = np.argmax(v, axis=1)
        best_v = v[np.arange(m), best_i]
        best_w = np.where(best_i == 0, 0.0, grid[best_i])
        bests.append((best_v, best_w))
        interior = (v[:, 1:-1] >= v[:, :-2]) & (v[:, 1:-1] >= v[:, 2:])
        score = np.where(interior, v[:, 1:-1], -np.inf)
        k = min(_PEAK_CANDIDATES, score.shape[1])
        if k == 0:
            continue
        top = np.argsort(-score, axis=1, kind="stable")[:, :k]
        rr = np.repeat(np.arange(m), k)
        cc = top.ravel() + 1
        keep = np.isfinite(score[rr, cc - 1]) & ~np.isinf(best_v)[rr]
        rr_all.append(rr[keep])
        cc_all.append(cc[keep])
        flag_all.append(np.full(int(keep.sum()), which))
    if rr_all and sum(r.size for r in rr_all):
        rr, cc, flag = np.concatenate(rr_all), np.concatenate(cc_all), np.concatenate(flag_all)

        def f(lw: np.ndarray) -> np.ndarray:
            lv = loop_at(rr, np.exp(lw))
            with np.errstate(divide="ignore", invalid="ignore"):
                return np.where(flag == 0, 1.0 / np.abs(1.0 + lv), np.abs(lv / (1.0 + lv)))

        x, fx = golden_max(f, np.log(grid[cc - 1]), np.log(grid[cc + 1]))
        for which in (0, 1):
            sel = flag == which
            r_w, x_w, f_w = rr[sel], x[sel], fx[sel]
            if not r_w.size:
                continue
            best_v, best_w = bests[which]
            order = np.lexsort((-f_w, r_w))
            first = order[np.r_[True, r_w[order][1:] != r_w[order][:-1]]]
            first = first[f_w[first] > best_v[r_w[first]]]
            best_v[r_w[first]] = f_w[first]
            best_w[r_w[first]] = np.exp(x_w[first])
    return bests[0], bests[1]


def _argument_count(sp: SampledPlant, d: DiscreteBatch, grid: np.ndarray) -> np.ndarray:
    """Closed-loop roots with |z| ≥ 1 − STABILITY_TOL per row by the argument principle
    (explorer.frequency.sampled.closed_loop_roots_outside, vectorised over the rows)."""
    T = sp.sample_time_s
    rho = 1.0 - STABILITY_TOL
    m = d.n
    plant_poles = np.exp(np.array(sp.plant.poles, complex) * T)
    p_out = np.sum(np.abs(d.poles) >= rho, axis=1) + int(np.sum(np.abs(plant_poles) >= rho))
    z = rho * np.exp(1j * contour_angles(grid, T, np.concatenate([d.poles.ravel(),
                                                                  plant_poles])))
    f = 1.0 + d.at_z(np.broadcast_to(z, (m, z.size))) * plant_evaluator(sp)(z)[None, :]
    arg = np.unwrap(np.angle(f), axis=1)
    winding = np.round((arg[:, -1] - arg[:, 0]) / math.pi).astype(int)
    return p_out - winding


def continuous_rows(plant: Rational, gain: np.ndarray, zeros: np.ndarray,
                    poles: np.ndarray) -> list[Rational]:
    """Row i of a compensator batch as a Rational (for one-design cross-checks)."""
    return [Rational(gain=float(gain[i]), zeros=tuple(zeros[i]), poles=tuple(poles[i]))
            for i in range(np.asarray(gain).shape[0])]
