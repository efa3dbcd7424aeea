"""Write a simulated population to a folder: light curves plus truth tables.

Layout of the output folder (names are our own):

- ``<star>.csv`` (or ``.fits``): one light curve per star, written by
  :func:`rotinfer.io.write_light_curve`, so rotinfer reads it back;
- ``truth.ecsv``: one row per star (:meth:`Truth.to_row`), units and column
  descriptions in the header;
- ``flares.ecsv``: one row per observed flare;
- ``parameters.ecsv``: every :class:`StarParameters` field per star.

Amplitudes and noise levels are in ppt (1 ppt = 1e-3 of the flux), a unit
astropy does not know by default; :func:`read_truth_table` reads the tables
with it enabled. Same seed and configuration give byte-identical files: no
timestamps are written anywhere.
"""

from __future__ import annotations

import dataclasses
import os
import tempfile
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from .. import __version__
from ..config import config_hash
from ..errors import ConfigError, InputError
from ..io import write_light_curve
from .core import TRUTH_UNITS, SimulatedStar, simulate_star
from .params import StarParameters
from .population import draw_population, load_population_config, star_seed

__all__ = ["PPT", "SimulationRun", "read_truth_table", "write_population"]

#: Parts per thousand of the flux, for table columns.
PPT = u.def_unit("ppt", 1e-3 * u.dimensionless_unscaled, doc="parts per thousand of the flux")

OUTPUT_FORMATS = ("csv", "fits")

_TRUTH_DESCRIPTIONS = {
    "name": "invented star name",
    "category": "population class",
    "seed": "simulation seed (simulate_star(..., seed=seed) reproduces the star)",
    "spotted": "false for null stars (no spots at all)",
    "n_spots": "spots carrying the signal (0: no rotational signal)",
    "period_eq": "equatorial rotation period",
    "period_min": "shortest rotation period of the spots present",
    "period_max": "longest rotation period of the spots present",
    "period_mean": "spot-deficit-weighted mean rotation period",
    "shear": "dOmega/Omega_eq; omega = Omega_eq (1 - shear sin^2 latitude)",
    "inclination": "rotation axis to line of sight",
    "spot_lifetime": "mean spot lifetime",
    "spot_lifetime_rotations": "mean spot lifetime in equatorial rotations",
    "amplitude_ppt": "5-95 percentile range of the noise-free spot signal",
    "spot_rms_ppt": "standard deviation of the noise-free spot signal",
    "contrast": "spot contrast 1 - I_spot/I_phot",
    "noise_rms_ppt": "measured standard deviation of white plus correlated noise",
    "cycle_phase": "activity-cycle phase at the first observation",
    "time_reference": "BJD-like epoch of time 0 in the light curve",
    "weight_floor": "fraction of the largest spot's signal a spot needs to count",
    "n_flares": "observed flares (see flares.ecsv)",
}

_PARAM_UNITS = {
    "period": "d", "inclination": "deg", "spot_lifetime": "d", "emergence_rate": "1/d",
    "latitude_min": "deg", "latitude_max": "deg", "latitude_scatter": "deg",
    "cycle_period": "d", "flare_rate": "1/d", "flare_amplitude_min": "ppt",
    "flare_amplitude_max": "ppt", "flare_fwhm_min": "min", "flare_fwhm_max": "min",
    "white_noise": "ppt", "granulation": "ppt", "granulation_timescale": "d", "drift": "ppt",
}


@dataclass(frozen=True)
class SimulationRun:
    """What :func:`write_population` wrote.

    Attributes
    ----------
    out : Path
        Output folder.
    files : tuple of Path
        Light-curve files, one per star, in order.
    truth_path, flares_path, parameters_path : Path
        The tables.
    n_stars : int
        Number of stars.
    counts : dict
        Stars per class.
    """

    out: Path
    files: tuple[Path, ...]
    truth_path: Path
    flares_path: Path
    parameters_path: Path
    n_stars: int
    counts: dict


def _unit(name: str):
    text = name if name in ("ppt", "d", "deg", "min", "1/d") else None
    if text is None:
        return None
    return PPT if text == "ppt" else u.Unit(text)


def _table(rows: list[dict], units: dict, descriptions: dict, meta: dict,
           columns: list[str]) -> Table:
    table = Table()
    for col in columns:
        values = [r[col] for r in rows]
        if not values:
            data = np.array([], dtype=str if col == "name" else np.float64)
        elif isinstance(values[0], str):
            data = np.array(values, dtype=str)
        elif isinstance(values[0], bool | np.bool_):
            data = np.array(values, dtype=bool)
        elif isinstance(values[0], int | np.integer):
            data = np.array(values, dtype=np.int64)
        else:
            data = np.array(values, dtype=np.float64)
        table[col] = data
        unit = _unit(units.get(col, ""))
        if unit is not None:
            table[col].unit = unit
        if col in descriptions:
            table[col].description = descriptions[col]
    table.meta.update(meta)
    return table


def _write_table(table: Table, path: Path) -> None:
    # Write beside the destination and move into place (no half-written tables).
    fd, tmp = tempfile.mkstemp(prefix=".rotinfer-", suffix=".ecsv", dir=path.parent)
    os.close(fd)
    try:
        with u.add_enabled_units([PPT]):
            table.write(tmp, format="ascii.ecsv", overwrite=True)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def read_truth_table(path: str | os.PathLike) -> Table:
    """Read ``truth.ecsv``, ``flares.ecsv`` or ``parameters.ecsv`` with the ppt unit known.

    Raises
    ------
    InputError
        If the file does not exist.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(str(path), "no such truth table")
    with u.add_enabled_units([PPT]):
        return Table.read(path, format="ascii.ecsv")


def _prepare_folder(out: Path, overwrite: bool) -> None:
    if out.exists() and not out.is_dir():
        raise InputError(str(out), "exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise InputError(str(out), "folder exists and is not empty; refusing to overwrite "
                         "(pass --overwrite to replace files of the same names)")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(str(out), f"cannot create folder ({exc.strerror or exc})") from None


def write_population(
    out: str | os.PathLike,
    *,
    n: int,
    seed: int,
    config=None,
    population: str | None = None,
    format: str = "csv",
    overwrite: bool = False,
    progress: Callable[[Iterable], Iterable] | None = None,
) -> SimulationRun:
    """Simulate ``n`` stars of a population and write them to ``out``.

    Parameters
    ----------
    out : path-like
        Output folder; created if missing. An existing non-empty folder is
        refused unless ``overwrite`` (which replaces files of the same names and
        leaves other files alone).
    n : int
        Number of stars.
    seed : int
        Population seed; star ``i`` is simulated with ``star_seed(seed, i)``.
    config : path, mapping or None
        Population configuration (None: the built-in ``configs/population.toml``).
    population : str, optional
        Class or mixture to draw from.
    format : {"csv", "fits"}
        Light-curve file format.
    overwrite : bool
        See ``out``.
    progress : callable, optional
        Wraps the iterable of stars (e.g. ``tqdm``).

    Returns
    -------
    SimulationRun

    Raises
    ------
    ConfigError
        Bad configuration, population name or format (listing the choices).
    InputError
        Output folder problems.
    """
    if format not in OUTPUT_FORMATS:
        raise ConfigError(f"format {format!r} is not allowed; choose one of "
                          f"{', '.join(OUTPUT_FORMATS)}")
    cfg = load_population_config(config)
    members = draw_population(cfg, n, seed=seed, population=population)
    out = Path(out)
    _prepare_folder(out, overwrite)
    which = population or cfg["population"]["default"]
    meta = {"generator": f"rotinfer {__version__} (rotinfer.simulate)", "seed": int(seed),
            "population": which, "config_hash": config_hash(cfg), "n_stars": int(n)}

    truth_rows, flare_rows, param_rows, files = [], [], [], []
    counts: dict[str, int] = {}
    iterator = enumerate(members)
    if progress is not None:
        iterator = progress(iterator)
    suffix = ".csv" if format == "csv" else ".fits"
    for i, (params, pattern, name) in iterator:
        star = simulate_star(params, pattern, seed=star_seed(seed, i), name=name)
        path = out / f"{name}{suffix}"
        write_light_curve(star.lc, path, format=format, overwrite=overwrite)
        files.append(path)
        truth_rows.append(star.truth.to_row())
        flare_rows.extend(_flare_rows(star))
        param_rows.append({"name": name, **dataclasses.asdict(params)})
        counts[params.category] = counts.get(params.category, 0) + 1

    truth_cols = list(truth_rows[0]) if truth_rows else ["name"]
    truth_units = {**TRUTH_UNITS}
    truth = _table(truth_rows, truth_units, _TRUTH_DESCRIPTIONS,
                   {**meta, "description": "truth of each simulated star"}, truth_cols)
    flare_cols = ["name", "t_peak", "t_peak_abs", "amplitude_ppt", "fwhm"]
    flares = _table(flare_rows, {"t_peak": "d", "t_peak_abs": "d", "amplitude_ppt": "ppt",
                                 "fwhm": "min"},
                    {"t_peak": "peak time, days after the star's time_reference",
                     "t_peak_abs": "peak time, BJD-like days",
                     "amplitude_ppt": "peak excess over the quiescent flux",
                     "fwhm": "full width at half maximum"},
                    {**meta, "description": "observed flares"}, flare_cols)
    param_cols = ["name"] + [f.name for f in dataclasses.fields(StarParameters)]
    params_table = _table(param_rows, _PARAM_UNITS, {}, {**meta, "description":
                          "StarParameters of each star (see rotinfer.simulate.StarParameters)"},
                          param_cols)
    paths = (out / "truth.ecsv", out / "flares.ecsv", out / "parameters.ecsv")
    for table, path in zip((truth, flares, params_table), paths, strict=True):
        if path.exists() and not overwrite:
            raise InputError(str(path), "already exists; refusing to overwrite")
        _write_table(table, path)
    return SimulationRun(out, tuple(files), *paths, n_stars=int(n), counts=counts)


def _flare_rows(star: SimulatedStar) -> list[dict]:
    t = star.truth
    return [
        {"name": t.name, "t_peak": tp, "t_peak_abs": tp + t.time_reference,
         "amplitude_ppt": a, "fwhm": w}
        for tp, a, w in zip(t.flare_times, t.flare_amplitudes, t.flare_fwhm, strict=True)
    ]
