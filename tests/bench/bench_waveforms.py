"""Benchmark of voltages in time (run as a script:
python tests/bench/bench_waveforms.py [--cpu] [TREE]).

1. All-static runs as fast as before: 1000 protons through the tests' three-tube lens (0.25 mm
   grid) traced by this tree and, when a second source tree TREE is given (e.g. a checkout of the
   revision before voltages in time), by that tree, each in its own process started in its own
   tree (so that it imports that tree's tracer), alternating, the best of REPEATS kept; prints the
   ratio (goal: within the machine's noise of 1).
2. The cost of a waveform: the same rays with the lens electrode's voltage carrying a small 1 MHz
   sinusoid (one group map) and with a pulse that never switches in the traced time (a group with
   no cosine), against the static run in this process, the three taking turns: time and field
   evaluations per ray step. The goal, at most one more map evaluation per stage per group, as a
   figure of the same run, two ways: the cost of one static field evaluation per lane alone (a
   microbenchmark of the kernel's ``stepper.lane_rate``, force and potential from a cell's
   polynomial, in a loop over the lanes of a workspace allocated where it runs, as the kernel's
   is: SIMD), and its share of a static step (the static step's time over its field
   evaluations); each times the field evaluations a step (stages and rates in the cell ahead),
   against each group's time a step beyond the static run's. The ratio should be at most 1.
3. A quadrupole ion trap (the tests' trap) holding an ion for 1000 RF periods (goal: seconds).

``--cpu`` times CPU seconds (time.process_time) on one numba thread instead of wall-clock
seconds on numba's threads: on a machine shared with other work the wall clock follows the
others' load, the CPU time of one thread far less.

The rows' times depend on where the allocator puts the lane loop's arrays (measured: the same
pulse row from 0.38 to 0.56 us a step after other allocations in between), which the best of the
repeats leaves out as far as it can.

Every timed trace starts after ``gc.collect()``: a collection of the interpreter's oldest
generation (tens of milliseconds with numba loaded) otherwise falls into whichever row's trace
reaches the collector's threshold, the same row every round (measured: the row after the
sinusoid group's, about 0.1 us a step slower).
"""

import gc
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parents[2]
REPEATS = 8
RAYS = 1000
EVALUATIONS = 200_000

STATIC = """
import gc, sys, time
sys.path.insert(0, {tests!r})
import tracer
from test_trace import three_tube
from tracer.beam import trace
field, setup = three_tube(count={rays}, cell=0.25)
trace(field, setup.beams[0])
gc.collect()
t0 = time.{clock}()
run = trace(field, setup.beams[0])
print(tracer.__file__, time.{clock}() - t0, run.records["evaluations"].sum())
"""


def clock(cpu):
    """The clock's name in the time module: CPU seconds of this process, or the wall clock."""
    return "process_time" if cpu else "perf_counter"


def static_seconds(tree, cpu=False):
    """One static trace of the lens in a fresh process running ``tree``'s tracer (after a
    warm-up trace), on one numba thread timed by CPU seconds when ``cpu``: (seconds, field
    evaluations)."""
    env = dict(os.environ, PYTHONPATH=str(tree))
    if cpu:
        env["NUMBA_NUM_THREADS"] = "1"
    code = STATIC.format(tests=str(Path(tree) / "tests"), rays=RAYS, clock=clock(cpu))
    # in the tree's own folder: `python -c` puts the working folder first on sys.path
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         check=True, cwd=tree).stdout.split()
    if not Path(out[-3]).resolve().is_relative_to(Path(tree).resolve()):
        raise RuntimeError(f"the process for {tree} imported {out[-3]}")
    return float(out[-2]), int(out[-1])


def evaluation_ns(field, now):
    """Nanoseconds of one static field evaluation per lane (the kernel's ``stepper.lane_rate``)
    at points moving over a cell of the map ``field`` (the best of REPEATS loops of EVALUATIONS
    rounds over the lanes)."""
    from tracer.beam import symmetry_code
    from tracer.jit import njit
    from tracer.fieldmap import patch_coefficients
    from tracer.motion.bundles import LANES, W_BPATCH, W_PATCH, W_ROWS, W_V1, W_Y1, nodes_of
    from tracer.motion.stepper import lane_rate, put_patch

    @njit(error_model="numpy")
    def rounds(herm, nodes, sym, mass, charge, i, j, count):
        w = np.zeros((W_ROWS, LANES))      # allocated here: its shape known, as in the kernel
        a = patch_coefficients(herm, i, j, nodes.hz, nodes.hr, sym != 1)
        for l in range(LANES):
            put_patch(w, l, W_PATCH, a, nodes.z0 + i * nodes.hz, nodes.r0 + j * nodes.hr)
        for n in range(count):
            f = (n % 64) / 64.0         # every input moves: nothing to hoist out of the rounds
            for l in range(LANES):
                g = (l + 0.5) / LANES
                w[W_Y1, l] = nodes.r0 + (j + 0.9 * g + 0.1 * f) * nodes.hr
                w[W_Y1 + 1, l] = 0.1 * f * nodes.hr
                w[W_Y1 + 2, l] = nodes.z0 + (i + 0.9 * f + 0.1 * g) * nodes.hz
                w[W_Y1 + 5, l] = 1e-20 * (1.0 + f)
                lane_rate(w, l, nodes, sym, mass, charge, W_PATCH, W_V1, None, W_BPATCH)
        return w

    nodes = nodes_of(field.grid)
    sym = symmetry_code(field.grid)
    i, j = nodes.nz // 2, 1
    rounds(field.hermite, nodes, sym, 1.67e-27, 1.6e-19, i, j, 10)
    best = float("inf")
    for _ in range(REPEATS):
        t0 = now()
        rounds(field.hermite, nodes, sym, 1.67e-27, 1.6e-19, i, j, EVALUATIONS)
        best = min(best, now() - t0)
    return best / (EVALUATIONS * LANES) * 1e9


def main():
    sys.path.insert(0, str(HERE / "tests"))
    import numba

    from test_trace import three_tube
    from test_trace_time import RF_HZ, trap_run
    from tracer.beam import trace
    from tracer.config import loads
    from tracer.fieldmap import basis_maps, solve_basis
    from tracer.geometry import shape_table
    from tracer.grid import Grid
    from tracer.groups import group_maps
    from tracer.solver import solve_unit_maps
    from tracer.waveforms import Pulse, Sinusoid, Waveform

    args = sys.argv[1:]
    cpu = "--cpu" in args
    args = [a for a in args if a != "--cpu"]
    reference = args[0] if args else None
    if cpu:
        numba.set_num_threads(1)
    now = getattr(time, clock(cpu))
    unit = "CPU s on 1 thread" if cpu else f"s wall clock on {numba.get_num_threads()} thread(s)"
    print(f"times in {unit}, best of {REPEATS}")
    here, there = [], []
    for _ in range(REPEATS):
        here.append(static_seconds(HERE, cpu))
        if reference:
            there.append(static_seconds(reference, cpu))
    best = min(here)
    print(f"1. static lens, {RAYS} protons: this tree {best[0]:.3f} s ({best[1]} field evaluations)")
    if reference:
        ref = min(there)
        print(f"   {reference}: {ref[0]:.3f} s ({ref[1]} field evaluations); "
              f"ratio this / reference = {best[0] / ref[0]:.3f}")

    field, setup = three_tube(count=RAYS, cell=0.25)
    grid = Grid.from_domain(setup.domain)
    maps = basis_maps(setup, solve_unit_maps(grid, shape_table(setup.electrodes, setup.domain)))
    lens = dict(zip(maps.names, maps.voltages))["lens"]
    rf = Waveform(dc_V=lens, sinusoids=(Sinusoid(0.01 * lens, 1e6),))
    held = Waveform(dc_V=lens, pulses=(Pulse(0.01 * lens, 1.0),))      # switches at 1 s: never here
    rows = [("static", field), ("one sinusoid group", group_maps(maps, {"lens": rf})),
            ("one pulse group", group_maps(maps, {"lens": held}))]
    beam = setup.beams[0]
    runs = [trace(f, beam) for _, f in rows]
    best_s = [float("inf")] * len(rows)
    for _ in range(REPEATS):              # the rows in turn: a change of the machine's load falls on all
        for k, (_, f) in enumerate(rows):
            gc.collect()
            t0 = now()
            trace(f, beam)
            best_s[k] = min(best_s[k], now() - t0)
    static_step = best_s[0] / runs[0].records["steps"].sum()
    for (name, _), t, run in zip(rows, best_s, runs):
        steps = run.records["steps"].sum()
        print(f"2. {name}: {t:.3f} s ({t / steps * 1e6:.3f} us a ray step, {t / best_s[0]:.2f}x static), "
              f"{steps / RAYS:.0f} steps and {run.records['evaluations'].sum() / steps:.2f} evaluations a "
              "step per ray")
    ns = evaluation_ns(field, now)
    per_step = runs[0].records["evaluations"].sum() / runs[0].records["steps"].sum()
    strict = ns * per_step * 1e-3
    share = static_step * 1e6 / per_step
    print(f"   one more map evaluation at each of the {per_step:.2f} evaluations a step: "
          f"{ns:.1f} ns a lane for the evaluation alone (stepper.lane_rate, SIMD), "
          f"{share * 1e3:.1f} ns as its share of a static step ({static_step * 1e6:.3f} us / "
          f"{per_step:.2f})")
    for (name, _), t, run in zip(rows[1:], best_s[1:], runs[1:]):
        extra = t / run.records["steps"].sum() * 1e6 - static_step * 1e6
        print(f"   {name}: {extra:.3f} us a step more than static = {extra / strict:.2f} "
              f"evaluations alone, {extra / (share * per_step):.2f} static-step shares per "
              "evaluation (goal: at most 1)")

    from test_trace_time import trap_toml

    tsetup = loads(trap_toml())
    tmaps = solve_basis(tsetup, rtol=1e-12)
    z = np.linspace(-1e-3, 1e-3, 81)
    phi = tmaps.combine({"ring": 1.0, "cap_a": 0.0, "cap_b": 0.0}).potential(z, 0 * z)
    kappa = 2.0 * np.polynomial.polynomial.polyfit(z * z, phi, 3)[1]
    trap_run((tsetup, tmaps, kappa), 0.6, 10)
    gc.collect()
    t0 = now()
    run, _ = trap_run((tsetup, tmaps, kappa), 0.6, 1000)
    print(f"3. trap, q_z = 0.6, 1000 RF periods ({1000 / RF_HZ * 1e3:g} ms of flight): "
          f"{now() - t0:.2f} s, {run.records['steps'][0]} steps, "
          f"status {run.records['status'][0]}")


if __name__ == "__main__":
    main()
