"""An independent Nyquist checker, kept as a test oracle (not used by the package).

``check_loop(loop)`` finds every gain crossover of L on its own log grid (points
clustered on lightly damped roots), refines each by brentq, and counts the clockwise
encirclements of −1 from the exact continuous phase, delay included: Z = P + N
(H. Nyquist, "Regeneration theory", Bell Syst. Tech. J. 11, 1932; Åström & Murray,
*Feedback Systems*, 2008, §9.2). It shares only the loop's evaluation
(explorer.core.loop) with the package; the package's figures come from the batch engine
(explorer.frequency.metrics), and tests/test_balance.py checks the two agree.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from explorer.core.errors import DesignError
from explorer.core.loop import ROOT_TOL, Rational
from explorer.design.hand_designs import LoopCheck


def _on_axis(r: complex) -> bool:
    return abs(r.real) <= ROOT_TOL * abs(r)


def _odd_multiples_between(a: float, b: float) -> int:
    """Number of odd multiples of π strictly between a and b (either order)."""
    lo, hi = (a, b) if a <= b else (b, a)
    # (2k+1)π in (lo, hi)  ⇔  k in ((lo/π − 1)/2, (hi/π − 1)/2)
    k_lo = math.floor((lo / math.pi - 1.0) / 2.0) + 1
    k_hi = math.ceil((hi / math.pi - 1.0) / 2.0) - 1
    return max(0, k_hi - k_lo + 1)


def _signed_crossings(a: float, b: float) -> int:
    """Clockwise (phase decreasing) crossings of odd multiples of π from a to b, minus
    counterclockwise ones."""
    n = _odd_multiples_between(a, b)
    return n if b < a else -n


def check_loop(loop: Rational) -> LoopCheck:
    """Every gain crossover with its phase margin, and closed-loop stability of
    1/(1 + L) by the Nyquist criterion, delay included.

    Crossovers: sign changes of ln|L| on a log grid spanning the loop's root moduli
    (with points clustered on lightly damped roots), refined by brentq. Stability:
    Z = P + N with N the clockwise encirclements of −1, counted from the exact
    continuous phase: on each frequency interval where |L| > 1 the net crossings of
    the ray (−∞, −1) are the odd multiples of π between the phases at its ends (an
    imaginary-axis pole's indentation is the natural branch's −π jump inside such an
    interval), doubled for the mirror half, plus the passage through ω = 0 (the
    indentation at s = 0). Sources: Nyquist, Bell Syst. Tech. J. 11 (1932); Åström &
    Murray, *Feedback Systems* (2008) §9.2.
    """
    if loop.relative_degree < 0:
        raise DesignError("the loop is improper; its Nyquist count is not defined")
    b = loop.batch()
    zeros = np.array(loop.zeros, dtype=complex)
    poles = np.array(loop.poles, dtype=complex)
    roots = np.concatenate([zeros, poles])
    tau = loop.delay_s

    def logmag(w: float | np.ndarray) -> np.ndarray:
        w = np.atleast_1d(np.asarray(w, dtype=float))
        with np.errstate(divide="ignore"):
            return b.log_mag_at(np.zeros(w.size, dtype=np.intp), w)[0]

    def phase(w: float) -> float:
        return float(b.phase_at(np.zeros(1, dtype=np.intp), np.array([float(w)]))[0])

    def phase_count(w: float) -> float:
        # Phase for the crossing count. Exactly on a level (2k+1)π (a plot lying on the
        # real axis), break the tie as the contour shifted an infinitesimal σ to the right
        # would: d∠L/dσ = Im(Σ 1/(jω − z) − Σ 1/(jω − p)).
        ph = phase(w)
        off = (ph / math.pi - 1.0) / 2.0
        if abs(off - round(off)) * 2.0 * math.pi < 1e-10:
            s = 1j * w
            with np.errstate(divide="ignore", invalid="ignore"):
                d = np.sum(1 / (s - zeros)).imag - np.sum(1 / (s - poles)).imag
            if np.isfinite(d) and d != 0:
                ph += math.copysign(1e-9, d)
        return ph

    scales = [abs(r) for r in roots if abs(r) > 0]
    if tau > 0:
        scales.append(1.0 / tau)
    if not scales:
        scales = [abs(loop.gain) ** (1.0 / max(loop.n_integrators, 1)) or 1.0]
    lo, hi = 1e-4 * min(scales), 1e4 * max(scales)
    m0 = loop.n_integrators
    for _ in range(40):
        v_lo = float(logmag(lo)[0])
        if (m0 > 0 and v_lo <= 0) or (m0 < 0 and v_lo >= 0):
            lo /= 1e3
        else:
            break
    rd = loop.relative_degree
    note = None
    if rd > 0:
        for _ in range(40):
            if float(logmag(hi)[0]) >= 0:
                hi *= 1e3
            else:
                break
    hf_above = rd == 0 and abs(loop.gain) >= 1.0
    if rd == 0 and abs(1.0 + loop.gain) < 1e-9:
        return LoopCheck(crossovers_rad_s=(), phase_margins_deg=(), open_loop_rhp_poles=0,
                         closed_loop_rhp_poles=-1, closed_loop_stable=False,
                         note="ill-posed loop: 1 + L(j∞) = 0")

    decades = math.log10(hi / lo)
    grid = [np.geomspace(lo, hi, int(80 * decades) + 2)]
    axis_freqs = []
    for r in roots:
        w0 = abs(r)
        if w0 == 0:
            continue
        zeta = abs(r.real) / w0
        if _on_axis(r):
            axis_freqs.append(abs(r.imag))
        if zeta < 0.7:
            zc = max(zeta, 1e-9)
            u = np.concatenate([-np.geomspace(1e-3, 40, 60), np.geomspace(1e-3, 40, 60)])
            grid.append(abs(r.imag) * np.exp(u * zc) if abs(r.imag) > 0 else np.array([w0]))
    w = np.unique(np.concatenate(grid))
    w = w[(w >= lo) & (w <= hi)]
    for wa in axis_freqs:
        w = w[np.abs(w - wa) > 1e-12 * wa]
    v = logmag(w)

    # gain crossovers
    sgn = np.sign(v)
    xs: list[float] = [float(w[i]) for i in np.flatnonzero(sgn == 0)]
    for j in np.flatnonzero(sgn[:-1] * sgn[1:] < 0):
        a, c = math.log(w[j]), math.log(w[j + 1])
        if not (np.isfinite(v[j]) and np.isfinite(v[j + 1])):
            xs.append(float(math.exp(0.5 * (a + c))))
            continue
        x = brentq(lambda t: float(logmag(math.exp(t))[0]), a, c, xtol=1e-15, rtol=1e-15)
        xs.append(math.exp(x))
    xs.sort()
    pms = []
    for x in xs:
        pmv = math.degrees(phase(x)) + 180.0
        pmv = pmv - 360.0 * math.ceil((pmv - 180.0) / 360.0)  # into (−180, 180]
        pms.append(pmv)

    # Nyquist count
    # strictly Re > 0, the same split as the phase branches of explorer.core.loop
    n_rhp = sum(1 for p in loop.poles if p.real > 0)
    n_cw = 0
    marginal = False
    # runs of |L| > 1 between crossovers
    bounds = [lo, *xs, hi]
    above = []
    for i in range(len(bounds) - 1):
        inside = w[(w > bounds[i]) & (w < bounds[i + 1])]
        probe = inside[len(inside) // 2] if inside.size else math.sqrt(bounds[i] * bounds[i + 1])
        above.append(float(logmag(probe)[0]) > 0)
    for i, up in enumerate(above):
        if not up:
            continue
        wa, wb = bounds[i], bounds[i + 1]
        pa = phase_count(wa)
        if i == len(above) - 1 and hf_above:
            if tau > 0:
                note = "the loop gain does not roll off and the loop has a delay (neutral type)"
                return LoopCheck(crossovers_rad_s=tuple(xs), phase_margins_deg=tuple(pms),
                                 open_loop_rhp_poles=n_rhp, closed_loop_rhp_poles=-1,
                                 closed_loop_stable=False, note=note)
            pb = phase(hi * 1e6)
            if loop.gain < 0:
                # L(j∞) = k < −1 lies on the ray: the side it approaches from follows
                # L(jω) ≈ k·(1 − j(Σp − Σz)/ω), i.e. Im L has the sign of Σ Re p − Σ Re z
                level = math.pi * (2 * round((pb / math.pi - 1.0) / 2.0) + 1)
                side = float(np.sum(poles.real) - np.sum(zeros.real))
                pb = level - math.copysign(1e-9, side) if side != 0 else level
                if side == 0:
                    note = "L(jω) approaches −|k| along the real axis (degenerate count)"
            # passage through ω = ∞ (the large arc, L ≈ its biproper limit): from the phase
            # at +∞ to its mirror image, reflected across the nearest multiple of π
            n_cw += _signed_crossings(pb, 2 * math.pi * round(pb / math.pi) - pb)
        else:
            pb = phase_count(wb)
        n_cw += 2 * _signed_crossings(pa, pb)
    # passage through ω = 0 (indentation when m0 > 0)
    if above and above[0] and m0 >= 0:
        p_lo = phase_count(lo)
        c = math.pi * round((p_lo + m0 * math.pi / 2) / math.pi)
        n_cw += _signed_crossings(2 * c - p_lo, p_lo)
    z = n_rhp + n_cw
    if note is not None and note.startswith("L(jω) approaches −|k|") and tau == 0:
        # the plot lies on the negative real axis as ω → ∞ and the crossing count is
        # degenerate; without a delay the closed-loop polynomial den + num decides
        num = loop.gain * np.poly(zeros).real if zeros.size else np.array([loop.gain])
        den = np.poly(poles).real
        size = max(num.size, den.size)
        cl = np.roots(np.pad(den, (size - den.size, 0)) + np.pad(num, (size - num.size, 0)))
        z = int(np.sum(cl.real > 0))
        marginal = marginal or bool(np.any(np.abs(cl.real) <= 1e-9 * np.maximum(1.0,
                                                                                np.abs(cl))))
        note += "; decided by the roots of the closed-loop polynomial"
    if any(abs(pmv) < 1e-9 for pmv in pms):
        marginal = True
        note = "a crossover has zero phase margin (closed-loop poles on the imaginary axis)"
    if m0 == 0 and abs(1.0 + loop.dc_gain()) < 1e-12:
        marginal = True
        note = "L(0) = −1: a closed-loop pole at s = 0"
    if z < 0:
        note = f"inconsistent Nyquist count (P = {n_rhp}, N = {n_cw})"
    stable = (z == 0) and not marginal
    return LoopCheck(crossovers_rad_s=tuple(xs), phase_margins_deg=tuple(pms),
                     open_loop_rhp_poles=n_rhp, closed_loop_rhp_poles=z,
                     closed_loop_stable=stable, note=note)
