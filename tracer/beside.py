"""A job run in a forked child process while the caller goes on (the run's pictures drawn while
its files are written), with results and errors handed back as JSON and Ctrl-C handled once."""

import builtins
import contextlib
import json
import os
import signal

from tracer.interrupts import held_back, stopping


@contextlib.contextmanager
def beside(job):
    """Run ``job()`` in a forked child process while the block runs.

    Yields a list that holds the job's return value (a JSON value) once the block has ended.  An
    exception of the job is raised again at the end of the block: a built-in exception as its own
    type (an ``OSError`` with its ``errno`` and ``filename``), any other as a RuntimeError that
    names it.  When the block raises (Ctrl-C included, also one that came while the fork held
    the signals back), the child is stopped, exactly once, by a KeyboardInterrupt raised inside it (so that its
    atomic writes remove their temporary files), and waited for.  The child ignores Ctrl-C of its
    own: it hears of it through this process.  Without ``os.fork`` the job runs at the end of
    the block.

    The child starts as a copy of this process with a single thread: the job must not use
    numba's parallel kernels or HDF5 files (plain numpy, matplotlib and file writes are fine).
    """
    done = []
    if not hasattr(os, "fork"):
        yield done
        done.append(job())
        return
    read_end, write_end = os.pipe()
    reader = pid = None
    try:
        # both signals are held until the child has its own handlers (it never runs the caller's
        # code) and, here, until its pid is kept: one that came is raised on leaving the block,
        # where the child is stopped and waited for
        with held_back() as mask:
            pid = os.fork()
            if pid == 0:
                _child(job, read_end, write_end, mask)
        os.close(write_end)
        reader = os.fdopen(read_end, "rb")
        yield done
        reply = reader.read()
    except BaseException:
        if pid:
            with contextlib.suppress(ProcessLookupError):
                os.kill(pid, signal.SIGTERM)
        raise
    finally:
        if reader is not None:
            reader.close()       # a child still writing its reply gets a broken pipe
        else:
            for fd in (read_end, write_end):
                with contextlib.suppress(OSError):
                    os.close(fd)
        if pid:
            os.waitpid(pid, 0)
    try:
        reply = json.loads(reply)
    except ValueError:           # no reply: the child was killed
        raise RuntimeError(f"the child process ended without a reply ({reply[-200:]!r})") from None
    if "error" in reply:
        raise _rebuilt(*reply["error"])
    done.append(reply["value"])


def _rebuilt(kind, message, code=None, filename=None):
    """The exception a child of :func:`beside` reported, from its type name and message (and an
    OSError's errno and file name)."""
    cls = getattr(builtins, kind, None)
    if isinstance(cls, type) and issubclass(cls, OSError) and code is not None:
        return cls(code, message, filename)
    if isinstance(cls, type) and issubclass(cls, BaseException):
        return cls(message)
    return RuntimeError(f"in the child process: {kind}: {message}")


def _child(job, read_end, write_end, mask):
    """The forked side of :func:`beside`: run the job, send back its value or error, exit."""
    try:
        os.close(read_end)
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        with stopping():   # SIGTERM: a KeyboardInterrupt, not reported where Python loses it
            signal.pthread_sigmask(signal.SIG_SETMASK, mask)
            reply = _reply(job)
        with os.fdopen(write_end, "w") as pipe:
            pipe.write(reply)
    finally:
        os._exit(0)


def _reply(job) -> str:
    """The JSON reply of a child of :func:`beside`: the job's value, or its error."""
    try:
        value = job()
        try:
            return json.dumps({"value": value})
        except (TypeError, ValueError) as err:
            raise TypeError(f"the child process could not send back its result {value!r}: {err}") from err
    except OSError as err:
        return json.dumps({"error": [type(err).__name__, err.strerror or str(err), err.errno,
                                     None if err.filename is None else str(err.filename)]})
    except BaseException as err:
        return json.dumps({"error": [type(err).__name__, str(err)]})
