"""Tests of the result files: openPMD HDF5 (result.h5) and the landings CSV."""

import csv
import dataclasses
import io
import json
import subprocess
import sys

import h5py
import numpy as np
import pytest
from scipy import constants

from tracer.beam import BeamRun, trace
from tracer.cli import main
from tracer.config import load
from tracer.fieldmap import solve_basis
from tracer.store import StoreError
from tracer.store.landings_csv import LANDING_COLUMNS, read_landings_csv, write_landings_csv
from tracer.store.maps_file import write_maps
from tracer.store.openpmd import read_component
from tracer.store.result_file import read_result, write_result
from tracer.sources import read_rays_csv

AXIAL = """
title = "two tubes and a target (test geometry, illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 30.0]
r_mm = 6.0
cell_mm = 0.5
edges = "ground"
[[electrode]]
name = "entry"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [0.0, 10.0]
r_mm = [3.0, 3.5]
[[electrode]]
name = "focus-lens"
voltage_V = 60.0
[[electrode.rect]]
z_mm = [12.0, 20.0]
r_mm = [3.0, 3.5]
[[electrode]]
name = "target"
voltage_V = -20.0
[[electrode.rect]]
z_mm = [27.0, 28.0]
r_mm = [0.0, 6.0]
[[beam]]
name = "protons"
species = "p+"
energy_eV = 100.0
energy_sigma_eV = 0.5
count = 24
seed = 4
start_z_mm = 2.0
radius_mm = 2.0
half_angle_deg = 8.0
current_A = 1e-9
[[beam]]
name = "argon-ions"
species = "40Ar+"
energy_eV = 50.0
count = 6
seed = 5
start_z_mm = 2.0
radius_mm = 1.0
[[plane]]
name = "mid"
z_mm = 11.0
[[plane]]
name = "behind.target"
z_mm = 29.0
direction = "forward"
crossing = "last"
"""

PLANAR = """
title = "deflector plates (test geometry, illustrative)"
[domain]
symmetry = "planar"
z_mm = [0.0, 20.0]
y_mm = [-5.0, 5.0]
cell_mm = 0.5
edges = { z_min = "open", z_max = "open", y_min = "ground", y_max = "ground" }
[[electrode]]
name = "plate+"
voltage_V = 12.0
[[electrode.rect]]
z_mm = [6.0, 14.0]
y_mm = [3.0, 3.5]
[[electrode]]
name = "plate-"
voltage_V = -12.0
[[electrode.rect]]
z_mm = [6.0, 14.0]
y_mm = [-3.5, -3.0]
[[beam]]
name = "electrons"
species = "e-"
energy_eV = 40.0
count = 10
seed = 2
start_z_mm = 1.0
radius_mm = 1.5
half_angle_deg = 3.0
[[plane]]
name = "exit"
z_mm = 16.0
"""


def traced(tmp_path_factory, text):
    """A real solve and trace of a small setup, loaded from a config file."""
    path = tmp_path_factory.mktemp("config") / "setup.toml"
    path.write_text(text)
    setup = load(path)
    field = solve_basis(setup).combine()
    runs = [trace(field, beam, planes=setup.planes, keep_paths=3) for beam in setup.beams]
    return setup, field, runs


@pytest.fixture(scope="module", params=["axial", "planar"])
def result(request, tmp_path_factory):
    setup, field, runs = traced(tmp_path_factory, AXIAL if request.param == "axial" else PLANAR)
    path = write_result(tmp_path_factory.mktemp("out") / "result.h5", field, runs, setup=setup,
                        author="tracer tests <tests@example.org>")
    return setup, field, runs, path


def _checked(path):
    """The openpmd-validator's report on a file, asserting it found nothing wrong."""
    run = subprocess.run([sys.executable, "-m", "openpmd_validator.check_h5", "-i", str(path)],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "Result: 0 Errors and 0 Warnings." in run.stdout, run.stdout
    return run.stdout


def test_result_file_passes_the_openpmd_checker(result):
    """The openPMD 1.1.0 checker of the openpmd-validator package reports no errors or warnings."""
    *_, path = result
    report = _checked(path)
    assert "found 2 meshes" in report
    species = 2 * len(result[2]) + sum(len(r.planes) for r in result[2])
    assert f"found {species} particle species" in report


def test_the_traces_exercise_the_layout(result):
    """The traces behind these tests have landed rays, plane crossings and kept paths."""
    setup, _, runs, _ = result
    records = np.concatenate([r.records for r in runs])
    assert (records["status"] == "landed").any() and (records["status"] != "landed").any()
    assert all(len(r.crossings) > 0 and len(r.paths) > 0 for r in runs)


def assert_same_run(a, b):
    """Two BeamRuns hold the same bits: every array field, the ledger report, the plain fields."""
    assert type(b) is BeamRun
    assert b.name == a.name and b.species == a.species and b.planes == a.planes
    assert b.symmetry == a.symmetry
    assert b.crossing_rules == a.crossing_rules
    for key in ("starts", "records", "crossings"):
        x, y = getattr(a, key), getattr(b, key)
        assert x.dtype == y.dtype, key
        for name in x.dtype.names:
            assert np.array_equal(x[name], y[name], equal_nan=x.dtype[name].kind == "f"), (key, name)
    assert len(b.paths) == len(a.paths)
    for p, q in zip(a.paths, b.paths):
        assert p.dtype == q.dtype and np.array_equal(p, q)
    assert b.energy_scale_eV.dtype == a.energy_scale_eV.dtype
    assert np.array_equal(b.energy_scale_eV, a.energy_scale_eV)
    for key in ("worst_eV", "worst_relative", "threshold", "suspects"):
        assert getattr(b.ledger, key) == getattr(a.ledger, key), key
    assert np.array_equal(b.ledger.suspect_rays, a.ledger.suspect_rays)
    assert b.ledger.warning == a.ledger.warning


def test_round_trip_is_bit_exact(result):
    setup, field, runs, path = result
    back = read_result(path)
    assert back.title == setup.title and back.geometry_hash == setup.geometry_hash()
    assert back.config_text == setup.source.read_text()
    assert back.grid == field.grid and back.field.names == field.names
    assert back.field.voltages == field.voltages
    assert list(back.beams) == [r.name for r in runs]
    for run in runs:
        assert_same_run(run, back.beams[run.name])
    stored = {r.name: r.summary() for r in runs}
    assert json.dumps(back.summaries, sort_keys=True) == json.dumps(stored, sort_keys=True)
    # a beam read back is a whole BeamRun: its summary is the one the traced run gave
    again = {name: b.summary() for name, b in back.beams.items()}
    assert json.dumps(again, sort_keys=True) == json.dumps(stored, sort_keys=True)
    zz, rr = np.meshgrid(field.grid.z, field.grid.r, indexing="ij")
    assert np.array_equal(back.phi, field.potential(zz, rr))
    ez, er = field.field(zz, rr)
    assert np.array_equal(back.e_z, ez) and np.array_equal(back.e_r, er)
    # the rebuilt interpolant between the nodes agrees with the traced one to rounding
    rng = np.random.default_rng(1)
    z = rng.uniform(field.grid.z0, field.grid.z1, 500)
    r = rng.uniform(field.grid.r0, field.grid.r1, 500)
    scale = max(abs(v) for v in field.voltages)
    assert np.abs(back.field.potential(z, r) - field.potential(z, r)).max() < 1e-12 * scale


def test_weighting_is_particles_per_ray(result):
    """weighting = ray current × 1 s / e for a beam with current_A, else 1 (openPMD 1.1.0
    weighting: real particles per macro-particle; e from scipy.constants)."""
    setup, _, runs, path = result
    with h5py.File(path, "r") as f:
        for beam, run in zip(setup.beams, runs):
            species = next(g for g in f["/data/0/particles"].values()
                           if g.attrs["beam"].decode() == run.name and b"start" in g.attrs["comment"])
            w = read_component(species["weighting"])
            expected = beam.current_A / beam.count / constants.e if beam.current_A else 1.0
            assert np.allclose(w, expected, rtol=1e-15, atol=0) and len(w) == beam.count


def test_a_run_with_suspects_and_rays_traced_again_reads_back_whole(tmp_path_factory):
    """A strict ledger threshold (suspect rays and a warning) and a first-pass crossing buffer of
    one per ray (rays that cross both planes are traced again): the BeamRun read back carries
    both, every crossing, and the same summary."""
    setup, field, _ = traced(tmp_path_factory, AXIAL)
    planes = (dataclasses.replace(setup.planes[0], name="early", z_m=5e-3), setup.planes[0])
    run = trace(field, setup.beams[0], planes=planes, ledger_threshold=1e-16, max_crossings=1)
    assert run.ledger.suspects > 0
    assert (np.bincount(run.crossings["ray"]) > 1).any()
    path = write_result(tmp_path_factory.mktemp("out") / "result.h5", field, [run], setup=setup)
    back = read_result(path).beams[run.name]
    assert_same_run(run, back)
    assert back.summary()["warning"] == run.summary()["warning"]


def test_records_follow_the_openpmd_standard(result):
    """Units, constant records and codes as the openPMD standard 1.1.0 describes them."""
    setup, field, runs, path = result
    run = runs[0]
    with h5py.File(path, "r") as f:
        assert f.attrs["particlesPath"] == b"particles/"
        e = f["/data/0/meshes/E"]
        side = "r" if field.grid.symmetry == "axial" else "y"
        assert sorted(e) == sorted(["z", side])
        assert list(e.attrs["unitDimension"]) == [1, 1, -3, -1, 0, 0, 0]          # V/m
        phi = f["/data/0/meshes/phi"]
        assert list(phi.attrs["unitDimension"]) == [2, 1, -3, -1, 0, 0, 0]        # V
        if side == "r":
            assert phi.shape == (1, field.grid.nr, field.grid.nz) and phi.attrs["geometry"] == b"thetaMode"
        parts = f["/data/0/particles"]
        final = parts[f"{run.name}_final"]
        assert final["charge"].attrs["value"] == run.species.charge_C        # a constant record
        assert final["charge"].attrs["shape"][0] == len(run.records)
        assert list(final["momentum"].attrs["unitDimension"]) == [1, 1, -1, 0, 0, 0, 0]
        assert final["kineticEnergy"].attrs["unitSI"] == constants.e
        assert final["ledgerError"].attrs["unitSI"] == constants.e
        codes = {int(k): v for k, v in json.loads(final["status"].attrs["codes"]).items()}
        status = final["status"][()] if isinstance(final["status"], h5py.Dataset) else \
            np.full(len(run.records), final["status"].attrs["value"])
        assert [codes[c] for c in status] == list(run.records["status"])
        names = json.loads(final["electrode"].attrs["codes"])
        assert set(names.values()) == set(field.names) | {""}
        at = {g.attrs["plane"].decode(): g for g in parts.values()
              if g.attrs["beam"].decode() == run.name and "plane" in g.attrs}
        assert sorted(at) == sorted(run.planes)
        for plane, rows in at.items():
            assert rows["particlePatches/numParticles"][0] == len(run.at_plane(plane))
        if side == "r":     # names made openPMD-safe (a-Z0-9_); no ray gets behind the target
            assert parts["argon_ions_at_behind_target/particlePatches/numParticles"][0] == 0
        assert json.loads(f["tracer/result"].attrs["names"]) == list(field.names)


def test_landings_csv_round_trip(result, tmp_path):
    _, _, runs, _ = result
    path = write_landings_csv(tmp_path / "landings.csv", runs)
    header = path.read_text().splitlines()[0].split(",")
    assert header == [name for name, _ in LANDING_COLUMNS]
    assert {"x_mm", "t_ns", "energy_eV", "ledger_eV"} <= set(header)
    back = read_landings_csv(path)
    assert len(back) == sum(len(r.records) for r in runs)
    start = 0
    for run in runs:
        rows = back[start:start + len(run.records)]
        start += len(run.records)
        rec = run.records
        assert (rows["beam"] == run.name).all()
        assert np.array_equal(rows["ray"], rec["ray"])
        assert list(rows["status"]) == list(rec["status"]) and list(rows["electrode"]) == list(rec["electrode"])
        for column, values in (("x_mm", rec["x_m"] * 1e3), ("z_mm", rec["z_m"] * 1e3),
                               ("r_mm", np.hypot(rec["x_m"], rec["y_m"]) * 1e3),
                               ("t_ns", rec["time_s"] * 1e9), ("energy_eV", rec["energy_eV"]),
                               ("ledger_eV", rec["ledger_eV"]), ("start_energy_eV", run.starts["energy_eV"]),
                               ("incidence_deg", rec["incidence_deg"]),
                               ("normal_energy_eV", rec["normal_energy_eV"]),
                               ("weight_A", np.where(rec["weight_A"] > 0, rec["weight_A"], np.nan))):
            assert np.array_equal(rows[column], values, equal_nan=True), column   # 17 digits: exact
        u = np.stack([rows["ux"], rows["uy"], rows["uz"]])
        moving = np.hypot(np.hypot(rec["px"], rec["py"]), rec["pz"]) > 0
        assert np.allclose(np.linalg.norm(u, axis=0)[moving], 1.0, rtol=1e-14, atol=0)
    by_name = write_landings_csv(tmp_path / "by_name.csv", {r.name: r for r in runs})
    assert by_name.read_bytes() == path.read_bytes()


@pytest.mark.parametrize("result", ["axial"], indirect=True)   # its two beams, one with a current
def test_landings_csv_reads_back_as_the_start_rays_of_a_next_stage(result, tmp_path):
    """The rays stopped on a plane, with their current, start a next stage (issue 22); a file
    with none is refused by name."""
    _, _, runs, _ = result
    protons = runs[0]                                   # the beam with a current
    assert (protons.records["weight_A"] > 0).all()
    rec = protons.records.copy()
    rec["status"][::3] = "plane"
    path = write_landings_csv(tmp_path / "landings.csv", [dataclasses.replace(protons, records=rec), runs[1]])
    rays = read_rays_csv(path)
    stopped = rec[rec["status"] == "plane"]
    assert len(rays) == len(stopped)
    for field in ("x_m", "y_m", "z_m", "energy_eV", "weight_A"):
        assert np.allclose(rays[field], stopped[field], rtol=1e-15, atol=0.0), field
    p = np.sqrt(stopped["px"] ** 2 + stopped["py"] ** 2 + stopped["pz"] ** 2)
    assert np.allclose(rays["uz"], stopped["pz"] / p, rtol=1e-14, atol=0)
    write_landings_csv(tmp_path / "none.csv", runs[1:])   # no ray of it stopped on a plane
    with pytest.raises(ValueError, match="no ray stopped on a plane"):
        read_rays_csv(tmp_path / "none.csv")


def test_landings_csv_cells_are_those_of_the_csv_module(result, tmp_path):
    """Text cells that hold a comma, a quote or a line end are quoted exactly as the csv module's
    writer quotes them, and every float has 17 significant digits (the reference is
    csv.writer row by row, Python standard library)."""
    _, _, runs, _ = result
    run = runs[0]
    rec = run.records.astype([(n, "U24" if n == "electrode" else run.records.dtype[n])
                              for n in run.records.dtype.names])
    rec["electrode"][:4] = ["a,b", 'say "hi"', "", "two\nlines"]
    rec["x_m"][:3] = [np.nan, -0.0, np.inf]
    odd = dataclasses.replace(run, name='beam, "one"', records=rec)
    path = write_landings_csv(tmp_path / "landings.csv", [odd, *runs[1:]])
    expected = io.StringIO(newline="")
    writer = csv.writer(expected)
    writer.writerow([name for name, _ in LANDING_COLUMNS])
    for r in [odd, *runs[1:]]:
        rec, p = r.records, np.sqrt(r.records["px"] ** 2 + r.records["py"] ** 2 + r.records["pz"] ** 2)
        p = np.where(p > 0, p, 1.0)
        for k in range(len(rec)):
            floats = [rec["x_m"][k] * 1e3, rec["y_m"][k] * 1e3, rec["z_m"][k] * 1e3,
                      np.hypot(rec["x_m"][k], rec["y_m"][k]) * 1e3, rec["time_s"][k] * 1e9,
                      rec["energy_eV"][k], rec["px"][k] / p[k], rec["py"][k] / p[k], rec["pz"][k] / p[k],
                      rec["ledger_eV"][k], r.starts["energy_eV"][rec["ray"][k]],
                      rec["incidence_deg"][k], rec["normal_energy_eV"][k],
                      rec["weight_A"][k] if rec["weight_A"][k] > 0 else np.nan]
            writer.writerow([r.name, int(rec["ray"][k]), rec["status"][k], rec["electrode"][k]]
                            + [format(float(v), ".17g") for v in floats])
    assert path.read_bytes() == expected.getvalue().encode()
    back = read_landings_csv(path)
    assert back["beam"][0] == 'beam, "one"'
    assert list(back["electrode"][:4]) == ["a,b", 'say "hi"', "", "two\nlines"]


def test_a_failed_csv_write_leaves_nothing(tmp_path):
    with pytest.raises(AttributeError):
        write_landings_csv(tmp_path / "landings.csv", [object()])
    assert list(tmp_path.iterdir()) == []


def test_unreadable_result_files_raise_store_error(result, tmp_path):
    setup, field, runs, path = result
    data = path.read_bytes()
    cut = tmp_path / "cut.h5"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(StoreError, match="cut.h5"):
        read_result(cut)
    text = tmp_path / "notes.h5"
    text.write_text("a text file, not HDF5\n")
    with pytest.raises(StoreError, match="notes.h5"):
        read_result(text)
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f["data/0/meshes/phi"] = np.zeros(3)
    with pytest.raises(StoreError, match="foreign.h5: not a tracer result file"):
        read_result(foreign)
    with pytest.raises(StoreError, match="missing.h5"):
        read_result(tmp_path / "missing.h5")
    broken = tmp_path / "broken.h5"
    broken.write_bytes(data)
    with h5py.File(broken, "a") as f:
        del f[f"data/0/particles/{runs[0].name.replace('-', '_')}_final/momentum"]
    with pytest.raises(StoreError, match="broken.h5"):
        read_result(broken)


def test_a_result_file_of_the_earlier_format_is_refused_with_advice(result, tmp_path, capsys):
    """A tracer-result-1 file (written before the ledger's energy scale was stored) is not read
    half: read_result says which format it is, and `tracer show` exits 2 with that one line."""
    *_, path = result
    old = tmp_path / "old.h5"
    old.write_bytes(path.read_bytes())
    with h5py.File(old, "a") as f:
        f["tracer/result"].attrs["format"] = "tracer-result-1"
        del f["tracer/result/energy_scale_eV"]
    with pytest.raises(StoreError, match="old.h5: a tracer result file of format tracer-result-1"):
        read_result(old)
    assert main(["show", str(old), "--out", str(tmp_path / "pictures")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "tracer-result-1" in err[0] and "write it again" in err[0]
    assert not (tmp_path / "pictures").exists()


def test_maps_and_other_csv_files_are_not_results(tmp_path):
    path = tmp_path / "planar.toml"
    path.write_text(PLANAR)
    maps = write_maps(tmp_path / "maps.h5", solve_basis(load(path)))
    with pytest.raises(StoreError, match="maps.h5: not a tracer result file"):
        read_result(maps)
    other = tmp_path / "other.csv"
    other.write_text("x_mm,y_mm\n1,2\n")
    with pytest.raises(StoreError, match="other.csv: not a landings file"):
        read_landings_csv(other)
    short = tmp_path / "short.csv"
    short.write_text(",".join(name for name, _ in LANDING_COLUMNS) + "\nb,0,landed\n")
    with pytest.raises(StoreError, match="short.csv: line 2"):
        read_landings_csv(short)


@pytest.mark.parametrize("author", ["", "A. Researcher <a.researcher@example.org>"])
def test_tracer_run_writes_files_the_checker_passes_with_an_author(tmp_path, monkeypatch, author):
    """`tracer run` as a user types it (no test-only arguments): result.h5 carries an ``author`` (the
    config's, else $TRACER_AUTHOR, else the login name), so the openPMD checker warns of nothing;
    the status and electrode codes are explained in the file."""
    from test_scans import lens_text

    monkeypatch.setenv("TRACER_CACHE", str(tmp_path / "cache"))
    monkeypatch.delenv("TRACER_AUTHOR", raising=False)
    config = tmp_path / "lens.toml"
    config.write_text((f"author = {author!r}\n" if author else "") + lens_text(count=20))
    assert main(["run", str(config), "--out", str(tmp_path / "out"), "--quiet"]) == 0
    path = tmp_path / "out" / "result.h5"
    _checked(path)
    with h5py.File(path, "r") as f:
        written = f.attrs["author"].decode()
        final = f["data/0/particles/protons_final"]
        codes = json.loads(final["status"].attrs["codes"])
        comment = final["status"].attrs["comment"].decode()
    import getpass

    assert written == (author or getpass.getuser())
    assert codes["-1"] == "" and "landed" in codes.values() and "codes" in comment


def test_author_from_the_environment(tmp_path, monkeypatch):
    from tracer.store.openpmd import default_author

    monkeypatch.setenv("TRACER_AUTHOR", "Lab 3 <lab3@example.org>")
    assert default_author() == "Lab 3 <lab3@example.org>"
