"""``rotinfer scan``: the classic period searches (Lomb–Scargle and autocorrelation) per star.

Reads and prepares each light curve, runs :func:`rotinfer.periodogram.scan` and prints, per
star, the Lomb–Scargle period, power and false-alarm probability and the autocorrelation
period with its local peak height and uncertainty; ``--json`` prints the same as JSON and
``--plot`` draws the light curve, periodogram and autocorrelation function.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import click
import numpy as np

from ..config import dataclass_from_mapping, read_toml
from ..io import read_stars
from ..prepare import PrepareConfig, prepare
from ._app import cli
from ._inputs import input_options, period_kwargs, period_options, reader_kwargs

__all__ = ["scan"]

log = logging.getLogger("rotinfer")

# Units of the numbers in the JSON output (also written into it).
JSON_UNITS = {"period": "d", "uncertainty": "d", "lag": "d", "frequency": "1/d",
              "cadence": "d", "baseline": "d", "bin_width": "d", "smoothing": "d",
              "power": "normalised (fraction of variance)", "local_peak_height": "dimensionless",
              "window.power": "spectral-window power |sum exp(2 pi i f t)|^2 / N^2, in [0, 1]"}


@cli.command()
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=True))
@input_options
@period_options
@click.option("--method", "methods", multiple=True, metavar="NAME",
              help="Period search to run: lomb_scargle or acf (repeat for several; default: "
                   "all of them).")
@click.option("--config", "config_path", type=click.Path(dir_okay=False), metavar="FILE",
              help="TOML file with [prepare] and [periodogram] tables (defaults: "
                   "configs/default.toml).")
@click.option("--json", "as_json", is_flag=True,
              help="Print machine-readable results: a JSON list with one object per star.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), metavar="FILE",
              help="Save a figure (light curve, periodogram, autocorrelation) to FILE; with "
                   "several stars, each star's name is added to the file name.")
@click.pass_obj
def scan(settings, files, methods, config_path, as_json, plot_path, **opts):
    """Lomb-Scargle and autocorrelation periods of the stars in FILES.

    Each file is one star (several files make one star with --stitch). Per star, prints the
    Lomb-Scargle period (d), its normalised power and false-alarm probability, and the
    autocorrelation period (d) with its local peak height and uncertainty (d), then the
    candidate periods handed to the Gaussian-process fit. With -v every reading and
    preparation step is listed.
    """
    if plot_path:
        _check_plot_path(Path(plot_path))
    table = read_toml(config_path) if config_path else {}
    prep_cfg = dataclass_from_mapping(PrepareConfig, table.get("prepare"), section="prepare")
    stars = read_stars(files, **reader_kwargs(opts))

    # The period searches pull in SciPy's signal and stats modules; import them only once the
    # inputs are known to be readable, so bad input is reported at once.
    from ..figures import plot_scan
    from ..periodogram import PeriodogramConfig, available_methods
    from ..periodogram import scan as scan_periods

    scan_cfg = dataclass_from_mapping(PeriodogramConfig, table.get("periodogram"),
                                      section="periodogram")
    methods = tuple(methods) or available_methods()
    records = []
    for lc in stars:
        prep = prepare(lc, prep_cfg, **period_kwargs(opts))
        for note in lc.meta.notes + prep.notes:
            log.info("%s: %s", lc.meta.identifier, note)
        result = scan_periods(prep, methods=methods, config=scan_cfg)
        for note in result.notes:
            log.info("%s: %s", lc.meta.identifier, note)
        if plot_path:
            path = _plot_path(Path(plot_path), lc.meta.identifier, len(stars))
            plot_scan(prep, result, path=path)
            log.info("%s: figure written to %s", lc.meta.identifier, path)
        if as_json:
            records.append(_record(lc, prep, result))
        else:
            for line in _text(prep, result):
                settings.echo(line)
    if as_json:
        settings.echo(json.dumps(records, indent=2, allow_nan=False))


def _check_plot_path(path: Path) -> None:
    """Refuse, before any work, a figure path matplotlib cannot write."""
    if not path.parent.is_dir():
        raise click.BadParameter(f"folder {str(path.parent)!r} does not exist",
                                 param_hint="'--plot'")
    from matplotlib.figure import Figure

    formats = Figure().canvas.get_supported_filetypes()
    suffix = path.suffix.lstrip(".").lower()
    if suffix not in formats:
        raise click.BadParameter(
            f"{path.name!r} has no figure suffix matplotlib writes; use one of "
            f"{', '.join('.' + f for f in sorted(formats))}", param_hint="'--plot'")


def _plot_path(path: Path, identifier: str, n_stars: int) -> Path:
    """FILE itself for one star; FILE's stem + '_' + star name + suffix for several."""
    if n_stars == 1:
        return path
    safe = "".join(c if c.isalnum() or c in "-_." else "_" for c in identifier)
    return path.with_name(f"{path.stem}_{safe}{path.suffix}")


def _record(lc, prep, result) -> dict:
    out = result.to_dict()
    out["sources"] = list(lc.meta.sources)
    out["prepared"] = {"n_points": len(prep.lc), "n_input": prep.n_input,
                       "cadence": prep.cadence, "baseline": prep.lc.baseline,
                       "bin_width": prep.bin_width}
    out["units"] = JSON_UNITS
    return out


def _text(prep, result) -> list[str]:
    flux = prep.lc.flux
    scatter_ppt = 1e3 * 1.4826 * float(np.median(np.abs(flux - np.median(flux))))
    masked = ", ".join(f"{n} {reason}" for reason, n in prep.masked.counts().items())
    lines = [
        f"{result.identifier}: {len(prep.lc)} points in {prep.lc.n_segments} segment(s), "
        f"baseline {prep.lc.baseline:.2f} d, cadence {prep.cadence * 1440:.2f} min, "
        f"period range {result.min_period:.3g}-{result.max_period:.3g} d, "
        f"scatter {scatter_ppt:.3g} ppt, masked {masked or 'none'}"
    ]
    ls = result.lomb_scargle
    if ls is not None:
        if ls.peaks:
            lines.append(f"  Lomb-Scargle: period {ls.period:.4g} d, power {ls.peak_power:.3f} "
                         f"(normalised), false-alarm probability "
                         f"{_probability(ls.false_alarm_probability)}")
        else:
            lines.append("  Lomb-Scargle: no peak inside the period range")
    acf = result.acf
    if acf is not None:
        if acf.reliable:
            lines.append(f"  ACF: period {acf.period:.4g} d +- {acf.uncertainty:.2g} d, local "
                         f"peak height {acf.local_peak_height:.2f} (from "
                         f"{len(acf.selected)} repeating peak(s))")
        else:
            heights = [p.local_peak_height for p in acf.peaks
                       if acf.min_period <= p.lag <= acf.max_period]
            best = f"highest local peak height {max(heights):.2f}" if heights else "no peaks"
            lines.append(f"  ACF: no reliable peak ({best}; {acf.threshold:.2f} needed)")
    cands = ", ".join(f"{c.period:.4g} d ({c.method} {c.relation}, score {c.score:.2f})"
                      for c in result.candidates.candidates[:5])
    lines.append(f"  candidates: {cands or 'none'}")
    if result.window:
        at = ", ".join(f"{w.period:.4g} d (window power {w.power:.2f})" if w.source == "window"
                       else f"{w.period:.4g} d (recurring gaps)" for w in result.window)
        lines.append(f"  periodicities of the sampling itself: {at}; periods there are "
                     "suspect")
    return lines


def _probability(p: float) -> str:
    """astropy's Baluev bound underflows to 0 for strong peaks: say so rather than print 0."""
    return "< 1e-16" if p < 1e-16 else f"{p:.2g}"
