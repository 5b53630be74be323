"""Requirement ↔ loop-target conversions for the standard second-order loop.

Every function here is a pure numpy function: it takes floats or arrays and returns
a float (scalar input) or an array of the broadcast shape. No validation beyond the
mathematical domain (NaN comes out where the input is outside it, except in
:func:`targets_from_requirements`, which raises ``ValueError``); the study loader
validates user input before it calls in here.

The standard loop is L(s) = ωn²/(s(s + 2ζωn)), whose closed loop is the standard
second-order system T(s) = ωn²/(s² + 2ζωn·s + ωn²). Sources (see docs/specs.md):

- Ogata, *Modern Control Engineering* 5e (2010), Ch. 5 (step response: overshoot,
  settling time) and Ch. 7 (resonant peak, phase margin of the standard loop);
- Nise, *Control Systems Engineering*, Ch. 4 (step response) and Ch. 10 (phase
  margin vs damping ratio);
- Skogestad & Postlethwaite, *Multivariable Feedback Control* 2e (2005), §2.4
  (M-circle bound PM ≥ 2·asin(1/(2·Mt)); recalled, from memory).

Chapter references are from memory; the formulas themselves are closed forms that
the tests re-derive numerically (scipy root finding on the standard loop).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "Conversion",
    "SETTLING_CONSTANTS",
    "PM_RULES",
    "zeta_from_overshoot",
    "overshoot_from_zeta",
    "mr_from_zeta",
    "zeta_from_mr",
    "pm_from_zeta",
    "zeta_from_pm",
    "crossover_ratio",
    "pm_from_mr_mcircle",
    "mr_from_pm_mcircle",
    "sigma_from_settling",
    "settling_from_sigma",
    "crossover_from_sigma",
    "sigma_from_crossover",
    "targets_from_requirements",
]

#: Settling-time constant c in ts ≈ c/σ, σ = ζωn, per tolerance band. These are the
#: textbook constants (Ogata Ch. 5; Nise Ch. 4), not ln(1/band) = 3.91 / 3.00: the
#: envelope estimate is itself only good to about −50 %…+15 % (docs/references.md §1).
SETTLING_CONSTANTS: dict[float, float] = {0.02: 4.0, 0.05: 3.0}

#: Rules for turning a damping ratio into a phase-margin target.
PM_RULES: tuple[str, ...] = ("exact", "m-circle")

_SQRT_HALF = 1.0 / math.sqrt(2.0)


def _out(x: np.ndarray) -> float | np.ndarray:
    """A 0-d result as a Python float, anything else as an array."""
    return float(x) if np.ndim(x) == 0 else x


# -- overshoot ↔ ζ ---------------------------------------------------------------------
def zeta_from_overshoot(overshoot_pct: ArrayLike) -> float | np.ndarray:
    """Damping ratio of the standard second-order system with this step overshoot.

    ζ = −ln Mp / √(π² + ln² Mp), Mp = overshoot_pct/100 (Ogata 5e Ch. 5; Nise Ch. 4;
    Franklin, Powell & Emami-Naeini Ch. 3). Exact inverse of
    :func:`overshoot_from_zeta` on 0 < Mp < 1. Zero overshoot returns ζ = 1, the
    smallest damping ratio without overshoot. Outside [0, 100) the result is NaN.
    """
    pct = np.asarray(overshoot_pct, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_mp = np.log(pct / 100.0)
        z = -ln_mp / np.sqrt(np.pi**2 + ln_mp**2)
    z = np.where(pct == 0.0, 1.0, z)
    z = np.where((pct < 0.0) | (pct >= 100.0) | ~np.isfinite(pct), np.nan, z)
    return _out(z)


def overshoot_from_zeta(zeta: ArrayLike) -> float | np.ndarray:
    """Step overshoot in percent: 100·exp(−ζπ/√(1−ζ²)) for 0 ≤ ζ < 1, else 0.

    Ogata 5e Ch. 5; Nise Ch. 4. Negative ζ gives NaN.
    """
    z = np.asarray(zeta, dtype=float)
    under = (z >= 0.0) & (z < 1.0)
    zc = np.where(under, z, 0.5)
    os_pct = 100.0 * np.exp(-zc * np.pi / np.sqrt(1.0 - zc**2))
    os_pct = np.where(under, os_pct, 0.0)
    os_pct = np.where((z < 0.0) | np.isnan(z), np.nan, os_pct)
    return _out(os_pct)


# -- ζ ↔ resonant peak Mr -------------------------------------------------------------
def mr_from_zeta(zeta: ArrayLike) -> float | np.ndarray:
    """Resonant peak of T(s) = ωn²/(s² + 2ζωn·s + ωn²), absolute (not dB).

    Mr = 1/(2ζ√(1−ζ²)) for 0 < ζ ≤ 1/√2 (at ωr = ωn√(1−2ζ²)), else 1 (the peak is
    at ω = 0). Ogata 5e Ch. 7; Nise Ch. 10. ζ ≤ 0 gives NaN (no finite peak).
    """
    z = np.asarray(zeta, dtype=float)
    low = (z > 0.0) & (z <= _SQRT_HALF)
    zc = np.where(low, z, 0.5)
    mr = np.where(low, 1.0 / (2.0 * zc * np.sqrt(1.0 - zc**2)), 1.0)
    mr = np.where((z <= 0.0) | np.isnan(z), np.nan, mr)
    return _out(mr)


def zeta_from_mr(mr: ArrayLike) -> float | np.ndarray:
    """Inverse of :func:`mr_from_zeta` on the branch 0 < ζ ≤ 1/√2.

    From 4ζ²(1−ζ²) = 1/Mr²: ζ² = (1 − √(1 − 1/Mr²))/2 (the smaller root; the other
    root exceeds 1/√2 where the formula for Mr does not hold). Mr = 1 returns 1/√2,
    the smallest ζ without a resonant peak. Mr < 1 gives NaN.
    """
    m = np.asarray(mr, dtype=float)
    ok = m >= 1.0
    mc = np.where(ok, m, 1.0)
    z = np.sqrt((1.0 - np.sqrt(1.0 - 1.0 / mc**2)) / 2.0)
    return _out(np.where(ok, z, np.nan))


# -- ζ ↔ phase margin, exact for the standard loop ----------------------------------------
def crossover_ratio(zeta: ArrayLike) -> float | np.ndarray:
    """ωc/ωn = √(√(1+4ζ⁴) − 2ζ²) for the standard loop ωn²/(s(s+2ζωn)).

    From |L(jωc)| = 1: (ωc/ωn)⁴ + 4ζ²(ωc/ωn)² − 1 = 0 (Ogata 5e Ch. 7; Nise Ch. 10).
    Written as 1/√(√(1+4ζ⁴) + 2ζ²), which is the same number without cancellation
    at large ζ.
    """
    z = np.asarray(zeta, dtype=float)
    z2 = z * z
    r = 1.0 / np.sqrt(np.sqrt(1.0 + 4.0 * z2 * z2) + 2.0 * z2)
    return _out(np.where(z >= 0.0, r, np.nan))


def pm_from_zeta(zeta: ArrayLike) -> float | np.ndarray:
    """Phase margin (deg) of the standard loop ωn²/(s(s+2ζωn)), exact.

    PM = atan(2ζ / √(√(1+4ζ⁴) − 2ζ²)) = atan(2ζ/(ωc/ωn)) (Nise Ch. 10; Ogata 5e
    Ch. 7). Independent of ωn. Increases from 0 (ζ = 0) towards 90° (ζ → ∞).
    """
    z = np.asarray(zeta, dtype=float)
    pm = np.degrees(np.arctan2(2.0 * z, crossover_ratio(np.abs(z))))
    return _out(np.where(z >= 0.0, pm, np.nan))


def zeta_from_pm(pm_deg: ArrayLike) -> float | np.ndarray:
    """Inverse of :func:`pm_from_zeta` (exact, standard loop), for 0 < PM < 90°.

    Closed form: with t = tan²(PM)/4, ζ² = t/√(1 + 4t). (Squaring tan PM = 2ζ/r with
    r² = √(1+4ζ⁴) − 2ζ² gives t = ζ²(√(1+4ζ⁴) + 2ζ²), hence (t − 2ζ⁴)² = ζ⁴(1 + 4ζ⁴),
    i.e. t² = ζ⁴(1 + 4t).) The tests check it against scipy root finding on
    :func:`pm_from_zeta`. PM ≥ 90° or ≤ 0° gives NaN (0° gives ζ = 0).
    """
    pm = np.asarray(pm_deg, dtype=float)
    ok = (pm >= 0.0) & (pm < 90.0)
    t = np.tan(np.radians(np.where(ok, pm, 45.0))) ** 2 / 4.0
    z = np.sqrt(t / np.sqrt(1.0 + 4.0 * t))
    return _out(np.where(ok, z, np.nan))


# -- M-circle rule -----------------------------------------------------------------------
def pm_from_mr_mcircle(mr: ArrayLike) -> float | np.ndarray:
    """Phase margin (deg) guaranteed by a closed-loop peak: PM = 2·asin(1/(2·Mr)).

    Skogestad & Postlethwaite, *Multivariable Feedback Control* 2e (2005), §2.4
    (PM ≥ 2·arcsin(1/(2·Mt)); recalled, from memory). A lower bound: on the standard
    loop it is tight only at small ζ (47.9° against the exact 48.1° at ζ = 0.456).
    Defined for Mr ≥ 1/2; below that NaN.
    """
    m = np.asarray(mr, dtype=float)
    ok = m >= 0.5
    pm = np.degrees(2.0 * np.arcsin(1.0 / (2.0 * np.where(ok, m, 1.0))))
    return _out(np.where(ok, pm, np.nan))


def mr_from_pm_mcircle(pm_deg: ArrayLike) -> float | np.ndarray:
    """Inverse of :func:`pm_from_mr_mcircle`: Mr = 1/(2·sin(PM/2)), 0 < PM ≤ 180°.

    Skogestad & Postlethwaite 2e (2005) §2.4 (from memory). PM = 60° gives Mr = 1.
    """
    pm = np.asarray(pm_deg, dtype=float)
    ok = (pm > 0.0) & (pm <= 180.0)
    m = 1.0 / (2.0 * np.sin(np.radians(np.where(ok, pm, 60.0)) / 2.0))
    return _out(np.where(ok, m, np.nan))


# -- settling time ↔ σ ↔ crossover -------------------------------------------------------
def _settling_constant(band: float) -> float:
    try:
        return SETTLING_CONSTANTS[float(band)]
    except KeyError:
        raise ValueError(
            f"settling band must be one of {sorted(SETTLING_CONSTANTS)}, got {band!r}"
        ) from None


def sigma_from_settling(settling_time_s: ArrayLike, band: float = 0.02) -> float | np.ndarray:
    """Real part magnitude σ = ζωn (1/s) of the dominant poles for a settling time.

    Envelope estimate ts ≈ c/σ with the textbook constants c = 4 (2 % band) and
    c = 3 (5 % band) (Ogata 5e Ch. 5; Nise Ch. 4), not ln(1/0.02) = 3.91. An
    estimate: the exact settling time of the standard system differs by −50 % to
    +15 % depending on ζ (docs/references.md §1).
    """
    c = _settling_constant(band)
    ts = np.asarray(settling_time_s, dtype=float)
    with np.errstate(divide="ignore"):
        return _out(np.where(ts > 0.0, c / np.where(ts > 0.0, ts, 1.0), np.nan))


def settling_from_sigma(sigma_per_s: ArrayLike, band: float = 0.02) -> float | np.ndarray:
    """Inverse of :func:`sigma_from_settling`: ts ≈ c/σ (c = 4 or 3; Ogata Ch. 5)."""
    c = _settling_constant(band)
    sig = np.asarray(sigma_per_s, dtype=float)
    return _out(np.where(sig > 0.0, c / np.where(sig > 0.0, sig, 1.0), np.nan))


def crossover_from_sigma(sigma_per_s: ArrayLike, zeta: ArrayLike) -> float | np.ndarray:
    """Crossover of the standard loop with dominant real part −σ and damping ζ.

    ωn = σ/ζ, ωc = ωn·√(√(1+4ζ⁴) − 2ζ²) (see :func:`crossover_ratio`).
    """
    sig = np.asarray(sigma_per_s, dtype=float)
    z = np.asarray(zeta, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        wn = np.where(z > 0.0, sig / np.where(z > 0.0, z, 1.0), np.nan)
    return _out(wn * np.asarray(crossover_ratio(z)))


def sigma_from_crossover(crossover_rad_s: ArrayLike, zeta: ArrayLike) -> float | np.ndarray:
    """Inverse of :func:`crossover_from_sigma`: σ = ζ·ωc/(ωc/ωn)."""
    wc = np.asarray(crossover_rad_s, dtype=float)
    z = np.asarray(zeta, dtype=float)
    return _out(z * wc / np.asarray(crossover_ratio(z)))


# -- the whole conversion -----------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class Conversion:
    """Loop targets derived from time-domain requirements, with the reasoning.

    ``crossover_rad_s`` and ``sigma_per_s`` are None when no settling time was
    given (the crossover is then left to other targets or free).
    """

    crossover_rad_s: float | None
    phase_margin_deg: float
    zeta: float
    mr: float
    sigma_per_s: float | None
    explanation: tuple[str, ...]


def _g(x: float, digits: int = 3) -> str:
    return f"{x:.{digits}g}"


def targets_from_requirements(
    overshoot_pct: float,
    settling_time_s: float | None,
    band: float = 0.02,
    rule: str = "exact",
) -> Conversion:
    """Crossover and phase-margin targets from overshoot and settling time.

    1. overshoot → ζ, exact for the standard second-order system
       (:func:`zeta_from_overshoot`; Ogata 5e Ch. 5).
    2. ζ → phase margin, either ``rule="exact"`` for the standard loop
       ωn²/(s(s+2ζωn)) (:func:`pm_from_zeta`; Nise Ch. 10), or
       ``rule="m-circle"``: ζ → Mr (:func:`mr_from_zeta`; Ogata Ch. 7) and
       PM = 2·asin(1/(2·Mr)) (:func:`pm_from_mr_mcircle`; Skogestad &
       Postlethwaite 2e §2.4, from memory), a slightly smaller (safer) margin.
    3. settling time → σ = ζωn with ts ≈ 4/σ (2 % band) or 3/σ (5 % band)
       (:func:`sigma_from_settling`; Ogata Ch. 5, Nise Ch. 4), then
       ωn = σ/ζ and ωc = ωn·√(√(1+4ζ⁴) − 2ζ²) (:func:`crossover_from_sigma`).

    Raises ``ValueError`` for inputs outside the domain (overshoot not in [0, 100),
    settling time not positive and finite, band not 0.02/0.05, unknown rule).
    """
    os_pct = float(overshoot_pct)
    if not (math.isfinite(os_pct) and 0.0 <= os_pct < 100.0):
        raise ValueError(f"overshoot must be in [0, 100) %, got {overshoot_pct!r}")
    if rule not in PM_RULES:
        raise ValueError(f"rule must be one of {', '.join(PM_RULES)}, got {rule!r}")
    c = _settling_constant(band)
    if settling_time_s is not None:
        ts = float(settling_time_s)
        if not (math.isfinite(ts) and ts > 0.0):
            raise ValueError(f"settling time must be > 0 s, got {settling_time_s!r}")

    zeta = float(zeta_from_overshoot(os_pct))
    mr = float(mr_from_zeta(zeta))
    lines: list[str] = []
    if os_pct == 0.0:
        lines.append("overshoot 0 % → ζ = 1 (smallest damping without overshoot, 2nd-order)")
    else:
        lines.append(f"overshoot {_g(os_pct)} % → ζ = {zeta:.3f} (exact 2nd-order step response)")
    if rule == "exact":
        pm = float(pm_from_zeta(zeta))
        lines.append(f"ζ → PM {pm:.1f}° (exact standard 2nd-order loop ωn²/(s(s+2ζωn)))")
    else:
        pm = float(pm_from_mr_mcircle(mr))
        lines.append(f"ζ → Mr {mr:.3g} (resonant peak of the 2nd-order closed loop)")
        lines.append(f"Mr {mr:.3g} → PM {pm:.1f}° (M-circle rule PM = 2·asin(1/(2·Mr)))")

    wc: float | None = None
    sigma: float | None = None
    if settling_time_s is None:
        lines.append("no settling time given → crossover not derived")
    else:
        sigma = float(sigma_from_settling(float(settling_time_s), band))
        wc = float(crossover_from_sigma(sigma, zeta))
        ratio = float(crossover_ratio(zeta))
        lines.append(
            f"settling {_g(float(settling_time_s))} s ({_g(100 * float(band))} % band) "
            f"→ σ = ζωn = {_g(sigma)} s⁻¹ (ts ≈ {_g(c, 2)}/σ, textbook envelope estimate)"
        )
        lines.append(
            f"σ, ζ → ωn = {_g(sigma / zeta)} rad/s → crossover {_g(wc)} rad/s "
            f"(ωc/ωn = {ratio:.3f}, standard 2nd-order loop)"
        )
    return Conversion(
        crossover_rad_s=wc,
        phase_margin_deg=pm,
        zeta=zeta,
        mr=mr,
        sigma_per_s=sigma,
        explanation=tuple(lines),
    )
