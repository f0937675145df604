"""Tests of the energy bookkeeping: kinetic energy, energy scale, suspects, per-step ledger."""

import math

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import solve_ivp

from test_motion import smooth_map
from tracer.beam import trace
from tracer.ledger import (GAUSS_POINTS, GAUSS_THETA, GAUSS_WEIGHT, energy_scale_eV,
                           energy_scale_in_time_eV, jump_work, kinetic_energy_J, ledger_report,
                           time_ledger_J, time_work)
from tracer.waveforms import Pulse, Sinusoid, Waveform, piece, value, wave_arrays

C = constants.c


@pytest.mark.parametrize("energy_eV", [1e-3, 1.0, 1e3, 1e5, 1e7, 1e9])
def test_kinetic_energy_is_relativistic_and_precise(energy_eV):
    """KE = (gamma - 1) m c^2 from p c = sqrt(K^2 + 2 K m c^2) (any relativity text), to 1e-14
    even at 1 meV where the naive gamma - 1 loses digits; gamma - 1 computed here as
    expm1(log1p(p^2 / (m c)^2) / 2) (common practice)."""
    m = constants.m_e
    k = energy_eV * constants.e
    p = math.sqrt(k * (k + 2 * m * C * C)) / C
    got = kinetic_energy_J(0.3 * p, -0.4 * p, math.sqrt(0.75) * p, m)
    ref = math.expm1(0.5 * math.log1p((p / (m * C)) ** 2)) * m * C * C
    assert got == pytest.approx(k, rel=1e-13, abs=0)
    assert got == pytest.approx(ref, rel=1e-14, abs=0)


def test_energy_scale_definition():
    """scale = max(start KE, |q| max|V_electrode|, |q| x 1 V)."""
    e = constants.e
    s = energy_scale_eV([10.0, 5000.0, 0.0], -e, (0.0, -2000.0, 300.0))
    assert list(s) == [2000.0, 5000.0, 2000.0]
    assert list(energy_scale_eV([0.0], 2 * e, (0.0,))) == [2.0]


def test_suspects_are_counted_against_the_scale():
    """Rays whose worst residual exceeds threshold x scale are suspects; untraced rays are not."""
    rep = ledger_report([2e-3, 3e-6, 5e-3, 1e-3], [1000.0, 1.0, 1000.0, 1000.0], threshold=1e-6,
                        traced=[True, True, False, True])
    assert rep.suspects == 2 and list(rep.suspect_rays) == [0, 1]
    assert rep.worst_eV == 2e-3 and rep.worst_relative == pytest.approx(3e-6)
    assert "2 ray(s)" in rep.warning
    assert ledger_report([1e-9], [1.0]).warning == ""


def test_per_step_ledger_matches_the_map_potential():
    """Along a kept path, the kinetic energy at every step equals the start energy minus
    q (V - V_start), with V from PotentialMap.potential (an independent evaluation path): energy
    conservation in a static field (common practice); the signed per-step ledger is that
    difference."""
    field, beam = smooth_map("axial")
    run = trace(field, beam, max_time_s=1e-7, keep_paths=2, max_path_points=64)
    q = beam.species.charge_C / constants.e
    for path in run.paths:
        assert 3 <= len(path) <= 64
        v = field.potential(path["z_m"], np.hypot(path["x_m"], path["y_m"]))
        residual = (path["energy_eV"] - path["energy_eV"][0]) + q * (v - v[0])
        assert np.abs(residual).max() < 1e-8 * 500.0
        assert np.allclose(path["ledger_eV"], residual, rtol=0, atol=1e-10)
        assert np.abs(path["energy_eV"] - path["energy_eV"][0]).max() > 10.0  # energy did change
    assert run.records["ledger_eV"][:2] == pytest.approx(
        [np.abs(p["ledger_eV"]).max() for p in run.paths], rel=0, abs=1e-10)


def test_a_loose_tolerance_is_flagged():
    """On a coarse map (5 mm cells) a loose rtol leaves an energy error of about 1e-7 of the scale,
    which a 1e-8 threshold flags in the summary; the default rtol stays below it."""
    field, beam = smooth_map("axial", cell_mm=5.0)
    loose = trace(field, beam, rtol=1e-1, max_time_s=1e-7, ledger_threshold=1e-8)
    assert loose.summary()["ledger_suspects"] > 0
    assert "energy ledger" in loose.summary()["warning"]
    tight = trace(field, beam, max_time_s=1e-7, ledger_threshold=1e-8)
    assert tight.summary()["ledger_suspects"] == 0
    assert not any("energy ledger" in w for w in tight.summary()["warnings"])


# --------------------------------------------------------------------------------------------
# The ledger in time


def test_gauss_rule_is_exact_to_degree_2n_minus_1():
    """The Gauss–Legendre rule on [0, 1] (Gauss 1814; library: numpy.polynomial.legendre.leggauss)
    integrates theta^j exactly for j <= 2 GAUSS_POINTS - 1 and not beyond."""
    for j in range(2 * GAUSS_POINTS):
        assert GAUSS_WEIGHT @ GAUSS_THETA**j == pytest.approx(1.0 / (j + 1), rel=1e-15, abs=0)
    j = 2 * GAUSS_POINTS
    assert abs(GAUSS_WEIGHT @ GAUSS_THETA**j - 1.0 / (j + 1)) > 1e-6


def steps_work(w, t_end, phi_of_t, n_per_step=None):
    """time_work summed over steps of at most w.max_step_s ending on every corner, phi_k(t) from a
    function of time (a synthetic path): (work, magnitude, steps)."""
    edges = np.r_[0.0, w.corner[(w.corner > 0.0) & (w.corner < t_end)], t_end]
    work = magnitude = 0.0
    steps = 0
    for a, b in zip(edges[:-1], edges[1:]):
        n = max(1, int(math.ceil((b - a) / w.max_step_s))) if n_per_step is None else n_per_step
        for t0 in np.linspace(a, b, n + 1)[:-1]:
            h = (b - a) / n
            phi = np.array([phi_of_t(t0 + th * h) for th in GAUSS_THETA])
            dw, dm = time_work(w, piece(w, t0), t0, h, phi)
            work += dw
            magnitude += dm
            steps += 1
    return work, magnitude, steps


def test_time_work_of_a_ramp_on_a_cubic_path_is_exact():
    """A pulse's ramp (slope 2000 V / 40 ns) times a map value cubic in time along the path: the
    rule is exact (degree 3 <= 5), one step per piece, to round-off of the closed form
    slope x ∫ phi dt."""
    w = wave_arrays([Waveform(pulses=(Pulse(2000.0, 10e-9, rise_s=40e-9, width_s=1e-6),))])
    c = (0.3, 2e6, -4e13, 7e20)

    def phi(t):
        return [c[0] + c[1] * t + c[2] * t**2 + c[3] * t**3]

    def antiderivative(t):
        return c[0] * t + c[1] * t**2 / 2 + c[2] * t**3 / 3 + c[3] * t**4 / 4

    work, magnitude, steps = steps_work(w, 60e-9, phi, n_per_step=1)
    exact = 2000.0 / 40e-9 * (antiderivative(50e-9) - antiderivative(10e-9))
    assert steps == 3 and work == pytest.approx(exact, rel=1e-13)
    assert magnitude == pytest.approx(abs(exact), rel=1e-13)   # phi > 0 on the ramp


def test_time_work_of_rf_on_a_quadratic_path():
    """A sinusoid's rate times a map value quadratic in time, over 3.3 periods in steps of
    period / 16 (the step bound): against the closed form by integration by parts,
    ∫ w' p dt = [w p] - ∫ w p' dt with ∫ cos = sin / omega, ∫ t cos = t sin / omega + cos / omega^2,
    within the rule's bound on one step (test_one_rf_step_at_the_bound: 1.9e-9 of max |w'| x step)
    summed over the steps and times the path's largest map value (the closed form's error: about
    1e-10 of that, the steps' errors cancelling over each period)."""
    amp, f, ph = 500.0, 2e6, 0.7
    om = 2 * math.pi * f
    w = wave_arrays([Waveform(dc_V=30.0, sinusoids=(Sinusoid(amp, f, ph),))])
    c0, c1, c2 = 0.2, 3e5, -2e11
    t_end = 3.3 / f

    def wave(t):
        return amp * math.cos(om * t + ph)

    def int_w(t):          # ∫ w dt
        return amp * math.sin(om * t + ph) / om

    def int_t_w(t):        # ∫ t w dt
        return amp * (t * math.sin(om * t + ph) / om + math.cos(om * t + ph) / om**2)

    def p(t):
        return c0 + c1 * t + c2 * t * t

    exact = (wave(t_end) * p(t_end) - wave(0.0) * p(0.0)
             - (c1 * (int_w(t_end) - int_w(0.0)) + 2 * c2 * (int_t_w(t_end) - int_t_w(0.0))))
    work, magnitude, steps = steps_work(w, t_end, lambda t: [p(t)])
    assert steps == math.ceil(3.3 * 16)
    p_max = p(-c1 / (2 * c2))          # the vertex of the parabola, inside the interval
    assert 0.0 < -c1 / (2 * c2) < t_end and p_max > max(abs(p(0)), abs(p(t_end)))
    assert abs(work - exact) < 1.9e-9 * amp * t_end * om * p_max
    assert magnitude > abs(work)


def test_one_rf_step_at_the_bound():
    """On one step of period / 16 (the longest a step may be) the rule's error on a sinusoid's
    rate, at any phase, is below 1.9e-9 of max |dw/dt| x step, as tracer.ledger says (exact
    integral: the change of w)."""
    amp, f = 500.0, 2e6
    worst = 0.0
    for ph in np.linspace(0.0, 2 * math.pi, 97):
        w = wave_arrays([Waveform(sinusoids=(Sinusoid(amp, f, ph),))])
        h = w.max_step_s
        work, _ = time_work(w, 0, 0.0, h, np.ones((GAUSS_POINTS, 1)))
        exact = amp * (math.cos(2 * math.pi * f * h + ph) - math.cos(ph))
        worst = max(worst, abs(work - exact) / (amp * 2 * math.pi * f * h))
    assert 1e-15 < worst < 1.9e-9


def test_jump_work_is_the_jump_times_the_map():
    """At a zero-rise switch V(x, t+) - V(x, t-) = sum_k jump_k phi_k(x); elsewhere zero."""
    w = wave_arrays([Waveform(pulses=(Pulse(2000.0, 1e-6, low_V=-5.0),)),
                     Waveform(pulses=(Pulse(-300.0, 1e-6, rise_s=1e-8),))])
    phi = np.array([0.25, 0.5])
    assert jump_work(w, 1e-6, phi) == 2005.0 * 0.25
    assert jump_work(w, 1.01e-6, phi) == 0.0 and jump_work(w, 0.5e-6, phi) == 0.0


def trap_run(t_end, qz=0.5):
    """An ion (40Ar+) in the 1-D trap V(z, t) = w(t) z^2 / (2 L^2), w an RF sinusoid on a DC part
    with a 40 V step at 4.25 periods and a 1-period ramp down by 30 V from 9 periods, traced with
    scipy's DOP853 (relativistic momentum form) from corner to corner, the dV/dt work summed by
    time_work on the dense output in steps of at most max_step_s and jump_work at the switch.
    The RF amplitude is chosen by q_z = 2 q |kappa| V / (m Omega^2), kappa = 1 / L^2."""
    from timecases import qz_from_curvature

    m = 39.9618 * constants.atomic_mass - constants.m_e
    q = constants.e
    length, f = 5e-3, 1e6
    amp = qz / qz_from_curvature(1.0 / length**2, 1.0, m, q, f)
    wave = Waveform(dc_V=20.0, sinusoids=(Sinusoid(amp, f),),
                    pulses=(Pulse(40.0, 4.25 / f), Pulse(-30.0, 9.0 / f, rise_s=1.0 / f)))
    w = wave.arrays()

    def phi(z):
        return z * z / (2 * length**2)

    def rhs(t, y, m_piece):
        e_z = -value(w, 0, m_piece, t) * y[0] / length**2
        gm = m * math.sqrt(1 + (y[1] / (m * C)) ** 2)
        return [y[1] / gm, q * e_z]

    y = np.array([1e-3, 0.0])
    t = 0.0
    work = magnitude = 0.0
    v_start = value(w, 0, piece(w, 0.0), 0.0) * phi(y[0])
    ke_start = kinetic_energy_J(0.0, 0.0, y[1], m)
    for b in np.r_[w.corner[w.corner < t_end], t_end]:
        m_piece = piece(w, t)
        sol = solve_ivp(rhs, (t, b), y, method="DOP853", rtol=1e-12, atol=[1e-16, 1e-32],
                        dense_output=True, args=(m_piece,))
        n = max(1, math.ceil((b - t) / w.max_step_s))
        for t0 in np.linspace(t, b, n + 1)[:-1]:
            h = (b - t) / n
            ph = np.array([[phi(sol.sol(t0 + th * h)[0])] for th in GAUSS_THETA])
            dw, dm = time_work(w, m_piece, t0, h, ph)
            work += dw
            magnitude += dm
        y, t = sol.y[:, -1], b
        work += jump_work(w, t, np.array([phi(y[0])]))
    v_now = value(w, 0, piece(w, t), t) * phi(y[0])
    ke_now = kinetic_energy_J(0.0, 0.0, y[1], m)
    return dict(ledger=time_ledger_J(ke_start, ke_now, q, v_start, v_now, work), work=work,
                magnitude=magnitude, ke=(ke_start, ke_now), v=(v_start, v_now), q=q, peak=wave.peak_V)


def test_ledger_in_time_closes_along_a_trapped_ion():
    """The energy identity dKE = -q [V(x1, t1) - V(x0, t0)] + q ∫ dV/dt dt + q jump (the
    work-energy theorem dKE/dt = q E.v with E = -grad V and dV/dt = dV/dt|_x + v.grad V along the
    path; common practice) holds along an ion held 12 RF periods at q_z = 0.5 through a switch and a ramp, to
    1e-8 of the energy scale (the three-node rule's error, 1.7e-9 here, 600 times below the ledger's
    threshold), while the dV/dt term is of the order of the energy exchanged."""
    r = trap_run(12e-6)
    q_e = r["q"] / constants.e
    scale = energy_scale_in_time_eV([r["ke"][0] / constants.e], r["q"], [r["peak"]],
                                    [r["magnitude"]])[0]
    assert scale == pytest.approx(q_e * r["magnitude"])          # the RF exchange sets the scale
    assert abs(r["ledger"]) / constants.e < 1e-8 * scale
    dke = (r["ke"][1] - r["ke"][0]) / constants.e
    assert abs(q_e * r["work"]) > 0.1 * abs(dke) and abs(q_e * r["work"]) > 1e-3 * scale
    # without the dV/dt term the static ledger would be off by the whole work
    static = dke + q_e * (r["v"][1] - r["v"][0])
    assert abs(static) > 1e6 * abs(r["ledger"]) / constants.e
