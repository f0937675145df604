"""Tests of the energy bookkeeping: kinetic energy, energy scale, suspects, per-step ledger."""

import math

import numpy as np
import pytest
from scipy import constants

from test_motion import smooth_map
from tracer.beam import trace
from tracer.ledger import energy_scale_eV, kinetic_energy_J, ledger_report

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
    assert got == pytest.approx(k, rel=1e-13)
    assert got == pytest.approx(ref, rel=1e-14)


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
    assert tight.summary()["ledger_suspects"] == 0 and tight.summary()["warning"] == ""
