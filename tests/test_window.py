"""Tests of the spectral window (periodicities of the sampling) and the sampling check."""

from __future__ import annotations

import math

import numpy as np
import pytest

from rotinfer import ConfigError
from rotinfer.periodogram import (
    PeriodogramConfig,
    gap_periodicity,
    scan,
    spectral_window,
    spectral_window_grid,
    window_peaks,
)
from rotinfer.prepare import PrepareConfig, prepare
from rotinfer.simulate import ObservingPattern, StarParameters, simulate_star
from rotinfer.summarise import DetectionConfig, sampling_check


def _nightly(n_nights=120, hours=8.0, cadence_minutes=10.0):
    """Evenly spaced times switched on for ``hours`` of every day (a gated even grid)."""
    dt = cadence_minutes / 1440.0
    per_day = int(round(1.0 / dt))
    on = int(round(hours / 24.0 * per_day))
    j = np.arange(n_nights * per_day)
    mask = (j % per_day) < on
    return j[mask] * dt, mask, dt


# ------------------------------------------------------------------------- exact cases
def test_window_of_even_sampling_is_the_dft_identity():
    # Even sampling t_k = k dt: sum_k exp(2 pi i f t_k) is N at f = 0 and at the sampling
    # frequency 1/dt (every phase a whole turn) and 0 at f = m / (N dt), 0 < m < N
    # (orthogonality of the discrete Fourier basis; common practice).
    n, dt = 240, 0.05
    t = np.arange(n) * dt
    w = spectral_window(t, [0.0, 1.0 / dt, 2.0 / dt])
    np.testing.assert_allclose(w, 1.0, atol=1e-12)
    m = np.arange(1, n)
    np.testing.assert_allclose(spectral_window(t, m / (n * dt)), 0.0, atol=1e-20)


def test_window_of_nightly_sampling_is_a_dirichlet_kernel():
    # A block of `on` consecutive samples out of every `per_day`: at f = 1 c/d the sum over
    # one night is the Dirichlet kernel, W = [sin(pi on/per_day) / (on sin(pi/per_day))]^2,
    # which tends to sinc^2 of the duty cycle (0.684 for 8 h of 24; Deeming 1975).
    t, mask, dt = _nightly(n_nights=30)
    per_day, on = int(round(1 / dt)), int(mask[: int(round(1 / dt))].sum())
    expected = (math.sin(math.pi * on / per_day) / (on * math.sin(math.pi / per_day))) ** 2
    assert spectral_window(t, [1.0])[0] == pytest.approx(expected, rel=1e-10)
    assert expected == pytest.approx(np.sinc(8.0 / 24.0) ** 2, abs=2e-4)


# ---------------------------------------------------------------- fast against references
def test_fast_grid_matches_numpy_fft_on_a_gated_grid():
    # On the frequencies k / (M dt) of the full even grid (M samples, some switched off),
    # W is |FFT(mask)_k|^2 / N^2 exactly: numpy's FFT is the reference.
    t, mask, dt = _nightly(n_nights=64)
    m_total = mask.size
    reference = np.abs(np.fft.fft(mask.astype(float))) ** 2 / mask.sum() ** 2
    k = np.arange(1, 400)
    fast = spectral_window_grid(t, k[0] / (m_total * dt), 1.0 / (m_total * dt), k.size)
    np.testing.assert_allclose(fast, reference[k], atol=1e-6)


def test_fast_grid_matches_the_exact_sum_on_uneven_times(rng):
    t = np.sort(rng.uniform(0.0, 80.0, 3000))
    f = np.linspace(0.02, 3.0, 1501)
    fast = spectral_window_grid(t, f[0], f[1] - f[0], f.size)
    np.testing.assert_allclose(fast, spectral_window(t, f), atol=1e-6)


# ------------------------------------------------------------------------------ peaks
def test_nightly_sampling_gives_a_one_day_periodicity():
    t, _, _ = _nightly(n_nights=120)
    peaks = window_peaks(t, min_period=0.4, max_period=40.0)
    assert len(peaks) == 1  # the 0.5-d harmonic has sinc^2(2/3) = 0.17 < 0.2
    assert peaks[0].period == pytest.approx(1.0, abs=1e-4)
    assert peaks[0].power == pytest.approx(np.sinc(8.0 / 24.0) ** 2, abs=2e-3)
    lower = window_peaks(t, min_period=0.4, max_period=40.0, threshold=0.1)
    assert [round(p.period, 3) for p in lower] == [1.0, 0.5]


def test_continuous_space_sampling_has_no_strong_periodicity():
    # One 27-d block at 2-min cadence with a 1-d gap in the middle: sidelobes only.
    t = np.arange(0.0, 27.4, 2.0 / 1440.0)
    t = t[np.abs(t - 13.7) > 0.5]
    assert window_peaks(t, min_period=0.1, max_period=13.7) == ()


def test_recurring_downlink_gaps_are_a_periodicity_of_the_sampling():
    # Two-orbit sector (27.4 d, a 1-d downlink gap mid-sector): marks at the start, the gap
    # and the end, 13.7 d apart; a year in 30.44-d months with a 1-d gap each month.
    sector = np.arange(0.0, 27.4, 2.0 / 1440.0)
    sector = sector[np.abs(sector - 13.7) > 0.5]
    found = gap_periodicity(sector, min_gap=0.5, min_period=0.1, max_period=13.7)
    assert found.source == "gaps" and found.period == pytest.approx(13.7, abs=0.01)
    assert found.power == pytest.approx(spectral_window(sector, [1 / found.period])[0])
    year = np.arange(0.0, 365.25, 30.0 / 1440.0)
    year = year[np.abs((year + 15.22) % 30.44 - 15.22) > 0.5]
    assert gap_periodicity(year, min_gap=0.5, min_period=0.4,
                           max_period=182.6).period == pytest.approx(30.44, abs=0.05)
    # outside the searched range: nothing
    assert gap_periodicity(year, min_gap=0.5, min_period=0.4, max_period=20.0) is None


def test_irregular_or_absent_gaps_are_no_periodicity(rng):
    t = np.arange(0.0, 200.0, 0.02)
    assert gap_periodicity(t, min_gap=0.5, min_period=0.4, max_period=100.0) is None
    starts = np.sort(rng.uniform(0.0, 195.0, 6))  # six gaps at random places
    for s in starts:
        t = t[(t < s) | (t > s + 1.0)]
    assert gap_periodicity(t, min_gap=0.5, min_period=0.4, max_period=100.0) is None


def test_scan_reports_the_day_for_simulated_ground_photometry():
    params = StarParameters(period=3.7, spot_lifetime=30.0, white_noise=2.0)
    pattern = ObservingPattern.ground(1, 120.0, 15.0)
    sim = simulate_star(params, pattern, seed=4, name="Kestrel-ground-4")
    prepared = prepare(sim.lc, PrepareConfig(min_period=0.4))
    result = scan(prepared, config=PeriodogramConfig())
    periods = [p.period for p in result.window]
    # the star's visibility window follows the sidereal day and the night the solar day
    assert any(abs(p - 0.99727) < 0.002 or abs(p - 1.0) < 0.002 for p in periods), periods
    assert all(p.power >= 0.2 for p in result.window if p.source == "window")
    assert result.to_dict()["window"][0]["period"] == pytest.approx(periods[0])


def test_window_options_are_validated():
    with pytest.raises(ConfigError, match="window_threshold"):
        PeriodogramConfig(window_threshold=1.5)
    with pytest.raises(ConfigError, match="sampling_tolerance"):
        DetectionConfig(sampling_tolerance=0.0)


# ----------------------------------------------------------------------- sampling check
def _scan_dict(period_ls=3.31, period_acf=None):
    return {
        "min_period": 0.4, "max_period": 300.0,
        "window": [{"period": 0.99727, "frequency": 1 / 0.99727, "power": 0.66},
                   {"period": 0.49863, "frequency": 2 / 0.99727, "power": 0.31}],
        "lomb_scargle": {"period": period_ls}, "acf": {"period": period_acf},
    }


def test_sampling_check_flags_a_posterior_at_the_day(rng):
    period = 0.9975 * np.exp(0.003 * rng.standard_normal(4000))
    w = np.full(period.size, 1.0 / period.size)
    block = sampling_check(period, w, float(np.median(period)), _scan_dict(period_ls=0.998),
                           DetectionConfig())
    assert block["flag"] is True
    assert block["probability"] == pytest.approx(1.0)
    assert block["periodicities"][0]["probability"] == pytest.approx(1.0)
    assert block["periodicities"][1]["probability"] == 0.0
    assert block["baselines"] == {"lomb_scargle": True, "acf": None}


def test_sampling_check_passes_a_period_away_from_the_window_and_lists_aliases(rng):
    period = 3.3 * np.exp(0.01 * rng.standard_normal(4000))
    # a tenth of the weight at the day: probability 0.1 > 0.05 raises the flag
    period_mixed = np.concatenate([period, np.full(444, 0.99727)])
    w = np.concatenate([np.full(4000, 0.9 / 4000), np.full(444, 0.1 / 444)])
    cfg = DetectionConfig()
    clean = sampling_check(period, np.full(4000, 1 / 4000), 3.3, _scan_dict(), cfg)
    assert clean["flag"] is False and clean["probability"] == 0.0
    assert clean["baselines"]["lomb_scargle"] is False
    # aliases of 3.3 d through the daily window: 1/(1/3.3 +- 1/0.99727) (Deeming 1975)
    f, fw = 1 / 3.3, 1 / 0.99727
    expected = sorted(p for p in (1 / (f + fw), 1 / abs(f - fw), 1 / (f + 2 * fw),
                                  1 / abs(f - 2 * fw)) if 0.4 <= p <= 300.0)
    assert [a["period"] for a in clean["aliases"]] == pytest.approx(expected)
    mixed = sampling_check(period_mixed, w, 3.3, _scan_dict(), cfg)
    assert mixed["probability"] == pytest.approx(0.1)
    assert mixed["flag"] is True
    assert sampling_check(period, np.full(4000, 1 / 4000), 3.3, None, cfg) == {}
