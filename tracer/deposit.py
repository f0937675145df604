"""Charge of traced rays deposited on the node grid.

A ray carrying the current I leaves the charge I dt on every stretch of its path it takes the time
dt to cross (time weighting: a slow ray leaves more charge per length).  Each path segment is cut
into pieces no longer than a tenth of a cell, and each piece's charge is shared among the four corner
nodes of its cell by area (bilinear, "cloud in cell") weights.

The charge density at a node is its charge over the volume its weight covers:

* axial symmetry, the node at radius r_j with spacing h in r: the ring volume
  2 pi hz integral w_j(r) r dr, which is 2 pi r_j h hz off the axis; on the axis (r_0 = 0) the
  linear weight covers only the half cell [0, h] and the volume is pi h^2 hz / 3 (not the
  pi h^2 hz / 4 of the half cell's cylinder), so that a uniform density is deposited as uniform;
* planar symmetry, per unit length in x: hz hr (half of that on a side of the grid).

Charge sign: the deposit is q_sign * I * dt with the sign of the emitted particle's charge.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


@njit(cache=True)
def _scatter(charge, z, r, q, z0, r0, hz, hr, mirror):
    """Share the charge q at (z, r) among the four nodes of its cell; nothing outside the grid."""
    nz, nr = charge.shape
    u = (z - z0) / hz
    v = (r - r0) / hr
    if mirror and v < 0.0:
        v = -v
    if u < 0.0 or v < 0.0 or u > nz - 1 or v > nr - 1:
        return
    i = min(int(u), nz - 2)
    j = min(int(v), nr - 2)
    fu = u - i
    fv = v - j
    charge[i, j] += q * (1.0 - fu) * (1.0 - fv)
    charge[i + 1, j] += q * fu * (1.0 - fv)
    charge[i, j + 1] += q * (1.0 - fu) * fv
    charge[i + 1, j + 1] += q * fu * fv


@njit(cache=True)
def deposit_paths(z, r, t, offsets, current, z0, r0, hz, hr, nz, nr, mirror, piece_cells=0.1):
    """Charge (C, or C/m in planar symmetry) left on the nodes by rays along their paths.

    Parameters
    ----------
    z, r, t : float64[n_points]
        Path points of all rays, one after another: position (m) and time (s).
    offsets : int64[n_rays + 1]
        Ray k owns the points ``offsets[k]:offsets[k + 1]``.
    current : float64[n_rays]
        Signed current carried by each ray (A, or A/m): the charge per time it deposits.
    z0, r0, hz, hr : float
        First node and spacings of the grid.
    nz, nr : int
        Node counts.
    mirror : bool
        r < r0 is reflected (the axis, or a mirror plane).
    piece_cells : float
        Longest piece a segment is cut into, in cells.

    Returns
    -------
    float64[nz, nr]
        Charge per node.
    """
    charge = np.zeros((nz, nr))
    for k in range(offsets.size - 1):
        current_k = current[k]
        if current_k == 0.0:
            continue
        for m in range(offsets[k], offsets[k + 1] - 1):
            dt = t[m + 1] - t[m]
            if dt <= 0.0:
                continue
            dz = z[m + 1] - z[m]
            dr = r[m + 1] - r[m]
            cells = max(abs(dz) / hz, abs(dr) / hr)
            pieces = max(1, int(math.ceil(cells / piece_cells)))
            q = current_k * dt / pieces
            for s in range(pieces):
                f = (s + 0.5) / pieces
                _scatter(charge, z[m] + f * dz, r[m] + f * dr, q, z0, r0, hz, hr, mirror)
    return charge


def _side_weights(n, h):
    """Length each node's hat weight covers along one grid line: h inside, h / 2 on its ends."""
    w = np.full(n, h)
    w[[0, -1]] = 0.5 * h
    return w


def node_volumes(grid) -> np.ndarray:
    """Volume each node's linear weight covers (m^3; m^2 per unit length in planar symmetry).

    Parameters
    ----------
    grid : tracer.grid.Grid

    Returns
    -------
    float64[nz, nr]
    """
    wz = _side_weights(grid.nz, grid.hz)
    if grid.symmetry == "axial":
        r, h = grid.r, grid.hr
        # 2 pi times the integral of the hat weight times r over each side of the node
        wr = np.zeros(grid.nr)
        wr[:-1] += h * (r[:-1] / 2.0 + h / 6.0)
        wr[1:] += h * (r[1:] / 2.0 - h / 6.0)
        wr *= 2.0 * math.pi
    else:
        wr = _side_weights(grid.nr, grid.hr)
    return np.outer(wz, wr)


def charge_density(grid, paths, current) -> np.ndarray:
    """Charge density (C/m^3) at the nodes from ray paths.

    Parameters
    ----------
    grid : tracer.grid.Grid
    paths : sequence of (n_k, 3) arrays
        Each ray's path points as columns (z, r, t) in metres and seconds.
    current : float64[n_rays]
        Signed current of each ray (A; A/m in planar symmetry).

    Returns
    -------
    float64[nz, nr]
    """
    counts = np.array([len(p) for p in paths], dtype=np.int64)
    offsets = np.concatenate(([0], np.cumsum(counts))).astype(np.int64)
    points = np.concatenate([np.asarray(p, dtype=np.float64).reshape(-1, 3) for p in paths]) \
        if len(paths) else np.zeros((0, 3))
    charge = deposit_paths(np.ascontiguousarray(points[:, 0]), np.ascontiguousarray(points[:, 1]),
                           np.ascontiguousarray(points[:, 2]), offsets,
                           np.asarray(current, dtype=np.float64), grid.z0, grid.r0, grid.hz, grid.hr,
                           grid.nz, grid.nr, grid.mirror)
    return charge / node_volumes(grid)
