"""openPMD 1.1.0 on HDF5: the file with its root and iteration attributes, mesh records of node
data, and particle records.

In axial symmetry the mesh records use the ``thetaMode`` geometry with the single mode m = 0
(datasets ``(1, nr, nz)``); in planar symmetry ``cartesian`` with axes ``(z, y)``.  A particle
record component whose entries all have the same bits is stored as a constant (``value`` and
``shape`` attributes), as the standard allows.
"""

from __future__ import annotations

import contextlib
import datetime
import getpass
import os
import re
from collections.abc import Mapping

import h5py
import numpy as np

from tracer import __version__
from tracer.store.hdf5 import new_file, read_array
from tracer.store.trust import check_count

OPENPMD_VERSION = "1.1.0"
BASE_PATH = "/data/%T/"
MESHES_PATH = "meshes/"
PARTICLES_PATH = "particles/"

# unitDimension: powers of (length, mass, time, current, temperature, amount, luminosity)
DIMENSIONLESS = (0.0,) * 7
LENGTH = (1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0)
MASS = (0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0)
TIME = (0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0)
CURRENT = (0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0)
CHARGE = (0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0)
MOMENTUM = (1.0, 1.0, -1.0, 0.0, 0.0, 0.0, 0.0)
ENERGY = (2.0, 1.0, -2.0, 0.0, 0.0, 0.0, 0.0)
POTENTIAL = (2.0, 1.0, -3.0, -1.0, 0.0, 0.0, 0.0)
ELECTRIC_FIELD = (1.0, 1.0, -3.0, -1.0, 0.0, 0.0, 0.0)
MAGNETIC_FIELD = (0.0, 1.0, -2.0, -1.0, 0.0, 0.0, 0.0)


def text(value: str) -> np.bytes_:
    """openPMD wants fixed-length ASCII strings for its attributes."""
    return np.bytes_(value.encode("utf-8"))


def identifier(name: str) -> str:
    """An openPMD record name (a-z, A-Z, 0-9, _) made from any text."""
    return re.sub(r"[^A-Za-z0-9_]", "_", name)


def unique_names(names) -> list:
    """Make names unique: a repeat gets its index appended."""
    out = []
    for k, name in enumerate(names):
        out.append(f"{name}_{k}" if name in out else name)
    return out


def iteration_path(iteration: int = 0) -> str:
    """The group of an iteration (group-based encoding)."""
    return BASE_PATH.replace("%T", str(iteration))


# --------------------------------------------------------------------------------------------
# The file


def default_author() -> str:
    """The ``author`` of a file when the config gives none: ``$TRACER_AUTHOR``, else the login
    name (the standard recommends the attribute; its validator warns without it)."""
    if os.environ.get("TRACER_AUTHOR"):
        return os.environ["TRACER_AUTHOR"]
    try:
        return getpass.getuser()
    except (OSError, KeyError):  # no login name (a container without a user entry)
        return "unknown"


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
        The standard's recommended ``author`` attribute (author and contact); by default
        :func:`default_author`.
    particles : bool
        Declare the particles path (``particles/``) and create its group in the iteration.
    """
    with new_file(path) as f:
        f.attrs["openPMD"] = text(OPENPMD_VERSION)
        f.attrs["openPMDextension"] = np.uint32(0)
        f.attrs["basePath"] = text(BASE_PATH)
        f.attrs["iterationEncoding"] = text("groupBased")
        f.attrs["iterationFormat"] = text(BASE_PATH)
        f.attrs["meshesPath"] = text(MESHES_PATH)
        if particles:
            f.attrs["particlesPath"] = text(PARTICLES_PATH)
        f.attrs["software"] = text("tracer")
        f.attrs["softwareVersion"] = text(__version__)
        f.attrs["author"] = text(author or default_author())
        f.attrs["date"] = text(datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M:%S %z"))
        it = f.create_group(iteration_path(iteration))
        it.attrs["time"] = 0.0
        it.attrs["dt"] = 0.0
        it.attrs["timeUnitSI"] = 1.0
        if particles:
            it.create_group(PARTICLES_PATH)
        yield f, it


# --------------------------------------------------------------------------------------------
# Meshes


def _mesh_layout(grid):
    """openPMD geometry attributes of a grid and the node-array <-> dataset conversions."""
    if grid.symmetry == "axial":
        attrs = {"geometry": text("thetaMode"), "geometryParameters": text("m=1;imag=+"),
                 "axisLabels": np.array([b"r", b"z"]), "gridSpacing": np.array([grid.hr, grid.hz]),
                 "gridGlobalOffset": np.array([grid.r0, grid.z0])}
        return attrs, (lambda a: a.T[None]), (lambda d: d[0].T)
    attrs = {"geometry": text("cartesian"), "axisLabels": np.array([b"z", b"y"]),
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
    record.attrs["dataOrder"] = text("C")
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
        return {c: np.ascontiguousarray(from_file(read_array(record[c]))) for c in record}
    return np.ascontiguousarray(from_file(read_array(record)))


# --------------------------------------------------------------------------------------------
# Particles


def _same_bits(values) -> bool:
    """True when every entry of a non-empty 1-D array has the bits of the first (-0.0 is not 0.0)."""
    raw = np.ascontiguousarray(values).view(np.uint8).reshape(len(values), -1)
    return bool((raw == raw[0]).all())


def _component(parent, name, values, n):
    """A record component: a constant (``value``, ``shape``) when all n entries have the same bits."""
    values = np.asarray(values)
    if values.ndim == 1 and n and not _same_bits(values):
        return parent.create_dataset(name, data=values)
    if values.ndim == 1:      # all equal, or none (then the value is a zero of the type)
        values = values[0] if n else np.zeros((), values.dtype)
    group = parent.create_group(name)
    group.attrs["value"] = values[()]
    group.attrs["shape"] = np.array([n], dtype=np.uint64)
    return group


def read_component(obj) -> np.ndarray:
    """The entries of a record component, a constant one expanded to its shape."""
    if isinstance(obj, h5py.Group):
        value = np.asarray(obj.attrs["value"])
        n = check_count(np.asarray(obj.attrs["shape"]).reshape(-1)[0], value.dtype.itemsize, obj.name,
                        obj.file.filename)
        return np.full(n, value, dtype=value.dtype)
    return read_array(obj)


def particle_record(species, name, values, n, unit_dimension=DIMENSIONLESS, unit_si=1.0,
                    weighting_power=0.0, macro_weighted=0, attrs=None):
    """An openPMD particle record of n particles: scalar, or vector when ``values`` maps
    components to arrays (or to constants)."""
    if isinstance(values, Mapping):
        record = species.create_group(name)
        components = [_component(record, c, v, n) for c, v in values.items()]
    else:
        record = _component(species, name, values, n)
        components = [record]
    record.attrs["unitDimension"] = np.asarray(unit_dimension, dtype=np.float64)
    record.attrs["timeOffset"] = np.float32(0.0)
    record.attrs["weightingPower"] = np.float64(weighting_power)
    record.attrs["macroWeighted"] = np.uint32(macro_weighted)
    for component in components:
        component.attrs["unitSI"] = np.float64(unit_si)
    for key, value in (attrs or {}).items():
        record.attrs[key] = value


def particle_patches(species, rows):
    """One patch holding every particle of the species, with its bounding box (``x_m``, ``y_m``,
    ``z_m`` of the rows)."""
    n = len(rows)
    patches = species.create_group("particlePatches")
    for name, value in (("numParticles", n), ("numParticlesOffset", 0)):
        patches.create_dataset(name, data=np.array([value], dtype=np.uint64)).attrs["unitSI"] = 1.0
    offset, extent = patches.create_group("offset"), patches.create_group("extent")
    for record in (offset, extent):
        record.attrs["unitDimension"] = np.asarray(LENGTH)
    for c in "xyz":
        x = rows[f"{c}_m"]
        lo, hi = (float(x.min()), float(x.max())) if n else (0.0, 0.0)
        offset.create_dataset(c, data=np.array([lo])).attrs["unitSI"] = 1.0
        extent.create_dataset(c, data=np.array([hi - lo])).attrs["unitSI"] = 1.0
