"""The stencil of ``stencil.py`` as a scipy sparse matrix over the free nodes."""

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from tracer.jit import njit
from .stencil import FIXED, REGULAR, operator


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
def _csr(rows, index, table, cuts):
    nz, nr = index.shape
    n_free = rows.max() + 1
    ptr = np.zeros(n_free + 1, dtype=np.int64)
    cols = np.empty(8 * n_free, dtype=np.int64)
    vals = np.empty(8 * n_free)
    dz = (1, -1, 0, 0, 0, 2, -2, 0)
    dr = (0, 0, 1, -1, 0, 0, 0, 2)
    n = 0
    for iz in range(nz):
        for ir in range(nr):
            row = rows[iz, ir]
            if row < 0:
                continue
            j = index[iz, ir]
            if j == REGULAR:
                c = (table[0, ir], table[0, ir], table[1, ir], table[2, ir], table[3, ir], 0.0, 0.0, 0.0)
            else:  # the cut table's columns without 1 / d
                c = (cuts[j, 0], cuts[j, 1], cuts[j, 2], cuts[j, 3], cuts[j, 4], cuts[j, 6], cuts[j, 7],
                     cuts[j, 8])
            cols[n] = row
            vals[n] = c[4]
            n += 1
            for k in (0, 1, 2, 3, 5, 6, 7):
                if c[k] != 0.0:
                    col = rows[iz + dz[k], ir + dr[k]]
                    if col >= 0:
                        cols[n] = col
                        vals[n] = -c[k]
                        n += 1
            ptr[row + 1] = n
    return ptr, cols[:n], vals[:n]


def system_matrix(op):
    """The free-node system of a kernel operator ``op = (index, table, cuts)``."""
    free = op[0] != FIXED
    n_free = int(free.sum())
    rows = np.full(free.shape, -1, dtype=np.int64)
    rows[free] = np.arange(n_free)
    if n_free == 0:
        return LinearSystem(matrix=sp.csr_matrix((0, 0)), free=free)
    ptr, cols, vals = _csr(rows, *op)
    return LinearSystem(matrix=sp.csr_matrix((vals, cols, ptr), shape=(n_free, n_free)), free=free)


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
        ``relax.add_boundary`` gathered with ``LinearSystem.gather``.
    """
    return system_matrix(operator(grid, raster)[0])
