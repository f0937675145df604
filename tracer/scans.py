"""Voltage scans: many voltage sets through the same basis maps, on any executor, durably.

A scan is a list of voltage sets (the product of per-electrode ranges, or the rows of a CSV file;
:func:`voltage_sets`).  For every set the basis maps are combined (no new Laplace solve, DESIGN §2),
every beam is traced, and the beam figures are measured (:func:`tracer.measure.row`).  The sets run through any
:class:`concurrent.futures.Executor`; the result is the same, bit for bit, whichever ran them,
because each set is an independent, deterministic computation on the same maps.  With its own
process pool, the scanning process itself runs sets from the end of the queue until the workers
deliver their first, so the pool's start-up is not idle time.

The table's columns are the varied voltages, ``<electrode>_V``, then the figures of each beam
(:func:`tracer.measure.columns`; the module notes of :mod:`tracer.measure` name them and say which
crossings of a plane count).

Files (when ``out`` is given)
-----------------------------
``scan.csv``
    One line per finished set, appended, flushed and fsynced as each set completes (in completion
    order), after a first line ``# tracer scan table; config sha256 <hash>`` and a header row
    ``set,<columns>`` (``set`` is the set's index in the scan order).  Numbers are written in
    Python's shortest round-trip form, so rows read back are bit for bit those computed.
``scan.h5``
    The finished rows in scan order (``tracer/scan/table``, with their indices in
    ``tracer/scan/set``), rewritten atomically (temporary file renamed into place) at least every
    ``h5_interval_s`` seconds, on an interrupt and at the end.

Running a scan again reads ``scan.csv`` and skips the finished sets; a last line cut short by a
killed process is dropped.  The config hash (:func:`config_hash`) covers everything the figures
depend on; when it differs, the old files are renamed to ``scan.<old hash>.csv`` / ``.h5`` and a
fresh table starts, so rows of different configs are never mixed.
"""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import itertools
import json
import multiprocessing
import multiprocessing.connection
import os
import signal
import threading
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from tracer import __version__, measure

TABLE_FORMAT = "tracer-scan-1"
CSV_NAME = "scan.csv"
H5_NAME = "scan.h5"
H5_GROUP = "tracer/scan"
_FIRST_LINE = "# tracer scan table; config sha256 "

_TRACE_LOCK = threading.Lock()   # one trace at a time per process: the kernel is itself parallel
_WORKER = {}                     # the context of a pool worker, set once by its initializer


# --------------------------------------------------------------------------------------------
# Voltage sets and the config hash


def voltage_sets(setup):
    """The voltage sets of a setup's ``[scan]``.

    Parameters
    ----------
    setup : tracer.config.Setup
        With ``setup.scan`` given: ranges (the product, the first range varying slowest, each range
        ``numpy.linspace(from, to, count)``) or a CSV file of ``<electrode>_V`` columns.

    Returns
    -------
    names : tuple of str
        The varied electrodes.
    sets : float64[n_sets, n_names]
        One row per voltage set, volts.

    Raises
    ------
    tracer.config.ConfigError
        For a setup without ``[scan]`` or a CSV row that is not numbers.
    """
    from tracer.config import ConfigError

    spec = setup.scan
    if spec is None:
        raise ConfigError("scan", "missing: the setup has no [scan] section")
    if spec.csv is None:
        names = tuple(r[0] for r in spec.ranges)
        axes = [np.linspace(lo, hi, count) for _, lo, hi, count in spec.ranges]
        sets = np.array(list(itertools.product(*axes)), dtype=np.float64).reshape(-1, len(names))
        return names, sets
    with open(spec.csv, newline="", encoding="utf-8") as handle:
        rows = [row for row in csv.reader(handle) if any(c.strip() for c in row)]
    names = tuple(c.strip().removesuffix("_V") for c in rows[0])
    try:
        sets = np.array([[float(c) for c in row] for row in rows[1:]], dtype=np.float64)
    except ValueError as error:
        raise ConfigError("scan.csv", f"{spec.csv.name!r}: a voltage is not a number ({error})") from None
    if sets.ndim != 2 or sets.shape[1] != len(names) or not len(sets):
        raise ConfigError("scan.csv", f"{spec.csv.name!r}: every row needs {len(names)} voltage(s)")
    if not np.isfinite(sets).all():
        raise ConfigError("scan.csv", f"{spec.csv.name!r}: voltages must be finite numbers")
    return names, sets


def _file_digest(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _plain(value):
    """JSON form of config values: dataclasses by field, paths by their content's digest."""
    if dataclasses.is_dataclass(value):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Path):
        return {"sha256": _file_digest(value)}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    return value


def config_hash(setup, names, sets) -> str:
    """sha256 hex digest of everything a scan table depends on.

    The geometry (``Setup.geometry_hash``), every electrode voltage, the beams (a rays file by its
    content), the planes, the trace options that change results (``rtol``, ``max_time_s``), the
    varied electrodes, the voltage sets (exact floats), the table format and the tracer version.
    Title, paths, plots and the ``[tune]``, ``[gun]``, ``[optics]`` sections are left out.
    """
    payload = {
        "format": TABLE_FORMAT, "version": __version__, "geometry": setup.geometry_hash(),
        "voltages": setup.voltages(), "beams": _plain(setup.beams), "planes": _plain(setup.planes),
        "rtol": setup.trace.rtol, "max_time_s": setup.trace.max_time_s, "names": list(names),
        "sets": np.ascontiguousarray(sets, dtype=np.float64).tobytes().hex(),
    }
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


# --------------------------------------------------------------------------------------------
# What is measured for one voltage set


@dataclass(frozen=True, eq=False)
class Context:
    """Everything a worker needs to measure voltage sets: sent once per worker.

    Attributes
    ----------
    maps : tracer.fieldmap.BasisMaps
    beams, planes : tuple
        The setup's beams and detector planes.
    names : tuple of str
        The varied electrodes, in the order of a voltage set's values.
    rtol, max_time_s : float
        Trace options.
    """

    maps: object
    beams: tuple
    planes: tuple
    names: tuple
    rtol: float
    max_time_s: float

    @classmethod
    def of(cls, setup, maps, names, planes=None, beams=None):
        """The context of a setup (planes and beams default to the setup's)."""
        return cls(maps, tuple(setup.beams if beams is None else beams),
                   tuple(setup.planes if planes is None else planes), tuple(names),
                   setup.trace.rtol, setup.trace.max_time_s)

    @property
    def columns(self):
        return measure.columns([b.name for b in self.beams], [p.name for p in self.planes], self.maps.names)

    def run(self, voltages):
        """Measure one voltage set.

        Returns
        -------
        figures : float64[n_columns]
        trace_s : float
            Seconds spent inside ``tracer.beam.trace``.
        """
        from tracer.beam import trace

        field = self.maps.combine(dict(zip(self.names, (float(v) for v in voltages))))
        figures, trace_s = [], 0.0
        for beam in self.beams:
            with _TRACE_LOCK:
                t0 = time.perf_counter()
                run = trace(field, beam, planes=self.planes, rtol=self.rtol, max_time_s=self.max_time_s)
                trace_s += time.perf_counter() - t0
            figures += measure.row(run, self.maps.names)
        return np.array(figures, dtype=np.float64), trace_s


# --------------------------------------------------------------------------------------------
# Executors


def _exit_with_parent():
    """Wait for the parent process to end, then end this worker (a killed parent leaves no orphans)."""
    multiprocessing.connection.wait([multiprocessing.parent_process().sentinel])
    os._exit(1)


def _init_worker(context, threads):
    """Pool initializer: keep the context, size numba's thread pool, leave Ctrl-C to the parent,
    and end with the parent even when it is killed."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threading.Thread(target=_exit_with_parent, daemon=True).start()
    import numba

    numba.set_num_threads(max(1, min(threads, numba.config.NUMBA_NUM_THREADS)))
    _WORKER["context"] = context


def _task_in_worker(index, voltages):
    """A voltage set in a pool worker whose initializer holds the context."""
    return (index, *_WORKER["context"].run(voltages))


def _task(context, index, voltages):
    """A voltage set with its context passed along (a scattered dask future, or any object)."""
    return (index, *context.run(voltages))


def process_pool(context, workers=None):
    """A process pool whose workers receive the context once, through the pool's initializer.

    Parameters
    ----------
    context : Context
    workers : int, optional
        Number of processes (default: the machine's CPU count); numba's threads are shared out
        between them.

    Returns
    -------
    concurrent.futures.ProcessPoolExecutor
        Workers are forked from a fresh single-threaded server that has already imported the
        tracer (the "forkserver" method: safe with numba's threads, and the imports are paid
        once, not per worker), or spawned where that method does not exist; they ignore SIGINT,
        so that Ctrl-C reaches only the scanning process.
    """
    workers = workers or os.cpu_count() or 1
    threads = max(1, (os.cpu_count() or 1) // workers)
    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["tracer.beam", "tracer.scans"])
    else:
        ctx = multiprocessing.get_context("spawn")
    return ProcessPoolExecutor(workers, mp_context=ctx,
                               initializer=_init_worker, initargs=(context, threads))


def _submitter(executor, context, own_pool):
    """A function (index, voltages) -> Future that hands the context over once per worker."""
    if own_pool:
        return lambda i, v: executor.submit(_task_in_worker, i, v)
    client = getattr(executor, "_client", None)
    if client is not None and hasattr(client, "scatter"):   # a dask.distributed client's executor
        shared = client.scatter(context, broadcast=True, hash=False)
        return lambda i, v: executor.submit(_task, shared, i, v)
    return lambda i, v: executor.submit(_task, context, i, v)


# --------------------------------------------------------------------------------------------
# Durable rows


def _number(value) -> str:
    return repr(float(value))


class Rows:
    """The finished rows of a scan, kept durably in ``scan.csv`` (module notes).

    Parameters
    ----------
    folder : pathlib.Path or None
        The output folder; None keeps the rows in memory only.
    digest : str
        The config hash.
    header : sequence of str
        The table's columns (voltages, then figures).
    sets : float64[n_sets, n_names]
        The voltage sets, to check the rows read back against.
    """

    def __init__(self, folder, digest, header, sets):
        self.folder, self.digest, self.header, self.sets = folder, digest, tuple(header), sets
        self.done = {}
        self.resumed = 0
        self._handle = None
        if folder is None:
            return
        folder.mkdir(parents=True, exist_ok=True)
        self.csv = folder / CSV_NAME
        self.h5 = folder / H5_NAME
        lines = self._read()
        if lines is None:
            self._start_fresh()
        else:
            self._resume(lines)
        self._handle = open(self.csv, "a", encoding="utf-8", newline="")

    def _read(self):
        """Lines of an existing table of this config, or None (and archive any other table)."""
        if not self.csv.exists():
            return None
        lines = self.csv.read_bytes().decode("utf-8", errors="replace").split("\n")
        if lines[:2] == self._prologue().split("\n")[:2]:
            return lines
        first = lines[0]
        old = first.removeprefix(_FIRST_LINE)[:12] if first.startswith(_FIRST_LINE) else "unknown"
        for path in (self.csv, self.h5):
            if path.exists():
                os.replace(path, path.with_name(f"{path.stem}.{old}{path.suffix}"))
        return None

    def _prologue(self):
        return f"{_FIRST_LINE}{self.digest}\n" + ",".join(("set",) + self.header) + "\n"

    def _start_fresh(self):
        from tracer.store.atomic import atomic_path

        with atomic_path(self.csv) as tmp:
            _write_synced(tmp, self._prologue())

    def _resume(self, lines):
        """Take the valid rows; rewrite the file atomically when a line is cut short or bad.

        Only lines ended by a newline count: the text after the last newline (empty for an intact
        file) is what a killed process may have left half written.
        """
        clean = lines[-1] == ""
        for line in lines[2:-1]:
            row = self._parse(line)
            if row is None or row[0] in self.done:
                clean = False
                continue
            self.done[row[0]] = row[1]
        self.resumed = len(self.done)
        if not clean:
            from tracer.store.atomic import atomic_path

            with atomic_path(self.csv) as tmp:
                _write_synced(tmp, self._prologue() + "".join(
                    self._line(i, v) for i, v in sorted(self.done.items())))

    def _parse(self, line):
        fields = line.split(",")
        if len(fields) != len(self.header) + 1:
            return None
        try:
            index, values = int(fields[0]), np.array([float(f) for f in fields[1:]])
        except ValueError:
            return None
        k = self.sets.shape[1]
        if not 0 <= index < len(self.sets) or not np.array_equal(values[:k], self.sets[index]):
            return None
        return index, values

    def _line(self, index, values):
        return ",".join([str(index)] + [_number(v) for v in values]) + "\n"

    def add(self, index, values):
        """Record a finished row: appended, flushed and fsynced before returning."""
        self.done[index] = values
        if self._handle is not None:
            self._handle.write(self._line(index, values))
            self._handle.flush()
            os.fsync(self._handle.fileno())

    def table(self):
        """The finished rows in scan order, as a structured array, and their set indices."""
        index = np.array(sorted(self.done), dtype=np.int64)
        table = np.zeros(len(index), dtype=[(c, np.float64) for c in self.header])
        if len(index):
            values = np.array([self.done[i] for i in index])
            for k, c in enumerate(self.header):
                table[c] = values[:, k]
        return table, index

    def write_h5(self):
        """Rewrite ``scan.h5`` atomically with the finished rows."""
        if self.folder is None:
            return
        import h5py

        from tracer.store.atomic import atomic_path

        table, index = self.table()
        with atomic_path(self.h5) as tmp, h5py.File(tmp, "w") as f:
            group = f.create_group(H5_GROUP)
            group.attrs["format"] = TABLE_FORMAT
            group.attrs["config_sha256"] = self.digest
            group.attrs["sets_total"] = len(self.sets)
            group.attrs["columns"] = json.dumps(list(self.header))
            group.create_dataset("table", data=table)
            group.create_dataset("set", data=index)

    def close(self):
        if self._handle is not None:
            self._handle.close()
            self._handle = None


def _write_synced(path, text):
    with open(path, "w", encoding="utf-8", newline="") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())


def read_h5(path):
    """The table, set indices and config hash of a ``scan.h5``.

    Returns
    -------
    table : numpy structured array
    index : int64[n]
    digest : str
    """
    import h5py

    with h5py.File(path, "r") as f:
        group = f[H5_GROUP]
        return group["table"][()], group["set"][()], str(group.attrs["config_sha256"])


# --------------------------------------------------------------------------------------------
# The scan


@dataclass(frozen=True)
class ScanResult:
    """The figures of every voltage set of a scan.

    Attributes
    ----------
    table : numpy structured array
        One row per voltage set, in scan order: ``<electrode>_V`` per varied electrode, then the
        figures (module notes for the names).
    names : tuple of str
        The varied electrodes.
    config_hash : str
        :func:`config_hash` of the scan.
    resumed : int
        Rows read back from an earlier run instead of computed.
    elapsed_s : float
        Wall time of this run.
    trace_s : float
        Seconds spent in ``tracer.beam.trace`` summed over the sets computed in this run (in
        whichever process ran them).
    files : tuple of pathlib.Path
        The table files written (``scan.csv``, ``scan.h5``), empty without ``out``.
    """

    table: np.ndarray
    names: tuple
    config_hash: str
    resumed: int
    elapsed_s: float
    trace_s: float
    files: tuple = ()

    @property
    def figures(self) -> tuple:
        """The figure columns (every column after the voltages)."""
        return self.table.dtype.names[len(self.names):]


def scan(setup, maps=None, executor=None, *, out=None, workers=None, progress=None,
         cache_dir=None, h5_interval_s=30.0):
    """Trace every beam at every voltage set of the setup's ``[scan]`` and measure the figures.

    Parameters
    ----------
    setup : tracer.config.Setup
    maps : tracer.fieldmap.BasisMaps, optional
        The setup's basis maps (solved, or loaded from ``cache_dir``, when not given).
    executor : concurrent.futures.Executor, optional
        Runs the sets.  A ``dask.distributed`` client's executor (``client.get_executor()``) gets
        the maps once per worker by a broadcast scatter; any other executor gets them with every
        set (cheap for threads).  Default: :func:`process_pool` with ``workers`` processes, whose
        initializer hands each worker the maps once; with ``workers=1``, no executor: the sets run
        one after another in this process.
    out : str or os.PathLike, optional
        Folder for ``scan.csv`` and ``scan.h5``; finished sets found there are skipped.  None: no
        files.
    workers : int, optional
        Processes of the default pool (default: the machine's CPU count).
    progress : callable, optional
        ``progress(done, total)`` after each finished set (and once at the start).
    cache_dir : str or os.PathLike, optional
        Cache of basis maps used when ``maps`` is None.
    h5_interval_s : float
        Longest time between rewrites of ``scan.h5`` while scanning.

    Returns
    -------
    ScanResult

    Raises
    ------
    KeyboardInterrupt
        After an interrupt (also one raised by ``progress``): the finished rows are kept in the files
        and the sets not started are cancelled; running again continues where it stopped.
    """
    t_start = time.perf_counter()
    names, sets = voltage_sets(setup)
    if maps is None:
        from tracer.pipeline import solve

        maps = solve(setup, cache_dir=cache_dir)
    elif maps.geometry_hash != setup.geometry_hash():
        raise ValueError("the basis maps were solved for a different geometry than the setup's")
    context = Context.of(setup, maps, names)
    header = tuple(f"{n}_V" for n in names) + context.columns
    digest = config_hash(setup, names, sets)
    rows = Rows(None if out is None else Path(out), digest, header, sets)
    todo = [i for i in range(len(sets)) if i not in rows.done]
    trace_s = 0.0
    last_h5 = time.monotonic()

    def finish(index, figures, seconds):
        nonlocal trace_s, last_h5
        rows.add(index, np.concatenate([sets[index], figures]))
        trace_s += seconds
        if time.monotonic() - last_h5 > h5_interval_s:
            rows.write_h5()
            last_h5 = time.monotonic()
        if progress:
            progress(len(rows.done), len(sets))

    try:
        if progress:
            progress(len(rows.done), len(sets))
        if executor is None and workers == 1:
            for i in todo:
                finish(i, *context.run(sets[i]))
        elif todo:
            _run_all(executor, context, workers, sets, todo, finish)
    finally:
        rows.close()
        rows.write_h5()
    table, _ = rows.table()
    files = () if out is None else (rows.csv, rows.h5)
    return ScanResult(table, names, digest, rows.resumed, time.perf_counter() - t_start, trace_s, files)


def _while_workers_start(futures, context, sets, todo, finish):
    """Run sets in this process, from the end of the queue, until a worker delivers its first one.

    A set taken here is withdrawn from the pool first (a queued future can be cancelled), so every
    set still runs exactly once; the rows are the same whichever process runs them.  Returns the
    futures left to the pool.
    """
    delivered = threading.Event()
    for f in futures:
        f.add_done_callback(lambda f: f.cancelled() or delivered.set())
    taken = set()
    for k in range(len(futures) - 1, -1, -1):
        if delivered.is_set() or not futures[k].cancel():
            break
        taken.add(k)
        finish(*_task(context, todo[k], sets[todo[k]]))
    return [f for k, f in enumerate(futures) if k not in taken]


def _run_all(executor, context, workers, sets, todo, finish):
    """Submit the sets to an executor and record each as it completes; cancel the rest on any exit."""
    own = executor is None
    if own:
        executor = process_pool(context, min(workers or os.cpu_count() or 1, len(todo)))
    submit = _submitter(executor, context, own)
    futures = [submit(i, sets[i]) for i in todo]
    try:
        if own:
            futures = _while_workers_start(futures, context, sets, todo, finish)
        for future in as_completed(futures):
            finish(*future.result())
    finally:
        for future in futures:
            future.cancel()
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
