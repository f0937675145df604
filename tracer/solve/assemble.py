"""The stencil of ``stencil.py`` as a scipy sparse matrix over the free nodes."""

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from numba import njit

from .stencil import FIXED, arm_coefficients, neighbour, node_kinds, on_surface, stencil_params


@dataclass(frozen=True)
class LinearSystem:
    """``matrix @ x = rhs`` restricted to the free nodes of a grid.

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix
        Minus the discrete Laplacian on the free nodes (n_free x n_free).
    free : bool[nz, nr]
        Mask of the free nodes; ``x`` is ``u[free]`` in C order.
    """

    matrix: sp.csr_matrix
    free: np.ndarray

    def gather(self, field):
        """Values of a node array at the free nodes."""
        return field[self.free]

    def scatter(self, x):
        """A node array holding ``x`` on the free nodes and zero elsewhere."""
        out = np.zeros(self.free.shape)
        out[self.free] = x
        return out


@njit(cache=True)
def _csr(index, owner, arm, arm_owner, geo, edges, n_free):
    nz, nr = owner.shape
    ptr = np.zeros(n_free + 1, dtype=np.int64)
    cols = np.empty(5 * n_free, dtype=np.int64)
    vals = np.empty(5 * n_free)
    n = 0
    for iz in range(nz):
        for ir in range(nr):
            row = index[iz, ir]
            if row < 0:
                continue
            c = arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges)
            cols[n] = row
            vals[n] = c[0] + c[1] + c[2] + c[3]
            n += 1
            for k in range(4):
                if c[k] > 0.0 and not on_surface(arm, arm_owner, iz, ir, k):
                    jz, jr = neighbour(iz, ir, k)
                    col = index[jz, jr]
                    if col >= 0:
                        cols[n] = col
                        vals[n] = -c[k]
                        n += 1
            ptr[row + 1] = n
    return ptr, cols[:n], vals[:n]


def assemble(grid, raster):
    """Assemble the free-node system of a grid and its raster.

    Parameters
    ----------
    grid : tracer.grid.Grid
    raster : tracer.geometry.Raster

    Returns
    -------
    LinearSystem
        The same operator the multigrid kernels apply; right-hand sides come from
        ``relax.boundary_rhs`` gathered with ``LinearSystem.gather``.
    """
    geo, edges = stencil_params(grid)
    free = node_kinds(raster.owner, raster.arm, raster.arm_owner, edges) != FIXED
    n_free = int(free.sum())
    index = np.full(free.shape, -1, dtype=np.int64)
    index[free] = np.arange(n_free)
    ptr, cols, vals = _csr(index, raster.owner, raster.arm, raster.arm_owner, geo, edges, n_free)
    matrix = sp.csr_matrix((vals, cols, ptr), shape=(n_free, n_free))
    return LinearSystem(matrix=matrix, free=free)
