"""Error bars on the figures of a run: the grid error, and the Monte Carlo error apart from it.

The grid error
--------------
The maps are solved again on cell 2h (and on a third grid when ``[grid_error] grids = 3``: 4h or
h/2), combined at the run's voltages, and the same rays are traced through them.  Each figure of
the run summary (the fields of :class:`tracer.measure.PlaneStats` at every plane and of
:class:`tracer.measure.LandingStats` on every electrode, as :meth:`tracer.beam.BeamRun.summary`
gives them) is computed for those rays on each grid, and :mod:`tracer.gridcheck` turns the values
into Roache's grid convergence index (p = 2, safety factor 3 with two grids, 1.25 where a third
grid confirms the order) and, with three grids, an observed order and a "refine cell_mm" flag.
The figure shown is the one of all rays on the config's cell; its error bar is the GCI.

Which rays are traced again: ``[grid_error] rays`` of each beam (256 unless set; all of them when
the beam has fewer), spread evenly over the beam.  The grid error is the difference of the *same*
rays through two maps, so the scatter of the rays from the source cancels in it; what is left is
how that difference varies from ray to ray, which a few hundred rays pin down to a few per cent
(the standard error of a mean of 256 samples is 1/16 of their spread), well within the factor the
safety factor allows.  Tracing on a coarser cell also takes fewer steps (a step spans at most one
cell), so the estimate costs a quarter of the solve plus a fraction of the tracing.

The Monte Carlo error
---------------------
The error of a figure from the finite number of rays is estimated apart by the delete-a-group
jackknife: the rays are dealt into :data:`BATCHES` disjoint groups (every tenth ray), the figure
is computed on all rays but one group, for each group in turn, and the standard error of the figure
of all rays is sqrt((G - 1) / G * sum of the squared deviations of those G values from their mean)
(Quenouille 1956, Tukey 1958; Efron and Stein 1981).  For a mean over groups of equal size this is
the standard deviation of the groups' own means over sqrt(G), the batch means of Monte Carlo
work.  Unlike batch means, which take each figure on one group alone, it takes every figure on
nine tenths of the rays, so a figure that needs many rays (an emittance, a width, a spot diameter)
keeps a true error on a small beam: the emittance of a group of two rays is zero, so batch means
would give a beam of 20 rays an emittance error of zero.  Leaving out a group of n / 10 rays, not
one ray, keeps it consistent for quantiles too (Shao and Wu 1989).  It needs no second trace; it
computes the summary ten times on nine tenths of the rays (0.8 s for 20 000 rays through the demo
lens, whose run with error bars takes 5.6 s).  A figure some of the ten samples lack (a plane few
rays cross) gets none, nor do the extremes (smallest and largest landing energy and radius): the
extreme of a sample is not the extreme of all rays.

Warnings
--------
A figure whose grid error exceeds ``warn_fraction`` of its size gets a warning naming the figure
and the cell that would bring it under (:func:`tracer.gridcheck.cell_for`).  The size is the figure
itself; for a mean (centroid, energy, time of flight) the larger of it and its spread (the rms
size, the energy or time spread); for the smallest landing radius or energy, the larger of it and
the largest; for a fraction of rays, 1.  A figure a third grid flags ("refine cell_mm") warns
when its three values differ by more than that fraction of its size, and the warning says to try
half the cell.  A grid error at round-off (``ROUND_OFF`` of the domain's
extent for lengths, of 1 rad for angles, of the mean energy or time for energies and times) warns
of nothing: a divergence that is zero by symmetry is not a figure to refine.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass

import numpy as np

from tracer import gridcheck, ledger, measure
from tracer.sources import START_DTYPE

BATCHES = 10
"""The disjoint groups of rays the jackknife leaves out in turn (the Monte Carlo error)."""

SECTIONS = ("planes", "landing")
"""The parts of a beam summary whose figures get error bars: at planes, on electrodes."""

_SPREAD = {"centroid_x_m": "rms_x_m", "centroid_y_m": "rms_y_m", "energy_mean_eV": "energy_std_eV",
           "time_mean_s": "time_std_s", "radius_min_m": "radius_max_m", "energy_min_eV": "energy_max_eV"}
"""The figure that measures whether a grid error matters, beside the figure itself: a mean's
spread, the largest landing radius or energy for the smallest."""

EXTREMES = ("energy_min_eV", "energy_max_eV", "radius_min_m", "radius_max_m")
"""Figures that are extremes of the rays: the jackknife tells nothing of them (no Monte Carlo error)."""

_FRACTIONS = ("fraction",)
"""Figures that are fractions of the rays: their grid error is weighed against 1."""


@dataclass(frozen=True)
class FigureBar:
    """The error bars of one figure.

    Attributes
    ----------
    section, where, figure : str
        Where the figure is in the beam summary: ``summary[section][where][figure]``
        (``"planes"``, a plane's name, ``"rms_radius_m"``, say).
    value : float
        The figure of all rays on the config's cell.
    grid : tracer.gridcheck.GridError
        Its grid error from the re-traced rays (``grid.value`` is their figure on cell h,
        ``grid.coarse`` on 2h, ``grid.third`` on the third grid).
    monte_carlo : float
        The standard error of ``value`` from the number of rays (the jackknife, module notes).
    """

    section: str
    where: str
    figure: str
    value: float
    grid: gridcheck.GridError
    monte_carlo: float

    @property
    def label(self) -> str:
        """``"plane image rms_radius_m"`` or ``"landing on focus energy_mean_eV"``."""
        place = f"plane {self.where}" if self.section == "planes" else f"landing on {self.where}"
        return f"{place} {self.figure}"


@dataclass(frozen=True)
class BeamBars:
    """The error bars of one beam's figures.

    Attributes
    ----------
    beam : str
    rays : int
        Rays traced again through the other grids.
    figures : tuple of FigureBar
        In summary order.
    warnings : tuple of str
        One line per figure whose grid error is too large, or that is flagged.
    """

    beam: str
    rays: int
    figures: tuple
    warnings: tuple

    def record(self) -> dict:
        """The error bars nested as the summary's figures, JSON-ready:
        ``{"planes": {plane: {figure: {...}}}, "landing": {...}, "rays": n, "warnings": [...]}``."""
        out = {section: {} for section in SECTIONS}
        for f in self.figures:
            out[f.section].setdefault(f.where, {})[f.figure] = {
                "grid": f.grid.error, "monte_carlo": f.monte_carlo, "fine": f.grid.value, "coarse": f.grid.coarse,
                "third": f.grid.third, "observed_order": f.grid.observed_order,
                "safety": f.grid.safety, "flag": f.grid.flag}
        return out | {"rays": self.rays, "warnings": list(self.warnings)}


@dataclass(frozen=True)
class ErrorBars:
    """The error bars of a run.

    Attributes
    ----------
    cells_m : tuple of float
        The cells of the grids: (h, 2h) or (h, 2h, third).
    beams : dict of str to BeamBars
    seconds : float
        Wall time of the estimate (solves and traces on the other grids).
    """

    cells_m: tuple
    beams: dict
    seconds: float

    def record(self, beam) -> dict:
        """One beam's :meth:`BeamBars.record` with the cells and the cost."""
        return self.beams[beam].record() | {"cells_m": list(self.cells_m), "seconds": self.seconds}


def with_cell(setup, factor):
    """The setup with its cell multiplied by ``factor`` (2 for the coarse grid, 0.5 for h/2)."""
    return dataclasses.replace(setup, domain=dataclasses.replace(setup.domain,
                                                                 cell_m=setup.domain.cell_m * factor))


def cells(setup):
    """The factors of the cells the estimate solves on, after h itself: (2,) or (2, 4) or (2, 0.5)."""
    spec = setup.grid_error
    if spec.grids < 2:
        return ()
    return (2.0,) if spec.grids == 2 else (2.0, 4.0 if spec.third == "coarse" else 0.5)


def picked(n, rays):
    """Positions of ``rays`` rays spread evenly over ``n`` (all of them when n <= rays)."""
    return np.unique(np.linspace(0, n - 1, min(n, rays)).round().astype(np.int64)) if n else np.zeros(0, int)


def subset(run, positions):
    """The run of the rays at ``positions`` (sorted), renumbered 0, 1, ...: its figures are those
    rays' figures.

    Parameters
    ----------
    run : tracer.beam.BeamRun
    positions : int64[k]

    Returns
    -------
    tracer.beam.BeamRun
        Without paths; its ledger report is that of these rays.
    """
    k = len(positions)
    starts, records = run.starts[positions].copy(), run.records[positions].copy()
    starts["ray"] = records["ray"] = np.arange(k)
    cross = run.crossings[np.isin(run.crossings["ray"], positions)].copy()
    cross["ray"] = np.searchsorted(positions, cross["ray"])
    scale = np.asarray(run.energy_scale_eV)[positions]
    report = ledger.ledger_report(records["ledger_eV"], scale, run.ledger.threshold,
                                  traced=records["status"] != "inside")
    return dataclasses.replace(run, starts=starts, records=records, crossings=cross, paths=(),
                               energy_scale_eV=scale, ledger=report,
                               work_eV=None if run.work_eV is None else run.work_eV[positions])


def figures(summary):
    """The figures of a beam summary (:meth:`tracer.beam.BeamRun.summary`) that get error bars.

    Returns
    -------
    dict of (str, str, str) to float
        ``(section, where, figure)`` -> value, for every float of the planes and landings.
    """
    return {(section, where, name): value for section in SECTIONS
            for where, d in summary[section].items() for name, value in d.items()
            if isinstance(value, float)}


def monte_carlo(run, batches=BATCHES):
    """The jackknife standard error of each figure from the number of rays (module notes).

    Returns
    -------
    dict of (str, str, str) to float
        Empty when the run has fewer than 2 ``batches`` rays; NaN for a figure that some sample
        leaving out a group lacks.
    """
    n = len(run.records)
    if n < 2 * batches:
        return {}
    group = np.arange(n) % batches
    parts = [figures(subset(run, np.flatnonzero(group != b)).summary()) for b in range(batches)]
    keys = {key for part in parts for key in part if key[2] not in EXTREMES}
    return {key: jackknife_error(np.array([p.get(key, math.nan) for p in parts])) for key in keys}


def jackknife_error(values) -> float:
    """The delete-a-group jackknife standard error from a figure's values on the G samples that
    each leave out one group: sqrt((G - 1) / G * sum((values - mean)^2)) (Tukey 1958; Efron and
    Stein 1981). NaN unless there are two or more values, all finite."""
    values = np.asarray(values, dtype=np.float64)
    g = len(values)
    if g < 2 or not np.all(np.isfinite(values)):
        return math.nan
    return float(math.sqrt((g - 1) / g * np.sum((values - values.mean()) ** 2)))


def _round_off(key, fig, extent_m):
    """The grid error of a figure below which it is round-off: ROUND_OFF of the natural scale of
    its unit (lengths and emittances: the domain's extent; angles: 1 rad; energies and times: the
    mean energy or time of flight there; anything else: itself)."""
    section, where, name = key
    scale = abs(fig[key])
    for suffix, unit in (("_m_rad", extent_m), ("_rad", 1.0), ("_m", extent_m),
                         ("_eV", fig.get((section, where, "energy_mean_eV"))),
                         ("_s", fig.get((section, where, "time_mean_s")))):
        if name.endswith(suffix):
            scale = abs(unit) if unit is not None and math.isfinite(unit) else scale
            break
    return gridcheck.ROUND_OFF * scale


def _size(key, fig):
    section, where, name = key
    if name in _FRACTIONS:
        return 1.0
    spread = fig.get((section, where, _SPREAD.get(name, "")), 0.0)
    return max(abs(fig[key]), abs(spread) if math.isfinite(spread) else 0.0)


def warnings(beam, bars, fig, cell_m, fraction, extent_m=1.0):
    """The warning lines of one beam (module notes).

    Parameters
    ----------
    beam : str
    bars : sequence of FigureBar
    fig : dict
        The beam's :func:`figures` of all rays.
    cell_m : float
        The config's cell.
    fraction : float
        ``warn_fraction``.
    extent_m : float
        The domain's largest side (the scale of round-off in lengths).

    Returns
    -------
    tuple of str
    """
    out = []
    for b in bars:
        key = (b.section, b.where, b.figure)
        why = advice(b.grid, _size(key, fig), _round_off(key, fig, extent_m), cell_m, fraction)
        if why:
            out.append(f"beam {beam}, {b.label} = {b.value:.6g} ± {b.grid.error:.2g} (grid): {why}")
    return tuple(out)


def advice(grid, size, floor, cell_m, fraction):
    """Why a figure's grid error calls for a finer cell, and which cell; "" when it does not.

    Parameters
    ----------
    grid : tracer.gridcheck.GridError
    size : float
        What the error is weighed against (module notes).
    floor : float
        Errors up to this are round-off.
    cell_m : float
        The config's cell.
    fraction : float
        ``warn_fraction``.

    Returns
    -------
    str
        For a figure flagged by a third grid whose grids differ by more than ``fraction`` of its size:
        the flag and half the cell to try; for a grid error above ``fraction`` of the size: the
        cell that brings it under (:func:`tracer.gridcheck.cell_for`); else "".
    """
    limit = max(fraction * size, floor)
    values = [v for v in (grid.value, grid.coarse, grid.third) if math.isfinite(v)]
    spread = max(values) - min(values) if values else 0.0
    now = f"now {cell_m * 1e3:g}"
    if grid.flag and spread > limit:
        return f"{grid.flag} ({now}); try cell_mm = {cell_m * 1e3 / 2:.2g} and check again"
    if grid.error > limit:
        cell = gridcheck.cell_for(grid.error, fraction * size, cell_m)
        return (f"the grid error is {grid.error / size:.2%} of its size, above {fraction:.2%}; "
                f"cell_mm = {cell * 1e3:.2g} would bring it under ({now})")
    return ""


def beam_bars(run, others, setup, rays):
    """The error bars of one traced beam.

    Parameters
    ----------
    run : tracer.beam.BeamRun
        The beam traced on the config's cell.
    others : sequence of tracer.beam.BeamRun
        The rays at ``picked(n, rays)`` traced through the 2h map and, when asked, the third map.
    setup : tracer.schema.Setup
    rays : int
        The rays traced again.

    Returns
    -------
    BeamBars
    """
    spec = setup.grid_error
    full = figures(run.summary())
    fine = figures(subset(run, picked(len(run.records), spec.rays)).summary())
    coarse = [figures(o.summary()) for o in others]
    mc = monte_carlo(run)
    bars = []
    for key, value in full.items():
        values = [fine.get(key, math.nan)] + [c.get(key, math.nan) for c in coarse]
        if len(values) == 2:
            grid = gridcheck.two_grids(*values, **_safety_of(spec.safety))
        else:
            grid = gridcheck.three_grids(*values, third_coarser=spec.third == "coarse", **_safety_of(spec.safety))
        bars.append(FigureBar(*key, value=value, grid=grid, monte_carlo=mc.get(key, math.nan)))
    return BeamBars(beam=run.name, rays=rays, figures=tuple(bars),
                    warnings=warnings(run.name, bars, full, setup.domain.cell_m, spec.warn_fraction,
                                      _extent(setup.domain)))


def _extent(domain):
    return max(domain.z_m[1] - domain.z_m[0], domain.r_m[1] - domain.r_m[0])




def estimate(setup, runs, *, field, trace, progress=None):
    """The error bars of a run: solve the other grids, trace the picked rays, compare.

    Parameters
    ----------
    setup : tracer.schema.Setup
        Its ``grid_error`` says how (``grids`` >= 2).
    runs : dict of str to tracer.beam.BeamRun
        Each beam traced on the config's cell, by name.
    field : callable
        ``field(setup)`` -> the field the run's beams are traced through on that setup's grid (the
        pipeline's solve with its cache, at the run's voltages: :func:`tracer.pipeline.traced_field`).
    trace : callable
        ``trace(field, beam, starts, progress)`` -> BeamRun (the pipeline's trace of a beam with
        given start states).
    progress : callable, optional
        ``progress(stage, done, total)``.

    Returns
    -------
    ErrorBars or None
        None when ``grids`` is 1.
    """
    factors = cells(setup)
    if not factors:
        return None
    t0 = time.perf_counter()
    beams = {b.name: b for b in setup.beams}
    traced = {name: [] for name in runs}
    for factor in factors:
        other = field(with_cell(setup, factor))
        for name, run in runs.items():
            starts = _start_rows(run, picked(len(run.records), setup.grid_error.rays))
            stage = None if progress is None else (
                lambda done, total, s=f"{name} on cell {factor:g}h": progress(s, done, total))
            traced[name].append(trace(other, beams[name], starts, stage))
    bars = {name: beam_bars(run, traced[name], setup, len(traced[name][0].records))
            for name, run in runs.items()}
    h = setup.domain.cell_m
    return ErrorBars(cells_m=(h,) + tuple(h * f for f in factors), beams=bars,
                     seconds=time.perf_counter() - t0)


def row_errors(run, trace_coarse, electrodes, rays, safety=None):
    """The grid error of each figure of a scan row (:func:`tracer.measure.row`), two grids.

    Parameters
    ----------
    run : tracer.beam.BeamRun
        The beam traced at one voltage set on the config's cell.
    trace_coarse : callable
        ``trace_coarse(starts)`` -> the BeamRun of those start states through the 2h map at the
        same voltages.
    electrodes : sequence of str
        All electrode names (as for :func:`tracer.measure.row`).
    rays : int
        Rays traced again (:func:`picked`).
    safety : float, optional
        The GCI's safety factor (default 3).

    Returns
    -------
    tuple of float
        In the order of the row.
    """
    positions = picked(len(run.records), rays)
    fine = measure.row(subset(run, positions), electrodes)
    coarse = measure.row(trace_coarse(_start_rows(run, positions)), electrodes)
    return tuple(gridcheck.gci(f, c, **_safety_of(safety)) for f, c in zip(fine, coarse))


def _safety_of(safety):
    return {} if safety is None else {"safety": safety}


def _start_rows(run, positions):
    """The start states of the rays at ``positions``, numbered 0, 1, ... (as :func:`subset`)."""
    rows = run.starts[positions]
    out = np.zeros(len(rows), dtype=START_DTYPE)
    for name in START_DTYPE.names:
        out[name] = rows[name]
    out["ray"] = np.arange(len(rows))
    return out


LENS_FIGURES = ("f_image_m", "f_object_m", "focus_image_z_m", "focus_object_z_m", "principal_image_z_m",
                "principal_object_z_m", "cs_m", "cc_m", "image_z_m", "magnification", "image_cs_m", "image_cc_m")
"""The lens properties (:class:`tracer.optics.LensProperties`) that get grid errors."""


@dataclass(frozen=True)
class LensBars:
    """The grid errors of lens properties.

    Attributes
    ----------
    errors : dict of str to tracer.gridcheck.GridError
        By property name (:data:`LENS_FIGURES`).
    cells_m : tuple of float
        The cells of the grids.
    warnings : tuple of str
        From :func:`lens_warnings`.
    """

    errors: dict
    cells_m: tuple
    warnings: tuple


_LENS_SIZE = {"cs_m": "cs_m", "cc_m": "cc_m", "image_cs_m": "image_cs_m", "image_cc_m": "image_cc_m",
              "magnification": "magnification"}
"""The size a lens property's grid error is weighed against: itself for aberrations and the
magnification; the image-side focal length for focal lengths and positions along the axis."""


def lens_warnings(props, errors, cell_m, fraction):
    """The warning lines of lens properties' grid errors (as :func:`warnings` for a beam).

    Parameters
    ----------
    props : tracer.optics.LensProperties
    errors : dict of str to tracer.gridcheck.GridError
        From :func:`optics_bars`.
    cell_m, fraction : float
        The config's cell and ``warn_fraction``.

    Returns
    -------
    tuple of str
    """
    out = []
    for name, grid in errors.items():
        size = abs(getattr(props, _LENS_SIZE.get(name, "f_image_m")))
        why = advice(grid, size, gridcheck.ROUND_OFF * size, cell_m, fraction)
        if why:
            out.append(f"{name} = {getattr(props, name):.6g} ± {grid.error:.2g} (grid): {why}")
    return tuple(out)


def optics_bars(props, others, third_coarser=True, safety=None):
    """Grid errors of lens properties (:class:`tracer.optics.LensProperties`).

    Parameters
    ----------
    props : LensProperties
        On the config's cell.
    others : sequence of LensProperties or None
        On 2h and, when asked, the third grid (None where the lens could not be computed).

    Returns
    -------
    dict of str to tracer.gridcheck.GridError
        For each of :data:`LENS_FIGURES` that is finite on the config's cell.
    """
    kw = _safety_of(safety)
    out = {}
    for name in LENS_FIGURES:
        value = getattr(props, name)
        if not math.isfinite(value):
            continue
        values = [value] + [getattr(o, name) if o is not None else math.nan for o in others]
        out[name] = (gridcheck.two_grids(*values, **kw) if len(values) == 2
                     else gridcheck.three_grids(*values, third_coarser=third_coarser, **kw))
    return out
