"""Tests of voltage scans: rows against direct traces, executors, durable rows and resume."""

import concurrent.futures
import csv
import dataclasses
import json
import math
import multiprocessing
import os
import signal
import subprocess
import sys
import threading
import time
from decimal import Decimal
from pathlib import Path

import h5py
import numpy as np
import pytest

from tracer.beam import trace
from tracer.config import loads
from tracer.pipeline import solve
from tracer.measure import columns
from tracer.journal import CSV_NAME, JOURNAL_NAME, Rows, config_hash, read_h5
from tracer.scans import read_scan, scan, voltage_sets

from test_trace import THREE_TUBE

TARGET = """
[[electrode]]
name = "target"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [57.0, 58.0]
r_mm = [0.0, 4.5]
"""
ROOT = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")])}
SCAN = "[scan]\nlens = [500.0, 900.0, 3]\ntarget = [0.0, 400.0, 2]\n"


def lens_text(extra=SCAN, count=60):
    """The tests' three-tube lens (test_trace; lens tube at 700 V) with a target plate inside the
    exit tube, 1000 eV protons."""
    return THREE_TUBE.format(cell=0.5, volts=700.0, count=count) + TARGET + extra


def lens(extra=SCAN, source=None):
    return loads(lens_text(extra), source=source)


@pytest.fixture(scope="module")
def setup_maps():
    setup = lens()
    return setup, solve(setup)


@pytest.fixture(scope="module")
def serial(setup_maps):
    setup, maps = setup_maps
    return scan(setup, maps, workers=1)


def test_voltage_sets_are_the_product_of_the_ranges_first_slowest(setup_maps):
    names, sets = voltage_sets(setup_maps[0])
    assert names == ("lens", "target")
    assert sets.tolist() == [[500.0, 0.0], [500.0, 400.0], [700.0, 0.0], [700.0, 400.0],
                             [900.0, 0.0], [900.0, 400.0]]


def test_a_row_equals_a_direct_trace_at_its_voltages(setup_maps, serial):
    setup, maps = setup_maps
    row = serial.table[3]
    assert (row["lens_V"], row["target_V"]) == (700.0, 400.0)
    run = trace(maps.combine({"lens": 700.0, "target": 400.0}), setup.beams[0], planes=setup.planes,
                rtol=setup.trace.rtol, max_time_s=setup.trace.max_time_s)
    n = len(run.records)
    cross = run.at_plane("image")
    first = cross[cross["crossing"] == 0]
    assert row["transmission"] == len(first) / n
    spot = np.sqrt(np.mean((first["x_m"] - first["x_m"].mean()) ** 2
                           + (first["y_m"] - first["y_m"].mean()) ** 2))
    assert row["spot_rms_m"] == pytest.approx(spot, rel=1e-12, abs=0)
    assert row["tof_mean_s"] == pytest.approx(first["time_s"].mean(), rel=1e-12, abs=0)
    on_target = run.records[(run.records["status"] == "landed") & (run.records["electrode"] == "target")]
    assert row["target.landed"] == len(on_target) / n and len(on_target) > 0
    assert row["target.landing_mean_eV"] == pytest.approx(on_target["energy_eV"].mean(), rel=1e-12)
    # Energy conservation (common practice): a proton started with 1000 eV where the potential
    # is V0 (a fraction of a volt: the lens field reaching into the entry tube) lands on the 400 V
    # target with 1000 + V0 - 400 eV, to the tracer's ledger accuracy (1e-7 of the beam energy).
    field = maps.combine({"lens": 700.0, "target": 400.0})
    s = run.starts[np.isin(run.starts["ray"], on_target["ray"])]
    v0 = field.potential(s["z_m"], np.hypot(s["x_m"], s["y_m"]))
    assert 0.0 < v0.max() < 1.0
    assert row["target.landing_mean_eV"] == pytest.approx(1000.0 + v0.mean() - 400.0, abs=1e-4)
    assert np.isnan(row["entry.landing_mean_eV"]) == (row["entry.landed"] == 0)


def test_columns_are_prefixed_by_beam_and_plane_when_there_are_several():
    cols = columns(["a", "b"], ["p", "q"], ["e1"])
    assert cols[:2] == ("a.p.transmission", "a.p.spot_rms_m")
    assert "b.q.tof_mean_s" in cols and "a.e1.landing_mean_eV" in cols and "b.ledger_worst_eV" in cols
    one = columns(["a"], ["p"], ["e1"])
    assert one[0] == "transmission" and "e1.landed" in one and "landed" in one
    assert len(set(cols)) == len(cols)


def test_serial_process_pool_threads_and_dask_give_identical_tables(setup_maps, serial):
    setup, maps = setup_maps
    pooled = scan(setup, maps, workers=2)
    with concurrent.futures.ThreadPoolExecutor(2) as threads:
        threaded = scan(setup, maps, threads)
    assert pooled.table.dtype == serial.table.dtype
    assert pooled.table.tobytes() == serial.table.tobytes()
    assert threaded.table.tobytes() == serial.table.tobytes()
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        dask = scan(setup, maps, client.get_executor())
    assert dask.table.tobytes() == serial.table.tobytes()


@pytest.mark.parametrize("method", ["spawn", "forkserver"])
def test_a_plain_process_pool_gives_the_serial_table(setup_maps, serial, method):
    """A user's own ProcessPoolExecutor whose workers do not fork from this process (issue 22)."""
    setup, maps = setup_maps
    with concurrent.futures.ProcessPoolExecutor(2, mp_context=multiprocessing.get_context(method)) as pool:
        pooled = scan(setup, maps, pool)
    assert pooled.table.tobytes() == serial.table.tobytes()


def test_a_forking_process_pool_is_refused_before_any_work(setup_maps, tmp_path):
    """fork() after numba's threads ran breaks the pool; the scan says so in one line, writes nothing."""
    setup, maps = setup_maps
    with concurrent.futures.ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("fork")) as pool:
        with pytest.raises(ValueError, match="^executor: a ProcessPoolExecutor that forks its workers"):
            scan(setup, maps, pool, out=tmp_path / "scan")
    assert not (tmp_path / "scan").exists()


def _interrupt_after(k):
    def progress(done, total):
        if done >= k:
            raise KeyboardInterrupt
    return progress


def _csv_sets(folder):
    """The sets of the journal, the durable record of every finished set."""
    lines = (Path(folder) / JOURNAL_NAME).read_text().splitlines()
    return sorted(int(line.split(",")[0]) for line in lines[2:])


def test_an_interrupted_scan_resumed_yields_every_set_once(setup_maps, serial, tmp_path):
    setup, maps = setup_maps
    with pytest.raises(KeyboardInterrupt):
        scan(setup, maps, workers=1, out=tmp_path, progress=_interrupt_after(2))
    kept = _csv_sets(tmp_path)
    assert len(kept) >= 2 and len(kept) < 6 and len(set(kept)) == len(kept)
    table, index, _ = read_h5(tmp_path / "scan.h5")        # written on the interrupt
    assert sorted(index.tolist()) == kept and table.tobytes() == in_file_units(serial.table[index]).tobytes()
    again = scan(setup, maps, workers=1, out=tmp_path)
    assert again.resumed == len(kept)
    assert _csv_sets(tmp_path) == list(range(6))
    assert again.table.tobytes() == serial.table.tobytes()
    table, index, digest = read_h5(tmp_path / "scan.h5")
    assert index.tolist() == list(range(6)) and table.tobytes() == in_file_units(serial.table).tobytes()
    assert digest == again.config_hash


def test_a_resumed_scan_counts_only_the_sets_it_computes(setup_maps, serial, tmp_path):
    """The progress of a resumed scan runs over the sets left, so its rate and time left are right;
    read_scan gives the finished table back, bit for bit."""
    setup, maps = setup_maps
    with pytest.raises(KeyboardInterrupt):
        scan(setup, maps, workers=1, out=tmp_path, progress=_interrupt_after(2))
    kept = len(_csv_sets(tmp_path))
    partial = read_scan(tmp_path)
    assert partial.names == ("lens", "target") and partial.resumed == len(partial.table) == kept
    assert partial.table.tobytes() == serial.table[_csv_sets(tmp_path)].tobytes()
    calls = []
    again = scan(setup, maps, workers=1, out=tmp_path, progress=lambda done, total: calls.append((done, total)))
    left = 6 - kept
    assert calls == [(k, left) for k in range(left + 1)]
    whole = read_scan(tmp_path / CSV_NAME)
    assert whole.table.tobytes() == again.table.tobytes() == serial.table.tobytes()
    assert whole.config_hash == again.config_hash and whole.figures == serial.figures



HOLD_FOLDER = """
import sys, time
from tracer.store import atomic
with atomic.locked_folder(sys.argv[1], "run-files.txt"):
    print("locked", flush=True)
    time.sleep(60)
"""


def test_a_second_scan_into_a_folder_being_written_is_refused(setup_maps, serial, tmp_path, capsys):
    """tracer.scan locks its out folder for the whole scan, as the command line locks --out: a
    second scan into it (from the first one's own thread, another thread or the command line) or
    a scan into a folder another process holds stops at once with FolderBusy, before any work."""
    from tracer.cli import main
    from tracer.store.atomic import FolderBusy

    setup, maps = setup_maps
    out, config = tmp_path / "out", _config_file(tmp_path)
    refused, codes = [], []

    def second():
        try:
            scan(setup, maps, workers=1, out=out)
        except FolderBusy as exc:
            refused.append(str(exc))

    def progress(done, total):
        if done == 2:
            second()                                     # this thread
            other = threading.Thread(target=second)
            other.start()
            other.join()
            codes.append(main(["scan", str(config), "--out", str(out), "--quiet", "--workers", "1"]))

    first = scan(setup, maps, workers=1, out=out, progress=progress)
    assert refused == [f"[Errno 11] another tracer command or scan is writing to this folder: '{out}'"] * 2
    assert codes == [2] and "another tracer process is writing to this folder" in capsys.readouterr().err
    assert _csv_sets(out) == list(range(6))                 # each set once, from the first scan
    assert first.table.tobytes() == serial.table.tobytes()
    assert scan(setup, maps, workers=1, out=out).resumed == 6     # free again once it returned

    held = tmp_path / "held"
    holder = subprocess.Popen([sys.executable, "-c", HOLD_FOLDER, str(held)], stdout=subprocess.PIPE,
                              text=True, env=ENV)
    try:
        assert holder.stdout.readline() == "locked\n"
        with pytest.raises(FolderBusy, match="writing to this folder"):
            scan(setup, maps, workers=1, out=held)
    finally:
        holder.kill()
        holder.wait()
    assert list(held.iterdir()) == []


def test_read_scan_refuses_what_is_not_a_scan_table(tmp_path):
    from tracer.store import StoreError

    with pytest.raises(StoreError, match="cannot read"):
        read_scan(tmp_path)
    (tmp_path / "other.csv").write_text("a,b\n1,2\n")
    with pytest.raises(StoreError, match="not a tracer scan table"):
        read_scan(tmp_path / "other.csv")


def in_file_units(table):
    """An SI scan table as the scan files give it, read by numpy from the decimal text of the
    values scaled to mm, ns and mrad (the names' suffixes say which)."""
    names = [n.removesuffix("_m") + "_mm" if n.endswith("_m") else n.removesuffix("_s") + "_ns"
             if n.endswith("_s") else n.removesuffix("_rad") + "_mrad" if n.endswith("_rad") else n
             for n in table.dtype.names]
    out = np.zeros(len(table), dtype=[(n, float) for n in names])
    for si, name in zip(table.dtype.names, names):
        power = {"_mm": 3, "_ns": 9, "_mrad": 3}.get("_" + name.rpartition("_")[2], 0)
        out[name] = [float(Decimal(repr(float(v))).scaleb(power)) for v in table[si]]
    return out


def test_scan_csv_is_a_plain_table_in_set_order(setup_maps, serial, tmp_path):
    """scan.csv opens in any CSV reader as it is: the header first (set, the voltages and the
    figures, each named with its unit as the suffix, in landings.csv's units: mm, ns, eV; angles
    in mrad), rows in voltage-set order even when the sets finished in another order; its config
    hash is in scan.h5 and the journal.  read_scan gives the SI table back bit for bit."""
    setup, maps = setup_maps
    names, sets = voltage_sets(setup)
    rows = Rows(tmp_path, "e" * 64, serial.table.dtype.names, sets)
    for i in (3, 0, 5, 1):                              # sets finishing out of order
        rows.add(i, np.array(serial.table[i].tolist()))
    rows.close()
    rows.write_tables()
    with open(tmp_path / CSV_NAME, newline="") as handle:
        table = list(csv.DictReader(handle))
    assert [int(r["set"]) for r in table] == [0, 1, 3, 5]
    files = in_file_units(serial.table)
    assert list(table[0]) == ["set"] + list(files.dtype.names)
    assert all(c.endswith(("_V", "_mm", "_mrad", "_eV", "_ns")) or c.rpartition(".")[2] in BARE
               for c in files.dtype.names), files.dtype.names
    assert {"spot_rms_mm", "tof_mean_ns", "divergence_x_mrad", "landing_mean_eV"} <= set(table[0])
    assert [float(r["lens_V"]) for r in table] == serial.table["lens_V"][[0, 1, 3, 5]].tolist()
    for name in files.dtype.names:
        np.testing.assert_array_equal([float(r[name]) for r in table], files[name][[0, 1, 3, 5]])
    spot = np.array([float(r["spot_rms_mm"]) for r in table])
    assert np.allclose(spot, serial.table["spot_rms_m"][[0, 1, 3, 5]] * 1e3, rtol=1e-15, atol=0)
    tof = np.array([float(r["tof_mean_ns"]) for r in table])
    assert np.allclose(tof, serial.table["tof_mean_s"][[0, 1, 3, 5]] * 1e9, rtol=1e-15, atol=0)
    back = read_scan(tmp_path / CSV_NAME)
    assert back.table.tobytes() == serial.table[[0, 1, 3, 5]].tobytes() and back.config_hash == "e" * 64
    h5, index, digest = read_h5(tmp_path / "scan.h5")
    assert digest == "e" * 64 and h5.tobytes() == files[index].tobytes()
    with h5py.File(tmp_path / "scan.h5") as f:
        units = dict(zip(json.loads(f["tracer/scan"].attrs["columns"]), json.loads(f["tracer/scan"].attrs["units"])))
    assert list(units) == list(files.dtype.names)
    assert (units["lens_V"], units["spot_rms_mm"], units["tof_fwhm_ns"], units["divergence_y_mrad"],
            units["energy_std_eV"], units["transmission"]) == ("V", "mm", "ns", "mrad", "eV", "")
    # a journal written as scan.csv by an earlier tracer is taken over and resumes
    (tmp_path / CSV_NAME).unlink()
    old = (tmp_path / JOURNAL_NAME).read_text().replace("# tracer scan journal;", "# tracer scan table;")
    (tmp_path / JOURNAL_NAME).unlink()
    (tmp_path / CSV_NAME).write_text(old)
    again = Rows(tmp_path, "e" * 64, serial.table.dtype.names, sets)
    again.close()
    assert sorted(again.done) == [0, 1, 3, 5] and (tmp_path / JOURNAL_NAME).is_file()


def test_an_si_journal_of_an_earlier_tracer_resumes(setup_maps, serial, tmp_path):
    """A journal an earlier tracer wrote in SI units (spot_rms_m, tof_mean_s) resumes bit for bit and
    is rewritten in the files' units; an earlier SI scan.csv reads back as it is."""
    setup, _ = setup_maps
    _, sets = voltage_sets(setup)
    si = serial.table.dtype.names
    rows = "".join(f"{i}," + ",".join(repr(float(v)) for v in serial.table[i].tolist()) + "\n" for i in (0, 2))
    (tmp_path / JOURNAL_NAME).write_text(f"# tracer scan journal; config sha256 {'e' * 64}\n" + ",".join(("set",) + si)
                                         + "\n" + rows)
    again = Rows(tmp_path, "e" * 64, si, sets)
    again.close()
    assert again.resumed == 2 and again.table()[0].tobytes() == serial.table[[0, 2]].tobytes()
    lines = (tmp_path / JOURNAL_NAME).read_text().splitlines()
    assert lines[1] == ",".join(("set",) + in_file_units(serial.table).dtype.names) and len(lines) == 4
    assert read_scan(tmp_path).table.tobytes() == serial.table[[0, 2]].tobytes()
    (tmp_path / "old").mkdir()
    (tmp_path / "old" / CSV_NAME).write_text(",".join(("set",) + si) + "\n" + rows)
    assert read_scan(tmp_path / "old" / CSV_NAME).table.tobytes() == serial.table[[0, 2]].tobytes()


def test_file_units_read_back_bit_for_bit():
    """A value in mm or ns is the SI value's shortest decimal (Python's repr, round-trip by Steele &
    White 1990 / Gay's dtoa) with the point moved: it reads as the value times 1e3 or 1e9 within
    two roundings (float() of the text against the product), and moving the point back gives
    the SI float bit for bit, over 40 decades, subnormals, signed zeros and NaN."""
    from tracer.journal import _text, _value

    rng = np.random.default_rng(6)
    values = np.r_[rng.standard_normal(5000) * 10.0 ** rng.integers(-20, 20, 5000), 0.0, -0.0, 5e-324, 1e290]
    for power in (3, 9):
        texts = [_text(v, power) for v in values]
        normal = np.abs(values) >= np.finfo(float).tiny       # a subnormal's shortest decimal is coarse
        assert np.allclose(np.array([float(t) for t in texts])[normal], values[normal] * 10.0 ** power,
                           rtol=4e-16, atol=0)
        back = np.array([_value(t, power) for t in texts])
        assert back.tobytes() == values.tobytes()
    assert math.isnan(_value(_text(math.nan, 3), 3)) and _text(1.5, 0) == "1.5"
    assert _text(1.2345e-05, 3) == "0.012345" and _text(2.5e-9, 9) == "2.5" and _text(1e-20, 3) == "1e-17"
    with pytest.raises(ValueError):
        _value("1.2.3", 3)


BARE = ("transmission", "resolving_power", "landed", "left")
"""Scan figures without a unit: shares of the rays and a ratio (landings.csv has ux, uy, uz so)."""


class _LosingCluster(concurrent.futures.Executor):
    """Runs the first ``keep`` sets it is given and cancels the others, as a dask cluster does with
    every set when the workers holding the scattered maps have died."""

    def __init__(self, keep):
        self.keep, self.given = keep, 0

    def submit(self, fn, *args):
        future = concurrent.futures.Future()
        self.given += 1
        if self.given <= self.keep:
            future.set_running_or_notify_cancel()
            future.set_result(fn(*args))
        else:  # cancelled and marked so, as an executor's worker marks the futures it drops
            future.cancel()
            future.set_running_or_notify_cancel()
        return future


def test_a_cluster_that_loses_its_workers_stops_the_scan_in_one_line(serial, tmp_path, monkeypatch, capsys):
    """Exit code 3 and one line saying what happened; the finished rows are kept and the same
    command resumes."""
    import contextlib

    from tracer import executors
    from tracer.cli import CLUSTER_LOST, main

    monkeypatch.setattr(executors, "cluster_executor", lambda address: contextlib.nullcontext(_LosingCluster(2)))
    config, out = _config_file(tmp_path), tmp_path / "out"
    argv = ["scan", str(config), "--out", str(out), "--cache", str(tmp_path / "cache"), "--quiet"]
    assert main(argv + ["--scheduler", "tcp://127.0.0.1:1"]) == CLUSTER_LOST == 3
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [f"tracer: the executor cancelled voltage sets it had taken (a cluster that lost its "
                   f"workers, or an executor shut down); finished rows are kept, rerun to resume ({out / CSV_NAME})"]
    assert len(_csv_sets(out)) == 2
    assert main(argv + ["--workers", "1"]) == 0
    assert read_scan(out).table.tobytes() == serial.table.tobytes()



class _Held(concurrent.futures.Executor):
    """Runs every set as it is submitted and completes the futures when the last set is in: in
    reverse order, set 3 with an error of its own, or (``refuse``) refuses the fourth submit."""

    def __init__(self, how):
        self.how, self.held = how, []

    def submit(self, fn, *args):
        if self.how == "refuse" and len(self.held) == 3:
            raise RuntimeError("cannot schedule new futures after shutdown")
        future = concurrent.futures.Future()
        self.held.append((future, fn, args))
        if self.how == "refuse" or len(self.held) == 6:
            for f, work, given in reversed(self.held) if self.how != "refuse" else self.held[-1:]:
                if f.set_running_or_notify_cancel():
                    if self.how == "raise" and given[1] == 3:
                        f.set_exception(ValueError("a worker's own error"))
                    else:
                        f.set_result(work(*given))
        return future


@pytest.mark.parametrize("how, kept", [("reverse", [0, 1, 2, 3, 4, 5]), ("raise", [0, 1, 2, 4, 5]),
                                       ("refuse", [0, 1, 2])])
def test_an_executor_of_ones_own_finishes_or_stops_keeping_every_finished_row(setup_maps, serial, tmp_path,
                                                                              how, kept):
    """Sets completed in reverse give the serial table; a set's error stops the scan with that error,
    naming the set, after the rows of every other finished set are kept (also of those completed
    after it); a refused submit stops it after the sets run before; the same scan then resumes."""
    setup, maps = setup_maps
    if how == "reverse":
        result = scan(setup, maps, _Held(how), out=tmp_path)
        assert result.table.tobytes() == serial.table.tobytes()
    else:
        with pytest.raises((ValueError, RuntimeError)) as caught:
            scan(setup, maps, _Held(how), out=tmp_path)
        if how == "raise":
            assert str(caught.value) == "a worker's own error"
            assert caught.value.__notes__ == ["in voltage set 3 (700, 400)"]
    assert _csv_sets(tmp_path) == kept
    again = scan(setup, maps, workers=1, out=tmp_path)
    assert again.resumed == len(kept) and again.table.tobytes() == serial.table.tobytes()


def test_an_executor_shut_down_under_a_scan_stops_it_instead_of_hanging(setup_maps, serial, tmp_path):
    """A ThreadPoolExecutor shut down with cancel_futures=True cancels the queued sets without telling
    anyone waiting on them (the scan waited for ever on them before): the scan stops with ClusterLost
    and keeps the finished rows, and resumes."""
    from tracer.executors import ClusterLost

    setup, maps = setup_maps
    pool, outcome = concurrent.futures.ThreadPoolExecutor(1), []

    def progress(done, total):
        if done == 2:
            pool.shutdown(wait=False, cancel_futures=True)

    def scanning():
        try:
            scan(setup, maps, pool, out=tmp_path, progress=progress)
        except ClusterLost as exc:
            outcome.append(str(exc))

    worker = threading.Thread(target=scanning, daemon=True)
    worker.start()
    worker.join(120)
    assert not worker.is_alive(), "the scan hangs"
    assert outcome == ["the executor cancelled voltage sets it had taken (a cluster that lost its workers, "
                       "or an executor shut down); finished rows are kept, rerun to resume"]
    kept = _csv_sets(tmp_path)
    assert 2 <= len(kept) < 6
    again = scan(setup, maps, workers=1, out=tmp_path)
    assert again.resumed == len(kept) and again.table.tobytes() == serial.table.tobytes()


def test_a_line_cut_short_by_a_kill_is_dropped_on_resume(setup_maps, serial, tmp_path):
    setup, maps = setup_maps
    with pytest.raises(KeyboardInterrupt):
        scan(setup, maps, workers=1, out=tmp_path, progress=_interrupt_after(3))
    csv = tmp_path / JOURNAL_NAME
    whole = csv.read_text().splitlines()[-1]
    with open(csv, "a") as handle:            # what a process killed mid-write could leave
        handle.write(whole[: len(whole) - 3])
    again = scan(setup, maps, workers=1, out=tmp_path)
    assert again.resumed == 3 and _csv_sets(tmp_path) == list(range(6))
    assert again.table.tobytes() == serial.table.tobytes()


KILLER = """
import os, signal, sys
from tracer.config import load
from tracer.scans import scan
if __name__ == "__main__":
    def progress(done, total):
        if done >= 2:
            os.kill(os.getpid(), signal.SIGKILL)
    scan(load(sys.argv[1]), workers=int(sys.argv[3]), out=sys.argv[2], progress=progress,
         cache_dir=sys.argv[4])
"""


def _config_file(folder):
    path = Path(folder) / "lens.toml"
    path.write_text(lens_text())
    return path


def test_a_scan_killed_by_sigkill_resumes_without_loss(serial, tmp_path):
    config, out = _config_file(tmp_path), tmp_path / "out"
    script = tmp_path / "killer.py"
    script.write_text(KILLER)
    # The run only returns once every process holding its output pipes has ended: the pool's
    # workers must end with their killed parent.
    proc = subprocess.run([sys.executable, str(script), str(config), str(out), "2",
                           str(tmp_path / "cache")], capture_output=True, text=True, timeout=90, env=ENV)
    assert proc.returncode == -signal.SIGKILL, proc.stderr
    kept = _csv_sets(out)
    assert 2 <= len(kept) < 6
    setup = lens(source=config)
    again = scan(setup, solve(setup, cache_dir=tmp_path / "cache"), workers=1, out=out)
    assert again.resumed == len(kept) and _csv_sets(out) == list(range(6))
    assert again.table.tobytes() == serial.table.tobytes()


def test_ctrl_c_on_the_command_line_keeps_the_finished_sets(serial, tmp_path):
    config, out = _config_file(tmp_path), tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "tracer", "scan", str(config), "--out", str(out),
                             "--workers", "2", "--cache", str(tmp_path / "cache")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV,
                            start_new_session=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and not ((out / JOURNAL_NAME).exists() and len(_csv_sets(out)) >= 1):
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGINT)       # as Ctrl-C on a terminal: the scan and its workers
    _, err = proc.communicate(timeout=60)
    if proc.returncode == 0:          # it finished before the interrupt arrived: nothing to resume
        pytest.skip("the scan finished before SIGINT arrived")
    assert proc.returncode == 130 and "run the same command again" in err
    kept = _csv_sets(out)
    assert len(set(kept)) == len(kept) >= 1
    assert read_h5(out / "scan.h5")[1].tolist() == kept
    setup = lens(source=config)
    again = scan(setup, solve(setup, cache_dir=tmp_path / "cache"), workers=1, out=out)
    assert again.resumed == len(kept) and _csv_sets(out) == list(range(6))
    assert again.table.tobytes() == serial.table.tobytes()


def test_a_changed_config_starts_a_fresh_table(setup_maps, tmp_path):
    setup, maps = setup_maps
    first = scan(setup, maps, workers=1, out=tmp_path)
    same = scan(setup, maps, workers=1, out=tmp_path)
    assert same.resumed == 6 and same.table.tobytes() == first.table.tobytes()
    changed = dataclasses.replace(setup, beams=(dataclasses.replace(setup.beams[0], energy_eV=1100.0),))
    assert config_hash(changed, *voltage_sets(changed)) != first.config_hash
    fresh = scan(changed, maps, workers=1, out=tmp_path)
    assert fresh.resumed == 0 and _csv_sets(tmp_path) == list(range(6))
    aside = f"scan.{first.config_hash[:12]}"
    assert (tmp_path / f"{aside}.journal").exists()   # the old rows, set aside
    assert (tmp_path / f"{aside}.csv").exists()
    assert fresh.moved == tuple((f"scan{s}", f"{aside}{s}") for s in (".journal", ".csv", ".h5"))
    assert read_h5(tmp_path / "scan.h5")[2] == fresh.config_hash
    back = scan(setup, maps, workers=1, out=tmp_path)          # the first config's rows taken back
    assert back.resumed == 6 and back.table.tobytes() == first.table.tobytes()
    assert back.moved[-3:] == tuple((f"{aside}{s}", f"scan{s}") for s in (".journal", ".csv", ".h5"))
    again = f"scan.{fresh.config_hash[:12]}"
    assert sorted(p.name for p in tmp_path.glob("scan*")) == sorted(
        f"{stem}{s}" for stem in ("scan", again) for s in (".journal", ".csv", ".h5"))
    # 100 eV more at the start, 100 eV more on landing (energy conservation: common practice), up
    # to the spread of the start potentials (< 0.03 V) over the rays that reach the target
    assert fresh.table["target.landing_mean_eV"] == pytest.approx(first.table["target.landing_mean_eV"] + 100.0,
                                                                  abs=0.01)


def _rows(folder, config, done, n=4):
    """The journal of a one-electrode scan of ``n`` sets under config hash ``config * 64``, with
    the sets ``done`` finished (figure ``x`` = 10 + the set's index)."""
    rows = Rows(folder, config * 64, ("a_V", "x"), np.arange(float(n))[:, None])
    for i in done:
        if i not in rows.done:
            rows.add(i, np.array([float(i), 10.0 + i]))
    rows.close()
    return rows


def test_switching_configs_back_and_forth_loses_no_row(tmp_path):
    """A -> B -> A (stopped after one more set) -> B -> A: each config resumes its own rows
    wherever they were set aside, and no archive is written over."""
    a, b = f"scan.{'a' * 12}", f"scan.{'b' * 12}"
    assert _rows(tmp_path, "a", [0, 1]).resumed == 0
    assert _rows(tmp_path, "b", [0, 1, 2, 3]).moved == [("scan.journal", f"{a}.journal")]
    again = _rows(tmp_path, "a", [2])                  # resumed, then stopped after one more set
    assert again.resumed == 2 and again.moved == [("scan.journal", f"{b}.journal"), (f"{a}.journal", "scan.journal")]
    assert _rows(tmp_path, "b", []).resumed == 4
    final = _rows(tmp_path, "a", [3])                  # a resumed scan resumes again
    assert final.resumed == 3 and _csv_sets(tmp_path) == [0, 1, 2, 3]
    assert sorted(final.done) == [0, 1, 2, 3] and final.done[2].tolist() == [2.0, 12.0]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(["scan.journal", f"{b}.journal"])


def test_a_journal_is_never_set_aside_over_an_archive(tmp_path):
    """Archive names already taken (by files of the user's or an earlier tracer's): a journal
    that is no table, and the journal of another config, go to the next free name; all are kept."""
    a, b = f"scan.{'a' * 12}", f"scan.{'b' * 12}"
    (tmp_path / "scan.unknown.journal").write_text("an earlier file\n")
    (tmp_path / f"{b}.journal").write_text("someone's own file\n")
    (tmp_path / JOURNAL_NAME).write_text("not a journal\n")
    assert _rows(tmp_path, "a", [0]).moved == [("scan.journal", "scan.unknown.2.journal")]
    rows_b = _rows(tmp_path, "b", [1])                 # its archive name holds no journal of its: fresh
    assert rows_b.resumed == 0 and rows_b.moved == [("scan.journal", f"{a}.journal")]
    rows_a = _rows(tmp_path, "a", [])
    assert rows_a.resumed == 1 and rows_a.moved == [("scan.journal", f"{b}.2.journal"), (f"{a}.journal", "scan.journal")]
    assert (tmp_path / "scan.unknown.journal").read_text() == "an earlier file\n"
    assert (tmp_path / "scan.unknown.2.journal").read_text() == "not a journal\n"
    assert (tmp_path / f"{b}.journal").read_text() == "someone's own file\n"
    b_rows = (tmp_path / f"{b}.2.journal").read_text().splitlines()
    assert b_rows[0] == f"# tracer scan journal; config sha256 {'b' * 64}" and b_rows[2:] == ["1,1.0,11.0"]
    assert _csv_sets(tmp_path) == [0]


def test_rows_of_other_sets_are_refused_on_resume(setup_maps, tmp_path):
    setup, maps = setup_maps
    names, sets = voltage_sets(setup)
    header = ("lens_V", "target_V", "x")
    rows = Rows(tmp_path, "d" * 64, header, sets)
    rows.add(0, np.array([500.0, 0.0, 1.5]))
    rows.close()
    with open(tmp_path / JOURNAL_NAME, "a") as handle:
        handle.write("1,123.0,0.0,2.5\n")           # voltages that are not set 1's
        handle.write("0,500.0,0.0,9.0\n")           # set 0 a second time
    back = Rows(tmp_path, "d" * 64, header, sets)
    back.close()
    assert list(back.done) == [0] and back.done[0].tolist() == [500.0, 0.0, 1.5]
    assert _csv_sets(tmp_path) == [0]


def test_voltage_sets_from_a_csv_file(setup_maps, tmp_path):
    (tmp_path / "sets.csv").write_text("target_V,lens_V\n0,650.5\n250.0,800\n")
    setup = lens(extra='[scan]\ncsv = "sets.csv"\n', source=tmp_path / "lens.toml")
    names, sets = voltage_sets(setup)
    assert names == ("target", "lens") and sets.tolist() == [[0.0, 650.5], [250.0, 800.0]]
    result = scan(setup, setup_maps[1], workers=1)
    assert result.table.dtype.names[:2] == ("target_V", "lens_V")
    assert result.table["target.landing_mean_eV"][1] == pytest.approx(750.0, abs=0.5)  # 1000 eV - 250 V
    (tmp_path / "sets.csv").write_text("target_V,lens_V\n0,650.5\n250.0,801\n")   # a changed set
    assert config_hash(setup, *voltage_sets(setup)) != result.config_hash
