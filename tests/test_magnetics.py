"""Magnetic sources (tracer.magnetics) against closed forms, the Biot-Savart law and scipy.

Sources named beside each check: Jackson, Classical Electrodynamics (3rd ed. 1999) §5.5 for the
loop; scipy.special for the elliptic integrals; the Biot-Savart law integrated by scipy.integrate;
the finite solenoid's central field and the thick solenoid's axial field (common practice); the
Helmholtz pair (Helmholtz, common practice); Glaser (1941) for the bell-shaped field; the
off-axis continuation of an axially symmetric harmonic field by Whittaker's integral (from memory).
"""

import math

import numpy as np
import pytest
from scipy import constants, special
from scipy.integrate import quad

import tracer.magnetics.coil as coil_module
from tracer.grid import Grid
from tracer.magnetics.coil import Coil, coil_field
from tracer.magnetics.loop import ellip_ke, loop_field, loop_unit
from tracer.magnetics.profile import AxialProfile
from tracer.magnetics.uniform import Box, Sector, UniformField
from tracer.magnetics.units import MagneticUnits

MU0 = constants.mu_0


# ---------------------------------------------------------------- the loop


@pytest.mark.parametrize("m", [0.0, 1e-12, 1e-4, 0.3, 0.5, 0.9, 0.999, 1.0 - 1e-9])
def test_elliptic_integrals_match_scipy(m):
    """K(m), E(m) by the AGM against scipy.special.ellipk / ellipe (parameter m = k^2), to a few
    units in the last place."""
    k, e = ellip_ke(m)
    assert k == pytest.approx(special.ellipk(m), rel=4e-16 * max(1.0, special.ellipk(m)), abs=0)
    assert e == pytest.approx(special.ellipe(m), rel=2e-15, abs=0)


def test_loop_on_axis_is_the_closed_form():
    """B_z = mu0 I a^2 / (2 (a^2 + z^2)^(3/2)) on the axis, B_r = A = 0 (Jackson 1999, §5.5)."""
    a, current = 0.03, 2.5
    z = np.linspace(-0.2, 0.2, 41)
    aphi, bz, br = loop_field(a, 0.01, current, z, 0.0)
    exact = MU0 * current * a * a / (2.0 * (a * a + (z - 0.01) ** 2) ** 1.5)
    np.testing.assert_allclose(bz, exact, rtol=1e-15)
    assert np.all(aphi == 0.0) and np.all(br == 0.0)


def biot_savart(a, z, r):
    """A_phi, B_z, B_r of a 1 A loop at the origin by the Biot-Savart law, integrated with
    scipy.integrate.quad over the loop's angle."""
    d = lambda p: math.sqrt(a * a + r * r + z * z - 2 * a * r * math.cos(p))  # noqa: E731
    aphi = MU0 * a / (4 * math.pi) * quad(lambda p: math.cos(p) / d(p), 0, 2 * math.pi,
                                          epsabs=0, epsrel=1e-12, limit=400)[0]
    bz = MU0 * a / (4 * math.pi) * quad(lambda p: (a - r * math.cos(p)) / d(p) ** 3, 0, 2 * math.pi,
                                        epsabs=0, epsrel=1e-12, limit=400)[0]
    br = MU0 * a / (4 * math.pi) * quad(lambda p: z * math.cos(p) / d(p) ** 3, 0, 2 * math.pi,
                                        epsabs=0, epsrel=1e-12, limit=400)[0]
    return aphi, bz, br


@pytest.mark.filterwarnings("ignore::scipy.integrate.IntegrationWarning")  # quad's own round-off note near the axis
@pytest.mark.parametrize("z, r", [(0.0, 0.01), (0.013, 0.007), (-0.04, 0.05), (0.002, 0.0195),
                                  (0.3, 0.2), (0.0, 1e-4), (1e-3, 0.021)])
def test_loop_off_axis_matches_biot_savart(z, r):
    """A_phi, B_z, B_r off the axis against the Biot-Savart integrals (scipy.integrate.quad),
    near the wire and far from it."""
    a = 0.02
    got = loop_field(a, 0.0, 1.0, z, r)
    want = biot_savart(a, z, r)
    scale = max(abs(want[1]), abs(want[2]))
    assert float(got[0]) == pytest.approx(want[0], rel=1e-9, abs=0)
    assert float(got[1]) == pytest.approx(want[1], rel=1e-10, abs=1e-12 * scale)
    assert float(got[2]) == pytest.approx(want[2], rel=1e-10, abs=1e-12 * scale)


def test_loop_far_field_is_a_dipole():
    """Far away the loop is a dipole of moment m = I pi a^2: B_z = mu0 m (3 cos^2 t - 1)/(4 pi d^3),
    B_r = mu0 m 3 sin t cos t / (4 pi d^3) (Jackson 1999, §5.6); error of order (a/d)^2."""
    a = 0.01
    d, t = 2.0, 0.6
    z, r = d * math.cos(t), d * math.sin(t)
    _, bz, br = loop_field(a, 0.0, 1.0, z, r)
    m = math.pi * a * a
    assert float(bz) == pytest.approx(MU0 * m * (3 * math.cos(t) ** 2 - 1) / (4 * math.pi * d ** 3), rel=1e-4, abs=0)
    assert float(br) == pytest.approx(MU0 * m * 3 * math.sin(t) * math.cos(t) / (4 * math.pi * d ** 3), rel=1e-4, abs=0)


def test_loop_field_is_the_curl_of_its_vector_potential():
    """B_z = (1/r) d(r A)/dr and B_r = -dA/dz, by central differences (Jackson 1999, §5.5)."""
    a, z, r, h = 0.02, 0.013, 0.007, 1e-6
    f = lambda z, r: float(loop_field(a, 0.0, 1.0, z, r)[0])  # noqa: E731
    _, bz, br = loop_field(a, 0.0, 1.0, z, r)
    assert ((r + h) * f(z, r + h) - (r - h) * f(z, r - h)) / (2 * h * r) == pytest.approx(float(bz), rel=1e-8, abs=0)
    assert -(f(z + h, r) - f(z - h, r)) / (2 * h) == pytest.approx(float(br), rel=1e-8, abs=0)


# ---------------------------------------------------------------- coils


def test_thin_solenoid_central_field():
    """A sheet solenoid's central field mu0 n I L / sqrt(L^2 + 4 R^2) (common practice)."""
    length, radius, turns, current = 0.1, 0.02, 400, 1.5
    c = Coil("s", (0.0, length), (radius, radius), turns, current)
    _, bz, br = coil_field(c, length / 2, 0.0)
    n = turns / length
    assert float(bz) == pytest.approx(MU0 * n * current * length / math.hypot(length, 2 * radius), rel=1e-12, abs=0)
    assert float(br) == 0.0


def test_thick_solenoid_axial_field():
    """A winding of rectangular section on the axis: B = mu0 J / 2 [z ln((R2 + sqrt(R2^2 + z^2)) /
    (R1 + sqrt(R1^2 + z^2)))] between the ends' z (common practice), J = N I / area."""
    z1, z2, r1, r2, turns, current = -0.01, 0.03, 0.015, 0.025, 300, 2.0
    c = Coil("thick", (z1, z2), (r1, r2), turns, current)
    z = np.array([-0.05, -0.02, 0.0, 0.01, 0.029, 0.06])
    j = turns * current / ((z2 - z1) * (r2 - r1))

    def g(u):
        return u * np.log((r2 + np.hypot(r2, u)) / (r1 + np.hypot(r1, u)))

    exact = MU0 * j / 2 * (g(z2 - z) - g(z1 - z))
    np.testing.assert_allclose(coil_field(c, z, 0.0)[1], exact, rtol=1e-12)


def test_long_solenoid_limit():
    """Deep inside a long solenoid B = mu0 n I, uniform across the bore (common practice); at the
    mouth, half of it."""
    length, radius, turns, current = 2.0, 0.01, 20000, 0.1
    c = Coil("long", (-length / 2, length / 2), (radius, radius + 0.001), turns, current)
    inside = MU0 * turns / length * current
    _, bz, br = coil_field(c, np.array([0.0, 0.0, 0.1]), np.array([0.0, 0.005, 0.008]))
    np.testing.assert_allclose(bz, inside, rtol=1e-4)
    np.testing.assert_allclose(br, 0.0, atol=1e-6 * inside)
    assert float(coil_field(c, length / 2, 0.0)[1]) == pytest.approx(inside / 2, rel=1e-3)


def test_helmholtz_pair_is_flat_to_fourth_order():
    """Two loops of radius a at +-a/2: B(0) = (4/5)^(3/2) mu0 I / a, and B(z)/B(0) - 1 =
    -(144/125) (z/a)^4 + O(z^6) (Helmholtz pair, common practice; coefficient from memory, checked
    here against the closed form of the loops)."""
    a, current = 0.05, 3.0
    coils = [Coil(f"c{k}", (s * a / 2, s * a / 2), (a, a), 1, current) for k, s in enumerate((-1, 1))]
    z = np.array([0.0, 0.02 * a, 0.05 * a, 0.1 * a])
    b = sum(coil_field(c, z, 0.0)[1] for c in coils)
    assert b[0] == pytest.approx((0.8) ** 1.5 * MU0 * current / a, rel=1e-14, abs=0)
    np.testing.assert_allclose(b[1:] / b[0] - 1, -144 / 125 * (z[1:] / a) ** 4, rtol=0.05)


@pytest.mark.parametrize("where", [(0.05, 0.0), (0.05, 0.018), (0.05, 0.024), (-0.002, 0.021),
                                   (0.102, 0.021), (0.104, 0.024), (0.2, 0.05)])
def test_coil_quadrature_accurate_one_thickness_away(monkeypatch, where):
    """From one winding thickness away the quadrature agrees with one four times finer to 1e-8
    relative (of |B|)."""
    c = Coil("w", (0.0, 0.1), (0.02, 0.022), 50, 1.0)
    got = coil_field(c, *where)
    monkeypatch.setattr(coil_module, "ORDER", 4 * coil_module.ORDER)
    fine = coil_field(c, *where)
    scale = math.hypot(fine[1], fine[2])
    assert float(got[0]) == pytest.approx(float(fine[0]), rel=1e-8, abs=0)
    for k in (1, 2):
        assert abs(float(got[k] - fine[k])) <= 1e-8 * scale


def test_a_loop_is_a_coil_of_zero_section():
    """A coil of zero width and height is one loop carrying N I."""
    c = Coil("loop", (0.01, 0.01), (0.03, 0.03), 7, 2.0)
    z, r = np.array([0.0, 0.05]), np.array([0.01, 0.04])
    for got, want in zip(coil_field(c, z, r), loop_field(0.03, 0.01, 14.0, z, r)):
        np.testing.assert_allclose(got, want, rtol=1e-15)


# ---------------------------------------------------------------- axial profiles


def whittaker(profile, z, r):
    """B_z and B_r off the axis from the analytic axial field B(z): B_z = (1/pi) int_0^pi
    Re B(z + i r cos t) dt, B_r = -(1/pi) int_0^pi Im B(z + i r cos t) cos t dt (Whittaker's
    integral for axially symmetric harmonic functions, from memory), by scipy.integrate.quad."""
    b = lambda w: profile.peak_T / (1 + ((w - profile.center_z_m) / profile.half_width_m) ** 2)  # noqa: E731
    bz = quad(lambda t: b(z + 1j * r * math.cos(t)).real, 0, math.pi, epsabs=0, epsrel=1e-13)[0]
    br = quad(lambda t: -b(z + 1j * r * math.cos(t)).imag * math.cos(t), 0, math.pi,
              epsabs=0, epsrel=1e-13)[0]
    return bz / math.pi, br / math.pi


@pytest.mark.parametrize("z", [-0.01, 0.0, 0.003, 0.02])
def test_glaser_series_against_the_direct_continuation(z):
    """The series kept to r^5 (B_r) and r^4 (B_z) differs from the exact continuation by
    O((r/a)^6): the error falls by about 2^6 when r halves."""
    p = AxialProfile.glaser("lens", 0.2, 0.005, 0.001)
    errors = []
    for r in (0.001, 0.0005):
        _, bz, br = p.field(z, r)
        wz, wr = whittaker(p, z, r)
        errors.append(max(abs(float(bz) - wz), abs(float(br) - wr)) / p.peak_T)
    assert errors[0] < 2e-4
    assert errors[1] < errors[0] / 40


def test_glaser_derivatives_against_scipy_differences():
    """The closed-form derivatives of the bell against complex-step and spline differences
    (the bell's derivatives at the centre: B'' = -2 B0/a^2, B'''' = 24 B0/a^4, from the series
    1/(1 + x^2) = 1 - x^2 + x^4 - ...)."""
    p = AxialProfile.glaser("lens", 0.3, 0.004)
    d = p.derivatives(np.array([0.0]))[:, 0]
    assert d[0] == 0.3 and d[1] == 0.0
    assert d[2] == pytest.approx(-2 * 0.3 / 0.004 ** 2, rel=1e-14)
    assert d[4] == pytest.approx(24 * 0.3 / 0.004 ** 4, rel=1e-14)


def test_table_profile_reproduces_the_bell():
    """A table sampled from the bell (a = 10 mm, 0.5 mm apart), fitted by the degree-7 spline, gives
    its derivatives to the fourth within the stated fractions of their peaks; outside the table the
    field is zero."""
    bell = AxialProfile.glaser("bell", 0.1, 0.01)
    z = np.linspace(-0.1, 0.1, 401)
    table = AxialProfile.table("table", z, bell.on_axis(z))
    zz = np.linspace(-0.03, 0.03, 13)
    got, want = table.derivatives(zz), bell.derivatives(zz)
    for n, tol in enumerate((2e-7, 2e-7, 1e-4, 1e-4, 1e-2)):
        np.testing.assert_allclose(got[n], want[n], atol=tol * np.abs(want[n]).max())
    assert np.all(table.derivatives(np.array([-0.2, 0.2])) == 0.0)
    with pytest.raises(ValueError, match="increase"):
        AxialProfile.table("bad", [0.0, 0.0, 1.0], [1.0, 1.0, 1.0])


# ---------------------------------------------------------------- uniform fields


def test_box_and_unbounded_uniform_field():
    f = UniformField("wien", (0.0, 0.01, 0.0), Box(y_m=(-0.005, 0.005), z_m=(0.02, 0.08)))
    bx, by, bz = f.field(np.zeros(4), np.array([0.0, 0.004, 0.006, 0.0]), np.array([0.05, 0.05, 0.05, 0.09]))
    np.testing.assert_array_equal(by, [0.01, 0.01, 0.0, 0.0])
    assert np.all(bx == 0) and np.all(bz == 0)
    assert np.all(UniformField("u", (0, 0, 1.0)).field(1e3, -1e3, 7.0)[2] == 1.0)


def test_sector_region_and_pole_face_sign():
    """A 90 degree sector bending towards +y: the reference orbit's points are inside; with a
    positive entrance angle a ray outside the orbit (y < 0) enters later than one inside
    (usual beam-transport sign, from memory), and the faces of a rectangular magnet
    (both angles phi/2) are parallel."""
    s = Sector(0.1, 0.2, 90.0, 0.03)
    phi = np.linspace(0.01, 89.99, 50) * math.pi / 180
    z, y = 0.1 + 0.2 * np.sin(phi), 0.2 - 0.2 * np.cos(phi)
    assert np.all(s.contains(0, y, z))
    assert not s.contains(0, 0.0, 0.099) and not s.contains(0, 0.2, 0.31)
    assert not s.contains(0, 0.0, 0.12) is False     # just past the entrance, on the orbit
    tilted = Sector(0.1, 0.2, 90.0, 0.03, entrance_face_deg=20.0)
    # 2 cm outside the orbit, 5 mm after the straight face: inside the straight, outside the tilted
    assert s.contains(0, -0.02, 0.105) and not tilted.contains(0, -0.02, 0.105)
    assert tilted.contains(0, 0.02, 0.105)
    rect = Sector(0.0, 0.3, 60.0, 0.05, 30.0, 30.0)
    z1, y1, _, _ = rect.exit_point()
    # both faces are perpendicular to the chord, so points just beyond the exit face along the
    # chord's direction are outside and just before it inside
    chord = np.array([z1, y1]) / math.hypot(z1, y1)
    for off in (-0.02, 0.02):
        base = np.array([z1, y1]) + off * np.array([-chord[1], chord[0]])
        assert rect.contains(0, *(base - 1e-4 * chord)[::-1]) and not rect.contains(0, *(base + 1e-4 * chord)[::-1])
    with pytest.raises(ValueError):
        Sector(0.0, 0.3, 190.0, 0.05)
    with pytest.raises(ValueError):
        Sector(0.0, 0.3, 90.0, 0.5)


# ---------------------------------------------------------------- unit fields on a grid


def axial_grid(z, r, cell):
    nz, nr = round((z[1] - z[0]) / cell) + 1, round(r / cell) + 1
    return Grid("axial", True, z[0], 0.0, cell, cell, nz, nr, ("ground",) * 4)


def test_unit_fields_interpolate_the_coil_to_fourth_order():
    """The map's B is the curl of the interpolated A_theta: its error against the closed form falls
    as the cell^3 (B is a derivative of the bicubic Hermite patch, whose error is cell^4)."""
    c = Coil("sol", (0.02, 0.06), (0.02, 0.024), 200, 1.0)
    z = np.linspace(0.0, 0.08, 37) + 0.0003
    r = np.linspace(0.0, 0.012, 37) + 0.0001
    _, bz, br = coil_field(c, z, r, 2.0)
    errors = []
    for cell in (0.002, 0.001):
        units = MagneticUnits.build(axial_grid((0.0, 0.08), 0.03, cell), (c,))
        got = units.combine({"sol": 2.0})
        gz, gr = got.field(z, r)
        errors.append(max(np.abs(gz - bz).max(), np.abs(gr - br).max()) / np.abs(bz).max())
    assert errors[1] < 3e-6
    assert errors[0] / errors[1] > 6.0


def test_unit_fields_combine_linearly_and_name_unknown_coils():
    grid = axial_grid((0.0, 0.04), 0.01, 0.002)
    coils = (Coil("a", (0.01, 0.012), (0.015, 0.017), 10, 1.0), Coil("b", (0.03, 0.03), (0.012, 0.012), 1, -2.0))
    bell = AxialProfile.glaser("lens", 0.05, 0.005, 0.02)
    units = MagneticUnits.build(grid, coils, (bell,))
    z, r = np.array([0.005, 0.021, 0.033]), np.array([0.0, 0.003, 0.006])
    both = units.combine({"a": 3.0, "b": 0.5}).field(z, r)
    parts = [units.combine({"a": 3.0, "b": 0.0}).field(z, r), units.combine({"a": 0.0, "b": 0.5}).field(z, r),
             units.combine({"a": 0.0, "b": 0.0}).field(z, r)]
    for k in range(2):
        np.testing.assert_allclose(both[k], parts[0][k] + parts[1][k] - parts[2][k], atol=1e-15)
    assert units.combine().currents == (1.0, -2.0)
    with pytest.raises(ValueError, match="unknown coil 'c'; the coils are 'a', 'b'"):
        units.combine({"c": 1.0})
    with pytest.raises(ValueError, match="axially symmetric"):
        MagneticUnits.build(Grid("planar", True, 0.0, 0.0, 0.01, 0.01, 3, 3, ("ground",) * 4), coils)


def test_map_field_is_the_exact_curl_and_odd_across_the_axis():
    """B from the map equals the curl of the map's own A_theta (to difference error), and at
    negative r (a cut through the axis) B_r and A_theta change sign."""
    grid = axial_grid((0.0, 0.04), 0.01, 0.002)
    m = MagneticUnits.build(grid, (Coil("a", (0.01, 0.012), (0.015, 0.017), 10, 1.0),)).combine()
    z, r, h = 0.0171, 0.0043, 1e-7
    a = lambda z, r: float(m.evaluate(z, r)[0])  # noqa: E731
    _, bz, br = m.evaluate(z, r)
    assert ((r + h) * a(z, r + h) - (r - h) * a(z, r - h)) / (2 * h * r) == pytest.approx(float(bz), rel=1e-7)
    assert -(a(z + h, r) - a(z - h, r)) / (2 * h) == pytest.approx(float(br), rel=1e-7)
    neg = m.evaluate(z, -r)
    assert float(neg[0]) == -a(z, r) and float(neg[1]) == float(bz) and float(neg[2]) == -float(br)


# ---------------------------------------------------------------- the analytic slope of the unit fields


@pytest.mark.parametrize("z, r", [(0.0, 0.0), (0.013, 0.0), (0.013, 0.007), (-0.04, 0.05),
                                  (0.002, 0.0195), (0.3, 0.2), (0.001, 1e-4)])
def test_loop_slope_is_the_derivative_of_its_closed_form(z, r):
    """dB_z/dz of the loop (the derivative of Jackson's closed form, §5.5, through the elliptic
    integrals' derivatives, Abramowitz & Stegun 1964 17.3) against a five-point difference of B_z
    itself (error ~ h^4), and on the axis against d/dz of mu0 I a^2 / (2 (a^2 + z^2)^(3/2))."""
    a = 0.02
    h = 1e-3 * min(math.hypot(z, r - a), a)     # the difference's error ~ (h / distance to the wire)^4
    bz = lambda z: float(loop_field(a, 0.0, 1.0, z, r)[1])  # noqa: E731
    difference = (bz(z - 2 * h) - 8 * bz(z - h) + 8 * bz(z + h) - bz(z + 2 * h)) / (12 * h)
    got = loop_unit(a, z, r)[3]
    assert got == pytest.approx(difference, rel=1e-9, abs=1e-10 * abs(bz(z)) / a)
    if r == 0.0:
        assert got == pytest.approx(-3 * MU0 * a * a * z / (2 * (a * a + z * z) ** 2.5), rel=1e-14, abs=0)


def test_unit_field_nodes_agree_with_differences_and_threads():
    """The node data of a coil's unit field (A, dA/dz, dA/dr, d2A/dzdr from the closed form and its
    analytic slope) against central differences of the closed form's A (steps 1e-6 m; on the axis
    of B_z / 2, as A = r B_z / 2 there), on and off the axis; and the same bits on one thread as on
    numba's threads."""
    import numba

    from tracer.magnetics.units import coil_sampler

    c = Coil("sol", (0.02, 0.06), (0.02, 0.024), 200, 1.0)
    z = np.array([0.0, 0.031, 0.045, 0.07, 0.01])
    r = np.array([0.0, 0.0, 0.005, 0.012, 0.018])
    data = coil_sampler(None, c)(z, r)
    h = 1e-6
    a = lambda z, r: coil_field(c, z, r, 1.0)[0]  # noqa: E731
    dadz = (a(z + h, r) - a(z - h, r)) / (2 * h)
    ar = lambda z: np.where(r > 0, (a(z, r + h) - a(z, np.abs(r - h))) / (2 * h),  # noqa: E731
                            coil_field(c, z, 0.0, 1.0)[1] / 2)    # on the axis A = r B_z / 2
    cross = (ar(z + h) - ar(z - h)) / (2 * h)
    scale = np.abs(data).max(axis=1)
    np.testing.assert_allclose(data[1], dadz, atol=1e-7 * scale[1])
    np.testing.assert_allclose(data[2], ar(z), atol=1e-7 * scale[2])
    np.testing.assert_allclose(data[3], cross, atol=1e-5 * scale[3])
    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        single = coil_sampler(None, c)(z, r)
    finally:
        numba.set_num_threads(threads)
    assert single.tobytes() == data.tobytes()
    serial = np.stack(coil_field(c, z, r, 1.0, slope=True))          # the one-thread kernel
    assert serial.tobytes() == np.stack(coil_field(c, z, r, 1.0, slope=True, threads=True)).tobytes()


def test_a_forked_child_evaluates_a_coil_after_threads_sampled_one():
    """The run's pictures are drawn in a forked child (tracer.beside) and numba's OpenMP pool ends
    a forked child that uses it; coil_field stays on this thread unless asked, so a child computes
    B on the axis after this process sampled a coil on threads (common practice: numba's docs on
    fork safety)."""
    from tracer.beside import beside
    from tracer.magnetics.units import coil_sampler

    c = Coil("sol", (0.02, 0.06), (0.02, 0.024), 200, 1.0)
    coil_sampler(None, c)(np.linspace(0.0, 0.08, 200), np.full(200, 0.01))
    with beside(lambda: float(coil_field(c, 0.04, 0.0)[1])) as got:
        pass
    assert got == [float(coil_field(c, 0.04, 0.0)[1])]
