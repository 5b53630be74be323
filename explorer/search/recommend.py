"""The one design recommended to a practitioner, and what each alternative buys.

The rule (docs/explore.md, "The answer"), applied to the designs that meet every
target, requirement and limit:

1. **Practical limits first.** Designs whose fastest compensator pole lies within
   ``search.max_pole_ratio`` × ωc (common practice; explorer.model.study) are preferred; only
   when none does is the answer taken from the rest, and the reason says so.
2. **Load rejection.** A design that removes a constant load at the plant input (a
   finite ``iae_load``) is preferred over one that leaves an offset, whatever its order.
3. **Lowest order.** The job is the lowest-order design that meets the spec.
4. **Balance within that order**, by the cost
   ``W_MS·ln Ms + W_NOISE·(ln noise_gain + ln noise_gain_ratio)/2 + W_IAE·ln iae_load
   + W_SETTLE·ln settling_time_s − W_SPEED·ln ωc`` (the last term only when the
   crossover is searched: faster is better). Only ratios between designs matter, so
   the choice is unchanged by scaling time, plant gain or the sign of the plant gain.
   The weights say what one factor is worth: 1 % of Ms weighs as much as 15 % of
   noise gain, of load IAE or of settling time (our choice, written down here: on
   the kiln study a design 13 % lower in Ms for 4.8× the noise gain and 38 % less
   load IAE is the one we would hand over; at 10 % it was not).

Near-duplicates (same structure, figures within a fraction of a percent) are listed
once (:func:`drop_near_duplicates`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar

from explorer.core.frozen import JsonView

_R = TypeVar("_R", bound=Mapping[str, Any])

__all__ = ["Answer", "Alternative", "W_MS", "W_NOISE", "W_IAE", "W_SETTLE", "W_SPEED",
           "cost", "recommend",
           "drop_near_duplicates", "practical_misses", "sampled_phrase"]

W_MS = 15.0
W_NOISE = 1.0
W_IAE = 1.0
W_SETTLE = 1.0
W_SPEED = 1.0
#: ln-penalty for a figure that is missing (null): as if 10× the worst present.
_MISSING = math.log(10.0)


@dataclass(frozen=True, kw_only=True, eq=False)
class Alternative(JsonView):
    """A design best at one criterion, beside the answer (docs/interface.md, extension)."""

    criterion: str
    design: str
    trade_off: str

    def _json_items(self) -> dict[str, Any]:
        return {"criterion": self.criterion, "design": self.design,
                "trade_off": self.trade_off}


@dataclass(frozen=True, kw_only=True, eq=False)
class Answer(JsonView):
    """The exploration's ``answer`` (docs/interface.md), typed and frozen: the design
    (None when nothing meets), its order, why, the alternatives best at something, and
    the worst member of a family."""

    design: str | None
    order: int | None
    why: str
    alternatives: tuple[Alternative, ...] | None = None
    worst_member: Mapping[str, Any] | None = None

    def _json_items(self) -> dict[str, Any]:
        items: dict[str, Any] = {"design": self.design, "order": self.order, "why": self.why}
        if self.alternatives is not None:
            items["alternatives"] = self.alternatives
        if self.worst_member is not None:
            items["worst_member"] = self.worst_member
        return items


def practical_misses(d: Mapping[str, Any], max_pole_ratio: float) -> list[str]:
    """Why a design breaks the practical limits (empty when it keeps them)."""
    r = d["metrics"].get("pole_ratio")
    if r is not None and r > max_pole_ratio * (1.0 + 1e-9):
        return [f"fastest compensator pole {r:.3g}× the crossover > {max_pole_ratio:g}× "
                "(search.max_pole_ratio)"]
    return []


def _fig(d: Mapping[str, Any]) -> Mapping[str, Any]:
    """The figures a design is judged by: its metrics, with the sampled loop's in place
    when the controller is sampled (DESIGN ``sampled_metrics``, ``[search]
    sample_time``) and the worst over the plant family where it has one (``worst``)."""
    m = d["metrics"]
    s = d.get("sampled_metrics")
    if s:
        m = {**m, **{k: v for k, v in s.items() if k in m}}
    w = d.get("worst")
    return m if not w else {**m, **w}


def sampled_phrase(d: Mapping[str, Any]) -> str | None:
    """"sampled at T = 0.1 s (computation delay 0.02 s): PM 58.6°, GM 11.2 dB, Ms 1.56"
    for a design judged on its sampled loop; None otherwise."""
    s = d.get("sampled_metrics")
    if not s or d.get("sample_time_s") is None:
        return None
    tc = d.get("compute_delay_s") or 0.0
    head = f"sampled at T = {d['sample_time_s']:g} s" + (
        f" (computation delay {tc:g} s)" if tc else "")
    parts = []
    if s.get("phase_margin_deg") is not None:
        parts.append(f"PM {s['phase_margin_deg']:.1f}°")
    gm = s.get("gain_margin_db")
    parts.append("GM none" if gm is None else f"GM {gm:.1f} dB")
    if s.get("sensitivity_peak") is not None:
        parts.append(f"Ms {s['sensitivity_peak']:.3g}")
    if not s.get("closed_loop_stable"):
        parts.append("closed loop unstable")
    return head + ": " + ", ".join(parts)


def _ln(v: Any) -> float | None:
    return math.log(v) if isinstance(v, (int, float)) and v > 0 and math.isfinite(v) else None


def cost(designs: Sequence[Mapping[str, Any]], searched_wc: bool) -> list[float]:
    """The balance cost of each design (lower is better), comparable within the list:
    a missing figure costs ln 10 more than the list's worst."""
    terms: list[tuple[str, float]] = [
        ("sensitivity_peak", W_MS), ("noise_gain", W_NOISE / 2), ("noise_gain_ratio", W_NOISE / 2),
        ("iae_load", W_IAE), ("settling_time_s", W_SETTLE),
    ]
    if searched_wc:
        terms.append(("crossover_rad_s", -W_SPEED))
    out = [0.0] * len(designs)
    for key, w in terms:
        vals = [_ln(_fig(d).get(key)) for d in designs]
        present = [v for v in vals if v is not None]
        worst = (max(present) if w > 0 else min(present)) if present else 0.0
        for i, v in enumerate(vals):
            out[i] += w * (v if v is not None else worst + math.copysign(_MISSING, w))
    return out


def drop_near_duplicates(designs: Sequence[_R]) -> list[_R]:
    """The optimized designs without near-copies of an earlier one in the list (same
    order and verdict; Ms, crossover within 0.2 %; noise gain, load IAE, settling
    within 3 % — two structures can converge on one design, e.g. a PID·filter whose
    real zeros meet the complex-zero one's); other origins are kept as they are (they
    are named references)."""
    tol = {"sensitivity_peak": 2e-3, "crossover_rad_s": 2e-3, "noise_gain": 3e-2,
           "iae_load": 3e-2, "settling_time_s": 3e-2}
    kept: list[_R] = []
    for d in designs:
        if d["origin"] == "optimized" and any(
            k["origin"] == "optimized" and k["order"] == d["order"]
            and k["meets_targets"] == d["meets_targets"]
            and all(_close(k["metrics"].get(m), d["metrics"].get(m), t) for m, t in tol.items())
            for k in kept
        ):
            continue
        kept.append(d)
    return kept


def _close(a: Any, b: Any, rel: float) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= rel * max(abs(a), abs(b), 1e-300)


_CRITERIA = (  # (phrase, key, +1 lower is better / −1 higher is better)
    ("lowest Ms", "sensitivity_peak", +1),
    ("lowest noise gain", "noise_gain", +1),
    ("lowest load IAE", "iae_load", +1),
    ("fastest settling", "settling_time_s", +1),
)
#: An alternative is named only when it is at least this much better (relative) at its
#: criterion than the answer: less than half a percent is within the figures' own
#: rounding between a design and its mirror and buys nothing (our choice).
MIN_BETTER = 0.005


def _sig3(x: float) -> float:
    """``x`` to 3 significant digits: near-ties between candidates (a design and its
    mirror differ in the last bits) are then broken by order and name, not rounding."""
    return float(f"{x:.3g}")


_NOUN = {"sensitivity_peak": "Ms", "noise_gain": "noise gain", "iae_load": "load IAE",
         "settling_time_s": "settling time", "crossover_rad_s": "crossover",
         "order": "order"}


def _change(key: str, a: float, b: float, sense: int) -> str:
    """How b compares with a on ``key``, as a buyer reads it ("0.6 % less Ms",
    "3.1× the noise gain")."""
    noun = _NOUN[key]
    if key == "order":
        return f"order {int(b)}"
    r = b / a if a else math.inf
    if r >= 1.5:
        return f"{r:.2g}× the {noun}"
    if r <= 1 / 1.5:
        return f"{1 / r:.2g}× {'less' if sense > 0 else 'lower'} {noun}" if r > 0 else f"no {noun}"
    pct = abs(r - 1) * 100
    word = ("less" if r < 1 else "more") if key != "crossover_rad_s" else (
        "faster" if r > 1 else "slower")
    return f"{pct:.2g} % {word} {noun}"


def _tradeoff(ans: Mapping[str, Any], alt: Mapping[str, Any], key: str, sense: int,
              searched_wc: bool) -> str:
    gain = _change(key, _fig(ans)[key], _fig(alt)[key], sense)
    costs = []
    keys = [k for _, k, _ in _CRITERIA if k != key]
    if searched_wc:
        keys.append("crossover_rad_s")
    for k in keys:
        a, b = _fig(ans).get(k), _fig(alt).get(k)
        if a is None or b is None or a <= 0 or b <= 0:
            continue
        s = -1 if k == "crossover_rad_s" else +1
        worse = math.log(b / a) * s
        if worse > math.log(1.05):
            costs.append((worse, _change(k, a, b, s)))
    if alt["order"] > ans["order"]:
        costs.insert(0, (math.inf, f"order {alt['order']}"))
    if alt["metrics"].get("iae_load") is None and ans["metrics"].get("iae_load") is not None:
        costs.insert(0, (math.inf, "an offset under a constant load"))
    costs.sort(key=lambda c: -c[0])
    tail = " for " + " and ".join(c for _, c in costs[:2]) if costs else ""
    return f"{gain}{tail}"


def recommend(
    designs: Sequence[Mapping[str, Any]], *, max_pole_ratio: float, searched_wc: bool
) -> tuple[Answer, list[str]]:
    """The interface ``answer`` object and the lines that explain it (the first is the
    answer line; then one per alternative that is best at something)."""
    ok = [d for d in designs if d.get("meets_targets")]
    if not ok:
        return Answer(design=None, order=None, why="no design meets the targets, "
                      "requirements and limits"), []
    practical = [d for d in ok if not practical_misses(d, max_pole_ratio)]
    pool = practical or ok
    rejecting = [d for d in pool if _fig(d).get("iae_load") is not None]
    pool2 = rejecting or pool
    low = min(d["order"] for d in pool2)
    tier = [d for d in pool2 if d["order"] == low]
    costs = cost(tier, searched_wc)
    best = tier[min(range(len(tier)), key=lambda i: (costs[i], tier[i]["name"]))]
    m = _fig(best)
    reasons = [f"order {low} is the lowest that meets every target, requirement and limit"
               + (" and rejects a constant load at the plant input" if rejecting else "")]
    low_any = min(d["order"] for d in pool)
    if rejecting and low_any < low:
        reasons.append(f"order {low_any} designs meet them too but leave an offset under a "
                       "constant load at the plant input")
    if not practical:
        reasons.append("no design keeps the practical limit "
                       f"(poles within {max_pole_ratio:g}× the crossover): "
                       + "; ".join(practical_misses(best, max_pole_ratio)))
    if len(tier) > 1:
        reasons.append(f"best balance of Ms, noise gain, load IAE and settling among "
                       f"{len(tier)} designs of that order")
    figs = [f"Ms {m['sensitivity_peak']:.3g}"]
    if m.get("noise_gain") is not None:
        ratio = m.get("noise_gain_ratio")
        figs.append(f"noise gain {m['noise_gain']:.3g}"
                    + (f" ({ratio:.2g}× its gain at crossover)"
                       if ratio is not None and ratio >= 1.05 else ""))
    if m.get("iae_load") is not None:
        figs.append(f"load IAE {m['iae_load']:.3g}")
    if m.get("settling_time_s") is not None:
        figs.append(f"settling {m['settling_time_s']:.3g} s")
    wm = best.get("worst_member")
    if best.get("worst"):
        figs[0] = "worst over the plant family " + figs[0]
        if wm:
            where = (wm.get("where") if wm.get("gain_factor") is None else
                     f"gain ×{wm['gain_factor']:.3g}, delay {wm['delay_s']:.3g} s, "
                     f"time scale ×{wm['time_scale']:.3g}")
            figs.append(f"worst Ms at {where}")
    sampled = sampled_phrase(best)
    if sampled:  # it names the sampled Ms
        figs[0] = sampled
    why = "; ".join(reasons) + ": " + ", ".join(figs)
    whose = {"given": " (the study's own design)", "hand": " (a hand design)",
             "phase-balanced": " (the phase-balanced hand design)"}.get(best["origin"], "")
    lines = [f"answer: order {low} suffices — {best['name']}{whose} is recommended",
             f"  why: {why}"]
    seen = {best["name"]}
    alternatives: list[Alternative] = []
    for phrase, key, sense in _CRITERIA:
        have = [d for d in ok if _fig(d).get(key) is not None]
        if not have or _fig(best).get(key) is None:
            continue
        alt = min(have, key=lambda d: (_sig3(sense * _fig(d)[key]), d["order"], d["name"]))
        b_val, a_val = _fig(best)[key], _fig(alt)[key]
        if alt["name"] in seen or sense * (b_val - a_val) < MIN_BETTER * abs(b_val):
            continue
        seen.add(alt["name"])
        trade = _tradeoff(best, alt, key, sense, searched_wc)
        lines.append(f"  {phrase}: {alt['name']} — {trade}")
        alternatives.append(Alternative(criterion=phrase, design=alt["name"], trade_off=trade))
    answer = Answer(design=best["name"], order=low, why=why, alternatives=tuple(alternatives),
                    worst_member=wm or None)
    return answer, lines
