"""Tests of the posterior summary (rotinfer.summarise) on posteriors of known shape."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from rotinfer.errors import ConfigError
from rotinfer.model import RotationModel
from rotinfer.sample import EnsembleDiagnostics, EnsembleRun, Laplace, Mode, Posterior, SampledMode
from rotinfer.sample.settings import SamplerConfig
from rotinfer.summarise import (
    DetectionConfig,
    baseline_harmonics,
    detection,
    harmonic_check,
    hdr_intervals,
    summarise,
    weighted_quantile,
)


def _model(rng, n=60):
    t = np.sort(rng.uniform(0, 30, n))
    return RotationModel(t, 1 + 1e-3 * rng.standard_normal(n), np.full(n, 1e-3),
                         period_range=(0.5, 15.0))


def _run(draws, n_walkers=10):
    """An EnsembleRun whose chains are independent draws (autocorrelation time ~1)."""
    n = draws.shape[0] // (2 * n_walkers)
    chains = [draws[: n * n_walkers].reshape(n, n_walkers, -1),
              draws[n * n_walkers: 2 * n * n_walkers].reshape(n, n_walkers, -1)]
    acc = [np.full(n_walkers, n // 2) for _ in chains]
    diag = EnsembleDiagnostics.judge(
        chains, acc, names=[f"x{i}" for i in range(draws.shape[1])], check_every=n // 4,
        tau_multiple=50, tau_rtol=0.5, rhat_max=1.05, burn_in_tau=1, stuck_ratio=0.1,
    )
    lp = [np.zeros(c.shape[:2]) for c in chains]
    return EnsembleRun(chains=tuple(chains), log_prob=tuple(lp), diagnostics=diag)


def _mode(model, theta, log_post, log_z=None):
    lap = Laplace(log_z if log_z is not None else math.nan, np.eye(model.ndim) * 1e-4,
                  log_z is not None)
    return Mode(theta=np.array(theta), period=math.exp(theta[0]), log_posterior=log_post,
                log_likelihood=log_post, laplace=lap)


def _posterior(rng, periods_probs, n=4000):
    """A posterior with modes at the given periods (days) with the given probabilities."""
    model = _model(rng)
    base = model.pack(period=1.0, sigma=2e-3, coherence_rotations=5.0, f=0.3, r=0.5,
                      background_sigma=1e-4, background_tau=0.5, jitter=1e-4, mean=1.0)
    modes, sampled, parts, weights, labels = [], [], [], [], []
    for k, (period, prob) in enumerate(periods_probs):
        centre = base.copy()
        centre[0] = math.log(period)
        draws = centre + 0.02 * rng.standard_normal((n, model.ndim))
        mode = _mode(model, centre, 100.0 + math.log(prob), 90.0 + math.log(prob))
        modes.append(mode)
        run = _run(draws)
        sampled.append(SampledMode(mode, (0.5, 15.0), run, math.log(prob), 0.01, 900.0, prob))
        s = run.samples()
        parts.append(s)
        weights.append(np.full(len(s), prob / len(s)))
        labels.append(np.full(len(s), k))
    # two background oscillators, jitter (the mean is integrated out)
    aperiodic = Mode(theta=np.zeros(5), period=math.nan, log_posterior=50.0,
                     log_likelihood=50.0, laplace=Laplace(45.0, np.eye(5), True))
    return Posterior(model=model, samples=np.concatenate(parts), weights=np.concatenate(weights),
                     mode_of_sample=np.concatenate(labels), modes=tuple(modes),
                     sampled=tuple(sampled), aperiodic=aperiodic, converged=True)


def test_weighted_quantile_matches_numpy_hazen(rng):
    # Reference: numpy.percentile(method="hazen") — Hyndman & Fan 1996 definition 5,
    # p_k = (k - 1/2)/n — which the equal-weight case of our midpoint rule reduces to.
    x = rng.standard_normal(501)
    q = [0.025, 0.16, 0.5, 0.84, 0.975]
    assert np.allclose(weighted_quantile(x, q), np.percentile(x, np.array(q) * 100,
                                                              method="hazen"))
    # integer weights = repeated draws
    w = rng.integers(1, 4, size=x.size)
    rep = np.repeat(x, w)
    med_rep = np.percentile(rep, 50, method="hazen")
    assert weighted_quantile(x, 0.5, w) == pytest.approx(med_rep, abs=np.ptp(x) / 200)


def test_hdr_of_normal_and_bimodal(rng):
    # Analytic: the 68.27 % HDR of N(0, 1) is [-1, 1]; for an equal mixture of N(0,1) and
    # N(10,1) the 95 % HDR is two intervals, each close to +-1.96 around its centre.
    x = rng.standard_normal(200_000)
    (lo, hi), = hdr_intervals(x, 0.6827, log=False)
    assert lo == pytest.approx(-1, abs=0.05) and hi == pytest.approx(1, abs=0.05)
    y = np.concatenate([rng.normal(0, 1, 100_000), rng.normal(10, 1, 100_000)])
    parts = hdr_intervals(y, 0.95, log=False)
    assert len(parts) == 2
    z = stats.norm.ppf(0.975)
    assert parts[0][0] == pytest.approx(-z, abs=0.1) and parts[1][1] == pytest.approx(10 + z,
                                                                                      abs=0.1)


def test_harmonic_check_flags_substantial_double(rng):
    cfg = DetectionConfig()
    post = _posterior(rng, [(3.0, 0.8), (6.0, 0.2)])
    h = harmonic_check(post, 3.0, cfg)
    assert h["probability_double"] == pytest.approx(0.2, abs=1e-9)
    assert h["probability_half"] == 0.0
    assert h["flag"]
    clean = _posterior(rng, [(3.0, 0.995), (6.0, 0.005)])
    assert not harmonic_check(clean, 3.0, cfg)["flag"]


def test_harmonic_check_baseline_clause(rng):
    # Two spot groups on opposite hemispheres: a period at half the truth while the ACF,
    # which compares alternate dips, finds the full one (McQuillan et al. 2013; the
    # ACF's two-dip rule is common practice). A clean posterior at 3.0 d is flagged by
    # a baseline near 2P or P/2 of the reported period, and only by the methods asked for.
    cfg = DetectionConfig()
    clean = _posterior(rng, [(3.0, 1.0)])
    h = harmonic_check(clean, 3.0, cfg, median=3.0, scan={"acf": {"period": 6.2},
                                                          "lomb_scargle": {"period": 1.49}})
    assert h["flag"] and h["flag_baselines"] and not h["flag_posterior"]
    assert h["baselines"] == [{"method": "acf", "period": 6.2, "relation": "2P"}]
    assert h["baseline_methods"] == ["acf"]
    both = DetectionConfig(harmonic_baselines=("acf", "lomb_scargle"))
    assert [b["relation"] for b in harmonic_check(
        clean, 3.0, both, median=3.0, scan={"acf": {"period": 6.2},
                                            "lomb_scargle": {"period": 1.49}})["baselines"]
            ] == ["2P", "P/2"]
    # agreeing, unrelated (3P is not a half-or-double trap), missing or absent baselines
    for scan in ({"acf": {"period": 3.05}}, {"acf": {"period": 9.0}},
                 {"acf": {"period": None}}, {"acf": {"period": float("nan")}}, None):
        h = harmonic_check(clean, 3.0, cfg, median=3.0, scan=scan)
        assert not h["flag"] and h["baselines"] == []
    # the tolerance is the harmonic one: 10 % either side of 2P
    assert baseline_harmonics({"acf": {"period": 6.55}}, 3.0, cfg)
    assert not baseline_harmonics({"acf": {"period": 6.7}}, 3.0, cfg)
    assert not baseline_harmonics({"acf": {"period": 6.2}}, 3.0,
                                  DetectionConfig(harmonic_baselines=()))
    with pytest.raises(ConfigError, match="'acf', 'lomb_scargle'"):
        DetectionConfig(harmonic_baselines=("bls",))


def test_detection_statistics():
    # BIC = k ln N - 2 ln L (Schwarz 1978): delta = 2 (lnL_p - lnL_a) - (k_p - k_a) ln N.
    post = _posterior(np.random.default_rng(2), [(3.0, 1.0)])
    n = post.model.time.size
    # periodic: 8 sampled parameters; aperiodic: 2 per background oscillator (two in this
    # posterior's comparison mode) and jitter; the mean, integrated out in both, counts in
    # both (its maximum-likelihood value enters ln L)
    assert post.model.ndim == 8
    k_p, k_a = 9, 6
    expected = 2 * (post.modes[0].log_likelihood - post.aperiodic.log_likelihood) - (
        k_p - k_a) * math.log(n)
    det = detection(post, DetectionConfig(threshold=expected - 1))
    assert det["delta_bic"] == pytest.approx(expected)
    assert det["aperiodic_backgrounds"] == 2 and det["periodic_backgrounds"] == 1
    assert det["detected"]
    assert not detection(post, DetectionConfig(threshold=expected + 1))["detected"]
    lap = detection(post, DetectionConfig(statistic="laplace", threshold=0.0))
    assert lap["two_ln_bayes_factor_laplace"] == pytest.approx(2 * (90.0 - 45.0))


def test_summary_contents_and_json(rng):
    post = _posterior(rng, [(3.0, 0.9), (1.5, 0.1)])
    scan = {"lomb_scargle": {"period": 1.5, "power": 0.4}, "acf": {"period": 3.02}}
    s = summarise(post, identifier="demo", scan=scan)
    d = s.to_dict()
    json.dumps(d, allow_nan=False)
    p = d["period"]
    assert p["interval_95"][0] <= p["interval_68"][0] <= p["median"] <= p["interval_68"][1] \
        <= p["interval_95"][1]
    # 90 % of the mass at 3.0 d: the median is in that mode, the 95 % interval reaches P/2
    assert p["median"] == pytest.approx(3.0, rel=0.05)
    assert p["interval_95"][0] < 1.6
    assert len(p["hdr_95"]) == 2
    assert d["harmonic"]["probability_half"] == pytest.approx(0.1, abs=1e-9)
    assert d["harmonic"]["flag"]
    assert d["baselines"]["acf"]["agrees_with_posterior"] is True
    assert d["baselines"]["lomb_scargle"]["relation_to_posterior"] == "P/2"
    assert {m["relation"] for m in d["modes"]} == {"P", "P/2"}
    assert d["amplitude_ppt"]["median"] == pytest.approx(2.0, rel=0.05)
    assert d["coherence_time_rotations"]["median"] == pytest.approx(5.0, rel=0.05)
    assert "tau_multiple (50)" in d["diagnostics"]["rule"]  # the defaults ...
    short = SamplerConfig(tau_multiple=20.0, max_steps=1500)
    rule = summarise(post, identifier="demo", scan=scan, sampler=short).to_dict()[
        "diagnostics"]["rule"]
    # ... or the settings the fit ran with, quoted in the rule
    assert "tau_multiple (20)" in rule and "max_steps (1500)" in rule
    assert "period_precision" not in rule  # the optional clause, off ...
    on = SamplerConfig(period_precision=0.1)
    assert "below [sampler] period_precision (0.1)" in summarise(  # ... and on
        post, identifier="demo", scan=scan, sampler=on).to_dict()["diagnostics"]["rule"]


def test_detection_config_lists_choices():
    with pytest.raises(ConfigError, match="'delta_bic', 'laplace'"):
        DetectionConfig(statistic="bayes")


def test_false_alarm_rate_and_its_upper_limit_are_reported():
    from rotinfer.summarise import false_alarm_text

    post = _posterior(np.random.default_rng(3), [(3.0, 1.0)])
    det = detection(post, DetectionConfig(false_alarm_rate=0.0, false_alarm_upper_95=0.05))
    assert det["false_alarm_upper_95"] == 0.05
    assert false_alarm_text(det) == "0, 95 % upper limit 0.05"
    assert false_alarm_text({"false_alarm_rate": 0.2}) == "0.2"
    assert false_alarm_text({"false_alarm_rate": None}) == ""
    with pytest.raises(ConfigError, match="false_alarm_upper_95: must be >= false_alarm_rate"):
        DetectionConfig(false_alarm_rate=0.1, false_alarm_upper_95=0.05)
    with pytest.raises(ConfigError, match=r"false_alarm_upper_95: must be in \[0, 1\]"):
        DetectionConfig(false_alarm_upper_95=1.5)
