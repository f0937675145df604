"""Geometric multigrid for the Shortley–Weller system: V-cycles over rediscretized levels.

Each coarser level is ``Grid.coarsen()`` of the one above, with the geometry rasterized again on it,
so every level carries its own Shortley–Weller operator.  Smoothing is red–black Gauss–Seidel,
transfer is bilinear interpolation and its normalized transpose, and the coarsest level is solved
directly with a sparse LU factorization.
"""

from dataclasses import dataclass

import numpy as np
import scipy.sparse.linalg as spla

from . import relax
from .assemble import assemble
from .stencil import FIXED, node_kinds, regular_table, stencil_params
from .transfer import axis_transfer, prolong_add, restrict

COARSEST_NODES = 2500
MIN_CELLS = 4


class SolveError(RuntimeError):
    """The iteration did not reach the requested residual; no map is returned."""


@dataclass(frozen=True)
class Level:
    """One grid level: its raster, stencil data (see ``relax``) and work arrays."""

    grid: object
    raster: object
    op: tuple
    free: np.ndarray
    res: np.ndarray
    u: np.ndarray
    b: np.ndarray


def operator(grid, raster):
    """The kernel argument tuple ``op`` of ``relax`` for a grid and its raster."""
    geo, edges = stencil_params(grid)
    kind = node_kinds(raster.owner, raster.arm, raster.arm_owner, edges)
    table = regular_table(grid.nr, geo, edges)
    return kind, table, raster.owner, raster.arm, raster.arm_owner, geo, edges


@dataclass(frozen=True)
class Hierarchy:
    """The levels from fine to coarse, the transfers between them and the coarsest factorization."""

    levels: tuple
    transfers: tuple  # (z Axis1D, r Axis1D) from level l + 1 to level l
    coarse_lu: object
    coarse_free: np.ndarray
    pre: int
    post: int


def _level(grid, raster, work):
    op = operator(grid, raster)
    shape = (grid.nz, grid.nr)
    res = np.zeros(shape)
    u = np.zeros(shape) if work else res[:0]
    b = np.zeros(shape) if work else res[:0]
    return Level(grid=grid, raster=raster, op=op, free=op[0] != FIXED, res=res, u=u, b=b)


def build_hierarchy(grid, raster, rasterize_level, *, pre=2, post=2):
    """Build the multigrid levels below a fine grid.

    Parameters
    ----------
    grid : tracer.grid.Grid
        The fine grid.
    raster : tracer.geometry.Raster
        The geometry on the fine grid.
    rasterize_level : callable
        ``rasterize_level(coarse_grid) -> Raster`` for the coarser levels.
    pre, post : int
        Red–black Gauss–Seidel sweeps before and after the coarse-grid correction.
    """
    levels = [_level(grid, raster, work=False)]
    transfers = []
    g = grid
    while g.nz * g.nr > COARSEST_NODES and min(g.nz, g.nr) - 1 >= 2 * MIN_CELLS:
        c = g.coarsen()
        levels.append(_level(c, rasterize_level(c), work=True))
        transfers.append((axis_transfer(g.nz, c.nz), axis_transfer(g.nr, c.nr)))
        g = c
    last = levels[-1]
    system = assemble(last.grid, last.raster)
    try:
        lu = spla.splu(system.matrix.tocsc()) if system.matrix.shape[0] else None
    except RuntimeError as err:  # a singular coarsest system: no fixed node anchors the potential
        raise SolveError(f"the coarsest grid system cannot be factorized ({err})") from None
    return Hierarchy(
        levels=tuple(levels),
        transfers=tuple(transfers),
        coarse_lu=lu,
        coarse_free=system.free,
        pre=pre,
        post=post,
    )


def _coarsest(h, u, b):
    u[...] = 0.0
    if h.coarse_lu is not None:
        u[h.coarse_free] = h.coarse_lu.solve(b[h.coarse_free])


def vcycle(h, u, b, level=0):
    """One V-cycle on ``A u = b`` at ``level``, updating ``u`` in place."""
    lv = h.levels[level]
    if level == len(h.levels) - 1:
        _coarsest(h, u, b)
        return
    relax.smooth(h.pre, u, b, *lv.op)
    relax.residual(u, b, lv.res, *lv.op)
    co = h.levels[level + 1]
    tz, tr = h.transfers[level]
    restrict(lv.res, co.b, co.free, tz.ptr, tz.idx, tz.weight, tr.ptr, tr.idx, tr.weight)
    co.u[...] = 0.0
    vcycle(h, co.u, co.b, level + 1)
    prolong_add(co.u, u, lv.free, tz.lo, tz.w, tr.lo, tr.w)
    relax.smooth(h.post, u, b, *lv.op)


def iterate(h, u, b, *, rtol=1e-10, max_cycles=60):
    """V-cycles from the guess ``u`` until ``|D^-1 (b - A u)| <= rtol |D^-1 b|``.

    D is the diagonal of A (see ``relax.residual``).

    Returns
    -------
    float64[n_cycles + 1]
        Relative residual before the first cycle and after each one.

    Raises
    ------
    SolveError
        When the residual grows, stops falling (less than a factor 2 over five cycles), or
        ``max_cycles`` pass without reaching ``rtol``.
    """
    lv = h.levels[0]
    bnorm = relax.scaled_norm(b, *lv.op)
    if bnorm == 0.0:
        u[...] = 0.0
        return np.zeros(1)
    history = [relax.residual(u, b, lv.res, *lv.op) / bnorm]
    while history[-1] > rtol:
        if len(history) > max_cycles:
            raise SolveError(
                f"no convergence in {max_cycles} multigrid cycles: relative residual "
                f"{history[-1]:.3e} > {rtol:.1e}"
            )
        vcycle(h, u, b)
        rel = relax.residual(u, b, lv.res, *lv.op) / bnorm
        history.append(rel)
        if not np.isfinite(rel) or rel > 1e3 * history[0]:
            raise SolveError(f"multigrid diverged: relative residual {rel:.3e} after {len(history) - 1} cycles")
        if len(history) > 6 and rel > 0.5 * history[-6]:
            raise SolveError(
                f"multigrid stagnated at relative residual {rel:.3e} after {len(history) - 1} cycles"
            )
    return np.asarray(history)
