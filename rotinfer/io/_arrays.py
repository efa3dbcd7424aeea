"""Light curves from numpy arrays, and file checksums for provenance."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..lightcurve import LightCurve, LightCurveMeta

__all__ = ["file_checksum", "from_arrays"]


def from_arrays(
    time, flux, flux_err=None, *, identifier: str = "star", time_reference: float = 0.0,
    time_system: str = "unknown", segment=None, flux_unit: str = "unknown",
    source: str = "<array>",
) -> LightCurve:
    """Make a light curve from arrays.

    Parameters
    ----------
    time : array_like of float, shape (n,)
        Times in days relative to ``time_reference``.
    flux : array_like of float, shape (n,)
        Flux in any unit (preparation normalises it per segment).
    flux_err : array_like of float, shape (n,), or None, optional
        One-sigma uncertainties in the units of ``flux``. ``None`` records that there are
        none (``meta.has_flux_err`` is False) so the model fits a white-noise term.
    identifier : str, optional
        Star name.
    time_reference : float, optional
        Absolute time (days) of ``time == 0`` in ``time_system``.
    time_system : str, optional
        Label such as ``"BJD_TDB"``, ``"MJD"`` or ``"unknown"``.
    segment : array_like of int, shape (n,), or None, optional
        Segment index per point (e.g. sector); all zero when not given.
    flux_unit : str, optional
        Unit of ``flux`` (free text).
    source : str, optional
        Where the arrays came from, used in messages.

    Returns
    -------
    LightCurve

    Raises
    ------
    InputError
        If the arrays are not one-dimensional numbers of equal length.
    """
    arrays = {"time": time, "flux": flux}
    if flux_err is not None:
        arrays["flux_err"] = flux_err
    if segment is not None:
        arrays["segment"] = segment
    converted = {}
    for name, values in arrays.items():
        try:
            arr = np.asarray(values, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(source, f"{name} is not an array of numbers") from None
        if arr.ndim != 1:
            raise InputError(source, f"{name} must be one-dimensional, got shape {arr.shape}")
        converted[name] = arr
    seg = converted.get("segment")
    if seg is not None:
        if not np.all(np.isfinite(seg)) or np.any(seg != np.round(seg)):
            raise InputError(source, "segment must hold whole numbers")
        seg = seg.astype(np.int64)
    meta = LightCurveMeta(
        identifier=str(identifier), sources=(str(source),), time_reference=float(time_reference),
        time_system=str(time_system), flux_column="flux", flux_unit=str(flux_unit),
        has_flux_err=flux_err is not None,
    )
    return LightCurve(
        time=converted["time"], flux=converted["flux"], flux_err=converted.get("flux_err"),
        segment=seg, meta=meta,
    )


def file_checksum(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, as 64 hexadecimal digits (for provenance records).

    Raises
    ------
    InputError
        If the file cannot be read.
    """
    path = Path(path)
    digest = hashlib.sha256()
    try:
        with path.open("rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
    except FileNotFoundError:
        raise InputError(str(path), "file not found") from None
    except IsADirectoryError:
        raise InputError(str(path), "is a directory, not a file") from None
    except PermissionError:
        raise InputError(str(path), "permission denied (cannot read)") from None
    except OSError as exc:
        raise InputError(str(path), f"cannot read ({exc.strerror or exc})") from None
    return digest.hexdigest()
