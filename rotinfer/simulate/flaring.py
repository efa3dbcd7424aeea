"""Flares: power-law occurrence and the Davenport et al. (2014) template.

Flare peak amplitudes follow a truncated power law ``dN/dA ~ A^-alpha``
between a minimum and a maximum amplitude (flare frequency distributions are
power laws; alpha ~ 2 for M dwarfs, see REFERENCES.md), times are a Poisson
process, and widths are log-uniform. The shape is the empirical template of
:func:`rotinfer.flares.flare_profile`. For finite exposures the template is
averaged over each exposure exactly, using its integral in closed form
(polynomial rise, double-exponential decay), so a short flare seen at
30-minute cadence has the lower, broader profile real data show.

References
----------
Davenport, J. R. A., et al. 2014, ApJ, 797, 122.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..flares import _DECAY, _RISE, flare_profile
from .params import StarParameters

__all__ = ["FlareSet", "draw_flares", "flare_light_curve", "template_integral"]

# Longest decay evaluated, in FWHM: the slow term 0.30 exp(-0.278 x) is 2e-8 of the peak at 60.
_DECAY_SPAN = 60.0


@dataclass(frozen=True)
class FlareSet:
    """Flares, one entry each (arrays of shape (k,)).

    Attributes
    ----------
    t_peak : ndarray of float
        Peak times, days.
    amplitude : ndarray of float
        Peak relative flux excess (dimensionless).
    fwhm : ndarray of float
        Full width at half maximum, days.
    """

    t_peak: np.ndarray
    amplitude: np.ndarray
    fwhm: np.ndarray

    def __len__(self) -> int:
        return int(np.asarray(self.t_peak).size)


def draw_flares(
    params: StarParameters, t_start: float, t_stop: float, rng: np.random.Generator
) -> FlareSet:
    """Draw the flares peaking in ``[t_start, t_stop]`` (days)."""
    n = rng.poisson(params.flare_rate * max(t_stop - t_start, 0.0))
    t = np.sort(rng.uniform(t_start, t_stop, n))
    a_lo, a_hi = params.flare_amplitude_min * 1e-3, params.flare_amplitude_max * 1e-3
    u = rng.uniform(size=n)
    alpha = params.flare_index
    if abs(alpha - 1.0) < 1e-12:
        amp = a_lo * (a_hi / a_lo) ** u
    else:  # inverse CDF of the truncated power law
        g = 1.0 - alpha
        amp = (a_lo**g + u * (a_hi**g - a_lo**g)) ** (1.0 / g)
    lo, hi = np.log(params.flare_fwhm_min), np.log(params.flare_fwhm_max)
    fwhm = np.exp(rng.uniform(lo, hi, n)) / 1440.0
    return FlareSet(t, amp, fwhm)


def template_integral(x) -> np.ndarray:
    """Integral of the unit-amplitude template from -inf to ``x`` (in FWHM units).

    The derivative of this is :func:`rotinfer.flares.flare_profile` with unit
    amplitude and FWHM (checked against SciPy quadrature in the tests).
    """
    x = np.asarray(x, dtype=np.float64)
    xr = np.clip(x, -1.0, 0.0)
    powers = np.stack([xr ** (k + 1) / (k + 1) for k in range(len(_RISE))])
    rise_at = np.tensordot(np.asarray(_RISE), powers, axes=1)
    rise_m1 = sum(c * (-1.0) ** (k + 1) / (k + 1) for k, c in enumerate(_RISE))
    rise = rise_at - rise_m1
    xd = np.maximum(x, 0.0)
    d0, d1, d2, d3 = _DECAY
    decay = d0 * np.expm1(d1 * xd) / d1 + d2 * np.expm1(d3 * xd) / d3
    return np.where(x < -1.0, 0.0, rise + decay)


def flare_light_curve(time, flares: FlareSet, *, exposure: float = 0.0) -> np.ndarray:
    """Relative flux excess of all flares at ``time``.

    Parameters
    ----------
    time : ndarray of float, shape (n,)
        Sorted mid-exposure times, days.
    flares : FlareSet
        The flares.
    exposure : float
        Exposure time in days; 0 samples the template instantaneously.

    Returns
    -------
    ndarray of float, shape (n,)
    """
    time = np.asarray(time, dtype=np.float64)
    out = np.zeros(time.size)
    if len(flares) == 0 or time.size == 0:
        return out
    half = 0.5 * exposure
    i0 = np.searchsorted(time, flares.t_peak - flares.fwhm - half, side="left")
    i1 = np.searchsorted(time, flares.t_peak + _DECAY_SPAN * flares.fwhm + half, side="right")
    counts = np.maximum(i1 - i0, 0)
    total = int(counts.sum())
    if total == 0:
        return out
    k = np.repeat(np.arange(len(flares)), counts)
    starts = np.cumsum(counts) - counts
    ti = np.arange(total) - np.repeat(starts - i0, counts)
    t = time[ti]
    w = flares.fwhm[k]
    if exposure > 0:
        x_hi = (t + half - flares.t_peak[k]) / w
        x_lo = (t - half - flares.t_peak[k]) / w
        shape = (template_integral(x_hi) - template_integral(x_lo)) / (x_hi - x_lo)
    else:
        shape = flare_profile((t - flares.t_peak[k]) / w, 0.0, 1.0, 1.0)
    return np.bincount(ti, weights=flares.amplitude[k] * shape, minlength=time.size)

