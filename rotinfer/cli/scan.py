"""``rotinfer scan``: read and prepare light curves and report what is there.

First version for the ingestion stage; the periodogram stage grows it.
"""

from __future__ import annotations

import logging

import click
import numpy as np

from ..io import read_stars
from ..prepare import prepare
from ._app import cli
from ._inputs import input_options, period_kwargs, period_options, reader_kwargs

log = logging.getLogger("rotinfer")


@cli.command()
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=True))
@input_options
@period_options
@click.pass_obj
def scan(settings, files, **opts):
    """Read FILES (one star each, or one star with --stitch) and report the prepared data.

    Prints one line per star: points kept, segments, baseline, cadence, the period range
    searched, the robust scatter in ppt and how many points were masked and why. With -v
    every reading and preparation step is listed.
    """
    stars = read_stars(files, **reader_kwargs(opts))
    for lc in stars:
        prep = prepare(lc, **period_kwargs(opts))
        flux = prep.lc.flux
        scatter_ppt = 1e3 * 1.4826 * float(np.median(np.abs(flux - np.median(flux))))
        masked = ", ".join(f"{n} {reason}" for reason, n in prep.masked.counts().items())
        settings.echo(
            f"{lc.meta.identifier}: {len(prep.lc)} points in {prep.lc.n_segments} segment(s), "
            f"baseline {prep.lc.baseline:.2f} d, cadence {prep.cadence * 1440:.2f} min, "
            f"period range {prep.min_period:.3g}-{prep.max_period:.3g} d, "
            f"scatter {scatter_ppt:.3g} ppt, masked {masked or 'none'}"
        )
        for note in lc.meta.notes + prep.notes:
            log.info("%s: %s", lc.meta.identifier, note)
