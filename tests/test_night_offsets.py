"""Tests of the per-night zero-point offsets of the rotation model (``[model] night_offsets``).

Each night's offset is Normal(0, sigma_night^2) and integrated out, so the data are
Normal(mean, K + sigma_night^2 B B^T) with B the point-to-night indicator matrix: the
marginal of a linear model with Gaussian weights (Rasmussen & Williams 2006, section 2.7).
The references here are dense matrices (NumPy, SciPy) built from that statement, not from
the one-column celerite construction the model uses.
"""

from __future__ import annotations

import pickle

import numpy as np
import pytest
from scipy import linalg, stats
from test_model import _dense_covariance

from rotinfer.errors import ConfigError, InputError
from rotinfer.model import ModelConfig, RotationModel, is_nightly, night_index


def _nightly_times(rng, nights=30, hours=8.0, cadence_min=20.0, loss=0.3):
    """Nightly windows starting at 0.1 d past each integer day, some nights lost."""
    t = [k + 0.1 + np.arange(0.0, hours / 24.0, cadence_min / 1440.0)
         for k in range(nights) if rng.random() > loss]
    return np.concatenate(t)


def _night_model(rng, *, periodic=True, marginalise_mean=True, n_bg=2):
    t = _nightly_times(rng)
    night = night_index(t, 6.0)
    offsets = 1.5e-3 * rng.standard_normal(night[-1] + 1)
    y = (1.0 + 2e-3 * np.sin(2 * np.pi * t / 4.3) + offsets[night]
         + 5e-4 * rng.standard_normal(t.size))
    cfg = ModelConfig(marginalise_mean=marginalise_mean, periodic_backgrounds=1,
                      max_comparison_backgrounds=n_bg)
    model = RotationModel(t, y, np.full(t.size, 5e-4), config=cfg, period_range=(0.5, 10.0),
                          night=night)
    return model if periodic else model.aperiodic()


def _dense_with_nights(model, theta):
    cov, mean = _dense_covariance(model, theta)
    p = model.unpack(theta)
    same_night = model.night[:, None] == model.night[None, :]
    return cov + p["night_offset"] ** 2 * same_night, mean, same_night


def test_night_index_splits_at_long_gaps_only():
    # exact case: gaps of 1 h stay within a night, 7 h and 16 h start new ones
    t = np.array([0.0, 1.0, 2.0, 9.0, 10.0, 26.0, 27.0]) / 24.0
    np.testing.assert_array_equal(night_index(t, 6.0), [0, 0, 0, 1, 1, 2, 2])
    np.testing.assert_array_equal(night_index(t, 8.0), [0, 0, 0, 0, 0, 1, 1])
    assert night_index([], 6.0).size == 0


def test_nightly_sampling_is_recognised_and_space_sectors_are_not(rng):
    from rotinfer.simulate.observing import ObservingPattern

    ground = ObservingPattern.ground(n_seasons=1, season_days=60.0).sample(rng).time
    sector = ObservingPattern.space(n_sectors=1, sector_days=27.4).sample(rng).time
    assert is_nightly(ground, 6.0)
    assert not is_nightly(sector, 6.0)
    # fewer than ten nights is not enough to call the sampling nightly
    assert not is_nightly(_nightly_times(rng, nights=8, loss=0.0), 6.0)
    # nor is one measurement a day (the Sun's daily radio flux): an offset per point
    # would only be white noise
    assert not is_nightly(np.arange(200.0), 6.0)
    assert is_nightly(np.sort(np.r_[np.arange(200.0), np.arange(200.0) + 0.1,
                                    np.arange(200.0) + 0.2]), 6.0)


@pytest.mark.parametrize("periodic,marginalise", [(True, True), (True, False), (False, True)])
def test_likelihood_with_night_offsets_matches_dense_normal(rng, periodic, marginalise):
    # Reference: scipy.stats.multivariate_normal.logpdf with the dense covariance
    # K + sigma_night^2 B B^T (+ s0^2 for the integrated-out mean), K from the SHO
    # formulas of Foreman-Mackey et al. 2017 eq. 20 (test_model._dense_covariance).
    model = _night_model(rng, periodic=periodic, marginalise_mean=marginalise)
    assert "log_night_offset" in model.names
    assert model.n_nights == int(model.night[-1]) + 1 > 10
    for theta in model.sample_prior(rng, 6):
        cov, mean, _ = _dense_with_nights(model, theta)
        if marginalise:
            mean, sd = model.config.mean
            cov = cov + sd**2
        ref = stats.multivariate_normal.logpdf(model.flux, mean=np.full(model.flux.size, mean),
                                               cov=cov)
        assert model.log_likelihood(theta) == pytest.approx(ref, rel=1e-8)


def test_night_offsets_posterior_and_mean_posterior_match_dense_algebra(rng):
    # Reference: NumPy solves of the dense covariance C. Offsets' conditional mean
    # sigma^2 B^T C^-1 (y - m) (Rasmussen & Williams 2006 eq. 2.42 for Gaussian weights),
    # broadcast to points; the shared mean's precision 1^T C^-1 1 + 1/s0^2.
    model = _night_model(rng)
    mu0, s0 = model.config.mean
    for theta in model.sample_prior(rng, 4):
        cov, _, same_night = _dense_with_nights(model, theta)
        ones = np.ones(model.flux.size)
        precision = ones @ np.linalg.solve(cov, ones) + 1 / s0**2
        centre = mu0 + ones @ np.linalg.solve(cov, model.flux - mu0) / precision
        got_centre, got_sd = model.mean_posterior(theta)
        assert got_centre == pytest.approx(centre, rel=1e-10, abs=1e-12)
        assert got_sd == pytest.approx(precision**-0.5, rel=1e-8)
        p = model.unpack(theta)
        offsets = p["night_offset"] ** 2 * same_night @ np.linalg.solve(cov, model.flux - centre)
        got = model.night_offsets_posterior(theta)
        np.testing.assert_allclose(got, offsets, rtol=1e-6, atol=1e-9 * np.abs(offsets).max())
        # one value per night
        for k in np.unique(model.night)[:5]:
            assert np.ptp(got[model.night == k]) == 0.0


def test_prediction_with_night_offsets_is_the_dense_predictive_mean(rng):
    # Reference: Rasmussen & Williams 2006 eq. 2.23, m + k*^T C^-1 (y - m) with the dense
    # C (night term included) and k* the kernel without it (the offsets are not signal).
    from rotinfer.predict import predict

    model = _night_model(rng)
    theta = model.sample_prior(rng, 1)[0]
    cov, _, _ = _dense_with_nights(model, theta)
    centre, _ = model.mean_posterior(theta)
    new = np.linspace(model.time[0], model.time[-1], 37)
    kernel = model.kernel(theta)
    k_star = kernel.get_value(new[:, None] - model.time[None, :])
    expected = centre + k_star @ np.linalg.solve(cov, model.flux - centre)
    got = predict(model, theta, new)
    np.testing.assert_allclose(got.mean, expected, rtol=0, atol=1e-9)


def test_simulation_draws_from_the_full_covariance(rng):
    # Reference: SciPy's dense Cholesky factor. celerite's L sqrt(D) is the unique
    # lower-triangular factor with a positive diagonal, so the same normal draws z give
    # the same realisation: mean + cholesky(C) z (the mean drawn first from its prior).
    model = _night_model(rng)
    theta = model.sample_prior(rng, 1)[0]
    cov, _, _ = _dense_with_nights(model, theta)
    seed = 314
    got = model.simulate(theta, np.random.default_rng(seed))
    draws = np.random.default_rng(seed)
    mean = draws.normal(*model.config.mean)
    expected = mean + linalg.cholesky(cov, lower=True) @ draws.standard_normal(model.time.size)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-10)


def test_night_term_survives_pickling_and_the_aperiodic_model(rng):
    model = _night_model(rng)
    theta = model.sample_prior(rng, 1)[0]
    clone = pickle.loads(pickle.dumps(model))
    assert clone.log_likelihood(theta) == model.log_likelihood(theta)
    null = model.aperiodic()
    assert "log_night_offset" in null.names and null.n_nights == model.n_nights
    assert "night_offset_ppt" in model.physical(theta[None, :])


def test_from_prepared_turns_the_term_on_for_nightly_data_only(rng):
    from rotinfer.prepare import prepare
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    auto = ModelConfig(night_offsets="auto")
    for population, nightly in (("hard", True), ("easy", False)):
        params, pattern, name = draw_population(None, 1, seed=3, population=population)[0]
        star = simulate_star(params, pattern, seed=star_seed(3, 0), name=name)
        prepared = prepare(star.lc)
        model = RotationModel.from_prepared(prepared, config=auto)
        assert (model.night is not None) is nightly
        assert (RotationModel.from_prepared(prepared).night is not None) is nightly  # "auto"
        off = RotationModel.from_prepared(prepared, config=ModelConfig(night_offsets="off"))
        assert off.night is None
        forced = RotationModel.from_prepared(prepared, config=ModelConfig(night_offsets="on"))
        assert forced.night is not None


def test_bad_night_options_name_the_allowed_values():
    with pytest.raises(ConfigError, match="night_offsets: allowed 'off', 'auto', 'on'"):
        ModelConfig(night_offsets="yes")
    with pytest.raises(ConfigError, match=r"night_gap_hours: must be in \(0, 24\)"):
        ModelConfig(night_gap_hours=30.0)
    with pytest.raises(ConfigError, match="night_offset_ppt"):
        ModelConfig(night_offset_ppt=(1.0, 0.1))
    t = np.arange(20.0)
    labels = RotationModel(t, np.ones(20), np.full(20, 1e-3), night=np.repeat([3, 7, 8, 20], 5))
    assert labels.n_nights == 4 and labels.night[-1] == 3
    with pytest.raises(InputError, match="non-decreasing"):
        RotationModel(t, np.ones(20), np.full(20, 1e-3), night=np.arange(20)[::-1])


def test_night_offset_scatter_is_recovered_from_data_drawn_with_it(rng):
    # Inject and recover: data drawn from the model itself (a 0.5-ppt rotation signal at
    # 3.3 d, nightly offsets of 2 ppt rms, 4-h nights at 1-h cadence, 200 nights of which
    # ~140 observed). The maximum a posteriori scatter (all parameters free, SciPy's
    # L-BFGS-B from the truth) is within 20 % of the injected value: its relative sd is
    # about 1 / sqrt(2 x 140) = 6 % (measured 5.5 % over 12 seeds, mean -3 %). The model
    # has no background oscillator here: one with a damping time near the length of a
    # night can take up part of the offsets (measured over the same seeds: sd 17 %).
    from scipy import optimize

    t = _nightly_times(rng, nights=200, hours=4.0, cadence_min=60.0)
    night = night_index(t, 6.0)
    template = RotationModel(t, np.ones(t.size), np.full(t.size, 5e-4),
                             config=ModelConfig(background=False),
                             period_range=(0.5, 20.0), night=night)
    truth = template.pack(period=3.3, sigma=5e-4, coherence_rotations=10.0, f=0.3, r=0.5,
                          night_offset=2e-3, jitter=2e-4)
    flux = template.simulate(truth, rng)
    model = RotationModel(t, flux, template.flux_err, config=template.config,
                          period_range=template.period_range, night=night)
    res = optimize.minimize(lambda x: -model(x), truth, method="L-BFGS-B")
    assert model(res.x) >= model(truth)
    assert model.unpack(res.x)["night_offset"] == pytest.approx(2e-3, rel=0.2)


def test_checkpoint_fingerprint_holds_the_night_term_as_resolved(rng):
    # "auto" fits exactly as "off" on data that are not nightly and as "on" on data that
    # are, so the checkpoint's fingerprint says which (a space light curve's chains made
    # when "off" was the default still resume).
    from rotinfer.prepare import prepare
    from rotinfer.sample import SamplerConfig
    from rotinfer.sample import posterior as post
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    for population, same_as in (("hard", "on"), ("easy", "off")):
        params, pattern, name = draw_population(None, 1, seed=3, population=population)[0]
        star = simulate_star(params, pattern, seed=star_seed(3, 0), name=name)
        prepared = prepare(star.lc)
        prints = {mode: post._fingerprint(
            RotationModel.from_prepared(prepared, config=ModelConfig(night_offsets=mode)),
            [4.0], SamplerConfig(), 1) for mode in ("off", "auto", "on")}
        assert prints["auto"] == prints[same_as]
        assert prints["off"] != prints["on"]
