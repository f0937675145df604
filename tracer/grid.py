"""The node grid of the solved region and its symmetry.

Nodes sit on a regular lattice ``z = z0 + iz * hz``, ``r = r0 + ir * hr`` (``r`` is the radius in
axial symmetry, ``y`` in planar symmetry) and node arrays are indexed ``[iz, ir]``.  A grid made from
a Domain has the same number of cells per length in both directions as near to ``cell_m`` as the
extent allows; coarser multigrid levels halve the cell count per side (rounding up) over the same
extent, so their spacing may differ in z and r.
"""

import math
from dataclasses import dataclass

import numpy as np

from tracer.jit import njit


def _cells(length, cell):
    return max(2, int(round(length / cell)))


@dataclass(frozen=True)
class Grid:
    """A regular node grid over the domain.

    Attributes
    ----------
    symmetry : str
        ``"axial"`` (coordinates (z, r), rotation about z) or ``"planar"`` ((z, y), invariant in x).
    mirror : bool
        True when the ``r = r0`` row is the axis (axial) or a mirror plane (planar).
    z0, r0 : float
        Coordinates of the first node in metres.
    hz, hr : float
        Node spacing in metres.
    nz, nr : int
        Number of nodes along z and r.
    edges : tuple of str
        Kinds of the (z_min, z_max, r_min, r_max) sides, as in the Domain.
    """

    symmetry: str
    mirror: bool
    z0: float
    r0: float
    hz: float
    hr: float
    nz: int
    nr: int
    edges: tuple[str, str, str, str]

    @classmethod
    def from_domain(cls, domain):
        """The grid of a Domain: ``round(L / cell_m)`` cells per side (at least 2), spacing ``L / cells``.

        Parameters
        ----------
        domain : tracer.config.Domain

        Returns
        -------
        Grid
        """
        (z0, z1), (r0, r1) = domain.z_m, domain.r_m
        cz = _cells(z1 - z0, domain.cell_m)
        cr = _cells(r1 - r0, domain.cell_m)
        return cls(
            symmetry=domain.symmetry,
            mirror=bool(domain.mirror),
            z0=float(z0),
            r0=float(r0),
            hz=(z1 - z0) / cz,
            hr=(r1 - r0) / cr,
            nz=cz + 1,
            nr=cr + 1,
            edges=tuple(domain.edges),
        )

    def coarsen(self):
        """The next coarser grid: ``ceil(cells / 2)`` cells per side over the same extent.

        Returns
        -------
        Grid
        """
        cz = math.ceil((self.nz - 1) / 2)
        cr = math.ceil((self.nr - 1) / 2)
        return Grid(
            symmetry=self.symmetry,
            mirror=self.mirror,
            z0=self.z0,
            r0=self.r0,
            hz=(self.z1 - self.z0) / cz,
            hr=(self.r1 - self.r0) / cr,
            nz=cz + 1,
            nr=cr + 1,
            edges=self.edges,
        )

    @property
    def z(self):
        """Node z coordinates, shape ``(nz,)``."""
        return self.z0 + self.hz * np.arange(self.nz)

    @property
    def r(self):
        """Node r (or y) coordinates, shape ``(nr,)``."""
        return self.r0 + self.hr * np.arange(self.nr)

    @property
    def shape(self):
        """``(nz, nr)``."""
        return (self.nz, self.nr)

    @property
    def cells(self):
        """Number of cells per side, ``(nz - 1, nr - 1)``."""
        return (self.nz - 1, self.nr - 1)

    @property
    def z1(self):
        """z of the last node."""
        return self.z0 + self.hz * (self.nz - 1)

    @property
    def r1(self):
        """r (or y) of the last node."""
        return self.r0 + self.hr * (self.nr - 1)

    def index(self, z, r):
        """Cell indices and local fractions of points.

        Parameters
        ----------
        z, r : array_like
            Point coordinates in metres (same shape).

        Returns
        -------
        iz, tz, ir, tr : ndarray
            Cell indices clamped to ``[0, n - 2]`` and fractions in ``[0, 1]`` along z and r;
            points outside the grid map to the nearest boundary cell.
        """
        z = np.asarray(z, dtype=np.float64)
        r = np.asarray(r, dtype=np.float64)
        iz, tz = _locate_all(z.ravel(), self.z0, self.hz, self.nz)
        ir, tr = _locate_all(r.ravel(), self.r0, self.hr, self.nr)
        return iz.reshape(z.shape), tz.reshape(z.shape), ir.reshape(r.shape), tr.reshape(r.shape)


@njit(cache=True)
def locate(x, x0, h, n):
    """Cell index and local fraction of a coordinate on a line of ``n`` nodes.

    Parameters
    ----------
    x : float
        Coordinate.
    x0, h : float
        First node and spacing.
    n : int
        Number of nodes (at least 2).

    Returns
    -------
    i : int
        Cell index clamped to ``[0, n - 2]``.
    t : float
        Fraction ``(x - x_i) / h`` clamped to ``[0, 1]``.
    """
    s = (x - x0) / h
    i = int(math.floor(min(max(s, 0.0), n - 1.0)))
    if i > n - 2:
        i = n - 2
    t = min(max(s - i, 0.0), 1.0)
    return i, t


@njit(cache=True)
def _locate_all(x, x0, h, n):
    i = np.empty(x.size, dtype=np.int64)
    t = np.empty(x.size, dtype=np.float64)
    for k in range(x.size):
        i[k], t[k] = locate(x[k], x0, h, n)
    return i, t
