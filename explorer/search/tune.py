"""Optuna driver: one study per structure, NSGA-II, ask/tell in numpy batches.

The only module that imports optuna. Each trial's free parameters are sampled, the
balancing root and the gain are eliminated (explorer.design.structures.balance), and the
batch is evaluated with ``frequency_metrics_batch`` and ``step_metrics_batch``.
Objectives (all minimised): Ms, hf_gain, iae_load, and −ωc when the crossover is
searched. Constraints via ``trial.set_constraint`` (feasible when all ≤ 0): phase
balance shortfall (deg), closed-loop stability, crossover, phase margin, and every
study limit (relative excess). NSGA-II: Deb et al., "A fast and elitist
multiobjective genetic algorithm: NSGA-II", IEEE TEC 6(2), 2002.

Resumable: per structure the trials numbered below the budget are the exploration;
a rerun adds only the missing ones, and a trial left RUNNING by a dead worker on
this host is re-evaluated with its stored parameters and finished (never repeated).
"""

from __future__ import annotations

import datetime as _dt
import importlib.util
import json
import math
import os
import socket
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import optuna
from optuna.distributions import BaseDistribution, FloatDistribution
from optuna.storages.journal import JournalFileBackend, JournalStorage
from optuna.trial import TrialState

from explorer.core import metric_registry as _registry
from explorer.core.errors import LoopscoutError
from explorer.core.loop import Rational, hidden_unstable_mask, root_from_json, root_to_json
from explorer.core.metric_registry import PHASE_MARGIN_TOL_DEG
from explorer.design.sampled_design import sampled_balance, sampled_readings
from explorer.design.structures import Structure, balance
from explorer.evaluation.family import family_worst_batch
from explorer.evaluation.plant_source import balance_plant, frequency_batch
from explorer.evaluation.records import CROSSOVER_REL_TOL
from explorer.model.family_members import sampled_members, search_time_members
from explorer.model.study import LIMIT_KEYS, Targets, Variation
from explorer.time_domain.timeresp import step_metrics_batch

__all__ = [
    "Problem",
    "TrialRecord",
    "open_storage",
    "study_names",
    "create_studies",
    "run_structures",
    "evaluate_batch",
    "row_design",
    "constraint_names",
    "load_records",
    "objective_names",
    "PM_SEARCH_DEG",
    "TIME_KEYS",
    "clear_stale_journal_lock",
    "quiet_optuna",
]


#: Phase-margin range searched when the study sets no phase-margin target: from the
#: study's floor (limits.phase_margin_deg, else 30°) up to 85° (common practice: below
#: 30° a loop is fragile, above 85° the margin buys nothing but sluggishness).
PM_SEARCH_DEG = (30.0, 85.0)
_PENALTY = 1e9
#: How long a worker waits for other workers' running trials before ranking (s).
WAIT_FOR_OTHERS_S = 120.0
_WORKER = f"{socket.gethostname()}:{os.getpid()}"


@dataclass(frozen=True, kw_only=True)
class Problem:
    """What every structure is tuned for: plant, targets (PM used, ωc fixed or a
    log-range), limits."""

    plant: Rational
    targets: Targets
    limits: dict[str, float]
    pm_deg: float  # the phase margin balanced for, or the floor when it is searched
    wc_rad_s: float | None  # fixed crossover, or None when searched
    wc_range_rad_s: tuple[float, float] | None
    #: (floor, ceiling) deg when no phase-margin target is set: the margin is sampled
    pm_range_deg: tuple[float, float] | None = None
    #: practical limit: no compensator pole off the origin faster than this × ωc
    max_pole_ratio: float = math.inf
    #: relative tolerance of a numeric crossover target (targets.crossover_tolerance)
    crossover_tol: float = CROSSOVER_REL_TOL
    #: the plant family (study ``[variation]``): stability, limits and objectives are
    #: then taken at their worst over it (explorer.evaluation.family); None for one plant
    variation: Variation | None = None
    #: a measured plant (explorer.evaluation.plant_source.MeasuredPlant): frequency metrics are
    #: then read on the data, ``plant`` is the fitted model (time responses, scaling)
    measured: Any = None
    #: the controller's sample period (s) and computation delay (s): the search then
    #: balances, constrains and ranks on the sampled loop (explorer.design.sampled_design)
    sample_time_s: float | None = None
    compute_delay_s: float = 0.0

    @property
    def searched_wc(self) -> bool:
        return self.wc_rad_s is None

    @property
    def searched_pm(self) -> bool:
        return self.pm_range_deg is not None

    @property
    def time_limits(self) -> bool:
        """True when a study limit needs the step responses."""
        return any(k in TIME_KEYS for k in self.limits)


@dataclass(frozen=True, kw_only=True)
class TrialRecord:
    """One finished trial read back from storage."""

    structure: int
    number: int
    state: str
    feasible: bool
    gain: float | None
    zeros: tuple[complex, ...]
    poles: tuple[complex, ...]
    metrics: dict[str, float | None]
    constraints: dict[str, float]
    reason: str | None
    #: the sampled parameters (structure parameters, and wc_rad_s / pm_deg when searched)
    params: dict[str, float] = field(default_factory=dict)


def objective_names(searched_wc: bool) -> list[str]:
    return ["sensitivity_peak", "hf_gain", "iae_load"] + (
        ["neg_crossover_rad_s"] if searched_wc else []
    )


def constraint_names(limits: dict[str, float]) -> list[str]:
    return [
        "phase_balance_deg",
        "closed_loop_unstable",
        "crossover_missed",
        "phase_margin_short_deg",
        "practical:max_pole_ratio",
        *[f"limit:{k}" for k in limits],
    ]


#: Metrics that need the step responses (explorer.core.metric_registry).
TIME_KEYS = frozenset(_registry.TIME_KEYS)


def evaluate_batch(
    problem: Problem,
    s: Structure,
    params: dict[str, np.ndarray],
    wc_rad_s: np.ndarray,
    pm_deg: np.ndarray | None = None,
    *,
    time_domain: bool = True,
) -> dict[str, Any]:
    """Balance and evaluate a batch. Returns ``values`` (n, m) objectives,
    ``constraints`` (n, k), ``gain``, ``zeros``, ``poles``, ``metrics`` (dict of
    arrays), and ``fail`` (per-row reason or None). ``pm_deg`` (per row) is the phase
    margin balanced for, default ``problem.pm_deg``. ``time_domain=False`` skips the
    step responses (their metrics stay NaN; a study limit on one is then not checked
    here) — the cheap evaluation used by the local refinement."""

    n = wc_rad_s.shape[0]
    pm_row = np.full(n, problem.pm_deg) if pm_deg is None else np.asarray(pm_deg, float)
    b = balance(balance_plant(problem.plant, problem.measured), s, params, wc_rad_s, pm_row)
    sampled = None
    if problem.sample_time_s is not None:  # the sampled loop (explorer.design.sampled_design)

        b, sampled = sampled_balance(problem, s, params, wc_rad_s, pm_row)
    ok = b.shortfall_deg == 0.0
    metrics: dict[str, np.ndarray] = {}
    keys = (
        "crossover_rad_s",
        "phase_margin_deg",
        "gain_margin_db",
        "delay_margin_s",
        "sensitivity_peak",
        "complementary_peak",
        "hf_gain",
        "integral_gain",
        "overshoot_pct",
        "settling_time_s",
        "rise_time_s",
        "peak_control",
        "iae_load",
    )
    for k in keys:
        metrics[k] = np.full(n, np.nan)
    metrics["closed_loop_stable"] = np.zeros(n, bool)
    fail: list[str | None] = [None] * n
    cross_ok = np.zeros(n)
    idx = np.flatnonzero(ok)
    if idx.size:
        try:
            g, z, p = b.gain[idx], b.zeros[idx], b.poles[idx]
            fm = frequency_batch(problem.plant, problem.measured, g, z, p)
            # internal stability: a cancellation in the closed right half plane (an
            # integrator on a plant zero at s = 0) hides a mode the Nyquist count misses
            stable = np.asarray(fm["closed_loop_stable"], bool) & ~hidden_unstable_mask(
                problem.plant, z, p
            )
            # a measured plant: step responses from the fitted model only when it is good
            timed = time_domain and (problem.measured is None
                                     or problem.measured.fit.time_from_fit)
            if sampled is not None:  # readings and step figures of the sampled loop

                fm, tm = sampled_readings(problem, sampled, fm,
                                          hidden_unstable_mask(problem.plant, z, p), timed)
                stable = np.asarray(fm["closed_loop_stable"], bool)
            else:
                tm = step_metrics_batch(problem.plant, g, z, p, stable=stable) if timed else {}
            for k in keys:
                src = fm if k in fm else tm
                if k in src:
                    metrics[k][idx] = np.asarray(src[k], float)
            for k in fm:  # a measured plant: what a null margin is known to be at least
                if k.startswith("floor_"):
                    metrics.setdefault(k, np.full(n, np.inf))[idx] = fm[k]
            metrics["closed_loop_stable"][idx] = stable
            if problem.variation is not None:
                _family_into(problem, g, z, p, fm, tm, time_domain, idx, metrics)
            xs = np.asarray(fm["crossovers_rad_s"], float).reshape(idx.size, -1)
            rel = np.abs(xs / wc_rad_s[idx, None] - 1.0)
            rel = np.where(np.isnan(rel), np.inf, rel)
            cross_ok[idx] = np.maximum(rel.min(axis=1, initial=np.inf) - problem.crossover_tol,
                                       0.0)
        except Exception as exc:  # a failed evaluation is a failed trial, never a crash
            for i in idx:
                fail[i] = f"evaluation failed: {type(exc).__name__}: {exc}"
    stable = metrics["closed_loop_stable"]
    pm = metrics["phase_margin_deg"]
    cons = [
        b.shortfall_deg,
        np.where(ok & ~stable, 1.0, 0.0),
        np.where(ok, np.minimum(cross_ok, 1.0), 0.0),
        np.where(
            ok,
            np.where(
                np.isnan(pm), 1.0, np.maximum(problem.pm_deg - PHASE_MARGIN_TOL_DEG - pm, 0.0)
            ),
            0.0,
        ),
        np.where(ok, _pole_ratio_excess(b.poles, wc_rad_s, problem.max_pole_ratio), 0.0),
    ]
    wc_t = problem.targets.crossover_rad_s
    if isinstance(wc_t, tuple):
        c = metrics["crossover_rad_s"]
        out_rng = np.where(
            np.isnan(c),
            1.0,
            np.maximum(wc_t[0] - c, 0) / wc_t[0] + np.maximum(c - wc_t[1], 0) / wc_t[1],
        )
        cons[2] = np.where(ok, np.maximum(cons[2], out_rng), 0.0)
    for key, bound in problem.limits.items():
        v = metrics.get("worst_" + key, metrics.get(key))
        if v is None or (not time_domain and key in TIME_KEYS):
            # a limit on a key not computed in this batch: checked at the end
            cons.append(np.zeros(n))
            continue
        scale = max(abs(bound), 1e-9)
        if LIMIT_KEYS[key] == "upper":
            c = np.where(np.isnan(v), 1.0, np.maximum(v - bound, 0.0) / scale)
        else:  # null margin = infinite: holds (on data: if its known floor holds)
            null_ok = metrics.get("floor_" + key, np.full(n, np.inf)) >= bound
            c = np.where(np.isnan(v), np.where(null_ok, 0.0, 1.0),
                         np.maximum(bound - v, 0.0) / scale)
        cons.append(np.where(ok, c, 0.0))
    constraints = np.stack(cons, axis=1)
    vals = [metrics["sensitivity_peak"], metrics["hf_gain"], metrics["iae_load"]]
    if problem.searched_wc:
        vals.append(-wc_rad_s)
    values = np.stack(vals, axis=1)
    # infeasible / unstable designs: penalty objectives (constraints decide); a feasible
    # stable design with a NaN objective is a failed evaluation — except iae_load, which
    # is null by definition when the load error does not vanish (no integrator where the
    # load enters) or when the step responses were skipped: that is the worst value,
    # not a failure
    finite = np.isfinite(values)
    finite[:, 2] = True
    bad = ok & stable & ~np.all(finite, axis=1)
    for i in np.flatnonzero(bad):
        if fail[i] is None:
            fail[i] = "NaN objective for a stable design: " + ", ".join(
                nm
                for nm, v in zip(objective_names(problem.searched_wc), values[i], strict=True)
                if not np.isfinite(v)
            )
    values = np.where(np.isfinite(values), values, _PENALTY)
    return {
        "values": values,
        "constraints": constraints,
        "gain": b.gain,
        "zeros": b.zeros,
        "poles": b.poles,
        "metrics": metrics,
        "fail": fail,
        "feasible": np.all(constraints <= 0.0, axis=1),
    }


#: Keys whose worst over the family replaces the nominal value in a batch's metrics
#: (the search ranks and constrains on them); the phase margin stays nominal (the
#: target) and its worst goes to ``worst_phase_margin_deg`` for a limit.
_FAMILY_KEYS = ("sensitivity_peak", "complementary_peak", "gain_margin_db",
                "delay_margin_s", "closed_loop_stable")
_FAMILY_TIME_KEYS = _registry.WORST_TIME_KEYS


def _family_into(
    problem: Problem, g: np.ndarray, z: np.ndarray, p: np.ndarray,
    fm: dict[str, np.ndarray], tm: dict[str, np.ndarray], time_domain: bool,
    idx: np.ndarray, metrics: dict[str, np.ndarray],
) -> None:
    """Worst values over the plant family into ``metrics`` rows ``idx``: frequency
    figures over the whole family (explorer.evaluation.family.family_worst_batch, box geometry
    plus the listed members); step figures over explorer.model.family_members.search_time_members
    (nominal, the corners at the largest delay, the listed members)."""

    v = problem.variation
    assert v is not None
    members = sampled_members(problem.plant, v)
    listed = [m for m in members if m.gain_factor is None]
    fw = family_worst_batch(problem.plant, v, g, z, p, nominal=fm,
                            members=[members[0], *listed])
    for k in _FAMILY_KEYS:
        if k not in metrics:
            metrics[k] = np.full(metrics["sensitivity_peak"].shape[0], np.nan)
        metrics[k][idx] = fw[k]
    key = "worst_phase_margin_deg"
    if key not in metrics:
        metrics[key] = np.full(metrics["sensitivity_peak"].shape[0], np.nan)
    metrics[key][idx] = fw["phase_margin_deg"]
    if not time_domain:
        return
    st = np.asarray(fw["closed_loop_stable"], bool)
    worst = {k: np.asarray(tm[k], float).copy() for k in _FAMILY_TIME_KEYS}
    for m in search_time_members(problem.plant, v)[1:]:
        tmm = step_metrics_batch(m.plant, g, z, p, stable=st)
        for k in _FAMILY_TIME_KEYS:
            worst[k] = np.maximum(worst[k], np.asarray(tmm[k], float))  # NaN stays NaN
    for k in _FAMILY_TIME_KEYS:
        metrics[k][idx] = np.where(st, worst[k], np.nan)


def _pole_ratio_excess(poles: np.ndarray, wc_rad_s: np.ndarray, ratio: float) -> np.ndarray:
    """log10 excess of the fastest compensator pole off the origin over ``ratio``·ωc
    (0 where every pole is slow enough; the practical limit search.max_pole_ratio)."""
    if poles.shape[1] == 0 or not math.isfinite(ratio):
        return np.zeros(poles.shape[0])
    mag = np.where(np.isfinite(poles), np.abs(poles), 0.0).max(axis=1)
    with np.errstate(divide="ignore"):
        excess = np.log10(mag / (ratio * wc_rad_s))
    return np.maximum(np.nan_to_num(excess, nan=0.0, neginf=0.0), 0.0)


# -- storage ---------------------------------------------------------------------------
def open_storage(storage: str | None, out_dir: Path) -> optuna.storages.BaseStorage:
    """The default journal file ``out_dir/explore.journal``, or an RDB URL."""
    try:
        if storage is None:
            out_dir.mkdir(parents=True, exist_ok=True)
            journal = out_dir / "explore.journal"
            clear_stale_journal_lock(journal)
            return JournalStorage(JournalFileBackend(str(journal)))
        return optuna.storages.RDBStorage(_with_driver(storage))
    except LoopscoutError:
        raise
    except Exception as exc:
        raise LoopscoutError(
            f"storage {storage or str(out_dir / 'explore.journal')!r} cannot be opened: "
            f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
        ) from None


#: The journal's lock file: Optuna's file backend locks ``<journal>.lock`` around each
#: append (a symbolic link, JournalFileSymlinkLock); tests/test_tune.py checks the name
#: against a real lock, so a change in Optuna fails a test rather than this cleanup.
JOURNAL_LOCK_SUFFIX = ".lock"
#: A lock older than this at start-up is stale: an append holds it for milliseconds, so
#: only a worker killed mid-append leaves it (Optuna would wait out its own 30 s grace).
STALE_LOCK_S = 5.0
#: A younger lock is watched this long: if the same lock (inode and time) is still held
#: at the end, no writer is appending (a live worker releases and retakes it within
#: milliseconds) and it is removed — a rerun right after a kill waits this, not 30 s.
HELD_LOCK_S = 2.0


def clear_stale_journal_lock(journal: Path, *, held_s: float = HELD_LOCK_S) -> bool:
    """Remove the journal's lock when it is stale (a worker was killed while
    appending); True when one was removed. Stale: older than STALE_LOCK_S, or the same
    lock still held after ``held_s`` of watching. A lock that is released or taken
    anew meanwhile belongs to a live writer and is left alone."""
    lock = Path(str(journal) + JOURNAL_LOCK_SUFFIX)
    try:
        st = os.lstat(lock)
    except FileNotFoundError:
        return False
    if time.time() - st.st_mtime < STALE_LOCK_S:
        ident = (st.st_ino, st.st_mtime_ns)
        deadline = time.monotonic() + held_s
        while time.monotonic() < deadline:
            time.sleep(0.05)
            try:
                now = os.lstat(lock)
            except FileNotFoundError:
                return False  # released: a live writer
            if (now.st_ino, now.st_mtime_ns) != ident:
                return False  # taken anew: a live writer
    try:
        lock.unlink()
    except FileNotFoundError:  # its owner released it meanwhile
        return False
    return True


def _with_driver(url: str) -> str:
    """``postgresql://`` means psycopg (3) to SQLAlchemy 2.1; fall back to psycopg2
    when only that driver is installed."""
    if url.startswith("postgresql://"):
        if (
            importlib.util.find_spec("psycopg") is None
            and importlib.util.find_spec("psycopg2") is not None
        ):
            return "postgresql+psycopg2://" + url[len("postgresql://") :]
    return url


def study_names(structures: list[Structure]) -> list[str]:
    return [f"{i:02d} {s.label}" for i, s in enumerate(structures)]


def _sampler_seed(seed: int | None, index: int) -> int | None:
    if seed is None:
        return None
    return int(np.random.SeedSequence([int(seed) & 0xFFFFFFFF, index]).generate_state(1)[0])


def create_studies(
    storage: optuna.storages.BaseStorage,
    structures: list[Structure],
    problem: Problem,
    seed: int | None,
    batch: int,
) -> list[optuna.Study]:
    """Create (or load) every structure's study before any trial is asked."""
    out = []
    n_obj = len(objective_names(problem.searched_wc))
    for i, name in enumerate(study_names(structures)):
        sampler = optuna.samplers.NSGAIISampler(
            population_size=max(batch, 8), seed=_sampler_seed(seed, i)
        )
        st = optuna.create_study(
            storage=storage,
            study_name=name,
            directions=["minimize"] * n_obj,
            sampler=sampler,
            load_if_exists=True,
        )
        out.append(st)
    return out


def _distributions(s: Structure, problem: Problem) -> dict[str, BaseDistribution]:
    d: dict[str, BaseDistribution] = {
        k: FloatDistribution(lo, hi) for k, (lo, hi) in s.params.items()
    }
    if problem.searched_wc:
        lo, hi = problem.wc_range_rad_s  # type: ignore[misc]
        d["wc_rad_s"] = FloatDistribution(lo, hi, log=True)
    if problem.searched_pm:
        lo, hi = problem.pm_range_deg  # type: ignore[misc]
        d["pm_deg"] = FloatDistribution(lo, hi)
    return d


def row_design(res: dict[str, Any], i: int) -> dict[str, Any]:
    """Row ``i`` of an ``evaluate_batch`` result as the stored design record (JSON
    types: gain, zeros and poles as in a DESIGN (explorer.core.loop.root_to_json), metrics
    with None for NaN)."""
    return {
        "gain": None if not np.isfinite(res["gain"][i]) else float(res["gain"][i]),
        "zeros": [root_to_json(complex(r)) for r in res["zeros"][i]]
        if np.all(np.isfinite(res["zeros"][i]))
        else [],
        "poles": [root_to_json(complex(r)) for r in res["poles"][i]]
        if np.all(np.isfinite(res["poles"][i]))
        else [],
        "metrics": {
            k: (
                None
                if (isinstance(v[i], float) and not math.isfinite(v[i]))
                else (bool(v[i]) if v.dtype == bool else float(v[i]))
            )
            for k, v in res["metrics"].items()
        },
        "reason": res["fail"][i],
    }


def _tell(
    st: optuna.Study, trial: optuna.Trial, res: dict[str, Any], i: int, cnames: list[str]
) -> None:
    reason = res["fail"][i]
    for name, v in zip(cnames, res["constraints"][i], strict=True):
        trial.set_constraint(name, float(v))
    trial.set_user_attr("design", json.dumps(row_design(res, i)))
    if reason is not None:
        trial.set_user_attr("fail_reason", reason)
        st.tell(trial, state=TrialState.FAIL, skip_if_finished=True)
    else:
        st.tell(trial, [float(v) for v in res["values"][i]], skip_if_finished=True)


def _dead_here(worker: str | None) -> bool:
    if worker is None:
        return True
    host, _, pid = worker.rpartition(":")
    if host != socket.gethostname():
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return True
    except (PermissionError, ValueError):
        return False
    return False


#: A RUNNING trial without a worker mark older than this is taken as interrupted (s).
#: A live worker marks its trials milliseconds after asking; a mark can only be
#: missing when a worker was killed in between.
UNMARKED_STALE_S = 10.0


def _is_stale(t: optuna.trial.FrozenTrial) -> bool:
    worker = t.user_attrs.get("worker")
    if worker is not None:
        return _dead_here(worker)
    start = t.datetime_start
    if start is None:
        return False

    return (_dt.datetime.now() - start).total_seconds() > UNMARKED_STALE_S


def _stale_running(st: optuna.Study, budget: int) -> list[optuna.trial.FrozenTrial]:
    return [
        t
        for t in st.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
        if t.number < budget and _is_stale(t)
    ]


def _wait_for_unmarked(
    st: optuna.Study, budget: int, progress: Callable[[str], None] | None
) -> None:
    while True:
        young = [
            t
            for t in st.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
            if t.number < budget and "worker" not in t.user_attrs and not _is_stale(t)
        ]
        if not young:
            return
        if progress:
            progress(f"waiting for {len(young)} unmarked running trial(s) to turn stale")
        time.sleep(0.5)


def _reopened(st: optuna.Study, frozen: optuna.trial.FrozenTrial) -> optuna.Trial:
    """A live handle on a stored RUNNING trial (one a killed worker left), so it can be
    finished with the same number and parameters and the budget stays exact.

    Optuna has no public accessor for a stored trial's id; ``FrozenTrial._trial_id``
    is the one private attribute this package reads, and only here. The kill-and-resume
    tests (tests/test_tune.py, tests/test_explore.py) exercise it on every Optuna the
    suite runs with."""
    return optuna.Trial(st, frozen._trial_id)


def run_structures(
    problem: Problem,
    structures: list[Structure],
    studies: list[optuna.Study],
    *,
    trials: int,
    batch: int,
    progress: Callable[[str], None] | None = None,
) -> None:
    """Fill every structure's study up to ``trials`` finished trials numbered below
    the budget. Resumes: stale RUNNING trials of dead local workers are re-evaluated."""
    cnames = constraint_names(problem.limits)
    for si, (s, st) in enumerate(zip(structures, studies, strict=True)):
        dists = _distributions(s, problem)
        # an unmarked RUNNING trial (a worker killed between ask and mark) is not known
        # to be dead until it is UNMARKED_STALE_S old: wait for that rather than skip
        # it, so a quick rerun still fills the whole budget
        _wait_for_unmarked(st, trials, progress)
        # finish trials a killed worker left RUNNING (same parameters, same number)
        stale = _stale_running(st, trials)
        for dead in [
            t for t in stale if set(t.params) != set(dists)
        ]:  # killed before sampling finished
            tr0 = _reopened(st, dead)
            tr0.set_user_attr("fail_reason", "interrupted before its parameters were sampled")
            st.tell(tr0, state=TrialState.FAIL, skip_if_finished=True)
        stale = [t for t in stale if set(t.params) == set(dists)]
        for k in range(0, len(stale), batch):
            chunk = stale[k : k + batch]
            tr = [_reopened(st, t) for t in chunk]
            for t in tr:
                t.set_user_attr("worker", _WORKER)
            _evaluate_and_tell(problem, s, st, tr, [t.params for t in chunk], cnames)
        while True:
            all_t = st.get_trials(deepcopy=False)
            taken = sum(1 for t in all_t if t.number < trials)
            missing = trials - taken
            if progress:
                done = sum(1 for t in all_t if t.number < trials and t.state.is_finished())
                progress(f"structure {si + 1}/{len(structures)} {s.label}: {done}/{trials} trials")
            if missing <= 0:
                break
            asked = []
            for _ in range(min(batch, missing)):
                t = st.ask(dists)
                t.set_user_attr("worker", _WORKER)
                asked.append(t)
            surplus = [t for t in asked if t.number >= trials]  # another worker got there first
            for t in surplus:
                t.set_user_attr("fail_reason", "surplus: budget already reached by another worker")
                st.tell(t, state=TrialState.FAIL)
            asked = [t for t in asked if t.number < trials]
            if asked:
                _evaluate_and_tell(problem, s, st, asked, [t.params for t in asked], cnames)
    # other workers may still be finishing trials of the budget: wait for them so every
    # worker ranks the same stored trials (stale trials of dead local workers excepted)
    for st in studies:
        deadline = time.monotonic() + WAIT_FOR_OTHERS_S
        while time.monotonic() < deadline:
            running = [
                t
                for t in st.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
                if t.number < trials and not _is_stale(t)
            ]
            if not running:
                break
            time.sleep(0.05)


def _evaluate_and_tell(
    problem: Problem,
    s: Structure,
    st: optuna.Study,
    tr: list[optuna.Trial],
    params: list[dict[str, float]],
    cnames: list[str],
) -> None:
    names = list(s.params)
    arr = {k: np.array([p[k] for p in params], float) for k in names}
    if problem.searched_wc:
        wc = np.array([p["wc_rad_s"] for p in params], float)
    else:
        wc = np.full(len(params), float(problem.wc_rad_s))  # type: ignore[arg-type]
    pm = np.array([p["pm_deg"] for p in params], float) if problem.searched_pm else None
    try:
        res = evaluate_batch(problem, s, arr, wc, pm)
    except Exception as exc:
        for t in tr:
            t.set_user_attr("fail_reason", f"evaluation failed: {type(exc).__name__}: {exc}")
            st.tell(t, state=TrialState.FAIL, skip_if_finished=True)
        return
    for i, t in enumerate(tr):
        _tell(st, t, res, i, cnames)


def load_records(studies: list[optuna.Study], trials: int) -> list[TrialRecord]:
    """The finished trials numbered below the budget, in (structure, number) order."""
    out: list[TrialRecord] = []
    for si, st in enumerate(studies):
        for t in sorted(st.get_trials(deepcopy=False), key=lambda t: t.number):
            if t.number >= trials or not t.state.is_finished():
                continue
            raw = t.user_attrs.get("design")
            rec = (
                json.loads(raw)
                if raw
                else {"gain": None, "zeros": [], "poles": [], "metrics": {}, "reason": None}
            )
            cons = {k: float(v) for k, v in (t.constraints or {}).items()}
            feasible = t.state == TrialState.COMPLETE and rec["gain"] is not None and _all_le0(t)
            out.append(
                TrialRecord(
                    structure=si,
                    number=t.number,
                    state=t.state.name,
                    feasible=feasible,
                    gain=rec["gain"],
                    zeros=tuple(root_from_json(r) for r in rec["zeros"]),
                    poles=tuple(root_from_json(r) for r in rec["poles"]),
                    metrics=rec["metrics"],
                    constraints=cons,
                    reason=t.user_attrs.get("fail_reason") or rec.get("reason"),
                    params={k: float(v) for k, v in t.params.items()},
                )
            )
    return out


def _all_le0(t: optuna.trial.FrozenTrial) -> bool:
    return all(float(v) <= 0.0 for v in (t.constraints or {}).values())


@contextmanager
def quiet_optuna() -> Iterator[None]:
    """Optuna's INFO lines (one per study created) silenced for the duration, and the
    caller's verbosity restored after: an import of this module changes nothing."""
    before = optuna.logging.get_verbosity()
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    try:
        yield
    finally:
        optuna.logging.set_verbosity(before)
