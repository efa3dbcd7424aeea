"""``rotinfer demo``: the whole pipeline on an invented star (see :mod:`rotinfer.demo`)."""

from __future__ import annotations

import click

from ._app import cli

__all__ = ["demo", "headline"]


def _yes(value) -> str:
    return "unknown" if value is None else ("yes" if value else "no")


def headline(result) -> list[str]:
    """The lines ``rotinfer demo`` prints for a :class:`rotinfer.demo.DemoResult`."""
    s = result.summary
    truth = result.truth
    p = s.get("period") or {}
    lo, hi = (p.get("interval_68") or [float("nan"), float("nan")])[:2]
    figs = ", ".join(sorted(name for name in result.figures if name != "summary.png"))
    ls = ((s.get("baselines") or {}).get("lomb_scargle") or {}).get("period")
    acf = ((s.get("baselines") or {}).get("acf") or {}).get("period")
    harmonic = (s.get("harmonic") or {}).get("flag")
    sampling = (s.get("sampling") or {}).get("flag")
    lines = [
        f"rotinfer demo: {truth.name}, an invented star (imaginary Larkspur survey; "
        f"simulated spotted star, period {truth.period_eq:g} d)",
        f"  light curve:  {result.light_curve} ({truth.n_points} points, "
        f"{truth.baseline:.1f} d at {truth.cadence_minutes:g}-min cadence, "
        f"{truth.n_flares} flares)",
        f"  truth:        {result.truth_file}",
        f"  summary:      {result.star_folder / 'summary.json'}",
        f"  figures:      {result.star_folder / 'summary.png'} (also {figs})",
        f"  star page:    {result.star_page}",
        f"  vetting page: {result.vetting_page}",
        f"  period:       {p.get('median', float('nan')):.4g} d "
        f"(68 % interval {lo:.4g}-{hi:.4g} d); truth {truth.period_eq:g} d",
        f"  baselines:    Lomb-Scargle {_num(ls)} d, ACF {_num(acf)} d",
        f"  detected:     {_yes(s.get('detected'))}{_false_alarm(s)}",
        f"  converged:    {_yes(s.get('converged'))}",
        f"  harmonic warning: {_yes(harmonic)}",
        f"  sampling warning: {_yes(sampling)}",
        f"  took {result.seconds:.0f} s",
    ]
    return lines


def _false_alarm(summary) -> str:
    from ..summarise import false_alarm_text

    rate = false_alarm_text(summary.get("detection"))
    return f" (false-alarm rate on simulated null stars: {rate})" if rate else ""


def _num(value) -> str:
    return "none" if value is None else f"{value:.4g}"


@cli.command()
@click.option("--out", "out", default="rotinfer-demo", show_default=True,
              type=click.Path(file_okay=False), metavar="DIR",
              help="Output folder (refused if it exists and is not empty, unless --overwrite).")
@click.option("--seed", default=1, show_default=True, type=click.IntRange(min=0),
              help="Seed of the simulated star and of its fit: the same seed gives the same "
                   "star and the same posterior.")
@click.option("--config", "config_path", type=click.Path(dir_okay=False), metavar="FILE",
              help="TOML configuration (default: the demo preset, configs/demo.toml).")
@click.option("--overwrite", is_flag=True,
              help="Replace the demo's files in a non-empty folder (other files are kept; "
                   "chains from the same seed and settings are resumed, not sampled again).")
@click.pass_obj
def demo(settings, out, seed, config_path, overwrite):
    """Run the whole pipeline on an invented demo star.

    Simulates Larkspur-4127, a made-up spotted, flaring star from an imaginary survey (one
    27-day sector of 2-minute data with a gap), writes its light curve to DIR, fits it,
    and writes the summary, figures and HTML pages under DIR/results. Prints where they
    are and the headline result: the period with its 68 % interval (days) beside the
    simulated truth, detection and convergence. Takes a few minutes.
    """
    from ..demo import run_demo

    result = run_demo(out, seed=seed, config=config_path, overwrite=overwrite,
                      progress=settings.show_progress)
    for text in result.warnings:
        if not settings.quiet:
            click.echo(f"rotinfer: warning: {text}", err=True)
    for line in headline(result):
        settings.echo(line)
