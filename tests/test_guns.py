"""Self-consistent guns: diodes against the Child–Langmuir and Richardson–Dushman laws, charge
bookkeeping, non-convergence, the bundled Pierce-type gun and the command line."""

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from tracer.cli import main
from tracer.config import load, loads
from tracer.deposit import node_volumes
from tracer.emission import RICHARDSON_A0, layer_transit, schottky_lowering_eV
from tracer.guns import EMIT_CELLS, gun, space_charge_density

GAP = 5e-3
VOLTS = 1000.0
CONFIGS = Path(__file__).resolve().parent.parent / "configs"

DIODE = """
title = "flat diode (illustrative)"
[domain]
symmetry = "{symmetry}"
z_mm = [0.0, 6.0]
r_mm = 1.0
cell_mm = 0.1
edges = {{ z_min = "ground", z_max = "ground", r_max = "open" }}
[[electrode]]
name = "cathode"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [0.0, 0.5]
r_mm = [0.0, 1.0]
[[electrode]]
name = "anode"
voltage_V = {volts}
[[electrode.rect]]
z_mm = [5.5, 6.0]
r_mm = [0.0, 1.0]
[gun]
cathode = "cathode"
rays = 20
{gun}
"""


def diode(symmetry="planar", gun_keys="", volts=VOLTS):
    """Cathode face at z = 0.5 mm, anode face at 5.5 mm; the open r_max edge makes it one-dimensional."""
    return loads(DIODE.format(symmetry=symmetry, volts=volts, gun=gun_keys))


def child_density(volts=VOLTS):
    # J = (4 eps0 / 9) sqrt(2 e / m) V^1.5 / D^2 (Child 1911; Langmuir 1913), written out here
    return 4 * constants.epsilon_0 / 9 * math.sqrt(2 * constants.e / constants.m_e) * volts**1.5 / GAP**2


@pytest.fixture(scope="module")
def planar_diode():
    return gun(diode())


@pytest.mark.parametrize("symmetry", ["planar", "axial"])
def test_diode_draws_the_child_langmuir_current(symmetry, planar_diode):
    # Child (1911), Langmuir (1913): the space-charge-limited density of a planar gap, within 2 %
    result = planar_diode if symmetry == "planar" else gun(diode("axial"))
    assert result.converged
    j = result.emission["density_A_per_m2"]
    np.testing.assert_allclose(j, child_density(), rtol=0.02)
    area = 2 * 1e-3 if symmetry == "planar" else math.pi * 1e-6   # both halves / the disc
    assert result.current_A == pytest.approx(child_density() * area, rel=0.02)
    assert result.perveance_A_per_V1p5 == pytest.approx(result.current_A / VOLTS**1.5, rel=1e-12, abs=0)
    assert set(result.run.records["status"]) == {"landed"}
    assert set(result.run.records["electrode"]) == {"anode"}


def test_diode_current_within_a_tenth_of_a_percent():
    # Child (1911), Langmuir (1913): the planar diode at 50 cells across the gap, iterated to
    # 1e-5, draws the space-charge-limited current to 0.1 % (measured -0.03 %; the layer below the
    # starts deposited with 9 path points gave -0.21 %); 1 kV keeps the relativistic correction
    # under 0.05 % (issue 16)
    result = gun(diode(gun_keys="tolerance = 1e-5\nmax_iterations = 300"))
    assert result.converged
    assert result.current_A == pytest.approx(child_density() * 2e-3, rel=1e-3)


@pytest.mark.parametrize("face_mm", [0.525, 0.55, 0.575])
def test_diode_with_its_cathode_face_between_nodes(face_mm):
    # Child (1911), Langmuir (1913) for the gap left between a cathode face a quarter, a half and
    # three quarters of a cell past a node and the anode: within 0.1 % (measured -0.07 to -0.05 %;
    # bilinear deposit weights that ignore the surface gave -1.44, -1.20 and -0.34 %)
    text = DIODE.format(symmetry="planar", volts=VOLTS, gun="tolerance = 1e-5\nmax_iterations = 300")
    result = gun(loads(text.replace("z_mm = [0.0, 0.5]", f"z_mm = [0.0, {face_mm}]")))
    assert result.converged
    gap = 5.5e-3 - 1e-3 * face_mm
    assert result.current_A == pytest.approx(child_density() * (GAP / gap) ** 2 * 2e-3, rel=1e-3)


def test_diode_potential_follows_the_four_thirds_power(planar_diode):
    # the space-charge-limited diode potential V (x / D)^(4/3) (Child 1911; Langmuir 1913)
    x = np.linspace(0.2, 1.0, 9) * GAP
    v = planar_diode.field.potential(0.5e-3 + x, np.full(x.size, 0.4e-3))
    np.testing.assert_allclose(v, VOLTS * (x / GAP) ** (4 / 3), rtol=0.02)
    exponent = np.polyfit(np.log(x[:-1]), np.log(v[:-1]), 1)[0]
    assert exponent == pytest.approx(4 / 3, abs=0.02)
    # the space charge's own potential is the Child profile minus the linear vacuum one, deepest
    # at x / D = 27/64 with V (27/256)
    assert planar_diode.space_charge_V.min() == pytest.approx(-VOLTS * 27 / 256, rel=0.03)


def test_transit_time_of_the_space_charge_limited_diode(planar_diode):
    # a space-charge-limited gap is crossed in 3 D / v_anode (Langmuir 1913; common practice)
    result = planar_diode
    v_anode = math.sqrt(2 * constants.e * VOLTS / constants.m_e)
    d = EMIT_CELLS * 0.1e-3
    sites = result.emission
    layer = np.array([layer_transit(d, math.sqrt(2 * constants.e * v / constants.m_e), 4 / 3, 3)[1][-1]
                      for v in sites["voltage_V"]])
    total = result.run.records["time_s"] + layer[result.run.records["ray"]]
    np.testing.assert_allclose(total, 3 * GAP / v_anode, rtol=0.02)


def test_deposited_charge_is_emitted_current_times_transit_time(planar_diode):
    # charge conservation: each ray leaves I x (its flight time, the layer below its start included)
    result = planar_diode
    grid = result.field.grid
    d = EMIT_CELLS * min(grid.hz, grid.hr)
    sites = result.emission
    rho = space_charge_density(grid, result.run, sites, d, result.run.species)
    deposited = (rho * node_volumes(grid)).sum()
    speed = np.sqrt(2 * constants.e * sites["voltage_V"] / constants.m_e)
    layer = 3 * d / speed   # all sites are space-charge-limited: the Child layer (Langmuir 1913)
    assert sites["limited"].all()
    flight = result.run.records["time_s"] + layer
    assert deposited == pytest.approx(-(sites["current_A"] * flight).sum(), rel=1e-9, abs=0)


def test_temperature_limited_cathode_gives_the_richardson_dushman_density():
    # J = A0 T^2 exp(-W / kT), A0 = 4 pi m e k^2 / h^3 (Richardson 1901; Dushman 1923), from
    # scipy.constants; about 1.2017e6 A m^-2 K^-2 (from memory)
    t, w = 1500.0, 4.5
    result = gun(diode(gun_keys=f'emission = "thermionic"\ntemperature_K = {t}\nwork_function_eV = {w}'))
    a0 = 4 * math.pi * constants.m_e * constants.e * constants.k**2 / constants.h**3
    assert a0 == pytest.approx(1.2017e6, rel=1e-3)
    expected = a0 * t**2 * math.exp(-w * constants.e / (constants.k * t))
    assert result.converged and not result.emission["limited"].any()
    np.testing.assert_allclose(result.emission["density_A_per_m2"], expected, rtol=1e-10)
    assert result.current_A == pytest.approx(expected * 2e-3, rel=1e-10, abs=0)


def test_schottky_lowering_raises_the_temperature_limited_density():
    # dW = sqrt(e^3 E / (4 pi eps0)) (Schottky 1914) with E = V / D, the field of a gap whose
    # space charge is negligible (common practice)
    t, w = 1500.0, 4.5
    keys = f'emission = "thermionic"\ntemperature_K = {t}\nwork_function_eV = {w}'
    plain = gun(diode(gun_keys=keys, volts=5000.0))
    lowered = gun(diode(gun_keys=keys + "\nschottky = true", volts=5000.0))
    e_field = 5000.0 / GAP
    dw = math.sqrt(constants.e * e_field / (4 * math.pi * constants.epsilon_0))   # eV
    ratio = lowered.emission["density_A_per_m2"] / plain.emission["density_A_per_m2"]
    np.testing.assert_allclose(ratio, math.exp(dw * constants.e / (constants.k * t)), rtol=2e-3)
    assert schottky_lowering_eV(e_field) == pytest.approx(dw, rel=1e-12, abs=0)


def test_hot_cathode_is_space_charge_limited(planar_diode):
    # a cathode that could emit far more than the gap carries draws the Child current (the
    # transition; Langmuir 1913)
    result = gun(diode(gun_keys='emission = "thermionic"\ntemperature_K = 2500.0\nwork_function_eV = 2.0'))
    hot = RICHARDSON_A0 * 2500.0**2 * math.exp(-2.0 * constants.e / (constants.k * 2500.0))
    assert hot > 100 * child_density()
    assert result.emission["limited"].all()
    assert result.current_A == pytest.approx(planar_diode.current_A, rel=2e-3)


def test_a_run_that_does_not_converge_says_so():
    with pytest.warns(RuntimeWarning, match="did not converge"):
        result = gun(diode(gun_keys="max_iterations = 2"))
    assert not result.converged and result.iterations == 2
    assert "did not converge" in result.warning
    assert len(result.history) == 2 and math.isnan(result.history["change"][0])


def test_an_iteration_closed_by_its_own_space_charge_does_not_end_the_run():
    # a strong relaxation overshoots: the first space charge (vacuum field, about 5x the Child
    # current) pushes the potential in front of the cathode below it; that zero is transient,
    # the iteration goes on and emits again, and the run never claims the field cannot extract
    with pytest.warns(RuntimeWarning, match="did not converge"):
        result = gun(diode(gun_keys="relaxation = 0.6\nmax_iterations = 6"))
    current = result.history["current_A"]
    assert current[1] == 0.0 and (current[2:] > 0.0).all()
    assert result.iterations == 6 and not result.converged
    assert "no accelerating field" not in result.warning


@pytest.fixture(scope="module")
def pierce(tmp_path_factory):
    """The bundled gun on a coarse grid, as a config file."""
    text = (CONFIGS / "pierce_gun.toml").read_text().replace("cell_mm = 0.1", "cell_mm = 0.2")
    text = text.replace("rays = 100", "rays = 40")
    path = tmp_path_factory.mktemp("pierce") / "pierce_coarse.toml"
    path.write_text(text)
    return path


def test_bundled_pierce_gun(pierce):
    setup = load(CONFIGS / "pierce_gun.toml")
    assert setup.gun.cathode == "cathode" and max(abs(e.voltage_V) for e in setup.electrodes) > 1000
    result = gun(load(pierce))
    assert result.converged
    # a convergent gun: every ray leaves through the anode aperture and narrows after the anode
    records = result.run.records
    assert "landed" not in set(records["status"]) and (records["z_m"] > 11e-3).all()
    assert 11e-3 < result.crossover_z_m < 30e-3
    assert result.crossover_radius_m < 0.7 * result.emission["r_m"].max()
    # only the concave face emits (the focusing electrode covers the rim face)
    centre = np.array([13e-3, 0.0])
    rho = np.hypot(result.emission["z_m"] - centre[0], result.emission["r_m"])
    np.testing.assert_allclose(rho, 10e-3, rtol=1e-3)
    assert result.perveance_A_per_V1p5 == pytest.approx(result.current_A / 5000.0**1.5, rel=1e-12, abs=0)


def test_command_line(pierce, tmp_path, capsys):
    code = main(["gun", str(pierce), "--out", str(tmp_path), "--no-cache", "--quiet"])
    out = capsys.readouterr().out
    assert code == 0
    for word in ("converged", "perveance", "crossover at z", "emission across the cathode",
                 "crossed planes", "exit", "emittance", "weighted by the rays' current", "d50",
                 "CAUTION", "X-rays"):
        assert word in out
    assert (tmp_path / "rays.png").stat().st_size > 10_000
    # the emitted beam's result.h5 and landings.csv, as tracer run writes them: every ray, with the
    # current it carries summing to the gun's current (printed to 5 digits)
    from tracer.store.result_file import read_result

    beam = read_result(tmp_path / "result.h5").beams["gun"]
    with open(tmp_path / "landings.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [int(r["ray"]) for r in rows] == beam.records["ray"].tolist() and len(rows) > 10
    total = sum(float(r["weight_A"]) for r in rows)
    assert total == pytest.approx(beam.summary()["current_A"], rel=1e-12, abs=0)
    printed = float(out.split("  current ")[1].split()[0])
    assert total == pytest.approx(printed, rel=1e-4)


def test_command_line_without_gun_section(tmp_path, capsys):
    path = tmp_path / "plain.toml"
    path.write_text(DIODE.split("[gun]")[0].format(symmetry="planar", volts=VOLTS, gun=""))
    assert main(["gun", str(path), "--out", str(tmp_path), "--no-cache"]) == 2
    assert "no [gun] section" in capsys.readouterr().err
