"""The one list of loop metrics: key, label, unit, domain, bound direction, limit range.

Every other list of metric keys in the package is derived from :data:`METRICS` (the
DESIGN ``metrics`` keys and their order, the terminal tables, the ``[limits]`` keys
and their allowed values, the step-response keys the search needs, the figures that
read as margins, the keys with a worst value over a plant family). Each entry names
where the metric is defined (``definition``: a section of docs/metrics.md), so a
reader gets from a key to its definition in one hop; tests/test_metric_registry.py
checks that every section named exists.

Units are in the keys (``_rad_s``, ``_deg``, ``_db``, ``_s``, ``_pct``) and in ``unit``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

__all__ = [
    "OVERSHOOT_TOL_PCT",
    "SETTLING_REL_TOL",
    "PHASE_MARGIN_TOL_DEG",
    "Metric",
    "METRICS",
    "BY_KEY",
    "METRIC_KEYS",
    "METRIC_UNITS",
    "LIMIT_KEYS",
    "LIMIT_RANGES",
    "TIME_KEYS",
    "MARGIN_KEYS",
    "WORST_KEYS",
    "WORST_TIME_KEYS",
    "RANKED_COLUMNS",
    "ranked_cell",
]


@dataclass(frozen=True, kw_only=True)
class Metric:
    """One loop metric.

    ``domain``: "frequency" (from L(jω)), "time" (from the step responses),
    "controller" (from C alone) or "stability". ``bound``: the direction a
    ``[limits]`` bound takes ("upper": the value must not exceed it; "lower": must
    not fall below it; None: no limit can be set). ``limit_range``: the values a
    limit may take, (low, low inclusive, high, high inclusive). ``reported``: one of
    the METRICS keys every DESIGN carries (docs/interface.md), in this order.
    ``margin``: reads as a robustness margin only when the closed loop is stable.
    ``worst``: has a worst value over a plant family (DESIGN ``worst``)."""

    key: str
    label: str
    unit: str
    domain: str
    definition: str
    bound: str | None = None
    limit_range: tuple[float, bool, float, bool] | None = None
    reported: bool = True
    margin: bool = False
    worst: bool = False


_POS = (0.0, False, math.inf, False)  # > 0
_NONNEG = (0.0, True, math.inf, False)  # ≥ 0
_FREQ = "docs/metrics.md#definitions"
_TIME = "docs/metrics.md#step-response-figures"
_NOISE = "docs/metrics.md#noise-figures-extra-keys-explorerfrequencynoise"

#: Every metric, the reported ones in the order the tables and DESIGN records show them.
METRICS: tuple[Metric, ...] = (
    Metric(key="crossover_rad_s", label="crossover", unit="rad/s", domain="frequency",
           definition=_FREQ),
    Metric(key="crossovers_rad_s", label="all crossovers", unit="rad/s", domain="frequency",
           definition=_FREQ),
    Metric(key="phase_margin_deg", label="phase margin", unit="deg", domain="frequency",
           definition=_FREQ, bound="lower", limit_range=(0.0, True, 180.0, False),
           margin=True, worst=True),
    Metric(key="gain_margin_db", label="gain margin", unit="dB", domain="frequency",
           definition=_FREQ, bound="lower", limit_range=_NONNEG, margin=True, worst=True),
    Metric(key="phase_crossover_rad_s", label="phase crossover", unit="rad/s",
           domain="frequency", definition=_FREQ),
    Metric(key="lower_gain_margin_db", label="lower gain margin", unit="dB",
           domain="frequency", definition=_FREQ, reported=False, margin=True),
    Metric(key="delay_margin_s", label="delay margin", unit="s", domain="frequency",
           definition=_FREQ, bound="lower", limit_range=_NONNEG, margin=True, worst=True),
    Metric(key="sensitivity_peak", label="Ms", unit="-", domain="frequency",
           definition=_FREQ, bound="upper", limit_range=(1.0, True, math.inf, False),
           margin=True, worst=True),
    Metric(key="complementary_peak", label="Mt", unit="-", domain="frequency",
           definition=_FREQ, bound="upper", limit_range=_POS, margin=True, worst=True),
    Metric(key="closed_loop_stable", label="stable", unit="", domain="stability",
           definition=_FREQ, worst=True),
    Metric(key="overshoot_pct", label="overshoot", unit="%", domain="time",
           definition=_TIME, bound="upper", limit_range=_NONNEG, worst=True),
    Metric(key="settling_time_s", label="settling 2 %", unit="s", domain="time",
           definition=_TIME, bound="upper", limit_range=_POS, worst=True),
    Metric(key="rise_time_s", label="rise 10-90 %", unit="s", domain="time",
           definition=_TIME, bound="upper", limit_range=_POS),
    Metric(key="peak_control", label="peak |u|", unit="-", domain="time",
           definition=_TIME, bound="upper", limit_range=_POS),
    Metric(key="hf_gain", label="hf gain |C(j∞)|", unit="-", domain="controller",
           definition=_FREQ, bound="upper", limit_range=_NONNEG),
    Metric(key="integral_gain", label="integral gain", unit="1/s", domain="controller",
           definition=_FREQ),
    Metric(key="iae_load", label="IAE load step", unit="-", domain="time",
           definition=_TIME, bound="upper", limit_range=_POS, worst=True),
    # extras: in records beside the METRICS keys (lower_gain_margin_db above too)
    Metric(key="noise_gain", label="noise gain", unit="-", domain="controller",
           definition=_NOISE, reported=False),
    Metric(key="noise_gain_ratio", label="noise / crossover gain", unit="-",
           domain="controller", definition=_NOISE, reported=False),
    Metric(key="pole_ratio", label="fastest pole / crossover", unit="-", domain="controller",
           definition=_NOISE, reported=False),
)

BY_KEY: dict[str, Metric] = {m.key: m for m in METRICS}

#: docs/interface.md METRICS keys, in the order the tables show them.
METRIC_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.reported)

#: Display name and unit of each key (tables, report, reasons).
METRIC_UNITS: dict[str, tuple[str, str]] = {m.key: (m.label, m.unit) for m in METRICS}

_DOMAIN_RANK = {"frequency": 0, "stability": 0, "controller": 1, "time": 2}
#: The ``[limits]`` keys → "upper" or "lower" (upper bounds first: peaks, controller,
#: step figures; then the margins).
LIMIT_KEYS: dict[str, str] = {
    m.key: str(m.bound)
    for m in sorted((m for m in METRICS if m.bound is not None),
                    key=lambda m: (m.bound == "lower", _DOMAIN_RANK[m.domain]))
}

#: Allowed values of each limit: (low, low inclusive, high, high inclusive, unit text).
LIMIT_RANGES: dict[str, tuple[float, bool, float, bool, str]] = {
    key: (*BY_KEY[key].limit_range,  # type: ignore[misc]
          "" if BY_KEY[key].unit in ("-", "") else " " + BY_KEY[key].unit)
    for key in LIMIT_KEYS
}

#: METRICS keys that need the step responses.
TIME_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.domain == "time" and m.reported)

#: Figures that read as robustness margins only when the closed loop is stable.
MARGIN_KEYS: frozenset[str] = frozenset(m.key for m in METRICS if m.margin)

#: Keys of a DESIGN's ``worst`` (the worst value over a plant family), in the order
#: records show them: peaks, margins, stability, step figures.
WORST_KEYS: tuple[str, ...] = tuple(
    m.key for m in sorted((m for m in METRICS if m.worst),
                          key=lambda m: (m.domain == "time", m.domain == "stability",
                                         m.bound == "lower")))
#: Their step-response part.
WORST_TIME_KEYS: tuple[str, ...] = tuple(k for k in WORST_KEYS if BY_KEY[k].domain == "time")

#: The ranked design table, the same in the terminal (``explore``) and in the report:
#: (key, column heading, number format). ``order`` is the design's, the rest METRICS
#: keys or extras.
RANKED_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("order", "order", "{:d}"),
    ("crossover_rad_s", "wc rad/s", "{:.4g}"),
    ("phase_margin_deg", "PM deg", "{:.1f}"),
    ("gain_margin_db", "GM dB", "{:.1f}"),
    ("sensitivity_peak", "Ms", "{:.3f}"),
    ("noise_gain", "noise gain", "{:.3g}"),
    ("iae_load", "IAE load", "{:.3g}"),
    ("overshoot_pct", "overshoot %", "{:.1f}"),
    ("settling_time_s", "settling s", "{:.3g}"),
)


# -- how closely a target or requirement must be met (docs/interface.md) ----------------
#: docs/interface.md, "Requirements are checked": overshoot met to within 0.2 percentage
#: points, settling time to within 1 %.
OVERSHOOT_TOL_PCT = 0.2
SETTLING_REL_TOL = 0.01
#: docs/interface.md: the phase-margin target is met down to target − 0.05°.
PHASE_MARGIN_TOL_DEG = 0.05


def ranked_cell(value: Any, fmt: str, *, none: str = "-") -> str:
    """A ranked table's cell (terminal and report): ``none`` for null, yes/no for a
    flag, else ``fmt`` (one of RANKED_COLUMNS' formats), or the value as text."""
    if value is None:
        return none
    if isinstance(value, bool):
        return "yes" if value else "no"
    try:
        return fmt.format(value)
    except (ValueError, TypeError):
        return str(value)
