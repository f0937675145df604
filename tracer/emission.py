"""Emission laws of a cathode: space-charge-limited, thermionic, and the transition between them.

Space-charge limit (Child 1911; Langmuir 1913)
    A planar diode of gap d with the potential difference V across it carries at most
    J = (4 eps0 / 9) sqrt(2 |q| / m) V^(3/2) / d^2.  Applied locally, d is the distance from the
    cathode surface where a ray starts and V the potential difference to the cathode there
    (the self-consistent potential, space charge included); the potential between the surface
    and d then follows V (x / d)^(4/3).

Thermionic emission (Richardson 1901; Dushman 1923)
    J = A0 T^2 exp(-W / kT) with A0 = 4 pi m_e e k^2 / h^3 (about 1.2e6 A m^-2 K^-2).

Schottky lowering (Schottky 1914)
    An extracting field E at the surface lowers the work function by
    dW = sqrt(e^3 E / (4 pi eps0)) (the image-force barrier).

Curved cathodes (Langmuir & Blodgett 1923, 1924)
    On a curved surface the flow spreads or gathers along the normals, and the limited density at
    a site is the planar one times :func:`curvature_factor` of the local principal curvatures;
    without it the planar law errs at first order in d / radius.

Transition
    A hot cathode emits the Richardson–Dushman density when the field can carry it away
    (temperature-limited) and no more than the local Child law allows (space-charge-limited):
    J = min(J_RD, J_CL), the sharp transition (common practice).

Everything is SI; work functions and their lowering are in eV.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants

RICHARDSON_A0 = 4.0 * math.pi * constants.m_e * constants.e * constants.k**2 / constants.h**3
"""The Richardson constant A0 = 4 pi m_e e k^2 / h^3, A m^-2 K^-2 (Dushman 1923)."""


def child_langmuir(voltage, distance, mass_kg, charge_C):
    """Space-charge-limited current density of a planar gap (Child 1911; Langmuir 1913).

    Parameters
    ----------
    voltage : float or ndarray
        Accelerating potential difference across the gap, volts (values <= 0 give 0).
    distance : float or ndarray
        Gap width, metres (> 0).
    mass_kg, charge_C : float
        The emitted particle.

    Returns
    -------
    float or ndarray
        J = (4 eps0 / 9) sqrt(2 |q| / m) V^(3/2) / d^2 in A/m^2.
    """
    v = np.maximum(np.asarray(voltage, dtype=np.float64), 0.0)
    return (4.0 * constants.epsilon_0 / 9.0) * np.sqrt(2.0 * abs(charge_C) / mass_kg) * v**1.5 / distance**2


def curvature_factor(distance, curvature_sum, curvature_product):
    """Space-charge-limited density at a curved cathode over the planar law with the same V and d.

    The flow leaves along the surface normals, so the area of a tube of normals grows as
    1 + H x + K x^2 with H = k1 + k2 and K = k1 k2 the sum and product of the principal curvatures
    (positive where the cathode is convex). Poisson's equation along the tube then gives
    J / J_CL = 1 + (4/5) H d + (7 K / 12 - H^2 / 50) d^2 + O(d^3): the coefficients follow from
    Langmuir and Blodgett's series for concentric spheres (1924; H = 2/a, K = 1/a^2) and coaxial
    cylinders (1923; H = 1/a, K = 0), which are this equation with those areas.  The remainder is
    third order in d times the curvature: keep the radius of curvature many times d.

    Parameters
    ----------
    distance : float
        Distance d from the surface where the potential is taken, metres.
    curvature_sum, curvature_product : float or ndarray
        H = k1 + k2 (1/m, positive convex, negative concave) and K = k1 k2 (1/m^2).

    Returns
    -------
    ndarray
        J / J_CL (1 on a plane).
    """
    hd = np.asarray(curvature_sum, dtype=np.float64) * distance
    kd2 = np.asarray(curvature_product, dtype=np.float64) * distance * distance
    return 1.0 + 0.8 * hd + 7.0 * kd2 / 12.0 - hd * hd / 50.0


def schottky_lowering_eV(field_V_per_m):
    """Work-function lowering by an extracting surface field (Schottky 1914).

    Parameters
    ----------
    field_V_per_m : float or ndarray
        The extracting field strength at the surface, V/m (values <= 0 give no lowering).

    Returns
    -------
    float or ndarray
        dW = sqrt(e^3 E / (4 pi eps0)) expressed in eV.
    """
    e_field = np.maximum(np.asarray(field_V_per_m, dtype=np.float64), 0.0)
    return np.sqrt(constants.e * e_field / (4.0 * math.pi * constants.epsilon_0))


def richardson_dushman(temperature_K, work_function_eV):
    """Thermionic current density J = A0 T^2 exp(-W / kT) (Richardson 1901; Dushman 1923).

    Parameters
    ----------
    temperature_K : float
        Cathode temperature, kelvin.
    work_function_eV : float or ndarray
        Effective work function (after any lowering), eV.

    Returns
    -------
    float or ndarray
        Current density in A/m^2.
    """
    kT_eV = constants.k * temperature_K / constants.e
    w = np.asarray(work_function_eV, dtype=np.float64)
    return RICHARDSON_A0 * temperature_K**2 * np.exp(-w / kT_eV)


def emission_density(voltage, distance, mass_kg, charge_C, *, temperature_K=None,
                     work_function_eV=None, surface_field_V_per_m=None, curvature=(0.0, 0.0)):
    """Current density of emission sites: space-charge-limited, or thermionic up to that limit.

    Parameters
    ----------
    voltage : ndarray
        Accelerating potential difference between the cathode and each site's start point, volts.
    distance : float
        Distance of the start points from the surface, metres.
    mass_kg, charge_C : float
        The emitted particle.
    temperature_K, work_function_eV : float, optional
        Give both for a thermionic cathode; without them the emission is space-charge-limited.
    surface_field_V_per_m : ndarray, optional
        Extracting surface field for the Schottky lowering (thermionic only); None: no lowering.
    curvature : (ndarray, ndarray)
        Sum and product of the surface's principal curvatures at each site
        (:func:`curvature_factor`); (0, 0) for a plane.

    Returns
    -------
    density : ndarray
        J in A/m^2 per site.
    limited : ndarray of bool
        True where the space-charge limit sets the density.
    """
    limit = child_langmuir(voltage, distance, mass_kg, charge_C) * curvature_factor(distance, *curvature)
    if temperature_K is None:
        return limit, np.ones(limit.shape, dtype=bool)
    w = np.full(limit.shape, float(work_function_eV))
    if surface_field_V_per_m is not None:
        w = w - schottky_lowering_eV(surface_field_V_per_m)
    hot = richardson_dushman(temperature_K, w)
    return np.minimum(hot, limit), limit <= hot


def layer_exponent(density, limit):
    """Power alpha of the potential V (x / d)^alpha assumed between the surface and the start point.

    4/3 in the space-charge limit (the Child profile), 1 (a uniform field) with no space charge,
    and linear in J / J_CL between them (a model choice: the charge of this thin layer is small
    when the emission is temperature-limited).
    """
    ratio = np.divide(density, limit, out=np.zeros_like(density), where=limit > 0.0)
    return 1.0 + np.clip(ratio, 0.0, 1.0) / 3.0


def layer_transit(distance, speed, alpha, points, curvature=(0.0, 0.0)):
    """Distances from the surface and times of a particle crossing the layer below its start point.

    Starting at rest in the potential V (x / d)^alpha, the speed grows as x^(alpha / 2), so
    x = d (t / t_d)^(1 / (1 - alpha / 2)) and t_d = d / ((1 - alpha / 2) v_d), with v_d the speed at
    d (for the Child profile t_d = 3 d / v_d, Langmuir 1913).  On a curved surface the limited
    density J = J_CL(V(x), x) F(x) (:func:`curvature_factor`) is the same at every x of the layer,
    so the Child profile becomes V(d) (x / d)^(4/3) (F(x) / F(d))^(-2/3); a layer between the
    limits (alpha < 4/3) takes that factor to the power 3 (alpha - 1).  The points are equally
    spaced in s = (x / d)^(1 - alpha / 2), which is the time's fraction on a plane; on a curved
    surface the times are integrated over s (the trapezoid rule; the integrand is smooth in s).

    Parameters
    ----------
    distance : float
        Layer thickness d, metres.
    speed : float or ndarray
        Speed at d, m/s (> 0).
    alpha : float or ndarray
        Exponent of the potential profile, in [1, 4/3].
    points : int
        Number of path points (>= 2).
    curvature : (float or ndarray, float or ndarray)
        Sum and product of the surface's principal curvatures (1/m, 1/m^2); (0, 0) for a plane.

    Returns
    -------
    x : ndarray
        Distance from the surface of each point, metres, from 0 to d; one row of ``points`` per
        element of the arguments (their broadcast shape, then the points).
    t : ndarray
        Time of each point, seconds, from 0 to t_d; the same shape.
    """
    power = (1.0 - 0.5 * np.asarray(alpha, dtype=np.float64))[..., None]
    scale = distance / (power * np.asarray(speed, dtype=np.float64)[..., None])
    fraction = np.linspace(0.0, 1.0, points)
    x = distance * fraction ** (1.0 / power)
    if not (np.any(curvature[0]) or np.any(curvature[1])):
        return np.broadcast_arrays(x, fraction * scale)
    total, product = (np.asarray(c, dtype=np.float64)[..., None] for c in curvature)
    # dt/ds = d / (power v_d) * (F(x) / F(d))^(alpha - 1): the speed goes as the potential's root
    slowness = (curvature_factor(x, total, product) / curvature_factor(distance, total, product)) \
        ** (1.0 - 2.0 * power)
    steps = 0.5 * (slowness[..., 1:] + slowness[..., :-1]) * np.diff(fraction)
    elapsed = np.concatenate([np.zeros(steps.shape[:-1] + (1,)), np.cumsum(steps, axis=-1)], axis=-1)
    return np.broadcast_arrays(x, elapsed * scale)
