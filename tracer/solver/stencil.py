"""Shortley–Weller five-point stencils read from a Raster.

The discrete operator is minus the Laplacian, written per free node as

    d u_0 - sum_k c_k u_k = f,     d = sum_k c_k,

with the four arms k = (+z, -z, +r, -r).  An arm that meets a conductor surface at a fraction
theta of the spacing ends on the surface (its value moves to the right-hand side); otherwise it ends
on the neighbouring node.  Unequal arms use the distance-weighted second difference

    u_xx ~ 2 / (h_p + h_m) [ (u_p - u_0) / h_p - (u_0 - u_m) / h_m ],

and in axial symmetry the term u_r / r uses the unequal-arm central first difference.  On the axis
(r = 0) the limit u_rr + u_r / r -> 2 u_rr is taken with the mirror image u(-r) = u(r).  An "open"
edge (zero normal field), a planar mirror plane and the axis all mirror the inward arm onto the
missing outward one, so the outward coefficient is folded into the inward one.

Nodes inside electrodes and on "ground" edges are fixed; all kernels keep them at zero in the
homogeneous unknown, so a neighbour that is a fixed node contributes only through the right-hand side.

On the axis (and a planar mirror plane) a node whose neighbours two nodes along z (mirrored at an
open z edge) and two rows off the axis are free and joined by whole arms takes the fourth-order
equation instead,

    (-u_-2z + 16 u_-z - 30 u_0 + 16 u_+z - u_+2z) / (12 h_z^2) + F (16 u_1 - u_2 - 15 u_0) / (12 h_r^2) = -f,

F = 4 about an axis (2 u_rr) and 2 about a mirror plane (u_yy): the fourth-order second difference
along z, and the r^2 coefficient of the quartic even in r through the first three rows,
b = (16 u_1 - u_2 - 15 u_0) / (12 h^2) for u = a + b r^2 + c r^4.  That b is the r^2 coefficient
of the map's even patch in the first cell (tracer.fieldmap), so the patch obeys Laplace's equation
on the axis, b = -V''/4 (-V''/2 about a plane), to fourth order in the cell, and rays thinner than
a cell focus where the paraxial equation over the same axis potential says.  The second-order
equation, 4 (u_1 - u_0) / h^2 + (central u_zz) = 0, left b off by (7/192) V'''' h^2.

For the solver kernels the stencil is tabulated once per grid (``operator``): free nodes away from
edges and surfaces (REGULAR) share coefficients that depend only on the radial index, and the few
CUT nodes (on an edge, or with an arm ending on a surface) get a row each in a compact cut table,
so the sweeps never read the Raster's arm arrays.  The cut table's last three columns hold the
coefficients of the far neighbours (two nodes along +z, -z and +r) of the fourth-order axis rows,
zero elsewhere.
"""

import numpy as np

from tracer.jit import njit

GROUND = 0
OPEN = 1
AXIS = 2
REGULAR = -1  # node index codes: a free node away from edges and surfaces
FIXED = -2  # inside an electrode or on a ground edge
# a free node on an edge or with an arm ending on a surface (a CUT node) has index >= 0: its row
# in the cut table
EDGE_CODES = {"ground": GROUND, "open": OPEN, "axis": AXIS}


def stencil_params(grid):
    """Pack a Grid's spacing, symmetry and edges for the kernels.

    Parameters
    ----------
    grid : tracer.grid.Grid
        The node grid (any level of a multigrid hierarchy).

    Returns
    -------
    geo : float64[4]
        (hz, hr, r0, axial) with axial 1.0 for cylindrical (z, r) and 0.0 for planar (z, y).
    edges : int64[4]
        Edge codes (GROUND, OPEN or AXIS) for (z_min, z_max, r_min, r_max).
    """
    axial = 1.0 if grid.symmetry == "axial" else 0.0
    geo = np.array([grid.hz, grid.hr, grid.r0, axial], dtype=np.float64)
    try:
        edges = np.array([EDGE_CODES[e] for e in grid.edges], dtype=np.int64)
    except KeyError as err:
        raise ValueError(f"unknown edge kind {err.args[0]!r}") from None
    if edges[0] == AXIS or edges[1] == AXIS or edges[3] == AXIS:
        raise ValueError("only the r_min edge can be an axis or mirror plane")
    if axial and edges[2] != AXIS and grid.r0 <= 0.0:
        raise ValueError("an axial grid starting at r = 0 must have the axis as its r_min edge")
    return geo, edges


@njit(cache=True)
def is_fixed(iz, ir, nz, nr, owner, edges):
    """True for a node inside an electrode or on a ground edge."""
    if owner[iz, ir] >= 0:
        return True
    if iz == 0 and edges[0] == GROUND:
        return True
    if iz == nz - 1 and edges[1] == GROUND:
        return True
    if ir == 0 and edges[2] == GROUND:
        return True
    if ir == nr - 1 and edges[3] == GROUND:
        return True
    return False


@njit(cache=True)
def on_surface(arm, arm_owner, iz, ir, k):
    """True when arm k of node (iz, ir) ends on a conductor surface short of the neighbour."""
    return arm_owner[iz, ir, k] >= 0 and arm[iz, ir, k] < 1.0


@njit(cache=True)
def _theta(arm, arm_owner, iz, ir, k):
    if on_surface(arm, arm_owner, iz, ir, k):
        return max(arm[iz, ir, k], 1e-6)
    return 1.0


@njit(cache=True)
def _pair(hp, hm):
    """Second-difference coefficients for arms of lengths hp (forward) and hm (backward)."""
    s = hp + hm
    return 2.0 / (hp * s), 2.0 / (hm * s)


@njit(cache=True)
def coefficients(iz, ir, nz, nr, tzp, tzm, trp, trm, geo, edges):
    """Coefficients c_k of the arms (+z, -z, +r, -r) of a free node with arm fractions t.

    A folded (mirrored) arm has coefficient 0 and its share is added to the inward arm.
    """
    hz, hr, r0, axial = geo[0], geo[1], geo[2], geo[3]
    if iz == 0:
        ce, cw = 2.0 / (tzp * hz) ** 2, 0.0
    elif iz == nz - 1:
        ce, cw = 0.0, 2.0 / (tzm * hz) ** 2
    else:
        ce, cw = _pair(tzp * hz, tzm * hz)
    hp = trp * hr
    hm = trm * hr
    if ir == 0:
        fold = 4.0 if (axial > 0.0 and edges[2] == AXIS) else 2.0
        cn, cs = fold / hp**2, 0.0
    elif ir == nr - 1:
        cn, cs = 0.0, 2.0 / hm**2
    else:
        cn, cs = _pair(hp, hm)
        if axial > 0.0:
            s = hp + hm
            r = r0 + ir * hr
            cn += hm / (hp * s * r)
            cs -= hp / (hm * s * r)
    return ce, cw, cn, cs


@njit(cache=True)
def arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges):
    """``coefficients`` of node (iz, ir) with the arm fractions of the raster."""
    return coefficients(
        iz,
        ir,
        nz,
        nr,
        _theta(arm, arm_owner, iz, ir, 0),
        _theta(arm, arm_owner, iz, ir, 1),
        _theta(arm, arm_owner, iz, ir, 2),
        _theta(arm, arm_owner, iz, ir, 3),
        geo,
        edges,
    )


@njit(cache=True)
def neighbour(iz, ir, k):
    """Indices of the neighbouring node along arm k."""
    iz = np.int64(iz)
    ir = np.int64(ir)
    if k == 0:
        return iz + 1, ir
    if k == 1:
        return iz - 1, ir
    if k == 2:
        return iz, ir + 1
    return iz, ir - 1


@njit(cache=True)
def end_owner(iz, ir, k, owner, arm, arm_owner):
    """Electrode at the end of arm k (the surface hit, or the neighbour node's owner); -1 if none."""
    if on_surface(arm, arm_owner, iz, ir, k):
        return arm_owner[iz, ir, k]
    jz, jr = neighbour(iz, ir, k)
    return owner[jz, jr]


@njit(cache=True)
def node_index(owner, arm, arm_owner, edges):
    """FIXED, REGULAR, or the row of a CUT node in the cut table, for every node (int32[nz, nr])."""
    nz, nr = owner.shape
    out = np.empty((nz, nr), dtype=np.int32)
    n_cut = 0
    for iz in range(nz):
        for ir in range(nr):
            if is_fixed(iz, ir, nz, nr, owner, edges):
                out[iz, ir] = FIXED
                continue
            cut = iz == 0 or iz == nz - 1 or ir == 0 or ir == nr - 1
            for k in range(4):
                cut = cut or on_surface(arm, arm_owner, iz, ir, k)
            if cut:
                out[iz, ir] = n_cut
                n_cut += 1
            else:
                out[iz, ir] = REGULAR
    return out


CUT_COLUMNS = 9
"""Columns of the cut table: c_+z, c_-z, c_+r, c_-r, d, 1 / d, c_+2z, c_-2z, c_+2r."""


FOURTH_Z = (-1.0 / 12.0, 16.0 / 12.0, -30.0 / 12.0, 16.0 / 12.0, -1.0 / 12.0)
"""The fourth-order second difference along z at offsets -2..2, times h_z^2."""


@njit(cache=True)
def _mirror(jz, nz, edges):
    """Node index along z of offset position ``jz``, folded at an open z edge; -1 if it lies beyond
    any other edge."""
    if jz < 0:
        return -jz if edges[0] == OPEN else -1
    if jz > nz - 1:
        return 2 * (nz - 1) - jz if edges[1] == OPEN else -1
    return jz


@njit(cache=True)
def _whole(arm, arm_owner, index, iz, ir, k):
    """True when arm k of node (iz, ir) reaches a free neighbour node."""
    jz, jr = neighbour(iz, ir, k)
    return not on_surface(arm, arm_owner, iz, ir, k) and index[jz, jr] != FIXED


@njit(cache=True)
def fourth_order_axis(iz, ir, nz, nr, index, arm, arm_owner, edges):
    """True for a free node on the axis or mirror plane whose fourth-order equation has its seven
    nodes: two along each way of z (mirrored at an open z edge) and two rows off the axis, free and
    joined by whole arms."""
    if ir != 0 or edges[2] != AXIS or nr < 3 or index[iz, ir] == FIXED:
        return False
    hi = lo = iz
    for d in (-2, -1, 1, 2):
        jz = _mirror(iz + d, nz, edges)
        if jz < 0:
            return False
        hi = max(hi, jz)
        lo = min(lo, jz)
    for jz in range(iz, hi):
        if not _whole(arm, arm_owner, index, jz, 0, 0):
            return False
    for jz in range(lo + 1, iz + 1):
        if not _whole(arm, arm_owner, index, jz, 0, 1):
            return False
    return _whole(arm, arm_owner, index, iz, 0, 2) and _whole(arm, arm_owner, index, iz, 1, 2)


@njit(cache=True)
def cut_table(index, owner, arm, arm_owner, geo, edges):
    """Rows (c_+z, c_-z, c_+r, c_-r, d, 1 / d, c_+2z, c_-2z, c_+2r) of the CUT nodes: the
    coefficients of the neighbour nodes (0 for arms that end on a surface or are folded away), the
    diagonal d = sum of all coefficients, and those of the far neighbours of a fourth-order axis
    row (``fourth_order_axis``, see the module notes; 0 elsewhere)."""
    nz, nr = owner.shape
    out = np.zeros((max(index.max() + 1, 0), CUT_COLUMNS))
    hz2, hr2 = geo[0] ** 2, geo[1] ** 2
    fold = 4.0 if geo[3] > 0.0 else 2.0
    column = (7, 1, -1, 0, 6)  # the cut-table column of offsets -2..2 along z (the node: -1)
    for iz in range(nz):
        for ir in range(nr):
            j = index[iz, ir]
            if j < 0:
                continue
            if fourth_order_axis(iz, ir, nz, nr, index, arm, arm_owner, edges):
                diagonal = 15.0 * fold / (12.0 * hr2)
                for d in range(-2, 3):
                    w = FOURTH_Z[d + 2] / hz2
                    k = column[_mirror(iz + d, nz, edges) - iz + 2]
                    if k < 0:  # the node itself (its own mirror image, or the centre)
                        diagonal -= w
                    else:
                        out[j, k] += w
                out[j, 2] = 16.0 * fold / (12.0 * hr2)
                out[j, 8] = -fold / (12.0 * hr2)
                out[j, 4] = diagonal
            else:
                c = arm_coefficients(iz, ir, nz, nr, arm, arm_owner, geo, edges)
                for k in range(4):
                    if not on_surface(arm, arm_owner, iz, ir, k):
                        out[j, k] = c[k]
                out[j, 4] = c[0] + c[1] + c[2] + c[3]
            out[j, 5] = 1.0 / out[j, 4]
    return out


@njit(cache=True)
def regular_table(nr, geo, edges):
    """Coefficients of REGULAR nodes by radial index: rows (c_z, c_+r, c_-r, diagonal, 1 / diagonal)."""
    tab = np.zeros((5, nr))
    for ir in range(1, nr - 1):
        ce, cw, cn, cs = coefficients(1, ir, 3, nr, 1.0, 1.0, 1.0, 1.0, geo, edges)
        tab[0, ir] = ce
        tab[1, ir] = cn
        tab[2, ir] = cs
        tab[3, ir] = ce + cw + cn + cs
        tab[4, ir] = 1.0 / tab[3, ir]
    return tab


def operator(grid, raster):
    """The stencil of a grid and its raster in the form the kernels take.

    Returns
    -------
    op : tuple
        ``(index, table, cuts)``: ``node_index``, ``regular_table`` and ``cut_table``.
    geometry : tuple
        ``(owner, arm, arm_owner, geo, edges)``: the Raster arrays and ``stencil_params``.
    """
    geo, edges = stencil_params(grid)
    geometry = (raster.owner, raster.arm, raster.arm_owner, geo, edges)
    index = node_index(raster.owner, raster.arm, raster.arm_owner, edges)
    return (index, regular_table(grid.nr, geo, edges), cut_table(index, *geometry)), geometry
