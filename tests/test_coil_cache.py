"""Coils' unit fields in the maps cache: read instead of sampled, keyed by grid and winding, and
never trusted (a damaged, edited or foreign entry is sampled again with a warning).

No physics source: these are checks of the cache against tracer's own sampling; the sampled field
itself is checked against the closed form in tests/test_magnetics.py (Jackson §5.5).
"""

import dataclasses
import warnings

import h5py
import numpy as np
import pytest

import tracer
from tracer import cache
from tracer.grid import Grid
from tracer.magnetics import units
from tracer.magnetics.coil import Coil
from tracer.store import StoreError
from tracer.store.coil_file import coil_checksum, read_coil_field, write_coil_field

GRID = Grid("axial", True, 0.0, 0.0, 0.002, 0.002, 41, 9, ("ground", "ground", "axis", "ground"))
COIL = Coil("lens", (0.03, 0.05), (0.02, 0.024), 200, 2.5)


@pytest.fixture
def samplings(monkeypatch):
    """The number of points of every call of a coil's sampler (closed-form node data), in order;
    the in-process memo emptied before and after."""
    calls = []
    make = units.coil_sampler

    def counting(grid, coil):
        sample = make(grid, coil)
        return lambda z, r: calls.append(np.size(z)) or sample(z, r)

    monkeypatch.setattr(units, "coil_sampler", counting)
    units._SAMPLED.clear()
    yield calls
    units._SAMPLED.clear()


def test_a_second_process_reads_the_unit_field_bit_for_bit(tmp_path, samplings):
    """The first call samples every node and writes the entry; with the process memo gone (a new
    process), the entry is read and only the checked nodes (the axis row and 32 drawn at random)
    are sampled again; what is read is the sampled field bit for bit."""
    nodes = GRID.nz * GRID.nr
    first = units.coil_unit(GRID, COIL, tmp_path)
    assert samplings == [nodes] and cache.coil_file(tmp_path, GRID, COIL).is_file()
    units._SAMPLED.clear()
    read = units.coil_unit(GRID, COIL, tmp_path)
    assert samplings[1:] == [GRID.nz + cache.COIL_SPOT_CHECKS]
    units._SAMPLED.clear()
    sampled = units.coil_unit(GRID, COIL)              # no cache: sampled afresh
    assert samplings[2:] == [nodes]
    assert read.tobytes() == sampled.tobytes() == first.tobytes()


def test_the_key_is_the_grid_and_winding_not_the_name_or_current(tmp_path):
    key = cache.coil_key(GRID, COIL)
    assert cache.coil_key(GRID, dataclasses.replace(COIL, name="other", current_A=-7.0)) == key
    for other in (dataclasses.replace(COIL, turns=201), dataclasses.replace(COIL, z_m=(0.03, 0.051)),
                  dataclasses.replace(COIL, r_m=(0.021, 0.024))):
        assert cache.coil_key(GRID, other) != key
    assert cache.coil_key(dataclasses.replace(GRID, hz=0.0021), COIL) != key


def test_a_run_reads_the_coil_from_the_cache(tmp_path, samplings):
    """tracer.run with a cache folder: the first run samples the coil on its grid and on the error
    bars' grid of twice the cell; the second (process memo emptied) reads both, sampling only the
    checked nodes, and traces the same rays bit for bit; the optics read the same entry."""
    from test_magnetic_config import AXIAL, SOLENOID
    from tracer.errorbars import with_cell
    from tracer.pipeline import lens

    setup = tracer.loads(AXIAL + SOLENOID + "[optics]\nspecies = \"e-\"\nenergy_eV = 2000.0\n")
    grids = [tracer.solve(s).grid for s in (setup, with_cell(setup, 2.0))]
    first = tracer.run(setup, cache_dir=tmp_path)
    assert samplings == [g.nz * g.nr for g in grids] and first.errors is not None
    units._SAMPLED.clear()
    again = tracer.run(setup, cache_dir=tmp_path)
    assert samplings[2:] == [g.nz + cache.COIL_SPOT_CHECKS for g in grids]
    assert first.beams["e"].records.tobytes() == again.beams["e"].records.tobytes()
    units._SAMPLED.clear()
    lens(setup, tracer.solve(setup, cache_dir=tmp_path).combine(), tmp_path)
    assert samplings[4:] == [grids[0].nz + cache.COIL_SPOT_CHECKS]
    assert len(list(tmp_path.glob("coil-*.h5"))) == 2


def _rewrite(path, hermite):
    """Rewrite a coil file's node data with a fresh checksum (an edit that keeps the file whole)."""
    stored = read_coil_field(path)
    write_coil_field(path, stored.grid, stored.winding, hermite, tags=stored.tags)


def _flip(path):
    with h5py.File(path, "r+") as f:
        data = f["tracer/coil_field/hermite"]
        data[2, 10, 3] = data[2, 10, 3] * (1.0 + 1e-9)


@pytest.mark.parametrize("damage, words", [
    ("truncated", "unreadable coil field file"),
    ("flipped", "does not match its checksum"),
    ("edited on the axis", "is not the coil's closed form"),
    ("of another shape", "expected shape"),
    ("of another winding", "another grid or winding"),
])
def test_a_damaged_or_edited_entry_is_sampled_again(tmp_path, samplings, damage, words):
    good = units.coil_unit(GRID, COIL, tmp_path).copy()
    path = cache.coil_file(tmp_path, GRID, COIL)
    if damage == "truncated":
        path.write_bytes(path.read_bytes()[:3000])
    elif damage == "flipped":
        _flip(path)
    elif damage == "edited on the axis":
        edited = good.copy()
        edited[2, 5, 0] *= 1.001
        _rewrite(path, edited)
    elif damage == "of another shape":
        _rewrite(path, good[:, :, :-1])
    else:
        stored = read_coil_field(path)
        write_coil_field(path, GRID, stored.winding._replace(turns=100), good / 2.0, tags=stored.tags)
    units._SAMPLED.clear()
    with pytest.warns(cache.CacheWarning, match=f"WARNING: cached coil field not used, sampling again.*{words}"):
        again = units.coil_unit(GRID, COIL, tmp_path)
    assert again.tobytes() == good.tobytes()
    assert read_coil_field(path).hermite.tobytes() == good.tobytes()    # the entry is whole again


def test_a_foreign_or_stale_entry_is_not_used(tmp_path, samplings, monkeypatch):
    """Another coil's entry under this coil's name, or an entry of an earlier sampling format, is
    a miss: sampled again without a warning (another key), and replaced."""
    other = dataclasses.replace(COIL, turns=50)
    path = cache.coil_file(tmp_path, GRID, COIL)
    units.coil_unit(GRID, other, tmp_path)
    cache.coil_file(tmp_path, GRID, other).rename(path)
    units._SAMPLED.clear()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        mine = units.coil_unit(GRID, COIL, tmp_path)
    assert samplings == [GRID.nz * GRID.nr] * 2
    assert read_coil_field(path).tags["cache_key"] == cache.coil_key(GRID, COIL)
    np.testing.assert_allclose(mine, 4.0 * units.coil_unit(GRID, other), rtol=1e-9, atol=1e-18)
    monkeypatch.setattr(cache, "COIL_FORMAT", "tracer-coil-sampling-0")
    units._SAMPLED.clear()
    units.coil_unit(GRID, COIL, tmp_path)
    assert len(samplings) == 4 and len(list(tmp_path.glob("coil-*.h5"))) == 2


def test_a_file_of_another_format_is_refused_in_one_line(tmp_path):
    path = tmp_path / "coil.h5"
    data = units.coil_sampler(GRID, COIL)(*np.meshgrid(GRID.z, GRID.r, indexing="ij"))
    write_coil_field(path, GRID, COIL.winding, data)
    with h5py.File(path, "r+") as f:
        f["tracer/coil_field"].attrs["format"] = "tracer-coil-0"
    with pytest.raises(StoreError, match="of format tracer-coil-0, which tracer .* does not read"):
        read_coil_field(path)
    write_coil_field(path, GRID, COIL.winding, data)
    with h5py.File(path, "r+") as f:
        del f["tracer/coil_field/hermite"]
        f["tracer/coil_field"].create_dataset("hermite", data=data.astype(np.float32))
    with pytest.raises(StoreError, match="not float64"):
        read_coil_field(path)
    assert coil_checksum(GRID, COIL.winding, data) != coil_checksum(GRID, COIL.winding._replace(turns=1), data)


def test_an_unusable_cache_folder_warns_and_samples(tmp_path, samplings):
    blocker = tmp_path / "cache"
    blocker.write_text("not a folder")
    with pytest.warns(cache.CacheWarning, match="cannot be used"):
        data = units.coil_unit(GRID, COIL, blocker)
    assert samplings == [GRID.nz * GRID.nr] and data.shape == (4, GRID.nz, GRID.nr)
    assert blocker.read_text() == "not a folder"


def test_the_entry_is_locked_while_it_is_sampled(tmp_path, monkeypatch):
    """A coil entry is sampled and written under an exclusive flock of coil-<key>.lock, as maps
    are (a second process waits and reads it instead of sampling it too): while the sampler runs
    a second lock on the file is refused, and afterwards it is granted."""
    import fcntl
    import os

    lock = cache.coil_file(tmp_path, GRID, COIL).with_suffix(".lock")
    seen = []
    make = units.coil_sampler

    def probing(grid, coil):
        sample = make(grid, coil)

        def probe(z, r):
            fd = os.open(lock, os.O_RDWR)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                seen.append("free")
            except BlockingIOError:
                seen.append("held")
            finally:
                os.close(fd)
            return sample(z, r)
        return probe

    monkeypatch.setattr(units, "coil_sampler", probing)
    units._SAMPLED.clear()
    try:
        units.coil_unit(GRID, COIL, tmp_path)
    finally:
        units._SAMPLED.clear()
    assert seen == ["held"]
    fd = os.open(lock, os.O_RDWR)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    finally:
        os.close(fd)
