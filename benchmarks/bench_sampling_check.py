"""Sampling check on the stars of a population run: how often the period sits on the day.

For every finished star of a ``bench_population.py`` work folder, the light curve is
prepared and scanned again with the run's configuration (cheap: no fit), which gives the
periodicities of its sampling (spectral-window peaks, ``rotinfer.periodogram.window``),
and ``rotinfer.summarise.sampling_check`` is applied to the star's stored posterior
samples (``samples.npz``). Stars fitted by code older than the check have no ``sampling``
block in their summary; this computes the same block for them. Per class: stars with a
periodicity of the sampling in range, stars flagged, and how the flag relates to the true
period and to rotinfer's error.

Run:  python benchmarks/bench_sampling_check.py --work benchmarks/work/population
      [--config benchmarks/population_bench.toml]
Writes benchmarks/results/sampling_check.md.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
CLASSES = ("easy", "moderate", "hard", "null")


def _within(p, lo, hi, tol=0.1) -> bool:
    return bool(np.isfinite(p) and (1 - tol) * lo <= p <= (1 + tol) * hi)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", default=str(HERE / "work" / "population"),
                    help="bench_population.py work folder (lc/ and survey/stars/)")
    ap.add_argument("--config", default=str(HERE / "population_bench.toml"))
    ap.add_argument("--out", default=str(HERE / "results" / "sampling_check.md"))
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.io import read_stars
    from rotinfer.periodogram import scan
    from rotinfer.pipeline import load_run_config
    from rotinfer.prepare import prepare
    from rotinfer.simulate.output import read_truth_table
    from rotinfer.summarise import sampling_check

    config = load_run_config(args.config)
    work = Path(args.work)
    truths = {cls: read_truth_table(work / "lc" / cls / "truth.ecsv") for cls in CLASSES
              if (work / "lc" / cls / "truth.ecsv").is_file()}
    rows = []
    for folder in sorted((work / "survey" / "stars").glob("*-*")):
        if not (folder / "summary.json").is_file() or not (folder / "samples.npz").is_file():
            continue
        number, cls = folder.name.split("-", 1)
        truth = truths[cls]
        row = truth[[str(n).endswith(number) for n in truth["name"]]][0]
        lc = read_stars([work / "lc" / cls / f"{row['name']}.fits"])[0]
        scanned = scan(prepare(lc, config.prepare), config=config.periodogram).to_dict()
        with np.load(folder / "samples.npz", allow_pickle=False) as d:
            period, weight = d["period"], d["weight"]
        summary = json.loads((folder / "summary.json").read_text())
        median = float(summary["period"]["median"])
        block = sampling_check(period, weight / weight.sum(), median, scanned,
                               config.detection)
        lo, hi = float(row["period_min"]), float(row["period_max"])
        signal = bool(row["n_spots"] > 0 and np.isfinite(lo))
        widen = 1.0 + config.detection.sampling_tolerance
        truth_at = signal and any(lo / widen <= q["period"] <= hi * widen
                                  for q in block["periodicities"])
        rows.append(dict(
            star=folder.name, cls=cls, signal=signal, lo=lo, hi=hi, median=median,
            within=signal and _within(median, lo, hi), detected=bool(summary["detected"]),
            n_window=len(block["periodicities"]),
            window=", ".join(f"{q['period']:.4f} ({q['power']:.2f})"
                             if q.get("source", "window") == "window" else
                             f"{q['period']:.3f} (gaps)"
                             for q in block["periodicities"]) or "–",
            probability=block["probability"], flag=block["flag"], truth_at=truth_at,
            ls_at=block["baselines"]["lomb_scargle"], acf_at=block["baselines"]["acf"]))
        print(f"{folder.name}: window {rows[-1]['window']}; P = {median:.4f} d; "
              f"p = {block['probability']:.3f}; flag {block['flag']}", flush=True)

    lines = [
        "# Sampling check on the population stars",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}; configuration {Path(args.config).name}; "
        f"window threshold {config.periodogram.window_threshold}, tolerance "
        f"{config.detection.sampling_tolerance}, flag above probability "
        f"{config.detection.sampling_probability}",
        f"- stars: the {len(rows)} finished stars of {work} (posterior samples as fitted; the "
        "light curve re-prepared and re-scanned for its spectral window)",
        "- command: python benchmarks/bench_sampling_check.py --work WORK",
        "",
        "| class | stars | with a sampling periodicity in range | flagged | flagged, truth "
        "not at it | rotinfer within 10 %, flagged | rotinfer within 10 %, not flagged | "
        "Lomb-Scargle at it | ACF at it |",
        "|---|---:|---:|---:|---:|---|---|---:|---:|",
    ]
    for cls in CLASSES:
        rs = [r for r in rows if r["cls"] == cls]
        if not rs:
            continue
        flagged = [r for r in rs if r["flag"]]
        clean = [r for r in rs if not r["flag"]]

        def frac(sub):
            sig = [r for r in sub if r["signal"]]
            return f"{sum(r['within'] for r in sig)}/{len(sig)}" if sig else "–"

        lines.append(
            f"| {cls} | {len(rs)} | {sum(r['n_window'] > 0 for r in rs)} | {len(flagged)} | "
            f"{sum(not r['truth_at'] for r in flagged)} | {frac(flagged)} | {frac(clean)} | "
            f"{sum(bool(r['ls_at']) for r in rs)} | {sum(bool(r['acf_at']) for r in rs)} |")
    lines += [
        "",
        "Stars with a periodicity of the sampling in range:",
        "",
        "| star | true period [d] | window periods [d] (power) | rotinfer median [d] | "
        "probability at a window period | flag | detected |",
        "|---|---|---|---:|---:|---|---|",
    ]
    for r in rows:
        if r["n_window"]:
            true = f"{r['lo']:.3f}-{r['hi']:.3f}" if r["signal"] else "– (no signal)"
            lines.append(
                f"| {r['star']} | {true} | {r['window']} | {r['median']:.4f} | "
                f"{r['probability']:.3f} | {'yes' if r['flag'] else 'no'} | "
                f"{'yes' if r['detected'] else 'no'} |")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text("\n".join(lines) + "\n")
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
