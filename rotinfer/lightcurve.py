"""The light-curve types handed between pipeline stages.

Inside rotinfer, times are float64 days relative to a recorded reference epoch
and fluxes are relative (dimensionless, ~1). Absolute times, magnitudes and
file formats live only at the edges (:mod:`rotinfer.io`).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .errors import InputError

__all__ = ["LightCurve", "LightCurveMeta", "MaskRecord", "PreparedLightCurve"]


@dataclass(frozen=True)
class LightCurveMeta:
    """Where a light curve came from and how it was read.

    Attributes
    ----------
    identifier : str
        Star name or identifier (from a header keyword, a manifest, or the file stem).
    sources : tuple of str
        Input files (or ``"<array>"``), one per segment group, in stitching order.
    time_reference : float
        Absolute time of ``time == 0`` in days in ``time_system`` (e.g. 2457000.0 for BTJD).
    time_system : str
        Free text such as ``"BJD_TDB"``, ``"MJD"``, ``"JD"`` or ``"unknown"``.
    flux_column : str
        Name of the column the flux was read from.
    flux_unit : str
        ``"relative"`` once normalised, otherwise what the file said (``"e-/s"``, ``"mag"``...).
    has_flux_err : bool
        False when the input had no uncertainties (the model then fits a white-noise term).
    notes : tuple of str
        Human-readable notes from reading (e.g. "3 quality-flagged points dropped").
    dropped : MaskRecord
        Points the reader left out (quality-flagged cadences), with reasons and times on
        this light curve's reference; :func:`rotinfer.prepare.prepare` carries them into
        its own record so every removed point is accounted for.
    """

    identifier: str = "star"
    sources: tuple[str, ...] = ("<array>",)
    time_reference: float = 0.0
    time_system: str = "unknown"
    flux_column: str = "flux"
    flux_unit: str = "unknown"
    has_flux_err: bool = False
    notes: tuple[str, ...] = ()
    dropped: MaskRecord = field(default_factory=lambda: MaskRecord())


@dataclass(frozen=True)
class LightCurve:
    """An immutable light curve of one star.

    Attributes
    ----------
    time : ndarray of float64, shape (n,)
        Days relative to ``meta.time_reference``.
    flux : ndarray of float64, shape (n,)
        Flux (relative once prepared).
    flux_err : ndarray of float64, shape (n,), or None
        One-sigma uncertainties in the units of ``flux``; ``None`` when not given.
    segment : ndarray of int64, shape (n,)
        Segment index per point (sector, quarter, season or gap-separated chunk).
    meta : LightCurveMeta
        Provenance.

    Arrays are copied and made read-only on construction, so a ``LightCurve``
    can be shared between stages without defensive copies.
    """

    time: np.ndarray
    flux: np.ndarray
    flux_err: np.ndarray | None = None
    segment: np.ndarray | None = None
    meta: LightCurveMeta = field(default_factory=LightCurveMeta)

    def __post_init__(self):
        src = self.meta.sources[0] if self.meta.sources else None
        time = np.array(self.time, dtype=np.float64, copy=True).ravel()
        flux = np.array(self.flux, dtype=np.float64, copy=True).ravel()
        if time.shape != flux.shape:
            raise InputError(src, f"time has {time.size} values but flux has {flux.size}")
        if self.flux_err is None:
            err = None
        else:
            err = np.array(self.flux_err, dtype=np.float64, copy=True).ravel()
            if err.shape != time.shape:
                raise InputError(
                    src, f"flux_err has {err.size} values but time has {time.size}"
                )
        if self.segment is None:
            seg = np.zeros(time.size, dtype=np.int64)
        else:
            seg = np.array(self.segment, dtype=np.int64, copy=True).ravel()
            if seg.shape != time.shape:
                raise InputError(src, f"segment has {seg.size} values but time has {time.size}")
        for arr in (time, flux, err, seg):
            if arr is not None:
                arr.setflags(write=False)
        object.__setattr__(self, "time", time)
        object.__setattr__(self, "flux", flux)
        object.__setattr__(self, "flux_err", err)
        object.__setattr__(self, "segment", seg)

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def n_segments(self) -> int:
        """Number of distinct segments."""
        return int(np.unique(self.segment).size) if self.time.size else 0

    @property
    def baseline(self) -> float:
        """Time span in days (0 for fewer than two points)."""
        return float(self.time[-1] - self.time[0]) if self.time.size > 1 else 0.0

    def select(self, keep: np.ndarray) -> LightCurve:
        """Return a new light curve with only the points where ``keep`` is true (or indexed)."""
        err = None if self.flux_err is None else self.flux_err[keep]
        return replace(
            self, time=self.time[keep], flux=self.flux[keep], flux_err=err,
            segment=self.segment[keep],
        )


@dataclass(frozen=True)
class MaskRecord:
    """Which input points preparation removed, and why.

    Attributes
    ----------
    time : ndarray of float64
        Times (days, same reference as the light curve) of removed points.
    flux : ndarray of float64
        Their fluxes (relative, after per-segment normalisation where known).
    reason : ndarray of str
        One reason per point, from a small vocabulary: ``"non-finite"``,
        ``"flare"``, ``"flare-tail"``, ``"outlier-high"``, ``"outlier-low"``,
        ``"duplicate"``, ``"quality"``, ``"user"``.
    """

    time: np.ndarray = field(default_factory=lambda: np.zeros(0))
    flux: np.ndarray = field(default_factory=lambda: np.zeros(0))
    reason: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype="<U12"))

    def counts(self) -> dict[str, int]:
        """Number of removed points per reason."""
        reasons, n = np.unique(self.reason, return_counts=True)
        return {str(r): int(k) for r, k in zip(reasons, n, strict=True)}


@dataclass(frozen=True)
class PreparedLightCurve:
    """A light curve ready for period search and inference.

    Attributes
    ----------
    lc : LightCurve
        Cleaned, per-segment normalised (relative flux, median 1) and possibly
        binned light curve. ``lc.flux_err`` is never None here: where the input
        had no uncertainties, a scatter-based estimate is used and
        ``lc.meta.has_flux_err`` stays False so the model knows.
    min_period, max_period : float
        Period search range in days.
    cadence : float
        Typical (median) spacing of consecutive points in days, before binning.
    bin_width : float
        Bin width in days (0 when not binned).
    n_input : int
        Number of points read before preparation.
    masked : MaskRecord
        Everything removed, with reasons.
    detrended : bool
        Whether slow per-segment trends were removed.
    notes : tuple of str
        Human-readable record of every preparation step taken.
    """

    lc: LightCurve
    min_period: float
    max_period: float
    cadence: float
    bin_width: float = 0.0
    n_input: int = 0
    masked: MaskRecord = field(default_factory=MaskRecord)
    detrended: bool = False
    notes: tuple[str, ...] = ()
