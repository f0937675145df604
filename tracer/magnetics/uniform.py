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
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

UNBOUNDED = (-math.inf, math.inf)


@dataclass(frozen=True)
class Box:
    """The region x_m[0] <= x <= x_m[1], the same for y and z (m); unbounded by default."""

    x_m: tuple[float, float] = UNBOUNDED
    y_m: tuple[float, float] = UNBOUNDED
    z_m: tuple[float, float] = UNBOUNDED

    def contains(self, x, y, z) -> np.ndarray:
        """True at the points inside."""
        inside = True
        for v, (lo, hi) in ((x, self.x_m), (y, self.y_m), (z, self.z_m)):
            inside = inside & (np.asarray(v) >= lo) & (np.asarray(v) <= hi)
        return np.asarray(inside)


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

    def contains(self, x, y, z) -> np.ndarray:
        """True at the points inside (x plays no part)."""
        y = np.asarray(y, dtype=float)
        z = np.asarray(z, dtype=float)
        s = self.side
        zc, yc = self.center
        e1 = math.radians(self.entrance_face_deg)
        # entrance face normal: +z turned towards the centre by e1
        after = (z - zc) * math.cos(e1) + y * s * math.sin(e1) >= 0.0
        z1, y1, tz, ty = self.exit_point()
        e2 = math.radians(self.exit_face_deg)
        to_center = ((zc - z1) / self.radius_m, (yc - y1) / self.radius_m)
        nz = math.cos(e2) * tz - math.sin(e2) * to_center[0]
        ny = math.cos(e2) * ty - math.sin(e2) * to_center[1]
        before = (z - z1) * nz + (y - y1) * ny <= 0.0
        band = np.abs(np.hypot(z - zc, y - yc) - self.radius_m) <= self.half_gap_m
        return after & before & band


@dataclass(frozen=True)
class UniformField:
    """A uniform field B (T) along (x, y, z), within ``region`` (everywhere when None)."""

    name: str
    b_T: tuple[float, float, float]
    region: Box | Sector | None = None

    def field(self, x, y, z):
        """(B_x, B_y, B_z) at points (T), zero outside the region."""
        x, y, z = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (x, y, z)))
        inside = np.ones(x.shape, bool) if self.region is None else self.region.contains(x, y, z)
        return tuple(np.where(inside, b, 0.0) for b in self.b_T)
