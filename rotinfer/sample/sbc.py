"""Simulation-based calibration (SBC) of the whole inference procedure.

Talts et al. (2018): draw parameters from the prior, data from the model with
those parameters, run the inference exactly as it is run on real data, and
rank each true parameter among L posterior draws. If the procedure is
calibrated, the ranks are uniform on {0, ..., L}. A U-shaped histogram means
intervals too narrow, a hump means too wide, a slope a bias.

Here the "procedure" is :func:`rotinfer.sample.fit` started without
periodogram candidates (log-spaced start periods over the prior range), so
that nothing about the true value leaks into the start. Posterior draws are
taken in proportion to their weights (mode probabilities).

References
----------
Talts, S., Betancourt, M., Simpson, D., Vehtari, A. & Gelman, A. 2018,
arXiv:1804.06788 (simulation-based calibration).
"""

from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..errors import ConvergenceWarning
from ..model import RotationModel
from .posterior import fit
from .settings import SamplerConfig

__all__ = ["SBCResult", "rank_chi2", "sbc_ranks"]


@dataclass(frozen=True)
class SBCResult:
    """Ranks of the true parameters among posterior draws.

    Attributes
    ----------
    names : tuple of str
        Parameters ranked (unconstrained names).
    ranks : ndarray (n_replicates, n_names) of int
        Rank of each true value among ``n_draws`` posterior draws (0..n_draws).
    n_draws : int
    converged : ndarray (n_replicates,) of bool
        Whether each replicate's sampler met the convergence rule.
    truths : ndarray (n_replicates, ndim)
        The prior draws.
    """

    names: tuple[str, ...]
    ranks: np.ndarray
    n_draws: int
    converged: np.ndarray
    truths: np.ndarray


def sbc_ranks(
    template: RotationModel, *, n_replicates: int, n_draws: int, config: SamplerConfig,
    seed: int, names=("log_period",),
) -> SBCResult:
    """Run SBC replicates on the times and uncertainties of ``template``.

    Parameters
    ----------
    template : RotationModel
        Times, uncertainties, priors and period range used for every replicate
        (its fluxes are replaced by simulated ones).
    n_replicates : int
    n_draws : int
        L, posterior draws each truth is ranked among.
    config : SamplerConfig
    seed : int
        Replicate i uses ``SeedSequence(seed, spawn_key=(i,))``.
    names : sequence of str
        Parameters to rank.
    """
    idx = [template.names.index(n) for n in names]
    ranks = np.empty((n_replicates, len(idx)), dtype=np.int64)
    converged = np.empty(n_replicates, dtype=bool)
    truths = np.empty((n_replicates, template.ndim))
    for i in range(n_replicates):
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(i,)))
        theta = template.sample_prior(rng, 1)[0]
        flux = template.simulate(theta, rng)
        model = dataclasses.replace(template, flux=flux)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            post = fit(model, [], config=config, seed=int(rng.integers(2**31)),
                       compare_aperiodic=False)
        pick = rng.choice(len(post.samples), size=n_draws, p=post.weights / post.weights.sum())
        draws = post.samples[pick]
        ranks[i] = np.sum(draws[:, idx] < theta[idx], axis=0)
        converged[i] = post.converged
        truths[i] = theta
    return SBCResult(tuple(names), ranks, n_draws, converged, truths)


def rank_chi2(ranks, n_draws: int, n_bins: int) -> tuple[float, np.ndarray]:
    """Chi-square test of uniformity of SBC ranks in ``n_bins`` equal bins.

    ``n_draws + 1`` must be divisible by ``n_bins`` so every bin holds the same
    number of possible ranks (Talts et al. 2018 recommend at least ~5 expected
    counts per bin).

    Returns
    -------
    p_value : float
    counts : ndarray (n_bins,)
    """
    if (n_draws + 1) % n_bins:
        raise ValueError("n_draws + 1 must be a multiple of n_bins")
    counts = np.bincount(np.asarray(ranks) * n_bins // (n_draws + 1), minlength=n_bins)
    return float(stats.chisquare(counts).pvalue), counts
