"""Monte Carlo standard errors (rotinfer.sample.mcse) against known answers.

References used below:

* AR(1) chains x_t = rho x_{t-1} + e_t have lag-k autocorrelation rho^|k|, so their
  integrated autocorrelation time is sum_k rho^|k| = (1 + rho) / (1 - rho) (common
  practice; the estimator's definition as in Madras & Sokal 1988, J. Stat. Phys. 50, 109);
* the asymptotic standard deviation of a sample quantile of N independent draws is
  sqrt(q (1 - q) / N) / f(x_q) (common practice; the normal approximation of the order
  statistics, e.g. Stuart & Ord, Kendall's Advanced Theory of Statistics, from memory),
  with f and x_q from SciPy's normal distribution;
* ArviZ (a general-purpose Bayesian diagnostics library; checked with 0.23):
  ``arviz.ess(method="mean")`` is the same estimator on split chains,
  ``arviz.mcse(method="quantile")`` the same construction with the Beta interval mapped to
  the nearest order statistics outward;
* a standard error is the spread of the estimate over independent replicates: the
  replicates below are generated with SciPy's ``lfilter`` (AR(1)) and NumPy, and their
  robust spread (half the 16-84 % range) is the reference.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import signal, special, stats
from test_summarise import _posterior

from rotinfer.sample import importance_log_evidence
from rotinfer.sample.mcse import (
    ModeDraws,
    ess,
    mixture_quantiles,
    posterior_mcse,
    quantile_mcse,
)
from rotinfer.summarise import reported_numbers, summarise


def _ar1(rng, shape, rho):
    """Stationary AR(1) rows with unit marginal variance (SciPy's lfilter)."""
    e = rng.standard_normal(shape) * math.sqrt(1 - rho**2)
    e[..., 0] = rng.standard_normal(shape[:-1])  # start in the stationary distribution
    return signal.lfilter([1.0], [1.0, -rho], e, axis=-1)


def _spread(x):
    lo, hi = np.quantile(x, [0.16, 0.84], axis=0)
    return 0.5 * (hi - lo)


def _arviz():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # ArviZ announces a refactor on import
        import arviz
    return arviz


def test_ess_matches_arviz(rng):
    arviz = _arviz()
    cases = [
        _ar1(rng, (4, 1000), 0.7),
        _ar1(rng, (48, 300), 0.95),  # ensemble-like: many short chains
        rng.standard_normal((2, 501)) + np.array([0.0, 0.4])[:, None],  # odd length, offset
        (_ar1(rng, (4, 800), 0.8) <= 1.0).astype(float),  # an indicator, as for quantiles
    ]
    for chains in cases:
        assert ess(chains) == pytest.approx(float(arviz.ess(chains, method="mean")), rel=1e-9)


def test_quantile_mcse_matches_arviz(rng):
    # ArviZ maps the Beta interval to the order statistics just outside it, we interpolate:
    # the two agree on average and differ by a few order statistics in a given run.
    arviz = _arviz()
    q = (0.025, 0.16, 0.5, 0.975)
    ratios = []
    for _ in range(40):
        x = _ar1(rng, (4, 1000), 0.7)
        ratios.append([quantile_mcse([ModeDraws(x, 1.0)], p)[0]
                       / float(arviz.mcse(x, method="quantile", prob=p)) for p in q])
    ratios = np.array(ratios)
    assert np.all(np.abs(np.median(ratios, axis=0) - 1) < 0.05), np.median(ratios, axis=0)
    assert np.all((ratios > 0.75) & (ratios < 1.15)), (ratios.min(), ratios.max())


def test_ess_of_independent_draws_is_their_number(rng):
    x = rng.standard_normal((8, 5000))
    assert ess(x) == pytest.approx(x.size, rel=0.05)


@pytest.mark.parametrize("rho", [0.5, 0.9])
def test_ess_of_ar1_chains_matches_the_analytic_autocorrelation_time(rng, rho):
    # Reference: tau = (1 + rho) / (1 - rho) for AR(1) (see the module docstring).
    x = _ar1(rng, (8, 20000), rho)
    assert x.size / ess(x) == pytest.approx((1 + rho) / (1 - rho), rel=0.08)


def test_ess_counts_chains_that_disagree(rng):
    # Chains offset from each other by more than their own spread: the pooled variance
    # sees it, an estimate from each chain's own mean would not.
    x = rng.standard_normal((4, 2000)) + np.array([-3.0, -1.0, 1.0, 3.0])[:, None]
    assert ess(x) < 0.05 * x.size
    assert ess(np.full((4, 101), 2.5)) == 404  # nothing to estimate: all draws equal
    assert math.isnan(ess(np.zeros((4, 7))))  # fewer than 4 draws per split chain
    assert math.isnan(ess(np.array([[0.0, 1.0, np.nan, 2.0] * 4])))


@pytest.mark.parametrize("q", [0.025, 0.16, 0.5, 0.975])
def test_quantile_mcse_of_independent_draws_matches_the_asymptotic_formula(rng, q):
    n = 10000
    draws = rng.standard_normal((200, 4, n // 4))
    mcse = [quantile_mcse([ModeDraws(d, 1.0)], q)[0] for d in draws]
    expected = math.sqrt(q * (1 - q) / n) / stats.norm.pdf(stats.norm.ppf(q))
    assert np.median(mcse) == pytest.approx(expected, rel=0.08)


def test_quantile_mcse_of_ar1_chains_matches_the_replicate_spread(rng):
    q = np.array([0.025, 0.16, 0.5, 0.975])
    reps = _ar1(rng, (300, 4, 2000), 0.8)
    estimates = np.array([np.quantile(r, q) for r in reps])
    mcse = np.array([quantile_mcse([ModeDraws(r, 1.0)], q) for r in reps])
    ratio = np.median(mcse, axis=0) / _spread(estimates)
    assert np.all((ratio > 0.85) & (ratio < 1.15)), ratio
    # The median's error is sqrt(tau_I) times the independent-draw one, tau_I the
    # autocorrelation time of the indicator x <= 0, whose lag-k correlation is
    # (2 / pi) arcsin(rho^k) for a Gaussian AR(1) (Sheppard's orthant probability of a
    # bivariate normal, common practice): tau_I = 6.39 at rho = 0.8, not tau = 9.
    k = np.arange(1, 500)
    tau_indicator = 1 + 2 * np.sum(2 / np.pi * np.arcsin(0.8**k))
    iid = math.sqrt(0.25 / reps[0].size) / stats.norm.pdf(0.0)
    assert np.median(mcse[:, 2]) / iid == pytest.approx(math.sqrt(tau_indicator), rel=0.08)


def test_mixture_mcse_includes_the_uncertainty_of_the_mode_probabilities(rng):
    # Two modes, 95 % and 5 %, whose ln evidences carry standard errors 0.02 and 0.1; each
    # replicate redraws the chains and the probabilities. The 90 % and 97.5 % quantiles
    # fall in the minor mode, where the probability's error dominates.
    q = np.array([0.5, 0.9, 0.975])
    se = np.array([0.02, 0.1])
    estimates, with_se, without = [], [], []
    for _ in range(300):
        a = rng.standard_normal((4, 2000))
        b = 10.0 + rng.standard_normal((4, 500))
        log_z = np.log([0.95, 0.05]) + se * rng.standard_normal(2)
        p = np.exp(log_z - special.logsumexp(log_z))
        estimates.append(mixture_quantiles([ModeDraws(a, p[0]), ModeDraws(b, p[1])], q))
        with_se.append(quantile_mcse([ModeDraws(a, p[0], se[0]), ModeDraws(b, p[1], se[1])], q))
        without.append(quantile_mcse([ModeDraws(a, p[0]), ModeDraws(b, p[1])], q))
    spread = _spread(np.array(estimates))
    ratio = np.median(with_se, axis=0) / spread  # over seeds 0-7: 0.91-1.13
    assert np.all((ratio > 0.85) & (ratio < 1.2)), ratio
    # leaving the probabilities' errors out understates the tail quantiles' error badly
    # (over seeds 0-7: 0.44-0.52 of the spread at 90 %, 0.20-0.25 at 97.5 %)
    low = np.median(without, axis=0) / spread
    assert low[1] < 0.65 and low[2] < 0.35, low


def test_period_mcse_in_the_summary(rng):
    # One mode of independent draws, ln P ~ N(ln 3, 0.02^2) (tests/test_summarise.py):
    # the median's MCSE is 3 x 0.02 x sqrt(pi / 2 / N) by the delta method and the
    # asymptotic formula above; one posterior's estimate scatters by about 15 %, so the
    # median over 20 is compared.
    post = _posterior(rng, [(3.0, 1.0)])
    period = summarise(post, identifier="demo").to_dict()["period"]
    block = period["mcse"]
    n = len(post.samples)
    assert block["unit"] == "d"
    medians = [block["median"]] + [posterior_mcse(_posterior(rng, [(3.0, 1.0)]), "log_period",
                                                  [0.5])[0] for _ in range(19)]
    expected = 3.0 * 0.02 * math.sqrt(math.pi / 2 / n)
    assert np.median(medians) == pytest.approx(expected, rel=0.1)
    ends = block["interval_68"] + block["interval_95"]
    assert block["largest"] == max(ends + [block["median"]])
    assert all(0 < v < 0.05 for v in ends)
    assert block["interval_95"][0] > block["median"]  # tails are less precise than the median
    # "relative": each error over its own scale (exact, from the reported numbers)
    est, err = reported_numbers(period), reported_numbers(block)
    sigma = 0.5 * (est[3] - est[1])
    ratios = [e / abs(x - est[2]) for e, x in zip(err, est, strict=True) if x != est[2]]
    assert block["relative"] == pytest.approx(max(err[2] / sigma, *ratios))
    # the posterior's own probabilities and standard errors are used
    two = _posterior(rng, [(3.0, 0.9), (1.5, 0.1)])
    m = posterior_mcse(two, "log_period", [0.5])
    assert 0 < m[0] < 0.05


def test_log_evidence_error_follows_from_the_kish_sample_size(rng):
    # Exact identity used by benchmarks/bench_mcse.py for summaries that predate the stored
    # error: the delta-method error std(w) / (sqrt(n) mean(w)) of an importance estimate
    # equals sqrt(1 / ESS - 1 / n) with ESS = (sum w)^2 / sum w^2 (Kish 1965).
    def log_prob(x):
        return float(-0.5 * np.sum((x / np.array([1.0, 3.0])) ** 2) - 0.1 * x[0] ** 4)

    draws = rng.standard_normal((500, 2)) * np.array([1.0, 3.0])
    _, se, kish = importance_log_evidence(log_prob, draws, n=400, rng=rng)
    assert se == pytest.approx(math.sqrt(1 / kish - 1 / 400), rel=1e-9)
