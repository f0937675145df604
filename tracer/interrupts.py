"""Ctrl-C (SIGINT) and SIGTERM: how the command line stops on them, a few steps held back from
them, and what numba and CPython need for a stop to end cleanly.

:func:`stopping` (around the command line) turns both signals into a KeyboardInterrupt and
notes each one, so that :func:`check` raises it again where Python lost it: a KeyboardInterrupt
raised inside a weakref callback, a finaliser or a callback of numba's compiler is only reported
as unraisable (that report is kept quiet) and the work would go on.  A signal whose handler runs
in the Python code a numba kernel calls back as it returns (``_numba_unpickle``, which builds the
arrays it hands back) is only noted there: an exception raised in it comes back wrapped in
SystemErrors ("returned a result with an exception set"; :func:`by_interrupt` recognises one)
or crashes the process (SIGSEGV).  The ray kernel is also called with the signals held back
(:mod:`tracer.beam`), so a Ctrl-C stops a trace between its chunks.

:func:`held_back` keeps Ctrl-C (SIGINT) and SIGTERM from interrupting a few steps that must not be
cut (files moved into place, a fork and the bookkeeping of its child), and raises each signal that
came again after them.  Blocking the signals in the calling thread is not enough: numba's threads
do not block them, the kernel hands a process's signal to such a thread, and Python then runs its
handler in the main thread at once.  So in the main thread Python's handlers are also replaced,
for the steps, by one that only notes the signal.
"""

import contextlib
import signal
import sys
import threading

HELD = (signal.SIGINT, signal.SIGTERM)
"""The signals :func:`held_back` holds back and :func:`stopping` stops on."""

_noted = []
"""The signals :func:`stop` noted since :func:`stopping` began."""


def stop(signum, frame):
    """The handler of SIGINT and SIGTERM under :func:`stopping`: note the signal and raise
    KeyboardInterrupt, or, in the code a numba kernel calls back, only note it for :func:`check`."""
    _noted.append(signum)
    if frame is None or frame.f_code.co_name != "_numba_unpickle":
        raise KeyboardInterrupt


def check() -> None:
    """Raise KeyboardInterrupt if a signal came under :func:`stopping`: its own KeyboardInterrupt
    may have been lost (or put off by :func:`stop`).  Called between chunks of long work."""
    if _noted:
        raise KeyboardInterrupt


@contextlib.contextmanager
def stopping():
    """While the block runs (in the main thread), SIGINT and SIGTERM raise KeyboardInterrupt
    through :func:`stop`, and a KeyboardInterrupt after one of them that Python can only report as
    unraisable is not shown (:func:`check` raises it again).  SIGINT that is ignored, as in a job
    started in the background, stays ignored."""
    _noted.clear()
    previous = {signum: signal.getsignal(signum) for signum in HELD}
    for signum, handler in previous.items():
        if handler is not signal.SIG_IGN or signum == signal.SIGTERM:
            signal.signal(signum, stop)
    shown = sys.unraisablehook

    def quiet(unraisable):
        if not (_noted and isinstance(unraisable.exc_value, KeyboardInterrupt)):
            shown(unraisable)

    sys.unraisablehook = quiet
    try:
        yield
    finally:
        sys.unraisablehook = shown
        for signum, handler in previous.items():
            signal.signal(signum, handler)
        _noted.clear()


def forget_unhandled() -> None:
    """Clear the interpreter's note that a KeyboardInterrupt went unhandled, once one is handled.

    CPython (seen with 3.11) notes a KeyboardInterrupt that leaves code run by ``exec`` of a string
    as unhandled, even when a caller catches it, and ``python -m`` then ends the process by SIGINT
    instead of with its exit code.  A Ctrl-C or SIGTERM that lands while a module is imported does
    that: dataclasses build their methods with ``exec``.  Each ``exec`` of a string first clears
    the note, so one that runs to its end leaves it clear.
    """
    exec("None")


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
