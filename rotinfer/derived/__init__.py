"""Physics from the period posterior: equatorial velocity, inclination, gyrochronological
age and Rossby number, each with its published source and cautions.

Use :func:`derive` with the period posterior samples (days) and a
:class:`StellarParameters`; it returns a :class:`DerivedResult` whose ``to_dict()`` is the
``derived`` block of ``summary.json`` and whose ``lines()`` are for printing.
"""

from ._derive import DEFAULT_RELATIONS, derive, equatorial_velocity
from ._inclination import cos_inclination_posterior, sample_cos_inclination
from ._relations import (
    GYRO_RELATIONS,
    TURNOVER_RELATIONS,
    available_gyro_relations,
    gyro_age,
    gyro_period,
    turnover_time_cranmer_saar2011,
    turnover_time_wright2011,
)
from ._types import DerivedQuantity, DerivedResult, StellarParameters

__all__ = [
    "DEFAULT_RELATIONS",
    "GYRO_RELATIONS",
    "TURNOVER_RELATIONS",
    "DerivedQuantity",
    "DerivedResult",
    "StellarParameters",
    "available_gyro_relations",
    "cos_inclination_posterior",
    "derive",
    "equatorial_velocity",
    "gyro_age",
    "gyro_period",
    "sample_cos_inclination",
    "turnover_time_cranmer_saar2011",
    "turnover_time_wright2011",
]
