"""The small set of candidate periods that starts the Gaussian-process fit."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

__all__ = ["CandidateSet", "PeriodCandidate", "build_candidates"]

RELATIONS = ("peak", "half", "double")


@dataclass(frozen=True)
class PeriodCandidate:
    """A candidate rotation period.

    Attributes
    ----------
    period : float
        Period in days.
    score : float
        Credibility in [0, 1], higher is better. A method's own peak scores its strength:
        the Lomb–Scargle normalised power (fraction of variance explained), or for the
        autocorrelation ``min(1, local_peak_height / 2)`` (a noise-free sinusoid has local
        peak height 2). A half or double of a peak scores ``harmonic_weight`` times its
        parent. When candidates from several sources agree (see :func:`build_candidates`),
        their scores combine as ``1 - prod(1 - s_i)``. This is a ranking heuristic, not a
        probability: the sources are not independent.
    method : str
        Method of the highest-scoring source (``"lomb_scargle"``, ``"acf"``).
    relation : str
        How that source's period relates to the method's peak: ``"peak"`` (the peak itself),
        ``"half"`` (half its period) or ``"double"`` (twice its period).
    support : tuple of str
        Every merged source as ``"method:relation"``, highest score first.
    """

    period: float
    score: float
    method: str
    relation: str
    support: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """JSON-ready dictionary (period in days)."""
        return {"period": self.period, "score": self.score, "method": self.method,
                "relation": self.relation, "support": list(self.support)}


@dataclass(frozen=True)
class CandidateSet:
    """Candidate periods, highest score first, all within ``[min_period, max_period]``.

    Attributes
    ----------
    candidates : tuple of PeriodCandidate
        Sorted by decreasing score; no two periods differ by less than ``tolerance``
        (as a fraction of the larger).
    min_period, max_period : float
        The period range searched, in days.
    tolerance : float
        Relative tolerance used to merge candidates.
    """

    candidates: tuple[PeriodCandidate, ...]
    min_period: float
    max_period: float
    tolerance: float = 0.05

    def periods(self) -> np.ndarray:
        """Candidate periods in days, in order of decreasing score."""
        return np.array([c.period for c in self.candidates], dtype=float)

    def __len__(self) -> int:
        return len(self.candidates)

    def __iter__(self):
        return iter(self.candidates)

    def contains(self, period: float, *, rtol: float | None = None) -> bool:
        """Whether some candidate lies within ``rtol`` (default ``tolerance``) of ``period``."""
        rtol = self.tolerance if rtol is None else rtol
        p = self.periods()
        return bool(np.any(np.abs(p - period) <= rtol * np.maximum(p, period)))

    def to_dict(self) -> dict:
        """JSON-ready dictionary (periods in days)."""
        return {"min_period": self.min_period, "max_period": self.max_period,
                "tolerance": self.tolerance,
                "candidates": [c.to_dict() for c in self.candidates]}


def build_candidates(
    peaks: Iterable[tuple[str, float, float]],
    *,
    min_period: float,
    max_period: float,
    harmonic_weight: float,
    tolerance: float,
    max_candidates: int,
) -> CandidateSet:
    """Candidates from methods' peaks, their halves and doubles.

    Parameters
    ----------
    peaks : iterable of (method, period, score)
        Each method's strongest peaks (period in days, score in [0, 1]).
    min_period, max_period : float
        Candidates outside this range (days) are dropped.
    harmonic_weight : float
        Score of a half or double relative to its parent peak.
    tolerance : float
        Two candidates closer than this fraction of the larger period are merged: the
        merged candidate keeps the period, method and relation of the higher-scoring one,
        its score becomes ``1 - prod(1 - s_i)`` and ``support`` lists every source.
    max_candidates : int
        At most this many candidates are kept (highest scores).

    Returns
    -------
    CandidateSet

    Notes
    -----
    Halves and doubles are the classic harmonic traps: two spot groups on opposite
    hemispheres put the strongest periodogram peak at half the rotation period, while a
    light curve periodic at P is also periodic at 2P.
    """
    raw = []
    for method, period, score in peaks:
        if not (np.isfinite(period) and np.isfinite(score)):
            continue
        s = float(np.clip(score, 0.0, 1.0))
        raw.append((s, float(period), method, "peak"))
        raw.append((s * harmonic_weight, 0.5 * float(period), method, "half"))
        raw.append((s * harmonic_weight, 2.0 * float(period), method, "double"))
    raw = [r for r in raw if min_period <= r[1] <= max_period]
    raw.sort(key=lambda r: (-r[0], r[1]))

    groups: list[list[tuple[float, float, str, str]]] = []
    for r in raw:
        for g in groups:
            head = g[0][1]
            if abs(r[1] - head) <= tolerance * max(r[1], head):
                g.append(r)
                break
        else:
            groups.append([r])

    out = []
    for g in groups:
        s, period, method, relation = g[0]
        score = s if len(g) == 1 else 1.0 - float(np.prod([1.0 - x[0] for x in g]))
        support = tuple(dict.fromkeys(f"{x[2]}:{x[3]}" for x in g))
        out.append(PeriodCandidate(period=period, score=score, method=method,
                                   relation=relation, support=support))
    out.sort(key=lambda c: (-c.score, c.period))
    return CandidateSet(candidates=tuple(out[:max_candidates]), min_period=float(min_period),
                        max_period=float(max_period), tolerance=float(tolerance))
