"""Writing light curves in the formats :mod:`rotinfer.io` reads back."""

from __future__ import annotations

import gzip
import math
import os
import tempfile
from pathlib import Path

import numpy as np

from ..errors import ConfigError, InputError
from ..lightcurve import LightCurve

__all__ = ["WRITE_FORMATS", "write_light_curve"]

#: Formats :func:`write_light_curve` can write.
WRITE_FORMATS = ("csv", "ecsv", "fits")

# Comment keys in our CSV header; the text reader understands them.
CSV_KEYS = ("identifier", "time_reference", "time_system", "flux_unit")


def _format_from_suffix(path: Path) -> str:
    name = path.name.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    if name.endswith((".fits", ".fit", ".fts")):
        return "fits"
    if name.endswith(".ecsv"):
        return "ecsv"
    return "csv"


def write_light_curve(
    lc: LightCurve, path: str | os.PathLike, *, format: str | None = None,
    overwrite: bool = False,
) -> Path:
    """Write a light curve to a file that :func:`rotinfer.io.read_light_curve` reads back.

    Times are written as absolute times, ``lc.time + lc.meta.time_reference`` (days), with
    the reference epoch recorded beside them so reading restores the same relative times.

    Parameters
    ----------
    lc : LightCurve
        The light curve to write.
    path : str or path-like
        Destination. A ``.gz`` ending gzip-compresses a CSV file.
    format : {"csv", "ecsv", "fits"} or None, optional
        ``"csv"``: a comment block (``# time_reference: ...`` etc.) then a header line
        ``time,flux,flux_err`` (``flux_err`` only when the light curve has uncertainties,
        plus ``segment`` when it has more than one segment). ``"ecsv"``: the same columns
        with the reference epoch in the table metadata. ``"fits"``: a binary table
        ``LIGHTCURVE`` in the space missions' layout (``TIME`` in days relative to
        ``BJDREFI + BJDREFF``, ``FLUX``, ``FLUX_ERR``, ``QUALITY`` all zero) with ``OBJECT``
        in the primary header. ``None`` (default) chooses from the file name, else CSV.
    overwrite : bool, optional
        Replace an existing file. By default an existing file is never touched.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    InputError
        If the file exists and ``overwrite`` is false, or it cannot be written.
    ConfigError
        If ``format`` is not one of the allowed values.
    """
    path = Path(path)
    fmt = _format_from_suffix(path) if format is None else str(format).lower()
    if fmt not in WRITE_FORMATS:
        raise ConfigError(
            f"format {format!r} is not recognised; choose one of {', '.join(WRITE_FORMATS)}"
        )
    if path.is_dir():
        raise InputError(str(path), "is a directory; give a file name to write")
    if path.exists() and not overwrite:
        raise InputError(str(path), "already exists; refusing to overwrite (pass overwrite=True)")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise InputError(str(path), f"folder {parent} does not exist")
    # Write beside the destination, then move into place, so a failed write never leaves a
    # half-written file under the requested name.
    try:
        fd, tmp = tempfile.mkstemp(prefix=".rotinfer-", suffix=".tmp", dir=parent)
    except OSError as exc:
        raise InputError(str(path), f"cannot write ({exc.strerror or exc})") from None
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        if fmt == "csv":
            _write_csv(lc, tmp_path, gz=path.name.lower().endswith(".gz"))
        elif fmt == "ecsv":
            _write_ecsv(lc, tmp_path)
        else:
            _write_fits(lc, tmp_path)
        if path.exists() and not overwrite:  # appeared while we were writing
            raise InputError(
                str(path), "already exists; refusing to overwrite (pass overwrite=True)"
            )
        os.replace(tmp_path, path)
    except OSError as exc:
        raise InputError(str(path), f"cannot write ({exc.strerror or exc})") from None
    finally:
        if tmp_path.exists():
            tmp_path.unlink()
    return path


def _absolute_time(lc: LightCurve) -> np.ndarray:
    return lc.time + lc.meta.time_reference


def _csv_text(lc: LightCurve) -> str:
    meta = lc.meta
    lines = ["# rotinfer light curve: time is absolute (time_reference + days)"]
    values = {
        "identifier": meta.identifier,
        "time_reference": repr(float(meta.time_reference)),
        "time_system": meta.time_system,
        "flux_unit": meta.flux_unit,
    }
    for key in CSV_KEYS:
        text = " ".join(str(values[key]).split())  # one line each
        lines.append(f"# {key}: {text}")
    columns = [_absolute_time(lc), lc.flux]
    names = ["time", "flux"]
    if lc.flux_err is not None:
        columns.append(lc.flux_err)
        names.append("flux_err")
    lines.append(",".join(names + (["segment"] if lc.n_segments > 1 else [])))
    # repr() of a Python float is the shortest text that reads back to the same float64.
    body = [",".join(map(repr, row)) for row in zip(*(c.tolist() for c in columns), strict=True)]
    if lc.n_segments > 1:
        body = [f"{row},{int(s)}" for row, s in zip(body, lc.segment, strict=True)]
    return "\n".join(lines + body) + "\n"


def _write_csv(lc: LightCurve, path: Path, *, gz: bool) -> None:
    text = _csv_text(lc)
    if gz:
        with gzip.open(path, "wt", encoding="utf-8") as fh:
            fh.write(text)
    else:
        path.write_text(text, encoding="utf-8")


def _write_ecsv(lc: LightCurve, path: Path) -> None:
    from astropy.table import Table

    table = Table()
    table["time"] = _absolute_time(lc)
    table["flux"] = lc.flux
    if lc.flux_err is not None:
        table["flux_err"] = lc.flux_err
    if lc.n_segments > 1:
        table["segment"] = lc.segment
    table.meta.update(
        identifier=lc.meta.identifier,
        time_reference=float(lc.meta.time_reference),
        time_system=lc.meta.time_system,
        flux_unit=lc.meta.flux_unit,
        origin="rotinfer",
    )
    table.write(path, format="ascii.ecsv", overwrite=True)


def _write_fits(lc: LightCurve, path: Path) -> None:
    from astropy.io import fits

    ref = float(lc.meta.time_reference)
    refi = math.floor(ref)
    primary = fits.PrimaryHDU()
    primary.header["OBJECT"] = (lc.meta.identifier, "target identifier")
    primary.header["ORIGIN"] = ("rotinfer", "written by rotinfer")
    cols = [
        fits.Column(name="TIME", format="D", unit="d", array=lc.time),
        fits.Column(name="FLUX", format="D", unit=lc.meta.flux_unit, array=lc.flux),
    ]
    if lc.flux_err is not None:
        cols.append(
            fits.Column(name="FLUX_ERR", format="D", unit=lc.meta.flux_unit, array=lc.flux_err)
        )
    cols.append(fits.Column(name="QUALITY", format="J", array=np.zeros(len(lc), np.int32)))
    if lc.n_segments > 1:
        cols.append(fits.Column(name="SEGMENT", format="K", array=lc.segment))
    table = fits.BinTableHDU.from_columns(cols, name="LIGHTCURVE")
    hdr = table.header
    hdr["BJDREFI"] = (refi, "integer part of the time reference (days)")
    hdr["BJDREFF"] = (ref - refi, "fractional part of the time reference (days)")
    hdr["TIMEUNIT"] = ("d", "unit of TIME")
    hdr["TSYSTEM"] = (lc.meta.time_system, "rotinfer time system label")
    if lc.meta.time_system.upper() in ("BJD_TDB", "BTJD", "BKJD"):
        hdr["TIMESYS"] = ("TDB", "time scale")
        hdr["TIMEREF"] = ("SOLARSYSTEM", "barycentric times")
    fits.HDUList([primary, table]).writeto(path, overwrite=True)
