"""The survey catalogue: one row per star, rebuilt from the star folders.

``catalog.ecsv`` carries every column's unit and description in its header and the
run's provenance in its metadata (rotinfer version, configuration hash, master
seed); ``catalog.csv`` holds the same rows for tools that do not read ECSV. Both are
written to a temporary name and renamed into place, and both are rebuilt from the
star folders' markers and ``summary.json`` files, so they always agree with what is
on disk: a star is listed exactly when its folder is complete for this run's
configuration and seed.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from .store import StarRecord, SurveyStore, atomic_write_text

__all__ = ["CATALOG_COLUMNS", "CatalogColumn", "build_catalog", "write_catalog"]

SUMMARY = "summary.json"


@dataclass(frozen=True)
class CatalogColumn:
    """One catalogue column: where its value comes from, its unit and description.

    ``paths`` are dotted keys tried in order in the star's ``summary.json``
    (``period.interval_68.0`` is the first element of that list); ``record`` names a
    :class:`StarRecord` field instead.
    """

    name: str
    kind: str  # "str", "float", "bool", "int"
    unit: str | None
    description: str
    paths: tuple[str, ...] = ()
    record: str | None = None


def _c(name, kind, unit, description, *paths, record=None) -> CatalogColumn:
    return CatalogColumn(name, kind, unit, description, tuple(paths), record)


#: The fixed columns, in catalogue order (derived quantities follow, when present).
CATALOG_COLUMNS: tuple[CatalogColumn, ...] = (
    _c("identifier", "str", None, "Star identifier as given in the inputs", record="identifier"),
    _c("status", "str", None, "ok, or failed (see failure and error)", record="status"),
    _c("failure", "str", None, "Why the star failed: error, timeout or crashed (worker died)",
       record="failure"),
    _c("error", "str", None, "Error type and message of a failed star", record="error"),
    _c("period", "float", "d", "Rotation period, posterior median", "period.median"),
    _c("period_lo68", "float", "d", "Rotation period, 68% credible interval lower bound",
       "period.interval_68.0"),
    _c("period_hi68", "float", "d", "Rotation period, 68% credible interval upper bound",
       "period.interval_68.1"),
    _c("period_lo95", "float", "d", "Rotation period, 95% credible interval lower bound",
       "period.interval_95.0"),
    _c("period_hi95", "float", "d", "Rotation period, 95% credible interval upper bound",
       "period.interval_95.1"),
    _c("amplitude", "float", "ppt", "Rotational variability amplitude, posterior median",
       "amplitude_ppt.median"),
    _c("amplitude_lo68", "float", "ppt", "Amplitude, 68% credible interval lower bound",
       "amplitude_ppt.interval_68.0"),
    _c("amplitude_hi68", "float", "ppt", "Amplitude, 68% credible interval upper bound",
       "amplitude_ppt.interval_68.1"),
    _c("coherence_time", "float", "d", "Spot coherence time, posterior median",
       "coherence_time_days.median"),
    _c("coherence_lo68", "float", "d", "Coherence time, 68% credible interval lower bound",
       "coherence_time_days.interval_68.0"),
    _c("coherence_hi68", "float", "d", "Coherence time, 68% credible interval upper bound",
       "coherence_time_days.interval_68.1"),
    _c("coherence_rotations", "float", None,
       "Spot coherence time in rotation periods, posterior median",
       "coherence_time_rotations.median"),
    _c("detected", "bool", None, "Whether a rotation signal was detected", "detected"),
    _c("detection_delta_bic", "float", None,
       "Detection: BIC of the model without rotation minus BIC with it", "detection.delta_bic"),
    _c("harmonic_warning", "bool", None,
       "Whether half or twice the period is a credible alternative (posterior probability "
       "there, or a baseline period there)", "harmonic.flag"),
    _c("harmonic_baseline", "bool", None,
       "Whether a baseline period ([detection] harmonic_baselines; the ACF by default) lies "
       "near half or twice the period", "harmonic.flag_baselines"),
    _c("probability_half", "float", None, "Posterior probability of a period near P/2",
       "harmonic.probability_half"),
    _c("probability_double", "float", None, "Posterior probability of a period near 2P",
       "harmonic.probability_double"),
    _c("sampling_warning", "bool", None,
       "Whether the period may be a periodicity of the sampling (e.g. the day)",
       "sampling.flag"),
    _c("probability_sampling", "float", None,
       "Posterior probability of a period at a periodicity of the sampling",
       "sampling.probability"),
    _c("converged", "bool", None, "Whether the sampler met the convergence rule", "converged"),
    _c("period_mcse", "float", "d",
       "Largest Monte Carlo standard error of the period median and interval ends",
       "period.mcse.largest"),
    _c("period_mcse_relative", "float", None,
       "Largest Monte Carlo error of the period's numbers over its own scale (median: half "
       "the 68% interval; an end: its distance from the median)", "period.mcse.relative"),
    _c("period_ls", "float", "d", "Period of the highest Lomb-Scargle peak (baseline)",
       "baselines.lomb_scargle.period"),
    _c("period_acf", "float", "d", "Period from the autocorrelation function (baseline)",
       "baselines.acf.period"),
    _c("seed", "int", None, "The star's random seed (from --seed and the identifier)",
       record="seed"),
    _c("wall_time", "float", "s", "Wall time spent on the star in its worker",
       record="seconds"),
    _c("cpu_time", "float", "s", "CPU time of the worker thread that ran the star",
       record="cpu_seconds"),
    _c("folder", "str", None, "Result folder, relative to the survey folder", record="name"),
)


def _lookup(data, path: str):
    value = data
    for key in path.split("."):
        if isinstance(value, dict) and key in value:
            value = value[key]
        elif isinstance(value, list | tuple) and key.isdigit() and int(key) < len(value):
            value = value[int(key)]
        else:
            return None
    return value


def _derived_block(summary: dict | None) -> dict:
    """``{name: {"median": ..., "interval_68": [...], "unit": ..., "label": ...}}``."""
    block = (summary or {}).get("derived") or {}
    items = block.get("quantities") if isinstance(block, dict) else None
    return items if isinstance(items, dict) else {}


def _derived_columns(summaries: Sequence[dict | None]) -> list[tuple[str, str | None, str]]:
    """``(name, unit, label)`` of the derived quantities present in any summary, sorted."""
    found: dict[str, tuple[str | None, str]] = {}
    for s in summaries:
        for key, q in _derived_block(s).items():
            if isinstance(q, dict) and "median" in q:
                found.setdefault(str(key), (q.get("unit") or None, str(q.get("label") or key)))
    return [(k, *found[k]) for k in sorted(found)]


def _derived_value(summary: dict | None, key: str, path: str):
    return _lookup(_derived_block(summary).get(key) or {}, path)


def _unit(text: str | None) -> tuple[object, str]:
    """An astropy unit for ``text`` and a note for the description when it has none.

    Parts per thousand have no astropy unit name; they are written as the scaled
    dimensionless unit ``0.001``, which any ECSV reader parses.
    """
    import astropy.units as u

    if not text:
        return None, ""
    if text == "ppt":
        return u.Unit(0.001), " (parts per thousand of the mean flux)"
    try:
        return u.Unit(text, parse_strict="raise"), ""
    except ValueError:
        return None, f" (unit: {text})"


def build_catalog(records: Sequence[StarRecord], store: SurveyStore, *, meta: dict):
    """The catalogue table of finished stars (rows sorted by identifier).

    Parameters
    ----------
    records : sequence of StarRecord
        Markers of the stars to list (one per star).
    store : SurveyStore
        Where the star folders are (``summary.json`` is read from each ``ok`` star).
    meta : dict
        Provenance added to the table metadata (configuration hash, master seed...).

    Returns
    -------
    astropy.table.Table
    """
    from astropy.table import MaskedColumn, Table

    records = sorted(records, key=lambda r: r.identifier)
    summaries = [_read_summary(store, r) for r in records]
    derived = _derived_columns(summaries)
    table = Table()
    for col in CATALOG_COLUMNS:
        values = [
            _value(col, rec, summ) for rec, summ in zip(records, summaries, strict=True)
        ]
        table[col.name] = _column(MaskedColumn, values, col.kind, col.unit, col.description)
    for key, unit, label in derived:
        for suffix, path, what in (
            ("", "median", "posterior median"),
            ("_lo68", "interval_68.0", "68% credible interval lower bound"),
            ("_hi68", "interval_68.1", "68% credible interval upper bound"),
        ):
            values = [_as_float(_derived_value(s, key, path)) for s in summaries]
            table[f"derived_{key}{suffix}"] = _column(
                MaskedColumn, values, "float", unit, f"Derived: {label}, {what}"
            )
    if derived:
        texts = [" | ".join(str(c) for c in ((s or {}).get("derived") or {}).get("cautions", ()))
                 for s in summaries]
        table["derived_cautions"] = _column(
            MaskedColumn, texts, "str", None, "Cautions on the derived quantities, joined by ' | '"
        )
    table.meta.update(
        {
            "rotinfer_version": __version__,
            "created_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
            "n_stars": len(records),
            "n_ok": sum(r.status == "ok" for r in records),
            "n_failed": sum(r.status != "ok" for r in records),
            **meta,
        }
    )
    return table


def _read_summary(store: SurveyStore, record: StarRecord) -> dict | None:
    if record.status != "ok":
        return None
    try:
        return json.loads((store.folder(record.name) / SUMMARY).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _value(col: CatalogColumn, rec: StarRecord, summary: dict | None):
    if col.record is not None:
        value = getattr(rec, col.record)
        return f"stars/{value}" if col.name == "folder" else value
    for path in col.paths:
        value = _lookup(summary or {}, path)
        if value is not None:
            if col.kind == "bool":
                return value if isinstance(value, bool) else None
            return _as_float(value)
    return None


def _as_float(value):
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    return float(value) if math.isfinite(value) else None


def _column(cls, values, kind, unit, description):
    unit, note = _unit(unit)
    description += note
    mask = [v is None for v in values]
    if kind == "str":
        data = np.array(["" if v is None else str(v) for v in values] or [""], dtype=str)
        data = data[: len(values)]
        return cls(data, mask=False, unit=unit, description=description)
    dtype = {"float": np.float64, "bool": bool, "int": np.int64}[kind]
    fill = {"float": np.nan, "bool": False, "int": 0}[kind]
    data = np.array([fill if v is None else v for v in values], dtype=dtype)
    return cls(data, mask=mask, unit=unit, description=description)


def write_catalog(table, out: str | Path) -> tuple[Path, Path]:
    """Write ``catalog.ecsv`` and ``catalog.csv`` in ``out``, each atomically.

    Returns
    -------
    (Path, Path)
        The ECSV and CSV paths.
    """
    import io

    out = Path(out)
    paths = (out / "catalog.ecsv", out / "catalog.csv")
    for path, fmt in zip(paths, ("ascii.ecsv", "ascii.csv"), strict=True):
        buffer = io.StringIO()
        table.write(buffer, format=fmt)
        atomic_write_text(path, buffer.getvalue())
    return paths
