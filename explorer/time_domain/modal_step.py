"""How coarse the delay-free step grid may be, from each closed-loop mode's amplitude.

explorer.time_domain.timeresp samples a delay-free step response exactly and reads its figures from
the cubic Hermite interpolant between samples. The step h must resolve every mode that
is still visible. The plain rule treats every mode as if its amplitude were the whole
signal: h ≤ 0.15/|λ| until the mode has decayed by e^{-23}. A lightly damped mode far
above the crossover that the loop barely excites (a 1e5 rad/s resonance with ζ ≈ 5e-4
in the closed loop, 0.4 % of the step) then holds the step at 1.5e-6 s over the whole
settling horizon: 20,000–30,000 intervals per design, and minutes of `explore`.

The rule here keeps the same accuracy guarantee per mode, measured against the
signal's size. For f(t) = c·e^{λt} on one interval of length h, the cubic Hermite
interpolant H (values and derivatives at both ends) obeys

    |f − H| ≤ |c|·e^{Re λ t}·B(|λ|h),   B(x) = min(x⁴/384, 3 + 8x/27)

(the first term is the Hermite remainder h⁴/4!·max|f⁗|/16, the second the bound of
the Hermite basis functions, |h00|, |h01| ≤ 1 and |h10|, |h11| ≤ 4h/27; Burden & Faires,
*Numerical Analysis*, 9th ed., 2011, Thm 3.9 — from memory). The plain rule allows, for
a mode as large as the signal, an error of B(0.15) = 1.3e-6 of the signal. A mode of
relative amplitude ρ = |c|/peak may therefore run at any x = |λ|h with
ρ·e^{Re λ t}·B(x) ≤ B(0.15): for ρ = 4e-3 that is x ≤ 0.6, four times fewer intervals.

The amplitudes come from the eigendecomposition A = V Λ V⁻¹ of the closed loop in
deviations from its steady state: the contribution of mode i to output row c under the
start ξ0 is (c·V)_i (V⁻¹ξ0)_i. The decomposition's rounding, cond(V)·ε·|c|·|ξ0|, is
added to every amplitude; a row with cond(V) > 1e8 (repeated or nearly defective
roots) keeps the plain rule. The signal's size is the largest |value| sampled so far
(and the final value): a lower bound of its peak, so ρ is never underestimated.
"""

from __future__ import annotations

import numpy as np

__all__ = ["hermite_bound", "modal_amplitudes", "switch_time"]

_COND_MAX = 1e8
_EPS = np.finfo(float).eps


def hermite_bound(x: np.ndarray | float) -> np.ndarray:
    """B(x): bound of |f − H| / max|f| for f = e^{λt}, x = |λ|·h (module docstring)."""
    x = np.asarray(x, dtype=float)
    return np.minimum(x**4 / 384.0, 3.0 + 8.0 * x / 27.0)


def modal_amplitudes(
    a: np.ndarray, out: np.ndarray, xi0: np.ndarray, ok: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (B, n) and mode amplitudes (B, n, 3) in the signals y, u (reference
    step) and y (load step).

    a: closed-loop matrices (B, n, n); out: output rows (B, 2, n) for y and u;
    xi0: deviation starts (B, n, 2) for the reference and the load experiment; ok: rows
    whose start is the deviation form (others get infinite amplitudes: plain rule).
    """
    bsz, n = a.shape[0], a.shape[1]
    amp = np.full((bsz, n, 3), np.inf)
    with np.errstate(all="ignore"):
        try:
            lam, v = np.linalg.eig(a)
            vinv = np.linalg.inv(v)
        except np.linalg.LinAlgError:
            return np.linalg.eigvals(a), amp
        cond = np.linalg.norm(v, axis=(1, 2)) * np.linalg.norm(vinv, axis=(1, 2))
        q = vinv @ xi0.astype(complex)  # (B, n, 2) modal starts
        w = out.astype(complex) @ v  # (B, 2, n) modal output weights
        c_norm = np.linalg.norm(out, axis=2)  # (B, 2)
        x_norm = np.linalg.norm(xi0, axis=1)  # (B, 2)
        slack = (cond * _EPS * 16.0)[:, None]
        cand = np.stack(
            [
                np.abs(w[:, 0] * q[:, :, 0]) + slack * (c_norm[:, 0] * x_norm[:, 0])[:, None],
                np.abs(w[:, 1] * q[:, :, 0]) + slack * (c_norm[:, 1] * x_norm[:, 0])[:, None],
                np.abs(w[:, 0] * q[:, :, 1]) + slack * (c_norm[:, 0] * x_norm[:, 1])[:, None],
            ],
            axis=2,
        )
    good = ok & np.isfinite(cond) & (cond <= _COND_MAX) & np.all(np.isfinite(cand), axis=(1, 2))
    amp[good] = cand[good]
    return lam, amp


def switch_time(
    lam: np.ndarray, amp: np.ndarray | None, scale: np.ndarray, h_next: float, hw: float
) -> float:
    """Earliest time (s) from which the step h_next resolves every mode well enough.

    A mode with |λ|·h_next ≤ hw is resolved. Any other must have decayed by e^{-23}
    (the plain rule) or, when its amplitude is known, to ρ·e^{Re λ t}·B(|λ|h_next) ≤
    B(hw), with ρ its largest amplitude relative to the signal's size so far (scale,
    (B, 3)). Returns inf when an under-resolved mode does not decay.
    """
    mag = np.abs(lam)
    under = mag * h_next > hw
    if not np.any(under):
        return 0.0
    sg = -lam.real
    if np.any(sg[under] <= 0):
        return float("inf")
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        t_plain = 23.0 / sg
        if amp is None:
            t_need = t_plain
        else:
            rho = np.max(amp / scale[:, None, :], axis=2)  # (B, n); scale 0 → inf
            need = np.log(rho * hermite_bound(mag * h_next) / hermite_bound(hw)) / sg
            need = np.maximum(need, 0.0)  # −inf (a mode the signals do not see) → 0
            need = np.where(np.isnan(need) | (need == np.inf), np.inf, need)
            t_need = np.fmin(t_plain, need)
    return float(np.max(t_need[under]))
