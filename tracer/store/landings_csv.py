"""The landings CSV (``landings.csv``): one row per ray, where and how it ended, units in the header."""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from tracer.store import StoreError
from tracer.store.atomic import atomic_path

LANDING_COLUMNS = (
    ("beam", str), ("ray", np.int64), ("status", str), ("electrode", str),
    ("x_mm", np.float64), ("y_mm", np.float64), ("z_mm", np.float64), ("r_mm", np.float64),
    ("t_ns", np.float64), ("energy_eV", np.float64), ("ux", np.float64), ("uy", np.float64),
    ("uz", np.float64), ("ledger_eV", np.float64), ("start_energy_eV", np.float64),
    ("incidence_deg", np.float64), ("normal_energy_eV", np.float64), ("weight_A", np.float64),
)
"""Columns of ``landings.csv``: the unit of every quantity is in its name (direction cosines ux,
uy, uz are unitless; r is the distance from the z axis; the angle of incidence from the surface
normal and the normal energy are those of a landing, empty (nan) for other rays; ``weight_A`` the
current each ray carries, nan when the beam gives none).  The file reads back as a beam's
``rays_csv`` (:func:`tracer.sources.read_rays_csv`: the rays stopped on a plane)."""

_CSV_END = "\r\n"
"""The line end of ``landings.csv`` (the csv module's default)."""


def _landing_columns(run) -> dict:
    """The CSV columns of one run, in the units of the header."""
    rec = run.records
    p = np.sqrt(rec["px"] ** 2 + rec["py"] ** 2 + rec["pz"] ** 2)
    safe = np.where(p > 0.0, p, 1.0)
    return {
        "beam": np.full(len(rec), run.name), "ray": rec["ray"], "status": rec["status"],
        "electrode": rec["electrode"], "x_mm": rec["x_m"] * 1e3, "y_mm": rec["y_m"] * 1e3,
        "z_mm": rec["z_m"] * 1e3, "r_mm": np.hypot(rec["x_m"], rec["y_m"]) * 1e3,
        "t_ns": rec["time_s"] * 1e9, "energy_eV": rec["energy_eV"], "ux": rec["px"] / safe,
        "uy": rec["py"] / safe, "uz": rec["pz"] / safe, "ledger_eV": rec["ledger_eV"],
        "start_energy_eV": run.starts["energy_eV"][rec["ray"]],
        **{name: rec[name] if name in rec.dtype.names else np.full(len(rec), np.nan)
           for name in ("incidence_deg", "normal_energy_eV")},
        "weight_A": np.where(rec["weight_A"] > 0.0, rec["weight_A"], np.nan),
    }


def write_landings_csv(path, runs) -> Path:
    """Write one row per ray per beam: where and how each ray ended (atomically).

    The header names the unit of every column (see ``LANDING_COLUMNS``); floats are written with
    17 significant digits, so they read back exactly.

    Parameters
    ----------
    path : str or os.PathLike
    runs : sequence of tracer.beam.BeamRun, or mapping of name to BeamRun

    Returns
    -------
    Path
    """
    runs = list(runs.values()) if isinstance(runs, Mapping) else list(runs)
    names = [name for name, _ in LANDING_COLUMNS]
    row = ",".join("%.17g" if kind is np.float64 else "%s" for _, kind in LANDING_COLUMNS) + _CSV_END
    with atomic_path(path) as tmp, open(tmp, "w", newline="", encoding="utf-8") as out:
        csv.writer(out, lineterminator=_CSV_END).writerow(names)
        for run in runs:
            columns = _landing_columns(run)
            cells = [_csv_text(columns[name]) if kind is str else columns[name].tolist()
                     for name, kind in LANDING_COLUMNS]
            out.write("".join([row % values for values in zip(*cells)]))
    return Path(path)


def _csv_text(values) -> list:
    """Text cells as the csv module writes them (quoted when they hold a comma, quote or line
    end), each distinct value quoted once."""
    distinct, index = np.unique(np.asarray(values, dtype=str), return_inverse=True)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator=_CSV_END)
    cells = []
    for value in distinct.tolist():
        buffer.seek(0)
        buffer.truncate()
        writer.writerow([value, ""])     # a row of one empty cell would be written as ""
        cells.append(buffer.getvalue()[:-1 - len(_CSV_END)])
    return [cells[k] for k in index.tolist()]


def read_landings_csv(path) -> np.ndarray:
    """Read a file written by ``write_landings_csv``.

    Returns
    -------
    numpy.ndarray
        Structured array with the columns of ``LANDING_COLUMNS`` (strings as ``U``, widths from
        the file).

    Raises
    ------
    StoreError
        When the file is missing or not a landings file.
    """
    names = [name for name, _ in LANDING_COLUMNS]
    try:
        with open(path, newline="", encoding="utf-8") as f:
            rows = list(csv.reader(f))
        if not rows or rows[0] != names:
            raise StoreError(f"{path}: not a landings file (expected the header {','.join(names)})")
        body = rows[1:]
        bad = next((k for k, row in enumerate(body, start=2) if len(row) != len(names)), None)
        if bad is not None:
            raise StoreError(f"{path}: line {bad}: expected {len(names)} values")
        columns = list(zip(*body)) or [()] * len(names)
        data = {name: (np.array(col, dtype=kind) if kind is not str else np.array(col, dtype=str))
                for (name, kind), col in zip(LANDING_COLUMNS, columns)}
    except (OSError, UnicodeDecodeError, ValueError) as err:
        if isinstance(err, StoreError):
            raise
        raise StoreError(f"{path}: unreadable landings file: {err}") from err
    dtype = np.dtype([(name, data[name].dtype if kind is str else kind) for name, kind in LANDING_COLUMNS])
    out = np.zeros(len(body), dtype=dtype)
    for name in names:
        out[name] = data[name]
    return out
