"""Geometric multigrid for the Shortley–Weller system: V-cycles over rediscretized levels.

Each coarser level is ``Grid.coarsen()`` of the one above, with the geometry rasterized again on it,
so every level carries its own Shortley–Weller operator.  Smoothing is red–black Gauss–Seidel,
transfer is bilinear interpolation and its normalized transpose, and the coarsest level is solved
directly with a sparse LU factorization.  The work on a level runs in two fused passes
(``passes.fused_pass``): smoothing, residual and restriction; then the correction, smoothing and
(on the finest level) the residual norm for the convergence test.
"""

import threading
from dataclasses import dataclass

import numpy as np
import scipy.sparse.linalg as spla

from tracer.interrupts import check

from . import passes, relax
from .assemble import system_matrix
from .stencil import operator
from .transfer import axis_transfer

COARSEST_NODES = 10_000
"""Coarsening stops at the first level with at most this many nodes.  Far coarser levels no
longer resolve thin electrodes, and the cycles converge more slowly (about 0.2 instead of 0.1 per
cycle on the three-tube lens of the solver benchmark with a 82 x 14 coarsest grid)."""
MIN_CELLS = 4

_NONE = np.zeros((0, 0))
_NO_INDEX = np.zeros((0, 0), dtype=np.int32)
_NO_TRANSFER = (np.zeros(0, dtype=np.int64), np.zeros(0), np.zeros(0), np.zeros(0))


class SolveError(RuntimeError):
    """The iteration did not reach the requested residual; no map is returned."""


@dataclass(frozen=True)
class Level:
    """One grid level: its stencil data.

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


def _level(grid, raster, coarse):
    op, geometry = operator(grid, raster)
    # coarse levels need only their operator: drop their Raster arrays
    return Level(grid=grid, op=op, geometry=None if coarse else geometry)


@dataclass(frozen=True)
class Hierarchy:
    """The levels from fine to coarse, the transfers between them and the coarsest factorization.

    A hierarchy is read-only while solving; each solve brings its own ``workspace()``, so several
    threads may solve on one hierarchy at once.
    """

    levels: tuple
    transfers: tuple  # (z Axis1D, r Axis1D) from level l + 1 to level l
    coarse_lu: object
    coarse_free: np.ndarray
    coarse_lock: object  # serializes the sparse LU solves on the coarsest level
    pre: int
    post: int

    def workspace(self):
        """Work arrays of one solve: ``(u, b)`` of every level below the finest."""
        return tuple((np.zeros(lv.grid.shape), np.zeros(lv.grid.shape)) for lv in self.levels[1:])


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
        coarse_lu=lu,
        coarse_free=system.free,
        coarse_lock=threading.Lock(),
        pre=pre,
        post=post,
    )


def _coarsest(h, u, b):
    u[...] = 0.0
    if h.coarse_lu is not None:
        with h.coarse_lock:
            u[h.coarse_free] = h.coarse_lu.solve(b[h.coarse_free])


def residual_norm(h, u, b):
    """The 2-norm of ``D^-1 (b - A u)`` on the fine level (D the diagonal of A)."""
    return passes.fused_pass(0, u, b, *h.levels[0].op, False, passes.NORM, _NONE, _NONE, _NO_INDEX,
                             *_NO_TRANSFER, *_NO_TRANSFER)


def vcycle(h, work, u, b, level=0):
    """One V-cycle on ``A u = b`` at ``level``, updating ``u`` in place.

    Parameters
    ----------
    h : Hierarchy
    work : tuple
        ``h.workspace()``.
    u, b : float64[nz, nr]
        The unknown and right-hand side on ``level``.

    Returns
    -------
    float
        The 2-norm of ``D^-1 (b - A u)`` after the cycle on the finest level (level 0), else 0.0.
    """
    lv = h.levels[level]
    if level == len(h.levels) - 1:
        _coarsest(h, u, b)
        return residual_norm(h, u, b) if level == 0 else 0.0
    co = h.levels[level + 1]
    cu, cb = work[level]
    tz, tr = (t.arrays() for t in h.transfers[level])
    passes.fused_pass(h.pre, u, b, *lv.op, False, passes.RESTRICT, _NONE, cb, co.op[0], *tz, *tr)
    cu[...] = 0.0
    vcycle(h, work, cu, cb, level + 1)
    mode = passes.NORM if level == 0 else passes.NO_RESIDUAL
    return passes.fused_pass(h.post, u, b, *lv.op, True, mode, cu, _NONE, _NO_INDEX, *tz, *tr)


def iterate(h, u, b, *, rtol=1e-10, max_cycles=60, work=None):
    """V-cycles from the guess ``u`` until ``|D^-1 (b - A u)| <= rtol |D^-1 b|``.

    D is the diagonal of A (see ``residual_norm``).  ``work`` is ``h.workspace()`` (made here
    if not given).

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
    work = h.workspace() if work is None else work
    history = [residual_norm(h, u, b) / bnorm if u.any() else 1.0]
    while history[-1] > rtol:
        if len(history) > max_cycles:
            raise SolveError(
                f"no convergence in {max_cycles} multigrid cycles: relative residual "
                f"{history[-1]:.3e} > {rtol:.1e}"
            )
        check()   # a Ctrl-C Python lost in a kernel's call or its compile
        rel = vcycle(h, work, u, b) / bnorm
        history.append(rel)
        if not np.isfinite(rel) or rel > 1e3 * history[0]:
            raise SolveError(f"multigrid diverged: relative residual {rel:.3e} after {len(history) - 1} cycles")
        if len(history) > 6 and rel > 0.5 * history[-6]:
            raise SolveError(
                f"multigrid stagnated at relative residual {rel:.3e} after {len(history) - 1} cycles"
            )
    return np.asarray(history)
