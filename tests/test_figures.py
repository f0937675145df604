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


def test_every_picture_of_a_run_is_a_figure_or_none_when_empty(drift):
    field, run = drift
    assert isinstance(plot.landing_energy_figure([run]), Figure)
    assert isinstance(plot.landing_positions_figure([run]), Figure)
    assert isinstance(plot.phase_space_figure(run, "mid"), Figure)
    names = [name for name, _ in plot.figure_jobs(field, [run])]
    assert names == ["rays.png", "landing_energy.png", "landing_positions.png", "phase_b_mid.png",
                     "spot_b_mid.png"]
    nothing = dataclasses.replace(run, records=run.records[:0], crossings=run.crossings[:0])
    assert plot.landing_energy_figure([nothing]) is None and plot.spot_figure(nothing, "mid") is None


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
