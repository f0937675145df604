"""The test session's set-up: the second big compile runs beside the first.

On an empty numba cache (a fresh clone, a CI run) the suite pays two long first compiles: the
electric ray kernel (its first tests) and the magnetic one (a kernel of its own, about three minutes
on one core; tests/bench/bench_coldstart.py measures the first). They used to run one after the
other on one core while the other core idled. Here a second process compiles the magnetic kernel
(:func:`tracer.warmup.warmup` with the ``"magnetic"`` part) into numba's cache as the session
starts, and a trace with a magnetic field in this process waits for it to finish and then loads
the kernel from the cache instead of compiling it a second time beside it. The tests themselves
are unchanged. ``TRACER_TEST_BACKGROUND_COMPILE=0`` turns this off; on a warm cache it does not
start.
"""

import os

COMPILE = "from tracer.warmup import warmup; warmup(lambda line: None, parts=('magnetic',))"

_background = []


def _wait_for_background():
    """Wait until the second process has compiled (or given up): numba then finds its kernel."""
    while _background:
        _background.pop().wait()


def pytest_sessionstart(session):
    if os.environ.get("TRACER_TEST_BACKGROUND_COMPILE", "1") == "0":
        return
    from tracer import motion
    from tracer.warmup import pending, second_process

    if not pending():
        return
    _background.append(second_process(COMPILE))
    kernel = motion.trace_rays

    def trace_rays(*args):
        """The ray kernel, once the magnetic compile is done when the last argument (the
        magnet) is given."""
        if args[-1] is not None:
            _wait_for_background()
        return kernel(*args)

    motion.trace_rays = trace_rays


def pytest_sessionfinish(session, exitstatus):
    for child in _background:
        if child.poll() is None:        # a short or failed session: the compile is not needed
            child.terminate()
            child.wait(timeout=30)
