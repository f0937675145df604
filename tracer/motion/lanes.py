"""The lane loop: many rays traced in parallel, ``LANES`` at a time on each thread.

Lanes. One thread traces ``LANES`` rays side by side: each round every lane chooses its step,
:func:`tracer.motion.stepper.lane_step` takes all the steps at once with the loops over lanes
innermost (so they compile to SIMD instructions), and every lane then checks its own step, walls
and events; a lane whose ray has ended takes the next. The lanes do not interact: a ray's result
does not depend on its neighbours.

Step length and electrodes. A step is never longer than ``max_step`` metres of path, and never
leaves its cell (:mod:`tracer.motion.walls`), so the Runge–Kutta stages cannot jump over a region
where the field changes; events are found on each accepted step's dense output
(:mod:`tracer.motion.events`). The energy ledger (:func:`tracer.ledger.residual_J`) is kept at
every accepted step and event.
"""

import numpy as np
from numba import njit, prange

from tracer.motion.bundles import (COUNTS, LANES, ROW_LEN, W_ROWS, Limits, Out, Scene)
from tracer.motion.drive import Drive, drive_workspace
from tracer.motion.events import TOUCH
from tracer.motion.phases import (check_steps, choose_steps, hand_in, lane_bundles, settle_steps,
                                  start_lanes)
from tracer.motion.stepper import lane_next_rates, lane_step
from tracer.motion.walls import SNAP


@njit(cache=True, error_model="numpy")
def trace_lanes(lo, hi, starts, t_start, herm, drive, nodes, sym, bounds, cell, shapes, mass,
                charge, t_max, rtol, atol_p, max_step, sample, fine, planes, stops, max_steps,
                final, info, cross_plane, cross_state, paths, quiet, spent, magnet):
    """Trace rays lo..hi-1 of ``starts`` on one thread, ``LANES`` at a time.

    Every lane holds one ray; each round runs the phases of :mod:`tracer.motion.phases`: idle
    lanes take the next rays, every lane chooses its step, :func:`lane_step` takes all the steps
    at once, every lane checks its own (error and cell walls), :func:`lane_next_rates` gives the
    rates in the cells the steps are entering, every lane settles its step (the kink at the wall,
    events, the ledger), and lanes whose ray has ended hand in its results.

    Row r of ``final`` (a state row, ``ROW_*`` of :mod:`tracer.motion.bundles`, with the worst
    |ledger|) and of ``info`` (the ``C_*`` counts), and ``cross_plane``/``cross_state`` (state
    rows, the worst |ledger| so far) receive ray r's results; ``paths[r]`` (for r < len(paths))
    receives its accepted-step points (state rows with the signed ledger); when it fills up, every
    other point is dropped and the spacing doubles, so it always spans the whole ray (its last row
    is kept for the end point). In the cells marked by ``quiet``
    (:func:`tracer.motion.events.quiet_cells`) accepted steps skip the event search.

    Voltages in time (``drive`` with K > 0 groups, :mod:`tracer.motion.drive`): ray r starts at
    ``t_start[r]`` and flies for at most ``t_max``; its steps end on waveform corners (where a
    jump adds its work) and are at most ``drive.waves.max_step_s`` long; the ledger subtracts the
    dV/dt work (:func:`tracer.ledger.time_ledger_J`), whose sum and magnitude over the ray go to
    ``spent[r]`` (volts). With K = 0 none of this runs and the trace is the static one.

    A ``magnet`` (:class:`tracer.motion.bundles.Magnet`) adds q v x B to the force, the lanes
    keeping A_theta's polynomial of their cells beside the potential's; ``None`` compiles the
    electric-only kernel.
    """
    scene = Scene(starts, t_start, atol_p, herm, drive, nodes, sym, bounds, cell, shapes, planes,
                  stops, quiet)
    lim = Limits(mass, charge, t_max, rtol, max_step, sample, fine, max_steps,
                 rtol * min(nodes.hz, nodes.hr), TOUCH * min(nodes.hz, nodes.hr),
                 SNAP * min(nodes.hz, nodes.hr))
    out = Out(final, info, cross_plane, cross_state, paths, spent)
    lanes, tally, books, trial, scratch = lane_bundles(drive.driven.shape[0])
    w = np.zeros((W_ROWS, LANES))   # the stepper's lane workspace (allocated here: SIMD)
    dw = drive_workspace(drive)
    nxt = lo
    while True:
        nxt, active = start_lanes(nxt, hi, lanes, tally, books, scratch, out, w, dw, scene, lim,
                                  magnet)
        if active == 0:
            break
        choose_steps(lanes, tally, scratch, w, scene, lim)
        lane_step(w, nodes, sym, mass, charge, rtol, lim.atol_x, dw, drive.waves, lanes.piece,
                  magnet)
        check_steps(lanes, tally, trial, scratch, w, dw, scene, lim, magnet)
        lane_next_rates(w, nodes, sym, mass, charge, dw, drive.waves, lanes.piece, magnet)
        settle_steps(lanes, tally, books, trial, scratch, out, w, dw, scene, lim, magnet)
        hand_in(lanes, tally, books, out, lim)


@njit(cache=True, parallel=True, error_model="numpy")
def trace_rays(starts, t_start, herm, waves, driven, nodes, sym, bounds, cell, shapes, mass, charge,
               t_max, rtol, atol_p, max_step, sample, fine, planes, stops, max_steps, max_cross,
               paths, quiet, group, magnet):
    """Trace many rays in parallel (numba prange over groups of rays, each traced by
    :func:`trace_lanes`, whose docstring gives the layouts).

    Parameters
    ----------
    starts : float64[n, 6]
        Start states (x, y, z, px, py, pz), SI.
    t_start : float64[n]
        Start times, seconds (each ray flies for at most ``t_max`` from its start).
    herm : float64[4, nz, nr]
        The map's Hermite node data (:class:`tracer.fieldmap.PotentialMap`); with voltages in
        time, that of the static map.
    waves, driven : tracer.waveforms.WaveArrays, float64[K, 4, nz, nr]
        The waveforms and group maps (:class:`tracer.motion.drive.Drive`; K = 0 for a static
        field), apart: numba's parallel loop takes no tuple of tuples.
    nodes : Nodes
        Its node grid.
    sym : int
        The symmetry code (:data:`tracer.motion.symmetry.SYMMETRY_CODE`).
    bounds : float64[4]
        The domain (z_min, z_max, r_min, r_max).
    cell : int array[nz - 1, nr - 1]
        ``Raster.cell`` of the geometry.
    shapes : Shapes
        The electrode shapes.
    atol_p : float64[n]
        Absolute momentum tolerance of each ray.
    paths : float64[k, m, ROW_LEN]
        Path buffers of the first k rays (k may be 0).
    planes : float64[k, 3]
        Detector planes as lines (n_z, n_r, d) of the map plane, n_z z + n_r r = d with a unit
        normal (:meth:`tracer.schema.Plane.line`).
    stops : bool[k]
        Whether each plane ends the rays that cross it.
    quiet : bool[nz - 1, nr - 1]
        :func:`tracer.motion.events.quiet_cells` of the cell map and planes.
    group : int
        Rays per group (one thread traces a group, ``LANES`` rays at a time).
    magnet : Magnet or None
        The static magnetic field (:class:`tracer.motion.bundles.Magnet`); ``None`` for an
        electric-only run, which compiles without it.

    Returns
    -------
    final : float64[n, ROW_LEN] (state rows); info : int64[n, COUNTS] (``C_*`` columns: code,
    electrode, crossings, path points, steps, rejected steps, field evaluations); cross_plane :
    int64[n, max_cross]; cross_state : float64[n, max_cross, ROW_LEN]; spent : float64[n, 2]
    (the dV/dt and jump work W of each ray and its magnitude, volts; zeros in a static field)
    """
    n = starts.shape[0]
    final = np.zeros((n, ROW_LEN))
    info = np.zeros((n, COUNTS), dtype=np.int64)
    cross_plane = np.full((n, max_cross), -1, dtype=np.int64)
    cross_state = np.zeros((n, max_cross, ROW_LEN))
    spent = np.zeros((n, 2))
    for g in prange(-(-n // group)):
        trace_lanes(g * group, min(n, (g + 1) * group), starts, t_start, herm,
                    Drive(waves, driven), nodes, sym,
                    bounds, cell, shapes, mass, charge, t_max, rtol, atol_p, max_step, sample, fine,
                    planes, stops, max_steps, final, info, cross_plane, cross_state, paths, quiet,
                    spent, magnet)
    return final, info, cross_plane, cross_state, spent
