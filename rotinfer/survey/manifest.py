"""Survey inputs: a folder, glob patterns or files of light curves, or a manifest.

Two ways to say which stars a survey covers:

* **Light-curve files** — folders (every light-curve file directly inside, sorted),
  glob patterns (``'data/*.fits'``, quoted so the shell leaves them alone) or files.
  Each file is one star, identified by its file name without extensions; when two
  files share that stem, their paths relative to their common folder are the
  identifiers instead.
* **A manifest** — one CSV or ECSV file, the only input, with one row per star:

  ``identifier`` (required)
      The star's identifier (any text; it names the catalogue row and, sanitised,
      the star's result folder, and with ``--seed`` fixes its random seed).
  ``files`` (required)
      One or more light-curve files of the star separated by ``;`` (several sectors,
      quarters or seasons are stitched, one segment per file). Relative paths are
      relative to the manifest's folder.
  stellar parameters (optional)
      For the derived-physics stage: ``radius`` (R_sun), ``vsini`` (km/s), ``bv``
      ((B-V)0, mag), ``mass`` (M_sun), ``teff`` (K), each with an optional
      uncertainty column ``<name>_err``; the aliases and rules are those of
      :meth:`rotinfer.derived.StellarParameters.from_mapping`, which checks every
      row before the survey starts. Empty cells mean "not known"; columns that are
      not stellar parameters are ignored.

  A ``.csv`` or ``.ecsv`` input whose header has a ``files`` column is a manifest;
  any other is a light curve. In CSV, lines starting with ``#`` are comments, and
  every cell is read as text first, so identifiers such as ``00123`` keep their zeros.

Example manifest (CSV)::

    identifier,files,radius,radius_err
    TIC 100001,tess/s14/tic100001.fits;tess/s15/tic100001.fits,0.92,0.04
    TIC 100002,tess/s14/tic100002.fits,,
"""

from __future__ import annotations

import csv
import glob
import os
from collections.abc import Sequence
from pathlib import Path

from ..errors import InputError
from .tasks import StarTask, make_tasks

__all__ = ["LIGHT_CURVE_SUFFIXES", "collect_tasks", "is_manifest", "read_manifest"]

#: File name endings taken as light curves when a folder is given (each may add ``.gz``).
LIGHT_CURVE_SUFFIXES = (".fits", ".fit", ".fts", ".csv", ".ecsv", ".tsv", ".txt", ".dat", ".tbl")
MANIFEST_SUFFIXES = (".csv", ".ecsv")
FILE_SEPARATOR = ";"
_GLOB_CHARS = set("*?[")


def collect_tasks(inputs: Sequence[str | os.PathLike]) -> list[StarTask]:
    """Turn the survey's inputs into one :class:`StarTask` per star.

    Parameters
    ----------
    inputs : sequence of str or path
        A single manifest, or any mix of folders, glob patterns and light-curve files.

    Returns
    -------
    list of StarTask
        Sorted by identifier, with unique safe folder names.

    Raises
    ------
    InputError
        If nothing is given, an input does not exist, a pattern or folder holds no
        light curves, a manifest is mixed with other inputs, or a manifest is malformed.
    """
    inputs = [str(i) for i in inputs]
    if not inputs:
        raise InputError(None, "no inputs given: pass a folder, files, patterns or a manifest")
    manifests = [i for i in inputs if is_manifest(i)]
    if manifests:
        if len(inputs) > 1:
            raise InputError(manifests[0], "a manifest must be the only input of a survey")
        return read_manifest(manifests[0])
    files: list[Path] = []
    for item in inputs:
        files.extend(_expand(item))
    unique = sorted({f.resolve() for f in files})
    idents = _identifiers_from_paths(unique)
    rows = sorted(zip(idents, ([str(f)] for f in unique), ({} for _ in unique), strict=True))
    return make_tasks(rows, source=", ".join(inputs))


def _expand(item: str) -> list[Path]:
    path = Path(item).expanduser()
    if path.is_dir():
        found = sorted(
            p for p in path.iterdir()
            if p.is_file() and not p.name.startswith(".") and _is_lc(p)
            and not _is_population_table(p)
        )
        if not found:
            allowed = ", ".join(LIGHT_CURVE_SUFFIXES)
            raise InputError(item, f"folder holds no light-curve files (looked for {allowed}, .gz)")
        return found
    if path.is_file():
        return [path]
    if _GLOB_CHARS & set(item):
        found = sorted(Path(p) for p in glob.glob(os.path.expanduser(item))
                       if Path(p).is_file() and not _is_population_table(Path(p)))
        if not found:
            raise InputError(item, "pattern matches no files")
        return found
    raise InputError(item, "no such file or folder")


def _is_population_table(path: Path) -> bool:
    """True for the side tables ``rotinfer simulate`` writes beside its light curves
    (truth, flares, parameters: ECSV whose header metadata names the simulator and the
    number of stars), so that a folder of simulated stars can be surveyed as it is."""
    if not path.name.lower().endswith(".ecsv"):
        return False
    try:
        with path.open("r", encoding="utf-8", errors="replace") as f:
            header = []
            for line in f:
                if not line.startswith("#") or len(header) > 500:
                    break
                header.append(line)
    except OSError:
        return False
    text = "".join(header)
    return "rotinfer.simulate" in text and "n_stars:" in text


def _is_lc(path: Path) -> bool:
    name = path.name.lower().removesuffix(".gz")
    return name.endswith(LIGHT_CURVE_SUFFIXES)


def _stem(path: Path) -> str:
    name = path.name.removesuffix(".gz").removesuffix(".GZ")
    return Path(name).stem


def _identifiers_from_paths(paths: list[Path]) -> list[str]:
    stems = [_stem(p) for p in paths]
    clash = {s for s in stems if stems.count(s) > 1}
    if not clash:
        return stems
    common = Path(os.path.commonpath([str(p.parent) for p in paths]))
    return [
        (p.relative_to(common).with_name(s).as_posix() if s in clash else s)
        for p, s in zip(paths, stems, strict=True)
    ]


def is_manifest(path: str | os.PathLike) -> bool:
    """True for a ``.csv``/``.ecsv`` file whose header has a ``files`` column."""
    path = Path(path)
    if not (path.is_file() and path.name.lower().endswith(MANIFEST_SUFFIXES)):
        return False
    try:
        return "files" in _header(path)
    except (OSError, UnicodeDecodeError, ValueError):
        return False


def _header(path: Path) -> list[str]:
    if path.name.lower().endswith(".ecsv"):
        from astropy.table import Table

        return list(Table.read(path, format="ascii.ecsv").colnames)
    with path.open(newline="", encoding="utf-8") as fh:
        for row in csv.reader(_uncommented(fh)):
            return [c.strip() for c in row]
    return []


def _uncommented(lines):
    for line in lines:
        if line.strip() and not line.lstrip().startswith("#"):
            yield line


def read_manifest(path: str | os.PathLike) -> list[StarTask]:
    """Read a survey manifest (see the module documentation for its columns).

    Parameters
    ----------
    path : str or path
        A ``.csv`` or ``.ecsv`` file.

    Returns
    -------
    list of StarTask
        One per row, sorted by identifier; file paths made absolute.

    Raises
    ------
    InputError
        One line naming the manifest and the problem: a missing ``identifier`` or
        ``files`` column, an empty identifier, a row without files, or two rows with
        the same identifier.
    """
    path = Path(path)
    records = _records(path)
    base = path.resolve().parent
    rows = []
    first_row: dict[str, int] = {}
    for number, record in enumerate(records, start=1):
        ident = _text(record.get("identifier"))
        if not ident.strip():
            raise InputError(str(path), f"row {number}: empty identifier")
        if ident in first_row:
            raise InputError(
                str(path),
                f"rows {first_row[ident]} and {number} have the same identifier {ident!r}",
            )
        first_row[ident] = number
        entries = [e.strip() for e in _text(record.get("files")).split(FILE_SEPARATOR)]
        files = [str(base / Path(e).expanduser()) for e in entries if e]
        if not files:
            raise InputError(str(path), f"row {number} ({ident}): no files")
        stellar = _stellar(record, f"{path} row {number}")
        rows.append((ident, files, stellar))
    if not rows:
        raise InputError(str(path), "manifest has no rows")
    rows.sort(key=lambda r: r[0])
    return make_tasks(rows, source=str(path))


def _records(path: Path) -> list[dict[str, object]]:
    try:
        if path.name.lower().endswith(".ecsv"):
            from astropy.table import Table

            table = Table.read(path, format="ascii.ecsv")
            names = list(table.colnames)
            records = [
                {n: (None if _is_masked(row[n]) else row[n]) for n in names} for row in table
            ]
        else:
            with path.open(newline="", encoding="utf-8") as fh:
                reader = csv.reader(_uncommented(fh))
                names = [c.strip() for c in next(reader, [])]
                records = []
                for number, cells in enumerate(reader, start=1):
                    if len(cells) != len(names):
                        raise InputError(
                            str(path),
                            f"row {number} has {len(cells)} cells but the header has {len(names)}",
                        )
                    records.append(dict(zip(names, cells, strict=True)))
    except InputError:
        raise
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(str(path), f"cannot read manifest ({exc})") from None
    missing = [c for c in ("identifier", "files") if c not in names]
    if missing:
        raise InputError(
            str(path),
            f"manifest lacks column(s) {', '.join(missing)}; found: {', '.join(names)}",
        )
    return records


def _is_masked(value) -> bool:
    import numpy as np

    return value is np.ma.masked


def _text(value) -> str:
    return "" if value is None else str(value)


def _stellar(record: dict, source: str) -> dict[str, float]:
    """The row's stellar parameters, validated by the derived-physics stage's own rules."""
    from ..derived import StellarParameters

    row = {k: v for k, v in record.items() if k not in ("identifier", "files") and v is not None}
    params = StellarParameters.from_mapping(row, source=source)
    if params is None:
        return {}
    return {k: v for k, v in params.to_dict().items() if v is not None}
