"""The public Python API: lazy top-level names, callable sub-modules, short reprs, the notebook route."""

import importlib
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import tumble

UD2005 = Path("/work/shared/external_data/ud2005_snuo/2005UD_SNUO_2018Oct_lightcurve.csv")


def test_import_tumble_is_light():
    code = ("import sys, tumble; "
            "print(sorted(m for m in ('numpy', 'astropy', 'scipy', 'pandas') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_public_names():
    from tumble.classify import classify, screen
    from tumble.damping import estimate_damping
    from tumble.periodogram import fourier_scan
    from tumble.photometry import read_lightcurve

    assert tumble.read_lightcurve is read_lightcurve
    assert tumble.screen is screen
    assert tumble.scan is fourier_scan
    assert tumble.relax is estimate_damping
    # tumble.classify is the sub-module and calls its classify(); both spellings work
    mod = importlib.import_module("tumble.classify")
    assert tumble.classify is mod and callable(tumble.classify) and mod.classify is classify
    importlib.import_module("tumble.survey")
    assert callable(tumble.survey) and hasattr(tumble.survey, "run_survey")
    for name in tumble.__all__:
        assert getattr(tumble, name) is not None
    with pytest.raises(AttributeError):
        tumble.no_such_name


def test_version_single_source():
    from importlib.metadata import version

    assert version("tumble") == tumble.__version__


def _synthetic_lc():
    rng = np.random.default_rng(5)
    t = 2460580.5 + np.sort(rng.uniform(0, 2, 200))
    mag = 15 + 0.2 * np.sin(2 * np.pi * t * 24 / 5.0) + rng.normal(0, 0.01, t.size)
    return tumble.LightCurve.from_arrays(t, mag, 0.01, object_id="K-1")


def test_reprs_are_short():
    lc = _synthetic_lc()
    text = repr(lc)
    assert text.startswith("<LightCurve object='K-1', points=200") and len(text) < 200
    assert "<table>" in lc._repr_html_() and "K-1" in lc._repr_html_()
    scan = tumble.scan(lc)
    assert repr(scan).startswith("<ScanResult object='K-1'") and len(repr(scan)) < 250
    assert "peak 1" in scan._repr_html_()
    flagged = tumble.screen(lc)  # a screen states a flag, not a verdict
    assert repr(flagged).startswith("<ScreenResult object='K-1', flag=") and len(repr(flagged)) < 300
    assert "research use" in flagged._repr_html_()
    verdict = tumble.classify(lc, fit_state=False, detection_limit=False, sidereal=False).verdict
    assert repr(verdict).startswith("<Verdict object='K-1', rotation=") and len(repr(verdict)) < 300
    assert "research use" in verdict._repr_html_()


def test_html_escapes_names():
    lc = _synthetic_lc()
    from dataclasses import replace

    html = replace(lc, object_id="<script>x</script>")._repr_html_()
    assert "<script>" not in html and "&lt;script&gt;" in html


@pytest.mark.skipif(not UD2005.exists(), reason="open data not present")
def test_notebook_three_lines():
    # docs/quickstart.md, "From a notebook": a DataFrame to a verdict in three lines.
    # Data: (155140) 2005 UD, Ishiguro et al. 2022 (../shared/external_data/ud2005_snuo/README.md); published
    # P = 5.2340 h (Huang et al. 2021); a PA rotator.
    import pandas as pd

    table = pd.read_csv(UD2005)
    lc = tumble.read_lightcurve(table, columns="time=jd_utc_mid,mag=mag_Rc,err=mag_err")
    result = tumble.classify(lc, rng=1, max_steps=0)  # the docs' line; max_steps=0 (no sampler) keeps the suite short
    verdict = result.verdict
    # two nights over 1.33 d (about six rotations): every second period the span could resolve is
    # commensurate with the first, so tumbling cannot be tested and no PA grade is given (issue 14's
    # untestable rule); the light-curve period is still reported, within 1 % of the published one
    assert verdict.rotation == "undecided" and not verdict.npa_testable
    assert abs(verdict.period_syn_h - 5.2340) < 0.01 * 5.2340


def test_citation_and_license_files():
    root = Path(__file__).resolve().parents[1]
    cff = (root / "CITATION.cff").read_text()
    assert f"version: {tumble.__version__}\n" in cff  # keep CITATION.cff in step with tumble/__init__.py
    # the BSD 3-Clause licence text (opensource.org/license/bsd-3-clause): its three conditions
    text = (root / "LICENSE").read_text()
    assert "Redistribution and use in source and binary forms" in text and "Neither the name of" in text
