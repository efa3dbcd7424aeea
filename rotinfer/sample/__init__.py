"""Optimisation and sampling of the rotation model.

* :mod:`~rotinfer.sample.optimise` — modes of the posterior and their Laplace evidence;
* :mod:`~rotinfer.sample.ensemble` — independent emcee ensembles run to convergence;
* :mod:`~rotinfer.sample.convergence` — autocorrelation time, split R-hat, the verdict;
* :mod:`~rotinfer.sample.mcse` — Monte Carlo standard errors of reported quantiles;
* :mod:`~rotinfer.sample.checkpoint` — the per-star HDF5 file of chains;
* :mod:`~rotinfer.sample.posterior` — :func:`fit`, which ties them together.
"""

from .checkpoint import Checkpoint
from .convergence import EnsembleDiagnostics, rank_normalised_split_rhat
from .ensemble import EnsembleRun, PeriodJumpMove, run_ensembles
from .optimise import (
    Laplace,
    Mode,
    choose_periodic_backgrounds,
    find_modes,
    fit_aperiodic,
    laplace,
    relation,
)
from .posterior import Posterior, SampledMode, fit, importance_log_evidence, optimise_star
from .settings import SamplerConfig

__all__ = [
    "Checkpoint",
    "EnsembleDiagnostics",
    "EnsembleRun",
    "Laplace",
    "Mode",
    "PeriodJumpMove",
    "Posterior",
    "SampledMode",
    "SamplerConfig",
    "choose_periodic_backgrounds",
    "find_modes",
    "fit",
    "fit_aperiodic",
    "importance_log_evidence",
    "laplace",
    "optimise_star",
    "rank_normalised_split_rhat",
    "relation",
    "run_ensembles",
]
