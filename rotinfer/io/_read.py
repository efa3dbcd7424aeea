"""Choosing a reader by content and extension; several files of one star stitched."""

from __future__ import annotations

import gzip
import os
import zlib
from collections.abc import Iterable
from dataclasses import replace
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..lightcurve import LightCurve, LightCurveMeta, MaskRecord
from ._columns import build_light_curve
from ._fits import read_fits_table
from ._table import read_astropy_table
from ._text import parse_text

__all__ = ["read_light_curve", "read_stars", "stitch"]

FITS_SUFFIXES = (".fits", ".fit", ".fts")
# Extensions handed to astropy.table.Table.read (its own format registry decides).
TABLE_SUFFIXES = (".vot", ".votable", ".xml", ".hdf5", ".h5", ".parquet", ".ipac", ".tbl")
_SNIFF = 65536


def _suffix(path: Path) -> str:
    name = path.name.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    return Path(name).suffix


def _open_checked(path: Path, source: str) -> tuple[bytes, bool]:
    """The first bytes of the file (decompressed when gzip) and whether it is gzip."""
    try:
        if path.is_dir():
            raise InputError(source, "is a directory, not a light-curve file")
        if not path.exists():
            raise InputError(source, "file not found")
        with path.open("rb") as fh:
            head = fh.read(_SNIFF)
    except PermissionError:
        raise InputError(source, "permission denied (cannot read the file)") from None
    except IsADirectoryError:
        raise InputError(source, "is a directory, not a light-curve file") from None
    except OSError as exc:
        raise InputError(source, f"cannot read ({exc.strerror or exc})") from None
    if not head:
        raise InputError(source, "file is empty (0 bytes)")
    gz = head[:2] == b"\x1f\x8b"
    if gz:
        try:
            with gzip.open(path, "rb") as fh:
                head = fh.read(_SNIFF)
        except (OSError, EOFError, zlib.error):
            raise InputError(source, "corrupt or truncated gzip data") from None
        if not head:
            raise InputError(source, "file is empty (gzip holds 0 bytes)")
    return head, gz


def _looks_binary(head: bytes) -> bool:
    if b"\x00" in head:
        return True
    control = sum(1 for b in head if b < 32 and b not in (9, 10, 12, 13)) + head.count(127)
    return control > 0.01 * len(head)


def _read_text_file(path: Path, source: str, *, gz: bool) -> str:
    try:
        if gz:
            with gzip.open(path, "rb") as fh:
                data = fh.read()
        else:
            data = path.read_bytes()
    except (EOFError, zlib.error, gzip.BadGzipFile):
        raise InputError(source, "corrupt or truncated gzip data") from None
    except OSError as exc:
        raise InputError(source, f"cannot read ({exc.strerror or exc})") from None
    if _looks_binary(data[:_SNIFF]):
        raise InputError(source, "binary data that is neither FITS nor a text table")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        return data.decode("latin-1")


def read_light_curve(
    path: str | os.PathLike, *, time_column: str | None = None, flux_column: str | None = None,
    flux_err_column: str | None = None, quality_column: str | None = None,
    quality_bitmask: int | str = "default", magnitudes: bool = False,
    identifier: str | None = None,
) -> LightCurve:
    """Read one light-curve file, choosing the reader by content and extension.

    Formats: FITS binary tables in the missions' layout (also ``.fits.gz``); ECSV and any
    table ``astropy.table.Table.read`` reads (VOTable, HDF5, ...); delimited text (comma,
    tab, semicolon or whitespace, header optional, also gzip-compressed).

    Parameters
    ----------
    path : str or path-like
        The file. It is only read, never modified.
    time_column, flux_column, flux_err_column, quality_column : str, optional
        Column names (case-insensitive; a 1-based number also works). By default the time
        column is the first of time, t, bjd, bjd_tdb, btjd, bkjd, hjd, mjd, jd, date; the
        flux column PDCSAP_FLUX, else SAP_FLUX, else flux, f, ...; the uncertainty column
        ``<flux>_ERR`` else flux_err, err, error, sigma, dy, ...; the quality column QUALITY
        or SAP_QUALITY. ``"none"`` for ``flux_err_column`` or ``quality_column`` ignores
        that column.
    quality_bitmask : int or {"default", "none"}, optional
        Cadences whose quality value shares a bit with this mask are dropped and recorded
        (``meta.dropped``). ``"default"`` drops every flagged cadence (all 32 bits);
        ``"none"`` keeps all.
    magnitudes : bool, optional
        The flux column holds magnitudes (mag, magnitude, m ... are then matched too):
        converted to relative flux ``10**(-0.4 (m - median m))`` with uncertainties
        propagated to first order.
    identifier : str, optional
        Star name; by default from the header (OBJECT, TICID, KEPLERID) or the file name.

    Returns
    -------
    LightCurve
        Times in days relative to ``meta.time_reference``: the file's recorded epoch
        (``BJDREFI + BJDREFF``, or our ``time_reference`` comment/metadata), else the
        whole day on or before the first time. Flux as read (not yet normalised).

    Raises
    ------
    InputError
        For every unusable file: missing, a directory, unreadable, empty, header only,
        binary garbage, corrupt or truncated FITS or gzip, no table, no time or flux column
        (listing the columns present), non-numeric cells, infinite values, uncertainties
        <= 0. The message is one line naming the file.
    ConfigError
        For a quality bitmask that is not allowed.
    """
    path = Path(path)
    source = str(path)
    head, gz = _open_checked(path, source)
    suffix = _suffix(path)
    options = dict(
        time_column=time_column, flux_column=flux_column, flux_err_column=flux_err_column,
        quality_column=quality_column, quality_bitmask=quality_bitmask,
        magnitudes=magnitudes, identifier=identifier,
    )
    if head.startswith(b"SIMPLE  ="):
        raw = read_fits_table(path, source, gz=gz)
    elif suffix in FITS_SUFFIXES:
        raise InputError(source, "not a valid FITS file (it does not start with a SIMPLE card)")
    elif head.lstrip().startswith(b"# %ECSV"):
        raw = read_astropy_table(path, source, format="ascii.ecsv")
    elif suffix in TABLE_SUFFIXES or head.startswith((b"\x89HDF", b"PAR1")):
        raw = read_astropy_table(path, source)
    elif _looks_binary(head):
        raise InputError(source, "binary data that is neither FITS nor a text table")
    else:
        raw = parse_text(_read_text_file(path, source, gz=gz), source)
    return build_light_curve(raw, **options)


def read_stars(
    paths: str | os.PathLike | Iterable[str | os.PathLike], *, stitch: bool = False,
    **reader_kwargs,
) -> list[LightCurve]:
    """Read several files: each its own star, or all of them one star.

    Parameters
    ----------
    paths : path or iterable of paths
        Light-curve files. A directory is an error, not a collection.
    stitch : bool, optional
        False (default): one light curve per file. True: the files are one star
        (sectors, quarters, seasons) and are stitched into one light curve with one
        segment per file (see :func:`stitch`).
    **reader_kwargs
        Passed to :func:`read_light_curve`.

    Returns
    -------
    list of LightCurve

    Raises
    ------
    InputError
        If no paths are given or any file cannot be read.
    """
    if isinstance(paths, str | os.PathLike):
        paths = [paths]
    paths = list(paths)
    if not paths:
        raise InputError(None, "no input files given")
    curves = [read_light_curve(p, **reader_kwargs) for p in paths]
    if stitch:
        return [_join(curves)]
    return curves


def stitch(lcs: Iterable[LightCurve]) -> LightCurve:
    """Join light curves of one star into one, each input its own segment.

    Inputs are ordered by their first absolute time and put on a shared time reference
    (the earliest input's). Each input's segments are kept apart (renumbered so no two
    inputs share one), so per-segment normalisation removes offsets between sectors.

    Parameters
    ----------
    lcs : iterable of LightCurve
        Light curves of the same star.

    Returns
    -------
    LightCurve
        ``meta.sources`` lists the inputs' sources in segment order. Uncertainties are kept
        only when every input has them (otherwise dropped, with a note).

    Raises
    ------
    InputError
        If no light curves are given or their time systems differ.
    """
    lcs = list(lcs)
    if not lcs:
        raise InputError(None, "nothing to stitch: no light curves given")
    if len(lcs) == 1:
        return lcs[0]

    def start(lc: LightCurve) -> float:
        finite = lc.time[np.isfinite(lc.time)]
        return lc.meta.time_reference + (float(finite.min()) if finite.size else 0.0)

    lcs = sorted(lcs, key=start)
    systems = {lc.meta.time_system for lc in lcs} - {"unknown"}
    if len(systems) > 1:
        listing = ", ".join(f"{lc.meta.sources[0]} ({lc.meta.time_system})" for lc in lcs)
        raise InputError(lcs[0].meta.sources[0],
                         f"cannot stitch light curves with different time systems: {listing}")
    reference = lcs[0].meta.time_reference
    notes: list[str] = []
    if systems and any(lc.meta.time_system == "unknown" for lc in lcs):
        notes.append(f"time system unknown for some files; assumed {next(iter(systems))}")
    with_err = all(lc.flux_err is not None for lc in lcs)
    if not with_err and any(lc.flux_err is not None for lc in lcs):
        notes.append("uncertainties dropped: only some files have them")
    times, fluxes, errs, segs = [], [], [], []
    dropped_t, dropped_f, dropped_r = [], [], []
    sources: list[str] = []
    next_segment = 0
    for lc in lcs:
        shift = lc.meta.time_reference - reference
        times.append(lc.time + shift)
        fluxes.append(lc.flux)
        if with_err:
            errs.append(lc.flux_err)
        _, local = np.unique(lc.segment, return_inverse=True)
        segs.append(local + next_segment)
        next_segment += max(lc.n_segments, 1)
        sources.extend(lc.meta.sources)
        dropped_t.append(lc.meta.dropped.time + shift)
        dropped_f.append(lc.meta.dropped.flux)
        dropped_r.append(lc.meta.dropped.reason)
        notes.extend(f"{lc.meta.sources[0]}: {note}" for note in lc.meta.notes)
    identifiers = list(dict.fromkeys(lc.meta.identifier for lc in lcs))
    if len(identifiers) > 1:
        notes.append(f"identifiers differ ({', '.join(identifiers)}); using {identifiers[0]}")
    units = {lc.meta.flux_unit for lc in lcs}
    first = lcs[0].meta
    meta = LightCurveMeta(
        identifier=first.identifier,
        sources=tuple(sources),
        time_reference=reference,
        time_system=next(iter(systems)) if systems else "unknown",
        flux_column=first.flux_column,
        flux_unit=first.flux_unit if len(units) == 1 else "mixed",
        has_flux_err=with_err,
        notes=tuple(notes),
        dropped=MaskRecord(
            time=np.concatenate(dropped_t), flux=np.concatenate(dropped_f),
            reason=np.concatenate(dropped_r).astype("<U12"),
        ),
    )
    return replace(
        lcs[0], time=np.concatenate(times), flux=np.concatenate(fluxes),
        flux_err=np.concatenate(errs) if with_err else None,
        segment=np.concatenate(segs), meta=meta,
    )


_join = stitch  # read_stars' ``stitch`` flag shadows the function's name inside it
