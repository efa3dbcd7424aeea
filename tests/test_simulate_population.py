"""Populations, truth, determinism and the ``rotinfer simulate`` command."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from astropy.timeseries import LombScargle
from scipy import stats

from rotinfer.cli import main
from rotinfer.errors import ConfigError
from rotinfer.io import read_light_curve
from rotinfer.simulate import (
    DEFAULT_POPULATION_TOML,
    TRUTH_UNITS,
    ObservingPattern,
    StarParameters,
    draw_population,
    simulate_star,
    star_seed,
)
from rotinfer.simulate.output import read_truth_table

REPO = Path(__file__).resolve().parents[1]

SMALL_CONFIG = """
[population]
default = "quick"
name_prefix = "wren"

[patterns.short]
kind = "space"
n_sectors = 2
sector_days = 4.0
cadence_minutes = 30.0
orbit_days = 2.0
orbit_gap_days = 0.2

[classes.quick]
pattern = "short"
period = {dist = "uniform", min = 0.5, max = 1.5}
spots_at_once = 4.0
spot_lifetime_rotations = 5.0
flare_rate = 1.0
"""


def test_configs_file_is_the_built_in_population():
    assert (REPO / "configs" / "population.toml").read_text() == DEFAULT_POPULATION_TOML


def test_population_is_reproducible_and_prefix_stable():
    a = draw_population(None, 12, seed=7)
    b = draw_population(None, 12, seed=7)
    c = draw_population(None, 5, seed=7)
    assert a == b
    assert a[:5] == c
    assert draw_population(None, 5, seed=8) != c
    assert [m.name for m in c] == [f"kestrel-{i:05d}" for i in range(1, 6)]
    params, pattern, name = a[0]
    assert isinstance(params, StarParameters) and isinstance(pattern, ObservingPattern)


def test_mixture_proportions_match_the_weights():
    # Multinomial draws against the configured weights (SciPy chi-square test).
    members = draw_population(None, 600, seed=3)
    cats = [m.params.category for m in members]
    names = ["easy", "moderate", "hard", "null"]
    observed = np.array([cats.count(k) for k in names])
    expected = np.array([0.3, 0.3, 0.25, 0.15]) * 600
    assert stats.chisquare(observed, expected).pvalue > 1e-3


@pytest.mark.parametrize("cls", ["easy", "moderate", "hard", "null"])
def test_classes_have_the_documented_character(cls):
    for params, pattern, _ in draw_population(None, 40, seed=11, population=cls):
        assert params.category == cls
        t0, t1 = pattern.span
        rotations = params.spot_lifetime / params.period
        if cls == "null":
            assert not params.spotted
            continue
        assert params.spotted and params.period <= 0.3 * (t1 - t0)
        if cls == "easy":
            assert rotations >= 10.0 and params.shear <= 0.05 and pattern.kind == "space"
        elif cls == "moderate":
            assert 2.0 <= rotations <= 6.0 and params.shear >= 0.05
        else:
            assert rotations <= 2.5 and pattern.kind == "ground" and params.flare_rate > 0


def test_population_config_errors_list_the_choices(tmp_path):
    with pytest.raises(ConfigError, match="population 'tepid' is not defined; choose one of "
                       "easy, hard, moderate, null, sunlike, mixed"):
        draw_population(None, 1, seed=0, population="tepid")
    bad = tmp_path / "bad.toml"
    bad.write_text(SMALL_CONFIG.replace("flare_rate = 1.0", "flair_rate = 1.0"))
    with pytest.raises(ConfigError, match=r"\[classes.quick\]: unknown option\(s\) flair_rate; "
                       "allowed: contrast, cycle_period"):
        draw_population(bad, 1, seed=0)
    bad.write_text(SMALL_CONFIG.replace('dist = "uniform"', 'dist = "gaussian"'))
    with pytest.raises(ConfigError, match="distribution 'gaussian' is not known; choose one of "
                       "uniform, loguniform, normal, isotropic, choice"):
        draw_population(bad, 1, seed=0)
    bad.write_text(SMALL_CONFIG.replace("orbit_gap_days = 0.2", "orbit_gap = 0.2"))
    with pytest.raises(ConfigError, match=r"\[patterns.short\]: unknown option\(s\) orbit_gap"):
        draw_population(bad, 1, seed=0)
    with pytest.raises(ConfigError, match="configuration file not found"):
        draw_population(tmp_path / "missing.toml", 1, seed=0)


def test_same_seed_same_star_and_independent_streams():
    params = StarParameters(period=3.0, shear=0.1, flare_rate=0.5, drift=0.5)
    pat = ObservingPattern.space()
    a = simulate_star(params, pat, seed=99)
    b = simulate_star(params, pat, seed=99)
    c = simulate_star(params, pat, seed=100)
    for x, y in ((a.lc.time, b.lc.time), (a.lc.flux, b.lc.flux), (a.lc.flux_err, b.lc.flux_err)):
        np.testing.assert_array_equal(x, y)
    assert a.truth == b.truth
    assert not np.array_equal(a.lc.flux, c.lc.flux)
    # Changing the flare rate must not reshuffle the spots (separate random streams).
    d = simulate_star(dataclasses.replace(params, flare_rate=0.0), pat, seed=99)
    np.testing.assert_array_equal(d.components.spot_deficit, a.components.spot_deficit)
    assert a.lc.meta.identifier == "sim-star" and a.lc.meta.time_reference == 2457000.0


def test_truth_row_and_period_range():
    params = StarParameters(period=5.0, shear=0.2, latitude_min=10.0, latitude_max=40.0,
                            spot_lifetime=20.0, emergence_rate=0.3)
    star = simulate_star(params, ObservingPattern.space(2), seed=5, name="wren-7")
    row = star.truth.to_row()
    assert all(np.isscalar(v) for v in row.values())
    assert set(TRUTH_UNITS) <= set(row) | {"contrast"}
    # The range lies within what the law allows for the spot latitudes present.
    lat = np.abs(star.spots.latitude)
    lo, hi = params.period_at(lat.min()), params.period_at(lat.max())
    assert lo - 1e-12 <= star.truth.period_min <= star.truth.period_max <= hi + 1e-12
    assert star.truth.period_min >= params.period_at(10.0 - 3 * params.latitude_scatter) - 1e-9
    assert star.truth.name == "wren-7" and star.lc.meta.identifier == "wren-7"
    assert star.truth.amplitude_ppt > 0


def _binned(time, flux, width=0.5):
    idx = np.floor((time - time[0]) / width).astype(int)
    n = np.bincount(idx)
    keep = n > 0
    return (np.bincount(idx, time)[keep] / n[keep], np.bincount(idx, flux)[keep] / n[keep])


def _fap(time, flux):
    ls = LombScargle(time, flux)
    freq, power = ls.autopower(minimum_frequency=1 / 50.0, maximum_frequency=0.5,
                               samples_per_peak=5)
    return float(ls.false_alarm_probability(power.max(), minimum_frequency=1 / 50.0,
                                            maximum_frequency=0.5, method="baluev"))


def test_null_stars_show_no_power_excess_beyond_their_noise():
    # astropy's Lomb-Scargle false-alarm probability (Baluev 2008 bound) for the highest
    # peak between 2 and 50 d, on 0.5-d bins (much longer than the granulation timescale,
    # so the noise is white there). Instrumental drifts and offsets are switched off: they
    # are removed before any period search. Of 30 null stars at most 2 may reach FAP < 1 %
    # (binomial: P(>= 3) ~ 0.004 if calibrated); a spotted star must be detected.
    members = draw_population(None, 30, seed=21, population="null")
    low = 0
    for i, (params, pattern, name) in enumerate(members):
        params = dataclasses.replace(params, drift=0.0)
        pattern = dataclasses.replace(pattern, segment_offset=0.0, night_offset=0.0)
        star = simulate_star(params, pattern, seed=star_seed(21, i), name=name)
        low += _fap(*_binned(star.lc.time, star.lc.flux)) < 0.01
    assert low <= 2
    params, pattern, name = draw_population(None, 1, seed=4, population="moderate")[0]
    star = simulate_star(dataclasses.replace(params, drift=0.0),
                         dataclasses.replace(pattern, segment_offset=0.0), seed=1)
    assert star.truth.amplitude_ppt > 3 * star.truth.noise_rms_ppt / np.sqrt(24)
    assert _fap(*_binned(star.lc.time, star.lc.flux)) < 1e-6


# --- command line ------------------------------------------------------------------------

def _run(args) -> int:
    return main(["-q", "simulate", *args])


@pytest.mark.parametrize("fmt", ["csv", "fits"])
def test_cli_same_seed_gives_byte_identical_files(tmp_path, fmt):
    cfg = tmp_path / "pop.toml"
    cfg.write_text(SMALL_CONFIG)
    for d in ("a", "b"):
        assert _run(["--out", str(tmp_path / d), "--n", "3", "--seed", "5", "--config",
                     str(cfg), "--format", fmt]) == 0
    files_a = sorted(p.name for p in (tmp_path / "a").iterdir())
    assert files_a == sorted(p.name for p in (tmp_path / "b").iterdir())
    assert f"wren-00001.{fmt}" in files_a and "truth.ecsv" in files_a
    for name in files_a:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name
    assert _run(["--out", str(tmp_path / "c"), "--n", "3", "--seed", "6", "--config", str(cfg),
                 "--format", fmt]) == 0
    assert (tmp_path / "c" / "truth.ecsv").read_bytes() != (tmp_path / "a" / "truth.ecsv"
                                                            ).read_bytes()


def test_cli_files_read_back_and_match_the_truth(tmp_path):
    cfg = tmp_path / "pop.toml"
    cfg.write_text(SMALL_CONFIG)
    out = tmp_path / "sim"
    assert _run(["--out", str(out), "--n", "2", "--seed", "9", "--config", str(cfg)]) == 0
    truth = read_truth_table(out / "truth.ecsv")
    assert list(truth["name"]) == ["wren-00001", "wren-00002"]
    assert str(truth["period_eq"].unit) == "d" and str(truth["amplitude_ppt"].unit) == "ppt"
    members = draw_population(cfg, 2, seed=9)
    star = simulate_star(*members[0][:2], seed=int(truth["seed"][0]), name=members[0].name)
    lc = read_light_curve(out / "wren-00001.csv")
    np.testing.assert_allclose(lc.time + lc.meta.time_reference,
                               star.lc.time + star.lc.meta.time_reference, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(lc.flux, star.lc.flux)
    assert lc.meta.identifier == "wren-00001"
    assert truth["n_flares"][0] == star.truth.n_flares
    flares = read_truth_table(out / "flares.ecsv")
    assert len(flares) == int(np.sum(truth["n_flares"]))


def test_cli_refuses_to_overwrite_and_reports_bad_input(tmp_path, capsys):
    cfg = tmp_path / "pop.toml"
    cfg.write_text(SMALL_CONFIG)
    out = tmp_path / "sim"
    assert _run(["--out", str(out), "--n", "1", "--config", str(cfg)]) == 0
    before = (out / "truth.ecsv").read_bytes()
    capsys.readouterr()
    assert _run(["--out", str(out), "--n", "1", "--seed", "2", "--config", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "refusing to overwrite" in err and err.count("\n") == 1
    assert (out / "truth.ecsv").read_bytes() == before
    assert _run(["--out", str(out), "--n", "1", "--seed", "2", "--config", str(cfg),
                 "--overwrite"]) == 0
    assert (out / "truth.ecsv").read_bytes() != before
    assert _run(["--out", str(tmp_path / "x"), "--population", "lukewarm"]) == 2
    assert "choose one of" in capsys.readouterr().err
    assert not (tmp_path / "x").exists()
