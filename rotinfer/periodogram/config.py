"""Options of the periodogram stage (the ``[periodogram]`` table of a configuration file)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from ..errors import ConfigError

__all__ = ["PeriodogramConfig"]

LSImplementation = Literal["auto", "fast", "cython", "slow"]
FastAlgorithm = Literal["fasper", "lra"]


@dataclass(frozen=True)
class PeriodogramConfig:
    """Options of the Lomb–Scargle and autocorrelation baselines and of the candidate set.

    Every default is documented in ``configs/default.toml`` (table ``[periodogram]``).

    Attributes
    ----------
    oversampling : float
        Frequency-grid points per periodogram peak width: the grid step is
        ``1 / (oversampling * baseline)`` in 1/day, where ``1/baseline`` is the width of a
        peak (common practice: 5–10). Peaks are then refined on a finer local grid.
    ls_implementation : {"auto", "fast", "cython", "slow"}
        astropy ``LombScargle.power`` method for the full grid. ``"auto"`` follows astropy's
        rule (its O(N log N) ``"fast"`` method for more than 200 frequencies, else
        ``"cython"``); ``"cython"`` and ``"slow"`` are exact. Peaks are always refined exactly.
    ls_fast_algorithm : {"fasper", "lra"}
        Algorithm of astropy's fast method: ``"fasper"`` (Press & Rybicki 1989; power
        accurate to about 1e-6 or better, about 5 times faster) or ``"lra"`` (astropy 8's
        default, accurate to about 1e-13; needs astropy >= 8).
    n_peaks : int
        Number of Lomb–Scargle peaks reported (the strongest local maxima at least one peak
        width apart).
    max_frequencies : int
        Largest frequency grid allowed; a finer request is coarsened (and a note recorded).
    min_cadences_per_period : float
        The shortest period searched is at least this many times the light curve's cadence
        (2 is the Nyquist limit for even sampling), whatever the prepared minimum period says.
    acf_bin_width : float
        Step of the uniform grid the autocorrelation is computed on, in days; 0 chooses
        ``max(cadence, bin_width, min_period / 20)``.
    acf_smoothing : float
        Standard deviation of the Gaussian that smooths the autocorrelation, in days;
        0 chooses ``min_period / 10``.
    acf_min_pair_fraction : float
        The autocorrelation stops at the first lag with fewer valid pairs than this fraction
        of the best-populated non-zero lag.
    acf_min_prominence : float
        Local maxima of the smoothed autocorrelation less prominent than this are treated as
        noise wiggles, not peaks.
    acf_min_peak_height : float
        A peak is reliable only if its local peak height (mean height above the two
        adjacent troughs) reaches this value.
    acf_noise_factor : float
        A peak is reliable only if its local peak height is also at least this many times the
        estimated noise of the smoothed autocorrelation (calibrated on white noise: see
        :func:`~rotinfer.periodogram.acf.autocorrelation`).
    acf_double_margin : float
        How far (in autocorrelation) the peak near twice the first peak's lag must stand above
        the mean of the first and third peaks for the doubled lag to be chosen (two dips per
        rotation).
    acf_max_repeats : int
        Most repeating peaks (multiples of the selected period) used to refine the period.
    acf_repeat_window : float
        A repeating peak must lie within this fraction of a period of where it is expected.
    candidates_per_method : int
        How many of a method's strongest peaks enter the candidate set (with halves and doubles).
    harmonic_weight : float
        Score of a half or double candidate as a fraction of its parent peak's score.
    dedup_tolerance : float
        Candidates whose periods differ by less than this fraction are merged.
    max_candidates : int
        Most candidates kept (highest scores first).
    window_threshold : float
        Peaks of the sampling's spectral window (:mod:`rotinfer.periodogram.window`) at
        least this strong within the searched range are reported as periodicities of the
        sampling (0.2: above the 0.047 sidelobes of a contiguous block, below the 0.5-0.7
        of nightly sampling).
    window_max_peaks : int
        Most such periodicities reported (strongest first).
    window_min_gap : float
        Spacings longer than this (days, and than 10 cadences) are gaps; when the gaps
        recur regularly (downlinks every orbit), their spacing is reported as a
        periodicity of the sampling too
        (:func:`~rotinfer.periodogram.window.gap_periodicity`).
    """

    oversampling: float = 5.0
    ls_implementation: LSImplementation = "auto"
    ls_fast_algorithm: FastAlgorithm = "fasper"
    n_peaks: int = 5
    max_frequencies: int = 2_000_000
    min_cadences_per_period: float = 2.0
    acf_bin_width: float = 0.0
    acf_smoothing: float = 0.0
    acf_min_pair_fraction: float = 0.25
    acf_min_prominence: float = 0.02
    acf_min_peak_height: float = 0.1
    acf_noise_factor: float = 8.0
    acf_double_margin: float = 0.05
    acf_max_repeats: int = 10
    acf_repeat_window: float = 0.15
    candidates_per_method: int = 3
    harmonic_weight: float = 0.5
    dedup_tolerance: float = 0.05
    max_candidates: int = 10
    window_threshold: float = 0.2
    window_max_peaks: int = 5
    window_min_gap: float = 0.5

    def __post_init__(self):
        allowed = ("auto", "fast", "cython", "slow")
        if self.ls_implementation not in allowed:
            raise ConfigError(
                f"[periodogram] ls_implementation: {self.ls_implementation!r} is not allowed; "
                f"choose one of {', '.join(repr(a) for a in allowed)}"
            )
        if self.ls_fast_algorithm not in ("fasper", "lra"):
            raise ConfigError(
                f"[periodogram] ls_fast_algorithm: {self.ls_fast_algorithm!r} is not allowed; "
                "choose one of 'fasper', 'lra'"
            )
        checks = {
            "oversampling": (self.oversampling, 1.0, math.inf),
            "n_peaks": (self.n_peaks, 1, math.inf),
            "max_frequencies": (self.max_frequencies, 100, math.inf),
            "min_cadences_per_period": (self.min_cadences_per_period, 0.0, math.inf),
            "acf_bin_width": (self.acf_bin_width, 0.0, math.inf),
            "acf_smoothing": (self.acf_smoothing, 0.0, math.inf),
            "acf_min_pair_fraction": (self.acf_min_pair_fraction, 0.0, 1.0),
            "acf_min_prominence": (self.acf_min_prominence, 0.0, 2.0),
            "acf_min_peak_height": (self.acf_min_peak_height, 0.0, 2.0),
            "acf_noise_factor": (self.acf_noise_factor, 0.0, math.inf),
            "acf_double_margin": (self.acf_double_margin, 0.0, 2.0),
            "acf_max_repeats": (self.acf_max_repeats, 1, math.inf),
            "acf_repeat_window": (self.acf_repeat_window, 0.0, 0.5),
            "candidates_per_method": (self.candidates_per_method, 1, math.inf),
            "harmonic_weight": (self.harmonic_weight, 0.0, 1.0),
            "dedup_tolerance": (self.dedup_tolerance, 0.0, 0.3),
            "max_candidates": (self.max_candidates, 1, math.inf),
            "window_threshold": (self.window_threshold, 0.0, 1.0),
            "window_max_peaks": (self.window_max_peaks, 1, math.inf),
            "window_min_gap": (self.window_min_gap, 0.0, math.inf),
        }
        for name, (value, lo, hi) in checks.items():
            if not (isinstance(value, int | float) and lo <= value <= hi):
                raise ConfigError(
                    f"[periodogram] {name}: {value!r} is outside the allowed range [{lo}, {hi}]"
                )
