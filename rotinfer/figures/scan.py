"""The figure of the classic period searches: light curve, Lomb–Scargle and ACF."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ._common import probability as _probability
from ._common import time_label as _time_label

__all__ = ["plot_scan"]


def plot_scan(prepared, result, *, path: str | Path | None = None,
              title: str | None = None) -> Figure:
    """Light curve, Lomb–Scargle periodogram and autocorrelation function of one star.

    Parameters
    ----------
    prepared : PreparedLightCurve
        The light curve that was scanned.
    result : ScanResult
        Output of :func:`rotinfer.periodogram.scan` for it.
    path : str or Path, optional
        Where to save the figure (format from the suffix: ``.png``, ``.pdf``, ``.svg``...).
    title : str, optional
        Figure title; defaults to the star's identifier.

    Returns
    -------
    matplotlib.figure.Figure
        Three panels: flux (ppt about the median) against time (d); normalised Lomb–Scargle
        power against period (d, logarithmic) with the reported peaks marked; the smoothed
        autocorrelation against lag (d) with the selected peaks marked.
    """
    panels = 1 + (result.lomb_scargle is not None) + (result.acf is not None)
    fig = Figure(figsize=(8.0, 2.6 * panels), layout="constrained")
    axes = fig.subplots(panels, 1, squeeze=False)[:, 0]
    lc = prepared.lc

    ax = axes[0]
    ax.plot(lc.time, (lc.flux - np.median(lc.flux)) * 1e3, ".", ms=1.5, color="0.2",
            rasterized=lc.time.size > 5000)
    ax.set_xlabel(_time_label(lc.meta))
    ax.set_ylabel("Flux (ppt)")
    ax.set_title(title if title is not None else result.identifier or lc.meta.identifier)
    k = 1

    ls = result.lomb_scargle
    if ls is not None:
        ax = axes[k]
        k += 1
        ax.plot(ls.periods, ls.power, lw=0.8, color="C0")
        ax.set_xscale("log")
        labelled: list[float] = []
        for j, peak in enumerate(ls.peaks):
            ax.plot(peak.period, peak.power, "v", color="C3" if j == 0 else "C1", ms=6)
            # Label only peaks well apart (in log period) from those already labelled.
            if all(abs(np.log10(peak.period / p)) > 0.05 for p in labelled):
                labelled.append(peak.period)
                ax.annotate(f"{peak.period:.3g} d", (peak.period, peak.power),
                            textcoords="offset points", xytext=(4, 4), fontsize=8)
        ax.set_xlim(ls.min_period, ls.max_period)
        ax.set_xlabel("Period (d)")
        ax.set_ylabel("Lomb–Scargle power\n(normalised)")
        if ls.peaks:
            ax.set_title(f"highest peak {ls.period:.4g} d, power {ls.peak_power:.3f}, "
                         f"false-alarm probability {_probability(ls.false_alarm_probability)}",
                         fontsize=9)

    acf = result.acf
    if acf is not None:
        ax = axes[k]
        ax.plot(acf.lags, acf.acf_raw, lw=0.5, color="0.7", label="raw")
        ax.plot(acf.lags, acf.acf, lw=1.0, color="C0", label="smoothed")
        for p in acf.selected:
            ax.plot(p.lag, p.height, "v", color="C3", ms=6)
        ax.axhline(0.0, color="0.5", lw=0.5)
        if acf.lags.size > 1:
            last = acf.selected[-1].lag if acf.selected else 0.0
            ax.set_xlim(0.0, min(acf.lags[-1], max(1.2 * last, acf.max_period)))
        ax.set_xlabel("Lag (d)")
        ax.set_ylabel("Autocorrelation")
        ax.legend(loc="upper right", fontsize=8, frameon=False)
        if acf.reliable:
            ax.set_title(f"period {acf.period:.4g} ± {acf.uncertainty:.2g} d, "
                         f"local peak height {acf.local_peak_height:.2f}", fontsize=9)
        else:
            ax.set_title("no reliable autocorrelation peak", fontsize=9)

    if path is not None:
        fig.savefig(path, dpi=120)
    return fig

