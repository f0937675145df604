"""numba's cache of tracer's kernels follows the sources they were compiled from (tracer/jit.py).

numba checks a cached kernel against its own file only: a kernel whose callee's file changed runs
the old callee from the cache. These tests change a copy of the package the way an update does.
"""

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import tracer
from tracer import jit

PACKAGE = Path(tracer.__file__).resolve().parent

CALLEE = '''

@njit(cache=True)
def probe_value():
    return 1.0
'''

CALLER = '''

from tracer.motion.symmetry import probe_value


@njit(cache=True)
def probe():
    return probe_value()
'''


def _copy(tmp_path, name, guard=True):
    """A copy of the package with a kernel in force.py that calls one in symmetry.py; without
    ``guard``, importing tracer.jit leaves numba's cache as numba keeps it."""
    root = tmp_path / name
    shutil.copytree(PACKAGE, root / "tracer", ignore=shutil.ignore_patterns("__pycache__"))
    with open(root / "tracer/motion/symmetry.py", "a") as f:
        f.write(CALLEE)
    with open(root / "tracer/motion/force.py", "a") as f:
        f.write(CALLER)
    if not guard:
        source = root / "tracer/jit.py"
        text = source.read_text()
        source.write_text(text[:text.rindex("refresh()")])
    return root


def _probe(root, cache):
    env = dict(os.environ, PYTHONPATH=str(root), NUMBA_CACHE_DIR=str(cache))
    done = subprocess.run([sys.executable, "-c", "from tracer.motion.force import probe; print(probe())"],
                          env=env, capture_output=True, text=True, cwd=root)
    assert done.returncode == 0, done.stderr[-2000:]
    return float(done.stdout.split()[-1])


def _update_callee(root):
    source = root / "tracer/motion/symmetry.py"
    source.write_text(source.read_text().replace("return 1.0", "return 2.0"))


def test_a_kernel_whose_callee_changed_runs_the_new_callee(tmp_path):
    root = _copy(tmp_path, "guarded")
    cache = tmp_path / "cache-guarded"
    assert _probe(root, cache) == 1.0
    assert _probe(root, cache) == 1.0         # from the cache
    _update_callee(root)
    assert _probe(root, cache) == 2.0


def test_without_the_guard_numba_runs_the_old_callee(tmp_path):
    """The hazard the guard is for: numba alone keeps the caller's cached code after its callee's
    file changed (numba 0.68; should numba start checking callees, this test says so)."""
    root = _copy(tmp_path, "bare", guard=False)
    cache = tmp_path / "cache-bare"
    assert _probe(root, cache) == 1.0
    _update_callee(root)
    assert _probe(root, cache) == 1.0


def test_the_fingerprint_covers_what_kernels_can_see(tmp_path):
    """Kernel modules, and modules they import without defining kernels (the Runge-Kutta tableau):
    an edit changes the fingerprint; an edit of the command line, which no kernel sees, does not
    (its kernels stay cached)."""
    root = tmp_path / "tree" / "tracer"
    shutil.copytree(PACKAGE, root, ignore=shutil.ignore_patterns("__pycache__"))

    def stamp():
        return jit.source_stamp(jit.kernel_sources(root), root)

    sources = {p.relative_to(root).as_posix() for p in jit.kernel_sources(root)}
    assert {"motion/lanes.py", "motion/tableau.py", "fieldmap.py", "solver/relax.py"} <= sources
    assert "cli.py" not in sources
    before = stamp()
    with open(root / "cli.py", "a") as f:
        f.write("\n# an edit\n")
    assert stamp() == before
    with open(root / "motion/tableau.py", "a") as f:
        f.write("\n# an edit\n")
    assert stamp() != before


def test_every_kernel_module_takes_njit_from_tracer_jit():
    """A module that took numba's decorator directly would not be among the sources the
    fingerprint starts from, nor would its cache folder be refreshed (DEVELOPERS.md, "numba's
    cache")."""
    direct = re.compile(r"^\s*(from numba import .*\b(njit|jit|prange)\b|import numba\b.*)$", re.MULTILINE)
    offenders = []
    for path in sorted(PACKAGE.rglob("*.py")):
        text = path.read_text(encoding="utf-8")
        if path.name != "jit.py" and (direct.search(text) and ("@njit" in text or "@numba" in text)):
            offenders.append(path.relative_to(PACKAGE).as_posix())
    assert offenders == []
    assert "motion/lanes.py" in {p.relative_to(PACKAGE).as_posix() for p in jit.kernel_sources()}


def test_the_sources_follow_absolute_relative_and_renamed_imports(tmp_path):
    root = tmp_path / "pkg"
    (root / "sub").mkdir(parents=True)
    files = {"__init__.py": "", "sub/__init__.py": "",
             "kernels.py": "from tracer.jit import njit\nfrom .near import x\nfrom . import other as o\n"
                           "from pkg.sub.deep import (y,\n    z)\nimport pkg.plain as p\n",
             "near.py": "from .sub import leaf\n", "other.py": "", "sub/deep.py": "",
             "sub/leaf.py": "", "plain.py": "", "unused.py": "import pkg.kernels\n"}
    for name, text in files.items():
        (root / name).write_text(text)
    found = {p.relative_to(root).as_posix() for p in jit.kernel_sources(root)}
    assert found == {"__init__.py", "kernels.py", "near.py", "other.py", "sub/__init__.py",
                     "sub/deep.py", "sub/leaf.py", "plain.py"}


def test_refresh_clears_only_a_folder_whose_fingerprint_differs(tmp_path, monkeypatch):
    monkeypatch.setattr(jit, "cache_folders", lambda sources: [tmp_path / "a", tmp_path / "b"])
    for name in "ab":
        (tmp_path / name).mkdir()
        (tmp_path / name / "kernel-1.py311.nbi").write_text("index")
        (tmp_path / name / "kernel-1.py311.1.nbc").write_text("code")
        (tmp_path / name / "module.cpython-311.pyc").write_text("bytecode")
    (tmp_path / "a" / jit.STAMP).write_text(jit.source_stamp(jit.kernel_sources()))
    (tmp_path / "b" / jit.STAMP).write_text("an older fingerprint")
    assert jit.refresh() == [tmp_path / "b"]
    assert sorted(p.name for p in (tmp_path / "a").iterdir()) == sorted(
        ["kernel-1.py311.nbi", "kernel-1.py311.1.nbc", "module.cpython-311.pyc", jit.STAMP])
    assert sorted(p.name for p in (tmp_path / "b").iterdir()) == ["module.cpython-311.pyc", jit.STAMP]
    assert (tmp_path / "b" / jit.STAMP).read_text() == (tmp_path / "a" / jit.STAMP).read_text()
    assert jit.refresh() == []
