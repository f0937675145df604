"""Benchmark of the magnetic force (run as a script: python tests/bench/bench_magnetic.py [TREE]).

1. Tracing: 1000 protons through the tests' solved three-tube lens (0.25 mm grid) with
   tracer.trace, without a magnetic field, with a coil around the lens (its unit field sampled onto
   the map's grid), and with a uniform field in a box: each timed as the best of a few runs in this
   one process, the three taking turns, on numba's threads and on one thread, and the ratios
   printed (the aim: a run with a coil no slower than 1.5x the same run without; on a machine
   shared with other work the one-thread ratio is the steadier). The first run of each also shows
   the kernel's compile time when numba's cache is cold.
2. Sampling a coil's unit field: the bundled configs/solenoid_focus.toml on a 0.5 mm cell (its
   coil onto 401 x 41 nodes), best of a few, on numba's threads and on one thread; when a second
   source tree TREE is given (e.g. a checkout of the revision before the analytic derivative), the
   same sampling by that tree in its own process, alternating with this tree's, and the ratio.
   Also the unit field read back from the maps cache against sampling it.
"""

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[2]
REPEATS = 5

SAMPLE = """
import dataclasses, time
import tracer
from tracer.grid import Grid
from tracer.magnetics.units import MagneticUnits
setup = tracer.load({config!r})
grid = Grid.from_domain(dataclasses.replace(setup.domain, cell_m=0.0005))
coils = setup.magnetic.coils
MagneticUnits.build(Grid.from_domain(dataclasses.replace(setup.domain, cell_m=0.01)), coils)  # compile
t0 = time.perf_counter()
MagneticUnits.build(grid, coils)
print(time.perf_counter() - t0)
"""


def tree_seconds(tree):
    """Seconds to sample the bundled solenoid's coil at 0.5 mm in a fresh process running ``tree``'s
    tracer (after a compile on a coarse grid)."""
    env = dict(os.environ, PYTHONPATH=str(tree))
    code = SAMPLE.format(config=str(HERE / "configs" / "solenoid_focus.toml"))
    # in the tree's own folder: `python -c` puts the working folder first on sys.path
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         check=True, cwd=tree).stdout.split()
    return float(out[-1])


def best(call):
    times = []
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        call()
        times.append(time.perf_counter() - t0)
    return min(times)


def sampling(reference):
    import dataclasses

    import numba

    import tracer
    from tracer.grid import Grid
    from tracer.magnetics import units

    setup = tracer.load(HERE / "configs" / "solenoid_focus.toml")
    grid = Grid.from_domain(dataclasses.replace(setup.domain, cell_m=0.0005))
    coil = setup.magnetic.coils[0]
    units.MagneticUnits.build(Grid.from_domain(dataclasses.replace(setup.domain, cell_m=0.01)), (coil,))

    def fresh():
        units._SAMPLED.clear()
        units.coil_unit(grid, coil)

    threads = numba.get_num_threads()
    many = best(fresh)
    numba.set_num_threads(1)
    one = best(fresh)
    numba.set_num_threads(threads)
    print(f"sampling the solenoid's coil on {grid.nz} x {grid.nr} nodes (0.5 mm): {many:.3f} s on "
          f"{threads} thread(s), {one:.3f} s on 1 ({one / many:.2f}x)")
    with tempfile.TemporaryDirectory() as folder:
        units._SAMPLED.clear()
        units.coil_unit(grid, coil, folder)

        def cached():
            units._SAMPLED.clear()
            units.coil_unit(grid, coil, folder)

        read = best(cached)
    print(f"  read back from the maps cache (checked): {read:.3f} s ({read / many:.3f}x sampling)")
    if reference:
        here, there = [], []
        for _ in range(REPEATS):
            there.append(tree_seconds(reference))
            here.append(tree_seconds(HERE))
        print(f"  this tree {min(here):.3f} s, {reference} {min(there):.3f} s (best of {REPEATS}, each "
              f"in its own process): {min(there) / min(here):.1f}x faster")


def tracing():
    sys.path.insert(0, str(HERE / "tests"))
    from test_trace import three_tube  # the lens of the tests, finer grid

    import numba

    from tracer.beam import trace
    from tracer.magnetics.coil import Coil
    from tracer.magnetics.uniform import Box, UniformField
    from tracer.magnetics.units import MagneticUnits

    field, setup = three_tube(count=1000, cell=0.25)
    beam, planes = setup.beams[0], setup.planes
    t0 = time.perf_counter()
    units = MagneticUnits.build(field.grid, coils=(Coil("coil", (0.025, 0.035), (0.010, 0.012),
                                                        1000, 1.0),))
    coil = units.combine()
    print(f"coil unit field on {field.grid.nz} x {field.grid.nr} nodes: "
          f"{time.perf_counter() - t0:.2f} s; peak |B| on the axis "
          f"{abs(coil.on_axis(field.grid.z)).max():.3f} T")
    box = UniformField("box", (0.0, 0.0, 0.05), Box(z_m=(0.02, 0.04)))
    rows = [("electric only", None), ("with the coil", coil), ("with a uniform B in a box", box)]
    first, runs = [], []
    for _, magnetic in rows:
        t0 = time.perf_counter()
        runs.append(trace(field, beam, planes, magnetic=magnetic))
        first.append(time.perf_counter() - t0)
    threads = numba.get_num_threads()
    for count in (threads, 1):
        numba.set_num_threads(count)
        best_s = [float("inf")] * len(rows)
        for _ in range(REPEATS):          # the rows in turn, so that a change of the machine's load
            for k, (_, magnetic) in enumerate(rows):   # falls on all of them alike
                t0 = time.perf_counter()
                trace(field, beam, planes, magnetic=magnetic)
                best_s[k] = min(best_s[k], time.perf_counter() - t0)
        print(f"on {count} thread(s):")
        for (name, _), t1, t, run in zip(rows, first, best_s, runs):
            print(f"  {name:28s} first run {t1:7.2f} s, best of {REPEATS} {t:.3f} s "
                  f"({t / best_s[0]:.2f}x electric only), {run.records['steps'].mean():.0f} steps/ray, "
                  f"ledger worst {run.ledger.worst_eV:.2e} eV")
    numba.set_num_threads(threads)


def main():
    tracing()
    sampling(sys.argv[1] if len(sys.argv) > 1 else None)


if __name__ == "__main__":
    main()
