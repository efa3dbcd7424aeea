"""Simulate one star: spots, flares, noise and an observing pattern, with the truth kept."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..lightcurve import LightCurve, LightCurveMeta
from .evolution import SpotSet, draw_spots, spot_light_curve
from .flaring import FlareSet, draw_flares, flare_light_curve
from .noise import correlated_noise, instrumental_signal, white_noise
from .observing import ObservingPattern
from .params import StarParameters

__all__ = ["TRUTH_UNITS", "Components", "SimulatedStar", "Truth", "simulate_star"]

# Units of the truth-table columns (written into the ECSV header).
TRUTH_UNITS = {
    "period_eq": "d", "period_min": "d", "period_max": "d", "period_mean": "d",
    "inclination": "deg", "spot_lifetime": "d", "amplitude_ppt": "ppt", "spot_rms_ppt": "ppt",
    "white_noise_ppt": "ppt", "granulation_ppt": "ppt", "granulation_timescale": "d",
    "drift_ppt": "ppt", "noise_rms_ppt": "ppt", "cycle_period": "d", "baseline": "d",
    "cadence_minutes": "min", "time_reference": "d", "contrast": "",
}


@dataclass(frozen=True)
class Truth:
    """What was put into one simulated light curve.

    Attributes
    ----------
    name : str
        Star name (invented).
    category : str
        Population class the parameters came from (``"custom"`` if none).
    seed : int
        Seed the star was simulated with.
    spotted : bool
        False for a null star (no spots at all).
    n_spots : int
        Spots that carry the signal (see ``period_min``); 0 means no
        rotational signal, even for a spotted star (e.g. at cycle minimum).
    period_eq : float
        Equatorial rotation period, days.
    period_min, period_max : float
        Shortest and longest rotation periods (days) of the spots present
        during the observations whose summed flux deficit is at least
        ``weight_floor`` of the largest spot's; NaN when there are none. With
        differential rotation the true period is this range.
    period_mean : float
        Deficit-weighted mean rotation period of those spots, days (NaN if none).
    shear : float
        ``dOmega / Omega_eq`` (see :class:`StarParameters`).
    inclination : float
        Degrees.
    spot_lifetime : float
        Mean spot lifetime parameter, days.
    spot_lifetime_rotations : float
        The same in equatorial rotations.
    amplitude_ppt : float
        5-95 percentile range of the noise-free spot signal at the observed
        times, ppt (0 if unspotted).
    spot_rms_ppt : float
        Standard deviation of the noise-free spot signal, ppt.
    contrast : float
        Spot contrast.
    white_noise_ppt, granulation_ppt, drift_ppt : float
        Noise parameters, ppt.
    granulation_timescale : float
        Days.
    noise_rms_ppt : float
        Measured standard deviation of white plus correlated noise, ppt.
    cycle_period : float
        Activity-cycle period, days (0 = none).
    cycle_phase : float
        Cycle phase at the first observation.
    flare_times : tuple of float
        Peak times (days, light-curve time scale) of flares that were observed:
        some exposure overlaps the flare while it is above ~20 % of its peak.
    flare_amplitudes : tuple of float
        Their peak amplitudes, ppt.
    flare_fwhm : tuple of float
        Their FWHM, minutes.
    pattern : str
        ``"space"`` or ``"ground"``.
    n_points, n_segments : int
        Size of the light curve.
    baseline : float
        Days.
    cadence_minutes : float
        Minutes.
    time_reference : float
        BJD-like time of ``time == 0``, days.
    weight_floor : float
        Threshold used for ``period_min``/``period_max``.
    """

    name: str
    category: str
    seed: int
    spotted: bool
    n_spots: int
    period_eq: float
    period_min: float
    period_max: float
    period_mean: float
    shear: float
    inclination: float
    spot_lifetime: float
    spot_lifetime_rotations: float
    amplitude_ppt: float
    spot_rms_ppt: float
    contrast: float
    white_noise_ppt: float
    granulation_ppt: float
    granulation_timescale: float
    drift_ppt: float
    noise_rms_ppt: float
    cycle_period: float
    cycle_phase: float
    flare_times: tuple[float, ...] = field(repr=False)
    flare_amplitudes: tuple[float, ...] = field(repr=False)
    flare_fwhm: tuple[float, ...] = field(repr=False)
    pattern: str
    n_points: int
    n_segments: int
    baseline: float
    cadence_minutes: float
    time_reference: float
    weight_floor: float

    @property
    def n_flares(self) -> int:
        """Number of observed flares."""
        return len(self.flare_times)

    def to_row(self) -> dict:
        """One row of the truth table: scalars only (flares as a count).

        Units of the columns are in :data:`TRUTH_UNITS`; flare details go in a
        separate per-flare table.
        """
        row = {}
        for name in self.__dataclass_fields__:
            if name.startswith("flare_"):
                continue
            row[name] = getattr(self, name)
        row["n_flares"] = self.n_flares
        return row


@dataclass(frozen=True)
class Components:
    """Noise-free and noise parts of a simulated light curve (arrays of shape (n,)).

    The flux is ``(1 - spot_deficit + flares + granulation) * (1 + instrument) + white``.
    """

    spot_deficit: np.ndarray
    flares: np.ndarray
    granulation: np.ndarray
    instrument: np.ndarray
    white: np.ndarray


@dataclass(frozen=True)
class SimulatedStar:
    """A simulated light curve, its truth, and what it was made of.

    Attributes
    ----------
    lc : LightCurve
        Times in days after ``lc.meta.time_reference`` (BJD-like), relative
        flux, ``flux_err`` (the white-noise level), a segment per
        sector/quarter/season.
    truth : Truth
        What went in.
    params : StarParameters
        The star.
    pattern : ObservingPattern
        How it was observed.
    components : Components
        The separate parts of the flux.
    spots : SpotSet
        Every spot alive during the observations.
    flares : FlareSet
        Every flare drawn (including unobserved ones).
    """

    lc: LightCurve
    truth: Truth
    params: StarParameters
    pattern: ObservingPattern
    components: Components = field(repr=False)
    spots: SpotSet = field(repr=False)
    flares: FlareSet = field(repr=False)


def _seed_sequence(seed) -> tuple[np.random.SeedSequence, int]:
    if isinstance(seed, np.random.SeedSequence):
        entropy = seed.entropy if isinstance(seed.entropy, int) else 0
        return seed, int(entropy)
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise TypeError(f"seed must be a non-negative integer or a SeedSequence, got {seed!r}")
    return np.random.SeedSequence(int(seed)), int(seed)


def simulate_star(
    params: StarParameters,
    pattern: ObservingPattern,
    *,
    seed,
    name: str = "sim-star",
    spots: SpotSet | None = None,
    flares: FlareSet | None = None,
    weight_floor: float = 0.01,
) -> SimulatedStar:
    """Simulate the light curve of one spotted, rotating, flaring star.

    Parameters
    ----------
    params : StarParameters
        The star.
    pattern : ObservingPattern
        When and how it is observed.
    seed : int or numpy.random.SeedSequence
        Everything random derives from this; the observing pattern, spots,
        flares, correlated noise, instrument and white noise use independent
        streams spawned from it, so changing one parameter does not reshuffle
        the others.
    name : str
        Star name recorded as ``lc.meta.identifier`` and in the truth.
    spots, flares : optional
        Use these instead of drawing them (tests and controlled experiments).
    weight_floor : float
        A spot counts towards the true period range if its summed deficit over
        the observed times is at least this fraction of the largest spot's.

    Returns
    -------
    SimulatedStar

    References
    ----------
    See :mod:`rotinfer.simulate.star`, :mod:`~rotinfer.simulate.evolution`,
    :mod:`~rotinfer.simulate.flaring`, :mod:`~rotinfer.simulate.noise` and
    :mod:`~rotinfer.simulate.observing` for the physics and its sources.
    """
    ss, seed_value = _seed_sequence(seed)
    rng_time, rng_spot, rng_flare, rng_gran, rng_inst, rng_white = (
        np.random.default_rng(s) for s in ss.spawn(6)
    )
    sampled = pattern.sample(rng_time)
    time = sampled.time
    n = time.size
    t_first = float(time[0]) if n else pattern.start
    t_last = float(time[-1]) if n else pattern.start

    if spots is None:
        spots = draw_spots(params, t_first, t_last, rng_spot)
        if len(spots):
            seen = (spots.t_end >= t_first) & (spots.t_emerge <= t_last)
            spots = SpotSet(*(getattr(spots, a)[seen] for a in (
                "latitude", "longitude", "t_emerge", "t_grow", "t_decay", "area_max")))
    deficit, per_spot = spot_light_curve(time, spots, params)

    exposure = pattern.exposure_minutes / 1440.0
    if flares is None:
        flares = draw_flares(params, t_first - 0.5, t_last, rng_flare)
    flare_flux = flare_light_curve(time, flares, exposure=exposure)

    gran = correlated_noise(time, params.granulation * 1e-3, params.granulation_timescale,
                            rng_gran, kernel=params.granulation_kernel)
    inst = instrumental_signal(sampled, pattern, params.drift * 1e-3, rng_inst)
    white = white_noise(n, params.white_noise * 1e-3, rng_white)
    flux = (1.0 - deficit + flare_flux + gran) * (1.0 + inst) + white

    meta = LightCurveMeta(
        identifier=name, sources=("<simulated>",), time_reference=pattern.time_reference,
        time_system="BJD_TDB", flux_column="flux", flux_unit="relative", has_flux_err=True,
        notes=(f"simulated by rotinfer.simulate with seed {seed_value}",),
    )
    lc = LightCurve(time=time, flux=flux, flux_err=np.full(n, params.white_noise * 1e-3),
                    segment=sampled.segment, meta=meta)
    truth = _truth(params, pattern, lc, spots, per_spot, deficit, flares, gran + white,
                   name=name, seed=seed_value, weight_floor=weight_floor)
    comps = Components(deficit, flare_flux, gran, inst, white)
    for arr in (deficit, flare_flux, gran, inst, white):
        arr.setflags(write=False)
    return SimulatedStar(lc=lc, truth=truth, params=params, pattern=pattern, components=comps,
                         spots=spots, flares=flares)


def _truth(params, pattern, lc, spots, per_spot, deficit, flares, noise, *, name, seed,
           weight_floor) -> Truth:
    time = lc.time
    n = time.size
    nan = math.nan
    p_min = p_max = p_mean = nan
    n_spots = 0
    if len(spots) and per_spot.max(initial=0.0) > 0:
        carry = per_spot >= weight_floor * per_spot.max()
        periods = params.period_at(spots.latitude[carry])
        w = per_spot[carry]
        n_spots = int(carry.sum())
        p_min, p_max = float(periods.min()), float(periods.max())
        p_mean = float(np.sum(w * periods) / np.sum(w))
    if n and deficit.any():
        lo, hi = np.percentile(-deficit, [5.0, 95.0])
        amplitude = float(hi - lo) * 1e3
        rms = float(np.std(deficit)) * 1e3
    else:
        amplitude = rms = 0.0
    half = 0.5 * pattern.exposure_minutes / 1440.0
    observed = []
    for tp, w in zip(flares.t_peak, flares.fwhm, strict=True):
        i = np.searchsorted(time, tp - w - half)
        observed.append(bool(i < n and time[i] <= tp + 2.0 * w + half))
    obs = np.asarray(observed, dtype=bool)
    return Truth(
        name=name, category=params.category, seed=seed, spotted=params.spotted,
        n_spots=n_spots, period_eq=params.period, period_min=p_min, period_max=p_max,
        period_mean=p_mean, shear=params.shear, inclination=params.inclination,
        spot_lifetime=params.spot_lifetime,
        spot_lifetime_rotations=params.spot_lifetime / params.period,
        amplitude_ppt=amplitude, spot_rms_ppt=rms, contrast=params.contrast,
        white_noise_ppt=params.white_noise, granulation_ppt=params.granulation,
        granulation_timescale=params.granulation_timescale, drift_ppt=params.drift,
        noise_rms_ppt=float(np.std(noise)) * 1e3 if n else 0.0,
        cycle_period=params.cycle_period, cycle_phase=params.cycle_phase,
        flare_times=tuple(float(t) for t in np.asarray(flares.t_peak)[obs]),
        flare_amplitudes=tuple(float(a) * 1e3 for a in np.asarray(flares.amplitude)[obs]),
        flare_fwhm=tuple(float(w) * 1440.0 for w in np.asarray(flares.fwhm)[obs]),
        pattern=pattern.kind, n_points=int(n), n_segments=lc.n_segments, baseline=lc.baseline,
        cadence_minutes=pattern.cadence_minutes, time_reference=pattern.time_reference,
        weight_floor=weight_floor,
    )
