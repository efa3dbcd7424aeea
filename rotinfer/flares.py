"""The empirical white-light flare template of Davenport et al. (2014).

Used by the simulator to make flares and by the tests of flare rejection.
"""

from __future__ import annotations

import numpy as np

__all__ = ["flare_profile"]

# Davenport et al. 2014, ApJ 797, 122, eqs. (1)-(4): polynomial rise and
# double-exponential decay in t_half = (t - t_peak) / FWHM.
_RISE = (1.0, 1.94053, -0.175084, -2.24588, -1.12498)
_DECAY = (0.689008, -1.60053, 0.302963, -0.278318)


def flare_profile(time, t_peak: float, fwhm: float, amplitude: float) -> np.ndarray:
    """Flux excess of one flare following the Davenport et al. (2014) template.

    Parameters
    ----------
    time : array_like of float, shape (n,)
        Times in days.
    t_peak : float
        Time of the flare peak in days.
    fwhm : float
        Full width at half maximum in days (> 0).
    amplitude : float
        Peak relative flux excess (dimensionless, e.g. 0.01 for 1 %).

    Returns
    -------
    ndarray of float, shape (n,)
        Relative flux excess; zero before ``t_peak - fwhm`` and positive during the decay.

    Raises
    ------
    ValueError
        If ``fwhm`` is not positive.

    References
    ----------
    Davenport, J. R. A., et al. 2014, ApJ, 797, 122.
    """
    if not fwhm > 0:
        raise ValueError(f"fwhm must be positive, got {fwhm!r}")
    x = (np.asarray(time, dtype=np.float64) - t_peak) / fwhm
    out = np.zeros_like(x)
    rise = (x >= -1.0) & (x <= 0.0)
    xr = x[rise]
    out[rise] = _RISE[0] + xr * (_RISE[1] + xr * (_RISE[2] + xr * (_RISE[3] + xr * _RISE[4])))
    dec = x > 0.0
    xd = x[dec]
    out[dec] = _DECAY[0] * np.exp(_DECAY[1] * xd) + _DECAY[2] * np.exp(_DECAY[3] * xd)
    return amplitude * out
