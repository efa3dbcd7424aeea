"""The simulator's star: limb-darkened disc, spots, differential rotation, Sun-like variability.

Each check names its outside reference: an analytic result, SciPy quadrature, astropy's
Lomb-Scargle periodogram, or a published value from ../shared/REFERENCES.md.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from astropy.timeseries import LombScargle
from scipy import integrate

from rotinfer.errors import ConfigError
from rotinfer.simulate import ObservingPattern, SpotSet, StarParameters, simulate_star
from rotinfer.simulate.evolution import angular_velocity, spot_light_curve
from rotinfer.simulate.star import cap_flux, disc_flux, intensity, spot_deficit

LIMB = [(0.40, 0.26), (0.0, 0.0), (0.6, 0.1), (0.2, 0.5), (0.9, -0.3)]


@pytest.mark.parametrize(("u1", "u2"), LIMB)
def test_unspotted_disc_flux_against_scipy_quadrature(u1, u2):
    # Analytic pi (1 - u1/3 - u2/6) (quadratic law) against SciPy's integral of I over the
    # projected disc, int_0^1 I(sqrt(1 - r^2)) 2 pi r dr.
    numeric, _ = integrate.quad(
        lambda r: intensity(np.sqrt(1.0 - r * r), u1, u2) * 2.0 * np.pi * r, 0.0, 1.0,
        epsabs=1e-13, epsrel=1e-12,
    )
    assert disc_flux(u1, u2) == pytest.approx(numeric, rel=1e-6, abs=0)
    # The exact cap integrator over a whole visible hemisphere, and over the whole sphere
    # seen from anywhere, must give the same disc flux.
    assert float(cap_flux(1.0, np.pi / 2, u1, u2)) == pytest.approx(numeric, rel=1e-6)
    whole = cap_flux(np.array([-0.9, -0.3, 0.0, 0.4, 1.0]), np.pi, u1, u2)
    np.testing.assert_allclose(whole, numeric, rtol=1e-6)


def _brute_cap(mu_c, alpha, u1, u2):
    # SciPy quadrature of I(mu) mu over the visible part of a spherical cap, as nested 1-D
    # integrals in cap-centred coordinates (theta from the centre, azimuth psi). The limb
    # crossing is only passed as a breakpoint hint so the kink does not slow quad down.
    sb = math.sqrt(1.0 - mu_c**2)

    def inner(theta):
        a, b = math.cos(theta) * mu_c, math.sin(theta) * sb

        def f(psi):
            mu = a + b * math.cos(psi)
            return mu * (1.0 - u1 * (1.0 - mu) - u2 * (1.0 - mu) ** 2) if mu > 0 else 0.0

        hint = [math.acos(-a / b)] if b > 0 and abs(a) < b else None
        val, _ = integrate.quad(f, 0.0, math.pi, points=hint, epsabs=1e-14, epsrel=1e-12,
                                limit=200)
        return 2.0 * val * math.sin(theta)

    val, _ = integrate.quad(inner, 0.0, alpha, epsabs=1e-14, epsrel=1e-11, limit=200)
    return val


@pytest.mark.parametrize(
    ("mu_c", "alpha"),
    [(0.5, 0.3), (0.05, 0.4), (-0.1, 0.3), (0.9, 1.2), (-0.5, 1.5), (0.97, 0.08)],
)
def test_exact_spot_flux_against_scipy_dblquad(mu_c, alpha):
    # Dorren 1987 / Kipping 2012 geometry (partly behind the limb included), evaluated
    # independently by SciPy's 2-D quadrature over the cap.
    u1, u2 = 0.40, 0.26
    ref = _brute_cap(mu_c, alpha, u1, u2)
    assert float(cap_flux(mu_c, alpha, u1, u2)) == pytest.approx(ref, rel=1e-6)


def test_small_spot_at_disc_centre_matches_analytic_deficit():
    # Analytic: deficit = contrast x (projected area / disc area) x I(1) / <I>, with
    # <I> = (1 - u1/3 - u2/6) I(1) the disc-averaged intensity (quadratic law).
    u1, u2, c = 0.40, 0.26, 0.7
    f = 1e-5  # area as a fraction of the hemisphere; cap of angular radius arccos(1 - f)
    alpha = np.arccos(1.0 - f)
    projected = np.sin(alpha) ** 2  # disc of radius sin(alpha) over the unit disc
    expected = c * projected * 1.0 / (1.0 - u1 / 3.0 - u2 / 6.0)
    for model in ("small", "exact"):
        got = float(spot_deficit(1.0, f, contrast=c, u1=u1, u2=u2, model=model))
        assert got == pytest.approx(expected, rel=1e-4), model


def test_large_spot_at_disc_centre_matches_closed_form():
    # Analytic: a cap centred on the disc covers r < sin(alpha); its flux is
    # 2 pi int_{cos alpha}^1 mu I(mu) dmu, a polynomial integral done here by hand.
    u1, u2 = 0.5, 0.2
    alpha = 0.6
    a = np.cos(alpha)
    k1, k2, k3 = 1 - u1 - u2, u1 + 2 * u2, -u2

    def prim(x):
        return k1 * x**2 / 2 + k2 * x**3 / 3 + k3 * x**4 / 4

    expected = 2 * np.pi * (prim(1.0) - prim(a))
    assert float(cap_flux(1.0, alpha, u1, u2)) == pytest.approx(expected, rel=1e-10)


def test_small_spot_approximation_converges_to_exact():
    # Dorren 1987: the small-spot limit. The relative error shrinks like the spot's
    # angular size squared (common practice: a first-order expansion in area).
    mu = np.linspace(0.1, 1.0, 10)
    errs = []
    for f in (1e-3, 1e-4):
        small = spot_deficit(mu, f, contrast=1.0, u1=0.4, u2=0.26, model="small")
        exact = spot_deficit(mu, f, contrast=1.0, u1=0.4, u2=0.26, model="exact")
        errs.append(np.max(np.abs(small / exact - 1.0)))
    assert errs[0] < 0.05
    assert errs[1] < errs[0] / 5.0


def test_spot_behind_the_limb_is_invisible():
    # Geometry (common practice): a point is visible only where mu > 0.
    d = spot_deficit(np.array([-0.5, -1e-9, 0.0]), 1e-3, contrast=1.0, u1=0.4, u2=0.26)
    np.testing.assert_array_equal(d, 0.0)


def test_unknown_spot_model_lists_choices():
    with pytest.raises(ConfigError, match="choose one of small, exact"):
        spot_deficit(1.0, 1e-3, contrast=1.0, u1=0.4, u2=0.26, model="tiny")


def _quiet(**changes) -> StarParameters:
    base = dict(white_noise=0.0, granulation=0.0, drift=0.0, flare_rate=0.0)
    base.update(changes)
    return StarParameters(**base)


def _static_spots(lat, lon, area) -> SpotSet:
    k = len(lat)
    return SpotSet(np.asarray(lat, float), np.asarray(lon, float), np.full(k, -1e4),
                   np.zeros(k), np.full(k, 1e13), np.asarray(area, float))


def _plain_pattern(days: float, cadence_minutes: float = 30.0) -> ObservingPattern:
    return ObservingPattern.space(1, days, cadence_minutes, orbit_days=0.0, orbit_gap_days=0.0,
                                  dropout_fraction=0.0, segment_offset=0.0)


def _ls_peaks(time, flux, fmin, fmax, n_peaks):
    ls = LombScargle(time, flux)
    freq, power = ls.autopower(minimum_frequency=fmin, maximum_frequency=fmax,
                               samples_per_peak=200)
    peaks = []
    order = np.argsort(power)[::-1]
    for j in order:
        if all(abs(freq[j] - f) > 0.01 for f in peaks):
            peaks.append(freq[j])
        if len(peaks) == n_peaks:
            break
    return 1.0 / np.array(peaks)


def test_single_spot_period_matches_its_latitude():
    # Input law omega = Omega_eq (1 - shear sin^2 lat); measured with astropy's
    # Lomb-Scargle (a general-purpose reference) to 0.1 %.
    params = _quiet(period=5.0, shear=0.2, inclination=60.0)
    spots = _static_spots([30.0], [0.0], [2e-3])
    star = simulate_star(params, _plain_pattern(200.0), seed=1, spots=spots)
    expected = 5.0 / (1.0 - 0.2 * np.sin(np.radians(30.0)) ** 2)
    (measured,) = _ls_peaks(star.lc.time, star.lc.flux, 1 / 20, 1 / 1.0, 1)
    assert measured == pytest.approx(expected, rel=1e-3)
    assert star.truth.period_min == pytest.approx(expected, rel=1e-12)
    assert star.truth.period_max == pytest.approx(expected, rel=1e-12)


def test_two_spots_with_shear_give_two_periods_on_the_law():
    # Differential rotation: two latitudes, two periods, each from the input law;
    # measured with astropy's Lomb-Scargle (two strongest separate peaks).
    params = _quiet(period=4.0, shear=0.3, inclination=70.0)
    spots = _static_spots([10.0, 60.0], [0.0, 120.0], [1.5e-3, 4e-3])
    star = simulate_star(params, _plain_pattern(300.0), seed=2, spots=spots)
    expected = sorted(4.0 / (1.0 - 0.3 * np.sin(np.radians([10.0, 60.0])) ** 2))
    measured = sorted(_ls_peaks(star.lc.time, star.lc.flux, 1 / 8.0, 1 / 3.0, 2))
    np.testing.assert_allclose(measured, expected, rtol=1e-3)
    assert star.truth.period_min == pytest.approx(expected[0])
    assert star.truth.period_max == pytest.approx(expected[1])


def test_shear_law_reproduces_snodgrass_ulrich_at_30_degrees():
    # REFERENCES.md [computed]: the Snodgrass & Ulrich 1990 law gives sidereal periods of
    # 24.47 d at the equator and 25.71 d at 30 deg; our sin^2-only law with shear 0.193
    # (its drop to 30 deg) must give the same 30-deg period.
    omega = angular_velocity(np.array([0.0, 30.0]), 24.47, 0.193)
    periods = 2 * np.pi / omega
    assert periods[0] == pytest.approx(24.47, rel=1e-12)
    assert periods[1] == pytest.approx(25.71, rel=1e-3)


def test_exact_spot_model_is_wired_through_the_simulator():
    # Exact circular spots (Dorren 1987 / Kipping 2012) through simulate_star: close to the
    # small-spot curve for a small spot away from the limb, and for a large spot equal to
    # the cap integral at the spot's position (geometry: mu = sin i cos lat cos lon +
    # cos i sin lat, common practice).
    pattern = _plain_pattern(3.0)
    incl, lat, lon, c = 80.0, 20.0, 30.0, 0.7
    for area in (1e-4, 0.05):
        spots = _static_spots([lat], [lon], [area])
        small = simulate_star(_quiet(period=3.0, inclination=incl, contrast=c), pattern,
                              seed=3, spots=spots)
        exact = simulate_star(_quiet(period=3.0, inclination=incl, contrast=c,
                                     spot_model="exact"), pattern, seed=3, spots=spots)
        d_small, d_exact = small.components.spot_deficit, exact.components.spot_deficit
        t = exact.lc.time
        mu = (np.sin(np.radians(incl)) * np.cos(np.radians(lat))
              * np.cos(np.radians(lon) + 2 * np.pi * t / 3.0)
              + np.cos(np.radians(incl)) * np.sin(np.radians(lat)))
        direct = c * cap_flux(mu, np.arccos(1.0 - area), 0.40, 0.26) / disc_flux(0.40, 0.26)
        np.testing.assert_allclose(d_exact, direct, rtol=1e-8, atol=1e-12)
        if area < 1e-3:
            away = mu > 0.2
            np.testing.assert_allclose(d_exact[away], d_small[away], rtol=2e-3)
    np.testing.assert_allclose(exact.lc.flux, 1.0 - d_exact, rtol=0, atol=1e-15)


def test_spot_light_curve_is_additive_and_chunking_invariant():
    # Small spots add linearly (Dorren 1987 small-spot limit); evaluating the pairs in
    # small memory chunks must not change the answer (exact equality up to rounding).
    params = _quiet(period=3.0, shear=0.1, inclination=50.0)
    t = np.linspace(0.0, 30.0, 3000)
    spots = SpotSet(np.array([10.0, -20.0, 45.0]), np.array([0.0, 90.0, 200.0]),
                    np.array([-5.0, 3.0, 10.0]), np.array([1.0, 2.0, 0.5]),
                    np.array([20.0, 10.0, 5.0]), np.array([1e-3, 2e-3, 5e-4]))
    full, per = spot_light_curve(t, spots, params)
    chunked, per2 = spot_light_curve(t, spots, params, max_pairs=500)
    np.testing.assert_allclose(chunked, full, rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(per2, per, rtol=1e-12)
    parts = [spot_light_curve(t, SpotSet(*(np.asarray(getattr(spots, a))[[j]] for a in (
        "latitude", "longitude", "t_emerge", "t_grow", "t_decay", "area_max"))), params)[0]
        for j in range(3)]
    np.testing.assert_allclose(full, np.sum(parts, axis=0), rtol=1e-12, atol=1e-18)
    # Spots outside their lives contribute nothing.
    assert np.all(full[t < -5.0 + 1e-9] == 0.0)


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_sun_like_star_varies_by_about_a_tenth_of_a_percent(seed):
    # Kopp 2016 (J. Space Weather Space Clim. 6, A30): total irradiance varies ~0.1 % on
    # days-to-weeks; Reinhold et al. 2020: up to 0.3 % from rotation. Order of magnitude:
    # the 5-95 % range of the spot signal over a year must lie within 0.03-0.3 %.
    star = simulate_star(StarParameters.sun_like(), ObservingPattern.space(
        4, 91.3, 30.0, orbit_days=30.4), seed=seed)
    assert 0.3 < star.truth.amplitude_ppt < 3.0


def test_parameters_are_validated_with_one_line_messages():
    with pytest.raises(ConfigError, match=r"period = -1\.0 is not allowed; must be > 0 days"):
        StarParameters(period=-1.0)
    with pytest.raises(ConfigError, match=r"shear = 1\.5 is not allowed"):
        StarParameters(shear=1.5)
    with pytest.raises(ConfigError, match="choose one of sho, drw"):
        StarParameters(granulation_kernel="harvey")
    with pytest.raises(ConfigError, match="must be finite"):
        StarParameters(contrast=float("nan"))
    p = StarParameters()
    with pytest.raises(dataclasses.FrozenInstanceError):
        p.period = 3.0
