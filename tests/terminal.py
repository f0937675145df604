"""Signals as a terminal session gives them to a command it starts, for tests that press Ctrl-C.

A shell starts each command with SIGINT and SIGTERM at their default actions and unblocked (common
practice, POSIX job control).  A child of the test process would instead inherit whatever
disposition and mask the test process has at that moment, so these tests set the terminal's.
"""

import signal


def as_from_a_terminal() -> None:
    """``preexec_fn`` for ``subprocess.Popen``: SIGINT and SIGTERM default and unblocked."""
    for signum in (signal.SIGINT, signal.SIGTERM):
        signal.signal(signum, signal.SIG_DFL)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT, signal.SIGTERM})
