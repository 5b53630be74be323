"""The one metric list (explorer.core.metric_registry): every other list of metric keys is
derived from it, and every metric is defined in the docs section its entry names."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from explorer.cli import output as cli
from explorer.core import metric_registry
from explorer.evaluation import family
from explorer.evaluation import records as evaluate
from explorer.model import study
from explorer.schemas import build
from explorer.search import tune

ROOT = Path(__file__).resolve().parent.parent


def _slug(heading: str) -> str:
    """The anchor a Markdown renderer gives a heading (lower case, punctuation dropped,
    spaces to hyphens)."""
    s = heading.strip().lower()
    s = re.sub(r"[^\w\- ]", "", s)
    return s.replace(" ", "-")


def _sections(path: Path) -> dict[str, str]:
    """Anchor → the text of that section (up to the next heading of any level)."""
    out: dict[str, str] = {}
    anchor, lines = None, []
    for line in path.read_text(encoding="utf-8").splitlines():
        m = re.match(r"^#{1,6} (.*)$", line)
        if m:
            if anchor is not None:
                out[anchor] = "\n".join(lines)
            anchor, lines = _slug(m.group(1)), []
        else:
            lines.append(line)
    if anchor is not None:
        out[anchor] = "\n".join(lines)
    return out


@pytest.mark.parametrize("metric", metric_registry.METRICS, ids=lambda m: m.key)
def test_every_metric_is_defined_where_its_entry_points(metric) -> None:
    doc, _, anchor = metric.definition.partition("#")
    sections = _sections(ROOT / doc)
    assert anchor in sections, f"{metric.key}: no section #{anchor} in {doc}"
    assert f"`{metric.key}`" in sections[anchor], (
        f"{metric.key} is not defined in {doc}#{anchor}")


def test_the_package_lists_come_from_the_registry() -> None:
    assert evaluate.METRIC_KEYS == metric_registry.METRIC_KEYS
    assert evaluate.METRIC_UNITS == metric_registry.METRIC_UNITS
    assert study.LIMIT_KEYS == metric_registry.LIMIT_KEYS
    assert set(tune.TIME_KEYS) == set(metric_registry.TIME_KEYS)
    assert tuple(family.WORST_KEYS) == metric_registry.WORST_KEYS


def test_the_design_table_stars_exactly_the_registry_margins_of_an_unstable_loop() -> None:
    """An unstable loop's margins are not robustness margins: the terminal table marks
    the rows of the registry's MARGIN_KEYS, and no other."""
    from explorer.core.loop import Rational
    from explorer.evaluation.design_record import DesignRecord

    metrics = {k: 1.0 for k in metric_registry.METRIC_KEYS}
    metrics["closed_loop_stable"] = False
    rec = DesignRecord(name="u", origin="given", structure="P", compensator=Rational(gain=1.0),
                       meets_targets=False, metrics=metrics)
    starred = {line.split("  ")[0].strip() for line in cli.design_table([rec]).splitlines()
               if line.endswith(" *")}
    labels = {}
    for k in metric_registry.MARGIN_KEYS:
        label, unit = metric_registry.METRIC_UNITS[k]
        labels[k] = f"{label} [{unit}]" if unit and unit != "-" else label
    assert starred == {labels[k] for k in metric_registry.MARGIN_KEYS if k in metrics}


def test_the_schemas_agree_with_the_registry() -> None:
    # the schema builder is kept free of package imports (it is the written contract);
    # this ties its lists to the package's
    assert tuple(build.WORST_KEYS) == metric_registry.WORST_KEYS
    for key in metric_registry.METRIC_KEYS:
        assert key in build.STABLE_METRICS, f"{key}: a METRICS key missing from the schema"


def test_limit_keys_and_ranges_agree() -> None:
    for key, bound in metric_registry.LIMIT_KEYS.items():
        assert bound in ("upper", "lower")
        lo, lo_incl, hi, hi_incl, unit = metric_registry.LIMIT_RANGES[key]
        assert lo < hi
        assert unit == "" or unit.startswith(" ")
    # a limit on a key the registry marks unlimited is refused by the study reader
    unlimited = [m.key for m in metric_registry.METRICS if m.bound is None]
    assert "crossover_rad_s" in unlimited and "crossover_rad_s" not in study.LIMIT_KEYS


def test_ranked_table_columns_are_registered_metrics() -> None:
    from explorer.cli import explore as cli_explore
    from explorer.outputs import report_page

    for key, _, _ in metric_registry.RANKED_COLUMNS:
        assert key == "order" or key in metric_registry.BY_KEY, key
    # the terminal and the report show the same columns in the same order
    assert cli_explore._COLUMNS == report_page.TERMINAL_COLUMNS == metric_registry.RANKED_COLUMNS
