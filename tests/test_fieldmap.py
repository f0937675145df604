"""Tests of the Hermite interpolant, the ghost extension and the potential maps."""

import numpy as np
import pytest
from scipy import special

from tracer.fieldmap import (
    ARM_MIN,
    even_slope,
    ghost_extend,
    hermite_data,
    hermite_eval,
    hermite_eval_many,
)

RNG = np.random.default_rng(20240611)
AXIS_ONLY = np.array([False, False, True, False])  # z ends and r_max one-sided, axis mirrored
NO_MIRROR = np.array([False, False, False, False])


def node_grid(nz, nr, hz, hr, z0=0.0, r0=0.0):
    z = z0 + hz * np.arange(nz)
    r = r0 + hr * np.arange(nr)
    return np.meshgrid(z, r, indexing="ij")


def free_raster(nz, nr):
    """owner, arm, arm_owner of a grid without electrodes."""
    return (np.full((nz, nr), -1, np.int64), np.ones((nz, nr, 4)), np.full((nz, nr, 4), -1, np.int64))


def from_values(v, hz, hr, reflect):
    """Hermite data of node values on a grid without electrodes; the r_min edge is the axis when
    it reflects."""
    owner, arm, arm_owner = free_raster(*v.shape)
    return hermite_data(v, owner, arm, arm_owner, np.zeros(0), hz, hr, reflect, bool(reflect[2]))


def evaluate(h, hz, hr, z, r, mirror=False, z0=0.0, r0=0.0):
    nz, nr = h.shape[1:]
    return hermite_eval_many(h, z0, r0, hz, hr, nz, nr, mirror, np.ravel(z), np.ravel(r))


# ---------------------------------------------------------------------------------------------
# The bicubic Hermite patch


def test_bicubic_polynomials_are_exact_with_exact_derivatives():
    """A bicubic Hermite patch reproduces every polynomial of degree <= 3 in each variable
    (common practice: the tensor-product cubic Hermite basis spans these polynomials)."""
    c = RNG.normal(size=(4, 4))
    pz = np.polynomial.polynomial
    hz, hr = 0.13, 0.07
    Z, R = node_grid(9, 7, hz, hr, z0=-0.4, r0=0.2)

    def val(dz, dr, z, r):
        cc = pz.polyder(pz.polyder(c, dz, axis=0), dr, axis=1) if (dz or dr) else c
        return pz.polyval2d(z, r, cc)

    h = np.array([val(0, 0, Z, R), val(1, 0, Z, R), val(0, 1, Z, R), val(1, 1, Z, R)])
    z = RNG.uniform(-0.4, -0.4 + 8 * hz, 500)
    r = RNG.uniform(0.2, 0.2 + 6 * hr, 500)
    v, vz, vr = evaluate(h, hz, hr, z, r, z0=-0.4, r0=0.2)
    scale = np.abs(c).sum()
    assert np.max(np.abs(v - val(0, 0, z, r))) < 1e-13 * scale
    assert np.max(np.abs(vz - val(1, 0, z, r))) < 1e-12 * scale
    assert np.max(np.abs(vr - val(0, 1, z, r))) < 1e-12 * scale


def test_quadratics_are_exact_with_difference_derivatives():
    """Second-order differences (central and one-sided) are exact for quadratics (common practice),
    so node values of any quadratic give back the quadratic and its gradient exactly."""
    hz, hr = 0.05, 0.04
    Z, R = node_grid(12, 10, hz, hr)
    f = lambda z, r: z**2 - 0.5 * r**2 + 3 * z * r + 0.7  # noqa: E731
    h = from_values(f(Z, R), hz, hr, NO_MIRROR)
    z = RNG.uniform(0, 11 * hz, 400)
    r = RNG.uniform(0, 9 * hr, 400)
    v, vz, vr = evaluate(h, hz, hr, z, r)
    assert np.max(np.abs(v - f(z, r))) < 1e-13
    assert np.max(np.abs(vz - (2 * z + 3 * r))) < 1e-12
    assert np.max(np.abs(vr - (-r + 3 * z))) < 1e-12


def test_uniform_field_is_exact():
    """V = -E0 z is the potential of a uniform field E0 (any electrostatics text, e.g. Jackson 1999)."""
    hz, hr = 1e-3, 1e-3
    Z, R = node_grid(20, 15, hz, hr)
    h = from_values(-250.0 * Z, hz, hr, AXIS_ONLY)
    z = RNG.uniform(0, 19 * hz, 300)
    r = RNG.uniform(-14 * hr, 14 * hr, 300)
    v, vz, vr = evaluate(h, hz, hr, z, r, mirror=True)
    assert np.max(np.abs(v + 250.0 * z)) < 1e-12
    assert np.max(np.abs(vz + 250.0)) < 1e-9
    assert np.max(np.abs(vr)) < 1e-9


def bessel_mode(k):
    """V = I0(k r) cos(k z), a solution of Laplace's equation in cylindrical coordinates
    (separation of variables, Jackson 1999 §3.7); I0, I1 from scipy.special."""
    return (lambda z, r: special.i0(k * r) * np.cos(k * z),
            lambda z, r: -k * special.i0(k * r) * np.sin(k * z),
            lambda z, r: k * special.i1(k * r) * np.cos(k * z))


def interpolation_errors(cells):
    """Max errors of V and of the field over random points, for an axial Bessel mode."""
    v_ex, vz_ex, vr_ex = bessel_mode(2 * np.pi)
    hz = 1.0 / cells
    Z, R = node_grid(cells + 1, cells // 2 + 1, hz, hz)
    h = from_values(v_ex(Z, R), hz, hz, AXIS_ONLY)
    rng = np.random.default_rng(5)
    z = rng.uniform(0, 1, 4000)
    r = rng.uniform(0, 0.5, 4000)
    v, vz, vr = evaluate(h, hz, hz, z, r, mirror=True)
    return (np.max(np.abs(v - v_ex(z, r))),
            np.max(np.hypot(vz - vz_ex(z, r), vr - vr_ex(z, r))))


def test_convergence_order_on_a_bessel_mode():
    """Hermite interpolation on second-order difference derivatives: potential error O(h^3),
    field error O(h^2) (common practice: one order lost per derivative of the O(h^2) slopes)."""
    errors = [interpolation_errors(c) for c in (16, 32, 64)]
    pot = [e[0] for e in errors]
    fld = [e[1] for e in errors]
    order_v = np.log2(pot[1] / pot[2])
    order_e = np.log2(fld[1] / fld[2])
    assert order_v > 2.8, pot
    assert order_e > 1.8, fld
    assert pot[2] < 1e-4 * special.i0(np.pi)  # relative to the largest |V| on the grid


def test_field_is_minus_the_gradient_of_the_potential():
    """The returned derivatives are those of the returned patch: central finite differences of V
    agree (common practice for checking an analytic gradient)."""
    v_ex = bessel_mode(3.0)[0]
    hz, hr = 0.05, 0.04
    Z, R = node_grid(21, 13, hz, hr)
    h = from_values(v_ex(Z, R), hz, hr, AXIS_ONLY)
    z = RNG.uniform(0.01, 0.99, 200)
    r = RNG.uniform(-0.47, 0.47, 200)
    d = 1e-6
    v, vz, vr = evaluate(h, hz, hr, z, r, mirror=True)
    vzp = evaluate(h, hz, hr, z + d, r, mirror=True)[0]
    vzm = evaluate(h, hz, hr, z - d, r, mirror=True)[0]
    vrp = evaluate(h, hz, hr, z, r + d, mirror=True)[0]
    vrm = evaluate(h, hz, hr, z, r - d, mirror=True)[0]
    assert np.max(np.abs((vzp - vzm) / (2 * d) - vz)) < 1e-7
    assert np.max(np.abs((vrp - vrm) / (2 * d) - vr)) < 1e-7


def test_c1_across_cell_edges():
    """Bicubic Hermite patches sharing node data are C1 across cell edges (common practice),
    for any node data, here random numbers."""
    hz, hr = 0.1, 0.2
    h = RNG.normal(size=(4, 6, 5))
    eps = 1e-10
    for iz in range(1, 5):
        r = RNG.uniform(0, 0.8, 20)
        z = np.full(20, iz * hz)
        lo = np.array(evaluate(h, hz, hr, z - eps, r))
        hi = np.array(evaluate(h, hz, hr, z + eps, r))
        assert np.max(np.abs(lo - hi)) < 1e-6  # a jump in value or slope would be O(1)
    for ir in range(1, 4):
        z = RNG.uniform(0, 0.5, 20)
        r = np.full(20, ir * hr)
        lo = np.array(evaluate(h, hz, hr, z, r - eps))
        hi = np.array(evaluate(h, hz, hr, z, r + eps))
        assert np.max(np.abs(lo - hi)) < 1e-6  # a jump in value or slope would be O(1)


def test_mirror_is_even_and_c1_across_the_axis():
    """With the axis mirrored the interpolant is even in r and its r-slope vanishes on the axis,
    so it is C1 across r = 0 (symmetry of an axisymmetric potential, common practice)."""
    hz, hr = 0.1, 0.1
    v = RNG.normal(size=(8, 6))
    h = from_values(v, hz, hr, AXIS_ONLY)
    z = RNG.uniform(0, 0.7, 50)
    r = RNG.uniform(0, 0.5, 50)
    vp, vzp, vrp = evaluate(h, hz, hr, z, r, mirror=True)
    vm, vzm, vrm = evaluate(h, hz, hr, z, -r, mirror=True)
    assert np.array_equal(vp, vm) and np.array_equal(vzp, vzm) and np.array_equal(vrp, -vrm)
    eps = 1e-10
    on = np.array(evaluate(h, hz, hr, z, np.full(50, eps), mirror=True))
    assert np.max(np.abs(on[2])) < 1e-7 * np.abs(h[0]).max() / hr
    below = np.array(evaluate(h, hz, hr, z, np.full(50, -eps), mirror=True))
    assert np.max(np.abs(on[:2] - below[:2])) < 1e-8


def harmonic_quartic():
    """V = z^4 - 3 z^2 r^2 + 3 r^4 / 8 and its derivatives: the axisymmetric series V(z) - V''(z)
    r^2 / 4 + V''''(z) r^4 / 64 (Hawkes & Kasper, Principles of Electron Optics) of V(z) = z^4,
    which ends there; a solution of Laplace's equation about the axis."""
    return (lambda z, r: z ** 4 - 3 * z ** 2 * r ** 2 + 3 * r ** 4 / 8,
            lambda z, r: 4 * z ** 3 - 6 * z * r ** 2,
            lambda z, r: -6 * z ** 2 * r + 1.5 * r ** 3,
            lambda z, r: -12 * z * r)


@pytest.mark.parametrize("exact", [True, False])
def test_first_cell_row_is_even_in_r(exact):
    """Next to the axis E_r / r is a series in r^2 (Hawkes & Kasper, Principles of Electron
    Optics: V(z) - V''(z) r^2 / 4 + ...), so its term linear in r vanishes: a cubic in r fitted to
    E_r / r across the first cell has linear and cubic coefficients at round-off, with exact node
    derivatives of the harmonic quartic and with the difference derivatives of its node values.
    The even patch reproduces the r^2 and r^4 terms exactly: along r at a node, V and E_r are the
    quartic's own, with exact derivatives and with the node values alone (the slope one row off
    the axis from ``even_slope``)."""
    hz, hr = 0.1, 0.1
    fs = harmonic_quartic()
    Z, R = node_grid(8, 6, hz, hr, z0=0.2)
    h = (np.array([f(Z, R) for f in fs]) if exact
         else from_values(fs[0](Z, R), hz, hr, AXIS_ONLY))
    r = np.linspace(0.02, 1.0, 40) * hr
    for z in (0.2 + 2 * hz, 0.2 + 3.37 * hz):
        v, vz, vr = evaluate(h, hz, hr, np.full(r.size, z), r, mirror=True, z0=0.2)
        c = np.polynomial.polynomial.polyfit(r, -vr / r, 3)
        assert abs(c[1]) * hr < 1e-10 * abs(c[0]), c
        assert abs(c[3]) * hr ** 3 < 1e-10 * abs(c[0]), c
    v, _, vr = evaluate(h, hz, hr, np.full(r.size, 0.2 + 2 * hz), r, mirror=True, z0=0.2)
    assert np.max(np.abs(v - fs[0](0.2 + 2 * hz, r))) < 1e-14
    assert np.max(np.abs(vr - fs[2](0.2 + 2 * hz, r))) < 1e-13


def test_even_slope_is_exact_to_the_r4_term():
    """The slope one node off a mirror from three values is exact for a + b r^2 + c r^4 (the first
    three terms of the series in r^2 about an axis, Hawkes & Kasper, Principles of Electron
    Optics) and its error falls as h^5 for cosh r (scipy's cosh, whose series goes on); the central
    difference is wrong in the r^3 term (its error falls only as h^3)."""
    a, b, c, h = 0.3, -1.7, 2.9, 0.13
    f = lambda r: a + b * r ** 2 + c * r ** 4  # noqa: E731
    assert even_slope(f(0.0), f(h), f(2 * h), h) == pytest.approx(2 * b * h + 4 * c * h ** 3,
                                                                   rel=1e-13, abs=0)
    err = [abs(even_slope(1.0, np.cosh(h), np.cosh(2 * h), h) - np.sinh(h)) for h in (0.1, 0.05)]
    central = [abs((np.cosh(2 * h) - 1.0) / (2 * h) - np.sinh(h)) for h in (0.1, 0.05)]
    assert np.log2(err[0] / err[1]) == pytest.approx(5.0, abs=0.2)
    assert np.log2(central[0] / central[1]) == pytest.approx(3.0, abs=0.2)


@pytest.mark.parametrize("mirror", [True, False])
def test_first_cell_row_is_c1_with_its_neighbours(mirror):
    """The even patches of the first row keep C1 continuity with the second row and with each
    other along the axis (value and both slopes equal on the shared walls, common practice for a
    C1 interpolant), for random node data, with the axis (mirror) and without it."""
    hz, hr = 0.1, 0.2
    h = RNG.normal(size=(4, 6, 5))
    h[2:, :, 0] = 0.0          # the mirrored node data have no r-slope on the axis
    eps = 1e-10
    z = RNG.uniform(0, 0.5, 20)
    lo = np.array(evaluate(h, hz, hr, z, np.full(20, hr - eps), mirror=mirror))
    hi = np.array(evaluate(h, hz, hr, z, np.full(20, hr + eps), mirror=mirror))
    assert np.max(np.abs(lo - hi)) < 1e-6  # a jump in value or slope would be O(1)
    r = RNG.uniform(0, hr, 20)
    for iz in range(1, 5):
        lo = np.array(evaluate(h, hz, hr, np.full(20, iz * hz - eps), r, mirror=mirror))
        hi = np.array(evaluate(h, hz, hr, np.full(20, iz * hz + eps), r, mirror=mirror))
        assert np.max(np.abs(lo - hi)) < 1e-6


def test_outside_points_use_the_boundary_cell():
    """Clamping: beyond the last node the boundary cell's cubic continues smoothly."""
    hz = hr = 0.1
    Z, R = node_grid(6, 6, hz, hr)
    f = lambda z, r: 1 + z - 2 * r + z * r  # noqa: E731
    h = from_values(f(Z, R), hz, hr, NO_MIRROR)
    z = np.array([-0.05, 0.55, 0.2, 0.2])
    r = np.array([0.2, 0.2, -0.03, 0.52])
    v = evaluate(h, hz, hr, z, r)[0]
    assert np.allclose(v, f(z, r), atol=1e-12)
    nan = hermite_eval(h, 0.0, 0.0, hz, hr, 6, 6, False, np.nan, 0.1)
    assert np.all(np.isnan(nan))


# ---------------------------------------------------------------------------------------------
# Ghost extension


def line_raster(n, surface_at):
    """A 1-D row of nodes along z (nr = 1) with a conductor from ``surface_at`` (in spacings) on."""
    owner = np.where(np.arange(n) >= surface_at, 0, -1).astype(np.int64)[:, None]
    arm = np.ones((n, 1, 4))
    arm_owner = np.full((n, 1, 4), -1, np.int64)
    last = int(np.ceil(surface_at)) - 1
    arm[last, 0, 0] = surface_at - last
    arm_owner[last, 0, 0] = 0
    return owner, arm, arm_owner, last


@pytest.mark.parametrize("frac", [0.02, 0.3, ARM_MIN, 0.8, 1.0])
def test_ghost_value_continues_a_quadratic(frac):
    """Quadratic extrapolation through the surface value reproduces a quadratic (common practice)."""
    n = 8
    surface_at = 4 + frac
    owner, arm, arm_owner, last = line_raster(n, surface_at)
    f = lambda x: 0.3 + 0.2 * (x - surface_at) - 0.05 * (x - surface_at) ** 2  # noqa: E731
    x = np.arange(n, dtype=float)
    v = np.where(owner[:, 0] < 0, f(x), 0.3)[:, None]
    g, ext = ghost_extend(v, owner, arm, arm_owner, np.array([0.3]))
    assert ext[last + 1, 0] and not ext[last + 2, 0]
    assert g[last + 1, 0] == pytest.approx(f(last + 1.0), abs=1e-13)
    assert g[last + 2, 0] == 0.3


def test_ghost_value_does_not_amplify_noise_at_tiny_arms():
    """The ghost value's response to an error on one free node stays bounded as the arm -> 0
    (a plain quadratic through the nearest node amplifies it by about 2/arm)."""
    n = 8
    worst = 0.0
    for frac in np.geomspace(1e-4, 1.0, 40):
        owner, arm, arm_owner, last = line_raster(n, 4 + frac)
        for node in range(last + 1):
            bump = np.zeros((n, 1))
            bump[node, 0] = 1.0
            g, _ = ghost_extend(bump, owner, arm, arm_owner, np.zeros(1))
            worst = max(worst, abs(g[last + 1, 0]))
    assert worst <= 3.0 + 1e-12


def sphere_case(cells_per_radius):
    """A ball at 1 V in axial symmetry, hand-rastered: V = a / rho outside (Jackson 1999, §1.
    the potential of a charged conducting sphere)."""
    a = 1.0
    h = a / cells_per_radius
    nz, nr = 4 * cells_per_radius + 1, 2 * cells_per_radius + 1
    z0 = -2.0 * a
    Z, R = node_grid(nz, nr, h, h, z0=z0)
    rho = np.hypot(Z, R)
    owner = np.where(rho <= a, 0, -1).astype(np.int64)
    arm = np.ones((nz, nr, 4))
    arm_owner = np.full((nz, nr, 4), -1, np.int64)
    for k, (dz, dr) in enumerate([(1, 0), (-1, 0), (0, 1), (0, -1)]):
        # smallest t in (0, 1] with |(Z, R) + t h (dz, dr)| = a
        b = Z * dz + R * dr
        c = rho**2 - a**2
        disc = b**2 - c
        with np.errstate(invalid="ignore"):
            t = (-b - np.sqrt(disc)) / h
        hit = (owner < 0) & (disc >= 0) & (t > 0) & (t <= 1)
        arm[..., k] = np.where(hit, t, 1.0)
        arm_owner[..., k] = np.where(hit, 0, -1)
    with np.errstate(divide="ignore"):
        v = np.where(owner < 0, a / rho, 1.0)
    return dict(h=h, z0=z0, a=a, owner=owner, arm=arm, arm_owner=arm_owner, v=v, nz=nz, nr=nr)


def near_surface_points(case, n=4000):
    """Free points between the surface and one spacing outside it."""
    rng = np.random.default_rng(11)
    theta = rng.uniform(0, np.pi, n)
    rho = case["a"] + rng.uniform(1e-9, case["h"], n)
    return rho * np.cos(theta), rho * np.sin(theta), rho, theta


def sphere_errors(case, extend):
    arm, arm_owner, owner = case["arm"], case["arm_owner"], case["owner"]
    if not extend:  # the plain interpolant of the kinked node values
        owner, arm, arm_owner = free_raster(case["nz"], case["nr"])
    h = hermite_data(case["v"], owner, arm, arm_owner, np.ones(1), case["h"], case["h"], AXIS_ONLY, True)
    z, r, rho, theta = near_surface_points(case)
    v, vz, vr = hermite_eval_many(h, case["z0"], 0.0, case["h"], case["h"], case["nz"], case["nr"],
                                  True, z, r)
    e_exact = case["a"] / rho**2
    e_err = np.hypot(-vz - e_exact * np.cos(theta), -vr - e_exact * np.sin(theta))
    return v, np.max(np.abs(v - case["a"] / rho)), np.max(e_err) / case["a"]


def radial_profiles(evaluate_v, a, width, n_theta=361, n_rho=100):
    """V on radial lines from a sphere's surface out to ``width`` beyond it."""
    theta = np.linspace(0, np.pi, n_theta)[:, None]
    rho = a + np.linspace(0, width, n_rho)[None, :]
    z, r = rho * np.cos(theta), rho * np.sin(theta)
    return evaluate_v(z, r), rho


def test_no_ringing_near_a_curved_conductor():
    """Between the last free node and a sphere's surface the interpolant follows V = a / rho
    (Jackson 1999, §1): small error, falling monotonically away from the surface, no overshoot
    above the electrode's 1 V beyond the error bound, and far smaller errors than the plain interpolant
    of the kinked node values."""
    case = sphere_case(16)
    v, err_v, err_e = sphere_errors(case, extend=True)
    _, plain_v, plain_e = sphere_errors(case, extend=False)
    assert err_v < 5e-4
    assert err_e < 0.015
    assert plain_v > 10 * err_v
    assert plain_e > 10 * err_e
    h = hermite_data(case["v"], case["owner"], case["arm"], case["arm_owner"], np.ones(1),
                     case["h"], case["h"], AXIS_ONLY, True)
    profile, _ = radial_profiles(
        lambda z, r: hermite_eval_many(h, case["z0"], 0.0, case["h"], case["h"], case["nz"],
                                       case["nr"], True, z.ravel(), r.ravel())[0].reshape(z.shape),
        case["a"], 2 * case["h"])
    assert np.all(np.diff(profile, axis=1) < 0)
    assert profile.max() - 1.0 < 5e-4


def test_near_surface_error_converges():
    """The near-surface errors fall with the cell size: third order for V, second for E
    (the orders of the interpolation in open space, test_convergence_order_on_a_bessel_mode)."""
    coarse = sphere_errors(sphere_case(16), extend=True)
    fine = sphere_errors(sphere_case(32), extend=True)
    assert np.log2(coarse[1] / fine[1]) > 2.7
    assert np.log2(coarse[2] / fine[2]) > 1.6


# ---------------------------------------------------------------------------------------------
# Potential maps on rastered geometry

from tracer.config import loads  # noqa: E402
from tracer.fieldmap import BasisMaps, PotentialMap, basis_maps  # noqa: E402
from tracer.geometry import rasterize, shape_table  # noqa: E402
from tracer.grid import Grid  # noqa: E402

BALL = """
title = "a ball and a ring (test geometry)"
[domain]
symmetry = "axial"
z_mm = [-20.0, 20.0]
r_mm = 20.0
cell_mm = {cell}
edges = "ground"
[[electrode]]
name = "ball"
voltage_V = 250.0
[[electrode.arc]]
center_z_mm = 0.0
radii_mm = [0.0, {radius}]
angles_deg = [0.0, 180.0]
[[electrode]]
name = "ring"
voltage_V = -40.0
[[electrode.rect]]
z_mm = [-3.0, 3.0]
r_mm = [17.0, 19.0]
"""


def ball_maps(cell_mm=1.0, radius_mm=10.0):
    """Basis maps on the rastered ball-and-ring geometry with analytic node values: the ball's map
    is a / rho (a charged sphere, Jackson 1999, §1), the ring's a smooth function that is 0 on the
    ball; only the interpolation is tested here, not the solver."""
    setup = loads(BALL.format(cell=cell_mm, radius=radius_mm))
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    raster = rasterize(table, grid)
    Z, R = np.meshgrid(grid.z, grid.r, indexing="ij")
    a = radius_mm * 1e-3
    rho = np.hypot(Z, R)
    free = raster.owner < 0
    with np.errstate(divide="ignore"):
        ball = np.where(free, a / rho, (raster.owner == 0) * 1.0)
    ring = np.where(free, np.clip((rho - a) / 0.008, 0.0, None) ** 2, (raster.owner == 1) * 1.0)
    maps = BasisMaps.build(grid, table, raster, ("ball", "ring"), (250.0, -40.0),
                           np.array([ball, ring]), (), setup.geometry_hash())
    return setup, maps, a


def test_inside_an_electrode_the_potential_is_its_voltage():
    """A conductor is an equipotential with no field inside (any electrostatics text)."""
    setup, maps, a = ball_maps()
    pm = maps.combine()
    rng = np.random.default_rng(3)
    rho = a * np.sqrt(rng.uniform(0, 1, 500)) * 0.999
    theta = rng.uniform(0, np.pi, 500)
    z, r = rho * np.cos(theta), rho * np.sin(theta)
    assert np.all(pm.potential(z, r) == 250.0)
    ez, er = pm.field(z, r)
    assert np.all(ez == 0.0) and np.all(er == 0.0)
    ring = pm.potential(np.full(10, 0.0), np.linspace(0.0171, 0.0189, 10))
    assert np.all(ring == -40.0)


def test_potential_map_follows_the_sphere_potential_near_its_surface():
    """Free points within one cell of the rastered sphere: V and E match a / rho and a / rho^2
    (Jackson 1999, §1), V falls monotonically away from the surface and overshoots the ball's
    voltage by less than that error bound."""
    _, maps, a = ball_maps(cell_mm=0.5)
    pm = maps.combine({"ball": 1.0, "ring": 0.0})
    rng = np.random.default_rng(4)
    theta = rng.uniform(0, np.pi, 3000)
    rho = a + rng.uniform(1e-9, 0.5e-3, 3000)
    z, r = rho * np.cos(theta), rho * np.sin(theta)
    v = pm.potential(z, r)
    ez, er = pm.field(z, r)
    assert np.max(np.abs(v - a / rho)) < 5e-4
    e = a / rho**2
    assert np.max(np.hypot(ez - e * np.cos(theta), er - e * np.sin(theta))) < 0.02 / a
    profile, _ = radial_profiles(pm.potential, a, 1e-3)
    assert np.all(np.diff(profile, axis=1) < 0)
    assert profile.max() - 1.0 < 5e-4


def test_potential_map_field_is_minus_gradient():
    """field() is minus the gradient of potential() (central differences, common practice)."""
    _, maps, a = ball_maps()
    pm = maps.combine()
    rng = np.random.default_rng(6)
    theta = rng.uniform(0, np.pi, 300)
    rho = rng.uniform(1.05 * a, 1.6 * a, 300)
    z, r = rho * np.cos(theta), rho * np.sin(theta)
    d = 1e-9
    ez, er = pm.field(z, r)
    gz = (pm.potential(z + d, r) - pm.potential(z - d, r)) / (2 * d)
    gr = (pm.potential(z, r + d) - pm.potential(z, r - d)) / (2 * d)
    scale = np.max(np.hypot(ez, er))
    assert np.max(np.abs(ez + gz)) < 1e-6 * scale
    assert np.max(np.abs(er + gr)) < 1e-6 * scale


def test_combine_is_a_weighted_sum():
    """Superposition: the potential is linear in the electrode voltages (Laplace's equation is
    linear; any electrostatics text)."""
    _, maps, a = ball_maps()
    pm = maps.combine({"ball": 2.0, "ring": -3.0})
    assert np.allclose(pm.hermite, 2.0 * maps.hermite[0] - 3.0 * maps.hermite[1], rtol=0, atol=1e-14)
    one = maps.combine({"ball": 1.0, "ring": 0.0})
    two = maps.combine({"ball": 0.0, "ring": 1.0})
    rng = np.random.default_rng(8)
    z = rng.uniform(-0.02, 0.02, 400)
    r = rng.uniform(0, 0.02, 400)
    assert np.allclose(pm.potential(z, r), 2 * one.potential(z, r) - 3 * two.potential(z, r),
                       rtol=0, atol=1e-12)
    default = maps.combine()
    assert default.voltages == (250.0, -40.0)
    assert maps.combine({"ring": 5.0}).voltages == (250.0, 5.0)
    with pytest.raises(ValueError, match="unknown electrode 'rnig'"):
        maps.combine({"rnig": 1.0})


def test_potential_map_is_a_plain_value_object():
    _, maps, _ = ball_maps()
    pm = maps.combine()
    assert isinstance(pm, PotentialMap)
    assert pm.hermite.shape == (4, maps.grid.nz, maps.grid.nr)
    assert pm.potential(0.015, 0.0).shape == ()
    assert pm.potential(np.zeros((2, 3)), 0.012).shape == (2, 3)


SPHERES = """
title = "concentric spheres (test geometry)"
[domain]
symmetry = "axial"
z_mm = [-20.0, 20.0]
r_mm = 20.0
cell_mm = 0.5
edges = "ground"
[[electrode]]
name = "inner"
voltage_V = 1.0
[[electrode.arc]]
center_z_mm = 0.0
radii_mm = [0.0, 10.0]
angles_deg = [0.0, 180.0]
[[electrode]]
name = "outer"
voltage_V = 0.0
[[electrode.arc]]
center_z_mm = 0.0
radii_mm = [18.0, 19.5]
angles_deg = [0.0, 180.0]
"""


def test_solved_concentric_spheres_near_the_inner_surface():
    """A real solve of concentric spheres (V = (1/rho - 1/b) / (1/a - 1/b), Jackson 1999, §1.
    problems / any electrostatics text): within one cell of the inner sphere the potential stays
    within 5e-4 V of the analytic one, falls monotonically (no ringing), overshoots 1 V by less
    than that, and the field is within 1.2 % -- far better than the plain interpolant of the
    same node values without the ghost extension."""
    from tracer.solver import solve_unit_maps

    setup = loads(SPHERES)
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    maps = basis_maps(setup, solve_unit_maps(grid, table))
    pm = maps.combine()
    a, b, h = 0.010, 0.018, grid.hz
    theta = np.linspace(0, np.pi, 181)[:, None]
    rho = a + np.linspace(1e-9, h, 40)[None, :]
    z, r = rho * np.cos(theta), rho * np.sin(theta)
    v = pm.potential(z, r)
    ez, er = pm.field(z, r)
    e = np.broadcast_to(1.0 / (rho**2 * (1 / a - 1 / b)), z.shape)
    err_v = np.max(np.abs(v - (1 / rho - 1 / b) / (1 / a - 1 / b)))
    err_e = np.max(np.hypot(ez - e * np.cos(theta), er - e * np.sin(theta)) / e)
    assert err_v < 5e-4
    assert np.all(np.diff(v, axis=1) < 0)
    assert v.max() - 1.0 < 5e-4
    assert err_e < 0.012
    owner, arm, arm_owner = free_raster(grid.nz, grid.nr)
    plain = hermite_data(maps.unit[0], owner, arm, arm_owner, np.zeros(0), h, h, AXIS_ONLY, True)
    _, pz, pr = hermite_eval_many(plain, grid.z0, 0.0, h, h, grid.nz, grid.nr, True, z.ravel(), r.ravel())
    plain_e = np.hypot(-pz - (e * np.cos(theta)).ravel(), -pr - (e * np.sin(theta)).ravel()) / e.ravel()
    assert np.max(plain_e) > 10 * err_e
