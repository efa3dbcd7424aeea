"""``rotinfer survey``: many stars into one catalogue, locally or on a Dask cluster."""

from __future__ import annotations

import click

from ._app import cli


@cli.command()
@click.argument("inputs", nargs=-1, required=True)
@click.option("--out", "out", required=True, type=click.Path(file_okay=False),
              help="Survey folder: catalog.ecsv, catalog.csv and stars/<name>/ per star.")
@click.option("--config", "config", type=click.Path(dir_okay=False),
              help="Configuration file (the same as for `rotinfer fit`); default: built-in.")
@click.option("--workers", type=click.IntRange(min=1), default=None,
              help="Local worker processes (default: the usable CPU cores).")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="Run on a running Dask scheduler, e.g. tcp://10.0.0.5:8786.")
@click.option("--dask-local", "dask_local", type=click.IntRange(min=1), metavar="N",
              default=None, help="Start a local Dask cluster of N worker processes.")
@click.option("--seed", type=click.IntRange(min=0), default=0, show_default=True,
              help="Master seed; each star's seed follows from it and the star's identifier.")
@click.option("--resume/--force", "resume", default=True, show_default=True,
              help="Skip stars finished earlier with the same configuration, seed and inputs "
                   "(--resume), or recompute every star (--force).")
@click.option("--timeout-per-star", "timeout", type=click.FloatRange(min=0, min_open=True),
              metavar="SECONDS", default=None,
              help="Wall-time limit per star in seconds; a star past it is recorded as failed.")
@click.pass_obj
def survey(settings, inputs, out, config, workers, scheduler, dask_local, seed, resume,
           timeout):
    """Analyse every star in INPUTS and write one catalogue.

    INPUTS are folders of light curves, quoted glob patterns, light-curve files, or a
    single manifest (CSV/ECSV with columns `identifier` and `files`, several files
    of one star separated by `;`, optional stellar parameters).

    Each star's results go to OUT/stars/<name>/, written atomically; a rerun skips
    finished stars. Failed stars are listed in the catalogue with their error and the
    survey goes on. Ctrl-C saves what finished (exit 130); run again to complete it.
    """
    from ..survey import SurveyInterrupted, run_survey

    try:
        result = run_survey(
            list(inputs), out=out, config=config, workers=workers, scheduler=scheduler,
            dask_local=dask_local, seed=seed, resume=resume, force=not resume,
            timeout=timeout, progress=settings.show_progress,
        )
    except SurveyInterrupted as exc:
        click.echo("rotinfer: " + str(exc), err=True)
        raise click.exceptions.Exit(exc.exit_code) from None
    settings.echo(
        f"{result.n_stars} stars: {result.n_ok} ok, {result.n_failed} failed "
        f"({result.n_reused} finished by an earlier run, {result.n_computed} now) "
        f"in {result.seconds:.1f} s"
    )
    settings.echo(f"catalogue: {result.catalog}")
