"""Summaries of the rotation posterior: intervals, harmonic check, detection, diagnostics.

Conventions
-----------
* Equal-tailed intervals: the 16th-84th (68 %) and 2.5th-97.5th (95 %)
  weighted percentiles of the posterior draws (all sampled modes together,
  each weighted by its probability).
* Highest-density region (HDR) of the period: the smallest set of ln P bins
  holding the stated mass, from a weighted histogram of ln P with
  Freedman-Diaconis-width bins (Hyndman 1996); returned as a list of
  [lo, hi] day intervals, several when the posterior is multimodal.
* Monte Carlo standard error (``period.mcse``, days): how far the median and the
  interval ends would move in a rerun with another seed, from the chains' effective
  sample sizes and the mode probabilities' standard errors (Vehtari et al. 2021).
* MAP: the highest posterior point found by the optimiser or the sampler.
* Sampling check: the posterior probability of periods within
  ``[detection] sampling_tolerance`` of a periodicity of the sampling found by the
  periodogram stage (a peak of the spectral window — the day, for ground-based
  data — or the spacing of recurring downlink gaps), where a period may be an
  artefact of when the star was observed.
* Amplitude: the standard deviation of the rotation signal (the GP rotation
  term), in ppt; coherence time: the damping time of the mode at P, in days and
  in rotations.

References
----------
Hyndman, R. J. 1996, The American Statistician 50, 120 (highest-density regions).
Deeming, T. J. 1975, Ap&SS 36, 137 (spectral window and aliases).
Vehtari, A. et al. 2021, Bayesian Analysis 16, 667 (effective sample size, MCSE of
quantiles).
Kass, R. E. & Raftery, A. E. 1995, JASA 90, 773 (Bayes factors; BIC as an approximation).
Schwarz, G. 1978, Ann. Stat. 6, 461 (BIC).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from scipy import special

from .errors import ConfigError
from .sample import Posterior, relation
from .sample.mcse import REPORTED, posterior_mcse, relative_precision
from .sample.settings import SamplerConfig

__all__ = [
    "DetectionConfig",
    "StarSummary",
    "detection",
    "detection_statistics",
    "false_alarm_text",
    "baseline_harmonics",
    "harmonic_check",
    "sampling_check",
    "hdr_intervals",
    "summarise",
    "weighted_quantile",
]

def convergence_rule(sampler: SamplerConfig | None = None) -> str:
    """The rule behind the single ``converged`` verdict, with the values it was applied with.

    Parameters
    ----------
    sampler : SamplerConfig, optional
        The ``[sampler]`` settings of the fit (default: the defaults).
    """
    s = sampler or SamplerConfig()
    return (
        f"converged = every sampled mode's {s.n_ensembles} ensembles have a post-burn-in "
        f"length above [sampler] tau_multiple ({s.tau_multiple:g}) integrated "
        "autocorrelation times for every parameter, ensemble-averaged autocorrelation times "
        "that changed between the last two checks by less than the larger of [sampler] "
        f"tau_rtol ({100 * s.tau_rtol:g} %) and tau_noise_z ({s.tau_noise_z:g}) standard "
        "errors of that change (Madras & Sokal 1988), rank-normalised split R-hat across "
        f"ensembles below [sampler] rhat_max ({s.rhat_max:g}, Vehtari et al. 2021) for every "
        "parameter, and no stuck walkers; all counted after a discarded warm-up of [sampler] "
        f"warmup_steps ({s.warmup_steps}) steps, within a cap of max_steps ({s.max_steps}) "
        "steps per ensemble" + (
            f"; and each mode's period median and 68 % and 95 % interval ends have Monte Carlo "
            f"standard errors below [sampler] period_precision ({s.period_precision:g}) of "
            "their scale (half the 68 % interval for the median, the distance from the "
            "median for an end)" if s.period_precision > 0 else "")
    )


#: The rule with the default settings (:func:`convergence_rule`).
CONVERGENCE_RULE = convergence_rule()

#: Baseline methods the harmonic check can consult (``[detection] harmonic_baselines``),
#: with the names shown to users.
BASELINE_NAMES = {"acf": "ACF", "lomb_scargle": "Lomb-Scargle"}


@dataclass(frozen=True)
class DetectionConfig:
    """Is there a rotation signal at all? (``[detection]`` table.)

    Attributes
    ----------
    statistic : "delta_bic" or "laplace"
        ``delta_bic``: BIC(aperiodic) - BIC(periodic) at the posterior maxima,
        i.e. 2 (ln L_p - ln L_a) - (k_p - k_a) ln N (Schwarz 1978).
        ``laplace``: 2 ln B with B the ratio of the Laplace evidences (summed
        over the periodic model's modes), on the same scale as delta_bic
        (Kass & Raftery 1995).
    threshold : float
        The star is called periodic when the statistic exceeds this.
    false_alarm_rate : float or None
        Fraction of simulated null stars (no spots) called periodic at this
        threshold, as measured by ``benchmarks/calibrate_detection.py``; None
        when it has not been measured. (Measured, it need not meet the 2 %
        target: ``calibration`` says whether the threshold was set to meet it.)
    false_alarm_upper_95 : float or None
        One-sided 95 % upper limit on that rate (Clopper & Pearson 1934) from the
        number of null stars measured; with few nulls it, not the rate, is what
        the measurement shows.
    calibration : str
        Where the calibration came from (script, number of null stars, date).
    harmonic_probability : float
        The harmonic flag is raised when the posterior probability near P/2 or
        2P (or the Laplace probability of an unsampled mode there) exceeds this.
    harmonic_tolerance : float
        "Near" means within this fraction of P/2 or 2P.
    harmonic_baselines : tuple of {"acf", "lomb_scargle"}
        The harmonic flag is also raised when one of these baseline periods lies
        near half or twice the reported period (the posterior median), whatever
        probability the posterior gives there. An empty tuple leaves the flag to
        the posterior alone. The ACF is the default: on the simulated population
        (BENCHMARKS.md section 1f) it sat at twice the reported period for most
        of the stars whose posterior had settled at half the truth, in modes
        that held no probability near the true period, while Lomb-Scargle flagged
        none that the ACF missed and five stars that were no harmonic error.
    agreement_tolerance : float
        A baseline period agrees with the posterior when it lies in the 95 %
        interval widened by this fraction.
    sampling_tolerance : float
        A period is "at" a periodicity of the sampling (a spectral-window peak or
        the spacing of recurring gaps, reported by the periodogram stage) when
        within this fraction of it.
    sampling_probability : float
        The sampling warning is raised when the posterior probability of periods
        at such a periodicity exceeds this.
    """

    statistic: Literal["delta_bic", "laplace"] = "delta_bic"
    threshold: float = 10.0
    false_alarm_rate: float | None = 0.01
    false_alarm_upper_95: float | None = 0.047
    calibration: str = (
        "calibrated: 1 of 100 simulated null stars called periodic at delta-BIC > 10 "
        "(benchmarks/calibrate_detection.py, seed 1, 2026-12-02, mean integrated out, "
        "background oscillators 'auto'): 1 of 50 one-year 30-min light curves, 0 of 24 "
        "sectors, 0 of 26 ground-based; BENCHMARKS.md section 3"
    )
    harmonic_probability: float = 0.05
    harmonic_tolerance: float = 0.1
    harmonic_baselines: tuple[str, ...] = ("acf",)
    agreement_tolerance: float = 0.1
    sampling_tolerance: float = 0.05
    sampling_probability: float = 0.05

    def __post_init__(self):
        if self.statistic not in ("delta_bic", "laplace"):
            raise ConfigError(
                f"[detection] statistic: {self.statistic!r} is not allowed; "
                "choose one of 'delta_bic', 'laplace'"
            )
        if not math.isfinite(self.threshold):
            raise ConfigError(f"[detection] threshold: must be finite, got {self.threshold}")
        for name in ("harmonic_probability", "harmonic_tolerance", "agreement_tolerance",
                     "sampling_tolerance", "sampling_probability"):
            v = getattr(self, name)
            if not 0 < v < 1:
                raise ConfigError(f"[detection] {name}: must be in (0, 1), got {v}")
        bad = [m for m in self.harmonic_baselines if m not in BASELINE_NAMES]
        if bad:
            raise ConfigError(
                f"[detection] harmonic_baselines: {bad[0]!r} is not allowed; choose from "
                + ", ".join(repr(m) for m in BASELINE_NAMES)
            )
        for name in ("false_alarm_rate", "false_alarm_upper_95"):
            v = getattr(self, name)
            if v is not None and not 0 <= v <= 1:
                raise ConfigError(f"[detection] {name}: must be in [0, 1], got {v}")
        if (self.false_alarm_rate is not None and self.false_alarm_upper_95 is not None
                and self.false_alarm_upper_95 < self.false_alarm_rate):
            raise ConfigError(
                "[detection] false_alarm_upper_95: must be >= false_alarm_rate, got "
                f"{self.false_alarm_upper_95} < {self.false_alarm_rate}"
            )


# --------------------------------------------------------------------- statistics
def weighted_quantile(values, q, weights=None) -> np.ndarray:
    """Quantiles ``q`` (in [0, 1]) of weighted draws (interpolated weighted ECDF, midpoint rule)."""
    values = np.asarray(values, dtype=float)
    w = np.ones_like(values) if weights is None else np.asarray(weights, dtype=float)
    order = np.argsort(values)
    v, w = values[order], w[order]
    cdf = (np.cumsum(w) - 0.5 * w) / np.sum(w)
    return np.interp(np.asarray(q, dtype=float), cdf, v)


def hdr_intervals(values, mass: float, weights=None, *, log: bool = True) -> list[list[float]]:
    """Highest-density region holding ``mass`` of the weighted draws (Hyndman 1996).

    A weighted histogram (of ln values when ``log``) with Freedman-Diaconis
    bin width; the densest bins are taken until ``mass`` is reached and
    adjacent bins merged into intervals.
    """
    x = np.asarray(values, dtype=float)
    w = np.ones_like(x) if weights is None else np.asarray(weights, dtype=float)
    x = np.log(x) if log else x
    w = w / w.sum()
    q25, q75 = weighted_quantile(x, [0.25, 0.75], w)
    n_eff = 1.0 / np.sum(w**2)
    width = 2.0 * (q75 - q25) / max(n_eff, 1.0) ** (1 / 3)
    span = x.max() - x.min()
    if not width > 0 or span <= 0:
        v = float(np.exp(x[0]) if log else x[0])
        return [[v, v]]
    n_bins = int(min(max(span / width, 10), 2000))
    hist, edges = np.histogram(x, bins=n_bins, weights=w)
    order = np.argsort(hist)[::-1]
    keep = np.zeros(n_bins, dtype=bool)
    total = 0.0
    for i in order:
        keep[i] = True
        total += hist[i]
        if total >= mass:
            break
    intervals = []
    i = 0
    while i < n_bins:
        if keep[i]:
            j = i
            while j + 1 < n_bins and keep[j + 1]:
                j += 1
            lo, hi = edges[i], edges[j + 1]
            intervals.append([float(np.exp(lo)), float(np.exp(hi))] if log else [lo, hi])
            i = j + 1
        else:
            i += 1
    return intervals


def reported_numbers(block: dict) -> list[float]:
    """A summary block's numbers in :data:`~rotinfer.sample.mcse.REPORTED` order: the 95 %
    and 68 % lower ends, the median, the 68 % and 95 % upper ends."""
    return [block["interval_95"][0], block["interval_68"][0], block["median"],
            block["interval_68"][1], block["interval_95"][1]]


def period_mcse(posterior: Posterior, period: dict) -> dict:
    """Monte Carlo standard errors (days) of the reported period median and interval ends.

    From the full post-burn-in chains of every sampled mode and the standard errors of the
    modes' probabilities (:func:`rotinfer.sample.mcse.posterior_mcse`; Vehtari et al. 2021).
    ``largest`` is the largest of the five; ``relative`` the largest of each number's error
    over its own scale (:func:`rotinfer.sample.mcse.relative_precision`: below 0.1, every
    number and half-width is fixed to a tenth).
    """
    est = reported_numbers(period)
    m = posterior_mcse(posterior, "log_period", REPORTED, est)
    rel = relative_precision(est, m)
    return {
        "unit": "d",
        "median": _num(m[2]),
        "interval_68": [_num(m[1]), _num(m[3])],
        "interval_95": [_num(m[0]), _num(m[4])],
        "largest": _num(np.nanmax(m)) if np.any(np.isfinite(m)) else None,
        "relative": _num(np.nanmax(rel)) if np.any(np.isfinite(rel)) else None,
    }


def _describe(values, weights, map_value, unit: str) -> dict:
    q = weighted_quantile(values, REPORTED, weights)
    return {
        "unit": unit,
        "median": float(q[2]),
        "interval_68": [float(q[1]), float(q[3])],
        "interval_95": [float(q[0]), float(q[4])],
        "map": float(map_value),
    }


# --------------------------------------------------------------- harmonic check
def baseline_harmonics(scan: dict | None, period: float, config: DetectionConfig) -> list[dict]:
    """The baseline periods of ``config.harmonic_baselines`` near half or twice ``period``.

    Parameters
    ----------
    scan : dict or None
        ``ScanResult.to_dict()`` (its ``acf`` and ``lomb_scargle`` blocks), or a mapping
        of method name to ``{"period": days}``.
    period : float
        The reported period (days).
    config : DetectionConfig

    Returns
    -------
    list of dict
        ``{"method", "period" (d), "relation": "P/2" or "2P"}`` for each such baseline,
        in the order of ``config.harmonic_baselines``.
    """
    out = []
    for method in config.harmonic_baselines:
        block = (scan or {}).get(method)
        p = block.get("period") if isinstance(block, dict) else None
        if p is None or not (np.isfinite(p) and p > 0 and np.isfinite(period) and period > 0):
            continue
        rel = relation(float(p), float(period), config.harmonic_tolerance)
        if rel in ("P/2", "2P"):
            out.append({"method": method, "period": float(p), "relation": rel})
    return out


def harmonic_check(posterior: Posterior, reference: float, config: DetectionConfig, *,
                   median: float | None = None, scan: dict | None = None) -> dict:
    """Is half or twice the period a credible alternative?

    Three sources, all reported: the posterior probability of periods near
    ``reference``/2 and 2 x ``reference`` in the weighted draws (all sampled
    modes); the Laplace probabilities of modes the optimiser found there but that
    were not competitive enough to be sampled; and the baseline periods of
    ``config.harmonic_baselines`` (from ``scan``) that lie near half or twice the
    reported period ``median`` (:func:`baseline_harmonics`). The flag is raised when
    either probability exceeds ``config.harmonic_probability`` (``flag_posterior``)
    or such a baseline exists (``flag_baselines``).

    The baseline clause catches what the posterior cannot: a posterior settled at
    half the true period whose modes hold no probability near the truth (two spot
    groups on opposite hemispheres, spots living a few rotations), while the ACF,
    which compares alternate dips, finds the full period.
    """
    period = posterior.physical()["period"]
    w = posterior.weights
    tol = math.log1p(config.harmonic_tolerance)
    near_half = np.abs(np.log(period / (0.5 * reference))) < tol
    near_double = np.abs(np.log(period / (2.0 * reference))) < tol
    p_half = float(np.sum(w[near_half]))
    p_double = float(np.sum(w[near_double]))

    sampled_ids = {id(s.mode) for s in posterior.sampled}
    valid = [m for m in posterior.modes if m.laplace.valid]
    lap_half = lap_double = 0.0
    if valid:
        log_z = np.array([m.log_evidence for m in valid])
        lap_p = np.exp(log_z - special.logsumexp(log_z))
        for m, p in zip(valid, lap_p, strict=True):
            if id(m) in sampled_ids:
                continue
            rel = relation(m.period, reference, config.harmonic_tolerance)
            if rel == "P/2":
                lap_half += float(p)
            elif rel == "2P":
                lap_double += float(p)
    flag_posterior = max(p_half, p_double, lap_half, lap_double) > config.harmonic_probability
    baselines = baseline_harmonics(scan, reference if median is None else median, config)
    return {
        "reference_period": float(reference),
        "probability_half": p_half,
        "probability_double": p_double,
        "unsampled_laplace_probability_half": lap_half,
        "unsampled_laplace_probability_double": lap_double,
        "baselines": baselines,
        "baseline_methods": list(config.harmonic_baselines),
        "flag_posterior": bool(flag_posterior),
        "flag_baselines": bool(baselines),
        "flag": bool(flag_posterior or baselines),
        "threshold": config.harmonic_probability,
        "tolerance": config.harmonic_tolerance,
    }


# --------------------------------------------------------------- sampling check
def sampling_check(period, weights, median: float, scan: dict | None,
                   config: DetectionConfig) -> dict:
    """Is the period at, or an alias under, a periodicity of the sampling?

    Parameters
    ----------
    period, weights : ndarray
        Posterior period draws (days) and their weights (summing to one).
    median : float
        The reported period (days).
    scan : dict or None
        ``ScanResult.to_dict()``: its ``window`` periodicities (periods in days, window
        power, source) and the searched range; None gives an empty block.
    config : DetectionConfig

    Returns
    -------
    dict
        ``periodicities`` (each periodicity of the sampling — a window peak or the spacing
        of recurring gaps, see ``source`` — with the posterior ``probability`` of periods
        within ``tolerance`` of it), ``probability`` (of any of them), ``flag``
        (``probability > config.sampling_probability``), ``baselines`` (whether the
        Lomb–Scargle and ACF periods sit at one), and ``aliases``: the periods
        ``1 / |1/median +- f_w|`` inside the searched range for each window peak ``f_w``,
        where the reported signal would also show through the window (Deeming 1975), for
        comparing with other periodogram peaks.
    """
    if not scan:
        return {}
    tol = math.log1p(config.sampling_tolerance)
    period = np.asarray(period, dtype=float)
    w = np.asarray(weights, dtype=float)
    peaks = [p for p in (scan.get("window") or []) if p.get("period")]
    lo, hi = scan.get("min_period"), scan.get("max_period")

    def at(p, q):
        """Whether period(s) ``p`` lie within the tolerance of periodicity ``q``."""
        return np.abs(np.log(np.asarray(p, dtype=float) / q["period"])) < tol

    any_near = np.zeros(period.size, dtype=bool)
    rows = []
    aliases = []
    for q in peaks:
        inside = at(period, q)
        any_near |= inside
        rows.append({**q, "probability": float(np.sum(w[inside]))})
        if q.get("source", "window") != "window":
            continue  # aliases need a strong window peak; recurring gaps are not one
        for f in (1.0 / median + q["frequency"], abs(1.0 / median - q["frequency"])):
            if f > 0 and lo is not None and hi is not None and lo <= 1.0 / f <= hi:
                aliases.append({"period": 1.0 / f, "window_period": q["period"]})
    probability = float(np.sum(w[any_near]))
    baselines = {}
    for key in ("lomb_scargle", "acf"):
        p = (scan.get(key) or {}).get("period")
        baselines[key] = (any(bool(at(p, q)) for q in peaks)
                          if p is not None and np.isfinite(p) and p > 0 else None)
    return {
        "periodicities": rows,
        "probability": probability,
        "flag": bool(probability > config.sampling_probability),
        "threshold": config.sampling_probability,
        "tolerance": config.sampling_tolerance,
        "baselines": baselines,
        "aliases": sorted(aliases, key=lambda a: a["period"]),
    }


# --------------------------------------------------------------------- detection
def detection_statistics(model, modes, aperiodic) -> tuple[float, float]:
    """The two detection statistics from the optimisation results alone.

    Parameters
    ----------
    model : RotationModel
        The periodic model.
    modes : sequence of Mode
        Its modes (:func:`rotinfer.sample.find_modes`).
    aperiodic : Mode or None
        The aperiodic model's maximum (:func:`rotinfer.sample.fit_aperiodic`);
        None gives NaN statistics.

    Returns
    -------
    delta_bic, two_ln_bayes_factor : float
        BIC(aperiodic) - BIC(periodic) at the posterior maxima (Schwarz 1978),
        and twice the ln ratio of the Laplace evidences, the periodic one summed
        over modes (NaN when a Laplace estimate is unavailable).
    """
    if aperiodic is None:
        return math.nan, math.nan
    n = model.time.size
    best = max(modes, key=lambda m: m.log_posterior)
    # The comparison model's size is the one fit_aperiodic chose (its theta's length), plus
    # the mean when it is integrated out (counted by both, as model.n_parameters does).
    k_p = model.n_parameters
    k_a = int(np.size(aperiodic.theta)) + (model.n_parameters - model.ndim)
    delta_bic = 2.0 * (best.log_likelihood - aperiodic.log_likelihood) - (k_p - k_a) * math.log(n)
    valid = [m.log_evidence for m in modes if m.laplace.valid]
    if valid and aperiodic.laplace.valid:
        two_ln_b = 2.0 * (float(special.logsumexp(valid)) - aperiodic.log_evidence)
    else:
        two_ln_b = math.nan
    return float(delta_bic), float(two_ln_b)


def _aperiodic_backgrounds(posterior: Posterior) -> int | None:
    """Background oscillators of the comparison model fit_aperiodic kept (None if none).

    Its parameters are two per oscillator plus those it shares with the rotation model
    besides the rotation term (5) and that model's own oscillators: jitter, and the
    night-offset scatter and the mean where the model has them.
    """
    if posterior.aperiodic is None:
        return None
    model = posterior.model
    shared = model.ndim - 5 - 2 * len(model.background_suffixes)
    return (int(np.size(posterior.aperiodic.theta)) - shared) // 2


def detection(posterior: Posterior, config: DetectionConfig) -> dict:
    """Periodic against aperiodic model: both statistics, and the decision on the configured one.

    BIC difference (Schwarz 1978) at the posterior maxima and twice the ln
    Laplace Bayes factor (Kass & Raftery 1995), both positive when the data
    favour rotation (see :func:`detection_statistics`). The decision uses
    ``config.statistic`` and ``config.threshold``, calibrated on simulated null
    stars by ``benchmarks/calibrate_detection.py``.
    """
    delta_bic, two_ln_b = detection_statistics(
        posterior.model, posterior.modes, posterior.aperiodic
    )
    value = delta_bic if config.statistic == "delta_bic" else two_ln_b
    note = ""
    if posterior.aperiodic is None:
        note = "aperiodic model not fitted; not detected"
    elif not math.isfinite(value):
        note = "Laplace evidence unavailable (non-positive-definite Hessian); not detected"
    detected = bool(math.isfinite(value) and value > config.threshold)
    return {
        "detected": detected,
        "statistic": config.statistic,
        "value": _num(value),
        "threshold": config.threshold,
        "delta_bic": _num(delta_bic),
        "two_ln_bayes_factor_laplace": _num(two_ln_b),
        "false_alarm_rate": config.false_alarm_rate,
        "false_alarm_upper_95": config.false_alarm_upper_95,
        "calibration": config.calibration,
        "periodic_backgrounds": len(posterior.model.background_suffixes),
        "aperiodic_backgrounds": _aperiodic_backgrounds(posterior),
        "note": note,
    }


def false_alarm_text(detection_block) -> str:
    """The measured false-alarm rate in words, e.g. "0.02, 95 % upper limit 0.05"; "" if unknown.

    ``detection_block`` is the ``detection`` mapping of a summary (:func:`detection`).
    """
    block = detection_block or {}
    rate = block.get("false_alarm_rate")
    if rate is None:
        return ""
    upper = block.get("false_alarm_upper_95")
    return f"{rate:.2g}" + ("" if upper is None else f", 95 % upper limit {upper:.2g}")


def _num(v):
    v = float(v)
    return v if math.isfinite(v) else None


# ------------------------------------------------------------------------ summary
@dataclass(frozen=True)
class StarSummary:
    """Everything reported for one star (written as ``summary.json``).

    Attributes
    ----------
    identifier : str
    period, amplitude_ppt, coherence_days, coherence_rotations : dict
        ``median``, ``interval_68``, ``interval_95``, ``map`` (period also
        ``hdr_68``, ``hdr_95``: lists of [lo, hi] in days).
    modes : list of dict
        Every mode found: period, relation to the reported period, log
        posterior, Laplace log evidence and probability, whether sampled,
        sampled probability, basin.
    harmonic : dict
        See :func:`harmonic_check`.
    sampling : dict
        See :func:`sampling_check` (empty without the periodogram stage).
    detection : dict
        See :func:`detection`.
    detected, converged : bool
    diagnostics : dict
        The convergence rule and per-mode diagnostics.
    nuisance : dict
        Medians and 68 % intervals of the other parameters.
    baselines : dict
        Lomb-Scargle and ACF results and whether they agree with the posterior.
    extra : dict
        Provenance added by the pipeline (seconds, config, seed, version, input, derived).
    """

    identifier: str
    period: dict
    amplitude_ppt: dict
    coherence_days: dict
    coherence_rotations: dict
    modes: list
    harmonic: dict
    detection: dict
    detected: bool
    converged: bool
    diagnostics: dict
    nuisance: dict
    baselines: dict = field(default_factory=dict)
    sampling: dict = field(default_factory=dict)
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """The JSON document: summary fields, then provenance (``extra``) at the top level."""
        out = {
            "identifier": self.identifier,
            "period": self.period,
            "amplitude_ppt": self.amplitude_ppt,
            "coherence_time_days": self.coherence_days,
            "coherence_time_rotations": self.coherence_rotations,
            "detected": self.detected,
            "converged": self.converged,
            "modes": self.modes,
            "harmonic": self.harmonic,
            "sampling": self.sampling,
            "detection": self.detection,
            "diagnostics": self.diagnostics,
            "nuisance": self.nuisance,
            "baselines": self.baselines,
        }
        out.update(self.extra)
        return out


def _baselines(scan_dict: dict | None, period: dict, config: DetectionConfig) -> dict:
    if not scan_dict:
        return {}
    out = {}
    lo, hi = period["interval_95"]
    widen = 1.0 + config.agreement_tolerance
    for key in ("lomb_scargle", "acf"):
        block = scan_dict.get(key)
        if not isinstance(block, dict):
            continue
        entry = dict(block)
        p = block.get("period")
        if p is not None and np.isfinite(p) and p > 0:
            entry["agrees_with_posterior"] = bool(lo / widen <= p <= hi * widen)
            entry["relation_to_posterior"] = relation(
                float(p), period["median"], config.agreement_tolerance
            )
        else:
            entry["agrees_with_posterior"] = None
            entry["relation_to_posterior"] = None
        out[key] = entry
    return out


def summarise(
    posterior: Posterior, *, identifier: str = "star", config: DetectionConfig | None = None,
    scan: dict | None = None, sampler: SamplerConfig | None = None,
) -> StarSummary:
    """Summarise a posterior from :func:`rotinfer.sample.fit`.

    Parameters
    ----------
    posterior : Posterior
    identifier : str
    config : DetectionConfig, optional
    scan : dict, optional
        ``ScanResult.to_dict()`` of the periodogram stage (baselines and the
        sampling check).
    sampler : SamplerConfig, optional
        The sampler settings of the fit, quoted in the convergence rule (default: the
        defaults).
    """
    config = config or DetectionConfig()
    phys = posterior.physical()
    w = posterior.weights
    map_phys = posterior.model.physical(posterior.map_theta[None, :])
    period = _describe(phys["period"], w, map_phys["period"][0], "d")
    period["mcse"] = period_mcse(posterior, period)
    period["hdr_68"] = hdr_intervals(phys["period"], 0.68, w)
    period["hdr_95"] = hdr_intervals(phys["period"], 0.95, w)
    amplitude = _describe(phys["amplitude_ppt"], w, map_phys["amplitude_ppt"][0], "ppt")
    coh_d = _describe(phys["coherence_days"], w, map_phys["coherence_days"][0], "d")
    coh_r = _describe(
        phys["coherence_rotations"], w, map_phys["coherence_rotations"][0], "rotations"
    )
    units = {
        "secondary_fraction": "", "background_amplitude_ppt": "ppt",
        "background_timescale_days": "d", "background2_amplitude_ppt": "ppt",
        "background2_timescale_days": "d", "night_offset_ppt": "ppt", "jitter_ppt": "ppt",
        "mean": "relative flux",
    }
    nuisance = {
        k: _describe(phys[k], w, map_phys[k][0], units[k]) for k in units if k in phys
    }
    if "night_offset_ppt" in nuisance:
        nuisance["night_offset_ppt"]["nights"] = posterior.model.n_nights

    # the reference for harmonic relations: median period of the most probable sampled mode
    top = max(range(len(posterior.sampled)), key=lambda k: posterior.sampled[k].probability)
    in_top = posterior.mode_of_sample == top
    reference = float(weighted_quantile(phys["period"][in_top], 0.5, w[in_top]))

    valid = [m for m in posterior.modes if m.laplace.valid]
    lap = {}
    if valid:
        log_z = np.array([m.log_evidence for m in valid])
        lap = {id(m): float(p) for m, p in
               zip(valid, np.exp(log_z - special.logsumexp(log_z)), strict=True)}
    sampled = {id(s.mode): s for s in posterior.sampled}
    modes = []
    for m in posterior.modes:
        s = sampled.get(id(m))
        modes.append({
            "period": m.period,
            "relation": relation(m.period, reference, config.harmonic_tolerance),
            "log_posterior": m.log_posterior,
            "log_evidence_laplace": _num(m.log_evidence),
            "laplace_valid": m.laplace.valid,
            "laplace_note": m.laplace.note,
            "laplace_probability": lap.get(id(m)),
            "sampled": s is not None,
            "probability": s.probability if s is not None else None,
            "basin": list(s.basin) if s is not None else None,
            "log_evidence_importance": _num(s.log_evidence) if s is not None else None,
            "log_evidence_importance_se": _num(s.log_evidence_se) if s is not None else None,
            "importance_ess": _num(s.importance_ess) if s is not None else None,
        })

    det = detection(posterior, config)
    diagnostics = {
        "rule": convergence_rule(sampler),
        "converged": posterior.converged,
        "modes": [
            {"period": s.mode.period, **s.run.diagnostics.to_dict()} for s in posterior.sampled
        ],
    }
    return StarSummary(
        identifier=identifier, period=period, amplitude_ppt=amplitude, coherence_days=coh_d,
        coherence_rotations=coh_r, modes=modes,
        harmonic=harmonic_check(posterior, reference, config, median=period["median"],
                                scan=scan),
        detection=det,
        detected=det["detected"], converged=posterior.converged, diagnostics=diagnostics,
        nuisance=nuisance, baselines=_baselines(scan, period, config),
        sampling=sampling_check(phys["period"], w, period["median"], scan, config),
    )
