"""The whole chain for one star: prepare, scan, fit, summarise, write its folder.

A star's result folder holds:

``summary.json``
    :meth:`rotinfer.summarise.StarSummary.to_dict` plus provenance: ``seconds``
    (wall time), ``config`` (every option used), ``config_hash``, ``seed``,
    ``version``, ``input`` (files and their SHA-256 checksums), ``prepared``
    (points, cadence, period range, notes), ``samples_file`` and ``derived``
    (None until the derived-physics stage fills it).
``samples.npz``
    The posterior draws (NumPy ``.npz``; load with ``numpy.load``): one array of
    length n per reported quantity — ``period`` (d), ``amplitude_ppt``,
    ``coherence_days``, ``coherence_rotations``, ``secondary_fraction``,
    ``background_amplitude_ppt``, ``background_timescale_days`` (d),
    ``night_offset_ppt`` (only with the night term, ``[model] night_offsets``),
    ``jitter_ppt`` and, only when ``[model] marginalise_mean = false``, ``mean``
    (by default the mean level is integrated out, not sampled) — plus ``weight``
    (sums to 1; draws of a mode carry
    its probability, so use weighted statistics), ``mode`` (index into
    ``summary.json``'s ``diagnostics.modes``), ``theta`` (n x ndim
    unconstrained parameters) and ``names`` (their names).
``chains.h5``
    The full chains as they were run (see :mod:`rotinfer.sample.checkpoint`); a
    rerun with the same data, configuration and seed resumes from it.

``summary.json`` and ``samples.npz`` are written to temporary names and then
renamed, so a folder never holds a half-written file.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .config import config_hash, dataclass_from_mapping, dataclass_to_dict, read_toml
from .errors import ConfigError
from .io import file_checksum
from .lightcurve import LightCurve
from .model import ModelConfig, RotationModel
from .periodogram import PeriodogramConfig, scan
from .prepare import PrepareConfig, prepare
from .sample import SamplerConfig, fit
from .summarise import DetectionConfig, StarSummary, summarise

__all__ = ["RunConfig", "analyse_star", "load_run_config", "star_folder_name"]

#: Tables read by other commands; ``fit`` ignores them rather than rejecting the file.
OTHER_TABLES = ("simulate", "population", "survey", "report", "derived", "demo", "figures")


@dataclass(frozen=True)
class RunConfig:
    """Options of every stage ``rotinfer fit`` runs (one TOML table each)."""

    prepare: PrepareConfig = field(default_factory=PrepareConfig)
    periodogram: PeriodogramConfig = field(default_factory=PeriodogramConfig)
    model: ModelConfig = field(default_factory=ModelConfig)
    sampler: SamplerConfig = field(default_factory=SamplerConfig)
    detection: DetectionConfig = field(default_factory=DetectionConfig)


def load_run_config(path=None, *, overrides: dict | None = None) -> RunConfig:
    """Read a configuration file into a :class:`RunConfig`.

    Parameters
    ----------
    path : str or Path, optional
        TOML file; None gives the defaults (the values ``configs/default.toml``
        documents). Missing tables and keys take their defaults.
    overrides : dict, optional
        Tables merged over the file's (key by key), e.g. ``{"sampler": {"max_steps": 400}}``.

    Raises
    ------
    ConfigError
        Unknown tables or keys (listing the allowed ones), wrong types, bad values.
    """
    data = read_toml(path) if path is not None else {}
    for table, values in (overrides or {}).items():
        data.setdefault(table, {})
        data[table] = {**data[table], **values}
    known = [f.name for f in dataclasses.fields(RunConfig)]
    unknown = sorted(set(data) - set(known) - set(OTHER_TABLES))
    if unknown:
        raise ConfigError(
            f"{path or 'configuration'}: unknown table(s) {', '.join(unknown)}; "
            f"allowed: {', '.join(known + list(OTHER_TABLES))}"
        )
    for table in known:
        if table in data and not isinstance(data[table], dict):
            raise ConfigError(f"{path or 'configuration'}: [{table}] must be a table")
    return RunConfig(
        prepare=dataclass_from_mapping(PrepareConfig, data.get("prepare"), section="prepare"),
        periodogram=dataclass_from_mapping(
            PeriodogramConfig, data.get("periodogram"), section="periodogram"
        ),
        model=dataclass_from_mapping(ModelConfig, data.get("model"), section="model"),
        sampler=dataclass_from_mapping(SamplerConfig, data.get("sampler"), section="sampler"),
        detection=dataclass_from_mapping(
            DetectionConfig, data.get("detection"), section="detection"
        ),
    )


def star_folder_name(lc: LightCurve) -> str:
    """Name of a star's result folder: the stem of its (first) input file, else its identifier."""
    src = lc.meta.sources[0] if lc.meta.sources else "<array>"
    if src and not src.startswith("<"):
        name = Path(src).name
        for suffix in (".gz", ".fits", ".fit", ".csv", ".ecsv", ".txt", ".dat", ".tsv"):
            if name.lower().endswith(suffix):
                name = name[: -len(suffix)]
        stem = name
    else:
        stem = lc.meta.identifier
    safe = "".join(c if c.isalnum() or c in "-_.+" else "_" for c in stem).strip(".")
    return safe or "star"


def _input_record(lc: LightCurve) -> dict:
    files = [s for s in lc.meta.sources if s and not s.startswith("<")]
    return {
        "files": list(lc.meta.sources),
        "checksums": {s: file_checksum(s) for s in files if Path(s).is_file()},
        "identifier": lc.meta.identifier,
        "time_reference": lc.meta.time_reference,
        "time_system": lc.meta.time_system,
        "has_flux_err": lc.meta.has_flux_err,
    }


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return _jsonable(obj.item())
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def _write_atomic(path: Path, writer) -> None:
    fd, tmp = tempfile.mkstemp(prefix=path.name + ".", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        writer(tmp)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def write_samples(path: Path, posterior) -> None:
    """Write the posterior draws as documented in this module (``samples.npz``)."""
    phys = posterior.physical()

    def writer(tmp):
        with open(tmp, "wb") as fh:
            np.savez_compressed(
                fh, **phys, weight=posterior.weights, mode=posterior.mode_of_sample,
                theta=posterior.samples, names=np.array(posterior.names),
            )

    _write_atomic(path, writer)


# Stream of a star's seed reserved for the derived-physics Monte Carlo (so adding stellar
# parameters never changes the chains).
DERIVED_STREAM = 0x64657269


def derived_block(period, weight, stellar, *, seed: int, relations=None) -> dict:
    """The ``derived`` block of ``summary.json`` from weighted period draws.

    Parameters
    ----------
    period, weight : ndarray, shape (n,)
        Posterior period draws in days and their weights (each sampled mode carries its
        probability), as written to ``samples.npz``.
    stellar : rotinfer.derived.StellarParameters
    seed : int
        The star's seed; the Monte Carlo uses its own stream of it.
    relations : sequence of str, optional
        Gyrochronology relations (default: all of them).

    Returns
    -------
    dict
        :meth:`rotinfer.derived.DerivedResult.to_dict` plus ``lines`` (printable, with units).
    """
    from .derived import DEFAULT_RELATIONS, derive

    period = np.asarray(period, dtype=float)
    weight = np.asarray(weight, dtype=float)
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), DERIVED_STREAM]))
    # Resample with the weights so the whole (multi-modal) posterior is propagated.
    draws = rng.choice(period, size=period.size, p=weight / weight.sum())
    result = derive(draws, stellar, rng=rng, relations=tuple(relations or DEFAULT_RELATIONS))
    block = result.to_dict()
    block["lines"] = result.lines()
    return block


def rotation_model(prepared, scan_result, config) -> RotationModel:
    """The rotation model of a prepared light curve, as :func:`analyse_star` fits it.

    Its period prior spans the periodogram scan's range unless ``config.period_range``
    (a :class:`~rotinfer.model.ModelConfig`) sets one: the scan raises the shortest
    period to the cadence limit, and the two are kept consistent.
    """
    model = RotationModel.from_prepared(prepared, config=config)
    if config.period_range is None:
        model = dataclasses.replace(
            model, period_range=(scan_result.min_period, scan_result.max_period)
        )
    return model


def analyse_star(
    lc: LightCurve,
    *,
    config: RunConfig | None = None,
    seed: int = 0,
    out_dir,
    progress: bool = False,
    stellar=None,
    relations=None,
    figures: bool = True,
) -> StarSummary:
    """Prepare, scan, fit and summarise one star, and write its result folder.

    Parameters
    ----------
    lc : LightCurve
        The star as read (:func:`rotinfer.io.read_stars`).
    config : RunConfig, optional
        Defaults when None.
    seed : int
        The star's seed: the same seed, data and configuration give an identical
        summary (apart from ``seconds``).
    out_dir : str or Path
        The star's own result folder (created); see :func:`star_folder_name`
        for the conventional name. An existing ``chains.h5`` from the same fit
        is resumed.
    progress : bool
        Show a progress bar of sampler steps (stderr).
    stellar : rotinfer.derived.StellarParameters, optional
        Radius, v sin i, colour, mass, Teff with errors; when given, the ``derived``
        block (equatorial velocity, inclination, gyrochronological ages, Rossby numbers)
        is computed from the whole period posterior (:func:`derived_block`).
    relations : sequence of str, optional
        Gyrochronology relations for the derived block (default: all).
    figures : bool
        Also draw the star's figures (summary, scan, corner, traces, thumbnail; see
        :func:`rotinfer.figures.write_star_figures`) into ``out_dir``.

    Returns
    -------
    StarSummary
        With provenance in ``extra``; also written as ``out_dir/summary.json``.

    Warns
    -----
    ConvergenceWarning
        When the sampler stops at its cap (the summary then says ``converged: false``).
    """
    config = config or RunConfig()
    start = time.perf_counter()
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)

    prepared = prepare(lc, config.prepare)
    scan_result = scan(prepared, config=config.periodogram)
    model = rotation_model(prepared, scan_result, config.model)

    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(desc=lc.meta.identifier, unit="step", leave=False)
    try:
        posterior = fit(
            model, scan_result.candidates, config=config.sampler, seed=seed,
            checkpoint_path=out_dir / "chains.h5",
            progress=(lambda n: bar.update(n)) if bar is not None else None,
        )
    finally:
        if bar is not None:
            bar.close()

    summary = summarise(
        posterior, identifier=lc.meta.identifier, config=config.detection,
        scan=scan_result.to_dict(), sampler=config.sampler,
    )
    write_samples(out_dir / "samples.npz", posterior)
    extra = {
        "seconds": time.perf_counter() - start,
        "seed": int(seed),
        "version": __version__,
        "config": dataclass_to_dict(config),
        "config_hash": config_hash(config),
        "input": _input_record(lc),
        "prepared": {
            "n_points": len(prepared.lc),
            "n_input": prepared.n_input,
            "cadence_days": prepared.cadence,
            "bin_width_days": prepared.bin_width,
            "period_range_days": list(model.period_range),
            "notes": list(prepared.notes),
        },
        "scan_notes": list(scan_result.notes),
        "samples_file": "samples.npz",
        "derived": None,
    }
    if stellar is not None:
        physical = posterior.physical()
        extra["derived"] = derived_block(physical["period"], posterior.weights, stellar,
                                         seed=seed, relations=relations)
    summary = dataclasses.replace(summary, extra=extra)
    text = json.dumps(_jsonable(summary.to_dict()), indent=2, allow_nan=False)

    def writer(tmp):
        Path(tmp).write_text(text + "\n")

    _write_atomic(out_dir / "summary.json", writer)
    if figures:
        from .figures import write_star_figures

        write_star_figures(out_dir, prepared, scan_result, posterior)
    return summary
