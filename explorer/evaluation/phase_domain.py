"""The numerical domain's limit on ω·τ at a given compensator's gain crossovers.

The phase of the delay, −ωτ rad, is computed as the float product ω·τ: its rounding is
up to ωτ·2⁻⁵³ rad, and turning the phase into degrees adds as much again, so a
phase figure at frequency ω carries an absolute error of about ωτ·2⁻⁵² rad. The
crossover itself is refined to a relative error near machine precision, which moves
the phase there by the same order (ωτ·δω/ω). At ωτ = 1e12 rad that is 2e-4 rad (0.01°)
and a phase margin, or an Ms read near −1, is good only to that rounding.

The domain therefore bounds ωc·τ at every gain crossover of every given compensator
with the plant: at most PHASE_REACH_RAD = 1e8 rad, where the rounding is at most
1e8·2⁻⁵² = 2.2e-8 rad = 1.3e-6°. The targets never come near it: every target
crossover and 1/τ lie within the study's frequency span of 1e8 (docs/study-file.md),
so ωc·τ ≤ 1e8 rad for any crossover the search or the hand designs aim at. Only a given
compensator whose gain pushes the crossover far above the study's frequencies can pass
it (a plant gain of 2e23 behind 18 ms crosses over at 5e13 rad/s: ωτ = 9e11 rad).
No working design is near it (a working loop's ωc·τ is of order 1, common practice).

The crossovers are the metrics engine's own (explorer.frequency.metrics), on the delay-free loop
(the delay changes no magnitude), so the rule refuses exactly the designs whose phase
figures the engine would report beyond the limit.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence

import numpy as np

from explorer.core.errors import DesignError, StudyFileError
from explorer.core.loop import LoopBatch, Rational
from explorer.frequency.metrics import loop_metrics_batch
from explorer.model.study import Study, Variation, load_study

__all__ = ["PHASE_REACH_RAD", "highest_crossover_rad_s", "check_phase_reach", "family_plants",
           "check_study", "load_checked_study"]

#: Largest ω·τ (rad) at a given compensator's gain crossover (module docstring).
PHASE_REACH_RAD = 1e8
#: Absolute rounding of a phase at ω·τ (rad per rad of ω·τ): 2⁻⁵².
PHASE_ROUNDING = 2.0**-52


def highest_crossover_rad_s(plant: Rational, comp: Rational) -> float | None:
    """The highest gain crossover (rad/s) of C·P, delay left out; None when there is none."""
    loop = plant * comp
    free = Rational(gain=loop.gain, zeros=loop.zeros, poles=loop.poles)
    try:
        xs = loop_metrics_batch(LoopBatch.stack([free]))["crossovers_rad_s"]
    except DesignError:  # improper or ill-posed: the commands report it themselves
        return None
    xs = np.asarray(xs, dtype=float).ravel()
    xs = xs[np.isfinite(xs)]
    return float(xs.max()) if xs.size else None


def check_phase_reach(plant: Rational, comps: Sequence[Rational], keys: Sequence[str],
                      fmt=lambda x: f"{x:.6g}", on: str = "the plant's") -> None:
    """StudyFileError naming the first compensator whose highest crossover has ω·τ above
    PHASE_REACH_RAD behind the plant's delay (``on`` names the plant in the message)."""
    tau = plant.delay_s
    if not (tau > 0 and math.isfinite(tau)):
        return
    for comp, key in zip(comps, keys, strict=True):
        wc = highest_crossover_rad_s(plant, comp)
        if wc is None or wc * tau <= PHASE_REACH_RAD:
            continue
        err_deg = math.degrees(wc * tau * PHASE_ROUNDING)
        raise StudyFileError(
            key, f"crosses over at {fmt(wc)} rad/s behind {on} {fmt(tau)} s delay: "
                 f"ω·τ = {fmt(wc * tau)} rad, beyond the numerical domain's "
                 f"{fmt(PHASE_REACH_RAD)} rad (the delay's phase there is rounded by up to "
                 f"{fmt(err_deg)}°); lower its gain"
        )


def family_plants(plant: Rational, variation: Variation) -> list[tuple[Rational, str]]:
    """Plants of a family (explorer.model.study.Variation) the ω·τ rule is checked on: every
    listed member, and g·P(σs)·e^(−sτ) at the largest gain and delay with σ at both
    ends of its range (the highest crossover cannot fall as g grows; in σ it is checked
    at the ends only). Each with the words that name it in a refusal."""
    out: list[tuple[Rational, str]] = []
    if variation.gain or variation.delay_s or variation.time_scale:
        g = variation.gain[1] if variation.gain else 1.0
        tau = variation.delay_s[1] if variation.delay_s else plant.delay_s
        k = len(plant.zeros) - len(plant.poles)
        for sigma in sorted(set(variation.time_scale or (1.0,))):
            p = Rational(gain=plant.gain * g * sigma**k,
                         zeros=tuple(z / sigma for z in plant.zeros),
                         poles=tuple(q / sigma for q in plant.poles), delay_s=tau)
            out.append((p, f"the family's plant at gain × {g:.6g} and time scale {sigma:.6g} "
                           "(`variation`), its"))
    for j, m in enumerate(variation.members):
        out.append((m, f"`variation.member[{j}]`, its"))
    return out


def check_study(study: Study) -> Study:
    """``study`` when every given compensator keeps ω·τ within PHASE_REACH_RAD at its
    crossovers, on the plant and on the family's plants; else StudyFileError naming
    ``compensator[i]``. Reading the file (explorer.model.study) cannot ask this: the
    crossovers are the frequency engine's, a layer above the reader."""
    comps = [c.compensator for c in study.compensators]
    keys = [f"compensator[{i}]" for i in range(len(comps))]
    if not comps:
        return study
    check_phase_reach(study.plant, comps, keys)
    if study.variation is not None:
        for fam_plant, on in family_plants(study.plant, study.variation):
            check_phase_reach(fam_plant, comps, keys, on=on)
    return study


def load_checked_study(path: str | os.PathLike[str]) -> Study:
    """:func:`explorer.model.study.load_study` and then :func:`check_study`: what every
    command loads."""
    return check_study(load_study(path))
