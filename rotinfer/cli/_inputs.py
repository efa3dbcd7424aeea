"""Reader options shared by every subcommand that reads light curves."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import click

__all__ = ["input_options", "period_kwargs", "period_options", "reader_kwargs"]

_READER_OPTIONS = [
    click.option(
        "--stitch", is_flag=True,
        help="The FILES are one star (sectors, quarters, seasons): join them, one segment per "
             "file. Without it each file is its own star.",
    ),
    click.option("--time-column", metavar="NAME",
                 help="Time column (default: the first of time, t, bjd, btjd, bkjd, mjd, jd...; "
                      "a 1-based number also works)."),
    click.option("--flux-column", metavar="NAME",
                 help="Flux column (default: PDCSAP_FLUX, else SAP_FLUX, else flux, f...)."),
    click.option("--flux-err-column", metavar="NAME",
                 help="Uncertainty column (default: <flux>_ERR, else flux_err, err, sigma, dy...); "
                      "'none' ignores uncertainties."),
    click.option("--quality-column", metavar="NAME",
                 help="Quality-flag column (default: QUALITY or SAP_QUALITY); 'none' ignores it."),
    click.option("--quality-bitmask", metavar="MASK", default="default", show_default=True,
                 help="Drop cadences whose quality flag shares a bit with MASK: 'default' drops "
                      "every flagged cadence, 'none' keeps all, or an integer (e.g. 175, 0xAF)."),
    click.option("--magnitudes", is_flag=True,
                 help="The flux column holds magnitudes: convert to relative flux "
                      "(uncertainties propagated)."),
]

_PERIOD_OPTIONS = [
    click.option("--min-period", type=click.FloatRange(min=0, min_open=True), metavar="DAYS",
                 help="Shortest period searched, in days (default: 3 cadences, at least 0.1 d)."),
    click.option("--max-period", type=click.FloatRange(min=0, min_open=True), metavar="DAYS",
                 help="Longest period searched, in days (default: half the baseline)."),
]


def input_options(func: Callable) -> Callable:
    """Add the light-curve reader options to a click command."""
    for option in reversed(_READER_OPTIONS):
        func = option(func)
    return func


def reader_kwargs(opts: Mapping[str, Any]) -> dict[str, Any]:
    """Map parsed reader options to keyword arguments of :func:`rotinfer.io.read_stars`."""
    return {
        "stitch": bool(opts.get("stitch", False)),
        "time_column": opts.get("time_column"),
        "flux_column": opts.get("flux_column"),
        "flux_err_column": opts.get("flux_err_column"),
        "quality_column": opts.get("quality_column"),
        "quality_bitmask": opts.get("quality_bitmask") or "default",
        "magnitudes": bool(opts.get("magnitudes", False)),
    }


def period_options(func: Callable) -> Callable:
    """Add ``--min-period`` and ``--max-period`` (days) to a click command."""
    for option in reversed(_PERIOD_OPTIONS):
        func = option(func)
    return func


def period_kwargs(opts: Mapping[str, Any]) -> dict[str, Any]:
    """Map parsed period options to keyword arguments of :func:`rotinfer.prepare.prepare`."""
    return {"min_period": opts.get("min_period"), "max_period": opts.get("max_period")}
