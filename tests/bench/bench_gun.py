"""Benchmark of the self-consistent gun (run as a script: python tests/bench/bench_gun.py).

The bundled Pierce-type gun (configs/pierce_gun.toml) on a 0.04 mm grid (about 1.9e5 nodes) with 200
rays: iterations and wall time to converge (goal: under 30 s), against the baseline of solving the
gun's basis maps (three Laplace solves) on the same grid in the same run; also the time of one
space-charge (Poisson) solve, a part of each iteration.
"""

import dataclasses
import time
from pathlib import Path

import numpy as np

from tracer.config import load
from tracer.fieldmap import solve_basis
from tracer.guns import POISSON_RTOL, gun
from tracer.solver import solve_poisson

CONFIG = Path(__file__).resolve().parents[2] / "configs" / "pierce_gun.toml"
GOAL_S = 30.0


def main():
    setup = load(CONFIG)
    setup = dataclasses.replace(setup, domain=dataclasses.replace(setup.domain, cell_m=0.04e-3),
                                gun=dataclasses.replace(setup.gun, rays=200))
    small = dataclasses.replace(setup, domain=dataclasses.replace(setup.domain, cell_m=0.5e-3))
    gun(small)   # compile or load the kernels

    t0 = time.perf_counter()
    maps = solve_basis(setup)
    t_maps = time.perf_counter() - t0
    g = maps.grid
    print(f"Pierce-type gun: grid {g.nz} x {g.nr} = {g.nz * g.nr} nodes, {setup.gun.rays} rays, "
          f"relaxation {setup.gun.relaxation}, tolerance {setup.gun.tolerance:g}")
    print(f"baseline: basis maps (3 Laplace solves) {t_maps:.2f} s")

    t0 = time.perf_counter()
    result = gun(setup, maps=maps)
    t_gun = time.perf_counter() - t0
    print(f"gun: {result.iterations} iterations, converged {result.converged}, {t_gun:.2f} s "
          f"({t_gun / result.iterations:.2f} s per iteration); ratio to the baseline {t_gun / t_maps:.2f}")
    print(f"  current {result.current_A:.5g} A, perveance {result.perveance_A_per_V1p5:.4g} A/V^1.5, "
          f"crossover z {result.crossover_z_m * 1e3 if result.crossover_z_m else float('nan'):.3f} mm, "
          f"rms radius {result.crossover_radius_m * 1e3 if result.crossover_radius_m else float('nan'):.4g} mm")
    print("  history (A):", " ".join(f"{c:.5g}" for c in result.history["current_A"]))

    field = maps.combine()
    t0 = time.perf_counter()
    solve_poisson(g, field.table, np.full(g.shape, -1e-3), field.raster, rtol=POISSON_RTOL)
    t_poisson = time.perf_counter() - t0
    print(f"  one Poisson solve {t_poisson:.2f} s "
          f"({result.iterations - 1} per run: {100 * t_poisson * (result.iterations - 1) / t_gun:.0f} % of it)")
    print(f"goal: converged in under {GOAL_S:g} s: {'met' if t_gun < GOAL_S and result.converged else 'NOT met'}")


if __name__ == "__main__":
    main()
