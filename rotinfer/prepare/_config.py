"""The options of the preparation stage (the ``[prepare]`` configuration table)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import ConfigError

__all__ = ["PrepareConfig", "check_period"]


@dataclass(frozen=True)
class PrepareConfig:
    """Options of the preparation stage (the ``[prepare]`` table of a configuration file).

    Attributes
    ----------
    min_points : int
        Fewest usable points (after cleaning) accepted; fewer is an input error. 50 gives
        roughly ten points per parameter of the rotation model.
    gap_factor : float
        A gap splits a segment when longer than ``gap_factor`` times the cadence (median
        spacing, days) ...
    gap_min : float
        ... and longer than ``gap_min`` days. The floor keeps nightly or orbit gaps from
        cutting a light curve into pieces that per-segment normalisation would flatten.
    reject_flares : bool
        Mask flares and outliers (steps 6). Default true.
    clip_high : float
        Upward threshold in robust standard deviations (1.4826 MAD) of the residual from
        the smooth local estimate. Flares are upward, so this side is clipped harder.
    clip_low : float
        Downward threshold, gentler (larger) than ``clip_high``.
    clip_iterations : int
        Most passes of the clip-and-recompute loop (it stops early when nothing changes).
    smooth_window : float
        Width in days of the local-polynomial smoothing window (never fewer than 7 points):
        several times a long flare (FWHM of minutes to an hour) and short against most
        rotation periods. For high signal-to-noise stars rotating faster than about
        0.5 d, lower it (the smoother then follows the rotation more closely).
    tail_factor : float
        A flagged run of ``n`` points is extended over the flare's decay by
        ``ceil(tail_factor * n)`` following points ...
    tail_sigma : float
        ... and further while the residual stays above ``tail_sigma`` robust sigma (at most
        four times that length again). The Davenport et al. (2014) template decays slowly.
    detrend : bool
        Remove slow trends per segment (off by default; reported when on).
    detrend_scale : float
        Only timescales longer than ``detrend_scale x max_period`` are removed: a Legendre
        polynomial of degree ``floor(2 span / (detrend_scale x max_period))`` per segment.
    max_points : int
        Target for the number of points the Gaussian process sees; binning happens only
        when more remain.
    bin_fraction : float
        The widest allowed bin, as a fraction of ``min_period``. Averaging a sinusoid of
        period P over a bin of width w keeps ``sinc(w/P)`` of its amplitude: 98.4 % at 0.1.
    min_period_cadences : float
        Default shortest period: this many cadences (3: daily sampling gives 3 d) ...
    min_period_floor : float
        ... and at least this many days (0.1 d, about the fastest rotators known).
    max_period_fraction : float
        Longest period, as a fraction of the baseline (0.5: at least two cycles observed).
        A requested ``max_period`` longer than this fraction of the baseline is an error.
    min_period, max_period : float or None
        Period range in days; None (default) takes it from the data as above.
    """

    min_points: int = 50
    gap_factor: float = 20.0
    gap_min: float = 10.0
    reject_flares: bool = True
    clip_high: float = 3.0
    clip_low: float = 5.0
    clip_iterations: int = 5
    smooth_window: float = 0.25
    tail_factor: float = 1.0
    tail_sigma: float = 1.0
    detrend: bool = False
    detrend_scale: float = 3.0
    max_points: int = 5000
    bin_fraction: float = 0.1
    min_period_cadences: float = 3.0
    min_period_floor: float = 0.1
    max_period_fraction: float = 0.5
    min_period: float | None = None
    max_period: float | None = None

    def __post_init__(self):
        positive = ("gap_factor", "clip_high", "clip_low", "smooth_window", "detrend_scale",
                    "bin_fraction", "min_period_cadences", "min_period_floor",
                    "max_period_fraction")
        for name in positive:
            value = getattr(self, name)
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
                raise ConfigError(f"[prepare] {name} must be a positive number, got {value!r}")
        for name in ("gap_min", "tail_factor", "tail_sigma"):
            value = getattr(self, name)
            if not (isinstance(value, int | float) and math.isfinite(value) and value >= 0):
                raise ConfigError(f"[prepare] {name} must be zero or positive, got {value!r}")
        for name, low in (("min_points", 3), ("clip_iterations", 1), ("max_points", 10)):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                raise ConfigError(f"[prepare] {name} must be an integer >= {low}, got {value!r}")
        if self.bin_fraction > 0.5:
            raise ConfigError(f"[prepare] bin_fraction must be at most 0.5 (bins must stay well "
                              f"below the shortest period), got {self.bin_fraction!r}")
        if self.max_period_fraction > 1:
            raise ConfigError("[prepare] max_period_fraction must be at most 1, got "
                              f"{self.max_period_fraction!r}")
        check_period("min_period", self.min_period)
        check_period("max_period", self.max_period)


def check_period(name: str, value) -> None:
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, int | float) or not (
        math.isfinite(value) and value > 0
    ):
        raise ConfigError(f"{name} must be a positive number of days, got {value!r}")
