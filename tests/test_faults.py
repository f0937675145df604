"""Faults around a run: rays that start inside electrodes, a trapped ray, interrupts, determinism,
stale cache files, and no unpickling or evaluation of input.

One small solved setup (the ion trap ``TRAP`` of ``test_bad_input.py``) is run once through
``tracer run`` and reused; subprocesses only where a fresh interpreter is the point.
"""

import ast
import contextlib
import errno
import fcntl
import io
import os
import pty
import re
import select
import shutil
import signal
import struct
import subprocess
import sys
import termios
import time
from pathlib import Path
from types import SimpleNamespace

import h5py
import numpy as np
import pytest
from scipy import constants

import tracer
from test_bad_input import TRAP
from tracer import cache
from tracer import journal
from tracer.store import atomic, maps_file, openpmd, result_file
from tracer.cli import main
from tracer.pipeline import DEFAULT_RTOL
from terminal import as_from_a_terminal

PACKAGE = Path(tracer.__file__).resolve().parent
MAX_TIME_S = 20e-6  # [trace] max_time_us of TRAP


@pytest.fixture(scope="module")
def trap(tmp_path_factory):
    """TRAP run once through ``tracer run`` (in-process), with its own cache folder."""
    folder = tmp_path_factory.mktemp("trap")
    config = folder / "trap.toml"
    config.write_text(TRAP)
    out, cache_dir = folder / "out", folder / "cache"
    stdout = io.StringIO()
    with pytest.MonkeyPatch.context() as mp, contextlib.redirect_stdout(stdout):
        mp.setenv("TRACER_CACHE", str(cache_dir))
        code = main(["run", str(config), "--out", str(out), "--quiet"])
    return SimpleNamespace(code=code, config=config, out=out, cache=cache_dir, stdout=stdout.getvalue(),
                           setup=tracer.load(config), result=result_file.read_result(out / "result.h5"))


def test_rays_starting_inside_an_electrode_are_counted_not_fatal(trap):
    assert trap.code == 0
    assert ("beam buried: 3 rays of p+: p⁺, 1.00727647 u (CODATA proton mass), charge +1 e\n"
            "WARNING: 3 of 3 rays (100.0%) started inside an electrode and were not traced ('cap_in'): "
            "move the beam's start (start_z_mm, start_r_mm, its radius) out of the metal\n\n"
            "rays ended: inside 3\n") in trap.stdout
    assert trap.result.summaries["buried"]["status"]["inside"] == 3
    rec = trap.result.beams["buried"].records
    assert (rec["status"] == "inside").all() and (rec["electrode"] == "cap_in").all()
    assert (rec["steps"] == 0).all()
    # the other beams were traced all the same
    assert (trap.result.beams["spray"].records["status"] != "inside").all()


def test_a_trapped_ray_stops_at_max_time(trap):
    """An ion whose total energy lies below the potential of both end caps cannot reach either and
    bounces between them (conservation of energy; common practice).  It must end at max_time with
    status "time", having crossed the middle plane back and forth, with its energy conserved."""
    beam = trap.result.beams["trapped"]
    (rec,) = beam.records
    assert rec["status"] == "time" and rec["electrode"] == ""
    assert rec["time_s"] == pytest.approx(MAX_TIME_S, rel=1e-12, abs=0)
    crossings = beam.crossings
    assert len(crossings) >= 4                                  # at least two round trips
    assert (np.diff(np.sign(crossings["pz"])) != 0).all()       # each crossing reverses the last
    assert 2e-3 < rec["z_m"] < 20e-3                            # between the caps' inner faces
    # kinetic + potential energy is what it started with: 10 eV at z = 11 mm on the axis
    field = trap.result.field
    q = beam.species.charge_C / constants.e                     # elementary charges (scipy.constants)
    start_total = 10.0 + q * field.potential(np.array([11e-3]), np.array([0.0]))[0]
    end_total = rec["energy_eV"] + q * field.potential(np.array([rec["z_m"]]), np.array([0.0]))[0]
    assert end_total == pytest.approx(start_total, abs=1e-5)


def particle_data(path):
    """Every particle dataset of a result file (the openPMD particles and the ray records), as bytes."""
    data = {}
    with h5py.File(path, "r") as f:
        def collect(name, node):
            if isinstance(node, h5py.Dataset):
                data[name] = (node.dtype.str, node.shape, node[()].tobytes())
        f["/data/0/particles"].visititems(collect)
        f["/data/0/meshes"].visititems(collect)
    assert data
    return data


def test_runs_are_bit_identical_on_repeat_and_with_one_or_two_threads(trap, tmp_path):
    """The same config and seed give the same bits: again in fresh processes, solving afresh (no
    cache) with one and with two numba threads."""
    procs = {}
    for threads in (1, 2):
        env = {**os.environ, "NUMBA_NUM_THREADS": str(threads)}
        procs[threads] = subprocess.Popen(
            [sys.executable, "-m", "tracer", "run", str(trap.config), "--out", str(tmp_path / f"t{threads}"),
             "--quiet", "--no-cache"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    for proc in procs.values():
        assert proc.wait(timeout=180) == 0, proc.stderr.read()
    reference = particle_data(trap.out / "result.h5")
    landings = (trap.out / "landings.csv").read_bytes()
    for threads in procs:
        out = tmp_path / f"t{threads}"
        assert particle_data(out / "result.h5") == reference, threads
        assert (out / "landings.csv").read_bytes() == landings
    # and a second run in this process, from the cache
    again = tracer.run(trap.setup, cache_dir=trap.cache)
    for name, run in again.beams.items():
        assert run.records.tobytes() == trap.result.beams[name].records.tobytes(), name


def test_a_stale_cache_file_is_recomputed(trap, monkeypatch):
    """A cache file whose stored geometry hash no longer matches is not used but solved again,
    with a warning."""
    import tracer.solver

    path = cache.cache_file(trap.cache, trap.setup, rtol=DEFAULT_RTOL)
    good = maps_file.read_maps(path)
    assert cache.load_cached(trap.setup, trap.cache, rtol=DEFAULT_RTOL) is not None
    with h5py.File(path, "r+") as f:
        f["/tracer/maps"].attrs["geometry_hash"] = "0" * 64
    with pytest.warns(cache.CacheWarning, match="checksum"):
        assert cache.load_cached(trap.setup, trap.cache, rtol=DEFAULT_RTOL) is None
    solves = []
    solve = tracer.solver.solve_unit_maps
    monkeypatch.setattr(tracer.solver, "solve_unit_maps", lambda *a, **k: solves.append(a) or solve(*a, **k))
    with pytest.warns(cache.CacheWarning):
        maps = cache.cached_solve(trap.setup, trap.cache, rtol=DEFAULT_RTOL)
    assert len(solves) == 1
    assert maps.geometry_hash == trap.setup.geometry_hash()
    assert maps.unit.tobytes() == good.unit.tobytes()
    assert maps_file.read_maps(path).geometry_hash == trap.setup.geometry_hash()
    assert not [p for p in trap.cache.iterdir() if p.suffix == ".tmp"]


def leftovers(folder):
    """Temporary files of atomic writes left in a folder."""
    return [p.name for p in folder.iterdir() if p.name.endswith(".tmp")] if folder.exists() else []


def test_atomic_path_removes_its_temporary_on_an_interrupt(tmp_path):
    target = tmp_path / "result.h5"
    target.write_bytes(b"the complete old file")
    for fault in (KeyboardInterrupt, OSError):
        with pytest.raises(fault):
            with atomic.atomic_path(target) as tmp:
                tmp.write_bytes(b"half a new fi")
                raise fault()
        assert target.read_bytes() == b"the complete old file"
        assert [p.name for p in tmp_path.iterdir()] == ["result.h5"]
    with atomic.atomic_path(target) as tmp:
        tmp.write_bytes(b"new")
    assert target.read_bytes() == b"new" and [p.name for p in tmp_path.iterdir()] == ["result.h5"]


def test_ctrl_c_while_writing_the_result_keeps_the_old_file(trap, tmp_path, monkeypatch, capsys):
    """An interrupt in the middle of writing result.h5 exits 130 and leaves the earlier result."""
    out = tmp_path / "out"
    out.mkdir()
    (out / "result.h5").write_bytes((trap.out / "result.h5").read_bytes())
    before = (out / "result.h5").read_bytes()
    writes = []
    write_mesh = openpmd.write_mesh

    def interrupted(*args, **kwargs):
        writes.append(args)
        if len(writes) == 2:          # the field mesh: the potential is already in the file
            raise KeyboardInterrupt
        return write_mesh(*args, **kwargs)

    monkeypatch.setattr(openpmd, "write_mesh", interrupted)
    monkeypatch.setenv("TRACER_CACHE", str(trap.cache))
    assert main(["run", str(trap.config), "--out", str(out), "--quiet"]) == 130
    assert capsys.readouterr().err == "tracer: interrupted\n"
    assert len(writes) == 2
    assert (out / "result.h5").read_bytes() == before
    assert sorted(p.name for p in out.iterdir()) == ["result.h5"]


LONG = TRAP.replace("count = 1\n", "count = 20000\nenergy_sigma_eV = 1.0\n").replace(
    "max_time_us = 20.0", "max_time_us = 200.0")


def test_sigint_during_tracing_exits_130_and_leaves_no_half_file(trap, tmp_path):
    """Ctrl-C at a terminal while the rays are traced (20000 trapped rays: minutes of work)."""
    config = tmp_path / "long.toml"
    config.write_text(LONG)
    out = tmp_path / "out"
    master, slave = pty.openpty()     # a terminal for stderr, so the progress bar shows the stage
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))  # a bar needs columns
    proc = subprocess.Popen([sys.executable, "-m", "tracer", "run", str(config), "--out", str(out)],
                            env={**os.environ, "TRACER_CACHE": str(trap.cache)},
                            preexec_fn=as_from_a_terminal,
                            stdout=subprocess.PIPE, stderr=slave, stdin=subprocess.DEVNULL)
    os.close(slave)
    seen = b""
    try:
        # the signal goes once the bar counts a first chunk of rays: the kernels are compiled by
        # then (an empty numba cache compiles them after the bar appears, and a compile is not
        # interrupted), so what is timed is the stop between chunks
        first_chunk = re.compile(rb"tracing trapped[^\r\n]*\| *[1-9][0-9]*/20000")
        deadline = time.monotonic() + 400   # a stale numba cache recompiles first
        while not first_chunk.search(seen) and time.monotonic() < deadline:
            if select.select([master], [], [], 1.0)[0]:
                seen += os.read(master, 4096)
        assert first_chunk.search(seen), seen
        sent = time.monotonic()
        proc.send_signal(signal.SIGINT)
        code = proc.wait(timeout=60)
        waited = time.monotonic() - sent
        with contextlib.suppress(OSError):
            while select.select([master], [], [], 0.2)[0]:
                seen += os.read(master, 4096)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        os.close(master)
    assert code == 130, seen
    assert b"tracer: interrupted" in seen and b"Traceback" not in seen
    assert waited < 30               # the tracer stops within a chunk of rays, not at the end
    # killed while tracing: nothing was written, no half file, no temporary left behind
    assert not (out / "result.h5").exists() or result_file.read_result(out / "result.h5")
    assert leftovers(out) == [] and leftovers(trap.cache) == []


def test_a_closed_output_pipe_ends_quietly(trap):
    """``tracer check ... | head -0``: the reader went away; no traceback, no 'internal fault'."""
    proc = subprocess.Popen([sys.executable, "-m", "tracer", "check", str(trap.config)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == 141
    assert err == ""


UNSAFE_MODULES = {"pickle", "cPickle", "dill", "cloudpickle", "marshal", "shelve", "yaml", "jsonpickle"}
UNSAFE_CALLS = {"eval", "exec", "compile", "__import__"}


def test_nothing_is_unpickled_or_evaluated_from_input():
    """No module of the package imports a deserializer that runs code, calls eval/exec/compile
    (but on a string literal, which no input can reach), or lets numpy unpickle
    (allow_pickle=True); input is read as TOML, CSV and HDF5 data only."""
    found = []
    sources = sorted(PACKAGE.rglob("*.py"))
    assert len(sources) > 10
    for path in sources:
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name.split(".")[0] for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module.split(".")[0]]
            found += [f"{path.name}:{node.lineno} imports {n}" for n in names if n in UNSAFE_MODULES]
            if isinstance(node, ast.Call):
                literal = [type(a) for a in node.args] == [ast.Constant] and isinstance(node.args[0].value, str)
                if isinstance(node.func, ast.Name) and node.func.id in UNSAFE_CALLS and not literal:
                    found.append(f"{path.name}:{node.lineno} calls {node.func.id}")
                found += [f"{path.name}:{node.lineno} allow_pickle" for k in node.keywords
                          if k.arg == "allow_pickle" and not (isinstance(k.value, ast.Constant) and not k.value.value)]
    assert found == []


TWO_PLANES = TRAP.replace("[[plane]]\n", '[[plane]]\nname = "late"\nz_mm = 16.0\n\n[[plane]]\n', 1)


def test_a_rerun_replaces_the_whole_set_of_outputs(trap, tmp_path, monkeypatch, capsys):
    """The pictures of a plane no longer in the config go; the manifest names exactly the set."""
    config = tmp_path / "two.toml"
    config.write_text(TWO_PLANES)
    out = tmp_path / "out"
    monkeypatch.setenv("TRACER_CACHE", str(trap.cache))
    assert main(["run", str(config), "--out", str(out), "--quiet"]) == 0
    assert (out / "phase_spray_late.png").exists()
    assert main(["run", str(trap.config), "--out", str(out), "--quiet"]) == 0
    capsys.readouterr()
    names = sorted(p.name for p in out.iterdir())
    assert "phase_spray_late.png" not in names and "phase_spray_mid.png" in names
    manifest = (out / "run-files.txt").read_text().splitlines()
    assert manifest[0].startswith("# tracer run of 'ion trap") and sorted(manifest[1:] + ["run-files.txt"]) == names


KILLED_MID_SET = """
import os, signal, sys
from tracer.store import atomic
replace, moved = os.replace, []
def killed(src, dst):
    moved.append(dst)
    if len(moved) == 4:    # the manifest written, the old one set aside, one new file moved
        os.kill(os.getpid(), signal.SIGKILL)
    replace(src, dst)
atomic.os.replace = killed
with atomic.staged_folder(sys.argv[1], manifest="run-files.txt", heading="second") as staged:
    for name in ("a", "c", "d"):
        (staged / name).write_text("second")
"""


def test_a_set_killed_half_way_in_is_finished_by_the_next_writer(tmp_path):
    """kill -9 while a set of outputs is moved in: the folder holds no manifest until the next
    locked writer finishes the move (the old set's extra file removed)."""
    out = tmp_path / "out"
    with atomic.staged_folder(out, manifest="run-files.txt", heading="first") as staged:
        for name in ("a", "b"):
            (staged / name).write_text("first")
    (out / ".landings.csv.123.abcd.tmp").write_text("left by a killed writer")
    proc = subprocess.run([sys.executable, "-c", KILLED_MID_SET, str(out)])
    assert proc.returncode == -signal.SIGKILL
    assert not (out / "run-files.txt").exists()          # a half-moved set is never named
    with atomic.locked_folder(out, "run-files.txt"):
        assert sorted(p.name for p in out.iterdir()) == ["a", "c", "d", "run-files.txt"]
        assert {(out / n).read_text() for n in "acd"} == {"second"}
        assert (out / "run-files.txt").read_text() == "# second\na\nc\nd\n"


HOLD_LOCK = """
import sys, time
from tracer.store import atomic
with atomic.locked_folder(sys.argv[1], "run-files.txt"):
    print("locked", flush=True)
    time.sleep(60)
"""


def test_a_second_process_on_one_output_folder_stops_with_exit_2(trap, tmp_path, capsys):
    out = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", HOLD_LOCK, str(out)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline() == "locked\n"
        assert main(["run", str(trap.config), "--out", str(out), "--quiet"]) == 2
    finally:
        holder.kill()
        holder.wait()
    assert capsys.readouterr().err == (f"tracer: error: --out {out}: another tracer process is writing to "
                                       "this folder; wait for it to end or choose another --out\n")
    assert list(out.iterdir()) == []
    # an --out that is a file is refused before any work, as bad input
    (tmp_path / "file").write_text("x")
    assert main(["run", str(trap.config), "--out", str(tmp_path / "file"), "--quiet"]) == 2
    assert "cannot write there" in capsys.readouterr().err


def test_sigterm_is_handled_like_ctrl_c(trap, tmp_path):
    """SIGTERM exits 130 with one line; what a killed run left (a staging folder) is cleaned up first."""
    config = tmp_path / "long.toml"
    config.write_text(LONG)
    out = tmp_path / "out"
    dead = out / ".staged.1.dead.tmp"
    dead.mkdir(parents=True)
    (dead / "result.h5").write_text("half")
    proc = subprocess.Popen([sys.executable, "-m", "tracer", "run", str(config), "--out", str(out), "--quiet"],
                            env={**os.environ, "TRACER_CACHE": str(trap.cache)},
                            preexec_fn=as_from_a_terminal,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        while dead.exists() and time.monotonic() < deadline:   # gone: the folder is locked, SIGTERM handled
            time.sleep(0.05)
        assert not dead.exists()
        proc.send_signal(signal.SIGTERM)
        code = proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    err = proc.stderr.read()
    assert code == 130 and err == "tracer: interrupted\n", err
    assert list(out.iterdir()) == []


INTERRUPTED_IN_EXEC = """
import sys
import tracer.cli as cli


def interrupted(args, echo):
    exec("raise KeyboardInterrupt")   # as a Ctrl-C that lands while a dataclass builds its __init__


cli.COMMANDS["check"] = (interrupted, cli.COMMANDS["check"][1])
raise SystemExit(cli.main(["check", sys.argv[1]]))
"""


def test_an_interrupt_inside_exec_still_exits_130_under_python_m(trap, tmp_path):
    """A Ctrl-C or SIGTERM that lands while a module is imported is often raised inside ``exec`` of
    a string (dataclasses build their methods so); handled, ``python -m`` must still exit 130,
    not end by SIGINT (CPython notes such an interrupt as unhandled)."""
    (tmp_path / "interrupted_run.py").write_text(INTERRUPTED_IN_EXEC)
    path = os.pathsep.join([str(PACKAGE.parent), os.environ.get("PYTHONPATH", "")])
    proc = subprocess.run([sys.executable, "-m", "interrupted_run", str(trap.config)], cwd=tmp_path,
                          env={**os.environ, "PYTHONPATH": path}, capture_output=True, text=True, timeout=120)
    assert (proc.returncode, proc.stderr) == (130, "tracer: interrupted\n")


def _files(folder):
    """Every file of a folder and its bytes."""
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def _full_disk_line(path):
    return (f"tracer: error: no space left on the device: {path} was not written; the files there before "
            "are kept (free some space and run again)\n")


FULL_DISK = """
set -e
mount -t tmpfs -o size=$5k tmpfs "$1"
cp -a "$2" "$1/out"
head -c $6 /dev/zero > "$1/filler"
set +e
"$7" -m tracer run "$3" --out "$1/out" --quiet > /dev/null 2> "$4/stderr"
echo $? > "$4/code"
cp -a "$1/out" "$4/after"
"""


def test_a_full_disk_ends_in_one_line_and_keeps_the_earlier_outputs(trap, tmp_path):
    """A real full file system (a small tmpfs in a user and mount namespace of its own): the run
    that finds no room ends with one line naming the file and exit 1, no traceback, no crash;
    the earlier outputs in --out are untouched and no temporary file is left."""
    if shutil.which("unshare") is None or subprocess.run(["unshare", "-rm", "true"]).returncode != 0:
        pytest.skip("no unshare -rm here to mount a small file system")
    used_k = sum(-(-p.stat().st_size // 4096) * 4 for p in trap.out.iterdir())
    mount, seen = tmp_path / "small", tmp_path / "seen"
    mount.mkdir()
    seen.mkdir()
    proc = subprocess.run(["unshare", "-rm", "sh", "-c", FULL_DISK, "sh", str(mount), str(trap.out),
                           str(trap.config), str(seen), str(used_k + 512), str(448 * 1024), sys.executable],
                          env={**os.environ, "TRACER_CACHE": str(trap.cache)}, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    code, err = int((seen / "code").read_text()), (seen / "stderr").read_text()
    assert code == 1, err
    assert re.fullmatch(rf"tracer: error: no space left on the device: {re.escape(str(mount))}/out/\S+ was not "
                        r"written; the files there before are kept \(free some space and run again\)\n", err), err
    assert _files(seen / "after") == _files(trap.out)


def test_a_full_disk_while_a_picture_is_drawn_names_it(trap, tmp_path, monkeypatch, capsys):
    """The pictures drawn in the child process (tracer.beside) report a full disk as the parent's
    own writes do: one line naming the picture, exit 1, the earlier set kept whole."""
    import matplotlib.figure

    out = tmp_path / "out"
    shutil.copytree(trap.out, out)
    savefig = matplotlib.figure.Figure.savefig

    def full(self, fname, *args, **kwargs):
        if Path(fname).name.startswith(".landing_energy.png"):
            raise OSError(errno.ENOSPC, "No space left on device")
        return savefig(self, fname, *args, **kwargs)

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", full)
    monkeypatch.setenv("TRACER_CACHE", str(trap.cache))
    assert main(["run", str(trap.config), "--out", str(out), "--quiet"]) == 1
    assert capsys.readouterr().err == _full_disk_line(out / "landing_energy.png")
    assert _files(out) == _files(trap.out)


class _FillingUp:
    """A file handle on a disk that fills up: the first write takes half the bytes, the next fails."""

    def __init__(self, handle):
        self.handle, self.writes = handle, 0

    def write(self, data):
        self.writes += 1
        if self.writes > 1:
            raise OSError(errno.ENOSPC, "No space left on device")
        return self.handle.write(data[:len(data) // 2])

    def fileno(self):
        return self.handle.fileno()

    def close(self):
        self.handle.close()


def test_a_full_disk_while_a_scan_row_is_written(tmp_path):
    """The row cut short by a full disk names scan.journal; the rows before it are kept and
    resumed, the half line dropped."""
    sets = np.arange(3.0)[:, None]
    rows = journal.Rows(tmp_path, "a" * 64, ("a_V", "x"), sets)
    rows.add(0, np.array([0.0, 10.0]))
    rows._handle = _FillingUp(rows._handle)
    with pytest.raises(OSError) as caught:
        rows.add(1, np.array([1.0, 11.0]))
    rows.close()
    assert caught.value.errno == errno.ENOSPC and caught.value.filename == str(tmp_path / "scan.journal")
    assert (tmp_path / "scan.journal").read_text().endswith("0,0.0,10.0\n1,1.0")
    again = journal.Rows(tmp_path, "a" * 64, ("a_V", "x"), sets)
    again.close()
    assert again.resumed == 1 and again.done[0].tolist() == [0.0, 10.0]


def test_an_hdf5_file_on_a_full_disk_leaves_the_old_one(tmp_path, monkeypatch):
    """An HDF5 file is built in memory and written with plain writes (tracer.store.hdf5.new_file):
    a full disk is one OSError naming the file, the old file stays, no temporary is left."""
    from tracer.store import hdf5

    path = tmp_path / "scan.h5"
    path.write_bytes(b"the complete old file")

    def full(name, mode="r", *args, **kwargs):
        handle = open(name, mode, *args, **kwargs)
        handle.write = lambda data: (_ for _ in ()).throw(OSError(errno.ENOSPC, "No space left on device"))
        return handle

    monkeypatch.setattr(hdf5, "open", full, raising=False)
    with pytest.raises(OSError) as caught, hdf5.new_file(path) as f:
        f.create_dataset("x", data=np.arange(10))
    assert caught.value.errno == errno.ENOSPC and caught.value.filename == str(path)
    assert path.read_bytes() == b"the complete old file" and leftovers(tmp_path) == []


@pytest.mark.parametrize("where", ["a file", "below a file"])
def test_an_unusable_cache_is_one_warning_and_the_work_goes_on(trap, tmp_path, monkeypatch, capsys, where):
    """TRACER_CACHE naming a file (or a folder below one): the maps are solved and used without the
    cache, with one line saying so; nothing is written there."""
    blocker = tmp_path / "cache"
    blocker.write_text("not a folder")
    folder = blocker if where == "a file" else blocker / "sub"
    monkeypatch.setenv("TRACER_CACHE", str(folder))
    assert main(["solve", str(trap.config), "--out", str(tmp_path / "out"), "--quiet"]) == 0
    err = capsys.readouterr().err
    assert err.splitlines() == [f"WARNING: the maps cache {folder} cannot be used "
                                f"({'File exists' if where == 'a file' else 'Not a directory'}); going on "
                                "without it (set TRACER_CACHE to a folder you can write, or give --no-cache)"], err
    assert blocker.read_text() == "not a folder" and (tmp_path / "out" / "maps.h5").exists()


HOLD_ENTRY = """
import fcntl, os, sys
fd = os.open(sys.argv[1], os.O_RDWR | os.O_CREAT)
fcntl.flock(fd, fcntl.LOCK_EX)
print("locked", flush=True)
sys.stdin.readline()
"""


def test_a_cache_entry_is_written_by_one_process_at_a_time(trap, tmp_path, monkeypatch):
    """While another process holds a cache entry's lock (as it does while solving and writing the
    entry), a second one waits; once the entry is there it reads it instead of solving again."""
    import threading

    path = cache.cache_file(tmp_path, trap.setup, rtol=DEFAULT_RTOL)
    holder = subprocess.Popen([sys.executable, "-c", HOLD_ENTRY, str(path.with_suffix(".lock"))],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    solves, got = [], []
    monkeypatch.setattr(cache, "solve_basis", lambda *a, **k: solves.append(a))
    try:
        assert holder.stdout.readline() == "locked\n"
        waiting = threading.Thread(target=lambda: got.append(cache.cached_solve(trap.setup, tmp_path,
                                                                                  rtol=DEFAULT_RTOL)))
        waiting.start()
        waiting.join(0.5)
        assert waiting.is_alive() and got == []                         # held up by the lock
        shutil.copy(cache.cache_file(trap.cache, trap.setup, rtol=DEFAULT_RTOL), path)   # the entry written
        holder.stdin.write("\n")
        holder.stdin.flush()
        waiting.join(30)
    finally:
        holder.kill()
        holder.wait()
    assert not waiting.is_alive() and solves == []
    assert got[0].unit.tobytes() == maps_file.read_maps(path).unit.tobytes()


def test_the_memory_estimate_covers_what_a_traced_ray_holds(trap):
    """tracer.footprint's bytes per ray hold at least the records, the kept crossings and the
    kernel's arrays of a traced ray (its state, counts, time spent and the first pass's room for 16
    crossings, tracer.motion), and not more than four times as much."""
    from tracer import footprint
    from tracer.motion.bundles import COUNTS, ROW_LEN

    run = trap.result.beams["spray"]
    n = len(run.records)
    kernel = (ROW_LEN + COUNTS + 16 * (1 + ROW_LEN) + 2) * 8
    held = run.records.itemsize + run.starts.itemsize + run.crossings.nbytes / n + kernel
    estimate = footprint.RAY_BYTES + footprint.CROSSING_BYTES * len(trap.setup.planes)
    assert held <= estimate <= 4 * held, (held, estimate)


def test_crossings_too_many_to_keep_are_refused_in_one_line(trap, monkeypatch):
    """A trapped ray crosses its plane at every turn; when keeping every crossing would exceed the
    memory (here a limit of 1 kB), the trace stops after the first pass with one line keyed
    'plane' that counts them, instead of dying in the allocation."""
    from tracer import footprint

    beam = next(b for b in trap.setup.beams if b.name == "trapped")
    crossed = len(trap.result.beams["trapped"].crossings)
    assert crossed * footprint.CROSSING_BYTES > 1e3
    monkeypatch.setattr(footprint, "memory_limit", lambda: 1e3)
    with pytest.raises(tracer.ConfigError) as error:
        tracer.trace(trap.result.field, beam, planes=trap.setup.planes, rtol=DEFAULT_RTOL, max_time_s=MAX_TIME_S)
    assert error.value.key == "plane"
    assert f"the rays crossed the planes {crossed:,} times (one ray {crossed:,} times)" in str(error.value)
