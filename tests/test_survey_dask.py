"""Dask: the same catalogue as the local pool, worker deaths, time limits, thread pinning.

Clusters run on the loopback interface (127.0.0.1) only, without a dashboard. The
per-star analysis is a small real function from ``survey_seams.py`` (a test seam, not
a fake of the science); the real pipeline runs in ``test_survey_pipeline.py``.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from pathlib import Path

import pytest
import survey_seams as seams
from survey_checks import NAMES, assert_no_leftovers, assert_tables_equal, comparable

from rotinfer.survey import run_survey
from rotinfer.survey.executors import THREAD_VARIABLES

# In the test extra; CI must never skip these (pattern: optional skips that CI makes strict).
if os.environ.get("CI") == "true":
    import distributed
else:
    distributed = pytest.importorskip("distributed")


@pytest.fixture
def lcs(tmp_path) -> Path:
    seams.write_light_curves(tmp_path / "lc", NAMES)
    return tmp_path / "lc"


@pytest.fixture(scope="module")
def cluster():
    """Two one-thread worker processes; the scheduler's HTTP server on a free loopback port."""
    c = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
        dashboard_address=None, scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
    )
    yield c
    c.close()


def test_local_pool_sizes_and_dask_give_the_same_catalogue(lcs, tmp_path, cluster):
    runs = {"one": dict(workers=1), "two": dict(workers=2),
            "dask": dict(scheduler=cluster.scheduler_address)}
    tables = {}
    for key, opts in runs.items():
        result = run_survey([lcs], out=tmp_path / key, config={}, seed=11, progress=False,
                            analyse=seams.summarise, **opts)
        assert result.complete and result.n_ok == len(NAMES) == result.n_computed
        tables[key] = comparable(result.catalog)
        assert_no_leftovers(tmp_path / key)
    assert_tables_equal(tables["one"], tables["two"])
    assert_tables_equal(tables["one"], tables["dask"])


def test_worker_killed_on_dask_is_rescheduled(lcs, tmp_path, cluster):
    pidfile = tmp_path / "victim.pid"

    def killer():
        deadline = time.monotonic() + 60
        while not pidfile.exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        if pidfile.exists():
            os.kill(int(pidfile.read_text()), signal.SIGKILL)  # a Dask worker process

    thread = threading.Thread(target=killer, daemon=True)
    thread.start()
    result = run_survey([lcs], out=tmp_path / "o", progress=False,
                        config={"victim": "delta", "pidfile": str(pidfile)},
                        scheduler=cluster.scheduler_address, analyse=seams.wait_to_be_killed)
    thread.join(5)
    assert pidfile.exists()
    assert result.complete and result.n_ok == len(NAMES)
    delta = next(r for r in result.records if r.identifier == "delta")
    assert delta.pid != int(pidfile.read_text())
    assert_no_leftovers(tmp_path / "o")


def test_time_limit_in_a_dask_worker_thread(lcs, tmp_path, cluster):
    result = run_survey([lcs], out=tmp_path / "o", config={"victim": "alpha"}, timeout=1.0,
                        scheduler=cluster.scheduler_address, progress=False,
                        analyse=seams.busy_past_limit)
    alpha = next(r for r in result.records if r.identifier == "alpha")
    assert alpha.failure == "timeout" and result.n_ok == len(NAMES) - 1


@pytest.mark.skipif(not Path("/proc/self/environ").exists(), reason="needs Linux /proc")
def test_dask_local_starts_workers_with_one_blas_thread(lcs, tmp_path):
    result = run_survey([lcs], out=tmp_path / "o", config={}, dask_local=2, progress=False,
                        analyse=seams.report_environment)
    assert result.complete and result.n_ok == len(NAMES)
    for rec in result.records:
        # The environment the worker process started with (common practice: proc(5)).
        initial = json.loads((tmp_path / "o" / "stars" / rec.name / "environ.json").read_text())
        assert {k: initial.get(k) for k in THREAD_VARIABLES} == dict.fromkeys(
            THREAD_VARIABLES, "1"
        )
