"""A disk cache of basis maps, keyed by the geometry and the solver settings (not the voltages).

A cache file is a maps file (``tracer.store.maps_file``) named after the cache key, with the key stored
inside it.  A file whose stored key or geometry hash does not match, or that cannot be read, is
treated as missing: the maps are solved again and the file is replaced (atomically).  The key
includes the tracer version, so a new version never reads maps made by an older solver.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path

from tracer import __version__
from tracer.fieldmap import solve_basis
from tracer.store import StoreError
from tracer.store.maps_file import read_maps, read_tags, write_maps

CACHE_FORMAT = "tracer-cache-1"


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
    """
    path = cache_file(cache_dir, setup, rtol=rtol)
    if not path.is_file():
        return None
    try:
        if read_tags(path).get("cache_key") != cache_key(setup, rtol=rtol):
            return None
        maps = read_maps(path)
    except StoreError:
        return None
    if maps.geometry_hash != setup.geometry_hash():
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
    maps = load_cached(setup, cache_dir, rtol=rtol)
    if maps is None:
        maps = solve_basis(setup, rtol=rtol, progress=progress)
        write_maps(cache_file(cache_dir, setup, rtol=rtol), maps,
                   tags={"cache_key": cache_key(setup, rtol=rtol)})
    return maps
