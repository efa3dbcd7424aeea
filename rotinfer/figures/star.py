"""All figures of one star, written into its result folder (what the HTML page embeds)."""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ._common import BAND_COLOUR, binned_median, flux_ppt, fold, period_band
from .posterior import plot_corner, plot_traces
from .scan import plot_scan
from .summary import plot_summary

__all__ = ["FIGURE_FILES", "plot_thumbnail", "write_star_figures"]

#: Files :func:`write_star_figures` writes, in order.
FIGURE_FILES = ("summary.png", "summary.pdf", "scan.png", "corner.png", "traces.png",
                "thumbnail.png")


def plot_thumbnail(prepared, period: float | None, *, path: str | Path | None = None,
                   band: tuple[float, float] | None = None) -> Figure:
    """A small picture for the vetting table: the light curve and the folded light curve.

    Parameters
    ----------
    prepared : PreparedLightCurve
    period : float or None
        Period (d) to fold at (the posterior median); None or NaN leaves the fold out.
    path : str or Path, optional
        Where to save it (about 320 x 120 pixels).
    band : (float, float), optional
        The 68 % interval (d), written beside the period.

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig = Figure(figsize=(3.2, 1.2), dpi=100, layout="constrained")
    ax_lc, ax_fold = fig.subplots(1, 2, width_ratios=[1.6, 1.0])
    lc = prepared.lc
    y = flux_ppt(lc.flux)
    ax_lc.plot(lc.time, y, ".", ms=0.8, color="0.3", rasterized=True)
    ax_lc.set_xlabel("d", fontsize=6, labelpad=0)
    ax_lc.set_ylabel("ppt", fontsize=6, labelpad=0)
    lo, hi = np.percentile(y, [0.5, 99.5]) if y.size > 1 else (-1.0, 1.0)
    ax_lc.set_ylim(lo - 0.2 * (hi - lo), hi + 0.2 * (hi - lo))
    if period is not None and np.isfinite(period) and period > 0:
        phase = fold(lc.time, period, t0=float(lc.time[0]))
        ax_fold.plot(phase, y, ".", ms=0.8, color="0.55", rasterized=True)
        centres, medians = binned_median(phase, y, np.linspace(0, 1, 26))
        ax_fold.plot(centres, medians, color=BAND_COLOUR, lw=1.2)
        ax_fold.set_ylim(ax_lc.get_ylim())
        text = f"P = {period:.3g} d"
        if band is not None:
            text = f"P = {period:.3g} ({band[0]:.3g}–{band[1]:.3g}) d"
        ax_fold.set_title(text, fontsize=6, pad=1)
        ax_fold.set_xlabel("phase", fontsize=6, labelpad=0)
    else:
        ax_fold.set_axis_off()
    for ax in (ax_lc, ax_fold):
        ax.tick_params(labelsize=5, length=2, pad=1)
    if path is not None:
        fig.savefig(path, dpi=100)
    return fig


def write_star_figures(folder: str | os.PathLike[str], prepared, scan_result, posterior=None,
                       *, truth: Mapping[str, float] | None = None,
                       truth_flares=None) -> dict[str, Path]:
    """Write every figure of one star into its result folder.

    Parameters
    ----------
    folder : path
        The star's result folder (created if missing).
    prepared : PreparedLightCurve
    scan_result : ScanResult
        Output of :func:`rotinfer.periodogram.scan`.
    posterior : Posterior, optional
        Output of :func:`rotinfer.sample.fit`. Without it only ``summary.png``/``.pdf``
        (data and periodograms), ``scan.png`` and ``thumbnail.png`` are written.
    truth : mapping, optional
        Known values of a simulated star, keyed ``period`` (d), ``amplitude_ppt``,
        ``coherence_days`` (d)...; drawn as dashed lines.
    truth_flares : sequence of float, optional
        Times (d) of the simulated flares.

    Returns
    -------
    dict of str to Path
        File name -> path of each figure written: ``summary.png``, ``summary.pdf``,
        ``scan.png``, ``corner.png``, ``traces.png``, ``thumbnail.png``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    truth = dict(truth or {})
    truth_period = truth.get("period")
    written: dict[str, Path] = {}

    fig = plot_summary(prepared, scan_result, posterior, truth_period=truth_period,
                       truth_flares=truth_flares)
    for name in ("summary.png", "summary.pdf"):
        fig.savefig(folder / name, dpi=110)
        written[name] = folder / name
    plot_scan(prepared, scan_result, path=folder / "scan.png")
    written["scan.png"] = folder / "scan.png"

    if posterior is not None:
        name = prepared.lc.meta.identifier
        plot_corner(posterior, path=folder / "corner.png", truth=truth,
                    title=f"{name}: posterior")
        written["corner.png"] = folder / "corner.png"
        plot_traces(posterior, path=folder / "traces.png", truth=truth,
                    title=f"{name}: chains (burn-in shaded)")
        written["traces.png"] = folder / "traces.png"
        median, lo, hi = period_band(posterior)
        plot_thumbnail(prepared, median, band=(lo, hi), path=folder / "thumbnail.png")
    else:
        ls = scan_result.lomb_scargle
        plot_thumbnail(prepared, ls.period if ls is not None else None,
                       path=folder / "thumbnail.png")
    written["thumbnail.png"] = folder / "thumbnail.png"
    return written
