"""Reference solutions for fields that change in time, for the tests of the ray kernel.

Each helper gives, in closed form or from a named method, what a traced ion must do:

* :class:`SwitchedField`: a uniform field switched on at t0 (a step, or a straight ramp), ions at
  rest before the switch: momentum, position, time of arrival and kinetic energy, relativistic or
  not, and the terms of the energy ledger in time;
* the Mathieu equation u'' + (a - 2q cos 2 xi) u = 0: the characteristic exponent beta from the
  monodromy matrix (Floquet theory; McLachlan 1947, "Theory and Application of Mathieu
  Functions", ch. IV) and from Hill's method, checked against scipy.special's characteristic
  values; the edge of the first stability region at a = 0; the Floquet multiplier of an unstable
  ion;
* :class:`TwoStageSource`: the time of flight of the two-stage source of Wiley & McLaren (1955,
  Rev. Sci. Instrum. 26, 1150) with a delayed extraction pulse, its derivative in the initial
  velocity, and the delay that makes that derivative zero (time-lag focusing);
* the quadrupole ion trap's q_z, from the ideal hyperbolic electrodes or from a map's curvature.

All in SI units; energies in eV where the name says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import constants
from scipy.integrate import quad, solve_ivp
from scipy.linalg import eigvalsh_tridiagonal
from scipy.optimize import brentq
from scipy.special import hyp2f1, mathieu_b

C = constants.c


# --------------------------------------------------------------------------------------------
# A uniform field switched on


@dataclass(frozen=True)
class SwitchedField:
    """A uniform field E(t) along +z, zero before ``switch_s``, rising in a straight line over
    ``ramp_s`` (0: a step) to ``field_V_per_m``; the ion is at rest before the switch.

    The potential is V(z, t) = -E(t) z. The momentum is the impulse p = q ∫ E dt (Newton's second
    law, also in relativity: dp/dt = qE); the path follows from v = p c / sqrt((m c)^2 + p^2):

    * step: z = (sqrt((m c^2)^2 + (p c)^2) - m c^2) / (q E), the work-energy theorem for a constant
      force (hyperbolic motion; any relativity text, e.g. Jackson 1999 sec. 12.3, from memory);
    * ramp, p = alpha s^2 with s = t - t0 and alpha = qE / (2 ramp): z = (alpha / m) (s^3 / 3)
      2F1(1/2, 3/4; 7/4; -(alpha s^2 / (m c))^2), the binomial series of
      (1 + (p / m c)^2)^(-1/2) integrated term by term (a Gauss hypergeometric series, evaluated
      by scipy.special.hyp2f1); after the ramp the constant-force formula from the ramp's end.

    With ``relativistic=False`` the same with p / m for the velocity.
    """

    field_V_per_m: float
    switch_s: float
    ramp_s: float
    mass_kg: float
    charge_C: float
    relativistic: bool = True

    def __post_init__(self):
        if not self.charge_C * self.field_V_per_m > 0.0:
            raise ValueError("the field must push the charge towards +z (q E > 0)")

    @property
    def force_N(self):
        """qE after the switch, N."""
        return self.charge_C * self.field_V_per_m

    def field(self, t):
        """E(t), V/m."""
        s = np.asarray(t, dtype=float) - self.switch_s
        if self.ramp_s == 0.0:
            return np.where(s >= 0.0, self.field_V_per_m, 0.0)
        return self.field_V_per_m * np.clip(s / self.ramp_s, 0.0, 1.0)

    def momentum(self, t):
        """p_z(t), kg m/s."""
        s = np.maximum(np.asarray(t, dtype=float) - self.switch_s, 0.0)
        tau = self.ramp_s
        if tau == 0.0:
            return self.force_N * s
        return self.force_N * np.where(s < tau, s * s / (2.0 * tau), s - tau / 2.0)

    def _kinetic_J(self, p):
        """Kinetic energy of momentum p, J: (gamma - 1) m c^2 = (p c)^2 / (E_total + m c^2),
        written without cancellation; p^2 / 2m when not relativistic."""
        if not self.relativistic:
            return p * p / (2.0 * self.mass_kg)
        mc2 = self.mass_kg * C * C
        return (p * C) ** 2 / (np.sqrt(mc2 * mc2 + (p * C) ** 2) + mc2)

    def _momentum_of(self, kinetic_J):
        """The momentum of a kinetic energy (the inverse of :meth:`_kinetic_J`)."""
        if not self.relativistic:
            return math.sqrt(2.0 * self.mass_kg * kinetic_J)
        return math.sqrt(kinetic_J * (kinetic_J + 2.0 * self.mass_kg * C * C)) / C

    def energy_eV(self, t):
        """Kinetic energy at t, eV."""
        return self._kinetic_J(self.momentum(t)) / constants.e

    def _ramp_distance(self, s):
        """Distance covered s seconds after the switch, s within the ramp."""
        alpha = self.force_N / (2.0 * self.ramp_s)
        if not self.relativistic:
            return alpha * s**3 / (3.0 * self.mass_kg)
        x = -(alpha * s * s / (self.mass_kg * C)) ** 2
        return alpha / self.mass_kg * s**3 / 3.0 * hyp2f1(0.5, 0.75, 1.75, x)

    def _ramp_end(self):
        """Distance covered during the ramp and the momentum at its end (0, 0 for a step)."""
        if self.ramp_s == 0.0:
            return 0.0, 0.0
        return float(self._ramp_distance(self.ramp_s)), self.force_N * self.ramp_s / 2.0

    def distance(self, t):
        """z(t) - z(t0): distance covered since the switch, m. After the ramp a constant force
        adds to the kinetic energy F dz (the work-energy theorem)."""
        s = np.maximum(np.asarray(t, dtype=float) - self.switch_s, 0.0)
        z_tau, p_tau = self._ramp_end()
        after = z_tau + (self._kinetic_J(self.momentum(t)) - self._kinetic_J(p_tau)) / self.force_N
        if self.ramp_s == 0.0:
            return after
        return np.where(s < self.ramp_s, self._ramp_distance(np.minimum(s, self.ramp_s)), after)

    def time_at(self, distance):
        """Time at which the ion has covered ``distance`` metres (> 0) since the switch, s; within
        the ramp the root of the closed-form distance (scipy's brentq)."""
        tau = self.ramp_s
        z_tau, p_tau = self._ramp_end()
        if tau > 0.0 and distance <= z_tau:
            return self.switch_s + brentq(lambda s: self._ramp_distance(s) - distance, 0.0, tau,
                                          xtol=1e-16 * tau, rtol=1e-15)
        p = self._momentum_of(self._kinetic_J(p_tau) + self.force_N * (distance - z_tau))
        return self.switch_s + p / self.force_N + tau / 2.0

    def ledger_terms_eV(self, z0, t):
        """The terms of the energy ledger in time for an ion at rest at z0 until the switch, from
        t_start < switch_s to t: ``(-q [V(z1, t) - V(z0, t_start)], q ∫ dV/dt dt, q jump)`` in eV,
        with dV/dt|_z = -E'(t) z integrated over the ramp by the closed form of z(t) (scipy's
        quad), and the jump q [V(z0, t0+) - V(z0, t0-)] = -q E z0 of a step. Their sum is the
        kinetic energy gained (``tracer.ledger`` docstring)."""
        q = self.charge_C / constants.e
        z1 = z0 + float(self.distance(t))
        potential = -q * (-float(self.field(t)) * z1 - 0.0)
        if self.ramp_s == 0.0:
            return potential, 0.0, (-q * self.field_V_per_m * z0 if t >= self.switch_s else 0.0)
        slope = self.field_V_per_m / self.ramp_s
        end = min(t, self.switch_s + self.ramp_s)
        if end <= self.switch_s:
            return potential, 0.0, 0.0
        work, _ = quad(lambda u: -slope * (z0 + float(self.distance(u))), self.switch_s, end,
                       epsabs=0.0, epsrel=1e-13, limit=200)
        return potential, q * work, 0.0


# --------------------------------------------------------------------------------------------
# The Mathieu equation


def mathieu_monodromy(a, q):
    """Monodromy matrix of u'' + (a - 2q cos 2 xi) u = 0 over one period, xi from 0 to pi: the
    solutions with (u, u') = (1, 0) and (0, 1) at 0 as columns, integrated with scipy's DOP853 at
    rtol 1e-13 (Floquet theory, McLachlan 1947 ch. IV)."""
    def rhs(xi, y):
        k = -(a - 2.0 * q * math.cos(2.0 * xi))
        return [y[1], k * y[0], y[3], k * y[2]]

    sol = solve_ivp(rhs, (0.0, math.pi), [1.0, 0.0, 0.0, 1.0], method="DOP853",
                    rtol=1e-13, atol=1e-15)
    y = sol.y[:, -1]
    return np.array([[y[0], y[2]], [y[1], y[3]]])


def beta_monodromy(a, q):
    """Characteristic exponent beta in [0, 1] of a stable solution, from cos(pi beta) = tr(M) / 2
    (McLachlan 1947); raises ValueError outside a stability region (|tr M| > 2)."""
    half = np.trace(mathieu_monodromy(a, q)) / 2.0
    if abs(half) > 1.0:
        raise ValueError(f"a = {a}, q = {q} is unstable: tr(M)/2 = {half}")
    return math.acos(half) / math.pi


def floquet_multiplier(a, q):
    """Largest |eigenvalue| of the monodromy matrix: the growth per period xi -> xi + pi (one RF
    period) of an unstable solution, 1 for a stable one."""
    return float(np.abs(np.linalg.eigvals(mathieu_monodromy(a, q))).max())


def hill_characteristic_values(beta, q, n=40):
    """Eigenvalues of Hill's matrix: with u = sum_n c_n exp(i (beta + 2n) xi), the Mathieu
    equation is a c_n = (beta + 2n)^2 c_n + q (c_(n-1) + c_(n+1)), a symmetric tridiagonal
    eigenproblem for a (n from -n to n; McLachlan 1947 ch. IV, from memory). At beta = 0 and 1 its
    eigenvalues are scipy.special's mathieu_a / mathieu_b of the integer orders of that parity."""
    k = np.arange(-n, n + 1)
    return eigvalsh_tridiagonal((beta + 2.0 * k) ** 2, np.full(2 * n, float(q)))


def beta_hill(a, q):
    """Characteristic exponent beta in (0, 1) of the first stability region: the beta whose lowest
    Hill characteristic value equals a (that value rises from a_0(q) at beta = 0 to b_1(q) at
    beta = 1), found with scipy's brentq."""
    return brentq(lambda b: hill_characteristic_values(b, q)[0] - a, 0.0, 1.0, xtol=1e-15,
                  rtol=1e-15)


def stability_edge_q(a=0.0):
    """The q at which the first stability region ends for this a: b_1(q) = a, with scipy.special's
    mathieu_b (for a = 0 the trap's q_z limit, about 0.908; McLachlan 1947, Paul 1990)."""
    return brentq(lambda q: mathieu_b(1, q) - a, 0.1, 2.0, xtol=1e-14)


def secular_frequency_Hz(beta, rf_frequency_Hz):
    """The secular (slow) frequency of an ion in an RF field: beta Omega / 2 (Paul 1990)."""
    return beta * rf_frequency_Hz / 2.0


# --------------------------------------------------------------------------------------------
# The quadrupole ion trap


def qz_ideal(voltage_V, mass_kg, charge_C, r0_m, z0_m, rf_frequency_Hz):
    """q_z = 8 q V / [m (r0^2 + 2 z0^2) Omega^2] of the ideal hyperbolic trap, V the RF amplitude
    (zero to peak) between ring and end caps (Paul 1990; March 1997)."""
    omega = 2.0 * math.pi * rf_frequency_Hz
    return 8.0 * abs(charge_C) * voltage_V / (mass_kg * (r0_m**2 + 2.0 * z0_m**2) * omega**2)


def qz_from_curvature(kappa_per_m2, voltage_V, mass_kg, charge_C, rf_frequency_Hz):
    """q_z = 2 q |kappa| V / (m Omega^2) from the curvature kappa = d2phi/dz2 at the trap centre of
    the unit map of the driven electrode(s): the axial equation m z'' = -q kappa V cos(Omega t) z
    is Mathieu's with xi = Omega t / 2 (for the ideal trap kappa = -4 / (r0^2 + 2 z0^2))."""
    omega = 2.0 * math.pi * rf_frequency_Hz
    return 2.0 * abs(charge_C * kappa_per_m2) * voltage_V / (mass_kg * omega**2)


def ideal_trap_unit_potential(r, z, r0_m, z0_m):
    """Potential per volt of the ideal trap, ring at 1 V and end caps at 0 V:
    (r^2 - 2 z^2 + 2 z0^2) / (r0^2 + 2 z0^2), 1 on the ring r^2 - 2z^2 = r0^2 and 0 on the caps
    2 z^2 - r^2 = 2 z0^2 (Paul 1990)."""
    return (r * r - 2.0 * z * z + 2.0 * z0_m**2) / (r0_m**2 + 2.0 * z0_m**2)


# --------------------------------------------------------------------------------------------
# The two-stage source of Wiley & McLaren


@dataclass(frozen=True)
class TwoStageSource:
    """A two-stage source (Wiley & McLaren 1955): a source region of length ``source_m`` from the
    back plate (z = 0) to the first grid, field ``source_V_per_m`` once extraction is on; an
    acceleration region of ``accel_m`` with ``accel_V_per_m``; a field-free drift of ``drift_m``
    to the detector. Non-relativistic.

    Delayed extraction: the ions start at t = 0 at z0 with velocity v0 in a field-free source;
    at t = delay the source field is switched on (a step), the acceleration field is always on.
    """

    source_m: float
    accel_m: float
    drift_m: float
    source_V_per_m: float
    accel_V_per_m: float
    mass_kg: float
    charge_C: float

    def _speeds(self, z0, v0, delay):
        a_s = self.charge_C * self.source_V_per_m / self.mass_kg
        a_d = self.charge_C * self.accel_V_per_m / self.mass_kg
        s = self.source_m - (z0 + v0 * delay)          # left to the first grid at the switch
        u1 = math.sqrt(v0 * v0 + 2.0 * a_s * s)
        u2 = math.sqrt(u1 * u1 + 2.0 * a_d * self.accel_m)
        return a_s, a_d, u1, u2

    def flight_time(self, z0, v0, delay=0.0):
        """T(z0, v0) from t = 0 to the detector: the delay, then the source (v0 t + a_s t^2 / 2 =
        s), the acceleration region and the drift (Wiley & McLaren 1955, eqs. for T_s, T_d, T_D
        in velocity form)."""
        a_s, a_d, u1, u2 = self._speeds(z0, v0, delay)
        return delay + (u1 - v0) / a_s + (u2 - u1) / a_d + self.drift_m / u2

    def dT_dv0(self, z0, v0, delay=0.0):
        """dT/dv0 in closed form: with g = v0 - a_s delay, du1/dv0 = g / u1 and du2/dv0 = g / u2,

            dT/dv0 = (g / u1 - 1) / a_s + g (1/u2 - 1/u1) / a_d - D g / u2^3."""
        a_s, a_d, u1, u2 = self._speeds(z0, v0, delay)
        g = v0 - a_s * delay
        return (g / u1 - 1.0) / a_s + g * (1.0 / u2 - 1.0 / u1) / a_d - self.drift_m * g / u2**3

    def focusing_delay(self, z0, v_mean=0.0):
        """The extraction delay that makes dT/dv0 = 0 at v0 = v_mean (time-lag focusing, Wiley &
        McLaren 1955): T(v0) = T(v_mean) + O((v0 - v_mean)^2).

        For v_mean = 0 the speeds u1, u2 do not depend on the delay and setting dT/dv0 = 0 gives

            delay = 1 / (a_s^2 K),   K = D / u2^3 - 1 / (a_s u1) - (1/u2 - 1/u1) / a_d,

        with u1 = sqrt(2 a_s (s - z0)), u2 = sqrt(u1^2 + 2 a_d d) of an ion at rest. For v_mean != 0
        the ions drift v_mean delay before the switch, and the delay is the first root of
        dT/dv0(v_mean; delay) = 0 (scipy's brentq)."""
        a_s, a_d, u1, u2 = self._speeds(z0, 0.0, 0.0)
        k = self.drift_m / u2**3 - 1.0 / (a_s * u1) - (1.0 / u2 - 1.0 / u1) / a_d
        if not k > 0.0:
            raise ValueError("no focusing delay: the drift is too short for this source")
        delay = 1.0 / (a_s * a_s * k)
        if v_mean == 0.0:
            return delay
        room = self.source_m - z0 if v_mean > 0.0 else z0     # before the ion reaches a plate
        while self.dT_dv0(z0, v_mean, delay) <= 0.0:           # bracket the first root
            delay *= 2.0
            if abs(v_mean) * delay > room:
                raise ValueError("no focusing delay before the ions reach a plate")
        return brentq(lambda d: self.dT_dv0(z0, v_mean, d), 0.0, delay, xtol=1e-18, rtol=1e-14)
