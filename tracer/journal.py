"""The durable record of a scan: its finished rows in ``scan.journal``, ``scan.csv`` and ``scan.h5``.

``scan.journal``
    One line per finished set, appended, flushed and fsynced as each set completes (in completion
    order), after a first line ``# tracer scan journal; config sha256 <hash>`` and a header row
    ``set,<columns>`` (``set`` is the set's index in the scan order).  This is what a scan resumes
    from; nothing finished is lost when the process is killed.
``scan.csv``
    The table to read: the header row ``set,<columns>`` first, then the finished rows in scan
    order, as in the journal; no comment line, so any CSV reader takes it as it is.  Rewritten
    atomically with ``scan.h5``.
``scan.h5``
    The finished rows in scan order (``tracer/scan/table``, with their indices in
    ``tracer/scan/set``; the attribute ``columns`` names the columns and ``units`` gives each
    column's unit, "" for a bare one) and the config hash (attribute ``config_sha256``), rewritten atomically
    (temporary file renamed into place) when asked (:meth:`Rows.write_tables`): at least every
    ``h5_interval_s`` seconds of a scan, on an interrupt and at the end.  After a kill, the two
    tables may lack the last sets; the journal has them and the next run rewrites both.

The three files give the figures in landings.csv's units, each column's unit its name's suffix
(:func:`tracer.measure.file_column`): lengths in mm (``spot_rms_mm``), times in ns
(``tof_mean_ns``), angles in mrad (``divergence_x_mrad``), energies in eV, voltages in V, currents
in A; shares of the rays and ratios bare.  A scan's own table (``ScanResult.table``) is SI, as
the rest of the Python API (``spot_rms_m``).  A value is written as the shortest decimal that reads
back as the SI float (Python's ``repr``) with its decimal point moved (1.2345e-05 m is 0.012345
mm), so moving the point back reads every row bit for bit as it was computed.  The files of an
earlier tracer, in SI units (``spot_rms_m``), are read and resumed as they are; a resumed journal
is rewritten in these units.

Opening the journal of a folder again reads ``scan.journal`` and keeps the finished sets; a last
line cut short by a killed process is dropped.  (A folder of an earlier tracer, whose ``scan.csv``
was the journal, starting with the comment line, is read as one.)  The config hash
(:func:`config_hash`) covers everything the figures depend on; when it differs, the old files are
renamed to ``scan.<old hash>.journal`` / ``.csv`` / ``.h5`` and a fresh table starts, so rows of
different configs are never mixed.  An archive is never overwritten: when ``scan.<old hash>.*``
is taken, the files go to ``scan.<old hash>.2.*``, ``.3.*`` and on.  A config whose own archive is
there (``scan.<its hash>.journal``) takes it back as ``scan.journal`` and resumes it, so switching
configs back and forth in one folder loses no row of either.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import itertools
import json
import math
import os
from decimal import Decimal, InvalidOperation
from pathlib import Path

import numpy as np

from tracer import __version__
from tracer.bounds import BOUNDS
from tracer.measure import FILE_UNITS, SCAN_UNITS, file_column, si_column
from tracer.store.atomic import atomic_path

TABLE_FORMAT = "tracer-scan-1"
CSV_NAME = "scan.csv"
JOURNAL_NAME = "scan.journal"
H5_NAME = "scan.h5"
H5_GROUP = "tracer/scan"
_FIRST_LINE = "# tracer scan journal; config sha256 "
_OLD_FIRST_LINE = "# tracer scan table; config sha256 "
"""The first line of a journal written as ``scan.csv`` by an earlier tracer."""


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

    The geometry (``Setup.geometry_hash``), every electrode voltage, the magnetic sources
    (``MagneticSpec.digest``), the beams (a rays file by its content), the planes, the trace options that change results (``rtol``, ``max_time_s``), the
    varied electrodes, the voltage sets (exact floats), the table format and the tracer version;
    with grid errors per row, their rays and safety factor.
    Title, paths, plots and the ``[tune]``, ``[gun]``, ``[optics]`` sections are left out.
    """
    payload = {
        "format": TABLE_FORMAT, "version": __version__, "geometry": setup.geometry_hash(),
        "voltages": setup.voltages(), "beams": _plain(setup.beams), "planes": _plain(setup.planes),
        "rtol": setup.trace.rtol, "max_time_s": setup.trace.max_time_s, "names": list(names),
        "sets": np.ascontiguousarray(sets, dtype=np.float64).tobytes().hex(),
    }
    if setup.magnetic:                                # magnetic sources (absent: the hash as before)
        payload["magnetic"] = setup.magnetic.digest()
    spec = setup.grid_error
    if spec.scan_rows and spec.grids > 1:            # grid error columns (absent: the hash as before)
        payload["grid_error"] = [spec.rays, spec.safety]
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


def _text(value, power) -> str:
    """A value in a file's unit: the shortest decimal that reads back as the SI float (``repr``)
    with its point moved ``power`` places (exact); without a power, and for NaN and infinities,
    ``repr`` itself."""
    value = float(value)
    if power == 0 or not math.isfinite(value):
        return repr(value)
    moved = Decimal(repr(value)).scaleb(power)
    return format(moved, "f" if -6 <= moved.adjusted() < 16 else "e")


def _value(text, power) -> float:
    """The SI float of a file's number given in a unit ``power`` places of ten above SI (the
    inverse of :func:`_text`, bit for bit).

    Raises
    ------
    ValueError
        When the text is not a number.
    """
    if power == 0:
        return float(text)
    try:
        return float(Decimal(text.strip()).scaleb(-power))
    except InvalidOperation:
        raise ValueError(f"not a number: {text!r}") from None


_UNITS = {u for _, u, _ in FILE_UNITS} | set(SCAN_UNITS) | {k for k in BOUNDS if k.startswith("_")}


def _unit(column) -> str:
    """The unit a files' column is given in, from its name's suffix ("" for a bare one)."""
    suffix = "_" + column.rpartition("_")[2]
    return suffix[1:] if "_" in column and suffix in _UNITS else ""


class Rows:
    """The finished rows of a scan, kept durably in ``scan.journal`` (module notes).

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
        self.file_header = tuple(file_column(c)[0] for c in self.header)
        self.powers = tuple(file_column(c)[1] for c in self.header)
        self.done = {}
        self._lines = {}
        self.resumed = 0
        self.moved = []
        self._handle = None
        if folder is None:
            return
        folder.mkdir(parents=True, exist_ok=True)
        self.journal = folder / JOURNAL_NAME
        self.csv = folder / CSV_NAME
        self.h5 = folder / H5_NAME
        _adopt_old_journal(folder)
        found = self._read()
        if found is None:
            self._start_fresh()
        else:
            self._resume(*found)
        self._handle = open(self.journal, "ab", buffering=0)   # unbuffered: a failed write is not retried on closing

    def _read(self):
        """Lines of an existing journal of this config and the powers of ten of its columns, or None.

        The files of another config (or tables without a journal) are set aside first; this
        config's own archive, when there is one, is then taken back (module notes)."""
        if self.journal.exists():
            lines = self.journal.read_bytes().decode("utf-8", errors="replace").split("\n")
            if self._layout(lines) is not None:
                return lines, self._layout(lines)
            first = lines[0]
            self._set_aside(first.removeprefix(_FIRST_LINE)[:12] if first.startswith(_FIRST_LINE) else "unknown")
        elif self.csv.exists() or self.h5.exists():
            self._set_aside("unknown")
        for stem in _archive_stems(self.digest[:12]):
            if not self.journal.with_name(f"{stem}.journal").exists():
                return None
            lines = self.journal.with_name(f"{stem}.journal").read_bytes().decode("utf-8", errors="replace").split("\n")
            if self._layout(lines) is not None:
                for path in (self.journal, self.csv, self.h5):
                    with contextlib.suppress(FileNotFoundError):
                        self._move(path.with_name(f"{stem}{path.suffix}"), path)
                return lines, self._layout(lines)
        return None

    def _layout(self, lines):
        """The powers of ten of a journal's columns when its first two lines are this config's (its
        hash, and its columns in the files' units or, written by an earlier tracer, in SI); else None."""
        if lines[:1] != [f"{_FIRST_LINE}{self.digest}"] or len(lines) < 2:
            return None
        if lines[1] == ",".join(("set",) + self.file_header):
            return self.powers
        return (0,) * len(self.header) if lines[1] == ",".join(("set",) + self.header) else None

    def _set_aside(self, tag):
        """Move the journal and tables to the first archive names of ``tag`` that none of them
        has yet (the folder is locked by the command line: no other writer races for them)."""
        files = (self.journal, self.csv, self.h5)
        stem = next(s for s in _archive_stems(tag)
                    if not any(p.with_name(f"{s}{p.suffix}").exists() for p in files))
        for path in files:
            if path.exists():
                self._move(path, path.with_name(f"{stem}{path.suffix}"))

    def _move(self, source, target):
        os.replace(source, target)
        self.moved.append((source.name, target.name))

    def _prologue(self):
        return f"{_FIRST_LINE}{self.digest}\n" + self._header()

    def _header(self):
        return ",".join(("set",) + self.file_header) + "\n"

    def _start_fresh(self):
        with atomic_path(self.journal) as tmp:
            _write_synced(tmp, self._prologue())

    def _resume(self, lines, powers):
        """Take the valid rows; rewrite the file atomically when a line is cut short or bad, or
        when it gives the figures in SI units (an earlier tracer's).

        Only lines ended by a newline count: the text after the last newline (empty for an intact
        file) is what a killed process may have left half written.
        """
        clean = lines[-1] == "" and powers == self.powers
        for line in lines[2:-1]:
            row = self._parse(line, powers)
            if row is None or row[0] in self.done:
                clean = False
                continue
            self.done[row[0]] = row[1]
            self._lines[row[0]] = self._line(*row)
        self.resumed = len(self.done)
        if not clean:
            with atomic_path(self.journal) as tmp:
                _write_synced(tmp, self._prologue() + "".join(self._lines[i] for i in sorted(self.done)))

    def _parse(self, line, powers):
        row = _parse_line(line, powers)
        if row is None:
            return None
        index, values = row
        k = self.sets.shape[1]
        if not 0 <= index < len(self.sets) or not np.array_equal(values[:k], self.sets[index]):
            return None
        return row

    def _line(self, index, values):
        return ",".join([str(index)] + [_text(v, p) for v, p in zip(values, self.powers)]) + "\n"

    def add(self, index, values):
        """Record a finished row: appended, flushed and fsynced before returning.

        Raises
        ------
        OSError
            When the row cannot be written (a full disk: ``filename`` is ``scan.journal``).  The rows
            recorded before stay in the file; a part of this one is dropped when it is read back.
        """
        self.done[index] = values
        self._lines[index] = self._line(index, values)
        if self._handle is not None:
            line = memoryview(self._lines[index].encode("utf-8"))
            try:
                while line:
                    line = line[self._handle.write(line):]
                os.fsync(self._handle.fileno())
            except OSError as exc:
                raise OSError(exc.errno, exc.strerror, str(self.journal)) from None

    def table(self):
        """The finished rows in scan order, as a structured array (SI), and their set indices."""
        return _as_table(self.header, self.done)

    def write_tables(self):
        """Rewrite ``scan.csv`` and ``scan.h5`` atomically with the finished rows, in scan order, in
        the files' units (module notes)."""
        if self.folder is None:
            return
        from tracer.store.hdf5 import new_file

        lines = [self._lines[i] for i in sorted(self.done)]
        with atomic_path(self.csv) as tmp:
            _write_synced(tmp, self._header() + "".join(lines))
        table, index = _as_table(self.file_header, {int(line.partition(",")[0]): np.array(
            line.rstrip("\n").split(",")[1:], dtype=float) for line in lines})
        with new_file(self.h5) as f:
            group = f.create_group(H5_GROUP)
            group.attrs["format"] = TABLE_FORMAT
            group.attrs["config_sha256"] = self.digest
            group.attrs["sets_total"] = len(self.sets)
            group.attrs["columns"] = json.dumps(list(self.file_header))
            group.attrs["units"] = json.dumps([_unit(c) for c in self.file_header])
            group.create_dataset("table", data=table)
            group.create_dataset("set", data=index)

    def close(self):
        if self._handle is not None:
            self._handle.close()
            self._handle = None


def _parse_line(line, powers):
    """``(set index, SI values)`` of a table line with a value in each column given ``powers``
    places of ten above SI, or None when it is not one."""
    fields = line.split(",")
    if len(fields) != len(powers) + 1:
        return None
    try:
        return int(fields[0]), np.array([_value(f, p) for f, p in zip(fields[1:], powers)])
    except ValueError:
        return None


def _as_table(header, done):
    """Rows ``{set index: values}`` as a structured array in scan order, and their set indices."""
    index = np.array(sorted(done), dtype=np.int64)
    table = np.zeros(len(index), dtype=[(c, np.float64) for c in header])
    if len(index):
        values = np.array([done[i] for i in index])
        for k, c in enumerate(header):
            table[c] = values[:, k]
    return table, index


def _write_synced(path, text):
    with open(path, "w", encoding="utf-8", newline="") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())


def _archive_stems(tag):
    """The archive names of a scan's files tagged ``tag``, in the order they are taken:
    ``scan.<tag>``, then ``scan.<tag>.2``, ``scan.<tag>.3``, ..."""
    base = Path(CSV_NAME).stem
    yield f"{base}.{tag}"
    for n in itertools.count(2):
        yield f"{base}.{tag}.{n}"


def _adopt_old_journal(folder):
    """Rename a ``scan.csv`` of an earlier tracer (the journal, comment line first) to
    ``scan.journal``, so its rows resume; nothing when there is none or a journal exists."""
    old, journal = folder / CSV_NAME, folder / JOURNAL_NAME
    if journal.exists() or not old.is_file():
        return
    with open(old, encoding="utf-8", errors="replace") as handle:
        first = handle.readline()
    if first.startswith(_OLD_FIRST_LINE):
        with atomic_path(journal) as tmp:
            _write_synced(tmp, _FIRST_LINE + old.read_text(encoding="utf-8").removeprefix(_OLD_FIRST_LINE))
        old.unlink()


def read_csv(path):
    """The finished rows of a scan table: ``scan.csv`` (header first), ``scan.journal`` or a
    ``scan.csv`` of an earlier tracer (a comment line first), in scan order; a last line cut short
    is dropped.

    Returns
    -------
    table : numpy structured array
        In SI units, as ``ScanResult.table`` (``spot_rms_m``): the files' mm, ns and mrad read back
        bit for bit as the values computed (module notes).
    index : int64[n]
    digest : str
        The config hash: from the journal's first line, else from the ``scan.journal`` or
        ``scan.h5`` beside a ``scan.csv``; "" when none is there.

    Raises
    ------
    tracer.store.StoreError
        When the file is missing or not a scan table.
    """
    from tracer.store import StoreError

    path = Path(path)
    try:
        lines = path.read_text(encoding="utf-8").split("\n")
    except (OSError, UnicodeDecodeError) as exc:
        raise StoreError(f"{path}: cannot read the scan table ({exc})") from None
    first = next((p for p in (_FIRST_LINE, _OLD_FIRST_LINE) if lines[0].startswith(p)), None)
    digest = lines[0].removeprefix(first).strip() if first else None
    body = lines[1:] if first else lines
    if len(body) < 2 or not body[0].startswith("set,"):
        raise StoreError(f"{path}: not a tracer scan table (its header does not start with 'set,')")
    columns = [si_column(c) for c in body[0].split(",")[1:]]
    header, powers = [c for c, _ in columns], [-p for _, p in columns]
    # the text after the last newline may be half written; a bad line is skipped as on resuming
    rows = [_parse_line(line, powers) for line in body[1:-1]]
    table, index = _as_table(header, dict(row for row in rows if row is not None))
    return table, index, digest if digest is not None else _digest_beside(path)


def _digest_beside(path):
    """The config hash of the journal or ``scan.h5`` beside a ``scan.csv`` ("" when neither is there)."""
    journal, h5 = path.with_name(JOURNAL_NAME), path.with_name(H5_NAME)
    if journal.is_file():
        with open(journal, encoding="utf-8", errors="replace") as handle:
            first = handle.readline()
        if first.startswith(_FIRST_LINE):
            return first.removeprefix(_FIRST_LINE).strip()
    if h5.is_file():
        try:
            return read_h5(h5)[2]
        except (OSError, KeyError):
            return ""
    return ""


def read_h5(path):
    """The table, set indices and config hash of a ``scan.h5``.

    Returns
    -------
    table : numpy structured array
        As stored: in the files' units (module notes; ``spot_rms_mm``), or SI from an earlier tracer.
    index : int64[n]
    digest : str
    """
    import h5py

    with h5py.File(path, "r") as f:
        group = f[H5_GROUP]
        return group["table"][()], group["set"][()], str(group.attrs["config_sha256"])
