"""Each lane chooses its next step: the second phase of a round of the lane loop
(:func:`tracer.motion.lanes.trace_lanes`).

A step cut back to a wall is redone at its cut length. Otherwise the step is the error control's
proposal, at most ``max_step`` metres of path (:func:`tracer.motion.stepper.step_cap`) and never
past the ray's time limit nor, with voltages in time, past the next waveform corner or longer
than the waveform's longest step; then, if the ray is predicted to leave its cell within up to
``STRETCH`` times that, the step is made to end on the wall instead (:mod:`tracer.motion.walls`).
A ray that has taken ``max_steps`` steps, or whose step no longer moves its clock, is stalled.
"""

import numpy as np

from tracer.jit import njit
from tracer.motion.bundles import (C_CODE, C_REJECTED, C_STEPS, F_CUT, F_ERR, F_HP, F_STOP,
                                   F_T, I_CI, I_CJ, I_CUT, I_PIECE, I_RAY, LANES, RUNNING,
                                   STALLED, V_K0, V_RC, V_Y0, W_H)
from tracer.motion.stepper import step_cap
from tracer.motion.walls import STRETCH, cell_box, exit_time, reach


@njit(cache=True, error_model="numpy", forceinline=True)
def choose_steps(waves, nodes, sym, mass, max_step, max_steps, snap, w, lf, li, vec, box, ahead):
    """Each running lane's next step length into ``W_H`` of the workspace w (with voltages in
    time, ``waves`` of the drive, ending on the next waveform corner and at most ``max_step_s``
    long; ``None`` in a static field)."""
    for l in range(LANES):
        if li[I_RAY, l] < 0 or li[C_CODE, l] != RUNNING:
            continue
        if li[C_STEPS, l] + li[C_REJECTED, l] >= max_steps:
            li[C_CODE, l] = STALLED
            continue
        t = lf[F_T, l]
        li[I_CUT, l] = lf[F_CUT, l] > 0.0
        if li[I_CUT, l]:
            h = min(lf[F_CUT, l], lf[F_STOP, l] - t)
            lf[F_CUT, l] = 0.0
        else:
            h = min(lf[F_ERR, l], step_cap(vec[l, V_Y0], vec[l, V_K0], mass, max_step),
                    lf[F_STOP, l] - t)
            hard = lf[F_STOP, l] - t     # a step never passes these, stretched or not
            if waves is not None:   # end on the next waveform corner; resolve the RF period
                m = li[I_PIECE, l]
                t_corner = waves.corner[m] if m < waves.corner.size else np.inf
                h = min(h, waves.max_step_s, t_corner - t)
                hard = min(hard, t_corner - t)
            cell_box(nodes, li[I_CI, l], li[I_CJ, l], box)
            reach(vec[l, V_RC:V_RC + 5], lf[F_HP, l], vec[l, V_Y0], vec[l, V_K0], mass,
                  STRETCH * h, ahead)
            h_wall = exit_time(ahead, vec[l, V_Y0], vec[l, V_K0], sym, box, STRETCH * h,
                               0.1 * snap)
            if h_wall < STRETCH * h:
                h = min(h_wall, hard)
        if t + h == t:
            li[C_CODE, l] = STALLED
            continue
        w[W_H, l] = h
