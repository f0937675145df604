"""The one place where the kernel evaluates the static field: potential and force.

The field comes from a (z, r) potential map through the C1 interpolant of
:mod:`tracer.fieldmap` (bicubic Hermite; even in r in the first cell row of an axial or mirrored
map), each cell's patch in power form (``fieldmap.patch_coefficients``),
computed once per cell for all of its steps, turned into a 3-D field by the map's symmetry
(:mod:`tracer.motion.symmetry`).

:func:`force` is the seam for new physics (DESIGN.md §11): it sees the velocity, so the magnetic
term q v x B goes there, without touching the stepper or the events. The electrode groups whose
voltages change in time are added beside it, one loop over the lanes per group, with the ∂V/∂t
work rate (:func:`tracer.motion.drive.add_group`): their weights at a stage's time are found once
per lane and step (:func:`tracer.motion.drive.weigh_steps`), not inside the force.

The magnetic field (:class:`tracer.motion.bundles.Magnet`) is the curl of the interpolated A_theta
of the coils and axial profiles, from the polynomial of the same cell as the potential's
(:func:`magnetic_field`, in :func:`force`), plus uniform fields in their regions
(:func:`uniform_force`, added after it by every caller: its loop over the regions, kept out of
:func:`force`, would stop the stepper's loop over lanes from compiling to SIMD instructions even
where there are no regions). It does no work, so the ledger is unchanged. Without a magnet
(``None``) numba compiles none of this: an electric-only force is qE.
"""

import math

from scipy import constants

from tracer.fieldmap import cell_index, patch_coefficients, patch_eval
from tracer.jit import njit
from tracer.magnetics.uniform import inside
from tracer.motion.symmetry import map_r

C_LIGHT = constants.c


@njit(cache=True, error_model="numpy", forceinline=True)
def gamma_mass(mass, px, py, pz):
    """gamma m of a momentum (the velocity is p / (gamma m))."""
    mc = mass * C_LIGHT
    return mass * math.sqrt(1.0 + (px * px + py * py + pz * pz) / (mc * mc))


@njit(cache=True, error_model="numpy", forceinline=True)
def inverse_gamma_mass(mass, px, py, pz):
    """1 / (gamma m) of a momentum (see :func:`gamma_mass`)."""
    return 1.0 / gamma_mass(mass, px, py, pz)


@njit(cache=True, error_model="numpy", forceinline=True)
def speed(s, mass):
    """Speed of a state (x, y, z, px, py, pz), m/s."""
    p = math.sqrt(s[3] * s[3] + s[4] * s[4] + s[5] * s[5])
    return p / (mass * math.sqrt(1.0 + (p / (mass * C_LIGHT)) ** 2))


@njit(cache=True, error_model="numpy", forceinline=True)
def cell_of(nodes, sym, x, y, z):
    """Indices (i, j) of the interpolation cell holding a 3-D point (clamped onto the grid)."""
    i = cell_index(z, nodes.z0, nodes.hz, nodes.nz)
    j = cell_index(map_r(sym, x, y), nodes.r0, nodes.hr, nodes.nr)
    return i, j


@njit(cache=True, error_model="numpy", forceinline=True)
def patch_field(a, pz, pr, nodes, sym, x, y, z):
    """Potential and field at a 3-D point from the polynomial of one interpolation cell.

    Parameters
    ----------
    a : tuple of 16 float
        The cell's ``tracer.fieldmap.patch_coefficients``; the polynomial is continued beyond its
        walls.
    pz, pr : float
        The cell's first corner (z, r); pr on the first row of an axial or mirrored map
        (symmetry code 0 or 2) says that the polynomial is even in r (``fieldmap.even_row``).
    nodes : Nodes
        The map's node grid.
    sym : int
        0 axial, 1 planar, 2 mirrored planar.
    x, y, z : float
        The point, metres.

    Returns
    -------
    (V, Ex, Ey, Ez) : tuple of float
        Volts and V/m. Points outside the nodes are clamped onto it.
    """
    z0, r0, z1, r1 = nodes.z0, nodes.r0, nodes.z1, nodes.r1
    iz, ir = 1.0 / nodes.hz, 1.0 / nodes.hr
    r = map_r(sym, x, y)
    # selects rather than min, max and branches: loops over lanes stay SIMD
    zc = z0 if z0 > z else z
    zc = z1 if z1 < zc else zc
    rc = r0 if r0 > r else r
    rc = r1 if r1 < rc else rc
    v, vu, vw = patch_eval(a, (zc - pz) * iz, (rc - pr) * ir, sym != 1 and pr == r0)
    dvdr = vw * ir
    ez = -vu * iz
    f = -dvdr / (r if r > 0.0 else 1.0)
    f = f if r > 0.0 else 0.0
    ey = dvdr if y < 0.0 else (0.0 if y == 0.0 else -dvdr)
    ey = f * y if sym == 0 else (ey if sym == 2 else -dvdr)
    return v, (f * x if sym == 0 else 0.0), ey, ez


@njit(cache=True, error_model="numpy", forceinline=True)
def magnetic_field(magnet, b, pz, pr, nodes, x, y, z):
    """The magnetic field of the coils and axial profiles at a 3-D point (see
    :class:`tracer.motion.bundles.Magnet`; the uniform fields are :func:`uniform_force`'s).

    Parameters
    ----------
    magnet : Magnet
    b : tuple of 16 float
        The polynomial of A_theta in the cell with first corner (pz, pr) (used when
        ``magnet.coils``, in axial symmetry), continued beyond its walls as the potential's is:
        B_z = A/r + dA/dr (2 dA/dr on the axis), B_r = -dA/dz.
    nodes : Nodes
    x, y, z : float
        The point, metres.

    Returns
    -------
    (Bx, By, Bz) : tuple of float
        Tesla.
    """
    bx, by, bz = 0.0, 0.0, 0.0
    if magnet.coils:
        iz, ir = 1.0 / nodes.hz, 1.0 / nodes.hr
        r = math.sqrt(x * x + y * y)
        zc = nodes.z0 if nodes.z0 > z else z
        zc = nodes.z1 if nodes.z1 < zc else zc
        rc = nodes.r1 if nodes.r1 < r else r
        a, au, aw = patch_eval(b, (zc - pz) * iz, (rc - pr) * ir, False)
        dadr = aw * ir
        bz = a / rc + dadr if rc > 0.0 else 2.0 * dadr
        br = -au * iz / r if r > 0.0 else 0.0
        bx = br * x
        by = br * y
    return bx, by, bz


@njit(cache=True, error_model="numpy", inline="always")
def uniform_force(magnet, x, y, z, vx, vy, vz, charge):
    """q v x B of the uniform fields of a :class:`tracer.motion.bundles.Magnet` whose regions hold
    the point (x, y, z) (metres; velocity in m/s, charge in coulomb), newtons: the part of the
    magnetic force :func:`force` leaves out."""
    bx, by, bz = 0.0, 0.0, 0.0
    for k in range(magnet.kinds.shape[0]):
        if inside(magnet.kinds[k], magnet.regions[k], x, y, z):
            bx += magnet.fields[k, 0]
            by += magnet.fields[k, 1]
            bz += magnet.fields[k, 2]
    return charge * (vy * bz - vz * by), charge * (vz * bx - vx * bz), charge * (vx * by - vy * bx)


@njit(cache=True, error_model="numpy", forceinline=True)
def force(a, pz, pr, nodes, sym, x, y, z, vx, vy, vz, charge, magnet, b):
    """The force on a charge at a 3-D point in the field of one cell (see :func:`patch_field`),
    without the uniform magnetic fields (:func:`uniform_force`, which its callers add).

    Parameters
    ----------
    a, pz, pr, nodes, sym
        The cell's polynomial and first corner, the node grid and the symmetry code.
    x, y, z, vx, vy, vz : float
        Position (metres) and velocity (m/s).
    charge : float
        Coulomb.
    magnet, b : Magnet or None, tuple of 16 float
        The magnetic field and the cell's polynomial of A_theta (:func:`magnetic_field`); with
        ``None`` the force is electric only and ``b`` is not read.

    Returns
    -------
    (Fx, Fy, Fz, V) : tuple of float
        Newtons and the potential in volts.
    """
    v, ex, ey, ez = patch_field(a, pz, pr, nodes, sym, x, y, z)
    if magnet is None:
        return charge * ex, charge * ey, charge * ez, v
    bx, by, bz = magnetic_field(magnet, b, pz, pr, nodes, x, y, z)
    return (charge * (ex + vy * bz - vz * by), charge * (ey + vz * bx - vx * bz),
            charge * (ez + vx * by - vy * bx), v)


@njit(cache=True, error_model="numpy", forceinline=True)
def field_at(herm, nodes, sym, x, y, z):
    """Potential and field of the interpolant at a 3-D point (see :func:`patch_field`)."""
    i, j = cell_of(nodes, sym, x, y, z)
    return patch_field(patch_coefficients(herm, i, j, nodes.hz, nodes.hr, sym != 1),
                       nodes.z0 + i * nodes.hz,
                       nodes.r0 + j * nodes.hr, nodes, sym, x, y, z)


@njit(cache=True, error_model="numpy", forceinline=True)
def rate(a, pz, pr, nodes, sym, mass, charge, s, ks, row, magnet, b):
    """Right-hand side of the equations of motion in the field of one cell (see
    :func:`patch_field`; ``magnet``, ``b`` as for :func:`force`) at state s (x, y, z, px, py, pz)
    d(state)/dt into ks[row]; returns the potential at s."""
    igm = inverse_gamma_mass(mass, s[3], s[4], s[5])
    ks[row, 0] = s[3] * igm
    ks[row, 1] = s[4] * igm
    ks[row, 2] = s[5] * igm
    fx, fy, fz, v = force(a, pz, pr, nodes, sym, s[0], s[1], s[2], ks[row, 0], ks[row, 1],
                          ks[row, 2], charge, magnet, b)
    ks[row, 3] = fx
    ks[row, 4] = fy
    ks[row, 5] = fz
    if magnet is not None:
        ux, uy, uz = uniform_force(magnet, s[0], s[1], s[2], ks[row, 0], ks[row, 1], ks[row, 2],
                                   charge)
        ks[row, 3] += ux
        ks[row, 4] += uy
        ks[row, 5] += uz
    return v
