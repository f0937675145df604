"""Transfer between two grid levels of the same extent (not necessarily nested).

Prolongation is bilinear interpolation of the coarse correction at the fine nodes; restriction is
its transpose with each coarse row scaled to unit weight, i.e. a weighted average of the fine
residuals around each coarse node.  Both are tensor products of 1-D operators.
"""

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from .relax import PARALLEL_NODES


@dataclass(frozen=True)
class Axis1D:
    """1-D interpolation from a coarse to a fine node row and its normalized transpose.

    Attributes
    ----------
    lo, w : int64[n_fine], float64[n_fine]
        Fine node i lies between coarse nodes lo[i] and lo[i] + 1, at fraction w[i].
    ptr, idx, weight : CSR rows (one per coarse node) of the restriction.
    """

    lo: np.ndarray
    w: np.ndarray
    ptr: np.ndarray
    idx: np.ndarray
    weight: np.ndarray


def axis_transfer(n_fine, n_coarse):
    """Build the 1-D transfer between ``n_fine`` and ``n_coarse`` equally spaced nodes of one extent."""
    s = np.arange(n_fine) * ((n_coarse - 1) / (n_fine - 1))
    lo = np.minimum(np.floor(s).astype(np.int64), n_coarse - 2)
    w = s - lo
    rows = np.concatenate([lo, lo + 1])
    cols = np.concatenate([np.arange(n_fine), np.arange(n_fine)])
    vals = np.concatenate([1.0 - w, w])
    keep = vals > 0.0
    rows, cols, vals = rows[keep], cols[keep], vals[keep]
    order = np.lexsort((cols, rows))
    rows, cols, vals = rows[order], cols[order], vals[order]
    sums = np.bincount(rows, weights=vals, minlength=n_coarse)
    ptr = np.concatenate([[0], np.cumsum(np.bincount(rows, minlength=n_coarse))]).astype(np.int64)
    return Axis1D(lo=lo, w=w, ptr=ptr, idx=cols.astype(np.int64), weight=vals / sums[rows])


@njit(cache=True, inline="always")
def _prolong_row(iz, coarse, fine, fine_free, zlo, zw, rlo, rw):
    i = zlo[iz]
    a = zw[iz]
    for ir in range(fine.shape[1]):
        if not fine_free[iz, ir]:
            continue
        j = rlo[ir]
        b = rw[ir]
        fine[iz, ir] += (1.0 - a) * ((1.0 - b) * coarse[i, j] + b * coarse[i, j + 1]) + a * (
            (1.0 - b) * coarse[i + 1, j] + b * coarse[i + 1, j + 1]
        )


@njit(cache=True, parallel=True)
def prolong_add(coarse, fine, fine_free, zlo, zw, rlo, rw):
    """``fine += P coarse`` on the free fine nodes."""
    if fine.size >= PARALLEL_NODES:
        for iz in prange(fine.shape[0]):
            _prolong_row(iz, coarse, fine, fine_free, zlo, zw, rlo, rw)
    else:
        for iz in range(fine.shape[0]):
            _prolong_row(iz, coarse, fine, fine_free, zlo, zw, rlo, rw)


@njit(cache=True, inline="always")
def _restrict_r(iz, fine, half, rptr, ridx, rwt):
    for j in range(half.shape[1]):
        s = 0.0
        for q in range(rptr[j], rptr[j + 1]):
            s += rwt[q] * fine[iz, ridx[q]]
        half[iz, j] = s


@njit(cache=True, inline="always")
def _restrict_z(i, half, coarse, coarse_free, zptr, zidx, zwt):
    for j in range(coarse.shape[1]):
        s = 0.0
        if coarse_free[i, j]:
            for p in range(zptr[i], zptr[i + 1]):
                s += zwt[p] * half[zidx[p], j]
        coarse[i, j] = s


@njit(cache=True, parallel=True)
def restrict(fine, half, coarse, coarse_free, zptr, zidx, zwt, rptr, ridx, rwt):
    """``coarse = R fine`` on the free coarse nodes (zero on fixed ones), first along r into
    ``half`` (fine rows by coarse columns), then along z."""
    if fine.size >= PARALLEL_NODES:
        for iz in prange(fine.shape[0]):
            _restrict_r(iz, fine, half, rptr, ridx, rwt)
        for i in prange(coarse.shape[0]):
            _restrict_z(i, half, coarse, coarse_free, zptr, zidx, zwt)
    else:
        for iz in range(fine.shape[0]):
            _restrict_r(iz, fine, half, rptr, ridx, rwt)
        for i in range(coarse.shape[0]):
            _restrict_z(i, half, coarse, coarse_free, zptr, zidx, zwt)
