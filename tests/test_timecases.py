"""Tests of the reference solutions in timecases.py against independent calculations: scipy's
ODE integrators, scipy.special's Mathieu characteristic values, finite differences."""

import math

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import solve_ivp
from scipy.special import mathieu_a, mathieu_b

from timecases import (SwitchedField, TwoStageSource, beta_hill, beta_monodromy,
                       floquet_multiplier, hill_characteristic_values, ideal_trap_unit_potential,
                       mathieu_monodromy, qz_from_curvature, qz_ideal, secular_frequency_Hz,
                       stability_edge_q)
from tracer.species import species

C = constants.c
E = constants.e
ARGON = species("40Ar+").mass_kg          # periodictable's NIST mass


# --------------------------------------------------------------------------------------------
# A uniform field switched on


def integrate_switch(case, t_end):
    """z(t_end) - z(t0) and p(t_end) by scipy's DOP853 on dp/dt = q E(t), dz/dt = p / (gamma m)
    (p / m when not relativistic), from the switch through the end of the ramp."""
    m = case.mass_kg

    def rhs(t, y):
        gm = m * math.sqrt(1 + (y[1] / (m * C)) ** 2) if case.relativistic else m
        return [y[1] / gm, case.charge_C * float(case.field(t))]

    y = [0.0, 0.0]
    t = case.switch_s
    for b in (min(case.switch_s + case.ramp_s, t_end), t_end):
        if b > t:
            sol = solve_ivp(rhs, (t, b), y, method="DOP853", rtol=1e-13, atol=[1e-20, 1e-40])
            y, t = sol.y[:, -1], b
    return y


@pytest.mark.parametrize("ramp_s", [0.0, 0.8e-9])
@pytest.mark.parametrize("kind, relativistic, t_after", [
    ("e-", True, 3e-9), ("e-", False, 3e-9), ("40Ar+", True, 300e-9), ("40Ar+", False, 300e-9)])
def test_switched_field_against_the_equations_of_motion(kind, relativistic, t_after, ramp_s):
    """Distance, momentum and arrival time of an ion at rest when a 1 MV/m field is switched on
    (a step, or a 0.8 ns ramp) equal scipy's DOP853 integration of dp/dt = qE, dz/dt = v to 1e-10;
    the electron reaches 0.2 MeV-class energies, so its relativistic and Newtonian paths differ."""
    m, q = (constants.m_e, -E) if kind == "e-" else (ARGON, E)
    field = 1e6 * np.sign(q)
    case = SwitchedField(field, 2e-9, ramp_s, m, q, relativistic)
    for t in (2e-9 + 0.5 * ramp_s, 2e-9 + ramp_s, 2e-9 + 0.1 * t_after, 2e-9 + t_after):
        if t == 2e-9:
            continue
        z, p = integrate_switch(case, t)
        assert float(case.distance(t)) == pytest.approx(z, rel=1e-10, abs=0)
        assert float(case.momentum(t)) == pytest.approx(p, rel=1e-12, abs=0)
        assert case.time_at(float(case.distance(t))) == pytest.approx(t, rel=1e-12, abs=0)
    assert float(case.distance(1.9e-9)) == 0.0 and float(case.energy_eV(1.9e-9)) == 0.0


def test_switched_field_energy_and_limits():
    """KE = q E z after a step (work-energy theorem); relativistic and Newtonian agree for a slow
    argon ion to its KE / mc^2, and differ for an electron by far more."""
    step = SwitchedField(1e6, 0.0, 0.0, ARGON, E)
    t = 1e-6
    assert float(step.energy_eV(t)) == pytest.approx(1e6 * float(step.distance(t)), rel=1e-13)
    newton = SwitchedField(1e6, 0.0, 0.0, ARGON, E, relativistic=False)
    ke = float(step.energy_eV(t))
    rel = abs(float(newton.distance(t)) / float(step.distance(t)) - 1)
    assert 0.1 * ke * E / (ARGON * C * C) < rel < 10 * ke * E / (ARGON * C * C)
    el = SwitchedField(-1e6, 0.0, 0.0, constants.m_e, -E)
    el_n = SwitchedField(-1e6, 0.0, 0.0, constants.m_e, -E, relativistic=False)
    assert float(el_n.distance(3e-9)) > 1.2 * float(el.distance(3e-9))
    with pytest.raises(ValueError):
        SwitchedField(1e6, 0.0, 0.0, constants.m_e, -E)


@pytest.mark.parametrize("ramp_s", [0.0, 50e-9])
def test_switched_field_ledger_terms_sum_to_the_energy(ramp_s):
    """-q [V1 - V0] + q ∫ dV/dt dt + q jump equals the kinetic energy gained (the ledger identity
    of tracer.ledger) for an ion 3 mm from the potential's zero, during and after the ramp; in a
    step the jump term carries -q E z0, in a ramp the dV/dt term does."""
    case = SwitchedField(2e5, 100e-9, ramp_s, ARGON, E)
    for t in (100e-9 + 0.4 * max(ramp_s, 1e-9), 100e-9 + ramp_s, 400e-9):
        pot, work, jump = case.ledger_terms_eV(3e-3, t)
        assert pot + work + jump == pytest.approx(float(case.energy_eV(t)), rel=1e-10, abs=0)
        assert (jump != 0.0) == (ramp_s == 0.0) and (work != 0.0) == (ramp_s > 0.0)


# --------------------------------------------------------------------------------------------
# The Mathieu equation and the quadrupole trap


@pytest.mark.parametrize("q", [0.3, 0.7, 1.5])
def test_hill_matrix_gives_scipy_characteristic_values(q):
    """At beta = 0 and 1 the Hill matrix's eigenvalues are scipy.special's mathieu_a and mathieu_b
    of the even and odd orders (library: scipy.special), and the monodromy matrix of a = a_0, b_1
    has trace +2 and -2 (periodic solutions of period pi and 2 pi; McLachlan 1947)."""
    even = hill_characteristic_values(0.0, q)
    assert even[:5] == pytest.approx(sorted([mathieu_a(0, q), mathieu_b(2, q), mathieu_a(2, q),
                                             mathieu_b(4, q), mathieu_a(4, q)]), abs=1e-10)
    odd = hill_characteristic_values(1.0, q)
    assert odd[:4] == pytest.approx(sorted([mathieu_b(1, q), mathieu_a(1, q), mathieu_b(3, q),
                                            mathieu_a(3, q)]), abs=1e-10)
    assert np.trace(mathieu_monodromy(mathieu_a(0, q), q)) == pytest.approx(2.0, abs=1e-9)
    assert np.trace(mathieu_monodromy(mathieu_b(1, q), q)) == pytest.approx(-2.0, abs=1e-9)
    assert np.linalg.det(mathieu_monodromy(0.1, q)) == pytest.approx(1.0, abs=1e-11)  # Liouville


@pytest.mark.parametrize("q", [0.1, 0.3, 0.5, 0.6, 0.85])
def test_beta_from_the_monodromy_matrix_and_from_hill(q):
    """beta at a = 0 from the monodromy matrix (Floquet) and from Hill's matrix (its
    characteristic values tied to scipy.special's above) agree to 1e-10; Dehmelt's small-q limit
    q / sqrt 2 (Dehmelt 1967) is 1.8 % low at q = 0.3 and 5.4 % at 0.5 (the trade quotes about 2 %
    and 5 %)."""
    b = beta_monodromy(0.0, q)
    assert b == pytest.approx(beta_hill(0.0, q), abs=1e-10)
    low = (b - q / math.sqrt(2)) / b
    assert 0 < low < 0.003 if q == 0.1 else low > 0
    if q == 0.3:
        assert 0.015 < low < 0.021
    if q == 0.5:
        assert 0.05 < low < 0.06


def test_stability_edge_at_a_zero():
    """The first stability region at a = 0 ends where b_1(q) = 0: q = 0.908046 (scipy.special's
    mathieu_b; the trade's 0.908, McLachlan 1947, Paul 1990, from memory); there beta reaches 1
    (tr M = -2); at 0.99 of the edge an ion is stable (multiplier 1), at 1.005 it grows by about
    1.22 per RF period."""
    edge = stability_edge_q()
    assert edge == pytest.approx(0.908046, abs=1e-6)
    assert np.trace(mathieu_monodromy(0.0, edge)) == pytest.approx(-2.0, abs=1e-8)
    assert floquet_multiplier(0.0, 0.99 * edge) == pytest.approx(1.0, abs=1e-8)
    assert 1.15 < floquet_multiplier(0.0, 1.005 * edge) < 1.3
    with pytest.raises(ValueError, match="unstable"):
        beta_monodromy(0.0, 1.005 * edge)


def test_ideal_trap_potential_and_its_qz():
    """The ideal trap's unit potential solves Laplace's equation in axial symmetry (phi_rr +
    phi_r / r + phi_zz = 0), is 1 on the ring and 0 on the caps; its curvature at the centre,
    by central differences, is -4 / (r0^2 + 2 z0^2), so q_z from the curvature equals the ideal
    formula 8 q V / [m (r0^2 + 2 z0^2) Omega^2] (Paul 1990)."""
    r0, z0 = 10e-3, 7.07e-3
    h = 1e-4
    r, z = 3e-3, 1e-3
    lap = ((ideal_trap_unit_potential(r + h, z, r0, z0) - 2 * ideal_trap_unit_potential(r, z, r0, z0)
            + ideal_trap_unit_potential(r - h, z, r0, z0)) / h**2
           + (ideal_trap_unit_potential(r + h, z, r0, z0)
              - ideal_trap_unit_potential(r - h, z, r0, z0)) / (2 * h * r)
           + (ideal_trap_unit_potential(r, z + h, r0, z0) - 2 * ideal_trap_unit_potential(r, z, r0, z0)
              + ideal_trap_unit_potential(r, z - h, r0, z0)) / h**2)
    assert abs(lap) < 1e-6 * 4 / r0**2
    assert ideal_trap_unit_potential(r0, 0.0, r0, z0) == pytest.approx(1.0)
    assert ideal_trap_unit_potential(r, math.sqrt(z0**2 + r * r / 2), r0, z0) == pytest.approx(
        0.0, abs=1e-12)
    kappa = (ideal_trap_unit_potential(0.0, h, r0, z0) - 2 * ideal_trap_unit_potential(0.0, 0.0, r0, z0)
             + ideal_trap_unit_potential(0.0, -h, r0, z0)) / h**2
    assert kappa == pytest.approx(-4 / (r0**2 + 2 * z0**2), rel=1e-9)
    assert qz_from_curvature(kappa, 400.0, ARGON, E, 1e6) == pytest.approx(
        qz_ideal(400.0, ARGON, E, r0, z0, 1e6), rel=1e-9)


def test_ion_in_the_ideal_trap_follows_mathieu():
    """An argon ion on the axis of the ideal trap with the RF on the ring, integrated in seconds and
    metres by scipy's DOP853 (m z'' = q kappa V cos(Omega t) z): its monodromy over one RF period
    gives the beta of Mathieu's equation at the q_z of the formula, and its axial oscillation
    oscillates at the secular frequency beta Omega / 2 (Paul 1990): seen once per RF period
    (z_(n+1) + z_(n-1) = 2 cos(2 pi f_sec / f) z_n, fitted by least squares over 200 periods) to
    1e-9, and counted by its zero crossings to 1e-3 (the micromotion shifts each crossing a
    little)."""
    r0, z0, f = 10e-3, 7.07e-3, 1e6
    kappa = -4 / (r0**2 + 2 * z0**2)
    volts = 0.3 / qz_ideal(1.0, ARGON, E, r0, z0, f)
    omega = 2 * math.pi * f

    def rhs(t, y):
        a = E * kappa * volts * math.cos(omega * t) / ARGON
        return [y[1], a * y[0], y[3], a * y[2]]

    sol = solve_ivp(rhs, (0.0, 1 / f), [1.0, 0.0, 0.0, 1.0], method="DOP853", rtol=1e-12,
                    atol=1e-14)
    tr = sol.y[0, -1] + sol.y[3, -1]
    beta = beta_monodromy(0.0, 0.3)
    assert math.acos(tr / 2) / math.pi == pytest.approx(beta, abs=1e-9)
    periods = 200
    long = solve_ivp(rhs, (0.0, periods / f), [1e-3, 0.0, 0.0, 0.0], method="DOP853",
                     rtol=1e-11, atol=1e-16, dense_output=True)
    strobe = long.sol(np.arange(periods + 1) / f)[0]
    mid = strobe[1:-1]
    cos_phase = mid @ (strobe[2:] + strobe[:-2]) / (2 * mid @ mid)
    assert math.acos(cos_phase) / (2 * math.pi) * f == pytest.approx(
        secular_frequency_Hz(beta, f), rel=1e-9)
    t = np.linspace(0.0, periods / f, 200 * periods + 1)
    z = long.sol(t)[0]
    cross = np.flatnonzero(np.sign(z[1:]) != np.sign(z[:-1]))
    times = t[cross] - z[cross] * (t[cross + 1] - t[cross]) / (z[cross + 1] - z[cross])
    f_sec = (len(times) - 1) / (2 * (times[-1] - times[0]))
    assert f_sec == pytest.approx(secular_frequency_Hz(beta, f), rel=1e-3)


# --------------------------------------------------------------------------------------------
# The two-stage source of Wiley & McLaren


SOURCE = TwoStageSource(source_m=5e-3, accel_m=10e-3, drift_m=1.0, source_V_per_m=2e3 / 5e-3,
                        accel_V_per_m=18e3 / 10e-3, mass_kg=1000 * constants.atomic_mass
                        - constants.m_e, charge_C=E)
"""An illustrative delayed-extraction source: 2 kV over 5 mm, 18 kV over 10 mm, a 1 m drift,
an ion of 1000 u."""


def integrate_source(src, z0, v0, delay):
    """The flight time by scipy's DOP853 through the four stages (free flight until the delay,
    source, acceleration, drift), each stopped by a terminal event at its far plane."""
    a_s = src.charge_C * src.source_V_per_m / src.mass_kg
    a_d = src.charge_C * src.accel_V_per_m / src.mass_kg
    t, y = 0.0, [z0, v0]
    if delay > 0.0:
        y = [z0 + v0 * delay, v0]
        t = delay
    for a, plane in ((a_s, src.source_m), (a_d, src.source_m + src.accel_m),
                     (0.0, src.source_m + src.accel_m + src.drift_m)):
        def reach(_, yy, plane=plane):
            return yy[0] - plane
        reach.terminal = True
        sol = solve_ivp(lambda _, yy, a=a: [yy[1], a], (t, t + 1e-3), y, method="DOP853",
                        rtol=1e-13, atol=[1e-18, 1e-12], events=reach)
        t, y = sol.t_events[0][0], sol.y_events[0][0]
    return t


@pytest.mark.parametrize("z0, v0, delay", [(0.5e-3, 0.0, 0.0), (1e-3, 300.0, 0.0),
                                           (0.5e-3, -200.0, 150e-9), (2e-3, 600.0, 400e-9)])
def test_flight_time_against_the_equations_of_motion(z0, v0, delay):
    """T(z0, v0) in closed form (Wiley & McLaren 1955) equals scipy's integration to 1e-10, and
    its closed-form dT/dv0 a central difference (step 1 m/s) to 1e-6."""
    assert SOURCE.flight_time(z0, v0, delay) == pytest.approx(integrate_source(SOURCE, z0, v0, delay),
                                                              rel=1e-10, abs=0)
    fd = (SOURCE.flight_time(z0, v0 + 1.0, delay) - SOURCE.flight_time(z0, v0 - 1.0, delay)) / 2.0
    assert SOURCE.dT_dv0(z0, v0, delay) == pytest.approx(fd, rel=1e-6, abs=0)


@pytest.mark.parametrize("v_mean", [0.0, 400.0])
def test_focusing_delay_makes_flight_time_stationary_in_v0(v_mean):
    """At the focusing delay (time-lag focusing, Wiley & McLaren 1955) the integrated flight time
    is stationary in v0 about v_mean: the first-order slope from a central difference of scipy's
    integration (+-50 m/s) is below 1e-3 of its value without a delay, and the arrival spread of
    +-50 m/s is second order (below 1 % of the spread without a delay)."""
    z0, dv = 0.5e-3, 50.0
    delay = SOURCE.focusing_delay(z0, v_mean)
    assert SOURCE.dT_dv0(z0, v_mean, delay) == pytest.approx(0.0, abs=1e-12 * abs(
        SOURCE.dT_dv0(z0, v_mean, 0.0)))
    hi, lo = (integrate_source(SOURCE, z0, v_mean + s * dv, delay) for s in (1, -1))
    hi0, lo0 = (integrate_source(SOURCE, z0, v_mean + s * dv, 0.0) for s in (1, -1))
    assert abs(hi - lo) < 1e-3 * abs(hi0 - lo0)
    mid = integrate_source(SOURCE, z0, v_mean, delay)
    assert max(abs(hi - mid), abs(lo - mid)) < 1e-2 * abs(hi0 - lo0)


def test_focusing_delay_scales_with_the_root_of_the_mass():
    """All accelerations go as q / m, so the delay at v0 = 0 scales as sqrt(m / q) exactly (Wiley &
    McLaren 1955); a source with too short a drift has none."""
    import dataclasses

    heavy = dataclasses.replace(SOURCE, mass_kg=4 * SOURCE.mass_kg)
    assert heavy.focusing_delay(0.5e-3) == pytest.approx(2 * SOURCE.focusing_delay(0.5e-3),
                                                         rel=1e-14, abs=0)
    with pytest.raises(ValueError, match="no focusing delay"):
        dataclasses.replace(SOURCE, drift_m=1e-3).focusing_delay(0.5e-3)
