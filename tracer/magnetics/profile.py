"""A field given on the axis, B(z), continued off the axis by its series.

In a current-free region around the axis of a round lens the vector potential is fixed by the axial
field (the off-axis expansion of an axially symmetric harmonic field; Glaser 1952, Hawkes & Kasper,
Principles of Electron Optics, 1989)::

    A_phi = (r/2) B - (r^3/16) B'' + (r^5/384) B'''',

kept here to r^5 (the next term is -(r^7/18432) B^(6)).  B = curl A then gives, with no further
truncation, so that div B = 0 holds exactly::

    B_z = B - (r^2/4) B'' + (r^4/64) B'''',
    B_r = -(r/2) B' + (r^3/16) B''' - (r^5/384) B^(5).

The error grows as (r/a)^6 for a field that varies over a length a: the series serves the paraxial
region, not the pole pieces.  This is how a lens with iron pole pieces, measured or computed
elsewhere, is brought in; iron itself is not solved.

Two profiles: Glaser's bell-shaped field B0 / (1 + ((z - z_c)/a)^2) (Glaser 1941), with every
derivative in closed form, and a table of (z, B) samples fitted by the degree-7 least-squares spline
of :mod:`tracer.axial` (derivatives to the fifth stay continuous).  Outside the table B = 0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tracer.axial import AxialPotential, fit_axial

ORDERS = 6
"""B and its derivatives to the fifth, the ones the series uses."""


@dataclass(frozen=True, eq=False)
class AxialProfile:
    """A magnetic field on the axis: Glaser's bell or a fitted table.

    Parameters
    ----------
    name : str
    peak_T, half_width_m, center_z_m : float
        Glaser's bell: B0, a (the half-width at half-maximum) and z_c.  NaN for a table.
    fit : tracer.axial.AxialPotential or None
        The spline through the table's samples (in T), None for the bell.
    """

    name: str
    peak_T: float = math.nan
    half_width_m: float = math.nan
    center_z_m: float = 0.0
    fit: AxialPotential | None = None

    @classmethod
    def glaser(cls, name: str, peak_T: float, half_width_m: float, center_z_m: float = 0.0):
        """Glaser's bell-shaped field B0 / (1 + ((z - z_c)/a)^2)."""
        if not half_width_m > 0.0:
            raise ValueError(f"half_width_m must be positive, got {half_width_m}")
        return cls(name, float(peak_T), float(half_width_m), float(center_z_m))

    @classmethod
    def table(cls, name: str, z_m, b_T, knot_cells: int = 3):
        """A table of the axial field: increasing, equally spaced z (m) and B (T)."""
        z = np.asarray(z_m, dtype=float)
        if z.ndim != 1 or z.size < 2 or not np.all(np.diff(z) > 0.0):
            raise ValueError("the table's z must increase")
        return cls(name, fit=fit_axial(z, b_T, knot_cells))

    def derivatives(self, z) -> np.ndarray:
        """B, B', ..., B^(5) at z, as rows of a (6, len(z)) array (T/m^k)."""
        z = np.atleast_1d(np.asarray(z, dtype=float))
        if self.fit is None:
            x = (z - self.center_z_m) / self.half_width_m - 1j
            # 1/(1 + x^2) = Im 1/(x - i); its n-th derivative is Im (-1)^n n! / (x - i)^(n + 1)
            return np.stack([self.peak_T / self.half_width_m ** n
                             * ((-1) ** n * math.factorial(n) / x ** (n + 1)).imag
                             for n in range(ORDERS)])
        inside = (z >= self.fit.z[0]) & (z <= self.fit.z[-1])
        return np.stack([np.where(inside, self.fit(z, n), 0.0) for n in range(ORDERS)])

    def on_axis(self, z) -> np.ndarray:
        """B(z) on the axis (T)."""
        return self.derivatives(z)[0]

    def field(self, z, r, slope=False):
        """A_phi (T m), B_z and B_r (T) at points by the series (module docstring); with
        ``slope``, also dB_z/dz = B' - (r^2/4) B^(3) + (r^4/64) B^(5) (T/m)."""
        z, r = np.broadcast_arrays(np.asarray(z, dtype=float), np.asarray(r, dtype=float))
        d = self.derivatives(z.ravel()).reshape((ORDERS,) + z.shape)
        r = np.abs(r)
        aphi = r / 2 * d[0] - r ** 3 / 16 * d[2] + r ** 5 / 384 * d[4]
        bz = d[0] - r ** 2 / 4 * d[2] + r ** 4 / 64 * d[4]
        br = -r / 2 * d[1] + r ** 3 / 16 * d[3] - r ** 5 / 384 * d[5]
        if slope:
            return aphi, bz, br, d[1] - r ** 2 / 4 * d[3] + r ** 4 / 64 * d[5]
        return aphi, bz, br


def axial_field_T(spec, z) -> np.ndarray:
    """B_z on the axis (T) at z of a setup's coils and axial fields (``spec``, a
    :class:`tracer.schema.MagneticSpec`), from their closed forms."""
    from tracer.magnetics.coil import coil_field

    z = np.asarray(z, dtype=float)
    return (sum((coil_field(c, z, np.zeros_like(z))[1] for c in spec.coils), np.zeros_like(z))
            + sum((p.on_axis(z) for p in spec.profiles), np.zeros_like(z)))
