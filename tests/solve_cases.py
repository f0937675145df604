"""Geometry builders shared by the solver tests."""

import math

import numpy as np

from tracer.config import Arc, Domain, Electrode
from tracer.geometry import Raster, rasterize, shape_table
from tracer.grid import Grid
from tracer.solver.multigrid import build_hierarchy, iterate
from tracer.solver.relax import add_fixed, boundary_rhs


def setup(symmetry, z_m, r_m, cell_m, edges, electrodes):
    """(grid, table) for a domain and a list of (name, shapes) electrodes."""
    domain = Domain(symmetry=symmetry, z_m=z_m, r_m=r_m, cell_m=cell_m, edges=edges)
    els = tuple(Electrode(name=n, voltage_V=0.0, shapes=tuple(s)) for n, s in electrodes)
    return Grid.from_domain(domain), shape_table(els, domain)


def spheres(a, b, cells_per_radius):
    """A solid ball of radius a ("ball") inside a shell of inner radius b ("shell"), axial."""
    pi = math.pi
    return setup(
        "axial",
        (-1.05 * b, 1.05 * b),
        (0.0, 1.05 * b),
        a / cells_per_radius,
        ("ground", "ground", "axis", "ground"),
        [("ball", [Arc(0.0, (0.0, a), (0.0, pi))]), ("shell", [Arc(0.0, (b, 2.0 * b), (0.0, pi))])],
    )


def staircase(raster):
    """The raster with every arm forced to reach the neighbour node (no distance weighting)."""
    nz, nr = raster.owner.shape
    pad = np.pad(raster.owner, 1, constant_values=-1)
    neighbours = np.stack(
        [pad[2:, 1:-1], pad[:-2, 1:-1], pad[1:-1, 2:], pad[1:-1, :-2]], axis=-1
    )
    return Raster(
        owner=raster.owner,
        arm=np.ones((nz, nr, 4)),
        arm_owner=np.where(raster.owner[..., None] < 0, neighbours, -1),
        cell=raster.cell,
    )


def solve(grid, table, values, *, rtol=1e-10, transform=None, source=None, max_cycles=60):
    """Node potential for electrode voltages ``values``; ``transform`` edits every level's raster."""
    edit = transform or (lambda r: r)
    raster = edit(rasterize(table, grid))
    h = build_hierarchy(grid, raster, lambda g: edit(rasterize(table, g)))
    values = np.asarray(values, dtype=np.float64)
    b = boundary_rhs(h.levels[0].op, h.levels[0].geometry, values, source=source)
    u = np.zeros(grid.shape)
    history = iterate(h, u, b, rtol=rtol, max_cycles=max_cycles)
    add_fixed(u, values, raster.owner)
    return u, raster, history
