"""Refit chosen stars of the injection-recovery population under changed options.

A candidate change of a default is tried here first, on the stars it is meant to help
and on stars it could hurt, before the whole population (``bench_population.py``) is
rerun under it. Each named star (``00008-moderate``: number and class) is read from the
population's simulated light curves (``--work``, made by ``bench_population.py``) and
analysed with the population benchmark's configuration (``--config``) plus the
overrides (``--set TABLE.KEY=VALUE``, values as TOML) and the star's seed of that
benchmark (``rotinfer.survey.tasks.star_seed(seed, name)``, ``--seed`` as given to
``bench_population.py``, default 7), so that the only difference
from the star's row in ``results/population_stars.ecsv`` is the override. Finished stars
are kept in ``results/refit_<tag>_stars.ecsv`` (with the options' hash) and skipped by a
rerun with the same options, so the command resumes.

Usage::

    python benchmarks/bench_refit.py --tag secondary-3 \
        --set model.max_secondary_fraction=3 00008-moderate 00024-moderate ...

Writes ``benchmarks/results/refit_<tag>.md``: each star before (the population table)
and after (the override), against its true period range.

``--continue-from DIR`` starts each star from its stored chains ``DIR/<star>/chains.h5``
(a population work folder's ``survey/stars``) instead of from nothing: with a higher
``sampler.max_steps`` the chains that hit the population's cap are extended, which the
checkpoint allows because the cap does not enter its fingerprint. A star whose stored
chains do not match the options is refitted from the start, and the report says so; the
CPU column is then the continuation's alone.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import shutil
import sys
import time
import tomllib
import warnings
from pathlib import Path

import numpy as np
from astropy.table import Table
from bench_population import _harmonic, _truth, _within, light_curve_path, options_hash

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"
SURVEY_SEED = 7
COLUMNS = ("name", "period", "period_lo68", "period_hi68", "detected",
           "detection_delta_bic", "converged", "harmonic_warning", "modes", "cpu_time",
           "continued")


def _overrides(items) -> dict:
    out: dict = {}
    for item in items:
        key, _, value = item.partition("=")
        table, _, name = key.partition(".")
        if not (table and name and value):
            raise SystemExit(f"--set {item!r}: expected TABLE.KEY=VALUE")
        out.setdefault(table, {})[name] = tomllib.loads(f"v = {value}")["v"]
    return out


def _modes_text(summary: dict) -> str:
    """'7.02 (0.93), 3.54 (0.07)': each sampled mode's period [d] and probability."""
    return ", ".join(f"{m['period']:.3g} ({m['probability']:.2f})" for m in summary["modes"]
                     if m["sampled"])


def _continued_from(path: Path, source=None):
    """Mark a copied checkpoint with its source (``source`` given), or read the mark.

    A checkpoint that is resumed is appended to and keeps the mark; one that does not
    match the fit is rewritten from nothing and loses it.
    """
    import h5py

    if not path.exists():
        return None
    with h5py.File(path, "a" if source is not None else "r") as f:
        if source is not None:
            f.attrs["continued_from"] = str(source)
        return f.attrs.get("continued_from")


def _fit_one(name: str, work: Path, cfg, out_dir: Path, seed: int,
             continue_from: Path | None = None) -> tuple:
    """Fit one population star; its table row (run in a worker process with --jobs).

    With ``continue_from``, the star's stored chains are copied in first (unless its
    folder already has some) and the row's ``continued`` says whether the fit resumed
    from them rather than starting afresh (a mark on the copy survives only a resume).
    """
    from rotinfer.errors import ConvergenceWarning
    from rotinfer.io import read_stars
    from rotinfer.pipeline import analyse_star
    from rotinfer.survey.tasks import star_seed

    lc = read_stars([str(light_curve_path(work, name))])[0]
    chains = out_dir / name / "chains.h5"
    source = continue_from / name / "chains.h5" if continue_from is not None else None
    if source is not None and source.exists() and not chains.exists():
        chains.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(source, chains)
        _continued_from(chains, source)
    start = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        s = analyse_star(lc, config=cfg, seed=star_seed(seed, name),
                         out_dir=out_dir / name, figures=False).to_dict()
    cpu = time.process_time() - start
    p = s["period"]
    return (name, p["median"], *p["interval_68"], s["detection"]["detected"],
            s["detection"]["delta_bic"], s["diagnostics"]["converged"],
            s["harmonic"]["flag"], _modes_text(s), cpu,
            source is not None and _continued_from(chains) == str(source))


def fit_stars(names, work: Path, config: Path, overrides: dict, table: Path, *,
              seed: int = SURVEY_SEED, jobs: int = 1,
              continue_from: Path | None = None) -> Table:
    """Fit each star not yet in ``table`` under ``config`` + ``overrides``; the table.

    ``seed`` is the population run's survey seed: with no overrides a star's fit is the
    one in the population table, number for number. ``jobs`` worker processes fit stars
    side by side (each star's result does not depend on it); the table is written by
    this process after every finished star, so an interrupted run resumes.
    ``continue_from``: a folder of stored chains per star to extend (see the module's
    docstring).
    """
    from concurrent.futures import ProcessPoolExecutor, as_completed

    from rotinfer.pipeline import load_run_config

    cfg = load_run_config(config, overrides=overrides)
    key = options_hash(cfg)
    rows = []
    if table.exists():
        kept = Table.read(table, format="ascii.ecsv")
        if kept.meta.get("options_hash") == key:
            # (tables written before the "continued" column was added: never continued)
            rows = [tuple(r[c] if c in kept.colnames else False for c in COLUMNS)
                    for r in kept]
        else:
            print(f"{table}: made under other options; starting afresh", file=sys.stderr)
    have = {r[0] for r in rows}
    todo = [n for n in dict.fromkeys(names) if n not in have]
    out_dir = work / "refit" / table.stem

    def keep(row):
        rows.append(row)
        out = Table(rows=rows, names=COLUMNS)
        out.meta["options_hash"] = key
        out.write(table, format="ascii.ecsv", overwrite=True)
        print(f"{row[0]}: {row[1]:.3f} d ({row[8]}), {row[9]:.0f} CPU s "
              f"[{len(rows)} in the table]", file=sys.stderr, flush=True)

    if jobs <= 1:
        for name in todo:
            keep(_fit_one(name, work, cfg, out_dir, seed, continue_from))
    else:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            futures = [pool.submit(_fit_one, n, work, cfg, out_dir, seed, continue_from)
                       for n in todo]
            for f in as_completed(futures):
                keep(f.result())
    order = {n: i for i, n in enumerate(names)}
    rows.sort(key=lambda r: order.get(r[0], len(order)))
    return Table(rows=rows, names=COLUMNS) if rows else Table(names=COLUMNS)


def _verdict(row, lo: float, hi: float) -> tuple:
    """(1, within 10 %, harmonic error, detected, converged) of one star's table row."""
    p = float(row["period"])
    return (1, bool(_within(p, lo, hi)), bool(_harmonic(p, lo, hi)),
            bool(row["detected"]), bool(row["converged"]))


def report(stars: Table, work: Path, population: Path, header: list[str]) -> str:
    truth = {str(r["name"]): r for r in _truth(work)}
    before = {str(r["name"]): r for r in Table.read(population, format="ascii.ecsv")}
    lines = list(header) + [
        "", "| star | true range [d] | population table: period [d], within 10 %, "
        "detected | with the override: period [d], within 10 %, detected, sampled modes "
        "[d] (probability) | converged | CPU [s] |", "|---|---|---|---|---|---:|"]
    # Per class, [population table, override] x [stars, within 10 %, harmonic errors,
    # detected, converged], over the stars that are in both tables.
    tally: dict = {}
    for r in stars:
        name = str(r["name"])
        tr, old = truth[name], before.get(name)
        lo, hi = float(tr["period_min"]), float(tr["period_max"])
        new = _verdict(r, lo, hi)
        if old is not None:
            was = _verdict(old, lo, hi)
            t = tally.setdefault(name.split("-")[1], np.zeros((2, 5), int))
            t += (was, new)
            was = (f"{float(old['period']):.3f}, {'yes' if was[1] else 'no'}, "
                   f"{'yes' if was[3] else 'no'}")
        else:
            was = "not in the table"
        lines.append(
            f"| {name} | {lo:.3f}-{hi:.3f} | {was} | {float(r['period']):.3f}, "
            f"{'yes' if new[1] else 'no'}, {'yes' if new[3] else 'no'}, "
            f"{r['modes']} | {'yes' if new[4] else 'no'} | {float(r['cpu_time']):.0f} |")
    if tally:
        lines += ["", "Per class, population table → with the override (the stars above that "
                      "are in the population table; harmonic errors as in "
                      "`bench_population.py`):", "",
                  "| class | stars | within 10 % | harmonic errors | detected | converged |",
                  "|---|---:|---|---|---|---|"]
        lines += [f"| {cls} | {t[0, 0]} | " + " | ".join(
            f"{t[0, j]} → {t[1, j]}" for j in range(1, 5)) + " |" for cls, t in tally.items()]
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("stars", nargs="+", help="population stars, e.g. 00008-moderate")
    ap.add_argument("--tag", required=True, help="names the result files")
    ap.add_argument("--set", action="append", default=[], metavar="TABLE.KEY=VALUE")
    ap.add_argument("--work", default=str(HERE / "work" / "population"))
    ap.add_argument("--config", default=str(HERE / "population_bench.toml"))
    ap.add_argument("--population", default=str(RESULTS / "population_stars.ecsv"))
    ap.add_argument("--jobs", type=int, default=1,
                    help="worker processes fitting stars side by side (default 1)")
    ap.add_argument("--seed", type=int, default=SURVEY_SEED,
                    help="the population run's survey seed (default 7)")
    ap.add_argument("--continue-from", metavar="DIR",
                    help="extend each star's stored chains DIR/<star>/chains.h5 "
                         "(e.g. <work>/survey/stars) instead of starting afresh")
    args = ap.parse_args(argv)
    work = Path(args.work)
    if not (work / "lc").is_dir():
        raise SystemExit(f"{work}: no simulated population here; run bench_population.py")
    stars = fit_stars(args.stars, work, Path(args.config), _overrides(args.set),
                      RESULTS / f"refit_{args.tag}_stars.ecsv", seed=args.seed,
                      jobs=args.jobs,
                      continue_from=Path(args.continue_from) if args.continue_from else None)

    from rotinfer import __version__

    header = [
        f"# Population stars refitted: {args.tag}", "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores (shared)",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}",
        f"- configuration: {Path(args.config).name} with {', '.join(args.set) or 'nothing'} "
        f"changed; each star's seed of the population benchmark (survey seed {args.seed})",
        f"- command: python benchmarks/bench_refit.py --tag {args.tag} "
        + "".join(f"--set {s} " for s in args.set)
        + (f"--continue-from {args.continue_from} " if args.continue_from else "")
        + " ".join(args.stars),
    ]
    if args.continue_from:
        n = int(np.sum(stars["continued"])) if len(stars) else 0
        header.append(
            f"- continued from the stored chains in {args.continue_from}: {n} of "
            f"{len(stars)} stars resumed their chains (the others were fitted afresh); "
            "the CPU column is the continuation's alone for a resumed star")
    text = report(stars, work, Path(args.population), header)
    (RESULTS / f"refit_{args.tag}.md").write_text(text)
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
