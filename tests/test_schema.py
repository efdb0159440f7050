"""One schema for every per-object output: results catalogue, verdict.json, report table and docs."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest

from tumble import display as dp
from tumble import schema
from tumble.results import COLUMN_NAMES, read_results, write_results

DOCS = Path(__file__).resolve().parents[1] / "docs" / "outputs.md"


def test_docs_table_is_the_schema():
    # docs/outputs.md shows the table generated from tumble/schema.py, between its markers
    text = DOCS.read_text(encoding="utf-8")
    m = re.search(r"<!-- schema table:[^\n]*-->\n(.*?)<!-- end schema table -->", text, re.S)
    assert m, "docs/outputs.md lacks the schema table markers"
    assert m.group(1).strip() == schema.docs_table().strip()


def test_every_field_is_well_formed():
    import astropy.units as u

    names = [f.name for f in schema.FIELDS]
    assert len(names) == len(set(names))
    for f in schema.FIELDS:
        assert f.kind in ("str", "int", "float", "bool"), f
        assert f.display in dp.FORMATTERS, f
        if f.unit:
            u.Unit(f.unit)  # astropy parses every unit (the reference for unit strings)
        if f.name.endswith(("_lo", "_hi")):
            assert f.name[:-3] in schema.FIELD_BY_NAME, f"interval end {f.name} without its median"
    # the names carry their unit (project convention: _h, _d, _deg, _mag, _gyr, _s)
    suffix_units = {"_h": "h", "_d": "d", "_deg": "deg", "_mag": "mag", "_gyr": "Gyr", "_s": "s"}
    for f in schema.FIELDS:
        stem = re.sub(r"_(lo|hi|err)$", "", f.name)
        for suffix, unit in suffix_units.items():
            if stem.endswith(suffix):
                assert f.unit == unit, f
    for name in ("prior_npa", "ln_bayes_factor_err", "route", "converged", "mode_margin", "period_syn_h",
                 "npa_limit_mag", "n_cycles", "phase_coverage", "screen_flag", "screen_score", "p_orb_h",
                 "p_orb_h_lo", "p_orb_h_hi", "event_depth_mag", "event_width_phase"):
        assert name in COLUMN_NAMES


def test_verdict_dict_of_today_is_written_with_lo_hi_keys_and_strict_json():
    # a Verdict.to_dict() as classify.py writes it now: [median, lo, hi] lists, object_id, state_converged,
    # mode 'none', NaNs
    d = {"object_id": "2099 KR3", "rotation": "NPA", "mode": "none", "p_npa": 0.97, "prior_npa": 0.1,
         "ln_bayes_factor": 7.4, "ln_bayes_factor_err": 0.3, "grade": "sound", "period_h": math.nan,
         "p_psi_h": 101.5, "p_phi_h": 40.2, "a_over_b": [1.4, 1.3, 1.5], "l_lon_deg": (120.0, 110.0, 131.0),
         "state_converged": np.True_, "warnings": ["few cycles"], "n_points": np.int64(412)}
    v = schema.verdict_record(d, seed=3)
    text = schema.dumps_strict(v)
    back = schema.loads_strict(text)
    assert list(back)[: len(schema.VERDICT_FIELDS)] == [f.name for f in schema.VERDICT_FIELDS]
    assert back["object"] == "2099 KR3" and back["mode"] == "unknown" and back["converged"] is True
    assert (back["a_over_b"], back["a_over_b_lo"], back["a_over_b_hi"]) == (1.4, 1.3, 1.5)
    assert back["l_lon_deg_hi"] == 131.0
    assert back["period_h"] is None and back["n_points"] == 412 and back["seed"] == 3
    assert not any(isinstance(x, list) for k, x in back.items() if k != "warnings")
    assert back["npa_code_p2005"] == "NPA3"
    row = schema.results_row(d)
    assert row["message"] == "few cycles" and row["converged"] == "true" and row["a_over_b_hi"] == 1.5
    pa = schema.results_row({"object": "x", "rotation": "PA", "mode": "none", "grade": "firm"})
    assert pa["mode"] == "" and pa["npa_code_p2005"] == "PAR"


def test_missing_keys_are_empty_cells(tmp_path):
    # the writers tolerate records that do not carry the newer keys
    path = write_results([{"object": "a", "rotation": "PA"}, schema.results_row(object_id="b", status="error",
                                                                                   message="b.csv: bad")],
                         tmp_path / "r.ecsv")
    t = read_results(path)
    assert t.colnames == list(COLUMN_NAMES)
    assert math.isnan(float(t["npa_limit_mag"][0])) and str(t["route"][0]) in ("", "--")
    with pytest.raises(schema.SchemaError):
        schema.results_row({"status": "fine"})


def test_strict_json_refuses_nan():
    with pytest.raises(ValueError):
        schema.loads_strict('{"a": NaN}')
    assert schema.loads_strict(schema.dumps_strict({"a": float("inf"), "b": np.float32(1.5)})) == {"a": None,
                                                                                                    "b": 1.5}


def test_report_columns_come_from_the_schema():
    from tumble.report import SURVEY_COLUMNS

    assert SURVEY_COLUMNS == schema.REPORT_FIELDS
    assert {"route", "prior_npa", "ln_bayes_factor_err", "converged", "mode_margin", "npa_limit_mag",
            "screen_flag", "n_cycles", "phase_coverage"} <= {f.name for f in SURVEY_COLUMNS}


@pytest.mark.parametrize("row, code", [
    # our mapping onto the scale of Pravec et al. (2005, Icarus 173, 108): NPA reliably detected with both
    # periods -> NPA3, one period -> NPA2, possibly detected -> NPA1, PA -> PAR
    ({"rotation": "NPA", "grade": "firm", "p_psi_h": 30.0, "p_phi_h": 12.0}, "NPA3"),
    ({"rotation": "NPA", "grade": "sound", "p1_h": 30.0}, "NPA2"),
    ({"rotation": "NPA", "grade": "tentative", "p1_h": 30.0, "p2_h": 12.0}, "NPA1"),
    ({"rotation": "PA", "grade": "firm"}, "PAR"),
    ({"rotation": "PA", "grade": "tentative"}, ""),
    ({"rotation": "undecided", "grade": "none"}, ""),
    ({"rotation": "NPA", "grade": "firm", "route": "screen"}, ""),
])
def test_pravec2005_code(row, code):
    assert schema.pravec2005_code(row) == code


# ---------------------------------------------------------------------------
# display precision
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("p, text", [(3.18e-19, "< 0.001"), (1 - 1e-9, "> 0.999"), (0.5, "0.500"),
                                     (0.0123, "0.012"), (math.nan, "-"), (None, "-")])
def test_probability(p, text):
    assert dp.format_probability(p) == text


@pytest.mark.parametrize("p, text", [(1e-105, "< 1e-10"), (1e-223, "< 1e-10"), (3.2e-5, "3.2e-05"), (0.5, "0.50"),
                                     (1.0, "1.00")])
def test_fap(p, text):
    assert dp.format_fap(p) == text


def test_damping_time_two_significant_figures():
    # the case: a damping time printed to 7 digits
    assert dp.format_damping_gyr(0.0123456789, 0.00456789, 0.0456789) == "0.012 Gyr (68%: 0.0046 .. 0.046)"
    assert dp.format_damping_gyr(math.nan) == "-"


def test_value_rounded_to_its_error():
    # two significant figures of the error decide the last digit (common practice)
    assert dp.format_value_err(8.153412345, 0.0012345) == "8.1534 +- 0.0012"
    assert dp.format_value_err(12345.6, 230.0) == "12350 +- 230"
    assert dp.format_period_h(24.4412, lo=24.40, hi=24.49) == "24.441"


def test_no_unit_one_for_ratios():
    assert dp.unit_label("1") == "" and dp.unit_label("dimensionless") == "" and dp.unit_label("h") == "h"


def test_relative_paths():
    text = "/data/obs/a/KRN-001.csv: row 3: bad value; see </td> 1/2 and km/s and https://x.org/a/b"
    out = dp.relative_paths(text, "/data/out")
    assert out.startswith("../obs/a/KRN-001.csv: row 3")
    assert "</td> 1/2 and km/s and https://x.org/a/b" in out
    # far outside the output folder only the file name is shown (no '../../../home/...' chain)
    assert dp.relative_paths("read /home/u/deep/er/obs/KRN-1.csv: ok", "/srv/a/b/c/d/out") == "read KRN-1.csv: ok"


def test_error_kinds_group_like_errors():
    from tumble.survey import _error_kind

    # the case: "'n/a?' is not a: 1" in the survey summary
    a = _error_kind("KRN-001.csv: row 3: column mag: 'n/a?' is not a number")
    b = _error_kind("KRN-002.csv: row 19: column mag: 'x' is not a number")
    assert a == b == "value is not a number"
    assert _error_kind("KRN: internal error: ValueError: boom 1") == "internal error ValueError"
