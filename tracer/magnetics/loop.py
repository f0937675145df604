"""A circular current loop: vector potential and field in closed form.

A loop of radius a in the plane z = z_loop, centred on the axis, carrying current I, has only an
azimuthal vector potential (Jackson, Classical Electrodynamics, 3rd ed. 1999, §5.5)::

    A_phi = mu0 I / (pi k) sqrt(a / r) [(1 - k^2/2) K(k^2) - E(k^2)],
    k^2 = 4 a r / ((a + r)^2 + dz^2),  dz = z - z_loop,

and B = curl A::

    B_z = mu0 I / (2 pi s) [K + (a^2 - r^2 - dz^2) / ((a - r)^2 + dz^2) E],
    B_r = mu0 I dz / (2 pi r s) [-K + (a^2 + r^2 + dz^2) / ((a - r)^2 + dz^2) E],
    s = sqrt((a + r)^2 + dz^2),

with K and E the complete elliptic integrals of the first and second kind in the parameter
m = k^2 (scipy.special.ellipk's convention).  dB_z/dz, which the unit fields need
(:mod:`tracer.magnetics.units`), is the derivative of the closed form for B_z, with
dK/dm = (E - (1 - m) K) / (2 m (1 - m)), dE/dm = (E - K) / (2 m) and dm/dz = -2 m dz / s^2.  They are computed here by the arithmetic-geometric
mean (Abramowitz & Stegun 1964, 17.6), which numba compiles and which reaches full double
precision in a few iterations.  On the axis the limits A_phi = B_r = 0 are taken exactly.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants

from tracer.jit import njit

MU0_OVER_PI = constants.mu_0 / math.pi


@njit(cache=True, error_model="numpy")
def ellip_ke(m):
    """Complete elliptic integrals K(m) and E(m), 0 <= m < 1, by the arithmetic-geometric mean.

    Returns
    -------
    (K, E) : tuple of float
    """
    a = 1.0
    b = math.sqrt(1.0 - m)
    c2 = m                      # c_n^2, c_0^2 = m
    s = 0.5 * c2                # sum of 2^(n-1) c_n^2
    p = 0.5
    for _ in range(40):
        if c2 <= 1e-34 * a * a:
            break
        c = 0.5 * (a - b)
        a, b = 0.5 * (a + b), math.sqrt(a * b)
        p *= 2.0
        c2 = c * c
        s += p * c2
    k = 0.5 * math.pi / a
    return k, k * (1.0 - s)


@njit(cache=True, error_model="numpy")
def loop_unit(a, dz, r):
    """A_phi, B_z, B_r and dB_z/dz of a loop of radius a at axial distance dz and radius r, per ampere.

    dB_z/dz is the closed form's own derivative (module docstring), through
    dK/dm = (E - (1 - m) K) / (2 m (1 - m)) and dE/dm = (E - K) / (2 m) (Abramowitz & Stegun 1964,
    17.3) with dm/dz = -2 m dz / s^2; on the axis, d/dz of mu0 I a^2 / (2 (a^2 + dz^2)^(3/2)).

    Parameters
    ----------
    a : float
        Loop radius (m, > 0).
    dz, r : float
        Position relative to the loop's plane, and radius (m, r >= 0).  On the loop itself
        (dz = 0, r = a) the field is infinite.

    Returns
    -------
    (A_phi, B_z, B_r, dB_z/dz) : tuple of float
        T m, T and T/m for 1 A.
    """
    c = 0.5 * MU0_OVER_PI
    if r == 0.0:
        q = a * a + dz * dz
        bz = c * math.pi * a * a / q ** 1.5
        return 0.0, bz, 0.0, -3.0 * dz * bz / q
    s2 = (a + r) ** 2 + dz * dz
    m = 4.0 * a * r / s2
    kk, ee = ellip_ke(m)
    s = math.sqrt(s2)
    d2 = (a - r) ** 2 + dz * dz
    n = a * a - r * r - dz * dz
    aphi = MU0_OVER_PI / math.sqrt(m) * math.sqrt(a / r) * ((1.0 - 0.5 * m) * kk - ee)
    f = kk + n / d2 * ee
    bz = c / s * f
    br = c * dz / (r * s) * (-kk + (a * a + r * r + dz * dz) / d2 * ee)
    m_z = -2.0 * m * dz / s2
    k_z = (ee - (1.0 - m) * kk) / (2.0 * m * (1.0 - m)) * m_z
    e_z = (ee - kk) / (2.0 * m) * m_z
    f_z = k_z + (-2.0 * dz * ee + n * e_z) / d2 - n * ee * 2.0 * dz / (d2 * d2)
    return aphi, bz, br, c / s * (f_z - f * dz / s2)


@njit(cache=True, error_model="numpy")
def _loop_many(a, z_loop, z, r, aphi, bz, br):
    for k in range(z.size):
        aphi[k], bz[k], br[k], _ = loop_unit(a, z[k] - z_loop, abs(r[k]))


def loop_field(radius_m: float, z_m: float, current_A: float, z, r):
    """Vector potential and field of a current loop at points.

    Parameters
    ----------
    radius_m, z_m : float
        The loop's radius and axial position (m).
    current_A : float
        Its current (A); positive circulates in +phi (right-handed about +z).
    z, r : array_like
        Points (m), broadcast together.

    Returns
    -------
    (A_phi, B_z, B_r) : tuple of ndarray
        T m and T.
    """
    return tuple(current_A * o for o in over_points(_loop_many, (float(radius_m), float(z_m)), z, r))


def over_points(kernel, args, z, r, outputs=3):
    """Run ``kernel(*args, z, r, out_0, ..., out_n)`` over points z, r broadcast together.

    The shared wrapper of the magnetic kernels that fill arrays (A_phi, B_z, B_r, and for the
    coils' node data dB_z/dz: ``outputs`` of them) point by point; returns the arrays in the
    points' shape.
    """
    z, r = np.broadcast_arrays(np.asarray(z, dtype=float), np.asarray(r, dtype=float))
    out = [np.empty(z.size) for _ in range(outputs)]
    kernel(*args, np.ascontiguousarray(z).ravel(), np.ascontiguousarray(r).ravel(), *out)
    return tuple(o.reshape(z.shape) for o in out)
