"""Transfer between two grid levels of the same extent (not necessarily nested).

Prolongation is bilinear interpolation of the coarse correction at the fine nodes; restriction is
its transpose with each coarse row scaled to unit weight, i.e. a weighted average of the fine
residuals around each coarse node.  Both are tensor products of 1-D operators, applied here one
fine row at a time.
"""

from dataclasses import dataclass

import numpy as np

from tracer.jit import njit
from .stencil import FIXED


@dataclass(frozen=True)
class Axis1D:
    """1-D interpolation from a coarse to a fine node row and its normalized transpose.

    Attributes
    ----------
    lo, w : int64[n_fine], float64[n_fine]
        Fine node i lies between coarse nodes lo[i] and lo[i] + 1, at fraction w[i].
    wlo, whi : float64[n_fine]
        Restriction weights of fine node i on coarse nodes lo[i] and lo[i] + 1: the interpolation
        weights 1 - w[i] and w[i], divided by the total weight each coarse node receives.
    """

    lo: np.ndarray
    w: np.ndarray
    wlo: np.ndarray
    whi: np.ndarray

    def arrays(self):
        """``(lo, w, wlo, whi)``, the kernels' arguments."""
        return self.lo, self.w, self.wlo, self.whi


def axis_transfer(n_fine, n_coarse):
    """Build the 1-D transfer between ``n_fine`` and ``n_coarse`` equally spaced nodes of one extent."""
    s = np.arange(n_fine) * ((n_coarse - 1) / (n_fine - 1))
    lo = np.minimum(np.floor(s).astype(np.int64), n_coarse - 2)
    w = s - lo
    sums = np.bincount(lo, weights=1.0 - w, minlength=n_coarse) + np.bincount(lo + 1, weights=w, minlength=n_coarse)
    return Axis1D(lo=lo, w=w, wlo=(1.0 - w) / sums[lo], whi=w / sums[lo + 1])


@njit(cache=True, nogil=True)
def prolong_row(iz, coarse, fine, fine_index, zlo, zw, rlo, rw):
    """``fine += P coarse`` on the free nodes of fine row ``iz``."""
    i = zlo[iz]
    a = zw[iz]
    for ir in range(fine.shape[1]):
        if fine_index[iz, ir] == FIXED:
            continue
        j = rlo[ir]
        b = rw[ir]
        fine[iz, ir] += (1.0 - a) * ((1.0 - b) * coarse[i, j] + b * coarse[i, j + 1]) + a * (
            (1.0 - b) * coarse[i + 1, j] + b * coarse[i + 1, j + 1]
        )


@njit(cache=True, nogil=True)
def restrict_row(iz, row, half, coarse, coarse_index, zlo, zwlo, zwhi, rlo, rwlo, rwhi):
    """Add fine row ``iz`` (values ``row``) restricted to the free coarse nodes: ``coarse += R row``.

    ``half`` is work space of one coarse row; ``coarse`` must start at zero and receives every
    fine row once.
    """
    half[:] = 0.0
    for ir in range(row.size):
        j = rlo[ir]
        half[j] += rwlo[ir] * row[ir]
        half[j + 1] += rwhi[ir] * row[ir]
    i = zlo[iz]
    for i_c, weight in ((i, zwlo[iz]), (i + 1, zwhi[iz])):
        if weight == 0.0:
            continue
        for j in range(half.size):
            if coarse_index[i_c, j] != FIXED:
                coarse[i_c, j] += weight * half[j]
