"""From named columns (any reader) to a :class:`LightCurve`: column choice, quality, units.

Every reader turns its file into a :class:`RawTable` (named columns plus what the headers
say) and :func:`build_light_curve` does the rest the same way for all formats.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ConfigError, InputError
from ..lightcurve import LightCurve, LightCurveMeta, MaskRecord

__all__ = [
    "DEFAULT_QUALITY_BITMASK",
    "RawTable",
    "build_light_curve",
    "parse_quality_bitmask",
]

# Column spellings matched case-insensitively, in order of preference.
TIME_NAMES = ("time", "t", "bjd", "bjd_tdb", "btjd", "bkjd", "hjd", "mjd", "jd", "date")
FLUX_NAMES = (
    "pdcsap_flux", "sap_flux", "flux", "f", "rel_flux", "relflux", "flux_rel", "norm_flux",
)
MAG_NAMES = ("mag", "magnitude", "mags", "m")
ERR_NAMES = (
    "flux_err", "flux_error", "fluxerr", "e_flux", "err", "error", "sigma", "dy",
    "uncertainty", "unc",
)
MAG_ERR_NAMES = ("mag_err", "magerr", "mag_error", "e_mag", "emag", "sigma_mag")
QUALITY_NAMES = ("quality", "sap_quality")

# (time system, absolute time of a zero in this column) implied by a time column's name.
# BTJD = BJD_TDB - 2457000 (TESS); BKJD = BJD_TDB - 2454833 (Kepler/K2): the missions'
# public data-product conventions.
TIME_NAME_HINTS = {
    "bjd": ("BJD", 0.0), "bjd_tdb": ("BJD_TDB", 0.0), "btjd": ("BJD_TDB", 2457000.0),
    "bkjd": ("BJD_TDB", 2454833.0), "hjd": ("HJD", 0.0), "mjd": ("MJD", 0.0), "jd": ("JD", 0.0),
}

#: Default quality bitmask: every flag bit of a 32-bit QUALITY column, i.e. any cadence
#: the mission pipeline flagged for any reason is dropped. This is deliberately
#: conservative; ``"none"`` keeps every cadence and an integer chooses the bits.
DEFAULT_QUALITY_BITMASK = 0xFFFFFFFF
QUALITY_CHOICES = ("default", "none")

# Text cells read as missing values (NaN).
MISSING_TOKENS = frozenset({"", "nan", "na", "n/a", "null", "none", "--", "-", "?"})


@dataclass
class RawTable:
    """Columns as a reader found them, before choosing which are time and flux.

    Attributes
    ----------
    source : str
        The file (for messages).
    columns : dict of str to ndarray
        Column name (as in the file) to values: numbers, masked arrays or strings.
    units : dict of str to str
        Column units the file declared.
    keywords : dict
        What the headers or comments say: ``identifier``, ``time_reference`` (absolute
        time of relative zero), ``time_offset`` (absolute time of a zero in the time
        column; 0 when the column holds absolute times), ``time_system``.
    rows : ndarray of int or None
        Line numbers of the rows (text files), for messages.
    offsets : dict of str to float
        Per-column absolute time of a zero (Time columns converted to days).
    systems : dict of str to str
        Per-column time system (Time columns).
    notes : list of str
        Remarks from reading.
    """

    source: str
    columns: dict[str, Any]
    units: dict[str, str] = field(default_factory=dict)
    keywords: dict[str, Any] = field(default_factory=dict)
    rows: np.ndarray | None = None
    offsets: dict[str, float] = field(default_factory=dict)
    systems: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    def where(self, index: int) -> str:
        """Human wording for row ``index`` (0-based): a file line or a data row."""
        if self.rows is not None:
            return f"line {int(self.rows[index])}"
        return f"row {index + 1}"


def parse_quality_bitmask(value: int | str | None) -> int:
    """Turn a quality-bitmask option into an integer.

    Parameters
    ----------
    value : int, str or None
        ``"default"`` (or None) for :data:`DEFAULT_QUALITY_BITMASK`, ``"none"`` for 0 (keep
        every cadence), or a non-negative integer (decimal or ``0x`` hexadecimal text).

    Raises
    ------
    ConfigError
        For anything else, listing the allowed values.
    """
    if value is None:
        return DEFAULT_QUALITY_BITMASK
    if isinstance(value, bool):
        raise ConfigError(f"quality bitmask {value!r} is not allowed; use default, none or a "
                          "non-negative integer")
    if isinstance(value, int | np.integer):
        if value < 0:
            raise ConfigError(f"quality bitmask {value} is negative; use default, none or a "
                              "non-negative integer")
        return int(value)
    text = str(value).strip().lower()
    if text == "default":
        return DEFAULT_QUALITY_BITMASK
    if text == "none":
        return 0
    try:
        number = int(text, 0)
    except ValueError:
        number = -1
    if number < 0:
        raise ConfigError(
            f"quality bitmask {value!r} is not recognised; use default, none or a non-negative "
            "integer (e.g. 175 or 0xAF)"
        )
    return number


def _find(raw: RawTable, names: tuple[str, ...]) -> str | None:
    lower = {name.lower(): name for name in raw.columns}
    for candidate in names:
        if candidate in lower:
            return lower[candidate]
    return None


def _present(raw: RawTable) -> str:
    return ", ".join(raw.columns) if raw.columns else "(none)"


def _explicit(raw: RawTable, wanted: str, role: str) -> str:
    lower = {name.lower(): name for name in raw.columns}
    key = str(wanted).strip().lower()
    if key in lower:
        return lower[key]
    if key.isdigit() and 1 <= int(key) <= len(raw.columns):  # 1-based column number
        return list(raw.columns)[int(key) - 1]
    raise InputError(
        raw.source, f"{role} column {wanted!r} not found; columns present: {_present(raw)}"
    )


def numeric(raw: RawTable, name: str) -> np.ndarray:
    """Column ``name`` as float64 with masked or missing cells as NaN.

    Raises
    ------
    InputError
        If a cell is not a number (naming the column and the row or line).
    """
    values = raw.columns[name]
    mask = np.ma.getmaskarray(values) if np.ma.isMaskedArray(values) else None
    data = np.ma.getdata(values)
    if data.dtype.kind in "biuf":
        out = np.array(data, dtype=np.float64)  # also turns big-endian into native order
    elif data.dtype.kind == "c":
        raise InputError(raw.source, f"column {name!r} holds complex numbers, not real values")
    else:
        text = data.astype(str)
        try:
            out = text.astype(np.float64)
        except ValueError:
            out = np.empty(text.size, dtype=np.float64)
            for i, cell in enumerate(text.tolist()):
                cell = cell.strip()
                if cell.lower() in MISSING_TOKENS:
                    out[i] = math.nan
                    continue
                try:
                    out[i] = float(cell)
                except ValueError:
                    raise InputError(
                        raw.source,
                        f"non-numeric value {cell[:40]!r} in column {name!r} at {raw.where(i)}",
                    ) from None
    if out.ndim != 1:
        raise InputError(raw.source, f"column {name!r} has more than one value per row")
    if mask is not None and mask.any():
        out[mask] = np.nan
    return out


def _check_values(
    raw: RawTable, name: str, values: np.ndarray, keep: np.ndarray, *, positive: bool = False
) -> None:
    """Refuse infinite values (and uncertainties <= 0) among the rows kept."""
    bad = np.isinf(values) & keep
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise InputError(
            raw.source,
            f"{int(bad.sum())} infinite value(s) in column {name!r} (first at {raw.where(first)}); "
            "fix or remove them",
        )
    if positive:
        bad = (values <= 0) & keep  # NaN compares false: missing values are dropped later
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            raise InputError(
                raw.source,
                f"{int(bad.sum())} uncertainty value(s) <= 0 in column {name!r} (first "
                f"{float(values[first])!r} at {raw.where(first)}); uncertainties must be positive",
            )


def _time_scale(unit: str | None) -> float:
    """Days per unit of the time column (1 when no unit or a unit we cannot read)."""
    if not unit or unit.strip().lower() in ("d", "day", "days"):
        return 1.0
    text = unit.strip().lower()
    for prefix in ("bjd", "btjd", "bkjd", "jd", "mjd", "hjd"):  # e.g. "BJD - 2457000, days"
        if text.startswith(prefix):
            return 1.0
    import warnings

    from astropy import units as u

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return float(u.Unit(unit).to(u.day))
        except (ValueError, TypeError, u.UnitsError):
            return 1.0


def _default_identifier(source: str) -> str:
    name = Path(source).name
    for suffix in (".gz",):
        if name.lower().endswith(suffix):
            name = name[: -len(suffix)]
    stem = Path(name).stem
    return stem or "star"


def build_light_curve(
    raw: RawTable, *, time_column: str | None = None, flux_column: str | None = None,
    flux_err_column: str | None = None, quality_column: str | None = None,
    quality_bitmask: int | str | None = "default", magnitudes: bool = False,
    identifier: str | None = None,
) -> LightCurve:
    """Choose the time, flux, uncertainty and quality columns and build the light curve.

    See :func:`rotinfer.io.read_light_curve` for the meaning of the options.

    Raises
    ------
    InputError
        For a missing column (listing those present), non-numeric cells, infinite values,
        uncertainties <= 0, or a file with no rows.
    ConfigError
        For a quality bitmask that is not allowed.
    """
    bitmask = parse_quality_bitmask(quality_bitmask)
    if not raw.columns:
        raise InputError(raw.source, "no columns found")
    notes = list(raw.notes)

    # -- time
    if time_column is not None:
        tname = _explicit(raw, time_column, "time")
    else:
        tname = _find(raw, TIME_NAMES)
        if tname is None:
            raise InputError(
                raw.source,
                f"no time column (looked for {', '.join(TIME_NAMES)}); columns present: "
                f"{_present(raw)}; name it with --time-column",
            )
    # -- flux
    if flux_column is not None:
        fname = _explicit(raw, flux_column, "flux")
    else:
        names = (MAG_NAMES + FLUX_NAMES) if magnitudes else FLUX_NAMES
        fname = _find(raw, names)
        if fname is None:
            mag = _find(raw, MAG_NAMES)
            hint = (f"; column {mag!r} looks like magnitudes: pass --magnitudes"
                    if mag and not magnitudes else "; name it with --flux-column")
            raise InputError(
                raw.source,
                f"no flux column (looked for {', '.join(names)}); columns present: "
                f"{_present(raw)}{hint}",
            )
    unit = raw.units.get(fname, "") or ""
    if not magnitudes and unit.strip().lower() in ("mag", "mags", "magnitude"):
        raise InputError(raw.source, f"column {fname!r} is in magnitudes (unit {unit!r}); "
                                     "pass --magnitudes to convert it to relative flux")
    # -- flux_err
    ename = None
    if flux_err_column is not None:
        if str(flux_err_column).strip().lower() != "none":
            ename = _explicit(raw, flux_err_column, "flux_err")
    else:
        low = fname.lower()
        specific = (f"{low}_err", f"{low}_error", f"e_{low}", f"{low}err")
        generic = (MAG_ERR_NAMES + ERR_NAMES) if magnitudes else ERR_NAMES
        ename = _find(raw, specific + generic)
        if ename is not None and ename.lower() in MAG_ERR_NAMES and not magnitudes:
            ename = None
    if ename is not None and ename in (tname, fname):
        raise InputError(raw.source, f"column {ename!r} cannot be both flux_err and time/flux")
    if tname == fname:
        raise InputError(raw.source, f"column {tname!r} cannot be both time and flux")
    # -- quality
    qname = None
    if quality_column is not None:
        if str(quality_column).strip().lower() != "none":
            qname = _explicit(raw, quality_column, "quality")
    else:
        qname = _find(raw, QUALITY_NAMES)

    n_rows = len(raw.columns[tname])
    if n_rows == 0:
        raise InputError(raw.source, "no data rows")

    time = numeric(raw, tname)
    flux = numeric(raw, fname)
    err = numeric(raw, ename) if ename is not None else None

    # -- quality flags (decided first: flagged rows are dropped, not checked)
    flagged = np.zeros(n_rows, dtype=bool)
    if qname is not None and qname not in (tname, fname, ename):
        qvalues = raw.columns[qname]
        qdata = numeric(raw, qname)
        missing = ~np.isfinite(qdata)
        if np.ma.isMaskedArray(qvalues):
            missing |= np.ma.getmaskarray(qvalues)
        qint = np.where(missing, 0, qdata).astype(np.int64)
        flagged = (qint & bitmask) != 0
        if bitmask:
            flagged |= missing  # a cadence of unknown quality is not trusted
    keep = ~flagged
    _check_values(raw, tname, time, keep)
    _check_values(raw, fname, flux, keep)
    if err is not None:
        _check_values(raw, ename, err, keep, positive=True)

    # -- time reference: the file's record wins; else the column name's convention.
    time *= _time_scale(raw.units.get(tname))
    system, offset = TIME_NAME_HINTS.get(tname.lower(), ("unknown", 0.0))
    offset = raw.offsets.get(tname, raw.keywords.get("time_offset", offset))
    system = raw.systems.get(tname, raw.keywords.get("time_system", system)) or system
    reference = raw.keywords.get("time_reference")
    finite_t = time[np.isfinite(time) & keep]
    if reference is None:
        # No recorded epoch: start near zero, at the whole day on or before the first time.
        reference = offset + (math.floor(float(finite_t.min())) if finite_t.size else 0.0)
    reference = float(reference)
    time = time - (reference - offset)

    # -- magnitudes to relative flux
    flux_unit = unit or "unknown"
    if magnitudes:
        finite_m = flux[np.isfinite(flux) & keep]
        m_ref = float(np.median(finite_m)) if finite_m.size else 0.0
        flux = 10.0 ** (-0.4 * (flux - m_ref))
        if err is not None:
            # First-order propagation: d(flux)/d(mag) = -0.4 ln(10) flux.
            err = 0.4 * math.log(10.0) * flux * err
        flux_unit = "relative"
        notes.append(f"converted magnitudes to relative flux (reference magnitude {m_ref:.4f})")

    # -- segments recorded by our own writer
    segment = None
    sname = _find(raw, ("segment",))
    if sname is not None and sname not in (tname, fname, ename):
        seg = numeric(raw, sname)
        if np.all(np.isfinite(seg)) and np.all(seg == np.round(seg)):
            segment = seg.astype(np.int64)

    # -- drop quality-flagged rows, keeping a record of them
    dropped = MaskRecord()
    if flagged.any():
        dropped = MaskRecord(
            time=time[flagged], flux=flux[flagged],
            reason=np.full(int(flagged.sum()), "quality", dtype="<U12"),
        )
        notes.append(f"{int(flagged.sum())} quality-flagged point(s) dropped "
                     f"(column {qname}, bitmask {bitmask:#x})")
        time, flux = time[keep], flux[keep]
        err = None if err is None else err[keep]
        segment = None if segment is None else segment[keep]

    if identifier is None:
        identifier = raw.keywords.get("identifier") or _default_identifier(raw.source)
    meta = LightCurveMeta(
        identifier=re.sub(r"\s+", " ", str(identifier)).strip() or "star",
        sources=(raw.source,),
        time_reference=reference,
        time_system=str(system),
        flux_column=fname,
        flux_unit=str(flux_unit),
        has_flux_err=err is not None,
        notes=tuple(notes),
        dropped=dropped,
    )
    return LightCurve(time=time, flux=flux, flux_err=err, segment=segment, meta=meta)
