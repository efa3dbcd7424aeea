"""Small, fast slices of the validation benchmarks (the full runs are in benchmarks/).

Each slice runs the benchmark script's own code on a few cases so that the scripts keep
working and their headline checks hold on a sample; thresholds and sources are named
beside each check.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


def _load(name: str):
    spec = importlib.util.spec_from_file_location(name, BENCH / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


TINY = """
[prepare]
min_period = 0.8
bin_fraction = 0.25
max_points = 400
[periodogram]
max_candidates = 2
[sampler]
n_walkers = 16
check_every = 100
max_steps = 100
warmup_steps = 50
max_sampled_modes = 1
starts_per_period = 1
importance_draws = 100
"""


def test_injection_recovery_slice(tmp_path):
    # One star of each class of configs/population.toml through the population benchmark
    # (simulate, survey, compare with the truth). Inject-and-recover: the easy star's
    # period must lie within 10 % of its true range (the criterion of Aigrain et al. 2015,
    # MNRAS 450, 3211, and of the benchmark), and the null star must not be called periodic.
    bench = _load("bench_population")
    cfg = tmp_path / "tiny.toml"
    cfg.write_text(TINY)
    out = tmp_path / "population.md"
    stars = tmp_path / "stars.ecsv"
    common = ["--per-class", "1", "--seed", "1", "--workers", "1", "--config", str(cfg),
              "--out", str(out), "--carry", str(stars), "--commit", "abc1234"]
    rc = bench.main([*common, "--work", str(tmp_path / "work")])
    assert rc == 0
    text = out.read_text()
    assert "stars finished: 4 of 4 simulated" in text
    assert "code commits abc1234" in text
    rows = {}  # the first table's row of each class (the harmonic-clause table follows)
    for line in text.splitlines():
        if line.startswith("| ") and not line.startswith("| class"):
            rows.setdefault(line.split("|")[1].strip(), line)
    assert set(rows) == {"easy", "moderate", "hard", "null"}
    assert "Harmonic warning, baseline clause" in text
    truth = bench._truth(tmp_path / "work")
    per_star = bench.join(truth, bench.Table.read(stars, format="ascii.ecsv"), keys="name")
    easy = per_star[per_star["category"] == "easy"][0]
    assert 0.9 * easy["period_min"] <= easy["period"] <= 1.1 * easy["period_max"], easy
    null = per_star[per_star["category"] == "null"][0]
    assert not null["detected"]
    assert (tmp_path / "population_completeness.png").stat().st_size > 0

    # The Monte Carlo precision benchmark recomputes each star's MCSE from its stored
    # chains: it must equal what the fit reported in summary.json (same draws, same rule).
    mcse = _load("bench_mcse")
    assert mcse.main(["--work", str(tmp_path / "work"), "--out", str(tmp_path / "m.md")]) == 0
    assert "| easy | 1 |" in (tmp_path / "m.md").read_text()
    for folder in (tmp_path / "work" / "survey" / "stars").glob("*-*"):
        r = mcse.star_mcse(folder)
        assert float(np.max(r["mcse"])) == pytest.approx(r["stored"], rel=1e-9)
    # Kept across work folders: a star measured in an earlier folder stays in the table.
    kept = tmp_path / "mcse_stars.ecsv"
    mcse.main(["--work", str(tmp_path / "work"), "--out", str(tmp_path / "m.md"),
               "--table", str(kept)])
    t = bench.Table.read(kept, format="ascii.ecsv")
    t["star"][0] = "09999-easy"  # as if from another session's folder
    t.write(kept, format="ascii.ecsv", overwrite=True)
    mcse.main(["--work", str(tmp_path / "work"), "--out", str(tmp_path / "m.md"),
               "--table", str(kept)])
    assert len(bench.Table.read(kept, format="ascii.ecsv")) == 5
    assert "| easy | 2 |" in (tmp_path / "m.md").read_text()

    # A later run (fresh work folder, same seed, size and configuration) carries the four
    # finished stars instead of fitting them again, and reports the same table.
    rc = bench.main([*common, "--work", str(tmp_path / "later"), "--commit", "def5678"])
    assert rc == 0
    assert not (tmp_path / "later" / "survey").exists()  # nothing left to fit
    later = out.read_text()
    assert "stars finished: 4 of 4 simulated" in later and "code commits abc1234" in later
    assert ([r for r in later.splitlines() if r.startswith("| easy")]
            == [r for r in text.splitlines() if r.startswith("| easy")])
    # ... but not into a run with another seed.
    assert bench.load_carried(stars, bench._run_key(2, 1, str(cfg))) is None
    # A table made when the night term was off, carried into a run where it is "auto":
    # it keeps the stars whose sampling is not nightly ("auto" fits them as "off" did) and
    # drops the nightly ones. Under the default preparation (TINY's 400-point bins leave
    # about one point per night, not nightly) those are the simulator's ground-based
    # stars (truth table's "pattern").
    import dataclasses

    from rotinfer.pipeline import load_run_config
    from rotinfer.simulate.output import read_truth_table

    nightly_cfg = tmp_path / "nightly.toml"
    nightly_cfg.write_text(TINY.replace("max_points = 400\n", ""))
    run_cfg = load_run_config(str(nightly_cfg))
    assert run_cfg.model.night_offsets == "auto"
    off = dataclasses.replace(run_cfg, model=dataclasses.replace(run_cfg.model,
                                                                 night_offsets="off"))
    key = bench._run_key(1, 1, str(nightly_cfg))
    assert (bench.options_hash(off) == bench.options_hash(run_cfg, not_nightly=True)
            != key["resolved_config"])
    old = bench.Table.read(stars, format="ascii.ecsv")
    old.meta.update(key)
    old.meta["resolved_config"] = bench.options_hash(off)
    old.write(tmp_path / "off_stars.ecsv", format="ascii.ecsv")
    kept = bench.load_carried(tmp_path / "off_stars.ecsv", key, config=str(nightly_cfg),
                              work=tmp_path / "work")
    ground = set()
    for cls in bench.CLASSES:
        t = read_truth_table(tmp_path / "work" / "lc" / cls / "truth.ecsv")
        ground |= {bench._identifier(n, cls)
                   for n, pattern in zip(t["name"], t["pattern"], strict=True)
                   if pattern == "ground"}
    assert "00001-hard" in ground
    assert set(kept["name"]) == set(old["name"]) - ground
    assert kept.meta["resolved_config"] == key["resolved_config"]
    assert bench.load_carried(tmp_path / "off_stars.ecsv", key) is None  # not without work

    # A refit of a population star with nothing changed (bench_refit.py, the workbench for
    # candidate defaults) is the population's fit, number for number: same light curve,
    # configuration and seed (the reproducibility the pipeline promises).
    refit = _load("bench_refit")
    again = refit.fit_stars(["00001-easy"], tmp_path / "work", cfg, {},
                            tmp_path / "refit_same_stars.ecsv", seed=1)
    assert float(again["period"][0]) == float(easy["period"])
    assert bool(again["detected"][0]) == bool(easy["detected"])
    # ... also when fitted in a worker process (--jobs).
    pooled = refit.fit_stars(["00001-easy"], tmp_path / "work", cfg, {},
                             tmp_path / "refit_pooled_stars.ecsv", seed=1, jobs=2)
    assert float(pooled["period"][0]) == float(easy["period"])
    # ... and when it continues the population's stored chains (--continue-from, for
    # extending chains that hit the cap): resumed, not refitted, and the same numbers.
    cont = refit.fit_stars(["00001-easy"], tmp_path / "work", cfg, {},
                           tmp_path / "refit_cont_stars.ecsv", seed=1,
                           continue_from=tmp_path / "work" / "survey" / "stars")
    assert bool(cont["continued"][0])
    assert float(cont["period"][0]) == float(easy["period"])


def test_committed_population_table_is_still_carried():
    # The population benchmark grows across sessions only while its stars' key matches:
    # a change of the code's options (a new option whose default changes nothing must be
    # left out of the hash) would silently restart it. A deliberate change of the fit
    # updates this test together with the table.
    bench = _load("bench_population")
    table = bench.Table.read(BENCH / "results" / "population_stars.ecsv", format="ascii.ecsv")
    key = bench._run_key(7, 50, str(BENCH / "population_bench.toml"))
    assert {k: table.meta.get(k) for k in key} == key


def test_population_summary_counts_exact_cases():
    # Exact cases of the recovery criteria (hand-checked).
    bench = _load("bench_population")
    lo, hi = np.array([10.0, 10.0, 10.0, 10.0]), np.array([11.0, 11.0, 11.0, 11.0])
    p = np.array([9.0, 12.1, 5.3, np.nan])
    assert bench._within(p, lo, hi).tolist() == [True, True, False, False]
    assert bench._within(p, 0.5 * lo, 0.5 * hi).tolist() == [False, False, True, False]
    assert bench._overlaps([11.5, 9.0], [12.0, 9.5], 10.0, 11.0).tolist() == [False, False]
    assert bench._overlaps([10.5], [12.0], 10.0, 11.0).tolist() == [True]
    # Clopper-Pearson: 0 of 20 gives a one-sided 95 % upper limit 1 - 0.05^(1/20) = 0.139
    assert bench._upper95(0, 20) == pytest.approx(1 - 0.05 ** (1 / 20), rel=1e-9)


def test_dense_likelihood_of_the_scaling_benchmark_matches_celerite2():
    # The dense reference of benchmarks/bench_scaling.py (SciPy Cholesky) agrees with the
    # model's celerite2 likelihood to 1e-8 relative (the benchmark's own stop condition).
    bench = _load("bench_scaling")
    t, y, err, model, theta = bench._data(600)
    dense = bench.dense_log_likelihood(model, theta, t, y, err)
    assert dense == pytest.approx(model.log_likelihood(theta), rel=1e-8)
