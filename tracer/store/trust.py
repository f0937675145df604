"""Checks on files from elsewhere, made before any of their arrays is read or reaches a kernel.

A result or maps file may come from anyone: a crafted one must be refused with one line (a
:class:`~tracer.store.StoreError`), never crash a numba kernel, fill the memory or reach outside
its folder.  ``check_file`` walks every dataset before anything is read: external links, external raw
storage (data in another local file) and virtual datasets are refused, and so are declared sizes beyond
``MAX_ARRAY_BYTES`` an array or ``MAX_FILE_BYTES`` in all (a few kilobytes of compressed zeros can
declare gigabytes).  ``check_count`` bounds the lengths given by attributes (a constant record's
shape, a species' particle count).  ``check_geometry`` checks the shape, dtype and index range of
every array of the grid, shape table, raster and meshes against each other before the Hermite
data are built from them (``check_grid`` and ``check_array`` its parts, shared with the cached
coil fields).  ``check_dtype`` admits only plain numeric and text fields, ``check_name``
the names a config admits, and ``printable`` escapes control characters of text for the terminal.
"""

from __future__ import annotations

import math

import h5py
import numpy as np

from tracer.schema import NAME, NAME_LENGTH
from tracer.store import StoreError

MAX_ARRAY_BYTES = 1 << 31
"""The largest array a file may declare (2 GiB)."""
MAX_FILE_BYTES = 1 << 33
"""The most all of a file's arrays may declare together (8 GiB)."""
_EDGES = ("ground", "open", "axis", "mirror")
_KINDS = "fiubU"


def check_file(f: h5py.File, path) -> None:
    """Refuse external or virtual storage and declared sizes beyond the limits, before any read."""
    total = 0
    found = []
    links = []
    f.visititems_links(lambda name, link: links.append(name) if isinstance(link, h5py.ExternalLink) else None)
    if links:
        raise StoreError(f"{path}: /{links[0]} links to another file, which tracer does not follow")
    f.visititems(lambda name, node: found.append(node) if isinstance(node, h5py.Dataset) else None)
    for node in found:
        if node.external or node.is_virtual:
            raise StoreError(f"{path}: {node.name} keeps its data in another file (external or virtual "
                             "storage), which tracer does not read")
        size = node.dtype.itemsize * (math.prod(node.shape) if node.shape else 1)
        if size > MAX_ARRAY_BYTES:
            raise StoreError(f"{path}: {node.name} declares {size:,} bytes, more than the "
                             f"{MAX_ARRAY_BYTES:,} tracer reads an array")
        total += size
    if total > MAX_FILE_BYTES:
        raise StoreError(f"{path}: its arrays declare {total:,} bytes, more than the {MAX_FILE_BYTES:,} "
                         "tracer reads a file")


def check_count(n, itemsize, what, path) -> int:
    """A length given by an attribute, as int: a whole number of at most MAX_ARRAY_BYTES of items."""
    try:
        count = int(n)
    except (TypeError, ValueError, OverflowError):
        count = -1
    if count != n or count < 0 or count * max(1, itemsize) > MAX_ARRAY_BYTES:
        raise StoreError(f"{path}: {what}: a length of {n!r} is not a count tracer reads")
    return count


def check_dtype(names, what, path) -> np.dtype:
    """The dtype of records named in a file ([[name, type], ...]): plain numbers and text only."""
    try:
        dtype = np.dtype([(str(name), str(kind)) for name, kind in names])
    except (TypeError, ValueError) as error:
        raise StoreError(f"{path}: {what}: not a record type tracer reads ({error})") from None
    for name in dtype.names:
        if dtype[name].kind not in _KINDS or dtype[name].shape or dtype[name].itemsize > 1024:
            raise StoreError(f"{path}: {what}: field {name!r} of type {dtype[name].str} is not one tracer reads")
    return dtype


def check_name(name, what, path) -> str:
    """A name from a file (a beam's, a plane's, an electrode's): what a config admits, as names
    become parts of file names."""
    if not isinstance(name, str) or not NAME.fullmatch(name) or len(name) > NAME_LENGTH:
        raise StoreError(f"{path}: {what} {printable(repr(name))[:80]} is not a name tracer admits "
                         "(letters, digits and _ . + -)")
    return name


def check_array(array, shape, kinds, what, path) -> None:
    """An array from a file has this shape and a dtype of these kinds (finite, when floating)."""
    if not isinstance(array, np.ndarray) or array.shape != shape or array.dtype.kind not in kinds:
        got = f"{array.dtype.str}{list(array.shape)}" if isinstance(array, np.ndarray) else type(array).__name__
        raise StoreError(f"{path}: {what} is {got}, expected shape {list(shape)}")
    if array.dtype.kind == "f" and not np.isfinite(array).all():
        raise StoreError(f"{path}: {what} holds numbers that are not finite")


def _indices(array, low, high, what, path):
    if array.size and (array.min() < low or array.max() >= high):
        raise StoreError(f"{path}: {what} holds indices outside {low}..{high - 1}")


def check_grid(path, grid) -> None:
    """A grid from a file is one tracer writes: its symmetry, edges, node counts and spacing."""
    g = grid
    if (g.symmetry not in ("axial", "planar") or not isinstance(g.mirror, bool)
            or not all(isinstance(v, int) and not isinstance(v, bool) for v in (g.nz, g.nr))
            or not 2 <= g.nz <= 1 << 20 or not 2 <= g.nr <= 1 << 20 or g.nz * g.nr * 8 > MAX_ARRAY_BYTES
            or not all(isinstance(v, (int, float)) and math.isfinite(v) for v in (g.z0, g.r0, g.hz, g.hr))
            or not (g.hz > 0 and g.hr > 0)
            or not (isinstance(g.edges, tuple) and len(g.edges) == 4 and all(e in _EDGES for e in g.edges))):
        raise StoreError(f"{path}: the grid is not one tracer writes")


def check_geometry(path, grid, table, raster, names, voltages, meshes) -> None:
    """The grid, shape table, raster, electrode names and voltages, and node meshes of a file agree
    in shape, dtype and index range (every check a kernel relies on)."""
    check_grid(path, grid)
    g = grid
    n_el = len(names)
    for name in names:
        check_name(name, "electrode", path)
    if len(set(names)) != n_el or tuple(table.names) != tuple(names):
        raise StoreError(f"{path}: the electrode names do not agree")
    check_array(np.asarray(voltages, dtype=float) if len(voltages) == n_el else np.zeros(0), (n_el,), "f",
                "the voltages", path)
    n = table.kind.shape[0] if isinstance(table.kind, np.ndarray) and table.kind.ndim == 1 else -1
    for key, shape, kinds in (("kind", (n,), "iu"), ("owner", (n,), "iu"), ("start", (n,), "iu"),
                              ("count", (n,), "iu"), ("sector", (n, 6), "f"), ("bbox", (n, 4), "f")):
        check_array(getattr(table, key), shape, kinds, f"the shape table's {key}", path)
    points = table.points
    check_array(points, (points.shape[0] if isinstance(points, np.ndarray) and points.ndim == 2 else -1, 2), "f",
                "the shape table's points", path)
    _indices(table.kind, 0, 2, "the shape table's kind", path)
    _indices(table.owner, 0, n_el, "the shape table's owner", path)
    if n and ((table.start < 0).any() or (table.count < 0).any()
              or (table.start + table.count > len(points)).any()):
        raise StoreError(f"{path}: the shape table's polygons reach outside its points")
    nodes, cells = (g.nz, g.nr), (g.nz - 1, g.nr - 1)
    check_array(raster.owner, nodes, "iu", "the raster's owner", path)
    check_array(raster.arm, nodes + (4,), "f", "the raster's arm", path)
    check_array(raster.arm_owner, nodes + (4,), "iu", "the raster's arm_owner", path)
    check_array(raster.cell, cells, "iu", "the raster's cell", path)
    _indices(raster.owner, -1, n_el, "the raster's owner", path)
    _indices(raster.arm_owner, -1, n_el, "the raster's arm_owner", path)
    _indices(raster.cell, -2, n_el, "the raster's cell", path)
    if raster.arm.size and (raster.arm.min() < 0.0 or raster.arm.max() > 1.0):
        raise StoreError(f"{path}: the raster's arm holds fractions outside 0..1")
    for what, mesh in meshes.items():
        check_array(mesh, nodes, "f", what, path)


def check_summaries(summaries, beams, path) -> dict:
    """The stored summaries of a result file: an object with one object per beam of the file."""
    if not (isinstance(summaries, dict) and sorted(summaries) == sorted(beams)
            and all(isinstance(s, dict) for s in summaries.values())):
        raise StoreError(f"{path}: its stored summaries are not one summary per beam of the file")
    return summaries


def printable(text: str) -> str:
    """``text`` with control characters (and other unprintable ones) escaped, newlines kept."""
    return "".join(c if c.isprintable() or c == "\n" else repr(c)[1:-1] for c in str(text))
