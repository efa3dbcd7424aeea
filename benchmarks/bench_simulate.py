"""Speed of the spotted-star simulator; writes benchmarks/results/simulate.md.

Measures, in one run:

1. simulating N one-year, 30-minute light curves (four 91.3-d quarters with monthly
   downlink gaps, about 17,000 points each) with parameters drawn from the default
   "mixed" population (only the observing pattern replaced), total and per star;
2. the same for each class separately (median per star);
3. the small-spot against the exact circular-spot model on the same stars;
4. the whole ``rotinfer simulate`` path (simulate + write CSV + truth tables) for a
   smaller number of stars, per star.

Usage::

    python benchmarks/bench_simulate.py [--n 1000] [--n-write 100] [--n-exact 20] [--seed 1]
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import astropy
import celerite2
import numpy as np
import scipy

from rotinfer import __version__
from rotinfer.simulate import ObservingPattern, draw_population, simulate_star, star_seed
from rotinfer.simulate.output import write_population

YEAR = ObservingPattern.space(4, 91.3, 30.0, orbit_days=30.4, orbit_gap_days=1.0)


def _simulate(members, seed, *, model=None):
    per_star, points = [], []
    t_all = time.perf_counter()
    for i, (params, _, name) in enumerate(members):
        if model is not None:
            params = dataclasses.replace(params, spot_model=model)
        t0 = time.perf_counter()
        star = simulate_star(params, YEAR, seed=star_seed(seed, i), name=name)
        per_star.append(time.perf_counter() - t0)
        points.append(len(star.lc))
    return time.perf_counter() - t_all, np.array(per_star), np.array(points)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1000, help="stars for the year-long timing")
    ap.add_argument("--n-write", type=int, default=100, help="stars for the CLI-path timing")
    ap.add_argument("--n-exact", type=int, default=20, help="stars for the exact-spot timing")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" / "simulate.md"))
    args = ap.parse_args(argv)

    load_before = os.getloadavg()
    members = draw_population(None, args.n, seed=args.seed)
    total, per_star, points = _simulate(members, args.seed)
    cats = np.array([m.params.category for m in members])

    sub = members[: args.n_exact]
    _, small_t, _ = _simulate(sub, args.seed, model="small")
    _, exact_t, _ = _simulate(sub, args.seed, model="exact")

    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        write_population(Path(tmp) / "sim", n=args.n_write, seed=args.seed, format="csv")
        write_total = time.perf_counter() - t0
    load_after = os.getloadavg()

    lines = [
        "# Simulator speed (`benchmarks/bench_simulate.py`)",
        "",
        f"- date: {datetime.date.today().isoformat()}; seed {args.seed}",
        f"- machine: {platform.platform()}, {platform.processor() or 'cpu'}, "
        f"{os.cpu_count()} logical CPUs; **shared with other jobs during the run**: "
        f"1-min load average {load_before[0]:.1f} before, {load_after[0]:.1f} after",
        f"- versions: rotinfer {__version__}, Python {sys.version.split()[0]}, numpy "
        f"{np.__version__}, scipy {scipy.__version__}, astropy {astropy.__version__}, "
        f"celerite2 {celerite2.__version__}",
        "- light curves: one year at 30-min cadence in four 91.3-d quarters with 1-d "
        f"downlink gaps every 30.4 d (median {int(np.median(points))} points); star "
        "parameters from the default `mixed` population (`configs/population.toml`), "
        "pattern replaced by this one",
        "",
        "| what | stars | total (s) | median per star (ms) | 90th percentile (ms) |",
        "|---|---:|---:|---:|---:|",
        f"| simulate, one year at 30 min, all classes | {args.n} | {total:.1f} | "
        f"{1e3 * np.median(per_star):.1f} | {1e3 * np.percentile(per_star, 90):.1f} |",
    ]
    for cls in sorted(set(cats)):
        sel = per_star[cats == cls]
        lines.append(f"| ... class `{cls}` | {sel.size} | {sel.sum():.1f} | "
                     f"{1e3 * np.median(sel):.1f} | {1e3 * np.percentile(sel, 90):.1f} |")
    lines += [
        f"| small-spot model (same first {len(sub)} stars) | {len(sub)} | {small_t.sum():.1f} | "
        f"{1e3 * np.median(small_t):.1f} | {1e3 * np.percentile(small_t, 90):.1f} |",
        f"| exact circular-spot model (same stars) | {len(sub)} | {exact_t.sum():.1f} | "
        f"{1e3 * np.median(exact_t):.1f} | {1e3 * np.percentile(exact_t, 90):.1f} |",
        f"| `write_population` (simulate + CSV + truth tables), default population | "
        f"{args.n_write} | {write_total:.1f} | {1e3 * write_total / args.n_write:.1f} (mean) | |",
        "",
        f"Median ratio exact / small-spot per star: "
        f"{np.median(exact_t / small_t):.1f}.",
        "",
        "The `write_population` row uses each class's own observing pattern (27-d 2-min "
        "sectors, years at 30 min, two ground seasons at 10 min) and includes writing the "
        "CSV files and tables; writing is not timed on its own.",
        "",
    ]
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text("\n".join(lines))
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
