"""Per-night zero-point offsets (``[model] night_offsets``): their cost, and what they do
to ground-based stars of the injection-recovery population.

Part 1 (always): the likelihood with and without the night term on simulated nightly
sampling (the population's ground pattern: two 240-night seasons at 10-min cadence,
binned to N points), timed in interleaved rounds, median over rounds of the mean time per
call, and the ratio (its agreement with the dense normal density is a test,
``tests/test_night_offsets.py``).

Part 2 (``--stars``): the pipeline with the night term on, under the population
benchmark's configuration (``benchmarks/population_bench.toml``) and the star's seed of
that benchmark (``rotinfer.survey.tasks.star_seed(7, identifier)``), on stars of its
simulated population (``--work``, made by ``bench_population.py``), set beside the same
stars of the population's star table (night term off). Finished stars are kept in
``results/night_offsets_stars.ecsv`` and skipped by a rerun, so the command resumes.

Usage::

    python benchmarks/bench_night_offsets.py [--quick]
        [--stars 00008-hard 00014-hard ...] [--work benchmarks/work/population]

Writes ``benchmarks/results/night_offsets.md``.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
from astropy.table import Table
from bench_population import _within, light_curve_path

HERE = Path(__file__).resolve().parent
SEED = 20261203
RESULTS = HERE / "results"
STARS = RESULTS / "night_offsets_stars.ecsv"
STAR_COLUMNS = ("name", "period", "period_lo68", "period_hi68", "detected",
                "detection_delta_bic", "converged", "night_offset_ppt", "n_nights",
                "cpu_time")


def _ground_data(n_points: int, rng):
    """Nightly times of the population's ground pattern, binned to about ``n_points``."""
    from rotinfer.model import night_index
    from rotinfer.simulate.observing import ObservingPattern

    t = ObservingPattern.ground(n_seasons=2, season_days=240.0).sample(rng).time
    edges = np.linspace(t[0], t[-1] + 1e-9, int(n_points * (t[-1] - t[0]) / 200.0))
    idx = np.digitize(t, edges)
    keep = np.unique(idx, return_index=True)[1]
    t = t[keep]
    if t.size > n_points:
        t = np.sort(rng.choice(t, n_points, replace=False))
    night = night_index(t, 6.0)
    offsets = 1e-3 * rng.standard_normal(night[-1] + 1)
    y = (1 + 5e-4 * np.sin(2 * np.pi * t / 3.1) + offsets[night]
         + 5e-4 * rng.standard_normal(t.size))
    return t, y, np.full(t.size, 5e-4), night


def _cost_rows(points, rounds, calls):
    from rotinfer.model import RotationModel

    rows = []
    for n in points:
        rng = np.random.default_rng(SEED + n)
        t, y, e, night = _ground_data(n, rng)
        off = RotationModel(t, y, e, period_range=(0.4, 100.0))
        on = RotationModel(t, y, e, period_range=(0.4, 100.0), night=night)
        th_off = off.sample_prior(rng, calls)
        th_on = np.insert(th_off, on.names.index("log_night_offset"), np.log(1e-3), axis=1)
        times = {"off": [], "on": []}
        for _ in range(rounds):
            for key, model, thetas in (("off", off, th_off), ("on", on, th_on)):
                start = time.perf_counter()
                for theta in thetas:
                    model.log_likelihood(theta)
                times[key].append((time.perf_counter() - start) / calls)
        t_off, t_on = (float(np.median(times[k])) for k in ("off", "on"))
        rows.append((t.size, on.n_nights, 1e3 * t_off, 1e3 * t_on, t_on / t_off))
    return rows


def _fit_stars(names, work: Path, config: Path):
    from rotinfer.io import read_stars
    from rotinfer.pipeline import analyse_star, load_run_config
    from rotinfer.survey.tasks import star_seed

    cfg = load_run_config(config, overrides={"model": {"night_offsets": "on"}})
    done = Table.read(STARS, format="ascii.ecsv") if STARS.exists() else None
    have = set() if done is None else set(done["name"])
    rows = [] if done is None else [tuple(r[c] for c in STAR_COLUMNS) for r in done]
    for name in names:
        if name in have:
            continue
        lc = read_stars([str(light_curve_path(work, name))])[0]
        out = work / "night_offsets" / name
        start = time.process_time()
        summary = analyse_star(lc, config=cfg, seed=star_seed(7, name), out_dir=out,
                               figures=False).to_dict()
        cpu = time.process_time() - start
        period = summary["period"]
        nights = summary["nuisance"].get("night_offset_ppt", {})
        rows.append((name, period["median"], *period["interval_68"],
                     summary["detection"]["detected"], summary["detection"]["delta_bic"],
                     summary["diagnostics"]["converged"], nights.get("median", np.nan),
                     nights.get("nights", 0), cpu))
        Table(rows=rows, names=STAR_COLUMNS).write(STARS, format="ascii.ecsv", overwrite=True)
        print(f"{name}: {period['median']:.3f} d, detected {summary['detection']['detected']}",
              file=sys.stderr)
    return Table(rows=rows, names=STAR_COLUMNS) if rows else None


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer rounds and sizes")
    ap.add_argument("--stars", nargs="*", default=[], help="population identifiers to fit")
    ap.add_argument("--work", default=str(HERE / "work" / "population"))
    ap.add_argument("--config", default=str(HERE / "population_bench.toml"))
    args = ap.parse_args(argv)

    import celerite2

    import rotinfer

    points = (1000, 3000) if args.quick else (1000, 3000, 10000)
    rounds, calls = (5, 30) if args.quick else (15, 60)
    cost = _cost_rows(points, rounds, calls)
    now = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC")
    lines = [
        "# Per-night zero-point offsets: cost and effect on ground-based stars",
        "",
        f"- date: {now}; machine: {platform.machine()}, {os.cpu_count()} cores "
        f"({platform.platform()}), load average at the end "
        + " / ".join(f"{x:.2f}" for x in os.getloadavg()),
        f"- versions: rotinfer {rotinfer.__version__}, celerite2 {celerite2.__version__}, "
        f"numpy {np.__version__}, Python {platform.python_version()}",
        f"- seed {SEED}; command `python benchmarks/bench_night_offsets.py"
        + (" --quick" if args.quick else "") + (" --stars " + " ".join(args.stars)
                                                  if args.stars else "") + "`",
        "",
        "## Likelihood cost",
        "",
        "Two 240-night ground seasons at 10-min cadence thinned to N points; rotation term +",
        "background + jitter, mean integrated out; with the night term one more celerite",
        f"column. Median over {rounds} interleaved rounds of {calls} calls.",
        "",
        "| N points | nights | without [ms/call] | with night term [ms/call] | ratio |",
        "|---:|---:|---:|---:|---:|",
    ]
    for n, nights, a, b, r in cost:
        lines.append(f"| {n} | {nights} | {a:.3f} | {b:.3f} | {r:.2f} |")
    stars = _fit_stars(args.stars, Path(args.work), Path(args.config)) if args.stars else None
    if stars is not None:
        lines += _star_lines(stars, Path(args.work))
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / "night_offsets.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


def _star_lines(stars: Table, work: Path) -> list[str]:
    from rotinfer.simulate.output import read_truth_table

    pop = RESULTS / "population_stars.ecsv"
    before = Table.read(pop, format="ascii.ecsv") if pop.exists() else None
    out = [
        "",
        "## Ground-based stars of the population, night term on",
        "",
        "Same light curves, configuration and seeds as the population benchmark; \"off\" is",
        "that benchmark's star table (`results/population_stars.ecsv`). The simulator's",
        "per-night offsets have an rms of 1 ppt. Within 10 %: the posterior median inside",
        "[0.9 P_min, 1.1 P_max] of the true range (periodic stars only).",
        "",
        "| star | true range [d] | spot rms [ppt] | off: period [d] | off: detected (ΔBIC) "
        "| off: converged | on: period [d] (68 %) | on: detected (ΔBIC) | on: converged "
        "| night offsets [ppt] | CPU on [s] | CPU off [s] |",
        "|---|---|---:|---:|---|---|---|---|---|---:|---:|---:|",
    ]
    tally = {"periodic": 0, "off": 0, "on": 0, "nulls": 0, "false off": 0, "false on": 0,
             "conv off": 0, "conv on": 0}
    for r in stars:
        number, cls = r["name"].split("-")
        truth = read_truth_table(work / "lc" / cls / "truth.ecsv")
        tr = truth[truth["name"] == f"kestrel-{number}"][0]
        spotted = bool(tr["spotted"])
        lo, hi = float(tr["period_min"]), float(tr["period_max"])
        old = before[before["name"] == r["name"]] if before is not None else []
        old = old[0] if len(old) else None
        p_off = float(old["period"]) if old is not None else float("nan")
        if spotted:
            tally["periodic"] += 1
            tally["off"] += bool(_within(p_off, lo, hi))
            tally["on"] += bool(_within(float(r["period"]), lo, hi))
        else:
            tally["nulls"] += 1
            tally["false off"] += bool(old is not None and old["detected"])
            tally["false on"] += bool(r["detected"])
        tally["conv off"] += bool(old is not None and old["converged"])
        tally["conv on"] += bool(r["converged"])
        off = (f"{p_off:.3f} | {bool(old['detected'])} ({float(old['detection_delta_bic']):+.1f})"
               f" | {bool(old['converged'])}") if old is not None else "- | - | -"
        out.append(
            f"| {r['name']} | " + (f"{lo:.3f}-{hi:.3f}" if spotted else "none (null)")
            + f" | {float(tr['spot_rms_ppt']):.2f} | {off} | {float(r['period']):.3f} "
            f"({float(r['period_lo68']):.3f}-{float(r['period_hi68']):.3f}) | "
            f"{bool(r['detected'])} ({float(r['detection_delta_bic']):+.1f}) | "
            f"{bool(r['converged'])} | {float(r['night_offset_ppt']):.2f} | "
            f"{float(r['cpu_time']):.0f} | "
            + (f"{float(old['cpu_time']):.0f}" if old is not None else "-") + " |")
    n = len(stars)
    out += ["", f"Periodic stars within 10 % of the true range: off {tally['off']} of "
            f"{tally['periodic']}, on {tally['on']} of {tally['periodic']}. Null stars called "
            f"periodic: off {tally['false off']} of {tally['nulls']}, on {tally['false on']} "
            f"of {tally['nulls']}. Converged: off {tally['conv off']} of {n}, on "
            f"{tally['conv on']} of {n}."]
    return out


if __name__ == "__main__":
    sys.exit(main())
