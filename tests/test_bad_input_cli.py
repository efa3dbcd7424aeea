"""Every bad input of the ingestion stage, through the real command line.

Each case runs ``python -m rotinfer scan FILE`` in a subprocess and must give exit code 2,
exactly one line on stderr naming the file and the problem, no traceback, and leave the
input file byte-for-byte unchanged. The subprocesses run a few at a time to save wall time.
"""

from __future__ import annotations

import gzip
import os
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from astropy.io import fits

from rotinfer.cli import main
from rotinfer.errors import InputError
from rotinfer.io import file_checksum, from_arrays, read_light_curve, write_light_curve


def _rows(n, *, err=True, flux=None, time=None, noise=False):
    time = np.arange(n) * 0.02 if time is None else time
    if flux is None:
        flux = 1 + 0.01 * np.sin(2 * np.pi * time / 3.0)
        if noise:
            flux = flux + np.random.default_rng(n).normal(0, 1e-3, n)
    lines = ["time,flux,flux_err" if err else "time,flux"]
    for i in range(n):
        lines.append(f"{float(time[i])!r},{float(flux[i])!r}" + (",0.001" if err else ""))
    return "\n".join(lines) + "\n"


def _good_fits(path):
    t = np.arange(0, 27, 0.02)
    write_light_curve(from_arrays(t, 1 + 0.01 * np.sin(t), np.full(t.size, 1e-3)), path)
    return path.read_bytes()


def _make_cases(d: Path) -> dict[str, tuple[list[str], str]]:
    """name -> (command-line arguments after 'scan', expected message fragment)."""
    cases: dict[str, tuple[list[str], str]] = {}

    def text(name, content, fragment, *extra):
        path = d / name
        path.write_text(content)
        cases[name] = ([str(path), *extra], fragment)

    cases["missing"] = ([str(d / "missing.csv")], "file not found")
    (d / "empty.csv").write_bytes(b"")
    cases["empty"] = ([str(d / "empty.csv")], "file is empty")
    text("header_only.csv", "time,flux,flux_err\n", "header only: no data rows")
    rng = np.random.default_rng(5)
    garbage = rng.integers(0, 256, 4096, dtype=np.uint8).tobytes()
    (d / "garbage.dat").write_bytes(garbage)
    cases["garbage"] = ([str(d / "garbage.dat")], "binary data that is neither FITS nor a text")
    good = _good_fits(d / "good.fits")
    (d / "truncated.fits").write_bytes(good[: len(good) // 2])
    cases["truncated_fits"] = ([str(d / "truncated.fits")], "truncated FITS file")
    fits.PrimaryHDU(np.zeros((8, 8))).writeto(d / "image.fits")
    cases["fits_no_table"] = ([str(d / "image.fits")], "FITS file has no table extension")
    text("no_time.csv", "a,flux,err\n1,2,0.1\n2,3,0.1\n", "no time column (looked for time, t, "
         "bjd")
    text("no_flux.csv", "time,b\n1,2\n2,3\n", "no flux column (looked for pdcsap_flux, sap_flux, "
         "flux")
    text("non_numeric.csv", "time,flux\n1,1.0\n2,1.1\n3,abc\n", "non-numeric value 'abc' in "
         "column 'flux' at line 4")
    text("all_nan.csv", _rows(60, flux=np.full(60, np.nan)), "no usable data: all 60 rows have "
         "a missing (NaN)")
    text("constant.csv", _rows(60, flux=np.full(60, 5.0)), "flux is constant (all 60 values "
         "equal 5)")
    text("few.csv", _rows(10), "too few points: 10 usable, at least 50 are needed")
    text("short_request.csv", _rows(300, noise=True), "baseline 5.98 d is too short for "
         "max_period 30 d: at least 60 d of data are needed", "--max-period", "30")
    text("bad_err.csv", _rows(60).replace(",0.001\n", ",-0.001\n", 1).replace(
        ",0.001\n", ",0.0\n", 2), "3 uncertainty value(s) <= 0 in column 'flux_err' (first "
        "-0.001 at line 2)")
    text("infinite.csv", "time,flux\n0,1\n1,inf\n2,1.2\n",
         "1 infinite value(s) in column 'flux' (first at line 3)")
    (d / "folder").mkdir()
    cases["directory"] = ([str(d / "folder")], "is a directory, not a light-curve file")
    if os.geteuid() != 0:
        text("locked.csv", _rows(60), "permission denied")
        (d / "locked.csv").chmod(0)
    return cases


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory):
    d = tmp_path_factory.mktemp("bad")
    cases = _make_cases(d)
    sums = {p: file_checksum(p) for p in d.iterdir() if p.is_file() and os.access(p, os.R_OK)}

    def run(item):
        name, (args, _) = item
        out = subprocess.run([sys.executable, "-m", "rotinfer", "scan", *args],
                             capture_output=True, text=True, timeout=300,
                             env={**os.environ, "OMP_NUM_THREADS": "1"})
        return name, out

    with ThreadPoolExecutor(max_workers=2) as pool:
        results = dict(pool.map(run, cases.items()))
    after = {p: file_checksum(p) for p in sums}
    yield cases, results, sums, after
    if (d / "locked.csv").exists():
        (d / "locked.csv").chmod(0o600)


# The list of bad inputs, one subprocess each (permissions: see
# test_unreadable_file; more variants run in process below).
CASES = [
    "missing", "empty", "header_only.csv", "garbage", "truncated_fits", "fits_no_table",
    "no_time.csv", "no_flux.csv", "non_numeric.csv", "all_nan.csv", "constant.csv",
    "few.csv", "short_request.csv", "bad_err.csv", "infinite.csv", "directory",
]


@pytest.mark.parametrize("name", CASES)
def test_bad_input_exit_code_and_one_line(outcomes, name):
    cases, results, _, _ = outcomes
    args, fragment = cases[name]
    out = results[name]
    assert out.returncode == 2, (out.returncode, out.stderr)
    lines = out.stderr.splitlines()
    assert len(lines) == 1, out.stderr
    assert "Traceback" not in out.stderr
    assert lines[0].startswith("rotinfer: error: ")
    assert args[0] in lines[0]
    assert fragment in lines[0], lines[0]
    assert out.stdout == ""


def test_inputs_are_never_modified(outcomes):
    _, _, before, after = outcomes
    assert before and before == after


@pytest.mark.skipif(os.geteuid() == 0, reason="root can read files whatever their permissions")
def test_unreadable_file(outcomes):
    cases, results, _, _ = outcomes
    out = results["locked.csv"]
    assert out.returncode == 2 and len(out.stderr.splitlines()) == 1
    assert "permission denied" in out.stderr


def test_permission_error_is_mapped(tmp_path, monkeypatch):
    """The same mapping, in process, for machines where tests run as root."""
    path = tmp_path / "locked.csv"
    path.write_text(_rows(60))

    def refuse(self, *args, **kwargs):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "open", refuse)
    with pytest.raises(InputError, match=r"locked\.csv: permission denied \(cannot read"):
        read_light_curve(path)


# In process, through the same entry point the console script calls (cheaper than a
# subprocess for checks that do not need a fresh interpreter).


def _main(capsys, *args):
    code = main(["scan", *map(str, args)])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_option_problems_are_one_line(tmp_path, capsys):
    path = tmp_path / "wrong.csv"
    path.write_text(_rows(60))
    code, out, err = _main(capsys, path, "--flux-column", "brightness")
    assert code == 2 and out == "" and len(err.splitlines()) == 1
    assert f"{path}: flux column 'brightness' not found; columns present: time, flux, " \
           "flux_err" in err
    code, _, err = _main(capsys, path, "--quality-bitmask", "soft")
    assert code == 2 and len(err.splitlines()) == 1
    assert "quality bitmask 'soft' is not recognised; use default, none or a non-negative " \
           "integer" in err
    code, _, err = _main(capsys, path, "--max-period", "-3")
    assert code == 2 and len(err.splitlines()) == 1 and "--max-period" in err


def test_more_file_problems_in_process(tmp_path, capsys):
    good = _good_fits(tmp_path / "good.fits")
    cut = tmp_path / "cut.fits"
    cut.write_bytes(good[:4000])  # ends inside the table's header
    corrupt = bytearray(good)
    corrupt[2880:3280] = b"\x07" * 400  # the table's header overwritten
    (tmp_path / "corrupt.fits").write_bytes(bytes(corrupt))
    short = tmp_path / "short.csv"  # 50 minutes of 30-s data: shorter than 2 x 0.1 d
    short.write_text(_rows(100, time=np.arange(100) * (0.5 / 1440), noise=True))
    expected = {
        cut: "truncated or corrupt FITS file (4000 bytes is not a whole number of 2880-byte "
             "FITS blocks)",
        tmp_path / "corrupt.fits": "corrupt or unreadable FITS file",
        short: "baseline 0.03438 d is too short for the period range: the shortest usable "
               "min_period 0.1 d needs at least 0.2 d of data",
    }
    for path, fragment in expected.items():
        code, out, err = _main(capsys, path)
        assert code == 2 and out == "" and len(err.splitlines()) == 1, err
        assert f"{path}: {fragment}" in err, err


def test_stitched_error_names_the_right_file(tmp_path, capsys):
    good = tmp_path / "s1.csv"
    good.write_text(_rows(100))
    bad = tmp_path / "s2.csv"
    bad.write_text(_rows(100, time=np.arange(100) * 0.02 + 10).replace(",0.001\n", ",0\n", 1))
    code, _, err = _main(capsys, "--stitch", good, bad)
    assert code == 2 and f"{bad}: 1 uncertainty value(s) <= 0" in err


def test_unsorted_and_duplicated_times_are_not_errors(tmp_path, capsys):
    t = np.arange(200) * 0.05
    order = np.random.default_rng(3).permutation(t.size)
    t = np.concatenate([t[order], t[:5]])
    flux = 1 + 0.01 * np.sin(2 * np.pi * t / 2.0) + np.random.default_rng(4).normal(0, 1e-3,
                                                                                    t.size)
    path = tmp_path / "messy.csv.gz"
    with gzip.open(path, "wt") as fh:
        fh.write(_rows(t.size, time=t, flux=flux, err=False))
    before = file_checksum(path)
    code, out, err = _main(capsys, path)
    assert code == 0 and err == "", err
    assert out.startswith("messy: "), out
    n_points = int(out.split(":")[1].split()[0])
    assert 190 <= n_points <= 200  # 200 distinct times; a few may be clipped as outliers
    assert file_checksum(path) == before
