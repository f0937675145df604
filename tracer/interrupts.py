"""Ctrl-C through numba's parallel kernels.

A KeyboardInterrupt raised while a parallel kernel runs comes back wrapped in one or more
SystemErrors ("returned a result with an exception set"); :func:`by_interrupt` recognises it.
"""


def by_interrupt(exc) -> bool:
    """True when a KeyboardInterrupt is the cause (or context) of an exception, at any depth."""
    while exc is not None:
        if isinstance(exc, KeyboardInterrupt):
            return True
        exc = exc.__cause__ or exc.__context__
    return False
