"""Sampled implementation of a continuous compensator, and the sampled loop exactly.

Three pieces, pure functions on numpy arrays (docs/implement.md gives every
definition and its source):

1. **Discretization** of C(s) (roots form) into C(z) (roots form):
   Tustin with prewarping, s ← c·(z − 1)/(z + 1) with c = ωp / tan(ωp·T/2); plain
   Tustin, c = 2/T; matched pole-zero mapping, z = exp(r·T), zeros at infinity sent
   to z = −1 and the gain matched on the low-frequency asymptote.
2. **Stages and sections**: the compensator split into named first- and second-order
   stages (integrator, PI, lead, lag, notch, roll-off, ...), each discretized on its
   own (both maps are multiplicative, so the product is C(z)) and written as one
   section b0 + b1 z⁻¹ + b2 z⁻² over 1 + a1 z⁻¹ + a2 z⁻²; the industrial PI / PID
   forms where the structure is one.
3. **The sampled loop**: a zero-order hold, the continuous plant with its delay and
   the computation delay, sampled exactly — a state-space ZOH discretization with a
   fractional input delay (the modified z-transform written in state space;
   Åström & Wittenmark, *Computer-Controlled Systems*, 3rd ed. 1997, §2.3), the
   integrals by the augmented matrix exponential (Van Loan, "Computing integrals
   involving the matrix exponential", IEEE Trans. Autom. Control 23(3), 1978) so
   integrating and unstable plants need no inverse of A. The loop C(z)·H(z) is
   evaluated on the unit circle for 0 < ω < π/T; crossovers, phase crossovers and
   peaks are bracketed on a grid and refined by bisection / golden-section search;
   stability from the eigenvalues of the closed-loop matrix (the roots of the
   closed-loop characteristic polynomial in z).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.linalg import expm

from explorer.core.errors import DesignError
from explorer.core.loop import Rational

__all__ = [
    "bracketing_grid",
    "split_delay",
    "golden_max",
    "phi_gamma",
    "METHODS",
    "WC_T_WARN_RAD",
    "DiscreteCompensator",
    "Stage",
    "SampledPlant",
    "discretize",
    "tustin_constant",
    "compensator_stages",
    "stage_sections",
    "industrial_form",
    "difference_equations",
    "realize",
    "sample_plant",
    "closed_loop_matrix",
    "closed_loop_roots_outside",
    "sampled_loop_metrics",
    "cont_loop_with",
]

#: Discretization methods, the first the default.
METHODS = ("tustin-prewarp", "tustin", "matched")

#: The sample time is called long for the crossover when ωc·T exceeds this (rad).
#: Common practice: guidance quoted in the trade ranges from about 0.2 to 0.6 rad;
#: at 0.5 rad the hold alone costs about ωc·T/2 ≈ 14° of phase margin.
WC_T_WARN_RAD = 0.5

#: A closed-loop eigenvalue with modulus at or above 1 − this is called unstable.
STABILITY_TOL = 1e-9
#: Closed loops with more states than this (long delays in samples) are judged by the
#: argument principle instead of the eigenvalues of the closed-loop matrix.
MAX_EIG_STATES = 250

_BISECT_ITERS = 64
_GOLDEN_ITERS = 70
_PEAK_CANDIDATES = 4


# --------------------------------------------------------------------------------------
# 1. discretization
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class DiscreteCompensator:
    """C(z) = gain · Π(z − zeros) / Π(z − poles), sampled every ``sample_time_s``."""

    gain: float
    zeros: tuple[complex, ...]
    poles: tuple[complex, ...]
    sample_time_s: float
    method: str
    prewarp_rad_s: float | None = None

    def freqresp(self, omega_rad_s: np.ndarray) -> np.ndarray:
        """C(e^{jωT}) at the angular frequencies ω (rad/s)."""
        z = np.exp(1j * np.asarray(omega_rad_s, float) * self.sample_time_s)
        return _zpk_eval(self.gain, self.zeros, self.poles, z)

    def at_z(self, z: np.ndarray) -> np.ndarray:
        """C(z) at complex points z."""
        return _zpk_eval(self.gain, self.zeros, self.poles, np.asarray(z, complex))

    def coefficients(self) -> tuple[np.ndarray, np.ndarray]:
        """Numerator and denominator in powers of z⁻¹ (b0 + b1 z⁻¹ + ..., a0 = 1), of
        equal length."""
        n = max(len(self.zeros), len(self.poles))
        b = self.gain * np.atleast_1d(np.real(np.poly(np.array(self.zeros, dtype=complex))))
        a = np.atleast_1d(np.real(np.poly(np.array(self.poles, dtype=complex))))
        # z^-n · (z^nz ...) : pad at the end (higher powers of z^-1)
        b = np.concatenate([b, np.zeros(n + 1 - b.size)])
        a = np.concatenate([a, np.zeros(n + 1 - a.size)])
        return b, a


def _zpk_eval(gain: float, zeros: Sequence[complex], poles: Sequence[complex],
              x: np.ndarray) -> np.ndarray:
    """gain · Π(x − z) / Π(x − p), broadcast over x."""
    val = np.full(np.shape(x), complex(gain))
    for r in zeros:
        val = val * (x - r)
    den = np.ones(np.shape(x), dtype=complex)
    for r in poles:
        den = den * (x - r)
    return val / den


def tustin_constant(sample_time_s: float, prewarp_rad_s: float | None) -> float:
    """c in s ← c·(z − 1)/(z + 1): 2/T, or ωp / tan(ωp·T/2) with prewarping (so that
    the discrete compensator equals C(jωp) exactly at ω = ωp)."""
    T = sample_time_s
    if prewarp_rad_s is None:
        return 2.0 / T
    wp = prewarp_rad_s
    if not (0.0 < wp < math.pi / T):
        raise DesignError(
            f"the prewarp frequency {wp:.6g} rad/s must lie in (0, π/T) = (0, {math.pi / T:.6g}) "
            f"rad/s for the sample time {T:g} s; shorten the sample time"
        )
    return wp / math.tan(wp * T / 2.0)


def discretize(comp: Rational, sample_time_s: float, method: str = "tustin-prewarp",
               prewarp_rad_s: float | None = None) -> DiscreteCompensator:
    """C(s) → C(z) in roots form.

    ``tustin-prewarp`` needs ``prewarp_rad_s`` in (0, π/T); ``tustin`` ignores it;
    ``matched`` maps every root r to exp(r·T), puts the zeros at infinity at z = −1
    and matches the low-frequency asymptote (s ↔ (z − 1)/T near z = 1, so an
    integrator keeps its integral gain and a stage without one its DC gain)."""
    T = float(sample_time_s)
    if not (math.isfinite(T) and T > 0):
        raise DesignError(f"the sample time must be a positive number of seconds, got {T!r}")
    if method not in METHODS:
        raise DesignError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    if comp.relative_degree < 0:
        raise DesignError(
            f"the compensator is improper ({len(comp.zeros)} zeros, {len(comp.poles)} poles): "
            "it cannot be sampled"
        )
    zs = np.array(comp.zeros, dtype=complex)
    ps = np.array(comp.poles, dtype=complex)
    extra = len(ps) - len(zs)
    if method == "matched":
        zd = np.exp(zs * T)
        pd = np.exp(ps * T)
        m0 = comp.n_integrators
        nz_s, np_s = zs[zs != 0], ps[ps != 0]
        nz_d, np_d = zd[zs != 0], pd[ps != 0]
        k_cont = comp.gain * np.prod(-nz_s) / np.prod(-np_s)
        k = k_cont * T ** m0 * np.prod(1.0 - np_d) / (np.prod(1.0 - nz_d) * 2.0 ** extra)
        gain = float(np.real(k))
        prewarp = None
    else:
        prewarp = prewarp_rad_s if method == "tustin-prewarp" else None
        if method == "tustin-prewarp" and prewarp is None:
            raise DesignError("Tustin with prewarping needs a prewarp frequency")
        c = tustin_constant(T, prewarp)
        roots = np.concatenate([zs, ps])
        bad = np.abs(c - roots) <= 1e-12 * c
        if np.any(bad):
            raise DesignError(
                f"a compensator root at s = {c:.6g} maps to z = ∞ under Tustin with this sample "
                "time; change the sample time or the method"
            )
        zd = (c + zs) / (c - zs)
        pd = (c + ps) / (c - ps)
        gain = float(np.real(comp.gain * np.prod(c - zs) / np.prod(c - ps)))
    zeros = tuple(_clean_roots(np.concatenate([zd, -np.ones(extra)])))
    poles = tuple(_clean_roots(pd))
    return DiscreteCompensator(gain=gain, zeros=zeros, poles=poles, sample_time_s=T,
                               method=method, prewarp_rad_s=prewarp)


def _clean_roots(r: np.ndarray) -> list[complex]:
    """Real roots exactly real (the maps keep conjugate pairs conjugate up to rounding)."""
    out = []
    for x in np.asarray(r, dtype=complex):
        out.append(complex(x.real, 0.0) if x.imag == 0 or abs(x.imag) <= 1e-14 * max(abs(x), 1)
                   else complex(x))
    return out


# --------------------------------------------------------------------------------------
# 2. stages, sections, industrial forms
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class Stage:
    """One named first- or second-order piece of C(s) and its section.

    ``continuous`` is the stage with its own normalising gain (DC gain 1 without an
    integrator or differentiator, monic with one); the compensator's remaining gain
    is folded into the first section's numerator."""

    kind: str
    label: str
    continuous: Rational
    discrete: DiscreteCompensator
    b: tuple[float, float, float]
    a: tuple[float, float, float]


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _damping(r: complex) -> float:
    return abs(r.real) / abs(r) if abs(r) > 0 else 1.0


def _group(comp: Rational) -> list[tuple[list[complex], list[complex]]]:
    """C(s)'s roots split into proper stages of order ≤ 2: (zeros, poles) lists."""
    zc = sorted([z for z in comp.zeros if z.imag > 0], key=abs)
    pc = sorted([p for p in comp.poles if p.imag > 0], key=abs)
    zr = sorted([z.real for z in comp.zeros if z.imag == 0 and z != 0], key=abs)
    pr = sorted([p.real for p in comp.poles if p.imag == 0 and p != 0], key=abs)
    z0 = sum(1 for z in comp.zeros if z == 0)
    p0 = sum(1 for p in comp.poles if p == 0)
    # cancel origin roots pairwise (a zero and a pole at s = 0 are one factor 1)
    common = min(z0, p0)
    z0 -= common
    p0 -= common
    stages: list[tuple[list[complex], list[complex]]] = []
    # complex zero pairs with the complex pole pair nearest in natural frequency
    for z in list(zc):
        if not pc:
            break
        zmag = abs(z)
        p = min(pc, key=lambda q: abs(math.log(abs(q) / zmag)))
        pc.remove(p)
        zc.remove(z)
        stages.append(([z, z.conjugate()], [p, p.conjugate()]))
    # each integrator takes the slowest remaining real zero (a PI stage)
    pending_int = 0
    for _ in range(p0):
        if zr:
            stages.append(([complex(zr.pop(0))], [0j]))
        else:
            pending_int += 1
    # each differentiator takes the slowest real pole (a washout)
    pending_dif = 0
    for _ in range(z0):
        if pr:
            stages.append(([0j], [complex(pr.pop(0))]))
        else:
            pending_dif += 1
    # remaining real zeros with real poles, slowest with slowest (lead or lag)
    while zr and pr:
        stages.append(([complex(zr.pop(0))], [complex(pr.pop(0))]))
    # a complex zero pair left takes two of the remaining poles (real or integrators)
    for z in list(zc):
        pool: list[complex] = [complex(p) for p in pr] + [0j] * pending_int
        if len(pool) < 2:
            break
        take = pool[:2]
        for p in take:
            if p == 0:
                pending_int -= 1
            else:
                pr.remove(p.real)
        zc.remove(z)
        stages.append(([z, z.conjugate()], take))
    # remaining zeros (real ones, differentiators) go to stages with spare poles
    pole_only: list[tuple[list[complex], list[complex]]] = []
    for p in pc:
        pole_only.append(([], [p, p.conjugate()]))
    for p in pr:
        pole_only.append(([], [complex(p)]))
    for _ in range(pending_int):
        pole_only.append(([], [0j]))
    loose = [complex(z) for z in zr] + [0j] * pending_dif
    for z in zc:
        loose += [z, z.conjugate()]
    for st in pole_only:
        while loose and len(st[0]) < len(st[1]):
            if loose[0].imag != 0 and len(st[1]) - len(st[0]) < 2:
                break
            st[0].append(loose.pop(0))
            if st[0][-1].imag != 0:
                st[0].append(loose.pop(0))
    if loose:  # cannot happen for a proper C(s); kept as a guard
        raise DesignError("the compensator could not be split into proper stages")
    stages.extend(pole_only)
    order = {"pi": 0, "integrator": 1, "lead": 2, "lag": 2, "washout": 3}
    stages.sort(key=lambda st: order.get(_kind(st[0], st[1])[0], 4))
    return stages


def _kind(zeros: list[complex], poles: list[complex]) -> tuple[str, str]:
    """(kind, plain label) of one stage."""
    nz, npl = len(zeros), len(poles)
    zr = [z for z in zeros if z.imag == 0]
    if npl == 1 and poles[0] == 0:
        if nz == 0:
            return "integrator", "integrator"
        z = zeros[0]
        return "pi", f"integrator + zero at {_fmt(abs(z))} rad/s (PI, Ti = {_fmt(1 / abs(z))} s)"
    if nz == 1 and npl == 1 and zeros[0] == 0:
        return "washout", f"washout (high-pass), pole at {_fmt(abs(poles[0]))} rad/s"
    if nz == 1 and npl == 1:
        z, p = abs(zeros[0]), abs(poles[0])
        if zeros[0].real > 0:
            return "rhp zero", f"right-half-plane zero at {_fmt(z)} rad/s with pole at {_fmt(p)}"
        if z < p:
            return "lead", f"lead: zero {_fmt(z)} rad/s, pole {_fmt(p)} rad/s (ratio {p / z:.3g})"
        return "lag", f"lag: pole {_fmt(p)} rad/s, zero {_fmt(z)} rad/s (ratio {z / p:.3g})"
    if nz == 0 and npl == 1:
        return "roll-off", f"roll-off pole at {_fmt(abs(poles[0]))} rad/s"
    if nz == 0 and npl == 2:
        pp = poles[0]
        return "roll-off", (f"second-order roll-off at {_fmt(abs(pp))} rad/s, "
                            f"damping {_damping(pp):.3g}")
    if nz == 2 and npl == 2 and not zr:
        z = zeros[0]
        if any(p == 0 for p in poles):
            return "pid", (f"integrator + zero pair at {_fmt(abs(z))} rad/s (damping "
                           f"{_damping(z):.3g}) + pole (PID core)")
        pz, zz = _damping(poles[0]), _damping(z)
        if zz < pz:
            return "notch", (f"notch at {_fmt(abs(z))} rad/s, zero damping {zz:.3g}, "
                             f"pole damping {pz:.3g}")
        return "peak", (f"resonant peak at {_fmt(abs(z))} rad/s, zero damping {zz:.3g}, "
                        f"pole damping {pz:.3g}")
    if nz == 1 and npl == 2:
        return "second-order", (f"pole pair at {_fmt(abs(poles[0]))} rad/s with a zero at "
                                f"{_fmt(abs(zeros[0]))} rad/s")
    return "second-order", "second-order stage"


def _stage_gain(zeros: Sequence[complex], poles: Sequence[complex]) -> float:
    """Normalising gain: DC gain 1 when no root is at the origin, else monic."""
    if any(r == 0 for r in (*zeros, *poles)):
        return 1.0
    return float(np.real(np.prod(-np.array(poles, complex)) / np.prod(-np.array(zeros, complex))))


def compensator_stages(comp: Rational, sample_time_s: float, method: str = "tustin-prewarp",
                       prewarp_rad_s: float | None = None) -> list[Stage]:
    """C(s) split into named stages, each discretized with the same map; the
    compensator's remaining gain is folded into the first section. The product of
    the sections equals :func:`discretize` of the whole C(s)."""
    groups = _group(comp)
    if not groups:  # a pure gain: one section b = [k, 0, 0]
        groups = [([], [])]
    gains = [_stage_gain(z, p) for z, p in groups]
    rest = comp.gain / float(np.prod(gains))
    out: list[Stage] = []
    for i, ((zs, ps), g) in enumerate(zip(groups, gains, strict=True)):
        kind, label = _kind(zs, ps) if (zs or ps) else ("gain", "gain")
        cont = Rational(gain=g, zeros=tuple(zs), poles=tuple(ps))
        disc = discretize(cont, sample_time_s, method, prewarp_rad_s)
        b, a = _section(disc, rest if i == 0 else 1.0)
        out.append(Stage(kind=kind, label=label, continuous=cont, discrete=disc, b=b, a=a))
    return out


def _section(d: DiscreteCompensator, factor: float) -> tuple[tuple[float, float, float],
                                                             tuple[float, float, float]]:
    b, a = d.coefficients()
    b = np.concatenate([b * factor, np.zeros(3 - b.size)])
    a = np.concatenate([a, np.zeros(3 - a.size)])
    return (float(b[0]), float(b[1]), float(b[2])), (float(a[0]), float(a[1]), float(a[2]))


def stage_sections(stages: Sequence[Stage]) -> np.ndarray:
    """Sections as an array ``(n, 6)``: b0, b1, b2, a0, a1, a2 (scipy's sos layout)."""
    return np.array([[*st.b, *st.a] for st in stages], dtype=float)


def industrial_form(comp: Rational) -> dict[str, Any] | None:
    """The PI / PD / PID-with-derivative-filter parameters when C(s) has that structure.

    Standard (ISA) form  C(s) = Kp·(1 + 1/(Ti·s) + Td·s/(1 + Td·s/N));
    parallel form        C(s) = kp + ki/s + kd·s/(Tf·s + 1),  Tf = Td/N.
    Obtained from the partial fractions C(s) = A + ki/s + R/(s + c), c = 1/Tf:
    kd = −R/c², kp = A − kd·c (A the high-frequency gain). None when C(s) is no such
    block (or would need a negative integral or derivative time)."""
    k = comp.gain
    zs = np.array(comp.zeros, complex)
    ps = np.array(comp.poles, complex)
    n0 = int(np.sum(ps == 0))
    others = ps[ps != 0]
    if np.any(zs == 0) or others.size > 1 or np.any(others.imag != 0) or n0 > 1:
        return None
    if np.any(others.real >= 0):
        return None
    if ps.size == 0 and zs.size == 0:
        return {"structure": "P", "standard": {"Kp": k}, "parallel": {"kp": k},
                "formulas": {"standard": "Kp", "parallel": "kp"}}
    if n0 == 1 and others.size == 0:
        if zs.size == 0:
            return {"structure": "I", "standard": None, "parallel": {"ki_per_s": k},
                    "formulas": {"standard": None, "parallel": "ki/s"}}
        if zs.size != 1 or zs[0].imag != 0 or zs[0].real >= 0:
            return None
        a = -zs[0].real
        return {
            "structure": "PI",
            "standard": {"Kp": k, "Ti_s": float(1.0 / a)},
            "parallel": {"kp": k, "ki_per_s": float(k * a)},
            "formulas": {"standard": "Kp*(1 + 1/(Ti*s))", "parallel": "kp + ki/s"},
        }
    if others.size != 1 or zs.size != others.size + n0:
        return None
    c = float(-others[0].real)
    # A = high-frequency gain; residue at s = −c; ki = residue at 0
    A = k
    # residue at s = −c: the other pole (if any) is the integrator at 0
    R = float(np.real(k * np.prod(-c - zs))) / (-c if n0 else 1.0)
    kd = -R / c**2
    kp = A - kd * c
    tf = 1.0 / c
    if n0 == 0:
        if not (kp * kd > 0):
            return None
        return {
            "structure": "PD with derivative filter",
            "standard": {"Kp": kp, "Td_s": kd / kp, "N": kd / kp / tf},
            "parallel": {"kp": kp, "kd_s": kd, "Tf_s": tf},
            "formulas": {"standard": "Kp*(1 + Td*s/(1 + Td*s/N))",
                         "parallel": "kp + kd*s/(Tf*s + 1)"},
        }
    ki = float(np.real(k * np.prod(-zs) / np.prod(-others)))
    if not (kp * kd > 0 and kp * ki > 0):
        return None
    return {
        "structure": "PID with derivative filter",
        "standard": {"Kp": kp, "Ti_s": kp / ki, "Td_s": kd / kp, "N": kd / kp / tf},
        "parallel": {"kp": kp, "ki_per_s": ki, "kd_s": kd, "Tf_s": tf},
        "formulas": {"standard": "Kp*(1 + 1/(Ti*s) + Td*s/(1 + Td*s/N))",
                     "parallel": "kp + ki/s + kd*s/(Tf*s + 1)"},
    }


def difference_equations(stages: Sequence[Stage], digits: int = 10) -> list[str]:
    """One line per section: e[k] is the control error (setpoint − measurement), u[k]
    the output, w1[k], w2[k], ... the signals between sections."""
    lines = []
    n = len(stages)
    for i, st in enumerate(stages):
        x = "e" if i == 0 else f"w{i}"
        y = "u" if i == n - 1 else f"w{i + 1}"
        terms = []
        for j, bj in enumerate(st.b):
            if bj != 0:
                terms.append((bj, f"{x}[k{'' if j == 0 else f'-{j}'}]"))
        for j, aj in enumerate(st.a[1:], start=1):
            if aj != 0:
                terms.append((-aj, f"{y}[k-{j}]"))
        text = ""
        for m, (coef, sym) in enumerate(terms):
            mag = f"{abs(coef):.{digits}g}"
            if m == 0:
                text += f"{'-' if coef < 0 else ''}{mag}*{sym}"
            else:
                text += f" {'-' if coef < 0 else '+'} {mag}*{sym}"
        lines.append(f"{y}[k] = {text or '0'}")
    return lines


# --------------------------------------------------------------------------------------
# 3. the sampled plant
# --------------------------------------------------------------------------------------
def _block(num: np.ndarray, den: np.ndarray) -> tuple[np.ndarray, ...]:
    """Controllable companion realization of num/den (den monic, deg num ≤ deg den ≤ 2)."""
    n = den.size - 1
    num = np.concatenate([np.zeros(n + 1 - num.size), num])
    d = num[0]
    rest = num[1:] - d * den[1:]  # strictly proper part, highest power first
    if n == 0:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), np.array([[d]])
    A = np.zeros((n, n))
    A[-1, :] = -den[1:][::-1]
    if n > 1:
        A[:-1, 1:] = np.eye(n - 1)
    B = np.zeros((n, 1))
    B[-1, 0] = 1.0
    C = rest[::-1].reshape(1, n)
    return A, B, C, np.array([[d]])


def _series(first: tuple[np.ndarray, ...],
            second: tuple[np.ndarray, ...]) -> tuple[np.ndarray, ...]:
    """u → first → second → y."""
    A1, B1, C1, D1 = first
    A2, B2, C2, D2 = second
    n1, n2 = A1.shape[0], A2.shape[0]
    A = np.zeros((n1 + n2, n1 + n2))
    A[:n1, :n1] = A1
    A[n1:, :n1] = B2 @ C1
    A[n1:, n1:] = A2
    B = np.vstack([B1, B2 @ D1])
    C = np.hstack([D2 @ C1, C2])
    return A, B, C, D2 @ D1


def realize(gain: float, zeros: Sequence[complex], poles: Sequence[complex]
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """A real state-space realization (A, B, C, D) of gain·Π(x − z)/Π(x − p) (proper):
    a series of first- and second-order companion blocks (conjugate pairs together,
    real poles two by two), better conditioned than one companion matrix."""
    if len(zeros) > len(poles):
        raise DesignError("cannot realize an improper transfer function")
    pc = [p for p in poles if p.imag > 0]
    pr = [p.real for p in poles if p.imag == 0]
    pr.sort(key=abs)
    blocks: list[list[complex]] = [[p, p.conjugate()] for p in pc]
    for i in range(0, len(pr), 2):
        blocks.append([complex(x) for x in pr[i:i + 2]])
    zc = [z for z in zeros if z.imag > 0]
    zr = sorted([z.real for z in zeros if z.imag == 0], key=abs)
    bz: list[list[complex]] = [[] for _ in blocks]
    for z in zc:
        j = next(i for i, b in enumerate(blocks) if len(b) == 2 and not bz[i])
        bz[j] = [z, z.conjugate()]
    for z in zr:
        j = next(i for i, b in enumerate(blocks) if len(bz[i]) < len(b))
        bz[j].append(complex(z))
    if not blocks:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), np.array([[float(gain)]])
    sys: tuple[np.ndarray, ...] | None = None
    for i, (bp, bzs) in enumerate(zip(blocks, bz, strict=True)):
        den = np.atleast_1d(np.real(np.poly(np.array(bp, complex))))
        num = np.atleast_1d(np.real(np.poly(np.array(bzs, complex))))
        num = num * (float(gain) if i == 0 else 1.0)
        blk = _block(np.atleast_1d(num), den)
        sys = blk if sys is None else _series(sys, blk)
    assert sys is not None
    return sys[0], sys[1], sys[2], sys[3]


@dataclass(frozen=True, eq=False)
class SampledPlant:
    """H(z): zero-order hold → plant with input delay ``delay_s`` → sampler, period T.

    delay_s = d·T + ε, 0 ≤ ε < T:
        x[k+1] = Φ x[k] + Γ0 u[k−d] + Γ1 u[k−d−1],   y[k] = C x[k] + D u[k − d − (ε > 0)]
    Φ = e^{AT}, Γ0 = ∫₀^{T−ε} e^{As} ds B, Γ1 = e^{A(T−ε)} ∫₀^{ε} e^{As} ds B."""

    sample_time_s: float
    delay_s: float
    d: int
    eps_s: float
    phi: np.ndarray
    gamma0: np.ndarray
    gamma1: np.ndarray
    c: np.ndarray
    dmat: np.ndarray
    plant: Rational = field(repr=False)

    @property
    def n(self) -> int:
        return int(self.phi.shape[0])

    def freqresp(self, omega_rad_s: np.ndarray) -> np.ndarray:
        """H(e^{jωT}) at ω (rad/s), vectorised over ω (one batched linear solve)."""
        w = np.asarray(omega_rad_s, float).ravel()
        return self.at_z(np.exp(1j * w * self.sample_time_s))

    @property
    def pure_delay_samples(self) -> int:
        """m in H(z) = N(z)/(z^m·det(zI − Φ)): d, plus one for a fractional part."""
        return self.d + (1 if self.eps_s > 0 else 0)

    def at_z(self, z: np.ndarray) -> np.ndarray:
        """H(z) at complex points z (vectorised)."""
        z = np.asarray(z, complex).ravel()
        zinv = 1.0 / z
        n = self.n
        frac = self.eps_s > 0
        if n:
            M = z[:, None, None] * np.eye(n)[None] - self.phi[None]
            g = self.gamma0[None, :, 0] + zinv[:, None] * self.gamma1[None, :, 0]
            x = np.linalg.solve(M, g[..., None])[..., 0]
            val = x @ self.c[0].astype(complex)
        else:
            val = np.zeros(z.size, complex)
        val = val + self.dmat[0, 0] * (zinv if frac else 1.0)
        return val * zinv ** self.d


def phi_gamma(A: np.ndarray, B: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """e^{At} and ∫₀^t e^{As} ds B from one exponential of [[A, B], [0, 0]]·t."""
    n = A.shape[0]
    M = np.zeros((n + 1, n + 1))
    M[:n, :n] = A
    M[:n, n:] = B
    E = expm(M * t)
    return E[:n, :n], E[:n, n:]


def split_delay(tau_s: float, sample_time_s: float) -> tuple[int, float]:
    """A delay as d whole sample periods plus a fraction ε in [0, T): τ = d·T + ε, with
    ε within 1e-12·T of 0 or T rounded to the whole period (an exact multiple stays
    exact despite rounding in τ/T)."""
    T = float(sample_time_s)
    d = int(math.floor(tau_s / T + 1e-12))
    eps = tau_s - d * T
    if eps < 1e-12 * T:
        eps = 0.0
    if eps >= T * (1 - 1e-12):
        d, eps = d + 1, 0.0
    return d, eps


def sample_plant(plant: Rational, sample_time_s: float, extra_delay_s: float = 0.0) -> SampledPlant:
    """The exact ZOH discretization of ``plant`` (its delay plus ``extra_delay_s``)."""
    T = float(sample_time_s)
    tau = plant.delay_s + float(extra_delay_s)
    d, eps = split_delay(tau, T)
    A, B, C, D = realize(plant.gain, plant.zeros, plant.poles)
    phi, g_full = phi_gamma(A, B, T - eps)
    if eps > 0:
        phi_e, g_eps = phi_gamma(A, B, eps)
        gamma1 = phi @ g_eps
        phi = phi @ phi_e
    else:
        gamma1 = np.zeros_like(g_full)
    return SampledPlant(sample_time_s=T, delay_s=tau, d=d, eps_s=eps, phi=phi,
                        gamma0=g_full, gamma1=gamma1, c=C, dmat=D, plant=plant)


# --------------------------------------------------------------------------------------
# 4. the sampled loop
# --------------------------------------------------------------------------------------
def closed_loop_matrix(sp: SampledPlant, comp: DiscreteCompensator) -> np.ndarray:
    """The state matrix of the sampled closed loop (negative feedback, reference 0):
    plant states, controller states (series sections), and the past inputs
    u[k−1] ... u[k−d−1]. Its eigenvalues are the roots of the closed-loop
    characteristic polynomial in z (cancelled modes included)."""
    Ac, Bc, Cc, Dc = realize(comp.gain, comp.zeros, comp.poles)
    n, nc, m = sp.n, Ac.shape[0], sp.d + 1
    N = n + nc + m
    ix, ic, iw = slice(0, n), slice(n, n + nc), slice(n + nc, N)
    dc, dp = float(Dc[0, 0]), float(sp.dmat[0, 0])
    # y[k] = Yx·X + Yu·u[k]
    Yx = np.zeros(N)
    Yx[ix] = sp.c[0]
    Yu = 0.0
    if sp.eps_s > 0:
        Yx[n + nc + sp.d] += dp  # u[k−d−1] is w_{d+1}
    elif sp.d > 0:
        Yx[n + nc + sp.d - 1] += dp  # u[k−d] is w_d
    else:
        Yu = dp
    # u[k] = Cc xc − Dc y[k]
    den = 1.0 + dc * Yu
    if abs(den) < 1e-12:
        raise DesignError("the sampled loop is ill-posed: 1 + C(∞)·P(∞) = 0 with no delay")
    Ku = np.zeros(N)
    Ku[ic] = Cc[0]
    Ku = (Ku - dc * Yx) / den
    y_row = Yx + Yu * Ku
    F = np.zeros((N, N))
    # plant
    F[ix, ix] = sp.phi
    v0 = Ku if sp.d == 0 else np.eye(N)[n + nc + sp.d - 1]
    v1 = np.eye(N)[n + nc + sp.d]
    F[ix, :] += sp.gamma0 @ v0[None, :] + sp.gamma1 @ v1[None, :]
    # controller: xc' = Ac xc + Bc·(−y)
    F[ic, ic] = Ac
    F[ic, :] -= Bc @ y_row[None, :]
    # delay line: w1' = u, w_i' = w_{i−1}
    F[n + nc, :] = Ku
    for i in range(1, m):
        F[n + nc + i, n + nc + i - 1] = 1.0
    _ = iw
    return F


def contour_angles(grid_rad_s: np.ndarray, sample_time_s: float,
                   open_poles: np.ndarray) -> np.ndarray:
    """Angles θ in [0, π] (rad) of the half circle the argument count walks: the
    frequency grid (ω·T), a log run from 0 up to its first point, and fine points
    around every open-loop pole within 1e-3 of the unit circle."""
    T = sample_time_s
    theta = np.concatenate([
        [0.0],
        np.logspace(-14, 0, 200) * float(grid_rad_s[0]) * T,
        np.asarray(grid_rad_s, float).ravel() * T,
        [math.pi],
    ])
    near = open_poles[np.abs(np.abs(open_poles) - 1.0) < 1e-3]
    if near.size:
        ang = np.abs(np.angle(near))
        offs = np.concatenate([-np.logspace(-14, -2, 60), [0.0], np.logspace(-14, -2, 60)])
        theta = np.concatenate([theta, (ang[:, None] + offs[None, :]).ravel()])
    return np.unique(theta[(theta >= 0) & (theta <= math.pi)])


def closed_loop_roots_outside(sp: SampledPlant, comp: DiscreteCompensator,
                              grid_rad_s: np.ndarray) -> int:
    """Roots of the closed-loop characteristic polynomial
    χ(z) = z^m·Dc(z)·det(zI − Φ) + Nc(z)·N_H(z) with |z| ≥ ρ = 1 − STABILITY_TOL, by the
    argument principle on the circle |z| = ρ (discrete Nyquist criterion): with
    f = 1 + L = χ / (z^m·Dc·det), Z_out = P_out − W, P_out the roots of Dc·det (the
    open-loop poles e^{pT} and the controller's poles) with |z| ≥ ρ, W the
    counter-clockwise winding of f around 0 — twice the half circle's, by conjugate
    symmetry (Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., §3.4, the
    Nyquist criterion for sampled systems — from memory). Requires m ≥ 1 (the degree
    of χ is then m + deg Dc + n). Hidden (cancelled) modes are counted too: the
    formula holds whatever f cancels."""
    T = sp.sample_time_s
    rho = 1.0 - STABILITY_TOL
    open_poles = np.concatenate([np.array(comp.poles, complex),
                                 np.exp(np.array(sp.plant.poles, complex) * T)])
    p_out = int(np.sum(np.abs(open_poles) >= rho))
    z = rho * np.exp(1j * contour_angles(grid_rad_s, T, open_poles))
    f = 1.0 + comp.at_z(z) * sp.at_z(z)
    arg = np.unwrap(np.angle(f))
    half = (arg[-1] - arg[0]) / math.pi
    winding = int(round(half))
    return p_out - winding


def _loop_value(sp: SampledPlant, comp: DiscreteCompensator, w: np.ndarray) -> np.ndarray:
    return comp.freqresp(w) * sp.freqresp(w)


def _grid(sp: SampledPlant, comp: DiscreteCompensator, cont_loop: Rational,
          extra_rad_s: Sequence[float]) -> np.ndarray:
    """Bracketing grid in (0, π/T): a log grid, linear points for the delay, and
    points clustered on every discrete root near the unit circle."""
    T = sp.sample_time_s
    wn = math.pi / T
    roots = np.concatenate([np.array(cont_loop.zeros, complex), np.array(cont_loop.poles, complex)])
    mags = np.abs(roots[roots != 0])
    scales = [wn, *[x for x in extra_rad_s if x and x > 0], *mags.tolist()]
    lo = min(scales) / 300.0
    droots = np.concatenate([
        np.array(comp.zeros, complex), np.array(comp.poles, complex),
        np.exp(roots * T),
    ])
    return bracketing_grid(T, lo, sp.d, droots)


def bracketing_grid(sample_time_s: float, lo_rad_s: float, delay_samples: int,
                    droots: np.ndarray) -> np.ndarray:
    """The bracketing grid in (0, π/T] (rad/s): a log grid from ``lo_rad_s`` (lowered
    to 1e-4·π/T at most), points dense near π/T (1 − 10^-k), linear points for a delay
    of ``delay_samples`` periods, and points clustered on every discrete root
    ``droots`` of magnitude above 0.3 (near the unit circle, where |L| and ∠L turn
    fast)."""
    T = sample_time_s
    wn = math.pi / T
    lo = min(lo_rad_s, wn * 1e-4)
    n_log = int(math.ceil(math.log10(wn / lo) * 120)) + 2
    parts = [lo * np.exp(np.log(wn / lo) * np.linspace(0.0, 1.0, n_log)),
             wn * (1.0 - np.logspace(-9, -1, 40)),
             np.linspace(0.0, wn, max(400, 16 * (delay_samples + 2)) + 1)[1:]]
    droots = droots[np.abs(droots) > 0.3]
    if droots.size:
        theta = np.abs(np.angle(droots)) / T
        width = np.maximum(np.abs(np.log(np.abs(droots))) / T, wn * 1e-9)
        offs = np.array([-16, -8, -4, -2, -1, -0.5, -0.2, 0, 0.2, 0.5, 1, 2, 4, 8, 16.0])
        parts.append((theta[:, None] + width[:, None] * offs[None, :]).ravel())
    g = np.concatenate(parts)
    g = g[(g > 0) & (g < wn)]
    return np.unique(np.concatenate([g, [wn]]))


def _bisect(f: Any, a: np.ndarray, b: np.ndarray, fa: np.ndarray) -> np.ndarray:
    """Vectorised bisection of f on brackets [a, b] (sign(f(a)) = sign(fa) ≠ sign(f(b)))."""
    a = a.copy()
    b = b.copy()
    sa = np.sign(fa)
    for _ in range(_BISECT_ITERS):
        m = 0.5 * (a + b)
        fm = f(m)
        same = np.sign(fm) == sa
        a = np.where(same, m, a)
        b = np.where(same, b, m)
    return 0.5 * (a + b)


def golden_max(f: Any, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised golden-section search for a maximum of f in each [a, b]."""
    r = (math.sqrt(5.0) - 1.0) / 2.0
    c = b - r * (b - a)
    d = a + r * (b - a)
    fc, fd = f(c), f(d)
    for _ in range(_GOLDEN_ITERS):
        left = fc > fd
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        newc = np.where(left, b - r * (b - a), d)
        newd = np.where(left, c, a + r * (b - a))
        fnew = f(np.where(left, newc, newd))
        fc, fd = np.where(left, fnew, fd), np.where(left, fc, fnew)
        c, d = newc, newd
    x = 0.5 * (a + b)
    return x, f(x)


def sampled_loop_metrics(sp: SampledPlant, comp: DiscreteCompensator,
                         cont_loop: Rational) -> dict[str, Any]:
    """The METRICS frequency readings of the sampled loop L = C(z)·H(z) for
    0 < ω < π/T (docs/interface.md readings), plus stability from the closed-loop matrix.

    ``cont_loop`` is the continuous loop C(s)·P(s) with the total delay; it anchors
    the phase branch at low frequency (where the sampled loop tends to it) and seeds
    the grid."""
    T = sp.sample_time_s
    wn = math.pi / T
    grid = _grid(sp, comp, cont_loop, [comp.prewarp_rad_s or 0.0])
    L = _loop_value(sp, comp, grid)
    with np.errstate(divide="ignore"):
        logmag = np.log(np.abs(L))
    # continuous phase: unwrap along the grid, anchored to the continuous loop's
    # natural branch at the lowest grid point
    raw = np.unwrap(np.angle(L))
    anchor = float(cont_loop.phase_rad(grid[:1])[0])
    anchor += float(np.angle(L[0] / cont_loop.freqresp(grid[:1])[0]))
    phase = raw + 2.0 * math.pi * round((anchor - raw[0]) / (2.0 * math.pi))

    def local_phase(i: np.ndarray, w: np.ndarray) -> np.ndarray:
        return phase[i] + np.angle(_loop_value(sp, comp, w) / L[i])

    # gain crossovers
    fin = np.isfinite(logmag)
    sgn = np.sign(np.where(fin, logmag, -np.inf))
    idx = np.flatnonzero((sgn[:-1] * sgn[1:] < 0) & fin[:-1] & fin[1:])
    if idx.size:
        wx = _bisect(lambda w: np.log(np.abs(_loop_value(sp, comp, w))),
                     grid[idx], grid[idx + 1], logmag[idx])
        ph_x = local_phase(idx, wx)
        pm = np.degrees(ph_x) + 180.0
        pm = pm - 360.0 * np.ceil((pm - 180.0) / 360.0)  # into (−180, 180]
    else:
        wx = np.zeros(0)
        pm = np.zeros(0)
    # phase crossovers: phase = −180° + 360°·n
    lev = np.floor((phase + math.pi) / (2.0 * math.pi))
    jdx = np.flatnonzero((lev[:-1] != lev[1:]) & fin[:-1] & fin[1:])
    if jdx.size:
        level = -math.pi + 2.0 * math.pi * np.maximum(lev[jdx], lev[jdx + 1])
        wp = _bisect(lambda w: local_phase(jdx, w) - level, grid[jdx], grid[jdx + 1],
                     phase[jdx] - level)
        mag_p = np.abs(_loop_value(sp, comp, wp))
    else:
        wp = np.zeros(0)
        mag_p = np.zeros(0)
    # the end of the unit circle, z = −1: L is real there; on the negative real axis
    # the Nyquist curve crosses it (the mirror half continues from there)
    l_end = complex(L[-1])
    if l_end.real < 0 and abs(l_end) > 0 and (wp.size == 0 or wp[-1] < wn * (1 - 1e-9)):
        wp = np.append(wp, wn)
        mag_p = np.append(mag_p, abs(l_end))
    below = mag_p < 1.0
    if np.any(below):
        k = int(np.argmin(np.where(below, -np.log10(np.where(below, mag_p, 1.0)), np.inf)))
        gm_db: float | None = float(-20.0 * np.log10(mag_p[k]))
        w_gm: float | None = float(wp[k])
    else:
        gm_db, w_gm = None, None
    above = mag_p > 1.0
    lower_gm = (float(np.min(-20.0 * np.log10(mag_p[above]))) if np.any(above) else None)
    # peaks |S| and |T|
    def s_mag(w: np.ndarray) -> np.ndarray:
        return 1.0 / np.abs(1.0 + _loop_value(sp, comp, w))

    def t_mag(w: np.ndarray) -> np.ndarray:
        lv = _loop_value(sp, comp, w)
        return np.abs(lv / (1.0 + lv))

    ms, w_ms = _peak(s_mag, grid)
    mt, w_mt = _peak(t_mag, grid)
    # stability: eigenvalues of the closed-loop matrix; for long delays (many samples)
    # the argument principle on the unit circle instead (the matrix grows with d)
    n_states = sp.n + len(comp.poles) + sp.d + 1
    radius: float | None
    if n_states <= MAX_EIG_STATES:
        F = closed_loop_matrix(sp, comp)
        eig = np.linalg.eigvals(F) if F.size else np.zeros(0)
        radius = float(np.max(np.abs(eig))) if eig.size else 0.0
        unstable_count = int(np.sum(np.abs(eig) >= 1.0 - STABILITY_TOL))
        stable = radius < 1.0 - STABILITY_TOL
        how = "eigenvalues"
    else:
        radius = None
        unstable_count = closed_loop_roots_outside(sp, comp, grid)
        stable = unstable_count == 0
        how = "argument principle"
    if wx.size:
        worst = int(np.argmin(pm))
        wc: float | None = float(wx[worst])
        pm_min: float | None = float(pm[worst])
        dm = np.where(pm > 0, np.radians(pm) / wx, 0.0)
        delay_margin: float | None = float(np.min(dm))
    else:
        wc = pm_min = delay_margin = None
    return {
        "crossover_rad_s": wc,
        "crossovers_rad_s": [float(x) for x in wx],
        "phase_margin_deg": pm_min,
        "gain_margin_db": gm_db,
        "phase_crossover_rad_s": w_gm,
        "lower_gain_margin_db": lower_gm,
        "delay_margin_s": delay_margin,
        "delay_margin_samples": None if delay_margin is None else delay_margin / T,
        "sensitivity_peak": ms,
        "sensitivity_peak_rad_s": w_ms,
        "complementary_peak": mt,
        "complementary_peak_rad_s": w_mt,
        "closed_loop_stable": bool(stable),
        "closed_loop_pole_radius": radius,
        "closed_loop_unstable_poles": unstable_count,
        "stability_method": how,
        "nyquist_rad_s": wn,
    }


def _peak(f: Any, grid: np.ndarray) -> tuple[float, float]:
    """Largest value of f over (0, π/T], grid maxima refined by golden-section search
    in ln ω between the neighbouring grid points."""
    v = f(grid)
    v = np.where(np.isfinite(v), v, np.inf)
    if np.any(np.isinf(v)):
        i = int(np.argmax(v))
        return math.inf, float(grid[i])
    interior = np.flatnonzero((v[1:-1] >= v[:-2]) & (v[1:-1] >= v[2:])) + 1
    best_i = int(np.argmax(v))
    # the first grid point stands for the limit ω → 0
    best_v, best_w = float(v[best_i]), (0.0 if best_i == 0 else float(grid[best_i]))
    if interior.size:
        cand = interior[np.argsort(v[interior])[::-1][:_PEAK_CANDIDATES]]
        la, lb = np.log(grid[cand - 1]), np.log(grid[cand + 1])
        x, fx = golden_max(lambda lw: f(np.exp(lw)), la, lb)
        k = int(np.argmax(fx))
        if fx[k] > best_v:
            best_v, best_w = float(fx[k]), float(np.exp(x[k]))
    return best_v, best_w


def cont_loop_with(plant: Rational, comp: Rational, extra_delay_s: float) -> Rational:
    """C(s)·P(s)·e^{−s·extra}: the continuous loop with the computation delay."""
    loop = comp * plant
    return Rational(gain=loop.gain, zeros=loop.zeros, poles=loop.poles,
                    delay_s=loop.delay_s + extra_delay_s)

