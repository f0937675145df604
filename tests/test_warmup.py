"""The first compile: `tracer warmup` fills numba's cache, and the command line says when a compile
is still to come."""

import os
import subprocess
import sys
from pathlib import Path

from tracer import warmup
from tracer.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "einzel_argon.toml"


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


def _terminal(monkeypatch, cached):
    """stderr as a terminal, and numba's cache as full or empty."""
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)
    monkeypatch.setattr(warmup, "_cached", lambda kernel: cached)


def test_the_command_line_says_a_compile_is_coming(monkeypatch, capsys):
    """On a terminal, once the config is read and before any work (here --rays 0 stops it)."""
    _terminal(monkeypatch, cached=False)
    assert main(["run", str(DEMO), "--rays", "0"]) == 2
    first, second = capsys.readouterr().err.splitlines()
    assert first.startswith("first run of this install: compiling") and warmup.FIRST_COMPILE in first
    assert "tracer warmup" in first
    assert second.startswith("tracer: error: --rays")
    assert main(["run", str(DEMO), "--rays", "0", "--quiet"]) == 2
    assert "first run" not in capsys.readouterr().err


def test_no_notice_before_a_refused_config_or_when_piped(monkeypatch, capsys, tmp_path):
    _terminal(monkeypatch, cached=False)
    assert main(["run", str(tmp_path / "missing.toml")]) == 2
    assert "first run" not in capsys.readouterr().err
    assert main(["check", str(DEMO)]) == 0           # check compiles no ray kernel
    assert "first run" not in capsys.readouterr().err
    monkeypatch.setattr(sys.stderr, "isatty", lambda: False)
    assert main(["run", str(DEMO), "--rays", "0"]) == 2
    assert "first run" not in capsys.readouterr().err


def test_no_notice_once_compiled(monkeypatch, capsys):
    _terminal(monkeypatch, cached=True)
    assert main(["run", str(DEMO), "--rays", "0"]) == 2
    assert "first run" not in capsys.readouterr().err
