"""Grid kernels for the stencil of ``stencil.py``: right-hand side, residual, red–black Gauss–Seidel.

The operator kernels take ``op = (kind, table, owner, arm, arm_owner, geo, edges)``: the node kinds
and regular-node table of ``stencil.py``, the Raster arrays, and ``stencil_params``.  REGULAR nodes
use the table; CUT nodes evaluate their Shortley–Weller arms.  The unknown ``u`` is the homogeneous
part of the solution (zero on fixed nodes).
"""

import numpy as np
from numba import njit, prange

from .stencil import CUT, FIXED, arm_coefficients, end_owner, is_fixed, neighbour, on_surface


@njit(cache=True, parallel=True)
def add_boundary(b, values, owner, arm, arm_owner, geo, edges):
    """Turn a source array into the right-hand side: ``b += sum_k c_k V_k``, zero on fixed nodes.

    Parameters
    ----------
    b : float64[nz, nr]
        The source term f on entry (rho / epsilon_0 for Poisson, zeros for Laplace), changed in place.
    values : float64[n_electrodes]
        Voltage of each electrode; the sum runs over the arms that end on a conductor.
    """
    nz, nr = owner.shape
    for iz in prange(nz):
        for ir in range(nr):
            if is_fixed(iz, ir, nz, nr, owner, edges):
                b[iz, ir] = 0.0
                continue
            c = arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges)
            s = b[iz, ir]
            for k in range(4):
                if c[k] > 0.0:
                    e = end_owner(iz, ir, k, owner, arm, arm_owner)
                    if e >= 0:
                        s += c[k] * values[e]
            b[iz, ir] = s


@njit(cache=True, inline="always")
def _regular(iz, ir, u, table):
    """sum_k c_k u_k of a REGULAR node."""
    s = table[0, ir] * (u[iz + 1, ir] + u[iz - 1, ir])
    return s + table[1, ir] * u[iz, ir + 1] + table[2, ir] * u[iz, ir - 1]


@njit(cache=True)
def _cut(iz, ir, u, owner, arm, arm_owner, geo, edges):
    """(d, sum_k c_k u_k) of a CUT node, the sum over the arms that end on nodes."""
    nz, nr = owner.shape
    c = arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges)
    s = 0.0
    for k in range(4):
        if c[k] > 0.0 and not on_surface(arm, arm_owner, iz, ir, k):
            jz, jr = neighbour(iz, ir, k)
            s += c[k] * u[jz, jr]
    return c[0] + c[1] + c[2] + c[3], s


@njit(cache=True, inline="always")
def _node(iz, ir, u, kind, table, owner, arm, arm_owner, geo, edges):
    """(d, sum_k c_k u_k) of a free node: the table for REGULAR nodes, the arms for CUT ones."""
    if kind[iz, ir] == CUT:
        return _cut(iz, ir, u, owner, arm, arm_owner, geo, edges)
    return table[3, ir], _regular(iz, ir, u, table)


@njit(cache=True, parallel=True)
def residual(u, b, out, kind, table, owner, arm, arm_owner, geo, edges):
    """Write ``out = b - A u`` (zero on fixed nodes) and return the 2-norm of ``D^-1 out``.

    The diagonal scaling makes the norm a sum of node values (volts), so nodes with very short
    arms, whose rows carry very large coefficients, do not dominate it.
    """
    nz, nr = owner.shape
    total = 0.0
    for iz in prange(nz):
        for ir in range(nr):
            if kind[iz, ir] == FIXED:
                out[iz, ir] = 0.0
                continue
            d, s = _node(iz, ir, u, kind, table, owner, arm, arm_owner, geo, edges)
            res = b[iz, ir] - d * u[iz, ir] + s
            out[iz, ir] = res
            total += (res / d) ** 2
    return np.sqrt(total)


@njit(cache=True, parallel=True)
def scaled_norm(b, kind, table, owner, arm, arm_owner, geo, edges):
    """The 2-norm of ``D^-1 b`` over the free nodes (the scale of ``residual``)."""
    nz, nr = owner.shape
    total = 0.0
    for iz in prange(nz):
        for ir in range(nr):
            if kind[iz, ir] == FIXED:
                continue
            if kind[iz, ir] == CUT:
                c = arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges)
                d = c[0] + c[1] + c[2] + c[3]
            else:
                d = table[3, ir]
            total += (b[iz, ir] / d) ** 2
    return np.sqrt(total)


@njit(cache=True, parallel=True)
def _half_sweep(colour, u, b, kind, table, owner, arm, arm_owner, geo, edges):
    nz, nr = owner.shape
    for iz in prange(nz):
        for ir in range((iz + colour) % 2, nr, 2):
            if kind[iz, ir] == FIXED:
                continue
            d, s = _node(iz, ir, u, kind, table, owner, arm, arm_owner, geo, edges)
            u[iz, ir] = (b[iz, ir] + s) / d


@njit(cache=True)
def smooth(sweeps, u, b, kind, table, owner, arm, arm_owner, geo, edges):
    """Red–black Gauss–Seidel sweeps on ``A u = b`` in place (red: iz + ir even)."""
    for _ in range(sweeps):
        _half_sweep(0, u, b, kind, table, owner, arm, arm_owner, geo, edges)
        _half_sweep(1, u, b, kind, table, owner, arm, arm_owner, geo, edges)


@njit(cache=True, parallel=True)
def add_fixed(u, values, owner):
    """Add the electrode voltages on the electrode nodes: ``u += values[owner]`` where owner >= 0."""
    nz, nr = owner.shape
    for iz in prange(nz):
        for ir in range(nr):
            if owner[iz, ir] >= 0:
                u[iz, ir] += values[owner[iz, ir]]
