"""ALCDEF reading and writing.

The synthetic files below are written from the keyword description of the ALCDEF
standard (Warner, Stephens & Harris 2011, "Save the Lightcurves", Minor Planet
Bulletin 38, 172, and the ALCDEF Standard definition document; from memory): blocks
of STARTMETADATA / KEYWORD=value / ENDMETADATA / DATA=JD|MAG|MAGERR[|AIRMASS] / ENDDATA,
DELIMITER=PIPE or TAB, OBJECTNUMBER/OBJECTNAME/MPCDESIG, MAGBAND, PHASE, LTCAPP, REDUCEDMAGS.
The real file is the open Didymos export in ../shared/external_data/alcdef_didymos/.
"""

from pathlib import Path

import numpy as np
import pytest

from tumble.alcdef import format_alcdef, parse_alcdef
from tumble.cli import main
from tumble.exceptions import PhotometryError
from tumble.photometry import iter_survey, read_lightcurve

DIDYMOS = Path("/work/shared/external_data/alcdef_didymos/ALCDEF_65803_Didymos.txt")


def _block(number, name, desig, jd0, n, *, band="V", phase="+12.30", delim="PIPE", ltc="NONE", reduced="NONE",
           blockid=None, airmass=False):
    sep = {"PIPE": "|", "TAB": "\t"}[delim]
    md = [
        "STARTMETADATA",
        f"OBJECTNUMBER={number}",
        f"OBJECTNAME={name}",
        f"MPCDESIG={desig}",
        "SESSIONDATE=2024-10-01",
        "SESSIONTIME=03:00:00",
        "CONTACTNAME=A. Observer",
        "OBSERVERS=A. Observer",
        f"MAGBAND={band}",
        "FILTER=C",
        f"PHASE={phase}",
        "PABL=+10.0",
        "PABB=-2.0",
        "DIFFERMAGS=TRUE",
        f"LTCAPP={ltc}",
        f"REDUCEDMAGS={reduced}",
        f"DELIMITER={delim}",
        "COMMENT=written for the tumble tests",
    ]
    if blockid is not None:
        md.append(f"LCBLOCKID={blockid}")
    md.append("ENDMETADATA")
    t = jd0 + np.arange(n) * 0.004
    mag = 0.3 * np.sin(2 * np.pi * t / 0.1)
    for ti, mi in zip(t, mag):
        fields = [f"{ti:.6f}", f"{mi:+.3f}", "0.012"] + (["1.234"] if airmass else [])
        md.append("DATA=" + sep.join(fields))
    md.append("ENDDATA")
    return md


def _write(path, *blocks, newline="\n"):
    path.write_text(newline.join(line for b in blocks for line in b) + newline)
    return path


def test_one_object_several_blocks(tmp_path):
    path = _write(tmp_path / "one.alcdef",
                  _block(4321, "Kestrel", "2001 AB", 2460584.60, 20, blockid=11),
                  _block(4321, "Kestrel", "2001 AB", 2460585.61, 25, delim="TAB", blockid=12, airmass=True, band="R",
                         phase="+12.80"),
                  newline="\r\n")
    lc = read_lightcurve(path)
    assert lc.object_id == "4321 Kestrel"
    assert lc.n_points == 45 and lc.n_sessions == 2
    assert lc.bands == ("R", "V")
    np.testing.assert_allclose(np.unique(lc.phase_deg), [12.3, 12.8])
    assert lc.meta["light_time"] == "not corrected (no delta_au)"
    np.testing.assert_allclose(lc.err, 0.012)
    assert lc.meta["file_meta"]["alcdef_blocks"][1]["DELIMITER"] == "TAB"
    assert lc.meta["formats"] == ["alcdef"]


def test_several_objects_and_content_sniffing(tmp_path):
    # a .txt name: the content (STARTMETADATA first) decides the format
    path = _write(tmp_path / "mixed.txt",
                  _block(4321, "Kestrel", "2001 AB", 2460584.60, 20),
                  _block(0, "", "2019 QX7", 2460584.70, 15, phase="-99"),
                  _block(4321, "Kestrel", "2001 AB", 2460586.60, 20, ltc="NONE"))
    items = dict(iter_survey(path))
    assert list(items) == ["4321 Kestrel", "2019 QX7"]
    assert items["4321 Kestrel"].n_sessions == 2 and items["2019 QX7"].n_points == 15
    assert items["2019 QX7"].phase_deg is None  # one block says PHASE=-99 (unknown): no phase column
    with pytest.raises(PhotometryError, match="holds 2 objects"):
        read_lightcurve(path)


def test_light_time_flag_and_reduced_magnitudes(tmp_path):
    lc = read_lightcurve(_write(tmp_path / "lt.alcdef", _block(5, "A", "", 2460584.6, 20, ltc="POINT")))
    assert lc.meta["light_time"] == "input already light-time corrected"
    mixed = _write(tmp_path / "mixed.alcdef", _block(5, "A", "", 2460584.6, 20, ltc="POINT"),
                   _block(5, "A", "", 2460585.6, 20))
    with pytest.raises(PhotometryError, match="LTCAPP is applied in some blocks and not in others"):
        read_lightcurve(mixed)
    with pytest.raises(PhotometryError, match="REDUCEDMAGS"):
        read_lightcurve(_write(tmp_path / "red.alcdef", _block(5, "A", "", 2460584.6, 20, reduced="POINT")))


@pytest.mark.parametrize("mutate, message", [
    (lambda ls: ls[:-1], "is not closed (ENDDATA missing)"),
    (lambda ls: ["hello"] + ls, "line 1: 'hello' outside a block"),
    (lambda ls: [x.replace("DELIMITER=PIPE", "DELIMITER=COMMA") for x in ls], "DELIMITER=COMMA is not one of"),
    (lambda ls: [x.replace("|0.012", "|abc", 1) if x.startswith("DATA=") else x for x in ls], "field 3: 'abc' is not a number"),
])
def test_malformed_is_one_line_error(tmp_path, capsys, mutate, message):
    lines = mutate(_block(5, "A", "", 2460584.6, 20))
    path = tmp_path / "bad.alcdef"
    path.write_text("\n".join(lines) + "\n")
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(path) in err[0] and message in err[0]


def test_write_and_read_back(tmp_path):
    src = _write(tmp_path / "one.alcdef", _block(4321, "Kestrel", "", 2460584.60, 20),
                 _block(4321, "Kestrel", "", 2460585.60, 20))
    lc = read_lightcurve(src)
    out = tmp_path / "back.alcdef"
    out.write_text(format_alcdef(lc, contact="A. Observer"))
    back = read_lightcurve(out)
    assert back.n_sessions == 2
    np.testing.assert_allclose(back.t_obs, lc.t_obs, atol=1e-6)
    np.testing.assert_allclose(back.mag, lc.mag, atol=1e-4)


@pytest.mark.skipif(not DIDYMOS.exists(), reason="open data not present")
def test_real_didymos_file():
    # ../shared/external_data/alcdef_didymos/README.md: 57 blocks, 1581 points, 2003-11-22 to 2003-12-26
    blocks = parse_alcdef(DIDYMOS.read_text(), str(DIDYMOS))
    assert len(blocks) == 57 and sum(len(b.jd) for b in blocks) == 1581
    with pytest.raises(PhotometryError, match="magnitude error is non-positive"):  # differential blocks give 0.000
        read_lightcurve(DIDYMOS)
    lc = read_lightcurve(DIDYMOS, default_err=0.02)
    assert lc.object_id == "65803 Didymos"
    # every block is a session, the six blocks of two points too: a block is its own calibration
    # (differential magnitudes), and merging blocks under one zero-point would invent a variation
    two_point = sum(len(b.jd) == 2 for b in blocks)
    assert two_point == 6 and lc.n_sessions == 57
    assert lc.n_points + lc.meta["dropped"].get("duplicates merged", 0) == 1581
    assert lc.bands == ("R", "V")
    assert lc.phase_deg[0] == pytest.approx(16.43)  # first block: PHASE=+16.43
    # SESSIONDATE of the first and last blocks (file header) bracket the data
    assert 2452965.5 < lc.t_obs[0] < 2452966.5 and 2452999.5 < lc.t_obs[-1] < 2453000.5


@pytest.mark.skipif(not DIDYMOS.exists(), reason="open data not present")
def test_real_didymos_period():
    # Pravec et al. 2006, Icarus 181, 63: primary rotation P1 = 2.2593 +- 0.0002 h (the README of the data);
    # the mutual events of the satellite perturb single-period fits, so 0.05 % is asked, not the 1-sigma error
    from tumble.periodogram import fourier_scan

    lc = read_lightcurve(DIDYMOS, default_err=0.02)
    scan = fourier_scan(lc, order=4, min_period_h=1.5, max_period_h=3.5)
    assert scan.peaks[0].period_h == pytest.approx(2.2593, rel=5e-4)


def test_inspect_write_alcdef(tmp_path, capsys):
    src = _write(tmp_path / "one.alcdef", _block(4321, "Kestrel", "", 2460584.60, 20),
                 _block(4321, "Kestrel", "", 2460585.60, 20, band="R"))
    out = tmp_path / "copy.alcdef"
    assert main(["inspect", str(src), "--write", str(out)]) == 0
    capsys.readouterr()
    back = read_lightcurve(out)
    assert back.n_sessions == 2 and back.bands == ("R", "V") and back.object_id == "4321 Kestrel"
