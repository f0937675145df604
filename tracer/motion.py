"""The adaptive Runge–Kutta ray kernel and its event location (numba).

Rays move by the relativistic equations of motion in momentum form,

    dx/dt = p / (gamma m),     dp/dt = q E(x),     gamma = sqrt(1 + (|p| / (m c))^2),

in 3-D Cartesian coordinates (x, y, z), z along the axis. The field comes from a (z, r) potential
map through the bicubic Hermite interpolant of :func:`tracer.fieldmap.hermite_eval`:

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

Cell boundaries. The interpolant is a bicubic patch per cell: the field is continuous across cell
boundaries but its derivatives jump, and an embedded error estimate does not see a step that
straddles such a kink. A trial step that crosses a cell boundary in its interior is therefore cut
back (on its own dense output) to end just past the boundary, within ``KINK_TOL`` cells, and the
step size before the cut is resumed afterwards; every accepted step then integrates a smooth field.

Step length and electrodes. A step is never longer than ``max_step`` metres of path (one cell by
default), so the Runge–Kutta stages cannot jump over a region where the field changes. Electrodes
are found on the dense output, not at step ends: each accepted step is cut into pieces of at most
``sample`` metres (half a cell by default); a piece whose (z, r) box touches a grid cell that is
cut by a surface or lies inside an electrode (``Raster.cell`` != -1) is cut again into pieces of at
most ``fine`` metres (1/32 of a cell), and for each such piece the exact shapes are asked: is its end
inside an electrode (``geometry.electrode_at``), or does its chord cross a surface
(``geometry.first_hit``, which catches foils thinner than the piece). A landing is then bisected
on the dense output with ``electrode_at`` to 2^-48 of the piece, far below 1e-3 of a cell. Plane
crossings (z = const) and leaving the domain are bisected on the dense output the same way.
"""

import math

import numpy as np
from numba import njit, prange
from scipy import constants

from tracer.fieldmap import hermite_eval
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
KINK_TOL = 1e-7   # cell-boundary crossings are put within this many cells of a step's end
SAFETY, FAC_MIN, FAC_MAX = 0.9, 0.2, 5.0


@njit(cache=True)
def field_at(herm, grid, sym, x, y, z):
    """Potential and field at a 3-D point.

    Parameters
    ----------
    herm : float64[4, nz, nr]
        Hermite data of the potential map.
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
    z0, r0, hz, hr, z1, r1 = grid[0], grid[1], grid[2], grid[3], grid[6], grid[7]
    nz, nr = int(grid[4]), int(grid[5])
    if sym == 0:
        r = math.sqrt(x * x + y * y)
    elif sym == 2:
        r = abs(y)
    else:
        r = y
    zc = min(max(z, z0), z1)
    rc = min(max(r, r0), r1)
    v, dvdz, dvdr = hermite_eval(herm, z0, r0, hz, hr, nz, nr, sym != 1, zc, rc)
    ez = -dvdz
    if sym == 0:
        if r > 0.0:
            return v, -dvdr * x / r, -dvdr * y / r, ez
        return v, 0.0, 0.0, ez
    if sym == 2:
        if y < 0.0:
            return v, 0.0, dvdr, ez
        if y == 0.0:
            return v, 0.0, 0.0, ez
    return v, 0.0, -dvdr, ez


@njit(cache=True)
def map_r(sym, x, y):
    """The map coordinate r of a 3-D point (hypot(x, y), |y| or y)."""
    if sym == 0:
        return math.sqrt(x * x + y * y)
    if sym == 2:
        return abs(y)
    return y


@njit(cache=True)
def derivative(herm, grid, sym, mass, charge, s, k):
    """Right-hand side of the equations of motion; writes k, returns the potential at s."""
    mc = mass * C_LIGHT
    px, py, pz = s[3], s[4], s[5]
    gm = mass * math.sqrt(1.0 + (px * px + py * py + pz * pz) / (mc * mc))
    k[0] = px / gm
    k[1] = py / gm
    k[2] = pz / gm
    v, ex, ey, ez = field_at(herm, grid, sym, s[0], s[1], s[2])
    k[3] = charge * ex
    k[4] = charge * ey
    k[5] = charge * ez
    return v


@njit(cache=True)
def dense(rc, theta, out):
    """Evaluate the continuous extension of the last step at theta in [0, 1] into out."""
    u = 1.0 - theta
    for i in range(6):
        out[i] = rc[0, i] + theta * (rc[1, i] + u * (rc[2, i] + theta * (rc[3, i] + u * rc[4, i])))


@njit(cache=True)
def dense_coefficients(y0, y1, ks, h, rc):
    """Coefficients of the continuous extension of an accepted step (Hairer et al. 1993)."""
    for i in range(6):
        d = y1[i] - y0[i]
        rc[0, i] = y0[i]
        rc[1, i] = d
        rc[2, i] = h * ks[0, i] - d
        rc[3, i] = d - h * ks[6, i] - rc[2, i]
        acc = 0.0
        for j in range(7):
            acc += DP_D[j] * ks[j, i]
        rc[4, i] = h * acc


@njit(cache=True)
def step_cap(s, k, mass, length):
    """Longest time step that moves a ray at most ``length`` metres (constant-acceleration estimate)."""
    v = math.sqrt(k[0] * k[0] + k[1] * k[1] + k[2] * k[2])
    f = math.sqrt(k[3] * k[3] + k[4] * k[4] + k[5] * k[5])
    mc = mass * C_LIGHT
    gm = mass * math.sqrt(1.0 + (s[3] * s[3] + s[4] * s[4] + s[5] * s[5]) / (mc * mc))
    a = f / gm
    den = v + math.sqrt(v * v + 2.0 * a * length)
    if den <= 0.0:
        return np.inf
    return 2.0 * length / den


@njit(cache=True)
def outside(bounds, sym, z, r):
    """True when (z, r) is outside the domain; leaving through the axis or mirror plane is not leaving."""
    if z < bounds[0] or z > bounds[1] or r > bounds[3]:
        return True
    return sym == 1 and r < bounds[2]


@njit(cache=True)
def is_event(kind, value, rising, z, r, geo):
    """Whether the event has happened at (z, r): a coordinate past ``value``, or inside an electrode."""
    if kind == EV_ELECTRODE:
        return electrode_at(z, r, geo[0], geo[1], geo[2], geo[3], geo[4], geo[5], geo[6]) >= 0
    c = z if kind == EV_Z else r
    return (c >= value) == rising


@njit(cache=True)
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


@njit(cache=True)
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


@njit(cache=True)
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


@njit(cache=True)
def cell_index(x, x0, h, n):
    """Index of the interpolation cell holding coordinate x, clamped to [0, n - 2]."""
    u = (x - x0) / h
    if u >= n - 2:
        return n - 2
    if u > 0.0:
        return int(u)
    return 0


@njit(cache=True)
def interior(th, length, tol):
    """theta if a crossing at theta lies more than ``tol`` metres from both ends of a step, else 2.0."""
    if th * length > tol and (1.0 - th) * length > tol:
        return th
    return 2.0


@njit(cache=True)
def kink(rc, sym, grid, y0, y1, ks, h, length, tol, geo, buf):
    """The first cell boundary of the interpolant that a trial step crosses in its interior.

    The field is smooth inside a cell but only continuous across its boundaries, where the
    embedded error estimate is unreliable; the step loop therefore shortens steps so that every
    boundary lies within ``tol`` metres of a step's end. Returns theta of the first crossing more
    than ``tol`` from both ends (2.0 if none); fills rc with the trial step's dense output when the
    step changes cell.
    """
    z0, r0, hz, hr, nz, nr = grid[0], grid[1], grid[2], grid[3], int(grid[4]), int(grid[5])
    ia = cell_index(y0[2], z0, hz, nz)
    ib = cell_index(y1[2], z0, hz, nz)
    ja = cell_index(map_r(sym, y0[0], y0[1]), r0, hr, nr)
    jb = cell_index(map_r(sym, y1[0], y1[1]), r0, hr, nr)
    if ia == ib and ja == jb:
        return 2.0
    dense_coefficients(y0, y1, ks, h, rc)
    th = 2.0
    if ib != ia:
        zb = z0 + hz * (ia + 1 if ib > ia else ia)
        th = interior(locate(rc, sym, 0.0, 1.0, EV_Z, zb, ib > ia, geo, buf), length, tol)
    if jb != ja:
        rb = r0 + hr * (ja + 1 if jb > ja else ja)
        th = min(th, interior(locate(rc, sym, 0.0, 1.0, EV_R, rb, jb > ja, geo, buf), length, tol))
    return th


@njit(cache=True)
def speed(s, mass):
    """Speed of a state (x, y, z, px, py, pz), m/s."""
    p = math.sqrt(s[3] * s[3] + s[4] * s[4] + s[5] * s[5])
    return p / (mass * math.sqrt(1.0 + (p / (mass * C_LIGHT)) ** 2))


@njit(cache=True)
def put_path(path, n, t, s, ke, res):
    """Write path row n: (t, x, y, z, px, py, pz, ke_J, signed ledger J)."""
    path[n, 0] = t
    for i in range(6):
        path[n, 1 + i] = s[i]
    path[n, 7] = ke
    path[n, 8] = res


@njit(cache=True)
def thin_path(path, n):
    """Keep every other row of the first n path rows (the first always); returns the new count."""
    m = (n + 1) // 2
    for j in range(1, m):
        path[j] = path[2 * j]
    return m


@njit(cache=True)
def trace_one(s0, herm, grid, sym, bounds, cell, geo, mass, charge, t_max, rtol, atol_p,
              max_step, sample, fine, planes, stops, max_steps,
              final, cross_plane, cross_state, path):
    """Trace one ray from state s0 (x, y, z, px, py, pz).

    Writes the end state into ``final`` = (t, x, y, z, px, py, pz, ke_J, worst ledger J) and the
    plane crossings into ``cross_plane``/``cross_state`` (rows of t, x, y, z, px, py, pz, ke_J,
    ledger J); ``path`` (possibly of zero rows) receives accepted-step points (t, state, ke_J,
    signed ledger J); when it fills up, every other point is dropped and the spacing doubles, so
    it always spans the whole ray (its last row is kept for the end point).

    Returns
    -------
    (code, electrode, n_cross, n_path, steps, rejected, evaluations)
    """
    ks = np.empty((7, 6))
    y0 = s0.copy()
    y1 = np.empty(6)
    tmp = np.empty(6)
    err = np.empty(6)
    rc = np.zeros((5, 6))
    buf = np.empty(6)
    pa = np.empty(2)
    atol_x = rtol * min(grid[2], grid[3])
    max_cross = cross_plane.shape[0]
    n_path_cap = path.shape[0]
    n_cross = 0
    n_path = 0
    stride = 1
    steps = 0
    rejected = 0
    evals = 0

    r_start = map_r(sym, y0[0], y0[1])
    v_start = derivative(herm, grid, sym, mass, charge, y0, ks[0])
    evals += 1
    ke_start = kinetic_energy_J(y0[3], y0[4], y0[5], mass)
    worst = 0.0
    for i in range(6):
        final[1 + i] = y0[i]
    final[0] = 0.0
    final[7] = ke_start
    final[8] = 0.0
    if outside(bounds, sym, y0[2], r_start):
        return LEFT, -1, 0, 0, 0, 0, evals
    k_in = electrode_at(y0[2], r_start, geo[0], geo[1], geo[2], geo[3], geo[4], geo[5], geo[6])
    if k_in >= 0:
        return INSIDE, k_in, 0, 0, 0, 0, evals
    if n_path_cap > 0:
        put_path(path, 0, 0.0, y0, ke_start, 0.0)
        n_path = 1

    t = 0.0
    v1 = v_start
    h_resume = 0.0
    kink_tol = KINK_TOL * min(grid[2], grid[3])
    h = min(step_cap(y0, ks[0], mass, max_step), t_max)
    code = RUNNING
    electrode = -1
    while code == RUNNING:
        if steps + rejected >= max_steps:
            code = STALLED
            break
        h = min(h, step_cap(y0, ks[0], mass, max_step), t_max - t)
        if t + h == t:
            code = STALLED
            break
        for st in range(1, 7):
            for i in range(6):
                acc = 0.0
                for j in range(st):
                    acc += DP_A[st, j] * ks[j, i]
                tmp[i] = y0[i] + h * acc
            if st == 6:
                for i in range(6):
                    y1[i] = tmp[i]
            v1 = derivative(herm, grid, sym, mass, charge, tmp, ks[st])
        evals += 6
        length = max(speed(y0, mass), speed(y1, mass)) * h
        th = kink(rc, sym, grid, y0, y1, ks, h, length, kink_tol, geo, buf)
        if th < 1.0:
            if h_resume == 0.0:
                h_resume = h
            h *= th + 0.5 * kink_tol / length
            rejected += 1
            continue
        acc2 = 0.0
        for i in range(6):
            e = 0.0
            for j in range(7):
                e += DP_E[j] * ks[j, i]
            a = atol_x if i < 3 else atol_p
            sc = a + rtol * max(abs(y0[i]), abs(y1[i]))
            err[i] = h * e / sc
            acc2 += err[i] * err[i]
        enorm = math.sqrt(acc2 / 6.0)
        if not enorm <= 1.0:
            rejected += 1
            fac = FAC_MIN if not enorm < 1e300 else max(FAC_MIN, SAFETY * enorm ** -0.2)
            h *= min(1.0, fac)
            continue

        # accepted step: look for events on the dense output, piece by piece
        steps += 1
        dense_coefficients(y0, y1, ks, h, rc)
        vmax = max(speed(y0, mass), speed(y1, mass))
        n_sub = max(1, int(math.ceil(vmax * h / sample)))
        ta = 0.0
        za, ra = y0[2], map_r(sym, y0[0], y0[1])
        xa, ya_ = y0[0], y0[1]
        t_end = 2.0
        for m in range(1, n_sub + 1):
            tb = m / n_sub
            dense(rc, tb, buf)
            xb, yb, zb = buf[0], buf[1], buf[2]
            rb = map_r(sym, xb, yb)
            chord = math.sqrt((xb - xa) ** 2 + (yb - ya_) ** 2 + (zb - za) ** 2)
            # leaving the domain
            if outside(bounds, sym, zb, rb):
                if zb > bounds[1]:
                    t_end = min(t_end, locate(rc, sym, ta, tb, EV_Z, bounds[1], True, geo, buf))
                if zb < bounds[0]:
                    t_end = min(t_end, locate(rc, sym, ta, tb, EV_Z, bounds[0], False, geo, buf))
                if rb > bounds[3]:
                    t_end = min(t_end, locate(rc, sym, ta, tb, EV_R, bounds[3], True, geo, buf))
                if sym == 1 and rb < bounds[2]:
                    t_end = min(t_end, locate(rc, sym, ta, tb, EV_R, bounds[2], False, geo, buf))
                code = LEFT
            # landing on an electrode
            if touches_surface(cell, grid, za, ra, zb, rb, 0.5 * chord if sym == 0 else 0.0):
                pa[0] = za
                pa[1] = ra
                th, k = find_landing(rc, sym, ta, min(tb, t_end), pa, chord, fine, geo, buf)
                if th < t_end:
                    t_end = th
                    code = LANDED
                    electrode = k
            # detector planes
            for q in range(planes.shape[0]):
                zp = planes[q]
                if (za >= zp) != (zb >= zp):
                    th = locate(rc, sym, ta, tb, EV_Z, zp, zb >= zp, geo, buf)
                    if th <= t_end:
                        if stops[q]:
                            t_end = th
                            code = PLANE
                            electrode = -1
                        if n_cross < max_cross:
                            dense(rc, th, buf)
                            cross_plane[n_cross] = q
                            cross_state[n_cross, 0] = t + th * h
                            for i in range(6):
                                cross_state[n_cross, 1 + i] = buf[i]
                            cross_state[n_cross, 7] = kinetic_energy_J(buf[3], buf[4], buf[5], mass)
                            vq = field_at(herm, grid, sym, buf[0], buf[1], buf[2])[0]
                            res = cross_state[n_cross, 7] - ke_start + charge * (vq - v_start)
                            worst = max(worst, abs(res))
                            cross_state[n_cross, 8] = worst
                        n_cross += 1
            if code != RUNNING:
                break
            ta, za, ra, xa, ya_ = tb, zb, rb, xb, yb

        if code == RUNNING:
            t_new = t + h
            ke1 = kinetic_energy_J(y1[3], y1[4], y1[5], mass)
            res = ke1 - ke_start + charge * (v1 - v_start)
            worst = max(worst, abs(res))
            if t_new >= t_max:
                code = TIME
                t_new = t_max
            t = t_new
            for i in range(6):
                y0[i] = y1[i]
                ks[0, i] = ks[6, i]
            if n_path_cap > 0 and steps % stride == 0:
                if n_path == n_path_cap - 1:
                    n_path = thin_path(path, n_path)
                    stride *= 2
                if steps % stride == 0:
                    put_path(path, n_path, t, y0, ke1, res)
                    n_path += 1
            if h_resume > 0.0:
                h = h_resume
                h_resume = 0.0
            else:
                enorm = max(enorm, 1e-10)
                h *= min(FAC_MAX, max(FAC_MIN, SAFETY * enorm ** -0.2))
        else:
            dense(rc, t_end, buf)
            for i in range(6):
                y0[i] = buf[i]
            t = t + t_end * h
            ke1 = kinetic_energy_J(y0[3], y0[4], y0[5], mass)
            v1 = field_at(herm, grid, sym, y0[0], y0[1], y0[2])[0]
            res = ke1 - ke_start + charge * (v1 - v_start)
            worst = max(worst, abs(res))
            if n_path_cap > 0:
                put_path(path, n_path, t, y0, ke1, res)
                n_path += 1

    final[0] = t
    for i in range(6):
        final[1 + i] = y0[i]
    final[7] = kinetic_energy_J(y0[3], y0[4], y0[5], mass)
    final[8] = worst
    return code, electrode, n_cross, n_path, steps, rejected, evals


@njit(cache=True, parallel=True)
def trace_rays(starts, herm, grid, sym, bounds, cell, geo, mass, charge, t_max, rtol, atol_p,
               max_step, sample, fine, planes, stops, max_steps, max_cross, paths):
    """Trace many rays in parallel (numba prange); see :func:`trace_one` for the layouts.

    Parameters
    ----------
    starts : float64[n, 6]
        Start states (x, y, z, px, py, pz), SI.
    atol_p : float64[n]
        Absolute momentum tolerance of each ray.
    paths : float64[k, m, 9]
        Path buffers of the first k rays (k may be 0).

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
    empty = np.zeros((0, 9))
    for r in prange(n):
        path = paths[r] if r < paths.shape[0] else empty
        out = trace_one(starts[r], herm, grid, sym, bounds, cell, geo, mass, charge, t_max, rtol,
                        atol_p[r], max_step, sample, fine, planes, stops, max_steps,
                        final[r], cross_plane[r], cross_state[r], path)
        for i in range(7):
            info[r, i] = out[i]
    return final, info, cross_plane, cross_state
