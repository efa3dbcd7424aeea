"""Populations of simulated stars: parameters drawn from distributions in TOML.

A population file has four kinds of table (``configs/population.toml`` is the
built-in one, documented line by line):

``[population]``
    ``default`` (the class or mixture drawn when none is named) and
    ``name_prefix`` (star names are ``<prefix>-00001``, ... — invented names).
``[patterns.NAME]``
    An observing pattern: ``kind = "space"`` or ``"ground"`` plus any keyword of
    :meth:`ObservingPattern.space` / :meth:`ObservingPattern.ground`.
``[classes.NAME]``
    A class of stars: any :class:`StarParameters` field, plus ``pattern`` (a
    pattern name, or a choice of them), and the derived keys
    ``spot_lifetime_rotations`` (lifetime in equatorial rotations; overrides
    ``spot_lifetime``), ``spots_at_once`` (mean number of spots alive at once;
    sets ``emergence_rate = spots_at_once / spot_lifetime``) and
    ``period_baseline_limit`` (periods are redrawn until shorter than this
    fraction of the pattern's time span).
``[mixtures.NAME]``
    Class weights, e.g. ``easy = 0.3``.

Every value is either fixed (a number, string or boolean) or a distribution
given as an inline table: ``{dist = "uniform", min, max}``, ``{dist =
"loguniform", min, max}``, ``{dist = "normal", mean, sd}`` (optionally
truncated with ``min``/``max``), ``{dist = "isotropic", min, max}`` (an
inclination in degrees, uniform in ``cos i``) or ``{dist = "choice", values,
weights}``.

Each star's draws use their own random stream (from the population seed and
the star's index), so the first stars of a population of 10 are the same as
those of a population of 1,000.
"""

from __future__ import annotations

import dataclasses
import inspect
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

from ..config import read_toml
from ..errors import ConfigError
from .observing import ObservingPattern
from .params import StarParameters

__all__ = [
    "DEFAULT_POPULATION_TOML",
    "DISTRIBUTIONS",
    "PopulationMember",
    "draw_population",
    "load_population_config",
    "population_names",
    "star_seed",
]

DISTRIBUTIONS = ("uniform", "loguniform", "normal", "isotropic", "choice")
_DERIVED = ("pattern", "spot_lifetime_rotations", "spots_at_once", "period_baseline_limit")
_DIST_KEYS = {
    "uniform": {"min", "max"},
    "loguniform": {"min", "max"},
    "normal": {"mean", "sd", "min", "max"},
    "isotropic": {"min", "max"},
    "choice": {"values", "weights"},
}

DEFAULT_POPULATION_TOML = """\
# Populations of simulated stars for `rotinfer simulate` (rotinfer.simulate.population).
# The stars belong to an invented scenario, the "Kestrel survey": names are made up.
# Values are fixed numbers or distributions: {dist = "uniform" | "loguniform" | "normal" |
# "isotropic" | "choice", ...}. Units: days, degrees, ppt, minutes, hemisphere fractions.

[population]
default = "mixed"          # class or mixture drawn when --population is not given
name_prefix = "kestrel"    # star names: kestrel-00001, kestrel-00002, ...

[mixtures.mixed]           # the default blend (weights are normalised)
easy = 0.3
moderate = 0.3
hard = 0.25
null = 0.15

# --- observing patterns -------------------------------------------------------------------
[patterns.sector]          # one 27.4-d sector at 2-min cadence, two orbits, 1-d downlink gap
kind = "space"
n_sectors = 1
sector_days = 27.4
cadence_minutes = 2.0
orbit_days = 13.7
orbit_gap_days = 1.0

[patterns.year]            # a year at 30-min cadence in four quarters, monthly downlinks
kind = "space"
n_sectors = 4
sector_days = 91.3
cadence_minutes = 30.0
orbit_days = 30.4
orbit_gap_days = 1.0

[patterns.ground]          # two 240-night seasons from the ground at 10-min cadence
kind = "ground"
n_seasons = 2
season_days = 240.0
cadence_minutes = 10.0
night_hours = 10.0
visibility_hours = 8.0
weather_loss = 0.3
weather_persistence = 0.5

# --- classes of stars ----------------------------------------------------------------------
[classes.easy]             # long-lived spots, high signal, space photometry
pattern = {dist = "choice", values = ["year", "sector"], weights = [0.7, 0.3]}
period = {dist = "loguniform", min = 0.8, max = 20.0}
period_baseline_limit = 0.3
shear = {dist = "uniform", min = 0.0, max = 0.05}
inclination = {dist = "isotropic", min = 40.0, max = 90.0}
spot_lifetime_rotations = {dist = "loguniform", min = 10.0, max = 40.0}
spots_at_once = {dist = "uniform", min = 3.0, max = 8.0}
spot_area_median = {dist = "loguniform", min = 1e-3, max = 4e-3}
spot_area_sigma = 0.5
contrast = {dist = "uniform", min = 0.5, max = 0.8}
latitude_min = 0.0
latitude_max = 50.0
white_noise = {dist = "loguniform", min = 0.1, max = 0.8}
granulation = {dist = "loguniform", min = 0.03, max = 0.2}
granulation_timescale = {dist = "loguniform", min = 0.005, max = 0.05}
drift = 0.2
flare_rate = 0.0

[classes.moderate]         # spots live a few rotations, differential rotation, space photometry
pattern = {dist = "choice", values = ["year", "sector"], weights = [0.7, 0.3]}
period = {dist = "loguniform", min = 1.0, max = 30.0}
period_baseline_limit = 0.3
shear = {dist = "uniform", min = 0.05, max = 0.3}
inclination = {dist = "isotropic", min = 20.0, max = 90.0}
spot_lifetime_rotations = {dist = "loguniform", min = 2.0, max = 6.0}
spots_at_once = {dist = "uniform", min = 2.0, max = 6.0}
spot_area_median = {dist = "loguniform", min = 5e-4, max = 2e-3}
spot_area_sigma = 0.7
contrast = {dist = "uniform", min = 0.4, max = 0.8}
latitude_min = 0.0
latitude_max = 60.0
cycle_period = {dist = "loguniform", min = 1500.0, max = 5000.0}
cycle_phase = {dist = "uniform", min = 0.1, max = 0.6}
white_noise = {dist = "loguniform", min = 0.3, max = 2.0}
granulation = {dist = "loguniform", min = 0.05, max = 0.3}
granulation_timescale = {dist = "loguniform", min = 0.005, max = 0.05}
drift = 0.5
flare_rate = {dist = "loguniform", min = 0.01, max = 0.2}

[classes.hard]             # short-lived spots, low signal, flares, ground-based sampling
pattern = "ground"
period = {dist = "loguniform", min = 0.5, max = 20.0}
period_baseline_limit = 0.3
shear = {dist = "uniform", min = 0.0, max = 0.3}
inclination = {dist = "isotropic", min = 0.0, max = 90.0}
spot_lifetime_rotations = {dist = "loguniform", min = 0.7, max = 2.5}
spots_at_once = {dist = "uniform", min = 1.0, max = 5.0}
spot_area_median = {dist = "loguniform", min = 2e-4, max = 1e-3}
spot_area_sigma = 0.8
contrast = {dist = "uniform", min = 0.3, max = 0.7}
latitude_min = 0.0
latitude_max = 60.0
cycle_period = {dist = "loguniform", min = 1000.0, max = 4000.0}
cycle_phase = {dist = "uniform", min = 0.1, max = 0.7}
cycle_quiet_fraction = 0.1
white_noise = {dist = "loguniform", min = 1.0, max = 4.0}
granulation = {dist = "loguniform", min = 0.1, max = 0.5}
granulation_timescale = {dist = "loguniform", min = 0.005, max = 0.05}
drift = 1.0
flare_rate = {dist = "loguniform", min = 0.1, max = 2.0}
flare_index = {dist = "uniform", min = 1.8, max = 2.2}
flare_amplitude_min = 2.0
flare_amplitude_max = 200.0

[classes.null]             # no spots at all: noise, drifts and flares only
pattern = {dist = "choice", values = ["year", "sector", "ground"], weights = [0.4, 0.3, 0.3]}
spotted = false
period = {dist = "loguniform", min = 0.5, max = 30.0}
white_noise = {dist = "loguniform", min = 0.1, max = 4.0}
granulation = {dist = "loguniform", min = 0.03, max = 0.5}
granulation_timescale = {dist = "loguniform", min = 0.005, max = 0.05}
drift = 0.5
flare_rate = {dist = "loguniform", min = 0.01, max = 1.0}

[classes.sunlike]          # the Sun near maximum as a star: see StarParameters.sun_like
pattern = "year"
period = 24.47
shear = 0.2
inclination = 90.0
spot_lifetime = 10.0
lifetime_spread = 1.0
growth_fraction = 0.1
emergence_rate = 1.5
spot_area_median = 3e-4
spot_area_sigma = 1.0
spot_area_max = 5e-3
contrast = 0.3
latitude_min = 5.0
latitude_max = 35.0
cycle_period = 4017.75
cycle_phase = 0.45
cycle_quiet_fraction = 0.1
white_noise = 0.02
granulation = 0.05
granulation_timescale = 0.01
drift = 0.0
flare_rate = 0.0
"""


class PopulationMember(NamedTuple):
    """One star of a population: unpacks as ``params, pattern, name``."""

    params: StarParameters
    pattern: ObservingPattern
    name: str


def star_seed(seed: int, index: int) -> int:
    """The simulation seed of star ``index`` (0-based) of a population drawn with ``seed``.

    Independent of the stream used to draw the star's parameters; below 2**63 so it
    fits a signed 64-bit table column.
    """
    state = np.random.SeedSequence([int(seed), 1, int(index)]).generate_state(1, np.uint64)[0]
    return int(state) >> 1


def load_population_config(config_or_path: Any = None) -> dict[str, Any]:
    """Read and check a population configuration.

    Parameters
    ----------
    config_or_path : str, Path, mapping or None
        A TOML file, an already-parsed mapping, or None for the built-in
        population (the text of :data:`DEFAULT_POPULATION_TOML`, the same as
        ``configs/population.toml``).

    Returns
    -------
    dict
        The configuration, validated: every pattern builds, every class's keys
        and distributions are known, every mixture names existing classes.

    Raises
    ------
    ConfigError
        One line naming the table and the problem (and the allowed values).
    """
    if config_or_path is None:
        cfg = tomllib.loads(DEFAULT_POPULATION_TOML)
    elif isinstance(config_or_path, str | Path):
        cfg = read_toml(config_or_path)
    elif isinstance(config_or_path, Mapping):
        cfg = dict(config_or_path)
    else:
        raise ConfigError(f"population config must be a path or a mapping, got {config_or_path!r}")
    unknown = sorted(set(cfg) - {"population", "patterns", "classes", "mixtures"})
    if unknown:
        raise ConfigError(
            f"population config: unknown table(s) {', '.join(unknown)}; "
            "allowed: population, patterns, classes, mixtures"
        )
    head = dict(cfg.get("population", {}))
    bad = sorted(set(head) - {"default", "name_prefix"})
    if bad:
        raise ConfigError(f"[population]: unknown option(s) {', '.join(bad)}; "
                          "allowed: default, name_prefix")
    patterns = cfg.get("patterns", {})
    classes = cfg.get("classes", {})
    mixtures = cfg.get("mixtures", {})
    if not classes:
        raise ConfigError("population config: no [classes.NAME] tables")
    for name, table in patterns.items():
        _build_pattern(name, table)
    star_fields = {f.name for f in dataclasses.fields(StarParameters)}
    for name, table in classes.items():
        allowed = (star_fields | set(_DERIVED)) - {"category"}
        bad = sorted(set(table) - allowed)
        if bad:
            raise ConfigError(f"[classes.{name}]: unknown option(s) {', '.join(bad)}; "
                              f"allowed: {', '.join(sorted(allowed))}")
        for key, spec in table.items():
            _check_spec(spec, f"[classes.{name}] {key}")
        for pat in _pattern_names(table.get("pattern")):
            if pat not in patterns:
                raise ConfigError(f"[classes.{name}] pattern: {pat!r} is not a pattern; "
                                  f"defined: {', '.join(sorted(patterns)) or 'none'}")
        if "pattern" not in table:
            raise ConfigError(f"[classes.{name}]: no pattern given")
        limit = table.get("period_baseline_limit")
        if limit is not None and (isinstance(limit, bool) or not isinstance(limit, int | float)
                                  or not limit > 0):
            raise ConfigError(f"[classes.{name}] period_baseline_limit: must be a number > 0 "
                              "(a fraction of the pattern's time span)")
    for name, weights in mixtures.items():
        if name in classes:
            raise ConfigError(f"[mixtures.{name}]: a class has the same name")
        for cls, w in weights.items():
            if cls not in classes:
                raise ConfigError(f"[mixtures.{name}]: {cls!r} is not a class; "
                                  f"defined: {', '.join(sorted(classes))}")
            if isinstance(w, bool) or not isinstance(w, int | float) or w < 0:
                raise ConfigError(f"[mixtures.{name}] {cls}: weight must be a number >= 0")
        if sum(weights.values()) <= 0:
            raise ConfigError(f"[mixtures.{name}]: weights sum to zero")
    default = head.get("default", next(iter(mixtures), next(iter(classes))))
    if default not in classes and default not in mixtures:
        raise ConfigError(f"[population] default: {default!r} is not a class or mixture; "
                          f"choose one of {', '.join(population_names(cfg))}")
    return {"population": {"default": default, "name_prefix": head.get("name_prefix", "star")},
            "patterns": patterns, "classes": classes, "mixtures": mixtures}


def population_names(config: Mapping[str, Any]) -> list[str]:
    """Names of the classes and mixtures a configuration defines."""
    return sorted(config.get("classes", {})) + sorted(config.get("mixtures", {}))


def draw_population(
    config_or_path: Any = None,
    n: int = 100,
    *,
    seed: int,
    population: str | None = None,
) -> list[PopulationMember]:
    """Draw ``n`` stars from a population.

    Parameters
    ----------
    config_or_path : str, Path, mapping or None
        Population configuration (see module docstring); None for the built-in one.
    n : int
        Number of stars.
    seed : int
        Population seed (non-negative). Star ``i`` is drawn from its own stream,
        and should be simulated with ``seed=star_seed(seed, i)``.
    population : str, optional
        Class or mixture to draw from (default: the file's ``[population] default``).

    Returns
    -------
    list of PopulationMember
        ``(params, pattern, name)`` per star; ``params.category`` is the class.

    Raises
    ------
    ConfigError
        For an invalid configuration or an unknown ``population`` (listing the choices).
    """
    cfg = load_population_config(config_or_path)
    if isinstance(n, bool) or not isinstance(n, int) or n < 0:
        raise ConfigError(f"number of stars must be an integer >= 0, got {n!r}")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ConfigError(f"seed must be an integer >= 0, got {seed!r}")
    which = population or cfg["population"]["default"]
    if which in cfg["classes"]:
        names, weights = [which], np.array([1.0])
    elif which in cfg["mixtures"]:
        mix = cfg["mixtures"][which]
        names = list(mix)
        weights = np.array([float(mix[c]) for c in names])
        weights = weights / weights.sum()
    else:
        raise ConfigError(f"population {which!r} is not defined; choose one of "
                          f"{', '.join(population_names(cfg))}")
    cum = np.cumsum(weights)
    prefix = cfg["population"]["name_prefix"]
    width = max(5, len(str(n)))
    out = []
    for i in range(n):
        rng = np.random.default_rng([seed, 0, i])
        cls = names[min(int(np.searchsorted(cum, rng.uniform() * cum[-1], side="right")),
                        len(names) - 1)]
        params, pattern = _draw_star(cls, cfg, rng)
        out.append(PopulationMember(params, pattern, f"{prefix}-{i + 1:0{width}d}"))
    return out


def _draw_star(cls: str, cfg: dict, rng: np.random.Generator):
    table = dict(cfg["classes"][cls])
    pat_name = _draw(table.pop("pattern"), rng, f"[classes.{cls}] pattern")
    pattern = _build_pattern(pat_name, cfg["patterns"][pat_name])
    limit = table.pop("period_baseline_limit", None)
    values: dict[str, Any] = {}
    for key in sorted(table):  # a fixed order keeps draws reproducible
        values[key] = _draw(table[key], rng, f"[classes.{cls}] {key}")
    if limit is not None and "period" in table:
        t0, t1 = pattern.span
        for _ in range(1000):
            if values["period"] <= float(limit) * (t1 - t0):
                break
            values["period"] = _draw(table["period"], rng, f"[classes.{cls}] period")
        else:
            raise ConfigError(f"[classes.{cls}] period_baseline_limit: no period drawn fits "
                              f"pattern {pat_name!r}")
    rotations = values.pop("spot_lifetime_rotations", None)
    period = values.get("period", StarParameters.period)
    if rotations is not None:
        values["spot_lifetime"] = float(rotations) * float(period)
    at_once = values.pop("spots_at_once", None)
    if at_once is not None:
        life = values.get("spot_lifetime", StarParameters.spot_lifetime)
        values["emergence_rate"] = float(at_once) / float(life)
    for f in dataclasses.fields(StarParameters):  # TOML integers into float fields
        if f.name in values and f.type in ("float", float) and isinstance(values[f.name], int) \
                and not isinstance(values[f.name], bool):
            values[f.name] = float(values[f.name])
    try:
        params = StarParameters(category=cls, **values)
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"[classes.{cls}]: {exc}") from None
    return params, pattern


def _build_pattern(name: str, table: Mapping[str, Any]) -> ObservingPattern:
    table = dict(table)
    kind = table.pop("kind", None)
    if kind not in ("space", "ground"):
        raise ConfigError(f"[patterns.{name}] kind: {kind!r} is not allowed; "
                          "choose one of space, ground")
    ctor = ObservingPattern.space if kind == "space" else ObservingPattern.ground
    allowed = [p for p in inspect.signature(ctor).parameters]
    bad = sorted(set(table) - set(allowed))
    if bad:
        raise ConfigError(f"[patterns.{name}]: unknown option(s) {', '.join(bad)} for kind "
                          f"{kind!r}; allowed: kind, {', '.join(allowed)}")
    try:
        return ctor(**table)
    except ConfigError as exc:
        raise ConfigError(f"[patterns.{name}]: {exc}") from None
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"[patterns.{name}]: {exc}") from None


def _pattern_names(spec) -> list[str]:
    if spec is None:
        return []
    if isinstance(spec, Mapping):
        return [str(v) for v in spec.get("values", [])]
    return [str(spec)]


def _check_spec(spec, where: str) -> None:
    if not isinstance(spec, Mapping):
        if not isinstance(spec, int | float | str | bool):
            raise ConfigError(f"{where}: expected a value or a distribution table, got {spec!r}")
        return
    dist = spec.get("dist")
    if dist not in DISTRIBUTIONS:
        raise ConfigError(f"{where}: distribution {dist!r} is not known; "
                          f"choose one of {', '.join(DISTRIBUTIONS)}")
    keys = set(spec) - {"dist"}
    bad = sorted(keys - _DIST_KEYS[dist])
    if bad:
        raise ConfigError(f"{where}: unknown key(s) {', '.join(bad)} for {dist}; "
                          f"allowed: {', '.join(sorted(_DIST_KEYS[dist]))}")
    need = {"choice": {"values"}, "normal": {"mean", "sd"}}.get(dist, {"min", "max"})
    missing = sorted(need - keys)
    if missing:
        raise ConfigError(f"{where}: {dist} needs {', '.join(missing)}")
    if dist == "choice":
        vals, w = spec["values"], spec.get("weights")
        if not isinstance(vals, list) or not vals:
            raise ConfigError(f"{where}: choice values must be a non-empty list")
        if w is not None and (not isinstance(w, list) or len(w) != len(vals)
                              or any(not isinstance(x, int | float) or x < 0 for x in w)
                              or sum(w) <= 0):
            raise ConfigError(f"{where}: choice weights must be {len(vals)} numbers >= 0")
        return
    nums = {k: spec[k] for k in keys}
    if any(isinstance(v, bool) or not isinstance(v, int | float) for v in nums.values()):
        raise ConfigError(f"{where}: {dist} parameters must be numbers")
    lo, hi = spec.get("min"), spec.get("max")
    if lo is not None and hi is not None and not lo <= hi:
        raise ConfigError(f"{where}: need min <= max")
    if dist == "loguniform" and lo <= 0:
        raise ConfigError(f"{where}: loguniform needs min > 0")
    if dist == "isotropic" and not 0 <= lo <= hi <= 90:
        raise ConfigError(f"{where}: isotropic needs 0 <= min <= max <= 90 (degrees)")
    if dist == "normal" and spec["sd"] < 0:
        raise ConfigError(f"{where}: normal needs sd >= 0")


def _draw(spec, rng: np.random.Generator, where: str):
    if not isinstance(spec, Mapping):
        return spec
    dist = spec["dist"]
    if dist == "uniform":
        return float(rng.uniform(spec["min"], spec["max"]))
    if dist == "loguniform":
        return float(np.exp(rng.uniform(np.log(spec["min"]), np.log(spec["max"]))))
    if dist == "isotropic":  # uniform in cos i between the two angles
        c_hi, c_lo = np.cos(np.radians(spec["min"])), np.cos(np.radians(spec["max"]))
        return float(np.degrees(np.arccos(rng.uniform(c_lo, c_hi))))
    if dist == "normal":
        lo, hi = spec.get("min", -np.inf), spec.get("max", np.inf)
        for _ in range(1000):
            x = float(rng.normal(spec["mean"], spec["sd"]))
            if lo <= x <= hi:
                return x
        raise ConfigError(f"{where}: truncated normal draws keep falling outside [min, max]")
    vals = spec["values"]
    w = spec.get("weights")
    p = None if w is None else np.asarray(w, dtype=float) / float(np.sum(w))
    return vals[int(rng.choice(len(vals), p=p))]
