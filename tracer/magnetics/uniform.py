"""A uniform magnetic field, optionally confined to a box or a hard-edged sector.

Positions are 3-D, (x, y, z) with z along the axis; in a planar domain the rays move in the (z, y)
plane and a sector magnet bends them there with its field along x.

A *box* holds the field between optional bounds on x, y and z: a Wien filter's plates region, say.
A *sector* is a hard-edged bending magnet.  Its reference orbit enters along +z on the axis at
``entrance_z_m`` and bends on a circle of radius rho through the angle phi (positive towards +y,
negative towards -y; 0 < |phi| <= 180 degrees), its centre at (z, y) = (z_in, +-rho).  The field
fills the points between the entrance and the exit face whose distance from the centre lies
within ``half_gap_m`` of rho.  Each face passes through the reference orbit and is rotated there
from the radial line by its pole-face angle; a positive angle shortens the path in the field of
rays outside the reference orbit (the usual sign of beam-transport optics, from memory: a positive
angle weakens horizontal focusing, and a rectangular magnet of bend phi has both angles phi/2).
The field's edges are hard: no fringe field is modelled.

The ray kernel sees a region as a kind (:data:`EVERYWHERE`, :data:`BOX`, :data:`SECTOR`) and a
row of numbers (:meth:`Box.row`, :meth:`Sector.row`), tested by :func:`inside`; the regions'
``contains`` use the same test.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tracer.jit import njit

UNBOUNDED = (-math.inf, math.inf)

EVERYWHERE, BOX, SECTOR = 0, 1, 2
"""Region kinds of :func:`inside`."""
ROW = 10
"""Numbers in a region's row."""


@njit(cache=True, error_model="numpy", inline="always")
def inside(kind, row, x, y, z):
    """Whether the point (x, y, z) lies in a region of kind ``kind`` given by ``row``.

    A box's row is (x_lo, x_hi, y_lo, y_hi, z_lo, z_hi); a sector's (z_c, y_c, rho, half_gap,
    entrance normal (n_z, n_y), exit point (z, y), exit normal (n_z, n_y)), its entrance point
    on the axis at z_c, below the centre (z_c, y_c) of the reference orbit.
    """
    if kind == BOX:
        return (row[0] <= x <= row[1]) and (row[2] <= y <= row[3]) and (row[4] <= z <= row[5])
    if kind == SECTOR:
        if (z - row[0]) * row[4] + y * row[5] < 0.0:
            return False
        if (z - row[6]) * row[8] + (y - row[7]) * row[9] > 0.0:
            return False
        return abs(math.sqrt((z - row[0]) ** 2 + (y - row[1]) ** 2) - row[2]) <= row[3]
    return True


@njit(cache=True, error_model="numpy")
def _inside_many(kind, row, x, y, z, out):
    for k in range(out.size):
        out[k] = inside(kind, row, x[k], y[k], z[k])


def contains_points(kind, row, x, y, z) -> np.ndarray:
    """:func:`inside` at arrays of points (broadcast together)."""
    x, y, z = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (x, y, z)))
    out = np.empty(x.shape, dtype=bool)
    _inside_many(kind, np.asarray(row, dtype=float), np.ascontiguousarray(x).ravel(),
                 np.ascontiguousarray(y).ravel(), np.ascontiguousarray(z).ravel(), out.ravel())
    return out


@dataclass(frozen=True)
class Box:
    """The region x_m[0] <= x <= x_m[1], the same for y and z (m); unbounded by default."""

    x_m: tuple[float, float] = UNBOUNDED
    y_m: tuple[float, float] = UNBOUNDED
    z_m: tuple[float, float] = UNBOUNDED

    kind = BOX

    def row(self) -> np.ndarray:
        """The box's numbers for :func:`inside`."""
        return np.array([*self.x_m, *self.y_m, *self.z_m], dtype=float)

    def contains(self, x, y, z) -> np.ndarray:
        """True at the points inside."""
        return contains_points(BOX, self.row(), x, y, z)


@dataclass(frozen=True)
class Sector:
    """A hard-edged sector magnet in the (z, y) plane (module docstring).

    Parameters
    ----------
    entrance_z_m : float
        Where the reference orbit, on the axis, enters.
    radius_m : float
        rho, the radius of the reference orbit (> 0).
    angle_deg : float
        The bend phi: positive towards +y, negative towards -y; 0 < |phi| <= 180.
    half_gap_m : float
        The field reaches rho +- half_gap_m from the centre (< rho).
    entrance_face_deg, exit_face_deg : float
        Pole-face angles (|angle| < 90).
    """

    entrance_z_m: float
    radius_m: float
    angle_deg: float
    half_gap_m: float
    entrance_face_deg: float = 0.0
    exit_face_deg: float = 0.0

    def __post_init__(self):
        if not 0.0 < abs(self.angle_deg) <= 180.0:
            raise ValueError(f"angle_deg must be within 0 < |angle| <= 180, got {self.angle_deg}")
        if not 0.0 < self.half_gap_m < self.radius_m:
            raise ValueError(f"half_gap_m must lie between 0 and radius_m, got {self.half_gap_m}")
        for a in (self.entrance_face_deg, self.exit_face_deg):
            if not abs(a) < 90.0:
                raise ValueError(f"pole-face angles must lie within +-90 degrees, got {a}")

    @property
    def side(self) -> float:
        """+1 when the orbit bends towards +y, -1 towards -y."""
        return math.copysign(1.0, self.angle_deg)

    @property
    def center(self) -> tuple[float, float]:
        """(z, y) of the centre of the reference orbit."""
        return self.entrance_z_m, self.side * self.radius_m

    def exit_point(self) -> tuple[float, float, float, float]:
        """(z, y) where the reference orbit leaves, and its direction (dz, dy) there."""
        phi = math.radians(abs(self.angle_deg))
        zc, yc = self.center
        s = self.side
        return (zc + self.radius_m * math.sin(phi), yc - s * self.radius_m * math.cos(phi),
                math.cos(phi), s * math.sin(phi))

    kind = SECTOR

    def row(self) -> np.ndarray:
        """The sector's numbers for :func:`inside`."""
        s = self.side
        zc, yc = self.center
        e1 = math.radians(self.entrance_face_deg)
        # entrance face normal: +z turned towards the centre by e1
        z1, y1, tz, ty = self.exit_point()
        e2 = math.radians(self.exit_face_deg)
        to_center = ((zc - z1) / self.radius_m, (yc - y1) / self.radius_m)
        return np.array([zc, yc, self.radius_m, self.half_gap_m, math.cos(e1), s * math.sin(e1),
                         z1, y1, math.cos(e2) * tz - math.sin(e2) * to_center[0],
                         math.cos(e2) * ty - math.sin(e2) * to_center[1]], dtype=float)

    def contains(self, x, y, z) -> np.ndarray:
        """True at the points inside (x plays no part)."""
        return contains_points(SECTOR, self.row(), x, y, z)


@dataclass(frozen=True)
class UniformField:
    """A uniform field B (T) along (x, y, z), within ``region`` (everywhere when None)."""

    name: str
    b_T: tuple[float, float, float]
    region: Box | Sector | None = None

    def field(self, x, y, z):
        """(B_x, B_y, B_z) at points (T), zero outside the region."""
        x, y, z = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (x, y, z)))
        within = np.ones(x.shape, bool) if self.region is None else self.region.contains(x, y, z)
        return tuple(np.where(within, b, 0.0) for b in self.b_T)
