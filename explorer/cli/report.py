"""``loopscout report`` (offline HTML) and ``loopscout charts`` (PNG/SVG for slides).

Designs come from a ``designs.json`` written by ``explore`` (``{"designs": [...]}``)
or, without one, from the study's ``[[compensator]]`` entries evaluated like
``check``. Bad input raises :class:`explorer.core.errors.LoopscoutError` (one line, exit 2).
"""

from __future__ import annotations

import argparse
import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from explorer.core.errors import LoopscoutError, StudyFileError
from explorer.evaluation import records as evaluate
from explorer.evaluation.phase_domain import load_checked_study
from explorer.model.text_file import read_text_file
from explorer.outputs.report import export_charts, write_report

__all__ = ["register", "load_designs", "given_designs"]


def given_designs(study: Any) -> Sequence[Mapping[str, Any]]:
    """The study's [[compensator]] entries as DESIGN records (origin "given")."""

    if not study.compensators:
        raise LoopscoutError(f"{study.source}: no [[compensator]] entries and no --designs file")
    return evaluate.given_designs(study)


def load_designs(path: str | Path) -> list[dict[str, Any]]:
    """Read ``{"designs": [...]}``; one-line LoopscoutError on anything unreadable or of
    the wrong shape (the same file checks as a study: a regular file of at most 1 MiB,
    UTF-8 text)."""
    return load_exploration(path)[0]


def load_exploration(
    path: str | Path,
) -> tuple[list[dict[str, Any]], dict[str, Any] | None, list[str] | None]:
    """The designs of a designs.json, with the exploration's ``answer`` and ``summary``
    when the file has them (an explore output), so the report and the slides mark the
    same recommended design; one-line LoopscoutError on a malformed file."""

    shown = _show(str(path))
    try:
        text = read_text_file(path, "--designs file")
    except StudyFileError as exc:
        raise LoopscoutError(f"--designs: {exc.message}") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise LoopscoutError(
            f"--designs {shown}: not JSON ({exc.msg}, line {exc.lineno})"
        ) from None
    except RecursionError:
        raise LoopscoutError(f"--designs {shown}: JSON nested too deeply") from None
    designs = data.get("designs") if isinstance(data, dict) else None
    if not isinstance(designs, list) or not designs:
        raise LoopscoutError(
            f"--designs {shown}: expected an object with a non-empty 'designs' list"
        )
    for i, d in enumerate(designs):
        problem = _design_problem(d)
        if problem:
            raise LoopscoutError(f"--designs {shown}: designs[{i}] {problem}")
    answer = data.get("answer")
    if answer is not None:
        names = {d["name"] for d in designs}
        if not isinstance(answer, dict) or answer.get("design") not in names | {None}:
            raise LoopscoutError(
                f"--designs {shown}: 'answer' must be an object whose 'design' names a "
                "listed design (or is null)"
            )
    summary = data.get("summary")
    if summary is not None and not (
        isinstance(summary, list) and all(isinstance(x, str) for x in summary)
    ):
        raise LoopscoutError(f"--designs {shown}: 'summary' must be a list of text lines")
    return designs, answer, summary


def _show(path: str) -> str:
    return json.dumps(path) if any(ord(c) < 0x20 or 0x7F <= ord(c) < 0xA0 for c in path) else path


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _design_problem(d: Any) -> str:
    """What is wrong with one DESIGN record (docs/interface.md), or "" when it is usable."""
    if not isinstance(d, dict):
        return "is not an object"
    for key in ("name", "compensator", "metrics"):
        if key not in d:
            return f"lacks '{key}'"
    if not isinstance(d["name"], str) or not d["name"].strip():
        return "'name' must be a non-empty string"
    if any(ord(c) < 0x20 or 0x7F <= ord(c) < 0xA0 for c in d["name"]) or len(d["name"]) > 200:
        # the study file's rule for names: they are printed on terminals and in reports
        return "'name' must be at most 200 characters with no control characters"
    if not isinstance(d["metrics"], dict):
        return "'metrics' must be an object"
    c = d["compensator"]
    if not isinstance(c, dict):
        return "'compensator' must be an object with gain, zeros and poles"
    if not _is_number(c.get("gain")) or c.get("gain") == 0:
        return "'compensator.gain' must be a finite nonzero number"
    for key in ("zeros", "poles"):
        roots = c.get(key, [])
        if not isinstance(roots, list):
            return f"'compensator.{key}' must be a list of roots"
        for j, r in enumerate(roots):
            try:
                z = complex(r.replace(" ", "")) if isinstance(r, str) else None
            except ValueError:
                z = None
            if not (_is_number(r) or (z is not None and math.isfinite(abs(z)))):
                return f"'compensator.{key}[{j}]' is not a root (a number or \"-2+3j\")"
    return ""


def _inputs(
    args: argparse.Namespace,
) -> tuple[Any, Sequence[Mapping[str, Any]], dict[str, Any] | None, list[str] | None]:

    study = load_checked_study(args.study)
    if args.designs:
        return (study, *load_exploration(args.designs))
    return study, given_designs(study), None, None


def _check_out_file(path: Path) -> None:
    """Refuse an unwritable --out before the charts are built (a missing folder was
    refused only after 20 s of rendering)."""

    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise LoopscoutError(f"cannot write report {path}: it is a directory")
    if not folder.is_dir():
        raise LoopscoutError(f"cannot write report {path}: the folder {folder} does not exist")


def _cmd_report(args: argparse.Namespace) -> int:
    study, designs, answer, summary = _inputs(args)
    _check_out_file(Path(args.out))
    out = write_report(study, designs, Path(args.out), answer=answer, summary=summary)
    print(f"wrote {out}")
    return 0


def _cmd_charts(args: argparse.Namespace) -> int:
    study, designs, answer, _ = _inputs(args)
    for p in export_charts(study, designs, Path(args.out), formats=tuple(args.format),
                           answer=answer):
        print(f"wrote {p}")
    return 0


def register(sub: Any, caution: str) -> None:
    """Add ``report`` and ``charts`` to the CLI."""
    common = dict(formatter_class=argparse.RawDescriptionHelpFormatter)
    rep = sub.add_parser(
        "report",
        help="write the offline HTML report (charts, ranked table, targets)",
        description="One self-contained HTML page: Pareto views, loop gain and phase, gain-phase "
        "chart with |T| contours and the Ms locus, |S| and |T|, step responses, ranked table.",
        epilog="example:\n  loopscout report studies/kiln_damper.toml --out kiln.html\n\n"
        + caution,
        **common,
    )
    _design_source_arguments(rep)
    rep.add_argument("--out", required=True, metavar="HTML", help="report file to write")
    rep.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
    )
    rep.set_defaults(run=_cmd_report)

    ch = sub.add_parser(
        "charts",
        help="export each chart as PNG and/or SVG for slides",
        description="Writes pareto_hf, pareto_iae, bode, nichols, sensitivity and steps charts.",
        epilog="example:\n  loopscout charts studies/kiln_damper.toml --out slides --format svg\n\n"
        + caution,
        **common,
    )
    _design_source_arguments(ch)
    ch.add_argument("--out", required=True, metavar="DIR", help="folder for the image files")
    ch.add_argument(
        "--format", nargs="+", default=["png", "svg"], choices=["png", "svg"], help="image formats"
    )
    ch.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
    )
    ch.set_defaults(run=_cmd_charts)


def _design_source_arguments(p: argparse.ArgumentParser) -> None:
    """STUDY and --designs, shared by ``report`` and ``charts``."""
    p.add_argument("study", metavar="STUDY", help="study file (TOML)")
    p.add_argument(
        "--designs",
        metavar="JSON",
        help="designs.json from explore (default: the study's [[compensator]] entries)",
    )
