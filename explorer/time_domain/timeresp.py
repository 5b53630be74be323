"""Closed-loop step responses with a plant delay, and the step metrics of docs/interface.md.

The loop (plant delay in the forward path, load at the plant input)::

    r ──►(+)── e ──► C(s) ── u ──►(+)── w ──► e^{-sτ} ── v ──► P(s) ──┬──► y
          ▲ −                      ▲ d                                  │
          └─────────────────────────────────────────────────────────────┘

The delay belongs to the plant (``plant.delay_s``): the plant's input signal
``w = u + d`` is delayed, so a unit load step ``d`` goes through the whole plant,
delay included: ``Y_load = P e^{-sτ} / (1 + L)``, ``L = C P e^{-sτ}``. This is the
"load disturbance at the process input" of Åström & Hägglund, *Advanced PID Control*
(ISA, 2006), Ch. 4, and of Skogestad (2003), *J. Process Control* 13:291–309, §3
(from memory: both use y = G(s)(u + d) with the delay inside G).

Numerical method (docs/time-response.md has the derivations):

* C and P (without delay) are realised as cascades of first- and second-order real
  sections (a scaled companion block per complex pole pair, a triangular block per
  real pole pair), never as one companion form of an expanded polynomial.
* **No delay**: the closed loop is discretised exactly (zero-order hold is exact for
  the step inputs), so the samples are exact to rounding at any step.
* **Delay τ**: the step is h = τ/N. On every step the delayed signal ``v`` is known
  from the past; it is represented by its cubic Hermite interpolant (values and
  derivatives at both ends, one-sided at multiples of τ, where it may jump), and the
  delay-free part of the loop is integrated exactly for that cubic input (Van Loan's
  block matrix exponential). The error is O(h⁴) (halving h divides it by 16), the
  samples stay exact for t < 2τ, and jumps at multiples of τ (biproper loops) are
  represented exactly.
* Both cases are one linear recursion ``z_{m+1} = G z_m`` over periods (one step
  without delay, one delay with), run for a whole batch of designs at once by
  doubling (``Z ← [Z, G^k Z]``) or, for long delay lines, step by step over periods.
* Between samples every signal is the cubic Hermite interpolant of the exact sampled
  values and derivatives (error O(h⁴)); peaks, 10 %/90 % crossings, the last exit
  from the ±2 % band and ∫|y_load| are taken from these cubics exactly (extrema from
  the critical points, crossings by safeguarded Newton, |·| integrated piece by piece
  between sign changes).
* The horizon doubles until the response has settled: the last band exit lies in
  the first 45 % of the horizon, the control signal's tail can no longer raise the
  peak, and the remaining load-error integral is below 1e-6 of its value.

Step-response quantities are the standard ones of Ogata, *Modern Control
Engineering*, 5th ed. (2010), §5-3, with the precise readings of docs/interface.md.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from explorer.core.errors import DesignError
from explorer.core.loop import LoopBatch, Rational
from explorer.time_domain.farroots import ModelGroup, fold_far_roots
from explorer.time_domain.modal_step import modal_amplitudes, switch_time

__all__ = [
    "METRIC_KEYS",
    "StepResponse",
    "fold_threshold_rad_s",
    "simulate_steps",
    "step_metrics",
    "step_metrics_batch",
]

#: Keys of the dict returned by :func:`step_metrics` (and of the batch version).
METRIC_KEYS: tuple[str, ...] = (
    "overshoot_pct",
    "settling_time_s",
    "rise_time_s",
    "peak_control",
    "final_value",
    "iae_load",
)

# h·ω_fast: samples are exact without delay, so only the Hermite interpolation
# between samples matters there (error ≈ (hω)⁴/384 of a mode's amplitude).
_HW_FREE = 0.15
_HW_DELAY = 0.2
_MAX_INTERVALS = 2**17  # per design: the horizon cap is _MAX_INTERVALS · h
_CHUNK_FLOATS = 2**22  # working-set budget per chunk of designs (floats)
_MIN_INTERVALS = 64
# Horizon doublings before a row that has neither settled nor diverged is given up
# (None metrics): without it a loop whose slowest closed-loop mode rounds to e^0 per step
# (a loop gain of 1e-12, say) doubled its horizon until the step overflowed to inf.
_MAX_DOUBLINGS = 48
# Samples per delay: above _SUB_FOLD, roots beyond ω_far = _HW_DELAY·_SUB_FOLD/τ are
# folded into the delay (explorer.time_domain.farroots); a row still needing more than _MAX_SUB
# (the delay-line map holds ~12·N² floats per design) is not simulated (None).
_SUB_FOLD = 512
_MAX_SUB = 1024
# A folded model is trusted while its highest gain crossover stays below ω_far/10.
_FOLD_SEPARATION = 10.0


# ======================================================================================
# Public value object
# ======================================================================================
@dataclass(frozen=True, kw_only=True)
class StepResponse:
    """Sampled closed-loop responses to unit steps applied at t = 0.

    ``y_ref``/``u_ref``: plant output and compensator output for a unit reference
    step; ``y_load``: plant output for a unit load step at the plant input. ``t_s``
    is non-decreasing and starts at 0 (values there are the limits at 0⁺); where a
    signal jumps (at multiples of the delay, in a loop with direct feedthrough) the
    time is repeated, the first value being the limit from the left.
    """

    t_s: np.ndarray
    y_ref: np.ndarray
    u_ref: np.ndarray
    y_load: np.ndarray


# ======================================================================================
# State-space realisation: cascade of first- and second-order sections
# ======================================================================================
@dataclass(frozen=True)
class _SS:
    """Batch of SISO realisations: a (B,n,n), b (B,n), c (B,n), d (B,)."""

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray

    @property
    def n(self) -> int:
        return int(self.a.shape[1])

    def take(self, rows: np.ndarray) -> _SS:
        return _SS(self.a[rows], self.b[rows], self.c[rows], self.d[rows])


def _canonical_roots(r: np.ndarray) -> np.ndarray:
    """Per row: complex roots first (a conjugate pair adjacent), then real roots."""
    if r.shape[1] == 0:
        return r
    keys = np.stack([r.imag, np.abs(r.imag), r.real, (r.imag == 0).astype(float)])
    order = np.lexsort(keys, axis=-1)
    return np.take_along_axis(r, order, axis=1)


def _series(s1: _SS, s2: _SS) -> _SS:
    """s1 followed by s2."""
    bsz, n1, n2 = s1.d.shape[0], s1.n, s2.n
    a = np.zeros((bsz, n1 + n2, n1 + n2))
    a[:, :n1, :n1] = s1.a
    a[:, n1:, n1:] = s2.a
    a[:, n1:, :n1] = s2.b[:, :, None] * s1.c[:, None, :]
    b = np.concatenate([s1.b, s2.b * s1.d[:, None]], axis=1)
    c = np.concatenate([s2.d[:, None] * s1.c, s2.c], axis=1)
    return _SS(a, b, c, s2.d * s1.d)


def _section2(p1, p2, zs: list[np.ndarray], g: np.ndarray) -> _SS:
    """g·N(s)/((s−p1)(s−p2)), N monic with the zeros ``zs`` (0, 1 or 2 of them)."""
    bsz = g.shape[0]
    cplx = p1.imag != 0
    a1 = np.where(cplx, -2.0 * p1.real, -(p1.real + p2.real))
    a0 = np.where(cplx, np.abs(p1) ** 2, p1.real * p2.real)
    if len(zs) == 2:
        z1, z2 = zs
        zc = z1.imag != 0
        b2 = np.ones(bsz)
        b1 = np.where(zc, -2.0 * z1.real, -(z1.real + z2.real))
        b0 = np.where(zc, np.abs(z1) ** 2, z1.real * z2.real)
    elif len(zs) == 1:
        b2, b1, b0 = np.zeros(bsz), np.ones(bsz), -zs[0].real
    else:
        b2, b1, b0 = np.zeros(bsz), np.zeros(bsz), np.ones(bsz)
    b2, b1, b0 = g * b2, g * b1, g * b0
    r1 = b1 - b2 * a1
    r0 = b0 - b2 * a0
    a = np.zeros((bsz, 2, 2))
    bb = np.zeros((bsz, 2))
    cc = np.zeros((bsz, 2))
    # complex pair: scaled companion [[0, w0], [-w0, -a1]], input on the second state
    w0 = np.sqrt(np.where(cplx, a0, 1.0))
    # real pair: x1' = p1 x1 + ws u, x2' = p2 x2 + ws x1
    ws = np.maximum(np.abs(p1.real), np.abs(p2.real))
    ws = np.where(ws > 0, ws, 1.0)
    a[:, 0, 0] = np.where(cplx, 0.0, p1.real)
    a[:, 0, 1] = np.where(cplx, w0, 0.0)
    a[:, 1, 0] = np.where(cplx, -w0, ws)
    a[:, 1, 1] = np.where(cplx, -a1, p2.real)
    bb[:, 0] = np.where(cplx, 0.0, ws)
    bb[:, 1] = np.where(cplx, w0, 0.0)
    cc[:, 0] = np.where(cplx, r0 / w0**2, r1 / ws)
    cc[:, 1] = np.where(cplx, r1 / w0, (r0 + r1 * p2.real) / ws**2)
    return _SS(a, bb, cc, b2)


def _section1(p1, zs: list[np.ndarray], g: np.ndarray) -> _SS:
    """g·N(s)/(s−p1), p1 real, N monic with 0 or 1 zero."""
    bsz = g.shape[0]
    p = p1.real
    if zs:
        b1, b0 = g, -g * zs[0].real
    else:
        b1, b0 = np.zeros(bsz), g
    r0 = b0 + b1 * p
    ws = np.where(np.abs(p) > 0, np.abs(p), 1.0)
    return _SS(p[:, None, None].copy(), ws[:, None], (r0 / ws)[:, None], b1)


def _realise(gain: np.ndarray, zeros: np.ndarray, poles: np.ndarray, what: str) -> _SS:
    """Cascade realisation of gain·∏(s−z)/∏(s−p) for a batch of equal root counts."""
    bsz = gain.shape[0]
    nz, npl = zeros.shape[1], poles.shape[1]
    if nz > npl:
        raise DesignError(
            f"{what} is improper ({nz} zeros, {npl} poles): it needs at least as many "
            "poles as zeros"
        )
    if npl == 0:
        return _SS(np.zeros((bsz, 0, 0)), np.zeros((bsz, 0)), np.zeros((bsz, 0)), gain.copy())
    z = _canonical_roots(zeros)
    p = _canonical_roots(poles)
    # A common frequency scale per row; each section is normalised at that scale so
    # the state magnitudes stay comparable, the leftover gain is spread evenly.
    mags = np.abs(np.concatenate([z, p], axis=1))
    pos = mags > 0
    with np.errstate(divide="ignore"):
        lm = np.where(pos, np.log(np.where(pos, mags, 1.0)), 0.0)
    cnt = pos.sum(axis=1)
    mu = np.where(cnt > 0, np.exp(lm.sum(axis=1) / np.maximum(cnt, 1)), 1.0)
    layout: list[tuple[list[int], list[int]]] = []
    for i in range(npl // 2):
        layout.append(([2 * i, 2 * i + 1], [k for k in (2 * i, 2 * i + 1) if k < nz]))
    if npl % 2:
        layout.append(([npl - 1], [npl - 1] if npl - 1 < nz else []))
    ns = len(layout)
    f = []
    for ps, zs in layout:
        fi = np.ones(bsz)
        for k in ps:
            fi = fi * np.maximum(np.abs(p[:, k]), mu)
        for k in zs:
            fi = fi / np.maximum(np.abs(z[:, k]), mu)
        f.append(fi)
    rest = gain / np.prod(np.stack(f), axis=0)
    share = np.abs(rest) ** (1.0 / ns)
    sign = np.where(rest < 0, -1.0, 1.0)
    ss: _SS | None = None
    for i, (ps, zs) in enumerate(layout):
        g = f[i] * share * (sign if i == 0 else 1.0)
        zl = [z[:, k] for k in zs]
        sec = (
            _section2(p[:, ps[0]], p[:, ps[1]], zl, g)
            if len(ps) == 2
            else _section1(p[:, ps[0]], zl, g)
        )
        ss = sec if ss is None else _series(ss, sec)
    assert ss is not None
    return ss


# Padé [13/13] coefficients of Higham (2005), "The scaling and squaring method for
# the matrix exponential revisited", SIAM J. Matrix Anal. Appl. 26(4):1179–1193.
_PADE13 = (
    64764752532480000.0,
    32382376266240000.0,
    7771770303897600.0,
    1187353796428800.0,
    129060195264000.0,
    10559470521600.0,
    670442572800.0,
    33522128640.0,
    1323241920.0,
    40840800.0,
    960960.0,
    16380.0,
    182.0,
    1.0,
)
_THETA13 = 5.371920351148152


def _expm(m: np.ndarray) -> np.ndarray:
    """Matrix exponential of a batch (B, k, k): Padé [13/13] with scaling and squaring
    (Higham 2005, Algorithm 2.3, degree 13 only), one scaling per batch row."""
    k = m.shape[1]
    if k == 0:
        return m.copy()
    norm = np.max(np.sum(np.abs(m), axis=1), axis=1)
    with np.errstate(divide="ignore"):
        sq = np.where(norm > _THETA13, np.ceil(np.log2(norm / _THETA13)), 0.0).astype(int)
    a = m / (2.0**sq)[:, None, None]
    b = _PADE13
    ident = np.eye(k)
    a2 = a @ a
    a4 = a2 @ a2
    a6 = a4 @ a2
    u = a @ (
        a6 @ (b[13] * a6 + b[11] * a4 + b[9] * a2)
        + b[7] * a6
        + b[5] * a4
        + b[3] * a2
        + b[1] * ident
    )
    v = (
        a6 @ (b[12] * a6 + b[10] * a4 + b[8] * a2)
        + b[6] * a6
        + b[4] * a4
        + b[2] * a2
        + b[0] * ident
    )
    r = np.linalg.solve(v - u, v + u)
    with np.errstate(over="ignore", invalid="ignore"):  # inf marks a diverging row
        for i in range(int(sq.max(initial=0))):
            more = sq > i
            r = r @ r if np.all(more) else np.where(more[:, None, None], r @ r, r)
    return r


# ======================================================================================
# Loop data, steady states, scales
# ======================================================================================
def _origin_split(gain: np.ndarray, zeros: np.ndarray, poles: np.ndarray):
    """Integrator count (poles − zeros at 0) and the gain with the origin removed."""
    kz = np.sum(zeros == 0, axis=1)
    kp = np.sum(poles == 0, axis=1)
    zn = np.where(zeros == 0, -1.0, zeros)
    pn = np.where(poles == 0, -1.0, poles)
    g0 = (gain * np.prod(-zn, axis=1) / np.prod(-pn, axis=1)).real
    return kp - kz, g0


def _steady_states(kc, c0, kp, p0):
    """Final values of y_ref (L/(1+L)), u_ref (C/(1+L)) and y_load (P/(1+L)) at s→0.

    Each is a limit of a ratio of power laws; ``inf`` marks an unbounded signal.
    """
    k = kc + kp
    l0 = c0 * p0
    with np.errstate(divide="ignore", invalid="ignore"):
        den = 1.0 + l0
        yf = np.where(k > 0, 1.0, np.where(k < 0, 0.0, l0 / den))
        u_k0 = np.where(kc > 0, np.inf, np.where(kc == 0, c0 / den, 0.0))
        u_kpos = np.where(kp > 0, 0.0, np.where(kp == 0, 1.0 / p0, np.inf))
        u_kneg = np.where(kc > 0, np.inf, np.where(kc == 0, c0, 0.0))
        uss = np.where(k > 0, u_kpos, np.where(k == 0, u_k0, u_kneg))
        l_kpos = np.where(kc > 0, 0.0, np.where(kc == 0, 1.0 / c0, np.inf))
        l_k0 = np.where(kp > 0, np.inf, np.where(kp == 0, p0 / den, 0.0))
        l_kneg = np.where(kp > 0, np.inf, np.where(kp == 0, p0, 0.0))
        lss = np.where(k > 0, l_kpos, np.where(k == 0, l_k0, l_kneg))
    bad = (k == 0) & (den == 0)
    yf = np.where(bad, np.nan, yf)
    uss = np.where(bad, np.inf, uss)
    lss = np.where(bad, np.inf, lss)
    return yf, uss, lss


def _crossover_range(loops: LoopBatch) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest gain crossover on a log grid (NaN where there is none)."""
    roots = np.concatenate([loops.zeros, loops.poles], axis=1)
    mags = np.abs(roots)
    pos = mags[(mags > 0) & np.isfinite(mags)]
    tau = float(np.max(loops.delay_s)) if loops.n else 0.0
    scales = np.concatenate([pos, [1.0 / tau] if tau > 0 else [], _asymptotic_crossovers(loops)])
    if scales.size == 0:
        scales = np.ones(1)
    lo = math.log10(float(np.min(scales))) - 3.0
    hi = math.log10(float(np.max(scales))) + 3.0
    w = np.logspace(lo, hi, max(int(24 * (hi - lo)), 48))
    nodelay = LoopBatch(loops.gain, loops.zeros, loops.poles, np.zeros(loops.n))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lm = np.log(np.abs(nodelay.freqresp(w)))
    lm = np.where(np.isfinite(lm), lm, np.where(lm > 0, 1e300, -1e300))
    above = lm >= 0.0
    change = above[:, 1:] != above[:, :-1]
    has = change.any(axis=1)
    first = np.argmax(change, axis=1)
    last = change.shape[1] - 1 - np.argmax(change[:, ::-1], axis=1)
    lw = np.log(w)

    def interp(k):
        r = np.arange(loops.n)
        y0, y1 = lm[r, k], lm[r, k + 1]
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.clip(np.where(y1 != y0, -y0 / (y1 - y0), 0.5), 0.0, 1.0)
        return np.exp(lw[k] + frac * (lw[k + 1] - lw[k]))

    wlo = np.where(has, interp(first), np.nan)
    whi = np.where(has, interp(last), np.nan)
    return wlo, whi


def _gain_scale(
    plant: Rational,
    wlo: np.ndarray,
    whi: np.ndarray,
    rmin: np.ndarray,
    rmax: np.ndarray,
    tau: float,
) -> np.ndarray:
    """Per row, a power of 2 near |P(jω_ref)| (ω_ref: the geometric mean of the lowest and
    highest crossover, else of the loop's root range, else 1/τ, else 1 rad/s).

    Dividing the plant's gain by it (and multiplying the compensator's) leaves L, and so
    y_ref, unchanged while both realisations carry gains of order one at the crossover:
    a plant gain of 1e-12 with a compensator gain of 2e12 left the closed-loop matrix
    with entries 4e12 and 2.5e-13 and an integrator that settled at 0.99985.
    """
    with np.errstate(invalid="ignore"):
        w_ref = np.sqrt(wlo * whi)
        w_ref = np.where(np.isfinite(w_ref) & (w_ref > 0), w_ref, np.sqrt(rmin * rmax))
    fallback = 1.0 / tau if tau > 0 else 1.0
    w_ref = np.where(np.isfinite(w_ref) & (w_ref > 0), w_ref, fallback)
    s = 1j * w_ref[:, None]
    pz = np.array(plant.zeros, dtype=complex)[None, :]
    pp = np.array(plant.poles, dtype=complex)[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        lg = (
            math.log2(abs(plant.gain))
            + np.sum(np.log2(np.abs(s - pz)), axis=1)
            - np.sum(np.log2(np.abs(s - pp)), axis=1)
        )
    lg = np.where(np.isfinite(lg), np.clip(np.round(lg), -900, 900), 0.0)
    return np.exp2(lg)


def _asymptotic_crossovers(loops: LoopBatch) -> np.ndarray:
    """Where the asymptotes cross |L| = 1: |gain|^(1/r) above every root (relative degree
    r > 0) and |K0|^(1/m) below every nonzero root (m loop integrators, K0 the gain with
    the origin removed). A large compensator gain moves the crossover far above the
    loop's roots (kiln plant × 1e8: 652 rad/s, roots at 0.02 and 0.1 rad/s); the grid of
    :func:`_crossover_range` must reach it or the horizon and the step follow the roots
    (8/0.02 s at a 2e-4 s step: 1.7e6 steps, 5 GB at × 1e10)."""
    nz, npl = loops.zeros.shape[1], loops.poles.shape[1]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lg = np.log(np.abs(loops.gain))
        above = np.exp(lg / (npl - nz)) if npl > nz else np.zeros(0)
        m, k0 = _origin_split(loops.gain, loops.zeros, loops.poles)
        lk = np.log(np.abs(k0))
        below = np.exp(lk[m > 0] / m[m > 0])
    out = np.concatenate([above, below])
    return out[np.isfinite(out) & (out > 1e-200) & (out < 1e200)]


def _nonzero_root_range(roots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    mags = np.abs(roots)
    ok = (mags > 0) & np.isfinite(mags)
    rmin = np.min(np.where(ok, mags, np.inf), axis=1, initial=np.inf)
    rmax = np.max(np.where(ok, mags, 0.0), axis=1, initial=0.0)
    has = ok.any(axis=1)
    return np.where(has, rmin, np.nan), np.where(has, rmax, np.nan)


# ======================================================================================
# Linear recursions over periods
# ======================================================================================
@dataclass(frozen=True)
class _Maps:
    """z_{m+1} = G z_m; outputs at the N+1 sample points of period m are O z_m.

    ``O`` has shape (B, N+1, 4, D): rows y, y', u, u'. The last two entries of z are
    the constant reference and load levels; z0 selects the experiment.
    """

    g: np.ndarray  # (B, D, D)
    o: np.ndarray  # (B, N+1, 4, D)
    n_sub: int  # N: intervals per period
    h: float  # interval length

    def take(self, rows: np.ndarray) -> _Maps:
        return _Maps(self.g[rows], self.o[rows], self.n_sub, self.h)


def _loop_free(P: _SS, C: _SS):
    """Delay-free closed loop: A (B,n,n), Bm (B,n,2) for inputs (r, d); output rows."""
    bsz, npl, nc = P.d.shape[0], P.n, C.n
    n = npl + nc
    delta = 1.0 + P.d * C.d
    delta = np.where(delta == 0, 1.0, delta)  # ill-posed rows are refused by _prepare
    yx = np.concatenate([P.c, (P.d / 1.0)[:, None] * C.c], axis=1) / delta[:, None]
    ye = np.stack([P.d * C.d, P.d], axis=1) / delta[:, None]
    ux = np.concatenate([np.zeros((bsz, npl)), C.c], axis=1) - C.d[:, None] * yx
    ue = np.stack([C.d, np.zeros(bsz)], axis=1) - C.d[:, None] * ye
    bp = np.concatenate([P.b, np.zeros((bsz, nc))], axis=1)
    bc = np.concatenate([np.zeros((bsz, npl)), C.b], axis=1)
    a = np.zeros((bsz, n, n))
    a[:, :npl, :npl] = P.a
    a[:, npl:, npl:] = C.a
    a += bp[:, :, None] * ux[:, None, :] - bc[:, :, None] * yx[:, None, :]
    bm = bp[:, :, None] * (ue + np.array([0.0, 1.0]))[:, None, :]
    bm += bc[:, :, None] * (np.array([1.0, 0.0]) - ye)[:, None, :]
    return a, bm, yx, ye, ux, ue


def _maps_free(P: _SS, C: _SS, h: float) -> _Maps:
    a, bm, yx, ye, ux, ue = _loop_free(P, C)
    bsz, n = a.shape[0], a.shape[1]
    m = np.zeros((bsz, n + 2, n + 2))
    m[:, :n, :n] = a * h
    m[:, :n, n:] = bm * h
    e = _expm(m)
    d = n + 2
    g = np.zeros((bsz, d, d))
    g[:, :n, :n] = e[:, :n, :n]
    g[:, :n, n:] = e[:, :n, n:]
    g[:, n, n] = 1.0
    g[:, n + 1, n + 1] = 1.0
    o0 = np.zeros((bsz, 4, d))
    o0[:, 0, :n], o0[:, 0, n:] = yx, ye
    o0[:, 1, :n] = np.einsum("bi,bij->bj", yx, a)
    o0[:, 1, n:] = np.einsum("bi,bij->bj", yx, bm)
    o0[:, 2, :n], o0[:, 2, n:] = ux, ue
    o0[:, 3, :n] = np.einsum("bi,bij->bj", ux, a)
    o0[:, 3, n:] = np.einsum("bi,bij->bj", ux, bm)
    o1 = o0 @ g
    return _Maps(g, np.stack([o0, o1], axis=1), 1, h)


def _deviation(
    mp: _Maps, P: _SS, C: _SS, yf: np.ndarray, uss: np.ndarray, lss: np.ndarray
) -> tuple[_Maps, np.ndarray]:
    """The delay-free map in deviations from the steady state, and the start z_0.

    x = x_ss + ξ with x_ss = −A⁻¹ B [r, d]: ξ obeys the homogeneous map (its input
    columns are exactly zero) and the outputs' constant columns are the exact final
    values (yf, uss, lss from the s → 0 limits). A loop whose time scales lie far apart
    (a resonance at 1e5 rad/s, a crossover at 2e-5 rad/s) otherwise settled on a
    rounding-sized offset (y → 0.9999963) that never decayed, and had no metrics.
    Rows whose steady state is not finite (an unstable loop simulated on request)
    keep the plain formulation.
    """
    a, bm, yx, ye, ux, ue = _loop_free(P, C)
    bsz, n = a.shape[0], a.shape[1]
    g, o = mp.g.copy(), mp.o[:, 0].copy()
    z0 = np.zeros((bsz, n + 2, 2))
    z0[:, n, 0] = 1.0
    z0[:, n + 1, 1] = 1.0
    if n == 0:
        return mp, z0
    xss = np.zeros((bsz, n, 2))
    ok = np.isfinite(yf) & np.isfinite(uss) & np.isfinite(lss)
    with np.errstate(all="ignore"):
        rows = np.nonzero(ok)[0]
        try:  # one batched solve; a singular row (rare) sends the batch row by row
            xss[rows] = np.linalg.solve(a[rows], -bm[rows])
        except np.linalg.LinAlgError:
            for i in rows:
                try:
                    xss[i] = np.linalg.solve(a[i], -bm[i])
                except np.linalg.LinAlgError:
                    ok[i] = False
        ok &= np.all(np.isfinite(xss.reshape(bsz, -1)), axis=1)
        ul = np.einsum("bi,bi->b", ux, xss[:, :, 1]) + ue[:, 1]  # u's final value, load step
    r = np.nonzero(ok)[0]
    g[r, :n, n:] = 0.0
    o[r, :, n:] = 0.0
    o[r, 0, n], o[r, 0, n + 1] = yf[r], lss[r]
    o[r, 2, n], o[r, 2, n + 1] = uss[r], ul[r]
    z0[r, :n, :] = -xss[r]
    o1 = o @ g
    return _Maps(g, np.stack([o, o1], axis=1), mp.n_sub, mp.h), z0


def _maps_delay(P: _SS, C: _SS, tau: float, n_sub: int) -> _Maps:
    """Period map over one delay τ = N·h with the Hermite-input exact discretisation.

    z = [x (n) | w(t_j) j=0..N | w'(t_j) j=0..N | r | d] holds the plant-input signal
    w = u + d over the previous period (j = 0 right limit, j = N left limit).
    """
    bsz, npl, nc = P.d.shape[0], P.n, C.n
    n = npl + nc
    h = tau / n_sub
    a = np.zeros((bsz, n, n))
    a[:, :npl, :npl] = P.a
    a[:, npl:, :npl] = -C.b[:, :, None] * P.c[:, None, :]
    a[:, npl:, npl:] = C.a
    bv = np.concatenate([P.b, -C.b * P.d[:, None]], axis=1)
    br = np.concatenate([np.zeros((bsz, npl)), C.b], axis=1)
    m = np.zeros((bsz, n + 5, n + 5))
    m[:, :n, :n] = a * h
    m[:, :n, n] = bv * h
    m[:, :n, n + 4] = br * h
    m[:, n, n + 1] = m[:, n + 1, n + 2] = m[:, n + 2, n + 3] = 1.0
    e = _expm(m)
    phi = e[:, :n, :n]
    g0, g1, g2, g3, gr = (e[:, :n, n + k] for k in range(5))
    # ∫ e^{A h(1−σ)} B h · (Hermite basis)(σ) dσ, basis in powers σ^k = k!·(σ^k/k!)
    h00 = g0 - 6 * g2 + 12 * g3
    h10 = (g1 - 4 * g2 + 6 * g3) * h
    h01 = 6 * g2 - 12 * g3
    h11 = (-2 * g2 + 6 * g3) * h
    j1 = n_sub + 1
    d = n + 2 * j1 + 2
    iv = n + np.arange(j1)
    idv = n + j1 + np.arange(j1)
    ir, idl = d - 2, d - 1
    xs = np.zeros((bsz, j1, n, d))
    x = np.zeros((bsz, n, d))
    x[:, :, :n] = np.eye(n)
    xs[:, 0] = x
    for j in range(n_sub):
        x = phi @ x
        x[:, :, iv[j]] += h00
        x[:, :, idv[j]] += h10
        x[:, :, iv[j + 1]] += h01
        x[:, :, idv[j + 1]] += h11
        x[:, :, ir] += gr
        xs[:, j + 1] = x
    ev = np.zeros((j1, d))
    ev[np.arange(j1), iv] = 1.0
    edv = np.zeros((j1, d))
    edv[np.arange(j1), idv] = 1.0
    er = np.zeros(d)
    er[ir] = 1.0
    xp, xc = xs[:, :, :npl], xs[:, :, npl:]
    y = np.einsum("bn,bjnd->bjd", P.c, xp) + P.d[:, None, None] * ev
    xpd = np.einsum("bmn,bjnd->bjmd", P.a, xp) + P.b[:, None, :, None] * ev[None, :, None, :]
    yd = np.einsum("bn,bjnd->bjd", P.c, xpd) + P.d[:, None, None] * edv
    err = er - y
    u = np.einsum("bn,bjnd->bjd", C.c, xc) + C.d[:, None, None] * err
    xcd = np.einsum("bmn,bjnd->bjmd", C.a, xc) + C.b[:, None, :, None] * err[:, :, None, :]
    ud = np.einsum("bn,bjnd->bjd", C.c, xcd) - C.d[:, None, None] * yd
    o = np.stack([y, yd, u, ud], axis=2)
    g = np.zeros((bsz, d, d))
    g[:, :n] = xs[:, -1]
    g[:, iv] = u
    g[:, iv, idl] += 1.0
    g[:, idv] = ud
    g[:, ir, ir] = 1.0
    g[:, idl, idl] = 1.0
    return _Maps(g, o, n_sub, h)


def _trajectory(g: np.ndarray, m: int, z_start: np.ndarray | None = None) -> np.ndarray:
    """States z_0..z_{m−1} of z_{k+1} = G z_k for both experiments: (B, m, D, 2).

    z_0 is ``z_start`` or the unit steps (reference in column 0, load in column 1).
    Doubling (Z ← [Z, G^k Z]) costs log2(m) products of D×D matrices; a long delay
    line (large D, few periods) is cheaper period by period.
    """
    bsz, d = g.shape[0], g.shape[1]
    if z_start is None:
        z_start = np.zeros((bsz, d, 2))
        z_start[:, d - 2, 0] = 1.0
        z_start[:, d - 1, 1] = 1.0
    doubling = math.log2(max(m, 2)) * d**3 * bsz
    sequential = m * (2.0 * d * d * bsz + 3e4)
    with np.errstate(over="ignore", invalid="ignore"):
        if doubling <= sequential:
            z = z_start[:, None]
            p = g
            while z.shape[1] < m:
                z = np.concatenate([z, p[:, None] @ z], axis=1)
                if z.shape[1] < m:
                    p = p @ p
            return z[:, :m]
        out = np.empty((bsz, m, d, 2))
        cur = z_start
        for k in range(m):
            out[:, k] = cur
            cur = g @ cur
        return out


# ======================================================================================
# Piecewise-cubic analysis
# ======================================================================================
def _cubic(v0, d0, v1, d1, h):
    """Coefficients (…, 4) in σ ∈ [0, 1] of the cubic Hermite interpolant."""
    return np.stack(
        [v0, h * d0, 3 * (v1 - v0) - h * (2 * d0 + d1), 2 * (v0 - v1) + h * (d0 + d1)], axis=-1
    )


def _pval(a, s):
    return ((a[..., 3] * s + a[..., 2]) * s + a[..., 1]) * s + a[..., 0]


def _pder(a, s):
    return (3 * a[..., 3] * s + 2 * a[..., 2]) * s + a[..., 1]


def _criticals(a):
    """The two critical points of each cubic, 1.0 where outside (0, 1) or absent."""
    a1, a2, a3 = a[..., 1], 2 * a[..., 2], 3 * a[..., 3]  # p' = a1 + a2 σ + a3 σ²
    with np.errstate(divide="ignore", invalid="ignore"):
        disc = a2 * a2 - 4 * a3 * a1
        sq = np.sqrt(np.maximum(disc, 0.0))
        q = -0.5 * (a2 + np.where(a2 >= 0, sq, -sq))
        r1 = np.where(a3 != 0, q / a3, np.nan)
        r2 = np.where(q != 0, a1 / q, np.nan)
        lin = np.where(a2 != 0, -a1 / a2, np.nan)
        r1 = np.where(np.abs(a3) > 0, r1, lin)
        r2 = np.where(np.abs(a3) > 0, r2, np.nan)
        r1 = np.where(disc >= 0, r1, np.nan)
        r2 = np.where(disc >= 0, r2, np.nan)
    c1 = np.where((r1 > 0) & (r1 < 1), r1, 1.0)
    c2 = np.where((r2 > 0) & (r2 < 1), r2, 1.0)
    return c1, c2


def _breaks(a):
    """Sorted breakpoints [0, c1, c2, 1] (…, 4): p is monotone between neighbours."""
    c1, c2 = _criticals(a)
    lo, hi = np.minimum(c1, c2), np.maximum(c1, c2)
    return np.stack([np.zeros_like(c1), lo, hi, np.ones_like(c1)], axis=-1)


def _extrema(a):
    """Max and min of each cubic over [0, 1] (ends and interior critical points)."""
    c = _criticals(a)
    v0 = a[..., 0]
    v1 = a.sum(axis=-1)
    vc1 = _pval(a, c[0])
    vc2 = _pval(a, c[1])
    return (
        np.maximum(np.maximum(v0, v1), np.maximum(vc1, vc2)),
        np.minimum(np.minimum(v0, v1), np.minimum(vc1, vc2)),
    )


def _monotone_root(a, lo, hi):
    """Root of p in [lo, hi] where p(lo) and p(hi) differ in sign.

    Newton's method kept inside the shrinking bracket, with a bisection whenever a
    step would leave it or would not shrink fast enough (the safeguard of Press et
    al., *Numerical Recipes*, 3rd ed., 2007, §9.4, "rtsafe"); stops at 1e-14 in σ.
    """
    if lo.size == 0:
        return lo.copy()
    sgn = np.where(_pval(a, hi) >= _pval(a, lo), 1.0, -1.0)  # make p increasing
    x = 0.5 * (lo + hi)
    dxold = hi - lo
    dx = dxold.copy()
    for _ in range(100):
        f = sgn * _pval(a, x)
        df = sgn * _pder(a, x)
        lo = np.where(f < 0, x, lo)
        hi = np.where(f >= 0, x, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = x - f / df
        small = np.abs(xn - x) <= 1e-14
        bis = (~((xn >= lo) & (xn <= hi)) | (np.abs(2.0 * f) > np.abs(dxold * df))) & ~small
        dxold = dx
        dx = np.where(bis, 0.5 * (hi - lo), np.abs(xn - x))
        x = np.where(bis, 0.5 * (lo + hi), xn)
        if np.all((dx <= 1e-14) | (f == 0)):
            break
    return x


def _first_at_or_above(a, level):
    """Smallest σ ∈ [0, 1] with p(σ) ≥ level (the caller knows one exists)."""
    b = a.copy()
    b[..., 0] = b[..., 0] - level
    pts = _breaks(b)
    vals = _pval(b[..., None, :], pts)
    if b.shape[0] == 0:
        return np.zeros(0)
    start = vals[:, 0] >= 0
    reach = vals[:, 1:] >= 0
    k = np.argmax(reach, axis=1)
    r = np.arange(b.shape[0])
    lo, hi = pts[r, k], pts[r, k + 1]
    root = _monotone_root(b, lo, hi)
    return np.where(start, 0.0, root)


def _reverse(a):
    """Coefficients of q(σ) = p(1 − σ)."""
    a0, a1, a2, a3 = a[..., 0], a[..., 1], a[..., 2], a[..., 3]
    return np.stack([a0 + a1 + a2 + a3, -(a1 + 2 * a2 + 3 * a3), a2 + 3 * a3, -a3], axis=-1)


def _abs_integral(a):
    """∫₀¹ |p(σ)| dσ for every cubic (…, 4), split exactly at sign changes.

    A cubic whose Bernstein coefficients on [0, 1] share one strict sign keeps that
    sign (the convex-hull property) and is integrated in one piece; only the others
    (a few per sign change of the signal) are split.
    """
    a0, a1, a2, a3 = a[..., 0], a[..., 1], a[..., 2], a[..., 3]
    bern = np.stack([a0, a0 + a1 / 3, a0 + (2 * a1 + a2) / 3, a0 + a1 + a2 + a3], axis=-1)
    one_sign = np.all(bern > 0, axis=-1) | np.all(bern < 0, axis=-1)
    out = np.abs(a0 + a1 / 2 + a2 / 3 + a3 / 4)
    if not np.all(one_sign):
        split = ~one_sign
        out[split] = _abs_integral_split(a[split])
    return out


def _abs_integral_split(a):
    """∫₀¹ |p(σ)| dσ for every cubic (…, 4), split exactly at sign changes."""
    pts = _breaks(a)
    vals = _pval(a[..., None, :], pts)
    change = vals[..., :-1] * vals[..., 1:] < 0
    rho = pts[..., 1:].copy()
    if np.any(change):
        idx = np.nonzero(change)
        sub = a[idx[:-1]]
        lo = pts[..., :-1][idx]
        hi = pts[..., 1:][idx]
        rho[idx] = _monotone_root(sub, lo, hi)
    edge = np.ones(rho.shape[:-1] + (1,))
    bk = np.concatenate([0.0 * edge, rho, edge], axis=-1)

    def prim(s):
        return s * (
            a[..., 0:1] + s * (a[..., 1:2] / 2 + s * (a[..., 2:3] / 3 + s * a[..., 3:4] / 4))
        )

    f = prim(bk)
    return np.abs(np.diff(f, axis=-1)).sum(axis=-1)


# ======================================================================================
# Trajectories on a time grid shared by a chunk of designs
# ======================================================================================
@dataclass(frozen=True)
class _Rows:
    """Per-row data of a chunk (arrays with first axis B)."""

    yf: np.ndarray
    uss: np.ndarray  # signed final value of u_ref; ±inf when u is unbounded
    lss: np.ndarray  # final value of y_load
    iae_ok: np.ndarray  # the load error vanishes (structurally)
    check_decay: np.ndarray  # stability not given: also require decaying deviations
    lam: np.ndarray  # delay-free closed-loop eigenvalues (B, n); (B, 0) with delay

    def take(self, idx: np.ndarray) -> _Rows:
        return _Rows(
            self.yf[idx],
            self.uss[idx],
            self.lss[idx],
            self.iae_ok[idx],
            self.check_decay[idx],
            self.lam[idx],
        )


@dataclass(frozen=True)
class _Traj:
    """Piecewise-cubic signals on intervals [t0_k, t0_k + hk_k] (common to the rows).

    ``sig[name] = (v0, d0, v1, d1)``, each (B, K): value and derivative at the start
    (right limit) and at the end (left limit) of every interval; names ``y`` (y_ref),
    ``u`` (u_ref), ``l`` (y_load).
    """

    t0: np.ndarray
    hk: np.ndarray
    sig: dict[str, tuple[np.ndarray, ...]]
    finite: np.ndarray

    @property
    def t_end(self) -> float:
        return float(self.t0[-1] + self.hk[-1])

    def cubic(self, name: str, rows: np.ndarray | None = None) -> np.ndarray:
        v0, d0, v1, d1 = self.sig[name]
        if rows is not None:
            v0, d0, v1, d1 = v0[rows], d0[rows], v1[rows], d1[rows]
        return _cubic(v0, d0, v1, d1, self.hk)


def _clean(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    bsz = x.shape[0]
    with np.errstate(invalid="ignore"):
        fin = np.all(np.isfinite(x.reshape(bsz, -1)), axis=1)
    return np.where(np.isfinite(x), x, 0.0), fin


_NAMES = (("y", 0, 0), ("u", 2, 0), ("l", 0, 1))  # signal, output row, experiment
_HALVE_TOL = 2e-7  # step-doubling estimate (relative) below which the step may double


class _Sim:
    """Resumable simulation of a chunk of designs on one shared, growing time grid.

    Without delay the step doubles once every closed-loop mode it would
    under-resolve has decayed by e^{-23} and it stays below 1/16 of the elapsed time.
    With delay the step τ/N halves N (the buffer keeps every other sample, which is
    exact) at the end of a block of periods whose step-doubling estimate — the cubic
    over two steps against the sample between them — is below 2e-7 of each signal's
    peak, in every design of the chunk. A fixed step (``dt_s``) never changes.
    """

    amp: np.ndarray | None  # mode amplitudes (explorer.time_domain.modal_step), delay-free only

    def __init__(self, plan: _Plan, idx: np.ndarray) -> None:
        self.tau = plan.tau
        self.uniform = plan.uniform
        self.P, self.C = plan.P.take(idx), plan.C.take(idx)
        self.lam = plan.rows.lam[idx]
        h = float(np.min(plan.h_row[idx]))
        self.bsz = idx.size
        if self.tau > 0:
            n0 = max(1, math.ceil(self.tau / h * (1 - 1e-12)))
            if not self.uniform:
                n0 = 2 ** math.ceil(math.log2(n0))
            self.n_sub = n0
            self.h = self.tau / n0
            self.maps: dict[int, _Maps] = {0: _maps_delay(self.P, self.C, self.tau, n0)}
        else:
            self.n_sub = 1
            self.h = h
            self.maps = {0: _maps_free(self.P, self.C, h)}
        self.g = self.maps[0].g
        self.level = 0
        self.t = 0.0
        self.z: np.ndarray | None = None
        if self.tau == 0.0:
            rows = plan.rows.take(idx)
            mp, self.z = _deviation(self.maps[0], self.P, self.C, rows.yf, rows.uss, rows.lss)
            self.maps = {0: mp}
            self.g = mp.g
            self._modes(rows)
        self.t0: list[np.ndarray] = []
        self.hk: list[np.ndarray] = []
        self.parts: dict[str, list[list[np.ndarray]]] = {n: [[], [], [], []] for n, _, _ in _NAMES}
        self.finite = np.ones(self.bsz, dtype=bool)
        if self.tau > 0 or self.uniform:
            self.amp = None
            self.scale = np.zeros((self.bsz, 3))
        self.k = 0

    def _modes(self, rows: _Rows) -> None:
        """Mode amplitudes for the step rule (explorer.time_domain.modal_step); the signals' sizes
        start at their final values."""
        a = _loop_free(self.P, self.C)[0]
        n = a.shape[1]
        self.amp = None
        self.scale = np.zeros((self.bsz, 3))
        if n == 0 or self.z is None:
            return
        o = self.maps[0].o[:, 0]
        ok = np.all(self.g[:, :n, n:] == 0.0, axis=(1, 2))  # deviation form (_deviation)
        lam, amp = modal_amplitudes(a, o[:, [0, 2], :n], self.z[:, :n, :], ok)
        self.lam, self.amp = lam, amp
        self.scale = np.abs(np.stack([rows.yf, rows.uss, rows.lss], axis=1))
        self.scale = np.where(np.isfinite(self.scale), self.scale, 0.0)

    # -- bookkeeping ----------------------------------------------------------------
    def take(self, rows: np.ndarray) -> _Sim:
        new = object.__new__(_Sim)
        new.__dict__.update(self.__dict__)
        new.P, new.C, new.lam = self.P.take(rows), self.C.take(rows), self.lam[rows]
        new.amp = None if self.amp is None else self.amp[rows]
        new.bsz = rows.size
        new.maps = {k: m.take(rows) for k, m in self.maps.items()}
        new.g = self.g[rows]
        new.z = None if self.z is None else self.z[rows]
        new.t0, new.hk = list(self.t0), list(self.hk)
        new.parts = {n: [[x[rows] for x in lst] for lst in v] for n, v in self.parts.items()}
        new.finite = self.finite[rows]
        new.scale = self.scale[rows]
        return new

    def _append(self, t0: np.ndarray, hk: float, v: np.ndarray, n_per: int) -> None:
        """v: (B, L, n_per+1, 4, 2) samples of L blocks of n_per intervals each."""
        v, fin = _clean(v)
        self.finite &= fin
        bsz = v.shape[0]
        for i, (name, k, e) in enumerate(_NAMES):
            x, dx = v[..., k, e], v[..., k + 1, e]
            lst = self.parts[name]
            for j, arr in enumerate((x[:, :, :-1], dx[:, :, :-1], x[:, :, 1:], dx[:, :, 1:])):
                lst[j].append(arr.reshape(bsz, -1))
            self.scale[:, i] = np.maximum(self.scale[:, i], np.abs(x).max(axis=(1, 2)))
        self.t0.append(t0)
        self.hk.append(np.full(t0.size, hk))
        self.k += t0.size

    def traj(self) -> _Traj:
        # consolidate the pieces appended since the last call, so that later calls and
        # take() handle a few arrays instead of one per block (a loop with widely
        # separated time scales appends thousands of blocks over its horizon doublings)
        for v in self.parts.values():
            for j, lst in enumerate(v):
                if len(lst) > 1:
                    v[j] = [np.concatenate(lst, axis=1)]
        if len(self.t0) > 1:
            self.t0, self.hk = [np.concatenate(self.t0)], [np.concatenate(self.hk)]
        sig = {n: tuple(lst[0] for lst in v) for n, v in self.parts.items()}
        return _Traj(self.t0[0], self.hk[0], sig, self.finite.copy())

    # -- stepping -------------------------------------------------------------------
    def advance(self, t_target: float) -> None:
        if self.tau > 0:
            self._advance_delay(t_target)
        else:
            self._advance_free(t_target)

    def _switch_time(self, h_next: float) -> float:
        if self.uniform:
            return math.inf
        t_modes = switch_time(self.lam, self.amp, self.scale, h_next, _HW_FREE)
        return max(16.0 * h_next, t_modes)

    def _advance_free(self, t_target: float) -> None:
        o0 = self.maps[0].o[:, 0]  # (B, 4, D)
        while self.t < t_target * (1 - 1e-12) and self.k < _MAX_INTERVALS:
            hs = self.h * 2.0**self.level
            t_sw = self._switch_time(2.0 * hs)
            if self.t >= t_sw * (1 - 1e-12):
                with np.errstate(over="ignore", invalid="ignore"):
                    self.g = self.g @ self.g
                self.level += 1
                continue
            stop = min(t_sw, t_target)
            n = max(1, math.ceil((stop - self.t) / hs * (1 - 1e-9)))
            n = min(n, _MAX_INTERVALS - self.k)  # the working set stays bounded
            zz = _trajectory(self.g, n + 1, self.z)
            with np.errstate(over="ignore", invalid="ignore"):
                # (B,4,D) @ (B,D,K·2): one batched product (einsum did not use BLAS)
                bsz, kk, dd = zz.shape[0], zz.shape[1], zz.shape[2]
                zt = zz.transpose(0, 2, 1, 3).reshape(bsz, dd, kk * 2)
                out = (o0 @ zt).reshape(bsz, 4, kk, 2).transpose(0, 2, 1, 3)
            self._append(self.t + hs * np.arange(n), hs, out[:, None], n)
            self.z = zz[:, -1]
            self.t += n * hs

    def _level_maps(self) -> _Maps:
        if self.level not in self.maps:
            n_sub = self.n_sub >> self.level
            self.maps[self.level] = _maps_delay(self.P, self.C, self.tau, n_sub)
        return self.maps[self.level]

    def _advance_delay(self, t_target: float) -> None:
        tau = self.tau
        while self.t < t_target * (1 - 1e-12) and self.k < _MAX_INTERVALS:
            mp = self._level_maps()
            n_sub, h = mp.n_sub, mp.h
            left = max(1, math.ceil((t_target - self.t) / tau * (1 - 1e-9)))
            n_per = min(left, max(4, math.ceil(self.t / (8.0 * tau))))
            n_per = min(n_per, max(1, -(-(_MAX_INTERVALS - self.k) // n_sub)))
            zz = _trajectory(mp.g, n_per + 1, self.z)
            bsz, d = mp.g.shape[0], mp.g.shape[1]
            j1 = n_sub + 1
            o2 = mp.o.reshape(bsz, j1 * 4, d)
            z2 = zz[:, :n_per].transpose(0, 2, 1, 3).reshape(bsz, d, n_per * 2)
            with np.errstate(over="ignore", invalid="ignore"):
                out = (o2 @ z2).reshape(bsz, j1, 4, n_per, 2).transpose(0, 3, 1, 2, 4)
            k0 = round(self.t / h)
            self._append((k0 + np.arange(n_per * n_sub)) * h, h, out, n_sub)
            self.z = zz[:, n_per]
            self.t += n_per * tau
            if not self.uniform and n_sub >= 2 and self._smooth(out, h, n_per):
                self._halve(mp)

    def _smooth(self, out: np.ndarray, h: float, n_per: int) -> bool:
        """Step-doubling estimate over the second half of the block, all rows."""
        v, _ = _clean(out[:, n_per // 2 :])
        for i, (_, k, e) in enumerate(_NAMES):
            x, dx = v[..., k, e], v[..., k + 1, e]
            pred = 0.5 * (x[..., 0:-1:2] + x[..., 2::2]) + 0.25 * h * (
                dx[..., 0:-1:2] - dx[..., 2::2]
            )
            err = np.abs(x[..., 1::2] - pred).max(axis=(1, 2))
            if np.any(err > _HALVE_TOL * np.maximum(self.scale[:, i], 1e-300)):
                return False
        return True

    def _halve(self, mp: _Maps) -> None:
        n = self.P.n + self.C.n
        j1 = mp.n_sub + 1
        keep = np.concatenate(
            [
                np.arange(n),
                n + np.arange(0, j1, 2),
                n + j1 + np.arange(0, j1, 2),
                [n + 2 * j1, n + 2 * j1 + 1],
            ]
        )
        assert self.z is not None
        self.z = self.z[:, keep]
        self.level += 1


# ======================================================================================
# Settledness and metrics
# ======================================================================================
def _check(tr: _Traj, rows: _Rows, band: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cheap, sample-based test of each row on this horizon: (settled, diverged, yu), yu:
    settled but for the load-error integral.

    Settled: no sample outside the band after 45 % of the horizon; the control
    signal's tail (second half) can no longer raise its peak; the load-error integral
    has converged (tail estimate from the decay between the last two quarters ≤ 1e-6
    of it); and, when stability was not given, every deviation from its final value
    decays. Diverged: non-finite, or a deviation in the last quarter 1e8 times that
    of the first half.
    """
    bsz = tr.finite.shape[0]
    t_end = tr.t_end
    tmid = tr.t0 + 0.5 * tr.hk
    first = tmid < 0.5 * t_end
    third = (tmid >= 0.5 * t_end) & (tmid < 0.75 * t_end)
    fourth = tmid >= 0.75 * t_end
    second_half = ~first

    def wmax(x, mask):
        return np.max(np.where(mask, x, 0.0), axis=1)

    yf = rows.yf
    yok = np.isfinite(yf) & (yf != 0)
    yfz = np.where(yok, yf, 0.0)
    bandw = band * np.where(yok, np.abs(yf), 1.0)
    y0, _, y1, _ = tr.sig["y"]
    dy = np.maximum(np.abs(y0 - yfz[:, None]), np.abs(y1 - yfz[:, None]))
    late = tr.t0 + tr.hk > 0.45 * t_end
    y_settled = ~yok | ~np.any((dy > bandw[:, None]) & late, axis=1)

    u0, _, u1, _ = tr.sig["u"]
    ufin = np.isfinite(rows.uss)
    uf = np.where(ufin, rows.uss, 0.0)
    peak_in = np.maximum(np.abs(u0), np.abs(u1)).max(axis=1)
    du = np.maximum(np.abs(u0 - uf[:, None]), np.abs(u1 - uf[:, None]))
    dev_u = wmax(du, second_half)
    u_settled = (
        ~ufin
        | (dev_u <= 1e-4 * np.maximum(peak_in, 1e-300))
        | (peak_in >= np.abs(uf) + 2.0 * dev_u)
    )

    l0, _, l1, _ = tr.sig["l"]
    la = np.maximum(np.abs(l0), np.abs(l1))
    l3, l4 = wmax(la, third), wmax(la, fourth)
    iae = (0.5 * (np.abs(l0) + np.abs(l1)) * tr.hk).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = np.log(l3 / l4) / (0.25 * t_end)
        tail = l4 / rate
    l_settled = ~rows.iae_ok | (l4 <= 1e-13 * la.max(axis=1)) | ((l4 < l3) & (tail <= 1e-6 * iae))

    lfz = np.where(np.isfinite(rows.lss), rows.lss, 0.0)
    dl = np.maximum(np.abs(l0 - lfz[:, None]), np.abs(l1 - lfz[:, None]))
    decaying = np.ones(bsz, dtype=bool)
    decaying_yu = decaying
    diverged = ~tr.finite
    for i, dev in enumerate((dy, du, dl)):
        w1, w3, w4 = wmax(dev, first), wmax(dev, third), wmax(dev, fourth)
        decaying &= (w4 < w3) | (w4 <= 1e-10 * np.maximum(w1, 1e-300))
        if i == 1:
            decaying_yu = decaying.copy()
        # relative to the first half's deviation (an absolute floor of 1 called a
        # control signal of size 1e12 diverged: plant gain 1e-12, compensator 1e12)
        diverged |= w4 > 1e8 * np.maximum(w1, 1e-300)
    yu = y_settled & u_settled & (decaying_yu | ~rows.check_decay) & tr.finite & ~diverged
    settled = yu & l_settled & (decaying | ~rows.check_decay)
    return settled, diverged, yu


def _metrics(tr: _Traj, sel: np.ndarray, rows: _Rows, band: float) -> dict[str, np.ndarray]:
    """Step metrics of rows ``sel`` from their piecewise-cubic signals."""
    bsz = sel.size
    cy = tr.cubic("y", sel)
    cu = tr.cubic("u", sel)
    k_int = cy.shape[1]
    r = np.arange(bsz)
    t0, hk = tr.t0, tr.hk
    ymax, ymin = _extrema(cy)
    umax, umin = _extrema(cu)

    yf = rows.yf
    yok = np.isfinite(yf) & (yf != 0)
    yfa = np.where(yok, np.abs(yf), 1.0)
    sgn = np.where(yf < 0, -1.0, 1.0)
    smax = np.where(sgn[:, None] > 0, ymax, -ymin)  # max of sgn·y per interval
    overshoot = np.maximum(0.0, (smax.max(axis=1) - yfa) / yfa * 100.0)

    # root problems: first 10 % and 90 % crossings, last exit from the band
    problems_a, problems_l, owners = [], [], []
    for kind, frac in (("t10", 0.1), ("t90", 0.9)):
        lev = frac * yfa
        hit = smax >= lev[:, None]
        rs = np.nonzero(hit.any(axis=1) & yok)[0]
        k = np.argmax(hit, axis=1)[rs]
        problems_a.append(sgn[rs, None] * cy[rs, k])
        problems_l.append(lev[rs])
        owners.append((kind, rs, k))
    bandw = band * yfa
    up = ymax > (yf + bandw)[:, None]
    dn = ymin < (yf - bandw)[:, None]
    outside = (up | dn) & yok[:, None]
    any_out = outside.any(axis=1)
    klast = k_int - 1 - np.argmax(outside[:, ::-1], axis=1)
    rs_u = np.nonzero(any_out & up[r, klast])[0]
    rs_d = np.nonzero(any_out & dn[r, klast])[0]
    problems_a.append(_reverse(cy[rs_u, klast[rs_u]]))
    problems_l.append((yf + bandw)[rs_u])
    owners.append(("up", rs_u, klast[rs_u]))
    problems_a.append(-_reverse(cy[rs_d, klast[rs_d]]))
    problems_l.append(-(yf - bandw)[rs_d])
    owners.append(("dn", rs_d, klast[rs_d]))
    sig = _first_at_or_above(np.concatenate(problems_a), np.concatenate(problems_l))
    times = {}
    pos = 0
    for kind, rs, k in owners:
        s = sig[pos : pos + rs.size]
        pos += rs.size
        t = np.full(bsz, np.nan)
        t[rs] = t0[k] + (s if kind in ("t10", "t90") else 1.0 - s) * hk[k]
        times[kind] = t
    ts = np.where(any_out, np.fmax(times["up"], times["dn"]), 0.0)
    rise = times["t90"] - times["t10"]

    peak_in = np.maximum(umax.max(axis=1), -umin.min(axis=1))
    ufin = np.isfinite(rows.uss)
    peak = np.where(ufin, np.maximum(peak_in, np.abs(np.where(ufin, rows.uss, 0.0))), np.nan)
    iae = np.full(bsz, np.nan)
    if np.any(rows.iae_ok):
        rs = np.nonzero(rows.iae_ok)[0]
        iae[rs] = (_abs_integral(tr.cubic("l", sel[rs])) * hk).sum(axis=1)
    return {
        "overshoot_pct": np.where(yok, overshoot, np.nan),
        "settling_time_s": np.where(yok, ts, np.nan),
        "rise_time_s": np.where(yok, rise, np.nan),
        "peak_control": peak,
        "final_value": yf,
        "iae_load": iae,
    }


# ======================================================================================
# Planning and the batch driver
# ======================================================================================
@dataclass(frozen=True)
class _Plan:
    P: _SS
    C: _SS
    tau: float
    h_row: np.ndarray  # preferred step per row
    t0_row: np.ndarray  # initial horizon per row
    rows: _Rows
    unstable: np.ndarray  # rows known unstable (not simulated)
    uniform: bool  # a fixed step was asked for (no step growth without delay)
    w_hi: np.ndarray  # highest gain crossover per row, rad/s (NaN: none)
    a_row: np.ndarray  # gain moved from the plant to the compensator (u ÷ a, y_load × a)


def _prepare(
    plant: Rational,
    comp_gain: np.ndarray,
    comp_zeros: np.ndarray,
    comp_poles: np.ndarray,
    stable: np.ndarray | None,
    dt_s: float | None,
) -> _Plan:
    if not plant.is_proper:
        raise DesignError(f"plant is improper ({len(plant.zeros)} zeros, {len(plant.poles)} poles)")
    if not (math.isfinite(plant.delay_s) and plant.delay_s >= 0):
        raise DesignError(f"plant delay must be a finite number ≥ 0 s, got {plant.delay_s}")
    if dt_s is not None and not (math.isfinite(dt_s) and dt_s > 0):
        raise DesignError(f"dt_s must be a positive number, got {dt_s}")
    if dt_s is not None and plant.delay_s > 0 and plant.delay_s / dt_s > _MAX_SUB * (1 + 1e-12):
        raise DesignError(
            f"dt_s = {dt_s:g} s is too fine for the {plant.delay_s:g} s delay: at most "
            f"{_MAX_SUB} steps per delay (dt_s ≥ {plant.delay_s / _MAX_SUB:.3g} s)"
        )
    bsz = comp_gain.shape[0]
    if comp_zeros.shape[1] > comp_poles.shape[1]:
        raise DesignError(
            f"compensator is improper ({comp_zeros.shape[1]} zeros, {comp_poles.shape[1]} "
            "poles): it needs at least as many poles as zeros"
        )
    invalid = ~(
        np.isfinite(comp_gain)
        & np.all(np.isfinite(comp_zeros), axis=1)
        & np.all(np.isfinite(comp_poles), axis=1)
    )
    g = np.where(invalid, 1.0, comp_gain)
    zc = np.where(invalid[:, None], -1.0, comp_zeros)
    pc = np.where(invalid[:, None], -1.0, comp_poles)
    pz = np.array(plant.zeros, dtype=complex).reshape(1, -1)
    pp = np.array(plant.poles, dtype=complex).reshape(1, -1)
    tau = float(plant.delay_s)
    loops = LoopBatch.series(plant, g, zc, pc)
    wlo, whi = _crossover_range(loops)
    rmin, rmax = _nonzero_root_range(np.concatenate([loops.zeros, loops.poles], axis=1))
    # Only the loop product C·P matters for y_ref: the plant is realised with its gain
    # divided by a_row (a power of 2, exact) so that |P(jω)| ≈ 1 near the crossover and
    # the compensator carries the rest; u and y_load are scaled back by the caller.
    a_row = _gain_scale(plant, wlo, whi, rmin, rmax, tau)
    a_row = np.where(invalid, 1.0, a_row)
    pzb, ppb = np.repeat(pz, bsz, axis=0), np.repeat(pp, bsz, axis=0)
    P = _realise(plant.gain / a_row, pzb, ppb, "plant")
    C = _realise(g * a_row, zc, pc, "compensator")

    kc, c0 = _origin_split(g * a_row, zc, pc)
    kp, p0 = _origin_split(plant.gain / a_row, pzb, ppb)
    yf, uss, lss = _steady_states(kc, c0, kp, p0)
    iae_ok = (kc > 0) | (kp < 0)

    unstable = np.zeros(bsz, dtype=bool) if stable is None else ~stable
    if tau == 0.0:
        ill = 1.0 + P.d * C.d == 0
        if np.any(ill) and bsz == 1:
            raise DesignError("the loop is ill-posed: 1 + L(∞) = 0 (a direct feedthrough of −1)")
        unstable = unstable | ill
        a, *_ = _loop_free(P, C)
        lam = np.linalg.eigvals(a) if a.shape[1] else np.zeros((bsz, 0), dtype=complex)
        mag = np.abs(lam)
        fast = np.max(mag, axis=1, initial=0.0)
        slow = np.min(np.where(mag > 0, -lam.real, np.inf), axis=1, initial=np.inf)
        if stable is None:
            tol = 1e-10 * np.maximum(fast, 1e-300)[:, None]
            unstable = unstable | np.any(lam.real >= -tol, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            h_row = np.where(fast > 0, _HW_FREE / fast, np.nan)
            t0 = np.fmin(np.where(slow > 0, 8.0 / slow, np.nan), 12.0 / wlo)
        default = np.where(np.isfinite(rmin), 12.0 / rmin, 1.0)
        t0 = np.where(np.isfinite(t0) & (t0 > 0), t0, default)
        h_row = np.where(np.isfinite(h_row), h_row, t0 / _MIN_INTERVALS)
        h_row = np.minimum(h_row, t0 / _MIN_INTERVALS)
    else:
        lam = np.zeros((bsz, 0), dtype=complex)
        fast = np.fmax(rmax, whi)
        h_row = np.where(np.isfinite(fast), _HW_DELAY / fast, tau)
        lo = np.where(np.isfinite(wlo), wlo, rmin)
        with np.errstate(divide="ignore"):
            t0 = tau + np.where(np.isfinite(lo), 12.0 / lo, 20.0 * tau)
        t0 = np.maximum(t0, 20.0 * tau)
        if stable is None:
            # a neutral loop (direct feedthrough through the delay) with |L(∞)| ≥ 1
            # is unstable: its jumps at multiples of τ do not decay (Hale & Verduyn
            # Lunel, Introduction to Functional Differential Equations, 1993, §9.1;
            # from memory)
            unstable = unstable | (np.abs(C.d * P.d) >= 1.0)
    if dt_s is not None:
        h_row = np.full(bsz, float(dt_s))
    unstable = unstable | invalid | ~np.isfinite(yf)
    rows = _Rows(yf, uss, lss, iae_ok, np.full(bsz, stable is None), lam)
    return _Plan(P, C, tau, h_row, t0, rows, unstable, dt_s is not None, whi, a_row)


def _run_chunk(plan: _Plan, idx: np.ndarray, band: float) -> dict[str, np.ndarray]:
    """Metrics of rows ``idx`` on one common time grid; the horizon doubles until every
    row has settled or diverged or the step-count cap is reached."""
    sim = _Sim(plan, idx)
    rows = plan.rows.take(idx)
    bsz = idx.size
    res = {k: np.full(bsz, np.nan) for k in METRIC_KEYS}
    active = np.arange(bsz)
    t_end = max(float(np.max(plan.t0_row[idx])), _MIN_INTERVALS * sim.h)
    doublings = 0
    while active.size:
        sim.advance(t_end)
        tr = sim.traj()
        settled, diverged, yu = _check(tr, rows, band)
        done = settled | diverged | (sim.k >= _MAX_INTERVALS) | (doublings >= _MAX_DOUBLINGS)
        doublings += 1
        # given up with y and u settled but the load integral still running (a slow
        # mode seen only by the load: a PI zero on a 1e-4 rad/s pole behind a 1 s
        # delay): every figure but iae_load, which is None
        part = done & ~settled & yu
        keep = np.nonzero(settled | part)[0]
        if keep.size:
            met = _metrics(tr, keep, rows.take(keep), band)
            met["iae_load"] = np.where(part[keep], np.nan, met["iae_load"])
            for k in METRIC_KEYS:
                res[k][active[keep]] = met[k]
        # rows that never settled keep only their final value
        gone = np.nonzero(done & ~settled & ~part & ~diverged)[0]
        res["final_value"][active[gone]] = rows.yf[gone]
        more = np.nonzero(~done)[0]
        active = active[more]
        if more.size:
            sim, rows = sim.take(more), rows.take(more)
        t_end = 2.0 * t_end
    return res


def _chunk_size(d: int, n_sub: int) -> int:
    per_row = 4096 * (60.0 + 2.0 * d / n_sub) + (n_sub + 1) * 8 * d + 4 * d * d
    return int(max(1, min(256, _CHUNK_FLOATS // per_row)))


def fold_threshold_rad_s(tau_s: float) -> float:
    """Frequency (rad/s) above which stable roots may be folded into a delay τ (s):
    roots above it would need more than _SUB_FOLD samples per delay."""
    return _HW_DELAY * _SUB_FOLD / tau_s


def _sub_per_delay(plan: _Plan, h: float) -> int:
    """Samples per delay the simulation of a row with preferred step h would use."""
    n = max(1, math.ceil(plan.tau / h * (1 - 1e-12)))
    return n if plan.uniform else 2 ** math.ceil(math.log2(n))


def _resolvable(plan: _Plan, folded: bool) -> np.ndarray:
    """Rows the delayed-loop simulation can resolve within _MAX_SUB samples per delay
    (and, for a folded model, whose crossovers stay well below the fold threshold)."""
    if plan.tau == 0.0:
        return np.ones(plan.h_row.shape, dtype=bool)
    ok = np.array([_sub_per_delay(plan, float(h)) <= _MAX_SUB for h in plan.h_row])
    if folded:
        wf = fold_threshold_rad_s(plan.tau)
        ok &= ~(plan.w_hi >= wf / _FOLD_SEPARATION)
    return ok


def _model_groups(
    plant: Rational,
    comp_gain: np.ndarray,
    comp_zeros: np.ndarray,
    comp_poles: np.ndarray,
    dt_s: float | None,
) -> list[ModelGroup]:
    """One group (the batch as given) unless far roots need folding
    (explorer.time_domain.farroots)."""
    if plant.delay_s > 0 and dt_s is None and math.isfinite(plant.delay_s):
        w_far = fold_threshold_rad_s(plant.delay_s)
        return fold_far_roots(plant, comp_gain, comp_zeros, comp_poles, w_far)
    rows = np.arange(comp_gain.shape[0])
    return [ModelGroup(rows, plant, comp_gain, comp_zeros, comp_poles, False)]


def _simulate_group(
    grp: ModelGroup, stable: np.ndarray | None, band: float, dt_s: float | None
) -> dict[str, np.ndarray]:
    plan = _prepare(grp.plant, grp.gain, grp.zeros, grp.poles, stable, dt_s)
    bsz = grp.gain.shape[0]
    res = {k: np.full(bsz, np.nan) for k in METRIC_KEYS}
    resolvable = _resolvable(plan, grp.folded)
    # an unresolvable row keeps only its final value (known from the s → 0 limits)
    lost = ~plan.unstable & ~resolvable
    res["final_value"][lost] = plan.rows.yf[lost]
    todo = np.nonzero(~plan.unstable & resolvable)[0]
    # similar steps together, so that one fast design does not slow a whole chunk
    todo = todo[np.argsort(plan.h_row[todo], kind="stable")]
    pos = 0
    while pos < todo.size:
        h = float(plan.h_row[todo[pos]])
        n_sub = max(1, math.ceil(plan.tau / h)) if plan.tau > 0 else 1
        d = plan.P.n + plan.C.n + (2 * n_sub + 4 if plan.tau > 0 else 2)
        idx = todo[pos : pos + _chunk_size(d, n_sub)]
        pos += idx.size
        part = _run_chunk(plan, idx, band)
        for k in METRIC_KEYS:
            res[k][idx] = part[k]
    # back from the normalised gains (_gain_scale): u = u'/a, y_load = a·y_load'
    res["peak_control"] = res["peak_control"] / plan.a_row
    res["iae_load"] = res["iae_load"] * plan.a_row
    return res


def _simulate_batch(
    plant: Rational,
    comp_gain: np.ndarray,
    comp_zeros: np.ndarray,
    comp_poles: np.ndarray,
    stable: np.ndarray | None,
    band: float,
    dt_s: float | None,
) -> dict[str, np.ndarray]:
    bsz = comp_gain.shape[0]
    res = {k: np.full(bsz, np.nan) for k in METRIC_KEYS}
    for grp in _model_groups(plant, comp_gain, comp_zeros, comp_poles, dt_s):
        st = None if stable is None else stable[grp.rows]
        part = _simulate_group(grp, st, band, dt_s)
        for k in METRIC_KEYS:
            res[k][grp.rows] = part[k]
    return res


# ======================================================================================
# Public functions
# ======================================================================================
def _check_comp(comp: Rational) -> None:
    if comp.delay_s != 0.0:
        raise DesignError("a compensator delay is not supported; put the delay in the plant")
    if not all(math.isfinite(abs(x)) for x in (comp.gain, *comp.zeros, *comp.poles)):
        raise DesignError("compensator has a non-finite gain or root")


def _check_band(band: float) -> None:
    if not (0.0 < band < 1.0):
        raise DesignError(f"settling band must be in (0, 1), got {band}")


def _comp_arrays(comp: Rational) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return (
        np.array([comp.gain]),
        np.array(comp.zeros, dtype=complex).reshape(1, -1),
        np.array(comp.poles, dtype=complex).reshape(1, -1),
    )


def step_metrics_batch(
    plant: Rational,
    comp_gain: np.ndarray | Sequence[float],
    comp_zeros: np.ndarray,
    comp_poles: np.ndarray,
    *,
    stable: np.ndarray | Sequence[bool] | None = None,
    band: float = 0.02,
    dt_s: float | None = None,
) -> dict[str, np.ndarray]:
    """Step metrics (:data:`METRIC_KEYS`) of many compensators of one structure.

    ``comp_gain`` (n,), ``comp_zeros`` (n, nz), ``comp_poles`` (n, np). Returns arrays
    of shape (n,), NaN where :func:`step_metrics` gives None. ``stable``: known
    closed-loop stability per design (False → all NaN); None → decided here (exact
    eigenvalues without delay, a decaying simulated response with delay). Rows with
    non-finite parameters give NaN. Designs of similar time step are simulated
    together, as numpy batches over designs.
    """
    _check_band(band)
    g = np.asarray(comp_gain, dtype=float).ravel()
    n = g.shape[0]
    if n == 0:
        return {k: np.zeros(0) for k in METRIC_KEYS}
    zc = np.asarray(comp_zeros, dtype=complex).reshape(n, -1)
    pc = np.asarray(comp_poles, dtype=complex).reshape(n, -1)
    st = None if stable is None else np.asarray(stable, dtype=bool).reshape(n)
    return _simulate_batch(plant, g, zc, pc, st, band, dt_s)


def step_metrics(
    plant: Rational,
    comp: Rational,
    *,
    stable: bool | None = None,
    band: float = 0.02,
    dt_s: float | None = None,
) -> dict[str, float | None]:
    """Step metrics of the loop L = C·P·e^{-sτ} (docs/interface.md definitions).

    Keys: ``overshoot_pct`` (percent of the final value, clipped at 0),
    ``settling_time_s`` (last time outside ±``band`` of the final value),
    ``rise_time_s`` (first 10 % to first 90 % crossing), ``peak_control`` (max |u| over
    t ≥ 0⁺, u(0⁺) and the final value included; None if u is unbounded),
    ``final_value`` (L(0)/(1+L(0)), 1 for an integrating loop) and ``iae_load``
    (∫|y| for a unit load step at the plant input, through the plant and its delay;
    None when the load error does not vanish). Every key is None when the closed loop
    is unstable (``stable=False``, or found unstable when ``stable`` is None: exact
    eigenvalues without delay, a non-decaying response with delay); all but
    ``final_value`` are None when y or u has not settled within the horizon cap (2¹⁷
    steps); ``iae_load`` alone is None when only the load-error integral has not
    converged by then. Overshoot, settling and rise are None for a zero final value.

    ``dt_s`` fixes the step (with delay, the largest τ/N not above it).
    Raises :class:`~explorer.core.errors.DesignError` for an improper compensator.
    """
    _check_comp(comp)
    _check_band(band)
    g, zc, pc = _comp_arrays(comp)
    st = None if stable is None else np.array([bool(stable)])
    res = _simulate_batch(plant, g, zc, pc, st, band, dt_s)
    return {k: (float(res[k][0]) if np.isfinite(res[k][0]) else None) for k in METRIC_KEYS}


def simulate_steps(
    plant: Rational,
    comp: Rational,
    *,
    t_end_s: float | None = None,
    dt_s: float | None = None,
) -> StepResponse:
    """Sampled unit reference and load step responses of the loop (module doc).

    ``t_end_s``: horizon; default: until settled, as for :func:`step_metrics` (an
    unstable loop stops where it is seen to diverge). ``dt_s``: fixed step (with
    delay, the largest τ/N not above it, so that the step divides τ); default: the
    step of :func:`step_metrics` (without delay it grows once fast modes decay).
    """
    _check_comp(comp)
    if t_end_s is not None and not (math.isfinite(t_end_s) and t_end_s > 0):
        raise DesignError(f"t_end_s must be a positive number, got {t_end_s}")
    g, zc, pc = _comp_arrays(comp)
    (grp,) = _model_groups(plant, g, zc, pc, dt_s)
    plan = _prepare(grp.plant, grp.gain, grp.zeros, grp.poles, np.array([True]), dt_s)
    if not _resolvable(plan, grp.folded)[0]:
        raise DesignError(
            "the step response cannot be resolved: the loop has a root or crossover "
            f"above {fold_threshold_rad_s(plant.delay_s):.3g} rad/s that cannot be folded into the "
            f"{plant.delay_s:g} s delay (it would need more than {_MAX_SUB} steps per delay)"
        )
    sim = _Sim(plan, np.array([0]))
    if t_end_s is None:
        t_end = max(float(plan.t0_row[0]), _MIN_INTERVALS * sim.h)
        for _ in range(_MAX_DOUBLINGS):
            sim.advance(t_end)
            tr = sim.traj()
            settled, diverged, _ = _check(tr, plan.rows, 0.02)
            if settled[0] or diverged[0] or sim.k >= _MAX_INTERVALS:
                break
            t_end *= 2.0
    else:
        sim.advance(t_end_s)
        tr = sim.traj()
    names = ("y", "u", "l")
    v0 = [tr.sig[n][0][0] for n in names]
    v1 = [tr.sig[n][2][0] for n in names]
    k = tr.t0.size
    scale = max(1.0, *(float(np.max(np.abs(x), initial=0.0)) for x in v0))
    jump = np.zeros(k, dtype=bool)  # a jump at the end of interval k (k < K−1)
    for a0, a1 in zip(v0, v1, strict=True):
        jump[:-1] |= np.abs(a1[:-1] - a0[1:]) > 1e-12 * scale
    # samples: start of each interval, the left limit before each jump, the end
    t_list = [tr.t0, tr.t0[1:][jump[:-1]], np.array([tr.t_end])]
    vals = [[a0, a1[:-1][jump[:-1]], a1[-1:]] for a0, a1 in zip(v0, v1, strict=True)]
    t = np.concatenate(t_list)
    order_key = np.concatenate([np.ones(k), np.zeros(int(jump[:-1].sum())), [0.0]])
    order = np.lexsort((order_key, t))  # at a jump: left limit first
    sig = [np.concatenate(v)[order] for v in vals]
    t = t[order]
    if t_end_s is not None:
        keep = t <= t_end_s * (1 + 1e-12)
        t, sig = t[keep], [x[keep] for x in sig]
    a = float(plan.a_row[0])  # the normalised gains (_gain_scale) undone
    return StepResponse(t_s=t, y_ref=sig[0], u_ref=sig[1] / a, y_load=sig[2] * a)
