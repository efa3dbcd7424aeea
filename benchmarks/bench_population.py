"""Injection and recovery on a simulated population; writes benchmarks/results/population.md.

For each class of the simulator's population (``configs/population.toml``: easy,
moderate, hard, null) ``--per-class`` stars are simulated (seed ``--seed``, each class
its own draw), analysed with ``run_survey`` (resumable: rerunning the command with the
same ``--work`` folder continues where it stopped and recomputes nothing), and compared
with the truth:

- per class, the fraction of periodic stars whose period estimate lies within 10 % of
  the true period range ``[0.9 period_min, 1.1 period_max]`` (the range of rotation
  periods of the spots that carried the signal), for rotinfer's posterior median and,
  side by side, for the Lomb-Scargle and ACF baselines (an ACF that found no reliable
  period counts as a miss);
- harmonic errors: estimates within 10 % of half or twice the true range;
- coverage: the 68 % and 95 % intervals overlapping the true range, over stars rotinfer
  called periodic;
- null stars called periodic (false detections) with a binomial 95 % upper limit;
- convergence by the sampler's documented rule, and seconds per star;
- a completeness figure: every periodic star at its true period and amplitude-to-noise
  ratio, marked by whether rotinfer recovered it.

The statistics are for the stars that finished; the table says how many that is. The
pipeline configuration is ``--config`` (default ``benchmarks/population_bench.toml``).

The run can be made in pieces on different machines: every finished star is kept, with
the commit of the code that fitted it, in ``results/population_stars.ecsv``; a later run
with the same seed, stars per class and configuration skips those stars (``--carry``)
and adds its own, so the committed table grows towards the requested population even
when each session's work folder is lost. "The same configuration" means the same file
and the same resolved options (``rotinfer.config.config_hash`` of every stage's
settings, defaults included, but not the false-alarm statement of ``[detection]``), so a
changed default or a new model option starts the table afresh. One exception: a table
made with the per-night offset term off, carried into a run where it is "auto", keeps
its stars whose prepared light curves are not nightly (the term never applies to them,
so their fits are the same) and refits the nightly ones.

Usage::

    python benchmarks/bench_population.py [--per-class 50] [--seed 7] [--workers 2]
        [--work benchmarks/work/population] [--summarise-only]
        [--compare results/population_stars_3519718.ecsv]

``--compare`` sets the stars of this run beside the same stars (same names, so the same
simulated light curves) of an earlier run's star table, class by class: within 10 %,
detected, converged, and the per-star CPU ratio (written to ``--compare-out``, default
``results/population_compare.md``).
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import os
import platform
import sys
import warnings
from pathlib import Path

import numpy as np
from astropy.table import Table, join
from scipy import stats

HERE = Path(__file__).resolve().parent
CLASSES = ("easy", "moderate", "hard", "null")


def _simulate(work: Path, per_class: int, seed: int) -> None:
    from rotinfer.simulate.output import write_population

    for k, cls in enumerate(CLASSES):
        folder = work / "lc" / cls
        if (folder / "truth.ecsv").exists():
            continue
        print(f"simulating {per_class} {cls} stars", file=sys.stderr)
        write_population(folder, n=per_class, seed=seed + 1000 * k, population=cls,
                         format="fits", overwrite=True)


def _truth(work: Path) -> Table:
    from rotinfer.simulate.output import read_truth_table

    parts = []
    for cls in CLASSES:
        path = work / "lc" / cls / "truth.ecsv"
        if path.exists():
            t = read_truth_table(path)
            t["name"] = [_identifier(n, cls) for n in t["name"]]
            t.meta.clear()  # per-class provenance (seeds) would conflict when stacked
            parts.append(t[["name", "category", "spotted", "n_spots", "period_min",
                            "period_max", "period_eq", "amplitude_ppt", "noise_rms_ppt"]])
    from astropy.table import vstack

    return vstack(parts)


def _identifier(name: str, cls: str) -> str:
    """'kestrel-00003' of class 'hard' -> '00003-hard': the survey runs stars in identifier
    order, so the classes interleave and a run stopped early has all of them."""
    return f"{name.rsplit('-', 1)[-1]}-{cls}"


def light_curve_path(work: Path, name: str) -> Path:
    """'00003-hard' -> WORK/lc/hard/kestrel-00003.fits (the inverse of :func:`_identifier`)."""
    number, _, cls = str(name).partition("-")
    return work / "lc" / cls / f"kestrel-{number}.fits"


def _manifest(work: Path, skip=frozenset()) -> Path:
    rows = []
    for cls in CLASSES:
        for path in sorted((work / "lc" / cls).glob("*.fits")):
            name = _identifier(path.stem, cls)
            if name not in skip:
                rows.append((name, str(path)))
    path = work / "manifest.csv"
    Table(rows=rows, names=("identifier", "files")).write(path, format="ascii.csv",
                                                         overwrite=True)
    return path


def _within(p, lo, hi, tol=0.1):
    p = np.asarray(p, dtype=float)
    return np.isfinite(p) & (p >= (1 - tol) * lo) & (p <= (1 + tol) * hi)


def _harmonic(p, lo, hi, tol=0.1):
    """Harmonic errors: not within ``tol`` of [lo, hi] but within it of half or twice it."""
    return ~_within(p, lo, hi, tol) & (_within(p, 0.5 * lo, 0.5 * hi, tol)
                                       | _within(p, 2 * lo, 2 * hi, tol))


def _overlaps(a, b, lo, hi):
    return (np.asarray(a) <= hi) & (np.asarray(b) >= lo)


def _frac(mask, n=None) -> str:
    mask = np.asarray(mask, dtype=bool)
    n = mask.size if n is None else n
    if n == 0:
        return "-"
    return f"{mask.sum() / n:.2f} ({mask.sum()}/{n})"


def _upper95(k: int, n: int) -> float:
    """One-sided 95 % Clopper-Pearson upper limit of a binomial rate."""
    return 1.0 if k >= n else float(stats.beta.ppf(0.95, k + 1, n - k))


def _filled(col, fill=np.nan):
    return np.asarray(np.ma.filled(np.ma.asarray(col, dtype=float), fill), dtype=float)


#: Per-star columns kept between runs (the truth columns are re-simulated each time).
STAR_COLUMNS = ("name", "status", "period", "period_lo68", "period_hi68", "period_lo95",
                "period_hi95", "period_ls", "period_acf", "detected", "detection_delta_bic",
                "converged", "cpu_time", "commit")


def _git_commit() -> str:
    """Short commit of the code being run (``unknown`` outside a git checkout)."""
    import subprocess

    try:
        out = subprocess.run(["git", "-C", str(HERE), "rev-parse", "--short", "HEAD"],
                             capture_output=True, text=True, timeout=10, check=True)
        dirty = subprocess.run(["git", "-C", str(HERE), "status", "--porcelain", "rotinfer"],
                               capture_output=True, text=True, timeout=10).stdout.strip()
        return out.stdout.strip() + ("+changes" if dirty else "")
    except (OSError, subprocess.SubprocessError):
        return "unknown"


#: Options that change what a summary says but not the fit or the table (not in the key).
REPORT_ONLY = (("periodogram", "window_threshold"), ("periodogram", "window_max_peaks"),
               ("periodogram", "window_min_gap"), ("detection", "sampling_tolerance"),
               ("detection", "sampling_probability"), ("detection", "harmonic_baselines"))


#: Options of the per-night offset term, which leave the fit unchanged while it is "off".
NIGHT_OPTIONS = ("night_offsets", "night_offset_ppt", "night_gap_hours")


def options_hash(cfg, *, not_nightly: bool = False) -> str:
    """Hash of the resolved options of a ``RunConfig`` that shape the fits and the calls.

    Not the wording of the false-alarm statement; not the options of the sampling check,
    which only adds a flag to the summary (dropped, not blanked, so that stars fitted
    before the check existed still match); not the options of a model term that is
    switched off, nor an option at the value that gives the model as it was before the
    option existed (the fit is then the same as before). With ``not_nightly``, the
    options as they fit a star whose sampling is not nightly: a night term on "auto" is
    then off.
    """
    import hashlib
    import json

    from rotinfer.config import dataclass_to_dict
    from rotinfer.model import EARLIER_MODEL_VALUES
    from rotinfer.sample.settings import EARLIER_SAMPLER_VALUES

    if not_nightly and cfg.model.night_offsets == "auto":
        cfg = dataclasses.replace(cfg, model=dataclasses.replace(cfg.model, night_offsets="off"))
    detection = dataclasses.replace(cfg.detection, false_alarm_rate=None,
                                    false_alarm_upper_95=None, calibration="")
    options = dataclass_to_dict(dataclasses.replace(cfg, detection=detection))
    for table, key in REPORT_ONLY:
        options[table].pop(key, None)
    if options["model"].get("night_offsets") == "off":
        for key in NIGHT_OPTIONS:
            options["model"].pop(key, None)
    for key, earlier in EARLIER_MODEL_VALUES.items():  # the model as before the option
        if options["model"].get(key) == earlier:
            options["model"].pop(key)
    if options["sampler"].get("period_precision") == 0:  # the clause is off
        options["sampler"].pop("period_precision")
    for key, earlier in EARLIER_SAMPLER_VALUES.items():  # sampling as before the option
        if options["sampler"].get(key) == earlier:
            options["sampler"].pop(key)
    text = json.dumps(options, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def _run_key(seed: int, per_class: int, config: str) -> dict:
    """What must match for stars of an earlier run to be carried into this one: the seed,
    the stars per class, the configuration file and its resolved options (defaults
    included)."""
    import hashlib

    from rotinfer.pipeline import load_run_config

    digest = hashlib.sha256(Path(config).read_bytes()).hexdigest()[:16]
    resolved = options_hash(load_run_config(config))
    return {"seed": int(seed), "per_class": int(per_class), "config_sha256": digest,
            "resolved_config": resolved}


def load_carried(path: Path, key: dict, *, config: str | None = None,
                 work: Path | None = None) -> Table | None:
    """Finished stars of earlier runs with the same key, or None (a mismatch is reported).

    With ``config`` and ``work``: a table whose key differs only in that it was made with
    the night term off, where this run has it on "auto", gives its stars that are not
    nightly (:func:`nightly_stars`), whose fits "auto" leaves as they were.
    """
    if not path.exists():
        return None
    t = Table.read(path, format="ascii.ecsv")
    found = {k: t.meta.get(k) for k in key}
    if found == key:
        return t
    cfg = None
    if config is not None and work is not None:
        from rotinfer.pipeline import load_run_config

        cfg = load_run_config(config)
    if cfg is not None and _only_night_term_differs(found, key, cfg):
        nightly = nightly_stars(work, cfg, t["name"])
        keep = np.array([name not in nightly for name in t["name"]], dtype=bool)
        print(f"{path}: made with the night term off; carrying its {int(keep.sum())} stars "
              f"whose sampling is not nightly (\"auto\" fits them as before) and refitting "
              f"its {int((~keep).sum())} nightly ones", file=sys.stderr)
        t = t[keep]
        t.meta.update(key)
        return t
    print(f"{path}: made with {found}, this run is {key}; not carried", file=sys.stderr)
    return None


def _only_night_term_differs(found: dict, key: dict, cfg) -> bool:
    same_rest = all(found[k] == key[k] for k in key if k != "resolved_config")
    return (same_rest and cfg.model.night_offsets == "auto"
            and found.get("resolved_config") == options_hash(cfg, not_nightly=True))


def nightly_stars(work: Path, cfg, names) -> set[str]:
    """Names among ``names`` whose light curves, prepared as the ``RunConfig`` ``cfg``
    prepares them, are nightly (:func:`rotinfer.model.is_nightly`, the test "auto"
    applies)."""
    from rotinfer.io import read_stars
    from rotinfer.model import is_nightly
    from rotinfer.prepare import prepare

    out = set()
    for name in names:
        lc = read_stars([str(light_curve_path(work, name))])[0]
        if is_nightly(prepare(lc, cfg.prepare).lc.time, cfg.model.night_gap_hours):
            out.add(str(name))
    return out


def _finished(work: Path, commit: str) -> Table | None:
    path = work / "survey" / "catalog.ecsv"
    if not path.exists():
        return None
    cat = Table.read(path, format="ascii.ecsv")
    cat.rename_column("identifier", "name")
    cat.meta.clear()
    cat["commit"] = [commit] * len(cat)
    return cat[list(STAR_COLUMNS)]


def summarise(work: Path, out: Path, figure: Path, header: list[str], *,
              carried: Table | None = None, commit: str = "unknown",
              stars_out: Path | None = None, key: dict | None = None) -> str:
    from astropy.table import vstack

    truth = _truth(work)
    parts = [p for p in (carried, _finished(work, commit)) if p is not None and len(p)]
    if not parts:
        raise SystemExit(f"{work}: no finished stars to summarise")
    stars = vstack([p[list(STAR_COLUMNS)] for p in parts], metadata_conflicts="silent")
    stars = stars[np.unique(np.asarray(stars["name"]), return_index=True)[1]]  # one row each
    stars.meta.clear()
    stars.meta.update(key or {})
    if stars_out is not None:
        stars.write(stars_out, format="ascii.ecsv", overwrite=True)
    t = join(truth, stars, keys="name", join_type="inner")
    ok = np.array([s == "ok" for s in t["status"]])
    t = t[ok]
    lines = list(header)
    commits = sorted(set(np.asarray(t["commit"]).tolist()))
    lines.append(f"- stars finished: {len(t)} of {len(truth)} simulated "
                 f"({int((~ok).sum())} failed); code commits {', '.join(commits)}")
    lines.append("")
    lines.append("| class | stars | with signal | rotinfer within 10 % | "
                 "Lomb-Scargle within 10 % | ACF within 10 % | harmonic errors | "
                 "68 % coverage | 95 % coverage | "
                 "detected | converged | median CPU [s] |")
    lines.append("|---|---:|---:|---|---|---|---|---|---|---|---|---:|")
    lo, hi = _filled(t["period_min"]), _filled(t["period_max"])
    p = _filled(t["period"])
    p_ls, p_acf = _filled(t["period_ls"]), _filled(t["period_acf"])
    detected = np.array(t["detected"], dtype=bool)
    converged = np.array(t["converged"], dtype=bool)
    cpu = _filled(t["cpu_time"])
    signal = np.array(t["spotted"], dtype=bool) & (np.asarray(t["n_spots"]) > 0) & np.isfinite(lo)
    hit = _within(p, lo, hi)
    harmonic = _harmonic(p, lo, hi)
    cov68 = _overlaps(_filled(t["period_lo68"]), _filled(t["period_hi68"]), lo, hi)
    cov95 = _overlaps(_filled(t["period_lo95"]), _filled(t["period_hi95"]), lo, hi)
    classes = np.asarray(t["category"])
    for cls in CLASSES:
        m = classes == cls
        s = m & signal
        det = s & detected
        cells = [cls, str(int(m.sum())), str(int(s.sum()))]
        if cls == "null":
            k, n = int((m & detected).sum()), int(m.sum())
            up = f"{_upper95(k, n):.2f}" if n else "-"
            cells += ["-", "-", "-", "-", "-", "-",
                      f"{_frac(detected[m])} false; 95 % upper limit {up}"]
        else:
            cells += [_frac(hit[s]), _frac(_within(p_ls, lo, hi)[s]),
                      _frac(_within(p_acf, lo, hi)[s]), _frac(harmonic[s]),
                      _frac(cov68[det]), _frac(cov95[det]), _frac(detected[s])]
        cells += [_frac(converged[m]),
                  f"{np.nanmedian(cpu[m]):.0f}" if m.any() else "-"]
        lines.append("| " + " | ".join(cells) + " |")
    lines.append("")
    lines.append(
        "Within 10 %: the estimate lies in [0.9 period_min, 1.1 period_max] of the truth "
        "table (periods of the spots that carried the signal); rotinfer's estimate is the "
        "posterior median, over all periodic stars whether detected or not. Harmonic errors: "
        "rotinfer within 10 % of half or twice that range instead. Coverage: the credible "
        "interval overlaps the true range, over stars called periodic. Stars of a spotted "
        "class whose spots left no signal (truth n_spots = 0, e.g. at a cycle minimum) "
        "are counted under 'stars' but not 'with signal'.")
    lines += [""] + _baseline_clause_lines(t, p, p_acf, classes, hit, harmonic, signal)
    _figure(t[signal], hit[signal], figure)
    lines.append("")
    lines.append(f"![completeness]({figure.name})")
    text = "\n".join(lines) + "\n"
    out.write_text(text)
    return text


def _baseline_clause_lines(t, p, p_acf, classes, hit, harmonic, signal) -> list[str]:
    """How often the harmonic warning's baseline clause fires, by what the star really is.

    The clause (``rotinfer.summarise.baseline_harmonics`` with the default
    ``[detection] harmonic_baselines``) needs only the reported period and the baselines,
    which every star of the table carries, so it is judged on all of them, whatever code
    fitted them (the posterior's own clause is not in the star table).
    """
    from rotinfer.summarise import DetectionConfig, baseline_harmonics

    cfg = DetectionConfig()
    flagged = np.array([bool(baseline_harmonics({"acf": {"period": a}}, q, cfg))
                        for q, a in zip(p, p_acf, strict=True)])
    lines = ["Harmonic warning, baseline clause (the ACF period near half or twice the "
             "reported one; `[detection] harmonic_baselines`): stars it flags, by what "
             "they are.", "",
             "| class | harmonic errors flagged | within 10 % flagged (false warnings) | "
             "other misses flagged | null stars flagged |", "|---|---|---|---|---|"]
    for cls in CLASSES:
        m = classes == cls
        if cls == "null":
            lines.append(f"| {cls} | - | - | - | {_frac(flagged[m])} |")
            continue
        s = m & signal
        lines.append(f"| {cls} | {_frac(flagged[s & harmonic])} | {_frac(flagged[s & hit])} "
                     f"| {_frac(flagged[s & ~hit & ~harmonic])} | - |")
    return lines


def compare(work: Path, before: Path, after: Table, out: Path, header: list[str]) -> str:
    """The stars of ``after`` that ``before`` also has, side by side, per class."""
    old = Table.read(before, format="ascii.ecsv")
    truth = _truth(work)
    rows = []
    for table in (old, after):
        t = join(truth, table[list(STAR_COLUMNS)], keys="name", join_type="inner")
        t = t[np.array([s == "ok" for s in t["status"]])]
        rows.append({str(n): r for n, r in zip(t["name"], t, strict=True)})
    names = sorted(set(rows[0]) & set(rows[1]))
    lines = list(header) + [
        f"- before: {before.name} (code commits "
        f"{', '.join(sorted(set(np.asarray(old['commit']).tolist())))}); now: this run",
        f"- stars in both: {len(names)}", "",
        "| class | stars | within 10 % before / now | detected before / now | "
        "converged before / now | median CPU before / now [s] | median per-star CPU ratio |",
        "|---|---:|---|---|---|---|---:|"]
    for cls in CLASSES:
        sel = [n for n in names if rows[0][n]["category"] == cls]
        if not sel:
            continue
        cells = [cls, str(len(sel))]
        for key in ("within", "detected", "converged"):
            pair = []
            for side in rows:
                if key == "within":
                    if cls == "null":
                        pair.append("-")
                        continue
                    v = [bool(_within([side[n]["period"]], side[n]["period_min"],
                                      side[n]["period_max"])[0]) for n in sel]
                else:
                    v = [bool(side[n][key]) for n in sel]
                pair.append(f"{sum(v)}/{len(v)}")
            cells.append(" / ".join(pair))
        cpu = [np.array([float(side[n]["cpu_time"]) for n in sel]) for side in rows]
        cells.append(f"{np.median(cpu[0]):.0f} / {np.median(cpu[1]):.0f}")
        cells.append(f"{np.median(cpu[1] / cpu[0]):.2f}")
        lines.append("| " + " | ".join(cells) + " |")
    lines += ["", "Within 10 % and detected: as in population.md (nulls: detected = false "
              "alarms). CPU: the worker's CPU seconds per star; the ratio is now / before, "
              "per star, then the median."]
    text = "\n".join(lines) + "\n"
    out.write_text(text)
    return text


def _figure(t: Table, hit: np.ndarray, path: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    period = 0.5 * (_filled(t["period_min"]) + _filled(t["period_max"]))
    snr = _filled(t["amplitude_ppt"]) / _filled(t["noise_rms_ppt"])
    fig, ax = plt.subplots(figsize=(6.4, 4.4), constrained_layout=True)
    marks = {"easy": "o", "moderate": "s", "hard": "^"}
    for cls, mark in marks.items():
        m = np.asarray(t["category"]) == cls
        ax.scatter(period[m & hit], snr[m & hit], marker=mark, color="tab:blue",
                   label=f"{cls}: recovered", s=28)
        ax.scatter(period[m & ~hit], snr[m & ~hit], marker=mark, facecolor="none",
                   edgecolor="tab:red", label=f"{cls}: missed", s=28)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("true rotation period [d] (middle of the spots' range)")
    ax.set_ylabel("spot amplitude (5-95 %) / noise rms")
    ax.set_title("Recovery within 10 % of the true period range")
    ax.legend(fontsize=7, ncol=2)
    fig.savefig(path, dpi=110)
    plt.close(fig)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--per-class", type=int, default=50, help="stars per class (default 50)")
    ap.add_argument("--seed", type=int, default=7, help="population and survey seed")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--config", default=str(HERE / "population_bench.toml"))
    ap.add_argument("--work", default=str(HERE / "work" / "population"),
                    help="simulated light curves and the survey folder (resumable)")
    ap.add_argument("--out", default=str(HERE / "results" / "population.md"))
    ap.add_argument("--summarise-only", action="store_true",
                    help="only rebuild the table from the survey folder as it is")
    ap.add_argument("--carry", default=str(HERE / "results" / "population_stars.ecsv"),
                    help="finished stars of earlier runs (skipped, then counted); rewritten "
                         "with this run's stars added")
    ap.add_argument("--commit", default=None,
                    help="commit recorded for this run's stars (default: git rev-parse)")
    ap.add_argument("--compare", default=None, metavar="STARS.ecsv",
                    help="an earlier run's star table to set this run's stars beside "
                         "(writes --compare-out)")
    ap.add_argument("--compare-out", default=str(HERE / "results" / "population_compare.md"),
                    help="where --compare writes its table")
    args = ap.parse_args(argv)
    work = Path(args.work)
    out = Path(args.out)
    key = _run_key(args.seed, args.per_class, args.config)
    carry = Path(args.carry)
    commit = args.commit or _git_commit()

    from rotinfer import __version__
    from rotinfer.survey import run_survey
    from rotinfer.survey.run import SurveyInterrupted

    work.mkdir(parents=True, exist_ok=True)
    _simulate(work, args.per_class, args.seed)
    carried = load_carried(carry, key, config=args.config, work=work)
    if not args.summarise_only:
        skip = frozenset(carried["name"]) if carried is not None else frozenset()
        manifest = _manifest(work, skip)
        if len(Table.read(manifest, format="ascii.csv")):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # convergence warnings are in the catalogue
                try:
                    run_survey([str(manifest)], out=work / "survey", config=args.config,
                               seed=args.seed, workers=args.workers, progress=True)
                except SurveyInterrupted as stop:  # stopped on purpose: keep what finished
                    print(stop, file=sys.stderr)
    import celerite2
    import emcee

    header = [
        "# Injection and recovery on a simulated population",
        "",
        f"- date: {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC; machine: "
        f"{platform.machine()}, {os.cpu_count()} cores (shared); {args.workers} workers",
        f"- versions: rotinfer {__version__}, celerite2 {celerite2.__version__}, emcee "
        f"{emcee.__version__}, numpy {np.__version__}, Python {platform.python_version()}",
        f"- population: configs/population.toml classes {', '.join(CLASSES)}, "
        f"{args.per_class} stars each requested, class k simulated with seed "
        f"{args.seed} + 1000 k; survey seed {args.seed}",
        f"- configuration: {Path(args.config).name}",
        f"- command: python benchmarks/bench_population.py --per-class {args.per_class} "
        f"--seed {args.seed}",
    ]
    print(summarise(work, out, out.with_name("population_completeness.png"), header,
                    carried=carried, commit=commit, stars_out=carry, key=key))
    if args.compare:
        now = Table.read(carry, format="ascii.ecsv")
        print(compare(work, Path(args.compare), now, Path(args.compare_out), header))
    return 0


if __name__ == "__main__":
    sys.exit(main())
