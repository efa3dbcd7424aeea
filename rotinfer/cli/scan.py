"""``rotinfer scan``: read and prepare light curves and report what is there.

First version for the ingestion stage; the periodogram stage grows it.
"""

from __future__ import annotations

import click

from ..io import read_stars
from ..prepare import prepare
from ._app import cli
from ._inputs import input_options, reader_kwargs


@cli.command()
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=True))
@input_options
@click.pass_obj
def scan(settings, files, **opts):
    """Read FILES (one star each, or one star with --stitch) and report the prepared data."""
    stars = read_stars(files, **reader_kwargs(opts))
    for lc in stars:
        prep = prepare(lc)
        settings.echo(
            f"{lc.meta.identifier}: {len(prep.lc)} points in {prep.lc.n_segments} segment(s), "
            f"baseline {prep.lc.baseline:.2f} d, cadence {prep.cadence * 1440:.2f} min, "
            f"period range {prep.min_period:.3g}-{prep.max_period:.3g} d"
        )
