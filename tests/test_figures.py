"""Figures from the Python API: each picture as a matplotlib Figure, checked by what it holds (its
axes, labels and drawn data), not by its pixels."""

import dataclasses
import math

import numpy as np
import pytest
from matplotlib.figure import Figure

from tracer import plot
from tracer.beam import trace
from tracer.measure import plane_figures
from tracer.optics import paraxial
from tracer.tuning import TuneResult

from test_optics import OMEGA, R, TanhLens, stand_in
from test_trace import plates

PLANE = '[[plane]]\nname = "mid"\nz_mm = 5.0\n'


@pytest.fixture(scope="module")
def drift():
    """Electrons of 10 eV from a disc of 1 mm radius at z = 1 mm in a cone of 5 degrees, in a field
    of 100 V over 10 mm, through a plane at z = 5 mm to the plate at z = 10 mm."""
    field, setup = plates(volts=100.0, count=120, extra=PLANE)
    return field, trace(field, setup.beams[0], planes=setup.planes, keep_paths=40)


def test_the_rays_figure_keeps_true_scale_and_adds_a_view_stretched_across_the_beam(drift):
    field, run = drift
    fig = plot.rays_figure(field, [run], title="plates")
    assert isinstance(fig, Figure)
    true, stretched = fig.axes
    assert true.get_aspect() == 1.0 and true.get_ylim() == pytest.approx((0.0, 5.0))
    # the stretched view spans the beam's envelope, not the domain
    top = max(float(np.hypot(p["x_m"], p["y_m"]).max()) for p in run.paths) * 1e3
    assert top < stretched.get_ylim()[1] <= 1.25 * top < 5.0
    # the plane is marked where it is, and the best focus of its rays where measure puts it
    lines = [line for line in stretched.get_lines() if list(line.get_xdata()) == [5.0, 5.0]]
    assert len(lines) == 1
    focus = plane_figures(run, "mid").focus_z_m
    marks = [line for line in stretched.get_lines() if line.get_marker() == "X"]
    if field.grid.z0 <= focus <= field.grid.z1:
        assert [m.get_xdata()[0] for m in marks] == [pytest.approx(focus * 1e3)]
    else:
        assert not marks
    # equipotentials at round values within the map's range: a step of 1, 2, 2.5 or 5 times 10^k
    [contours] = [c for c in true.collections if hasattr(c, "levels")]
    levels = np.asarray(contours.levels)
    step = levels[1] - levels[0]
    mantissa = step / 10 ** math.floor(math.log10(step))
    assert mantissa in (1.0, 2.0, 2.5, 5.0)
    g = field.grid
    zz, rr = np.meshgrid(g.z, g.r, indexing="ij")
    v = field.potential(zz.ravel(), rr.ravel())
    assert np.allclose(levels / step, np.round(levels / step))
    assert v.min() < levels.min() and levels.max() < v.max() and len(levels) >= 8
    assert len(plot.rays_figure(field).axes) == 1        # no rays: the true-scale view alone


def test_the_spot_figure_holds_the_spot_its_circles_and_its_profile(drift):
    field, run = drift
    stats = plane_figures(run, "mid")
    fig = plot.spot_figure(run, "mid")
    assert isinstance(fig, Figure)
    spot, profile, share = fig.axes
    labels = [line.get_label() for line in spot.get_lines()]
    assert labels == [f"d50 = {stats.d50_m * 1e3:.4g} mm", f"d90 = {stats.d90_m * 1e3:.4g} mm"]
    # the d50 circle's radius is d50 / 2 about the centroid
    circle = spot.get_lines()[0]
    radius = np.hypot(circle.get_xdata() - stats.centroid_x_m * 1e3, circle.get_ydata() - stats.centroid_y_m * 1e3)
    assert np.allclose(radius, stats.d50_m * 1e3 / 2)
    # the rays per mm² in the rings, times the rings' areas, count every ray at the plane once
    stairs = profile.patches[0]
    values, edges = stairs.get_data().values, stairs.get_data().edges
    assert np.sum(values * np.pi * np.diff(edges ** 2)) == pytest.approx(stats.count)
    enclosed = share.get_lines()[0].get_ydata()
    assert enclosed[-1] == pytest.approx(1.0) and np.all(np.diff(enclosed) >= 0)
    assert profile.get_ylabel() == "ray density (rays / mm²)"


def test_the_phase_space_figure_weighs_the_rays_by_their_current(drift):
    """With uneven currents the phase-space figure is the plane's weighted figures: its rms ellipse
    has the area pi eps (Lapostolle 1971) of the current-weighted rms emittance, which the legend
    quotes with the normalised one; counting the rays alike gives another emittance."""
    field, run = drift
    records = run.records.copy()
    records["weight_A"] = np.where(records["ray"] % 3 == 0, 5e-9, 1e-9)
    weighted = dataclasses.replace(run, records=records)
    stats = plane_figures(weighted, "mid")
    assert stats.emittance_x_m_rad != pytest.approx(plane_figures(run, "mid").emittance_x_m_rad, rel=1e-3)
    ax = plot.phase_space_figure(weighted, "mid").axes[0]
    [ellipse] = ax.get_lines()
    u, s = ellipse.get_xdata(), ellipse.get_ydata()
    area = 0.5 * abs(np.dot(u[:-1], s[1:]) - np.dot(u[1:], s[:-1]))      # shoelace, mm mrad
    assert area == pytest.approx(math.pi * stats.emittance_x_m_rad * 1e6, rel=1e-3)
    assert f"ε = {stats.emittance_x_m_rad * 1e6:.4g} mm mrad" in ellipse.get_label()
    assert f"βγε = {stats.norm_emittance_x_m_rad * 1e6:.4g} mm mrad" in ellipse.get_label()


def test_every_picture_of_a_run_is_a_figure_or_none_when_empty(drift):
    field, run = drift
    assert isinstance(plot.landing_energy_figure([run]), Figure)
    assert isinstance(plot.landing_positions_figure([run]), Figure)
    assert isinstance(plot.phase_space_figure(run, "mid"), Figure)
    names = [name for name, _ in plot.figure_jobs(field, [run])]
    assert names == ["rays.png", "landing_energy.png", "landing_positions.png", "phase_b_mid.png",
                     "spot_b_mid.png", "arrival_b_mid.png"]
    assert isinstance(plot.arrival_times_figure(run, "mid"), Figure)    # a static field's flight times
    nothing = dataclasses.replace(run, records=run.records[:0], crossings=run.crossings[:0])
    assert plot.landing_energy_figure([nothing]) is None and plot.spot_figure(nothing, "mid") is None
    assert plot.arrival_times_figure(nothing, "mid") is None


def test_scan_figures_have_a_panel_per_figure_that_varies_labelled_with_its_unit():
    volts = np.linspace(500.0, 900.0, 5)
    table = np.zeros(5, dtype=[("lens_V", float), ("transmission", float), ("spot_rms_m", float),
                               ("focus_z_m", float), ("left", float), ("target.landed", float),
                               ("target.landing_mean_eV", float)])
    table["lens_V"] = volts
    table["transmission"] = 1.0                                     # constant: no panel
    table["spot_rms_m"] = 1e-4 * (1 + (volts - 700) ** 2 / 1e4)
    table["focus_z_m"] = np.nan                                     # never measured: no panel
    table["left"] = 0.0                                             # all zero: no panel
    table["target.landed"] = np.linspace(0.2, 0.6, 5)
    table["target.landing_mean_eV"] = 1000.0
    figures = plot.scan_figures(table, ["lens"])
    assert list(figures) == ["scan", "scan_target"]
    assert all(isinstance(f, Figure) for f in figures.values())
    [panel] = [ax for ax in figures["scan"].axes if ax.get_visible()]
    assert panel.get_title() == "rms spot radius (mm)" and panel.get_xlabel() == "lens (V)"
    assert np.allclose(panel.get_lines()[0].get_ydata(), table["spot_rms_m"] * 1e3)
    [panel] = [ax for ax in figures["scan_target"].axes if ax.get_visible()]
    assert panel.get_title() == "target: landed (share of the rays)"
    assert plot.varying(table, ["lens"]) == ["spot_rms_m", "target.landed"]


def test_the_spot_figure_in_planar_symmetry_is_the_profile_across_y():
    """Planar maps vary only in y: the spot figure is the profile across y (rays per mm of y in
    bands |y - <y>|, both sides) with the share within; the bands hold every ray once."""
    from test_endings import _planar_plates
    from test_trace import linear_map
    from tracer.config import loads

    setup = loads(_planar_plates())
    run = trace(linear_map(setup, 1000.0), setup.beams[0], planes=setup.planes)
    fig = plot.spot_figure(run, "mid", symmetry="planar")
    profile, share = fig.axes
    assert profile.get_xlabel() == "|y - <y>| (mm)" and profile.get_ylabel() == "ray density (rays / mm)"
    data = profile.patches[0].get_data()
    assert np.sum(data.values * 2 * np.diff(data.edges)) == pytest.approx(plane_figures(run, "mid").count)
    assert share.get_lines()[0].get_ydata()[-1] == pytest.approx(1.0)


# ------------------------------------------------------------------ the tune and optics figures


def _points(names, values, objective):
    points = np.zeros(len(values), dtype=[(f"{n}_V", float) for n in names] + [("value", float), ("objective", float)])
    points["value"], points["objective"] = values, objective
    return points


def test_the_tune_figure_draws_every_trial_and_marks_the_best():
    """One varied electrode: every trial's figure against its voltage, in the figure's display unit
    (mm for a spot in m), the best trial (smallest objective) starred and named in the legend."""
    volts = np.array([600.0, 900.0, 750.0, 700.0, 720.0])
    spot = 1e-4 * (1 + (volts - 710.0) ** 2 / 1e4)
    points = _points(["lens"], spot, spot)
    points["lens_V"] = volts
    result = TuneResult({"lens": 710.0}, float(spot[3]), float(spot[3]), "smallest_spot", "spot_rms_m", points,
                        "Nelder-Mead")
    fig = plot.tune_figure(result)
    [ax] = fig.axes
    trials, best = ax.collections
    assert np.array_equal(trials.get_offsets(), np.column_stack([volts, spot * 1e3]))
    assert np.array_equal(best.get_offsets(), [[700.0, spot[3] * 1e3]])
    assert ax.get_xlabel() == "lens (V)" and ax.get_ylabel() == "rms spot radius (mm)"
    assert ax.get_title() == "tune: smallest_spot"
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["trials", "best: lens = 710 V"]


def test_the_tune_figure_of_several_voltages_runs_over_the_trials():
    """Two varied electrodes: the figure against the trial number (1, 2, ...); a time figure in ns,
    as the scan files give it."""
    width = np.array([3e-9, 2e-9, 2.5e-9, 1.5e-9])
    points = _points(["lens", "ring"], width, -np.array([1.0, 2.0, 5.0, 3.0]))
    result = TuneResult({"lens": 1.0, "ring": 2.0}, float(width[2]), -5.0, "custom", "tof_fwhm_s", points, "x")
    [ax] = plot.tune_figure(result).axes
    trials, best = ax.collections
    assert np.allclose(trials.get_offsets(), np.column_stack([[1, 2, 3, 4], width * 1e9]), rtol=1e-15, atol=0)
    assert np.allclose(best.get_offsets(), [[3, 2.5]], rtol=1e-15, atol=0)   # the objective's smallest, not the value's
    assert ax.get_xlabel() == "trial" and ax.get_ylabel() == "time-of-flight FWHM (ns)"


def test_the_optics_figure_draws_the_axial_potential_and_the_fundamental_rays():
    """Protons of 1 keV through the two-tube lens of the tanh model (Harting & Read 1976, omega = 1.318),
    accelerated by 3 kV: the drawn axial
    potential is the model's on the axis, its derivatives on the twin axis, the ray g entering
    parallel at unit height, and the image focus and principal plane marked where LensProperties
    puts them; the title gives f, Cs and Cc in mm."""
    props = paraxial(stand_in(TanhLens(0.0, -3000.0).potential, half=0.1), "p+", 1000.0)
    fig = plot.optics_figure(props)
    top, bottom, twin = fig.axes
    [v] = top.get_lines()
    z = v.get_xdata() / 1e3
    assert np.array_equal(v.get_xdata(), props.z_m * 1e3)
    assert np.allclose(v.get_ydata(), -1500.0 - 1500.0 * np.tanh(OMEGA * z / R), rtol=0, atol=1e-3)
    d1, d2 = twin.get_lines()
    k = OMEGA / R
    t = np.tanh(k * z)
    assert np.allclose(d1.get_ydata(), -1500.0 * k * (1 - t * t), rtol=0, atol=1e-3 * 1500 * k)
    assert np.array_equal(d2.get_ydata(), props.axial[2] * 1e-3)
    assert top.get_ylabel() == "axial potential V (V)" and twin.get_ylabel() == "V' (V/m), V'' (kV/m²)"
    assert bottom.get_xlabel() == "z (mm)" and bottom.get_ylabel() == "ray height (relative)"
    g = bottom.get_lines()[0]
    assert g.get_label().startswith("g:") and g.get_ydata()[0] == pytest.approx(1.0)
    marks = {a.get_text(): a.xy[0] for a in bottom.texts}
    assert set(marks) == {"F_o", "P_o", "P_i", "F_i"}
    assert marks["F_o"] == pytest.approx(props.focus_object_z_m * 1e3)
    assert marks["F_i"] == pytest.approx(props.focus_image_z_m * 1e3)
    assert marks["P_i"] == pytest.approx(props.principal_image_z_m * 1e3)
    assert f"f = {props.f_image_m * 1e3:.4g} mm" in top.get_title() and "Cs = " in top.get_title()


def test_the_optics_figure_of_a_mirror_marks_where_the_particle_turns():
    """Protons of 300 eV against a tube 1000 V up turn back where the potential reaches 300 V: the
    tanh model's z = (R / omega) artanh(2 * 300 / 1000 - 1) (Harting & Read 1976); no rays drawn."""
    props = paraxial(stand_in(TanhLens(0.0, 1000.0).potential), "p+", 300.0)
    top, bottom, _ = plot.optics_figure(props).axes
    turn = R / OMEGA * math.atanh(2 * 300.0 / 1000.0 - 1) * 1e3
    [line] = [l for l in top.get_lines() if l.get_linestyle() == "--"]
    assert line.get_xdata()[0] == pytest.approx(turn, abs=1e-3)
    assert "turns back" in top.get_title() and not bottom.get_lines()
