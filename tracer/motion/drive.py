"""The field of electrodes whose voltages change in time, as the kernel sees it.

With its electrodes grouped by waveform (:mod:`tracer.groups`) the potential is

    V(x, t) = V_static(x) + sum_k w_k(t) M_k(x),

one static map and K group maps on the same nodes. Per lane, the kernel keeps the K group
polynomials of the cell it is in and of the cell it is entering in a *drive workspace*
(:func:`drive_workspace`), beside the static polynomial in the stepper's rows. At each
Runge–Kutta stage it evaluates every group polynomial at the stage point, the potential and the
field, and adds them to the static map's weighed by w_k(t) at the stage's time
(:func:`add_groups`): each group costs one more evaluation of a cell polynomial per stage. The
same evaluations weighed by the waveforms' derivatives give the rate of the dV/dt work at the
stage,

    g = dV/dt|_x = sum_k (dw_k/dt) M_k(x),

which the stepper integrates as one more component of the state (the ledger's work,
:mod:`tracer.ledger`). The weights w_k and dw_k/dt at the times of all stages of a step are
found once a step, lane by lane, before the first stage (:func:`weigh_steps`): the straight-line
parts directly, each sinusoid from a cosine and a sine at the step's start turned through the
stage's angle (:func:`tracer.waveforms.turn`, no library call), so a sinusoid costs one cosine and
one sine a step.

SIMD. The drive workspace is laid out group first, so the offsets within a group's block are
constants, and each group's evaluations run in a loop over the lanes that touches its block
alone (:func:`eval_group`), with the stage points copied in and the results out in loops of
their own (:func:`add_groups_lanes`), all over a lane count LLVM does not know in advance
(:func:`lanes_of`): so they compile to SIMD instructions, which the evaluations reading the
stepper's workspace and the drive workspace at once did not (measured in a microbenchmark of
six stages: 86 instead of 163 ns a lane for a pulse group).

Waveform pieces. A step never straddles a waveform corner (:mod:`tracer.waveforms`): each lane
keeps the piece its step lies on, and every stage of the step weighs on that piece's straight
line, continued to the step's end, so the last stage of a step that ends on a corner sees the
waveform from the left.

:class:`Drive` carries the waveforms and the group maps into the kernel. A static field passes
``None`` instead, as an electric-only run passes ``None`` for the magnet: numba then compiles a
kernel of its own without any of this (the timed code costs a static run's first compile nothing,
and each kernel is specialised for its case).
"""

import math
from collections import namedtuple

import numpy as np

from tracer.fieldmap import patch_coefficients
from tracer.jit import njit
from tracer.motion.bundles import I_PIECE, I_RAY, LANES, W_H, W_RATE, W_T, W_Y1
from tracer.motion.force import field_at, patch_field
from tracer.motion.tableau import DP_C
from tracer.waveforms import angle, line, rate, sinusoid, turn, value

Drive = namedtuple("Drive", ["waves", "driven"])
"""The time-dependent part of a field: ``waves`` (:class:`tracer.waveforms.WaveArrays` of the K
groups) and ``driven`` (float64[K, 4, nz, nr], the Hermite node data of each group map M_k)."""


@njit(cache=True, error_model="numpy")
def drive_of(waves, driven):
    """The Drive of the waveforms ``waves`` and group maps ``driven``; None when both are None
    (a static field)."""
    if driven is None:
        return None
    return Drive(waves, driven)


D_CELL, D_NEXT, D_WEIGHT, D_POINT = 0, 1, 2, 3
"""The slots of a group's block of a drive workspace: its polynomial in the cell a lane is in and
in the cell it is entering, its weights (:data:`STAGE_TIMES`; time s in coefficients
2 s + :data:`D_VALUE`, w_k, and 2 s + :data:`D_RATE`, dw_k/dt), and a stage point with what the
group gives there (coefficients ``P_*``)."""

D_VALUE, D_RATE = 0, 1

STAGE_TIMES = np.unique(DP_C)
"""The distinct times of a step's stages, fractions of its length (the last two stages share the
step's end); the weights of time 0 are those of :func:`weigh` (a step's first rate)."""

TIME_OF_STAGE = np.searchsorted(STAGE_TIMES, DP_C)
"""The index in :data:`STAGE_TIMES` of each stage's time."""

D_COS, D_SIN, D_H = 2 * STAGE_TIMES.size, 2 * STAGE_TIMES.size + 1, 2 * STAGE_TIMES.size + 2
"""Coefficients of the weights slot holding, for :func:`weigh_steps`, the cosine and sine of a
sinusoid's angle at the step's start and the step's length."""

P_X, P_CZ, P_CR, P_W, P_R, P_F, P_V, P_G = 0, 3, 4, 5, 6, 7, 10, 11
"""Coefficients of the point slot: the point (x, y, z from ``P_X``), the cell's first corner
(z, r), the weights w_k and dw_k/dt of the stage's time; the group's force (3, from ``P_F``),
its potential weighed by w_k and its dV/dt work rate there (:func:`eval_group`)."""


@njit(cache=True, error_model="numpy")
def drive_workspace(drive):
    """A drive workspace: float64[K, 4, 16, LANES], group, slot (:data:`D_CELL`, :data:`D_NEXT`,
    :data:`D_WEIGHT`, :data:`D_POINT`), coefficient, lane. Group first: the offsets within a
    group's block are constants, so a loop over the lanes that touches one block alone compiles
    to SIMD instructions (:func:`eval_group`, :func:`weigh_steps`' turns) with no check at run
    time that its reads and writes do not overlap."""
    return np.zeros((drive.driven.shape[0], 4, 16, LANES))


@njit(cache=True, error_model="numpy", forceinline=True)
def load_cell(dw, slot, l, drive, i, j, hz, hr, mirror):
    """Put the group polynomials of cell (i, j) (``mirror`` as for
    ``fieldmap.patch_coefficients``) into slot ``slot`` of lane l."""
    for k in range(drive.driven.shape[0]):
        b = patch_coefficients(drive.driven[k], i, j, hz, hr, mirror)
        for m in range(16):
            dw[k, slot, m, l] = b[m]


@njit(cache=True, error_model="numpy", forceinline=True)
def enter_cell(dw, l):
    """Lane l enters the cell ahead: the group polynomials of slot :data:`D_NEXT` into
    :data:`D_CELL` (element by element: the lane loop allocates nothing)."""
    for k in range(dw.shape[0]):
        for m in range(16):
            dw[k, D_CELL, m, l] = dw[k, D_NEXT, m, l]


@njit(cache=True, error_model="numpy", forceinline=True)
def weigh(dw, l, waves, m, t):
    """The weights w_k(t) and dw_k/dt of every group at time t on waveform piece m into lane l of
    the slot :data:`D_WEIGHT`, as those of time 0 (:data:`STAGE_TIMES`)."""
    for k in range(dw.shape[0]):
        dw[k, D_WEIGHT, D_VALUE, l] = value(waves, k, m, t)
        dw[k, D_WEIGHT, D_RATE, l] = rate(waves, k, m, t)


@njit(cache=True, error_model="numpy", forceinline=True)
def weigh_steps(dw, w, waves, li):
    """The weights w_k and dw_k/dt of every group at the times ``W_T + c W_H`` of the stages of
    each lane's step (c in ``STAGE_TIMES[1:]``) into the slot :data:`D_WEIGHT`: the straight-line
    parts on the lane's piece ``I_PIECE``, each sinusoid from the cosine and sine of its angle at
    the step's start, ``W_T``, turned through the angle of each stage
    (:func:`tracer.waveforms.turn`, in a loop over the lanes of the group's block alone: SIMD).
    Only lanes that hold a ray (``I_RAY``) take the cosines and sines; the others' weights are
    not read (their stages are not)."""
    for k in range(dw.shape[0]):
        for l in range(LANES):
            m = li[I_PIECE, l]
            dw[k, D_WEIGHT, D_H, l] = w[W_H, l]
            for s in range(1, STAGE_TIMES.size):
                dw[k, D_WEIGHT, 2 * s + D_VALUE, l] = line(waves, k, m, w[W_T, l]
                                                           + STAGE_TIMES[s] * w[W_H, l])
                dw[k, D_WEIGHT, 2 * s + D_RATE, l] = waves.slope[k, m]
        for j in range(waves.amplitude.shape[1]):
            for l in range(LANES):
                if li[I_RAY, l] >= 0:
                    a = angle(waves, k, j, w[W_T, l])
                    dw[k, D_WEIGHT, D_COS, l] = math.cos(a)
                    dw[k, D_WEIGHT, D_SIN, l] = math.sin(a)
            amplitude, omega = waves.amplitude[k, j], waves.omega[k, j]
            for l in range(LANES):
                for s in range(1, STAGE_TIMES.size):
                    c, sn = turn(dw[k, D_WEIGHT, D_COS, l], dw[k, D_WEIGHT, D_SIN, l],
                                 omega * (STAGE_TIMES[s] * dw[k, D_WEIGHT, D_H, l]))
                    v, r = sinusoid(amplitude, omega, c, sn)
                    dw[k, D_WEIGHT, 2 * s + D_VALUE, l] += v
                    dw[k, D_WEIGHT, 2 * s + D_RATE, l] += r


@njit(cache=True, error_model="numpy", forceinline=True)
def group_patch(dw, slot, k, l):
    """The polynomial of group k in slot ``slot`` of lane l, as a tuple of 16 coefficients."""
    return (dw[k, slot, 0, l], dw[k, slot, 1, l], dw[k, slot, 2, l], dw[k, slot, 3, l],
            dw[k, slot, 4, l], dw[k, slot, 5, l], dw[k, slot, 6, l], dw[k, slot, 7, l],
            dw[k, slot, 8, l], dw[k, slot, 9, l], dw[k, slot, 10, l], dw[k, slot, 11, l],
            dw[k, slot, 12, l], dw[k, slot, 13, l], dw[k, slot, 14, l], dw[k, slot, 15, l])


@njit(cache=True, error_model="numpy", forceinline=True)
def put_point(w, dw, k, s, l, patch):
    """Lane l's point ``W_Y1``, its cell's first corner (rows patch + 16, patch + 17 of the
    workspace w) and group k's weights of time s (:data:`STAGE_TIMES`) into group k's point
    slot."""
    for i in range(3):
        dw[k, D_POINT, P_X + i, l] = w[W_Y1 + i, l]
    dw[k, D_POINT, P_CZ, l] = w[patch + 16, l]
    dw[k, D_POINT, P_CR, l] = w[patch + 17, l]
    dw[k, D_POINT, P_W, l] = dw[k, D_WEIGHT, 2 * s + D_VALUE, l]
    dw[k, D_POINT, P_R, l] = dw[k, D_WEIGHT, 2 * s + D_RATE, l]


@njit(cache=True, error_model="numpy", forceinline=True)
def eval_group(dw, slot, k, l, nodes, sym, charge):
    """Group k at the point in its point slot of lane l (:func:`put_point`), from its polynomial
    in slot ``slot``, weighed by the weights there: its force, potential and dV/dt work rate into
    the point slot. Reads and writes group k's block alone."""
    v, ex, ey, ez = patch_field(group_patch(dw, slot, k, l), dw[k, D_POINT, P_CZ, l],
                                dw[k, D_POINT, P_CR, l], nodes, sym, dw[k, D_POINT, P_X, l],
                                dw[k, D_POINT, P_X + 1, l], dw[k, D_POINT, P_X + 2, l])
    wk = dw[k, D_POINT, P_W, l]
    qw = charge * wk
    dw[k, D_POINT, P_F, l] = qw * ex
    dw[k, D_POINT, P_F + 1, l] = qw * ey
    dw[k, D_POINT, P_F + 2, l] = qw * ez
    dw[k, D_POINT, P_V, l] = wk * v
    dw[k, D_POINT, P_G, l] = dw[k, D_POINT, P_R, l] * v


@njit(cache=True, error_model="numpy", forceinline=True)
def take_group(w, dw, k, l, v_row, g_row):
    """Add group k's force, potential and dV/dt work rate at lane l's point (:func:`eval_group`)
    to ``W_RATE``, row v_row and row g_row of the workspace w."""
    for i in range(3):
        w[W_RATE + 3 + i, l] += dw[k, D_POINT, P_F + i, l]
    w[v_row, l] += dw[k, D_POINT, P_V, l]
    w[g_row, l] += dw[k, D_POINT, P_G, l]


@njit(cache=True, error_model="numpy", forceinline=True)
def add_groups(w, dw, slot, l, patch, nodes, sym, charge, v_row, g_row):
    """Every group at lane l's point ``W_Y1``, from its polynomial in slot ``slot`` (the cell's
    first corner in rows patch + 16, patch + 17 of the workspace w), weighed by the weights of
    :func:`weigh` (time 0): its force added to ``W_RATE``, its potential to row v_row; the groups'
    dV/dt work rate into row g_row."""
    w[g_row, l] = 0.0
    for k in range(dw.shape[0]):
        put_point(w, dw, k, 0, l, patch)
        eval_group(dw, slot, k, l, nodes, sym, charge)
        take_group(w, dw, k, l, v_row, g_row)


@njit(cache=True, error_model="numpy", forceinline=True)
def lanes_of(dw):
    """``LANES``, as a number the compiler cannot know before the run (it does not know the number
    of groups, dw.shape[0] >= 1). A loop over a constant eight lanes that reads the drive
    workspace and writes the stepper's stays scalar: LLVM judges a check at run time that the two
    arrays do not overlap not worth its cost for eight rounds, and it unrolls a loop as short as
    :func:`eval_group`'s in full, which then stays scalar too. Over this count it compiles both
    to SIMD instructions (checked in the assembly)."""
    return min(LANES, LANES * dw.shape[0])


@njit(cache=True, error_model="numpy", forceinline=True)
def add_groups_lanes(w, dw, slot, s, patch, nodes, sym, charge, v_row, g_row):
    """:func:`add_groups` in every lane with the weights of time s (:func:`weigh_steps`), in
    loops over the lanes (over :func:`lanes_of`) that compile to SIMD instructions: per group,
    the points in (:func:`put_point`), the evaluations in its block alone (:func:`eval_group`),
    the results out (:func:`take_group`)."""
    n = lanes_of(dw)
    for l in range(n):
        w[g_row, l] = 0.0
    for k in range(dw.shape[0]):
        for l in range(n):
            put_point(w, dw, k, s, l, patch)
        for l in range(n):
            eval_group(dw, slot, k, l, nodes, sym, charge)
        for l in range(n):
            take_group(w, dw, k, l, v_row, g_row)


@njit(cache=True, error_model="numpy", forceinline=True)
def group_potentials(drive, nodes, sym, x, y, z, out):
    """The group maps M_k at a 3-D point into out[k], volts per volt of waveform."""
    for k in range(drive.driven.shape[0]):
        out[k] = field_at(drive.driven[k], nodes, sym, x, y, z)[0]


@njit(cache=True, error_model="numpy")
def potential_at(herm, drive, m, t, nodes, sym, x, y, z):
    """V(x, t) on waveform piece m: the static map plus the weighted group maps (``drive``; None:
    the static map's alone), volts."""
    v = field_at(herm, nodes, sym, x, y, z)[0]
    if drive is None:
        return v
    for k in range(drive.driven.shape[0]):
        v += value(drive.waves, k, m, t) * field_at(drive.driven[k], nodes, sym, x, y, z)[0]
    return v


@njit(cache=True, error_model="numpy", forceinline=True)
def cell_group_potential(dw, l, k, pz, pr, nodes, sym, x, y, z):
    """Group map M_k at a 3-D point from the polynomial of lane l's cell (first corner pz, pr),
    continued beyond its walls as the force's is, volts per volt."""
    return patch_field(group_patch(dw, D_CELL, k, l), pz, pr, nodes, sym, x, y, z)[0]
