"""Small real analysis functions for testing the survey machinery's fault handling.

These are *test seams*, not fakes of the science: ``run_survey(..., analyse=f)``
swaps the per-star analysis (normally the full pipeline) for one of these so the
tests can make a star raise, kill its own worker process, run past its time limit
or report its environment, and check that the survey records it and goes on. The
end-to-end tests in ``test_survey_pipeline.py`` run the real pipeline.

Each function has the analysis signature ``f(task, *, config, seed, out_dir)``;
``config`` is a plain dict of test settings. They live in their own module (not a
test file) so worker processes can import them by name: spawned local workers and
Dask workers receive the parent's ``sys.path``, which includes ``tests/``.
"""

from __future__ import annotations

import json
import os
import signal
import time
from pathlib import Path

import numpy as np


def _log_call(config: dict, task) -> None:
    log = config.get("log")
    if log:
        with open(log, "a", encoding="utf-8") as fh:
            fh.write(f"{task.identifier}\t{os.getpid()}\n")


def _read_flux(task) -> np.ndarray:
    """Load the star's CSV files (time, flux columns); raises ValueError on a bad file."""
    parts = [np.loadtxt(f, delimiter=",", skiprows=1, ndmin=2) for f in task.files]
    data = np.vstack(parts)
    if data.shape[1] < 2 or not np.all(np.isfinite(data)):
        raise ValueError(f"{task.files[0]}: not a light curve")
    return data[:, 1]


def summarise(task, *, config, seed, out_dir) -> None:
    """Write a ``summary.json`` whose numbers depend on the input and the star's seed.

    The "period" is a draw from the star's seeded generator plus the mean flux, so two
    runs agree exactly only when they give the star the same seed and the same data.
    """
    _log_call(config, task)
    flux = _read_flux(task)
    rng = np.random.default_rng(seed)
    pause = config.get("sleep", {}).get(task.identifier, config.get("sleep_all", 0.0))
    if pause:
        time.sleep(pause)
    draws = rng.uniform(1.0, 30.0, size=200) + float(np.mean(flux))
    q = np.percentile(draws, [2.5, 16, 50, 84, 97.5])
    summary = {
        "period": {"median": q[2], "interval_68": [q[1], q[3]], "interval_95": [q[0], q[4]]},
        "amplitude_ppt": {"median": float(np.ptp(flux)) * 1e3 / 2},
        "detected": bool(q[2] > 15),
        "converged": True,
        "baselines": {"lomb_scargle": {"period": q[2] * 0.99}, "acf": {"period": None}},
        "seed": seed,
    }
    (Path(out_dir) / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    (Path(out_dir) / "samples.npy").write_bytes(draws.tobytes())


def kill_once(task, *, config, seed, out_dir) -> None:
    """The star named ``config["victim"]`` kills its own worker the first time it runs."""
    if task.identifier == config["victim"]:
        flag = Path(config["flag"])
        if not flag.exists():
            flag.write_text("killed once\n")
            os.kill(os.getpid(), signal.SIGKILL)
    summarise(task, config=config, seed=seed, out_dir=out_dir)


def kill_always(task, *, config, seed, out_dir) -> None:
    """The star named ``config["victim"]`` kills its worker every time (a poison star)."""
    if task.identifier == config["victim"]:
        _log_call(config, task)
        os.kill(os.getpid(), signal.SIGKILL)
    summarise(task, config=config, seed=seed, out_dir=out_dir)


def wait_to_be_killed(task, *, config, seed, out_dir) -> None:
    """The victim writes its pid to ``config["pidfile"]`` and waits; the test kills it."""
    if task.identifier == config["victim"] and not Path(config["pidfile"]).exists():
        tmp = Path(config["pidfile"] + ".tmp")
        tmp.write_text(str(os.getpid()))
        tmp.rename(config["pidfile"])
        time.sleep(60)
    summarise(task, config=config, seed=seed, out_dir=out_dir)


def ignore_time_limit(task, *, config, seed, out_dir) -> None:
    """Block SIGALRM and sleep: a star stuck where the soft time limit cannot reach it."""
    if task.identifier == config["victim"]:
        signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGALRM})
        time.sleep(60)
    summarise(task, config=config, seed=seed, out_dir=out_dir)


def busy_past_limit(task, *, config, seed, out_dir) -> None:
    """A pure-Python loop that runs until stopped (the soft time limit ends it).

    It first leaves a ``chains.h5`` in its folder, as a sampler's checkpoint would.
    """
    if task.identifier == config["victim"]:
        (Path(out_dir) / "chains.h5").write_bytes(b"chains so far")
        x = 0
        while True:
            x += 1
    summarise(task, config=config, seed=seed, out_dir=out_dir)


def report_environment(task, *, config, seed, out_dir) -> None:
    """Record the worker's environment as it was when the process started."""
    initial = {}
    environ = Path("/proc/self/environ")
    if environ.exists():
        for item in environ.read_bytes().split(b"\0"):
            key, _, value = item.partition(b"=")
            initial[key.decode(errors="replace")] = value.decode(errors="replace")
    summarise(task, config=config, seed=seed, out_dir=out_dir)
    (Path(out_dir) / "environ.json").write_text(json.dumps(initial), encoding="utf-8")


def write_light_curves(folder: Path, names, *, n: int = 200, seed: int = 1) -> list[Path]:
    """Small CSV light curves (time in days, relative flux) for machinery tests."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for k, name in enumerate(names):
        t = np.linspace(0.0, 27.0, n)
        f = 1 + 0.01 * np.sin(2 * np.pi * t / (3 + k)) + 1e-3 * rng.standard_normal(n)
        path = folder / f"{name}.csv"
        np.savetxt(path, np.column_stack([t, f]), delimiter=",", header="time,flux",
                   comments="")
        paths.append(path)
    return paths
