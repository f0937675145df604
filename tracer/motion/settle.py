"""Each lane settles its trial step: the phase of a round of the lane loop
(:func:`tracer.motion.lanes.trace_lanes`) after :func:`tracer.motion.stepper.lane_next_rates`.

A step that passed its checks (:func:`tracer.motion.check.check_steps`) and ends in or near the
next cell enters it if the kink past the wall is small (:func:`tracer.motion.walls.kink_error`);
otherwise, or if the check marked it so, it is cut back to the wall it crossed first
(:func:`cut_back`, run only when there are any) and redone next round at the cut length. Every
other passed step is accepted: counted, its dense output kept for the next step's prediction and
for the event search.
"""

from tracer.jit import njit
from tracer.motion.bundles import (C_EVALS, C_REJECTED, C_STEPS, F_CUT, F_DT, F_HP, F_THETA,
                                   I_CI, I_CJ, I_CUT, I_ENTER, I_NEED, I_PASSED, I_PAST, I_RAY,
                                   I_TAKEN, LANES, V_K1, V_RC, V_RT, V_Y0, V_Y1, W_H, W_RATE)
from tracer.motion.walls import KINK_FRACTION, cell_box, hold, kink_error, wall_theta


@njit(cache=True, error_model="numpy", forceinline=True)
def settle_steps(rtol, atol_p, w, lf, li, vec, k_new):
    """Each lane whose trial step passed (``I_PASSED``) enters the cell ahead (``I_ENTER``), or
    is to be cut back to the wall (before ``F_THETA``, :func:`cut_back`), or keeps its cell; an
    accepted step (``I_TAKEN``) is counted and its dense output kept (``V_RC``). ``atol_p`` is
    each ray's absolute momentum tolerance, ``k_new`` float64[1, 6] scratch. Returns how many
    steps are to be cut back."""
    n_cut = 0
    for l in range(LANES):
        li[I_TAKEN, l] = False
        if not li[I_PASSED, l]:
            continue
        li[I_ENTER, l] = False
        if li[I_NEED, l]:
            for i in range(6):
                k_new[0, i] = w[W_RATE + i, l]
            li[C_EVALS, l] += 1
            if li[I_CUT, l] or (kink_error(k_new[0], vec[l, V_K1], lf[F_DT, l], vec[l, V_Y0],
                                           vec[l, V_Y1], rtol, atol_p[li[I_RAY, l]])
                                <= KINK_FRACTION):
                li[I_ENTER, l] = True
            elif li[I_PAST, l]:
                lf[F_THETA, l] = 1.0
        if lf[F_THETA, l] <= 1.0:
            n_cut += 1
            continue
        li[I_TAKEN, l] = True
        li[C_STEPS, l] += 1
        rc, rt = vec[l, V_RC:V_RC + 5], vec[l, V_RT:V_RT + 5]
        for m in range(5):
            for i in range(6):
                rc[m, i] = rt[m, i]
        lf[F_HP, l] = w[W_H, l]
    return n_cut


@njit(cache=True, error_model="numpy", forceinline=True)
def cut_back(nodes, sym, shapes, w, lf, li, vec, box, buf):
    """Each lane whose passed step is not taken cuts it back to the first wall its dense output
    crosses before ``F_THETA`` (:func:`tracer.motion.walls.wall_theta`): the step is rejected,
    and redone next round at the cut length (``F_CUT``)."""
    for l in range(LANES):
        if not li[I_PASSED, l] or li[I_TAKEN, l]:
            continue
        cell_box(nodes, li[I_CI, l], li[I_CJ, l], box)
        hold(box, sym, vec[l, V_Y0])
        th = wall_theta(vec[l, V_RT:V_RT + 5], sym, box, lf[F_THETA, l], shapes, buf)
        li[C_REJECTED, l] += 1
        lf[F_CUT, l] = th * w[W_H, l]
