"""Tests of the tuner against brute-force scans and a physics target."""

import dataclasses
import math

import numpy as np
import pytest

from tracer.config import TuneSpec, loads
from tracer.pipeline import solve
from tracer.scans import scan
from tracer.tuning import _objective, tune

from test_scans import lens_text


def lens(extra):
    return loads(lens_text(extra))


@pytest.fixture(scope="module")
def maps():
    return solve(lens(""))


def test_one_voltage_does_at_least_as_well_as_a_fine_scan(maps):
    """Brent after a coarse grid against 41 evenly spaced lens voltages (the brute force)."""
    setup = lens('[scan]\nlens = [500.0, 900.0, 41]\n'
                 '[tune]\nvary = { lens = [500.0, 900.0] }\ngoal = "smallest_spot"\nat = "image"\n')
    brute = scan(setup, maps, workers=1).table
    result = tune(setup, maps)
    assert result.method.startswith("grid of 11 then bounded Brent")
    assert result.evaluations < 41
    k = int(np.argmin(brute["spot_rms_m"]))
    assert brute["transmission"][k] == 1.0 and 0 < k < 40      # a real minimum inside the range
    assert result.value <= brute["spot_rms_m"][k]
    step = 400.0 / 40
    assert abs(result.voltages["lens"] - brute["lens_V"][k]) <= step
    # the reported trial is the best of the points tried, and it is a real trace at that voltage
    assert result.objective == result.points["objective"].min()
    again = scan(dataclasses.replace(setup, scan=dataclasses.replace(
        setup.scan, ranges=(("lens", result.voltages["lens"], result.voltages["lens"], 1),))),
        maps, workers=1).table
    assert again["spot_rms_m"][0] == result.value


def test_two_voltages_do_at_least_as_well_as_a_grid_scan(maps):
    """Differential evolution (fixed seed) + Nelder-Mead against a 7 x 7 grid of lens and target."""
    setup = lens('[scan]\nlens = [550.0, 850.0, 7]\ntarget = [0.0, 300.0, 7]\n'
                 '[tune]\nvary = { lens = [550.0, 850.0], target = [0.0, 300.0] }\n'
                 'goal = "smallest_spot"\nat = "image"\nseed = 5\n')
    brute = scan(setup, maps, workers=1).table
    result = tune(setup, maps, popsize=4, maxiter=5)
    assert result.method.startswith("differential evolution (seed 5")
    assert result.value <= brute["spot_rms_m"].min()
    assert 550.0 <= result.voltages["lens"] <= 850.0 and 0.0 <= result.voltages["target"] <= 300.0
    assert result.evaluations < 2 * 4 * 6 + 2 * 40             # the budget: generations + polish


def test_a_landing_energy_goal_sets_the_retarding_voltage(maps):
    """Protons of 1000 eV land on the target with 1000 eV - e V_target (energy conservation:
    common practice), so a 250 eV landing needs about 750 V (less the fraction of a volt the
    start point already sits at)."""
    setup = lens('[tune]\nvary = { target = [0.0, 900.0] }\ngoal = { landing_energy_eV = 250.0 }\n')
    result = tune(setup, maps)
    assert result.figure == "landing_mean_eV"
    assert result.value == pytest.approx(250.0, abs=0.05)
    assert result.voltages["target"] == pytest.approx(750.0, abs=1.0)


def test_lost_rays_never_look_like_a_small_spot():
    spec = TuneSpec((("lens", 0.0, 1.0),), "smallest_spot", at="image")
    size = 8e-3
    all_through = _objective(spec, {"transmission": 1.0, "spot_rms_m": 1e-3}, "spot_rms_m", size)
    half_lost = _objective(spec, {"transmission": 0.5, "spot_rms_m": 1e-6}, "spot_rms_m", size)
    none = _objective(spec, {"transmission": 0.0, "spot_rms_m": math.nan}, "spot_rms_m", size)
    assert all_through == pytest.approx(1e-3) and half_lost > all_through and none == size
