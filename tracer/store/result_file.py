"""The field and the traced beams in one openPMD 1.1.0 HDF5 file (``result.h5``).

``write_result`` writes the potential and field meshes (and the magnetic field's, with magnetic
sources) and, for every beam, its start states,
final states and plane crossings as particle species (layout at ``write_result``);
``read_result`` reads them back, each beam as the :class:`tracer.beam.BeamRun` the trace
returned (records, crossings, paths, planes, the ledger report from the stored per-ray energy
scale and threshold).  The node potential is stored, not the Hermite data: ``read_result``
rebuilds the interpolant from it (equal to rounding).
"""

from __future__ import annotations

import dataclasses
import json
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import constants

from tracer import ledger
from tracer.beam import STATUS, BeamRun, run_context
from tracer.display import Shown, rays_png, run_facts
from tracer.fieldmap import PotentialMap, map_hermite
from tracer.geometry import Raster, ShapeTable
from tracer.grid import Grid
from tracer.measure import CrossingRule
from tracer.species import Species
from tracer.store import StoreError, openpmd
from tracer.store.hdf5 import plain, read_array, read_fields, tracer_group, write_fields
from tracer.store.openpmd import (CHARGE, CURRENT, DIMENSIONLESS, ELECTRIC_FIELD, ENERGY, LENGTH, MAGNETIC_FIELD,
                                  MASS, MESHES_PATH, MOMENTUM, PARTICLES_PATH, POTENTIAL, TIME, particle_patches,
                                  particle_record, read_component, text)
from tracer.store.trust import check_count, check_dtype, check_geometry, check_name, check_summaries, printable
from tracer.store.uncertainty_table import write_uncertainty

RESULT_GROUP = "tracer/result"
RESULT_FORMAT = "tracer-result-2"

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


def _write_species(particles, name, rows, species, weighting, codes, attrs):
    """One openPMD particle species from state records (fields as in ``BeamRun.records``)."""
    group = particles.create_group(name)
    for key, value in attrs.items():
        group.attrs[key] = text(value)
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
            particle_record(group, record, values, n, attrs={
                "codes": json.dumps(codes[field]),
                "comment": text(f"the ray's {field} as an integer code; the attribute codes (JSON) "
                                "maps each code to its name, -1 to none")})
        elif field != "plane":            # a crossing species is a single plane (attribute)
            particle_record(group, record, rows[field], n,
                            *_RECORD_UNITS.get(record, (DIMENSIONLESS, 1.0, 0.0, 0)))
    for record, components in vectors.items():
        particle_record(group, record, components, n, *_RECORD_UNITS[record])
    particle_record(group, "positionOffset", {c: 0.0 for c in "xyz"}, n, LENGTH)
    particle_record(group, "charge", species.charge_C, n, CHARGE, weighting_power=1.0)
    particle_record(group, "mass", species.mass_kg, n, MASS, weighting_power=1.0)
    particle_record(group, "weighting", weighting[rows["ray"]], n, weighting_power=1.0, macro_weighted=1)
    particle_patches(group, rows)


def _read_species(group, dtype) -> np.ndarray:
    """State records of a species written by ``_write_species`` (dtype from the file's names)."""
    n = check_count(read_array(group["particlePatches/numParticles"]).reshape(-1)[0], dtype.itemsize,
                    f"{group.name} numParticles", group.file.filename)
    out = np.zeros(n, dtype=dtype)
    for field in dtype.names:
        if field == "plane":
            out[field] = group.attrs["plane"].decode()
            continue
        record, component = _FIELD_RECORDS.get(field, (field, None))
        values = read_component(group[record] if component is None else group[record][component])
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


def write_result(path, field, runs, *, setup=None, summaries=None, author=None, magnetic=None) -> Path:
    """Write the field and the traced beams to one openPMD 1.1.0 HDF5 file (atomically).

    Layout::

        /data/0/meshes/phi                   potential at the grid nodes (V)
        /data/0/meshes/E                     field components z and r (axial, thetaMode m = 0) or
                                             z and y (planar), V/m, at the grid nodes
        /data/0/meshes/B                     with magnetic sources, the magnetic field (T) at the
                                             grid nodes: z and r of the coils and axial fields
                                             (axial), x, y and z of the uniform fields (planar;
                                             :func:`tracer.magnetics.units.node_field`)
        /data/0/particles/<beam>_start       start state of every ray
        /data/0/particles/<beam>_final       final state of every ray
        /data/0/particles/<beam>_at_<plane>  every crossing of a detector plane
        /tracer/result                       outside the openPMD base path: electrode names and
                                             voltages, grid, shape table and raster, the summaries
                                             (JSON), the config text and geometry hash, and per beam
                                             (JSON) its species, species names, record dtypes,
                                             ledger threshold, lost crossings and which crossings
                                             of each plane count (direction, crossing)
        /tracer/result/paths/<k>/<i>         the kept path of ray i of the k-th beam
        /tracer/result/energy_scale_eV/<k>   the k-th beam's per-ray energy scale of the ledger
        /tracer/result/work_eV/<k>           with voltages in time, the k-th beam's per-ray energy
                                             from them, q (∫∂V/∂t dt + jumps) (``BeamRun.work_eV``)
        /tracer/result/start_potential_V/<k> the potential at each start point of the k-th beam
                                             (its rays' energy reference)
        /tracer/result/uncertainty/<k>       the k-th beam's error bars, a row per figure, when
                                             its summary has them (:mod:`tracer.store.uncertainty_table`)

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
        Author and contact, the openPMD ``author`` attribute; default ``setup.author``, else
        :func:`tracer.store.openpmd.default_author`.
    magnetic : tuple, optional
        The magnetic sources the beams were traced through (:func:`tracer.magnetics.units.traced_sources`);
        default the setup's at its currents.

    Returns
    -------
    Path
    """
    from tracer.magnetics.units import node_field, traced_sources

    runs = list(runs.values()) if isinstance(runs, Mapping) else list(runs)
    summaries = dict(summaries) if summaries is not None else {run.name: run.summary() for run in runs}
    grid = field.grid
    if magnetic is None and setup is not None:
        magnetic = traced_sources(setup.magnetic, grid)
    zz, rr = np.meshgrid(grid.z, grid.r, indexing="ij")
    ez, er = field.field(zz, rr)
    side = "r" if grid.symmetry == "axial" else "y"
    # status: the tracer's end codes, -1 for a start state; electrode: its index, -1 for none
    codes = {"status": {-1: "", **STATUS}, "electrode": {-1: "", **dict(enumerate(field.names))}}
    candidates = []
    for run in runs:
        beam = openpmd.identifier(run.name)
        candidates += [f"{beam}_start", f"{beam}_final"] + [f"{beam}_at_{openpmd.identifier(p)}" for p in run.planes]
    species_names = iter(openpmd.unique_names(candidates))
    author = author or (setup.author if setup else None)
    with openpmd.openpmd_file(path, author=author, particles=True) as (f, it):
        openpmd.write_mesh(it, "phi", field.potential(zz, rr), grid, POTENTIAL,
                           attrs={"comment": text("electrostatic potential at the grid nodes")})
        openpmd.write_mesh(it, "E", {"z": ez, side: er}, grid, ELECTRIC_FIELD,
                           attrs={"comment": text("electric field -grad(phi) at the grid nodes")})
        if b := node_field(magnetic, grid):
            openpmd.write_mesh(it, "B", b, grid, MAGNETIC_FIELD,
                               attrs={"comment": text("magnetic field at the grid nodes, as the rays saw it")})
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
            group.create_dataset(f"energy_scale_eV/{k}", data=np.asarray(run.energy_scale_eV, np.float64))
            if run.work_eV is not None:
                group.create_dataset(f"work_eV/{k}", data=np.asarray(run.work_eV, np.float64))
            group.create_dataset(f"start_potential_V/{k}", data=np.asarray(run.start_potential_V, np.float64))
            if "uncertainty" in summaries.get(run.name, {}):
                write_uncertainty(group, k, summaries[run.name])
            beams.append({"name": run.name, "species": [run.species.name, run.species.mass_kg,
                                                        run.species.charge_C],
                          "start": start, "final": final, "planes": planes,
                          "dtypes": {key: _dtype_names(getattr(run, key))
                                     for key in ("starts", "records", "crossings")},
                          "ledger_threshold": run.ledger.threshold,
                          "crossing_rules": [[r.direction, r.crossing] for r in run.crossing_rules],
                          "time_zero_s": run.time_zero_s, "tilted_planes": list(run.tilted_planes)})
        group.attrs["format"] = RESULT_FORMAT
        group.attrs["names"] = json.dumps(list(field.names))
        group.attrs["voltages"] = np.asarray(field.voltages, dtype=np.float64)
        group.attrs["beams"] = json.dumps(beams)
        group.attrs["summaries"] = json.dumps(summaries, default=plain)
        group.attrs["title"] = setup.title if setup else ""
        group.attrs["geometry_hash"] = setup.geometry_hash() if setup else ""
        source = setup.source if setup else None
        group.create_dataset("config", data=source.read_text() if source and source.is_file() else "")
        for key, obj in (("grid", grid), ("table", field.table), ("raster", field.raster)):
            write_fields(group.create_group(key), obj)
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


@dataclass(frozen=True, repr=False)
class ResultFile(Shown):
    """What ``read_result`` reads: the field, every beam as the BeamRun its trace returned, and
    what the setup and the run's summaries were (``field``, ``beams`` and ``summary()`` as on the
    :class:`tracer.pipeline.RunResult` of the run).

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
    b : dict of str to float64[nz, nr]
        Node magnetic field (T) by component ("z", "r" in axial symmetry, "x", "y", "z" in
        planar), {} when the run had no magnetic field to store.
    beams : dict of str to tracer.beam.BeamRun
        By beam name, in the order they were written.
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
    b: dict = dataclasses.field(default_factory=dict)

    @property
    def grid(self) -> Grid:
        """The node grid of the meshes."""
        return self.field.grid

    def summary(self) -> dict:
        """Each beam's summary as the run stored it, by beam name (as ``RunResult.summary()``)."""
        return self.summaries

    def _facts(self):
        return {"path": str(self.path)} | run_facts(self.title, self.field, self.beams.values())

    def _figure_png(self):
        return rays_png(self.field, list(self.beams.values()), title=self.title)


_NEEDED = ("ray", "status", "time_s", "x_m", "y_m", "z_m", "px", "py", "pz", "energy_eV")
"""Fields every state record of a result file has."""


def _time_zero(about):
    """The beam's ``time_zero_s`` (:class:`tracer.beam.BeamRun`): None when the file says null (the
    arrival times count from each ray's start), 0 in a file written before the key."""
    value = about.get("time_zero_s", 0.0)
    return None if value is None else float(value)


def _read_beam(group, particles, k, about, symmetry) -> BeamRun:
    """The k-th beam of a result file, ``about`` its entry in the beams JSON; its names, record
    types and ray indices checked as a file from elsewhere needs (:mod:`tracer.store.trust`)."""
    path = group.file.filename
    check_name(about["name"], "beam", path)
    for plane in about["planes"]:
        check_name(plane, "plane", path)
    dtypes = {key: check_dtype(names, f"beam {about['name']!r} {key}", path)
              for key, names in about["dtypes"].items()}
    for key in ("starts", "records", "crossings"):
        if not set(_NEEDED) <= set(dtypes[key].names):
            raise StoreError(f"{path}: beam {about['name']!r} {key} lacks a field of {list(_NEEDED)}")
    crossing_dtype = check_dtype(about["dtypes"]["crossings"] + [["row", "<i8"]], "crossings", path)
    parts = [_read_species(particles[s], crossing_dtype) for s in about["planes"].values()]
    crossings = np.concatenate(parts) if parts else np.zeros(0, crossing_dtype)
    crossings = crossings[np.argsort(crossings["row"], kind="stable")]
    records = _read_species(particles[about["final"]], dtypes["records"])
    scale = read_array(group[f"energy_scale_eV/{k}"])
    report = ledger.ledger_report(records["ledger_eV"], scale, about["ledger_threshold"],
                                  traced=records["status"] != "inside")
    paths = group[f"paths/{k}"]
    starts = _read_species(particles[about["start"]], dtypes["starts"])
    n = len(records)
    if len(starts) != n or not np.array_equal(records["ray"], np.arange(n)) \
            or not np.array_equal(starts["ray"], np.arange(n)) or scale.shape != (n,) \
            or (len(crossings) and (crossings["ray"].min() < 0 or crossings["ray"].max() >= n)):
        raise StoreError(f"{path}: beam {about['name']!r}: its starts, records, crossings and energy "
                         "scale do not agree in rays")
    return BeamRun(name=about["name"], species=Species(*about["species"]),
                   starts=starts, records=records,
                   crossings=_copy_fields(crossings, dtypes["crossings"]),
                   paths=tuple(read_array(paths[str(i)]) for i in range(len(paths))),
                   planes=tuple(about["planes"]), ledger=report, energy_scale_eV=scale,
                   symmetry=symmetry,
                   crossing_rules=tuple(CrossingRule(*r) for r in about.get("crossing_rules", ())),
                   work_eV=read_array(group[f"work_eV/{k}"]) if f"work_eV/{k}" in group else None,
                   time_zero_s=_time_zero(about),
                   tilted_planes=tuple(about.get("tilted_planes", ())))


def read_result(path: str | os.PathLike) -> ResultFile:
    """Read a result file written by ``write_result``: its beams as BeamRuns.

    Raises
    ------
    StoreError
        When the file is missing, truncated, corrupt, not a tracer result file, or of another
        format (an earlier version's ``tracer-result-1`` lacks the ledger's energy scale).
    """
    with tracer_group(path, RESULT_GROUP, RESULT_FORMAT, "result") as (f, group):
        grid = read_fields(group["grid"], Grid)
        table = read_fields(group["table"], ShapeTable)
        raster = read_fields(group["raster"], Raster)
        it = f[openpmd.iteration_path()]
        phi = openpmd.read_mesh(it, "phi", grid)
        e = openpmd.read_mesh(it, "E", grid)
        b = openpmd.read_mesh(it, "B", grid) if f"{MESHES_PATH}B" in it else {}
        voltages = group.attrs["voltages"]
        names = tuple(json.loads(group.attrs["names"]))
        if not isinstance(b, dict) or not set(b) <= set("zr" if grid.symmetry == "axial" else "xyz"):
            raise StoreError(f"{path}: the magnetic field mesh's components are not those of its symmetry")
        check_geometry(path, grid, table, raster, names, voltages,
                       {"the potential mesh": phi} | {f"the field mesh {c}": v for c, v in e.items()}
                       | {f"the magnetic field mesh {c}": v for c, v in b.items()})
        hermite = map_hermite(grid, raster, phi, voltages)
        field = PotentialMap(grid, table, raster, names,
                             tuple(voltages.tolist()), hermite)
        beams = {}
        for k, about in enumerate(json.loads(group.attrs["beams"])):
            run = _read_beam(group, it[PARTICLES_PATH], k, about, grid.symmetry)
            context = run_context(field, run.starts)
            if f"start_potential_V/{k}" in group:    # as traced, not from the rebuilt interpolant
                context["start_potential_V"] = read_array(group[f"start_potential_V/{k}"])
            if run.work_eV is not None:                # voltages in time: no landing energy implied
                context["electrode_voltages"] = {}
            beams[about["name"]] = dataclasses.replace(run, **context)
        return ResultFile(path=Path(path), title=printable(group.attrs["title"]), field=field, phi=phi,
                          e_z=e["z"], e_r=e["r" if grid.symmetry == "axial" else "y"], beams=beams,
                          summaries=check_summaries(json.loads(group.attrs["summaries"]), beams, path),
                          config_text=read_array(group["config"]).decode(),
                          geometry_hash=str(group.attrs["geometry_hash"]), b=b)
