"""TOML study files → validated, frozen study objects.

The schema is the guaranteed subset of docs/interface.md plus loopscout's extensions
(docs/study-file.md): polynomial ``num``/``den`` input, targets given as overshoot
and settling time (converted by :func:`explorer.specs.targets_from_requirements`),
and extra ``[search]`` keys. This is a boundary: every bad input raises
:class:`explorer.errors.StudyFileError` with the dotted key path and a one-line
message in the form "`targets.phase_margin` must be in (0, 90) deg, got 120".
"""

from __future__ import annotations

import difflib
import json
import math
import os
import stat
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from explorer import metric_registry as _registry
from explorer import specs
from explorer.errors import StudyFileError
from explorer.loop import Rational, roots_from_coefficients
from explorer.phase_domain import check_phase_reach, family_plants

__all__ = [
    "Targets",
    "SearchOptions",
    "NamedCompensator",
    "Study",
    "Variation",
    "LIMIT_KEYS",
    "load_study",
    "parse_study",
    "read_text_file",
    "MAX_FILE_BYTES",
]

#: METRICS key → kind of bound: "upper" (value must not exceed) or "lower"; and the
#: allowed range of each limit value (low, low_inclusive, high, high_inclusive, unit):
#: from the one metric list (explorer.metric_registry).
LIMIT_KEYS: dict[str, str] = _registry.LIMIT_KEYS
_LIMIT_RANGES: dict[str, tuple[float, bool, float, bool, str]] = _registry.LIMIT_RANGES

MAX_SEARCH_ORDER = 6
_TOP_KEYS = ("name", "plant", "targets", "limits", "search", "compensator", "variation")
_ROOT_FORM = ("gain", "zeros", "poles")
_POLY_FORM = ("num", "den")
_PLANT_KEYS = (*_ROOT_FORM, *_POLY_FORM, "delay", "data", "unstable_poles", "integrators")
#: keys of a model plant that a measured plant (``plant.data``) replaces
_MODEL_KEYS = (*_ROOT_FORM, *_POLY_FORM, "delay")
_COMP_KEYS = ("name", *_ROOT_FORM, *_POLY_FORM)
_VARIATION_KEYS = ("gain", "delay", "time_scale", "member")
#: Largest hi/lo of a [variation] gain or time_scale factor range.
MAX_FACTOR_RATIO = 1e3
#: Most [[variation.member]] entries (each is a full evaluation of every design).
MAX_MEMBERS = 20
_TARGET_KEYS = (
    "crossover",
    "phase_margin",
    "integrators",
    "overshoot",
    "settling_time",
    "settling_band",
    "pm_rule",
    "error_constant",
    "crossover_tolerance",
)
_SEARCH_KEYS = ("max_order", "trials", "seed", "cancel_lightly_damped", "max_pole_ratio",
                "sample_time", "compute_delay")
#: Most whole sample periods in the sampled loop's delay (plant delay + computation
#: delay): the sampled loop carries one state per period of delay.
MAX_DELAY_SAMPLES = 10000

#: docs/interface.md "Crossover tolerance": default relative tolerance of a numeric target.
DEFAULT_CROSSOVER_TOLERANCE = 1e-4
#: Default practical limit on compensator poles: none faster than this multiple of the
#: crossover. A derivative filter or roll-off far above crossover buys almost no phase
#: and multiplies measurement noise (the kiln study's Ms-optimal PID·filter put its
#: filter pole 300× above crossover for 0.6 % of Ms at 84× the noise gain). Common
#: practice: a derivative filter factor N of about 10 (Åström & Hägglund, *Advanced PID
#: Control*, 2006, §3.3 gives N ≈ 2–20 — from memory) puts the filter pole within a
#: few tens of crossovers; 20 is our default, `search.max_pole_ratio` overrides it.
DEFAULT_MAX_POLE_RATIO = 20.0


# -- the numerical domain (docs/study-file.md, "Numerical domain") ----------------------
#: Roots per list (zeros or poles) of the plant and of each compensator; a polynomial
#: may have at most MAX_ROOTS + 1 coefficients.
MAX_ROOTS = 40
#: [[compensator]] entries in one study.
MAX_COMPENSATORS = 100
#: Every characteristic frequency (nonzero root modulus, 1/delay, target crossover,
#: derived crossover, crossover-range ends) lies in [FREQ_MIN, FREQ_MAX] rad/s …
FREQ_MIN = 1e-8
FREQ_MAX = 1e8
#: … and the largest is at most FREQ_SPAN times the smallest.
FREQ_SPAN = 1e8
#: A nonzero delay τ: 1/τ at most this factor above the study's slowest frequency (the
#: delayed step response steps through every delay period of the slowest mode's horizon:
#: a 1e-6 s delay on a 1 rad/s loop took 30 s, one of 1e-8 s would take hours).
DELAY_SPAN = 1e4
#: A crossover range [low, high] spans at most this factor.
CROSSOVER_RANGE_SPAN = 1e4
#: |gain| of the plant and of each compensator (roots form, or num[0]/den[0]).
GAIN_MIN = 1e-100
GAIN_MAX = 1e100
#: Products |gain|·Π|jω − z| and Π|jω − p| of each loop (plant × compensator, and the
#: plant alone) stay within 10^±MAGNITUDE_DECADES for every ω from MAGNITUDE_REACH
#: below the slowest to MAGNITUDE_REACH above the fastest characteristic frequency
#: (the metrics evaluate products of root factors; float64 ends near 10^±308).
MAGNITUDE_DECADES = 250.0
MAGNITUDE_REACH = 1e5
#: Required loop integrators (a loop with m integrators starts at −m·90°; the hand
#: designs and the searched structures handle up to this many).
MAX_INTEGRATORS = 3
#: Relative error of the re-expanded roots of a num/den polynomial (coefficient vector,
#: 2-norm) above which the conversion is refused.
POLY_TOLERANCE = 1e-8
MAX_TRIALS = 100_000
MAX_SEED = 2**32 - 1  # numpy's and Optuna's seeds are 32-bit
MAX_POLE_RATIO_LIMIT = 1e4
MAX_NAME_LENGTH = 200


# -- value objects ----------------------------------------------------------------------
@dataclass(frozen=True, kw_only=True)
class Targets:
    """Loop targets. ``crossover_rad_s``: a number, a ``(low, high)`` range, or None
    (free). ``phase_margin_deg``: None when absent. ``derived_from`` holds the
    explanation lines when the targets were converted from overshoot/settling."""

    crossover_rad_s: float | tuple[float, float] | None
    phase_margin_deg: float | None
    integrators: int
    derived_from: tuple[str, ...] = ()
    #: Required low-frequency loop gain lim s^m·L(s) (m = loop integrators): Kp, Kv or
    #: Ka; used by the lag hand design. None when not required.
    error_constant: float | None = None
    #: docs/interface.md: a numeric target crossover is met when a gain crossover lies within
    #: this relative distance of it.
    crossover_tolerance: float = DEFAULT_CROSSOVER_TOLERANCE
    #: The step-response requirements the targets were derived from (None when the
    #: targets were given directly): overshoot in percent, settling time in s within
    #: ``settling_band`` (checked against the 2 % settling time, which is never shorter
    #: than the 5 % one). docs/interface.md: designs must meet them, not only the targets.
    overshoot_pct: float | None = None
    settling_time_s: float | None = None
    settling_band: float = 0.02

    @property
    def requirements(self) -> dict[str, float]:
        """METRICS key → required upper bound of the step response (possibly empty)."""
        out: dict[str, float] = {}
        if self.overshoot_pct is not None:
            out["overshoot_pct"] = self.overshoot_pct
        if self.settling_time_s is not None:
            out["settling_time_s"] = self.settling_time_s
        return out


@dataclass(frozen=True, kw_only=True)
class SearchOptions:
    """Options of the exploration (``[search]``)."""

    max_order: int = 3
    trials: int = 100  # per structure
    seed: int | None = None
    cancel_lightly_damped: bool = False
    #: practical limit: no compensator pole faster than this multiple of the crossover
    max_pole_ratio: float = DEFAULT_MAX_POLE_RATIO
    #: the controller's sample period T (s): the search ranks and checks the sampled
    #: loop (ZOH, Tustin with prewarping at each design's crossover); None: continuous
    sample_time_s: float | None = None
    #: the computation delay τc (s) from sampling to output, with ``sample_time_s``
    compute_delay_s: float = 0.0


@dataclass(frozen=True, kw_only=True)
class NamedCompensator:
    """A fixed design from a ``[[compensator]]`` entry."""

    name: str
    compensator: Rational


@dataclass(frozen=True, kw_only=True)
class Variation:
    """A plant family (``[variation]``, docs/study-file.md): every plant
    g·P(σ·s)·e^(−sτ) with g in ``gain``, τ in ``delay_s`` and σ in ``time_scale``
    (P the nominal rational part; a range is None when absent), plus the listed
    ``members`` (full plants with their own delays)."""

    gain: tuple[float, float] | None = None
    delay_s: tuple[float, float] | None = None
    time_scale: tuple[float, float] | None = None
    members: tuple[Rational, ...] = ()


@dataclass(frozen=True, kw_only=True)
class Study:
    """A validated study. ``source`` is the file name as given (for messages).
    ``variation`` is None for a study of one plant."""

    name: str
    source: str
    plant: Rational
    targets: Targets
    limits: dict[str, float]
    search: SearchOptions
    compensators: tuple[NamedCompensator, ...]
    variation: Variation | None = None
    #: a measured plant (``[plant] data``, docs/measured-data.md): an
    #: explorer.plant_source.MeasuredPlant; ``plant`` is then the model fitted to it
    measured: Any = None


# -- entry points ---------------------------------------------------------------------------
#: Largest study file read (bytes); a study is a few hundred bytes to a few kB.
MAX_FILE_BYTES = 1 << 20


def read_text_file(path: str | os.PathLike[str], what: str) -> str:
    """The UTF-8 text of a regular file of at most MAX_FILE_BYTES, BOM removed.

    ``what`` names the file in messages ("study file"). Anything else — a missing
    file, a directory, a FIFO or device (refused before opening, so nothing blocks),
    a file too large, bytes that are not UTF-8 — raises :class:`StudyFileError`
    with an empty key and a one-line message.
    """
    source = os.fspath(path)
    shown = _show_path(source)
    try:
        st = os.stat(source)
        if stat.S_ISDIR(st.st_mode):
            raise StudyFileError("", f"cannot read {what} {shown}: it is a directory")
        if not stat.S_ISREG(st.st_mode):
            raise StudyFileError(
                "", f"cannot read {what} {shown}: not a regular file ({_file_kind(st.st_mode)})"
            )
        if st.st_size > MAX_FILE_BYTES:
            raise StudyFileError("", f"cannot read {what} {shown}: {st.st_size} bytes, "
                                     f"larger than the limit of {MAX_FILE_BYTES} bytes")
        flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
        fd = os.open(source, flags)
        with os.fdopen(fd, "rb") as fh:
            if not stat.S_ISREG(os.fstat(fh.fileno()).st_mode):  # swapped since the stat
                raise StudyFileError("", f"cannot read {what} {shown}: not a regular file")
            raw = fh.read(MAX_FILE_BYTES + 1)
    except StudyFileError:
        raise
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise StudyFileError("", f"cannot read {what} {shown}: {reason}") from None
    except ValueError as exc:  # e.g. an embedded NUL byte in the path
        raise StudyFileError("", f"cannot read {what} {shown}: {_one_line(str(exc))}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise StudyFileError("", f"cannot read {what} {shown}: larger than the limit of "
                                 f"{MAX_FILE_BYTES} bytes")
    if raw.startswith(b"\xef\xbb\xbf"):  # a UTF-8 byte-order mark, as some editors write
        raw = raw[3:]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise StudyFileError(
            "", f"{shown}: not UTF-8 text ({exc.reason} at byte {exc.start})"
        ) from None


def _file_kind(mode: int) -> str:
    for test, name in ((stat.S_ISFIFO, "a FIFO"), (stat.S_ISCHR, "a character device"),
                       (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return name
    return "not a file"


def _show_path(source: str) -> str:
    """A path for a message: as given, or quoted and escaped when it holds control
    characters or NUL (so the message stays one harmless line)."""
    if any(_is_control(ch) for ch in source):
        return json.dumps(source)
    return source


def _is_control(ch: str) -> bool:
    o = ord(ch)
    return o < 0x20 or 0x7F <= o < 0xA0 or ch in "\u2028\u2029"


def load_study(path: str | os.PathLike[str]) -> Study:
    """Read and validate a TOML study file. Raises :class:`StudyFileError`."""
    source = os.fspath(path)
    text = read_text_file(source, "study file")
    shown = _show_path(source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyFileError("", f"{shown}: TOML syntax error: {_one_line(str(exc))}") from None
    except RecursionError:
        raise StudyFileError("", f"{shown}: TOML nested too deeply (arrays or tables "
                                 "within one another)") from None
    return parse_study(data, source=source)


def parse_study(data: dict[str, Any], source: str = "<study>") -> Study:
    """Validate an already-parsed TOML document (a dict) into a :class:`Study`."""
    if not isinstance(data, Mapping):
        raise StudyFileError("", f"a study must be a table of keys, got {_describe(data)}")
    _check_keys(data, _TOP_KEYS, "")
    name = _opt_string(data, "name", "")
    if name is None:
        stem = Path(source).stem if source and not source.startswith("<") else ""
        name = stem or "study"

    plant_tab = _table(data, "plant", "", required=True)
    _check_keys(plant_tab, _PLANT_KEYS, "plant")
    measured = None
    if "data" in plant_tab:
        plant, measured = _measured(plant_tab, source)
    else:
        for key in ("unstable_poles", "integrators"):
            if key in plant_tab:
                raise StudyFileError(f"plant.{key}", "is only used with `plant.data` (a "
                                                     "measured plant)")
        plant = _rational(plant_tab, "plant", allow_delay=True)
        _require_proper(plant, plant_tab, "plant", "plant", "")

    targets = _targets(_table(data, "targets", "", required=True))
    limits = _limits(_table(data, "limits", "", required=False))
    search = _search(_table(data, "search", "", required=False))
    _check_sampling(search, plant, measured, "variation" in data)
    compensators = _compensators(data.get("compensator"))
    if measured is None:
        _check_domain(plant, plant_tab, targets, compensators, data.get("compensator"))
    else:
        try:
            _check_domain(plant, {}, targets, compensators, data.get("compensator"))
        except StudyFileError as exc:
            if not exc.key.startswith("plant"):
                raise
            raise StudyFileError("plant.data", f"gives a fitted model outside the numerical "
                                               f"domain: {exc.message}") from None
        if "variation" in data:
            raise StudyFileError("variation", "is not supported with a measured plant "
                                              "(`plant.data`)")
    variation = None
    if "variation" in data:
        variation = _variation(_table(data, "variation", "", required=True), plant)
        for fam_plant, on in family_plants(plant, variation):  # explorer/phase_domain.py
            check_phase_reach(fam_plant, [c.compensator for c in compensators],
                              [f"compensator[{i}]" for i in range(len(compensators))], _fmt, on)
    return Study(
        name=name,
        source=source,
        plant=plant,
        targets=targets,
        limits=limits,
        search=search,
        compensators=compensators,
        variation=variation,
        measured=measured,
    )


def _measured(tab: Mapping[str, Any], source: str) -> tuple[Rational, Any]:
    """``[plant] data`` (docs/measured-data.md): the sweep read relative to the study
    file, the model fitted to it. Returns (fitted model, MeasuredPlant)."""
    from explorer.measured import read_sweep  # lazy: these import this module
    from explorer.plant_source import measured_plant

    clash = next((k for k in _MODEL_KEYS if k in tab), None)
    if clash is not None:
        raise StudyFileError("plant.data", f"and `plant.{clash}` are both given: a measured "
                                           "plant replaces gain/zeros/poles/delay (the model "
                                           "is fitted to the data)")
    name = _opt_string(tab, "data", "plant")
    if name is None or not name.strip():
        raise StudyFileError("plant.data", "must name a CSV file (a non-empty string)")
    unstable = 0
    if "unstable_poles" in tab:
        unstable = _int(tab["unstable_poles"], "plant.unstable_poles", low=0, high=MAX_ROOTS)
    integrators = None
    if "integrators" in tab:
        integrators = _int(tab["integrators"], "plant.integrators", low=0,
                           high=MAX_INTEGRATORS)
    base = Path(source).parent if source and not source.startswith("<") else Path()
    sweep = read_sweep(base / name, key="plant.data", shown=name)
    try:
        mp = measured_plant(sweep, unstable_poles=unstable, integrators=integrators,
                            shown=name)
    except (ValueError, np.linalg.LinAlgError, ArithmeticError) as exc:
        raise StudyFileError("plant.data", f"{name}: no model could be fitted to the data "
                                           f"({_one_line(str(exc))[:120]})") from None
    return mp.fit.model, mp


# -- sections ---------------------------------------------------------------------------------
def _targets(tab: Mapping[str, Any]) -> Targets:
    _check_keys(tab, _TARGET_KEYS, "targets")
    if "integrators" not in tab:
        raise StudyFileError("targets.integrators", "is required (free integrators of the loop)")
    integrators = _int(tab["integrators"], "targets.integrators", low=0,
                       high=MAX_INTEGRATORS)
    ec = None
    if "error_constant" in tab:
        ec = _number(tab["error_constant"], "targets.error_constant", low=GAIN_MIN,
                     high=GAIN_MAX)

    has_os = "overshoot" in tab
    if has_os and "phase_margin" in tab:
        raise StudyFileError(
            "targets.overshoot",
            "and `targets.phase_margin` are both given (ambiguous); give one of them",
        )
    if "settling_time" in tab and "crossover" in tab:
        raise StudyFileError(
            "targets.settling_time",
            "and `targets.crossover` are both given (ambiguous); give one of them",
        )
    if not has_os:
        for key in ("settling_time", "settling_band", "pm_rule"):
            if key in tab:
                raise StudyFileError(f"targets.{key}", "is only used with `targets.overshoot`")
    if "settling_band" in tab and "settling_time" not in tab:
        raise StudyFileError("targets.settling_band", "is only used with `targets.settling_time`")

    crossover = _crossover(tab["crossover"]) if "crossover" in tab else None
    tol = DEFAULT_CROSSOVER_TOLERANCE
    if "crossover_tolerance" in tab:
        tol = _number(tab["crossover_tolerance"], "targets.crossover_tolerance", low=0.0,
                      high=0.5, low_incl=False, high_incl=True)
        if crossover is not None and not isinstance(crossover, (int, float)):
            raise StudyFileError("targets.crossover_tolerance",
                                 "is only used with a numeric `targets.crossover`, not a range")

    if not has_os:
        pm = None
        if "phase_margin" in tab:
            pm = _number(tab["phase_margin"], "targets.phase_margin", low=0.0, high=90.0,
                         low_incl=False, high_incl=False, unit=" deg")
        return Targets(crossover_rad_s=crossover, phase_margin_deg=pm, integrators=integrators,
                       error_constant=ec, crossover_tolerance=tol)

    overshoot = _number(tab["overshoot"], "targets.overshoot", low=0.0, high=100.0,
                        low_incl=True, high_incl=False, unit=" %")
    settling = None
    if "settling_time" in tab:
        settling = _number(tab["settling_time"], "targets.settling_time", low=0.0,
                           low_incl=False, unit=" s")
    band = 0.02
    if "settling_band" in tab:
        band = _number(tab["settling_band"], "targets.settling_band")
        if band not in specs.SETTLING_CONSTANTS:
            raise StudyFileError("targets.settling_band",
                                 f"must be 0.02 or 0.05 (2 % or 5 % band), got {_fmt(band)}")
    rule = "exact"
    if "pm_rule" in tab:
        rule_v = tab["pm_rule"]
        if not isinstance(rule_v, str) or rule_v not in specs.PM_RULES:
            raise StudyFileError(
                "targets.pm_rule",
                f"must be one of {', '.join(repr(r) for r in specs.PM_RULES)}, "
                f"got {_describe(rule_v)}",
            )
        rule = rule_v
    conv = specs.targets_from_requirements(overshoot, settling, band=band, rule=rule)
    if settling is not None:
        crossover = conv.crossover_rad_s
    return Targets(
        crossover_rad_s=crossover,
        phase_margin_deg=conv.phase_margin_deg,
        integrators=integrators,
        derived_from=conv.explanation,
        error_constant=ec,
        crossover_tolerance=tol,
        overshoot_pct=overshoot,
        settling_time_s=settling,
        settling_band=band,
    )


def _crossover(value: Any) -> float | tuple[float, float]:
    key = "targets.crossover"
    if isinstance(value, list):
        if len(value) != 2:
            n = len(value)
            raise StudyFileError(
                key, f"range must be [low, high], got {n} value{'' if n == 1 else 's'}"
            )
        low = _number(value[0], f"{key}[0]", low=0.0, low_incl=False, unit=" rad/s")
        high = _number(value[1], f"{key}[1]", low=0.0, low_incl=False, unit=" rad/s")
        if not low < high:
            raise StudyFileError(
                key, f"range must have low < high, got [{_fmt(low)}, {_fmt(high)}]"
            )
        if high > CROSSOVER_RANGE_SPAN * low:
            raise StudyFileError(
                key, f"range [{_fmt(low)}, {_fmt(high)}] spans a factor {_fmt(high / low)}; "
                     f"at most {_fmt(CROSSOVER_RANGE_SPAN)} is allowed (numerical domain)"
            )
        return (low, high)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return _number(value, key, low=0.0, low_incl=False, unit=" rad/s")
    raise StudyFileError(key, f"must be a number or a [low, high] range in rad/s, "
                              f"got {_describe(value)}")


def _limits(tab: Mapping[str, Any]) -> dict[str, float]:
    _check_keys(tab, tuple(LIMIT_KEYS), "limits")
    out: dict[str, float] = {}
    for key, value in tab.items():
        low, low_incl, high, high_incl, unit = _LIMIT_RANGES[key]
        out[key] = _number(value, f"limits.{key}", low=low, high=high,
                           low_incl=low_incl, high_incl=high_incl, unit=unit)
    return out


def _search(tab: Mapping[str, Any]) -> SearchOptions:
    _check_keys(tab, _SEARCH_KEYS, "search")
    kw: dict[str, Any] = {}
    if "max_order" in tab:
        kw["max_order"] = _int(tab["max_order"], "search.max_order", low=0,
                               high=MAX_SEARCH_ORDER)
    if "trials" in tab:
        kw["trials"] = _int(tab["trials"], "search.trials", low=1, high=MAX_TRIALS)
    if "seed" in tab:
        kw["seed"] = _int(tab["seed"], "search.seed", low=0, high=MAX_SEED)
    if "cancel_lightly_damped" in tab:
        v = tab["cancel_lightly_damped"]
        if not isinstance(v, bool):
            raise StudyFileError("search.cancel_lightly_damped",
                                 f"must be true or false, got {_describe(v)}")
        kw["cancel_lightly_damped"] = v
    if "max_pole_ratio" in tab:
        kw["max_pole_ratio"] = _number(tab["max_pole_ratio"], "search.max_pole_ratio", low=1.0,
                                       low_incl=False, high=MAX_POLE_RATIO_LIMIT)
    if "sample_time" in tab:
        kw["sample_time_s"] = _number(tab["sample_time"], "search.sample_time", low=0.0,
                                      low_incl=False, high=1.0 / FREQ_MIN, unit=" s")
    if "compute_delay" in tab:
        if "sample_time" not in tab:
            raise StudyFileError("search.compute_delay", "needs `search.sample_time` (the "
                                                         "computation delay of a sampled "
                                                         "controller)")
        kw["compute_delay_s"] = _number(tab["compute_delay"], "search.compute_delay", low=0.0,
                                        high=1.0 / FREQ_MIN, unit=" s")
    return SearchOptions(**kw)


def _check_sampling(search: SearchOptions, plant: Rational, measured: Any,
                    family: bool) -> None:
    """A sampled search needs a model plant (and, for now, one plant: no
    ``[variation]``) and a delay of at most MAX_DELAY_SAMPLES sample periods; the
    Nyquist frequency π/T must lie in the numerical domain."""
    T = search.sample_time_s
    if T is None:
        return
    if measured is not None:
        raise StudyFileError("search.sample_time", "sampled search needs a model plant "
                                                   "(`plant.data` is a measured sweep)")
    if family:
        raise StudyFileError("search.sample_time", "is not supported with a plant family "
                                                   "(`[variation]`) yet")
    if not (FREQ_MIN <= math.pi / T <= FREQ_MAX):
        raise StudyFileError("search.sample_time", f"gives a Nyquist frequency π/T = "
                                                   f"{math.pi / T:.3g} rad/s outside "
                                                   f"[{FREQ_MIN:g}, {FREQ_MAX:g}] rad/s")
    periods = (plant.delay_s + search.compute_delay_s) / T
    if periods > MAX_DELAY_SAMPLES:
        raise StudyFileError("search.sample_time", f"is {periods:.3g} times shorter than the "
                                                   f"plant and computation delay; at most "
                                                   f"{MAX_DELAY_SAMPLES} periods of delay are "
                                                   "supported")


def _compensators(value: Any) -> tuple[NamedCompensator, ...]:
    if value is None:
        return ()
    if not isinstance(value, list):
        raise StudyFileError("compensator", "must be written as [[compensator]] tables, "
                                            f"got {_describe(value)}")
    if len(value) > MAX_COMPENSATORS:
        raise StudyFileError("compensator", f"has {len(value)} entries; at most "
                                            f"{MAX_COMPENSATORS} are allowed")
    out: list[NamedCompensator] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(value):
        where = f"compensator[{i}]"
        if not isinstance(entry, Mapping):
            raise StudyFileError(where, f"must be a table, got {_describe(entry)}")
        _check_keys(entry, _COMP_KEYS, where)
        name = _opt_string(entry, "name", where)
        if name is None:
            name = f"C{i + 1}"
        if not name.strip():
            raise StudyFileError(f"{where}.name", "must not be empty")
        if name in seen:
            raise StudyFileError(
                f"{where}.name", f"repeats the name {name!r} of compensator[{seen[name]}]"
            )
        seen[name] = i
        comp = _rational(entry, where)
        _require_proper(comp, entry, where, "compensator",
                        "; its high-frequency gain would be infinite")
        out.append(NamedCompensator(name=name, compensator=comp))
    return tuple(out)


def _range(value: Any, key: str, unit: str = "") -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        raise StudyFileError(key, f"must be a range [low, high]{unit}, got {_describe(value)}")
    lo = _number(value[0], f"{key}[0]")
    hi = _number(value[1], f"{key}[1]")
    if lo > hi:
        raise StudyFileError(key, f"must have low ≤ high, got [{_fmt(lo)}, {_fmt(hi)}]")
    return lo, hi


def _factor_range(tab: Mapping[str, Any], name: str) -> tuple[float, float] | None:
    if name not in tab:
        return None
    key = f"variation.{name}"
    lo, hi = _range(tab[name], key)
    if lo <= 0.0:
        raise StudyFileError(key, f"must have factors > 0, got low = {_fmt(lo)}")
    if not lo <= 1.0 <= hi:
        raise StudyFileError(key, f"must contain the nominal factor 1, got [{_fmt(lo)}, "
                                  f"{_fmt(hi)}]")
    if hi > MAX_FACTOR_RATIO * lo:
        raise StudyFileError(key, f"spans a factor {_fmt(hi / lo)}; at most "
                                  f"{_fmt(MAX_FACTOR_RATIO)} is allowed (numerical domain)")
    return lo, hi


def _variation(tab: Mapping[str, Any], plant: Rational) -> Variation:
    """``[variation]``: ranges containing the nominal plant, and listed members."""
    _check_keys(tab, _VARIATION_KEYS, "variation")
    gain = _factor_range(tab, "gain")
    ts = _factor_range(tab, "time_scale")
    delay = None
    if "delay" in tab:
        lo, hi = _range(tab["delay"], "variation.delay", " in s")
        if lo < 0.0:
            raise StudyFileError("variation.delay", f"must have delays ≥ 0 s, got low = "
                                                    f"{_fmt(lo)}")
        d0 = plant.delay_s
        if not lo <= d0 <= hi:
            raise StudyFileError("variation.delay", f"must contain the nominal plant.delay "
                                                    f"{_fmt(d0)} s, got [{_fmt(lo)}, {_fmt(hi)}]")
        for v, i in ((lo, 0), (hi, 1)):
            if v and not 1.0 / FREQ_MAX <= v <= 1.0 / FREQ_MIN:
                raise StudyFileError(
                    f"variation.delay[{i}]", f"must be 0 or in [{_fmt(1.0 / FREQ_MAX)}, "
                    f"{_fmt(1.0 / FREQ_MIN)}] s (numerical domain), got {_fmt(v)}")
        delay = (lo, hi)
    if ts is not None:
        for r in (*plant.zeros, *plant.poles):
            if r != 0 and r.real == 0:
                raise StudyFileError(
                    "variation.time_scale", "needs a plant without undamped roots off the "
                    f"origin (the plant has {_fmt_root(r)}): the worst-case bound over the "
                    "time scale divides by each root's damping")
            for f in ts:
                if r != 0:
                    _check_window(abs(r) / f, "variation.time_scale", "moves a plant root to",
                                  r / f)
    members: list[Rational] = []
    raw = tab.get("member", [])
    if not isinstance(raw, list):
        raise StudyFileError("variation.member", "must be written as [[variation.member]] "
                                                 f"tables, got {_describe(raw)}")
    if len(raw) > MAX_MEMBERS:
        raise StudyFileError("variation.member", f"has {len(raw)} entries; at most "
                                                 f"{MAX_MEMBERS} are allowed")
    from explorer.loop import feedback_sign

    for i, entry in enumerate(raw):
        where = f"variation.member[{i}]"
        if not isinstance(entry, Mapping):
            raise StudyFileError(where, f"must be a table, got {_describe(entry)}")
        _check_keys(entry, _PLANT_KEYS, where)
        m = _rational(entry, where, allow_delay=True)
        _require_proper(m, entry, where, "plant", "")
        if feedback_sign(m) != feedback_sign(plant):
            raise StudyFileError(
                f"{where}.gain", "acts in the opposite direction to the nominal plant (its "
                "static gain has the other sign): no one compensator can be negative "
                "feedback for both")
        if m.n_integrators != plant.n_integrators:
            raise StudyFileError(
                where, f"has {m.n_integrators} integrator(s), the nominal plant "
                f"{plant.n_integrators}: members must share the plant's integrators")
        _check_domain(m, entry, Targets(crossover_rad_s=None, phase_margin_deg=None,
                                        integrators=0), (), None, where)
        members.append(m)
    if gain is None and delay is None and ts is None and not members:
        raise StudyFileError("variation", "is empty: give gain, delay, time_scale or "
                                          "[[variation.member]] entries")
    return Variation(gain=gain, delay_s=delay, time_scale=ts, members=tuple(members))


# -- rational factors -------------------------------------------------------------------------
def _rational(tab: Mapping[str, Any], where: str, *, allow_delay: bool = False) -> Rational:
    root_keys = [k for k in _ROOT_FORM if k in tab]
    poly_keys = [k for k in _POLY_FORM if k in tab]
    if root_keys and poly_keys:
        raise StudyFileError(
            f"{where}.{poly_keys[0]}",
            f"cannot be combined with `{where}.{root_keys[0]}`: give gain/zeros/poles "
            "or num/den, not both",
        )
    delay = 0.0
    if allow_delay and "delay" in tab:
        delay = _number(tab["delay"], f"{where}.delay", low=0.0, low_incl=True, unit=" s")
        if delay and not 1.0 / FREQ_MAX <= delay <= 1.0 / FREQ_MIN:
            raise StudyFileError(
                f"{where}.delay", f"must be 0 or in [{_fmt(1.0 / FREQ_MAX)}, "
                                  f"{_fmt(1.0 / FREQ_MIN)}] s (numerical domain), got {_fmt(delay)}"
            )

    if poly_keys:
        for k in _POLY_FORM:
            if k not in tab:
                raise StudyFileError(
                    f"{where}.{k}",
                    f"is required with `{where}.{poly_keys[0]}` "
                    "(coefficients, highest power first)",
                )
        num = _coefficients(tab["num"], f"{where}.num")
        den = _coefficients(tab["den"], f"{where}.den")
        kn, zeros = _poly_roots(num, f"{where}.num")
        kd, poles = _poly_roots(den, f"{where}.den")
        gain = kn / kd
        if not (math.isfinite(gain) and GAIN_MIN <= abs(gain) <= GAIN_MAX):
            raise StudyFileError(
                f"{where}.num",
                f"gives the gain num[0]/den[0] = {_fmt(kn)}/{_fmt(kd)}, outside the numerical "
                f"domain: |gain| must be in [{_fmt(GAIN_MIN)}, {_fmt(GAIN_MAX)}]",
            )
        return Rational(gain=gain, zeros=zeros, poles=poles, delay_s=delay)

    if "gain" not in tab:
        raise StudyFileError(f"{where}.gain", "is required (or give `num` and `den`)")
    gain = _number(tab["gain"], f"{where}.gain")
    if gain == 0.0:
        raise StudyFileError(f"{where}.gain", "must not be 0")
    if not GAIN_MIN <= abs(gain) <= GAIN_MAX:
        raise StudyFileError(
            f"{where}.gain", f"must have |gain| in [{_fmt(GAIN_MIN)}, {_fmt(GAIN_MAX)}] "
                             f"(numerical domain), got {_fmt(gain)}")
    zeros = _roots(tab.get("zeros", []), f"{where}.zeros")
    poles = _roots(tab.get("poles", []), f"{where}.poles")
    return Rational(gain=gain, zeros=zeros, poles=poles, delay_s=delay)


def _poly_roots(coeffs: list[float], key: str) -> tuple[float, tuple[complex, ...]]:
    """Leading coefficient and roots of a coefficient list, refused when the roots do not
    reproduce the polynomial: the re-expanded roots (numpy.poly) times the leading
    coefficient must match the given coefficients within POLY_TOLERANCE (relative
    2-norm of the coefficient vector), and every root must be finite and inside the
    frequency window."""
    c = np.trim_zeros(np.asarray(coeffs, dtype=float), "f")
    scale = float(np.max(np.abs(c)))
    with np.errstate(all="ignore"):
        cn = c / scale  # the roots do not change; keeps 1e-300-sized coefficients finite
        try:
            lead, roots = roots_from_coefficients(cn.tolist())
        except np.linalg.LinAlgError:
            roots, lead = None, 0.0
        ok = roots is not None and all(math.isfinite(abs(r)) for r in roots)
        if ok:
            again = lead * np.poly(np.array(roots, dtype=complex)) if roots else np.array([lead])
            err = float(np.linalg.norm(again.real - cn) / np.linalg.norm(cn))
            ok = math.isfinite(err) and err <= POLY_TOLERANCE
    if not ok:
        raise StudyFileError(
            key, "cannot be converted to roots accurately (its roots do not reproduce the "
                 "coefficients within a relative "
                 f"{_fmt(POLY_TOLERANCE)}); give the roots instead (gain/zeros/poles)"
        )
    assert roots is not None
    for r in roots:
        _check_window(abs(r), key, "has a root", r)
    return lead * scale, roots


def _require_proper(
    r: Rational, tab: Mapping[str, Any], where: str, noun: str, why: str
) -> None:
    """Refuse more zeros than poles; the key named is where the zeros were written."""
    if r.is_proper:
        return
    nz, npl = len(r.zeros), len(r.poles)
    key = f"{where}.num" if "num" in tab else f"{where}.zeros"
    raise StudyFileError(
        key,
        f"gives an improper {noun}: {nz} zero{'s' if nz != 1 else ''} but "
        f"{npl} pole{'s' if npl != 1 else ''} (a {noun} needs at least as many poles as "
        f"zeros){why}",
    )


def _coefficients(value: Any, key: str) -> list[float]:
    if not isinstance(value, list):
        raise StudyFileError(key, f"must be a list of coefficients (highest power first), "
                                  f"got {_describe(value)}")
    if len(value) > MAX_ROOTS + 1:
        raise StudyFileError(key, f"has {len(value)} coefficients; at most {MAX_ROOTS + 1} "
                                  f"(degree {MAX_ROOTS}) are allowed (numerical domain)")
    coeffs = [_number(c, f"{key}[{i}]") for i, c in enumerate(value)]
    if not any(c != 0.0 for c in coeffs):
        raise StudyFileError(key, "must have a nonzero coefficient")
    return coeffs


def _roots(value: Any, key: str) -> tuple[complex, ...]:
    if not isinstance(value, list):
        raise StudyFileError(key, f"must be a list of roots, got {_describe(value)}")
    if len(value) > MAX_ROOTS:
        raise StudyFileError(key, f"has {len(value)} roots; at most {MAX_ROOTS} are allowed "
                                  "(numerical domain)")
    roots: list[complex] = []
    for i, item in enumerate(value):
        r = _root(item, f"{key}[{i}]")
        _check_window(abs(r), f"{key}[{i}]", "is", r)
        roots.append(r)
    # every complex root must be matched by its conjugate (with multiplicity)
    upper = [(i, r) for i, r in enumerate(roots) if r.imag > 0]
    lower = [(i, r) for i, r in enumerate(roots) if r.imag < 0]
    for i, r in upper + lower:
        partners = lower if r.imag > 0 else upper
        match = next((p for p in partners if _close(p[1], r.conjugate())), None)
        if match is None:
            raise StudyFileError(
                f"{key}[{i}]",
                f"complex root {_fmt_root(r)} needs its conjugate {_fmt_root(r.conjugate())} "
                "in the same list",
            )
    if len(upper) != len(lower):
        raise StudyFileError(key, f"has {len(upper)} roots above and {len(lower)} below the "
                                  "real axis; complex roots must come in conjugate pairs")
    # pair them one-to-one (multiplicity) and make each pair exactly conjugate
    free = list(lower)
    for i, r in upper:
        j = next((k for k, p in enumerate(free) if _close(p[1], r.conjugate())), None)
        if j is None:
            raise StudyFileError(
                f"{key}[{i}]",
                f"complex root {_fmt_root(r)} appears more often than its conjugate",
            )
        idx, _ = free.pop(j)
        roots[idx] = r.conjugate()
    return tuple(roots)


def _root(item: Any, key: str) -> complex:
    if isinstance(item, bool):
        raise StudyFileError(key, f"must be a number or a complex string like \"-2+3j\", "
                                  f"got {_describe(item)}")
    if isinstance(item, (int, float)):
        v = _to_float(item)
        if not math.isfinite(v):
            raise StudyFileError(key, f"must be finite, got {_fmt(v)}")
        return complex(v, 0.0)
    if isinstance(item, str):
        try:
            c = complex(item.replace(" ", ""))
        except ValueError:
            raise StudyFileError(
                key, f"is not a root: {item!r} (write a complex root like \"-2+3j\")"
            ) from None
        if not (math.isfinite(c.real) and math.isfinite(c.imag)):
            raise StudyFileError(key, f"must be finite, got {item!r}")
        return complex(c.real, c.imag)
    raise StudyFileError(key, f"must be a number or a complex string like \"-2+3j\", "
                              f"got {_describe(item)}")


def _to_float(value: int | float) -> float:
    """float(value), with integers too large for a float mapped to ±inf (refused later)."""
    try:
        return float(value)
    except OverflowError:
        return math.inf if value > 0 else -math.inf


def _close(a: complex, b: complex) -> bool:
    return abs(a - b) <= 1e-9 * max(abs(a), abs(b), 1.0)


# -- the numerical domain ------------------------------------------------------------------
def _check_window(mag: float, key: str, verb: str, root: complex) -> None:
    """A nonzero root's modulus must lie in [FREQ_MIN, FREQ_MAX] rad/s."""
    if mag == 0.0 or FREQ_MIN <= mag <= FREQ_MAX:
        return
    shown = _fmt(root.real) if root.imag == 0 else _fmt_root(root)
    raise StudyFileError(
        key, f"{verb} {shown} (modulus {_fmt(mag)} rad/s), outside the numerical domain: "
             f"nonzero roots must have a modulus in [{_fmt(FREQ_MIN)}, {_fmt(FREQ_MAX)}] "
             "rad/s (write the plant in another time unit, e.g. ms or h)"
    )


def _check_domain(
    plant: Rational,
    plant_tab: Mapping[str, Any],
    targets: Targets,
    compensators: tuple[NamedCompensator, ...],
    comp_raw: Any,
    where: str = "plant",
) -> None:
    """The study-wide parts of the numerical domain (docs/study-file.md): the span of its
    characteristic frequencies, and finite products of root factors in every loop."""
    freqs: list[tuple[float, str]] = []

    def factor(r: Rational, tab: Mapping[str, Any], where: str) -> None:
        poly = "num" in tab
        for roots, key in ((r.zeros, "num" if poly else "zeros"),
                           (r.poles, "den" if poly else "poles")):
            freqs.extend((abs(x), f"{where}.{key}") for x in roots if x != 0)

    factor(plant, plant_tab, where)
    if plant.delay_s > 0:
        freqs.append((1.0 / plant.delay_s, f"{where}.delay"))
    wc = targets.crossover_rad_s
    wc_key = "targets.settling_time" if targets.settling_time_s is not None else \
        "targets.crossover"
    for w in (wc if isinstance(wc, tuple) else () if wc is None else (wc,)):
        if not FREQ_MIN <= w <= FREQ_MAX:
            raise StudyFileError(
                wc_key, f"gives a crossover of {_fmt(w)} rad/s, outside the numerical domain "
                        f"[{_fmt(FREQ_MIN)}, {_fmt(FREQ_MAX)}] rad/s")
        freqs.append((w, wc_key))
    raw = comp_raw if isinstance(comp_raw, list) else []
    for i, c in enumerate(compensators):
        tab = raw[i] if i < len(raw) and isinstance(raw[i], Mapping) else {}
        factor(c.compensator, tab, f"compensator[{i}]")

    lo = hi = None
    for f, key in freqs:
        if lo is None or hi is None:
            lo = hi = (f, key)
            continue
        if f < lo[0]:
            lo = (f, key)
        elif f > hi[0]:
            hi = (f, key)
        else:
            continue
        if hi[0] > FREQ_SPAN * lo[0]:
            other = hi if (f, key) == lo else lo
            raise StudyFileError(
                key, f"brings a frequency of {_fmt(f)} rad/s, a factor {_fmt(hi[0] / lo[0])} "
                     f"from the {_fmt(other[0])} rad/s of `{other[1]}`; the numerical domain "
                     f"allows a factor of at most {_fmt(FREQ_SPAN)} between a study's slowest "
                     "and fastest frequency (nonzero roots, 1/delay, crossover targets)"
            )
    if plant.delay_s > 0 and lo is not None and 1.0 / plant.delay_s > DELAY_SPAN * lo[0]:
        raise StudyFileError(
            f"{where}.delay", f"of {_fmt(plant.delay_s)} s is shorter than the numerical domain "
                           f"allows against the {_fmt(lo[0])} rad/s of `{lo[1]}`: 1/delay may "
                           f"be at most {_fmt(DELAY_SPAN)} times the study's slowest frequency "
                           f"(delay ≥ {_fmt(1.0 / (DELAY_SPAN * lo[0]))} s); give delay = 0 "
                           "if it does not matter at these time scales"
        )
    f_lo = lo[0] if lo else 1.0
    f_hi = hi[0] if hi else 1.0
    points = (f_lo / MAGNITUDE_REACH, f_hi * MAGNITUDE_REACH)
    loops = [(plant, where, "the plant's")]
    loops += [(plant * c.compensator, f"compensator[{i}]", "the loop's")
              for i, c in enumerate(compensators)]
    for loop, key, whose in loops:
        for w in points:
            s = 1j * w
            num = math.log10(abs(loop.gain)) + sum(math.log10(abs(s - z)) for z in loop.zeros)
            den = sum(math.log10(abs(s - p)) for p in loop.poles)
            worst = max(abs(num), abs(den))
            if worst > MAGNITUDE_DECADES:
                raise StudyFileError(
                    key, f"makes {whose} products |gain|·Π|jω − z| or Π|jω − p| reach "
                         f"1e{'+' if max(num, den) >= worst else '-'}{round(worst)} at "
                         f"ω = {_fmt(w)} rad/s; the numerical domain keeps them within "
                         f"1e±{round(MAGNITUDE_DECADES)} (fewer roots far from 1 rad/s, or "
                         "another time unit, e.g. ms or h)"
                )
    # ω·τ at the given compensators' crossovers (explorer/phase_domain.py)
    check_phase_reach(plant, [c.compensator for c in compensators],
                      [f"compensator[{i}]" for i in range(len(compensators))], _fmt)


# -- scalar validators --------------------------------------------------------------------
def _number(
    value: Any,
    key: str,
    *,
    low: float = -math.inf,
    high: float = math.inf,
    low_incl: bool = True,
    high_incl: bool = True,
    unit: str = "",
) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise StudyFileError(key, f"must be a number, got {_describe(value)}")
    v = _to_float(value)
    if not math.isfinite(v):
        raise StudyFileError(key, f"must be finite, got {_fmt(v)}")
    ok_low = v >= low if low_incl else v > low
    ok_high = v <= high if high_incl else v < high
    if not (ok_low and ok_high):
        raise StudyFileError(key, f"must be {_interval(low, high, low_incl, high_incl)}{unit}, "
                                  f"got {_fmt(v)}")
    return v


def _interval(low: float, high: float, low_incl: bool, high_incl: bool) -> str:
    if math.isinf(high):
        return f"{'≥' if low_incl else '>'} {_fmt(low)}"
    if math.isinf(low):
        return f"{'≤' if high_incl else '<'} {_fmt(high)}"
    return f"in {'[' if low_incl else '('}{_fmt(low)}, {_fmt(high)}{']' if high_incl else ')'}"


def _int(value: Any, key: str, *, low: int | None = None, high: int | None = None) -> int:
    what = "a non-negative integer" if low == 0 else "an integer"
    if isinstance(value, bool) or not isinstance(value, int):
        raise StudyFileError(key, f"must be {what}, got {_describe(value)}")
    if low is not None and value < low:
        raise StudyFileError(key, f"must be {what}" + ("" if low == 0 else f" ≥ {low}")
                             + f", got {_fmt_int(value)}")
    if high is not None and value > high:
        raise StudyFileError(key, f"must be at most {high}, got {_fmt_int(value)}")
    return int(value)


def _opt_string(tab: Mapping[str, Any], key: str, where: str) -> str | None:
    if key not in tab:
        return None
    v = tab[key]
    full = f"{where}.{key}" if where else key
    if not isinstance(v, str):
        raise StudyFileError(full, f"must be a string, got {_describe(v)}")
    if "\n" in v or "\r" in v:
        raise StudyFileError(full, "must be a single line")
    if any(_is_control(ch) for ch in v):
        raise StudyFileError(full, f"must not contain control characters, got {_describe(v)}")
    if len(v) > MAX_NAME_LENGTH:
        raise StudyFileError(full, f"has {len(v)} characters; at most {MAX_NAME_LENGTH} "
                                   "are allowed")
    return v


def _table(data: Mapping[str, Any], key: str, where: str, *, required: bool) -> Mapping[str, Any]:
    full = f"{where}.{key}" if where else key
    if key not in data:
        if required:
            raise StudyFileError(full, f"is required (a [{full}] table)")
        return {}
    v = data[key]
    if not isinstance(v, Mapping):
        raise StudyFileError(full, f"must be a [{full}] table, got {_describe(v)}")
    return v


def _check_keys(tab: Mapping[str, Any], allowed: tuple[str, ...], where: str) -> None:
    for key in tab:
        if key not in allowed:
            shown = _show_key(str(key))
            full = f"{where}.{shown}" if where else shown
            hint = difflib.get_close_matches(str(key), allowed, n=1)
            extra = f"; did you mean `{hint[0]}`?" if hint else ""
            section = f"in [{where}]" if where else "at the top level"
            raise StudyFileError(
                full, f"is not a known key {section} (known: {', '.join(allowed)}){extra}"
            )


# -- formatting -------------------------------------------------------------------------------
_BARE_KEY_CHARS = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


def _show_key(key: str) -> str:
    """A key as TOML would write it: bare if it can be, else a quoted, escaped string
    (so a key with a newline or a dot still gives a one-line message)."""
    if len(key) > 40:
        key = key[:37] + "..."
    if key and all(ch in _BARE_KEY_CHARS for ch in key):
        return key
    return json.dumps(key)


def _fmt(v: float) -> str:
    if math.isnan(v):
        return "nan"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    return f"{v:.6g}"


def _fmt_root(r: complex) -> str:
    return f"{r.real:.6g}{r.imag:+.6g}j"


def _fmt_int(v: int) -> str:
    """An integer for a message; a huge one in 6 significant digits."""
    return str(v) if abs(v) < 10**15 else _fmt(_to_float(v))


_TYPE_NAMES: dict[type, str] = {
    dict: "a table",
    list: "a list",
    str: "a string",
    bool: "a boolean",
}


def _describe(value: Any) -> str:
    """A short, one-line description of a bad value for a message."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        r = repr(value)
        return r if len(r) <= 10 and math.isfinite(value) else _fmt(value)
    if isinstance(value, int):
        return _fmt_int(value)
    if isinstance(value, str):
        text = value if len(value) <= 40 else value[:37] + "..."
        return repr(_one_line(text))
    for t, name in _TYPE_NAMES.items():
        if isinstance(value, t):
            return name
    if isinstance(value, Mapping):
        return "a table"
    return f"a {type(value).__name__}"


def _one_line(text: str) -> str:
    return " ".join(text.split())


_: Callable[..., Any] = _describe  # keep the helper referenced for linters
