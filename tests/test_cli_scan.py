"""`tumble scan`: JSON keys, table output, --two-period, --plot/--out files, the Gault file, bad input."""

from __future__ import annotations


import numpy as np
import pytest

from tumble.cli import main
from tumble.schema import loads_strict

JD0 = 2460300.5


@pytest.fixture
def lc_csv(tmp_path, rng):
    """An invented 8-night campaign of a double-peaked 5.2-h rotator, as CSV."""
    rows = ["jd,mag,err,night"]
    for night in range(8):
        t = JD0 + 2 * night + 0.05 + np.sort(rng.uniform(0, 0.25, 40))
        ph = 2 * np.pi * (t - JD0) * 24 / 5.2
        m = 15.3 + 0.2 * np.cos(2 * ph) + 0.04 * np.cos(ph + 0.3) + rng.normal(0, 0.015, t.size) \
            + rng.normal(0, 0.05)
        rows += [f"{a:.7f},{b:.4f},0.015,{night}" for a, b in zip(t, m)]
    path = tmp_path / "2040_AB1.csv"
    path.write_text("\n".join(rows) + "\n")
    return path


def test_scan_json_keys_and_values(lc_csv, capsys):
    code = main(["scan", str(lc_csv), "--json", "--quiet", "--min-period-h", "1", "--max-period-h", "20"])
    assert code == 0
    out = loads_strict(capsys.readouterr().out)
    for key in ("best_period_h", "best_period_h_err", "rotation_period_h", "peaks"):
        assert key in out
    # double-peaked curve: dominant period P/2, rotation period P (common practice)
    assert out["best_period_h"] == pytest.approx(2.6, rel=2e-3)
    assert out["rotation_period_h"] == pytest.approx(5.2, rel=2e-3)
    assert out["best_period_h_err"] > 0
    assert {"period_h", "delta_chi2", "alias"} <= set(out["peaks"][0])
    assert out["peaks"][0]["delta_chi2"] == 0.0


def test_scan_table_two_period_plot_and_out(lc_csv, tmp_path, capsys):
    png = tmp_path / "scan.png"
    ecsv = tmp_path / "scan.ecsv"
    code = main(["scan", str(lc_csv), "--quiet", "--two-period", "--min-period-h", "1", "--max-period-h", "20",
                 "--plot", str(png), "--out", str(ecsv)])
    assert code == 0
    text = capsys.readouterr().out
    assert "rotation period" in text and " h" in text and "delta BIC" in text
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    from astropy.table import Table

    tab = Table.read(ecsv, format="ascii.ecsv")
    assert {"period_h", "frequency_per_d", "chi2"} <= set(tab.colnames)
    assert str(tab["period_h"].unit) == "h"
    assert not list(tmp_path.glob(".*.tmp*"))  # written atomically, no leftovers


def test_scan_two_period_json_keys(lc_csv, capsys):
    code = main(["scan", str(lc_csv), "--json", "--quiet", "--two-period", "--min-period-h", "1",
                 "--max-period-h", "20"])
    assert code == 0
    out = loads_strict(capsys.readouterr().out)
    for key in ("p1_h", "p2_h", "delta_bic"):
        assert key in out
    # a principal-axis rotator: no support for a second period (BIC, Schwarz 1978)
    assert out["delta_bic"] < 0


def test_scan_gault_runs_and_claims_nothing(gault_csv, capsys):
    # Real sparse ZTF data (see shared/external_data/gault_ztf/README.md): runs without
    # error and claims no confident period (common practice for 65 sparse points).
    code = main(["scan", str(gault_csv), "--json", "--quiet"])
    assert code == 0
    out = loads_strict(capsys.readouterr().out)
    assert out["confident"] is False
    assert all(p["false_alarm_probability"] >= out["fap_threshold"] for p in out["peaks"])


def test_scan_bad_input_is_exit_2(lc_csv, capsys):
    code = main(["scan", str(lc_csv), "--quiet", "--min-period-h", "10", "--max-period-h", "2"])
    assert code == 2
    err = capsys.readouterr().err
    assert err.startswith("tumble scan: error:") and len(err.strip().splitlines()) == 1
    assert main(["scan", str(lc_csv), "--quiet", "--order", "0"]) == 2
    assert main(["scan", str(lc_csv), "--quiet", "--order", "40"]) == 2


@pytest.mark.parametrize("ext", ["ecsv", "csv", "fits", "vot"])
def test_scan_out_format_follows_the_ending(tmp_path, ext, lc_csv):
    # astropy.table.Table.read is the reference reader: each file is the format its ending names
    from astropy.table import Table

    out = tmp_path / f"scan.{ext}"
    assert main(["scan", str(lc_csv), "--out", str(out), "--quiet"]) == 0
    t = Table.read(out, format={"ecsv": "ascii.ecsv", "csv": "ascii.csv", "fits": "fits", "vot": "votable"}[ext])
    assert len(t) > 10 and "period_h" in t.colnames


def test_scan_out_unknown_ending_is_bad_input(tmp_path, lc_csv, capsys):
    assert main(["scan", str(lc_csv), "--out", str(tmp_path / "scan.txtx")]) == 2
    assert "--out must end in one of" in capsys.readouterr().err
