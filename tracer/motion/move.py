"""Each lane moves along its accepted step: the phase of a round of the lane loop
(:func:`tracer.motion.lanes.trace_lanes`) after :func:`tracer.motion.search.search_steps`.

First the plane crossings the search found get their state rows, with the energy ledger
(:func:`ledger_J`) there. Then a lane whose ray goes on moves to its step's end:
the ledger with the potential of the cell the step ends in, the dV/dt work along the step
(:func:`tracer.motion.stepper.stage_work`) and, at a waveform corner, the jump's work and the
next piece (voltages in time), the cell ahead if it enters it, the path point and the next step's
proposal. A lane whose ray ended on the step moves to the event instead, with the ledger there
and the dV/dt work up to it (:func:`work_along`), as at the plane crossings.
"""

from tracer.jit import njit
from tracer.ledger import (GAUSS_POINTS, GAUSS_THETA, kinetic_energy_J, residual_J,
                           time_ledger_J, time_work)
from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_EVALS, C_PATH, C_STEPS, F_END, F_ERR,
                                   F_KE, F_SPREAD, F_STOP, F_T, F_V, F_WORK, F_WORST, I_AHEAD_I,
                                   I_AHEAD_J, I_CI, I_CJ, I_CROSS_FROM, I_END_I, I_END_J, I_ENTER,
                                   I_PAST, I_PIECE, I_RAY, I_STRIDE, I_TAKEN, LANES, ROW_T,
                                   RUNNING, TIME, V_K0, V_K1, V_RC, V_Y0, V_Y1, W_BNEXT,
                                   W_BPATCH, W_ERR, W_G, W_GN, W_H, W_K, W_NEXT, W_PATCH, W_RATE,
                                   W_T, W_V1, W_VN, W_Y0, put_row)
from tracer.motion.drive import cell_group_potential, enter_cell, group_potentials, potential_at
from tracer.motion.stepper import dense, first_rate, propose, stage_work
from tracer.waveforms import jump_at, piece


@njit(cache=True, error_model="numpy")
def thin_path(path, n):
    """Keep every other row of the first n path rows (the first always); returns the new count.
    The rows are copied element by element: a row assignment may allocate a temporary, and the
    lane loop is compiled without reference counting (:mod:`tracer.motion.lanes`)."""
    m = (n + 1) // 2
    for j in range(1, m):
        for i in range(path.shape[1]):
            path[j, i] = path[2 * j, i]
    return m


@njit(cache=True, error_model="numpy", inline="always")
def ledger_J(drive, ke_start, ke_now, charge, v_start, v_now, work_V):
    """The ledger of a ray, joules: :func:`tracer.ledger.residual_J` in a static field (``drive``
    None, ``work_V`` not read), :func:`tracer.ledger.time_ledger_J` with the dV/dt and jump work
    W = ``work_V`` with voltages in time."""
    if drive is None:
        return residual_J(ke_start, ke_now, charge, v_start, v_now)
    return time_ledger_J(ke_start, ke_now, charge, v_start, v_now, work_V)


@njit(cache=True, error_model="numpy")
def work_along(w, dw, l, rc, theta, h, t0, m, waves, nodes, sym, phi, buf):
    """The dV/dt work (volts) and its magnitude along the first fraction theta of lane l's step of
    length h from t0 on waveform piece m (:func:`tracer.ledger.time_work`), the group maps taken
    at the Gauss nodes of its dense output rc from the polynomials of the lane's cell that its
    step's force came from; ``phi`` is float64[GAUSS_POINTS, K] scratch. For a part of a step,
    up to an event: the whole step's is :func:`tracer.motion.stepper.stage_work`."""
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


@njit(cache=True, error_model="numpy", inline="always")
def move_lanes(herm, drive, dw, nodes, sym, mass, charge, cross_state, paths, magnet, w, lf, li,
               vec, phi, at_x, buf):
    """Each lane with an accepted step (``I_TAKEN``) writes the state rows of the plane crossings
    its search found (``cross_state[r]``, with the worst |ledger| so far) and moves: to the
    step's end while its ray goes on (into the cell ahead if ``I_ENTER``; onto the next waveform
    piece at a corner; ``C_CODE`` ``TIME`` when its time is up), or to the event that ended it
    (at ``F_END`` of the step). Its ledger, dV/dt work and path point (``paths[r]``, for
    r < len(paths): every ``I_STRIDE``-th step, thinned when full) follow.

    ``phi`` (float64[GAUSS_POINTS, K]), ``at_x`` (float64[K]) and ``buf`` (float64[6]) are scratch.
    """
    max_cross = cross_state.shape[1]
    for l in range(LANES):
        if not li[I_TAKEN, l]:
            continue
        r = li[I_RAY, l]
        h = w[W_H, l]
        t = lf[F_T, l]
        rc = vec[l, V_RC:V_RC + 5]
        for nc in range(li[I_CROSS_FROM, l], min(li[C_CROSSINGS, l], max_cross)):
            th = cross_state[r, nc, ROW_T]
            wq = lf[F_WORK, l]
            if drive is not None:   # before the state there: it uses buf as scratch
                wq += work_along(w, dw, l, rc, th, h, t, li[I_PIECE, l], drive.waves, nodes, sym,
                                 phi, buf)[0]
            dense(rc, th, buf)
            ke = kinetic_energy_J(buf[3], buf[4], buf[5], mass)
            vq = potential_at(herm, drive, li[I_PIECE, l], t + th * h, nodes, sym, buf[0],
                              buf[1], buf[2])
            res = ledger_J(drive, lf[F_KE, l], ke, charge, lf[F_V, l], vq, wq)
            lf[F_WORST, l] = max(lf[F_WORST, l], abs(res))
            put_row(cross_state[r], nc, t + th * h, buf, ke, lf[F_WORST, l])
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
            if drive is not None:
                dwk, mag = stage_work(w, l)
                lf[F_WORK, l] += dwk
                lf[F_SPREAD, l] += mag
            res = ledger_J(drive, lf[F_KE, l], ke1, charge, lf[F_V, l], v1, lf[F_WORK, l])
            corner = False
            if drive is not None:
                m = li[I_PIECE, l]
                if m < drive.waves.corner.size and t_new >= drive.waves.corner[m]:
                    # the step ends on a corner: a jump's work, the next piece
                    corner = True
                    t_new = drive.waves.corner[m]
                    jump = corner_jump(drive, t_new, nodes, sym, vec[l, V_Y1, 0],
                                       vec[l, V_Y1, 1], vec[l, V_Y1, 2], at_x)
                    lf[F_WORK, l] += jump
                    lf[F_SPREAD, l] += abs(jump)
                    li[I_PIECE, l] = piece(drive.waves, t_new)
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
            if drive is not None:   # the work's rate there, first same as last as the state's
                w[W_G, l] = w[W_GN, l] if enter else w[W_G + 6, l]
            if enter:
                li[I_CI, l] = ni
                li[I_CJ, l] = nj
                for m in range(18):
                    w[W_PATCH + m, l] = w[W_NEXT + m, l]
                if magnet is not None:
                    for m in range(16):
                        w[W_BPATCH + m, l] = w[W_BNEXT + m, l]
                if drive is not None:
                    enter_cell(dw, l)
            if drive is not None and corner:   # the first rate of the next step on the new piece
                first_rate(w, l, vec[l, V_Y0], t_new, dw, drive.waves, li[I_PIECE, l], nodes,
                           sym, mass, charge, vec[l, V_K0:V_K0 + 1], magnet)
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
            t_end = lf[F_END, l]
            if drive is not None:
                dwk, mag = work_along(w, dw, l, rc, t_end, h, t, li[I_PIECE, l], drive.waves,
                                      nodes, sym, phi, buf)
                lf[F_WORK, l] += dwk
                lf[F_SPREAD, l] += mag
            dense(rc, t_end, buf)
            for i in range(6):
                vec[l, V_Y0, i] = buf[i]
            lf[F_T, l] = t + t_end * h
            ke1 = kinetic_energy_J(vec[l, V_Y0, 3], vec[l, V_Y0, 4], vec[l, V_Y0, 5], mass)
            v1 = potential_at(herm, drive, li[I_PIECE, l], lf[F_T, l], nodes, sym,
                              vec[l, V_Y0, 0], vec[l, V_Y0, 1], vec[l, V_Y0, 2])
            res = ledger_J(drive, lf[F_KE, l], ke1, charge, lf[F_V, l], v1, lf[F_WORK, l])
            lf[F_WORST, l] = max(lf[F_WORST, l], abs(res))
            if n_path_cap > 0:
                put_row(paths[r], li[C_PATH, l], lf[F_T, l], vec[l, V_Y0], ke1, res)
                li[C_PATH, l] += 1
