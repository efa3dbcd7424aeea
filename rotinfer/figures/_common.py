"""Small helpers shared by the figure modules (labels, quantiles, posterior access)."""

from __future__ import annotations

import numpy as np

from ..summarise import weighted_quantile  # one convention for bands and intervals

#: Colours used for the posterior period in every figure (band and median line).
BAND_COLOUR = "C2"
TRUTH_COLOUR = "C3"
#: Reasons in a MaskRecord that mean "flare".
FLARE_REASONS = ("flare", "flare-tail")


def time_label(meta) -> str:
    """Axis label for relative times, naming the reference epoch when one is known."""
    if meta.time_reference == 0 and meta.time_system in ("", "unknown"):
        return "Time (d)"
    system = "" if meta.time_system in ("", "unknown") else f" {meta.time_system}"
    return f"Time (d after{system} {meta.time_reference:.10g})"


def probability(p: float) -> str:
    """A probability for display; astropy's Baluev bound underflows to 0 for strong peaks."""
    return "< 1e-16" if p < 1e-16 else f"{p:.2g}"


def posterior_period(posterior) -> tuple[np.ndarray, np.ndarray]:
    """Period draws (d) and their weights from a :class:`~rotinfer.sample.Posterior`."""
    phys = posterior.physical()
    weights = np.asarray(posterior.weights, dtype=float)
    return np.asarray(phys["period"], dtype=float), weights


def period_band(posterior) -> tuple[float, float, float]:
    """Median and 68 % equal-tailed interval (16th and 84th weighted percentiles), days."""
    period, weights = posterior_period(posterior)
    lo, med, hi = weighted_quantile(period, [0.16, 0.5, 0.84], weights)
    return float(med), float(lo), float(hi)


def flux_ppt(flux) -> np.ndarray:
    """Relative flux (median 1 after preparation) as parts per thousand about 1."""
    return (np.asarray(flux, dtype=float) - 1.0) * 1e3


def fold(time, period: float, t0: float = 0.0) -> np.ndarray:
    """Rotational phase in [0, 1) of each time for a period (d) and reference time t0 (d)."""
    return np.mod((np.asarray(time, dtype=float) - t0) / period, 1.0)


def binned_median(x, y, edges) -> tuple[np.ndarray, np.ndarray]:
    """Median of ``y`` in bins of ``x`` (bins with no points are left out)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    idx = np.digitize(x, edges) - 1
    centres, medians = [], []
    for k in range(len(edges) - 1):
        sel = idx == k
        if np.any(sel):
            centres.append(0.5 * (edges[k] + edges[k + 1]))
            medians.append(float(np.median(y[sel])))
    return np.asarray(centres), np.asarray(medians)


# Mass left out at each end when choosing corner-plot ranges: a mode holding more than this
# (e.g. a P/2 or 2P harmonic) stays inside the axes; stray draws further out do not stretch them.
_RANGE_TAIL = 5e-4


def plain_ticks(ax, which: str, log: bool) -> None:
    """Plain-number tick labels (3.2, 10, 100) instead of 3.2 x 10^0 on log axes."""
    from matplotlib import ticker

    axis = ax.xaxis if which == "x" else ax.yaxis
    if log:
        axis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 5.0), numticks=6))
        axis.set_minor_formatter(ticker.NullFormatter())
    axis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:.4g}"))


def log_range(x, w) -> tuple[float, float]:
    """Range of positive weighted draws holding all but 0.05 % of the mass at each end.

    Padded by 5 % of the span in log, so that every mode carrying more than that mass (a
    P/2 or 2P harmonic, say) is inside it.
    """
    lo, hi = weighted_quantile(x, [_RANGE_TAIL, 1.0 - _RANGE_TAIL], w)
    lo, hi = float(lo), float(hi)
    if not hi > lo:
        lo, hi = lo / 1.1, hi * 1.1
    pad = (hi / lo) ** 0.05
    return lo / pad, hi * pad
