"""Where survey stars run: a local process pool or a Dask distributed cluster.

Both executors hand back standard :class:`concurrent.futures.Future` objects
(Dask through ``Client.get_executor(pure=False, retries=K)``, which wraps
``client.submit``), so one driver loop in :mod:`rotinfer.survey.run` serves both.

========  ==============================================================  =============
name      runs stars on                                                   needs
========  ==============================================================  =============
local     a :class:`~concurrent.futures.ProcessPoolExecutor` of N          nothing
          processes started with ``spawn``, one star per task
dask      a running Dask scheduler (``--scheduler ADDRESS``) or a         ``distributed``
          ``LocalCluster`` of N one-thread worker processes on 127.0.0.1
          (``--dask-local N``)
========  ==============================================================  =============

One BLAS/OpenMP thread per worker: linear-algebra libraries read their thread
count once, when they are loaded, so the variables in :data:`THREAD_VARIABLES`
must be in a worker's environment before it imports numpy. The local pool's
workers are started (``spawn``) while those variables are set in the parent's
environment, which is restored when the pool closes; Dask's nanny sets the same
variables for its workers (``distributed.nanny.pre-spawn-environ``: OpenMP,
OpenBLAS and MKL by default; ``--dask-local`` adds the others). If ``threadpoolctl`` happens to be
installed, workers also apply its limit (it is not a dependency).
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import importlib.util
import logging
import multiprocessing
import os
import signal
import time
from concurrent.futures.process import BrokenProcessPool

from .. import __version__
from ..errors import ConfigError, InputError

__all__ = [
    "THREAD_VARIABLES",
    "DaskExecutor",
    "LocalExecutor",
    "available_executors",
    "default_workers",
    "make_executor",
    "resolve_executor",
]

log = logging.getLogger("rotinfer")

#: Environment variables that cap BLAS/OpenMP thread pools (OpenMP, OpenBLAS, MKL,
#: Accelerate, numexpr, BLIS); set to ``"1"`` for every worker.
THREAD_VARIABLES = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
    "BLIS_NUM_THREADS",
)


def pinned_environment() -> dict[str, str]:
    """The environment additions that keep each worker to one BLAS/OpenMP thread."""
    return {name: "1" for name in THREAD_VARIABLES}


def default_workers() -> int:
    """Number of CPU cores this process may use (its affinity mask where known)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


def limit_threads_in_this_process() -> str:
    """Apply ``threadpoolctl``'s one-thread limit when it is installed.

    Returns
    -------
    str
        ``"threadpoolctl"`` if the limit was applied, else ``"environment"`` (the
        thread variables set at process start are then the only control).
    """
    if importlib.util.find_spec("threadpoolctl") is None:
        return "environment"
    import threadpoolctl

    threadpoolctl.threadpool_limits(limits=1)
    return "threadpoolctl"


def _init_local_worker() -> None:
    # The survey process handles Ctrl-C and stops its workers itself; a worker that
    # died of the terminal's SIGINT would look like a crash.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ.update(pinned_environment())  # for libraries that read them late
    limit_threads_in_this_process()


@contextlib.contextmanager
def _environment(values: dict[str, str]):
    """Set environment variables for the duration of the block, then restore them."""
    saved = {k: os.environ.get(k) for k in values}
    os.environ.update(values)
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


class LocalExecutor:
    """A pool of worker processes on this machine.

    Parameters
    ----------
    workers : int or None
        Number of processes (default :func:`default_workers`).

    Notes
    -----
    While the executor is open, :data:`THREAD_VARIABLES` are ``"1"`` in this
    process's environment so that workers inherit them before importing numpy;
    :meth:`close` restores the previous values. A worker that dies breaks the
    pool; :meth:`restart` replaces it (the driver decides which star to blame).
    """

    kind = "local"

    def __init__(self, *, workers: int | None = None):
        n = default_workers() if workers is None else workers
        if isinstance(n, bool) or not isinstance(n, int) or n < 1:
            raise ConfigError(f"--workers must be a positive integer, got {workers!r}")
        self.slots = n
        self._env = _environment(pinned_environment())
        self._env.__enter__()
        self._pool = self._new_pool()

    def _new_pool(self) -> cf.ProcessPoolExecutor:
        return cf.ProcessPoolExecutor(
            max_workers=self.slots,
            mp_context=multiprocessing.get_context("spawn"),
            initializer=_init_local_worker,
        )

    def describe(self) -> str:
        return f"local pool of {self.slots} worker process{'es' if self.slots > 1 else ''}"

    @property
    def window(self) -> int:
        """How many tasks to keep submitted: one per worker and one queued."""
        return self.slots + 1

    def submit(self, fn, /, *args, **kwargs) -> cf.Future:
        return self._pool.submit(fn, *args, **kwargs)

    @staticmethod
    def is_crash(exc: BaseException) -> bool:
        """Whether a future's exception means its worker process died."""
        return isinstance(exc, BrokenProcessPool)

    def restart(self) -> None:
        """Replace a broken pool with a fresh one."""
        _terminate(self._pool)
        self._pool = self._new_pool()

    def stop(self) -> None:
        """Cancel what has not started and end the worker processes now."""
        _terminate(self._pool)

    def close(self) -> None:
        try:
            self._pool.shutdown(wait=True, cancel_futures=True)
        finally:
            self._env.__exit__(None, None, None)


def _terminate(pool: cf.ProcessPoolExecutor) -> None:
    """Cancel pending work and end a pool's processes without waiting for running stars."""
    if hasattr(pool, "terminate_workers"):  # Python >= 3.14
        pool.terminate_workers()
        return
    # Before 3.14 there is no public way to stop a running worker; CPython has kept
    # the worker Process objects in ``_processes`` since 3.2 (shutdown clears it, so
    # take them first).
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for p in processes:
        if p.is_alive():
            p.terminate()
    for p in processes:
        p.join(timeout=10)


class DaskExecutor:
    """Stars as tasks on a Dask distributed cluster.

    Parameters
    ----------
    scheduler : str or None
        Address of a running scheduler (``tcp://host:8786``).
    n_workers : int or None
        Start a ``LocalCluster`` of this many one-thread worker processes on 127.0.0.1,
        without a dashboard, when no ``scheduler`` is given.
    retries : int
        Times a task that raised is resubmitted (``client.submit(..., retries=K)``);
        for ``n_workers`` also the scheduler's ``allowed-failures`` (worker deaths a
        task may witness before it fails with ``KilledWorker``). On a cluster of your
        own that is the scheduler's configuration.

    Raises
    ------
    ConfigError
        If ``distributed`` is not installed, or workers run another rotinfer version.
    InputError
        If the scheduler cannot be reached.
    """

    kind = "dask"

    def __init__(self, *, scheduler: str | None = None, n_workers: int | None = None,
                 retries: int = 2):
        if importlib.util.find_spec("distributed") is None:
            raise ConfigError(
                "the dask executor needs the 'distributed' package: pip install 'rotinfer[dask]'"
            )
        import dask
        import distributed

        self._distributed = distributed
        self._cluster = None
        self._slots, self._slots_at = 1, -1e9
        if scheduler is not None:
            try:
                self._client = distributed.Client(scheduler, timeout="30s", set_as_default=False)
            except (OSError, TimeoutError, ValueError) as exc:
                raise InputError(scheduler, f"cannot reach the Dask scheduler ({exc})") from None
            self._where = f"Dask scheduler at {scheduler}"
        else:
            if isinstance(n_workers, bool) or not isinstance(n_workers, int) or n_workers < 1:
                raise ConfigError(f"--dask-local must be a positive integer, got {n_workers!r}")
            # The nanny puts ``pre-spawn-environ`` in the environment before it starts a
            # worker process, early enough for BLAS; ``env`` would come too late.
            pre_spawn = {
                **dask.config.get("distributed.nanny.pre-spawn-environ", default={}),
                **pinned_environment(),
            }
            with dask.config.set(
                {
                    "distributed.scheduler.allowed-failures": int(retries),
                    "distributed.nanny.pre-spawn-environ": pre_spawn,
                }
            ):
                self._cluster = distributed.LocalCluster(
                    n_workers=n_workers,
                    threads_per_worker=1,
                    processes=True,
                    host="127.0.0.1",
                    dashboard_address=None,
                    # No dashboard; the scheduler's small HTTP server (health checks)
                    # still starts, so keep it on loopback and a free port.
                    scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                    silence_logs=logging.ERROR,
                )
            self._client = distributed.Client(self._cluster, set_as_default=False)
            self._where = f"Dask local cluster of {n_workers} worker process(es) on 127.0.0.1"
        try:
            self._check_versions()
            self._executor = self._client.get_executor(pure=False, retries=int(retries))
        except BaseException:
            self.close()
            raise

    def _check_versions(self) -> None:
        try:
            versions = self._client.run(_rotinfer_version)
        except Exception as exc:  # whatever a worker raised (typically ModuleNotFoundError)
            raise ConfigError(
                f"Dask workers cannot run rotinfer ({type(exc).__name__}: {exc}); "
                "install the same rotinfer version on every worker"
            ) from None
        wrong = sorted({v for v in versions.values() if v != __version__})
        if wrong:
            raise ConfigError(
                f"Dask workers run rotinfer {', '.join(wrong)} but this is {__version__}; "
                "install the same version everywhere"
            )

    def describe(self) -> str:
        return self._where

    @property
    def slots(self) -> int:
        """Worker threads on the cluster (asked of the scheduler at most every 5 s)."""
        now = time.monotonic()
        if now - self._slots_at > 5.0:
            self._slots = max(1, sum(self._client.nthreads().values()))
            self._slots_at = now
        return self._slots

    @property
    def window(self) -> int:
        """Twice the cluster's threads, so workers never wait on the round trip."""
        return 2 * self.slots

    def submit(self, fn, /, *args, **kwargs) -> cf.Future:
        return self._executor.submit(fn, *args, **kwargs)

    def is_crash(self, exc: BaseException) -> bool:
        """A task that outlived ``allowed-failures`` worker deaths."""
        return isinstance(exc, self._distributed.KilledWorker)

    def restart(self) -> None:
        """Nothing to do: the scheduler replaces lost workers and reschedules their tasks."""

    def stop(self) -> None:
        """Cancel every task of this survey still queued or running on the cluster."""
        self._executor.shutdown(wait=False)

    def close(self) -> None:
        try:
            self._client.close()
        finally:
            if self._cluster is not None:
                self._cluster.close()


def _rotinfer_version() -> str:
    from rotinfer import __version__ as v

    return v


_EXECUTORS = {"local": LocalExecutor, "dask": DaskExecutor}


def available_executors() -> tuple[str, ...]:
    """Executors usable here: ``"local"`` always, ``"dask"`` when distributed is installed."""
    names = ["local"]
    if importlib.util.find_spec("distributed") is not None:
        names.append("dask")
    return tuple(names)


def resolve_executor(
    executor: str = "auto",
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    dask_local: int | None = None,
) -> str:
    """Pick the executor from the options, rejecting contradictory ones.

    ``"auto"`` is ``"dask"`` when ``scheduler`` or ``dask_local`` is given, else ``"local"``.

    Raises
    ------
    ConfigError
        For an unknown name (listing the allowed ones) or options that do not go together.
    """
    allowed = ("auto", *_EXECUTORS)
    if executor not in allowed:
        raise ConfigError(
            f"{executor!r} is not a known executor; choose one of {', '.join(allowed)} "
            f"(available here: {', '.join(available_executors())})"
        )
    if scheduler is not None and dask_local is not None:
        raise ConfigError("--scheduler and --dask-local cannot be combined; choose one")
    wants_dask = scheduler is not None or dask_local is not None
    if wants_dask and workers is not None:
        raise ConfigError(
            "--workers sizes the local pool; with Dask use --dask-local N or size your cluster"
        )
    name = ("dask" if wants_dask else "local") if executor == "auto" else executor
    if name == "local" and wants_dask:
        raise ConfigError("--scheduler and --dask-local need the dask executor")
    if name == "dask" and not wants_dask:
        raise ConfigError("the dask executor needs --scheduler ADDRESS or --dask-local N")
    return name


def make_executor(
    name: str,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    dask_local: int | None = None,
    retries: int = 2,
):
    """Start the executor ``name`` (see :func:`resolve_executor`).

    Raises
    ------
    ConfigError
        For an unknown name, listing the allowed ones.
    """
    if name not in _EXECUTORS:
        raise ConfigError(
            f"{name!r} is not a known executor; choose one of {', '.join(_EXECUTORS)}"
        )
    if name == "local":
        return LocalExecutor(workers=workers)
    return DaskExecutor(scheduler=scheduler, n_workers=dask_local, retries=retries)
