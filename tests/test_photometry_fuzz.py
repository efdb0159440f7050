"""Property-based fuzzing of the photometry reader (hypothesis).

The contract (docs/input-formats.md): whatever the bytes, ``read_lightcurve`` returns a valid
``LightCurve`` or raises ``PhotometryError`` with a one-line message naming the file; never any
other exception. Random bytes, valid-looking CSV/ECSV with hostile cells, and gzip of both, under
every file name the reader sniffs. The default suite runs a bounded number of examples; the long
run is behind the ``slow`` marker.
"""

from __future__ import annotations

import gzip
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tumble.exceptions import PhotometryError
from tumble.photometry import LightCurve, read_lightcurve

#: Examples per property in the default suite (bounded: the whole file runs in seconds).
QUICK_EXAMPLES = 40
#: Examples per property in the long run (pytest -m slow).
LONG_EXAMPLES = 1500

NAMES = ["x.csv", "x.tsv", "x.txt", "x.dat", "x.ecsv", "x.fits", "x.vot", "x.csv.gz", "x.ecsv.gz", "x"]

# cells a hostile or unlucky file holds: extremes, specials, text, quotes, line breaks, control characters
HOSTILE_NUMBERS = st.sampled_from(["1e308", "-1e308", "5e-324", "0", "-0", "nan", "NaN", "inf", "-inf", "",
                                   "2460000.5", "60000.25", "2.4e6", "1e-300", "99999999999999999999", "15.2",
                                   "0.02", "-1", "0x10", "1_000", " 3 ", "1e", "--"])
HOSTILE_TEXT = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12)
CELL = st.one_of(HOSTILE_NUMBERS, HOSTILE_TEXT,
                 st.floats(allow_nan=True, allow_infinity=True).map(repr),
                 st.sampled_from(['"quoted, comma"', '"line\nbreak"', '"unclosed', '""', "\x1b[31m", "\x00"]))
HEADERS = st.lists(st.sampled_from(["jd", "mjd", "time", "date", "mag", "magnitude", "err", "mag_err", "sigma",
                                    "flux", "flux_err", "band", "filter", "session", "object", "r_au", "delta",
                                    "phase", "note", "JD", "Mag"]), min_size=1, max_size=7)


@st.composite
def csv_text(draw):
    header = draw(HEADERS)
    delim = draw(st.sampled_from([",", "\t", ";", " "]))
    n = draw(st.integers(0, 25))
    rows = [delim.join(draw(CELL) for _ in header) for _ in range(n)]
    lead = draw(st.sampled_from(["", "# OBJECT: ../../trav\n", "\ufeff", "# comment only\n", "#\n"]))
    return (lead + delim.join(header) + "\n" + "\n".join(rows)).encode("utf-8", "surrogatepass")


@st.composite
def good_csv_with_one_hostile_cell(draw):
    """A plausible light curve (reference shape: ZTF-like jd,mag,err) with one cell replaced."""
    n = draw(st.integers(10, 30))
    t = 2460000.5 + np.sort(np.array(draw(st.lists(st.floats(0, 30), min_size=n, max_size=n))))
    rows = [[repr(float(a)), "15.0", "0.02"] for a in t]
    i, j = draw(st.integers(0, n - 1)), draw(st.integers(0, 2))
    rows[i][j] = draw(CELL)
    return ("jd,mag,err\n" + "\n".join(",".join(r) for r in rows) + "\n").encode("utf-8", "surrogatepass")


@st.composite
def ecsv_text(draw):
    body = draw(csv_text()).decode("utf-8", "surrogatepass")
    head = draw(st.sampled_from(["# %ECSV 1.0\n# ---\n# datatype:\n# - {name: jd, datatype: float64}\n",
                                 "# %ECSV 1.0\n# ---\n", "# %ECSV 0.9\n# ---\n# meta: !!omap\n"]))
    return (head + body).encode("utf-8", "surrogatepass")


PAYLOAD = st.one_of(
    st.binary(max_size=600),
    st.binary(max_size=400).map(lambda b: b"SIMPLE  =" + b),
    st.binary(max_size=400).map(lambda b: b"<?xml version='1.0'?><VOTABLE>" + b),
    csv_text(),
    good_csv_with_one_hostile_cell(),
    ecsv_text(),
)
GZIPPED = st.one_of(PAYLOAD.map(lambda b: gzip.compress(b, mtime=0)),
                    PAYLOAD.map(lambda b: gzip.compress(b, mtime=0)[: max(2, len(b) // 3)]))


def _check(data: bytes, name: str) -> None:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / name
        path.write_bytes(data)
        try:
            lc = read_lightcurve(path)
        except PhotometryError as exc:
            msg = str(exc)
            assert msg.startswith(str(path)) or "TUMBLE_MAX_INPUT_MB" in msg, msg
            assert "\n" not in " ".join(msg.split()) and "Traceback" not in msg
            return
        # a valid LightCurve: finite, sorted, positive errors (the LightCurve contract)
        assert isinstance(lc, LightCurve) and lc.n_points >= 1
        assert np.all(np.isfinite(lc.t)) and np.all(np.diff(lc.t) >= 0)
        assert np.all(np.isfinite(lc.mag)) and np.all(lc.err > 0) and np.all(np.isfinite(lc.err))


FUZZ = dict(deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@settings(max_examples=QUICK_EXAMPLES, **FUZZ)
@given(data=PAYLOAD, name=st.sampled_from(NAMES))
def test_reader_returns_a_lightcurve_or_photometry_error(data, name):
    _check(data, name)


@settings(max_examples=QUICK_EXAMPLES, **FUZZ)
@given(data=GZIPPED, name=st.sampled_from(["x.csv.gz", "x.gz", "x.csv", "x.fits.gz"]))
def test_reader_on_random_gzip(data, name):
    _check(data, name)


@pytest.mark.slow
@settings(max_examples=LONG_EXAMPLES, **dict(FUZZ, derandomize=False))
@given(data=st.one_of(PAYLOAD, GZIPPED), name=st.sampled_from(NAMES))
def test_reader_fuzz_long(data, name):
    _check(data, name)
