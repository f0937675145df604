"""The Lorentz force q (E + v x B) in the ray kernel against the world outside.

Sources named beside each check: relativistic motion in a uniform magnetic field (radius
p_perp / (|q| B), period 2 pi gamma m / (|q| B): any text on relativistic mechanics, e.g. Jackson,
Classical Electrodynamics 3rd ed. 1999, §12.2); the Wien filter's balance v = E / B (Wien 1898,
common practice); the 180-degree magnetic sector's focus, blur rho alpha^2 and dispersion
rho dm/m (Dempster 1918); Busch's theorem, the conservation of canonical angular momentum
r p_theta + q r A_theta in an axially symmetric field (Busch 1926); no work by a magnetic force
(common practice). Constants from scipy.constants.
"""

import math

import numpy as np
import pytest
from scipy import constants

from tracer.beam import symmetry_code, trace
from tracer.config import loads
from tracer.fieldmap import PotentialMap
from tracer.geometry import rasterize, shape_table
from tracer.grid import Grid
from tracer.magnetics.coil import Coil
from tracer.magnetics.uniform import Box, Sector, UniformField
from tracer.magnetics.units import MagneticUnits
from tracer.motion import SYMMETRY_CODE, magnet_of
from tracer.schema import Plane
from tracer.sources import START_DTYPE, momentum

C = constants.c

FREE = """
title = "a field-free domain for magnetic tests (illustrative)"
[domain]
symmetry = "{symmetry}"
z_mm = {z_mm}
{extent}
cell_mm = {cell}
edges = "ground"
[[electrode]]
name = "corner"
voltage_V = 0.0
[[electrode.rect]]
z_mm = {corner_z}
{corner_r}
[[beam]]
name = "b"
species = "{species}"
energy_eV = 1000.0
start_z_mm = 1.0
"""


def free_map(symmetry, z_mm, extent, corner_z, corner_r, species="e-", cell=2.0, herm=None):
    """A map with a small grounded corner electrode and the potential ``herm`` (zero by
    default), and its setup."""
    setup = loads(FREE.format(symmetry=symmetry, z_mm=z_mm, extent=extent, corner_z=corner_z,
                              corner_r=corner_r, species=species, cell=cell))
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    herm = np.zeros((4, grid.nz, grid.nr)) if herm is None else herm(grid)
    return PotentialMap(grid, table, rasterize(table, grid), ("corner",), (0.0,), herm), setup


def starts_of(points, directions, energy_eV, mass):
    """Start records at 3-D points (m) with unit directions and kinetic energies."""
    n = len(points)
    s = np.zeros(n, dtype=START_DTYPE)
    s["ray"] = np.arange(n)
    p = momentum(np.broadcast_to(energy_eV, (n,)), mass)
    for k, name in enumerate(("x_m", "y_m", "z_m")):
        s[name] = np.asarray(points, dtype=float)[:, k]
    d = np.asarray(directions, dtype=float)
    d = d / np.linalg.norm(d, axis=1)[:, None]
    for k, name in enumerate(("px", "py", "pz")):
        s[name] = p * d[:, k]
    s["energy_eV"] = energy_eV
    return s


def helix(start, b_vec, charge, mass, t):
    """Position and momentum at time t of a charge in the uniform field b_vec (Rodrigues'
    rotation of the momentum about B at the angular velocity -q B / (gamma m))."""
    x0 = np.array([start["x_m"], start["y_m"], start["z_m"]])
    p0 = np.array([start["px"], start["py"], start["pz"]])
    b = np.linalg.norm(b_vec)
    u = np.asarray(b_vec) / b
    gm = math.sqrt(mass * mass + (p0 @ p0) / (C * C))
    omega = -charge * b / gm
    par = (p0 @ u) * u
    perp = p0 - par
    th = omega * t
    p = par + perp * math.cos(th) + np.cross(u, perp) * math.sin(th)
    x = x0 + par / gm * t + (perp * math.sin(th) + np.cross(u, perp) * (1.0 - math.cos(th))) / (
        gm * omega)
    return x, p


CYCLOTRON = {
    # symmetry: domain, field direction, start point and direction
    "axial": ("[-10.0, 150.0]", "r_mm = 100.0", (0.0, 0.0, 1.0), (5e-3, 0.0, 0.0), (0.0, 1.0, 0.3)),
    "planar": ("[-100.0, 100.0]", "y_mm = [-100.0, 100.0]", (1.0, 0.0, 0.0), (0.0, 5e-3, 0.0),
               (0.0, 0.0, 1.0)),
    "mirror": ("[-100.0, 100.0]", "r_mm = 100.0", (1.0, 0.0, 0.0), (0.0, 5e-3, 0.0),
               (0.0, 0.0, 1.0)),
}


@pytest.mark.parametrize("symmetry", ["axial", "planar", "mirror"])
@pytest.mark.parametrize("species, energy_eV", [("e-", 3e5), ("p+", 2e6)])
def test_cyclotron_motion_in_a_uniform_field(symmetry, species, energy_eV):
    """A charge in a uniform B circles with radius p_perp / (|q| B) and period
    2 pi gamma m / (|q| B) (relativistic mechanics, Jackson 1999 §12.2): the time and state at
    which it crosses a stop plane (after 1.3 turns of a helix along the axis; after 7/12 of a turn
    in the planar maps, the circle lying in the (z, y) plane) match the helix to 1e-8, and the
    kinetic energy is unchanged (a magnetic force does no work; the ledger sees none)."""
    z_mm, extent, b_dir, x0, d0 = CYCLOTRON[symmetry]
    side = "y" if symmetry == "planar" else "r"
    field, setup = free_map("axial" if symmetry == "axial" else "planar", z_mm, extent,
                            z_mm.replace(",", ", -9.0] #", 1), f"{side}_mm = [95.0, 100.0]",
                            species)
    assert symmetry_code(field.grid) == SYMMETRY_CODE[symmetry]
    sp = setup.beams[0].species
    start = starts_of([x0], [d0], energy_eV, sp.mass_kg)
    p = momentum(energy_eV, sp.mass_kg)
    d = np.asarray(d0) / np.linalg.norm(d0)
    b_dir = np.asarray(b_dir)
    p_perp = p * np.linalg.norm(np.cross(d, b_dir))
    radius = 0.04
    b = p_perp / (abs(sp.charge_C) * radius)        # a 40 mm circle
    gamma = math.sqrt(1.0 + (p / (sp.mass_kg * C)) ** 2)
    period = 2.0 * math.pi * gamma * sp.mass_kg / (abs(sp.charge_C) * b)
    if symmetry == "axial":
        t = 1.3 * period
        z_plane = (p * d[2] / (gamma * sp.mass_kg)) * t
    else:                                    # z = R sin(2 pi t / T) = -R / 2 at 7/12 of a turn
        t = 7.0 / 12.0 * period
        z_plane = -0.5 * radius
    run = trace(field, setup.beams[0], (Plane("stop", z_plane, stop=True),), starts=start,
                rtol=1e-11, magnetic=UniformField("b", tuple(b * b_dir)))
    rec = run.records[0]
    assert rec["status"] == "plane"
    assert rec["time_s"] == pytest.approx(t, rel=1e-8, abs=0)
    want_x, want_p = helix(start[0], b * b_dir, sp.charge_C, sp.mass_kg, t)
    got_x = np.array([rec["x_m"], rec["y_m"], rec["z_m"]])
    got_p = np.array([rec["px"], rec["py"], rec["pz"]])
    assert np.abs(got_x - want_x).max() < 1e-8 * radius
    assert np.abs(got_p - want_p).max() < 1e-8 * p
    # the circle itself: its centre halfway to the opposite point, its radius p_perp / (|q| B)
    opposite = helix(start[0], b * b_dir, sp.charge_C, sp.mass_kg, 0.5 * period)[0]
    off = got_x - 0.5 * (opposite + np.asarray(x0))
    off -= (off @ b_dir) * b_dir
    assert np.linalg.norm(off) == pytest.approx(radius, rel=1e-8, abs=0)
    assert abs(rec["energy_eV"] - energy_eV) < 1e-9 * energy_eV
    assert rec["ledger_eV"] < 1e-9 * energy_eV
    assert run.ledger.suspects == 0


def test_zero_magnetic_field_changes_nothing():
    """A magnet of zero field traces the very rays of the electric-only kernel (the magnetic
    term adds exact zeros): the records are equal."""
    field, setup = free_map("axial", "[-10.0, 60.0]", "r_mm = 20.0", "[-10.0, -9.0]",
                            "r_mm = [15.0, 20.0]", "p+")
    sp = setup.beams[0].species
    start = starts_of([(1e-3, 2e-3, 0.0)] * 3, [(0.1, 0.0, 1.0), (0.0, 0.2, 1.0), (0.0, 0.0, 1.0)],
                      1e3, sp.mass_kg)
    planes = (Plane("p", 0.03),)
    bare = trace(field, setup.beams[0], planes, starts=start)
    zero = trace(field, setup.beams[0], planes, starts=start,
                 magnetic=UniformField("zero", (0.0, 0.0, 0.0)))
    for a, b in ((bare.records, zero.records), (bare.crossings, zero.crossings)):
        for name in a.dtype.names:      # NaN where a figure does not apply (no landing angle)
            assert np.array_equal(a[name], b[name], equal_nan=a[name].dtype.kind == "f"), name
    assert np.abs(bare.records["px"]).max() > 0


def test_wien_filter_passes_the_balanced_speed():
    """Crossed uniform E and B pass charges of speed v = E / B undeflected (Wien filter, Wien
    1898, common practice); a faster charge is deflected by the predicted force (v - E/B) q B,
    to first order y = q (v B - E) L^2 / (2 gamma m v^2)."""
    e0 = 2e4                     # V/m along +y

    def uniform_e(grid):
        h = np.zeros((4, grid.nz, grid.nr))
        h[0] = -e0 * grid.r[None, :]
        h[2] = -e0
        return h

    field, setup = free_map("planar", "[0.0, 50.0]", "y_mm = [-10.0, 10.0]", "[49.0, 50.0]",
                            "y_mm = [8.0, 10.0]", "e-", cell=1.0, herm=uniform_e)
    sp = setup.beams[0].species
    energy = 1e3
    p = momentum(energy, sp.mass_kg)
    gm = math.sqrt(sp.mass_kg ** 2 + (p / C) ** 2)
    v = p / gm
    b = -e0 / v                  # F_y = q (E_y + v_z B_x) = 0
    y0 = 0.3e-3                  # off the cell walls
    start = starts_of([(0.0, y0, 1e-3), (0.0, y0, 1e-3)], [(0, 0, 1), (0, 0, 1)],
                      np.array([energy, 1.1 * energy]), sp.mass_kg)
    run = trace(field, setup.beams[0], (Plane("out", 0.041, stop=True),), starts=start,
                rtol=1e-11, magnetic=UniformField("wien", (b, 0.0, 0.0)))
    rec = run.records
    assert (rec["status"] == "plane").all()
    length = 0.04
    assert abs(rec["y_m"][0] - y0) < 1e-10 * length
    assert abs(rec["py"][0]) < 1e-10 * p
    p1 = momentum(1.1 * energy, sp.mass_kg)
    gm1 = math.sqrt(sp.mass_kg ** 2 + (p1 / C) ** 2)
    v1 = p1 / gm1
    want = sp.charge_C * (e0 + v1 * b) * length ** 2 / (2.0 * gm1 * v1 * v1)
    assert abs(want) > 1e-5                  # the test can see a wrong balance
    assert rec["y_m"][1] - y0 == pytest.approx(want, rel=0.02)


@pytest.fixture(scope="module")
def dempster():
    """Protons and a 1 % heavier ion from the entrance of a 180-degree sector (rho = 50 mm) at
    angles alpha to the reference orbit, stopped on a plane just before the entrance face."""
    field, setup = free_map("planar", "[-5.0, 60.0]", "y_mm = [-10.0, 110.0]", "[55.0, 60.0]",
                            "y_mm = [-10.0, -8.0]", "p+", cell=2.5)
    rho, energy = 0.05, 1e4
    mass = setup.beams[0].species.mass_kg
    b = momentum(energy, mass) / (constants.e * rho)
    sector = Sector(entrance_z_m=0.0, radius_m=rho, angle_deg=180.0, half_gap_m=0.04)
    alphas = np.array([0.0, 0.01, -0.01, 0.03, -0.03])
    start = starts_of(np.zeros((alphas.size, 3)), np.stack(
        [np.zeros_like(alphas), np.sin(alphas), np.cos(alphas)], axis=1), energy, mass)
    plane = (Plane("image", -1e-6, stop=True),)
    magnet = UniformField("sector", (b, 0.0, 0.0), sector)
    light = trace(field, setup.beams[0], plane, starts=start, rtol=1e-11, magnetic=magnet)
    heavy_setup = loads(FREE.format(symmetry="planar", z_mm="[-5.0, 60.0]",
                                    extent="y_mm = [-10.0, 110.0]", corner_z="[55.0, 60.0]",
                                    corner_r="y_mm = [-10.0, -8.0]", species="p+", cell=2.5)
                        .replace('species = "p+"', "mass_u = 1.0177 \ncharge_e = 1"))
    heavy_mass = heavy_setup.beams[0].species.mass_kg
    heavy = trace(field, heavy_setup.beams[0], plane, rtol=1e-11, magnetic=magnet,
                  starts=starts_of(np.zeros((1, 3)), [(0.0, 0.0, 1.0)], energy, heavy_mass))
    return light, heavy, alphas, rho, mass, heavy_mass


def test_sector_180_degrees_focuses_on_the_diameter(dempster):
    """Rays from a point at the entrance of a 180-degree uniform sector meet again on the
    diameter 2 rho away, to second order: the chord is 2 rho cos(alpha), so the blur is
    rho alpha^2 (Dempster 1918); each ray's crossing matches the circle's exact chord."""
    light, _, alphas, rho, _, _ = dempster
    rec = light.records
    assert (rec["status"] == "plane").all()
    delta = 1e-6
    exact = 2.0 * rho * np.cos(alphas) + delta * np.tan(alphas)   # the chord, then the drift
    np.testing.assert_allclose(rec["y_m"], exact, rtol=0, atol=1e-9 * rho)
    blur = rec["y_m"][0] - (rec["y_m"] - delta * np.tan(alphas))
    np.testing.assert_allclose(blur[1:], rho * alphas[1:] ** 2, rtol=2e-3)
    assert abs(rec["y_m"][0] - 2.0 * rho) < 1e-9 * rho       # focus after 180 degrees
    np.testing.assert_allclose(rec["energy_eV"], 1e4, rtol=1e-10)


def test_sector_dispersion_is_rho_dm_over_m(dempster):
    """A heavier ion of the same energy lands rho dm/m further out (Dempster 1918; to first
    order in dm/m, the radius growing as sqrt(m) at fixed energy); exactly, the radius scales as
    the momentum."""
    light, heavy, _, rho, mass, heavy_mass = dempster
    dm = heavy_mass / mass - 1.0
    shift = heavy.records["y_m"][0] - light.records["y_m"][0]
    assert shift == pytest.approx(rho * dm, rel=dm)            # the first-order law
    exact = 2.0 * rho * (momentum(1e4, heavy_mass) / momentum(1e4, mass) - 1.0)
    assert shift == pytest.approx(exact, rel=1e-6)


def test_busch_canonical_angular_momentum_is_conserved():
    """Skew electrons through a solenoid keep r p_theta + q r A_theta (Busch 1926), the check that
    sees an error in B where the energy ledger cannot; their mechanical angular momentum does
    change (the lens turns them)."""
    field, setup = free_map("axial", "[0.0, 80.0]", "r_mm = 12.0", "[79.0, 80.0]",
                            "r_mm = [11.0, 12.0]", "e-", cell=0.5)
    coil = Coil("lens", (0.035, 0.045), (0.008, 0.010), 500, 1.0)
    bmap = MagneticUnits.build(field.grid, coils=(coil,)).combine()
    sp = setup.beams[0].species
    rng = np.random.default_rng(3)
    n = 12
    pts = np.column_stack([rng.uniform(-2e-3, 2e-3, (n, 2)), np.full(n, 5e-3)])
    dirs = np.column_stack([rng.uniform(-0.03, 0.03, (n, 2)), np.ones(n)])
    start = starts_of(pts, dirs, 5e3, sp.mass_kg)
    run = trace(field, setup.beams[0], (Plane("end", 0.075, stop=True),), starts=start,
                rtol=1e-10, magnetic=bmap)
    s, r = run.starts, run.records
    assert (r["status"] == "plane").all()

    def canonical(rows):
        rr = np.hypot(rows["x_m"], rows["y_m"])
        mech = rows["x_m"] * rows["py"] - rows["y_m"] * rows["px"]
        return mech, sp.charge_C * rr * bmap.evaluate(rows["z_m"], rr)[0]

    m0, a0 = canonical(s)
    m1, a1 = canonical(r)
    scale = np.abs(m0).max() + np.abs(a1).max()
    assert np.abs((m1 + a1) - (m0 + a0)).max() < 1e-9 * scale
    assert np.abs(m1 - m0).max() > 1e-3 * scale          # B did turn the rays
    assert np.abs(a1).max() > 1e-3 * scale                # and the check has A_theta in it
    assert np.abs(r["energy_eV"] - 5e3).max() < 1e-9 * 5e3
    assert run.ledger.suspects == 0


def test_magnet_of_refuses_what_it_cannot_trace():
    """Coils need the axial map's own grid; other objects are refused."""
    field, _ = free_map("planar", "[0.0, 10.0]", "y_mm = [-5.0, 5.0]", "[9.0, 10.0]",
                        "y_mm = [4.0, 5.0]")
    axial, _ = free_map("axial", "[0.0, 10.0]", "r_mm = 5.0", "[9.0, 10.0]", "r_mm = [4.0, 5.0]")
    bmap = MagneticUnits.build(axial.grid, coils=(Coil("c", (0.0, 0.001), (0.02, 0.021), 1, 1.0),)
                               ).combine()
    with pytest.raises(ValueError, match="axially symmetric"):
        magnet_of(field.grid, bmap)
    other = Grid.from_domain(loads(FREE.format(symmetry="axial", z_mm="[0.0, 12.0]",
                                               extent="r_mm = 5.0", corner_z="[9.0, 10.0]",
                                               corner_r="r_mm = [4.0, 5.0]", species="e-",
                                               cell=2.0)).domain)
    with pytest.raises(ValueError, match="another grid"):
        magnet_of(other, bmap)
    with pytest.raises(TypeError):
        magnet_of(axial.grid, ["1 T"])
    assert magnet_of(axial.grid, None) is None and magnet_of(axial.grid, ()) is None
    m = magnet_of(axial.grid, [bmap, UniformField("u", (0.0, 0.0, 1.0), Box(z_m=(0.0, 1.0)))])
    assert m.coils and m.kinds.tolist() == [1] and m.regions[0, 4:6].tolist() == [0.0, 1.0]
