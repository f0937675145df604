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
:mod:`tracer.ledger`). The weights w_k and dw_k/dt of a stage are found lane by lane first
(:func:`weigh_lanes`, a cosine and a sine per sinusoid; once for the two last stages of a step,
which share their time, and the rate at the step's end in the cell ahead), so that the loops
evaluating the polynomials, one per group with the loop over lanes innermost, compile to SIMD
instructions (:func:`add_groups_lanes`).

Waveform pieces. A step never straddles a waveform corner (:mod:`tracer.waveforms`): each lane
keeps the piece its step lies on, and every stage of the step weighs on that piece's straight
line, continued to the step's end, so the last stage of a step that ends on a corner sees the
waveform from the left.

:class:`Drive` carries the waveforms and the group maps into the kernel. A static field passes
``None`` instead, as an electric-only run passes ``None`` for the magnet: numba then compiles a
kernel of its own without any of this (the timed code costs a static run's first compile nothing,
and each kernel is specialised for its case).
"""

from collections import namedtuple

import numpy as np

from tracer.fieldmap import patch_coefficients
from tracer.jit import njit
from tracer.motion.bundles import I_PIECE, I_RAY, LANES, W_H, W_RATE, W_T, W_Y1
from tracer.motion.force import field_at, patch_field
from tracer.waveforms import rate, value

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


D_CELL, D_NEXT, D_WEIGHT = 0, 1, 2
"""The slots of a drive workspace: the group polynomials of the cell a lane is in and of the cell
it is entering, and the weights of a stage (coefficient :data:`D_VALUE`: w_k; :data:`D_RATE`:
dw_k/dt)."""

D_VALUE, D_RATE = 0, 1


@njit(cache=True, error_model="numpy")
def drive_workspace(drive):
    """A drive workspace: float64[3, K, 16, LANES], slot (:data:`D_CELL`, :data:`D_NEXT`,
    :data:`D_WEIGHT`), group, coefficient, lane."""
    return np.zeros((3, drive.driven.shape[0], 16, LANES))


@njit(cache=True, error_model="numpy", forceinline=True)
def load_cell(dw, slot, l, drive, i, j, hz, hr, mirror):
    """Put the group polynomials of cell (i, j) (``mirror`` as for
    ``fieldmap.patch_coefficients``) into slot ``slot`` of lane l."""
    for k in range(drive.driven.shape[0]):
        b = patch_coefficients(drive.driven[k], i, j, hz, hr, mirror)
        for m in range(16):
            dw[slot, k, m, l] = b[m]


@njit(cache=True, error_model="numpy", forceinline=True)
def weigh(dw, l, waves, m, t):
    """The weights w_k(t) and dw_k/dt of every group at time t on waveform piece m into lane l of
    the slot :data:`D_WEIGHT`."""
    for k in range(dw.shape[1]):
        dw[D_WEIGHT, k, D_VALUE, l] = value(waves, k, m, t)
        dw[D_WEIGHT, k, D_RATE, l] = rate(waves, k, m, t)


@njit(cache=True, error_model="numpy", forceinline=True)
def group_patch(dw, slot, k, l):
    """The polynomial of group k in slot ``slot`` of lane l, as a tuple of 16 coefficients."""
    return (dw[slot, k, 0, l], dw[slot, k, 1, l], dw[slot, k, 2, l], dw[slot, k, 3, l],
            dw[slot, k, 4, l], dw[slot, k, 5, l], dw[slot, k, 6, l], dw[slot, k, 7, l],
            dw[slot, k, 8, l], dw[slot, k, 9, l], dw[slot, k, 10, l], dw[slot, k, 11, l],
            dw[slot, k, 12, l], dw[slot, k, 13, l], dw[slot, k, 14, l], dw[slot, k, 15, l])


@njit(cache=True, error_model="numpy", forceinline=True)
def add_group(w, dw, slot, k, l, patch, nodes, sym, charge, v_row, g_row):
    """Group k at lane l's point ``W_Y1``, from its polynomial in slot ``slot`` (the cell's first
    corner in rows patch + 16, patch + 17 of the workspace w), weighed by the lane's weights: its
    force added to ``W_RATE``, its potential to row v_row, its dV/dt rate to row g_row."""
    v, ex, ey, ez = patch_field(group_patch(dw, slot, k, l), w[patch + 16, l], w[patch + 17, l],
                                nodes, sym, w[W_Y1, l], w[W_Y1 + 1, l], w[W_Y1 + 2, l])
    wk = dw[D_WEIGHT, k, D_VALUE, l]
    qw = charge * wk
    w[W_RATE + 3, l] += qw * ex
    w[W_RATE + 4, l] += qw * ey
    w[W_RATE + 5, l] += qw * ez
    w[v_row, l] += wk * v
    w[g_row, l] += dw[D_WEIGHT, k, D_RATE, l] * v


@njit(cache=True, error_model="numpy", forceinline=True)
def add_groups(w, dw, slot, l, patch, nodes, sym, charge, v_row, g_row):
    """:func:`add_group` for every group in lane l, after :func:`weigh`; row g_row is set, not
    added to."""
    w[g_row, l] = 0.0
    for k in range(dw.shape[1]):
        add_group(w, dw, slot, k, l, patch, nodes, sym, charge, v_row, g_row)


@njit(cache=True, error_model="numpy", forceinline=True)
def weigh_lanes(dw, w, waves, li, frac):
    """:func:`weigh` in every lane that holds a ray (the lane state's int rows li: ``I_RAY``,
    and its piece ``I_PIECE``) at the time ``W_T + frac * W_H`` of its step; an idle lane's
    weights stay as they were (its stages are not read), which spares a single ray's trace the
    cosines and sines of seven idle lanes."""
    for l in range(LANES):
        if li[I_RAY, l] >= 0:
            weigh(dw, l, waves, li[I_PIECE, l], w[W_T, l] + frac * w[W_H, l])


@njit(cache=True, error_model="numpy", forceinline=True)
def add_groups_lanes(w, dw, slot, patch, nodes, sym, charge, v_row, g_row):
    """:func:`add_groups` in every lane, after :func:`weigh_lanes`: one loop over the lanes per
    group (SIMD)."""
    for l in range(LANES):
        w[g_row, l] = 0.0
    for k in range(dw.shape[1]):
        for l in range(LANES):
            add_group(w, dw, slot, k, l, patch, nodes, sym, charge, v_row, g_row)


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
