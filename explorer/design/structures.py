"""Compensator structures: a parameter space scaled to the crossover, mapped to roots.

A structure fixes the integrators, the cancelled plant poles and how many free real
zeros / poles (and complex zero pairs) the compensator has. Free locations are
parameters on a log scale as ratios of the crossover ωc; one real root — the
*balancing* root — is not a parameter: it is solved from the phase condition
∠L(jωc) = −180° + PM (docs/explore.md, step 2, "Targets by elimination"), and the gain from
|L(jωc)| = 1. A single real root r = −a contributes ±atan(ωc/a), so the 1-D phase
equation has the closed-form solution a = ωc / tan(|Δ|) — the exact root that a
bisection on atan would converge to (Åström & Murray, *Feedback Systems*, 2008,
§11.4 on lead/lag phase; common practice).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field

import numpy as np

from explorer.core.loop import Rational, angle_terms, feedback_sign
from explorer.model.study import SearchOptions, Targets

__all__ = [
    "Structure",
    "RootStructure",
    "BalancedRoots",
    "candidate_structures",
    "balance",
    "loop_phase_target_deg",
    "LIGHT_DAMPING",
    "locate",
]

#: Plant poles with a damping ratio below this count as lightly damped (common practice).
LIGHT_DAMPING = 0.2
#: log10(location / ωc) bounds of free real zeros and poles, and of the balancing root.
ZERO_BOUNDS = (-2.0, 1.0)
POLE_BOUNDS = (-0.5, 2.0)
BALANCE_BOUNDS = (-2.5, 2.5)


class Structure(ABC):
    """A compensator structure. Contract: ``label`` (our short name), ``order``
    (number of compensator poles), ``params`` (name → (low, high) bounds; location
    parameters are log10 ratios to ωc), ``balance_root`` ("zero" or "pole": the real
    root solved from the phase condition) and ``roots(params, wc)`` mapping a batch of
    parameters to zeros (n, nz) and poles (n, np) *without* the balancing root."""

    label: str
    order: int
    balance_root: str

    @property
    @abstractmethod
    def params(self) -> dict[str, tuple[float, float]]: ...

    @abstractmethod
    def roots(
        self, params: dict[str, np.ndarray], wc_rad_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]: ...


@dataclass(frozen=True, kw_only=True)
class RootStructure(Structure):
    """Integrators, fixed cancelling zeros, free real zeros/poles, an optional complex
    zero pair (PID with complex zeros) or notch pair, and one balancing real root."""

    label: str
    integrators: int
    free_zeros: int = 0
    free_poles: int = 0
    complex_zeros: bool = False
    notch: tuple[float, float] | None = None  # plant mode (ωn rad/s, ζ)
    cancel: tuple[float, ...] = ()  # plant poles (negative reals) cancelled by zeros
    balance_root: str = "zero"
    _p: dict[str, tuple[float, float]] = field(default_factory=dict, repr=False, compare=False)

    @property
    def order(self) -> int:  # type: ignore[override]
        return self.integrators + self.free_poles + (self.balance_root == "pole")

    @property
    def n_zeros(self) -> int:
        return (
            self.free_zeros
            + len(self.cancel)
            + 2 * self.complex_zeros
            + 2 * (self.notch is not None)
            + (self.balance_root == "zero")
        )

    @property
    def params(self) -> dict[str, tuple[float, float]]:
        p: dict[str, tuple[float, float]] = {}
        for i in range(self.free_zeros):
            p[f"zero{i + 1}"] = ZERO_BOUNDS
        for i in range(self.free_poles):
            p[f"pole{i + 1}"] = POLE_BOUNDS
        if self.complex_zeros:
            p["pair_w"] = (-1.5, 0.5)
            p["pair_zeta"] = (0.3, 1.0)
        if self.notch is not None:
            p["notch_w"] = (-0.1, 0.1)  # log10 ratio to the plant mode's ωn
            p["notch_zeta"] = (max(self.notch[1], 0.01), 0.6)
        return p

    def roots(
        self, params: dict[str, np.ndarray], wc_rad_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        wc = np.asarray(wc_rad_s, float)
        n = wc.shape[0]
        zs: list[np.ndarray] = [np.full(n, c, dtype=complex) for c in self.cancel]
        zs += [
            -(wc * 10.0 ** np.asarray(params[f"zero{i + 1}"], float)) + 0j
            for i in range(self.free_zeros)
        ]
        ps: list[np.ndarray] = [np.zeros(n, complex) for _ in range(self.integrators)]
        ps += [
            -(wc * 10.0 ** np.asarray(params[f"pole{i + 1}"], float)) + 0j
            for i in range(self.free_poles)
        ]
        for key, wn_of in (("pair", lambda x: wc * 10.0**x), ("notch", None)):
            if key == "pair" and not self.complex_zeros:
                continue
            if key == "notch":
                if self.notch is None:
                    continue
                wn = self.notch[0] * 10.0 ** np.asarray(params["notch_w"], float)
            else:
                assert wn_of is not None  # only the "notch" entry has none
                wn = wn_of(np.asarray(params["pair_w"], float))
            zeta = np.clip(np.asarray(params[f"{key}_zeta"], float), 0.0, 1.0)
            r = -zeta * wn + 1j * wn * np.sqrt(1.0 - zeta**2)
            zs += [r, np.conj(r)]
        z = np.stack(zs, axis=1) if zs else np.zeros((n, 0), complex)
        p = np.stack(ps, axis=1) if ps else np.zeros((n, 0), complex)
        return z, p


def _log_ratio(r: complex, wc: float) -> float:
    return float(np.log10(abs(r) / wc))


def _within(x: float, lo_hi: tuple[float, float], tol: float = 1e-9) -> bool:
    return lo_hi[0] - tol <= x <= lo_hi[1] + tol


def locate(
    s: Structure,
    zeros: tuple[complex, ...],
    poles: tuple[complex, ...],
    wc_rad_s: float,
    *,
    check_bounds: bool = True,
) -> dict[str, float] | None:
    """The parameters of ``s`` that give a compensator with these roots at crossover
    ``wc_rad_s`` (the balancing root then re-solves to the given one when the design
    meets its phase condition), or None when the roots are not of this structure or
    (with ``check_bounds``) a location lies outside the structure's bounds; the
    balancing root must always lie within ``BALANCE_BOUNDS``. Used to start the local refinement
    from a hand design. Real free roots only, plus the PID complex-zero pair; notch
    structures are not located."""
    if not isinstance(s, RootStructure) or s.notch is not None:
        return None
    tol = 1e-9 * max(1.0, wc_rad_s)
    origin = [p for p in poles if abs(p) <= tol]
    if len(origin) != s.integrators:
        return None
    rest_p = [p for p in poles if abs(p) > tol]
    rest_z = list(zeros)
    for c in s.cancel:
        hit = [z for z in rest_z if abs(z - c) <= 1e-6 * abs(c)]
        if not hit:
            return None
        rest_z.remove(hit[0])
    out: dict[str, float] = {}
    pair = [z for z in rest_z if z.imag > tol]
    if s.complex_zeros:
        if len(pair) != 1:
            return None
        wn = abs(pair[0])
        out["pair_w"] = _log_ratio(pair[0], wc_rad_s)
        out["pair_zeta"] = float(-pair[0].real / wn)
        rest_z = [z for z in rest_z if abs(z.imag) <= tol]
    if any(abs(r.imag) > tol or r.real >= 0 for r in (*rest_z, *rest_p)):
        return None
    zr = sorted(-r.real for r in rest_z)
    pr = sorted(-r.real for r in rest_p)
    nz = s.free_zeros + (s.balance_root == "zero")
    npol = s.free_poles + (s.balance_root == "pole")
    if len(zr) != nz or len(pr) != npol:
        return None
    free_z, free_p = (zr, pr)
    bal_from = free_z if s.balance_root == "zero" else free_p
    for k in range(len(bal_from)):  # any one of the real roots may be the balancing one
        cand_rest = bal_from[:k] + bal_from[k + 1 :]
        if not _within(np.log10(bal_from[k] / wc_rad_s), BALANCE_BOUNDS):
            continue
        fz = cand_rest if s.balance_root == "zero" else free_z
        fp = cand_rest if s.balance_root == "pole" else free_p
        got = dict(out)
        got.update({f"zero{i + 1}": float(np.log10(a / wc_rad_s)) for i, a in enumerate(fz)})
        got.update({f"pole{i + 1}": float(np.log10(a / wc_rad_s)) for i, a in enumerate(fp)})
        if not check_bounds or all(_within(got[k2], b) for k2, b in s.params.items()):
            return got
    return None


@dataclass(frozen=True, kw_only=True)
class BalancedRoots:
    """Result of balancing a batch: full roots, gain, and the phase shortfall (deg,
    0 where feasible)."""

    gain: np.ndarray
    zeros: np.ndarray
    poles: np.ndarray
    shortfall_deg: np.ndarray


def _phase_deg(roots: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Sum of angle(jω − r) (deg) over a row's roots, on the natural branch
    (:func:`explorer.core.loop.angle_terms`)."""
    if roots.shape[1] == 0:
        return np.zeros(w.shape[0])
    return np.degrees(angle_terms(roots, w[:, None])).sum(axis=1)


def _log_mag(roots: np.ndarray, w: np.ndarray) -> np.ndarray:
    if roots.shape[1] == 0:
        return np.zeros(w.shape[0])
    return np.log(np.abs(1j * w[:, None] - roots)).sum(axis=1)


def loop_phase_target_deg(pm_deg: float | np.ndarray) -> np.ndarray:
    return -180.0 + np.asarray(pm_deg, float)


def balance(
    plant: Rational,
    s: Structure,
    params: dict[str, np.ndarray],
    wc_rad_s: np.ndarray,
    pm_deg: float | np.ndarray,
) -> BalancedRoots:
    """Solve the balancing root from ∠L(jωc) = −180° + PM (mod 360°) and the gain
    from |L(jωc)| = 1, for a batch. Infeasible rows get the shortfall in degrees
    (distance of the needed phase from what the balancing root can give within its
    bounds) and NaN roots/gain. The gain's sign is :func:`explorer.core.loop.feedback_sign`
    (negative feedback); its −180° is part of the phase balanced, so a reverse-acting
    plant gets the mirror of its twin's design."""
    wc = np.asarray(wc_rad_s, float)
    z, p = s.roots(params, wc)
    sign = feedback_sign(plant)
    plant_phase = np.degrees(plant.phase_rad(wc)) + (0.0 if sign > 0 else -180.0)
    rest = plant_phase + _phase_deg(z, wc) - _phase_deg(p, wc)
    need = np.mod(loop_phase_target_deg(pm_deg) - rest, 360.0)  # in [0, 360)
    lo_r, hi_r = 10.0 ** BALANCE_BOUNDS[0], 10.0 ** BALANCE_BOUNDS[1]
    # a real root at −a·ωc gives atan(1/a): between atan(1/hi_r) and atan(1/lo_r)
    amin, amax = np.degrees(np.arctan(1.0 / hi_r)), np.degrees(np.arctan(1.0 / lo_r))
    if s.balance_root == "zero":
        d = need  # zero adds phase
        d = np.where(d > 270.0, d - 360.0, d)  # small negative: too much phase already
    else:
        d = 360.0 - need  # pole removes phase: |Δ|
        d = np.where(d > 270.0, d - 360.0, d)
    short = np.where(d < amin, amin - d, np.where(d > amax, d - amax, 0.0))
    ok = short == 0.0
    a = np.where(ok, wc / np.tan(np.radians(np.clip(d, amin, amax))), np.nan)
    root = -a + 0j
    if s.balance_root == "zero":
        z = np.concatenate([z, root[:, None]], axis=1)
    else:
        p = np.concatenate([p, root[:, None]], axis=1)
    plant_lm = np.log(np.abs(plant.freqresp(wc)))
    lm = plant_lm + _log_mag(z, wc) - _log_mag(p, wc)
    gain = np.where(ok, sign * np.exp(-lm), np.nan)
    return BalancedRoots(gain=gain, zeros=z, poles=p, shortfall_deg=short)


def _slow_stable_real_poles(plant: Rational, wc: float | None) -> list[float]:
    out = sorted((p.real for p in plant.poles if p.imag == 0 and p.real < 0), reverse=True)
    if wc is not None:
        out = [p for p in out if -p < 2.0 * wc]
    return out


def _lightly_damped(plant: Rational) -> list[tuple[float, float]]:
    modes = []
    for p in plant.poles:
        if p.imag > 0 and p.real < 0:
            wn = abs(p)
            zeta = -p.real / wn
            if zeta < LIGHT_DAMPING:
                modes.append((wn, zeta))
    return modes


def _label(
    ni: int, fz: int, fp: int, bal: str, *, cz: bool = False, notch: bool = False, nc: int = 0
) -> str:
    head = {0: "P", 1: "I"}.get(ni, f"I{ni}")
    zeros = fz + (bal == "zero") + (2 if cz else 0)
    poles = fp + (bal == "pole")
    parts = []
    if cz:
        return f"PID·filter (complex zeros){'+roll-off' * max(poles - 1, 0)}".replace(
            "+roll-off+roll-off", "+2 roll-off"
        )
    if nc:
        parts.append("cancel" if nc == 1 else f"{nc} cancel")
    if notch:
        parts.append("notch")
    lead = min(zeros, poles)
    extra_z = zeros - lead
    extra_p = poles - lead
    if not nc and not notch and ni == 1 and extra_z == 1 and lead == 1:
        base = "PID·filter"
        lead = 0
    elif not nc and not notch and ni >= 1 and extra_z == 1:
        base = "PI" if ni == 1 else f"{head}·zero"
    else:
        base = head
        if extra_z:
            parts.append("zero" if extra_z == 1 else f"{extra_z} zeros")
    if lead:
        parts.append("lead" if lead == 1 else f"{lead} lead")
    if extra_p:
        parts.append("roll-off" if extra_p == 1 else f"{extra_p} roll-off")
    return "+".join([base, *parts])


def candidate_structures(
    plant: Rational, targets: Targets, search: SearchOptions
) -> list[Structure]:
    """Structures up to ``search.max_order`` compensator poles, lowest order first.

    Required integrators = targets.integrators minus the plant's own. Families: real
    lead/lag zero–pole pairs (with an optional extra zero: PI, PID with a derivative
    filter), PID·filter with complex zeros, cancellation of the slowest stable real
    plant poles, a notch-style zero pair on each lightly damped plant mode (ζ < 0.2,
    when ``cancel_lightly_damped``, or always when the plant has one), and extra
    roll-off poles. Only proper structures are returned."""
    need = max(targets.integrators - plant.n_integrators, 0)
    # On a plant that brings the loop's integrators itself, a compensator integrator
    # is still what removes the offset of a constant load at the plant input (the load
    # sees the compensator, not the plant, between it and the error): explore both.
    options = [need] + ([need + 1] if need == 0 and plant.n_integrators > 0 else [])
    max_order = search.max_order
    wc = targets.crossover_rad_s if isinstance(targets.crossover_rad_s, (int, float)) else None
    out: list[RootStructure] = []
    seen: set[tuple] = set()

    def add(s: RootStructure) -> None:
        key = (
            s.integrators,
            s.free_zeros,
            s.free_poles,
            s.complex_zeros,
            s.notch,
            s.cancel,
            s.balance_root,
        )
        if (
            key in seen
            or s.order > max_order
            or s.n_zeros > s.order
            or s.order == 0
            and s.n_zeros == 0
        ):
            return
        seen.add(key)
        out.append(s)

    for ni in options:
        for extra_poles in range(0, max_order - ni + 1):
            for fz in range(0, extra_poles + ni + 1):
                # balancing zero: zeros = fz + 1, poles = extra_poles
                if fz + 1 <= ni + extra_poles:
                    add(
                        RootStructure(
                            label=_label(ni, fz, extra_poles, "zero"),
                            integrators=ni,
                            free_zeros=fz,
                            free_poles=extra_poles,
                            balance_root="zero",
                        )
                    )
            # balancing pole with free zeros (a roll-off solved from phase)
            if extra_poles >= 1:
                fp = extra_poles - 1
                for fz in range(0, min(ni + extra_poles, 2) + 1):
                    if fz >= 1 or ni == 0:
                        add(
                            RootStructure(
                                label=_label(ni, fz, fp, "pole"),
                                integrators=ni,
                                free_zeros=fz,
                                free_poles=fp,
                                balance_root="pole",
                            )
                        )
        # PID with complex zeros and a balancing filter pole (+ roll-off)
        if ni >= 1:
            for fp in range(0, max_order - ni):
                add(
                    RootStructure(
                        label=_label(ni, 0, fp, "pole", cz=True),
                        integrators=ni,
                        free_poles=fp,
                        complex_zeros=True,
                        balance_root="pole",
                    )
                )
        # cancellation of slow stable plant poles, balancing pole
        slow = _slow_stable_real_poles(plant, wc)
        for nc in (1, 2):
            if len(slow) >= nc:
                for fp in range(0, max_order - ni):
                    add(
                        RootStructure(
                            label=_label(ni, 0, fp, "pole", nc=nc),
                            integrators=ni,
                            free_poles=fp,
                            cancel=tuple(slow[:nc]),
                            balance_root="pole",
                        )
                    )
        # notch on a lightly damped mode: the notch's two poles (plus roll-off) and a
        # balancing zero, with 0–2 free zeros besides (integrator + one free zero:
        # PID·filter + notch, for a motion axis with a structural mode)
        for mode in _lightly_damped(plant):
            for fp in range(2, max_order - ni + 1):
                for fz in range(0, 3):
                    add(
                        RootStructure(
                            # the notch is its zero pair and two of the poles
                            label=_label(ni, fz, fp - 2, "zero") + "+notch",
                            integrators=ni,
                            free_zeros=fz,
                            free_poles=fp,
                            notch=mode,
                            balance_root="zero",
                        )
                    )
    # one structure per label: the same roots reached by another balancing root are dropped
    final: list[Structure] = []
    labels: set[str] = set()
    for s in sorted(out, key=lambda s: (s.order, len(s.params), s.balance_root != "zero", s.label)):
        if s.label not in labels:
            labels.add(s.label)
            final.append(s)
    return sorted(final, key=lambda s: (s.order, len(s.params), s.label))
