"""Tests of mode finding, ensemble sampling, convergence diagnostics and checkpointing."""

from __future__ import annotations

import contextlib
import math
import warnings

import numpy as np
import pytest
from scipy import stats

from rotinfer.errors import ConfigError, ConvergenceWarning
from rotinfer.sample import (
    Checkpoint,
    SamplerConfig,
    importance_log_evidence,
    laplace,
    rank_normalised_split_rhat,
    relation,
    run_ensembles,
)
from rotinfer.sample.mcse import run_precision

MU = np.array([1.0, -2.0])
COV = np.array([[1.0, 1.8], [1.8, 4.0]])  # correlation 0.9
ICOV = np.linalg.inv(COV)


def gaussian_2d(x):
    d = x - MU
    return -0.5 * d @ ICOV @ d


@contextlib.contextmanager
def _may_stop_early():
    # Determinism and resume tests compare chains; whether the run converged before its
    # cap does not matter to them.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        yield


def _small(**kw):
    base = dict(n_walkers=12, n_ensembles=2, check_every=100, max_steps=4000)
    base.update(kw)
    return SamplerConfig(**base)


def test_correlated_gaussian_mean_and_variance():
    # Analytic target: N(MU, COV) with correlation 0.9. The sample mean must lie within
    # 4 Monte Carlo standard errors sqrt(var / ESS) of MU, and the variances within
    # 5 standard errors var * sqrt(2 / ESS) (large-sample variance of a sample variance,
    # common practice).
    run = run_ensembles(gaussian_2d, MU + 0.5, COV, config=_small(), seed=11)
    assert run.converged, run.diagnostics.reasons
    draws = run.samples()
    ess = run.diagnostics.ess
    mean = draws.mean(axis=0)
    var = draws.var(axis=0)
    true_var = np.diag(COV)
    assert np.all(np.abs(mean - MU) < 4 * np.sqrt(true_var / ess)), (mean, ess)
    assert np.all(np.abs(var - true_var) < 5 * true_var * np.sqrt(2 / ess)), (var, ess)
    corr = np.corrcoef(draws.T)[0, 1]
    assert corr == pytest.approx(0.9, abs=0.03)
    d = run.diagnostics
    assert np.all(d.n_tau > 50) and np.all(d.rhat < 1.01) and d.stuck == 0


def test_cap_reached_is_loud_and_marked_not_converged():
    with pytest.warns(ConvergenceWarning, match="NOT CONVERGED after 100 steps"):
        run = run_ensembles(gaussian_2d, MU, COV, config=_small(max_steps=100), seed=1)
    assert run.converged is False
    assert run.diagnostics.reasons
    assert run.chains[0].shape[0] == 100


def test_period_precision_clause_samples_until_the_numbers_are_precise():
    # The optional clause (off by default) keeps sampling until the period's five reported
    # numbers have Monte Carlo errors below the target fraction of their scale.
    names = ("log_period", "x")
    plain = run_ensembles(gaussian_2d, MU, COV, config=_small(), seed=3, names=names)
    assert plain.converged and math.isnan(plain.diagnostics.period_precision)
    reached = run_precision(plain.chains, plain.diagnostics.burn_in, 0)
    target = 0.6 * reached  # stricter than what the rule alone gave
    strict = run_ensembles(gaussian_2d, MU, COV, config=_small(period_precision=target),
                           seed=3, names=names)
    d = strict.diagnostics
    assert strict.converged and d.n_steps > plain.diagnostics.n_steps
    assert d.period_precision < target
    assert d.period_precision == run_precision(strict.chains, d.burn_in, 0)
    assert strict.chains[0][: plain.diagnostics.n_steps].tolist() == plain.chains[0].tolist()
    # unreachable within the cap: not converged, and the reason says why
    with pytest.warns(ConvergenceWarning, match="period numbers not yet precise"):
        capped = run_ensembles(gaussian_2d, MU, COV, seed=3, names=names,
                               config=_small(period_precision=0.001, max_steps=600))
    assert not capped.converged
    # a target without a period parameter does nothing
    other = run_ensembles(gaussian_2d, MU, COV, config=_small(period_precision=0.001), seed=3)
    assert other.converged


def test_same_seed_same_chains_other_seed_differs():
    cfg = _small(max_steps=200)
    with _may_stop_early():
        a = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=5)
    with _may_stop_early():
        b = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=5)
    with _may_stop_early():
        c = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=6)
    for x, y in zip(a.chains, b.chains, strict=True):
        assert np.array_equal(x, y)
    assert not np.array_equal(a.chains[0], c.chains[0])
    # the two ensembles of one run are independent draws, not copies
    assert not np.array_equal(a.chains[0], a.chains[1])


def test_numpy_global_random_state_is_not_used():
    # emcee falls back on numpy's global RandomState unless given a state; changing the
    # global seed must not change our chains.
    cfg = _small(max_steps=100)
    saved = np.random.get_state()  # noqa: NPY002 - the global state is what is tested
    try:
        np.random.seed(1)  # noqa: NPY002
        with _may_stop_early():
            a = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=5)
        np.random.seed(2)  # noqa: NPY002
        with _may_stop_early():
            b = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=5)
    finally:
        np.random.set_state(saved)  # noqa: NPY002
    assert np.array_equal(a.chains[1], b.chains[1])


def test_resume_from_checkpoint_continues_identically(tmp_path):
    # an unreachable chain length, so that neither run stops early by converging
    cfg_short = _small(max_steps=300, tau_multiple=1e4)
    cfg_long = _small(max_steps=600, tau_multiple=1e4)
    with _may_stop_early():
        ref = run_ensembles(gaussian_2d, MU, COV, config=cfg_long, seed=3)
    path = tmp_path / "chains.h5"
    fp = "test-fingerprint"
    with _may_stop_early():
        run_ensembles(gaussian_2d, MU, COV, config=cfg_short, seed=3,
                      checkpoint=Checkpoint(path, fingerprint=fp), group="m0")
    ck = Checkpoint(path, fingerprint=fp)
    assert ck.resumed
    assert ck.load_ensemble("m0/ensemble0").chain.shape[0] == 300
    with _may_stop_early():
        resumed = run_ensembles(gaussian_2d, MU, COV, config=cfg_long, seed=3, checkpoint=ck,
                                group="m0")
    for x, y in zip(ref.chains, resumed.chains, strict=True):
        assert np.array_equal(x, y)


def _interrupt_after(calls_allowed, cfg, seed, path, fingerprint):
    """The uninterrupted chains, and the checkpoint of the same run stopped by a
    KeyboardInterrupt from inside the target after ``calls_allowed`` evaluations."""
    with _may_stop_early():
        ref = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=seed)
    calls = {"n": 0}

    def fragile(x):
        calls["n"] += 1
        if calls["n"] > calls_allowed:
            raise KeyboardInterrupt
        return gaussian_2d(x)

    with pytest.raises(KeyboardInterrupt):
        run_ensembles(fragile, MU, COV, config=cfg, seed=seed,
                      checkpoint=Checkpoint(path, fingerprint=fingerprint), group="g")
    return ref, Checkpoint(path, fingerprint=fingerprint)


def _resumes_to(ref, ck, cfg, seed):
    """Resume from ``ck`` and require the chains of the uninterrupted run, exactly."""
    with _may_stop_early():
        resumed = run_ensembles(gaussian_2d, MU, COV, config=cfg, seed=seed, checkpoint=ck,
                                group="g")
    for x, y in zip(ref.chains, resumed.chains, strict=True):
        assert np.array_equal(x, y)


def test_interrupted_run_resumes_identically(tmp_path):
    # A run killed part-way (here: KeyboardInterrupt from inside the target after some
    # calls) resumes from the last complete block and ends with the same chains as an
    # uninterrupted run (an unreachable chain length keeps both from stopping early).
    cfg = _small(max_steps=500, tau_multiple=1e4)
    warmup_calls = 2 * 12 * cfg.warmup_steps
    # stopped in the 2nd ensemble's 2nd block
    ref, ck = _interrupt_after(warmup_calls + 12 * 100 * 3 + 500, cfg, 8,
                               tmp_path / "chains.h5", "f")
    assert ck.resumed
    assert ck.stored_steps("g/ensemble0") == 200  # one block ahead of ensemble 1
    assert ck.stored_steps("g/ensemble1") == 100
    _resumes_to(ref, ck, cfg, 8)
    assert ck.stored_steps("g/ensemble0") == ck.stored_steps("g/ensemble1") == 500


def test_run_interrupted_during_warmup_resumes_identically(tmp_path):
    # The warm-up (discarded draws that shape each ensemble's independence proposal) is
    # checkpointed too: a run stopped inside it resumes to the same chains, and the
    # returned chains hold only the draws after the warm-up.
    cfg = _small(max_steps=200, tau_multiple=1e4, warmup_steps=300)
    # stopped in ensemble 0's 2nd warm-up block
    ref, ck = _interrupt_after(2 * 12 + 12 * 100 * 2 + 600, cfg, 4, tmp_path / "chains.h5",
                               "w")
    assert ref.chains[0].shape[0] == 200
    assert ck.stored_steps("g/warmup0") == ck.stored_steps("g/warmup1") == 100
    assert ck.stored_steps("g/ensemble0") == 0
    _resumes_to(ref, ck, cfg, 4)
    assert ck.stored_steps("g/warmup0") == 300


def test_run_interrupted_in_the_first_block_of_an_ensemble_resumes_from_the_start(tmp_path):
    # Stopped while the second ensemble runs its first warm-up block, the first ensemble
    # has one block stored and the second none: the resume falls back to step 0 for both
    # (a stored block ahead of the others is dropped) and ends with the same chains.
    cfg = _small(max_steps=200, tau_multiple=1e4, warmup_steps=300)
    # stopped in ensemble 1's 1st warm-up block
    ref, ck = _interrupt_after(2 * 12 + 12 * 100 + 600, cfg, 6, tmp_path / "chains.h5", "z")
    assert ck.stored_steps("g/warmup0") == 100 and ck.stored_steps("g/warmup1") == 0
    _resumes_to(ref, ck, cfg, 6)


def test_adapted_proposal_follows_the_warmup_draws_not_the_laplace_guess():
    # Started with a Laplace covariance 100 times too small in one direction, the
    # sampler must still recover the analytic variance (within 5 Monte Carlo standard
    # errors, common practice): the refitted proposal and the DE moves repair the guess.
    bad = np.array([[0.01, 0.0], [0.0, 4.0]])
    run = run_ensembles(gaussian_2d, MU, bad, config=_small(warmup_steps=200), seed=12)
    assert run.converged, run.diagnostics.reasons
    var = run.samples().var(axis=0)
    ess = run.diagnostics.ess
    assert np.all(np.abs(var - np.diag(COV)) < 5 * np.diag(COV) * np.sqrt(2 / ess)), var


def test_checkpoint_with_other_fingerprint_is_replaced(tmp_path):
    path = tmp_path / "chains.h5"
    ck = Checkpoint(path, fingerprint="a")
    ck.save_json("modes", {"x": 1})
    assert Checkpoint(path, fingerprint="a").load_json("modes") == {"x": 1}
    other = Checkpoint(path, fingerprint="b")
    assert not other.resumed
    assert other.load_json("modes") is None


def test_rank_normalised_split_rhat_matches_arviz(rng):
    # Reference: ArviZ's rank-normalised split R-hat (Vehtari et al. 2021), method="rank".
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # ArviZ announces a refactor on import
        import arviz

    cases = [
        rng.standard_normal((4, 500)),
        rng.standard_normal((4, 500)) + np.array([0, 0, 0, 0.5])[:, None],
        np.cumsum(rng.standard_normal((2, 400)), axis=1),
        rng.standard_t(2, size=(3, 300)) * np.array([1, 1, 3])[:, None],
    ]
    for chains in cases:
        ours = rank_normalised_split_rhat(chains)
        ref = float(arviz.rhat(chains, method="rank"))
        assert ours == pytest.approx(ref, rel=1e-10)


def test_autocorr_time_matches_emcee_and_handles_frozen_walkers(rng):
    # Reference: emcee.autocorr.integrated_time on the same (n_steps, n_walkers, ndim) chain;
    # AR(1) chains with coefficient 0.9 have tau = (1 + 0.9) / (1 - 0.9) = 19 (analytic).
    from emcee.autocorr import integrated_time

    from rotinfer.sample.convergence import autocorr_time

    n, w = 4000, 8
    x = np.zeros((n, w, 2))
    eps = rng.standard_normal((n, w, 2))
    for i in range(1, n):
        x[i] = 0.9 * x[i - 1] + eps[i]
    ours = autocorr_time(x)
    assert np.allclose(ours, integrated_time(x, tol=0), rtol=1e-12)
    assert np.all(np.abs(ours - 19.0) < 0.15 * 19.0)
    frozen = x.copy()
    frozen[:, 0, :] = 1.0  # one walker never moves: left out, not NaN
    assert np.all(np.isfinite(autocorr_time(frozen)))
    assert np.allclose(autocorr_time(frozen), integrated_time(x[:, 1:], tol=0), rtol=1e-12)
    assert np.all(np.isinf(autocorr_time(np.ones((100, 4, 2)))))


def test_laplace_is_exact_for_a_gaussian():
    # Analytic: for an unnormalised Gaussian exp(c) N(x; MU, COV) the evidence is exp(c)
    # and the Laplace approximation is exact.
    c = 3.7

    def target(x):
        return c + stats.multivariate_normal.logpdf(x, MU, COV)

    lap, _ = laplace(target, MU)
    assert lap.valid
    assert lap.log_evidence == pytest.approx(c, abs=1e-5)
    assert np.allclose(lap.covariance, COV, rtol=1e-4)


def test_laplace_reports_a_saddle_honestly():
    def saddle(x):
        return -0.5 * x[0] ** 2 + 0.5 * x[1] ** 2

    lap, _ = laplace(saddle, np.zeros(2))
    assert not lap.valid
    assert math.isnan(lap.log_evidence)
    assert "not positive definite" in lap.note
    assert np.all(np.linalg.eigvalsh(lap.covariance) > 0)  # still usable to place walkers


def test_importance_evidence_of_a_gaussian(rng):
    # Analytic: the integral of exp(c) N(x; MU, COV) is exp(c).
    c = -12.0
    draws = rng.multivariate_normal(MU, COV, size=3000)
    log_z, se, ess = importance_log_evidence(
        lambda x: c + stats.multivariate_normal.logpdf(x, MU, COV), draws, n=2000, rng=rng
    )
    assert abs(log_z - c) < 4 * se + 1e-3
    assert ess > 500


def test_relation_names():
    assert relation(6.1, 3.0, 0.05) == "2P"
    assert relation(1.52, 3.0, 0.05) == "P/2"
    assert relation(3.05, 3.0, 0.05) == "P"
    assert relation(4.4, 3.0, 0.05) == "other"


def test_sampler_config_validation():
    with pytest.raises(ConfigError, match="n_walkers"):
        SamplerConfig(n_walkers=0)
    with pytest.raises(ConfigError, match="move_weights"):
        SamplerConfig(move_weights=(1.0, 0.0))
    with pytest.raises(ConfigError, match="rhat_max"):
        SamplerConfig(rhat_max=0.99)
    with pytest.raises(ConfigError, match=r"period_precision: must be in \[0, 1\) \(0 = off\)"):
        SamplerConfig(period_precision=1.5)


def _sbc(n_replicates, n_points, steps, seed, n_draws, grid=3):
    from rotinfer.model import ModelConfig, RotationModel
    from rotinfer.sample.sbc import sbc_ranks

    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0.0, 20.0, n_points))
    template = RotationModel(t, np.ones(n_points), np.full(n_points, 1e-3),
                             config=ModelConfig(background=False), period_range=(0.5, 10.0))
    cfg = SamplerConfig(n_walkers=16, check_every=steps, max_steps=steps, starts_per_period=1,
                        grid_periods=grid, importance_draws=100, max_sampled_modes=2,
                        warmup_steps=min(300, steps))
    return sbc_ranks(template, n_replicates=n_replicates, n_draws=n_draws, config=cfg,
                     seed=seed)


def test_rank_chi2_against_scipy():
    # Reference: scipy.stats.chisquare on hand-binned counts.
    from rotinfer.sample.sbc import rank_chi2

    ranks = np.array([0, 1, 5, 6, 7, 10, 12, 19, 19, 3, 4, 15])
    p, counts = rank_chi2(ranks, 19, 4)
    assert counts.tolist() == [4, 3, 2, 3]  # ranks 0-4, 5-9, 10-14, 15-19
    assert p == pytest.approx(stats.chisquare([4, 3, 2, 3]).pvalue)
    with pytest.raises(ValueError):
        rank_chi2(ranks, 19, 3)


def test_simulation_based_calibration_small():
    # Talts et al. 2018: parameters drawn from the model's own prior, light curves from the
    # model, the whole procedure (mode finding from log-spaced starts, sampling, mode
    # weighting) run on each; ranks of the true ln P among 14 posterior draws must be
    # uniform (chi-square over 3 bins, 5 expected per bin). With 15 replicates and short
    # chains this catches gross miscalibration only; the slow test is the real check.
    from rotinfer.sample.sbc import rank_chi2

    result = _sbc(n_replicates=15, n_points=25, steps=60, seed=2024, n_draws=14, grid=2)
    p, counts = rank_chi2(result.ranks[:, 0], 14, 3)
    assert p > 0.01, counts


@pytest.mark.slow
def test_simulation_based_calibration_large():
    # As above with 200 replicates, 80 points and longer chains: 10 bins of 2 ranks,
    # 20 expected per bin (Talts et al. 2018).
    from rotinfer.sample.sbc import rank_chi2

    result = _sbc(n_replicates=200, n_points=80, steps=1500, seed=7, n_draws=19)
    p, counts = rank_chi2(result.ranks[:, 0], 19, 10)
    assert p > 0.01, counts


def test_double_period_trap_is_closed(rng):
    # The harmonic trap (REFERENCES.md, celerite2 rotation term): a light curve periodic at P
    # is also periodic at 2P, so a rotation term at 2P with a strong P/2 mode fits it almost
    # as well. Started at P, 2P and P/2 on a clean, coherent star drawn from the model at P
    # with a strong P/2 mode (f = 0.8), mode finding must rank P first and any 2P mode far
    # behind (Bayes factor > e^5). The harmonic error rate on the simulated population is
    # measured by the benchmarks, not here.
    from rotinfer.model import RotationModel
    from rotinfer.sample import find_modes

    t = np.sort(rng.uniform(0.0, 30.0, 300))
    model = RotationModel(t, np.ones(300), np.full(300, 3e-4), period_range=(0.5, 14.0))
    truth = model.pack(period=3.0, sigma=3e-3, coherence_rotations=50.0, f=0.8, r=0.5,
                       background_sigma=2e-4, background_tau=0.3, jitter=1e-4, mean=1.0)
    import dataclasses

    star = dataclasses.replace(model, flux=model.simulate(truth, rng))
    modes = find_modes(star, [3.0, 6.0, 1.5], config=SamplerConfig(),
                       rng=np.random.default_rng(1))
    assert relation(modes[0].period, 3.0, 0.05) == "P", [m.period for m in modes]
    doubles = [m for m in modes if relation(m.period, 3.0, 0.05) == "2P"]
    for m in doubles:
        assert m.rank_value < modes[0].rank_value - 5.0


@pytest.mark.parametrize("log_period_offset", [-3.0, 3.0])
def test_optimiser_start_outside_the_period_prior_is_pulled_inside(rng, log_period_offset):
    # A saddle escape displaces the start along the direction of negative curvature, which
    # can leave the period prior's range (seen on a simulated one-year null star: SciPy's
    # L-BFGS-B refused the empty window, "upper bound is less than the lower bound"). The
    # window must then be centred on the nearest allowed period and the result stay inside.
    from rotinfer.model import RotationModel
    from rotinfer.sample.optimise import _optimise_from

    t = np.sort(rng.uniform(0.0, 30.0, 200))
    model = RotationModel(t, 1.0 + 1e-3 * rng.standard_normal(200), np.full(200, 1e-3),
                          period_range=(0.5, 14.0))
    x0 = model.pack(period=3.0, sigma=1e-3, coherence_rotations=5.0, f=0.3, r=0.5,
                    background_sigma=3e-4, background_tau=0.3, jitter=1e-4, mean=1.0)
    prior = model._priors["log_period"]
    x0[0] = (prior.b if log_period_offset > 0 else prior.a) + log_period_offset
    x, lp = _optimise_from(model, x0, SamplerConfig())
    assert prior.a <= x[0] <= prior.b
    assert math.isfinite(lp)


def test_aperiodic_comparison_takes_as_many_oscillators_as_the_bic_supports(rng):
    # Nested models (common practice): the aperiodic model with three background
    # oscillators contains the one with two (third amplitude -> 0), so its maximum
    # likelihood cannot be lower; the comparison keeps the smaller model unless the
    # likelihood gain beats the BIC price of two parameters, 2 ln N (Schwarz 1978).
    import dataclasses

    from rotinfer.model import ModelConfig, RotationModel
    from rotinfer.sample import fit_aperiodic
    from rotinfer.sample.optimise import _fit_backgrounds

    t = np.sort(rng.uniform(0.0, 100.0, 1000))
    base = RotationModel(t, np.ones(1000), np.full(1000, 2e-4), period_range=(0.5, 20.0))
    null3 = base.aperiodic()
    assert len(null3.background_suffixes) == 3
    # Three components of damping times 0.05, 1 and 15 d (granulation-, settling- and
    # drift-like): the third oscillator is needed ... (with a 15-d component of 2 ppt over
    # 100 d, 8 of 8 data seeds chose three; with an 8-d one of 1 ppt over 40 d, 1 in 8 did)
    truth = null3.pack(background_sigma=3e-4, background_tau=0.05, background2_sigma=6e-4,
                       background2_tau=1.0, background3_sigma=2e-3, background3_tau=15.0,
                       jitter=1e-5, mean=1.0)
    # ... two components (the third amplitude negligible): it is not.
    two = truth.copy()
    two[null3.names.index("log_background3_amplitude")] = math.log(1e-7)
    chosen = []
    for theta in (truth, two):
        star = dataclasses.replace(base, flux=null3.simulate(theta, rng))
        fits = _fit_backgrounds(star.aperiodic())
        (m2, _, x2), (m3, _, x3) = fits
        # Posterior maxima, not likelihood maxima: the extra oscillator's log-normal prior
        # keeps its amplitude from vanishing, at a cost of at most a few units of ln L.
        assert m3.log_likelihood(x3) >= m2.log_likelihood(x2) - 2.0
        mode = fit_aperiodic(star, config=SamplerConfig())
        chosen.append((mode.theta.size - 1) // 2)  # 2 per oscillator + jitter (mean integrated out)
        assert mode.laplace.valid and f"ln {chosen[-1]}!" in mode.laplace.note
    assert chosen == [3, 2]
    small = dataclasses.replace(base, config=ModelConfig(max_comparison_backgrounds=2))
    assert fit_aperiodic(small, config=SamplerConfig()).theta.size == 5


def test_rotation_model_takes_a_second_background_where_the_bic_supports_it(rng):
    # Nested models again (common practice; Schwarz 1978): the rotation model with two
    # ordered background oscillators contains the one with one, and "auto" keeps the
    # second only when its likelihood gain beats 2 ln N. Data drawn from the model itself
    # (celerite2's Cholesky factor): rotation + oscillators at 0.05 d and 3 d need two;
    # rotation + one oscillator does not.
    import dataclasses

    from rotinfer.model import ModelConfig, RotationModel
    from rotinfer.sample import choose_periodic_backgrounds, find_modes

    t = np.sort(rng.uniform(0.0, 40.0, 800))
    auto = ModelConfig(periodic_backgrounds="auto")
    base = RotationModel(t, np.ones(800), np.full(800, 2e-4), config=auto,
                         period_range=(0.5, 15.0))
    assert base.background_suffixes == ("",)  # "auto" starts from one
    two = dataclasses.replace(base, config=ModelConfig(periodic_backgrounds=2))
    common = dict(period=4.0, sigma=2e-3, coherence_rotations=20.0, f=0.3, r=0.5,
                  jitter=1e-5, mean=1.0)
    truth2 = two.pack(**common, background_sigma=6e-4, background_tau=0.05,
                      background2_sigma=1.5e-3, background2_tau=3.0)
    truth1 = base.pack(**common, background_sigma=6e-4, background_tau=0.05)
    config = SamplerConfig(starts_per_period=1)
    chosen = []
    for model, theta in ((two, truth2), (base, truth1)):
        star = dataclasses.replace(base, flux=model.simulate(theta, rng))
        modes = find_modes(star, [4.0], config=config, rng=np.random.default_rng(1))
        picked, picked_modes = choose_periodic_backgrounds(
            star, modes, [4.0], config=config, rng=np.random.default_rng(2))
        chosen.append(len(picked.background_suffixes))
        best = max(picked_modes, key=lambda m: m.log_posterior)
        assert best.theta.size == picked.ndim
        assert abs(best.period / 4.0 - 1) < 0.1
        if chosen[-1] == 2:  # ordered, and the nested fit is never worse than the one
            tau = [best.theta[picked.names.index(f"log_background{s}_timescale")]
                   for s in ("", "2")]
            assert tau[0] < tau[1]
            assert best.log_posterior >= max(m.log_posterior for m in modes) - 2.0
    assert chosen == [2, 1]


def test_fit_with_auto_backgrounds_resumes_with_the_chosen_model(tmp_path, monkeypatch):
    # The number of background oscillators chosen by "auto" is stored with the modes:
    # a run resumed from its checkpoint samples the same (two-oscillator) model and
    # gives identical draws.
    import dataclasses

    from rotinfer.model import ModelConfig, RotationModel
    from rotinfer.sample import fit

    rng = np.random.default_rng(11)
    t = np.sort(rng.uniform(0.0, 40.0, 500))
    two = RotationModel(t, np.ones(500), np.full(500, 2e-4),
                        config=ModelConfig(periodic_backgrounds=2), period_range=(0.5, 15.0))
    theta = two.pack(period=4.0, sigma=2e-3, coherence_rotations=20.0, f=0.3, r=0.5,
                     jitter=1e-5, mean=1.0, background_sigma=6e-4, background_tau=0.05,
                     background2_sigma=1.5e-3, background2_tau=3.0)
    star = dataclasses.replace(two, flux=two.simulate(theta, rng),
                               config=ModelConfig(periodic_backgrounds="auto"))
    cfg = SamplerConfig(n_walkers=24, check_every=50, max_steps=50, warmup_steps=50,
                        starts_per_period=1, max_sampled_modes=1, tau_multiple=1e4)
    path = tmp_path / "chains.h5"
    with pytest.warns(ConvergenceWarning):
        first = fit(star, [4.0], config=cfg, seed=3, checkpoint_path=path)
    assert first.model.background_suffixes == ("", "2")
    assert first.samples.shape[1] == first.model.ndim == 10  # 5 rotation, 4 background, jitter

    def no_search(*args, **kwargs):
        raise AssertionError("modes searched again instead of read from the checkpoint")

    monkeypatch.setattr("rotinfer.sample.posterior.find_modes", no_search)
    monkeypatch.setattr("rotinfer.sample.posterior.choose_periodic_backgrounds", no_search)
    with pytest.warns(ConvergenceWarning):
        again = fit(star, [4.0], config=cfg, seed=3, checkpoint_path=path)
    assert again.model.background_suffixes == ("", "2")
    assert np.array_equal(first.samples, again.samples)


def test_checkpoint_resumes_under_another_stopping_rule(tmp_path, monkeypatch):
    # The stopping rule decides where a chain ends, never what it holds (each ensemble's
    # random state is stored per block), so a run that hit its cap resumes under a
    # stricter rule instead of starting over; a checkpoint labelled as earlier versions
    # did (the rule inside the fingerprint) is resumed when its rule is the one asked
    # for, and relabelled. (The draws must continue the stored ones exactly.)
    import dataclasses

    import h5py

    from rotinfer.model import RotationModel
    from rotinfer.sample import fit
    from rotinfer.sample import posterior as post

    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(0.0, 40.0, 300))
    base = RotationModel(t, np.ones(300), np.full(300, 3e-4), period_range=(0.5, 15.0))
    theta = base.pack(period=4.0, sigma=2e-3, coherence_rotations=20.0, f=0.3, r=0.5,
                      jitter=1e-5, mean=1.0, background_sigma=3e-4, background_tau=0.1)
    star = dataclasses.replace(base, flux=base.simulate(theta, rng))
    short = SamplerConfig(n_walkers=24, check_every=50, max_steps=50, warmup_steps=50,
                          starts_per_period=1, max_sampled_modes=1, tau_multiple=1e4)
    path = tmp_path / "chains.h5"
    with pytest.warns(ConvergenceWarning):
        fit(star, [4.0], config=short, seed=3, checkpoint_path=path)
    with h5py.File(path, "r") as f:
        stored = f["mode0/ensemble0/chain"][...]

    def no_search(*args, **kwargs):
        raise AssertionError("modes searched again instead of read from the checkpoint")

    monkeypatch.setattr("rotinfer.sample.posterior.find_modes", no_search)
    stricter = dataclasses.replace(short, max_steps=100, tau_multiple=2e4, rhat_max=1.001,
                                   burn_in_tau=2.0, tau_rtol=0.01, stuck_ratio=0.2)
    with pytest.warns(ConvergenceWarning):
        fit(star, [4.0], config=stricter, seed=3, checkpoint_path=path)
    with h5py.File(path, "r") as f:
        longer = f["mode0/ensemble0/chain"][...]
    assert longer.shape[0] == 100 and np.array_equal(longer[:50], stored)

    # An earlier version's label for the same fit (its rule inside the hash) is accepted
    # and replaced by the current one; a setting that shapes the chains still is not.
    legacy = post._fingerprint(star, [4.0], stricter, 3,
                               leave_out=post._NOT_IN_LEGACY_FINGERPRINT)
    current = post._fingerprint(star, [4.0], stricter, 3)
    assert legacy != current
    with h5py.File(path, "a") as f:
        f.attrs["fingerprint"] = legacy
    with pytest.warns(ConvergenceWarning):
        fit(star, [4.0], config=stricter, seed=3, checkpoint_path=path)
    with h5py.File(path, "r") as f:
        assert f.attrs["fingerprint"] == current
        assert np.array_equal(f["mode0/ensemble0/chain"][...], longer)
    other = dataclasses.replace(stricter, warmup_steps=60)
    assert post._fingerprint(star, [4.0], other, 3) != current


def test_fingerprint_of_a_later_model_option():
    # A model option added later stays out of a checkpoint's fingerprint while it holds
    # the value that gives the model as before (so earlier checkpoints still resume), and
    # enters it otherwise. The literal is the fingerprint this light curve and these
    # settings had before [model] secondary_coherence existed (computed at commit ed441da).
    import dataclasses

    from rotinfer.model import ModelConfig, RotationModel
    from rotinfer.sample import posterior as post

    t = np.linspace(0.0, 30.0, 200)
    model = RotationModel(t, np.ones(200), np.full(200, 1e-3), period_range=(0.5, 15.0))
    assert model.config.secondary_coherence == "quality"
    before = "f183679aab2690358347b81d0c8fa464"
    assert post._fingerprint(model, [4.0], SamplerConfig(), 3) == before
    timed = dataclasses.replace(model, config=ModelConfig(secondary_coherence="time"))
    assert post._fingerprint(timed, [4.0], SamplerConfig(), 3) != before
    jumping = dataclasses.replace(SamplerConfig(), period_jump=0.2)
    assert post._fingerprint(model, [4.0], jumping, 3) != before  # a later sampler option


# A target whose first coordinate ("log_period") has two narrow peaks far apart, with
# weights 0.3 and 0.7, and a second coordinate that is Normal(0, 1) independently: the
# ensemble moves of one walker cloud started on one peak do not cross the gap.
PEAKS = np.array([-1.0, 1.0])
PEAK_WEIGHTS = np.array([0.3, 0.7])
PEAK_SD = 0.03


def two_peaks(x):
    if not -2.0 <= x[0] <= 2.0:
        return -math.inf
    dens = PEAK_WEIGHTS * stats.norm.pdf(x[0], PEAKS, PEAK_SD)
    return math.log(dens.sum() + 1e-300) - 0.5 * x[1] ** 2


def test_period_jump_density_is_the_stated_mixture():
    # The proposal density is u x uniform(lo, hi) + (1 - u) x a Gaussian kernel density:
    # checked against SciPy's gaussian_kde (whose kernel sd is its factor times the
    # centres' sd) and its normalisation against SciPy's quad.
    from scipy import integrate

    from rotinfer.sample import PeriodJumpMove

    rng = np.random.default_rng(4)
    centres = rng.normal(0.3, 0.5, 300)
    move = PeriodJumpMove.from_draws(0, (-1.5, 2.5), centres, uniform_fraction=0.4)
    kde = stats.gaussian_kde(centres, bw_method=move.bandwidth / centres.std(ddof=1))
    x = np.linspace(-3.0, 4.0, 57)
    expected = 0.4 * ((x >= -1.5) & (x <= 2.5)) / 4.0 + 0.6 * kde(x)
    assert np.allclose(np.exp(move.log_density(x)), expected, rtol=1e-10, atol=1e-300)
    total, _ = integrate.quad(lambda v: np.exp(move.log_density([v]))[0], -8, 9,
                              points=[-1.5, 2.5], limit=200)
    assert total == pytest.approx(1.0, abs=1e-6)
    # Silverman (1986, eq. 3.31): 0.9 min(sd, IQR/1.34) n^(-1/5)
    q75, q25 = np.percentile(centres, [75, 25])
    assert move.bandwidth == pytest.approx(
        0.9 * min(centres.std(), (q75 - q25) / 1.34) * 300 ** -0.2)
    draws = move.draw(200_000, np.random.RandomState(5))
    # the draws follow g: Kolmogorov-Smirnov against its CDF by quadrature (SciPy)
    grid = np.linspace(-4.0, 5.0, 3001)
    cdf = np.concatenate([[0.0], integrate.cumulative_trapezoid(
        np.exp(move.log_density(grid)), grid)])
    ks = stats.kstest(draws, lambda v: np.interp(v, grid, cdf))
    assert ks.pvalue > 1e-3, ks


@pytest.mark.parametrize("weight, recovered", [(0.0, False), (0.3, True)])
def test_period_jump_crosses_between_separated_peaks(weight, recovered):
    # Started on the heavier peak, the ensembles without the move never see the other one;
    # with it the fraction of draws on the lighter peak matches its weight 0.3 within
    # 5 binomial standard errors of the effective sample size (common practice).
    config = _small(period_jump=weight, max_steps=3000, warmup_steps=100)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        run = run_ensembles(two_peaks, np.array([1.0, 0.0]), np.diag([PEAK_SD**2, 1.0]),
                            config=config, seed=2, names=("log_period", "x"),
                            period_bounds=(math.exp(-2.0), math.exp(2.0)))
    draws = run.samples()
    light = np.mean(draws[:, 0] < 0)
    if not recovered:
        assert light == 0.0
        return
    assert run.converged, run.diagnostics.reasons
    ess = float(np.min(run.diagnostics.ess))
    assert abs(light - 0.3) < 5 * math.sqrt(0.3 * 0.7 / ess), (light, ess)
    assert np.var(draws[:, 1]) == pytest.approx(1.0, abs=5 * math.sqrt(2 / ess))


def test_period_jump_option_is_validated():
    with pytest.raises(ConfigError, match=r"period_jump.*>= 0"):
        SamplerConfig(period_jump=-0.1)
