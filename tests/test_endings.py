"""How rays ended: a warning for every ending but landed/plane, where rays left the domain and with
what energy, the potential at the start and the landing energy it implies, labels by symmetry.

The beams run between two plates with the exact linear potential V = volts z / GAP of
tests/test_trace.py, so every energy below is known in closed form (energy conservation:
E = E0 + q (V0 - V), common practice)."""

import dataclasses
import math

import numpy as np
import pytest

from test_trace import GAP, Z_START, linear_map, plates
from tracer.beam import trace
from tracer.config import loads
from tracer.report import format_summary


def test_rays_at_the_time_limit_get_a_warning_with_count_fraction_and_what_to_change():
    field, setup = plates(count=20)
    s = trace(field, setup.beams[0], max_time_s=1e-12).summary()
    assert s["status"]["time"] == 20
    assert s["warnings"][0] == ("20 of 20 rays (100.0%) still flying at the time limit: "
                                "raise [trace] max_time_us")
    text = format_summary(s)
    assert "WARNING: 20 of 20 rays (100.0%) still flying" in text


def test_rays_started_inside_metal_are_named_with_the_electrode():
    field, setup = plates(count=10)
    beam = dataclasses.replace(setup.beams[0], start_z_m=-0.5e-3)    # inside the back plate
    s = trace(field, beam).summary()
    assert s["status"]["inside"] == 10
    assert s["warnings"] == ["10 of 10 rays (100.0%) started inside an electrode and were not traced "
                             "('back'): move the beam's start (start_z_mm, start_r_mm, its radius) "
                             "out of the metal"]


def test_a_clean_run_has_no_warning():
    field, setup = plates(count=10, angle=1.0)
    s = trace(field, setup.beams[0]).summary()
    assert s["status"]["landed"] == 10 and s["warnings"] == [] and s["warning"] == ""
    assert "WARNING" not in format_summary(s)


def test_rays_that_left_are_summarised_by_edge_with_their_energy():
    """No field (both plates at 0 V): a ray keeps its start energy, so those that reach the outer
    radius (an open edge at r = 5 mm) leave with exactly the energy they started with."""
    field, setup = plates(volts=0.0, count=200, angle=80.0, energy=50.0)
    run = trace(field, setup.beams[0])
    s = run.summary()
    left = run.records["status"] == "left"
    assert left.sum() > 20
    assert list(s["left"]) == ["r_max"]
    edge = s["left"]["r_max"]
    assert edge["count"] == left.sum() and edge["fraction"] == pytest.approx(left.mean())
    assert edge["transverse_min_m"] == pytest.approx(5e-3, abs=1e-9)
    assert edge["transverse_max_m"] == pytest.approx(5e-3, abs=1e-9)
    assert 0.0 < edge["z_min_m"] <= edge["z_max_m"] < GAP
    assert edge["energy_min_eV"] == pytest.approx(50.0, rel=1e-9)
    assert edge["energy_max_eV"] == pytest.approx(50.0, rel=1e-9)
    assert any(w.endswith("left the domain through an outer edge: widen [domain] if they should have "
                          "landed or crossed a plane") for w in s["warnings"])
    text = format_summary(s)
    assert "left the domain" in text and "r_max" in text


def test_left_summary_is_empty_when_nothing_left_or_bounds_are_unknown():
    from tracer.endings import left_summary

    field, setup = plates(volts=0.0, count=50, angle=80.0)
    run = trace(field, setup.beams[0])
    assert left_summary(run.records, ()) == {}
    assert left_summary(run.records[run.records["status"] != "left"], run.bounds_m) == {}


def test_start_potential_and_the_landing_energy_it_implies():
    """V0 = 1000 V z0 / GAP = 100 V at the start; electrons (q = -1 e) on the front plate at
    1000 V land with E0 + q (V0 - 1000 V) = E0 + 900 eV."""
    field, setup = plates(volts=1000.0, energy=10.0, count=30)
    run = trace(field, setup.beams[0])
    s = run.summary()
    ref = s["energy_reference"]
    v0 = 1000.0 * Z_START / GAP
    assert ref["start_potential_V"] == pytest.approx(v0, rel=1e-12)
    assert ref["start_potential_min_V"] == pytest.approx(v0, rel=1e-12)
    assert ref["start_energy_eV"] == pytest.approx(10.0)
    front = s["landing"]["front"]
    assert front["energy_expected_eV"] == pytest.approx(10.0 + 900.0, rel=1e-12)
    assert front["energy_mean_eV"] == pytest.approx(front["energy_expected_eV"], rel=1e-9)
    text = format_summary(s)
    assert "where the potential is 100 V" in text and "E expect eV" in text


def test_every_report_names_the_resolved_species():
    field, setup = plates(species_name="40Ar+", energy=100.0, count=5)
    text = format_summary(trace(field, setup.beams[0]).summary())
    assert text.splitlines()[0] == "beam b: 5 rays of 40Ar+: ⁴⁰Ar⁺, 39.9618345 u (isotopic), charge +1 e"


def test_planar_reports_label_the_y_quantities():
    field, setup = plates(count=20, extra='[[plane]]\nname = "mid"\nz_mm = 5.0\n')
    text = format_summary(trace(field, setup.beams[0], planes=setup.planes).summary())
    assert "rms r mm" in text and "rms emit x mm mrad" in text
    planar = loads(_planar_plates())
    field = linear_map(planar, 1000.0)
    s = trace(field, planar.beams[0], planes=planar.planes).summary()
    text = format_summary(s)
    assert s["symmetry"] == "planar"
    for label in ("rms y mm", "rms y' mrad", "rms emit y mm mrad", "y min mm"):
        assert label in text, label
    for label in ("rms r mm", "x0 mm", "emit x", "r min mm"):
        assert label not in text, label
    assert math.isfinite(s["planes"]["mid"]["rms_y_m"]) and s["planes"]["mid"]["rms_y_m"] > 0


def _planar_plates():
    from test_trace import PLATES

    text = PLATES.format(volts=1000.0, species="e-", energy=10.0, count=20, angle=5.0,
                         extra='[[plane]]\nname = "mid"\nz_mm = 5.0\n')
    return text.replace('symmetry = "axial"', 'symmetry = "planar"')


def test_a_result_read_back_reports_the_same_endings(tmp_path):
    from tracer.store.result_file import read_result, write_result

    field, setup = plates(volts=0.0, count=60, angle=80.0)
    run = trace(field, setup.beams[0])
    back = read_result(write_result(tmp_path / "r.h5", field, [run])).beams["b"].summary()
    assert back["warnings"] == run.summary()["warnings"]
    assert back["left"] == run.summary()["left"]
    assert back["energy_reference"] == run.summary()["energy_reference"]
    np.testing.assert_array_equal(back["status"]["left"], run.summary()["status"]["left"])
