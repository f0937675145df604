"""The main job end to end: tracer.run, the bundled configs, and the landing physics."""

import dataclasses
import math
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

import tracer
from tracer.beside import beside
from tracer.pipeline import CONFIGS, run, write_run_outputs
from tracer.plot import run_figures
from tracer.store import StoreError
from tracer.store.atomic import atomic_path
from terminal import as_from_a_terminal

ROOT = Path(__file__).resolve().parent.parent

APERTURE = """
title = "parallel beam through a hole in a grounded plate (test)"
[domain]
symmetry = "axial"
z_mm = [0.0, 20.0]
r_mm = 6.0
cell_mm = 0.1
edges = "ground"
[[electrode]]
name = "plate"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [8.0, 8.5]
r_mm = [1.5, 5.5]
[[beam]]
name = "ions"
species = "40Ar+"
energy_eV = 200.0
count = 4000
seed = 21
start_z_mm = 1.0
radius_mm = 3.0
profile = "uniform"
current_A = 2e-9
[[plane]]
name = "behind"
z_mm = 12.0
"""


def test_transmission_through_a_hole_is_the_area_ratio():
    """A uniform parallel beam of radius R through a hole of radius a in field-free space passes the
    fraction (a/R)^2 of its rays (geometry of a uniform disc; common practice).  With 4000 rays the
    binomial standard error is sqrt(p(1-p)/n) = 0.0068 at p = 0.25; we allow 4 of them."""
    setup = tracer.loads(APERTURE)
    result = run(setup)
    s = result.beams["ions"].summary()
    expected = (1.5 / 3.0) ** 2
    sigma = math.sqrt(expected * (1 - expected) / 4000)
    assert abs(s["transmission"]["behind"] - expected) < 4 * sigma
    assert s["landing"]["plate"]["count"] + s["status"]["left"] == 4000
    # the figures as currents: each ray carries current_A / count
    assert s["planes"]["behind"]["current_A"] == pytest.approx(2e-9 * s["transmission"]["behind"], rel=1e-6, abs=0)
    assert s["landing"]["plate"]["current_A"] == pytest.approx(2e-9 * s["landing"]["plate"]["fraction"], rel=1e-6, abs=0)
    # every ray that passed went straight: no field anywhere (all electrodes and edges at 0 V)
    rows = result.beams["ions"].at_plane("behind")
    assert np.all(np.hypot(rows["x_m"], rows["y_m"]) <= 1.5e-3)


@pytest.fixture(scope="module")
def soft_landing():
    setup = tracer.load(CONFIGS / "soft_landing.toml")
    beam = dataclasses.replace(setup.beams[0], count=120)
    setup = dataclasses.replace(setup, beams=(beam,))
    return run(setup)


def test_landing_energy_is_start_energy_plus_q_delta_v(soft_landing):
    """Every landed ray arrives with its start kinetic energy plus q (V_start - V_electrode)
    (conservation of energy in an electrostatic field; common practice)."""
    result = soft_landing
    beam_run = result.beams["c60"]
    rec, starts = beam_run.records, beam_run.starts
    landed = rec["status"] == "landed"
    assert landed.sum() > 100
    v_start = result.field.potential(starts["z_m"], np.hypot(starts["x_m"], starts["y_m"]))
    volts = dict(zip(result.field.names, result.field.voltages))
    v_end = np.array([volts[e] for e in rec["electrode"][landed]])
    q = beam_run.species.charge_C / constants.e  # in elementary charges (scipy.constants)
    expected = starts["energy_eV"][landed] + q * (v_start[landed] - v_end)
    np.testing.assert_allclose(rec["energy_eV"][landed], expected, atol=1e-6)
    # soft landing: about 5 eV on the sample biased 95 V above the 100 eV beam's source
    assert abs(rec["energy_eV"][landed].mean() - 5.0) < 0.2


def test_summary_has_the_figures_of_every_plane_and_electrode(soft_landing):
    s = soft_landing.summary()["c60"]
    plane = s["planes"]["before_sample"]
    for key in ("fraction", "centroid_x_m", "rms_radius_m", "rms_divergence_x_rad",
                "emittance_x_m_rad", "norm_emittance_x_m_rad", "energy_std_eV", "time_mean_s",
                "time_std_s"):
        assert math.isfinite(plane[key]), key
    land = s["landing"]["sample"]
    assert land["energy_min_eV"] <= land["energy_mean_eV"] <= land["energy_max_eV"]
    assert s["ledger_suspects"] == 0 and s["warning"] == ""


@pytest.mark.parametrize("config", sorted(p.name for p in CONFIGS.glob("*.toml")))
def test_every_bundled_config_runs_from_the_command_line(config, tmp_path, monkeypatch, capsys):
    """`tracer run` on each bundled config with a reduced ray count writes the report files; a
    gun's config, which has no [[beam]], is refused with one line that points to `tracer gun`."""
    from tracer.cli import main

    monkeypatch.setenv("TRACER_CACHE", str(tmp_path / "cache"))
    out = tmp_path / "out"
    setup = tracer.load(CONFIGS / config)
    code = main(["run", str(CONFIGS / config), "--out", str(out), "--rays", "20", "--quiet"])
    if not setup.beams:
        assert setup.gun is not None
        err = capsys.readouterr().err
        assert code == 2 and len(err.splitlines()) == 1 and "tracer gun" in err, err
        assert not out.exists()
        return
    assert code == 0
    text = capsys.readouterr().out
    assert text.count("energy ledger") == len(setup.beams)
    for name in ("result.h5", "landings.csv", "rays.png"):
        assert (out / name).stat().st_size > 0, name
    assert (out / "magnetic.png").exists() == bool(setup.magnetic.coils or setup.magnetic.profiles)
    if max(abs(e.voltage_V) if e.waveform is None else e.waveform.peak_V for e in setup.electrodes) > 1000:
        assert "CAUTION" in text


def test_readme_commands_are_the_ones_ci_runs():
    """The README's two set-up commands: the demo one and the test one, which .ci/run runs."""
    readme = (ROOT / "README.md").read_text()
    ci = (ROOT / ".ci" / "run").read_text()
    assert "pip install -e . && tracer demo" in readme
    test_command = "python3 -m pytest -q"
    assert f"pip install -e '.[test]' && {test_command}" in readme
    assert ci.strip().splitlines()[-1] == test_command


def test_demo_runs_into_a_fresh_folder(tmp_path, monkeypatch, capsys):
    from tracer.cli import main

    monkeypatch.setenv("TRACER_CACHE", str(tmp_path / "cache"))
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out), "--rays", "30", "--quiet"]) == 0
    text = capsys.readouterr().out
    assert str(out.resolve()) in text
    assert (out / "result.h5").is_file()
    # `tracer show` prints the same summary again from the result file and redraws the pictures
    pictures = tmp_path / "pictures"
    assert main(["show", str(out / "result.h5"), "--out", str(pictures)]) == 0
    shown = capsys.readouterr().out
    assert "landed on electrodes" in shown and "energy ledger" in shown
    assert (pictures / "rays.png").stat().st_size > 0
    # a second demo into the same (now full) folder is refused: exit 2, one line
    assert main(["demo", "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not empty" in err[0]


def test_demo_without_out_picks_the_next_fresh_folder(tmp_path, monkeypatch, capsys):
    from tracer.cli import main

    monkeypatch.setenv("TRACER_CACHE", str(tmp_path / "cache"))
    monkeypatch.chdir(tmp_path)
    (tmp_path / "tracer-demo").mkdir()
    assert main(["demo", "--rays", "10", "--quiet"]) == 0
    assert (tmp_path / "tracer-demo-2" / "result.h5").is_file()
    assert not any((tmp_path / "tracer-demo").iterdir())


def test_run_outputs_are_the_files_and_every_picture(soft_landing, tmp_path):
    """write_run_outputs returns each file it wrote, the pictures drawn beside the files included,
    and leaves no temporary file behind; the pictures are those drawn one by one; the manifest
    names them all."""
    files = write_run_outputs(soft_landing, tmp_path / "out")
    planes = soft_landing.beams["c60"].planes
    assert [f.name for f in files] == (["result.h5", "landings.csv", "rays.png", "landing_energy.png",
                                        "landing_positions.png"]
                                       + [f"{kind}_c60_{plane}.png" for plane in planes
                                          for kind in ("phase", "spot", "arrival")]
                                       + ["run-files.txt"])
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(f.name for f in files)
    assert (tmp_path / "out" / "run-files.txt").read_text().splitlines()[1:] == sorted(f.name for f in files[:-1])
    alone = run_figures(soft_landing.field, list(soft_landing.beams.values()), tmp_path / "alone",
                        title=soft_landing.setup.title)
    for picture in alone:
        assert picture.read_bytes() == (tmp_path / "out" / picture.name).read_bytes(), picture.name


def test_beside_runs_the_job_in_a_child_and_hands_back_its_result_or_error():
    with beside(os.getpid) as done:
        here = os.getpid()
    assert done[0] != here

    def fails():
        raise ValueError("no such electrode")

    with pytest.raises(ValueError, match="no such electrode"):
        with beside(fails):
            pass
    with pytest.raises(TypeError, match="could not send back its result"):
        with beside(lambda: fails):         # a function is not a JSON value
            pass

    def fails_in_our_own_way():
        raise StoreError("old.h5: not a tracer result file")

    with pytest.raises(RuntimeError, match="StoreError: old.h5: not a tracer result file"):
        with beside(fails_in_our_own_way):
            pass


def test_an_interrupted_block_interrupts_the_child_and_leaves_no_temporary_file(tmp_path):
    """Ctrl-C during the block: the child's atomic write is cut short and cleaned up too."""
    def slow_write():
        with atomic_path(tmp_path / "slow.png") as tmp:
            tmp.write_bytes(b"half a picture")
            time.sleep(60)

    t0 = time.perf_counter()
    with pytest.raises(KeyboardInterrupt):
        with beside(slow_write):
            while not any(tmp_path.iterdir()):      # the child's temporary file exists
                time.sleep(0.01)
            raise KeyboardInterrupt
    assert time.perf_counter() - t0 < 30
    assert list(tmp_path.iterdir()) == []



def test_ctrl_c_held_back_while_forking_stops_the_child(tmp_path, monkeypatch):
    """A Ctrl-C that comes while beside holds the signals back around its fork is raised where the
    child is stopped and waited for: the job does not run on in a child nobody waits for.  Another
    thread is alive meanwhile, as numba's are after a trace: the signal goes to it, and Python's
    handler would interrupt this thread at once, before the child's pid is kept."""
    fork, done = os.fork, tmp_path / "done"
    other = threading.Thread(target=threading.Event().wait, args=(30,), daemon=True)
    other.start()

    def fork_then_ctrl_c():
        pid = fork()
        if pid:                                    # the parent, SIGINT still held back
            os.kill(os.getpid(), signal.SIGINT)
        return pid

    def job():
        time.sleep(0.5)
        done.write_text("the job ran on")

    monkeypatch.setattr(os, "fork", fork_then_ctrl_c)
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)   # a shell's background job ignores it
    try:
        with pytest.raises(KeyboardInterrupt):
            with beside(job):
                pass
    finally:
        signal.signal(signal.SIGINT, previous)
        monkeypatch.undo()
    time.sleep(1.0)
    assert not done.exists()


CTRL_C = """
import sys, time
from pathlib import Path
from tracer.beside import beside
from tracer.store.atomic import atomic_path

out = Path(sys.argv[1])

def slow(name):
    with atomic_path(out / name) as tmp:
        tmp.write_bytes(b"half a file")
        time.sleep(60)

with beside(lambda: slow("picture.png")):
    slow("result.h5")
"""


def test_ctrl_c_to_both_processes_leaves_no_file(tmp_path):
    """Ctrl-C at a terminal reaches the whole process group: the parent and the child of `beside`
    are both in the middle of an atomic write, and neither leaves a file behind."""
    out = tmp_path / "out"
    out.mkdir()
    proc = subprocess.Popen([sys.executable, "-c", CTRL_C, str(out)], start_new_session=True,
                            preexec_fn=as_from_a_terminal,
                            stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while len(list(out.iterdir())) < 2 and time.monotonic() < deadline:   # both temporary files
        time.sleep(0.02)
    assert len(list(out.iterdir())) == 2
    try:
        os.killpg(proc.pid, signal.SIGINT)
        _, err = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert proc.returncode != 0 and "KeyboardInterrupt" in err
    assert list(out.iterdir()) == []
