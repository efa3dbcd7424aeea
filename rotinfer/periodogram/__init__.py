"""The periodogram stage: classic period searches and candidate periods for the GP fit.

Two baselines every rotation paper reports beside a Bayesian result:

* the generalised Lomb–Scargle periodogram (astropy), with Baluev (2008) false-alarm
  probabilities and several peaks;
* the autocorrelation function with McQuillan et al. (2013) peak selection.

Their strongest peaks, with halves and doubles, form a :class:`CandidateSet` that starts the
Gaussian-process fit. The gradient-of-the-power-spectrum method (Shapiro et al. 2020) is not
implemented. Beside them, the spectral window (:mod:`.window`) lists the periodicities of
the sampling itself (the day, for ground-based data), at which a period may be an artefact.
"""

from .acf import ACFPeak, ACFResult, autocorrelation, masked_autocorrelation
from .candidates import CandidateSet, PeriodCandidate, build_candidates
from .config import PeriodogramConfig
from .core import ScanResult, available_methods, scan
from .lombscargle import (
    LombScargleResult,
    LSPeak,
    fast_method_kwds,
    frequency_grid,
    lomb_scargle,
)
from .window import (
    WindowPeak,
    gap_periodicity,
    sampling_periodicities,
    spectral_window,
    spectral_window_grid,
    window_peaks,
)

__all__ = [
    "ACFPeak",
    "ACFResult",
    "CandidateSet",
    "LSPeak",
    "LombScargleResult",
    "PeriodCandidate",
    "PeriodogramConfig",
    "ScanResult",
    "WindowPeak",
    "autocorrelation",
    "available_methods",
    "build_candidates",
    "fast_method_kwds",
    "frequency_grid",
    "gap_periodicity",
    "lomb_scargle",
    "masked_autocorrelation",
    "sampling_periodicities",
    "scan",
    "spectral_window",
    "spectral_window_grid",
    "window_peaks",
]
