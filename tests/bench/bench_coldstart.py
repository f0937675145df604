"""Benchmark of the first run (run as a script: python tests/bench/bench_coldstart.py).

Runs ``tracer demo`` in a fresh process with numba's cache pointed at an empty folder
(NUMBA_CACHE_DIR), so every kernel compiles, then again from that cache (warm), each with a fresh
map cache so both solve the same maps.  The cold demo runs twice, each from its own empty cache:
as a user meets it (the ray kernel compiled in a second process beside the solve,
:func:`tracer.warmup.rays_beside`) and with everything compiled in the one process
(``TRACER_COMPILE_BESIDE=0``), the baseline of that gain.  Prints the wall times, their ratios,
the ratio against the goal of a cold first demo under 30 s, the code the ray kernel types
(:func:`tracer.warmup.typed_size`, the measure tests/test_warmup.py budgets), and each kernel's
compile time in the one-process cold run (exclusive of the kernels it compiled inside it; numba's
"numba:compile" events).
"""

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
GOAL_S = 30.0

PROFILE = """
import collections, json, sys, time
from numba.core import event
stack, total, inner = [], collections.Counter(), collections.Counter()

class Compiles(event.Listener):
    def on_start(self, ev):
        name = ev.data["dispatcher"].py_func.__qualname__ if "dispatcher" in ev.data else "?"
        stack.append((name, time.perf_counter()))

    def on_end(self, ev):
        name, t = stack.pop()
        dt = time.perf_counter() - t
        total[name] += dt
        if stack:
            inner[stack[-1][0]] += dt

event.register("numba:compile", Compiles())
from tracer.cli import main
code = main(sys.argv[1:])
print("KERNELS " + json.dumps({k: total[k] - inner[k] for k in total}))
sys.exit(code)
"""


def demo(numba_cache, work, label, beside=True):
    """Wall time of ``tracer demo`` with this numba cache, and the compile times it reports (those
    of its own process)."""
    env = dict(os.environ, NUMBA_CACHE_DIR=str(numba_cache), PYTHONPATH=str(ROOT),
               TRACER_COMPILE_BESIDE="1" if beside else "0")
    out = Path(work) / f"demo-{label}"
    args = [sys.executable, "-c", PROFILE, "demo", "--quiet", "--out", str(out),
            "--cache", str(Path(work) / f"maps-{label}")]
    t0 = time.perf_counter()
    done = subprocess.run(args, env=env, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if done.returncode:
        sys.exit(f"the {label} demo failed (exit {done.returncode}):\n{done.stderr}")
    import json

    line = [s for s in done.stdout.splitlines() if s.startswith("KERNELS ")][-1]
    return wall, json.loads(line[len("KERNELS "):])


def main():
    sys.path.insert(0, str(ROOT))       # this tree's tracer, as in the demos' processes
    from tracer.motion.lanes import trace_rays
    from tracer.warmup import typed_size

    with tempfile.TemporaryDirectory() as work:
        serial_cache = Path(work) / "numba-one-process"
        cache = Path(work) / "numba"
        serial_cache.mkdir()
        cache.mkdir()
        serial, kernels = demo(serial_cache, work, "cold-one-process", beside=False)
        cold, _ = demo(cache, work, "cold")
        warm, again = demo(cache, work, "warm")
    print("tracer demo from a fresh numba cache (NUMBA_CACHE_DIR empty), then from that cache")
    print(f"  cold {cold:6.1f} s   warm {warm:6.1f} s   cold/warm {cold / warm:5.1f}")
    print(f"  cold with every kernel compiled in one process {serial:6.1f} s: the ray kernel "
          f"compiled beside the solve takes {cold / serial:.2f} of it")
    print(f"  cold first run against the {GOAL_S:.0f} s goal: ratio {cold / GOAL_S:.2f}"
          f" -> {'met' if cold <= GOAL_S else 'not met'}")
    kernels_typed, nodes = typed_size(trace_rays)
    print(f"  the ray kernel types {nodes} syntax-tree nodes in {kernels_typed} kernels"
          " (tracer.warmup.typed_size; its budget is in tests/test_warmup.py)")
    print(f"  kernels loaded (or compiled) in the warm run: {len(again)}, {sum(again.values()):.1f} s")
    print("  first compile of each kernel (exclusive seconds, largest first):")
    for name, seconds in sorted(kernels.items(), key=lambda kv: -kv[1])[:15]:
        print(f"    {seconds:6.1f}  {name}")
    print(f"    {sum(kernels.values()):6.1f}  all {len(kernels)} kernels")


if __name__ == "__main__":
    main()
