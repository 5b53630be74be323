"""The JSON objects of check, balance, explore and implement against their schemas
(explorer/schemas/, docs/interface.md), on the bundled studies.

The schemas are checked for strictness too: renaming or re-typing any stable key of a
real output must make it invalid, so a schema that accepts anything fails here.
"""

from __future__ import annotations

import contextlib
import copy
import io
import json
from pathlib import Path
from typing import Any

import jsonschema
import pytest

from explorer.cli import main
from explorer.schemas import COMMANDS, load_schema
from explorer.schemas.build import STABLE_METRICS, render, schemas
from explorer.search.exploration import explore

ROOT = Path(__file__).resolve().parents[1]
STUDIES = sorted(p.name for p in (ROOT / "studies").glob("*.toml"))

#: stable keys of a DESIGN record (docs/interface.md)
STABLE_DESIGN_KEYS = ("name", "origin", "structure", "order", "compensator", "meets_targets",
                      "pareto", "metrics")
#: stable keys of the implement object (docs/interface.md, "implement")
STABLE_IMPLEMENT_KEYS = ("design", "sample_time_s", "compute_delay_s", "method", "prewarp_rad_s",
                         "discrete", "sections", "continuous_metrics", "sampled_metrics",
                         "phase_loss_deg")
STABLE_SAMPLED_KEYS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db",
                       "sensitivity_peak", "closed_loop_stable")


def _validator(command: str) -> jsonschema.Draft202012Validator:
    return jsonschema.Draft202012Validator(load_schema(command))


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> dict[str, Any]:
    code = main(list(argv))
    captured = capsys.readouterr()
    assert code == 0, captured.err
    out = captured.out
    obj = json.loads(out)
    assert isinstance(obj, dict)
    return obj


def _assert_valid(command: str, obj: dict[str, Any]) -> None:
    errors = sorted(_validator(command).iter_errors(obj), key=lambda e: list(e.absolute_path))
    assert not errors, "\n".join(f"{list(e.absolute_path)}: {e.message[:300]}" for e in errors)


def _assert_readings(design: dict[str, Any]) -> None:
    """Readings a schema cannot express (docs/interface.md, "Precise readings")."""
    m = design["metrics"]
    xs = m["crossovers_rad_s"]
    assert xs == sorted(xs)
    assert (m["crossover_rad_s"] is None) == (not xs)
    if xs:
        assert m["crossover_rad_s"] in xs
    assert design["order"] == len(design["compensator"]["poles"])
    if not m["closed_loop_stable"]:
        for key in ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control",
                    "iae_load"):
            assert m[key] is None, key
    if design["meets_targets"] is not None:
        assert design["meets_targets"] == (not design["misses"])


# --------------------------------------------------------------------------------------
# the schema files
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("command", COMMANDS)
def test_schema_files_are_draft_2020_12_and_built_from_the_builder(command: str) -> None:
    schema = load_schema(command)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)
    on_disk = (ROOT / "explorer" / "schemas" / f"{command}.json").read_text(encoding="utf-8")
    assert on_disk == render(schemas()[command]), "rerun python -m explorer.schemas.build"


def test_schemas_ship_as_package_data() -> None:
    text = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    assert '"explorer.schemas" = ["*.json"]' in text


def test_unknown_command_has_no_schema() -> None:
    with pytest.raises(ValueError, match="no schema"):
        load_schema("tune")


# --------------------------------------------------------------------------------------
# real outputs
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("study", STUDIES)
def test_check_json_matches_its_schema(study: str, capsys: pytest.CaptureFixture[str]) -> None:
    obj = _run(capsys, "check", str(ROOT / "studies" / study), "--json")
    _assert_valid("check", obj)
    assert obj["designs"]
    for d in obj["designs"]:
        assert d["origin"] == "given"
        assert d["pareto"] is None  # check ranks nothing
        _assert_readings(d)


@pytest.mark.parametrize("study", STUDIES)
def test_balance_json_matches_its_schema(study: str, capsys: pytest.CaptureFixture[str]) -> None:
    obj = _run(capsys, "balance", str(ROOT / "studies" / study), "--json")
    _assert_valid("balance", obj)
    assert obj["designs"] or obj["refused"]
    for d in obj["designs"]:
        _assert_readings(d)


def test_balance_trimmed_design_matches_its_schema(capsys: pytest.CaptureFixture[str]) -> None:
    obj = _run(capsys, "balance", str(ROOT / "studies" / "conveyor_speed.toml"), "--json",
               "--trim-overshoot", "5")
    _assert_valid("balance", obj)
    names = [d["name"] for d in obj["designs"]] + [r["name"] for r in obj["refused"]]
    assert any(n.endswith(" trimmed") for n in names)


@pytest.mark.parametrize(
    ("study", "design", "extra"),
    [
        ("kiln_damper.toml", "PI + lead", ["--sample-time", "1", "--compute-delay", "0.2"]),
        ("conveyor_speed.toml", "PI", ["--sample-time", "0.05"]),
        ("dome_drive.toml", "lead + notch", ["--sample-time", "0.01", "--method", "matched"]),
        ("drum_level.toml", "P", ["--sample-time", "0.5", "--method", "tustin"]),
        ("kiln_damper.toml", "PI fast", ["--sample-time", "2", "--prewarp", "0.05"]),
        # a long sample time: warnings and an unstable sampled loop are part of the object
        ("kiln_damper.toml", "PI + lead", ["--sample-time", "20"]),
    ],
)
def test_implement_json_matches_its_schema(
    study: str, design: str, extra: list[str], capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    csv = tmp_path / "sections.csv"
    obj = _run(capsys, "implement", str(ROOT / "studies" / study), "--design", design, *extra,
               "--csv", str(csv), "--json")
    _assert_valid("implement", obj)
    assert len(obj["sections"]) == len(obj["stages"]) == len(obj["difference_equation"])
    assert [s["stage"] for s in obj["sections"]] == [s["label"] for s in obj["stages"]]
    assert (obj["prewarp_rad_s"] is None) == (obj["method"] != "tustin-prewarp")


def test_implement_from_a_designs_file_matches_its_schema(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    study = str(ROOT / "studies" / "kiln_damper.toml")
    checked = _run(capsys, "check", study, "--json")
    path = tmp_path / "designs.json"
    path.write_text(json.dumps(checked), encoding="utf-8")
    obj = _run(capsys, "implement", study, "--from", str(path), "--design", "PI cautious",
               "--sample-time", "1", "--json")
    _assert_valid("implement", obj)
    assert obj["source"]["from"] == str(path)


_IMPOSSIBLE = """
name = "impossible limit"
[plant]
gain = 2.0
poles = [-1.0, -3.0]
delay = 0.5
[targets]
crossover = 1.0
phase_margin = 60
integrators = 1
[limits]
sensitivity_peak = 1.01
"""


@pytest.mark.slow
@pytest.mark.parametrize("study", ["balance_platform.toml", "conveyor_speed.toml",
                                   "drum_level.toml", "kiln_family.toml", "impossible"])
def test_explore_json_matches_its_schema(
    study: str, tmp_path: Path
) -> None:
    if study == "impossible":
        path = tmp_path / "impossible.toml"
        path.write_text(_IMPOSSIBLE, encoding="utf-8")
    else:
        path = ROOT / "studies" / study
    out = tmp_path / "out"
    # the Python API with progress off: `main(["explore", ...])` run twice in one process
    # writes its progress to the stderr of the first call (a closed stream under pytest)
    res = explore(path, out, trials=4, seed=1, progress=False)
    obj = json.loads((out / "designs.json").read_text(encoding="utf-8"))  # = explore --json
    _assert_valid("explore", obj)
    assert [d["name"] for d in obj["designs"]] == [d["name"] for d in res.designs]
    names = [d["name"] for d in obj["designs"]]
    answer = obj["answer"]
    if study == "impossible":
        assert answer["design"] is None and answer["order"] is None
        assert not any(d["meets_targets"] for d in obj["designs"])
    else:
        assert answer["design"] in names
        chosen = obj["designs"][names.index(answer["design"])]
        assert chosen["order"] == answer["order"] and chosen["meets_targets"] is True
    for d in obj["designs"]:
        _assert_readings(d)
    # strictness on the explore-only keys
    for key in ("design", "order", "why"):
        bad = copy.deepcopy(obj)
        bad["answer"][key + "_x"] = bad["answer"].pop(key)
        assert not _validator("explore").is_valid(bad), key
    bad = copy.deepcopy(obj)
    bad["answer"]["why"] = None
    assert not _validator("explore").is_valid(bad)


# --------------------------------------------------------------------------------------
# strictness: a renamed or re-typed stable key fails
# --------------------------------------------------------------------------------------
def _wrong_type(value: Any) -> Any:
    """A value of another JSON type than ``value`` (and not null)."""
    if isinstance(value, bool):
        return "yes"
    if isinstance(value, str):
        return 1.5
    if isinstance(value, list):
        return {"0": value}
    if isinstance(value, dict):
        return [value]
    return str(value)  # a number or null becomes a string


@pytest.fixture(scope="module")
def checked() -> dict[str, Any]:
    """check --json of kiln_damper (run once for the module)."""
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(["check", str(ROOT / "studies" / "kiln_damper.toml"), "--json"])
    assert code == 0
    obj: dict[str, Any] = json.loads(buf.getvalue())
    return obj


@pytest.mark.parametrize("key", STABLE_DESIGN_KEYS)
def test_renamed_or_retyped_design_key_fails(key: str, checked: dict[str, Any]) -> None:
    validator = _validator("check")
    assert validator.is_valid(checked)
    renamed = copy.deepcopy(checked)
    renamed["designs"][0][key + "_renamed"] = renamed["designs"][0].pop(key)
    assert not validator.is_valid(renamed)
    retyped = copy.deepcopy(checked)
    retyped["designs"][0][key] = _wrong_type(retyped["designs"][0][key])
    assert not validator.is_valid(retyped)


@pytest.mark.parametrize("key", list(STABLE_METRICS))
def test_renamed_or_retyped_metric_fails(key: str, checked: dict[str, Any]) -> None:
    validator = _validator("check")
    renamed = copy.deepcopy(checked)
    metrics = renamed["designs"][0]["metrics"]
    metrics[key.replace("_", "-")] = metrics.pop(key)
    assert not validator.is_valid(renamed)
    retyped = copy.deepcopy(checked)
    metrics = retyped["designs"][0]["metrics"]
    metrics[key] = _wrong_type(metrics[key])
    assert not validator.is_valid(retyped)


def test_metric_keys_match_the_evaluator() -> None:
    from explorer.evaluation.records import METRIC_KEYS

    assert tuple(STABLE_METRICS) == METRIC_KEYS


@pytest.mark.parametrize(
    ("where", "value"),
    [
        (("designs", 0, "origin"), "tuned"),  # not one of the four origins
        (("designs", 0, "compensator", "poles"), ["-2+3i"]),  # not Python complex syntax
        (("designs", 0, "compensator", "zeros"), [[-1.0, 0.0]]),  # a pair is not a root
        (("designs", 0, "metrics", "crossovers_rad_s"), [-1.0]),
        (("designs", 0, "metrics", "phase_margin_deg"), 200.0),
        (("designs", 0, "metrics", "overshoot_pct"), -1.0),
        (("designs", 0, "metrics", "closed_loop_stable"), None),
        (("designs", 0, "order"), 1.5),
        (("designs", 0, "misses"), "none"),
        (("caution",), ""),
    ],
)
def test_values_out_of_the_contract_fail(where: tuple[Any, ...], value: Any,
                                         checked: dict[str, Any]) -> None:
    bad = copy.deepcopy(checked)
    node = bad
    for step in where[:-1]:
        node = node[step]
    node[where[-1]] = value
    assert not _validator("check").is_valid(bad)


def test_an_unknown_key_fails(checked: dict[str, Any]) -> None:
    bad = copy.deepcopy(checked)
    bad["designs"][0]["metrics"]["bandwidth_rad_s"] = 1.0
    assert not _validator("check").is_valid(bad)
    bad = copy.deepcopy(checked)
    bad["designs"][0]["comment"] = "x"
    assert not _validator("check").is_valid(bad)


def test_worst_object_of_the_variation_addition(checked: dict[str, Any]) -> None:
    """[variation] (a December addition) adds "worst" with nine METRICS keys; none may
    be left out."""
    good = copy.deepcopy(checked)
    m = good["designs"][0]["metrics"]
    worst = {k: m[k] for k in ("sensitivity_peak", "complementary_peak", "phase_margin_deg",
                               "gain_margin_db", "delay_margin_s", "closed_loop_stable",
                               "overshoot_pct", "settling_time_s", "iae_load")}
    good["designs"][0]["worst"] = worst
    assert _validator("check").is_valid(good)
    bad = copy.deepcopy(good)
    del bad["designs"][0]["worst"]["iae_load"]
    assert not _validator("check").is_valid(bad)


def test_renamed_or_retyped_implement_key_fails(capsys: pytest.CaptureFixture[str]) -> None:
    obj = _run(capsys, "implement", str(ROOT / "studies" / "conveyor_speed.toml"), "--design",
               "PI", "--sample-time", "0.05", "--json")
    validator = _validator("implement")
    assert validator.is_valid(obj)
    for key in STABLE_IMPLEMENT_KEYS:
        renamed = copy.deepcopy(obj)
        renamed[key + "_renamed"] = renamed.pop(key)
        assert not validator.is_valid(renamed), key
        retyped = copy.deepcopy(obj)
        retyped[key] = _wrong_type(retyped[key])
        assert not validator.is_valid(retyped), key
    for key in STABLE_SAMPLED_KEYS:
        bad = copy.deepcopy(obj)
        bad["sampled_metrics"][key + "_renamed"] = bad["sampled_metrics"].pop(key)
        assert not validator.is_valid(bad), key
    for key in ("b", "a"):
        bad = copy.deepcopy(obj)
        bad["sections"][0][key] = bad["sections"][0][key][:2]
        assert not validator.is_valid(bad), key
    bad = copy.deepcopy(obj)
    bad["sections"][0]["a"][0] = 2.0  # a0 = 1 by the contract
    assert not validator.is_valid(bad)


def test_balance_refused_entry_is_typed(capsys: pytest.CaptureFixture[str]) -> None:
    obj = _run(capsys, "balance", str(ROOT / "studies" / "kiln_damper.toml"), "--json")
    validator = _validator("balance")
    good = copy.deepcopy(obj)
    good["refused"].append({"name": "lag", "origin": "hand", "structure": "lag",
                            "reason": "no error_constant", "steps": []})
    assert validator.is_valid(good)
    bad = copy.deepcopy(good)
    bad["refused"][-1]["why"] = bad["refused"][-1].pop("reason")
    assert not validator.is_valid(bad)
    bad = copy.deepcopy(obj)
    bad["designs"][0]["origin"] = "given"  # balance lists hand designs only
    assert not validator.is_valid(bad)
