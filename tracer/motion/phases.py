"""The phases of the lane loop (:func:`tracer.motion.lanes.trace_lanes`), each a small kernel.

One round of the loop runs, over all ``LANES`` lanes of a thread:

1. :func:`start_lanes` — idle lanes take the next rays (the start cell, first rate and ledger);
2. :func:`choose_steps` — each lane chooses its step: the controller's proposal, cut to the
   path, the time limit, the next waveform corner and the predicted cell wall;
3. :func:`tracer.motion.stepper.lane_step` — all the steps at once (the hot, inlined SIMD path);
4. :func:`check_steps` — each lane's error test, then the cell its step ends in and the one it
   is entering (whose polynomial it loads);
5. :func:`tracer.motion.stepper.lane_next_rates` — the rates in the cells ahead, all at once;
6. :func:`settle_steps` — each lane enters the next cell or cuts its step back to the wall
   (:func:`wall_verdict`), looks for events on the accepted step (:func:`find_events`), and then
   either moves on (:func:`advance`: the ledger, the waveform corner, the controller, the path)
   or ends its ray at the event (:func:`end_at_event`);
7. :func:`hand_in` — lanes whose ray has ended write its results.

The data travel as the named bundles of :mod:`tracer.motion.bundles` (:class:`Scene`,
:class:`Limits`, :class:`Out`, :class:`Lanes`, :class:`Tally`, :class:`Books`, :class:`Trial`,
:class:`Scratch`), the steps themselves in the stepper's lane workspace ``w``. Only the field
evaluations of the steps are inlined into the loop; the phases are ordinary kernels, so each
compiles once on its own.
"""

import math

import numpy as np
from numba import njit

from tracer.fieldmap import patch_coefficients
from tracer.ledger import GAUSS_POINTS, GAUSS_THETA, kinetic_energy_J, residual_J
from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_ELECTRODE, C_EVALS, C_PATH,
                                   C_REJECTED, C_STEPS, INSIDE, LANDED, LANES, LEFT, PLANE,
                                   RUNNING, STALLED, TIME, W_ATOL, W_BNEXT, W_BPATCH, W_DENSE,
                                   W_ERR, W_H, W_K, W_NEXT, W_PATCH, W_RATE, W_T, W_V1, W_VN,
                                   W_Y0, W_Y1, Books, Lanes, Scratch, Tally, Trial, put_row)
from tracer.motion.drive import (D_CELL, D_NEXT, group_potentials, load_cell, potential_at,
                                 step_work, weigh)
from tracer.motion.events import (EV_LINE, MAX_HALVINGS, bend, bow, electrode_of, find_landing,
                                  locate, outside, past_line, plane_crossings, r_line,
                                  touches_surface, z_line)
from tracer.motion.force import field_at, rate, speed
from tracer.motion.stepper import (dense, lane_rate, propose, put_magnet_patch, put_patch,
                                   step_cap)
from tracer.motion.symmetry import map_r
from tracer.motion.walls import (KINK_FRACTION, STRETCH, cell_ahead, cell_box, cell_of,
                                 excursion, exit_time, hold, kink_error, reach, wall_theta,
                                 wall_time)
from tracer.waveforms import jump_at, piece


@njit(cache=True, error_model="numpy")
def lane_bundles(nk):
    """Fresh :class:`Lanes`, :class:`Tally`, :class:`Books`, :class:`Trial` and :class:`Scratch`
    of a lane loop over a field with nk waveform groups; every lane idle."""
    lanes = Lanes(np.full(LANES, -1), np.full(LANES, RUNNING), np.full(LANES, -1),
                  np.zeros(LANES), np.zeros(LANES), np.zeros(LANES, dtype=np.int64),
                  np.zeros(LANES, dtype=np.int64), np.zeros(LANES, dtype=np.int64),
                  np.zeros((LANES, 6)), np.zeros((LANES, 6)), np.zeros(LANES), np.zeros(LANES),
                  np.zeros(LANES, dtype=np.bool_), np.zeros(LANES), np.zeros((LANES, 5, 6)))
    tally = Tally(np.zeros(LANES, dtype=np.int64), np.zeros(LANES, dtype=np.int64),
                  np.zeros(LANES, dtype=np.int64), np.zeros(LANES, dtype=np.int64),
                  np.zeros(LANES, dtype=np.int64), np.ones(LANES, dtype=np.int64))
    books = Books(np.zeros(LANES), np.zeros(LANES), np.zeros(LANES), np.zeros(LANES),
                  np.zeros(LANES))
    trial = Trial(np.zeros((LANES, 6)), np.zeros((LANES, 6)), np.zeros((LANES, 5, 6)),
                  np.zeros(LANES, dtype=np.bool_), np.zeros(LANES, dtype=np.bool_),
                  np.zeros(LANES, dtype=np.bool_), np.zeros((LANES, 4), dtype=np.int64),
                  np.zeros(LANES), np.zeros(LANES))
    scratch = Scratch(np.empty((1, 6)), np.empty((3, 5)), np.empty(6), np.empty(2),
                      np.empty((MAX_HALVINGS + 2, 8)), np.empty(2), np.empty(4),
                      np.zeros((GAUSS_POINTS, 3)), np.zeros((GAUSS_POINTS, nk)), np.zeros(nk))
    return lanes, tally, books, trial, scratch


@njit(cache=True, error_model="numpy")
def potential(scene, m, t, x, y, z):
    """The potential at a 3-D point at time t on waveform piece m (the static map's when the field
    does not change in time), volts."""
    if scene.drive.driven.shape[0] > 0:
        return potential_at(scene.herm, scene.drive, m, t, scene.nodes, scene.sym, x, y, z)
    return field_at(scene.herm, scene.nodes, scene.sym, x, y, z)[0]


@njit(cache=True, error_model="numpy", inline="always")
def balance(books, l, ke, v, charge, work, timed):
    """The ledger of lane l's ray at kinetic energy ke (J) and potential v (V), less the dV/dt and
    jump work (V) when the field changes in time (:func:`tracer.ledger.time_ledger_J`), joules."""
    res = residual_J(books.ke_start[l], ke, charge, books.v_start[l], v)
    return res - charge * work if timed else res


@njit(cache=True, error_model="numpy")
def thin_path(path, n):
    """Keep every other row of the first n path rows (the first always); returns the new count."""
    m = (n + 1) // 2
    for j in range(1, m):
        path[j] = path[2 * j]
    return m


@njit(cache=True, error_model="numpy")
def work_along(w, dw, l, rc, theta, h, t0, m, scene, scratch):
    """The dV/dt work (volts) and its magnitude along the first fraction theta of lane l's step of
    length h from t0 on waveform piece m, from its dense output rc, in the lane's cell
    (:func:`tracer.motion.drive.step_work`)."""
    points, buf = scratch.points, scratch.buf
    for i in range(GAUSS_POINTS):
        dense(rc, theta * GAUSS_THETA[i], buf)
        for c in range(3):
            points[i, c] = buf[c]
    return step_work(scene.drive.waves, dw, l, w[W_PATCH + 16, l], w[W_PATCH + 17, l], m, t0,
                     theta * h, points, scene.nodes, scene.sym, scratch.phi)


@njit(cache=True, error_model="numpy")
def first_rate(w, l, y, t, dw, m, scene, lim, k, magnet):
    """The rate at state y at time t in lane l's cell, its polynomial weighed on waveform piece m
    (:mod:`tracer.motion.drive`), into k[0]; returns the potential there."""
    weigh(dw, D_CELL, l, scene.drive.waves, m, t, w, W_PATCH)
    for i in range(6):
        w[W_Y1 + i, l] = y[i]
    lane_rate(w, l, t, scene.nodes, scene.sym, lim.mass, lim.charge, W_PATCH, W_V1, magnet,
              W_BPATCH)
    for i in range(6):
        k[0, i] = w[W_RATE + i, l]
    return w[W_V1, l]


@njit(cache=True, error_model="numpy")
def start_ray(l, r, lanes, tally, books, scratch, out, w, dw, scene, lim, magnet):
    """Lane l takes ray r: its start state, cell (and its polynomials), first rate, ledger and
    counts; a ray that starts outside the domain or inside an electrode ends at once."""
    nodes, sym, y0, k_new = scene.nodes, scene.sym, lanes.y0, scratch.k_new
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    t_start = scene.t_start[r]
    lanes.ray[l] = r
    for i in range(6):
        y0[l, i] = scene.starts[r, i]
    i, j = cell_ahead(nodes, sym, y0[l], lim.snap)
    lanes.ci[l] = i
    lanes.cj[l] = j
    patch = patch_coefficients(scene.herm, i, j, hz, hr, sym != 1)
    put_patch(w, l, W_PATCH, patch, z0 + i * hz, r0 + j * hr)
    bpatch = put_magnet_patch(w, l, W_BPATCH, magnet, i, j, hz, hr, patch)
    if scene.drive.driven.shape[0] > 0:
        lanes.piece[l] = piece(scene.drive.waves, t_start)
        load_cell(dw, D_CELL, l, patch, scene.drive, i, j, hz, hr, sym != 1)
        books.v_start[l] = first_rate(w, l, y0[l], t_start, dw, lanes.piece[l], scene, lim,
                                      k_new, magnet)
    else:
        books.v_start[l] = rate(patch, z0 + i * hz, r0 + j * hr, nodes, sym, lim.mass,
                                lim.charge, y0[l], k_new, 0, magnet, bpatch)
    for i in range(6):
        lanes.k0[l, i] = k_new[0, i]
        w[W_Y0 + i, l] = y0[l, i]
        w[W_K + i, l] = k_new[0, i]
    w[W_ATOL, l] = scene.atol_p[r]
    books.ke_start[l] = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], lim.mass)
    tally.evals[l] = 1
    tally.steps[l] = 0
    tally.rejected[l] = 0
    tally.n_cross[l] = 0
    tally.n_path[l] = 0
    tally.stride[l] = 1
    lanes.t[l] = t_start
    w[W_T, l] = t_start
    lanes.t_stop[l] = t_start + lim.t_max
    books.work[l] = 0.0
    books.spread[l] = 0.0
    lanes.hp[l] = 0.0
    lanes.h_cut[l] = 0.0
    books.worst[l] = 0.0
    lanes.h_err[l] = min(step_cap(y0[l], lanes.k0[l], lim.mass, lim.max_step), lim.t_max)
    lanes.code[l] = RUNNING
    lanes.electrode[l] = -1
    r_start = map_r(sym, y0[l, 0], y0[l, 1])
    if outside(scene.bounds, sym, y0[l, 2], r_start):
        lanes.code[l] = LEFT
    else:
        k_in = electrode_of(scene.shapes, y0[l, 2], r_start)
        if k_in >= 0:
            lanes.code[l] = INSIDE
            lanes.electrode[l] = k_in
        elif r < out.paths.shape[0]:
            put_row(out.paths[r], 0, lanes.t[l], y0[l], books.ke_start[l], 0.0)
            tally.n_path[l] = 1


@njit(cache=True, error_model="numpy")
def start_lanes(nxt, hi, lanes, tally, books, scratch, out, w, dw, scene, lim, magnet):
    """Phase 1: idle lanes take the next rays nxt, nxt + 1, ... (below hi) with
    :func:`start_ray`; returns the next ray to take and the number of lanes holding a ray."""
    active = 0
    for l in range(LANES):
        if lanes.ray[l] < 0 and nxt < hi:
            start_ray(l, nxt, lanes, tally, books, scratch, out, w, dw, scene, lim, magnet)
            nxt += 1
        if lanes.ray[l] >= 0:
            active += 1
    return nxt, active


@njit(cache=True, error_model="numpy")
def choose_steps(lanes, tally, scratch, w, scene, lim):
    """Phase 2: each running lane chooses its step's length into ``W_H``: a step cut back to a
    wall is redone at that length; otherwise the controller's proposal, at most ``max_step`` of
    path, ending on the next waveform corner (and at most ``max_step_s`` long) and on the cell
    wall the predicted path (:func:`tracer.motion.walls.exit_time`) reaches first; never past the
    time limit. A ray over its step budget, or whose step no longer moves its clock, stalls."""
    waves, nodes, box, ahead = scene.drive.waves, scene.nodes, scratch.box, scratch.ahead
    timed = scene.drive.driven.shape[0] > 0
    y0, k0, t = lanes.y0, lanes.k0, lanes.t
    for l in range(LANES):
        if lanes.ray[l] < 0 or lanes.code[l] != RUNNING:
            continue
        if tally.steps[l] + tally.rejected[l] >= lim.max_steps:
            lanes.code[l] = STALLED
            continue
        lanes.cut[l] = lanes.h_cut[l] > 0.0
        if lanes.cut[l]:
            h = min(lanes.h_cut[l], lanes.t_stop[l] - t[l])
            lanes.h_cut[l] = 0.0
        else:
            h = min(lanes.h_err[l], step_cap(y0[l], k0[l], lim.mass, lim.max_step),
                    lanes.t_stop[l] - t[l])
            if timed:   # end on the next waveform corner; resolve the RF period
                m = lanes.piece[l]
                t_corner = waves.corner[m] if m < waves.corner.size else np.inf
                h = min(h, waves.max_step_s, t_corner - t[l])
            cell_box(nodes, lanes.ci[l], lanes.cj[l], box)
            reach(lanes.rc[l], lanes.hp[l], y0[l], k0[l], lim.mass, STRETCH * h, ahead)
            h_wall = exit_time(ahead, y0[l], k0[l], scene.sym, box, STRETCH * h, 0.1 * lim.snap)
            if h_wall < STRETCH * h:
                h = h_wall
        if t[l] + h == t[l]:
            lanes.code[l] = STALLED
            continue
        w[W_H, l] = h


@njit(cache=True, error_model="numpy")
def check_steps(lanes, tally, trial, scratch, w, dw, scene, lim, magnet):
    """Phase 4: each lane checks the step it took: a step failing the error test is rejected (the
    controller shortens it); one that passes is copied into ``trial``, with the cell it ends in
    and the cell ahead (where its end, ``snap`` ahead along its motion, lies). A step whose path
    leaves its cell and comes back, or jumps over a cell, is to be cut back to the wall
    (``trial.theta``); a step ending on a wall into another cell loads that cell's polynomials
    into ``W_NEXT`` (and ``W_BNEXT``, and the drive's ``D_NEXT``) for its rate there."""
    nodes, sym, shapes, snap = scene.nodes, scene.sym, scene.shapes, lim.snap
    hz, hr = nodes.hz, nodes.hr
    y0, k0, ci, cj = lanes.y0, lanes.k0, lanes.ci, lanes.cj
    y1, k1, rt = trial.y1, trial.k1, trial.rt
    box, buf = scratch.box, scratch.buf
    for l in range(LANES):
        trial.passed[l] = False
        if lanes.ray[l] < 0 or lanes.code[l] != RUNNING:
            continue
        h = w[W_H, l]
        tally.evals[l] += 6
        enorm = w[W_ERR, l]
        if not enorm <= 1.0:
            tally.rejected[l] += 1
            lanes.h_err[l] = propose(h, lanes.h_err[l], enorm)
            continue
        trial.passed[l] = True
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
        th = 2.0
        if abs(ni - ci[l]) > 1 or abs(nj - cj[l]) > 1:
            th = wall_theta(rt[l], sym, box, 1.0, shapes, buf)
        elif not past:
            th = excursion(rt[l], sym, y0[l], k0[l], y1[l], k1[l], h, box, buf)
            if th <= 1.0:
                th = wall_theta(rt[l], sym, box, th, shapes, buf)
        trial.need[l] = False
        if th > 1.0 and (ni != ci[l] or nj != cj[l]):
            trial.dt[l] = wall_time(nodes, sym, y1[l], k1[l], ci[l], cj[l], ni, nj)
            if past and trial.dt[l] * speed(y1[l], lim.mass) > snap:
                th = wall_theta(rt[l], sym, box, 1.0, shapes, buf)
            else:
                trial.need[l] = True
                patch = patch_coefficients(scene.herm, ni, nj, hz, hr, sym != 1)
                put_patch(w, l, W_NEXT, patch, nodes.z0 + ni * hz, nodes.r0 + nj * hr)
                put_magnet_patch(w, l, W_BNEXT, magnet, ni, nj, hz, hr, patch)
                if scene.drive.driven.shape[0] > 0:
                    load_cell(dw, D_NEXT, l, patch, scene.drive, ni, nj, hz, hr, sym != 1)
        trial.theta[l] = th
        trial.past[l] = past
        trial.end_cell[l, 0] = i1
        trial.end_cell[l, 1] = j1
        trial.end_cell[l, 2] = ni
        trial.end_cell[l, 3] = nj


@njit(cache=True, error_model="numpy")
def wall_verdict(l, lanes, tally, trial, scratch, w, scene, lim):
    """Whether lane l's passed step enters the cell ahead: it does when it was cut back to the
    wall, or when integrating past the wall in the field behind it errs by at most
    ``KINK_FRACTION`` of the tolerance (:func:`tracer.motion.walls.kink_error`, from the rate in
    the cell ahead, which goes to ``scratch.k_new``); a step past its cell that does not is to be
    cut back to the wall. Returns (theta to cut back to, > 1: accepted; enter; the potential at
    the step's end in the cell ahead)."""
    r = lanes.ray[l]
    y0, y1, k_new = lanes.y0, trial.y1, scratch.k_new
    th = trial.theta[l]
    enter = False
    v_next = w[W_V1, l]
    if trial.need[l]:
        v_next = w[W_VN, l]
        for i in range(6):
            k_new[0, i] = w[W_RATE + i, l]
        tally.evals[l] += 1
        if lanes.cut[l] or (kink_error(k_new[0], trial.k1[l], trial.dt[l], y0[l], y1[l], lim.rtol,
                                       scene.atol_p[r]) <= KINK_FRACTION):
            enter = True
        elif trial.past[l]:
            box = scratch.box
            cell_box(scene.nodes, lanes.ci[l], lanes.cj[l], box)
            hold(box, scene.sym, y0[l])
            th = wall_theta(trial.rt[l], scene.sym, box, 1.0, scene.shapes, scratch.buf)
    return th, enter, v_next


@njit(cache=True, error_model="numpy")
def record_crossing(l, q, th, rcl, lanes, tally, books, scratch, out, w, dw, scene, lim):
    """Lane l's ray crosses plane q at theta th of its step (dense output rcl): a state row with
    the worst |ledger| so far, when there is room for it."""
    r, nc = lanes.ray[l], tally.n_cross[l]
    if nc >= out.cross_plane.shape[1]:
        return
    buf, h = scratch.buf, w[W_H, l]
    dense(rcl, th, buf)
    out.cross_plane[r, nc] = q
    ke = kinetic_energy_J(buf[3], buf[4], buf[5], lim.mass)
    timed = scene.drive.driven.shape[0] > 0
    vq = potential(scene, lanes.piece[l], lanes.t[l] + th * h, buf[0], buf[1], buf[2])
    wq = 0.0
    if timed:
        wq = books.work[l] + work_along(w, dw, l, rcl, th, h, lanes.t[l], lanes.piece[l], scene,
                                        scratch)[0]
        dense(rcl, th, buf)
    res = balance(books, l, ke, vq, lim.charge, wq, timed)
    books.worst[l] = max(books.worst[l], abs(res))
    put_row(out.cross_state[r], nc, lanes.t[l] + th * h, buf, ke, books.worst[l])


@njit(cache=True, error_model="numpy")
def find_events(l, lanes, tally, books, trial, scratch, out, w, dw, scene, lim):
    """Events on lane l's accepted step, in time order on its dense output (``lanes.rc[l]``),
    piece by piece (:mod:`tracer.motion.events`; none in a quiet cell): leaving the domain,
    landing on an electrode, crossing a detector plane (recorded by :func:`record_crossing`). An
    event that ends the ray sets its code (and electrode); returns the theta it ends at (2.0:
    none)."""
    nodes, sym, bounds, shapes, planes = scene.nodes, scene.sym, scene.bounds, scene.shapes, \
        scene.planes
    y0, buf, hits, pa = lanes.y0, scratch.buf, scratch.hits, scratch.pa
    h = w[W_H, l]
    n_sub = 0
    if not scene.quiet[lanes.ci[l], lanes.cj[l]]:
        n_sub = max(1, int(math.ceil(max(speed(y0[l], lim.mass), speed(trial.y1[l], lim.mass))
                                     * h / lim.sample)))
    rcl = lanes.rc[l]
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
            if zb > bounds[1]:
                t_end = min(t_end, locate(rcl, sym, ta, tb, EV_LINE, z_line(bounds[1]), True,
                                          shapes, buf))
            if zb < bounds[0]:
                t_end = min(t_end, locate(rcl, sym, ta, tb, EV_LINE, z_line(bounds[0]), False,
                                          shapes, buf))
            if rb > bounds[3]:
                t_end = min(t_end, locate(rcl, sym, ta, tb, EV_LINE, r_line(bounds[3]), True,
                                          shapes, buf))
            if sym == 1 and rb < bounds[2]:
                t_end = min(t_end, locate(rcl, sym, ta, tb, EV_LINE, r_line(bounds[2]), False,
                                          shapes, buf))
            lanes.code[l] = LEFT
        # landing on an electrode
        pad = 0.5 * chord if sym == 0 else 0.0
        bulge = bow(curve, 1.0 / n_sub)
        if touches_surface(scene.cell, nodes, za, ra, zb, rb, pad, bulge):
            pa[0] = za
            pa[1] = ra
            th, k = find_landing(rcl, sym, ta, min(tb, t_end), pa, chord, lim.fine, curve,
                                 lim.touch_tol, shapes, scratch.stack, buf)
            if th < t_end:
                t_end = th
                lanes.code[l] = LANDED
                lanes.electrode[l] = k
        # detector planes
        for q in range(planes.shape[0]):
            line = (planes[q, 0], planes[q, 1], planes[q, 2])
            n_hits = plane_crossings(rcl, sym, ta, tb, line, past_line(line, za, ra),
                                     past_line(line, zb, rb), bulge + pad, hits, shapes, buf)
            for e in range(n_hits):
                th = hits[e]
                if th <= t_end:
                    if scene.stops[q]:
                        t_end = th
                        lanes.code[l] = PLANE
                        lanes.electrode[l] = -1
                    record_crossing(l, q, th, rcl, lanes, tally, books, scratch, out, w, dw,
                                    scene, lim)
                    tally.n_cross[l] += 1
        if lanes.code[l] != RUNNING:
            break
        ta, za, ra, xa, ya_ = tb, zb, rb, xb, yb
    return t_end


@njit(cache=True, error_model="numpy")
def record_path(l, ke, res, lanes, tally, out):
    """Lane l's ray's state as a path point (the signed ledger ``res``), when its path is kept:
    every ``stride``-th accepted step; a full buffer drops every other point and doubles the
    stride, keeping its last row for the end point."""
    r = lanes.ray[l]
    if r >= out.paths.shape[0] or out.paths.shape[1] == 0:
        return
    cap = out.paths.shape[1]
    if tally.steps[l] % tally.stride[l] == 0:
        if tally.n_path[l] == cap - 1:
            tally.n_path[l] = thin_path(out.paths[r], tally.n_path[l])
            tally.stride[l] *= 2
        if tally.steps[l] % tally.stride[l] == 0:
            put_row(out.paths[r], tally.n_path[l], lanes.t[l], lanes.y0[l], ke, res)
            tally.n_path[l] += 1


@njit(cache=True, error_model="numpy")
def advance(l, enter, v_next, lanes, tally, books, trial, scratch, out, w, dw, scene, lim,
            magnet):
    """Lane l's ray moves to the end of its accepted step: the ledger (the potential of the cell
    the step ends in; with voltages in time, less the step's dV/dt work, and a jump's work where
    the step ends on a waveform corner, which starts the next piece), the time limit, the state
    and first rate of the next step (in the cell ahead when it ``enter``s it, whose potential at
    the step's end is ``v_next``), the path point and the controller's next proposal."""
    nodes, sym, waves = scene.nodes, scene.sym, scene.drive.waves
    timed = scene.drive.driven.shape[0] > 0
    y0, k0, y1, k1, k_new = lanes.y0, lanes.k0, trial.y1, trial.k1, scratch.k_new
    t = lanes.t
    h = w[W_H, l]
    v1 = w[W_V1, l]
    t_new = t[l] + h
    # the ledger takes the potential of the cell the step ends in
    if trial.past[l]:
        end = trial.end_cell[l]
        if enter and end[0] == end[2] and end[1] == end[3]:
            v1 = v_next
        else:
            v1 = potential(scene, lanes.piece[l], t_new, y1[l, 0], y1[l, 1], y1[l, 2])
            tally.evals[l] += 1
    ke1 = kinetic_energy_J(y1[l, 3], y1[l, 4], y1[l, 5], lim.mass)
    if timed:
        dwk, mag = work_along(w, dw, l, lanes.rc[l], 1.0, h, t[l], lanes.piece[l], scene,
                              scratch)
        books.work[l] += dwk
        books.spread[l] += mag
    res = balance(books, l, ke1, v1, lim.charge, books.work[l], timed)
    corner = False
    m = lanes.piece[l]
    if timed and m < waves.corner.size and t_new >= waves.corner[m]:
        # the step ends on a corner: a jump's work (after the ledger), the next piece
        corner = True
        t_new = waves.corner[m]
        at_x = scratch.at_x
        group_potentials(scene.drive, nodes, sym, y1[l, 0], y1[l, 1], y1[l, 2], at_x)
        jump = 0.0
        for k in range(at_x.size):
            jump += jump_at(waves, k, t_new) * at_x[k]
        books.work[l] += jump
        books.spread[l] += abs(jump)
        lanes.piece[l] = piece(waves, t_new)
    books.worst[l] = max(books.worst[l], abs(res))
    if t_new >= lanes.t_stop[l]:
        lanes.code[l] = TIME
        t_new = lanes.t_stop[l]
    t[l] = t_new
    w[W_T, l] = t_new
    for i in range(6):
        y0[l, i] = y1[l, i]
        k0[l, i] = k_new[0, i] if enter else k1[l, i]
        w[W_Y0 + i, l] = y0[l, i]
        w[W_K + i, l] = k0[l, i]
    if enter:
        lanes.ci[l] = trial.end_cell[l, 2]
        lanes.cj[l] = trial.end_cell[l, 3]
        for m in range(18):
            w[W_PATCH + m, l] = w[W_NEXT + m, l]
        if magnet is not None:
            for m in range(16):
                w[W_BPATCH + m, l] = w[W_BNEXT + m, l]
        if timed:
            dw[D_CELL, :, :, l] = dw[D_NEXT, :, :, l]
    if corner:   # the first rate of the next step on the new piece
        first_rate(w, l, y0[l], t_new, dw, lanes.piece[l], scene, lim, k_new, magnet)
        tally.evals[l] += 1
        for i in range(6):
            k0[l, i] = k_new[0, i]
            w[W_K + i, l] = k_new[0, i]
    record_path(l, ke1, res, lanes, tally, out)
    lanes.h_err[l] = propose(h, lanes.h_err[l], w[W_ERR, l])


@njit(cache=True, error_model="numpy")
def end_at_event(l, t_end, lanes, tally, books, scratch, out, w, dw, scene, lim):
    """Lane l's ray ends at theta ``t_end`` of its accepted step (an event of
    :func:`find_events`): its state, time and ledger there, and its last path point."""
    timed = scene.drive.driven.shape[0] > 0
    y0, t, rcl, h = lanes.y0, lanes.t, lanes.rc[l], w[W_H, l]
    if timed:
        dwk, mag = work_along(w, dw, l, rcl, t_end, h, t[l], lanes.piece[l], scene, scratch)
        books.work[l] += dwk
        books.spread[l] += mag
    buf = scratch.buf
    dense(rcl, t_end, buf)
    for i in range(6):
        y0[l, i] = buf[i]
    t[l] = t[l] + t_end * h
    ke1 = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], lim.mass)
    v1 = potential(scene, lanes.piece[l], t[l], y0[l, 0], y0[l, 1], y0[l, 2])
    res = balance(books, l, ke1, v1, lim.charge, books.work[l], timed)
    books.worst[l] = max(books.worst[l], abs(res))
    r = lanes.ray[l]
    if r < out.paths.shape[0] and out.paths.shape[1] > 0:
        put_row(out.paths[r], tally.n_path[l], t[l], y0[l], ke1, res)
        tally.n_path[l] += 1


@njit(cache=True, error_model="numpy")
def settle_steps(lanes, tally, books, trial, scratch, out, w, dw, scene, lim, magnet):
    """Phase 6: each lane whose step passed the error test enters the next cell or cuts its step
    back to the wall (:func:`wall_verdict`; a cut step is redone), and an accepted step is
    searched for events (:func:`find_events`): the ray then moves on (:func:`advance`) or ends
    at the event (:func:`end_at_event`)."""
    for l in range(LANES):
        if not trial.passed[l]:
            continue
        th, enter, v_next = wall_verdict(l, lanes, tally, trial, scratch, w, scene, lim)
        if th <= 1.0:
            tally.rejected[l] += 1
            lanes.h_cut[l] = th * w[W_H, l]
            continue
        # accepted step: look for events on the dense output, piece by piece
        tally.steps[l] += 1
        for m in range(5):
            for i in range(6):
                lanes.rc[l, m, i] = trial.rt[l, m, i]
        lanes.hp[l] = w[W_H, l]
        t_end = find_events(l, lanes, tally, books, trial, scratch, out, w, dw, scene, lim)
        if lanes.code[l] == RUNNING:
            advance(l, enter, v_next, lanes, tally, books, trial, scratch, out, w, dw, scene, lim,
                    magnet)
        else:
            end_at_event(l, t_end, lanes, tally, books, scratch, out, w, dw, scene, lim)


@njit(cache=True, error_model="numpy")
def hand_in(lanes, tally, books, out, lim):
    """Phase 7: lanes whose ray has ended write its end state row (with its worst |ledger|), its
    counts and its dV/dt work into ``out``, and go idle."""
    y0 = lanes.y0
    for l in range(LANES):
        r = lanes.ray[l]
        if r < 0 or lanes.code[l] == RUNNING:
            continue
        put_row(out.final, r, lanes.t[l], y0[l],
                kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], lim.mass), books.worst[l])
        out.info[r, C_CODE] = lanes.code[l]
        out.info[r, C_ELECTRODE] = lanes.electrode[l]
        out.info[r, C_CROSSINGS] = tally.n_cross[l]
        out.info[r, C_PATH] = tally.n_path[l]
        out.info[r, C_STEPS] = tally.steps[l]
        out.info[r, C_REJECTED] = tally.rejected[l]
        out.info[r, C_EVALS] = tally.evals[l]
        out.spent[r, 0] = books.work[l]
        out.spent[r, 1] = books.spread[l]
        lanes.ray[l] = -1
