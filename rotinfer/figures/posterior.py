"""Posterior figures: the corner plot of period, amplitude and coherence time, and chain traces."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ._common import TRUTH_COLOUR, log_range, plain_ticks

__all__ = ["CORNER_QUANTITIES", "TRACE_QUANTITIES", "plot_chains", "plot_corner", "plot_traces"]

#: (key in ``Posterior.physical()``, axis label with unit) of the corner plot.
CORNER_QUANTITIES = (
    ("period", "Period (d)"),
    ("amplitude_ppt", "Amplitude (ppt)"),
    ("coherence_days", "Coherence time (d)"),
)

#: (key in ``Posterior.physical()``, axis label with unit) of the traces; the mean level is
#: drawn as ppt about 1.
TRACE_QUANTITIES = (
    ("period", "Period (d)"),
    ("amplitude_ppt", "Amplitude (ppt)"),
    ("coherence_days", "Coherence time (d)"),
    ("secondary_fraction", "P/2-mode fraction f"),
    ("background_amplitude_ppt", "Background (ppt)"),
    ("background_timescale_days", "Background time (d)"),
    ("night_offset_ppt", "Night offsets (ppt)"),
    ("jitter_ppt", "Jitter (ppt)"),
    ("mean", "Mean level − 1 (ppt)"),
)



# Quantities sampled in log space, traced on logarithmic axes.
_LOG_TRACES = frozenset({"amplitude_ppt", "coherence_days", "background_amplitude_ppt",
                         "background_timescale_days", "night_offset_ppt",
                         "jitter_ppt"})
# A corner axis spanning more than this factor (as it does when a mode at P/2 or 2P is in
# view) is drawn logarithmic.
_LOG_AXIS_RATIO = 1.8


def plot_corner(posterior=None, *, samples: Mapping[str, np.ndarray] | None = None,
                weights=None, path: str | Path | None = None, title: str | None = None,
                truth: Mapping[str, float] | None = None, bins: int = 40) -> Figure:
    """Corner plot of period, amplitude and coherence time (weighted posterior draws).

    Each range holds every mode with more than 0.05 % of the posterior mass on either side,
    so harmonic modes at P/2 and 2P stay in view when they carry weight; an axis spanning
    more than a factor 1.8 (as one holding P and P/2 or 2P does) is logarithmic, so those
    modes then sit at equal distances either side of P. The 1-d histograms show the 16th,
    50th and 84th weighted percentiles.

    Parameters
    ----------
    posterior : Posterior, optional
        Output of :func:`rotinfer.sample.fit`; its ``physical()`` draws and ``weights`` are
        used (each mode's draws carry its probability).
    samples : mapping of str to ndarray, optional
        Instead of ``posterior``: arrays ``period`` (d), ``amplitude_ppt`` and
        ``coherence_days`` (d) of equal length, e.g. from ``samples.npz``.
    weights : array_like, optional
        Weights of ``samples`` (default equal).
    path : str or Path, optional
        Where to save the figure.
    title : str, optional
        Figure title.
    truth : mapping, optional
        Known values (simulations) with the same keys, drawn as lines.
    bins : int
        Histogram bins per axis.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ValueError
        If neither (or both of) ``posterior`` and ``samples`` is given.

    References
    ----------
    Foreman-Mackey, D. 2016, JOSS 1, 24 (corner.py).
    """
    import corner

    if (posterior is None) == (samples is None):
        raise ValueError("give either a posterior or samples")
    if posterior is not None:
        samples = posterior.physical()
        weights = posterior.weights
    keys = [k for k, _ in CORNER_QUANTITIES]
    data = np.column_stack([np.asarray(samples[k], dtype=float) for k in keys])
    w = np.ones(len(data)) if weights is None else np.asarray(weights, dtype=float)
    w = w / w.sum()
    ranges = [log_range(data[:, j], w) for j in range(data.shape[1])]
    scales = ["log" if hi / lo > _LOG_AXIS_RATIO else "linear" for lo, hi in ranges]
    truths = None
    if truth is not None:
        truths = [truth.get(k) if truth.get(k) is not None else None for k in keys]
    fig = Figure(figsize=(7.5, 7.5))
    corner.corner(
        data, bins=bins, range=ranges, weights=w, axes_scale=scales, fig=fig,
        labels=[label for _, label in CORNER_QUANTITIES], quantiles=[0.16, 0.5, 0.84],
        show_titles=True, title_fmt=".3g", title_kwargs={"fontsize": 9},
        label_kwargs={"fontsize": 10}, color="C0", truths=truths, truth_color=TRUTH_COLOUR,
        plot_datapoints=True, data_kwargs={"alpha": 0.15, "ms": 1.5}, max_n_ticks=4,
    )
    k = len(keys)
    axes = np.asarray(fig.axes).reshape(k, k)
    for i in range(k):
        for j in range(i + 1):
            plain_ticks(axes[i, j], "x", scales[j] == "log")
            if j < i:
                plain_ticks(axes[i, j], "y", scales[i] == "log")
    if title:
        fig.subplots_adjust(top=0.9)
        fig.suptitle(title, fontsize=11, y=0.99)
    if path is not None:
        fig.savefig(path, dpi=110)
    return fig


def plot_chains(chains: Sequence[Sequence[np.ndarray]], *, labels: Sequence[str],
                burn_in: Sequence[Sequence[int]], column_titles: Sequence[str] | None = None,
                max_steps_drawn: int = 600, max_walkers_drawn: int = 16,
                truths: Sequence[float | None] | None = None,
                log_rows: Sequence[bool] | None = None, path: str | Path | None = None,
                title: str | None = None) -> Figure:
    """Traces of chains: one row per quantity, one column per sampled mode.

    Parameters
    ----------
    chains : sequence (modes) of sequences (ensembles) of ndarray (n_steps, n_walkers, k)
        Values of the k quantities along each independent ensemble's walkers.
    labels : sequence of str, length k
        Axis labels with units.
    burn_in : sequence (modes) of sequences (ensembles) of int
        Steps discarded as burn-in per ensemble (shaded grey).
    column_titles : sequence of str, optional
        One title per mode.
    max_steps_drawn, max_walkers_drawn : int
        Long chains are thinned for drawing to about this many steps, and at most this many
        walkers of each ensemble are drawn (the ensemble median over all walkers is always
        drawn as a line).
    truths : sequence of float or None, length k, optional
        Known values drawn as dashed lines.
    log_rows : sequence of bool, length k, optional
        Draw these quantities on logarithmic axes (positive scale parameters).
    path : str or Path, optional
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Each ensemble in its own colour (its walkers faint, its median bold); the x axis is
        the step number.
    """
    n_modes = len(chains)
    k = len(labels)
    fig = Figure(figsize=(4.2 * n_modes + 1.5, 1.35 * k + 0.8), layout="constrained")
    axes = fig.subplots(k, n_modes, squeeze=False, sharex="col")
    for m, (mode_chains, mode_burn) in enumerate(zip(chains, burn_in, strict=True)):
        for e, (chain, burn) in enumerate(zip(mode_chains, mode_burn, strict=True)):
            n_steps, n_walkers = chain.shape[:2]
            stride = max(1, n_steps // max_steps_drawn)
            steps = np.arange(0, n_steps, stride)
            walkers = np.arange(min(n_walkers, max_walkers_drawn))
            colour = f"C{e % 10}"
            for j in range(k):
                ax = axes[j, m]
                values = chain[::stride, :, j]
                ax.plot(steps, values[:, walkers], color=colour, lw=0.4, alpha=0.25,
                        rasterized=True)
                ax.plot(steps, np.median(values, axis=1), color=colour, lw=1.2,
                        label=f"ensemble {e + 1}" if j == 0 else None)
                if burn > 0:
                    ax.axvspan(0, burn, color="0.85", zorder=0, lw=0,
                               label="burn-in" if (j == 0 and e == 0) else None)
        for j in range(k):
            ax = axes[j, m]
            if truths is not None and truths[j] is not None and np.isfinite(truths[j]):
                ax.axhline(truths[j], color=TRUTH_COLOUR, ls="--", lw=1.0,
                           label="truth" if j == 0 else None)
            if log_rows is not None and log_rows[j]:
                ax.set_yscale("log")
                plain_ticks(ax, "y", True)
            if m == 0:
                ax.set_ylabel(labels[j], fontsize=8)
            ax.tick_params(labelsize=7)
        axes[-1, m].set_xlabel("Step (per walker)")
        if column_titles is not None:
            axes[0, m].set_title(column_titles[m], fontsize=9)
        axes[0, m].legend(loc="upper right", fontsize=6, ncol=3, frameon=True, framealpha=0.7)
    if title:
        fig.suptitle(title, fontsize=11)
    if path is not None:
        fig.savefig(path, dpi=100)
    return fig


def plot_traces(posterior, *, path: str | Path | None = None, title: str | None = None,
                truth: Mapping[str, float] | None = None) -> Figure:
    """Chain traces of every sampled mode and independent ensemble, burn-in shaded.

    Parameters
    ----------
    posterior : Posterior
        Output of :func:`rotinfer.sample.fit`; each sampled mode's ``run.chains`` (one per
        independent ensemble) are drawn in the reported quantities: period (d), amplitude
        (ppt), coherence time (d), the P/2-mode fraction, background amplitude (ppt) and
        timescale (d), jitter (ppt) and the mean level (ppt about 1) — those the model has.
    path : str or Path, optional
    title : str, optional
    truth : mapping, optional
        Known values (simulations), keyed as :data:`TRACE_QUANTITIES`, drawn dashed.

    Returns
    -------
    matplotlib.figure.Figure
    """
    model = posterior.model
    probe = model.physical(posterior.samples[:1])
    keys = [(key, label) for key, label in TRACE_QUANTITIES if key in probe]
    chains, burns, titles = [], [], []
    for s in posterior.sampled:
        mode_chains = []
        for chain in s.run.chains:
            n_steps, n_walkers, ndim = chain.shape
            phys = model.physical(chain.reshape(-1, ndim))
            cols = []
            for key, _ in keys:
                v = np.asarray(phys[key], dtype=float)
                cols.append((v - 1.0) * 1e3 if key == "mean" else v)
            mode_chains.append(np.stack(cols, axis=-1).reshape(n_steps, n_walkers, len(keys)))
        chains.append(mode_chains)
        burns.append(list(s.run.diagnostics.burn_in))
        verdict = "converged" if s.run.converged else "NOT converged"
        titles.append(f"mode at {s.mode.period:.4g} d (probability {s.probability:.2f}); "
                      f"{verdict}")
    truths = None
    if truth is not None:
        truths = []
        for key, _ in keys:
            value = truth.get(key)
            if value is not None and key == "mean":
                value = (value - 1.0) * 1e3
            truths.append(value)
    return plot_chains(chains, labels=[label for _, label in keys], burn_in=burns,
                       column_titles=titles, title=title, truths=truths,
                       log_rows=[key in _LOG_TRACES for key, _ in keys], path=path)
