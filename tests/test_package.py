"""Package-level checks: metadata, exceptions, the frozen light-curve type and config loading."""

from __future__ import annotations

import dataclasses
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import rotinfer
from rotinfer.config import config_hash, dataclass_from_mapping, read_toml
from rotinfer.errors import ConfigError, InputError

ROOT = Path(__file__).resolve().parents[1]


def test_version_matches_metadata():
    assert rotinfer.__version__ != "0.0.0+unknown"


def test_lightcurve_is_immutable_and_copies_input():
    t = np.arange(5.0)
    lc = rotinfer.LightCurve(time=t, flux=np.ones(5))
    t[0] = 99.0
    assert lc.time[0] == 0.0
    with pytest.raises(ValueError):
        lc.flux[0] = 2.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        lc.flux = np.zeros(5)
    assert lc.segment.dtype == np.int64 and lc.n_segments == 1
    assert lc.baseline == 4.0


def test_lightcurve_shape_mismatch_is_input_error():
    with pytest.raises(InputError, match="time has 3 values but flux has 2"):
        rotinfer.LightCurve(time=np.arange(3.0), flux=np.ones(2))


@dataclasses.dataclass(frozen=True)
class _Demo:
    width: float = 1.0
    mode: str = "a"
    on: bool = False


def test_config_rejects_unknown_keys_listing_allowed():
    with pytest.raises(ConfigError, match=r"unknown option\(s\) wdith; allowed: mode, on, width"):
        dataclass_from_mapping(_Demo, {"wdith": 2}, section="demo")


def test_config_types_are_strict():
    assert dataclass_from_mapping(_Demo, {"width": 2}, section="demo").width == 2.0
    with pytest.raises(ConfigError, match="expected true or false"):
        dataclass_from_mapping(_Demo, {"on": "yes"}, section="demo")


def test_config_hash_changes_with_values():
    assert config_hash(_Demo()) == config_hash(_Demo())
    assert config_hash(_Demo()) != config_hash(_Demo(width=2.0))


def test_read_toml_bad_file(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[prepare\n")
    with pytest.raises(ConfigError, match="bad.toml: not valid TOML"):
        read_toml(bad)


def test_ci_runs_the_readme_test_command():
    """.ci/run must run exactly the README's test command (the brief's rule)."""
    readme = (ROOT / "README.md").read_text()
    block = readme.split("<!-- test-command -->")[1].split("<!-- /test-command -->")[0]
    lines = [ln for ln in block.strip().splitlines() if not ln.startswith("```")]
    assert len(lines) == 1 and "pytest" in lines[0]
    out = subprocess.run(
        ["bash", "-c",
         "awk '/<!-- test-command -->/{flag=1; next} /<!-- \\/test-command -->/{flag=0} "
         "flag && !/^```/' README.md"],
        cwd=ROOT, capture_output=True, text=True, check=True,
    )
    assert out.stdout.strip() == lines[0]
    assert "awk '/<!-- test-command -->/" in (ROOT / ".ci" / "run").read_text()


def test_cli_version_and_help():
    out = subprocess.run(
        [sys.executable, "-m", "rotinfer", "--version"], capture_output=True, text=True
    )
    assert out.returncode == 0 and rotinfer.__version__ in out.stdout
    out = subprocess.run([sys.executable, "-m", "rotinfer", "--help"], capture_output=True,
                         text=True)
    assert out.returncode == 0 and "Exit codes" in out.stdout


def test_cli_unknown_command_is_usage_error():
    out = subprocess.run([sys.executable, "-m", "rotinfer", "frobnicate"], capture_output=True,
                         text=True)
    assert out.returncode == 2
    assert out.stderr.count("\n") == 1 and "No such command" in out.stderr
