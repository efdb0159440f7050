"""In-memory tables, astropy Time and Quantity inputs, plausible time values.

Reference libraries: astropy.time (time scales) and astropy.units (unit conversion).
"""

import numpy as np
import pandas as pd
import pytest
import astropy.units as u
from astropy.table import QTable, Table
from astropy.time import Time

from tumble.exceptions import PhotometryError
from tumble.photometry import LightCurve, ReadOptions, read_lightcurve, read_survey
from tumble.timeformats import NUMERIC_TIME_FORMATS, implausible_time

N = 40


@pytest.fixture
def arrays():
    rng = np.random.default_rng(3)
    jd = 2460580.5 + np.sort(rng.uniform(0.0, 2.0, N))
    mag = 16.0 + 0.2 * np.sin(2 * np.pi * jd / 0.25) + rng.normal(0, 0.01, N)
    return jd, mag, np.full(N, 0.01)


def test_astropy_table_and_dataframe_read_like_a_file(arrays, tmp_path):
    jd, mag, err = arrays
    table = Table({"jd": jd, "mag": mag, "err": err})
    path = tmp_path / "lc.csv"
    table.write(path, format="ascii.csv")
    from_file = read_lightcurve(path)
    for obj in (table, table.to_pandas(), {"jd": jd, "mag": mag, "err": err}, table.as_array()):
        lc = read_lightcurve(obj)
        np.testing.assert_array_equal(lc.t, from_file.t)
        np.testing.assert_array_equal(lc.mag, from_file.mag)
        assert lc.object_id == "object"


def test_time_column_keeps_its_scale(arrays):
    # reference: astropy.time converts TT and TDB to UTC; our t_obs is JD UTC, t is JD TDB
    jd, mag, err = arrays
    for scale in ("utc", "tt", "tdb", "tai"):
        t = Time(jd, format="jd", scale=scale)
        lc = read_lightcurve(QTable({"when": t, "mag": mag, "err": err}))
        np.testing.assert_allclose(lc.t_obs, t.utc.jd, rtol=0, atol=1e-9)
        np.testing.assert_allclose(lc.t, t.tdb.jd, rtol=0, atol=1e-9)  # no Delta: t is the TDB time
    lc = LightCurve.from_arrays(Time(jd - 2400000.5, format="mjd", scale="tt"), mag, err)
    np.testing.assert_allclose(lc.t_obs, Time(jd, format="jd", scale="tt").utc.jd, rtol=0, atol=1e-9)
    assert lc.meta["time_scale"] == "tt"


def test_pandas_datetimes(arrays):
    # reference: astropy.time; a tz-aware column is converted to UTC first
    jd, mag, err = arrays
    stamps = pd.to_datetime(Time(jd, format="jd", scale="utc").datetime64)
    lc = read_lightcurve(pd.DataFrame({"date": stamps, "mag": mag, "err": err}))
    np.testing.assert_allclose(lc.t_obs, jd, rtol=0, atol=1e-8)
    shifted = pd.Series(stamps).dt.tz_localize("UTC").dt.tz_convert("Etc/GMT+5")
    lc2 = read_lightcurve(pd.DataFrame({"date": shifted, "mag": mag, "err": err}))
    np.testing.assert_allclose(lc2.t_obs, jd, rtol=0, atol=1e-8)


def test_quantities_converted_by_unit(arrays):
    # reference: astropy.units; 0.3187 rad = 18.26 deg
    jd, mag, err = arrays
    phase = np.full(N, 0.3187) * u.rad
    qt = QTable({"time": jd * u.day, "mag": mag * u.mag, "err": err * u.mag, "phase": phase,
                 "r": np.full(N, 1.5 * 1.495978707e8) * u.km, "delta": np.full(N, 0.6) * u.au})
    lc = read_lightcurve(qt)
    np.testing.assert_allclose(lc.phase_deg, phase.to_value(u.deg))
    assert lc.phase_deg[0] == pytest.approx(18.26, abs=0.005)
    np.testing.assert_allclose(lc.r_au, 1.5, rtol=1e-12)
    # a plain Table column with a unit (not a Quantity) is converted too
    t = Table({"time": jd, "mag": mag, "err": err, "phase": np.full(N, 0.3187)})
    t["phase"].unit = u.rad
    assert read_lightcurve(t).phase_deg[0] == pytest.approx(np.degrees(0.3187))
    # from_arrays takes Quantities
    lc = LightCurve.from_arrays(jd, mag, err, phase_deg=phase)
    np.testing.assert_allclose(lc.phase_deg, np.degrees(0.3187))


def test_wrong_kind_of_unit_is_one_line_error(arrays):
    jd, mag, err = arrays
    with pytest.raises(PhotometryError, match=r"<QTable>: column 'phase': a unit of length cannot be our 'phase_deg'"):
        read_lightcurve(QTable({"time": jd, "mag": mag, "err": err, "phase": np.ones(N) * u.m}))
    with pytest.raises(PhotometryError, match=r"column 'err': a unit of angle cannot be our 'err' column \(mag or no unit\)"):
        read_lightcurve(QTable({"time": jd, "mag": mag, "err": err * u.deg}))


def test_masked_and_missing_cells(arrays):
    jd, mag, err = arrays
    t = Table({"time": jd, "mag": mag, "err": err}, masked=True)
    t["mag"].mask[3] = True
    lc = read_lightcurve(t)
    assert lc.n_points == N - 1 and lc.meta["dropped"] == {"missing magnitude": 1}
    df = pd.DataFrame({"time": jd, "mag": pd.array(np.where(np.arange(N) == 3, np.nan, mag), dtype="Float64"),
                       "err": err})
    assert read_lightcurve(df).n_points == N - 1


def test_survey_dataframe_with_object_column(arrays):
    jd, mag, err = arrays
    df = pd.DataFrame({"object": ["a"] * N + ["b"] * N, "time": np.r_[jd, jd], "mag": np.r_[mag, mag],
                       "err": np.r_[err, err]})
    lcs = read_survey(df)
    assert [lc.object_id for lc in lcs] == ["a", "b"]
    assert all(lc.n_points == N for lc in lcs)


def test_mjd_read_as_jd_is_an_error(arrays):
    # MJD = JD - 2400000.5 (IAU definition, common practice)
    jd, mag, err = arrays
    with pytest.raises(PhotometryError, match=r"row 1, column 'time': 60580\.\d+ is not a plausible JD .*is it MJD"):
        LightCurve.from_arrays(jd - 2400000.5, mag, err)
    lc = LightCurve.from_arrays(jd - 2400000.5, mag, err, time_format="mjd")
    np.testing.assert_allclose(lc.t_obs, jd, rtol=0, atol=1e-8)
    with pytest.raises(PhotometryError, match="not a plausible MJD"):
        read_lightcurve({"time": jd, "mag": mag, "err": err}, time_format="mjd")


def test_plausible_ranges_are_1800_to_2200():
    # reference: astropy.time gives the JD of the range ends
    jd = NUMERIC_TIME_FORMATS["jd"]
    assert jd.lowest == Time("1800-01-01", scale="tai").jd  # TAI: no leap-second table before 1960
    assert jd.highest == Time("2200-01-01", scale="tai").jd
    assert NUMERIC_TIME_FORMATS["mjd"].lowest == pytest.approx(Time("1800-01-01", scale="tai").mjd)
    assert implausible_time([2460000.0, np.nan], "jd") is None
    assert implausible_time([2460000.0, 1.0], "jd")[0] == 1
    assert implausible_time([1.0], "iso") is None


def test_cli_time_format_checked(tmp_path, capsys, arrays):
    from tumble.cli import main

    jd, mag, err = arrays
    path = tmp_path / "lc.csv"
    Table({"time": jd, "mag": mag, "err": err}).write(path, format="ascii.csv")
    assert main(["inspect", str(path), "--time-format", "mjd"]) == 2
    msg = capsys.readouterr().err.strip().splitlines()
    assert len(msg) == 1 and "line 2, column 'time'" in msg[0] and "not a plausible MJD" in msg[0]


def test_encoding_option(tmp_path, capsys, arrays):
    from tumble.cli import main

    jd, mag, err = arrays
    lines = ["# OBSERVER: Ångström-Müller", "time,mag,err,band"] + [f"{a},{b},{c},Rc" for a, b, c in zip(jd, mag, err)]
    path = tmp_path / "latin.csv"
    path.write_bytes("\n".join(lines).encode("latin-1"))
    with pytest.raises(PhotometryError, match="not UTF-8 text"):
        read_lightcurve(path)
    lc = read_lightcurve(path, encoding="latin-1")
    assert lc.meta["file_meta"]["OBSERVER"] == "Ångström-Müller"
    assert main(["inspect", str(path), "--encoding", "latin-1", "--json"]) == 0
    capsys.readouterr()
    with pytest.raises(PhotometryError, match="unknown text encoding 'klingon'"):
        ReadOptions(encoding="klingon")


def test_parquet_file(tmp_path, arrays):
    # written by astropy (reference library), units kept through the file
    jd, mag, err = arrays
    qt = QTable({"time": jd, "mag": mag, "err": err, "phase": np.full(N, 0.2) * u.rad})
    qt.write(tmp_path / "lc.parquet")
    lc = read_lightcurve(tmp_path / "lc.parquet")
    np.testing.assert_allclose(lc.phase_deg, np.degrees(0.2))
    np.testing.assert_allclose(lc.t_obs, jd, rtol=0, atol=1e-9)
    (tmp_path / "bad.parquet").write_text("time,mag\n1,2\n")
    with pytest.raises(PhotometryError, match=r"bad.parquet: unreadable Parquet"):
        read_lightcurve(tmp_path / "bad.parquet")


def test_parquet_without_the_extra_is_one_line(tmp_path, monkeypatch, arrays):
    import importlib.util

    from tumble import _extras
    from tumble.exceptions import MissingExtraError
    from tumble.results import write_results

    real = importlib.util.find_spec
    monkeypatch.setattr(_extras.importlib.util, "find_spec", lambda name, *a: None if name == "pyarrow" else real(name, *a))
    with pytest.raises(MissingExtraError, match=r"x.parquet: writing Parquet needs the optional package 'pyarrow': "
                                                r"pip install 'tumble\[parquet\]'"):
        write_results([], tmp_path / "x.parquet")
    assert not (tmp_path / "x.parquet").exists()
    (tmp_path / "lc.parquet").write_bytes(b"PAR1" + b"\0" * 20 + b"PAR1")
    with pytest.raises(PhotometryError, match=r"lc.parquet: reading Parquet needs .*tumble\[parquet\]"):
        read_lightcurve(tmp_path / "lc.parquet")


@pytest.mark.parametrize("fmt, ext", [("ascii.ecsv", "ecsv"), ("fits", "fits"), ("votable", "xml")])
def test_file_units_converted(tmp_path, arrays, fmt, ext):
    # reference: astropy.units (0.3187 rad = 18.26 deg; 1 au = 149597870.7 km, IAU 2012 B2)
    jd, mag, err = arrays
    qt = QTable({"time": jd, "mag": mag, "err": err, "phase": np.full(N, 0.3187) * u.rad,
                 "r": np.full(N, 149597870.7 * 2.0) * u.km})
    path = tmp_path / f"lc.{ext}"
    qt.write(path, format=fmt)
    lc = read_lightcurve(path)
    np.testing.assert_allclose(lc.phase_deg, np.degrees(0.3187))
    np.testing.assert_allclose(lc.r_au, 2.0, rtol=1e-12)


def test_unrecognised_units_left_alone(arrays):
    jd, mag, err = arrays
    t = Table({"time": jd, "mag": mag, "err": err})
    t["time"].unit = u.Unit("JD", parse_strict="silent")
    t["mag"].unit = u.Unit("magnitudes_of_sorts", parse_strict="silent")
    lc = read_lightcurve(t)
    np.testing.assert_allclose(lc.t_obs, jd, rtol=0, atol=1e-9)


def test_survey_parquet_without_extra_fails_before_the_run(tmp_path, monkeypatch, capsys, arrays):
    import importlib.util

    from tumble import _extras
    from tumble.cli import main

    jd, mag, err = arrays
    path = tmp_path / "lc.csv"
    Table({"time": jd, "mag": mag, "err": err}).write(path, format="ascii.csv")
    real = importlib.util.find_spec
    monkeypatch.setattr(_extras.importlib.util, "find_spec", lambda name, *a: None if name == "pyarrow" else real(name, *a))
    assert main(["survey", str(path), "--out", str(tmp_path / "r.parquet"), "--screen", "--workers", "1"]) == 2
    err_lines = capsys.readouterr().err.strip().splitlines()
    assert len(err_lines) == 1 and "tumble[parquet]" in err_lines[0]
    assert not list(tmp_path.glob("r.parquet*"))  # nothing run, no journal left behind
