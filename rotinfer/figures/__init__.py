"""Figures. Each function draws one figure from results and returns it; none keeps state.

Figures are drawn on :class:`matplotlib.figure.Figure` objects directly (not through pyplot),
so they are safe in scripts, servers and worker processes. Every axis names its unit.

* :func:`plot_scan` — light curve, Lomb–Scargle periodogram and ACF (the classic searches);
* :func:`plot_light_curve_model` — the light curve, masked points and flares, GP model;
* :func:`plot_summary` — the one figure per star: data and model, periodograms with the
  posterior period, folded light curve, period posterior;
* :func:`plot_corner` — posterior of period, amplitude and coherence time;
* :func:`plot_traces` / :func:`plot_chains` — chains of every independent ensemble;
* :func:`plot_thumbnail` — the small picture of the vetting page;
* :func:`write_star_figures` — all of them into a star's result folder.
"""

from .posterior import plot_chains, plot_corner, plot_traces
from .scan import plot_scan
from .star import FIGURE_FILES, plot_thumbnail, write_star_figures
from .summary import model_time_grid, plot_light_curve_model, plot_summary

__all__ = [
    "FIGURE_FILES",
    "model_time_grid",
    "plot_chains",
    "plot_corner",
    "plot_light_curve_model",
    "plot_scan",
    "plot_summary",
    "plot_thumbnail",
    "plot_traces",
    "write_star_figures",
]
