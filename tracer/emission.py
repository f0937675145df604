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
                     work_function_eV=None, surface_field_V_per_m=None):
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

    Returns
    -------
    density : ndarray
        J in A/m^2 per site.
    limited : ndarray of bool
        True where the space-charge limit sets the density.
    """
    limit = child_langmuir(voltage, distance, mass_kg, charge_C)
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


def layer_transit(distance, speed, alpha, points):
    """Distances from the surface and times of a particle crossing the layer below its start point.

    Starting at rest in the potential V (x / d)^alpha, the speed grows as x^(alpha / 2), so
    x = d (t / t_d)^(1 / (1 - alpha / 2)) and t_d = d / ((1 - alpha / 2) v_d), with v_d the speed at
    d (for the Child profile t_d = 3 d / v_d, Langmuir 1913).

    Parameters
    ----------
    distance : float
        Layer thickness d, metres.
    speed : float
        Speed at d, m/s (> 0).
    alpha : float
        Exponent of the potential profile, in [1, 4/3].
    points : int
        Number of path points (>= 2), equally spaced in time.

    Returns
    -------
    x : ndarray
        Distance from the surface of each point, metres, from 0 to d.
    t : ndarray
        Time of each point, seconds, from 0 to t_d.
    """
    power = 1.0 - 0.5 * alpha
    fraction = np.linspace(0.0, 1.0, points)
    return distance * fraction ** (1.0 / power), fraction * distance / (power * speed)
