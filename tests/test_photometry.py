"""The reader and the LightCurve contract."""

import gzip
import json

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tumble.exceptions import PhotometryError
from tumble.photometry import (
    LightCurve,
    ReadOptions,
    iter_survey,
    parse_column_map,
    read_lightcurve,
    read_survey,
    write_lightcurve,
)

EXTENSIONS = ["csv", "tsv", "txt", "ecsv", "fits", "vot", "csv.gz", "ecsv.gz", "fits.gz", "vot.gz"]


def make_lc(rng, n=40, nights=3, **kw):
    t = 2460000.5 + np.sort(np.concatenate([k + rng.uniform(0.0, 0.25, n // nights) for k in range(nights)]))
    n = len(t)
    mag = 15 + 0.2 * np.sin(2 * np.pi * t / 0.15) + rng.normal(0, 0.01, n)
    return LightCurve.from_arrays(t, mag, np.full(n, 0.01), band="V", object_id="2099 QA1", **kw)


# ---------------------------------------------------------------- real data
def test_gault_reads_correctly(gault_csv):
    # Real ZTF photometry of (6478) Gault (shared/external_data/gault_ztf/README.md):
    # UTF-8 with a byte-order mark, 65 rows, 41 in r and 24 in g, MJD 58071.384-58522.313.
    lc = read_lightcurve(gault_csv)
    assert lc.n_points == 65
    assert lc.bands == ("g", "r")
    assert int(np.sum(lc.band == "r")) == 41 and int(np.sum(lc.band == "g")) == 24
    assert lc.meta["time_format"] == "mjd"
    assert lc.meta["columns"]["r_au"] == "rh" and lc.meta["columns"]["phase_deg"] == "alpha"
    # Time: MJD -> JD (astropy.time as the reference library).
    from astropy.time import Time

    raw = np.genfromtxt(gault_csv, delimiter=",", names=True, encoding="utf-8-sig", dtype=None)
    order = np.argsort(raw["mjd"], kind="stable")
    np.testing.assert_allclose(lc.t_obs, Time(raw["mjd"][order], format="mjd", scale="utc").jd, rtol=0, atol=1e-9)
    # Reduced magnitude: mag - 5 log10(rh * delta), as the data README prescribes.
    expect = raw["mag"][order] - 5 * np.log10(raw["rh"][order] * raw["delta"][order])
    np.testing.assert_allclose(lc.reduced_mag, expect, rtol=0, atol=1e-12)
    assert lc.phase_deg.min() == pytest.approx(10.396) and lc.phase_deg.max() == pytest.approx(22.931)
    # At most two points a night in two bands: every point is sparse (no session of 3 or more).
    assert np.all(lc.session == -1)
    # Light time from delta (IAU au and c): t = t_obs(TDB) - delta/c.
    tdb = Time(lc.t_obs, format="jd", scale="utc").tdb.jd
    np.testing.assert_allclose(lc.t, tdb - lc.delta_au * 0.0057755183, rtol=0, atol=1e-9)


# ---------------------------------------------------------------- time
@pytest.mark.parametrize("scale", ["utc", "tt", "tdb"])
def test_time_scales_against_astropy(scale):
    # astropy.time is the reference for UTC/TT/TDB conversions.
    from astropy.time import Time

    t = 2460000.5 + np.linspace(0, 1, 12)
    lc = LightCurve.from_arrays(t, np.full(12, 15.0), np.full(12, 0.02), time_scale=scale)
    ref = Time(t, format="jd", scale=scale)
    np.testing.assert_allclose(lc.t_obs, ref.utc.jd, rtol=0, atol=1e-10)
    np.testing.assert_allclose(lc.t, ref.tdb.jd, rtol=0, atol=1e-10)
    assert lc.meta["light_time"].startswith("not corrected")


def test_mjd_and_iso_times(tmp_path):
    from astropy.time import Time

    iso = [f"2025-02-{d:02d}T03:{m:02d}:00" for d in (3, 4) for m in range(0, 60, 10)]
    p = tmp_path / "iso.csv"
    p.write_text("date,mag,err\n" + "".join(f"{s},15.0,0.02\n" for s in iso))
    lc = read_lightcurve(p)
    assert lc.meta["time_format"] == "iso"
    np.testing.assert_allclose(lc.t_obs, Time(iso, scale="utc").jd, atol=1e-9)
    p2 = tmp_path / "mjd.txt"
    mjd = Time(iso, scale="utc").mjd
    p2.write_text("# my night\ntime mag err\n" + "".join(f"{m:.8f} 15.0 0.02\n" for m in mjd))
    lc2 = read_lightcurve(p2)
    assert lc2.meta["time_format"] == "mjd"
    np.testing.assert_allclose(lc2.t_obs, lc.t_obs, atol=1e-8)


def test_light_time_flag_and_delta(tmp_path):
    t = 2460000.5 + np.linspace(0, 1, 12)
    lc = LightCurve.from_arrays(t, np.full(12, 15.0), np.full(12, 0.02), delta_au=0.2, r_au=1.1)
    # IAU au and c: 0.2 au is 99.80096 s of light time.
    from astropy.time import Time

    tdb = Time(t, format="jd", scale="utc").tdb.jd
    np.testing.assert_allclose((tdb - lc.t) * 86400, 99.80096, atol=1e-4)
    flagged = LightCurve.from_arrays(t, np.full(12, 15.0), np.full(12, 0.02), delta_au=0.2, r_au=1.1,
                                     light_time_corrected=True)
    np.testing.assert_allclose(flagged.t, tdb, atol=1e-10)


# ---------------------------------------------------------------- columns
def test_aliases_and_column_map(tmp_path):
    p = tmp_path / "odd.csv"
    rows = "".join(f"{2460000.5 + i * 0.01},{15 + 0.01 * i},0.03,{i // 6}\n" for i in range(12))
    p.write_text("JD_MID,Vmag,sig,nite\n" + rows)
    with pytest.raises(PhotometryError, match="no time column"):
        read_lightcurve(p)
    lc = read_lightcurve(p, columns="time=JD_MID,mag=Vmag,err=sig,session=nite")
    assert lc.n_points == 12 and lc.n_sessions == 2
    assert lc.meta["columns"] == {"time": "JD_MID", "mag": "Vmag", "err": "sig", "session": "nite"}
    with pytest.raises(PhotometryError, match="not in the file"):
        read_lightcurve(p, columns="time=JD,mag=Vmag,err=sig")
    with pytest.raises(PhotometryError, match="unknown column name"):
        parse_column_map("colour=B-V")


def test_case_insensitive_aliases(tmp_path):
    p = tmp_path / "upper.tsv"
    p.write_text("MJD\tMAG\tMAG_ERR\tFILTER\n" + "".join(f"{60000.5 + i * 0.01}\t15\t0.02\tR\n" for i in range(12)))
    lc = read_lightcurve(p)
    assert lc.bands == ("R",) and lc.meta["time_format"] == "mjd"


def test_flux_to_magnitude(tmp_path):
    # m = ZP - 2.5 log10(F), sigma_m = 2.5/ln(10) * sigma_F / F (Pogson; error propagation, common practice).
    flux = np.linspace(1000, 2000, 12)
    p = tmp_path / "flux.csv"
    p.write_text("jd,flux,flux_err\n" + "".join(f"{2460000.5 + i * 0.01},{f},{0.01 * f}\n" for i, f in enumerate(flux)))
    lc = read_lightcurve(p, flux_zero_point=25.0)
    np.testing.assert_allclose(lc.mag, 25.0 - 2.5 * np.log10(flux))
    np.testing.assert_allclose(lc.err, 2.5 / np.log(10) * 0.01)


def test_nan_magnitudes_dropped_and_counted(tmp_path):
    rows = [f"{2460000.5 + i * 0.01},{'' if i in (2, 5) else 15.0},0.02\n" for i in range(14)]
    p = tmp_path / "gaps.csv"
    p.write_text("jd,mag,err\n" + "".join(rows))
    lc = read_lightcurve(p)
    assert lc.n_points == 12
    assert lc.meta["dropped"] == {"missing magnitude": 2}
    assert lc.summary()["n_read"] == 14


def test_default_err(tmp_path):
    p = tmp_path / "noerr.csv"
    p.write_text("jd,mag\n" + "".join(f"{2460000.5 + i * 0.01},15.0\n" for i in range(12)))
    with pytest.raises(PhotometryError, match="no magnitude-error column"):
        read_lightcurve(p)
    lc = read_lightcurve(p, default_err=0.05)
    assert np.all(lc.err == 0.05)
    assert any("set to 0.05" in r for r in lc.meta["reductions"])


def test_unsorted_input_sorted_and_shuffle_invariant(tmp_path, rng):
    lc = make_lc(rng)
    write_lightcurve(lc, tmp_path / "a.csv")
    lines = (tmp_path / "a.csv").read_text().splitlines()
    comments = [ln for ln in lines if ln.startswith("#")]
    header, body = lines[len(comments)], lines[len(comments) + 1:]
    perm = rng.permutation(len(body))
    (tmp_path / "b.csv").write_text("\n".join(comments + [header] + [body[i] for i in perm]) + "\n")
    a, b = read_lightcurve(tmp_path / "a.csv"), read_lightcurve(tmp_path / "b.csv")
    for name in ("t_obs", "t", "mag", "err", "session", "band"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert "rows sorted by time" in b.meta["reductions"]


def test_duplicates_merge_reject_error():
    t = 2460000.5 + np.r_[np.linspace(0, 0.2, 12), 0.0]
    mag = np.r_[np.full(12, 15.0), 15.2]
    err = np.r_[np.full(12, 0.02), 0.02]
    merged = LightCurve.from_arrays(t, mag, err)
    assert merged.n_points == 12 and merged.meta["dropped"] == {"duplicates merged": 1}
    # weighted mean of equal-weight points is their average; error shrinks by sqrt(2)
    assert merged.mag[0] == pytest.approx(15.1) and merged.err[0] == pytest.approx(0.02 / np.sqrt(2))
    rejected = LightCurve.from_arrays(t, mag, err, duplicates="reject")
    assert rejected.n_points == 12 and rejected.mag[0] == 15.0
    with pytest.raises(PhotometryError, match="duplicate time"):
        LightCurve.from_arrays(t, mag, err, duplicates="error")
    # the same time in different bands is not a duplicate
    both = LightCurve.from_arrays(t, mag, err, band=np.array(["g"] * 12 + ["r"]))
    assert both.n_points == 13


def test_sessions_from_gaps_per_band():
    # three nights in g, two in r; a night is split after a gap > 6 h (default)
    t = np.concatenate([d + np.linspace(0, 0.15, 5) for d in (0, 1, 2)] + [d + np.linspace(0.01, 0.16, 5) for d in (0, 1)])
    band = np.r_[np.full(15, "g"), np.full(10, "r")]
    lc = LightCurve.from_arrays(2460000.5 + t, np.full(25, 15.0), np.full(25, 0.02), band=band)
    assert lc.n_sessions == 5
    for s in range(5):
        assert len(set(lc.band[lc.session == s])) == 1
    assert lc.meta["session_rule"] == "gap > 6 h per band"
    # sessions are numbered in time order
    firsts = [lc.t[lc.session == s][0] for s in range(5)]
    assert firsts == sorted(firsts)
    short = LightCurve.from_arrays(2460000.5 + t, np.full(25, 15.0), np.full(25, 0.02), band=band, session_gap_h=2.0)
    assert short.n_sessions == 5
    longgap = LightCurve.from_arrays(2460000.5 + t, np.full(25, 15.0), np.full(25, 0.02), band=band, session_gap_h=48)
    assert longgap.n_sessions == 2


def test_several_files_merge_with_distinct_sessions(tmp_path, rng):
    a = make_lc(rng, nights=1, n=15)
    b = make_lc(rng, nights=1, n=15)
    write_lightcurve(a, tmp_path / "site_a.csv")
    # the second site observed a day later
    shifted = LightCurve.from_arrays(np.asarray(b.t_obs) + 1.0, b.mag, b.err, band="V", object_id=b.object_id)
    write_lightcurve(shifted, tmp_path / "site_b.ecsv")
    lc = read_lightcurve([tmp_path / "site_a.csv", tmp_path / "site_b.ecsv"])
    assert lc.n_points == 30 and lc.n_sessions == 2
    assert len(lc.meta["sources"]) == 2
    assert lc.object_id == "2099 QA1"


def test_survey_table(tmp_path):
    rows = []
    for k, obj in enumerate(["A1", "B2", "C3"]):
        n = 12 if obj != "C3" else 4
        rows += [f"{obj},{2460000.5 + i * 0.3 + k},{15 + k},0.02\n" for i in range(n)]
    p = tmp_path / "survey.csv"
    p.write_text("object,jd,mag,err\n" + "".join(rows))
    items = dict(iter_survey(p))
    assert set(items) == {"A1", "B2", "C3"}
    assert isinstance(items["C3"], PhotometryError) and "only 4 usable points" in str(items["C3"])
    assert items["A1"].n_points == 12 and items["B2"].object_id == "B2"
    with pytest.raises(PhotometryError, match="holds 3 objects"):
        read_lightcurve(p)
    with pytest.raises(PhotometryError, match="C3"):
        read_survey(p)


def test_geometry_from_elements():
    from tumble.geometry import OrbitalElements, observing_geometry

    el = OrbitalElements(2.3, 0.15, 6.0, 40.0, 70.0, 200.0, 2460000.5)
    t = 2460000.5 + np.linspace(0, 30, 20)
    lc = LightCurve.from_arrays(t, np.full(20, 17.0), np.full(20, 0.03), elements=el)
    assert lc.sun_dir.shape == (20, 3) and lc.r_au is not None
    geo = observing_geometry(lc.t_obs + (lc.t - lc.t_obs) + lc.delta_au * 0.0057755183, el)  # TDB obs time
    np.testing.assert_allclose(lc.delta_au, geo.delta_au, rtol=1e-7)
    np.testing.assert_allclose(lc.phase_deg, geo.phase_deg, atol=1e-5)


def test_lightcurve_is_immutable(rng):
    lc = make_lc(rng)
    with pytest.raises(Exception):
        lc.mag[0] = 1.0
    with pytest.raises(Exception):
        lc.object_id = "x"


# ---------------------------------------------------------------- round trips
@pytest.mark.parametrize("ext", EXTENSIONS)
def test_round_trip_each_format(tmp_path, rng, ext):
    lc = make_lc(rng, r_au=np.linspace(1.2, 1.3, 39), delta_au=np.linspace(0.3, 0.35, 39), phase_deg=25.0)
    path = write_lightcurve(lc, tmp_path / f"obj.{ext}")
    back = read_lightcurve(path)
    for name in ("t_obs", "t", "mag", "err", "session", "band", "r_au", "delta_au", "phase_deg"):
        np.testing.assert_array_equal(getattr(back, name), getattr(lc, name), err_msg=name)
    assert back.object_id == lc.object_id
    if ext.endswith(".gz"):
        gzip.decompress(path.read_bytes())  # really compressed


finite = st.floats(allow_nan=False, allow_infinity=False)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    n=st.integers(10, 60),
    seed=st.integers(0, 2**32 - 1),
    ext=st.sampled_from(EXTENSIONS),
    with_dirs=st.booleans(),
)
def test_round_trip_property(tmp_path_factory, n, seed, ext, with_dirs):
    # Any valid light curve written in any format reads back unchanged.
    r = np.random.default_rng(seed)
    t = 2450000 + np.sort(r.uniform(0, 3000, 1)) + np.sort(r.uniform(0, r.uniform(0.5, 400), n))
    kw = {}
    if with_dirs:
        s = r.normal(size=(n, 3))
        o = r.normal(size=(n, 3))
        kw = dict(sun_dir=s / np.linalg.norm(s, axis=1, keepdims=True), obs_dir=o / np.linalg.norm(o, axis=1, keepdims=True))
    bands = r.choice(["g", "r", "i"], n)
    lc = LightCurve.from_arrays(t, r.uniform(-2, 30, n), r.uniform(0.001, 0.5, n), band=bands,
                                object_id=f"T{seed % 997}", min_points=2, **kw)
    d = tmp_path_factory.mktemp("rt")
    back = read_lightcurve(write_lightcurve(lc, d / f"x.{ext}"), min_points=2)
    for name in ("t_obs", "t", "mag", "err", "session", "band", "phase_deg"):
        a, b = getattr(back, name), getattr(lc, name)
        if a is None or b is None:
            assert a is None and b is None, name
            continue
        if name == "phase_deg":
            np.testing.assert_allclose(a, b, atol=1e-9)
        else:
            np.testing.assert_array_equal(a, b, err_msg=name)
    if with_dirs:
        np.testing.assert_allclose(back.sun_dir, lc.sun_dir, atol=1e-15)


def test_summary_is_json_ready(gault_csv):
    s = read_lightcurve(gault_csv).summary()
    json.dumps(s)
    for key in ("object", "n_points", "n_read", "dropped", "n_sessions", "span_d", "bands", "phase_deg_range"):
        assert key in s


def test_read_options_validation():
    with pytest.raises(PhotometryError):
        ReadOptions(time_scale="gps")
    with pytest.raises(PhotometryError):
        ReadOptions(default_err=-1)
    with pytest.raises(PhotometryError):
        ReadOptions(duplicates="keep")
