"""Grid kernels for the stencil of ``stencil.py``: right-hand side, residual, Gauss–Seidel rows.

The operator kernels take ``op = (index, table, cuts)``: the node index (FIXED, REGULAR or a CUT
node's row), the regular-node table by radial index and the cut table, all from ``stencil.py``.
The unknown ``u`` is the homogeneous part of the solution (zero on fixed nodes).
"""

import numpy as np

from tracer.jit import njit
from .stencil import FIXED, REGULAR, arm_coefficients, end_owner

@njit(cache=True, inline="always")
def _value(owner, values):
    """Voltage of a node's electrode, 0 for a free node."""
    return values[owner] if owner >= 0 else 0.0


@njit(cache=True, nogil=True)
def add_boundary(b, values, index, table, owner, arm, arm_owner, geo, edges):
    """Turn a source array into the right-hand side: ``b += sum_k c_k V_k``, zero on fixed nodes.

    Parameters
    ----------
    b : float64[nz, nr]
        The source term f on entry (rho / epsilon_0 for Poisson, zeros for Laplace), changed in place.
    values : float64[n_electrodes]
        Voltage of each electrode; the sum runs over the arms that end on a conductor.
    index, table
        The node index and regular-node table of the level.
    owner, arm, arm_owner, geo, edges
        The Raster arrays and ``stencil_params`` of the level.
    """
    nz, nr = owner.shape
    for iz in range(nz):
        for ir in range(nr):
            j = index[iz, ir]
            if j == FIXED:
                b[iz, ir] = 0.0
                continue
            if j == REGULAR:  # whole arms: only conductor neighbour nodes contribute
                s = table[0, ir] * (_value(owner[iz + 1, ir], values) + _value(owner[iz - 1, ir], values))
                s += table[1, ir] * _value(owner[iz, ir + 1], values)
                b[iz, ir] += s + table[2, ir] * _value(owner[iz, ir - 1], values)
                continue
            c = arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges)
            s = b[iz, ir]
            for k in range(4):
                if c[k] > 0.0:
                    e = end_owner(iz, ir, k, owner, arm, arm_owner)
                    if e >= 0:
                        s += c[k] * values[e]
            b[iz, ir] = s


def boundary_rhs(op, geometry, values, source=None):
    """The right-hand side for electrode voltages ``values`` (and a source term f, if given).

    Parameters
    ----------
    op, geometry : tuple
        As returned by ``stencil.operator``.
    values : array_like
        Voltage of each electrode.
    source : float64[nz, nr], optional
        rho / epsilon_0 at the nodes.

    Returns
    -------
    float64[nz, nr]
    """
    shape = op[0].shape
    b = np.zeros(shape) if source is None else np.array(source, dtype=np.float64)
    add_boundary(b, np.asarray(values, dtype=np.float64), op[0], op[1], *geometry)
    return b


@njit(cache=True, inline="always")
def _node(iz, ir, u, index, table, cuts):
    """(d, 1 / d, sum_k c_k u_k) of a free node, the sum over the arms that end on nodes."""
    j = index[iz, ir]
    if j == REGULAR:
        s = table[0, ir] * (u[iz + 1, ir] + u[iz - 1, ir])
        return table[3, ir], table[4, ir], s + table[1, ir] * u[iz, ir + 1] + table[2, ir] * u[iz, ir - 1]
    nz, nr = u.shape
    # a zero coefficient marks an arm without a neighbour node; clamping keeps the index in range
    s = cuts[j, 0] * u[min(iz + 1, nz - 1), ir] + cuts[j, 1] * u[max(iz - 1, 0), ir]
    s += cuts[j, 2] * u[iz, min(ir + 1, nr - 1)] + cuts[j, 3] * u[iz, max(ir - 1, 0)]
    return cuts[j, 4], cuts[j, 5], s


@njit(cache=True, inline="always")
def _axis_node(iz, u, index, table, cuts):
    """``_node`` of the free node (iz, 0), with the far neighbours of a fourth-order axis row
    (``stencil.fourth_order_axis``; their coefficients are 0 in other rows).  The rows' kernels take
    node 0 apart from their loops over the others, which then run as fast as without it."""
    d, inv, s = _node(iz, 0, u, index, table, cuts)
    j = index[iz, 0]
    if j >= 0 and cuts[j, 8] != 0.0:
        s += cuts[j, 6] * u[min(iz + 2, u.shape[0] - 1), 0] + cuts[j, 7] * u[max(iz - 2, 0), 0]
        s += cuts[j, 8] * u[iz, 2]
    return d, inv, s


@njit(cache=True, nogil=True, error_model="numpy")
def residual_row(iz, u, b, out, index, table, cuts):
    """Write row ``iz`` of ``b - A u`` into ``out`` (zero on fixed nodes); return its sum of
    ``(res / d)^2``.

    The diagonal scaling makes the norm a sum of node values (volts), so nodes with very short
    arms, whose rows carry very large coefficients, do not dominate it.
    """
    total = 0.0
    out[0] = 0.0
    if index[iz, 0] != FIXED:
        d, inv, s = _axis_node(iz, u, index, table, cuts)
        out[0] = b[iz, 0] - d * u[iz, 0] + s
        total = (out[0] * inv) ** 2
    for ir in range(1, u.shape[1]):
        if index[iz, ir] == FIXED:
            out[ir] = 0.0
            continue
        d, inv, s = _node(iz, ir, u, index, table, cuts)
        res = b[iz, ir] - d * u[iz, ir] + s
        out[ir] = res
        total += (res * inv) ** 2
    return total


@njit(cache=True, nogil=True)
def scaled_norm(b, index, table, cuts):
    """The 2-norm of ``D^-1 b`` over the free nodes (the scale of the residual norm)."""
    nz, nr = b.shape
    total = 0.0
    for iz in range(nz):
        for ir in range(nr):
            j = index[iz, ir]
            if j == FIXED:
                continue
            inv = table[4, ir] if j == REGULAR else cuts[j, 5]
            total += (b[iz, ir] * inv) ** 2
    return np.sqrt(total)


@njit(cache=True, nogil=True, error_model="numpy")
def sweep_row(iz, colour, u, b, index, table, cuts):
    """Gauss–Seidel update of the nodes of one colour (``(iz + ir) % 2 == colour``) in row ``iz``,
    in the order of ``ir``."""
    first = (iz + colour) % 2
    if first == 0:
        if index[iz, 0] != FIXED:
            _, inv, s = _axis_node(iz, u, index, table, cuts)
            u[iz, 0] = (b[iz, 0] + s) * inv
        first = 2
    for ir in range(first, u.shape[1], 2):
        if index[iz, ir] == FIXED:
            continue
        _, inv, s = _node(iz, ir, u, index, table, cuts)
        u[iz, ir] = (b[iz, ir] + s) * inv


@njit(cache=True, nogil=True)
def add_fixed(u, values, owner):
    """Add the electrode voltages on the electrode nodes: ``u += values[owner]`` where owner >= 0."""
    nz, nr = owner.shape
    for iz in range(nz):
        for ir in range(nr):
            if owner[iz, ir] >= 0:
                u[iz, ir] += values[owner[iz, ir]]
