"""``rotinfer survey`` end to end with the real pipeline on simulated stars.

The stars are simulated one-sector light curves at 30-min cadence (rotinfer.simulate),
plus one corrupt file; the configuration gives the sampler a tiny budget so each star
takes seconds (the results are not converged and are not checked as science here:
the pipeline's own tests do that). What is checked is the survey: every star in the
catalogue once, the corrupt one recorded as failed, values taken from each star's
``summary.json``, derived physics for the star with stellar parameters, and the same
catalogue from the local pool and from Dask, with 1 and with 2 workers.
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table
from survey_checks import assert_no_leftovers, assert_tables_equal, comparable, snapshot

from rotinfer.cli import main
from rotinfer.io import write_light_curve
from rotinfer.simulate import ObservingPattern, draw_population, simulate_star, star_seed

# The smallest budget that runs cleanly: with max_steps < 200 (check_every 100) some seeds
# end in "All-NaN slice" inside the sampler's convergence check (reported, not worked around).
TINY = """
[prepare]
max_points = 300
min_period = 1.0
max_period = 12.0
[periodogram]
max_candidates = 1
candidates_per_method = 1
[sampler]
n_walkers = 16
n_ensembles = 2
check_every = 100
max_steps = 200
warmup_steps = 50
max_sampled_modes = 1
starts_per_period = 1
"""

SECTOR_30MIN = ObservingPattern.space(1, 27.4, 30.0, orbit_days=13.7, orbit_gap_days=1.0)


def _simulate(folder: Path, n: int, seed: int = 5) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for i, (params, _, name) in enumerate(draw_population(None, n, seed=seed,
                                                          population="easy")):
        star = simulate_star(params, SECTOR_30MIN, seed=star_seed(seed, i), name=name)
        path = folder / f"{name}.csv"
        write_light_curve(star.lc, path)
        paths.append(path)
    return paths


@pytest.fixture(scope="module")
def survey_inputs(tmp_path_factory):
    """A manifest of one simulated star with stellar parameters and one corrupt file."""
    root = tmp_path_factory.mktemp("survey_inputs")
    (good,) = _simulate(root / "lc", 1)
    (root / "lc" / "broken.csv").write_text("time,flux\n1.0,2.0\nnot a row\n")
    manifest = root / "stars.csv"
    manifest.write_text(
        "identifier,files,radius,radius_err,bv,bv_err\n"
        f"Kestrel A,lc/{good.name},0.9,0.05,0.65,0.02\n"
        "Kestrel broken,lc/broken.csv,,,,\n"
    )
    config = root / "tiny.toml"
    config.write_text(TINY)
    return manifest, config


def _cli(*args) -> int:
    return main(["-q", "survey", *map(str, args)])


def test_cli_survey_local_and_dask_give_the_same_catalogue(survey_inputs, tmp_path):
    manifest, config = survey_inputs
    local, dask = tmp_path / "local", tmp_path / "dask"
    assert _cli(manifest, "--out", local, "--config", config, "--workers", "2",
                "--seed", "3") == 0
    assert _cli(manifest, "--out", dask, "--config", config, "--dask-local", "2",
                "--seed", "3") == 0
    a, b = comparable(local / "catalog.ecsv"), comparable(dask / "catalog.ecsv")
    assert_tables_equal(a, b)

    rows = {r["identifier"]: r for r in a}
    assert sorted(rows) == ["Kestrel A", "Kestrel broken"]
    broken = rows["Kestrel broken"]
    assert broken["status"] == "failed" and broken["failure"] == "error"
    assert broken["error"].startswith("InputError") and "broken.csv" in broken["error"]
    star = rows["Kestrel A"]
    assert star["status"] == "ok"
    summary = json.loads((local / star["folder"] / "summary.json").read_text())
    assert summary["identifier"] == "Kestrel A" and summary["seed"] == star["seed"]
    assert star["period"] == summary["period"]["median"]
    assert [star["period_lo95"], star["period_hi95"]] == summary["period"]["interval_95"]
    assert star["amplitude"] == summary["amplitude_ppt"]["median"]
    assert star["coherence_time"] == summary["coherence_time_days"]["median"]
    assert star["converged"] == summary["converged"]
    assert star["period_ls"] == summary["baselines"]["lomb_scargle"]["period"]
    # Derived physics from the manifest's radius and colour (rotinfer.derived).
    eq = summary["derived"]["quantities"]["equatorial_velocity"]
    assert star["derived_equatorial_velocity"] == eq["median"]
    assert a["derived_equatorial_velocity"].unit == "km / s"
    assert a.meta["config_hash"] == json.loads((local / "survey.json").read_text())[
        "config_hash"]
    for out in (local, dask):
        assert_no_leftovers(out)
        assert (out / "stars" / "vetting.html").is_file()

    # A rerun finds everything finished and touches no star folder.
    before = snapshot(local / "stars")
    assert _cli(manifest, "--out", local, "--config", config, "--workers", "2",
                "--seed", "3") == 0
    assert snapshot(local / "stars") == before


def test_cli_reports_bad_usage_in_one_line(survey_inputs, tmp_path, capsys):
    manifest, config = survey_inputs
    code = main(["survey", str(manifest), "--out", str(tmp_path / "o"), "--workers", "2",
                 "--dask-local", "2"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "--workers sizes the local pool" in err
    code = main(["survey", str(tmp_path / "nothing-here"), "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert code == 2 and "nothing-here: no such file or folder" in err


@pytest.mark.slow
def test_one_and_two_workers_give_the_same_catalogue(tmp_path):
    _simulate(tmp_path / "lc", 3)
    config = tmp_path / "tiny.toml"
    config.write_text(TINY)
    pattern = str(tmp_path / "lc" / "*.csv")
    for n in ("1", "2"):
        assert _cli(pattern, "--out", tmp_path / n, "--config", config, "--workers", n) == 0
    assert_tables_equal(comparable(tmp_path / "1" / "catalog.ecsv"),
                        comparable(tmp_path / "2" / "catalog.ecsv"))
    table = Table.read(tmp_path / "1" / "catalog.ecsv", format="ascii.ecsv")
    assert len(table) == 3 and set(table["status"]) == {"ok"}
    assert np.all(np.isfinite(table["period"]))


@pytest.mark.slow
def test_ctrl_c_on_the_command_and_rerun_with_the_real_pipeline(tmp_path):
    _simulate(tmp_path / "lc", 4)
    config = tmp_path / "tiny.toml"
    config.write_text(TINY)
    out = tmp_path / "out"
    args = [sys.executable, "-m", "rotinfer", "-q", "survey", str(tmp_path / "lc" / "*.csv"),
            "--out", str(out), "--config", str(config), "--workers", "1"]
    proc = subprocess.Popen(args, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 300
        while time.monotonic() < deadline and proc.poll() is None and not any(
            (p / "done.json").is_file() for p in (out / "stars").glob("*")
        ):
            time.sleep(0.1)
        assert proc.poll() is None, "the survey ended before it could be interrupted"
        proc.send_signal(signal.SIGINT)
        _, stderr = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, stderr
    assert_no_leftovers(out, kept_chains_allowed=True)  # the stopped star's chains
    done = sorted(Table.read(out / "catalog.ecsv", format="ascii.ecsv")["identifier"])
    assert 1 <= len(done) < 4
    before = snapshot(out / "stars")
    assert _cli(tmp_path / "lc", "--out", out, "--config", config, "--workers", "2") == 0
    after = snapshot(out / "stars")
    assert {k: after[k] for k in before} == before
    table = Table.read(out / "catalog.ecsv", format="ascii.ecsv")
    assert len(table) == 4 and len(set(table["identifier"])) == 4
    assert_no_leftovers(out)


def _one_star_surveyed_with_200_steps(tmp_path):
    """(out, the star's folder, a configuration with a 300-step cap) after one survey."""
    _simulate(tmp_path / "lc", 1)
    short = tmp_path / "short.toml"
    short.write_text(TINY)
    longer = tmp_path / "longer.toml"
    longer.write_text(TINY.replace("max_steps = 200", "max_steps = 300"))
    out = tmp_path / "out"
    assert _cli(tmp_path / "lc", "--out", out, "--config", short, "--workers", "1") == 0
    (folder,) = [p for p in (out / "stars").iterdir() if p.is_dir() and p.name[0] != "."]
    return out, folder, longer


def test_a_star_recomputed_with_a_higher_cap_continues_its_chains(tmp_path):
    # Raising [sampler] max_steps after a star did not converge changes the work hash,
    # so the survey computes the star again; it starts from the earlier folder's
    # chains.h5, which the checkpoint continues (same fit) instead of sampling the
    # first steps again. A mark written into the earlier file survives only if the file
    # is appended to, not replaced; the continued chains begin with the earlier ones.
    import h5py

    out, folder, longer = _one_star_surveyed_with_200_steps(tmp_path)
    with h5py.File(folder / "chains.h5", "a") as f:
        f.attrs["earlier_run"] = "yes"
        first = f["mode0/ensemble0/chain"][...]
    assert first.shape[0] == 200
    assert _cli(tmp_path / "lc", "--out", out, "--config", longer, "--workers", "1") == 0
    with h5py.File(folder / "chains.h5", "r") as f:
        assert f.attrs.get("earlier_run") == "yes"
        chain = f["mode0/ensemble0/chain"][...]
    assert chain.shape[0] == 300 and np.array_equal(chain[:200], first)
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["diagnostics"]["modes"][0]["n_steps"] == 300
    assert_no_leftovers(out)
    # A changed seed is another fit: its chains are sampled afresh, not continued.
    assert _cli(tmp_path / "lc", "--out", out, "--config", longer, "--workers", "1",
                "--seed", "9") == 0
    with h5py.File(folder / "chains.h5", "r") as f:
        assert "earlier_run" not in f.attrs


def test_chains_of_a_star_stopped_mid_fit_are_continued_by_the_next_run(tmp_path):
    # A run stopped mid-star (Ctrl-C, SIGTERM at a cluster's wall-time limit, a killed
    # worker) leaves the star's temporary folder with its chains so far. The next run
    # keeps those chains before clearing the folder and the star continues from them;
    # once the star is committed nothing hidden is left. Chains older than a successful
    # result of the star are stale and are dropped instead.
    import os

    import h5py

    out, folder, longer = _one_star_surveyed_with_200_steps(tmp_path)
    # As if a later run (longer cap) had been stopped mid-fit: its temporary folder holds
    # the chains, marked so that their use can be seen.
    left = out / "stars" / f".tmp.deadbeef0000.{folder.name}.1234abcd"
    left.mkdir()
    with h5py.File(folder / "chains.h5", "r") as f:
        first = f["mode0/ensemble0/chain"][...]
    (left / "chains.h5").write_bytes((folder / "chains.h5").read_bytes())
    with h5py.File(left / "chains.h5", "a") as f:
        f.attrs["stopped_run"] = "yes"
    later = (folder / "done.json").stat().st_mtime_ns + 10**9
    os.utime(left / "chains.h5", ns=(later, later))
    assert _cli(tmp_path / "lc", "--out", out, "--config", longer, "--workers", "1") == 0
    with h5py.File(folder / "chains.h5", "r") as f:
        assert f.attrs.get("stopped_run") == "yes"
        chain = f["mode0/ensemble0/chain"][...]
    assert chain.shape[0] == 300 and np.array_equal(chain[:200], first)
    assert_no_leftovers(out)

    # Stale: chains written before the star's successful result are not kept.
    left.mkdir()
    (left / "chains.h5").write_bytes((folder / "chains.h5").read_bytes())
    earlier = (folder / "done.json").stat().st_mtime_ns - 10**9
    os.utime(left / "chains.h5", ns=(earlier, earlier))
    assert _cli(tmp_path / "lc", "--out", out, "--config", longer, "--workers", "1") == 0
    assert_no_leftovers(out)
