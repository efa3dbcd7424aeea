"""Method dispatch for the periodogram stage: :func:`scan` and :func:`available_methods`."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import ConfigError, InputError
from ..lightcurve import PreparedLightCurve
from .acf import ACFResult, autocorrelation
from .candidates import CandidateSet, build_candidates
from .config import PeriodogramConfig
from .lombscargle import LombScargleResult, lomb_scargle
from .window import WindowPeak, sampling_periodicities

__all__ = ["ScanResult", "available_methods", "scan"]

_MIN_POINTS = 10


@dataclass(frozen=True)
class _Search:
    """What every method needs, validated once in :func:`scan`."""

    time: np.ndarray
    flux: np.ndarray
    flux_err: np.ndarray
    min_period: float
    max_period: float
    cadence: float
    bin_width: float
    config: PeriodogramConfig


def _run_lomb_scargle(s: _Search) -> LombScargleResult:
    return lomb_scargle(s.time, s.flux, s.flux_err, min_period=s.min_period,
                        max_period=s.max_period, config=s.config)


def _run_acf(s: _Search) -> ACFResult:
    return autocorrelation(s.time, s.flux, min_period=s.min_period, max_period=s.max_period,
                           cadence=s.cadence, bin_width=s.bin_width, config=s.config)


# The table of methods: name -> function of the validated inputs.
_METHODS: dict[str, Callable[[_Search], object]] = {
    "lomb_scargle": _run_lomb_scargle,
    "acf": _run_acf,
}


def available_methods() -> tuple[str, ...]:
    """Names accepted by ``scan(..., methods=...)``.

    The gradient-of-the-power-spectrum method (Shapiro et al. 2020) is not implemented.
    """
    return tuple(_METHODS)


@dataclass(frozen=True)
class ScanResult:
    """Results of the periodogram stage for one light curve.

    Attributes
    ----------
    lomb_scargle : LombScargleResult or None
        Lomb–Scargle periodogram and peaks (None if not run).
    acf : ACFResult or None
        Autocorrelation function and period (None if not run).
    candidates : CandidateSet
        Candidate periods for the Gaussian-process fit.
    identifier : str
        Star identifier from the light curve's metadata.
    min_period, max_period : float
        Period range searched, in days (the minimum raised to the cadence limit if needed).
    notes : tuple of str
        Human-readable notes (e.g. the range adjusted to the cadence).
    window : tuple of WindowPeak
        Periodicities of the sampling itself within the searched range: spectral-window
        peaks of at least ``[periodogram] window_threshold`` (strongest first), then the
        spacing of regularly recurring gaps when it is not one of them.
    """

    lomb_scargle: LombScargleResult | None
    acf: ACFResult | None
    candidates: CandidateSet
    identifier: str = ""
    min_period: float = float("nan")
    max_period: float = float("nan")
    notes: tuple[str, ...] = ()
    window: tuple[WindowPeak, ...] = ()

    def to_dict(self) -> dict:
        """JSON-ready dictionary without the big arrays; periods and lags in days."""
        return {
            "identifier": self.identifier,
            "min_period": self.min_period,
            "max_period": self.max_period,
            "lomb_scargle": None if self.lomb_scargle is None else self.lomb_scargle.to_dict(),
            "acf": None if self.acf is None else self.acf.to_dict(),
            "candidates": [c.to_dict() for c in self.candidates.candidates],
            "window": [p.to_dict() for p in self.window],
            "notes": list(self.notes),
        }


def scan(
    prepared: PreparedLightCurve,
    *,
    methods: Sequence[str] = ("lomb_scargle", "acf"),
    config: PeriodogramConfig | None = None,
) -> ScanResult:
    """Run the classic period searches on a prepared light curve.

    Parameters
    ----------
    prepared : PreparedLightCurve
        Cleaned light curve with its period range (days) and cadence (days).
    methods : sequence of str, or str
        Any of :func:`available_methods` (``"lomb_scargle"``, ``"acf"``); a single name is
        also accepted.
    config : PeriodogramConfig, optional
        Options; defaults documented in ``configs/default.toml``.

    Returns
    -------
    ScanResult

    Raises
    ------
    ConfigError
        If a method is not one of :func:`available_methods` (the message lists them).
    InputError
        If the light curve has too few finite points, non-positive uncertainties, or a
        period range that is empty once the minimum is raised to the cadence limit.

    Notes
    -----
    The shortest period searched is ``max(prepared.min_period,
    config.min_cadences_per_period * prepared.cadence)``: signals faster than the cadence
    limit cannot be told from their aliases. The candidate set takes the
    ``candidates_per_method`` strongest Lomb–Scargle peaks and the autocorrelation period
    (when reliable), each with its half and double, scored as :class:`PeriodCandidate`
    describes. ``window`` lists the sampling's own periodicities
    (:func:`~rotinfer.periodogram.window.sampling_periodicities`), against which the
    summary checks the posterior period.

    References
    ----------
    See :func:`~rotinfer.periodogram.lombscargle.lomb_scargle` and
    :func:`~rotinfer.periodogram.acf.autocorrelation`.
    """
    config = PeriodogramConfig() if config is None else config
    if isinstance(methods, str):
        methods = (methods,)
    unknown = [m for m in methods if m not in _METHODS]
    if unknown or not methods:
        raise ConfigError(
            f"{unknown[0]!r} is not a recognised period-search method; "
            f"choose from: {', '.join(available_methods())}" if unknown else
            f"no period-search method given; choose from: {', '.join(available_methods())}"
        )
    search, notes = _validate(prepared, config)

    ls = _METHODS["lomb_scargle"](search) if "lomb_scargle" in methods else None
    acf = _METHODS["acf"](search) if "acf" in methods else None

    peaks = []
    if ls is not None:
        peaks += [("lomb_scargle", p.period, p.power)
                  for p in ls.peaks[: config.candidates_per_method]]
    if acf is not None and acf.reliable:
        peaks.append(("acf", acf.period, min(1.0, acf.local_peak_height / 2.0)))
    candidates = build_candidates(
        peaks, min_period=search.min_period, max_period=search.max_period,
        harmonic_weight=config.harmonic_weight, tolerance=config.dedup_tolerance,
        max_candidates=config.max_candidates,
    )
    window = sampling_periodicities(search.time, cadence=search.cadence,
                                    min_period=search.min_period,
                                    max_period=search.max_period, config=config)
    return ScanResult(
        lomb_scargle=ls, acf=acf, candidates=candidates,
        identifier=prepared.lc.meta.identifier, min_period=search.min_period,
        max_period=search.max_period, notes=tuple(notes), window=window,
    )


def _validate(prepared: PreparedLightCurve, config: PeriodogramConfig) -> tuple[_Search, list]:
    lc = prepared.lc
    source = lc.meta.sources[0] if lc.meta.sources else None
    time, flux = lc.time, lc.flux
    err = lc.flux_err if lc.flux_err is not None else np.full(time.size, np.nan)
    good = np.isfinite(time) & np.isfinite(flux)
    if good.sum() < _MIN_POINTS:
        raise InputError(source, f"only {int(good.sum())} finite points; the period search "
                                 f"needs at least {_MIN_POINTS}")
    if lc.flux_err is None or not np.all(np.isfinite(err[good]) & (err[good] > 0)):
        raise InputError(source, "flux uncertainties must be finite and positive for the "
                                 "period search (prepare() provides them)")
    time, flux, err = time[good], flux[good], err[good]
    if np.ptp(flux) == 0:
        raise InputError(source, "flux is constant; there is no variability to search")
    order = np.argsort(time, kind="stable")
    time, flux, err = time[order], flux[order], err[order]
    baseline = float(time[-1] - time[0])
    cadence = float(prepared.cadence)
    if not (np.isfinite(cadence) and cadence > 0):
        cadence = float(np.median(np.diff(time)))
    notes = []
    min_period = float(prepared.min_period)
    limit = config.min_cadences_per_period * cadence
    if min_period < limit:
        notes.append(f"minimum period raised from {min_period:.4g} d to {limit:.4g} d "
                     f"({config.min_cadences_per_period:g} x cadence {cadence:.4g} d)")
        min_period = limit
    max_period = float(prepared.max_period)
    if not (np.isfinite(max_period) and max_period > min_period and baseline > 0):
        raise InputError(source, f"empty period range {min_period:.4g}-{max_period:.4g} d "
                                 f"for a {baseline:.4g} d light curve with cadence "
                                 f"{cadence:.4g} d")
    return _Search(time=time, flux=flux, flux_err=err, min_period=min_period,
                   max_period=max_period, cadence=cadence,
                   bin_width=float(prepared.bin_width), config=config), notes
