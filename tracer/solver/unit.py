"""Unit maps (one electrode at 1 V, the others and the ground edges at 0 V) and Poisson solves."""

import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from numba import get_num_threads
from scipy.constants import epsilon_0

from ..geometry import Raster, rasterize
from . import relax
from .multigrid import SolveError, build_hierarchy, iterate


@dataclass(frozen=True, eq=False)
class UnitSolution:
    """The unit maps of a geometry on a grid.

    Attributes
    ----------
    unit : float64[n_electrodes, nz, nr]
        Unit map k: the potential with electrode k at 1 V and all other electrodes and the ground
        edges at 0 V, node values in volts.
    raster : tracer.geometry.Raster
        The geometry on the grid the maps were solved on.
    history : tuple of float64 arrays
        Per electrode, the relative residual before the first multigrid cycle and after each one.
    """

    unit: np.ndarray
    raster: Raster
    history: tuple


def _solve(hierarchy, u, b, rtol, max_cycles, what, work=None):
    try:
        return iterate(hierarchy, u, b, rtol=rtol, max_cycles=max_cycles, work=work)
    except SolveError as err:
        raise SolveError(f"{what}: {err}") from None


def _in_threads(fn, items, workers):
    """``fn(item)`` for each item on up to ``workers`` threads, yielded in order.

    The solver kernels release the GIL, so independent solves run in parallel without the
    fork-join of a parallel kernel at every pass (which costs a scheduler wake-up per pass when
    another process shares the cores).  The first failure is raised once the running calls end.
    """
    if workers <= 1:
        yield from map(fn, items)
        return
    with ThreadPoolExecutor(max_workers=workers) as pool:
        futures = [pool.submit(fn, item) for item in items]
        try:
            for future in futures:
                yield future.result()
        finally:
            for future in futures:
                future.cancel()


def solve_unit_maps(grid, table, *, rtol=1e-10, max_cycles=60, progress=None):
    """Solve Laplace's equation once per electrode with that electrode at 1 V.

    Parameters
    ----------
    grid : tracer.grid.Grid
        The node grid.
    table : tracer.geometry.ShapeTable
        The electrodes; unit map k belongs to ``table.names[k]``.
    rtol : float
        Required relative residual (diagonally scaled 2-norm, see ``multigrid.iterate``).
    max_cycles : int
        Most multigrid cycles per electrode.
    progress : callable, optional
        Called as ``progress(done, total)`` once at the start and as each unit map is finished
        (in the order they finish, from the thread that solved it, one call at a time).

    Returns
    -------
    UnitSolution

    Raises
    ------
    SolveError
        When an electrode's map does not converge; the message names the electrode.
    """
    raster = rasterize(table, grid)
    hierarchy = build_hierarchy(grid, raster, lambda g: rasterize(table, g))
    fine = hierarchy.levels[0]
    n = len(table.names)
    unit = np.zeros((n, grid.nz, grid.nr))
    local = threading.local()  # per thread: one right-hand side array and workspace, reused
    finished = [0]
    lock = threading.Lock()

    def one(k):
        if not hasattr(local, "b"):
            local.b = np.empty((grid.nz, grid.nr))
            local.work = hierarchy.workspace()
        values = np.eye(n)[k]
        local.b[...] = 0.0
        relax.add_boundary(local.b, values, fine.op[0], fine.op[1], *fine.geometry)
        what = f"unit map of electrode {table.names[k]!r}"
        history = _solve(hierarchy, unit[k], local.b, rtol, max_cycles, what, local.work)
        relax.add_fixed(unit[k], values, raster.owner)
        if progress is not None:
            with lock:
                finished[0] += 1
                progress(finished[0], n)
        return history

    if progress is not None:
        progress(0, n)
    history = list(_in_threads(one, range(n), min(n, get_num_threads())))
    return UnitSolution(unit=unit, raster=raster, history=tuple(history))


def solve_poisson(grid, table, rho, raster=None, *, rtol=1e-10, max_cycles=60):
    """Solve Poisson's equation for a space charge with every electrode and ground edge at 0 V.

    Parameters
    ----------
    grid : tracer.grid.Grid
    table : tracer.geometry.ShapeTable
    rho : float64[nz, nr]
        Charge density in C/m^3 at the nodes (ignored on electrode and ground-edge nodes).
    raster : tracer.geometry.Raster, optional
        The geometry on ``grid`` if already rasterized.
    rtol, max_cycles
        As for ``solve_unit_maps``.

    Returns
    -------
    float64[nz, nr]
        The potential of the charge in volts.

    Raises
    ------
    SolveError
        When the iteration does not converge.
    """
    rho = np.asarray(rho, dtype=np.float64)
    if rho.shape != (grid.nz, grid.nr):
        raise ValueError(f"rho has shape {rho.shape}, the grid has {(grid.nz, grid.nr)}")
    if raster is None:
        raster = rasterize(table, grid)
    hierarchy = build_hierarchy(grid, raster, lambda g: rasterize(table, g))
    fine = hierarchy.levels[0]
    b = relax.boundary_rhs(fine.op, fine.geometry, np.zeros(len(table.names)), source=rho / epsilon_0)
    u = np.zeros((grid.nz, grid.nr))
    _solve(hierarchy, u, b, rtol, max_cycles, "space-charge potential")
    return u
