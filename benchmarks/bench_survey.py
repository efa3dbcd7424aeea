"""Survey throughput; writes benchmarks/results/survey.md.

Measures, in one run, on the same simulated stars and the same configuration:

1. ``run_survey`` on a local pool of 1 worker and of 2 workers, and on a local Dask
   cluster of 2 one-thread worker processes (``--dask-local 2``): wall time, stars per
   hour, and the parallel efficiency ``T(1) / (2 T(2))``;
2. that the three catalogues agree exactly (same per-star seeds whatever the executor).

The stars are one-sector light curves (27.4 d at 2-min cadence, two 13.7-d orbits with a
1-d gap: about 19,000 points) of the simulator's default "mixed" population, with only
the observing pattern replaced. Each survey starts with a fresh output folder, so the
times include starting the workers.

Usage::

    python benchmarks/bench_survey.py [--n 8] [--seed 1] [--config FILE]
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import astropy
import celerite2
import dask
import emcee
import numpy as np
from astropy.table import Table

from rotinfer import __version__
from rotinfer.io import write_light_curve
from rotinfer.simulate import ObservingPattern, draw_population, simulate_star, star_seed
from rotinfer.survey import run_survey

SECTOR = ObservingPattern.space(1, 27.4, 2.0, orbit_days=13.7, orbit_gap_days=1.0)


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def _write_stars(folder: Path, n: int, seed: int) -> int:
    folder.mkdir(parents=True)
    points = []
    for i, (params, _, name) in enumerate(draw_population(None, n, seed=seed)):
        star = simulate_star(params, SECTOR, seed=star_seed(seed, i), name=name)
        write_light_curve(star.lc, folder / f"{name}.csv")
        points.append(len(star.lc))
    return int(np.median(points))


def _comparable(path: Path) -> Table:
    t = Table.read(path, format="ascii.ecsv")
    del t["wall_time"]
    return t


def _same(a: Table, b: Table) -> bool:
    if a.colnames != b.colnames or len(a) != len(b):
        return False
    for name in a.colnames:
        x, y = a[name], b[name]
        if list(np.ma.getmaskarray(x)) != list(np.ma.getmaskarray(y)):
            return False
        if x.dtype.kind == "U":
            if list(x) != list(y):
                return False
        elif not np.array_equal(np.ma.filled(x, 0), np.ma.filled(y, 0)):
            return False
    return True


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=8, help="number of stars (default 8)")
    ap.add_argument("--seed", type=int, default=1, help="population and survey seed")
    ap.add_argument("--config", default=None, help="run configuration (default: built-in)")
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" / "survey.md"))
    args = ap.parse_args(argv)

    load_before = os.getloadavg()
    runs = [("local pool, 1 worker", dict(workers=1)),
            ("local pool, 2 workers", dict(workers=2)),
            ("Dask local cluster, 2 workers", dict(dask_local=2))]
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        median_points = _write_stars(tmp / "lc", args.n, args.seed)
        pattern = str(tmp / "lc" / "*.csv")
        for label, opts in runs:
            t0 = time.perf_counter()
            result = run_survey([pattern], out=tmp / label.replace(" ", "_"),
                                config=args.config, seed=args.seed, progress=False, **opts)
            seconds = time.perf_counter() - t0
            per_star = np.array([r.seconds for r in result.records])
            results[label] = (seconds, result, per_star, _comparable(result.catalog))
            print(f"{label}: {seconds:.1f} s, {result.n_ok} ok, {result.n_failed} failed",
                  file=sys.stderr)
    load_after = os.getloadavg()

    t1 = results[runs[0][0]][0]
    t2 = results[runs[1][0]][0]
    efficiency = t1 / (2 * t2)
    base = results[runs[0][0]][3]
    agree = all(_same(base, r[3]) for r in results.values())
    first = results[runs[0][0]][1]
    lines = [
        "# Survey throughput (`benchmarks/bench_survey.py`)",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC).isoformat(timespec='seconds')}",
        f"- machine: {platform.machine()}, {_cpu_model()}, {os.cpu_count()} CPU cores "
        f"(shared with other work: load average {load_before[0]:.1f} before, "
        f"{load_after[0]:.1f} after)",
        f"- versions: Python {platform.python_version()}, rotinfer {__version__}, "
        f"numpy {np.__version__}, celerite2 {celerite2.__version__}, emcee {emcee.__version__}, "
        f"astropy {astropy.__version__}, dask {dask.__version__}",
        f"- stars: {args.n} simulated one-sector light curves (27.4 d, 2-min cadence, median "
        f"{median_points} points), default 'mixed' population, seed {args.seed}",
        f"- configuration: {args.config or 'built-in defaults'} "
        f"(hash {first.config_hash}); survey seed {args.seed}",
        f"- outcome: {first.n_ok} ok, {first.n_failed} failed per run; catalogues of all runs "
        f"identical apart from wall time: {'yes' if agree else 'NO'}",
        "",
        "| executor | wall time [s] | stars per hour | median time per star in its worker [s] |",
        "|---|---:|---:|---:|",
    ]
    for label, (seconds, _result, per_star, _) in results.items():
        lines.append(f"| {label} | {seconds:.1f} | {args.n / seconds * 3600:.0f} | "
                     f"{np.median(per_star):.1f} |")
    lines += [
        "",
        f"Parallel efficiency at 2 workers, T(1 worker) / (2 T(2 workers)): **{efficiency:.2f}** "
        "(target >= 0.8).",
        "",
        "Times are wall-clock for the whole survey, including starting the worker processes "
        "and writing the catalogue, measured once each in this run.",
        "",
    ]
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    Path(args.out).write_text("\n".join(lines), encoding="utf-8")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
