"""Far roots folded into the delay, for simulating a delayed loop on a bounded grid.

The delayed-loop simulation (``explorer.time_domain.timeresp``) samples the plant-input signal
over one delay τ on N = τ/h points, with h ≈ 0.2/ω_fast. A root far above every
frequency that shapes the loop — a hand design's balancing pole placed at 10⁴ ωc,
a plant's fast actuator lag — would need N in the tens of thousands, and the
delay-line map grows as N². Such a root is instead replaced by its first-order
delay equivalent:

    1/(1 − s/p) = e^{s/p} + O((s/p)²),      (1 − s/z) = e^{−s/z} + O((s/z)²),

so a far factor keeps its DC gain and its phase slope at low frequency and moves
into the plant delay: τ' = τ + Re(Σ 1/z − Σ 1/p) over the far zeros z and poles p
(a pole at −a adds 1/a; a pole pair ωn, ζ adds 2ζ/ωn; a LHP zero at −a subtracts
1/a). This is the delay approximation of a small lag that underlies Skogestad's
half rule (S. Skogestad, "Simple analytic rules for model reduction and PID
controller tuning", J. Process Control 13 (2003) 291–309, §2; from memory). At a
loop frequency ω the neglected terms are O((ω/|p|)²) in gain and O((ω/|p|)³) in
phase; the fast transient the root itself would add is O(ω_loop/|p|) of the signal
and decays within a few 1/|p| (docs/time-response.md, "Far roots").

Only stable poles (lightly damped pairs excepted) are folded, a realisation is
kept proper (far poles are folded farthest first while poles ≥ zeros), and the
compensator's share of the delay goes to the plant: the loop, y_ref and the
load-to-output magnitude are unchanged to that order; u_ref and y_load come out
delayed by the compensator's share (≤ τ/100 by the threshold used), which leaves
every step metric unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from explorer.core.loop import Rational

__all__ = ["FOLD_MIN_DAMPING", "ModelGroup", "fold_far_roots"]

#: Complex pole pairs damped less than this are never folded (a far, lightly damped
#: mode rings; its delay equivalent would hide that). Same threshold as the
#: structures' "lightly damped" (common practice).
FOLD_MIN_DAMPING = 0.2


@dataclass(frozen=True)
class ModelGroup:
    """Rows of a compensator batch that share one simulation model.

    ``rows`` index the original batch; ``plant`` carries the folded delay (the plant's
    far roots and the compensator's); ``gain``/``zeros``/``poles`` are the rows'
    compensators with their far roots removed; ``folded`` says whether any root
    of this group (plant or compensator) was folded.
    """

    rows: np.ndarray
    plant: Rational
    gain: np.ndarray
    zeros: np.ndarray
    poles: np.ndarray
    folded: bool


def _far_poles(p: np.ndarray, omega_far: float) -> np.ndarray:
    mag = np.abs(p)
    with np.errstate(invalid="ignore", divide="ignore"):
        damping = np.where(mag > 0, -p.real / np.where(mag > 0, mag, 1.0), 0.0)
    ok = np.isfinite(mag) & (mag > omega_far) & (p.real < 0)
    return ok & ((p.imag == 0) | (damping >= FOLD_MIN_DAMPING))


def _far_zeros(z: np.ndarray, omega_far: float) -> np.ndarray:
    mag = np.abs(z)
    return np.isfinite(mag) & (mag > omega_far)


def _fold_one(
    gain: float, zeros: np.ndarray, poles: np.ndarray, omega_far: float
) -> tuple[float, np.ndarray, np.ndarray, float]:
    """Fold the far roots of one proper system: (gain, zeros, poles, added delay s)."""
    fz = _far_zeros(zeros, omega_far)
    fp = _far_poles(poles, omega_far)
    n_zeros_kept = int(np.sum(~fz))
    n_poles = poles.size
    # far poles in units (a real pole, or a conjugate pair), farthest first, while
    # the kept realisation stays proper
    units: list[list[int]] = []
    taken: set[int] = set()
    for i in np.argsort(-np.abs(poles)):
        i = int(i)
        if not fp[i] or i in taken:
            continue
        unit = [i]
        if poles[i].imag != 0:
            j = int(np.argmin(np.abs(poles - np.conj(poles[i])) + np.where(fp, 0.0, np.inf)))
            unit.append(j)
        taken.update(unit)
        units.append(unit)
    fold_p = np.zeros(n_poles, dtype=bool)
    kept_poles = n_poles
    for unit in units:
        if kept_poles - len(unit) < n_zeros_kept:
            break
        fold_p[unit] = True
        kept_poles -= len(unit)
    zf, pf = zeros[fz], poles[fold_p]
    scale = np.prod(-zf) / np.prod(-pf)
    delay = float(np.sum(1.0 / zf).real - np.sum(1.0 / pf).real)
    return float(gain * scale.real), zeros[~fz], poles[~fold_p], delay


def fold_far_roots(
    plant: Rational,
    gain: np.ndarray,
    zeros: np.ndarray,
    poles: np.ndarray,
    omega_far_rad_s: float,
) -> list[ModelGroup]:
    """Split a compensator batch into groups of one simulation model each (module doc).

    ``gain`` (B,), ``zeros`` (B, nz), ``poles`` (B, np); roots above
    ``omega_far_rad_s`` (rad/s) are folded into the plant delay. Rows without a far
    root stay together, as one batch; each row with one is a group of its own.
    """
    pg, pz, pp, p_delay = _fold_one(
        plant.gain,
        np.array(plant.zeros, dtype=complex),
        np.array(plant.poles, dtype=complex),
        omega_far_rad_s,
    )
    plant_folded = pz.size != len(plant.zeros) or pp.size != len(plant.poles)
    base = (
        Rational(gain=pg, zeros=tuple(pz), poles=tuple(pp), delay_s=plant.delay_s + p_delay)
        if plant_folded
        else plant
    )
    far_row = _far_zeros(zeros, omega_far_rad_s).any(axis=1) | _far_poles(
        poles, omega_far_rad_s
    ).any(axis=1)
    own: list[ModelGroup] = []
    unchanged = np.array(~far_row, dtype=bool)
    for i in np.nonzero(far_row)[0]:
        g1, z1, p1, d1 = _fold_one(float(gain[i]), zeros[i], poles[i], omega_far_rad_s)
        if (z1.size == zeros.shape[1] and p1.size == poles.shape[1]) or (
            base.delay_s + d1 < 0.5 * base.delay_s
        ):
            unchanged[i] = True  # nothing foldable (or the delay would shrink too much)
            continue
        plant_i = Rational(
            gain=base.gain, zeros=base.zeros, poles=base.poles, delay_s=base.delay_s + d1
        )
        own.append(
            ModelGroup(
                np.array([i]), plant_i, np.array([g1]), z1.reshape(1, -1), p1.reshape(1, -1), True
            )
        )
    near = np.nonzero(unchanged)[0]
    groups = []
    if near.size:
        groups.append(
            ModelGroup(near, base, gain[near], zeros[near], poles[near], plant_folded)
        )
    return groups + own
