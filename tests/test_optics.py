"""Lens optics (tracer.optics, tracer.axial) against analytic lenses and directly traced rays.

Stand-in maps are built from exact solutions of Laplace's equation for tubes of
radius R joined with zero gaps (separation of variables in a cylinder), so these
tests do not depend on the field solver; the tests at the end use real solved
maps and the ray tracer.
"""

import math
from functools import cached_property
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import constants, special
from scipy.integrate import quad, solve_ivp
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

from tracer.axial import fit_axial
from tracer.optics import OpticsError, paraxial
from tracer.species import species

R = 0.01            # tube radius (m)
HALF = 6 * R        # stand-in maps span -HALF..HALF
OMEGA = 1.318       # tanh model of the two-tube lens (Harting & Read 1976)


# ---------------------------------------------------------------- analytic lenses

class Step:
    """The potential of two tubes of radius R at -1/2 and +1/2 meeting at z = 0 (zero gap).

    Separation of variables with a Fourier transform along z gives
    s(z, r) = (2/pi) int_0^inf sin(kz) I0(kr) / (k I0(kR)) dk  (s = +-1 on the walls),
    evaluated by composite Gauss-Legendre quadrature, with every z-derivative on the
    axis in closed form.  Its residue sum is the Bessel series of :func:`bessel_series`.
    """

    def __init__(self, radius):
        x, w = np.polynomial.legendre.leggauss(16)
        edges = np.linspace(0.0, 40.0 / radius, 51)
        a, b = edges[:-1, None], edges[1:, None]
        self.k = (0.5 * (b - a) * x + 0.5 * (a + b)).ravel()
        self.w = (0.5 * (b - a) * w).ravel() * (2.0 / np.pi)
        self.radius = radius
        self.decay = np.exp(-self.k * radius) / special.ive(0, self.k * radius)  # 1 / I0(kR)

    def axial(self, z, n):
        """The n-th z-derivative of s on the axis."""
        kz = np.multiply.outer(np.asarray(z, float), self.k)
        return (self.k ** (n - 1) * np.sin(kz + n * np.pi / 2) * self.decay) @ self.w

    def value(self, z, r):
        """s(z, r) for r < R."""
        kz = np.multiply.outer(np.asarray(z, float), self.k)
        kr = np.multiply.outer(np.asarray(r, float), self.k)
        ratio = (special.ive(0, kr) * np.exp(kr - self.k * self.radius)
                 / special.ive(0, self.k * self.radius))
        return (np.sin(kz) / self.k * ratio) @ self.w


def bessel_series(z, r, radius, terms=400):
    """The same step as a Bessel series, from separation of variables in r (scipy.special.jn_zeros):
    s = sign(z) [1 - 2 sum_n J0(j_n r/R) exp(-j_n |z|/R) / (j_n J1(j_n))].
    Harting & Read (1976) tabulate the lenses built from it."""
    j = special.jn_zeros(0, terms)
    z = np.asarray(z, float)
    t = (special.j0(np.multiply.outer(r, j) / radius)
         * np.exp(-np.multiply.outer(np.abs(z), j) / radius))
    return np.sign(z) * (1.0 - 2.0 * (t / (j * special.j1(j))).sum(-1))


class Tubes:
    """Tubes of radius R in a row, zero gaps: wall potential v_first, changing by dv at cuts."""

    def __init__(self, v_first, cuts, dv, radius=R):
        self.step = Step(radius)
        self.v_first = v_first
        self.jumps = list(zip(cuts, dv))

    def axial(self, z, n=0):
        """The n-th z-derivative of the potential on the axis (V/m^n)."""
        z = np.asarray(z, float)
        base = self.v_first + 0.5 * sum(d for _, d in self.jumps) if n == 0 else 0.0
        return base + sum(0.5 * d * self.step.axial(z - c, n) for c, d in self.jumps)

    def potential(self, z, r):
        z = np.asarray(z, float)
        return self.v_first + sum(0.5 * d * (1.0 + self.step.value(z - c, r))
                                  for c, d in self.jumps)

    @cached_property
    def table(self):
        """Axial derivatives 0..7 on a fine grid over -7R..10R, as one vector-valued cubic spline
        (for the references below, which evaluate them many times)."""
        z = np.linspace(-7 * R, 10 * R, 2001)
        return CubicSpline(z, np.stack([self.axial(z, k) for k in range(8)], axis=1))


class TanhLens:
    """V(z) = (V1+V2)/2 + (V2-V1)/2 tanh(omega z/R) (Harting & Read 1976), off the axis by the
    expansion V - r^2/4 V'' + r^4/64 V''''."""

    def __init__(self, v1, v2):
        self.v1, self.v2 = v1, v2

    def potential(self, z, r):
        t = np.tanh(OMEGA * np.asarray(z, float) / R)
        f1 = 1.0 - t * t
        k = OMEGA / R
        d2 = -2.0 * t * f1 * k ** 2
        d4 = 8.0 * t * f1 * (2.0 - 3.0 * t * t) * k ** 4
        v = 0.5 * (self.v1 + self.v2) + 0.5 * (self.v2 - self.v1) * t
        return v + 0.5 * (self.v2 - self.v1) * (-(r * r) / 4.0 * d2 + r ** 4 / 64.0 * d4)


def stand_in(potential, cells_per_radius=20, half=HALF):
    """A duck-typed potential map: ``potential(z, r)`` and a ``grid`` (PotentialMap's names)."""
    grid = SimpleNamespace(z0=-half, z1=half, hz=R / cells_per_radius, r0=0.0, r1=R,
                           symmetry="axial")
    return SimpleNamespace(potential=potential, grid=grid)


def tube_map(lens, cells_per_radius=20):
    return stand_in(lambda z, r: lens.axial(z) if np.all(r == 0) else lens.potential(z, r),
                    cells_per_radius)


# ------------------------------------------------------------- independent references

def accelerating(lens, sp, energy_eV, z0=-HALF):
    """Phi, Phi', Phi'' (exact) for the species entering at z0 with energy_eV."""
    q = abs(sp.charge_C)
    s = math.copysign(1.0, sp.charge_C)
    v0 = float(lens.axial(z0))

    def phi(z):
        d = lens.table(z)
        return energy_eV * constants.e / q - s * (d[0] - v0), -s * d[1], -s * d[2]
    return phi, q / (2 * sp.mass_kg * constants.c ** 2)


def direct_paraxial(phi, eps, y0, z0, z1):
    """solve_ivp (DOP853) of the paraxial equation
    r'' + gamma Phi'/(2 Phi*) r' + gamma Phi''/(4 Phi*) r = 0
    (Hawkes & Kasper 1989) with the exact axial potential; returns (r, r') at z1."""
    def rhs(z, y):
        f, f1, f2 = (float(v) for v in phi(z))
        ps, gam = f * (1 + eps * f), 1 + 2 * eps * f
        return [y[1], -gam * f1 / (2 * ps) * y[1] - gam * f2 / (4 * ps) * y[0]]
    sol = solve_ivp(rhs, (z0, z1), y0, method="DOP853", rtol=1e-11, atol=1e-14,
                    max_step=abs(z1 - z0) / 300)
    return sol.y[:, -1]


def near_axis_field(lens, z, r):
    """(E_z, E_r) of a Tubes lens near the axis from its axial derivatives and the series
    V = sum_m (-1)^m (r/2)^(2m) V^(2m) / (m!)^2 (Laplace's equation), to r^7."""
    d = lens.table(z)
    x = (r / 2.0) ** 2
    ez = -(d[1] - x * d[3] + x * x / 4.0 * d[5] - x ** 3 / 36.0 * d[7])
    er = (r / 2.0) * (d[2] - x / 2.0 * d[4] + x * x / 12.0 * d[6])
    return ez, er


def trace_ray(lens, sp, energy_eV, r0, slope0, z0, z1):
    """A relativistic ray in the meridional plane, dp/dt = qE (common practice), with z as the
    variable; returns (r, dr/dz) at z1."""
    m, q, c = sp.mass_kg, sp.charge_C, constants.c
    t = energy_eV * constants.e
    p0 = math.sqrt(t * t + 2 * t * m * c * c) / c

    def rhs(z, y):
        r, pr, pz = y
        ez, er = near_axis_field(lens, z, r)
        f = q * math.sqrt(m * m + (pr * pr + pz * pz) * (p0 / c) ** 2) / (pz * p0 * p0)
        return [pr / pz, f * er, f * ez]
    n = 1.0 / math.sqrt(1.0 + slope0 ** 2)
    sol = solve_ivp(rhs, (z0, z1), [r0, slope0 * n, n], method="DOP853", rtol=1e-12, atol=1e-16,
                    max_step=(z1 - z0) / 200)
    r, pr, pz = sol.y[:, -1]
    return r, pr / pz


def scherzer_cs(phi, u0, z0, z1):
    """Scherzer's integral for Cs (nonrelativistic, Hawkes & Kasper 1989), image side:
    Cs = 1/(16 sqrt(Phi_i) u'_i^4) int sqrt(Phi) [(5/4 (Phi''/Phi)^2 + 5/24 (Phi'/Phi)^4) u^4
    + 14/3 (Phi'/Phi)^3 u^3 u' - 3/2 (Phi'/Phi)^2 u^2 u'^2] dz, u the ray through the axial
    object point (initial state u0)."""
    def rhs(z, y):
        f, f1, f2 = (float(v) for v in phi(z))
        u, p = y[0], y[1]
        a, b = f1 / f, f2 / f
        s = math.sqrt(f) * ((1.25 * b * b + 5 / 24 * a ** 4) * u ** 4 + 14 / 3 * a ** 3 * u ** 3 * p
                            - 1.5 * a * a * u * u * p * p)
        return [p, -a / 2 * p - b / 4 * u, s]
    sol = solve_ivp(rhs, (z0, z1), [*u0, 0.0], method="DOP853", rtol=1e-11, atol=1e-16,
                    max_step=(z1 - z0) / 300)
    u, p, integral = sol.y[:, -1]
    return integral / (16 * math.sqrt(float(phi(z1)[0])) * p ** 4)


PROTON = species("p+")
ELECTRON = species("e-")
ACCEL = Tubes(0.0, [0.0], [-9000.0])        # protons 1 keV -> 10 keV: ratio 10
DECEL = Tubes(0.0, [0.0], [9000.0])         # protons 10 keV -> 1 keV


# ------------------------------------------------------------------------- tests

def test_step_integral_equals_bessel_series():
    """The two representations of the two-tube potential agree (separation of variables;
    scipy.special.jn_zeros), on and off the axis."""
    step = Step(R)
    z = np.linspace(0.3 * R, 5 * R, 12)
    for r in (0.0, 0.5 * R):
        np.testing.assert_allclose(step.value(np.concatenate([-z, z]), np.full(24, r)),
                                   bessel_series(np.concatenate([-z, z]), r, R), atol=1e-12)
    # the wall condition s = +-1 and the midplane value 0 (the boundary conditions)
    assert abs(bessel_series(np.array([2 * R]), 0.999999 * R, R)[0] - 1.0) < 1e-4
    assert abs(step.value(np.array([0.0]), np.array([0.7 * R]))[0]) < 1e-15


def test_axial_fit_recovers_analytic_derivatives():
    """Derivatives 0..4 of the fitted axial potential against the exact two-tube potential,
    sampled at R/20 (analytic reference: separation of variables)."""
    z = np.linspace(-HALF, HALF, 241)
    lens = Tubes(0.0, [0.0], [1.0])
    fit = fit_axial(z, lens.axial(z))
    inner = np.abs(z) < 5 * R
    stated = [1e-7, 2e-6, 5e-5, 5e-4, 5e-3]     # of the largest |V^(n)|
    for n, tol in enumerate(stated):
        exact = lens.axial(z, n)
        err = np.max(np.abs(fit(z, n) - exact)[inner]) / np.max(np.abs(exact))
        assert err < tol, (n, err)


def test_axial_fit_does_not_amplify_noise():
    """Node noise: the fit averages the values (gain < 1) and its derivatives gain less than
    the central finite-difference stencils of the same order (common practice), and the lens
    properties move by far less than the noise would move a differenced V''."""
    rng = np.random.default_rng(3)
    z = np.linspace(-HALF, HALF, 241)
    h = z[1] - z[0]
    lens = Tubes(0.0, [0.0], [1.0])
    clean = fit_axial(z, lens.axial(z))
    sigma = 1e-6
    noise = sigma * rng.standard_normal((8, z.size))
    inner = np.abs(z) < 5 * R
    stencil_gain = [1.0, math.sqrt(2) / 2, math.sqrt(6), math.sqrt(10) / 2, math.sqrt(70)]
    for n in range(5):
        d = np.concatenate([(fit_axial(z, lens.axial(z) + e)(z, n) - clean(z, n))[inner]
                            for e in noise])
        gain = np.sqrt(np.mean(d * d)) * h ** n / sigma
        assert gain < (0.9 if n == 0 else 0.7 * stencil_gain[n]), (n, gain)
    # the lens: 1e-6 of the step on every node changes f and Cs by < 1e-5 and 1e-4
    base = paraxial(tube_map(ACCEL), PROTON, 1000.0)
    noisy_map = stand_in(lambda zz, r: ACCEL.axial(zz) + 9000.0 * sigma * noise[0])
    noisy = paraxial(noisy_map, PROTON, 1000.0)
    assert abs(noisy.f_image_m / base.f_image_m - 1) < 1e-5
    assert abs(noisy.cs_m / base.cs_m - 1) < 1e-4


@pytest.mark.parametrize("lens, energy", [(ACCEL, 1000.0), (DECEL, 10000.0)])
def test_two_tube_lens_against_direct_paraxial_integration(lens, energy):
    """Accelerating and decelerating two-tube lenses: the cardinal elements from the sampled map
    against solve_ivp of the paraxial equation (Hawkes & Kasper 1989) on the exact Bessel-series
    potential (Harting & Read 1976 tabulate these lenses)."""
    p = paraxial(tube_map(lens), PROTON, energy)
    phi, eps = accelerating(lens, PROTON, energy)
    g, dg = direct_paraxial(phi, eps, [1.0, 0.0], -HALF, HALF)
    gb, dgb = direct_paraxial(phi, eps, [1.0, 0.0], HALF, -HALF)
    f_i, f_o = -1 / dg, 1 / dgb
    tol = 1e-6 * f_i
    assert abs(p.f_image_m - f_i) < tol
    assert abs(p.f_object_m - f_o) < tol
    assert abs(p.focus_image_z_m - (HALF - g / dg)) < tol
    assert abs(p.focus_object_z_m - (-HALF - gb / dgb)) < tol
    assert abs(p.principal_image_z_m - (HALF - g / dg - f_i)) < tol
    assert abs(p.principal_object_z_m - (-HALF - gb / dgb + f_o)) < tol
    # f_o / f_i = sqrt(Phi*_o / Phi*_i) (Hawkes & Kasper 1989, from the Wronskian)
    star = [phi(z)[0] * (1 + eps * phi(z)[0]) for z in (-HALF, HALF)]
    assert p.f_object_m / p.f_image_m == pytest.approx(math.sqrt(star[0] / star[1]), rel=1e-7)
    assert p.exit_energy_eV == pytest.approx(energy - float(lens.axial(HALF) - lens.axial(-HALF)),
                                             rel=1e-9)
    assert p.f_image_m > 0 and not p.mirror


def test_tanh_model_agrees_with_bessel_series():
    """The tanh model with omega = 1.318 (Harting & Read 1976) follows the exact two-tube axial
    potential to 0.5 % of the step (from memory: 'within about half a percent'); the focal
    lengths it gives agree with the exact lens to 3 % (ratios 1/10 .. 20)."""
    z = np.linspace(-HALF, HALF, 1201)
    step = Step(R)
    assert np.max(np.abs(np.tanh(OMEGA * z / R) - step.axial(z, 0))) / 2 < 0.005
    for ratio in (0.1, 5.0, 20.0):
        v2 = -(ratio - 1) * 1000.0
        exact = paraxial(tube_map(Tubes(0.0, [0.0], [v2])), PROTON, 1000.0)
        model = paraxial(stand_in(TanhLens(0.0, v2).potential), PROTON, 1000.0)
        assert model.f_image_m / exact.f_image_m == pytest.approx(1.0, abs=0.03), ratio
        assert model.f_object_m / exact.f_object_m == pytest.approx(1.0, abs=0.03), ratio


def einzel(v_centre, length=2 * R):
    """Three tubes, the middle one (length 2R) at v_centre, the outer ones at 0."""
    return Tubes(0.0, [-length / 2, length / 2], [v_centre, -v_centre])


def test_weak_unipotential_lens_thin_lens_formula():
    """Weak unipotential lens, nonrelativistic: 1/f = (3/16) int (Phi'/Phi)^2 dz
    (Hawkes & Kasper 1989), the weak-lens limit: the relative difference is small (< 5 % of the
    centre voltage over the energy) and grows with the strength."""
    energy = 5000.0
    misses = []
    for strength in (0.1, 0.2):
        lens = einzel(strength * energy)
        p = paraxial(tube_map(lens), PROTON, energy)
        phi, _ = accelerating(lens, PROTON, energy)
        inv_f = 3 / 16 * quad(lambda z: (phi(z)[1] / phi(z)[0]) ** 2, -HALF, HALF,
                              points=[-R, R], limit=200)[0]
        misses.append(abs(p.f_image_m * inv_f - 1))
        assert misses[-1] < 0.05 * strength, (strength, misses[-1])
        assert p.f_object_m == pytest.approx(p.f_image_m, rel=1e-9)   # same potential both sides
    assert misses[1] > misses[0]


def test_relativistic_paraxial_matches_traced_rays():
    """Electrons 100 keV -> 400 keV: the focus of the V* paraxial equation against a directly
    traced near-axis ray (relativistic dp/dt = qE, common practice); the nonrelativistic
    equation would miss it by far."""
    lens = Tubes(0.0, [0.0], [300e3])
    p = paraxial(tube_map(lens), ELECTRON, 100e3)
    y = 1e-4 * R
    r1, slope = trace_ray(lens, ELECTRON, 100e3, y, 0.0, -HALF, HALF)
    assert p.f_image_m == pytest.approx(-y / slope, rel=1e-6)
    assert p.focus_image_z_m == pytest.approx(HALF - r1 / slope, abs=1e-6 * p.f_image_m)
    heavy = SimpleNamespace(name="slow", mass_kg=1e6 * ELECTRON.mass_kg, charge_C=-constants.e)
    nonrel = paraxial(tube_map(lens), heavy, 100e3)
    assert abs(nonrel.f_image_m / p.f_image_m - 1) > 0.05


def test_relativistic_weak_lens_formula():
    """Weak unipotential lens for 300 keV electrons against the relativistic thin-lens formula
    1/f = (1/16) int (3 + 4 eps Phi*) (Phi'/Phi*)^2 dz, the Picht-transformed form of the
    V* paraxial equation (Hawkes & Kasper 1989; reduces to 3/16 for eps -> 0)."""
    energy, strength = 300e3, 0.1
    lens = einzel(-strength * energy)          # a retarding centre for electrons
    p = paraxial(tube_map(lens), ELECTRON, energy)
    phi, eps = accelerating(lens, ELECTRON, energy)

    def integrand(z, relativistic):
        f, f1, _ = phi(z)
        ps = f * (1 + eps * f) if relativistic else f
        return (3 + 4 * eps * ps * relativistic) * (f1 / ps) ** 2 / 16
    inv_f = quad(integrand, -HALF, HALF, args=(True,), points=[-R, R], limit=200)[0]
    inv_f_nonrel = quad(integrand, -HALF, HALF, args=(False,), points=[-R, R], limit=200)[0]
    assert abs(p.f_image_m * inv_f - 1) < 0.05 * strength
    assert abs(p.f_image_m * inv_f_nonrel - 1) > 0.1     # the correction matters here


def _cs_cc_from_rays(lens, sp, energy, p, object_z=None):
    """Cs and Cc (image side) fitted to traced rays: r at the Gaussian image plane against
    alpha^3 (heights or slopes 0.02..0.08 R) and against the energy (+-1e-3)."""
    image = p.focus_image_z_m if object_z is None else p.image_z_m
    if object_z is None:
        heights = np.array([0.02, 0.04, 0.06, 0.08]) * R
        starts = [(y, 0.0) for y in heights]
        alpha = -heights / p.f_image_m                     # image slope of the paraxial ray
    else:
        slopes = np.array([0.002, 0.004, 0.006, 0.008])
        starts = [((-HALF - object_z) * a, a) for a in slopes]
        dz = p.z_m[-1] - p.z_m[-2]
        alpha = slopes * (p.ray_h[-1] - p.ray_h[-2]) / dz
    r = np.array([trace_ray(lens, sp, energy, r0, s0, -HALF, image)[0] for r0, s0 in starts])
    coef = np.linalg.lstsq(np.column_stack([alpha, alpha ** 3, alpha ** 5]), r, rcond=None)[0]
    de = 1e-3 * energy
    r0, s0 = starts[0]
    shift = [trace_ray(lens, sp, energy + d, r0 / 4, s0 / 4, -HALF, image)[0] for d in (-de, de)]
    cc = -(shift[1] - shift[0]) / (2 * de) * p.exit_energy_eV / (alpha[0] / 4)
    return coef[1], cc


@pytest.mark.parametrize("object_z", [None, -10 * R])
def test_cs_cc_against_traced_rays(object_z):
    """Cs and Cc from the aberration integrals against fits to traced rays in the exact field
    (relativistic dp/dt = qE, common practice), object at infinity and at -10 R; the issue asks
    15 %, the integrals do far better on an analytic map (1 %)."""
    p = paraxial(tube_map(ACCEL), PROTON, 1000.0, object_z_m=object_z)
    cs, cc = _cs_cc_from_rays(ACCEL, PROTON, 1000.0, p, object_z)
    got_cs, got_cc = (p.cs_m, p.cc_m) if object_z is None else (p.image_cs_m, p.image_cc_m)
    assert got_cs == pytest.approx(cs, rel=0.01)
    assert got_cc == pytest.approx(cc, rel=0.01)


def test_cs_cc_relativistic_against_traced_rays():
    """100 keV electrons accelerated to 400 keV: the relativistic aberration integrals against
    traced rays (relativistic dp/dt = qE, common practice), to 1 %."""
    lens = Tubes(0.0, [0.0], [300e3])
    p = paraxial(tube_map(lens), ELECTRON, 100e3)
    cs, cc = _cs_cc_from_rays(lens, ELECTRON, 100e3, p)
    assert p.cs_m == pytest.approx(cs, rel=0.01)
    assert p.cc_m == pytest.approx(cc, rel=0.01)


@pytest.mark.parametrize("object_z", [None, -10 * R])
def test_cs_equals_scherzer_integral(object_z):
    """Nonrelativistic limit: the eikonal perturbation integral equals Scherzer's integral
    (Scherzer 1936) in the form of Hawkes & Kasper 1989 (from memory; the same coefficients
    follow from integrating M4 by parts), on the exact potential."""
    p = paraxial(tube_map(ACCEL), PROTON, 1000.0, object_z_m=object_z)
    phi, _ = accelerating(ACCEL, PROTON, 1000.0)
    u0 = [1.0, 0.0] if object_z is None else [-HALF - object_z, 1.0]
    got = p.cs_m if object_z is None else p.image_cs_m
    assert got == pytest.approx(scherzer_cs(phi, u0, -HALF, HALF), rel=1e-4)


@pytest.mark.parametrize("lens, sp, energy", [
    (ACCEL, PROTON, 1000.0), (DECEL, PROTON, 10000.0),
    (einzel(3000.0), PROTON, 5000.0), (einzel(-3000.0), PROTON, 5000.0),
    (Tubes(0.0, [0.0], [300e3]), ELECTRON, 100e3), (einzel(-60e3), ELECTRON, 100e3)])
def test_cs_and_cc_positive(lens, sp, energy):
    """Scherzer 1936: Cs (and Cc) of a static, space-charge-free round lens cannot be made
    negative; accelerating, decelerating and unipotential lenses, ions and electrons."""
    p = paraxial(tube_map(lens), sp, energy, object_z_m=-12 * R)
    assert p.cs_m > 0 and p.cc_m > 0
    assert p.image_cs_m > 0 and p.image_cc_m > 0


@pytest.mark.parametrize("object_z", [-40 * R, -15 * R, -8 * R])
def test_image_and_magnification_obey_newton(object_z):
    """Newton's lens equation (common practice) in the module's conventions:
    (F_o - z_o)(z_i - F_i) = f_o f_i and M = -f_o / (F_o - z_o) = -(z_i - F_i) / f_i."""
    p = paraxial(tube_map(ACCEL), PROTON, 1000.0, object_z_m=object_z)
    x_o = p.focus_object_z_m - object_z
    x_i = p.image_z_m - p.focus_image_z_m
    assert x_o * x_i == pytest.approx(p.f_object_m * p.f_image_m, rel=1e-7)
    assert p.magnification == pytest.approx(-p.f_object_m / x_o, rel=1e-7)
    assert p.magnification == pytest.approx(-x_i / p.f_image_m, rel=1e-7)


def test_object_inside_the_map():
    """An object inside the field: image and magnification from the object-plane rays agree with
    a direct integration from that plane (Hawkes & Kasper 1989 paraxial equation)."""
    z_o = -2 * R
    p = paraxial(tube_map(ACCEL), PROTON, 1000.0, object_z_m=z_o)
    phi, eps = accelerating(ACCEL, PROTON, 1000.0)
    h, dh = direct_paraxial(phi, eps, [0.0, 1.0], z_o, HALF)
    g, dg = direct_paraxial(phi, eps, [1.0, 0.0], z_o, HALF)
    z_i = HALF - h / dh
    assert p.image_z_m == pytest.approx(z_i, abs=1e-7)
    assert p.magnification == pytest.approx(g + dg * (z_i - HALF), rel=1e-6)
    assert np.isnan(p.ray_h[p.z_m < z_o]).all() and p.ray_h[-1] == pytest.approx(h, rel=1e-6)


def test_mirror_is_reported():
    """Protons of 1 keV against a +2 kV tube turn back where Phi = 0 (energy conservation,
    common practice): flagged, with NaN lens quantities."""
    lens = Tubes(0.0, [0.0], [2000.0])
    p = paraxial(tube_map(lens), PROTON, 1000.0)
    assert p.mirror
    turn = brentq(lambda z: float(lens.axial(z)) - 1000.0, -R, R)
    assert p.turning_z_m == pytest.approx(turn, abs=1e-6 * R)
    assert np.isnan([p.f_image_m, p.cs_m, p.cc_m, p.focus_image_z_m]).all()
    # the same lens passes electrons (attracting) and 3 keV protons
    assert not paraxial(tube_map(lens), PROTON, 3000.0).mirror
    assert not paraxial(tube_map(lens), ELECTRON, 1000.0).mirror


def test_species_by_name_and_bad_input():
    """A species name or object; errors name the problem."""
    m = tube_map(ACCEL)
    by_name = paraxial(m, "p+", 1000.0)
    assert by_name.f_image_m == paraxial(m, PROTON, 1000.0).f_image_m
    assert by_name.summary()["species"] == "p+"
    with pytest.raises(OpticsError, match="energy_eV"):
        paraxial(m, PROTON, 0.0)
    with pytest.raises(OpticsError, match="object_z_m"):
        paraxial(m, PROTON, 1000.0, object_z_m=HALF)
    planar = SimpleNamespace(potential=m.potential, grid=SimpleNamespace(**{**vars(m.grid),
                                                                         "symmetry": "planar"}))
    with pytest.raises(OpticsError, match="axially symmetric"):
        paraxial(planar, PROTON, 1000.0)


def test_axis_ends_at_an_electrode_and_at_z_range():
    """The axis used stops before the first axis node inside an electrode (a target plate), and
    ``z_range_m`` selects a stretch: the same lens as a map cut to that stretch."""
    m = tube_map(ACCEL)
    z = np.linspace(-HALF, HALF, 241)
    owner = np.full((z.size, 3), -1)
    owner[z >= 5 * R, :] = 0                                   # a plate from z = 5R on
    plated = SimpleNamespace(potential=m.potential, grid=m.grid,
                             raster=SimpleNamespace(owner=owner))
    p = paraxial(plated, PROTON, 1000.0)
    assert p.z_m[-1] < 5 * R <= p.z_m[-1] + m.grid.hz * 1.0001
    cut = paraxial(m, PROTON, 1000.0, z_range_m=(-HALF, p.z_m[-1]))
    assert cut.f_image_m == p.f_image_m and cut.cs_m == p.cs_m
    short = paraxial(stand_in(m.potential, half=5 * R), PROTON, 1000.0)
    ranged = paraxial(m, PROTON, 1000.0, z_range_m=(-5 * R, 5 * R))
    assert ranged.z_m[0] == pytest.approx(-5 * R) and ranged.z_m[-1] == pytest.approx(5 * R)
    for name in ("f_image_m", "focus_image_z_m", "cs_m", "cc_m"):
        assert getattr(ranged, name) == pytest.approx(getattr(short, name), rel=1e-4), name
    with pytest.raises(OpticsError, match="free space"):
        paraxial(m, PROTON, 1000.0, z_range_m=(7 * R, 8 * R))


# ------------------------------------------------------------ real solved maps and rays

TUBES_TOML = """
title = "two equal tubes, 0.5 mm gap: a lens for the optics tests (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 60.0]
r_mm = 8.0
cell_mm = 0.25
edges = { z_min = "open", z_max = "open", r_max = "ground" }
[[electrode]]
name = "first"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [0.0, 29.75]
r_mm = [5.0, 6.0]
[[electrode]]
name = "second"
voltage_V = -9000.0
[[electrode.rect]]
z_mm = [30.25, 60.0]
r_mm = [5.0, 6.0]
"""
TUBE_R = 5e-3
CENTRE = 30e-3
CELL = 0.25e-3


@pytest.fixture(scope="module")
def solved():
    """The two-tube lens solved on a 0.25 mm grid (R/20) and its paraxial properties."""
    from tracer.config import loads
    from tracer.pipeline import solve

    field = solve(loads(TUBES_TOML)).combine()
    return field, paraxial(field, PROTON, 1000.0)


def trace_rows(field, rows, path, planes, energy_eV=1000.0, z_start=0.5e-3):
    """Protons parallel to the axis from ``z_start`` by tracer.beam.trace, one per row (height x,
    energy offset dE) with energy_eV + dE at the map's z_min; their crossings of each plane (by
    name), in ray order."""
    from tracer.beam import trace
    from tracer.config import Beam

    v = field.potential(np.array([field.grid.z0, z_start]), np.zeros(2))
    e_start = energy_eV - (v[1] - v[0])               # kinetic energy at z_start
    path.write_text("x_m,y_m,z_m,dx/dz,dy/dz,energy_eV\n"
                    + "".join(f"{float(x)!r},0,{z_start!r},0,0,{float(e_start + de)!r}\n" for x, de in rows))
    beam = Beam(name="protons", species=PROTON, energy_eV=None, start_z_m=None, count=None,
                rays_csv=path)
    run = trace(field, beam, planes=planes, rtol=1e-10, max_time_s=1e-5)
    at = {plane.name: np.sort(run.at_plane(plane.name), order="ray") for plane in planes}
    assert all(len(a) == len(rows) for a in at.values())
    return at


def axis_crossing(ray, exit_z):
    """Where straight rays recorded at the plane z = exit_z cross the axis."""
    return exit_z - ray["x_m"] / (ray["px"] / ray["pz"])


@pytest.fixture(scope="module")
def traced(solved, tmp_path_factory):
    """Rays traced through the solved map by tracer.beam.trace: one near-axis ray, five parallel
    rays at 0.2..0.5 R for Cs, two at 0.05 R with the energy -+1 eV for Cc, three at 0.1, 0.2 and
    0.4 of a cell from the axis."""
    from tracer.config import Plane

    field, p = solved
    rows = ([(1e-3 * TUBE_R, 0.0)] + [(h * TUBE_R, 0.0) for h in np.linspace(0.2, 0.5, 5)]
            + [(0.05 * TUBE_R, -1.0), (0.05 * TUBE_R, 1.0)] + [(f * CELL, 0.0) for f in (0.1, 0.2, 0.4)])
    exit_z = field.grid.z1 - 1e-3
    at = trace_rows(field, rows, tmp_path_factory.mktemp("optics") / "rays.csv",
                    [Plane("focus", p.focus_image_z_m), Plane("exit", exit_z)])
    return np.array([x for x, _ in rows]), at, exit_z


def test_real_two_tube_map_matches_bessel_series_lens(solved):
    """The solved two-tube lens (gap R/10) against the zero-gap Bessel-series lens of the same
    radius (separation of variables; Harting & Read 1976): f and F to 1 % of f."""
    _, p = solved
    exact = paraxial(tube_map(ACCEL), PROTON, 1000.0)        # R = 10 mm; lengths scale with R
    scale = TUBE_R / R
    assert p.f_image_m == pytest.approx(exact.f_image_m * scale, rel=0.01)
    assert p.f_object_m == pytest.approx(exact.f_object_m * scale, rel=0.01)
    assert abs(p.focus_image_z_m - CENTRE - exact.focus_image_z_m * scale) < 0.01 * p.f_image_m


def test_real_rays_focus_at_the_paraxial_focus(solved, traced):
    """A near-axis parallel ray traced through the solved map crosses the axis where the paraxial
    focus says, to 1 % of f (the issue's check)."""
    _, p = solved
    heights, at, exit_z = traced
    slope = at["exit"]["px"][0] / at["exit"]["pz"][0]
    assert abs(axis_crossing(at["exit"][0], exit_z) - p.focus_image_z_m) < 0.01 * p.f_image_m
    assert -heights[0] / slope == pytest.approx(p.f_image_m, rel=0.01)


def test_real_rays_cs_cc_match_the_integrals(solved, traced):
    """Cs and Cc from the aberration integrals against fits to rays traced through the solved map
    (r in the Gaussian focal plane against alpha, alpha^3, alpha^5; and against the energy), to
    15 % (the issue's check)."""
    _, p = solved
    heights, at, _ = traced
    r = at["focus"]["x_m"]
    alpha = -heights[1:6] / p.f_image_m
    cs = np.linalg.lstsq(np.column_stack([alpha, alpha ** 3, alpha ** 5]), r[1:6], rcond=None)[0][1]
    cc = -(r[7] - r[6]) / 2.0 * p.exit_energy_eV / (-heights[6] / p.f_image_m)
    assert p.cs_m == pytest.approx(cs, rel=0.15)
    assert p.cc_m == pytest.approx(cc, rel=0.15)


def check_first_cell_rays(p, heights, crossing, cell):
    """The first-cell checks of issue 16 on a near-axis ray (0.02 cell) and rays at 0.1, 0.2 and
    0.4 of a cell from the axis: in a field even in r (Hawkes & Kasper, Principles of Electron
    Optics: V(z) - V''(z) r^2 / 4 + ...) their axis crossings move from the near-axis ray's as h^2
    (shifts in the ratio 1 : 4 : 16; an r^3 term in the first cell's patch adds a shift linear in
    h), the shift is third-order spherical aberration, -Cs (h / f)^2 with Cs from tracer.optics
    (Hawkes & Kasper's aberration integral), to 50 %, and the near-axis ray crosses at the
    paraxial focus of the same map to 1e-4 f."""
    shift = crossing[1:] - crossing[0]
    assert heights[0] == pytest.approx(0.02 * cell) and heights[1] == pytest.approx(0.1 * cell)
    assert abs(crossing[0] - p.focus_image_z_m) < 1e-4 * p.f_image_m   # the figure
    assert shift[1] / shift[0] == pytest.approx(4.0, rel=0.1)
    assert shift[2] / shift[1] == pytest.approx(4.0, rel=0.1)
    third_order = -p.cs_m * (heights[1:] / p.f_image_m) ** 2
    assert np.all(np.abs(shift / third_order - 1.0) < 0.5), shift / third_order


def test_rays_inside_the_first_cell_have_an_even_field(solved, traced):
    """``check_first_cell_rays`` in the two-tube lens at 20 cells per tube radius.  The r^2 term of
    the first cell's patch obeys Laplace's equation on the axis to fourth order (the solver's
    fourth-order axis rows), its r^4 term only to a fraction of itself (the rows off the axis are
    second order): the shifts are 1.3 Cs (h / f)^2 here."""
    _, p = solved
    heights, at, exit_z = traced
    rays = [0, 8, 9, 10]
    check_first_cell_rays(p, heights[rays], axis_crossing(at["exit"][rays], exit_z), CELL)


APERTURES_TOML = """
title = "three apertures of 2 mm bore radius, 1 kV on the middle one (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 80.0]
r_mm = 16.0
cell_mm = 0.1
edges = { z_min = "open", z_max = "open", r_max = "ground" }
[[electrode]]
name = "outer"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [20.0, 21.0]
r_mm = [2.0, 16.0]
[[electrode.rect]]
z_mm = [29.0, 30.0]
r_mm = [2.0, 16.0]
[[electrode]]
name = "middle"
voltage_V = 1000.0
[[electrode.rect]]
z_mm = [24.5, 25.5]
r_mm = [2.0, 12.0]
"""


def test_rays_inside_the_first_cell_of_a_three_aperture_lens(tmp_path):
    """``check_first_cell_rays`` in a three-aperture einzel lens at 20 cells per bore radius, where
    the second-order axis equation left the near-axis ray 6.3e-4 f beyond the paraxial focus."""
    from tracer.config import Plane, loads
    from tracer.pipeline import solve

    cell = 0.1e-3
    field = solve(loads(APERTURES_TOML)).combine()
    p = paraxial(field, PROTON, 1500.0)
    heights = np.array([0.02, 0.1, 0.2, 0.4]) * cell
    exit_z = p.focus_image_z_m - 5e-3
    at = trace_rows(field, [(h, 0.0) for h in heights], tmp_path / "rays.csv",
                    [Plane("exit", exit_z)], energy_eV=1500.0)
    check_first_cell_rays(p, heights, axis_crossing(at["exit"], exit_z), cell)


def round_plate(zc, bore, outer, to_wall, thickness=1e-3, n=96):
    """Points (mm) of an aperture plate centred at zc with a half-round edge of diameter
    ``thickness`` at the bore, and at the outer radius too unless it reaches a wall there."""
    a = thickness / 2

    def half_round(rc, phase):
        phi = phase + np.pi * np.arange(n + 1) / n
        return list(zip(zc + a * np.cos(phi), rc + a * np.sin(phi)))

    points = half_round(bore + a, np.pi)
    points += [(zc + a, outer), (zc - a, outer)] if to_wall else half_round(outer - a, 0.0)
    return "points_mm = [" + ", ".join(f"[{float(1e3 * z)!r}, {float(1e3 * r)!r}]" for z, r in points) + "]"


ROUND_APERTURES_TOML = f"""
title = "three apertures of 2 mm bore radius with half-round edges (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 80.0]
r_mm = 16.0
cell_mm = 0.1
edges = {{ z_min = "open", z_max = "open", r_max = "ground" }}
[[electrode]]
name = "outer"
voltage_V = 0.0
[[electrode.polygon]]
{round_plate(20.5e-3, 2e-3, 16e-3, True)}
[[electrode.polygon]]
{round_plate(29.5e-3, 2e-3, 16e-3, True)}
[[electrode]]
name = "middle"
voltage_V = 1000.0
[[electrode.polygon]]
{round_plate(25e-3, 2e-3, 12e-3, False)}
"""


def focal_lengths(text, cells_mm):
    """f of 1.5 keV protons (tracer.paraxial) through a config solved at each cell."""
    from tracer.config import loads
    from tracer.pipeline import solve

    return [paraxial(solve(loads(text.replace("cell_mm = 0.1", f"cell_mm = {c}"))).combine(), PROTON,
                     1500.0).f_image_m for c in cells_mm]


def test_focal_length_converges_at_second_order_between_smooth_electrodes():
    """The paraxial focal length of a three-aperture lens with half-round electrode edges on cells
    of 0.2, 0.1 and 0.05 mm: the order observed (Richardson, tracer.gridcheck) is at least 1.5
    (the solver is second order, common practice; 1.84 measured)."""
    from tracer.gridcheck import observed_order

    coarse, middle, fine = focal_lengths(ROUND_APERTURES_TOML, (0.2, 0.1, 0.05))
    assert observed_order(fine, middle, coarse) >= 1.5, (coarse, middle, fine)


def test_focal_length_converges_as_the_sharp_corners_allow():
    """The same lens with square-cornered apertures (APERTURES_TOML) on cells of 0.25, 0.125 and
    0.0625 mm (every face on a node): the potential next to an edge whose free space spans 3 pi / 2
    goes as rho^(2/3) (Jackson, Classical Electrodynamics, sec. 2.11: rho^(pi / beta) at a corner of
    opening beta), and the grid error of a figure away from it falls as h^(4/3) (from memory:
    the pollution of a corner singularity), not h^2.  The order observed is 4/3 to 0.15 (1.37
    measured): the focus moving with the cell in such a lens is this, not the solver tolerance, the
    axial fit or the domain."""
    from tracer.gridcheck import observed_order

    coarse, middle, fine = focal_lengths(APERTURES_TOML, (0.25, 0.125, 0.0625))
    assert observed_order(fine, middle, coarse) == pytest.approx(4.0 / 3.0, abs=0.15), (coarse, middle, fine)


def test_first_cell_focus_converges_to_the_paraxial_focus(solved, traced, tmp_path):
    """A ray at 0.02 cell from the axis against the paraxial focus (tracer.paraxial) of the same
    map: the difference falls at least as the cell squared from 0.5 mm to 0.25 mm cells (the
    map's interpolant is second order, common practice)."""
    from tracer.config import Plane, loads
    from tracer.pipeline import solve

    _, fine = solved
    heights, at, exit_z = traced
    fine_miss = abs(axis_crossing(at["exit"][0], exit_z) - fine.focus_image_z_m)
    field = solve(loads(TUBES_TOML.replace("cell_mm = 0.25", "cell_mm = 0.5"))).combine()
    p = paraxial(field, PROTON, 1000.0)
    ray = trace_rows(field, [(0.02 * 2 * CELL, 0.0)], tmp_path / "rays.csv", [Plane("exit", exit_z)])
    coarse_miss = abs(axis_crossing(ray["exit"][0], exit_z) - p.focus_image_z_m)
    assert fine_miss < coarse_miss / 3.5, (fine_miss / fine.f_image_m, coarse_miss / p.f_image_m)


# ---------------------------------------------------------------- magnetic lenses


def field_free(half, cell):
    """A stand-in map at 0 V everywhere from -half to half."""
    grid = SimpleNamespace(z0=-half, z1=half, hz=cell, r0=0.0, r1=R, symmetry="axial")
    return SimpleNamespace(potential=lambda z, r: np.zeros(np.broadcast(z, r).shape), grid=grid)


def glaser_cut_ray(k2, a, cut):
    """Glaser's exact ray through his bell-shaped field cut at |z| = cut (Glaser 1941).

    With z = a cot(phi) and r = y / sin(phi) the paraxial equation of the turning frame becomes
    y'' + w^2 y = 0, w^2 = 1 + k^2.  The ray parallel to the axis at r = 1 where the field starts
    (phi_1 = pi - arctan(a/cut)) is y = sin(phi_1) cos(w (phi - phi_1)) + cos(phi_1)/w
    sin(w (phi - phi_1)); returns its height and slope dr/dz = -(y' sin(phi) - y cos(phi)) / a
    where the field ends (phi_2 = arctan(a/cut)).
    """
    r, slope = glaser_ray(k2, a, cut, cut)
    return float(r), float(slope)


def glaser_ray(k2, a, cut, z):
    """Glaser's exact ray of ``glaser_cut_ray`` (Glaser 1941): height and slope at points z of the
    cut field."""
    w = math.sqrt(1 + k2)
    p1 = math.pi - math.atan(a / cut)
    phi = np.arctan2(a, z)
    y = np.sin(p1) * np.cos(w * (phi - p1)) + np.cos(p1) / w * np.sin(w * (phi - p1))
    dy = -w * np.sin(p1) * np.sin(w * (phi - p1)) + np.cos(p1) * np.cos(w * (phi - p1))
    return y / np.sin(phi), -(dy * np.sin(phi) - y * np.cos(phi)) / a


@pytest.mark.parametrize("energy, k2", [(10e3, 0.5), (100e3, 1.2), (2e3, 0.05)])
def test_glaser_bell_lens_focal_length_and_rotation(energy, k2):
    """Glaser's bell-shaped field (Glaser 1941): with k^2 = e B0^2 a^2 / (8 m V*), w^2 = 1 + k^2,
    the asymptotic focal length f = -a w / sin(pi w), the focus at z_F = a w cot(pi w) from the
    centre, both sides alike, and the rotation k (2 arctan(L/a)) over -L..L (k pi for L -> inf);
    V* = V (1 + eV/(2 m c^2)) (scipy.constants).  The field is cut at L = 60 a: the focal length and
    focus are checked against Glaser's exact ray through the cut field (glaser_cut_ray) to 1e-6,
    and that ray's own values against the uncut lens's within 3 (a/L)^2 and a/L."""
    from tracer.magnetics.profile import AxialProfile

    a, cut = 0.004, 0.24
    e, m = constants.e, constants.m_e
    v_star = energy * (1.0 + energy * e / (2 * m * constants.c ** 2))
    b0 = math.sqrt(k2 * 8 * m * v_star / e) / a
    bell = AxialProfile.glaser("lens", b0, a, 0.0)
    props = paraxial(field_free(cut, a / 10), "e-", energy, magnetic=bell)
    r, slope = glaser_cut_ray(k2, a, cut)
    f_cut, z_cut = -1.0 / slope, cut - r / slope
    w = math.sqrt(1 + k2)
    f = -a * w / math.sin(math.pi * w)
    assert f_cut == pytest.approx(f, rel=3 * (a / cut) ** 2)
    assert z_cut == pytest.approx(a * w / math.tan(math.pi * w), abs=f * a / cut)
    assert props.f_image_m == pytest.approx(f_cut, rel=1e-6)
    assert props.f_object_m == pytest.approx(f_cut, rel=1e-6)
    assert props.focus_image_z_m == pytest.approx(z_cut, abs=1e-6 * f)
    assert props.focus_object_z_m == pytest.approx(-z_cut, abs=1e-6 * f)
    # electrons (q < 0) in B_z > 0 turn the image right-handed about +z
    assert props.rotation_rad == pytest.approx(math.sqrt(k2) * 2 * math.atan(cut / a), rel=1e-7)
    assert props.cs_m > 0 and props.cc_m > 0          # Scherzer 1936: round lenses


@pytest.mark.parametrize("current", [0.5, 1.0])
def test_weak_solenoid_against_busch_thin_lens(current):
    """A weak coil's focal length against Busch's thin-lens formula 1/f = (q / (8 m V*)) int B^2 dz
    and its rotation against (q / (8 m V*))^(1/2) int B dz (Busch 1926), to the lens's length over
    f (the length taken as twice the rms width of B^2); B from the coil's unit field on a grid
    (tracer.magnetics)."""
    from tracer.grid import Grid
    from tracer.magnetics.coil import Coil
    from tracer.magnetics.units import MagneticUnits

    coil = Coil("sol", (-0.01, 0.01), (0.015, 0.02), 100, current)
    cell = 0.001
    grid = Grid("axial", True, -0.2, 0.0, cell, cell, 401, 31, ("ground",) * 4)
    field = MagneticUnits.build(grid, (coil,)).combine()
    energy = 5e3
    e, m = constants.e, constants.m_e
    v_star = energy * (1.0 + energy * e / (2 * m * constants.c ** 2))
    z = np.linspace(-0.2, 0.2, 4001)
    b = field.on_axis(z)
    inv_f = e / (8 * m * v_star) * np.trapezoid(b * b, z)
    length = 2 * math.sqrt(np.trapezoid(b * b * z * z, z) / np.trapezoid(b * b, z))
    props = paraxial(field_free(0.2, cell), "e-", energy, magnetic=field)
    assert length * inv_f < 0.05                       # a weak lens: f far beyond its length
    assert props.f_image_m == pytest.approx(1.0 / inv_f, rel=length * inv_f)
    assert props.f_object_m == pytest.approx(1.0 / inv_f, rel=length * inv_f)
    # the focus of a thin lens lies f beyond its middle
    assert props.focus_image_z_m == pytest.approx(1.0 / inv_f, rel=length * inv_f)
    assert props.rotation_rad == pytest.approx(math.sqrt(e / (8 * m * v_star)) * np.trapezoid(b, z),
                                               rel=1e-6)


def test_energy_reference_is_the_start_point_as_for_a_beam():
    """``energy_eV`` is the kinetic energy at ``start_z_m`` on the axis, as a beam's is at its start
    point: asking for E at z_s is asking for E + q (V(z_min) - V(z_s)) at the z_min end (energy
    conservation, common practice), so every lens property agrees."""
    m = tube_map(ACCEL)
    zs = 0.3 * R
    v_s, v_0 = float(ACCEL.axial(zs)), float(ACCEL.axial(-HALF))
    at_start = paraxial(m, PROTON, 10000.0, start_z_m=zs)
    at_end = paraxial(m, PROTON, 10000.0 + (v_s - v_0))     # proton: q = +1 e; 4.8 keV at z_min
    assert at_end.energy_eV < 5000.0
    assert at_start.start_z_m == zs and at_start.start_potential_V == pytest.approx(v_s, rel=1e-12)
    assert at_end.start_z_m == -HALF and at_end.start_potential_V == pytest.approx(v_0, abs=1e-9)
    assert at_start.exit_energy_eV == pytest.approx(at_end.exit_energy_eV, rel=1e-12)
    assert at_start.f_image_m == pytest.approx(at_end.f_image_m, rel=1e-9)
    assert at_start.cs_m == pytest.approx(at_end.cs_m, rel=1e-9)
    with pytest.raises(OpticsError, match=r"start_z_m = .* lies outside the map"):
        paraxial(m, PROTON, 1000.0, start_z_m=2 * HALF)


@pytest.mark.parametrize("energy, k2", [(10e3, 0.5), (100e3, 1.2), (2e3, 0.05)])
def test_glaser_bell_lens_cs_and_cc(energy, k2):
    """Cs and Cc of Glaser's bell-shaped field B0 / (1 + (z/a)^2) (Glaser 1941), object at infinity,
    image side (the asymptotic image, not the objective's focal plane).

    Against the classic integrals of a magnetic round lens (Hawkes & Kasper, Principles of Electron
    Optics 1989; recalled, with V* for V and the rest mass m)
    Cs = e / (128 m V* g_i'^4) int [3 e B^4 g^4 / (m V*) + 8 B'^2 g^4 - 8 B^2 g^2 g'^2] dz and
    Cc = (1 + 2 eps V) / (1 + eps V) * e / (8 m V* g_i'^2) int B^2 g^2 dz (eps = e / (2 m c^2)),
    evaluated by scipy.integrate.quad along Glaser's exact ray g through the field cut at L = 60 a
    (glaser_ray; tracer integrates its own form of the aberration, by Runge-Kutta), to 1e-6.  The
    Cs integral comes from integrations by parts whose end terms vanish only where the field
    falls faster than the ray grows; cut at L they are -8 [g^4 B B' - 2 g^3 g' B^2] at +-L inside
    the brackets (about a / L of the whole), and are added here.
    And Cc of the uncut field in closed form: in Glaser's variable z = a cot(phi) the ray is
    g = sin(w (pi - phi)) / (w sin(phi)) and B^2 g^2 dz = (B0^2 a / w^2) sin^2(w (pi - phi)) dphi,
    so Cc = (1 + 2 eps V) / (1 + eps V) * a k^2 (pi/2 - sin(2 pi w) / (4 w)) / sin^2(pi w)
    (derived here from the integral above), which the cut field meets within a / L (the share of
    B^2 g^2 beyond L, about (2 / pi) sin^2(pi w) a / L)."""
    from scipy.integrate import quad

    from tracer.magnetics.profile import AxialProfile

    a, cut = 0.004, 0.24
    e, m = constants.e, constants.m_e
    eps = e / (2 * m * constants.c ** 2)
    v_star = energy * (1.0 + eps * energy)
    b0 = math.sqrt(k2 * 8 * m * v_star / e) / a
    props = paraxial(field_free(cut, a / 10), "e-", energy,
                     magnetic=AxialProfile.glaser("lens", b0, a, 0.0))
    b = lambda z: b0 / (1 + (z / a) ** 2)  # noqa: E731
    db = lambda z: -2 * b0 * z / a ** 2 / (1 + (z / a) ** 2) ** 2  # noqa: E731

    def integral(f):
        return quad(lambda z: f(z, *glaser_ray(k2, a, cut, z)), -cut, cut, points=[0.0], limit=800,
                    epsabs=0.0, epsrel=1e-12)[0]

    slope = glaser_ray(k2, a, cut, cut)[1]
    ends = sum(side * (g ** 4 * b(z) * db(z) - 2 * g ** 3 * dg * b(z) ** 2)
               for side, z in ((1, cut), (-1, -cut)) for g, dg in [glaser_ray(k2, a, cut, z)])
    cs = e / (128 * m * v_star * slope ** 4) * (integral(
        lambda z, g, dg: 3 * e * b(z) ** 4 * g ** 4 / (m * v_star) + 8 * db(z) ** 2 * g ** 4
        - 8 * b(z) ** 2 * g * g * dg * dg) - 8 * ends)
    factor = (1 + 2 * eps * energy) / (1 + eps * energy)
    cc = factor * e / (8 * m * v_star * slope ** 2) * integral(lambda z, g, dg: b(z) ** 2 * g * g)
    w = math.sqrt(1 + k2)
    closed = factor * a * k2 * (math.pi / 2 - math.sin(2 * math.pi * w) / (4 * w)) / math.sin(math.pi * w) ** 2
    assert cc == pytest.approx(closed, rel=a / cut)
    assert props.cs_m > 0 and props.cc_m > 0          # Scherzer 1936: round lenses
    assert props.cs_m == pytest.approx(cs, rel=1e-6)
    assert props.cc_m == pytest.approx(cc, rel=1e-6)
