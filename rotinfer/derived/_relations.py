"""Published relations used by :mod:`rotinfer.derived`, with their coefficients and provenance.

Provenance tags follow ``../shared/REFERENCES.md``: **[secondary]** means read in a page
quoting the paper, **[memory]** means recalled without a checked source, **[abstract]** means
read in the paper's own abstract. They are carried into every ``source`` string shown to users.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import ConfigError

__all__ = [
    "GYRO_RELATIONS",
    "TURNOVER_RELATIONS",
    "Coefficient",
    "GyroRelation",
    "TurnoverRelation",
    "available_gyro_relations",
    "gyro_age",
    "gyro_period",
    "turnover_time_cranmer_saar2011",
    "turnover_time_wright2011",
]


@dataclass(frozen=True)
class Coefficient:
    """One coefficient of an empirical relation and its published uncertainty.

    Parameters
    ----------
    value : float
        Published value.
    err_plus, err_minus : float
        Published upper and lower 1-sigma uncertainties (equal for a symmetric error);
        both 0.0 where the coefficient was fixed or no uncertainty is published.
    """

    value: float
    err_plus: float = 0.0
    err_minus: float = 0.0

    @property
    def has_error(self) -> bool:
        return self.err_plus > 0.0 or self.err_minus > 0.0

    def draw(self, rng: np.random.Generator, size: int) -> np.ndarray:
        """Draws from a two-piece normal with mode ``value`` and widths ``err_minus``/``err_plus``.

        For a symmetric error this is an ordinary normal. The two-piece normal for
        asymmetric published errors is common practice; the papers publish no covariances,
        so each coefficient is drawn independently.
        """
        if not self.has_error:
            return np.full(size, self.value)
        z = rng.standard_normal(size)
        return self.value + np.where(z >= 0.0, z * self.err_plus, z * self.err_minus)


@dataclass(frozen=True)
class GyroRelation:
    """A gyrochronology relation P = a [(B-V)0 - c]^b t^n, with P in days and t in Myr.

    Attributes
    ----------
    name : str
        Key used by ``derive(relations=...)`` and ``--gyro-relation``.
    label : str
        Short citation for printing.
    reference : str
        Full reference and the provenance of its coefficients.
    a, b, c, n : Coefficient
        Coefficients with their published uncertainties.
    bv_range : tuple of float
        (B-V)0 range, in mag, over which the relation was calibrated.
    bv_range_source : str
        Where ``bv_range`` comes from, with its provenance tag.
    """

    name: str
    label: str
    reference: str
    a: Coefficient
    b: Coefficient
    c: Coefficient
    n: Coefficient
    bv_range: tuple[float, float]
    bv_range_source: str

    @property
    def coefficient_note(self) -> str:
        with_err = [k for k in "abcn" if getattr(self, k).has_error]
        without = [k for k in "abcn" if not getattr(self, k).has_error]
        text = f"coefficient uncertainties propagated for {', '.join(with_err)}"
        if without:
            text += f"; none published for {', '.join(without)} (held fixed)"
        return text + "; drawn independently (no covariances published)"


GYRO_RELATIONS: dict[str, GyroRelation] = {
    "barnes2007": GyroRelation(
        name="barnes2007",
        label="Barnes 2007",
        reference=(
            "Barnes 2007, ApJ 669, 1167, eq. (3): a = 0.7725 +/- 0.011, b = 0.601 +/- 0.024, "
            "c = 0.40 mag (fixed), n = 0.5189 +/- 0.0070 [secondary]"
        ),
        a=Coefficient(0.7725, 0.011, 0.011),
        b=Coefficient(0.601, 0.024, 0.024),
        c=Coefficient(0.40),
        n=Coefficient(0.5189, 0.0070, 0.0070),
        bv_range=(0.50, 1.40),
        bv_range_source=(
            "late F to early M dwarfs, bluest stars excepted (Barnes 2007 abstract); "
            "B-V 0.50-1.40 mag [memory]"
        ),
    ),
    "mamajek2008": GyroRelation(
        name="mamajek2008",
        label="Mamajek & Hillenbrand 2008",
        reference=(
            "Mamajek & Hillenbrand 2008, ApJ 687, 1264: a = 0.407 +/- 0.021, "
            "b = 0.325 +/- 0.024, c = 0.495 +/- 0.010 mag, n = 0.566 +/- 0.008 [secondary]"
        ),
        a=Coefficient(0.407, 0.021, 0.021),
        b=Coefficient(0.325, 0.024, 0.024),
        c=Coefficient(0.495, 0.010, 0.010),
        n=Coefficient(0.566, 0.008, 0.008),
        bv_range=(0.50, 0.90),
        bv_range_source="F7-K2 dwarfs, B-V 0.5-0.9 mag (Mamajek & Hillenbrand 2008 abstract)",
    ),
    "angus2015": GyroRelation(
        name="angus2015",
        label="Angus et al. 2015",
        reference=(
            "Angus et al. 2015, MNRAS 450, 1787: a = 0.40 (+0.3, -0.05), "
            "b = 0.31 (+0.05, -0.02), n = 0.55 (+0.02, -0.09) [abstract]; "
            "c = 0.45 mag fixed [memory]"
        ),
        a=Coefficient(0.40, 0.3, 0.05),
        b=Coefficient(0.31, 0.05, 0.02),
        c=Coefficient(0.45),
        n=Coefficient(0.55, 0.02, 0.09),
        bv_range=(0.50, 1.20),
        bv_range_source=(
            "Kepler asteroseismic F/G stars, Hyades and Coma Ber members, the Sun "
            "(Angus et al. 2015 abstract); B-V 0.50-1.20 mag [memory]"
        ),
    ),
}


def available_gyro_relations() -> tuple[str, ...]:
    """Names accepted by ``derive(relations=...)`` and ``--gyro-relation``."""
    return tuple(GYRO_RELATIONS)


def _relation(name: str) -> GyroRelation:
    try:
        return GYRO_RELATIONS[name]
    except (KeyError, TypeError):
        allowed = ", ".join(GYRO_RELATIONS)
        raise ConfigError(
            f"{name!r} is not a known gyrochronology relation; choose from: {allowed}"
        ) from None


def gyro_period(bv, age_myr, *, relation: str) -> np.ndarray:
    """Rotation period in days predicted by a gyrochronology relation (central coefficients).

    Parameters
    ----------
    bv : float or array_like
        (B-V)0 colour in mag.
    age_myr : float or array_like
        Age in Myr.
    relation : str
        One of :func:`available_gyro_relations`.

    Returns
    -------
    ndarray
        P = a [(B-V)0 - c]^b t^n in days; NaN where (B-V)0 <= c.

    Raises
    ------
    ConfigError
        If ``relation`` is not known (the message lists the choices).
    """
    rel = _relation(relation)
    x = np.asarray(bv, dtype=float) - rel.c.value
    with np.errstate(invalid="ignore", divide="ignore"):
        out = rel.a.value * np.where(x > 0, x, np.nan) ** rel.b.value
        return out * np.asarray(age_myr, dtype=float) ** rel.n.value


def gyro_age(period, bv, *, a, b, c, n) -> np.ndarray:
    """Invert P = a [(B-V)0 - c]^b t^n for the age t in Myr (element-wise).

    Parameters
    ----------
    period : array_like
        Rotation period in days.
    bv : array_like
        (B-V)0 colour in mag.
    a, b, c, n : float or array_like
        Relation coefficients (P in days, t in Myr).

    Returns
    -------
    ndarray
        t = [P / (a [(B-V)0 - c]^b)]^(1/n) in Myr; NaN where (B-V)0 <= c or a, n <= 0.

    References
    ----------
    Barnes 2007, ApJ 669, 1167 (the functional form and its inversion).
    """
    period = np.asarray(period, dtype=float)
    x = np.asarray(bv, dtype=float) - c
    a = np.asarray(a, dtype=float)
    n = np.asarray(n, dtype=float)
    ok = (x > 0) & (a > 0) & (n > 0) & (period > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        log_t = (np.log(period) - np.log(a) - b * np.log(x)) / n
        return np.where(ok, np.exp(log_t), np.nan)


@dataclass(frozen=True)
class TurnoverRelation:
    """A convective-turnover-time relation tau_c(parameter), in days."""

    name: str
    label: str
    reference: str
    parameter: str  # "mass" [M_sun] or "teff" [K]
    unit: str
    valid_range: tuple[float, float]
    valid_range_source: str


def turnover_time_wright2011(mass) -> np.ndarray:
    """Convective turnover time in days from mass (Wright et al. 2011, ApJ 743, 48).

    log10 tau = 1.16 - 1.49 log10(M/M_sun) - 0.54 log10^2(M/M_sun)  [secondary].

    Parameters
    ----------
    mass : array_like
        Stellar mass in solar masses (> 0).

    Returns
    -------
    ndarray
        tau_c in days; NaN for non-positive mass.
    """
    m = np.asarray(mass, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        lm = np.log10(np.where(m > 0, m, np.nan))
        return 10.0 ** (1.16 - 1.49 * lm - 0.54 * lm**2)


def turnover_time_cranmer_saar2011(teff) -> np.ndarray:
    """Convective turnover time in days from effective temperature (from memory).

    tau_c = 314.24 exp[-(Teff / 1952.5 K) - (Teff / 6250 K)^18] + 0.002 days, the fit of
    Cranmer & Saar 2011 (ApJ 741, 54) to the turnover times of Gunn et al. 1998. The
    formula and its coefficients are recalled **from memory** and not checked against the
    paper; outputs using it say so.

    Parameters
    ----------
    teff : array_like
        Effective temperature in K (> 0).

    Returns
    -------
    ndarray
        tau_c in days; NaN for non-positive temperature.
    """
    t = np.asarray(teff, dtype=float)
    t = np.where(t > 0, t, np.nan)
    return 314.24 * np.exp(-(t / 1952.5) - (t / 6250.0) ** 18) + 0.002


TURNOVER_RELATIONS: dict[str, TurnoverRelation] = {
    "wright2011": TurnoverRelation(
        name="wright2011",
        label="Wright et al. 2011",
        reference=(
            "Wright et al. 2011, ApJ 743, 48: log tau = 1.16 - 1.49 log(M/M_sun) "
            "- 0.54 log^2(M/M_sun) days [secondary]; no coefficient uncertainties propagated"
        ),
        parameter="mass",
        unit="M_sun",
        valid_range=(0.09, 1.36),
        valid_range_source="mass range of the Wright et al. 2011 sample [memory]",
    ),
    "cranmer_saar2011": TurnoverRelation(
        name="cranmer_saar2011",
        label="Cranmer & Saar 2011",
        reference=(
            "Cranmer & Saar 2011, ApJ 741, 54: tau = 314.24 exp[-(Teff/1952.5 K) "
            "- (Teff/6250 K)^18] + 0.002 days [from memory, unverified]; "
            "no coefficient uncertainties propagated"
        ),
        parameter="teff",
        unit="K",
        valid_range=(3300.0, 7000.0),
        valid_range_source="Teff range of the fitted turnover times [memory]",
    ),
}
