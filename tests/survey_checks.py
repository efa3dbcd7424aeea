"""Helpers shared by the survey test files: call logs, file snapshots, table comparison."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
from astropy.table import Table

NAMES = ["alpha", "beta", "gamma", "delta"]


def calls(log: Path) -> list[str]:
    """Identifiers in the order the analysis was called (see ``survey_seams._log_call``)."""
    if not log.exists():
        return []
    return [line.split("\t")[0] for line in log.read_text().splitlines()]


def snapshot(folder: Path) -> dict[str, tuple[int, int, str]]:
    """inode, mtime (ns) and SHA-256 of every file in the star folders under ``folder``.

    Files directly in ``folder`` (the survey's vetting page) are rewritten by every run.
    """
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_file() and p.parent != folder:
            st = p.stat()
            out[str(p.relative_to(folder))] = (
                st.st_ino, st.st_mtime_ns, hashlib.sha256(p.read_bytes()).hexdigest()
            )
    return out


def comparable(path: Path) -> Table:
    """A catalogue without its run-dependent columns (wall and CPU time)."""
    table = Table.read(path, format="ascii.ecsv")
    del table["wall_time"], table["cpu_time"]
    return table


def assert_tables_equal(a: Table, b: Table) -> None:
    """Same columns, masks and values exactly (the runs must be bit-for-bit identical)."""
    assert a.colnames == b.colnames
    assert len(a) == len(b)
    for name in a.colnames:
        x, y = a[name], b[name]
        assert list(np.ma.getmaskarray(x)) == list(np.ma.getmaskarray(y)), name
        if x.dtype.kind == "U":
            assert list(x) == list(y), name
        else:
            assert np.array_equal(np.ma.filled(x, 0), np.ma.filled(y, 0)), name


def assert_no_leftovers(out: Path, *, kept_chains_allowed: bool = False) -> None:
    """No temporary or set-aside folder is left in ``out/stars``.

    ``kept_chains_allowed``: after an interrupted run, the chains of the stars it
    stopped mid-fit may be kept (``.chains.<name>.h5``) for the next run.
    """
    hidden = [p.name for p in (out / "stars").iterdir() if p.name.startswith(".")
              and not (kept_chains_allowed and p.name.startswith(".chains.")
                       and p.is_file())]
    assert hidden == []
