"""Benchmark of the field solver: multigrid unit maps against scipy's SuperLU, scaling and memory.

Run as a script: ``python tests/bench/bench_solve.py`` (add ``--quick`` for smaller grids).

1. At 1e6 nodes with three electrodes: ``solve_unit_maps`` (rasterizing every level, three unit
   maps to the default relative residual 1e-10) against SuperLU on the same five-point system
   (one factorization, three right-hand sides), in this run; prints the ratio (target >= 10).
2. Cost per node and unit map at 6e4, 2.5e5, 1e6 and 4e6 nodes (target: flat within 2x).
3. Peak memory of ``solve_unit_maps`` at 4e6 nodes, measured in a fresh subprocess (target < 400 MB).

The geometry is an illustrative three-tube lens of our own in a grounded can.
"""

import argparse
import json
import math
import subprocess
import sys
import time
import tracemalloc

import numba
import numpy as np
import scipy.sparse.linalg as spla

from tracer.config import Domain, Electrode, Rect
from tracer.geometry import rasterize, shape_table
from tracer.grid import Grid
from tracer.solver import assemble, solve_unit_maps
from tracer.solver.relax import boundary_rhs
from tracer.solver.stencil import operator

MM = 1e-3
LENGTH, RADIUS = 160 * MM, 24 * MM


def lens(nodes):
    """(grid, table) of the three-tube lens with about ``nodes`` grid nodes."""
    cell = math.sqrt(LENGTH * RADIUS / nodes)
    domain = Domain("axial", (0.0, LENGTH), (0.0, RADIUS), cell, ("open", "open", "axis", "ground"))
    tube = lambda z0, z1: (Rect((z0 * MM, z1 * MM), (6.0 * MM, 7.0 * MM)),)
    electrodes = (
        Electrode("entrance", 0.0, tube(10.0, 50.0)),
        Electrode("focus", 1.0, tube(52.0, 100.0)),
        Electrode("exit", 0.0, tube(102.0, 142.0)),
    )
    return Grid.from_domain(domain), shape_table(electrodes, domain)


def timed(fn, *args, **kw):
    t = time.perf_counter()
    out = fn(*args, **kw)
    return time.perf_counter() - t, out


def versus_superlu(nodes):
    grid, table = lens(nodes)
    t_mg, sol = timed(solve_unit_maps, grid, table)
    raster = rasterize(table, grid)
    t_asm, system = timed(assemble, grid, raster)
    op, geometry = operator(grid, raster)
    rhs = [system.gather(boundary_rhs(op, geometry, e)) for e in np.eye(len(table.names))]
    t_lu, lu = timed(spla.splu, system.matrix.tocsc())
    t_sv, x = timed(lu.solve, np.stack(rhs, axis=1))
    diff = max(np.abs(system.gather(sol.unit[k]) - x[:, k]).max() for k in range(len(rhs)))
    t_direct = t_lu + t_sv
    print(f"[1] {grid.nz * grid.nr:,} nodes ({grid.nz} x {grid.nr}), {len(rhs)} electrodes")
    print(f"    multigrid solve_unit_maps: {t_mg:8.2f} s  (cycles per map: {[len(h) - 1 for h in sol.history]})")
    print(f"    SuperLU factor + 3 solves: {t_direct:8.2f} s  (factor {t_lu:.2f} s, solves {t_sv:.2f} s;"
          f" CSR assembly {t_asm:.2f} s not counted; L+U nonzeros {lu.L.nnz + lu.U.nnz:,})")
    print(f"    ratio SuperLU / multigrid: {t_direct / t_mg:6.1f}x   (target >= 10x)")
    print(f"    max |multigrid - SuperLU| over free nodes: {diff:.2e} V per volt")


def scaling(sizes):
    print("[2] cost per node and unit map")
    costs = []
    for n in sizes:
        grid, table = lens(n)
        t, sol = timed(solve_unit_maps, grid, table)
        nodes = grid.nz * grid.nr
        per = t / nodes / len(table.names) * 1e9
        costs.append(per)
        print(f"    {nodes:>10,} nodes: {t:7.2f} s  {per:7.1f} ns/node/map  cycles {[len(h) - 1 for h in sol.history]}")
    print(f"    max/min cost per node: {max(costs) / min(costs):.2f}   (target <= 2)")


def _status_mb(key):
    """A memory figure of this process from /proc/self/status (VmRSS, VmHWM) in MB."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key + ":"):
                return int(line.split()[1]) / 1024
    raise KeyError(key)


def memory_child(nodes):
    grid, table = lens(nodes)
    solve_unit_maps(*lens(2e4))  # compile (or load) the kernels outside the measurement
    base = _status_mb("VmRSS")
    with open("/proc/self/clear_refs", "w") as f:  # restart the peak-RSS (VmHWM) count here
        f.write("5")
    tracemalloc.start()
    sol = solve_unit_maps(grid, table)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    hwm = _status_mb("VmHWM")
    r = sol.raster
    held = sum(a.nbytes for a in (sol.unit, r.owner, r.arm, r.arm_owner, r.cell)) / 2**20
    raster = sum(a.nbytes for a in (r.owner, r.arm, r.arm_owner, r.cell)) / 2**20
    print(json.dumps({"nodes": grid.nz * grid.nr, "tracemalloc_peak_MB": peak / 2**20, "rss_before_MB": base,
                      "rss_peak_MB": hwm, "result_MB": held, "raster_MB": raster}))


def memory(nodes):
    out = subprocess.run([sys.executable, __file__, "--memory-child", str(nodes)], capture_output=True, text=True,
                         check=True)
    m = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"[3] peak memory at {m['nodes']:,} nodes (fresh process)")
    print(f"    array allocations during solve_unit_maps (tracemalloc peak): {m['tracemalloc_peak_MB']:7.1f} MB"
          "   (target < 400 MB)")
    print(f"    of which the returned UnitSolution holds {m['result_MB']:.1f} MB (Raster {m['raster_MB']:.1f} MB)")
    print(f"    peak RSS during the solve {m['rss_peak_MB']:.1f} MB = {m['rss_before_MB']:.1f} MB before it"
          f" (interpreter, libraries, compiled kernels) + {m['rss_peak_MB'] - m['rss_before_MB']:.1f} MB")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller grids (a smoke run)")
    parser.add_argument("--memory-child", type=float, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_child:
        memory_child(args.memory_child)
        return
    scale = 0.05 if args.quick else 1.0
    print(f"numba threads: {numba.get_num_threads()}")
    solve_unit_maps(*lens(2e4))  # compile (or load) the kernels before timing
    versus_superlu(1e6 * scale)
    scaling([s * scale for s in (6e4, 2.5e5, 1e6, 4e6)])
    memory(4e6 * scale)


if __name__ == "__main__":
    main()
