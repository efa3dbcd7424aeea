"""Physical parameters of one simulated star."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Literal

from ..errors import ConfigError
from .star import SPOT_MODELS

__all__ = ["GRANULATION_KERNELS", "StarParameters"]

GRANULATION_KERNELS = ("sho", "drw")


def _check(ok: bool, name: str, allowed: str, value) -> None:
    if not ok:
        raise ConfigError(f"star parameter {name} = {value!r} is not allowed; {allowed}")


@dataclass(frozen=True)
class StarParameters:
    """Everything that defines one simulated star (not how it is observed).

    Attributes
    ----------
    period : float
        Equatorial rotation period in days (sidereal).
    shear : float
        Relative differential rotation ``dOmega / Omega_eq``: the angular velocity
        at latitude ``phi`` is ``Omega_eq (1 - shear sin^2 phi)``, i.e. the
        solar-like law ``omega = A + B sin^2 phi`` with ``A = Omega_eq`` and
        ``B = -shear Omega_eq`` (Snodgrass & Ulrich 1990 form without the
        ``sin^4`` term). Positive is solar-like (poles slower); ``-1 < shear < 1``.
    inclination : float
        Angle between the rotation axis and the line of sight in degrees
        (90 = equator-on).
    spotted : bool
        False for a "null" star: noise and flares only, no spots at all.
    spot_lifetime : float
        Mean spot lifetime in days, emergence to disappearance. Individual
        lifetimes are gamma-distributed with coefficient of variation
        ``lifetime_spread``.
    lifetime_spread : float
        Coefficient of variation of individual lifetimes (0 = all equal).
    growth_fraction : float
        Fraction of its life a spot spends growing (area rises linearly, then
        decays linearly to zero, a linear decay law as in Petrovay &
        van Driel-Gesztelyi 1997). 0 < growth_fraction < 1.
    emergence_rate : float
        New spots per day at activity maximum (whole star).
    spot_area_median, spot_area_sigma, spot_area_max : float
        Peak spot areas are log-normal (sunspot-group areas are; Baumann &
        Solanki 2005) with this median (fraction of the stellar hemisphere;
        1e-3 = 1000 millionths of the hemisphere), this width (natural-log
        standard deviation), truncated at ``spot_area_max``.
    contrast : float
        Spot contrast ``1 - I_spot / I_phot`` in the observed band (0 < c <= 1).
    latitude_min, latitude_max : float
        Range of absolute spot latitudes in degrees. With an activity cycle the
        emergence latitude drifts from ``latitude_max`` to ``latitude_min``
        over the active part of each cycle (a butterfly diagram, Sporer's law);
        without one, latitudes are uniform in this range. Both hemispheres.
    latitude_scatter : float
        Standard deviation (deg) of emergence latitudes about the butterfly
        track (cycle only).
    u1, u2 : float
        Quadratic limb-darkening coefficients. Defaults 0.40, 0.26 are Sun-like
        values for a Kepler-like optical band (Claret & Bloemen 2011 tables for
        Teff = 5750 K, log g = 4.5; values from memory, see REFERENCES.md).
    cycle_period : float
        Activity-cycle period in days; 0 means no cycle (constant emergence rate).
    cycle_phase : float
        Cycle phase (0 <= phase < 1) at the first observed time; 0 is the start of
        a cycle (first high-latitude spots), activity peaks at phase
        ``(1 - cycle_quiet_fraction) / 2``.
    cycle_quiet_fraction : float
        Fraction of each cycle with no new spots at all (a deep minimum).
    flare_rate : float
        Flares per day with peak amplitude >= ``flare_amplitude_min``.
    flare_index : float
        Power-law index ``alpha`` of the peak-amplitude distribution,
        ``dN/dA ~ A^-alpha`` (alpha ~ 2 for M dwarfs; REFERENCES.md).
    flare_amplitude_min, flare_amplitude_max : float
        Range of flare peak amplitudes in ppt of the quiescent flux.
    flare_fwhm_min, flare_fwhm_max : float
        Range of flare full widths at half maximum in minutes (log-uniform).
    white_noise : float
        White (photon + read) noise per point, ppt.
    granulation : float
        Standard deviation of the correlated granulation-like noise, ppt.
    granulation_timescale : float
        Its timescale in days: ``1 / omega_0`` of an SHO term with ``Q = 1/sqrt 2``
        (``"sho"``, a Harvey-like profile; Kallinger et al. 2014) or the e-folding
        time of a damped random walk (``"drw"``).
    granulation_kernel : {"sho", "drw"}
        Shape of the correlated noise.
    drift : float
        Typical amplitude of slow instrumental drifts in each segment, ppt.
    spot_model : {"small", "exact"}
        Spot flux treatment (:mod:`rotinfer.simulate.star`).
    category : str
        Free label, e.g. the population class the parameters were drawn from.

    References
    ----------
    Snodgrass, H. B. & Ulrich, R. K. 1990, ApJ, 351, 309 (law in REFERENCES.md).
    Petrovay, K. & van Driel-Gesztelyi, L. 1997, Sol. Phys., 176, 249 (REFERENCES.md).
    Baumann, I. & Solanki, S. K. 2005, A&A, 443, 1061 (from memory).
    Kallinger, T., et al. 2014, A&A, 570, A41 (from memory).
    Davenport, J. R. A., et al. 2014, ApJ, 797, 122 (flare template).
    """

    period: float = 10.0
    shear: float = 0.0
    inclination: float = 90.0
    spotted: bool = True
    spot_lifetime: float = 30.0
    lifetime_spread: float = 0.5
    growth_fraction: float = 0.15
    emergence_rate: float = 0.2
    spot_area_median: float = 1e-3
    spot_area_sigma: float = 0.7
    spot_area_max: float = 0.05
    contrast: float = 0.7
    latitude_min: float = 0.0
    latitude_max: float = 40.0
    latitude_scatter: float = 5.0
    u1: float = 0.40
    u2: float = 0.26
    cycle_period: float = 0.0
    cycle_phase: float = 0.25
    cycle_quiet_fraction: float = 0.0
    flare_rate: float = 0.0
    flare_index: float = 2.0
    flare_amplitude_min: float = 1.0
    flare_amplitude_max: float = 100.0
    flare_fwhm_min: float = 2.0
    flare_fwhm_max: float = 30.0
    white_noise: float = 0.5
    granulation: float = 0.1
    granulation_timescale: float = 0.02
    granulation_kernel: Literal["sho", "drw"] = "sho"
    drift: float = 0.0
    spot_model: Literal["small", "exact"] = "small"
    category: str = "custom"

    def __post_init__(self):
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, float) and not math.isfinite(v):
                raise ConfigError(f"star parameter {f.name} = {v!r} is not allowed; must be finite")
        _check(self.period > 0, "period", "must be > 0 days", self.period)
        _check(-1 < self.shear < 1, "shear", "must be in (-1, 1)", self.shear)
        _check(0 <= self.inclination <= 180, "inclination", "must be 0-180 deg", self.inclination)
        _check(self.spot_lifetime > 0, "spot_lifetime", "must be > 0 days", self.spot_lifetime)
        _check(0 <= self.lifetime_spread <= 2, "lifetime_spread", "must be 0-2",
               self.lifetime_spread)
        _check(0 < self.growth_fraction < 1, "growth_fraction", "must be in (0, 1)",
               self.growth_fraction)
        _check(self.emergence_rate >= 0, "emergence_rate", "must be >= 0 per day",
               self.emergence_rate)
        _check(0 < self.spot_area_median <= self.spot_area_max <= 1, "spot_area_median",
               "need 0 < spot_area_median <= spot_area_max <= 1 (hemisphere fractions)",
               self.spot_area_median)
        _check(self.spot_area_sigma >= 0, "spot_area_sigma", "must be >= 0",
               self.spot_area_sigma)
        _check(0 < self.contrast <= 1, "contrast", "must be in (0, 1]", self.contrast)
        _check(0 <= self.latitude_min <= self.latitude_max <= 90, "latitude_min",
               "need 0 <= latitude_min <= latitude_max <= 90 deg", self.latitude_min)
        _check(self.latitude_scatter >= 0, "latitude_scatter", "must be >= 0 deg",
               self.latitude_scatter)
        # Positive intensity everywhere on the disc (0 <= mu <= 1) for the quadratic law.
        _check(self.u1 + self.u2 < 1 and self.u1 + 2 * self.u2 >= 0, "u1",
               "need u1 + u2 < 1 and u1 + 2 u2 >= 0", (self.u1, self.u2))
        _check(self.cycle_period >= 0, "cycle_period", "must be >= 0 days (0 = no cycle)",
               self.cycle_period)
        _check(0 <= self.cycle_phase < 1, "cycle_phase", "must be in [0, 1)", self.cycle_phase)
        _check(0 <= self.cycle_quiet_fraction < 1, "cycle_quiet_fraction",
               "must be in [0, 1)", self.cycle_quiet_fraction)
        _check(self.flare_rate >= 0, "flare_rate", "must be >= 0 per day", self.flare_rate)
        _check(self.flare_index > 0, "flare_index", "must be > 0", self.flare_index)
        _check(0 < self.flare_amplitude_min <= self.flare_amplitude_max,
               "flare_amplitude_min", "need 0 < min <= max (ppt)", self.flare_amplitude_min)
        _check(0 < self.flare_fwhm_min <= self.flare_fwhm_max, "flare_fwhm_min",
               "need 0 < min <= max (minutes)", self.flare_fwhm_min)
        for name in ("white_noise", "granulation", "drift"):
            _check(getattr(self, name) >= 0, name, "must be >= 0 ppt", getattr(self, name))
        _check(self.granulation_timescale > 0, "granulation_timescale", "must be > 0 days",
               self.granulation_timescale)
        if self.granulation_kernel not in GRANULATION_KERNELS:
            raise ConfigError(
                f"granulation_kernel {self.granulation_kernel!r} is not known; choose one of "
                + ", ".join(GRANULATION_KERNELS)
            )
        if self.spot_model not in SPOT_MODELS:
            raise ConfigError(
                f"spot_model {self.spot_model!r} is not known; choose one of "
                + ", ".join(SPOT_MODELS)
            )

    def period_at(self, latitude_deg):
        """Sidereal rotation period (days) at latitude(s) in degrees, from the shear law."""
        import numpy as np

        s2 = np.sin(np.radians(latitude_deg)) ** 2
        return self.period / (1.0 - self.shear * s2)

    @classmethod
    def sun_like(cls, **changes) -> StarParameters:
        """A star like the Sun near activity maximum, seen equator-on, spots only.

        Values and their sources:

        - period 24.47 d: equatorial sidereal period from the Snodgrass & Ulrich
          (1990) law; shear 0.2: that law's drop to 30 deg latitude extended
          with ``sin^2`` only is ~0.19 [computed from REFERENCES.md];
        - latitudes 5-35 deg (the sunspot belts) and an 11-year cycle
          (common practice);
        - spot lifetimes: half of sunspot groups live under 2 days, 10 % longer
          than 11 days (Petrovay & van Driel-Gesztelyi 1997, REFERENCES.md); the
          groups that dominate the flux are the long-lived large ones, so a mean
          of 10 days with a wide spread;
        - group areas log-normal, median 300 millionths of the hemisphere,
          contrast 0.3 (typical sunspot-group bolometric contrast; from memory);
        - emergence 1.5 groups/day at maximum (from memory; gives a few thousand
          millionths of the hemisphere of spots at once, as at solar maximum).

        Faculae are not modelled, so this is the spot part of solar variability
        only; it gives rotational variability of order 0.1 % (Kopp 2016), the
        order-of-magnitude check in the tests.
        """
        base = dict(
            period=24.47, shear=0.2, inclination=90.0, spot_lifetime=10.0,
            lifetime_spread=1.0, growth_fraction=0.1, emergence_rate=1.5,
            spot_area_median=3e-4, spot_area_sigma=1.0, spot_area_max=5e-3,
            contrast=0.3, latitude_min=5.0, latitude_max=35.0, latitude_scatter=5.0,
            cycle_period=11.0 * 365.25, cycle_phase=0.45, cycle_quiet_fraction=0.1,
            flare_rate=0.0, white_noise=0.0, granulation=0.0, drift=0.0,
            category="sun-like",
        )
        base.update(changes)
        return cls(**base)
