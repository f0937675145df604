"""The command line: exit codes, one-line errors, what each command writes."""

import os
import subprocess
import sys

import pytest

from tracer.cli import main
from tracer.pipeline import CONFIGS

EINZEL = CONFIGS / "einzel_argon.toml"


@pytest.fixture(autouse=True)
def cache(tmp_path, monkeypatch):
    monkeypatch.setenv("TRACER_CACHE", str(tmp_path / "cache"))
    return tmp_path / "cache"


def test_check_describes_the_setup(capsys):
    assert main(["check", str(EINZEL)]) == 0
    out = capsys.readouterr().out
    assert "electrodes (4)" in out and "focus" in out and "nodes" in out


def test_check_says_what_the_source_widths_and_edges_are(capsys):
    """A Gaussian source's widths are shown as sigmas, a uniform one's as a radius and half-angle,
    and a grounded end of the domain says that it is the default (issue 22)."""
    assert main(["check", str(CONFIGS / "immersion_helium.toml")]) == 0
    out = capsys.readouterr().out
    assert "Gaussian spot, sigma 0.7 mm in x and in y, Gaussian slopes, sigma 0.1 deg, energy sigma 1 eV" in out
    assert "closed by grounded metal" not in out        # both ends opened in this example
    assert main(["check", str(CONFIGS / "electron_aperture.toml")]) == 0
    out = capsys.readouterr().out
    assert "uniform disc of radius 2 mm, uniform cone of half-angle 0 deg" in out
    assert 'z_max: closed by grounded metal, the default for every side; [domain] edges = {z_max = "open"}' in out


def test_run_without_a_beam_says_so_and_writes_nothing(tmp_path, capsys):
    """A config with no [[beam]] (here the bundled gun) is refused by run, not run to empty files."""
    out = tmp_path / "out"
    assert main(["run", str(CONFIGS / "pierce_gun.toml"), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "no [[beam]] to trace" in err and "tracer gun" in err
    assert not out.exists()


def test_solve_writes_maps_and_picture_and_reuses_the_cache(tmp_path, cache, capsys):
    out = tmp_path / "solve"
    assert main(["solve", str(EINZEL), "--out", str(out), "--quiet"]) == 0
    assert (out / "maps.h5").stat().st_size > 0
    assert (out / "equipotentials.png").stat().st_size > 0
    cached = list(cache.glob("*.h5"))
    assert len(cached) == 1
    stamp = cached[0].stat().st_mtime_ns
    assert main(["solve", str(EINZEL), "--out", str(out), "--quiet"]) == 0
    assert cached[0].stat().st_mtime_ns == stamp          # read, not solved and written again
    assert "relative residual" in capsys.readouterr().out


def test_optics_prints_the_cardinal_elements(tmp_path, capsys):
    out = tmp_path / "optics"
    assert main(["optics", str(EINZEL), "--out", str(out), "--quiet"]) == 0
    text = capsys.readouterr().out
    assert "focal length, image side" in text and "Cs" in text
    assert (out / "optics.png").stat().st_size > 0


def test_optics_without_an_optics_table_is_bad_input(tmp_path, capsys):
    config = tmp_path / "no_optics.toml"
    config.write_text(EINZEL.read_text().split("[optics]")[0])
    assert main(["optics", str(config), "--out", str(tmp_path / "o"), "--quiet"]) == 2
    assert "no [optics] table" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_bad_input_is_one_line_exit_2_and_writes_nothing(tmp_path):
    config = tmp_path / "bad.toml"
    config.write_text(EINZEL.read_text().replace("cell_mm = 0.2", "cell_mm = -0.2"))
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "tracer", "run", str(config), "--out", str(out)],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "domain.cell_mm" in lines[0] and "-0.2" in lines[0]
    assert "Traceback" not in proc.stderr
    assert not out.exists()


def test_debug_shows_the_traceback(tmp_path):
    config = tmp_path / "bad.toml"
    config.write_text("[domain]\nsymmetry = 'round'\n")
    proc = subprocess.run([sys.executable, "-m", "tracer", "check", str(config), "--debug"],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" in proc.stderr


def test_missing_config_is_bad_input(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nothing.toml")]) == 2
    assert "no such config file" in capsys.readouterr().err


def test_a_terminal_without_unicode_gets_escapes_not_a_fault():
    """Species formulas print with superscripts; an ASCII-only stream shows them escaped."""
    proc = subprocess.run([sys.executable, "-m", "tracer", "check", str(EINZEL)], capture_output=True,
                          text=True, env={**os.environ, "PYTHONIOENCODING": "ascii"})
    assert proc.returncode == 0, proc.stderr
    assert "\\u207a" in proc.stdout and "39.9618345 u" in proc.stdout


def test_the_tuner_prints_its_figure_in_the_reports_units():
    """The tuner's line shows spot sizes in mm, as every other report (issue 22: it printed metres)."""
    from tracer.report import figure_text

    assert figure_text("spot_rms_m", 1.5e-4) == "spot_rms = 0.15 mm"
    assert figure_text("energy_mean_eV", 250.0) == "energy_mean = 250 eV"
    assert figure_text("transmission", 0.5) == "transmission = 0.5"


def test_cache_shows_and_clears_the_maps_files(cache, capsys):
    """tracer cache lists the cached maps and coil fields (entries, size, age) and --clear deletes
    them, and only them."""
    cache.mkdir()
    (cache / "maps-aaaa.h5").write_bytes(b"x" * 2_000_000)
    (cache / "maps-bbbb.h5").write_bytes(b"x" * 400_000)
    (cache / "coil-cccc.h5").write_bytes(b"x" * 100_000)
    (cache / "notes.txt").write_text("not ours")
    assert main(["cache"]) == 0
    out = capsys.readouterr().out
    assert f"cache {cache}: 2 maps file(s), 1 coil field file(s), 2.5 MB" in out
    assert "maps-aaaa.h5" in out and " s ago" in out
    assert main(["cache", "--clear", "--quiet"]) == 0
    assert "deleted 2 maps file(s), 1 coil field file(s), 2.5 MB" in capsys.readouterr().out
    assert sorted(p.name for p in cache.iterdir()) == ["notes.txt"]
    assert main(["cache", "--no-cache"]) == 2
