"""Tests of the events at the edges of motion: landings (their angle of incidence and normal
energy), rays that touch metal with almost no normal energy, rays that turn a hair beyond (or short
of) a detector plane, and detector planes at an angle.

The retarding field is the exact uniform field between two plates (``test_trace.linear_map``: a
bicubic patch reproduces a linear potential, and the map continues it inside the plates, as a
solved map's interpolant continues into its conductors); the barrier and the turning points then
follow from energy conservation alone (common practice), with the transverse momentum conserved.
"""

import math

import numpy as np
import pytest
from scipy import constants
from test_trace import GAP, PLATES, linear_map

from tracer.beam import trace
from tracer.config import loads
from tracer.sources import START_DTYPE

C = constants.c
E = constants.e
FRONT_V = -10.0     # the front plate (z >= GAP) retards electrons: a 10 eV barrier at z = GAP


def retarding(cell_mm, extra=""):
    """Electrons against a plate 10 V below the back plate; the field between them is uniform."""
    text = PLATES.format(volts=FRONT_V, species="e-", energy=1.0, count=1, angle=0.0, extra=extra)
    setup = loads(text.replace("cell_mm = 0.5", f"cell_mm = {cell_mm}").replace("r_mm = 5.0", "r_mm = 8.0"))
    return linear_map(setup, FRONT_V), setup


def momentum(ke_eV, mass):
    """Relativistic momentum of kinetic energy ke (kg m/s)."""
    ke = ke_eV * E
    return math.sqrt(ke * (ke + 2.0 * mass * C * C)) / C


def aimed(mass, z0, normal_eV, angle_deg, x0):
    """Electrons from (x0, 0, z0) at angle_deg from +z (towards +x) whose kinetic energy in the
    motion along z is ``normal_eV`` (one ray per value): the energy above the rest energy of the
    transverse motion, so that where pz = 0 the kinetic energy is exactly the transverse one."""
    n = len(normal_eV)
    s = np.zeros(n, START_DTYPE)
    s["ray"] = np.arange(n)
    s["x_m"], s["z_m"] = x0, z0
    a = math.radians(angle_deg)
    for k, en in enumerate(normal_eV):
        # pz = p cos a, px = p sin a; the energy with px alone is sqrt((px c)^2 + (mc^2)^2):
        # solve E(p) - E(p sin a) = en for p by bisection on the monotone difference
        mc2 = mass * C * C

        def gap(p):
            return (math.hypot(p * C, mc2) - math.hypot(p * math.sin(a) * C, mc2)) / E - en

        lo, hi = 0.0, 10.0 * momentum(en / max(math.cos(a) ** 2, 1e-12), mass)
        for _ in range(200):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if gap(mid) < 0.0 else (lo, mid)
        p = 0.5 * (lo + hi)
        s["px"][k], s["pz"][k] = p * math.sin(a), p * math.cos(a)
        s["energy_eV"][k] = (math.hypot(p * C, mc2) - mc2) / E
    return s


def barrier_eV(z):
    """Potential energy (eV) of an electron at z in the uniform field between the plates."""
    return -FRONT_V * z / GAP


DELTAS = np.logspace(-6.0, 0.0, 13)      # 1 µeV .. 1 eV
CELLS_MM = (0.5, 0.2, 0.1, 0.05)


@pytest.mark.parametrize("cell_mm", CELLS_MM)
@pytest.mark.parametrize("angle_deg", (0.0, 30.0, 60.0))
def test_a_ray_that_touches_the_plate_lands_on_it(cell_mm, angle_deg):
    """Electrons reaching a retarding plate with 1 µeV..1 eV of normal energy to spare all land on
    it, with the energy the barrier leaves them; 1 µeV..1 eV short of it, none does (energy
    conservation in a uniform field: common practice).  Their turning points inside the metal's
    continued field lie as little as 2e-6 of a cell beyond the surface (1 µeV against 1 kV/m)."""
    field, setup = retarding(cell_mm)
    sp = setup.beams[0].species
    z0 = GAP - 1.5e-3
    above = aimed(sp.mass_kg, z0, barrier_eV(GAP) - barrier_eV(z0) + DELTAS, angle_deg, -3e-3)
    below = aimed(sp.mass_kg, z0, barrier_eV(GAP) - barrier_eV(z0) - DELTAS, angle_deg, -3e-3)
    rec = trace(field, setup.beams[0], starts=above).records
    assert list(rec["electrode"]) == ["front"] * len(DELTAS), rec["status"]
    assert np.allclose(rec["z_m"], GAP, rtol=0.0, atol=1e-6 * setup.domain.cell_m)
    assert np.allclose(rec["energy_eV"], above["energy_eV"] - (barrier_eV(GAP) - barrier_eV(z0)),
                       rtol=1e-9, atol=1e-9)
    rec = trace(field, setup.beams[0], starts=below).records
    assert not (rec["electrode"] == "front").any(), rec["z_m"][rec["electrode"] == "front"]
    assert set(rec["status"]) <= {"landed", "left"}


@pytest.mark.parametrize("angle_deg", (30.0, 60.0))
def test_landings_report_their_incidence_and_normal_energy(angle_deg):
    """Electrons landing on a retarding plate: the landing's normal energy is what the barrier
    left of the motion along z, and its angle of incidence that of the momentum (px conserved)
    against the surface normal (energy conservation in a uniform field: common practice)."""
    field, setup = retarding(0.2)
    sp = setup.beams[0].species
    z0 = GAP - 1.5e-3
    deltas = np.logspace(-3.0, 1.0, 9)
    s = aimed(sp.mass_kg, z0, barrier_eV(GAP) - barrier_eV(z0) + deltas, angle_deg, -3e-3)
    rec = trace(field, setup.beams[0], starts=s).records
    assert list(rec["electrode"]) == ["front"] * len(deltas)
    assert np.allclose(rec["normal_energy_eV"], deltas, rtol=1e-6, atol=1e-9)
    pz = np.array([math.sqrt(momentum(e, sp.mass_kg) ** 2 - px * px) for e, px in zip(rec["energy_eV"], s["px"])])
    assert np.allclose(rec["incidence_deg"], np.degrees(np.arctan2(np.abs(s["px"]), pz)), rtol=1e-7)
    left = trace(field, setup.beams[0], starts=aimed(sp.mass_kg, z0, [0.5], angle_deg, -3e-3)).records
    assert left["status"][0] != "landed" or left["electrode"][0] == "back"
    assert np.isnan(left["incidence_deg"][0]) == (left["status"][0] != "landed")


APEX_CELLS = np.logspace(-9.0, -1.0, 9)   # apex this many cells beyond (or short of) the plane
PLANE_Z = 5e-3


@pytest.mark.parametrize("cell_mm", (0.5, 0.1))
@pytest.mark.parametrize("angle_deg", (0.0, 45.0))
def test_an_apex_a_hair_beyond_a_plane_crosses_it_twice(cell_mm, angle_deg):
    """Electrons turning 1e-9..1e-1 cell beyond a plane z = 5 mm cross it exactly twice (in, then
    back); turning as far short of it, never.  The turning point is where the motion along z has
    spent its energy (energy conservation, transverse momentum conserved: common practice)."""
    field, setup = retarding(cell_mm, extra='[[plane]]\nname = "p"\nz_mm = 5.0')
    sp = setup.beams[0].species
    cell = setup.domain.cell_m
    z0 = PLANE_Z - 1e-3
    for sign in (1.0, -1.0):
        apex = PLANE_Z + sign * APEX_CELLS * cell
        s = aimed(sp.mass_kg, z0, barrier_eV(apex) - barrier_eV(z0), angle_deg, -2.0e-3)
        run = trace(field, setup.beams[0], planes=setup.planes, starts=s)
        count = np.bincount(run.at_plane("p")["ray"], minlength=len(s))
        assert list(count) == [2 if sign > 0 else 0] * len(s), (sign, count)
        if sign > 0:
            rows = run.at_plane("p")
            assert np.allclose(rows["z_m"], PLANE_Z, rtol=0.0, atol=1e-9 * cell)
            assert (rows["pz"][rows["crossing"] == 0] >= 0).all()
            assert (rows["pz"][rows["crossing"] == 1] <= 0).all()


def test_surface_normals_point_out_of_every_shape():
    """Outward normals of a rect, a polygon given clockwise and an annular sector (its outer and
    inner arcs radial, its straight sides tangential), at points on each face (analytic
    geometry); axis pieces are not surfaces."""
    from tracer.geometry import shape_table, surface_normal
    from tracer.schema import Arc, Domain, Electrode, Polygon, Rect
    domain = Domain("axial", (0.0, 0.1), (0.0, 0.05), 1e-3, ("ground", "ground", "axis", "ground"))
    shapes = (Rect((0.01, 0.02), (0.0, 0.01)),
              Polygon(((0.03, 0.01), (0.03, 0.02), (0.04, 0.02), (0.04, 0.01))),   # clockwise
              Arc(0.07, (0.01, 0.02), (math.radians(30.0), math.radians(120.0))))
    table = shape_table([Electrode(f"e{k}", 0.0, (s,)) for k, s in enumerate(shapes)], domain)
    c30, s30 = math.cos(math.radians(30.0)), math.sin(math.radians(30.0))
    c120, s120 = math.cos(math.radians(120.0)), math.sin(math.radians(120.0))
    cases = [(0, 0.01, 0.005, (-1.0, 0.0)), (0, 0.02, 0.005, (1.0, 0.0)), (0, 0.015, 0.01, (0.0, 1.0)),
             (0, 0.0151, 0.0, (1.0, 0.0)),       # on the axis, which is no surface: the face z = 0.02
             (1, 0.03, 0.015, (-1.0, 0.0)), (1, 0.035, 0.02, (0.0, 1.0)), (1, 0.035, 0.01, (0.0, -1.0)),
             (2, 0.07 + 0.02 * math.cos(1.2), 0.02 * math.sin(1.2), (math.cos(1.2), math.sin(1.2))),
             (2, 0.07 + 0.01 * math.cos(1.2), 0.01 * math.sin(1.2), (-math.cos(1.2), -math.sin(1.2))),
             (2, 0.07 + 0.015 * c30, 0.015 * s30, (s30, -c30)),
             (2, 0.07 + 0.015 * c120, 0.015 * s120, (-s120, c120))]
    for k, z, r, want in cases:
        assert surface_normal(z, r, k, True, *table.arrays()) == pytest.approx(want, abs=1e-12), (k, z, r)
    assert surface_normal(0.0151, 0.0, 0, False, *table.arrays()) == pytest.approx((0.0, -1.0))

# A cylindrical sector analyser as a full annulus (no fringe fields): the potential of coaxial
# cylinders, V = k ln(rho / a) (any electrostatics text, e.g. Jackson), written as the map's exact
# node data about a centre off the node grid and off y = 0, in a planar domain over the full y range.
A_M, B_M, R0_M = 30e-3, 50e-3, 40e-3
CENTRE_Z, CENTRE_Y = 55.25e-3, 2.6e-3


def annulus(cell_m, k_volts):
    """The coaxial-cylinder map (k ln(rho / a), rho about (CENTRE_Z, CENTRE_Y)) and its two cylinders."""
    from tracer.fieldmap import PotentialMap
    from tracer.geometry import rasterize, shape_table
    from tracer.grid import Grid
    from tracer.schema import Arc, Domain, Electrode
    domain = Domain("planar", (0.0, 110e-3), (-52.5e-3, 57.5e-3), cell_m, ("ground",) * 4)
    full = (-math.pi, math.pi)
    electrodes = [Electrode("inner", 0.0, (Arc(CENTRE_Z, (0.0, A_M), full, CENTRE_Y),)),
                  Electrode("outer", k_volts * math.log(B_M / A_M), (Arc(CENTRE_Z, (B_M, 54e-3), full, CENTRE_Y),))]
    grid = Grid.from_domain(domain)
    table = shape_table(electrodes, domain)
    dz, y = np.meshgrid(grid.z - CENTRE_Z, grid.r - CENTRE_Y, indexing="ij")
    rho2 = dz * dz + y * y
    herm = np.stack([0.5 * k_volts * np.log(rho2 / A_M**2), k_volts * dz / rho2, k_volts * y / rho2,
                     -2.0 * k_volts * dz * y / rho2**2])
    return PotentialMap(grid, table, rasterize(table, grid), ("inner", "outer"),
                        (0.0, k_volts * math.log(B_M / A_M)), herm)


def test_a_cylindrical_analyser_refocuses_at_pi_over_root_two_on_a_radial_plane():
    """Protons on the central circle of a cylindrical analyser, fanned by +-2 mrad, refocus on the
    radial detector plane pi / sqrt(2 - beta^2) round from the source (Hughes & Rojansky 1929);
    there the fan's first-order spread vanishes and what is left is the second-order blur
    -(4/3) r0 alpha^2 (the issue's figure, from the same theory), a small fraction of a cell.
    Planes 0.02 rad either side bracket the focus; the figures of a tilted plane measure along it."""
    from tracer.schema import Beam, Plane
    from tracer.species import species
    cell = 0.5e-3
    sp = species("p+")
    energy = 100.0
    p = momentum(energy, sp.mass_kg)
    gm = math.hypot(sp.mass_kg, p / C)
    v = p / gm
    field = annulus(cell, p * v / sp.charge_C)        # gamma m v^2 / r0 = q k / r0 on the circle
    beta2 = (v / C) ** 2
    focus = math.pi / math.sqrt(2.0 - beta2)
    alphas = np.array([-2e-3, -1e-3, 0.0, 1e-3, 2e-3])
    s = np.zeros(len(alphas), START_DTYPE)
    s["ray"] = np.arange(len(alphas))
    s["z_m"], s["y_m"] = CENTRE_Z + R0_M, CENTRE_Y    # at polar angle 0, bending clockwise
    s["pz"], s["py"] = p * np.sin(alphas), -p * np.cos(alphas)
    s["energy_eV"] = energy
    # the radial line at polar angle -phi: its direction is radial, its normal the motion
    planes = [Plane(f"at{k}", CENTRE_Z, r_m=CENTRE_Y, angle_rad=-(focus + d)) for k, d in enumerate((-0.02, 0.0, 0.02))]
    run = trace(field, Beam("p", sp, None, None, count=None), planes=planes, starts=s,
                max_time_s=2.0 * R0_M * focus / v)
    assert set(run.records["status"]) == {"time"}
    odd = []
    for plane in planes:
        rows = run.at_plane(plane.name)
        rows = rows[rows["crossing"] == 0]
        assert len(rows) == len(alphas) and (rows["pn"] > 0).all()
        rho = np.hypot(rows["z_m"] - CENTRE_Z, rows["y_m"] - CENTRE_Y)
        assert np.allclose(rows["v_m"], rho, rtol=0.0, atol=1e-12)       # along the line, from the centre
        odd.append((rho[-1] - rho[0]) / (2 * alphas[-1]))               # d rho / d alpha
    # the focus: where the first-order term changes sign (linear in the angle near it)
    root = focus - 0.02 + 0.04 * odd[0] / (odd[0] - odd[2])
    assert abs(root - focus) < 1e-5
    rows = run.at_plane("at1")
    rho = np.hypot(rows["z_m"] - CENTRE_Z, rows["y_m"] - CENTRE_Y)
    assert abs(odd[1] * alphas[-1]) < 1e-3 * cell                       # first order: gone
    blur = rho - rho[2]
    assert np.allclose(blur, -(4.0 / 3.0) * R0_M * alphas**2, rtol=0.05, atol=1e-4 * cell)
    figures = run.summary()["planes"]["at1"]
    assert figures["fraction"] == 1.0
    assert figures["centroid_y_m"] == pytest.approx(np.mean(rho), abs=1e-12)
    assert figures["rms_y_m"] < 0.01 * cell


def test_rays_land_on_the_arcs_of_an_analyser_off_the_axis():
    """Protons sent straight along radii of the analyser (the field is radial: they stay on them)
    land on the inner and the outer cylinder where those radii meet them, head on, with the energy
    the log potential gives them (coaxial cylinders, e.g. Jackson; energy conservation)."""
    from tracer.schema import Beam
    from tracer.species import species
    cell, k = 0.5e-3, 200.0
    field = annulus(cell, k)
    sp = species("p+")
    phis = np.array([2.0, -0.4, 2.9, -2.3])
    inward = np.array([True, True, False, False])
    s = np.zeros(len(phis), START_DTYPE)
    s["ray"] = np.arange(len(phis))
    s["z_m"], s["y_m"] = CENTRE_Z + R0_M * np.cos(phis), CENTRE_Y + R0_M * np.sin(phis)
    direction = np.where(inward, -1.0, 1.0)
    p = momentum(100.0, sp.mass_kg)
    s["pz"], s["py"] = direction * p * np.cos(phis), direction * p * np.sin(phis)
    s["energy_eV"] = 100.0
    run = trace(field, Beam("p", sp, None, None, count=None), planes=(), starts=s)
    rec = run.records
    assert list(rec["status"]) == ["landed"] * 4
    assert list(rec["electrode"]) == ["inner", "inner", "outer", "outer"]
    rho = np.hypot(rec["z_m"] - CENTRE_Z, rec["y_m"] - CENTRE_Y)
    radius = np.where(inward, A_M, B_M)
    assert np.allclose(rho, radius, rtol=0.0, atol=1e-6 * cell)
    assert np.allclose(np.arctan2(rec["y_m"] - CENTRE_Y, rec["z_m"] - CENTRE_Z), phis, rtol=0.0, atol=1e-9)
    assert np.allclose(rec["incidence_deg"], 0.0, atol=1e-4)
    gained = k * np.log(R0_M / radius)                  # q (V(r0) - V(rho)) for a proton
    assert np.allclose(rec["energy_eV"], 100.0 + gained, rtol=1e-6)


def test_a_cone_plane_in_axial_symmetry_gives_local_coordinates(tmp_path):
    """Straight rays along +z in a field-free tube cross the cone r = z - 10 mm (the plane's line
    through (10 mm, 0) at 45 degrees) where their radius equals z - 10 mm; along the line that is
    sqrt(2) r from its point, across it the arc r phi, and the momentum along the normal
    (1, -1)/sqrt(2) is pz / sqrt(2) (analytic geometry).  The config reads the same plane, and a
    result file keeps it tilted."""
    from test_trace import free_map

    from tracer.schema import Plane
    from tracer.store.result_file import read_result, write_result
    field, setup = free_map()
    plane = Plane("cone", 10e-3, r_m=0.0, angle_rad=math.radians(45.0))
    text = 'z_mm = 10.0\nr_mm = 0.0\nangle_deg = 45.0'
    assert free_map(extra=f'[[plane]]\nname = "cone"\n{text}')[1].planes == (plane,)
    sp = setup.beams[0].species
    s = np.zeros(3, START_DTYPE)
    s["ray"] = np.arange(3)
    s["x_m"], s["y_m"] = [1e-3, 0.0, -1.5e-3], [0.0, 2e-3, 0.0]
    s["z_m"], s["energy_eV"] = 1e-3, 100.0
    s["pz"] = momentum(100.0, sp.mass_kg)
    run = trace(field, setup.beams[0], planes=(plane,), starts=s)
    rows = run.at_plane("cone")
    r = np.array([1e-3, 2e-3, 1.5e-3])
    assert np.allclose(rows["z_m"], 10e-3 + r, rtol=0.0, atol=1e-9 * setup.domain.cell_m)
    assert np.allclose(rows["v_m"], math.sqrt(2.0) * r, rtol=1e-12, atol=0)
    assert np.allclose(rows["u_m"], r * np.array([0.0, math.pi / 2, math.pi]), rtol=1e-12, atol=0)
    assert np.allclose(rows["pn"], s["pz"] / math.sqrt(2.0), rtol=1e-12, atol=0)
    assert run.tilted_planes == ("cone",)
    figures = run.summary()["planes"]["cone"]
    assert figures["centroid_y_m"] == pytest.approx(math.sqrt(2.0) * r.mean(), rel=1e-12, abs=0)
    path = write_result(tmp_path / "result.h5", field, [run])
    back = read_result(path).beams[run.name]
    assert back.tilted_planes == ("cone",)
    assert np.array_equal(back.at_plane("cone")["v_m"], rows["v_m"])
    from tracer.plot import plot_phase_space
    assert plot_phase_space(back, "cone", tmp_path / "phase.png", "axial").stat().st_size > 0
