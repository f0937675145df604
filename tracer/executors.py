"""Running voltage sets on any executor: the work of one set, and the process pool.

A :class:`Context` holds everything one voltage set needs (the basis maps, the beams, the planes,
the trace options) and measures a set: the maps combined (no new Laplace solve), every
beam traced, the figures of :func:`tracer.measure.row`.  Sets are independent and deterministic, so
a table is the same, bit for bit, whichever executor ran them.  :func:`run_sets` hands them to any
:class:`concurrent.futures.Executor` and reports each as it completes: its own process pool
(:func:`process_pool`, whose workers get the context once), a ``dask.distributed`` client's
executor (:func:`cluster_executor`; the context is scattered once to every worker), or any other
(the context goes with every set).  With its own pool, the calling process runs sets from the end
of the queue until the workers deliver their first, so the pool's start-up is not idle time.
Whatever the executor does (completes sets in any order, cancels them, raises in a worker or in
``submit``), a scan finishes or stops with an error, and keeps the row of every set finished by
then (:func:`run_sets`).
"""

from __future__ import annotations

import contextlib
import multiprocessing
import multiprocessing.connection
import os
import queue
import signal
import threading
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from tracer import measure

_TRACE_LOCK = threading.Lock()   # one trace at a time per process: the kernel is itself parallel
_WORKER = {}                     # the context of a pool worker, set once by its initializer


class ClusterError(Exception):
    """No executor at a scheduler's address: dask.distributed is missing or the scheduler does not answer."""


class ClusterLost(Exception):
    """The executor cancelled sets it had taken: a cluster whose workers (and the maps scattered to
    them) are gone."""


@contextlib.contextmanager
def cluster_executor(address):
    """The executor of a ``dask.distributed`` client connected to the scheduler at ``address``.

    A context manager; the client is closed on leaving it.

    Raises
    ------
    ClusterError
        On entering, when dask.distributed is not installed or the scheduler cannot be reached
        (within 20 s).
    """
    try:
        from distributed import Client
    except ImportError:
        raise ClusterError("needs dask.distributed (tracer-optics' cluster extra): "
                           "pip install 'dask[distributed]'") from None
    try:
        client = Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise ClusterError(f"{address}: cannot connect ({exc})") from None
    with client:
        yield client.get_executor()


@dataclass(frozen=True, eq=False)
class Context:
    """Everything a worker needs to measure voltage sets: sent once per worker.

    Attributes
    ----------
    maps : tracer.fieldmap.BasisMaps
    beams, planes : tuple
        The setup's beams and detector planes.
    names : tuple of str
        The varied electrodes, coils and waveform parameters, in the order of a set's values.
    rtol, max_time_s : float
        Trace options.
    coarse : tracer.fieldmap.BasisMaps or None
        The maps on twice the cell: each figure then gets its grid error, a column
        :func:`tracer.measure.grid_column` (``spot_rms_grid_m``) after all the figures (:func:`tracer.errorbars.row_errors`).
    rays, safety : int, float or None
        Rays traced again through the coarse maps, and the GCI's safety factor (None: 3).
    drives : dict or None
        With voltages that change in time, what each electrode carries (``Setup.drives``): a set's
        voltages then set the constant voltages and the waveforms' DC parts, its waveform
        parameters (``parameters``) the waveforms' parts, and the beams are traced through the
        maps grouped by waveform; None when every voltage is constant.
    time_zero_s : float or None
        The clock time arrival times count from for the resolving power (``[trace] time_zero``);
        None: each set's earliest pulse (:func:`tracer.waveforms.first_pulse_s`), else each ray's
        own start.
    parameters : dict
        The varied waveform parameters by name (:func:`tracer.config.waveform_parameter`).
    magnetic : tracer.schema.MagneticSpec
        The setup's magnetic sources, traced with every set at the setup's currents but for the
        varied coils (``currents``).
    currents : tuple of str
        The varied names that are coils: their values are currents (A), combined from the coils'
        unit fields (:func:`tracer.magnetics.units.traced_sources`), not voltages.
    cache_dir : str or os.PathLike or None
        The maps cache, where each process reads the coils' unit fields (None: each samples them).
    grouped : dict
        The grouped maps of the last set measured in this process, by ``id`` of the maps (fine or
        coarse) they were grouped from: the next set reuses what it can of them (:meth:`field_of`).
    """

    maps: object
    beams: tuple
    planes: tuple
    names: tuple
    rtol: float
    max_time_s: float
    coarse: object = None
    rays: int = 256
    safety: float | None = None
    drives: dict | None = None
    time_zero_s: float | None = None
    parameters: dict = field(default_factory=dict)
    magnetic: object = None
    currents: tuple = ()
    cache_dir: object = None
    grouped: dict = field(default_factory=dict, repr=False)

    @classmethod
    def of(cls, setup, maps, names, planes=None, beams=None, coarse=None, cache_dir=None):
        """The context of a setup (planes and beams default to the setup's)."""
        from tracer.config import waveform_parameter

        parameters = {n: waveform_parameter(n) for n in names if "[" in n}
        coils = setup.magnetic.currents()
        return cls(maps, tuple(setup.beams if beams is None else beams),
                   tuple(setup.planes if planes is None else planes), tuple(names),
                   setup.trace.rtol, setup.trace.max_time_s, coarse, setup.grid_error.rays,
                   setup.grid_error.safety, setup.drives() if setup.in_time or parameters else None,
                   setup.trace.time_zero_s, parameters, setup.magnetic, tuple(n for n in names if n in coils),
                   cache_dir)

    @property
    def columns(self):
        figures = measure.columns([b.name for b in self.beams], [p.name for p in self.planes], self.maps.names)
        return figures + (() if self.coarse is None else tuple(measure.grid_column(c) for c in figures))

    def drives_of(self, values):
        """What each electrode carries at one set of ``values`` (by varied name): the voltages set
        constant voltages and waveforms' DC parts, the parameters the waveforms' parts; {} when
        every voltage is constant."""
        if self.drives is None:
            return {}
        from tracer.config import with_parameters
        from tracer.groups import with_voltages

        drives = with_voltages(self.drives, {n: v for n, v in values.items() if n not in self.parameters})
        return with_parameters(drives, {n: values[n] for n in self.parameters})

    def field_of(self, maps, drives, values):
        """The field of one set through ``maps``: combined at the ``values``, or grouped by
        waveform with the set's ``drives`` (:meth:`drives_of`) when voltages change in time, the
        static map or group maps of this worker's previous set through the same maps reused
        where they are the same (:func:`tracer.groups.group_maps`)."""
        if not drives:
            return maps.combine(values)
        from tracer.groups import group_maps

        grouped = group_maps(maps, drives, like=self.grouped.get(id(maps)))
        self.grouped[id(maps)] = grouped
        return grouped

    def run(self, voltages):
        """Measure one set of voltages (and currents, for the varied coils).

        Returns
        -------
        figures : float64[n_columns]
        trace_s : float
            Seconds spent inside ``tracer.beam.trace``.
        """
        from tracer.beam import trace
        from tracer.errorbars import row_errors
        from tracer.magnetics.units import traced_sources
        from tracer.waveforms import first_pulse_s

        values = dict(zip(self.names, (float(v) for v in voltages)))
        amps = {n: values.pop(n) for n in self.currents}
        drives = self.drives_of(values)
        field = self.field_of(self.maps, drives, values)
        coarse = None if self.coarse is None else self.field_of(self.coarse, drives, values)
        time_zero = first_pulse_s(drives.values()) if self.time_zero_s is None else self.time_zero_s
        magnetic, coarse_magnetic = (None if self.magnetic is None or f is None
                                     else traced_sources(self.magnetic, f.grid, amps, self.cache_dir)
                                     for f in (field, coarse))
        figures, errors, trace_s = [], [], 0.0
        for beam in self.beams:
            with _TRACE_LOCK:
                t0 = time.perf_counter()
                run = trace(field, beam, planes=self.planes, rtol=self.rtol, max_time_s=self.max_time_s,
                            time_zero_s=time_zero, magnetic=magnetic)
                if coarse is not None:
                    errors += row_errors(run, lambda starts, b=beam: trace(
                        coarse, b, planes=self.planes, rtol=self.rtol, max_time_s=self.max_time_s,
                        starts=starts, time_zero_s=time_zero, magnetic=coarse_magnetic),
                        self.maps.names, self.rays, self.safety)
                trace_s += time.perf_counter() - t0
            figures += measure.row(run, self.maps.names)
        return np.array(figures + errors, dtype=np.float64), trace_s


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
        ctx.set_forkserver_preload(["tracer.beam", "tracer.executors"])
    else:
        ctx = multiprocessing.get_context("spawn")
    return ProcessPoolExecutor(workers, mp_context=ctx,
                               initializer=_init_worker, initargs=(context, threads))


def refuse_forking_pool(executor) -> None:
    """Refuse, before any work, a process pool that would fork its workers from this process.

    numba's parallel kernels leave threads (GNU OpenMP's among them) in a process that has traced;
    a child forked from it hangs or dies ("fork() called from a process already using GNU
    OpenMP") and the pool breaks.  A pool whose workers are spawned or forked from a fresh server
    ("spawn", "forkserver") is safe, as is every executor that is not a process pool.

    Raises
    ------
    ValueError
        For a :class:`concurrent.futures.ProcessPoolExecutor` with the "fork" start method (the
        default of Python before 3.14 on Linux), saying how to make one that works.
    """
    context = getattr(executor, "_mp_context", None)
    if isinstance(executor, ProcessPoolExecutor) and context is not None \
            and context.get_start_method() == "fork":
        raise ValueError(
            "executor: a ProcessPoolExecutor that forks its workers cannot run tracer's parallel "
            "kernels; make it with mp_context=multiprocessing.get_context('forkserver') (or "
            "'spawn'), or pass no executor for tracer's own pool")


_CANCELLED = ("the executor cancelled voltage sets it had taken (a cluster that lost its workers, or an "
              "executor shut down); finished rows are kept, rerun to resume")


def _cluster(executor):
    """The dask.distributed client of a client's executor, else None."""
    client = getattr(executor, "_client", None)
    return client if client is not None and hasattr(client, "scatter") else None


def _submitter(executor, context, own_pool):
    """A function (index, voltages) -> Future that hands the context over once per worker."""
    if own_pool:
        return lambda i, v: executor.submit(_task_in_worker, i, v)
    client = _cluster(executor)
    if client is not None:
        shared = client.scatter(context, broadcast=True, hash=False)
        return lambda i, v: executor.submit(_task, shared, i, v)
    return lambda i, v: executor.submit(_task, context, i, v)


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


def run_sets(executor, context, workers, sets, todo, finish):
    """Submit voltage sets to an executor and hand each to ``finish`` as it completes; cancel the
    rest on any exit (also an interrupt).

    Any :class:`concurrent.futures.Executor` serves: futures may complete in any order, or at
    once inside ``submit``.  The scan never waits on a future the executor cancelled (a
    ``ThreadPoolExecutor`` shut down with ``cancel_futures=True`` cancels futures without
    notifying their waiters).  However the scan stops (a set raising, the executor refusing a
    submit or cancelling a set, Ctrl-C), every set finished by then is handed to ``finish``
    first, so its row is kept.  Sets still running on an executor of the caller are not waited
    for (their rows are computed again on resuming); an own pool is shut down, its running sets
    finished, and their rows kept too.

    Parameters
    ----------
    executor : concurrent.futures.Executor or None
        None: an own :func:`process_pool` of ``workers`` processes (default the CPU count), shut
        down at the end.
    context : Context
    workers : int or None
    sets : float64[n_sets, n_names]
        The voltage sets.
    todo : list of int
        The indices of the sets to run.
    finish : callable
        ``finish(index, figures, trace_s)`` for each set, in completion order, in this process.

    Raises
    ------
    ClusterLost
        When the executor cancels a set this function did not cancel (a dask cluster does when
        every worker holding the scattered context has died; any executor shut down with its
        queue cancelled); the finished sets were handed to ``finish`` before.
    Exception
        A set's own error (raised in a worker, with a note naming the set), or the executor's
        refusal of a submit, as it was raised.
    """
    own = executor is None
    if own:
        executor = process_pool(context, min(workers or os.cpu_count() or 1, len(todo)))
    submit = _submitter(executor, context, own)
    ended = queue.SimpleQueue()           # every future as it ends: done, failed or cancelled
    futures, handed, stop = {}, set(), None
    try:
        for i in todo:
            future = submit(i, sets[i])
            futures[future] = i
            future.add_done_callback(ended.put)
        left = set(futures)
        if own:
            left = set(_while_workers_start(list(futures), context, sets, todo, finish))
        while left:
            future = _next(ended)
            if future not in left:        # a set taken back and run in this process
                continue
            left.discard(future)
            if future.cancelled():
                raise ClusterLost(_CANCELLED)
            _hand(future, futures[future], sets, finish)
            handed.add(future)
    except BaseException as exc:
        stop = exc
        raise
    finally:
        for future in futures:
            future.cancel()
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
        if stop is not None:
            _hand_finished(futures, handed, finish, stop)


def _next(ended):
    """The next future to end (waiting in short slices, so that Ctrl-C is taken at once)."""
    while True:
        try:
            return ended.get(timeout=0.5)
        except queue.Empty:
            continue


def _hand(future, index, sets, finish):
    """Hand a finished set to ``finish``; a set's own error gets a note naming the set."""
    try:
        result = future.result()
    except Exception as exc:
        exc.add_note(f"in voltage set {index} ({', '.join(f'{v:g}' for v in sets[index])})")
        raise
    finish(*result)


def _hand_finished(futures, handed, finish, stop):
    """On stopping: hand every set that finished without error and is not handed yet, so its row
    is kept; a failure to keep them is noted on the exception that stops the scan."""
    for future in futures:
        if future in handed or not future.done() or future.cancelled() or future.exception() is not None:
            continue
        try:
            finish(*future.result())
        except Exception as exc:
            stop.add_note(f"the finished rows could not all be kept: {type(exc).__name__}: {exc}")
            return
        handed.add(future)
