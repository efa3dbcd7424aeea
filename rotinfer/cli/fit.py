"""``rotinfer fit``: the Gaussian-process rotation posterior for each star.

For each star (each file, or several files with ``--stitch``) it runs
:func:`rotinfer.pipeline.analyse_star` and writes ``DIR/<file stem>/`` with
``summary.json``, ``samples.npz`` and ``chains.h5`` (an interrupted fit resumes
from ``chains.h5``). One line per star goes to standard output: the period
with its 68 % interval, detection, harmonic warning and convergence.
"""

from __future__ import annotations

import logging
import warnings
from pathlib import Path

import click

from ..errors import ConvergenceWarning
from ._app import cli
from ._inputs import input_options, reader_kwargs
from ._stellar import (
    STELLAR_OPTION_NAMES,
    relations_from_options,
    stellar_from_options,
    stellar_options,
)

__all__ = ["fit"]

log = logging.getLogger("rotinfer")


@cli.command()
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=True))
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              metavar="DIR", help="Results folder; each star gets DIR/<file stem>/.")
@click.option("--config", "config_path", type=click.Path(dir_okay=False), metavar="FILE",
              help="TOML configuration (defaults: configs/default.toml).")
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seed; star number k (0-based, in the order given) uses SEED + k.")
@input_options
@stellar_options
@click.pass_obj
def fit(settings, files, out_dir, config_path, seed, **opts):
    """Infer the rotation period of each star in FILES with the Gaussian-process model.

    Writes DIR/<stem>/summary.json (period median and 68 %/95 % intervals in days,
    amplitude in ppt, coherence time, detection, harmonic check, convergence diagnostics,
    the Lomb-Scargle and ACF baselines, provenance), samples.npz (posterior draws) and
    chains.h5 (the chains; a rerun resumes from it).
    """
    from ..io import read_stars
    from ..pipeline import analyse_star, load_run_config, star_folder_name

    config = load_run_config(config_path)
    stellar = stellar_from_options(opts)
    relations = relations_from_options(opts)
    opts = {k: v for k, v in opts.items() if k not in STELLAR_OPTION_NAMES}
    stars = read_stars(files, **reader_kwargs(opts))
    out = Path(out_dir)
    used: set[str] = set()
    for k, lc in enumerate(stars):
        name = star_folder_name(lc)
        while name in used:
            name = name + "_"
        used.add(name)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ConvergenceWarning)
            summary = analyse_star(
                lc, config=config, seed=seed + k, out_dir=out / name,
                progress=settings.show_progress, stellar=stellar, relations=relations,
            )
        for w in caught:
            if issubclass(w.category, ConvergenceWarning):
                click.echo(f"rotinfer: warning: {lc.meta.identifier}: {w.message}", err=True)
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        from ..summarise import false_alarm_text

        p = summary.period
        flags = [
            ("detected" if summary.detected else "NOT DETECTED")
            + (f" (false-alarm rate on simulated nulls {fa})"
               if summary.detected and (fa := false_alarm_text(summary.detection)) else ""),
            "converged" if summary.converged else "NOT CONVERGED",
        ]
        if summary.harmonic["flag"]:
            flags.append("HARMONIC WARNING" + _alternatives(summary))
        if summary.sampling.get("flag"):
            flags.append("SAMPLING WARNING")
        settings.echo(
            f"{lc.meta.identifier}: P = {p['median']:.4g} d "
            f"(68 %: {p['interval_68'][0]:.4g}-{p['interval_68'][1]:.4g} d), "
            f"amplitude {summary.amplitude_ppt['median']:.3g} ppt; {', '.join(flags)}; "
            f"-> {out / name}"
        )
        if not summary.converged:
            click.echo(
                f"rotinfer: {lc.meta.identifier}: to continue these chains, rerun this "
                f"command with a higher [sampler] max_steps (now {config.sampler.max_steps} steps) "
                f"in --config: {out / name / 'chains.h5'} is extended, not sampled again",
                err=True)
        from ..report import write_star_page

        write_star_page(out / name)
        derived = (summary.extra or {}).get("derived")
        if derived:
            for line in derived.get("lines", []):
                settings.echo(f"  {line}")
    if stars:
        from ..report import write_vetting_page

        write_vetting_page(out, star_pages=False)


def _alternatives(summary) -> str:
    """' (P/2 = 3.54 d: probability 0.49; ACF at 2P: 7.1 d)': what is behind the warning."""
    from ..summarise import BASELINE_NAMES

    limit = summary.harmonic["threshold"]
    parts = []
    for m in summary.modes:
        if m["relation"] not in ("P/2", "2P"):
            continue
        p = m["probability"] if m["sampled"] else m["laplace_probability"]
        if p is not None and p > limit:
            parts.append(f"{m['relation']} = {m['period']:.4g} d: probability {p:.2f}"
                         + ("" if m["sampled"] else " (Laplace, not sampled)"))
    for b in summary.harmonic.get("baselines", []):
        parts.append(f"{BASELINE_NAMES[b['method']]} at {b['relation']}: {b['period']:.4g} d")
    return f" ({'; '.join(parts)})" if parts else ""
