"""Hand-style designs: the phase-balanced (cancel-and-balance) procedure and classical
lead, PI-plus-lead and lag baselines, each meeting a numeric crossover and phase
margin exactly — or refused with the step that failed and by how many degrees.

Every design here fixes the gain from |L(jωc)| = 1 and one or two root locations from
the phase condition ∠L(jωc) = −180° + PM, using the exact continuous phase of
:mod:`explorer.core.loop` (natural low-frequency branch, delay included as −ωτ). Each
finished design is then checked (:func:`loop_check`): every gain crossover is found
and the smallest phase margin must be the target, and the closed loop must be stable
by the Nyquist criterion. A design that fails the check is refused, never returned.

Sources (chapter references from memory, formulas re-derived in the tests):

- Ogata, *Modern Control Engineering* 5e (2010), §7-11 lead compensation
  (sin φm = (1 − α)/(1 + α), maximum phase at the geometric mean of zero and pole),
  §7-12 lag compensation (zero about a decade below crossover) and Examples 7-26/7-27.
- Åström & Murray, *Feedback Systems* (2008), §11.4 (loop shaping; lead at crossover)
  and §9.2 (Nyquist criterion with indentations and delay).
- Skogestad, "Simple analytic rules for model reduction and PID controller tuning",
  *J. Process Control* 13 (2003) 291–309: the SIMC rule for a first-order-plus-delay
  plant cancels the plant pole with the PI zero — the phase-balanced procedure
  reproduces it exactly (tests/test_balance.py).

Conventions (docs/balance.md):

- **Gain sign.** The compensator gain has the sign that makes the loop's roots-form
  gain sign (−1)^(number of right-half-plane plant zeros). For a stable plant this is
  "positive loop DC gain" (negative feedback); for a plant with unstable real poles it
  keeps their natural −180° each (1/(s − 1) is stabilised by a positive gain).
- **Phase target.** On the natural branch, right-half-plane zeros start at +180° each;
  the sign rule above leaves a multiple of 360° from them, so the target phase is
  −180° + PM + 360°·⌊n_rhp_zeros/2⌋ (the same phase margin; docs/interface.md reduces it).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq

from explorer.core.errors import DesignError
from explorer.core.loop import ROOT_TOL, Rational, feedback_sign
from explorer.frequency.metrics import frequency_metrics, frequency_metrics_batch
from explorer.model.study import Targets
from explorer.time_domain.timeresp import step_metrics, step_metrics_batch

__all__ = [
    "BalanceResult",
    "HandDesign",
    "LoopCheck",
    "TrimResult",
    "phase_balanced",
    "lead_at_crossover",
    "pi_plus_lead",
    "lag_for_error_constant",
    "hand_designs",
    "loop_check",
    "trim_gain_for_overshoot",
    "MAX_LEAD_BOOST_DEG",
    "WELL_DAMPED_ZETA",
    "NEAR_NMP_RATIO",
    "PI_ZERO_RATIO",
    "LAG_ZERO_RATIO",
    "PHASE_TOL_DEG",
]

#: Largest phase one lead stage may add at crossover (common practice: about 60–65°;
#: above that α becomes very small and the high-frequency gain 1/α very large).
MAX_LEAD_BOOST_DEG = 65.0
#: A complex pole pair with damping at least this (1/√2, where the resonant peak
#: vanishes: Ogata Ch. 7, Mr = 1 for ζ ≥ 1/√2) is "well damped" and may be cancelled
#: like a real pole; a pair below it is "lightly damped" and is cancelled only on
#: request (``cancel_lightly_damped``).
WELL_DAMPED_ZETA = 1.0 / math.sqrt(2.0)
#: A stable pole counts as "near" a non-minimum-phase zero z when its modulus is
#: within this factor of |z| (our choice: one octave either side).
NEAR_NMP_RATIO = 2.0
#: PI zero at ωc / PI_ZERO_RATIO (common practice: a decade below crossover).
PI_ZERO_RATIO = 10.0
#: Lag zero at ωc / LAG_ZERO_RATIO in the lag-lead design (common practice; Ogata §7-12).
LAG_ZERO_RATIO = 10.0
#: A phase surplus or shortfall smaller than this counts as exactly met.
PHASE_TOL_DEG = 1e-6
#: Verification tolerance on the smallest phase margin (degrees) and the crossover.
_PM_CHECK_TOL_DEG = 1e-6
_WC_CHECK_REL = 1e-6


# ---------------------------------------------------------------------------------------
# value objects
@dataclass(frozen=True, kw_only=True)
class LoopCheck:
    """What :func:`loop_check` found on one loop L = C·P.

    ``crossovers_rad_s`` ascending, ``phase_margins_deg`` for each (reduced into
    (−180°, 180°]), ``closed_loop_rhp_poles`` = P + N by the Nyquist criterion,
    ``open_loop_rhp_poles`` = P.
    """

    crossovers_rad_s: tuple[float, ...]
    phase_margins_deg: tuple[float, ...]
    open_loop_rhp_poles: int
    closed_loop_rhp_poles: int
    closed_loop_stable: bool
    note: str | None = None

    @property
    def phase_margin_deg(self) -> float | None:
        """Smallest phase margin over all crossovers (None without a crossover)."""
        return min(self.phase_margins_deg) if self.phase_margins_deg else None


@dataclass(frozen=True, kw_only=True)
class BalanceResult:
    """Outcome of :func:`phase_balanced`.

    ``design`` is the compensator (None when refused, then ``reason`` says why and
    ``failed_step`` names the step); ``steps`` explains every step taken;
    ``cancelled`` lists the plant poles cancelled by compensator zeros;
    ``balancing_pole_rad_s`` is the corner p of the balancing poles (at s = −p), None
    if none were added; ``shortfall_deg`` is the phase missing (> 0) or in surplus
    (< 0) when refused for phase.
    """

    design: Rational | None
    reason: str | None
    steps: tuple[str, ...]
    cancelled: tuple[complex, ...] = ()
    balancing_pole_rad_s: float | None = None
    n_balancing_poles: int = 0
    integrators_added: int = 0
    failed_step: str | None = None
    shortfall_deg: float | None = None
    check: LoopCheck | None = None

    @property
    def ok(self) -> bool:
        return self.design is not None


@dataclass(frozen=True, kw_only=True)
class HandDesign:
    """One hand-style baseline, labelled for the design table (docs/interface.md DESIGN).

    ``origin``: "phase-balanced" or "hand"; ``structure``: our short label of the
    compensator structure; ``compensator`` None when refused (``reason`` says why).
    """

    name: str
    origin: str
    structure: str
    compensator: Rational | None
    reason: str | None
    steps: tuple[str, ...]
    check: LoopCheck | None = None


@dataclass(frozen=True, kw_only=True)
class TrimResult:
    """Outcome of :func:`trim_gain_for_overshoot`: the compensator with its gain scaled
    by ``gain_factor`` so the step overshoot equals the target, and the new loop."""

    compensator: Rational | None
    reason: str | None
    gain_factor: float | None
    overshoot_pct: float | None
    crossover_rad_s: float | None
    phase_margin_deg: float | None
    steps: tuple[str, ...] = field(default_factory=tuple)


class _Refusal(Exception):
    """Internal: a step failed; carries the step name and an optional phase figure."""

    def __init__(self, step: str, reason: str, shortfall_deg: float | None = None) -> None:
        super().__init__(reason)
        self.step = step
        self.reason = reason
        self.shortfall_deg = shortfall_deg


# ---------------------------------------------------------------------------------------
# small helpers
def _f(x: float) -> str:
    return f"{x:.4g}"


def _deg(x: float) -> str:
    return f"{x:.3f}°" if abs(x) < 10 else f"{x:.2f}°"


def _root(r: complex) -> str:
    if r.imag == 0:
        return _f(r.real)
    return f"{_f(r.real)}{'+' if r.imag > 0 else '−'}{_f(abs(r.imag))}j"


def _is_origin(r: complex) -> bool:
    return abs(r) == 0.0


def _is_rhp(r: complex) -> bool:
    return r.real > ROOT_TOL * abs(r)


def _on_axis(r: complex) -> bool:
    return abs(r.real) <= ROOT_TOL * abs(r)


def _phase_deg(sys: Rational, w: float) -> float:
    return float(np.degrees(sys.phase_rad(w)[0]))


def _abs_at(sys: Rational, w: float) -> float:
    b = sys.batch()
    val, _ = b.log_mag_at(np.zeros(1, dtype=np.intp), np.array([float(w)]))
    return float(np.exp(val[0]))


def _validate(plant: Rational, targets: Targets) -> tuple[float, float, int]:
    """Bad input raises DesignError; a target the hand methods cannot use raises _Refusal."""
    if not isinstance(plant, Rational):
        raise DesignError(f"plant must be a Rational, got {type(plant).__name__}")
    if not math.isfinite(plant.gain) or plant.gain == 0.0:
        raise DesignError(f"plant gain must be finite and nonzero, got {plant.gain!r}")
    if not plant.is_proper:
        raise DesignError(f"plant is improper: {len(plant.zeros)} zeros, {len(plant.poles)} poles")
    if not (math.isfinite(plant.delay_s) and plant.delay_s >= 0.0):
        raise DesignError(f"plant delay must be ≥ 0 s, got {plant.delay_s!r}")
    for r in plant.zeros + plant.poles:
        if not (math.isfinite(r.real) and math.isfinite(r.imag)):
            raise DesignError(f"plant root {r!r} is not finite")
    n_int = targets.integrators
    if isinstance(n_int, bool) or not isinstance(n_int, (int, np.integer)) or n_int < 0:
        raise DesignError(f"targets.integrators must be a non-negative integer, got {n_int!r}")
    wc = targets.crossover_rad_s
    if wc is None or isinstance(wc, tuple):
        what = "absent" if wc is None else f"a range {wc}"
        raise _Refusal(
            "targets",
            f"the crossover target is {what}; the hand methods need one numeric crossover "
            "(rad/s) and a numeric phase margin",
        )
    pm = targets.phase_margin_deg
    if pm is None:
        raise _Refusal(
            "targets",
            "no phase-margin target; the hand methods need one numeric crossover and a "
            "numeric phase margin",
        )
    wc = float(wc)
    pm = float(pm)
    if not (math.isfinite(wc) and wc > 0):
        raise DesignError(f"targets.crossover must be a positive number of rad/s, got {wc!r}")
    if not (math.isfinite(pm) and 0.0 < pm < 180.0):
        raise DesignError(f"targets.phase_margin must be in (0, 180) deg, got {pm!r}")
    return wc, pm, int(n_int)


def _gain_sign(plant: Rational) -> int:
    """Sign of the compensator gain: loop roots-form gain sign = (−1)^n_rhp_zeros
    (explorer.core.loop.feedback_sign, the one rule every design method uses)."""
    return int(feedback_sign(plant))


def _target_phase_deg(plant: Rational, pm: float) -> float:
    n_rhp_z = sum(1 for z in plant.zeros if _is_rhp(z))
    return -180.0 + pm + 360.0 * (n_rhp_z // 2)


def _sign_step(plant: Rational, sign: int) -> str:
    n_rhp_z = sum(1 for z in plant.zeros if _is_rhp(z))
    n_rhp_p = sum(1 for p in plant.poles if _is_rhp(p))
    why = []
    if n_rhp_z:
        why.append(f"{n_rhp_z} right-half-plane zero(s)")
    if n_rhp_p:
        why.append(f"{n_rhp_p} right-half-plane pole(s)")
    ctx = f" ({', '.join(why)})" if why else ""
    return (
        f"gain sign: {'positive' if sign > 0 else 'negative'} compensator gain, so the loop "
        f"has its natural low-frequency phase{ctx} (plant gain {_f(plant.gain)}, "
        f"DC gain {_f(plant.dc_gain())})"
    )


def _integrator_step(plant: Rational, required: int, provided_by_comp: int = 0) -> tuple[int, str]:
    """Origin poles to add so the loop has at least ``required`` integrators."""
    plant_int = plant.n_integrators
    origin_zeros = sum(1 for z in plant.zeros if _is_origin(z))
    need = required - plant_int - provided_by_comp
    if origin_zeros and (required > plant_int or provided_by_comp > 0):
        raise _Refusal(
            "integrators",
            f"the plant has {origin_zeros} zero(s) at s = 0; a compensator pole at s = 0 "
            "would cancel it (an unstable hidden mode), so the loop cannot get the "
            f"required {required} integrator(s)",
        )
    add = max(0, need)
    line = (
        f"integrators: the plant has {plant_int}, the loop needs {required}"
        + (f", the structure brings {provided_by_comp}" if provided_by_comp else "")
        + (f": add {add} pole(s) at s = 0" if add else ": none added")
    )
    return add, line


def _set_gain(plant: Rational, sign: int, zeros: Sequence[complex], poles: Sequence[complex],
              wc: float) -> Rational:
    unit = Rational(gain=float(sign), zeros=tuple(zeros), poles=tuple(poles))
    mag = _abs_at(plant * unit, wc)
    if not (math.isfinite(mag) and mag > 0):
        raise _Refusal("gain", f"|C·P(jωc)| is {mag} at ωc = {_f(wc)} rad/s; no gain sets it to 1")
    return Rational(gain=sign / mag, zeros=tuple(zeros), poles=tuple(poles))


def loop_check(plant: Rational, comp: Rational) -> LoopCheck:
    """Every gain crossover of L = C·P with its phase margin, and closed-loop stability,
    from the batch engine (:func:`explorer.frequency.metrics.frequency_metrics`, the one that
    gives every reported figure): crossovers and Z = P + N from it, each crossover's
    margin 180° + ∠L(jω) on the natural branch of :mod:`explorer.core.loop`, reduced into
    (−180°, 180°]. (tests/nyquist_oracle.py keeps an independent Nyquist checker as a
    test oracle.)"""
    fm = frequency_metrics(plant, comp)
    loop = plant * comp
    xs = tuple(float(w) for w in (fm["crossovers_rad_s"] or ()))
    pms = []
    for x in xs:
        pmv = _phase_deg(loop, x) + 180.0
        pms.append(pmv - 360.0 * math.ceil((pmv - 180.0) / 360.0))
    z = fm.get("closed_loop_rhp_poles")
    return LoopCheck(crossovers_rad_s=xs, phase_margins_deg=tuple(pms),
                     open_loop_rhp_poles=sum(1 for p in loop.poles if p.real > 0),
                     closed_loop_rhp_poles=-1 if z is None else int(z),
                     closed_loop_stable=bool(fm["closed_loop_stable"]))


def _verify(plant: Rational, comp: Rational, wc: float, pm: float) -> tuple[LoopCheck, str]:
    """Run :func:`loop_check`; refuse when the design misses the targets."""
    chk = loop_check(plant, comp)
    xs = chk.crossovers_rad_s
    if not xs or min(abs(w / wc - 1) for w in xs) > _WC_CHECK_REL:
        raise _Refusal("check", f"ωc = {_f(wc)} rad/s is not a gain crossover of the design "
                                f"(found {[_f(w) for w in chk.crossovers_rad_s]})")
    i_min = int(np.argmin(chk.phase_margins_deg))
    pm_min = chk.phase_margins_deg[i_min]
    if pm_min < pm - _PM_CHECK_TOL_DEG:
        w_bad = chk.crossovers_rad_s[i_min]
        raise _Refusal(
            "check",
            f"the design has another gain crossover at {_f(w_bad)} rad/s with phase margin "
            f"{_deg(pm_min)}, {_deg(pm - pm_min)} below the target",
            shortfall_deg=pm - pm_min,
        )
    if not chk.closed_loop_stable:
        extra = f" ({chk.note})" if chk.note else ""
        count = ("" if chk.closed_loop_rhp_poles < 0
                 else f": {chk.closed_loop_rhp_poles} closed-loop right-half-plane pole(s) "
                      "by the Nyquist count")
        raise _Refusal("check", f"the closed loop would be unstable{count}{extra}")
    others = len(chk.crossovers_rad_s) - 1
    line = (
        f"check: {len(chk.crossovers_rad_s)} gain crossover(s)"
        + (f" ({others} besides ωc, all with larger margins)" if others else " (ωc only)")
        + f", smallest phase margin {pm_min:.4f}°, closed loop stable "
        f"(Nyquist: P = {chk.open_loop_rhp_poles}, Z = {chk.closed_loop_rhp_poles})"
    )
    return chk, line


# ---------------------------------------------------------------------------------------
# the phase-balanced procedure
def phase_balanced(plant: Rational, targets: Targets, *,
                   cancel_lightly_damped: bool = False) -> BalanceResult:
    """Cancel-and-balance design for a numeric crossover ωc and phase margin PM.

    1. Add poles at s = 0 until the loop has ``targets.integrators`` (the plant's own
       count).
    2. Cancel the slowest admissible plant poles with compensator zeros, one at a time
       (a complex pair as a pair), only while the loop phase at ωc is short of the
       target −180° + PM. Never cancelled: unstable poles, poles on the imaginary axis,
       poles within a factor :data:`NEAR_NMP_RATIO` of a right-half-plane zero, and
       complex pairs with ζ < :data:`WELL_DAMPED_ZETA` unless ``cancel_lightly_damped``.
    3. Add as many real poles as zeros were added, all at s = −p with
       p = ωc / tan(surplus / n), so the phase at ωc is exactly the target.
    4. Set the gain so |L(jωc)| = 1 (sign: module docstring).
    5. Check every crossover and the Nyquist count; refuse if the targets are missed.

    Refusals (``design`` None, ``reason`` and ``failed_step`` set): non-numeric
    targets, a phase shortfall after all admissible cancellations (``shortfall_deg``
    > 0, with the delay's and the right-half-plane zeros' lag itemised), a phase
    surplus with no added zero to spend it on (``shortfall_deg`` < 0), or a design
    that fails the check. Bad input (improper plant, ωc ≤ 0, ...) raises DesignError.
    """
    steps: list[str] = []
    cancelled: list[complex] = []
    try:
        wc, pm, required, target, sign = _targets_step(plant, targets, steps)
        n_add, line = _integrator_step(plant, required)
        steps.append(line)
        c_zeros: list[complex] = []
        c_poles: list[complex] = [0j] * n_add

        def phase_now() -> float:
            return _phase_deg(plant * Rational(gain=float(sign), zeros=tuple(c_zeros),
                                               poles=tuple(c_poles)), wc)

        phi = phase_now()
        steps.append(f"phase at ωc with the integrators: {_deg(phi)} "
                     + _short_or_surplus(phi, target))

        candidates, skipped = _cancellation_candidates(plant, cancel_lightly_damped)
        if skipped:
            steps.append("not cancelled: " + "; ".join(skipped))
        for roots, label in candidates:
            if phi >= target - PHASE_TOL_DEG:
                break
            before = phi
            c_zeros.extend(roots)
            cancelled.extend(roots)
            phi = phase_now()
            steps.append(f"cancel {label} with a zero{'s' if len(roots) > 1 else ''}: "
                         f"+{_deg(phi - before)} → {_deg(phi)} " + _short_or_surplus(phi, target))

        surplus = phi - target
        n = len(c_zeros)
        if surplus < -PHASE_TOL_DEG:
            raise _Refusal("cancel", _shortfall_reason(plant, wc, -surplus, n, skipped),
                           shortfall_deg=-surplus)
        balancing: float | None = None
        if abs(surplus) <= PHASE_TOL_DEG:
            steps.append(f"balance: the phase at ωc is met within {PHASE_TOL_DEG}°; "
                         "no balancing pole needed")
        elif n == 0:
            raise _Refusal(
                "balance",
                f"phase surplus of {_deg(surplus)} at ωc with no free pole to spend it on: no "
                f"zero was added, so no balancing pole may be (the loop would have phase "
                f"margin {_deg(pm + surplus)}, above the target {_deg(pm)}); lower the "
                "crossover target or raise the phase-margin target",
                shortfall_deg=-surplus,
            )
        else:
            lag_each = surplus / n
            if not 0.0 < lag_each < 90.0:  # pragma: no cover - excluded by the stop rule
                raise _Refusal("balance", f"each of {n} poles would need {_deg(lag_each)} of "
                                          "lag, outside (0°, 90°)", shortfall_deg=-surplus)
            balancing = wc / math.tan(math.radians(lag_each))
            c_poles.extend([complex(-balancing, 0.0)] * n)
            steps.append(
                f"balance: surplus {_deg(surplus)} over {n} pole(s): each lags {_deg(lag_each)}, "
                f"so p = ωc / tan({_deg(lag_each)}) = {_f(balancing)} rad/s (poles at s = "
                f"{_f(-balancing)})"
            )
        comp = _set_gain(plant, sign, c_zeros, c_poles, wc)
        steps.append(f"gain: |C·P(jωc)| = 1 gives k = {_f(comp.gain)}")
        chk, line = _verify(plant, comp, wc, pm)
        steps.append(line)
        return BalanceResult(
            design=comp, reason=None, steps=tuple(steps), cancelled=tuple(cancelled),
            balancing_pole_rad_s=balancing, n_balancing_poles=n if balancing else 0,
            integrators_added=n_add, check=chk,
        )
    except _Refusal as r:
        steps.append(f"refused at step '{r.step}': {r.reason}")
        return BalanceResult(
            design=None, reason=r.reason, steps=tuple(steps), cancelled=tuple(cancelled),
            failed_step=r.step, shortfall_deg=r.shortfall_deg,
        )


def _short_or_surplus(phi: float, target: float) -> str:
    d = phi - target
    if abs(d) <= PHASE_TOL_DEG:
        return "(on target)"
    return f"(short by {_deg(-d)})" if d < 0 else f"(surplus {_deg(d)})"


def _cancellation_candidates(
    plant: Rational, allow_light: bool
) -> tuple[list[tuple[tuple[complex, ...], str]], list[str]]:
    """Admissible poles in cancellation order (slowest first) and the skipped ones."""
    nmp = [z for z in plant.zeros if _is_rhp(z)]
    cands: list[tuple[float, tuple[complex, ...], str]] = []
    skipped: list[str] = []
    for p in plant.poles:
        if p.imag < 0:
            continue  # the conjugate of a listed pair
        if _is_origin(p):
            continue  # an integrator; counted in the integrator step
        pair = (p, p.conjugate()) if p.imag > 0 else (p,)
        name = ("pole pair " + _root(p) + "/conj.") if p.imag > 0 else f"pole {_root(p)}"
        if _is_rhp(p):
            skipped.append(f"{name} (unstable)")
            continue
        if _on_axis(p):
            skipped.append(f"{name} (on the imaginary axis)")
            continue
        near = [z for z in nmp if 1.0 / NEAR_NMP_RATIO <= abs(p) / abs(z) <= NEAR_NMP_RATIO]
        if near:
            skipped.append(f"{name} (near the non-minimum-phase zero {_root(near[0])})")
            continue
        if p.imag > 0:
            zeta = -p.real / abs(p)
            if zeta < WELL_DAMPED_ZETA and not allow_light:
                skipped.append(f"{name} (lightly damped, ζ = {zeta:.3g}; cancel_lightly_damped "
                               "is off)")
                continue
            name += f" (ζ = {zeta:.3g})"
        cands.append((abs(p), pair, name))
    cands.sort(key=lambda c: c[0])
    return [(c[1], c[2]) for c in cands], skipped


def _shortfall_reason(plant: Rational, wc: float, short: float, n_cancelled: int,
                      skipped: Sequence[str]) -> str:
    parts = []
    if plant.delay_s > 0:
        parts.append(f"the delay takes {_deg(math.degrees(wc * plant.delay_s))}")
    rhp = [z for z in plant.zeros if _is_rhp(z)]
    if rhp:
        allpass = Rational(gain=1.0, zeros=tuple(rhp), poles=tuple(-z.conjugate() for z in rhp))
        lag = 180.0 * len(rhp) - _phase_deg(allpass, wc)
        parts.append(f"the right-half-plane zero(s) take {_deg(lag)} more than their mirror images")
    unstable = [p for p in plant.poles if _is_rhp(p)]
    if unstable:
        parts.append(f"{len(unstable)} unstable pole(s) cannot be cancelled")
    ctx = (" (" + "; ".join(parts) + ")") if parts else ""
    skip = f"; {len(skipped)} pole(s) not admissible" if skipped else ""
    return (
        f"phase at ωc = {_f(wc)} rad/s is {_deg(short)} short of the target after cancelling "
        f"all {n_cancelled} admissible pole(s){skip}{ctx}; lower the crossover or the "
        "phase-margin target"
    )


# ---------------------------------------------------------------------------------------
# classical hand designs
def _lead_roots(wc: float, boost_deg: float) -> tuple[float, float, float]:
    """Lead stage with its maximum phase ``boost_deg`` at ωc: (α, zero, pole) corners,
    sin φm = (1 − α)/(1 + α), zero at ωc·√α, pole at ωc/√α (Ogata 5e §7-11)."""
    s = math.sin(math.radians(boost_deg))
    alpha = (1.0 - s) / (1.0 + s)
    return alpha, wc * math.sqrt(alpha), wc / math.sqrt(alpha)


def _lead_step(boost: float, label: str) -> None:
    if boost <= PHASE_TOL_DEG:
        raise _Refusal(
            "lead",
            f"the phase at ωc is already {_deg(-boost)} above the target{label}; a lead only "
            "adds phase, it cannot remove it",
            shortfall_deg=boost,
        )
    if boost > MAX_LEAD_BOOST_DEG:
        raise _Refusal(
            "lead",
            f"needs {_deg(boost)} of lead at ωc{label}, more than one stage gives "
            f"({MAX_LEAD_BOOST_DEG:g}°, common practice)",
            shortfall_deg=boost - MAX_LEAD_BOOST_DEG,
        )


def _targets_step(plant: Rational, targets: Targets, steps: list[str]
                  ) -> tuple[float, float, int, float, int]:
    """The first steps of every hand design: validated targets (ωc rad/s, PM deg,
    required integrators), the loop phase wanted at ωc (deg) and the gain's sign."""
    wc, pm, required = _validate(plant, targets)
    target = _target_phase_deg(plant, pm)
    steps.append(
        f"targets: crossover {_f(wc)} rad/s, phase margin {_f(pm)}°: the loop phase at "
        f"ωc must be {_deg(target)} and |L(jωc)| = 1"
    )
    sign = _gain_sign(plant)
    steps.append(_sign_step(plant, sign))
    return wc, pm, required, target, sign


def _hand(plant: Rational, targets: Targets, name: str, build) -> HandDesign:
    steps: list[str] = []
    try:
        wc, pm, required, target, sign = _targets_step(plant, targets, steps)
        structure, zeros, poles = build(plant, wc, pm, required, target, sign, steps)
        comp = _set_gain(plant, sign, zeros, poles, wc)
        steps.append(f"gain: |C·P(jωc)| = 1 gives k = {_f(comp.gain)}")
        chk, line = _verify(plant, comp, wc, pm)
        steps.append(line)
        return HandDesign(name=name, origin="hand", structure=structure, compensator=comp,
                          reason=None, steps=tuple(steps), check=chk)
    except _Refusal as r:
        steps.append(f"refused at step '{r.step}': {r.reason}")
        return HandDesign(name=name, origin="hand", structure=_STRUCT.get(name, name),
                          compensator=None, reason=r.reason, steps=tuple(steps))


_STRUCT = {"lead": "lead", "PI+lead": "PI + lead", "lag": "lag"}


def _with_integrators(n: int, label: str) -> str:
    if n == 0:
        return label
    return f"{n}×integrator + {label}" if n > 1 else f"integrator + {label}"


def lead_at_crossover(plant: Rational, targets: Targets) -> HandDesign:
    """One lead stage with its maximum phase at ωc, plus the required integrators.

    The boost is the phase missing at ωc after the integrators; α from
    sin φm = (1 − α)/(1 + α), zero at ωc·√α, pole at ωc/√α, gain for |L(jωc)| = 1.
    Refused when no boost is needed (phase surplus) or more than
    :data:`MAX_LEAD_BOOST_DEG`. Source: Ogata 5e §7-11 (the lead's maximum phase
    φm at the geometric mean of its corners).
    """

    def build(plant, wc, pm, required, target, sign, steps):
        n_add, line = _integrator_step(plant, required)
        steps.append(line)
        poles: list[complex] = [0j] * n_add
        phi = _phase_deg(plant * Rational(gain=float(sign), poles=tuple(poles)), wc)
        boost = target - phi
        steps.append(f"phase at ωc with the integrators: {_deg(phi)}: the lead must add "
                     f"{_deg(boost)}")
        _lead_step(boost, "")
        alpha, z, p = _lead_roots(wc, boost)
        steps.append(f"lead: α = (1 − sin φm)/(1 + sin φm) = {alpha:.5g}; zero at "
                     f"ωc·√α = {_f(z)} rad/s, pole at ωc/√α = {_f(p)} rad/s")
        return _with_integrators(n_add, "lead"), [complex(-z)], poles + [complex(-p)]

    return _hand(plant, targets, "lead", build)


def pi_plus_lead(plant: Rational, targets: Targets) -> HandDesign:
    """PI with its zero at ωc / :data:`PI_ZERO_RATIO` (common practice), then one lead
    stage with its maximum phase at ωc for the rest of the phase; gain for
    |L(jωc)| = 1. The PI brings one integrator; more are added if the loop needs them.
    """

    def build(plant, wc, pm, required, target, sign, steps):
        n_add, line = _integrator_step(plant, required, provided_by_comp=1)
        steps.append(line)
        zi = wc / PI_ZERO_RATIO
        zeros: list[complex] = [complex(-zi)]
        poles: list[complex] = [0j] * (n_add + 1)
        phi = _phase_deg(plant * Rational(gain=float(sign), zeros=tuple(zeros),
                                          poles=tuple(poles)), wc)
        boost = target - phi
        steps.append(f"PI: zero at ωc/{PI_ZERO_RATIO:g} = {_f(zi)} rad/s (common practice) "
                     f"with a pole at s = 0; phase at ωc {_deg(phi)}: the lead must add "
                     f"{_deg(boost)}")
        _lead_step(boost, " with the PI")
        alpha, z, p = _lead_roots(wc, boost)
        steps.append(f"lead: α = {alpha:.5g}; zero at {_f(z)} rad/s, pole at {_f(p)} rad/s")
        return (_with_integrators(n_add, "PI + lead"), zeros + [complex(-z)],
                poles + [complex(-p)])

    return _hand(plant, targets, "PI+lead", build)


def _error_constant_name(m: int) -> str:
    return {0: "Kp", 1: "Kv", 2: "Ka"}.get(m, f"K{m}")


def lag_for_error_constant(plant: Rational, targets: Targets, error_constant: float, *,
                           lag_zero_ratio: float = LAG_ZERO_RATIO) -> HandDesign:
    """A lag stage (s + z)/(s + z/β) that raises the low-frequency gain to the required
    error constant K = lim s^m L(s) (Kp for a type-0 loop, Kv for type 1, Ka for type 2;
    m = the loop's integrators), keeping ωc and PM exact. ``error_constant`` is a
    minimum; the design reaches it exactly when the lag is needed for it.

    Two cases, by the phase S = ∠L(jωc) − target of the gain-only loop (with the
    required integrators):

    - **S > 0: lag alone.** With x = ωc/z, a = atan x and b = atan(βx), the lag's phase
      at ωc is a − b = −S and its low- over crossover-frequency gain ratio is cos a / cos b.
      With R = K_required / K_gain-only this gives the closed form
      tan a = (R cos S − 1)/(R sin S) (requires R cos S > 1). If R cos S ≤ 1 the error
      constant does not pin the lag; the zero goes a decade below ωc (common practice)
      and β spends S (requires S < 90° − atan(ratio)), the error constant then exceeds
      the minimum.
    - **S ≤ 0: lag-lead.** Lag zero at ωc / ``lag_zero_ratio`` (common practice; Ogata
      5e §7-12), β solved (brentq) so K is exact, and a lead with its maximum phase at
      ωc adds −S plus the lag's lag (at most :data:`MAX_LEAD_BOOST_DEG`).

    Refused when the gain alone (S > 0) or the lead alone (S ≤ 0) already reaches the
    error constant (no lag needed), or when a stage's limit is exceeded.
    """
    if not (isinstance(error_constant, (int, float)) and not isinstance(error_constant, bool)
            and math.isfinite(error_constant) and error_constant > 0):
        raise DesignError(f"error_constant must be a positive number, got {error_constant!r}")
    if not (math.isfinite(lag_zero_ratio) and lag_zero_ratio > 1.0):
        raise DesignError(f"lag_zero_ratio must be > 1, got {lag_zero_ratio!r}")
    k_req = float(error_constant)

    def build(plant, wc, pm, required, target, sign, steps):
        n_add, line = _integrator_step(plant, required)
        steps.append(line)
        poles0: list[complex] = [0j] * n_add
        base = plant * Rational(gain=float(sign), poles=tuple(poles0))
        m = base.n_integrators
        kname = _error_constant_name(m)
        phi = _phase_deg(base, wc)
        surplus = phi - target
        # error constant of the gain-only design that crosses at ωc
        k0 = abs(base.dc_gain()) / _abs_at(base, wc)
        ratio = k_req / k0
        steps.append(
            f"loop type {m}: the error constant is {kname} = lim s^{m}·L(s); a pure gain "
            f"crossing at ωc gives {kname} = {_f(k0)}, the target is {_f(k_req)} "
            f"(ratio R = {_f(ratio)}); phase at ωc {_deg(phi)} " + _short_or_surplus(phi, target)
        )
        if surplus > PHASE_TOL_DEG:
            s_rad = math.radians(surplus)
            if ratio <= 1.0:
                raise _Refusal(
                    "lag",
                    f"a pure gain already gives {kname} = {_f(k0)} ≥ {_f(k_req)}: no lag is "
                    f"needed for the error constant (the {_deg(surplus)} phase surplus remains)",
                    shortfall_deg=-surplus,
                )
            if ratio * math.cos(s_rad) > 1.0:
                a = math.atan((ratio * math.cos(s_rad) - 1.0) / (ratio * math.sin(s_rad)))
                how = ("closed form tan a = (R cos S − 1)/(R sin S): zero at "
                       f"ωc/{_f(math.tan(a))}, {kname} exactly {_f(k_req)}")
            else:
                a = math.atan(lag_zero_ratio)
                if a + s_rad >= math.pi / 2:
                    raise _Refusal(
                        "lag",
                        f"the {_deg(surplus)} phase surplus is more than a lag with its zero at "
                        f"ωc/{lag_zero_ratio:g} can spend ({_deg(90 - math.degrees(a))}), and "
                        f"the error constant ({kname} ≥ {_f(k_req)}) does not need more lag",
                        shortfall_deg=-surplus,
                    )
                how = (f"zero at ωc/{lag_zero_ratio:g} (common practice), β spends the surplus; "
                       f"{kname} = {_f(k0 * math.cos(a) / math.cos(a + s_rad))} ≥ {_f(k_req)}")
            x = math.tan(a)
            beta = math.tan(a + s_rad) / x
            z = wc / x
            steps.append(f"lag: spends the {_deg(surplus)} surplus; {how}; β = {_f(beta)}, "
                         f"zero at {_f(z)} rad/s, pole at {_f(z / beta)} rad/s")
            return (_with_integrators(n_add, "lag"), [complex(-z)],
                    poles0 + [complex(-z / beta)])

        # lag-lead
        z = wc / lag_zero_ratio
        xr = lag_zero_ratio

        def lead_boost(beta: float) -> float:
            return -surplus + math.degrees(math.atan(beta * xr) - math.atan(xr))

        def k_of(beta: float) -> float:
            b = lead_boost(beta)
            alpha, _, _ = _lead_roots(wc, b) if b > 0 else (1.0, 0.0, 0.0)
            lag_ratio = math.hypot(beta * xr, 1.0) / math.hypot(xr, 1.0)
            return k0 * math.sqrt(alpha) * lag_ratio

        k1 = k_of(1.0)
        if k1 >= k_req:
            raise _Refusal(
                "lag",
                f"the lead alone already gives {kname} = {_f(k1)} ≥ {_f(k_req)}: no lag stage "
                "is needed (see the lead design)",
            )

        hi = 2.0
        while k_of(hi) < k_req and hi < 1e12:
            hi *= 2.0
        if k_of(hi) < k_req:  # pragma: no cover - K grows without bound in β
            raise _Refusal("lag", f"no lag ratio β ≤ {hi:g} reaches {kname} = {_f(k_req)}")
        beta = brentq(lambda b: k_of(b) - k_req, 1.0, hi, xtol=1e-14, rtol=1e-13)
        boost = lead_boost(beta)
        steps.append(f"lag: zero at ωc/{lag_zero_ratio:g} = {_f(z)} rad/s (common practice), "
                     f"β = {_f(beta)} from {kname} = {_f(k_req)}, pole at {_f(z / beta)} rad/s; "
                     f"it lags {_deg(boost + surplus)} at ωc")
        _lead_step(boost, " with the lag")
        alpha, zl, pl = _lead_roots(wc, boost)
        steps.append(f"lead: adds {_deg(boost)}: α = {alpha:.5g}; zero at {_f(zl)} rad/s, "
                     f"pole at {_f(pl)} rad/s")
        return (_with_integrators(n_add, "lag + lead"), [complex(-z), complex(-zl)],
                poles0 + [complex(-z / beta), complex(-pl)])

    return _hand(plant, targets, "lag", build)


def hand_designs(plant: Rational, targets: Targets, *, cancel_lightly_damped: bool = False,
                 error_constant: float | None = None) -> list[HandDesign]:
    """The phase-balanced design and the hand baselines (lead at crossover, PI plus
    lead, and — with ``error_constant`` — the lag), each designed or refused."""
    out: list[HandDesign] = []
    res = phase_balanced(plant, targets, cancel_lightly_damped=cancel_lightly_damped)
    out.append(HandDesign(
        name="phase-balanced", origin="phase-balanced",
        structure=_balanced_structure(res), compensator=res.design, reason=res.reason,
        steps=res.steps, check=res.check,
    ))
    out.append(lead_at_crossover(plant, targets))
    out.append(pi_plus_lead(plant, targets))
    if error_constant is not None:
        out.append(lag_for_error_constant(plant, targets, error_constant))
    return out


def _balanced_structure(res: BalanceResult) -> str:
    if res.design is None:
        return "cancel and balance"
    parts = []
    if res.integrators_added:
        parts.append(_with_integrators(res.integrators_added, "").rstrip(" +"))
    nz = len(res.cancelled)
    if nz:
        parts.append(f"{nz} cancelling zero{'s' if nz > 1 else ''}")
    if res.n_balancing_poles:
        k = res.n_balancing_poles
        parts.append(f"{k} balancing pole{'s' if k > 1 else ''}")
    return " + ".join(parts) if parts else "gain"


# ---------------------------------------------------------------------------------------
# ---------------------------------------------------------------------------------------
# overshoot trim
def trim_gain_for_overshoot(plant: Rational, compensator: Rational, overshoot_pct: float,
                            *, factor_range: tuple[float, float] = (0.05, 20.0),
                            n_scan: int = 41) -> TrimResult:
    """Scale the compensator gain until the simulated unit-step overshoot equals
    ``overshoot_pct``; report the new crossover and phase margin.

    The gain factor is scanned on a log grid over ``factor_range`` (one batch of step
    responses, :func:`explorer.time_domain.timeresp.step_metrics_batch`, stability from the batch
    engine), the sign change of overshoot − target nearest to factor 1 is
    bracketed, and brentq refines it (1-D root finding on the simulated overshoot). The
    crossover and phase margin move with the gain: they are reported, not kept. Refused
    (``compensator`` None) when no stable factor in the range reaches the target.
    Needs :mod:`explorer.time_domain.timeresp` (imported here, lazily).
    """
    if not (isinstance(overshoot_pct, (int, float)) and math.isfinite(overshoot_pct)
            and overshoot_pct > 0):
        raise DesignError(f"overshoot target must be a positive percentage, got {overshoot_pct!r}")
    f_lo, f_hi = (float(x) for x in factor_range)
    if not (0 < f_lo < 1.0 < f_hi and math.isfinite(f_hi)):
        raise DesignError(f"factor_range must satisfy 0 < low < 1 < high, got {factor_range!r}")

    def scaled(f: float) -> Rational:
        return Rational(gain=compensator.gain * f, zeros=compensator.zeros,
                        poles=compensator.poles)

    def os_of(f: float) -> float:
        stable = bool(frequency_metrics(plant, scaled(f))["closed_loop_stable"])
        if not stable:
            return math.nan
        val = step_metrics(plant, scaled(f), stable=True).get("overshoot_pct")
        return math.nan if val is None else float(val)

    factors = np.unique(np.concatenate([np.geomspace(f_lo, f_hi, n_scan), [1.0]]))
    n, nz, npl = factors.size, len(compensator.zeros), len(compensator.poles)
    gains = compensator.gain * factors
    zs = np.tile(np.array(compensator.zeros, dtype=complex), n).reshape(n, nz)
    ps = np.tile(np.array(compensator.poles, dtype=complex), n).reshape(n, npl)
    stable = np.asarray(frequency_metrics_batch(plant, gains, zs, ps)["closed_loop_stable"],
                        bool)
    batch = step_metrics_batch(plant, gains, zs, ps, stable=stable)
    os_vals = np.asarray(batch["overshoot_pct"], dtype=float)
    steps = [f"target overshoot {_f(overshoot_pct)} %: scan {factors.size} gain factors in "
             f"[{_f(f_lo)}, {_f(f_hi)}], {int(stable.sum())} with a stable closed loop"]
    i1 = int(np.flatnonzero(factors == 1.0)[0])
    if np.isfinite(os_vals[i1]):
        steps.append(f"overshoot at the design gain: {_f(os_vals[i1])} %")
    d = os_vals - overshoot_pct
    brackets = [i for i in range(factors.size - 1)
                if np.isfinite(d[i]) and np.isfinite(d[i + 1]) and d[i] * d[i + 1] <= 0]
    if not brackets:
        reason = (f"no stable gain factor in [{_f(f_lo)}, {_f(f_hi)}] gives "
                  f"{_f(overshoot_pct)} % overshoot")
        steps.append(f"refused: {reason}")
        return TrimResult(compensator=None, reason=reason, gain_factor=None,
                          overshoot_pct=None, crossover_rad_s=None, phase_margin_deg=None,
                          steps=tuple(steps))
    i = min(brackets, key=lambda k: abs(math.log(math.sqrt(factors[k] * factors[k + 1]))))
    a, b_ = float(factors[i]), float(factors[i + 1])
    if d[i] == 0:
        f = a
    elif d[i + 1] == 0:
        f = b_
    else:
        f = brentq(lambda g: os_of(g) - overshoot_pct, a, b_, xtol=1e-12, rtol=1e-10)
    comp = scaled(f)
    chk = loop_check(plant, comp)
    k = int(np.argmin(chk.phase_margins_deg)) if chk.phase_margins_deg else None
    wc = chk.crossovers_rad_s[k] if k is not None else None
    pm = chk.phase_margins_deg[k] if k is not None else None
    got = os_of(f)
    steps.append(
        f"gain factor {_f(f)} (bracket [{_f(a)}, {_f(b_)}], brentq): overshoot {_f(got)} %, "
        + (f"crossover {_f(wc)} rad/s, phase margin {_deg(pm)}"
           if wc is not None and pm is not None else "no gain crossover")
    )
    return TrimResult(compensator=comp, reason=None, gain_factor=f, overshoot_pct=got,
                      crossover_rad_s=wc, phase_margin_deg=pm, steps=tuple(steps))
