"""Tests of the atomic writes (``tracer.store.atomic``) and of what importing them costs."""

import os
import signal
import subprocess
import sys
import threading

import pytest

from tracer.store import atomic
from tracer.store.atomic import staged_folder


def test_a_staged_folder_adds_its_files_only_when_the_block_succeeds(tmp_path):
    (tmp_path / "result.h5").write_bytes(b"old")
    with pytest.raises(KeyboardInterrupt):
        with staged_folder(tmp_path) as staging:
            (staging / "rays.png").write_bytes(b"new picture")
            raise KeyboardInterrupt
    assert [p.name for p in tmp_path.iterdir()] == ["result.h5"]
    with staged_folder(tmp_path) as staging:
        (staging / "rays.png").write_bytes(b"new picture")
        (staging / "result.h5").write_bytes(b"new")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rays.png", "result.h5"]
    assert (tmp_path / "result.h5").read_bytes() == b"new"


def test_atomic_writes_load_neither_hdf5_nor_numpy():
    """Pictures and scan tables write atomically without paying for h5py (a fresh interpreter)."""
    code = ("import sys, tracer.store, tracer.store.atomic\n"
            "print(sorted(m for m in ('h5py', 'numpy', 'scipy') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True)
    assert out.stdout.strip() == "[]"


def test_ctrl_c_while_a_set_is_moved_in_waits_for_the_set(tmp_path, monkeypatch):
    """Ctrl-C while a staged set is moved into its folder is raised once the whole set is in: the
    folder holds the new set and its manifest.  Another thread is alive meanwhile, as numba's are
    after a trace (the signal goes to it, and Python's handler would cut the move at once)."""
    out = tmp_path / "out"
    with staged_folder(out, manifest="run-files.txt", heading="first") as staged:
        for name in "abc":
            (staged / name).write_text("first")
    replace, moved = os.replace, []

    def replacing(source, target):
        moved.append(target)
        if len(moved) == 2:                         # the old manifest set aside, one file moved
            os.kill(os.getpid(), signal.SIGINT)
        replace(source, target)

    other = threading.Thread(target=threading.Event().wait, args=(30,), daemon=True)
    other.start()
    monkeypatch.setattr(atomic.os, "replace", replacing)
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)   # a shell's background job ignores it
    try:
        with pytest.raises(KeyboardInterrupt):
            with staged_folder(out, manifest="run-files.txt", heading="second") as staged:
                for name in "abc":
                    (staged / name).write_text("second")
    finally:
        signal.signal(signal.SIGINT, previous)
    assert sorted(p.name for p in out.iterdir()) == ["a", "b", "c", "run-files.txt"]
    assert {(out / n).read_text() for n in "abc"} == {"second"}
    assert (out / "run-files.txt").read_text() == "# second\na\nb\nc\n"
