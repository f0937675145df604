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
from .assemble import system_matrix
from .stencil import FIXED, operator, surface_band
from .transfer import axis_transfer, prolong_add, restrict

COARSEST_NODES = 2500
MIN_CELLS = 4
BAND_WIDTH = 2  # nodes around conductors that get extra Gauss–Seidel passes


class SolveError(RuntimeError):
    """The iteration did not reach the requested residual; no map is returned."""


@dataclass(frozen=True)
class Level:
    """One grid level: its stencil data (see ``relax``), surface band and work arrays.

    Attributes
    ----------
    op : tuple
        ``(index, table, cuts)``, the operator arguments of the ``relax`` kernels.
    geometry : tuple or None
        ``(owner, arm, arm_owner, geo, edges)``, the Raster arrays and ``stencil_params`` (fine
        level only, for right-hand sides).
    """

    grid: object
    op: tuple
    geometry: tuple
    free: np.ndarray
    band: np.ndarray
    res: np.ndarray
    u: np.ndarray
    b: np.ndarray


def _level(grid, raster, coarse):
    op, geometry = operator(grid, raster)
    index = op[0]
    shape = (grid.nz, grid.nr)
    res = np.zeros(shape)
    u = np.zeros(shape) if coarse else res[:0]  # the fine level works on the caller's arrays
    b = np.zeros(shape) if coarse else res[:0]
    band = surface_band(index, raster.owner, raster.arm, raster.arm_owner, BAND_WIDTH)
    free = index != FIXED
    # coarse levels need only their operator: drop their Raster arrays
    return Level(grid=grid, op=op, geometry=None if coarse else geometry, free=free, band=band, res=res, u=u, b=b)


@dataclass(frozen=True)
class Hierarchy:
    """The levels from fine to coarse, the transfers between them and the coarsest factorization."""

    levels: tuple
    transfers: tuple  # (z Axis1D, r Axis1D) from level l + 1 to level l
    halves: tuple  # work arrays (fine nz, coarse nr) of the restriction from level l to l + 1
    coarse_lu: object
    coarse_free: np.ndarray
    pre: int
    post: int
    band: int


def build_hierarchy(grid, raster, rasterize_level, *, pre=2, post=2, band=1):
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
    band : int
        Extra symmetric Gauss–Seidel passes over the nodes near conductors, before the restriction
        and after the correction.
    """
    levels = [_level(grid, raster, coarse=False)]
    transfers = []
    g = grid
    while g.nz * g.nr > COARSEST_NODES and min(g.nz, g.nr) - 1 >= 2 * MIN_CELLS:
        c = g.coarsen()
        levels.append(_level(c, rasterize_level(c), coarse=True))
        transfers.append((axis_transfer(g.nz, c.nz), axis_transfer(g.nr, c.nr)))
        g = c
    last = levels[-1]
    system = system_matrix(last.op)
    try:
        lu = spla.splu(system.matrix.tocsc()) if system.matrix.shape[0] else None
    except RuntimeError as err:  # a singular coarsest system: no fixed node anchors the potential
        raise SolveError(f"the coarsest grid system cannot be factorized ({err})") from None
    return Hierarchy(
        levels=tuple(levels),
        transfers=tuple(transfers),
        halves=tuple(np.zeros((lv.grid.nz, co.grid.nr)) for lv, co in zip(levels, levels[1:])),
        coarse_lu=lu,
        coarse_free=system.free,
        pre=pre,
        post=post,
        band=band,
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
    relax.band_sweeps(h.band, lv.band, u, b, *lv.op)
    relax.residual(u, b, lv.res, *lv.op)
    co = h.levels[level + 1]
    tz, tr = h.transfers[level]
    restrict(lv.res, h.halves[level], co.b, co.free, tz.ptr, tz.idx, tz.weight, tr.ptr, tr.idx, tr.weight)
    co.u[...] = 0.0
    vcycle(h, co.u, co.b, level + 1)
    prolong_add(co.u, u, lv.free, tz.lo, tz.w, tr.lo, tr.w)
    relax.band_sweeps(h.band, lv.band, u, b, *lv.op)
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
    history = [relax.residual(u, b, lv.res, *lv.op) / bnorm if u.any() else 1.0]
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
