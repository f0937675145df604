"""Emission laws against the published formulas and recalled values."""

import math

import numpy as np
import pytest
from scipy import constants, integrate

from tracer import emission


def test_richardson_constant_from_scipy_constants():
    # A0 = 4 pi m e k^2 / h^3 (Dushman 1923); about 1.20173e6 A m^-2 K^-2 (from memory)
    a0 = 4 * math.pi * constants.m_e * constants.e * constants.k**2 / constants.h**3
    assert emission.RICHARDSON_A0 == pytest.approx(a0, rel=1e-15)
    assert emission.RICHARDSON_A0 == pytest.approx(1.20173e6, rel=1e-4)


def test_richardson_plot_slope_is_the_work_function():
    # ln(J / T^2) against 1 / T is a line of slope -W / k (Richardson 1901; Dushman 1923)
    t = np.array([1800.0, 2000.0, 2200.0, 2400.0])
    w = 4.54   # tungsten, eV (from memory)
    j = emission.richardson_dushman(t, w)
    slope, intercept = np.polyfit(1 / t, np.log(j / t**2), 1)
    assert slope == pytest.approx(-w * constants.e / constants.k, rel=1e-10)
    assert math.exp(intercept) == pytest.approx(1.20173e6, rel=1e-4)   # from memory


def test_schottky_lowering():
    # dW = sqrt(e^3 E / (4 pi eps0)): 3.79e-5 sqrt(E / (V/m)) eV, 0.379 eV at 1e8 V/m (from memory)
    assert emission.schottky_lowering_eV(1e8) == pytest.approx(0.3795, rel=1e-3)
    assert emission.schottky_lowering_eV(-1e8) == 0.0   # a retarding field does not lower it


def test_child_langmuir_constant():
    # (4 eps0 / 9) sqrt(2 e / m_e) = 2.334e-6 A V^-1.5 (Child 1911; Langmuir 1913; from memory)
    j = emission.child_langmuir(1.0, 1.0, constants.m_e, -constants.e)
    assert j == pytest.approx(2.334e-6, rel=1e-3)
    # J ~ V^1.5 / d^2 (Child 1911)
    assert emission.child_langmuir(400.0, 2e-3, constants.m_e, -constants.e) == pytest.approx(
        j * 400.0**1.5 / 4e-6, rel=1e-12)
    assert emission.child_langmuir(-5.0, 1e-3, constants.m_e, -constants.e) == 0.0


def test_transition_between_temperature_and_space_charge_limits():
    volts = np.array([1.0, 100.0, 1e4])
    d = 1e-3
    limit = emission.child_langmuir(volts, d, constants.m_e, -constants.e)
    hot = emission.richardson_dushman(2000.0, 4.0)
    j, limited = emission.emission_density(volts, d, constants.m_e, -constants.e,
                                           temperature_K=2000.0, work_function_eV=4.0)
    np.testing.assert_allclose(j, np.minimum(limit, hot), rtol=1e-14)
    assert list(limited) == list(limit <= hot)
    assert limited[0] and not limited[-1]      # this cathode covers both regimes


@pytest.mark.parametrize("alpha", [1.0, 7.0 / 6.0, 4.0 / 3.0])
def test_layer_transit_time(alpha):
    # t_d = integral of dx / v(x) with v = v_d (x / d)^(alpha / 2) (energy conservation); for the
    # Child profile 3 d / v_d (Langmuir 1913), for a uniform field 2 d / v_d (common practice)
    d, v_d = 2e-4, 3e6
    x, t = emission.layer_transit(d, v_d, alpha, 7)

    def flight(xk):   # the integrable singularity x^(-alpha/2) handled by quad's algebraic weight
        value, _ = integrate.quad(lambda s: d ** (alpha / 2) / v_d, 0.0, xk, weight="alg",
                                  wvar=(-alpha / 2, 0.0))
        return value

    assert t[-1] == pytest.approx(flight(d), rel=1e-8, abs=0)
    assert x[0] == 0.0 and x[-1] == pytest.approx(d, rel=1e-14, abs=0)
    # each point obeys the same law between its own distance and the surface
    np.testing.assert_allclose(t[1:], [flight(xk) for xk in x[1:]], rtol=1e-8)
    if alpha == 4.0 / 3.0:
        assert t[-1] == pytest.approx(3 * d / v_d, rel=1e-12, abs=0)


@pytest.mark.parametrize("shape", ["sphere", "cylinder"])
@pytest.mark.parametrize("u", [-0.05, 0.05])
def test_layer_transit_on_curved_cathodes(shape, u):
    # the layer below a ray's start on a cathode of radius a (u = d / a, negative concave) against
    # the exact potential of concentric spheres (Langmuir & Blodgett 1924, V ~ alpha^(4/3)) and
    # coaxial cylinders (Langmuir & Blodgett 1923, V ~ (r beta^2)^(2/3)), their equations
    # integrated (tests/diodes.py): times along the layer within 2e-4 (the curvature factor's
    # remainder is O(u^3)); the planar Child profile is off at first order in u
    from diodes import alpha, beta

    a = 1e-3
    d, v_d = abs(u) * a, 3e6
    sign = math.copysign(1.0, u)

    def potential(x):      # V(x) / V(d) from the surface along the normal
        def law(xk):
            g = math.log1p(sign * xk / a)
            return abs(alpha(g)) ** (4 / 3) if shape == "sphere" else ((1 + sign * xk / a) * beta(g) ** 2) ** (2 / 3)
        return law(x) / law(d)

    def flight(xk):        # integral of dx / v, v = v_d sqrt(V / V_d); x^(-2/3) taken by quad's weight
        def smooth(s):
            s = max(s, 1e-9 * d)
            return (s / d) ** (2 / 3) / math.sqrt(potential(s)) * d ** (2 / 3) / v_d

        value, _ = integrate.quad(smooth, 0.0, xk, weight="alg", wvar=(-2 / 3, 0.0))
        return value

    curvature = (2 * sign / a, 1 / a**2) if shape == "sphere" else (sign / a, 0.0)
    x, t = emission.layer_transit(d, v_d, 4 / 3, 9, curvature)
    assert x[0] == 0.0 and x[-1] == pytest.approx(d, rel=1e-12)
    np.testing.assert_allclose(t[1:], [flight(xk) for xk in x[1:]], rtol=2e-4)
    planar = emission.layer_transit(d, v_d, 4 / 3, 9)[1][-1]
    assert abs(planar / flight(d) - 1) > 0.005
