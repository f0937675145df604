"""Paraxial optics of round electrostatic, magnetic and combined lenses: cardinal elements, Cs and Cc.

Method
------
*Accelerating potential.*  For a particle of charge q and mass m with kinetic
energy T0 at the start point z_s on the axis, where the potential is V(z_s), the
accelerating potential Phi(z) = T(z)/|q| = T0/|q| - sign(q) (V(z) - V(z_s)) is
zero where the particle would be at rest.  This is the energy reference of a
traced beam, whose ``energy_eV`` is the kinetic energy at its start point
(:func:`tracer.beam.trace`); z_s is the beam's ``start_z_m`` when one is given,
else the map's z_min end.
With eps = |q|/(2 m c^2) the relativistically corrected potential is
Phi* = Phi (1 + eps Phi), and gamma = 1 + 2 eps Phi.

*Paraxial ray equation* (Hawkes & Kasper, Principles of Electron Optics, 1989)::

    r'' + gamma Phi' / (2 Phi*) r' + gamma Phi'' / (4 Phi*) r = 0

and with an axial magnetic field B(z) (``magnetic``), in the frame that turns with the
ray about the axis (Busch 1926; Hawkes & Kasper 1989)::

    r'' + gamma Phi' / (2 Phi*) r' + (gamma Phi'' / (4 Phi*) + q B^2 / (8 m Phi*)) r = 0,
    theta' = -q B / (2 p) = -sign(q) sqrt(|q| / (8 m Phi*)) B,

p = sqrt(2 m |q| Phi*) the momentum; theta is the rotation of that frame about +z (right-handed),
so that ``rotation_rad``, its total over the axis used, is the image rotation (the Larmor angle).
The paraxial equation is integrated by the classical Runge-Kutta method, 16 steps a grid cell, aligned
with the polynomial pieces of the axial potential (:mod:`tracer.axial`) so that
every step sees one smooth polynomial.  The fundamental rays are g, parallel to
the axis at z_min (g = 1, g' = 0), and gbar, parallel at z_max, integrated
backwards; z_min and z_max are the ends of the stretch of axis used (the map's
unless cut, see :func:`paraxial`).  These ends are taken as field-free: the
cardinal elements are the asymptotic ones.

*Sign conventions.*  z increases along the beam.  Image side (object at
infinity): f_image = -1/g'(z_max), F_i = z_max - g/g', P_i = F_i - f_image.
Object side: f_object = 1/gbar'(z_min), F_o = z_min - gbar/gbar',
P_o = F_o + f_object.  A converging lens has both focal lengths positive, F_o
before P_o and F_i after P_i; Newton's equation then reads
(z_o - F_o)(z_i - F_i) = -f_object f_image, and f_object/f_image =
sqrt(Phi*_o/Phi*_i).  The image of an object at z_o is where the ray h from the
axial object point (h(z_o) = 0) meets the axis, extrapolated from z_max (so a
virtual image lies before z_max); the magnification is the height there of the
ray that leaves the object parallel at unit height.

*Aberrations.*  Both are referred to the image side: a ray through the axial
object point that reaches the image at slope alpha (its paraxial slope) lands
at r = Cs alpha^3 - Cc alpha dE/E in the Gaussian image plane, E being the
kinetic energy at the image side (z_max).  Both are positive for round
electrostatic lenses (Scherzer 1936).  With u the paraxial ray through the
axial object point (u = g for an object at infinity) and u'_i its image slope:

- Cs = -4 / (sqrt(Phi*_i) u'_i^4) * integral M4(u, u') dz, the perturbation
  integral of the fourth-order term M4 of the eikonal integrand
  sqrt(Phi*(z, r)) sqrt(1 + r'^2), Phi(z, r) = Phi - r^2/4 Phi'' + r^4/64 Phi''''
  (the method of Hawkes & Kasper 1989).  Its Phi'''' term is integrated twice by
  parts, so that only Phi, Phi' and Phi'' enter: the fourth derivative of grid
  data is never needed.  The end terms of that integration (W Phi''' - W' Phi'',
  W the factor of Phi'''') vanish at field-free map ends and are left out;
  taken from the fit they would only carry its end artefacts.  In the
  nonrelativistic limit the result equals Scherzer's integral (Scherzer 1936) in
  the form given by Hawkes & Kasper 1989 (recalled, and re-derived from M4 by
  parts), Cs = 1/(16 sqrt(Phi_i) u'_i^4) integral sqrt(Phi)
  [(5/4 (Phi''/Phi)^2 + 5/24 (Phi'/Phi)^4) u^4 + 14/3 (Phi'/Phi)^3 u^3 u'
  - 3/2 (Phi'/Phi)^2 u^2 u'^2] dz (checked in the tests); written as above it
  holds for relativistic electrons too.  The integral runs from the object to
  the (asymptotic) image, field-free stretches included.
- Cc = Phi_i / (sqrt(Phi*_i) u'_i^2) * integral (1 + 2 eps Phi*) Phi*^(-1/2)
  [Phi' u u' / (2 Phi*) + Phi'' u^2 / (4 Phi*)] dz, which for eps -> 0 is the
  published chromatic integral (Hawkes & Kasper 1989); the relativistic factor
  follows from differentiating the paraxial equation above with respect to the
  energy.

*Magnetic and combined lenses.*  A ray through the axial object point has no canonical
angular momentum about the axis, so its azimuth can be eliminated (Routh's procedure): what
is left is the variational function sqrt(Phi*(z, r) - |q| A_theta(z, r)^2 / (2 m)) sqrt(1 + r'^2)
of the radius alone, the meridional ray of the turning frame (the radius is the true one, and
this holds beyond the paraxial order).  With A_theta = r B/2 - r^3 B''/16 + ... (the series of
:mod:`tracer.magnetics.profile`) the magnetic field adds to Phi*(z, r) the terms
-beta r^2 + beta_2 r^4, beta = |q| B^2 / (8 m), beta_2 = |q| B B'' / (32 m): the paraxial
equation above, and the fourth-order term M4 the magnetic terms written in ``_slope``.  Cs and
Cc are then the same perturbation integrals, Cc's integrand gaining gamma beta u^2 / Phi*^(3/2):

    Cc = Phi_i / (sqrt(Phi*_i) u'_i^2) * integral [(1 + 2 eps Phi*) (Phi' u u' / 2
         + Phi'' u^2 / 4) + gamma beta u^2] Phi*^(-3/2) dz.

For a purely magnetic lens they reduce (by parts, boundary terms vanishing at the object, the
image and field-free ends) to the classic integrals (Hawkes & Kasper 1989, recalled and
re-derived from M4; the nonrelativistic forms with Phi* for Phi, rest mass m)::

    Cs = |q| / (128 m Phi* u'_i^4) * integral [3 |q| B^4 u^4 / (m Phi*) + 8 B'^2 u^4
         - 8 B^2 u^2 u'^2] dz,
    Cc = gamma Phi / Phi* * |q| / (8 m Phi* u'_i^2) * integral B^2 u^2 dz,

checked in tests/test_optics.py against Glaser's bell-shaped field.  B comes from the field
itself and B'' from the degree-7 spline fit of B on the axis nodes (as Phi'' from the
potential's fit).  The ends of the axis used are taken as field-free for B too: a coil's field
not yet faded there is cut, and the lens quantities are those of the field between the ends.
The focal lengths are the asymptotic ones; for Glaser's bell-shaped field (Glaser 1941),
k^2 = q B0^2 a^2 / (8 m Phi*) and w^2 = 1 + k^2, they are f = -a w / sin(pi w) with the focus
at z_F = a w cot(pi w) from the centre, and the total rotation is k pi (checked in
tests/test_optics.py); Glaser's objective focal length a / sin(pi / w) is another quantity and
is not what ``f_image_m`` holds.

*Mirrors.*  If Phi falls to zero on the axis the particle turns back: the result
comes with ``mirror = True``, ``turning_z_m`` where Phi = 0, and NaN for every
lens quantity and ray.  No exception is raised, so that voltage scans can run
through mirror settings; :class:`OpticsError` is kept for bad input.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Protocol

import numpy as np
from scipy import constants
from scipy.optimize import brentq

from tracer.axial import AxialPotential, axial_potential, fit_axial
from tracer.display import Shown, number
from tracer.fieldmap import PotentialMap
from tracer.jit import njit
from tracer.species import Species

SUBSTEPS = 16   # Runge-Kutta steps a grid cell: a whole number of steps per knot interval


class AxialField(Protocol):
    """A magnetic field on the axis, as paraxial optics uses it."""

    def on_axis(self, z: np.ndarray) -> np.ndarray:
        """B_z on the axis (T) at an array of z (m)."""


class OpticsError(ValueError):
    """The lens properties cannot be computed for this map, species or energy."""


@dataclass(frozen=True, eq=False, repr=False)
class LensProperties(Shown):
    """Paraxial properties and aberrations of a round lens for one species and energy.

    Lengths in metres, positions are z on the axis; energies in eV.  For an object
    at infinity: ``f_image_m``, ``f_object_m``, ``focus_image_z_m``,
    ``focus_object_z_m``, ``principal_image_z_m``, ``principal_object_z_m``,
    ``cs_m``, ``cc_m`` (image side).  For the object at ``object_z_m`` (NaN when
    none was given): ``image_z_m``, ``magnification``, ``image_cs_m``,
    ``image_cc_m`` (image side).  See the module docstring for the conventions.

    ``rotation_rad`` is the rotation of the paraxial image about +z over the axis used (0
    without a magnetic field; see the module docstring).

    ``mirror`` is True when the particle turns back on the axis (at
    ``turning_z_m``); the lens quantities and rays are then NaN.  ``energy_eV`` is
    the kinetic energy asked for at ``start_z_m`` on the axis, where the potential
    is ``start_potential_V`` (the energy reference of a traced beam);
    ``exit_energy_eV`` the kinetic energy at the end of the axis used.

    For plots: ``z_m`` (the axis nodes used), ``axial`` (rows V, V', V'', V''',
    V'''' of the fitted axial potential at ``z_m``, in V/m^k), ``ray_g`` (the ray
    entering parallel at unit height), ``ray_gbar`` (the ray leaving parallel at
    unit height), ``ray_h`` (the ray from the axial object point with unit initial
    slope, in m; NaN before the object or when none was given).
    """

    f_image_m: float
    f_object_m: float
    focus_image_z_m: float
    focus_object_z_m: float
    principal_image_z_m: float
    principal_object_z_m: float
    cs_m: float
    cc_m: float
    object_z_m: float
    image_z_m: float
    magnification: float
    image_cs_m: float
    image_cc_m: float
    mirror: bool
    turning_z_m: float
    species: str
    energy_eV: float
    exit_energy_eV: float
    z_m: np.ndarray
    axial: np.ndarray
    ray_g: np.ndarray
    ray_gbar: np.ndarray
    ray_h: np.ndarray
    rotation_rad: float = 0.0
    start_z_m: float = math.nan
    start_potential_V: float = math.nan

    def _facts(self):
        if self.mirror:
            return {"species": self.species, "energy": number(self.energy_eV, "eV"),
                    "mirror": f"turns back at z = {number(self.turning_z_m, 'mm', 1e3)}"}
        return {"species": self.species, "energy": number(self.energy_eV, "eV"),
                "f_image": number(self.f_image_m, "mm", 1e3),
                "focus_image_z": number(self.focus_image_z_m, "mm", 1e3),
                "cs": number(self.cs_m, "mm", 1e3), "cc": number(self.cc_m, "mm", 1e3),
                **({"rotation": number(math.degrees(self.rotation_rad), "deg")} if self.rotation_rad else {}),
                "image_z": number(self.image_z_m, "mm", 1e3), "magnification": number(self.magnification)}

    def summary(self) -> dict:
        """The scalar results as a dict (name -> value), in field order."""
        return {f.name: getattr(self, f.name) for f in fields(self)
                if not isinstance(getattr(self, f.name), np.ndarray)}


@dataclass(frozen=True)
class _Kinetics:
    """The accelerating potential seen by one species at one entrance energy."""

    axial: AxialPotential
    phi0: float     # accelerating potential where the axial potential is v0 (V)
    v0: float       # the map's potential on the axis at the start point (V)
    sign: float     # sign of the charge
    eps: float      # |q| / (2 m c^2) (1/V)
    q_over_m: float = 0.0       # |q| / m (C/kg)
    magnetic: object = None     # the axial magnetic field: on_axis(z) -> B (T), or None
    magnetic_fit: AxialPotential | None = None   # B(z) fitted on the axis nodes, for B''

    def magnetic_terms(self, z) -> tuple[np.ndarray, np.ndarray]:
        """|q| B^2 / (8 m) and |q| B B'' / (32 m) at z (V/m^2 and V/m^4), zeros without a
        magnetic field; B from the field itself, B'' from its fit on the axis nodes."""
        z = np.asarray(z, dtype=float)
        if self.magnetic is None:
            return np.zeros(z.shape), np.zeros(z.shape)
        b = self.magnetic.on_axis(z.ravel()).reshape(z.shape)
        return self.q_over_m / 8.0 * b ** 2, self.q_over_m / 32.0 * b * self.magnetic_fit(z, 2)

    def phi(self, z):
        """The accelerating potential Phi at z (V)."""
        return self.phi0 - self.sign * (self.axial(z) - self.v0)

    def star(self, phi):
        """Phi* = Phi (1 + eps Phi)."""
        return phi * (1.0 + self.eps * phi)


@njit(cache=True)
def _poly_derivative(c, x, nu):
    """The nu-th derivative at x of the polynomial with coefficients c[k] x^k."""
    s = 0.0
    for k in range(c.size - 1, nu - 1, -1):
        f = 1.0
        for j in range(nu):
            f *= k - j
        s = s * x + f * c[k]
    return s


@njit(cache=True)
def _phi_at(z, z0, width, taylor, phi0, v0, sign):
    """Phi and its first two derivatives at z from the polynomial pieces of the axial potential."""
    i = min(max(int(math.floor((z - z0) / width)), 0), taylor.shape[0] - 1)
    x = z - (z0 + i * width)
    c = taylor[i]
    return (phi0 - sign * (_poly_derivative(c, x, 0) - v0), -sign * _poly_derivative(c, x, 1),
            -sign * _poly_derivative(c, x, 2))


@njit(cache=True)
def _quartic_weight(phi, d1, d2, eps):
    """A = gamma / (128 sqrt(Phi*)) and its z-derivatives A', A''.

    A r^4 is the factor of Phi'''' in the fourth-order eikonal term M4.
    """
    ps = phi * (1.0 + eps * phi)
    gam = 1.0 + 2.0 * eps * phi
    root = math.sqrt(ps)
    w = 2.0 * eps / root - gam * gam / (2.0 * ps * root)
    dw = -3.0 * eps * gam / (ps * root) + 0.75 * gam ** 3 / (ps * ps * root)
    return gam / (128.0 * root), d1 * w / 128.0, (d2 * w + d1 * d1 * dw) / 128.0


@njit(cache=True)
def _slope(z, y, n, z0, width, taylor, phi0, v0, sign, eps, mag, mag2, out):
    """d/dz of the state of n rays: heights, slopes, Cs and Cc integrands (module docstring).

    The Cs integrand is M4 = sqrt(Phi*) [-r'^4/8 - gamma Phi'' r^2 r'^2 / (16 Phi*)
    + r^4 (gamma Phi'''' / (128 Phi*) + eps Phi''^2 / (32 Phi*) - gamma^2 Phi''^2 / (128 Phi*^2))]
    plus the magnetic terms sqrt(Phi*) [-beta r^2 r'^2 / (4 Phi*) + r^4 (beta_2 / (2 Phi*)
    - gamma Phi'' beta / (16 Phi*^2) - beta^2 / (8 Phi*^2))], with its Phi'''' term A r^4 Phi''''
    replaced by (A r^4)'' Phi'' (two integrations by parts), r'' taken from the paraxial
    equation.  ``mag`` is beta = |q| B^2 / (8 m) at z (V/m^2), ``mag2`` beta_2 = |q| B B'' / (32 m)
    (V/m^4).
    """
    phi, d1, d2 = _phi_at(z, z0, width, taylor, phi0, v0, sign)
    ps = phi * (1.0 + eps * phi)
    gam = 1.0 + 2.0 * eps * phi
    root = math.sqrt(ps)
    a = gam * d1 / (2.0 * ps)
    b = gam * d2 / (4.0 * ps) + mag / ps
    a0, a1, a2 = _quartic_weight(phi, d1, d2, eps)
    quartic = eps * d2 * d2 / (32.0 * ps) - gam * gam * d2 * d2 / (128.0 * ps * ps)
    quartic_b = mag2 / (2.0 * ps) - (gam * d2 / 16.0 + mag / 8.0) * mag / (ps * ps)
    chrom = (1.0 + 2.0 * eps * ps) / (ps * root)
    chrom_b = gam * mag / (ps * root)
    for k in range(n):
        r = y[k]
        p = y[n + k]
        acc = -a * p - b * r
        out[k] = p
        out[n + k] = acc
        w2 = a2 * r ** 4 + 8.0 * a1 * r ** 3 * p + 4.0 * a0 * (3.0 * r * r * p * p + r ** 3 * acc)
        out[2 * n + k] = (root * (-p ** 4 / 8.0 - gam * d2 * r * r * p * p / (16.0 * ps)
                                  + r ** 4 * quartic) + w2 * d2
                          + root * (r ** 4 * quartic_b - mag * r * r * p * p / (4.0 * ps)))
        out[3 * n + k] = chrom * (d1 * r * p / 2.0 + d2 * r * r / 4.0) + chrom_b * r * r


@njit(cache=True)
def paraxial_rays(points, y0, n, z0, width, taylor, phi0, v0, sign, eps, mag, mag2):
    """Classical 4th-order Runge-Kutta through the given z points; the state at every point.

    The state of n rays holds 4 n values: heights, slopes, Cs integrals, Cc
    integrals.  One step between consecutive points; the points may decrease
    (backward integration).  ``mag[j]`` and ``mag2[j]`` hold |q| B^2 / (8 m) and
    |q| B B'' / (32 m) at the start, middle and end of step j.
    """
    m = points.size
    out = np.empty((m, y0.size))
    out[0] = y0
    y = y0.copy()
    k1 = np.empty_like(y)
    k2 = np.empty_like(y)
    k3 = np.empty_like(y)
    k4 = np.empty_like(y)
    for j in range(m - 1):
        za = points[j]
        h = points[j + 1] - za
        _slope(za, y, n, z0, width, taylor, phi0, v0, sign, eps, mag[j, 0], mag2[j, 0], k1)
        _slope(za + 0.5 * h, y + 0.5 * h * k1, n, z0, width, taylor, phi0, v0, sign, eps, mag[j, 1],
               mag2[j, 1], k2)
        _slope(za + 0.5 * h, y + 0.5 * h * k2, n, z0, width, taylor, phi0, v0, sign, eps, mag[j, 1],
               mag2[j, 1], k3)
        _slope(za + h, y + h * k3, n, z0, width, taylor, phi0, v0, sign, eps, mag[j, 2], mag2[j, 2], k4)
        y = y + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
        out[j + 1] = y
    return out


def _step_points(points: np.ndarray) -> np.ndarray:
    """The start, middle and end of every step between consecutive points, as rows."""
    return np.column_stack([points[:-1], 0.5 * (points[:-1] + points[1:]), points[1:]])


def _rays(kin: _Kinetics, points: np.ndarray, r0, p0) -> np.ndarray:
    """States (rows: points) of rays started at points[0] with heights r0 and slopes p0."""
    n = len(r0)
    y0 = np.concatenate([r0, p0, np.zeros(2 * n)]).astype(float)
    z0, width, taylor = kin.axial.pieces()
    return paraxial_rays(points, y0, n, z0, width, taylor, kin.phi0, kin.v0, kin.sign, kin.eps,
                         *kin.magnetic_terms(_step_points(points)))


def _rotation(kin: _Kinetics, points: np.ndarray) -> float:
    """The total rotation -integral q B / (2 p) dz over the points (Simpson on each step)."""
    if kin.magnetic is None:
        return 0.0
    steps = _step_points(points)
    rate = (-kin.sign * np.sqrt(kin.q_over_m / 8.0 / kin.star(kin.phi(steps)))
            * kin.magnetic.on_axis(steps.ravel()).reshape(steps.shape))
    return float(np.sum(np.diff(points) / 6.0 * (rate[:, 0] + 4.0 * rate[:, 1] + rate[:, 2])))


def _image_side(kin: _Kinetics, z1: float, end, k: int, n: int, front_m: float = 0.0):
    """Image position, Cs and Cc (image side) of ray k of n from its state at the map's end z1.

    ``front_m`` is the field-free length from the object to the map (slope 1 there).
    """
    u, du, i4, i2 = end[k], end[n + k], end[2 * n + k], end[3 * n + k]
    phi1 = float(kin.phi(z1))
    s1 = math.sqrt(kin.star(phi1))
    with np.errstate(divide="ignore", invalid="ignore"):
        z_img = z1 - np.float64(u) / du
        s0 = math.sqrt(kin.star(float(kin.phi(kin.axial.z[0]))))
        m4 = i4 - front_m * s0 / 8.0 - (z_img - z1) * s1 * du ** 4 / 8.0
        cs = -4.0 * m4 / (s1 * np.float64(du) ** 4)
        cc = phi1 * i2 / (s1 * np.float64(du) ** 2)
    return float(z_img), float(cs), float(cc)


def _species(sp):
    if isinstance(sp, str):
        from tracer.species import species
        return species(sp)
    return sp


def _turning_point(kin: _Kinetics, z: np.ndarray):
    """The first z where Phi reaches zero (NaN if it stays positive), scanned at 4 points a cell."""
    fine = np.linspace(z[0], z[-1], 4 * (len(z) - 1) + 1)
    phi = kin.phi(fine)
    bad = np.flatnonzero(phi <= 0.0)
    if bad.size == 0:
        return math.nan
    i = bad[0]
    if i == 0:
        return float(fine[0])
    return float(brentq(kin.phi, fine[i - 1], fine[i]))


def paraxial(field: PotentialMap, species: str | Species, energy_eV: float,
             object_z_m: float | None = None, *, z_range_m: tuple[float, float] | None = None,
             knot_cells: int = 3, magnetic: AxialField | None = None,
             start_z_m: float | None = None) -> LensProperties:
    """Paraxial lens properties and aberration coefficients from a potential map.

    Parameters
    ----------
    field : PotentialMap
        The map (axial symmetry).  Any object with ``potential(z, r)`` and a ``grid``
        (``z0``, ``z1``, ``hz``, ``symmetry``) will do.
    species : str or Species
        A species name (see :func:`tracer.species.species`) or an object with
        ``name``, ``mass_kg`` and ``charge_C``.
    energy_eV : float
        Kinetic energy (> 0) at ``start_z_m`` on the axis: the same reference as a
        traced beam's ``energy_eV``, the kinetic energy at its start point
        (:func:`tracer.beam.trace`), so a beam and its paraxial lens agree when
        ``start_z_m`` is the beam's.  The result shows the potential there.
    object_z_m : float, optional
        An axial object position before the end of the axis used (before its start
        means in field-free space in front of it).  Gives ``image_z_m``,
        ``magnification``, ``image_cs_m`` and ``image_cc_m``.
    z_range_m : (float, float), optional
        Use only this stretch of the axis (one lens of a column, say).  Either way the
        axis used ends where it enters an electrode (see
        :func:`tracer.axial.axial_potential`); ``z_m`` of the result shows it.  Its
        ends are taken as field-free.
    knot_cells : int
        Knot spacing of the axial-potential fit, in cells (see :mod:`tracer.axial`).
    magnetic : object, optional
        An axial magnetic field: any object with ``on_axis(z) -> B_z`` (tesla at an array of
        z), such as a :class:`tracer.magnetics.profile.AxialProfile` or a
        :class:`tracer.magnetics.units.MagneticMap`.  Adds its focusing, its aberrations
        and the image rotation (module docstring).
    start_z_m : float, optional
        Where on the axis the particle has ``energy_eV`` (a beam's ``start_z_m``);
        default the map's z_min end.

    Returns
    -------
    LensProperties

    Raises
    ------
    OpticsError
        For a non-axial map, a non-positive energy, a neutral species, an object
        beyond the end of the axis used, or too short a free stretch of axis.
    """
    grid = field.grid
    if grid.symmetry != "axial":
        raise OpticsError(f"paraxial optics needs an axially symmetric map, not {grid.symmetry!r}")
    if not energy_eV > 0.0:
        raise OpticsError(f"energy_eV must be positive, got {energy_eV}")
    sp = _species(species)
    if sp.charge_C == 0.0:
        raise OpticsError(f"species {sp.name!r} is neutral")
    try:
        ax = axial_potential(field, knot_cells, z_range_m)
    except ValueError as exc:
        raise OpticsError(str(exc)) from exc
    z = ax.z
    z0, z1 = float(z[0]), float(z[-1])
    if object_z_m is not None and not object_z_m < z1:
        raise OpticsError(f"object_z_m = {object_z_m} must lie before the end of the axis used, "
                          f"z = {z1}")
    start = grid.z0 if start_z_m is None else float(start_z_m)
    if not grid.z0 <= start <= grid.z1:
        raise OpticsError(f"start_z_m = {start} lies outside the map, z = {grid.z0}..{grid.z1}")
    v_ref = float(field.potential(np.array([start]), np.zeros(1))[0])
    q = abs(sp.charge_C)
    kin = _Kinetics(axial=ax, phi0=energy_eV * constants.e / q, v0=v_ref,
                    sign=math.copysign(1.0, sp.charge_C),
                    eps=q / (2.0 * sp.mass_kg * constants.c ** 2), q_over_m=q / sp.mass_kg,
                    magnetic=magnetic,
                    magnetic_fit=None if magnetic is None else fit_axial(z, magnetic.on_axis(z), knot_cells))
    nan = math.nan
    nan_ray = np.full_like(z, nan)
    common = dict(object_z_m=nan if object_z_m is None else float(object_z_m),
                  species=sp.name, energy_eV=float(energy_eV),
                  exit_energy_eV=float(energy_eV - sp.charge_C / constants.e * (ax(z1) - kin.v0)),
                  z_m=z, axial=ax.derivatives(z), start_z_m=start, start_potential_V=v_ref)
    turn = _turning_point(kin, z)
    if not math.isnan(turn):
        return LensProperties(nan, nan, nan, nan, nan, nan, nan, nan, image_z_m=nan,
                              magnification=nan, image_cs_m=nan, image_cc_m=nan, mirror=True,
                              turning_z_m=turn, ray_g=nan_ray, ray_gbar=nan_ray.copy(),
                              ray_h=nan_ray.copy(), rotation_rad=nan, **common)
    points = np.linspace(z0, z1, SUBSTEPS * (len(z) - 1) + 1)
    fwd = _rays(kin, points, np.array([1.0]), np.array([0.0]))
    z_fi, cs, cc = _image_side(kin, z1, fwd[-1], 0, 1)
    bwd = _rays(kin, points[::-1], np.array([1.0]), np.array([0.0]))[::-1]
    gb, dgb = bwd[0, 0], bwd[0, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        f_i = float(-1.0 / fwd[-1, 1])
        f_o = float(1.0 / dgb)
        z_fo = float(z0 - gb / dgb)
    image = dict(image_z_m=nan, magnification=nan, image_cs_m=nan, image_cc_m=nan, ray_h=nan_ray)
    if object_z_m is not None:
        zs = max(float(object_z_m), z0)
        obj_points = np.concatenate([[zs], points[points > zs]])
        obj = _rays(kin, obj_points, np.array([zs - object_z_m, 1.0]), np.array([1.0, 0.0]))
        z_img, i_cs, i_cc = _image_side(kin, z1, obj[-1], 0, 2, front_m=zs - object_z_m)
        end = obj[-1]
        image = dict(image_z_m=z_img, magnification=float(end[1] + end[3] * (z_img - z1)),
                     image_cs_m=i_cs, image_cc_m=i_cc,
                     ray_h=np.interp(z, obj_points, obj[:, 0], left=nan))
    return LensProperties(
        f_image_m=f_i, f_object_m=f_o, focus_image_z_m=z_fi, focus_object_z_m=z_fo,
        principal_image_z_m=z_fi - f_i, principal_object_z_m=z_fo + f_o, cs_m=cs, cc_m=cc,
        mirror=False, turning_z_m=nan, ray_g=fwd[::SUBSTEPS, 0], ray_gbar=bwd[::SUBSTEPS, 0],
        rotation_rad=_rotation(kin, points), **image, **common)
