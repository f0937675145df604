"""HDF5 files in the openPMD 1.1.0 layout, and the landings CSV.

A small openPMD layer (``openpmd_file``, ``write_mesh``, particle records) writes the standard's
root and iteration attributes, mesh records and particle species; on top of it ``write_maps`` /
``read_maps`` store BasisMaps and ``write_result`` / ``read_result`` store a traced result (the
field and every beam).  ``write_landings_csv`` writes one row per ray.  Every write goes to a
temporary file in the target folder that is renamed into place (``atomic_path``), so a crash never
leaves a half-written file.

Layout of a maps file::

    /data/0/meshes/basis_<electrode>   one scalar mesh record per basis map (dimensionless:
                                       volts at the node per volt on the electrode)
    /tracer/maps                       everything else needed to rebuild the BasisMaps, outside the
                                       openPMD base path: grid, shape table, raster, electrode
                                       names and voltages, residual histories, geometry hash, tags

The layout of a result file is described at ``write_result``.

In axial symmetry the mesh records use the ``thetaMode`` geometry with the single mode m = 0
(datasets ``(1, nr, nz)``); in planar symmetry ``cartesian`` with axes ``(z, y)``.  The Hermite
data are not stored: ``read_maps`` rebuilds them from the node values, bit for bit, and
``read_result`` from the node potential (equal to rounding).
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import datetime
import io
import json
import os
import re
import secrets
import shutil
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np
from scipy import constants

from tracer import __version__
from tracer.beam import STATUS
from tracer.fieldmap import BasisMaps, PotentialMap, edge_reflection, hermite_data
from tracer.geometry import Raster, ShapeTable
from tracer.grid import Grid
from tracer.species import Species

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


@contextlib.contextmanager
def staged_folder(folder):
    """Yield a temporary folder inside ``folder``; move its files into ``folder`` when the block
    succeeds.

    On an exception the temporary folder is removed with everything in it, and ``folder`` keeps
    only what it held before.  Files written into the temporary folder with ``atomic_path`` are
    complete when they are moved.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tmp = folder / f".staged.{os.getpid()}.{secrets.token_hex(4)}.tmp"
    tmp.mkdir()
    try:
        yield tmp
        for item in sorted(tmp.iterdir()):
            os.replace(item, folder / item.name)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


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


# --------------------------------------------------------------------------------------------
# Results: the field, the beams and their summaries

RESULT_GROUP = "tracer/result"
RESULT_FORMAT = "tracer-result-1"

LENGTH = (1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0)
MASS = (0.0, 1.0, 0.0, 0.0, 0.0, 0.0, 0.0)
TIME = (0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0)
CURRENT = (0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0)
CHARGE = (0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0)
MOMENTUM = (1.0, 1.0, -1.0, 0.0, 0.0, 0.0, 0.0)
ENERGY = (2.0, 1.0, -2.0, 0.0, 0.0, 0.0, 0.0)
POTENTIAL = (2.0, 1.0, -3.0, -1.0, 0.0, 0.0, 0.0)
ELECTRIC_FIELD = (1.0, 1.0, -3.0, -1.0, 0.0, 0.0, 0.0)

_FIELD_RECORDS = {
    "x_m": ("position", "x"), "y_m": ("position", "y"), "z_m": ("position", "z"),
    "px": ("momentum", "x"), "py": ("momentum", "y"), "pz": ("momentum", "z"),
    "time_s": ("time", None), "energy_eV": ("kineticEnergy", None),
    "ledger_eV": ("ledgerError", None), "ray": ("rayIndex", None), "weight_A": ("rayCurrent", None),
}
"""Particle record (and component) of each BeamRun field; other fields keep their own name."""

_RECORD_UNITS = {  # unitDimension, unitSI, weightingPower, macroWeighted
    "position": (LENGTH, 1.0, 0.0, 0), "momentum": (MOMENTUM, 1.0, 1.0, 0), "time": (TIME, 1.0, 0.0, 0),
    "kineticEnergy": (ENERGY, constants.e, 1.0, 0), "ledgerError": (ENERGY, constants.e, 1.0, 0),
    "rayCurrent": (CURRENT, 1.0, 1.0, 1),
}


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


def _read_component(obj) -> np.ndarray:
    if isinstance(obj, h5py.Group):
        value = np.asarray(obj.attrs["value"])
        return np.full(int(obj.attrs["shape"][0]), value, dtype=value.dtype)
    return obj[()]


def _particle_record(species, name, values, n, unit_dimension=DIMENSIONLESS, unit_si=1.0,
                     weighting_power=0.0, macro_weighted=0, attrs=None):
    """An openPMD particle record: scalar, or vector when ``values`` maps components to arrays."""
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


def _particle_patches(species, rows):
    """One patch holding every particle of the species, with its bounding box."""
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


def _write_species(particles, name, rows, species, weighting, codes, attrs):
    """One openPMD particle species from state records (fields as in ``BeamRun.records``)."""
    group = particles.create_group(name)
    for key, value in attrs.items():
        group.attrs[key] = _text(value)
    n = len(rows)
    vectors = {}
    for field in rows.dtype.names:
        record, component = _FIELD_RECORDS.get(field, (field, None))
        if component is not None:
            vectors.setdefault(record, {})[component] = rows[field]
        elif field in codes:
            lookup = {label: code for code, label in codes[field].items()}
            labels, index = np.unique(rows[field], return_inverse=True)
            values = np.array([lookup[v] for v in labels.tolist()], np.int64)[index.ravel()]
            _particle_record(group, record, values, n, attrs={"codes": json.dumps(codes[field])})
        elif field != "plane":            # a crossing species is a single plane (attribute)
            _particle_record(group, record, rows[field], n,
                             *_RECORD_UNITS.get(record, (DIMENSIONLESS, 1.0, 0.0, 0)))
    for record, components in vectors.items():
        _particle_record(group, record, components, n, *_RECORD_UNITS[record])
    _particle_record(group, "positionOffset", {c: 0.0 for c in "xyz"}, n, LENGTH)
    _particle_record(group, "charge", species.charge_C, n, CHARGE, weighting_power=1.0)
    _particle_record(group, "mass", species.mass_kg, n, MASS, weighting_power=1.0)
    _particle_record(group, "weighting", weighting[rows["ray"]], n, weighting_power=1.0, macro_weighted=1)
    _particle_patches(group, rows)


def _read_species(group, dtype) -> np.ndarray:
    """State records of a species written by ``_write_species`` (dtype from the file's names)."""
    n = int(group["particlePatches/numParticles"][0])
    out = np.zeros(n, dtype=dtype)
    for field in dtype.names:
        if field == "plane":
            out[field] = group.attrs["plane"].decode()
            continue
        record, component = _FIELD_RECORDS.get(field, (field, None))
        values = _read_component(group[record] if component is None else group[record][component])
        if "codes" in group[record].attrs:
            lookup = {int(k): v for k, v in json.loads(group[record].attrs["codes"]).items()}
            values = np.array([lookup[c] for c in values.tolist()], dtype=dtype[field])
        out[field] = values
    return out


def _weighting(run) -> np.ndarray:
    """Real particles per ray: the ray's current (``weight_A``) × 1 s / |q|; 1 without a current."""
    current = run.starts["weight_A"]
    if not np.any(current):
        return np.ones(len(current))
    return current * 1.0 / abs(run.species.charge_C)


def _dtype_names(array) -> list:
    return [[name, array.dtype[name].str] for name in array.dtype.names]


def _dtype_of(names) -> np.dtype:
    return np.dtype([(name, kind) for name, kind in names])


def write_result(path, field, runs, *, setup=None, summaries=None, author=None) -> Path:
    """Write the field and the traced beams to one openPMD 1.1.0 HDF5 file (atomically).

    Layout::

        /data/0/meshes/phi                   potential at the grid nodes (V)
        /data/0/meshes/E                     field components z and r (axial, thetaMode m = 0) or
                                             z and y (planar), V/m, at the grid nodes
        /data/0/particles/<beam>_start       start state of every ray
        /data/0/particles/<beam>_final       final state of every ray
        /data/0/particles/<beam>_at_<plane>  every crossing of a detector plane
        /tracer/result                       outside the openPMD base path: electrode names and
                                             voltages, grid, shape table and raster, per beam its
                                             species, record names and dtypes and ray paths, the
                                             summaries (JSON), the config text and geometry hash

    Each species has the standard records position, positionOffset, momentum, charge, mass and
    weighting (real particles per ray: the ray's current × 1 s / |q|, or 1 without a current), and
    the records ``kineticEnergy`` and ``ledgerError`` (stored in eV, unitSI = e), ``time`` (s),
    ``rayIndex``, ``rayCurrent`` (A), ``status`` and ``electrode`` (integer codes; the attribute
    ``codes`` maps code to name), plus every further field of the arrays under its own name
    (``steps``, ``evaluations``; ``crossing`` and ``row``, the row in ``BeamRun.crossings``, for
    the plane species).

    Parameters
    ----------
    path : str or os.PathLike
    field : tracer.fieldmap.PotentialMap
        The map the beams were traced in.
    runs : sequence of tracer.beam.BeamRun, or mapping of name to BeamRun
    setup : tracer.config.Setup, optional
        Its title, config file text (read from ``setup.source``) and geometry hash are stored.
    summaries : mapping of beam name to dict, optional
        The summaries to store (JSON-serializable); default ``run.summary()`` of each run.
    author : str, optional
        Author and contact, the openPMD ``author`` attribute.

    Returns
    -------
    Path
    """
    runs = list(runs.values()) if isinstance(runs, Mapping) else list(runs)
    summaries = dict(summaries) if summaries is not None else {run.name: run.summary() for run in runs}
    grid = field.grid
    zz, rr = np.meshgrid(grid.z, grid.r, indexing="ij")
    ez, er = field.field(zz, rr)
    side = "r" if grid.symmetry == "axial" else "y"
    # status: the tracer's end codes, -1 for a start state; electrode: its index, -1 for none
    codes = {"status": {-1: "", **STATUS}, "electrode": {-1: "", **dict(enumerate(field.names))}}
    candidates = []
    for run in runs:
        beam = _identifier(run.name)
        candidates += [f"{beam}_start", f"{beam}_final"] + [f"{beam}_at_{_identifier(p)}" for p in run.planes]
    species_names = iter(_unique(candidates))
    with openpmd_file(path, author=author, particles=True) as (f, it):
        write_mesh(it, "phi", field.potential(zz, rr), grid, POTENTIAL,
                   attrs={"comment": _text("electrostatic potential at the grid nodes")})
        write_mesh(it, "E", {"z": ez, side: er}, grid, ELECTRIC_FIELD,
                   attrs={"comment": _text("electric field -grad(phi) at the grid nodes")})
        particles = it[PARTICLES_PATH]
        group = f.create_group(RESULT_GROUP)
        beams = []
        for k, run in enumerate(runs):
            weighting = _weighting(run)
            about = {"beam": run.name, "speciesName": run.species.name}
            start, final = next(species_names), next(species_names)
            _write_species(particles, start, run.starts, run.species, weighting, codes,
                           {**about, "comment": "start state of every ray"})
            _write_species(particles, final, run.records, run.species, weighting, codes,
                           {**about, "comment": "final state of every ray"})
            order = np.arange(len(run.crossings))
            planes = {}
            for plane in run.planes:
                rows = run.crossings["plane"] == plane
                planes[plane] = next(species_names)
                _write_species(particles, planes[plane], _with_row(run.crossings[rows], order[rows]),
                               run.species, weighting, codes,
                               {**about, "plane": plane, "comment": f"crossings of plane {plane}"})
            paths = group.create_group(f"paths/{k}")
            for i, p in enumerate(run.paths):
                paths.create_dataset(str(i), data=p)
            beams.append({"name": run.name, "species": [run.species.name, run.species.mass_kg,
                                                        run.species.charge_C],
                          "start": start, "final": final, "planes": planes,
                          "dtypes": {key: _dtype_names(getattr(run, key))
                                     for key in ("starts", "records", "crossings")}})
        group.attrs["format"] = RESULT_FORMAT
        group.attrs["names"] = json.dumps(list(field.names))
        group.attrs["voltages"] = np.asarray(field.voltages, dtype=np.float64)
        group.attrs["beams"] = json.dumps(beams)
        group.attrs["summaries"] = json.dumps(summaries, default=_plain)
        group.attrs["title"] = setup.title if setup else ""
        group.attrs["geometry_hash"] = setup.geometry_hash() if setup else ""
        source = setup.source if setup else None
        group.create_dataset("config", data=source.read_text() if source and source.is_file() else "")
        for key, obj in (("grid", grid), ("table", field.table), ("raster", field.raster)):
            _write_fields(group.create_group(key), obj)
    return Path(path)


def _copy_fields(rows, dtype) -> np.ndarray:
    """Copy the fields of ``rows`` into a new array of ``dtype`` (fields ``dtype`` lacks are dropped)."""
    out = np.zeros(len(rows), dtype=dtype)
    for name in dtype.names:
        if name in rows.dtype.names:
            out[name] = rows[name]
    return out


def _with_row(rows, order):
    """Crossing records with their row in ``BeamRun.crossings`` (``row``), to restore the order."""
    out = _copy_fields(rows, np.dtype(rows.dtype.descr + [("row", np.int64)]))
    out["row"] = order
    return out


@dataclass(frozen=True)
class BeamResult:
    """One beam read back from a result file.

    Attributes
    ----------
    name : str
    species : tracer.species.Species
    starts, records, crossings : numpy.ndarray
        As in :class:`tracer.beam.BeamRun` (same dtypes).
    paths : tuple of numpy.ndarray
        The kept ray paths.
    planes : tuple of str
    weighting : numpy.ndarray
        Real particles per ray (the openPMD ``weighting``), in ray order.
    """

    name: str
    species: Species
    starts: np.ndarray
    records: np.ndarray
    crossings: np.ndarray
    paths: tuple
    planes: tuple
    weighting: np.ndarray


@dataclass(frozen=True)
class ResultFile:
    """What ``read_result`` reads: enough to print the summaries and redraw the pictures.

    Attributes
    ----------
    path : Path
    title : str
        The setup's title ("" when none was stored).
    field : tracer.fieldmap.PotentialMap
        The potential map rebuilt from the stored node potential (interpolant, electrodes).
    phi : float64[nz, nr]
        Node potential (V).
    e_z, e_r : float64[nz, nr]
        Node field (V/m); ``e_r`` is E_y in planar symmetry.
    beams : dict of str to BeamResult
    summaries : dict of str to dict
        Per beam, its stored summary.
    config_text : str
        The config file's text ("" when none was stored).
    geometry_hash : str
        ``Setup.geometry_hash()`` ("" when none was stored).
    """

    path: Path
    title: str
    field: PotentialMap
    phi: np.ndarray
    e_z: np.ndarray
    e_r: np.ndarray
    beams: dict
    summaries: dict
    config_text: str
    geometry_hash: str

    @property
    def grid(self) -> Grid:
        """The node grid of the meshes."""
        return self.field.grid


def read_result(path) -> ResultFile:
    """Read a result file written by ``write_result``.

    Raises
    ------
    StoreError
        When the file is missing, truncated, corrupt or not a tracer result file.
    """
    with _tracer_group(path, RESULT_GROUP, RESULT_FORMAT, "result") as (f, group):
        grid = _read_fields(group["grid"], Grid)
        table = _read_fields(group["table"], ShapeTable)
        raster = _read_fields(group["raster"], Raster)
        it = f[BASE_PATH.replace("%T", "0")]
        phi = read_mesh(it, "phi", grid)
        e = read_mesh(it, "E", grid)
        voltages = group.attrs["voltages"]
        hermite = hermite_data(phi, raster.owner, raster.arm, raster.arm_owner, voltages, grid.hz,
                               grid.hr, edge_reflection(grid.edges))
        field = PotentialMap(grid, table, raster, tuple(json.loads(group.attrs["names"])),
                             tuple(voltages.tolist()), hermite)
        particles = it[PARTICLES_PATH]
        beams = {}
        for k, about in enumerate(json.loads(group.attrs["beams"])):
            dtypes = {key: _dtype_of(names) for key, names in about["dtypes"].items()}
            crossing_dtype = _dtype_of(about["dtypes"]["crossings"] + [["row", "<i8"]])
            parts = [_read_species(particles[s], crossing_dtype) for s in about["planes"].values()]
            crossings = np.concatenate(parts) if parts else np.zeros(0, crossing_dtype)
            crossings = crossings[np.argsort(crossings["row"], kind="stable")]
            paths = group[f"paths/{k}"]
            beams[about["name"]] = BeamResult(
                name=about["name"], species=Species(*about["species"]),
                starts=_read_species(particles[about["start"]], dtypes["starts"]),
                records=_read_species(particles[about["final"]], dtypes["records"]),
                crossings=_copy_fields(crossings, dtypes["crossings"]),
                paths=tuple(paths[str(i)][()] for i in range(len(paths))),
                planes=tuple(about["planes"]),
                weighting=_read_component(particles[about["start"]]["weighting"]))
        return ResultFile(path=Path(path), title=str(group.attrs["title"]), field=field, phi=phi,
                          e_z=e["z"], e_r=e["r" if grid.symmetry == "axial" else "y"], beams=beams,
                          summaries=json.loads(group.attrs["summaries"]),
                          config_text=group["config"][()].decode(),
                          geometry_hash=str(group.attrs["geometry_hash"]))


# --------------------------------------------------------------------------------------------
# Landings CSV

LANDING_COLUMNS = (
    ("beam", str), ("ray", np.int64), ("status", str), ("electrode", str),
    ("x_mm", np.float64), ("y_mm", np.float64), ("z_mm", np.float64), ("r_mm", np.float64),
    ("t_ns", np.float64), ("energy_eV", np.float64), ("ux", np.float64), ("uy", np.float64),
    ("uz", np.float64), ("ledger_eV", np.float64), ("start_energy_eV", np.float64),
)
"""Columns of ``landings.csv``: the unit of every quantity is in its name (direction cosines ux,
uy, uz are unitless; r is the distance from the z axis)."""

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
