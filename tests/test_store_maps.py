"""Tests of the openPMD maps files and of the maps cache."""

import subprocess
import sys
import warnings

import h5py
import numpy as np
import pytest
from test_fieldmap import ball_maps

from tracer import cache
from tracer.config import loads
from tracer.fieldmap import BasisMaps
from tracer.geometry import rasterize, shape_table
from tracer.grid import Grid
from tracer.store import StoreError
from tracer.store import maps_file
from tracer.store.maps_file import read_maps, read_tags, write_maps
from tracer.store.openpmd import openpmd_file

PLATES = """
title = "deflector plates (test geometry)"
[domain]
symmetry = "planar"
z_mm = [0.0, 30.0]
y_mm = [-10.0, 10.0]
cell_mm = {cell}
edges = {{ z_min = "open", z_max = "open", y_min = "ground", y_max = "ground" }}
[[electrode]]
name = "plate+"
voltage_V = 100.0
[[electrode.rect]]
z_mm = [10.0, 20.0]
y_mm = [4.0, 5.0]
[[electrode]]
name = "plate-"
voltage_V = -100.0
[[electrode.rect]]
z_mm = [10.0, {plate_end}]
y_mm = [-5.0, -4.0]
"""


def plate_setup(cell=1.0, plate_end=20.0):
    return loads(PLATES.format(cell=cell, plate_end=plate_end))


def plate_maps():
    """Planar maps with made-up smooth node values (the store does not care what they are)."""
    setup = plate_setup()
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    raster = rasterize(table, grid)
    Z, Y = np.meshgrid(grid.z, grid.r, indexing="ij")
    base = np.cos(Z * 100.0) * (0.01 - np.abs(Y)) * 50.0
    unit = np.array([np.where(raster.owner == k, 1.0, np.where(raster.owner < 0, s * base, 0.0))
                     for k, s in ((0, 1.0), (1, -1.0))])
    history = (np.array([1.0, 1e-3, 1e-7]), np.array([1.0, 1e-4]))
    return BasisMaps.build(grid, table, raster, ("plate+", "plate-"), (100.0, -100.0), unit,
                           history, setup.geometry_hash())


def assert_same_maps(a, b):
    assert a.grid == b.grid
    assert a.names == b.names and a.voltages == b.voltages and a.geometry_hash == b.geometry_hash
    for name in ("unit", "hermite"):
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and np.array_equal(x, y)
    for obj_a, obj_b in ((a.raster, b.raster), (a.table, b.table)):
        for key, value in vars(obj_a).items():
            other = getattr(obj_b, key)
            if isinstance(value, np.ndarray):
                assert value.dtype == other.dtype and np.array_equal(value, other), key
            else:
                assert value == other, key
    assert len(a.history) == len(b.history)
    assert all(np.array_equal(x, y) for x, y in zip(a.history, b.history))


@pytest.mark.parametrize("make", [lambda: ball_maps()[1], plate_maps], ids=["axial", "planar"])
def test_round_trip_is_bit_exact(tmp_path, make):
    maps = make()
    path = write_maps(tmp_path / "maps.h5", maps, tags={"note": "x"})
    back = read_maps(path)
    assert_same_maps(maps, back)
    assert read_tags(path) == {"note": "x"}
    rng = np.random.default_rng(2)
    z = rng.uniform(maps.grid.z0, maps.grid.z1, 200)
    r = rng.uniform(maps.grid.r0, maps.grid.r1, 200)
    assert np.array_equal(maps.combine().potential(z, r), back.combine().potential(z, r))


@pytest.mark.parametrize("make", [lambda: ball_maps()[1], plate_maps], ids=["axial", "planar"])
def test_file_passes_the_openpmd_checker(tmp_path, make):
    """The openPMD 1.1.0 checker of the openpmd-validator package reports no errors."""
    path = write_maps(tmp_path / "maps.h5", make(), author="tracer tests")
    run = subprocess.run([sys.executable, "-m", "openpmd_validator.check_h5", "-i", str(path)],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "Result: 0 Errors and 0 Warnings." in run.stdout


def test_mesh_records_follow_the_openpmd_geometry(tmp_path):
    """thetaMode datasets are (modes, r, z); cartesian ones (z, y) (openPMD standard 1.1.0)."""
    _, axial, _ = ball_maps()
    planar = plate_maps()
    with h5py.File(write_maps(tmp_path / "a.h5", axial), "r") as f:
        ds = f["/data/0/meshes/basis_ball"]
        assert ds.attrs["geometry"] == b"thetaMode"
        assert ds.shape == (1, axial.grid.nr, axial.grid.nz)
        assert np.array_equal(ds[0].T, axial.unit[0])
        assert list(ds.attrs["axisLabels"]) == [b"r", b"z"]
        assert ds.attrs["electrode"] == b"ball"
    with h5py.File(write_maps(tmp_path / "p.h5", planar), "r") as f:
        names = sorted(f["/data/0/meshes"])
        assert names == ["basis_plate_", "basis_plate__1"]
        ds = f["/data/0/meshes/basis_plate_"]
        assert ds.attrs["geometry"] == b"cartesian" and ds.shape == (planar.grid.nz, planar.grid.nr)
        assert np.allclose(ds.attrs["gridSpacing"], [planar.grid.hz, planar.grid.hr])


def test_a_failed_write_leaves_the_old_file(tmp_path):
    path = tmp_path / "maps.h5"
    write_maps(path, plate_maps())
    before = path.read_bytes()
    with pytest.raises(RuntimeError):
        with openpmd_file(path) as (f, it):
            it.create_group("meshes")
            raise RuntimeError("crash in the middle of a write")
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["maps.h5"]


def test_unreadable_files_raise_store_error(tmp_path):
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"not an HDF5 file at all")
    with pytest.raises(StoreError, match="junk.h5"):
        read_maps(junk)
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f["x"] = 1.0
    with pytest.raises(StoreError, match="not a tracer maps file"):
        read_maps(other)
    with pytest.raises(StoreError):
        read_maps(tmp_path / "missing.h5")
    path = write_maps(tmp_path / "maps.h5", plate_maps())
    with h5py.File(path, "a") as f:
        del f["tracer/maps/raster/arm"]
    with pytest.raises(StoreError, match="arm"):
        read_maps(path)


# ---------------------------------------------------------------------------------------------
# The cache (real solves on a coarse grid)


@pytest.fixture
def counted_solves(monkeypatch):
    """Count calls of the unit-map solver."""
    import tracer.solver

    calls = []
    solve = tracer.solver.solve_unit_maps

    def counting(*args, **kwargs):
        calls.append(args)
        return solve(*args, **kwargs)

    monkeypatch.setattr(tracer.solver, "solve_unit_maps", counting)
    return calls


def test_second_solve_comes_from_the_cache(tmp_path, counted_solves):
    setup = plate_setup()
    first = cache.cached_solve(setup, tmp_path)
    assert len(counted_solves) == 1
    again = cache.cached_solve(setup, tmp_path)
    assert len(counted_solves) == 1
    assert_same_maps(first, again)
    retuned = loads(PLATES.format(cell=1.0, plate_end=20.0).replace("voltage_V = 100.0", "voltage_V = 7.0"))
    other_volts = cache.cached_solve(retuned, tmp_path)
    assert len(counted_solves) == 1
    assert other_volts.voltages == (7.0, -100.0)


def test_changed_geometry_or_tolerance_misses(tmp_path, counted_solves):
    cache.cached_solve(plate_setup(), tmp_path)
    cache.cached_solve(plate_setup(plate_end=18.0), tmp_path)
    assert len(counted_solves) == 2
    cache.cached_solve(plate_setup(), tmp_path, rtol=1e-8)
    assert len(counted_solves) == 3
    assert len(list(tmp_path.glob("maps-*.h5"))) == 3


def test_corrupt_or_stale_cache_files_are_recomputed(tmp_path, counted_solves):
    setup = plate_setup()
    good = cache.cached_solve(setup, tmp_path)
    path = cache.cache_file(tmp_path, setup)
    path.write_bytes(path.read_bytes()[:5000])  # a truncated file
    with pytest.warns(cache.CacheWarning, match="unreadable maps file"):
        again = cache.cached_solve(setup, tmp_path)
    assert len(counted_solves) == 2
    assert_same_maps(good, again)
    assert read_tags(path)["cache_key"] == cache.cache_key(setup)
    # a file of another geometry under this setup's name: the key stored inside does not match
    other = plate_setup(plate_end=18.0)
    write_maps(path, cache.cached_solve(other, tmp_path), tags={"cache_key": cache.cache_key(other)})
    assert len(counted_solves) == 3
    with warnings.catch_warnings():
        warnings.simplefilter("error")   # another key is a plain miss, no warning
        assert cache.load_cached(setup, tmp_path) is None
    assert_same_maps(good, cache.cached_solve(setup, tmp_path))
    assert len(counted_solves) == 4


def flip_bytes(path, dataset, count=8):
    """Change ``count`` bytes in the middle of an HDF5 dataset's stored data, in place."""
    with h5py.File(path, "r") as f:
        node = f[dataset]
        offset, size = node.id.get_offset(), node.id.get_storage_size()
    assert offset is not None, "a contiguous dataset has a file offset"
    with open(path, "r+b") as fh:
        fh.seek(offset + size // 2)
        data = bytearray(fh.read(count))
        fh.seek(offset + size // 2)
        fh.write(bytes(b ^ 0x5A for b in data))


def test_a_map_changed_in_the_cache_is_refused_and_solved_again(tmp_path, counted_solves):
    """Eight bytes changed inside a cached basis map: the checksum finds it, a warning says so, the
    maps are solved again and the result is the true map (issue 17)."""
    setup = plate_setup()
    good = cache.cached_solve(setup, tmp_path)
    path = cache.cache_file(tmp_path, setup)
    with h5py.File(path, "r") as f:
        record = next(name for name in f["data/0/meshes"])
    flip_bytes(path, f"data/0/meshes/{record}")
    with pytest.raises(maps_file.ChecksumError, match="do not match their checksum"):
        read_maps(path)
    with pytest.warns(cache.CacheWarning, match="WARNING: cached maps not used.*checksum"):
        again = cache.cached_solve(setup, tmp_path)
    assert len(counted_solves) == 2
    assert_same_maps(good, again)
    assert_same_maps(good, read_maps(path))   # and the cache file is whole again


@pytest.mark.parametrize("edit", ["scaled", "beyond-one"])
def test_maps_that_cannot_be_laplace_solutions_are_refused(tmp_path, counted_solves, edit):
    """A map rewritten with a fresh checksum still has to be 1 V on its electrode and within
    [0, 1] (maximum principle): a map scaled by 0.9 is refused."""
    setup = plate_setup()
    good = cache.cached_solve(setup, tmp_path)
    path = cache.cache_file(tmp_path, setup)
    if edit == "scaled":
        bad = BasisMaps.build(good.grid, good.table, good.raster, good.names, good.voltages,
                              good.unit * 0.9, good.history, good.geometry_hash)
        match = "not 1 V on its electrode"
    else:
        unit = good.unit.copy()
        unit[0][good.raster.owner < 0] += 2.0
        bad = BasisMaps.build(good.grid, good.table, good.raster, good.names, good.voltages,
                              unit, good.history, good.geometry_hash)
        match = "maximum principle"
    write_maps(path, bad, tags={"cache_key": cache.cache_key(setup)})
    with pytest.warns(cache.CacheWarning, match=match):
        again = cache.cached_solve(setup, tmp_path)
    assert len(counted_solves) == 2
    assert_same_maps(good, again)
