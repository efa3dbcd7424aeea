"""Options of the optimisation and sampling stage (``[sampler]`` table)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import ConfigError

__all__ = ["EARLIER_SAMPLER_VALUES", "SamplerConfig"]

#: Sampler options added later, with the value that samples as before they existed: at
#: that value an option stays out of checkpoint fingerprints and benchmark keys, so
#: earlier chains still resume and earlier benchmark tables still carry.
EARLIER_SAMPLER_VALUES = {"period_jump": 0.0}


@dataclass(frozen=True)
class SamplerConfig:
    """Options of mode finding and ensemble sampling (``[sampler]`` in the configuration).

    Attributes
    ----------
    starts_per_period : int
        Optimiser starts per start period (each candidate, its half and its double);
        they differ in the initial coherence time and P/2-mode strength.
    period_window : float
        Each optimisation keeps the period within a factor ``period_window`` of its
        start (re-centred up to twice when it runs into the edge), so that a start
        at P/2 finds the P/2 mode instead of sliding to P.
    grid_periods : int
        Extra start periods, log-spaced over the prior range, used in addition to
        the candidates (always used when there are no candidates).
    mode_tolerance : float
        Two optima are one mode when their periods differ by less than this
        fraction (0.05 = 5 %).
    competitive_log_evidence : float
        Modes whose Laplace log evidence is within this of the best are sampled
        (5 = a Bayes factor of ~150; a mode below it holds < 0.7 % of the
        probability by the Laplace estimate).
    max_sampled_modes : int
        At most this many modes are sampled (the most probable ones).
    n_walkers : int
        Walkers per ensemble (at least 2 x the number of parameters).
    n_ensembles : int
        Independent ensembles per mode; R-hat is computed across them.
    check_every : int
        Steps between convergence checks (and checkpoint writes).
    max_steps : int
        Cap on steps per ensemble; reaching it means "not converged".
    tau_multiple : float
        Required post-burn-in length in autocorrelation times.
    tau_rtol : float
        Required stability of tau between checks (relative change), unless the
        estimator's own noise allows more (``tau_noise_z``).
    tau_noise_z : float
        tau counts as stable when its change since the previous check is below
        ``max(tau_rtol, tau_noise_z x standard error of the change)`` (Madras &
        Sokal 1988; see :meth:`EnsembleDiagnostics.judge`); 0 = ``tau_rtol`` only.
    rhat_max : float
        R-hat threshold (Vehtari et al. 2021: 1.01).
    burn_in_tau : float
        Burn-in discarded: this many autocorrelation times (at most half the chain).
    stuck_ratio : float
        A walker whose acceptance is below this fraction of its ensemble's median
        is stuck.
    init_scale : float
        Walkers start from a normal around the optimum with this times the
        Laplace covariance.
    move_weights : [de, de_snooker, stretch, independence]
        Probabilities of emcee's DEMove, DESnookerMove, StretchMove and of the
        independence proposal from the mode's Laplace approximation.
    independence_scale : float
        The independence proposal is a Student-t (4 degrees of freedom) with this
        times the Laplace covariance.
    warmup_steps : int
        Warm-up steps per ensemble (0: no warm-up), discarded; they do not count
        towards ``max_steps``. After them each ensemble's independence proposal is refitted to
        the mean and covariance of the second half of its own warm-up draws and
        frozen, so the sampling that follows is an exact MCMC with a proposal
        shaped like the posterior rather than like its Laplace approximation.
    adapted_scale : float
        The refitted proposal's scale relative to the warm-up covariance.
    period_jump : float
        0 (default) = off. Otherwise the weight, beside ``move_weights``, of a move that
        changes the period alone (:class:`~rotinfer.sample.ensemble.PeriodJumpMove`):
        half of its proposals uniform in ln P over the mode's period range, half near
        the warm-up's periods; it lets walkers cross between the small separated peaks
        of a broad period posterior.
    importance_draws : int
        Draws for the importance-sampling evidence of each sampled mode (used to
        weight modes when more than one is sampled).
    period_precision : float
        0 (default) = off. Otherwise a clause of the convergence rule: each sampled mode
        goes on sampling (within ``max_steps``) until its own period median and 68 % and
        95 % interval ends have Monte Carlo standard errors below this fraction of their
        scale — the median's: half the 68 % interval; an end's: its distance from the
        median (:func:`rotinfer.sample.mcse.relative_precision`). It is checked once the
        rest of the rule holds. With several modes the published numbers are quantiles of
        their mixture, whose error also comes from the mode probabilities (set by
        ``importance_draws``, not by chain length): ``period.mcse.relative`` in the
        summary is the figure for the published numbers. Stopping at the first check
        below the target makes the reached precision slightly optimistic.
    """

    starts_per_period: int = 2
    period_window: float = 1.25
    grid_periods: int = 0
    mode_tolerance: float = 0.05
    competitive_log_evidence: float = 5.0
    max_sampled_modes: int = 3
    n_walkers: int = 24
    n_ensembles: int = 2
    check_every: int = 200
    max_steps: int = 20000
    tau_multiple: float = 50.0
    tau_rtol: float = 0.05
    tau_noise_z: float = 3.0
    rhat_max: float = 1.01
    burn_in_tau: float = 5.0
    stuck_ratio: float = 0.1
    init_scale: float = 0.5
    move_weights: tuple[float, ...] = (0.4, 0.1, 0.0, 0.5)
    independence_scale: float = 1.5
    warmup_steps: int = 300
    adapted_scale: float = 1.2
    importance_draws: int = 1000
    period_jump: float = 0.0
    period_precision: float = 0.0

    def __post_init__(self):
        positive_ints = (
            "starts_per_period", "max_sampled_modes", "n_walkers", "n_ensembles",
            "check_every", "max_steps", "importance_draws",
        )
        for name in positive_ints:
            if getattr(self, name) < 1:
                value = getattr(self, name)
                raise ConfigError(f"[sampler] {name}: must be at least 1, got {value}")
        if self.warmup_steps < 0:
            raise ConfigError(f"[sampler] warmup_steps: must be >= 0, got {self.warmup_steps}")
        if self.grid_periods < 0:
            raise ConfigError(f"[sampler] grid_periods: must be >= 0, got {self.grid_periods}")
        for name in ("tau_multiple", "tau_rtol", "burn_in_tau", "init_scale", "mode_tolerance",
                     "competitive_log_evidence", "independence_scale", "adapted_scale"):
            if not getattr(self, name) > 0:
                raise ConfigError(f"[sampler] {name}: must be positive, got {getattr(self, name)}")
        if not self.period_window > 1:
            raise ConfigError(f"[sampler] period_window: must exceed 1, got {self.period_window}")
        if not self.tau_noise_z >= 0:
            raise ConfigError(f"[sampler] tau_noise_z: must be >= 0, got {self.tau_noise_z}")
        if not (self.period_jump >= 0 and math.isfinite(self.period_jump)):
            raise ConfigError(f"[sampler] period_jump: must be a finite weight >= 0 (0 = off), "
                              f"got {self.period_jump}")
        if not 0 <= self.period_precision < 1:
            raise ConfigError(f"[sampler] period_precision: must be in [0, 1) (0 = off), got "
                              f"{self.period_precision}")
        if not self.rhat_max > 1:
            raise ConfigError(f"[sampler] rhat_max: must exceed 1, got {self.rhat_max}")
        if not 0 <= self.stuck_ratio < 1:
            raise ConfigError(f"[sampler] stuck_ratio: must be in [0, 1), got {self.stuck_ratio}")
        w = self.move_weights
        if len(w) != 4 or min(w) < 0 or sum(w) <= 0:
            raise ConfigError(
                f"[sampler] move_weights: need four non-negative weights "
                f"[de, de_snooker, stretch, independence], got {list(w)}"
            )
