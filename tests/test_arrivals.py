"""Arrival times at planes for runs without an extraction pulse: each crossing counts from its own
ray's start (tracer.measure.arrival_times), checked against elementary kinematics in closed form
(a uniform accelerating gap, a drift at known speed, a mirror that sends the rays back through the
plane, a uniform field with a sinusoid on it), for singly and doubly charged ions and a molecule;
and against the clock when the run has a time zero."""

import dataclasses
import math

import numpy as np
import pytest
from scipy import constants
from scipy.optimize import brentq

from test_trace import GAP, Z_START, plates
from test_trace_time import PULSED, plate_basis
from tracer import stats
from tracer.beam import trace
from tracer.config import loads
from tracer.groups import group_maps
from tracer.schema import Plane
from tracer.waveforms import Sinusoid, Waveform

C = constants.c
Z_PLANE = 6e-3


def flight_time(starts, mass, force, z, back=False):
    """Time from the start to the plane z under a constant force along z for rays starting along z
    (px = py = 0): dp/dt = F, so t = (pz - pz0) / F, with pz at the plane from the work-energy
    relation E = E0 + F (z - z0) (elementary relativistic kinematics, closed form); ``back`` for
    the crossing on the way back (pz < 0) of rays a retarding force turns; t = (z - z0) E / (pz c^2)
    for a drift (F = 0)."""
    mc2 = mass * C * C
    pz0 = starts["pz"]
    e0 = np.sqrt(mc2 ** 2 + (pz0 * C) ** 2)
    if force == 0.0:
        return (z - starts["z_m"]) * e0 / (pz0 * C * C)
    kinetic = (pz0 * C) ** 2 / (e0 + mc2) + force * (z - starts["z_m"])   # without cancellation
    pz1 = np.sqrt(kinetic * (kinetic + 2.0 * mc2)) / C
    return ((-pz1 if back else pz1) - pz0) / force


def spread_beam(setup, energy_eV, sigma_eV, start_spread_s, count=200):
    """The plates' beam along the axis with energies and start times spread."""
    return dataclasses.replace(setup.beams[0], energy_eV=energy_eV, energy_spread_eV=sigma_eV,
                               half_angle_rad=0.0, count=count, start_time_s=2e-7,
                               start_spread_s=start_spread_s)


@pytest.mark.parametrize("species_name, volts, energy_eV", [
    ("40Ar+", -1000.0, 5.0),         # accelerated across the gap
    ("40Ar^2+", -1000.0, 5.0),       # a doubly charged ion: twice the force
    ("C60+", -1000.0, 5.0),          # a molecule
    ("40Ar+", 0.0, 100.0),           # a drift at known speeds
])
def test_static_flight_times_count_from_each_start(species_name, volts, energy_eV):
    """Without a pulse the plane's arrival times are each ray's flight time from its own start:
    with start times spread over 100 ns and energies over 0.5 eV (sigma), the mean, spread, FWHM and
    resolving power are those of the closed-form flight times (elementary kinematics), not of the
    clock; with a time zero the same rays read on the clock, where the start spread widens them."""
    field, setup = plates(volts=volts, species_name=species_name, energy=energy_eV, count=200, angle=0.0)
    beam = spread_beam(setup, energy_eV, 0.5, 100e-9)
    sp = beam.species
    run = trace(field, beam, planes=[Plane("p", Z_PLANE)], rtol=1e-10)
    assert run.time_zero_s is None
    rows = run.at_plane("p")
    assert len(rows) == len(run.records) == 200
    starts = run.starts[rows["ray"]]
    assert np.ptp(starts["time_s"]) > 80e-9 and (starts["px"] == 0).all() and (starts["py"] == 0).all()
    expected = flight_time(starts, sp.mass_kg, -sp.charge_C * volts / GAP, Z_PLANE)
    assert rows["time_s"] - starts["time_s"] == pytest.approx(expected, rel=1e-9, abs=0)
    s = run.summary()
    assert math.isnan(s["time_zero_s"])
    p = s["planes"]["p"]
    assert p["time_mean_s"] == pytest.approx(expected.mean(), rel=1e-9, abs=0)
    assert p["time_std_s"] == pytest.approx(expected.std(), rel=1e-6, abs=0)
    width = stats.fwhm(expected)
    assert 0.0 < width < 10e-9                 # the energy spread's width, not the starts' 100 ns
    assert p["time_fwhm_s"] == pytest.approx(width, rel=1e-6, abs=0)
    assert p["resolving_power"] == pytest.approx(expected.mean() / (2.0 * width), rel=1e-6)
    # the same rays with a time zero: arrival times on the clock, counted from it
    clock = trace(field, beam, planes=[Plane("p", Z_PLANE)], rtol=1e-10, time_zero_s=1e-7)
    c = clock.summary()["planes"]["p"]
    arrived = expected + starts["time_s"]
    assert c["time_mean_s"] == pytest.approx(arrived.mean(), rel=1e-9, abs=0)
    assert c["time_fwhm_s"] == pytest.approx(stats.fwhm(arrived), rel=1e-6, abs=0)
    assert c["time_fwhm_s"] > 50e-9
    assert c["resolving_power"] == pytest.approx((arrived.mean() - 1e-7) / (2.0 * c["time_fwhm_s"]))


def test_flight_times_scale_with_mass_over_charge():
    """From rest across the same gap the flight time goes as sqrt(m / q) (elementary kinematics,
    non-relativistic limit; argon at 1 keV has (v/c)^2 ~ 5e-8): a doubly charged argon ion arrives
    sqrt(2) sooner than the singly charged one, less the electron's mass."""
    times = {}
    for name in ("40Ar+", "40Ar^2+"):
        field, setup = plates(volts=-1000.0, species_name=name, energy=0.0, count=3, angle=0.0)
        run = trace(field, setup.beams[0], planes=[Plane("p", Z_PLANE)], rtol=1e-10)
        times[name] = (run.summary()["planes"]["p"]["time_mean_s"], setup.beams[0].species)
    (t1, s1), (t2, s2) = times["40Ar+"], times["40Ar^2+"]
    assert t1 / t2 == pytest.approx(math.sqrt((s1.mass_kg / s1.charge_C) / (s2.mass_kg / s2.charge_C)), rel=1e-7)
    assert t1 / t2 == pytest.approx(math.sqrt(2.0), rel=1e-4)


@pytest.mark.parametrize("rule, back", [
    (dict(crossing="all"), None),                 # both crossings of each ray
    (dict(crossing=2), True),                     # the second: on the way back
    (dict(direction="backward"), True),
    (dict(direction="forward"), False),
])
def test_a_mirror_sends_rays_back_through_the_plane(rule, back):
    """Protons of 100 eV (sigma 0.5 eV) into a retarding field of 500 V over the gap turn 2 mm past
    their start and cross a plane 1 mm past it twice; each crossing's flight time from its ray's
    start is the closed form's (dp/dt = F: t = (pz0 -+ pz1) / |F|), the plane's rule picks which count."""
    field, setup = plates(volts=500.0, species_name="p+", energy=100.0, count=100, angle=0.0)
    beam = spread_beam(setup, 100.0, 0.5, 50e-9, count=100)
    sp = beam.species
    z = Z_START + 1e-3
    run = trace(field, beam, planes=[Plane("p", z, **rule)], rtol=1e-10)
    assert (run.records["status"] == "landed").all() and (run.records["electrode"] == "back").all()
    assert np.bincount(run.at_plane("p")["ray"]).tolist() == [2] * 100
    force = -sp.charge_C * 500.0 / GAP
    starts = run.starts
    ways = [False, True] if back is None else [back]
    expected = np.concatenate([flight_time(starts, sp.mass_kg, force, z, back=b) for b in ways])
    p = run.summary()["planes"]["p"]
    assert p["count"] == len(expected)
    assert p["time_mean_s"] == pytest.approx(expected.mean(), rel=1e-9, abs=0)
    assert p["time_std_s"] == pytest.approx(expected.std(), rel=1e-6, abs=0)
    assert p["time_fwhm_s"] == pytest.approx(stats.fwhm(expected), rel=1e-6, abs=0)
    assert p["resolving_power"] == pytest.approx(expected.mean() / (2.0 * stats.fwhm(expected)), rel=1e-6)


def sine_flight_time(z0, pz0, t0, mass, charge, field_dc, field_rf, omega, phase, z):
    """When an ion leaving z0 at t0 with momentum pz0 reaches z in a uniform field
    E(t) = E_dc + E_rf cos(omega t + phase): v = v0 + (q/m)[E_dc s + (E_rf/omega)(sin(omega t + phase)
    - sin(omega t0 + phase))], s = t - t0, integrated once more in closed form (elementary
    kinematics, non-relativistic); the root by scipy's brentq."""
    a, b = charge * field_dc / mass, charge * field_rf / mass
    v0, w0 = pz0 / mass, omega * t0 + phase

    def path(s):
        return (z0 + v0 * s + a * s * s / 2 + (b / omega) * (-(math.cos(omega * (t0 + s) + phase) - math.cos(w0))
                                                            / omega - math.sin(w0) * s)) - z

    hi = 1e-9
    while path(hi) < 0:
        hi *= 2.0
    return brentq(path, 0.0, hi, xtol=1e-18, rtol=1e-14)


def test_an_rf_only_run_counts_from_each_start():
    """A uniform gap whose front plate carries a DC part and a 2 MHz sinusoid (no pulse): ions
    starting over a whole RF period leave at different phases, so their flight times differ; the
    plane's figures are those of the closed-form flight times from each start (elementary kinematics,
    non-relativistic: argon of a few hundred eV has v/c ~1e-4, a relative time error ~1e-8)."""
    _, psetup = plates(volts=0.0, species_name="40Ar+", energy=1.0, count=60, angle=0.0)
    dc, rf, hz, phase = -400.0, -100.0, 2e6, 0.3
    grouped = group_maps(plate_basis(psetup), {"front": Waveform(dc_V=dc, sinusoids=(Sinusoid(rf, hz, phase),))})
    beam = dataclasses.replace(spread_beam(psetup, 1.0, 0.0, 500e-9, count=60), start_time_s=250e-9)
    run = trace(grouped, beam, planes=[Plane("p", Z_PLANE)], rtol=1e-10)
    assert run.time_zero_s is None
    sp = beam.species
    st = run.starts
    expected = np.array([sine_flight_time(r["z_m"], r["pz"], r["time_s"], sp.mass_kg, sp.charge_C,
                                          -dc / GAP, -rf / GAP, 2 * math.pi * hz, phase, Z_PLANE) for r in st])
    rows = run.at_plane("p")
    assert rows["time_s"] - st["time_s"][rows["ray"]] == pytest.approx(expected[rows["ray"]], rel=1e-7, abs=0)
    p = run.summary()["planes"]["p"]
    assert np.ptp(expected) > 0.02 * expected.mean()           # the phase matters
    assert p["time_mean_s"] == pytest.approx(expected.mean(), rel=1e-7, abs=0)
    assert p["time_fwhm_s"] == pytest.approx(stats.fwhm(expected), rel=1e-5, abs=0)
    assert p["resolving_power"] == pytest.approx(expected.mean() / (2 * stats.fwhm(expected)), rel=1e-5)


def test_the_report_says_what_arrival_times_count_from(tmp_path):
    """tracer.run of a config with a sinusoid and no pulse: the summary's time zero is NaN, the
    arrival-time table says the times are each ray's flight time from its own start, and the run
    reads back from its result file with the same figures; with [trace] time_zero the table says
    the clock."""
    import tracer
    from tracer.pipeline import write_run_outputs
    from tracer.report import format_summary

    text = PULSED.replace("[[electrode.pulse]]\nhigh_V = 500.0\ndelay_ns = 100.0\nrise_ns = 10.0\n",
                          "[[electrode.sine]]\namplitude_V = 50.0\nfrequency_MHz = 5.0\n").replace(
        'name = "back"\n', 'name = "back"\nvoltage_V = 300.0\n')
    setup = loads(text)
    assert setup.in_time and setup.time_zero_s is None
    result = tracer.run(setup)
    run = result.beams["ions"]
    summary = run.summary()
    assert math.isnan(summary["time_zero_s"])
    rows = run.at_plane("middle")
    flight = rows["time_s"] - run.starts["time_s"][rows["ray"]]
    assert summary["planes"]["middle"]["time_mean_s"] == pytest.approx(flight.mean(), rel=1e-12, abs=0)
    report = format_summary(summary)
    assert "each ray's flight time from its own start" in report and "flight mean ns" in report
    write_run_outputs(result, tmp_path)
    back = tracer.read_result(tmp_path / "result.h5").beams["ions"]
    assert back.time_zero_s is None
    np.testing.assert_equal(back.summary()["planes"]["middle"], summary["planes"]["middle"])
    clocked = loads(text.replace("[trace]\n", "[trace]\ntime_zero_ns = 20.0\n"))
    assert clocked.time_zero_s == pytest.approx(20e-9, rel=1e-6, abs=0)
    timed = tracer.run(clocked).beams["ions"]
    report = format_summary(timed.summary())
    assert "arrival times on the clock" in report and "counted from 20 ns" in report
    rows = timed.at_plane("middle")
    assert timed.summary()["planes"]["middle"]["time_mean_s"] == pytest.approx(rows["time_s"].mean(), rel=1e-12, abs=0)
