"""Tests of batch tracing against analytic motion: uniform fields, relativity, isotopes, events,
planes, and conservation laws in a solved three-tube lens."""

import dataclasses
import math

import numpy as np
import periodictable
import pytest
from scipy import constants

from tracer.beam import trace
from tracer.config import loads
from tracer.fieldmap import PotentialMap, basis_maps
from tracer.geometry import rasterize, shape_table
from tracer.grid import Grid
from tracer.solver import solve_unit_maps
from tracer.species import species

C = constants.c
E = constants.e

PLATES = """
title = "two plates (illustrative)"
[domain]
symmetry = "axial"
z_mm = [-2.0, 12.0]
r_mm = 5.0
cell_mm = 0.5
edges = {{ z_min = "ground", z_max = "ground", r_max = "open" }}
[[electrode]]
name = "back"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [-1.0, 0.0]
r_mm = [0.0, 5.0]
[[electrode]]
name = "front"
voltage_V = {volts}
[[electrode.rect]]
z_mm = [10.0, 11.0]
r_mm = [0.0, 5.0]
{extra}
[[beam]]
name = "b"
species = "{species}"
energy_eV = {energy}
count = {count}
seed = 11
start_z_mm = 1.0
radius_mm = 1.0
half_angle_deg = {angle}
"""
GAP = 10e-3      # plate surfaces at z = 0 and z = GAP
Z_START = 1e-3


def linear_map(setup, volts):
    """The exact field between the plates, V = volts z / GAP, as Hermite data (a bicubic patch
    reproduces a linear function exactly); the plates and any other electrodes from the setup."""
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    herm = np.zeros((4, grid.nz, grid.nr))
    herm[0] = (volts * grid.z / GAP)[:, None]
    herm[1] = volts / GAP
    return PotentialMap(grid, table, rasterize(table, grid), tuple(e.name for e in setup.electrodes),
                        tuple(e.voltage_V for e in setup.electrodes), herm)


def plates(volts=1000.0, species_name="e-", energy=10.0, count=40, angle=5.0, extra=""):
    setup = loads(PLATES.format(volts=volts, species=species_name, energy=energy, count=count,
                                angle=angle, extra=extra))
    return linear_map(setup, volts), setup


def landing_in_uniform_field(start, mass, force):
    """Exact relativistic landing on z = GAP under a constant force along z (any mechanics text:
    dp/dt = F, and the work-energy relation dE = F dz); returns (time, x, y, kinetic energy eV)."""
    mc2 = mass * C * C
    px, py, pz0 = start["px"], start["py"], start["pz"]
    e0 = math.sqrt(mc2**2 + ((px**2 + py**2 + pz0**2) * C * C))
    e1 = e0 + force * (GAP - start["z_m"])
    a = math.sqrt(mc2**2 + (px**2 + py**2) * C * C)
    pz1 = math.sqrt(e1**2 - a**2) / C
    t = (pz1 - pz0) / force
    # x(t) = x0 + (px c / F) [asinh(pz(t) c / a) - asinh(pz0 c / a)]
    shift = (C / force) * (math.asinh(pz1 * C / a) - math.asinh(pz0 * C / a))
    return t, start["x_m"] + px * shift, start["y_m"] + py * shift, (e1 - mc2) / E


def test_uniform_field_landing_energy_time_and_point():
    """Electrons between plates 1 kV apart land with start energy + qΔV, after Δp/F, at the
    analytic point (constant force, relativistic: any mechanics text, e.g. Jackson 1999 §12.3)."""
    field, setup = plates()
    sp = setup.beams[0].species
    run = trace(field, setup.beams[0])
    rec, starts = run.records, run.starts
    assert (rec["status"] == "landed").all() and (rec["electrode"] == "front").all()
    force = sp.charge_C * -(1000.0 / GAP)
    cell = setup.domain.cell_m
    for s, r in zip(starts, rec):
        t, x, y, ke = landing_in_uniform_field(s, sp.mass_kg, force)
        # qΔV = -q (V_land - V_start) with V = 1000 z / GAP
        assert r["energy_eV"] == pytest.approx(s["energy_eV"] + 1000.0 * (GAP - Z_START) / GAP, rel=1e-10)
        assert r["energy_eV"] == pytest.approx(ke, rel=1e-10)
        assert r["time_s"] == pytest.approx(t, rel=1e-9, abs=0)
        assert abs(r["z_m"] - GAP) < 1e-6 * cell
        assert abs(r["x_m"] - x) < 1e-6 * cell and abs(r["y_m"] - y) < 1e-6 * cell


def test_electron_through_100_kV_needs_relativity():
    """An electron from rest through 100 kV: the tracer's time of flight is the relativistic p/F,
    and the non-relativistic sqrt(2 m d / F) is several per cent short (common practice:
    at 100 keV, beta = 0.55)."""
    volts = 100e3 * GAP / (GAP - Z_START)   # 100 kV from the start plane to the front plate
    field, setup = plates(volts=volts, energy=0.0, count=3, angle=0.0)
    sp = species("e-")
    rec = trace(field, setup.beams[0]).records
    force = E * volts / GAP
    d = GAP - Z_START
    ke = 100e3 * E
    p = math.sqrt(ke * (ke + 2 * sp.mass_kg * C * C)) / C
    t_rel = p / force
    t_newton = math.sqrt(2 * sp.mass_kg * d / force)
    assert (t_rel - t_newton) / t_rel > 0.03
    assert np.allclose(rec["time_s"], t_rel, rtol=1e-9, atol=0)
    assert np.allclose(rec["energy_eV"], 100e3, rtol=1e-10)


def test_ion_time_of_flight_scales_with_isotope_mass():
    """40Ar+ and 36Ar+ from rest through the same field: t ∝ sqrt(m) (constant force, from rest;
    masses: periodictable's NIST isotope data, less one electron mass)."""
    times = {}
    for a in (36, 40):
        field, setup = plates(volts=1000.0, species_name=f"{a}Ar+", energy=0.0, count=2, angle=0.0)
        times[a] = trace(field, setup.beams[0]).records["time_s"]
    m = {a: periodictable.Ar[a].mass * constants.atomic_mass - constants.m_e for a in (36, 40)}
    assert np.allclose(times[40] / times[36], math.sqrt(m[40] / m[36]), rtol=1e-7)
    assert times[40][0] / times[36][0] - 1 > 0.05   # the isotopes do separate


TUBE = """
title = "a tube in a field-free domain (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 30.0]
r_mm = 5.0
cell_mm = 0.5
edges = "ground"
[[electrode]]
name = "tube"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [5.0, 20.0]
r_mm = [3.0, 3.5]
{extra}
[[beam]]
name = "b"
species = "p+"
energy_eV = 100.0
count = 60
seed = 5
start_z_mm = 1.0
start_r_mm = {start_r}
radius_mm = 1.0
half_angle_deg = {angle}
"""


def free_map(extra="", start_r=0.0, angle=12.0):
    setup = loads(TUBE.format(extra=extra, start_r=start_r, angle=angle))
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    field = PotentialMap(grid, table, rasterize(table, grid), tuple(e.name for e in setup.electrodes),
                         tuple(e.voltage_V for e in setup.electrodes), np.zeros((4, grid.nz, grid.nr)))
    return field, setup


def line_hits_cylinder(s, radius):
    """Path length parameter (time) where the straight ray from s meets r = radius, or inf."""
    v = np.array([s["px"], s["py"], s["pz"]])
    x0, y0 = s["x_m"], s["y_m"]
    a = v[0] ** 2 + v[1] ** 2
    b = 2 * (x0 * v[0] + y0 * v[1])
    c = x0**2 + y0**2 - radius**2
    if a == 0:
        return math.inf
    return (-b + math.sqrt(b * b - 4 * a * c)) / (2 * a)   # in units of (time x momentum / mass)


def test_landing_on_a_tube_is_located_on_the_true_surface():
    """Skew rays in a field-free region land on the inner surface r = 3 mm of a tube at the exact
    crossing of their straight line with the cylinder (analytic geometry)."""
    field, setup = free_map()
    sp = setup.beams[0].species
    run = trace(field, setup.beams[0])
    landed = run.records["status"] == "landed"
    assert landed.sum() > 20
    cell = setup.domain.cell_m
    for s, r in zip(run.starts[landed], run.records[landed]):
        k = line_hits_cylinder(s, 3e-3)
        gm = math.sqrt(sp.mass_kg**2 + (s["px"] ** 2 + s["py"] ** 2 + s["pz"] ** 2) / C**2)
        point = np.array([s["x_m"] + s["px"] * k, s["y_m"] + s["py"] * k, s["z_m"] + s["pz"] * k])
        assert 5e-3 <= point[2] <= 20e-3
        assert np.abs(np.array([r["x_m"], r["y_m"], r["z_m"]]) - point).max() < 1e-6 * cell
        assert r["time_s"] == pytest.approx(k * gm, rel=1e-9, abs=0)
        assert r["electrode"] == "tube"


def test_a_foil_thinner_than_the_step_is_not_skipped():
    """A 5 µm foil (1/100 of a cell) stops every ray even with steps allowed to span 20 cells
    (common practice: a particle cannot pass through a conductor)."""
    foil = '[[electrode]]\nname = "foil"\nvoltage_V = 0.0\n[[electrode.rect]]\nz_mm = [3.0, 3.005]\nr_mm = [0.0, 2.5]'
    field, setup = free_map(extra=foil, angle=5.0)
    rec = trace(field, setup.beams[0], max_step_cells=20.0).records
    assert (rec["electrode"] == "foil").all()
    assert np.allclose(rec["z_m"], 3e-3, rtol=0, atol=1e-6 * setup.domain.cell_m)


def test_crossing_the_axis_is_not_leaving(tmp_path):
    """A ray from x = 1 mm aimed at 60 degrees towards -x crosses the axis and leaves through
    r = 5 mm at x = -5 mm, where its straight line meets the edge; a ray along the axis leaves
    through z_max (analytic geometry)."""
    field, setup = free_map()
    rays = tmp_path / "rays.csv"
    a = math.radians(60.0)
    rays.write_text(f"x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n1,0,1,{-math.sin(a)},0,{math.cos(a)},100\n"
                    "0,0,1,0,0,1,100\n")
    beam = dataclasses.replace(setup.beams[0], rays_csv=rays, count=None)
    rec = trace(field, beam).records
    assert list(rec["status"]) == ["left", "left"]
    cell = setup.domain.cell_m
    assert abs(rec["x_m"][0] + 5e-3) < 1e-6 * cell
    assert abs(rec["z_m"][0] - (1e-3 + 6e-3 / math.tan(a))) < 1e-6 * cell
    assert abs(rec["z_m"][1] - 30e-3) < 1e-6 * cell and rec["x_m"][1] == 0.0


def test_planes_record_every_crossing_and_stop_planes_end_rays():
    """A proton sent against a retarding field crosses a plane, turns at the analytic turning
    point and crosses it again, then lands on the back plate with its start energy plus qΔV
    (energy conservation: common practice); a stop plane ends it at the first crossing."""
    field, setup = plates(volts=1000.0, species_name="p+", energy=500.0, count=5, angle=0.0,
                          extra='[[plane]]\nname = "p3"\nz_mm = 3.0')
    beam = setup.beams[0]
    run = trace(field, beam, planes=setup.planes)
    rec = run.records
    assert (rec["status"] == "landed").all() and (rec["electrode"] == "back").all()
    assert np.allclose(rec["energy_eV"], 500.0 + 100.0, rtol=1e-10)
    rows = run.at_plane("p3")
    assert len(rows) == 2 * len(rec)
    assert sorted(rows["crossing"]) == [0] * 5 + [1] * 5
    assert (rows["pz"][rows["crossing"] == 0] > 0).all() and (rows["pz"][rows["crossing"] == 1] < 0).all()
    assert np.allclose(rows["z_m"], 3e-3, rtol=0, atol=1e-9)
    assert np.allclose(rows["energy_eV"], 500.0 - 200.0, rtol=1e-10)
    # time of the first crossing: constant deceleration from v0 (relativistic p form)
    sp = beam.species
    force = -E * 1000.0 / GAP
    p0 = math.sqrt(500 * E * (500 * E + 2 * sp.mass_kg * C * C)) / C
    p1 = math.sqrt(300 * E * (300 * E + 2 * sp.mass_kg * C * C)) / C
    first = rows[rows["crossing"] == 0]
    assert np.allclose(first["time_s"], (p1 - p0) / force, rtol=1e-9, atol=0)

    stop = dataclasses.replace(setup.planes[0], stop=True)
    run2 = trace(field, beam, planes=(stop,))
    assert (run2.records["status"] == "plane").all()
    assert np.allclose(run2.records["time_s"], (p1 - p0) / force, rtol=1e-9, atol=0)
    assert len(run2.at_plane("p3")) == len(rec)
    summary = run.summary()
    assert summary["transmission"] == {"p3": 1.0}
    assert summary["landing"]["back"]["count"] == 5
    assert summary["landing"]["back"]["energy_mean_eV"] == pytest.approx(600.0, rel=1e-10)
    with pytest.raises(KeyError):
        run.at_plane("nowhere")


def test_twenty_planes_crossed_twice_keep_every_crossing():
    """Twenty planes between the start and the turning point of a proton in a retarding field: each
    ray crosses each plane on the way in and on the way back, 40 crossings, more than the first
    pass has room for (max_crossings = 16 by default, 1 here too).  None is dropped: every plane
    has both crossings of every ray, in order, at the energy 600 eV − 100 eV/mm · z that energy
    conservation gives (common practice), and transmission 1 at every plane."""
    extra = "\n".join(f'[[plane]]\nname = "p{k}"\nz_mm = {1.2 + 0.2 * k:.1f}' for k in range(20))
    field, setup = plates(volts=1000.0, species_name="p+", energy=500.0, count=3, angle=0.0, extra=extra)
    for room in (16, 1):
        run = trace(field, setup.beams[0], planes=setup.planes, max_crossings=room)
        assert len(run.crossings) == 3 * 20 * 2
        assert (run.records["status"] == "landed").all()
        for plane in setup.planes:
            rows = run.at_plane(plane.name)
            assert sorted(rows["ray"]) == [0, 0, 1, 1, 2, 2] and sorted(rows["crossing"]) == [0, 0, 0, 1, 1, 1]
            assert (rows["pz"][rows["crossing"] == 0] > 0).all() and (rows["pz"][rows["crossing"] == 1] < 0).all()
            assert np.allclose(rows["energy_eV"], 600.0 - 100.0 * plane.z_m * 1e3, rtol=1e-9)
        for ray in range(3):   # each ray's crossings in order of time
            assert (np.diff(run.crossings["time_s"][run.crossings["ray"] == ray]) > 0).all()
        assert run.summary()["transmission"] == {p.name: 1.0 for p in setup.planes}


def test_time_limit_and_inside_starts():
    """Rays still flying at max_time stop there on their straight line; rays that start inside an
    electrode are not traced (field-free drift: common practice)."""
    field, setup = free_map(angle=0.0)
    beam = dataclasses.replace(setup.beams[0], count=3)
    sp = beam.species
    v = math.sqrt(2 * 100 * E / sp.mass_kg)
    run = trace(field, beam, max_time_s=1e-8)
    assert (run.records["status"] == "time").all()
    assert np.allclose(run.records["time_s"], 1e-8, rtol=1e-15, atol=0)
    assert np.allclose(run.records["z_m"], 1e-3 + v * 1e-8, rtol=1e-6, atol=0)
    inside = dataclasses.replace(beam, start_z_m=10e-3, start_r_m=3.2e-3, radius_m=0.0)
    run = trace(field, inside)
    assert (run.records["status"] == "inside").all() and (run.records["electrode"] == "tube").all()
    assert (run.records["steps"] == 0).all() and (run.starts["status"] == "inside").all()
    assert run.summary()["status"]["inside"] == 3


THREE_TUBE = """
title = "three-tube lens (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 60.0]
r_mm = 8.0
cell_mm = {cell}
edges = "ground"
[[electrode]]
name = "entry"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [0.0, 18.0]
r_mm = [5.0, 6.0]
[[electrode]]
name = "lens"
voltage_V = {volts}
[[electrode.rect]]
z_mm = [20.0, 40.0]
r_mm = [5.0, 6.0]
[[electrode]]
name = "exit"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [42.0, 60.0]
r_mm = [5.0, 6.0]
[[beam]]
name = "protons"
species = "p+"
energy_eV = 1000.0
count = {count}
seed = 3
start_z_mm = 2.0
start_r_mm = 0.5
radius_mm = 2.0
half_angle_deg = 3.0
[[plane]]
name = "image"
z_mm = 55.0
"""


def three_tube(volts=800.0, count=40, cell=0.5):
    """A solved three-tube lens (a real Laplace solve on a small grid) and its setup."""
    setup = loads(THREE_TUBE.format(volts=volts, count=count, cell=cell))
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    maps = basis_maps(setup, solve_unit_maps(grid, table))
    return maps.combine(), setup


@pytest.fixture(scope="module")
def lens_run():
    field, setup = three_tube()
    return trace(field, setup.beams[0], planes=setup.planes, keep_paths=5), setup


def test_angular_momentum_about_the_axis_is_conserved(lens_run):
    """Skew rays in the axially symmetric lens keep L_z = x p_y - y p_x (conservation of angular
    momentum about the symmetry axis: any mechanics text)."""
    run, _ = lens_run
    s, r = run.starts, run.records
    lz0 = s["x_m"] * s["py"] - s["y_m"] * s["px"]
    lz1 = r["x_m"] * r["py"] - r["y_m"] * r["px"]
    scale = np.abs(lz0).max()
    assert scale > 0                          # the beam does have skew rays
    assert np.abs(lz1 - lz0).max() < 1e-9 * scale
    for path in run.paths:
        lz = path["x_m"] * path["py"] - path["y_m"] * path["px"]
        assert np.abs(lz - lz[0]).max() < 1e-9 * scale
    # the lens did act: the transverse momenta changed
    assert np.abs(r["px"] - s["px"]).max() > 1e-3 * np.abs(s["pz"]).max()


def test_ledger_stays_below_1e_7_of_the_lens_voltage(lens_run):
    """Energy conservation through the solved lens: every ray's worst |ΔKE − qΔV| is below 1e-7
    of the 800 V lens voltage (conservation of energy in a static field: common practice)."""
    run, _ = lens_run
    assert run.records["ledger_eV"].max() < 1e-7 * 800.0
    assert run.summary()["ledger_suspects"] == 0
    assert not any("energy ledger" in w for w in run.summary()["warnings"])
    assert (run.records["status"] != "stalled").all()
    assert run.summary()["status"]["left"] + run.summary()["status"]["landed"] == len(run.records)
