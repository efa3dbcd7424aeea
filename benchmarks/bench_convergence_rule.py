"""Re-judge stored chains with the convergence rule: where would each fit have stopped?

The chains of a finished population run (``bench_population.py``; one ``chains.h5`` per
star) are judged again at every check (every ``check_every`` steps) as the sampler would
have judged them, with the tau-stability clause in two forms:

- ``noise-aware``: the ensemble-averaged tau changed by less than max(5 %, 3 standard
  errors of the change) (``[sampler] tau_noise_z = 3``, Madras & Sokal 1988);
- ``fixed 5 %``: the same change, 5 % whatever the estimator's noise (``tau_noise_z = 0``),

each with 20 and 50 autocorrelation times required. For every star the first passing
check is reported, and the period posterior at that point is compared with the one from
the whole stored chain (shift of the median in units of the full chain's posterior
standard deviation of ln P, and the ratio of 68 % widths), so a rule that stops early is
seen to stop where the answer no longer moves.

Run:  python benchmarks/bench_convergence_rule.py --stars benchmarks/work/population/survey/stars
Writes benchmarks/results/convergence_rule.md.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
from pathlib import Path

import h5py
import numpy as np

HERE = Path(__file__).resolve().parent
RULES = (("noise-aware", 3.0), ("fixed 5 %", 0.0))
MULTIPLES = (20.0, 50.0)


def _load(path: Path):
    """Chains, cumulative acceptance per block and parameter names of mode 0."""
    with h5py.File(path, "r") as f:
        groups = sorted(k for k in f["mode0"] if k.startswith("ensemble"))
        chains = [f[f"mode0/{g}/chain"][...] for g in groups]
        ends = [f[f"mode0/{g}/block_end"][...] for g in groups]
        acc = [f[f"mode0/{g}/accepted"][...] for g in groups]
        names = json.loads(f[f"mode0/{groups[0]}"].attrs["names"])
    return chains, ends, acc, names


def _period_summary(chains, burn):
    """Median and 68 % width of ln P after the burn-in (pooled ensembles)."""
    x = np.concatenate([c[b:, :, 0].ravel() for c, b in zip(chains, burn, strict=True)])
    lo, med, hi = np.percentile(x, [16, 50, 84])
    return med, hi - lo, np.std(x)


def judge_star(path: Path, check_every: int):
    from rotinfer.sample.convergence import EnsembleDiagnostics

    chains, ends, acc, names = _load(path)
    n_total = min(c.shape[0] for c in chains)
    checks = [n for n in range(check_every, n_total + 1, check_every)]
    verdicts = {}
    last = None
    for n in checks:
        sub = [c[:n] for c in chains]
        accepted = []
        for e, a in zip(ends, acc, strict=True):
            i = np.flatnonzero(e == n)
            accepted.append(a[i[0]] if i.size else np.full(a.shape[1], n // 4))
        for rule, z in RULES:
            d = EnsembleDiagnostics.judge(
                sub, accepted, names=names, check_every=check_every, tau_multiple=1.0,
                tau_rtol=0.05, rhat_max=1.01, burn_in_tau=5.0, stuck_ratio=0.1,
                tau_noise_z=z,
            )
            others = (np.all(d.rhat < 1.01) and d.stuck == 0
                      and np.all(d.tau_change < d.tau_change_allowed))
            for m in MULTIPLES:
                key = (rule, m)
                if key not in verdicts and others and np.all(d.n_tau > m):
                    verdicts[key] = (n, _period_summary(sub, d.burn_in))
            last = d
    full = _period_summary(chains, last.burn_in)
    return {"n_steps": n_total, "n_tau_end": float(np.min(last.n_tau)),
            "verdicts": verdicts, "full": full}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", default=str(HERE / "work" / "population" / "survey" / "stars"),
                    help="folder of star result folders holding chains.h5")
    ap.add_argument("--check-every", type=int, default=200)
    ap.add_argument("--out", default=str(HERE / "results" / "convergence_rule.md"))
    args = ap.parse_args(argv)

    import emcee

    from rotinfer import __version__

    paths = sorted(Path(args.stars).glob("*/chains.h5"))
    if not paths:
        raise SystemExit(f"error: {args.stars}: no */chains.h5 found")
    rows = []
    for p in paths:
        r = judge_star(p, args.check_every)
        r["star"] = p.parent.name
        rows.append(r)
        print(p.parent.name, {k: v[0] for k, v in r["verdicts"].items()}, flush=True)

    date = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d")
    lines = [
        "# The convergence rule re-judged on stored chains",
        "",
        f"- date: {date}; machine: {platform.machine()}, {os.cpu_count()} cores (shared)",
        f"- versions: rotinfer {__version__}, emcee {emcee.__version__}, numpy {np.__version__}",
        f"- chains: {len(rows)} stars from `{args.stars}` (mode 0, all ensembles), judged every "
        f"{args.check_every} steps; R-hat < 1.01, no stuck walkers and burn-in 5 tau in all "
        "rules; they differ only in the tau-stability clause and the length required.",
        "- shift: |median(ln P) at the first passing check - median of the whole chain| / "
        "posterior sd of ln P (whole chain); width: 68 % width at that check / whole chain's.",
        "",
        "| rule | length | converged by the end | median first passing step | median shift "
        "| max shift | width ratio (min-max) |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for rule, _ in RULES:
        for m in MULTIPLES:
            hits = [r for r in rows if (rule, m) in r["verdicts"]]
            if hits:
                steps = [r["verdicts"][(rule, m)][0] for r in hits]
                shifts = [abs(r["verdicts"][(rule, m)][1][0] - r["full"][0]) / r["full"][2]
                          for r in hits]
                widths = [r["verdicts"][(rule, m)][1][1] / r["full"][1] for r in hits]
                lines.append(
                    f"| {rule} | {m:g} tau | {len(hits)}/{len(rows)} | {np.median(steps):.0f} "
                    f"| {np.median(shifts):.2f} | {max(shifts):.2f} | {min(widths):.2f}-"
                    f"{max(widths):.2f} |")
            else:
                lines.append(f"| {rule} | {m:g} tau | 0/{len(rows)} | - | - | - | - |")
    lines += ["", "Per star (first passing step; - = not within the stored chain):", "",
              "| star | stored steps | length at the end (tau) | "
              + " | ".join(f"{rule}, {m:g} tau" for rule, _ in RULES for m in MULTIPLES) + " |",
              "|---|---:|---:|" + "---:|" * (len(RULES) * len(MULTIPLES))]
    for r in rows:
        cells = [str(r["verdicts"][(rule, m)][0]) if (rule, m) in r["verdicts"] else "-"
                 for rule, _ in RULES for m in MULTIPLES]
        lines.append(f"| {r['star']} | {r['n_steps']} | {r['n_tau_end']:.0f} | "
                     + " | ".join(cells) + " |")
    text = "\n".join(lines) + "\n"
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    Path(args.out).write_text(text)
    print(text)


if __name__ == "__main__":
    main()
