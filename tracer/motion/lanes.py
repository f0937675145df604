"""The lane loop: many rays traced in parallel, ``LANES`` at a time on each thread.

Lanes. One thread traces ``LANES`` rays side by side: each round every lane chooses its step,
:func:`tracer.motion.stepper.lane_step` takes all the steps at once with the loops over lanes
innermost (so they compile to SIMD instructions), and every lane then checks its own step, walls
and events; a lane whose ray has ended takes the next. The lanes do not interact: a ray's result
does not depend on its neighbours.

Step length and electrodes. A step is never longer than ``max_step`` metres of path, and never
leaves its cell (:mod:`tracer.motion.walls`), so the Runge–Kutta stages cannot jump over a region
where the field changes; events are found on each accepted step's dense output
(:mod:`tracer.motion.events`). The energy ledger (:func:`tracer.ledger.residual_J`) is kept at
every accepted step and event.

Phases. A round is a short sequence of phases, each a loop over the lanes in a module named for
it: :func:`tracer.motion.rays.take_rays` (only when a lane is free and rays remain),
:func:`tracer.motion.choose.choose_steps`, :func:`tracer.motion.stepper.lane_step`,
:func:`tracer.motion.check.check_steps` (and :func:`tracer.motion.check.load_next_groups` with
voltages in time), :func:`tracer.motion.stepper.lane_next_rates`,
:func:`tracer.motion.settle.settle_steps` (and :func:`tracer.motion.settle.cut_back` when steps
are cut back to a wall), the accepted steps (below) and :func:`tracer.motion.rays.hand_in`. They
share the lane state of :func:`tracer.motion.bundles.lane_state` (named rows of three arrays)
and the stepper's workspace. The stepper's two phases are copied into the loop by numba
(``inline="always"``); the others are compiled on their own and inlined by LLVM
(``forceinline=True``), which keeps the loop's first compile no longer than before the split
(DEVELOPERS.md, "numba's cache").

The accepted steps are the one block written in the loop itself, not a phase: their events, ledger
and move call functions that are not inlined (the event search, ``potential_at``, the dV/dt
work), and numba keeps a reference count pair of every array an inlined function takes whenever
such a call lies inside it; this block would take some thirty arrays (the drive and the shapes
among them), which made warm tracing 3-9 % slower as a phase.
"""

import math

import numpy as np
from numba import njit, prange

from tracer.ledger import GAUSS_POINTS, GAUSS_THETA, kinetic_energy_J, residual_J, time_work
from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_ELECTRODE, C_EVALS, C_PATH, C_STEPS,
                                   COUNTS, F_ERR, F_KE, F_SPREAD, F_STOP, F_T, F_V, F_WORK,
                                   F_WORST, I_AHEAD_I, I_AHEAD_J, I_CI, I_CJ, I_END_I, I_END_J,
                                   I_ENTER, I_PAST, I_PIECE, I_RAY,
                                   I_STRIDE, I_TAKEN, LANDED, LANES, LEFT, PLANE, ROW_LEN,
                                   RUNNING, TIME, V_K0, V_K1, V_RC, V_Y0, V_Y1, W_BNEXT,
                                   W_BPATCH, W_ERR, W_H, W_K, W_NEXT, W_PATCH, W_RATE, W_ROWS,
                                   W_T, W_V1, W_VN, W_Y0, lane_state, put_row)
from tracer.motion.check import check_steps, load_next_groups
from tracer.motion.choose import choose_steps
from tracer.motion.drive import (D_CELL, D_NEXT, Drive, cell_group_potential, drive_workspace,
                                 group_potentials, potential_at)
from tracer.motion.events import (EV_LINE, MAX_HALVINGS, TOUCH, bend, bow, find_landing, locate,
                                  outside, past_line, plane_crossings, r_line, touches_surface,
                                  z_line)
from tracer.motion.force import speed
from tracer.motion.rays import hand_in, take_rays
from tracer.motion.settle import cut_back, settle_steps
from tracer.motion.stepper import dense, first_rate, lane_next_rates, lane_step, propose
from tracer.motion.symmetry import map_r
from tracer.motion.walls import SNAP
from tracer.waveforms import jump_at, piece


@njit(cache=True, error_model="numpy")
def thin_path(path, n):
    """Keep every other row of the first n path rows (the first always); returns the new count."""
    m = (n + 1) // 2
    for j in range(1, m):
        path[j] = path[2 * j]
    return m


@njit(cache=True, error_model="numpy")
def work_along(w, dw, l, rc, theta, h, t0, m, waves, nodes, sym, phi, buf):
    """The dV/dt work (volts) and its magnitude along the first fraction theta of lane l's step of
    length h from t0 on waveform piece m (:func:`tracer.ledger.time_work`), the group maps taken
    at the Gauss nodes of its dense output rc from the polynomials of the lane's cell that its
    step's force came from; ``phi`` is float64[GAUSS_POINTS, K] scratch."""
    pz, pr = w[W_PATCH + 16, l], w[W_PATCH + 17, l]
    for i in range(GAUSS_POINTS):
        dense(rc, theta * GAUSS_THETA[i], buf)
        for k in range(phi.shape[1]):
            phi[i, k] = cell_group_potential(dw, l, k, pz, pr, nodes, sym, buf[0], buf[1], buf[2])
    return time_work(waves, m, t0, theta * h, phi)


@njit(cache=True, error_model="numpy")
def corner_jump(drive, t, nodes, sym, x, y, z, at_x):
    """The work (volts) of the waveforms' jumps at corner time t at the point (x, y, z): the
    group maps there (into at_x) weighed by each group's jump (a function of its own, called once
    a corner, to keep the group maps' interpolant out of the loop's first compile)."""
    group_potentials(drive, nodes, sym, x, y, z, at_x)
    jump = 0.0
    for k in range(drive.driven.shape[0]):
        jump += jump_at(drive.waves, k, t) * at_x[k]
    return jump


@njit(cache=True, error_model="numpy")
def trace_lanes(lo, hi, starts, t_start, herm, drive, nodes, sym, bounds, cell, shapes, mass,
                charge, t_max, rtol, atol_p, max_step, sample, fine, planes, stops, max_steps,
                final, info, cross_plane, cross_state, paths, quiet, spent, magnet):
    """Trace rays lo..hi-1 of ``starts`` on one thread, ``LANES`` at a time.

    Every lane holds one ray; each round, idle lanes take the next rays, every lane chooses its
    step, :func:`lane_step` takes all the steps at once, and every lane checks its own: error and
    cell walls, then (after :func:`lane_next_rates` has given the rates in the cells the steps are
    entering) the kink at the wall, events and the ledger. Lanes whose ray has ended hand in its
    results.

    Row r of ``final`` (a state row, ``ROW_*`` of :mod:`tracer.motion.bundles`, with the worst
    |ledger|) and of ``info`` (the ``C_*`` counts), and ``cross_plane``/``cross_state`` (state
    rows, the worst |ledger| so far) receive ray r's results; ``paths[r]`` (for r < len(paths))
    receives its accepted-step points (state rows with the signed ledger); when it fills up, every
    other point is dropped and the spacing doubles, so it always spans the whole ray (its last row
    is kept for the end point). In the cells marked by ``quiet``
    (:func:`tracer.motion.events.quiet_cells`) accepted steps skip the event search.

    Voltages in time (``drive`` with K > 0 groups, :mod:`tracer.motion.drive`): ray r starts at
    ``t_start[r]`` and flies for at most ``t_max``; its steps end on waveform corners (where a
    jump adds its work) and are at most ``drive.waves.max_step_s`` long; the ledger subtracts the
    dV/dt work (:func:`tracer.ledger.time_ledger_J`), whose sum and magnitude over the ray go to
    ``spent[r]`` (volts). With K = 0 none of this runs and the trace is the static one.

    A ``magnet`` (:class:`tracer.motion.bundles.Magnet`) adds q v x B to the force, the lanes
    keeping A_theta's polynomial of their cells beside the potential's; ``None`` compiles the
    electric-only kernel.
    """
    w = np.zeros((W_ROWS, LANES))
    lf, li, vec = lane_state()
    waves = drive.waves
    nk = drive.driven.shape[0]
    timed = nk > 0
    dw = drive_workspace(drive)
    phi = np.zeros((GAUSS_POINTS, nk))
    at_x = np.zeros(nk)
    k_new = np.empty((1, 6))      # a rate in a new cell
    ahead = np.empty((3, 5))      # the predicted path of the next step (walls.reach)
    buf = np.empty(6)
    hits = np.empty(2)            # plane crossings on a piece (events.plane_crossings)
    stack = np.empty((MAX_HALVINGS + 2, 8))   # pieces being halved (events.touch)
    pa = np.empty(2)
    box = np.empty(4)
    atol_x = rtol * min(nodes.hz, nodes.hr)
    touch_tol = TOUCH * min(nodes.hz, nodes.hr)
    snap = SNAP * min(nodes.hz, nodes.hr)
    max_cross = cross_plane.shape[1]
    nxt = lo
    busy = 0
    while True:
        if busy < LANES and nxt < hi:
            taken = take_rays(nxt, hi, starts, t_start, atol_p, t_max, herm, drive, dw, nodes,
                              sym, bounds, shapes, mass, charge, max_step, snap, paths, magnet, w,
                              lf, li, vec, k_new)
            busy += taken - nxt
            nxt = taken
        if busy == 0:
            break
        choose_steps(timed, waves.corner, waves.max_step_s, nodes, sym, mass, max_step,
                     max_steps, snap, w, lf, li, vec, box, ahead)
        lane_step(w, nodes, sym, mass, charge, rtol, atol_x, dw, waves, li[I_PIECE], magnet)
        check_steps(herm, nodes, sym, mass, snap, magnet, w, lf, li, vec, box, buf)
        if nk > 0:
            load_next_groups(drive, dw, nodes, sym, w, li)
        lane_next_rates(w, nodes, sym, mass, charge, dw, waves, li[I_PIECE], magnet)
        if settle_steps(rtol, atol_p, w, lf, li, vec, k_new) > 0:
            cut_back(nodes, sym, shapes, w, lf, li, vec, box, buf)

        # the accepted steps: events on each one's dense output, piece by piece (none looked for
        # in the cells marked quiet), the first ending the ray; plane crossings before it with
        # the ledger there; then the lane moves to the step's end (into the cell ahead if it
        # enters it; onto the next waveform piece at a corner, with the jump's work) or to the
        # event that ended its ray, with the ledger, the dV/dt work, the path point and the next
        # step's proposal (written here, not as a phase: see the module's docstring)
        for l in range(LANES):
            if not li[I_TAKEN, l]:
                continue
            r = li[I_RAY, l]
            h = w[W_H, l]
            t = lf[F_T, l]
            rc = vec[l, V_RC:V_RC + 5]
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
                                dense(rc, th, buf)
                                cross_plane[r, nc] = q
                                ke = kinetic_energy_J(buf[3], buf[4], buf[5], mass)
                                vq = potential_at(herm, drive, li[I_PIECE, l], t + th * h, nodes,
                                                  sym, buf[0], buf[1], buf[2])
                                res = residual_J(lf[F_KE, l], ke, charge, lf[F_V, l], vq)
                                if timed:
                                    wq = lf[F_WORK, l] + work_along(w, dw, l, rc, th, h, t,
                                                                    li[I_PIECE, l], waves,
                                                                    nodes, sym, phi, buf)[0]
                                    dense(rc, th, buf)
                                    res -= charge * wq
                                lf[F_WORST, l] = max(lf[F_WORST, l], abs(res))
                                put_row(cross_state[r], nc, t + th * h, buf, ke, lf[F_WORST, l])
                            li[C_CROSSINGS, l] += 1
                if li[C_CODE, l] != RUNNING:
                    break
                ta, za, ra, xa, ya_ = tb, zb, rb, xb, yb

            # the lane moves to the step's end, or to the event that ended its ray
            n_path_cap = paths.shape[1] if r < paths.shape[0] else 0
            if li[C_CODE, l] == RUNNING:
                t_new = t + h
                i1, j1 = li[I_END_I, l], li[I_END_J, l]
                ni, nj = li[I_AHEAD_I, l], li[I_AHEAD_J, l]
                enter = li[I_ENTER, l]
                # the ledger takes the potential of the cell the step ends in
                v1 = w[W_V1, l]
                if li[I_PAST, l]:
                    if enter and i1 == ni and j1 == nj:
                        v1 = w[W_VN, l]
                    else:   # potential_at of a static field is field_at's potential
                        v1 = potential_at(herm, drive, li[I_PIECE, l], t_new, nodes, sym,
                                          vec[l, V_Y1, 0], vec[l, V_Y1, 1], vec[l, V_Y1, 2])
                        li[C_EVALS, l] += 1
                ke1 = kinetic_energy_J(vec[l, V_Y1, 3], vec[l, V_Y1, 4], vec[l, V_Y1, 5], mass)
                res = residual_J(lf[F_KE, l], ke1, charge, lf[F_V, l], v1)
                corner = False
                if timed:
                    dwk, mag = work_along(w, dw, l, rc, 1.0, h, t, li[I_PIECE, l], waves, nodes,
                                          sym, phi, buf)
                    lf[F_WORK, l] += dwk
                    lf[F_SPREAD, l] += mag
                    res -= charge * lf[F_WORK, l]
                    m = li[I_PIECE, l]
                    if m < waves.corner.size and t_new >= waves.corner[m]:
                        # the step ends on a corner: a jump's work, the next piece
                        corner = True
                        t_new = waves.corner[m]
                        jump = corner_jump(drive, t_new, nodes, sym, vec[l, V_Y1, 0],
                                           vec[l, V_Y1, 1], vec[l, V_Y1, 2], at_x)
                        lf[F_WORK, l] += jump
                        lf[F_SPREAD, l] += abs(jump)
                        li[I_PIECE, l] = piece(waves, t_new)
                lf[F_WORST, l] = max(lf[F_WORST, l], abs(res))
                if t_new >= lf[F_STOP, l]:
                    li[C_CODE, l] = TIME
                    t_new = lf[F_STOP, l]
                lf[F_T, l] = t_new
                w[W_T, l] = t_new
                for i in range(6):
                    vec[l, V_Y0, i] = vec[l, V_Y1, i]
                    vec[l, V_K0, i] = w[W_RATE + i, l] if enter else vec[l, V_K1, i]
                    w[W_Y0 + i, l] = vec[l, V_Y0, i]
                    w[W_K + i, l] = vec[l, V_K0, i]
                if enter:
                    li[I_CI, l] = ni
                    li[I_CJ, l] = nj
                    for m in range(18):
                        w[W_PATCH + m, l] = w[W_NEXT + m, l]
                    if magnet is not None:
                        for m in range(16):
                            w[W_BPATCH + m, l] = w[W_BNEXT + m, l]
                    if timed:
                        dw[D_CELL, :, :, l] = dw[D_NEXT, :, :, l]
                if corner:   # the first rate of the next step on the new piece
                    first_rate(w, l, vec[l, V_Y0], t_new, dw, waves, li[I_PIECE, l], nodes, sym,
                               mass, charge, vec[l, V_K0:V_K0 + 1], magnet)
                    li[C_EVALS, l] += 1
                    for i in range(6):
                        w[W_K + i, l] = vec[l, V_K0, i]
                steps = li[C_STEPS, l]
                if n_path_cap > 0 and steps % li[I_STRIDE, l] == 0:
                    if li[C_PATH, l] == n_path_cap - 1:
                        li[C_PATH, l] = thin_path(paths[r], li[C_PATH, l])
                        li[I_STRIDE, l] *= 2
                    if steps % li[I_STRIDE, l] == 0:
                        put_row(paths[r], li[C_PATH, l], lf[F_T, l], vec[l, V_Y0], ke1, res)
                        li[C_PATH, l] += 1
                lf[F_ERR, l] = propose(h, lf[F_ERR, l], w[W_ERR, l])
            else:
                if timed:
                    dwk, mag = work_along(w, dw, l, rc, t_end, h, t, li[I_PIECE, l], waves, nodes,
                                          sym, phi, buf)
                    lf[F_WORK, l] += dwk
                    lf[F_SPREAD, l] += mag
                dense(rc, t_end, buf)
                for i in range(6):
                    vec[l, V_Y0, i] = buf[i]
                lf[F_T, l] = t + t_end * h
                ke1 = kinetic_energy_J(vec[l, V_Y0, 3], vec[l, V_Y0, 4], vec[l, V_Y0, 5], mass)
                v1 = potential_at(herm, drive, li[I_PIECE, l], lf[F_T, l], nodes, sym,
                                  vec[l, V_Y0, 0], vec[l, V_Y0, 1], vec[l, V_Y0, 2])
                res = residual_J(lf[F_KE, l], ke1, charge, lf[F_V, l], v1)
                if timed:
                    res -= charge * lf[F_WORK, l]
                lf[F_WORST, l] = max(lf[F_WORST, l], abs(res))
                if n_path_cap > 0:
                    put_row(paths[r], li[C_PATH, l], lf[F_T, l], vec[l, V_Y0], ke1, res)
                    li[C_PATH, l] += 1
        busy = hand_in(final, info, spent, mass, lf, li, vec)



@njit(cache=True, parallel=True, error_model="numpy")
def trace_rays(starts, t_start, herm, waves, driven, nodes, sym, bounds, cell, shapes, mass, charge,
               t_max, rtol, atol_p, max_step, sample, fine, planes, stops, max_steps, max_cross,
               paths, quiet, group, magnet):
    """Trace many rays in parallel (numba prange over groups of rays, each traced by
    :func:`trace_lanes`, whose docstring gives the layouts).

    Parameters
    ----------
    starts : float64[n, 6]
        Start states (x, y, z, px, py, pz), SI.
    t_start : float64[n]
        Start times, seconds (each ray flies for at most ``t_max`` from its start).
    herm : float64[4, nz, nr]
        The map's Hermite node data (:class:`tracer.fieldmap.PotentialMap`); with voltages in
        time, that of the static map.
    waves, driven : tracer.waveforms.WaveArrays, float64[K, 4, nz, nr]
        The waveforms and group maps (:class:`tracer.motion.drive.Drive`; K = 0 for a static
        field), apart: numba's parallel loop takes no tuple of tuples.
    nodes : Nodes
        Its node grid.
    sym : int
        The symmetry code (:data:`tracer.motion.symmetry.SYMMETRY_CODE`).
    bounds : float64[4]
        The domain (z_min, z_max, r_min, r_max).
    cell : int array[nz - 1, nr - 1]
        ``Raster.cell`` of the geometry.
    shapes : Shapes
        The electrode shapes.
    atol_p : float64[n]
        Absolute momentum tolerance of each ray.
    paths : float64[k, m, ROW_LEN]
        Path buffers of the first k rays (k may be 0).
    planes : float64[k, 3]
        Detector planes as lines (n_z, n_r, d) of the map plane, n_z z + n_r r = d with a unit
        normal (:meth:`tracer.schema.Plane.line`).
    stops : bool[k]
        Whether each plane ends the rays that cross it.
    quiet : bool[nz - 1, nr - 1]
        :func:`tracer.motion.events.quiet_cells` of the cell map and planes.
    group : int
        Rays per group (one thread traces a group, ``LANES`` rays at a time).
    magnet : Magnet or None
        The static magnetic field (:class:`tracer.motion.bundles.Magnet`); ``None`` for an
        electric-only run, which compiles without it.

    Returns
    -------
    final : float64[n, ROW_LEN] (state rows); info : int64[n, COUNTS] (``C_*`` columns: code,
    electrode, crossings, path points, steps, rejected steps, field evaluations); cross_plane :
    int64[n, max_cross]; cross_state : float64[n, max_cross, ROW_LEN]; spent : float64[n, 2]
    (the dV/dt and jump work W of each ray and its magnitude, volts; zeros in a static field)
    """
    n = starts.shape[0]
    final = np.zeros((n, ROW_LEN))
    info = np.zeros((n, COUNTS), dtype=np.int64)
    cross_plane = np.full((n, max_cross), -1, dtype=np.int64)
    cross_state = np.zeros((n, max_cross, ROW_LEN))
    spent = np.zeros((n, 2))
    for g in prange(-(-n // group)):
        trace_lanes(g * group, min(n, (g + 1) * group), starts, t_start, herm,
                    Drive(waves, driven), nodes, sym,
                    bounds, cell, shapes, mass, charge, t_max, rtol, atol_p, max_step, sample, fine,
                    planes, stops, max_steps, final, info, cross_plane, cross_state, paths, quiet,
                    spent, magnet)
    return final, info, cross_plane, cross_state, spent
