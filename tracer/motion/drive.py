"""The field of electrodes whose voltages change in time, as the kernel sees it.

With its electrodes grouped by waveform (:mod:`tracer.groups`) the potential is

    V(x, t) = V_static(x) + sum_k w_k(t) M_k(x),

one static map and K group maps on the same nodes. The interpolant is linear in the node data,
so a cell's polynomial at time t is the static polynomial plus the group polynomials weighted by
w_k(t). Per lane, the kernel keeps the 1 + K polynomials of the cell it is in and of the cell it is
entering in a *drive workspace* (:func:`drive_workspace`), and before each Runge–Kutta stage writes
their sum at the stage's time into the rows the force reads (:func:`weigh_lanes`): the force sees
one ordinary cell polynomial, and each group costs one more sum of 16 coefficients per stage.

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
from tracer.motion.bundles import LANES, W_H, W_T
from tracer.motion.force import field_at, patch_field
from tracer.waveforms import value

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


D_CELL, D_NEXT = 0, 1
"""The two slots of a drive workspace: the cell a lane is in, and the cell it is entering."""


@njit(cache=True, error_model="numpy")
def drive_workspace(drive):
    """A drive workspace: float64[2, 1 + K, 16, LANES], slot (:data:`D_CELL`, :data:`D_NEXT`), map
    (0 static, 1 + k group k), coefficient, lane."""
    return np.zeros((2, 1 + drive.driven.shape[0], 16, LANES))


@njit(cache=True, error_model="numpy", forceinline=True)
def load_cell(dw, slot, l, a, drive, i, j, hz, hr, mirror):
    """Put the static polynomial ``a`` of cell (i, j) and the group polynomials of that cell
    (``mirror`` as for ``fieldmap.patch_coefficients``) into slot ``slot`` of lane l."""
    for m in range(16):
        dw[slot, 0, m, l] = a[m]
    for k in range(drive.driven.shape[0]):
        b = patch_coefficients(drive.driven[k], i, j, hz, hr, mirror)
        for m in range(16):
            dw[slot, 1 + k, m, l] = b[m]


@njit(cache=True, error_model="numpy", forceinline=True)
def weigh(dw, slot, l, waves, m, t, w, row):
    """Write the polynomial of slot ``slot`` of lane l at time t on waveform piece m (static plus
    weighted groups) into rows row..row+15 of lane l of the workspace w."""
    nk = dw.shape[1] - 1
    for c in range(16):
        w[row + c, l] = dw[slot, 0, c, l]
    for k in range(nk):
        wk = value(waves, k, m, t)
        for c in range(16):
            w[row + c, l] += wk * dw[slot, 1 + k, c, l]


@njit(cache=True, error_model="numpy", forceinline=True)
def weigh_lanes(dw, slot, w, row, waves, pieces, frac):
    """:func:`weigh` in every lane at the time ``W_T + frac * W_H`` of its step."""
    for l in range(LANES):
        weigh(dw, slot, l, waves, pieces[l], w[W_T, l] + frac * w[W_H, l], w, row)


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
    a = (dw[D_CELL, 1 + k, 0, l], dw[D_CELL, 1 + k, 1, l], dw[D_CELL, 1 + k, 2, l],
         dw[D_CELL, 1 + k, 3, l], dw[D_CELL, 1 + k, 4, l], dw[D_CELL, 1 + k, 5, l],
         dw[D_CELL, 1 + k, 6, l], dw[D_CELL, 1 + k, 7, l], dw[D_CELL, 1 + k, 8, l],
         dw[D_CELL, 1 + k, 9, l], dw[D_CELL, 1 + k, 10, l], dw[D_CELL, 1 + k, 11, l],
         dw[D_CELL, 1 + k, 12, l], dw[D_CELL, 1 + k, 13, l], dw[D_CELL, 1 + k, 14, l],
         dw[D_CELL, 1 + k, 15, l])
    return patch_field(a, pz, pr, nodes, sym, x, y, z)[0]
