"""The ``rotinfer scan`` command: text, JSON and figure output of the period searches."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest

from rotinfer.cli import main
from rotinfer.io import from_arrays, write_light_curve


def _write_star(path, period, *, seed, span=120.0, cadence=0.02, amplitude=0.01):
    """Invented demo star: a sinusoid with white noise, uneven sampling and one gap."""
    rng = np.random.default_rng(seed)
    t = np.arange(0.0, span, cadence)
    t = t[(t < 0.4 * span) | (t > 0.5 * span)]
    t = np.sort(rng.choice(t, int(0.8 * t.size), replace=False))
    err = np.full(t.size, 1e-3)
    flux = 1 + amplitude * np.sin(2 * np.pi * t / period) + err * rng.standard_normal(t.size)
    write_light_curve(from_arrays(t, flux, err, identifier=path.stem), path)
    return path


@pytest.fixture(scope="module")
def stars(tmp_path_factory):
    d = tmp_path_factory.mktemp("scan")
    return [_write_star(d / "demo-a.csv", 6.3, seed=1), _write_star(d / "demo-b.csv", 11.7, seed=2)]


def test_text_output_has_periods_with_units(stars, capsys):
    assert main(["scan", str(stars[0])]) == 0
    out = capsys.readouterr().out
    # Analytic: the injected sinusoid's period, 6.3 d, to 0.5 %.
    ls = re.search(r"Lomb-Scargle: period ([0-9.]+) d, power ([0-9.]+) \(normalised\), "
                   r"false-alarm probability (< 1e-16|[0-9.e+-]+)", out)
    acf = re.search(r"ACF: period ([0-9.]+) d \+- ([0-9.e+-]+) d, local peak height ([0-9.]+)",
                    out)
    assert ls and acf, out
    assert float(ls.group(1)) == pytest.approx(6.3, rel=5e-3)
    assert float(acf.group(1)) == pytest.approx(6.3, rel=5e-3)
    # A 10 ppt sinusoid under 1 ppt noise: Baluev's bound underflows, shown as such.
    assert 0.5 < float(ls.group(2)) <= 1 and ls.group(3) == "< 1e-16"
    assert 0 < float(acf.group(2)) < 0.1 and float(acf.group(3)) > 0.5
    assert "candidates: 6.3" in out


def test_json_lists_one_object_per_star(stars, capsys):
    assert main(["scan", "--json", *map(str, stars)]) == 0
    records = json.loads(capsys.readouterr().out)
    assert [r["identifier"] for r in records] == ["demo-a", "demo-b"]
    for rec, period in zip(records, (6.3, 11.7), strict=True):
        # Analytic: injected periods, 0.5 %.
        assert rec["lomb_scargle"]["period"] == pytest.approx(period, rel=5e-3)
        assert rec["acf"]["period"] == pytest.approx(period, rel=5e-3)
        assert rec["units"]["period"] == "d"
        assert rec["candidates"][0]["period"] == pytest.approx(period, rel=5e-3)


def test_period_range_and_method_options(stars, capsys):
    args = ["scan", "--json", "--min-period", "1.5", "--max-period", "20", "--method", "acf",
            str(stars[1])]
    assert main(args) == 0
    rec = json.loads(capsys.readouterr().out)[0]
    assert (rec["min_period"], rec["max_period"]) == (1.5, 20.0)
    assert rec["lomb_scargle"] is None
    assert rec["acf"]["period"] == pytest.approx(11.7, rel=5e-3)


def test_misspelt_method_is_a_usage_error(stars, capsys):
    assert main(["scan", "--method", "lombscargle", str(stars[0])]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert ("'lombscargle' is not a recognised period-search method; "
            "choose from: lomb_scargle, acf") in err


def test_config_file_periodogram_table(stars, tmp_path, capsys):
    cfg = tmp_path / "cfg.toml"
    cfg.write_text("[periodogram]\nn_peaks = 2\n")
    assert main(["scan", "--json", "--config", str(cfg), str(stars[0])]) == 0
    rec = json.loads(capsys.readouterr().out)[0]
    assert len(rec["lomb_scargle"]["peaks"]) == 2
    cfg.write_text("[periodogram]\nn_peak = 2\n")
    assert main(["scan", "--config", str(cfg), str(stars[0])]) == 2
    assert "unknown option(s) n_peak; allowed:" in capsys.readouterr().err


def test_plot_writes_one_figure_per_star(stars, tmp_path, capsys):
    one = tmp_path / "one.png"
    assert main(["scan", "--plot", str(one), str(stars[0])]) == 0
    assert one.stat().st_size > 10_000
    many = tmp_path / "many.png"
    assert main(["scan", "--plot", str(many), *map(str, stars)]) == 0
    assert (tmp_path / "many_demo-a.png").stat().st_size > 10_000
    assert (tmp_path / "many_demo-b.png").stat().st_size > 10_000
    capsys.readouterr()


def test_unwritable_plot_path_is_a_usage_error(stars, tmp_path, capsys):
    code = main(["scan", "--plot", str(tmp_path / "nowhere" / "f.png"), str(stars[0])])
    err = capsys.readouterr().err
    assert code == 2 and len(err.splitlines()) == 1
    assert "folder" in err and "does not exist" in err
    code = main(["scan", "--plot", str(tmp_path / "figure.xyz"), str(stars[0])])
    err = capsys.readouterr().err
    assert code == 2 and "no figure suffix matplotlib writes; use one of" in err
    assert ".png" in err


def test_noise_star_reports_no_acf_period(tmp_path, capsys):
    # White noise only (invented demo star): Baluev's false-alarm probability stays high and
    # the ACF reports no reliable peak rather than a made-up one.
    rng = np.random.default_rng(11)
    t = np.sort(rng.uniform(0, 60, 3000))
    err = np.full(t.size, 1e-3)
    path = tmp_path / "demo-noise.csv"
    write_light_curve(from_arrays(t, 1 + err * rng.standard_normal(t.size), err,
                                  identifier="demo-noise"), path)
    assert main(["scan", str(path)]) == 0
    out = capsys.readouterr().out
    assert re.search(r"ACF: no reliable peak \(highest local peak height [0-9.]+; "
                     r"[0-9.]+ needed\)", out), out
    assert main(["scan", "--json", str(path)]) == 0
    rec = json.loads(capsys.readouterr().out)[0]
    assert rec["acf"]["period"] is None and rec["acf"]["reliable"] is False
    assert rec["lomb_scargle"]["false_alarm_probability"] > 0.01


def test_text_output_names_the_nightly_periodicity(tmp_path, capsys):
    # Invented ground-based star: 8 hours a night for 100 nights (4,800 points, not
    # binned). The sampling's own periodicity, one day, has window power sinc^2(8/24) =
    # 0.68 (Deeming 1975).
    rng = np.random.default_rng(5)
    t = np.arange(0.0, 100.0, 10.0 / 1440.0)
    t = t[(t % 1.0) < 8.0 / 24.0]
    err = np.full(t.size, 1e-3)
    flux = 1 + 0.004 * np.sin(2 * np.pi * t / 4.4) + err * rng.standard_normal(t.size)
    path = tmp_path / "demo-ground.csv"
    write_light_curve(from_arrays(t, flux, err, identifier="demo-ground"), path)
    assert main(["scan", str(path), "--min-period", "0.4"]) == 0
    out = capsys.readouterr().out
    found = re.search(r"periodicities of the sampling itself: ([0-9.]+) d \(window power "
                      r"([0-9.]+)\)", out)
    assert found, out
    assert float(found.group(1)) == pytest.approx(1.0, abs=2e-3)
    assert float(found.group(2)) == pytest.approx(np.sinc(8 / 24) ** 2, abs=0.02)
    assert main(["scan", str(path), "--min-period", "0.4", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)[0]
    assert record["window"][0]["period"] == pytest.approx(1.0, abs=2e-3)
