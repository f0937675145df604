"""The first compile: `tracer warmup` fills numba's cache, and the command line says when a compile
is still to come."""

import os
import subprocess
import sys
from pathlib import Path

from tracer import warmup
from tracer.cli import main

ROOT = Path(__file__).resolve().parents[1]


def test_warmup_command_leaves_nothing_pending(capsys):
    assert main(["warmup", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "compiled the solver, field and ray kernels" in out
    assert "voltages in time" in out
    assert warmup.pending() is False
    assert warmup.notice() is None


def test_an_empty_numba_cache_is_pending(tmp_path):
    """A fresh numba cache folder (a new install, a new image) holds no kernel yet."""
    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path), PYTHONPATH=str(ROOT))
    done = subprocess.run([sys.executable, "-c", "from tracer.warmup import pending; print(pending())"],
                          env=env, capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "True"
    assert list(tmp_path.rglob("*.nb[ic]")) == []     # asking compiles nothing


def test_the_command_line_says_a_compile_is_coming(monkeypatch, capsys, tmp_path):
    monkeypatch.setattr(warmup, "_cached", lambda kernel: False)
    missing = str(tmp_path / "missing.toml")
    assert main(["run", missing]) == 2
    err = capsys.readouterr().err
    first, *rest = err.splitlines()
    assert first.startswith("first run of this install: compiling") and warmup.FIRST_COMPILE in first
    assert "tracer warmup" in first
    assert main(["run", missing, "--quiet"]) == 2
    assert "first run" not in capsys.readouterr().err
    assert main(["check", missing]) == 2           # check compiles no kernel
    assert "first run" not in capsys.readouterr().err


def test_no_notice_once_compiled(monkeypatch, capsys, tmp_path):
    monkeypatch.setattr(warmup, "_cached", lambda kernel: True)
    assert main(["run", str(tmp_path / "missing.toml")]) == 2
    assert "first run" not in capsys.readouterr().err
