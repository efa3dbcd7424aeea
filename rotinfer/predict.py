"""The Gaussian-process predictive distribution at new times, in bounded memory.

celerite2 computes the predictive *mean* at M new times in O(N + M), but the
predictive *variance* needs a dense N x M matrix of kernel values and its solve
against the data covariance: for a four-year 2-minute light curve (N ~ 10^6) and a
plotting grid of a few thousand times that is tens of gigabytes. :func:`predict`
therefore evaluates the new times in chunks whose N x M work arrays stay below
``max_bytes``; the answer is the same as one dense call (the predictive
distribution at each new time depends only on the data, not on the other new
times). The kernel matrix is filled here, term by term in place, from the
kernel's celerite coefficients: celerite2's own ``predict(..., return_var=True)``
builds about 18 N x M temporaries for the rotation model's three oscillators
(measured with ``benchmarks/bench_memory.py``), which made a 64-MB budget a
600-MB peak.

The predictive equations are the standard ones (Rasmussen & Williams 2006,
eqs. 2.23-2.24): with K the kernel matrix of the data, D the diagonal of the
white noise (``flux_err**2 + jitter**2``), k* the kernel between the data and a
new time and m the mean level,

    mean = m + k*^T (K + D)^-1 (y - m),    var = k(0) - k*^T (K + D)^-1 k*,

i.e. the distribution of the noise-free signal (white noise not added).

References
----------
Rasmussen, C. E. & Williams, C. K. I. 2006, Gaussian Processes for Machine
Learning (MIT Press), section 2.2.
Foreman-Mackey, D., Agol, E., Ambikasaran, S. & Angus, R. 2017, AJ 154, 220
(celerite).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import celerite2
import numpy as np

from .errors import InputError

__all__ = ["Prediction", "chunk_length", "predict", "predict_arrays"]

#: Default memory budget of one chunk's work arrays, bytes (64 MB).
DEFAULT_MAX_BYTES = 64 * 2**20
# Work arrays of one chunk, float64 N x M: while the kernel matrix is filled, the lags,
# the matrix and three scratch arrays (:func:`_cross_covariance`); then the matrix and
# its solve.
_ARRAYS_PER_CHUNK = 5


@dataclass(frozen=True)
class Prediction:
    """The GP predictive distribution of the noise-free flux at some times.

    Attributes
    ----------
    time : ndarray of float64, shape (m,)
        Days, on the light curve's time reference.
    mean : ndarray of float64, shape (m,)
        Predictive mean, relative flux (including the model's mean level).
    sd : ndarray of float64, shape (m,)
        Predictive standard deviation of the noise-free signal, relative flux.
    n_chunks : int
        Number of chunks the times were evaluated in.
    """

    time: np.ndarray
    mean: np.ndarray
    sd: np.ndarray
    n_chunks: int


def chunk_length(n_data: int, *, max_bytes: float = DEFAULT_MAX_BYTES) -> int:
    """Largest number of new times per chunk whose N x M work arrays fit in ``max_bytes``.

    Parameters
    ----------
    n_data : int
        Number of data points N the GP is conditioned on.
    max_bytes : float
        Memory budget of one chunk, bytes.

    Returns
    -------
    int
        At least 1.
    """
    per_time = _ARRAYS_PER_CHUNK * 8 * max(int(n_data), 1)
    return max(1, int(max_bytes // per_time))


def _cross_covariance(coefficients, time, new_time) -> np.ndarray:
    """Kernel values k(|t_n - t*_m|), shape (N, M), from celerite coefficients, in place.

    A celerite kernel is a sum of terms a e^{-c tau} (real) and
    e^{-c tau} (a cos(d tau) + b sin(d tau)) (complex; Foreman-Mackey et al. 2017,
    eq. 7); ``coefficients`` is the tuple ``(ar, cr, ac, bc, cc, dc)`` of
    ``celerite2.terms.Term.get_coefficients``. At most five N x M arrays exist at once.
    """
    ar, cr, ac, bc, cc, dc = (np.atleast_1d(np.asarray(c, dtype=np.float64))
                              for c in coefficients)
    tau = np.abs(np.subtract.outer(time, new_time))
    k = np.zeros_like(tau)
    decay = np.empty_like(tau)
    for a, c in zip(ar, cr, strict=True):
        np.multiply(tau, -c, out=decay)
        np.exp(decay, out=decay)
        decay *= a
        k += decay
    if ac.size:
        phase = np.empty_like(tau)
        sine = np.empty_like(tau)
        for a, b, c, d in zip(ac, bc, cc, dc, strict=True):
            np.multiply(tau, -c, out=decay)
            np.exp(decay, out=decay)
            np.multiply(tau, d, out=phase)
            np.sin(phase, out=sine)
            np.cos(phase, out=phase)
            phase *= a
            sine *= b
            phase += sine
            phase *= decay
            k += phase
    return k


def predict_arrays(kernel, time, flux, variance, new_time, *, mean: float = 0.0,
                   max_bytes: float = DEFAULT_MAX_BYTES,
                   source: str = "<array>") -> Prediction:
    """Predictive mean and standard deviation of a celerite2 GP at ``new_time``, in chunks.

    Parameters
    ----------
    kernel : celerite2.terms.Term
        The covariance of the signal (without the white noise).
    time : array_like, shape (n,)
        Sorted data times, days.
    flux : array_like, shape (n,)
        Data, relative flux.
    variance : array_like, shape (n,)
        White-noise variance of each data point (relative flux squared).
    new_time : array_like, shape (m,)
        Times to predict at, days (any order; the result follows it).
    mean : float
        Constant mean level of the GP, relative flux.
    max_bytes : float
        Memory budget of one chunk's N x M work arrays, bytes.
    source : str
        Name used in error messages.

    Returns
    -------
    Prediction

    Raises
    ------
    InputError
        When the arrays are not one-dimensional of matching length, not finite, or the
        data times are not sorted.
    """
    t = np.ascontiguousarray(time, dtype=np.float64)
    # A writable copy: celerite2 works on the data in place and warns about read-only arrays.
    y = np.array(flux, dtype=np.float64, copy=True, order="C")
    var = np.ascontiguousarray(variance, dtype=np.float64)
    tn = np.ascontiguousarray(new_time, dtype=np.float64)
    if not (t.ndim == y.ndim == var.ndim == tn.ndim == 1 and t.size == y.size == var.size):
        raise InputError(source, "time, flux and variance must be 1-d of equal length")
    if t.size < 1:
        raise InputError(source, "no data to condition the prediction on")
    if not all(np.all(np.isfinite(a)) for a in (t, y, var, tn)):
        raise InputError(source, "non-finite time, flux, variance or prediction time")
    if np.any(np.diff(t) < 0):
        raise InputError(source, "data times must be sorted for the GP prediction")

    gp = celerite2.GaussianProcess(kernel, mean=float(mean))
    gp.compute(t, diag=var, check_sorted=False)
    order = np.argsort(tn, kind="stable")
    sorted_t = tn[order]
    mu = np.empty(tn.size)
    sd = np.empty(tn.size)
    coefficients = kernel.get_coefficients()
    k0 = float(np.sum(coefficients[0]) + np.sum(coefficients[2]))  # k(0): the a's
    step = chunk_length(t.size, max_bytes=max_bytes)
    n_chunks = 0
    for start in range(0, sorted_t.size, step):
        part = sorted_t[start:start + step]
        m = gp.predict(y, t=part)  # O(N + M)
        k_star = _cross_covariance(coefficients, t, part)
        # R&W eq. 2.24: k(0) - k*^T (K + D)^-1 k*, column by column
        v = k0 - np.einsum("nm,nm->m", k_star, gp.apply_inverse(k_star))
        del k_star
        idx = order[start:start + step]
        mu[idx] = m
        # Round-off can make the variance very slightly negative where the data pin it down.
        sd[idx] = np.sqrt(np.clip(v, 0.0, None))
        n_chunks += 1
    for arr in (tn, mu, sd):
        arr.setflags(write=False)
    return Prediction(time=tn, mean=mu, sd=sd, n_chunks=n_chunks)


def predict(model, theta, new_time=None, *,
            max_bytes: float = DEFAULT_MAX_BYTES) -> Prediction:
    """Predictive distribution of a :class:`~rotinfer.model.RotationModel` at ``theta``.

    Parameters
    ----------
    model : RotationModel
        The model (its data, uncertainties and kernel).
    theta : array_like, shape (ndim,)
        Unconstrained parameters, e.g. ``posterior.map_theta``.
    new_time : array_like, shape (m,), optional
        Times (days) to predict at; default: the data times.
    max_bytes : float
        Memory budget of one chunk, bytes (see :func:`predict_arrays`).

    Returns
    -------
    Prediction
        Mean and standard deviation of the noise-free model flux (rotation, background
        and mean level; the white noise and jitter are not included).
    """
    p = model.unpack(theta)
    jitter = p.get("jitter", 0.0)
    variance = np.asarray(model.flux_err, dtype=float) ** 2 + jitter**2
    if not math.isfinite(jitter):
        raise InputError(model.source, "non-finite jitter in the parameters to predict with")
    new_time = model.time if new_time is None else new_time
    # an integrated-out mean enters at its conditional posterior mean, which gives the
    # predictive mean of Rasmussen & Williams (2006) eq. 2.41; its small variance
    # (mean_posterior's sd squared) is left out of ``sd``
    mean, _ = model.mean_posterior(theta)
    # per-night zero-point offsets (the night term) leave at their conditional posterior
    # mean, which keeps the predictive mean exact (RotationModel.night_offsets_posterior);
    # their uncertainty is not added to ``sd``
    flux = model.flux - model.night_offsets_posterior(theta)
    return predict_arrays(model.kernel(theta), model.time, flux, variance, new_time,
                          mean=mean, max_bytes=max_bytes, source=model.source)
