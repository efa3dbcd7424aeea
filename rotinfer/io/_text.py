"""Delimited text light curves: comma, tab, semicolon or whitespace, header optional."""

from __future__ import annotations

import math
import re

import numpy as np

from ..errors import InputError
from ._columns import MISSING_TOKENS, RawTable

__all__ = ["parse_text"]

# "# key: value" comment lines our writer puts before the header.
_META_LINE = re.compile(r"^(identifier|time_reference|time_system|flux_unit)\s*[:=]\s*(.*)$")
_COMMENT = ("#", "%", "!")


def _is_number(cell: str) -> bool:
    cell = cell.strip()
    if cell.lower() in MISSING_TOKENS - {""}:
        return True
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _delimiter(line: str) -> str | None:
    for delim in (",", "\t", ";", "|"):
        if delim in line:
            return delim
    return None  # runs of whitespace


def _split(line: str, delim: str | None) -> list[str]:
    if delim is None:
        return line.split()
    cells = [c.strip().strip('"').strip("'").strip() for c in line.strip().split(delim)]
    if delim == "|":  # "| a | b |" style tables
        if cells and cells[0] == "":
            cells = cells[1:]
        if cells and cells[-1] == "":
            cells = cells[:-1]
    return cells


def parse_text(text: str, source: str) -> RawTable:
    """Parse a delimited text table.

    Lines starting with ``#``, ``%`` or ``!`` are comments; ``# time_reference: X`` style
    comments (as :func:`rotinfer.io.write_light_curve` writes) are read as metadata. The
    first non-comment line is a header when any of its cells is not a number; a commented
    line just before the data with one name per column also serves as a header. Without a
    header the columns are, by position, time, flux and flux_err (then col4, col5, ...).

    Raises
    ------
    InputError
        For an empty file, a header with no data rows, a single column, or rows whose
        number of cells differs from the header.
    """
    keywords: dict = {}
    notes: list[str] = []
    comments: list[str] = []
    data: list[tuple[int, str]] = []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith(_COMMENT):
            body = stripped.lstrip("#%!").strip()
            match = _META_LINE.match(body)
            if match and not data:
                key, value = match.group(1), match.group(2).strip()
                if key == "time_reference":
                    try:
                        ref = float(value)
                    except ValueError:
                        raise InputError(source, f"line {number}: time_reference {value!r} is "
                                                 "not a number") from None
                    if not math.isfinite(ref):
                        raise InputError(source, f"line {number}: time_reference is not finite")
                    keywords["time_reference"] = ref
                    keywords["time_offset"] = 0.0  # our files hold absolute times
                else:
                    keywords[key] = value
            elif not data:
                comments.append(body)
            continue
        data.append((number, stripped))
    if not data:
        if comments or keywords:
            raise InputError(source, "no data rows (only comment lines)")
        raise InputError(source, "file is empty (no data rows)")

    delim = _delimiter(data[0][1])
    first = _split(data[0][1], delim)
    if not all(_is_number(c) for c in first if c):
        header = first
        rows = data[1:]
        if not rows:
            raise InputError(source, "header only: no data rows")
    else:
        header = None
        rows = data
        if comments:
            # A commented header, e.g. "# BJD FLUX ERR", directly above the data.
            candidate = _split(comments[-1], delim)
            if len(candidate) == len(first) and not any(_is_number(c) for c in candidate):
                header = candidate
    ncols = len(first)
    if header is None:
        header = ["time", "flux", "flux_err"][:ncols] + [f"col{i}" for i in range(4, ncols + 1)]
        notes.append(f"no header: columns read by position as {', '.join(header[:3])}")
    if len(header) < 2:
        raise InputError(source, "only one column; a light curve needs time and flux columns")
    if any(not name for name in header):
        header = [name or f"col{i}" for i, name in enumerate(header, start=1)]
    seen: dict[str, int] = {}
    unique = []
    for name in header:  # keep duplicated names apart
        key = name.lower()
        seen[key] = seen.get(key, 0) + 1
        unique.append(name if seen[key] == 1 else f"{name}_{seen[key]}")
    header = unique

    cells: list[list[str]] = []
    lines = np.empty(len(rows), dtype=np.int64)
    for i, (number, line) in enumerate(rows):
        row = _split(line, delim)
        if len(row) > len(header) and not any(row[len(header):]):
            row = row[: len(header)]  # trailing delimiters
        if len(row) != len(header):
            raise InputError(
                source,
                f"line {number} has {len(row)} field(s) but the header has {len(header)} "
                f"({', '.join(header)})",
            )
        cells.append(row)
        lines[i] = number
    table = np.array(cells, dtype=str).reshape(len(cells), len(header))
    columns = {name: table[:, j] for j, name in enumerate(header)}
    return RawTable(source=source, columns=columns, keywords=keywords, rows=lines, notes=notes)
