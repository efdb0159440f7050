"""Survey batch processing: many objects, in parallel or on a Dask cluster, resumable.

The batch layer calls the science (reader, classifier, damping); nothing in
the science imports it. One object is one task:

1. the parent lists the objects (:func:`collect_objects`): files grouped by
   object name, or one survey table split by its ``object`` column;
2. each task reads (when it has files), classifies (full route or screen),
   adds the damping estimate when a size is known, and returns one results
   row; any error becomes a row with ``status=error`` and a one-line message;
3. the parent appends every finished row to a journal (JSON lines, one
   ``write`` + ``fsync`` per row) beside the output, so a killed run loses at
   most the objects in flight; ``resume=True`` skips objects already in the
   journal, so each object is finished exactly once;
4. at the end the results catalogue is written atomically from the journal in
   input order (:mod:`tumble.results`).

Executors: a local process pool (default; one numerical thread per worker) or
dask.distributed (an existing scheduler, or a LocalCluster), through the same
task function and the same per-object seeds, so the results are identical.
A worker that dies is retried once (Dask ``retries=1``; the process pool is
restarted and the objects in flight resubmitted) before the object is marked
failed. A per-object time limit turns a runaway fit into an error row.
"""

from __future__ import annotations

import ctypes
import glob
import json
import os
import threading
import time
import zlib
from collections import Counter
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator

import numpy as np

from tumble.exceptions import PhotometryError, TumbleError

__all__ = [
    "SurveyError",
    "SurveyConfig",
    "ObjectTask",
    "collect_objects",
    "process_object",
    "run_survey",
    "SurveySummary",
    "object_seed",
    "journal_path",
    "read_journal",
]

_PHOTOMETRY_SUFFIXES = (".csv", ".tsv", ".tab", ".txt", ".dat", ".ecsv", ".fits", ".fit", ".fts", ".vot",
                        ".xml", ".votable", ".alcdef", ".parquet", ".parq", ".pq")


class SurveyError(TumbleError):
    """A problem with the survey as a whole (inputs, output, executor)."""


class ObjectTimeout(BaseException):
    """Raised asynchronously inside a task that exceeded its time limit (not an Exception, so
    science code that catches Exception cannot swallow it)."""


@dataclass(frozen=True)
class SurveyConfig:
    """Settings of a survey run (picklable; sent to every worker).

    Attributes
    ----------
    route : {'full', 'screen'}
        Full classification (evidence + physical fit) or the fast screen.
    seed : int
        Base seed; each object's generator is seeded from it and the object name.
    prior_npa : float
        Prior probability of NPA rotation.
    read_options : tumble.photometry.ReadOptions or None
        How to read the files.
    max_steps, n_walkers : int or None
        Sampler settings of the full route.
    object_timeout_s : float or None
        Per-object wall-time limit, s (None: no limit).
    sizes : dict
        Object -> (diameter_km, h_mag, albedo), any of them None, for the damping time.
    keep_objects_dir : str or None
        Folder for per-object verdict JSON files.
    """

    route: str = "full"
    seed: int = 0
    prior_npa: float = 0.1
    read_options: object = None
    max_steps: int = 1500
    n_walkers: int | None = None
    object_timeout_s: float | None = 900.0
    sizes: dict = field(default_factory=dict)
    keep_objects_dir: str | None = None

    def __post_init__(self):
        if self.route not in ("full", "screen"):
            raise SurveyError(f"route must be full or screen, not '{self.route}'")
        if self.object_timeout_s is not None and not self.object_timeout_s > 0:
            raise SurveyError(f"object time limit must be positive, got {self.object_timeout_s} s")


@dataclass(frozen=True)
class ObjectTask:
    """One object to process: files to read, or an already-read light curve, or a read error."""

    object_id: str
    index: int
    paths: tuple = ()
    lightcurve: object = None
    error: str | None = None


def object_seed(seed: int, object_id: str) -> int:
    """A per-object seed that depends only on the base seed and the name (not on scheduling)."""
    return int((int(seed) * 1_000_003 + zlib.crc32(object_id.encode("utf-8"))) % (2**32))


# ---------------------------------------------------------------------------
# Inputs


def _object_name(path: Path) -> str:
    """Object name of a file: the part before ``__``, else the name without extensions."""
    from tumble._io import strip_compression

    name = strip_compression(path)
    if "__" in name:
        return name.split("__")[0]
    stem = Path(name).stem if Path(name).suffix.lower() in _PHOTOMETRY_SUFFIXES else name
    return stem


def _expand(inputs: Iterable[str | os.PathLike]) -> list[Path]:
    files: list[Path] = []
    for item in inputs:
        text = str(item)
        path = Path(text)
        if any(ch in text for ch in "*?["):
            hits = sorted(Path(p) for p in glob.glob(text))
            if not hits:
                raise SurveyError(f"{text}: the pattern matches no file")
            files.extend(h for h in hits if h.is_file())
        elif path.is_dir():
            found = sorted(p for p in path.iterdir() if p.is_file() and not p.name.startswith(".")
                           and not p.name.endswith(".json"))
            if not found:
                raise SurveyError(f"{path}: directory holds no photometry files")
            files.extend(found)
        elif path.exists():
            files.append(path)
        else:
            raise SurveyError(f"{path}: no such file or directory")
    return files


def collect_objects(inputs, read_options=None) -> list[ObjectTask]:
    """List the objects of a survey.

    A file whose table has an ``object`` column is split into its objects (read
    once here; a bad object becomes an error task). Other files are grouped by
    object name (:func:`_object_name`: ``KRN-003__kestrel.csv`` and
    ``KRN-003__orrin.fits`` are one object ``KRN-003``; ``case_0007.csv.gz`` is
    ``case_0007``) and read by the workers.
    """
    from tumble.photometry import ReadOptions, _match_columns, iter_survey, read_table

    opts = read_options or ReadOptions()
    groups: dict[str, list[Path]] = {}
    tasks: list[ObjectTask] = []
    for path in _expand(inputs):
        table_is_survey = False
        try:
            table = read_table(path, opts.encoding)
            table_is_survey = "object" in _match_columns(table, opts)
        except PhotometryError:
            pass  # the worker reads it again and reports the error as the object's row
        if table_is_survey:
            for name, item in iter_survey(path, options=opts):
                if isinstance(item, PhotometryError):
                    tasks.append(ObjectTask(name, len(tasks), error=str(item)))
                else:
                    tasks.append(ObjectTask(name, len(tasks), lightcurve=item))
        else:
            groups.setdefault(_object_name(path), []).append(path)
    for name, paths in groups.items():
        tasks.append(ObjectTask(name, len(tasks), paths=tuple(str(p) for p in paths)))
    names = Counter(t.object_id for t in tasks)
    dup = [n for n, c in names.items() if c > 1]
    if dup:
        raise SurveyError(f"object '{dup[0]}' appears in more than one input table or group; names must be unique")
    return tasks


# ---------------------------------------------------------------------------
# One object


def _run_limited(fn: Callable, seconds: float | None):
    """Run ``fn()`` in this thread; past ``seconds`` raise :class:`ObjectTimeout` inside it.

    A watchdog timer raises the exception asynchronously in the running thread
    (CPython's ``PyThreadState_SetAsyncExc``); it takes effect at the next Python
    bytecode, so a long call into compiled code finishes first. Works in worker
    processes and in Dask worker threads alike.
    """
    if not seconds:
        return fn()
    tid = threading.get_ident()
    done = threading.Event()

    def fire():
        if not done.is_set():
            ctypes.pythonapi.PyThreadState_SetAsyncExc(ctypes.c_ulong(tid), ctypes.py_object(ObjectTimeout))

    timer = threading.Timer(seconds, fire)
    timer.daemon = True
    timer.start()
    try:
        return fn()
    finally:
        done.set()
        timer.cancel()


def _pin_threads() -> None:
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    try:
        from threadpoolctl import threadpool_limits  # optional; present with scipy's usual stack

        threadpool_limits(1)
    except Exception:
        pass


def process_object(task: ObjectTask, config: SurveyConfig) -> dict:
    """Read, classify and date one object; always returns a results row (never raises for bad data)."""
    from tumble.results import empty_row

    t0 = time.perf_counter()
    if task.error is not None:
        row = empty_row(task.object_id, "error", task.error)
        row["runtime_s"] = time.perf_counter() - t0
        return row
    try:
        row = _run_limited(lambda: _classify_task(task, config), config.object_timeout_s)
    except ObjectTimeout:
        row = empty_row(task.object_id, "error",
                        f"{task.object_id}: exceeded the per-object time limit of {config.object_timeout_s:g} s")
    except TumbleError as exc:
        row = empty_row(task.object_id, "error", str(exc))
    except Exception as exc:  # an internal error in one object must not stop the survey
        row = empty_row(task.object_id, "error", f"{task.object_id}: internal error: {type(exc).__name__}: {exc}")
    row["runtime_s"] = time.perf_counter() - t0
    return row


def _classify_task(task: ObjectTask, config: SurveyConfig) -> dict:
    from tumble.classify import classify, screen
    from tumble.damping import damping_for_classification
    from tumble.photometry import read_lightcurve

    lc = task.lightcurve
    if lc is None:
        lc = read_lightcurve(list(task.paths), options=config.read_options, object_id=task.object_id)
    rng = np.random.default_rng(object_seed(config.seed, task.object_id))
    if config.route == "screen":
        verdict = screen(lc, prior_npa=config.prior_npa)
    else:
        verdict, _, _ = classify(lc, prior_npa=config.prior_npa, rng=rng, n_walkers=config.n_walkers,
                                 max_steps=config.max_steps)
    row = verdict.results_row()
    row["object"] = task.object_id
    d_km, h_mag, albedo = config.sizes.get(task.object_id, (None, None, None))
    damp = damping_for_classification(verdict, diameter_km=d_km, h_mag=h_mag, albedo=albedo,
                                      rng=object_seed(config.seed + 1, task.object_id))
    if damp is not None:
        row.update(tau_damp_gyr=damp.tau_gyr, tau_damp_gyr_lo=damp.tau_gyr_lo, tau_damp_gyr_hi=damp.tau_gyr_hi)
    if config.keep_objects_dir:
        from tumble._io import atomic_write_text

        folder = Path(config.keep_objects_dir) / task.object_id
        folder.mkdir(parents=True, exist_ok=True)
        atomic_write_text(folder / "verdict.json", json.dumps(verdict.to_dict(), indent=2, default=_json_default) + "\n")
    return row


def _json_default(o):
    if isinstance(o, np.generic):
        return o.item()
    return str(o)


# ---------------------------------------------------------------------------
# Journal


def journal_path(out: str | os.PathLike) -> Path:
    """The journal beside an output file: ``results.ecsv`` -> ``results.ecsv.journal.jsonl``."""
    out = Path(out)
    return out.with_name(out.name + ".journal.jsonl")


def _encode_row(row: dict) -> str:
    clean = {}
    for k, v in row.items():
        if isinstance(v, np.generic):
            v = v.item()
        if isinstance(v, float) and not np.isfinite(v):
            v = None
        clean[k] = v
    return json.dumps(clean, sort_keys=True)


def read_journal(path: str | os.PathLike) -> dict[str, dict]:
    """Rows already finished, by object; a torn last line (killed mid-write) is ignored."""
    path = Path(path)
    rows: dict[str, dict] = {}
    if not path.exists():
        return rows
    with open(path, encoding="utf-8") as fh:
        for line in fh:
            line = line.strip()
            if not line:
                continue
            try:
                row = json.loads(line)
            except json.JSONDecodeError:
                continue
            rows[row["object"]] = {k: (np.nan if v is None else v) for k, v in row.items()}
    return rows


class _Journal:
    def __init__(self, path: Path):
        self.path = path
        path.parent.mkdir(parents=True, exist_ok=True)
        self._fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        # a torn last line from a killed run must not glue onto the next row
        if path.stat().st_size:
            with open(path, "rb") as fh:
                fh.seek(-1, os.SEEK_END)
                if fh.read(1) != b"\n":
                    os.write(self._fd, b"\n")

    def append(self, row: dict) -> None:
        os.write(self._fd, (_encode_row(row) + "\n").encode("utf-8"))
        os.fsync(self._fd)

    def close(self) -> None:
        os.close(self._fd)


# ---------------------------------------------------------------------------
# Executors


def _worker_init():
    _pin_threads()


def _iter_process_pool(tasks: list[ObjectTask], config: SurveyConfig, workers: int) -> Iterator[dict]:
    """Rows as they finish, from a process pool; a pool broken by a dying worker is rebuilt."""
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    from tumble.results import empty_row

    ctx = mp.get_context("fork") if hasattr(os, "fork") else mp.get_context()
    pending = list(reversed(tasks))  # pop() from the end keeps input order
    attempts: Counter = Counter()
    max_in_flight = max(2 * workers, 1)
    while pending:
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_worker_init)
        in_flight = {}
        broken = False
        try:
            while pending or in_flight:
                while pending and len(in_flight) < max_in_flight:
                    task = pending.pop()
                    in_flight[pool.submit(process_object, task, config)] = task
                done, _ = wait(list(in_flight), return_when=FIRST_COMPLETED)
                for fut in done:
                    task = in_flight.pop(fut)
                    try:
                        yield fut.result()
                    except BrokenProcessPool:
                        broken = True
                        attempts[task.object_id] += 1
                        if attempts[task.object_id] >= 2:
                            yield empty_row(task.object_id, "error",
                                            f"{task.object_id}: the worker died twice while processing it")
                        else:
                            pending.append(task)
                if broken:
                    for fut, task in in_flight.items():
                        attempts[task.object_id] += 1
                        if attempts[task.object_id] >= 2:
                            yield empty_row(task.object_id, "error",
                                            f"{task.object_id}: the worker died twice while processing it")
                        else:
                            pending.append(task)
                    in_flight.clear()
                    break
        finally:
            pool.shutdown(wait=not broken, cancel_futures=True)
        if not broken:
            return


def _iter_serial(tasks, config) -> Iterator[dict]:
    for task in tasks:
        yield process_object(task, config)


#: Dask settings of the LocalCluster started by ``--dask-local`` (not applied to an existing scheduler):
#: no statistical profiler or GIL monitor (they sample the task's stack every 10 ms / 1 ms), and the
#: workers start without Dask's default ``MALLOC_TRIM_THRESHOLD_=65536``, which fixes glibc's mmap
#: threshold and made every large numpy temporary a fresh mmap: +42 % CPU per screened object
#: (0.756 vs 0.533 CPU-s, measured side by side in one process on the bench_survey sample).
LOCAL_CLUSTER_CONFIG = {
    "distributed.worker.profile.enabled": False,
    "distributed.admin.system-monitor.gil.enabled": False,
    "distributed.nanny.pre-spawn-environ": {"OMP_NUM_THREADS": 1, "MKL_NUM_THREADS": 1, "OPENBLAS_NUM_THREADS": 1},
}


def _iter_dask(tasks: list[ObjectTask], config: SurveyConfig, scheduler: str | None, local_workers: int | None,
               chunk: int) -> Iterator[dict]:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise SurveyError("Dask is not installed: pip install 'tumble[cluster]'") from None
    cluster = None
    if scheduler:
        try:
            client = Client(scheduler, timeout=30)
        except Exception as exc:
            raise SurveyError(f"cannot reach the Dask scheduler at {scheduler} ({exc})") from None
    else:
        import dask

        # the workers' statistical profiler (a stack sample every 10 ms) and GIL monitor (every 1 ms)
        # compete with the task for the GIL; a batch run has no dashboard to show them, so they are off
        with dask.config.set(LOCAL_CLUSTER_CONFIG):
            cluster = LocalCluster(n_workers=local_workers or 1, threads_per_worker=1, processes=True,
                                   dashboard_address=None, silence_logs=50)
        client = Client(cluster)
    try:
        client.run(_pin_threads)
        conf = client.scatter(config, broadcast=True)
        todo = list(tasks)
        pos = 0
        window = max(chunk, 1)
        futures = as_completed()
        names = {}

        def submit():
            nonlocal pos
            fut = client.submit(process_object, todo[pos], conf, retries=1, pure=False)
            names[fut.key] = todo[pos].object_id
            futures.add(fut)
            pos += 1

        while pos < len(todo) and futures.count() < window:
            submit()
        for fut in futures:
            try:
                row = fut.result()
            except Exception as exc:  # the worker died twice (retries exhausted), or Dask itself failed
                from tumble.results import empty_row

                name = names.get(fut.key, "?")
                row = empty_row(name, "error", f"{name}: worker failed: {type(exc).__name__}: {exc}")
            names.pop(fut.key, None)
            yield row
            fut.release()
            if pos < len(todo):
                submit()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# ---------------------------------------------------------------------------
# The run


@dataclass(frozen=True)
class SurveySummary:
    """What a survey run did.

    Attributes
    ----------
    n_objects, n_done_before, n_processed : int
        Objects in the input, finished in an earlier run (resumed), processed now.
    status_counts, rotation_counts, grade_counts : dict
        Counts by status, by rotation class (ok rows) and by (rotation, grade).
    error_kinds : dict
        Error rows by kind (the first words of their message after the file name).
    wall_s, cpu_per_object_s : float
        Wall time of this run, s; mean object runtime, s.
    shortlist : list of dict
        NPA candidates (object, p_npa, grade, p_psi_h, p_phi_h), sorted by p_npa, highest first.
    results_path, journal_path : str
    """

    n_objects: int
    n_done_before: int
    n_processed: int
    status_counts: dict
    rotation_counts: dict
    grade_counts: dict
    error_kinds: dict
    wall_s: float
    cpu_per_object_s: float
    shortlist: list
    results_path: str
    journal_path: str

    def to_dict(self) -> dict:
        return asdict(self)


def _error_kind(message: str) -> str:
    text = str(message)
    parts = text.split(": ")
    body = parts[-1] if len(parts) > 1 else text
    words = [w for w in body.replace("(", " ").split() if not any(ch.isdigit() for ch in w)]
    return " ".join(words[:4]) or "error"


def run_survey(inputs, out: str | os.PathLike, config: SurveyConfig | None = None, *, workers: int | None = None,
               scheduler: str | None = None, dask_local: int | None = None, resume: bool = False,
               progress: bool = True, chunk: int | None = None, tasks: list[ObjectTask] | None = None,
               _stop_after: int | None = None) -> SurveySummary:
    """Process every object of a survey and write the results catalogue.

    Parameters
    ----------
    inputs : sequence of str or path
        Directories, glob patterns or files (see :func:`collect_objects`).
    out : path
        Results catalogue (ECSV by default; FITS or CSV by the extension). The
        journal is written beside it (:func:`journal_path`).
    config : SurveyConfig
    workers : int, optional
        Local worker processes (default: the number of cores; 1 runs in this process).
    scheduler : str, optional
        Address of a running dask.distributed scheduler.
    dask_local : int, optional
        Start a Dask LocalCluster with this many single-threaded workers.
    resume : bool
        Keep the rows of an earlier run's journal and process only the rest.
        Without it an existing journal is an error (nothing is overwritten by accident).
    progress : bool
        tqdm progress bar on stderr (objects done, errors, rate).
    chunk : int, optional
        Tasks submitted ahead of completion (default 4 per worker), so a million
        objects never become a million futures at once.
    tasks : list of ObjectTask, optional
        Pre-built tasks instead of ``inputs`` (e.g. injections).
    """
    from tumble.results import write_results

    config = config or SurveyConfig()
    out = Path(out)
    jpath = journal_path(out)
    if jpath.exists() and not resume:
        raise SurveyError(f"{jpath}: a journal of an earlier run exists; use --resume to finish it, "
                          "or remove it to start again")
    all_tasks = tasks if tasks is not None else collect_objects(inputs, config.read_options)
    if not all_tasks:
        raise SurveyError("no objects found in the input")
    done = read_journal(jpath) if resume else {}
    known = {t.object_id for t in all_tasks}
    stale = set(done) - known
    if stale:
        raise SurveyError(f"{jpath}: the journal holds objects not in this input (e.g. '{sorted(stale)[0]}'); "
                          "it belongs to another run")
    todo = [t for t in all_tasks if t.object_id not in done]
    n_workers = workers if workers is not None else (os.cpu_count() or 1)
    chunk = chunk or 4 * max(n_workers, dask_local or 1)
    t0 = time.perf_counter()
    if scheduler or dask_local:
        rows_iter = _iter_dask(todo, config, scheduler, dask_local, chunk)
    elif n_workers <= 1:
        rows_iter = _iter_serial(todo, config)
    else:
        rows_iter = _iter_process_pool(todo, config, n_workers)
    bar = None
    if progress and todo:
        from tqdm import tqdm

        bar = tqdm(total=len(todo), unit="obj", desc="survey", dynamic_ncols=True, leave=True)
    journal = _Journal(jpath)
    n_err = 0
    processed = 0
    try:
        for row in rows_iter:
            journal.append(row)
            done[row["object"]] = row
            processed += 1
            n_err += row["status"] == "error"
            if bar is not None:
                bar.update(1)
                bar.set_postfix(errors=n_err, refresh=False)
            if _stop_after is not None and processed >= _stop_after:
                break  # for tests of interruption; the journal keeps what was done
    finally:
        journal.close()
        if bar is not None:
            bar.close()
        if hasattr(rows_iter, "close"):
            rows_iter.close()
    wall = time.perf_counter() - t0
    ordered = [done[t.object_id] for t in all_tasks if t.object_id in done]
    if len(ordered) == len(all_tasks):
        write_results(ordered, out)
    return _summarise(ordered, len(all_tasks), len(all_tasks) - len(todo), processed, wall, out, jpath)


def _summarise(rows, n_objects, n_before, n_processed, wall, out, jpath) -> SurveySummary:
    status = Counter(r["status"] for r in rows)
    ok = [r for r in rows if r["status"] == "ok"]
    rotation = Counter(r["rotation"] for r in ok)
    grades = Counter(f"{r['rotation']}/{r['grade'] or '-'}" for r in ok)
    errors = Counter(_error_kind(r["message"]) for r in rows if r["status"] == "error")
    runtimes = [float(r["runtime_s"]) for r in rows if np.isfinite(float(r.get("runtime_s", np.nan)))]
    npa = sorted((r for r in ok if r["rotation"] == "NPA"), key=lambda r: -float(r["p_npa"]))
    shortlist = [{k: r.get(k) for k in ("object", "p_npa", "grade", "mode", "p_psi_h", "p_phi_h", "p1_h", "p2_h")}
                 for r in npa]
    return SurveySummary(
        n_objects=n_objects, n_done_before=n_before, n_processed=n_processed, status_counts=dict(status),
        rotation_counts=dict(rotation), grade_counts=dict(grades), error_kinds=dict(errors), wall_s=wall,
        cpu_per_object_s=float(np.mean(runtimes)) if runtimes else float("nan"), shortlist=shortlist,
        results_path=str(out) if len(rows) == n_objects else "", journal_path=str(jpath),
    )
