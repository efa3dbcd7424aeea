"""The per-star summary figure: data and model, periodograms with the posterior, folded data.

Panels (top to bottom, left to right):

1. the prepared light curve (ppt about the normalised level) with the points preparation
   masked — flares in one colour, other outliers in another — and the Gaussian-process
   predictive mean with its ±1σ band at the maximum-a-posteriori parameters, computed in
   chunks of prediction times (:func:`rotinfer.predict.predict`) so that memory stays bounded
   for long light curves;
2. the Lomb–Scargle periodogram and
3. the autocorrelation function, each with the posterior median period, its 68 % interval
   (shaded) and the harmonics P/2 and 2P (dotted);
4. the light curve folded at the posterior median period, coloured by time, with the median
   in phase bins;
5. the marginal posterior of the period (weighted histogram of all sampled modes, log axis).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ._common import (
    BAND_COLOUR,
    FLARE_REASONS,
    TRUTH_COLOUR,
    binned_median,
    flux_ppt,
    fold,
    log_range,
    period_band,
    plain_ticks,
    posterior_period,
    time_label,
)

__all__ = ["model_time_grid", "plot_light_curve_model", "plot_summary"]

#: Most prediction times drawn for the model curve (whatever the light curve's length).
MAX_GRID_POINTS = 4000
#: Above this many data points the data are drawn rasterised (small PDF files).
_RASTER_POINTS = 3000


def model_time_grid(time, *, period: float | None = None,
                    max_points: int = MAX_GRID_POINTS) -> np.ndarray:
    """Prediction times covering the observed stretches of a light curve, not its gaps.

    Parameters
    ----------
    time : array_like
        Sorted observation times, days.
    period : float, optional
        Period (d) to resolve: the grid step is at most a fiftieth of it (within
        ``max_points``); otherwise about a thousand times span the observed stretches.
    max_points : int
        Largest number of grid times.

    Returns
    -------
    ndarray
        Sorted times (d). Gaps in the data longer than ten times the typical spacing (and
        longer than the grid step) get no grid times, and a NaN is put between stretches so
        that a line drawn through the grid breaks there.
    """
    t = np.asarray(time, dtype=float)
    if t.size < 2:
        return t.copy()
    span = t[-1] - t[0]
    spacing = np.diff(t)
    typical = float(np.median(spacing)) if spacing.size else span
    gap = max(10.0 * typical, 1e-9)
    breaks = np.flatnonzero(spacing > gap)
    starts = np.concatenate([[t[0]], t[breaks + 1]])
    ends = np.concatenate([t[breaks], [t[-1]]])
    covered = float(np.sum(ends - starts))
    # About a thousand times across the observed stretches (the resolution of a printed
    # panel), finer when needed to draw fifty points per period, never more than max_points.
    step = covered / min(1000, max_points)
    if period is not None and np.isfinite(period) and period > 0:
        step = min(step, period / 50.0)
    step = max(step, covered / max_points) if covered > 0 else typical
    pieces = []
    for a, b in zip(starts, ends, strict=True):
        n = max(2, int(np.ceil((b - a) / step)) + 1) if b > a else 1
        pieces.append(np.linspace(a, b, n))
        pieces.append([np.nan])
    return np.concatenate(pieces[:-1])


def _draw_light_curve(ax, prepared, posterior, *, truth_flares=None, legend=True):
    """Data, masked points and (when a posterior is given) the GP mean and band on ``ax``."""
    lc = prepared.lc
    raster = lc.time.size > _RASTER_POINTS
    ax.plot(lc.time, flux_ppt(lc.flux), ".", ms=2.0, color="0.35", label="data (prepared)",
            rasterized=raster, zorder=1)
    masked = prepared.masked
    if masked.time.size:
        reason = np.asarray(masked.reason).astype(str)
        mflux = np.asarray(masked.flux, dtype=float)
        ok = np.isfinite(mflux) & np.isfinite(masked.time)
        is_flare = np.isin(reason, FLARE_REASONS) & ok
        other = ~np.isin(reason, FLARE_REASONS) & ok
        if np.any(is_flare):
            ax.plot(masked.time[is_flare], flux_ppt(mflux[is_flare]), "^", ms=3.5,
                    color="C3", label=f"masked: flare ({int(is_flare.sum())})", zorder=3)
        if np.any(other):
            ax.plot(masked.time[other], flux_ppt(mflux[other]), "x", ms=3.5, color="C1",
                    label=f"masked: outlier or other ({int(other.sum())})", zorder=3)
    if truth_flares is not None and len(truth_flares):
        for t in truth_flares:
            ax.axvline(t, color="C3", lw=0.5, alpha=0.3, zorder=0)
    if posterior is not None:
        from ..predict import predict

        med, _, _ = period_band(posterior)
        grid = model_time_grid(lc.time, period=med)
        finite = np.isfinite(grid)
        pred = predict(posterior.model, posterior.map_theta, grid[finite])
        mean = np.full(grid.size, np.nan)
        sd = np.full(grid.size, np.nan)
        mean[finite] = pred.mean
        sd[finite] = pred.sd
        ax.fill_between(grid, flux_ppt(mean - sd), flux_ppt(mean + sd), color="C0", alpha=0.3,
                        lw=0, label="GP model ±1σ", zorder=2)
        ax.plot(grid, flux_ppt(mean), color="C0", lw=1.0, label="GP predictive mean (MAP)",
                zorder=2)
    ax.set_xlabel(time_label(lc.meta))
    ax.set_ylabel("Flux − 1 (ppt)")
    _robust_ylim(ax, flux_ppt(lc.flux))
    if legend:
        ax.legend(loc="upper right", fontsize=7, ncol=3, frameon=True, framealpha=0.8)


def _robust_ylim(ax, y) -> None:
    """Y limits from the data's 0.5-99.5 percentiles (flares then stay off-scale, not squashing)."""
    y = np.asarray(y, dtype=float)
    y = y[np.isfinite(y)]
    if y.size < 2:
        return
    lo, hi = np.percentile(y, [0.5, 99.5])
    pad = 0.25 * (hi - lo) if hi > lo else 1.0
    ax.set_ylim(lo - pad, hi + pad)


def plot_light_curve_model(prepared, posterior=None, *, path: str | Path | None = None,
                           title: str | None = None, truth_flares=None) -> Figure:
    """The light curve with masked points and flares marked and the GP model over it.

    Parameters
    ----------
    prepared : PreparedLightCurve
        The light curve as fitted (times in days, relative flux).
    posterior : Posterior, optional
        Output of :func:`rotinfer.sample.fit`; its maximum-a-posteriori parameters give the
        predictive mean and ±1σ band of the noise-free model flux. Without it only the data
        are drawn.
    path : str or Path, optional
        Where to save the figure (format from the suffix).
    title : str, optional
        Defaults to the star's identifier.
    truth_flares : sequence of float, optional
        Times (d) of known flares (simulations), drawn as faint vertical lines.

    Returns
    -------
    matplotlib.figure.Figure
        Flux − 1 in ppt against time in days.
    """
    fig = Figure(figsize=(10.0, 3.2), layout="constrained")
    ax = fig.add_subplot()
    _draw_light_curve(ax, prepared, posterior, truth_flares=truth_flares)
    ax.set_title(title if title is not None else prepared.lc.meta.identifier)
    if path is not None:
        fig.savefig(path, dpi=120)
    return fig


def _mark_period(ax, median, lo, hi, *, truth=None, harmonics=True):
    """Posterior median (line), 68 % interval (band), P/2 and 2P (dotted), truth (dashed)."""
    ax.axvspan(lo, hi, color=BAND_COLOUR, alpha=0.3, lw=0, label="posterior period 68 %")
    ax.axvline(median, color=BAND_COLOUR, lw=1.2)
    if harmonics:
        for factor, name in ((0.5, "P/2"), (2.0, "2P")):
            x = factor * median
            left, right = ax.get_xlim()
            if left < x < right:
                ax.axvline(x, color=BAND_COLOUR, lw=0.8, ls=":")
                ax.annotate(name, (x, 1.0), xycoords=("data", "axes fraction"),
                            xytext=(2, -10), textcoords="offset points", fontsize=7,
                            color=BAND_COLOUR)
    if truth is not None and np.isfinite(truth):
        ax.axvline(truth, color=TRUTH_COLOUR, lw=1.0, ls="--", label=f"truth {truth:.4g} d")


def _period_text(median, lo, hi) -> str:
    return f"P = {median:.4g} d (68 %: {lo:.4g}–{hi:.4g} d)"


def plot_summary(prepared, scan_result, posterior=None, *, path: str | Path | None = None,
                 title: str | None = None, truth_period: float | None = None,
                 truth_flares=None, dpi: int = 110) -> Figure:
    """One figure to judge a star's rotation period at a glance.

    Parameters
    ----------
    prepared : PreparedLightCurve
        The light curve as fitted.
    scan_result : ScanResult
        Output of :func:`rotinfer.periodogram.scan` (Lomb–Scargle and ACF).
    posterior : Posterior, optional
        Output of :func:`rotinfer.sample.fit`. Without it the model, the posterior bands and
        the period histogram are left out and the light curve is folded at the
        Lomb–Scargle period.
    path : str or Path, optional
        Where to save the figure (format from the suffix: ``.png``, ``.pdf``...).
    title : str, optional
        Defaults to the star's identifier and the posterior period.
    truth_period : float, optional
        The true period (d) of a simulated star, drawn dashed.
    truth_flares : sequence of float, optional
        Times (d) of known flares.
    dpi : int
        Resolution of raster output.

    Returns
    -------
    matplotlib.figure.Figure
        Five panels (see the module notes); every axis labelled with its unit.
    """
    fig = Figure(figsize=(11.0, 9.0), layout="constrained")
    grid = fig.add_gridspec(3, 2, height_ratios=[1.1, 1.0, 1.0])
    ax_lc = fig.add_subplot(grid[0, :])
    ax_ls = fig.add_subplot(grid[1, 0])
    ax_acf = fig.add_subplot(grid[1, 1])
    ax_fold = fig.add_subplot(grid[2, 0])
    ax_post = fig.add_subplot(grid[2, 1])

    _draw_light_curve(ax_lc, prepared, posterior, truth_flares=truth_flares)
    band = period_band(posterior) if posterior is not None else None

    ls = scan_result.lomb_scargle
    if ls is not None and ls.frequency.size:
        ax_ls.plot(ls.periods, ls.power, lw=0.8, color="C0")
        ax_ls.set_xscale("log")
        plain_ticks(ax_ls, "x", True)
        ax_ls.set_xlim(ls.min_period, ls.max_period)
        if ls.peaks:
            ax_ls.plot(ls.period, ls.peak_power, "v", color="C3", ms=6,
                       label=f"highest peak {ls.period:.4g} d")
    else:
        ax_ls.text(0.5, 0.5, "Lomb–Scargle not run", transform=ax_ls.transAxes, ha="center")
    if band is not None and ls is not None:
        _mark_period(ax_ls, *band, truth=truth_period)
    ax_ls.set_xlabel("Period (d)")
    ax_ls.set_ylabel("Lomb–Scargle power (normalised)")
    ax_ls.set_title("Lomb–Scargle periodogram", fontsize=10)
    if ls is not None:
        ax_ls.legend(loc="upper left", fontsize=7, frameon=False)

    acf = scan_result.acf
    if acf is not None and acf.lags.size > 1:
        ax_acf.plot(acf.lags, acf.acf, lw=1.0, color="C0")
        ax_acf.axhline(0.0, color="0.5", lw=0.5)
        top = acf.lags[-1]
        if band is not None:
            top = min(top, max(3.5 * band[0], acf.max_period))
        ax_acf.set_xlim(0.0, top)
        if acf.reliable:
            ax_acf.plot(acf.period, np.interp(acf.period, acf.lags, acf.acf), "v", color="C3",
                        ms=6, label=f"ACF period {acf.period:.4g} d")
        if band is not None:
            _mark_period(ax_acf, *band, truth=truth_period)
        ax_acf.legend(loc="upper right", fontsize=7, frameon=False)
    else:
        ax_acf.text(0.5, 0.5, "autocorrelation not run", transform=ax_acf.transAxes,
                    ha="center")
    ax_acf.set_xlabel("Lag (d)")
    ax_acf.set_ylabel("Autocorrelation")
    ax_acf.set_title("Autocorrelation function (smoothed)", fontsize=10)

    fold_period = band[0] if band is not None else (ls.period if ls is not None else np.nan)
    _draw_folded(ax_fold, prepared, fold_period,
                 "posterior median" if band is not None else "Lomb–Scargle")

    if posterior is not None:
        _draw_period_posterior(ax_post, posterior, band, truth_period)
    else:
        ax_post.text(0.5, 0.5, "no posterior (Gaussian-process fit not run)",
                     transform=ax_post.transAxes, ha="center")
        ax_post.set_axis_off()

    name = prepared.lc.meta.identifier
    if title is None:
        title = name if band is None else f"{name}: {_period_text(*band)}"
        if truth_period is not None:
            title += f"; truth {truth_period:.4g} d"
    fig.suptitle(title, fontsize=12)
    if path is not None:
        fig.savefig(path, dpi=dpi)
    return fig


def _draw_folded(ax, prepared, period, how: str) -> None:
    lc = prepared.lc
    if not (np.isfinite(period) and period > 0):
        ax.text(0.5, 0.5, "no period to fold at", transform=ax.transAxes, ha="center")
        ax.set_axis_off()
        return
    phase = fold(lc.time, period, t0=float(lc.time[0]))
    y = flux_ppt(lc.flux)
    points = ax.scatter(phase, y, c=lc.time, s=2.0, cmap="viridis", lw=0,
                        rasterized=lc.time.size > _RASTER_POINTS)
    centres, medians = binned_median(phase, y, np.linspace(0.0, 1.0, 41))
    ax.plot(centres, medians, color="k", lw=1.2, label="median in phase bins")
    cbar = ax.figure.colorbar(points, ax=ax, pad=0.01)
    cbar.set_label(time_label(lc.meta).replace("Time", "Time of point"), fontsize=7)
    cbar.ax.tick_params(labelsize=7)
    ax.set_xlim(0.0, 1.0)
    _robust_ylim(ax, y)
    ax.set_xlabel(f"Phase (cycles of {period:.4g} d, {how})")
    ax.set_ylabel("Flux − 1 (ppt)")
    ax.set_title("Folded light curve", fontsize=10)
    ax.legend(loc="upper right", fontsize=7, frameon=False)


def _draw_period_posterior(ax, posterior, band, truth_period) -> None:
    period, weights = posterior_period(posterior)
    lo, hi = log_range(period, weights / weights.sum())
    log = hi / lo > 1.8
    edges = np.geomspace(lo, hi, 81) if log else np.linspace(lo, hi, 81)
    ax.hist(period, bins=edges, weights=weights, color="C0", alpha=0.8, histtype="stepfilled")
    if log:
        ax.set_xscale("log")
        plain_ticks(ax, "x", True)
    ax.set_xlim(lo, hi)
    _mark_period(ax, *band, truth=truth_period)
    probs = [f"{s.mode.period:.3g} d: {s.probability:.2f}" for s in posterior.sampled]
    ax.set_title("Period posterior; probability of each sampled mode: " + ", ".join(probs),
                 fontsize=8)
    ax.set_xlabel("Period (d)")
    ax.set_ylabel("Posterior probability per bin")
    ax.legend(loc="upper right", fontsize=7, frameon=False)
