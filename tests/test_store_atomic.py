"""Tests of the atomic writes (``tracer.store.atomic``) and of what importing them costs."""

import subprocess
import sys

import pytest

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
