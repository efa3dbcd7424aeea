"""Monte Carlo standard errors of posterior quantiles, for one mode or a mixture of modes.

A reported interval end is an estimate from a finite, autocorrelated chain; its Monte
Carlo standard error (MCSE) says how far another run with a different seed would move it.
The convergence rule (:class:`~rotinfer.sample.convergence.EnsembleDiagnostics`) asks
whether the chains can be trusted at all; the MCSE says how precise the published numbers
are once they can, and is the figure to quote beside them (Vehtari et al. 2021).

The effective sample size is the multi-chain estimator of Vehtari et al. (2021, with
Geyer's 1992 initial monotone sequence) on split chains, with every walker of every
ensemble counted as a chain, as is common practice for ensemble samplers. The MCSE of a
quantile follows the same paper: the indicator ``x <= q`` has an effective sample size
S; the probabilities ``q`` +/- one standard error (a Beta(S q + 1, S (1 - q) + 1)
interval) are mapped back through the distribution of the draws, and half the width of
that mapped interval is the MCSE.

For a mixture of separately sampled modes with probabilities ``p_k`` the distribution
function is ``F = sum p_k F_k``. Its Monte Carlo variance at a point is the sum of two parts:
the modes' own chains, ``sum p_k^2 F_k (1 - F_k) / S_k``, and the uncertainty of the mode
probabilities from their log-evidence standard errors ``s_j`` (delta method through the
softmax, ``dF / d ln Z_j = p_j (F_j - F)``), ``sum p_j^2 (F_j - F)^2 s_j^2``. The mixture's
effective sample size is then ``q (1 - q) / var`` at the estimated ``q`` quantile (where
``F`` is ``q``), mapped back as above.

References
----------
Geyer, C. J. 1992, Statistical Science 7, 473.
Vehtari, A., Gelman, A., Simpson, D., Carpenter, B. & Buerkner, P.-C. 2021, Bayesian
Analysis 16, 667 (arXiv:1903.08008).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = ["REPORTED", "ModeDraws", "ess", "mixture_quantiles", "posterior_mcse",
           "quantile_mcse", "relative_precision", "run_precision"]

#: Probabilities of the reported numbers: 95 % end, 68 % end, median, 68 % end, 95 % end.
REPORTED = (0.025, 0.16, 0.5, 0.84, 0.975)
#: Their names, in the same order.
REPORTED_NAMES = ("2.5 % end", "16 % end", "median", "84 % end", "97.5 % end")

_ONE_SIGMA = stats.norm.cdf([-1.0, 1.0])  # 0.1587, 0.8413


def _autocovariance(x: np.ndarray) -> np.ndarray:
    """Biased autocovariance (divided by N) of each row of ``x``, lags 0..N-1, by FFT."""
    n = x.shape[1]
    centred = x - x.mean(axis=1, keepdims=True)
    size = 1 << (2 * n - 1).bit_length()
    f = np.fft.rfft(centred, n=size, axis=1)
    return np.fft.irfft(f * np.conj(f), n=size, axis=1)[:, :n] / n


def ess(chains, *, split: bool = True) -> float:
    """Multi-chain effective sample size (Vehtari et al. 2021).

    Parameters
    ----------
    chains : array_like, shape (n_chains, n_draws)
        Draws of one scalar, one row per chain (for an ensemble: one row per walker).
    split : bool
        Split each chain into halves first (their recommendation: a trend within a
        chain then shows as disagreement between its halves).

    Returns
    -------
    float
        Effective sample size; NaN for non-finite draws or fewer than 4 draws per (split)
        chain, and the total number of draws when the draws are all equal (nothing to
        estimate).

    Notes
    -----
    Unlike an autocorrelation estimate that subtracts each chain's own mean, this one
    measures correlation against the pooled variance (within plus between chains), so a
    chain stuck on one side of the distribution lowers the effective sample size instead
    of dropping out.
    """
    x = np.atleast_2d(np.asarray(chains, dtype=float))
    total = x.size
    if not np.all(np.isfinite(x)):
        return math.nan
    if split:
        half = x.shape[1] // 2
        x = np.concatenate([x[:, :half], x[:, x.shape[1] - half:]], axis=0)
    m, n = x.shape
    if n < 4:
        return math.nan
    acov = _autocovariance(x)
    chain_mean = x.mean(axis=1)
    mean_var = float(np.mean(acov[:, 0])) * n / (n - 1)
    var_plus = mean_var * (n - 1) / n
    if m > 1:
        var_plus += float(np.var(chain_mean, ddof=1))
    if not var_plus > 0:
        return float(total)
    rho = np.zeros(n)
    rho[0] = 1.0
    mean_acov = acov.mean(axis=0)
    even, odd = 1.0, 1.0 - (mean_var - mean_acov[1]) / var_plus
    rho[1] = odd
    t = 1
    while t < n - 3 and even + odd > 0:  # Geyer's initial positive sequence
        even = 1.0 - (mean_var - mean_acov[t + 1]) / var_plus
        odd = 1.0 - (mean_var - mean_acov[t + 2]) / var_plus
        if even + odd >= 0:
            rho[t + 1], rho[t + 2] = even, odd
        t += 2
    max_t = t - 2
    if even > 0:  # the last positive even lag improves the estimate (Vehtari et al. 2021)
        rho[max_t + 1] = even
    t = 1
    while t <= max_t - 2:  # ... made monotone
        if rho[t + 1] + rho[t + 2] > rho[t - 1] + rho[t]:
            rho[t + 1] = rho[t + 2] = 0.5 * (rho[t - 1] + rho[t])
        t += 2
    tau = -1.0 + 2.0 * float(np.sum(rho[: max_t + 1])) + float(rho[max_t + 1])
    tau = max(tau, 1.0 / math.log10(m * n))
    return m * n / tau


@dataclass(frozen=True)
class ModeDraws:
    """The chains of one sampled mode, for :func:`quantile_mcse`.

    Attributes
    ----------
    chains : ndarray, shape (n_chains, n_draws)
        Post-burn-in draws of the quantity, one row per walker (ensembles stacked).
    probability : float
        Posterior probability of the mode (1 for a single mode).
    log_evidence_se : float
        Standard error of the mode's ln evidence (0 or NaN when not estimated: then the
        probability is taken as exact).
    """

    chains: np.ndarray
    probability: float
    log_evidence_se: float = 0.0


def _mixture_cdf(modes: Sequence[ModeDraws]):
    """Sorted draws of all modes and their weighted ECDF (midpoint rule, as in
    :func:`rotinfer.summarise.weighted_quantile`)."""
    values = np.concatenate([m.chains.ravel() for m in modes])
    weights = np.concatenate([np.full(m.chains.size, m.probability / m.chains.size)
                              for m in modes])
    order = np.argsort(values)
    v, w = values[order], weights[order]
    cdf = (np.cumsum(w) - 0.5 * w) / np.sum(w)
    return v, cdf


def mixture_quantiles(modes: Sequence[ModeDraws], q) -> np.ndarray:
    """The ``q`` quantiles of the mixture of the modes' draws, weighted by probability."""
    v, cdf = _mixture_cdf(modes)
    return np.interp(np.atleast_1d(np.asarray(q, dtype=float)), cdf, v)


def quantile_mcse(modes: Sequence[ModeDraws], q, estimate=None) -> np.ndarray:
    """Monte Carlo standard error of the ``q`` quantiles of a mixture of sampled modes.

    Parameters
    ----------
    modes : sequence of ModeDraws
    q : array_like
        Probabilities in (0, 1).
    estimate : array_like, optional
        The reported quantile values (e.g. from thinned draws); by default the quantiles of
        the draws given here.

    Returns
    -------
    ndarray
        One standard error per ``q``, in the units of the draws.
    """
    q = np.atleast_1d(np.asarray(q, dtype=float))
    v, cdf = _mixture_cdf(modes)
    est = np.interp(q, cdf, v) if estimate is None else np.atleast_1d(
        np.asarray(estimate, dtype=float))
    p = np.array([m.probability for m in modes], dtype=float)
    p = p / p.sum()
    se = np.array([m.log_evidence_se for m in modes], dtype=float)
    se = np.where(np.isfinite(se), se, 0.0) if len(modes) > 1 else np.zeros(len(modes))
    out = np.empty(len(q))
    for i, (qi, xi) in enumerate(zip(q, est, strict=True)):
        f_k = np.array([np.mean(m.chains <= xi) for m in modes])
        f = float(np.sum(p * f_k))
        var = float(np.sum(p**2 * _indicator_var(modes, xi, f_k)))
        var += float(np.sum((p * (f_k - f) * se) ** 2))
        if not var > 0:
            out[i] = 0.0
            continue
        s = qi * (1.0 - qi) / var
        lo, hi = stats.beta.ppf(_ONE_SIGMA, s * qi + 1.0, s * (1.0 - qi) + 1.0)
        x_lo, x_hi = np.interp([lo, hi], cdf, v)
        out[i] = 0.5 * (x_hi - x_lo)
    return out


def _indicator_var(modes, x, f_k) -> np.ndarray:
    """Monte Carlo variance of each mode's F_k(x) from its own chains."""
    out = np.zeros(len(modes))
    for k, (m, fk) in enumerate(zip(modes, f_k, strict=True)):
        if 0.0 < fk < 1.0:
            s = ess((m.chains <= x).astype(float))
            out[k] = fk * (1.0 - fk) / s if s > 0 else math.inf
    return out


def posterior_mcse(posterior, parameter: str = "log_period",
                   q=(0.025, 0.16, 0.5, 0.84, 0.975), estimate=None) -> np.ndarray:
    """MCSE of the ``q`` quantiles of exp(``parameter``) for a fitted posterior.

    Parameters
    ----------
    posterior : Posterior
        From :func:`rotinfer.sample.fit`.
    parameter : str
        Name of a log-scaled sampled parameter (default the log period; the MCSE is then
        in days).
    q, estimate
        As for :func:`quantile_mcse`.
    """
    j = posterior.names.index(parameter)
    modes = [ModeDraws(walker_rows(s.run.chains, s.run.diagnostics.burn_in, j), s.probability,
                       s.log_evidence_se) for s in posterior.sampled]
    return quantile_mcse(modes, q, estimate)


def walker_rows(chains, burn_in, column: int) -> np.ndarray:
    """exp(``column``) of one mode's ensembles, one row per walker, over the post-burn-in
    steps all ensembles share (the latest ones): shape (n_walkers x n_ensembles, n)."""
    n = max(min(c.shape[0] - b for c, b in zip(chains, burn_in, strict=True)), 0)
    return np.concatenate([np.exp(c[c.shape[0] - n:, :, column]).T for c in chains], axis=0)


def relative_precision(estimates, mcse) -> np.ndarray:
    """Each reported number's MCSE against its own scale.

    Parameters
    ----------
    estimates, mcse : array_like, shape (5,)
        The numbers at :data:`REPORTED` (2.5, 16, 50, 84, 97.5 %) and their MCSEs.

    Returns
    -------
    ndarray, shape (5,)
        The median's MCSE over half the 68 % interval (the posterior's sigma); each
        interval end's over its distance from the median. Below 0.1: the number, and
        the half-width it bounds, are fixed to a tenth. ``inf`` for a zero scale.
    """
    est = np.asarray(estimates, dtype=float)
    mcse = np.asarray(mcse, dtype=float)
    scale = np.abs(est - est[2])
    scale[2] = 0.5 * (est[3] - est[1])
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(scale > 0, mcse / scale, np.inf)


def run_precision(chains, burn_in, column: int) -> float:
    """Largest :func:`relative_precision` of exp(``column``) for one mode's ensembles.

    Parameters
    ----------
    chains : sequence of ndarray, each (n_steps, n_walkers, ndim)
    burn_in : sequence of int
        Steps discarded per ensemble (the common post-burn-in length is used).
    column : int
        The log-scaled parameter (the log period).
    """
    rows = walker_rows(chains, burn_in, column)
    if rows.shape[1] < 4:
        return math.inf
    draws = [ModeDraws(rows, 1.0)]
    est = mixture_quantiles(draws, REPORTED)
    return float(np.max(relative_precision(est, quantile_mcse(draws, REPORTED, est))))
