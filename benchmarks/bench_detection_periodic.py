"""Detection statistic with one or "auto" background oscillators in the rotation model.

For population stars (the light curves simulated by ``bench_population.py`` in its work
folder) the optimisation stage of ``rotinfer fit`` runs as in the pipeline — prepare,
scan, find the modes, fit the aperiodic comparison model (best by BIC of 2-3
oscillators) — and the detection statistic ΔBIC and the best period (highest posterior
maximum) are computed twice: with the rotation model's one background oscillator, and
after ``choose_periodic_backgrounds`` ("auto") has added a second where the BIC supports
it. No sampling is needed for either. The table is rewritten after every star.

Run:  python benchmarks/bench_detection_periodic.py --work WORK --stars 00004-moderate ...
      [--config benchmarks/population_bench.toml]
Writes benchmarks/results/detection_periodic.md.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import os
import platform
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", required=True, help="bench_population.py work folder")
    ap.add_argument("--stars", nargs="+", required=True,
                    help="identifiers as in the population table, e.g. 00004-moderate")
    ap.add_argument("--config", default=str(HERE / "population_bench.toml"))
    ap.add_argument("--out", default=str(HERE / "results" / "detection_periodic.md"))
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.io import read_stars
    from rotinfer.model import RotationModel
    from rotinfer.periodogram import scan
    from rotinfer.pipeline import load_run_config
    from rotinfer.prepare import prepare
    from rotinfer.sample import choose_periodic_backgrounds, find_modes, fit_aperiodic
    from rotinfer.simulate.output import read_truth_table
    from rotinfer.summarise import detection_statistics

    config = load_run_config(args.config)
    lines = [
        "# Detection statistic with one or 'auto' background oscillators in the rotation model",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores shared with other work",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}; configuration {Path(args.config).name}",
        f"- command: python benchmarks/bench_detection_periodic.py --work WORK --stars "
        f"{' '.join(args.stars)}",
        "",
        "| star | true period [d] | aperiodic oscillators | ΔBIC, 1 | best period, 1 [d] | "
        "'auto' chose | ΔBIC, auto | best period, auto [d] |",
        "|---|---|---:|---:|---:|---:|---:|---:|",
    ]
    out = Path(args.out)
    for ident in args.stars:
        number, cls = ident.split("-", 1)
        folder = Path(args.work) / "lc" / cls
        truth = read_truth_table(folder / "truth.ecsv")
        row = truth[[str(n).endswith(number) for n in truth["name"]]][0]
        lc = read_stars([folder / f"{row['name']}.fits"])[0]
        prepared = prepare(lc, config.prepare)
        s = scan(prepared, config=config.periodogram)
        model = RotationModel.from_prepared(prepared, config=config.model)
        model = dataclasses.replace(model, period_range=(s.min_period, s.max_period))
        modes = find_modes(model, s.candidates, config=config.sampler,
                           rng=np.random.default_rng(0))
        aperiodic = fit_aperiodic(model, config=config.sampler)
        d1 = detection_statistics(model, modes, aperiodic)[0]
        two, modes2 = choose_periodic_backgrounds(model, modes, s.candidates,
                                                  config=config.sampler,
                                                  rng=np.random.default_rng(3))
        d2 = detection_statistics(two, modes2, aperiodic)[0]

        def best(ms):
            return max(ms, key=lambda m: m.log_posterior).period

        period = ("–" if not np.isfinite(row["period_min"]) else
                  f"{row['period_min']:.3f}-{row['period_max']:.3f}")
        lines.append(
            f"| {ident} | {period} | {(aperiodic.theta.size - 2) // 2} | {d1:.1f} | "
            f"{best(modes):.3f} | {len(two.background_suffixes)} | {d2:.1f} | "
            f"{best(modes2):.3f} |")
        out.write_text("\n".join(lines) + "\n")
        print(lines[-1], flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
