"""FITS binary-table light curves in the space missions' public column conventions.

The layout read here is the one the Kepler, K2 and TESS archives publish: a binary table
(usually extension ``LIGHTCURVE``) with ``TIME`` in days relative to ``BJDREFI + BJDREFF``,
``SAP_FLUX`` / ``PDCSAP_FLUX`` with their ``_ERR`` columns and a ``QUALITY`` (or
``SAP_QUALITY``) bit-flag column; the star's identifier is in the primary header
(``OBJECT``, ``TICID`` or ``KEPLERID``).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from ..errors import InputError
from ._columns import TIME_NAMES, RawTable

__all__ = ["read_fits_table"]


def _identifier(headers) -> str | None:
    for header in headers:
        value = header.get("OBJECT")
        if isinstance(value, str) and value.strip():
            return value.strip()
    for key, prefix in (("TICID", "TIC"), ("KEPLERID", "KIC"), ("EPIC", "EPIC")):
        for header in headers:
            value = header.get(key)
            if value not in (None, ""):
                return f"{prefix} {value}"
    return None


def _time_keywords(headers) -> dict:
    out: dict = {}
    for header in headers:
        if "BJDREFI" in header or "BJDREFF" in header:
            out["time_reference"] = float(header.get("BJDREFI", 0)) + float(
                header.get("BJDREFF", 0.0)
            )
            break
        if "BJDREF" in header:
            out["time_reference"] = float(header["BJDREF"])
            break
        if "MJDREFI" in header or "MJDREF" in header:
            out["time_reference"] = float(header.get("MJDREFI", header.get("MJDREF", 0))) + float(
                header.get("MJDREFF", 0.0)
            )
            out["time_system"] = "MJD"
            break
    if "time_reference" in out:
        out["time_offset"] = out["time_reference"]  # TIME is days after the reference
    for header in headers:
        label = header.get("TSYSTEM")
        if isinstance(label, str) and label.strip():
            out["time_system"] = label.strip()
            return out
    for header in headers:
        scale = str(header.get("TIMESYS", "")).strip().upper()
        ref = str(header.get("TIMEREF", "")).strip().upper()
        if scale:
            if ref == "SOLARSYSTEM" and "MJD" not in out.get("time_system", ""):
                out["time_system"] = f"BJD_{scale}"
            else:
                out["time_system"] = f"{out.get('time_system', 'JD')}_{scale}"
            return out
    if "time_reference" in out and "time_system" not in out:
        out["time_system"] = "BJD"
    return out


def _columns(hdu) -> tuple[dict, dict]:
    data = hdu.data
    columns: dict = {}
    units: dict = {}
    for col in hdu.columns:
        values = data[col.name] if data is not None else np.zeros(0)
        values = np.asarray(values)
        if values.ndim != 1:
            continue  # vector cells (e.g. pixel positions) are not light-curve columns
        null = getattr(col, "null", None)
        if values.dtype.kind in "iu" and null not in (None, ""):
            try:
                values = np.ma.masked_equal(values, int(null))
            except (TypeError, ValueError):
                pass
        columns[col.name] = values
        if col.unit:
            units[col.name] = str(col.unit)
    return columns, units


def _first_line(text: str, limit: int = 120) -> str:
    return " ".join(str(text).split())[:limit]


def read_fits_table(path: Path, source: str, *, gz: bool = False) -> RawTable:
    """Read the light-curve table of a FITS file.

    Raises
    ------
    InputError
        For a corrupt or truncated file, or a file with no binary table.
    """
    from astropy.io import fits

    if not gz:
        size = path.stat().st_size
        if size % 2880:  # the FITS standard writes whole 2880-byte blocks
            raise InputError(source, f"truncated or corrupt FITS file ({size} bytes is not a "
                                     "whole number of 2880-byte FITS blocks)")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with fits.open(path, memmap=False) as hdul:
                hdul.verify("silentfix+ignore")
                headers = [hdu.header for hdu in hdul]
                tables = [h for h in hdul if isinstance(h, fits.BinTableHDU | fits.TableHDU)]
                if not tables:
                    if caught:
                        raise InputError(source, "corrupt FITS file: an extension could not be "
                                                 f"read ({_first_line(caught[0].message)})")
                    kinds = ", ".join(type(h).__name__.replace("HDU", "") for h in hdul)
                    raise InputError(source, f"FITS file has no table extension (HDUs: {kinds})")
                chosen = None
                for hdu in tables:
                    names = {n.lower() for n in hdu.columns.names}
                    if hdu.name.upper() == "LIGHTCURVE" or names & set(TIME_NAMES):
                        chosen = hdu
                        break
                chosen = chosen or tables[0]
                columns, units = _columns(chosen)
                headers = [chosen.header, *headers]
                keywords = _time_keywords(headers)
                ident = _identifier(headers[1:] + headers[:1])
                if ident:
                    keywords["identifier"] = ident
                notes = [f"read FITS extension {chosen.name or 'table'}"]
        except InputError:
            raise
        except (OSError, ValueError, TypeError, IndexError, KeyError, EOFError) as exc:
            if any("truncated" in str(w.message).lower() for w in caught):
                raise InputError(source, "truncated FITS file (the data end before the header "
                                         "says they should)") from None
            raise InputError(source, f"corrupt or unreadable FITS file ({_first_line(exc)})"
                             ) from None
    if any("truncated" in str(w.message).lower() for w in caught):
        raise InputError(source, "truncated FITS file (the data end before the header says "
                                 "they should)")
    return RawTable(source=source, columns=columns, units=units, keywords=keywords, notes=notes)
