"""Mode finding: optimise the posterior from many start periods, keep every distinct mode.

The period posterior of a spotted star is multimodal: the true period, its
half (two spots on opposite hemispheres) and its double (a light curve periodic
at P is periodic at 2P), and aliases. Each optimisation is therefore kept in a
window of periods around its start (``[sampler] period_window``) so that a start
at P/2 finds the P/2 mode, if there is one, rather than sliding to P; optima are
merged into modes when their periods agree within ``mode_tolerance``; and every
mode gets a Laplace estimate of its evidence so that modes can be compared.

Laplace evidence (e.g. MacKay 2003, ch. 27): with H the Hessian of minus the
log posterior at the mode, in the unconstrained space where the prior is
normalised, ln Z ~ ln p(D, theta*) + (d/2) ln 2 pi - (1/2) ln det H. H is
computed by central finite differences with a step per parameter chosen so
that the log posterior drops by ~0.1 along it. When H is not positive
definite the point is not a maximum of the (numerical) posterior: the
optimiser is restarted from both sides along the direction of negative
curvature (twice at most) and a higher point kept. If H is still not positive
definite the estimate is reported as unavailable (``laplace_valid=False``,
``log_evidence=nan``) rather than patched, and the mode is ranked by its peak
log posterior plus the typical Occam term of the valid modes (see
:attr:`Mode.rank_value`).

References
----------
MacKay, D. J. C. 2003, Information Theory, Inference, and Learning Algorithms,
ch. 27 (Laplace's method). Byrd, Lu, Nocedal & Zhu 1995, SIAM J. Sci. Comput. 16,
1190 (L-BFGS-B, via scipy.optimize.minimize).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import optimize

from ..model import RotationModel
from ._threads import single_blas_thread
from .settings import SamplerConfig

__all__ = ["Laplace", "Mode", "choose_periodic_backgrounds", "find_modes", "fit_aperiodic",
           "laplace", "relation"]


@dataclass(frozen=True)
class Laplace:
    """Laplace approximation at a maximum of the log posterior.

    Attributes
    ----------
    log_evidence : float
        ln Z estimate, NaN when the Hessian is not positive definite.
    covariance : ndarray (ndim, ndim)
        Inverse Hessian (when invalid: a positive-definite stand-in built from
        the finite-difference steps, good enough to place walkers).
    valid : bool
    note : str
    """

    log_evidence: float
    covariance: np.ndarray
    valid: bool
    note: str = ""


@dataclass(frozen=True)
class Mode:
    """One distinct maximum of the posterior.

    Attributes
    ----------
    theta : ndarray (ndim,)
        Position (unconstrained parameters).
    period : float
        Period at the maximum, days (NaN for the aperiodic model).
    log_posterior : float
        At the maximum (the posterior is prior x likelihood, normalised priors; with the
        mean integrated out, the marginal posterior).
    log_likelihood : float
        At the maximum, with the mean at its maximum-likelihood value when it is
        integrated out (:meth:`RotationModel.profile_log_likelihood`): what the
        information criterion of the detection test uses.
    laplace : Laplace
    n_optima : int
        How many optimisations ended in this mode.
    """

    theta: np.ndarray
    period: float
    log_posterior: float
    log_likelihood: float
    laplace: Laplace
    n_optima: int = 1
    occam: float = math.nan

    @property
    def log_evidence(self) -> float:
        return self.laplace.log_evidence

    @property
    def rank_value(self) -> float:
        """What modes are ranked by: the Laplace log evidence where it is valid; otherwise
        the peak log posterior plus ``occam``, the median (ln Z - peak) of the modes whose
        Laplace estimate is valid (the peak alone would favour such modes unfairly), or
        the bare peak when no mode has a valid estimate."""
        if self.laplace.valid:
            return self.laplace.log_evidence
        return self.log_posterior + (self.occam if math.isfinite(self.occam) else 0.0)

    def to_dict(self) -> dict:
        return {
            "theta": [float(v) for v in self.theta],
            "period": self.period,
            "log_posterior": self.log_posterior,
            "log_likelihood": self.log_likelihood,
            "log_evidence": self.laplace.log_evidence,
            "laplace_valid": self.laplace.valid,
            "laplace_note": self.laplace.note,
            "covariance": self.laplace.covariance.tolist(),
            "n_optima": self.n_optima,
            "occam": self.occam if math.isfinite(self.occam) else None,
        }

    @classmethod
    def from_dict(cls, d: dict) -> Mode:
        lap = Laplace(
            log_evidence=float(d["log_evidence"]) if d["log_evidence"] is not None else math.nan,
            covariance=np.array(d["covariance"], dtype=float),
            valid=bool(d["laplace_valid"]), note=d["laplace_note"],
        )
        return cls(
            theta=np.array(d["theta"], dtype=float), period=float(d["period"]),
            log_posterior=float(d["log_posterior"]), log_likelihood=float(d["log_likelihood"]),
            laplace=lap, n_optima=int(d["n_optima"]),
            occam=float(d["occam"]) if d.get("occam") is not None else math.nan,
        )


def relation(period: float, reference: float, tolerance: float) -> str:
    """Name the harmonic relation of ``period`` to ``reference``: "P", "P/2", "2P", ... or "other".

    A ratio within ``tolerance`` (fractional) of 1, 1/2, 2, 1/3 or 3 gets its name.
    """
    for name, ratio in (("P", 1.0), ("P/2", 0.5), ("2P", 2.0), ("P/3", 1 / 3), ("3P", 3.0)):
        if abs(math.log(period / (reference * ratio))) < math.log1p(tolerance):
            return name
    return "other"


# --------------------------------------------------------------------------- Laplace
def _steps(f, theta, f0, lo=1e-6, hi=3.0):
    """Per-parameter steps along which f drops by ~0.1 (a tenth of a unit of log density)."""
    steps = np.empty(theta.size)
    for i in range(theta.size):
        h = 1e-2
        for _ in range(12):
            e = np.zeros(theta.size)
            e[i] = h
            drop = f0 - 0.5 * (f(theta + e) + f(theta - e))
            if not np.isfinite(drop):
                h *= 0.2
            elif drop <= 1e-4:
                h *= 4.0
            elif drop > 1.0:
                h *= math.sqrt(0.1 / drop)
            else:
                break
            h = min(max(h, lo), hi)
        steps[i] = h
    return steps


def laplace(log_prob, theta) -> tuple[Laplace, np.ndarray]:
    """Laplace approximation of ``log_prob`` at its maximum ``theta``.

    Returns the :class:`Laplace` result and the Hessian of minus ``log_prob``.
    """
    theta = np.asarray(theta, dtype=float)
    d = theta.size
    f0 = float(log_prob(theta))
    h = _steps(log_prob, theta, f0)
    hess = np.empty((d, d))
    ev = {}

    def fval(shift):
        key = tuple(shift)
        if key not in ev:
            x = theta.copy()
            for i, s in enumerate(shift):
                x[i] += s * h[i]
            ev[key] = float(log_prob(x))
        return ev[key]

    zero = [0] * d
    for i in range(d):
        plus, minus = list(zero), list(zero)
        plus[i], minus[i] = 1, -1
        hess[i, i] = -(fval(plus) - 2 * f0 + fval(minus)) / h[i] ** 2
        for j in range(i):
            pp, pm, mp, mm = list(zero), list(zero), list(zero), list(zero)
            pp[i], pp[j] = 1, 1
            pm[i], pm[j] = 1, -1
            mp[i], mp[j] = -1, 1
            mm[i], mm[j] = -1, -1
            v = -(fval(pp) - fval(pm) - fval(mp) + fval(mm)) / (4 * h[i] * h[j])
            hess[i, j] = hess[j, i] = v
    fallback = np.diag(h**2 * 10.0)
    if not np.all(np.isfinite(hess)):
        note = "Hessian not finite (mode at a prior edge?)"
        return Laplace(math.nan, fallback, False, note), hess
    w, v = np.linalg.eigh(hess)
    if w.min() <= 0:
        n_bad = int(np.sum(w <= 0))
        # stand-in covariance for placing walkers: flip/raise bad eigenvalues
        w_fix = np.where(w > 0, w, np.maximum(np.abs(w), 1.0 / np.max(h) ** 2))
        cov = (v / w_fix) @ v.T
        note = f"Hessian not positive definite ({n_bad} non-positive eigenvalue(s))"
        return Laplace(math.nan, cov, False, note), hess
    cov = (v / w) @ v.T
    log_z = f0 + 0.5 * d * math.log(2 * math.pi) - 0.5 * float(np.sum(np.log(w)))
    return Laplace(log_z, 0.5 * (cov + cov.T), True, ""), hess


# ---------------------------------------------------------------------- optimisation
def _bounds(model: RotationModel, window_lo=None, window_hi=None):
    """Box for L-BFGS-B: the period window, and +-8 prior sd (or the logit range) elsewhere."""
    bounds = []
    for name, prior in model._priors.items():
        if name == "log_period":
            lo, hi = prior.a, prior.b
            if window_lo is not None:
                lo, hi = max(lo, window_lo), min(hi, window_hi)
            bounds.append((lo, hi))
        elif prior.kind == "normal":
            bounds.append((prior.a - 8 * prior.b, prior.a + 8 * prior.b))
        elif prior.kind == "logit-beta":
            bounds.append((-12.0, 12.0))
        else:
            bounds.append((prior.a, prior.b))
    return bounds


def _minimise(model, x0, bounds):
    def objective(x):
        v = model(x)
        return -v if math.isfinite(v) else 1e30

    best = None
    x = np.clip(x0, [b[0] for b in bounds], [b[1] for b in bounds])
    f0 = objective(x)
    for round_ in range(2):  # a restart from the first result polishes L-BFGS-B's answer
        res = optimize.minimize(objective, x, method="L-BFGS-B", bounds=bounds,
                                options={"maxiter": 2000, "maxfun": 20000})
        if round_ == 0 and not res.fun < f0 - 1e-6:
            # L-BFGS-B made no progress: its finite-difference line search can land only
            # on points where the likelihood fails (-inf) and then stops where it began.
            # Powell's derivative-free search gets away from such a start.
            res = optimize.minimize(objective, x, method="Powell", bounds=bounds,
                                    options={"maxfev": 20000})
        if best is None or res.fun < best.fun:
            best = res
        x = res.x
    return best.x, -best.fun


def _data_scales(model: RotationModel):
    sd = float(np.std(model.flux))
    err = float(np.median(model.flux_err)) if np.any(model.flux_err > 0) else 0.0
    diff = float(np.median(np.abs(np.diff(model.flux)))) / math.sqrt(2) / 0.6745
    noise = max(err, diff, 1e-7)
    signal = math.sqrt(max(sd**2 - noise**2, (0.3 * sd) ** 2, 1e-14))
    return signal, noise, float(np.median(model.flux))


def _night_scale(model: RotationModel) -> float:
    """Starting night-offset scatter: half the scatter of the nightly means (relative flux)."""
    if model.night is None:
        return 1e-3
    means = (np.bincount(model.night, weights=model.flux)
             / np.bincount(model.night).clip(min=1))
    return max(0.5 * float(np.std(means)), 1e-5)


def _starts(model: RotationModel, period: float, n: int, rng: np.random.Generator):
    signal, noise, level = _data_scales(model)
    base = [(3.0, 0.3), (30.0, 0.6), (1.0, 0.1), (100.0, 0.9)]
    out = []
    for k in range(n):
        coh, f = base[k] if k < len(base) else (
            float(np.exp(rng.uniform(0, 5))), float(rng.uniform(0.05, 0.95))
        )
        nat = dict(
            period=period, sigma=signal, coherence_rotations=coh,
            f=f * model.config.max_secondary_fraction, r=0.5,
            background_sigma=0.3 * signal, background_tau=max(period / 3.0, 0.05),
            jitter=0.5 * noise, mean=level, night_offset=_night_scale(model),
        )
        if len(model.background_suffixes) == 2:
            # ordered by damping time: a fast one (granulation) and a slow one (drifts)
            nat.update(background_tau=0.05, background2_sigma=0.3 * signal,
                       background2_tau=max(period / 3.0, 0.5))
        out.append(model.pack(**nat))
    return out


def _optimise_from(model, x0, config):
    """Optimise with the period held within a window around the start (re-centred twice)."""
    w = math.log(config.period_window)
    prior = model._priors["log_period"]
    # A displaced start (saddle escape) can lie outside the prior's period range: the
    # window is centred on the nearest allowed period so that it is never empty.
    centre = min(max(float(x0[0]), prior.a), prior.b)
    x, lp = x0, -math.inf
    for _ in range(3):
        bounds = _bounds(model, centre - w, centre + w)
        x, lp = _minimise(model, x, bounds)
        lo, hi = bounds[0]
        at_edge = (x[0] - lo < 1e-4 and lo > model._priors["log_period"].a) or (
            hi - x[0] < 1e-4 and hi < model._priors["log_period"].b
        )
        if not at_edge:
            break
        centre = x[0]
    return x, lp


@single_blas_thread
def find_modes(
    model: RotationModel, candidate_periods, *, config: SamplerConfig, rng: np.random.Generator,
    extra_optima=(),
) -> tuple[Mode, ...]:
    """Optimise from each candidate period, its half and its double; return distinct modes.

    Parameters
    ----------
    model : RotationModel
        The periodic model.
    candidate_periods : sequence of float or CandidateSet
        Start periods in days; each is used with its half and its double. A
        :class:`rotinfer.periodogram.CandidateSet` is used as it is, because it
        already holds the halves and doubles of the periodogram peaks.
    config : SamplerConfig
    rng : Generator
        For starts beyond the fixed ones.
    extra_optima : sequence of (float, ndarray)
        Optima found elsewhere, ``(log posterior, theta)``, pooled with these.

    Returns
    -------
    tuple of Mode
        Sorted by decreasing rank value (Laplace log evidence where valid).
    """
    # A CandidateSet from the periodogram stage already holds the half and the double of
    # each method's peaks (relation "half"/"double"); plain periods get them added here.
    factors = (1.0, 0.5, 2.0)
    if hasattr(candidate_periods, "candidates"):
        candidate_periods = candidate_periods.periods()
        factors = (1.0,)
    elif hasattr(candidate_periods, "periods"):
        candidate_periods = candidate_periods.periods()
    lo, hi = model.period_range
    tol = math.log1p(config.mode_tolerance)
    starts: list[float] = []

    def add(p):
        p = float(p)
        if lo <= p <= hi and np.isfinite(p) and all(abs(math.log(p / q)) > tol for q in starts):
            starts.append(p)

    for p in candidate_periods:
        for factor in factors:
            add(p * factor)
    n_grid = config.grid_periods if starts else max(config.grid_periods, 6)
    if n_grid:
        for p in np.exp(np.linspace(math.log(lo), math.log(hi), n_grid + 2)[1:-1]):
            add(p)

    optima = []
    for p in starts:
        for x0 in _starts(model, p, config.starts_per_period, rng):
            x, lp = _optimise_from(model, x0, config)
            if math.isfinite(lp):
                optima.append((lp, x))
    optima.extend((float(lp), np.asarray(x)) for lp, x in extra_optima if math.isfinite(lp))
    optima.sort(key=lambda o: -o[0])

    groups: list[list] = []  # [lp, x, count]
    for lp, x in optima:
        for g in groups:
            if abs(x[0] - g[1][0]) < tol:
                g[2] += 1
                break
        else:
            groups.append([lp, x, 1])

    found = []
    for lp, x, count in groups:
        x, lp, lap = _escape_saddle(model, x, lp, config)
        found.append((lp, x, count, lap))
    # an escape can move an optimum onto another mode: merge again, keeping the best
    found.sort(key=lambda o: -o[0])
    merged: list[list] = []
    for lp, x, count, lap in found:
        for g in merged:
            if abs(x[0] - g[1][0]) < tol:
                g[2] += count
                break
        else:
            merged.append([lp, x, count, lap])
    occams = [lap.log_evidence - lp for lp, _, _, lap in merged if lap.valid]
    occam = float(np.median(occams)) if occams else math.nan
    modes = [
        Mode(theta=np.array(x), period=math.exp(x[0]), log_posterior=float(lp),
             log_likelihood=model.profile_log_likelihood(x), laplace=lap, n_optima=count,
             occam=occam)
        for lp, x, count, lap in merged
    ]
    modes.sort(key=lambda m: -m.rank_value)
    return tuple(modes)


def _escape_saddle(model, x, lp, config, tries: int = 2):
    """Laplace at an optimum; where the Hessian is not positive definite, re-optimise from
    points displaced both ways along the direction of negative curvature (the optimiser
    stopped at a saddle or on a ridge) and keep a higher point if one is found."""
    lap, hess = laplace(model, x)
    for _ in range(tries):
        if lap.valid or not np.all(np.isfinite(hess)):
            break
        w, v = np.linalg.eigh(hess)
        direction = v[:, int(np.argmin(w))]
        scale = math.sqrt(float(direction @ lap.covariance @ direction))
        best = None
        for sign in (1.0, -1.0):
            x_try, lp_try = _optimise_from(model, x + sign * scale * direction, config)
            if math.isfinite(lp_try) and (best is None or lp_try > best[1]):
                best = (x_try, lp_try)
        if best is None or best[1] <= lp + 1e-6:
            break
        x, lp = best
        lap, hess = laplace(model, x)
    return x, lp, lap


def _bic(model: RotationModel, x) -> float:
    """Bayesian information criterion k ln N - 2 ln L (Schwarz 1978) at ``x``: k counts the
    mean when it is integrated out, and L is then maximised in it
    (:meth:`RotationModel.profile_log_likelihood`), so the statistic is the same as with
    the mean sampled (up to where the optimum lies)."""
    return (model.n_parameters * math.log(model.time.size)
            - 2.0 * model.profile_log_likelihood(x))


@single_blas_thread
def choose_periodic_backgrounds(
    model: RotationModel, modes, candidate_periods, *, config: SamplerConfig,
    rng: np.random.Generator,
) -> tuple[RotationModel, tuple[Mode, ...]]:
    """One or two background oscillators in the rotation model, whichever the BIC prefers.

    Each of the best ``max_sampled_modes`` modes of the one-oscillator model (by
    log posterior) is extended by a weak second oscillator at damping times from
    0.02 to 20 d (ordered by damping time) and re-optimised, so each nested fit
    starts where the smaller model's optimum is. When the best of them has a lower
    BIC than the best one-oscillator mode, the modes are searched again with two
    oscillators (the nested optima pooled with them) and those are returned.

    Why: a light curve whose noise has two timescales (granulation and slower
    drifts) gives one oscillator two places to be; separate ensembles then settle
    on different ones and never agree (R-hat far above 1), while two oscillators
    describe both and the posterior has one mode (BENCHMARKS.md, section 1b).

    Returns
    -------
    (RotationModel, tuple of Mode)
        The chosen model and its modes (the inputs unchanged when one is kept).
    """
    if not (model.periodic and model.has_background and modes
            and len(model.background_suffixes) == 1):
        return model, tuple(modes)
    two = model.with_periodic_backgrounds(2)
    ranked = sorted(modes, key=lambda m: -m.log_posterior)
    nested = []
    for mode in ranked[: max(config.max_sampled_modes, 1)]:
        values = dict(zip(model.names, (float(v) for v in mode.theta), strict=True))
        amp, tau = values["log_background_amplitude"], values["log_background_timescale"]
        weak = amp + math.log(0.1)
        for new_tau in (0.02, 0.2, 2.0, 20.0):
            t_new = math.log(new_tau)
            if abs(t_new - tau) < math.log(3.0):
                continue
            v = dict(values)
            if t_new < tau:  # the new one is the faster: it takes the first place
                v.update(log_background_amplitude=weak, log_background_timescale=t_new,
                         log_background2_amplitude=amp, log_background2_timescale=tau)
            else:
                v.update(log_background2_amplitude=weak, log_background2_timescale=t_new)
            x, lp = _optimise_from(two, np.array([v[n] for n in two.names]), config)
            if math.isfinite(lp):
                nested.append((lp, x))
    best = ranked[0]
    best2 = max(nested, key=lambda o: o[0]) if nested else None
    if best2 is None or not _bic(two, best2[1]) < _bic(model, best.theta):
        return model, tuple(modes)
    modes2 = find_modes(two, candidate_periods, config=config, rng=rng, extra_optima=nested)
    return two, modes2


def _fit_backgrounds(null: RotationModel) -> list:
    """Posterior maxima of aperiodic models with 2, 3, ... n background oscillators.

    Returns ``[(model, lp, x), ...]`` for 2 up to the ``n`` of ``null``. Two
    oscillators: three starts, short to long damping times. More: the optimum with
    one oscillator fewer (fitted first) extended by a weak extra oscillator at several
    damping times, besides the same starts, so that a nested model is never fitted
    worse than the smaller one it contains.
    """
    suffixes = null.background_suffixes
    n = len(suffixes)
    signal, noise, level = _data_scales(null)
    baseline = float(null.time[-1] - null.time[0]) if null.time.size > 1 else 1.0
    # Starting damping times (days), short to long; the first n of each set.
    sets = ((0.05, 3.0, 0.5, 30.0), (0.3, max(baseline / 5.0, 1.0), 0.03, 3.0),
            (0.02, 0.5, 5.0, 0.1))
    starts = []
    for taus in sets:
        nat = dict(jitter=0.5 * noise, mean=level, night_offset=_night_scale(null))
        for suffix, tau in zip(suffixes, taus, strict=False):
            nat[f"background{suffix}_sigma"] = 0.7 * signal
            nat[f"background{suffix}_tau"] = tau
        starts.append(null.pack(**nat))
    fits = []
    if n > 2:
        smaller = replace(null, config=replace(null.config, max_comparison_backgrounds=n - 1))
        fits = _fit_backgrounds(smaller)
        nat = smaller.unpack(fits[-1][2])
        for tau in (0.05, 0.5, 5.0, max(baseline / 5.0, 1.0)):
            nat[f"background{suffixes[-1]}_sigma"] = 0.1 * signal
            nat[f"background{suffixes[-1]}_tau"] = tau
            starts.append(null.pack(**nat))
    best = None
    for x0 in starts:
        x, lp = _minimise(null, x0, _bounds(null))
        if best is None or lp > best[0]:
            best = (lp, x)
    return fits + [(null, best[0], best[1])]


@single_blas_thread
def fit_aperiodic(model: RotationModel, *, config: SamplerConfig) -> Mode:
    """Maximum and Laplace evidence of the aperiodic comparison model.

    The comparison model is the best, by the Bayesian information criterion
    (Schwarz 1978) at the posterior maximum, of the aperiodic models with 2, 3, ...
    ``[model] max_comparison_backgrounds`` background oscillators: the null
    hypothesis "no rotation" is given as many aperiodic components as the data
    support, and no more (an unneeded oscillator would cost its two parameters in
    the BIC and so lower the bar for rotation). The returned mode's ``theta`` has the
    chosen model's length (2 parameters per oscillator + jitter + mean).

    Its ``n`` oscillators share one prior, so the posterior has ``n!`` mirror-image
    modes (the oscillators permuted); the Laplace estimate at one of them is raised
    by ln n! to count them all (exact when they are well separated, too high by at
    most ln n! when they overlap).
    """
    fits = []
    for null, lp, x in _fit_backgrounds(model.aperiodic()):
        fits.append((_bic(null, x), null, lp, x, null.profile_log_likelihood(x)))
    _, null, lp, x, loglike = min(fits, key=lambda f: f[0])
    lap, _ = laplace(null, x)
    if lap.valid:
        n = len(null.background_suffixes)
        lap = Laplace(lap.log_evidence + math.lgamma(n + 1.0), lap.covariance, True,
                      f"{n} background oscillators (best BIC of 2-{len(fits) + 1}); ln {n}! "
                      "added for the mirror-image modes (oscillators permuted)")
    return Mode(theta=np.array(x), period=math.nan, log_posterior=float(lp),
                log_likelihood=loglike, laplace=lap)
