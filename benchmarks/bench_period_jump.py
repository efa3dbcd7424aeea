"""Does the period-only move ([sampler] period_jump) shorten autocorrelation times?

For sampled modes of population stars whose chains were kept (a population work
folder's ``survey/stars/<star>/chains.h5``), the mode's own target is rebuilt (the same
light curve, preparation, model and period basin as the fit, from the configuration in
the star's ``summary.json``) and sampled from the stored chains' last positions, which
are already in the posterior, for ``--steps`` steps with the moves the fit used after its
warm-up (differential evolution, snooker, the independence proposal refitted to the
stored warm-up), and again with the period-only move added at weight ``--weight`` (its
kernel part at the stored warm-up's periods, as in the fit). Both runs start from the
same positions with the same random seed. The integrated autocorrelation time of each
parameter is emcee's estimator (Foreman-Mackey et al. 2013) over each ensemble's
walkers; a shorter time means more independent draws per step.

Usage::

    python benchmarks/bench_period_jump.py --work benchmarks/work/population \\
        00038-null:1 00045-null:1 ...

(``STAR:K`` = the star's K-th sampled mode.) Writes ``results/period_jump.md``.
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import platform
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def mode_target(folder: Path, work: Path, k: int):
    """(target, names, warm-up chains, sampling chains, basin, config) of mode ``k``."""
    import h5py
    from bench_population import light_curve_path

    from rotinfer.io import read_stars
    from rotinfer.periodogram import scan
    from rotinfer.pipeline import load_run_config, rotation_model
    from rotinfer.prepare import prepare

    summary = json.loads((folder / "summary.json").read_text())
    cfg = load_run_config(overrides=summary["config"])
    lc = read_stars([str(light_curve_path(work, folder.name))])[0]
    prepared = prepare(lc, cfg.prepare)
    model = rotation_model(prepared, scan(prepared, config=cfg.periodogram), cfg.model)
    with h5py.File(folder / "chains.h5", "r") as f:
        stored = json.loads(f["json"]["modes"].attrs["value"])
        warm = [f[f"mode{k}/warmup{e}/chain"][...] for e in range(cfg.sampler.n_ensembles)]
        chains = [f[f"mode{k}/ensemble{e}/chain"][...]
                  for e in range(cfg.sampler.n_ensembles)]
    if (cfg.model.periodic_backgrounds == "auto"
            and stored.get("periodic_backgrounds", 1) == 2):
        model = model.with_periodic_backgrounds(2)
    sampled = [m for m in summary["modes"] if m["sampled"]]
    basin = tuple(sampled[k]["basin"]) if len(sampled) > 1 else tuple(model.period_range)
    target = model.restricted(basin) if len(sampled) > 1 else model
    return target, model.names, warm, chains, basin, cfg


def measure(target, names, warm, chains, basin, cfg, *, weight, steps, seed):
    """Autocorrelation times [steps] per parameter, without and with the move."""
    import emcee

    from rotinfer.sample.ensemble import PeriodJumpMove, _adapted, _moves

    col = names.index("log_period")
    log_bounds = (math.log(basin[0]), math.log(basin[1]))
    out = {}
    for label, w in (("without", 0.0), ("with", weight)):
        taus, accept = [], []
        for e, (wc, c) in enumerate(zip(warm, chains, strict=True)):
            draws = c.reshape(-1, c.shape[2])
            loc, cov = _adapted(wc, draws.mean(axis=0), np.cov(draws.T))
            jump = ((PeriodJumpMove.from_draws(col, log_bounds, wc[wc.shape[0] // 2:, :, col]),
                     w) if w > 0 else None)
            moves = _moves(cfg.sampler.move_weights, loc, cov, cfg.sampler.adapted_scale, jump)
            start = c[-1]
            lp0 = np.array([target(p) for p in start])
            sampler = emcee.EnsembleSampler(start.shape[0], start.shape[1], target, moves=moves)
            state = emcee.State(start, log_prob=lp0,
                                random_state=np.random.RandomState(seed + e).get_state())
            sampler.run_mcmc(state, steps, skip_initial_state_check=True)
            taus.append(emcee.autocorr.integrated_time(sampler.get_chain(), quiet=True))
            accept.append(float(sampler.acceptance_fraction.mean()))
        out[label] = (np.mean(taus, axis=0), float(np.mean(accept)))
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("modes", nargs="+", help="STAR:K, e.g. 00038-null:1")
    ap.add_argument("--work", default=str(HERE / "work" / "population"))
    ap.add_argument("--weight", type=float, default=0.2)
    ap.add_argument("--steps", type=int, default=1000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--out", default=str(HERE / "results" / "period_jump.md"))
    args = ap.parse_args(argv)
    work = Path(args.work)
    warnings.simplefilter("ignore")  # emcee: chains shorter than 50 tau (reported here)
    rows, ratios_p, ratios_max = [], [], []
    for item in args.modes:
        star, _, k = item.partition(":")
        t0 = time.process_time()
        target, names, warm, chains, basin, cfg = mode_target(
            work / "survey" / "stars" / star, work, int(k or 0))
        r = measure(target, names, warm, chains, basin, cfg, weight=args.weight,
                    steps=args.steps, seed=args.seed)
        col = names.index("log_period")
        (t0_, a0), (t1_, a1) = r["without"], r["with"]
        ratios_p.append(t1_[col] / t0_[col])
        ratios_max.append(t1_.max() / t0_.max())
        rows.append(f"| {star} | {int(k or 0)} | {basin[0]:.3g}–{basin[1]:.3g} | "
                    f"{t0_[col]:.0f} → {t1_[col]:.0f} | "
                    f"{t0_.max():.0f} ({names[int(np.argmax(t0_))]}) → "
                    f"{t1_.max():.0f} ({names[int(np.argmax(t1_))]}) | "
                    f"{np.median(t0_):.0f} → {np.median(t1_):.0f} | {a0:.3f} → {a1:.3f} |")
        print(rows[-1], f"{time.process_time() - t0:.0f} CPU s", flush=True)
    lines = [
        "# The period-only move: autocorrelation times at equilibrium",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; "
        f"Python {platform.python_version()}",
        f"- command: python benchmarks/bench_period_jump.py --weight {args.weight} "
        f"--steps {args.steps} --seed {args.seed} " + " ".join(args.modes),
        f"- {args.steps} steps per ensemble from the stored chains' last positions, the "
        "fit's post-warm-up moves without and with the period-only move (weight "
        f"{args.weight} beside move_weights); times in steps, mean of the ensembles",
        "",
        "| star | mode | basin [d] | τ of log_period | largest τ (parameter) | median τ | "
        "acceptance |",
        "|---|---:|---|---|---|---|---|",
        *rows,
        "",
        f"Median ratio with / without: τ of log_period {np.median(ratios_p):.2f}, "
        f"largest τ {np.median(ratios_max):.2f} (over {len(rows)} modes; a single "
        "estimate from this many steps carries roughly 10–20 % noise).",
    ]
    Path(args.out).write_text("\n".join(lines) + "\n")
    print("\n".join(lines[-3:]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
