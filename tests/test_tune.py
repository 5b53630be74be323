"""Trial storage: SIGKILL mid-run then rerun gives exactly the budget, no trial lost
or repeated; stored trials are read back per structure."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import optuna
import pytest

from explorer.design.structures import candidate_structures
from explorer.model.study import load_study, parse_study
from explorer.search.tune import study_names

ROOT = Path(__file__).resolve().parents[1]
STUDY_TOML = (
    "[plant]\ngain = 0.1333\npoles = [-0.3333, -2.0, -4.0]\n[targets]\ncrossover = 0.8\n"
    "phase_margin = 55\nintegrators = 1\n[limits]\nsensitivity_peak = 1.6\n"
    "[search]\nmax_order = 2\n"
)


def _count(out: Path, study_file: Path, budget: int) -> list[dict[str, int]]:
    from optuna.storages.journal import JournalFileBackend, JournalStorage

    st = load_study(study_file)
    storage = JournalStorage(JournalFileBackend(str(out / "explore.journal")))
    rows = []
    for name in study_names(candidate_structures(st.plant, st.targets, st.search)):
        trials = optuna.load_study(study_name=name, storage=storage).get_trials(deepcopy=False)
        numbers = [t.number for t in trials if t.number < budget]
        rows.append(
            {
                "finished": sum(t.state.is_finished() for t in trials if t.number < budget),
                "unique": len(set(numbers)),
                "all": len(trials),
                "running": sum(t.state == optuna.trial.TrialState.RUNNING for t in trials),
            }
        )
    return rows


@pytest.mark.slow
def test_sigkill_then_resume_exact_budget(tmp_path: Path) -> None:
    study = tmp_path / "s.toml"
    study.write_text(STUDY_TOML)
    out = tmp_path / "o"
    budget = 150
    cmd = [
        sys.executable,
        "-m",
        "explorer",
        "explore",
        str(study),
        "--out",
        str(out),
        "--trials",
        str(budget),
        "--seed",
        "3",
        "--batch",
        "10",
    ]
    proc = subprocess.Popen(
        cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, start_new_session=True
    )
    # kill once trials are being written (the journal grows), before the run can finish
    journal = out / "explore.journal"
    t0 = time.monotonic()
    while time.monotonic() - t0 < 30:
        if journal.exists() and journal.stat().st_size > 200_000:
            break
        time.sleep(0.02)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    before = _count(out, study, budget)
    assert sum(r["finished"] for r in before) < budget * len(before), "run finished before the kill"
    r = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    after = _count(out, study, budget)
    for row in after:
        assert row == {"finished": budget, "unique": budget, "all": budget, "running": 0}


@pytest.mark.slow
def test_rerun_adds_only_missing_trials(tmp_path: Path) -> None:
    from explorer.search.exploration import explore

    study = parse_study(
        {
            "plant": {"gain": 2.0, "poles": [-1.0, -5.0]},
            "targets": {"crossover": 1.0, "phase_margin": 50, "integrators": 1},
            "search": {"max_order": 1},
        }
    )
    explore(study, tmp_path, trials=10, seed=1, batch=4, progress=False)
    explore(study, tmp_path, trials=25, seed=1, batch=4, progress=False)
    from optuna.storages.journal import JournalFileBackend, JournalStorage

    storage = JournalStorage(JournalFileBackend(str(tmp_path / "explore.journal")))
    for name in study_names(candidate_structures(study.plant, study.targets, study.search)):
        trials = optuna.load_study(study_name=name, storage=storage).trials
        assert sorted(t.number for t in trials) == list(range(25))
        assert all(t.state.is_finished() for t in trials)


@pytest.mark.slow
def test_two_workers_on_postgres(tmp_path: Path, postgres_url: str) -> None:
    """Two worker processes on one PostgreSQL exploration: every trial of the budget is
    recorded once, and both workers' rankings equal a single-worker ranking of the same
    stored trials (a third run that finds nothing missing)."""
    import json

    from explorer.search.exploration import make_problem
    from explorer.search.tune import create_studies, open_storage

    study_file = tmp_path / "s.toml"
    study_file.write_text(STUDY_TOML)
    st = load_study(study_file)
    structs = candidate_structures(st.plant, st.targets, st.search)
    budget = 64
    storage = open_storage(
        postgres_url, tmp_path
    )  # schema and studies created once, before workers
    create_studies(storage, structs, make_problem(st), 5, 8)
    cmd = [
        sys.executable,
        "-m",
        "explorer",
        "explore",
        str(study_file),
        "--trials",
        str(budget),
        "--seed",
        "5",
        "--batch",
        "8",
        "--storage",
        postgres_url,
        "--json",
        "--out",
    ]
    procs = [
        subprocess.Popen(
            [*cmd, str(tmp_path / f"w{i}")],
            cwd=ROOT,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for i in range(2)
    ]
    outs = [p.communicate(timeout=300) for p in procs]
    assert all(p.returncode == 0 for p in procs), [o[1][-500:] for o in outs]
    for name in study_names(structs):
        trials = optuna.load_study(study_name=name, storage=storage).get_trials(deepcopy=False)
        inside = [t for t in trials if t.number < budget]
        assert sorted(t.number for t in inside) == list(range(budget))
        assert all(t.state.is_finished() for t in inside)
        extra = [t for t in trials if t.number >= budget]  # asked in a race, never evaluated
        assert all(t.user_attrs.get("fail_reason", "").startswith("surplus") for t in extra)
    single = subprocess.run(
        [*cmd, str(tmp_path / "single")], cwd=ROOT, capture_output=True, text=True
    )
    assert single.returncode == 0, single.stderr[-500:]
    ref = [(d["name"], d["compensator"]) for d in json.loads(single.stdout)["designs"]]
    for out, _ in outs:
        assert [(d["name"], d["compensator"]) for d in json.loads(out)["designs"]] == ref


def test_progress_line_rewrites_on_a_terminal_and_logs_stage_ends_elsewhere() -> None:
    import io

    from explorer.cli.progress import ProgressLine

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    msgs = ["structure 1/2 PI: 0/8 trials", "structure 1/2 PI: 8/8 trials",
            "structure 2/2 I+lead: 4/8 trials", "structure 2/2 I+lead: 8/8 trials"]
    term, log = Terminal(), io.StringIO()
    for stream in (term, log):
        show = ProgressLine(stream)
        for m in msgs:
            show(m)
        show.close()
        show("refining structure 1/2 PI")
        show("refining structure 1/2 PI: 3/80 iterations")
        show.close()
    assert term.getvalue().count("\r") == 6 and term.getvalue().count("\n") == 2
    assert term.getvalue().endswith("\n")
    assert log.getvalue().splitlines() == [msgs[1], msgs[3], "refining structure 1/2 PI"]


def test_search_never_counts_a_hidden_unstable_mode_as_stable() -> None:
    """A plant zero at s = 0 with loop type 1 asks the compensator for two
    integrators, one of which cancels the zero (explorer.core.loop.hidden_unstable_mask):
    no trial of such a structure may be feasible, although the Nyquist count of
    L = C·P alone calls many of them stable (checked here on the same rows)."""
    import numpy as np

    from explorer.design.structures import balance, candidate_structures
    from explorer.frequency.metrics import frequency_metrics_batch
    from explorer.model.study import parse_study
    from explorer.search.exploration import make_problem
    from explorer.search.tune import evaluate_batch

    study = parse_study({"plant": {"gain": 1.0, "zeros": [0.0], "poles": [-1.0, -2.0]},
                         "targets": {"crossover": 1.0, "phase_margin": 45, "integrators": 1},
                         "search": {"max_order": 3}})
    problem = make_problem(study)
    rng = np.random.default_rng(5)
    nyquist_stable = 0
    for s in candidate_structures(study.plant, study.targets, study.search):
        assert s.integrators == 2
        params = {k: rng.uniform(lo, hi, 64) for k, (lo, hi) in s.params.items()}
        wc = np.full(64, 1.0)
        res = evaluate_batch(problem, s, params, wc, time_domain=False)
        assert not res["metrics"]["closed_loop_stable"].any() and not res["feasible"].any()
        b = balance(study.plant, s, params, wc, problem.pm_deg)
        ok = np.isfinite(b.gain)
        if ok.any():
            fm = frequency_metrics_batch(study.plant, b.gain[ok], b.zeros[ok], b.poles[ok])
            nyquist_stable += int(np.sum(fm["closed_loop_stable"]))
    assert nyquist_stable > 0  # the mask, not the Nyquist count, is what refuses them


def test_a_stale_journal_lock_is_cleared_at_start_and_a_fresh_one_kept(tmp_path) -> None:
    """A worker killed mid-append leaves Optuna's journal lock behind, and the next
    run would wait out Optuna's 30 s grace. The lock name is taken from a real lock of
    Optuna's file backend (so a change there fails here); an old lock is removed at
    start-up, a fresh one (a live writer) is not."""
    import os
    import time

    from optuna.storages.journal import JournalFileSymlinkLock

    from explorer.search.tune import JOURNAL_LOCK_SUFFIX, STALE_LOCK_S, clear_stale_journal_lock

    journal = tmp_path / "explore.journal"
    journal.write_text("")
    real = JournalFileSymlinkLock(str(journal))
    assert real.acquire()
    lock = tmp_path / ("explore.journal" + JOURNAL_LOCK_SUFFIX)
    assert os.path.lexists(lock)  # Optuna's lock is where we look for it
    # a live writer releases and retakes the lock within milliseconds: kept
    import threading

    stop = threading.Event()

    def live_writer() -> None:
        while not stop.is_set():
            time.sleep(0.02)
            real.release()
            assert real.acquire()

    t = threading.Thread(target=live_writer)
    t.start()
    try:
        assert not clear_stale_journal_lock(journal, held_s=1.0)
    finally:
        stop.set()
        t.join()
    assert os.path.lexists(lock)
    # the same fresh lock held all the while (its writer was killed): removed at once
    assert clear_stale_journal_lock(journal, held_s=0.3) and not os.path.lexists(lock)
    assert real.acquire()
    old = time.time() - 10 * STALE_LOCK_S
    os.utime(lock, (old, old), follow_symlinks=False)
    assert clear_stale_journal_lock(journal) and not os.path.lexists(lock)
    assert not clear_stale_journal_lock(journal)  # nothing left to clear
