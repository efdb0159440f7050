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
import re
import threading
import time
import zlib
from collections import Counter
from dataclasses import asdict, dataclass, field, replace
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
    "load_journal",
    "JournalContents",
    "lock_path",
    "config_difference",
    "validate_output",
    "validate_objects_dir",
    "object_folder",
    "keep_verdict",
    "die_with_parent",
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
    binary : bool
        Weigh the binary alternative before an NPA verdict (full route; ``tumble.classify.classify``).
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
    binary: bool = True

    def __post_init__(self):
        if self.route not in ("full", "screen"):
            raise SurveyError(f"route must be full or screen, not '{self.route}'")
        if self.object_timeout_s is not None and not self.object_timeout_s > 0:
            raise SurveyError(f"object time limit must be positive, got {self.object_timeout_s} s")
        if not 0 < self.prior_npa < 1:  # also refuses NaN
            raise SurveyError(f"prior probability of NPA must lie strictly between 0 and 1, got {self.prior_npa}")
        if isinstance(self.seed, bool) or not isinstance(self.seed, (int, np.integer)) or self.seed < 0:
            raise SurveyError(f"seed must be a non-negative integer, got {self.seed}")
        if self.max_steps < 0:
            raise SurveyError(f"sampler steps must be 0 or more, got {self.max_steps}")
        if self.n_walkers is not None and self.n_walkers < 1:
            raise SurveyError(f"sampler walkers must be at least 1, got {self.n_walkers}")

    def provenance(self) -> dict:
        """What decides the results of this run: version, route, prior, seed and the options that
        change a row (JSON-safe; recorded in the journal header, the results metadata and verdicts)."""
        from tumble.results import make_provenance, plain_record

        return make_provenance(route=self.route, prior_npa=self.prior_npa, seed=self.seed,
                               max_steps=int(self.max_steps), binary=bool(self.binary),
                               n_walkers=None if self.n_walkers is None else int(self.n_walkers),
                               read_options=plain_record(self.read_options),
                               sizes_sha256=_digest(sorted((str(k), list(v)) for k, v in self.sizes.items())))


def _digest(value) -> str:
    import hashlib

    from tumble.results import plain_record

    return hashlib.sha256(json.dumps(plain_record(value), sort_keys=True).encode("utf-8")).hexdigest()[:16]


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
                           and not p.name.endswith((".json", ".journal.jsonl")))
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
        else:
            if str(table.meta.get("schema", "")).startswith("tumble results") or (
                    "provenance" in table.meta and {"status", "rotation"} <= {n.lower() for n in table.names}):
                raise SurveyError(f"{path}: a tumble results catalogue, not photometry (the --out of an earlier "
                                  "run inside the input folder?); move it out of the inputs")
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
    from tumble.results import results_row
    from tumble.schema import verdict_record

    lc = task.lightcurve
    if lc is None:
        lc = read_lightcurve(list(task.paths), options=config.read_options, object_id=task.object_id)
    rng = np.random.default_rng(object_seed(config.seed, task.object_id))
    if config.route == "screen":
        verdict = screen(lc, prior_npa=config.prior_npa)
    else:
        verdict = classify(lc, prior_npa=config.prior_npa, rng=rng, n_walkers=config.n_walkers,
                           max_steps=config.max_steps, binary=config.binary).verdict
    record = verdict.to_dict()
    record.setdefault("route", config.route)  # the verdict's own route wins once it carries one
    record = verdict_record(record)
    row = results_row(record, object_id=task.object_id)
    side_warnings = []
    d_km, h_mag, albedo = config.sizes.get(task.object_id, (None, None, None))
    damp = None
    if config.route != "screen":  # a screen states no rotation, so no damping time
        try:
            damp = damping_for_classification(verdict, diameter_km=d_km, h_mag=h_mag, albedo=albedo,
                                              rng=object_seed(config.seed + 1, task.object_id))
        except (TumbleError, ValueError) as exc:  # a bad size entry costs the damping time, not the verdict
            side_warnings.append(f"no damping time: {' '.join(str(exc).split())}")
    if damp is not None:
        taus = dict(tau_damp_gyr=damp.tau_gyr, tau_damp_gyr_lo=damp.tau_gyr_lo, tau_damp_gyr_hi=damp.tau_gyr_hi)
        row.update(taus)
        record = verdict_record(record, **taus)
    if config.keep_objects_dir:
        try:
            # the same verdict.json schema as tumble classify writes
            keep_verdict(config.keep_objects_dir, task.object_id, record, config.provenance())
        except OSError as exc:  # an unwritable side file costs the side file, not the verdict
            side_warnings.append(f"verdict file not written ({exc.strerror or exc})")
    if side_warnings:
        row["message"] = "; ".join([str(row.get("message") or "")] * bool(row.get("message"))
                                   + [f"warning: {w}" for w in side_warnings])
    return row


def object_folder(objects_dir: str | os.PathLike, object_id: str) -> Path:
    """The per-object folder of ``--keep-objects`` (written and read through one safe name)."""
    from tumble._io import safe_component

    return Path(objects_dir) / safe_component(object_id)


def keep_verdict(objects_dir: str | os.PathLike, object_id: str, verdict: dict, provenance: dict) -> Path:
    """Write ``OBJECTS_DIR/<safe name>/verdict.json`` (atomically) with the run's provenance."""
    from tumble._io import atomic_write_text
    from tumble.schema import dumps_strict

    folder = object_folder(objects_dir, object_id)
    folder.mkdir(parents=True, exist_ok=True)
    body = dict(verdict, provenance=provenance)
    path = folder / "verdict.json"
    atomic_write_text(path, dumps_strict(body, indent=2) + "\n")
    return path


# ---------------------------------------------------------------------------
# Journal


def journal_path(out: str | os.PathLike) -> Path:
    """The journal beside an output file: ``results.ecsv`` -> ``results.ecsv.journal.jsonl``."""
    out = Path(out)
    return out.with_name(out.name + ".journal.jsonl")


def lock_path(out: str | os.PathLike) -> Path:
    """The lock file of a run writing ``out`` (hidden, beside it): ``.results.ecsv.lock``."""
    out = Path(out)
    return out.with_name(f".{out.name}.lock")


#: Key of the journal's first line, which records the run configuration (not an object row).
JOURNAL_HEADER_KEY = "tumble_journal"
#: Journal format version written in the header line.
JOURNAL_VERSION = 1


def _encode_row(row: dict) -> str:
    clean = {}
    for k, v in row.items():
        if isinstance(v, np.generic):
            v = v.item()
        if isinstance(v, float) and not np.isfinite(v):
            v = None
        clean[k] = v
    return json.dumps(clean, sort_keys=True)


@dataclass(frozen=True)
class JournalContents:
    """What a journal holds.

    Attributes
    ----------
    header : dict or None
        The run configuration of its header line (None: no header, e.g. an older journal).
    rows : dict
        Finished rows by object (the last valid line of each object wins).
    n_malformed : int
        Lines that are not a valid row (torn, not JSON, not UTF-8, missing columns); their
        objects are processed again.
    """

    header: dict | None
    rows: dict
    n_malformed: int


def _valid_row(obj) -> bool:
    from tumble.results import COLUMN_NAMES, STATUS_VALUES

    return (isinstance(obj, dict) and isinstance(obj.get("object"), str) and obj.get("status") in STATUS_VALUES
            and all(k in obj for k in COLUMN_NAMES))


def load_journal(path: str | os.PathLike) -> JournalContents:
    """Read a journal: header, valid rows by object, and the count of malformed lines (never raises
    for bad content; an unreadable file raises :class:`SurveyError`)."""
    path = Path(path)
    header, rows, bad = None, {}, 0
    if not path.exists():
        return JournalContents(None, rows, 0)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise SurveyError(f"{path}: journal cannot be read ({exc.strerror or exc})") from None
    for k, line in enumerate(raw.split(b"\n")):
        if not line.strip():
            continue
        try:
            obj = json.loads(line.decode("utf-8"))
        except (UnicodeDecodeError, ValueError):
            bad += 1
            continue
        if k == 0 and isinstance(obj, dict) and JOURNAL_HEADER_KEY in obj:
            header = obj.get("config") if isinstance(obj.get("config"), dict) else {}
            continue
        if not _valid_row(obj):
            bad += 1
            continue
        rows[obj["object"]] = {key: (np.nan if v is None else v) for key, v in obj.items()}
    return JournalContents(header, rows, bad)


def read_journal(path: str | os.PathLike) -> dict[str, dict]:
    """Rows already finished, by object; malformed lines (a torn last line, ...) are ignored."""
    return load_journal(path).rows


def config_difference(old: dict, new: dict) -> str | None:
    """The first setting in which two journal configurations differ, as ``name: old -> new`` (or None)."""
    for key in sorted(set(old) | set(new)):
        a, b = old.get(key, "(absent)"), new.get(key, "(absent)")
        if a != b:
            if isinstance(a, dict) and isinstance(b, dict):
                inner = config_difference(a, b)
                return f"{key}.{inner}"
            return f"{key}: {json.dumps(a)} -> {json.dumps(b)}"
    return None


class _Journal:
    """Append-only JSON-lines journal; the header line is written with the first row, so a run that
    fails before any object is finished leaves no journal behind."""

    def __init__(self, path: Path, header: dict):
        self.path = path
        self._header = header
        self._fd = None

    def _open(self) -> None:
        from tumble._io import write_all

        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        size = os.fstat(fd).st_size
        if size == 0:
            write_all(fd, (json.dumps({JOURNAL_HEADER_KEY: JOURNAL_VERSION, "config": self._header},
                                      sort_keys=True) + "\n").encode("utf-8"))
        else:  # a torn last line from a killed run must not glue onto the next row
            with open(self.path, "rb") as fh:
                fh.seek(-1, os.SEEK_END)
                if fh.read(1) != b"\n":
                    write_all(fd, b"\n")
        self._fd = fd

    def append(self, row: dict) -> None:
        from tumble._io import write_all

        if self._fd is None:
            self._open()
        try:
            write_all(self._fd, (_encode_row(row) + "\n").encode("utf-8"))
            os.fsync(self._fd)
        except OSError as exc:
            raise SurveyError(f"{self.path}: cannot write the journal ({exc.strerror or exc}); "
                              "the rows written so far are kept, finish with --resume") from None

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None


class _OutputLock:
    """An exclusive advisory lock (``flock``) on the output of a run; released when the process ends,
    even by SIGKILL, so a killed run never blocks its ``--resume``."""

    def __init__(self, out: Path):
        self.path = lock_path(out)
        self._fd = None

    def acquire(self) -> None:
        import fcntl

        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise SurveyError(f"{self.path.with_name(self.path.name[1:-5])}: another tumble run is writing "
                              "this output now; wait for it or choose another --out") from None
        self._fd = fd

    def release(self) -> None:
        if self._fd is not None:  # the file stays: unlinking it could let two runs lock two inodes
            os.close(self._fd)
            self._fd = None


# ---------------------------------------------------------------------------
# Executors


#: Linux prctl option that sends a signal to a process when its parent dies (linux/prctl.h).
_PR_SET_PDEATHSIG = 1
#: Task states in the shared array of the process pool (which tasks a dead worker held).
_QUEUED, _RUNNING, _FINISHED = 0, 1, 2
_TASK_STATE = None  # set in each pool worker by _worker_init


def die_with_parent() -> None:
    """Ask the kernel to SIGKILL this process when its parent dies (Linux; elsewhere nothing), so
    that killing a survey, even with SIGKILL, leaves no worker behind."""
    import signal
    import sys

    if not sys.platform.startswith("linux"):
        return
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
    except (OSError, AttributeError):
        return
    if os.getppid() == 1:  # the parent died before the request took effect
        os._exit(1)


def _worker_init(task_state=None):
    global _TASK_STATE
    import signal

    die_with_parent()
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and stops the workers
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    _TASK_STATE = task_state
    _pin_threads()


def _pool_task(task: ObjectTask, config: SurveyConfig, slot: int) -> dict:
    """process_object in a pool worker, marking the task running and finished in the shared array."""
    if _TASK_STATE is not None:
        _TASK_STATE[slot] = _RUNNING
    try:
        return process_object(task, config)
    finally:
        if _TASK_STATE is not None:
            _TASK_STATE[slot] = _FINISHED


def _stop_pool(pool) -> None:
    """Shut a process pool down now: queued tasks cancelled, running workers terminated."""
    procs = dict(getattr(pool, "_processes", None) or {})  # no public accessor before 3.14; shutdown clears it
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in list(procs.values()):
        try:
            proc.terminate()
        except (OSError, ValueError, AttributeError):
            pass
    for proc in list(procs.values()):
        try:
            proc.join(5)
            if proc.is_alive():
                proc.kill()
        except (OSError, ValueError, AttributeError, AssertionError):
            pass


def _iter_process_pool(tasks: list[ObjectTask], config: SurveyConfig, workers: int) -> Iterator[dict]:
    """Rows as they finish, from a process pool; a pool broken by a dying worker is rebuilt.

    When a worker dies, only the tasks that were running at that moment are suspects (queued
    tasks are resubmitted free). With one suspect it is charged an attempt; with several, nobody
    can tell which worker died first, so they are rerun one at a time ("solo"), where a death is
    charged to the one task that was running. A task charged twice becomes an error row.
    """
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    from tumble.results import empty_row

    ctx = mp.get_context("fork") if hasattr(os, "fork") else mp.get_context()
    slots = {t.object_id: k for k, t in enumerate(tasks)}
    state = ctx.Array("b", len(tasks), lock=False)
    pending = list(reversed(tasks))  # pop() from the end keeps input order
    solo: list[ObjectTask] = []  # suspects of a death with several tasks running, rerun one at a time
    attempts: Counter = Counter()
    while pending or solo:
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_worker_init,
                                   initargs=(state,))
        in_flight = {}
        broken = False
        try:
            while pending or solo or in_flight:
                limit = 1 if solo else max(2 * workers, 1)
                while (solo or pending) and len(in_flight) < limit:
                    task = solo.pop() if solo else pending.pop()
                    state[slots[task.object_id]] = _QUEUED
                    in_flight[pool.submit(_pool_task, task, config, slots[task.object_id])] = task
                done, _ = wait(list(in_flight), return_when=FIRST_COMPLETED)
                rows = []
                for fut in done:
                    try:
                        rows.append(fut.result())
                        in_flight.pop(fut)
                    except BrokenProcessPool:
                        broken = True
                yield from rows
                if broken:
                    running = [t for t in in_flight.values() if state[slots[t.object_id]] == _RUNNING]
                    queued = [t for t in in_flight.values() if state[slots[t.object_id]] != _RUNNING]
                    pending.extend(reversed(queued))
                    if len(running) == 1:
                        task = running[0]
                        attempts[task.object_id] += 1
                        if attempts[task.object_id] >= 2:
                            yield empty_row(task.object_id, "error",
                                            f"{task.object_id}: the worker died twice while processing it")
                        else:
                            solo.append(task)
                    else:
                        solo.extend(reversed(running))
                    in_flight.clear()
                    break
        finally:
            _stop_pool(pool)
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
    n_malformed_journal_lines : int
        Journal lines skipped on ``--resume`` as not a valid row (their objects were redone).
    provenance : dict
        The run configuration (version, route, prior, seed, options), as in the journal header.
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
    n_malformed_journal_lines: int = 0
    provenance: dict = field(default_factory=dict)

    @property
    def all_failed(self) -> bool:
        """True when the run is complete and every object is an error row."""
        return bool(self.results_path) and self.n_objects > 0 and self.status_counts.get("error", 0) == self.n_objects

    def to_dict(self) -> dict:
        return asdict(self)


#: Words of an error message kept as its kind in the survey summary.
ERROR_KIND_WORDS = 8


def _error_kind(message: str) -> str:
    """The kind of an error for the summary: its message without the file/row prefix, the quoted values
    and the numbers (so that "a.csv: row 3: 'n/a?' is not a number" and "b.csv: row 9: 'x' is not a
    number" count as one kind, "value is not a number")."""
    text = " ".join(str(message).split())
    parts = [p for p in text.split(": ") if p]
    if "internal error" in parts[1:-1]:
        i = parts.index("internal error")
        return f"internal error {parts[i + 1]}" if i + 1 < len(parts) - 1 else "internal error"
    # the prefix names where (file, row, column); the kind is the last part that has words in it
    body = next((p for p in reversed(parts) if re.search(r"[A-Za-z]{3,}", _unquote(p))), text)
    body = _unquote(body)
    words = [w.strip(",;.()") for w in body.split()]
    words = [w for w in words if w and not any(ch.isdigit() for ch in w)]
    return " ".join(words[:ERROR_KIND_WORDS]) or "error"


def _unquote(text: str) -> str:
    """Quoted values replaced by the word 'value'."""
    return re.sub(r"'[^']*'|\"[^\"]*\"", "value", text)


def validate_output(out: str | os.PathLike, object_ids: Iterable[str] = ()) -> Path:
    """Check before any work that the results catalogue can be written at ``out`` and hold these
    names: known format, not a folder, writable folder (a tiny probe table is written and removed).

    Raises
    ------
    SurveyError
        With a one-line message naming the path and the problem.
    """
    import contextlib
    import tempfile

    from tumble.results import empty_row, write_results

    out = Path(out)
    if out.is_dir():
        raise SurveyError(f"{out}: is a folder; --out names the results file (e.g. {out / 'results.ecsv'})")
    names = list(object_ids)
    probe_names = names[:1] + [n for n in names[1:] if not n.isascii()][:100]
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".probe-", suffix=out.name, dir=out.parent)
        os.close(fd)
    except OSError as exc:
        raise SurveyError(f"{out}: the output folder cannot be written ({exc.strerror or exc})") from None
    try:
        os.unlink(tmp)
        write_results([empty_row(n) for n in probe_names or ["probe"]], tmp)
    except TumbleError as exc:
        raise SurveyError(str(exc).replace(tmp, str(out))) from None
    except Exception as exc:  # the format cannot hold the data
        raise SurveyError(f"{out}: the results cannot be written in this format "
                          f"({' '.join(str(exc).split())[:200]})") from None
    finally:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
    return out


def validate_objects_dir(objects_dir: str | os.PathLike, object_ids: Iterable[str]) -> Path:
    """Check before any work that the ``--keep-objects`` folder is writable and that no two object
    names share a folder (names are made safe by :func:`tumble._io.safe_component`)."""
    import tempfile

    from tumble._io import safe_component

    folder = Path(objects_dir)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".probe-", dir=folder)
        os.close(fd)
        os.unlink(tmp)
    except OSError as exc:
        raise SurveyError(f"{folder}: the --keep-objects folder cannot be written ({exc.strerror or exc})") from None
    seen: dict[str, str] = {}
    for name in object_ids:
        key = safe_component(name).lower()  # case-insensitive file systems
        if key in seen and seen[key] != name:
            raise SurveyError(f"{folder}: objects '{seen[key]}' and '{name}' would share the folder "
                              f"'{safe_component(name)}' on a case-insensitive file system; rename one")
        seen[key] = name
    return folder


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.resolve().relative_to(folder.resolve())
        return True
    except ValueError:
        return False


def run_survey(inputs, out: str | os.PathLike, config: SurveyConfig | None = None, *, workers: int | None = None,
               scheduler: str | None = None, dask_local: int | None = None, resume: bool = False,
               force_resume: bool = False, progress: bool = True, chunk: int | None = None,
               tasks: list[ObjectTask] | None = None, _stop_after: int | None = None) -> SurveySummary:
    """Process every object of a survey and write the results catalogue.

    Everything that can be checked is checked before the first object is computed: the
    output (format, folder, names it must hold), the ``--keep-objects`` folder, and on
    ``resume`` that the journal was written with the same configuration.

    Parameters
    ----------
    inputs : sequence of str or path
        Directories, glob patterns or files (see :func:`collect_objects`).
    out : path
        Results catalogue (ECSV by default; FITS or CSV by the extension). The
        journal is written beside it (:func:`journal_path`); a lock (:func:`lock_path`)
        refuses a second run on the same output while this one runs.
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
    force_resume : bool
        Resume even when the journal's configuration differs from this run's (the rows of
        both configurations are then mixed; the results metadata records it).
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
    if workers is not None and workers < 1:
        raise SurveyError(f"workers must be at least 1, got {workers}")
    if dask_local is not None and dask_local < 1:
        raise SurveyError(f"Dask local workers must be at least 1, got {dask_local}")
    for item in inputs or ():
        if Path(item).is_dir() and _inside(out, Path(item)):
            raise SurveyError(f"{out}: the output is inside the input folder {item}; the next run would read it "
                              "back as photometry. Choose --out outside the inputs")
    if jpath.exists() and not resume:
        raise SurveyError(f"{jpath}: a journal of an earlier run exists; use --resume to finish it, "
                          "or remove it to start again")
    lock = _OutputLock(out)
    lock.acquire()
    try:
        return _run_locked(inputs, out, jpath, config, workers, scheduler, dask_local, resume, force_resume,
                           progress, chunk, tasks, _stop_after, write_results)
    finally:
        lock.release()


def _run_locked(inputs, out, jpath, config, workers, scheduler, dask_local, resume, force_resume, progress, chunk,
                tasks, _stop_after, write_results) -> SurveySummary:
    all_tasks = tasks if tasks is not None else collect_objects(inputs, config.read_options)
    if not all_tasks:
        raise SurveyError("no objects found in the input")
    names = [t.object_id for t in all_tasks]
    validate_output(out, names)
    if config.keep_objects_dir:
        validate_objects_dir(config.keep_objects_dir, names)
    provenance = dict(config.provenance(), inputs_sha256=_digest(names))
    journal = load_journal(jpath) if resume else JournalContents(None, {}, 0)
    if resume and journal.header is not None and not force_resume:
        diff = config_difference(journal.header, provenance)
        if diff is not None and diff.startswith("inputs_sha256"):
            diff = "the input lists other objects than the journal's run"
        if diff is not None:
            raise SurveyError(f"{jpath}: the journal was written with other settings ({diff}); resume with the "
                              "same settings, or give --force-resume to mix them")
    done = dict(journal.rows)
    known = set(names)
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
    writer = _Journal(jpath, provenance)
    n_err = 0
    processed = 0
    try:
        for row in rows_iter:
            writer.append(row)
            done[row["object"]] = row
            processed += 1
            n_err += row["status"] == "error"
            if bar is not None:
                bar.update(1)
                bar.set_postfix(errors=n_err, refresh=False)
            if _stop_after is not None and processed >= _stop_after:
                break  # for tests of interruption; the journal keeps what was done
    finally:
        writer.close()
        if bar is not None:
            bar.close()
        if hasattr(rows_iter, "close"):
            rows_iter.close()
    wall = time.perf_counter() - t0
    ordered = [done[t.object_id] for t in all_tasks if t.object_id in done]
    if journal.header is not None and journal.header != provenance:
        provenance = dict(provenance, mixed_with=journal.header)  # --force-resume over other settings
    if len(ordered) == len(all_tasks):
        write_results(ordered, out, provenance=provenance)
    summary = _summarise(ordered, len(all_tasks), len(all_tasks) - len(todo), processed, wall, out, jpath)
    return replace(summary, n_malformed_journal_lines=journal.n_malformed, provenance=provenance)


def _summarise(rows, n_objects, n_before, n_processed, wall, out, jpath) -> SurveySummary:
    status = Counter(r["status"] for r in rows)
    ok = [r for r in rows if r["status"] == "ok"]
    # a screened row states no rotation: it is counted by its screen flag
    rotation = Counter(r["rotation"] or f"screen {r.get('screen_flag') or '?'}" for r in ok)
    grades = Counter(f"{r['rotation']}/{r['grade'] or '-'}" for r in ok if r["rotation"])
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
