"""The preparation pipeline itself: :func:`prepare` and its steps."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..errors import InputError
from ..lightcurve import LightCurve, MaskRecord, PreparedLightCurve
from ._binning import bin_light_curve, weighted_groups
from ._config import PrepareConfig, check_period
from ._flares import reject_flares, robust_sigma

__all__ = ["prepare"]

# Largest relative flux or uncertainty accepted after normalisation by the median.
_MAX_RELATIVE = 1e6


def _source(lc: LightCurve, segment: int | None = None) -> str:
    """The file a point came from: one source, or the one of an input segment."""
    sources = lc.meta.sources
    if len(sources) == 1:
        return sources[0]
    if segment is not None and 0 <= segment < len(sources):
        return sources[segment]
    return ", ".join(sources)


def _cadence(time: np.ndarray, segment: np.ndarray) -> float:
    """Median positive spacing of consecutive points within segments (days)."""
    same = segment[1:] == segment[:-1]
    steps = np.diff(time)[same]
    steps = steps[steps > 0]
    return float(np.median(steps)) if steps.size else 0.0


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
    global_sigma = robust_sigma(np.diff(flux)) / math.sqrt(2.0) if flux.size > 2 else 0.0
    if not global_sigma > 0:
        global_sigma = float(np.std(flux)) or 1.0
    for s in np.unique(segment):
        sel = segment == s
        sigma = robust_sigma(np.diff(flux[sel])) / math.sqrt(2.0) if sel.sum() > 4 else 0.0
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
    _, mean_f, mean_e = weighted_groups(groups, flux, e, time)
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
    check_period("min_period", lo)
    check_period("max_period", hi)
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
