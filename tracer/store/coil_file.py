"""A coil's unit field on a grid in an HDF5 file (the coil entries of the maps cache).

Layout::

    /tracer/coil_field            format tag, the coil's winding section and turns, tags and the
                                  sha256 checksum of all of it (``checksum``)
    /tracer/coil_field/grid       the grid (as in a maps file)
    /tracer/coil_field/hermite    float64[4, nz, nr]: node data of the coil's A_theta at 1 A
                                  (:mod:`tracer.magnetics.units`)

``read_coil_field`` checks the file before any array reaches a kernel (:mod:`tracer.store.trust`:
no external storage, declared sizes, a grid tracer writes, node data of the grid's shape, float64
and finite) and refuses a file whose data do not match the checksum stored with them
(:class:`tracer.store.maps_file.ChecksumError`).  As for maps files, the checksum finds damage and
edits that leave it standing; it is not a signature.
"""

from __future__ import annotations

import hashlib
import json
from typing import NamedTuple

import numpy as np

from tracer.grid import Grid
from tracer.magnetics.coil import Winding
from tracer.store import StoreError
from tracer.store.hdf5 import new_file, read_array, read_fields, tracer_group, write_fields
from tracer.store.maps_file import ChecksumError
from tracer.store.trust import check_array, check_grid

COIL_GROUP = "tracer/coil_field"
COIL_FORMAT = "tracer-coil-1"


class CoilFile(NamedTuple):
    """What a coil field file holds."""

    grid: Grid
    winding: Winding
    hermite: np.ndarray
    tags: dict


def coil_checksum(grid, winding, hermite) -> str:
    """sha256 hex digest of a coil field file's grid, winding and node data (dtype, shape, bytes)."""
    h = hashlib.sha256(COIL_FORMAT.encode())
    h.update(json.dumps([repr(grid), list(winding)]).encode())
    data = np.ascontiguousarray(hermite)
    h.update(f"{data.dtype.str}:{data.shape};".encode())
    h.update(data.tobytes())
    return h.hexdigest()


def write_coil_field(path, grid, winding: Winding, hermite, *, tags=None):
    """Write a coil's unit field on a grid (atomically).

    Parameters
    ----------
    path : str or os.PathLike
    grid : tracer.grid.Grid
    winding : Winding
    hermite : float64[4, nz, nr]
        Node data of the coil's A_theta at 1 A.
    tags : mapping of str to str, optional
        Extra labels (a cache key), read back in ``CoilFile.tags``.
    """
    hermite = np.ascontiguousarray(hermite, dtype=np.float64)
    with new_file(path) as f:
        group = f.create_group(COIL_GROUP)
        group.attrs["format"] = COIL_FORMAT
        group.attrs["winding"] = json.dumps(list(winding))
        group.attrs["tags"] = json.dumps(dict(tags or {}))
        group.attrs["checksum"] = coil_checksum(grid, winding, hermite)
        write_fields(group.create_group("grid"), grid)
        group.create_dataset("hermite", data=hermite)


def read_coil_field(path) -> CoilFile:
    """Read a file written by ``write_coil_field``, checked (module docstring).

    Raises
    ------
    ChecksumError
        When the data read do not match the checksum stored with them.
    StoreError
        When the file is missing, corrupt, not a coil field file, or its arrays are not of its grid.
    """
    with tracer_group(path, COIL_GROUP, COIL_FORMAT, "coil field") as (_, group):
        grid = read_fields(group["grid"], Grid)
        check_grid(path, grid)
        z_m, r_m, turns = json.loads(group.attrs["winding"])
        winding = Winding(tuple(float(v) for v in z_m), tuple(float(v) for v in r_m), int(turns))
        tags = json.loads(group.attrs["tags"])
        if len(winding.z_m) != 2 or len(winding.r_m) != 2 or not isinstance(tags, dict):
            raise StoreError(f"{path}: the coil's winding or tags are not as tracer writes them")
        stored = group.attrs.get("checksum")
        hermite = read_array(group["hermite"])
    check_array(hermite, (4, grid.nz, grid.nr), "f", "the coil's node data", path)
    if hermite.dtype != np.float64:
        raise StoreError(f"{path}: the coil's node data are {hermite.dtype.str}, not float64")
    found = coil_checksum(grid, winding, hermite)
    if stored != found:
        raise ChecksumError(f"{path}: the coil field does not match its checksum (stored {stored!r}, "
                            f"data give {found[:16]}...): the file was damaged or edited")
    return CoilFile(grid, winding, hermite, tags)
