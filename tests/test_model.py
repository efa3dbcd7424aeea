"""Tests of the Gaussian-process rotation model (rotinfer.model)."""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from scipy import integrate, special, stats

from rotinfer.errors import ConfigError, InputError
from rotinfer.model import (
    ModelConfig,
    RotationModel,
    coherence_from_quality,
    quality_from_coherence,
)


def _sho_kernel(tau, s0, w0, q):
    """Dense SHO covariance for Q > 1/2, written from Foreman-Mackey et al. 2017 (AJ 154,
    220) eq. 20 — independent of celerite2's code:
    k(tau) = S0 w0 Q exp(-w0 tau / 2Q) [cos(eta w0 tau) + sin(eta w0 tau) / (2 eta Q)],
    eta = sqrt(1 - 1/(4 Q^2))."""
    tau = np.abs(tau)
    eta = np.sqrt(1.0 - 1.0 / (4.0 * q * q))
    return (
        s0 * w0 * q * np.exp(-w0 * tau / (2.0 * q))
        * (np.cos(eta * w0 * tau) + np.sin(eta * w0 * tau) / (2.0 * eta * q))
    )


def _dense_covariance(model, theta):
    """Covariance matrix from the published parameter mapping, not from celerite2.

    Rotation term mapping: REFERENCES.md "celerite2 rotation term" (read from celerite2's
    source): amp = sigma^2/(1+f); Q1 = 1/2 + Q0 + dQ, w1 = 4 pi Q1/(P sqrt(4 Q1^2 - 1)),
    S1 = amp/(w1 Q1); Q2 = 1/2 + Q0, w2 = 8 pi Q2/(P sqrt(4 Q2^2 - 1)), S2 = f amp/(w2 Q2).
    Background: SHO with Q = 1/sqrt(2), S0 = sigma^2/(w0 Q), damping time tau = 2Q/w0.
    """
    p = model.unpack(theta)
    lag = model.time[:, None] - model.time[None, :]
    cov = np.zeros_like(lag)
    if model.periodic:
        amp = p["sigma"] ** 2 / (1 + p["f"])
        q1 = 0.5 + p["Q0"] + p["dQ"]
        w1 = 4 * np.pi * q1 / (p["period"] * np.sqrt(4 * q1**2 - 1))
        q2 = 0.5 + p["Q0"]
        w2 = 8 * np.pi * q2 / (p["period"] * np.sqrt(4 * q2**2 - 1))
        cov += _sho_kernel(lag, amp / (w1 * q1), w1, q1)
        cov += _sho_kernel(lag, p["f"] * amp / (w2 * q2), w2, q2)
    for key in ("background", "background2", "background3"):
        if key + "_sigma" in p:
            q = 1 / np.sqrt(2)
            w0 = 2 * q / p[key + "_tau"]
            cov += _sho_kernel(lag, p[key + "_sigma"] ** 2 / (w0 * q), w0, q)
    cov[np.diag_indices_from(cov)] += model.flux_err**2 + p["jitter"] ** 2
    return cov, p.get("mean")


def _toy_model(rng, n=150, periodic=True, background=True, max_comparison_backgrounds=2,
               periodic_backgrounds=1, marginalise_mean=True, secondary_coherence="quality"):
    t = np.sort(rng.uniform(0.0, 20.0, n))
    y = 1.0 + 2e-3 * np.sin(2 * np.pi * t / 3.1) + 3e-4 * rng.standard_normal(n)
    err = rng.uniform(2e-4, 4e-4, n)
    cfg = ModelConfig(background=background, max_comparison_backgrounds=max_comparison_backgrounds,
                      periodic_backgrounds=periodic_backgrounds, marginalise_mean=marginalise_mean,
                      secondary_coherence=secondary_coherence)
    model = RotationModel(t, y, err, config=cfg, period_range=(0.3, 10.0))
    return model if periodic else model.aperiodic()


@pytest.mark.parametrize("marginalise", [True, False])
@pytest.mark.parametrize("periodic,background,n_bg",
                         [(True, True, 2), (True, False, 2), (False, True, 2), (False, True, 3),
                          (True, True, "periodic 2"), (True, True, "time")])
def test_log_likelihood_matches_dense_multivariate_normal(rng, periodic, background, n_bg,
                                                          marginalise):
    # Reference: scipy.stats.multivariate_normal.logpdf on the dense covariance built from
    # the SHO formulas of Foreman-Mackey et al. 2017 eq. 20 (see _dense_covariance). With
    # the mean integrated out under its N(mu0, s0^2) prior the data are
    # N(mu0, K + s0^2 1 1^T) (Rasmussen & Williams 2006, section 2.7).
    if n_bg == "periodic 2":  # rotation term + two ordered background oscillators
        model = _toy_model(rng, periodic_backgrounds=2, marginalise_mean=marginalise)
        assert model.background_suffixes == ("", "2")
    elif n_bg == "time":  # the P/2 mode bounded in damping time (dQ may be negative)
        model = _toy_model(rng, marginalise_mean=marginalise, secondary_coherence="time")
    else:
        model = _toy_model(rng, periodic=periodic, background=background,
                           max_comparison_backgrounds=n_bg, marginalise_mean=marginalise)
    if not periodic:
        assert len(model.background_suffixes) == n_bg
    assert ("mean" in model.names) is not marginalise
    draws = model.sample_prior(rng, 8)
    checked = 0
    for theta in draws:
        cov, mean = _dense_covariance(model, theta)
        if marginalise:
            mean, sd = model.config.mean
            cov = cov + sd**2
        ref = stats.multivariate_normal.logpdf(model.flux, mean=np.full(model.flux.size, mean),
                                               cov=cov)
        got = model.log_likelihood(theta)
        assert got == pytest.approx(ref, rel=1e-8), (theta, got, ref)
        checked += 1
    assert checked == 8


def test_log_likelihood_matches_celerite2_gaussian_process(rng):
    # Reference library: celerite2.GaussianProcess(kernel).compute + log_likelihood, with the
    # kernel built from celerite2's own RotationTerm and SHOTerm classes (model.kernel).
    import celerite2

    model = _toy_model(rng, n=400, marginalise_mean=False)
    for theta in model.sample_prior(rng, 10):
        p = model.unpack(theta)
        gp = celerite2.GaussianProcess(model.kernel(theta), mean=p["mean"])
        gp.compute(model.time, diag=model.flux_err**2 + p["jitter"] ** 2)
        assert model.log_likelihood(theta) == pytest.approx(gp.log_likelihood(model.flux),
                                                            rel=1e-10)


def test_marginal_likelihood_integrates_the_sampled_mean(rng):
    # Reference: SciPy quadrature (Simpson's rule on a fine grid). The likelihood with the
    # mean integrated out equals the integral over the mean of (likelihood with that mean)
    # x (its normal prior), and the conditional posterior of the mean (mean_posterior) has
    # that integrand's first two moments (Rasmussen & Williams 2006, eq. 2.42).
    sampled = _toy_model(rng, n=300, marginalise_mean=False)
    marginal = _toy_model(rng, n=300)
    marginal = RotationModel(sampled.time, sampled.flux, sampled.flux_err,
                             config=marginal.config, period_range=sampled.period_range)
    mu0, s0 = marginal.config.mean
    for theta in marginal.sample_prior(rng, 4):
        ref_ll = marginal.log_likelihood(theta)
        centre, spread = marginal.mean_posterior(theta)
        assert 0 < spread < s0

        def joint(m, theta=theta):
            full = np.append(theta, m)  # "mean" is the last parameter when sampled
            return sampled.log_likelihood(full) + stats.norm.logpdf(m, mu0, s0)

        peak = joint(centre)
        grid = np.linspace(centre - 12 * spread, centre + 12 * spread, 2001)
        density = np.exp(np.array([joint(m) for m in grid]) - peak)

        def moment(k, density=density, grid=grid, centre=centre):
            return integrate.simpson((grid - centre) ** k * density, x=grid)

        mass, first, second = moment(0), moment(1), moment(2)
        assert ref_ll == pytest.approx(peak + math.log(mass), abs=1e-6)
        assert abs(first / mass) < 1e-5 * spread
        assert math.sqrt(second / mass) == pytest.approx(spread, rel=1e-5)


def test_profile_likelihood_maximises_the_sampled_mean(rng):
    # Reference: scipy.optimize.minimize_scalar over the mean of the sampled-mean
    # likelihood. Information criteria use this maximum, and count the mean.
    from scipy import optimize

    sampled = _toy_model(rng, n=300, marginalise_mean=False)
    marginal = RotationModel(sampled.time, sampled.flux, sampled.flux_err,
                             config=ModelConfig(), period_range=sampled.period_range)
    assert marginal.n_parameters == marginal.ndim + 1 == sampled.n_parameters == sampled.ndim
    for theta in marginal.sample_prior(rng, 4):
        centre, spread = marginal.mean_posterior(theta)
        res = optimize.minimize_scalar(
            lambda m, theta=theta: -sampled.log_likelihood(np.append(theta, m)),
            bracket=(centre - spread, centre + spread), tol=1e-12)
        assert marginal.profile_log_likelihood(theta) == pytest.approx(-res.fun, abs=1e-6)
        full = np.append(theta, res.x)
        assert sampled.profile_log_likelihood(full) == sampled.log_likelihood(full)


def test_log_prob_is_prior_plus_likelihood(rng):
    model = _toy_model(rng)
    theta = model.sample_prior(rng, 1)[0]
    assert model(theta) == pytest.approx(model.log_prior(theta) + model.log_likelihood(theta))


def test_non_finite_likelihood_is_minus_inf(rng):
    # celerite2 does not validate parameters (REFERENCES.md, "Pitfalls"): an overflowing
    # amplitude makes its factorisation produce NaN without raising. Show that first,
    # then that the model turns it into -inf.
    import celerite2
    from celerite2 import terms

    model = _toy_model(rng)
    theta = model.pack(period=3.0, sigma=1e-3, coherence_rotations=5.0, f=0.5, r=0.5,
                       background_sigma=1e-4, background_tau=1.0, jitter=1e-4, mean=1.0)
    bad = theta.copy()
    bad[model.names.index("log_amplitude")] = 400.0  # sigma = e^400 overflows to inf
    assert np.isfinite(model.log_prior(bad))  # the prior alone does not reject it
    gp = celerite2.GaussianProcess(
        terms.RotationTerm(sigma=math.inf, period=3.0, Q0=1.0, dQ=1.0, f=0.5), mean=1.0
    )
    gp.compute(model.time, diag=model.flux_err**2, quiet=True)
    assert not np.isfinite(gp.log_likelihood(model.flux))
    assert model.log_likelihood(bad) == -math.inf
    assert model(bad) == -math.inf

    tiny = theta.copy()
    tiny[model.names.index("log_coherence")] = -800.0  # Q1 -> 1/2 exactly: division by zero
    assert model(tiny) == -math.inf
    nan = theta.copy()
    nan[model.names.index("log_jitter")] = np.nan
    assert model(nan) == -math.inf
    outside = theta.copy()
    outside[0] = math.log(20.0)  # above the 10 d upper period limit
    assert model(outside) == -math.inf
    for value in (model(bad), model(tiny), model(nan), model(outside)):
        assert isinstance(value, float) and value == -math.inf


def test_failed_factorisation_is_minus_inf():
    # Repeated times with no white noise make the covariance singular: celerite2 cannot
    # factorise it (shown directly first), and the model must return -inf, not raise.
    import celerite2
    from celerite2.driver import LinAlgError

    t = np.repeat(np.linspace(0.0, 20.0, 50), 2)
    model = RotationModel(t, np.ones(t.size), np.zeros(t.size), period_range=(0.5, 10.0))
    theta = model.pack(period=3.0, sigma=1.0, coherence_rotations=5.0, f=0.5, r=0.5,
                       background_sigma=1e-3, background_tau=1.0, jitter=1.0, mean=1.0)
    theta[model.names.index("log_jitter")] = -800.0  # jitter underflows to exactly 0
    gp = celerite2.GaussianProcess(model.kernel(theta), mean=1.0)
    with pytest.raises(LinAlgError):
        gp.compute(t, diag=np.zeros(t.size))
    assert model.log_likelihood(theta) == -math.inf
    assert model(theta) == -math.inf


def test_restricted_basin(rng):
    model = _toy_model(rng)
    theta = model.sample_prior(rng, 1)[0]
    theta[0] = math.log(3.0)
    inside = model.restricted((2.0, 4.0))
    outside = model.restricted((4.0, 8.0))
    assert inside(theta) == model(theta)
    assert outside(theta) == -math.inf


def test_priors_are_normalised(rng):
    # Analytic fact: a proper density integrates to one; the evidence comparison between
    # the periodic and aperiodic models relies on it.
    model = _toy_model(rng)
    for name, prior in model._priors.items():
        if prior.kind == "uniform":
            lo, hi = prior.a, prior.b
        elif prior.kind == "normal":
            lo, hi = prior.a - 12 * prior.b, prior.a + 12 * prior.b
        else:
            lo, hi = -60.0, 60.0
        total, _ = integrate.quad(lambda x, p=prior: math.exp(p.logpdf(x)), lo, hi, limit=200)
        assert total == pytest.approx(1.0, abs=1e-6), name


def test_ordered_background_prior_is_normalised_and_sampled(rng):
    # Two background oscillators in the rotation model: the shared prior truncated to
    # tau_1 < tau_2 and doubled. Its two-dimensional marginal must integrate to one
    # (SciPy dblquad), vanish in the wrong order, and prior draws must follow it: the
    # smaller of two independent normal draws has mean mu - sigma / sqrt(pi) (the
    # expected minimum of two normals; David & Nagaraja, Order Statistics, 2003).
    model = _toy_model(rng, periodic_backgrounds=2)
    i1 = model.names.index("log_background_timescale")
    i2 = model.names.index("log_background2_timescale")
    base = model.sample_prior(rng, 1)[0]
    prior = model._priors["log_background_timescale"]
    pairs = enumerate(zip(base, model._priors.values(), strict=True))
    others = sum(p.logpdf(float(v)) for k, (v, p) in pairs if k not in (i1, i2))

    def density(b, a):  # dblquad's inner variable first
        theta = base.copy()
        theta[[i1, i2]] = a, b
        return math.exp(model.log_prior(theta) - others)

    lo, hi = prior.a - 10 * prior.b, prior.a + 10 * prior.b
    total, _ = integrate.dblquad(density, lo, hi, lambda a: a, lambda a: hi)
    assert total == pytest.approx(1.0, abs=1e-5)
    wrong = base.copy()
    wrong[[i1, i2]] = prior.a + 1.0, prior.a - 1.0
    assert model.log_prior(wrong) == -math.inf
    draws = model.sample_prior(rng, 20000)
    assert np.all(draws[:, i1] < draws[:, i2])
    assert np.all(np.isfinite([model.log_prior(d) for d in draws[:200]]))
    expected = prior.a - prior.b / math.sqrt(math.pi)
    assert draws[:, i1].mean() == pytest.approx(expected, abs=5 * prior.b / math.sqrt(20000))


def test_logit_beta_prior_draws_follow_scipy_beta(rng):
    # Reference: scipy.stats.beta (KS test) for u = logistic(x) under a Beta(2, 5) prior.
    cfg = ModelConfig(secondary_fraction_beta=(2.0, 5.0))
    t = np.linspace(0, 10, 20)
    model = RotationModel(t, np.ones(20), np.full(20, 1e-3), config=cfg, period_range=(0.5, 5))
    draws = model.sample_prior(rng, 4000)[:, model.names.index("logit_secondary_fraction")]
    assert stats.kstest(special.expit(draws), stats.beta(2.0, 5.0).cdf).pvalue > 1e-3
    # and the density in x is the Beta density times du/dx = u (1 - u)
    x = 0.3
    u = special.expit(x)
    ref = stats.beta(2.0, 5.0).logpdf(u) + math.log(u * (1 - u))
    assert model._priors["logit_secondary_fraction"].logpdf(x) == pytest.approx(ref, rel=1e-12)


def test_coherence_time_is_sho_damping_time():
    # SHO damping time tau = 2 Q / w0 (celerite2 SHOTerm documentation), with
    # w1 = 4 pi Q1 / (P sqrt(4 Q1^2 - 1)) (REFERENCES.md, celerite2 rotation term).
    period = 7.3
    for rotations in (0.3, 1.0, 12.0, 400.0):
        q1 = quality_from_coherence(rotations)
        w1 = 4 * np.pi * q1 / (period * np.sqrt(4 * q1**2 - 1))
        assert 2 * q1 / w1 == pytest.approx(rotations * period, rel=1e-12)
        assert coherence_from_quality(q1) == pytest.approx(rotations, rel=1e-12)
    # large Q1: tau ~ Q1 P / pi (REFERENCES.md)
    assert quality_from_coherence(100.0) * period / np.pi == pytest.approx(100.0 * period, 1e-4)


def test_pickle_round_trip_and_no_gp_stored(rng):
    model = _toy_model(rng)
    theta = model.sample_prior(rng, 1)[0]
    clone = pickle.loads(pickle.dumps(model))
    assert clone(theta) == model(theta)
    assert not any("GaussianProcess" in type(v).__name__ for v in vars(model).values())


@pytest.mark.parametrize("bound", ["quality", "time"])
def test_secondary_mode_damping_time(rng, bound):
    # Reference library: celerite2's own RotationTerm, built from the unpacked parameters;
    # each SHO's complex coefficient c is the inverse of its damping time. "time": the P/2
    # mode's damping time is r times the P mode's, which is tau_coh = coherence_rotations
    # x P; "quality" (Q2 <= Q1): the P/2 mode decays at least twice as fast.
    from celerite2 import terms

    model = _toy_model(rng, secondary_coherence=bound)
    i = model.names.index("logit_secondary_quality")
    for theta in model.sample_prior(rng, 20):
        p = model.unpack(theta)
        r = special.expit(theta[i])
        kernel = terms.RotationTerm(sigma=p["sigma"], period=p["period"], Q0=p["Q0"],
                                    dQ=p["dQ"], f=p["f"])
        c = kernel.get_coefficients()[4]  # complex part: (ac, bc, cc, dc) -> cc
        tau1, tau2 = 1.0 / c[0], 1.0 / c[1]
        assert tau1 == pytest.approx(p["coherence_rotations"] * p["period"], rel=1e-9)
        assert 2 * math.pi / kernel.get_coefficients()[5][1] == pytest.approx(p["period"] / 2)
        if bound == "time":
            assert tau2 == pytest.approx(r * tau1, rel=1e-9)
        else:
            assert tau2 <= 0.5 * tau1 * (1 + 1e-12)


def test_invalid_inputs_and_config():
    t = np.linspace(0, 10, 20)
    with pytest.raises(InputError, match="sorted"):
        RotationModel(t[::-1], np.ones(20), np.full(20, 1e-3))
    with pytest.raises(InputError, match="non-finite"):
        RotationModel(t, np.r_[np.nan, np.ones(19)], np.full(20, 1e-3))
    with pytest.raises(ConfigError, match="amplitude_ppt"):
        ModelConfig(amplitude_ppt=(5.0, 1.0))
    with pytest.raises(ConfigError, match="mean"):
        ModelConfig(mean=(1.0, -0.1))
    for bad in (1, 5, 2.5, True):
        with pytest.raises(ConfigError, match="max_comparison_backgrounds: allowed 2, 3 or 4"):
            ModelConfig(max_comparison_backgrounds=bad)
    for bad in (0, 3, 1.5, True, "two"):
        with pytest.raises(ConfigError, match='periodic_backgrounds: allowed 1, 2 or "auto"'):
            ModelConfig(periodic_backgrounds=bad)
    with pytest.raises(ConfigError, match="secondary_coherence: allowed 'quality', 'time'"):
        ModelConfig(secondary_coherence="lifetime")


def test_simulate_has_model_covariance(rng):
    # The simulated flux has the model's covariance: the empirical covariance of many
    # draws matches the dense covariance built from the published formulas (Monte Carlo
    # error ~ sqrt(2/n) of the variance).
    # With the mean integrated out it is drawn from its prior, so the draws have the
    # covariance K + s0^2 (Rasmussen & Williams 2006, section 2.7) about mu0.
    t = np.linspace(0, 5, 12)
    for marginalise in (False, True):
        model = RotationModel(t, np.ones(12), np.full(12, 1e-3), period_range=(0.5, 5),
                              config=ModelConfig(marginalise_mean=marginalise,
                                                 mean=(1.0, 2e-3)))
        theta = model.pack(period=2.0, sigma=2e-3, coherence_rotations=3.0, f=0.4, r=0.5,
                           background_sigma=1e-3, background_tau=0.5, jitter=5e-4, mean=1.0)
        sims = np.array([model.simulate(theta, rng) for _ in range(4000)])
        cov, mean = _dense_covariance(model, theta)
        if marginalise:
            mean, cov = model.config.mean[0], cov + model.config.mean[1] ** 2
        assert np.allclose(sims.mean(axis=0), mean, atol=5 * np.sqrt(cov.max() / 4000))
        assert np.allclose(np.cov(sims.T), cov, atol=6 * np.sqrt(2 / 4000) * cov.max())
