"""``tumble report`` from the command line: bad input, escaping, and the page's content."""

from __future__ import annotations

import html.parser
from pathlib import Path

import pytest

from tumble.cli import main

CAMPAIGN = Path(__file__).resolve().parents[1] / "catalogs_demo" / "campaign"


class _Collect(html.parser.HTMLParser):
    """Tags, attributes and text of a page, parsed by the standard library's HTML parser."""

    def __init__(self):
        super().__init__()
        self.tags, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def _parse(path):
    p = _Collect()
    p.feed(path.read_text(encoding="utf-8"))
    return p


def test_missing_source_is_a_one_line_error(tmp_path, capsys):
    code = main(["report", str(tmp_path / "nothing.ecsv"), "--out", str(tmp_path / "r")])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "nothing.ecsv" in err and "no such file" in err


def test_not_a_results_table(tmp_path, capsys):
    bad = tmp_path / "bad.ecsv"
    bad.write_text("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: a, datatype: int64}\na\n1\n")
    assert main(["report", str(bad), "--out", str(tmp_path / "r")]) == 2
    assert "not a results table" in capsys.readouterr().err


def test_text_from_the_data_is_escaped(tmp_path):
    from tumble.results import empty_row, write_results

    nasty = "<script>alert(1)</script>"
    rows = [empty_row(nasty, "error", f"{nasty} & 'quotes' \"here\""), empty_row("KRN-900", "ok")]
    rows[1].update(rotation="PA", mode="none", grade="firm", period_h=5.5, p_npa=0.01)
    write_results(rows, tmp_path / "res.ecsv")
    assert main(["report", str(tmp_path / "res.ecsv"), "--out", str(tmp_path / "r"), "--no-figures",
                 "--quiet"]) == 0
    index = tmp_path / "r" / "index.html"
    raw = index.read_text(encoding="utf-8")
    assert nasty not in raw and "&lt;script&gt;" in raw
    page = _parse(index)
    # exactly one script: the page's own inline sorting/filtering code, with no src (nothing external)
    scripts = [a for t, a in page.tags if t == "script"]
    assert scripts == [{}]
    assert not [a for t, a in page.tags if t == "link" and a.get("rel") == "stylesheet"]
    assert nasty in "".join(page.text)  # the name shows as text
    links = [a["href"] for t, a in page.tags if t == "a" and a.get("href", "").startswith("objects/")]
    assert len(links) == 2 and all((tmp_path / "r" / h).exists() for h in links)
    assert all("<" not in h and ">" not in h for h in links)  # a safe file name for the nasty object


def test_classify_folder_report_with_data(tmp_path, capsys):
    files = [str(CAMPAIGN / "KRN-001__kestrel.csv")]
    assert main(["classify", *files, "--out", str(tmp_path / "c"), "--max-steps", "0", "--quiet"]) == 0
    assert main(["report", str(tmp_path / "c"), "--out", str(tmp_path / "r"), "--data", *files, "--quiet"]) == 0
    assert "report written" in capsys.readouterr().out
    out = tmp_path / "r"
    for name in ("scan", "lightcurve", "folded", "residuals"):
        assert (out / f"{name}.png").stat().st_size > 0
    page = _parse(out / "index.html")
    imgs = [a["src"] for t, a in page.tags if t == "img"]
    assert {"scan.png", "lightcurve.png", "folded.png", "residuals.png"} <= set(imgs)
    text = " ".join(page.text)
    assert "KRN-001" in text and "Assumptions and cautions" in text and "not operational decisions" in text


@pytest.mark.parametrize("ln_b,grade,uncapped,rotation,reason", [
    (-235.5, "tentative", "firm", "PA", "the PA model leaves a periodic residual at 3.1 h"),
    (4.9, "tentative", "sound", "NPA", "the period posterior is multimodal"),
    (-0.4, "none", "none", "undecided", "weak evidence: |2 ln B| = 0.80 < 2"),
])
def test_object_page_grade_sentence_agrees_with_its_numbers(tmp_path, ln_b, grade, uncapped, rotation, reason):
    # the page states the one sentence of tumble.classify.grade_sentence for the numbers it shows
    # (Kass & Raftery 1995 bands), capped grades included
    import html

    from tumble.classify import grade_sentence
    from tumble.report import write_object_report

    v = dict(object="X-1", rotation=rotation, mode="", p_npa=0.5, ln_bayes_factor=ln_b, grade=grade,
             grade_uncapped=uncapped, grade_reason=reason, prior_npa=0.1, warnings=[])
    page = write_object_report(tmp_path / "r", v).read_text()
    assert html.escape(grade_sentence(v), quote=True) in page
    assert f"{abs(2 * ln_b):.1f}" in page
