"""The decorator of tracer's kernels, with numba's cache of them kept in step with their sources.

numba checks a cached kernel against the file that defines it, not against the files of the
kernels it calls and has compiled into itself (``forceinline``, ``inline="always"``) or of the
constants it read when it was compiled. After an update that changes only a callee's file (a
``git pull``, a release installed over the last one: pip keeps the timestamps of files that did
not change), the caller's cached machine code would go on running the old callee, without a word.

So every module that defines kernels takes :func:`njit` (and ``prange``) from here, and importing
this module first runs :func:`refresh`: it compares a fingerprint of the sources a kernel can
have been compiled from (:func:`source_stamp`: the modules that define kernels and, transitively,
the tracer modules they import) with the one written beside each of tracer's numba cache folders
when they were last filled. Where the two differ, the cached kernels of that folder are removed
before any is loaded, and compile again once.
"""

from __future__ import annotations

import hashlib
import os
import re
from pathlib import Path

__all__ = ["njit", "prange", "refresh", "source_stamp"]

from numba import njit, prange

PACKAGE = Path(__file__).resolve().parent
STAMP = "tracer-sources.sha256"
"""The file beside numba's cached kernels that holds the fingerprint they were compiled from."""

USES = "from tracer.jit import"
"""The import that marks a module defining kernels (:func:`kernel_sources` looks for it)."""

_IMPORT = re.compile(r"^[ \t]*(?:from[ \t]+(\.*[\w.]*)[ \t]+import[ \t]+\(?([\w \t,]*)"
                     r"|import[ \t]+([\w.]+))", re.MULTILINE)


def _module(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(name: str, text: str, is_package: bool) -> set[str]:
    """The modules a source imports (absolute, relative, and ``from package import module``)."""
    package = name if is_package else name.rpartition(".")[0]
    found = set()
    for source, names, plain in _IMPORT.findall(text):
        if plain:
            found.add(plain)
            continue
        dots = len(source) - len(source.lstrip("."))
        base = source[dots:]
        if dots:
            anchor = package.split(".")[:len(package.split(".")) - (dots - 1)]
            base = ".".join(anchor + ([base] if base else []))
        found.add(base)
        found.update(f"{base}.{n.split()[0]}" for n in names.split(",") if n.strip())
    return found


def kernel_sources(root: Path = PACKAGE) -> dict[Path, str]:
    """The sources a kernel of the package at ``root`` can have been compiled from, with their
    text: the modules that define kernels (:data:`USES`) and, transitively, the package's modules
    they import."""
    files = {_module(p, root): p for p in sorted(root.rglob("*.py"))}
    texts = {name: path.read_text(encoding="utf-8") for name, path in files.items()}
    todo = [name for name, text in texts.items() if USES in text]
    seen = set(todo)
    while todo:
        name = todo.pop()
        for found in _imports(name, texts[name], files[name].name == "__init__.py"):
            if found in files and found not in seen:
                seen.add(found)
                todo.append(found)
    return {files[name]: texts[name] for name in sorted(seen)}


def source_stamp(sources: dict[Path, str], root: Path = PACKAGE) -> str:
    """The fingerprint of :func:`kernel_sources`: SHA-256 of their paths in the package and their
    texts."""
    digest = hashlib.sha256()
    for path, text in sources.items():
        digest.update(f"{path.relative_to(root).as_posix()}\0{text}\0".encode())
    return digest.hexdigest()


def cache_folders(sources: dict[Path, str]) -> list[Path]:
    """numba's cache folders of the kernels among ``sources``: one for each source folder that
    defines kernels, where numba puts them (``$NUMBA_CACHE_DIR``, ``__pycache__`` beside the
    sources, or the user's cache folder)."""
    from numba.core.caching import CacheImpl

    defining = sorted({path.parent: path for path, text in sources.items() if USES in text}.values())
    folders = []
    for source in defining:
        for locator in CacheImpl._locator_classes:
            found = locator.from_function(refresh, str(source))
            if found is not None:
                folders.append(Path(found.get_cache_path()))
                break
    return folders


def refresh(root: Path = PACKAGE) -> list[Path]:
    """Remove the cached kernels of each numba cache folder of the package whose fingerprint is
    not that of the sources now (:func:`source_stamp`), and write the fingerprint there.

    Returns
    -------
    list of Path
        The folders whose kernels were removed (none when every fingerprint holds).
    """
    try:
        sources = kernel_sources(root)
        stamp = source_stamp(sources, root)
        folders = cache_folders(sources)
    except Exception:    # an unexpected numba layout: leave the cache as numba keeps it
        return []
    cleared = []
    for folder in folders:
        mark = folder / STAMP
        try:
            if mark.is_file() and mark.read_text() == stamp:
                continue
            fresh = folder / f"{STAMP}.{os.getpid()}"
            fresh.write_text(stamp)       # a folder it cannot write to is left alone
            for kept in folder.iterdir():
                if kept.suffix in (".nbi", ".nbc"):
                    kept.unlink(missing_ok=True)
            os.replace(fresh, mark)
            cleared.append(folder)
        except OSError:
            continue
    return cleared


refresh()
