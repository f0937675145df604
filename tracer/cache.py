"""A disk cache of basis maps, keyed by the geometry and the solver settings (not the voltages).

A cache file is a maps file (``tracer.store.maps_file``) named after the cache key, with the key stored
inside it.  A file of another key (another geometry or solver setting under the same name) is
treated as missing: the maps are solved again and the file is replaced (atomically).  The key
includes the tracer version, so a new version never reads maps made by an older solver.

Nothing in the cache is trusted.  A file of this key that cannot be read, whose data do not match
the checksum stored with them, whose geometry hash is not the setup's, or whose maps break the
maximum principle (:func:`implausible`) is not used: a :class:`CacheWarning` says so and the maps
are solved again, so such a map never reaches a result.

The cache is optional: a cache folder that cannot be used (a file of that name, no permission, a
full disk) gives one :class:`CacheWarning` and the maps are solved and used without it.

One process writes an entry at a time: :func:`cached_solve` holds an exclusive ``flock`` on the
entry's lock file (``maps-<key>.lock``) while it looks the entry up and, when it is missing,
solves and writes it; a second process wanting the same entry waits, then reads the maps the
first one wrote instead of solving them again.  Other entries are not held up.

Coils' unit fields (:mod:`tracer.magnetics.units`) are cached beside the maps, one entry per coil
and grid (``coil-<key>.h5``, :mod:`tracer.store.coil_file`), keyed by the grid, the coil's winding
section and turns (not its name or current) and the format of the sampling (``COIL_FORMAT``,
raised whenever the sampling changes its numbers), with the same lock, the same warnings and the
same distrust: a file of another key is missing, and one that cannot be read, does not match its
checksum, holds another grid or winding than its key says, or whose node data are not the coil's
closed form where they are checked afresh (:func:`unlike_coil`: the row on the axis and nodes
drawn at random) is not used and is sampled again, with a :class:`CacheWarning`.
"""

from __future__ import annotations

import contextlib
import dataclasses
import fcntl
import hashlib
import json
import os
import warnings
from pathlib import Path

import numpy as np

from tracer import __version__
from tracer.fieldmap import solve_basis
from tracer.store import StoreError
from tracer.store.coil_file import read_coil_field, write_coil_field
from tracer.store.maps_file import read_maps, read_tags, write_maps

CACHE_FORMAT = "tracer-cache-2"  # 2: the solver's fourth-order rows on the axis and mirror plane
COIL_FORMAT = "tracer-coil-sampling-2"
"""The sampling of coils' unit fields; part of their cache key."""
COIL_SPOT_CHECKS = 32
"""Nodes of a cached coil field drawn at random and sampled afresh when it is read."""
COIL_TOLERANCE = 1e-12
"""A cached node value agrees with a fresh sample to this fraction of its component's largest."""
# Basis values may stray from [0, 1] by the solver's residual; far less than any edit that matters.
PLAUSIBLE_SLACK = 1e-6


class CacheWarning(RuntimeWarning):
    """A cache file of this setup was damaged or edited; its maps are solved (its coil field
    sampled) again; or the cache folder cannot be used."""


def implausible(maps) -> str:
    """Why basis maps cannot be Laplace solutions of their geometry, or "" when they can.

    A basis map is 1 on its own electrode, 0 on every other one and, by the maximum principle of
    harmonic functions (common practice; any electrostatics text, e.g. Jackson), between 0 and 1
    everywhere (open edges, with zero normal field, keep it so).
    """
    owner = maps.raster.owner
    for k, name in enumerate(maps.names):
        unit = maps.unit[k]
        on = unit[owner == k]
        off = unit[(owner >= 0) & (owner != k)]
        if on.size and not np.all(on == 1.0):
            return f"basis map {name!r} is not 1 V on its electrode"
        if off.size and not np.all(off == 0.0):
            return f"basis map {name!r} is not 0 V on the other electrodes"
        if not (np.all(np.isfinite(unit)) and unit.min() >= -PLAUSIBLE_SLACK
                and unit.max() <= 1.0 + PLAUSIBLE_SLACK):
            return f"basis map {name!r} leaves [0, 1] (breaks the maximum principle)"
    return ""


def cache_key(setup, *, rtol: float = 1e-10) -> str:
    """sha256 hex key of a setup's geometry (``Setup.geometry_hash``) and the solver settings."""
    payload = {"format": CACHE_FORMAT, "version": __version__, "geometry": setup.geometry_hash(),
               "rtol": float(rtol)}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


def cache_file(cache_dir, setup, *, rtol: float = 1e-10) -> Path:
    """The cache file of a setup's maps in ``cache_dir``."""
    return Path(cache_dir) / f"maps-{cache_key(setup, rtol=rtol)[:32]}.h5"


def _with_setup_voltages(maps, setup):
    volts = setup.voltages()
    return dataclasses.replace(maps, voltages=tuple(float(volts[n]) for n in maps.names))


def load_cached(setup, cache_dir, *, rtol: float = 1e-10):
    """The cached basis maps of a setup, or None when there are none (or they are stale or corrupt).

    Parameters
    ----------
    setup : tracer.config.Setup
    cache_dir : str or os.PathLike
    rtol : float
        The solver tolerance the maps must have been solved to.

    Returns
    -------
    tracer.fieldmap.BasisMaps or None
        With the setup's voltages as the defaults for ``combine``.

    Warns
    -----
    CacheWarning
        When the file of this key is unreadable, does not match its checksum, holds another
        geometry or implausible maps (None is returned: the maps are to be solved again).
    """
    path = cache_file(cache_dir, setup, rtol=rtol)
    if not _present(path, cache_dir):
        return None
    try:
        if read_tags(path).get("cache_key") != cache_key(setup, rtol=rtol):
            return None
        maps = read_maps(path)
        if maps.geometry_hash != setup.geometry_hash():
            raise StoreError(f"{path}: the maps are of another geometry than their key says")
        why = implausible(maps)
        if why:
            raise StoreError(f"{path}: {why}")
    except StoreError as err:
        warnings.warn(f"WARNING: cached maps not used, solving again: {err}", CacheWarning, stacklevel=2)
        return None
    return _with_setup_voltages(maps, setup)


def cached_solve(setup, cache_dir, *, rtol: float = 1e-10, progress=None):
    """Basis maps of a setup from the cache, solving (and caching) them when needed.

    Parameters
    ----------
    setup : tracer.config.Setup
    cache_dir : str or os.PathLike
        Folder of the cache files (created when missing).
    rtol : float
        Relative residual the solver converges to; part of the cache key.
    progress : callable, optional
        Passed to the solver.

    Returns
    -------
    tracer.fieldmap.BasisMaps
    """
    return _through(cache_file(cache_dir, setup, rtol=rtol), cache_dir,
                    load=lambda: load_cached(setup, cache_dir, rtol=rtol),
                    make=lambda: solve_basis(setup, rtol=rtol, progress=progress),
                    write=lambda path, maps: write_maps(path, maps,
                                                        tags={"cache_key": cache_key(setup, rtol=rtol)}))


def coil_key(grid, coil) -> str:
    """sha256 hex key of a coil's unit field on a grid: the grid, the winding section and turns
    (:attr:`tracer.magnetics.coil.Coil.winding`, not the name or current) and ``COIL_FORMAT``."""
    payload = {"format": COIL_FORMAT, "version": __version__, "grid": repr(grid),
               "winding": list(coil.winding)}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


def coil_file(cache_dir, grid, coil) -> Path:
    """The cache file of a coil's unit field on a grid in ``cache_dir``."""
    return Path(cache_dir) / f"coil-{coil_key(grid, coil)[:32]}.h5"


def unlike_coil(grid, hermite, sample, rng=None) -> str:
    """Why node data cannot be a coil's unit field on a grid, or "" when they can.

    The row of nodes on the axis (r = r0) and ``COIL_SPOT_CHECKS`` nodes drawn at random are
    sampled afresh from the coil's closed form (``sample(z, r)``, node data at points) and must
    agree to ``COIL_TOLERANCE`` of each component's largest value.
    """
    rng = np.random.default_rng() if rng is None else rng
    iz = np.concatenate([np.arange(grid.nz), rng.integers(0, grid.nz, COIL_SPOT_CHECKS)])
    ir = np.concatenate([np.zeros(grid.nz, dtype=int), rng.integers(0, grid.nr, COIL_SPOT_CHECKS)])
    fresh = sample(grid.z[iz], grid.r[ir])
    stored = hermite[:, iz, ir]
    scale = np.maximum(np.abs(hermite).max(axis=(1, 2)), np.finfo(float).tiny)[:, None]
    bad = np.abs(stored - fresh) > COIL_TOLERANCE * scale
    if bad.any():
        c, k = np.argwhere(bad)[0]
        return (f"node (z, r) = ({grid.z[iz[k]]:.6g}, {grid.r[ir[k]]:.6g}) m is not the coil's closed "
                f"form (component {c}: {stored[c, k]:.6g}, sampled {fresh[c, k]:.6g})")
    return ""


def load_coil_field(grid, coil, cache_dir, sample):
    """A coil's cached unit field on a grid, or None when there is none (or it is stale or corrupt).

    Parameters
    ----------
    grid : tracer.grid.Grid
    coil : tracer.magnetics.coil.Coil
    cache_dir : str or os.PathLike
    sample : callable
        ``sample(z, r)`` -> float64[4, n]: the coil's node data at points, from its closed form.

    Returns
    -------
    float64[4, nz, nr] or None

    Warns
    -----
    CacheWarning
        When the file of this key is unreadable, does not match its checksum, holds another grid or
        winding, or node data unlike the coil's (None is returned: the field is sampled again).
    """
    path = coil_file(cache_dir, grid, coil)
    if not _present(path, cache_dir):
        return None
    try:
        stored = read_coil_field(path)
        if stored.tags.get("cache_key") != coil_key(grid, coil):
            return None
        if stored.grid != grid or stored.winding != coil.winding:
            raise StoreError(f"{path}: the coil field is of another grid or winding than its key says")
        why = unlike_coil(grid, stored.hermite, sample)
        if why:
            raise StoreError(f"{path}: {why}")
    except StoreError as err:
        warnings.warn(f"WARNING: cached coil field not used, sampling again: {err}", CacheWarning,
                      stacklevel=2)
        return None
    return stored.hermite


def cached_coil_field(grid, coil, cache_dir, sample):
    """A coil's unit field on a grid from the cache, sampling (and caching) it when needed.

    Parameters
    ----------
    grid : tracer.grid.Grid
    coil : tracer.magnetics.coil.Coil
    cache_dir : str or os.PathLike
        Folder of the cache files (created when missing).
    sample : callable
        ``sample(z, r)`` -> float64[4, ...]: the coil's node data at points (any shape).

    Returns
    -------
    float64[4, nz, nr]
    """
    return _through(coil_file(cache_dir, grid, coil), cache_dir,
                    load=lambda: load_coil_field(grid, coil, cache_dir, sample),
                    make=lambda: sample(*np.meshgrid(grid.z, grid.r, indexing="ij")),
                    write=lambda path, data: write_coil_field(path, grid, coil.winding, data,
                                                              tags={"cache_key": coil_key(grid, coil)}))


def _present(path, cache_dir) -> bool:
    """Whether the entry's file exists (False, with the warning, when the folder cannot be searched)."""
    try:
        return path.is_file()
    except OSError as err:
        _unusable(cache_dir, err)
        return False


def _through(path, cache_dir, *, load, make, write):
    """The value of a cache entry: ``load()`` under the entry's lock, else ``make()`` and
    ``write(path, value)`` it (an unusable folder: the warning, and the value unwritten)."""
    with _entry_lock(path):
        value = load()
        if value is None:
            value = make()
            try:
                write(path, value)
            except OSError as err:
                _unusable(cache_dir, err)
    return value


def _unusable(cache_dir, err) -> None:
    """Say, once per call, that the cache folder cannot be used and the maps go without it."""
    warnings.warn(f"WARNING: the maps cache {cache_dir} cannot be used ({err.strerror or err}); going on "
                  "without it (set TRACER_CACHE to a folder you can write, or give --no-cache)",
                  CacheWarning, stacklevel=3)


@contextlib.contextmanager
def _entry_lock(path):
    """Hold the lock of the cache entry ``path`` (module notes); none when the lock file cannot be
    made (the cache folder is unusable: the entry is then neither read nor written)."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(path.with_suffix(".lock"), os.O_RDWR | os.O_CREAT, 0o666)
    except OSError:
        yield
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)


ENTRY_FILES = {"maps": "maps-*.h5", "coil field": "coil-*.h5"}
"""The files of the cache by kind: basis maps and coils' unit fields."""


@dataclasses.dataclass(frozen=True)
class CacheEntry:
    """One cached file: its path, size in bytes, last write time (seconds since the epoch) and
    kind (a key of ``ENTRY_FILES``)."""

    path: Path
    size_bytes: int
    modified_s: float
    kind: str = "maps"


def cache_entries(cache_dir) -> list[CacheEntry]:
    """The maps and coil field files in ``cache_dir``, oldest first; [] when the folder does not exist."""
    folder = Path(cache_dir)
    if not folder.is_dir():
        return []
    entries = [CacheEntry(p, p.stat().st_size, p.stat().st_mtime, kind)
               for kind, pattern in ENTRY_FILES.items() for p in folder.glob(pattern) if p.is_file()]
    return sorted(entries, key=lambda e: e.modified_s)


def clear_cache(cache_dir) -> list[CacheEntry]:
    """Delete the maps and coil field files of ``cache_dir`` (nothing else in it); the entries deleted."""
    entries = cache_entries(cache_dir)
    for entry in entries:
        entry.path.unlink(missing_ok=True)
    return entries
