"""Tracing through voltages that change in time, against the world outside: a uniform field
switched on (closed form), the quadrupole ion trap's stability edge and secular frequency (the
Mathieu equation), time-lag focusing of a two-stage source (Wiley & McLaren 1955); and the energy
ledger in time on all of them. The reference solutions are in tests/timecases.py."""

import math

import numpy as np
import pytest
from scipy import constants

from test_trace import GAP, PLATES, THREE_TUBE, Z_START
from timecases import (SwitchedField, TwoStageSource, beta_monodromy, qz_from_curvature,
                       stability_edge_q)
from tracer.beam import trace
from tracer.config import loads
from tracer.fieldmap import BasisMaps
from tracer.geometry import rasterize, shape_table
from tracer.grid import Grid
from tracer.groups import group_maps
from tracer.motion.bundles import I_PIECE, I_RAY, LANES, W_G, W_H, W_ROWS, W_T, lane_state
from tracer.motion.drive import D_COS, D_RATE, D_SIN, D_VALUE, D_WEIGHT, STAGE_TIMES, weigh_steps
from tracer.motion.stepper import stage_work
from tracer.motion.tableau import DP_C
from tracer.scans import voltage_sets
from tracer.schema import scan_column
from tracer.sources import rays_from
from tracer.waveforms import Pulse, Sinusoid, Waveform, piece, rate, value, wave_arrays



def test_a_steps_work_is_its_stage_rates_by_the_fifth_order_weights():
    """A whole step's dV/dt work is h sum_j b_j g_j over its stages' rates
    (tracer.motion.stepper.stage_work): exact when the rate is a polynomial of degree 4 in time,
    not of degree 5 (the quadrature conditions of a fifth-order Runge–Kutta method: Dormand &
    Prince 1980; Hairer, Norsett & Wanner 1993, sec. II.1), and on a sinusoid over a step of 1.1/16
    of its period, the longest a step may be, within 2.4e-8 of max |dw/dt| x step at any phase, as
    tracer.ledger says (exact integral: the change of the sinusoid)."""
    w = np.zeros((W_ROWS, LANES))
    h = 3e-9
    w[W_H, 0] = h
    for degree in range(6):
        w[W_G:W_G + 7, 0] = (DP_C * h) ** degree
        work, magnitude = stage_work(w, 0)
        exact = h ** (degree + 1) / (degree + 1)
        assert work == magnitude
        if degree < 5:
            assert work == pytest.approx(exact, rel=1e-14, abs=0)
        else:
            assert abs(work - exact) > 1e-5 * exact
    omega = 2 * math.pi * 1e7
    h = 1.1 / 16 * 2 * math.pi / omega
    w[W_H, 0] = h
    worst = 0.0
    for phase in np.linspace(0.0, 2 * math.pi, 97):
        w[W_G:W_G + 7, 0] = -omega * np.sin(omega * DP_C * h + phase)
        exact = math.cos(omega * h + phase) - math.cos(phase)
        worst = max(worst, abs(stage_work(w, 0)[0] - exact) / (omega * h))
    assert 1e-10 < worst < 2.4e-8


def test_the_step_weights_are_the_waveforms_at_the_stage_times():
    """drive.weigh_steps (all stages' weights once a step, each sinusoid turned from the step's
    start) gives each waveform's value and rate (waveforms.value and rate: the direct cosine and
    sine) at every stage time t + c h of steps up to max_step_s long, started anywhere on a
    thousand periods of the fastest sinusoid and on the pieces of a pulse, to the round-off of
    the angle (a few units of its last bit, ulp(omega t), times the amplitude; the pulse's
    straight line exactly); lanes without a ray take no cosine and sine."""
    waves = wave_arrays([Waveform(dc_V=3.0, sinusoids=(Sinusoid(40.0, 1.1e6, 0.4),
                                                       Sinusoid(-7.0, 3.3e6))),
                         Waveform(pulses=(Pulse(100.0, 2e-7, rise_s=5e-8, width_s=1e-7,
                                                fall_s=2e-8),))])
    rng = np.random.default_rng(5)
    w = np.zeros((W_ROWS, LANES))
    li = lane_state()[1]
    dw = np.full((2, 4, 16, LANES), 7.0)
    w[W_T] = np.r_[rng.uniform(0.0, 1000 / 3.3e6, LANES - 3), 1.9e-7, 2.2e-7, 3.1e-7]
    w[W_H] = rng.uniform(0.0, 1.0, LANES) * waves.max_step_s
    w[W_H, -3] = min(w[W_H, -3], 1e-8)       # on the piece before the rise starts
    for l in range(LANES):
        li[I_RAY, l] = l if l != 2 else -1
        li[I_PIECE, l] = piece(waves, w[W_T, l])
    weigh_steps(dw, w, waves, li)
    for l in range(LANES):
        if l == 2:
            assert (dw[:, D_WEIGHT, D_COS:D_SIN + 1, l] == 7.0).all()
            continue
        for s, c in enumerate(STAGE_TIMES):
            if s == 0:
                continue
            t = w[W_T, l] + c * w[W_H, l]
            ulp = 4 * np.spacing(2 * math.pi * 3.3e6 * t)      # measured: at most 0.54 of it
            m = li[I_PIECE, l]
            assert abs(dw[0, D_WEIGHT, 2 * s + D_VALUE, l] - value(waves, 0, m, t)) <= 47.0 * ulp
            assert (abs(dw[0, D_WEIGHT, 2 * s + D_RATE, l] - rate(waves, 0, m, t))
                    <= 47.0 * 2 * math.pi * 3.3e6 * ulp)
            assert dw[1, D_WEIGHT, 2 * s + D_VALUE, l] == value(waves, 1, m, t)
            assert dw[1, D_WEIGHT, 2 * s + D_RATE, l] == rate(waves, 1, m, t)


def plate_basis(setup):
    """The exact unit maps of the two plates, 1 - z / GAP (back) and z / GAP (front), as Hermite
    data (a bicubic patch reproduces a linear function exactly)."""
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    unit = np.zeros((2, 4, grid.nz, grid.nr))
    unit[1, 0] = (grid.z / GAP)[:, None]
    unit[1, 1] = 1.0 / GAP
    unit[0, 0] = 1.0 - unit[1, 0]
    unit[0, 1] = -unit[1, 1]
    return BasisMaps(grid, table, rasterize(table, grid), ("back", "front"), (0.0, 0.0), None, unit,
                     (), "")


@pytest.mark.parametrize("species_name, volts, switch_s, ramp_s", [
    ("40Ar+", -1000.0, 50e-9, 0.0),        # a step: the jump term carries -qE z0
    ("40Ar+", -1000.0, 50e-9, 200e-9),     # a ramp: the dV/dt term
    ("e-", 100e3, 1e-9, 0.0),              # relativistic electrons, a step
    ("e-", 100e3, 1e-9, 0.05e-9),          # and a ramp shorter than the flight
])
def test_uniform_field_switched_on(species_name, volts, switch_s, ramp_s):
    """Charges at rest until a uniform field is switched on (the front plate pulsed from 0 to
    ``volts``) land when, where and with the energy of the closed form (tests/timecases.py:
    impulse p = q ∫E dt, hyperbolic motion for a step, the hypergeometric series over a ramp); the
    ledger's terms are those of the closed form: the jump -q E z0 of a step, q ∫ dV/dt dt of a
    ramp (scipy's quad), and it closes to the static tolerance."""
    setup = loads(PLATES.format(volts=0.0, species=species_name, energy=0.0, count=3, angle=0.0,
                                extra=""))
    beam, z0 = setup.beams[0], Z_START
    sp = beam.species
    drive = {"front": Waveform(pulses=(Pulse(volts, switch_s, rise_s=ramp_s),))}
    grouped = group_maps(plate_basis(setup), drive)
    ref = SwitchedField(-volts / GAP, switch_s, ramp_s, sp.mass_kg, sp.charge_C)
    t_land = ref.time_at(GAP - z0)
    run = trace(grouped, beam, rtol=1e-10, max_time_s=10 * t_land)
    rec = run.records
    assert (rec["status"] == "landed").all() and (rec["electrode"] == "front").all()
    gained = ref.energy_eV(t_land)
    assert rec["time_s"] == pytest.approx(np.full(3, t_land), rel=1e-9, abs=0)
    assert rec["energy_eV"] == pytest.approx(np.full(3, gained), rel=1e-9)
    potential, work, jump = ref.ledger_terms_eV(z0, t_land)
    assert run.work_eV == pytest.approx(np.full(3, work + jump), rel=1e-9, abs=1e-9 * abs(gained))
    assert potential + work + jump == pytest.approx(gained, rel=1e-9)
    assert abs(run.work_eV).min() > 0.05 * abs(gained)        # the time term is no small part
    assert run.ledger.suspects == 0 and run.ledger.worst_relative < 1e-8


@pytest.mark.parametrize("delay_s, rise_s", [(40e-9, 5e-9), (100e-9, 0.5e-9)])
def test_the_ledger_closes_when_a_pulse_rises_as_rays_cross_cell_walls(delay_s, rise_s):
    """A pulse on the solved three-tube lens rising while its rays cross cell walls: the ledger in
    time closes for every ray (the energy identity of tracer.ledger, quasi-static fields), as in the
    uniform gap, where no step ends on a corner and a wall together."""
    from tracer.fieldmap import basis_maps
    from tracer.solver import solve_unit_maps

    setup = loads(THREE_TUBE.format(volts=800.0, count=100, cell=0.5))
    grid = Grid.from_domain(setup.domain)
    maps = basis_maps(setup, solve_unit_maps(grid, shape_table(setup.electrodes, setup.domain)))
    lens = Waveform(dc_V=800.0, pulses=(Pulse(80.0, delay_s, rise_s=rise_s, width_s=1.0),))
    run = trace(group_maps(maps, {"lens": lens}), setup.beams[0], planes=setup.planes)
    assert abs(run.work_eV).max() > 10.0           # the pulse did work on the rays
    assert run.ledger.suspects == 0 and run.ledger.worst_relative < 1e-7


def test_an_rf_period_takes_a_bounded_number_of_steps_without_field():
    """Where the field is all but nil the integrator would take one long step; with an RF
    waveform each period still takes STEPS_PER_PERIOD steps (the step bound of
    tracer.waveforms), no more: ions at rest for 10 periods of 1 MHz take 160 steps (161 when the
    sum of the steps falls short of the end by a rounding error)."""
    from tracer.waveforms import STEPS_PER_PERIOD

    setup = loads(PLATES.format(volts=0.0, species="40Ar+", energy=0.0, count=3, angle=0.0, extra=""))
    weak = {"front": Waveform(sinusoids=(Sinusoid(1e-9, 1e6),))}
    run = trace(group_maps(plate_basis(setup), weak), setup.beams[0], max_time_s=10e-6)
    assert (run.records["status"] == "time").all()
    steps = run.records["steps"]      # and one more when rounding leaves a sliver before the end
    assert (steps >= 10 * STEPS_PER_PERIOD).all() and (steps <= 10 * STEPS_PER_PERIOD + 1).all()
    assert run.ledger.suspects == 0


# --------------------------------------------------------------------------------------------
# The quadrupole ion trap

E = constants.e
R0, Z0 = 10e-3, 10e-3 / math.sqrt(2.0)     # ring radius and end-cap distance, r0^2 = 2 z0^2
RF_HZ = 1e6


def trap_toml():
    """A quadrupole ion trap of our own proportions: a hyperbolic ring r^2 - 2 z^2 = r0^2 and two
    hyperbolic end caps 2 z^2 - r^2 = 2 z0^2 (Paul 1990), cut off inside a grounded box."""
    zs = np.linspace(-6.0, 6.0, 25)
    ring = [[z, math.sqrt(100.0 + 2 * z * z)] for z in zs] + [[6.0, 15.0], [-6.0, 15.0]]
    rs = np.linspace(0.0, 9.0, 19)
    cap = [[math.sqrt(50.0 + r * r / 2), r] for r in rs] + [[15.0, 9.0], [15.0, 0.0]]

    def points(p):
        return "[" + ", ".join(f"[{z:.6f}, {r:.6f}]" for z, r in p) + "]"

    return f"""
title = "quadrupole ion trap (illustrative)"
[domain]
symmetry = "axial"
z_mm = [-16.0, 16.0]
r_mm = 16.0
cell_mm = 0.2
[[electrode]]
name = "ring"
voltage_V = 0.0
[[electrode.polygon]]
points_mm = {points(ring)}
[[electrode]]
name = "cap_a"
voltage_V = 0.0
[[electrode.polygon]]
points_mm = {points(cap)}
[[electrode]]
name = "cap_b"
voltage_V = 0.0
[[electrode.polygon]]
points_mm = {points([[-z, r] for z, r in cap])}
[[beam]]
name = "ion"
species = "40Ar+"
energy_eV = 0.0
count = 1
start_z_mm = 0.3
[[plane]]
name = "centre"
z_mm = 0.0
"""


@pytest.fixture(scope="module")
def trap(tmp_path_factory):
    """The trap's setup, its solved basis maps and the curvature kappa = d2phi/dz2 of the ring's
    unit map at the centre, from an even polynomial fitted to the interpolant over |z| <= 1 mm."""
    from tracer.fieldmap import solve_basis

    setup = loads(trap_toml())
    maps = solve_basis(setup, rtol=1e-12)
    z = np.linspace(-1e-3, 1e-3, 81)
    phi = maps.combine({"ring": 1.0, "cap_a": 0.0, "cap_b": 0.0}).potential(z, np.zeros_like(z))
    c = np.polynomial.polynomial.polyfit(z * z, phi, 3)
    return setup, maps, 2.0 * c[1]


def trap_run(trap, q_z, periods, **options):
    """Trace the trap's ion for ``periods`` RF periods with the ring driven at the amplitude that
    gives q_z = 2 q |kappa| V / (m Omega^2) (tests/timecases.py, qz_from_curvature)."""
    setup, maps, kappa = trap
    beam = setup.beams[0]
    sp = beam.species
    omega = 2 * math.pi * RF_HZ
    volts = q_z * sp.mass_kg * omega**2 / (2 * abs(sp.charge_C * kappa))
    assert qz_from_curvature(kappa, volts, sp.mass_kg, sp.charge_C, RF_HZ) == pytest.approx(q_z)
    rf = Waveform(sinusoids=(Sinusoid(volts, RF_HZ),))
    grouped = group_maps(maps, {"ring": rf, "cap_a": 0.0, "cap_b": 0.0})
    return trace(grouped, beam, planes=setup.planes, rtol=1e-10, max_time_s=periods / RF_HZ,
                 **options), volts


def test_trap_curvature_near_the_ideal(trap):
    """The solved trap's curvature is near the ideal -4 / (r0^2 + 2 z0^2) of hyperbolic electrodes
    (Paul 1990): the cut-off electrodes and the box change it by a few per cent at most."""
    assert trap[2] == pytest.approx(-4.0 / (R0**2 + 2 * Z0**2), rel=0.05)


@pytest.mark.parametrize("factor, held", [(0.99, True), (1.005, False)])
def test_trap_stability_edge(trap, factor, held):
    """At a = 0 the axial motion turns unstable at q_z = 0.908 (the Mathieu characteristic value
    b_1(q) = 0 by scipy.special.mathieu_b; McLachlan 1947, Paul 1990): at 0.99 of it the ion is held
    for 1000 RF periods, at 1.005 of it it is lost within about 100 (its amplitude grows by the
    Floquet multiplier, 1.22 a period). The ledger closes with the RF's work the whole energy."""
    q_edge = stability_edge_q()
    assert q_edge == pytest.approx(0.908, abs=5e-4)
    run, volts = trap_run(trap, factor * q_edge, 1000 if held else 100)
    (rec,) = run.records
    if held:
        assert rec["status"] == "time" and rec["time_s"] == pytest.approx(1000 / RF_HZ, rel=1e-12, abs=0)
        assert abs(rec["z_m"]) < Z0 and rec["steps"] < 200 * 1000
    else:
        assert rec["status"] == "landed" and rec["electrode"] in ("cap_a", "cap_b")
        assert rec["time_s"] < 100 / RF_HZ
    assert run.ledger.suspects == 0
    assert run.ledger.worst_eV < 1e-6 * abs(run.energy_scale_eV[0])
    # the RF exchanges far more energy with the ion than the ledger's worst residual
    assert run.energy_scale_eV[0] > 1e6 * run.ledger.worst_eV


@pytest.mark.parametrize("q_z", [0.3, 0.6])
def test_trap_secular_frequency(trap, q_z):
    """The secular frequency beta_z Omega / 2 of a small axial oscillation matches the exact
    characteristic exponent beta_z of the Mathieu equation (from its monodromy matrix, tied to
    scipy.special's characteristic values in tests/test_timecases.py) to 1e-3, where Dehmelt's
    q / sqrt(2) (1967) is off by 2 % at 0.3 and more at 0.6. Measured from the ion's crossings of
    the centre plane: a straight line through their times has the half secular period as slope."""
    run, _ = trap_run(trap, q_z, 600, max_crossings=1000)
    times = run.at_plane("centre")["time_s"]
    assert len(times) > 100
    slope = np.polyfit(np.arange(len(times)), times, 1)[0]
    beta = 1.0 / (RF_HZ * slope)
    exact = beta_monodromy(0.0, q_z)
    assert beta == pytest.approx(exact, rel=1e-3)
    assert abs(q_z / math.sqrt(2) - exact) > 1.5e-2 * exact
    assert run.ledger.suspects == 0


# --------------------------------------------------------------------------------------------
# Delayed extraction: time-lag focusing of a two-stage source

TOF = """
title = "two-stage time-of-flight source, its grids drawn as the field they make (illustrative)"
[domain]
symmetry = "axial"
z_mm = [-1.0, 216.0]
r_mm = 1.0
cell_mm = 0.05
[[electrode]]
name = "repeller"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [-1.0, 0.0]
r_mm = [0.0, 1.0]
[[beam]]
name = "ions"
species = "40Ar+"
energy_eV = 0.0
count = 1
start_z_mm = 2.5
[[plane]]
name = "detector"
z_mm = 215.025
stop = true
"""
GRIDS_M = (5.025e-3, 15.025e-3)      # the two grids, halfway between nodes


def two_stage_basis(setup):
    """Unit maps of a two-stage source along z, the same at every r: the repeller's falls from 1
    at z = 0 to 0 at the first grid, the first grid's rises from 0 at z = 0 to 1 at the first grid
    and falls to 0 at the second (which is grounded with the drift). The grids are ideal planes
    the ions pass through; each kink lies halfway between nodes, where the C1 interpolant rounds
    it within that one cell."""
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    g1, g2 = GRIDS_M
    z = grid.z
    rep = np.clip(1.0 - z / g1, 0.0, 1.0)
    mid = np.where(z < g1, np.clip(z / g1, 0.0, 1.0), np.clip((g2 - z) / (g2 - g1), 0.0, 1.0))
    slopes = (np.where((z > 0) & (z < g1), -1.0 / g1, 0.0),
              np.where((z > 0) & (z < g1), 1.0 / g1, np.where((z > g1) & (z < g2), -1.0 / (g2 - g1), 0.0)))
    unit = np.zeros((2, 4, grid.nz, grid.nr))
    for k, (v, dv) in enumerate(zip((rep, mid), slopes)):
        unit[k, 0] = v[:, None]
        unit[k, 1] = dv[:, None]
    names = ("repeller", "grid")
    return BasisMaps(grid, table, rasterize(table, grid), names, (0.0, 0.0), None, unit, (), "")


def test_delayed_extraction_focuses_the_initial_velocities():
    """Wiley & McLaren (1955): with the extraction pulse delayed by the first-order focusing delay
    (tests/timecases.py, TwoStageSource.focusing_delay), ions that start at one place with
    different velocities arrive together: dT/dv0 = 0. The traced flight times agree with the
    closed form, and the traced dT/dv0 (central differences over +-50 m/s) is below 0.1 % of its
    size with prompt extraction, where it is the turn-around time. The pulse's jump is in the
    ledger."""
    setup = loads(TOF)
    beam = setup.beams[0]
    sp = beam.species
    g1, g2 = GRIDS_M
    held, pushed = 2000.0, 400.0                 # the first grid, and the repeller's pulse above it
    source = TwoStageSource(g1, g2 - g1, setup.planes[0].z_m - g2, pushed / g1, held / (g2 - g1),
                            sp.mass_kg, sp.charge_C)
    z0, dv = beam.start_z_m, 50.0
    basis = two_stage_basis(setup)
    speeds = np.array([-dv, 0.0, dv])
    energy = 0.5 * sp.mass_kg * speeds**2 / E
    starts = rays_from((np.zeros(3), np.zeros(3), np.full(3, z0)),
                       (np.zeros(3), np.zeros(3), np.sign(speeds) + (speeds == 0)), energy,
                       np.zeros(3), sp.mass_kg)
    slopes = {}
    for delay in (0.0, source.focusing_delay(z0)):
        repeller = Waveform(dc_V=held, pulses=(Pulse(pushed, delay),)) if delay else held + pushed
        grouped = group_maps(basis, {"repeller": repeller, "grid": held})
        run = trace(grouped, beam, planes=setup.planes, rtol=1e-11, max_time_s=20e-6, starts=starts,
                    time_zero_s=delay)
        rec = run.records
        assert (rec["status"] == "plane").all()
        closed = [source.flight_time(z0, v, delay) for v in speeds]
        assert rec["time_s"] == pytest.approx(closed, rel=2e-6)
        slopes[delay] = (rec["time_s"][2] - rec["time_s"][0]) / (2 * dv)
        assert run.ledger.suspects == 0
    prompt, focused = slopes.values()
    assert prompt == pytest.approx(source.dT_dv0(z0, 0.0, 0.0), rel=1e-3, abs=0)
    assert abs(focused) < 1e-3 * abs(prompt)
    assert abs(run.work_eV[1]) == pytest.approx(pushed * (1 - z0 / g1), rel=1e-6)   # the jump at z0


# --------------------------------------------------------------------------------------------
# From the config to the reports


PULSED = """
title = "a pulsed gap, ions starting over 40 ns (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 12.0]
r_mm = 4.0
cell_mm = 0.25
edges = { r_max = "open" }
[[electrode]]
name = "back"
[[electrode.rect]]
z_mm = [0.0, 1.0]
r_mm = [0.0, 4.0]
[[electrode.pulse]]
high_V = 500.0
delay_ns = 100.0
rise_ns = 10.0
[[electrode]]
name = "front"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [11.0, 12.0]
r_mm = [0.0, 4.0]
[[beam]]
name = "ions"
species = "40Ar+"
energy_eV = 0.05
count = 40
seed = 3
start_z_mm = 3.0
radius_mm = 0.5
start_time_ns = 60.0
start_spread_ns = 40.0
[[plane]]
name = "middle"
z_mm = 7.0
[trace]
max_time_us = 5.0
[grid_error]
grids = 1
"""


def test_a_config_with_a_pulse_runs_to_its_reports(tmp_path):
    """tracer.run on a config whose electrode carries a pulse: rays start at their start times,
    cross the plane after the pulse, land with the ledger closed; the summary and the report show
    the ledger's two terms and the arrival times; the waveform and arrival-time figures are drawn."""
    import tracer
    from tracer.pipeline import write_run_outputs
    from tracer.report import format_summary

    setup = loads(PULSED)
    assert setup.in_time and setup.time_zero_s == pytest.approx(100e-9, rel=1e-6, abs=0)
    result = tracer.run(setup)
    run = result.beams["ions"]
    starts = run.starts["time_s"]
    assert starts.min() >= 40e-9 and starts.max() <= 80e-9 and np.ptp(starts) > 10e-9
    assert (run.records["status"] == "landed").all() and (run.records["electrode"] == "front").all()
    assert (run.at_plane("middle")["time_s"] > 100e-9).all()
    summary = run.summary()
    assert summary["ledger_suspects"] == 0
    # from 0 V before the pulse to the grounded front plate: all the energy comes from the pulse
    gained = run.records["energy_eV"] - run.starts["energy_eV"]
    assert summary["ledger_time_work_eV"] == pytest.approx(gained.max(), rel=1e-9)
    assert summary["ledger_potential_eV"] < 1e-9 * gained.max() and gained.min() > 300.0
    middle = summary["planes"]["middle"]
    assert middle["time_fwhm_s"] > 0 and middle["resolving_power"] == pytest.approx(
        (middle["time_mean_s"] - 100e-9) / (2 * middle["time_fwhm_s"]))
    text = format_summary(summary)
    assert "energy ledger in time" in text and "t / (2 FWHM)" in text
    names = {p.name for p in write_run_outputs(result, tmp_path)}
    assert {"waveforms.png", "arrival_ions_middle.png"} <= names


def test_a_scan_of_a_setup_in_time_traces_through_its_waveforms():
    """A voltage scan of a setup whose electrode carries a pulse measures each set through the
    grouped maps: the set at the config's voltages gives the run's figures exactly, and a voltage
    given for the pulsed electrode sets its DC part under the pulse, as tracer.run does."""
    from concurrent.futures import ThreadPoolExecutor

    import tracer

    setup = loads(PULSED + "[scan]\nback = [-50.0, 0.0, 2]\n")
    maps = tracer.solve(setup)
    with ThreadPoolExecutor(1) as pool:
        table = tracer.scan(setup, maps=maps, executor=pool).table
    run = tracer.run(setup, maps=maps).beams["ions"]
    at_setup = table[table["back_V"] == 0.0][0]
    figures = run.summary()["planes"]["middle"]
    assert at_setup["tof_mean_s"] == figures["time_mean_s"]
    assert at_setup["resolving_power"] == figures["resolving_power"]
    lowered = table[table["back_V"] == -50.0][0]
    direct = tracer.run(setup, maps=maps, voltages={"back": -50.0}).beams["ions"].summary()
    assert lowered["landing_mean_eV"] == direct["landing"]["front"]["energy_mean_eV"]
    assert lowered["landing_mean_eV"] != at_setup["landing_mean_eV"]


def test_a_scan_over_a_pulse_delay(monkeypatch):
    """A scan over a waveform parameter (the pulse's delay, in the unit of its key): the set at the
    config's delay gives the run's figures; a later pulse makes the ions, drifting slowly before
    it, arrive later by about the same time; the resolving power counts from each set's pulse.
    The static and group maps are built once, for the first set: the second set's groups are the
    same."""
    import tracer
    from tracer import groups

    setup = loads(PULSED + '[scan]\n"back.pulse[0].delay_ns" = [100.0, 150.0, 2]\n')
    maps = tracer.solve(setup)
    builds = []
    summed = groups.summed
    monkeypatch.setattr(groups, "summed", lambda w, h: builds.append(w.ndim) or summed(w, h))
    result = tracer.scan(setup, maps=maps, workers=1)
    assert builds == [1, 2]
    table = result.table
    assert result.names == ("back.pulse[0].delay_ns",)
    first, later = (table[table["back.pulse[0].delay_ns"] == d][0] for d in (100.0, 150.0))
    figures = tracer.run(setup, maps=maps).beams["ions"].summary()["planes"]["middle"]
    assert first["tof_mean_s"] == figures["time_mean_s"]
    assert later["tof_mean_s"] - first["tof_mean_s"] == pytest.approx(50e-9, rel=0.05)
    for row, zero in ((first, 100e-9), (later, 150e-9)):
        assert row["resolving_power"] == pytest.approx((row["tof_mean_s"] - zero) / (2 * row["tof_fwhm_s"]))


def test_a_csv_scan_of_waveform_parameters_equals_the_range_scan_row_for_row(tmp_path):
    """A CSV file whose columns are a voltage and waveform parameters (named as [scan] keys, in
    their keys' units) gives, row for row and bit for bit, the table of the [scan] ranges over the
    same sets."""
    import tracer

    ranges = loads(PULSED + '[scan]\nback = [-50.0, 0.0, 2]\n"back.pulse[0].delay_ns" = [100.0, 150.0, 2]\n'
                            '"back.pulse[0].rise_ns" = [0.0, 10.0, 2]\n')
    names, sets = voltage_sets(ranges)
    header = ",".join(scan_column(n) for n in names)
    rows = "".join(",".join(repr(float(v)) for v in row) + "\n" for row in sets)
    (tmp_path / "sets.csv").write_text(header + "\n" + rows)
    from_csv = loads(PULSED + '[scan]\ncsv = "sets.csv"\n', source=tmp_path / "pulsed.toml")
    maps = tracer.solve(ranges)
    table, again = (tracer.scan(s, maps=maps, workers=1).table for s in (ranges, from_csv))
    assert len(table) == 8 and table.dtype.names[:3] == ("back_V", "back.pulse[0].delay_ns", "back.pulse[0].rise_ns")
    assert again.dtype == table.dtype and again.tobytes() == table.tobytes()
    assert len(np.unique(table["tof_mean_s"])) == 8    # every set traced its own waveform


def test_a_tune_over_a_pulse_level():
    """[tune] varies a waveform parameter as it varies a voltage: the pulse level that lands the
    ions at 300 eV, checked by a run at the level found."""
    import dataclasses

    import tracer

    setup = loads(PULSED + '[tune]\nvary = { "back.pulse[0].high_V" = [300.0, 600.0] }\n'
                           'goal = { landing_energy_eV = 300.0 }\n')
    maps = tracer.solve(setup)
    result = tracer.tune(setup, maps=maps)
    level = result.voltages["back.pulse[0].high_V"]
    assert 300.0 < level < 600.0 and "back.pulse[0].high_V" in result.points.dtype.names
    back = setup.electrodes[0]
    pulse = dataclasses.replace(back.waveform.pulses[0], high_V=level)
    tuned = dataclasses.replace(back, waveform=dataclasses.replace(back.waveform, pulses=(pulse,)))
    run = tracer.run(dataclasses.replace(setup, electrodes=(tuned,) + setup.electrodes[1:]), maps=maps)
    assert run.beams["ions"].summary()["landing"]["front"]["energy_mean_eV"] == pytest.approx(300.0, rel=1e-3)


def test_a_run_in_time_reads_back_from_its_result_file(tmp_path):
    """result.h5 keeps each ray's work and the time zero: the ledger's terms and the resolving
    power read back are the run's."""
    import tracer
    from tracer.pipeline import write_run_outputs

    result = tracer.run(loads(PULSED))
    write_run_outputs(result, tmp_path)
    back = tracer.read_result(tmp_path / "result.h5").beams["ions"]
    run = result.beams["ions"]
    assert np.array_equal(back.work_eV, run.work_eV) and back.time_zero_s == run.time_zero_s
    for key in ("ledger_time_work_eV", "ledger_potential_eV", "ledger_worst_eV"):
        assert back.summary()[key] == run.summary()[key]
    assert back.summary()["planes"]["middle"]["resolving_power"] == \
        run.summary()["planes"]["middle"]["resolving_power"]
