"""Peak memory of the whole pipeline on the largest light curves, stage by stage.

The likelihood alone is measured by ``bench_scaling.py`` (one call on up to 100,000
points). A user's process does more: it reads the file, cleans and bins the full light
curve (flare and outlier clipping against a local-polynomial smooth), runs Lomb-Scargle
and the ACF on all of it, fits and samples the binned light curve, keeps the chains and
draws the figures. Each case here is a simulated easy star (the simulator's population,
``configs/population.toml``) written to a FITS file in the space missions' column
conventions by one process; a fresh process then reads it and runs the stages in order,
recording its peak resident memory (``VmHWM`` of ``/proc/self/status``, the process's
high-water mark) after imports, after reading, after preparation, after the periodogram
stage, and after ``analyse_star`` with figures (the whole job, as ``rotinfer fit`` runs
it). The sampler runs with a short cap (``--steps``), because the chains are the one
part whose memory grows with run length; what they take at the default cap is stated
from their array shapes, not measured.

Cases (``--cases``): ``sector`` one 27.4-d sector at 2-min cadence (~19,000 points);
``sector-20s`` the same at 20-s cadence (~115,000); ``year-2min`` four 91.3-d stretches
at 2-min cadence (~250,000, a year of 2-min sectors); ``kepler`` four years at 30-min
cadence in 16 quarters (~68,000).

Run:  python benchmarks/bench_memory.py [--cases sector sector-20s year-2min kepler]
                                        [--steps 300]
Writes benchmarks/results/memory.md.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SEED = 20261205

#: name -> (description, ObservingPattern.space arguments)
CASES = {
    "sector": ("one 27.4-d sector, 2-min cadence",
               dict(n_sectors=1, sector_days=27.4, cadence_minutes=2.0)),
    "sector-20s": ("one 27.4-d sector, 20-s cadence",
                   dict(n_sectors=1, sector_days=27.4, cadence_minutes=20 / 60)),
    "kepler": ("four years at 30-min cadence, 16 quarters",
               dict(n_sectors=16, sector_days=91.3, cadence_minutes=30.0, orbit_days=30.4,
                    orbit_gap_days=1.0)),
    "year-2min": ("a year at 2-min cadence, four 91.3-d stretches",
                  dict(n_sectors=4, sector_days=91.3, cadence_minutes=2.0)),
}


def _simulate(case: str, path: Path) -> dict:
    """Write the case's simulated easy star to ``path`` (FITS); its size and truth."""
    from rotinfer.io import write_light_curve
    from rotinfer.simulate import ObservingPattern, draw_population, simulate_star

    params, _, name = draw_population(None, 1, seed=SEED, population="easy")[0]
    sim = simulate_star(params, ObservingPattern.space(**CASES[case][1]), seed=SEED,
                        name=f"{name}-{case}")
    write_light_curve(sim.lc, path)
    return {"n_points": len(sim.lc), "period": [sim.truth.period_min, sim.truth.period_max],
            "file_mb": path.stat().st_size / 2**20}


#: Run in a fresh interpreter: the stages in order, the high-water mark after each.
_MEASURE = r"""
import json, sys, warnings
def hwm():
    for line in open('/proc/self/status'):
        if line.startswith('VmHWM'):
            return int(line.split()[1]) / 1024.0
from rotinfer.io import read_stars
from rotinfer.pipeline import analyse_star, load_run_config
from rotinfer.prepare import prepare
from rotinfer.periodogram import scan
import matplotlib
matplotlib.use('Agg')
path, out, steps = sys.argv[1], sys.argv[2], int(sys.argv[3])
cfg = load_run_config(None, overrides={'sampler': {'max_steps': steps}})
marks = {'imports': hwm()}
lc = read_stars([path])[0]
marks['read'] = hwm()
prepared = prepare(lc, cfg.prepare)
marks['prepare'] = hwm()
scan(prepared, config=cfg.periodogram)
marks['periodogram'] = hwm()
with warnings.catch_warnings():
    warnings.simplefilter('ignore')
    s = analyse_star(lc, config=cfg, seed=1, out_dir=out, figures=True).to_dict()
marks['whole fit with figures'] = hwm()
modes = s['diagnostics']['modes']
print(json.dumps({'marks': marks, 'n_fit': s['prepared']['n_points'],
                  'n_params': len(modes[0]['tau_steps']) if modes else 0,
                  'modes': len(modes), 'steps': [m['n_steps'] for m in modes],
                  'period': s['period']['median']}))
"""


def _measure(path: Path, out: Path, steps: int) -> dict:
    res = subprocess.run([sys.executable, "-c", _MEASURE, str(path), str(out), str(steps)],
                         capture_output=True, text=True)
    if res.returncode:
        raise SystemExit(f"{path.name}: the measuring process failed:\n{res.stderr[-2000:]}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="+", default=list(CASES), choices=list(CASES))
    ap.add_argument("--steps", type=int, default=300,
                    help="sampler cap per ensemble for the measured run (default 300)")
    ap.add_argument("--out", default=str(HERE / "results" / "memory.md"))
    args = ap.parse_args(argv)

    from rotinfer import __version__
    from rotinfer.sample.settings import SamplerConfig

    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for case in args.cases:
            path = Path(tmp) / f"{case}.fits"
            info = _simulate(case, path)
            m = _measure(path, Path(tmp) / f"{case}-out", args.steps)
            rows.append((case, info, m))
            print(case, info, m, file=sys.stderr, flush=True)

    default = SamplerConfig()
    stages = list(rows[0][2]["marks"])
    lines = [
        "# Peak memory of the whole pipeline on the largest light curves",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores (shared)",
        f"- versions: rotinfer {__version__}, numpy {np.__version__}, Python "
        f"{platform.python_version()}; simulation seed {SEED} (one easy star of "
        "configs/population.toml, each case its own observing pattern)",
        f"- configuration: defaults, except a sampler cap of {args.steps} steps per ensemble",
        f"- command: python benchmarks/bench_memory.py --cases {' '.join(args.cases)} "
        f"--steps {args.steps}",
        "",
        "Peak resident memory (VmHWM) of a fresh process, in MB, after each stage in order "
        "(each value includes everything before it):",
        "",
        "| case | points read | FITS file [MB] | points fitted | "
        + " | ".join(f"after {s} [MB]" for s in stages) + " | period [d] (truth) |",
        "|---|---:|---:|---:|" + "---:|" * len(stages) + "---|",
    ]
    for case, info, m in rows:
        lo, hi = info["period"]
        lines.append(
            f"| {CASES[case][0]} | {info['n_points']:,} | {info['file_mb']:.1f} | "
            f"{m['n_fit']:,} | " + " | ".join(f"{m['marks'][s]:.0f}" for s in stages)
            + f" | {m['period']:.3f} ({lo:.3f}-{hi:.3f}) |")
    n_params = max(m["n_params"] for _, _, m in rows)
    walkers = max(default.n_walkers, 2 * n_params + 2)
    chain_mb = (default.n_ensembles * walkers * default.max_steps * (n_params + 1) * 8
                / 2**20)
    lines += [
        "",
        f"The chains of the measured runs are short ({args.steps} steps). At the default cap "
        f"({default.max_steps:,} steps per ensemble, {default.n_ensembles} ensembles of "
        f"{walkers} walkers, {n_params} parameters plus the log posterior, float64) one "
        f"sampled mode's chains take {chain_mb:.0f} MB, up to {default.max_sampled_modes} "
        f"modes {default.max_sampled_modes * chain_mb:.0f} MB (computed from the array "
        "shapes, not measured), whatever the light curve's length: the chains hold "
        "parameters, not data.",
    ]
    text = "\n".join(lines) + "\n"
    Path(args.out).write_text(text)
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
