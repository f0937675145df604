"""Result files from elsewhere: each crafted file (real HDF5 files written with h5py in tmp_path,
from one small traced result) is refused with one line naming the file, before any of its arrays
reaches a kernel: mismatched shapes and indices, lengths that ask for gigabytes, data kept in
another file, names that would reach outside the output folder, record types that are not plain
numbers.  Titles are shown with their control characters escaped."""

import json
import shutil

import h5py
import numpy as np
import pytest

from test_store_results import AXIAL, traced
from tracer.cli import main
from tracer.store import StoreError
from tracer.store.result_file import read_result, write_result
from tracer.store.trust import MAX_ARRAY_BYTES

GROUP = "tracer/result"
SPECIES = "data/0/particles/protons_final"


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    setup, field, runs = traced(tmp_path_factory, AXIAL)
    return write_result(tmp_path_factory.mktemp("good") / "result.h5", field, runs[:1], setup=setup)


def _replace(f, name, data, **options):
    del f[name]
    f.create_dataset(name, data=data, **options)


def _beams(f, change):
    beams = json.loads(f[GROUP].attrs["beams"])
    change(beams[0])
    f[GROUP].attrs["beams"] = json.dumps(beams)


def _summaries(f, change):
    f[GROUP].attrs["summaries"] = change(json.loads(f[GROUP].attrs["summaries"]))


def _bomb(f):
    """4 GiB declared, a few kilobytes written (chunks never written take no space)."""
    f.create_dataset(f"{GROUP}/padding", shape=(MAX_ARRAY_BYTES // 8 * 2,), dtype="f8", chunks=(1 << 16,),
                     compression="gzip")


def _external(f, tmp):
    other = tmp / "elsewhere.bin"
    other.write_bytes(b"private bytes of another file" * 10)
    owner = f[f"{GROUP}/raster/owner"]
    shape, dtype = owner.shape, owner.dtype
    del f[f"{GROUP}/raster/owner"]
    f.create_dataset(f"{GROUP}/raster/owner", shape=shape, dtype=dtype,
                     external=[(str(other), 0, int(np.prod(shape)) * dtype.itemsize)])


CRAFTED = {
    "owner-index": (lambda f, tmp: _replace(f, f"{GROUP}/raster/owner",
                                            np.full(f[f"{GROUP}/raster/owner"].shape, 100, np.int8)),
                    "the raster's owner holds indices outside -1..2"),
    "owner-shape": (lambda f, tmp: _replace(f, f"{GROUP}/raster/owner", np.zeros((3, 3), np.int8)),
                    "the raster's owner is |i1[3, 3], expected shape"),
    "mesh-shape": (lambda f, tmp: _replace(f, "data/0/meshes/phi", np.zeros((1, 5, 5))), "the potential mesh is"),
    "points-short": (lambda f, tmp: _replace(f, f"{GROUP}/table/points", np.zeros((1, 2))),
                     "the shape table's polygons reach outside its points"),
    "cell-index": (lambda f, tmp: _replace(f, f"{GROUP}/raster/cell",
                                           np.full(f[f"{GROUP}/raster/cell"].shape, -7, np.int8)),
                   "the raster's cell holds indices outside -2..2"),
    "particles-count": (lambda f, tmp: _replace(f, f"{SPECIES}/particlePatches/numParticles",
                                                np.array([10 ** 15], np.uint64)),
                        "is not a count tracer reads"),
    "constant-shape": (lambda f, tmp: f[f"{SPECIES}/rayCurrent"].attrs.__setitem__(
        "shape", np.array([1 << 62], np.uint64)), "is not a count tracer reads"),
    "bomb": (lambda f, tmp: _bomb(f), "/tracer/result/padding declares 4,294,967,296 bytes"),
    "external-storage": (_external, "/tracer/result/raster/owner keeps its data in another file"),
    "external-link": (lambda f, tmp: f.__setitem__(f"{GROUP}/elsewhere", h5py.ExternalLink(str(tmp / "x.h5"), "/")),
                      "/tracer/result/elsewhere links to another file"),
    "beam-name": (lambda f, tmp: _beams(f, lambda b: b.__setitem__("name", "../../evil")),
                  "beam '../../evil' is not a name tracer admits"),
    "plane-name": (lambda f, tmp: _beams(f, lambda b: b.__setitem__(
        "planes", {"../up/x" if k == "mid" else k: v for k, v in b["planes"].items()})),
        "plane '../up/x' is not a name tracer admits"),
    "object-dtype": (lambda f, tmp: _beams(f, lambda b: b["dtypes"]["records"].append(["extra", "O"])),
                     "field 'extra' of type |O is not one tracer reads"),
    "summaries-list": (lambda f, tmp: _summaries(f, lambda s: json.dumps(list(s.values()))),
                       "its stored summaries are not one summary per beam of the file"),
    "summaries-beams": (lambda f, tmp: _summaries(f, lambda s: json.dumps({"other": s["protons"]})),
                        "its stored summaries are not one summary per beam of the file"),
    "summaries-deep": (lambda f, tmp: _summaries(f, lambda s: "[" * 100_000 + "]" * 100_000),
                       "unreadable result file"),
    "ray-index": (lambda f, tmp: _replace(f, "data/0/particles/protons_at_mid/rayIndex",
                                          np.full(f["data/0/particles/protons_at_mid/rayIndex"].shape, 10 ** 6)),
                  "do not agree in rays"),
}


def crafted(good, tmp_path, case):
    path = tmp_path / f"{case}.h5"
    shutil.copy(good, path)
    with h5py.File(path, "r+") as f:
        CRAFTED[case][0](f, tmp_path)
    return path


@pytest.mark.parametrize("case", sorted(CRAFTED))
def test_a_crafted_result_file_is_refused_with_one_line(good, tmp_path, case):
    path = crafted(good, tmp_path, case)
    with pytest.raises(StoreError) as error:
        read_result(path)
    message = str(error.value)
    assert message.startswith(str(path)) and "\n" not in message, message
    assert CRAFTED[case][1] in message, message
    assert "private bytes" not in message


def test_the_untouched_file_reads(good):
    """The checks refuse nothing tracer writes itself."""
    assert list(read_result(good).beams) == ["protons"]


@pytest.mark.parametrize("case", ["owner-index", "beam-name"])
def test_tracer_show_refuses_a_crafted_file_with_exit_2_and_writes_nothing(good, tmp_path, capsys, case):
    path = crafted(good, tmp_path, case)
    out = tmp_path / "deep" / "out"
    assert main(["show", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("tracer: error: ") and CRAFTED[case][1] in err, err
    assert not out.exists() and not list(tmp_path.rglob("*.png"))


SUMMARY_INSIDE = {
    "status-list": lambda s: s.__setitem__("status", [1, 2]),
    "landing-text": lambda s: s.__setitem__("landing", "everywhere"),
    "rays-missing": lambda s: s.pop("rays"),
    "plane-number": lambda s: s["planes"].__setitem__(next(iter(s["planes"])), 7),
    "ledger-text": lambda s: s.__setitem__("ledger_worst_eV", "small"),
}


@pytest.mark.parametrize("case", sorted(SUMMARY_INSIDE))
def test_tracer_show_refuses_a_summary_of_another_structure_with_exit_2(good, tmp_path, capsys, case):
    """A summary that reads as JSON but not as the summary tracer writes (a list where a table
    belongs, text where a number belongs, a key missing): one line, exit 2, no picture written."""
    path = tmp_path / "result.h5"
    shutil.copy(good, path)

    def change(summaries):
        SUMMARY_INSIDE[case](summaries["protons"])
        return json.dumps(summaries)

    with h5py.File(path, "r+") as f:
        _summaries(f, change)
    out = tmp_path / "out"
    assert main(["show", str(path), "--out", str(out)]) == 2
    captured = capsys.readouterr()
    assert captured.err == f"tracer: error: {path}: the stored summary of beam 'protons' is not as tracer writes it\n"
    assert captured.out == "" and not out.exists()


def test_a_title_is_shown_with_its_control_characters_escaped(good, tmp_path):
    path = tmp_path / "title.h5"
    shutil.copy(good, path)
    with h5py.File(path, "r+") as f:
        f[GROUP].attrs["title"] = "lens\x1b[2J\x1b]0;owned\x07 column"
    title = read_result(path).title
    assert title == "lens\\x1b[2J\\x1b]0;owned\\x07 column"
    assert not any(ord(c) < 32 for c in title)
