"""HDF5 files in the openPMD 1.1.0 layout.

A small openPMD layer (``openpmd_file``, ``write_mesh``) writes the standard's root and iteration
attributes and mesh records; on top of it ``write_maps`` / ``read_maps`` store BasisMaps.  Every write
goes to a temporary file in the target folder that is renamed into place (``atomic_path``), so a crash
never leaves a half-written file.

Layout of a maps file::

    /data/0/meshes/basis_<electrode>   one scalar mesh record per basis map (dimensionless:
                                       volts at the node per volt on the electrode)
    /tracer/maps                       everything else needed to rebuild the BasisMaps, outside the
                                       openPMD base path: grid, shape table, raster, electrode
                                       names and voltages, residual histories, geometry hash, tags

In axial symmetry the mesh records use the ``thetaMode`` geometry with the single mode m = 0
(datasets ``(1, nr, nz)``); in planar symmetry ``cartesian`` with axes ``(z, y)``.  The Hermite
data are not stored: ``read_maps`` rebuilds them from the node values, bit for bit.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime
import json
import os
import re
import secrets
from collections.abc import Mapping
from pathlib import Path

import h5py
import numpy as np

from tracer import __version__
from tracer.fieldmap import BasisMaps
from tracer.geometry import Raster, ShapeTable
from tracer.grid import Grid

OPENPMD_VERSION = "1.1.0"
BASE_PATH = "/data/%T/"
MESHES_PATH = "meshes/"
PARTICLES_PATH = "particles/"
MAPS_GROUP = "tracer/maps"
MAPS_FORMAT = "tracer-maps-1"

DIMENSIONLESS = (0.0,) * 7
"""openPMD unitDimension: powers of (length, mass, time, current, temperature, amount, luminosity)."""


class StoreError(ValueError):
    """A file that is not a readable tracer file of the expected kind."""


# --------------------------------------------------------------------------------------------
# Files


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` when the block succeeds.

    On an exception the temporary file is removed and ``path`` is left as it was.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _text(value: str) -> np.bytes_:
    """openPMD wants fixed-length ASCII strings for its attributes."""
    return np.bytes_(value.encode("utf-8"))


@contextlib.contextmanager
def openpmd_file(path, iteration: int = 0, author: str | None = None, particles: bool = False):
    """Create an openPMD 1.1.0 file atomically and yield ``(file, iteration_group)``.

    Parameters
    ----------
    path : str or os.PathLike
        The file to write (replaced when the block succeeds).
    iteration : int
        The single iteration written (group-based encoding).
    author : str, optional
        The standard's recommended ``author`` attribute (author and contact).
    particles : bool
        Declare the particles path (``particles/``) and create its group in the iteration.
    """
    with atomic_path(path) as tmp, h5py.File(tmp, "w") as f:
        f.attrs["openPMD"] = _text(OPENPMD_VERSION)
        f.attrs["openPMDextension"] = np.uint32(0)
        f.attrs["basePath"] = _text(BASE_PATH)
        f.attrs["iterationEncoding"] = _text("groupBased")
        f.attrs["iterationFormat"] = _text(BASE_PATH)
        f.attrs["meshesPath"] = _text(MESHES_PATH)
        if particles:
            f.attrs["particlesPath"] = _text(PARTICLES_PATH)
        f.attrs["software"] = _text("tracer")
        f.attrs["softwareVersion"] = _text(__version__)
        if author:
            f.attrs["author"] = _text(author)
        f.attrs["date"] = _text(datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M:%S %z"))
        it = f.create_group(BASE_PATH.replace("%T", str(iteration)))
        it.attrs["time"] = 0.0
        it.attrs["dt"] = 0.0
        it.attrs["timeUnitSI"] = 1.0
        if particles:
            it.create_group(PARTICLES_PATH)
        yield f, it


def _mesh_layout(grid):
    """openPMD geometry attributes of a grid and the node-array <-> dataset conversions."""
    if grid.symmetry == "axial":
        attrs = {"geometry": _text("thetaMode"), "geometryParameters": _text("m=1;imag=+"),
                 "axisLabels": np.array([b"r", b"z"]), "gridSpacing": np.array([grid.hr, grid.hz]),
                 "gridGlobalOffset": np.array([grid.r0, grid.z0])}
        return attrs, (lambda a: a.T[None]), (lambda d: d[0].T)
    attrs = {"geometry": _text("cartesian"), "axisLabels": np.array([b"z", b"y"]),
             "gridSpacing": np.array([grid.hz, grid.hr]), "gridGlobalOffset": np.array([grid.z0, grid.r0])}
    return attrs, (lambda a: a), (lambda d: d)


def write_mesh(iteration, name, data, grid, unit_dimension=DIMENSIONLESS, unit_si=1.0, attrs=None):
    """Write an openPMD mesh record of node data: scalar, or vector with named components.

    Parameters
    ----------
    iteration : h5py.Group
        From ``openpmd_file``.
    name : str
        Record name (letters, digits, underscore).
    data : float64[nz, nr] or mapping of str to float64[nz, nr]
        Node values indexed ``[iz, ir]``; a mapping gives a vector record (component name to values).
    grid : tracer.grid.Grid
    unit_dimension : 7 floats
        openPMD unitDimension of the values.
    unit_si : float
        Factor from the stored values to SI.
    attrs : dict, optional
        Extra attributes on the record.
    """
    layout, to_file, _ = _mesh_layout(grid)
    meshes = iteration.require_group(MESHES_PATH)
    if isinstance(data, Mapping):
        record = meshes.create_group(name)
        components = [record.create_dataset(c, data=to_file(np.asarray(a))) for c, a in data.items()]
    else:
        record = meshes.create_dataset(name, data=to_file(np.asarray(data)))
        components = [record]
    for key, value in layout.items():
        record.attrs[key] = value
    record.attrs["unitDimension"] = np.asarray(unit_dimension, dtype=np.float64)
    record.attrs["timeOffset"] = np.float32(0.0)
    record.attrs["gridUnitSI"] = np.float64(1.0)
    record.attrs["dataOrder"] = _text("C")
    for component in components:
        component.attrs["unitSI"] = np.float64(unit_si)
        component.attrs["position"] = np.zeros(2)
    for key, value in (attrs or {}).items():
        record.attrs[key] = value
    return record


def read_mesh(iteration, name, grid):
    """Node data ``[iz, ir]`` of a mesh record written by ``write_mesh`` (a dict for a vector)."""
    _, _, from_file = _mesh_layout(grid)
    record = iteration[MESHES_PATH + name]
    if isinstance(record, h5py.Group):
        return {c: np.ascontiguousarray(from_file(record[c][()])) for c in record}
    return np.ascontiguousarray(from_file(record[()]))


# --------------------------------------------------------------------------------------------
# Frozen dataclasses of arrays and plain values


def _plain(value):
    """numpy scalars -> Python scalars for JSON."""
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"cannot store {type(value).__name__}")


def _tuples(value):
    """JSON lists back to the tuples the dataclasses hold."""
    if isinstance(value, list):
        return tuple(_tuples(v) for v in value)
    return value


def _write_fields(group, obj):
    """Arrays as datasets, every other field in one JSON attribute (exact for floats)."""
    plain = {}
    for field in dataclasses.fields(obj):
        value = getattr(obj, field.name)
        if isinstance(value, np.ndarray):
            compress = {"compression": "gzip", "compression_opts": 1, "shuffle": True} if value.size > 4096 else {}
            group.create_dataset(field.name, data=value, **compress)
        else:
            plain[field.name] = value
    group.attrs["fields"] = json.dumps(plain, default=_plain)


def _read_fields(group, cls):
    values = {name: _tuples(v) for name, v in json.loads(group.attrs["fields"]).items()}
    for field in dataclasses.fields(cls):
        if field.name not in values:
            values[field.name] = group[field.name][()]
    return cls(**values)


# --------------------------------------------------------------------------------------------
# Basis maps


def _identifier(name: str) -> str:
    """An openPMD record name (a-z, A-Z, 0-9, _) made from any text."""
    return re.sub(r"[^A-Za-z0-9_]", "_", name)


def _unique(names):
    """Make names unique: a repeat gets its index appended."""
    out = []
    for k, name in enumerate(names):
        out.append(f"{name}_{k}" if name in out else name)
    return out


def write_maps(path, maps, *, tags=None, author=None) -> Path:
    """Write BasisMaps to an openPMD HDF5 file (atomically).

    Parameters
    ----------
    path : str or os.PathLike
    maps : tracer.fieldmap.BasisMaps
    tags : mapping of str to str, optional
        Extra labels stored with the maps (e.g. a cache key), read back by ``read_tags``.
    author : str, optional
        Author and contact, the openPMD ``author`` attribute.

    Returns
    -------
    Path
    """
    records = _unique(["basis_" + _identifier(n) for n in maps.names])
    with openpmd_file(path, author=author) as (f, it):
        for k, record in enumerate(records):
            write_mesh(it, record, maps.unit[k], maps.grid,
                       attrs={"electrode": _text(maps.names[k]), "comment": _text(
                           f"potential per volt on electrode {maps.names[k]!r}, 0 V on the others")})
        group = f.create_group(MAPS_GROUP)
        group.attrs["format"] = MAPS_FORMAT
        group.attrs["names"] = json.dumps(list(maps.names))
        group.attrs["records"] = json.dumps(records)
        group.attrs["voltages"] = np.asarray(maps.voltages, dtype=np.float64)
        group.attrs["geometry_hash"] = maps.geometry_hash
        group.attrs["tags"] = json.dumps(dict(tags or {}))
        for key, obj in (("grid", maps.grid), ("table", maps.table), ("raster", maps.raster)):
            _write_fields(group.create_group(key), obj)
        history = group.create_group("history")
        for k, h in enumerate(maps.history):
            history.create_dataset(str(k), data=np.asarray(h))
    return Path(path)


@contextlib.contextmanager
def _tracer_group(path, name, file_format, kind):
    """Open a tracer file and yield ``(file, group)``; every failure to read it is a StoreError."""
    try:
        with h5py.File(path, "r") as f:
            group = f.get(name)
            if not isinstance(group, h5py.Group) or group.attrs.get("format") != file_format:
                raise StoreError(f"{path}: not a tracer {kind} file ({file_format})")
            yield f, group
    except (OSError, KeyError, ValueError, TypeError) as err:
        if isinstance(err, StoreError):
            raise
        raise StoreError(f"{path}: unreadable {kind} file: {err}") from err


def _maps_group(path):
    return _tracer_group(path, MAPS_GROUP, MAPS_FORMAT, "maps")


def read_tags(path) -> dict:
    """The tags stored by ``write_maps``.

    Raises
    ------
    StoreError
        When the file is missing, corrupt or not a maps file.
    """
    with _maps_group(path) as (_, group):
        return json.loads(group.attrs["tags"])


def read_maps(path):
    """Read BasisMaps written by ``write_maps``; the Hermite data are rebuilt from the node values.

    Raises
    ------
    StoreError
        When the file is missing, corrupt or not a maps file.
    """
    with _maps_group(path) as (f, group):
        grid = _read_fields(group["grid"], Grid)
        table = _read_fields(group["table"], ShapeTable)
        raster = _read_fields(group["raster"], Raster)
        names = tuple(json.loads(group.attrs["names"]))
        it = f[BASE_PATH.replace("%T", "0")]
        unit = np.array([read_mesh(it, record, grid) for record in json.loads(group.attrs["records"])])
        history = tuple(group["history"][str(k)][()] for k in range(len(group["history"])))
        voltages = tuple(group.attrs["voltages"].tolist())
        geometry_hash = str(group.attrs["geometry_hash"])
    return BasisMaps.build(grid, table, raster, names, voltages, unit, history, geometry_hash)
