"""Charge of traced rays deposited on the node grid.

A ray carrying the current I leaves the charge I dt on every stretch of its path it takes the time
dt to cross (time weighting: a slow ray leaves more charge per length).  Each path segment is cut
into pieces no longer than a tenth of a cell, and each piece's charge is shared among nodes.

Weights: what the solver's rows expect
    The solver's row at a node is a sum of one-dimensional second differences, one along the
    grid row through the node and one along its column (Shortley–Weller, tracer.solver.stencil).
    In one dimension that row is exact for the load of the node's hat, the charge density
    averaged along the grid line with the linear weight that falls to zero at the neighbours or
    at a surface between them (the linear finite element row scaled by 2 / (h+ + h-)).  Where the
    density changes along a unit direction n = (n_z, n_r) and is constant across it, the
    potential's second derivatives along z and r are n_z^2 and n_r^2 times the one along n, so
    the load the row is exact for is n_z^2 times the hat average along the node's row plus
    n_r^2 times the hat average along its column.  A piece of charge at p therefore gives the
    part n_z^2 to a row: it slides along the curve of constant density through p onto the rows
    r_j and r_j+1 on either side (shares 1 - f and f by its place between them), and on each
    row it is shared between the two nodes around the point it lands on, with the hat weights;
    the part n_r^2 likewise onto the columns.  For n along a grid line this is the bilinear
    ("cloud in cell") weight; for other directions the tensor product of two hats is not the
    load the rows expect, and space-charge layers at a curved cathode (density ~ x^(-2/3) at
    the distance x) came out 0.5-1 % too dense there and their current 0.5-1 % low at 25-100
    cells per radius, falling slower than the cell.

    n is the direction of the path segment: near a cathode the density of the emitted flow
    changes fastest along its flight, as x^(-2/3) at the distance x, and that is where the load
    matters.  The curve of constant density is the straight line across n, or, for paths that
    give a curvature (the outline's, near a curved cathode), a circle through p with that
    curvature, taken to second order in the slide.  A slide that would leave the grid folds
    back at a mirroring edge, else the piece is not slid.  This holds within a reach of each
    path's first point (a few cells from the cathode); beyond it, where the density is smooth
    and any of these weights gives a load right to second order, a piece goes whole along the
    grid line nearer its direction without a slide (bilinear weights), which costs what the
    plain bilinear deposit cost; the slid weights cost about four times that per piece.

    In a cell the surface of an electrode cuts, the hat of a free node along a grid line ends at
    the surface between it and a node inside the electrode (weight s / theta at the distance s
    from the surface, theta h the arm), and the node inside takes the rest, which the Poisson
    solve drops (it is the electrode's): the load the Shortley–Weller row is exact for, so the
    singular layer in front of a cathode lands where the rows expect it wherever the surface
    falls between nodes (the plain bilinear weights put a planar cathode's current 0.3-1.4 % low
    when its face lay between nodes).

The charge density at a node is its charge over the volume its weight covers, the row shares
and the column shares each over their own:

* axial symmetry, the node at radius r_j with spacing h in r: the ring volume
  2 pi hz integral w_j(r) r dr, which is 2 pi r_j h hz off the axis; on the axis (r_0 = 0) the
  linear weight covers only the half cell [0, h] and the volume is pi h^2 hz / 3 (not the
  pi h^2 hz / 4 of the half cell's cylinder), so that a uniform density is deposited as uniform;
* planar symmetry, per unit length in x: hz hr (half of that on a side of the grid);
* next to a surface, times the Shortley–Weller box of the line the share went along:
  (theta_+ + theta_-) / 2, the arms' fractions of the cell (1 for a whole arm).

Charge sign: the deposit is q_sign * I * dt with the sign of the emitted particle's charge.
"""

from __future__ import annotations

import math

import numpy as np

from tracer.fieldmap import edge_reflection
from tracer.jit import njit


@njit(cache=True, inline="always")
def _arm(arm, arm_owner, iz, ir, k):
    """Fraction of the cell that arm k of node (iz, ir) spans (1 unless it ends on a surface)."""
    return arm[iz, ir, k] if arm_owner[iz, ir, k] >= 0 and arm[iz, ir, k] < 1.0 else 1.0


@njit(cache=True, inline="always")
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


@njit(cache=True, inline="always")
def _on_line(charge, u, line, along_z, q, owner, arm, arm_owner):
    """Share q at the grid coordinate u along grid line ``line`` (a row of constant r when
    ``along_z``, into ``charge[0]``; else a column of constant z, into ``charge[1]``) between the
    two nodes around it, the hat cut at surfaces (module notes) when ``owner`` is not empty."""
    n = charge.shape[1] if along_z else charge.shape[2]
    i = min(int(u), n - 2)
    f = u - i
    w0, w1 = 1.0 - f, f
    if owner.shape[0] != 0:
        if along_z:
            if owner[i, line] >= 0 or owner[i + 1, line] >= 0:
                w0, w1 = _line(f, owner[i, line] >= 0, owner[i + 1, line] >= 0,
                               _arm(arm, arm_owner, i, line, 0), _arm(arm, arm_owner, i + 1, line, 1))
        elif owner[line, i] >= 0 or owner[line, i + 1] >= 0:
            w0, w1 = _line(f, owner[line, i] >= 0, owner[line, i + 1] >= 0,
                           _arm(arm, arm_owner, line, i, 2), _arm(arm, arm_owner, line, i + 1, 3))
    if along_z:
        charge[0, i, line] += q * w0
        charge[0, i + 1, line] += q * w1
    else:
        charge[1, line, i] += q * w0
        charge[1, line, i + 1] += q * w1


@njit(cache=True, inline="always")
def _slid(u, shift, n, reflect_lo, reflect_hi):
    """The grid coordinate u + shift, folded at a mirroring end; u itself when that leaves the grid."""
    w = u + shift
    if w < 0.0 and reflect_lo:
        w = -w
    elif w > n - 1 and reflect_hi:
        w = 2.0 * (n - 1) - w
    return w if 0.0 <= w <= n - 1 else u


@njit(cache=True, inline="always")
def _scatter(charge, u, v, q, n_z, n_r, per_nz, per_nr, bend, hz, hr, per_hz, per_hr, mirror, reflect, owner, arm,
             arm_owner):
    """Share the charge q at the grid coordinates (u, v), where the density changes along the
    unit direction (n_z, n_r) (per_nz = 1 / n_z, per_nr = 1 / n_r, 0 where n_z or n_r is 0; per_hz
    and per_hr the reciprocal spacings) and
    is constant along a curve of curvature ``bend`` across it, among the nodes: its part n_z^2
    along the grid rows and n_r^2 along the columns, each slid along that curve onto the lines
    (module notes).  ``charge[0]`` takes the row shares, ``charge[1]`` the column shares;
    nothing outside the grid.  (Reciprocals, not divisions: the nodes written depend on the
    slide, and a division's latency there made the deposit several times slower.)"""
    nz, nr = charge.shape[1], charge.shape[2]
    if mirror and v < 0.0:
        v = -v
        n_r = -n_r
        per_nr = -per_nr
    if u < 0.0 or v < 0.0 or u > nz - 1 or v > nr - 1:
        return
    i = min(int(u), nz - 2)
    j = min(int(v), nr - 2)
    fu = u - i
    fv = v - j
    cz = n_z * n_z
    if cz == 1.0 or cz == 0.0:    # along a grid line: no slide
        if cz == 1.0:
            _on_line(charge, u, j, True, q * (1.0 - fv), owner, arm, arm_owner)
            _on_line(charge, u, j + 1, True, q * fv, owner, arm, arm_owner)
        else:
            _on_line(charge, v, i, False, q * (1.0 - fu), owner, arm, arm_owner)
            _on_line(charge, v, i + 1, False, q * fu, owner, arm, arm_owner)
        return
    for b in range(2):
        share = q * cz * (fv if b else 1.0 - fv)
        if share == 0.0:
            continue
        # along the curve z(s) = z - s n_r - k s^2 n_z / 2, r(s) = r + s n_z - k s^2 n_r / 2 onto
        # the row r_j+b, to second order in s
        s = (j + b - v) * hr * per_nz
        k = _bounded(bend, s)
        s += 0.5 * k * s * s * n_r * per_nz
        du = (-s * n_r - 0.5 * k * s * s * n_z) * per_hz
        _on_line(charge, _slid(u, du, nz, reflect[0], reflect[1]), j + b, True, share, owner, arm, arm_owner)
    for a in range(2):
        share = q * (1.0 - cz) * (fu if a else 1.0 - fu)
        if share == 0.0:
            continue
        s = (u - i - a) * hz * per_nr      # onto the column z_i+a
        k = _bounded(bend, s)
        s -= 0.5 * k * s * s * n_z * per_nr
        dv = (s * n_z - 0.5 * k * s * s * n_r) * per_hr
        _on_line(charge, _slid(v, dv, nr, reflect[2], reflect[3]), i + a, False, share, owner, arm, arm_owner)


@njit(cache=True, inline="always")
def _bounded(bend, s):
    """The curvature bend, reduced where the slide s would turn the curve by more than half a
    radian (the second-order slide holds no further)."""
    if abs(bend * s) <= 0.5:
        return bend
    return math.copysign(0.5 / abs(s), bend)


@njit(cache=True)
def deposit_paths(z, r, t, offsets, current, bend, reach, z0, r0, hz, hr, nz, nr, mirror, reflect, owner,
                  arm, arm_owner, piece_cells=0.1):
    """Charge (C, or C/m in planar symmetry) left on the nodes by rays along their paths.

    Parameters
    ----------
    z, r, t : float64[n_points]
        Path points of all rays, one after another: position (m) and time (s).
    offsets : int64[n_rays + 1]
        Ray k owns the points ``offsets[k]:offsets[k + 1]``.
    current : float64[n_rays]
        Signed current carried by each ray (A, or A/m): the charge per time it deposits.
    bend : float64[n_rays]
        Curvature (1/m) of the curve of constant density through each ray's first point, positive
        where its centre lies behind the ray; along the ray it is bend / (1 + bend x) at the
        distance x from that point (curves with a common centre).
    reach : float
        Distance from each ray's first point (m) within which the weights follow the flow's
        direction and those curves; beyond it, the grid line nearer the direction (module notes).
    z0, r0, hz, hr : float
        First node and spacings of the grid.
    nz, nr : int
        Node counts.
    mirror : bool
        r < r0 is reflected (the axis, or a mirror plane).
    reflect : bool[4]
        Whether each edge (z_min, z_max, r_min, r_max) mirrors the domain: a share slid past it is
        folded back (tracer.fieldmap.edge_reflection).
    owner, arm, arm_owner : arrays
        The Raster of the electrodes on the grid (weights cut at surfaces), or empty arrays
        (plain bilinear weights).
    piece_cells : float
        Longest piece a segment is cut into, in cells.

    Returns
    -------
    float64[2, nz, nr]
        Charge per node shared along the rows (``[0]``) and along the columns (``[1]``).
    """
    charge = np.zeros((2, nz, nr))
    per_hz, per_hr = 1.0 / hz, 1.0 / hr
    for k in range(offsets.size - 1):
        current_k = current[k]
        if current_k == 0.0:
            continue
        z_k, r_k, bend_k = z[offsets[k]], r[offsets[k]], bend[k]
        for m in range(offsets[k], offsets[k + 1] - 1):
            dt = t[m + 1] - t[m]
            if dt <= 0.0:
                continue
            dz = z[m + 1] - z[m]
            dr = r[m + 1] - r[m]
            cells = max(abs(dz) / hz, abs(dr) / hr)
            pieces = max(1, int(math.ceil(cells / piece_cells)))
            q = current_k * dt / pieces
            length = math.sqrt(dz * dz + dr * dr)
            n_z, n_r = (dz / length, dr / length) if length > 0.0 else (1.0, 0.0)
            per_nz = 1.0 / n_z if n_z != 0.0 else 0.0
            per_nr = 1.0 / n_r if n_r != 0.0 else 0.0
            for s in range(pieces):
                f = (s + 0.5) / pieces
                zp, rp = z[m] + f * dz, r[m] + f * dr
                # the curve of constant density keeps its centre: bend / (1 + bend x) at the
                # distance x from the path's first point, within reach of it
                x = math.hypot(zp - z_k, rp - r_k)
                if x <= reach:
                    level = bend_k / (1.0 + bend_k * x) if 1.0 + bend_k * x > 0.5 else 0.0
                    _scatter(charge, (zp - z0) * per_hz, (rp - r0) * per_hr, q, n_z, n_r, per_nz, per_nr, level,
                             hz, hr, per_hz, per_hr, mirror, reflect, owner, arm, arm_owner)
                else:   # beyond: along the grid line nearer the direction, no slide
                    along = 1.0 if abs(n_z) >= abs(n_r) else 0.0
                    _scatter(charge, (zp - z0) * per_hz, (rp - r0) * per_hr, q, along, 1.0 - along, along,
                             1.0 - along, 0.0, hz, hr, per_hz, per_hr, mirror, reflect, owner, arm, arm_owner)
    return charge


def _side_weights(n, h):
    """Length each node's hat weight covers along one grid line: h inside, h / 2 on its ends."""
    w = np.full(n, h)
    w[[0, -1]] = 0.5 * h
    return w


def node_volumes(grid) -> np.ndarray:
    """Volume each node's bilinear weight covers (m^3; m^2 per unit length in planar symmetry).

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


def line_volumes(grid, raster=None) -> np.ndarray:
    """Volumes that the charge shared along the rows and along the columns is divided by.

    The node volume (:func:`node_volumes`) times the Shortley–Weller box of the line the charge
    was shared along, (theta_+ + theta_-) / 2 (module notes).

    Parameters
    ----------
    grid : tracer.grid.Grid
    raster : tracer.geometry.Raster, optional
        The electrodes on the grid (without it both are the node volume).

    Returns
    -------
    float64[2, nz, nr]
        Along the rows (z), along the columns (r).
    """
    volume = node_volumes(grid)
    if raster is None:
        return np.stack([volume, volume])
    arm = np.where((raster.arm_owner >= 0) & (raster.arm < 1.0), raster.arm, 1.0)
    return np.stack([volume * 0.5 * (arm[..., 0] + arm[..., 1]), volume * 0.5 * (arm[..., 2] + arm[..., 3])])


def charge_density(grid, paths, current, raster=None, bend=None, reach_cells=0.0) -> np.ndarray:
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
    bend : float64[n_rays], optional
        Curvature (1/m) of the curve of constant density through each path's first point, in the
        (z, r) plane, positive where its centre lies behind the path; 0 (straight) if not given.
    reach_cells : float
        Distance from each path's first point, in cells, within which the weights follow the
        flow's direction and the curves of constant density (module notes); 0: bilinear
        weights everywhere.

    Returns
    -------
    float64[nz, nr]
    """
    bend = np.zeros(len(paths)) if bend is None else np.asarray(bend, dtype=np.float64)
    counts = np.array([len(p) for p in paths], dtype=np.int64)
    offsets = np.concatenate(([0], np.cumsum(counts))).astype(np.int64)
    points = np.concatenate([np.asarray(p, dtype=np.float64).reshape(-1, 3) for p in paths]) \
        if len(paths) else np.zeros((0, 3))
    charge = deposit_paths(np.ascontiguousarray(points[:, 0]), np.ascontiguousarray(points[:, 1]),
                           np.ascontiguousarray(points[:, 2]), offsets,
                           np.asarray(current, dtype=np.float64), bend, reach_cells * min(grid.hz, grid.hr),
                           grid.z0, grid.r0, grid.hz, grid.hr,
                           grid.nz, grid.nr, grid.mirror, edge_reflection(grid.edges),
                           *_raster_arrays(raster))
    volume = line_volumes(grid, raster)
    return charge[0] / volume[0] + charge[1] / volume[1]


def _raster_arrays(raster):
    """(owner, arm, arm_owner) of a Raster, or empty arrays of the same types for none."""
    if raster is None:
        return np.zeros((0, 0), dtype=np.int64), np.zeros((0, 0, 4)), np.zeros((0, 0, 4), dtype=np.int64)
    return (np.asarray(raster.owner, dtype=np.int64), np.asarray(raster.arm, dtype=np.float64),
            np.asarray(raster.arm_owner, dtype=np.int64))
