"""Survey batch processing: same results on every executor, error rows, journal and resume."""

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from tumble.cli import main
from tumble.schema import loads_strict
from tumble.results import read_results
from tumble.survey import SurveyConfig, SurveyError, collect_objects, journal_path, read_journal, run_survey

from conftest import BAD_DIR

# Columns that legitimately differ between runs (wall-clock time).
VOLATILE = {"runtime_s"}


def _make_objects(folder, n, seed=7):
    """n small simulated PA/SAM objects written as files (simulator: tumble.simulate)."""
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve, write_simulation

    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    for k in range(n):
        state = RotationState.principal_axis(float(rng.uniform(2.5, 6.0)), float(rng.uniform(0, 360)), 45.0,
                                             epoch_jd=2460000.5)
        plan = DenseCampaign(2460000.5, n_nights=2, hours_per_night=3.0, cadence_min=10.0)
        sim = simulate_lightcurve(state, (1.4, 1.1, 1.0), plan, noise=NoiseModel(0.02), object_id=f"obj{k:03d}",
                                  rng=int(rng.integers(1 << 30)))
        write_simulation(sim, folder / f"obj{k:03d}.csv")
        (folder / f"obj{k:03d}.csv.truth.json").unlink()
    return sorted(folder.glob("*.csv"))


def _rows(path):
    table = read_results(path)
    return [{k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in zip(table.colnames, row)
             if k not in VOLATILE} for row in table.as_array().tolist()]


@pytest.fixture(scope="module")
def sample(tmp_path_factory):
    folder = tmp_path_factory.mktemp("survey") / "in"
    _make_objects(folder, 3)
    # bad objects become error rows (the malformed-input corpus)
    for name in ("empty.csv", "too_few_points.csv", "truncated.csv.gz"):
        (folder / name).write_bytes((BAD_DIR / name).read_bytes())
    return folder


@pytest.fixture(scope="module")
def serial_rows(sample, tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "results.ecsv"
    summary = run_survey([sample], out, SurveyConfig(route="screen", seed=3), workers=1, progress=False)
    assert summary.n_objects == 6 and summary.status_counts == {"ok": 3, "error": 3}
    return out


def test_error_rows_name_file_and_problem(serial_rows, sample):
    serial_rows = _rows(serial_rows)
    errors = {r["object"]: r["message"] for r in serial_rows if r["status"] == "error"}
    assert set(errors) == {"empty", "too_few_points", "truncated"}
    assert "empty.csv: file is empty" in errors["empty"]
    assert "only 5 usable points" in errors["too_few_points"]
    assert "truncated or corrupt gzip" in errors["truncated"]
    # screened rows state a flag, never a rotation
    assert all(r["screen_flag"] in ("candidate", "quiet", "unknown") and not r["rotation"]
               for r in serial_rows if r["status"] == "ok")


def test_two_workers_same_rows(serial_rows, sample, tmp_path):
    out = tmp_path / "results.ecsv"
    run_survey([sample], out, SurveyConfig(route="screen", seed=3), workers=2, progress=False)
    assert _rows(out) == _rows(serial_rows)


def test_dask_local_same_rows(serial_rows, sample, tmp_path):
    pytest.importorskip("distributed")
    out = tmp_path / "results.ecsv"
    run_survey([sample], out, SurveyConfig(route="screen", seed=3), dask_local=2, progress=False)
    assert _rows(out) == _rows(serial_rows)


def test_results_read_back_with_astropy_units(serial_rows):
    # astropy.table is the reference reader; the units are those of the documented schema.
    from astropy.table import Table

    t = Table.read(serial_rows)
    assert str(t["period_h"].unit) == "h" and str(t["span_d"].unit) == "d" and str(t["runtime_s"].unit) == "s"


@pytest.mark.parametrize("ext", [".parquet", ".fits"])
def test_parquet_and_fits_results_read_back_with_units(serial_rows, sample, tmp_path, ext):
    # The format follows the extension; the written file is read by the reference readers: astropy.table for
    # FITS and Parquet (astropy's Parquet reader needs pandas, a dependency for this) and pyarrow itself
    # for Parquet; the columns and units are those of the documented schema (docs/outputs.md).
    from astropy.table import Table

    from tumble.results import COLUMN_NAMES, RESULT_COLUMNS

    out = tmp_path / f"results{ext}"
    run_survey([sample], out, SurveyConfig(route="screen", seed=3), workers=1, progress=False)
    units = {c.name: c.unit for c in RESULT_COLUMNS}
    if ext == ".parquet":
        import pyarrow.parquet as pq
        import yaml

        pt = pq.read_table(out)
        assert pt.column_names == list(COLUMN_NAMES)
        header = yaml.safe_load(pt.schema.metadata[b"table_meta_yaml"].decode())  # PyYAML reads astropy's header
        written = {c["name"]: c.get("unit", "") for c in header["datatype"]}
        assert written == units
        assert pt.column("object").to_pylist() == [r["object"] for r in _rows(serial_rows)]
    tables = [read_results(out)]
    tables.append(Table.read(out))  # astropy's Parquet reader (it needs pandas, a dependency for this)
    for t in tables:
        assert t.colnames == list(COLUMN_NAMES)
        assert {c: (str(t[c].unit) if t[c].unit is not None else "") for c in t.colnames} == units
    # missing text is empty in Parquet and FITS, masked (None) when ECSV is read back: both mean missing;
    # FITS text columns come back as bytes
    def blank(rows):
        rows = [{k: (v.decode() if isinstance(v, bytes) else v) for k, v in r.items()} for r in rows]
        return [{k: (None if v == "" else v) for k, v in r.items()} for r in rows]

    assert blank(_rows(out)) == blank(_rows(serial_rows))


def test_interrupted_run_resumes_exactly_once(serial_rows, sample, tmp_path):
    out = tmp_path / "results.ecsv"
    summary = run_survey([sample], out, SurveyConfig(route="screen", seed=3), workers=1, progress=False,
                         _stop_after=2)
    assert summary.results_path == "" and not out.exists()
    assert len(read_journal(journal_path(out))) == 2
    with pytest.raises(SurveyError, match="--resume"):
        run_survey([sample], out, SurveyConfig(route="screen", seed=3), workers=1, progress=False)
    summary = run_survey([sample], out, SurveyConfig(route="screen", seed=3), workers=1, progress=False,
                         resume=True)
    assert summary.n_done_before == 2 and summary.n_processed == 4
    lines = [loads_strict(x) for x in journal_path(out).read_text().splitlines()]
    # the first line records the run configuration; then exactly one row per object
    assert "tumble_journal" in lines[0] and lines[0]["config"]["seed"] == 3
    assert len(lines) == 7 and len({x["object"] for x in lines[1:]}) == 6
    assert _rows(out) == _rows(serial_rows)


def test_sigkill_then_resume(serial_rows, sample, tmp_path):
    out = tmp_path / "results.ecsv"
    cmd = [sys.executable, "-m", "tumble", "survey", str(sample), "--out", str(out), "--screen", "--seed", "3",
           "--workers", "1", "--quiet"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    jpath = journal_path(out)
    deadline = time.time() + 300
    while time.time() < deadline:
        if jpath.exists() and len(jpath.read_text().splitlines()) >= 3:
            break
        if proc.poll() is not None:
            break
        time.sleep(0.05)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    n_before = len(read_journal(jpath))
    assert 1 <= n_before < 6, "the run must be killed part-way"
    code = subprocess.run(cmd + ["--resume"], capture_output=True, text=True)
    assert code.returncode == 0, code.stderr
    assert len(read_journal(jpath)) == 6
    assert _rows(out) == _rows(serial_rows)


def test_per_object_time_limit_becomes_error_row(sample, tmp_path):
    out = tmp_path / "results.ecsv"
    one = sorted(sample.glob("obj*.csv"))[:1]
    run_survey(one, out, SurveyConfig(route="screen", seed=3, object_timeout_s=0.05), workers=1, progress=False)
    rows = _rows(out)
    timed_out = [r for r in rows if "time limit" in r["message"]]
    assert timed_out and all(r["status"] == "error" for r in timed_out)


def test_object_names_and_grouping(tmp_path):
    for name in ("KRN-001__a.csv", "KRN-001__b.ecsv", "case_0007.csv.gz", "solo.txt"):
        (tmp_path / name).write_text("x")
    tasks = collect_objects([tmp_path])
    names = {t.object_id: len(t.paths) for t in tasks}
    assert names == {"KRN-001": 2, "case_0007": 1, "solo": 1}
    with pytest.raises(SurveyError, match="no such file"):
        collect_objects([tmp_path / "missing"])
    with pytest.raises(SurveyError, match="matches no file"):
        collect_objects([str(tmp_path / "*.fits")])


def test_survey_cli_summary_and_shortlist(sample, tmp_path, capsys):
    out = tmp_path / "cli.ecsv"
    code = main(["survey", str(sample), "--out", str(out), "--screen", "--workers", "1", "--quiet"])
    text = capsys.readouterr().out
    assert code == 0
    assert "objects       6" in text and "status        error 3, ok 3" in text
    assert "scientific estimates" in text
    assert main(["survey", str(tmp_path / "nothing-here"), "--out", str(out)]) == 2


@pytest.mark.slow
def test_fifty_objects_identical_across_executors(tmp_path):
    folder = tmp_path / "in"
    _make_objects(folder, 50, seed=11)
    results = []
    for kw in ({"workers": 1}, {"workers": 2}, {"dask_local": 2}):
        out = tmp_path / f"r{len(results)}.ecsv"
        run_survey([folder], out, SurveyConfig(route="screen", seed=5), progress=False, **kw)
        results.append(_rows(out))
    assert results[0] == results[1] == results[2]


def test_dask_worker_killed_mid_run(sample, serial_rows, tmp_path):
    # A worker process killed with SIGKILL part-way: Dask reschedules its task and
    # the run completes with every object present, the same rows as a clean run.
    distributed = pytest.importorskip("distributed")
    import threading

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                       silence_logs=50)
    client = distributed.Client(cluster)
    try:
        pids = sorted(client.run(os.getpid).values())
        out = tmp_path / "results.ecsv"
        jpath = journal_path(out)
        killed = []

        def killer():
            deadline = time.time() + 300
            while time.time() < deadline:
                if jpath.exists() and len(jpath.read_text().splitlines()) >= 1:
                    os.kill(pids[0], signal.SIGKILL)
                    killed.append(pids[0])
                    return
                time.sleep(0.02)

        thread = threading.Thread(target=killer, daemon=True)
        thread.start()
        summary = run_survey([sample], out, SurveyConfig(route="screen", seed=3),
                             scheduler=cluster.scheduler_address, progress=False)
        thread.join(timeout=5)
        assert killed, "the worker was not killed during the run"
        assert summary.n_objects == 6 and summary.results_path
        assert _rows(out) == _rows(serial_rows)
    finally:
        client.close()
        cluster.close()


def test_report_option_calls_the_report_writer(sample, tmp_path, monkeypatch, capsys):
    # --report hands the finished results catalogue to tumble.report.write_survey_report (imported at call
    # time); a stand-in module records the call, so this checks our side of the contract only.
    import types

    calls = []

    def fake(results_path, out_dir, objects_dir=None, **kwargs):
        calls.append((str(results_path), str(out_dir), objects_dir))
        return tmp_path / "rep" / "index.html"

    monkeypatch.setitem(sys.modules, "tumble.report", types.SimpleNamespace(write_survey_report=fake))
    out = tmp_path / "r.ecsv"
    code = main(["survey", str(sample), "--out", str(out), "--screen", "--workers", "1", "--quiet",
                 "--keep-objects", str(tmp_path / "objs"), "--report", str(tmp_path / "rep")])
    assert code == 0
    assert calls == [(str(out), str(tmp_path / "rep"), str(tmp_path / "objs"))]
    assert "report        " in capsys.readouterr().out


def test_no_binary_reaches_the_full_route_and_the_provenance(monkeypatch):
    # `survey --no-binary` is `classify --no-binary` for every object (the CLI's own contract,
    # docs/commands.md): the option reaches tumble.classify.classify and is recorded in the provenance
    import argparse

    import tumble.classify as tc
    from tumble.cli.survey_cmd import add_parser
    from tumble.survey import SurveyConfig

    parser = argparse.ArgumentParser()
    add_parser(parser.add_subparsers(dest="command"))
    assert parser.parse_args(["survey", "x", "--out", "r.ecsv"]).binary is True
    assert parser.parse_args(["survey", "x", "--out", "r.ecsv", "--no-binary"]).binary is False
    seen = {}

    def fake_classify(lc, **kwargs):
        seen.update(kwargs)
        raise RuntimeError("stop here")

    monkeypatch.setattr(tc, "classify", fake_classify)
    from tumble.survey import ObjectTask, _classify_task

    config = SurveyConfig(binary=False)
    assert config.provenance()["binary"] is False
    with pytest.raises(RuntimeError, match="stop here"):
        _classify_task(ObjectTask("X-1", 0, lightcurve=_tiny_lightcurve()), config)
    assert seen["binary"] is False


def _tiny_lightcurve():
    from tumble.photometry import LightCurve

    t = 2460000.5 + np.linspace(0.0, 1.0, 20)
    return LightCurve.from_arrays(t, np.zeros_like(t), np.full_like(t, 0.01), object_id="X-1")
