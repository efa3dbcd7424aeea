"""Cost of one rotinfer log-posterior call against calling celerite2 directly.

The issue's target: the model's overhead keeps the cost per likelihood within
1.3x of building the same celerite2 kernel and GaussianProcess and calling
``compute`` + ``log_likelihood`` by hand on the same data. Both are timed in
interleaved rounds (so machine load affects them alike); the table gives the
median over rounds of the mean time per call, and their ratio.

Two forms of the model are timed. With the mean sampled, the direct call is the
GaussianProcess with that mean. With the mean integrated out (the default), the
same likelihood by hand is celerite2 with one more kernel term, a constant of
variance s0^2 (``RealTerm(a=s0^2, c=0)``), about the prior mean mu0 (Rasmussen &
Williams 2006, section 2.7); rotinfer gets it from the factorisation of the
smaller kernel instead (see ``RotationModel.log_likelihood``).

Run:  python benchmarks/bench_likelihood.py  [--quick]
Writes benchmarks/results/likelihood.md.
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import time
from pathlib import Path

import celerite2
import emcee
import numpy as np
from celerite2 import terms

import rotinfer
from rotinfer.model import BACKGROUND_Q, ModelConfig, RotationModel

SEED = 20260101


def direct(t, y, var, p, prior_mean=None):
    """The hand-written celerite2 call the model is compared with (``prior_mean``:
    (mu0, s0) of an integrated-out mean; else ``p["mean"]`` is used)."""
    k = terms.RotationTerm(sigma=p["sigma"], period=p["period"], Q0=p["Q0"], dQ=p["dQ"],
                           f=p["f"])
    k = k + terms.SHOTerm(sigma=p["background_sigma"], w0=2 * BACKGROUND_Q / p["background_tau"],
                          Q=BACKGROUND_Q)
    mean = p.get("mean")
    if prior_mean is not None:
        mean = prior_mean[0]
        k = k + terms.RealTerm(a=prior_mean[1] ** 2, c=0.0)
    gp = celerite2.GaussianProcess(k, mean=mean)
    gp.compute(t, diag=var + p["jitter"] ** 2, check_sorted=False)
    return gp.log_likelihood(y)


def time_calls(fn, n):
    t0 = time.perf_counter()
    for _ in range(n):
        fn()
    return (time.perf_counter() - t0) / n


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer rounds (a smoke run)")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(SEED)
    sizes = [1000, 5000, 19000]
    rounds = 5 if args.quick else 15
    rows = []
    for n in sizes:
        t = np.sort(rng.uniform(0.0, 27.0, n))
        err = np.full(n, 5e-4)
        y = 1.0 + 3e-3 * np.sin(2 * np.pi * t / 3.1) + err * rng.standard_normal(n)
        for marginalise in (False, True):
            model = RotationModel(t, y, err, period_range=(0.1, 13.5),
                                  config=ModelConfig(marginalise_mean=marginalise))
            theta = model.pack(period=3.1, sigma=3e-3, coherence_rotations=8.0, f=0.4, r=0.5,
                               background_sigma=5e-4, background_tau=0.3, jitter=1e-4,
                               mean=1.0)
            p = model.unpack(theta)
            var = err**2
            prior_mean = model.config.mean if marginalise else None
            ref = direct(t, y, var, p, prior_mean)
            if abs(model.log_likelihood(theta) - ref) > 1e-9 * abs(ref):
                raise RuntimeError("the two calls disagree; the comparison would be meaningless")
            calls = max(20, int(200_000 / n))
            ours, theirs = [], []
            for _ in range(rounds):
                theirs.append(time_calls(lambda: direct(t, y, var, p, prior_mean), calls))  # noqa: B023
                ours.append(time_calls(lambda: model.log_prob(theta), calls))  # noqa: B023
            m_ours, m_theirs = float(np.median(ours)), float(np.median(theirs))
            form = "integrated out" if marginalise else "sampled"
            rows.append((n, form, m_theirs * 1e3, m_ours * 1e3, m_ours / m_theirs, calls,
                         rounds))

    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    lines = [
        "# Likelihood cost: rotinfer against direct celerite2 calls",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC).strftime('%Y-%m-%d %H:%M UTC')}",
        f"- machine: {platform.machine()}, {os.cpu_count()} cores ({platform.platform()}), "
        f"load average at the end {load[0]:.2f} / {load[1]:.2f} / {load[2]:.2f} "
        "(the machine is shared; both columns were timed in interleaved rounds)",
        f"- versions: rotinfer {rotinfer.__version__}, celerite2 {celerite2.__version__}, "
        f"emcee {emcee.__version__}, numpy {np.__version__}, Python {sys.version.split()[0]}",
        f"- seed: {SEED}; data: uniform random times over 27 d, a 3.1 d sinusoid plus noise",
        "- model: rotation term + aperiodic background SHO + jitter, and the mean sampled "
        "(9 parameters) or integrated out (8; the default); rotinfer's call includes the "
        "priors (log posterior); the direct call builds the same celerite2 terms and "
        "GaussianProcess (with a constant term of the mean's prior variance when the mean "
        "is integrated out) and calls compute + log_likelihood",
        "",
        "| N points | mean | direct celerite2 [ms/call] | rotinfer log posterior [ms/call] | "
        "ratio | calls per round | rounds |",
        "|---:|---|---:|---:|---:|---:|---:|",
    ]
    for n, form, a, b, r, c, k in rows:
        lines.append(f"| {n} | {form} | {a:.3f} | {b:.3f} | {r:.3f} | {c} | {k} |")
    lines += ["", "Target: ratio <= 1.3 (issue 5)."]
    out = Path(__file__).parent / "results" / "likelihood.md"
    out.parent.mkdir(exist_ok=True)
    out.write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
