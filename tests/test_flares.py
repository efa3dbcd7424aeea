"""The flare template against the published coefficients (Davenport et al. 2014, ApJ 797, 122)."""

import numpy as np
import pytest

from rotinfer.flares import flare_profile


def test_template_at_published_points():
    # Davenport et al. 2014 eq. (1) rise polynomial and eq. (4) decay, evaluated by hand
    # from the published coefficients (see ../shared/REFERENCES.md).
    x = np.array([-1.0, -0.5, 0.0, 0.5, 1.0, 3.0])
    expected = np.array([
        1 - 1.94053 - 0.175084 + 2.24588 - 1.12498,
        1 - 0.5 * 1.94053 - 0.25 * 0.175084 + 0.125 * 2.24588 - 0.0625 * 1.12498,
        1.0,
        0.689008 * np.exp(-1.60053 * 0.5) + 0.302963 * np.exp(-0.278318 * 0.5),
        0.689008 * np.exp(-1.60053) + 0.302963 * np.exp(-0.278318),
        0.689008 * np.exp(-1.60053 * 3) + 0.302963 * np.exp(-0.278318 * 3),
    ])
    got = flare_profile(x * 0.01 + 5.0, t_peak=5.0, fwhm=0.01, amplitude=1.0)
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-12)


def test_template_is_zero_before_rise_and_decays_monotonically():
    t = np.linspace(-3, 10, 200001)
    f = flare_profile(t, 0.0, 1.0, 2.0)
    assert np.all(f[t < -1.0] == 0.0)
    assert f.max() == pytest.approx(2.0, rel=1e-3)  # the grid misses t_peak slightly
    # The decay phase falls monotonically and both decay terms sum to ~1 at the peak
    # (0.689008 + 0.302963 = 0.991971, Davenport et al. 2014 eq. 4).
    decay = f[t > 0]
    assert np.all(np.diff(decay) < 0)
    assert decay[0] == pytest.approx(2.0 * 0.991971, rel=1e-4)


def test_bad_fwhm():
    with pytest.raises(ValueError, match="fwhm must be positive"):
        flare_profile([0.0], 0.0, 0.0, 1.0)
