"""The catalogue route: a partitioned Parquet light-curve catalogue, one Dask task per partition.

Survey-scale photometry lives in partitioned Parquet catalogues (for example
HATS catalogues read with LSDB, with nested-pandas light-curve columns). This
module runs the same per-object work as ``tumble survey``
(:func:`tumble.survey.process_object`) over such a catalogue:

- **input**: a directory of ``.parquet`` files (searched recursively; names
  starting with ``_`` or ``.`` are skipped), each one partition. A partition is
  either *flat* (one row per observation with an ``object`` column, as our
  survey tables) or *nested* (one row per object with a base ``object`` column
  and a nested-pandas light-curve column, a list-of-struct / struct-of-lists
  Parquet column with ``time``, ``mag``, ``err``, ... fields). Every object
  must lie within one partition (as in HATS catalogues, partitioned by sky
  position).
- **work**: one :func:`dask.delayed` task per partition: read it, build each
  object's :class:`~tumble.photometry.LightCurve`, classify, write the results.
- **output**: a directory of Parquet partitions ``part-00000.parquet``, ...
  (partition k of the input -> ``part-{k:05d}``) in the results schema of
  ``docs/outputs.md``, each written atomically when its task ends, and a
  manifest ``_tumble_catalog.json`` naming the input partitions. A run stopped
  half-way is finished with ``resume=True``: partitions whose results exist
  are skipped. Read the results with :func:`read_catalog_results` or any Parquet
  reader (``dask.dataframe.read_parquet(out)``).

:func:`classify_frame` is the per-partition function itself, usable with
``dask.dataframe.DataFrame.map_partitions`` (or LSDB's ``map_partitions``) on a
catalogue opened elsewhere.

Needs the ``catalog`` extra (dask, pandas, pyarrow, nested-pandas). Results are
scientific estimates for research use.
"""

from __future__ import annotations

import json
import os
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

from tumble.exceptions import PhotometryError, TumbleError

__all__ = ["CatalogSummary", "PartitionResult", "catalog_partitions", "read_partition", "classify_frame",
           "results_frame", "run_catalog", "read_catalog_results", "MANIFEST_NAME"]

#: The manifest beside the result partitions: which input partitions this run covers.
MANIFEST_NAME = "_tumble_catalog.json"
#: Result partition names: by input partition index, never from the data.
PART_FORMAT = "part-{:05d}.parquet"


class CatalogError(TumbleError):
    """A problem with the catalogue as a whole (layout, output directory, scheduler)."""


@dataclass(frozen=True)
class PartitionResult:
    """What one partition task did.

    Attributes
    ----------
    index : int
        Input partition index.
    source : str
        Input partition file.
    out : str
        Result partition file written.
    n_objects : int
        Objects (result rows) in the partition.
    status_counts : dict
        Rows per status (ok, error).
    wall_s : float
        Wall time of the task, s.
    """

    index: int
    source: str
    out: str
    n_objects: int
    status_counts: dict
    wall_s: float


@dataclass(frozen=True)
class CatalogSummary:
    """Outcome of :func:`run_catalog`.

    Attributes
    ----------
    n_partitions, n_done_before, n_processed : int
        Input partitions, partitions finished by an earlier run (skipped), partitions processed now.
    n_objects : int
        Objects processed now.
    status_counts : dict
        Rows per status over the partitions processed now.
    wall_s : float
        Wall time of this run, s.
    out : str
        Result directory.
    partitions : list of PartitionResult
    """

    n_partitions: int
    n_done_before: int
    n_processed: int
    n_objects: int
    status_counts: dict
    wall_s: float
    out: str
    partitions: list = field(default_factory=list)


def _require():
    from tumble._extras import require

    require("catalog", "the catalogue route")


def catalog_partitions(path: str | os.PathLike) -> list[Path]:
    """The partition files of a catalogue directory, sorted by path.

    Raises
    ------
    CatalogError
        When the path is not a directory or holds no ``.parquet`` file.
    """
    root = Path(path)
    if not root.is_dir():
        raise CatalogError(f"{root}: not a catalogue directory")
    parts = sorted(p for p in root.rglob("*.parquet")
                   if not any(s.startswith(("_", ".")) for s in p.relative_to(root).parts))
    if not parts:
        raise CatalogError(f"{root}: no .parquet partitions found")
    return parts


def read_partition(path: str | os.PathLike):
    """One partition as a flat pandas DataFrame (one row per observation, with the object column).

    Nested light-curve columns (nested-pandas) are flattened and the base
    columns (the object name, per-object values) repeated on every observation.
    """
    import nested_pandas as npd

    try:
        frame = npd.read_parquet(str(path))
    except Exception as exc:
        msg = (str(exc).strip().splitlines() or [type(exc).__name__])[0][:200]
        raise PhotometryError(f"{path}: unreadable Parquet partition ({msg})") from None
    return flatten_frame(frame, source=str(path))


def flatten_frame(frame, source: str = "<frame>"):
    """A NestedFrame with one nested light-curve column -> flat DataFrame; a flat frame as it is."""
    import pandas as pd

    nested = list(getattr(frame, "nested_columns", []) or [])
    if not nested:
        return pd.DataFrame(frame)
    if len(nested) > 1:
        raise PhotometryError(f"{source}: {len(nested)} nested columns ({', '.join(nested)}); "
                              "a light-curve catalogue has one")
    base = pd.DataFrame(frame[[c for c in frame.columns if c not in nested]]).reset_index()
    flat = frame.reset_index(drop=True)[nested[0]].nest.to_flat()
    rows = flat.index.to_numpy()
    out = pd.DataFrame(flat).reset_index(drop=True)
    for col in base.columns:
        if col not in out.columns and col != "index":
            out[col] = base[col].to_numpy()[rows]
    return out


def classify_frame(frame, config=None, source: str | None = None) -> list[dict]:
    """Results rows (dicts in the results schema) for every object of one flat or nested frame.

    The rows are those of ``tumble survey`` for the same objects
    (:func:`tumble.survey.process_object` with the same seeds), in order of first
    appearance; a bad object is an error row.
    """
    from tumble.adapters import raw_table
    from tumble.photometry import ReadOptions, iter_survey
    from tumble.survey import ObjectTask, SurveyConfig, process_object

    config = config or SurveyConfig()
    opts = config.read_options or ReadOptions()
    flat = flatten_frame(frame, source or "<frame>")
    raw, opts = raw_table(flat, opts, source=source)
    from tumble.photometry import _match_columns

    if "object" not in _match_columns(raw, opts):
        raise PhotometryError(f"{raw.source}: no object column (a catalogue partition holds many objects; "
                              "map one with --columns object=NAME)")
    rows = []
    for k, (name, item) in enumerate(iter_survey(raw, options=opts)):
        if isinstance(item, PhotometryError):
            task = ObjectTask(str(name), k, error=str(item))
        else:
            task = ObjectTask(str(name), k, lightcurve=item)
        rows.append(process_object(task, config))
    return rows


def results_frame(rows):
    """Results rows as a pandas DataFrame in the results schema (for ``map_partitions``; ``rows=[]`` gives the meta)."""
    from tumble.results import results_table

    return results_table(rows).to_pandas()


def _partition_task(index: int, source: str, out: str, config) -> PartitionResult:
    from tumble.results import write_results
    from tumble.survey import _pin_threads

    _pin_threads()
    t0 = time.perf_counter()
    try:
        frame = read_partition(source)
        rows = classify_frame(frame, config, source=source)
    except PhotometryError as exc:  # an unreadable partition: one error row, the run goes on
        from tumble.results import empty_row

        rows = [empty_row(f"partition {index}", "error", str(exc))]
    write_results(rows, out)
    counts = dict(Counter(r["status"] for r in rows))
    return PartitionResult(index, source, out, len(rows), counts, time.perf_counter() - t0)


def _manifest(parts: list[Path]) -> dict:
    return {"schema": "tumble catalogue run v1",
            "partitions": [{"path": str(p), "bytes": p.stat().st_size} for p in parts]}


def _check_out(out: Path, manifest: dict, resume: bool) -> None:
    from tumble._io import atomic_write_text

    mpath = out / MANIFEST_NAME
    if mpath.exists():
        if not resume:
            raise CatalogError(f"{out}: holds the results of an earlier run; use resume to finish it, "
                               "or remove the directory to start again")
        try:
            old = json.loads(mpath.read_text())
        except (OSError, ValueError):
            raise CatalogError(f"{mpath}: unreadable manifest; remove the directory to start again") from None
        if old != manifest:
            raise CatalogError(f"{mpath}: the earlier run covered other input partitions; "
                               "use another output directory")
        return
    if out.exists() and any(out.iterdir()):
        raise CatalogError(f"{out}: exists and is not a tumble catalogue result directory")
    out.mkdir(parents=True, exist_ok=True)
    atomic_write_text(mpath, json.dumps(manifest, indent=1) + "\n")


def run_catalog(catalog, out, config=None, *, scheduler: str | None = None, workers: int | None = None,
                resume: bool = False, progress: bool = False) -> CatalogSummary:
    """Classify every object of a partitioned Parquet catalogue; one Dask task per partition.

    Parameters
    ----------
    catalog : path
        Catalogue directory (see the module notes for the layout).
    out : path
        Result directory (created; Parquet partitions and a manifest).
    config : tumble.survey.SurveyConfig, optional
        Per-object settings, as for ``tumble survey``.
    scheduler : str, optional
        ``'sync'``, ``'threads'``, ``'processes'`` (Dask's local schedulers) or the
        address of a dask.distributed scheduler (``tcp://host:8786``). Default:
        ``'processes'`` with ``workers`` > 1, else ``'sync'``.
    workers : int, optional
        Local worker processes or threads (default: the number of cores).
    resume : bool
        Finish an earlier run into the same directory: partitions with results are skipped.
    progress : bool
        Progress bar over partitions on stderr.

    Returns
    -------
    CatalogSummary

    Raises
    ------
    CatalogError
        On a bad layout, an output directory of another run, or a missing extra.
    """
    _require()
    import dask

    from tumble.survey import SurveyConfig

    config = config or SurveyConfig()
    parts = catalog_partitions(catalog)
    out = Path(out)
    _check_out(out, _manifest(parts), resume)
    targets = [out / PART_FORMAT.format(k) for k in range(len(parts))]
    todo = [k for k in range(len(parts)) if not targets[k].exists()]
    n_workers = workers or os.cpu_count() or 1
    scheduler = scheduler or ("processes" if n_workers > 1 and len(todo) > 1 else "sync")
    t0 = time.perf_counter()
    tasks = [dask.delayed(_partition_task, pure=False)(k, str(parts[k]), str(targets[k]), config) for k in todo]
    if "://" in scheduler:
        results = _run_distributed(tasks, scheduler, progress)
    else:
        kw = {"num_workers": n_workers} if scheduler in ("threads", "processes") else {}
        if progress and tasks:
            from dask.diagnostics import ProgressBar

            with ProgressBar():
                results = list(dask.compute(*tasks, scheduler=scheduler, **kw))
        else:
            results = list(dask.compute(*tasks, scheduler=scheduler, **kw))
    counts: Counter = Counter()
    for r in results:
        counts.update(r.status_counts)
    return CatalogSummary(
        n_partitions=len(parts), n_done_before=len(parts) - len(todo), n_processed=len(results),
        n_objects=sum(r.n_objects for r in results), status_counts=dict(counts),
        wall_s=time.perf_counter() - t0, out=str(out), partitions=sorted(results, key=lambda r: r.index),
    )


def _run_distributed(tasks, address: str, progress: bool) -> list:
    from tumble._extras import require

    require("cluster", "a dask.distributed scheduler", CatalogError)
    from distributed import Client, as_completed

    try:
        client = Client(address, timeout=30)
    except Exception as exc:
        raise CatalogError(f"cannot reach the Dask scheduler at {address} ({type(exc).__name__}: {exc})") from None
    with client:
        futures = client.compute(tasks)
        return [f.result() for f in as_completed(futures)]


def read_catalog_results(out: str | os.PathLike):
    """All result partitions of a catalogue run as one astropy Table, in partition order."""
    from astropy.table import vstack

    from tumble.results import read_results

    files = sorted(Path(out).glob("part-*.parquet"))
    if not files:
        raise CatalogError(f"{out}: no result partitions")
    return vstack([read_results(f) for f in files], metadata_conflicts="silent")
