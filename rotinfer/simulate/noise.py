"""Noise: white, correlated (granulation-like) and instrumental.

Correlated noise is drawn exactly from a celerite kernel with the factorised
covariance (``x = L z`` with ``K = L L^T`` and ``z`` standard normal), which
costs O(n) for any sampling (Foreman-Mackey et al. 2017):

``"sho"``
    A stochastically driven damped harmonic oscillator with ``Q = 1/sqrt 2``,
    whose power spectrum is the Harvey-like profile used for stellar
    granulation (Kallinger et al. 2014; Foreman-Mackey et al. 2017, sec. 4).
``"drw"``
    A damped random walk (Ornstein-Uhlenbeck process), covariance
    ``sigma^2 exp(-|dt| / tau)`` (celerite ``RealTerm``).

Instrumental effects per segment: a flux offset, a slow random quadratic
drift, and (space patterns) a thermal-settling ramp after every data gap, as
seen after downlinks in space photometry (common practice); ground patterns
add per-night zero-point offsets.

References
----------
Foreman-Mackey, D., Agol, E., Ambikasaran, S. & Angus, R. 2017, AJ, 154, 220.
Kallinger, T., et al. 2014, A&A, 570, A41 (from memory).
"""

from __future__ import annotations

import numpy as np
from celerite2 import GaussianProcess, terms

from ..errors import ConfigError
from .observing import ObservingPattern, SampledTimes

__all__ = ["correlated_noise", "instrumental_signal", "white_noise"]


def white_noise(n: int, sigma: float, rng: np.random.Generator) -> np.ndarray:
    """Independent Gaussian noise of standard deviation ``sigma`` (relative flux)."""
    if sigma <= 0:
        return np.zeros(n)
    return sigma * rng.standard_normal(n)


def correlated_noise(
    time, sigma: float, timescale: float, rng: np.random.Generator, *, kernel: str = "sho"
) -> np.ndarray:
    """An exact draw of correlated Gaussian noise at ``time``.

    Parameters
    ----------
    time : ndarray of float, shape (n,)
        Sorted times in days.
    sigma : float
        Standard deviation (relative flux).
    timescale : float
        ``1 / omega_0`` (``"sho"``) or the e-folding time (``"drw"``), days.
    rng : numpy.random.Generator
        Source of randomness.
    kernel : {"sho", "drw"}
        Covariance shape (module docstring).

    Returns
    -------
    ndarray of float, shape (n,)

    Raises
    ------
    ConfigError
        For an unknown ``kernel``.
    """
    time = np.asarray(time, dtype=np.float64)
    if sigma <= 0 or time.size == 0:
        return np.zeros(time.size)
    if kernel == "sho":
        term = terms.SHOTerm(sigma=sigma, w0=1.0 / timescale, Q=1.0 / np.sqrt(2.0))
    elif kernel == "drw":
        term = terms.RealTerm(a=sigma**2, c=1.0 / timescale)
    else:
        raise ConfigError(
            f"correlated-noise kernel {kernel!r} is not known; choose one of sho, drw"
        )
    gp = GaussianProcess(term)
    # A tiny diagonal keeps the factorisation stable for points much closer than the timescale.
    gp.compute(time, diag=np.full(time.size, 1e-10 * sigma**2), check_sorted=False)
    return gp.dot_tril(rng.standard_normal(time.size))


def instrumental_signal(
    sampled: SampledTimes, pattern: ObservingPattern, drift: float, rng: np.random.Generator
) -> np.ndarray:
    """Relative instrumental flux error per point (added to a gain of 1).

    Parameters
    ----------
    sampled : SampledTimes
        Times with segment and chunk indices.
    pattern : ObservingPattern
        Supplies the per-segment and per-night offset amplitudes.
    drift : float
        Typical drift amplitude (relative flux) within a segment.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    ndarray of float, shape (n,)
        Multiply the astrophysical flux by ``1 + this``.
    """
    t, seg, chunk = sampled.time, sampled.segment, sampled.chunk
    out = np.zeros(t.size)
    if t.size == 0:
        return out
    segments = np.unique(seg)
    offsets = pattern.segment_offset * 1e-3 * rng.standard_normal(segments.size)
    out += offsets[np.searchsorted(segments, seg)]
    if drift > 0:
        for s in segments:
            sel = seg == s
            ts = t[sel]
            x = 2.0 * (ts - ts[0]) / max(ts[-1] - ts[0], 1e-12) - 1.0
            c1, c2 = drift * rng.standard_normal(2)
            out[sel] += c1 * x + c2 * (1.5 * x * x - 0.5)  # Legendre P1, P2
        if pattern.kind == "space":
            chunks, first = np.unique(chunk, return_index=True)
            amp = drift * rng.standard_normal(chunks.size)
            tau = rng.uniform(0.2, 1.0, chunks.size)  # settling time, days
            idx = np.searchsorted(chunks, chunk)
            dt = t - t[first][idx]
            out += amp[idx] * np.exp(-dt / tau[idx])
    if pattern.kind == "ground" and pattern.night_offset > 0:
        chunks = np.unique(chunk)
        night = pattern.night_offset * 1e-3 * rng.standard_normal(chunks.size)
        out += night[np.searchsorted(chunks, chunk)]
    return out
