"""The ``loopscout`` command line: the only module that prints or exits.

Every bad input becomes one line on stderr and exit status 2 (``--debug`` shows the
traceback); ``--json`` prints exactly one JSON object on stdout.
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
from collections.abc import Callable, Sequence
from typing import NoReturn

from explorer.cli import balance as balance_cmd
from explorer.cli import explore as explore_cmd
from explorer.cli import implement as implement_cmd
from explorer.cli import report as report_cmd
from explorer.cli.output import design_table, print_data_notes, print_json, print_study, safe
from explorer.core.errors import LoopscoutError
from explorer.evaluation.phase_domain import load_checked_study
from explorer.model.text_file import one_line

__all__ = ["main", "build_parser"]

from explorer.core.caution import CAUTION  # noqa: E402  (one text for CLI, README, report)
from explorer.evaluation.records import given_designs, study_header
from explorer.model.study import MAX_SEED, MAX_TRIALS

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
    for module in _COMMAND_MODULES:
        module.register(sub, CAUTION)
    return parser


#: Modules adding commands (``register(sub, caution)``), in --help order.
_COMMAND_MODULES = (balance_cmd, explore_cmd, report_cmd, implement_cmd)


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
        print(
            f"loopscout: the required package {exc.name!r} is not installed in this Python "
            "environment; install loopscout with its dependencies (README: pip install -e .)",
            file=sys.stderr,
        )
        return 1
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
