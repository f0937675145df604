"""The adaptive Runge–Kutta ray kernel and its event location (numba).

Rays move by the relativistic equations of motion in momentum form,

    dx/dt = p / (gamma m),     dp/dt = q E(x),     gamma = sqrt(1 + (|p| / (m c))^2),

in 3-D Cartesian coordinates (x, y, z), z along the axis. The field comes from a (z, r) potential
map through the bicubic Hermite interpolant of :mod:`tracer.fieldmap`, each cell's patch in power
form (``fieldmap.patch_coefficients``), computed once per cell for all of its steps:

* axial symmetry: r = hypot(x, y), E_x = E_r x / r, E_y = E_r y / r (zero on the axis);
* planar: the map's r is y, E_x = 0;
* mirrored planar: the map is looked up at |y| and E_y takes the sign of y.

The integrator is the embedded Dormand–Prince 5(4) pair (Dormand & Prince 1980, "A family of
embedded Runge-Kutta formulae", J. Comput. Appl. Math. 6, 19-26) with local extrapolation, FSAL,
and the continuous extension of Shampine (1986, "Some practical Runge-Kutta formulas", Math.
Comp. 46, 135-150) in the form of Hairer, Nørsett & Wanner (Solving Ordinary Differential
Equations I, 2nd ed., 1993, sec. II.6). The error of each step is the RMS over the six
components of the embedded estimate, each scaled by ``atol + rtol * max(|y_old|, |y_new|)``,
with ``atol`` = rtol x cell for positions and rtol x the ray's momentum scale for momenta.

Cell walls. The interpolant is a bicubic patch per cell: the field is continuous across cell walls
but its derivatives jump, and a Runge–Kutta step that straddles such a kink is neither accurate nor
honestly estimated. Every step therefore integrates one cell's polynomial, continued past the
cell's walls, and ends at the wall where the ray leaves the cell:

* before the step, the time to that wall is predicted by continuing the last accepted step's dense
  output (a straight line with constant acceleration for the first step), and the step is chosen to
  end there (growing by up to ``STRETCH`` rather than stopping just short of it), so it rarely
  has to be cut back;
* a step that ends within ``SNAP`` cells (of path) of a wall, on either side, moves the ray into the
  next cell, whose polynomial then gives the next step's first stage. The error of the short stretch
  integrated with the continued polynomial is estimated from the two fields at the step's end,
  ``|dt| |F_next - F_this| / 2`` (the field difference grows linearly from the wall over the time
  ``dt`` between the step's end and the wall), and must stay below ``KINK_FRACTION`` of the
  tolerance; a step that overshoots further, or whose path leaves the cell between its ends (a ray
  passing the axis, or turning), is cut back to the wall on its own dense output and redone.

Lanes. One thread traces ``LANES`` rays side by side: each round every lane chooses its step,
:func:`lane_step` takes all the steps at once with the loops over lanes innermost (so they compile
to SIMD instructions), and every lane then checks its own step, walls and events; a lane whose ray
has ended takes the next. The lanes do not interact: a ray's result does not depend on its
neighbours.

Step length and electrodes. A step is never longer than ``max_step`` metres of path, and never
leaves its cell, so the Runge–Kutta stages cannot jump over a region where the field changes.
Electrodes are found on the dense output, not at step ends: each accepted step is cut into pieces
of at most ``sample`` metres (half a cell by default); a piece whose (z, r) box touches a grid cell
that is cut by a surface or lies inside an electrode (``Raster.cell`` != -1) is cut again into
pieces of at most ``fine`` metres (1/32 of a cell), and for each such piece the exact shapes are
asked: is its end inside an electrode (``geometry.electrode_at``), or does its chord cross a surface
(``geometry.first_hit``, which catches foils thinner than the piece). Pieces in free cells ask
nothing. A landing is then bisected on the dense output with ``electrode_at`` to 2^-48 of the
piece, far below 1e-3 of a cell. Plane crossings (z = const) and leaving the domain are bisected on
the dense output the same way.
"""

import math

import numpy as np
from numba import njit, prange
from scipy import constants

from tracer.fieldmap import cell_index, patch_coefficients, patch_eval
from tracer.geometry import electrode_at, first_hit
from tracer.ledger import kinetic_energy_J

C_LIGHT = constants.c

# Dormand & Prince (1980), table 2 ("RK5(4)7M"): nodes c, coefficients a (row i = stage i),
# fifth-order weights b, and e = b - b_hat (fifth minus embedded fourth order weights).
DP_C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0, 1.0])
DP_A = np.array([
    [0.0, 0.0, 0.0, 0.0, 0.0, 0.0],
    [1 / 5, 0.0, 0.0, 0.0, 0.0, 0.0],
    [3 / 40, 9 / 40, 0.0, 0.0, 0.0, 0.0],
    [44 / 45, -56 / 15, 32 / 9, 0.0, 0.0, 0.0],
    [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729, 0.0, 0.0],
    [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656, 0.0],
    [35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84],
])
DP_B = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84, 0.0])
DP_B_HAT = np.array([5179 / 57600, 0.0, 7571 / 16695, 393 / 640, -92097 / 339200, 187 / 2100, 1 / 40])
DP_E = DP_B - DP_B_HAT
# Continuous extension (Shampine 1986; Hairer, Norsett & Wanner 1993, DOPRI5 "dense" weights).
DP_D = np.array([-12715105075 / 11282082432, 0.0, 87487479700 / 32700410799,
                 -10690763975 / 1880347072, 701980252875 / 199316789632,
                 -1453857185 / 822651844, 69997945 / 29380423])

SYMMETRY_CODE = {"axial": 0, "planar": 1, "mirror": 2}

# Ray end codes (see tracer.beam.STATUS for the names).
RUNNING, LANDED, PLANE, LEFT, TIME, INSIDE, STALLED = -1, 0, 1, 2, 3, 4, 5

# Event kinds for the bisection: a coordinate passing a value, or the inside of an electrode.
EV_Z, EV_R, EV_ELECTRODE = 0, 1, 2

BISECTIONS = 48
SNAP = 1e-3           # a step ending this many cells of path from a cell wall ends on the wall
KINK_FRACTION = 0.05  # largest error of the stretch past a wall, as a fraction of the tolerance
PREDICT_SPAN = 3.0    # the last step's dense output predicts at most this many of its lengths ahead
STRETCH = 1.1         # a step may grow by this factor to reach the wall instead of stopping short
SAFETY, FAC_MIN, FAC_MAX = 0.9, 0.2, 5.0

# Rays stepped together by one thread: their Runge–Kutta stages run as SIMD loops over the lanes.
LANES = 8
# Rows of the lane workspace of lane_step (float64[W_ROWS, LANES]), one column per lane.
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
W_ROWS = 131


@njit(cache=True, error_model="numpy", inline="always")
def map_r(sym, x, y):
    """The map coordinate r of a 3-D point (hypot(x, y), |y| or y)."""
    rr = math.sqrt(x * x + y * y)     # selects, no branches: loops over lanes stay SIMD
    return rr if sym == 0 else (abs(y) if sym == 2 else y)


@njit(cache=True, error_model="numpy", inline="always")
def cell_of(grid, sym, x, y, z):
    """Indices (i, j) of the interpolation cell holding a 3-D point (clamped onto the grid)."""
    i = cell_index(z, grid[0], grid[2], int(grid[4]))
    j = cell_index(map_r(sym, x, y), grid[1], grid[3], int(grid[5]))
    return i, j


@njit(cache=True, error_model="numpy", inline="always")
def cell_ahead(grid, sym, s, length):
    """Indices of the cell holding the point ``length`` metres ahead of state s along its motion."""
    p = math.sqrt(s[3] * s[3] + s[4] * s[4] + s[5] * s[5])
    f = length / p if p > 0.0 else 0.0
    return cell_of(grid, sym, s[0] + f * s[3], s[1] + f * s[4], s[2] + f * s[5])


@njit(cache=True, error_model="numpy", inline="always")
def patch_field(a, pz, pr, grid, sym, x, y, z):
    """Potential and field at a 3-D point from the bicubic polynomial of one interpolation cell.

    Parameters
    ----------
    a : tuple of 16 float
        The cell's ``tracer.fieldmap.patch_coefficients``; the polynomial is continued beyond its
        walls.
    pz, pr : float
        The cell's first corner (z, r).
    grid : float64[8]
        (z0, r0, hz, hr, nz, nr, z1, r1) of the map's node grid.
    sym : int
        0 axial, 1 planar, 2 mirrored planar.
    x, y, z : float
        The point, metres.

    Returns
    -------
    (V, Ex, Ey, Ez) : tuple of float
        Volts and V/m. Points outside the grid are clamped onto it.
    """
    z0, r0, z1, r1 = grid[0], grid[1], grid[6], grid[7]
    iz, ir = 1.0 / grid[2], 1.0 / grid[3]
    r = map_r(sym, x, y)
    # selects rather than min, max and branches: loops over lanes stay SIMD
    zc = z0 if z0 > z else z
    zc = z1 if z1 < zc else zc
    rc = r0 if r0 > r else r
    rc = r1 if r1 < rc else rc
    v, vu, vw = patch_eval(a, (zc - pz) * iz, (rc - pr) * ir)
    dvdr = vw * ir
    ez = -vu * iz
    f = -dvdr / (r if r > 0.0 else 1.0)
    f = f if r > 0.0 else 0.0
    ey = dvdr if y < 0.0 else (0.0 if y == 0.0 else -dvdr)
    ey = f * y if sym == 0 else (ey if sym == 2 else -dvdr)
    return v, (f * x if sym == 0 else 0.0), ey, ez


@njit(cache=True, error_model="numpy", inline="always")
def field_at(herm, grid, sym, x, y, z):
    """Potential and field of the interpolant at a 3-D point (see :func:`patch_field`)."""
    i, j = cell_of(grid, sym, x, y, z)
    return patch_field(patch_coefficients(herm, i, j, grid[2], grid[3]), grid[0] + i * grid[2],
                       grid[1] + j * grid[3], grid, sym, x, y, z)


@njit(cache=True, error_model="numpy", inline="always")
def rate(a, pz, pr, grid, sym, mass, charge, s, ks, row):
    """Right-hand side of the equations of motion in the field of one cell (see
    :func:`patch_field`) at state s (x, y, z, px, py, pz): d(state)/dt into ks[row]; returns the
    potential at s."""
    igm = inverse_gamma_mass(mass, s[3], s[4], s[5])
    ks[row, 0] = s[3] * igm
    ks[row, 1] = s[4] * igm
    ks[row, 2] = s[5] * igm
    v, ex, ey, ez = patch_field(a, pz, pr, grid, sym, s[0], s[1], s[2])
    ks[row, 3] = charge * ex
    ks[row, 4] = charge * ey
    ks[row, 5] = charge * ez
    return v


@njit(cache=True, error_model="numpy", inline="always")
def dense(rc, theta, out):
    """Evaluate the continuous extension of the last step at theta in [0, 1] into out."""
    u = 1.0 - theta
    for i in range(6):
        out[i] = rc[0, i] + theta * (rc[1, i] + u * (rc[2, i] + theta * (rc[3, i] + u * rc[4, i])))


@njit(cache=True, error_model="numpy", inline="always")
def gamma_mass(mass, px, py, pz):
    """gamma m of a momentum (the velocity is p / (gamma m))."""
    mc = mass * C_LIGHT
    return mass * math.sqrt(1.0 + (px * px + py * py + pz * pz) / (mc * mc))


@njit(cache=True, error_model="numpy", inline="always")
def inverse_gamma_mass(mass, px, py, pz):
    """1 / (gamma m) of a momentum (see :func:`gamma_mass`)."""
    return 1.0 / gamma_mass(mass, px, py, pz)


@njit(cache=True, error_model="numpy", inline="always")
def lane_rate(w, l, g, sym, mass, charge, patch, v_row):
    """The rate at lane l's point ``W_Y1`` in the cell polynomial of rows patch..patch+17 (16
    coefficients, then the first corner) into ``W_RATE``, the potential into row v_row (see
    :func:`rate`; g is the grid vector as a tuple)."""
    igm = inverse_gamma_mass(mass, w[W_Y1 + 3, l], w[W_Y1 + 4, l], w[W_Y1 + 5, l])
    for i in range(3):
        w[W_RATE + i, l] = w[W_Y1 + 3 + i, l] * igm
    a = (w[patch, l], w[patch + 1, l], w[patch + 2, l], w[patch + 3, l], w[patch + 4, l],
         w[patch + 5, l], w[patch + 6, l], w[patch + 7, l], w[patch + 8, l], w[patch + 9, l],
         w[patch + 10, l], w[patch + 11, l], w[patch + 12, l], w[patch + 13, l],
         w[patch + 14, l], w[patch + 15, l])
    v, ex, ey, ez = patch_field(a, w[patch + 16, l], w[patch + 17, l], g, sym, w[W_Y1, l],
                                w[W_Y1 + 1, l], w[W_Y1 + 2, l])
    w[W_RATE + 3, l] = charge * ex
    w[W_RATE + 4, l] = charge * ey
    w[W_RATE + 5, l] = charge * ez
    w[v_row, l] = v


@njit(cache=True, error_model="numpy", inline="always")
def lane_next_rates(w, grid, sym, mass, charge):
    """The rates at the end states ``W_Y1`` of all lanes in the cells they are about to enter
    (``W_NEXT``) into ``W_RATE``, the potentials into ``W_VN``: one SIMD loop over the lanes."""
    g = (grid[0], grid[1], grid[2], grid[3], grid[4], grid[5], grid[6], grid[7])  # in registers
    for l in range(LANES):
        lane_rate(w, l, g, sym, mass, charge, W_NEXT, W_VN)


@njit(cache=True, error_model="numpy", inline="always")
def lane_stage(w, st, grid, sym, mass, charge):
    """Stage st of the step in every lane: the stage point into ``W_Y1``, its rate into row
    ``W_K + 6 st`` and its potential into ``W_V1`` (see :func:`rate`).

    The sums run over all six earlier rows (the tableau's zeros add exact zeros), so the loops inside
    the loop over lanes have constant lengths and unroll, and that loop, writing only fixed rows,
    compiles to SIMD instructions over the lanes.
    """
    g = (grid[0], grid[1], grid[2], grid[3], grid[4], grid[5], grid[6], grid[7])  # in registers
    for l in range(LANES):
        h = w[W_H, l]
        for i in range(6):
            acc = 0.0
            for j in range(6):   # DP_A[st, j] is 0 for j >= st: adding 0 k_j (finite) is exact
                acc += DP_A[st, j] * w[W_K + 6 * j + i, l]
            w[W_Y1 + i, l] = w[W_Y0 + i, l] + h * acc
        lane_rate(w, l, g, sym, mass, charge, W_PATCH, W_V1)
    for i in range(6):
        for l in range(LANES):
            w[W_K + 6 * st + i, l] = w[W_RATE + i, l]


@njit(cache=True, error_model="numpy", inline="always")
def lane_step(w, grid, sym, mass, charge, rtol, atol_x):
    """One Dormand–Prince 5(4) step in every lane of a workspace (rows ``W_*``, one column a lane).

    Each lane steps from its state y0 (``W_Y0``) with first stage rate ``W_K`` over its length
    ``W_H``, all stages in its cell's polynomial (``W_PATCH`` at corner ``W_CZ``, ``W_CR``; see
    :func:`patch_field`). Writes the other six stage rates (the last, at the end state, is the
    next step's first), the fifth-order end state into ``W_Y1`` and its potential into ``W_V1``,
    the scaled error norm (RMS over the six components of the embedded estimate, each scaled by
    atol + rtol max(|y0|, |y1|); ``atol_x`` for positions, ``W_ATOL`` for momenta) into ``W_ERR``
    and the continuous extension (Hairer et al. 1993) into ``W_DENSE``.

    Each loop over lanes holds only loops of constant length and branches the compiler turns into
    selects, so it compiles to SIMD instructions over the lanes (when w is a workspace allocated
    by the caller it is inlined into, whose shape the compiler then knows; ``W_RATE`` is scratch).
    """
    for st in range(1, 7):
        lane_stage(w, st, grid, sym, mass, charge)
    for l in range(LANES):
        h = w[W_H, l]
        acc2 = 0.0
        for i in range(6):
            e = 0.0
            d = 0.0
            for j in range(7):
                e += DP_E[j] * w[W_K + 6 * j + i, l]
                d += DP_D[j] * w[W_K + 6 * j + i, l]
            y0, y1 = w[W_Y0 + i, l], w[W_Y1 + i, l]
            a0, a1 = abs(y0), abs(y1)
            e *= h / ((atol_x if i < 3 else w[W_ATOL, l]) + rtol * (a1 if a1 > a0 else a0))
            acc2 += e * e
            dy = y1 - y0
            r2 = h * w[W_K + i, l] - dy
            w[W_DENSE + i, l] = y0
            w[W_DENSE + 6 + i, l] = dy
            w[W_DENSE + 12 + i, l] = r2
            w[W_DENSE + 18 + i, l] = dy - h * w[W_K + 36 + i, l] - r2
            w[W_DENSE + 24 + i, l] = h * d
        w[W_ERR, l] = math.sqrt(acc2 / 6.0)


@njit(cache=True, error_model="numpy", inline="always")
def step_cap(s, k, mass, length):
    """Longest time step that moves a ray at most ``length`` metres (constant-acceleration estimate)."""
    v = math.sqrt(k[0] * k[0] + k[1] * k[1] + k[2] * k[2])
    f = math.sqrt(k[3] * k[3] + k[4] * k[4] + k[5] * k[5])
    a = f / gamma_mass(mass, s[3], s[4], s[5])
    den = v + math.sqrt(v * v + 2.0 * a * length)
    if den <= 0.0:
        return np.inf
    return 2.0 * length / den


@njit(cache=True, error_model="numpy", inline="always")
def outside(bounds, sym, z, r):
    """True when (z, r) is outside the domain; leaving through the axis or mirror plane is not leaving."""
    if z < bounds[0] or z > bounds[1] or r > bounds[3]:
        return True
    return sym == 1 and r < bounds[2]


@njit(cache=True, error_model="numpy")
def is_event(kind, value, rising, z, r, geo):
    """Whether the event has happened at (z, r): a coordinate past ``value``, or inside an electrode."""
    if kind == EV_ELECTRODE:
        return electrode_at(z, r, geo[0], geo[1], geo[2], geo[3], geo[4], geo[5], geo[6]) >= 0
    c = z if kind == EV_Z else r
    return (c >= value) == rising


@njit(cache=True, error_model="numpy")
def locate(rc, sym, lo, hi, kind, value, rising, geo, buf):
    """Bisect on the dense output for the first theta in (lo, hi] where the event holds at hi."""
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        dense(rc, mid, buf)
        if is_event(kind, value, rising, buf[2], map_r(sym, buf[0], buf[1]), geo):
            hi = mid
        else:
            lo = mid
    return hi


@njit(cache=True, error_model="numpy")
def touches_surface(cell, grid, za, ra, zb, rb, pad):
    """True when the (z, r) box of a piece, widened by ``pad`` in r, meets a cut or inner cell."""
    z0, r0, hz, hr = grid[0], grid[1], grid[2], grid[3]
    ncz, ncr = cell.shape[0], cell.shape[1]
    i0 = min(max(int(math.floor((min(za, zb) - z0) / hz)), 0), ncz - 1)
    i1 = min(max(int(math.floor((max(za, zb) - z0) / hz)), 0), ncz - 1)
    j0 = min(max(int(math.floor((min(ra, rb) - pad - r0) / hr)), 0), ncr - 1)
    j1 = min(max(int(math.floor((max(ra, rb) - r0) / hr)), 0), ncr - 1)
    for i in range(i0, i1 + 1):
        for j in range(j0, j1 + 1):
            if cell[i, j] != -1:
                return True
    return False


@njit(cache=True, error_model="numpy")
def find_landing(rc, sym, ta, tb, pa, length, fine, geo, buf):
    """First landing on the dense output between ta and tb; returns (theta, electrode) or (2.0, -1).

    ``pa`` holds the (z, r) at ta, ``length`` the 3-D chord length of the piece.
    """
    n = max(1, int(math.ceil(length / fine)))
    t1, z1, r1 = ta, pa[0], pa[1]
    for m in range(1, n + 1):
        t2 = ta + (tb - ta) * m / n
        dense(rc, t2, buf)
        z2, r2 = buf[2], map_r(sym, buf[0], buf[1])
        k = electrode_at(z2, r2, geo[0], geo[1], geo[2], geo[3], geo[4], geo[5], geo[6])
        if k >= 0:
            th = locate(rc, sym, t1, t2, EV_ELECTRODE, 0.0, True, geo, buf)
            dense(rc, th, buf)
            k = electrode_at(buf[2], map_r(sym, buf[0], buf[1]),
                             geo[0], geo[1], geo[2], geo[3], geo[4], geo[5], geo[6])
            return th, k
        f, owner = first_hit(z1, r1, z2 - z1, r2 - r1,
                             geo[0], geo[1], geo[2], geo[3], geo[4], geo[5], geo[6])
        if owner >= 0 and f <= 1.0:
            return t1 + f * (t2 - t1), owner
        t1, z1, r1 = t2, z2, r2
    return 2.0, -1


@njit(cache=True, error_model="numpy", inline="always")
def cell_box(grid, i, j, box):
    """Walls (z_lo, z_hi, r_lo, r_hi) of interpolation cell (i, j); walls on the grid's edge are
    at infinity (a ray leaves the domain there, it meets no other cell)."""
    box[0] = grid[0] + i * grid[2] if i > 0 else -np.inf
    box[1] = grid[0] + (i + 1) * grid[2] if i < int(grid[4]) - 2 else np.inf
    box[2] = grid[1] + j * grid[3] if j > 0 else -np.inf
    box[3] = grid[1] + (j + 1) * grid[3] if j < int(grid[5]) - 2 else np.inf


@njit(cache=True, error_model="numpy", inline="always")
def hold(box, sym, s):
    """Widen a box of walls (z_lo, z_hi, r_lo, r_hi) to hold the point of state s."""
    r = map_r(sym, s[0], s[1])
    box[0] = min(box[0], s[2])
    box[1] = max(box[1], s[2])
    box[2] = min(box[2], r)
    box[3] = max(box[3], r)


@njit(cache=True, error_model="numpy", inline="always")
def wall_side(w):
    """-1 for a lower wall (0 z_lo, 2 r_lo), +1 for an upper one (1 z_hi, 3 r_hi): how far a
    coordinate c lies beyond wall w at ``wall`` is ``wall_side(w) * (c - wall)``."""
    return 1.0 if w & 1 else -1.0


@njit(cache=True, error_model="numpy", inline="always")
def past_wall(box, sym, s, w):
    """How far the point of state s lies beyond wall w (0 z_lo, 1 z_hi, 2 r_lo, 3 r_hi) of a box."""
    c = s[2] if w < 2 else map_r(sym, s[0], s[1])
    return wall_side(w) * (c - box[w])


@njit(cache=True, error_model="numpy", inline="always")
def beyond(box, sym, s):
    """The wall of a box of walls (z_lo, z_hi, r_lo, r_hi) that the point of state s lies
    farthest beyond, and how far (<= 0 inside)."""
    w = 0
    g = past_wall(box, sym, s, 0)
    for q in range(1, 4):
        d = past_wall(box, sym, s, q)
        if d > g:
            w, g = q, d
    return w, g


@njit(cache=True, error_model="numpy", inline="always")
def r_rate(sym, s, k):
    """dr/dt of the map coordinate r for state s with derivative k."""
    if sym == 0:
        r = math.sqrt(s[0] * s[0] + s[1] * s[1])
        return (s[0] * k[0] + s[1] * k[1]) / r if r > 0.0 else math.sqrt(k[0] * k[0] + k[1] * k[1])
    if sym == 2 and s[1] < 0.0:
        return -k[1]
    return k[1]


@njit(cache=True, error_model="numpy", inline="always")
def closest_to_axis(s, k):
    """Time at which the straight line from state s (velocity k[:3]) passes closest to the z axis."""
    v2 = k[0] * k[0] + k[1] * k[1]
    if v2 == 0.0:
        return -1.0
    return -(s[0] * k[0] + s[1] * k[1]) / v2


@njit(cache=True, error_model="numpy", inline="always")
def reach(rc, hp, y0, k0, mass, h, q):
    """Power series in time since state y0 of the predicted position (into q[3, 5]): the last
    accepted step's dense output (of length ``hp``) continued when h is within ``PREDICT_SPAN``
    of its length, else constant acceleration from y0."""
    if hp > 0.0 and h <= PREDICT_SPAN * hp:
        for i in range(3):
            # the dense output in powers of theta, then re-expanded about its end (theta = 1)
            p1 = rc[1, i] + rc[2, i]
            p2 = rc[3, i] + rc[4, i] - rc[2, i]
            p3 = -(rc[3, i] + 2.0 * rc[4, i])
            p4 = rc[4, i]
            q[i, 0] = rc[0, i] + p1 + p2 + p3 + p4
            q[i, 1] = (p1 + 2.0 * p2 + 3.0 * p3 + 4.0 * p4) / hp
            q[i, 2] = (p2 + 3.0 * p3 + 6.0 * p4) / (hp * hp)
            q[i, 3] = (p3 + 4.0 * p4) / (hp * hp * hp)
            q[i, 4] = p4 / (hp * hp * hp * hp)
        return
    gm = gamma_mass(mass, y0[3], y0[4], y0[5])
    for i in range(3):
        q[i, 0] = y0[i]
        q[i, 1] = k0[i]
        q[i, 2] = 0.5 * k0[3 + i] / gm
        q[i, 3] = 0.0
        q[i, 4] = 0.0


@njit(cache=True, error_model="numpy", inline="always")
def series(q, i, tau):
    """Value and rate at tau of row i of a :func:`reach` series (Horner)."""
    v = q[i, 4]
    d = 0.0
    for m in range(3, -1, -1):
        d = d * tau + v
        v = v * tau + q[i, m]
    return v, d


@njit(cache=True, error_model="numpy", inline="always")
def series_past(q, sym, w, wall, tau):
    """How far the predicted point at tau lies beyond wall w (0 z_lo, 1 z_hi, 2 r_lo, 3 r_hi) at
    ``wall``, and the rate of that distance."""
    if w < 2:
        c, dc = series(q, 2, tau)
    elif sym == 0:
        x, dx = series(q, 0, tau)
        y, dy = series(q, 1, tau)
        c = math.sqrt(x * x + y * y)
        dc = (x * dx + y * dy) / c if c > 0.0 else math.sqrt(dx * dx + dy * dy)
    else:
        c, dc = series(q, 1, tau)
        if sym == 2 and c < 0.0:
            c, dc = -c, -dc
    sg = wall_side(w)
    return sg * (c - wall), sg * dc


@njit(cache=True, error_model="numpy", inline="always")
def crossing(q, sym, w, wall, g_lo, hi, g_hi, tol):
    """Time in (0, hi] at which the predicted path reaches a wall it lies ``g_lo`` < 0 beyond at 0
    and ``g_hi`` > 0 beyond at hi, to ``tol`` metres: Newton's method kept inside the bracket."""
    lo = 0.0
    tau = lo - g_lo * (hi - lo) / (g_hi - g_lo)
    for _ in range(12):
        g, dg = series_past(q, sym, w, wall, tau)
        if abs(g) < tol:
            break
        if g > 0.0:
            hi = tau
        else:
            lo = tau
        nxt = tau - g / dg if dg != 0.0 else -1.0
        tau = nxt if lo < nxt < hi else 0.5 * (lo + hi)
    return tau


@njit(cache=True, error_model="numpy", inline="always")
def first_crossing(best, q, sym, w, wall, g_0, hi, g_hi, tol):
    """The earlier of ``best`` and the predicted crossing of wall w, when the path lies before
    it at 0 (``g_0`` < 0) and beyond it at hi (``g_hi`` > 0)."""
    if g_0 < 0.0 and g_hi > 0.0:
        return min(best, crossing(q, sym, w, wall, g_0, hi, g_hi, tol))
    return best


@njit(cache=True, error_model="numpy")
def exit_time(q, y0, k0, sym, box, h, tol):
    """Predicted time within ``h`` at which a ray leaves its cell (``box``); h if it stays.

    ``q`` is the predicted path (:func:`reach`), the crossing is found to ``tol`` metres. The
    walls the ray moves away from are pushed back by a cell (the start may lie on, or just
    before, the wall it has entered through); of the walls the predicted path lies beyond at h (or,
    in axial symmetry, at its straight line's closest approach to the axis), the first crossed
    is taken.
    """
    z_lo, z_hi, r_lo, r_hi = box[0], box[1], box[2], box[3]
    z0_, r0_ = y0[2], map_r(sym, y0[0], y0[1])
    if k0[2] >= 0.0:
        z_lo = min(z_lo, z0_) - (z_hi - z_lo)
    else:
        z_hi = max(z_hi, z0_) + (z_hi - z_lo)
    inward = r_rate(sym, y0, k0) < 0.0
    if inward:
        r_hi = max(r_hi, r0_) + (r_hi - r_lo)
    else:
        r_lo = min(r_lo, r0_) - (r_hi - r_lo)
    z_h = series(q, 2, h)[0]
    r_h = map_r(sym, series(q, 0, h)[0], series(q, 1, h)[0])
    best = first_crossing(h, q, sym, 0, z_lo, z_lo - z0_, h, z_lo - z_h, tol)
    best = first_crossing(best, q, sym, 1, z_hi, z0_ - z_hi, h, z_h - z_hi, tol)
    best = first_crossing(best, q, sym, 3, r_hi, r0_ - r_hi, h, r_h - r_hi, tol)
    g_lo = r_lo - r_h
    hi = h
    if g_lo <= 0.0 and sym == 0 and inward and r_lo > 0.0:
        tau = closest_to_axis(y0, k0)
        if 0.0 < tau < h:
            hi = tau
            g_lo = series_past(q, sym, 2, r_lo, hi)[0]
    return first_crossing(best, q, sym, 2, r_lo, r_lo - r0_, hi, g_lo, tol)


@njit(cache=True, error_model="numpy", inline="always")
def wall_time(grid, sym, s, k, ci, cj, ni, nj):
    """Time between state s and the walls shared by cells (ci, cj) and (ni, nj), either way."""
    dt = 0.0
    if ni != ci:
        zb = grid[0] + max(ci, ni) * grid[2]
        dt = abs(s[2] - zb) / max(abs(k[2]), 1e-300)
    if nj != cj:
        rb = grid[1] + max(cj, nj) * grid[3]
        dt = max(dt, abs(map_r(sym, s[0], s[1]) - rb) / max(abs(r_rate(sym, s, k)), 1e-300))
    return dt


@njit(cache=True, error_model="numpy", inline="always")
def kink_error(k_next, k_this, dt, y0, y1, rtol, atol_p):
    """Scaled error of integrating ``dt`` past a wall with the field of the cell behind it.

    The two fields agree on the wall and part linearly, so the momentum error is about
    ``dt |F_next - F_this| / 2``; scaled like the step error (RMS over the six components).
    """
    acc = 0.0
    for i in range(3, 6):
        e = 0.5 * dt * (k_next[i] - k_this[i]) / (atol_p + rtol * max(abs(y0[i]), abs(y1[i])))
        acc += e * e
    return math.sqrt(acc / 6.0)


@njit(cache=True, error_model="numpy")
def excursion(rc, sym, y0, k0, y1, k1, h, box, buf):
    """theta where the path of a step whose ends lie in the box leaves it between them, else 2.0.

    Looks at the turning point of z and of r (the straight line's closest approach to the axis in
    axial symmetry, else where the linearly interpolated rate vanishes).
    """
    best = 2.0
    if k0[2] * k1[2] < 0.0:
        th = k0[2] / (k0[2] - k1[2])
        dense(rc, th, buf)
        if beyond(box, sym, buf)[1] > 0.0:
            best = th
    a = r_rate(sym, y0, k0)
    b = r_rate(sym, y1, k1)
    if a * b < 0.0:
        th = closest_to_axis(y0, k0) / h if sym == 0 and a < 0.0 else a / (a - b)
        if 0.0 < th < best:
            dense(rc, th, buf)
            if beyond(box, sym, buf)[1] > 0.0:
                best = th
    return best


@njit(cache=True, error_model="numpy")
def wall_theta(rc, sym, box, hi, geo, buf):
    """theta of the first wall crossing on the dense output before ``hi``, where it is outside the box."""
    dense(rc, hi, buf)
    z, r = buf[2], map_r(sym, buf[0], buf[1])
    th = hi
    if z > box[1]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_Z, box[1], True, geo, buf))
    elif z < box[0]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_Z, box[0], False, geo, buf))
    if r > box[3]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_R, box[3], True, geo, buf))
    elif r < box[2]:
        th = min(th, locate(rc, sym, 0.0, hi, EV_R, box[2], False, geo, buf))
    return th


@njit(cache=True, error_model="numpy", inline="always")
def speed(s, mass):
    """Speed of a state (x, y, z, px, py, pz), m/s."""
    p = math.sqrt(s[3] * s[3] + s[4] * s[4] + s[5] * s[5])
    return p / (mass * math.sqrt(1.0 + (p / (mass * C_LIGHT)) ** 2))


@njit(cache=True, error_model="numpy", inline="always")
def put_path(path, n, t, s, ke, res):
    """Write path row n: (t, x, y, z, px, py, pz, ke_J, signed ledger J)."""
    path[n, 0] = t
    for i in range(6):
        path[n, 1 + i] = s[i]
    path[n, 7] = ke
    path[n, 8] = res


@njit(cache=True, error_model="numpy")
def thin_path(path, n):
    """Keep every other row of the first n path rows (the first always); returns the new count."""
    m = (n + 1) // 2
    for j in range(1, m):
        path[j] = path[2 * j]
    return m


@njit(cache=True, error_model="numpy", inline="always")
def put_patch(w, l, row, a, pz, pr):
    """Write a cell's polynomial (16 coefficients) and first corner into rows row..row+17 of lane l
    of a workspace."""
    for m in range(16):
        w[row + m, l] = a[m]
    w[row + 16, l] = pz
    w[row + 17, l] = pr


@njit(cache=True, error_model="numpy")
def trace_lanes(lo, hi, starts, herm, grid, sym, bounds, cell, geo, mass, charge, t_max, rtol,
                atol_p, max_step, sample, fine, planes, stops, max_steps, final, info,
                cross_plane, cross_state, paths, quiet):
    """Trace rays lo..hi-1 of ``starts`` on one thread, ``LANES`` at a time.

    Every lane holds one ray; each round, every lane chooses its step, :func:`lane_step` takes all
    the steps at once, and every lane checks its own: error and cell walls, then (after
    :func:`lane_next_rates` has given the rates in the cells the steps are entering) the kink at
    the wall, events and the ledger. A lane whose ray has ended takes the next ray.

    Row r of ``final`` = (t, x, y, z, px, py, pz, ke_J, worst ledger J), ``info`` = (code,
    electrode, crossings, path points, steps, rejected steps, field evaluations),
    ``cross_plane``/``cross_state`` (rows of t, x, y, z, px, py, pz, ke_J, ledger J) receive ray
    r's results; ``paths[r]`` (for r < len(paths)) receives its accepted-step points (t, state,
    ke_J, signed ledger J); when it fills up, every other point is dropped and the spacing
    doubles, so it always spans the whole ray (its last row is kept for the end point). In the
    cells marked by ``quiet`` (:func:`quiet_cells`) accepted steps skip the event search.
    """
    w = np.zeros((W_ROWS, LANES))
    ray = np.full(LANES, -1)
    code = np.full(LANES, RUNNING)
    electrode = np.full(LANES, -1)
    ci = np.zeros(LANES, dtype=np.int64)
    cj = np.zeros(LANES, dtype=np.int64)
    steps = np.zeros(LANES, dtype=np.int64)
    rejected = np.zeros(LANES, dtype=np.int64)
    evals = np.zeros(LANES, dtype=np.int64)
    n_cross = np.zeros(LANES, dtype=np.int64)
    n_path = np.zeros(LANES, dtype=np.int64)
    stride = np.ones(LANES, dtype=np.int64)
    cut = np.zeros(LANES, dtype=np.bool_)
    t = np.zeros(LANES)
    hp = np.zeros(LANES)      # length of the last accepted step (0: none, no prediction from it)
    h_cut = np.zeros(LANES)   # length of a step cut back to a wall, to be redone
    h_err = np.zeros(LANES)   # the step-size proposal of the error control
    worst = np.zeros(LANES)
    ke_start = np.zeros(LANES)
    v_start = np.zeros(LANES)
    y0 = np.zeros((LANES, 6))
    k0 = np.zeros((LANES, 6))     # the first stage rate of the lane's next step
    y1 = np.zeros((LANES, 6))
    k1 = np.zeros((LANES, 6))     # the rate at the end of the step
    rc = np.zeros((LANES, 5, 6))  # dense output of the last accepted step
    rt = np.zeros((LANES, 5, 6))  # dense output of the trial step
    k_new = np.empty((1, 6))      # a rate in a new cell
    passed = np.zeros(LANES, dtype=np.bool_)      # the step passed the error test
    need = np.zeros(LANES, dtype=np.bool_)        # the step needs the rate in the cell ahead
    past_cell = np.zeros(LANES, dtype=np.bool_)   # the step ends outside its cell
    end_cell = np.zeros((LANES, 4), dtype=np.int64)  # the cell it ends in, the cell ahead
    theta = np.zeros(LANES)       # where on the step it is to be cut back (> 1: nowhere)
    dt = np.zeros(LANES)          # time between the step's end and the wall it is passing
    ahead = np.empty((3, 5))      # the predicted path of the next step (reach)
    buf = np.empty(6)
    pa = np.empty(2)
    box = np.empty(4)
    atol_x = rtol * min(grid[2], grid[3])
    snap = SNAP * min(grid[2], grid[3])
    max_cross = cross_plane.shape[1]
    z0, r0, hz, hr = grid[0], grid[1], grid[2], grid[3]
    nxt = lo
    while True:
        # idle lanes take the next rays
        active = 0
        for l in range(LANES):
            if ray[l] < 0 and nxt < hi:
                r = nxt
                nxt += 1
                ray[l] = r
                for i in range(6):
                    y0[l, i] = starts[r, i]
                i, j = cell_ahead(grid, sym, y0[l], snap)
                ci[l] = i
                cj[l] = j
                patch = patch_coefficients(herm, ci[l], cj[l], hz, hr)
                v_start[l] = rate(patch, z0 + ci[l] * hz, r0 + cj[l] * hr, grid, sym, mass,
                                  charge, y0[l], k_new, 0)
                for i in range(6):
                    k0[l, i] = k_new[0, i]
                    w[W_Y0 + i, l] = y0[l, i]
                    w[W_K + i, l] = k_new[0, i]
                put_patch(w, l, W_PATCH, patch, z0 + ci[l] * hz, r0 + cj[l] * hr)
                w[W_ATOL, l] = atol_p[r]
                ke_start[l] = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], mass)
                evals[l] = 1
                steps[l] = 0
                rejected[l] = 0
                n_cross[l] = 0
                n_path[l] = 0
                stride[l] = 1
                t[l] = 0.0
                hp[l] = 0.0
                h_cut[l] = 0.0
                worst[l] = 0.0
                h_err[l] = min(step_cap(y0[l], k0[l], mass, max_step), t_max)
                code[l] = RUNNING
                electrode[l] = -1
                r_start = map_r(sym, y0[l, 0], y0[l, 1])
                if outside(bounds, sym, y0[l, 2], r_start):
                    code[l] = LEFT
                else:
                    k_in = electrode_at(y0[l, 2], r_start, geo[0], geo[1], geo[2], geo[3],
                                        geo[4], geo[5], geo[6])
                    if k_in >= 0:
                        code[l] = INSIDE
                        electrode[l] = k_in
                    elif r < paths.shape[0]:
                        put_path(paths[r], 0, 0.0, y0[l], ke_start[l], 0.0)
                        n_path[l] = 1
            if ray[l] >= 0:
                active += 1
        if active == 0:
            break

        # each lane chooses its step
        for l in range(LANES):
            if ray[l] < 0 or code[l] != RUNNING:
                continue
            if steps[l] + rejected[l] >= max_steps:
                code[l] = STALLED
                continue
            cut[l] = h_cut[l] > 0.0
            if cut[l]:
                h = min(h_cut[l], t_max - t[l])
                h_cut[l] = 0.0
            else:
                h = min(h_err[l], step_cap(y0[l], k0[l], mass, max_step), t_max - t[l])
                cell_box(grid, ci[l], cj[l], box)
                reach(rc[l], hp[l], y0[l], k0[l], mass, STRETCH * h, ahead)
                h_wall = exit_time(ahead, y0[l], k0[l], sym, box, STRETCH * h, 0.1 * snap)
                if h_wall < STRETCH * h:
                    h = h_wall
            if t[l] + h == t[l]:
                code[l] = STALLED
                continue
            w[W_H, l] = h

        lane_step(w, grid, sym, mass, charge, rtol, atol_x)

        # each lane checks its step: error, then the cell it ends in and the one it is entering
        for l in range(LANES):
            passed[l] = False
            if ray[l] < 0 or code[l] != RUNNING:
                continue
            h = w[W_H, l]
            evals[l] += 6
            enorm = w[W_ERR, l]
            if not enorm <= 1.0:
                rejected[l] += 1
                fac = FAC_MIN if not enorm < 1e300 else max(FAC_MIN, SAFETY * enorm ** -0.2)
                h_err[l] = h * min(1.0, fac)
                continue
            passed[l] = True
            for i in range(6):
                y1[l, i] = w[W_Y1 + i, l]
                k1[l, i] = w[W_K + 36 + i, l]
            for m in range(5):
                for i in range(6):
                    rt[l, m, i] = w[W_DENSE + 6 * m + i, l]
            cell_box(grid, ci[l], cj[l], box)
            hold(box, sym, y0[l])    # a step may start just before the wall it has entered through
            i1, j1 = cell_of(grid, sym, y1[l, 0], y1[l, 1], y1[l, 2])
            ni, nj = cell_ahead(grid, sym, y1[l], snap)
            past = i1 != ci[l] or j1 != cj[l]
            if past and ni == ci[l] and nj == cj[l]:
                ni, nj = i1, j1
            th = 2.0
            if abs(ni - ci[l]) > 1 or abs(nj - cj[l]) > 1:
                th = wall_theta(rt[l], sym, box, 1.0, geo, buf)
            elif not past:
                th = excursion(rt[l], sym, y0[l], k0[l], y1[l], k1[l], h, box, buf)
                if th <= 1.0:
                    th = wall_theta(rt[l], sym, box, th, geo, buf)
            need[l] = False
            if th > 1.0 and (ni != ci[l] or nj != cj[l]):
                dt[l] = wall_time(grid, sym, y1[l], k1[l], ci[l], cj[l], ni, nj)
                if past and dt[l] * speed(y1[l], mass) > snap:
                    th = wall_theta(rt[l], sym, box, 1.0, geo, buf)
                else:
                    need[l] = True
                    put_patch(w, l, W_NEXT, patch_coefficients(herm, ni, nj, hz, hr),
                              z0 + ni * hz, r0 + nj * hr)
            theta[l] = th
            past_cell[l] = past
            end_cell[l, 0] = i1
            end_cell[l, 1] = j1
            end_cell[l, 2] = ni
            end_cell[l, 3] = nj

        # the rates in the cells the steps are entering, all lanes at once
        lane_next_rates(w, grid, sym, mass, charge)

        # each lane enters the next cell, or cuts its step back to the wall, or goes on
        for l in range(LANES):
            if not passed[l]:
                continue
            r = ray[l]
            h = w[W_H, l]
            enorm = w[W_ERR, l]
            v1 = w[W_V1, l]
            th = theta[l]
            past = past_cell[l]
            i1, j1, ni, nj = end_cell[l, 0], end_cell[l, 1], end_cell[l, 2], end_cell[l, 3]
            enter = False
            v_next = v1
            if need[l]:
                v_next = w[W_VN, l]
                for i in range(6):
                    k_new[0, i] = w[W_RATE + i, l]
                evals[l] += 1
                if cut[l] or (kink_error(k_new[0], k1[l], dt[l], y0[l], y1[l], rtol, atol_p[r])
                              <= KINK_FRACTION):
                    enter = True
                elif past:
                    cell_box(grid, ci[l], cj[l], box)
                    hold(box, sym, y0[l])
                    th = wall_theta(rt[l], sym, box, 1.0, geo, buf)
            if th <= 1.0:
                rejected[l] += 1
                h_cut[l] = th * h
                continue

            # accepted step: look for events on the dense output, piece by piece
            steps[l] += 1
            for m in range(5):
                for i in range(6):
                    rc[l, m, i] = rt[l, m, i]
            hp[l] = h
            n_sub = 0
            if not quiet[ci[l], cj[l]]:
                n_sub = max(1, int(math.ceil(max(speed(y0[l], mass), speed(y1[l], mass)) * h
                                             / sample)))
            rcl = rc[l]
            ta = 0.0
            za, ra = y0[l, 2], map_r(sym, y0[l, 0], y0[l, 1])
            xa, ya_ = y0[l, 0], y0[l, 1]
            t_end = 2.0
            for m in range(1, n_sub + 1):
                tb = m / n_sub
                dense(rcl, tb, buf)
                xb, yb, zb = buf[0], buf[1], buf[2]
                rb = map_r(sym, xb, yb)
                chord = math.sqrt((xb - xa) ** 2 + (yb - ya_) ** 2 + (zb - za) ** 2)
                # leaving the domain
                if outside(bounds, sym, zb, rb):
                    if zb > bounds[1]:
                        t_end = min(t_end, locate(rcl, sym, ta, tb, EV_Z, bounds[1], True, geo, buf))
                    if zb < bounds[0]:
                        t_end = min(t_end, locate(rcl, sym, ta, tb, EV_Z, bounds[0], False, geo, buf))
                    if rb > bounds[3]:
                        t_end = min(t_end, locate(rcl, sym, ta, tb, EV_R, bounds[3], True, geo, buf))
                    if sym == 1 and rb < bounds[2]:
                        t_end = min(t_end, locate(rcl, sym, ta, tb, EV_R, bounds[2], False, geo, buf))
                    code[l] = LEFT
                # landing on an electrode
                if touches_surface(cell, grid, za, ra, zb, rb, 0.5 * chord if sym == 0 else 0.0):
                    pa[0] = za
                    pa[1] = ra
                    th, k = find_landing(rcl, sym, ta, min(tb, t_end), pa, chord, fine, geo, buf)
                    if th < t_end:
                        t_end = th
                        code[l] = LANDED
                        electrode[l] = k
                # detector planes
                for q in range(planes.shape[0]):
                    zp = planes[q]
                    if (za >= zp) != (zb >= zp):
                        th = locate(rcl, sym, ta, tb, EV_Z, zp, zb >= zp, geo, buf)
                        if th <= t_end:
                            if stops[q]:
                                t_end = th
                                code[l] = PLANE
                                electrode[l] = -1
                            nc = n_cross[l]
                            if nc < max_cross:
                                dense(rcl, th, buf)
                                cross_plane[r, nc] = q
                                cross_state[r, nc, 0] = t[l] + th * h
                                for i in range(6):
                                    cross_state[r, nc, 1 + i] = buf[i]
                                ke = kinetic_energy_J(buf[3], buf[4], buf[5], mass)
                                cross_state[r, nc, 7] = ke
                                vq = field_at(herm, grid, sym, buf[0], buf[1], buf[2])[0]
                                worst[l] = max(worst[l], abs(ke - ke_start[l] + charge * (vq - v_start[l])))
                                cross_state[r, nc, 8] = worst[l]
                            n_cross[l] += 1
                if code[l] != RUNNING:
                    break
                ta, za, ra, xa, ya_ = tb, zb, rb, xb, yb

            n_path_cap = paths.shape[1] if r < paths.shape[0] else 0
            if code[l] == RUNNING:
                t_new = t[l] + h
                # the ledger takes the potential of the cell the step ends in
                if past:
                    if enter and i1 == ni and j1 == nj:
                        v1 = v_next
                    else:
                        v1 = field_at(herm, grid, sym, y1[l, 0], y1[l, 1], y1[l, 2])[0]
                        evals[l] += 1
                ke1 = kinetic_energy_J(y1[l, 3], y1[l, 4], y1[l, 5], mass)
                res = ke1 - ke_start[l] + charge * (v1 - v_start[l])
                worst[l] = max(worst[l], abs(res))
                if t_new >= t_max:
                    code[l] = TIME
                    t_new = t_max
                t[l] = t_new
                for i in range(6):
                    y0[l, i] = y1[l, i]
                    k0[l, i] = k_new[0, i] if enter else k1[l, i]
                    w[W_Y0 + i, l] = y0[l, i]
                    w[W_K + i, l] = k0[l, i]
                if enter:
                    ci[l] = ni
                    cj[l] = nj
                    for m in range(18):
                        w[W_PATCH + m, l] = w[W_NEXT + m, l]
                if n_path_cap > 0 and steps[l] % stride[l] == 0:
                    if n_path[l] == n_path_cap - 1:
                        n_path[l] = thin_path(paths[r], n_path[l])
                        stride[l] *= 2
                    if steps[l] % stride[l] == 0:
                        put_path(paths[r], n_path[l], t[l], y0[l], ke1, res)
                        n_path[l] += 1
                # the step-size proposal; a step shortened to a wall does not shrink the next one
                base = max(h, h_err[l]) if h < h_err[l] else h
                cap = FAC_MAX * base
                x = SAFETY * h / cap       # an error below x^5 proposes more than the cap
                if enorm < x * x * x * x * x:
                    h_err[l] = cap
                else:
                    h_err[l] = min(h * max(FAC_MIN, SAFETY * max(enorm, 1e-10) ** -0.2), cap)
            else:
                dense(rcl, t_end, buf)
                for i in range(6):
                    y0[l, i] = buf[i]
                t[l] = t[l] + t_end * h
                ke1 = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], mass)
                v1 = field_at(herm, grid, sym, y0[l, 0], y0[l, 1], y0[l, 2])[0]
                res = ke1 - ke_start[l] + charge * (v1 - v_start[l])
                worst[l] = max(worst[l], abs(res))
                if n_path_cap > 0:
                    put_path(paths[r], n_path[l], t[l], y0[l], ke1, res)
                    n_path[l] += 1

        # lanes whose ray has ended hand in its results
        for l in range(LANES):
            r = ray[l]
            if r < 0 or code[l] == RUNNING:
                continue
            final[r, 0] = t[l]
            for i in range(6):
                final[r, 1 + i] = y0[l, i]
            final[r, 7] = kinetic_energy_J(y0[l, 3], y0[l, 4], y0[l, 5], mass)
            final[r, 8] = worst[l]
            info[r, 0] = code[l]
            info[r, 1] = electrode[l]
            info[r, 2] = n_cross[l]
            info[r, 3] = n_path[l]
            info[r, 4] = steps[l]
            info[r, 5] = rejected[l]
            info[r, 6] = evals[l]
            ray[l] = -1


@njit(cache=True, error_model="numpy")
def quiet_cells(cell, grid, planes):
    """Cells where an accepted step needs no event search: the cell and its eight neighbours hold
    no surface, the cell is not on the domain's border, and no plane lies within a cell of it.

    A step never leaves its cell by more than the snapping distance (steps end on walls), so a ray
    stepping in such a cell can neither land, nor leave the domain, nor cross a plane.
    """
    ncz, ncr = cell.shape[0], cell.shape[1]
    quiet = np.zeros((ncz, ncr), dtype=np.bool_)
    z0, hz = grid[0], grid[2]
    for i in range(1, ncz - 1):
        near_plane = False
        for q in range(planes.shape[0]):
            if z0 + (i - 1) * hz <= planes[q] <= z0 + (i + 2) * hz:
                near_plane = True
        if near_plane:
            continue
        for j in range(1, ncr - 1):
            free = True
            for a in range(i - 1, i + 2):
                for b in range(j - 1, j + 2):
                    if cell[a, b] != -1:
                        free = False
            quiet[i, j] = free
    return quiet


@njit(cache=True, parallel=True, error_model="numpy")
def trace_rays(starts, herm, grid, sym, bounds, cell, geo, mass, charge, t_max, rtol, atol_p,
               max_step, sample, fine, planes, stops, max_steps, max_cross, paths, quiet, group):
    """Trace many rays in parallel (numba prange over groups of rays, each traced by
    :func:`trace_lanes`, whose docstring gives the layouts).

    Parameters
    ----------
    starts : float64[n, 6]
        Start states (x, y, z, px, py, pz), SI.
    atol_p : float64[n]
        Absolute momentum tolerance of each ray.
    paths : float64[k, m, 9]
        Path buffers of the first k rays (k may be 0).
    quiet : bool[nz - 1, nr - 1]
        :func:`quiet_cells` of the cell map and planes.
    group : int
        Rays per group (one thread traces a group, ``LANES`` rays at a time).

    Returns
    -------
    final : float64[n, 9]; info : int64[n, 7] (code, electrode, crossings, path points, steps,
    rejected steps, field evaluations); cross_plane : int64[n, max_cross]; cross_state :
    float64[n, max_cross, 9]
    """
    n = starts.shape[0]
    final = np.zeros((n, 9))
    info = np.zeros((n, 7), dtype=np.int64)
    cross_plane = np.full((n, max_cross), -1, dtype=np.int64)
    cross_state = np.zeros((n, max_cross, 9))
    for g in prange(-(-n // group)):
        trace_lanes(g * group, min(n, (g + 1) * group), starts, herm, grid, sym, bounds, cell, geo,
                    mass, charge, t_max, rtol, atol_p, max_step, sample, fine, planes, stops,
                    max_steps, final, info, cross_plane, cross_state, paths, quiet)
    return final, info, cross_plane, cross_state
