"""Fault injection on the local pool: killed workers, poison stars, time limits.

The analysis functions are small real functions in ``survey_seams.py`` (test seams,
not fakes of the science): one waits to be killed by the test, one kills its own
worker every time, one loops or sleeps past the per-star limit. The survey machinery
around them is the real code.
"""

from __future__ import annotations

import os
import signal
import threading
import time
from pathlib import Path

import pytest
import survey_seams as seams
from survey_checks import NAMES, assert_no_leftovers, calls

from rotinfer.survey import SurveyStore, collect_tasks, run_survey


@pytest.fixture
def lcs(tmp_path) -> Path:
    seams.write_light_curves(tmp_path / "lc", NAMES)
    return tmp_path / "lc"


def _kill_when_ready(pidfile: Path, killed: list[int]) -> threading.Thread:
    def killer():
        deadline = time.monotonic() + 60
        while not pidfile.exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        if pidfile.exists():
            pid = int(pidfile.read_text())
            os.kill(pid, signal.SIGKILL)  # a worker process, child of this one
            killed.append(pid)

    thread = threading.Thread(target=killer, daemon=True)
    thread.start()
    return thread


def test_worker_killed_mid_run_is_retried_and_nothing_is_lost(lcs, tmp_path):
    pidfile = tmp_path / "victim.pid"
    log = tmp_path / "calls.log"
    killed: list[int] = []
    thread = _kill_when_ready(pidfile, killed)
    result = run_survey([lcs], out=tmp_path / "o", workers=2, progress=False,
                        config={"victim": "beta", "pidfile": str(pidfile), "log": str(log)},
                        analyse=seams.wait_to_be_killed)
    thread.join(5)
    assert killed, "the victim never started"
    assert result.complete and result.n_ok == len(NAMES)
    assert sorted(r.identifier for r in result.records) == sorted(NAMES)
    beta = next(r for r in result.records if r.identifier == "beta")
    assert beta.pid != killed[0]  # finished by a fresh worker
    assert_no_leftovers(tmp_path / "o")


def test_poison_star_fails_as_crashed_after_bounded_retries(lcs, tmp_path):
    log = tmp_path / "calls.log"
    result = run_survey([lcs], out=tmp_path / "o", workers=2, retries=0, progress=False,
                        config={"victim": "alpha", "log": str(log)},
                        analyse=seams.kill_always)
    assert result.complete and result.n_ok == len(NAMES) - 1
    alpha = next(r for r in result.records if r.identifier == "alpha")
    assert alpha.status == "failed" and alpha.failure == "crashed"
    assert "worker process died while running this star (1 time(s))" in alpha.error
    # Once in company (not blamed), then alone until it had killed retries + 1 workers.
    assert calls(log).count("alpha") == 1 + (0 + 1)
    # A crash depends on the run (memory, machine), so a rerun tries the star again.
    task = next(t for t in collect_tasks([lcs]) if t.identifier == "alpha")
    assert SurveyStore(tmp_path / "o").finished(task, alpha.work_hash) is None
    assert_no_leftovers(tmp_path / "o")


def test_time_limit_in_a_local_worker(lcs, tmp_path):
    result = run_survey([lcs], out=tmp_path / "o", workers=2, timeout=1.0, progress=False,
                        config={"victim": "delta"}, analyse=seams.busy_past_limit)
    delta = next(r for r in result.records if r.identifier == "delta")
    assert delta.failure == "timeout" and "time limit of 1 s" in delta.error
    assert result.complete and result.n_ok == len(NAMES) - 1
    task = next(t for t in collect_tasks([lcs]) if t.identifier == "delta")
    store = SurveyStore(tmp_path / "o")
    assert store.finished(task, delta.work_hash) is None
    # Its chains so far are kept for the next attempt, which is made on resume (a
    # timeout depends on the run) and, once the star is committed, removes them.
    kept = store.salvaged_chains(task.name)
    assert kept.read_bytes() == b"chains so far"
    again = run_survey([lcs], out=tmp_path / "o", workers=2, progress=False,
                       config={"victim": "delta"}, analyse=seams.summarise)
    assert again.complete and again.n_ok == len(NAMES) and not kept.exists()
    assert_no_leftovers(tmp_path / "o")


def test_star_that_ignores_its_time_limit_is_ended(lcs, tmp_path):
    result = run_survey([lcs], out=tmp_path / "o", workers=2, timeout=0.5, progress=False,
                        config={"victim": "gamma"}, analyse=seams.ignore_time_limit)
    gamma = next(r for r in result.records if r.identifier == "gamma")
    assert gamma.failure == "timeout" and "its worker was ended" in gamma.error
    assert result.complete and result.n_ok == len(NAMES) - 1
    assert_no_leftovers(tmp_path / "o")
