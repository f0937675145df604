"""Benchmark of the main job (run as a script: python tests/bench/bench_run.py).

The demo config (configs/einzel_argon.toml) at 10,000 rays, as `tracer run` does it: wall time, rays
per second, and the share spent in solving (or loading the cached maps), tracing and writing the
report (result.h5, landings.csv, figures; the figures are partly drawn in a child process, so
the write uses the second core).  Goal: under 5 s on 2 cores once the maps are cached.
The baseline measured in the same run is the first, uncached run (solving the four basis maps).
The write of the cached run is then repeated to give its best and spread on a shared machine.
"""

import dataclasses
import tempfile
import time
from pathlib import Path

import tracer
from tracer.pipeline import DEMO_CONFIG, run, solve, write_run_outputs

RAYS = 10_000
GOAL_S = 5.0
WRITE_REPEATS = 5


def timed_run(setup, cache, out):
    t0 = time.perf_counter()
    maps = solve(setup, cache_dir=cache)
    t1 = time.perf_counter()
    result = run(setup, maps=maps)
    t2 = time.perf_counter()
    write_run_outputs(result, out)
    t3 = time.perf_counter()
    return (t1 - t0, t2 - t1, t3 - t2), result


def timed_writes(result, out):
    """Wall times of writing the same result again, WRITE_REPEATS times."""
    times = []
    for k in range(WRITE_REPEATS):
        t0 = time.perf_counter()
        write_run_outputs(result, out / str(k))
        times.append(time.perf_counter() - t0)
    return sorted(times)


def main():
    setup = tracer.load(DEMO_CONFIG)
    setup = dataclasses.replace(setup, beams=tuple(dataclasses.replace(b, count=RAYS)
                                                   for b in setup.beams))
    small = dataclasses.replace(setup, beams=tuple(dataclasses.replace(b, count=10)
                                                   for b in setup.beams))
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        run(small)                      # compile or load the kernels
        first, _ = timed_run(setup, tmp / "cache", tmp / "first")
        second, result = timed_run(setup, tmp / "cache", tmp / "second")
        writes = timed_writes(result, tmp / "again")
    total1, total2 = sum(first), sum(second)
    print(f"demo config at {RAYS} rays ({setup.title})")
    for label, parts, total in (("uncached (baseline)", first, total1), ("cached", second, total2)):
        solve_s, trace_s, write_s = parts
        print(f"  {label:20s} {total:6.2f} s: solve {solve_s:5.2f} s ({solve_s / total:4.0%}), "
              f"trace {trace_s:5.2f} s ({trace_s / total:4.0%}), write {write_s:5.2f} s "
              f"({write_s / total:4.0%})")
    print(f"  write again x{WRITE_REPEATS}: best {writes[0]:.2f} s, median {writes[len(writes) // 2]:.2f} s, "
          f"worst {writes[-1]:.2f} s")
    print(f"  rays per second (cached run, tracing only): {RAYS / second[1]:,.0f}")
    print(f"  cached / uncached wall time: {total2 / total1:.2f}")
    print(f"  goal: cached run under {GOAL_S:g} s -> {'met' if total2 < GOAL_S else 'NOT met'}")


if __name__ == "__main__":
    main()
