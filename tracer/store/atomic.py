"""Atomic writes: a file, or a folder's new files, appear complete or not at all.

A file is written to a temporary name in its folder and renamed into place when the writing
succeeds (``atomic_path``); the files of a step that writes several are written into a temporary
folder and moved into place together (``staged_folder``).  Only the standard library is used, so
pictures and scan tables can write atomically without loading HDF5.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import shutil
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` when the block succeeds.

    On an exception the temporary file is removed and ``path`` is left as it was.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


@contextlib.contextmanager
def staged_folder(folder):
    """Yield a temporary folder inside ``folder``; move its files into ``folder`` when the block
    succeeds.

    On an exception the temporary folder is removed with everything in it, and ``folder`` keeps
    only what it held before.  Files written into the temporary folder with ``atomic_path`` are
    complete when they are moved.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tmp = folder / f".staged.{os.getpid()}.{secrets.token_hex(4)}.tmp"
    tmp.mkdir()
    try:
        yield tmp
        for item in sorted(tmp.iterdir()):
            os.replace(item, folder / item.name)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
