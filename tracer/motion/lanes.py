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
"""

import math

import numpy as np
from numba import njit, prange

from tracer.fieldmap import patch_coefficients
from tracer.ledger import GAUSS_POINTS, GAUSS_THETA, kinetic_energy_J, residual_J, time_work
from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_ELECTRODE, C_EVALS, C_PATH,
                                   C_REJECTED, C_STEPS, COUNTS, INSIDE, LANDED, LANES, LEFT,
                                   PLANE, ROW_LEN, RUNNING, STALLED, TIME, W_ATOL, W_BNEXT,
                                   W_BPATCH, W_ERR, W_H, W_K, W_NEXT, W_PATCH, W_ROWS, W_T, W_V1,
                                   W_VN, W_Y0, W_Y1, W_DENSE, W_RATE, put_row)
from tracer.motion.drive import (D_CELL, D_NEXT, Drive, cell_group_potential, drive_workspace,
                                 group_potentials, load_cell, potential_at, weigh)
from tracer.motion.events import (EV_LINE, MAX_HALVINGS, TOUCH, bend, bow, electrode_of,
                                  find_landing, locate, outside, past_line, plane_crossings,
                                  r_line, touches_surface, z_line)
from tracer.motion.force import rate, speed
from tracer.motion.stepper import (dense, lane_next_rates, lane_rate, lane_step, lane_uniform,
                                   propose, put_magnet_patch, put_patch, step_cap)
from tracer.motion.symmetry import map_r
from tracer.motion.walls import (KINK_FRACTION, SNAP, STRETCH, cell_ahead, cell_box, cell_of,
                                 excursion, exit_time, hold, kink_error, reach, wall_theta,
                                 wall_time)
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
def first_rate(w, l, y, t, dw, waves, m, nodes, sym, mass, charge, k, magnet):
    """The rate at state y at time t in lane l's cell, its polynomial weighed on waveform piece m
    (:mod:`tracer.motion.drive`), into k[0]; returns the potential there."""
    weigh(dw, D_CELL, l, waves, m, t, w, W_PATCH)
    for i in range(6):
        w[W_Y1 + i, l] = y[i]
    lane_rate(w, l, t, nodes, sym, mass, charge, W_PATCH, W_V1, magnet, W_BPATCH)
    lane_uniform(w, l, magnet, charge)
    for i in range(6):
        k[0, i] = w[W_RATE + i, l]
    return w[W_V1, l]


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

    Every lane holds one ray; each round, every lane chooses its step, :func:`lane_step` takes all
    the steps at once, and every lane checks its own: error and cell walls, then (after
    :func:`lane_next_rates` has given the rates in the cells the steps are entering) the kink at
    the wall, events and the ledger. A lane whose ray has ended takes the next ray.

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
    waves = drive.waves
    nk = drive.driven.shape[0]
    timed = nk > 0
    dw = drive_workspace(drive)
    pieces = np.zeros(LANES, dtype=np.int64)   # the waveform piece of each lane's step
    work = np.zeros(LANES)        # the dV/dt and jump work so far, volts
    spread = np.zeros(LANES)      # its magnitude, volts
    t_stop = np.zeros(LANES)      # when the ray's time is up
    phi = np.zeros((GAUSS_POINTS, nk))
    at_x = np.zeros(nk)
    ray = np.full(LANES, -1)
    code = np.full(LANES, RUNNING)
    electrode = np.full(LANES, -1)
    ci = np.zeros(LANES, dtype=np.int64)
    cj = np.zeros(LANES, dtype=np.int64)
    steps = np.zeros(LANES, dtype=np.int64)
    rejected = np.zeros(LANES, dtype=np.int64)
    evals = np.zeros(LANES, dtype=np.int64)
    n_cross = np.zeros(LANES, dtype=np.int64)
    n_path = np.zeros(LANES, dtype=np.int64)
    stride = np.ones(LANES, dtype=np.int64)
    cut = np.zeros(LANES, dtype=np.bool_)
    t = np.zeros(LANES)
    hp = np.zeros(LANES)      # length of the last accepted step (0: none, no prediction from it)
    h_cut = np.zeros(LANES)   # length of a step cut back to a wall, to be redone
    h_err = np.zeros(LANES)   # the step-size proposal of the error control
    worst = np.zeros(LANES)
    ke_start = np.zeros(LANES)
    v_start = np.zeros(LANES)
    y0 = np.zeros((LANES, 6))
    k0 = np.zeros((LANES, 6))     # the first stage rate of the lane's next step
    y1 = np.zeros((LANES, 6))
    k1 = np.zeros((LANES, 6))     # the rate at the end of the step
    rc = np.zeros((LANES, 5, 6))  # dense output of the last accepted step
    rt = np.zeros((LANES, 5, 6))  # dense output of the trial step
    k_new = np.empty((1, 6))      # a rate in a new cell
    passed = np.zeros(LANES, dtype=np.bool_)      # the step passed the error test
    need = np.zeros(LANES, dtype=np.bool_)        # the step needs the rate in the cell ahead
    past_cell = np.zeros(LANES, dtype=np.bool_)   # the step ends outside its cell
    end_cell = np.zeros((LANES, 4), dtype=np.int64)  # the cell it ends in, the cell ahead
    theta = np.zeros(LANES)       # where on the step it is to be cut back (> 1: nowhere)
    dt = np.zeros(LANES)          # time between the step's end and the wall it is passing
    ahead = np.empty((3, 5))      # the predicted path of the next step (reach)
    buf = np.empty(6)
    hits = np.empty(2)            # plane crossings on a piece (plane_crossings)
    stack = np.empty((MAX_HALVINGS + 2, 8))   # pieces being halved (events.touch)
    pa = np.empty(2)
    box = np.empty(4)
    atol_x = rtol * min(nodes.hz, nodes.hr)
    touch_tol = TOUCH * min(nodes.hz, nodes.hr)
    snap = SNAP * min(nodes.hz, nodes.hr)
    max_cross = cross_plane.shape[1]
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    nxt = lo
    while True:
        # idle lanes take the next rays
        active = 0
        for l in range(LANES):
            if ray[l] < 0 and nxt < hi:
                r = nxt
                nxt += 1
                ray[l] = r
                for i in range(6):
                    y0[l, i] = starts[r, i]
                i, j = cell_ahead(nodes, sym, y0[l], snap)
                ci[l] = i
                cj[l] = j
                patch = patch_coefficients(herm, ci[l], cj[l], hz, hr, sym != 1)
                put_patch(w, l, W_PATCH, patch, z0 + ci[l] * hz, r0 + cj[l] * hr)
                bpatch = put_magnet_patch(w, l, W_BPATCH, magnet, ci[l], cj[l], hz, hr, patch)
                if timed:
                    pieces[l] = piece(waves, t_start[r])
                    load_cell(dw, D_CELL, l, patch, drive, ci[l], cj[l], hz, hr, sym != 1)
                    v_start[l] = first_rate(w, l, y0[l], t_start[r], dw, waves, pieces[l], nodes,
                                            sym, mass, charge, k_new, magnet)
                else:
                    v_start[l] = rate(patch, z0 + ci[l] * hz, r0 + cj[l] * hr, nodes, sym, mass,
                                      charge, y0[l], k_new, 0, magnet, bpatch)
                for i in range(6):
                    k0[l, i] = k_new[0, i]
                    w[W_Y0 + i, l] = y0[l, i]
                    w[W_K + i, l] = k_new[0, i]
                w[W_ATOL, l] = atol_p[r]
                ke_start[l] = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], mass)
                evals[l] = 1
                steps[l] = 0
                rejected[l] = 0
                n_cross[l] = 0
                n_path[l] = 0
                stride[l] = 1
                t[l] = t_start[r]
                w[W_T, l] = t_start[r]
                t_stop[l] = t_start[r] + t_max
                work[l] = 0.0
                spread[l] = 0.0
                hp[l] = 0.0
                h_cut[l] = 0.0
                worst[l] = 0.0
                h_err[l] = min(step_cap(y0[l], k0[l], mass, max_step), t_max)
                code[l] = RUNNING
                electrode[l] = -1
                r_start = map_r(sym, y0[l, 0], y0[l, 1])
                if outside(bounds, sym, y0[l, 2], r_start):
                    code[l] = LEFT
                else:
                    k_in = electrode_of(shapes, y0[l, 2], r_start)
                    if k_in >= 0:
                        code[l] = INSIDE
                        electrode[l] = k_in
                    elif r < paths.shape[0]:
                        put_row(paths[r], 0, t[l], y0[l], ke_start[l], 0.0)
                        n_path[l] = 1
            if ray[l] >= 0:
                active += 1
        if active == 0:
            break

        # each lane chooses its step
        for l in range(LANES):
            if ray[l] < 0 or code[l] != RUNNING:
                continue
            if steps[l] + rejected[l] >= max_steps:
                code[l] = STALLED
                continue
            cut[l] = h_cut[l] > 0.0
            if cut[l]:
                h = min(h_cut[l], t_stop[l] - t[l])
                h_cut[l] = 0.0
            else:
                h = min(h_err[l], step_cap(y0[l], k0[l], mass, max_step), t_stop[l] - t[l])
                hard = t_stop[l] - t[l]     # a step never passes these, stretched or not
                if timed:   # end on the next waveform corner; resolve the RF period
                    m = pieces[l]
                    t_corner = waves.corner[m] if m < waves.corner.size else np.inf
                    h = min(h, waves.max_step_s, t_corner - t[l])
                    hard = min(hard, t_corner - t[l])
                cell_box(nodes, ci[l], cj[l], box)
                reach(rc[l], hp[l], y0[l], k0[l], mass, STRETCH * h, ahead)
                h_wall = exit_time(ahead, y0[l], k0[l], sym, box, STRETCH * h, 0.1 * snap)
                if h_wall < STRETCH * h:
                    h = min(h_wall, hard)
            if t[l] + h == t[l]:
                code[l] = STALLED
                continue
            w[W_H, l] = h

        lane_step(w, nodes, sym, mass, charge, rtol, atol_x, dw, waves, pieces, magnet)

        # each lane checks its step: error, then the cell it ends in and the one it is entering
        for l in range(LANES):
            passed[l] = False
            if ray[l] < 0 or code[l] != RUNNING:
                continue
            h = w[W_H, l]
            evals[l] += 6
            enorm = w[W_ERR, l]
            if not enorm <= 1.0:
                rejected[l] += 1
                h_err[l] = propose(h, h_err[l], enorm)
                continue
            passed[l] = True
            for i in range(6):
                y1[l, i] = w[W_Y1 + i, l]
                k1[l, i] = w[W_K + 36 + i, l]
            for m in range(5):
                for i in range(6):
                    rt[l, m, i] = w[W_DENSE + 6 * m + i, l]
            cell_box(nodes, ci[l], cj[l], box)
            hold(box, sym, y0[l])    # a step may start just before the wall it has entered through
            i1, j1 = cell_of(nodes, sym, y1[l, 0], y1[l, 1], y1[l, 2])
            ni, nj = cell_ahead(nodes, sym, y1[l], snap)
            past = i1 != ci[l] or j1 != cj[l]
            if past and ni == ci[l] and nj == cj[l]:
                ni, nj = i1, j1
            th = 2.0   # where to cut the step back to the wall (searched before it; > 1: nowhere)
            if abs(ni - ci[l]) > 1 or abs(nj - cj[l]) > 1:
                th = 1.0
            elif not past:
                th = excursion(rt[l], sym, y0[l], k0[l], y1[l], k1[l], h, box, buf)
            need[l] = False
            if th > 1.0 and (ni != ci[l] or nj != cj[l]):
                dt[l] = wall_time(nodes, sym, y1[l], k1[l], ci[l], cj[l], ni, nj)
                if past and dt[l] * speed(y1[l], mass) > snap:
                    th = 1.0
                else:
                    need[l] = True
                    patch = patch_coefficients(herm, ni, nj, hz, hr, sym != 1)
                    put_patch(w, l, W_NEXT, patch, z0 + ni * hz, r0 + nj * hr)
                    put_magnet_patch(w, l, W_BNEXT, magnet, ni, nj, hz, hr, patch)
                    if timed:
                        load_cell(dw, D_NEXT, l, patch, drive, ni, nj, hz, hr, sym != 1)
            theta[l] = wall_theta(rt[l], sym, box, th, shapes, buf) if th <= 1.0 else th
            past_cell[l] = past
            end_cell[l, 0] = i1
            end_cell[l, 1] = j1
            end_cell[l, 2] = ni
            end_cell[l, 3] = nj

        # the rates in the cells the steps are entering, all lanes at once
        lane_next_rates(w, nodes, sym, mass, charge, dw, waves, pieces, magnet)

        # each lane enters the next cell, or cuts its step back to the wall, or goes on
        for l in range(LANES):
            if not passed[l]:
                continue
            r = ray[l]
            h = w[W_H, l]
            enorm = w[W_ERR, l]
            v1 = w[W_V1, l]
            th = theta[l]
            past = past_cell[l]
            i1, j1, ni, nj = end_cell[l, 0], end_cell[l, 1], end_cell[l, 2], end_cell[l, 3]
            enter = False
            v_next = v1
            if need[l]:
                v_next = w[W_VN, l]
                for i in range(6):
                    k_new[0, i] = w[W_RATE + i, l]
                evals[l] += 1
                if cut[l] or (kink_error(k_new[0], k1[l], dt[l], y0[l], y1[l], rtol, atol_p[r])
                              <= KINK_FRACTION):
                    enter = True
                elif past:
                    cell_box(nodes, ci[l], cj[l], box)
                    hold(box, sym, y0[l])
                    th = wall_theta(rt[l], sym, box, 1.0, shapes, buf)
            if th <= 1.0:
                rejected[l] += 1
                h_cut[l] = th * h
                continue

            # accepted step: look for events on the dense output, piece by piece
            steps[l] += 1
            for m in range(5):
                for i in range(6):
                    rc[l, m, i] = rt[l, m, i]
            hp[l] = h
            n_sub = 0
            if not quiet[ci[l], cj[l]]:
                n_sub = max(1, int(math.ceil(max(speed(y0[l], mass), speed(y1[l], mass)) * h
                                             / sample)))
            rcl = rc[l]
            curve = bend(rcl) if n_sub > 0 else 0.0
            ta = 0.0
            za, ra = y0[l, 2], map_r(sym, y0[l, 0], y0[l, 1])
            xa, ya_ = y0[l, 0], y0[l, 1]
            t_end = 2.0
            for m in range(1, n_sub + 1):
                tb = m / n_sub
                dense(rcl, tb, buf)
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
                            t_end = min(t_end, locate(rcl, sym, ta, tb, EV_LINE, line, rising,
                                                      shapes, buf))
                    code[l] = LEFT
                # landing on an electrode
                pad = 0.5 * chord if sym == 0 else 0.0
                bulge = bow(curve, 1.0 / n_sub)
                if touches_surface(cell, nodes, za, ra, zb, rb, pad, bulge):
                    pa[0] = za
                    pa[1] = ra
                    th, k = find_landing(rcl, sym, ta, min(tb, t_end), pa, chord, fine, curve,
                                         touch_tol, shapes, stack, buf)
                    if th < t_end:
                        t_end = th
                        code[l] = LANDED
                        electrode[l] = k
                # detector planes
                for q in range(planes.shape[0]):
                    line = (planes[q, 0], planes[q, 1], planes[q, 2])
                    n_hits = plane_crossings(rcl, sym, ta, tb, line, past_line(line, za, ra),
                                             past_line(line, zb, rb), bulge + pad, hits, shapes, buf)
                    for e in range(n_hits):
                        th = hits[e]
                        if th <= t_end:
                            if stops[q]:
                                t_end = th
                                code[l] = PLANE
                                electrode[l] = -1
                            nc = n_cross[l]
                            if nc < max_cross:
                                dense(rcl, th, buf)
                                cross_plane[r, nc] = q
                                ke = kinetic_energy_J(buf[3], buf[4], buf[5], mass)
                                vq = potential_at(herm, drive, pieces[l], t[l] + th * h, nodes,
                                                  sym, buf[0], buf[1], buf[2])
                                res = residual_J(ke_start[l], ke, charge, v_start[l], vq)
                                if timed:
                                    wq = work[l] + work_along(w, dw, l, rcl, th, h, t[l], pieces[l],
                                                              waves, nodes, sym, phi, buf)[0]
                                    dense(rcl, th, buf)
                                    res -= charge * wq
                                worst[l] = max(worst[l], abs(res))
                                put_row(cross_state[r], nc, t[l] + th * h, buf, ke, worst[l])
                            n_cross[l] += 1
                if code[l] != RUNNING:
                    break
                ta, za, ra, xa, ya_ = tb, zb, rb, xb, yb

            n_path_cap = paths.shape[1] if r < paths.shape[0] else 0
            if code[l] == RUNNING:
                t_new = t[l] + h
                # the ledger takes the potential of the cell the step ends in
                if past:
                    if enter and i1 == ni and j1 == nj:
                        v1 = v_next
                    else:   # potential_at of a static field is field_at's potential
                        v1 = potential_at(herm, drive, pieces[l], t_new, nodes, sym, y1[l, 0],
                                          y1[l, 1], y1[l, 2])
                        evals[l] += 1
                ke1 = kinetic_energy_J(y1[l, 3], y1[l, 4], y1[l, 5], mass)
                res = residual_J(ke_start[l], ke1, charge, v_start[l], v1)
                corner = False
                if timed:
                    dwk, mag = work_along(w, dw, l, rcl, 1.0, h, t[l], pieces[l], waves, nodes,
                                          sym, phi, buf)
                    work[l] += dwk
                    spread[l] += mag
                    res -= charge * work[l]
                    m = pieces[l]
                    if m < waves.corner.size and t_new >= waves.corner[m]:
                        # the step ends on a corner: a jump's work, the next piece
                        corner = True
                        t_new = waves.corner[m]
                        jump = corner_jump(drive, t_new, nodes, sym, y1[l, 0], y1[l, 1], y1[l, 2],
                                           at_x)
                        work[l] += jump
                        spread[l] += abs(jump)
                        pieces[l] = piece(waves, t_new)
                worst[l] = max(worst[l], abs(res))
                if t_new >= t_stop[l]:
                    code[l] = TIME
                    t_new = t_stop[l]
                t[l] = t_new
                w[W_T, l] = t_new
                for i in range(6):
                    y0[l, i] = y1[l, i]
                    k0[l, i] = k_new[0, i] if enter else k1[l, i]
                    w[W_Y0 + i, l] = y0[l, i]
                    w[W_K + i, l] = k0[l, i]
                if enter:
                    ci[l] = ni
                    cj[l] = nj
                    for m in range(18):
                        w[W_PATCH + m, l] = w[W_NEXT + m, l]
                    if magnet is not None:
                        for m in range(16):
                            w[W_BPATCH + m, l] = w[W_BNEXT + m, l]
                    if timed:
                        dw[D_CELL, :, :, l] = dw[D_NEXT, :, :, l]
                if corner:   # the first rate of the next step on the new piece
                    first_rate(w, l, y0[l], t_new, dw, waves, pieces[l], nodes, sym, mass, charge,
                               k_new, magnet)
                    evals[l] += 1
                    for i in range(6):
                        k0[l, i] = k_new[0, i]
                        w[W_K + i, l] = k_new[0, i]
                if n_path_cap > 0 and steps[l] % stride[l] == 0:
                    if n_path[l] == n_path_cap - 1:
                        n_path[l] = thin_path(paths[r], n_path[l])
                        stride[l] *= 2
                    if steps[l] % stride[l] == 0:
                        put_row(paths[r], n_path[l], t[l], y0[l], ke1, res)
                        n_path[l] += 1
                h_err[l] = propose(h, h_err[l], enorm)
            else:
                if timed:
                    dwk, mag = work_along(w, dw, l, rcl, t_end, h, t[l], pieces[l], waves, nodes,
                                          sym, phi, buf)
                    work[l] += dwk
                    spread[l] += mag
                dense(rcl, t_end, buf)
                for i in range(6):
                    y0[l, i] = buf[i]
                t[l] = t[l] + t_end * h
                ke1 = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], mass)
                v1 = potential_at(herm, drive, pieces[l], t[l], nodes, sym, y0[l, 0], y0[l, 1],
                                  y0[l, 2])
                res = residual_J(ke_start[l], ke1, charge, v_start[l], v1)
                if timed:
                    res -= charge * work[l]
                worst[l] = max(worst[l], abs(res))
                if n_path_cap > 0:
                    put_row(paths[r], n_path[l], t[l], y0[l], ke1, res)
                    n_path[l] += 1

        # lanes whose ray has ended hand in its results
        for l in range(LANES):
            r = ray[l]
            if r < 0 or code[l] == RUNNING:
                continue
            put_row(final, r, t[l], y0[l], kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], mass),
                    worst[l])
            info[r, C_CODE] = code[l]
            info[r, C_ELECTRODE] = electrode[l]
            info[r, C_CROSSINGS] = n_cross[l]
            info[r, C_PATH] = n_path[l]
            info[r, C_STEPS] = steps[l]
            info[r, C_REJECTED] = rejected[l]
            info[r, C_EVALS] = evals[l]
            spent[r, 0] = work[l]
            spent[r, 1] = spread[l]
            ray[l] = -1


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
