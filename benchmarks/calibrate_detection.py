"""Calibrate the detection threshold on simulated null stars (no spots).

For each null star of the simulator's ``null`` class (noise, granulation, drifts
and flares, observed as a 27-day sector, a year at 30-min cadence or from the
ground; see configs/population.toml), the fit procedure is run exactly as for a
real star up to the detection test — prepare, scan, optimise every mode of the
periodic model and the aperiodic model — and the detection statistic is recorded.
The threshold is set so that at most ``--target`` (2 %) of the null stars exceed
it; the measured false-alarm rate and its 95 % Clopper-Pearson upper limit are
reported, with the [detection] lines to put in the configuration.

No sampling is needed: both statistics (delta-BIC and the Laplace Bayes factor)
come from the optimisation (rotinfer.summarise.detection_statistics).

Run:  python benchmarks/calibrate_detection.py --n 200 --seed 1 [--workers 2] [--log F.jsonl]
(with --log an interrupted run resumes where it stopped)
Writes benchmarks/results/detection.md and benchmarks/results/detection_nulls.json.

Re-check after a change to the model or the optimiser, without the full run:
      python benchmarks/calibrate_detection.py --recheck K [--workers 2] [--pattern ground]
      [--config F] [--out F.md]
refits the K null stars of results/detection_nulls.json with the largest statistic (the
ones a change could push over the threshold) with the current code and writes
results/detection_recheck.md: old and new value per star, and whether any crosses.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import json
import math
import os
import platform
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
from scipy import stats

RESULTS = Path(__file__).parent / "results"


def one_null(args):
    """Detection statistics of null star ``index``; runs in a worker process."""
    index, seed, config_path, population, max_points = args
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    from rotinfer.model import RotationModel
    from rotinfer.periodogram import scan
    from rotinfer.pipeline import load_run_config
    from rotinfer.prepare import prepare
    from rotinfer.sample import optimise_star
    from rotinfer.simulate import draw_population, simulate_star, star_seed
    from rotinfer.summarise import detection_statistics

    overrides = {"prepare": {"max_points": max_points}} if max_points else {}
    cfg = load_run_config(config_path, overrides=overrides)
    params, pattern, name = draw_population(None, index + 1, seed=seed,
                                            population=population)[index]
    t0 = time.perf_counter()
    sim = simulate_star(params, pattern, seed=star_seed(seed, index), name=name)
    prepared = prepare(sim.lc, cfg.prepare)
    sc = scan(prepared, config=cfg.periodogram)
    model = RotationModel.from_prepared(prepared, config=cfg.model)
    if cfg.model.period_range is None:
        model = dataclasses.replace(model, period_range=(sc.min_period, sc.max_period))
    # exactly what rotinfer.sample.fit does before sampling (the background choice too)
    model, modes, aperiodic = optimise_star(model, sc.candidates, config=cfg.sampler,
                                            seed=star_seed(seed, index))
    delta_bic, two_ln_b = detection_statistics(model, modes, aperiodic)
    return {
        "index": index, "name": name, "pattern": pattern.kind,
        "n_points": len(prepared.lc), "delta_bic": delta_bic,
        "two_ln_bayes_factor_laplace": None if math.isnan(two_ln_b) else two_ln_b,
        "best_period": max(modes, key=lambda m: m.log_posterior).period,
        "periodic_backgrounds": len(model.background_suffixes),
        "seconds": time.perf_counter() - t0,
    }


def threshold_for(values, target):
    """Smallest threshold with at most floor(target x n) values above it."""
    v = np.sort(np.asarray(values, dtype=float))
    allowed = int(math.floor(target * v.size))
    t = float(v[v.size - allowed - 1])
    above = int(np.sum(v > t))
    return t, above


def clopper_pearson_upper(k, n, level=0.95):
    """One-sided upper limit of a binomial rate (Clopper & Pearson 1934)."""
    return 1.0 if k >= n else float(stats.beta.ppf(level, k + 1, n - k))


def recheck(args):
    """Refit the stored nulls nearest the threshold with the current code; old against new."""
    from rotinfer import __version__
    from rotinfer.pipeline import load_run_config

    cfg = load_run_config(args.config)
    stat = cfg.detection.statistic
    saved = json.loads((RESULTS / "detection_nulls.json").read_text())
    old = {r["index"]: r for r in saved["rows"] if r[stat] is not None
           and (args.pattern is None or r["pattern"] == args.pattern)}
    picked = sorted(old, key=lambda i: -old[i][stat])[: args.recheck]
    jobs = [(i, saved["seed"], args.config, saved["population"], args.max_points)
            for i in picked]
    t0 = time.perf_counter()
    with ProcessPoolExecutor(max(args.workers, 1)) as pool:
        new = {}
        for row in pool.map(one_null, jobs):
            print(row, flush=True)
            new[row["index"]] = row
    wall = time.perf_counter() - t0
    thr = cfg.detection.threshold
    shifts = [new[i][stat] - old[i][stat] for i in picked if new[i][stat] is not None]
    lowest = min(old[i][stat] for i in picked)
    lines = [
        "# Detection statistic of the stored null stars nearest the threshold, refitted",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d}; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores, shared; wall time {wall:.0f} s with "
        f"{max(args.workers, 1)} worker(s)",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{sys.version.split()[0]}; configuration {args.config or 'defaults'}",
        f"- stars: the {len(picked)} of the {len(old)} "
        f"{args.pattern + ' ' if args.pattern else ''}nulls in results/detection_nulls.json "
        f"(seed {saved['seed']}) with the largest {stat} (down to {lowest:.1f}); the others "
        f"were further below the threshold ({thr:g})",
        "",
        f"| null | pattern | {stat} stored | {stat} now | change | best period now [d] | "
        "background oscillators of the rotation model now |",
        "|---:|---|---:|---:|---:|---:|---:|",
    ]
    for i in picked:
        o, n = old[i], new[i]
        change = n[stat] - o[stat] if n[stat] is not None else math.nan
        lines.append(f"| {i} | {o['pattern']} | {o[stat]:.1f} | {n[stat]:.1f} | {change:+.1f} "
                     f"| {n['best_period']:.2f} | {n['periodic_backgrounds']} |")
    above_old = sum(old[i][stat] > thr for i in picked)
    above_new = sum(new[i][stat] is not None and new[i][stat] > thr for i in picked)
    lines += ["", f"Above the threshold ({thr:g}): {above_old} stored, {above_new} now; "
              f"median change {np.median(shifts):+.1f}, largest {max(shifts, key=abs):+.1f}."]
    text = "\n".join(lines) + "\n"
    Path(args.out or RESULTS / "detection_recheck.md").write_text(text)
    print(text)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=200, help="null stars (default 200)")
    ap.add_argument("--seed", type=int, default=1, help="population seed (default 1)")
    ap.add_argument("--config", default=None, help="rotinfer TOML configuration")
    ap.add_argument("--population", default="null", help="simulator class (default null)")
    ap.add_argument("--target", type=float, default=0.02, help="false-alarm target (0.02)")
    ap.add_argument("--workers", type=int, default=1, help="worker processes (default 1)")
    ap.add_argument("--max-points", type=int, default=None,
                    help="override [prepare] max_points (the threshold depends on it)")
    ap.add_argument("--log", default=None,
                    help="JSON-lines file: each null's row is appended as it finishes and rows "
                         "already there are not fitted again (resume an interrupted run)")
    ap.add_argument("--rows", default=None,
                    help="summarise the rows of an earlier run's detection_nulls.json instead "
                         "of fitting again")
    ap.add_argument("--recheck", type=int, default=None, metavar="K",
                    help="refit the K nulls of results/detection_nulls.json with the largest "
                         "statistic and compare (writes results/detection_recheck.md)")
    ap.add_argument("--pattern", default=None, choices=("space", "ground"),
                    help="with --recheck: only the nulls of this observing pattern")
    ap.add_argument("--out", default=None,
                    help="with --recheck: the table to write (default "
                         "results/detection_recheck.md)")
    args = ap.parse_args(argv)
    if args.recheck:
        return recheck(args)

    from rotinfer import __version__
    from rotinfer.pipeline import load_run_config

    cfg = load_run_config(args.config)
    t0 = time.perf_counter()
    jobs = [(i, args.seed, args.config, args.population, args.max_points) for i in range(args.n)]
    rows = []
    done = {}
    if args.log and Path(args.log).exists():
        for line in Path(args.log).read_text().splitlines():
            if line.strip():
                row = json.loads(line)
                done[row["index"]] = row
        jobs = [j for j in jobs if j[0] not in done]
        print(f"resuming: {len(done)} null star(s) already in {args.log}", flush=True)

    def record(row):
        rows.append(row)
        print(row, flush=True)
        if args.log:
            with open(args.log, "a") as fh:
                fh.write(json.dumps(row) + "\n")

    if args.rows:
        saved = json.loads(Path(args.rows).read_text())
        rows = saved["rows"]
        args.seed, args.population = saved["seed"], saved["population"]
        args.n = len(rows)
        wall = float(sum(r["seconds"] for r in rows))
    elif args.workers > 1:
        with ProcessPoolExecutor(args.workers) as pool:
            for row in pool.map(one_null, jobs):
                record(row)
    else:
        for job in jobs:
            record(one_null(job))
    if not args.rows:
        wall = time.perf_counter() - t0
        if done:  # earlier sessions' work counts as per-star time, not wall time
            wall += float(sum(r["seconds"] for r in done.values()))
        rows = sorted([*done.values(), *rows], key=lambda r: r["index"])

    out = {}
    for stat in ("delta_bic", "two_ln_bayes_factor_laplace"):
        vals = [r[stat] for r in rows if r[stat] is not None]
        if not vals:
            continue
        t, above = threshold_for(vals, args.target)
        current = cfg.detection.threshold if stat == cfg.detection.statistic else None
        out[stat] = {
            "n": len(vals), "threshold": t, "above": above, "rate": above / len(vals),
            "upper95": clopper_pearson_upper(above, len(vals)),
            "quantiles": np.percentile(vals, [50, 90, 95, 98, 99, 100]).tolist(),
            "current_threshold": current,
            "current_rate": (float(np.mean(np.array(vals) > current))
                             if current is not None else None),
        }
    date = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d")
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / "detection_nulls.json").write_text(json.dumps(
        {"seed": args.seed, "population": args.population, "rows": rows}, indent=1))

    stat = cfg.detection.statistic
    lines = [
        "# Detection threshold calibrated on simulated null stars",
        "",
        f"- date: {date}; machine: {platform.machine()}, {os.cpu_count()} cores, shared; "
        + (f"sum of per-star times {wall:.0f} s (rows from {args.rows})" if args.rows else
           f"wall time {wall:.0f} s with {args.workers} worker(s)"),
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{sys.version.split()[0]}",
        f"- stars: {args.n} of the simulator's `{args.population}` class "
        f"(configs/population.toml), population seed {args.seed}; configuration "
        f"{args.config or 'defaults'}"
        + (f", [prepare] max_points = {args.max_points}" if args.max_points else ""),
        f"- procedure: prepare, scan, optimise every mode and the aperiodic model, as `rotinfer "
        f"fit` does; target false-alarm rate {args.target:.1%}",
        "",
        "| statistic | nulls | median | 90 % | 95 % | 98 % | 99 % | max | threshold | above "
        "| false-alarm rate | 95 % upper limit |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for name, o in out.items():
        q = o["quantiles"]
        lines.append(
            f"| {name} | {o['n']} | " + " | ".join(f"{x:.1f}" for x in q)
            + f" | {o['threshold']:.2f} | {o['above']} | {o['rate']:.3f} | {o['upper95']:.3f} |"
        )
    needed = math.ceil(1.0 / args.target)
    if stat in out and out[stat]["n"] < needed:
        o = out[stat]
        lines += [
            "",
            f"With the configured threshold ({o['current_threshold']}) the measured rate on "
            f"these nulls is {o['current_rate']:.3f} (95 % upper limit "
            f"{clopper_pearson_upper(round(o['current_rate'] * o['n']), o['n']):.3f}).",
            "",
            f"Too few null stars to calibrate a {args.target:.0%} false-alarm rate (at least "
            f"{needed} are needed to resolve it, a few hundred to pin it down): no threshold is "
            "recommended; keep the configured one.",
        ]
    elif stat in out:
        o = out[stat]
        lines += [
            "",
            f"With the configured threshold ({o['current_threshold']}) the measured rate on "
            f"these nulls is {o['current_rate']:.3f}.",
            "",
            "Lines for the [detection] table:",
            "",
            "```toml",
            f'statistic = "{stat}"',
            f"threshold = {o['threshold']:.2f}",
            f"false_alarm_rate = {o['rate']:.3f}",
            f"false_alarm_upper_95 = {o['upper95']:.3f}",
            f'calibration = "benchmarks/calibrate_detection.py: {o["n"]} simulated null stars, '
            f'seed {args.seed}, {date}; 95 % upper limit {o["upper95"]:.3f}"',
            "```",
        ]
    # Where the false alarms come from: per observing pattern, at the configured threshold.
    if stat in out:
        current = out[stat]["current_threshold"]
        lines += ["", f"By observing pattern, at the configured threshold ({current:g}):", "",
                  "| pattern | nulls | called periodic | their best periods [d] (points fitted) "
                  "| median s |",
                  "|---|---:|---:|---|---:|"]
        for kind in sorted({r["pattern"] for r in rows}):
            sel = [r for r in rows if r["pattern"] == kind and r[stat] is not None]
            hits = [r for r in sel if r[stat] > current]
            periods = ", ".join(f"{r['best_period']:.1f} ({r['n_points']})" for r in hits) or "-"
            lines.append(f"| {kind} | {len(sel)} | {len(hits)} | {periods} | "
                         f"{np.median([r['seconds'] for r in sel]):.0f} |")
    text = "\n".join(lines) + "\n"
    (RESULTS / "detection.md").write_text(text)
    print(text)


if __name__ == "__main__":
    main()
