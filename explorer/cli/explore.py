"""``loopscout explore STUDY --out DIR``: tune every candidate structure, rank, report.

Prints the answer first (the recommended design, why, and what each alternative
buys; explorer.search.recommend), then why other structures cannot, then the ranked table
with units (the recommended design first); ``--json`` prints the
designs.json object instead. Files: DIR/designs.json, DIR/designs.csv,
DIR/report.html and the resumable trial storage DIR/explore.journal.
"""

from __future__ import annotations

import argparse
from collections.abc import Mapping, Sequence
from typing import Any

from explorer.cli.output import print_json
from explorer.cli.progress import ProgressLine
from explorer.core.metric_registry import RANKED_COLUMNS, ranked_cell
from explorer.design.sampled_design import judged_metrics
from explorer.search.exploration import explore

__all__ = ["register", "ranked_table"]

_COLUMNS = RANKED_COLUMNS


def register(sub: Any, caution: str) -> None:
    p = sub.add_parser(
        "explore",
        help="tune every compensator structure up to [search] max_order and rank them",
        description=(
            "Explore compensator structures for STUDY: each structure's gain and one "
            "balancing root are solved from the crossover and phase-margin targets, the "
            "other roots are tuned (NSGA-II) for low Ms, noise gain and load-disturbance "
            "IAE under the study's limits; designs are re-checked, ranked against the hand "
            "designs and written to DIR. Rerunning the same command resumes."
        ),
        epilog=(
            "examples:\n"
            "  loopscout explore studies/conveyor_speed.toml --out runs/conveyor --seed 7\n"
            "  loopscout explore studies/kiln_damper.toml --out runs/kiln --trials 200 --json\n"
            "  loopscout explore studies/kiln_damper.toml --out runs/kiln "
            "--storage postgresql://user@dbhost/loops\n\n" + caution
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("study", metavar="STUDY", help="study file (TOML), see docs/study-file.md")
    p.add_argument("--out", metavar="DIR", required=True, help="output folder (created if missing)")
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.add_argument(
        "--trials",
        type=int,
        metavar="N",
        default=None,
        help="trials per structure (default: [search] trials, else 100)",
    )
    p.add_argument(
        "--seed", type=int, metavar="S", default=None, help="random seed (same seed, same designs)"
    )
    p.add_argument(
        "--storage",
        metavar="URL",
        default=None,
        help="database URL for the trials (default: DIR/explore.journal)",
    )
    p.add_argument(
        "--batch", type=int, metavar="N", default=32, help="trials evaluated together (default 32)"
    )
    p.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help=argparse.SUPPRESS
    )
    p.set_defaults(run=_run, caution=caution)


def ranked_table(designs: Sequence[Mapping[str, Any]]) -> str:
    """One row per design (ranked), metrics with units in the header. With a sample
    time the loop figures are the sampled loop's, the ones the ranking used."""
    head = ["design", "origin", "structure", *[h for _, h, _ in _COLUMNS], "meets", "pareto"]
    rows = []
    for d in designs:
        m = {**judged_metrics(d["metrics"], d.get("sampled_metrics")), "order": d["order"]}
        rows.append(
            [
                d["name"],
                d["origin"],
                d["structure"],
                *[ranked_cell(m.get(k), f) for k, _, f in _COLUMNS],
                ranked_cell(d["meets_targets"], ""),
                ranked_cell(d["pareto"], ""),
            ]
        )
    widths = [max(len(str(r[i])) for r in [head, *rows]) for i in range(len(head))]
    lines = [
        "  ".join(str(c).ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
        for r in [head, *rows]
    ]
    lines.insert(1, "  ".join("-" * w for w in widths))
    t = next((d.get("sample_time_s") for d in designs if d.get("sampled_metrics")), None)
    if t is not None:
        lines.insert(0, f"loop figures of the sampled loop (T = {t:g} s, hold and delays "
                        "included); noise gain of C(s)")
    return "\n".join(lines)


def _run(args: argparse.Namespace) -> int:
    res = explore(
        args.study,
        args.out,
        trials=args.trials,
        seed=args.seed,
        storage=args.storage,
        batch=args.batch,
        progress=ProgressLine(),
    )
    if args.json:
        print_json(res.obj)
        return 0
    for line in res.summary:
        print(line)
    print()
    if res.designs:
        print(ranked_table(res.designs))
    else:
        print("no designs")
    print()
    print(f"written: {res.out_dir / 'designs.json'}, designs.csv, report.html")
    print(args.caution)
    return 0
