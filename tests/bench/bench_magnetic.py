"""Benchmark of the magnetic force (run as a script: python tests/bench/bench_magnetic.py).

1000 protons through the tests' solved three-tube lens (0.25 mm grid) with tracer.trace, without a
magnetic field, with a coil around the lens (its unit field sampled onto the map's grid), and with
a uniform field in a box: each timed as the best of a few runs in this one process, and the ratios
printed (the aim: a run with a coil no slower than 1.5x the same run without). The first run of
each also shows the kernel's compile time when numba's cache is cold.
"""

import sys
import time
from pathlib import Path

from tracer.beam import trace
from tracer.magnetics.coil import Coil
from tracer.magnetics.uniform import Box, UniformField
from tracer.magnetics.units import MagneticUnits

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from test_trace import three_tube  # noqa: E402  (the lens of the tests, finer grid)

REPEATS = 3


def timed(field, beam, planes, magnetic):
    """(first run's time, best of REPEATS after it, the run)."""
    t0 = time.perf_counter()
    run = trace(field, beam, planes, magnetic=magnetic)
    first = time.perf_counter() - t0
    best = float("inf")
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        run = trace(field, beam, planes, magnetic=magnetic)
        best = min(best, time.perf_counter() - t0)
    return first, best, run


def main():
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
    base = None
    for name, magnetic in rows:
        first, best, run = timed(field, beam, planes, magnetic)
        base = best if base is None else base
        steps = run.records["steps"].mean()
        print(f"{name:28s} first run {first:7.2f} s, best of {REPEATS} {best:.3f} s "
              f"({best / base:.2f}x electric only), {steps:.0f} steps/ray, "
              f"ledger worst {run.ledger.worst_eV:.2e} eV")


if __name__ == "__main__":
    main()
