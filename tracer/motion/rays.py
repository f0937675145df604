"""Lanes taking rays and handing in their results: the first and last phases of a round of the
lane loop (:func:`tracer.motion.lanes.trace_lanes`).

A lane without a ray takes the next one (:func:`take_rays`): its cell and the cell's polynomials,
its first rate and potential (the ledger's start), its counts; a ray that starts outside the
domain or inside an electrode ends at once. A lane whose ray has ended writes the ray's end state
and counts into the kernel's outputs and is free again (:func:`hand_in`). The lane state is that
of :func:`tracer.motion.bundles.lane_state`.
"""

from tracer.fieldmap import patch_coefficients
from tracer.jit import njit
from tracer.ledger import kinetic_energy_J
from tracer.motion.bundles import (C_CODE, C_CROSSINGS, C_ELECTRODE, C_EVALS, C_PATH,
                                   C_REJECTED, C_STEPS, COUNTS, F_CUT, F_ERR, F_HP, F_KE,
                                   F_SPREAD, F_STOP, F_T, F_V, F_WORK, F_WORST, I_CI, I_CJ,
                                   I_PIECE, I_RAY, I_STRIDE, INSIDE, LANES, LEFT, RUNNING, V_K0,
                                   V_Y0, W_ATOL, W_BPATCH, W_K, W_PATCH, W_T, W_Y0, put_row)
from tracer.motion.drive import D_CELL, load_cell
from tracer.motion.events import electrode_of, outside
from tracer.motion.force import rate
from tracer.motion.stepper import first_rate, put_magnet_patch, put_patch, step_cap
from tracer.motion.symmetry import map_r
from tracer.motion.walls import cell_ahead
from tracer.waveforms import piece


@njit(cache=True, error_model="numpy", forceinline=True)
def take_rays(nxt, hi, starts, t_start, atol_p, t_max, herm, drive, dw, nodes, sym, bounds,
              shapes, mass, charge, max_step, snap, paths, magnet, w, lf, li, vec, k_new):
    """Idle lanes take rays nxt, nxt + 1, ... (below hi) in lane order; returns the next ray
    to take.

    Each ray starts at ``starts[r]`` at time ``t_start[r]`` with momentum tolerance ``atol_p[r]``
    and may fly for ``t_max``; ``paths[r]`` (for r < len(paths)) receives its start point.
    """
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    for l in range(LANES):
        if li[I_RAY, l] >= 0 or nxt >= hi:
            continue
        r = nxt
        nxt += 1
        li[I_RAY, l] = r
        y0 = vec[l, V_Y0]
        for i in range(6):
            y0[i] = starts[r, i]
        i, j = cell_ahead(nodes, sym, y0, snap)
        li[I_CI, l] = i
        li[I_CJ, l] = j
        patch = patch_coefficients(herm, i, j, hz, hr, sym != 1)
        put_patch(w, l, W_PATCH, patch, z0 + i * hz, r0 + j * hr)
        bpatch = put_magnet_patch(w, l, W_BPATCH, magnet, i, j, hz, hr, patch)
        if drive is not None:
            li[I_PIECE, l] = piece(drive.waves, t_start[r])
            load_cell(dw, D_CELL, l, drive, i, j, hz, hr, sym != 1)
            lf[F_V, l] = first_rate(w, l, y0, t_start[r], dw, drive.waves, li[I_PIECE, l], nodes,
                                    sym, mass, charge, k_new, magnet)
        else:
            lf[F_V, l] = rate(patch, z0 + i * hz, r0 + j * hr, nodes, sym, mass, charge, y0,
                              k_new, 0, magnet, bpatch)
        k0 = vec[l, V_K0]
        for i in range(6):
            k0[i] = k_new[0, i]
            w[W_Y0 + i, l] = y0[i]
            w[W_K + i, l] = k_new[0, i]
        w[W_ATOL, l] = atol_p[r]
        lf[F_KE, l] = kinetic_energy_J(y0[3], y0[4], y0[5], mass)
        li[C_EVALS, l] = 1
        li[C_STEPS, l] = 0
        li[C_REJECTED, l] = 0
        li[C_CROSSINGS, l] = 0
        li[C_PATH, l] = 0
        li[I_STRIDE, l] = 1
        lf[F_T, l] = t_start[r]
        w[W_T, l] = t_start[r]
        lf[F_STOP, l] = t_start[r] + t_max
        lf[F_WORK, l] = 0.0
        lf[F_SPREAD, l] = 0.0
        lf[F_HP, l] = 0.0
        lf[F_CUT, l] = 0.0
        lf[F_WORST, l] = 0.0
        lf[F_ERR, l] = min(step_cap(y0, k0, mass, max_step), t_max)
        li[C_CODE, l] = RUNNING
        li[C_ELECTRODE, l] = -1
        r_start = map_r(sym, y0[0], y0[1])
        if outside(bounds, sym, y0[2], r_start):
            li[C_CODE, l] = LEFT
        else:
            k_in = electrode_of(shapes, y0[2], r_start)
            if k_in >= 0:
                li[C_CODE, l] = INSIDE
                li[C_ELECTRODE, l] = k_in
            elif r < paths.shape[0]:
                put_row(paths[r], 0, lf[F_T, l], y0, lf[F_KE, l], 0.0)
                li[C_PATH, l] = 1
    return nxt


@njit(cache=True, error_model="numpy", forceinline=True)
def hand_in(final, info, spent, mass, lf, li, vec):
    """Lanes whose ray has ended write its results (row r of ``final``, ``info`` and ``spent``,
    the layouts of :func:`tracer.motion.lanes.trace_lanes`) and are free again; returns how many
    lanes still hold a ray."""
    busy = 0
    for l in range(LANES):
        r = li[I_RAY, l]
        if r < 0:
            continue
        if li[C_CODE, l] == RUNNING:
            busy += 1
            continue
        y0 = vec[l, V_Y0]
        put_row(final, r, lf[F_T, l], y0, kinetic_energy_J(y0[3], y0[4], y0[5], mass),
                lf[F_WORST, l])
        for c in range(COUNTS):
            info[r, c] = li[c, l]
        spent[r, 0] = lf[F_WORK, l]
        spent[r, 1] = lf[F_SPREAD, l]
        li[I_RAY, l] = -1
    return busy
