"""The catalogue route: a partitioned Parquet light-curve catalogue, one Dask task per partition.

The outside check is route equivalence on real photometry: the rows must be those of
`tumble survey` on the same objects (open data in ../shared/external_data/: 2005 UD,
Ishiguro et al. 2022; Didymos, the ALCDEF export; Gault, ZTF), runtime excepted.
"""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("nested_pandas")
pytest.importorskip("dask")

from tumble.catalog import (CatalogError, classify_frame, read_catalog_results, results_frame,  # noqa: E402
                            run_catalog)
from tumble.photometry import read_lightcurve  # noqa: E402
from tumble.results import read_results  # noqa: E402
from tumble.survey import SurveyConfig, run_survey  # noqa: E402

EXT = Path("/work/shared/external_data")
pytestmark = pytest.mark.skipif(not EXT.exists(), reason="open data not present")


def _objects():
    ud = pd.read_csv(EXT / "ud2005_snuo/2005UD_SNUO_2018Oct_lightcurve.csv")
    lcs = [
        read_lightcurve(ud, columns="time=jd_utc_mid,mag=mag_Rc,err=mag_err", object_id="2005 UD", band="Rc"),
        read_lightcurve(EXT / "alcdef_didymos/ALCDEF_65803_Didymos.txt", default_err=0.02),
        read_lightcurve(EXT / "gault_ztf/Gault_ZTF.csv", columns="time=mjd,band=filter", object_id="Gault",
                        time_format="mjd"),
    ]
    frames = [pd.DataFrame({"object": lc.object_id, "time": np.asarray(lc.t_obs), "mag": np.asarray(lc.mag),
                            "err": np.asarray(lc.err), "session": np.asarray(lc.session),
                            "band": np.asarray(lc.band).astype(str)}) for lc in lcs]
    tiny = pd.DataFrame({"object": "tiny", "time": 2460000.5 + np.arange(3) * 0.01, "mag": [15.0, 15.1, 15.0],
                         "err": 0.01, "session": 0, "band": "V"})  # too few points: an error row
    return frames + [tiny]


def _write_csv(frame, path):
    with open(path, "w") as fh:
        fh.write(",".join(frame.columns) + "\n")
        for row in frame.itertuples(index=False):
            fh.write(",".join(repr(float(v)) if isinstance(v, (float, np.floating)) else str(v) for v in row) + "\n")


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    import nested_pandas as npd

    root = tmp_path_factory.mktemp("cat")
    ud, didymos, gault, tiny = _objects()
    cat = root / "catalogue"
    (cat / "Norder=0").mkdir(parents=True)
    pd.concat([ud, tiny]).to_parquet(cat / "Norder=0" / "part0.parquet")  # flat partition
    nested = npd.NestedFrame.from_flat(pd.concat([didymos, gault]), base_columns=["object"], on="object", name="lc")
    nested.reset_index().to_parquet(cat / "Norder=0" / "part1.parquet")  # nested partition (one row per object)
    _write_csv(pd.concat([ud, tiny, didymos, gault]), root / "all.csv")
    return root, cat


CONFIG = SurveyConfig(route="screen", seed=3)


def _by_object(table):
    return {str(r["object"]): r for r in table}


def test_catalogue_rows_equal_survey_rows(built):
    root, cat = built
    out = root / "results"
    summary = run_catalog(cat, out, CONFIG, scheduler="sync")
    assert summary.n_partitions == 2 and summary.n_processed == 2 and summary.n_objects == 4
    assert summary.status_counts == {"ok": 3, "error": 1}
    assert sorted(p.name for p in out.glob("part-*.parquet")) == ["part-00000.parquet", "part-00001.parquet"]
    got = _by_object(read_catalog_results(out))
    run_survey([root / "all.csv"], root / "survey.parquet", CONFIG, workers=1, progress=False)
    ref = _by_object(read_results(root / "survey.parquet"))
    assert set(got) == set(ref) == {"2005 UD", "65803 Didymos", "Gault", "tiny"}
    for name in ref:
        for col in ref[name].colnames:
            if col == "runtime_s":
                continue  # wall time differs between runs
            a, b = got[name][col], ref[name][col]
            if col == "message":  # error messages name their source: the partition or the table
                a, b = a.split("]:")[-1], b.split("]:")[-1]
            if isinstance(b, (float, np.floating)):
                assert (np.isnan(a) and np.isnan(b)) or a == b, (name, col, a, b)
            else:
                assert a == b, (name, col, a, b)


def test_resume_by_partition(built):
    root, cat = built
    out = root / "resume"
    run_catalog(cat, out, CONFIG, scheduler="sync")
    first = (out / "part-00001.parquet").stat().st_mtime_ns
    (out / "part-00000.parquet").unlink()  # as if the run had stopped before partition 0 ended
    with pytest.raises(CatalogError, match="earlier run; use resume"):
        run_catalog(cat, out, CONFIG, scheduler="sync")
    summary = run_catalog(cat, out, CONFIG, scheduler="sync", resume=True)
    assert summary.n_done_before == 1 and summary.n_processed == 1 and summary.partitions[0].index == 0
    assert (out / "part-00001.parquet").stat().st_mtime_ns == first  # finished partition untouched
    assert len(read_catalog_results(out)) == 4


def test_threads_scheduler_and_map_partitions(built):
    # the per-partition function with Dask DataFrame's map_partitions, one task per partition
    import dask.dataframe as dd

    from tumble.catalog import read_partition

    root, cat = built
    parts = sorted(cat.rglob("*.parquet"))
    ddf = dd.from_map(read_partition, parts)
    assert ddf.npartitions == 2
    meta = results_frame([])
    res = ddf.map_partitions(lambda f: results_frame(classify_frame(f, CONFIG)), meta=meta).compute(scheduler="threads")
    assert sorted(res["object"]) == ["2005 UD", "65803 Didymos", "Gault", "tiny"]


def test_layout_errors(tmp_path):
    with pytest.raises(CatalogError, match="no .parquet partitions"):
        run_catalog(tmp_path, tmp_path / "out", CONFIG)
    (tmp_path / "cat").mkdir()
    (tmp_path / "cat" / "p.parquet").write_text("not parquet")
    summary = run_catalog(tmp_path / "cat", tmp_path / "out2", CONFIG, scheduler="sync")
    assert summary.status_counts == {"error": 1}  # an unreadable partition is an error row; the run goes on
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "x").write_text("x")
    with pytest.raises(CatalogError, match="not a tumble catalogue result directory"):
        run_catalog(tmp_path / "cat", tmp_path / "busy", CONFIG)


def test_cli_survey_catalog(built, capsys):
    import json

    from tumble.cli import main

    root, cat = built
    out = root / "cli"
    assert main(["survey", "--catalog", str(cat), "--out", str(out), "--screen", "--seed", "3",
                 "--scheduler", "sync", "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["n_objects"] == 4 and summary["status_counts"] == {"ok": 3, "error": 1}
    assert main(["survey", "x.csv", "--catalog", str(cat), "--out", str(out)]) == 2
    assert "not both" in capsys.readouterr().err


def test_top_level_survey_chooses_the_route(built):
    import tumble

    root, cat = built
    from tumble.api import _looks_like_catalog

    assert _looks_like_catalog(cat)  # Norder= folders: a catalogue
    assert not _looks_like_catalog(root) and not _looks_like_catalog(root / "all.csv")
    summary = tumble.survey(cat, root / "api", CONFIG, scheduler="threads", workers=2)
    assert summary.n_objects == 4 and summary.n_partitions == 2


def test_partition_without_object_column(tmp_path):
    cat = tmp_path / "cat"
    cat.mkdir()
    pd.DataFrame({"time": 2460000.5 + np.arange(20) * 0.01, "mag": 15.0, "err": 0.01}).to_parquet(cat / "p.parquet")
    summary = run_catalog(cat, tmp_path / "out", CONFIG, scheduler="sync")
    assert summary.status_counts == {"error": 1}
    row = read_catalog_results(tmp_path / "out")[0]
    assert "no object column" in row["message"]
