"""Basis maps in an openPMD 1.1.0 HDF5 file (``maps.h5``, and the files of the maps cache).

Layout::

    /data/0/meshes/basis_<electrode>   one scalar mesh record per basis map (dimensionless:
                                       volts at the node per volt on the electrode)
    /tracer/maps                       everything else needed to rebuild the BasisMaps, outside the
                                       openPMD base path: grid, shape table, raster, electrode
                                       names and voltages, residual histories, geometry hash, tags,
                                       and the sha256 checksum of all of it (``checksum``)

The Hermite data are not stored: ``read_maps`` rebuilds them from the node values, bit for bit.
``read_maps`` computes the checksum of what it read and refuses a file whose data do not match
the one stored (:class:`ChecksumError`): a flipped bit or an edited map never reaches a result.
The checksum finds damage and edits that leave it standing; it is not a signature (whoever
rewrites the data can rewrite it too).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path

import numpy as np

from tracer.fieldmap import BasisMaps
from tracer.geometry import Raster, ShapeTable
from tracer.grid import Grid
from tracer.store import StoreError, openpmd
from tracer.store.hdf5 import plain, read_array, read_fields, tracer_group, write_fields
from tracer.store.trust import check_geometry

MAPS_GROUP = "tracer/maps"
MAPS_FORMAT = "tracer-maps-2"


class ChecksumError(StoreError):
    """A maps file whose data do not match the checksum stored with them."""


def _digest_array(h, label, value):
    value = np.ascontiguousarray(value)
    h.update(f"{label}:{value.dtype.str}:{value.shape};".encode())
    h.update(value.tobytes())


def maps_checksum(grid, table, raster, names, voltages, unit, history, geometry_hash) -> str:
    """sha256 hex digest of everything a maps file stores for BasisMaps (the arguments of
    ``BasisMaps.build``): every array's dtype, shape and bytes, every other value as JSON."""
    h = hashlib.sha256(MAPS_FORMAT.encode())
    for label, obj in (("grid", grid), ("table", table), ("raster", raster)):
        for field in dataclasses.fields(obj):
            value = getattr(obj, field.name)
            if isinstance(value, np.ndarray):
                _digest_array(h, f"{label}.{field.name}", value)
            else:
                h.update(json.dumps([label, field.name, value], default=plain).encode())
    h.update(json.dumps([list(names), [float(v) for v in voltages], geometry_hash]).encode())
    _digest_array(h, "unit", np.asarray(unit, dtype=np.float64))
    for k, item in enumerate(history):
        _digest_array(h, f"history.{k}", np.asarray(item))
    return h.hexdigest()


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
    records = openpmd.unique_names(["basis_" + openpmd.identifier(n) for n in maps.names])
    with openpmd.openpmd_file(path, author=author) as (f, it):
        for k, record in enumerate(records):
            openpmd.write_mesh(it, record, maps.unit[k], maps.grid,
                               attrs={"electrode": openpmd.text(maps.names[k]), "comment": openpmd.text(
                                   f"potential per volt on electrode {maps.names[k]!r}, 0 V on the others")})
        group = f.create_group(MAPS_GROUP)
        group.attrs["format"] = MAPS_FORMAT
        group.attrs["names"] = json.dumps(list(maps.names))
        group.attrs["records"] = json.dumps(records)
        group.attrs["voltages"] = np.asarray(maps.voltages, dtype=np.float64)
        group.attrs["geometry_hash"] = maps.geometry_hash
        group.attrs["tags"] = json.dumps(dict(tags or {}))
        group.attrs["checksum"] = maps_checksum(maps.grid, maps.table, maps.raster, maps.names,
                                                maps.voltages, maps.unit, maps.history, maps.geometry_hash)
        for key, obj in (("grid", maps.grid), ("table", maps.table), ("raster", maps.raster)):
            write_fields(group.create_group(key), obj)
        history = group.create_group("history")
        for k, h in enumerate(maps.history):
            history.create_dataset(str(k), data=np.asarray(h))
    return Path(path)


def _maps_group(path):
    return tracer_group(path, MAPS_GROUP, MAPS_FORMAT, "maps")


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
    ChecksumError
        When the data read do not match the checksum stored with them.
    StoreError
        When the file is missing, corrupt or not a maps file.
    """
    with _maps_group(path) as (f, group):
        grid = read_fields(group["grid"], Grid)
        table = read_fields(group["table"], ShapeTable)
        raster = read_fields(group["raster"], Raster)
        names = tuple(json.loads(group.attrs["names"]))
        it = f[openpmd.iteration_path()]
        unit = np.array([openpmd.read_mesh(it, record, grid) for record in json.loads(group.attrs["records"])])
        history = tuple(read_array(group["history"][str(k)]) for k in range(len(group["history"])))
        voltages = tuple(group.attrs["voltages"].tolist())
        geometry_hash = str(group.attrs["geometry_hash"])
        stored = group.attrs.get("checksum")
        check_geometry(path, grid, table, raster, names, voltages,
                       {f"basis map {k}": u for k, u in enumerate(unit)})
    found = maps_checksum(grid, table, raster, names, voltages, unit, history, geometry_hash)
    if stored != found:
        raise ChecksumError(f"{path}: the maps do not match their checksum (stored {stored!r}, "
                            f"data give {found[:16]}...): the file was damaged or edited")
    return BasisMaps.build(grid, table, raster, names, voltages, unit, history, geometry_hash)
