"""From a prepared light curve and candidate periods to a (possibly multimodal) posterior.

Steps of :func:`fit`:

1. :func:`~rotinfer.sample.optimise.find_modes` — optimise from every
   candidate, its half and its double; distinct modes with Laplace evidence.
2. Competitive modes — those whose Laplace log evidence is within
   ``competitive_log_evidence`` of the best (at most ``max_sampled_modes``) —
   are each sampled separately, with the period restricted to the mode's
   *basin*: the period range between the geometric midpoints to the
   neighbouring competitive modes (the first and last basins reach the prior
   limits), so the basins partition the prior and no ensemble can silently
   collapse onto another mode.
3. With more than one sampled mode, each mode's evidence (the integral of the
   posterior over its basin) is estimated by importance sampling from a
   multivariate Student-t (4 degrees of freedom) fitted to the mode's draws
   (e.g. Robert & Casella 2004, ch. 3), and the modes are combined with weights
   proportional to those evidences: each mode's probability is reported.
4. The aperiodic model (background + noise) is optimised for the detection test.

The chains of every sampled mode are written to the checkpoint file as they
grow; a fit restarted with the same data, settings and seed resumes from it.

References
----------
Robert, C. P. & Casella, G. 2004, Monte Carlo Statistical Methods, 2nd ed., ch. 3
(importance sampling).
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import special, stats

from ..config import dataclass_to_dict
from ..model import EARLIER_MODEL_VALUES, RotationModel
from ._threads import single_blas_thread
from .checkpoint import Checkpoint
from .ensemble import EnsembleRun, run_ensembles
from .optimise import Mode, choose_periodic_backgrounds, find_modes, fit_aperiodic
from .settings import EARLIER_SAMPLER_VALUES, SamplerConfig

__all__ = ["Posterior", "SampledMode", "fit", "importance_log_evidence", "optimise_star"]

# Sampler settings that do not shape the chains' content stay out of the fingerprint,
# so a checkpoint made with other values of them is resumed instead of started over:
# the cap (extend a run that hit it), the evidence draws, the precision clause, and
# the whole stopping rule (length in tau, tau stability, R-hat, burn-in, stuck walkers:
# they decide where a chain stops, never what it holds, since every ensemble's random
# state is stored per block), e.g. to continue a run under a stricter rule.
# What earlier versions left out: their checkpoints are still resumed (and relabelled)
# when their stopping rule is the one asked for now.
_NOT_IN_LEGACY_FINGERPRINT = ("max_steps", "importance_draws", "tau_noise_z",
                              "period_precision")
_STOPPING_RULE = ("tau_multiple", "tau_rtol", "rhat_max", "burn_in_tau", "stuck_ratio")
_NOT_IN_FINGERPRINT = _NOT_IN_LEGACY_FINGERPRINT + _STOPPING_RULE
#: Model options that do not change the periodic model's chains (the detection test's
#: comparison model only), so checkpoints resume across them.
_MODEL_NOT_IN_FINGERPRINT = ("max_comparison_backgrounds",)


@dataclass(frozen=True)
class SampledMode:
    """A mode that was sampled, with its share of the posterior.

    Attributes
    ----------
    mode : Mode
        The optimum it started from.
    basin : (float, float)
        Period range (days) the sampling was restricted to.
    run : EnsembleRun
        Chains and diagnostics.
    log_evidence : float
        Importance-sampling estimate of ln of the posterior mass in the basin
        (NaN when only one mode was sampled: not needed).
    log_evidence_se : float
        Its standard error (in ln units, delta method).
    importance_ess : float
        Kish effective sample size of the importance weights.
    probability : float
        Posterior probability of the mode among the sampled ones.
    """

    mode: Mode
    basin: tuple[float, float]
    run: EnsembleRun
    log_evidence: float
    log_evidence_se: float
    importance_ess: float
    probability: float


@dataclass(frozen=True)
class Posterior:
    """The combined posterior of the rotation model for one star.

    Attributes
    ----------
    model : RotationModel
        The (unrestricted) periodic model.
    samples : ndarray (n, ndim)
        Draws in the unconstrained space, all sampled modes together (thinned
        to about two draws per autocorrelation time).
    weights : ndarray (n,)
        Weight of each draw (sums to 1): mode probability / draws of the mode.
    mode_of_sample : ndarray (n,) of int
        Index into ``sampled`` of the mode each draw came from.
    modes : tuple of Mode
        Every distinct mode the optimiser found, best first.
    sampled : tuple of SampledMode
    aperiodic : Mode or None
        Maximum and Laplace evidence of the aperiodic comparison model (None
        when not computed).
    converged : bool
        True when every sampled mode met the convergence rule.
    """

    model: RotationModel
    samples: np.ndarray
    weights: np.ndarray
    mode_of_sample: np.ndarray
    modes: tuple[Mode, ...]
    sampled: tuple[SampledMode, ...]
    aperiodic: Mode | None
    converged: bool

    @property
    def names(self) -> tuple[str, ...]:
        return self.model.names

    def physical(self) -> dict[str, np.ndarray]:
        """Reported quantities of every draw (see :meth:`RotationModel.physical`)."""
        return self.model.physical(self.samples)

    @property
    def map_theta(self) -> np.ndarray:
        """The highest posterior point found (optimisation or sampling)."""
        best = max(self.modes, key=lambda m: m.log_posterior)
        theta, value = best.theta, best.log_posterior
        for s in self.sampled:
            lp = s.run.sample_log_prob()
            i = int(np.argmax(lp))
            if lp[i] > value:
                theta, value = s.run.samples()[i], float(lp[i])
        return np.asarray(theta)


def importance_log_evidence(log_prob, draws, *, n: int, rng: np.random.Generator):
    """ln of the integral of exp(log_prob), by importance sampling from a Student-t.

    The proposal is a multivariate t with 4 degrees of freedom, centred on the
    mean of ``draws`` with their covariance; heavier tails than the target keep
    the weights bounded.

    Returns
    -------
    log_z, log_z_se, ess : float
        Estimate, standard error (delta method) and Kish effective sample size.
    """
    draws = np.asarray(draws, dtype=float)
    mu = draws.mean(axis=0)
    cov = np.atleast_2d(np.cov(draws.T))
    # a proposal must be a proper density: raise eigenvalues that are ~0 (a direction
    # the draws did not explore) to a small fraction of the largest
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    w = np.maximum(w, 1e-6 * max(float(w.max()), 1e-12))
    cov = (v * w) @ v.T
    q = stats.multivariate_t(loc=mu, shape=cov, df=4)
    x = np.atleast_2d(q.rvs(size=n, random_state=rng))
    logw = np.array([log_prob(xi) for xi in x]) - q.logpdf(x)
    if not np.any(np.isfinite(logw)):
        return -math.inf, math.inf, 0.0
    log_z = float(special.logsumexp(logw) - math.log(n))
    w = np.exp(logw - np.max(logw))
    ess = float(w.sum() ** 2 / np.sum(w**2))
    rel_se = float(np.std(w) / (math.sqrt(n) * np.mean(w)))
    return log_z, rel_se, ess


def _fingerprint(model: RotationModel, periods, config: SamplerConfig, seed,
                 leave_out=_NOT_IN_FINGERPRINT) -> str:
    h = hashlib.sha256()
    for arr in (model.time, model.flux, model.flux_err):
        h.update(np.ascontiguousarray(arr).tobytes())
    sampler = {k: v for k, v in dataclass_to_dict(config).items() if k not in leave_out
               and not (k in EARLIER_SAMPLER_VALUES and EARLIER_SAMPLER_VALUES[k] == v)}
    model_cfg = {k: v for k, v in dataclass_to_dict(model.config).items()
                 if k not in _MODEL_NOT_IN_FINGERPRINT
                 and not (k in EARLIER_MODEL_VALUES and EARLIER_MODEL_VALUES[k] == v)}
    # The night term as resolved for this light curve: "auto" fits exactly as "on" where
    # the sampling is nightly and as "off" elsewhere (so, e.g., a space light curve's
    # checkpoint made when "off" was the default still resumes).
    model_cfg["night_offsets"] = "on" if model.night is not None else "off"
    meta = {
        "model": model_cfg, "period_range": list(model.period_range),
        "sampler": sampler, "seed": seed, "periods": [float(p) for p in periods],
    }
    h.update(json.dumps(meta, sort_keys=True, default=str).encode())
    return h.hexdigest()[:32]


def _basins(periods: list[float], lo: float, hi: float) -> list[tuple[float, float]]:
    order = np.argsort(periods)
    edges = [lo]
    sorted_p = [periods[i] for i in order]
    for a, b in zip(sorted_p[:-1], sorted_p[1:], strict=True):
        edges.append(math.sqrt(a * b))
    edges.append(hi)
    basins: list[tuple[float, float]] = [(0.0, 0.0)] * len(periods)
    for rank, i in enumerate(order):
        basins[i] = (edges[rank], edges[rank + 1])
    return basins


def _thin(run: EnsembleRun) -> np.ndarray:
    tau = float(np.nanmin(run.diagnostics.tau)) if np.any(np.isfinite(run.diagnostics.tau)) else 1
    step = max(1, int(0.5 * tau))
    parts = [
        c[b::step].reshape(-1, c.shape[2])
        for c, b in zip(run.chains, run.diagnostics.burn_in, strict=True)
    ]
    return np.concatenate(parts, axis=0)


def _starts_of(candidates):
    """(periods, starts): plain start periods, and what :func:`find_modes` is given (a
    CandidateSet as it is, since it already holds the halves and doubles)."""
    periods = [float(p) for p in (
        candidates.periods() if hasattr(candidates, "periods") else candidates)]
    starts = candidates if hasattr(candidates, "candidates") else periods
    return periods, starts


@single_blas_thread
def optimise_star(model: RotationModel, candidates, *, config: SamplerConfig, seed: int = 0,
                  compare_aperiodic: bool = True):
    """The optimisation stage of :func:`fit`: modes, background choice, comparison model.

    Finds the modes from the candidates (:func:`find_modes`), chooses one or two
    background oscillators where ``[model] periodic_backgrounds = "auto"``
    (:func:`choose_periodic_backgrounds`) and optimises the aperiodic comparison model
    (:func:`fit_aperiodic`), with the same random streams as :func:`fit`, so the
    detection calibration (``benchmarks/calibrate_detection.py``) computes exactly the
    statistic a fit reports.

    Returns
    -------
    (RotationModel, tuple of Mode, Mode or None)
        The rotation model chosen, its modes (best first) and the aperiodic maximum.
    """
    _, starts = _starts_of(candidates)
    root = np.random.SeedSequence(int(seed))
    modes = find_modes(model, starts, config=config,
                       rng=np.random.default_rng(np.random.SeedSequence(root.entropy,
                                                                        spawn_key=(0,))))
    if model.config.periodic_backgrounds == "auto":
        model, modes = choose_periodic_backgrounds(
            model, modes, starts, config=config,
            rng=np.random.default_rng(np.random.SeedSequence(root.entropy, spawn_key=(3,))))
    aperiodic = fit_aperiodic(model, config=config) if compare_aperiodic else None
    return model, modes, aperiodic


@single_blas_thread
def fit(
    model: RotationModel,
    candidates,
    *,
    config: SamplerConfig | None = None,
    seed: int = 0,
    checkpoint_path=None,
    progress: Callable[[int], None] | None = None,
    compare_aperiodic: bool = True,
) -> Posterior:
    """Find the modes of the rotation posterior, sample the competitive ones, combine them.

    Parameters
    ----------
    model : RotationModel
        Periodic model of the star (see :meth:`RotationModel.from_prepared`).
    candidates : sequence of float, or CandidateSet
        Start periods (days), e.g. ``scan(prepared).candidates`` (see
        :func:`~rotinfer.sample.find_modes` for how halves and doubles are added).
    config : SamplerConfig, optional
    seed : int
        Seed of this star; the same seed gives identical results.
    checkpoint_path : path, optional
        HDF5 file for the chains (created, or resumed when it matches this fit).
    progress : callable, optional
        Called with the number of steps completed in each block.
    compare_aperiodic : bool
        Also optimise the aperiodic model (needed for the detection test; the
        calibration runs leave it out).

    Returns
    -------
    Posterior

    Warns
    -----
    ConvergenceWarning
        When a mode's ensembles reach ``max_steps`` without converging.
    """
    config = config or SamplerConfig()
    periods, starts = _starts_of(candidates)
    root = np.random.SeedSequence(int(seed))

    def child(*key):
        return np.random.SeedSequence(root.entropy, spawn_key=key)

    ckpt = None
    if checkpoint_path is not None:
        ckpt = Checkpoint(
            checkpoint_path, fingerprint=_fingerprint(model, periods, config, seed),
            also_accept=(_fingerprint(model, periods, config, seed,
                                      leave_out=_NOT_IN_LEGACY_FINGERPRINT),))
    stored = ckpt.load_json("modes") if ckpt is not None and ckpt.resumed else None
    auto = model.config.periodic_backgrounds == "auto"
    if stored is not None:
        modes = tuple(Mode.from_dict(d) for d in stored["modes"])
        aperiodic = Mode.from_dict(stored["aperiodic"]) if stored["aperiodic"] else None
        if auto and stored.get("periodic_backgrounds", 1) == 2:
            model = model.with_periodic_backgrounds(2)
    else:
        model, modes, aperiodic = optimise_star(model, candidates, config=config, seed=seed,
                                                compare_aperiodic=compare_aperiodic)
        if ckpt is not None:
            ckpt.save_json("modes", {"modes": [m.to_dict() for m in modes],
                                     "aperiodic": aperiodic.to_dict() if aperiodic else None,
                                     "periodic_backgrounds": len(model.background_suffixes)})
    if not modes:
        raise RuntimeError("no finite optimum of the rotation posterior was found")

    best = modes[0].rank_value
    competitive = [m for m in modes if m.rank_value >= best - config.competitive_log_evidence]
    competitive = competitive[: config.max_sampled_modes]
    basins = _basins([m.period for m in competitive], *model.period_range)

    runs = []
    for k, (mode, basin) in enumerate(zip(competitive, basins, strict=True)):
        target = model.restricted(basin) if len(competitive) > 1 else model
        run = run_ensembles(
            target, mode.theta, mode.laplace.covariance, config=config, seed=child(1, k),
            names=model.names, checkpoint=ckpt, group=f"mode{k}",
            label=f"mode at {mode.period:.4g} d", progress=progress,
            period_bounds=basin if len(competitive) > 1 else model.period_range,
        )
        runs.append((mode, basin, target, run))

    sampled = []
    if len(runs) == 1:
        mode, basin, _, run = runs[0]
        sampled.append(SampledMode(mode, basin, run, math.nan, math.nan, math.nan, 1.0))
    else:
        evid = []
        for k, (_, _, target, run) in enumerate(runs):
            evid.append(importance_log_evidence(
                target, _thin(run), n=config.importance_draws,
                rng=np.random.default_rng(child(2, k)),
            ))
        log_z = np.array([e[0] for e in evid])
        prob = np.exp(log_z - special.logsumexp(log_z))
        for (mode, basin, _, run), (lz, se, ess), p in zip(runs, evid, prob, strict=True):
            sampled.append(SampledMode(mode, basin, run, lz, se, ess, float(p)))

    parts, weights, labels = [], [], []
    for k, s in enumerate(sampled):
        draws = _thin(s.run)
        parts.append(draws)
        weights.append(np.full(len(draws), s.probability / len(draws)))
        labels.append(np.full(len(draws), k, dtype=np.int64))
    return Posterior(
        model=model, samples=np.concatenate(parts), weights=np.concatenate(weights),
        mode_of_sample=np.concatenate(labels), modes=modes, sampled=tuple(sampled),
        aperiodic=aperiodic, converged=all(s.run.converged for s in sampled),
    )
