"""Binning: how the number of points the GP sees trades speed against accuracy.

The same simulated 27-day 2-min sectors (about 19,000 points; easy and moderate stars
of configs/population.toml) are fitted with the default pipeline and convergence rule,
changing only how far the light curve is binned: ``[prepare] max_points`` takes each
value of ``--points`` (the bins widen until no more points remain, never beyond
``bin_fraction`` x the shortest period). The shortest period is fixed at 0.5 d (the
population's fastest rotators) and ``bin_fraction`` is 0.5, so bins may reach 0.25 d;
a sinusoid averaged over a bin of width w keeps sinc(w / P) of its amplitude (0.99 at
w = 0.11 d, P = 1 d).

Per star and setting: points fitted, CPU and wall seconds, steps, the convergence
verdict, the posterior median and its 68 % / 95 % intervals against the true period
range. Wall and CPU are measured in one process, one fit at a time.

Resumable: every finished fit is kept in ``results/binning_fits.jsonl`` with the
resolved configuration it ran under (``bench_population.options_hash`` of every
stage's options); a rerun skips the fits (star, max_points, seed) it already has under
the same options and adds the rest, so a run stopped for time continues in the next
session even when its work is otherwise lost.

Run:  python benchmarks/bench_binning.py [--n 3] [--points 4000 2000 1000 500 250]
Writes benchmarks/results/binning.md (all finished fits, also while it runs).
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import sys
from pathlib import Path

import numpy as np
from bench_fit import fit_one, make_pattern
from bench_population import _overlaps, _within, options_hash


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=3, help="stars per class (default 3)")
    ap.add_argument("--classes", nargs="+", default=["easy", "moderate"])
    ap.add_argument("--points", type=int, nargs="+", default=[4000, 2000, 1000, 500, 250])
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" / "binning.md"))
    ap.add_argument("--fits", default=str(Path(__file__).parent / "results"
                                          / "binning_fits.jsonl"),
                    help="finished fits, kept between runs (JSON lines)")
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.pipeline import load_run_config
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    pattern = make_pattern("sector")
    stars = []
    for k, cls in enumerate(args.classes):
        members = draw_population(None, args.n, seed=args.seed + k, population=cls)
        for i, (params, _, name) in enumerate(members):
            sim = simulate_star(params, pattern, seed=star_seed(args.seed + k, i),
                                name=f"{name}-{cls}")
            stars.append((cls, sim))
    kept = _load_fits(Path(args.fits))
    rows = []
    for j, (cls, sim) in enumerate(stars):
        for n in args.points:
            overrides = {"prepare": {"max_points": n, "min_period": 0.5, "bin_fraction": 0.5}}
            config = load_run_config(None, overrides=overrides)
            key = (sim.lc.meta.identifier, n, j, options_hash(config))
            if key in kept:
                rows.append(kept[key])
                continue
            r = fit_one(sim, config, seed=j)
            r.update(cls=cls, max_points=n, seed=j, options=key[3])
            rows.append(r)
            with open(args.fits, "a") as fh:
                fh.write(json.dumps(r, default=float) + "\n")
            print({k: r[k] for k in ("name", "max_points", "n_fit", "cpu", "converged",
                                     "period", "truth")}, flush=True)
            _write(rows, args, __version__, done=len(rows), total=len(stars) * len(args.points))


def _load_fits(path: Path) -> dict:
    """Kept fits by (star, max_points, seed, options hash); an unreadable line is skipped."""
    kept = {}
    if path.exists():
        for line in path.read_text().splitlines():
            try:
                r = json.loads(line)
                kept[(r["name"], r["max_points"], r["seed"], r["options"])] = r
            except (ValueError, KeyError):
                continue
    return kept


def _write(rows, args, __version__, *, done, total):
    """Write the table of the fits so far (after every fit: an interrupted run keeps them)."""
    load = os.getloadavg()
    date = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC")
    lines = [
        "# Binning: speed against accuracy on 2-min sectors",
        "",
        f"- date: {date}; machine: {platform.machine()}, {os.cpu_count()} cores shared "
        f"(load average at the end {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f})",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{sys.version.split()[0]}; population seeds {args.seed}+class index; "
        f"{args.n} stars per class ({', '.join(args.classes)}); {done} of {total} fits done",
        "- configuration: defaults (convergence rule included) except [prepare] min_period "
        "= 0.5, bin_fraction = 0.5 and max_points as below",
        "- within 10 %: posterior median inside [0.9 P_min, 1.1 P_max] of the true range; "
        "covered: the interval overlaps the true range; width: 68 % width / median",
        "",
        "| max_points | points fitted (median) | median CPU [s] | median wall [s] | converged "
        "| within 10 % | 68 % covers | 95 % covers | median 68 % width |",
        "|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for n in args.points:
        sel = [r for r in rows if r["max_points"] == n]
        k = len(sel)
        if not k:
            continue
        width = np.median([(r["interval_68"][1] - r["interval_68"][0]) / r["period"]
                           for r in sel])
        lines.append(
            f"| {n} | {np.median([r['n_fit'] for r in sel]):.0f} "
            f"| {np.median([r['cpu'] for r in sel]):.0f} "
            f"| {np.median([r['wall'] for r in sel]):.0f} "
            f"| {sum(r['converged'] for r in sel)}/{k} "
            f"| {sum(bool(_within(r['period'], *r['truth'])) for r in sel)}/{k} "
            f"| {sum(bool(_overlaps(*r['interval_68'], *r['truth'])) for r in sel)}/{k} "
            f"| {sum(bool(_overlaps(*r['interval_95'], *r['truth'])) for r in sel)}/{k} "
            f"| {width * 100:.2f} % |"
        )
    lines += ["", "| star | class | max_points | points | CPU [s] | steps | converged | "
              "period [d] | 68 % [d] | true range [d] |",
              "|---|---|---:|---:|---:|---|---|---:|---|---|"]
    for r in rows:
        lines.append(
            f"| {r['name']} | {r['cls']} | {r['max_points']} | {r['n_fit']} | {r['cpu']:.0f} "
            f"| {r['steps']} | {r['converged']} | {r['period']:.4f} | {r['interval_68'][0]:.4f}-"
            f"{r['interval_68'][1]:.4f} | {r['truth'][0]:.4f}-{r['truth'][1]:.4f} |"
        )
    Path(args.out).write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
