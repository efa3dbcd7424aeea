"""Derived physics against published values, analytic results and reference libraries.

Sources are named beside each check; REFERENCES.md is ../shared/REFERENCES.md.
"""

from __future__ import annotations

import json

import click
import numpy as np
import pytest
from astropy import units as u
from astropy.constants import iau2015
from click.testing import CliRunner
from scipy import stats

from rotinfer.cli._stellar import relations_from_options, stellar_from_options, stellar_options
from rotinfer.derived import (
    StellarParameters,
    cos_inclination_posterior,
    derive,
    sample_cos_inclination,
)
from rotinfer.errors import ConfigError, InputError

# ---------------------------------------------------------------- equatorial velocity


def test_solar_equatorial_velocity():
    # REFERENCES.md: R_sun = 695,700 km (IAU 2015 B3); solar sidereal period ~25.38 d is
    # [memory] there. The Sun's equatorial velocity is ~2.0 km/s (common practice).
    res = derive([25.38], StellarParameters(radius=1.0), rng=1)
    v = res["equatorial_velocity"]
    assert v.unit == "km/s"
    assert v.median == pytest.approx(2.0, abs=0.02)
    # Same number straight from astropy's constants and units (reference library).
    expected = (2 * np.pi * iau2015.R_sun / (25.38 * u.day)).to_value(u.km / u.s)
    assert v.median == pytest.approx(expected, rel=1e-12)
    # A single period and an exact radius: flagged, not silently reported as precise.
    assert any("treated as exact" in f for f in v.flags)
    assert any("single period" in f for f in v.flags)


def test_velocity_interval_matches_first_order_propagation(rng):
    # Analytic: for v = k R / P with small independent errors,
    # sigma_v / v = sqrt((sigma_R/R)^2 + (sigma_P/P)^2) (first-order propagation).
    P0, sP, R0, sR = 12.0, 0.12, 0.9, 0.009
    periods = rng.normal(P0, sP, 40000)
    res = derive(periods, StellarParameters(radius=R0, radius_err=sR), rng=2, n_draws=40000)
    v = res["equatorial_velocity"]
    v0 = (2 * np.pi * R0 * iau2015.R_sun / (P0 * u.day)).to_value(u.km / u.s)
    sigma = v0 * np.hypot(sR / R0, sP / P0)
    assert v.median == pytest.approx(v0, rel=2e-3)
    half68 = 0.5 * (v.interval_68[1] - v.interval_68[0])
    half95 = 0.5 * (v.interval_95[1] - v.interval_95[0])
    assert half68 == pytest.approx(sigma, rel=0.03)
    assert half95 == pytest.approx(1.959964 * sigma, rel=0.03)  # scipy.stats.norm.ppf(0.975)


def test_whole_period_posterior_is_propagated():
    # A bimodal period posterior (P and 2P, the harmonic ambiguity) must give a v
    # posterior with both modes, not v at the median period (common practice: no plug-in).
    periods = np.r_[np.full(500, 10.0), np.full(500, 20.0)]
    res = derive(periods, StellarParameters(radius=1.0), rng=3, n_draws=4000)
    v = res["equatorial_velocity"].draws
    v10 = (2 * np.pi * iau2015.R_sun / (10 * u.day)).to_value(u.km / u.s)
    assert np.mean(np.isclose(v, v10)) == pytest.approx(0.5, abs=0.05)
    assert np.mean(np.isclose(v, v10 / 2)) == pytest.approx(0.5, abs=0.05)


# ---------------------------------------------------------------- gyrochronology


@pytest.mark.parametrize(
    ("relation", "bv", "period", "age"),
    [
        # REFERENCES.md [computed]: Barnes 2007 with B-V 0.642, t = 4566 Myr gives 26.09 d.
        ("barnes2007", 0.642, 26.09, 4566.0),
        # REFERENCES.md [computed]: Mamajek & Hillenbrand 2008, B-V 0.65, 4570 Myr: 26.18 d.
        ("mamajek2008", 0.65, 26.18, 4570.0),
        # Angus et al. 2015 (abstract: a = 0.40, b = 0.31, n = 0.55; c = 0.45 [memory]):
        # the forward period is computed here by hand, outside the package.
        ("angus2015", 0.65, 0.40 * (0.65 - 0.45) ** 0.31 * 4570.0**0.55, 4570.0),
    ],
)
def test_solar_calibration_point_inverts_to_its_age(relation, bv, period, age):
    res = derive([period], StellarParameters(bv=bv), relations=[relation], rng=4,
                 coefficient_errors=False)
    q = res[f"gyro_age_{relation}"]
    assert q.unit == "Myr"
    assert q.median == pytest.approx(age, rel=0.01)
    # The Sun is old and slow: no young-star or close-binary caution.
    assert not any("600 Myr" in f or "below 7 d" in f for f in q.flags)


def test_age_interval_matches_first_order_propagation(rng):
    # Analytic first-order propagation of t = [P / (a x^b)]^(1/n), x = B-V - c, in log t:
    # var(ln t) = [ (sP/P)^2 + (sa/a)^2 + (ln x sb)^2 + b^2 (sBV^2 + sc^2)/x^2
    #               + (ln t sn)^2 ] / n^2.
    # Coefficients and errors: Mamajek & Hillenbrand 2008 [secondary in REFERENCES.md].
    a, sa, b, sb, c, sc, n, sn = 0.407, 0.021, 0.325, 0.024, 0.495, 0.010, 0.566, 0.008
    P0, sP, bv, sbv = 15.0, 0.15, 0.75, 0.005
    periods = rng.normal(P0, sP, 40000)
    x = bv - c
    lnt = (np.log(P0) - np.log(a) - b * np.log(x)) / n
    stellar = StellarParameters(bv=bv, bv_err=sbv)

    res = derive(periods, stellar, relations=["mamajek2008"], rng=5, n_draws=40000,
                 coefficient_errors=False)
    q = res["gyro_age_mamajek2008"]
    sig = np.hypot(sP / P0, b * sbv / x) / n
    assert np.log(q.median) == pytest.approx(lnt, abs=0.01 * sig + 1e-3)
    half68 = 0.5 * (np.log(q.interval_68[1]) - np.log(q.interval_68[0]))
    assert half68 == pytest.approx(sig, rel=0.04)

    res = derive(periods, stellar, relations=["mamajek2008"], rng=6, n_draws=40000)
    q = res["gyro_age_mamajek2008"]
    var = ((sP / P0) ** 2 + (sa / a) ** 2 + (np.log(x) * sb) ** 2
           + b**2 * (sbv**2 + sc**2) / x**2 + (lnt * sn) ** 2) / n**2
    half68 = 0.5 * (np.log(q.interval_68[1]) - np.log(q.interval_68[0]))
    assert half68 == pytest.approx(np.sqrt(var), rel=0.05)
    assert any("propagated" in note for note in q.notes)


# ---------------------------------------------------------------- Rossby number


def test_wright2011_solar_turnover_time_and_rossby_number():
    # REFERENCES.md [computed]: Wright et al. 2011 gives tau_sun ~ 14.5 d and, with the
    # sidereal period 25.38 d ([memory] there), Ro_sun ~ 1.76.
    res = derive([25.38], StellarParameters(mass=1.0), rng=7)
    tau = res["turnover_time_wright2011"]
    assert tau.unit == "d"
    assert tau.median == pytest.approx(10**1.16, rel=1e-9)  # log tau = 1.16 at M = M_sun
    assert tau.median == pytest.approx(14.5, abs=0.05)
    assert res["rossby_wright2011"].median == pytest.approx(1.76, abs=0.005)
    assert "[secondary]" in tau.source


def test_cranmer_saar_relation_is_marked_from_memory():
    # Cranmer & Saar 2011 tau(Teff) is [memory] in REFERENCES.md: the output must say so.
    res = derive([25.38], StellarParameters(teff=5772.0, teff_err=50.0), rng=8)
    assert "from memory" in res["turnover_time_cranmer_saar2011"].source
    assert "from memory" in res["rossby_cranmer_saar2011"].source


# ---------------------------------------------------------------- inclination


def _v_of(radius, period):
    return (2 * np.pi * radius * iau2015.R_sun / (period * u.day)).to_value(u.km / u.s)


def test_inclination_recovered_from_synthetic_vsini():
    # Masuda & Winn 2020: inject v sin i = v sin(i_true) plus Gaussian noise; the posterior
    # must contain the truth.
    gen = np.random.default_rng(11)
    i_true, R, P, s_u = 50.0, 1.1, 5.0, 0.25
    vsini = _v_of(R, P) * np.sin(np.radians(i_true)) + gen.normal(0, s_u)
    periods = gen.normal(P, 0.03, 8000)
    stellar = StellarParameters(radius=R, radius_err=0.011, vsini=vsini, vsini_err=s_u)
    q = derive(periods, stellar, rng=12)["inclination"]
    assert q.unit == "deg"
    assert q.interval_95[0] < i_true < q.interval_95[1]
    assert q.median == pytest.approx(i_true, abs=5.0)


def test_inclination_posterior_is_calibrated():
    # Simulation-based calibration (Talts et al. 2018, REFERENCES.md): with cos i drawn from
    # the prior and data drawn from the model, the posterior CDF at the truth is uniform.
    # Checked with scipy.stats.kstest.
    gen = np.random.default_rng(13)
    pit = []
    for _ in range(150):
        cos_true = gen.uniform()
        R_true, P_true = 0.9, 4.0
        R_obs = gen.normal(R_true, 0.02)
        P_obs = gen.normal(P_true, 0.04)
        u_obs = gen.normal(_v_of(R_true, P_true) * np.sqrt(1 - cos_true**2), 0.8)
        periods = gen.normal(P_obs, 0.04, 500)
        stellar = StellarParameters(radius=R_obs, radius_err=0.02, vsini=u_obs, vsini_err=0.8)
        draws = derive(periods, stellar, rng=gen, n_draws=500)["cos_inclination"].draws
        pit.append(np.mean(draws < cos_true))
    assert stats.kstest(pit, "uniform").pvalue > 0.01


def test_uninformative_vsini_gives_back_the_prior():
    # Masuda & Winn 2020: uninformative data return the prior, uniform in cos i.
    # Checked with scipy.stats.kstest against U(0, 1).
    stellar = StellarParameters(radius=1.0, radius_err=0.05, vsini=3.0, vsini_err=1e4)
    res = derive(np.random.default_rng(14).normal(10, 0.5, 5000), stellar, rng=15)
    q = res["cos_inclination"]
    assert stats.kstest(q.draws, "uniform").pvalue > 0.01
    assert any("barely constrain" in f for f in q.flags)


def test_informative_vsini_is_not_the_prior():
    # The converse of the check above, so that it can fail: a precise v sin i near v
    # (edge-on) moves the posterior far from uniform (scipy.stats.kstest).
    stellar = StellarParameters(radius=1.0, radius_err=0.01, vsini=5.0, vsini_err=0.1)
    res = derive([_v_of(1.0, 1.0) / 5.0], stellar, rng=16)
    assert stats.kstest(res["cos_inclination"].draws, "uniform").pvalue < 1e-6
    assert res["inclination"].median > 70


def test_vsini_above_v_is_flagged_as_tension():
    # sin i <= 1 (geometry): v sin i well above v cannot be explained by inclination.
    v = _v_of(1.0, 10.0)
    stellar = StellarParameters(radius=1.0, radius_err=0.02, vsini=2 * v, vsini_err=0.1)
    res = derive([10.0], stellar, rng=17)
    flags = " ".join(res["inclination"].flags)
    assert "exceeds" in flags and "tension" in flags
    assert res["inclination"].median > 75  # pushed to edge-on


def test_grid_posterior_matches_direct_integration():
    # The gridded posterior against scipy.integrate.quad of the Masuda & Winn integrand
    # with v Gaussian (v draws replaced by quadrature), at a few values of cos i.
    from scipy import integrate

    v0, sv, u0, su = 5.0, 0.3, 3.0, 0.4
    v_draws = stats.norm.ppf((np.arange(2000) + 0.5) / 2000, v0, sv)
    cos_i, dens = cos_inclination_posterior(v_draws, u0, su)

    def marginal(c):
        s = np.sqrt(1 - c * c)
        return integrate.quad(
            lambda v: stats.norm.pdf(v, v0, sv) * stats.norm.pdf(u0, v * s, su),
            v0 - 8 * sv, v0 + 8 * sv)[0]

    # Shapes compared relative to the density at cos i = 0.8 (near the peak, sin i = u0/v0).
    ref_grid, ref_quad = np.interp(0.8, cos_i, dens), marginal(0.8)
    for c in (0.1, 0.5, 0.7, 0.9):
        got = np.interp(c, cos_i, dens) / ref_grid
        assert got == pytest.approx(marginal(c) / ref_quad, abs=0.01)
    draws = sample_cos_inclination(cos_i, dens, 20000, np.random.default_rng(18))
    assert draws.min() >= 0 and draws.max() <= 1


# ---------------------------------------------------------------- cautions


def test_cautions_for_close_binary_young_star_and_colour_range():
    # Simonian et al. 2019 (P < 7 d), Meibom et al. 2011 (slow sequence by ~600 Myr),
    # MH08 calibrated for B-V 0.5-0.9 (their abstract): a 3-d K dwarf trips all three.
    res = derive([3.0], StellarParameters(bv=1.1, bv_err=0.02), relations=["mamajek2008"],
                 rng=19)
    flags = " ".join(res["gyro_age_mamajek2008"].flags)
    assert "below 7 d" in flags and "Simonian" in flags
    assert "600 Myr" in flags
    assert "outside 0.5-0.9 mag" in flags
    assert res.cautions  # collected for printing
    assert any(line.strip().startswith("caution:") for line in res.lines())


def test_caution_for_weakened_braking_past_rossby_two():
    # van Saders et al. 2016 [memory]: braking weakens beyond Ro ~ 2. A solar-mass star at
    # 40 d has Ro = 40 / 14.45 = 2.77 with Wright et al. 2011's tau (REFERENCES.md).
    res = derive([40.0], StellarParameters(bv=0.65, mass=1.0), relations=["barnes2007"],
                 rng=20)
    assert any("van Saders" in f for f in res["rossby_wright2011"].flags)
    assert any("van Saders" in f for f in res["gyro_age_barnes2007"].flags)
    # And no such caution for the Sun itself (Ro 1.76).
    sun = derive([25.38], StellarParameters(bv=0.65, mass=1.0), relations=["barnes2007"],
                 rng=21)
    assert not any("van Saders" in f for f in sun["gyro_age_barnes2007"].flags)


def test_colour_at_or_below_zero_point_is_skipped_with_reason():
    # Barnes 2007 form: (B-V)0 - c must be positive (c = 0.40 mag).
    res = derive([10.0], StellarParameters(bv=0.35), relations=["barnes2007"], rng=22)
    assert "gyro_age_barnes2007" not in res
    assert "c = 0.4" in dict(res.skipped)["gyro_age_barnes2007"]


# ---------------------------------------------------------------- output and inputs


def test_to_dict_is_json_and_lines_have_units():
    stellar = StellarParameters(radius=0.95, radius_err=0.03, vsini=1.8, vsini_err=0.4,
                                bv=0.7, bv_err=0.02, mass=0.95, mass_err=0.04)
    res = derive(np.random.default_rng(23).normal(18, 0.6, 3000), stellar, rng=24)
    block = json.loads(json.dumps(res.to_dict()))
    assert set(block["quantities"]) >= {
        "equatorial_velocity", "inclination", "cos_inclination", "gyro_age_barnes2007",
        "gyro_age_mamajek2008", "gyro_age_angus2015", "rossby_wright2011",
    }
    assert block["quantities"]["inclination"]["unit"] == "deg"
    assert "rossby_cranmer_saar2011" in block["skipped"]
    text = "\n".join(res.lines())
    assert "km/s" in text and "deg" in text and "Myr" in text and "source:" in text
    row = res.to_row()
    assert row["equatorial_velocity_kms"] == res["equatorial_velocity"].median
    assert row["gyro_age_angus2015_myr_hi68"] == res["gyro_age_angus2015"].interval_68[1]
    assert np.isnan(row["rossby_cranmer_saar2011"])  # not derived: no Teff
    # Same columns for every star, whatever was derived (a catalogue needs that).
    assert list(derive([5.0], None).to_row()) == list(row)


def test_no_stellar_parameters_derives_nothing():
    res = derive([10.0], None, rng=25)
    assert res.quantities == () and res.skipped


def test_bad_inputs_raise_our_errors():
    with pytest.raises(ConfigError, match="barnes2007, mamajek2008, angus2015"):
        derive([10.0], StellarParameters(bv=0.7), relations=["barnes2070"])
    with pytest.raises(InputError, match="period samples: 1 of 2 periods"):
        derive([10.0, -1.0], StellarParameters(radius=1.0))
    with pytest.raises(InputError, match="period samples: empty"):
        derive([], StellarParameters(radius=1.0))
    with pytest.raises(InputError, match="radius must be > 0 R_sun"):
        StellarParameters(radius=-1.0)
    with pytest.raises(InputError, match="vsini_err given without vsini"):
        StellarParameters(vsini_err=0.5)


def test_from_mapping_reads_manifest_columns():
    row = {"file": "star1.fits", "Radius": "0.85", "e_radius": "0.04", "B-V": 0.72,
           "B-V_err": "", "vsini": "nan", "Teff_K": "5100", "teff_unc": 90}
    s = StellarParameters.from_mapping(row, source="stars.csv row 3")
    assert s == StellarParameters(radius=0.85, radius_err=0.04, bv=0.72, teff=5100.0,
                                  teff_err=90.0)
    assert StellarParameters.from_mapping({"file": "x.fits", "radius": ""}) is None
    with pytest.raises(InputError, match=r"^stars.csv row 4: column 'mass': 'heavy' is not"):
        StellarParameters.from_mapping({"mass": "heavy"}, source="stars.csv row 4")
    with pytest.raises(InputError, match="columns 'radius' and 'r_star' both give radius"):
        StellarParameters.from_mapping({"radius": 1, "r_star": 1.1}, source="m.csv row 1")
    with pytest.raises(InputError, match=r"^m.csv row 2: teff must be > 0 K"):
        StellarParameters.from_mapping({"teff": "-5"}, source="m.csv row 2")


def _cli():
    @click.command()
    @stellar_options
    def cmd(**opts):
        s = stellar_from_options(opts)
        click.echo(repr(s))
        click.echo(",".join(relations_from_options(opts)))

    return cmd


def test_cli_options_build_stellar_parameters():
    runner = CliRunner()
    out = runner.invoke(_cli(), ["--radius", "0.9", "--radius-err", "0.05", "--bv", "0.8",
                                 "--gyro-relation", "angus2015"])
    assert out.exit_code == 0, out.output
    assert "radius=0.9, radius_err=0.05" in out.output and "bv=0.8" in out.output
    assert out.output.strip().endswith("angus2015")
    out = runner.invoke(_cli(), [])
    assert out.output.splitlines() == ["None", "barnes2007,mamajek2008,angus2015"]
    out = runner.invoke(_cli(), ["--bv", "0.7", "--gyro-relation", "skumanich"])
    assert out.exit_code == 2 and "barnes2007" in out.output
    out = runner.invoke(_cli(), ["--vsini-err", "0.3"])
    assert isinstance(out.exception, InputError)
    assert str(out.exception) == "command line: --vsini-err given without --vsini"
