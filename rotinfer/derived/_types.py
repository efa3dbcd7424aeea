"""Frozen types of the derived-physics stage: stellar parameters in, summaries out."""

from __future__ import annotations

import dataclasses
import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import InputError

__all__ = ["DerivedQuantity", "DerivedResult", "StellarParameters"]

# (field, unit, lower bound, bound is strict, accepted column names besides the field name)
_PARAMETERS = (
    ("radius", "R_sun", 0.0, True, ("radius_rsun", "r_star", "rstar")),
    ("vsini", "km/s", 0.0, False, ("v_sin_i", "vsini_kms")),
    ("bv", "mag", None, False, ("b_v", "bv0", "b_v0", "bv_colour", "bv_color")),
    ("mass", "M_sun", 0.0, True, ("mass_msun", "m_star", "mstar")),
    ("teff", "K", 0.0, True, ("teff_k", "t_eff")),
)
_ERROR_SUFFIXES = ("_err", "_error", "_unc")
_MISSING = {"", "nan", "na", "n/a", "none", "null", "--", "-"}


def _column_aliases() -> dict[str, str]:
    aliases: dict[str, str] = {}
    for name, _unit, _lo, _strict, extra in _PARAMETERS:
        for base in (name, *extra):
            aliases[base] = name
            for suffix in _ERROR_SUFFIXES:
                aliases[base + suffix] = name + "_err"
            aliases["e_" + base] = name + "_err"
    return aliases


_ALIASES = _column_aliases()


def _normalise_key(key: str) -> str:
    return str(key).strip().lower().replace("-", "_").replace(" ", "_")


@dataclass(frozen=True)
class StellarParameters:
    """Stellar parameters for derived physics; every field optional.

    Parameters
    ----------
    radius, radius_err : float or None
        Stellar radius and its 1-sigma uncertainty in nominal solar radii (IAU 2015 B3).
    vsini, vsini_err : float or None
        Projected rotation velocity v sin i and its uncertainty in km/s.
    bv, bv_err : float or None
        Dereddened (B-V)0 colour and its uncertainty in mag.
    mass, mass_err : float or None
        Mass and its uncertainty in solar masses.
    teff, teff_err : float or None
        Effective temperature and its uncertainty in K.

    Raises
    ------
    InputError
        For a non-finite or out-of-range value, a negative uncertainty, or an uncertainty
        without its value. A missing uncertainty means "treated as exact"; results say so.
    """

    radius: float | None = None
    radius_err: float | None = None
    vsini: float | None = None
    vsini_err: float | None = None
    bv: float | None = None
    bv_err: float | None = None
    mass: float | None = None
    mass_err: float | None = None
    teff: float | None = None
    teff_err: float | None = None

    def __post_init__(self) -> None:
        for name, unit, lower, strict, _extra in _PARAMETERS:
            value, err = getattr(self, name), getattr(self, name + "_err")
            for key, x in ((name, value), (name + "_err", err)):
                if x is None:
                    continue
                if isinstance(x, bool) or not isinstance(x, numbers.Real):
                    raise InputError("stellar parameters", f"{key} must be a number, got {x!r}")
                if not math.isfinite(x):
                    raise InputError("stellar parameters", f"{key} must be finite, got {x!r}")
                object.__setattr__(self, key, float(x))
            if err is not None and value is None:
                raise InputError("stellar parameters", f"{name}_err given without {name}")
            if err is not None and err < 0:
                raise InputError(
                    "stellar parameters", f"{name}_err must not be negative, got {err} {unit}"
                )
            if value is not None and lower is not None:
                if value < lower or (strict and value == lower):
                    relation = ">" if strict else ">="
                    raise InputError(
                        "stellar parameters",
                        f"{name} must be {relation} {lower:g} {unit}, got {value:g} {unit}",
                    )

    @classmethod
    def from_mapping(
        cls, row: Mapping[str, Any], *, source: str = "stellar parameters"
    ) -> StellarParameters | None:
        """Stellar parameters from a survey-manifest row (a dict of column name to value).

        Column names are matched case-insensitively, with ``-`` and spaces read as ``_``.
        Accepted names (units fixed: R_sun, km/s, mag, M_sun, K):

        ========== ==========================================================
        field      column names
        ========== ==========================================================
        radius     radius, radius_rsun, r_star, rstar
        vsini      vsini, v_sin_i, vsini_kms
        bv         bv, b_v (also "B-V"), bv0, b_v0, bv_colour, bv_color
        mass       mass, mass_msun, m_star, mstar
        teff       teff, teff_k, t_eff
        ========== ==========================================================

        An uncertainty column is any of these names followed by ``_err``, ``_error`` or
        ``_unc``, or preceded by ``e_`` (e.g. ``radius_err``, ``e_teff``, ``B-V_err``).
        Other columns (file names, identifiers...) are ignored. Empty cells, ``nan``,
        ``NA``, ``None`` and ``--`` count as missing.

        Parameters
        ----------
        row : mapping
            One manifest row; values may be numbers or strings.
        source : str
            Where the row comes from, for error messages (e.g. ``"stars.csv row 12"``).

        Returns
        -------
        StellarParameters or None
            None when the row has no stellar parameter at all.

        Raises
        ------
        InputError
            Naming ``source`` and the column, for a value that is not a number, two
            columns for the same parameter, or a value outside its range.
        """
        values: dict[str, float] = {}
        seen: dict[str, str] = {}
        for key, raw in row.items():
            target = _ALIASES.get(_normalise_key(key))
            if target is None:
                continue
            value = _parse_cell(raw, key, source)
            if value is None:
                continue
            if target in seen:
                raise InputError(
                    source, f"columns {seen[target]!r} and {key!r} both give {target}"
                )
            seen[target] = str(key)
            values[target] = value
        if not values:
            return None
        try:
            return cls(**values)
        except InputError as exc:
            raise InputError(source, exc.problem) from None

    def to_dict(self) -> dict[str, float | None]:
        """JSON-ready dict of the parameters (units in the field docs)."""
        return dataclasses.asdict(self)

    def is_empty(self) -> bool:
        return all(v is None for v in dataclasses.asdict(self).values())


def _parse_cell(raw: Any, key: str, source: str) -> float | None:
    if raw is None:
        return None
    if isinstance(raw, str):
        text = raw.strip()
        if text.lower() in _MISSING:
            return None
        try:
            value = float(text)
        except ValueError:
            raise InputError(source, f"column {key!r}: {raw!r} is not a number") from None
    elif isinstance(raw, bool):
        raise InputError(source, f"column {key!r}: {raw!r} is not a number")
    else:
        try:
            value = float(raw)
        except (TypeError, ValueError):
            raise InputError(source, f"column {key!r}: {raw!r} is not a number") from None
    if math.isnan(value):
        return None
    return value


@dataclass(frozen=True)
class DerivedQuantity:
    """Posterior summary of one derived quantity.

    Attributes
    ----------
    name : str
        Key in ``summary.json`` (e.g. ``"equatorial_velocity"``, ``"gyro_age_barnes2007"``).
    label : str
        Words for printing.
    median : float
        Posterior median, in ``unit``.
    interval_68, interval_95 : tuple of float
        Central 68 % (16th-84th percentile) and 95 % (2.5th-97.5th) credible intervals.
    unit : str
        Unit of the numbers (``"km/s"``, ``"deg"``, ``"Myr"``, ``"d"``, ``""`` for none).
    source : str
        Formula and published reference, with provenance tags ([secondary], [memory]...).
    flags : tuple of str
        Cautions in words; a flagged quantity must not be used without reading them.
    notes : tuple of str
        How it was computed (what uncertainties were propagated or held fixed).
    n_draws : int
        Monte Carlo draws behind the summary (finite, valid draws).
    draws : ndarray or None
        Those draws (not written to JSON).
    """

    name: str
    label: str
    median: float
    interval_68: tuple[float, float]
    interval_95: tuple[float, float]
    unit: str
    source: str
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    n_draws: int = 0
    draws: np.ndarray | None = field(default=None, repr=False, compare=False)

    @classmethod
    def from_draws(cls, name, label, draws, unit, source, *, flags=(), notes=()):
        """Summarise Monte Carlo draws (non-finite draws must be removed beforehand)."""
        draws = np.asarray(draws, dtype=float)
        q = np.percentile(draws, [2.5, 16.0, 50.0, 84.0, 97.5])
        return cls(
            name=name,
            label=label,
            median=float(q[2]),
            interval_68=(float(q[1]), float(q[3])),
            interval_95=(float(q[0]), float(q[4])),
            unit=unit,
            source=source,
            flags=tuple(flags),
            notes=tuple(notes),
            n_draws=int(draws.size),
            draws=draws,
        )

    def to_dict(self) -> dict[str, Any]:
        return {
            "label": self.label,
            "median": self.median,
            "interval_68": list(self.interval_68),
            "interval_95": list(self.interval_95),
            "unit": self.unit,
            "source": self.source,
            "flags": list(self.flags),
            "notes": list(self.notes),
            "n_draws": self.n_draws,
        }

    def line(self) -> str:
        u = f" {self.unit}" if self.unit else ""
        lo68, hi68 = self.interval_68
        lo95, hi95 = self.interval_95
        return (
            f"{self.label}: {_fmt(self.median)}{u} "
            f"(68%: {_fmt(lo68)} to {_fmt(hi68)}{u}; 95%: {_fmt(lo95)} to {_fmt(hi95)}{u})"
        )


def _fmt(x: float) -> str:
    """Three significant figures without exponent for ordinary magnitudes."""
    if not math.isfinite(x):
        return str(x)
    if x == 0:
        return "0"
    mag = math.floor(math.log10(abs(x)))
    if mag >= 6 or mag <= -4:
        return f"{x:.3g}"
    return f"{x:.{max(0, 2 - mag)}f}"


# Names and units of every quantity ``derive`` can produce besides the gyro ages.
_QUANTITY_UNITS = {
    "equatorial_velocity": "km/s",
    "inclination": "deg",
    "cos_inclination": "",
    "turnover_time_wright2011": "d",
    "rossby_wright2011": "",
    "turnover_time_cranmer_saar2011": "d",
    "rossby_cranmer_saar2011": "",
}
_FIXED_QUANTITIES = tuple(_QUANTITY_UNITS)
_UNIT_SUFFIX = {"km/s": "kms", "deg": "deg", "d": "d", "Myr": "myr"}


@dataclass(frozen=True)
class DerivedResult:
    """Everything :func:`rotinfer.derived.derive` found, ready for JSON and printing.

    Attributes
    ----------
    quantities : tuple of DerivedQuantity
        The quantities that could be derived, in a fixed order.
    skipped : tuple of (str, str)
        Quantities not derived and why (e.g. ``("inclination", "needs v sin i ...")``).
    stellar : StellarParameters or None
        The inputs used.
    n_period_samples : int
        Length of the period posterior sample given.
    n_draws : int
        Monte Carlo draws requested.
    """

    quantities: tuple[DerivedQuantity, ...]
    skipped: tuple[tuple[str, str], ...]
    stellar: StellarParameters | None
    n_period_samples: int
    n_draws: int

    def __getitem__(self, name: str) -> DerivedQuantity:
        for q in self.quantities:
            if q.name == name:
                return q
        raise KeyError(f"{name!r} was not derived; derived: {', '.join(self.names) or 'none'}")

    def __contains__(self, name: object) -> bool:
        return name in self.names

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(q.name for q in self.quantities)

    @property
    def cautions(self) -> tuple[str, ...]:
        """All flags, each text once, prefixed by the first quantity it belongs to."""
        out: list[str] = []
        seen: set[str] = set()
        for q in self.quantities:
            for f in q.flags:
                if f not in seen:
                    seen.add(f)
                    out.append(f"{q.label}: {f}")
        return tuple(out)

    def to_row(self, *, relations=("barnes2007", "mamajek2008", "angus2015")) -> dict[str, Any]:
        """One flat catalogue row with a fixed set of columns (NaN where not derived).

        For every quantity the package can derive (gyro ages for ``relations``) there are
        three columns ``<name>_<unit>``, ``<name>_<unit>_lo68`` and ``<name>_<unit>_hi68``
        (unit suffix ``kms``, ``deg``, ``d`` or ``myr``; none for dimensionless numbers),
        then ``derived_n_cautions`` (int) and ``derived_cautions`` (text joined by ``" | "``).
        """
        names = [*_FIXED_QUANTITIES, *(f"gyro_age_{r}" for r in relations)]
        by_name = {q.name: q for q in self.quantities}
        row: dict[str, Any] = {}
        for name in names:
            unit = _QUANTITY_UNITS.get(name, "Myr" if name.startswith("gyro_age_") else "")
            col = name + (f"_{_UNIT_SUFFIX[unit]}" if unit else "")
            q = by_name.get(name)
            row[col] = q.median if q else math.nan
            row[col + "_lo68"] = q.interval_68[0] if q else math.nan
            row[col + "_hi68"] = q.interval_68[1] if q else math.nan
        cautions = self.cautions
        row["derived_n_cautions"] = len(cautions)
        row["derived_cautions"] = " | ".join(cautions)
        return row

    def to_dict(self) -> dict[str, Any]:
        """The ``derived`` block of ``summary.json`` (plain JSON types only)."""
        return {
            "inputs": None if self.stellar is None else self.stellar.to_dict(),
            "input_units": {
                "radius": "R_sun", "vsini": "km/s", "bv": "mag", "mass": "M_sun", "teff": "K",
            },
            "n_period_samples": self.n_period_samples,
            "n_draws": self.n_draws,
            "method": (
                "Monte Carlo: draws of the period posterior combined with Gaussian draws of "
                "the stellar parameters (positive parameters truncated at zero) and of the "
                "relations' published coefficient uncertainties"
            ),
            "quantities": {q.name: q.to_dict() for q in self.quantities},
            "skipped": {name: reason for name, reason in self.skipped},
            "cautions": list(self.cautions),
        }

    def lines(self) -> list[str]:
        """Human-readable lines with units: one per quantity, its source and its cautions."""
        out: list[str] = []
        for q in self.quantities:
            out.append(q.line())
            out.append(f"    source: {q.source}")
            out.extend(f"    caution: {f}" for f in q.flags)
        out.extend(f"not derived: {name} ({reason})" for name, reason in self.skipped)
        return out
