"""Preparation: from a light curve as read to one ready for period search and inference.

Steps, in order (each recorded in :attr:`PreparedLightCurve.notes`, each removed point in
:attr:`PreparedLightCurve.masked` with its reason):

1. refuse infinite values and uncertainties <= 0; drop rows with NaN (``"non-finite"``);
2. sort by time;
3. split into segments at file boundaries and at gaps longer than
   ``max(gap_factor x cadence, gap_min)``;
4. normalise each segment by its median (relative flux), so that offsets between sectors
   or seasons cannot fake a long-period signal;
5. merge exactly duplicated timestamps (weighted mean; identical copies kept once);
6. reject flares and outliers asymmetrically against a running median (see
   :func:`reject_flares`);
7. give every point an uncertainty: the input's, or where there was none a robust
   point-to-point scatter per segment (``meta.has_flux_err`` stays False);
8. choose the period range from the data (or take the one given);
9. optionally remove slow trends per segment (off by default);
10. bin only when more than ``max_points`` points remain, never wider than
    ``bin_fraction x min_period``.

Amplitudes and scatter are shown to users in parts per thousand (ppt).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .errors import ConfigError, InputError
from .lightcurve import LightCurve, MaskRecord, PreparedLightCurve

__all__ = ["PrepareConfig", "bin_light_curve", "prepare", "reject_flares"]

# 1.4826 x MAD estimates the standard deviation of a normal distribution (common practice).
_MAD_TO_SIGMA = 1.4826
# The smoothing window never spans fewer points than this.
_MIN_WINDOW_POINTS = 7
# Largest relative flux or uncertainty accepted after normalisation by the median.
_MAX_RELATIVE = 1e6
# Smallest robust sigma used for clipping (relative flux): 10 ppm, below the per-point
# noise of real photometry; keeps noise-free (simulated) light curves from being clipped
# on the smoother's rounding and edge errors.
_SIGMA_FLOOR = 1e-5


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
        the running median. Flares are upward, so this side is clipped harder.
    clip_low : float
        Downward threshold, gentler (larger) than ``clip_high``.
    clip_iterations : int
        Most passes of the clip-and-recompute loop (it stops early when nothing changes).
    smooth_window : float
        Width of the running median in days (never fewer than 7 points): several times a
        long flare (FWHM of minutes to an hour) and short against most rotation periods.
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
        _check_period("min_period", self.min_period)
        _check_period("max_period", self.max_period)


def _check_period(name: str, value) -> None:
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, int | float) or not (
        math.isfinite(value) and value > 0
    ):
        raise ConfigError(f"{name} must be a positive number of days, got {value!r}")


def _source(lc: LightCurve, segment: int | None = None) -> str:
    """The file a point came from: one source, or the one of an input segment."""
    sources = lc.meta.sources
    if len(sources) == 1:
        return sources[0]
    if segment is not None and 0 <= segment < len(sources):
        return sources[segment]
    return ", ".join(sources)


def _robust_sigma(x: np.ndarray) -> float:
    if x.size == 0:
        return 0.0
    return _MAD_TO_SIGMA * float(np.median(np.abs(x - np.median(x))))


def _cadence(time: np.ndarray, segment: np.ndarray) -> float:
    """Median positive spacing of consecutive points within segments (days)."""
    same = segment[1:] == segment[:-1]
    steps = np.diff(time)[same]
    steps = steps[steps > 0]
    return float(np.median(steps)) if steps.size else 0.0


def _weighted_groups(groups, flux, err, time):
    """Weighted mean flux and time and the error of the mean, per group id (0..k-1).

    Weights are 1/err^2 scaled by each group's smallest error so that extreme values
    cannot overflow; the error of the weighted mean is 1/sqrt(sum of 1/err^2) (analytic).
    """
    k = int(groups.max()) + 1
    emin = np.full(k, np.inf)
    np.minimum.at(emin, groups, err)
    w = (emin[groups] / err) ** 2
    wsum = np.bincount(groups, w, minlength=k)
    mean_f = np.bincount(groups, w * flux, minlength=k) / wsum
    # Times: mean offset from each group's first time, so large epochs keep their precision.
    first = np.full(k, np.inf)
    np.minimum.at(first, groups, time)
    mean_t = first + np.bincount(groups, w * (time - first[groups]), minlength=k) / wsum
    return mean_t, mean_f, emin / np.sqrt(wsum)


def bin_light_curve(time, flux, err, segment, width: float, *, count=None):
    """Bin points into bins of ``width`` days within each segment (never across segments).

    Parameters
    ----------
    time, flux, err : ndarray of float, shape (n,)
        Times (days, sorted), relative flux and its one-sigma uncertainties (> 0).
    segment : ndarray of int, shape (n,)
        Segment index per point.
    width : float
        Bin width in days; bins start at each segment's first point.
    count : ndarray of int, shape (n,), optional
        Measurements behind each point (1 by default).

    Returns
    -------
    time, flux, err, segment, count : ndarrays, shape (m,)
        Weighted-mean time and flux per bin, the error of the weighted mean
        ``1 / sqrt(sum 1/err_i^2)`` (``err/sqrt(n)`` for n equal errors), the segment and
        the number of measurements per bin; sorted by time.
    """
    time = np.asarray(time, dtype=np.float64)
    count = np.ones(time.size, dtype=np.int64) if count is None else np.asarray(count)
    if time.size == 0:
        return time, np.asarray(flux), np.asarray(err), np.asarray(segment), count
    seg_ids, seg_index = np.unique(segment, return_inverse=True)
    start = np.full(seg_ids.size, np.inf)
    np.minimum.at(start, seg_index, time)
    index = np.floor((time - start[seg_index]) / width).astype(np.int64)
    keys = np.stack([seg_index, index])
    _, groups = np.unique(keys, axis=1, return_inverse=True)
    groups = groups.ravel()
    t, f, e = _weighted_groups(groups, np.asarray(flux, float), np.asarray(err, float), time)
    k = t.size
    seg_out = np.zeros(k, dtype=np.int64)
    seg_out[groups] = np.asarray(segment)[np.arange(time.size)]
    n_out = np.bincount(groups, count, minlength=k).astype(np.int64)
    order = np.argsort(t, kind="stable")
    return t[order], f[order], e[order], seg_out[order], n_out[order]


def _smooth_without_self(time, flux, good, points, cadence):
    """Local-polynomial estimate of each point from its neighbours, and the residual.

    A Savitzky-Golay filter (least-squares polynomial over ``points`` consecutive points:
    quartic for 15 or more points, else quadratic) through the series in which flagged
    points are replaced by linear interpolation between good ones. Each point is left out
    of its own fit by the leave-one-out identity of linear smoothers,
    ``r_loo = r / (1 - h)`` with ``h`` the filter's central weight, so a flare cannot pull
    sigma. Unlike a running median, a local polynomial follows the curvature of a
    large-amplitude rotation signal (a running median over a quarter period is biased by
    about 8 % of the amplitude at the extrema; a quartic by less than 1e-5 of it).
    The series is split at gaps longer than half a window so no fit bridges a gap.

    Returns
    -------
    ndarray
        Leave-one-out residual ``flux - estimate`` per point.

    References
    ----------
    Savitzky, A. & Golay, M. J. E. 1964, Anal. Chem. 36, 1627 (local polynomial smoothing).
    """
    from scipy.signal import savgol_filter  # slow to import, rarely needed

    filled = flux.copy()
    if not good.all():
        filled[~good] = np.interp(time[~good], time[good], flux[good])
    resid = np.zeros_like(flux)
    gap = max(3.0 * cadence, 0.5 * points * cadence)
    cuts = np.flatnonzero(np.diff(time) > gap) + 1
    for chunk in np.split(np.arange(flux.size), cuts):
        size = min(points, chunk.size if chunk.size % 2 else chunk.size - 1)
        if size < 5:
            resid[chunk] = filled[chunk] - np.median(filled[chunk])
            continue
        order = 4 if size >= 21 else 2
        fit = savgol_filter(filled[chunk], size, order, mode="interp")
        resid[chunk] = (flux[chunk] - fit) / (1.0 - _leverage(chunk.size, size, order))
    return resid


def _leverage(n: int, size: int, order: int) -> np.ndarray:
    """Weight of each point in its own Savitzky-Golay value (the hat-matrix diagonal).

    Interior points use the central coefficient; the first and last ``size // 2`` points
    are values of one polynomial fitted to the first (last) ``size`` points.
    """
    from scipy.signal import savgol_coeffs

    half = size // 2
    h = np.full(n, savgol_coeffs(size, order)[half])
    edge = np.array([savgol_coeffs(size, order, pos=i, use="dot")[i] for i in range(half)])
    h[:half] = edge
    h[n - half:] = edge[::-1]
    return h


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) index pairs of runs of True, stop exclusive."""
    padded = np.concatenate([[False], mask, [False]])
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return list(zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True))


def reject_flares(time, flux, cadence: float, config: PrepareConfig | None = None):
    """Flag flares and outliers in one segment, asymmetrically.

    Iterates: a running median (``smooth_window`` days, at least 7 points, each point left
    out of its own window) through the points not flagged, the robust scatter (1.4826 MAD)
    of the residuals, then flags points above ``clip_high`` sigma (flares are brief upward
    excursions) and below ``clip_low`` sigma (gentler). Each upward run is extended over
    the flare's slow decay (``tail_factor``, ``tail_sigma``). Stops when the flags no longer
    change.

    Parameters
    ----------
    time, flux : ndarray of float, shape (n,)
        Sorted times (days) and relative flux of one segment.
    cadence : float
        Typical spacing in days (sets the window length in points).
    config : PrepareConfig, optional

    Returns
    -------
    ndarray of str, shape (n,)
        ``""`` for kept points, else ``"flare"`` (runs of two or more points),
        ``"outlier-high"`` (single points), ``"flare-tail"`` or ``"outlier-low"``.

    References
    ----------
    Davenport, J. R. A., et al. 2014, ApJ, 797, 122 (fast rise, slow two-exponential decay
    of white-light flares, which motivates the one-sided clip and the tail extension).
    """
    cfg = config or PrepareConfig()
    n = time.size
    reasons = np.full(n, "", dtype="<U12")
    if n < _MIN_WINDOW_POINTS:
        return reasons
    points = int(round(cfg.smooth_window / cadence)) if cadence > 0 else _MIN_WINDOW_POINTS
    points = max(_MIN_WINDOW_POINTS, min(points, n)) | 1
    for _ in range(cfg.clip_iterations):
        good = reasons == ""
        if good.sum() < _MIN_WINDOW_POINTS:
            break
        resid = _smooth_without_self(time, flux, good, points, cadence)
        sigma = max(_robust_sigma(resid[good]), _SIGMA_FLOOR)
        new = np.full(n, "", dtype="<U12")
        high = resid > cfg.clip_high * sigma
        for a, b in _runs(high):
            new[a:b] = "flare" if b - a >= 2 else "outlier-high"
            fixed = math.ceil(cfg.tail_factor * (b - a))
            j = b
            while j < n and high[j] == 0 and (
                j < b + fixed or (resid[j] > cfg.tail_sigma * sigma and j < b + 5 * fixed)
            ):
                new[j] = "flare-tail"
                j += 1
        low = (resid < -cfg.clip_low * sigma) & (new == "")
        new[low] = "outlier-low"
        if np.array_equal(new, reasons):
            break
        reasons = new
    return reasons


def _normalise(flux, err, segment, lc):
    flux = flux.copy()
    err = None if err is None else err.copy()
    for s in np.unique(segment):
        sel = segment == s
        med = float(np.median(flux[sel]))
        if not med > 0:
            raise InputError(
                _source(lc, int(s)),
                f"median flux of segment {int(s)} is {med:.6g}, not positive; cannot turn it "
                "into relative flux (magnitudes need --magnitudes)",
            )
        with np.errstate(over="ignore"):
            flux[sel] /= med
            if err is not None:
                err[sel] /= med
        # Relative fluxes or errors a million times the median mean the median is not a
        # meaningful level (e.g. a background-subtracted column near zero).
        worst = float(np.max(np.abs(flux[sel])))
        if err is not None:
            worst = max(worst, float(np.max(err[sel])))
        if not worst <= _MAX_RELATIVE:
            raise InputError(
                _source(lc, int(s)),
                f"flux of segment {int(s)} varies by more than {_MAX_RELATIVE:.0e} times its "
                f"median ({med:.3g}); it cannot be turned into relative flux",
            )
    return flux, err


def _detrend(time, flux, err, segment, max_period, scale):
    """Divide each segment by a Legendre polynomial of timescales > scale x max_period."""
    flux, err = flux.copy(), err.copy()
    degrees = {}
    for s in np.unique(segment):
        sel = segment == s
        span = float(time[sel].max() - time[sel].min())
        degree = int(math.floor(2.0 * span / (scale * max_period)))
        degree = min(degree, int(sel.sum()) - 1, 10)
        if degree < 1:
            continue
        fit = np.polynomial.Legendre.fit(time[sel], flux[sel], degree, w=1.0 / err[sel])
        trend = fit(time[sel])
        if not np.all(trend > 0):
            continue
        flux[sel] /= trend
        err[sel] /= trend
        degrees[int(s)] = degree
    return flux, err, degrees


def _scatter_errors(flux, segment, count):
    """Per-segment point-to-point scatter: 1.4826 MAD(diff)/sqrt(2), over sqrt(count)."""
    err = np.empty(flux.size)
    global_sigma = _robust_sigma(np.diff(flux)) / math.sqrt(2.0) if flux.size > 2 else 0.0
    if not global_sigma > 0:
        global_sigma = float(np.std(flux)) or 1.0
    for s in np.unique(segment):
        sel = segment == s
        sigma = _robust_sigma(np.diff(flux[sel])) / math.sqrt(2.0) if sel.sum() > 4 else 0.0
        err[sel] = sigma if sigma > 0 else global_sigma
    return err / np.sqrt(count)


class _Masks:
    """Collects removed points and their reasons."""

    def __init__(self, dropped: MaskRecord):
        self.time = [np.asarray(dropped.time, float)]
        self.flux = [np.asarray(dropped.flux, float)]
        self.reason = [np.asarray(dropped.reason, dtype="<U12")]

    def add(self, time, flux, reason) -> None:
        time = np.asarray(time, float)
        self.time.append(time)
        self.flux.append(np.asarray(flux, float))
        self.reason.append(np.broadcast_to(np.asarray(reason, dtype="<U12"), time.shape))

    def record(self) -> MaskRecord:
        time = np.concatenate(self.time)
        order = np.argsort(time, kind="stable")
        return MaskRecord(time=time[order], flux=np.concatenate(self.flux)[order],
                          reason=np.concatenate(self.reason)[order])


def _refuse_bad_values(lc: LightCurve) -> None:
    for name, values in (("time", lc.time), ("flux", lc.flux), ("flux_err", lc.flux_err)):
        if values is None:
            continue
        bad = np.isinf(values)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(_source(lc, int(lc.segment[i])),
                             f"{int(bad.sum())} infinite value(s) in {name} (first at point "
                             f"{i + 1}); fix or remove them")
    if lc.flux_err is not None:
        bad = lc.flux_err <= 0
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(_source(lc, int(lc.segment[i])),
                             f"{int(bad.sum())} uncertainty value(s) <= 0 (first "
                             f"{float(lc.flux_err[i])!r} at point {i + 1}); uncertainties must be "
                             "positive")


def _merge_duplicates(time, flux, err, segment, masks):
    """Merge exactly equal timestamps; identical copies count once."""
    n = time.size
    starts = np.concatenate([[True], np.diff(time) != 0])
    if starts.all():
        return time, flux, err, segment, np.ones(n, dtype=np.int64), 0
    groups = np.cumsum(starts) - 1
    first = np.flatnonzero(starts)
    size = np.diff(np.append(first, n))
    e = err if err is not None else np.ones(n)
    _, mean_f, mean_e = _weighted_groups(groups, flux, e, time)
    same = (np.maximum.reduceat(flux, first) == np.minimum.reduceat(flux, first)) & (
        np.maximum.reduceat(e, first) == np.minimum.reduceat(e, first)
    )
    new_flux = np.where(same, flux[first], mean_f)
    new_err = np.where(same, e[first], mean_e)
    count = np.where(same, 1, size).astype(np.int64)
    extra = ~starts
    masks.add(time[extra], flux[extra], "duplicate")
    return (time[first], new_flux, None if err is None else new_err, segment[first], count,
            int((size > 1).sum()))


def _split_segments(time, segment, threshold):
    """New segment ids: input segments (files) further split at gaps > threshold."""
    order_segments = np.unique(segment)
    out = np.empty(time.size, dtype=np.int64)
    next_id = 0
    splits = 0
    for s in order_segments:
        idx = np.flatnonzero(segment == s)
        cuts = np.concatenate([[0], np.cumsum(np.diff(time[idx]) > threshold)])
        out[idx] = cuts + next_id
        next_id += int(cuts[-1]) + 1
        splits += int(cuts[-1])
    return out, splits


def _period_range(cfg, lc, baseline, cadence, min_period, max_period, notes):
    src = _source(lc)
    frac = cfg.max_period_fraction
    auto_min = max(cfg.min_period_cadences * cadence, cfg.min_period_floor)
    auto_max = frac * baseline
    lo = min_period if min_period is not None else cfg.min_period
    hi = max_period if max_period is not None else cfg.max_period
    _check_period("min_period", lo)
    _check_period("max_period", hi)
    if hi is not None and hi > auto_max:
        raise InputError(
            src, f"baseline {baseline:.4g} d is too short for max_period {hi:.4g} d: at least "
                 f"{hi / frac:.4g} d of data are needed ({1 / frac:.3g} cycles; "
                 f"max_period_fraction = {frac:g})",
        )
    lo_used = auto_min if lo is None else float(lo)
    hi_used = auto_max if hi is None else float(hi)
    if not hi_used > lo_used:
        why = "requested" if lo is not None else "shortest usable"
        raise InputError(
            src, f"baseline {baseline:.4g} d is too short for the period range: the {why} "
                 f"min_period {lo_used:.4g} d needs at least {lo_used / frac:.4g} d of data "
                 f"(max_period_fraction = {frac:g})",
        )
    if lo is not None and cadence > 0 and lo < 2 * cadence:
        notes.append(f"min_period {lo:.4g} d is below twice the cadence ({2 * cadence:.4g} d): "
                     "such periods are not sampled")
    return lo_used, hi_used


def _choose_bin_width(time, segment, cfg, min_period, cadence, notes):
    n = time.size
    if n <= cfg.max_points:
        return 0.0
    cap = cfg.bin_fraction * min_period
    if cap <= cadence:
        notes.append(f"{n} points exceed max_points {cfg.max_points}, but the widest allowed bin "
                     f"({cfg.bin_fraction:g} x min_period = {cap:.4g} d) is not wider than the "
                     "cadence: not binned")
        return 0.0
    covered = sum(float(np.ptp(time[segment == s])) for s in np.unique(segment))
    width = min(max(covered / cfg.max_points, cadence), cap)
    while True:
        bins = bin_light_curve(time, np.zeros(n), np.ones(n), segment, width)[0].size
        if bins <= cfg.max_points or width >= cap:
            break
        width = min(width * 1.1, cap)
    if bins > cfg.max_points:
        notes.append(f"binning is capped at {cfg.bin_fraction:g} x min_period = {cap:.4g} d, "
                     f"which leaves {bins} points (more than max_points {cfg.max_points})")
    return width


def prepare(
    lc: LightCurve, config: PrepareConfig | None = None, *, min_period: float | None = None,
    max_period: float | None = None,
) -> PreparedLightCurve:
    """Clean, normalise and (when needed) bin a light curve; choose the period range.

    Parameters
    ----------
    lc : LightCurve
        As read (any flux unit; segments mark files).
    config : PrepareConfig, optional
        Options; defaults as documented in :class:`PrepareConfig` and ``configs/default.toml``.
    min_period, max_period : float, optional
        Period search range in days; override the configuration and the data-based defaults.

    Returns
    -------
    PreparedLightCurve
        Relative flux (median 1 per segment) with uncertainties for every point, the period
        range, the cadence, the bin width, every removed point with its reason and notes.

    Raises
    ------
    InputError
        For infinite values, uncertainties <= 0, no finite data, constant flux, a segment
        with non-positive median flux, fewer than ``min_points`` usable points, or a
        baseline too short for the period range (one line, naming the file).
    ConfigError
        For a non-positive period limit.
    """
    cfg = config or PrepareConfig()
    if not isinstance(lc, LightCurve):
        raise InputError(None, f"expected a LightCurve, got {type(lc).__name__}")
    src = _source(lc)
    n_input = len(lc) + int(lc.meta.dropped.time.size)
    masks = _Masks(lc.meta.dropped)
    notes: list[str] = []
    _refuse_bad_values(lc)

    ok = np.isfinite(lc.time) & np.isfinite(lc.flux)
    if lc.flux_err is not None:
        ok &= np.isfinite(lc.flux_err)
    if not ok.any():
        raise InputError(src, f"no usable data: all {len(lc)} rows have a missing (NaN) time, "
                              "flux or uncertainty")
    if not ok.all():
        masks.add(lc.time[~ok], lc.flux[~ok], "non-finite")
        notes.append(f"dropped {int((~ok).sum())} rows with missing (NaN) values")
    time, flux, segment = lc.time[ok], lc.flux[ok], lc.segment[ok]
    err = None if lc.flux_err is None else lc.flux_err[ok]
    if not math.isfinite(float(time.max()) - float(time.min())):
        raise InputError(src, "times span more than the largest representable number of days")
    if float(np.ptp(flux)) == 0.0:
        raise InputError(src, f"flux is constant (all {flux.size} values equal {flux[0]:.6g}); "
                              "there is no variability to measure")

    order = np.argsort(time, kind="stable")
    if np.any(np.diff(order) < 0):
        notes.append("sorted the points by time")
    time, flux, segment = time[order], flux[order], segment[order]
    err = None if err is None else err[order]

    cadence = _cadence(time, segment)
    threshold = max(cfg.gap_factor * cadence, cfg.gap_min)
    file_segments = np.unique(segment).size
    segment, splits = _split_segments(time, segment, threshold)
    if splits:
        notes.append(f"split at {splits} gap(s) longer than {threshold:.4g} d")
    flux, err = _normalise(flux, err, segment, lc)
    notes.append(f"normalised {np.unique(segment).size} segment(s) "
                 f"({file_segments} from input) by their median flux")
    time, flux, err, segment, count, merged = _merge_duplicates(time, flux, err, segment, masks)
    if merged:
        notes.append(f"merged {merged} duplicated timestamp(s)")
    if float(np.ptp(flux)) == 0.0:
        raise InputError(src, "flux is constant within every segment; there is no variability "
                              "to measure")
    if time.size < cfg.min_points:
        raise InputError(src, f"too few points: {time.size} usable, at least {cfg.min_points} "
                              "are needed (min_points)")

    if cfg.reject_flares:
        reasons = np.full(time.size, "", dtype="<U12")
        for s in np.unique(segment):
            sel = np.flatnonzero(segment == s)
            reasons[sel] = reject_flares(time[sel], flux[sel], _cadence(time[sel], segment[sel])
                                         or cadence, cfg)
        bad = reasons != ""
        if bad.any():
            masks.add(time[bad], flux[bad], reasons[bad])
            counts = ", ".join(f"{k} {r}" for r, k in zip(*np.unique(reasons[bad],
                                                                     return_counts=True),
                                                          strict=True))
            notes.append(f"masked {int(bad.sum())} point(s): {counts}")
            keep = ~bad
            time, flux, segment, count = time[keep], flux[keep], segment[keep], count[keep]
            err = None if err is None else err[keep]
        if time.size < cfg.min_points:
            raise InputError(src, f"too few points: {time.size} left after flare and outlier "
                                  f"rejection, at least {cfg.min_points} are needed (min_points)")

    if err is None:
        err = _scatter_errors(flux, segment, count)
        notes.append(f"no uncertainties given: used the point-to-point scatter "
                     f"({1e3 * float(np.median(err)):.3g} ppt median)")

    baseline = float(time[-1] - time[0])
    lo, hi = _period_range(cfg, lc, baseline, cadence, min_period, max_period, notes)
    notes.append(f"period range {lo:.4g}-{hi:.4g} d (cadence {cadence * 1440:.3g} min, "
                 f"baseline {baseline:.4g} d)")
    longest = max(float(np.ptp(time[segment == s])) for s in np.unique(segment))
    if hi > longest:
        notes.append(f"max_period {hi:.4g} d exceeds the longest segment ({longest:.4g} d): "
                     "per-segment normalisation weakens periods that long")

    detrended = False
    if cfg.detrend:
        flux, err, degrees = _detrend(time, flux, err, segment, hi, cfg.detrend_scale)
        detrended = bool(degrees)
        if degrees:
            notes.append(f"detrending ON: removed per-segment polynomials (degrees "
                         f"{sorted(set(degrees.values()))}) of timescales longer than "
                         f"{cfg.detrend_scale:g} x max_period = {cfg.detrend_scale * hi:.4g} d")
        else:
            notes.append("detrending ON but no segment is long enough to hold a trend slower "
                         f"than {cfg.detrend_scale * hi:.4g} d: nothing removed")

    width = _choose_bin_width(time, segment, cfg, lo, cadence, notes)
    if width > 0:
        n_before = time.size
        time, flux, err, segment, count = bin_light_curve(time, flux, err, segment, width,
                                                          count=count)
        notes.append(f"binned {n_before} points into {time.size} bins of {width * 1440:.3g} min "
                     f"(at most {cfg.bin_fraction:g} x min_period)")

    meta = replace(lc.meta, flux_unit="relative", dropped=MaskRecord())
    out = LightCurve(time=time, flux=flux, flux_err=err, segment=segment, meta=meta)
    return PreparedLightCurve(
        lc=out, min_period=float(lo), max_period=float(hi), cadence=float(cadence),
        bin_width=float(width), n_input=n_input, masked=masks.record(), detrended=detrended,
        notes=tuple(notes),
    )
