"""The demo: an invented star from an imaginary survey, analysed end to end.

**Larkspur-4127** is made up. It stands for a young, spotted K dwarf observed by the
imaginary *Larkspur survey*: one 27.4-day sector of 2-minute photometry from a
space telescope, with a one-day downlink gap in the middle, a few per cent of cadences
lost, a sector-level flux offset, white and granulation noise, and flares. Its spots live
for about twenty rotations, so the light curve repeats but slowly changes shape. The star
is simulated with :mod:`rotinfer.simulate`, so the truth is known and is shown beside the
answer.

:func:`run_demo` writes the star's light curve as a CSV file, reads it back as a user's
file would be read, runs the whole pipeline on it (:func:`rotinfer.pipeline.analyse_star`:
prepare, scan, fit, summarise), draws the figures and writes the HTML pages. The sampler
settings come from the ``demo`` preset (``configs/demo.toml``, shipped inside the package
as ``rotinfer/data/demo.toml``), chosen so the whole demo runs in a few minutes on one
core while the convergence rule stays the default one.

Layout of the output folder (default ``rotinfer-demo``)::

    Larkspur-4127.csv              the light curve (input)
    Larkspur-4127-truth.json       what was simulated (period, amplitude, flare times...)
    results/vetting.html           the vetting page of the results folder
    results/Larkspur-4127/         the star's result folder: summary.json, samples.npz,
                                   chains.h5, summary.png/.pdf, scan.png, corner.png,
                                   traces.png, thumbnail.png and index.html
"""

from __future__ import annotations

import json
import math
import time
import warnings
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np

from .errors import ConvergenceWarning, InputError

__all__ = [
    "DEMO_SEED",
    "DEMO_STAR",
    "DemoResult",
    "demo_config_path",
    "make_demo_star",
    "reload_posterior",
    "run_demo",
]

#: The invented star's name.
DEMO_STAR = "Larkspur-4127"
#: Default seed (star and sampler).
DEMO_SEED = 1
# Files and folders the demo writes into its output folder.
_RESULTS = "results"


def demo_config_path() -> Path:
    """Path of the packaged ``demo`` preset (the same text as ``configs/demo.toml``)."""
    return Path(str(resources.files("rotinfer") / "data" / "demo.toml"))


def make_demo_star(seed: int = DEMO_SEED):
    """Simulate Larkspur-4127 (see the module notes).

    Parameters
    ----------
    seed : int
        Seed of the simulation (spots, flares, noise, dropped cadences).

    Returns
    -------
    rotinfer.simulate.SimulatedStar
        Light curve and truth.
    """
    from .simulate import ObservingPattern, StarParameters, simulate_star

    params = StarParameters(
        period=3.3,                  # days: a young K dwarf
        inclination=70.0,            # degrees
        spot_lifetime=60.0,          # days: about twenty rotations
        emergence_rate=0.1,          # new spots per day
        spot_area_median=6e-3,       # of the hemisphere: large spot groups
        spot_area_max=0.03,
        contrast=0.6,
        latitude_max=50.0,           # degrees
        flare_rate=1.0,              # flares per day above 3 ppt
        flare_amplitude_min=3.0,     # ppt
        flare_amplitude_max=80.0,    # ppt
        white_noise=1.0,             # ppt per 2-min point
        granulation=0.2,             # ppt
        category="demo",
    )
    pattern = ObservingPattern.space(1, 27.4, 2.0, orbit_days=13.7, orbit_gap_days=1.0,
                                     dropout_fraction=0.02, segment_offset=2.0)
    return simulate_star(params, pattern, seed=int(seed), name=DEMO_STAR)


@dataclass(frozen=True)
class DemoResult:
    """What :func:`run_demo` wrote and found.

    Attributes
    ----------
    out : Path
        The output folder.
    light_curve, truth_file : Path
        The simulated light curve (CSV) and its truth (JSON).
    star_folder : Path
        The star's result folder.
    summary : dict
        The star's ``summary.json``.
    truth : rotinfer.simulate.Truth
        What was simulated.
    figures : dict of str to Path
        The figures written.
    star_page, vetting_page : Path
        The HTML pages.
    seconds : float
        Wall time of the whole demo, s.
    warnings : tuple of str
        Convergence warnings raised on the way (a sampler that stopped at its cap).
    """

    out: Path
    light_curve: Path
    truth_file: Path
    star_folder: Path
    summary: dict
    truth: object
    figures: dict
    star_page: Path
    vetting_page: Path
    seconds: float
    warnings: tuple[str, ...] = ()


def _check_out(out: Path, overwrite: bool) -> None:
    if out.exists() and not out.is_dir():
        raise InputError(str(out), "exists and is not a folder")
    if out.is_dir() and any(out.iterdir()):
        if not overwrite:
            raise InputError(str(out), "folder exists and is not empty; refusing to overwrite "
                             "(pass --overwrite to replace the demo's files)")
        # Only the demo's own outputs are replaced; anything else in the folder is left alone.
        # The chains (chains.h5) stay: the fit resumes from them when the seed and settings
        # match (exactly the same draws), and replaces them when they do not.
        for name in (f"{DEMO_STAR}.csv", f"{DEMO_STAR}-truth.json"):
            (out / name).unlink(missing_ok=True)
        results = out / _RESULTS
        if results.is_dir():
            for path in results.rglob("*"):
                if path.is_file() and path.name != "chains.h5":
                    path.unlink()
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(str(out), f"cannot create folder ({exc.strerror or exc})") from None


def _truth_record(truth) -> dict:
    from .simulate import TRUTH_UNITS

    def clean(v):
        if isinstance(v, float | np.floating):
            return float(v) if math.isfinite(v) else None
        if isinstance(v, np.integer):
            return int(v)
        return v

    row = {k: clean(v) for k, v in truth.to_row().items()}
    row["flare_times"] = [float(t) for t in truth.flare_times]
    row["flare_amplitudes_ppt"] = [float(a) for a in truth.flare_amplitudes]
    units = dict(TRUTH_UNITS)
    units["flare_times"] = "d (same time reference as the light curve's relative times)"
    units["flare_amplitudes_ppt"] = "ppt"
    return {"note": f"{DEMO_STAR} is an invented star, simulated by rotinfer.simulate",
            "truth": row, "units": units}


def reload_posterior(lc, *, config, seed: int, folder):
    """The posterior of a result folder written by :func:`rotinfer.pipeline.analyse_star`.

    The prepared light curve and the scan are recomputed (deterministic and fast) and
    :func:`rotinfer.sample.fit` is called with the folder's ``chains.h5``, which it resumes
    without sampling again. The draws are then compared with ``samples.npz``.

    Returns
    -------
    prepared, scan_result, posterior

    Raises
    ------
    RuntimeError
        If the chains cannot be resumed to the same draws (the pipeline and this function
        disagree on how the fit was set up).
    """
    import dataclasses

    from .model import RotationModel
    from .periodogram import scan
    from .prepare import prepare
    from .sample import fit

    folder = Path(folder)
    prepared = prepare(lc, config.prepare)
    scan_result = scan(prepared, config=config.periodogram)
    model = RotationModel.from_prepared(prepared, config=config.model)
    if config.model.period_range is None:
        model = dataclasses.replace(
            model, period_range=(scan_result.min_period, scan_result.max_period))
    with warnings.catch_warnings():
        # the sampler repeats the convergence warning of the original run, already reported
        warnings.simplefilter("ignore", ConvergenceWarning)
        posterior = fit(model, scan_result.candidates, config=config.sampler, seed=seed,
                        checkpoint_path=folder / "chains.h5")
    with np.load(folder / "samples.npz") as stored:
        theta = stored["theta"]
    if theta.shape != posterior.samples.shape or not np.allclose(theta, posterior.samples):
        raise RuntimeError(f"{folder}: the chains in chains.h5 do not reproduce samples.npz; "
                           "the figures would not show the posterior that was summarised")
    return prepared, scan_result, posterior


def run_demo(out: str | Path = "rotinfer-demo", *, seed: int = DEMO_SEED,
             config: str | Path | None = None, overwrite: bool = False,
             progress: bool = False) -> DemoResult:
    """Simulate the demo star and run the whole pipeline on it; write figures and pages.

    Parameters
    ----------
    out : path
        Output folder; refused when it exists and is not empty, unless ``overwrite``.
    seed : int
        Seed of the simulated star and of its fit.
    config : path, optional
        TOML configuration; default: the packaged ``demo`` preset.
    overwrite : bool
        Replace the demo's files in a non-empty ``out`` (other files are left alone). The
        chains of an earlier run are resumed when the seed and settings are the same (the
        sampler's checkpoint rule), so a repeated demo does not sample again.
    progress : bool
        Show a progress bar of sampler steps (stderr).

    Returns
    -------
    DemoResult

    Raises
    ------
    InputError
        If ``out`` cannot be used.
    ConfigError
        If the configuration file is invalid.
    """
    from .figures import write_star_figures
    from .io import read_stars, write_light_curve
    from .pipeline import analyse_star, load_run_config, star_folder_name
    from .report import write_star_page, write_vetting_page

    start = time.perf_counter()
    out = Path(out)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise InputError(None, f"seed must be a non-negative integer, got {seed!r}")
    run_config = load_run_config(config if config is not None else demo_config_path())
    _check_out(out, overwrite)

    star = make_demo_star(seed)
    lc_path = write_light_curve(star.lc, out / f"{DEMO_STAR}.csv")
    truth_path = out / f"{DEMO_STAR}-truth.json"
    truth_path.write_text(json.dumps(_truth_record(star.truth), indent=2) + "\n")

    (lc,) = read_stars([lc_path])
    folder = out / _RESULTS / star_folder_name(lc)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        # Figures are drawn below, with the simulated truth marked on them.
        analyse_star(lc, config=run_config, seed=seed, out_dir=folder, progress=progress,
                     figures=False)
    notes: list[str] = []
    for w in caught:
        if issubclass(w.category, ConvergenceWarning):
            text = " ".join(str(w.message).split())
            if text not in notes:
                notes.append(text)
        else:  # anything else goes on as it came
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    prepared, scan_result, posterior = reload_posterior(lc, config=run_config, seed=seed,
                                                        folder=folder)
    # Only the period has a like-for-like truth: the simulator's amplitude is a 5-95 %
    # range of the spot signal, not the GP's standard deviation.
    figures = write_star_figures(folder, prepared, scan_result, posterior,
                                 truth={"period": star.truth.period_eq},
                                 truth_flares=star.truth.flare_times)
    star_page = write_star_page(folder)
    vetting_page = write_vetting_page(out / _RESULTS, star_pages=False)
    summary = json.loads((folder / "summary.json").read_text())
    return DemoResult(
        out=out, light_curve=lc_path, truth_file=truth_path, star_folder=folder,
        summary=summary, truth=star.truth, figures=figures, star_page=star_page,
        vetting_page=vetting_page, seconds=time.perf_counter() - start,
        warnings=tuple(notes),
    )
