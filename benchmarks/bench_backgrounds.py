"""One or two background oscillators in the rotation model: the same stars fitted both ways.

For each simulated star (the simulator's population, one observing pattern) the whole
fit (``analyse_star``, default configuration, figures off) runs twice on the same data
and seed: with ``[model] periodic_backgrounds = 1`` (the default) and ``"auto"`` (a
second oscillator where the BIC supports it). Reported per star: the number chosen,
whether the sampler converged, steps per ensemble, the largest R-hat, CPU seconds, the
period against the truth and the detection statistic. The table is rewritten after
every fit, so a run can be stopped at any time.

Run:  python benchmarks/bench_backgrounds.py [--n 3] [--pattern sector]
          [--population easy] [--seed 5]
Writes benchmarks/results/backgrounds_<pattern>_<population>.md.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_fit import fit_one, make_pattern  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=3)
    ap.add_argument("--seed", type=int, default=5)
    ap.add_argument("--pattern", default="sector", choices=["sector", "year"])
    ap.add_argument("--population", default="easy")
    ap.add_argument("--max-steps", type=int, default=3000,
                    help="cap on steps per ensemble (default 3000; the default config's "
                         "20,000 would let one unconverged star take an hour)")
    args = ap.parse_args(argv)

    import celerite2
    import emcee

    from rotinfer import __version__
    from rotinfer.pipeline import load_run_config
    from rotinfer.simulate import draw_population, simulate_star, star_seed

    pattern = make_pattern(args.pattern)
    members = draw_population(None, args.n, seed=args.seed, population=args.population)
    out = HERE / "results" / f"backgrounds_{args.pattern}_{args.population}.md"
    head = [
        f"# Rotation model with 1 or 'auto' (1-2) background oscillators: "
        f"{args.pattern} pattern, {args.population} stars",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores shared with other work",
        f"- versions: rotinfer {__version__}, celerite2 {celerite2.__version__}, emcee "
        f"{emcee.__version__}, numpy {np.__version__}, Python {platform.python_version()}",
        f"- population seed {args.seed}; default configuration except [sampler] max_steps = "
        f"{args.max_steps}; each star fitted with the same data and seed both ways",
        f"- command: python benchmarks/bench_backgrounds.py --n {args.n} --pattern "
        f"{args.pattern} --population {args.population} --seed {args.seed} "
        f"--max-steps {args.max_steps}",
        "",
        "| star | setting | oscillators | converged | steps per ensemble (per mode) | "
        "max R-hat | CPU [s] | period [d] | true range [d] | within 10 % | delta BIC |",
        "|---|---|---:|---|---|---:|---:|---:|---|---|---:|",
    ]
    lines = list(head)
    for i, (params, _, name) in enumerate(members):
        sim = simulate_star(params, pattern, seed=star_seed(args.seed, i), name=name)
        for setting in (1, "auto"):
            config = load_run_config(None, overrides={
                "model": {"periodic_backgrounds": setting},
                "sampler": {"max_steps": args.max_steps}})
            r = fit_one(sim, config, seed=i)
            lo, hi = r["truth"]
            hit = 0.9 * lo <= r["period"] <= 1.1 * hi
            lines.append(
                f"| {r['name']} | {setting} | {r['oscillators']} | {r['converged']} | "
                f"{r['steps']} | {r['rhat_max']:.3f} | {r['cpu']:.0f} | {r['period']:.3f} | "
                f"{lo:.3f}-{hi:.3f} | {'yes' if hit else 'no'} | {r['delta_bic']:.1f} |")
            out.write_text("\n".join(lines) + "\n")
            print(lines[-1], flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
