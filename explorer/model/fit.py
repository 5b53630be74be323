"""A rational model with delay fitted to a measured frequency response
(docs/measured-data.md, "The fitted model").

Method: vector fitting — B. Gustavsen and A. Semlyen, "Rational approximation of
frequency domain responses by vector fitting", IEEE Trans. Power Delivery 14(3),
1052–1061, 1999 — in its relaxed form (B. Gustavsen, "Improving the pole relocating
properties of vector fitting", IEEE Trans. Power Delivery 21(3), 1587–1592, 2006):
the poles are relocated by fitting σ(s)·f(s) ≈ p(s), with σ = d̃ + Σ c̃ₙ/(s − aₙ), d̃ free
and one normalisation row Re Σₖ σ(sₖ) = K; the new poles are the zeros of σ, the
eigenvalues of A − b·c̃ᵀ/d̃ in the real form of the paper (a complex pair as the block
[[α, β], [−β, α]], b = [2, 0]). Unstable poles are reflected into the left half plane
after each relocation unless the plant is declared open-loop unstable. With the final
poles the residues come from a linear least-squares fit.

The delay is found outside the rational fit: for a trial τ the data are rotated by
e^{+jωτ} and fitted; τ is chosen on a grid over [0, τ_max] and refined by a bounded
scalar search (``scipy.optimize.minimize_scalar``), minimising the weighted relative
RMS error. The order is the smallest whose error is within 1.5× of the best order's
(or below 0.1 %).

Errors are relative: each point weighs 1/|P(jω)| (times its coherence when given).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import linalg, optimize

from explorer.core.loop import Rational
from explorer.model.sweep import MeasuredResponse

__all__ = ["FitResult", "fit_model", "vector_fit", "POOR_FIT_REL_RMS"]

#: A fit whose relative RMS error over the band exceeds this is "poor": time-domain
#: figures from it are withheld (common practice: a few per cent is the usual
#: tolerance of a model used for step responses).
POOR_FIT_REL_RMS = 0.05
#: Zeros beyond this multiple of the top of the band are numerically infinite (dropped;
#: the finite ones above the band are left to the simplification step).
FAR_ZERO_FACTOR = 1e9
#: A real pole below this multiple of the bottom of the band is an integrator (made
#: exactly 0: VF reflects a pole at the origin to a tiny negative value).
INTEGRATOR_TOL = 1e-6
#: A fitted delay whose phase at the top of the band is below this (rad) is taken as 0.
NEGLIGIBLE_DELAY_RAD = 1e-6
_ORDER_FLOOR = 1e-3
_ORDER_SLACK = 1.5


@dataclass(frozen=True, kw_only=True)
class FitResult:
    """The fitted model and its error over the band (model versus data)."""

    model: Rational
    order: int
    rel_rms: float
    rel_max: float
    mag_rms_db: float
    mag_max_db: float
    phase_rms_deg: float
    phase_max_deg: float
    poor: bool
    notes: tuple[str, ...] = field(default=())

    @property
    def time_from_fit(self) -> bool:
        """True when time-domain figures may be computed from the model."""
        return not self.poor

    def to_dict(self) -> dict[str, Any]:
        d = self.model.to_dict()
        d["delay"] = self.model.delay_s
        return {
            "model": d,
            "order": self.order,
            "rel_rms": self.rel_rms,
            "rel_max": self.rel_max,
            "mag_rms_db": self.mag_rms_db,
            "mag_max_db": self.mag_max_db,
            "phase_rms_deg": self.phase_rms_deg,
            "phase_max_deg": self.phase_max_deg,
            "poor": self.poor,
            "time_from_fit": self.time_from_fit,
            "threshold_rel_rms": POOR_FIT_REL_RMS,
            "notes": list(self.notes),
        }


# --------------------------------------------------------------------------------------
# vector fitting
# --------------------------------------------------------------------------------------
def _split(poles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real poles, and the upper members of complex pairs."""
    tol = 1e-9 * np.maximum(np.abs(poles), 1e-300)
    real = poles[np.abs(poles.imag) <= tol].real
    upper = poles[poles.imag > tol]
    return real.astype(complex), upper


def _basis(s: np.ndarray, real: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """Columns: 1/(s−a) per real pole; 1/(s−a)+1/(s−ā) and j/(s−a)−j/(s−ā) per pair."""
    cols = [1.0 / (s - a) for a in real]
    for a in upper:
        u, v = 1.0 / (s - a), 1.0 / (s - np.conj(a))
        cols += [u + v, 1j * u - 1j * v]
    return np.stack(cols, axis=1) if cols else np.zeros((s.size, 0), dtype=complex)


def _real_form(real: np.ndarray, upper: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    n = real.size + 2 * upper.size
    a = np.zeros((n, n))
    b = np.zeros(n)
    for i, p in enumerate(real):
        a[i, i] = p.real
        b[i] = 1.0
    k = real.size
    for p in upper:
        a[k, k] = a[k + 1, k + 1] = p.real
        a[k, k + 1] = p.imag
        a[k + 1, k] = -p.imag
        b[k] = 2.0
        k += 2
    return a, b


def _clean(eig: np.ndarray, flip: bool) -> np.ndarray:
    tol = 1e-9 * np.maximum(np.abs(eig), 1e-300)
    real = eig[np.abs(eig.imag) <= tol].real
    upper = eig[eig.imag > tol]
    if flip:
        real = -np.abs(real)
        upper = -np.abs(upper.real) + 1j * upper.imag
    real = np.where(real == 0, -1e-12, real)
    return np.concatenate([real.astype(complex), upper, np.conj(upper)])


def _lstsq_real(a: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Least squares with column scaling (conditioning)."""
    scale = np.linalg.norm(a, axis=0)
    scale[scale == 0] = 1.0
    x, *_ = np.linalg.lstsq(a / scale, rhs, rcond=None)
    return x / scale


def vector_fit(
    omega_rad_s: np.ndarray,
    f: np.ndarray,
    poles: np.ndarray,
    *,
    weight: np.ndarray,
    iterations: int = 12,
    flip: bool = True,
    biproper: bool = False,
) -> tuple[np.ndarray, np.ndarray, float]:
    """Relaxed vector fitting of f(jω) by d + Σ rₙ/(s − aₙ) from starting ``poles``.

    Returns (poles, complex residues in the same order, d). ``d`` is 0 unless
    ``biproper``. ``flip`` reflects right-half-plane poles after each relocation."""
    s = 1j * np.asarray(omega_rad_s, dtype=float)
    f = np.asarray(f, dtype=complex)
    w = np.asarray(weight, dtype=float)
    k = s.size
    p = np.asarray(poles, dtype=complex)
    for _ in range(iterations):
        real, upper = _split(p)
        phi = _basis(s, real, upper)
        n = phi.shape[1]
        cols = [phi] + ([np.ones((k, 1))] if biproper else []) + [-f[:, None] * phi, -f[:, None]]
        a = w[:, None] * np.concatenate(cols, axis=1)
        a_r = np.concatenate([a.real, a.imag], axis=0)
        rhs = np.zeros(2 * k)
        # relaxation: Re Σₖ σ(sₖ) = K, weighted like the data rows
        relax = np.zeros(a_r.shape[1])
        off = n + (1 if biproper else 0)
        relax[off:off + n] = np.sum(phi.real, axis=0)
        relax[off + n] = k
        scale = np.linalg.norm(w * f) / k
        a_r = np.vstack([a_r, scale * relax])
        rhs = np.append(rhs, scale * k)
        x = _lstsq_real(a_r, rhs)
        ct = x[off:off + n]
        dt = x[off + n]
        if abs(dt) < 1e-8:
            dt = math.copysign(1e-8, dt if dt != 0 else 1.0)
        am, bm = _real_form(real, upper)
        z = np.linalg.eigvals(am - np.outer(bm, ct) / dt)
        p = _clean(z, flip)
    # residues with the final poles
    real, upper = _split(p)
    phi = _basis(s, real, upper)
    cols = [phi] + ([np.ones((k, 1))] if biproper else [])
    a = w[:, None] * np.concatenate(cols, axis=1)
    x = _lstsq_real(np.concatenate([a.real, a.imag], axis=0),
                    np.concatenate([(w * f).real, (w * f).imag]))
    n = phi.shape[1]
    res = list(x[: real.size].astype(complex))
    up_res = [x[real.size + 2 * i] + 1j * x[real.size + 2 * i + 1] for i in range(upper.size)]
    d = float(x[n]) if biproper else 0.0
    poles_out = np.concatenate([real, upper, np.conj(upper)])
    res_out = np.array(res + up_res + [np.conj(r) for r in up_res], dtype=complex)
    return poles_out, res_out, d


def _pole_residue_value(s: np.ndarray, poles: np.ndarray, res: np.ndarray, d: float) -> np.ndarray:
    return d + np.sum(res[None, :] / (s[:, None] - poles[None, :]), axis=1)


def _to_rational(poles: np.ndarray, res: np.ndarray, d: float, delay_s: float,
                 w_top: float, w_bottom: float) -> tuple[Rational, int]:
    """Roots form of d + Σ r/(s−a): zeros from the generalised eigenvalue problem of
    the state-space realisation; zeros beyond FAR_ZERO_FACTOR·w_top folded into the
    gain. Returns the model and the number of zeros folded."""
    real, upper = _split(poles)
    a, b = _real_form(real, upper)
    pr = np.concatenate([real, upper, np.conj(upper)])
    # c in the real form: real residue → c = r; pair → (Re r, Im r)
    c = [r.real for r in res[: real.size]]
    for i in range(upper.size):
        r = res[real.size + i]
        c += [r.real, r.imag]
    c_arr = np.array(c)
    n = a.shape[0]
    m = np.block([[a, b[:, None]], [c_arr[None, :], np.array([[d]])]])
    e = np.zeros((n + 1, n + 1))
    e[:n, :n] = np.eye(n)
    with np.errstate(all="ignore"):
        zz = linalg.eigvals(m, e)
    zz = zz[np.isfinite(zz)]
    far = np.abs(zz) > FAR_ZERO_FACTOR * w_top
    zeros = zz[~far]
    # tidy conjugate pairs / real values
    tol = 1e-7 * np.maximum(np.abs(zeros), 1e-300)
    zr = zeros[np.abs(zeros.imag) <= tol].real.astype(complex)
    zu = zeros[zeros.imag > tol]
    zeros = np.concatenate([zr, zu, np.conj(zu)])
    s0 = 1j * w_top / 10.0
    val = _pole_residue_value(np.array([s0]), poles, res, d)[0]
    g = val * np.prod(s0 - pr) / np.prod(s0 - zeros) if zeros.size else val * np.prod(s0 - pr)
    # a real pole this close to the origin is an integrator: made exact
    pr = np.where((np.abs(pr) < INTEGRATOR_TOL * w_bottom) & (pr.imag == 0), 0.0, pr)
    model = Rational(gain=float(g.real), zeros=tuple(zeros), poles=tuple(pr), delay_s=delay_s)
    return model, int(np.sum(far))


def _weighted_err(model: Rational, w: np.ndarray, f: np.ndarray, weight: np.ndarray) -> float:
    return float(np.sqrt(np.mean((weight * np.abs(model.freqresp(w) - f)) ** 2)))


def _refit_gain(model: Rational, w: np.ndarray, f: np.ndarray, weight: np.ndarray) -> Rational:
    """The real gain that minimises the weighted error for the model's roots and delay."""
    h = model.freqresp(w) / model.gain
    ww = weight**2
    g = float(np.sum(ww * (np.conj(h) * f).real) / np.sum(ww * np.abs(h) ** 2))
    return Rational(gain=g, zeros=model.zeros, poles=model.poles, delay_s=model.delay_s)


def _simplify(model: Rational, w: np.ndarray, f: np.ndarray, weight: np.ndarray,
              w_lo: float, w_hi: float) -> tuple[Rational, list[str]]:
    """Remove what the data cannot tell apart from something simpler: zeros above the
    band (folded into the gain, largest first; a complex pair together) and real poles
    far below the band (made integrators, smallest first). Each change is kept when
    the weighted error stays within 1.5x the unsimplified fit's (or below 0.1 %)."""
    limit = max(_ORDER_SLACK * _weighted_err(model, w, f, weight), _ORDER_FLOOR)
    notes: list[str] = []
    zeros = sorted(model.zeros, key=lambda z: -abs(z))
    for z in zeros:
        if abs(z) <= w_hi or z not in model.zeros or z.imag < 0:
            continue
        drop = [z, z.conjugate()] if z.imag > 0 else [z]
        left = list(model.zeros)
        for d in drop:
            left.remove(d)
        # a zero far above the band acts in it like a delay of Re z/|z|² (its phase
        # −ω·Re z/|z|² to first order): moved into the delay when that is positive
        shift = sum(d.real / abs(d) ** 2 for d in drop)
        trials = [model.delay_s] + ([model.delay_s + shift] if model.delay_s + shift > 0 else [])
        cands = [_refit_gain(Rational(gain=model.gain, zeros=tuple(left), poles=model.poles,
                                      delay_s=t), w, f, weight) for t in trials]
        trial = min(cands, key=lambda m: _weighted_err(m, w, f, weight))
        if _weighted_err(trial, w, f, weight) <= limit:
            model = trial
            notes.append(f"zero(s) at {', '.join(f'{d:.4g}' for d in drop)} above the band "
                         "folded into the gain")
    for p in sorted(model.poles, key=abs):
        if p.imag != 0 or p == 0 or abs(p) >= 0.1 * w_lo:
            continue
        poles = list(model.poles)
        poles[poles.index(p)] = 0.0
        trial = _refit_gain(Rational(gain=model.gain, zeros=model.zeros, poles=tuple(poles),
                                     delay_s=model.delay_s), w, f, weight)
        if _weighted_err(trial, w, f, weight) <= limit:
            model = trial
            notes.append(f"pole at {p.real:.4g} (far below the band) taken as an integrator")
    return model, notes


def _start_poles(n: int, w_lo: float, w_hi: float) -> np.ndarray:
    pairs = n // 2
    out: list[complex] = []
    if pairs:
        beta = np.logspace(math.log10(w_lo), math.log10(w_hi), pairs + 2)[1:-1]
        for bb in beta:
            out += [complex(-bb / 100, bb), complex(-bb / 100, -bb)]
    if n % 2:
        out.append(complex(-math.sqrt(w_lo * w_hi), 0.0))
    return np.array(out)


def _errors(model_val: np.ndarray, f: np.ndarray) -> dict[str, float]:
    ratio = model_val / f
    rel = np.abs(ratio - 1.0)
    mag_db = 20.0 * np.log10(np.abs(ratio))
    ph = np.degrees(np.angle(ratio))
    return {
        "rel_rms": float(np.sqrt(np.mean(rel ** 2))),
        "rel_max": float(np.max(rel)),
        "mag_rms_db": float(np.sqrt(np.mean(mag_db ** 2))),
        "mag_max_db": float(np.max(np.abs(mag_db))),
        "phase_rms_deg": float(np.sqrt(np.mean(ph ** 2))),
        "phase_max_deg": float(np.max(np.abs(ph))),
    }


def fit_model(
    data: MeasuredResponse,
    *,
    unstable_poles: int = 0,
    max_order: int = 6,
    orders: tuple[int, ...] | None = None,
    delay_s: float | None = None,
    biproper: bool = False,
) -> FitResult:
    """Fit gain·Π(s−z)/Π(s−p)·e^{−sτ} to the data (see the module doc).

    ``orders``: the pole counts to try (default 1..max_order); ``delay_s``: a known
    delay (no search); ``biproper``: allow a direct term (default: strictly proper, as
    a physical plant is at high frequency)."""
    w = data.omega_rad_s
    f = data.response
    weight = 1.0 / np.abs(f)
    if data.coherence is not None:
        weight = weight * np.maximum(data.coherence, 1e-3)
    w_lo, w_hi = data.band_rad_s
    flip = unstable_poles == 0
    candidates = orders if orders is not None else tuple(range(1, max_order + 1))
    s = 1j * w

    def fit_at(
        n: int, tau: float, iters: int
    ) -> tuple[float, tuple[np.ndarray, np.ndarray, float]]:
        g = f * np.exp(1j * w * tau)
        try:
            pr = vector_fit(w, g, _start_poles(n, w_lo, w_hi), weight=weight,
                            iterations=iters, flip=flip, biproper=biproper)
        except (np.linalg.LinAlgError, ValueError):
            return math.inf, (np.zeros(0), np.zeros(0), 0.0)
        val = _pole_residue_value(s, *pr)
        err = float(np.sqrt(np.mean((weight * np.abs(val - g)) ** 2)))
        return (err if np.isfinite(err) else math.inf), pr

    # the largest delay the phase allows: the drop over the band, plus what the
    # rational part's zeros could hide (π/2 each, at most max order)
    drop = float(data.phase_rad[0] - data.phase_rad[-1])
    tau_max = (max(drop, 0.0) + 0.5 * math.pi * max(candidates)) / (w_hi - w_lo)
    per_order: list[tuple[float, int, float]] = []
    for n in candidates:
        if delay_s is not None:
            err, _ = fit_at(n, delay_s, 12)
            per_order.append((err, n, delay_s))
            continue
        grid = np.linspace(0.0, tau_max, 25)
        grid_err = np.array([fit_at(n, t, 6)[0] for t in grid])
        kbest = int(np.argmin(grid_err))
        lo, hi = grid[max(kbest - 1, 0)], grid[min(kbest + 1, grid.size - 1)]
        res = optimize.minimize_scalar(
            lambda t, n=n: math.log(fit_at(n, t, 8)[0] + 1e-300),
            bounds=(lo, hi), method="bounded",
            options={"xatol": 1e-9 * max(tau_max, 1e-12) + 1e-12},
        )
        # the refined point or the grid's best (the search never tries a bound)
        tries = [(fit_at(n, t, 12)[0], t) for t in (float(res.x), float(grid[kbest]))]
        err, tau = min(tries)
        per_order.append((err, n, tau))
    best = min(e for e, _, _ in per_order)
    limit = max(_ORDER_SLACK * best, _ORDER_FLOOR)
    err, n, tau = next(x for x in per_order if x[0] <= limit)
    _, pr = fit_at(n, tau, 12)
    model, folded = _to_rational(pr[0], pr[1], pr[2], tau, w_hi, w_lo)
    model, simplified = _simplify(model, w, f, weight, w_lo, w_hi)
    if 0.0 < model.delay_s and model.delay_s * w_hi < NEGLIGIBLE_DELAY_RAD:
        # a delay the data cannot see (rounding of the search, or a far zero folded in):
        # 0, not a 1e-17 s delay whose 1/τ would leave the numerical domain
        simplified = [*simplified, f"delay {model.delay_s:.3g} s (phase "
                                   f"{model.delay_s * w_hi:.2g} rad at the top of the band) "
                                   "taken as 0"]
        model = Rational(gain=model.gain, zeros=model.zeros, poles=model.poles)
    errs = _errors(model.freqresp(w), f)
    notes: list[str] = [
        f"vector fitting (relaxed), {n} poles, delay {tau:.6g} s chosen by a grid and a "
        "bounded scalar search",
        f"orders tried: {', '.join(str(x[1]) for x in per_order)}; weighted relative RMS "
        + ", ".join(f"{x[0]:.2e}" for x in per_order),
    ]
    notes += simplified
    if folded:
        notes.append(f"{folded} zero(s) beyond {FAR_ZERO_FACTOR:g} x the top of the band "
                     "folded into the gain")
    n_rhp = sum(1 for p in model.poles if p.real > 0)
    poor = bool(errs["rel_rms"] > POOR_FIT_REL_RMS)
    if poor:
        notes.append(f"poor fit: relative RMS error {errs['rel_rms']:.3g} > "
                     f"{POOR_FIT_REL_RMS:g}; time-domain figures are withheld (null)")
    if n_rhp != unstable_poles:
        poor = True
        notes.append(f"the fit has {n_rhp} right-half-plane pole(s), the plant is declared "
                     f"with {unstable_poles}: time-domain figures are withheld (null)")
    return FitResult(model=model, order=n, poor=poor, notes=tuple(notes), **errs)
