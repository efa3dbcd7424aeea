"""When a simulated star is observed: space-mission-like and ground-based patterns.

Space-mission-like
    Continuous sampling at a fixed cadence (2, 10 or 30 minutes are typical)
    within each segment (a "sector" or "quarter"), interrupted by short gaps for
    data downlink at the end of every spacecraft orbit, optionally with a gap
    between segments. Each segment may sit at its own flux level (a different
    aperture or detector) and drift slowly.
Ground-based
    One observing season per year. On each night the star can be observed
    while it is both above the altitude limit (a window of
    ``visibility_hours`` centred on its transit) and the sky is dark (a night
    of ``night_hours`` centred on local midnight). The transit moves earlier by
    3.94 minutes a day (the sidereal-solar day difference; common practice),
    so windows shrink towards the season edges. Whole nights are lost to
    weather by a two-state Markov chain (bad weather comes in runs), and each
    night has its own zero-point offset.

Times are mid-exposure times in days relative to ``time_reference``, an
absolute BJD-like epoch recorded in the light curve's metadata.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..errors import ConfigError

__all__ = ["PATTERN_KINDS", "ObservingPattern", "SampledTimes"]

PATTERN_KINDS = ("space", "ground")
_SIDEREAL_DRIFT = 3.9424 / 1440.0  # days per day: 1 solar day - 1 sidereal day (common practice)


@dataclass(frozen=True)
class SampledTimes:
    """Output of :meth:`ObservingPattern.sample`.

    Attributes
    ----------
    time : ndarray of float, shape (n,)
        Mid-exposure times, days after ``time_reference``, sorted.
    segment : ndarray of int, shape (n,)
        Sector/quarter or season index of each point.
    chunk : ndarray of int, shape (n,)
        Index of the contiguous stretch (orbit or night) each point is in.
    """

    time: np.ndarray
    segment: np.ndarray
    chunk: np.ndarray


@dataclass(frozen=True)
class ObservingPattern:
    """How and when a star is observed. Build with :meth:`space` or :meth:`ground`.

    Attributes
    ----------
    kind : {"space", "ground"}
        Pattern family.
    cadence_minutes : float
        Time between consecutive exposures, minutes.
    exposure_minutes : float
        Integration time of each point, minutes (flares are averaged over it).
    n_segments : int
        Number of sectors/quarters (space) or seasons (ground).
    segment_days : float
        Length of each segment in days (a season for ground-based patterns).
    segment_spacing_days : float
        Start-to-start spacing of segments in days.
    orbit_days, orbit_gap_days : float
        Space only: a downlink gap of ``orbit_gap_days`` centred on every
        multiple of ``orbit_days`` inside a segment (0 = none).
    night_hours, visibility_hours : float
        Ground only: dark time per night, and time per night the star is above
        the altitude limit (centred on its transit), hours.
    weather_loss : float
        Ground only: long-run fraction of nights lost to weather.
    weather_persistence : float
        Ground only: correlation of consecutive nights' weather (0 = independent).
    midnight : float
        Ground only: fractional day of local midnight in the time scale (days).
    dropout_fraction : float
        Fraction of points lost at random (quality-flagged data).
    segment_offset : float
        Standard deviation of per-segment flux offsets, ppt.
    night_offset : float
        Ground only: standard deviation of per-night zero-point offsets, ppt.
    time_reference : float
        Absolute (BJD-like) time of ``time == 0``, days.
    start : float
        Time of the start of the first segment, days after ``time_reference``.
    """

    kind: Literal["space", "ground"] = "space"
    cadence_minutes: float = 2.0
    exposure_minutes: float = 2.0
    n_segments: int = 1
    segment_days: float = 27.4
    segment_spacing_days: float = 27.4
    orbit_days: float = 13.7
    orbit_gap_days: float = 1.0
    night_hours: float = 10.0
    visibility_hours: float = 8.0
    weather_loss: float = 0.3
    weather_persistence: float = 0.5
    midnight: float = 0.25
    dropout_fraction: float = 0.0
    segment_offset: float = 0.0
    night_offset: float = 0.0
    time_reference: float = 2457000.0
    start: float = 1500.0

    def __post_init__(self):
        if self.kind not in PATTERN_KINDS:
            raise ConfigError(
                f"pattern kind {self.kind!r} is not known; choose one of {', '.join(PATTERN_KINDS)}"
            )
        checks = [
            (self.cadence_minutes > 0, "cadence_minutes", "must be > 0 minutes"),
            (0 < self.exposure_minutes <= self.cadence_minutes, "exposure_minutes",
             "must be > 0 and <= cadence_minutes"),
            (isinstance(self.n_segments, int) and self.n_segments >= 1, "n_segments",
             "must be an integer >= 1"),
            (self.segment_days * 1440.0 >= self.cadence_minutes, "segment_days",
             "must hold at least one cadence"),
            (self.segment_spacing_days >= self.segment_days, "segment_spacing_days",
             "must be >= segment_days (segments may not overlap)"),
            (self.orbit_days >= 0 and self.orbit_gap_days >= 0
             and (self.orbit_days == 0 or self.orbit_gap_days < self.orbit_days),
             "orbit_gap_days", "need 0 <= orbit_gap_days < orbit_days"),
            (0 < self.night_hours <= 24, "night_hours", "must be in (0, 24]"),
            (0 < self.visibility_hours <= 24, "visibility_hours", "must be in (0, 24]"),
            (0 <= self.weather_loss < 1, "weather_loss", "must be in [0, 1)"),
            (0 <= self.weather_persistence < 1, "weather_persistence", "must be in [0, 1)"),
            (0 <= self.dropout_fraction < 1, "dropout_fraction", "must be in [0, 1)"),
            (self.segment_offset >= 0, "segment_offset", "must be >= 0 ppt"),
            (self.night_offset >= 0, "night_offset", "must be >= 0 ppt"),
        ]
        for ok, name, allowed in checks:
            if not ok:
                raise ConfigError(
                    f"observing pattern {name} = {getattr(self, name)!r} is not allowed; {allowed}"
                )
        for name in ("cadence_minutes", "segment_days", "segment_spacing_days", "time_reference",
                     "start", "midnight"):
            if not math.isfinite(getattr(self, name)):
                raise ConfigError(f"observing pattern {name} must be finite")

    @classmethod
    def space(
        cls,
        n_sectors: int = 1,
        sector_days: float = 27.4,
        cadence_minutes: float = 2.0,
        *,
        orbit_days: float = 13.7,
        orbit_gap_days: float = 1.0,
        sector_gap_days: float = 0.0,
        dropout_fraction: float = 0.01,
        segment_offset: float = 2.0,
        exposure_minutes: float | None = None,
        time_reference: float = 2457000.0,
        start: float = 1500.0,
    ) -> ObservingPattern:
        """A space-mission-like pattern.

        The defaults are one 27.4-day sector at 2-minute cadence made of two
        13.7-day orbits with a 1-day downlink gap between them. A year at
        30-minute cadence in quarters is
        ``space(4, 91.3, 30.0, orbit_days=30.4, orbit_gap_days=1.0)``.

        Parameters
        ----------
        n_sectors : int
            Number of sectors or quarters.
        sector_days : float
            Length of each, days.
        cadence_minutes : float
            Cadence, minutes (exposure equals cadence unless given).
        orbit_days, orbit_gap_days : float
            Downlink gap (days) centred on every multiple of ``orbit_days``.
        sector_gap_days : float
            Gap between consecutive sectors, days.
        dropout_fraction : float
            Fraction of points lost at random.
        segment_offset : float
            Standard deviation of per-sector flux offsets, ppt.
        exposure_minutes : float, optional
            Integration time, minutes (default: the cadence).
        time_reference, start : float
            BJD-like epoch of time 0, and start of the first sector (days after it).
        """
        return cls(
            kind="space", cadence_minutes=float(cadence_minutes),
            exposure_minutes=float(exposure_minutes or cadence_minutes),
            n_segments=n_sectors, segment_days=float(sector_days),
            segment_spacing_days=float(sector_days + sector_gap_days),
            orbit_days=float(orbit_days), orbit_gap_days=float(orbit_gap_days),
            dropout_fraction=float(dropout_fraction), segment_offset=float(segment_offset),
            time_reference=float(time_reference), start=float(start),
        )

    @classmethod
    def ground(
        cls,
        n_seasons: int = 1,
        season_days: float = 240.0,
        cadence_minutes: float = 10.0,
        *,
        night_hours: float = 10.0,
        visibility_hours: float = 8.0,
        weather_loss: float = 0.3,
        weather_persistence: float = 0.5,
        midnight: float = 0.25,
        dropout_fraction: float = 0.02,
        segment_offset: float = 2.0,
        night_offset: float = 1.0,
        exposure_minutes: float | None = None,
        time_reference: float = 2457000.0,
        start: float = 1500.0,
    ) -> ObservingPattern:
        """A ground-based pattern: nightly windows, weather, one season a year.

        Parameters
        ----------
        n_seasons : int
            Number of yearly observing seasons.
        season_days : float
            Length of each season, days (the star is at opposition mid-season).
        cadence_minutes : float
            Cadence within a night, minutes.
        night_hours, visibility_hours : float
            Dark hours per night; hours per night the star is high enough.
        weather_loss, weather_persistence : float
            Fraction of nights lost; correlation of consecutive nights' weather.
        midnight : float
            Fractional day of local midnight in the BJD-like time scale.
        dropout_fraction : float
            Fraction of points lost at random.
        segment_offset, night_offset : float
            Standard deviations of per-season and per-night offsets, ppt.
        exposure_minutes : float, optional
            Integration time, minutes (default: the cadence).
        time_reference, start : float
            BJD-like epoch of time 0, and start of the first season (days after it).
        """
        return cls(
            kind="ground", cadence_minutes=float(cadence_minutes),
            exposure_minutes=float(exposure_minutes or cadence_minutes),
            n_segments=n_seasons, segment_days=float(season_days),
            segment_spacing_days=365.25, orbit_days=0.0, orbit_gap_days=0.0,
            night_hours=float(night_hours), visibility_hours=float(visibility_hours),
            weather_loss=float(weather_loss), weather_persistence=float(weather_persistence),
            midnight=float(midnight), dropout_fraction=float(dropout_fraction),
            segment_offset=float(segment_offset), night_offset=float(night_offset),
            time_reference=float(time_reference), start=float(start),
        )

    @property
    def cadence(self) -> float:
        """Cadence in days."""
        return self.cadence_minutes / 1440.0

    @property
    def span(self) -> tuple[float, float]:
        """First and last possible time, days after ``time_reference``."""
        return self.start, self.start + (self.n_segments - 1) * self.segment_spacing_days + \
            self.segment_days

    def sample(self, rng: np.random.Generator) -> SampledTimes:
        """Draw the observed times (weather and dropouts are random).

        Parameters
        ----------
        rng : numpy.random.Generator
            Source of randomness.

        Returns
        -------
        SampledTimes
            Sorted times with their segment and chunk indices.
        """
        if self.kind == "space":
            time, segment, chunk = self._space_times()
        else:
            time, segment, chunk = self._ground_times(rng)
        if self.dropout_fraction > 0 and time.size:
            keep = rng.uniform(size=time.size) >= self.dropout_fraction
            time, segment, chunk = time[keep], segment[keep], chunk[keep]
        return SampledTimes(time, segment, chunk)

    def _space_times(self):
        cad = self.cadence
        n = int(np.floor(self.segment_days / cad + 1e-9))
        local = (np.arange(n) + 0.5) * cad
        if self.orbit_days > 0 and self.orbit_gap_days > 0:
            orbit = np.floor(local / self.orbit_days + 0.5)  # nearest orbit boundary
            dist = np.abs(local - orbit * self.orbit_days)
            # only boundaries whose whole gap lies inside the segment
            inside = (orbit > 0) & (
                orbit * self.orbit_days + 0.5 * self.orbit_gap_days < self.segment_days
            )
            keep = ~(inside & (dist < 0.5 * self.orbit_gap_days))
            orbit_idx = np.floor(local / self.orbit_days).astype(np.int64)
        else:
            keep = np.ones(n, dtype=bool)
            orbit_idx = np.zeros(n, dtype=np.int64)
        local, orbit_idx = local[keep], orbit_idx[keep]
        per_seg = int(np.max(orbit_idx, initial=0)) + 1
        times, segs, chunks = [], [], []
        for s in range(self.n_segments):
            times.append(self.start + s * self.segment_spacing_days + local)
            segs.append(np.full(local.size, s, dtype=np.int64))
            chunks.append(s * per_seg + orbit_idx)
        return np.concatenate(times), np.concatenate(segs), np.concatenate(chunks)

    def _ground_times(self, rng: np.random.Generator):
        cad = self.cadence
        times, segs, chunks = [], [], []
        n_nights = int(np.ceil(self.segment_days))
        chunk_id = 0
        p_bad = self.weather_loss
        rho = self.weather_persistence
        for s in range(self.n_segments):
            season_start = self.start + s * self.segment_spacing_days
            first_midnight = np.ceil(season_start - self.midnight) + self.midnight
            bad = _markov_weather(n_nights, p_bad, rho, rng)
            for j in range(n_nights):
                m = first_midnight + j
                transit = m + (0.5 * self.segment_days - j) * _SIDEREAL_DRIFT
                lo = max(m - self.night_hours / 48.0, transit - self.visibility_hours / 48.0)
                hi = min(m + self.night_hours / 48.0, transit + self.visibility_hours / 48.0)
                if bad[j] or hi - lo < cad:
                    continue
                t = lo + (np.arange(int(np.floor((hi - lo) / cad))) + 0.5) * cad
                times.append(t)
                segs.append(np.full(t.size, s, dtype=np.int64))
                chunks.append(np.full(t.size, chunk_id, dtype=np.int64))
                chunk_id += 1
        if not times:
            return np.zeros(0), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
        return np.concatenate(times), np.concatenate(segs), np.concatenate(chunks)


def _markov_weather(n: int, p_bad: float, rho: float, rng: np.random.Generator) -> np.ndarray:
    """Bad-weather flags for ``n`` nights: a two-state Markov chain.

    Stationary bad fraction ``p_bad``; lag-one correlation ``rho``:
    P(bad | bad) = p + rho (1 - p), P(bad | good) = p (1 - rho).
    """
    if p_bad <= 0:
        return np.zeros(n, dtype=bool)
    u = rng.uniform(size=n)
    out = np.empty(n, dtype=bool)
    state = u[0] < p_bad
    stay_bad = p_bad + rho * (1.0 - p_bad)
    go_bad = p_bad * (1.0 - rho)
    for j in range(n):
        if j:
            state = u[j] < (stay_bad if state else go_bad)
        out[j] = state
    return out
