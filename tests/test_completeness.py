"""Injection-recovery completeness: end to end, table schema, determinism, bad plans, outside checks."""

import math

import numpy as np
import pytest

from tumble.cli import main
from tumble.completeness import (COMPLETENESS_COLUMNS, InjectionDistributions, binomial_interval, draw_injection,
                                 inject_lightcurve, run_completeness)
from tumble.survey import SurveyConfig

from conftest import BAD_DIR

DIST = InjectionDistributions(period_bins_h=(2.0, 6.0, 20.0), amplitude_bins_mag=(0.1, 0.4, 0.8))
N_INJECT = 8


def _rows(table):
    """Rows as lists with NaN as None (NaN != NaN)."""
    return [[None if isinstance(v, float) and math.isnan(v) else v for v in row] for row in table.as_array().tolist()]


def _plan_folder(folder):
    """Two short dense cadences (simulated with tumble.simulate): one with Sun/observer vectors
    written, one with only r, Delta and phase angle (the injection then uses an invented orbit's directions)."""
    from astropy.table import Table

    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve, write_simulation

    folder.mkdir(parents=True, exist_ok=True)
    state = RotationState.principal_axis(5.0, 20.0, 40.0, epoch_jd=2460100.5)
    plan = DenseCampaign(2460100.5, n_nights=2, hours_per_night=3.0, cadence_min=10.0)
    sims = [simulate_lightcurve(state, (1.3, 1.1, 1.0), plan, noise=NoiseModel(0.02), object_id=f"cad{k}", rng=k)
            for k in range(2)]
    write_simulation(sims[0], folder / "cad0.ecsv")
    lc = sims[1].lightcurve
    Table({"jd": lc.t_obs, "mag": lc.mag, "err": lc.err, "r": lc.r_au, "delta": lc.delta_au,
           "phase": lc.phase_deg}).write(folder / "cad1.csv", format="ascii.csv")
    return folder


@pytest.fixture(scope="module")
def plans(tmp_path_factory):
    return _plan_folder(tmp_path_factory.mktemp("plans") / "cadences")


@pytest.fixture(scope="module")
def run_a(plans, tmp_path_factory):
    out = tmp_path_factory.mktemp("compA") / "completeness.ecsv"
    res = run_completeness([plans], N_INJECT, out, SurveyConfig(route="screen", seed=4), dist=DIST, workers=1,
                           progress=False)
    return res


def test_end_to_end_table_columns_units_and_counts(run_a):
    from astropy.table import Table

    t = Table.read(run_a.table_path)  # astropy is the reference reader of the ECSV written
    assert t.colnames == [c[0] for c in COMPLETENESS_COLUMNS]
    assert str(t["period_h_lo"].unit) == "h" and str(t["amplitude_mag_hi"].unit) == "mag"
    assert len(t) == 2 * (2 * 2 + 1)  # per truth: 2 period x 2 amplitude bins + the 'all' row
    inj = Table.read(run_a.injections_path)
    assert len(inj) == N_INJECT and str(inj["true_period_h"].unit) == "h"
    expected = {"cad0": "own", "cad1": "invented orbit, own phase angle"}  # cad1 has no Sun/observer vectors
    assert all(expected[p] == g for p, g in zip(inj["plan_object"], inj["geometry"]))
    for truth in ("NPA", "PA"):
        rows = t[t["truth"] == truth]
        allrow = rows[rows["scope"] == "all"][0]
        # npa_fraction 0.5 is exact: half of the injections are NPA
        assert allrow["n_injected"] == N_INJECT // 2 == int(np.sum(rows["n_injected"][rows["scope"] == "bin"]))
        sel = inj[inj["truth"] == truth]
        ok = sel[sel["status"] == "ok"]
        # the counts recomputed from the per-injection table
        assert allrow["n_classified"] == len(ok) and allrow["n_npa"] == int(np.sum(ok["screen_flag"] == "candidate"))
        assert allrow["n_classified"] + allrow["n_error"] == allrow["n_injected"]
        assert allrow["n_npa"] + allrow["n_pa"] + allrow["n_undecided"] == allrow["n_classified"]
        if allrow["n_classified"]:
            assert allrow["frac_npa"] == pytest.approx(allrow["n_npa"] / allrow["n_classified"])
            assert allrow["frac_npa_lo"] <= allrow["frac_npa"] <= allrow["frac_npa_hi"]
        # injected periods and amplitudes lie in their stated ranges
        assert np.all((sel["true_period_h"] >= 2.0) & (sel["true_period_h"] <= 20.0))
        assert np.all((sel["true_amplitude_mag"] >= 0.1) & (sel["true_amplitude_mag"] <= 0.8))
    assert set(inj["true_mode"][inj["truth"] == "NPA"]) <= {"SAM", "LAM"}
    assert "caution" in t.meta and t.meta["distributions"]["period_bins_h"] == [2.0, 6.0, 20.0]


def test_plot_is_a_png_image(run_a):
    import matplotlib.image as mpimg

    img = mpimg.imread(run_a.plot_path)  # matplotlib reads it back as an image
    assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 400


def test_completeness_map_is_among_the_package_figures(run_a, tmp_path):
    # every figure is reachable from tumble.plots; the map written there is the same image
    # (matplotlib reads both back; image shapes compared, not pixels)
    import matplotlib.image as mpimg

    from tumble.plots import plot_completeness

    out = plot_completeness(run_a.table, tmp_path / "map.png")
    assert mpimg.imread(out).shape == mpimg.imread(run_a.plot_path).shape


def test_deterministic_for_a_seed(plans, run_a, tmp_path):
    from astropy.table import Table

    res = run_completeness([plans], N_INJECT, tmp_path / "again.ecsv", SurveyConfig(route="screen", seed=4),
                           dist=DIST, workers=2, progress=False)
    a, b = Table.read(run_a.table_path), Table.read(res.table_path)
    assert _rows(a) == _rows(b)
    ia, ib = Table.read(run_a.injections_path), Table.read(res.injections_path)
    ia.remove_column("runtime_s")
    ib.remove_column("runtime_s")
    assert _rows(ia) == _rows(ib)
    # injection k does not depend on how many are drawn, and another seed draws other rotators
    names = ["cad0", "cad1"]
    assert draw_injection(3, 2, names, DIST, 4)[0] == draw_injection(3, 2, names, DIST, 4)[0]
    assert draw_injection(3, 2, names, DIST, 4)[0] != draw_injection(3, 2, names, DIST, 5)[0]


def test_resume_of_a_finished_run_classifies_nothing_again(plans, run_a, tmp_path):
    import shutil
    from pathlib import Path

    from astropy.table import Table

    src = Path(run_a.table_path)
    for p in src.parent.iterdir():
        shutil.copy(p, tmp_path / p.name)
    res = run_completeness([plans], N_INJECT, tmp_path / src.name, SurveyConfig(route="screen", seed=4),
                           dist=DIST, workers=1, progress=False, resume=True)
    assert res.survey.n_done_before == N_INJECT and res.survey.n_processed == 0
    assert _rows(Table.read(res.table_path)) == _rows(Table.read(run_a.table_path))


def test_cli_summary(plans, tmp_path, capsys):
    out = tmp_path / "c.ecsv"
    code = main(["survey", "--inject", "4", "--plan-from", str(plans), "--screen", "--workers", "1", "--quiet",
                 "--seed", "2", "--period-bins", "2,6,20", "--amplitude-bins", "0.1,0.4,0.8", "--out", str(out)])
    text = capsys.readouterr().out
    assert code == 0, text
    assert "NPA detected" in text and "false NPA" in text and "scientific estimate" in text
    assert out.exists() and (tmp_path / "c.png").exists() and (tmp_path / "c.injections.ecsv").exists()


@pytest.mark.parametrize("argv, words", [
    (["--inject", "4", "--plan-from", str(BAD_DIR / "empty.csv")], ["empty.csv", "no usable cadence"]),
    (["--inject", "4", "--plan-from", "/nonexistent/plan.csv"], ["no such file"]),
    (["--inject", "0", "--plan-from", str(BAD_DIR / "empty.csv")], ["--inject", "positive"]),
    (["--inject", "4"], ["--plan-from"]),
    (["--inject", "4", "--plan-from", str(BAD_DIR / "empty.csv"), "--report", "rep"], ["--report"]),
    (["--inject", "4", "--plan-from", str(BAD_DIR / "empty.csv"), "--period-bins", "5,2"], ["period_bins_h"]),
])
def test_bad_plan_input_is_a_one_line_error(argv, words, tmp_path, capsys):
    code = main(["survey", *argv, "--quiet", "--out", str(tmp_path / "c.ecsv")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    for w in words:
        assert w in err


def test_binomial_interval_against_scipy():
    # Clopper-Pearson (1934, Biometrika 26, 404) against scipy.stats.binomtest(...).proportion_ci(method='exact'),
    # which finds the bounds by root-finding on the binomial tails (a different route from our beta quantiles).
    from scipy.stats import binomtest

    for k, n in ((0, 1), (0, 10), (3, 10), (10, 10), (7, 25), (50, 120), (1, 2)):
        ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
        lo, hi = binomial_interval(k, n)
        assert lo == pytest.approx(ref.low, abs=1e-9) and hi == pytest.approx(ref.high, abs=1e-9)
    # closed form at k = 0: upper bound 1 - (alpha/2)^(1/n) (Clopper & Pearson 1934)
    assert binomial_interval(0, 20)[1] == pytest.approx(1 - 0.025 ** (1 / 20), rel=1e-12)
    assert all(math.isnan(v) for v in binomial_interval(0, 0))


def test_injected_distributions_against_scipy_kstest():
    # stated distributions: period log-uniform, A = 2.5 log10(a/b) uniform, isotropic spin (sin(lat) uniform;
    # common practice for random directions); checked with scipy.stats.kstest
    from scipy import stats

    dist = InjectionDistributions(period_bins_h=(2.0, 100.0), amplitude_bins_mag=(0.05, 0.8))
    draws = [draw_injection(k, 3, ["a", "b", "c"], dist, 11)[0] for k in range(600)]
    logp = np.log([d.period_h for d in draws])
    assert stats.kstest(logp, stats.uniform(math.log(2), math.log(50)).cdf).pvalue > 1e-3
    amp = np.array([d.amplitude_mag for d in draws])
    assert stats.kstest(amp, stats.uniform(0.05, 0.75).cdf).pvalue > 1e-3
    assert np.allclose(2.5 * np.log10([d.axes[0] / d.axes[1] for d in draws]), amp)
    sinlat = np.sin(np.radians([d.l_lat_deg for d in draws]))
    assert stats.kstest(sinlat, stats.uniform(-1, 2).cdf).pvalue > 1e-3
    assert sum(d.truth == "NPA" for d in draws) == 300


def test_injected_amplitude_equator_on_zero_phase_is_axis_ratio():
    # A PA ellipsoid seen equator-on at zero phase with the Lommel-Seeliger law: the disk integral is
    # proportional to the projected area (from memory; e.g. Muinonen & Lumme 2015, A&A 584, A23), which is
    # pi a c and pi b c at the extremes, so the peak-to-peak amplitude is 2.5 log10(a/b).
    from dataclasses import replace

    from tumble.photometry import LightCurve

    t = 2460000.5 + np.linspace(0.0, 0.5, 400)
    d = np.tile([1.0, 0.0, 0.0], (t.size, 1))
    lc = LightCurve.from_arrays(t, np.full(t.size, 15.0), np.full(t.size, 1e-7), sun_dir=d, obs_dir=d,
                                object_id="geo", min_points=2)
    inj, _ = draw_injection(0, 1, ["geo"], InjectionDistributions(npa_fraction=0.0), 3)
    inj = replace(inj, l_lat_deg=90.0, l_lon_deg=0.0, period_h=4.0, p_phi_h=4.0)  # spin along the ecliptic pole
    new, amp, source = inject_lightcurve(lc, inj, 3)
    assert source == "own" and new.n_points == lc.n_points and np.array_equal(new.t, lc.t)
    assert np.ptp(new.mag) == pytest.approx(2.5 * math.log10(inj.axes[0] / inj.axes[1]), rel=2e-3)
    assert np.array_equal(new.err, lc.err)  # the object's quoted errors are kept
