"""Benchmark: the whole ``rotinfer demo`` with its packaged preset, on one core.

Target (issue 6): under 3 minutes on one core of the development machine, converged by the
default rule. Runs the demo ``--repeats`` times (each in a fresh folder, so nothing is
resumed) for a few seeds and writes ``benchmarks/results/demo.md``: wall and CPU time of each
run and their medians, the period found against the simulated truth, detection and
convergence, with machine, versions, load average and date.

Run: ``python benchmarks/bench_demo.py [--seeds 1 2 3]``.
"""

from __future__ import annotations

import os

# One core: set before numpy is imported.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import datetime  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import celerite2  # noqa: E402
import emcee  # noqa: E402
import numpy as np  # noqa: E402

from rotinfer import __version__  # noqa: E402
from rotinfer.demo import run_demo  # noqa: E402

HERE = Path(__file__).resolve().parent
TARGET_S = 180.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[1])
    args = parser.parse_args()
    rows = []
    load_before = os.getloadavg()
    for seed in args.seeds:
        with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cpu0, wall0 = time.process_time(), time.perf_counter()
            result = run_demo(Path(tmp) / "demo", seed=seed)
            wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
        s = result.summary
        lo, hi = s["period"]["interval_68"]
        steps = [m.get("n_steps") for m in s["diagnostics"].get("modes", [])]
        rows.append((seed, wall, cpu, s["period"]["median"], lo, hi, result.truth.period_eq,
                     s["detected"], s["converged"], steps))
        print(f"seed {seed}: wall {wall:.0f} s, cpu {cpu:.0f} s, P {s['period']['median']:.4g} "
              f"({lo:.4g}-{hi:.4g}) d, truth {result.truth.period_eq:g} d, "
              f"converged {s['converged']}")
    load_after = os.getloadavg()
    walls = [r[1] for r in rows]
    cpus = [r[2] for r in rows]
    lines = [
        "# rotinfer demo: the whole pipeline on the invented demo star",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC).strftime('%Y-%m-%d %H:%M UTC')}",
        f"- machine: {platform.machine()}, {os.cpu_count()} cores "
        f"({platform.processor() or 'unknown CPU'}), Python {platform.python_version()}",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, "
        f"celerite2 {celerite2.__version__}, emcee {emcee.__version__}",
        "- configuration: the packaged demo preset (configs/demo.toml); one BLAS thread",
        f"- load average (1 min) before / after: {load_before[0]:.2f} / {load_after[0]:.2f} "
        "(other work shared the machine's cores; CPU time is the fairer figure)",
        f"- target: under {TARGET_S:.0f} s on one core",
        "",
        "| seed | wall (s) | CPU (s) | period median (d) | 68 % interval (d) | truth (d) "
        "| detected | converged | steps per ensemble |",
        "|---:|---:|---:|---:|---|---:|---|---|---|",
    ]
    for seed, wall, cpu, med, lo, hi, truth, det, conv, steps in rows:
        lines.append(f"| {seed} | {wall:.0f} | {cpu:.0f} | {med:.4g} | {lo:.4g}-{hi:.4g} | "
                     f"{truth:g} | {det} | {conv} | {', '.join(map(str, steps))} |")
    lines += ["", f"Median wall time {statistics.median(walls):.0f} s, median CPU time "
              f"{statistics.median(cpus):.0f} s ({len(rows)} run(s))."]
    out = HERE / "results" / "demo.md"
    out.write_text("\n".join(lines) + "\n")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
