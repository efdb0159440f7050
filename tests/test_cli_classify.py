"""Tests of ``tumble classify`` (called through ``tumble.cli.main``)."""

from __future__ import annotations


import numpy as np
import pytest

from tumble.cli import main
from tumble.schema import loads_strict
from tumble.dynamics import RotationState
from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve, write_simulation


@pytest.fixture
def pa_file(tmp_path, rng):
    st = RotationState.principal_axis(7.3, 40.0, 50.0)
    # four nights: two (about four rotations) cannot test NPA, and the verdict would be undecided
    plan = DenseCampaign(2460000.5, n_nights=4, hours_per_night=6.0, cadence_min=8.0, zero_point_sigma_mag=0.05)
    sim = simulate_lightcurve(st, (1.6, 1.2, 1.0), plan, noise=NoiseModel(0.01), rng=rng, object_id="2031 QX")
    path = tmp_path / "pa.csv"
    write_simulation(sim, path)
    return path


REQUIRED = ("rotation", "mode", "p_npa", "ln_bayes_factor", "grade", "period_h", "period_h_err", "p_psi_h",
            "p_psi_h_lo", "p_psi_h_hi", "p_phi_h", "p_phi_h_lo", "p_phi_h_hi", "p1_h", "p2_h", "warnings",
            "evidence_route")


def test_classify_writes_verdict_results_and_samples(pa_file, tmp_path, capsys):
    out = tmp_path / "out"
    code = main(["classify", str(pa_file), "--out", str(out), "--max-steps", "30", "--quiet",
                 "--diameter-km", "1.5"])
    assert code == 0
    text = capsys.readouterr().out
    assert "rotation      PA" in text and "grade" in text and " h" in text
    v = loads_strict((out / "verdict.json").read_text())
    for k in REQUIRED:
        assert k in v
    assert v["rotation"] == "PA" and v["mode"] == ""
    assert v["npa_limit_mag"] > 0 and v["period_fap"] < 1e-3 and v["grade_uncapped"] in ("sound", "firm")
    assert abs(v["period_h"] - 7.3) < 0.02
    assert v["tau_damp_gyr"] is not None and v["tau_damp_gyr"] > 0
    from tumble.results import read_results

    table = read_results(out / "results.ecsv")
    assert len(table) == 1 and table["rotation"][0] == "PA"
    assert abs(float(table["period_h"][0]) - v["period_h"]) < 1e-9
    with np.load(out / "posterior.npz") as z:
        assert z["samples"].shape[1] == len(z["names"])


def test_same_seed_gives_byte_identical_verdict(pa_file, tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    for d in (a, b):
        assert main(["classify", str(pa_file), "--out", str(d), "--seed", "5", "--max-steps", "30", "--quiet"]) == 0
    assert (a / "verdict.json").read_bytes() == (b / "verdict.json").read_bytes()


def test_screen_and_json(pa_file, tmp_path, capsys):
    code = main(["classify", str(pa_file), "--out", str(tmp_path / "s"), "--screen", "--json"])
    assert code == 0
    v = loads_strict(capsys.readouterr().out)
    # a screen speaks as a screen: a flag and a score, no rotation verdict and no grade
    assert v["route"] == "screen" and v["screen_flag"] == "quiet" and not v["rotation"] and not v["grade"]
    assert any("screen" in w for w in v["warnings"])


def test_bad_options_are_bad_input(pa_file, tmp_path, capsys):
    assert main(["classify", str(pa_file), "--out", str(tmp_path / "x"), "--prior-npa", "1.5"]) == 2
    assert "prior-npa" in capsys.readouterr().err
    assert main(["classify", str(pa_file), "--albedo", "0.2"]) == 2
    assert main(["classify", str(tmp_path / "missing.csv")]) == 2


def test_no_binary_reaches_the_classifier(pa_file, tmp_path, monkeypatch, capsys):
    # --no-binary switches the binary family off in classify(); by default it is on
    import tumble.classify as tc

    seen = []

    def fake(lc, **kw):
        seen.append(kw.get("binary"))
        raise tc.ClassifyError("stopped after the options were passed")

    monkeypatch.setattr(tc, "classify", fake)
    for extra, expected in (([], True), (["--no-binary"], False)):
        code = main(["classify", str(pa_file), "--out", str(tmp_path / "o"), "--quiet", *extra])
        assert code == 2 and seen[-1] is expected
    assert "stopped after the options were passed" in capsys.readouterr().err
