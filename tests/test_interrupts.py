"""How the command line stops on Ctrl-C (SIGINT) and SIGTERM (:mod:`tracer.interrupts`): a stop
that Python lost is raised again, none is raised inside numba's callback, an ignored Ctrl-C stays
ignored."""

import signal
import sys
import weakref

import pytest

from tracer import interrupts


class Thing:
    """Something a weakref can follow."""


def test_a_stop_lost_in_a_weakref_callback_is_raised_at_the_next_check(monkeypatch):
    """A KeyboardInterrupt raised inside a weakref callback is only reported by Python (the work
    would go on); under stopping() the report is quiet and check() raises it again."""
    reported = []
    monkeypatch.setattr(sys, "unraisablehook", reported.append)
    with interrupts.stopping():
        thing = Thing()
        ref = weakref.ref(thing, lambda r: signal.raise_signal(signal.SIGTERM))
        del thing                      # the callback runs here; its KeyboardInterrupt is lost
        assert ref() is None
        with pytest.raises(KeyboardInterrupt):
            interrupts.check()
    assert reported == []
    interrupts.check()                 # the note ends with the block


def _numba_unpickle():
    """Stands for numba's function of that name, which a kernel calls back as it returns arrays."""
    signal.raise_signal(signal.SIGINT)
    return "built"


def test_a_stop_inside_the_kernels_callback_is_put_off_to_the_next_check():
    """Raised there, a KeyboardInterrupt comes back wrapped in SystemErrors or crashes the
    process; so it is only noted, and check() raises it."""
    with interrupts.stopping():
        try:
            built = _numba_unpickle()
        except KeyboardInterrupt:
            built = "interrupted inside"
        assert built == "built"
        with pytest.raises(KeyboardInterrupt):
            interrupts.check()


def test_stopping_turns_sigterm_into_a_keyboard_interrupt_and_restores_the_handlers():
    before = {s: signal.getsignal(s) for s in interrupts.HELD}
    with pytest.raises(KeyboardInterrupt):
        with interrupts.stopping():
            signal.raise_signal(signal.SIGTERM)
    assert {s: signal.getsignal(s) for s in interrupts.HELD} == before


def test_an_ignored_ctrl_c_stays_ignored():
    """A job started in the background (``cmd &`` in a shell without job control) ignores SIGINT
    (common practice, POSIX); stopping() leaves that as it is."""
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        with interrupts.stopping():
            assert signal.getsignal(signal.SIGINT) is signal.SIG_IGN
            signal.raise_signal(signal.SIGINT)
            interrupts.check()
    finally:
        signal.signal(signal.SIGINT, previous)


def test_a_ctrl_c_while_the_command_line_starts_exits_130(monkeypatch, capsys):
    """A Ctrl-C that lands before any command runs (the command line still importing its modules
    and reading its options) ends in one line and exit 130 too, no traceback."""
    from tracer import cli

    def interrupted():
        raise KeyboardInterrupt

    monkeypatch.setattr(cli, "build_parser", interrupted)
    assert cli.main(["check", "any.toml"]) == 130
    assert capsys.readouterr().err == "tracer: interrupted\n"
