"""The per-star unit of work that runs in a worker process (local pool or Dask).

:func:`process_star` is a module-level function so that it pickles by reference
and any worker that can ``import rotinfer`` can run it. It wraps one call of an
*analysis function* (by default :func:`analyse_with_pipeline`, the full rotinfer
pipeline) with everything a survey needs: the star's seed, the per-star time limit,
error capture, input fingerprints and the atomic folder protocol of
:mod:`rotinfer.survey.store`.

The analysis function is a parameter so the machinery can be exercised with small
real functions (one that raises, one that kills its own process, one that sleeps
past the limit) in the test suite; those are test seams for fault handling, not
stand-ins for the science, which is always :func:`analyse_with_pipeline`.
"""

from __future__ import annotations

import contextlib
import ctypes
import dataclasses
import datetime as _dt
import os
import shutil
import signal
import socket
import threading
import time
import traceback
import warnings
from collections import Counter
from collections.abc import Callable
from pathlib import Path

from .. import __version__
from ..errors import InputError
from .store import (
    CHAINS_FILE,
    ERROR_FILE,
    MARKER,
    StarRecord,
    SurveyStore,
    fingerprint_inputs,
    work_hash,
)
from .tasks import StarTask, star_seed

__all__ = ["StarTimeout", "analyse_with_pipeline", "analysis_name", "process_star"]

#: Exit status of a worker process ended because a star ignored its time limit.
EXIT_HARD_TIMEOUT = 70
WARNINGS_FILE = "warnings.txt"
_MAX_ERROR = 500


class StarTimeout(BaseException):
    """Raised inside a star's analysis when it runs past the per-star time limit.

    A ``BaseException`` (like ``KeyboardInterrupt``) so that ``except Exception``
    blocks in the analysis cannot swallow it.
    """


def analyse_with_pipeline(task: StarTask, *, config, seed: int, out_dir: Path) -> None:
    """Read the star's files and run the full pipeline on it, writing into ``out_dir``.

    Several files are stitched into one light curve, one segment per file, and the
    light curve is given the task's identifier. Warnings raised during the analysis
    (e.g. :class:`~rotinfer.errors.ConvergenceWarning`; the summary also records
    ``converged``) go to ``warnings.txt`` in the star's folder instead of the terminal.
    Stellar parameters from the manifest go to the pipeline's derived-physics stage;
    the star's HTML page (:func:`rotinfer.report.write_star_page`) is written before
    the folder is committed, so finished folders are never touched again.

    Parameters
    ----------
    task : StarTask
    config : RunConfig
        The run configuration (:func:`rotinfer.pipeline.load_run_config`).
    seed : int
        The star's seed (:func:`rotinfer.survey.tasks.star_seed`).
    out_dir : Path
        An empty folder that becomes the star's result folder.
    """
    from ..io import read_stars
    from ..pipeline import analyse_star
    from ..report import write_star_page

    stars = read_stars(list(task.files), stitch=len(task.files) > 1)
    if len(stars) != 1:
        raise InputError(task.files[0], f"expected one star, the reader returned {len(stars)}")
    lc = stars[0]
    lc = dataclasses.replace(lc, meta=dataclasses.replace(lc.meta, identifier=task.identifier))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        stellar = None
        if task.stellar:
            from ..derived import StellarParameters

            stellar = StellarParameters(**task.stellar_parameters)
        analyse_star(lc, config=config, seed=seed, out_dir=out_dir, stellar=stellar)
        write_star_page(out_dir)
    if caught:
        counts = Counter(f"{w.category.__name__}: {w.message}" for w in caught)
        text = "".join(f"{line} ({n} time{'s' if n > 1 else ''})\n" for line, n in counts.items())
        (Path(out_dir) / WARNINGS_FILE).write_text(text, encoding="utf-8")


def analysis_name(analyse: Callable) -> str:
    """``module.qualname`` of an analysis function (part of the work hash)."""
    return f"{analyse.__module__}.{analyse.__qualname__}"


def process_star(
    task: StarTask,
    *,
    config,
    config_hash: str,
    master_seed: int,
    out_root: str | os.PathLike,
    run_token: str,
    timeout: float | None = None,
    analyse: Callable | None = None,
) -> StarRecord:
    """Analyse one star and commit its result folder atomically; never raises for the star.

    Parameters
    ----------
    task : StarTask
    config : object
        The run configuration handed to ``analyse`` (a frozen ``RunConfig`` for the pipeline).
    config_hash : str
        Hash of ``config`` (:func:`rotinfer.config.config_hash`), recorded and part of the
        work hash.
    master_seed : int
        The survey seed; the star's seed is :func:`star_seed` of it and the identifier.
    out_root : str or path
        The survey's output folder (shared by all workers).
    run_token : str
        Identifies this survey invocation (see :class:`StarRecord`).
    timeout : float or None
        Per-star wall-time limit in seconds (``None``: no limit). Past it the analysis
        gets :class:`StarTimeout`; if it has not stopped after a further grace period
        (a quarter of the limit, between 2 s and 120 s) the worker process records the
        timeout and exits, which the survey treats like a crashed worker.
    analyse : callable or None
        ``analyse(task, *, config, seed, out_dir)``; default :func:`analyse_with_pipeline`.

    Returns
    -------
    StarRecord
        Also written as ``done.json`` in ``<out_root>/stars/<task.name>/``. Errors of the
        star itself (bad file, numerical failure, timeout) are recorded, not raised.

    Notes
    -----
    A star starts from a copy of the chains of its last attempt: those kept from a run
    stopped mid-fit (:meth:`SurveyStore.salvaged_chains`), else its earlier folder's
    ``chains.h5`` when it is computed again (its configuration changed, e.g. a higher
    ``[sampler] max_steps`` after it did not converge). The checkpoint continues those
    chains when they belong to the same fit (its fingerprint: data, model, the settings
    that shape the chains, seed) and replaces them otherwise, so the result is the one
    a fresh fit would give, sooner. The earlier folder stays in place until the new one
    is committed; kept chains are deleted then, unless the star ran past its time limit,
    whose chains are kept for the next attempt (a rerun continues a long fit).

    Raises
    ------
    OSError
        Only when the output folder cannot be written (the survey retries the task).
    """
    analyse = analyse_with_pipeline if analyse is None else analyse
    store = SurveyStore(out_root)
    wh = work_hash(config_hash, master_seed, analysis_name(analyse))
    done = store.read_record(task.name)
    if done is not None and done.run_token == run_token and done.work_hash == wh:
        return done  # a retry of a task whose first attempt finished before its worker died
    seed = star_seed(master_seed, task.identifier)

    def record(status, failure="", error="", inputs=(), seconds=0.0) -> StarRecord:
        cpu = time.thread_time() - cpu_start
        return StarRecord(
            identifier=task.identifier, name=task.name, status=status, failure=failure,
            error=error, work_hash=wh, config_hash=config_hash, seed=seed,
            master_seed=int(master_seed), inputs=tuple(inputs), seconds=round(seconds, 3),
            cpu_seconds=round(cpu, 3),
            finished_utc=_dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
            host=socket.gethostname(), pid=os.getpid(), version=__version__,
            run_token=run_token,
        )

    start, cpu_start = time.perf_counter(), time.thread_time()

    def give_up() -> None:
        # The analysis ignored StarTimeout (stuck in compiled code): record and end the process.
        rec = record("failed", "timeout", _timeout_message(timeout, hard=True),
                     seconds=time.perf_counter() - start)
        store.write_record(rec, run_token=run_token)
        os._exit(EXIT_HARD_TIMEOUT)

    tmp = store.new_temporary(task.name, run_token)
    salvaged = store.salvaged_chains(task.name)
    failure = error = details = ""
    inputs = ()
    try:
        with _deadline(timeout, give_up):
            inputs = fingerprint_inputs(task.files)
            missing = [f.path for f in inputs if f.sha256 is None]
            if missing:
                raise InputError(missing[0], "no such file")
            earlier = salvaged if salvaged.is_file() else store.folder(task.name) / CHAINS_FILE
            if analyse is analyse_with_pipeline and earlier.is_file():
                try:
                    shutil.copy2(earlier, tmp / CHAINS_FILE)
                except OSError:  # a convenience only: without it the star starts afresh
                    (tmp / CHAINS_FILE).unlink(missing_ok=True)
            analyse(task, config=config, seed=seed, out_dir=tmp)
    except StarTimeout:
        failure, error = "timeout", _timeout_message(timeout, hard=False)
    except Exception as exc:  # the star failed; the survey records it and goes on
        failure, error, details = "error", one_line(exc), traceback.format_exc()
    seconds = time.perf_counter() - start
    if failure == "timeout" and (tmp / CHAINS_FILE).is_file():
        os.replace(tmp / CHAINS_FILE, salvaged)  # the next attempt continues them
    if failure:
        _empty(tmp)  # partial outputs of a failed star are not kept
        (tmp / ERROR_FILE).write_text(details or error + "\n", encoding="utf-8")
        rec = record("failed", failure, error, inputs, seconds)
    else:
        rec = record("ok", inputs=inputs, seconds=seconds)
    (tmp / MARKER).write_text(rec.to_json(), encoding="utf-8")
    store.commit(tmp, task.name, run_token)
    if failure != "timeout":
        salvaged.unlink(missing_ok=True)
    return rec


def one_line(exc: BaseException) -> str:
    """``Type: message`` on one line, at most 500 characters."""
    text = f"{type(exc).__name__}: {' '.join(str(exc).split())}".rstrip(": ")
    return text if len(text) <= _MAX_ERROR else text[: _MAX_ERROR - 3] + "..."


def _timeout_message(timeout: float | None, *, hard: bool) -> str:
    text = f"StarTimeout: ran past the per-star time limit of {timeout:g} s"
    if hard:
        text += f" and did not stop within {_grace(timeout):g} s more; its worker was ended"
    return text


def _grace(timeout: float) -> float:
    return min(max(2.0, 0.25 * timeout), 120.0)


def _empty(folder: Path) -> None:
    for child in folder.iterdir():
        if child.is_dir() and not child.is_symlink():
            shutil.rmtree(child)
        else:
            child.unlink()


def _raise_timeout(signum, frame):
    raise StarTimeout()


@contextlib.contextmanager
def _deadline(seconds: float | None, give_up: Callable[[], None]):
    """Raise :class:`StarTimeout` in this thread after ``seconds``; call ``give_up`` later.

    In a process's main thread (local pool workers) the soft limit is ``SIGALRM``,
    which also interrupts sleeps and blocking calls. In other threads (Dask worker
    threads) the exception is scheduled with ``PyThreadState_SetAsyncExc``; it
    arrives at the next Python bytecode. If the code is still running after the grace
    period, ``give_up`` runs in a watchdog thread.
    """
    if seconds is None:
        yield
        return
    if seconds <= 0:
        raise ValueError(f"the per-star time limit must be positive, got {seconds}")
    lock = threading.Lock()
    active = [True]
    use_signal = threading.current_thread() is threading.main_thread() and hasattr(
        signal, "SIGALRM"
    )
    target = threading.get_ident()

    def inject() -> None:
        with lock:
            if active[0]:
                ctypes.pythonapi.PyThreadState_SetAsyncExc(
                    ctypes.c_ulong(target), ctypes.py_object(StarTimeout)
                )

    def hard() -> None:
        with lock:
            if not active[0]:
                return
        give_up()

    timers = [threading.Timer(seconds + _grace(seconds), hard)]
    previous = None
    if use_signal:
        previous = signal.signal(signal.SIGALRM, _raise_timeout)
        signal.setitimer(signal.ITIMER_REAL, seconds)
    else:
        timers.append(threading.Timer(seconds, inject))
    for t in timers:
        t.daemon = True
        t.start()
    try:
        yield
    finally:
        with lock:
            active[0] = False
        for t in timers:
            t.cancel()
        if use_signal:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, previous)
