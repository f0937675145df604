"""Benchmark of voltage scans (run as a script: python tests/bench/bench_scan.py [--sets N --rays M]).

100 voltage sets x 1000 protons through the tests' three-tube lens with a target: the scan run
serially in this process (numba on one thread: the baseline) and by a pool of 2 worker processes
(one numba thread each).  Prints voltage sets per second of both, the speed-up and scaling
efficiency against the serial baseline, and the share of the time spent outside
``tracer.beam.trace`` (combining the maps, measuring the figures, moving work and results between
processes, writing the durable rows, starting the pool).  Target: under 10 %.
"""

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numba
import numpy as np

from tracer.config import loads
from tracer.pipeline import solve
from tracer.scans import scan

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from test_scans import lens_text  # noqa: E402  (the lens of the tests)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=100)
    parser.add_argument("--rays", type=int, default=1000)
    args = parser.parse_args()
    setup = loads(lens_text(f"[scan]\nlens = [500.0, 900.0, {args.sets}]\n", count=args.rays))
    maps = solve(setup)
    warm = loads(lens_text("[scan]\nlens = [500.0, 900.0, 2]\n", count=10))
    scan(warm, maps, workers=1)                      # numba's kernels compiled or loaded

    numba.set_num_threads(1)
    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        one = scan(setup, maps, workers=1, out=out)
        t_one = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as out:
        t0 = time.perf_counter()
        two = scan(setup, maps, workers=2, out=out)
        t_two = time.perf_counter() - t0
    assert one.table.tobytes() == two.table.tobytes(), "serial and pooled tables differ"
    assert one.resumed == two.resumed == 0

    n = len(one.table)
    outside_one = 1.0 - one.trace_s / t_one
    outside_two = 1.0 - two.trace_s / (2 * t_two)
    print(f"{n} voltage sets x {args.rays} rays; {numba.config.NUMBA_NUM_THREADS} cores seen")
    print(f"serial (1 process, 1 thread): {t_one:8.2f} s  {n / t_one:7.3f} sets/s  "
          f"time outside tracing {outside_one:6.1%}")
    print(f"pool of 2 workers:            {t_two:8.2f} s  {n / t_two:7.3f} sets/s  "
          f"time outside tracing {outside_two:6.1%} (of 2 x wall time, pool start-up included)")
    print(f"speed-up 2 workers / serial: {t_one / t_two:.3f}  (scaling efficiency "
          f"{t_one / t_two / 2:.1%}); per-set trace time serial {one.trace_s / n:.3f} s, "
          f"in the workers {two.trace_s / n:.3f} s")
    print(f"tables identical: True; min spot {np.nanmin(one.table['spot_rms_m']) * 1e3:.4g} mm")


if __name__ == "__main__":
    main()
