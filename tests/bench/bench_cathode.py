"""Benchmark: space-charge-limited emission from curved cathodes against Langmuir & Blodgett (run
as a script: python tests/bench/bench_cathode.py [cells per radius ...]).

Four diodes, each a half of the whole (an open edge through the centre mirrors the other half,
since a gun emits only from faces whose normal points downstream): a convex and a concave
spherical cathode (axial symmetry; Langmuir & Blodgett 1924) and a convex and a concave
cylindrical one (planar symmetry with the mirror plane; Langmuir & Blodgett 1923), radius ratio 2,
100 V electrons (the relativistic correction is 0.002 %; 0.02 % at 1 kV), two rays per cell of
the cathode radius (fewer leave the deposited charge streaky on the finer grids), the gun
iterated to a relative change of 1e-6 (at 1e-4 the current stopped up to 0.02 % short of its
limit).  For 25, 50 and 100 cells per cathode radius it prints the gun's current against the
reference (tests/diodes.py, their equations integrated), the relative error and the ratio of
successive errors (4 for second order).  Goal (issue 16): within 0.5 % at 50 cells per radius,
falling at second order.
"""

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from diodes import curved_diode, curved_reference  # noqa: E402
from tracer.guns import gun  # noqa: E402

CASES = ("sphere", "sphere_concave", "cylinder", "cylinder_concave")


def main(cells=(25, 50, 100)):
    print("cathode            cells/radius   current (A or A/m)   reference      error      ratio    "
          "iterations  time")
    for case in CASES:
        last = None
        for n in cells:
            t0 = time.perf_counter()
            result = gun(curved_diode(case, n, rays=2 * n, tolerance=1e-6))
            err = result.current_A / curved_reference(case) - 1.0
            ratio = f"{last / err:8.2f}" if last else "        "
            print(f"{case:18s} {n:8d}      {result.current_A:14.6g}   {curved_reference(case):12.6g}"
                  f"   {100 * err:+8.3f} %  {ratio}  {result.iterations:6d}  {time.perf_counter() - t0:6.1f} s"
                  + ("" if result.converged else "  (not converged)"), flush=True)
            last = err


if __name__ == "__main__":
    main(tuple(int(a) for a in sys.argv[1:]) or (25, 50, 100))
