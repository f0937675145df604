"""Voltage scans: many voltage sets through the same basis maps, on any executor, durably.

A scan is a list of voltage sets (the product of per-electrode ranges, or the rows of a CSV file;
:func:`voltage_sets`); a set may also give coil currents, combined from the coils' unit fields as
voltages are from the basis maps, and waveform parameters (a pulse's delay, a sinusoid's phase).
Every set is measured by :class:`tracer.executors.Context` (the maps
combined, every beam traced, the figures of :func:`tracer.measure.row`) on any
:class:`concurrent.futures.Executor` (:func:`tracer.executors.run_sets`); the result is the same,
bit for bit, whichever ran them.  Each finished row goes to the scan's journal
(:class:`tracer.journal.Rows`) as it completes.

The table's columns are the varied voltages, ``<electrode>_V``, and currents, ``<coil>_A``, then the figures of each beam
(:func:`tracer.measure.columns`; the module notes of :mod:`tracer.measure` name them and say which
crossings of a plane count).  With ``[grid_error] scan_rows = true`` the maps are solved once more
on twice the cell and every figure gets its grid error, a column :func:`tracer.measure.grid_column` (``spot_rms_grid_m``) after the figures
(two grids, Roache's GCI; :func:`tracer.errorbars.row_errors`): each set then traces
``[grid_error] rays`` rays of each beam again through the coarse maps.

Files (when ``out`` is given)
-----------------------------
``scan.journal`` gets each finished set as it completes; ``scan.csv`` (header first, rows in scan
order) and ``scan.h5`` are rewritten atomically at least every ``h5_interval_s`` seconds, on an
interrupt and at the end (:mod:`tracer.journal` describes the three).  Running a scan again skips
the finished sets found in ``scan.journal``.  The folder is locked for the whole scan
(:func:`tracer.store.atomic.locked_folder`, as the command line locks ``--out``): a second scan or
command writing there stops at once with :class:`tracer.store.atomic.FolderBusy`.  When the config hash
(:func:`tracer.journal.config_hash`) differs, the old files are set aside (never over an earlier
archive) and the config's own archived journal, if any, is resumed; else a fresh table starts.
"""

from __future__ import annotations

import csv
import itertools
import os
import time
from collections.abc import Callable
from concurrent.futures import Executor
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from tracer import footprint
from tracer.bounds import BOUNDS
from tracer.config import tied_message, waveform_parameter, with_parameters
from tracer.display import Shown, listing, number
from tracer.executors import Context, refuse_forking_pool, run_sets
from tracer.geometry import overlapping_electrodes, shape_table
from tracer.journal import CSV_NAME, JOURNAL_NAME, Rows, config_hash, read_csv
from tracer.schema import ConfigError, Setup, scan_column

if TYPE_CHECKING:
    from tracer.fieldmap import BasisMaps


def voltage_sets(setup):
    """The voltage sets of a setup's ``[scan]``.

    Parameters
    ----------
    setup : tracer.config.Setup
        With ``setup.scan`` given: ranges (the product, the first range varying slowest, each range
        ``numpy.linspace(from, to, count)``) or a CSV file of ``<electrode>_V`` and ``<coil>_A``
        columns and waveform parameters (``<electrode>.pulse[i].<key>``, named and in units as
        ``[scan]`` keys name them).

    Returns
    -------
    names : tuple of str
        The varied electrodes, coils and waveform parameters.
    sets : float64[n_sets, n_names]
        One row per set: volts, amperes for a coil, a waveform parameter in its key's unit.

    Raises
    ------
    tracer.config.ConfigError
        For a setup without ``[scan]``, or a CSV row that is not numbers, has a value outside the
        range of its unit, sets a waveform part its rules refuse, or sets overlapping electrodes
        or coils apart.
    """
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
    columns = [c.strip() for c in rows[0]]
    names = tuple(c if "[" in c else c[:-2] for c in columns)   # the header was checked on load
    where = f"{spec.csv.name!r}"
    try:
        sets = np.array([[float(c) for c in row] for row in rows[1:]], dtype=np.float64)
    except ValueError as error:
        raise ConfigError("scan.csv", f"{where}: a value is not a number ({error})") from None
    if sets.ndim != 2 or sets.shape[1] != len(names) or not len(sets):
        raise ConfigError("scan.csv", f"{where}: every row needs {len(names)} value(s)")
    if not np.isfinite(sets).all():
        raise ConfigError("scan.csv", f"{where}: every value must be a finite number")
    bounds = [BOUNDS["_" + c.rpartition("_")[2]] for c in columns]     # a column's suffix is its unit
    outside = np.argwhere(~np.column_stack([b.admits(sets[:, k]) for k, b in enumerate(bounds)]))
    if outside.size:
        row, column = outside[0]
        raise ConfigError("scan.csv", f"{where} row {row + 2}, column {columns[column]}: "
                                      + bounds[column].problem(float(sets[row, column])))
    _check_parameter_rows(setup, names, sets, where)
    _check_tied_rows(setup, names, sets)
    return names, sets


def _check_parameter_rows(setup, names, sets, where):
    """Refuse a CSV row whose waveform parameters (set together, as a scan sets them) make a part
    its rules refuse."""
    drives = setup.drives()
    parameters = [k for k, n in enumerate(names) if "[" in n]
    for row, values in enumerate(sets[:, parameters] if parameters else ()):
        try:
            with_parameters(drives, {names[k]: float(v) for k, v in zip(parameters, values)}, key=str)
        except ConfigError as error:
            raise ConfigError("scan.csv", f"{where} row {row + 2}, column {error.key}: {error.message}") from None


def _check_tied_rows(setup, names, sets):
    """Refuse CSV rows that set overlapping electrodes (one conductor) to different voltages, or
    overlapping coils (one winding) to different currents, and a column of a waveform parameter of
    either of two overlapping electrodes."""
    electrodes = setup.electrodes
    pairs = overlapping_electrodes(shape_table(electrodes, setup.domain), setup.domain.cell_m)
    settings = setup.voltages() | setup.magnetic.currents()
    tied = [(electrodes[i].name, electrodes[j].name, "electrodes", "V") for i, j in pairs]
    tied += [(a, b, "coils", "A") for a, b in setup.magnetic.overlapping_coils()]
    for a, b, kind, unit in tied:
        varied = next((n for n in names if "[" in n and waveform_parameter(n)[0] in (a, b)), None)
        if varied is not None:
            raise ConfigError("scan.csv", f"{setup.scan.csv.name!r} column {varied}: " + tied_message(
                a, b, f"the file would set {varied!r} for one of them", kind))
        va, vb = (sets[:, names.index(n)] if n in names else np.full(len(sets), settings[n]) for n in (a, b))
        apart = np.flatnonzero(va != vb)
        if apart.size:
            k = apart[0]
            raise ConfigError("scan.csv", f"{setup.scan.csv.name!r} row {k + 2}: " + tied_message(
                a, b, f"the row sets {a!r} to {va[k]:g} {unit} and {b!r} to {vb[k]:g} {unit}", kind))


@dataclass(frozen=True, repr=False)
class ScanResult(Shown):
    """The figures of every voltage set of a scan.

    Attributes
    ----------
    table : numpy structured array
        One row per voltage set, in scan order: ``<electrode>_V`` per varied electrode and
        ``<coil>_A`` per varied coil (:func:`tracer.schema.scan_column`), then the figures
        (:mod:`tracer.measure` names them), then with ``[grid_error] scan_rows`` their grid errors
        (:func:`tracer.measure.grid_column`: ``spot_rms_grid_m``).
    names : tuple of str
        The varied electrodes, coils and waveform parameters.
    config_hash : str
        :func:`tracer.journal.config_hash` of the scan.
    resumed : int
        Rows read back from an earlier run instead of computed.
    elapsed_s : float
        Wall time of this run.
    trace_s : float
        Seconds spent in ``tracer.beam.trace`` summed over the sets computed in this run (in
        whichever process ran them).
    files : tuple of pathlib.Path
        The table files written (``scan.csv``, ``scan.h5``), empty without ``out``.
    coils : tuple of str
        The names among ``names`` that are coils (their currents, amperes).
    moved : tuple of (str, str)
        Files renamed in ``out`` before the scan, ``(from, to)``: another config's journal and
        tables set aside (``scan.journal`` to ``scan.<its hash>.journal``, ...), this config's
        archived ones taken back (:mod:`tracer.journal`).
    """

    table: np.ndarray
    names: tuple
    config_hash: str
    resumed: int
    elapsed_s: float
    trace_s: float
    files: tuple = ()
    coils: tuple = ()
    moved: tuple = ()

    def _facts(self):
        return {"sets": str(len(self.table)), "varied": listing(self.names),
                "figures": listing(self.figures, limit=4), "resumed": str(self.resumed),
                "elapsed": number(self.elapsed_s, "s"), "files": listing(f.name for f in self.files)}

    @property
    def figures(self) -> tuple:
        """The figure columns (every column after the voltages and currents)."""
        return self.table.dtype.names[len(self.names):]

    def smallest(self, figure):
        """The row where a figure is smallest (the first of equals; NaN rows skipped).

        Returns
        -------
        value : float
        voltages : dict of str to float
            The varied electrodes' voltages there (and the varied coils' currents).

        Or None when the figure is NaN in every row.
        """
        values = self.table[figure]
        if not np.isfinite(values).any():
            return None
        k = int(np.nanargmin(values))
        return float(values[k]), {n: float(self.table[scan_column(n, self.coils)][k]) for n in self.names}


def scan(setup: Setup, maps: BasisMaps | None = None, executor: Executor | None = None, *,
         out: str | os.PathLike | None = None, workers: int | None = None,
         progress: Callable[[int, int], object] | None = None,
         cache_dir: str | os.PathLike | None = None, h5_interval_s: float = 30.0) -> ScanResult:
    """Trace every beam at every voltage set of the setup's ``[scan]`` and measure the figures.

    Parameters
    ----------
    setup : tracer.config.Setup
    maps : tracer.fieldmap.BasisMaps, optional
        The setup's basis maps (solved, or loaded from ``cache_dir``, when not given).
    executor : concurrent.futures.Executor, optional
        Runs the sets.  A ``dask.distributed`` client's executor (``client.get_executor()``) gets
        the maps once per worker by a broadcast scatter; any other executor gets them with every
        set (cheap for threads).  Default: :func:`tracer.executors.process_pool` with ``workers``
        processes, whose initializer hands each worker the maps once; with ``workers=1``, no
        executor: the sets run one after another in this process.  A process pool must not
        fork its workers from this process (:func:`tracer.executors.refuse_forking_pool`).
    out : str or os.PathLike, optional
        Folder for ``scan.journal``, ``scan.csv`` and ``scan.h5``; finished sets found there are
        skipped.  It is locked while the scan runs (:func:`tracer.store.atomic.locked_folder`):
        a second scan into it, from this process or another, is refused.  None: no files.
    workers : int, optional
        Processes of the default pool (default: the machine's CPU count).
    progress : callable, optional
        ``progress(done, total)`` over the sets this call computes (sets resumed from ``out`` are
        not counted, so a rate or time left is right), after each finished set and once at the start.
    cache_dir : str or os.PathLike, optional
        Cache of basis maps used when ``maps`` is None, and of the coils' unit fields.
    h5_interval_s : float
        Longest time between rewrites of ``scan.csv`` and ``scan.h5`` while scanning.

    Returns
    -------
    ScanResult

    Raises
    ------
    KeyboardInterrupt
        After an interrupt (also one raised by ``progress``): the finished rows are kept in the files
        and the sets not started are cancelled; running again continues where it stopped.
    ValueError
        For a process pool that forks its workers, before any work.
    tracer.store.atomic.FolderBusy
        When another scan or tracer command (in this process or another) is writing to ``out``,
        before any work: ``out`` is locked for the whole scan, as the command line locks its
        ``--out``, so two scans never write into one folder at once.
    """
    refuse_forking_pool(executor)
    t_start = time.perf_counter()
    if out is None:
        return _scan(setup, maps, executor, None, workers, progress, cache_dir, h5_interval_s, t_start)
    from tracer.pipeline import RUN_FILES
    from tracer.store.atomic import locked_folder

    with locked_folder(out, RUN_FILES):
        return _scan(setup, maps, executor, Path(out), workers, progress, cache_dir, h5_interval_s, t_start)


def _scan(setup, maps, executor, out, workers, progress, cache_dir, h5_interval_s, t_start):
    """The body of :func:`scan`, with ``out`` (when given) locked."""
    footprint.check(setup, scan=True, workers=None if executor is not None else workers or os.cpu_count() or 1)
    names, sets = voltage_sets(setup)
    if maps is None:
        from tracer.pipeline import solve

        maps = solve(setup, cache_dir=cache_dir)
    elif maps.geometry_hash != setup.geometry_hash():
        raise ValueError("the basis maps were solved for a different geometry than the setup's")
    coarse = None
    if setup.grid_error.scan_rows and setup.grid_error.grids > 1:
        from tracer.errorbars import with_cell
        from tracer.pipeline import solve

        coarse = solve(with_cell(setup, 2.0), cache_dir=cache_dir)
    context = Context.of(setup, maps, names, coarse=coarse, cache_dir=cache_dir)
    header = tuple(scan_column(n, context.currents) for n in names) + context.columns
    digest = config_hash(setup, names, sets)
    rows = Rows(out, digest, header, sets)
    todo = [i for i in range(len(sets)) if i not in rows.done]
    trace_s = 0.0
    last_h5 = time.monotonic()

    def finish(index, figures, seconds):
        nonlocal trace_s, last_h5
        rows.add(index, np.concatenate([sets[index], figures]))
        trace_s += seconds
        if time.monotonic() - last_h5 > h5_interval_s:
            rows.write_tables()
            last_h5 = time.monotonic()
        if progress:
            progress(len(rows.done) - rows.resumed, len(todo))

    try:
        if progress:
            progress(0, len(todo))
        if executor is None and workers == 1:
            for i in todo:
                finish(i, *context.run(sets[i]))
        elif todo:
            run_sets(executor, context, workers, sets, todo, finish)
    finally:
        rows.close()
        rows.write_tables()
    table, _ = rows.table()
    files = () if out is None else (rows.csv, rows.h5)
    return ScanResult(table, names, digest, rows.resumed, time.perf_counter() - t_start, trace_s, files,
                      context.currents, tuple(rows.moved))


def read_scan(path: str | os.PathLike) -> ScanResult:
    """The table of an earlier scan, from its output folder (its ``scan.journal``, which holds every
    finished set even after a kill, else its ``scan.csv``) or a ``scan.csv`` or ``scan.journal``.

    Every finished row is read back bit for bit; the varied names are the leading ``<name>_V``
    (voltages), ``<coil>_A`` (currents) and ``<electrode>.<part>[i].<key>`` (waveform parameters)
    columns.  ``resumed`` is the number of rows, and the times are 0 (they were not recorded).

    Raises
    ------
    tracer.store.StoreError
        When there is no readable scan table there.
    """
    path = Path(path)
    if path.is_dir():
        csv_path = path / JOURNAL_NAME if (path / JOURNAL_NAME).is_file() else path / CSV_NAME
    else:
        csv_path = path
    table, _, digest = read_csv(csv_path)
    columns = table.dtype.names
    k = next((i for i, c in enumerate(columns) if not (c.endswith(("_V", "_A")) or "[" in c)), len(columns))
    names = tuple(c if "[" in c else c[:-2] for c in columns[:k])
    coils = tuple(c[:-2] for c in columns[:k] if "[" not in c and c.endswith("_A"))
    return ScanResult(table, names, digest, len(table), 0.0, 0.0, (csv_path,), coils)
