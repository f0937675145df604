"""The memory a command will need, estimated from the setup before any work, and the refusal of
what cannot fit.

The estimate adds up what grows with the inputs: the basis maps of the grid (per node and
electrode, as :func:`tracer.config` checks the grid alone), every beam's rays (start and final
records, the kernel's state and its first pass's room for plane crossings, the crossings kept),
the kept paths (``[trace] keep_paths`` rays of up to :data:`PATH_POINTS` points), a scan's voltage
sets and table, a gun's rays (the gun keeps every ray's path) and the worker processes of a scan
(each an interpreter with the kernels and its copy of the maps).  When the sum exceeds
:data:`MEMORY_SHARE` of the machine's physical memory, the largest item is refused with one line
naming its key, the estimate and what would fit.  The sizes per item are rounded up from the
arrays the code allocates; they are estimates, good to a factor of about two.
"""

from __future__ import annotations

import math
import os

from tracer.schema import ConfigError

MEMORY_SHARE = 0.5
"""Refuse work needing more than this share of the machine's physical memory."""

FALLBACK_LIMIT = 40e9
"""The limit where the physical memory cannot be asked (bytes)."""

NODE_BYTES = 200
"""Per grid node and electrode: the unit map and its Hermite data, the solver's multigrid work
arrays and a share of the raster (rounded up)."""

RAY_BYTES = 4096
"""Per traced ray: its start and final records (about 300 B), the kernel's state, counts and the
first pass's room for 16 plane crossings of 9 numbers (about 1.4 kB), twice while the chunks of
rays are joined; rounded up."""

CROSSING_BYTES = 512
"""Per ray and plane: a kept crossing row (state, local field, names)."""

PATH_POINTS = 4096
"""Points kept per path (``tracer.beam.trace``'s ``max_path_points``)."""

POINT_BYTES = 2 * 9 * 8
"""Per path point: 9 numbers (time, state, kinetic energy, ledger), kept and copied once."""

SET_BYTES = 1024
"""Per voltage set of a scan: the set, its row in the table and in the journal (rounded up)."""

WORKER_BYTES = 256e6
"""Per worker process besides its maps: an interpreter with numpy, scipy, numba and the compiled
kernels (about 150 MB measured before the kernels load; rounded up)."""


def memory_limit() -> float:
    """:data:`MEMORY_SHARE` of the machine's physical memory in bytes (:data:`FALLBACK_LIMIT` where
    it cannot be asked)."""
    try:
        return MEMORY_SHARE * os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (AttributeError, ValueError, OSError):
        return FALLBACK_LIMIT


def grid_nodes(domain) -> float:
    """The number of nodes of a domain's grid (a float: it may be astronomically large)."""
    (z0, z1), (r0, r1), cell = domain.z_m, domain.r_m, domain.cell_m
    return ((z1 - z0) / cell + 1) * ((r1 - r0) / cell + 1)


def maps_bytes(setup) -> float:
    """The basis maps of a setup: :data:`NODE_BYTES` per node and electrode."""
    return grid_nodes(setup.domain) * NODE_BYTES * max(1, len(setup.electrodes))


def _beam_items(setup):
    """(key, what, bytes, per-unit bytes) of each beam's rays and of the kept paths."""
    items, planes = [], len(setup.planes)
    per_ray = RAY_BYTES + CROSSING_BYTES * planes
    kept = 0
    for k, beam in enumerate(setup.beams):
        if beam.count is None:       # a rays file: already read, its size bounded by the file's
            continue
        items.append((f"beam[{k}].count", f"{beam.count:,} rays", beam.count * per_ray, per_ray))
        kept += min(beam.count, setup.trace.keep_paths)
    path = PATH_POINTS * POINT_BYTES
    items.append(("trace.keep_paths", f"{kept:,} kept paths of up to {PATH_POINTS} points", kept * path, path))
    return items


def scan_sets(spec) -> float:
    """The number of voltage sets of a ``[scan]`` of ranges (a float: it may be huge); 0 for a CSV."""
    return math.prod(float(r[3]) for r in spec.ranges) if spec.csv is None else 0.0


def check(setup, *, beams=True, scan=False, gun=False, workers=None) -> None:
    """Refuse, before any work, a command whose memory would exceed :func:`memory_limit`.

    Parameters
    ----------
    setup : tracer.schema.Setup
    beams : bool
        The command traces the setup's beams (run, tune, each set of a scan).
    scan : bool
        It scans: the voltage sets and their table, and each worker's maps and rays.
    gun : bool
        It runs the gun: ``[gun] rays`` rays, every path kept.
    workers : int, optional
        Worker processes of a scan (the command line's ``--workers``, or the CPU count).

    Raises
    ------
    ConfigError
        Naming the largest item, its estimate, the limit and what would fit.
    """
    maps = maps_bytes(setup)
    items = _beam_items(setup) if beams else []
    if scan and setup.scan is not None:
        n = scan_sets(setup.scan)
        items.append(("scan", f"{n:,.0f} voltage sets", n * SET_BYTES, SET_BYTES))
        if workers is not None and workers > 1:
            per = WORKER_BYTES + maps + sum(b for _, _, b, _ in items[:-1])
            items.append(("--workers", f"{workers} worker processes", workers * per, per))
    if gun and setup.gun is not None:
        rays = setup.gun.rays
        per = RAY_BYTES + PATH_POINTS * POINT_BYTES
        items.append(("gun.rays", f"{rays:,} rays with their paths", rays * per, per))
    total = maps + sum(b for _, _, b, _ in items)
    limit = memory_limit()
    if total <= limit or not items:
        return
    key, what, size, per = max(items, key=lambda item: item[2])
    room = max(0.0, limit - (total - size))
    fits = math.floor(room / per) if math.isfinite(room / per) else 0
    fit = f"at most about {fits:,} fit" if fits else "the rest of the command alone does not fit either"
    raise ConfigError(key, f"{what} need about {_gb(size)} of memory, and the whole command about "
                           f"{_gb(total)}, more than {_gb(limit)} ({MEMORY_SHARE:.0%} of this machine's "
                           f"memory); {fit}")


def check_crossings(counts, room, row_bytes) -> None:
    """Refuse, after a beam's first pass, plane crossings too many to keep.

    Every crossing is kept (:func:`tracer.beam.trace`): the rays that crossed more often than the
    first pass had ``room`` for are traced again with room for all of theirs, and every crossing
    becomes a row.  How often rays cross is known only once they have flown (a trapped ray may
    cross a plane at every turn), so this check comes after the first pass, before those arrays
    are made.

    Parameters
    ----------
    counts : int array
        The crossings of each ray.
    room : int
        The room a ray had in the first pass.
    row_bytes : int
        The bytes of one crossing slot of the kernel.

    Raises
    ------
    ConfigError
        Keyed ``plane``, with the crossings counted and the estimate.
    """
    over = counts[counts > room]
    need = over.size * float(over.max(initial=0)) * row_bytes + float(counts.sum()) * CROSSING_BYTES
    limit = memory_limit()
    if need > limit:
        raise ConfigError("plane", f"the rays crossed the planes {int(counts.sum()):,} times (one ray "
                                   f"{int(counts.max()):,} times), and keeping every crossing needs about "
                                   f"{_gb(need)}, more than {_gb(limit)} ({MEMORY_SHARE:.0%} of this machine's "
                                   "memory): use fewer planes or rays, or a shorter [trace] max_time_us")


def _gb(size) -> str:
    return f"{size / 1e9:.3g} GB"
