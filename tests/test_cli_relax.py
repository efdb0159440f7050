"""``tumble relax`` end to end through ``tumble.cli.main`` (published check values; bad input -> exit 2)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from astropy.table import Table

from tumble import damping as dm
from tumble.cli import main
from tumble.schema import loads_strict

KEYS = ("tau_gyr", "tau_gyr_lo", "tau_gyr_hi", "diameter_km", "formula", "p_tau_exceeds_age")
# mu Q = 5e11 Pa, rho = 2000 kg m^-3, K3^2 = 0.03: the constants behind Harris's C ~ 17 (from memory)
HARRIS_CONSTANTS = ["--mu-q", "5e11", "--density", "2000", "--k3-squared", "0.03"]


def _json(capsys, argv):
    rc = main(["relax", *argv, "--json"])
    out = capsys.readouterr().out
    assert rc == 0
    data = loads_strict(out)
    for key in KEYS:
        assert key in data
    return data


def test_harris_check_values(capsys):
    # Harris (1994, Icarus 107, 209), C = 17 (from memory): P = 17 h, D = 1 km -> 1.0 Gyr.
    d = _json(capsys, ["--period-h", "17", "--diameter-km", "1", "--formula", "harris"])
    assert d["tau_gyr"] == pytest.approx(1.0, rel=1e-12)
    assert d["tau_gyr_lo"] == pytest.approx(1.0) and d["tau_gyr_hi"] == pytest.approx(1.0)
    assert d["formula"] == "harris" and d["diameter_km"] == 1.0 and d["p_tau_exceeds_age"] == 0.0
    # D = 1 km with P = 28.07 h reaches the 4.5 Gyr age of the Solar System (Harris 1994 form, C = 17)
    d = _json(capsys, ["--period-h", "28.07", "--diameter-km", "1", "--formula", "harris"])
    assert d["tau_gyr"] == pytest.approx(4.5, abs=0.0025)  # 28.07 is rounded to 0.01 h: 3 x 0.005/28.07 x 4.5


def test_burns_safronov_check_values(capsys):
    # Burns & Safronov (1973) with the Harris-calibration constants (from memory): 17 h, 1 km -> 0.976 Gyr;
    # Apophis-like P = 30.56 h (Pravec et al. 2014, from memory), D = 0.375 km -> 40.3 Gyr (derived).
    d = _json(capsys, ["--period-h", "17", "--diameter-km", "1", *HARRIS_CONSTANTS])
    assert d["tau_gyr"] == pytest.approx(0.976, abs=5e-4) and d["formula"] == "burns-safronov"
    d = _json(capsys, ["--period-h", "30.56", "--diameter-km", "0.375", *HARRIS_CONSTANTS])
    assert d["tau_gyr"] == pytest.approx(40.3, abs=0.05) and d["p_tau_exceeds_age"] == 1.0
    # the same body by Harris (1994), C = 17: 41.3 Gyr (derived)
    d = _json(capsys, ["--period-h", "30.56", "--diameter-km", "0.375", "--formula", "harris"])
    assert d["tau_gyr"] == pytest.approx(41.3, abs=0.05)


def test_diameter_from_h_and_albedo(capsys):
    # Pravec & Harris (2007), Appendix A: H = 15, p_V = 0.25 -> 2.6580 km; H = 18, p_V = 0.14 -> 0.89220 km.
    d = _json(capsys, ["--period-h", "17", "--h-mag", "15", "--albedo", "0.25", "--formula", "harris"])
    assert d["diameter_km"] == pytest.approx(2.6580, abs=5e-5)
    d = _json(capsys, ["--period-h", "17", "--h-mag", "18", "--albedo", "0.14", "--formula", "harris"])
    assert d["diameter_km"] == pytest.approx(0.89220, abs=5e-5)
    assert d["tau_gyr"] == pytest.approx(1.0 / 0.89220**2, rel=1e-4)  # Harris (1994): tau ∝ D^-2


def test_default_priors_give_wide_interval_and_are_reported(capsys):
    d = _json(capsys, ["--period-h", "17", "--period-h-err", "0.2", "--h-mag", "18", "--age-gyr", "1"])
    assert d["formula"] == "burns-safronov" and d["age_gyr"] == 1.0
    assert d["tau_gyr_lo"] < d["tau_gyr"] < d["tau_gyr_hi"]
    assert d["tau_gyr_hi"] / d["tau_gyr_lo"] > 10  # mu Q prior 1 dex wide (stated default)
    assert 0.0 < d["p_tau_exceeds_age"] < 1.0
    assert set(d["priors"]) == {"period_h", "h_mag", "albedo", "mu_q_pa", "density_kg_m3", "k3_squared"}
    assert "orders of magnitude" in d["caution"]


def test_seed_makes_runs_repeat(capsys):
    argv = ["--period-h", "17", "--period-h-err", "1", "--diameter-km", "1", "--seed", "3"]
    a = _json(capsys, argv)
    b = _json(capsys, argv)
    c = _json(capsys, argv[:-1] + ["4"])
    assert a["tau_gyr"] == b["tau_gyr"] and a["tau_gyr"] != c["tau_gyr"]


def test_human_output(capsys):
    rc = main(["relax", "--period-h", "30.56", "--diameter-km", "0.375"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "tau =" in out and "68%" in out and "95%" in out
    assert "assumptions" in out and "implication" in out
    assert "mu Q is uncertain by orders of magnitude" in out
    assert "order-of-magnitude scientific estimate, not a measurement" in out and "not operational advice" in out


@pytest.mark.parametrize("argv, match", [
    ([], "--period-h"),
    (["--period-h", "17"], "--diameter-km"),
    (["--period-h", "-3", "--diameter-km", "1"], "period_h"),
    (["--period-h", "17", "--diameter-km", "1", "--h-mag", "18"], "not both"),
    (["--period-h", "17", "--diameter-km", "1", "--albedo", "0.2"], "--albedo"),
    (["--period-h", "17", "--diameter-km", "1", "--formula", "harris", "--mu-q", "1e10"], "Harris"),
    (["--period-h", "17", "--diameter-km", "1", "--formula", "sharma-burns-hui"], "shape coefficient"),
    (["--period-h", "17", "--diameter-km", "1", "--sample", "x.ecsv"], "not both"),
    (["--sample", "does-not-exist.ecsv"], "no such file"),
])
def test_bad_input_exit_2_one_line(capsys, argv, match):
    rc = main(["relax", *argv])
    err = capsys.readouterr().err
    assert rc == 2
    assert len(err.strip().splitlines()) == 1 and match in err


def _sample_catalog(path, seed, log10_mu_q_pa, n=250, use_h=False):
    """A results catalog (DESIGN columns) of simulated objects whose verdicts follow the boundary model."""
    gen = np.random.default_rng(seed)
    d = 10 ** gen.uniform(-1.0, 1.0, n)
    p = 10 ** gen.uniform(0.3, 2.5, n)
    lik = dm.RigidityLikelihood(np.log10(dm.tau_burns_safronov_gyr(p, d, 1.0, 2000.0, 0.03)), np.zeros(n, bool),
                                math.log10(4.5), 0.02)
    npa = gen.random(n) < lik.p_npa(np.array([log10_mu_q_pa, math.log10(0.3), 0.8]))
    nan = np.full(n, np.nan)
    cols = {
        "object": [f"SIM-{i:04d}" for i in range(n)],
        "status": ["ok"] * n,
        "message": [""] * n,
        "rotation": np.where(npa, "NPA", "PA"),
        "mode": np.where(npa, "SAM", "none"),
        "p_npa": np.where(npa, 0.99, 0.01),
        "period_h": np.where(npa, nan, p),
        "period_h_err": np.where(npa, nan, 0.01 * p),
        "p_psi_h": np.where(npa, 5 * p, nan),
        "p_phi_h": np.where(npa, 0.9 * p, nan),
        "p1_h": np.where(npa, p, nan),
        "p2_h": np.where(npa, 0.5 * p, nan),
    }
    if use_h:
        # a plain astropy Table with H and albedo; H from the inverse of Pravec & Harris (2007)
        cols["h_mag"] = 5 * np.log10(1329.0 / (np.sqrt(0.2) * d))
        cols["albedo"] = np.full(n, 0.2)
        t = Table(cols)
        t["period_h"].unit = "h"
        t.write(path, format="ascii.ecsv", overwrite=True)
    else:
        # through the project's results-catalog writer, with diameter_km as an extra column
        from tumble.results import empty_row, write_results

        rows = []
        for i in range(n):
            row = empty_row(cols["object"][i])
            row.update({k: v[i] for k, v in cols.items() if k not in ("object", "status", "message")})
            row["diameter_km"] = d[i]
            rows.append(row)
        write_results(rows, path, extra_columns=["diameter_km"])
    return npa


@pytest.mark.filterwarnings("ignore::tumble.exceptions.ConvergenceWarning")  # short chain to keep the test fast
def test_sample_recovers_known_mu_q(tmp_path, capsys):
    truth = math.log10(5e11)
    path = tmp_path / "results.ecsv"
    npa = _sample_catalog(path, 7, truth, use_h=True)
    rc = main(["relax", "--sample", str(path), "--walkers", "16", "--steps", "1200", "--seed", "1", "--json"])
    assert rc == 0
    d = loads_strict(capsys.readouterr().out)
    assert d["n_npa"] == int(npa.sum()) and d["n_pa"] == int((~npa).sum())
    assert d["log10_mu_q_pa_lo95"] < truth < d["log10_mu_q_pa_hi95"]
    assert d["mu_q_pa_lo"] < d["mu_q_pa"] < d["mu_q_pa_hi"]
    assert "orders of magnitude" in d["caution"] and d["assumptions"]


@pytest.mark.filterwarnings("ignore::tumble.exceptions.ConvergenceWarning")  # short chain to keep the test fast
def test_sample_human_output(tmp_path, capsys):
    path = tmp_path / "results.ecsv"
    _sample_catalog(path, 8, 10.5, n=150)
    rc = main(["relax", "--sample", str(path), "--walkers", "16", "--steps", "600", "--quiet"])
    out = capsys.readouterr().out
    assert rc == 0
    for text in ("mu Q", "68%", "95%", "mu Q / T", "assumptions", "tumblers (NPA)", "orders of magnitude"):
        assert text in out


def test_sample_with_one_class_is_bad_input(tmp_path, capsys):
    path = tmp_path / "pa_only.ecsv"
    Table({"object": ["a", "b"], "status": ["ok", "ok"], "rotation": ["PA", "PA"], "period_h": [5.0, 6.0],
           "diameter_km": [1.0, 2.0]}).write(path, format="ascii.ecsv")
    rc = main(["relax", "--sample", str(path), "--quiet"])
    assert rc == 2 and "both tumblers and PA rotators" in capsys.readouterr().err
