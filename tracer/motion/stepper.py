"""One Runge–Kutta step in every lane, and the one step-size controller.

The integrator is the embedded Dormand–Prince 5(4) pair (:mod:`tracer.motion.tableau`) with local
extrapolation, FSAL, and the continuous extension of Shampine (1986) in the form of Hairer, Nørsett
& Wanner (1993, sec. II.6). The error of each step is the RMS over the six components of the
embedded estimate, each scaled by ``atol + rtol * max(|y_old|, |y_new|)``, with ``atol`` = rtol x
cell for positions and rtol x the ray's momentum scale for momenta.

Lanes. One thread steps ``LANES`` rays side by side in a workspace (``W_*`` rows of
:mod:`tracer.motion.bundles`, one column a lane): :func:`lane_step` takes all the steps at once
with the loops over lanes innermost, so they compile to SIMD instructions.

The step-size controller (:func:`propose`) is the usual one for an embedded pair of order 4
(Hairer, Nørsett & Wanner 1993, sec. II.4): h_new = h min(FAC_MAX, max(FAC_MIN,
SAFETY err^(-1/5))), and never longer than h after a rejected step.
"""

import math

import numpy as np

from tracer.fieldmap import patch_coefficients
from tracer.jit import njit
from tracer.motion.bundles import (LANES, W_BNEXT, W_BPATCH, W_DENSE, W_ERR, W_ATOL, W_G, W_GN,
                                   W_H, W_K, W_NEXT, W_PATCH, W_RATE, W_V1, W_VN, W_Y0, W_Y1)
from tracer.motion.drive import (D_CELL, D_NEXT, TIME_OF_STAGE, add_groups, add_groups_lanes,
                                 weigh, weigh_steps)
from tracer.motion.force import force, gamma_mass, inverse_gamma_mass, uniform_force
from tracer.motion.tableau import DP_A, DP_B, DP_D, DP_E

SAFETY, FAC_MIN, FAC_MAX = 0.9, 0.2, 5.0


@njit(cache=True, error_model="numpy", inline="always")
def dense(rc, theta, out):
    """Evaluate the continuous extension of the last step at theta in [0, 1] into out."""
    u = 1.0 - theta
    for i in range(6):
        out[i] = rc[0, i] + theta * (rc[1, i] + u * (rc[2, i] + theta * (rc[3, i] + u * rc[4, i])))


@njit(cache=True, error_model="numpy", inline="always")
def row_patch(w, l, row):
    """The 16 coefficients of a cell polynomial in rows row..row+15 of lane l, as a tuple."""
    return (w[row, l], w[row + 1, l], w[row + 2, l], w[row + 3, l], w[row + 4, l],
            w[row + 5, l], w[row + 6, l], w[row + 7, l], w[row + 8, l], w[row + 9, l],
            w[row + 10, l], w[row + 11, l], w[row + 12, l], w[row + 13, l], w[row + 14, l],
            w[row + 15, l])


@njit(cache=True, error_model="numpy", inline="always")
def lane_rate(w, l, nodes, sym, mass, charge, patch, v_row, magnet, bpatch):
    """The rate at lane l's point ``W_Y1`` in the static cell polynomial of rows
    patch..patch+17 (16 coefficients, then the first corner) into ``W_RATE``, the potential into
    row v_row (the force from :func:`tracer.motion.force.force`; with a magnet, the polynomial of
    A_theta in rows bpatch..bpatch+15)."""
    igm = inverse_gamma_mass(mass, w[W_Y1 + 3, l], w[W_Y1 + 4, l], w[W_Y1 + 5, l])
    for i in range(3):
        w[W_RATE + i, l] = w[W_Y1 + 3 + i, l] * igm
    a = row_patch(w, l, patch)
    b = a if magnet is None else row_patch(w, l, bpatch)
    fx, fy, fz, v = force(a, w[patch + 16, l], w[patch + 17, l], nodes, sym, w[W_Y1, l],
                          w[W_Y1 + 1, l], w[W_Y1 + 2, l], w[W_RATE, l], w[W_RATE + 1, l],
                          w[W_RATE + 2, l], charge, magnet, b)
    w[W_RATE + 3, l] = fx
    w[W_RATE + 4, l] = fy
    w[W_RATE + 5, l] = fz
    w[v_row, l] = v


@njit(cache=True, error_model="numpy", inline="always")
def lane_uniform(w, l, magnet, charge):
    """Add the uniform magnetic fields' q v x B (:func:`tracer.motion.force.uniform_force`) at lane
    l's point ``W_Y1`` with its velocity ``W_RATE`` to its force in ``W_RATE``, after
    :func:`lane_rate` (which leaves it out, so that its loops over lanes stay SIMD)."""
    if magnet is None or magnet.kinds.shape[0] == 0:
        return
    fx, fy, fz = uniform_force(magnet, w[W_Y1, l], w[W_Y1 + 1, l], w[W_Y1 + 2, l], w[W_RATE, l],
                               w[W_RATE + 1, l], w[W_RATE + 2, l], charge)
    w[W_RATE + 3, l] += fx
    w[W_RATE + 4, l] += fy
    w[W_RATE + 5, l] += fz


@njit(cache=True, error_model="numpy", inline="always")
def lanes_uniform(w, magnet, charge):
    """:func:`lane_uniform` in every lane, a loop of its own (none without uniform fields)."""
    if magnet is None or magnet.kinds.shape[0] == 0:
        return
    for l in range(LANES):
        lane_uniform(w, l, magnet, charge)


@njit(cache=True, error_model="numpy", inline="always")
def lane_stage(w, st, nodes, sym, mass, charge, magnet, drive, dw, li):
    """Stage st of the step in every lane: the stage point into ``W_Y1``, its rate into row
    ``W_K + 6 st`` and its potential into ``W_V1`` (see :func:`lane_rate`); with voltages in time
    (a ``drive``, else None) the groups' force and potential added and the rate of the dV/dt work
    into row ``W_G + st`` (:func:`tracer.motion.drive.add_groups_lanes`).

    The sums run over all six earlier rows (the tableau's zeros add exact zeros), so the loops inside
    the loop over lanes have constant lengths and unroll, and that loop, writing only fixed rows,
    compiles to SIMD instructions over the lanes.
    """
    for l in range(LANES):
        h = w[W_H, l]
        for i in range(6):
            acc = 0.0
            for j in range(6):   # DP_A[st, j] is 0 for j >= st: adding 0 k_j (finite) is exact
                acc += DP_A[st, j] * w[W_K + 6 * j + i, l]
            w[W_Y1 + i, l] = w[W_Y0 + i, l] + h * acc
        lane_rate(w, l, nodes, sym, mass, charge, W_PATCH, W_V1, magnet, W_BPATCH)
    if drive is not None:
        if st == 1:     # the weights of all the step's stages
            weigh_steps(dw, w, drive.waves, li)
        add_groups_lanes(w, dw, D_CELL, TIME_OF_STAGE[st], W_PATCH, nodes, sym, charge, W_V1,
                         W_G + st)
    lanes_uniform(w, magnet, charge)
    for i in range(6):
        for l in range(LANES):
            w[W_K + 6 * st + i, l] = w[W_RATE + i, l]


@njit(cache=True, error_model="numpy", inline="always")
def lane_step(w, nodes, sym, mass, charge, rtol, atol_x, drive, dw, li, magnet):
    """One Dormand–Prince 5(4) step in every lane of a workspace (rows ``W_*``, one column a lane).

    Each lane steps from its state y0 (``W_Y0``) at time ``W_T`` with first stage rate ``W_K`` over
    its length ``W_H``, all stages in its cell's polynomial (``W_PATCH`` at corner ``W_CZ``,
    ``W_CR``; see :func:`tracer.motion.force.patch_field`). Writes the other six stage rates (the last, at the end state, is the
    next step's first), the fifth-order end state into ``W_Y1`` and its potential into ``W_V1``,
    the scaled error norm (RMS over the six components of the embedded estimate, each scaled by
    atol + rtol max(|y0|, |y1|); ``atol_x`` for positions, ``W_ATOL`` for momenta) into ``W_ERR``
    and the continuous extension (Hairer et al. 1993) into ``W_DENSE``.

    Voltages in time: with a ``drive`` and its workspace dw (:mod:`tracer.motion.drive`), each
    stage adds the groups' force weighed at the stage's time on the waveform piece of the lane
    (``I_PIECE`` of the lane state's int rows li; the weights of all stages found before the
    first, :func:`tracer.motion.drive.weigh_steps`; lanes without a ray, ``I_RAY`` < 0, take no
    cosines) and writes the rate of the dV/dt work into ``W_G + st`` (the first, ``W_G``, is the step's
    start's, as ``W_K``), whose integral :func:`stage_work` gives; in a static field (both
    ``None``) the stages read the static polynomial alone. With a ``magnet``
    (:class:`tracer.motion.bundles.Magnet`, else None) the force adds q v x B, A_theta's
    polynomial read from ``W_BPATCH``, and the uniform fields' in a loop of their own
    (:func:`lanes_uniform`).

    Each loop over lanes holds only loops of constant length and branches the compiler turns into
    selects, so it compiles to SIMD instructions over the lanes (when w is a workspace allocated
    by the caller it is inlined into, whose shape the compiler then knows; ``W_RATE`` is scratch).
    """
    for st in range(1, 7):
        lane_stage(w, st, nodes, sym, mass, charge, magnet, drive, dw, li)
    for l in range(LANES):
        h = w[W_H, l]
        acc2 = 0.0
        for i in range(6):
            e = 0.0
            d = 0.0
            for j in range(7):
                e += DP_E[j] * w[W_K + 6 * j + i, l]
                d += DP_D[j] * w[W_K + 6 * j + i, l]
            y0, y1 = w[W_Y0 + i, l], w[W_Y1 + i, l]
            a0, a1 = abs(y0), abs(y1)
            e *= h / ((atol_x if i < 3 else w[W_ATOL, l]) + rtol * (a1 if a1 > a0 else a0))
            acc2 += e * e
            dy = y1 - y0
            r2 = h * w[W_K + i, l] - dy
            w[W_DENSE + i, l] = y0
            w[W_DENSE + 6 + i, l] = dy
            w[W_DENSE + 12 + i, l] = r2
            w[W_DENSE + 18 + i, l] = dy - h * w[W_K + 36 + i, l] - r2
            w[W_DENSE + 24 + i, l] = h * d
        w[W_ERR, l] = math.sqrt(acc2 / 6.0)


@njit(cache=True, error_model="numpy", inline="always")
def lane_next_rates(w, nodes, sym, mass, charge, drive, dw, magnet):
    """The rates at the end states ``W_Y1`` of all lanes in the cells they are about to enter
    (``W_NEXT`` and ``W_BNEXT``; with voltages in time the groups weighed as the step's last
    stage in :func:`lane_step`, at the same time, the step's end) into
    ``W_RATE``, the potentials into ``W_VN`` and, with voltages in time, the rates of the dV/dt
    work into ``W_GN``: SIMD loops over the lanes."""
    for l in range(LANES):
        lane_rate(w, l, nodes, sym, mass, charge, W_NEXT, W_VN, magnet, W_BNEXT)
    if drive is not None:   # weighed as the step's last stage, at the same time
        add_groups_lanes(w, dw, D_NEXT, TIME_OF_STAGE[-1], W_NEXT, nodes, sym, charge, W_VN,
                         W_GN)
    lanes_uniform(w, magnet, charge)


@njit(cache=True, error_model="numpy")
def first_rate(w, l, y, t, dw, waves, m, nodes, sym, mass, charge, k, magnet):
    """The rate at state y at time t in lane l's cell, its groups weighed on waveform piece m
    (:mod:`tracer.motion.drive`), into k[0], and the rate of the dV/dt work there into ``W_G``
    (the first stage's); returns the potential there."""
    weigh(dw, l, waves, m, t)
    for i in range(6):
        w[W_Y1 + i, l] = y[i]
    lane_rate(w, l, nodes, sym, mass, charge, W_PATCH, W_V1, magnet, W_BPATCH)
    add_groups(w, dw, D_CELL, l, W_PATCH, nodes, sym, charge, W_V1, W_G)
    lane_uniform(w, l, magnet, charge)
    for i in range(6):
        k[0, i] = w[W_RATE + i, l]
    return w[W_V1, l]


@njit(cache=True, error_model="numpy", inline="always")
def stage_work(w, l):
    """The dV/dt work (volts) over lane l's last step and its magnitude: one more component of
    the state, whose rate at stage j is g_j (``W_G + j``), integrated by the step's fifth-order
    weights, h sum_j b_j g_j; and h sum_j b_j |g_j|, a scale for the ledger's tolerance, not an
    accurate integral (:mod:`tracer.ledger`)."""
    work = 0.0
    spread = 0.0
    for j in range(7):
        g = w[W_G + j, l]
        work += DP_B[j] * g
        spread += DP_B[j] * abs(g)
    return w[W_H, l] * work, w[W_H, l] * spread


@njit(cache=True, error_model="numpy", inline="always")
def put_patch(w, l, row, a, pz, pr):
    """Write a cell's polynomial (16 coefficients) and first corner into rows row..row+17 of lane l
    of a workspace."""
    for m in range(16):
        w[row + m, l] = a[m]
    w[row + 16, l] = pz
    w[row + 17, l] = pr


@njit(cache=True, error_model="numpy", inline="always")
def put_magnet_patch(w, l, row, magnet, i, j, hz, hr, other):
    """Write the polynomial of A_theta in cell (i, j) into rows row..row+15 of lane l and return
    it; without a magnet, or without coils, write nothing and return ``other`` (a polynomial the
    force will not read)."""
    if magnet is None:
        return other
    if not magnet.coils:
        return other
    b = patch_coefficients(magnet.herm, i, j, hz, hr, False)   # A_theta is odd in r: bicubic
    for m in range(16):
        w[row + m, l] = b[m]
    return b


@njit(cache=True, error_model="numpy", inline="always")
def step_cap(s, k, mass, length):
    """Longest time step that moves a ray at most ``length`` metres (constant-acceleration estimate)."""
    v = math.sqrt(k[0] * k[0] + k[1] * k[1] + k[2] * k[2])
    f = math.sqrt(k[3] * k[3] + k[4] * k[4] + k[5] * k[5])
    a = f / gamma_mass(mass, s[3], s[4], s[5])
    den = v + math.sqrt(v * v + 2.0 * a * length)
    if den <= 0.0:
        return np.inf
    return 2.0 * length / den


@njit(cache=True, error_model="numpy", inline="always")
def propose(h, h_err, enorm):
    """The next step's length after a step of length h with scaled error norm ``enorm``.

    A rejected step (``enorm`` > 1 or not finite) shrinks by SAFETY enorm^(-1/5), at least to
    FAC_MIN h. After an accepted step the proposal grows by at most FAC_MAX, counted from the
    earlier proposal ``h_err`` when the step was shortened below it (to reach a cell wall or a
    time limit): a step shortened to a wall does not shrink the next one.
    """
    if not enorm <= 1.0:
        fac = FAC_MIN if not enorm < 1e300 else max(FAC_MIN, SAFETY * enorm ** -0.2)
        return h * min(1.0, fac)
    base = max(h, h_err) if h < h_err else h
    cap = FAC_MAX * base
    x = SAFETY * h / cap       # an error below x^5 proposes more than the cap
    if enorm < x * x * x * x * x:
        return cap
    return min(h * max(FAC_MIN, SAFETY * max(enorm, 1e-10) ** -0.2), cap)
