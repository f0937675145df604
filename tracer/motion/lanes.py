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

Phases. A round is a short sequence of phases, each a loop over the lanes in a module named for
it: :func:`tracer.motion.rays.take_rays` (only when a lane is free and rays remain),
:func:`tracer.motion.choose.choose_steps`, :func:`tracer.motion.stepper.lane_step`,
:func:`tracer.motion.check.check_steps` (and :func:`tracer.motion.check.load_next_groups` with
voltages in time), :func:`tracer.motion.stepper.lane_next_rates`,
:func:`tracer.motion.settle.settle_steps` (and :func:`tracer.motion.settle.cut_back` when steps
are cut back to a wall), :func:`tracer.motion.search.search_steps` (events on the accepted
steps), :func:`tracer.motion.move.move_lanes` (the ledger and the move to a step's end or event)
and :func:`tracer.motion.rays.hand_in`. They share the lane state of
:func:`tracer.motion.bundles.lane_state` (named rows of three arrays) and the stepper's
workspace. The stepper's two phases, the search and the move are copied into the loop by numba
(``inline="always"``); the others are compiled on their own and inlined by LLVM
(``forceinline=True``), which keeps the loop's first compile no longer than before the split
(DEVELOPERS.md, "numba's cache").

Reference counts. :func:`trace_lanes` is compiled without numba's reference counting
(``_nrt=False``), and so is each function that it is the first to compile (numba passes the flag
on): it allocates nothing, and borrows its arrays, the workspace of :func:`lane_work` among them,
from :func:`trace_rays`, which holds them for the call. With reference counting, numba keeps a
count pair (two atomic operations) for every array a phase copied into the loop takes, each
round, whenever the phase calls a function that is not inlined, as the search and the move do:
with their forty arrays they made warm tracing up to 11 % slower. :func:`trace_lanes` is
inlined by LLVM (``forceinline=True``) into :func:`trace_rays`' parallel loop, next to the
workspace's allocations: called there instead, with the allocations out of LLVM's sight, it traced
1.5-2 times slower. A function compiled without reference counting cannot allocate (numba refuses:
"NRT required"); none that :func:`trace_lanes` calls may return an array, since a caller with
reference counting would release a reference it was never given.
"""

import numpy as np

from tracer.jit import njit, prange
from tracer.ledger import GAUSS_POINTS
from tracer.motion.bundles import COUNTS, LANES, ROW_LEN, W_ROWS, lane_state
from tracer.motion.check import check_steps, load_next_groups
from tracer.motion.choose import choose_steps
from tracer.motion.drive import drive_of, drive_workspace
from tracer.motion.events import MAX_HALVINGS, TOUCH
from tracer.motion.move import move_lanes
from tracer.motion.rays import hand_in, take_rays
from tracer.motion.search import search_steps
from tracer.motion.settle import cut_back, settle_steps
from tracer.motion.stepper import lane_next_rates, lane_step
from tracer.motion.walls import SNAP


@njit(cache=True, error_model="numpy", forceinline=True)
def lane_work(drive):
    """The workspace of one :func:`trace_lanes` call (``work``), allocated by its caller, which
    holds it while the loop borrows it: the stepper's workspace, the lane state
    (:func:`tracer.motion.bundles.lane_state`), the drive workspace and the dV/dt work's scratch
    (three ``None`` for a static field, ``drive`` None) and the scratch of the other phases, in
    the order in which :func:`trace_lanes` unpacks them."""
    lf, li, vec = lane_state()
    if drive is None:
        timed = (None, None, None)
    else:
        nk = drive.driven.shape[0]
        timed = (drive_workspace(drive), np.zeros((GAUSS_POINTS, nk)), np.zeros(nk))
    return (np.zeros((W_ROWS, LANES)), lf, li, vec) + timed + (
            np.empty((1, 6)),      # a rate in a new cell
            np.empty((3, 5)),      # the predicted path of the next step (walls.reach)
            np.empty(6),
            np.empty(2),           # plane crossings on a piece (events.plane_crossings)
            np.empty((MAX_HALVINGS + 2, 8)),   # pieces being halved (events.touch)
            np.empty(2), np.empty(4))


@njit(cache=True, error_model="numpy", forceinline=True, _nrt=False)
def trace_lanes(lo, hi, starts, t_start, herm, drive, nodes, sym, bounds, cell, shapes, mass,
                charge, t_max, rtol, atol_p, max_step, sample, fine, planes, stops, max_steps,
                final, info, cross_plane, cross_state, paths, quiet, spent, magnet, work):
    """Trace rays lo..hi-1 of ``starts`` on one thread, ``LANES`` at a time.

    Every lane holds one ray; each round, idle lanes take the next rays, every lane chooses its
    step, :func:`lane_step` takes all the steps at once, and every lane checks its own: error and
    cell walls, then (after :func:`lane_next_rates` has given the rates in the cells the steps are
    entering) the kink at the wall, events and the ledger. Lanes whose ray has ended hand in its
    results.

    Row r of ``final`` (a state row, ``ROW_*`` of :mod:`tracer.motion.bundles`, with the worst
    |ledger|) and of ``info`` (the ``C_*`` counts), and ``cross_plane``/``cross_state`` (state
    rows, the worst |ledger| so far) receive ray r's results; ``paths[r]`` (for r < len(paths))
    receives its accepted-step points (state rows with the signed ledger); when it fills up, every
    other point is dropped and the spacing doubles, so it always spans the whole ray (its last row
    is kept for the end point). In the cells marked by ``quiet``
    (:func:`tracer.motion.events.quiet_cells`) accepted steps skip the event search.

    Ray r starts at ``t_start[r]`` and flies for at most ``t_max``. Voltages in time (a
    :class:`tracer.motion.drive.Drive`; ``None`` compiles the static kernel, without any of
    this): its steps end on waveform corners (where a jump adds its work) and are at most
    ``drive.waves.max_step_s`` long; the ledger subtracts the dV/dt work
    (:func:`tracer.ledger.time_ledger_J`), whose sum and magnitude over the ray go to
    ``spent[r]`` (volts).

    A ``magnet`` (:class:`tracer.motion.bundles.Magnet`) adds q v x B to the force, the lanes
    keeping A_theta's polynomial of their cells beside the potential's; ``None`` compiles the
    electric-only kernel.

    ``work`` is :func:`lane_work`'s workspace: the loop allocates nothing (it is compiled without
    reference counting, see the module's docstring).
    """
    w, lf, li, vec, dw, phi, at_x, k_new, ahead, buf, hits, stack, pa, box = work
    waves = None if drive is None else drive.waves
    atol_x = rtol * min(nodes.hz, nodes.hr)
    touch_tol = TOUCH * min(nodes.hz, nodes.hr)
    snap = SNAP * min(nodes.hz, nodes.hr)
    nxt = lo
    busy = 0
    while True:
        if busy < LANES and nxt < hi:
            taken = take_rays(nxt, hi, starts, t_start, atol_p, t_max, herm, drive, dw, nodes,
                              sym, bounds, shapes, mass, charge, max_step, snap, paths, magnet, w,
                              lf, li, vec, k_new)
            busy += taken - nxt
            nxt = taken
        if busy == 0:
            break
        choose_steps(waves, nodes, sym, mass, max_step, max_steps, snap, w, lf, li, vec, box,
                     ahead)
        lane_step(w, nodes, sym, mass, charge, rtol, atol_x, drive, dw, li, magnet)
        check_steps(herm, nodes, sym, mass, snap, magnet, w, lf, li, vec, box, buf)
        if drive is not None:
            load_next_groups(drive, dw, nodes, sym, w, li)
        lane_next_rates(w, nodes, sym, mass, charge, drive, dw, magnet)
        if settle_steps(rtol, atol_p, w, lf, li, vec, k_new) > 0:
            cut_back(nodes, sym, shapes, w, lf, li, vec, box, buf)

        search_steps(bounds, cell, nodes, sym, shapes, quiet, planes, stops, mass, sample, fine,
                     touch_tol, cross_plane, cross_state, w, lf, li, vec, pa, hits, stack, buf)
        move_lanes(herm, drive, dw, nodes, sym, mass, charge, cross_state, paths, magnet, w, lf,
                   li, vec, phi, at_x, buf)
        busy = hand_in(final, info, spent, mass, lf, li, vec)



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
    waves, driven : tracer.waveforms.WaveArrays, float64[K, 4, nz, nr] or None, None
        The waveforms and group maps (:class:`tracer.motion.drive.Drive`), apart: numba's parallel
        loop takes no tuple of tuples. ``None`` for a static field compiles the static kernel.
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
        drive = drive_of(waves, driven)
        trace_lanes(g * group, min(n, (g + 1) * group), starts, t_start, herm, drive, nodes, sym,
                    bounds, cell, shapes, mass, charge, t_max, rtol, atol_p, max_step, sample, fine,
                    planes, stops, max_steps, final, info, cross_plane, cross_state, paths, quiet,
                    spent, magnet, lane_work(drive))
    return final, info, cross_plane, cross_state, spent
