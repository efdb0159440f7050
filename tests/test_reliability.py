"""Issue 17: nothing lost, nothing escapes. Safe paths from data, bounded input, the survey journal,
provenance, validation before the work, clean shutdown. Each test names the case it pins.

The reader cases use the open ZTF photometry of (6478) Gault in shared/external_data (real data,
one cell made hostile); the survey mechanics use small objects from tumble.simulate, as
tests/test_survey.py does (the data's content does not matter to a path or a journal).
"""

from __future__ import annotations

import gzip
import json
from types import SimpleNamespace
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pytest

from tumble._io import SAFE_HASH_CHARS, SAFE_STEM_CHARS, safe_component, write_all
from tumble.cli import build_parser, main
from tumble.exceptions import PhotometryError
from tumble.photometry import inflate_capped, parse_column_map, read_lightcurve
from tumble.results import empty_row, read_provenance, read_results, write_results
from tumble.survey import (ObjectTask, SurveyConfig, SurveyError, journal_path, load_journal, lock_path,
                           object_folder, run_survey, _OutputLock)

from conftest import GAULT_CSV

HOSTILE_NAMES = ["../../escape", "/abs/path", "..", ".", "x" * 300, "Ωmega ünïcode", "<b>&amp;</b>\"'",
                 "a/b\\c", "CON", "", " lead space", "-rf", "é" * 200]


def _gault_lines():
    if not GAULT_CSV.exists():
        pytest.skip(f"shared external data not found at {GAULT_CSV}")
    return GAULT_CSV.read_text(encoding="utf-8-sig").splitlines()


def _simulated_lc(seed=11, object_id="sim"):
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    state = RotationState.principal_axis(4.2, 30.0, 45.0, epoch_jd=2460000.5)
    plan = DenseCampaign(2460000.5, n_nights=2, hours_per_night=3.0, cadence_min=10.0)
    return simulate_lightcurve(state, (1.4, 1.1, 1.0), plan, noise=NoiseModel(0.02), object_id=object_id,
                               rng=seed).lightcurve


def _survey_table(path: Path, names) -> Path:
    """One survey table (object column) holding the same simulated light curve under each name."""
    lc = _simulated_lc()
    lines = ["object,jd,mag,err"]
    for name in names:
        quoted = '"' + name.replace('"', '""') + '"'
        lines += [f"{quoted},{float(t)!r},{float(m)!r},{float(e)!r}" for t, m, e in zip(lc.t_obs, lc.mag, lc.err)]
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _files(folder: Path, n: int) -> Path:
    from tumble.photometry import write_lightcurve

    folder.mkdir(parents=True, exist_ok=True)
    for k in range(n):
        write_lightcurve(_simulated_lc(seed=100 + k, object_id=f"obj{k:03d}"), folder / f"obj{k:03d}.csv")
    return folder


@pytest.fixture(scope="module")
def five(tmp_path_factory):
    return _files(tmp_path_factory.mktemp("rel") / "in", 5)


def _all_files(root: Path) -> set[Path]:
    return {p.resolve() for p in root.rglob("*")}


# ---------------------------------------------------------------------------
# 1. names from data never become paths unchecked


@pytest.mark.parametrize("name", HOSTILE_NAMES)
def test_safe_component_is_one_portable_bounded_component(name):
    # POSIX/Windows portable file-name characters and the 255-byte name limit (common practice)
    c = safe_component(name)
    assert c not in ("", ".", "..") and "/" not in c and "\\" not in c and "\x00" not in c
    assert c.isascii() and len(c.encode()) <= SAFE_STEM_CHARS + SAFE_HASH_CHARS + 1
    assert not c.startswith((".", "-")) and c.split(".")[0].lower() not in ("con", "nul", "aux", "prn")
    assert Path(c).name == c and (Path("/base") / c).parent == Path("/base")


def test_safe_component_keeps_plain_names_and_tells_names_apart():
    assert safe_component("KRN-003") == "KRN-003" and safe_component("case_0007") == "case_0007"
    comps = [safe_component(n) for n in HOSTILE_NAMES + ["a b", "a_b", "a:b"]]
    assert len(set(comps)) == len(comps)


def test_keep_objects_never_writes_outside_its_folder(tmp_path):
    names = ["../../escape", "/abs/path", "..", "x" * 300, "<i>&</i>"]
    table = _survey_table(tmp_path / "in" / "survey.csv", names)
    work = tmp_path / "work"
    keep = work / "keep"
    before = _all_files(tmp_path)
    run_survey([table], work / "results.ecsv", SurveyConfig(route="screen", keep_objects_dir=str(keep)), workers=1,
               progress=False)
    new = _all_files(tmp_path) - before
    assert all(p == work.resolve() or work.resolve() in p.parents for p in new), new
    assert not Path("/abs/path").exists()
    for name in names:
        v = json.loads((object_folder(keep, name) / "verdict.json").read_text())
        assert v["object"] == name  # the verdict.json schema of tumble classify (tumble.schema)
        # provenance travels with every verdict (issue 17 item 4)
        assert v["provenance"]["route"] == "screen" and v["provenance"]["seed"] == 0
    # the report finds the kept verdicts by the same safe names, and writes nothing outside its folder
    from tumble.report import write_survey_report

    before = _all_files(tmp_path)
    index = write_survey_report(work / "results.ecsv", tmp_path / "rep", keep, figures=False)
    new = _all_files(tmp_path) - before
    rep = (tmp_path / "rep").resolve()
    assert all(p == rep or rep in p.parents for p in new)
    text = index.read_text()
    assert "<i>&</i>" not in text and "&lt;i&gt;&amp;&lt;/i&gt;" in text
    assert "Provenance" in text and "prior_npa" in text
    pages = list((tmp_path / "rep" / "objects").glob("*/index.html"))
    assert len(pages) == len(names)
    assert all(len(p.parent.name.encode()) < 255 for p in pages)


# ---------------------------------------------------------------------------
# 2. bounded memory from small inputs


def test_gzip_bomb_stops_at_the_cap(tmp_path, monkeypatch):
    lines = _gault_lines()
    body = ("\n".join(lines) + "\n" + "\n".join(lines[1:]) * 2000).encode()  # ~5 MB of real rows
    bomb = tmp_path / "bomb.csv.gz"
    bomb.write_bytes(gzip.compress(body))
    monkeypatch.setenv("TUMBLE_MAX_INPUT_MB", "1")
    with pytest.raises(PhotometryError, match=r"bomb\.csv\.gz: expands to more than 1 MiB"):
        read_lightcurve(bomb)
    raw = tmp_path / "big.csv"
    raw.write_bytes(body)
    with pytest.raises(PhotometryError, match=r"big\.csv: holds more than 1 MiB"):
        read_lightcurve(raw)


def test_capped_inflate_matches_gzip_module():
    # reference: Python's gzip module (RFC 1952), several members and trailing zero padding
    data = bytes(np.random.default_rng(5).integers(0, 256, 300_000, dtype=np.uint8))
    members = gzip.compress(data[:1000]) + gzip.compress(data[1000:])
    packed = members + b"\x00" * 8
    assert inflate_capped(packed, 10**6) == gzip.decompress(members) == data
    with pytest.raises(PhotometryError, match="truncated or corrupt"):
        inflate_capped(packed[:-40], 10**6)


def test_max_input_env_is_checked(monkeypatch, tmp_path):
    monkeypatch.setenv("TUMBLE_MAX_INPUT_MB", "lots")
    with pytest.raises(PhotometryError, match="TUMBLE_MAX_INPUT_MB"):
        read_lightcurve(GAULT_CSV)


# ---------------------------------------------------------------------------
# 3. worker death: only the tasks a dead worker held are charged


def _poisoned(task, config):
    if task.object_id == "obj002":
        os.kill(os.getpid(), signal.SIGKILL)
    time.sleep(0.3)  # the others are running when the poisoned one kills its worker
    return empty_row(task.object_id, "ok")


def test_only_the_dead_workers_object_is_charged(five, tmp_path, monkeypatch):
    import tumble.survey as survey

    monkeypatch.setattr(survey, "process_object", _poisoned)  # inherited by the forked workers
    tasks = [ObjectTask(f"obj{k:03d}", k) for k in range(5)]
    rows = list(survey._iter_process_pool(tasks, SurveyConfig(route="screen"), workers=2))
    by = {r["object"]: r for r in rows}
    assert len(rows) == 5 and set(by) == {t.object_id for t in tasks}
    assert by["obj002"]["status"] == "error" and "died twice" in by["obj002"]["message"]
    assert all(by[n]["status"] == "ok" for n in by if n != "obj002")


# ---------------------------------------------------------------------------
# 4. output validated before the work


def _no_work(*a, **k):
    raise AssertionError("an object was computed before the output was checked")


@pytest.mark.parametrize("out, match", [("results.ecvs", "'.ecvs' unknown"), ("folder", "is a folder")])
def test_output_checked_before_any_object(five, tmp_path, monkeypatch, capsys, out, match):
    import tumble.survey as survey

    (tmp_path / "folder").mkdir()
    monkeypatch.setattr(survey, "process_object", _no_work)
    rc = main(["survey", str(five), "--out", str(tmp_path / out), "--screen", "--workers", "1", "--quiet"])
    err = capsys.readouterr().err
    assert rc == 2 and match in err and len(err.strip().splitlines()) == 1
    assert not journal_path(tmp_path / out).exists()


def test_fits_results_keep_non_ascii_names(tmp_path):
    rows = [empty_row("Ωmega"), empty_row("plain")]
    write_results(rows, tmp_path / "r.fits")
    assert list(read_results(tmp_path / "r.fits")["object"]) == ["Ωmega", "plain"]


# ---------------------------------------------------------------------------
# 5. resume integrity


def test_resume_with_other_settings_is_refused_naming_the_difference(five, tmp_path):
    out = tmp_path / "results.ecsv"
    run_survey([five], out, SurveyConfig(route="screen", seed=3), workers=1, progress=False, _stop_after=2)
    with pytest.raises(SurveyError, match=r"prior_npa: 0\.1 -> 0\.9"):
        run_survey([five], out, SurveyConfig(route="screen", seed=3, prior_npa=0.9), workers=1, progress=False,
                   resume=True)
    with pytest.raises(SurveyError, match=r"route: \"screen\" -> \"full\""):
        run_survey([five], out, SurveyConfig(route="full", seed=3), workers=1, progress=False, resume=True)
    with pytest.raises(SurveyError, match=r"seed: 3 -> 7"):
        run_survey([five], out, SurveyConfig(route="screen", seed=7), workers=1, progress=False, resume=True)
    s = run_survey([five], out, SurveyConfig(route="screen", seed=3, prior_npa=0.9), workers=1, progress=False,
                   resume=True, force_resume=True)
    assert s.results_path and s.provenance["mixed_with"]["prior_npa"] == 0.1
    prov = read_provenance(read_results(out))
    assert prov["prior_npa"] == 0.9 and prov["mixed_with"]["prior_npa"] == 0.1


@pytest.mark.parametrize("bad", [b"42", b'{"foo": 1}', b"\xff\xfe\x00garbage", b'{"object": "obj001"}',
                                 b'{"object": "obj001", "status": "ok"', b"[1, 2]"])
def test_malformed_journal_lines_are_skipped_counted_and_redone(five, tmp_path, bad):
    out = tmp_path / "results.ecsv"
    config = SurveyConfig(route="screen", seed=3)
    run_survey([five], out, config, workers=1, progress=False, _stop_after=1)
    with open(journal_path(out), "ab") as fh:
        fh.write(bad + b"\n")
    s = run_survey([five], out, config, workers=1, progress=False, resume=True)
    assert s.n_malformed_journal_lines == 1 and s.n_done_before == 1 and s.n_processed == 4
    table = read_results(out)
    assert sorted(table["object"]) == [f"obj{k:03d}" for k in range(5)]
    assert all(table["status"] == "ok") and np.all(table["n_points"] > 0)  # no blank row


def test_journal_writes_are_checked(tmp_path, monkeypatch):
    # a short os.write is continued; a write that makes no progress is an error, never a torn line
    path = tmp_path / "j"
    fd = os.open(path, os.O_WRONLY | os.O_CREAT)
    real = os.write
    monkeypatch.setattr(os, "write", lambda f, b: real(f, bytes(b[:3])))
    write_all(fd, b"0123456789\n")
    monkeypatch.setattr(os, "write", lambda f, b: 0)
    with pytest.raises(OSError, match="short write"):
        write_all(fd, b"more")
    os.close(fd)
    assert path.read_bytes() == b"0123456789\n"


# ---------------------------------------------------------------------------
# 6. survey-only option gaps


@pytest.mark.parametrize("prior", ["nan", "0", "1.5", "1"])
def test_survey_prior_checked_like_classify(five, tmp_path, capsys, prior):
    rc = main(["survey", str(five), "--out", str(tmp_path / "r.ecsv"), "--screen", "--prior-npa", prior, "--quiet"])
    err = capsys.readouterr().err
    assert rc == 2 and "--prior-npa" in err and len(err.strip().splitlines()) == 1
    assert not journal_path(tmp_path / "r.ecsv").exists()


# ---------------------------------------------------------------------------
# 7. side-file failures keep the verdict; all-failed exit status


def test_side_file_failure_is_a_warning_that_keeps_the_verdict(five, tmp_path, monkeypatch):
    import tumble.damping
    import tumble.survey as survey

    def refuse(*a, **k):
        raise PermissionError(13, "Permission denied")

    def bad_size(*a, **k):
        raise tumble.damping.DampingError("diameter must be positive")

    import tumble.classify
    from tumble.classify import Verdict

    def quick_classify(lc, **kw):  # the survey's side-file handling is under test here, not the science
        v = Verdict(object_id=lc.object_id, rotation="PA", mode="", p_npa=0.01, ln_bayes_factor=-10.0,
                    ln_bayes_factor_err=0.1, grade="firm", prior_npa=0.1, period_h=5.0, period_h_err=0.01)
        return SimpleNamespace(verdict=v)

    monkeypatch.setattr(survey, "keep_verdict", refuse)
    monkeypatch.setattr(tumble.damping, "damping_for_classification", bad_size)
    monkeypatch.setattr(tumble.classify, "classify", quick_classify)
    out = tmp_path / "r.ecsv"
    run_survey([five], out, SurveyConfig(route="full", keep_objects_dir=str(tmp_path / "keep")), workers=1,
               progress=False)
    t = read_results(out)
    assert all(t["status"] == "ok") and all(np.isfinite(t["p_npa"]))
    assert all("warning: verdict file not written (Permission denied)" in m for m in t["message"])
    assert all("warning: no damping time: diameter must be positive" in m for m in t["message"])


def test_unwritable_keep_objects_folder_refused_before_work(five, tmp_path, capsys, monkeypatch):
    import tumble.survey as survey

    blocker = tmp_path / "file"
    blocker.write_text("x")
    monkeypatch.setattr(survey, "process_object", _no_work)
    rc = main(["survey", str(five), "--out", str(tmp_path / "r.ecsv"), "--screen", "--quiet",
               "--keep-objects", str(blocker / "sub")])
    err = capsys.readouterr().err
    assert rc == 2 and "--keep-objects folder cannot be written" in err


def test_bad_sizes_entry_refused_before_work(five, tmp_path, capsys, monkeypatch):
    import tumble.survey as survey

    sizes = tmp_path / "sizes.csv"
    sizes.write_text("object,diameter_km\nobj000,1.5\nobj001,-2\n")
    monkeypatch.setattr(survey, "process_object", _no_work)
    rc = main(["survey", str(five), "--out", str(tmp_path / "r.ecsv"), "--screen", "--quiet", "--sizes", str(sizes)])
    err = capsys.readouterr().err
    assert rc == 2 and "row 2 (obj001), column 'diameter_km'" in err


def test_every_object_failed_exits_3(tmp_path, capsys):
    folder = tmp_path / "in"
    folder.mkdir()
    for k in range(2):
        (folder / f"bad{k}.csv").write_text("jd,mag,err\n2460000.5,abc,0.1\n")
    rc = main(["survey", str(folder), "--out", str(tmp_path / "r.ecsv"), "--screen", "--workers", "1", "--quiet"])
    captured = capsys.readouterr()
    assert rc == 3 and "every one of the 2 objects failed" in captured.err
    assert len(read_results(tmp_path / "r.ecsv")) == 2  # the error rows are still written


# ---------------------------------------------------------------------------
# 8. report robustness


def test_report_survives_long_names_and_corrupt_side_files(tmp_path):
    from tumble.report import write_report

    names = ["n" * 400, "ok-object", "bad-verdict"]
    rows = [dict(empty_row(n), rotation="PA", p_npa=0.01, grade="strong") for n in names]
    write_results(rows, tmp_path / "r.ecsv", provenance={"route": "screen", "prior_npa": 0.1, "seed": 0})
    keep = tmp_path / "keep"
    object_folder(keep, "bad-verdict").mkdir(parents=True)
    (object_folder(keep, "bad-verdict") / "verdict.json").write_text("{not json")
    object_folder(keep, "ok-object").mkdir(parents=True)
    (object_folder(keep, "ok-object") / "verdict.json").write_text("42")
    index = write_report(tmp_path / "r.ecsv", tmp_path / "rep", objects_dir=keep, figures=False)
    text = index.read_text()
    assert index.exists() and text.count("could not be read and was skipped") == 2


def test_report_of_classify_folder_skips_corrupt_posterior(tmp_path):
    from tumble.report import ReportError, write_report

    folder = tmp_path / "c"
    folder.mkdir()
    verdict = {"object": "A", "rotation": "PA", "p_npa": 0.02, "prior_npa": 0.1, "ln_bayes_factor": -4.0,
               "grade": "strong", "period_h": 5.0, "warnings": []}
    (folder / "verdict.json").write_text(json.dumps(verdict))
    (folder / "posterior.npz").write_bytes(b"PK\x03\x04 this is not a zip archive")
    index = write_report(folder, tmp_path / "rep")
    assert "posterior samples were skipped" in index.read_text()
    (folder / "verdict.json").write_text("[1, 2]")
    with pytest.raises(ReportError, match="unreadable verdict"):
        write_report(folder, tmp_path / "rep2")


# ---------------------------------------------------------------------------
# 9, 13, 14, 15: the reader on hostile cells of real photometry


def _gault_variant(tmp_path, name, edit) -> Path:
    lines = _gault_lines()
    path = tmp_path / name
    path.write_text("\n".join(edit(lines)) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("value", ["1e308", "5e-324", "1e-30", "99"])
def test_extreme_errors_are_bad_input(tmp_path, value):
    def edit(lines):
        cells = lines[5].split(",")
        cells[6] = value
        return lines[:5] + [",".join(cells)] + lines[6:]

    with pytest.raises(PhotometryError, match=r"line 6, column 'mag_err': magnitude error .* outside"):
        read_lightcurve(_gault_variant(tmp_path, "g.csv", edit))


def test_time_1e308_is_bad_input(tmp_path):
    def edit(lines):
        cells = lines[3].split(",")
        cells[0] = "1e308"
        return lines[:3] + [",".join(cells)] + lines[4:]

    with pytest.raises(PhotometryError, match=r"line 4, column 'mjd': time 1e\+308 is not a MJD date"):
        read_lightcurve(_gault_variant(tmp_path, "g.csv", edit))


def test_two_aliases_of_one_quantity_are_refused(tmp_path):
    path = _gault_variant(tmp_path, "g.csv", lambda ls: [ls[0] + ",magnitude"] + [x + ",1.0" for x in ls[1:]])
    with pytest.raises(PhotometryError, match=r"columns 'mag', 'magnitude' could each be the mag"):
        read_lightcurve(path)
    assert read_lightcurve(path, columns="mag=mag").n_points > 10  # the user's choice settles it


def test_column_map_conflicts_are_refused():
    with pytest.raises(PhotometryError, match="'mag' is given twice"):
        parse_column_map("mag=V,mag=R")
    with pytest.raises(PhotometryError, match="both mag and err"):
        parse_column_map("mag=V,err=V")
    with pytest.raises(PhotometryError, match="given as err but its name says mag"):
        read_lightcurve(GAULT_CSV, columns="err=mag")


def test_same_data_twice_is_refused(tmp_path):
    plain = tmp_path / "A.csv"
    plain.write_bytes(GAULT_CSV.read_bytes())
    packed = tmp_path / "A.csv.gz"
    packed.write_bytes(gzip.compress(GAULT_CSV.read_bytes()))
    with pytest.raises(PhotometryError, match=r"A\.csv\.gz: holds the same data as .*A\.csv"):
        read_lightcurve([plain, packed])


def test_quoted_fields_may_span_lines(tmp_path):
    # RFC 4180: a quoted field may contain line breaks and the delimiter
    def edit(lines):
        out = [lines[0] + ",note"]
        out += [x + ',"seeing ok"' for x in lines[1:3]]
        out += [lines[3] + ',"cloud, then\nclear"']
        out += [x + ",plain" for x in lines[4:]]
        return out

    path = _gault_variant(tmp_path, "q.csv", edit)
    lc = read_lightcurve(path)
    assert lc.n_points == read_lightcurve(GAULT_CSV).n_points
    broken = tmp_path / "broken.csv"
    broken.write_text(path.read_text().replace('"cloud, then', '"cloud, "then'))
    with pytest.raises(PhotometryError, match="broken.csv"):
        read_lightcurve(broken)


def test_future_dates_raise_no_raw_erfa_warning(tmp_path):
    # UTC after the leap-second table: astropy/ERFA warn 'dubious year' (from memory); the reader stays quiet
    def edit(lines):
        out = [lines[0]]
        for x in lines[1:]:
            cells = x.split(",")
            cells[0] = repr(float(cells[0]) + 6000.0)  # ~2033
            out.append(",".join(cells))
        return out

    path = _gault_variant(tmp_path, "future.csv", edit)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lc = read_lightcurve(path)
    assert lc.n_points > 10


def test_votable_and_fits_keep_object_names(tmp_path):
    from tumble.photometry import write_lightcurve

    lc = _simulated_lc()
    for name, ext in [('A&B <x> "q"', "vot"), ("Ωmega 100%", "fits")]:
        from dataclasses import replace

        write_lightcurve(replace(lc, object_id=name), tmp_path / f"lc.{ext}")
        assert read_lightcurve(tmp_path / f"lc.{ext}").object_id == name


def test_csv_results_defuse_spreadsheet_formulas(tmp_path):
    # OWASP "CSV injection": cells starting with = + - @ are prefixed with an apostrophe
    names = ['=HYPERLINK("http://x","y")', "+1", "-2", "@SUM(A1)", "#3", "'=q", "plain"]
    write_results([empty_row(n) for n in names], tmp_path / "r.csv")
    text = (tmp_path / "r.csv").read_text()
    assert "\n=HYPERLINK" not in text and "\n\"'=HYPERLINK" in text and "\n'+1," in text
    assert list(read_results(tmp_path / "r.csv")["object"]) == names


# ---------------------------------------------------------------------------
# 10. --out inside the input folder


def test_out_inside_the_inputs_is_refused_and_old_outputs_are_not_photometry(five, tmp_path):
    with pytest.raises(SurveyError, match="inside the input folder"):
        run_survey([five], five / "results.ecsv", SurveyConfig(route="screen"), workers=1, progress=False)
    folder = tmp_path / "in"
    _files(folder, 2)
    write_results([empty_row("obj000")], folder / "old.ecsv")
    with pytest.raises(SurveyError, match=r"old\.ecsv: a tumble results catalogue, not photometry"):
        run_survey([folder], tmp_path / "r.ecsv", SurveyConfig(route="screen"), workers=1, progress=False)
    (folder / "old.ecsv").unlink()
    write_results([empty_row("obj000")], folder / "old.csv", provenance={"route": "screen"})
    with pytest.raises(SurveyError, match=r"old\.csv: a tumble results catalogue"):
        run_survey([folder], tmp_path / "r.ecsv", SurveyConfig(route="screen"), workers=1, progress=False)
    (folder / "old.csv").unlink()
    (folder / "r.ecsv.journal.jsonl").write_text("{}\n")  # a journal is never an object
    s = run_survey([folder], tmp_path / "r.ecsv", SurveyConfig(route="screen"), workers=1, progress=False)
    assert s.n_objects == 2


# ---------------------------------------------------------------------------
# 11. locks, shutdown, scheduler failure


def test_second_run_on_the_same_output_is_refused(five, tmp_path):
    out = tmp_path / "r.ecsv"
    held = _OutputLock(out)
    held.acquire()
    try:
        with pytest.raises(SurveyError, match="another tumble run is writing this output"):
            run_survey([five], out, SurveyConfig(route="screen"), workers=1, progress=False)
    finally:
        held.release()
    assert run_survey([five], out, SurveyConfig(route="screen"), workers=1, progress=False).results_path
    assert lock_path(out).name.startswith(".")


def test_unreachable_scheduler_leaves_no_journal(five, tmp_path, monkeypatch):
    pytest.importorskip("distributed")
    import distributed

    def refuse(*a, **k):
        raise OSError("connection refused")

    monkeypatch.setattr(distributed, "Client", refuse)
    out = tmp_path / "r.ecsv"
    with pytest.raises(SurveyError, match="cannot reach the Dask scheduler"):
        run_survey([five], out, SurveyConfig(route="screen"), scheduler="tcp://127.0.0.1:9", progress=False)
    assert not journal_path(out).exists()


def _children(pid: int) -> set[int]:
    out = set()
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                fields = (d / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                out.add(int(d.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_stopping_the_parent_leaves_no_worker(tmp_path, sig):
    folder = _files(tmp_path / "in", 8)
    out = tmp_path / "r.ecsv"
    cmd = [sys.executable, "-m", "tumble", "survey", str(folder), "--out", str(out), "--workers", "2",
           "--max-steps", "50", "--quiet"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.time() + 300
    kids: set[int] = set()
    while time.time() < deadline and proc.poll() is None:
        kids |= _children(proc.pid)
        if len(kids) >= 2:
            time.sleep(1.0)  # let the workers take their first objects
            kids |= _children(proc.pid)
            break
        time.sleep(0.05)
    assert proc.poll() is None and kids, "the run must be stopped while its workers run"
    os.kill(proc.pid, sig)
    rc = proc.wait(timeout=120)
    deadline = time.time() + 60
    while time.time() < deadline and any(_alive(k) for k in kids):
        time.sleep(0.1)
    assert not any(_alive(k) for k in kids), "a worker outlived its parent"
    if sig == signal.SIGTERM:
        assert rc == 143 and "terminated" in proc.stderr.read().decode()
    rows = load_journal(journal_path(out))
    assert rows.n_malformed == 0  # what was finished is kept whole


# ---------------------------------------------------------------------------
# 12, 13: options


def test_western_longitude_parses():
    args = build_parser().parse_args(["inspect", "f.csv", "--observatory", "-70.7,-30.2,2700"])
    assert args.observatory == "-70.7,-30.2,2700"


@pytest.mark.parametrize("argv, match", [
    (["scan", "F", "--oversample", "-1"], "--oversample: must be"),
    (["scan", "F", "--oversample", "0"], "--oversample: must be"),
    (["relax", "--period-h", "10", "--h-mag", "1e308"], "--h-mag: must be"),
    (["survey", "F", "--out", "r.ecsv", "--seed", "-1"], "--seed: must be a non-negative integer"),
    (["classify", "F", "--seed", "-1"], "--seed: must be a non-negative integer"),
    (["survey", "F", "--out", "r.ecsv", "--dask-local", "-2"], "--dask-local: must be at least 1"),
])
def test_bad_options_are_exit_2_one_line(capsys, argv, match):
    argv = [str(GAULT_CSV) if a == "F" else a for a in argv]
    rc = main(argv)
    err = capsys.readouterr().err
    assert rc == 2 and match in err and len(err.strip().splitlines()) == 1


def test_json_output_is_strict(capsys):
    rc = main(["relax", "--period-h", "30", "--diameter-km", "0.2", "--json", "--samples", "2000"])
    out = capsys.readouterr().out
    assert rc == 0

    def refuse(c):
        raise ValueError(c)

    json.loads(out, parse_constant=refuse)  # RFC 8259 JSON has no NaN or Infinity
    from tumble.cli._common import print_json

    print_json({"a": float("nan"), "b": [np.float64("inf"), 1.0]})
    assert json.loads(capsys.readouterr().out, parse_constant=refuse) == {"a": None, "b": [None, 1.0]}


def test_terminal_escapes_from_data_are_not_printed(tmp_path, capsys):
    bad = tmp_path / "esc.csv"
    bad.write_text("jd,mag,err\n2460000.5,\x1b[31mred\x1b[0m,0.1\n")
    rc = main(["inspect", str(bad)])
    err = capsys.readouterr().err
    assert rc == 2 and "\x1b" not in err and "\\x1b" in err


def test_inspect_write_refuses_its_own_input(tmp_path, capsys):
    path = tmp_path / "x.csv"
    path.write_bytes(GAULT_CSV.read_bytes())
    rc = main(["inspect", str(path), "--write", str(path)])
    assert rc == 2 and "overwrite its own input" in capsys.readouterr().err
    assert path.read_bytes() == GAULT_CSV.read_bytes()


def test_simulate_records_the_seed_it_drew(tmp_path, capsys):
    out = tmp_path / "s.ecsv"
    rc = main(["simulate", "--out", str(out), "--period", "5", "--quiet"])
    assert rc == 0, capsys.readouterr().err
    truth = json.loads((tmp_path / "s.ecsv.truth.json").read_text())
    assert isinstance(truth["seed"], int)


def test_default_output_folder_from_a_hostile_name_stays_here(tmp_path, monkeypatch):
    # the helper classify's default --out is to use (tumble/cli/classify_cmd.py is wired by the lead)
    from tumble.cli._common import output_folder
    from tumble.exceptions import TumbleError

    monkeypatch.chdir(tmp_path)
    for name in ["../../trav", "/abs/x", "..", "y" * 300]:
        folder = output_folder(None, name, "-classify")
        assert len(folder.parts) == 1 and folder.name.endswith("-classify")
        assert (tmp_path / folder).resolve().parent == tmp_path.resolve()
    (tmp_path / "afile").write_text("x")
    with pytest.raises(TumbleError, match="exists and is not a folder"):
        output_folder("afile", "A", "-classify")


def test_report_out_naming_a_file_is_bad_input(tmp_path, capsys):
    write_results([empty_row("A")], tmp_path / "r.ecsv")
    (tmp_path / "afile").write_text("x")
    rc = main(["report", str(tmp_path / "r.ecsv"), "--out", str(tmp_path / "afile"), "--no-figures", "--quiet"])
    assert rc == 2 and "exists and is not a folder" in capsys.readouterr().err


def test_inspect_prints_names_from_data_without_escapes(tmp_path, capsys):
    path = tmp_path / "g.csv"
    path.write_text("# OBJECT: evil\x1b]0;title\x07name\n" + GAULT_CSV.read_text(encoding="utf-8-sig"))
    rc = main(["inspect", str(path)])
    out = capsys.readouterr().out
    assert rc == 0 and "\x1b" not in out and "\x07" not in out and "evil\\x1b]0;title\\x07name" in out


def test_resume_with_other_objects_is_refused(five, tmp_path):
    out = tmp_path / "results.ecsv"
    files = sorted(five.glob("*.csv"))
    run_survey(files[:3], out, SurveyConfig(route="screen"), workers=1, progress=False, _stop_after=1)
    with pytest.raises(SurveyError, match="the input lists other objects than the journal's run"):
        run_survey(files, out, SurveyConfig(route="screen"), workers=1, progress=False, resume=True)
