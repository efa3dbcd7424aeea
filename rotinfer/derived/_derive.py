"""Physics from the period posterior: v_eq, inclination, gyrochronological age, Rossby number."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
from astropy import units as u
from astropy.constants import iau2015
from scipy import stats

from ..errors import ConfigError, InputError
from ._inclination import cos_inclination_posterior, sample_cos_inclination
from ._relations import (
    GYRO_RELATIONS,
    TURNOVER_RELATIONS,
    gyro_age,
    turnover_time_cranmer_saar2011,
    turnover_time_wright2011,
)
from ._types import DerivedQuantity, DerivedResult, StellarParameters

__all__ = ["DEFAULT_RELATIONS", "derive", "equatorial_velocity"]

DEFAULT_RELATIONS = ("barnes2007", "mamajek2008", "angus2015")

# 2 pi R_sun / (1 day) in km/s, with the IAU 2015 Resolution B3 nominal solar radius.
_KMS_PER_RSUN_PER_DAY = float((2.0 * np.pi * iau2015.R_sun / u.day).to_value(u.km / u.s))

# Thresholds for cautions; each cites its source.
CLOSE_BINARY_PERIOD = 7.0  # d; Simonian et al. 2019: 59 % of 1.5-7 d rotators are binaries
SLOW_SEQUENCE_AGE = 600.0  # Myr; Meibom et al. 2011: C-to-I transition 150 (G) to 600 (late K)
SATURATED_ROSSBY = 0.13  # Wright et al. 2011 saturation threshold [memory]
WEAK_BRAKING_ROSSBY = 2.0  # van Saders et al. 2016 [memory]
AGE_OF_UNIVERSE = 13800.0  # Myr; common practice (Planck 2018 gives 13.8 Gyr [memory])

_V_SOURCE = (
    "v = 2 pi R / P with the IAU 2015 Resolution B3 nominal solar radius R_sun = 695,700 km"
)
_I_SOURCE = (
    "Masuda & Winn 2020, AJ 159, 81: p(cos i | D) proportional to the integral over v of "
    "L_v(v) L_u(v sqrt(1 - cos^2 i)) p(v), prior uniform in cos i (isotropic axes); "
    "v from 2 pi R / P"
)
_BINARY_FLAG = (
    "period {p} d is below 7 d: 59 % of 1.5-7 d rotators are photometric "
    "binaries (Simonian et al. 2019), and tidally locked or interacting binaries spin faster "
    "than single stars, so this age may be far too young"
)
_YOUNG_FLAG = (
    "age {t} Myr is below 600 Myr: stars reach the slow-rotator sequence only after about "
    "150 Myr (G) to 600 Myr (late K) (Meibom et al. 2011, ApJ 733, 115 [abstract]); a star "
    "not yet on it has no single age for its period"
)
_SATURATED_FLAG = (
    "Rossby number {ro} (from {rel}) is below 0.13, the saturated regime of Wright et al. 2011 "
    "[threshold from memory]: a fast rotator not on the slow-rotator sequence"
)
_WEAK_BRAKING_FLAG = (
    "Rossby number {ro} (from {rel}) exceeds about 2, where magnetic braking weakens "
    "(van Saders et al. 2016, Nature 529, 181 [memory]); gyrochronology then underestimates ages"
)


def equatorial_velocity(period, radius) -> np.ndarray:
    """Equatorial velocity v = 2 pi R / P in km/s.

    Parameters
    ----------
    period : array_like
        Rotation period in days.
    radius : array_like
        Radius in IAU 2015 nominal solar radii (R_sun = 695,700 km).

    Returns
    -------
    ndarray
        v in km/s.
    """
    return _KMS_PER_RSUN_PER_DAY * np.asarray(radius, dtype=float) / np.asarray(period, float)


def _check_relations(relations: Iterable[str]) -> tuple[str, ...]:
    if isinstance(relations, str):
        relations = (relations,)
    out: list[str] = []
    for name in relations:
        if name not in GYRO_RELATIONS:
            allowed = ", ".join(GYRO_RELATIONS)
            raise ConfigError(
                f"{name!r} is not a known gyrochronology relation; choose from: {allowed}"
            )
        if name not in out:
            out.append(name)
    return tuple(out)


def _check_periods(period_samples) -> np.ndarray:
    try:
        p = np.asarray(period_samples, dtype=float)
    except (TypeError, ValueError):
        raise InputError("period samples", "not an array of numbers") from None
    if p.ndim > 1:
        p = p.ravel()
    if p.ndim == 0:
        p = p.reshape(1)
    if p.size == 0:
        raise InputError("period samples", "empty; at least one period in days is needed")
    bad = ~(np.isfinite(p) & (p > 0))
    if bad.any():
        raise InputError(
            "period samples",
            f"{int(bad.sum())} of {p.size} periods are not finite and positive (days)",
        )
    return p


def _draw_periods(p: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    # Without replacement when the posterior has enough samples: every draw is a distinct
    # posterior sample; otherwise resample with replacement.
    if p.size >= n:
        return rng.choice(p, size=n, replace=False)
    return rng.choice(p, size=n, replace=True)


def _draw(rng, value: float, err: float | None, n: int, *, positive: bool) -> np.ndarray:
    """Gaussian draws, truncated at zero for positive quantities (scipy.stats.truncnorm)."""
    if not err:
        return np.full(n, value)
    if positive:
        a = (0.0 - value) / err
        return stats.truncnorm.rvs(a, np.inf, loc=value, scale=err, size=n, random_state=rng)
    return rng.normal(value, err, n)


def _exact_note(name: str, unit: str, value: float, err: float | None) -> list[str]:
    if err:
        return []
    return [
        f"no uncertainty given for {name} ({value:g} {unit}); it was treated as exact, "
        "so the intervals are too narrow"
    ]


def _fmt(x: float) -> str:
    return f"{x:.3g}"


def derive(
    period_samples,
    stellar: StellarParameters | None,
    *,
    rng=None,
    relations: Iterable[str] = DEFAULT_RELATIONS,
    n_draws: int = 20000,
    coefficient_errors: bool = True,
) -> DerivedResult:
    """Derive physical quantities from a rotation-period posterior and stellar parameters.

    Every quantity is a Monte Carlo over the whole period posterior (never its median),
    Gaussian draws of the stellar parameters (positive ones truncated at zero) and, for
    gyrochronology, the relations' published coefficient uncertainties.

    Quantities, each when its inputs are given:

    * ``equatorial_velocity`` [km/s]: v = 2 pi R / P (radius; IAU 2015 nominal R_sun).
    * ``inclination`` [deg] and ``cos_inclination``: Masuda & Winn 2020 (radius, v sin i
      and its uncertainty).
    * ``turnover_time_wright2011`` [d], ``rossby_wright2011`` (mass): Wright et al. 2011.
    * ``turnover_time_cranmer_saar2011`` [d], ``rossby_cranmer_saar2011`` (Teff):
      Cranmer & Saar 2011, formula from memory.
    * ``gyro_age_<relation>`` [Myr] (B-V colour): Barnes 2007, Mamajek & Hillenbrand 2008,
      Angus et al. 2015.

    Cautions are attached to the quantities they concern: periods under 7 d (close
    binaries, Simonian et al. 2019), ages under 600 Myr or Ro < 0.13 (not yet on the
    slow-rotator sequence), colours outside a relation's calibration range, Ro > 2
    (weakened braking, van Saders et al. 2016), v sin i above v, missing uncertainties.

    Parameters
    ----------
    period_samples : array_like of float, shape (m,)
        Posterior samples of the rotation period in days (m >= 1; one value means the
        period's uncertainty is not propagated, and the results say so).
    stellar : StellarParameters or None
        Stellar parameters; None derives nothing (every quantity is listed as skipped).
    rng : numpy.random.Generator, int or None
        Random generator or seed (``numpy.random.default_rng(rng)``); pass one for
        reproducible output.
    relations : iterable of str
        Gyrochronology relations to apply: any of ``"barnes2007"``, ``"mamajek2008"``,
        ``"angus2015"``.
    n_draws : int
        Monte Carlo draws (>= 100).
    coefficient_errors : bool
        Propagate the relations' published coefficient uncertainties (default True).

    Returns
    -------
    DerivedResult

    Raises
    ------
    InputError
        If the period samples are empty, non-finite or not positive.
    ConfigError
        If a relation name is unknown (the message lists the choices) or ``n_draws < 100``.

    References
    ----------
    Barnes 2007, ApJ 669, 1167; Mamajek & Hillenbrand 2008, ApJ 687, 1264; Angus et al.
    2015, MNRAS 450, 1787; Masuda & Winn 2020, AJ 159, 81; Wright et al. 2011, ApJ 743, 48;
    Cranmer & Saar 2011, ApJ 741, 54; Simonian et al. 2019; Meibom et al. 2011, ApJ 733,
    115; van Saders et al. 2016, Nature 529, 181; IAU 2015 Resolution B3.
    """
    names = _check_relations(relations)
    if isinstance(n_draws, bool) or not isinstance(n_draws, int | np.integer) or n_draws < 100:
        raise ConfigError(f"n_draws must be an integer >= 100, got {n_draws!r}")
    periods = _check_periods(period_samples)
    rng = np.random.default_rng(rng)
    n = int(n_draws)
    P = _draw_periods(periods, n, rng)

    period_notes: list[str] = []
    if periods.size == 1:
        period_notes.append(
            "a single period was given: its uncertainty is not propagated, so the intervals "
            "are too narrow"
        )
    elif periods.size < 100:
        period_notes.append(
            f"only {periods.size} period samples were given; they were resampled with "
            "replacement"
        )

    quantities: list[DerivedQuantity] = []
    skipped: list[tuple[str, str]] = []
    if stellar is None or stellar.is_empty():
        skipped.append(("all", "no stellar parameters given (radius, v sin i, B-V, mass, Teff)"))
        return DerivedResult((), tuple(skipped), stellar, int(periods.size), n)
    s = stellar

    # --- equatorial velocity -------------------------------------------------------------
    v = None
    if s.radius is not None:
        R = _draw(rng, s.radius, s.radius_err, n, positive=True)
        v = equatorial_velocity(P, R)
        flags = _exact_note("the radius", "R_sun", s.radius, s.radius_err)
        quantities.append(
            DerivedQuantity.from_draws(
                "equatorial_velocity",
                "equatorial velocity",
                v,
                "km/s",
                _V_SOURCE,
                flags=flags + period_notes,
                notes=(
                    "the photometric period is that of the spots' latitudes; with solar-like "
                    "differential rotation the true equatorial velocity is somewhat higher "
                    "(common practice)",
                ),
            )
        )
    else:
        skipped.append(("equatorial_velocity", "needs the stellar radius"))

    # --- inclination ---------------------------------------------------------------------
    if v is None or s.vsini is None:
        skipped.append(("inclination", "needs the radius and v sin i with its uncertainty"))
    elif not s.vsini_err:
        skipped.append(
            ("inclination", "needs an uncertainty on v sin i (its likelihood is a Gaussian)")
        )
    else:
        quantities.extend(_inclination(v, s, n, rng, period_notes))

    # --- Rossby numbers --------------------------------------------------------------------
    rossby_for_cautions: tuple[str, float] | None = None
    for key, value, err, func in (
        ("wright2011", s.mass, s.mass_err, turnover_time_wright2011),
        ("cranmer_saar2011", s.teff, s.teff_err, turnover_time_cranmer_saar2011),
    ):
        rel = TURNOVER_RELATIONS[key]
        if value is None:
            what = "mass" if rel.parameter == "mass" else "effective temperature"
            skipped.append((f"rossby_{key}", f"needs the {what}"))
            continue
        x = _draw(rng, value, err, n, positive=True)
        tau = func(x)
        ro = P / tau
        flags = _exact_note(rel.parameter, rel.unit, value, err) + period_notes
        lo, hi = rel.valid_range
        if not lo <= value <= hi:
            flags.append(
                f"{rel.parameter} {value:g} {rel.unit} is outside {lo:g}-{hi:g} {rel.unit}, "
                f"the {rel.valid_range_source}"
            )
        quantities.append(
            DerivedQuantity.from_draws(
                f"turnover_time_{key}",
                f"convective turnover time ({rel.label})",
                tau,
                "d",
                rel.reference,
                flags=flags,
            )
        )
        ro_med = float(np.median(ro))
        ro_flags = list(flags)
        if ro_med > WEAK_BRAKING_ROSSBY:
            ro_flags.append(_WEAK_BRAKING_FLAG.format(ro=_fmt(ro_med), rel=rel.label))
        if ro_med < SATURATED_ROSSBY:
            ro_flags.append(_SATURATED_FLAG.format(ro=_fmt(ro_med), rel=rel.label))
        quantities.append(
            DerivedQuantity.from_draws(
                f"rossby_{key}",
                f"Rossby number ({rel.label})",
                ro,
                "",
                f"Ro = P / tau_c; {rel.reference}",
                flags=ro_flags,
            )
        )
        if rossby_for_cautions is None:
            rossby_for_cautions = (rel.label, ro_med)

    # --- gyrochronology --------------------------------------------------------------------
    if s.bv is None:
        for name in names:
            skipped.append((f"gyro_age_{name}", "needs the (B-V)0 colour"))
    else:
        bv = _draw(rng, s.bv, s.bv_err, n, positive=False)
        p_med = float(np.median(P))
        for name in names:
            q, why = _gyro(
                name, P, bv, s, p_med, rossby_for_cautions, period_notes, coefficient_errors, rng
            )
            if q is None:
                skipped.append((f"gyro_age_{name}", why))
            else:
                quantities.append(q)

    return DerivedResult(tuple(quantities), tuple(skipped), s, int(periods.size), n)


def _inclination(v, s: StellarParameters, n, rng, period_notes) -> list[DerivedQuantity]:
    cos_grid, density = cos_inclination_posterior(v, s.vsini, s.vsini_err, rng=rng)
    cos_i = sample_cos_inclination(cos_grid, density, n, rng)
    inc = np.degrees(np.arccos(cos_i))
    flags = list(period_notes)
    v_med, v_sd = float(np.median(v)), float(np.std(v))
    if s.vsini > v_med:
        z = (s.vsini - v_med) / np.hypot(s.vsini_err, v_sd)
        text = (
            f"v sin i = {_fmt(s.vsini)} +/- {_fmt(s.vsini_err)} km/s exceeds "
            f"v = {_fmt(v_med)} +/- {_fmt(v_sd)} km/s by {z:.1f} sigma"
        )
        if z > 2.0:
            text += (
                " (tension: sin i cannot exceed 1; suspect a period twice the true one, an "
                "underestimated radius, or v sin i inflated by other line broadening)"
            )
        else:
            text += "; consistent with i near 90 deg within the uncertainties"
        flags.append(text)
    # How far the posterior is from the isotropic prior: the density is 1 everywhere if
    # the data say nothing.
    if density.max() < 1.1 and density.min() > 0.9:
        flags.append(
            "the data barely constrain the inclination: its posterior is the isotropic "
            "prior (uniform in cos i) to within 10 %"
        )
    notes = (
        f"grid of {cos_grid.size} points in i; marginal over up to 2000 draws of v; "
        "the prior on v is the one implied by the period posterior and the radius draws",
    )
    return [
        DerivedQuantity.from_draws(
            "inclination", "stellar inclination", inc, "deg", _I_SOURCE, flags=flags,
            notes=notes,
        ),
        DerivedQuantity.from_draws(
            "cos_inclination", "cos(inclination)", cos_i, "", _I_SOURCE, flags=flags,
            notes=notes,
        ),
    ]


def _gyro(name, P, bv, s, p_med, rossby, period_notes, coefficient_errors, rng):
    rel = GYRO_RELATIONS[name]
    n = P.size
    if coefficient_errors:
        a, b, c, nn = (getattr(rel, k).draw(rng, n) for k in "abcn")
        notes = [rel.coefficient_note]
    else:
        a, b, c, nn = (getattr(rel, k).value for k in "abcn")
        notes = ["coefficient uncertainties not propagated (coefficient_errors=False)"]
    age = gyro_age(P, bv, a=a, b=b, c=c, n=nn)
    ok = np.isfinite(age)
    if not ok.any():
        return None, (
            f"(B-V)0 = {s.bv:g} mag is at or below the relation's colour zero point "
            f"c = {rel.c.value:g} mag for every draw"
        )
    flags = _exact_note("B-V", "mag", s.bv, s.bv_err) + list(period_notes)
    frac_bad = 1.0 - ok.mean()
    if frac_bad > 0:
        flags.append(
            f"{100 * frac_bad:.1f} % of the draws had (B-V)0 at or below c "
            f"(relation undefined) and were dropped, which biases the age"
        )
    lo, hi = rel.bv_range
    if not lo <= s.bv <= hi:
        flags.append(
            f"(B-V)0 = {s.bv:g} mag is outside {lo:g}-{hi:g} mag, the calibration range "
            f"({rel.bv_range_source})"
        )
    if p_med < CLOSE_BINARY_PERIOD:
        flags.append(_BINARY_FLAG.format(p=_fmt(p_med)))
    age_ok = age[ok]
    t_med = float(np.median(age_ok))
    if t_med < SLOW_SEQUENCE_AGE:
        flags.append(_YOUNG_FLAG.format(t=_fmt(t_med)))
    if float(np.percentile(age_ok, 97.5)) > AGE_OF_UNIVERSE:
        flags.append(
            "the 95 % interval reaches past the age of the Universe (13.8 Gyr): the age is "
            "barely constrained"
            + (
                " (the published coefficient uncertainties are wide and drawn independently "
                "here, though fitted power-law coefficients are usually correlated)"
                if coefficient_errors
                else ""
            )
        )
    if rossby is None:
        notes.append(
            "no mass or Teff given: the Rossby-number checks (saturation, weakened braking "
            "past Ro ~ 2) could not be made"
        )
    else:
        label, ro = rossby
        if ro > WEAK_BRAKING_ROSSBY:
            flags.append(_WEAK_BRAKING_FLAG.format(ro=_fmt(ro), rel=label))
        if ro < SATURATED_ROSSBY:
            flags.append(_SATURATED_FLAG.format(ro=_fmt(ro), rel=label))
    q = DerivedQuantity.from_draws(
        f"gyro_age_{name}",
        f"gyrochronological age ({rel.label})",
        age_ok,
        "Myr",
        f"P = a [(B-V)0 - c]^b t^n; {rel.reference}",
        flags=flags,
        notes=notes,
    )
    return q, ""
