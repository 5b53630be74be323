"""With [search] sample_time the tables show the loop that runs: check adds the sampled
loop's rows; the ranked table shows the sampled figures the ranking used."""

from __future__ import annotations

import json
from pathlib import Path

from explorer.cli import main
from explorer.cli.explore import ranked_table

STUDY = Path(__file__).resolve().parent.parent / "studies" / "conveyor_plc.toml"


def test_check_table_has_the_sampled_rows(capsys) -> None:
    assert main(["check", str(STUDY), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert main(["check", str(STUDY)]) == 0
    text = capsys.readouterr().out
    row = next(line for line in text.splitlines() if line.startswith("sampled phase margin"))
    # the row holds the JSON's sampled phase margin of each design, as printed (4 digits)
    for d in obj["designs"]:
        assert f"{d['sampled_metrics']['phase_margin_deg']:.4g}" in row
    assert "sample time [s]" in text


def test_ranked_table_shows_the_sampled_figures() -> None:
    d = {"name": "x", "origin": "given", "structure": "I", "order": 1, "meets_targets": True,
         "pareto": True, "sample_time_s": 0.1,
         "metrics": {"phase_margin_deg": 60.0, "sensitivity_peak": 1.3},
         "sampled_metrics": {"phase_margin_deg": 55.5, "sensitivity_peak": 1.45}}
    text = ranked_table([d])
    assert "55.5" in text and "1.450" in text and "60.0" not in text
    assert text.splitlines()[0].startswith("loop figures of the sampled loop (T = 0.1 s")
