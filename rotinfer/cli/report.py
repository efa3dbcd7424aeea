"""``rotinfer report``: the HTML pages of a results folder (see :mod:`rotinfer.report`)."""

from __future__ import annotations

from pathlib import Path

import click

from ._app import cli

__all__ = ["report"]


@cli.command()
@click.argument("folder", type=click.Path(file_okay=True, dir_okay=True), metavar="DIR")
@click.pass_obj
def report(settings, folder):
    """Build the HTML pages for a results folder.

    DIR is a results folder (as written by `rotinfer fit --out DIR` or `rotinfer survey`):
    each star folder inside it gets its page, index.html, and DIR gets vetting.html, a
    sortable table of all stars with thumbnails and links. DIR may also be one star's
    folder (with summary.json): then only its page is written. The pages are
    self-contained and load nothing from the network.
    """
    from ..errors import InputError
    from ..report import SUMMARY_NAME, find_star_folders, write_star_page, write_vetting_page

    path = Path(folder)
    if not path.exists():
        raise InputError(str(path), "no such folder")
    if not path.is_dir():
        raise InputError(str(path), "not a folder (give a results folder or a star's folder)")
    if (path / SUMMARY_NAME).is_file():
        page = write_star_page(path)
        settings.echo(f"wrote {page}")
        return
    stars = find_star_folders(path)
    page = write_vetting_page(path, star_pages=True)
    settings.echo(f"wrote {len(stars)} star page(s) (DIR/<star>/index.html) and {page}")
