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
from tracer.store.maps_file import read_maps, read_tags, write_maps

CACHE_FORMAT = "tracer-cache-1"
# Basis values may stray from [0, 1] by the solver's residual; far less than any edit that matters.
PLAUSIBLE_SLACK = 1e-6


class CacheWarning(RuntimeWarning):
    """A cache file of this setup was damaged or edited; its maps are solved again."""


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
    try:
        if not path.is_file():
            return None
    except OSError as err:       # a folder that cannot be searched
        _unusable(cache_dir, err)
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
    path = cache_file(cache_dir, setup, rtol=rtol)
    with _entry_lock(path):
        maps = load_cached(setup, cache_dir, rtol=rtol)
        if maps is None:
            maps = solve_basis(setup, rtol=rtol, progress=progress)
            try:
                write_maps(path, maps, tags={"cache_key": cache_key(setup, rtol=rtol)})
            except OSError as err:
                _unusable(cache_dir, err)
    return maps


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


@dataclasses.dataclass(frozen=True)
class CacheEntry:
    """One cached maps file: its path, size in bytes and last write time (seconds since the epoch)."""

    path: Path
    size_bytes: int
    modified_s: float


def cache_entries(cache_dir) -> list[CacheEntry]:
    """The maps files in ``cache_dir``, oldest first; [] when the folder does not exist."""
    folder = Path(cache_dir)
    if not folder.is_dir():
        return []
    entries = [CacheEntry(p, p.stat().st_size, p.stat().st_mtime) for p in folder.glob("maps-*.h5") if p.is_file()]
    return sorted(entries, key=lambda e: e.modified_s)


def clear_cache(cache_dir) -> list[CacheEntry]:
    """Delete the maps files of ``cache_dir`` (nothing else in it); the entries deleted."""
    entries = cache_entries(cache_dir)
    for entry in entries:
        entry.path.unlink(missing_ok=True)
    return entries
