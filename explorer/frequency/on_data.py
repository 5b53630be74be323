"""Loop metrics computed on a measured sweep (docs/measured-data.md): crossovers,
margins and peaks of L = C·P̂, with P̂ the sweep's interpolant
(:class:`explorer.model.sweep.SweepInterpolant`) and an error bound on every figure.

The compensator C is analytic (an :class:`explorer.core.loop.Rational` or a batch of them):
it is evaluated exactly, so L = C·P̂ is only as uncertain as P̂.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from explorer.core.errors import DesignError
from explorer.core.loop import LoopBatch, Rational
from explorer.model.sweep import (
    MeasuredResponse,
    SweepInterpolant,
    estimate_integrators,
    interpolant,
)

__all__ = ["loop_metrics_on_data", "loop_metrics_on_data_batch", "SUBDIVISIONS"]

#: Evaluation points per measured interval (the grid on which events are bracketed).
SUBDIVISIONS = 8
#: Decades below the band covered by the low-frequency extrapolation (Nyquist count).
_EXTRA_DECADES = 8.0
#: Illinois steps, then bisection steps on the bracket left (events on the interpolant)
_ROOT_ITERS = 16
_BISECT_ITERS = 8
#: golden-section steps (0.618^32 ≈ 2e-7 of the bracket between grid neighbours: a peak's
#: location to ~1e-8 in ln ω, its value, quadratic there, to ~1e-14)
_GOLDEN_ITERS = 32


# --------------------------------------------------------------------------------------
# vectorised scalar solvers on (row, bracket) arrays
# --------------------------------------------------------------------------------------
def _bisect(fun, rows: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Root of fun(rows, x) in [a, b] (a sign change assumed), vectorised: regula
    falsi with the Illinois modification (M. Dowell and P. Jarratt, "A modified regula
    falsi method for computing the root of an equation", BIT 11, 1971), which keeps the
    root bracketed and converges superlinearly, then bisection steps on what is left of
    the bracket. The result lies in the final bracket (width below 1e-12 of ln ω on the
    smooth interpolant; tests/test_measured.py compares with the models' roots)."""
    fa = fun(rows, a)
    fb = fun(rows, b)
    side = np.zeros(a.shape, dtype=int)
    x = 0.5 * (a + b)
    for _ in range(_ROOT_ITERS):
        den = fb - fa
        ok = (den != 0) & np.isfinite(den)
        x = np.where(ok, b - fb * (b - a) / np.where(ok, den, 1.0), 0.5 * (a + b))
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        x = np.where((x > lo) & (x < hi), x, 0.5 * (a + b))
        fx = fun(rows, x)
        zero = fx == 0
        with_b = (np.sign(fx) == np.sign(fb)) & ~zero
        with_a = ~with_b & ~zero
        fa = np.where(with_b & (side == -1), 0.5 * fa, fa)
        fb = np.where(with_a & (side == 1), 0.5 * fb, fb)
        b, fb = np.where(with_b, x, b), np.where(with_b, fx, fb)
        a, fa = np.where(with_a, x, a), np.where(with_a, fx, fa)
        a = np.where(zero, x, a)
        b = np.where(zero, x, b)
        side = np.where(with_b, -1, np.where(with_a, 1, side))
    for _ in range(_BISECT_ITERS):  # whatever bracket is left, halved to the last bits
        m = 0.5 * (a + b)
        fm = fun(rows, m)
        left = (np.sign(fm) == np.sign(fa)) & (fm != 0)
        a = np.where(left, m, a)
        fa = np.where(left, fm, fa)
        b = np.where(left | (fm == 0), np.where(fm == 0, m, b), m)
        a = np.where(fm == 0, m, a)
    return 0.5 * (a + b)


def _golden_min(
    fun, rows: np.ndarray, a: np.ndarray, b: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Minimum of fun(rows, x) on [a, b] by golden-section search (vectorised; one new
    evaluation per row and step)."""
    g = (math.sqrt(5.0) - 1.0) / 2.0
    c = b - g * (b - a)
    d = a + g * (b - a)
    fc, fd = fun(rows, c), fun(rows, d)
    for _ in range(_GOLDEN_ITERS):
        left = fc < fd
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        c_new = b - g * (b - a)
        d_new = a + g * (b - a)
        x_new = np.where(left, c_new, d_new)
        f_new = fun(rows, x_new)
        c, d = np.where(left, c_new, d), np.where(left, c, d_new)
        fc, fd = np.where(left, f_new, fd), np.where(left, fc, f_new)
    x = 0.5 * (a + b)
    return x, fun(rows, x)


# --------------------------------------------------------------------------------------
# metrics on data
# --------------------------------------------------------------------------------------
_DB = 20.0 / math.log(10.0)


def loop_metrics_on_data_batch(
    data: MeasuredResponse,
    comp_gain: np.ndarray,
    comp_zeros: np.ndarray,
    comp_poles: np.ndarray,
    *,
    unstable_poles: int = 0,
    plant_integrators: int | None = None,
) -> list[dict[str, Any]]:
    """Frequency metrics of a batch of compensators (one structure) on one measured
    plant: one JSON-ready dict per design (see :func:`loop_metrics_on_data`).

    ``unstable_poles``: open-loop right-half-plane poles of the plant (the data
    cannot show them). ``plant_integrators``: poles of the plant at s = 0; None =
    estimated from the slope of the lowest three points (stated in ``assumptions``).
    """
    gain = np.asarray(comp_gain, dtype=float).ravel()
    n = gain.shape[0]
    comps = LoopBatch(
        gain=gain,
        zeros=np.asarray(comp_zeros, dtype=complex).reshape(n, -1),
        poles=np.asarray(comp_poles, dtype=complex).reshape(n, -1),
        delay_s=np.zeros(n),
    )
    if comps.relative_degree < 0:
        raise DesignError("compensator is improper (more zeros than poles)")
    n_int_est = plant_integrators is None
    n_int = estimate_integrators(data) if plant_integrators is None else int(plant_integrators)
    plant = interpolant(data, n_int)
    wlo, whi = data.band_rad_s

    # ---- the evaluation grid: measured points subdivided, plus points clustered on
    # lightly damped compensator roots; below the band, the extrapolation grid.
    t = np.arange(SUBDIVISIONS) / SUBDIVISIONS
    xb = (plant.x[:-1, None] + t[None, :] * np.diff(plant.x)[:, None]).ravel()
    xb = np.append(xb, plant.x_hi)
    croots = np.concatenate([comps.zeros, comps.poles], axis=1)
    extra = np.zeros((n, 0))
    if croots.shape[1]:
        mag = np.abs(croots)
        with np.errstate(divide="ignore", invalid="ignore"):
            zeta = np.where(mag > 0, np.abs(croots.real) / np.where(mag > 0, mag, 1.0), 1.0)
        u = np.array([-8.0, -4.0, -2.0, -1.0, -0.4, 0.0, 0.4, 1.0, 2.0, 4.0, 8.0])
        light = (zeta < 0.6) & (np.abs(croots.imag) > 0)
        pts = np.log(np.where(light, np.abs(croots.imag), wlo))[:, :, None] + (
            u[None, None, :] * np.where(light, zeta, 0.0)[:, :, None])
        extra = np.clip(pts.reshape(n, -1), plant.x_lo, plant.x_hi)
    xin = np.sort(np.concatenate([np.broadcast_to(xb, (n, xb.size)), extra], axis=1), axis=1)
    n_below = int(_EXTRA_DECADES * 8)
    xlow = plant.x_lo - np.log(10.0) * _EXTRA_DECADES * (1 - np.arange(n_below) / n_below)
    rows_all = np.arange(n)

    def loop(rows: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        w = np.exp(x)
        lc, _ = comps.log_mag_at(rows, w)
        pc = comps.phase_at(rows, w)
        lp, pp = plant.eval(x)
        return lc + lp, pc + pp

    def on_grid(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        r = np.repeat(rows_all, x.shape[1])
        a, b = loop(r, x.ravel())
        return a.reshape(x.shape), b.reshape(x.shape)

    lm_in, ph_in = on_grid(xin)
    lm_lo, ph_lo = on_grid(np.broadcast_to(xlow, (n, n_below)))

    def lnmag_f(rows: np.ndarray, x: np.ndarray) -> np.ndarray:
        return loop(rows, x)[0]

    # ---- gain crossovers (in band), and below the band (extrapolation)
    def sign_changes(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        r, k = np.nonzero(np.sign(v[:, :-1]) * np.sign(v[:, 1:]) < 0)
        return r, k

    gr, gk = sign_changes(lm_in)
    xg = _bisect(lnmag_f, gr, xin[gr, gk], xin[gr, gk + 1]) if gr.size else np.zeros(0)
    lr, _ = sign_changes(np.concatenate([lm_lo, lm_in[:, :1]], axis=1))
    below_cross = np.zeros(n, dtype=bool)
    below_cross[lr] = True

    # ---- phase crossovers: the continuous phase passes −180° mod 360°
    def level_index(ph: np.ndarray) -> np.ndarray:
        return np.floor((ph - math.pi) / (2.0 * math.pi))

    x_all = np.concatenate([np.broadcast_to(xlow, (n, n_below)), xin], axis=1)
    ph_all = np.concatenate([ph_lo, ph_in], axis=1)
    kidx = level_index(ph_all)
    dk = kidx[:, :-1] - kidx[:, 1:]  # > 0: phase falling through −180° (clockwise)
    pr, pk = np.nonzero(dk != 0)
    if pr.size:
        level = math.pi + 2.0 * math.pi * np.maximum(kidx[pr, pk], kidx[pr, pk + 1])

        def ph_f(rows: np.ndarray, x: np.ndarray, _lev=level) -> np.ndarray:
            return loop(rows, x)[1] - _lev

        xp = _bisect(ph_f, pr, x_all[pr, pk], x_all[pr, pk + 1])
    else:
        xp = np.zeros(0)
    signed = dk[pr, pk] if pr.size else np.zeros(0)

    # ---- the passage from −jε to +jε (an arc of m0·π clockwise at infinity for m0
    # integrators, a point crossing for none) for the Nyquist count; the angle at −jε
    # is −∠L(jε), and the turn is the one ≡ −2∠L(jε) (mod 2π) nearest m0·π
    m0 = n_int + comps.n_origin_poles()
    th_eps = ph_all[:, 0]
    raw = -2.0 * th_eps
    turn = raw + 2.0 * math.pi * np.round((m0 * math.pi - raw) / (2.0 * math.pi))
    arc = _arc_count(th_eps + turn, th_eps)
    # without an integrator the passage is the point L(0): it crosses the ray
    # (−∞, −1) only if |L(0)| > 1
    arc = np.where((m0 > 0) | (lm_lo[:, 0] > 0), arc, 0)
    n_rhp_c = comps.n_rhp_poles()
    p_rhp = unstable_poles + n_rhp_c

    # ---- peaks of |S| and |T| on the band, refined together: row r < n is |1 + L| of
    # design r, row n + r is |1 + 1/L| of design r (one loop evaluation per step)
    def dist_both(rows: np.ndarray, x: np.ndarray) -> np.ndarray:
        a, b = loop(rows % n, x)
        sgn = np.where(rows >= n, -1.0, 1.0)
        return np.abs(1.0 + np.exp(sgn * (a + 1j * b)))

    L_in = np.exp(lm_in + 1j * ph_in)
    both, both_x = _peak(dist_both, np.concatenate([np.abs(1 + L_in), np.abs(1 + 1 / L_in)]),
                         np.concatenate([xin, xin]))
    ms, ms_x, mt, mt_x = both[:n], both_x[:n], both[n:], both_x[n:]

    # ---- what the per-design assembly reads at its events, evaluated as batches: the
    # loop, its slopes in ln ω and the error estimate at every gain crossover, every
    # phase crossover and both peaks
    at_g = _local(loop, plant, gr, xg)
    at_p = _local(loop, plant, pr, xp)
    at_k = _local(loop, plant, np.concatenate([rows_all, rows_all]),
                  np.concatenate([ms_x, mt_x]))
    by_g, by_p = _groups(gr, n), _groups(pr, n)

    hf = comps.relative_degree
    out: list[dict[str, Any]] = []
    for i in range(n):
        out.append(_assemble(
            i, data, plant, comps,
            _Events(at_g, by_g[i]), _Events(at_p, by_p[i]), signed[by_p[i]],
            bool(below_cross[i]), int(arc[i]), int(p_rhp[i]), int(n_rhp_c[i]), int(m0[i]),
            (ms[i], ms_x[i]), (mt[i], mt_x[i]), _Events(at_k, np.array([i, n + i])),
            lm_in[i], lm_lo[i], ph_lo[i],
            n_int, n_int_est, unstable_poles,
            hf,
        ))
    return out


_H = 1e-6  # step in ln ω of the central differences (slopes at an event)


def _local(loop, plant: SweepInterpolant, rows: np.ndarray, x: np.ndarray) -> dict[str, np.ndarray]:
    """At points (rows[k], x[k]): ln|L|, ∠L, |d ln|L|/dx|, |d∠L/dx| (central differences
    in x = ln ω) and the interpolation error estimate (Np, rad), as arrays."""
    if rows.size == 0:
        z = np.zeros(0)
        return {"x": z, "lm": z, "ph": z, "smag": z, "sph": z, "em": z, "ep": z}
    lm, ph = loop(rows, x)
    a1, p1 = loop(rows, x + _H)
    a0, p0 = loop(rows, x - _H)
    em, ep = plant.err(x)
    return {"x": x, "lm": lm, "ph": ph, "smag": np.abs(a1 - a0) / (2 * _H),
            "sph": np.abs(p1 - p0) / (2 * _H), "em": em, "ep": ep}


def _groups(rows: np.ndarray, n: int) -> list[np.ndarray]:
    """Indices of the entries of each design 0..n-1 in ``rows`` (in their order)."""
    order = np.argsort(rows, kind="stable")
    cuts = np.searchsorted(rows[order], np.arange(n + 1))
    return [order[cuts[i]:cuts[i + 1]] for i in range(n)]


class _Events:
    """The :func:`_local` values of one design's events (a view by index)."""

    def __init__(self, at: dict[str, np.ndarray], idx: np.ndarray) -> None:
        self.at = at
        self.idx = idx

    def __getitem__(self, key: str) -> np.ndarray:
        return self.at[key][self.idx]


def _arc_count(start: np.ndarray, end: np.ndarray) -> np.ndarray:
    """Signed (clockwise +1) crossings of angle π mod 2π by a path from ``start``
    down to ``end`` (rad), counted with the same floor convention as the curve."""
    k = lambda a: np.floor((a - math.pi) / (2.0 * math.pi))  # noqa: E731
    return (k(start) - k(end)).astype(int)


def _peak(dist, d: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """1/min of ``dist`` over the band per row: the grid's smallest three local
    minima (and the grid minimum) refined by golden-section search in ln ω between
    their neighbours; returns (peak, x at the peak)."""
    n, m = d.shape
    interior = np.zeros_like(d, dtype=bool)
    interior[:, 1:-1] = (d[:, 1:-1] <= d[:, :-2]) & (d[:, 1:-1] <= d[:, 2:])
    cand = np.where(interior, d, np.inf)
    k = min(3, m - 2)
    idx = np.argpartition(cand, k - 1, axis=1)[:, :k]
    ci = np.repeat(np.arange(n), k)
    ck = idx.ravel()
    ok = np.isfinite(cand[ci, ck])
    ci, ck = ci[ok], ck[ok]
    kmin = np.argmin(d, axis=1)
    best = d[np.arange(n), kmin].copy()
    best_x = x[np.arange(n), kmin].copy()
    if ci.size:
        xr, fr = _golden_min(dist, ci, x[ci, ck - 1], x[ci, ck + 1])
        order = np.lexsort((fr, ci))  # per row, the smallest refined value first
        cs, fs, xs = ci[order], fr[order], xr[order]
        first = np.r_[True, cs[1:] != cs[:-1]]
        cs, fs, xs = cs[first], fs[first], xs[first]
        better = fs < best[cs]
        best[cs[better]] = fs[better]
        best_x[cs[better]] = xs[better]
    with np.errstate(divide="ignore"):
        return 1.0 / best, best_x


def _assemble(
    i: int, data: MeasuredResponse, plant: SweepInterpolant, comps: LoopBatch,
    gain_x: _Events, phase_x: _Events, signed: np.ndarray,
    below_cross: bool, arc: int, p_rhp: int, n_rhp_c: int, m0: int,
    ms_pk: tuple[float, float], mt_pk: tuple[float, float], peaks: _Events,
    lm_row: np.ndarray, lm_low_row: np.ndarray, ph_low_row: np.ndarray,
    n_int: int, n_int_est: bool, unstable_poles: int, rel_deg: int,
) -> dict[str, Any]:
    wlo, whi = data.band_rad_s
    xp, lm_p = phase_x["x"], phase_x["lm"]
    outside: list[str] = []
    assumptions: list[str] = [
        f"plant integrators: {n_int}" + (" (estimated from the slope of the lowest three "
                                         "points)" if n_int_est else " (given)"),
        f"open-loop right-half-plane poles: {unstable_poles} of the plant (given), "
        f"{n_rhp_c} of the compensator",
        "below the band the plant follows its low-frequency asymptote: |P| rises by "
        f"{n_int} decade(s) per decade, and its phase approaches "
        f"{math.degrees(plant.phase0):.0f} deg (the nearest limit of a rational plant "
        "with those integrators) in proportion to the frequency",
        "above the band |L| stays below its value at the top of the band, so there are "
        "no crossings of the negative real axis beyond -1 there",
        f"between measured points the plant is the PCHIP of ln|P| and phase in ln(omega) "
        f"({SUBDIVISIONS} grid points per measured interval bracket the events)",
    ]
    l_top = math.exp(float(lm_row[-1]))
    l_bot = math.exp(float(lm_row[0]))
    # ---- gain crossovers (in increasing order)
    g_order = np.argsort(gain_x["x"])
    wc = np.exp(gain_x["x"][g_order])
    known = True
    if l_top >= 1.0:
        known = False
        outside.append(f"|L| = {l_top:.3g} >= 1 at the top of the band ({whi:.4g} rad/s): "
                       "a crossover lies above the measured band; phase margin, crossover "
                       "and stability are not established")
    if below_cross:
        known = False
        outside.append(f"|L| = {l_bot:.3g} at the bottom of the band ({wlo:.4g} rad/s) and "
                       "the low-frequency extrapolation crosses |L| = 1 below it: a "
                       "crossover lies below the measured band")
    res: dict[str, Any] = {
        "crossovers_rad_s": [float(w) for w in wc],
        "crossover_rad_s": None, "phase_margin_deg": None, "delay_margin_s": None,
        "gain_margin_db": None, "phase_crossover_rad_s": None,
        "sensitivity_peak": None, "complementary_peak": None, "closed_loop_stable": None,
        "sensitivity_peak_rad_s": None, "complementary_peak_rad_s": None,
        "closed_loop_rhp_poles": None, "lower_gain_margin_db": None,
    }
    err: dict[str, Any] = {}
    # what a null lower-bound margin is known to be at least: +inf (none exists: the
    # margin is infinite under the assumptions), a number (only a floor is known), or
    # -inf (not established at all); read by explorer.evaluation.plant_source for limits
    floors: dict[str, float] = {"phase_margin_deg": -math.inf, "delay_margin_s": -math.inf,
                                "gain_margin_db": -math.inf}
    if wc.size and known:
        ph = gain_x["ph"][g_order]
        pm = np.degrees(ph) + 180.0
        pm = pm - 360.0 * np.ceil((pm - 180.0) / 360.0)
        j = int(np.argmin(pm))
        res["crossover_rad_s"] = float(wc[j])
        res["phase_margin_deg"] = float(pm[j])
        dms = np.where(pm <= 0, 0.0, np.radians(pm) / wc)
        res["delay_margin_s"] = float(np.min(dms))
        # error propagation at the chosen crossover
        k = int(g_order[j])
        em, ep = float(gain_x["em"][k]), float(gain_x["ep"][k])
        smag, sph = float(gain_x["smag"][k]), float(gain_x["sph"][k])
        dx = em / max(smag, 1e-12)
        pm_err_rad = ep + sph * dx
        err["crossover_rad_s"] = float(wc[j] * math.expm1(dx))
        err["phase_margin_deg"] = math.degrees(pm_err_rad)
        pmr = math.radians(float(pm[j]))
        err["delay_margin_s"] = (pm_err_rad + abs(pmr) * dx) / float(wc[j]) if pmr > 0 else 0.0
    elif not wc.size and known:
        floors["phase_margin_deg"] = floors["delay_margin_s"] = math.inf
        outside.append("no crossover in the band, and none above or below it under the "
                       "assumptions: |L| < 1 everywhere" if l_bot < 1 else
                       "no crossover in the band")
    # ---- phase crossovers: gain margin from those in the band with |L| < 1
    in_band = xp >= plant.x_lo
    gm_cand = in_band & (lm_p < 0)
    below_gm = (~in_band) & (lm_p < 0)
    lower = lm_p > 0
    if known and np.any(lower):
        res["lower_gain_margin_db"] = float(np.max(-_DB * lm_p[lower]))
    floor_gm = -_DB * math.log(l_top) if 0 < l_top < 1 else -math.inf
    if np.any(below_gm):
        floor_gm = min(floor_gm, float(np.min(-_DB * lm_p[below_gm])))
    if np.any(gm_cand):
        gms = -_DB * lm_p[gm_cand]
        j = int(np.argmin(gms))
        gm = float(gms[j])
        xj = float(xp[gm_cand][j])
        top_margin = -_DB * math.log(l_top) if l_top > 0 else math.inf
        if np.any(below_gm) and float(np.min(-_DB * lm_p[below_gm])) < gm:
            outside.append("a phase crossover with |L| < 1 below the band (in the "
                           "extrapolation) would set a smaller gain margin: not established")
        elif l_top < 1 and top_margin < gm:
            floors["gain_margin_db"] = floor_gm
            outside.append(f"|L| = {l_top:.3g} at the top of the band: a phase crossover "
                           f"above the band could leave only {top_margin:.3g} dB; the gain "
                           "margin is not established")
        else:
            res["gain_margin_db"] = gm
            res["phase_crossover_rad_s"] = math.exp(xj)
            k = int(np.flatnonzero(gm_cand)[j])
            em, ep = float(phase_x["em"][k]), float(phase_x["ep"][k])
            smag, sph = float(phase_x["smag"][k]), float(phase_x["sph"][k])
            dx = ep / max(sph, 1e-12)
            err["phase_crossover_rad_s"] = math.exp(xj) * math.expm1(dx)
            err["gain_margin_db"] = _DB * (em + smag * dx)
    elif l_top < 1:
        floors["gain_margin_db"] = floor_gm
        top_margin = -_DB * math.log(l_top)
        outside.append(f"no phase crossover with |L| < 1 in the band; above it the margin "
                       f"is at least {top_margin:.3g} dB under the assumptions")
    # ---- peaks: the refined in-band peak, then what lies outside the band
    for kk, (key, (pk, xk), inv) in enumerate((("sensitivity_peak", ms_pk, False),
                                               ("complementary_peak", mt_pk, True))):
        if not np.isfinite(pk):
            outside.append(f"{key}: the loop passes through -1 in the band")
            continue
        lmag_k = math.exp(float(peaks["lm"][kk]))
        em, ep = float(peaks["em"][kk]), float(peaks["ep"][kk])
        rel = em + ep
        e_pk = pk * pk * (rel / lmag_k if inv else rel * lmag_k)
        value, at = float(pk), math.exp(xk)
        # above the band |L| <= l_top: |S| <= 1/(1 - l_top), |T| <= l_top/(1 - l_top)
        above = (l_top / (1 - l_top) if inv else 1 / (1 - l_top)) if l_top < 1 else math.inf
        if above > value:
            outside.append(f"{key}: above the band it could reach {above:.4g}, more than "
                           f"{value:.4g} in the band: not established")
            continue
        if m0 >= 1:
            # ω → 0: |L| → ∞, so |S| → 0 and |T| → 1 (exact); between 0 and the band
            # |L| >= l_bot (the extrapolation rises monotonically)
            if l_bot <= 1:
                outside.append(f"{key}: |L| <= 1 at the bottom of the band: not established")
                continue
            limit = 1.0 if inv else 0.0
            bound = l_bot / (l_bot - 1) if inv else 1 / (l_bot - 1)
            if limit > value:
                value, at = limit, 0.0
            slack = max(0.0, bound - value)
            if slack <= 0.01 * value:
                e_pk = max(e_pk, slack)
            else:
                # the plain bound is loose: read the stretch between 0 and the band on
                # the low-frequency extrapolation (assumption 2, as for the Nyquist
                # count), with its error
                got = _below_band_peak(plant, n_int, lm_low_row, ph_low_row, inv, value)
                if got is None:
                    outside.append(f"{key}: between 0 and the band it could reach "
                                   f"{bound:.4g} (|L| = {l_bot:.3g} at the bottom of the "
                                   "band), and the extrapolation below the band reaches "
                                   f"more than {value:.4g}: not established")
                    continue
                value, at, e_pk = _merge_below(got, value, at, e_pk)
        else:
            got = _below_band_peak(plant, n_int, lm_low_row, ph_low_row, inv, value)
            if got is None:
                outside.append(f"{key}: the extrapolation below the band reaches more than "
                               f"{value:.4g}, the value in the band: the peak lies below "
                               "the measured band, not established")
                continue
            value, at, e_pk = _merge_below(got, value, at, e_pk)
        res[key] = value
        res[key + "_rad_s"] = at
        err[key] = e_pk
    # ---- Nyquist: Z = P + N
    n_curve = int(np.sum(signed[lm_p > 0])) if signed.size else 0
    n_enc = 2 * n_curve + arc
    z = p_rhp + n_enc
    assumptions.append(f"Nyquist count: P = {p_rhp} open-loop RHP poles, N = {n_enc} "
                       f"clockwise encirclements of -1 ({m0} integrator(s) in the loop), "
                       f"Z = {z}")
    if known:
        ms_val = res["sensitivity_peak"]
        res["closed_loop_stable"] = bool(z == 0 and (ms_val is None or np.isfinite(ms_val)))
        res["closed_loop_rhp_poles"] = int(z)
    lc = [int(k) for k in data.low_coherence_rows()]
    res["hf_gain"] = (abs(float(comps.gain[i])) if rel_deg == 0 else 0.0)
    cz, cp = comps.zeros[i], comps.poles[i]
    if np.sum(cp == 0) == 1 and np.sum(cz == 0) == 0:
        zz = np.where(cz == 0, 1.0, -cz)
        pp = np.where(cp == 0, 1.0, -cp)
        res["integral_gain"] = float((comps.gain[i] * np.prod(zz) / np.prod(pp)).real)
    else:
        res["integral_gain"] = None
    res["band_rad_s"] = [wlo, whi]
    res["interpolation_error"] = err
    res["low_coherence_points"] = [
        {"row_index": k, "frequency_rad_s": float(data.omega_rad_s[k]),
         "coherence": float(data.coherence[k])}  # type: ignore[index]
        for k in lc
    ]
    res["outside_band"] = outside
    res["assumptions"] = assumptions
    if not known:
        floors["gain_margin_db"] = -math.inf
    res["margin_floors"] = floors
    return res


def _below_band_peak(plant: SweepInterpolant, n_int: int, lm_low: np.ndarray, ph_low: np.ndarray,
                     inv: bool, value: float) -> tuple[float, float] | None:
    """|S| (or |T| with ``inv``) over the low-frequency extrapolation below the band:
    (sup, its error), or None when it reaches more than 1 % above ``value``."""
    lo = np.exp(lm_low + 1j * ph_low)
    vals = np.abs(lo) / np.abs(1 + lo) if inv else 1 / np.abs(1 + lo)
    k = int(np.argmax(vals))
    sup = float(vals[k])
    if sup > value * (1 + 1e-2):
        return None
    # the extrapolation follows the asymptote from ω_lo down; a rational plant still
    # departs from it by about half its residual slope there (its ln|P| is quadratic
    # in ω near 0): that, plus the interpolation estimate, bounds the extrapolated |L|,
    # and so what the stretch below the band can hold
    slope = abs(plant.slope_lo + n_int)
    e_lo = 0.5 * slope + plant.err_mag_lo
    l0 = math.exp(float(lm_low[k]))  # |L| where the extrapolated peak is
    return sup, sup * sup * (e_lo / l0 if inv else e_lo * l0)


def _merge_below(got: tuple[float, float], value: float, at: float,
                 e_pk: float) -> tuple[float, float, float]:
    """The in-band peak (value, where, error) widened by the stretch below the band."""
    sup, e_ext = got
    if sup + e_ext > value:
        if sup > value:
            e_pk = max(e_pk, sup - value)
            value, at = sup, 0.0
        e_pk = max(e_pk, sup + e_ext - value)
    return value, at, e_pk


def loop_metrics_on_data(
    data: MeasuredResponse,
    comp: Rational,
    *,
    unstable_poles: int = 0,
    plant_integrators: int | None = None,
) -> dict[str, Any]:
    """Frequency METRICS of the loop C·P_measured (one design), JSON-ready.

    Keys: ``crossover_rad_s``, ``crossovers_rad_s``, ``phase_margin_deg``,
    ``gain_margin_db``, ``phase_crossover_rad_s``, ``delay_margin_s``,
    ``sensitivity_peak`` (+ ``_rad_s``), ``complementary_peak`` (+ ``_rad_s``),
    ``closed_loop_stable``, ``closed_loop_rhp_poles``, ``hf_gain``,
    ``integral_gain``; extras ``band_rad_s``, ``interpolation_error`` (the bound on
    each reported metric, same units), ``low_coherence_points``, ``outside_band``
    (why a metric is null), ``assumptions``, ``lower_gain_margin_db`` (phase crossovers
    with |L| > 1, in the band or its low-frequency extrapolation), and
    ``margin_floors``: for phase, gain and delay margin, what a null value is known to
    be at least (+inf: none exists under the assumptions, i.e. infinite; a number: a
    floor, e.g. the gain margin above the band; -inf: not established). A value that
    depends on the loop outside the band is null, with the reason in ``outside_band``.
    """
    if comp.delay_s:
        raise DesignError("a compensator with a delay is not supported on measured data")
    return loop_metrics_on_data_batch(
        data,
        np.array([comp.gain]),
        np.array([comp.zeros], dtype=complex).reshape(1, -1),
        np.array([comp.poles], dtype=complex).reshape(1, -1),
        unstable_poles=unstable_poles,
        plant_integrators=plant_integrators,
    )[0]

