"""The results catalogue schema (DESIGN.md) reads back with astropy with its units."""

import numpy as np
import pytest

from tumble.exceptions import TumbleError
from tumble.results import COLUMN_NAMES, RESULT_COLUMNS, empty_row, read_results, write_results

# The column list of the results catalogue, fixed in the project's design.
DESIGN_COLUMNS = (
    "object, status, message, n_points, n_sessions, span_d, rotation, mode, p_npa, ln_bayes_factor, grade, "
    "period_h, period_h_err, p_psi_h, p_psi_h_lo, p_psi_h_hi, p_phi_h, p_phi_h_lo, p_phi_h_hi, p1_h, p2_h, "
    "amplitude_mag, tau_damp_gyr, tau_damp_gyr_lo, tau_damp_gyr_hi, runtime_s"
).split(", ")


def test_schema_matches_design():
    assert list(COLUMN_NAMES) == DESIGN_COLUMNS


@pytest.mark.parametrize("ext", ["ecsv", "fits", "csv"])
def test_round_trip_with_units(tmp_path, ext):
    # astropy.table.Table.read is the reference reader.
    from astropy.table import Table

    ok = empty_row("2099 KR3")
    ok.update(n_points=412, rotation="NPA", mode="SAM", p_npa=0.97, p_psi_h=101.5, period_h=np.nan)
    bad = empty_row("2099 KR4", status="error", message="x.csv: line 3:\n bad")
    path = write_results([ok, bad], tmp_path / f"results.{ext}")
    table = Table.read(path)
    assert list(table.colnames) == DESIGN_COLUMNS
    assert table["status"].tolist() == ["ok", "error"]
    assert table["message"][1] == "x.csv: line 3: bad"  # one line
    assert table["p_psi_h"][0] == pytest.approx(101.5)
    if ext != "csv":
        units = {c.name: c.unit for c in RESULT_COLUMNS}
        for name in ("span_d", "period_h", "amplitude_mag", "tau_damp_gyr", "runtime_s"):
            assert str(table[name].unit) == units[name]
    again = read_results(path)
    assert len(again) == 2


def test_errors(tmp_path):
    with pytest.raises(TumbleError, match="no such file"):
        read_results(tmp_path / "none.ecsv")
    with pytest.raises(TumbleError, match="extension"):
        write_results([empty_row("a")], tmp_path / "r.xlsx")
    with pytest.raises(TumbleError):
        empty_row("a", status="fine")
