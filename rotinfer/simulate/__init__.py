"""Simulated light curves of spotted, rotating, flaring stars, with the truth recorded.

The forward model (each piece documented with its published source in its module):

- :mod:`~rotinfer.simulate.star` — limb-darkened sphere and circular spots (small-spot
  approximation or exact circular spots; Dorren 1987, Kipping 2012);
- :mod:`~rotinfer.simulate.evolution` — spot emergence, growth and decay, activity cycle,
  butterfly latitudes, differential rotation ``omega = A + B sin^2 phi``;
- :mod:`~rotinfer.simulate.flaring` — power-law flares with the Davenport et al. (2014) template;
- :mod:`~rotinfer.simulate.noise` — white, granulation-like and instrumental noise;
- :mod:`~rotinfer.simulate.observing` — space-mission-like and ground-based sampling;
- :mod:`~rotinfer.simulate.population` — parameters drawn from distributions in TOML.

Star names made by the population generator are invented (the imaginary
"Kestrel survey"); they are not catalogue names.
"""

from .core import TRUTH_UNITS, Components, SimulatedStar, Truth, simulate_star
from .evolution import SpotSet
from .flaring import FlareSet
from .observing import ObservingPattern
from .params import StarParameters
from .population import (
    DEFAULT_POPULATION_TOML,
    PopulationMember,
    draw_population,
    load_population_config,
    star_seed,
)

__all__ = [
    "DEFAULT_POPULATION_TOML",
    "TRUTH_UNITS",
    "Components",
    "FlareSet",
    "ObservingPattern",
    "PopulationMember",
    "SimulatedStar",
    "SpotSet",
    "StarParameters",
    "Truth",
    "draw_population",
    "load_population_config",
    "simulate_star",
    "star_seed",
]
