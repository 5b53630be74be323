"""The members of an uncertain plant family (docs/study-file.md, ``[variation]``): the
nominal plant scaled in gain, delay and time, the corners of the box and the listed
members."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from explorer.core.loop import Rational
from explorer.model.study import Variation

__all__ = [
    "Member",
    "scaled_plant",
    "factor_ranges",
    "has_box",
    "sampled_members",
    "search_time_members",
    "time_members",
]


@dataclass(frozen=True, kw_only=True)
class Member:
    """One operating point: factors on the nominal plant (None for a listed member)
    and the plant itself."""

    gain_factor: float | None
    delay_s: float
    time_scale: float | None
    plant: Rational
    label: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "gain_factor": self.gain_factor,
            "delay_s": self.delay_s,
            "time_scale": self.time_scale,
            "label": self.label,
        }


def scaled_plant(
    plant: Rational, gain_factor: float, delay_s: float, time_scale: float
) -> Rational:
    """g·P(σ·s)·e^(−sτ): roots divided by σ, gain g·k·σ^(nz − np) (the static gain,
    or an integrating plant's velocity constant per unit of time-scaled time,
    follows P(σ·s))."""
    sig = float(time_scale)
    nz, npl = len(plant.zeros), len(plant.poles)
    return Rational(
        gain=plant.gain * gain_factor * sig ** (nz - npl),
        zeros=tuple(z / sig for z in plant.zeros),
        poles=tuple(p / sig for p in plant.poles),
        delay_s=delay_s,
    )


def factor_ranges(plant: Rational, v: Variation) -> tuple[tuple[float, float], ...]:
    """The box's (gain factor, delay s, time scale) ranges; a factor not varied is its
    nominal value at both ends."""
    g = v.gain or (1.0, 1.0)
    d = v.delay_s or (plant.delay_s, plant.delay_s)
    s = v.time_scale or (1.0, 1.0)
    return g, d, s


def has_box(plant: Rational, v: Variation) -> bool:
    g, d, s = factor_ranges(plant, v)
    return g[0] < g[1] or d[0] < d[1] or s[0] < s[1]


def sampled_members(plant: Rational, v: Variation) -> list[Member]:
    """Nominal first, then the corners of the box (distinct ones), then the listed
    members."""
    g, d, s = factor_ranges(plant, v)
    out = [
        Member(gain_factor=1.0, delay_s=plant.delay_s, time_scale=1.0, plant=plant, label="nominal")
    ]
    seen = {(1.0, plant.delay_s, 1.0)}
    for gi in sorted(set(g)):
        for di in sorted(set(d)):
            for si in sorted(set(s)):
                key = (gi, di, si)
                if key in seen:
                    continue
                seen.add(key)
                parts = [
                    f"gain ×{gi:g}" if g[0] < g[1] else "",
                    f"delay {di:g} s" if d[0] < d[1] else "",
                    f"time scale ×{si:g}" if s[0] < s[1] else "",
                ]
                out.append(
                    Member(
                        gain_factor=gi,
                        delay_s=di,
                        time_scale=si,
                        plant=scaled_plant(plant, gi, di, si),
                        label="corner " + ", ".join(x for x in parts if x),
                    )
                )
    for i, m in enumerate(v.members):
        out.append(
            Member(
                gain_factor=None, delay_s=m.delay_s, time_scale=None, plant=m, label=f"member[{i}]"
            )
        )
    return out


def search_time_members(plant: Rational, v: Variation) -> list[Member]:
    """The smaller set the search takes step responses over (the final re-check of
    every reported design refines the whole box,
    :func:`explorer.evaluation.family.worst_of_design`): nominal, the corners at the
    largest delay with the extreme gains and time scales, and the listed members."""
    g, d, s = factor_ranges(plant, v)
    return [
        m
        for m in sampled_members(plant, v)
        if m.gain_factor is None or m.label == "nominal" or m.delay_s == d[1]
    ]


def time_members(plant: Rational, v: Variation) -> list[Member]:
    """Nominal, every corner, every listed member (the report's step responses; the
    reported worst step figures refine the whole box, explorer.evaluation.family_time)."""
    return sampled_members(plant, v)


# --------------------------------------------------------------------------------------
# geometry
# --------------------------------------------------------------------------------------
