"""Events on a step's dense output: leaving the domain, landing on an electrode, plane crossings.

Electrodes are found on the dense output, not at step ends: each accepted step is cut into pieces
of at most ``sample`` metres (half a cell by default); a piece whose (z, r) box touches a grid cell
that is cut by a surface or lies inside an electrode (``Raster.cell`` != -1) is cut again into
pieces of at most ``fine`` metres (1/32 of a cell), and for each such piece the exact shapes are
asked: is its end inside an electrode (``geometry.electrode_at``), or does its chord cross a surface
(``geometry.first_hit``, which catches foils thinner than the piece). Pieces in free cells ask
nothing. A landing is then bisected on the dense output with ``electrode_at`` to 2^-48 of the
piece, far below 1e-3 of a cell. Plane crossings (z = const) and leaving the domain are bisected on
the dense output the same way (:func:`locate`).
"""

import math

import numpy as np
from numba import njit

from tracer.geometry import electrode_at, first_hit
from tracer.motion.stepper import dense
from tracer.motion.symmetry import map_r

# Event kinds for the bisection: a coordinate passing a value, or the inside of an electrode.
EV_Z, EV_R, EV_ELECTRODE = 0, 1, 2

BISECTIONS = 48


@njit(cache=True, error_model="numpy", inline="always")
def electrode_of(shapes, z, r):
    """The electrode holding the map point (z, r), or -1 (:func:`tracer.geometry.electrode_at`)."""
    return electrode_at(z, r, shapes.kind, shapes.owner, shapes.start, shapes.count,
                        shapes.points, shapes.sector, shapes.bbox)


@njit(cache=True, error_model="numpy", inline="always")
def surface_hit(shapes, z, r, dz, dr):
    """The first surface on a segment of the map plane (:func:`tracer.geometry.first_hit`)."""
    return first_hit(z, r, dz, dr, shapes.kind, shapes.owner, shapes.start, shapes.count,
                     shapes.points, shapes.sector, shapes.bbox)


@njit(cache=True, error_model="numpy", inline="always")
def outside(bounds, sym, z, r):
    """True when (z, r) is outside the domain; leaving through the axis or mirror plane is not leaving."""
    if z < bounds[0] or z > bounds[1] or r > bounds[3]:
        return True
    return sym == 1 and r < bounds[2]


@njit(cache=True, error_model="numpy")
def is_event(kind, value, rising, z, r, shapes):
    """Whether the event has happened at (z, r): a coordinate past ``value``, or inside an electrode."""
    if kind == EV_ELECTRODE:
        return electrode_of(shapes, z, r) >= 0
    c = z if kind == EV_Z else r
    return (c >= value) == rising


@njit(cache=True, error_model="numpy")
def locate(rc, sym, lo, hi, kind, value, rising, shapes, buf):
    """Bisect on the dense output for the first theta in (lo, hi] where the event holds at hi."""
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        dense(rc, mid, buf)
        if is_event(kind, value, rising, buf[2], map_r(sym, buf[0], buf[1]), shapes):
            hi = mid
        else:
            lo = mid
    return hi


@njit(cache=True, error_model="numpy")
def touches_surface(cell, nodes, za, ra, zb, rb, pad):
    """True when the (z, r) box of a piece, widened by ``pad`` in r, meets a cut or inner cell."""
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    ncz, ncr = cell.shape[0], cell.shape[1]
    i0 = min(max(int(math.floor((min(za, zb) - z0) / hz)), 0), ncz - 1)
    i1 = min(max(int(math.floor((max(za, zb) - z0) / hz)), 0), ncz - 1)
    j0 = min(max(int(math.floor((min(ra, rb) - pad - r0) / hr)), 0), ncr - 1)
    j1 = min(max(int(math.floor((max(ra, rb) - r0) / hr)), 0), ncr - 1)
    for i in range(i0, i1 + 1):
        for j in range(j0, j1 + 1):
            if cell[i, j] != -1:
                return True
    return False


@njit(cache=True, error_model="numpy")
def find_landing(rc, sym, ta, tb, pa, length, fine, shapes, buf):
    """First landing on the dense output between ta and tb; returns (theta, electrode) or (2.0, -1).

    ``pa`` holds the (z, r) at ta, ``length`` the 3-D chord length of the piece.
    """
    n = max(1, int(math.ceil(length / fine)))
    t1, z1, r1 = ta, pa[0], pa[1]
    for m in range(1, n + 1):
        t2 = ta + (tb - ta) * m / n
        dense(rc, t2, buf)
        z2, r2 = buf[2], map_r(sym, buf[0], buf[1])
        k = electrode_of(shapes, z2, r2)
        if k >= 0:
            th = locate(rc, sym, t1, t2, EV_ELECTRODE, 0.0, True, shapes, buf)
            dense(rc, th, buf)
            k = electrode_of(shapes, buf[2], map_r(sym, buf[0], buf[1]))
            return th, k
        f, owner = surface_hit(shapes, z1, r1, z2 - z1, r2 - r1)
        if owner >= 0 and f <= 1.0:
            return t1 + f * (t2 - t1), owner
        t1, z1, r1 = t2, z2, r2
    return 2.0, -1


@njit(cache=True, error_model="numpy")
def quiet_cells(cell, nodes, planes):
    """Cells where an accepted step needs no event search: the cell and its eight neighbours hold
    no surface, the cell is not on the domain's border, and no plane lies within a cell of it.

    A step never leaves its cell by more than the snapping distance (steps end on walls), so a ray
    stepping in such a cell can neither land, nor leave the domain, nor cross a plane.
    """
    ncz, ncr = cell.shape[0], cell.shape[1]
    quiet = np.zeros((ncz, ncr), dtype=np.bool_)
    z0, hz = nodes.z0, nodes.hz
    for i in range(1, ncz - 1):
        near_plane = False
        for q in range(planes.shape[0]):
            if z0 + (i - 1) * hz <= planes[q] <= z0 + (i + 2) * hz:
                near_plane = True
        if near_plane:
            continue
        for j in range(1, ncr - 1):
            free = True
            for a in range(i - 1, i + 2):
                for b in range(j - 1, j + 2):
                    if cell[a, b] != -1:
                        free = False
            quiet[i, j] = free
    return quiet
