"""Events on a step's dense output: leaving the domain, landing on an electrode, plane crossings.

Electrodes are found on the dense output, not at step ends: each accepted step is cut into pieces
of at most ``sample`` metres (half a cell by default); a piece whose (z, r) box, widened by how far
its path may bow out of it (:func:`bow`), touches a grid cell that is cut by a surface or lies
inside an electrode (``Raster.cell`` != -1) is cut again into pieces of at most ``fine`` metres
(1/32 of a cell), and for each such piece the exact shapes are asked: is its end inside an
electrode (``geometry.electrode_at``), or does its chord cross a surface (``geometry.first_hit``,
which catches foils thinner than the piece). A path that dips into metal and out again between the
ends of a piece, missing its chord (a ray turning with almost no energy to spare at a retarding
electrode), bows out of the chord by at least its depth; so a piece whose bow exceeds ``TOUCH``
of a cell, next to a surface (``geometry.near_boundary``), is halved until it does not
(:func:`touch`): a landing is found wherever the path enters a conductor by more than 1e-6 of a
cell. Pieces in free cells ask nothing. A landing is then bisected on the dense output with
``electrode_at`` to 2^-48 of the piece, far below 1e-3 of a cell.

Detector planes are lines n_z z + n_r r = d of the (z, r) plane (a z plane is (1, 0, z)); a piece
whose ends lie on either side crosses once, and a piece whose ends lie on one side, both within
its bow of the line, crosses twice when the path turns between them beyond the line
(:func:`plane_crossings`): the turning point of the distance to the line is bisected on the dense
output's rate, so an apex any distance beyond a plane gives its two crossings. Plane crossings and
leaving the domain are bisected on the dense output like landings (:func:`locate`).

The bow of a piece is bounded from the step's dense output: its second derivative is bounded over
the step from the quartic's coefficients (:func:`bend`), and a path with |x''| <= M leaves its
chord by at most M share^2 / 8, for a piece that is ``share`` of the step.
"""

import math

import numpy as np

from tracer.geometry import electrode_at, first_hit, near_boundary
from tracer.jit import njit
from tracer.motion.stepper import dense
from tracer.motion.symmetry import map_r, r_rate

# Event kinds for the bisection: a point passing a line n_z z + n_r r = d of the map plane (given as
# the tuple (n_z, n_r, d)), or the inside of an electrode (which takes no line: NO_LINE).
EV_LINE, EV_ELECTRODE = 0, 1
NO_LINE = (0.0, 0.0, 0.0)

BISECTIONS = 48
TOUCH = 1e-6         # a path may bow into metal between the checks by at most this many cells
MAX_HALVINGS = 40    # pieces are halved (:func:`touch`) at most this often


@njit(cache=True, error_model="numpy", inline="always")
def z_line(z):
    """The line z = const."""
    return (1.0, 0.0, z)


@njit(cache=True, error_model="numpy", inline="always")
def r_line(r):
    """The line r = const."""
    return (0.0, 1.0, r)


@njit(cache=True, error_model="numpy", inline="always")
def past_line(line, z, r):
    """Signed distance of (z, r) beyond a line (n_z, n_r, d) with a unit normal: n_z z + n_r r - d
    (for a coordinate line exactly the coordinate minus the value)."""
    return (line[0] * z + line[1] * r) - line[2]


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
def is_event(kind, line, rising, z, r, shapes):
    """Whether the event has happened at (z, r): on the ``rising`` side of a line (beyond it, or on
    it, when rising), or inside an electrode."""
    if kind == EV_ELECTRODE:
        return electrode_of(shapes, z, r) >= 0
    return (past_line(line, z, r) >= 0.0) == rising


@njit(cache=True, error_model="numpy")
def locate(rc, sym, lo, hi, kind, line, rising, shapes, buf):
    """Bisect on the dense output for the first theta in (lo, hi] where the event holds at hi."""
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        dense(rc, mid, buf)
        if is_event(kind, line, rising, buf[2], map_r(sym, buf[0], buf[1]), shapes):
            hi = mid
        else:
            lo = mid
    return hi


@njit(cache=True, error_model="numpy", inline="always")
def dense_rate(rc, theta, out):
    """d/dtheta of the continuous extension (:func:`tracer.motion.stepper.dense`) at theta, the
    three position rows into out[3:6] (out[0:3] keeps the position)."""
    u = 1.0 - theta
    for i in range(3):
        out[3 + i] = (rc[1, i] + (u - theta) * rc[2, i] + theta * (2.0 - 3.0 * theta) * rc[3, i]
                      + 2.0 * theta * u * (u - theta) * rc[4, i])


@njit(cache=True, error_model="numpy")
def line_rate(rc, sym, theta, line, buf):
    """Rate (per unit theta) of the distance beyond a line on the dense output at theta."""
    dense(rc, theta, buf)
    dense_rate(rc, theta, buf)
    return line[0] * buf[5] + line[1] * r_rate(sym, buf, buf[3:6])


@njit(cache=True, error_model="numpy")
def bend(rc):
    """A bound on |d^2 x / d theta^2| of the dense output's path over its step (3-D, metres).

    The position rows are quartics, x = a0 + theta a1 + theta(1 - theta) a2 + theta^2 (1 - theta) a3
    + theta^2 (1 - theta)^2 a4 = ... + p2 theta^2 + p3 theta^3 + p4 theta^4 with p2 = a3 + a4 - a2,
    p3 = -(a3 + 2 a4), p4 = a4; on 0 <= theta <= 1, |x''| <= |2 p2| + |6 p3| + |12 p4|.
    """
    n2 = n3 = n4 = 0.0
    for i in range(3):
        p2 = rc[3, i] + rc[4, i] - rc[2, i]
        p3 = -(rc[3, i] + 2.0 * rc[4, i])
        p4 = rc[4, i]
        n2 += p2 * p2
        n3 += p3 * p3
        n4 += p4 * p4
    return 2.0 * math.sqrt(n2) + 6.0 * math.sqrt(n3) + 12.0 * math.sqrt(n4)


@njit(cache=True, error_model="numpy", inline="always")
def bow(curve, share):
    """How far a piece ``share`` of a step may bow from its chord: a path whose second derivative
    is bounded by ``curve`` (:func:`bend`) leaves its chord by at most curve share^2 / 8."""
    return 0.125 * curve * share * share


@njit(cache=True, error_model="numpy")
def plane_crossings(rc, sym, ta, tb, line, ga, gb, reach, hits, shapes, buf):
    """The crossings of a line between ta and tb on the dense output, in time order into ``hits``;
    returns how many (0, 1 or 2).

    ``ga``, ``gb`` are the distances beyond the line at ta and tb (:func:`past_line`), ``reach``
    how far the path may bow out of the piece. Ends on either side: one crossing. Ends on one side
    within ``reach``: where the rate of the distance changes sign towards the line, its turning
    point is bisected, and if it lies on the other side (on the line counts as beyond, as for a
    single crossing) the path crosses in and back out.
    """
    side = ga >= 0.0
    if side != (gb >= 0.0):
        hits[0] = locate(rc, sym, ta, tb, EV_LINE, line, gb >= 0.0, shapes, buf)
        return 1
    if abs(ga) > reach or abs(gb) > reach:
        return 0
    da = line_rate(rc, sym, ta, line, buf)
    db = line_rate(rc, sym, tb, line, buf)
    towards = (da > 0.0 and db <= 0.0) if not side else (da < 0.0 and db >= 0.0)
    if not towards:
        return 0
    lo, hi = ta, tb
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        if (line_rate(rc, sym, mid, line, buf) > 0.0) == (da > 0.0):
            lo = mid
        else:
            hi = mid
    apex = 0.5 * (lo + hi)
    dense(rc, apex, buf)
    if (past_line(line, buf[2], map_r(sym, buf[0], buf[1])) >= 0.0) == side:
        return 0
    hits[0] = locate(rc, sym, ta, apex, EV_LINE, line, not side, shapes, buf)
    hits[1] = locate(rc, sym, apex, tb, EV_LINE, line, side, shapes, buf)
    return 2


@njit(cache=True, error_model="numpy")
def touches_surface(cell, nodes, za, ra, zb, rb, pad, reach):
    """True when the (z, r) box of a piece, widened by ``pad`` towards the axis and by ``reach``
    (its bow) all round, meets a cut or inner cell."""
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    ncz, ncr = cell.shape[0], cell.shape[1]
    i0 = min(max(int(math.floor((min(za, zb) - reach - z0) / hz)), 0), ncz - 1)
    i1 = min(max(int(math.floor((max(za, zb) + reach - z0) / hz)), 0), ncz - 1)
    j0 = min(max(int(math.floor((min(ra, rb) - pad - reach - r0) / hr)), 0), ncr - 1)
    j1 = min(max(int(math.floor((max(ra, rb) + reach - r0) / hr)), 0), ncr - 1)
    for i in range(i0, i1 + 1):
        for j in range(j0, j1 + 1):
            if cell[i, j] != -1:
                return True
    return False


@njit(cache=True, error_model="numpy")
def landing_in(rc, sym, t1, t2, shapes, buf):
    """The landing in (t1, t2], whose end lies inside an electrode: (theta, electrode)."""
    th = locate(rc, sym, t1, t2, EV_ELECTRODE, NO_LINE, True, shapes, buf)
    dense(rc, th, buf)
    return th, electrode_of(shapes, buf[2], map_r(sym, buf[0], buf[1]))


@njit(cache=True, error_model="numpy", inline="always")
def push(stack, n, t1, t2, za, ra, zb, rb, f, owner):
    """Put a piece on row n of the :func:`touch` stack: its times, the (z, r) at its ends, and
    where its chord crosses a surface (``f`` <= 1, of electrode ``owner``; f = 2 where it does not)."""
    stack[n, 0] = t1
    stack[n, 1] = t2
    stack[n, 2] = za
    stack[n, 3] = ra
    stack[n, 4] = zb
    stack[n, 5] = rb
    stack[n, 6] = f
    stack[n, 7] = owner


@njit(cache=True, error_model="numpy")
def touch(rc, sym, t1, t2, za, ra, zb, rb, curve, tol, shapes, stack, buf):
    """First landing on a piece whose ends lie outside the electrodes and whose chord crosses no
    surface, but whose path may bow into one by more than ``tol`` metres; (theta, electrode) or
    (2.0, -1).

    The piece is halved, depth first in time order (``stack``: float64[MAX_HALVINGS + 2, 8]),
    while a half may bow (:func:`bow` of the step's ``curve``) by more than ``tol`` with a surface
    within its reach (``near_boundary``): each middle point is asked whether it lies inside an
    electrode, each half's chord whether it crosses a surface (the later half's crossing counts
    once the earlier half has shown none). The bow shrinks fourfold a halving, so a few halvings
    reach ``tol``.
    """
    push(stack, 0, t1, t2, za, ra, zb, rb, 2.0, -1)
    n = 1
    while n > 0:
        n -= 1
        t1, t2, za, ra, zb, rb = stack[n, 0], stack[n, 1], stack[n, 2], stack[n, 3], stack[n, 4], stack[n, 5]
        if stack[n, 6] <= 1.0:
            return t1 + stack[n, 6] * (t2 - t1), int(stack[n, 7])
        reach = bow(curve, t2 - t1)
        if reach <= tol or n > MAX_HALVINGS:
            continue
        if not near_boundary(min(za, zb) - reach, max(za, zb) + reach, min(ra, rb) - reach,
                             max(ra, rb) + reach, shapes.kind, shapes.owner, shapes.start,
                             shapes.count, shapes.points, shapes.sector, shapes.bbox):
            continue
        tm = 0.5 * (t1 + t2)
        dense(rc, tm, buf)
        zm, rm = buf[2], map_r(sym, buf[0], buf[1])
        if electrode_of(shapes, zm, rm) >= 0:
            return landing_in(rc, sym, t1, tm, shapes, buf)
        f, owner = surface_hit(shapes, za, ra, zm - za, rm - ra)
        if owner >= 0 and f <= 1.0:
            return t1 + f * (tm - t1), owner
        f, owner = surface_hit(shapes, zm, rm, zb - zm, rb - rm)
        push(stack, n, tm, t2, zm, rm, zb, rb, f if owner >= 0 else 2.0, owner)
        push(stack, n + 1, t1, tm, za, ra, zm, rm, 2.0, -1)
        n += 2
    return 2.0, -1


@njit(cache=True, error_model="numpy")
def find_landing(rc, sym, ta, tb, pa, length, fine, curve, tol, shapes, stack, buf):
    """First landing on the dense output between ta and tb; returns (theta, electrode) or (2.0, -1).

    ``pa`` holds the (z, r) at ta, ``length`` the 3-D chord length of the piece, ``curve`` the
    step's :func:`bend`, ``tol`` the deepest dip into metal that may go unseen (metres) and
    ``stack`` the workspace of :func:`touch`.
    """
    n = max(1, int(math.ceil(length / fine)))
    t1, z1, r1 = ta, pa[0], pa[1]
    for m in range(1, n + 1):
        t2 = ta + (tb - ta) * m / n
        dense(rc, t2, buf)
        z2, r2 = buf[2], map_r(sym, buf[0], buf[1])
        k = electrode_of(shapes, z2, r2)
        if k >= 0:
            return landing_in(rc, sym, t1, t2, shapes, buf)
        f, owner = surface_hit(shapes, z1, r1, z2 - z1, r2 - r1)
        if owner >= 0 and f <= 1.0:
            return t1 + f * (t2 - t1), owner
        if bow(curve, t2 - t1) > tol:
            th, k = touch(rc, sym, t1, t2, z1, r1, z2, r2, curve, tol, shapes, stack, buf)
            if k >= 0:
                return th, k
        t1, z1, r1 = t2, z2, r2
    return 2.0, -1


@njit(cache=True, error_model="numpy")
def quiet_cells(cell, nodes, planes):
    """Cells where an accepted step needs no event search: the cell and its eight neighbours hold
    no surface, the cell is not on the domain's border, and no plane (rows (n_z, n_r, d) of
    ``planes``) passes within a cell of it.

    A step never leaves its cell by more than the snapping distance (steps end on walls), so a ray
    stepping in such a cell can neither land, nor leave the domain, nor cross a plane.
    """
    ncz, ncr = cell.shape[0], cell.shape[1]
    quiet = np.zeros((ncz, ncr), dtype=np.bool_)
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    for i in range(1, ncz - 1):
        for j in range(1, ncr - 1):
            free = True
            for q in range(planes.shape[0]):
                line = (planes[q, 0], planes[q, 1], planes[q, 2])
                g = past_line(line, z0 + (i + 0.5) * hz, r0 + (j + 0.5) * hr)
                if abs(g) <= 1.5 * (abs(line[0]) * hz + abs(line[1]) * hr):
                    free = False
            for a in range(i - 1, i + 2):
                for b in range(j - 1, j + 2):
                    if cell[a, b] != -1:
                        free = False
            quiet[i, j] = free
    return quiet
