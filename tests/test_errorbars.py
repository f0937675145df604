"""Error bars on a run's figures (tracer.errorbars, the pipeline and the report): the grid error from
solves on two or three cells, the Monte Carlo error apart, warnings, the config key and the flag."""

import dataclasses
import math

import numpy as np
import pytest

import tracer
from tracer import errorbars
from tracer.cli import main
from tracer.config import loads
from tracer.pipeline import run, with_grids
from tracer.report import format_summary

UNIFORM = """
title = "protons in a uniform field between parallel plates (illustrative)"
[domain]
symmetry = "planar"
z_mm = [0.0, 20.0]
y_mm = [-5.0, 5.0]
cell_mm = 0.5
edges = {{ z_min = "ground", z_max = "ground", y_min = "open", y_max = "open" }}
[[electrode]]
name = "plate"
voltage_V = -1000.0
[[electrode.rect]]
z_mm = [18.0, 20.0]
y_mm = [-5.0, 5.0]
[[beam]]
name = "p"
species = "p+"
energy_eV = 10.0
energy_spread_eV = 1.0
count = {count}
seed = 3
start_z_mm = 0.0
radius_mm = 2.0
[[plane]]
name = "mid"
z_mm = 9.0
[trace]
rtol = 1e-10
{extra}
"""


def uniform(count=60, extra=""):
    return loads(UNIFORM.format(count=count, extra=extra))


@pytest.fixture(scope="module")
def uniform_run():
    return run(uniform())


def test_uniform_field_landing_energy_has_a_round_off_error_bar(uniform_run):
    """A uniform field (plates with open sides: the exact potential is linear, which the five-point
    stencil reproduces; Jackson) gives every ray the landing energy E0 + q * 1000 V on every grid:
    the grid error bar of the landing energy is at the level of round-off and of the solver and
    integrator tolerances (1e-10), far below the energy, and raises no warning."""
    bars = {(f.section, f.where, f.figure): f for f in uniform_run.errors.beams["p"].figures}
    landing = bars["landing", "plate", "energy_mean_eV"]
    assert landing.value == pytest.approx(1010.0, rel=1e-3)        # 10 eV mean start + 1000 eV
    assert landing.grid.error <= 1e-9 * landing.value
    assert landing.grid.coarse == pytest.approx(landing.grid.value, rel=1e-9)
    assert uniform_run.errors.beams["p"].warnings == ()


def test_error_bars_cover_every_summary_figure(uniform_run):
    """Every float figure of the summary's planes and landings has a bar; the record nests as the
    summary does and the Monte Carlo error is there apart from the grid error."""
    summary = uniform_run.summary()["p"]
    record = summary["uncertainty"]
    for section in ("planes", "landing"):
        for where, figs in summary[section].items():
            floats = {k for k, v in figs.items() if isinstance(v, float)}
            assert set(record[section][where]) == floats
    mean = record["landing"]["plate"]["energy_mean_eV"]
    # the start energies spread by 1 eV over 60 rays: the mean is uncertain by about 1/sqrt(60) eV
    assert 0.3 / math.sqrt(60) < mean["monte_carlo"] < 3.0 / math.sqrt(60)
    assert mean["grid"] < 1e-6 * mean["monte_carlo"]
    assert record["cells_m"] == [0.5e-3, 1e-3] and record["rays"] == 60
    text = format_summary(summary)
    assert "error bars: grid from cells 0.5, 1 mm" in text and "± grid" in text and "± rays" in text


def test_subset_keeps_the_figures_of_its_rays(uniform_run):
    """The run of some rays renumbered gives the figures those rays give: the whole run's subset of
    all rays equals the run; a subset's plane fraction counts its own rays."""
    beam = uniform_run.beams["p"]
    n = len(beam.records)
    whole = errorbars.figures(errorbars.subset(beam, np.arange(n)).summary())
    assert whole == pytest.approx(errorbars.figures(beam.summary()), nan_ok=True)
    part = errorbars.subset(beam, np.arange(0, n, 3))
    assert len(part.records) == len(range(0, n, 3))
    assert set(part.crossings["ray"]) <= set(range(len(part.records)))
    assert part.summary()["planes"]["mid"]["fraction"] == 1.0


def test_picked_rays_spread_over_the_beam():
    assert list(errorbars.picked(10, 4)) == [0, 3, 6, 9]
    assert list(errorbars.picked(3, 256)) == [0, 1, 2]
    assert len(errorbars.picked(0, 5)) == 0


def test_monte_carlo_needs_enough_rays():
    """Fewer rays than two per batch: no Monte Carlo error (NaN shown), the grid error still there."""
    result = run(uniform(count=12))
    bar = next(f for f in result.errors.beams["p"].figures if f.figure == "energy_mean_eV")
    assert math.isnan(bar.monte_carlo) and math.isfinite(bar.grid.error)


def test_grids_one_turns_it_off_and_three_observe_an_order():
    """``grids = 1``: no error bars, the summary as before; ``grids = 3``: three cells and an order."""
    off = run(with_grids(uniform(count=20), 1))
    assert off.errors is None and "uncertainty" not in off.summary()["p"]
    three = run(uniform(count=20, extra='[grid_error]\ngrids = 3\nthird = "coarse"\nrays = 10'))
    assert three.errors.cells_m == pytest.approx((0.5e-3, 1e-3, 2e-3))
    assert three.errors.beams["p"].rays == 10


def test_warning_names_the_figure_and_a_cell():
    """A figure whose grid error is above the fraction gets a warning with the figure and a cell."""
    bar = errorbars.FigureBar("planes", "image", "rms_radius_m", 1e-4,
                              tracer.gridcheck.two_grids(1e-4, 1.06e-4), 1e-6)
    lines = errorbars.warnings("argon", [bar], {("planes", "image", "rms_radius_m"): 1e-4}, 2e-4, 0.01)
    assert len(lines) == 1
    assert "beam argon, plane image rms_radius_m" in lines[0]
    assert "cell_mm = 0.081 would bring it under (now 0.2)" in lines[0]   # 0.2 mm * sqrt(1/6)
    mean = errorbars.FigureBar("planes", "image", "centroid_x_m", 1e-6,
                               tracer.gridcheck.two_grids(1e-6, 1.5e-6), 1e-6)
    spread = {("planes", "image", "centroid_x_m"): 1e-6, ("planes", "image", "rms_x_m"): 1e-4}
    assert errorbars.warnings("argon", [mean], spread, 2e-4, 0.01) == ()   # 0.5 um of a 100 um beam


@pytest.mark.parametrize("text,message", [
    ("grids = 0", "grid_error.grids: must be >= 1, got 0"),
    ("grids = 4", "grid_error.grids: expected one of 1, 2, 3, got 4"),
    ('third = "half"', "grid_error.third: unknown value 'half'"),
    ("safety = 0.9", "grid_error.safety: must be >= 1, got 0.9"),
    ("rays = 1", "grid_error.rays: must be >= 2, got 1"),
    ("warn_fraction = 1.5", "grid_error.warn_fraction: must be < 1, got 1.5"),
    ("cells = 2", "grid_error.cells: unknown key 'cells'"),
])
def test_bad_grid_error_keys(text, message):
    with pytest.raises(tracer.ConfigError, match="^" + message.replace("(", r"\(")):
        uniform(extra=f"[grid_error]\n{text}")


def test_command_line_flag(tmp_path, capsys):
    """``--grids 1`` leaves the error bars out, the default shows them, a bad value exits 2."""
    config = tmp_path / "u.toml"
    config.write_text(UNIFORM.format(count=20, extra=""))
    assert main(["run", str(config), "--out", str(tmp_path / "a"), "--no-cache", "--quiet"]) == 0
    assert "error bars: grid from cells" in capsys.readouterr().out
    assert main(["run", str(config), "--out", str(tmp_path / "b"), "--no-cache", "--quiet",
                 "--grids", "1"]) == 0
    assert "error bars" not in capsys.readouterr().out
    with pytest.raises(SystemExit) as exc:
        main(["run", str(config), "--grids", "5"])
    assert exc.value.code == 2


def test_with_cell_changes_only_the_cell():
    setup = uniform()
    coarse = errorbars.with_cell(setup, 2.0)
    assert coarse.domain.cell_m == 2 * setup.domain.cell_m
    assert dataclasses.replace(coarse, domain=setup.domain) == setup


def test_result_file_keeps_the_error_bars(uniform_run, tmp_path, capsys):
    """result.h5 holds a row per figure beside the stored summary, and ``tracer show`` prints the
    error bars again from it."""
    import h5py

    from tracer.pipeline import write_run_outputs

    write_run_outputs(uniform_run, tmp_path)
    summary = uniform_run.summary()["p"]
    with h5py.File(tmp_path / "result.h5", "r") as f:
        table = f["tracer/result/uncertainty/0"]
        rows = table[()]
        assert list(table.attrs["cells_m"]) == [0.5e-3, 1e-3] and table.attrs["rays"] == 60
    n = sum(len(figs) for s in ("planes", "landing") for figs in summary["uncertainty"][s].values())
    assert len(rows) == n
    row = rows[(rows["where"] == b"plate") & (rows["figure"] == b"energy_mean_eV")][0]
    assert row["value"] == summary["landing"]["plate"]["energy_mean_eV"]
    assert row["grid_error"] == summary["uncertainty"]["landing"]["plate"]["energy_mean_eV"]["grid"]
    assert math.isnan(row["value_third"])
    assert main(["show", str(tmp_path / "result.h5"), "--out", str(tmp_path / "again")]) == 0
    assert "error bars: grid from cells 0.5, 1 mm" in capsys.readouterr().out
