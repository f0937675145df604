"""Reference currents of space-charge-limited diodes, for the tests of the gun.

* Planar gap (Child 1911; Langmuir 1913): J = (4 eps0 / 9) sqrt(2 e / m) V^(3/2) / d^2.
* Concentric spheres (Langmuir & Blodgett 1924, Phys. Rev. 24, 49): a cathode of radius r_c and an
  anode of radius r draw I = (16 pi eps0 / 9) sqrt(2 e / m) V^(3/2) / alpha^2, with alpha(gamma),
  gamma = ln(r / r_c), the solution of 3 alpha alpha'' + alpha'^2 + 3 alpha alpha' = 1 from
  alpha = 0, alpha' = 1 at gamma = 0. The anode may be inside (r < r_c, a concave cathode
  emitting inwards, the flow of a Pierce gun; gamma < 0).
* Coaxial cylinders (Langmuir & Blodgett 1923, Phys. Rev. 22, 347): per unit length
  I = (8 pi eps0 / 9) sqrt(2 e / m) V^(3/2) / (r beta^2), r the anode radius, with beta(gamma) the
  solution of 3 beta beta'' + beta'^2 + 4 beta beta' + beta^2 = 1 from beta = 0, beta' = 1.

Both equations follow from Poisson's equation with the charge density I / (area x speed) and the
potential written as V = K alpha^(4/3) (sphere) or V = K (r beta^2)^(2/3) (cylinder). They are
singular at gamma = 0, so the integration starts at a small gamma from the first terms of the
series Langmuir and Blodgett give (alpha = g - 0.3 g^2 + 0.075 g^3 - 0.00143 g^4 ...,
beta = g - 0.4 g^2 + 0.09167 g^3 - 0.01424 g^4 ...) and runs on with scipy's DOP853 at tight
tolerances; the series alone is too coarse at large radius ratios. Non-relativistic, like the
laws themselves: keep the electrons at a few kV (the relativistic correction is about 0.2 % at
10 kV).
"""

from __future__ import annotations

import math

from scipy import constants
from scipy.integrate import solve_ivp

SPHERE_SERIES = (1.0, -0.3, 0.075, -0.00143)
"""Leading coefficients of alpha in powers of gamma (Langmuir & Blodgett 1924)."""

CYLINDER_SERIES = (1.0, -0.4, 0.09167, -0.01424)
"""Leading coefficients of beta in powers of gamma (Langmuir & Blodgett 1923)."""

_START = 1e-4
"""|gamma| where the integration takes over from the series."""


def series(coefficients, gamma):
    """sum_k c_k gamma^(k + 1): the published short series of alpha or beta."""
    return sum(c * gamma ** (k + 1) for k, c in enumerate(coefficients))


def _solve(gamma, coefficients, rhs):
    if abs(gamma) <= _START:
        return series(coefficients, gamma)
    g0 = math.copysign(_START, gamma)
    slope = sum((k + 1) * c * g0**k for k, c in enumerate(coefficients))
    sol = solve_ivp(rhs, (g0, gamma), (series(coefficients, g0), slope), method="DOP853",
                    rtol=1e-12, atol=1e-15)
    return float(sol.y[0, -1])


def alpha(gamma):
    """Langmuir & Blodgett's alpha of concentric spheres at gamma = ln(r_anode / r_cathode)."""
    return _solve(gamma, SPHERE_SERIES, lambda g, y: (y[1], (1.0 - y[1] ** 2 - 3.0 * y[0] * y[1]) / (3.0 * y[0])))


def beta(gamma):
    """Langmuir & Blodgett's beta of coaxial cylinders at gamma = ln(r_anode / r_cathode)."""
    return _solve(gamma, CYLINDER_SERIES,
                  lambda g, y: (y[1], (1.0 - y[1] ** 2 - 4.0 * y[0] * y[1] - y[0] ** 2) / (3.0 * y[0])))


def _perveance_factor(mass_kg, charge_C):
    return 4.0 * constants.epsilon_0 / 9.0 * math.sqrt(2.0 * abs(charge_C) / mass_kg)


def child_density(volts, gap, mass_kg=constants.m_e, charge_C=-constants.e):
    """Space-charge-limited density of a planar gap, A/m^2 (Child 1911; Langmuir 1913)."""
    return _perveance_factor(mass_kg, charge_C) * volts**1.5 / gap**2


def sphere_current(volts, cathode_m, anode_m, mass_kg=constants.m_e, charge_C=-constants.e):
    """Current between concentric spheres, A (Langmuir & Blodgett 1924)."""
    a = alpha(math.log(anode_m / cathode_m))
    return 4.0 * math.pi * _perveance_factor(mass_kg, charge_C) * volts**1.5 / a**2


def cylinder_current(volts, cathode_m, anode_m, mass_kg=constants.m_e, charge_C=-constants.e):
    """Current per metre between coaxial cylinders, A/m (Langmuir & Blodgett 1923)."""
    b = beta(math.log(anode_m / cathode_m))
    return 2.0 * math.pi * _perveance_factor(mass_kg, charge_C) * volts**1.5 / (anode_m * b**2)


# ---------------------------------------------------------------------------------------------
# Curved-cathode diodes for the gun (illustrative setups of our own)

CURVED_VOLTS = 100.0
"""Anode voltage of the curved diodes: low, so that the traced rays' relativistic slowing
(-0.002 % of the current here, -0.021 % at 1 kV: the planar diode's relativistic equation
integrated) stays out of the comparison with the non-relativistic laws; nothing else in them
depends on the voltage."""
CURVED_RADII_MM = {"sphere": (1.0, 2.0), "sphere_concave": (2.0, 1.0),
                   "cylinder": (1.0, 2.0), "cylinder_concave": (2.0, 1.0)}
"""(cathode, anode) radii of each diode, mm."""

_CURVED = """
title = "{case} diode, half of it (illustrative)"
[domain]
symmetry = "{symmetry}"
z_mm = {z_mm}
r_mm = {size}
cell_mm = {cell}
edges = {{ {open_side} = "open", {ground_side} = "ground", r_max = "ground" }}
[[electrode]]
name = "cathode"
voltage_V = 0.0
[[electrode.arc]]
center_z_mm = 0.0
radii_mm = {cathode_radii}
angles_deg = {angles}
[[electrode]]
name = "anode"
voltage_V = {volts}
[[electrode.arc]]
center_z_mm = 0.0
radii_mm = {anode_radii}
angles_deg = {angles}
[gun]
cathode = "cathode"
rays = {rays}
relaxation = 0.3
tolerance = {tolerance}
max_iterations = 200
"""


def curved_diode(case, cells_per_radius, rays=40, tolerance=1e-4):
    """The setup of a curved diode: concentric spheres (axial) or coaxial cylinders (planar with
    its mirror plane), the half z > 0 (convex cathode inside) or z < 0 (concave cathode outside,
    emitting inwards), the open edge through the centre mirroring the other half."""
    from tracer.config import loads

    cathode, anode = CURVED_RADII_MM[case]
    size = 1.1 * max(cathode, anode)
    inner, outer = min(cathode, anode), max(cathode, anode)
    convex = cathode < anode
    text = _CURVED.format(
        case=case, symmetry="axial" if case.startswith("sphere") else "planar",
        z_mm=f"[0.0, {size}]" if convex else f"[{-size}, 0.0]", size=size,
        cell=cathode / cells_per_radius,
        open_side="z_min" if convex else "z_max", ground_side="z_max" if convex else "z_min",
        angles="[0.0, 90.0]" if convex else "[90.0, 180.0]",
        cathode_radii=f"[0.0, {inner}]" if convex else f"[{outer}, {3 * outer}]",
        anode_radii=f"[{outer}, {3 * outer}]" if convex else f"[0.0, {inner}]",
        volts=CURVED_VOLTS, rays=rays, tolerance=tolerance)
    return loads(text)


def curved_reference(case):
    """Langmuir & Blodgett's current of the half diode that ``curved_diode`` builds: A for the
    spheres, A per metre for the cylinders."""
    cathode, anode = (1e-3 * x for x in CURVED_RADII_MM[case])
    whole = (sphere_current if case.startswith("sphere") else cylinder_current)(CURVED_VOLTS, cathode, anode)
    return whole / 2.0
