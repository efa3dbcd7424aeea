"""Survey throughput; writes benchmarks/results/survey.md.

Measures, in one run, on the same simulated stars and the same configuration:

1. ``run_survey`` on a local pool of 1 worker and of 2 workers, and on a local Dask
   cluster of 2 one-thread worker processes (``--dask-local 2``): wall time, stars per
   hour, and the parallel efficiency ``T(1) / (2 T(2))``;
2. that the three catalogues agree exactly (same per-star seeds whatever the executor).

The stars are one-sector light curves (27.4 d at 2-min cadence, two 13.7-d orbits with a
1-d gap: about 19,000 points) of the simulator's default "mixed" population, with only
the observing pattern replaced. The configuration (``benchmarks/survey_bench.toml``) is
the default pipeline with a fixed 0.5-13 d period range, so the light curves bin to 1,000
points, and a sampler capped at 400 steps: the default budget (up to 20,000 steps) would
make the run take hours on two cores without changing what is measured here, the
survey's overhead and parallel efficiency. Each survey starts with a fresh output
folder, so the times include starting the workers.

Usage::

    python benchmarks/bench_survey.py [--n 8] [--seed 1] [--config FILE]
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import subprocess
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

import rotinfer
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
    del t["wall_time"], t["cpu_time"]
    return t


def _differences(a: Table, b: Table) -> list[str]:
    """Names of the columns whose values (or masks) differ; [] when identical."""
    if a.colnames != b.colnames or len(a) != len(b):
        return ["(column names or row count)"]
    out = []
    for name in a.colnames:
        x, y = a[name], b[name]
        if list(np.ma.getmaskarray(x)) != list(np.ma.getmaskarray(y)):
            out.append(name)
        elif x.dtype.kind == "U":
            if list(x) != list(y):
                out.append(name)
        elif not np.array_equal(np.ma.filled(x, 0), np.ma.filled(y, 0)):
            out.append(name)
    return out


def _git_state() -> str:
    root = Path(__file__).resolve().parents[1]
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=root, text=True,
                              capture_output=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "rotinfer"], cwd=root,
                               text=True, capture_output=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"
    return head + (" with uncommitted changes under rotinfer/" if dirty else "")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=8, help="number of stars (default 8)")
    ap.add_argument("--seed", type=int, default=1, help="population and survey seed")
    ap.add_argument("--config", default=str(Path(__file__).parent / "survey_bench.toml"),
                    help="run configuration (default: benchmarks/survey_bench.toml)")
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" / "survey.md"))
    args = ap.parse_args(argv)

    code = _git_state()
    package = Path(rotinfer.__file__).parent
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
            wall = np.array([r.seconds for r in result.records])
            cpu = np.array([r.cpu_seconds for r in result.records])
            results[label] = (seconds, result, wall, cpu, _comparable(result.catalog),
                              opts.get("workers") or opts.get("dask_local"))
            print(f"{label}: {seconds:.1f} s, {result.n_ok} ok, {result.n_failed} failed",
                  file=sys.stderr)
    load_after = os.getloadavg()

    t1 = results[runs[0][0]][0]
    t2 = results[runs[1][0]][0]
    efficiency = t1 / (2 * t2)
    base = results[runs[0][0]][4]
    differ = sorted({c for r in results.values() for c in _differences(base, r[4])})
    first = results[runs[0][0]][1]
    lines = [
        "# Survey throughput (`benchmarks/bench_survey.py`)",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC).isoformat(timespec='seconds')}",
        f"- machine: {platform.machine()}, {_cpu_model()}, {os.cpu_count()} CPU cores "
        f"(shared with other work: load average {load_before[0]:.1f} before, "
        f"{load_after[0]:.1f} after)",
        f"- versions: Python {platform.python_version()}, rotinfer {__version__} (git {code}, "
        f"imported from {package}), numpy {np.__version__}, celerite2 "
        f"{celerite2.__version__}, emcee {emcee.__version__}, astropy {astropy.__version__}, "
        f"dask {dask.__version__}",
        f"- stars: {args.n} simulated one-sector light curves (27.4 d, 2-min cadence, median "
        f"{median_points} points), default 'mixed' population, seed {args.seed}",
        f"- configuration: {Path(args.config).name if args.config else 'built-in defaults'} "
        f"(hash {first.config_hash}); survey seed {args.seed}",
        f"- outcome: {first.n_ok} ok, {first.n_failed} failed per run; catalogues of all runs "
        "identical apart from wall and CPU time: "
        + ("yes" if not differ else "NO, columns " + ", ".join(differ)),
        "",
        "| executor | wall time [s] | stars per hour | median per star: wall [s] | "
        "median per star: CPU [s] | workers busy with stars | CPU share of star time |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for label, (seconds, _result, wall, cpu, _, n_workers) in results.items():
        lines.append(
            f"| {label} | {seconds:.1f} | {args.n / seconds * 3600:.0f} | "
            f"{np.median(wall):.1f} | {np.median(cpu):.1f} | "
            f"{wall.sum() / (seconds * n_workers):.2f} | {cpu.sum() / wall.sum():.2f} |"
        )
    lines += [
        "",
        f"Parallel efficiency at 2 workers, T(1 worker) / (2 T(2 workers)): **{efficiency:.2f}** "
        "(target >= 0.8).",
        "",
        "\"Workers busy with stars\" is the summed per-star wall time over (survey wall time x "
        "workers): what is left is the survey's own overhead (starting workers, handing out "
        "stars, writing the catalogue) and the tail when fewer stars than workers remain. "
        "\"CPU share of star time\" is the summed CPU time of the threads running the stars "
        "over their summed wall time: below 1 when the workers had to share the cores with "
        "other processes on the machine.",
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
