"""``rotinfer simulate``: write simulated light curves of spotted stars and their truth."""

from __future__ import annotations

import click

from ..simulate.output import OUTPUT_FORMATS, write_population
from ._app import cli


@cli.command()
@click.option("--out", "out", required=True, type=click.Path(file_okay=False),
              help="Output folder (refused if it exists and is not empty, unless --overwrite).")
@click.option("--n", "n", default=20, show_default=True, type=click.IntRange(min=1),
              help="Number of stars.")
@click.option("--seed", default=1, show_default=True, type=click.IntRange(min=0),
              help="Population seed: the same seed gives byte-identical files.")
@click.option("--config", "config", default=None, type=click.Path(dir_okay=False),
              help="Population TOML file (default: the built-in configs/population.toml).")
@click.option("--population", default=None,
              help="Class or mixture to draw, e.g. easy, moderate, hard, null, sunlike, mixed "
                   "(default: the file's [population] default).")
@click.option("--format", "fmt", default="csv", show_default=True,
              type=click.Choice(OUTPUT_FORMATS), help="Light-curve file format.")
@click.option("--overwrite", is_flag=True,
              help="Write into a non-empty folder, replacing files of the same names.")
@click.pass_obj
def simulate(settings, out, n, seed, config, population, fmt, overwrite):
    """Simulate spotted, rotating, flaring stars with known truth.

    Writes one light curve per star (invented names), truth.ecsv (one row per
    star, units in the header), flares.ecsv and parameters.ecsv into OUT.
    """
    progress = None
    if settings.show_progress:
        from tqdm import tqdm

        def progress(it):
            return tqdm(it, total=n, desc="simulating", unit="star")

    run = write_population(out, n=n, seed=seed, config=config, population=population,
                           format=fmt, overwrite=overwrite, progress=progress)
    classes = ", ".join(f"{k} {v}" for k, v in sorted(run.counts.items()))
    settings.echo(f"wrote {run.n_stars} simulated light curves ({classes}) to {run.out}")
    settings.echo(f"truth: {run.truth_path}")
