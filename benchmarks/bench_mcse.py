"""Monte Carlo precision of the reported periods on the stars of a population run.

For every finished star of a ``bench_population.py`` work folder (or any survey folder),
the stored chains (``chains.h5``) and summary give the Monte Carlo standard error (MCSE)
of the period median and of the 68 % and 95 % interval ends
(:func:`rotinfer.sample.mcse.quantile_mcse`, the mode probabilities' errors included).
Stars fitted by code older than the MCSE have no ``period.mcse`` block; this computes it
from their chains, with each mode's ln-evidence standard error recovered from its Kish
effective sample size (``se = sqrt(1/ESS - 1/n)`` for n importance draws, the identity the
estimator's delta-method error obeys).

The question it answers: does a star the convergence rule rejects still report numbers a
rerun would reproduce, and does one it accepts? The precision measure is the largest of
five ratios: the median's MCSE to the posterior's sigma (half the 68 % interval), and each
interval end's MCSE to its distance from the median; below 0.1 every reported number and
half-width is fixed to a tenth (our threshold, stated in the table).

Run:  python benchmarks/bench_mcse.py --work benchmarks/work/population
Writes benchmarks/results/mcse.md.
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import os
import platform
import sys
from pathlib import Path

import h5py
import numpy as np

HERE = Path(__file__).resolve().parent
CLASSES = ("easy", "moderate", "hard", "null")
THRESHOLD = 0.1


def star_mcse(folder: Path) -> dict:
    """MCSEs (days) of the five reported period numbers of one result folder."""
    from rotinfer.sample.mcse import (
        REPORTED,
        REPORTED_NAMES,
        ModeDraws,
        quantile_mcse,
        relative_precision,
    )
    from rotinfer.summarise import reported_numbers

    summary = json.loads((folder / "summary.json").read_text())
    n_draws = int(summary["config"]["sampler"]["importance_draws"])
    sampled = [m for m in summary["modes"] if m["sampled"]]
    diag = summary["diagnostics"]["modes"]
    modes = []
    with h5py.File(folder / "chains.h5", "r") as f:
        for k, d in enumerate(diag):
            info = min(sampled, key=lambda m: abs(m["period"] - d["period"]))
            n_common = d["n_steps"] - max(d["burn_in"])
            rows = []
            for e in range(len(d["burn_in"])):
                g = f[f"mode{k}/ensemble{e}"]
                j = json.loads(g.attrs["names"]).index("log_period")
                end = int(d["n_steps"])  # as summarised (a later resume may add steps)
                rows.append(np.exp(g["chain"][end - n_common:end, :, j]).T)
            se, ess = info.get("log_evidence_importance_se"), info.get("importance_ess")
            if se is None:  # older summaries: from the Kish ESS (see the module docstring)
                se = math.sqrt(max(1.0 / ess - 1.0 / n_draws, 0.0)) if ess else 0.0
            se = se if len(diag) > 1 else 0.0
            modes.append(ModeDraws(np.concatenate(rows, axis=0),
                                   info["probability"] if len(diag) > 1 else 1.0, se))
    p = summary["period"]
    est = reported_numbers(p)
    mcse = quantile_mcse(modes, REPORTED, est)
    rel = relative_precision(est, mcse)
    reasons = [r for d in diag for r in d["reasons"]]
    return dict(
        star=folder.name, cls=folder.name.split("-", 1)[1], converged=bool(summary["converged"]),
        n_modes=len(diag), steps=max(d["n_steps"] for d in diag), mcse=mcse,
        rel=float(np.max(rel)), worst=REPORTED_NAMES[int(np.argmax(rel))], median=p["median"],
        stored=(p.get("mcse") or {}).get("largest"),
        reason=reasons[0] if reasons else "",
    )


_COLUMNS = ("star", "cls", "converged", "n_modes", "steps", "median", "rel", "worst",
            "reason")


def _merge(path: Path, rows: list[dict]) -> list[dict]:
    """Rows kept in ``path`` (ECSV) for other stars, plus ``rows``; the file is rewritten."""
    from astropy.table import Table

    kept = []
    if path.is_file():
        now = {r["star"] for r in rows}
        for t in Table.read(path, format="ascii.ecsv"):
            if t["star"] not in now:
                r = {c: t[c].item() if hasattr(t[c], "item") else t[c] for c in _COLUMNS}
                r["mcse"] = np.array([t[f"mcse{i}"] for i in range(5)], dtype=float)
                kept.append(r)
    out = sorted(kept + rows, key=lambda r: r["star"])
    table = Table(rows=[[r[c] for c in _COLUMNS] + list(map(float, r["mcse"])) for r in out],
                  names=[*_COLUMNS, *(f"mcse{i}" for i in range(5))])
    table.meta["description"] = ("Monte Carlo errors (days) of the period's 2.5 %, 16 %, 50 %, "
                                 "84 % and 97.5 % points (mcse0-4); rel = largest relative "
                                 "to its scale (benchmarks/bench_mcse.py)")
    path.parent.mkdir(parents=True, exist_ok=True)
    table.write(path, format="ascii.ecsv", overwrite=True)
    return out


def _median(values) -> str:
    return f"{np.median(values):.3f}" if len(values) else "–"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", default=str(HERE / "work" / "population"),
                    help="bench_population.py work folder (survey/stars/) or a survey folder")
    ap.add_argument("--out", default=str(HERE / "results" / "mcse.md"))
    ap.add_argument("--table", default=None,
                    help="ECSV file of per-star rows kept across runs (work folders are "
                         "temporary): rows of stars measured now replace theirs, the others "
                         "stay, and the summary covers them all")
    args = ap.parse_args(argv)

    from rotinfer import __version__

    work = Path(args.work)
    stars = work / "survey" / "stars" if (work / "survey").is_dir() else work / "stars"
    rows = []
    for folder in sorted(stars.glob("*-*")):
        if not all((folder / n).is_file() for n in ("summary.json", "chains.h5", "done.json")):
            continue
        r = star_mcse(folder)
        rows.append(r)
        print(f"{r['star']}: converged {r['converged']}, {r['n_modes']} mode(s), precision "
              f"{r['rel']:.3f} ({r['worst']})", flush=True)
    n_now = len(rows)
    if args.table:
        rows = _merge(Path(args.table), rows)

    lines = [
        "# Monte Carlo precision of the reported periods",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores; rotinfer {__version__}, numpy "
        f"{np.__version__}, Python {platform.python_version()}",
        f"- stars: {len(rows)}: the {n_now} finished stars of {work} (their chains as "
        "fitted)" + (f", with the rows kept in {Path(args.table).name} from earlier work "
                     "folders" if args.table else ""),
        "- command: python benchmarks/bench_mcse.py --work WORK",
        "- precision: the largest, over the period median and the 68 % and 95 % interval ends, "
        "of the number's Monte Carlo standard error divided by its own scale (the median's: "
        "half the 68 % interval; an end's: its distance from the median); 'precise' means "
        f"below {THRESHOLD:g} (our threshold: every number, and each half-width, fixed to a "
        "tenth)",
        "",
        "| class | stars | converged | precise, converged | precise, not converged | "
        "median precision, converged | median precision, not converged |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for cls in CLASSES:
        rs = [r for r in rows if r["cls"] == cls]
        if not rs:
            continue
        yes = [r for r in rs if r["converged"]]
        no = [r for r in rs if not r["converged"]]
        lines.append(
            f"| {cls} | {len(rs)} | {len(yes)} | "
            f"{sum(r['rel'] < THRESHOLD for r in yes)}/{len(yes)} | "
            f"{sum(r['rel'] < THRESHOLD for r in no)}/{len(no)} | "
            f"{_median([r['rel'] for r in yes])} | {_median([r['rel'] for r in no])} |")
    lines += [
        "",
        "Stars that did not converge:",
        "",
        "| star | modes sampled | steps per ensemble | median [d] | MCSE of 2.5 % / median / "
        "97.5 % [d] | precision (least precise number) | first reason |",
        "|---|---:|---:|---:|---|---|---|",
    ]
    lines += [_unconverged_row(r) for r in rows if not r["converged"]]
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    Path(args.out).write_text("\n".join(lines) + "\n")
    print(f"wrote {args.out}")
    return 0


def _unconverged_row(r: dict) -> str:
    m = r["mcse"]
    return (f"| {r['star']} | {r['n_modes']} | {r['steps']} | {r['median']:.4g} | "
            f"{m[0]:.2g} / {m[2]:.2g} / {m[4]:.2g} | {r['rel']:.3f} ({r['worst']}) | "
            f"{r['reason']} |")


if __name__ == "__main__":
    sys.exit(main())
