"""Astropy tables (ECSV, VOTable, HDF5, ... and in-memory Table / TimeSeries)."""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..lightcurve import LightCurve
from ._columns import RawTable, build_light_curve

__all__ = ["from_table", "raw_from_table", "read_astropy_table"]

_META_KEYS = ("identifier", "time_reference", "time_system", "flux_unit")


def raw_from_table(table, source: str) -> RawTable:
    """Columns of an astropy ``Table``, ``QTable`` or ``TimeSeries`` as a :class:`RawTable`.

    ``Time`` columns become days after the whole Julian day on or before their first value
    (kept exactly with the two-part Julian date); ``Quantity`` columns keep their unit.
    """
    from astropy.table import Table
    from astropy.time import Time
    from astropy.units import Quantity

    if not isinstance(table, Table):
        raise InputError(source, f"expected an astropy Table or TimeSeries, got "
                                 f"{type(table).__name__}")
    columns: dict = {}
    units: dict = {}
    offsets: dict = {}
    systems: dict = {}
    for name in table.colnames:
        col = table[name]
        if isinstance(col, Time):
            jd1 = np.asarray(col.jd1, dtype=np.float64).ravel()
            jd2 = np.asarray(col.jd2, dtype=np.float64).ravel()
            mask = np.asarray(col.mask, dtype=bool).ravel() if col.masked else None
            finite = np.isfinite(jd1 + jd2)
            if mask is not None:
                finite &= ~mask
            ref = math.floor(float(np.min((jd1 + jd2)[finite]))) if finite.any() else 0.0
            values = (jd1 - ref) + jd2
            if mask is not None:
                values[mask] = np.nan
            columns[name] = values
            offsets[name] = float(ref)
            systems[name] = f"JD_{col.scale.upper()}"
            units[name] = "d"
            continue
        if isinstance(col, Quantity):
            columns[name] = np.asarray(col.value)
            units[name] = col.unit.to_string() if col.unit is not None else ""
            continue
        unit = getattr(col, "unit", None)
        if unit is not None:
            units[name] = unit.to_string()
        mask = getattr(col, "mask", None)
        if mask is not None and np.asarray(mask, dtype=bool).any():
            columns[name] = np.ma.MaskedArray(np.asarray(col.data),
                                              mask=np.asarray(mask, dtype=bool))
        else:
            columns[name] = np.asarray(col)
    keywords: dict = {}
    meta = {str(k).lower(): v for k, v in (table.meta or {}).items()}
    for key in _META_KEYS:
        if key in meta and meta[key] not in (None, ""):
            keywords[key] = meta[key]
    if "time_reference" in keywords:
        try:
            keywords["time_reference"] = float(keywords["time_reference"])
        except (TypeError, ValueError):
            raise InputError(source, "time_reference in the table metadata is not a number"
                             ) from None
        keywords["time_offset"] = 0.0  # our tables hold absolute times beside the reference
    if "identifier" not in keywords:
        for key in ("object", "ticid", "keplerid"):
            if meta.get(key) not in (None, ""):
                keywords["identifier"] = str(meta[key])
                break
    return RawTable(source=source, columns=columns, units=units, keywords=keywords,
                    offsets=offsets, systems=systems)


def from_table(table, *, source: str = "<table>", **options) -> LightCurve:
    """Make a light curve from an astropy ``Table``, ``QTable`` or ``TimeSeries``.

    Parameters
    ----------
    table : astropy.table.Table or astropy.timeseries.TimeSeries
        Columns are matched as by :func:`rotinfer.io.read_light_curve`; a ``TimeSeries``'s
        ``time`` column (an ``astropy.time.Time``) gives times in days after the whole
        Julian day on or before its first value, with the time scale as the time system.
    source : str, optional
        Name used in messages.
    **options
        ``time_column``, ``flux_column``, ``flux_err_column``, ``quality_column``,
        ``quality_bitmask``, ``magnitudes``, ``identifier`` as for ``read_light_curve``.

    Returns
    -------
    LightCurve

    Raises
    ------
    InputError
        For missing columns, non-numeric cells, infinite values or uncertainties <= 0.
    """
    return build_light_curve(raw_from_table(table, source), **options)


def read_astropy_table(path: Path, source: str, *, format: str | None = None) -> RawTable:
    """Read any table astropy can read (``astropy.table.Table.read``).

    Raises
    ------
    InputError
        When astropy cannot read the file as a table.
    """
    from astropy.table import Table

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # unit-parsing chatter; values are checked later
        try:
            table = Table.read(path, format=format)
        except (OSError, ValueError, TypeError, KeyError, IndexError, EOFError) as exc:
            text = " ".join(str(exc).split())[:120]
            what = f"{format} table" if format else "table"
            raise InputError(source, f"cannot read as {what} ({text})") from None
        except Exception as exc:  # astropy's format readers raise their own classes
            text = " ".join(str(exc).split())[:120]
            raise InputError(source, f"cannot read as a table ({type(exc).__name__}: {text})"
                             ) from None
    return raw_from_table(table, source)
