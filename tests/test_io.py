"""Readers and writer: round trips through every format, checked against astropy and numpy."""

from __future__ import annotations

import gzip
import hashlib

import numpy as np
import pytest
from astropy import units as u
from astropy.io import fits
from astropy.table import MaskedColumn, Table
from astropy.time import Time
from astropy.timeseries import TimeSeries

from rotinfer.errors import ConfigError, InputError
from rotinfer.io import (
    DEFAULT_QUALITY_BITMASK,
    file_checksum,
    from_arrays,
    from_table,
    parse_quality_bitmask,
    read_light_curve,
    read_stars,
    stitch,
    write_light_curve,
)

# Absolute times near 2.46e6 d carry float64 rounding of about 5e-10 d (one unit in the
# last place); relative times are compared to a microsecond-level tolerance.
TIME_ATOL = 1e-8


def _lc(rng, n=200, *, err=True, ref=2458325.5, segments=False, name="Test star"):
    t = np.sort(rng.uniform(0, 27, n))
    f = 1000 + 5 * np.sin(2 * np.pi * t / 3.3) + rng.normal(0, 0.5, n)
    e = np.full(n, 0.5) if err else None
    seg = (t > 13.5).astype(int) if segments else None
    return from_arrays(t, f, e, identifier=name, time_reference=ref, time_system="BJD_TDB",
                       segment=seg, flux_unit="e-/s")


@pytest.mark.parametrize("name", ["lc.csv", "lc.csv.gz", "lc.ecsv", "lc.fits", "lc.txt"])
@pytest.mark.parametrize("err", [True, False])
def test_writer_round_trip(tmp_path, rng, name, err):
    lc = _lc(rng, err=err, segments=True)
    path = write_light_curve(lc, tmp_path / name)
    back = read_light_curve(path)
    np.testing.assert_allclose(back.time, lc.time, rtol=0, atol=TIME_ATOL)
    np.testing.assert_array_equal(back.flux, lc.flux)
    if err:
        np.testing.assert_array_equal(back.flux_err, lc.flux_err)
    else:
        assert back.flux_err is None and not back.meta.has_flux_err
    np.testing.assert_array_equal(back.segment, lc.segment)
    assert back.meta.time_reference == lc.meta.time_reference
    assert back.meta.time_system == "BJD_TDB"
    assert back.meta.identifier == "Test star"


def test_csv_layout_is_absolute_time_with_reference_comment(tmp_path, rng):
    lc = _lc(rng, n=5)
    path = write_light_curve(lc, tmp_path / "x.csv")
    lines = path.read_text().splitlines()
    assert "# time_reference: 2458325.5" in lines
    header = [ln for ln in lines if not ln.startswith("#")][0]
    assert header == "time,flux,flux_err"
    # Read with numpy (an outside parser): the time column is time + reference.
    data = np.loadtxt(path, delimiter=",", comments="#", skiprows=len(lines) - 5)
    np.testing.assert_allclose(data[:, 0], lc.time + 2458325.5, rtol=0, atol=1e-6)
    np.testing.assert_array_equal(data[:, 1], lc.flux)


def test_writer_never_overwrites_by_default(tmp_path, rng):
    lc = _lc(rng, n=10)
    path = write_light_curve(lc, tmp_path / "keep.csv")
    before = file_checksum(path)
    with pytest.raises(InputError, match=r"keep\.csv: already exists; refusing to overwrite"):
        write_light_curve(_lc(rng, n=12), path)
    assert file_checksum(path) == before
    write_light_curve(_lc(rng, n=12), path, overwrite=True)
    assert file_checksum(path) != before
    assert [p.name for p in tmp_path.iterdir()] == ["keep.csv"]  # no temporary files left


def test_writer_rejects_unknown_format(tmp_path, rng):
    with pytest.raises(ConfigError, match="'parquet' is not recognised; choose one of csv, ecsv, "
                                          "fits"):
        write_light_curve(_lc(rng, n=5), tmp_path / "x.dat", format="parquet")


def test_file_checksum_known_vector(tmp_path):
    # FIPS 180-2, appendix B.1: SHA-256("abc").
    path = tmp_path / "abc.bin"
    path.write_bytes(b"abc")
    assert file_checksum(path) == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )
    assert file_checksum(path) == hashlib.sha256(b"abc").hexdigest()


# -- delimited text ----------------------------------------------------------------------

TEXT = np.array([[1.0, 10.0, 0.1], [2.5, 11.0, 0.2], [3.0, 9.5, 0.1], [4.25, 10.5, 0.3]])


@pytest.mark.parametrize(
    "header, sep",
    [
        ("time,flux,flux_err", ","),
        ("BJD\tFlux\tErr", "\t"),
        ("t f sigma", " "),
        ("MJD;F;dy", ";"),
        (None, " "),
        ("# bjd flux err", "  "),
    ],
)
def test_text_variants_match_numpy(tmp_path, header, sep):
    lines = [] if header is None else [header]
    lines += [sep.join(repr(v) for v in row) for row in TEXT.tolist()]
    path = tmp_path / "star.dat"
    path.write_text("\n".join(lines) + "\n")
    lc = read_light_curve(path)
    # numpy.loadtxt as the outside reference for the parsed numbers.
    ref = np.loadtxt(path, delimiter=None if sep.strip() == "" else sep,
                     skiprows=0 if header is None or header.startswith("#") else 1)
    np.testing.assert_allclose(lc.time + lc.meta.time_reference, ref[:, 0], rtol=0, atol=1e-12)
    np.testing.assert_array_equal(lc.flux, ref[:, 1])
    np.testing.assert_array_equal(lc.flux_err, ref[:, 2])
    assert lc.meta.identifier == "star"


def test_text_gzip_and_column_options(tmp_path):
    text = "jd,a,b,c\n" + "\n".join(f"{r[0]},{r[1]},{r[1] * 2},{r[2]}" for r in TEXT) + "\n"
    path = tmp_path / "star.csv.gz"
    with gzip.open(path, "wt") as fh:
        fh.write(text)
    with pytest.raises(InputError, match=r"no flux column .*columns present: jd, a, b, c"):
        read_light_curve(path)
    lc = read_light_curve(path, flux_column="B", flux_err_column="c", identifier="S1")
    np.testing.assert_array_equal(lc.flux, TEXT[:, 1] * 2)
    np.testing.assert_array_equal(lc.flux_err, TEXT[:, 2])
    assert lc.meta.identifier == "S1" and lc.meta.time_system == "JD"
    lc = read_light_curve(path, flux_column="2", flux_err_column="none")  # 1-based number
    np.testing.assert_array_equal(lc.flux, TEXT[:, 1])
    assert lc.flux_err is None


def test_btjd_column_implies_tess_reference(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text("btjd,flux\n1325.25,1.0\n1325.75,1.1\n")
    lc = read_light_curve(path)
    # BTJD = BJD_TDB - 2457000 (TESS data products convention).
    np.testing.assert_allclose(lc.time + lc.meta.time_reference,
                               [2458325.25, 2458325.75], rtol=0, atol=1e-9)
    assert lc.meta.time_system == "BJD_TDB"


def test_magnitudes_convert_with_pogson_and_propagate(tmp_path):
    mags = np.array([12.0, 12.01, 11.99, 12.02])
    path = tmp_path / "m.csv"
    path.write_text("hjd,mag,mag_err\n" + "\n".join(
        f"{i},{m},{0.005}" for i, m in enumerate(mags)) + "\n")
    with pytest.raises(InputError, match="column 'mag' looks like magnitudes: pass --magnitudes"):
        read_light_curve(path)
    lc = read_light_curve(path, magnitudes=True)
    # Pogson relation via astropy's magnitude unit, relative to the median magnitude.
    expected = u.Magnitude(mags - np.median(mags)).physical.value
    np.testing.assert_allclose(lc.flux, expected, rtol=1e-12)
    # First-order propagation: sigma_f = 0.4 ln(10) f sigma_m (analytic derivative).
    np.testing.assert_allclose(lc.flux_err, 0.4 * np.log(10) * expected * 0.005, rtol=1e-12)
    assert lc.meta.flux_unit == "relative"


# -- FITS in the missions' layout ----------------------------------------------------------


def _mission_fits(path, rng, n=300, *, object_name="TIC 12345678", ticid=None, gz=False):
    """A light-curve file laid out like the TESS/Kepler archive products, written by astropy."""
    time = 1325.0 + np.arange(n) * (2.0 / 1440.0)
    pdc = 2e4 + rng.normal(0, 20, n)
    sap = 1.9e4 + rng.normal(0, 25, n)
    quality = np.zeros(n, dtype=np.int32)
    quality[[10, 11, 50]] = 32            # momentum dump
    quality[[100]] = 1024 | 8             # two flags at once
    qmask = np.zeros(n, dtype=bool)
    qmask[[200]] = True                   # a masked (TNULL) quality cell
    fmask = np.zeros(n, dtype=bool)
    fmask[[150, 151]] = True              # masked flux cells
    table = Table()
    table["TIME"] = time
    table["SAP_FLUX"] = sap.astype(np.float32)
    table["SAP_FLUX_ERR"] = np.full(n, 25.0, np.float32)
    table["PDCSAP_FLUX"] = MaskedColumn(pdc, mask=fmask)
    table["PDCSAP_FLUX_ERR"] = np.full(n, 20.0)
    table["QUALITY"] = MaskedColumn(quality, mask=qmask)
    hdu = fits.table_to_hdu(table)
    hdu.name = "LIGHTCURVE"
    hdu.header["BJDREFI"] = 2457000
    hdu.header["BJDREFF"] = 0.0
    hdu.header["TIMESYS"] = "TDB"
    hdu.header["TIMEREF"] = "SOLARSYSTEM"
    primary = fits.PrimaryHDU()
    if object_name:
        primary.header["OBJECT"] = object_name
    if ticid is not None:
        primary.header["TICID"] = ticid
    fits.HDUList([primary, hdu]).writeto(path)
    return dict(time=time, pdc=pdc, sap=sap, quality=quality, qmask=qmask, fmask=fmask)


@pytest.mark.parametrize("name", ["tess.fits", "tess.fits.gz"])
def test_mission_fits_round_trip(tmp_path, rng, name):
    path = tmp_path / name
    truth = _mission_fits(path, rng)
    with fits.open(path) as hdul:  # the file really holds big-endian columns
        assert hdul[1].data["TIME"].dtype.byteorder == ">"
        assert hdul[1].columns["QUALITY"].null is not None
    lc = read_light_curve(path)
    flagged = (truth["quality"] != 0) | truth["qmask"]
    keep = ~flagged
    assert lc.meta.identifier == "TIC 12345678"
    assert lc.meta.time_reference == 2457000.0 and lc.meta.time_system == "BJD_TDB"
    assert lc.meta.flux_column == "PDCSAP_FLUX" and lc.meta.has_flux_err
    assert lc.time.dtype == np.float64 and lc.time.dtype.byteorder in "=|"
    np.testing.assert_array_equal(lc.time, truth["time"][keep])
    expected = np.where(truth["fmask"], np.nan, truth["pdc"])[keep]
    np.testing.assert_array_equal(lc.flux, expected)  # masked cells come back as NaN
    assert lc.meta.dropped.counts() == {"quality": int(flagged.sum())}
    np.testing.assert_array_equal(lc.meta.dropped.time, truth["time"][flagged])


def test_mission_fits_options(tmp_path, rng):
    path = tmp_path / "k.fits"
    truth = _mission_fits(path, rng, object_name=None, ticid=998877)
    lc = read_light_curve(path, flux_column="sap_flux", quality_bitmask="none")
    assert lc.meta.identifier == "TIC 998877"
    np.testing.assert_array_equal(lc.flux, truth["sap"].astype(np.float32).astype(np.float64))
    np.testing.assert_array_equal(lc.flux_err, np.full(len(lc), 25.0))
    assert len(lc) == truth["time"].size  # nothing dropped
    # Only bit 8 (value 8): drops the single cadence flagged 1024|8 and the masked cell.
    lc = read_light_curve(path, quality_bitmask=8)
    assert lc.meta.dropped.time.size == 2


def test_quality_bitmask_choices():
    assert parse_quality_bitmask("default") == DEFAULT_QUALITY_BITMASK == 0xFFFFFFFF
    assert parse_quality_bitmask("none") == 0
    assert parse_quality_bitmask("0xAF") == 175 == parse_quality_bitmask(175)
    with pytest.raises(ConfigError, match="'defualt' is not recognised; use default, none or a "
                                          "non-negative integer"):
        parse_quality_bitmask("defualt")


# -- astropy tables --------------------------------------------------------------------------


def test_timeseries_and_table_in_memory(rng):
    jd = 2459000.3 + np.sort(rng.uniform(0, 10, 50))
    ts = TimeSeries(time=Time(jd, format="jd", scale="tdb"),
                    data={"flux": rng.normal(1, 0.01, 50) * u.dimensionless_unscaled})
    lc = from_table(ts)
    # astropy's own two-part Julian dates as the reference for absolute times.
    np.testing.assert_allclose(lc.time + lc.meta.time_reference, ts.time.jd, rtol=0,
                               atol=TIME_ATOL)
    assert lc.meta.time_system == "JD_TDB" and lc.flux_err is None
    table = Table({"Time": jd - 2400000.5, "FLUX": np.arange(50.0) + 1,
                   "Flux_Err": MaskedColumn(np.full(50, 0.1), mask=np.arange(50) == 3)})
    lc = from_table(table, identifier="tbl")
    assert np.isnan(lc.flux_err[3]) and np.all(lc.flux_err[np.arange(50) != 3] == 0.1)


@pytest.mark.parametrize("fmt, name", [("ascii.ecsv", "ts.ecsv"), ("votable", "ts.vot")])
def test_astropy_written_tables(tmp_path, rng, fmt, name):
    jd = 2459000.3 + np.sort(rng.uniform(0, 10, 40))
    flux = rng.normal(1, 0.01, 40)
    table = Table({"bjd": jd, "flux": flux, "err": np.full(40, 0.01)})
    table.write(tmp_path / name, format=fmt)
    lc = read_light_curve(tmp_path / name)
    np.testing.assert_allclose(lc.time + lc.meta.time_reference, jd, rtol=0, atol=TIME_ATOL)
    np.testing.assert_array_equal(lc.flux, flux)
    np.testing.assert_array_equal(lc.flux_err, np.full(40, 0.01))


# -- several files -----------------------------------------------------------------------


def test_stitch_puts_files_on_one_reference(tmp_path, rng):
    a = _lc(rng, n=50, ref=2457000.0, name="S")
    b = from_arrays(np.arange(40) * 0.5 + 10.0, np.full(40, 900.0) + rng.normal(0, 1, 40),
                    np.full(40, 1.0), identifier="S", time_reference=2457100.0,
                    time_system="BJD_TDB")
    pa = write_light_curve(a, tmp_path / "s1.csv")
    pb = write_light_curve(b, tmp_path / "s2.fits")
    (one,) = read_stars([pb, pa], stitch=True)
    assert one.meta.sources == (str(pa), str(pb))  # ordered by time
    assert one.meta.time_reference == 2457000.0
    np.testing.assert_array_equal(np.unique(one.segment), [0, 1])
    absolute = np.concatenate([a.time + 2457000.0, b.time + 2457100.0])
    np.testing.assert_allclose(one.time + one.meta.time_reference, absolute, rtol=0,
                               atol=TIME_ATOL)
    assert len(read_stars([pa, pb])) == 2
    c = from_arrays([0.0, 1.0], [1.0, 2.0], time_system="MJD", source="m.csv")
    with pytest.raises(InputError, match="cannot stitch light curves with different time "
                                         "systems"):
        stitch([a, c])


def test_read_stars_refuses_directories_and_nothing(tmp_path):
    with pytest.raises(InputError, match="is a directory, not a light-curve file"):
        read_stars([tmp_path])
    with pytest.raises(InputError, match="no input files given"):
        read_stars([])
