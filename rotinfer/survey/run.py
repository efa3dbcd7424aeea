"""Run a survey: many stars, resumable, on a local pool or a Dask cluster.

:func:`run_survey` is what ``rotinfer survey`` calls. It collects the stars,
skips those already finished for the same configuration, seed and inputs, runs the
rest one star per task, records every failure in the star's folder and the
catalogue and goes on, and finally rebuilds the catalogue from the star folders.

On SIGINT or SIGTERM it stops submitting, cancels what is queued, ends the
workers, removes this run's temporary folders, writes the catalogue of what
finished and raises :class:`SurveyInterrupted` (exit status 130 for Ctrl-C, 143
for SIGTERM). A rerun completes the rest without recomputing finished stars.
"""

from __future__ import annotations

import concurrent.futures as cf
import datetime as _dt
import json
import logging
import os
import signal
import socket
import threading
import time
import uuid
from collections import Counter, deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from .. import __version__
from ..config import config_hash as _config_hash
from ..config import dataclass_to_dict
from ..errors import ConfigError, RotinferError
from .catalog import build_catalog, write_catalog
from .executors import make_executor, resolve_executor
from .manifest import collect_tasks
from .store import StarRecord, SurveyStore, atomic_write_text, fingerprint_inputs, work_hash
from .tasks import StarTask, star_seed
from .worker import analyse_with_pipeline, analysis_name, process_star

__all__ = ["SurveyInterrupted", "SurveyResult", "run_survey"]

log = logging.getLogger("rotinfer")

EXIT_SIGINT = 130
EXIT_SIGTERM = 143
_POLL_S = 0.25


@dataclass(frozen=True)
class SurveyResult:
    """What a survey run did.

    Attributes
    ----------
    out : Path
        The survey folder.
    catalog : Path
        ``catalog.ecsv`` (``catalog.csv`` beside it).
    records : tuple of StarRecord
        One per star listed in the catalogue, sorted by identifier.
    n_stars : int
        Stars in the inputs.
    n_reused : int
        Stars skipped because an earlier run had finished them.
    n_computed : int
        Stars this run finished (successfully or not).
    config_hash : str
    seconds : float
        Wall time of the run (s).
    interrupted : int or None
        The signal number that stopped the run early, else ``None``.
    """

    out: Path
    catalog: Path
    records: tuple[StarRecord, ...]
    n_stars: int
    n_reused: int
    n_computed: int
    config_hash: str
    seconds: float
    interrupted: int | None = None

    @property
    def n_ok(self) -> int:
        return sum(r.status == "ok" for r in self.records)

    @property
    def n_failed(self) -> int:
        return sum(r.status != "ok" for r in self.records)

    @property
    def complete(self) -> bool:
        """Every input star is in the catalogue."""
        return len(self.records) == self.n_stars


class SurveyInterrupted(RotinferError):
    """The survey stopped on SIGINT/SIGTERM; finished stars are saved and catalogued.

    Attributes
    ----------
    result : SurveyResult
    exit_code : int
        130 for SIGINT, 143 for SIGTERM (128 + signal number).
    """

    def __init__(self, result: SurveyResult):
        sig = result.interrupted or signal.SIGINT
        self.result = result
        self.exit_code = 128 + int(sig)
        super().__init__(
            f"{result.out}: interrupted by {signal.Signals(sig).name}; "
            f"{len(result.records)} of {result.n_stars} stars are finished and catalogued; "
            "run the same command again to complete the rest"
        )


def run_survey(
    inputs: Sequence[str | os.PathLike] | Sequence[StarTask],
    *,
    out: str | os.PathLike,
    config=None,
    workers: int | None = None,
    scheduler: str | None = None,
    dask_local: int | None = None,
    seed: int = 0,
    resume: bool = True,
    force: bool = False,
    timeout: float | None = None,
    progress: bool = True,
    retries: int = 2,
    executor: str = "auto",
    analyse: Callable | None = None,
) -> SurveyResult:
    """Analyse many stars and write ``catalog.ecsv`` / ``catalog.csv`` in ``out``.

    Parameters
    ----------
    inputs : sequence of str or path, or of StarTask
        Folders, glob patterns, light-curve files or one manifest
        (:func:`rotinfer.survey.manifest.collect_tasks`), or ready-made tasks.
    out : str or path
        Survey folder; star folders go in ``out/stars/``. Nothing is written elsewhere.
    config : str, path, RunConfig or None
        The configuration file of ``rotinfer fit`` (``None``: the defaults), or a
        configuration object already loaded.
    workers : int or None
        Size of the local process pool (default: the usable CPU cores).
    scheduler : str or None
        Address of a running Dask scheduler.
    dask_local : int or None
        Start a local Dask cluster with this many one-thread worker processes.
    seed : int
        Master seed; each star's seed is derived from it and the star's identifier.
    resume : bool
        Skip stars whose folder is complete for the same configuration, seed and
        inputs (default). ``resume=False`` recomputes every star, as ``force=True`` does.
    force : bool
        Recompute every star.
    timeout : float or None
        Per-star wall-time limit in seconds (``None``: none).
    progress : bool
        Show a progress bar on standard error.
    retries : int
        Bounded retries: a task that raised in the survey machinery is resubmitted up
        to ``retries`` times, and a star whose worker process dies while running it is
        failed as ``crashed`` after ``retries + 1`` such deaths.
    executor : {"auto", "local", "dask"}
        ``"auto"`` picks Dask when ``scheduler`` or ``dask_local`` is given.
    analyse : callable or None
        The per-star analysis (default: the full pipeline); see
        :func:`rotinfer.survey.worker.process_star`.

    Returns
    -------
    SurveyResult

    Raises
    ------
    InputError, ConfigError
        Bad inputs or options, before any star runs.
    SurveyInterrupted
        On SIGINT/SIGTERM, after saving what finished.

    Notes
    -----
    Local workers are started with ``spawn``, so a script that calls this function
    must do so under ``if __name__ == "__main__":`` (as for any spawn-based
    multiprocessing); ``rotinfer survey`` does. Signals are handled only when this
    is called from the main thread. Input files and ``out`` must be visible at the
    same paths to every worker (a shared file system on a cluster).
    """
    started = time.perf_counter()
    name = resolve_executor(executor, workers=workers, scheduler=scheduler, dask_local=dask_local)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ConfigError(f"--seed must be a non-negative integer, got {seed!r}")
    if timeout is not None and not (isinstance(timeout, int | float) and timeout > 0):
        raise ConfigError(
            f"--timeout-per-star must be a positive number of seconds, got {timeout!r}"
        )
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise ConfigError(f"retries must be a non-negative integer, got {retries!r}")
    analyse = analyse_with_pipeline if analyse is None else analyse
    tasks = list(inputs) if inputs and all(isinstance(t, StarTask) for t in inputs) else (
        collect_tasks(inputs)
    )
    _check_unique(tasks)
    config = _resolve_config(config)
    chash = _config_hash(config)
    wh = work_hash(chash, seed, analysis_name(analyse))
    run_token = uuid.uuid4().hex[:12]
    store = SurveyStore(out)
    meta = {"config_hash": chash, "master_seed": seed, "work_hash": wh}

    with store.lock(), _SignalGuard() as guard:
        removed = store.clean_leftovers()
        if removed:
            log.info("removed %d unfinished folder(s) left by an earlier run", len(removed))
        _write_run_file(store, config, meta, tasks, name)
        reused, todo = {}, []
        for task in tasks:
            rec = None if (force or not resume) else store.finished(task, wh)
            if rec is None:
                todo.append(task)
            else:
                reused[task.identifier] = rec
        log.info("%d star(s): %d finished earlier, %d to run", len(tasks), len(reused), len(todo))
        computed: dict[str, StarRecord] = {}
        bar = _Progress(total=len(tasks), reused=reused.values(), enabled=progress)
        try:
            if todo and not guard.signum:
                job = dict(config=config, config_hash=chash, master_seed=seed,
                           out_root=str(store.out), run_token=run_token, timeout=timeout,
                           analyse=analyse)
                pool = make_executor(name, workers=workers, scheduler=scheduler,
                                     dask_local=dask_local, retries=retries)
                try:
                    log.info("running on %s", pool.describe())
                    _drive(pool, todo, job, store, computed, guard, bar, retries)
                finally:
                    if guard.signum:
                        pool.stop()
                    pool.close()
        finally:
            bar.close()
            store.clean_leftovers(run_token=run_token)
            records = _catalogued(tasks, store, wh)
            table = build_catalog(records, store, meta=meta)
            catalog, _ = write_catalog(table, store.out)
            _write_vetting_page(store, records)
    result = SurveyResult(
        out=store.out, catalog=catalog, records=tuple(records), n_stars=len(tasks),
        n_reused=len(reused), n_computed=len(computed), config_hash=chash,
        seconds=time.perf_counter() - started, interrupted=guard.signum,
    )
    if guard.signum:
        raise SurveyInterrupted(result)
    return result


def _check_unique(tasks: Sequence[StarTask]) -> None:
    for attr in ("identifier", "name"):
        values = [getattr(t, attr) for t in tasks]
        if len(set(values)) != len(values):
            dup = next(v for v in values if values.count(v) > 1)
            raise ConfigError(f"two tasks share the {attr} {dup!r}")


def _resolve_config(config):
    """Load the run configuration unless an object was given."""
    if config is None or isinstance(config, str | os.PathLike):
        from ..pipeline import load_run_config

        return load_run_config(config)
    return config


def _write_run_file(store, config, meta, tasks, executor_name) -> None:
    info = {
        **meta,
        "rotinfer_version": __version__,
        "started_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "executor": executor_name,
        "n_stars": len(tasks),
        "config": dataclass_to_dict(config),
    }
    atomic_write_text(store.out / "survey.json", json.dumps(info, indent=2, default=str) + "\n")


def _write_vetting_page(store: SurveyStore, records) -> None:
    """``stars/vetting.html``: every analysed star in one sortable page (see rotinfer.report).

    Star pages are left as the pipeline wrote them, so finished folders are never touched.
    """
    if not any(r.status == "ok" for r in records):
        return
    from ..report import write_vetting_page

    write_vetting_page(store.stars, star_pages=False)


def _catalogued(tasks, store, wh) -> list[StarRecord]:
    """Markers of the stars finished for this work hash, sorted by identifier."""
    out = []
    for task in tasks:
        rec = store.read_record(task.name)
        if rec is not None and rec.identifier == task.identifier and rec.work_hash == wh:
            out.append(rec)
    return sorted(out, key=lambda r: r.identifier)


def _drive(pool, todo, job, store, computed, guard, bar, retries) -> None:
    """Submit stars, collect results, handle crashes and errors, until done or stopped.

    Local pool: a dead worker breaks the whole pool and fails every star in flight.
    Those stars become *suspects* and rerun one at a time in a fresh pool; a suspect
    whose lone run kills its worker again is the culprit, and after ``retries + 1``
    such deaths it is recorded as ``crashed``. Dask reschedules tasks of a lost worker
    itself and reports ``KilledWorker`` once its limit is reached.
    """
    queue = deque(todo)
    suspects: deque[StarTask] = deque()
    crashes: Counter[str] = Counter()
    errors: Counter[str] = Counter()
    inflight: dict[cf.Future, StarTask] = {}
    alone: StarTask | None = None

    def submit(task):
        inflight[pool.submit(process_star, task, **job)] = task

    while (queue or suspects or inflight) and not guard.signum:
        if suspects:
            if not inflight:
                alone = suspects.popleft()
                submit(alone)
        else:
            alone = None
            window = pool.window
            while queue and len(inflight) < window:
                submit(queue.popleft())
        bar.running(min(len(inflight), pool.slots))
        done, _ = cf.wait(list(inflight), timeout=_POLL_S, return_when=cf.FIRST_COMPLETED)
        broken = False
        if any(_crashed(pool, f) for f in done) and pool.kind == "local":
            # Every star in flight fails with the pool; collect them all before restarting.
            cf.wait(list(inflight), timeout=60)
            done = [f for f in inflight if f.done()]
        for fut in done:
            task = inflight.pop(fut)
            exc = fut.exception() if not fut.cancelled() else cf.CancelledError()
            if exc is None:
                computed[task.identifier] = fut.result()
                bar.finished(fut.result())
                continue
            if pool.is_crash(exc) and pool.kind == "local":
                broken = True
                if alone is not None and task.identifier == alone.identifier:
                    crashes[task.identifier] += 1
                if crashes[task.identifier] > retries:
                    _record_crash(store, task, job, exc, crashes[task.identifier], computed, bar)
                else:
                    suspects.append(task)
            elif pool.is_crash(exc):  # Dask: the scheduler's allowed-failures ran out
                _record_crash(store, task, job, exc, None, computed, bar)
            elif guard.signum:
                continue
            else:
                errors[task.identifier] += 1
                limit = 0 if pool.kind == "dask" else retries  # Dask retried it already
                if errors[task.identifier] > limit:
                    _record_error(store, task, job, exc, computed, bar)
                else:
                    log.warning("%s: %s; retrying", task.identifier, _one_line(exc))
                    queue.appendleft(task)
        bar.running(min(len(inflight), pool.slots))
        if broken and not guard.signum:
            log.warning("a worker process died; restarting the pool")
            pool.restart()


def _crashed(pool, fut: cf.Future) -> bool:
    return not fut.cancelled() and fut.exception() is not None and pool.is_crash(fut.exception())


def _one_line(exc: BaseException) -> str:
    from .worker import one_line

    return one_line(exc)


def _failure_record(task, job, failure, error) -> StarRecord:
    return StarRecord(
        identifier=task.identifier, name=task.name, status="failed", failure=failure,
        error=error,
        work_hash=work_hash(job["config_hash"], job["master_seed"], analysis_name(job["analyse"])),
        config_hash=job["config_hash"], seed=star_seed(job["master_seed"], task.identifier),
        master_seed=job["master_seed"], inputs=fingerprint_inputs(task.files),
        finished_utc=_dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        host=socket.gethostname(), pid=os.getpid(), version=__version__,
        run_token=job["run_token"],
    )


def _record_crash(store, task, job, exc, deaths, computed, bar) -> None:
    times = "repeatedly" if deaths is None else f"{deaths} time(s)"
    rec = _failure_record(
        task, job, "crashed",
        f"WorkerDied: the worker process died while running this star ({times}): "
        + _one_line(exc),
    )
    store.write_record(rec, run_token=job["run_token"])
    computed[task.identifier] = rec
    bar.finished(rec)


def _record_error(store, task, job, exc, computed, bar) -> None:
    import traceback

    rec = _failure_record(task, job, "error", _one_line(exc))
    text = "".join(traceback.format_exception(exc))
    store.write_record(rec, run_token=job["run_token"], traceback_text=text)
    computed[task.identifier] = rec
    bar.finished(rec)


class _SignalGuard:
    """Turn SIGINT/SIGTERM into a flag the driver checks; a second signal aborts at once.

    Only installed in the main thread (Python delivers signals there); elsewhere the
    survey cannot be interrupted by signals and runs to the end.
    """

    def __init__(self):
        self.signum: int | None = None
        self._previous = {}

    def _handler(self, signum, frame):
        if self.signum is not None:
            raise KeyboardInterrupt
        self.signum = signum
        log.warning("%s received: stopping after saving finished stars "
                    "(send it again to abort at once)", signal.Signals(signum).name)

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                self._previous[sig] = signal.signal(sig, self._handler)
        return self

    def __exit__(self, *exc):
        for sig, previous in self._previous.items():
            signal.signal(sig, previous)
        return False


class _Progress:
    """A tqdm bar of stars done / failed / running with an estimate of the time left."""

    def __init__(self, *, total: int, reused, enabled: bool):
        reused = list(reused)
        self.ok = sum(r.status == "ok" for r in reused)
        self.failed = len(reused) - self.ok
        self._running = 0
        self._bar = None
        if enabled:
            from tqdm import tqdm

            self._bar = tqdm(
                total=total, initial=len(reused), unit="star", dynamic_ncols=True,
                desc="survey", smoothing=0.05,
            )
            self._refresh()

    def _refresh(self):
        if self._bar is not None:
            self._bar.set_postfix_str(
                f"done {self.ok}, failed {self.failed}, running {self._running}", refresh=False
            )

    def running(self, n: int) -> None:
        if n != self._running:
            self._running = n
            self._refresh()
            if self._bar is not None:
                self._bar.refresh()

    def finished(self, record: StarRecord) -> None:
        if record.status == "ok":
            self.ok += 1
        else:
            self.failed += 1
        self._refresh()
        if self._bar is not None:
            self._bar.update(1)

    def close(self):
        if self._bar is not None:
            self._bar.close()

