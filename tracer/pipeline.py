"""The steps from a setup to results: ``tracer.solve`` and ``tracer.run``.

Each step is a function of the previous step's output; the command line and the
Python API call the same functions.
"""

from __future__ import annotations

import dataclasses
import os
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from tracer.display import Shown, rays_png, run_facts

if TYPE_CHECKING:
    from tracer.fieldmap import BasisMaps
    from tracer.schema import Setup

DEFAULT_RTOL = 1e-10


def examples_folder() -> Path:
    """The bundled example configs: ``tracer/examples`` in an installed wheel (built from the
    top-level ``configs/``, their one copy), else ``configs/`` beside the package in a clone."""
    package = Path(__file__).resolve().parent
    installed = package / "examples"
    return installed if installed.is_dir() else package.parent / "configs"


CONFIGS = examples_folder()
DEMO_CONFIG = CONFIGS / "einzel_argon.toml"


def default_cache_dir() -> Path:
    """The folder of cached basis maps: ``$TRACER_CACHE``, else ``$XDG_CACHE_HOME/tracer``."""
    if os.environ.get("TRACER_CACHE"):
        return Path(os.environ["TRACER_CACHE"])
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "tracer"


def demo_folder(out=None):
    """The folder for ``tracer demo``: ``out`` when it is new or empty (None when it holds files),
    else a fresh ``tracer-demo``, ``tracer-demo-2``, ... in the working directory."""
    if out:
        out = Path(out)
        return None if out.exists() and any(out.iterdir()) else out
    out, k = Path("tracer-demo"), 1
    while out.exists():
        k += 1
        out = Path(f"tracer-demo-{k}")
    return out


def with_rays(setup, rays=None):
    """The setup with every drawn beam cut to at most ``rays`` rays, for a quick look (beams of a
    rays file are kept whole); the setup itself when ``rays`` is None."""
    if rays is None:
        return setup
    beams = tuple(b if b.rays_csv is not None else dataclasses.replace(b, count=min(b.count, rays))
                  for b in setup.beams)
    return dataclasses.replace(setup, beams=beams)


def with_grids(setup, grids=None):
    """The setup with ``[grid_error] grids`` set to ``grids`` (1 none, 2 or 3 grids); the setup
    itself when ``grids`` is None."""
    if grids is None:
        return setup
    return dataclasses.replace(setup, grid_error=dataclasses.replace(setup.grid_error, grids=grids))


def solve(setup: Setup, *, cache_dir: str | os.PathLike | None = None, rtol: float = DEFAULT_RTOL,
          progress: Callable[..., object] | None = None) -> BasisMaps:
    """Solve the basis maps of a setup: one unit map per electrode.

    Parameters
    ----------
    setup : tracer.config.Setup
    cache_dir : str or os.PathLike, optional
        Folder of cached maps, keyed by a hash of the geometry and grid (not the voltages).  A
        second solve of the same geometry loads the maps instead of solving.  None: no cache.
    rtol : float
        Relative residual the solver converges to.
    progress : callable, optional
        Called by the solver with its progress.

    Returns
    -------
    tracer.fieldmap.BasisMaps
    """
    if cache_dir is None:
        from tracer.fieldmap import solve_basis

        return solve_basis(setup, rtol=rtol, progress=progress)
    from tracer.cache import cached_solve

    return cached_solve(setup, cache_dir, rtol=rtol, progress=progress)


def write_solve_outputs(setup, maps, out) -> list[Path]:
    """Write the basis maps (``maps.h5``) and the equipotential picture into a folder."""
    from tracer.plot import plot_field
    from tracer.store.maps_file import write_maps

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    field = maps.combine()
    return [write_maps(out / "maps.h5", maps),
            plot_field(field, out / "equipotentials.png", title=setup.title)]


@dataclass(frozen=True, repr=False)
class RunResult(Shown):
    """Everything a config asks for: the maps, the combined field and each beam's run.

    Attributes
    ----------
    setup : tracer.config.Setup
    maps : tracer.fieldmap.BasisMaps
    field : tracer.fieldmap.PotentialMap
        The potential at the setup's voltages (at t = 0 when they change in time).
    beams : dict of str to tracer.beam.BeamRun
        By beam name, in the order of the config.
    errors : tracer.errorbars.ErrorBars or None
        The grid and Monte Carlo error bars of the figures (None with ``[grid_error] grids = 1``).
    grouped : tracer.groups.GroupedMaps or None
        With voltages that change in time, the maps the beams were traced through (``field`` is
        then the potential at t = 0); None when every voltage is constant.
    """

    setup: object
    maps: object
    field: object
    beams: dict
    errors: object = None
    grouped: object = None

    def _facts(self):
        return run_facts(self.setup.title, self.field, self.beams.values()) | {
            "error bars": "estimated" if self.errors else "none"}

    def _figure_png(self):
        return rays_png(self.field, list(self.beams.values()), title=self.setup.title)

    def summary(self) -> dict:
        """Each beam's :meth:`tracer.beam.BeamRun.summary`, by beam name, with its error bars
        (:meth:`tracer.errorbars.ErrorBars.record`) under ``"uncertainty"`` when they were estimated."""
        return {name: run.summary() | ({"uncertainty": self.errors.record(name)} if self.errors else {})
                for name, run in self.beams.items()}


def traced_field(setup, maps, voltages=None):
    """The field a setup's beams are traced through: the maps combined at the voltages, or, when
    electrode voltages change in time, grouped by waveform (:func:`tracer.groups.group_maps`).
    A voltage given for an electrode with a waveform replaces its DC part."""
    if not setup.in_time:
        return maps.combine(voltages)
    from tracer.groups import group_maps, with_voltages

    return group_maps(maps, with_voltages(setup.drives(), voltages))


def trace_beam(field, beam, setup, progress=None, starts=None, cache_dir=None):
    """Trace one beam of a setup with its ``[trace]`` options, planes and magnetic sources (the
    coils' unit fields read from or kept in the maps cache ``cache_dir`` when given); given
    ``starts`` (:data:`tracer.sources.START_DTYPE`), those rays instead of the beam's, keeping no
    paths."""
    from tracer.beam import trace
    from tracer.magnetics.units import traced_sources

    opts = setup.trace
    return trace(field, beam, planes=setup.planes, rtol=opts.rtol, max_time_s=opts.max_time_s,
                 keep_paths=opts.keep_paths if starts is None else 0,
                 ledger_threshold=opts.ledger_threshold, progress=progress, starts=starts,
                 time_zero_s=setup.time_zero_s,
                 magnetic=traced_sources(setup.magnetic, field.grid, cache_dir=cache_dir))


def run(setup: Setup, *, maps: BasisMaps | None = None, voltages: Mapping[str, float] | None = None,
        cache_dir: str | os.PathLike | None = None,
        progress: Callable[[str, int, int], object] | None = None) -> RunResult:
    """Solve (or reuse) the basis maps, combine them and trace every beam of the setup.

    Parameters
    ----------
    setup : tracer.config.Setup
    maps : tracer.fieldmap.BasisMaps, optional
        Maps solved before; otherwise :func:`solve` is called.
    voltages : mapping of str to float, optional
        Voltages that replace the setup's.
    cache_dir : str or os.PathLike, optional
        Passed to :func:`solve`; the coils' unit fields are cached there too.
    progress : callable, optional
        ``progress(stage, done, total)``: stage is "solve", a beam's name, or "<beam> on cell 2h"
        (and the third grid) for the error bars.

    Returns
    -------
    RunResult
        With the error bars of ``setup.grid_error`` (:mod:`tracer.errorbars`).
    """
    from tracer import errorbars, footprint

    def stage(name):
        return None if progress is None else (lambda done, total: progress(name, done, total))

    footprint.check(setup)
    if maps is None:
        maps = solve(setup, cache_dir=cache_dir, progress=stage("solve"))
    traced = traced_field(setup, maps, voltages)
    beams = {b.name: trace_beam(traced, b, setup, progress=stage(b.name), cache_dir=cache_dir)
             for b in setup.beams}
    errors = errorbars.estimate(
        setup, beams, field=lambda other: traced_field(other, solve(other, cache_dir=cache_dir), voltages),
        trace=lambda f, b, starts, p: trace_beam(f, b, setup, progress=p, starts=starts, cache_dir=cache_dir),
        progress=progress)
    field = traced.at(0.0) if setup.in_time else traced
    return RunResult(setup, maps, field, beams, errors, traced if setup.in_time else None)


def lens(setup, field, cache_dir=None):
    """The paraxial properties ``[optics]`` asks for, in ``field``.

    The energy reference is the one of the beams: ``energy_eV`` is the kinetic energy at
    ``[optics] start_z_mm`` on the axis, by default the first beam's start (the z_min end of the
    map when there is no beam); see :func:`tracer.optics.paraxial`. The setup's coils and axial
    fields enter as ``magnetic=`` (their field on the axis, sampled on ``field``'s grid as the
    rays see it; their unit fields read from or kept in the maps cache ``cache_dir`` when given);
    uniform fields are not round lenses and are left out.

    Raises
    ------
    tracer.optics.OpticsError
    """
    from tracer.magnetics.units import unit_fields
    from tracer.optics import paraxial

    spec = setup.optics
    start = spec.start_z_m if spec.start_z_m is not None else (
        setup.beams[0].start_z_m if setup.beams else None)
    mag = setup.magnetic
    magnetic = unit_fields(field.grid, mag.coils, mag.profiles, cache_dir).combine() if (
        mag.coils or mag.profiles) else None
    return paraxial(field, spec.species, spec.energy_eV, object_z_m=spec.object_z_m, start_z_m=start,
                    magnetic=magnetic)


def optics_error_bars(setup, props, *, cache_dir=None):
    """The grid errors of lens properties: the same paraxial computation on the maps of the other
    grids of ``setup.grid_error`` (:func:`tracer.errorbars.optics_bars`).

    Parameters
    ----------
    setup : tracer.schema.Setup
        With its ``[optics]`` table.
    props : tracer.optics.LensProperties
        The properties on the config's cell.
    cache_dir : str or os.PathLike, optional
        Passed to :func:`solve` and :func:`lens`.

    Returns
    -------
    tracer.errorbars.LensBars or None
        None with ``grids = 1`` or for a mirror.
    """
    from tracer import errorbars
    from tracer.optics import OpticsError

    factors = errorbars.cells(setup)
    if not factors or props.mirror:
        return None
    spec, others = setup.optics, []
    for factor in factors:
        field = solve(errorbars.with_cell(setup, factor), cache_dir=cache_dir).combine()
        try:
            others.append(lens(setup, field, cache_dir))
        except OpticsError:
            others.append(None)
    spec, h = setup.grid_error, setup.domain.cell_m
    errors = errorbars.optics_bars(props, others, third_coarser=spec.third == "coarse", safety=spec.safety)
    return errorbars.LensBars(errors, (h,) + tuple(h * f for f in factors),
                              errorbars.lens_warnings(props, errors, h, spec.warn_fraction))


RUN_FILES = "run-files.txt"
"""The manifest of a run's output files: which run wrote them, then their names."""


def write_run_outputs(result: RunResult, out) -> list[Path]:
    """Write ``result.h5``, ``landings.csv`` and the pictures of a run into a folder.

    The pictures after the first (:func:`tracer.plot.figure_jobs`) are drawn in a child process
    (:func:`beside`) while this one writes the files and the first picture; they are drawn into a
    staging folder with the files and moved into ``out`` with them, manifest (``run-files.txt``)
    last, only when everything has been written (:func:`tracer.store.atomic.staged_folder`): an
    interrupted write changes nothing, and the files of the previous run that this one does not
    write (the pictures of a plane no longer there) are removed."""
    from tracer import plot
    from tracer.beside import beside
    from tracer.store.atomic import staged_folder
    from tracer.store.landings_csv import write_landings_csv
    from tracer.store.result_file import write_result

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    setup = result.setup
    runs = list(result.beams.values())
    (first_name, first), *others = plot.figure_jobs(result.field, runs, title=setup.title,
                                                    grouped=result.grouped, magnetic=setup.magnetic)

    def draw_others():
        """The names of the pictures drawn (a picture with nothing to show is not drawn)."""
        return [name for name, draw in others if draw(staging / name) is not None]

    heading = f"tracer run of {setup.title!r} at {time.strftime('%Y-%m-%d %H:%M:%S %Z')}"
    with staged_folder(out, manifest=RUN_FILES, heading=heading) as staging:
        with beside(draw_others) as drawn:
            files = [write_result(staging / "result.h5", result.field, runs, setup=setup,
                                  summaries=result.summary()),
                     write_landings_csv(staging / "landings.csv", runs),
                     first(staging / first_name)]
    return [out / f.name for f in files if f is not None] + [out / name for name in drawn[0]] + [out / RUN_FILES]
