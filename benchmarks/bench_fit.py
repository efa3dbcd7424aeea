"""Seconds per converged posterior for simulated stars (issue 5 speed targets).

Targets (one core): median <= 60 s for a 27-day 2-min sector (about 19,000 points)
and <= 120 s for a year at 30-min cadence. Each star is drawn from the simulator's
population (configs/population.toml) with the requested observing pattern, and
``analyse_star`` runs with the default configuration (figures off). Wall and CPU
seconds are both reported: the machine is shared, so wall time overstates the
single-core cost whenever other work competes for the cores.

Run:  python benchmarks/bench_fit.py [--n 3] [--pattern sector] [--population easy]
                                    [--set model.marginalise_mean=false ...]
Writes benchmarks/results/fit_<pattern>[_<population>][_<settings>].md.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import tempfile
import time
import tomllib
import warnings
from pathlib import Path

import numpy as np


def make_pattern(kind: str):
    """The observing pattern of the speed targets: one 2-min sector or a 30-min year."""
    from rotinfer.simulate import ObservingPattern

    if kind == "sector":  # 27.4 d at 2-min cadence, two orbits
        return ObservingPattern.space(1, 27.4, 2.0)
    # a year at 30-min cadence in four quarters
    return ObservingPattern.space(4, 91.3, 30.0, orbit_days=30.4, orbit_gap_days=1.0)


def _slowest(modes) -> str:
    """The longest autocorrelation time of any sampled mode, with its parameter."""
    best = max(((v, k) for m in modes for k, v in m["tau_steps"].items() if v is not None),
               default=None)
    return f"{best[0]:.0f} ({best[1]})" if best else "-"


def fit_one(sim, config, *, seed: int) -> dict:
    """Run the whole fit on a simulated star; seconds, verdict and period against the truth."""
    from rotinfer.errors import ConvergenceWarning
    from rotinfer.pipeline import analyse_star

    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        w0, c0 = time.perf_counter(), time.process_time()
        s = analyse_star(sim.lc, config=config, seed=seed, out_dir=Path(tmp), figures=False)
        wall, cpu = time.perf_counter() - w0, time.process_time() - c0
    d = s.to_dict()
    return {
        "name": sim.lc.meta.identifier, "n_input": len(sim.lc),
        "n_fit": d["prepared"]["n_points"], "wall": wall, "cpu": cpu,
        "converged": s.converged, "steps": [m["n_steps"] for m in d["diagnostics"]["modes"]],
        "slowest": _slowest(d["diagnostics"]["modes"]),
        "period": d["period"]["median"], "interval_68": d["period"]["interval_68"],
        "interval_95": d["period"]["interval_95"], "detected": d["detected"],
        "truth": (sim.truth.period_min, sim.truth.period_max),
        "oscillators": d["detection"].get("periodic_backgrounds"),
        "delta_bic": d["detection"]["delta_bic"],
        "rhat_max": max((v for m in d["diagnostics"]["modes"] for v in m["rhat"].values()
                         if v is not None), default=float("nan")),
    }


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=3)
    ap.add_argument("--seed", type=int, default=5)
    ap.add_argument("--pattern", default="sector", choices=["sector", "year"])
    ap.add_argument("--population", default="easy")
    ap.add_argument("--max-points", type=int, default=None,
                    help="override [prepare] max_points (points the GP sees)")
    ap.add_argument("--set", action="append", default=[], metavar="TABLE.KEY=VALUE",
                    help="override one option (value as TOML, e.g. sampler.n_walkers=18 or "
                         "model.marginalise_mean=false); repeatable")
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.pipeline import load_run_config
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    pattern = make_pattern(args.pattern)
    members = draw_population(None, args.n, seed=args.seed, population=args.population)
    overrides = {"prepare": {"max_points": args.max_points}} if args.max_points else {}
    for item in args.set:
        key, _, value = item.partition("=")
        table, _, name = key.partition(".")
        overrides.setdefault(table, {})[name] = tomllib.loads(f"v = {value}")["v"]
    config = load_run_config(None, overrides=overrides)
    rows = []
    for i, (params, _, name) in enumerate(members):
        sim = simulate_star(params, pattern, seed=star_seed(args.seed, i), name=name)
        rows.append(fit_one(sim, config, seed=i))
        print(rows[-1], flush=True)

    load = os.getloadavg()
    lines = [
        f"# Seconds per posterior: {args.pattern} pattern, {args.population} stars",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC).strftime('%Y-%m-%d %H:%M UTC')}; "
        f"machine: {platform.machine()}, {os.cpu_count()} cores shared with other work "
        f"(load average at the end {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f})",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{sys.version.split()[0]}; population seed {args.seed}; default configuration"
        + (f" except [prepare] max_points = {args.max_points}" if args.max_points else "")
        + (f"; overrides {', '.join(args.set)}" if args.set else ""),
        "",
        "| star | points read | points fitted | steps per ensemble (per mode) | converged | "
        "largest tau [steps] | wall [s] | CPU [s] | period [d] | true range [d] |",
        "|---|---:|---:|---|---|---|---:|---:|---:|---|",
    ]
    for r in rows:
        lines.append(
            f"| {r['name']} | {r['n_input']} | {r['n_fit']} | {r['steps']} | {r['converged']} "
            f"| {r['slowest']} | {r['wall']:.0f} | {r['cpu']:.0f} | {r['period']:.3f} | "
            f"{r['truth'][0]:.3f}-{r['truth'][1]:.3f} |"
        )
    lines += ["", f"Median CPU over all {len(rows)} stars: "
                  f"{np.median([r['cpu'] for r in rows]):.0f} s."]
    conv = [r for r in rows if r["converged"]]
    if conv:
        wall = np.median([r["wall"] for r in conv])
        cpu = np.median([r["cpu"] for r in conv])
        lines += ["", f"Median over converged stars: wall {wall:.0f} s, CPU {cpu:.0f} s "
                      f"({len(conv)} of {len(rows)} converged)."]
    suffix = f"_max{args.max_points}" if args.max_points else ""
    if args.population != "easy":
        suffix += f"_{args.population}"
    for item in args.set:
        suffix += "_" + "".join(c if c.isalnum() else "-" for c in item.split(".", 1)[-1])
    out = Path(__file__).parent / "results" / f"fit_{args.pattern}{suffix}.md"
    out.parent.mkdir(exist_ok=True)
    out.write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
