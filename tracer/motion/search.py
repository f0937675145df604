"""Each lane searches its accepted step for events: the phase of a round of the lane loop
(:func:`tracer.motion.lanes.trace_lanes`) after :func:`tracer.motion.settle.settle_steps`.

The step's dense output is cut into pieces of at most ``sample`` metres of path (none in the cells
marked quiet) and each piece is searched in turn (:mod:`tracer.motion.events`): leaving the
domain, landing on an electrode, detector planes. The first event that ends the ray gives the
fraction of the step the ray ends at (``F_END``) and its end code; the plane crossings before it
are counted, and their planes and fractions noted for :func:`tracer.motion.move.move_lanes`,
which writes their state rows with the ledger there.
"""

import math

from tracer.jit import njit
from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_ELECTRODE, F_END, I_CI, I_CJ,
                                   I_CROSS_FROM, I_RAY, I_TAKEN, LANDED, LANES, LEFT, PLANE, ROW_T,
                                   RUNNING, V_RC, V_Y0, V_Y1, W_H)
from tracer.motion.events import (EV_LINE, bend, bow, find_landing, locate, outside, past_line,
                                  plane_crossings, r_line, touches_surface, z_line)
from tracer.motion.force import speed
from tracer.motion.stepper import dense
from tracer.motion.symmetry import map_r


@njit(cache=True, error_model="numpy", inline="always")
def search_steps(bounds, cell, nodes, sym, shapes, quiet, planes, stops, mass, sample, fine,
                 touch_tol, cross_plane, cross_state, w, lf, li, vec, pa, hits, stack, buf):
    """Each lane with an accepted step (``I_TAKEN``) searches its dense output (``V_RC``) for
    events, piece by piece, and ends at the first that ends its ray: ``F_END`` is the fraction of
    the step it ends at (2.0: none), ``C_CODE`` and ``C_ELECTRODE`` say why.

    Each plane crossing before it is counted (``C_CROSSINGS``); the first ``max_cross`` of a ray
    go to ``cross_plane[r]`` (the plane) and to ``cross_state[r]``'s ``ROW_T`` column as the
    fraction of the step they lie at, until :func:`tracer.motion.move.move_lanes` writes their
    rows. ``pa``, ``hits``, ``stack`` and ``buf`` are the scratch of :mod:`tracer.motion.events`.
    """
    max_cross = cross_plane.shape[1]
    for l in range(LANES):
        if not li[I_TAKEN, l]:
            continue
        r = li[I_RAY, l]
        h = w[W_H, l]
        rc = vec[l, V_RC:V_RC + 5]
        li[I_CROSS_FROM, l] = li[C_CROSSINGS, l]
        n_sub = 0
        if not quiet[li[I_CI, l], li[I_CJ, l]]:
            fastest = max(speed(vec[l, V_Y0], mass), speed(vec[l, V_Y1], mass))
            n_sub = max(1, int(math.ceil(fastest * h / sample)))
        curve = bend(rc) if n_sub > 0 else 0.0
        ta = 0.0
        xa, ya_, za = vec[l, V_Y0, 0], vec[l, V_Y0, 1], vec[l, V_Y0, 2]
        ra = map_r(sym, xa, ya_)
        t_end = 2.0
        for m in range(1, n_sub + 1):
            tb = m / n_sub
            dense(rc, tb, buf)
            xb, yb, zb = buf[0], buf[1], buf[2]
            rb = map_r(sym, xb, yb)
            chord = math.sqrt((xb - xa) ** 2 + (yb - ya_) ** 2 + (zb - za) ** 2)
            # leaving the domain
            if outside(bounds, sym, zb, rb):
                for e in range(4 if sym == 1 else 3):   # z_max, z_min, r_max, r_min
                    c = zb if e < 2 else rb
                    edge = bounds[(1, 0, 3, 2)[e]]
                    rising = e % 2 == 0
                    if (c > edge) if rising else (c < edge):
                        line = z_line(edge) if e < 2 else r_line(edge)
                        t_end = min(t_end, locate(rc, sym, ta, tb, EV_LINE, line, rising,
                                                  shapes, buf))
                li[C_CODE, l] = LEFT
            # landing on an electrode
            pad = 0.5 * chord if sym == 0 else 0.0
            bulge = bow(curve, 1.0 / n_sub)
            if touches_surface(cell, nodes, za, ra, zb, rb, pad, bulge):
                pa[0] = za
                pa[1] = ra
                th, k = find_landing(rc, sym, ta, min(tb, t_end), pa, chord, fine,
                                     curve, touch_tol, shapes, stack, buf)
                if th < t_end:
                    t_end = th
                    li[C_CODE, l] = LANDED
                    li[C_ELECTRODE, l] = k
            # detector planes
            for q in range(planes.shape[0]):
                line = (planes[q, 0], planes[q, 1], planes[q, 2])
                n_hits = plane_crossings(rc, sym, ta, tb, line, past_line(line, za, ra),
                                         past_line(line, zb, rb), bulge + pad, hits, shapes, buf)
                for e in range(n_hits):
                    th = hits[e]
                    if th <= t_end:
                        if stops[q]:
                            t_end = th
                            li[C_CODE, l] = PLANE
                            li[C_ELECTRODE, l] = -1
                        nc = li[C_CROSSINGS, l]
                        if nc < max_cross:
                            cross_plane[r, nc] = q
                            cross_state[r, nc, ROW_T] = th
                        li[C_CROSSINGS, l] += 1
            if li[C_CODE, l] != RUNNING:
                break
            ta, za, ra, xa, ya_ = tb, zb, rb, xb, yb
        lf[F_END, l] = t_end
