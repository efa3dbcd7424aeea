"""Convergence diagnostics for ensembles of walkers.

How the chains are formed
-------------------------
Walkers of one affine-invariant ensemble are not independent (each move uses
the others), so R-hat is never computed across walkers of one ensemble. Each
*independent ensemble* is one chain: its draw sequence is the ensemble's
positions step after step (walker positions of step t, then of step t + 1, ...).
Split R-hat then splits every such chain into its first and second half (in
steps), so K ensembles give 2K chains. With a single ensemble only the split
halves are compared, which checks stationarity but not mixing between
independent starts; the default is two ensembles.

The integrated autocorrelation time tau is emcee's estimator
(:func:`emcee.autocorr.integrated_time`, Goodman & Weare 2010 / Sokal's
automatic window with c = 5), which averages the autocorrelation function over
the walkers of one ensemble; the effective sample size of an ensemble is
``n_steps * n_walkers / tau`` and is summed over ensembles.

References
----------
Vehtari, A., Gelman, A., Simpson, D., Carpenter, B. & Bürkner, P.-C. 2021,
Bayesian Analysis 16, 667 (rank-normalised split R-hat, folded R-hat; R-hat < 1.01).
Goodman, J. & Weare, J. 2010, CAMCoS 5, 65; emcee documentation "Autocorrelation
analysis & convergence" (trust tau only for chains longer than ~50 tau).
Madras, N. & Sokal, A. D. 1988, J. Stat. Phys. 50, 109 (variance of the windowed
estimator, var(tau) ~ 2 (2M + 1) tau^2 / N for a window of M lags); Sokal, A. D.
1997, in Functional Integration (Plenum), 131, eq. 3.19.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from emcee.autocorr import auto_window, function_1d
from scipy import special, stats

__all__ = [
    "EnsembleDiagnostics",
    "autocorr_time",
    "autocorr_time_rel_error",
    "burn_in",
    "rank_normalised_split_rhat",
    "stuck_walkers",
]


def _rhat_classic(chains: np.ndarray) -> float:
    """Gelman-Rubin potential scale reduction of equal-length chains, shape (m, n)."""
    m, n = chains.shape
    means = chains.mean(axis=1)
    within = chains.var(axis=1, ddof=1).mean()
    between_over_n = means.var(ddof=1)
    if not within > 0:
        return math.nan
    var_plus = (n - 1) / n * within + between_over_n
    return float(math.sqrt(var_plus / within))


def _rank_normalise(chains: np.ndarray) -> np.ndarray:
    """Normal scores of the pooled ranks (Blom offset 3/8), Vehtari et al. 2021 eq. 14."""
    flat = chains.ravel()
    ranks = stats.rankdata(flat, method="average")
    z = special.ndtri((ranks - 0.375) / (flat.size + 0.25))
    return z.reshape(chains.shape)


def rank_normalised_split_rhat(chains) -> float:
    """Rank-normalised split R-hat (the maximum of the bulk and the folded versions).

    Parameters
    ----------
    chains : array_like, shape (m, n)
        m independent chains of n draws of one scalar quantity (see the module
        notes for how ensembles become chains). Each chain is split in half
        here; an odd last draw is dropped.

    Returns
    -------
    float
        R-hat; values below 1.01 indicate agreement (Vehtari et al. 2021).
        NaN when a chain is constant.

    References
    ----------
    Vehtari et al. 2021, Bayesian Analysis 16, 667, section 4.
    """
    x = np.asarray(chains, dtype=float)
    if x.ndim != 2 or x.shape[1] < 4:
        raise ValueError("chains must have shape (m, n) with n >= 4")
    half = x.shape[1] // 2
    split = np.concatenate([x[:, :half], x[:, half : 2 * half]], axis=0)
    bulk = _rhat_classic(_rank_normalise(split))
    folded = np.abs(split - np.median(split))
    tail = _rhat_classic(_rank_normalise(folded))
    return float(max(bulk, tail))


def autocorr_time(chain: np.ndarray, *, return_window: bool = False):
    """Integrated autocorrelation time (in steps) per parameter of one ensemble.

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers, ndim)
    return_window : bool
        Also return, per parameter, the window M (lags summed) and the number of
        walkers that moved (both needed for the estimator's standard error, see
        :func:`autocorr_time_rel_error`).

    Returns
    -------
    tau : ndarray, shape (ndim,)
    window, n_moving : ndarray, shape (ndim,)
        Only with ``return_window``.

    Notes
    -----
    Follows :func:`emcee.autocorr.integrated_time` (autocorrelation function
    averaged over walkers, Sokal's automatic window with c = 5) but leaves out
    walkers that did not move at all in this stretch of chain (their
    autocorrelation is undefined; the stuck-walker check reports them). A
    parameter no walker moved in gets tau = inf. Whether the chain is long enough
    is judged separately.

    Like emcee's, the estimate subtracts each walker's own mean, which biases it
    low by about (2M + 1) / N for a window of M lags on N steps (about 14 % for an
    AR(1) chain with tau = 19 on 1,200 steps, tests/test_convergence.py; about
    20 % at 50 tau with c = 5), so "50 tau" is closer to 40 true autocorrelation
    times. It is kept as emcee computes it so that lengths compare with other
    emcee users' numbers.
    """
    n_steps, n_walkers, ndim = chain.shape
    tau = np.empty(ndim)
    window = np.zeros(ndim)
    n_moving = np.zeros(ndim)
    for d in range(ndim):
        x = chain[:, :, d]
        moving = np.ptp(x, axis=0) > 0
        if not np.any(moving):
            tau[d] = math.inf
            continue
        f = np.zeros(n_steps)
        for k in np.flatnonzero(moving):
            f += function_1d(x[:, k])
        n_moving[d] = np.count_nonzero(moving)
        f /= n_moving[d]
        taus = 2.0 * np.cumsum(f) - 1.0
        window[d] = auto_window(taus, 5)
        tau[d] = taus[int(window[d])]
    if return_window:
        return tau, window, n_moving
    return tau


def autocorr_time_rel_error(window, n_steps, n_walkers):
    """Relative standard error of the walker-averaged tau estimate.

    Madras & Sokal (1988) give var(tau) ~ 2 (2M + 1) tau^2 / N for the estimator
    summed over a window of M lags on one chain of N steps; averaging the
    autocorrelation function over W walkers is taken to divide the variance by W
    (walkers of one ensemble are not quite independent, so this is the smaller,
    stricter end of the estimate).

    Parameters
    ----------
    window : array_like
        Window M in lags (from ``autocorr_time(..., return_window=True)``).
    n_steps : int
        Chain length N in steps.
    n_walkers : array_like
        Walkers averaged (those that moved).

    Returns
    -------
    ndarray
        Standard error of tau divided by tau.
    """
    window = np.asarray(window, dtype=float)
    n_walkers = np.maximum(np.asarray(n_walkers, dtype=float), 1.0)
    return np.sqrt(2.0 * (2.0 * window + 1.0) / (max(n_steps, 1) * n_walkers))


def burn_in(chain: np.ndarray, burn_in_tau: float) -> int:
    """Steps to discard: ``burn_in_tau`` times the largest tau of the whole chain, at most half."""
    n = chain.shape[0]
    if n < 8:
        return n // 2
    tau = float(np.max(autocorr_time(chain)))
    if not math.isfinite(tau):
        return n // 2
    return int(min(n // 2, math.ceil(burn_in_tau * tau)))


def stuck_walkers(acceptance: np.ndarray, ratio: float) -> np.ndarray:
    """Indices of walkers whose acceptance fraction is below ``ratio`` x the ensemble median."""
    acceptance = np.asarray(acceptance, dtype=float)
    med = float(np.median(acceptance))
    return np.flatnonzero(acceptance < ratio * med)


@dataclass(frozen=True)
class EnsembleDiagnostics:
    """Convergence diagnostics of a set of independent ensembles sampling one target.

    Attributes
    ----------
    names : tuple of str
        Parameter names (unconstrained space).
    n_steps : int
        Steps per ensemble (each ensemble has the same number).
    burn_in : tuple of int
        Steps discarded per ensemble.
    tau : ndarray, shape (n_ensembles, ndim)
        Integrated autocorrelation time per ensemble and parameter (steps).
    tau_previous : ndarray, shape (n_ensembles, ndim)
        The same, estimated one check earlier (NaN at the first check).
    tau_change : ndarray, shape (ndim,)
        Relative change of the ensemble-averaged tau since the previous check.
    tau_change_allowed : ndarray, shape (ndim,)
        The largest change the stability clause accepts (see :meth:`judge`).
    n_tau : ndarray, shape (ndim,)
        Post-burn-in length in units of tau (the worst ensemble).
    ess : ndarray, shape (ndim,)
        Effective sample size, summed over ensembles.
    rhat : ndarray, shape (ndim,)
        Rank-normalised split R-hat across ensembles.
    acceptance : ndarray, shape (n_ensembles, n_walkers)
        Acceptance fraction per walker.
    stuck : int
        Number of stuck walkers in all ensembles.
    converged : bool
        The verdict of :meth:`judge`.
    reasons : tuple of str
        Why not converged (empty when converged).
    period_precision : float
        Largest Monte Carlo error of the period median and interval ends relative to its
        scale (:func:`rotinfer.sample.mcse.run_precision`); NaN unless the
        ``[sampler] period_precision`` clause is on.
    """

    names: tuple[str, ...]
    n_steps: int
    burn_in: tuple[int, ...]
    tau: np.ndarray
    tau_previous: np.ndarray
    tau_change: np.ndarray
    tau_change_allowed: np.ndarray
    n_tau: np.ndarray
    ess: np.ndarray
    rhat: np.ndarray
    acceptance: np.ndarray
    stuck: int
    converged: bool
    reasons: tuple[str, ...]
    period_precision: float = math.nan

    @classmethod
    def judge(
        cls, chains: list[np.ndarray], accepted: list[np.ndarray], *, names, check_every: int,
        tau_multiple: float, tau_rtol: float, rhat_max: float, burn_in_tau: float,
        stuck_ratio: float, tau_noise_z: float = 3.0,
    ) -> EnsembleDiagnostics:
        """Compute the diagnostics and the convergence verdict.

        The rule (all must hold):

        1. every ensemble's post-burn-in length exceeds ``tau_multiple`` x tau
           for every parameter (emcee's guidance: tau is trustworthy beyond ~50 tau);
        2. tau has stabilised: for every parameter the ensemble-averaged tau
           changed since the previous check (``check_every`` steps earlier, same
           burn-in) by less than ``max(tau_rtol, tau_noise_z x s)`` (relative),
           where s is the standard error of that change expected from the
           estimator's own noise. The two estimates share the first N - D
           post-burn-in steps (D = ``check_every``); treating tau like a running
           mean, the change has standard error ``sigma(N) sqrt(D / (N - D))``,
           with sigma(N) the Madras & Sokal (1988) error of tau on N steps
           (:func:`autocorr_time_rel_error`), averaged over the ensembles.
           ``tau_noise_z = 0`` leaves the plain relative tolerance ``tau_rtol``.
           A tau that keeps growing (chains still finding their way) fails by
           many standard errors; estimator noise alone fails rarely;
        3. rank-normalised split R-hat across ensembles < ``rhat_max`` for every
           parameter (Vehtari et al. 2021 recommend 1.01);
        4. no stuck walkers (acceptance below ``stuck_ratio`` x the median of
           its ensemble) — a stuck walker holds a region the others left.

        Parameters
        ----------
        chains : list of ndarray, each (n_steps, n_walkers, ndim)
            One per independent ensemble, all of the same length.
        accepted : list of ndarray, each (n_walkers,)
            Accepted-proposal counts per walker.
        """
        with np.errstate(divide="ignore", invalid="ignore"):  # tau may be inf (no movement)
            return cls._judge(chains, accepted, names=names, check_every=check_every,
                              tau_multiple=tau_multiple, tau_rtol=tau_rtol, rhat_max=rhat_max,
                              burn_in_tau=burn_in_tau, stuck_ratio=stuck_ratio,
                              tau_noise_z=tau_noise_z)

    @classmethod
    def _judge(cls, chains, accepted, *, names, check_every, tau_multiple, tau_rtol, rhat_max,
               burn_in_tau, stuck_ratio, tau_noise_z):
        n_steps = chains[0].shape[0]
        ndim = chains[0].shape[2]
        burns, taus, taus_prev, change_se = [], [], [], []
        for chain in chains:
            b = burn_in(chain, burn_in_tau)
            burns.append(b)
            tau_e, window, n_moving = autocorr_time(chain[b:], return_window=True)
            taus.append(tau_e)
            post = n_steps - b
            if post - check_every >= max(8, check_every):
                # Same burn-in, last check_every steps left out: the change is then the
                # estimator's response to new draws only.
                taus_prev.append(autocorr_time(chain[b : n_steps - check_every]))
                change_se.append(autocorr_time_rel_error(window, post, n_moving)
                                 * math.sqrt(check_every / (post - check_every)))
            else:
                taus_prev.append(np.full(ndim, np.nan))
                change_se.append(np.full(ndim, np.nan))
        tau = np.array(taus)
        tau_prev = np.array(taus_prev)
        tau_mean = np.mean(tau, axis=0)
        tau_change = np.abs(tau_mean - np.mean(tau_prev, axis=0)) / tau_mean
        se = np.sqrt(np.sum(np.array(change_se) ** 2, axis=0)) / len(chains)
        allowed = np.maximum(tau_rtol, tau_noise_z * se)
        post = np.array([n_steps - b for b in burns], dtype=float)
        n_tau = np.min(post[:, None] / tau, axis=0)
        n_walkers = chains[0].shape[1]
        ess = np.sum(post[:, None] * n_walkers / tau, axis=0)
        n_common = int(min(post))
        rhat = np.full(ndim, np.nan)
        if n_common >= 4:
            for j in range(ndim):
                rows = [c[-n_common:, :, j].ravel() for c in chains]
                rhat[j] = rank_normalised_split_rhat(np.array(rows))
        acceptance = np.array([a / max(n_steps, 1) for a in accepted])
        n_stuck = int(sum(stuck_walkers(a, stuck_ratio).size for a in acceptance))

        reasons = []
        if not np.all(n_tau > tau_multiple):
            if np.any(np.isfinite(n_tau)):
                worst = names[int(np.nanargmin(n_tau))]
                reasons.append(
                    f"chain only {np.nanmin(n_tau):.0f} autocorrelation times long "
                    f"(need {tau_multiple:g}; worst: {worst})"
                )
            else:  # very short chains: tau could not be estimated for any parameter
                reasons.append("autocorrelation time not estimable (chain too short)")
        if not np.all(tau_change < allowed):
            if np.all(np.isfinite(tau_change)) and np.all(np.isfinite(allowed)):
                worst = int(np.argmax(tau_change / allowed))
                reasons.append(
                    f"autocorrelation time still changing ({names[worst]}: "
                    f"{tau_change[worst] * 100:.0f} % over the last {check_every} steps; "
                    f"allowed {allowed[worst] * 100:.0f} %)"
                )
            else:
                reasons.append("autocorrelation time not yet estimable twice")
        if not np.all(rhat < rhat_max):
            if np.any(np.isfinite(rhat)):
                worst = names[int(np.nanargmax(rhat))]
                reasons.append(f"R-hat {np.nanmax(rhat):.3f} >= {rhat_max:g} (worst: {worst})")
            else:
                reasons.append("R-hat not computable (chains too short or constant)")
        if n_stuck:
            reasons.append(f"{n_stuck} stuck walker(s)")
        return cls(
            names=tuple(names), n_steps=n_steps, burn_in=tuple(burns), tau=tau,
            tau_previous=tau_prev, tau_change=tau_change, tau_change_allowed=allowed,
            n_tau=n_tau, ess=ess, rhat=rhat, acceptance=acceptance,
            stuck=n_stuck, converged=not reasons, reasons=tuple(reasons),
        )

    def to_dict(self) -> dict:
        """JSON-friendly form (per-parameter values keyed by name)."""
        def per_param(values):
            return {n: _num(v) for n, v in zip(self.names, values, strict=True)}

        return {
            "converged": self.converged,
            "reasons": list(self.reasons),
            "n_steps": self.n_steps,
            "burn_in": list(self.burn_in),
            "tau_steps": per_param(np.nanmax(self.tau, axis=0)),
            "length_in_tau": per_param(self.n_tau),
            "tau_change": per_param(self.tau_change),
            "tau_change_allowed": per_param(self.tau_change_allowed),
            "ess": per_param(self.ess),
            "rhat": per_param(self.rhat),
            "acceptance_fraction": _num(np.mean(self.acceptance)),
            "acceptance_fraction_per_ensemble": [_num(np.mean(a)) for a in self.acceptance],
            "stuck_walkers": self.stuck,
            "period_precision": _num(self.period_precision),
        }


def _num(value) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None
