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

:func:`rays_beside` shortens the first run itself on a machine with two cores: while the run's
process solves the maps (compiling the solver's kernels), a second process compiles the ray kernel
the run will use (:func:`compile_rays`), and the trace then loads it from numba's cache.

:func:`typed_size` counts, without compiling, how much code numba types to compile a kernel: the
measure tests/test_warmup.py holds the ray kernel to, so that a feature added to it does not
lengthen the first run without saying so.
"""

from __future__ import annotations

import ast
import contextlib
import dataclasses
import inspect
import os
import subprocess
import sys
import textwrap
import time
import warnings
from pathlib import Path

#: A first run's compile on two cores (a cold tracer demo took 41.3 s and 39.2 s, 60.0 s and 59.1 s
#: in one process, in tests/bench/bench_coldstart.py on an idle machine).
FIRST_COMPILE = "under a minute on two cores"


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


#: Set this environment variable to "0" to compile everything in the run's own process.
BESIDE_ENV = "TRACER_COMPILE_BESIDE"


def _parts(kernel) -> tuple[int, dict]:
    """The syntax-tree nodes of the statements of ``kernel``'s Python function (not its signature
    or decorators), and the numba kernels it calls by name with how many call sites each has."""
    from numba.core.dispatcher import Dispatcher

    tree = ast.parse(textwrap.dedent(inspect.getsource(kernel.py_func)))
    nodes = [node for statement in tree.body[0].body for node in ast.walk(statement)]
    names = kernel.py_func.__globals__
    sites: dict = {}
    for node in nodes:
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            callee = names.get(node.func.id)
            if isinstance(callee, Dispatcher):
                sites[callee] = sites.get(callee, 0) + 1
    return len(nodes), sites


def _copied(kernel) -> bool:
    """Whether numba copies ``kernel``'s code into each caller before typing it."""
    return kernel.targetoptions.get("inline") == "always"


def typed_size(kernel) -> tuple[int, int]:
    """How much code numba types to compile ``kernel`` from an empty cache, counted without
    compiling: the kernels it compiles (``kernel`` and every kernel reached from it that numba does
    not copy into its caller) and the syntax-tree nodes of their bodies, a kernel copied in
    (``inline="always"``) counted at every call site.

    A measure of the first compile, the same on every Python version: typing is most of it (the
    ray kernel, ``trace_rays``: about 1.2 ms of compile a node:
    31 643 nodes and 36.6-41.4 s of CPU at d8c4c9d, one process). Branches numba prunes for
    an argument typed None (a static run's voltages in time, an electric-only run's magnet) are
    counted too.

    Returns
    -------
    (kernels, nodes) : tuple of int
    """
    parts: dict = {}      # each kernel's source read and parsed once
    own: dict = {}

    def part(k):
        if k not in parts:
            parts[k] = _parts(k)
        return parts[k]

    def size(k) -> int:
        if k not in own:
            nodes, calls = part(k)
            own[k] = nodes + sum(n * size(c) for c, n in calls.items() if _copied(c))
        return own[k]

    def compiled_from(k):
        for c in part(k)[1]:
            yield from compiled_from(c) if _copied(c) else (c,)

    seen, todo = {kernel}, [kernel]
    while todo:
        for c in compiled_from(todo.pop()):
            if c not in seen:
                seen.add(c)
                todo.append(c)
    return len(seen), sum(size(k) for k in seen)


def _spare_cores() -> int:
    """The cores this process may run on, less those busy (the last minute's load average, which
    counts this process too); 0 when none is free for a second process."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:       # no affinity on this platform
        cores = os.cpu_count() or 1
    try:
        busy = os.getloadavg()[0]
    except (AttributeError, OSError):
        busy = 1.0
    return max(0, int(cores - max(busy, 1.0) + 0.5))


def zero_maps(setup):
    """The basis maps of a setup's geometry with every unit map zero and no shape rasterized:
    what a solve returns, in types and shapes (:class:`tracer.fieldmap.BasisMaps`), made without
    any kernel, so that a process compiling the ray kernel beside a solve starts on it at once
    instead of compiling the raster's and the Hermite data's kernels a second time."""
    import numpy as np

    from tracer.fieldmap import BasisMaps
    from tracer.geometry import Raster, shape_table
    from tracer.grid import Grid

    grid = Grid.from_domain(setup.domain)
    nz, nr, n = grid.nz, grid.nr, len(setup.electrodes)
    free = Raster(owner=np.full((nz, nr), -1), arm=np.ones((nz, nr, 4)),
                  arm_owner=np.full((nz, nr, 4), -1), cell=np.full((nz - 1, nr - 1), -1))
    names = tuple(e.name for e in setup.electrodes)
    volts = setup.voltages()
    return BasisMaps(grid, shape_table(setup.electrodes, setup.domain), free, names,
                     tuple(float(volts[k]) for k in names), np.zeros((n, nz, nr)),
                     np.zeros((n, 4, nz, nr)), tuple(np.zeros(1) for _ in names),
                     setup.geometry_hash())


def compile_rays(config) -> None:
    """Compile the ray kernel a config's run traces with (its symmetry, voltages in time, magnetic
    sources) into numba's cache, by tracing a few rays of its first beam through zero maps on
    twice its cell: no solve, so it can run beside one."""
    from tracer.config import load
    from tracer.pipeline import trace_beam, traced_field

    setup = _small(load(config))
    if setup.beams:
        trace_beam(traced_field(setup, zero_maps(setup)), setup.beams[0], setup)


def second_process(statement, *args) -> subprocess.Popen:
    """Start ``python -c statement *args`` beside this process, with this tracer importable (its
    folder first on PYTHONPATH), no terminal input or output, and a session of its own (a Ctrl-C at
    the terminal reaches this process only, which stops the child itself)."""
    root = str(Path(__file__).resolve().parents[1])
    path = os.pathsep.join(p for p in (root, os.environ.get("PYTHONPATH", "")) if p)
    return subprocess.Popen([sys.executable, "-c", statement, *args],
                            env=dict(os.environ, PYTHONPATH=path), stdin=subprocess.DEVNULL,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)


@contextlib.contextmanager
def rays_beside(config):
    """While the block runs, compile the ray kernel of ``config`` in a second process.

    Only when the kernels are still to compile (:func:`pending`), a core beside this process's is
    free (two cores or more, not all busy) and ``TRACER_COMPILE_BESIDE`` is not "0"; otherwise the
    block just runs (on a busy machine a second process would only take turns with the first).
    Meant around a run's solve: the solve compiles the solver's kernels on one core while the
    second process (:func:`second_process`) compiles the ray kernel on the other. The end of the
    block waits for the second process (a failed one is only time lost: the trace then compiles
    its kernel itself); a block that raises (Ctrl-C included) stops it.
    """
    if os.environ.get(BESIDE_ENV, "1") == "0" or _spare_cores() < 1 or not pending():
        yield
        return
    child = second_process("import sys; from tracer.warmup import compile_rays; "
                           "compile_rays(sys.argv[1])", str(config))
    try:
        yield
    except BaseException:
        child.kill()
        child.wait()
        raise
    child.wait()


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
