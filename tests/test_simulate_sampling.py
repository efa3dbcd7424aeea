"""The simulator's sampling, noise, flares and spot evolution.

Each check names its outside reference: an analytic result, SciPy, or a published value.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from rotinfer.errors import ConfigError
from rotinfer.flares import flare_profile
from rotinfer.simulate import FlareSet, ObservingPattern, SpotSet, StarParameters, simulate_star
from rotinfer.simulate.evolution import activity_level, draw_spots
from rotinfer.simulate.flaring import draw_flares, flare_light_curve, template_integral
from rotinfer.simulate.noise import correlated_noise
from rotinfer.simulate.observing import _markov_weather

# Davenport et al. 2014, ApJ 797, 122 (coefficients as printed in ../shared/REFERENCES.md).
RISE = (1.0, 1.94053, -0.175084, -2.24588, -1.12498)
DECAY = (0.689008, -1.60053, 0.302963, -0.278318)


def _published_template(x):
    x = np.asarray(x, float)
    rise = sum(c * x**k for k, c in enumerate(RISE))
    decay = DECAY[0] * np.exp(DECAY[1] * x) + DECAY[2] * np.exp(DECAY[3] * x)
    return np.where(x < -1, 0.0, np.where(x <= 0, rise, decay))


# --- observing patterns ------------------------------------------------------------------

def test_space_sector_has_a_fixed_cadence_and_an_orbit_gap():
    pat = ObservingPattern.space(dropout_fraction=0.0)
    s = pat.sample(np.random.default_rng(0))
    local = s.time - pat.start
    # 27.4 d at 2 min is 19,728 exposures; the 1-d gap centred on day 13.7 removes 720.
    assert s.time.size == 19728 - 720
    assert not np.any((local > 13.2) & (local < 14.2))
    steps = np.diff(s.time)[np.diff(s.chunk) == 0]
    np.testing.assert_allclose(steps, 2.0 / 1440.0, rtol=0, atol=1e-9)
    assert set(np.unique(s.chunk)) == {0, 1}


def test_year_in_quarters_has_four_segments_and_monthly_gaps():
    pat = ObservingPattern.space(4, 91.3, 30.0, orbit_days=30.4, dropout_fraction=0.0)
    s = pat.sample(np.random.default_rng(0))
    assert np.unique(s.segment).tolist() == [0, 1, 2, 3]
    # Each quarter holds floor(91.3 d / 30 min) = 4382 exposures; quarters start 91.3 d apart.
    assert s.time[-1] - s.time[0] == pytest.approx(3 * 91.3 + 4381 * 30.0 / 1440.0, abs=1e-6)
    gaps = np.diff(s.time)
    # Downlinks at 30.4 and 60.8 d in each quarter; quarters follow each other directly.
    assert np.sum(gaps > 0.5) == 4 * 2
    np.testing.assert_allclose(gaps[gaps > 0.5], 1.0 + 30.0 / 1440.0, atol=1e-6)
    assert np.all(gaps > 0)


def test_ground_pattern_observes_only_at_night_with_seasonal_gaps():
    pat = ObservingPattern.ground(3, 240.0, 10.0, weather_loss=0.0, dropout_fraction=0.0)
    s = pat.sample(np.random.default_rng(1))
    # Hours from local midnight; must lie inside the 10-h night (common practice).
    hours = (np.mod(s.time - pat.midnight + 0.5, 1.0) - 0.5) * 24.0
    assert np.all(np.abs(hours) <= 5.0 + 1e-9)
    big = np.diff(s.time)[np.diff(s.segment) != 0]
    assert np.all(big > 365.25 - 240.0 - 1.0)
    # Nightly windows shrink towards the season edges: the transit moves 3.94 min a day
    # (sidereal minus solar day; common practice).
    per_night = np.bincount(s.chunk)
    mid = per_night[len(per_night) // 6: len(per_night) // 6 + 5]
    assert per_night.max() == 48  # 8 visible hours at 10 min
    assert per_night[0] < per_night.max() and mid.min() > per_night[0] - 1


def test_markov_weather_has_the_requested_loss_and_persistence():
    # Analytic: a two-state Markov chain with P(bad|bad) = p + rho (1 - p) and
    # P(bad|good) = p (1 - rho) has stationary bad fraction p and lag-1 correlation rho.
    bad = _markov_weather(200_000, 0.3, 0.5, np.random.default_rng(3)).astype(float)
    assert bad.mean() == pytest.approx(0.3, abs=0.01)
    r = np.corrcoef(bad[:-1], bad[1:])[0, 1]
    assert r == pytest.approx(0.5, abs=0.02)


def test_pattern_options_are_validated():
    with pytest.raises(ConfigError, match="choose one of space, ground"):
        ObservingPattern(kind="balloon")
    with pytest.raises(ConfigError, match="cadence_minutes"):
        ObservingPattern.space(cadence_minutes=0.0)
    with pytest.raises(ConfigError, match="segments may not overlap"):
        ObservingPattern(segment_days=30.0, segment_spacing_days=20.0)


# --- noise -----------------------------------------------------------------------------

def test_damped_random_walk_has_the_ornstein_uhlenbeck_covariance():
    # Analytic OU covariance sigma^2 exp(-dt/tau): variance and lag-one correlation.
    t = np.arange(60_000) * 0.01
    x = correlated_noise(t, 2.0, 0.1, np.random.default_rng(5), kernel="drw")
    assert np.var(x) == pytest.approx(4.0, rel=0.1)
    r1 = np.corrcoef(x[:-1], x[1:])[0, 1]
    assert r1 == pytest.approx(np.exp(-0.1), abs=0.01)


def test_sho_granulation_noise_has_the_harvey_like_covariance():
    # Foreman-Mackey et al. 2017 (AJ 154, 220), SHO kernel with Q = 1/sqrt(2):
    # k(tau) = sigma^2 exp(-w0 tau / sqrt 2) [cos(w0 tau / sqrt 2) + sin(w0 tau / sqrt 2)].
    w0 = 10.0
    t = np.arange(80_000) * 0.02
    x = correlated_noise(t, 1.5, 1.0 / w0, np.random.default_rng(6), kernel="sho")
    for lag in (0, 5, 15):
        tau = lag * 0.02
        a = w0 * tau / np.sqrt(2)
        expected = 1.5**2 * np.exp(-a) * (np.cos(a) + np.sin(a))
        got = np.mean(x[: x.size - lag] * x[lag:])
        assert got == pytest.approx(expected, abs=0.1 * 1.5**2), lag


def test_segments_get_their_own_offsets():
    params = StarParameters(spotted=False, white_noise=0.0, granulation=0.0, drift=0.0)
    pat = ObservingPattern.space(3, 10.0, 30.0, orbit_days=0.0, segment_offset=5.0)
    star = simulate_star(params, pat, seed=4)
    levels = [np.unique(star.lc.flux[star.lc.segment == s]) for s in range(3)]
    assert all(lv.size == 1 for lv in levels)
    assert len({float(lv[0]) for lv in levels}) == 3


# --- flares ----------------------------------------------------------------------------

def test_simulated_flare_follows_the_published_template():
    # Davenport et al. 2014 coefficients (above): a lone flare, seen with a very short
    # exposure, must match the template at every sample.
    params = StarParameters(spotted=False, white_noise=0.0, granulation=0.0, drift=0.0)
    pat = ObservingPattern.space(1, 2.0, 0.5, orbit_days=0.0, dropout_fraction=0.0,
                                 segment_offset=0.0, exposure_minutes=0.001)
    t_peak, fwhm, amp = pat.start + 0.7001, 20.0 / 1440.0, 0.02
    star = simulate_star(params, pat, seed=0, flares=FlareSet(np.array([t_peak]),
                         np.array([amp]), np.array([fwhm])))
    x = (star.lc.time - t_peak) / fwhm
    np.testing.assert_allclose(star.lc.flux - 1.0, amp * _published_template(x),
                               rtol=0, atol=1e-6 * amp)
    # Several named points of the template, evaluated instantaneously.
    xs = np.array([-0.75, -0.25, 0.0, 0.5, 2.0, 8.0])
    inst = flare_light_curve(xs * fwhm, FlareSet(np.array([0.0]), np.array([1.0]),
                                                 np.array([fwhm])), exposure=0.0)
    np.testing.assert_allclose(inst, _published_template(xs), rtol=1e-12)
    assert star.truth.flare_times == (t_peak,)
    assert star.truth.flare_amplitudes == pytest.approx((20.0,))


def test_exposure_average_equals_scipy_quadrature_of_the_template():
    # SciPy quad of rotinfer.flares.flare_profile over each 30-min exposure.
    fwhm = 6.0 / 1440.0
    exp = 30.0 / 1440.0
    t = 0.013 + np.arange(-2, 12) * exp
    got = flare_light_curve(t, FlareSet(np.array([0.0]), np.array([1.0]), np.array([fwhm])),
                            exposure=exp)
    ref = [integrate.quad(lambda s: flare_profile(np.array([s]), 0.0, fwhm, 1.0)[0],
                          ti - exp / 2, ti + exp / 2, points=[0.0, -fwhm], limit=200)[0] / exp
           for ti in t]
    np.testing.assert_allclose(got, ref, rtol=1e-7, atol=1e-7)  # tail cut at 60 FWHM
    assert template_integral(-2.0) == 0.0


def test_flare_amplitudes_follow_the_truncated_power_law():
    # Analytic CDF of dN/dA ~ A^-alpha on [a, b]: (a^(1-alpha) - A^(1-alpha)) /
    # (a^(1-alpha) - b^(1-alpha)); Kolmogorov-Smirnov test from SciPy. Rate: Poisson mean.
    params = StarParameters(flare_rate=5.0, flare_index=1.7, flare_amplitude_min=1.0,
                            flare_amplitude_max=100.0)
    fl = draw_flares(params, 0.0, 1000.0, np.random.default_rng(8))
    n = len(fl)
    assert abs(n - 5000) < 5 * np.sqrt(5000)
    a, b, g = 1e-3, 0.1, 1.0 - 1.7

    def cdf(x):
        return (a**g - x**g) / (a**g - b**g)

    assert stats.kstest(fl.amplitude, cdf).pvalue > 1e-3
    assert stats.kstest(fl.amplitude, lambda x: cdf(x) ** 1.3).pvalue < 1e-6  # can fail


# --- spot evolution ------------------------------------------------------------------------

def test_spot_area_grows_then_decays_linearly():
    # The profile as documented: linear rise, linear decay (Petrovay & van
    # Driel-Gesztelyi 1997 linear decay law), zero outside the life.
    s = SpotSet([0.0], [0.0], [0.0], [2.0], [8.0], [1e-3])
    t = np.array([-1.0, 1.0, 2.0, 6.0, 10.0, 11.0])
    np.testing.assert_allclose(s.area(t, np.zeros(6, int)),
                               [0.0, 0.5e-3, 1e-3, 0.5e-3, 0.0, 0.0], atol=1e-15)


def test_emergence_rate_and_lifetimes_follow_the_parameters():
    # Poisson counts (mean rate x time) and gamma lifetimes with the given mean and
    # coefficient of variation (analytic moments).
    p = StarParameters(emergence_rate=2.0, spot_lifetime=12.0, lifetime_spread=0.5)
    spots = draw_spots(p, 0.0, 2000.0, np.random.default_rng(9))
    new = spots.t_emerge > 0
    assert abs(new.sum() - 4000) < 5 * np.sqrt(4000)
    life = spots.lifetime[new]
    assert life.mean() == pytest.approx(12.0, rel=0.05)
    assert life.std() / life.mean() == pytest.approx(0.5, rel=0.08)
    assert np.all(np.abs(spots.latitude) <= p.latitude_max)


def test_activity_cycle_quiet_phase_and_butterfly_drift():
    # Solar-like behaviour (common practice): no new spots in the quiet part of the
    # cycle; emergence latitudes move towards the equator as the cycle goes on (Sporer).
    p = StarParameters(emergence_rate=5.0, spot_lifetime=5.0, cycle_period=1000.0,
                       cycle_phase=0.0, cycle_quiet_fraction=0.2, latitude_min=5.0,
                       latitude_max=35.0, latitude_scatter=3.0)
    spots = draw_spots(p, 0.0, 3000.0, np.random.default_rng(10))
    t = spots.t_emerge[spots.t_emerge > 0]
    phase = np.mod(t / 1000.0, 1.0)
    assert not np.any(phase >= 0.8)
    lat = np.abs(spots.latitude[spots.t_emerge > 0])
    early, late = lat[phase < 0.2], lat[(phase > 0.6) & (phase < 0.8)]
    assert early.mean() > late.mean() + 15.0
    assert activity_level(np.array([0.0, 400.0, 900.0]), p, 0.0) == pytest.approx([0, 1, 0])


def test_null_star_has_no_spot_signal():
    p = StarParameters(spotted=False, flare_rate=0.5)
    star = simulate_star(p, ObservingPattern.space(), seed=12)
    assert len(star.spots) == 0
    assert not star.components.spot_deficit.any()
    assert star.truth.n_spots == 0 and np.isnan(star.truth.period_min)
    assert star.truth.amplitude_ppt == 0.0
