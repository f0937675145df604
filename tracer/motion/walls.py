"""Cell walls: where a ray leaves its interpolation cell, and the kink it may step over.

The interpolant is a bicubic patch per cell: the field is continuous across cell walls but its
derivatives jump, and a Runge–Kutta step that straddles such a kink is neither accurate nor
honestly estimated. Every step therefore integrates one cell's polynomial, continued past the
cell's walls, and ends at the wall where the ray leaves the cell:

* before the step, the time to that wall is predicted by continuing the last accepted step's dense
  output (a straight line with constant acceleration for the first step; :func:`reach`,
  :func:`exit_time`), and the step is chosen to end there (growing by up to ``STRETCH`` rather
  than stopping just short of it), so it rarely has to be cut back;
* a step that ends within ``SNAP`` cells (of path) of a wall, on either side, moves the ray into the
  next cell, whose polynomial then gives the next step's first stage. The error of the short stretch
  integrated with the continued polynomial is estimated from the two fields at the step's end,
  ``|dt| |F_next - F_this| / 2`` (:func:`kink_error`), and must stay below ``KINK_FRACTION`` of
  the tolerance; a step that overshoots further, or whose path leaves the cell between its ends
  (a ray passing the axis, or turning; :func:`excursion`), is cut back to the wall on its own
  dense output and redone (:func:`wall_theta`).
"""

import math

import numpy as np

from tracer.jit import njit
from tracer.motion.events import EV_LINE, locate, r_line, z_line
from tracer.motion.force import cell_of, gamma_mass
from tracer.motion.stepper import dense
from tracer.motion.symmetry import closest_to_axis, map_r, r_rate

SNAP = 1e-3           # a step ending this many cells of path from a cell wall ends on the wall
KINK_FRACTION = 0.05  # largest error of the stretch past a wall, as a fraction of the tolerance
PREDICT_SPAN = 3.0    # the last step's dense output predicts at most this many of its lengths ahead
STRETCH = 1.1         # a step may grow by this factor to reach the wall instead of stopping short


@njit(cache=True, error_model="numpy", inline="always")
def cell_ahead(nodes, sym, s, length):
    """Indices of the cell holding the point ``length`` metres ahead of state s along its motion."""
    p = math.sqrt(s[3] * s[3] + s[4] * s[4] + s[5] * s[5])
    f = length / p if p > 0.0 else 0.0
    return cell_of(nodes, sym, s[0] + f * s[3], s[1] + f * s[4], s[2] + f * s[5])


@njit(cache=True, error_model="numpy", inline="always")
def cell_box(nodes, i, j, box):
    """Walls (z_lo, z_hi, r_lo, r_hi) of interpolation cell (i, j); walls on the grid's edge are
    at infinity (a ray leaves the domain there, it meets no other cell)."""
    box[0] = nodes.z0 + i * nodes.hz if i > 0 else -np.inf
    box[1] = nodes.z0 + (i + 1) * nodes.hz if i < nodes.nz - 2 else np.inf
    box[2] = nodes.r0 + j * nodes.hr if j > 0 else -np.inf
    box[3] = nodes.r0 + (j + 1) * nodes.hr if j < nodes.nr - 2 else np.inf


@njit(cache=True, error_model="numpy", inline="always")
def hold(box, sym, s):
    """Widen a box of walls (z_lo, z_hi, r_lo, r_hi) to hold the point of state s."""
    r = map_r(sym, s[0], s[1])
    box[0] = min(box[0], s[2])
    box[1] = max(box[1], s[2])
    box[2] = min(box[2], r)
    box[3] = max(box[3], r)


@njit(cache=True, error_model="numpy", inline="always")
def wall_side(w):
    """-1 for a lower wall (0 z_lo, 2 r_lo), +1 for an upper one (1 z_hi, 3 r_hi): how far a
    coordinate c lies beyond wall w at ``wall`` is ``wall_side(w) * (c - wall)``."""
    return 1.0 if w & 1 else -1.0


@njit(cache=True, error_model="numpy", inline="always")
def past_wall(box, sym, s, w):
    """How far the point of state s lies beyond wall w (0 z_lo, 1 z_hi, 2 r_lo, 3 r_hi) of a box."""
    c = s[2] if w < 2 else map_r(sym, s[0], s[1])
    return wall_side(w) * (c - box[w])


@njit(cache=True, error_model="numpy", inline="always")
def beyond(box, sym, s):
    """The wall of a box of walls (z_lo, z_hi, r_lo, r_hi) that the point of state s lies
    farthest beyond, and how far (<= 0 inside)."""
    w = 0
    g = past_wall(box, sym, s, 0)
    for q in range(1, 4):
        d = past_wall(box, sym, s, q)
        if d > g:
            w, g = q, d
    return w, g


@njit(cache=True, error_model="numpy", inline="always")
def reach(rc, hp, y0, k0, mass, h, q):
    """Power series in time since state y0 of the predicted position (into q[3, 5]): the last
    accepted step's dense output (of length ``hp``) continued when h is within ``PREDICT_SPAN``
    of its length, else constant acceleration from y0."""
    if hp > 0.0 and h <= PREDICT_SPAN * hp:
        for i in range(3):
            # the dense output in powers of theta, then re-expanded about its end (theta = 1)
            p1 = rc[1, i] + rc[2, i]
            p2 = rc[3, i] + rc[4, i] - rc[2, i]
            p3 = -(rc[3, i] + 2.0 * rc[4, i])
            p4 = rc[4, i]
            q[i, 0] = rc[0, i] + p1 + p2 + p3 + p4
            q[i, 1] = (p1 + 2.0 * p2 + 3.0 * p3 + 4.0 * p4) / hp
            q[i, 2] = (p2 + 3.0 * p3 + 6.0 * p4) / (hp * hp)
            q[i, 3] = (p3 + 4.0 * p4) / (hp * hp * hp)
            q[i, 4] = p4 / (hp * hp * hp * hp)
        return
    gm = gamma_mass(mass, y0[3], y0[4], y0[5])
    for i in range(3):
        q[i, 0] = y0[i]
        q[i, 1] = k0[i]
        q[i, 2] = 0.5 * k0[3 + i] / gm
        q[i, 3] = 0.0
        q[i, 4] = 0.0


@njit(cache=True, error_model="numpy", forceinline=True)
def series(q, i, tau):
    """Value and rate at tau of row i of a :func:`reach` series (Horner)."""
    v = q[i, 4]
    d = 0.0
    for m in range(3, -1, -1):
        d = d * tau + v
        v = v * tau + q[i, m]
    return v, d


@njit(cache=True, error_model="numpy", forceinline=True)
def series_past(q, sym, w, wall, tau):
    """How far the predicted point at tau lies beyond wall w (0 z_lo, 1 z_hi, 2 r_lo, 3 r_hi) at
    ``wall``, and the rate of that distance."""
    if w < 2:
        c, dc = series(q, 2, tau)
    elif sym == 0:
        x, dx = series(q, 0, tau)
        y, dy = series(q, 1, tau)
        c = math.sqrt(x * x + y * y)
        dc = (x * dx + y * dy) / c if c > 0.0 else math.sqrt(dx * dx + dy * dy)
    else:
        c, dc = series(q, 1, tau)
        if sym == 2 and c < 0.0:
            c, dc = -c, -dc
    sg = wall_side(w)
    return sg * (c - wall), sg * dc


@njit(cache=True, error_model="numpy", forceinline=True)
def crossing(q, sym, w, wall, g_lo, hi, g_hi, tol):
    """Time in (0, hi] at which the predicted path reaches a wall it lies ``g_lo`` < 0 beyond at 0
    and ``g_hi`` > 0 beyond at hi, to ``tol`` metres: Newton's method kept inside the bracket."""
    lo = 0.0
    tau = lo - g_lo * (hi - lo) / (g_hi - g_lo)
    for _ in range(12):
        g, dg = series_past(q, sym, w, wall, tau)
        if abs(g) < tol:
            break
        if g > 0.0:
            hi = tau
        else:
            lo = tau
        nxt = tau - g / dg if dg != 0.0 else -1.0
        tau = nxt if lo < nxt < hi else 0.5 * (lo + hi)
    return tau


@njit(cache=True, error_model="numpy", forceinline=True)
def first_crossing(best, q, sym, w, wall, g_0, hi, g_hi, tol):
    """The earlier of ``best`` and the predicted crossing of wall w, when the path lies before
    it at 0 (``g_0`` < 0) and beyond it at hi (``g_hi`` > 0)."""
    if g_0 < 0.0 and g_hi > 0.0:
        return min(best, crossing(q, sym, w, wall, g_0, hi, g_hi, tol))
    return best


@njit(cache=True, error_model="numpy")
def exit_time(q, y0, k0, sym, box, h, tol):
    """Predicted time within ``h`` at which a ray leaves its cell (``box``); h if it stays.

    ``q`` is the predicted path (:func:`reach`), the crossing is found to ``tol`` metres. The
    walls the ray moves away from are pushed back by a cell (the start may lie on, or just
    before, the wall it has entered through); of the walls the predicted path lies beyond at h (or,
    in axial symmetry, at its straight line's closest approach to the axis), the first crossed
    is taken.
    """
    z_lo, z_hi, r_lo, r_hi = box[0], box[1], box[2], box[3]
    z0_, r0_ = y0[2], map_r(sym, y0[0], y0[1])
    if k0[2] >= 0.0:
        z_lo = min(z_lo, z0_) - (z_hi - z_lo)
    else:
        z_hi = max(z_hi, z0_) + (z_hi - z_lo)
    inward = r_rate(sym, y0, k0) < 0.0
    if inward:
        r_hi = max(r_hi, r0_) + (r_hi - r_lo)
    else:
        r_lo = min(r_lo, r0_) - (r_hi - r_lo)
    z_h = series(q, 2, h)[0]
    r_h = map_r(sym, series(q, 0, h)[0], series(q, 1, h)[0])
    best = first_crossing(h, q, sym, 0, z_lo, z_lo - z0_, h, z_lo - z_h, tol)
    best = first_crossing(best, q, sym, 1, z_hi, z0_ - z_hi, h, z_h - z_hi, tol)
    best = first_crossing(best, q, sym, 3, r_hi, r0_ - r_hi, h, r_h - r_hi, tol)
    g_lo = r_lo - r_h
    hi = h
    if g_lo <= 0.0 and sym == 0 and inward and r_lo > 0.0:
        tau = closest_to_axis(y0, k0)
        if 0.0 < tau < h:
            hi = tau
            g_lo = series_past(q, sym, 2, r_lo, hi)[0]
    return first_crossing(best, q, sym, 2, r_lo, r_lo - r0_, hi, g_lo, tol)


@njit(cache=True, error_model="numpy", inline="always")
def wall_time(nodes, sym, s, k, ci, cj, ni, nj):
    """Time between state s and the walls shared by cells (ci, cj) and (ni, nj), either way."""
    dt = 0.0
    if ni != ci:
        zb = nodes.z0 + max(ci, ni) * nodes.hz
        dt = abs(s[2] - zb) / max(abs(k[2]), 1e-300)
    if nj != cj:
        rb = nodes.r0 + max(cj, nj) * nodes.hr
        dt = max(dt, abs(map_r(sym, s[0], s[1]) - rb) / max(abs(r_rate(sym, s, k)), 1e-300))
    return dt


@njit(cache=True, error_model="numpy", inline="always")
def kink_error(k_next, k_this, dt, y0, y1, rtol, atol_p):
    """Scaled error of integrating ``dt`` past a wall with the field of the cell behind it.

    The two fields agree on the wall and part linearly, so the momentum error is about
    ``dt |F_next - F_this| / 2``; scaled like the step error (RMS over the six components).
    """
    acc = 0.0
    for i in range(3, 6):
        e = 0.5 * dt * (k_next[i] - k_this[i]) / (atol_p + rtol * max(abs(y0[i]), abs(y1[i])))
        acc += e * e
    return math.sqrt(acc / 6.0)


@njit(cache=True, error_model="numpy")
def excursion(rc, sym, y0, k0, y1, k1, h, box, buf):
    """theta where the path of a step whose ends lie in the box leaves it between them, else 2.0.

    Looks at the turning point of z and of r (the straight line's closest approach to the axis in
    axial symmetry, else where the linearly interpolated rate vanishes).
    """
    best = 2.0
    if k0[2] * k1[2] < 0.0:
        th = k0[2] / (k0[2] - k1[2])
        dense(rc, th, buf)
        if beyond(box, sym, buf)[1] > 0.0:
            best = th
    a = r_rate(sym, y0, k0)
    b = r_rate(sym, y1, k1)
    if a * b < 0.0:
        th = closest_to_axis(y0, k0) / h if sym == 0 and a < 0.0 else a / (a - b)
        if 0.0 < th < best:
            dense(rc, th, buf)
            if beyond(box, sym, buf)[1] > 0.0:
                best = th
    return best


@njit(cache=True, error_model="numpy")
def wall_theta(rc, sym, box, hi, shapes, buf):
    """theta of the first wall crossing on the dense output before ``hi``, where it is outside the box."""
    dense(rc, hi, buf)
    z, r = buf[2], map_r(sym, buf[0], buf[1])
    th = hi
    if z > box[1]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_LINE, z_line(box[1]), True, shapes, buf))
    elif z < box[0]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_LINE, z_line(box[0]), False, shapes, buf))
    if r > box[3]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_LINE, r_line(box[3]), True, shapes, buf))
    elif r < box[2]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_LINE, r_line(box[2]), False, shapes, buf))
    return th
