"""Atomic writes: a file, or a folder's new files, appear complete or not at all.

A file is written to a temporary name in its folder and renamed into place when the writing
succeeds (``atomic_path``); the files of a step that writes several are written into a temporary
folder and moved into place together (``staged_folder``).  A set of files that belong together
(a run's result, landings and pictures) is staged with a manifest naming them
(``staged_folder(folder, manifest=...)``): the manifest is written into the staging folder last,
and moved into ``folder`` last, after the previous manifest and the files of the previous set
that the new one does not have were removed.  A folder that holds a manifest therefore holds
exactly the set it names; Ctrl-C and SIGTERM are held back while the set is moved (a few
renames; :func:`tracer.interrupts.held_back`), and a set stopped half-way by a hard kill is
finished by :func:`recover`, the first step of :func:`locked_folder`.  Only the standard library
is used, so pictures and scan tables can write atomically without loading HDF5.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import os
import secrets
import shutil
import threading
from pathlib import Path

from tracer.interrupts import held_back

STAGED = ".staged."
"""Prefix of the staging folders inside an output folder."""

NO_SPACE = (errno.ENOSPC, errno.EDQUOT)
"""The errors of a full disk or an exhausted quota."""


def no_space(exc: BaseException) -> bool:
    """Whether an exception is a full disk (or quota) on a write."""
    return isinstance(exc, OSError) and exc.errno in NO_SPACE


def _naming(exc: OSError, path) -> OSError:
    """A full-disk error that names ``path`` (the file being made, not its temporary name)."""
    return OSError(exc.errno, os.strerror(exc.errno), str(path))


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` when the block succeeds.

    On an exception the temporary file is removed and ``path`` is left as it was; a full disk
    (:func:`no_space`) is raised again as an ``OSError`` whose ``filename`` is ``path``.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        if no_space(exc):
            raise _naming(exc, path) from None
        raise


@contextlib.contextmanager
def staged_folder(folder, manifest=None, heading=""):
    """Yield a temporary folder inside ``folder``; move its files into ``folder`` when the block
    succeeds.

    On an exception the temporary folder is removed with everything in it, and ``folder`` keeps
    only what it held before (a full disk names the file of ``folder`` that was being made).
    Files written into the temporary folder with ``atomic_path`` are complete when they are moved.

    Parameters
    ----------
    folder : path-like
    manifest : str, optional
        The name of the manifest of the set (e.g. ``run-files.txt``): a text file with ``heading``
        and then the names of the staged files, one a line.  The files named by the previous
        manifest of that name and not staged now are removed from ``folder`` (module notes).
    heading : str
        The manifest's first line (which run the files belong to).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tmp = folder / f"{STAGED}{os.getpid()}.{secrets.token_hex(4)}.tmp"
    try:
        tmp.mkdir()
    except OSError as exc:
        if no_space(exc):
            raise _naming(exc, folder) from None
        raise
    try:
        yield tmp
        if manifest is None:
            for item in sorted(tmp.iterdir()):
                os.replace(item, folder / item.name)
        else:
            names = sorted(p.name for p in tmp.iterdir())
            with atomic_path(tmp / manifest) as path:
                path.write_text("".join(f"{line}\n" for line in [f"# {heading}", *names]), encoding="utf-8")
            with held_back():
                _commit(tmp, folder, manifest)
    except OSError as exc:
        if no_space(exc) and exc.filename and Path(exc.filename).parent == tmp:
            raise _naming(exc, folder / Path(exc.filename).name) from None
        raise
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _names(manifest: Path) -> list[str]:
    """The file names a manifest lists (none when it is missing)."""
    try:
        lines = manifest.read_text(encoding="utf-8").splitlines()
    except FileNotFoundError:
        return []
    return [n for n in lines[1:] if n and "/" not in n and n not in (".", "..")]


def _commit(staged: Path, folder: Path, manifest: str) -> None:
    """Move a complete staged set (its manifest written last) into ``folder``, manifest last.

    The previous manifest is first moved into the staging folder (the folder then holds no
    manifest while it changes); the files it names that the new set lacks are removed.  Safe to
    repeat after a kill at any point: what was moved is no longer where it was."""
    new = _names(staged / manifest)
    previous = staged / f"{manifest}.previous"
    with contextlib.suppress(FileNotFoundError):
        os.replace(folder / manifest, previous)
    for name in _names(previous):
        if name not in new:
            with contextlib.suppress(FileNotFoundError, IsADirectoryError):
                os.unlink(folder / name)
    for name in new:
        if (staged / name).exists():
            os.replace(staged / name, folder / name)
    os.replace(staged / manifest, folder / manifest)


def recover(folder, manifest: str) -> None:
    """Finish what killed writers left in ``folder``: a staged set with its manifest is moved in
    (:func:`staged_folder`), any other staging folder and temporary file is removed.

    Call it only while holding :func:`locked_folder` (no other writer is at work)."""
    folder = Path(folder)
    for item in sorted(folder.iterdir()):
        if item.name.startswith(STAGED) and item.is_dir():
            if (item / manifest).exists():
                _commit(item, folder, manifest)
            shutil.rmtree(item, ignore_errors=True)
        elif item.name.startswith(".") and item.name.endswith(".tmp") and item.is_file():
            with contextlib.suppress(FileNotFoundError):
                os.unlink(item)


class FolderBusy(OSError):
    """Another process, or another thread of this one, holds the lock of an output folder."""


_HELD = threading.local()
"""The output folders this thread holds locked: ``_HELD.folders`` maps (device, inode) to whether
a block inside may take the lock once more (:func:`locked_folder`'s ``reenter``)."""


@contextlib.contextmanager
def locked_folder(folder, manifest: str, reenter: bool = False):
    """Hold an exclusive lock on an output folder (made if missing) while the block runs.

    The lock is ``flock`` on the folder itself (no lock file), released when the process ends,
    however it ends.  A folder locked by another process, or by another thread of this process,
    raises :class:`FolderBusy` at once; once locked, :func:`recover` cleans up after killed
    writers.  A folder made here and still empty at the end is removed again.

    Parameters
    ----------
    folder : path-like
    manifest : str
        The manifest of the folder's set of files (:func:`recover`).
    reenter : bool
        Whether one block inside, on this thread, may take the lock again (the command line's
        lock on ``--out``, inside which ``tracer.scan`` takes it).  Otherwise the folder is
        busy for this thread too.

    Raises
    ------
    FolderBusy
        Another process or thread holds the lock, or this thread holds it without ``reenter``.
    OSError
        The folder cannot be made or opened (a file of that name, no permission).
    """
    folder = Path(folder)
    made = not folder.exists()
    folder.mkdir(parents=True, exist_ok=True)
    if not os.access(folder, os.W_OK | os.X_OK):
        raise PermissionError(errno.EACCES, "Permission denied", str(folder))
    held = _HELD.__dict__.setdefault("folders", {})
    fd = os.open(folder, os.O_RDONLY | os.O_DIRECTORY)
    stat = os.fstat(fd)
    key = (stat.st_dev, stat.st_ino)
    if held.get(key):                     # this thread holds it and lends it to this block
        os.close(fd)
        held[key] = False
        try:
            yield folder
        finally:
            held[key] = True
        return
    try:
        try:
            if key in held:
                raise BlockingIOError
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise FolderBusy(errno.EWOULDBLOCK, "another tracer command or scan is writing to this folder",
                             str(folder)) from None
        held[key] = reenter
        try:
            recover(folder, manifest)
            yield folder
        finally:
            del held[key]
    finally:
        os.close(fd)
        if made:
            with contextlib.suppress(OSError):
                folder.rmdir()
