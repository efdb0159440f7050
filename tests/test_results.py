"""The results catalogue schema (DESIGN.md) reads back with astropy with its units."""

import numpy as np
import pytest

from tumble.exceptions import TumbleError
from tumble.results import COLUMN_NAMES, RESULT_COLUMNS, empty_row, read_results, write_results

# The column list of the results catalogue, fixed in the project's design (issue 19 added route, prior,
# ln B error, convergence, mode margin, detection limit, screen flag/score, the Pravec et al. 2005 code,
# synodic period, coverage, rotation-state intervals, the binary hypothesis and their _lo/_hi pairs;
# issue 15 the period kind, sidereal or synodic; issue 20 the second event's depth, the event duration
# and epoch, the primary's period and the screen's binary candidate).
DESIGN_COLUMNS = (
    "object, status, message, route, n_points, n_sessions, span_d, rotation, mode, p_npa, prior_npa, "
    "ln_bayes_factor, ln_bayes_factor_err, p_npa_model, calibrated, npa_testable, grade, grade_uncapped, "
    "converged, mode_margin, npa_limit_mag, screen_flag, screen_score, npa_code_p2005, period_h, "
    "period_h_err, p_psi_h, p_psi_h_lo, p_psi_h_hi, p_phi_h, p_phi_h_lo, p_phi_h_hi, p1_h, p2_h, "
    "period_syn_h, period_kind, period_fap, n_cycles, phase_coverage, amplitude_mag, error_scale_chosen, residual_fap, "
    "excitation, excitation_lo, excitation_hi, a_over_b, a_over_b_lo, a_over_b_hi, b_over_c, b_over_c_lo, "
    "b_over_c_hi, l_lon_deg, l_lon_deg_lo, l_lon_deg_hi, l_lat_deg, l_lat_deg_lo, l_lat_deg_hi, p_orb_h, "
    "p_orb_h_lo, p_orb_h_hi, event_depth_mag, event_depth2_mag, event_width_phase, event_duration_h, "
    "event_epoch_jd, p_primary_h, binary_candidate, tau_damp_gyr, tau_damp_gyr_lo, "
    "tau_damp_gyr_hi, runtime_s"
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
