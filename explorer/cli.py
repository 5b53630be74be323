"""The ``loopscout`` command line: the only module that prints or exits.

Every bad input becomes one line on stderr and exit status 2 (``--debug`` shows the
traceback); ``--json`` prints exactly one JSON object on stdout.
"""

from __future__ import annotations

import argparse
import sys
import traceback
from collections.abc import Callable, Sequence
from typing import Any, NoReturn

from explorer.errors import LoopscoutError
from explorer.evaluate import METRIC_UNITS
from explorer.json_text import json_text
from explorer.metric_registry import MARGIN_KEYS

__all__ = ["main", "build_parser"]

from explorer.caution import CAUTION  # noqa: E402  (one text for CLI, README, report)

_EXAMPLES = """\
examples:
  loopscout check studies/kiln_damper.toml
  loopscout check studies/dome_drive.toml --json > dome.json
"""


class _OneLineParser(argparse.ArgumentParser):
    """argparse with a one-line error (and exit status 2)."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: error: {message} (see --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _OneLineParser(
        prog="loopscout",
        description=(
            "Design and compare single-loop compensators: loop metrics with the delay "
            "included, phase-balanced hand designs, optimized structures, trade-off reports."
        ),
        epilog=_EXAMPLES + "\n" + CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_OneLineParser)

    check = sub.add_parser(
        "check",
        help="evaluate every [[compensator]] of a study on its plant",
        description=(
            "Evaluate each [[compensator]] of STUDY on the study's plant: crossovers, "
            "margins, Ms/Mt, Nyquist stability with the delay, step-response figures, "
            "and whether it meets the targets and limits."
        ),
        epilog="example:\n  loopscout check studies/kiln_damper.toml --json\n\n" + CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    check.add_argument("study", metavar="STUDY", help="study file (TOML), see docs/study-file.md")
    check.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    check.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
    )
    check.set_defaults(run=_cmd_check)
    # commands that live in their own modules register themselves here; each module
    # exposes ``register(sub, caution)`` adding a subparser whose ``run`` default
    # returns an exit status (and raises LoopscoutError on bad input)
    import importlib

    for name in _COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name != name:
                raise
            continue
        module.register(sub, CAUTION)
    return parser


#: Modules adding commands (``register(sub, caution)``), in --help order.
_COMMAND_MODULES = ("explorer.cli_balance", "explorer.cli_explore", "explorer.cli_report",
                    "explorer.cli_implement")


# --------------------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------------------
def _study_header(study: Any) -> dict[str, Any]:
    from explorer.evaluate import study_header

    return study_header(study)


def _cmd_check(args: argparse.Namespace) -> int:
    from explorer.evaluate import given_designs
    from explorer.study import load_study

    study = load_study(args.study)
    if not study.compensators:
        raise LoopscoutError(f"{study.source}: no [[compensator]] entries to check")
    designs = given_designs(study)
    if args.json:
        _print_json({"designs": designs, "study": _study_header(study), "caution": CAUTION})
    else:
        _print_study(study)
        print(_design_table(designs))
        for d in designs:
            if d["misses"]:
                print(_safe(f"  {d['name']} misses: " + "; ".join(d["misses"])))
        _print_data_notes(designs)
        print()
        print(CAUTION)
    return 0


# --------------------------------------------------------------------------------------
# output helpers
# --------------------------------------------------------------------------------------
def _print_json(obj: dict[str, Any]) -> None:
    sys.stdout.write(json_text(obj) + "\n")


def _print_study(study: Any) -> None:
    t = study.targets
    print(_safe(f"study: {study.name}  ({study.source})"))
    p = study.plant
    mp = getattr(study, "measured", None)
    if mp is not None:
        _print_measured(mp)
    else:
        print(
            f"plant: {_factored(p.gain, p.zeros, p.poles)}"
            + (f" * exp(-{p.delay_s:g} s)" if p.delay_s else "")
        )
    wc = t.crossover_rad_s
    wc_s = (
        "free"
        if wc is None
        else (f"[{wc[0]:.4g}, {wc[1]:.4g}]" if isinstance(wc, tuple) else f"{wc:.4g}")
    )
    pm_s = "none" if t.phase_margin_deg is None else f"{t.phase_margin_deg:.2f} deg"
    print(
        f"targets: crossover {wc_s} rad/s, phase margin {pm_s}, "
        f"loop integrators >= {t.integrators}"
    )
    for line in t.derived_from:
        print(f"  converted: {line}")
    if study.limits:
        print("limits: " + ", ".join(f"{k} {v:g}" for k, v in study.limits.items()))
    v = getattr(study, "variation", None)
    if v is not None:
        parts = []
        if v.gain:
            parts.append(f"gain x[{v.gain[0]:g}, {v.gain[1]:g}]")
        if v.delay_s:
            parts.append(f"delay [{v.delay_s[0]:g}, {v.delay_s[1]:g}] s")
        if v.time_scale:
            parts.append(f"time scale x[{v.time_scale[0]:g}, {v.time_scale[1]:g}]")
        if v.members:
            parts.append(f"{len(v.members)} listed member(s)")
        print("plant family: " + ", ".join(parts)
              + " (limits and stability apply to every member; targets to the nominal)")
    print()


def _print_measured(mp: Any) -> None:
    """The measured plant: the file, its band, what is assumed, the fitted model and
    its error over the band (docs/measured-data.md)."""
    lo, hi = mp.data.band_rad_s
    m = mp.fit.model
    print(_safe(f"plant: measured sweep {mp.shown}, {mp.data.omega_rad_s.size} points, "
                f"band {lo:.4g} to {hi:.4g} rad/s; frequency figures are read on the data"))
    given = "given" if mp.integrators is not None else "estimated from the lowest points"
    print(f"  assumed: {mp.unstable_poles} open-loop unstable pole(s) (given), "
          f"{mp.plant_integrators} integrator(s) ({given})")
    print(f"  fitted model (vector fitting): {_factored(m.gain, m.zeros, m.poles)}"
          + (f" * exp(-{m.delay_s:.4g} s)" if m.delay_s else ""))
    f = mp.fit
    print(f"  fit error over the band: {100 * f.rel_rms:.2f} % RMS ({100 * f.rel_max:.2f} % "
          f"max), magnitude {f.mag_max_db:.2f} dB max, phase {f.phase_max_deg:.2f} deg max")
    if f.time_from_fit:
        print("  time responses (overshoot, settling, rise, peak |u|, IAE) come from the "
              "fitted model")
    else:
        for note in f.notes:
            if "withheld" in note:
                print(_safe(f"  {note}"))
    low = mp.data.low_coherence_rows()
    if low:
        w = mp.data.omega_rad_s
        print(f"  low coherence (< 0.6) at {len(low)} point(s): "
              + ", ".join(f"{w[k]:.4g}" for k in low) + " rad/s")


def _print_data_notes(designs: list[dict[str, Any]]) -> None:
    """Per design on a measured plant: the interpolation error bounds, what lies
    outside the band, why time figures are withheld; then, once, the assumptions (the
    same for every design but the Nyquist count, which is left out here)."""
    data = [d for d in designs if "band_rad_s" in d]
    units = {"crossover_rad_s": "rad/s", "phase_margin_deg": "deg", "gain_margin_db": "dB",
             "delay_margin_s": "s", "sensitivity_peak": "", "complementary_peak": ""}
    for d in data:
        err = d.get("interpolation_error") or {}
        shown = [f"{METRIC_UNITS.get(k, (k, ''))[0]} ±{v:.2g}" + (f" {units[k]}"
                                                                  if units[k] else "")
                 for k, v in err.items() if k in units]
        if shown:
            print(_safe(f"  {d['name']} interpolation error bounds: " + ", ".join(shown)))
        for line in d.get("outside_band") or []:
            print(_safe(f"  {d['name']} outside the band: {line}"))
        if d.get("time_note"):
            print(_safe(f"  {d['name']}: {d['time_note']}"))
    if data:
        print("  assumptions about the data:")
        for line in data[0].get("assumptions") or []:
            if not line.startswith("Nyquist count"):
                print(_safe(f"    - {line}"))


def _factored(gain: float, zeros: Sequence[complex], poles: Sequence[complex], *,
              var: str = "s", digits: int = 4, sep: str = "") -> str:
    """Roots form as text: real factors (s+a), complex pairs (s^2+bs+c), in the
    variable ``var`` (s, or z for a discrete compensator) with ``digits`` significant
    digits, factors joined by ``sep``."""
    def fac(roots: Sequence[complex]) -> str:
        out = []
        for r in (complex(x) for x in roots):
            if r.imag < 0:
                continue
            if r == 0:
                out.append(var)
            elif r.imag == 0:
                out.append(f"({var}{-r.real:+.{digits}g})")
            else:
                out.append(f"({var}^2{-2 * r.real:+.{digits}g}{var}"
                           f"{abs(r) * abs(r):+.{digits}g})")
        return sep.join(out) or "1"

    num, den = fac(zeros), fac(poles)
    text = f"{gain:.6g}" + (f" {num}" if num != "1" else "")
    return text + (f" / {den}" if den != "1" else "")


def _fmt_value(key: str, value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "NO"
    if isinstance(value, list):
        return ", ".join(f"{v:.4g}" for v in value) or "-"
    if isinstance(value, int):
        return str(value)
    return f"{value:.4g}"


def _table_rows() -> tuple[str, ...]:
    """docs/interface.md METRICS keys in their order, with the lower gain margin shown
    right after the phase crossover."""
    from explorer.evaluate import METRIC_KEYS

    keys = list(METRIC_KEYS)
    keys.insert(keys.index("phase_crossover_rad_s") + 1, "lower_gain_margin_db")
    return tuple(keys)


_TABLE_ROWS = _table_rows()


#: Figures that read as robustness margins only when the closed loop is stable.
_MARGIN_KEYS = MARGIN_KEYS
#: Rows of the sampled loop in a design table (a study with [search] sample_time).
_SAMPLED_ROWS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db", "delay_margin_s",
                 "sensitivity_peak", "closed_loop_stable", "overshoot_pct", "settling_time_s",
                 "iae_load")
UNSTABLE_MARGIN_NOTE = (
    "* closed loop unstable: these figures are distances of the Nyquist curve from -1, "
    "not margins of a working loop"
)


def _design_table(designs: list[dict[str, Any]]) -> str:
    """Metrics as rows, designs as columns, with units."""
    head = ["", *[_safe(str(d["name"])) for d in designs]]
    rows = [
        ["structure", *[d["structure"] for d in designs]],
        ["order", *[str(d["order"]) for d in designs]],
        ["compensator", *[_factored_dict(d["compensator"]) for d in designs]],
    ]
    unstable = [d["metrics"].get("closed_loop_stable") is False for d in designs]
    for key in _TABLE_ROWS:
        label, unit = METRIC_UNITS.get(key, (key, ""))
        name = f"{label} [{unit}]" if unit and unit != "-" else label
        rows.append([name, *[
            _fmt_value(key, d["metrics"].get(key))
            + (" *" if bad and key in _MARGIN_KEYS and d["metrics"].get(key) is not None else "")
            for d, bad in zip(designs, unstable, strict=True)
        ]])
    if any("worst" in d for d in designs):
        from explorer.family import WORST_KEYS

        for key in WORST_KEYS:
            label, unit = METRIC_UNITS.get(key, (key, ""))
            name = f"worst {label} [{unit}]" if unit and unit != "-" else f"worst {label}"
            rows.append([name, *[
                _fmt_value(key, d["worst"].get(key)) if "worst" in d else "" for d in designs
            ]])
        rows.append(["worst-Ms member", *[_member(d.get("worst_member")) for d in designs]])
    if any(d.get("sampled_metrics") for d in designs):
        # the loop that runs, the one meets_targets judges (docs/explore.md)
        t = next(d.get("sample_time_s") for d in designs if d.get("sampled_metrics"))
        for key in _SAMPLED_ROWS:
            label, unit = METRIC_UNITS.get(key, (key, ""))
            name = f"sampled {label} [{unit}]" if unit and unit != "-" else f"sampled {label}"
            rows.append([name, *[
                _fmt_value(key, (d.get("sampled_metrics") or {}).get(key))
                if d.get("sampled_metrics") else "" for d in designs
            ]])
        rows.append(["sample time [s]", *[f"{t:g}" for _ in designs]])
    rows.append(["meets targets", *[_fmt_value("", d["meets_targets"]) for d in designs]])
    table = [head, *rows]
    widths = [max(len(r[i]) for r in table) for i in range(len(head))]
    lines = []
    for j, r in enumerate(table):
        lines.append(
            "  ".join(
                c.ljust(w) if i == 0 else c.rjust(w)
                for i, (c, w) in enumerate(zip(r, widths, strict=True))
            )
        )
        if j == 0:
            lines.append("  ".join("-" * w for w in widths))
    if any(unstable):
        lines.append(UNSTABLE_MARGIN_NOTE)
    return "\n".join(lines)


def _member(m: dict[str, Any] | None) -> str:
    """A worst member in a table cell: gain factor, delay, time scale (or its label)."""
    if not m:
        return ""
    if m.get("gain_factor") is None:
        return str(m.get("where", ""))
    return f"g x{m['gain_factor']:.3g}, {m['delay_s']:.3g} s, t x{m['time_scale']:.3g}"


def _factored_dict(c: dict[str, Any]) -> str:
    return _factored(c["gain"], [complex(z) for z in c["zeros"]], [complex(p) for p in c["poles"]])


# --------------------------------------------------------------------------------------
# entry point
# --------------------------------------------------------------------------------------
def _tolerant_streams() -> None:
    """Output on a console that cannot encode ω, ∞ or — gets '?' for them instead of an
    error (a legacy code page, PYTHONIOENCODING=ascii)."""
    for stream in (sys.stdout, sys.stderr):
        reconfigure = getattr(stream, "reconfigure", None)
        if callable(reconfigure):
            try:
                reconfigure(errors="replace")
            except (ValueError, OSError):  # a detached or closed stream: leave it
                pass


def main(argv: Sequence[str] | None = None) -> int:
    _tolerant_streams()
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help(sys.stderr)
        return 2
    run: Callable[[argparse.Namespace], int] = args.run
    try:
        _check_options(args)
        return run(args)
    except LoopscoutError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"loopscout: error: {_safe(_one_line(str(exc)))}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into `head` and the like: not an error
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("loopscout: interrupted", file=sys.stderr)
        return 130
    except ModuleNotFoundError as exc:  # an incomplete install, not a defect
        if args.debug:
            traceback.print_exc()
        print(
            f"loopscout: the required package {exc.name!r} is not installed in this Python "
            "environment; install loopscout with its dependencies (README: pip install -e .)",
            file=sys.stderr,
        )
        return 1
    except Exception as exc:  # a defect: still one line unless --debug
        if args.debug:
            traceback.print_exc()
        detail = _safe(_one_line(str(exc)))
        if len(detail) > 200:
            detail = detail[:197] + "..."
        print(
            f"loopscout: internal error (a defect of loopscout, not of your input): "
            f"{type(exc).__name__}: {detail} (rerun with --debug for the traceback and "
            "report it)",
            file=sys.stderr,
        )
        return 1


def _check_options(args: argparse.Namespace) -> None:
    """Numeric options obey the same rules as their study-file keys (``--seed`` as
    ``[search] seed``, ``--trials`` as ``[search] trials``)."""
    from explorer.study import MAX_SEED, MAX_TRIALS

    for opt, low, high in (("seed", 0, MAX_SEED), ("trials", 1, MAX_TRIALS)):
        value = getattr(args, opt, None)
        if value is None or isinstance(value, bool) or not isinstance(value, int):
            continue
        if not low <= value <= high:
            shown = str(value) if abs(value) < 10**15 else f"{float(value):.6g}"
            raise LoopscoutError(
                f"`--{opt}` must be an integer in [{low}, {high}] (as `[search] {opt}`), "
                f"got {shown}"
            )


def _one_line(text: str) -> str:
    return " ".join(text.split())


_CONTROL = {i: f"\\x{i:02x}" for i in (*range(0x20), *range(0x7F, 0xA0))}
_CONTROL.update({0x2028: "\\u2028", 0x2029: "\\u2029"})
_CONTROL.pop(ord("\n"))


def _safe(text: str) -> str:
    """Text for the terminal: C0/C1 control characters (ESC sequences that recolour,
    retitle or move the cursor, bells, carriage returns) shown as ``\\x1b`` escapes;
    newlines kept (callers print lines)."""
    return text.translate(_CONTROL)
