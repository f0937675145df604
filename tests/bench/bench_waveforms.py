"""Benchmark of voltages in time (run as a script: python tests/bench/bench_waveforms.py [TREE]).

1. All-static runs as fast as before: 1000 protons through the tests' three-tube lens (0.25 mm
   grid) traced by this tree and, when a second source tree TREE is given (e.g. a checkout of the
   revision before voltages in time), by that tree, each in its own process, alternating, the
   best of REPEATS kept; prints the ratio (goal: within the machine's noise of 1).
2. The cost of a waveform: the same rays with the lens electrode's voltage carrying a small 1 MHz
   sinusoid (one group map), against the static run in this process: time and field
   evaluations per ray (goal: at most one more map sum per stage per group).
3. A quadrupole ion trap (the tests' trap) holding an ion for 1000 RF periods (goal: seconds).
"""

import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[2]
REPEATS = 5
RAYS = 1000

STATIC = """
import sys, time
sys.path.insert(0, {tests!r})
from test_trace import three_tube
from tracer.beam import trace
field, setup = three_tube(count={rays}, cell=0.25)
trace(field, setup.beams[0])
t0 = time.perf_counter()
run = trace(field, setup.beams[0])
print(time.perf_counter() - t0, run.records["evaluations"].sum())
"""


def static_seconds(tree):
    """One static trace of the lens in a fresh process running ``tree``'s tracer (after a
    warm-up trace): (seconds, field evaluations)."""
    env = dict(os.environ, PYTHONPATH=str(tree))
    code = STATIC.format(tests=str(Path(tree) / "tests"), rays=RAYS)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         check=True).stdout.split()
    return float(out[0]), int(out[1])


def main():
    sys.path.insert(0, str(HERE / "tests"))
    import numpy as np

    from test_trace import three_tube
    from test_trace_time import RF_HZ, trap_run
    from tracer.beam import trace
    from tracer.config import loads
    from tracer.fieldmap import solve_basis
    from tracer.groups import group_maps
    from tracer.waveforms import Sinusoid, Waveform

    reference = sys.argv[1] if len(sys.argv) > 1 else None
    here, there = [], []
    for _ in range(REPEATS):
        here.append(static_seconds(HERE))
        if reference:
            there.append(static_seconds(reference))
    best = min(here)
    print(f"1. static lens, {RAYS} protons: this tree {best[0]:.3f} s ({best[1]} field evaluations)")
    if reference:
        ref = min(there)
        print(f"   {reference}: {ref[0]:.3f} s ({ref[1]} field evaluations); "
              f"ratio this / reference = {best[0] / ref[0]:.3f}")

    field, setup = three_tube(count=RAYS, cell=0.25)
    from tracer.fieldmap import basis_maps
    from tracer.geometry import shape_table
    from tracer.grid import Grid
    from tracer.solver import solve_unit_maps

    grid = Grid.from_domain(setup.domain)
    maps = basis_maps(setup, solve_unit_maps(grid, shape_table(setup.electrodes, setup.domain)))
    lens = dict(zip(maps.names, maps.voltages))["lens"]
    rf = Waveform(dc_V=lens, sinusoids=(Sinusoid(0.01 * lens, 1e6),))
    grouped = group_maps(maps, {"lens": rf})
    beam = setup.beams[0]
    times = {}
    for name, f in (("static", field), ("one waveform", grouped)):
        trace(f, beam)
        best = None
        for _ in range(REPEATS):
            t0 = time.perf_counter()
            run = trace(f, beam)
            dt = time.perf_counter() - t0
            best = dt if best is None else min(best, dt)
        steps = run.records["steps"].sum()
        times[name] = best
        print(f"2. {name}: {best:.3f} s, {steps / RAYS:.0f} steps and "
              f"{run.records['evaluations'].sum() / steps:.2f} evaluations a step per ray")
    print(f"   ratio one waveform / static = {times['one waveform'] / times['static']:.2f}")

    from test_trace_time import trap_toml

    tsetup = loads(trap_toml())
    tmaps = solve_basis(tsetup, rtol=1e-12)
    z = np.linspace(-1e-3, 1e-3, 81)
    phi = tmaps.combine({"ring": 1.0, "cap_a": 0.0, "cap_b": 0.0}).potential(z, 0 * z)
    kappa = 2.0 * np.polynomial.polynomial.polyfit(z * z, phi, 3)[1]
    trap_run((tsetup, tmaps, kappa), 0.6, 10)
    t0 = time.perf_counter()
    run, _ = trap_run((tsetup, tmaps, kappa), 0.6, 1000)
    print(f"3. trap, q_z = 0.6, 1000 RF periods ({1000 / RF_HZ * 1e3:g} ms of flight): "
          f"{time.perf_counter() - t0:.2f} s, {run.records['steps'][0]} steps, "
          f"status {run.records['status'][0]}")


if __name__ == "__main__":
    main()
