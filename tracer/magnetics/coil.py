"""A coil in the (z, r) half-plane: a rectangular winding cross-section carrying N turns.

The current density over the winding's cross-section is uniform, N I / (area), so the coil's field
is N I times the mean of the loop field (:mod:`tracer.magnetics.loop`) over the cross-section.  The
mean is taken by composite Gauss-Legendre quadrature: the section is cut into panels no longer than
its smaller side (the winding thickness) nor than its inner radius, each with ``ORDER`` x ``ORDER`` nodes.  The loop field is
analytic away from the winding, so the error falls geometrically with the order; at one winding
thickness from the section it is below 1e-8 relative (measured in tests/test_magnetics.py against
a quadrature four times finer).  A side of zero width is a thin winding (one node across it), and a
section of zero width and height is a single loop.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from tracer.jit import njit, prange
from tracer.magnetics.loop import loop_unit, over_points

ORDER = 12
"""Gauss-Legendre nodes per panel side."""


class Winding(NamedTuple):
    """What fixes a coil's unit field: its winding section (m) and turns, not its name or current."""

    z_m: tuple
    r_m: tuple
    turns: int


@dataclass(frozen=True)
class Coil:
    """A coil of rectangular winding cross-section, coaxial with the axis.

    Parameters
    ----------
    name : str
        Its name (the ``<name>_A`` column of scans).
    z_m : (float, float)
        Axial extent of the winding (m); equal ends make a thin winding.
    r_m : (float, float)
        Inner and outer radius of the winding (m, inner > 0 unless equal ends); equal ends make a
        thin winding (a sheet).
    turns : int
        Number of turns (>= 1).
    current_A : float
        The current in each turn (A); positive circulates right-handed about +z, so B_z > 0 inside.
    """

    name: str
    z_m: tuple[float, float]
    r_m: tuple[float, float]
    turns: int = 1
    current_A: float = 0.0

    @property
    def winding(self) -> Winding:
        """The winding section and turns, as plain floats and int."""
        return Winding(tuple(float(v) for v in self.z_m), tuple(float(v) for v in self.r_m), int(self.turns))

    def nodes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Quadrature nodes (z, r) over the cross-section and weights summing to one."""
        widths = [self.z_m[1] - self.z_m[0], self.r_m[1] - self.r_m[0]]
        positive = [w for w in widths + [self.r_m[0]] if w > 0.0]
        side = min(positive) if positive else 0.0
        axes = []
        for (lo, hi), w in zip((self.z_m, self.r_m), widths):
            if w == 0.0:
                axes.append((np.array([lo]), np.array([1.0])))
                continue
            x, wt = np.polynomial.legendre.leggauss(ORDER)
            edges = np.linspace(lo, hi, math.ceil(w / side * (1.0 - 1e-12)) + 1)
            a, b = edges[:-1, None], edges[1:, None]
            axes.append((((b - a) * x + a + b).ravel() / 2.0, ((b - a) * wt).ravel() / (2.0 * w)))
        (zn, wz), (rn, wr) = axes
        return (np.repeat(zn, rn.size), np.tile(rn, zn.size), np.outer(wz, wr).ravel())


@njit(cache=True, error_model="numpy", forceinline=True)
def _coil_point(zn, rn, wn, z, r):
    """Mean loop field and dB_z/dz over the nodes at one point (per ampere-turn)."""
    sa = 0.0
    sz = 0.0
    sr = 0.0
    sd = 0.0
    r = abs(r)
    for j in range(zn.size):
        a, b, c, d = loop_unit(rn[j], z - zn[j], r)
        sa += wn[j] * a
        sz += wn[j] * b
        sr += wn[j] * c
        sd += wn[j] * d
    return sa, sz, sr, sd


@njit(cache=True, error_model="numpy")
def _coil_unit(zn, rn, wn, z, r, aphi, bz, br, bz_z):
    """:func:`_coil_point` at every point, on this thread (safe in a forked child process)."""
    for k in range(z.size):
        aphi[k], bz[k], br[k], bz_z[k] = _coil_point(zn, rn, wn, z[k], r[k])


@njit(cache=True, parallel=True, error_model="numpy")
def _coil_unit_threads(zn, rn, wn, z, r, aphi, bz, br, bz_z):
    """:func:`_coil_point` at every point, the points shared among numba's threads (each point's
    sum in the same order on any thread count)."""
    for k in prange(z.size):
        aphi[k], bz[k], br[k], bz_z[k] = _coil_point(zn, rn, wn, z[k], r[k])


def coil_field(coil: Coil, z, r, current_A: float | None = None, slope=False, threads=False):
    """Vector potential and field of a coil at points.

    Parameters
    ----------
    coil : Coil
    z, r : array_like
        Points (m), broadcast together.
    current_A : float, optional
        The current in each turn; the coil's own when not given.
    slope : bool
        Also return dB_z/dz.
    threads : bool
        Share the points among numba's threads (for many points: a map's grid).  Not in a process
        forked from one that used them (:func:`tracer.beside.beside`'s child): numba's OpenMP pool
        ends such a process.

    Returns
    -------
    (A_phi, B_z, B_r) or (A_phi, B_z, B_r, dB_z/dz) : tuple of ndarray
        T m, T and T/m.
    """
    current = coil.current_A if current_A is None else float(current_A)
    scale = coil.turns * current
    out = over_points(_coil_unit_threads if threads else _coil_unit, coil.nodes(), z, r, outputs=4)
    return tuple(scale * o for o in out[:4 if slope else 3])
