"""The first compile of the numba kernels: whether it is still to come, and doing it ahead.

tracer's field, solver and ray kernels are compiled by numba the first time they run and kept in
numba's cache (``__pycache__`` beside the modules, or ``$NUMBA_CACHE_DIR``); every later process
loads them in well under a second.  The first run on a fresh install therefore pays the compile
once (:data:`FIRST_COMPILE`, measured by ``tests/bench/bench_coldstart.py``), and
``tracer warmup`` pays it ahead, for an install script or a cluster image.

:func:`pending` tells whether the main kernels have no cached code yet (the command line then says
so on one line with the expected wait); :func:`warmup` compiles every kernel a run, a gun, a run
with voltages in time, a run with coils and the paraxial optics use, by running the bundled
examples small.
"""

from __future__ import annotations

import dataclasses
import time
import warnings

#: The first compile of every kernel on two cores, as measured by tests/bench/bench_coldstart.py.
FIRST_COMPILE = "about three minutes on two cores"


def _kernels():
    """The entry kernels whose compile dominates the first run (numba dispatchers)."""
    from tracer.fieldmap import hermite_data
    from tracer.geometry import _rasterize
    from tracer.motion.lanes import trace_lanes
    from tracer.motion.walls import exit_time

    return (trace_lanes, exit_time, hermite_data, _rasterize)


def _cached(kernel) -> bool:
    """Whether numba's cache holds compiled code of this kernel's current source."""
    try:
        return bool(kernel._cache._cache_file._load_index())
    except Exception:        # an unexpected numba layout: say nothing rather than guess
        return True


def pending() -> bool:
    """True when the main kernels have not been compiled into numba's cache yet."""
    return not all(_cached(k) for k in _kernels())


def notice() -> str | None:
    """The one line the command line prints before a compile (None when nothing is pending)."""
    if not pending():
        return None
    return (f"first run of this install: compiling the field and ray kernels, {FIRST_COMPILE} "
            "(once; 'tracer warmup' does it ahead)")


def _small(setup, rays=8):
    """The setup on twice its cell, with at most ``rays`` rays per beam and no grid error bars."""
    from tracer.errorbars import with_cell
    from tracer.pipeline import with_grids, with_rays

    return with_grids(with_rays(with_cell(setup, 2.0), rays), 1)


#: The parts of :func:`warmup`, in the order it runs them: each runs one bundled example small and
#: compiles the kernels it names.
PARTS = ("field", "gun", "time", "magnetic")


def warmup(echo=print, parts=PARTS) -> float:
    """Compile every kernel into numba's cache by running the bundled examples small.

    Runs the demo lens (``"field"``: solve, trace, paraxial optics), the Pierce gun (``"gun"``: two
    space-charge iterations), the delayed-extraction source (``"time"``: voltages in time) and the
    solenoid (``"magnetic"``: the ray kernel with a magnetic field, a kernel of its own), each on
    twice its cell with a few rays and no map cache, and writes nothing else.

    Parameters
    ----------
    echo : callable
        Called with one line per example and the total time.
    parts : sequence of str
        The examples to run, of :data:`PARTS` (all by default; each also compiles the solver and
        field kernels it needs).

    Returns
    -------
    float
        Wall time, seconds.
    """
    from tracer.config import load
    from tracer.guns import gun
    from tracer.optics import paraxial
    from tracer.pipeline import CONFIGS, DEMO_CONFIG, run, solve

    unknown = sorted(set(parts) - set(PARTS))
    if unknown:
        raise ValueError(f"warmup parts are {', '.join(PARTS)}, not {', '.join(unknown)}")
    t0 = time.perf_counter()
    if "field" in parts:
        demo = _small(load(DEMO_CONFIG))
        maps = solve(demo)
        run(demo, maps=maps)
        spec = demo.optics
        paraxial(maps.combine(), spec.species, spec.energy_eV, object_z_m=spec.object_z_m)
        echo(f"compiled the solver, field and ray kernels ({time.perf_counter() - t0:.0f} s)")
    if "gun" in parts:
        source = _small(load(CONFIGS / "pierce_gun.toml"))
        with warnings.catch_warnings():       # two iterations do not converge, nor need to
            warnings.simplefilter("ignore")
            gun(dataclasses.replace(source, gun=dataclasses.replace(source.gun, max_iterations=2)))
        echo(f"compiled the gun kernels ({time.perf_counter() - t0:.0f} s)")
    if "time" in parts:
        run(_small(load(CONFIGS / "tof_delayed_extraction.toml")))
        echo(f"compiled the kernels of voltages in time ({time.perf_counter() - t0:.0f} s)")
    if "magnetic" in parts:
        run(_small(load(CONFIGS / "solenoid_focus.toml")))
        echo(f"compiled the magnetic ray kernel ({time.perf_counter() - t0:.0f} s)")
    return time.perf_counter() - t0
