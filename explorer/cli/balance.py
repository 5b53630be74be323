"""``loopscout balance STUDY``: the phase-balanced design and the hand baselines.

Each design is shown in factored form (integrators, cancelled plant poles,
balancing poles, gain) with every metric; refused designs say which step failed and
by how much. ``--json`` prints ``{"designs": [...], "refused": [...]}`` with
``origin`` "phase-balanced" or "hand" (docs/interface.md).
"""

from __future__ import annotations

import argparse
from typing import Any

from explorer.cli.output import (
    design_table,
    print_data_notes,
    print_json,
    print_study,
)
from explorer.core.errors import LoopscoutError
from explorer.design.hand_designs import hand_designs, trim_gain_for_overshoot
from explorer.evaluation.design_record import DesignRecord
from explorer.evaluation.phase_domain import load_checked_study
from explorer.evaluation.plant_source import hand_plant
from explorer.evaluation.records import evaluated_record, study_header

__all__ = ["register"]


def register(sub: Any, caution: str) -> None:
    p = sub.add_parser(
        "balance",
        help="phase-balanced hand design(s) for the study's targets",
        description=(
            "The classical cancel-and-balance design for the study's crossover and phase "
            "margin — integrators, cancelling zeros on the slowest stable plant poles, "
            "balancing poles, gain from |L(jwc)| = 1 — plus a lead at crossover and a "
            "PI plus lead, each with every metric, or refused with the failed step."
        ),
        epilog=(
            "examples:\n  loopscout balance studies/kiln_damper.toml\n"
            "  loopscout balance studies/conveyor_speed.toml --trim-overshoot 10 --json\n\n"
            + caution
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("study", metavar="STUDY", help="study file (TOML), see docs/study-file.md")
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.add_argument(
        "--trim-overshoot",
        type=float,
        metavar="PCT",
        default=None,
        help=(
            "also back the gain off until the step overshoot is PCT %% "
            "(reported beside the untrimmed design)"
        ),
    )
    p.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
    )
    p.set_defaults(run=_run, caution=caution)


def _run(args: argparse.Namespace) -> int:
    study = load_checked_study(args.study)
    t = study.targets
    # a crossover range, a free crossover or a missing phase margin is not bad input:
    # each hand method refuses with its reason (docs/balance.md, "Errors")
    if args.trim_overshoot is not None and not (0 < args.trim_overshoot < 100):
        raise LoopscoutError(f"--trim-overshoot must be in (0, 100) %, got {args.trim_overshoot:g}")
    designs: list[DesignRecord] = []
    refused: list[dict[str, Any]] = []

    wc_t = t.crossover_rad_s if isinstance(t.crossover_rad_s, (int, float)) else None
    # a measured plant: the fitted model, made to match the data at the target crossover
    hp, data_step = hand_plant(study.plant, study.measured, wc_t)
    for hd in hand_designs(hp, t, cancel_lightly_damped=study.search.cancel_lightly_damped,
                           error_constant=t.error_constant):
        if hd.compensator is None:
            refused.append({"name": hd.name, "origin": hd.origin, "structure": hd.structure,
                            "reason": hd.reason, "steps": list(hd.steps)})
            continue
        comp = hd.compensator
        steps = list(hd.steps) + ([data_step] if data_step else [])
        designs.append(evaluated_record(study, comp, name=hd.name, origin=hd.origin,
                                        structure=hd.structure,
                                        extra={"steps": steps}))
        if (args.trim_overshoot is not None and study.measured is not None
                and not study.measured.fit.time_from_fit):
            refused.append({"name": f"{hd.name} trimmed", "origin": hd.origin,
                            "structure": hd.structure,
                            "reason": "the overshoot needs step responses, withheld: the "
                                      "model fitted to the measured data is poor",
                            "steps": []})
        elif args.trim_overshoot is not None:
            tr = trim_gain_for_overshoot(study.plant, comp, args.trim_overshoot)
            if tr.compensator is None:
                refused.append(
                    {
                        "name": f"{hd.name} trimmed",
                        "origin": hd.origin,
                        "structure": hd.structure,
                        "reason": tr.reason,
                        "steps": list(tr.steps),
                    }
                )
            else:
                designs.append(evaluated_record(
                    study, tr.compensator, name=f"{hd.name} trimmed", origin=hd.origin,
                    structure=hd.structure + ", gain trimmed",
                    extra={"steps": list(tr.steps), "gain_factor": tr.gain_factor},
                ))
    if args.json:
        print_json({"designs": designs, "refused": refused, "study": study_header(study),
                     "caution": args.caution})
        return 0
    print_study(study)
    if designs:
        print(design_table(designs))
        print()
        for d in designs:
            print(f"{d['name']} ({d['structure']}):")
            for line in d["steps"]:
                print(f"  - {line}")
            if d["misses"]:
                print("  misses: " + "; ".join(d["misses"]))
    for r in refused:
        print(f"{r['name']} refused: {r['reason']}")
    print_data_notes(designs)  # a measured plant: bounds, outside the band, assumptions
    print()
    print(args.caution)
    return 0
