"""Each lane checks its trial step: the fourth phase of a round of the lane loop
(:func:`tracer.motion.lanes.trace_lanes`), after :func:`tracer.motion.stepper.lane_step`.

A step whose error norm exceeds 1 is rejected and its length shrinks
(:func:`tracer.motion.stepper.propose`). A step that passes is checked against its cell's walls
(:mod:`tracer.motion.walls`): if its path jumps more than one cell, or leaves the cell between its
ends and comes back, it is to be cut back to the wall it crossed first; if it ends in or near the
next cell, that cell's polynomials are loaded (``W_NEXT``, ``W_BNEXT``; with voltages in time the
drive workspace's ``D_NEXT`` too, :func:`load_next_groups`) for
:func:`tracer.motion.stepper.lane_next_rates`, unless it overshot the wall by more than ``SNAP``
cells of path, when it too is to be cut back (:func:`tracer.motion.settle.cut_back`).
"""

from tracer.fieldmap import patch_coefficients
from tracer.jit import njit
from tracer.motion.bundles import (C_CODE, C_EVALS, C_REJECTED, F_DT, F_ERR, F_THETA, I_AHEAD_I,
                                   I_AHEAD_J, I_CI, I_CJ, I_END_I, I_END_J, I_NEED, I_PASSED,
                                   I_PAST, I_RAY, LANES, RUNNING, V_K0,
                                   V_K1, V_RT, V_Y0, V_Y1, W_BNEXT, W_DENSE, W_ERR, W_H, W_K,
                                   W_NEXT, W_Y1)
from tracer.motion.drive import D_NEXT, load_cell
from tracer.motion.force import cell_of, speed
from tracer.motion.stepper import propose, put_magnet_patch, put_patch
from tracer.motion.walls import cell_ahead, cell_box, excursion, hold, wall_time


@njit(cache=True, error_model="numpy", forceinline=True)
def check_steps(herm, nodes, sym, mass, snap, magnet, w, lf, li, vec, box, buf):
    """Each running lane's trial step: rejected, or passed (``I_PASSED``) with its end state,
    end rate and dense output copied from the workspace w (``V_Y1``, ``V_K1``, ``V_RT``), the
    cells it ends in and is entering (``I_END_*``, ``I_AHEAD_*``, ``I_PAST``), before which point
    it is to be cut back to a wall (``F_THETA``; > 1: nowhere) and whether it needs the rate in
    the cell ahead (``I_NEED``, with ``F_DT`` the time past the wall)."""
    z0, r0, hz, hr = nodes.z0, nodes.r0, nodes.hz, nodes.hr
    for l in range(LANES):
        li[I_PASSED, l] = False
        if li[I_RAY, l] < 0 or li[C_CODE, l] != RUNNING:
            continue
        h = w[W_H, l]
        li[C_EVALS, l] += 6
        enorm = w[W_ERR, l]
        if not enorm <= 1.0:
            li[C_REJECTED, l] += 1
            lf[F_ERR, l] = propose(h, lf[F_ERR, l], enorm)
            continue
        li[I_PASSED, l] = True
        for i in range(6):
            vec[l, V_Y1, i] = w[W_Y1 + i, l]
            vec[l, V_K1, i] = w[W_K + 36 + i, l]
        for m in range(5):
            for i in range(6):
                vec[l, V_RT + m, i] = w[W_DENSE + 6 * m + i, l]
        ci, cj = li[I_CI, l], li[I_CJ, l]
        cell_box(nodes, ci, cj, box)
        hold(box, sym, vec[l, V_Y0])    # a step may start just before the wall it entered through
        i1, j1 = cell_of(nodes, sym, vec[l, V_Y1, 0], vec[l, V_Y1, 1], vec[l, V_Y1, 2])
        ni, nj = cell_ahead(nodes, sym, vec[l, V_Y1], snap)
        past = i1 != ci or j1 != cj
        if past and ni == ci and nj == cj:
            ni, nj = i1, j1
        th = 2.0   # where to cut the step back to the wall (searched before it; > 1: nowhere)
        if abs(ni - ci) > 1 or abs(nj - cj) > 1:
            th = 1.0
        elif not past:
            th = excursion(vec[l, V_RT:V_RT + 5], sym, vec[l, V_Y0], vec[l, V_K0], vec[l, V_Y1],
                           vec[l, V_K1], h, box, buf)
        li[I_NEED, l] = False
        if th > 1.0 and (ni != ci or nj != cj):
            lf[F_DT, l] = wall_time(nodes, sym, vec[l, V_Y1], vec[l, V_K1], ci, cj, ni, nj)
            if past and lf[F_DT, l] * speed(vec[l, V_Y1], mass) > snap:
                th = 1.0
            else:
                li[I_NEED, l] = True
                patch = patch_coefficients(herm, ni, nj, hz, hr, sym != 1)
                put_patch(w, l, W_NEXT, patch, z0 + ni * hz, r0 + nj * hr)
                put_magnet_patch(w, l, W_BNEXT, magnet, ni, nj, hz, hr, patch)
        lf[F_THETA, l] = th
        li[I_PAST, l] = past
        li[I_END_I, l] = i1
        li[I_END_J, l] = j1
        li[I_AHEAD_I, l] = ni
        li[I_AHEAD_J, l] = nj


@njit(cache=True, error_model="numpy", forceinline=True)
def load_next_groups(drive, dw, nodes, sym, w, li):
    """With voltages in time: the group polynomials of the cell ahead of each lane that needs
    its rate there (``I_NEED``) into the drive workspace's slot ``D_NEXT``
    (:func:`tracer.motion.drive.load_cell`), after :func:`check_steps`."""
    for l in range(LANES):
        if li[I_PASSED, l] and li[I_NEED, l]:
            load_cell(dw, D_NEXT, l, drive, li[I_AHEAD_I, l], li[I_AHEAD_J, l], nodes.hz,
                      nodes.hr, sym != 1)
