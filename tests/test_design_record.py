"""The typed, frozen DESIGN record (explorer/evaluation/design_record.py).

Checked against the interface's own statement of the DESIGN object (docs/interface.md,
key order and types, and the JSON Schema of `check`), not against the code that
writes it: a record reads like its JSON object, cannot be changed, and serializes
one way.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest

from explorer.core.json_text import json_text
from explorer.core.loop import Rational
from explorer.evaluation.design_record import CORE_KEYS, DesignRecord
from explorer.evaluation.records import given_designs
from explorer.model.study import load_study

ROOT = Path(__file__).resolve().parents[1]
PI = Rational(gain=0.85, zeros=(-0.02,), poles=(0.0,))
LEAD = Rational(gain=3.0, zeros=(-1 + 2j, -1 - 2j), poles=(0.0, -8.0))


def _record(**kw) -> DesignRecord:
    base = dict(name="PI", origin="given", structure="PI", compensator=PI,
                meets_targets=True, metrics={"phase_margin_deg": 55.0,
                                             "closed_loop_stable": True,
                                             "crossovers_rad_s": [0.06]},
                misses=[], extras={"worst": {"sensitivity_peak": 1.4}, "trial": 3})
    base.update(kw)
    return DesignRecord(**base)


def test_reads_like_the_interface_object_in_its_key_order() -> None:
    r = _record()
    # docs/interface.md DESIGN: name, origin, structure, order, compensator,
    # meets_targets, pareto, metrics; then margins_valid, misses and the extensions
    assert list(r) == [*CORE_KEYS, "worst", "trial"]
    assert r["order"] == 1 and r["compensator"] == {"gain": 0.85, "zeros": [-0.02],
                                                    "poles": [0.0]}
    assert r["margins_valid"] is True
    assert r.get("absent") is None and "worst" in r
    assert r["metrics"]["phase_margin_deg"] == 55.0


def test_complex_roots_are_written_as_the_interface_strings() -> None:
    r = _record(compensator=LEAD)
    assert sorted(r.to_json()["compensator"]["zeros"]) == ["-1+2j", "-1-2j"]
    assert r.order == 2


def test_cannot_be_changed_at_any_depth() -> None:
    r = _record()
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.name = "other"  # type: ignore[misc]
    with pytest.raises(TypeError):
        r["name"] = "other"  # type: ignore[index]
    with pytest.raises(TypeError):
        r["metrics"]["phase_margin_deg"] = 10.0
    with pytest.raises(TypeError):
        r["worst"]["sensitivity_peak"] = 9.0
    with pytest.raises(AttributeError):
        r["metrics"]["crossovers_rad_s"].append(1.0)
    # what was given is copied: changing the caller's dict later changes nothing
    metrics = {"phase_margin_deg": 50.0, "closed_loop_stable": False}
    r2 = _record(metrics=metrics)
    metrics["phase_margin_deg"] = 0.0
    assert r2["metrics"]["phase_margin_deg"] == 50.0 and r2["margins_valid"] is False


def test_a_later_stage_makes_a_new_record() -> None:
    r = _record()
    r2 = r.with_changes(pareto=True, extras={"practical_misses": [], "trial": 4})
    assert r["pareto"] is None and r2["pareto"] is True
    # extras keep their order; a replaced one stays in place, a new one comes last
    assert list(r2)[-3:] == ["worst", "trial", "practical_misses"] and r2["trial"] == 4


def test_extras_may_not_replace_interface_keys() -> None:
    with pytest.raises(ValueError, match="meets_targets"):
        _record(extras={"meets_targets": False})


def test_one_serializer_plain_json() -> None:
    r = _record()
    plain = r.to_json()
    assert type(plain) is dict and type(plain["metrics"]) is dict
    assert type(plain["metrics"]["crossovers_rad_s"]) is list
    assert json.loads(json_text(r)) == json.loads(json.dumps(plain))
    # a record equals its JSON object read back (Mapping equality, as a dict would)
    assert r == json.loads(json_text(r))


def test_bundled_check_records_validate_against_the_check_schema() -> None:
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.loads((ROOT / "explorer" / "schemas" / "check.json").read_text())
    study = load_study(ROOT / "studies" / "kiln_damper.toml")
    designs = given_designs(study)
    assert all(isinstance(d, DesignRecord) for d in designs)
    from explorer.core.caution import CAUTION
    from explorer.evaluation.records import study_header

    obj = json.loads(json_text({"designs": designs, "study": study_header(study),
                                "caution": CAUTION}))
    jsonschema.validate(obj, schema)


# -- the answer object (explorer/search/recommend.py) ------------------------------------
def test_the_answer_is_frozen_and_reads_like_the_interface_object() -> None:
    from explorer.search.recommend import Alternative, Answer

    alt = Alternative(criterion="lowest noise gain", design="PI #3", trade_off="less noise")
    a = Answer(design="PID #1", order=2, why="order 2 is the lowest", alternatives=(alt,))
    # docs/interface.md: answer = {design, order, why} (+ the project's alternatives)
    assert list(a) == ["design", "order", "why", "alternatives"]
    assert a == {"design": "PID #1", "order": 2, "why": "order 2 is the lowest",
                 "alternatives": [{"criterion": "lowest noise gain", "design": "PI #3",
                                   "trade_off": "less noise"}]}
    with pytest.raises(dataclasses.FrozenInstanceError):
        a.design = "other"  # type: ignore[misc]
    with pytest.raises(TypeError):
        a["alternatives"][0]["design"] = "x"
    none = Answer(design=None, order=None, why="no design meets the targets")
    assert json.loads(json_text(none)) == {"design": None, "order": None,
                                           "why": "no design meets the targets"}


def test_an_explorations_answer_validates_against_the_explore_schema(tmp_path) -> None:
    jsonschema = pytest.importorskip("jsonschema")
    from explorer.search.recommend import Answer, recommend

    study = load_study(ROOT / "studies" / "kiln_damper.toml")
    answer, lines = recommend(given_designs(study), max_pole_ratio=20.0, searched_wc=False)
    assert isinstance(answer, Answer) and lines[0].startswith("answer:")
    schema = json.loads((ROOT / "explorer" / "schemas" / "explore.json").read_text())
    jsonschema.validate(json.loads(json_text(answer)),
                        {**schema["$defs"]["answer"], "$defs": schema["$defs"]})
