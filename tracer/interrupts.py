"""Ctrl-C through numba's parallel kernels, and Ctrl-C held back over a few steps.

A KeyboardInterrupt raised while a parallel kernel runs comes back wrapped in one or more
SystemErrors ("returned a result with an exception set"); :func:`by_interrupt` recognises it.

:func:`held_back` keeps Ctrl-C (SIGINT) and SIGTERM from interrupting a few steps that must not be
cut (files moved into place, a fork and the bookkeeping of its child), and raises each signal that
came again after them.  Blocking the signals in the calling thread is not enough: numba's threads
do not block them, the kernel hands a process's signal to such a thread, and Python then runs its
handler in the main thread at once.  So in the main thread Python's handlers are also replaced,
for the steps, by one that only notes the signal.
"""

import contextlib
import signal
import threading

HELD = (signal.SIGINT, signal.SIGTERM)
"""The signals :func:`held_back` holds back."""


def by_interrupt(exc) -> bool:
    """True when a KeyboardInterrupt is the cause (or context) of an exception, at any depth."""
    while exc is not None:
        if isinstance(exc, KeyboardInterrupt):
            return True
        exc = exc.__cause__ or exc.__context__
    return False


@contextlib.contextmanager
def held_back():
    """Hold SIGINT and SIGTERM back while the block runs; on leaving it (also on an exception),
    raise each that came again, to the handlers of before.

    Both are blocked in this thread and, in the main thread, Python's handlers noting them in the
    meantime (module notes); a handler set outside Python is left alone.  Yields the signal mask
    of before, which a process forked inside must set itself (the block is never left there).
    """
    came = []
    replaced = {}
    if threading.current_thread() is threading.main_thread():
        for signum in HELD:
            if signal.getsignal(signum) is not None:
                replaced[signum] = signal.signal(signum, lambda s, frame: came.append(s))
    mask = signal.pthread_sigmask(signal.SIG_BLOCK, HELD)
    try:
        yield mask
    finally:
        for signum, handler in replaced.items():
            signal.signal(signum, handler)
        signal.pthread_sigmask(signal.SIG_SETMASK, mask)
        for signum in dict.fromkeys(came):
            signal.raise_signal(signum)
