"""The HTML reports in a real browser: headless Debian Chromium driven by selenium.

Opens the survey report and one object report, takes screenshots, and checks
that the pages load without console errors, that every image loaded
(``naturalWidth > 0``), and that the survey table sorts on a header click and
filters with its text box. The expected orders are computed here from the
results catalogue (astropy), independently of the page's JavaScript.
Skips only when chromium or chromedriver is missing (``.ci/run`` installs
Debian's ``chromium chromium-driver`` when it can).
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import pytest

from tumble.cli import main
from tumble.schema import loads_strict

ROOT = Path(__file__).resolve().parents[1]
CAMPAIGN = ROOT / "catalogs_demo" / "campaign"
CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")


def _browser_paths():
    chromium = CHROMIUM if CHROMIUM.exists() else (shutil.which("chromium") and Path(shutil.which("chromium")))
    driver = CHROMEDRIVER if CHROMEDRIVER.exists() else (
        shutil.which("chromedriver") and Path(shutil.which("chromedriver")))
    return chromium, driver


@pytest.fixture(scope="module")
def browser():
    chromium, driver_path = _browser_paths()
    if not chromium or not driver_path:
        pytest.skip("headless Chromium check skipped: /usr/bin/chromium or /usr/bin/chromedriver not found "
                    "(install Debian's 'chromium chromium-driver'; .ci/run does when it can)")
    webdriver = pytest.importorskip("selenium.webdriver")
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = str(chromium)
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                 "--disable-background-networking", "--window-size=1400,1000"):
        opts.add_argument(flag)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    # an explicit Service: selenium must not download a driver
    drv = webdriver.Chrome(service=Service(str(driver_path)), options=opts)
    drv.set_page_load_timeout(60)
    yield drv
    drv.quit()


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """A survey report (screen route, two good demo objects and one broken file) and one object report."""
    tmp = tmp_path_factory.mktemp("reports")
    files = [CAMPAIGN / "KRN-001__kestrel.csv", CAMPAIGN / "KRN-003__kestrel.csv",
             CAMPAIGN / "KRN-003__lanternbay.ecsv", CAMPAIGN / "KRN-006__kestrel.csv",
             CAMPAIGN / "KRN-011__lanternbay.ecsv"]
    results = tmp / "results.ecsv"
    assert main(["survey", *map(str, files), "--out", str(results), "--screen", "--workers", "1", "--quiet",
                 "--keep-objects", str(tmp / "objects")]) == 0
    assert main(["report", str(results), "--out", str(tmp / "survey_report"), "--objects", str(tmp / "objects"),
                 "--data", *map(str, files), "--sizes", str(ROOT / "catalogs_demo" / "truth.ecsv"),
                 "--quiet"]) == 0
    assert main(["classify", str(files[0]), "--out", str(tmp / "c"), "--max-steps", "40", "--quiet",
                 "--report", str(tmp / "object_report")]) == 0
    return tmp


def _log_errors(browser):
    return [e for e in browser.get_log("browser") if e.get("level") == "SEVERE"]


def _images(browser):
    return browser.execute_script(
        "return Array.from(document.images).map(function(i){return [i.getAttribute('src'), i.complete, "
        "i.naturalWidth];});")


def _object_column(browser):
    return browser.execute_script(
        "return Array.from(document.querySelectorAll('#objects tbody tr'))"
        ".filter(function(r){return r.style.display !== 'none';})"
        ".map(function(r){return r.cells[0].textContent.trim();});")


#: Where the test's files live: no page may show any of these (outputs name files relative to their folder).
LOCAL_ROOTS = tuple({str(ROOT), str(Path.home()), "/tmp/", "/work/", "/home/", "/root/"})


def _assert_no_local_paths(browser, where):
    source = browser.page_source
    text = browser.execute_script("return document.body.innerText;")
    for root in LOCAL_ROOTS:
        assert root not in source and root not in text, f"{where}: absolute local path {root!r} shown"


def _open_checked(browser, page, shot):
    """Open a page, take its screenshot, and check it loaded cleanly: no console errors, every image loaded,
    no absolute local path."""
    browser.get(page.as_uri())
    browser.save_screenshot(str(shot))
    assert shot.stat().st_size > 0
    assert _log_errors(browser) == []
    _assert_no_local_paths(browser, page.name)
    imgs = _images(browser)
    assert all(ok and width > 0 for _, ok, width in imgs), imgs
    return imgs


def test_survey_report_loads_sorts_and_filters(browser, reports, tmp_path):
    from selenium.webdriver.common.by import By

    from tumble.results import read_results

    index = reports / "survey_report" / "index.html"
    imgs = _open_checked(browser, index, tmp_path / "survey.png")
    assert imgs, "the survey page shows its sample figure"

    table = read_results(reports / "results.ecsv")
    names = [str(x) for x in table["object"]]
    assert _object_column(browser) == names  # input order before any click

    # numeric sort on the points column: expected order from the catalogue, ties kept in input order
    heads = browser.find_elements(By.CSS_SELECTOR, "#objects thead th")
    # the columns of the one schema, the new ones included
    from tumble.schema import REPORT_FIELDS

    assert [h.get_attribute("data-col") for h in heads] == [f.name for f in REPORT_FIELDS]
    assert {"route", "prior_npa", "ln_bayes_factor_err", "screen_flag", "npa_limit_mag"} <= {
        h.get_attribute("data-col") for h in heads}
    points = next(h for h in heads if h.get_attribute("data-col") == "n_points")
    points.click()
    assert points.get_attribute("aria-sort") == "ascending"
    got = _object_column(browser)
    assert [int(table["n_points"][names.index(n)]) for n in got] == sorted(int(v) for v in table["n_points"])
    assert set(got) == set(names)
    points.click()
    assert points.get_attribute("aria-sort") == "descending"
    got_desc = _object_column(browser)
    assert [int(table["n_points"][names.index(n)]) for n in got_desc] == sorted(
        (int(v) for v in table["n_points"]), reverse=True)
    if len(set(int(v) for v in table["n_points"])) == len(names):  # no ties: the exact reverse
        assert got_desc == got[::-1]

    # text sort on the object column, descending on the second click
    obj = next(h for h in heads if h.get_attribute("data-col") == "object")
    obj.click()
    assert _object_column(browser) == sorted(names, key=str.lower)
    obj.click()
    assert _object_column(browser) == sorted(names, key=str.lower, reverse=True)
    browser.save_screenshot(str(tmp_path / "survey_sorted.png"))

    # filter box: only the rows whose text holds the query stay visible
    box = browser.find_element(By.ID, "filter")
    box.send_keys("error")
    expected = [n for n, s in zip(names, table["status"]) if "error" in str(s)]
    assert sorted(_object_column(browser)) == sorted(expected) and expected
    box.clear()
    box.send_keys("x")  # clear() does not fire 'input'; type and delete to refresh
    from selenium.webdriver.common.keys import Keys

    box.send_keys(Keys.BACKSPACE)
    assert len(_object_column(browser)) == len(names)
    assert _log_errors(browser) == []

    # every object page linked from the table loads, with its images
    links = {a.text: a.get_attribute("href") for a in browser.find_elements(By.CSS_SELECTOR, "#objects tbody a")}
    assert sorted(links) == sorted(names)
    for href in links.values():
        browser.get(href)
        assert _log_errors(browser) == [], href
        _assert_no_local_paths(browser, href)
        assert all(ok and width > 0 for _, ok, width in _images(browser)), href
    ok_name = next(n for n, s in zip(names, table["status"]) if s == "ok")
    browser.get(links[ok_name])
    srcs = {Path(src).stem for src, _, _ in _images(browser)}
    # scan, light curve, folded, residuals and the new views
    assert {"scan", "lightcurve", "folded", "residuals", "composite", "residual_periodogram"} <= srcs, srcs
    for table_id in ("coverage", "combinations", "zero-points"):
        assert browser.find_elements(By.CSS_SELECTOR, f"#{table_id} tbody tr"), table_id
    assert ok_name in browser.title
    browser.save_screenshot(str(tmp_path / "survey_object.png"))


def test_object_report_loads_with_all_figures(browser, reports, tmp_path):
    from selenium.webdriver.common.by import By

    page = reports / "object_report" / "index.html"
    imgs = _open_checked(browser, page, tmp_path / "object.png")
    srcs = {Path(s).stem for s, _, _ in imgs}
    assert {"scan", "lightcurve", "folded", "residuals", "posterior"} <= srcs, srcs
    verdict = loads_strict((reports / "c" / "verdict.json").read_text())
    box = browser.find_element(By.ID, "verdict").text
    assert verdict["rotation"] in box and verdict["grade"] in box
    # the grade sentence on the page is the one that is true of the verdict's numbers (Kass & Raftery
    # 1995 bands; tumble.classify.grade_sentence), capped grades included
    from tumble.report import grade_in_words

    assert browser.find_element(By.ID, "grade-words").text == grade_in_words(verdict)
    assert f"{abs(2 * verdict['ln_bayes_factor']):.1f}" in browser.find_element(By.ID, "grade-words").text
    rows = browser.find_elements(By.CSS_SELECTOR, "#periods tbody tr")
    assert rows, "a periods table"
    if verdict["period_h"] is not None and math.isfinite(verdict["period_h"]):
        first = rows[0].find_elements(By.TAG_NAME, "td")
        # the period is shown to the digit its error keeps (two significant figures of the error, common
        # practice), so it agrees with verdict.json to within a twentieth of the error
        err = verdict["period_h_err"] if verdict["period_h_err"] is not None else 0.0
        assert abs(float(first[1].text) - verdict["period_h"]) <= max(0.05 * err, 1e-6 * verdict["period_h"])
        assert first[3].text == "h"
    assert "not operational decisions" in browser.find_element(By.ID, "cautions").find_element(
        By.XPATH, "following-sibling::div").text
