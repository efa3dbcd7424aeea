"""Independent emcee ensembles run in blocks until they converge (or hit the cap).

Every ensemble uses a mixture of emcee moves suited to correlated and
possibly multimodal targets: differential evolution (``DEMove``, ter Braak
2006; Nelson et al. 2014), its snooker variant (``DESnookerMove``, ter Braak &
Vrugt 2008), which proposes jumps along lines through other walkers and so can
cross between separated regions, the affine-invariant stretch move
(``StretchMove``, Goodman & Weare 2010; off by default, it mixed slowest in our
trials), and an independence proposal from the Laplace approximation of the
mode (:class:`IndependenceMove`), which roughly halved the autocorrelation
time of the rotation posterior in our trials. Optionally (``[sampler] period_jump``), a
move that changes the period alone (:class:`PeriodJumpMove`): an independence proposal
for ``log_period`` from a fixed one-dimensional density over the mode's period range, a
component-wise Metropolis-Hastings update (Metropolis within Gibbs; e.g. Robert &
Casella 2004, ch. 10) that lets walkers jump between the separated small peaks of a
broad, rugged period posterior, which the ensemble moves cross only slowly.

A discarded warm-up (``[sampler] warmup_steps``) comes first: after it each
ensemble's independence proposal is refitted to the mean and covariance of the
second half of its own warm-up draws and then frozen, so the ensembles stay
independent and the sampling that follows is an exact MCMC whose proposal is
shaped like the posterior rather than like its Laplace approximation. The
warm-up is checkpointed too (groups ``<group>/warmup<e>``).

Randomness: each ensemble gets its own legacy ``RandomState`` (emcee's moves
draw from the sampler's ``RandomState``, never numpy's global one when its
state is set explicitly) seeded from a ``SeedSequence`` child of the star's
seed, and its starting positions come from a ``Generator`` seeded the same
way. The state after every block is stored, so a resumed run continues
exactly where the interrupted one stopped.

References
----------
Foreman-Mackey, D., Hogg, D. W., Lang, D. & Goodman, J. 2013, PASP 125, 306 (emcee).
Goodman, J. & Weare, J. 2010, CAMCoS 5, 65. ter Braak, C. J. F. 2006, Stat. Comput.
16, 239. ter Braak, C. J. F. & Vrugt, J. A. 2008, Stat. Comput. 18, 435.
Tierney, L. 1994, Annals of Statistics 22, 1701. Robert, C. P. & Casella, G. 2004,
Monte Carlo Statistical Methods, 2nd ed. (Springer), ch. 10. Silverman, B. W. 1986,
Density Estimation for Statistics and Data Analysis (Chapman & Hall), eq. 3.31.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import emcee
import numpy as np

from ..errors import ConvergenceWarning
from ._threads import single_blas_thread
from .checkpoint import Checkpoint
from .convergence import EnsembleDiagnostics
from .mcse import run_precision
from .settings import SamplerConfig

__all__ = ["EnsembleRun", "IndependenceMove", "PeriodJumpMove", "run_ensembles"]


@dataclass(frozen=True)
class EnsembleRun:
    """Chains of independent ensembles sampling one target.

    Attributes
    ----------
    chains : tuple of ndarray, each (n_steps, n_walkers, ndim)
        Full chains, burn-in included.
    log_prob : tuple of ndarray, each (n_steps, n_walkers)
    diagnostics : EnsembleDiagnostics
    """

    chains: tuple[np.ndarray, ...]
    log_prob: tuple[np.ndarray, ...]
    diagnostics: EnsembleDiagnostics

    @property
    def converged(self) -> bool:
        return self.diagnostics.converged

    def samples(self) -> np.ndarray:
        """Post-burn-in draws of all ensembles, flattened: shape (n, ndim)."""
        parts = [
            c[b:].reshape(-1, c.shape[2])
            for c, b in zip(self.chains, self.diagnostics.burn_in, strict=True)
        ]
        return np.concatenate(parts, axis=0)

    def sample_log_prob(self) -> np.ndarray:
        """Log posterior of the draws returned by :meth:`samples`."""
        parts = [
            lp[b:].ravel() for lp, b in zip(self.log_prob, self.diagnostics.burn_in, strict=True)
        ]
        return np.concatenate(parts)


class IndependenceMove(emcee.moves.MHMove):
    """Independence Metropolis-Hastings proposal from a fixed multivariate Student-t.

    Every walker proposes a fresh draw from t_df(loc, scale^2 cov), independent of
    its position, accepted with the Metropolis-Hastings ratio
    p(q) g(x) / (p(x) g(q)) (Tierney 1994). The proposal is fixed for the whole
    run (centred on the optimum, shaped by the Laplace covariance), so the chain
    is an exact MCMC; when the posterior is close to the Laplace approximation
    successive draws are nearly independent, and where it is not, the
    differential-evolution moves do the work.

    References
    ----------
    Tierney, L. 1994, Annals of Statistics 22, 1701.
    """

    def __init__(self, loc, cov, *, df: float = 4.0, scale: float = 1.5):
        self.loc = np.asarray(loc, dtype=float)
        self.df = float(df)
        cov = np.asarray(cov, dtype=float) * scale**2
        w, v = np.linalg.eigh(0.5 * (cov + cov.T))
        w = np.clip(w, 1e-300, None)
        self.root = v * np.sqrt(w)
        self.inv_root = (v / np.sqrt(w)).T
        super().__init__(self._propose)

    def _log_g(self, x):
        z = (x - self.loc) @ self.inv_root.T
        return -0.5 * (self.df + x.shape[1]) * np.log1p(np.sum(z * z, axis=1) / self.df)

    def _propose(self, coords, random):
        n, d = coords.shape
        z = random.standard_normal((n, d))
        u = random.chisquare(self.df, n)
        q = self.loc + (z @ self.root.T) * np.sqrt(self.df / u)[:, None]
        return q, self._log_g(coords) - self._log_g(q)


class PeriodJumpMove(emcee.moves.MHMove):
    """Independence proposal for one coordinate (the log period), the others kept.

    Each walker proposes a new value of column ``column`` from the fixed density

        g(x) = u / (hi - lo) 1[lo <= x <= hi] + (1 - u) mean_i Normal(x; c_i, h^2),

    a mixture of the uniform density over the period range ``[lo, hi]`` and a Gaussian
    kernel density estimate with centres ``c_i``, and every other coordinate unchanged;
    it is accepted with the ratio p(q) g(x_k) / (p(x) g(q_k)). Because g depends on
    neither the walker nor the other walkers, this is an exact component-wise
    Metropolis-Hastings update (Robert & Casella 2004, ch. 10). The uniform part reaches
    every period of the range, so the move can cross between separated period peaks;
    the kernel part proposes where the period posterior was found to lie (the centres
    are draws of the warm-up, frozen afterwards).

    Parameters
    ----------
    column : int
        Index of the coordinate (``log_period``).
    bounds : (float, float)
        ``lo, hi``: the range of that coordinate (ln days), finite.
    centres : array_like
        Kernel centres (ln days).
    bandwidth : float
        Kernel standard deviation ``h`` (ln days), positive.
    uniform_fraction : float
        ``u`` in [0, 1].

    References
    ----------
    Robert, C. P. & Casella, G. 2004, Monte Carlo Statistical Methods, 2nd ed., ch. 10.
    """

    def __init__(self, column, bounds, centres, bandwidth, *, uniform_fraction=0.5):
        self.column = int(column)
        self.lo, self.hi = (float(b) for b in bounds)
        if not (math.isfinite(self.lo) and math.isfinite(self.hi) and self.hi > self.lo):
            raise ValueError(f"period jump: need finite bounds lo < hi, got {bounds}")
        self.centres = np.atleast_1d(np.asarray(centres, dtype=float))
        self.bandwidth = float(bandwidth)
        if not self.bandwidth > 0 or self.centres.size == 0:
            raise ValueError("period jump: need at least one centre and a positive bandwidth")
        self.uniform_fraction = float(uniform_fraction)
        if not 0 <= self.uniform_fraction <= 1:
            raise ValueError(f"period jump: uniform_fraction must be in [0, 1], got "
                             f"{uniform_fraction}")
        super().__init__(self._propose)

    def log_density(self, x):
        """ln g(x) for an array of values ``x`` (ln days)."""
        x = np.asarray(x, dtype=float)
        z = (x[:, None] - self.centres[None, :]) / self.bandwidth
        kde = np.exp(-0.5 * z * z).mean(axis=1) / (self.bandwidth * math.sqrt(2 * math.pi))
        inside = (x >= self.lo) & (x <= self.hi)
        uniform = np.where(inside, 1.0 / (self.hi - self.lo), 0.0)
        with np.errstate(divide="ignore"):
            return np.log(self.uniform_fraction * uniform + (1 - self.uniform_fraction) * kde)

    def draw(self, n, random):
        """``n`` draws from g (``random``: a numpy ``RandomState``, as emcee passes)."""
        flat = random.uniform(self.lo, self.hi, n)
        pick = random.randint(0, self.centres.size, n)
        kernel = self.centres[pick] + self.bandwidth * random.standard_normal(n)
        return np.where(random.uniform(0.0, 1.0, n) < self.uniform_fraction, flat, kernel)

    def _propose(self, coords, random):
        q = coords.copy()
        q[:, self.column] = self.draw(coords.shape[0], random)
        factor = self.log_density(coords[:, self.column]) - self.log_density(q[:, self.column])
        return q, factor

    @classmethod
    def from_draws(cls, column, bounds, draws, *, max_centres=400, uniform_fraction=0.5):
        """The move with kernel centres at (evenly thinned) ``draws`` of the coordinate.

        The bandwidth is Silverman's rule, 0.9 min(sd, IQR / 1.34) n^(-1/5) (Silverman
        1986, eq. 3.31), with n the number of centres, and at least 1e-6 of the range.
        """
        draws = np.asarray(draws, dtype=float).ravel()
        draws = draws[np.isfinite(draws)]
        if draws.size > max_centres:
            draws = draws[np.linspace(0, draws.size - 1, max_centres).round().astype(int)]
        lo, hi = bounds
        floor = 1e-6 * (hi - lo)
        if draws.size < 2:
            return cls(column, bounds, draws if draws.size else [0.5 * (lo + hi)],
                       max(0.1 * (hi - lo), floor), uniform_fraction=uniform_fraction)
        q75, q25 = np.percentile(draws, [75, 25])
        spread = min(np.std(draws), (q75 - q25) / 1.34) or np.std(draws)
        h = 0.9 * spread * draws.size ** -0.2
        return cls(column, bounds, draws, max(h, floor), uniform_fraction=uniform_fraction)


def _moves(weights, start, covariance, scale, jump=None):
    de, snooker, stretch, independence = weights
    moves = [(emcee.moves.DEMove(), de), (emcee.moves.DESnookerMove(), snooker),
             (emcee.moves.StretchMove(), stretch)]
    if independence > 0:
        moves.append((IndependenceMove(start, covariance, scale=scale), independence))
    if jump is not None:
        moves.append(jump)
    return [(m, w) for m, w in moves if w > 0]


def _child(seed_seq: np.random.SeedSequence, *key: int) -> np.random.SeedSequence:
    # Deterministic children (SeedSequence.spawn is stateful, this is not).
    return np.random.SeedSequence(seed_seq.entropy, spawn_key=tuple(seed_seq.spawn_key) + key)


def _initial_positions(log_prob, start, covariance, n_walkers, scale, rng, label):
    ndim = start.size
    cov = np.asarray(covariance, dtype=float) * scale**2
    # a robust square root (the covariance may be nearly singular)
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    root = v * np.sqrt(np.clip(w, 1e-300, None))
    pos = np.empty((n_walkers, ndim))
    lp = np.full(n_walkers, -math.inf)
    todo = np.arange(n_walkers)
    for _ in range(200):
        if todo.size == 0:
            break
        pos[todo] = start + rng.standard_normal((todo.size, ndim)) @ root.T
        lp[todo] = [log_prob(p) for p in pos[todo]]
        todo = todo[~np.isfinite(lp[todo])]
        root *= 0.9  # shrink towards the optimum if draws keep failing
    if todo.size:
        raise RuntimeError(f"{label}: could not place walkers with finite log posterior")
    return pos, lp


def _adapted(chain, loc, cov):
    """Centre and covariance of the second half of a warm-up chain (Laplace ones if degenerate)."""
    draws = chain[chain.shape[0] // 2 :].reshape(-1, chain.shape[2])
    if draws.shape[0] > 2 * draws.shape[1]:
        centre = draws.mean(axis=0)
        spread = np.atleast_2d(np.cov(draws, rowvar=False))
        if np.all(np.isfinite(spread)) and np.all(np.isfinite(centre)):
            w = np.linalg.eigvalsh(0.5 * (spread + spread.T))
            if w[0] > 1e-12 * max(w[-1], 1e-300):
                return centre, spread
    return np.asarray(loc, dtype=float), np.asarray(cov, dtype=float)


class _Ensembles:
    """Mutable state of independent ensembles advancing together (optionally checkpointed)."""

    def __init__(self, groups, n_walkers, ndim):
        self.groups = groups
        self.shape = (n_walkers, ndim)
        k = len(groups)
        self.chains = [np.empty((0, n_walkers, ndim))] * k
        self.logps = [np.empty((0, n_walkers))] * k
        self.accepted = [np.zeros(n_walkers, dtype=np.int64)] * k
        self.coords = [None] * k
        self.lps = [None] * k
        self.rstates = [None] * k

    @classmethod
    def resume(cls, checkpoint, groups, n_walkers, ndim, label):
        """Ensembles restored from the last block every one of them completed."""
        self = cls(groups, n_walkers, ndim)
        if checkpoint is None:
            return self
        # an interruption can leave one ensemble a block ahead of another
        n_resume = min(checkpoint.stored_steps(g) for g in groups)
        for g in groups:
            if checkpoint.stored_steps(g) > n_resume:
                checkpoint.truncate(g, n_resume)
        if n_resume == 0:
            return self
        for e, g in enumerate(groups):
            saved = checkpoint.load_ensemble(g, n_resume)
            if saved is None or saved.chain.shape[1:] != self.shape:
                raise RuntimeError(
                    f"{label}: checkpoint ensembles do not match this run (walkers or "
                    "parameters differ); delete the checkpoint file"
                )
            self.chains[e] = saved.chain
            self.logps[e] = saved.log_prob
            self.accepted[e] = saved.accepted.astype(np.int64)
            self.coords[e] = saved.chain[-1].copy()
            self.lps[e] = saved.log_prob[-1].copy()
            self.rstates[e] = saved.random_state
        return self

    @property
    def n_steps(self) -> int:
        return self.chains[0].shape[0]

    def start_missing(self, make):
        """Give ensembles without a stored state their start: ``make(e)`` -> (pos, lp, rstate)."""
        for e in range(len(self.groups)):
            if self.coords[e] is None:
                self.coords[e], self.lps[e], self.rstates[e] = make(e)

    def advance(self, log_prob, moves, steps, checkpoint, names):
        """Run every ensemble ``steps`` steps with its moves; checkpoint each block."""
        n_walkers, ndim = self.shape
        for e in range(len(self.groups)):
            sampler = emcee.EnsembleSampler(n_walkers, ndim, log_prob, moves=moves[e])
            state = emcee.State(self.coords[e], log_prob=self.lps[e],
                                random_state=self.rstates[e])
            final = sampler.run_mcmc(state, steps, skip_initial_state_check=True)
            block = sampler.get_chain()
            block_lp = sampler.get_log_prob()
            self.accepted[e] = self.accepted[e] + sampler.backend.accepted.astype(np.int64)
            self.chains[e] = np.concatenate([self.chains[e], block], axis=0)
            self.logps[e] = np.concatenate([self.logps[e], block_lp], axis=0)
            self.coords[e] = final.coords.copy()
            self.lps[e] = final.log_prob.copy()
            self.rstates[e] = sampler.random_state
            if checkpoint is not None:
                checkpoint.append(self.groups[e], block, block_lp, self.accepted[e],
                                  self.rstates[e], names=names)


def _with_precision(diagnostics: EnsembleDiagnostics, chains, column: int, target: float):
    """The diagnostics with the ``[sampler] period_precision`` clause of the rule added."""
    value = run_precision(chains, diagnostics.burn_in, column)
    reasons = diagnostics.reasons
    if not value < target:
        reasons = (*reasons, f"period numbers not yet precise: largest Monte Carlo error "
                             f"{value:.3f} of its scale (need below {target:g})")
    return dataclasses.replace(diagnostics, period_precision=value,
                               converged=not reasons, reasons=reasons)


@single_blas_thread
def run_ensembles(
    log_prob: Callable[[np.ndarray], float],
    start,
    covariance,
    *,
    config: SamplerConfig,
    seed: np.random.SeedSequence | int,
    names=None,
    checkpoint: Checkpoint | None = None,
    group: str = "ensembles",
    label: str = "target",
    progress: Callable[[int], None] | None = None,
    period_bounds: tuple[float, float] | None = None,
) -> EnsembleRun:
    """Run ``config.n_ensembles`` independent ensembles until converged or capped.

    The ensembles advance together in blocks of ``config.check_every`` steps;
    after each block the diagnostics of :meth:`EnsembleDiagnostics.judge` are
    computed and sampling stops when the rule is met, or when the ensembles
    reach ``config.max_steps`` (then a :class:`~rotinfer.errors.ConvergenceWarning`
    is issued and the diagnostics say ``converged=False``).

    Parameters
    ----------
    log_prob : callable
        Log density of the target; must return ``-inf`` (never NaN) outside it.
    start : ndarray (ndim,)
        Centre of the initial walker distribution (e.g. the mode).
    covariance : ndarray (ndim, ndim)
        Local covariance there (e.g. the inverse Hessian); walkers start from
        Normal(start, (init_scale^2) covariance).
    config : SamplerConfig
    seed : SeedSequence or int
        Ensemble e uses the children (e, 0) (start positions) and (e, 1) (moves).
    names : sequence of str, optional
        Parameter names for the diagnostics.
    checkpoint : Checkpoint, optional
        Where chains are appended after each block and resumed from.
    group : str
        Prefix of this target's groups in the checkpoint.
    label : str
        How messages name this target.
    progress : callable, optional
        Called with the number of steps just completed by every ensemble.
    period_bounds : (float, float), optional
        The period range (days) the target allows; with ``config.period_jump > 0`` and
        a ``log_period`` parameter, the :class:`PeriodJumpMove` proposes over it (during
        the warm-up with its kernel at the start, afterwards at each ensemble's own
        warm-up draws, frozen).

    Returns
    -------
    EnsembleRun
    """
    seed_seq = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    start = np.asarray(start, dtype=float)
    ndim = start.size
    names = tuple(names) if names is not None else tuple(f"x{i}" for i in range(ndim))
    n_walkers = max(config.n_walkers, 2 * ndim + 2)
    column = names.index("log_period") if "log_period" in names else None
    jumping = config.period_jump > 0 and column is not None and period_bounds is not None
    log_bounds = (math.log(period_bounds[0]), math.log(period_bounds[1])) if jumping else None

    def jump(points, *, laplace=False):
        """The period-only move and its weight (None when off): before the warm-up one
        kernel at ``points`` (the start) as wide as the Laplace proposal, afterwards
        kernels at the periods of ``points`` (warm-up draws)."""
        if not jumping:
            return None
        centres = np.atleast_1d(np.asarray(points)[..., column]).ravel()
        if laplace:
            sd = math.sqrt(max(float(np.asarray(covariance)[column, column]), 1e-12))
            move = PeriodJumpMove(column, log_bounds, centres, config.independence_scale * sd)
        else:
            move = PeriodJumpMove.from_draws(column, log_bounds, centres)
        return move, config.period_jump

    laplace_moves = _moves(config.move_weights, start, covariance, config.independence_scale,
                           jump(start, laplace=True))
    n_ens = config.n_ensembles

    def fresh(e):
        init_rng = np.random.default_rng(_child(seed_seq, e, 0))
        pos, lp = _initial_positions(
            log_prob, start, covariance, n_walkers, config.init_scale, init_rng, label
        )
        rs = np.random.RandomState(np.random.MT19937(_child(seed_seq, e, 1)))
        return pos, lp, rs.get_state()

    # Phase 1, warm-up (discarded): the Laplace proposal, then each ensemble's independence
    # proposal is refitted to the second half of its own warm-up draws (so the ensembles stay
    # independent) and frozen for the rest of the run, which keeps the sampling exact.
    n_warm = config.warmup_steps
    if n_warm > 0:
        warm = _Ensembles.resume(
            checkpoint, [f"{group}/warmup{e}" for e in range(n_ens)], n_walkers, ndim, label
        )
        warm.start_missing(fresh)
        while warm.n_steps < n_warm:
            steps = min(config.check_every, n_warm - warm.n_steps)
            warm.advance(log_prob, [laplace_moves] * n_ens, steps, checkpoint, names)
            if progress is not None:
                progress(steps)
        moves = [
            _moves(config.move_weights, *_adapted(c, start, covariance), config.adapted_scale,
                   jump(c[c.shape[0] // 2:]))
            for c in warm.chains
        ]

        def after_warmup(e):
            return warm.coords[e].copy(), warm.lps[e].copy(), warm.rstates[e]
    else:
        moves = [laplace_moves] * n_ens
        after_warmup = fresh

    # Phase 2, sampling: blocks of check_every steps until the convergence rule holds or the cap.
    run = _Ensembles.resume(
        checkpoint, [f"{group}/ensemble{e}" for e in range(n_ens)], n_walkers, ndim, label
    )
    run.start_missing(after_warmup)
    judge_kwargs = dict(
        names=names, check_every=config.check_every, tau_multiple=config.tau_multiple,
        tau_rtol=config.tau_rtol, rhat_max=config.rhat_max, burn_in_tau=config.burn_in_tau,
        stuck_ratio=config.stuck_ratio, tau_noise_z=config.tau_noise_z,
    )
    diagnostics = None
    while True:
        n = run.n_steps
        if n > 0 and (n % config.check_every == 0 or n >= config.max_steps):
            diagnostics = EnsembleDiagnostics.judge(run.chains, run.accepted, **judge_kwargs)
            if config.period_precision > 0 and column is not None and (
                    diagnostics.converged or n >= config.max_steps):
                diagnostics = _with_precision(diagnostics, run.chains, column,
                                              config.period_precision)
            if diagnostics.converged or n >= config.max_steps:
                break
        steps = min(config.check_every - n % config.check_every, config.max_steps - n)
        run.advance(log_prob, moves, steps, checkpoint, names)
        if progress is not None:
            progress(steps)
    chains, logps = run.chains, run.logps

    if not diagnostics.converged:
        warnings.warn(
            ConvergenceWarning(
                f"{label}: NOT CONVERGED after {diagnostics.n_steps} steps per ensemble "
                f"(cap {config.max_steps}): " + "; ".join(diagnostics.reasons)
            ),
            stacklevel=2,
        )
    return EnsembleRun(chains=tuple(chains), log_prob=tuple(logps), diagnostics=diagnostics)
