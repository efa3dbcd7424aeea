"""The survey engine on the local pool: resume, failures recorded, containment, options.

The per-star analysis here is one of the small real functions in ``survey_seams.py``
(test seams for fault handling, not fakes of the science); everything around it —
``process_star``, the atomic store, the local pool, the driver — is the real code.
Worker deaths and time limits are in ``test_survey_faults.py``, Dask in
``test_survey_dask.py``, the real pipeline end to end in ``test_survey_pipeline.py``.
"""

from __future__ import annotations

import json
import os
import time
from pathlib import Path

import numpy as np
import pytest
import survey_seams as seams
from astropy.table import Table
from survey_checks import NAMES, assert_no_leftovers, calls, snapshot

from rotinfer.errors import ConfigError, InputError
from rotinfer.survey import SurveyStore, run_survey, star_seed
from rotinfer.survey.executors import THREAD_VARIABLES, available_executors


@pytest.fixture
def lcs(tmp_path) -> Path:
    seams.write_light_curves(tmp_path / "lc", NAMES)
    return tmp_path / "lc"


def test_catalogue_has_one_row_per_star_with_units_and_provenance(lcs, tmp_path):
    result = run_survey([lcs], out=tmp_path / "o", config={"a": 1}, seed=11, workers=2,
                        progress=False, analyse=seams.summarise)
    assert result.complete and result.n_ok == len(NAMES) == result.n_computed
    t = Table.read(result.catalog, format="ascii.ecsv")
    assert list(t["identifier"]) == sorted(NAMES)
    assert list(t["seed"]) == [star_seed(11, n) for n in sorted(NAMES)]
    assert t.meta["master_seed"] == 11 and t.meta["n_ok"] == len(NAMES)
    assert t.meta["config_hash"] == result.config_hash and t.meta["rotinfer_version"]
    assert t["period"].unit == "d" and t["wall_time"].unit == "s"
    # One thread cannot use more CPU time than wall time (rounded to 1 ms).
    assert np.all((t["cpu_time"] >= 0) & (t["cpu_time"] <= t["wall_time"] + 1e-3))
    assert "68% credible interval" in t["period_lo68"].description
    # Values come from each star's summary.json.
    for row in t:
        summary = json.loads((tmp_path / "o" / row["folder"] / "summary.json").read_text())
        assert row["period"] == summary["period"]["median"]
        assert row["period_hi95"] == summary["period"]["interval_95"][1]
        assert row["amplitude"] == summary["amplitude_ppt"]["median"]
    # ppt has no astropy unit name: written as the scaled dimensionless unit 0.001.
    assert t["amplitude"].unit.to("") == 1e-3
    # The survey's vetting page (rotinfer.report) links every analysed star.
    page = (tmp_path / "o" / "stars" / "vetting.html").read_text()
    assert all(f"{n}/index.html" in page for n in NAMES)
    csv = Table.read(tmp_path / "o" / "catalog.csv", format="ascii.csv")
    assert list(csv["identifier"]) == list(t["identifier"])
    np.testing.assert_allclose(csv["period"], t["period"], rtol=1e-15)
    assert_no_leftovers(tmp_path / "o")


def test_corrupt_input_is_recorded_and_the_survey_goes_on(lcs, tmp_path):
    (lcs / "gamma.csv").write_text("time,flux\n1.0,not-a-number\n")
    log = tmp_path / "calls.log"
    cfg = {"log": str(log)}
    out = tmp_path / "o"
    result = run_survey([lcs], out=out, config=cfg, workers=2, progress=False,
                        analyse=seams.summarise)
    assert result.complete and result.n_ok == len(NAMES) - 1 and result.n_failed == 1
    table = Table.read(result.catalog, format="ascii.ecsv")
    row = table[list(table["identifier"]).index("gamma")]
    assert row["status"] == "failed" and row["failure"] == "error"
    assert row["error"].startswith("ValueError") and np.ma.is_masked(row["period"])
    assert "Traceback" in (out / "stars" / "gamma" / "error.txt").read_text()
    assert sorted(os.listdir(out / "stars" / "gamma")) == ["done.json", "error.txt"]
    # A deterministic failure with unchanged inputs is not retried on resume ...
    before = len(calls(log))
    run_survey([lcs], out=out, config=cfg, workers=2, progress=False, analyse=seams.summarise)
    assert len(calls(log)) == before
    # ... but a repaired input is.
    seams.write_light_curves(tmp_path / "fixed", ["gamma"])
    (lcs / "gamma.csv").write_bytes((tmp_path / "fixed" / "gamma.csv").read_bytes())
    again = run_survey([lcs], out=out, config=cfg, workers=2, progress=False,
                       analyse=seams.summarise)
    assert calls(log)[before:] == ["gamma"] and again.n_ok == len(NAMES)


def test_missing_file_in_a_manifest_fails_only_that_star(lcs, tmp_path):
    manifest = tmp_path / "m.csv"
    manifest.write_text("identifier,files\nA,lc/alpha.csv\nB,lc/nowhere.csv\n")
    result = run_survey([manifest], out=tmp_path / "o", config={}, workers=1,
                        progress=False, analyse=seams.summarise)
    by_id = {r.identifier: r for r in result.records}
    assert by_id["A"].status == "ok"
    assert by_id["B"].failure == "error" and "nowhere.csv: no such file" in by_id["B"].error


@pytest.mark.skipif(not Path("/proc/self/environ").exists(), reason="needs Linux /proc")
def test_local_workers_start_with_one_blas_thread(lcs, tmp_path):
    before = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    result = run_survey([lcs], out=tmp_path / "o", config={}, workers=2, progress=False,
                        analyse=seams.report_environment)
    assert {k: os.environ.get(k) for k in THREAD_VARIABLES} == before  # restored here
    for rec in result.records:
        # /proc/<pid>/environ is the environment the process was started with, before
        # it imported numpy (common practice: Linux proc(5)).
        initial = json.loads((tmp_path / "o" / "stars" / rec.name / "environ.json").read_text())
        assert {k: initial.get(k) for k in THREAD_VARIABLES} == dict.fromkeys(
            THREAD_VARIABLES, "1"
        )


def test_resume_skips_finished_stars_and_force_recomputes(lcs, tmp_path):
    log = tmp_path / "calls.log"
    cfg = {"log": str(log)}
    out = tmp_path / "o"
    first = run_survey([lcs], out=out, config=cfg, workers=2, progress=False,
                       analyse=seams.summarise)
    snap = snapshot(out / "stars")
    catalogue = (out / "catalog.ecsv").read_text().split("\n")
    second = run_survey([lcs], out=out, config=cfg, workers=2, progress=False,
                        analyse=seams.summarise)
    assert second.n_reused == len(NAMES) and second.n_computed == 0
    assert snapshot(out / "stars") == snap  # not rewritten: same inodes, times, bytes
    assert len(calls(log)) == len(NAMES)
    # Same rows (only the creation time in the header differs).
    new_catalogue = (out / "catalog.ecsv").read_text().split("\n")
    # (Both runs may fall in the same second, so the creation lines may also be equal.)
    assert [a for a, b in zip(catalogue, new_catalogue, strict=True)
            if a != b and "created_utc" not in a] == []
    assert len(catalogue) == len(new_catalogue)
    forced = run_survey([lcs], out=out, config=cfg, workers=2, progress=False, force=True,
                        analyse=seams.summarise)
    assert forced.n_computed == len(NAMES) and len(calls(log)) == 2 * len(NAMES)
    new = snapshot(out / "stars")
    assert all(new[k][0] != snap[k][0] for k in snap)  # fresh files, renamed into place
    # Same seed and inputs: the recomputed results are identical.
    assert {k: v[2] for k, v in new.items() if k.endswith("summary.json")} == {
        k: v[2] for k, v in snap.items() if k.endswith("summary.json")
    }
    assert [r.seed for r in forced.records] == [r.seed for r in first.records]
    assert_no_leftovers(out)


def test_a_changed_input_seed_or_config_recomputes_what_it_affects(lcs, tmp_path):
    log = tmp_path / "calls.log"
    out = tmp_path / "o"
    opts = dict(out=out, config={"log": str(log)}, seed=1, workers=1, progress=False,
                analyse=seams.summarise)
    run_survey([lcs], **opts)
    n = len(NAMES)

    def rerun(**changes):
        start = len(calls(log))
        result = run_survey([lcs], **{**opts, **changes})
        assert result.complete and len({r.identifier for r in result.records}) == n
        return sorted(calls(log)[start:]), result

    time.sleep(0.01)
    (lcs / "beta.csv").write_text((lcs / "beta.csv").read_text() + "27.5,1.0\n")
    redone, result = rerun()
    assert redone == ["beta"] and result.n_reused == n - 1
    redone, _ = rerun(seed=2)
    assert redone == sorted(NAMES)
    redone, _ = rerun(seed=2, config={"log": str(log), "extra": 2})
    assert redone == sorted(NAMES)
    # The catalogue lists each star once, for the latest configuration only.
    table = Table.read(out / "catalog.ecsv", format="ascii.ecsv")
    assert sorted(table["identifier"]) == sorted(NAMES)


def test_path_escape_identifiers_in_a_manifest_are_contained(lcs, tmp_path):
    work = tmp_path / "work"
    work.mkdir()
    idents = ["../../escaped", "/abs/olute", "..", ".", "a/../../b", "..\\..\\win",
              "~root", "-rf", ".hidden", "x\x00y", "TIC 1", "TIC/1", "tic_1"]
    rows = ["identifier,files"] + [
        f'"{i}",{lcs / NAMES[k % len(NAMES)]}.csv' for k, i in enumerate(idents)
    ]
    manifest = tmp_path / "m.csv"
    manifest.write_text("\n".join(rows) + "\n")
    before = set(tmp_path.parent.rglob("*"))
    out = work / "out"
    result = run_survey([manifest], out=out, config={}, workers=2, progress=False,
                        analyse=seams.summarise)
    created = set(tmp_path.parent.rglob("*")) - before
    assert created and all(p == out or out in p.parents for p in created)
    assert not Path("/abs/olute").exists()
    assert sorted(r.identifier for r in result.records) == sorted(idents)
    names = [r.name for r in result.records]
    assert len(set(names)) == len(idents)
    stars = (out / "stars").resolve()
    assert all((out / "stars" / n).resolve().parent == stars for n in names)
    table = Table.read(result.catalog, format="ascii.ecsv")
    assert sorted(table["identifier"]) == sorted(idents)


def test_leftover_temporary_folders_are_removed_on_start(lcs, tmp_path):
    out = tmp_path / "o"
    stale = [out / "stars" / ".tmp.deadbeef0000.alpha.1234abcd",
             out / "stars" / ".old.deadbeef0000.beta.1234abcd"]
    for p in stale:
        p.mkdir(parents=True)
        (p / "summary.json").write_text("{half")
    result = run_survey([lcs], out=out, config={}, workers=1, progress=False,
                        analyse=seams.summarise)
    assert result.complete and not any(p.exists() for p in stale)
    assert_no_leftovers(out)


def test_a_second_survey_on_the_same_folder_is_refused(lcs, tmp_path):
    store = SurveyStore(tmp_path / "o")
    with store.lock(), pytest.raises(InputError, match="another survey is writing"):
        run_survey([lcs], out=tmp_path / "o", config={}, workers=1, progress=False,
                   analyse=seams.summarise)


@pytest.mark.parametrize(
    ("opts", "message"),
    [
        (dict(executor="sparkle"), "'sparkle' is not a known executor; choose one of auto, "
                                   "local, dask"),
        (dict(scheduler="tcp://127.0.0.1:1", dask_local=2), "cannot be combined"),
        (dict(workers=2, dask_local=2), "--workers sizes the local pool"),
        (dict(executor="dask"), "needs --scheduler ADDRESS or --dask-local N"),
        (dict(executor="local", dask_local=2), "need the dask executor"),
        (dict(seed=-3), "--seed must be a non-negative integer"),
        (dict(timeout=0), "--timeout-per-star must be a positive number"),
        (dict(workers=0), "--workers must be a positive integer"),
    ],
)
def test_bad_options_are_config_errors(lcs, tmp_path, opts, message):
    with pytest.raises(ConfigError, match=message):
        run_survey([lcs], out=tmp_path / "o", config={}, progress=False,
                   analyse=seams.summarise, **opts)


def test_available_executors_lists_local_and_dask():
    assert available_executors() == ("local", "dask")  # distributed is in the test env
