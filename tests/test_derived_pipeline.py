"""Derived physics wired into the fit pipeline: the ``derived`` block of summary.json.

The science of each relation is tested in test_derived.py; here the check is that the
pipeline propagates the *whole weighted period posterior* (not a median) into the block and
that ``rotinfer fit`` takes the stellar parameters from its options.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from astropy import constants, units
from test_fit_cli import SMALL_TOML  # the same small sampling budget as the fit tests

from rotinfer.cli import main
from rotinfer.derived import StellarParameters
from rotinfer.errors import ConvergenceWarning
from rotinfer.io import write_light_curve
from rotinfer.pipeline import derived_block
from rotinfer.simulate import ObservingPattern, StarParameters, simulate_star


def test_block_propagates_weighted_modes():
    # Two period modes, 10 d with weight 0.8 and 20 d with weight 0.2: the velocity posterior
    # must carry both (v = 2 pi R / P, IAU 2015 nominal solar radius via astropy).
    period = np.r_[np.full(500, 10.0), np.full(500, 20.0)]
    weight = np.r_[np.full(500, 0.8 / 500), np.full(500, 0.2 / 500)]
    block = derived_block(period, weight, StellarParameters(radius=1.0, radius_err=1e-6),
                          seed=3)
    v = block["quantities"]["equatorial_velocity"] if "quantities" in block else \
        block["equatorial_velocity"]
    v10 = (2 * math.pi * constants.R_sun / (10 * units.day)).to_value(units.km / units.s)
    # 80 % of the mass at P = 10 d: the median and the upper 68 % bound sit at v(10 d), the
    # lower 95 % bound at v(20 d) = v10 / 2.
    assert v["median"] == pytest.approx(v10, rel=1e-4)
    assert v["interval_95"][0] == pytest.approx(v10 / 2, rel=1e-4)
    again = derived_block(period, weight, StellarParameters(radius=1.0, radius_err=1e-6), seed=3)
    assert again == block  # reproducible from the star's seed


def test_fit_cli_writes_the_derived_block(tmp_path):
    params = StarParameters(period=4.3, spot_lifetime=60.0, emergence_rate=0.3,
                            spot_area_median=3e-3, white_noise=0.3, granulation=0.05)
    pattern = ObservingPattern.space(1, 20.0, 120.0, orbit_days=10.0, dropout_fraction=0.0)
    sim = simulate_star(params, pattern, seed=7, name="Kestrel-demo-7")  # invented demo star
    path = tmp_path / "kestrel_demo_7.csv"
    write_light_curve(sim.lc, path)
    cfg = tmp_path / "small.toml"
    cfg.write_text(SMALL_TOML)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        rc = main(["-q", "fit", str(path), "--out", str(tmp_path / "out"), "--config", str(cfg),
                   "--radius", "0.9", "--radius-err", "0.05", "--bv", "0.7", "--bv-err", "0.02"])
    assert rc == 0
    summary = json.loads((tmp_path / "out" / "kestrel_demo_7" / "summary.json").read_text())
    block = summary["derived"]
    assert block is not None and block["lines"]
    with np.load(tmp_path / "out" / "kestrel_demo_7" / "samples.npz") as s:
        p_med = float(np.median(s["period"]))
    v = block["quantities"]["equatorial_velocity"] if "quantities" in block else \
        block["equatorial_velocity"]
    v_expected = (2 * math.pi * 0.9 * constants.R_sun / (p_med * units.day)).to_value(
        units.km / units.s)
    assert v["median"] == pytest.approx(v_expected, rel=0.1)
