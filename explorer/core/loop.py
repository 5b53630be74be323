"""Roots-form rational models with a pure delay, and their batch frequency response.

A factor is ``gain * prod(s - z) / prod(s - p) * exp(-s * delay_s)``. Polynomials are
never expanded in a hot path: coefficient input is turned into roots once, at the
boundary (:meth:`Rational.from_coefficients`).

A *batch* (:class:`LoopBatch`) holds many loops with the same number of zeros and
poles as arrays of shape ``(n_designs, n_roots)``; every evaluation returns arrays of
shape ``(n_designs, n_freqs)`` or ``(n_points,)`` for per-point evaluation at
``(row, omega)`` pairs.

Phase convention (docs/interface.md "Precise readings"): the continuous phase of L(jω) on
the natural low-frequency branch is the sum of per-factor angles, each continuous
for ω > 0, minus ω·τ. A left-half-plane or imaginary-axis root r contributes
``atan2(ω − Im r, −Re r)``; a right-half-plane root contributes
``π − atan2(ω − Im r, Re r)`` (so an unstable real pole starts at −180°, a
non-minimum-phase real zero at +180°). A negative gain adds −180°. No unwrapping.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "Rational",
    "LoopBatch",
    "roots_from_coefficients",
    "feedback_sign",
    "hidden_unstable_mask",
    "ROOT_TOL",
    "root_from_json",
    "root_to_json",
    "angle_terms",
]

#: Two roots closer than this (relative to their size) count as equal; a root whose
#: real part is below this (relative to its modulus) counts as on the imaginary axis.
ROOT_TOL = 1e-9


def _as_roots(values: Sequence[complex] | np.ndarray) -> tuple[complex, ...]:
    arr = np.asarray(values, dtype=complex).ravel()
    # Sort for a canonical order: by real part, then imaginary part.
    order = np.lexsort((arr.imag, arr.real))
    return tuple(complex(v) for v in arr[order])


def roots_from_coefficients(coeffs: Sequence[float]) -> tuple[float, tuple[complex, ...]]:
    """Leading coefficient and roots of a polynomial given highest power first.

    Leading zeros are dropped. Roots that numpy returns with a tiny imaginary part
    (below ``1e-9`` of their modulus) are made real, and conjugate pairs are made
    exactly conjugate, so the result is a valid real-coefficient root set.
    """
    c = np.trim_zeros(np.asarray(coeffs, dtype=float), "f")
    if c.size == 0:
        raise ValueError("polynomial is identically zero")
    r = np.roots(c) if c.size > 1 else np.zeros(0, dtype=complex)
    cleaned: list[complex] = []
    for root in r:
        scale = max(abs(root), 1.0)
        if abs(root.imag) <= 1e-9 * scale:
            cleaned.append(complex(root.real, 0.0))
        else:
            cleaned.append(complex(root))
    # enforce exact conjugate symmetry
    upper = sorted((x for x in cleaned if x.imag > 0), key=lambda x: (x.real, x.imag))
    reals = [x for x in cleaned if x.imag == 0]
    sym = reals + [x for u in upper for x in (u, u.conjugate())]
    return float(c[0]), _as_roots(sym)


@dataclass(frozen=True, kw_only=True)
class Rational:
    """One factor ``gain * prod(s - zeros) / prod(s - poles) * exp(-s * delay_s)``.

    Roots are stored sorted; complex roots must come in conjugate pairs (checked at
    the study-file boundary, not here).
    """

    gain: float
    zeros: tuple[complex, ...] = ()
    poles: tuple[complex, ...] = ()
    delay_s: float = 0.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "zeros", _as_roots(self.zeros))
        object.__setattr__(self, "poles", _as_roots(self.poles))
        object.__setattr__(self, "gain", float(self.gain))
        object.__setattr__(self, "delay_s", float(self.delay_s))

    # -- construction -------------------------------------------------------------
    @classmethod
    def from_coefficients(
        cls, num: Sequence[float], den: Sequence[float], delay_s: float = 0.0
    ) -> Rational:
        """Build from polynomial coefficients (highest power first)."""
        kn, z = roots_from_coefficients(num)
        kd, p = roots_from_coefficients(den)
        return cls(gain=kn / kd, zeros=z, poles=p, delay_s=delay_s)

    def __mul__(self, other: Rational) -> Rational:
        return Rational(
            gain=self.gain * other.gain,
            zeros=self.zeros + other.zeros,
            poles=self.poles + other.poles,
            delay_s=self.delay_s + other.delay_s,
        )

    # -- structure ----------------------------------------------------------------
    @property
    def order(self) -> int:
        """Number of poles."""
        return len(self.poles)

    @property
    def relative_degree(self) -> int:
        return len(self.poles) - len(self.zeros)

    @property
    def is_proper(self) -> bool:
        return self.relative_degree >= 0

    @property
    def n_integrators(self) -> int:
        """Poles at s = 0 minus zeros at s = 0."""
        return _count_at_origin(self.poles) - _count_at_origin(self.zeros)

    def dc_gain(self) -> float:
        """Value at s = 0 with poles/zeros at the origin removed (the 'velocity'-type constant)."""
        z = np.array([r for r in self.zeros if abs(r) > 0], dtype=complex)
        p = np.array([r for r in self.poles if abs(r) > 0], dtype=complex)
        return float((self.gain * np.prod(-z) / np.prod(-p)).real)

    def hf_gain(self) -> float | None:
        """|value| as ω → ∞: |gain| if biproper, 0 if strictly proper, None if improper."""
        rd = self.relative_degree
        if rd < 0:
            return None
        return abs(self.gain) if rd == 0 else 0.0

    # -- evaluation -----------------------------------------------------------------
    def freqresp(self, omega_rad_s: np.ndarray | float) -> np.ndarray:
        """Complex value at s = jω, delay included."""
        return self.batch().freqresp(np.atleast_1d(np.asarray(omega_rad_s, float)))[0]

    def phase_rad(self, omega_rad_s: np.ndarray | float) -> np.ndarray:
        """Continuous phase (rad) on the natural low-frequency branch, delay included."""
        w = np.atleast_1d(np.asarray(omega_rad_s, float))
        b = self.batch()
        rows = np.zeros(w.size, dtype=np.intp)
        return b.phase_at(rows, w)

    def batch(self, n: int = 1) -> LoopBatch:
        """This factor repeated ``n`` times as a batch."""
        return LoopBatch(
            gain=np.full(n, self.gain),
            zeros=np.tile(np.array(self.zeros, dtype=complex), (n, 1)),
            poles=np.tile(np.array(self.poles, dtype=complex), (n, 1)),
            delay_s=np.full(n, self.delay_s),
        )

    def to_dict(self) -> dict[str, object]:
        """Study-file/interface form: real roots as floats, complex roots as strings."""
        return {
            "gain": self.gain,
            "zeros": [root_to_json(r) for r in self.zeros],
            "poles": [root_to_json(r) for r in self.poles],
        }


def feedback_sign(plant: Rational) -> float:
    """The sign (+1.0 or −1.0) of the compensator gain that makes the loop negative
    feedback: sign(k · Π(−z)) over the plant's zeros off the origin, i.e. the sign of
    the lowest nonzero coefficient of the plant's numerator (for real z: the gain's
    sign times (−1) to the number of right-half-plane zeros).

    Why: with compensator zeros and poles in the closed left half plane (every
    structure here), the closed-loop characteristic function f(s) = den(s) +
    k_L·num(s)·e^(−sτ) (den monic) is real on the real axis and → +∞ as s → +∞. If
    f(0) < 0 it has a real root in s > 0 (intermediate value theorem), so f(0) =
    Π(−p_L) + k_L·Π(−z_L) > 0 is necessary for stability — with an integrator in the
    loop Π(−p_L) = 0 and the condition is exactly k_L·Π(−z_L) > 0 (Routh–Hurwitz's
    necessary condition that a stable polynomial's coefficients share one sign, here
    its constant term, with the delay included). A reverse-acting plant (negative
    gain) thus gets a negative compensator gain, and the loop it makes is the same
    loop as its mirror's: every answer is unchanged by negating the plant gain."""
    z = np.array([r for r in plant.zeros if abs(r) > 0], dtype=complex)
    lead = plant.gain * float(np.prod(-z).real) if z.size else plant.gain
    # real roots give a real product; conjugate pairs a positive one
    return 1.0 if lead > 0 else -1.0


def hidden_unstable_mask(plant: Rational, zeros: np.ndarray, poles: np.ndarray) -> np.ndarray:
    """Per compensator row (zeros (n, nz), poles (n, np)): True where a compensator
    pole cancels a plant zero, or a compensator zero a plant pole, in the closed right
    half plane (Re r ≥ 0, the origin and the imaginary axis included).

    Such a cancellation leaves a mode that L = C·P does not show but the closed loop
    keeps: the loop is not internally stable — some closed-loop transfer function (from
    the reference to the control signal, or from a load to the output) is unbounded —
    although the Nyquist count of L says "stable" (every closed-loop transfer function
    must be stable: Doyle, Francis & Tannenbaum, *Feedback Control Theory*, 1992,
    §3.2 — section from memory). Roots count as equal within 1e-9 of max(1, |r|)."""
    zeros = np.asarray(zeros, complex).reshape(len(zeros), -1)
    poles = np.asarray(poles, complex).reshape(len(poles), -1)
    out = np.zeros(zeros.shape[0], bool)

    def closed_rhp(roots: tuple[complex, ...]) -> np.ndarray:
        r = np.array(roots, complex)
        return r[r.real >= -ROOT_TOL * np.abs(r)] if r.size else r

    for plant_roots, comp in ((closed_rhp(plant.zeros), poles), (closed_rhp(plant.poles), zeros)):
        if plant_roots.size == 0 or comp.shape[1] == 0:
            continue
        tol = 1e-9 * np.maximum(1.0, np.abs(plant_roots))
        hit = np.abs(comp[:, :, None] - plant_roots[None, None, :]) <= tol[None, None, :]
        out |= np.any(hit, axis=(1, 2))
    return out


def root_to_json(r: complex) -> float | str:
    """A real root as a float, a complex one as Python complex syntax (``"-2+3j"``)."""
    if r.imag == 0:
        return float(r.real)
    return f"{r.real:.17g}{r.imag:+.17g}j"


def root_from_json(value: object) -> complex:
    """The root :func:`root_to_json` wrote: a number, or a complex string (``"-2+3j"``;
    spaces ignored). Also reads an ``[re, im]`` pair, the form trial records stored
    before December 2026, so an older exploration still resumes. Raises ValueError."""
    if isinstance(value, complex):
        return value
    if isinstance(value, (list, tuple)) and len(value) == 2:
        return complex(float(value[0]), float(value[1]))
    if isinstance(value, str):
        return complex(value.replace(" ", ""))
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return complex(float(value))
    raise ValueError(f"{value!r} is not a root")


def _count_at_origin(roots: Sequence[complex]) -> int:
    return sum(1 for r in roots if abs(r) == 0.0)


def angle_terms(roots: np.ndarray, omega: np.ndarray) -> np.ndarray:
    """Continuous angle of (jω − r) for each root (broadcast), on the natural branch."""
    re = roots.real
    dy = omega - roots.imag
    rhp = re > 0
    lhp_angle = np.arctan2(dy, -re)
    rhp_angle = np.pi - np.arctan2(dy, re)
    return np.where(rhp, rhp_angle, lhp_angle)


@dataclass(frozen=True, eq=False)
class LoopBatch:
    """Many loops with equal root counts: gain ``(n,)``, zeros ``(n, nz)``,
    poles ``(n, np)``, delay_s ``(n,)``."""

    gain: np.ndarray
    zeros: np.ndarray
    poles: np.ndarray
    delay_s: np.ndarray
    _cache: dict[str, object] = field(default_factory=dict, repr=False, compare=False)

    def __post_init__(self) -> None:
        n = np.asarray(self.gain).shape[0]
        object.__setattr__(self, "gain", np.asarray(self.gain, dtype=float).reshape(n))
        object.__setattr__(self, "zeros", np.asarray(self.zeros, dtype=complex).reshape(n, -1))
        object.__setattr__(self, "poles", np.asarray(self.poles, dtype=complex).reshape(n, -1))
        d = np.broadcast_to(np.asarray(self.delay_s, dtype=float), (n,)).copy()
        object.__setattr__(self, "delay_s", d)

    # -- construction ---------------------------------------------------------------
    @classmethod
    def series(
        cls,
        plant: Rational,
        comp_gain: np.ndarray,
        comp_zeros: np.ndarray,
        comp_poles: np.ndarray,
    ) -> LoopBatch:
        """Loops L = C·P for a batch of compensators of one structure and one plant."""
        comp_gain = np.asarray(comp_gain, dtype=float).ravel()
        n = comp_gain.shape[0]
        cz = np.asarray(comp_zeros, dtype=complex).reshape(n, -1)
        cp = np.asarray(comp_poles, dtype=complex).reshape(n, -1)
        pz = np.broadcast_to(np.array(plant.zeros, dtype=complex), (n, len(plant.zeros)))
        pp = np.broadcast_to(np.array(plant.poles, dtype=complex), (n, len(plant.poles)))
        return cls(
            gain=comp_gain * plant.gain,
            zeros=np.concatenate([pz, cz], axis=1),
            poles=np.concatenate([pp, cp], axis=1),
            delay_s=np.full(n, plant.delay_s),
        )

    @classmethod
    def stack(cls, loops: Sequence[Rational]) -> LoopBatch:
        """Loops of equal root counts stacked into one batch."""
        return cls(
            gain=np.array([x.gain for x in loops]),
            zeros=np.array([x.zeros for x in loops], dtype=complex).reshape(len(loops), -1),
            poles=np.array([x.poles for x in loops], dtype=complex).reshape(len(loops), -1),
            delay_s=np.array([x.delay_s for x in loops]),
        )

    def row(self, i: int) -> Rational:
        return Rational(
            gain=float(self.gain[i]),
            zeros=tuple(self.zeros[i]),
            poles=tuple(self.poles[i]),
            delay_s=float(self.delay_s[i]),
        )

    def take(self, rows: np.ndarray) -> LoopBatch:
        return LoopBatch(
            gain=self.gain[rows],
            zeros=self.zeros[rows],
            poles=self.poles[rows],
            delay_s=self.delay_s[rows],
        )

    @property
    def n(self) -> int:
        return int(self.gain.shape[0])

    @property
    def relative_degree(self) -> int:
        return self.poles.shape[1] - self.zeros.shape[1]

    def n_origin_poles(self) -> np.ndarray:
        """Per design: poles at s = 0 minus zeros at s = 0 (integrators of the loop)."""
        return np.sum(self.poles == 0, axis=1) - np.sum(self.zeros == 0, axis=1)

    def dc_gain(self) -> np.ndarray:
        """Per design: the value at s = 0 with poles and zeros at the origin removed
        (real); :meth:`Rational.dc_gain` for one loop. L(0) itself when the loop has no
        net integrator."""
        z = np.where(self.zeros == 0, 1.0, -self.zeros)
        p = np.where(self.poles == 0, 1.0, -self.poles)
        return (self.gain * np.prod(z, axis=1) / np.prod(p, axis=1)).real

    def n_rhp_poles(self) -> np.ndarray:
        """Per design: open-loop poles with Re > 0 (strictly), counted with multiplicity."""
        tol = ROOT_TOL * np.maximum(np.abs(self.poles), 1e-300)
        return np.sum(self.poles.real > tol, axis=1)

    def hf_value(self) -> np.ndarray:
        """Complex limit of the rational part as ω → ∞ (0 if strictly proper);
        for a biproper loop this is the gain (the delay only rotates it)."""
        rd = self.relative_degree
        if rd > 0:
            return np.zeros(self.n, dtype=complex)
        if rd == 0:
            return self.gain.astype(complex)
        return np.full(self.n, np.inf + 0j)

    # -- evaluation on a grid ---------------------------------------------------------
    def freqresp(self, omega: np.ndarray) -> np.ndarray:
        """L(jω) for every design, ``omega`` of shape ``(m,)`` or ``(n, m)``.

        Evaluated root by root in place (never a designs × roots × freqs array).
        """
        w = np.asarray(omega, dtype=float)
        w2 = np.broadcast_to(w, (self.n, w.shape[-1])) if w.ndim == 1 else w
        s = 1j * w2
        tmp = np.empty(w2.shape, dtype=complex)
        # numerator and denominator products separately: one complex division
        if np.any(self.delay_s):
            num = np.exp(-1j * w2 * self.delay_s[:, None])
            num *= self.gain[:, None]
        else:
            num = np.empty(w2.shape, dtype=complex)
            num[...] = self.gain[:, None]
        for k in range(self.zeros.shape[1]):
            np.subtract(s, self.zeros[:, k : k + 1], out=tmp)
            num *= tmp
        if self.poles.shape[1]:
            den = s - self.poles[:, 0:1]
            for k in range(1, self.poles.shape[1]):
                np.subtract(s, self.poles[:, k : k + 1], out=tmp)
                den *= tmp
            num /= den
        return num

    # -- evaluation at (row, omega) points ------------------------------------------------
    def log_mag_at(self, rows: np.ndarray, omega: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """ln|L(jω)| and its slope d ln|L| / d ln ω at points ``(rows[i], omega[i])``.

        slope = Σ Re(jω/(jω − z)) − Σ Re(jω/(jω − p)).
        """
        s = (1j * omega)[:, None]
        dz = s - self.zeros[rows]
        dp = s - self.poles[rows]
        val = np.log(np.abs(self.gain[rows])) + np.sum(np.log(np.abs(dz)), axis=1)
        val -= np.sum(np.log(np.abs(dp)), axis=1)
        slope = np.sum((s / dz).real, axis=1) - np.sum((s / dp).real, axis=1)
        return val, slope

    def phase_at(self, rows: np.ndarray, omega: np.ndarray) -> np.ndarray:
        """Continuous phase (rad) at points ``(rows[i], omega[i])`` (see module doc)."""
        w = omega[:, None]
        ph = np.sum(angle_terms(self.zeros[rows], w), axis=1)
        ph -= np.sum(angle_terms(self.poles[rows], w), axis=1)
        ph -= omega * self.delay_s[rows]
        ph = np.where(self.gain[rows] < 0, ph - np.pi, ph)
        return ph

    def phase_slope_at(self, rows: np.ndarray, omega: np.ndarray) -> np.ndarray:
        """d phase / d ln ω (rad) = Σ Im(jω/(jω − z)) − Σ Im(jω/(jω − p)) − ωτ."""
        s = (1j * omega)[:, None]
        dz = s - self.zeros[rows]
        dp = s - self.poles[rows]
        sl = np.sum((s / dz).imag, axis=1) - np.sum((s / dp).imag, axis=1)
        return sl - omega * self.delay_s[rows]

    def value_at(self, rows: np.ndarray, omega: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """L(jω) and dL/dω at points ``(rows[i], omega[i])``."""
        s = (1j * omega)[:, None]
        dz = s - self.zeros[rows]
        dp = s - self.poles[rows]
        val = self.gain[rows] * np.prod(dz, axis=1) / np.prod(dp, axis=1)
        val = val * np.exp(-1j * omega * self.delay_s[rows])
        # dL/ds = L * (Σ 1/(s − z) − Σ 1/(s − p) − τ);  dL/dω = j dL/ds
        dlog = np.sum(1 / dz, axis=1) - np.sum(1 / dp, axis=1) - self.delay_s[rows]
        return val, 1j * val * dlog

    # -- characteristic frequencies -------------------------------------------------------
    def root_scales(self) -> tuple[np.ndarray, np.ndarray]:
        """Per root: natural frequency |r| (rad/s) and damping |Re r|/|r|, shape (n, nr)."""
        roots = np.concatenate([self.zeros, self.poles], axis=1)
        mag = np.abs(roots)
        with np.errstate(invalid="ignore", divide="ignore"):
            zeta = np.where(mag > 0, np.abs(roots.real) / np.where(mag > 0, mag, 1), 1.0)
        return mag, zeta
