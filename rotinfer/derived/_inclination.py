"""Stellar inclination from v = 2 pi R / P and a measured v sin i (Masuda & Winn 2020).

The two velocities are not independent: v sin i is v times sin i. Masuda & Winn (2020,
AJ 159, 81) show that the right posterior for cos i is

    p(cos i | D) ∝ p(cos i) ∫ L_v(v) L_u(v sqrt(1 - cos² i)) p(v) dv,

with p(cos i) uniform on [0, 1] for isotropic spin axes; dividing a v sin i posterior by a
v posterior, or sampling the two independently, is wrong. Here L_v(v) p(v) is represented
by Monte Carlo draws of v (the period posterior times draws of the radius), so the integral
is a mean over draws, and L_u is a Gaussian in the measured v sin i.
"""

from __future__ import annotations

import numpy as np

__all__ = ["cos_inclination_posterior", "sample_cos_inclination"]

_MAX_V_DRAWS = 2000  # draws of v used for the marginal integral
_N_GRID = 2001


def cos_inclination_posterior(
    v_draws, vsini: float, vsini_err: float, *, n_grid: int = _N_GRID, rng=None
) -> tuple[np.ndarray, np.ndarray]:
    """Posterior density of cos i on a grid (Masuda & Winn 2020, eq. for p(cos i | D)).

    Parameters
    ----------
    v_draws : array_like of float, shape (k,)
        Draws of the equatorial velocity in km/s from its posterior given R and P
        (the period posterior and the radius uncertainty); they stand for L_v(v) p(v).
        At most 2000 are used (a random subset when there are more).
    vsini, vsini_err : float
        Measured v sin i and its Gaussian 1-sigma uncertainty in km/s (``vsini_err > 0``).
    n_grid : int
        Grid points, spaced uniformly in i from 0 to 90 degrees so that the grid is dense
        near cos i = 1 where sin i changes fastest (spacing 0.045 degrees by default).
    rng : numpy.random.Generator, optional
        Chooses the subset of ``v_draws`` when there are more than 2000.

    Returns
    -------
    cos_i : ndarray, shape (n_grid,)
        Increasing grid on [0, 1].
    density : ndarray, shape (n_grid,)
        Posterior density of cos i, normalised to unit integral (trapezoid rule). Under the
        uniform prior on cos i this is proportional to the marginal likelihood.

    Raises
    ------
    ValueError
        If ``vsini_err`` is not positive or there are no finite, positive v draws.

    References
    ----------
    Masuda, K. & Winn, J. N. 2020, AJ 159, 81.
    """
    v = np.asarray(v_draws, dtype=float).ravel()
    v = v[np.isfinite(v) & (v > 0)]
    if v.size == 0:
        raise ValueError("no finite, positive draws of v")
    if not (np.isfinite(vsini_err) and vsini_err > 0):
        raise ValueError(f"vsini_err must be positive, got {vsini_err!r}")
    if v.size > _MAX_V_DRAWS:
        rng = np.random.default_rng(rng)
        v = rng.choice(v, size=_MAX_V_DRAWS, replace=False)
    theta = np.linspace(0.0, 0.5 * np.pi, n_grid)
    cos_i = np.cos(theta)[::-1]  # increasing from 0 to 1
    sin_i = np.sqrt(np.clip(1.0 - cos_i**2, 0.0, None))
    log_like = np.empty(n_grid)
    for start in range(0, n_grid, 256):  # bounded memory: 256 x 2000 at a time
        s = sin_i[start : start + 256, None]
        z = (vsini - v[None, :] * s) / vsini_err
        logl = -0.5 * z * z
        top = logl.max(axis=1, keepdims=True)  # log-sum-exp, safe against underflow
        log_like[start : start + 256] = top[:, 0] + np.log(np.exp(logl - top).sum(axis=1))
    density = np.exp(log_like - log_like.max())
    density /= np.trapezoid(density, cos_i)
    return cos_i, density


def sample_cos_inclination(cos_i, density, size: int, rng) -> np.ndarray:
    """Draws of cos i from a gridded density by inverting its piecewise-linear CDF.

    Within each grid cell the draws are uniform, so a flat density gives exactly uniform
    draws (what an uninformative v sin i must give back: the isotropic prior).
    """
    cdf = np.concatenate(
        [[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(cos_i))]
    )
    cdf /= cdf[-1]
    u = rng.uniform(0.0, 1.0, size)
    return np.interp(u, cdf, cos_i)
