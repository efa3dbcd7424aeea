"""Harmonic errors at the optimisation stage under other bounds on the P/2 mode.

For population stars (the light curves simulated by ``bench_population.py`` in its work
folder) the optimisation stage of ``rotinfer fit`` runs as in the pipeline — prepare,
scan, find the modes, choose the rotation model's background oscillators, fit the
aperiodic comparison model — once per model *variant*: ``[model] secondary_coherence``
("quality": the P/2 mode's quality factor at most the P mode's, celerite2's dQ >= 0,
so it decays at least twice as fast; "time": its damping time at most the P mode's) and
``[model] max_secondary_fraction`` (f_max). The mode the sampler would weigh most — the
best by Laplace evidence — stands in for the posterior; no sampling is done, so this
measures where each variant puts the evidence, not the published intervals.

Every finished (star, variant) is appended to ``--log`` and skipped by a rerun; the table
is rewritten from the log after every star.

Run:  python benchmarks/bench_harmonic_model.py --work WORK --classes moderate
      [--variants quality:1 time:1 ...] [--stars 00004-moderate ...] [--config ...]
Writes benchmarks/results/harmonic_model.md and its log (JSON lines).
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
from bench_population import _within

HERE = Path(__file__).resolve().parent


def _variant(text: str) -> tuple[str, float]:
    coherence, _, fmax = text.partition(":")
    return coherence, float(fmax or 1.0)


def _key(variant: tuple[str, float]) -> str:
    """How a variant is written in the log and the table, e.g. 'time:3'."""
    return f"{variant[0]}:{variant[1]:g}"


def _verdict(period: float, lo: float, hi: float) -> str:
    """'right' within 10 % of the true range, 'P/2' or '2P' likewise, else 'other'."""
    for label, k in (("right", 1.0), ("P/2", 0.5), ("2P", 2.0)):
        if _within(period, k * lo, k * hi):
            return label
    return "other"


def _fit(ident, variants, work, config):
    from rotinfer.io import read_stars
    from rotinfer.model import RotationModel
    from rotinfer.periodogram import scan
    from rotinfer.prepare import prepare
    from rotinfer.sample import choose_periodic_backgrounds, find_modes, fit_aperiodic
    from rotinfer.simulate.output import read_truth_table
    from rotinfer.summarise import detection_statistics

    number, cls = ident.split("-", 1)
    folder = Path(work) / "lc" / cls
    truth = read_truth_table(folder / "truth.ecsv")
    row = truth[[str(n).endswith(number) for n in truth["name"]]][0]
    lc = read_stars([folder / f"{row['name']}.fits"])[0]
    prepared = prepare(lc, config.prepare)
    s = scan(prepared, config=config.periodogram)
    aperiodic = None
    for coherence, fmax in variants:
        t0 = time.process_time()
        mc = dataclasses.replace(config.model, secondary_coherence=coherence,
                                 max_secondary_fraction=fmax)
        model = RotationModel.from_prepared(prepared, config=mc)
        model = dataclasses.replace(model, period_range=(s.min_period, s.max_period))
        modes = find_modes(model, s.candidates, config=config.sampler,
                           rng=np.random.default_rng(0))
        if aperiodic is None:
            aperiodic = fit_aperiodic(model, config=config.sampler)
        chosen, modes = choose_periodic_backgrounds(model, modes, s.candidates,
                                                    config=config.sampler,
                                                    rng=np.random.default_rng(3))
        dbic = detection_statistics(chosen, modes, aperiodic)[0]
        ranked = sorted(modes, key=lambda m: -m.rank_value)
        yield dict(
            star=ident, variant=_key((coherence, fmax)),
            truth=[float(row["period_min"]), float(row["period_max"])],
            delta_bic=float(dbic),
            modes=[[float(m.period), float(m.rank_value)] for m in ranked],
            cpu=time.process_time() - t0,
        )


def _table(records, variants, header) -> str:
    keys = [_key(v) for v in variants]
    by = {(r["star"], r["variant"]): r for r in records}
    stars = sorted({r["star"] for r in records}, key=lambda s: (s.split("-")[1], s))
    lines = header + [
        "| star | true period [d] | " + " | ".join(
            f"{k}: best mode [d], gap to the true one, ΔBIC" for k in keys) + " |",
        "|---|---|" + "---|" * len(keys),
    ]
    tally = {k: {} for k in keys}
    for star in stars:
        cells = []
        truth = None
        for k in keys:
            r = by.get((star, k))
            if r is None:
                cells.append("–")
                continue
            lo, hi = truth = r["truth"]
            best = r["modes"][0]
            verdict = _verdict(best[0], lo, hi)
            cls = star.split("-", 1)[1]
            tally[k].setdefault(cls, []).append(verdict)
            right = [m for m in r["modes"] if _verdict(m[0], lo, hi) == "right"]
            gap = f"{best[1] - right[0][1]:.1f}" if right else "none found"
            mark = "" if verdict == "right" else f" **{verdict}**"
            cells.append(f"{best[0]:.3f}{mark}, {gap}, {r['delta_bic']:.1f}")
        period = "–" if truth is None else f"{truth[0]:.3f}–{truth[1]:.3f}"
        lines.append(f"| {star} | {period} | " + " | ".join(cells) + " |")
    lines += ["", "| variant | class | stars | best mode right | at P/2 | at 2P | other | "
              "median CPU [s] |", "|---|---|---:|---:|---:|---:|---:|---:|"]
    for k in keys:
        for cls, verdicts in sorted(tally[k].items()):
            cpu = [r["cpu"] for r in records
                   if r["variant"] == k and r["star"].endswith(cls)]
            lines.append(
                f"| {k} | {cls} | {len(verdicts)} | {verdicts.count('right')} | "
                f"{verdicts.count('P/2')} | {verdicts.count('2P')} | "
                f"{verdicts.count('other')} | {np.median(cpu):.0f} |")
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", required=True, help="bench_population.py work folder")
    ap.add_argument("--classes", nargs="*", default=[], help="all stars of these classes")
    ap.add_argument("--stars", nargs="*", default=[], help="e.g. 00004-moderate")
    ap.add_argument("--variants", nargs="+", default=["quality:1", "time:1"],
                    help="secondary_coherence:max_secondary_fraction, e.g. time:3")
    ap.add_argument("--config", default=str(HERE / "population_bench.toml"))
    ap.add_argument("--out", default=str(HERE / "results" / "harmonic_model.md"))
    ap.add_argument("--log", default=str(HERE / "results" / "harmonic_model.jsonl"))
    ap.add_argument("--part", default="0/1",
                    help="i/n: this process takes every n-th star from the i-th")
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.pipeline import load_run_config
    from rotinfer.simulate.output import read_truth_table

    config = load_run_config(args.config)
    variants = [_variant(v) for v in args.variants]
    stars = list(args.stars)
    for cls in args.classes:
        truth = read_truth_table(Path(args.work) / "lc" / cls / "truth.ecsv")
        stars += [f"{str(n)[-5:]}-{cls}" for n in truth["name"]]
    i, n = (int(v) for v in args.part.split("/"))
    log = Path(args.log)
    header = [
        "# Harmonic errors at the optimisation stage under other bounds on the P/2 mode",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores shared with other work",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}; configuration {Path(args.config).name}",
        f"- command: python benchmarks/bench_harmonic_model.py --work WORK --classes "
        f"{' '.join(args.classes)} --variants {' '.join(args.variants)}",
        "- variant = secondary_coherence:max_secondary_fraction; best mode = the highest "
        "Laplace evidence (what the sampler would weigh most); gap = its log evidence minus "
        "that of the best mode within 10 % of the true range (0 when it is that mode); "
        "**P/2**, **2P**, **other**: the best mode is within 10 % of half or twice the true "
        "range, or elsewhere.",
        "",
    ]
    for ident in stars[i::n]:
        records = ([json.loads(x) for x in log.read_text().splitlines() if x.strip()]
                   if log.exists() else [])
        done = {(r["star"], r["variant"]) for r in records}
        todo = [v for v in variants if (ident, _key(v)) not in done]
        for rec in _fit(ident, todo, args.work, config) if todo else ():
            with log.open("a") as f:
                f.write(json.dumps(rec) + "\n")
            records.append(rec)
            print(ident, rec["variant"], rec["modes"][0], f"{rec['delta_bic']:.1f}", flush=True)
        Path(args.out).write_text(_table(records, variants, header))
    return 0


if __name__ == "__main__":
    sys.exit(main())
