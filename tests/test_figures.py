"""Figures and the chunked GP predictor.

The predictor is checked against the dense Gaussian-process predictive equations
(Rasmussen & Williams 2006, eqs. 2.23-2.24) solved with SciPy's Cholesky routines. The
figures are checked for what a reader relies on: every axis names its unit, masked flares
are drawn, the posterior period band is the summary's 68 % interval, harmonic modes stay
in view when they carry weight, and every file is written and non-empty.
"""

from __future__ import annotations

import math
import struct

import numpy as np
import pytest
from celerite2 import terms
from scipy import linalg

from rotinfer.flares import flare_profile
from rotinfer.lightcurve import LightCurve, LightCurveMeta
from rotinfer.model import RotationModel
from rotinfer.periodogram import scan
from rotinfer.predict import chunk_length, predict, predict_arrays
from rotinfer.prepare import PrepareConfig, prepare
from rotinfer.sample import EnsembleDiagnostics, EnsembleRun, Posterior, SampledMode
from rotinfer.sample.optimise import Laplace, Mode

PERIOD = 3.0  # days, of the test light curve


# ----------------------------------------------------------------------------- fixtures
@pytest.fixture(scope="module")
def prepared():
    """A 20-day sinusoid (amplitude 5 ppt, period 3 d) with white noise and two flares."""
    rng = np.random.default_rng(11)
    t = np.arange(0.0, 20.0, 30.0 / 1440.0)
    t = t[(t < 9.5) | (t > 10.5)]  # a one-day gap, as between two orbits
    flux = 1.0 + 5e-3 * np.sin(2 * np.pi * t / PERIOD) + 5e-4 * rng.standard_normal(t.size)
    for t_peak in (4.2, 14.7):
        flux = flux + flare_profile(t, t_peak, 20.0 / 1440.0, 0.02)
    lc = LightCurve(time=t, flux=flux, flux_err=np.full(t.size, 5e-4),
                    meta=LightCurveMeta(identifier="test-sinusoid", has_flux_err=True))
    return prepare(lc, PrepareConfig())


@pytest.fixture(scope="module")
def scan_result(prepared):
    return scan(prepared)


def _posterior(prepared, periods=(PERIOD,), probabilities=(1.0,), *, n_steps=400,
               n_walkers=20, seed=3):
    """A Posterior with Gaussian 'chains' about chosen periods (no sampling: fast, exact)."""
    rng = np.random.default_rng(seed)
    model = RotationModel.from_prepared(prepared)
    sampled, parts, weights, labels, modes = [], [], [], [], []
    for k, (period, prob) in enumerate(zip(periods, probabilities, strict=True)):
        theta = model.pack(period=period, sigma=3.5e-3, coherence_rotations=20.0, f=0.2, r=0.5,
                           background_sigma=2e-4, background_tau=0.5, jitter=1e-4, mean=1.0)
        scale = np.full(model.ndim, 0.05)
        scale[0] = 0.01  # 1 % in period
        chains = tuple(theta + scale * rng.standard_normal((n_steps, n_walkers, model.ndim))
                       for _ in range(2))
        diag = EnsembleDiagnostics.judge(
            list(chains), [np.full(n_walkers, n_steps // 3)] * 2, names=model.names,
            check_every=100, tau_multiple=50.0, tau_rtol=0.05, rhat_max=1.01,
            burn_in_tau=5.0, stuck_ratio=0.1)
        run = EnsembleRun(chains=chains, log_prob=tuple(np.zeros((n_steps, n_walkers))
                                                        for _ in chains), diagnostics=diag)
        mode = Mode(theta=theta, period=period, log_posterior=1.0 - k, log_likelihood=0.0,
                    laplace=Laplace(math.nan, np.eye(model.ndim), False))
        modes.append(mode)
        sampled.append(SampledMode(mode, (0.1, 10.0), run, math.nan, math.nan, math.nan, prob))
        draws = run.samples()
        parts.append(draws)
        weights.append(np.full(len(draws), prob / len(draws)))
        labels.append(np.full(len(draws), k))
    return Posterior(model=model, samples=np.concatenate(parts), weights=np.concatenate(weights),
                     mode_of_sample=np.concatenate(labels), modes=tuple(modes),
                     sampled=tuple(sampled), aperiodic=modes[0], converged=True)


@pytest.fixture(scope="module")
def posterior(prepared):
    return _posterior(prepared)


# ------------------------------------------------------------------------- predictor
def _dense_prediction(kernel, t, y, var, tn, mean):
    # Rasmussen & Williams 2006, eqs. 2.23-2.24, with SciPy's Cholesky solve.
    k_data = kernel.get_value(t[:, None] - t[None, :]) + np.diag(var)
    k_star = kernel.get_value(t[:, None] - tn[None, :])
    factor = linalg.cho_factor(k_data, lower=True)
    mu = mean + k_star.T @ linalg.cho_solve(factor, y - mean)
    v = kernel.get_value(0.0) - np.sum(k_star * linalg.cho_solve(factor, k_star), axis=0)
    return mu, v


def test_chunked_prediction_equals_dense_gp_equations():
    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(0, 30, 300))
    kernel = terms.RotationTerm(sigma=2e-3, period=4.0, Q0=1.0, dQ=5.0, f=0.3) + \
        terms.SHOTerm(sigma=3e-4, w0=3.0, Q=1 / math.sqrt(2))
    var = np.full(t.size, (4e-4) ** 2)
    y = 1.0 + 2e-3 * np.sin(2 * np.pi * t / 4.0) + 4e-4 * rng.standard_normal(t.size)
    tn = rng.uniform(-2, 32, 257)  # unsorted, some outside the data
    # a budget of 60 new times per chunk: 257 times need 5 chunks
    budget = 60 * 5 * 8 * t.size
    pred = predict_arrays(kernel, t, y, var, tn, mean=1.0, max_bytes=budget)
    assert pred.n_chunks == math.ceil(257 / 60)
    mu_ref, var_ref = _dense_prediction(kernel, t, y, var, tn, 1.0)
    np.testing.assert_allclose(pred.mean, mu_ref, rtol=0, atol=1e-9)
    np.testing.assert_allclose(pred.sd, np.sqrt(np.clip(var_ref, 0, None)), rtol=1e-6,
                               atol=1e-9)
    one = predict_arrays(kernel, t, y, var, tn, mean=1.0)
    assert one.n_chunks == 1
    np.testing.assert_allclose(one.mean, pred.mean, rtol=0, atol=1e-12)


def test_chunk_length_keeps_work_arrays_within_budget():
    # Five float64 N x M arrays per chunk (lags, kernel matrix, three scratch arrays).
    for n in (10, 5000, 1_000_000):
        m = chunk_length(n, max_bytes=64 * 2**20)
        assert m >= 1
        assert 5 * 8 * n * m <= 64 * 2**20 or m == 1
        assert 5 * 8 * n * (m + 1) > 64 * 2**20


def test_prediction_memory_stays_within_its_budget():
    # The budget is what the predictor really allocates: NumPy reports its buffers to
    # tracemalloc (Python standard library), so the traced peak is measured, not assumed.
    # (celerite2's own predict(return_var=True) peaked at ~18 N x M arrays here.)
    import tracemalloc

    rng = np.random.default_rng(8)
    t = np.sort(rng.uniform(0, 30, 4000))
    kernel = terms.RotationTerm(sigma=2e-3, period=4.0, Q0=1.0, dQ=5.0, f=0.3) + \
        terms.SHOTerm(sigma=3e-4, w0=3.0, Q=1 / math.sqrt(2))
    y = 1.0 + 4e-4 * rng.standard_normal(t.size)
    var = np.full(t.size, (4e-4) ** 2)
    tn = np.linspace(0, 30, 3000)
    budget = 16 * 2**20
    tracemalloc.start()
    try:
        pred = predict_arrays(kernel, t, y, var, tn, mean=1.0, max_bytes=budget)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert pred.n_chunks > 1
    small = 40 * 8 * (t.size + tn.size)  # O(N + M) vectors: data, factor, results
    assert peak <= budget + small, (peak / 2**20, budget / 2**20)


def test_model_prediction_adds_jitter_to_the_white_noise(prepared, posterior):
    model = posterior.model
    theta = posterior.map_theta
    p = model.unpack(theta)
    tn = np.linspace(1.0, 2.0, 11)
    pred = predict(model, theta, tn)
    var = model.flux_err**2 + p["jitter"] ** 2
    assert "mean" not in p  # integrated out: its posterior mean given theta, computed
    # densely (generalised least squares with the N(mu0, s0^2) prior; Rasmussen & Williams
    # 2006, eq. 2.42), enters the predictive mean (eq. 2.41)
    kernel = model.kernel(theta)
    factor = linalg.cho_factor(kernel.get_value(model.time[:, None] - model.time[None, :])
                               + np.diag(var), lower=True)
    mu0, s0 = model.config.mean
    k_inv_one = linalg.cho_solve(factor, np.ones(model.time.size))
    mean = (k_inv_one @ model.flux + mu0 / s0**2) / (k_inv_one.sum() + 1 / s0**2)
    mu_ref, var_ref = _dense_prediction(kernel, model.time, model.flux, var, tn, mean)
    np.testing.assert_allclose(pred.mean, mu_ref, rtol=0, atol=1e-9)
    np.testing.assert_allclose(pred.sd, np.sqrt(var_ref), rtol=1e-6)


def test_prediction_rejects_unsorted_data_times():
    from rotinfer.errors import InputError

    kernel = terms.SHOTerm(sigma=1.0, w0=1.0, Q=1.0)
    with pytest.raises(InputError, match="must be sorted"):
        predict_arrays(kernel, [0.0, 2.0, 1.0], [1.0, 1.0, 1.0], [1.0, 1.0, 1.0], [0.5])


# ---------------------------------------------------------------------------- helpers
def test_model_grid_skips_gaps_and_resolves_the_period():
    from rotinfer.figures import model_time_grid

    t = np.concatenate([np.arange(0, 10, 0.01), np.arange(20, 30, 0.01)])
    grid = model_time_grid(t, period=1.0, max_points=4000)
    finite = grid[np.isfinite(grid)]
    assert np.sum(np.isnan(grid)) == 1  # one break, at the gap
    assert not np.any((finite > 10.0) & (finite < 20.0))
    assert finite.size <= 4000 + 4
    assert np.max(np.diff(finite[finite < 10.0])) <= 1.0 / 50 + 1e-12


def test_fold_puts_whole_periods_at_phase_zero():
    from rotinfer.figures._common import fold

    # analytic: t0 + k P has phase 0, t0 + (k + 1/4) P has phase 1/4
    t = 2.0 + PERIOD * np.array([0.0, 1.0, 7.0, 3.25])
    np.testing.assert_allclose(fold(t, PERIOD, t0=2.0), [0.0, 0.0, 0.0, 0.25], atol=1e-12)


def test_band_is_the_summary_interval(posterior):
    from rotinfer.figures._common import period_band
    from rotinfer.summarise import weighted_quantile

    period = posterior.physical()["period"]
    median, lo, hi = period_band(posterior)
    ref = weighted_quantile(period, [0.16, 0.5, 0.84], posterior.weights)
    np.testing.assert_allclose([lo, median, hi], ref, rtol=1e-12)


# ---------------------------------------------------------------------------- figures
def _x_extent(patch):
    """x range in data units of an axvspan (a Rectangle in matplotlib >= 3.9, else a Polygon)."""
    if hasattr(patch, "get_width"):
        return [patch.get_x(), patch.get_x() + patch.get_width()]
    xs = np.asarray(patch.get_xy())[:, 0]
    return [xs.min(), xs.max()]


def _labelled(ax) -> bool:
    return bool(ax.get_xlabel()) and bool(ax.get_ylabel())


def test_summary_figure_panels_units_and_masked_flares(prepared, scan_result, posterior):
    from rotinfer.figures import plot_summary

    fig = plot_summary(prepared, scan_result, posterior, truth_period=PERIOD)
    data_axes = [ax for ax in fig.axes if ax.get_label() != "<colorbar>"]
    assert len(data_axes) == 5
    for ax in data_axes:
        assert _labelled(ax), ax.get_title()
    units = " ".join(ax.get_xlabel() + ax.get_ylabel() for ax in data_axes)
    for unit in ("(d)", "(ppt)"):
        assert unit in units
    legend = [t.get_text() for t in data_axes[0].get_legend().get_texts()]
    n_flare = sum(str(r) in ("flare", "flare-tail") for r in prepared.masked.reason)
    assert n_flare > 0
    assert f"masked: flare ({n_flare})" in legend
    assert "GP predictive mean (MAP)" in legend
    # the 68 % band drawn on the periodogram is the posterior interval
    from rotinfer.figures._common import period_band

    _, lo, hi = period_band(posterior)
    spans = [p for p in data_axes[1].patches if p.get_label() == "posterior period 68 %"]
    assert len(spans) == 1
    np.testing.assert_allclose(_x_extent(spans[0]), [lo, hi], rtol=1e-12)


def test_summary_without_posterior_folds_at_the_periodogram_period(prepared, scan_result):
    from rotinfer.figures import plot_summary

    fig = plot_summary(prepared, scan_result, None)
    fold_ax = fig.axes[3]
    assert f"{scan_result.lomb_scargle.period:.4g} d, Lomb–Scargle" in fold_ax.get_xlabel()


def test_corner_keeps_a_weighty_harmonic_in_view(prepared):
    from rotinfer.figures import plot_corner

    # 20 % of the mass at 2P: the period axis must reach it, and be logarithmic
    two = _posterior(prepared, periods=(PERIOD, 2 * PERIOD), probabilities=(0.8, 0.2))
    fig = plot_corner(two)
    period_ax = fig.axes[6]  # bottom-left panel: period on x
    lo, hi = period_ax.get_xlim()
    assert lo < PERIOD < 2 * PERIOD < hi
    assert period_ax.get_xscale() == "log"
    assert "Period (d)" in period_ax.get_xlabel()
    # a negligible mode (1e-5 of the mass) does not stretch the axis
    tiny = _posterior(prepared, periods=(PERIOD, 2 * PERIOD), probabilities=(1 - 1e-5, 1e-5))
    lo, hi = plot_corner(tiny).axes[6].get_xlim()
    assert hi < 1.5 * PERIOD


def test_corner_from_plain_arrays_and_argument_errors():
    from rotinfer.figures import plot_corner

    rng = np.random.default_rng(2)
    samples = {"period": rng.lognormal(np.log(5), 0.02, 500),
               "amplitude_ppt": rng.lognormal(0, 0.2, 500),
               "coherence_days": rng.lognormal(3, 0.3, 500)}
    fig = plot_corner(samples=samples)
    assert [ax.get_xlabel() for ax in np.asarray(fig.axes).reshape(3, 3)[-1]] == [
        "Period (d)", "Amplitude (ppt)", "Coherence time (d)"]
    with pytest.raises(ValueError, match="either a posterior or samples"):
        plot_corner()


def test_traces_one_column_per_mode_one_colour_per_ensemble(prepared):
    from rotinfer.figures import plot_traces
    from rotinfer.figures.posterior import TRACE_QUANTITIES

    two = _posterior(prepared, periods=(PERIOD, 2 * PERIOD), probabilities=(0.7, 0.3),
                     n_walkers=20)
    fig = plot_traces(two, truth={"period": PERIOD})
    reported = two.model.physical(two.samples[:1])
    n_rows = sum(key in reported for key, _ in TRACE_QUANTITIES)
    # period, amplitude, coherence, f, background amplitude and time, jitter (the mean is
    # integrated out, not sampled)
    assert n_rows == 7
    assert len(fig.axes) == n_rows * 2
    top_left = fig.axes[0]
    assert top_left.get_ylabel() == "Period (d)"
    # 2 ensembles x (16 walkers drawn + the median) + the truth line
    assert len(top_left.get_lines()) == 2 * (16 + 1) + 1
    burn = [p for p in top_left.patches if p.get_label() == "burn-in"]
    assert burn and _x_extent(burn[0])[1] == two.sampled[0].run.diagnostics.burn_in[0]
    for ax in fig.axes:
        assert ax.get_ylabel() or ax.get_subplotspec().colspan.start > 0


def _png_size(path):
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", head[16:24])


def test_write_star_figures_writes_every_file(tmp_path, prepared, scan_result, posterior):
    from rotinfer.figures import FIGURE_FILES, write_star_figures

    written = write_star_figures(tmp_path / "star", prepared, scan_result, posterior,
                                 truth={"period": PERIOD})
    assert tuple(written) == FIGURE_FILES
    for name, path in written.items():
        assert path.is_file() and path.stat().st_size > 1000, name
        if name.endswith(".png"):
            width, height = _png_size(path)
            assert width > 100 and height > 50
    assert written["summary.pdf"].read_bytes()[:5] == b"%PDF-"
    assert _png_size(written["thumbnail.png"]) == (320, 120)
