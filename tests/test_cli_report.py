"""`loopscout report` / `charts` read an exploration's answer with its designs."""

from __future__ import annotations

from pathlib import Path

import pytest

from explorer.cli import main
from explorer.cli.report import load_exploration
from explorer.core.json_text import json_text
from explorer.evaluation.records import given_designs
from explorer.model.study import load_study

ROOT = Path(__file__).resolve().parents[1]
KILN = ROOT / "studies" / "kiln_damper.toml"


def _file(tmp_path: Path, **extra) -> Path:
    designs = given_designs(load_study(KILN))
    p = tmp_path / "designs.json"
    p.write_text(json_text({"designs": designs, **extra}), encoding="utf-8")
    return p


def test_answer_and_summary_are_read_back(tmp_path: Path) -> None:
    p = _file(tmp_path, answer={"design": "PI + lead", "order": 2, "why": "because"},
              summary=["answer: order 2 suffices — PI + lead is recommended"])
    designs, answer, summary = load_exploration(p)
    assert [d["name"] for d in designs] == ["PI cautious", "PI + lead", "PI fast"]
    assert answer == {"design": "PI + lead", "order": 2, "why": "because"}
    assert summary == ["answer: order 2 suffices — PI + lead is recommended"]
    # a plain designs file (no exploration) has neither
    assert load_exploration(_file(tmp_path))[1:] == (None, None)


@pytest.mark.parametrize("extra", [
    {"answer": {"design": "no such design"}},
    {"answer": "PI + lead"},
    {"summary": "one line, not a list"},
])
def test_a_malformed_answer_or_summary_is_one_line_exit_2(tmp_path, capsys, extra) -> None:
    p = _file(tmp_path, **extra)
    assert main(["report", str(KILN), "--designs", str(p), "--out",
                 str(tmp_path / "r.html")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--designs" in err


@pytest.mark.slow
def test_the_report_recommends_the_exploration_s_answer(tmp_path, capsys) -> None:
    # the report shows the answer and its reasons as the exploration gave them
    p = _file(tmp_path, answer={"design": "PI + lead", "order": 2, "why": "our reasons"})
    out = tmp_path / "r.html"
    assert main(["report", str(KILN), "--designs", str(p), "--out", str(out)]) == 0
    html = out.read_text(encoding="utf-8")
    assert "our reasons" in html
