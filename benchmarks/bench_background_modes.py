"""Do independent ensembles agree? One star, its best mode, one or two background oscillators.

The easy sector star of ``bench_fit.py`` (population "easy", seed 5, first star) is
prepared and scanned as in ``rotinfer fit`` (default configuration); the modes are found
with ``periodic_backgrounds = 1`` and ``= 2``, and the best mode of each is sampled by
``run_ensembles`` (two ensembles, the default sampler, ``--seed``, a cap of ``--max-steps``
steps). Per setting: steps to convergence, largest R-hat, per-parameter tau, CPU time, and
each ensemble's mean and spread of the background and jitter parameters, which show
whether the ensembles settled in the same place.

Run:  python benchmarks/bench_background_modes.py [--seed 1] [--max-steps 3000]
Writes benchmarks/results/background_modes.md.
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

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_fit import make_pattern  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=1, help="seed of the ensembles")
    ap.add_argument("--max-steps", type=int, default=3000)
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.model import RotationModel
    from rotinfer.periodogram import scan
    from rotinfer.pipeline import load_run_config
    from rotinfer.prepare import prepare
    from rotinfer.sample import find_modes, run_ensembles
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    params, _, name = draw_population(None, 1, seed=5, population="easy")[0]
    sim = simulate_star(params, make_pattern("sector"), seed=star_seed(5, 0), name=name)
    lines = [
        "# Independent ensembles with one or two background oscillators (one star)",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores shared with other work",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}",
        f"- star: {name} (population easy, seed 5, 2-min sector), true period "
        f"{sim.truth.period_min:.4f}-{sim.truth.period_max:.4f} d; ensembles seed "
        f"{args.seed}; default configuration, cap {args.max_steps} steps per ensemble",
        f"- command: python benchmarks/bench_background_modes.py --seed {args.seed} "
        f"--max-steps {args.max_steps}",
        "",
    ]
    out = HERE / "results" / "background_modes.md"
    for n_bg in (1, 2):
        config = load_run_config(None, overrides={
            "model": {"periodic_backgrounds": n_bg}, "sampler": {"max_steps": args.max_steps}})
        prepared = prepare(sim.lc, config.prepare)
        s = scan(prepared, config=config.periodogram)
        model = RotationModel.from_prepared(prepared, config=config.model)
        model = dataclasses.replace(model, period_range=(s.min_period, s.max_period))
        c0 = time.process_time()
        modes = find_modes(model, s.candidates, config=config.sampler,
                           rng=np.random.default_rng(0))
        c1 = time.process_time()
        best = modes[0]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            run = run_ensembles(model, best.theta, best.laplace.covariance,
                                config=config.sampler, seed=args.seed, names=model.names)
        c2 = time.process_time()
        d = run.diagnostics
        tau = np.nanmax(np.atleast_2d(d.tau), axis=0)
        lines += [
            f"## {n_bg} background oscillator{'s' if n_bg > 1 else ''}",
            "",
            f"- {len(prepared.lc)} points; best mode {best.period:.4f} d, Laplace ln "
            f"evidence {best.rank_value:.1f}; mode search {c1 - c0:.0f} CPU s",
            f"- sampling: {d.n_steps} steps per ensemble after the warm-up, "
            f"converged: {d.converged}; largest R-hat {np.nanmax(d.rhat):.3f}; "
            f"{c2 - c1:.0f} CPU s",
            f"- not converged because: {'; '.join(d.reasons) or '-'}",
            "- tau [steps]: " + ", ".join(f"{n} {t:.1f}" for n, t in zip(d.names, tau,
                                                                      strict=True)),
            "",
            "| ensemble | " + " | ".join(n for n in model.names
                                         if "background" in n or "jitter" in n
                                         or "secondary_fraction" in n) + " |",
            "|---|" + "---|" * sum(1 for n in model.names if "background" in n
                                   or "jitter" in n or "secondary_fraction" in n),
        ]
        cols = [i for i, n in enumerate(model.names)
                if "background" in n or "jitter" in n or "secondary_fraction" in n]
        for e, chain in enumerate(run.chains):
            half = chain[chain.shape[0] // 2:].reshape(-1, chain.shape[-1])
            cells = [f"{half[:, i].mean():.2f} ± {half[:, i].std():.2f}" for i in cols]
            lines.append(f"| {e} | " + " | ".join(cells) + " |")
        lines.append("")
        out.write_text("\n".join(lines) + "\n")
        print("\n".join(lines), flush=True)
    lines.append("Values: mean ± standard deviation over the second half of each ensemble "
                 "(natural logarithms of relative flux and days; logit of the P/2 share).")
    out.write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
