"""Step responses of the sampled loop, exact at and between the sample instants.

The loop that runs (docs/implement.md, "The sampled loop"): the output is sampled at
t_k = kT, C(z) computes u[k] from e[k] = r − y(t_k), u[k] is held (zero-order hold)
and reaches the plant at t_k + τc + τ (computation delay, then the plant's own
delay); a unit load step at the plant input goes through the plant's delay τ
(as in explorer.time_domain.timeresp). The plant input is therefore piecewise constant, and the
continuous plant state is propagated exactly from one switch to the next:

    x(t + h) = e^{Ah} x(t) + ∫₀^h e^{As} ds B · v,

the two matrices from one exponential of [[A, B], [0, 0]]·h (Van Loan 1978; the ZOH
formulas of Åström & Wittenmark, *Computer-Controlled Systems*, 3rd ed. 1997, §2.3),
so the output between samples is exact too (to rounding), not an interpolation.
One march over time serves a whole batch of designs (numpy over the designs): the
plant and the switch pattern are shared, each design has its own controller state
(controllable canonical form of C(z)).

Metrics (the readings of docs/interface.md on the sampled loop): overshoot, 10–90 %
rise and ±2 % settling from the output on a fine grid (``per_sample`` points per
period, crossings interpolated linearly between grid points), peak |u[k]|, and
∫|y| for the load step by the trapezoid rule on that grid (error O((T/per_sample)²)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np

from explorer.core.loop import Rational
from explorer.frequency.sampled import SampledPlant, phi_gamma, realize, sample_plant, split_delay
from explorer.frequency.sampled_batch import DiscreteBatch, closed_loop_parts, poly_rows

__all__ = ["SampledSteps", "simulate_sampled", "sampled_step_metrics", "STEP_KEYS"]

STEP_KEYS = ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control", "iae_load")
#: Most sample periods simulated (the horizon doubles up to this while not settled).
MAX_SAMPLES = 20000
#: Closed loops with at most this many states are marched by doubling (powers of the
#: augmented closed-loop matrix, a few batched products); longer delay lines sample by
#: sample.
MAX_DOUBLING_STATES = 40


@lru_cache(maxsize=16)
def _sampled(plant: Rational, T: float, tc: float) -> SampledPlant:
    return sample_plant(plant, T, tc)


def _run(F: np.ndarray, aff: np.ndarray, X0: np.ndarray, steps: int) -> np.ndarray:
    """X_0 ... X_steps of X_{k+1} = F X_k + aff for every row, by doubling: the
    augmented matrix [[F, aff], [0, 1]] squared log2(steps) times, each power applied to
    every state found so far. (rows, steps + 1, N)."""
    rows, N = X0.shape
    Ft = np.zeros((rows, N + 1, N + 1))
    Ft[:, :N, :N] = F
    Ft[:, :N, N] = aff
    Ft[:, N, N] = 1.0
    Z = np.concatenate([X0, np.ones((rows, 1))], axis=1)[:, :, None]
    P = Ft
    while Z.shape[2] < steps + 1:
        Z = np.concatenate([Z, P @ Z], axis=2)
        P = P @ P
    return np.transpose(Z[:, :N, :steps + 1], (0, 2, 1))


def _march(parts: dict[str, Any], K: int, r: float, load: bool, kl: int, el: float,
           g_part: np.ndarray, g_full: np.ndarray
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(X (rows, K + 1, N), u (rows, K), y (rows, K)) of the closed loop at the samples,
    by doubling over the stretches of constant input (before the load arrives, the
    period it arrives in, after)."""
    F, Ku, y_row = parts["F"], parts["Ku"], parts["y_row"]
    b0, den, Yu, dp, n, nc = (parts[k] for k in ("b0", "den", "Yu", "dp", "n", "nc"))
    rows, N = Ku.shape
    ku_r = b0 / den
    ku_l = -b0 * dp / den
    sp_gamma0 = parts.get("gamma0")
    a_r = np.zeros((rows, N))
    a_l = np.zeros((rows, N))
    if sp_gamma0 is not None:
        a_r[:, :n] += sp_gamma0[None, :] * ku_r[:, None]
        a_l[:, :n] += sp_gamma0[None, :] * ku_l[:, None]
    if nc:
        a_r[:, n] += 1.0 - Yu * ku_r
        a_l[:, n] += -(dp + Yu * ku_l)
    a_r[:, n + nc] += ku_r
    a_l[:, n + nc] += ku_l
    share_full = np.zeros(N)
    share_full[:n] = g_full
    share_part = np.zeros(N)
    share_part[:n] = g_part
    X0 = np.zeros((rows, N))
    ld = np.zeros(K)
    if not load or kl >= K:
        X = _run(F, r * a_r, X0, K)
    else:
        first = _run(F, r * a_r, X0, kl) if kl > 0 else X0[:, None, :]
        on_now = 1.0 if el == 0.0 else 0.0
        xk = first[:, -1]
        x_next = (np.einsum("bij,bj->bi", F, xk) + r * a_r + on_now * a_l + share_part)
        rest = _run(F, r * a_r + a_l + share_full, x_next, K - kl - 1)
        X = np.concatenate([first, rest], axis=1)
        ld[kl + (0 if el == 0.0 else 1):] = 1.0
    u = np.einsum("bn,bkn->bk", Ku, X[:, :K]) + ku_r[:, None] * r + ku_l[:, None] * ld[None, :]
    y = (np.einsum("bn,bkn->bk", y_row, X[:, :K]) + (Yu * ku_r)[:, None] * r
         + (dp + Yu * ku_l)[:, None] * ld[None, :])
    return X, u, y


#: e^{Ah} and ∫₀^h e^{As} ds B by (plant matrices, h): the same few h recur in every call.
_PG_CACHE: dict[tuple[tuple[bytes, bytes], float], tuple[np.ndarray, np.ndarray]] = {}


@dataclass(frozen=True, kw_only=True)
class SampledSteps:
    """Responses of a batch: ``t_s`` (K·M + 1,) the fine time grid (every sample
    instant is in it, t_k at index k·M), ``y`` (n, K·M + 1) the plant output,
    ``u`` (n, K) the controller output u[k] (held from t_k, reaching the plant
    τc + τ later), ``t_samples_s`` (K,)."""

    t_s: np.ndarray
    y: np.ndarray
    u: np.ndarray
    t_samples_s: np.ndarray
    per_sample: int


def _controller(dc: DiscreteBatch) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(a (n, nc+1) monic denominator, Cc (n, nc), b0 (n,)) of C(z) = b(z)/a(z):
    xc' = Ac xc + e1·e, u = Cc xc + b0·e with Ac's first row −a[1:]."""
    a = poly_rows(dc.poles)
    b = dc.gain[:, None] * poly_rows(dc.zeros)
    b0 = b[:, 0]
    return a, b[:, 1:] - b0[:, None] * a[:, 1:], b0


def simulate_sampled(plant: Rational, dc: DiscreteBatch, compute_delay_s: float,
                     t_end_s: float, *, load: bool = False, per_sample: int = 8
                     ) -> SampledSteps:
    """Unit reference step (``load=False``) or unit load step at the plant input
    (reference 0) of every design of the batch, exact at and between the samples.

    The march over the samples uses the one-period maps of the sampled plant
    (x[k+1] = Φ x[k] + Γ0·v_new + Γ1·v_old + Γl[k], the input switching from
    v_old = u[k−d−1] to v_new = u[k−d] at ε into the period, τ + τc = d·T + ε, and
    Γl[k] the load's share of the period); the points between the samples then follow
    for all periods at once from x[k] and the two inputs of each period."""
    T = dc.sample_time_s
    M = int(per_sample)
    K = max(1, min(int(math.ceil(t_end_s / T - 1e-9)), MAX_SAMPLES))
    A, B, C, D = realize(plant.gain, plant.zeros, plant.poles)
    n = A.shape[0]
    rows = dc.n
    a, Cc, b0 = _controller(dc)
    nc = a.shape[1] - 1
    tau_u = plant.delay_s + compute_delay_s  # u[k] reaches the plant at kT + tau_u
    du, eu = split_delay(tau_u, T)
    tau_l = plant.delay_s  # the load reaches the plant at tau_l
    dp = float(D[0, 0])
    c = C[0]
    r = 0.0 if load else 1.0

    key0 = (A.tobytes(), B.tobytes())

    def pg(h: float) -> tuple[np.ndarray, np.ndarray]:
        if h <= 0:
            return np.eye(n), np.zeros(n)
        key = (key0, float(h))
        if key not in _PG_CACHE:
            if len(_PG_CACHE) > 512:
                _PG_CACHE.clear()
            ph, g = phi_gamma(A, B, h)
            _PG_CACHE[key] = (ph, g[:, 0])
        return _PG_CACHE[key]

    phi, _ = pg(T)
    p_eu, g_eu = pg(eu)
    p_rest, g_rest = pg(T - eu)
    g_new = g_rest  # v_new on [ε, T)
    g_old = p_rest @ g_eu  # v_old on [0, ε)
    # the load's share of period k: 0 before tau_l, ∫ over [tau_l, t_{k+1}) after
    kl = int(math.floor(tau_l / T + 1e-12))
    el = tau_l - kl * T
    g_full = pg(T)[1]
    g_part = pg(T - el)[1]

    def load_share(k: int) -> np.ndarray:
        if not load or k < kl:
            return np.zeros(n)
        return g_part if k == kl else g_full

    def load_on(t: float) -> float:
        return 1.0 if load and t >= tau_l - 1e-12 * T else 0.0

    x = np.zeros((rows, n))
    xc = np.zeros((rows, nc))
    u = np.zeros((rows, K))
    xs = np.zeros((rows, K + 1, n))
    ys = np.zeros((rows, K))

    def u_at(j: int) -> np.ndarray:
        return u[:, j] if 0 <= j < K else np.zeros(rows)

    parts = closed_loop_parts(_sampled(plant, T, compute_delay_s), dc)
    if parts["F"].shape[1] <= MAX_DOUBLING_STATES:
        xs_all, u, ys = _march(parts, K, r, load, kl, el, g_part, g_full)
        xs[:] = xs_all[:, :, :n]
        x = xs_all[:, K, :n]
    for k in range(K if parts["F"].shape[1] > MAX_DOUBLING_STATES else 0):
        ld = load_on(k * T)
        y_x = x @ c
        if du == 0 and eu == 0.0:  # no delay at all: y[k] holds u[k] (algebraic loop)
            cc_x = np.einsum("ij,ij->i", Cc, xc) if nc else np.zeros(rows)
            uk = (cc_x + b0 * (r - y_x - dp * ld)) / (1.0 + b0 * dp)
            yk = y_x + dp * (uk + ld)
        else:
            vk = u_at(k - du - (1 if eu > 0 else 0)) + ld
            yk = y_x + dp * vk
            uk = (np.einsum("ij,ij->i", Cc, xc) if nc else 0.0) + b0 * (r - yk)
        e = r - yk
        if nc:
            new0 = -np.einsum("ij,ij->i", a[:, 1:], xc) + e
            xc = np.concatenate([new0[:, None], xc[:, :-1]], axis=1)
        u[:, k] = uk
        ys[:, k] = yk
        xs[:, k] = x
        v_new = u_at(k - du)
        v_old = u_at(k - du - 1) if eu > 0 else np.zeros(rows)
        x = x @ phi.T + v_new[:, None] * g_new + v_old[:, None] * g_old + load_share(k)
    xs[:, K] = x
    # between the samples: x(t_k + s) for s = jT/M, all periods at once
    ks = np.arange(K)
    v_new_all = np.concatenate([np.zeros((rows, du)), u], axis=1)[:, :K]
    v_old_all = (np.concatenate([np.zeros((rows, du + 1)), u], axis=1)[:, :K] if eu > 0
                 else np.zeros((rows, K)))
    y = np.zeros((rows, K * M + 1))
    y[:, ::M][:, :K] = ys
    for j in range(1, M):
        s = j * T / M
        ps, gs = pg(s)
        xj = xs[:, :K] @ ps.T
        if s <= eu:
            xj = xj + v_old_all[:, :, None] * gs
            vin = v_old_all
        else:
            pe, ge = pg(s - eu)
            xj = xj + v_old_all[:, :, None] * (pe @ g_eu) + v_new_all[:, :, None] * ge
            vin = v_new_all
        if load:
            t = ks * T + s
            since = t - tau_l
            on = since >= -1e-12 * T
            # the load's input since max(t_k, tau_l): ∫ e^{A(s − σ)} B dσ over that part
            full = on & (ks * T >= tau_l - 1e-12 * T)
            part = np.zeros((K, n))
            part[full] = gs
            mid = on & ~full
            if np.any(mid):
                part[mid] = pg(float(since[mid][0]))[1]
            xj = xj + part[None, :, :]
            vin = vin + on[None, :].astype(float)
        y[:, j::M][:, :K] = xj @ c + dp * vin
    ld_end = load_on(K * T)
    y[:, K * M] = x @ c + dp * (u_at(K - du - (1 if eu > 0 else 0)) + ld_end)
    t = np.arange(K * M + 1) * (T / M)
    return SampledSteps(t_s=t, y=y, u=u, t_samples_s=ks * T, per_sample=M)


def _crossing(t: np.ndarray, y: np.ndarray, level: np.ndarray) -> np.ndarray:
    """First time each row reaches ``level`` (linear between grid points; NaN never)."""
    above = y >= level[:, None]
    has = above.any(axis=1)
    i = np.argmax(above, axis=1)
    i0 = np.maximum(i - 1, 0)
    r = np.arange(y.shape[0])
    y0, y1 = y[r, i0], y[r, i]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(y1 != y0, (level - y0) / (y1 - y0), 0.0)
    tc = np.where(i == 0, t[0], t[i0] + np.clip(frac, 0, 1) * (t[i] - t[i0]))
    return np.where(has, tc, np.nan)


def _last_exit(t: np.ndarray, y: np.ndarray, centre: np.ndarray, half: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """(time of the last exit from the band |y − centre| ≤ half, settled) per row;
    the exit interpolated linearly; settled when it lies in the first 45 % of the
    horizon (the rule of explorer.time_domain.timeresp)."""
    dev = np.abs(y - centre[:, None]) - half[:, None]
    out = dev > 0
    any_out = out.any(axis=1)
    last = y.shape[1] - 1 - np.argmax(out[:, ::-1], axis=1)
    nxt = np.minimum(last + 1, y.shape[1] - 1)
    r = np.arange(y.shape[0])
    d0, d1 = dev[r, last], dev[r, nxt]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(d0 != d1, d0 / (d0 - d1), 0.0)
    te = t[last] + np.clip(frac, 0, 1) * (t[nxt] - t[last])
    te = np.where(any_out, te, 0.0)
    return te, te <= 0.45 * t[-1]


def sampled_step_metrics(plant: Rational, dc: DiscreteBatch, compute_delay_s: float,
                         final_value: np.ndarray, horizon_s: np.ndarray,
                         *, per_sample: int = 8, band: float = 0.02
                         ) -> dict[str, np.ndarray]:
    """STEP_KEYS of the sampled loop for every row (NaN = null), from
    :func:`simulate_sampled`; the horizon (one for the batch: the largest of
    ``horizon_s``) doubles up to three times while a response has not settled.
    ``capped`` (bool per row): the row would need more than MAX_SAMPLES periods (the
    sample time is very short against the loop's time scale); its figures are NaN and
    the caller takes them from elsewhere.
    ``final_value`` is the closed-loop DC gain (the continuous loop's: the hold and
    Tustin keep the DC gain); rows must be stable."""
    n = dc.n
    out = {k: np.full(n, np.nan) for k in STEP_KEYS}
    if n == 0:
        return out
    h = float(np.nanmax(horizon_s))
    yf = np.asarray(final_value, float)
    capped = np.zeros(n, bool)
    ref = ld = None
    settled = lsettled = np.zeros(n, bool)
    for _ in range(4):
        if h / dc.sample_time_s > MAX_SAMPLES:
            capped = np.ones(n, bool) if ref is None else ~(settled & lsettled)
            break
        ref = simulate_sampled(plant, dc, compute_delay_s, h, per_sample=per_sample)
        ld = simulate_sampled(plant, dc, compute_delay_s, h, load=True, per_sample=per_sample)
        t = ref.t_s
        half = band * np.abs(yf)
        ts, settled = _last_exit(t, ref.y, yf, half)
        settled |= ~np.isfinite(yf)
        lpk = np.max(np.abs(ld.y), axis=1)
        _, lsettled = _last_exit(t, ld.y, ld.y[:, -1], band * lpk)
        if np.all(settled & lsettled):
            break
        h *= 2.0
    out["capped"] = capped
    if ref is None or ld is None:
        return out
    ok = np.isfinite(yf) & (yf != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        os_ = np.maximum((np.max(ref.y * np.sign(yf)[:, None], axis=1) - np.abs(yf))
                         / np.abs(yf) * 100.0, 0.0)
    sgn = np.sign(yf)
    t10 = _crossing(t, ref.y * sgn[:, None], 0.1 * np.abs(yf))
    t90 = _crossing(t, ref.y * sgn[:, None], 0.9 * np.abs(yf))
    out["overshoot_pct"] = np.where(ok & settled, os_, np.nan)
    out["settling_time_s"] = np.where(ok & settled, ts, np.nan)
    out["rise_time_s"] = np.where(ok & settled, t90 - t10, np.nan)
    out["peak_control"] = np.where(settled, np.max(np.abs(ref.u), axis=1), np.nan)
    # ∫|y| of the load step, when the load error vanishes (final |y| small)
    iae = np.trapezoid(np.abs(ld.y), t, axis=1)
    tail = np.abs(ld.y[:, -1]) <= 1e-3 * np.maximum(lpk, 1e-300)
    out["iae_load"] = np.where(lsettled & tail, iae, np.nan)
    for k in STEP_KEYS:
        out[k] = np.where(capped, np.nan, out[k])
    return out
