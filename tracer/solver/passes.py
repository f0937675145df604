"""Fused multigrid passes: a prolongation, red–black sweeps and a residual in one pass over the rows.

A pass applies a sequence of row stages, each of which reads the rows up to two away from the one
it writes (two for the fourth-order axis rows of ``stencil.py``) as left by the stage before:

1. optionally ``u += P coarse_u`` (the coarse-grid correction),
2. ``sweeps`` red–black Gauss–Seidel sweeps (red: iz + ir even), two half-sweep stages each,
3. optionally the residual ``b - A u``, adding up its diagonally scaled norm and, on request,
   restricting it onto the coarse level (``coarse_b = R (b - A u)``).

Stage q runs on row i right after stage q - 1 ran on row i + 2 (a wavefront), so the few rows a
pass works on stay in cache and every array is read once per pass instead of once per stage.
The result is the same, to the last bit, as running each stage over the whole grid in turn, rows
in order (nodes of one colour couple only along the axis rows, two nodes apart).
"""

import numpy as np

from tracer.jit import njit
from .relax import residual_row, sweep_row
from .transfer import prolong_row, restrict_row

NO_RESIDUAL = 0
NORM = 1  # the residual's scaled norm only
RESTRICT = 2  # the norm, and the residual restricted onto the coarse level


@njit(cache=True, nogil=True)
def fused_pass(sweeps, u, b, index, table, cuts, prolong, mode, coarse_u, coarse_b, coarse_index,
               zlo, zw, zwlo, zwhi, rlo, rw, rwlo, rwhi):
    """Run one pass (see the module notes) on ``A u = b``, updating ``u`` in place.

    Parameters
    ----------
    sweeps : int
        Red–black Gauss–Seidel sweeps.
    u, b : float64[nz, nr]
        The unknown (zero on fixed nodes) and the right-hand side.
    index, table, cuts
        The level's operator (``stencil.operator``).
    prolong : bool
        First add the bilinear interpolation of ``coarse_u`` on the free nodes.
    mode : int
        NO_RESIDUAL, NORM or RESTRICT (``coarse_b`` is overwritten with the restricted residual,
        zero on the fixed nodes of ``coarse_index``).
    zlo, zw, zwlo, zwhi, rlo, rw, rwlo, rwhi
        ``transfer.Axis1D.arrays()`` along z and r, from the coarse level to this one.

    Returns
    -------
    float
        The 2-norm of ``D^-1 (b - A u)`` after the sweeps (0.0 for NO_RESIDUAL).
    """
    nz, nr = u.shape
    first = 1 if prolong else 0
    n_stages = first + 2 * sweeps + (0 if mode == NO_RESIDUAL else 1)
    row = np.empty(nr)
    half = np.empty(coarse_b.shape[1])
    if mode == RESTRICT:
        coarse_b[...] = 0.0
    total = 0.0
    for t in range(nz + 2 * (n_stages - 1)):
        for q in range(max(0, (t - nz + 2) // 2), min(n_stages, t // 2 + 1)):
            i = t - 2 * q
            if q < first:
                prolong_row(i, coarse_u, u, index, zlo, zw, rlo, rw)
            elif q < first + 2 * sweeps:
                sweep_row(i, (q - first) % 2, u, b, index, table, cuts)
            else:
                total += residual_row(i, u, b, row, index, table, cuts)
                if mode == RESTRICT:
                    restrict_row(i, row, half, coarse_b, coarse_index, zlo, zwlo, zwhi, rlo, rwlo, rwhi)
    return np.sqrt(total)
