"""Sampling the shared mean against integrating it out: steps to converge, tau, CPU.

For simulated 2-min sector stars (``configs/population.toml``, class ``--population``),
the best mode is found once with the mean sampled (``[model] marginalise_mean =
false``); the same point without its mean coordinate starts the model with the mean
integrated out, so both runs sample the same posterior of the other parameters from
the same place and differ only in how the mean is handled. Each is sampled with the
default convergence rule and several ensemble seeds (``rotinfer.sample.run_ensembles``,
as in a fit, one mode). The table gives steps per ensemble to convergence, the longest
autocorrelation time with its parameter, the acceptance fraction and CPU seconds.

Run:  python benchmarks/bench_mean.py [--n 2] [--seeds 1,2] [--population easy]
Writes benchmarks/results/mean.md.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import os
import platform
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_fit import make_pattern


def _prepared_model(sim, config):
    from rotinfer.model import RotationModel
    from rotinfer.periodogram import scan
    from rotinfer.prepare import prepare

    prepared = prepare(sim.lc, config.prepare)
    sc = scan(prepared, config=config.periodogram)
    model = RotationModel.from_prepared(prepared, config=config.model)
    model = dataclasses.replace(model, period_range=(sc.min_period, sc.max_period))
    return model, sc.candidates


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=2, help="stars (default 2)")
    ap.add_argument("--seed", type=int, default=5, help="population seed (default 5)")
    ap.add_argument("--seeds", default="1,2", help="ensemble seeds (default 1,2)")
    ap.add_argument("--population", default="easy")
    args = ap.parse_args(argv)
    os.environ.setdefault("OMP_NUM_THREADS", "1")

    from rotinfer import __version__
    from rotinfer.errors import ConvergenceWarning
    from rotinfer.pipeline import load_run_config
    from rotinfer.sample import find_modes, run_ensembles
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    sampled_cfg = load_run_config(None, overrides={
        "model": {"marginalise_mean": False, "periodic_backgrounds": 1}})
    marginal_cfg = load_run_config(None, overrides={"model": {"periodic_backgrounds": 1}})
    members = draw_population(None, args.n, seed=args.seed, population=args.population)
    seeds = [int(s) for s in args.seeds.split(",")]
    rows = []
    for i, (params, _, name) in enumerate(members):
        sim = simulate_star(params, make_pattern("sector"), seed=star_seed(args.seed, i),
                            name=name)
        sampled, candidates = _prepared_model(sim, sampled_cfg)
        marginal = dataclasses.replace(sampled, config=marginal_cfg.model)
        modes = find_modes(sampled, candidates, config=sampled_cfg.sampler,
                           rng=np.random.default_rng(star_seed(args.seed, i)))
        best = modes[0]
        keep = [k for k, n in enumerate(sampled.names) if n != "mean"]
        starts = {
            "sampled": (sampled, best.theta, best.laplace.covariance),
            "integrated out": (marginal, best.theta[keep],
                               best.laplace.covariance[np.ix_(keep, keep)]),
        }
        for form, (model, theta, cov) in starts.items():
            for seed in seeds:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", ConvergenceWarning)
                    c0 = time.process_time()
                    run = run_ensembles(model, theta, cov, config=sampled_cfg.sampler,
                                        seed=seed, names=model.names)
                    cpu = time.process_time() - c0
                dg = run.diagnostics
                taus = np.nanmax(dg.tau, axis=0)
                worst = int(np.nanargmax(taus))
                rows.append(dict(star=name, period=best.period, form=form, seed=seed,
                                 steps=dg.n_steps, converged=dg.converged,
                                 tau=float(taus[worst]), worst=model.names[worst],
                                 tau_mean=(float(taus[model.names.index("mean")])
                                           if "mean" in model.names else None),
                                 acceptance=float(np.mean(dg.acceptance)), cpu=cpu))
                print(rows[-1], flush=True)

    load = os.getloadavg()
    lines = [
        "# Sampling the shared mean against integrating it out",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores (shared), load average at the end "
        f"{load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f}",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}",
        f"- stars: {args.n} of the `{args.population}` class, one 2-min sector each, "
        f"population seed {args.seed}; ensemble seeds {args.seeds}; default sampler and "
        "convergence rule; one background oscillator; both forms start from the best mode "
        "found with the mean sampled",
        f"- command: python benchmarks/bench_mean.py --n {args.n} --seeds {args.seeds} "
        f"--population {args.population}",
        "",
        "| star | mean | ensemble seed | steps per ensemble | converged | longest tau [steps] "
        "| tau of the mean [steps] | acceptance | CPU [s] |",
        "|---|---|---:|---:|---|---|---:|---:|---:|",
    ]
    for r in rows:
        tau_mean = f"{r['tau_mean']:.0f}" if r["tau_mean"] is not None else "-"
        lines.append(f"| {r['star']} ({r['period']:.2f} d) | {r['form']} | {r['seed']} | "
                     f"{r['steps']} | {r['converged']} | {r['tau']:.0f} ({r['worst']}) | "
                     f"{tau_mean} | {r['acceptance']:.2f} | {r['cpu']:.0f} |")
    for form in ("sampled", "integrated out"):
        sel = [r for r in rows if r["form"] == form]
        lines.append("")
        lines.append(f"Mean {form}: median steps {np.median([r['steps'] for r in sel]):.0f}, "
                     f"median CPU {np.median([r['cpu'] for r in sel]):.0f} s, "
                     f"{sum(r['converged'] for r in sel)} of {len(sel)} converged.")
    out = Path(__file__).parent / "results" / "mean.md"
    out.write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
