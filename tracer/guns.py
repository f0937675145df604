"""Electron (and ion) guns: emission from a cathode, iterated with the beam's own space charge.

The emitting area
    The cathode is the electrode named by ``[gun] cathode``.  Its outline in the (z, r) half-plane
    is walked in pieces of a tenth of a cell; a piece emits when its outward normal points
    downstream (n_z > 0: the face towards the anode, not the back or a side wall), the space just
    in front of it is free (not inside another shape, e.g. a focusing electrode at cathode
    potential that covers the rim) and inside the domain, and the vacuum field accelerates the
    emitted particles there.  To leave a part of a cathode out, cover it with an electrode at the
    cathode's voltage.

Emission sites
    ``rays`` sites divide the emitting outline into parts of equal length, each site at its
    part's centre of area and standing for the part's area A (2 pi r ds in axial symmetry, ds per
    unit length in planar): equal lengths keep as many rays near the axis as elsewhere, where
    equal areas left the few rings near the axis to sample the space charge there (on a
    spherical diode at 50 cells per radius, 2 rays a cell, that cost 0.1 % of the current).  The
    ray of a site starts at the distance d = ``EMIT_CELLS`` cells in front of the surface, along
    the normal, with the kinetic energy it gained from the cathode, and carries J A, J from
    :func:`tracer.emission.emission_density` with the potential at d and the surface's local
    curvature there (:func:`tracer.emission.curvature_factor`): the in-plane curvature of the
    outline (1 / radius on an arc, positive where the cathode is convex, 0 on a polygon's edges)
    and, in axial symmetry, the curvature of the circle the piece sweeps about the axis, n_r / r
    (Meusnier's theorem); in planar symmetry the surface is straight along x.  In axial symmetry the rays
    are turned to golden-angle azimuths (the fields are axisymmetric, so this changes nothing but
    lets the x-x' statistics at the planes see a round beam).

Self-consistency
    Each iteration evaluates the emission in the present field, traces the rays, deposits their
    charge (:mod:`tracer.deposit`, with the layer between the surface and d filled as the
    emission law's potential profile prescribes), solves Poisson's equation with every electrode
    at 0 V (:func:`tracer.solver.solve_poisson`) and under-relaxes the space-charge potential,
    phi <- (1 - w) phi + w phi_new.  The field is the electrode maps plus the space-charge map.
    The iteration has converged when the total current changes by less than ``tolerance``
    (relative) from one iteration to the next; the rays of the last iteration are the run.  An
    iteration that emits nothing (the space charge of an overshoot has pushed the potential in
    front of the cathode below the cathode's: the vacuum field draws several times the limited
    current, so the first space charge is several times too strong) takes the step again with
    half the relaxation, from the potential before it, and keeps the halved relaxation from then
    on; only a cathode that emits nothing in the vacuum field ends the run at once.

Units: currents in A (planar symmetry: A per metre of length in x, both halves of a mirrored
domain counted); the perveance in A/V^1.5 (planar: A m^-1 V^-1.5).
"""

from __future__ import annotations

import dataclasses
import math
import os
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from tracer import emission
from tracer.deposit import charge_density
from tracer.display import Shown, number, rays_png
from tracer.fieldmap import BasisMaps, map_hermite
from tracer.geometry import electrode_at
from tracer.schema import Setup
from tracer.stats import radius

EMIT_CELLS = 2.0
"""Distance d of the ray starts from the cathode surface, in cells."""

OUTLINE_CELLS = 0.1
"""Length of the pieces the cathode outline is walked in, in cells."""

LAYER_POINTS = 65
"""Path points of the charge layer between the surface and each ray's start.  The deposit takes
the charge between two points as spread evenly along the segment, while the layer's density goes
as x^(-2/3): with 9 points a planar Child-Langmuir diode (5 mm gap, 0.1 mm cells) drew 0.21 %
too little current, with 33 points 0.04 %, with 65 points 0.03 %."""

PARALLEL_CELLS = 8.0
"""Distance from each ray's site, in cells, within which the deposit's weights follow the flow
and take the curves of constant charge density as parallel to the cathode's outline
(:func:`tracer.deposit.charge_density`).  On the spherical diode with exact rays, the current
came out the same (to 0.01 %) with 8 cells, 16 cells or the whole path at 25 to 100 cells per
radius, and 0.08 % low at 50 with straight curves."""

POISSON_RTOL = 1e-8
"""Relative residual of each space-charge solve."""

GOLDEN_ANGLE = math.pi * (3.0 - math.sqrt(5.0))

EMISSION_DTYPE = np.dtype([
    ("z_m", np.float64), ("r_m", np.float64),            # the site on the cathode surface
    ("normal_z", np.float64), ("normal_r", np.float64),  # outward unit normal there
    ("area_m2", np.float64),                             # emitting area the site stands for (m per m in planar)
    ("curvature_per_m", np.float64),                     # k1 + k2 of the surface there, > 0 convex
    ("outline_curvature_per_m", np.float64),             # the outline's own (in the z-r plane), > 0 convex
    ("gaussian_curvature_per_m2", np.float64),           # k1 k2
    ("voltage_V", np.float64),                           # accelerating potential at the ray start
    ("density_A_per_m2", np.float64),
    ("current_A", np.float64),
    ("limited", np.bool_),                               # space-charge-limited (else temperature-limited)
    ("ray", np.int64),                                   # index of the site's ray in the run, -1 if not emitting
])

HISTORY_DTYPE = np.dtype([("current_A", np.float64), ("change", np.float64)])


@dataclass(frozen=True, eq=False, repr=False)
class GunResult(Shown):
    """A converged (or not) self-consistent gun run.

    Attributes
    ----------
    current_A : float
        Total emitted current, A (planar: A/m).
    perveance_A_per_V1p5 : float
        current / V^1.5 with V the largest accelerating voltage between the cathode and any other
        electrode (or a ground edge).
    voltage_V : float
        That voltage.
    iterations : int
        Emission evaluations made (the last one is the run).
    converged : bool
        Whether the current changed by less than the tolerance.
    history : numpy.ndarray
        Per iteration, ``current_A`` and its relative ``change`` from the previous one (NaN first).
    field : tracer.fieldmap.PotentialMap
        The self-consistent field: electrode maps plus the space-charge map.
    space_charge_V : float64[nz, nr]
        The space-charge potential at the nodes (electrodes at 0 V).
    run : tracer.beam.BeamRun
        The emitted rays traced through ``field``.
    emission : numpy.ndarray
        One row per emission site (``EMISSION_DTYPE``): position, normal, area, potential at the
        start, current density, current, whether space-charge-limited, its ray.
    crossover_z_m, crossover_radius_m : float or None
        Where the current-weighted rms radius of the rays that leave the gun is smallest, and that
        radius; None when the smallest is at either end of the range (no waist in the domain).
    warning : str
        Why the run is doubtful ("" when it is not).
    """

    current_A: float
    perveance_A_per_V1p5: float
    voltage_V: float
    iterations: int
    converged: bool
    history: np.ndarray
    field: object
    space_charge_V: np.ndarray
    run: object
    emission: np.ndarray
    crossover_z_m: float | None
    crossover_radius_m: float | None
    warning: str = ""

    def _facts(self):
        return {"current": number(self.current_A, "A"),
                "perveance": number(self.perveance_A_per_V1p5, "A/V^1.5"),
                "voltage": number(self.voltage_V, "V"), "iterations": str(self.iterations),
                "converged": str(self.converged), "emission sites": str(len(self.emission)),
                "crossover_z": number(self.crossover_z_m, "mm", 1e3),
                "crossover_radius": number(self.crossover_radius_m, "mm", 1e3)} | (
                {"warning": self.warning} if self.warning else {})

    def _figure_png(self):
        return None if self.run is None else rays_png(self.field, [self.run], title="gun")

    def paths_zr(self) -> list[np.ndarray]:
        """The rays' paths as (n, 2) arrays of (z, r) in metres (r is y in planar symmetry)."""
        if self.run is None:
            return []
        return [_path_zrt(p, self.field.grid.symmetry)[:, :2] for p in self.run.paths]


# ---------------------------------------------------------------------------------------------
# The cathode surface


def _polygon_pieces(points, step):
    """Outline pieces of a polygon: midpoints, outward normals and lengths."""
    closed = np.vstack([points, points[:1]])
    a, b = closed[:-1], closed[1:]
    orientation = np.sign(np.sum(a[:, 0] * b[:, 1] - b[:, 0] * a[:, 1])) or 1.0
    mids, normals, lengths = [], [], []
    for p, q in zip(a, b):
        edge = q - p
        length = float(np.hypot(*edge))
        if length == 0.0:
            continue
        n = max(1, math.ceil(length / step))
        f = (np.arange(n) + 0.5) / n
        mids.append(p + f[:, None] * edge)
        normal = orientation * np.array([edge[1], -edge[0]]) / length
        normals.append(np.tile(normal, (n, 1)))
        lengths.append(np.full(n, length / n))
    return mids, normals, lengths, [np.zeros(len(m)) for m in mids]


def _sector_pieces(row, step):
    """Outline pieces of a spherical sector (cz, rho_in, rho_out, theta_lo, theta_hi, cr), with their
    in-plane curvature (1 / rho on the outer arc, -1 / rho on the inner one, 0 on the sides)."""
    cz, rho_in, rho_out, lo, hi, cr = row
    mids, normals, lengths, bends = [], [], [], []
    for rho, sign in ((rho_out, 1.0), (rho_in, -1.0)):
        if rho <= 0.0:
            continue
        n = max(1, math.ceil(rho * (hi - lo) / step))
        theta = lo + (np.arange(n) + 0.5) * (hi - lo) / n
        radial = np.column_stack([np.cos(theta), np.sin(theta)])
        mids.append(np.column_stack([cz + rho * radial[:, 0], cr + rho * radial[:, 1]]))
        normals.append(sign * radial)
        lengths.append(np.full(n, rho * (hi - lo) / n))
        bends.append(np.full(n, sign / rho))
    n = max(1, math.ceil((rho_out - rho_in) / step))
    rho = rho_in + (np.arange(n) + 0.5) * (rho_out - rho_in) / n
    for theta, sign in ((lo, -1.0), (hi, 1.0)):
        radial = np.array([math.cos(theta), math.sin(theta)])
        mids.append(np.column_stack([cz + rho * radial[0], cr + rho * radial[1]]))
        normals.append(np.tile(sign * np.array([-radial[1], radial[0]]), (n, 1)))
        lengths.append(np.full(n, (rho_out - rho_in) / n))
        bends.append(np.zeros(n))
    return mids, normals, lengths, bends


def cathode_outline(table, index, step):
    """Pieces of the outline of electrode ``index``: midpoints (z, r), outward normals, lengths
    and in-plane curvatures.

    Parameters
    ----------
    table : tracer.geometry.ShapeTable
    index : int
        The electrode.
    step : float
        Longest piece, metres.

    Returns
    -------
    points, normals : float64[n, 2]
    lengths : float64[n]
    bends : float64[n]
        Curvature of the outline in the (z, r) plane, 1/m, positive where the electrode is convex.
    """
    mids, normals, lengths, bends = [], [], [], []
    for j in np.flatnonzero(table.owner == index):
        if table.kind[j] == 0:
            s, c = table.start[j], table.count[j]
            parts = _polygon_pieces(table.points[s:s + c], step)
        else:
            parts = _sector_pieces(table.sector[j], step)
        for whole, part in zip((mids, normals, lengths, bends), parts):
            whole.extend(part)
    if not lengths:
        return np.zeros((0, 2)), np.zeros((0, 2)), np.zeros(0), np.zeros(0)
    return np.vstack(mids), np.vstack(normals), np.concatenate(lengths), np.concatenate(bends)


def surface_curvatures(points, normals, bends, symmetry):
    """Sum and product of the principal curvatures of the cathode surface at outline points.

    In planar symmetry the surface is straight along x: the sum is the outline's curvature and
    the product 0.  In axial symmetry the second principal curvature is that of the circle the
    point sweeps about the axis, n_r / r (Meusnier's theorem; 1 / a on a sphere of radius a about
    a point of the axis, 1 / a on a tube's outer face, -1 / a on its inner face); on the axis
    itself it equals the outline's.

    Parameters
    ----------
    points, normals : float64[n, 2]
        Points (z, r) and outward unit normals.
    bends : float64[n]
        The outline's curvature there (:func:`cathode_outline`).
    symmetry : str

    Returns
    -------
    (sum, product) : float64[n] each
        k1 + k2 (1/m) and k1 k2 (1/m^2), the sum positive where the cathode is convex.
    """
    if symmetry != "axial":
        return bends.copy(), np.zeros_like(bends)
    r = points[:, 1]
    swept = np.divide(normals[:, 1], r, out=bends.copy(), where=r > 0.0)
    return bends + swept, bends * swept


def _free(table, grid, z, r):
    """True for points inside the domain and outside every electrode."""
    arrays = table.arrays()
    inside = (z >= grid.z0) & (z <= grid.z1) & (r >= grid.r0) & (r <= grid.r1)
    return inside & np.array([electrode_at(zk, rk, *arrays) < 0 for zk, rk in zip(z, r)], dtype=bool)


def _accelerating_voltage(field, cathode_V, charge_C, z, r):
    """Potential difference (V) that accelerates the species from the cathode to (z, r)."""
    return math.copysign(1.0, charge_C) * (cathode_V - field.potential(z, r))


def emission_sites(field, cathode, rays, distance, charge_C):
    """Sites dividing the cathode's emitting outline (module notes) into ``rays`` parts of equal length.

    Parameters
    ----------
    field : tracer.fieldmap.PotentialMap
        The vacuum field (it decides which faces the field extracts from).
    cathode : int
        Index of the cathode electrode.
    rays : int
        Number of sites.
    distance : float
        Distance of the ray starts from the surface, metres.
    charge_C : float
        Charge of the emitted particle.

    Returns
    -------
    numpy.ndarray
        ``EMISSION_DTYPE`` rows with position, normal, area and curvature filled in.

    Raises
    ------
    ValueError
        When no part of the cathode can emit.
    """
    grid, table = field.grid, field.table
    cell = min(grid.hz, grid.hr)
    points, normals, lengths, bends = cathode_outline(table, cathode, OUTLINE_CELLS * cell)
    probe = points + 0.05 * cell * normals
    start = points + distance * normals
    ok = (normals[:, 0] > 0.0) & _free(table, grid, *probe.T) & _free(table, grid, *start.T)
    ok[ok] = _accelerating_voltage(field, field.voltages[cathode], charge_C, *start[ok].T) > 0.0
    if not ok.any():
        raise ValueError(f"electrode {table.names[cathode]!r} has no face towards free space "
                         "where the field pulls the emitted particles off")
    points, normals, lengths, bends = points[ok], normals[ok], lengths[ok], bends[ok]
    area = 2.0 * math.pi * points[:, 1] * lengths if grid.symmetry == "axial" else lengths
    # the pieces follow the outline, so each part of equal length is a contiguous stretch of it
    along = np.concatenate(([0.0], np.cumsum(lengths)))
    swept = np.concatenate(([0.0], np.cumsum(area)))
    bounds = np.interp(np.arange(rays + 1) * along[-1] / rays, along, swept)
    k = np.minimum(np.searchsorted(swept[1:], 0.5 * (bounds[1:] + bounds[:-1])), len(area) - 1)
    out = np.zeros(rays, dtype=EMISSION_DTYPE)
    out["z_m"], out["r_m"] = points[k].T
    out["normal_z"], out["normal_r"] = normals[k].T
    out["area_m2"] = np.diff(bounds)
    out["outline_curvature_per_m"] = bends[k]
    out["curvature_per_m"], out["gaussian_curvature_per_m2"] = surface_curvatures(
        points[k], normals[k], bends[k], grid.symmetry)
    out["ray"] = -1
    return out


# ---------------------------------------------------------------------------------------------
# One iteration's pieces


def _evaluate_emission(sites, field, spec, cathode_V, distance):
    """Fill in each site's potential, current density and current in the present field."""
    sp = spec.species
    zs = sites["z_m"] + distance * sites["normal_z"]
    rs = sites["r_m"] + distance * sites["normal_r"]
    volts = _accelerating_voltage(field, cathode_V, sp.charge_C, zs, rs)
    surface_field = None
    if spec.schottky:
        ez, er = field.field(zs, rs)
        surface_field = math.copysign(1.0, sp.charge_C) * (ez * sites["normal_z"] + er * sites["normal_r"])
    density, limited = emission.emission_density(
        volts, distance, sp.mass_kg, sp.charge_C, temperature_K=spec.temperature_K,
        work_function_eV=spec.work_function_eV, surface_field_V_per_m=surface_field,
        curvature=_curvature(sites))
    out = sites.copy()
    out["voltage_V"] = volts
    out["density_A_per_m2"] = density
    out["current_A"] = density * sites["area_m2"]
    out["limited"] = limited
    out["ray"] = -1
    emitting = np.flatnonzero(out["current_A"] > 0.0)
    out["ray"][emitting] = np.arange(emitting.size)
    return out


def _curvature(sites):
    """The sites' (sum, product) of principal curvatures, as ``emission_density`` takes them."""
    return sites["curvature_per_m"], sites["gaussian_curvature_per_m2"]


def _start_rays(sites, distance, symmetry, mass_kg):
    """The emitting sites' rays: a distance in front of each site along its normal, with the
    kinetic energy gained across the layer and the site's current."""
    from tracer.sources import rays_from

    rows = sites[sites["ray"] >= 0]
    rs = rows["r_m"] + distance * rows["normal_r"]
    zs = rows["z_m"] + distance * rows["normal_z"]
    zero = np.zeros(len(rows))
    if symmetry == "axial":
        phi = GOLDEN_ANGLE * np.arange(len(rows))
        c, s = np.cos(phi), np.sin(phi)
        position = (rs * c, rs * s, zs)
        direction = (rows["normal_r"] * c, rows["normal_r"] * s, rows["normal_z"])
    else:
        position = (zero, rs, zs)
        direction = (zero, rows["normal_r"], rows["normal_z"])
    return rays_from(position, direction, rows["voltage_V"], rows["current_A"], mass_kg)


def _trace(field, setup, sites, distance, cache_dir=None):
    from tracer.beam import trace
    from tracer.config import Beam
    from tracer.magnetics.units import traced_sources

    sp = setup.gun.species
    beam = Beam(name="gun", species=sp, energy_eV=None, start_z_m=None, count=None)
    starts = _start_rays(sites, distance, field.grid.symmetry, sp.mass_kg)
    grid = field.grid
    opts = setup.trace
    return trace(field, beam, planes=setup.planes, rtol=opts.rtol, max_time_s=opts.max_time_s,
                 keep_paths=len(starts), max_path_points=max(4096, 4 * (grid.nz + grid.nr)),
                 ledger_threshold=opts.ledger_threshold, starts=starts,
                 magnetic=traced_sources(setup.magnetic, grid, cache_dir=cache_dir))


def _path_zrt(path, symmetry):
    """(z, r, t) columns of a ray path (r = hypot(x, y) in axial, y in planar)."""
    return np.column_stack([path["z_m"], radius(path, symmetry), path["time_s"]])


def _layer_paths(sites, distance, mass_kg, charge_C):
    """Paths across the layer between the surface and each ray's start (``emission.layer_transit``)."""
    rows = sites[sites["ray"] >= 0]
    limit = (emission.child_langmuir(rows["voltage_V"], distance, mass_kg, charge_C)
             * emission.curvature_factor(distance, *_curvature(rows)))
    alpha = emission.layer_exponent(rows["density_A_per_m2"], limit)
    speed = np.sqrt(2.0 * abs(charge_C) * rows["voltage_V"] / mass_kg)
    x, t = emission.layer_transit(distance, speed, alpha, LAYER_POINTS, _curvature(rows))
    z = rows["z_m"][:, None] + x * rows["normal_z"][:, None]
    r = rows["r_m"][:, None] + x * rows["normal_r"][:, None]
    return list(np.stack([z, r, t], axis=-1))


def space_charge_density(grid, run, sites, distance, species, raster=None):
    """Charge density (C/m^3) of the emitted rays: their paths plus the layers below the starts.

    Parameters
    ----------
    grid : tracer.grid.Grid
    run : tracer.beam.BeamRun
        The traced rays of the emitting sites (ray k of ``sites["ray"] == k``), all paths kept.
    sites : numpy.ndarray
        The evaluated emission sites.
    distance : float
        Distance of the ray starts from the surface, metres.
    species : tracer.species.Species
    raster : tracer.geometry.Raster, optional
        The electrodes on the grid: the deposit's weights and volumes follow their surfaces
        (:mod:`tracer.deposit`).

    Returns
    -------
    float64[nz, nr]
    """
    rows = sites[sites["ray"] >= 0]
    current = math.copysign(1.0, species.charge_C) * rows["current_A"]
    paths = [_path_zrt(p, grid.symmetry) for p in run.paths]
    paths += _layer_paths(sites, distance, species.mass_kg, species.charge_C)
    # near the cathode the density is constant on curves parallel to its outline
    bend = rows["outline_curvature_per_m"]
    return charge_density(grid, paths, np.concatenate([current, current]), raster,
                          np.concatenate([bend / (1.0 + bend * distance), bend]), PARALLEL_CELLS)


def _space_charge_map(field, phi):
    """Hermite data of a space-charge potential (every electrode at 0 V)."""
    return map_hermite(field.grid, field.raster, phi, np.zeros(len(field.names)))


# ---------------------------------------------------------------------------------------------
# Figures of merit


def gun_voltage(field, cathode, charge_C):
    """The largest voltage accelerating the species from the cathode to another electrode or a
    ground edge (0 V)."""
    others = [v for k, v in enumerate(field.voltages) if k != cathode]
    if "ground" in field.grid.edges:
        others.append(0.0)
    sign = math.copysign(1.0, charge_C)
    return max([sign * (field.voltages[cathode] - v) for v in others], default=0.0)


def crossover(run, current, symmetry, samples=400):
    """Waist of the rays that leave the gun: where their current-weighted rms radius is smallest.

    Parameters
    ----------
    run : tracer.beam.BeamRun
        All paths kept (ray k's path is ``run.paths[k]``).
    current : float64[n_rays]
        Current of each ray.
    symmetry : str
    samples : int
        Stations in z between the latest start and the earliest end of those rays.

    Returns
    -------
    (z, radius) : tuple of float, or (None, None)
        None when there are no such rays or the smallest radius is at either end of the range.
    """
    keep = [k for k in range(len(run.paths))
            if run.records["status"][k] not in ("landed", "inside") and current[k] > 0.0]
    if not keep:
        return None, None
    zr = []
    for k in keep:
        p = _path_zrt(run.paths[k], symmetry)
        forward = np.concatenate(([True], np.diff(p[:, 0]) > 0.0))
        stop = int(np.argmin(forward)) if not forward.all() else len(p)
        zr.append(p[:stop, :2])
    lo = max(p[0, 0] for p in zr)
    hi = min(p[-1, 0] for p in zr)
    if not hi > lo:
        return None, None
    z = np.linspace(lo, hi, samples)
    w = current[keep]
    r2 = np.array([np.interp(z, p[:, 0], p[:, 1]) ** 2 for p in zr])
    rms = np.sqrt(w @ r2 / w.sum())
    k = int(np.argmin(rms))
    if k in (0, samples - 1):
        return None, None
    return float(z[k]), float(rms[k])


# ---------------------------------------------------------------------------------------------
# The iteration


def gun(setup: Setup, *, maps: BasisMaps | None = None, cache_dir: str | os.PathLike | None = None,
        progress: Callable[[int, int], object] | None = None) -> GunResult:
    """Run a gun self-consistently: emission, tracing, space charge, until the current settles.

    Parameters
    ----------
    setup : tracer.config.Setup
        With a ``[gun]`` section; its ``[trace]`` options and planes are used for the rays.
    maps : tracer.fieldmap.BasisMaps, optional
        The electrodes' basis maps if solved before; else they are solved (and cached in
        ``cache_dir`` when given).
    cache_dir : str or os.PathLike, optional
        Folder of cached basis maps (and of the coils' unit fields).
    progress : callable, optional
        Called as ``progress(iteration, max_iterations)`` after each iteration, and with
        ``(max_iterations, max_iterations)`` when the iteration stops.

    Returns
    -------
    GunResult

    Raises
    ------
    tracer.config.ConfigError
        When the setup has no ``[gun]`` section.
    ValueError
        When the cathode has no face the field can draw particles from.

    Warns
    -----
    RuntimeWarning
        When the current has not converged within ``max_iterations``.
    """
    from tracer import footprint
    from tracer.config import ConfigError
    from tracer.pipeline import solve
    from tracer.solver import solve_poisson

    spec = setup.gun
    if spec is None:
        raise ConfigError("gun", "the setup has no [gun] section")
    footprint.check(setup, beams=False, gun=True)
    if maps is None:
        maps = solve(setup, cache_dir=cache_dir)
    vacuum = maps.combine()
    grid = vacuum.grid
    cathode = vacuum.names.index(spec.cathode)
    cathode_V = vacuum.voltages[cathode]
    sp = spec.species
    distance = EMIT_CELLS * min(grid.hz, grid.hr)
    blank = emission_sites(vacuum, cathode, spec.rays, distance, sp.charge_C)
    halves = 2.0 if grid.symmetry == "planar" and grid.mirror else 1.0

    phi = np.zeros(grid.shape)
    before = fresh = phi
    relaxation = spec.relaxation
    field = vacuum
    history = []
    converged = False
    for iteration in range(1, spec.max_iterations + 1):
        sites = _evaluate_emission(blank, field, spec, cathode_V, distance)
        total = float(sites["current_A"].sum())
        change = abs(total - history[-1][0]) / total if history and total > 0.0 else math.nan
        history.append((total, change))
        converged = change < spec.tolerance
        if total > 0.0:
            run = _trace(field, setup, sites, distance, cache_dir)
        if progress is not None and iteration < spec.max_iterations:
            progress(iteration, spec.max_iterations)
        # no current in the vacuum field: nothing to iterate; no current later: the space charge
        # of an overshoot has closed the cathode, and that step is taken again with half the weight
        if converged or (total == 0.0 and iteration == 1) or iteration == spec.max_iterations:
            break
        if total > 0.0:
            rho = space_charge_density(grid, run, sites, distance, sp, vacuum.raster)
            fresh = solve_poisson(grid, vacuum.table, rho, vacuum.raster, rtol=POISSON_RTOL)
            before = phi
        else:
            relaxation *= 0.5    # the last step closed the cathode: take it again, halved
        phi = (1.0 - relaxation) * before + relaxation * fresh
        field = dataclasses.replace(vacuum, hermite=vacuum.hermite + _space_charge_map(vacuum, phi))
    if progress is not None:
        progress(spec.max_iterations, spec.max_iterations)
    warning = ""
    if total == 0.0 and iteration == 1:
        warning = "the cathode emits nothing: no accelerating field in front of it"
        run = None
    elif total == 0.0:
        warning = (f"gun did not converge: the space charge still closed the cathode after "
                   f"{iteration} iterations")
        run = None
    elif not converged:
        warning = (f"gun did not converge: the current changed by {change:.2e} (relative) in the "
                   f"last of {iteration} iterations, tolerance {spec.tolerance:g}")
    if warning:
        warnings.warn(warning, RuntimeWarning, stacklevel=2)
    current = sites["current_A"][sites["ray"] >= 0]
    z_x, r_x = crossover(run, current, grid.symmetry) if run is not None else (None, None)
    volts = gun_voltage(vacuum, cathode, sp.charge_C)
    return GunResult(
        current_A=halves * total,
        perveance_A_per_V1p5=halves * total / volts**1.5 if volts > 0.0 else math.nan,
        voltage_V=volts,
        iterations=iteration,
        converged=converged and total > 0.0,
        history=np.array(history, dtype=HISTORY_DTYPE),
        field=field,
        space_charge_V=phi,
        run=run,
        emission=sites,
        crossover_z_m=z_x,
        crossover_radius_m=r_x,
        warning=warning,
    )
