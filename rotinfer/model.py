"""The quasi-periodic Gaussian-process model of a rotating, spotted star.

The light curve (relative flux, normalised to median 1 per segment by
:func:`rotinfer.prepare.prepare`) is modelled as

    flux = mean + rotation(t) + background(t) + white noise,

* ``rotation`` — celerite2's :class:`~celerite2.terms.RotationTerm`: two
  stochastically driven damped harmonic oscillators (SHOs), one at the period
  ``P`` and one at ``P/2`` (Foreman-Mackey et al. 2017). ``P`` is the period of
  the autocorrelation, i.e. the rotation period.
* ``background`` (optional, on by default) — one aperiodic SHO with
  ``Q = 1/sqrt(2)`` (Harvey-like granulation profile, Foreman-Mackey et al. 2017
  section 5) that absorbs granulation and slow drifts the rotation term should
  not have to explain. ``periodic_backgrounds = 2`` gives the rotation model a
  second one, ordered by damping time (the first the faster), for light curves
  whose noise has two timescales: with one, such a posterior can have two modes
  (the oscillator on the fast noise or on the slow) that separate ensembles
  settle on differently (R-hat far above 1; BENCHMARKS.md, section 1b).
* night offsets (``night_offsets``; "auto" by default: on for nightly sampling) — ground-based
  photometry has a zero-point offset per night (comparison stars, airmass, clouds)
  that the rotation term would otherwise have to explain, so that posteriors lock on
  the day. Each night's offset is Normal(0, sigma_night^2), integrated out
  analytically at the cost of one celerite column (:meth:`RotationModel.log_likelihood`);
  sigma_night is sampled. "auto" applies it to nightly sampling (:func:`is_nightly`).
  A background oscillator whose damping time is near the length of a night correlates
  points within a night and hardly between nights, so it can take up part of the offsets:
  the two are then only jointly identified, and the period is marginalised over both.
* white noise — the per-point variance is ``flux_err**2 + jitter**2``. The
  jitter term is always fitted: it matters most when the input had no
  uncertainties and ``prepare`` had to estimate them from the scatter.
* The aperiodic *comparison* model (for the detection test) has no rotation
  term and two or more background oscillators, as many as the BIC supports up
  to ``max_comparison_backgrounds`` (3), so that the question it answers is
  whether a variability component is better described as a rotation mode than
  as one more aperiodic one. With one background term only, a rotation term of
  low coherence wins on any star whose noise has two timescales (granulation
  and slow drifts); with two always, it still won on simulated one-year space
  light curves whose noise has three (granulation, the settling ramps after
  each downlink gap, a slow wander), calling 7 of 16 such null stars periodic;
  with three always, the two parameters of an unneeded oscillator lower the
  bar for rotation by 2 ln N on every other star (BENCHMARKS.md, section 3).
* ``mean`` — one mean shared by all segments. Preparation has already divided
  each segment by its median, so the segments share a level of 1 by
  construction; a free mean per segment would add parameters that trade off
  against the long-timescale part of the GP (offsets and slow variability are
  not separately identifiable within one segment) and slow the sampler, while
  gaining nothing the normalisation has not already done. By default the shared
  mean is *integrated out analytically* (``marginalise_mean = true``): with its
  Gaussian prior N(mu0, s0^2) the marginal likelihood is that of a GP with the
  covariance K + s0^2 1 1^T (Rasmussen & Williams 2006, section 2.7), evaluated
  from the celerite factorisation of K by the matrix determinant lemma and the
  Sherman-Morrison formula (one extra right-hand side in the triangular solve).
  Sampled instead, the mean trades off against a slow background oscillator, and
  that pair set the run length: on a simulated sector with drifts, from the same mode,
  the mean's autocorrelation time was 61-80 steps and the ensembles needed 3,400-4,600
  steps; integrated out, 1,200-1,600 (800 and 600 on a star without drifts;
  ``benchmarks/bench_mean.py``, BENCHMARKS.md section 6). Its conditional posterior
  given the other parameters is Gaussian
  (:meth:`RotationModel.mean_posterior`) and is used for predictions.

Parameters are sampled in an unconstrained space (logs and logits); every
prior is proper and normalised in that space, so the log posterior can be
compared between models (periodic against aperiodic, mode against mode).

==========================  =====================================================
sampled parameter           meaning
==========================  =====================================================
``log_period``              ln P, P in days; prior uniform in ln P (log-uniform
                            in P) between the period limits
``log_amplitude``           ln sigma_rot, standard deviation of the rotation
                            signal in relative flux (reported in ppt)
``log_coherence``           ln(tau_coh / P): the damping time of the mode at P in
                            rotations, tau_coh = P sqrt(4 Q1^2 - 1) / (2 pi)
                            (~ Q1 P / pi for Q1 >> 1)
``logit_secondary_fraction`` f / f_max: fraction of the rotation variance in the
                            P/2 mode is f / (1 + f)
``logit_secondary_quality`` r: Q0 = r (Q1 - 1/2), dQ = (1 - r)(Q1 - 1/2), so the
                            P/2 mode's quality factor is at most the mode at P's
                            (it then decays at least twice as fast); with
                            ``secondary_coherence = "time"`` its damping time is
                            r tau_coh (dQ may then be negative)
``log_background_amplitude`` ln sigma_bg (relative flux)
``log_background_timescale`` ln tau_bg, damping time of the background in days
``log_background2_*``, ...  further background oscillators (aperiodic model only)
``log_night_offset``        ln sigma_night, scatter of the per-night offsets (relative
                            flux); only with the night term
``log_jitter``              ln s, extra white noise (relative flux)
``mean``                    shared mean level (relative flux); only when
                            ``marginalise_mean = false``
==========================  =====================================================

Why these priors (the harmonic traps). A light curve periodic at P is also
periodic at 2P, so a rotation term at 2P whose P/2 mode (which sits at P) is
strong fits it almost as well as the term at P; samplers then drift to 2P.
Two constraints close that door without forbidding anything physical: the mode
at P carries at least as much variance as the mode at P/2 (``f <= f_max = 1``
by default), and it is at least as coherent (``dQ >= 0``). With them a kernel
at 2P must put half of its variance into a coherent oscillation at 2P, which
data without power at 2P rejects. The opposite trap — two spots on opposite
hemispheres giving most power at P/2 — is not forbidden by any prior: it shows
up as competing modes at P and P/2, which :mod:`rotinfer.sample` compares
explicitly and reports with their probabilities.

References
----------
Foreman-Mackey, D., Agol, E., Ambikasaran, S. & Angus, R. 2017, AJ 154, 220
(celerite: SHO kernels, O(N J^2) likelihood, the rotation example).
celerite2 documentation, ``RotationTerm`` (parameter mapping; see
REFERENCES.md "celerite2 rotation term").
Rasmussen, C. E. & Williams, C. K. I. 2006, Gaussian Processes for Machine Learning,
section 2.7 (a mean with a Gaussian prior integrated out).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import celerite2
import numpy as np
from celerite2 import driver as _driver
from celerite2 import terms
from celerite2.driver import LinAlgError as CeleriteLinAlgError
from scipy import special

from .errors import ConfigError, InputError
from .lightcurve import PreparedLightCurve

__all__ = [
    "ModelConfig",
    "RotationModel",
    "coherence_from_quality",
    "is_nightly",
    "night_index",
    "quality_from_coherence",
]

#: Quality factor of the aperiodic background oscillator (critically damped
#: "granulation" profile; Foreman-Mackey et al. 2017, section 5).
BACKGROUND_Q = 1.0 / math.sqrt(2.0)
_LN_2PI = math.log(2.0 * math.pi)
_EMPTY = np.empty(0)
#: Two-sided 95 % point of the standard normal (Phi^-1(0.975)).
_Z95 = 1.959963984540054
#: Allowed values of ``[model] night_offsets``.
#: How the P/2 mode's coherence is bounded by the mode at P (``[model] secondary_coherence``).
SECONDARY_COHERENCE_CHOICES = ("quality", "time")
#: Model options added later, each with the value that gives the model as it was before the
#: option existed: at that value they stay out of checkpoint fingerprints (and the
#: population benchmark's key), so that earlier chains still resume.
EARLIER_MODEL_VALUES = {"secondary_coherence": "quality"}
NIGHT_OFFSET_CHOICES = ("off", "auto", "on")
#: ``is_nightly``: fewest nights, and the longest median night (days), of nightly sampling.
NIGHTLY_MIN_NIGHTS = 10
NIGHTLY_MAX_MEDIAN_DAYS = 0.6
NIGHTLY_MIN_POINTS = 3
#: The night term's exponent c x (spacing of consecutive night centres): its covariance
#: between nights is exp(-39) ~ 1e-17 of that within a night, below double precision.
_NIGHT_DECAY = 39.0


@dataclass(frozen=True)
class ModelConfig:
    """Options of the rotation model (``[model]`` table of the configuration).

    Ranges given as ``[lo, hi]`` define a log-normal prior whose central 95 %
    lies between ``lo`` and ``hi``: ln x ~ Normal((ln lo + ln hi)/2,
    (ln hi - ln lo)/3.92). Log-normal rather than log-uniform so that the prior
    is smooth and proper, which the Laplace evidence needs when the data say
    nothing about a parameter (its Hessian then keeps the prior's curvature).

    Attributes
    ----------
    period_range : list of two floats, optional
        Period prior limits in days. Default: the prepared light curve's
        ``min_period`` and ``max_period``. The prior is log-uniform in between.
    amplitude_ppt : [lo, hi]
        95 % prior range of the rotation signal's standard deviation, ppt.
    coherence_rotations : [lo, hi]
        95 % prior range of the coherence time of the mode at P, in rotations.
    max_secondary_fraction : float
        f_max: the P/2 mode carries at most f_max / (1 + f_max) of the rotation
        variance (1 means at most half).
    secondary_fraction_beta, secondary_quality_beta : [a, b]
        Beta(a, b) priors on f / f_max and on r (``Beta(1, 1)`` is uniform).
    secondary_coherence : {"quality", "time"}
        What bounds the P/2 mode's coherence by the mode at P's. "quality" (default,
        celerite2's ``dQ >= 0`` convention): its quality factor is r x that of the mode
        at P (Q0 = r (Q1 - 1/2)), so its damping time is at most half the mode at P's.
        "time": its damping time is r x tau_coh, as for the harmonic of one spot pattern
        that grows and decays as a whole (both Fourier components share its envelope);
        Q2 may then exceed Q1 (celerite2's ``dQ`` negative).
    background : bool
        Include the aperiodic background oscillator.
    background_amplitude_ppt : [lo, hi]
        95 % prior range of the background standard deviation, ppt.
    background_timescale_days : [lo, hi]
        95 % prior range of the background damping time, days.
    jitter_ppt : [lo, hi]
        95 % prior range of the extra white noise, ppt.
    periodic_backgrounds : int or "auto"
        Background oscillators of the rotation model when ``background`` is on: 1,
        2 (ordered by damping time; the prior on the pair is the shared one truncated
        to that order and doubled, so it stays normalised), or "auto" (default): 2
        where the BIC at the posterior maximum supports the second, else 1
        (:func:`rotinfer.sample.choose_periodic_backgrounds`).
    max_comparison_backgrounds : int
        Most background oscillators of the aperiodic comparison model (detection
        test), each with the background priors: 2, 3 (default) or 4. The
        comparison uses the best by BIC of 2 up to this many
        (:func:`rotinfer.sample.fit_aperiodic`).
    mean : [centre, sd]
        Normal prior on the shared mean (relative flux).
    marginalise_mean : bool
        Integrate the shared mean out analytically under its prior (default) rather
        than sample it as a parameter.
    night_offsets : {"off", "auto", "on"}
        A zero-point offset per night (ground-based photometry), integrated out
        analytically: a covariance term sigma_night^2 within each night and zero
        between nights, sigma_night sampled (:func:`night_index`). "auto" turns it on
        where the sampling is nightly (:func:`is_nightly`; default); "on" always; "off"
        never.
    night_offset_ppt : [lo, hi]
        95 % prior range of sigma_night, ppt.
    night_gap_hours : float
        A gap at least this long between two points starts a new night, hours.
    """

    period_range: tuple[float, ...] | None = None
    amplitude_ppt: tuple[float, ...] = (0.01, 300.0)
    coherence_rotations: tuple[float, ...] = (0.5, 200.0)
    max_secondary_fraction: float = 1.0
    secondary_fraction_beta: tuple[float, ...] = (1.0, 1.0)
    secondary_quality_beta: tuple[float, ...] = (1.0, 1.0)
    secondary_coherence: str = "quality"
    background: bool = True
    background_amplitude_ppt: tuple[float, ...] = (0.01, 300.0)
    background_timescale_days: tuple[float, ...] = (0.01, 30.0)
    jitter_ppt: tuple[float, ...] = (0.001, 100.0)
    max_comparison_backgrounds: int = 3
    periodic_backgrounds: int | str = "auto"
    mean: tuple[float, ...] = (1.0, 0.05)
    marginalise_mean: bool = True
    night_offsets: str = "auto"
    night_offset_ppt: tuple[float, ...] = (0.01, 30.0)
    night_gap_hours: float = 6.0

    def __post_init__(self):
        def pair(name, positive=True, increasing=True):
            value = getattr(self, name)
            if value is None:
                return
            if len(value) != 2 or not all(np.isfinite(value)):
                raise ConfigError(f"[model] {name}: expected two finite numbers, got {value!r}")
            if positive and min(value) <= 0:
                raise ConfigError(f"[model] {name}: values must be positive, got {value!r}")
            if increasing and not value[0] < value[1]:
                raise ConfigError(f"[model] {name}: need lo < hi, got {value!r}")

        pair("period_range")
        for name in (
            "amplitude_ppt", "coherence_rotations", "background_amplitude_ppt",
            "background_timescale_days", "jitter_ppt", "night_offset_ppt",
        ):
            pair(name)
        pair("secondary_fraction_beta", increasing=False)
        pair("secondary_quality_beta", increasing=False)
        pair("mean", positive=False, increasing=False)
        if self.mean[1] <= 0:
            raise ConfigError(f"[model] mean: the prior sd must be positive, got {self.mean!r}")
        n_bg = self.max_comparison_backgrounds
        if isinstance(n_bg, bool) or not isinstance(n_bg, int) or not 2 <= n_bg <= 4:
            raise ConfigError(
                f"[model] max_comparison_backgrounds: allowed 2, 3 or 4, got {n_bg!r}"
            )
        n_pb = self.periodic_backgrounds
        if isinstance(n_pb, bool) or n_pb not in (1, 2, "auto"):
            raise ConfigError(
                f"[model] periodic_backgrounds: allowed 1, 2 or \"auto\", got {n_pb!r}")
        if self.secondary_coherence not in SECONDARY_COHERENCE_CHOICES:
            raise ConfigError(
                "[model] secondary_coherence: allowed "
                f"{', '.join(map(repr, SECONDARY_COHERENCE_CHOICES))}, "
                f"got {self.secondary_coherence!r}")
        if self.night_offsets not in NIGHT_OFFSET_CHOICES:
            raise ConfigError(
                f"[model] night_offsets: allowed {', '.join(map(repr, NIGHT_OFFSET_CHOICES))}, "
                f"got {self.night_offsets!r}")
        gap = self.night_gap_hours
        if isinstance(gap, bool) or not (isinstance(gap, int | float) and 0 < gap < 24):
            raise ConfigError(f"[model] night_gap_hours: must be in (0, 24) hours, got {gap!r}")
        if not (np.isfinite(self.max_secondary_fraction) and self.max_secondary_fraction > 0):
            raise ConfigError(
                "[model] max_secondary_fraction: must be positive, "
                f"got {self.max_secondary_fraction}"
            )


def background_suffixes(n: int) -> tuple[str, ...]:
    """Name suffixes of ``n`` background oscillators: "", "2", "3", ..."""
    return ("",) + tuple(str(k) for k in range(2, n + 1))


def night_index(time, gap_hours: float) -> np.ndarray:
    """Night of each point: 0, 1, 2, ... with a new night after every gap >= ``gap_hours``.

    Parameters
    ----------
    time : array_like, shape (n,)
        Sorted times, days.
    gap_hours : float
        Shortest gap between two nights, hours.

    Returns
    -------
    ndarray of int64, shape (n,)
    """
    t = np.asarray(time, dtype=float)
    if t.size == 0:
        return np.zeros(0, dtype=np.int64)
    new = np.diff(t) >= gap_hours / 24.0
    return np.concatenate(([0], np.cumsum(new))).astype(np.int64)


def is_nightly(time, gap_hours: float) -> bool:
    """Whether the sampling is nightly: at least ``NIGHTLY_MIN_NIGHTS`` (10) stretches
    separated by gaps >= ``gap_hours`` whose median length is under
    ``NIGHTLY_MAX_MEDIAN_DAYS`` (0.6 d, i.e. 14.4 h: a night's dark time) and whose
    median number of points is at least ``NIGHTLY_MIN_POINTS`` (3), as in ground-based
    photometry. Space-mission sectors and quarters (stretches of days between downlinks)
    are not, nor are daily single measurements (one point per "night": an offset per
    point would be white noise, which the jitter already is).
    """
    t = np.asarray(time, dtype=float)
    night = night_index(t, gap_hours)
    n = int(night[-1]) + 1 if t.size else 0
    if n < NIGHTLY_MIN_NIGHTS:
        return False
    first, last = _night_ends(night)
    return bool(np.median(t[last] - t[first]) < NIGHTLY_MAX_MEDIAN_DAYS
                and np.median(last - first + 1) >= NIGHTLY_MIN_POINTS)


def _night_ends(night):
    """Indices of the first and last point of each night (``night`` non-decreasing)."""
    first = np.r_[0, np.flatnonzero(np.diff(night)) + 1]
    last = np.r_[first[1:] - 1, night.size - 1]
    return first, last


def _night_warp(time, night):
    """Scaled coordinates of the night term (see :meth:`RotationModel.log_likelihood`).

    Returns ``(c, up, down)``: the decay rate c (1/d) and exp(+-c (t - s_k)), s_k the
    centre of night k. With U = sigma^2 up and V = down as one real celerite column,
    U_n V_m exp(-c (t_n - t_m)) = sigma^2 exp(-c (s_k(n) - s_k(m))): sigma^2 within a
    night and at most exp(-39) sigma^2 between nights, c being 39 over the smallest
    spacing of consecutive night centres.
    """
    first, last = _night_ends(night)
    centre = 0.5 * (time[first] + time[last])
    spacing = np.diff(centre)
    if spacing.size == 0 or not np.all(spacing > 0):
        c = 0.0
    else:
        c = _NIGHT_DECAY / float(spacing.min())
    offset = time - centre[night]
    up = np.exp(c * offset)
    down = np.exp(-c * offset)
    for arr in (up, down):
        arr.setflags(write=False)
    return c, up, down


def _softplus(x: float) -> float:
    """ln(1 + e^x) without overflow."""
    if x != x:  # NaN
        return x
    return max(x, 0.0) + math.log1p(math.exp(-abs(x)))


def _logistic(x: float) -> float:
    """1 / (1 + e^-x) without overflow."""
    if x >= 0:
        return 1.0 / (1.0 + math.exp(-x))
    e = math.exp(x)
    return e / (1.0 + e)


def quality_from_coherence(rotations):
    """Quality factor Q1 of the mode at P whose damping time is ``rotations`` periods.

    For an SHO the damping time is tau = 2 Q / omega0 and, for celerite2's
    rotation term, omega1 = 4 pi Q1 / (P sqrt(4 Q1^2 - 1)); hence
    tau / P = sqrt(4 Q1^2 - 1) / (2 pi) and Q1 = sqrt(1 + (2 pi tau/P)^2) / 2.
    """
    return 0.5 * np.sqrt(1.0 + (2.0 * np.pi * np.asarray(rotations)) ** 2)


def coherence_from_quality(q1):
    """Inverse of :func:`quality_from_coherence`: damping time in rotations for Q1 >= 1/2."""
    return np.sqrt(np.maximum(4.0 * np.asarray(q1) ** 2 - 1.0, 0.0)) / (2.0 * np.pi)


def _lognormal_from_range(lo, hi):
    """(mu, sd) of ln x for a log-normal prior whose central 95 % is [lo, hi]."""
    a, b = math.log(lo), math.log(hi)
    return 0.5 * (a + b), (b - a) / (2.0 * _Z95)


@dataclass(frozen=True)
class _Prior:
    """A proper prior on one unconstrained coordinate."""

    kind: str  # "uniform" | "normal" | "logit-beta"
    a: float
    b: float

    def __post_init__(self):
        # constants of the log density, computed once (the sampler calls logpdf millions
        # of times)
        if self.kind == "normal":
            const = -math.log(self.b) - 0.5 * _LN_2PI
        elif self.kind == "uniform":
            const = -math.log(self.b - self.a)
        else:
            const = -float(special.betaln(self.a, self.b))
        object.__setattr__(self, "_const", const)

    def logpdf(self, x):
        if self.kind == "normal":
            z = (x - self.a) / self.b
            return -0.5 * z * z + self._const
        if self.kind == "uniform":
            return self._const if self.a <= x <= self.b else -math.inf
        # logit-beta: u = logistic(x) ~ Beta(a, b); density in x includes du/dx = u (1 - u)
        # log u = -softplus(-x), log(1 - u) = -softplus(x)
        return -self.a * _softplus(-x) - self.b * _softplus(x) + self._const

    def sample(self, rng, size):
        if self.kind == "normal":
            return rng.normal(self.a, self.b, size)
        if self.kind == "uniform":
            return rng.uniform(self.a, self.b, size)
        u = rng.beta(self.a, self.b, size)
        return np.log(u) - np.log1p(-u)


@dataclass(frozen=True, eq=False)
class RotationModel:
    """Posterior of the rotation (or aperiodic) GP model for one prepared light curve.

    Calling the model, ``model(theta)``, returns the log posterior (log prior +
    log likelihood, both normalised) of the unconstrained parameter vector
    ``theta``; any non-finite value is returned as ``-inf``. The object holds
    only arrays and configuration: the celerite2 objects are built inside each
    call and never stored, so the model pickles safely to worker processes.

    Parameters
    ----------
    time, flux, flux_err : ndarray of float64, shape (n,)
        Days; relative flux; one-sigma errors (relative flux). ``time`` must be
        sorted.
    config : ModelConfig
    period_range : (float, float)
        Period prior limits in days (ignored for the aperiodic model).
    periodic : bool
        False gives an aperiodic comparison model (``max_comparison_backgrounds``
        background oscillators + jitter + mean; :meth:`aperiodic`).
    source : str
        Name used in error messages.
    basin : (float, float), optional
        Period limits of one mode (:meth:`restricted`).
    night : ndarray of int, shape (n,), optional
        Night of each point (non-decreasing; :func:`night_index`): a zero-point offset
        per night is integrated out (``[model] night_offsets``). None: no such term.

    Use :meth:`from_prepared` to build one from a :class:`PreparedLightCurve`.
    """

    time: np.ndarray
    flux: np.ndarray
    flux_err: np.ndarray
    config: ModelConfig = field(default_factory=ModelConfig)
    period_range: tuple[float, float] = (0.1, 100.0)
    periodic: bool = True
    source: str = "<array>"
    basin: tuple[float, float] | None = None
    night: np.ndarray | None = None

    def __post_init__(self):
        t = np.ascontiguousarray(self.time, dtype=np.float64)
        y = np.ascontiguousarray(self.flux, dtype=np.float64)
        e = np.ascontiguousarray(self.flux_err, dtype=np.float64)
        if not (t.ndim == y.ndim == e.ndim == 1 and t.size == y.size == e.size):
            raise InputError(self.source, "time, flux and flux_err must be 1-d of equal length")
        if t.size < 3:
            raise InputError(self.source, f"only {t.size} points; the GP model needs at least 3")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(y)) and np.all(np.isfinite(e))):
            raise InputError(self.source, "non-finite time, flux or flux_err reached the model")
        if np.any(np.diff(t) < 0):
            raise InputError(self.source, "times must be sorted for the GP model")
        if np.any(e < 0):
            raise InputError(self.source, "negative flux_err")
        lo, hi = (float(v) for v in self.period_range)
        if self.periodic and not (0 < lo < hi and np.isfinite(hi)):
            raise InputError(self.source, f"invalid period range [{lo}, {hi}] d")
        for arr in (t, y, e):
            arr.setflags(write=False)
        object.__setattr__(self, "time", t)
        object.__setattr__(self, "flux", y)
        object.__setattr__(self, "flux_err", e)
        object.__setattr__(self, "_var", e * e)
        object.__setattr__(self, "period_range", (lo, hi))
        if self.night is not None:
            night = np.ascontiguousarray(self.night, dtype=np.int64)
            if night.shape != t.shape or np.any(np.diff(night) < 0):
                raise InputError(self.source, "night must be non-decreasing night numbers, "
                                 "one per point")
            # numbered 0, 1, 2, ... (any non-decreasing labels are accepted)
            night = np.unique(night, return_inverse=True)[1].astype(np.int64).ravel()
            night.setflags(write=False)
            object.__setattr__(self, "night", night)
        self._set_night()
        self._set_priors()
        if self.basin is not None:
            blo, bhi = (float(v) for v in self.basin)
            object.__setattr__(self, "basin", (max(blo, lo), min(bhi, hi)))

    # ------------------------------------------------------------------ set-up
    @classmethod
    def from_prepared(
        cls, prepared: PreparedLightCurve, *, config: ModelConfig | None = None,
        periodic: bool = True,
    ) -> RotationModel:
        """Build the model for a prepared light curve.

        The period prior runs between ``prepared.min_period`` and
        ``prepared.max_period`` unless ``config.period_range`` is set.
        """
        config = config or ModelConfig()
        lc = prepared.lc
        if config.period_range is not None:
            prange = (config.period_range[0], config.period_range[1])
        else:
            prange = (float(prepared.min_period), float(prepared.max_period))
        source = lc.meta.sources[0] if lc.meta.sources else "<array>"
        err = lc.flux_err if lc.flux_err is not None else np.zeros(len(lc))
        mode = config.night_offsets
        night = None
        if mode == "on" or (mode == "auto" and is_nightly(lc.time, config.night_gap_hours)):
            night = night_index(lc.time, config.night_gap_hours)
        return cls(
            time=lc.time, flux=lc.flux, flux_err=err, config=config,
            period_range=prange, periodic=periodic, source=source, night=night,
        )

    def restricted(self, basin: tuple[float, float] | None) -> RotationModel:
        """The same posterior with the period confined to ``basin`` (days), or unconfined.

        The prior density keeps its normalisation over the full period range,
        so the integral of the restricted posterior is the evidence of the
        basin (the mode's share of the whole).
        """
        return replace(self, basin=basin)

    def aperiodic(self) -> RotationModel:
        """The largest comparison model: no rotation term, ``max_comparison_backgrounds``
        background oscillators (:func:`rotinfer.sample.fit_aperiodic` also fits the
        smaller ones and keeps the best by BIC)."""
        config = replace(self.config, background=True)
        return replace(self, periodic=False, basin=None, config=config)

    def with_periodic_backgrounds(self, n: int) -> RotationModel:
        """The same rotation model with ``n`` (1 or 2) background oscillators."""
        return replace(self, config=replace(self.config, periodic_backgrounds=n))

    def _set_night(self) -> None:
        """The night term's scaled coordinates (on creation and after unpickling)."""
        if self.night is None:
            object.__setattr__(self, "_night", None)
            return
        c, up, down = _night_warp(self.time, self.night)
        if not (np.all(np.isfinite(up)) and np.all(np.isfinite(down))
                and float(np.max(up)) < 1e100 and float(np.max(down)) < 1e100):
            raise InputError(self.source, "nights too close together for the night-offset "
                             "term; raise [model] night_gap_hours")
        object.__setattr__(self, "_night", (c, up, down))

    @property
    def n_nights(self) -> int:
        """Nights with their own zero-point offset (0 without the night term)."""
        return 0 if self.night is None else int(self.night[-1]) + 1

    def _set_priors(self) -> None:
        """Priors and the names derived from them (on creation and after unpickling)."""
        priors = self._build_priors()
        names = tuple(priors)
        object.__setattr__(self, "_priors", priors)
        object.__setattr__(self, "_names", names)
        object.__setattr__(self, "_prior_list", tuple(priors.values()))
        object.__setattr__(self, "_bg_suffixes", tuple(
            n[len("log_background"):-len("_amplitude")] for n in names
            if n.startswith("log_background") and n.endswith("_amplitude")))
        # Several oscillators with one shared prior in the rotation model: ordered by
        # damping time (the prior truncated to one of the n! labellings, times n! so that
        # it stays normalised), so that ensembles cannot settle on different labellings.
        ordered = self.periodic and len(self._bg_suffixes) > 1
        object.__setattr__(self, "_order_index", tuple(
            names.index(f"log_background{sx}_timescale") for sx in self._bg_suffixes
        ) if ordered else ())
        object.__setattr__(self, "_order_log_factor",
                           math.lgamma(len(self._bg_suffixes) + 1.0) if ordered else 0.0)

    def _build_priors(self) -> dict[str, _Prior]:
        c = self.config
        pri: dict[str, _Prior] = {}
        if self.periodic:
            lo, hi = self.period_range
            pri["log_period"] = _Prior("uniform", math.log(lo), math.log(hi))
            amp = (c.amplitude_ppt[0] * 1e-3, c.amplitude_ppt[1] * 1e-3)
            pri["log_amplitude"] = _Prior("normal", *_lognormal_from_range(*amp))
            pri["log_coherence"] = _Prior("normal", *_lognormal_from_range(*c.coherence_rotations))
            pri["logit_secondary_fraction"] = _Prior("logit-beta", *c.secondary_fraction_beta)
            pri["logit_secondary_quality"] = _Prior("logit-beta", *c.secondary_quality_beta)
        bg_amp = _lognormal_from_range(
            c.background_amplitude_ppt[0] * 1e-3, c.background_amplitude_ppt[1] * 1e-3
        )
        bg_tau = _lognormal_from_range(*c.background_timescale_days)
        if self.periodic:
            # "auto" builds one; rotinfer.sample.choose_periodic_backgrounds adds the second
            n = 1 if c.periodic_backgrounds == "auto" else c.periodic_backgrounds
            suffixes = background_suffixes(n) if c.background else ()
        else:
            suffixes = background_suffixes(c.max_comparison_backgrounds)
        for suffix in suffixes:
            pri[f"log_background{suffix}_amplitude"] = _Prior("normal", *bg_amp)
            pri[f"log_background{suffix}_timescale"] = _Prior("normal", *bg_tau)
        if self.night is not None:
            pri["log_night_offset"] = _Prior("normal", *_lognormal_from_range(
                c.night_offset_ppt[0] * 1e-3, c.night_offset_ppt[1] * 1e-3))
        pri["log_jitter"] = _Prior(
            "normal", *_lognormal_from_range(c.jitter_ppt[0] * 1e-3, c.jitter_ppt[1] * 1e-3)
        )
        if not c.marginalise_mean:
            pri["mean"] = _Prior("normal", c.mean[0], c.mean[1])
        return pri

    @property
    def names(self) -> tuple[str, ...]:
        """Names of the unconstrained parameters, in the order of ``theta``."""
        return self._names

    @property
    def ndim(self) -> int:
        """Number of sampled (unconstrained) parameters."""
        return len(self._priors)

    @property
    def n_parameters(self) -> int:
        """Free parameters counted by information criteria: :attr:`ndim`, plus the mean
        when it is integrated out (see :meth:`profile_log_likelihood`)."""
        return len(self._priors) + (1 if self.config.marginalise_mean else 0)

    @property
    def has_background(self) -> bool:
        return "log_background_amplitude" in self._priors

    @property
    def background_suffixes(self) -> tuple[str, ...]:
        """Name suffixes of the background oscillators present ("", "2", "3", ...)."""
        return self._bg_suffixes

    # --------------------------------------------------------------- transforms
    def unpack(self, theta) -> dict[str, float]:
        """Natural parameters (celerite2's and ours) for one unconstrained vector."""
        th = dict(zip(self._names, (float(v) for v in theta), strict=True))
        out: dict[str, float] = {}
        if self.periodic:
            rot = math.exp(th["log_coherence"])
            q1 = 0.5 * math.sqrt(1.0 + (2.0 * math.pi * rot) ** 2)
            r = _logistic(th["logit_secondary_quality"])
            if self.config.secondary_coherence == "time":
                # the P/2 mode's damping time P sqrt(4 Q2^2 - 1) / (4 pi) is r tau_coh
                q0 = 0.5 * math.sqrt(1.0 + (4.0 * math.pi * r * rot) ** 2) - 0.5
                dq = q1 - 0.5 - q0
            else:
                q0, dq = r * (q1 - 0.5), (1.0 - r) * (q1 - 0.5)
            out.update(
                period=math.exp(th["log_period"]),
                sigma=math.exp(th["log_amplitude"]),
                coherence_rotations=rot,
                Q1=q1,
                Q0=q0,
                dQ=dq,
                f=self.config.max_secondary_fraction * _logistic(th["logit_secondary_fraction"]),
            )
        for suffix in self.background_suffixes:
            out[f"background{suffix}_sigma"] = math.exp(th[f"log_background{suffix}_amplitude"])
            out[f"background{suffix}_tau"] = math.exp(th[f"log_background{suffix}_timescale"])
        if "log_night_offset" in th:
            out["night_offset"] = math.exp(th["log_night_offset"])
        out["jitter"] = math.exp(th["log_jitter"])
        if "mean" in th:
            out["mean"] = th["mean"]
        return out

    def pack(self, **natural) -> np.ndarray:
        """Unconstrained vector from natural values (inverse of :meth:`unpack`).

        Keywords: ``period`` (d), ``sigma``, ``coherence_rotations``, ``f``, ``r``,
        ``background_sigma``, ``background_tau`` (d), ``background2_sigma``,
        ``background2_tau`` (d), ``night_offset`` (relative flux; default 1e-3 when
        the model has the night term and it is not given), ``jitter``, ``mean``.
        """
        vals = []
        for name in self.names:
            if name == "log_period":
                vals.append(math.log(natural["period"]))
            elif name == "log_amplitude":
                vals.append(math.log(natural["sigma"]))
            elif name == "log_coherence":
                vals.append(math.log(natural["coherence_rotations"]))
            elif name == "logit_secondary_fraction":
                u = natural["f"] / self.config.max_secondary_fraction
                vals.append(math.log(u) - math.log1p(-u))
            elif name == "logit_secondary_quality":
                vals.append(math.log(natural["r"]) - math.log1p(-natural["r"]))
            elif name.startswith("log_background") and name.endswith("_amplitude"):
                vals.append(math.log(natural[name[len("log_"):-len("_amplitude")] + "_sigma"]))
            elif name.startswith("log_background") and name.endswith("_timescale"):
                vals.append(math.log(natural[name[len("log_"):-len("_timescale")] + "_tau"]))
            elif name == "log_night_offset":
                vals.append(math.log(natural.get("night_offset", 1e-3)))
            elif name == "log_jitter":
                vals.append(math.log(natural["jitter"]))
            else:
                vals.append(float(natural["mean"]))
        return np.array(vals)

    def physical(self, samples) -> dict[str, np.ndarray]:
        """Reported quantities for an array of unconstrained samples, shape (n, ndim).

        Returns
        -------
        dict of ndarray
            ``period`` (d), ``amplitude_ppt`` (standard deviation of the rotation
            signal, ppt), ``coherence_days``, ``coherence_rotations``,
            ``secondary_fraction`` (f), ``background_amplitude_ppt``,
            ``background_timescale_days``, ``night_offset_ppt`` (the per-night
            zero-point scatter), ``jitter_ppt``, ``mean`` (only when it is sampled) —
            those that the model has.
        """
        s = np.atleast_2d(np.asarray(samples, dtype=float))
        col = {n: s[:, i] for i, n in enumerate(self.names)}
        out: dict[str, np.ndarray] = {}
        if self.periodic:
            period = np.exp(col["log_period"])
            rot = np.exp(col["log_coherence"])
            out.update(
                period=period,
                amplitude_ppt=1e3 * np.exp(col["log_amplitude"]),
                coherence_rotations=rot,
                coherence_days=rot * period,
                secondary_fraction=self.config.max_secondary_fraction
                * special.expit(col["logit_secondary_fraction"]),
            )
        for sx in self.background_suffixes:
            amplitude = col[f"log_background{sx}_amplitude"]
            out[f"background{sx}_amplitude_ppt"] = 1e3 * np.exp(amplitude)
            out[f"background{sx}_timescale_days"] = np.exp(col[f"log_background{sx}_timescale"])
        if "log_night_offset" in col:
            out["night_offset_ppt"] = 1e3 * np.exp(col["log_night_offset"])
        out["jitter_ppt"] = 1e3 * np.exp(col["log_jitter"])
        if "mean" in col:
            out["mean"] = col["mean"].copy()
        return out

    # ---------------------------------------------------------------- densities
    def kernel(self, theta):
        """The celerite2 term for ``theta`` (built fresh; never cached)."""
        p = self.unpack(theta)
        return self._kernel(p)

    def _kernel(self, p):
        k = None
        if self.periodic:
            k = terms.RotationTerm(
                sigma=p["sigma"], period=p["period"], Q0=p["Q0"], dQ=p["dQ"], f=p["f"]
            )
        for suffix in self.background_suffixes:
            # tau = 2 Q / w0  =>  w0 = 2 Q / tau
            bg = terms.SHOTerm(
                sigma=p[f"background{suffix}_sigma"],
                w0=2.0 * BACKGROUND_Q / p[f"background{suffix}_tau"], Q=BACKGROUND_Q,
            )
            k = bg if k is None else k + bg
        return k

    def log_prior(self, theta) -> float:
        """Normalised log prior density of the unconstrained vector (``-inf`` outside)."""
        total = 0.0
        for value, prior in zip(theta, self._prior_list, strict=True):
            total += prior.logpdf(float(value))
        if self.basin is not None and self.periodic:
            period = math.exp(float(theta[0]))
            if not self.basin[0] <= period <= self.basin[1]:
                return -math.inf
        if self._order_index:
            taus = [float(theta[i]) for i in self._order_index]
            if any(b <= a for a, b in zip(taus, taus[1:], strict=False)):
                return -math.inf
            total += self._order_log_factor
        return total if math.isfinite(total) else -math.inf

    def _sho_coefficients(self, p):
        """celerite coefficients (a, b, c, d) of every SHO in the model, as four arrays.

        The same mapping as celerite2's ``RotationTerm`` and ``SHOTerm`` (all our
        oscillators have Q >= 1/2, celerite2's "underdamped" branch):
        a = S0 w0 Q, b = a / f, c = w0 / (2 Q), d = c f with
        f = sqrt(max(4 Q^2 - 1, 1e-5)) (celerite2's regularisation).
        """
        oscillators = []
        if self.periodic:
            period, f = p["period"], p["f"]
            amp = p["sigma"] ** 2 / (1.0 + f)
            q1 = 0.5 + p["Q0"] + p["dQ"]
            w1 = 4.0 * math.pi * q1 / (period * math.sqrt(4.0 * q1 * q1 - 1.0))
            q2 = 0.5 + p["Q0"]
            w2 = 8.0 * math.pi * q2 / (period * math.sqrt(4.0 * q2 * q2 - 1.0))
            oscillators.append((amp / (w1 * q1), w1, q1))
            oscillators.append((f * amp / (w2 * q2), w2, q2))
        for suffix in self.background_suffixes:
            w0 = 2.0 * BACKGROUND_Q / p[f"background{suffix}_tau"]
            oscillators.append(
                (p[f"background{suffix}_sigma"] ** 2 / (w0 * BACKGROUND_Q), w0, BACKGROUND_Q)
            )
        ac, bc, cc, dc = [], [], [], []
        for s0, w0, q in oscillators:
            fq = math.sqrt(max(4.0 * q * q - 1.0, 1e-5))
            a = s0 * w0 * q
            c = 0.5 * w0 / q
            ac.append(a)
            bc.append(a / fq)
            cc.append(c)
            dc.append(c * fq)
        return np.array(ac), np.array(bc), np.array(cc), np.array(dc)

    def log_likelihood(self, theta) -> float:
        """Gaussian-process log likelihood of the data; ``-inf`` for any non-finite result.

        The celerite matrices are filled and factorised by celerite2's compiled
        driver directly (``get_celerite_matrices``, ``factor``, ``solve_lower``),
        skipping the Python term and ``GaussianProcess`` layers, which cost more
        than the factorisation itself for a few thousand points. The result is
        the same as ``celerite2.GaussianProcess(...).log_likelihood`` (tested).
        celerite2 does not validate parameters, and a failed factorisation or an
        overflow gives an error, NaN or an infinity: all become ``-inf`` here.

        With ``marginalise_mean`` (the default) this is the likelihood with the
        shared mean integrated out under its N(mu0, s0^2) prior, i.e. the density of
        N(mu0 1, K + s0^2 1 1^T) (Rasmussen & Williams 2006, section 2.7). With
        K = L D L^T (celerite2), z_r = L^-1 (y - mu0) and z_1 = L^-1 1 from one
        two-column solve, A = z_1^T D^-1 z_1, B = z_1^T D^-1 z_r, C = z_r^T D^-1 z_r:
        ln det = ln det K + ln(1 + s0^2 A) (determinant lemma) and the quadratic
        form is C - s0^2 B^2 / (1 + s0^2 A) (Sherman-Morrison).

        With the night term (``[model] night_offsets``) K includes sigma_night^2 B B^T,
        B the (n, n_nights) indicator of each point's night, so each night's zero-point
        offset, Normal(0, sigma_night^2), is integrated out too. It costs one more
        celerite column, not a rank-n_nights update: in the scaled coordinates
        u_n = sigma_night^2 exp(c (t_n - s_k)), v_n = exp(-c (t_n - s_k)), s_k the
        centre of point n's night k, the real term u_n v_m exp(-c (t_n - t_m)) equals
        sigma_night^2 exp(-c (s_k(n) - s_k(m))), an exponential kernel of the night
        centres: sigma_night^2 within a night and, with c (s_k+1 - s_k) >= 39,
        below 1e-17 sigma_night^2 between nights (tested against the dense block matrix).
        """
        return self._log_likelihood(theta, profile=False)

    def profile_log_likelihood(self, theta) -> float:
        """Log likelihood with the mean at its maximum-likelihood value given the rest.

        What information criteria need (a maximised likelihood, the mean counted among
        the :attr:`n_parameters`): with the mean integrated out, it is set to the
        generalised-least-squares value mu0 + B / A (the notation of
        :meth:`log_likelihood`), where ln L = -1/2 (ln det K + n ln 2 pi + C - B^2 / A);
        with the mean sampled this is :meth:`log_likelihood` itself. ``-inf`` for any
        non-finite result.
        """
        return self._log_likelihood(theta, profile=True)

    def _log_likelihood(self, theta, *, profile: bool) -> float:
        try:
            with np.errstate(all="ignore"):
                p = self.unpack(theta)
                d, z = self._factor_solve(p)
                if self.config.marginalise_mean:
                    zr, z1 = z[:, 0], z[:, 1]
                    a_ = float((z1 * z1 / d).sum())
                    b_ = float((z1 * zr / d).sum())
                    c_ = float((zr * zr / d).sum())
                    logdet = float(np.log(d).sum())
                    if profile:
                        quad = c_ - b_ * b_ / a_
                    else:
                        s2 = self.config.mean[1] ** 2
                        quad = c_ - s2 * b_ * b_ / (1.0 + s2 * a_)
                        logdet += math.log1p(s2 * a_)
                else:
                    r = z[:, 0]
                    quad = float((r * r / d).sum())
                    logdet = float(np.log(d).sum())
                value = -0.5 * (logdet + d.size * _LN_2PI + quad)
        except (ValueError, ArithmeticError, CeleriteLinAlgError):
            # ValueError: bad values reaching the driver; ArithmeticError: float overflow
            # or division by zero while mapping parameters; LinAlgError: a failed
            # factorisation.
            return -math.inf
        return value if math.isfinite(value) else -math.inf

    def _system(self, p):
        """celerite2's representation of the covariance for natural parameters ``p``.

        Returns ``(c, a, U, V)``: decay rates (J,), diagonal (n,), and the (n, J)
        semiseparable factors, with the night term (if any) as a last real column.
        """
        ac, bc, cc, dc = self._sho_coefficients(p)
        t = self.time
        n, j = t.size, 2 * ac.size
        extra = 0 if self._night is None else 1
        c = np.empty(j + extra)
        c[0:j:2] = cc
        c[1:j:2] = cc
        diag = self._var + p["jitter"] ** 2
        a, u, v = _driver.get_celerite_matrices(
            _EMPTY, ac, bc, dc, t, diag, np.empty(n), np.empty((n, j)), np.empty((n, j))
        )
        if extra:
            c_night, up, down = self._night
            s2 = p["night_offset"] ** 2
            c[j] = c_night
            u = np.column_stack((u, s2 * up))
            v = np.column_stack((v, down))
            a = a + s2
        return c, a, u, v

    def _factor(self, p):
        """The factorisation K = L D L^T: ``(c, U, d, W)`` (celerite2's driver)."""
        c, a, u, v = self._system(p)
        d, w = _driver.factor(self.time, c, a, u, v, a, v.copy())
        return c, u, d, w

    def _factor_solve(self, p):
        """celerite2's factorisation K = L D L^T for natural parameters ``p``, and
        L^-1 applied to y - mean (sampled mean), or to [y - mu0, 1] (marginalised).

        Returns ``(d, z)``: the diagonal D (n,) and the solved columns (n, 1 or 2).
        The compiled driver is called directly (``get_celerite_matrices``, ``factor``,
        ``solve_lower``), skipping the Python term and ``GaussianProcess`` layers.
        """
        c, u, d, w = self._factor(p)
        t, n = self.time, self.time.size
        if self.config.marginalise_mean:
            r = np.empty((n, 2))
            r[:, 0] = self.flux - self.config.mean[0]
            r[:, 1] = 1.0
        else:
            r = (self.flux - p["mean"])[:, None]
        return d, _driver.solve_lower(t, c, u, w, r, r)

    def mean_posterior(self, theta) -> tuple[float, float]:
        """The shared mean level given the other parameters: (mean, standard deviation).

        Integrated out (``marginalise_mean``), its conditional posterior is Gaussian
        with precision 1^T K^-1 1 + 1 / s0^2 and mean
        mu0 + 1^T K^-1 (y - mu0) / precision (Rasmussen & Williams 2006, eq. 2.42);
        sampled, it is ``theta``'s own value with standard deviation 0.
        """
        p = self.unpack(theta)
        if not self.config.marginalise_mean:
            return float(p["mean"]), 0.0
        with np.errstate(all="ignore"):
            d, z = self._factor_solve(p)
            precision = float((z[:, 1] ** 2 / d).sum()) + 1.0 / self.config.mean[1] ** 2
            shift = float((z[:, 1] * z[:, 0] / d).sum()) / precision
        return self.config.mean[0] + shift, 1.0 / math.sqrt(precision)

    def night_offsets_posterior(self, theta) -> np.ndarray:
        """Conditional posterior mean of each point's night offset given ``theta``.

        o = sigma_night^2 B B^T C^-1 (y - m), with C the full covariance (night term
        included), B the point-to-night indicator matrix and m the mean level at its
        conditional posterior mean (:meth:`mean_posterior`); per point, relative flux.
        Zeros without the night term. Subtracting ``o`` from the data leaves the
        predictive mean of the other terms unchanged: (C - N)^-1 (y - m - o) =
        C^-1 (y - m) for N = sigma_night^2 B B^T.
        """
        if self._night is None:
            return np.zeros(self.time.size)
        p = self.unpack(theta)
        mean, _ = self.mean_posterior(theta)
        with np.errstate(all="ignore"):
            c, u, d, w = self._factor(p)
            t = self.time
            r = (self.flux - mean)[:, None].copy()
            z = _driver.solve_lower(t, c, u, w, r, r)
            z /= d[:, None]
            alpha = _driver.solve_upper(t, c, u, w, z, z)[:, 0]
        per_night = np.bincount(self.night, weights=alpha, minlength=self.n_nights)
        return p["night_offset"] ** 2 * per_night[self.night]

    def log_prob(self, theta) -> float:
        """Log posterior (unnormalised by the evidence): log prior + log likelihood."""
        lp = self.log_prior(theta)
        if lp == -math.inf:
            return lp
        ll = self.log_likelihood(theta)
        value = lp + ll
        return value if math.isfinite(value) else -math.inf

    __call__ = log_prob

    # ------------------------------------------------------------------ prior
    def sample_prior(self, rng: np.random.Generator, size: int) -> np.ndarray:
        """Draws from the prior in the unconstrained space, shape (size, ndim).

        Ordered background oscillators: independent draws of the (amplitude, damping
        time) pairs sorted by damping time, which is exactly the ordered prior.
        """
        draws = np.column_stack([p.sample(rng, size) for p in self._priors.values()])
        if self._order_index:
            taus = list(self._order_index)
            amps = [self._names.index(f"log_background{sx}_amplitude")
                    for sx in self._bg_suffixes]
            order = np.argsort(draws[:, taus], axis=1)
            rows = np.arange(size)[:, None]
            draws[:, taus] = draws[:, taus][rows, order]
            draws[:, amps] = draws[:, amps][rows, order]
        return draws

    def simulate(self, theta, rng: np.random.Generator) -> np.ndarray:
        """A flux realisation of the model at ``self.time`` (GP + white noise + mean).

        Uses celerite2's Cholesky factor (``dot_tril``) with normal draws from
        ``rng`` — not celerite2's own ``sample``, which uses numpy's global
        random state. When the mean is integrated out it is drawn from its prior
        (the first draw from ``rng``), so the realisation comes from the same
        marginal model that is fitted.
        """
        p = self.unpack(theta)
        mean = p["mean"] if "mean" in p else float(rng.normal(*self.config.mean))
        if self._night is None:
            gp = celerite2.GaussianProcess(self._kernel(p), mean=mean)
            gp.compute(self.time, diag=self._var + p["jitter"] ** 2, check_sorted=False)
            return gp.dot_tril(rng.standard_normal(self.time.size)) + mean
        # with the night term: L sqrt(D) z from the driver's own factorisation (what
        # celerite2's dot_tril does), so the draw includes the per-night offsets
        c, u, d, w = self._factor(p)
        z = (rng.standard_normal(self.time.size) * np.sqrt(d))[:, None]
        return _driver.matmul_lower(self.time, c, u, w, z, z.copy())[:, 0] + mean

    def __getstate__(self):
        # Only data and configuration travel; priors are rebuilt on arrival.
        return {k: v for k, v in self.__dict__.items() if not k.startswith("_")}

    def __setstate__(self, state):
        self.__dict__.update(state)
        object.__setattr__(self, "_var", self.flux_err * self.flux_err)
        self._set_night()
        self._set_priors()
