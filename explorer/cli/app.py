"""The ``loopscout`` command line: the only module that prints or exits.

Every bad input becomes one line on stderr and exit status 2 (``--debug`` shows the
traceback); ``--json`` prints exactly one JSON object on stdout.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback
from collections.abc import Callable, Sequence
from typing import NoReturn

from explorer.cli import missing_package
from explorer.cli.output import design_table, print_data_notes, print_json, print_study, safe
from explorer.core.caution import CAUTION
from explorer.core.errors import LoopscoutError
from explorer.evaluation.phase_domain import load_checked_study
from explorer.evaluation.records import given_designs, study_header
from explorer.model.study import MAX_SEED, MAX_TRIALS
from explorer.model.text_file import one_line

__all__ = ["main", "build_parser"]

#: Modules adding commands (``register(sub, caution)``), in --help order, and the
#: commands each adds. They are loaded by name, at this edge, and only the one a
#: command needs: ``check`` (and ``balance``, ``implement``) need numpy and scipy only,
#: while ``explore``, ``report`` and ``charts`` need Optuna, pandas and Altair.
_COMMAND_MODULES: dict[str, tuple[str, ...]] = {
    "explorer.cli.balance": ("balance",),
    "explorer.cli.explore": ("explore",),
    "explorer.cli.report": ("report", "charts"),
    "explorer.cli.implement": ("implement",),
}

_EXAMPLES = """\
examples:
  loopscout check studies/kiln_damper.toml
  loopscout check studies/dome_drive.toml --json > dome.json
"""


class _OneLineParser(argparse.ArgumentParser):
    """argparse with a one-line error (and exit status 2)."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: error: {message} (see --help)\n")


def _modules_for(argv: Sequence[str] | None) -> list[str]:
    """The command modules to load for ``argv``: none for ``check``, the one module of
    another named command, every module otherwise (help, no or an unknown command)."""
    words = [a for a in (sys.argv[1:] if argv is None else argv) if not a.startswith("-")]
    if words and words[0] == "check":
        return []
    named = [m for m, commands in _COMMAND_MODULES.items() if words and words[0] in commands]
    return named or list(_COMMAND_MODULES)


def build_parser(argv: Sequence[str] | None = None) -> argparse.ArgumentParser:
    """The parser; with ``argv``, holding only the command modules it needs (the
    others may need libraries that a check does not)."""
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
    for name in _modules_for(argv) if argv is not None else list(_COMMAND_MODULES):
        importlib.import_module(name).register(sub, CAUTION)
    return parser


# --------------------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------------------
def _cmd_check(args: argparse.Namespace) -> int:
    study = load_checked_study(args.study)
    if not study.compensators:
        raise LoopscoutError(f"{study.source}: no [[compensator]] entries to check")
    designs = given_designs(study)
    if args.json:
        print_json({"designs": designs, "study": study_header(study), "caution": CAUTION})
    else:
        print_study(study)
        print(design_table(designs))
        for d in designs:
            if d["misses"]:
                print(safe(f"  {d['name']} misses: " + "; ".join(d["misses"])))
        print_data_notes(designs)
        print()
        print(CAUTION)
    return 0


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
    try:
        parser = build_parser(sys.argv[1:] if argv is None else argv)
    except ModuleNotFoundError as exc:  # an incomplete install, not a defect
        return missing_package(exc)
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
        print(f"loopscout: error: {safe(one_line(str(exc)))}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into `head` and the like: not an error
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("loopscout: interrupted", file=sys.stderr)
        return 130
    except ModuleNotFoundError as exc:  # an incomplete install, not a defect
        if args.debug:
            traceback.print_exc()
        return missing_package(exc)
    except Exception as exc:  # a defect: still one line unless --debug
        if args.debug:
            traceback.print_exc()
        detail = safe(one_line(str(exc)))
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
