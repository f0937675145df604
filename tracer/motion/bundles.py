"""The kernel's data as named bundles, and the layouts of its arrays.

numba passes named tuples by value (tuples of scalars stay in registers) or by reference (tuples of
arrays, whose arrays the kernels may write), and caches kernels that take them.

* :class:`Nodes`: the node grid of a (z, r) potential map, as the kernels see it;
* :class:`Shapes`: the electrode shapes (:meth:`tracer.geometry.ShapeTable.arrays`);
* the ray end codes;
* the layout of a state row, shared by a ray's end, its plane crossings and its path points;
* :class:`Magnet`: the static magnetic field (absent, ``None``, in an electric-only run);
* the lane workspace of :mod:`tracer.motion.stepper` (one column a lane);
* the lane state of the lane loop (:mod:`tracer.motion.lanes`): named rows of three arrays.
"""

from collections import namedtuple

import numpy as np

from tracer.jit import njit
from tracer.magnetics.uniform import EVERYWHERE, ROW, UniformField
from tracer.magnetics.units import MagneticMap

Nodes = namedtuple("Nodes", ["z0", "r0", "hz", "hr", "nz", "nr", "z1", "r1"])
"""The node grid of a (z, r) map: first node (z0, r0), spacings (hz, hr), node counts (nz, nr)
and last node (z1, r1), metres."""

Shapes = namedtuple("Shapes", ["kind", "owner", "start", "count", "points", "sector", "bbox"])
"""The electrode shapes in the layout of :meth:`tracer.geometry.ShapeTable.arrays`."""


Magnet = namedtuple("Magnet", ["herm", "coils", "kinds", "regions", "fields"])
"""The static magnetic field as the kernel sees it (:func:`tracer.motion.force.magnetic_field`):
``herm`` float64[4, nz, nr], the Hermite node data of A_theta on the map's nodes (coils and axial
profiles, :class:`tracer.magnetics.units.MagneticMap`), used when ``coils`` is true; and K uniform
fields, ``fields`` float64[K, 3] (B_x, B_y, B_z in tesla) each within its region ``kinds[k]``,
``regions[k]`` (:func:`tracer.magnetics.uniform.region_row`). An electric-only run passes ``None``
instead: numba then compiles the kernel without any of it."""


def nodes_of(grid):
    """The :class:`Nodes` of a :class:`tracer.grid.Grid`."""
    return Nodes(float(grid.z0), float(grid.r0), float(grid.hz), float(grid.hr), int(grid.nz),
                 int(grid.nr), float(grid.z1), float(grid.r1))


def magnet_of(grid, sources):
    """The :class:`Magnet` of magnetic sources on a map's grid, or None without any.

    Parameters
    ----------
    grid : tracer.grid.Grid
        The potential map's grid.
    sources : MagneticMap, UniformField, a sequence of them, or None
        At most one :class:`tracer.magnetics.units.MagneticMap` (coils and axial profiles), on
        ``grid`` and so in axial symmetry, and any :class:`tracer.magnetics.uniform.UniformField`.

    Raises
    ------
    ValueError
        For a magnetic map on another grid or in planar symmetry, or two of them.
    TypeError
        For anything else.
    """
    if sources is None:
        return None
    if isinstance(sources, (MagneticMap, UniformField)):
        sources = (sources,)
    maps = [s for s in sources if isinstance(s, MagneticMap)]
    uniform = [s for s in sources if isinstance(s, UniformField)]
    if len(maps) + len(uniform) != len(sources):
        raise TypeError("magnetic sources are MagneticMap or UniformField objects")
    if not sources:
        return None
    if len(maps) > 1:
        raise ValueError("give the coils and axial profiles as one MagneticMap")
    herm = np.zeros((4, 2, 2))
    if maps:
        g = maps[0].grid
        if grid.symmetry != "axial":
            raise ValueError(f"coils and axial profiles need an axially symmetric map, not "
                             f"{grid.symmetry!r}")
        if (g.z0, g.hz, g.nz, g.r0, g.hr, g.nr) != (grid.z0, grid.hz, grid.nz, grid.r0, grid.hr,
                                                    grid.nr):
            raise ValueError("the magnetic map lies on another grid than the potential map")
        herm = np.ascontiguousarray(maps[0].hermite, dtype=np.float64)
    kinds = np.array([EVERYWHERE if u.region is None else u.region.kind for u in uniform],
                     dtype=np.int64)
    regions = np.zeros((len(uniform), ROW))
    for k, u in enumerate(uniform):
        if u.region is not None:
            row = u.region.row()
            regions[k, :row.size] = row
    fields = np.array([u.b_T for u in uniform], dtype=np.float64).reshape(-1, 3)
    return Magnet(herm, bool(maps), kinds, regions, fields)


def shapes_of(table):
    """The :class:`Shapes` of a :class:`tracer.geometry.ShapeTable`."""
    return Shapes(*table.arrays())


# Ray end codes (see tracer.beam.STATUS for the names).
RUNNING, LANDED, PLANE, LEFT, TIME, INSIDE, STALLED = -1, 0, 1, 2, 3, 4, 5

# A state row: (t, x, y, z, px, py, pz, kinetic energy J, ledger J), the layout of a ray's end
# (with its worst |ledger|), of its plane crossings (worst |ledger| so far) and of its path
# points (the signed ledger).
ROW_T, ROW_STATE, ROW_KE, ROW_LEDGER, ROW_LEN = 0, 1, 7, 8, 9


@njit(cache=True, error_model="numpy", inline="always")
def put_row(rows, n, t, s, ke, ledger):
    """Write state row n of ``rows``: time t, the state s[:6], kinetic energy and ledger."""
    rows[n, ROW_T] = t
    for i in range(6):
        rows[n, ROW_STATE + i] = s[i]
    rows[n, ROW_KE] = ke
    rows[n, ROW_LEDGER] = ledger


# The counts of a traced ray: the columns of the kernel's int64[n, COUNTS] output.
C_CODE, C_ELECTRODE, C_CROSSINGS, C_PATH, C_STEPS, C_REJECTED, C_EVALS, COUNTS = range(8)

# Rays stepped together by one thread: their Runge–Kutta stages run as SIMD loops over the lanes.
LANES = 8
# Rows of the lane workspace (float64[W_ROWS, LANES]), one column per lane.
W_Y0 = 0        # 6: the state a step starts from
W_Y1 = 6        # 6: the stage point; after the step, the end state
W_K = 12        # 42: stage rates, stage j component i in row W_K + 6 j + i
W_PATCH = 54    # 16: the cell's polynomial (tracer.fieldmap.patch_coefficients)
W_CZ = 70       # the cell's first corner, z
W_CR = 71       # and r
W_H = 72        # the step's length in time
W_V1 = 73       # the potential at the end state
W_ERR = 74      # the scaled error norm of the step
W_ATOL = 75     # the ray's absolute momentum tolerance
W_DENSE = 76    # 30: continuous extension, coefficient m component i in row W_DENSE + 6 m + i
W_RATE = 106    # 6: the rate at a stage point
W_NEXT = 112    # 18: the polynomial and first corner of the cell a step is about to enter
W_VN = 130      # the potential at the end state in that cell
W_T = 131       # the time the step starts at
W_BPATCH = 132  # 16: the polynomial of A_theta in the cell (coils and axial profiles; Magnet)
W_BNEXT = 148   # 16: that of the cell a step is about to enter
W_G = 164       # 7: voltages in time, the rate of the dV/dt work at each stage (V/s)
W_GN = 171      # and at the end state in the cell a step is about to enter
W_ROWS = 172

# The lane state of the lane loop (tracer.motion.lanes), kept beside the stepper's workspace in
# three arrays with named rows (module constants, so numba folds them), which its phases take
# whole: a call binding an array costs a reference count, and a bundle of a few arrays keeps a
# round's phases cheap.
# Float rows (float64[F_ROWS, LANES], one column a lane):
F_T = 0         # the time the lane's next step starts at
F_STOP = 1      # when its ray's time is up
F_HP = 2        # the length of its last accepted step (0: none, no prediction from it)
F_CUT = 3       # the length of a step cut back to a wall, to be redone (0: none)
F_ERR = 4       # the step-size proposal of the error control
F_WORST = 5     # the worst |ledger| of the ray so far, J
F_KE = 6        # the ray's kinetic energy at its start, J
F_V = 7         # the potential at its start, volts
F_WORK = 8      # the dV/dt and jump work so far, volts
F_SPREAD = 9    # its magnitude, volts
F_THETA = 10    # the trial step is cut back to the first wall before this point (> 1: not)
F_DT = 11       # the time between the trial step's end and the wall it is passing
F_END = 12      # the fraction of its accepted step at which its ray ends (> 1: it goes on)
F_ROWS = 13
# Int rows (int64[I_ROWS, LANES]): first the ray's counts, rows C_CODE..C_EVALS in the order of
# the kernel's info columns, then:
I_RAY = COUNTS        # the ray in the lane (-1: none)
I_CI = COUNTS + 1     # the cell it is in, z index
I_CJ = COUNTS + 2     # and r index
I_STRIDE = COUNTS + 3  # a path point every this many steps
I_PIECE = COUNTS + 4  # the waveform piece of its step
I_CUT = COUNTS + 5    # 1: the trial step is one cut back to a wall
I_PASSED = COUNTS + 6  # 1: it passed the error test
I_NEED = COUNTS + 7   # 1: it needs the rate in the cell ahead
I_PAST = COUNTS + 8   # 1: it ends outside its cell
I_END_I = COUNTS + 9   # the cell its step ends in: z index
I_END_J = COUNTS + 10  # and r index
I_AHEAD_I = COUNTS + 11  # the cell ahead: z index
I_AHEAD_J = COUNTS + 12  # and r index
I_ENTER = COUNTS + 13  # 1: the lane enters the cell ahead
I_TAKEN = COUNTS + 14  # 1: its step is accepted
I_CROSS_FROM = COUNTS + 15  # its first plane crossing on that step (C_CROSSINGS before it)
I_ROWS = COUNTS + 16
# Vector rows (float64[LANES, V_ROWS, 6], lane first, so that each vector is contiguous):
V_Y0 = 0        # the state the next step starts from
V_K0 = 1        # its first stage rate
V_Y1 = 2        # the trial step's end state
V_K1 = 3        # the rate there
V_RC = 4        # 5: the dense output of the last accepted step
V_RT = 9        # 5: that of the trial step
V_ROWS = 14


@njit(cache=True, error_model="numpy", forceinline=True)
def lane_state():
    """The lane state, no lane holding a ray: (float rows, int rows, vectors), zeroed but for
    the ray (-1), its code (``RUNNING``), its electrode (-1) and its path stride (1)."""
    lf = np.zeros((F_ROWS, LANES))
    li = np.zeros((I_ROWS, LANES), dtype=np.int64)
    for l in range(LANES):
        li[I_RAY, l] = -1
        li[C_CODE, l] = RUNNING
        li[C_ELECTRODE, l] = -1
        li[I_STRIDE, l] = 1
    return lf, li, np.zeros((LANES, V_ROWS, 6))
