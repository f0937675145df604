"""HDF5 access shared by the tracer files, below and beside the openPMD layer.

``tracer_group`` opens a file and finds tracer's own group of a given kind by its format tag,
turning every failure to read into a :class:`~tracer.store.StoreError`; ``read_array`` is the one
function through which every array of a file is read; ``new_file`` is the one way a file is
made; ``write_fields`` / ``read_fields`` store a frozen dataclass as a group (arrays as
datasets, every other field in one JSON attribute).
"""

from __future__ import annotations

import contextlib
import dataclasses
import io
import json

import h5py
import numpy as np

from tracer import __version__
from tracer.store import StoreError
from tracer.store.atomic import atomic_path
from tracer.store.trust import check_file


@contextlib.contextmanager
def new_file(path):
    """Create an HDF5 file atomically and yield it open for writing.

    The file is built in memory and written out with plain writes once it is closed
    (:func:`tracer.store.atomic.atomic_path`), so a failed write, a full disk above all, is one
    ``OSError`` naming ``path`` and ``path`` keeps what it held.  The HDF5 library never meets the
    failed write itself: when it does, it floods stderr from every open object and may crash the
    process at its exit.
    """
    image = io.BytesIO()
    with h5py.File(image, "w") as f:
        yield f
    with atomic_path(path) as tmp, open(tmp, "wb") as handle:
        handle.write(image.getbuffer())


@contextlib.contextmanager
def tracer_group(path, name, file_format, kind):
    """Open a tracer file and yield ``(file, group)``; every failure to read it is a StoreError.

    Parameters
    ----------
    path : str or os.PathLike
    name : str
        The group tracer keeps outside the openPMD base path (``tracer/maps``, ...).
    file_format : str
        The format tag the group must carry (``tracer-<kind>-<n>``).
    kind : str
        What the file is, for the messages ("maps", "result").
    """
    try:
        with h5py.File(path, "r") as f:
            check_file(f, path)
            group = f.get(name)
            found = group.attrs.get("format") if isinstance(group, h5py.Group) else None
            if found != file_format:
                if isinstance(found, str) and found.rpartition("-")[0] == file_format.rpartition("-")[0]:
                    raise StoreError(f"{path}: a tracer {kind} file of format {found}, which tracer "
                                     f"{__version__} does not read (it reads {file_format}); write "
                                     "it again with this version")
                raise StoreError(f"{path}: not a tracer {kind} file ({file_format})")
            yield f, group
    except (OSError, KeyError, ValueError, TypeError, AttributeError, RecursionError) as err:
        if isinstance(err, StoreError):   # AttributeError, RecursionError: JSON of another structure
            raise
        raise StoreError(f"{path}: unreadable {kind} file: {err}") from err


def read_array(node) -> np.ndarray:
    """The whole of a dataset, read into memory: every array of a tracer file is read here.

    Raises
    ------
    StoreError
        When ``node`` is not a dataset (a group where a dataset belongs).
    """
    if not isinstance(node, h5py.Dataset):
        raise StoreError(f"{node.file.filename}: {node.name} is not a dataset")
    return node[()]


def plain(value):
    """numpy scalars -> Python scalars, the ``default`` of ``json.dumps``."""
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"cannot store {type(value).__name__}")


def _tuples(value):
    """JSON lists back to the tuples the dataclasses hold."""
    if isinstance(value, list):
        return tuple(_tuples(v) for v in value)
    return value


def write_fields(group, obj):
    """Arrays as datasets, every other field in one JSON attribute (exact for floats)."""
    values = {}
    for field in dataclasses.fields(obj):
        value = getattr(obj, field.name)
        if isinstance(value, np.ndarray):
            compress = {"compression": "gzip", "compression_opts": 1, "shuffle": True} if value.size > 4096 else {}
            group.create_dataset(field.name, data=value, **compress)
        else:
            values[field.name] = value
    group.attrs["fields"] = json.dumps(values, default=plain)


def read_fields(group, cls):
    """The dataclass ``cls`` written by ``write_fields``."""
    values = {name: _tuples(v) for name, v in json.loads(group.attrs["fields"]).items()}
    for field in dataclasses.fields(cls):
        if field.name not in values:
            values[field.name] = read_array(group[field.name])
    return cls(**values)
