"""Spot emergence, growth and decay, the activity cycle, and differential rotation.

Spots emerge as an inhomogeneous Poisson process whose rate follows the
activity cycle (drawn by thinning; Lewis & Shedler 1979, from memory); each spot's area
grows linearly to its peak and then decays linearly to zero (a linear decay
law; Petrovay & van Driel-Gesztelyi 1997). Emergence latitudes drift towards
the equator over a cycle (Sporer's law, the butterfly diagram), and each spot
is carried round at the angular velocity of its latitude,
``omega(phi) = Omega_eq (1 - shear sin^2 phi)`` (the solar-like law
``omega = A + B sin^2 phi``; Snodgrass & Ulrich 1990).

The light curve of a set of spots is evaluated only where each spot is alive,
as one flat array over all (spot, time) pairs, so the cost grows with the
number of spots present at once, not with the total number of spots.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .params import StarParameters
from .star import spot_deficit, surface_mu

__all__ = [
    "SpotSet",
    "activity_level",
    "angular_velocity",
    "draw_spots",
    "spot_light_curve",
]


@dataclass(frozen=True)
class SpotSet:
    """A set of spots, one entry per spot (all arrays of shape (k,)).

    Attributes
    ----------
    latitude : ndarray of float
        Latitude in degrees (negative: the hemisphere tilted away).
    longitude : ndarray of float
        Longitude in degrees at time 0 (0 faces the observer).
    t_emerge : ndarray of float
        Emergence time in days (same reference as the light curve).
    t_grow, t_decay : ndarray of float
        Durations of the growth and decay phases in days (growth may be 0).
    area_max : ndarray of float
        Peak area as a fraction of the stellar hemisphere.
    """

    latitude: np.ndarray
    longitude: np.ndarray
    t_emerge: np.ndarray
    t_grow: np.ndarray
    t_decay: np.ndarray
    area_max: np.ndarray

    def __post_init__(self):
        arrays = [np.atleast_1d(np.asarray(getattr(self, n), dtype=np.float64)).copy()
                  for n in ("latitude", "longitude", "t_emerge", "t_grow", "t_decay", "area_max")]
        size = arrays[0].size
        if any(a.ndim != 1 or a.size != size for a in arrays):
            raise ValueError("all SpotSet arrays must be one-dimensional and of equal length")
        for name, a in zip(("latitude", "longitude", "t_emerge", "t_grow", "t_decay",
                            "area_max"), arrays, strict=True):
            a.setflags(write=False)
            object.__setattr__(self, name, a)

    def __len__(self) -> int:
        return int(self.latitude.size)

    @property
    def t_end(self) -> np.ndarray:
        """Time each spot vanishes, days."""
        return self.t_emerge + self.t_grow + self.t_decay

    @property
    def lifetime(self) -> np.ndarray:
        """Lifetime of each spot, days."""
        return self.t_grow + self.t_decay

    def area(self, time, index) -> np.ndarray:
        """Area (hemisphere fraction) of spots ``index`` at times ``time`` (same shape)."""
        dt = np.asarray(time) - self.t_emerge[index]
        tg = self.t_grow[index]
        td = self.t_decay[index]
        with np.errstate(divide="ignore", invalid="ignore"):
            rise = np.where(tg > 0, dt / np.where(tg > 0, tg, 1.0), 1.0)
            fall = 1.0 - (dt - tg) / td
        frac = np.where(dt < tg, rise, fall)
        frac = np.where((dt < 0) | (dt > tg + td), 0.0, frac)
        return self.area_max[index] * np.clip(frac, 0.0, 1.0)

    @classmethod
    def empty(cls) -> SpotSet:
        """No spots."""
        z = np.zeros(0)
        return cls(z, z, z, z, z, z)


def angular_velocity(latitude_deg, period: float, shear: float) -> np.ndarray:
    """Sidereal angular velocity (rad/day) at latitude(s) in degrees.

    ``omega = Omega_eq (1 - shear sin^2 phi)`` with ``Omega_eq = 2 pi / period``
    (Snodgrass & Ulrich 1990 law without the ``sin^4`` term).
    """
    s2 = np.sin(np.radians(latitude_deg)) ** 2
    return 2.0 * np.pi / period * (1.0 - shear * s2)


def activity_level(time, params: StarParameters, t0: float) -> np.ndarray:
    """Relative spot-emergence rate (0-1) at ``time`` (days); 1 at cycle maximum.

    The cycle phase is ``cycle_phase + (time - t0) / cycle_period``. During the
    active part of each cycle (phase < 1 - quiet fraction) the level is
    ``sin^2(pi x)`` with ``x`` the fraction of the active part elapsed; in the
    quiet part it is zero. Without a cycle it is 1 everywhere.
    """
    time = np.asarray(time, dtype=np.float64)
    if params.cycle_period <= 0:
        return np.ones_like(time)
    x = _active_fraction(time, params, t0)
    return np.where(np.isnan(x), 0.0, np.sin(np.pi * np.nan_to_num(x)) ** 2)


def _active_fraction(time, params: StarParameters, t0: float) -> np.ndarray:
    phase = np.mod(params.cycle_phase + (time - t0) / params.cycle_period, 1.0)
    active = 1.0 - params.cycle_quiet_fraction
    return np.where(phase < active, phase / active, np.nan)


def draw_spots(
    params: StarParameters, t_start: float, t_stop: float, rng: np.random.Generator
) -> SpotSet:
    """Draw every spot that is alive at some time in ``[t_start, t_stop]``.

    Parameters
    ----------
    params : StarParameters
        The star.
    t_start, t_stop : float
        Time span to cover in days; spots emerge from a burn-in time before
        ``t_start`` so the star starts in its steady state.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    SpotSet
        Possibly empty (null stars, deep cycle minima).
    """
    if not params.spotted or params.emergence_rate <= 0:
        return SpotSet.empty()
    mean_life = params.spot_lifetime
    cv = params.lifetime_spread
    burn = mean_life * (1.0 + 4.0 * cv)
    lo = t_start - burn
    n = rng.poisson(params.emergence_rate * (t_stop - lo))
    t = np.sort(rng.uniform(lo, t_stop, n))
    keep = rng.uniform(size=n) < activity_level(t, params, t_start)  # thinning
    t = t[keep]
    n = t.size
    if cv > 0:
        shape = 1.0 / cv**2
        life = rng.gamma(shape, mean_life / shape, n)
    else:
        life = np.full(n, mean_life)
    grow = params.growth_fraction * life
    decay = life - grow
    area = _draw_areas(params, n, rng)
    lat = _draw_latitudes(params, t, t_start, rng)
    lon = rng.uniform(0.0, 360.0, n)
    alive = t + life >= t_start
    return SpotSet(lat[alive], lon[alive], t[alive], grow[alive], decay[alive], area[alive])


def _draw_areas(params: StarParameters, n: int, rng: np.random.Generator) -> np.ndarray:
    # Log-normal truncated at spot_area_max, by redrawing the (rare) excess values.
    area = params.spot_area_median * np.exp(params.spot_area_sigma * rng.standard_normal(n))
    for _ in range(100):
        bad = area > params.spot_area_max
        if not bad.any():
            break
        area[bad] = params.spot_area_median * np.exp(
            params.spot_area_sigma * rng.standard_normal(int(bad.sum()))
        )
    return np.minimum(area, params.spot_area_max)


def _draw_latitudes(
    params: StarParameters, t: np.ndarray, t0: float, rng: np.random.Generator
) -> np.ndarray:
    n = t.size
    lo, hi = params.latitude_min, params.latitude_max
    if params.cycle_period > 0:
        x = np.nan_to_num(_active_fraction(t, params, t0), nan=1.0)
        centre = hi - (hi - lo) * x  # butterfly: high latitudes first
        lat = np.clip(centre + params.latitude_scatter * rng.standard_normal(n), 0.0, 89.0)
    else:
        lat = rng.uniform(lo, hi, n)
    sign = np.where(rng.uniform(size=n) < 0.5, -1.0, 1.0)
    return sign * lat


def spot_light_curve(
    time,
    spots: SpotSet,
    params: StarParameters,
    *,
    max_pairs: int = 2_000_000,
) -> tuple[np.ndarray, np.ndarray]:
    """Fractional flux deficit from all spots, and each spot's share of it.

    Parameters
    ----------
    time : ndarray of float, shape (n,)
        Sorted times in days.
    spots : SpotSet
        The spots (k of them).
    params : StarParameters
        Star (period, shear, inclination, contrast, limb darkening, spot model).
    max_pairs : int
        Largest number of (spot, time) pairs evaluated at once (memory bound).

    Returns
    -------
    deficit : ndarray of float, shape (n,)
        Fraction of the unspotted flux removed at each time (the relative
        flux is ``1 - deficit``).
    per_spot : ndarray of float, shape (k,)
        Sum over ``time`` of each spot's deficit (used to decide which spots
        carry the signal).
    """
    time = np.asarray(time, dtype=np.float64)
    deficit = np.zeros(time.size)
    per_spot = np.zeros(len(spots))
    if len(spots) == 0 or time.size == 0:
        return deficit, per_spot
    i0 = np.searchsorted(time, spots.t_emerge, side="left")
    i1 = np.searchsorted(time, spots.t_end, side="right")
    counts = np.maximum(i1 - i0, 0)
    omega = angular_velocity(spots.latitude, params.period, params.shear)
    lat = np.radians(spots.latitude)
    lon0 = np.radians(spots.longitude)
    incl = np.radians(params.inclination)
    # Chunks of spots small enough that their (spot, time) pairs fit in memory.
    bounds = np.searchsorted(np.cumsum(counts), np.arange(1, counts.sum() // max_pairs + 1)
                             * max_pairs)
    for chunk in np.split(np.arange(len(spots)), np.unique(bounds)):
        c = counts[chunk]
        total = int(c.sum())
        if total == 0:
            continue
        k = np.repeat(chunk, c)
        starts = np.cumsum(c) - c
        ti = np.arange(total) - np.repeat(starts - i0[chunk], c)
        t = time[ti]
        mu = surface_mu(lat[k], lon0[k] + omega[k] * t, incl)
        d = spot_deficit(mu, spots.area(t, k), contrast=params.contrast, u1=params.u1,
                         u2=params.u2, model=params.spot_model)
        deficit += np.bincount(ti, weights=d, minlength=time.size)
        per_spot += np.bincount(k, weights=d, minlength=len(spots))
    return deficit, per_spot
