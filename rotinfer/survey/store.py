"""The survey's output folder: atomic star folders, completion markers and resume decisions.

Layout of ``--out``::

    catalog.ecsv, catalog.csv     one row per finished star (rebuilt from the folders)
    survey.json                   the run's configuration, seed, hash and version
    stars/<name>/                 one folder per finished star
        done.json                 the completion marker (:class:`StarRecord`)
        error.txt                 the traceback, for a failed star
        ...                       what the pipeline wrote (summary.json, samples, ...)
    stars/.tmp.<run>.<name>.<n>/  a star being written (never read; removed on start)
    stars/.chains.<name>.h5       the chains of a star whose run was stopped mid-fit,
                                  kept from its temporary folder for the next attempt

A star's folder appears in one ``os.rename`` of a finished temporary sibling
(atomic on POSIX file systems), so a folder under ``stars/`` is either absent or
complete. ``done.json`` holds the *work hash* (configuration hash, master seed and
the analysis function) and the fingerprints of the input files; a later run skips
the star only when both still match. A folder being replaced is first renamed to
``.old.<run>.<name>`` and deleted after the new one is in place, so a crash in
between loses the old result but never leaves a mixed folder.

A star stopped mid-fit (Ctrl-C, SIGTERM at a cluster's wall-time limit, a killed
worker) leaves a temporary folder; before it is removed, its ``chains.h5`` is kept as
``.chains.<name>.h5`` and the next attempt at that star continues from it (the
checkpoint's own fingerprint decides whether it belongs to the same fit). It is
deleted once the star's folder is committed.
"""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import json
import os
import shutil
import socket
import uuid
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path

from ..errors import InputError

__all__ = [
    "MARKER",
    "InputFingerprint",
    "StarRecord",
    "SurveyStore",
    "fingerprint_inputs",
    "work_hash",
]

STARS_DIR = "stars"
MARKER = "done.json"
ERROR_FILE = "error.txt"
TMP_PREFIX = ".tmp."
OLD_PREFIX = ".old."
SALVAGE_PREFIX = ".chains."
#: The pipeline's checkpoint of the chains (rotinfer.sample.Checkpoint) in a star's folder.
CHAINS_FILE = "chains.h5"
LOCK_FILE = ".survey.lock"
#: Failure kinds that depend on the run (time limit, machine) and are retried on resume.
TRANSIENT_FAILURES = ("timeout", "crashed")


@dataclass(frozen=True)
class InputFingerprint:
    """What a star's result was computed from: one input file.

    ``size`` (bytes), ``mtime_ns`` and ``sha256`` are ``None`` when the file was missing.
    """

    path: str
    size: int | None
    mtime_ns: int | None
    sha256: str | None


@dataclass(frozen=True)
class StarRecord:
    """The completion marker of one star (``done.json``), also what a worker returns.

    Attributes
    ----------
    identifier, name : str
        The star's identifier and folder name.
    status : {"ok", "failed"}
    failure : {"", "error", "timeout", "crashed"}
        Why a star failed: its input or the analysis raised (``"error"``), it ran past
        the per-star time limit (``"timeout"``), or the worker process running it died
        (``"crashed"``).
    error : str
        One line, ``ExceptionType: message``; empty when ``status == "ok"``.
    work_hash, config_hash : str
        See :func:`work_hash`; the configuration hash alone is kept for provenance.
    seed, master_seed : int
        The star's seed and the survey seed it was derived from.
    inputs : tuple of InputFingerprint
    seconds : float
        Wall time spent on the star in the worker (s).
    cpu_seconds : float
        CPU time of the worker thread that ran the star (s); below ``seconds`` when the
        worker had to share its core.
    finished_utc : str
        ISO 8601 time the marker was written.
    host : str
    pid : int
    version : str
        rotinfer version that produced the folder.
    run_token : str
        Identifies the survey invocation; a retried task finding its own run's
        marker returns it instead of computing the star again.
    """

    identifier: str
    name: str
    status: str
    failure: str = ""
    error: str = ""
    work_hash: str = ""
    config_hash: str = ""
    seed: int = 0
    master_seed: int = 0
    inputs: tuple[InputFingerprint, ...] = field(default=())
    seconds: float = 0.0
    cpu_seconds: float = 0.0
    finished_utc: str = ""
    host: str = ""
    pid: int = 0
    version: str = ""
    run_token: str = ""

    def to_json(self) -> str:
        """The marker's text (indented JSON)."""
        return json.dumps(asdict(self), indent=2, sort_keys=True) + "\n"

    @classmethod
    def from_json(cls, text: str) -> StarRecord:
        """Parse a marker; raises ``ValueError``/``TypeError``/``KeyError`` if malformed."""
        data = json.loads(text)
        known = {f.name for f in fields(cls)}
        data = {k: v for k, v in data.items() if k in known}
        data["inputs"] = tuple(InputFingerprint(**i) for i in data.get("inputs", ()))
        return cls(**data)


def work_hash(config_hash: str, master_seed: int, analysis: str) -> str:
    """Hash of what decides a star's result apart from its input files.

    Parameters
    ----------
    config_hash : str
        :func:`rotinfer.config.config_hash` of the run configuration.
    master_seed : int
        The survey seed (each star's seed follows from it and the identifier).
    analysis : str
        Qualified name of the per-star analysis function.

    Returns
    -------
    str
        16 hex digits of a SHA-256.
    """
    text = json.dumps([config_hash, int(master_seed), analysis])
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def file_sha256(path: str | os.PathLike, *, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            digest.update(block)
    return digest.hexdigest()


def fingerprint_inputs(paths) -> tuple[InputFingerprint, ...]:
    """Size, modification time and SHA-256 of each input file (``None`` fields if missing)."""
    out = []
    for p in paths:
        try:
            st = os.stat(p)
            out.append(InputFingerprint(str(p), st.st_size, st.st_mtime_ns, file_sha256(p)))
        except FileNotFoundError:
            out.append(InputFingerprint(str(p), None, None, None))
    return tuple(out)


def _same_input(old: InputFingerprint, path: str) -> bool:
    """Quick check first (size and mtime, as rsync does), the checksum only when they differ."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return old.sha256 is None
    if old.sha256 is None:
        return False
    if old.path == path and old.size == st.st_size and old.mtime_ns == st.st_mtime_ns:
        return True
    try:
        return file_sha256(path) == old.sha256
    except OSError:
        return False


class SurveyStore:
    """Reads and writes star folders under ``<out>/stars`` with the atomic protocol.

    Parameters
    ----------
    out : str or path
        The survey's output folder (created if missing).
    """

    def __init__(self, out: str | os.PathLike):
        self.out = Path(out).absolute()
        self.stars = self.out / STARS_DIR
        self.stars.mkdir(parents=True, exist_ok=True)
        self._stars_real = self.stars.resolve()

    # -- paths ------------------------------------------------------------------------
    def folder(self, name: str) -> Path:
        """The final folder of a star; refuses any name that would leave ``stars/``.

        Raises
        ------
        InputError
            If ``name`` is not a plain, non-hidden folder name (tasks are sanitised, so
            this is a second line of defence).
        """
        if (
            not name
            or name.startswith(".")
            or "/" in name
            or "\\" in name
            or "\x00" in name
            or (self.stars / name).resolve().parent != self._stars_real
        ):
            raise InputError(str(self.stars), f"refusing unsafe star folder name {name!r}")
        return self.stars / name

    def salvaged_chains(self, name: str) -> Path:
        """Where the chains of ``name`` are kept after its run stopped mid-fit."""
        self.folder(name)
        return self.stars / f"{SALVAGE_PREFIX}{name}.h5"

    def new_temporary(self, name: str, run_token: str) -> Path:
        """Create and return an empty temporary folder for ``name`` (unique per call)."""
        self.folder(name)
        path = self.stars / f"{TMP_PREFIX}{run_token}.{name}.{uuid.uuid4().hex[:8]}"
        path.mkdir()
        return path

    # -- reading ----------------------------------------------------------------------
    def read_record(self, name: str) -> StarRecord | None:
        """The marker of a finished star, or ``None`` (no folder, or no readable marker)."""
        try:
            text = (self.folder(name) / MARKER).read_text(encoding="utf-8")
            return StarRecord.from_json(text)
        except (OSError, ValueError, TypeError, KeyError):
            return None

    def finished(self, task, work_hash_: str) -> StarRecord | None:
        """The record to reuse on resume, or ``None`` when the star must be (re)computed.

        A star is reused when its marker exists, names the same identifier and work
        hash, its inputs are unchanged (size and mtime, else SHA-256), and it did not
        fail for a run-dependent reason (timeout, crashed worker).
        """
        rec = self.read_record(task.name)
        if rec is None or rec.identifier != task.identifier or rec.work_hash != work_hash_:
            return None
        if rec.status != "ok" and rec.failure in TRANSIENT_FAILURES:
            return None
        if len(rec.inputs) != len(task.files):
            return None
        pairs = zip(rec.inputs, task.files, strict=True)
        if not all(_same_input(old, path) for old, path in pairs):
            return None
        return rec

    # -- writing ----------------------------------------------------------------------
    def commit(self, tmp: Path, name: str, run_token: str) -> Path:
        """Move a finished temporary folder into place as ``stars/<name>``.

        If a folder is already there it is renamed aside first and deleted after the
        new one is in place. If another attempt of the same run got there first (a
        task retried after its worker was presumed dead), that folder is kept and
        ``tmp`` is discarded.

        Returns
        -------
        Path
            The star's folder.
        """
        final = self.folder(name)
        _fsync_tree_marker(tmp)
        for _ in range(3):
            try:
                os.rename(tmp, final)
                _fsync_dir(self.stars)
                return final
            except OSError:
                if not final.exists():
                    raise
            existing = self.read_record(name)
            if existing is not None and existing.run_token == run_token:
                shutil.rmtree(tmp, ignore_errors=True)
                return final
            aside = self.stars / f"{OLD_PREFIX}{run_token}.{name}.{uuid.uuid4().hex[:8]}"
            try:
                os.rename(final, aside)
            except FileNotFoundError:
                continue
            os.rename(tmp, final)
            _fsync_dir(self.stars)
            shutil.rmtree(aside, ignore_errors=True)
            return final
        raise OSError(f"could not move {tmp} into place as {final}")

    def write_record(self, record: StarRecord, *, run_token: str, traceback_text: str = "") -> Path:
        """Write a folder holding only a marker (and ``error.txt``), e.g. for a crashed star."""
        tmp = self.new_temporary(record.name, run_token)
        if traceback_text:
            (tmp / ERROR_FILE).write_text(traceback_text, encoding="utf-8")
        (tmp / MARKER).write_text(record.to_json(), encoding="utf-8")
        return self.commit(tmp, record.name, run_token)

    def clean_leftovers(self, *, run_token: str | None = None) -> list[Path]:
        """Remove temporary and set-aside folders (all, or only those of one run).

        Called on start (a killed run leaves its temporaries) and when a run stops. The
        chains in a temporary folder are kept first (:meth:`salvaged_chains`).
        """
        removed = []
        prefixes = (TMP_PREFIX, OLD_PREFIX)
        for path in self.stars.iterdir():
            if not path.name.startswith(prefixes):
                continue
            if run_token is not None and not path.name.split(".", 3)[2:3] == [run_token]:
                continue
            if path.name.startswith(TMP_PREFIX):
                self._salvage(path)
            shutil.rmtree(path, ignore_errors=True)
            removed.append(path)
        return removed

    def _salvage(self, tmp: Path) -> None:
        """Keep the chains of a star stopped mid-fit (see the module's docstring).

        Not when the star finished successfully after they were written (a retry that
        got through makes them stale), nor over newer chains already kept for it.
        """
        chains = tmp / CHAINS_FILE
        # .tmp.<run>.<name>.<8 hex>; names never start with "." but may contain dots
        name = tmp.name[len(TMP_PREFIX):].split(".", 1)[-1].rsplit(".", 1)[0]
        try:
            if not chains.is_file():
                return
            kept = self.salvaged_chains(name)
            mtime = chains.stat().st_mtime_ns
            marker = self.folder(name) / MARKER
            record = self.read_record(name)
            if record is not None and record.status == "ok" and marker.stat().st_mtime_ns > mtime:
                return
            if not kept.exists() or kept.stat().st_mtime_ns < mtime:
                os.replace(chains, kept)
        except (InputError, OSError):
            return  # a malformed leftover or a full disk: the star is simply fitted afresh

    @contextlib.contextmanager
    def lock(self):
        """Hold an exclusive lock on the output folder for the duration of a run.

        Raises
        ------
        InputError
            If another survey holds the lock on the same folder.
        """
        path = self.out / LOCK_FILE
        fh = open(path, "a+", encoding="utf-8")  # held for the whole run
        try:
            try:
                fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                fh.seek(0)
                holder = fh.read().strip() or "another process"
                raise InputError(
                    str(self.out), f"another survey is writing to this folder ({holder})"
                ) from None
            fh.seek(0)
            fh.truncate()
            fh.write(f"pid {os.getpid()} on {socket.gethostname()}\n")
            fh.flush()
            yield self
        finally:
            fh.close()


def atomic_write_text(path: Path, text: str) -> None:
    """Write a file by writing a temporary sibling and renaming it over the target."""
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def _fsync_tree_marker(folder: Path) -> None:
    marker = folder / MARKER
    if marker.exists():
        fd = os.open(marker, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _fsync_dir(folder: Path) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
