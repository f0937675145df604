"""Field solver: Shortley–Weller stencils and multigrid against analytic potentials.

Each physics check names its source.  Grids stay below ~1e5 nodes.
"""

import math

import numba
import numpy as np
import pytest
import scipy.sparse.linalg as spla
from scipy.constants import epsilon_0
from scipy.special import j1, jn_zeros

from solve_cases import setup, solve, spheres, staircase
from tracer.config import Arc, Rect
from tracer.geometry import Raster, rasterize
from tracer.grid import Grid
from tracer.solver import SolveError, assemble, solve_poisson, solve_unit_maps
from tracer.solver.relax import add_fixed, boundary_rhs, residual_row
from tracer.solver import passes
from tracer.solver.stencil import AXIS, FIXED, GROUND, OPEN, coefficients, operator
from tracer.solver.transfer import axis_transfer

MM = 1e-3


def _max_error(u, raster, exact):
    free = raster.owner < 0
    return np.abs(u[free] - exact[free]).max()


# ---------------------------------------------------------------------------- the stencil itself


@pytest.mark.parametrize("axial", [0.0, 1.0])
def test_stencil_is_exact_for_quadratics(axial):
    """The distance-weighted differences reproduce the Laplacian of any quadratic exactly
    (Shortley & Weller 1938: the unequal-arm formula is exact to second degree), with hz != hr."""
    rng = np.random.default_rng(1)
    hz, hr, r0 = 0.7e-3, 0.45e-3, 0.0
    geo = np.array([hz, hr, r0, axial])
    edges = np.array([GROUND, GROUND, AXIS, GROUND])
    nz, nr = 9, 9
    # u = c0 z^2 + c1 r^2 + c2 z + c3 r + c4 z r; Laplacian 2 c0 + 2 c1 (+ (2 c1 r + c3 + c4 z) / r)
    for _ in range(50):
        c = rng.normal(size=5)
        if axial:
            c[3] = c[4] = 0.0  # an axially symmetric potential is smooth (even) in r
        iz, ir = rng.integers(1, nz - 1), rng.integers(1, nr - 1)
        t = rng.uniform(0.05, 1.0, size=4)
        z, r = r0 + iz * hz, ir * hr
        u = lambda zz, rr: c[0] * zz**2 + c[1] * rr**2 + c[2] * zz + c[3] * rr + c[4] * zz * rr
        ends = [(z + t[0] * hz, r), (z - t[1] * hz, r), (z, r + t[2] * hr), (z, r - t[3] * hr)]
        ck = coefficients(iz, ir, nz, nr, t[0], t[1], t[2], t[3], geo, edges)
        lap = sum(ck[k] * (u(*ends[k]) - u(z, r)) for k in range(4))
        exact = 2 * c[0] + 2 * c[1] + (axial * (2 * c[1] * r + c[3] + c[4] * z) / r)
        assert lap == pytest.approx(exact, rel=1e-9, abs=1e-6)


def test_axis_and_open_edge_limits():
    """On the axis u_rr + u_r / r -> 2 u_rr (l'Hopital, with u even in r); an open edge mirrors
    the inward arm (zero normal derivative).  Checked on u = r^2 (Laplacian 4) and u = (z - z_edge)^2."""
    hz, hr = 0.5e-3, 0.3e-3
    geo = np.array([hz, hr, 0.0, 1.0])
    edges = np.array([OPEN, OPEN, AXIS, OPEN])
    nz, nr = 6, 6
    for t in (1.0, 0.37):
        ce, cw, cn, cs = coefficients(2, 0, nz, nr, 1.0, 1.0, t, 1.0, geo, edges)
        assert cs == 0.0 and cn * (t * hr) ** 2 == pytest.approx(4.0)  # Lap r^2 = 4 on the axis
        ce, cw, cn, cs = coefficients(0, 2, nz, nr, t, 1.0, 1.0, 1.0, geo, edges)
        assert cw == 0.0 and ce * (t * hz) ** 2 == pytest.approx(2.0)  # Lap (z - z0)^2 = 2
        ce, cw, cn, cs = coefficients(2, nr - 1, nz, nr, 1.0, 1.0, 1.0, t, geo, edges)
        # at the open outer edge the mirrored first-derivative terms cancel: only u_rr remains
        assert cn == 0.0 and cs * (t * hr) ** 2 == pytest.approx(2.0)


@pytest.mark.parametrize("symmetry, fold", [("axial", 4.0), ("planar", 2.0)])
def test_axis_rows_are_fourth_order(symmetry, fold):
    """The rows on the axis (mirror plane) away from surfaces are exact for u = P(z) + Q(z) r^2 +
    c r^4 with P of degree 5 and Q of degree 3: the five-point second difference along z is exact
    to degree 5 and the even quartic through the first three rows to r^4 (Taylor, common
    practice), giving P'' + fold Q (fold 4 about an axis, 2 about a plane).  At an open z edge the
    rows use the mirror image (u even about the edge).  Kernel and sparse matrix alike; a node two
    nodes from a ground edge or beside a conductor keeps the second-order row."""
    rng = np.random.default_rng(5)
    nz, nr, hz, hr = 12, 6, 0.7e-3, 0.45e-3
    grid = Grid(symmetry, symmetry == "planar", 0.0, 0.0, hz, hr, nz, nr, ("open", "ground", "axis", "ground"))
    owner = np.full((nz, nr), -1, dtype=np.int64)
    owner[6, 2:] = 0  # a plate that stops two rows short of the axis
    raster = Raster(owner=owner, arm=np.ones((nz, nr, 4)), arm_owner=np.full((nz, nr, 4), -1),
                    cell=np.full((nz - 1, nr - 1), -1))
    op, _ = operator(grid, raster)
    system = assemble(grid, raster)
    z, r = np.arange(nz)[:, None] * hz, np.arange(nr)[None, :] * hr
    for even in (False, True):  # even about the open z edge (z = 0) or not
        p, q = rng.normal(size=6), rng.normal(size=4)
        if even:
            p[0::2] = q[0::2] = 0.0  # the odd powers (np.polyval: highest first)
        c = rng.normal()
        u = np.polyval(p, z) + np.polyval(q, z) * r**2 + c * r**4
        u = np.where(system.free, u, 0.0)  # the unknown is zero on fixed nodes
        out = np.zeros((nz, nr))
        for iz in range(nz):
            residual_row(iz, u, np.zeros((nz, nr)), out[iz], *op)
        au = system.matrix @ system.gather(u)
        np.testing.assert_allclose(-system.gather(out), au, rtol=0, atol=1e-12 * np.abs(au).max())
        exact = np.polyval(np.polyder(p, 2), z[:, 0]) + fold * np.polyval(q, z[:, 0])
        for iz in [iz for iz in range(0 if even else 2, 9) if iz != 6]:
            assert out[iz, 0] == pytest.approx(exact[iz], rel=1e-9, abs=1e-9 * np.abs(exact).max()), iz
    fourth = op[2][op[0][:, 0], 8] != 0.0
    np.testing.assert_array_equal(np.flatnonzero(fourth), [0, 1, 2, 3, 4, 5, 7, 8])


def test_kernels_and_sparse_matrix_are_one_operator():
    """A hand-made raster (a box with ground edges, a conductor block with cut arms around it):
    the residual kernel and the assembled CSR matrix apply the same operator."""
    nz, nr = 14, 11
    grid = Grid("planar", False, 0.0, -5e-3, 1e-3, 1e-3, nz, nr, ("ground", "ground", "ground", "open"))
    owner = np.full((nz, nr), -1, dtype=np.int64)
    owner[5:8, 3:6] = 0
    arm = np.ones((nz, nr, 4))
    arm_owner = np.full((nz, nr, 4), -1, dtype=np.int64)
    arm[4, 3:6, 0], arm_owner[4, 3:6, 0] = 0.4, 0  # -z side of the block: surface 0.4 cell away
    arm[8, 3:6, 1], arm_owner[8, 3:6, 1] = 1.0, 0  # +z side: surface on the block's nodes
    arm[5:8, 2, 2], arm_owner[5:8, 2, 2] = 0.7, 0
    arm[5:8, 6, 3], arm_owner[5:8, 6, 3] = 0.25, 0
    raster = Raster(owner=owner, arm=arm, arm_owner=arm_owner, cell=np.full((nz - 1, nr - 1), -1))
    system = assemble(grid, raster)
    op, geometry = operator(grid, raster)
    rng = np.random.default_rng(3)
    x = rng.normal(size=system.matrix.shape[0])
    out = np.zeros((nz, nr))
    u = system.scatter(x)
    for iz in range(nz):
        residual_row(iz, u, np.zeros((nz, nr)), out[iz], *op)
    np.testing.assert_allclose(-system.gather(out), system.matrix @ x, rtol=1e-12)
    assert system.free.sum() == (nz - 2) * (nr - 1) - 9  # ground z and y_min edges, the block
    # node (4, 4): +z arm cut at 0.4 h, the others whole (Shortley & Weller 1938, by hand)
    h = 1e-3
    rows = np.cumsum(system.free.ravel()).reshape(nz, nr) - 1
    row = system.matrix.getrow(rows[4, 4]).toarray().ravel()
    ce, cw = 2 / (0.4 * h * 1.4 * h), 2 / (h * 1.4 * h)
    assert row[rows[4, 4]] == pytest.approx(ce + cw + 2 / h**2)
    assert row[rows[3, 4]] == pytest.approx(-cw) and row[rows[4, 5]] == pytest.approx(-1 / h**2)
    assert np.count_nonzero(row) == 4  # the +z arm ends on the surface, not on a node
    b = boundary_rhs(op, geometry, [2.0])
    assert b[4, 4] == pytest.approx(2.0 * 2.0 / (0.4e-3 * 1.4e-3))  # c_+z * V at the cut arm
    assert np.count_nonzero(b) == 12


def _transfer_matrix(t, n_coarse):
    """Dense 1-D interpolation (n_fine x n_coarse) of a transfer.Axis1D."""
    p = np.zeros((t.lo.size, n_coarse))
    p[np.arange(t.lo.size), t.lo] += 1.0 - t.w
    p[np.arange(t.lo.size), t.lo + 1] += t.w
    return p


def test_fused_passes_equal_the_operations_one_by_one():
    """A fused pass (correction, red–black sweeps, residual and restriction in one wavefront over
    the rows) against the same steps done one at a time with the assembled CSR matrix A = D - N:
    a half-sweep is u_i += (b - A u)_i / d_i node by node over the nodes of one colour in row order
    (they couple only along the fourth-order axis rows, two nodes apart), the prolongation is
    P_z U P_r^T and the restriction R_z res R_r^T with R the row-normalized P^T (common practice
    for multigrid transfers)."""
    grid, table = _lens(0.5 * MM)
    coarse = grid.coarsen()
    fine_op = operator(grid, rasterize(table, grid))[0]
    coarse_index = operator(coarse, rasterize(table, coarse))[0][0]
    system = assemble(grid, rasterize(table, grid))
    matrix, free = system.matrix, system.free
    d = matrix.diagonal()
    tz, tr = axis_transfer(grid.nz, coarse.nz), axis_transfer(grid.nr, coarse.nr)
    pz, pr = _transfer_matrix(tz, coarse.nz), _transfer_matrix(tr, coarse.nr)
    rz, rr = pz.T / pz.sum(axis=0)[:, None], pr.T / pr.sum(axis=0)[:, None]
    rng = np.random.default_rng(7)
    u = np.where(free, rng.normal(size=grid.shape), 0.0)
    b = np.where(free, rng.normal(size=grid.shape), 0.0)
    cu = rng.normal(size=coarse.shape)
    colour = np.add.outer(np.arange(grid.nz), np.arange(grid.nr)) % 2

    expected = u + np.where(free, pz @ cu @ pr.T, 0.0)
    x, rhs, node_colour = system.gather(expected), system.gather(b), system.gather(colour)
    ptr, cols, vals = matrix.indptr, matrix.indices, matrix.data
    for _ in range(2):
        for c in (0, 1):
            for i in np.flatnonzero(node_colour == c):
                x[i] += (rhs[i] - vals[ptr[i]:ptr[i + 1]] @ x[cols[ptr[i]:ptr[i + 1]]]) / d[i]
    expected = system.scatter(x)
    res = system.scatter(system.gather(b) - matrix @ system.gather(expected))
    restricted = np.where(coarse_index != FIXED, rz @ res @ rr.T, 0.0)

    fused = u.copy()
    empty = np.zeros((0, 0))
    norm = passes.fused_pass(2, fused, b, *fine_op, True, passes.NORM, cu, empty, np.zeros((0, 0), np.int32),
                             *tz.arrays(), *tr.arrays())
    np.testing.assert_allclose(fused, expected, rtol=0, atol=1e-12 * np.abs(expected).max())
    assert norm == pytest.approx(np.linalg.norm(system.gather(res) / d), rel=1e-9)

    got = np.full(coarse.shape, np.nan)
    again = expected.copy()
    passes.fused_pass(0, again, b, *fine_op, False, passes.RESTRICT, empty, got, coarse_index,
                      *tz.arrays(), *tr.arrays())
    np.testing.assert_array_equal(again, expected)  # no sweeps: u is left alone
    np.testing.assert_allclose(got, restricted, rtol=0, atol=1e-12 * np.abs(restricted).max())


def test_unit_maps_do_not_depend_on_the_thread_count():
    """The unit maps are solved on parallel threads, each map on its own work arrays: one thread
    and two give the same maps to the last bit, and the same residual histories."""
    grid, table = _lens(0.25 * MM)
    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = solve_unit_maps(grid, table)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = solve_unit_maps(grid, table)
    finally:
        numba.set_num_threads(threads)
    np.testing.assert_array_equal(one.unit, two.unit)
    for a, b in zip(one.history, two.history):
        np.testing.assert_array_equal(a, b)


# ---------------------------------------------------------------------------- analytic potentials


def test_parallel_plates_planar_exact():
    """Planar plates: V is linear in z between them (uniform field, any electrostatics text), which
    the Shortley–Weller stencil reproduces to round-off with the plate faces between nodes, an
    open top edge and the mirror plane, on a coarse grid with hz != hr."""
    grid, table = setup(
        "planar", (0.0, 10 * MM), (0.0, 5.2 * MM), 0.5 * MM, ("ground", "ground", "axis", "open"),
        [("hot", [Rect((0.0, 1.3 * MM), (0.0, 5.2 * MM))]), ("cold", [Rect((8.7 * MM, 10 * MM), (0.0, 5.2 * MM))])],
    )
    assert grid.hz != grid.hr
    u, raster, _ = solve(grid, table, [1.0, 0.0], rtol=1e-13)
    exact = np.broadcast_to(((8.7 * MM - grid.z) / (7.4 * MM))[:, None], grid.shape)
    assert _max_error(u, raster, exact) < 1e-10


def test_planar_full_range_deflector_is_antisymmetric():
    """Plates at +V and -V over a full y range: V(z, -y) = -V(z, y) by symmetry, and between long
    plates the field is nearly uniform, V = V0 y / d (parallel-plate capacitor, common practice)."""
    grid, table = setup(
        "planar", (0.0, 40 * MM), (-10 * MM, 10 * MM), 0.25 * MM, ("ground",) * 4,
        [("top", [Rect((10 * MM, 30 * MM), (2.5 * MM, 3.5 * MM))]),
         ("bottom", [Rect((10 * MM, 30 * MM), (-3.5 * MM, -2.5 * MM))])],
    )
    sol = solve_unit_maps(grid, table)
    v = sol.unit[0] - sol.unit[1]  # +1 V on top, -1 V on the bottom plate
    np.testing.assert_allclose(v, -v[:, ::-1], atol=1e-9)
    mid = np.argmin(np.abs(grid.z - 20 * MM))
    gap = np.abs(grid.r) < 2.5 * MM
    np.testing.assert_allclose(v[mid, gap], grid.r[gap] / (2.5 * MM), atol=5e-3)


def test_coaxial_cylinders():
    """Coaxial cylinders (a rod of radius a at 1 V in a tube of inner radius b at 0 V, open ends):
    V = ln(b / r) / ln(b / a) (Jackson 1999, Classical Electrodynamics).  The faces fall at
    different fractions of a cell on each grid, so the order is fitted over four grids."""
    a, b = 2.3 * MM, 7.7 * MM
    cells = np.array([0.4, 0.2, 0.1, 0.05]) * MM
    errors = []
    for cell in cells:
        grid, table = setup(
            "axial", (0.0, 4 * MM), (0.0, 10 * MM), cell, ("open", "open", "axis", "ground"),
            [("rod", [Rect((0.0, 4 * MM), (0.0, a))]), ("tube", [Rect((0.0, 4 * MM), (b, 10 * MM))])],
        )
        u, raster, _ = solve(grid, table, [1.0, 0.0])
        r = np.broadcast_to(grid.r[None, :], grid.shape)
        with np.errstate(divide="ignore"):
            exact = np.log(b / r) / np.log(b / a)
        errors.append(_max_error(u, raster, exact))
    order = np.polyfit(np.log(cells), np.log(errors), 1)[0]
    assert errors[1] < 1e-4  # 0.2 mm cells: 1e-4 of the rod voltage
    assert order >= 1.8


def test_concentric_arcs_about_a_centre_off_the_axis():
    """A rod (a disc of radius a) at 1 V inside a tube (inner radius b) at 0 V, both arcs about a
    centre off the node grid and off y = 0 in a planar domain over the full y range, the tube made
    of two sectors, one across y = 0 and one across the -z direction: V = ln(b / rho) / ln(b / a)
    (coaxial cylinders, Jackson 1999, Classical Electrodynamics), converging at second order."""
    a, b = 2.3 * MM, 7.7 * MM
    cz, cy = 12.3 * MM, 2.1 * MM
    turn = (math.radians(-100.0), math.radians(100.0), math.radians(260.0))
    errors = []
    for cell in (0.4 * MM, 0.2 * MM):
        grid, table = setup(
            "planar", (0.0, 24 * MM), (-10 * MM, 14 * MM), cell, ("ground",) * 4,
            [("rod", [Arc(cz, (0.0, a), (-math.pi, math.pi), cy)]),
             ("tube", [Arc(cz, (b, 9.5 * MM), turn[:2], cy), Arc(cz, (b, 9.5 * MM), turn[1:], cy)])],
        )
        u, raster, _ = solve(grid, table, [1.0, 0.0])
        rho = np.hypot(grid.z[:, None] - cz, grid.r[None, :] - cy)
        gap = (rho > a) & (rho < b)
        assert (raster.owner[gap] < 0).all() and (raster.owner[rho < a] == 0).all()
        exact = np.log(b / np.where(gap, rho, b)) / np.log(b / a)
        errors.append(np.abs(u - exact)[gap].max())
    assert errors[1] < 2e-4
    assert math.log2(errors[0] / errors[1]) >= 1.8


def _sphere_errors(transform, cells):
    a, b = 10 * MM, 20 * MM
    errors = []
    for n in cells:
        grid, table = spheres(a, b, n)
        u, raster, _ = solve(grid, table, [1.0, 0.0], transform=transform)
        rho = np.hypot(*np.meshgrid(grid.z, grid.r, indexing="ij"))
        with np.errstate(divide="ignore"):
            exact = (1.0 / rho - 1.0 / b) / (1.0 / a - 1.0 / b)
        errors.append(_max_error(u, raster, exact))
    return errors


def test_concentric_spheres_second_order():
    """A ball of radius a at 1 V inside a grounded shell of inner radius b:
    V = (1/rho - 1/b) / (1/a - 1/b) (Jackson 1999).  Curved surfaces between nodes converge at
    second order with Shortley–Weller arms: order >= 1.8 from 10 to 20 cells per radius and a
    maximum error below 0.1 % of the ball's voltage at 20 cells per radius."""
    e10, e20 = _sphere_errors(None, (10, 20))
    assert math.log2(e10 / e20) >= 1.8
    assert e20 < 1e-3


def test_concentric_spheres_staircase_is_first_order():
    """The same spheres with every arm forced to a whole spacing (a staircase boundary): the error
    is tens of times larger and falls at about first order, the contrast to the test above."""
    e10, e20 = _sphere_errors(staircase, (10, 20))
    order = math.log2(e10 / e20)
    assert e20 > 20 * _sphere_errors(None, (20,))[0]
    assert 0.4 < order < 1.3


def _two_tube_axis(z, radius, terms=400):
    """Axial potential of two coaxial tubes of radius R with a zero-width gap at z = 0, at -1 V and
    +1 V: by separation of variables (Fourier–Bessel series over the zeros j_n of J0)
    V(0, z) = sign(z) [1 - 2 sum_n exp(-j_n |z| / R) / (j_n J1(j_n))]."""
    j = jn_zeros(0, terms)
    s = np.exp(-np.outer(np.abs(z), j) / radius) / (j * j1(j))
    return np.sign(z) * (1.0 - 2.0 * s.sum(axis=1))


def test_two_tube_series_matches_tanh_approximation():
    """The series above against Harting & Read (1976), Electrostatic Lenses: V ~ tanh(1.318 z / R)
    for a narrow gap, a published fit good to about 1 % of the step."""
    z = np.linspace(-3.0, 3.0, 601)
    series = _two_tube_axis(z, 1.0)
    assert np.abs(series - np.tanh(1.318 * z)).max() < 0.01


def test_two_tube_lens_axial_potential():
    """Two equal tubes (radius R, gap 0.1 R) held at -1 V and +1 V, long (8 R each way, open ends)
    inside a grounded can: the axial potential follows the zero-gap Bessel series to 0.1 % of the
    step (the finite gap changes it at order (gap / R)^2)."""
    radius, length, wall, gap = 10 * MM, 80 * MM, 1 * MM, 1 * MM
    grid, table = setup(
        "axial", (-length, length), (0.0, 1.5 * radius), radius / 20, ("open", "open", "axis", "ground"),
        [("left", [Rect((-length, -gap / 2), (radius, radius + wall))]),
         ("right", [Rect((gap / 2, length), (radius, radius + wall))])],
    )
    sol = solve_unit_maps(grid, table)
    axis = sol.unit[1][:, 0] - sol.unit[0][:, 0]
    near = np.abs(grid.z) < 4 * radius
    err = np.abs(axis[near] - _two_tube_axis(grid.z[near], radius)).max()
    assert err < 2e-3  # 0.1 % of the 2 V step


def test_open_edge_is_a_mirror_plane():
    """A geometry symmetric about z = 0 solved on the full domain and on the half z >= 0 with an
    open z_min edge: the two agree node by node (method of images, common practice)."""
    ball = lambda cz: Arc(cz, (0.0, 1.7 * MM), (0.0, math.pi))
    ring = lambda z_lo: Rect((z_lo, 3.3 * MM), (4.1 * MM, 5.2 * MM))
    full_g, full_t = setup("axial", (-8 * MM, 8 * MM), (0.0, 8 * MM), 0.25 * MM,
                           ("ground", "ground", "axis", "ground"),
                           [("ring", [ring(-3.3 * MM)]), ("balls", [ball(6 * MM), ball(-6 * MM)])])
    half_g, half_t = setup("axial", (0.0, 8 * MM), (0.0, 8 * MM), 0.25 * MM,
                           ("open", "ground", "axis", "ground"), [("ring", [ring(0.0)]), ("balls", [ball(6 * MM)])])
    full, _, _ = solve(full_g, full_t, [1.0, 0.3], rtol=1e-12)
    half, _, _ = solve(half_g, half_t, [1.0, 0.3], rtol=1e-12)
    assert full.shape[0] == 2 * half.shape[0] - 1
    np.testing.assert_allclose(full[half_g.nz - 1:], half, atol=1e-9)


# ---------------------------------------------------------------------------- linear algebra


def _lens(cell):
    """Three tubes and an end disc (a small einzel-like column), open z edges."""
    return setup(
        "axial", (0.0, 60 * MM), (0.0, 12 * MM), cell, ("open", "open", "axis", "ground"),
        [("entrance", [Rect((5 * MM, 20 * MM), (4.05 * MM, 5.0 * MM))]),
         ("focus", [Rect((21.1 * MM, 38.9 * MM), (4.05 * MM, 5.0 * MM))]),
         ("exit", [Rect((40 * MM, 55 * MM), (4.05 * MM, 5.0 * MM)), Arc(58 * MM, (0.0, 1.3 * MM), (0.0, math.pi))])],
    )


def test_superposition_of_unit_maps():
    """Laplace's equation is linear: the unit maps sum to the solve with every electrode at 1 V
    (superposition, any electrostatics text)."""
    grid, table = _lens(0.2 * MM)
    sol = solve_unit_maps(grid, table)
    together, _, _ = solve(grid, table, [1.0, 1.0, 1.0])
    np.testing.assert_allclose(sol.unit.sum(axis=0), together, atol=1e-9)
    weighted, _, _ = solve(grid, table, [250.0, -1200.0, 40.0])
    np.testing.assert_allclose(np.tensordot([250.0, -1200.0, 40.0], sol.unit, 1), weighted, atol=1e-9 * 1200)
    for k in range(3):  # each map is 1 V on its electrode and 0 V on the others
        inside = sol.raster.owner >= 0
        np.testing.assert_array_equal(sol.unit[k][inside], (sol.raster.owner[inside] == k).astype(float))


def test_multigrid_matches_sparse_direct_solve():
    """The multigrid maps equal scipy.sparse.linalg.spsolve on the same CSR system: to 1e-9 V per
    volt at rtol = 1e-11, and to 1e-8 at the default 1e-10 (the node error is about ten times the
    diagonally scaled relative residual on this grid)."""
    grid, table = _lens(0.25 * MM)
    raster = rasterize(table, grid)
    system = assemble(grid, raster)
    op, geometry = operator(grid, raster)
    for rtol, tol in ((1e-11, 1e-9), (1e-10, 1e-8)):
        sol = solve_unit_maps(grid, table, rtol=rtol)
        for k in range(3):
            values = np.eye(3)[k]
            b = boundary_rhs(op, geometry, values)
            direct = system.scatter(spla.spsolve(system.matrix.tocsc(), system.gather(b)))
            add_fixed(direct, values, raster.owner)
            np.testing.assert_allclose(sol.unit[k], direct, rtol=0, atol=tol)


def test_residual_history_and_failure():
    """The residual falls every cycle to the default 1e-10; a cap of one cycle, or a tolerance below
    round-off, raises SolveError naming the electrode instead of returning a map."""
    grid, table = _lens(0.25 * MM)
    calls = []
    sol = solve_unit_maps(grid, table, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(0, 3), (1, 3), (2, 3), (3, 3)]  # a start, then one call per finished map
    for h in sol.history:
        assert h[0] == 1.0 and h[-1] <= 1e-10
        assert np.all(np.diff(h) < 0)
        assert len(h) - 1 <= 20
    with pytest.raises(SolveError, match="entrance"):
        solve_unit_maps(grid, table, max_cycles=1)
    with pytest.raises(SolveError, match="stagnated"):  # below round-off: the residual stops falling
        solve_unit_maps(grid, table, rtol=1e-20)


# ---------------------------------------------------------------------------- Poisson


def test_poisson_slab_between_grounded_plates():
    """A uniform charge between grounded planes a distance L apart: V = rho z (L - z) / (2 eps0)
    (Gauss's law, any electrostatics text; epsilon_0 from scipy.constants).  The five-point
    stencil is exact for quadratics, so the match is to round-off."""
    length = 10 * MM
    grid, table = setup("planar", (0.0, length), (0.0, 3 * MM), 0.5 * MM, ("ground", "ground", "axis", "open"), [])
    v = solve_poisson(grid, table, np.full(grid.shape, 1e-6), rtol=1e-13)
    z = grid.z[:, None]
    exact = np.broadcast_to(1e-6 * z * (length - z) / (2 * epsilon_0), grid.shape)
    np.testing.assert_allclose(v, exact, rtol=0, atol=1e-9 * exact.max())


def test_poisson_charged_column_in_grounded_tube():
    """A uniform charge filling a grounded tube of radius b (open ends):
    V = rho (b^2 - r^2) / (4 eps0) (Gauss's law; epsilon_0 from scipy.constants), exact for the
    axial stencil, which is exact for r^2."""
    b = 5 * MM
    grid, table = setup("axial", (0.0, 3 * MM), (0.0, b), 0.25 * MM, ("open", "open", "axis", "ground"),
                        [("tube", [Rect((0.0, 3 * MM), (b - 0.5 * MM, b))])])
    rho = np.full(grid.shape, 2e-6)
    raster = rasterize(table, grid)
    v = solve_poisson(grid, table, rho, raster=raster, rtol=1e-13)
    bi = b - 0.5 * MM  # the tube's inner face
    r = np.broadcast_to(grid.r[None, :], grid.shape)
    exact = 2e-6 * (bi**2 - r**2) / (4 * epsilon_0)
    assert _max_error(v, raster, exact) < 1e-9 * exact.max()
