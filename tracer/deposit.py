"""Charge of traced rays deposited on the node grid.

A ray carrying the current I leaves the charge I dt on every stretch of its path it takes the time
dt to cross (time weighting: a slow ray leaves more charge per length).  Each path segment is cut
into pieces no longer than a tenth of a cell, and each piece's charge is shared among the four corner
nodes of its cell by area (bilinear, "cloud in cell") weights.

In a cell the surface of an electrode cuts, the weights follow the Shortley–Weller arms of the
solver (tracer.solver.stencil): along each grid line of the cell, a free node's hat ends at the
surface between it and a node inside the electrode (weight s / theta at the distance s from the
surface, theta h the arm), and the node inside takes the rest, which the Poisson solve drops (it
is the electrode's).  That is the load the Shortley–Weller row is exact for in one dimension (it
is the linear finite element row scaled by 2 / (h+ + h-)), so the charge of the singular
space-charge layer in front of a cathode lands where the rows expect it wherever the surface
falls between nodes; the plain bilinear weights put a planar cathode's current 0.3-1.4 % low when
its face lay between nodes (and on curved cathodes about 0.5 %).

The charge density at a node is its charge over the volume its weight covers:

* axial symmetry, the node at radius r_j with spacing h in r: the ring volume
  2 pi hz integral w_j(r) r dr, which is 2 pi r_j h hz off the axis; on the axis (r_0 = 0) the
  linear weight covers only the half cell [0, h] and the volume is pi h^2 hz / 3 (not the
  pi h^2 hz / 4 of the half cell's cylinder), so that a uniform density is deposited as uniform;
* planar symmetry, per unit length in x: hz hr (half of that on a side of the grid);
* next to a surface, times the Shortley–Weller box: (theta_+z + theta_-z) / 2 along z and the same
  along r, the arms' fractions of the cell (1 for a whole arm).

Charge sign: the deposit is q_sign * I * dt with the sign of the emitted particle's charge.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


@njit(cache=True)
def _arm(arm, arm_owner, iz, ir, k):
    """Fraction of the cell that arm k of node (iz, ir) spans (1 unless it ends on a surface)."""
    return arm[iz, ir, k] if arm_owner[iz, ir, k] >= 0 and arm[iz, ir, k] < 1.0 else 1.0


@njit(cache=True)
def _line(f, lo_inside, hi_inside, theta_lo, theta_hi):
    """Weights (lo, hi) of a point at the fraction f of the way between two nodes of a grid line,
    with a surface between them when one of them is inside an electrode (module notes)."""
    if lo_inside == hi_inside:
        return 1.0 - f, f
    if lo_inside:  # the surface lies theta_hi (the free node's arm) before the hi node
        s = f - (1.0 - theta_hi)
        w = s / theta_hi if s > 0.0 else 0.0
        return 1.0 - w, w
    s = theta_lo - f
    w = s / theta_lo if s > 0.0 else 0.0
    return w, 1.0 - w


@njit(cache=True)
def _scatter(charge, z, r, q, z0, r0, hz, hr, mirror, owner, arm, arm_owner):
    """Share the charge q at (z, r) among the four nodes of its cell; nothing outside the grid.
    Bilinear weights, cut at surfaces (module notes) when ``owner`` is not empty."""
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
    if owner.shape[0] == 0:
        charge[i, j] += q * (1.0 - fu) * (1.0 - fv)
        charge[i + 1, j] += q * fu * (1.0 - fv)
        charge[i, j + 1] += q * (1.0 - fu) * fv
        charge[i + 1, j + 1] += q * fu * fv
        return
    for a in range(2):
        for b in range(2):
            ii, jj = i + a, j + b
            wz = _line(fu, owner[i, jj] >= 0, owner[i + 1, jj] >= 0,
                       _arm(arm, arm_owner, i, jj, 0), _arm(arm, arm_owner, i + 1, jj, 1))
            wr = _line(fv, owner[ii, j] >= 0, owner[ii, j + 1] >= 0,
                       _arm(arm, arm_owner, ii, j, 2), _arm(arm, arm_owner, ii, j + 1, 3))
            charge[ii, jj] += q * wz[a] * wr[b]


@njit(cache=True)
def deposit_paths(z, r, t, offsets, current, z0, r0, hz, hr, nz, nr, mirror, owner, arm, arm_owner,
                  piece_cells=0.1):
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
    owner, arm, arm_owner : arrays
        The Raster of the electrodes on the grid (weights cut at surfaces), or empty arrays
        (plain bilinear weights).
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
                _scatter(charge, z[m] + f * dz, r[m] + f * dr, q, z0, r0, hz, hr, mirror, owner, arm,
                         arm_owner)
    return charge


def _side_weights(n, h):
    """Length each node's hat weight covers along one grid line: h inside, h / 2 on its ends."""
    w = np.full(n, h)
    w[[0, -1]] = 0.5 * h
    return w


def node_volumes(grid, raster=None) -> np.ndarray:
    """Volume each node's linear weight covers (m^3; m^2 per unit length in planar symmetry).

    Parameters
    ----------
    grid : tracer.grid.Grid
    raster : tracer.geometry.Raster, optional
        The electrodes on the grid: next to a surface the volume is the Shortley–Weller box
        (module notes).

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
    volume = np.outer(wz, wr)
    if raster is not None:
        arm = np.where((raster.arm_owner >= 0) & (raster.arm < 1.0), raster.arm, 1.0)
        volume *= 0.25 * (arm[..., 0] + arm[..., 1]) * (arm[..., 2] + arm[..., 3])
    return volume


def charge_density(grid, paths, current, raster=None) -> np.ndarray:
    """Charge density (C/m^3) at the nodes from ray paths.

    Parameters
    ----------
    grid : tracer.grid.Grid
    paths : sequence of (n_k, 3) arrays
        Each ray's path points as columns (z, r, t) in metres and seconds.
    current : float64[n_rays]
        Signed current of each ray (A; A/m in planar symmetry).
    raster : tracer.geometry.Raster, optional
        The electrodes on the grid: weights and volumes cut at their surfaces (module notes).

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
                           grid.nz, grid.nr, grid.mirror, *_raster_arrays(raster))
    return charge / node_volumes(grid, raster)


def _raster_arrays(raster):
    """(owner, arm, arm_owner) of a Raster, or empty arrays of the same types for none."""
    if raster is None:
        return np.zeros((0, 0), dtype=np.int64), np.zeros((0, 0, 4)), np.zeros((0, 0, 4), dtype=np.int64)
    return (np.asarray(raster.owner, dtype=np.int64), np.asarray(raster.arm, dtype=np.float64),
            np.asarray(raster.arm_owner, dtype=np.int64))
