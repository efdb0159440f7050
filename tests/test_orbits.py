"""Orbit files for survey geometry: the MPC export format and plain tables.

Format source: the Minor Planet Center's documentation "Export Format for Minor-Planet
Orbits" (minorplanetcenter.net/iau/info/MPOrbitFormat.html) and its packed designations and
dates ("Packed Provisional and Permanent Designations", "Packed Dates"); examples from memory.
"""

import json

import numpy as np
import pytest
from astropy.time import Time

from tumble.cli import main
from tumble.exceptions import GeometryError
from tumble.geometry import OrbitalElements
from tumble.orbits import name_keys, parse_mpc_orbits, read_orbits, unpack_designation, unpack_epoch_jd
from tumble.photometry import ReadOptions, iter_survey, read_lightcurve

# elements of a test orbit, as printed with the MPC format's precision
ORBIT = dict(m_deg=123.45678, peri_deg=319.31234, node_deg=73.19876, i_deg=3.40812, e=0.3836721, a_au=1.6426412)
EPOCH_PACKED, EPOCH_JD = "K24AH", 2460600.5  # 2024 Oct 17, 0h TT (astropy below)


def _mpc_line(packed, readable, o=ORBIT, epoch=EPOCH_PACKED):
    # place each field at its documented columns (1-based, inclusive)
    fields = [(1, f"{packed:<7s}"), (9, f"{18.16:5.2f}"), (15, f"{0.15:5.2f}"), (21, epoch), (27, f"{o['m_deg']:9.5f}"),
              (38, f"{o['peri_deg']:9.5f}"), (49, f"{o['node_deg']:9.5f}"), (60, f"{o['i_deg']:9.5f}"),
              (71, f"{o['e']:9.7f}"), (81, f"{0.46640129:11.8f}"), (93, f"{o['a_au']:11.7f}"), (106, "0"),
              (108, "E2024-T01"), (118, f"{2398:5d}"), (124, f"{17:3d}"), (128, "1996-2024"), (138, "0.47"),
              (143, "M-v"), (147, "3Ek"), (151, "MPCLINUX  "), (162, "0804"), (167, f"{readable:<28s}"),
              (195, "20240920")]
    line = ""
    for col, text in fields:
        line = line.ljust(col - 1) + text
    return line


def _elements():
    return OrbitalElements(ORBIT["a_au"], ORBIT["e"], ORBIT["i_deg"], ORBIT["node_deg"], ORBIT["peri_deg"],
                           ORBIT["m_deg"], EPOCH_JD)


def test_packed_designations_and_dates():
    # MPC documentation examples (from memory)
    assert unpack_designation("00433") == "433"
    assert unpack_designation("A0345") == "100345"
    assert unpack_designation("~0000") == "620000"
    assert unpack_designation("J95X00A") == "1995 XA"
    assert unpack_designation("J95X01L") == "1995 XL1"
    assert unpack_designation("K07Tf8A") == "2007 TA418"
    assert unpack_designation("PLS2040") == "2040 P-L"
    with pytest.raises(ValueError):
        unpack_designation("hello")
    # packed dates: J9611 = 1996 Jan 1, K01AM = 2001 Oct 22; JD of 0h checked with astropy.time
    assert unpack_epoch_jd("J9611") == Time("1996-01-01", scale="tt").jd
    assert unpack_epoch_jd("K01AM") == Time("2001-10-22", scale="tt").jd
    assert unpack_epoch_jd(EPOCH_PACKED) == Time("2024-10-17", scale="tt").jd == EPOCH_JD


def test_name_matching():
    assert name_keys("(65803) Didymos") == ["65803 didymos", "65803", "didymos"]
    assert name_keys("2005 UD") == ["2005 ud"]
    cat = parse_mpc_orbits(_mpc_line("65803", "(65803) Didymos") + "\n" + _mpc_line("K05U00D", "2005 UD"))
    for name in ("65803", "Didymos", "65803 Didymos", "(65803) Didymos", "65803_Didymos"):
        assert cat.lookup(name) is not None, name
    assert cat.lookup("2005 UD") is not None and cat.lookup("2005 UE") is None


def _survey_csv(path):
    rng = np.random.default_rng(2)
    rows = ["object,time,mag,err"]
    for name in ("65803", "2005 UD", "99999"):
        for t in np.sort(2460610.5 + rng.uniform(0, 20, 30)):
            rows.append(f"{name},{t:.6f},{15 + rng.normal(0, 0.05):.4f},0.02")
    path.write_text("\n".join(rows) + "\n")
    return path


def test_orbit_file_geometry_equals_elements(tmp_path):
    preamble = "MINOR PLANET CENTER ORBIT DATABASE (test copy)\n\nDes'n     H     G   Epoch ...\n" + "-" * 160 + "\n"
    orbits = tmp_path / "MPCORB.DAT"
    orbits.write_text(preamble + _mpc_line("65803", "(65803) Didymos") + "\n" + _mpc_line("K05U00D", "2005 UD") + "\n")
    survey = _survey_csv(tmp_path / "survey.csv")
    opts = ReadOptions(orbits=read_orbits(orbits))
    got = dict(iter_survey(survey, options=opts))
    for name in ("65803", "2005 UD"):
        single = tmp_path / f"{name}.csv"
        lines = survey.read_text().splitlines()
        single.write_text("\n".join([lines[0]] + [ln for ln in lines[1:] if ln.startswith(name + ",")]) + "\n")
        ref = read_lightcurve(single, elements=_elements())
        lc = got[name]
        # issue 18: r, Delta and phase angle from the orbit file agree with --elements on the same elements to 1e-9 au
        np.testing.assert_allclose(lc.r_au, ref.r_au, rtol=0, atol=1e-9)
        np.testing.assert_allclose(lc.delta_au, ref.delta_au, rtol=0, atol=1e-9)
        np.testing.assert_allclose(lc.phase_deg, ref.phase_deg, rtol=0, atol=1e-9)
        assert any("from " + str(orbits) in r for r in lc.meta["reductions"])
    assert got["99999"].r_au is None


def test_plain_table_of_elements(tmp_path):
    table = tmp_path / "elements.csv"
    o = ORBIT
    table.write_text("object,a_au,e,i_deg,node_deg,peri_deg,m_deg,epoch_jd\n"
                     f"65803,{o['a_au']},{o['e']},{o['i_deg']},{o['node_deg']},{o['peri_deg']},{o['m_deg']},{EPOCH_JD}\n")
    survey = _survey_csv(tmp_path / "survey.csv")
    got = dict(iter_survey(survey, options=ReadOptions(orbits=read_orbits(table))))
    mpc = parse_mpc_orbits(_mpc_line("65803", "(65803) Didymos"))
    ref = dict(iter_survey(survey, options=ReadOptions(orbits=mpc)))
    np.testing.assert_allclose(got["65803"].r_au, ref["65803"].r_au, rtol=0, atol=1e-9)
    assert got["2005 UD"].r_au is None
    bad = tmp_path / "bad.csv"
    bad.write_text("object,a_au,e\nx,1,0.1\n")
    with pytest.raises(GeometryError, match=r"bad.csv: no 'i_deg' column"):
        read_orbits(bad)


def test_inspect_reports_objects_without_geometry(tmp_path, capsys):
    orbits = tmp_path / "orbits.txt"
    orbits.write_text(_mpc_line("65803", "(65803) Didymos") + "\n")
    survey = _survey_csv(tmp_path / "survey.csv")
    assert main(["inspect", str(survey), "--orbits", str(orbits), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["without_geometry"] == ["2005 UD", "99999"]
    assert main(["inspect", str(survey), "--orbits", str(orbits)]) == 0
    assert f"without geometry: 2 of 3 objects (not in {orbits}): 2005 UD, 99999" in capsys.readouterr().out


def test_bad_orbit_file_is_one_line(tmp_path, capsys):
    orbits = tmp_path / "orbits.txt"
    line = _mpc_line("65803", "(65803) Didymos")
    orbits.write_text(line + "\n" + line[:70] + "0.38X6721" + line[79:] + "\n")
    survey = _survey_csv(tmp_path / "survey.csv")
    assert main(["inspect", str(survey), "--orbits", str(orbits)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"{orbits}: line 2, columns 71-79: '0.38X6721' is not a number (e)" in err[0]
    assert main(["inspect", str(survey), "--orbits", str(orbits), "--elements", "1,0.1,1,1,1,1,2460600.5"]) == 2
    assert "give one" in capsys.readouterr().err
