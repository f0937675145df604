"""The kernel's data as named bundles, and the layouts of its arrays.

numba passes named tuples by value (tuples of scalars stay in registers) or by reference (tuples of
arrays, whose arrays the kernels may write), and caches kernels that take them.

* :class:`Nodes`: the node grid of a (z, r) potential map, as the kernels see it;
* :class:`Shapes`: the electrode shapes (:meth:`tracer.geometry.ShapeTable.arrays`);
* the ray end codes;
* the layout of a state row, shared by a ray's end, its plane crossings and its path points;
* the lane workspace of :mod:`tracer.motion.stepper` (one column a lane).
"""

from collections import namedtuple

from numba import njit

Nodes = namedtuple("Nodes", ["z0", "r0", "hz", "hr", "nz", "nr", "z1", "r1"])
"""The node grid of a (z, r) map: first node (z0, r0), spacings (hz, hr), node counts (nz, nr)
and last node (z1, r1), metres."""

Shapes = namedtuple("Shapes", ["kind", "owner", "start", "count", "points", "sector", "bbox"])
"""The electrode shapes in the layout of :meth:`tracer.geometry.ShapeTable.arrays`."""


def nodes_of(grid):
    """The :class:`Nodes` of a :class:`tracer.grid.Grid`."""
    return Nodes(float(grid.z0), float(grid.r0), float(grid.hz), float(grid.hr), int(grid.nz),
                 int(grid.nr), float(grid.z1), float(grid.r1))


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
W_ROWS = 132
