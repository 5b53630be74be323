"""``loopscout implement STUDY --design NAME --sample-time T``: the hand-off to a
sampled controller.

The design (a ``[[compensator]]`` of the study, or with ``--from`` a design of an
exploration's designs.json) is discretized (Tustin prewarped at the crossover by
default), split into named stages written as sections with their difference
equations and, where the structure is one, PI/PID parameters; the sampled loop —
C(z), hold, plant with its delay, computation delay — is evaluated exactly beside
the continuous design (docs/implement.md). ``--json`` prints one object
(docs/interface.md, "Implementation hand-off").
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import textwrap
from collections.abc import Callable, Sequence
from typing import Any

from explorer.cli.output import factored, print_json, safe
from explorer.core.errors import DesignError, LoopscoutError, StudyFileError
from explorer.core.loop import Rational, root_to_json
from explorer.evaluation.phase_domain import load_checked_study
from explorer.evaluation.records import describe_structure, design_metrics, study_header
from explorer.frequency.sampled import (
    METHODS,
    WC_T_WARN_RAD,
    compensator_stages,
    cont_loop_with,
    difference_equations,
    discretize,
    industrial_form,
    sample_plant,
    sampled_loop_metrics,
)
from explorer.model.study import FREQ_MAX, FREQ_MIN
from explorer.model.text_file import read_text_file

__all__ = ["register", "implementation", "NOT_MODELLED", "SECTIONS_NOTE"]

#: What the sampled model leaves out, in plain words (printed and in the JSON).
NOT_MODELLED = (
    "Actuator limits are not modelled: no saturation or rate limit. A stage with an "
    "integrator winds up when the output saturates; add anti-windup (stop or back-"
    "calculate the integration while the output is at its limit) and check it on the "
    "real drive.",
    "Quantisation is not modelled: converter resolution on the measurement and the output, "
    "and coefficient rounding. The coefficients are printed with 10 or more significant "
    "digits for floating-point use; fixed-point arithmetic needs its own scaling and check.",
    "The hold is ideal: the output is assumed to change once per period, exactly "
    "at the sample instant plus the computation delay, with no jitter, and to stay "
    "constant until the next update; the measurement is assumed sampled at the instant, "
    "with no anti-aliasing filter (a filter adds phase lag not counted here).",
    "Sections start from zero state; switching from manual to automatic, or between "
    "controllers, needs the states initialised (bumpless transfer), not modelled here.",
    "Everything rests on the study's plant model and its delay.",
)


#: How the sections are scaled and chained.
SECTIONS_NOTE = (
    "Sections run in the order listed, the output of one the input of the next; each stage "
    "is scaled to unit DC gain (a stage with an integrator or differentiator: unit leading "
    "coefficient) and the remaining gain sits in section 1. Another scaling changes only "
    "the internal signal levels."
)


def register(sub: Any, caution: str) -> None:
    p = sub.add_parser(
        "implement",
        help="discrete compensator, sections and the sampled loop for one design",
        description=(
            "Turn one design into a sampled controller: C(z) by Tustin with prewarping at "
            "the crossover (or plain Tustin, or matched pole-zero mapping), its sections "
            "with coefficients and difference equations, PI/PID parameters where the "
            "structure is one, and the sampled loop (hold, plant delay, computation delay) "
            "evaluated exactly beside the continuous design. A sample time is called long "
            f"when crossover x T exceeds {WC_T_WARN_RAD:g} rad (common practice)."
        ),
        epilog=(
            "examples:\n"
            "  loopscout implement studies/conveyor_speed.toml --design PI --sample-time 0.05\n"
            "  loopscout implement studies/kiln_damper.toml --design 'PI + lead' "
            "--sample-time 1 --compute-delay 0.2 --csv sections.csv\n"
            "  loopscout implement STUDY --from out/designs.json --design NAME "
            "--sample-time 0.01 --json\n\n" + caution
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("study", metavar="STUDY", help="study file (TOML), see docs/study-file.md")
    p.add_argument("--design", required=True, metavar="NAME",
                   help="a [[compensator]] name of the study, or with --from a design name")
    p.add_argument("--sample-time", type=_positive_seconds, default=None, metavar="T",
                   help="sample time, seconds (default: the study's [search] sample_time; "
                        "required without one)")
    p.add_argument("--from", dest="from_file", metavar="DIR/designs.json", default=None,
                   help="take the design from an exploration's designs.json")
    p.add_argument("--compute-delay", type=_nonnegative_seconds, default=None,
                   metavar="SECONDS",
                   help="time from sampling to the output update, seconds (default: the "
                        "study's [search] compute_delay with its sample_time, else 0)")
    p.add_argument("--method", choices=METHODS, default=METHODS[0],
                   help="discretization (default tustin-prewarp: Tustin prewarped at the "
                        "design's crossover)")
    p.add_argument("--prewarp", type=_positive_rad_s, default=None, metavar="RAD_S",
                   help="prewarp frequency for tustin-prewarp (default: the design's crossover)")
    p.add_argument("--csv", metavar="FILE", default=None,
                   help="also write the sections as CSV (section, b0..a2, stage)")
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
    )
    p.set_defaults(run=_run, caution=caution)


# -- argument types ----------------------------------------------------------------------
def _number_type(what: str, ok: Callable[[float], bool]) -> Callable[[str], float]:
    """An argparse type: a finite number for which ``ok`` holds, else "must be
    <what>, got '<text>'"."""
    def parse(text: str) -> float:
        try:
            v = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be {what}, got {text!r}") from None
        if not (math.isfinite(v) and ok(v)):
            raise argparse.ArgumentTypeError(f"must be {what}, got {text!r}")
        return v

    return parse


_positive_seconds = _number_type("a positive number of seconds", lambda v: v > 0)
_nonnegative_seconds = _number_type("a number of seconds >= 0", lambda v: v >= 0)
_positive_rad_s = _number_type("a positive frequency in rad/s", lambda v: v > 0)


# -- the design --------------------------------------------------------------------------
def _names(names: Sequence[str]) -> str:
    return ", ".join(repr(n) for n in names) if names else "none"


def _design_from_study(study: Any, name: str) -> Any:
    for entry in study.compensators:
        if entry.name == name:
            return entry.compensator
    names = [e.name for e in study.compensators]
    raise LoopscoutError(
        f"{study.source}: no [[compensator]] named {name!r}; available: {_names(names)}"
        + ("" if names else " (use --from DIR/designs.json for an exploration's designs)")
    )


def _design_from_file(path: str, name: str) -> Any:
    try:
        text = read_text_file(path, "--from file")
    except StudyFileError as exc:
        raise LoopscoutError(exc.message) from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise LoopscoutError(f"--from {path}: not JSON ({exc.msg}, line {exc.lineno})") from None
    except RecursionError:
        raise LoopscoutError(f"--from {path}: JSON nested too deeply") from None
    if not isinstance(data, dict) or not isinstance(data.get("designs"), list):
        raise LoopscoutError(
            f"--from {path}: expected an object {{\"designs\": [...]}} as written by "
            "`loopscout explore`"
        )
    names: list[str] = []
    for i, d in enumerate(data["designs"]):
        if not isinstance(d, dict) or not isinstance(d.get("name"), str):
            raise LoopscoutError(f"--from {path}: designs[{i}] has no \"name\" string")
        names.append(d["name"])
        if d["name"] == name:
            return _compensator(d.get("compensator"), f"--from {path}: designs[{i}].compensator")
    raise LoopscoutError(f"--from {path}: no design named {name!r}; available: {_names(names)}")


def _compensator(obj: Any, where: str) -> Any:
    if not isinstance(obj, dict):
        raise LoopscoutError(f"{where} must be an object with gain, zeros and poles")
    gain = obj.get("gain")
    if isinstance(gain, bool) or not isinstance(gain, (int, float)) or not math.isfinite(gain) \
            or gain == 0:
        raise LoopscoutError(f"{where}.gain must be a finite nonzero number, got {gain!r}")
    roots: dict[str, list[complex]] = {}
    for key in ("zeros", "poles"):
        value = obj.get(key, [])
        if not isinstance(value, list):
            raise LoopscoutError(f"{where}.{key} must be a list of roots, got {value!r}")
        out: list[complex] = []
        for j, item in enumerate(value):
            r: complex | None = None
            if isinstance(item, (int, float)) and not isinstance(item, bool):
                r = complex(float(item), 0.0)
            elif isinstance(item, str):
                try:
                    r = complex(item.replace(" ", ""))
                except ValueError:
                    r = None
            if r is None or not (math.isfinite(r.real) and math.isfinite(r.imag)):
                raise LoopscoutError(
                    f"{where}.{key}[{j}] is not a root: {item!r} (a number or \"-2+3j\")"
                )
            out.append(r)
        upper = sorted((x for x in out if x.imag > 0), key=lambda x: (x.real, x.imag))
        lower = sorted((x.conjugate() for x in out if x.imag < 0), key=lambda x: (x.real, x.imag))
        if len(upper) != len(lower) or any(
            abs(a - b) > 1e-9 * max(abs(a), 1.0) for a, b in zip(upper, lower, strict=True)
        ):
            raise LoopscoutError(f"{where}.{key}: complex roots must come in conjugate pairs")
        # exact conjugates
        roots[key] = [x for x in out if x.imag == 0] + [y for u in upper
                                                         for y in (u, u.conjugate())]
    if len(roots["zeros"]) > len(roots["poles"]):
        raise LoopscoutError(
            f"{where} is improper: {len(roots['zeros'])} zeros but {len(roots['poles'])} poles "
            "(a compensator needs at least as many poles as zeros)"
        )
    return Rational(gain=float(gain), zeros=tuple(roots["zeros"]), poles=tuple(roots["poles"]))


# -- the command ---------------------------------------------------------------------------
def _run(args: argparse.Namespace) -> int:
    study = load_checked_study(args.study)
    if args.from_file is not None:
        comp = _design_from_file(args.from_file, args.design)
    else:
        comp = _design_from_study(study, args.design)
    if not comp.is_proper:
        raise LoopscoutError(
            f"design {args.design!r} is improper ({len(comp.zeros)} zeros, "
            f"{len(comp.poles)} poles): it cannot be sampled"
        )
    if args.prewarp is not None and args.method != "tustin-prewarp":
        raise LoopscoutError(f"--prewarp applies to --method tustin-prewarp, not {args.method}")
    T, tc = args.sample_time, args.compute_delay
    if T is None:  # the study's sampled controller ([search] sample_time)
        T = study.search.sample_time_s
        if T is None:
            raise LoopscoutError("--sample-time is required (the study has no "
                                 "`search.sample_time`)")
        tc = study.search.compute_delay_s if tc is None else tc
    obj = implementation(study, comp, name=args.design, sample_time_s=T,
                         compute_delay_s=0.0 if tc is None else tc, method=args.method,
                         prewarp_rad_s=args.prewarp, caution=args.caution)
    obj["source"] = {"study": study.source, "from": args.from_file}
    obj["structure"] = describe_structure(comp)
    if args.csv:
        _write_csv(args.csv, obj)
    if args.json:
        print_json(obj)
        return 0
    _print_text(study, comp, obj)
    return 0


#: at most this many samples of plant plus computation delay: the sampled loop's grids
#: grow with the delay line (1e5 samples took 16 s and 0.55 GB, 1e14 asked for 700 TiB)
MAX_DELAY_SAMPLES = 10_000


def _check_sampling_domain(plant_delay_s: float, T: float, compute_delay_s: float) -> None:
    """The sample time and the computation delay inside the study file's numerical domain
    (docs/study-file.md, as `[search] sample_time`): π/T in [1e-8, 1e8] rad/s, a nonzero
    computation delay in [1e-8, 1e8] s, the whole delay at most MAX_DELAY_SAMPLES samples."""

    if not FREQ_MIN <= math.pi / T <= FREQ_MAX:
        raise LoopscoutError(f"`--sample-time` {T:.6g} s puts π/T outside [{FREQ_MIN:g}, "
                             f"{FREQ_MAX:g}] rad/s (the study file's numerical domain)")
    lo, hi = 1.0 / FREQ_MAX, 1.0 / FREQ_MIN
    if compute_delay_s and not lo <= compute_delay_s <= hi:
        raise LoopscoutError(f"`--compute-delay` {compute_delay_s:.6g} s is outside "
                             f"[{lo:g}, {hi:g}] s (or 0)")
    samples = (plant_delay_s + compute_delay_s) / T
    if samples > MAX_DELAY_SAMPLES:
        raise LoopscoutError(
            f"`--sample-time` {T:.6g} s makes the delay ({plant_delay_s + compute_delay_s:.6g} "
            f"s) {samples:.6g} samples long; at most {MAX_DELAY_SAMPLES} "
            f"(--sample-time ≥ {(plant_delay_s + compute_delay_s) / MAX_DELAY_SAMPLES:.3g} s)")


def implementation(study: Any, comp: Any, *, name: str, sample_time_s: float,
                   compute_delay_s: float, method: str, prewarp_rad_s: float | None,
                   caution: str) -> dict[str, Any]:
    """The whole hand-off object (docs/interface.md keys plus extras)."""

    T = sample_time_s
    _check_sampling_domain(study.plant.delay_s, T, compute_delay_s)
    wn = math.pi / T
    plant = study.plant
    cont = design_metrics(plant, comp)
    wc = cont.get("crossover_rad_s")
    warnings: list[str] = []
    notes: list[str] = []
    mp = getattr(study, "measured", None)
    if mp is not None:  # a measured plant: the hand-off reads the model fitted to it
        warnings.append(
            f"the plant is a measured sweep ({mp.shown}): the continuous and sampled "
            f"figures here come from the model fitted to it (relative RMS error "
            f"{100 * mp.fit.rel_rms:.2g} % over the band)"
            + ("; the fit is POOR — check and balance read the data, use their figures"
               if mp.fit.poor else "; check and balance read the data itself"))
    used_method = method
    wp = None
    if method == "tustin-prewarp":
        wp = prewarp_rad_s if prewarp_rad_s is not None else wc
        if wp is None:
            used_method = "tustin"
            warnings.append("the continuous design has no gain crossover to prewarp at; "
                            "plain Tustin (no prewarping) was used")
        elif wp >= wn:
            what = "the prewarp frequency" if prewarp_rad_s is not None else \
                "the design's crossover (the prewarp frequency)"
            raise DesignError(
                f"{what} {wp:.6g} rad/s is at or above the Nyquist frequency π/T = {wn:.6g} "
                f"rad/s for the sample time {T:g} s; shorten the sample time"
                + ("" if prewarp_rad_s is not None else f" (ωc·T = {wp * T:.3g} rad)")
            )
    disc = discretize(comp, T, used_method, wp)
    stages = compensator_stages(comp, T, used_method, wp)
    sp = sample_plant(plant, T, compute_delay_s)
    loop = cont_loop_with(plant, comp, compute_delay_s)
    sm = sampled_loop_metrics(sp, disc, loop)
    pm_c, pm_s = cont.get("phase_margin_deg"), sm.get("phase_margin_deg")
    loss = None if pm_c is None or pm_s is None else float(pm_c - pm_s)
    rule = None if wc is None else math.degrees(wc * (T / 2.0 + compute_delay_s))
    wct = None if wc is None else wc * T
    b, a = disc.coefficients()

    # warnings with figures
    if not sm["closed_loop_stable"]:
        r = sm["closed_loop_pole_radius"]
        why = (f"largest closed-loop pole |z| = {r:.4g}" if r is not None else
               f"{sm['closed_loop_unstable_poles']} closed-loop pole(s) with |z| ≥ 1")
        warnings.append(
            f"the SAMPLED closed loop is UNSTABLE ({why}); shorten the sample time or redesign"
        )
    elif cont.get("closed_loop_stable") is False:
        warnings.append("the continuous design is unstable; the sampled loop is stable but "
                        "check the design itself")
    if wct is not None and wct > WC_T_WARN_RAD:
        assert wc is not None
        warnings.append(
            f"the sample time {T:g} s is long for the crossover {wc:.4g} rad/s: ωc·T = "
            f"{wct:.3g} rad > {WC_T_WARN_RAD:g} rad (common practice); the hold alone costs "
            f"about ωc·T/2 = {math.degrees(wct / 2):.3g} deg of phase; T ≤ "
            f"{WC_T_WARN_RAD / wc:.3g} s keeps within the rule"
        )
    if loss is not None and loss > 10.0 and sm["closed_loop_stable"]:
        warnings.append(f"sampling costs {loss:.3g} deg of phase margin (continuous "
                        f"{pm_c:.3g} deg, sampled {pm_s:.3g} deg)")
    fast = [r for r in (*comp.zeros, *comp.poles) if r.imag >= 0 and abs(r) >= wn / 2]
    if fast and used_method != "matched":
        warnings.append(
            "compensator root(s) at " + ", ".join(f"{abs(r):.4g}" for r in fast)
            + f" rad/s lie above half the Nyquist frequency π/T = {wn:.4g} rad/s; Tustin "
            "warps them (the discrete stage differs from the continuous one there)"
        )
    if used_method == "matched":
        alias = [r for r in (*comp.zeros, *comp.poles) if abs(r.imag) >= wn]
        if alias:
            warnings.append(
                "matched mapping folds compensator roots above the Nyquist frequency onto "
                "lower ones: " + ", ".join(f"{r.real:.4g}±{abs(r.imag):.4g}j"
                                           for r in alias if r.imag > 0))
    plant_fast = [r for r in plant.poles if r.imag > 0 and abs(r.imag) >= wn]
    if plant_fast:
        warnings.append(
            "plant mode(s) at " + ", ".join(f"{abs(r.imag):.4g}" for r in plant_fast)
            + f" rad/s lie above π/T = {wn:.4g} rad/s and alias; the sampled figures include "
            "them exactly, but consider an anti-aliasing filter (not modelled)"
        )
    if sm.get("gain_margin_db") is not None and sm["gain_margin_db"] < 6.0 \
            and sm["closed_loop_stable"]:
        warnings.append(f"sampled gain margin {sm['gain_margin_db']:.3g} dB is below 6 dB "
                        "(common practice)")
    notes.extend(NOT_MODELLED)
    form = industrial_form(comp)
    if form is not None:
        form = dict(form)
        form["note"] = (
            "continuous-time parameters; a PID block that discretizes them its own way will "
            "not match the sections exactly — load the sections for this analysis to hold"
        )

    def roots_json(r: Sequence[complex]) -> list[Any]:
        return [root_to_json(x) for x in r]

    sampled_keys = dict(sm)
    return {
        "design": name,
        "sample_time_s": T,
        "compute_delay_s": compute_delay_s,
        "method": used_method,
        "prewarp_rad_s": disc.prewarp_rad_s,
        "discrete": {"gain": disc.gain, "zeros": roots_json(disc.zeros),
                     "poles": roots_json(disc.poles)},
        "sections": [{"b": list(s.b), "a": list(s.a), "stage": s.label} for s in stages],
        "continuous_metrics": cont,
        "sampled_metrics": sampled_keys,
        "phase_loss_deg": loss,
        "phase_loss_rule_deg": rule,
        "wc_T_rad": wct,
        "nyquist_rad_s": wn,
        "continuous": comp.to_dict(),
        "stages": [
            {
                "section": i + 1,
                "kind": s.kind,
                "label": s.label,
                "continuous": s.continuous.to_dict(),
                "discrete": {"gain": s.discrete.gain, "zeros": roots_json(s.discrete.zeros),
                             "poles": roots_json(s.discrete.poles)},
            }
            for i, s in enumerate(stages)
        ],
        "difference_equation": difference_equations(stages),
        "sections_note": SECTIONS_NOTE,
        "direct_form": {"b": [float(x) for x in b], "a": [float(x) for x in a]},
        "industrial_form": form,
        "warnings": warnings,
        "notes": notes,
        "study": study_header(study),
        "caution": caution,
    }


# -- output --------------------------------------------------------------------------------
def _write_csv(path: str, obj: dict[str, Any]) -> None:
    try:
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            pw = obj["prewarp_rad_s"]
            w.writerow([f"# design {obj['design']}; sample time {obj['sample_time_s']:g} s; "
                        f"method {obj['method']}"
                        + (f" (prewarp {pw:.6g} rad/s)" if pw else "")
                        + "; e = setpoint - measurement in, u out; a0 = 1"])
            w.writerow([f"# {obj['caution']}"])
            w.writerow(["section", "b0", "b1", "b2", "a0", "a1", "a2", "stage"])
            for i, s in enumerate(obj["sections"]):
                w.writerow([i + 1, *(repr(float(x)) for x in (*s["b"], *s["a"])), s["stage"]])
    except OSError as exc:
        raise LoopscoutError(f"--csv {path}: cannot write it ({exc.strerror})") from None


def _zfactored(gain: float, zeros: Sequence[Any], poles: Sequence[Any], var: str = "z") -> str:
    return factored(gain, [complex(x) for x in zeros], [complex(x) for x in poles],
                     var=var, digits=6, sep=" ")


def _print_text(study: Any, comp: Any, obj: dict[str, Any]) -> None:
    T = obj["sample_time_s"]
    p = study.plant
    print(safe(f"study: {study.name}  ({study.source})"))
    print(f"plant: {factored(p.gain, p.zeros, p.poles)}"
          + (f" * exp(-{p.delay_s:g} s)" if p.delay_s else ""))
    src = f"  (from {obj['source']['from']})" if obj["source"]["from"] else ""
    print(safe(f"design: {obj['design']}{src}   "
                f"C(s) = {factored(comp.gain, comp.zeros, comp.poles)}"))
    print(f"sampling: T = {T:g} s ({1 / T:.4g} Hz), Nyquist frequency π/T = "
          f"{obj['nyquist_rad_s']:.4g} rad/s, computation delay {obj['compute_delay_s']:g} s")
    meth = {"tustin-prewarp": "Tustin prewarped at", "tustin": "Tustin (no prewarping)",
            "matched": "matched pole-zero mapping (low-frequency gain matched)"}[obj["method"]]
    if obj["method"] == "tustin-prewarp":
        meth += f" {obj['prewarp_rad_s']:.6g} rad/s"
    wct = obj["wc_T_rad"]
    print(f"method: {meth}" + (f"   (ωc·T = {wct:.3g} rad)" if wct is not None else ""))
    print()
    d = obj["discrete"]
    print(f"C(z) = {_zfactored(d['gain'], d['zeros'], d['poles'])}")
    print()
    print("sections, run in this order (a0 = 1; e = setpoint - measurement in, u out):")
    head = ["sec", "b0", "b1", "b2", "a0", "a1", "a2", "stage"]
    rows = [head] + [
        [str(i + 1), *(f"{x:.10g}" for x in (*s["b"], *s["a"])), s["stage"]]
        for i, s in enumerate(obj["sections"])
    ]
    widths = [max(len(r[j]) for r in rows) for j in range(len(head) - 1)]
    for r in rows:
        cells = [c.rjust(w) for c, w in zip(r[:-1], widths, strict=True)]
        print("  " + "  ".join(cells) + "  " + r[-1])
    print(textwrap.fill(obj["sections_note"], 88, initial_indent="  ", subsequent_indent="  "))
    print()
    print("difference equations:")
    for line in obj["difference_equation"]:
        print(f"  {line}")
    form = obj["industrial_form"]
    if form is not None:
        print()
        print(f"industrial form (continuous parameters): {form['structure']}")
        if form.get("standard"):
            print(f"  standard (ISA) {form['formulas']['standard']}: "
                  + ", ".join(_param(k, v) for k, v in form["standard"].items()))
        print(f"  parallel {form['formulas']['parallel']}: "
              + ", ".join(_param(k, v) for k, v in form["parallel"].items()))
        print("  (a PID block that discretizes these its own way will not match the sections "
              "exactly)")
    print()
    _print_metrics(obj)
    if obj["warnings"]:
        print()
        print("warnings:")
        for w in obj["warnings"]:
            print(textwrap.fill(w, 88, initial_indent="  - ", subsequent_indent="    "))
    print()
    print("not modelled:")
    for n in obj["notes"]:
        print(textwrap.fill(n, 88, initial_indent="  - ", subsequent_indent="    "))
    print()
    print(obj["caution"])


def _param(key: str, value: float) -> str:
    name, _, unit = key.partition("_")
    unit = {"s": " s", "per": " 1/s"}.get(unit.split("_")[0], "") if unit else ""
    return f"{name} = {value:.6g}{unit}"


def _print_metrics(obj: dict[str, Any]) -> None:
    c, s = obj["continuous_metrics"], obj["sampled_metrics"]
    rows = [
        ("crossover [rad/s]", "crossover_rad_s"),
        ("phase margin [deg]", "phase_margin_deg"),
        ("gain margin [dB]", "gain_margin_db"),
        ("phase crossover [rad/s]", "phase_crossover_rad_s"),
        ("delay margin [s]", "delay_margin_s"),
        ("Ms", "sensitivity_peak"),
        ("Mt", "complementary_peak"),
        ("closed loop stable", "closed_loop_stable"),
    ]
    table = [["loop", "continuous", "sampled"]]
    for label, key in rows:
        table.append([label, _fmt(c.get(key)), _fmt(s.get(key))])
    widths = [max(len(r[j]) for r in table) for j in range(3)]
    for i, r in enumerate(table):
        print("  " + r[0].ljust(widths[0]) + "  " + r[1].rjust(widths[1]) + "  "
              + r[2].rjust(widths[2]))
        if i == 0:
            print("  " + "  ".join("-" * w for w in widths))
    loss, rule = obj["phase_loss_deg"], obj["phase_loss_rule_deg"]
    if loss is not None:
        extra = "" if rule is None else (
            f" (rule of thumb ωc·(T/2 + computation delay) = {rule:.3g} deg)")
        print(f"  phase lost to sampling: {loss:.3g} deg{extra}")


def _fmt(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "NO"
    return f"{float(v):.4g}"

