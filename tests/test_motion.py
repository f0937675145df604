"""Tests of the Dormand–Prince kernel: its tableau, its dense output, and its rays against scipy."""

import dataclasses

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import solve_ivp
from scipy.integrate._ivp.rk import RK45

from tracer import motion
from tracer.motion import bundles, events, force, stepper, tableau, walls
from tracer.motion.bundles import Nodes, shapes_of
from tracer.beam import symmetry_code, trace
from tracer.config import loads
from tracer.fieldmap import PotentialMap, hermite_eval_many, patch_coefficients
from tracer.geometry import rasterize, shape_table
from tracer.grid import Grid

SMOOTH = """
title = "a smooth test field (illustrative)"
[domain]
symmetry = "{symmetry}"
z_mm = [0.0, 40.0]
{r_key} = {r_val}
cell_mm = {cell}
edges = "ground"
[[electrode]]
name = "corner"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [39.0, 40.0]
{r_key} = [9.0, 10.0]
[[beam]]
name = "p"
species = "p+"
energy_eV = 500.0
count = 3
seed = 4
start_z_mm = 2.0
start_{r_key} = {start_r}
radius_mm = 2.0
half_angle_deg = 3.0
"""


def smooth_potential(z, r):
    """An illustrative potential, cubic in z and quadratic in r, with its exact derivatives
    (V, dV/dz, dV/dr, d2V/dzdr): V = A (s - s^3 / 3) + B s (r / b)^2, s = (z - 20 mm) / 20 mm.

    A bicubic Hermite patch reproduces it exactly, so the interpolant is smooth across cells and
    an integrator comparison measures integration error alone (not a Laplace solution: the kernel
    tests need only a smooth, non-uniform field).
    """
    a, bb, zc, w, b = 300.0, 100.0, 20e-3, 20e-3, 10e-3
    s = (z - zc) / w
    rho = r / b
    return np.array([a * (s - s**3 / 3) + bb * s * rho**2,
                     (a * (1 - s**2) + bb * rho**2) / w,
                     2 * bb * s * rho / b + 0 * z,
                     2 * bb * rho / (b * w) + 0 * z])


def smooth_map(symmetry="axial", cell_mm=0.5):
    """A PotentialMap whose Hermite data are the smooth potential's node values and derivatives,
    and the beam of the same setup."""
    r_key, r_val, start_r = {"axial": ("r_mm", "10.0", "0.0"),
                             "mirror": ("r_mm", "10.0", "1.0"),
                             "planar": ("y_mm", "[-10.0, 10.0]", "-1.0")}[symmetry]
    setup = loads(SMOOTH.format(symmetry="axial" if symmetry == "axial" else "planar",
                                r_key=r_key, r_val=r_val, start_r=start_r, cell=cell_mm))
    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    raster = rasterize(table, grid)
    zz, rr = np.meshgrid(grid.z, grid.r, indexing="ij")
    field = PotentialMap(grid, table, raster, tuple(e.name for e in setup.electrodes), (0.0,),
                         np.ascontiguousarray(smooth_potential(zz, rr)))
    return field, setup.beams[0]


def test_tableau_matches_scipy_rk45():
    """The Dormand–Prince 5(4) coefficients (Dormand & Prince 1980) equal scipy's RK45 tableau
    (library: scipy.integrate.RK45, which implements the same pair)."""
    assert np.allclose(tableau.DP_C[:6], RK45.C, rtol=0, atol=1e-15)
    assert np.allclose(tableau.DP_A[:6, :5], RK45.A, rtol=0, atol=1e-15)
    assert np.allclose(tableau.DP_B[:6], RK45.B, rtol=0, atol=1e-15)
    assert np.allclose(tableau.DP_A[6], RK45.B, rtol=0, atol=1e-15)
    # scipy's E is (b_hat - b), ours is (b - b_hat)
    assert np.allclose(tableau.DP_E, -RK45.E, rtol=0, atol=1e-15)


def rooted_trees(order):
    """All rooted trees with ``order`` nodes, each a sorted tuple of its root's subtrees."""
    if order == 1:
        return [()]
    out = set()

    def grow(rest, smallest, kids):
        if rest == 0:
            out.add(tuple(sorted(kids)))
            return
        for size in range(1, rest + 1):
            for sub in rooted_trees(size):
                if (size, sub) >= smallest:
                    grow(rest - size, (size, sub), kids + [(size, sub)])

    grow(order - 1, (0, ()), [])
    return [tuple(sub for _, sub in kids) for kids in out]


def tree_weight(a, tree):
    """The stage vector of a tree: the product over its subtrees u of A (stage vector of u)."""
    phi = np.ones(a.shape[0])
    for sub in tree:
        phi = phi * (a @ tree_weight(a, sub))
    return phi


def tree_density(tree):
    """gamma(t) = |t| times the product of its subtrees' densities; returns (gamma, |t|)."""
    gamma, size = 1, 1
    for sub in tree:
        g, n = tree_density(sub)
        gamma, size = gamma * g, size + n
    return gamma * size, size


def test_tableau_order_conditions():
    """Row sums equal the nodes; the fifth-order weights satisfy b . Phi(t) = 1 / gamma(t) for every
    rooted tree t of up to 5 nodes (17 conditions) and the embedded weights for every tree of up to
    4 (8), but not all of order 5 (Butcher's order conditions; Hairer, Nørsett & Wanner 1993,
    sec. II.2, theorem 2.13; the tree counts 1, 1, 2, 4, 9 are OEIS A000081)."""
    a, b, c = tableau.DP_A, tableau.DP_B, tableau.DP_C
    a7 = np.pad(a, ((0, 0), (0, 1)))
    assert np.allclose(a7.sum(axis=1), c, atol=1e-14)
    assert [len(rooted_trees(k)) for k in range(1, 6)] == [1, 1, 2, 4, 9]
    missed = []
    for order in range(1, 6):
        for tree in rooted_trees(order):
            gamma, size = tree_density(tree)
            assert size == order
            assert b @ tree_weight(a7, tree) == pytest.approx(1.0 / gamma, abs=1e-14), tree
            hat = tableau.DP_B_HAT @ tree_weight(a7, tree)
            if order <= 4:
                assert hat == pytest.approx(1.0 / gamma, abs=1e-14), tree
            elif abs(hat - 1.0 / gamma) > 1e-6:
                missed.append(tree)
    assert missed      # the embedded pair is of order 4, not 5
    assert np.abs(tableau.DP_E).max() > 1e-3


def test_step_size_controller():
    """The controller of an embedded pair of order 4 (Hairer, Nørsett & Wanner 1993, sec. II.4:
    h_new = h min(facmax, max(facmin, fac err^(-1/5))), from memory): a rejected step shrinks by
    0.9 err^(-1/5) but never below a fifth; a small error grows the step at most fivefold, counted
    from the earlier proposal when the step was shortened to reach a wall."""
    propose = stepper.propose
    h = 1e-9
    assert propose(h, h, 32.0) == pytest.approx(h * 0.9 / 2.0, rel=1e-14, abs=0)       # 32^-1/5 = 1/2
    assert propose(h, h, 1e12) == pytest.approx(0.2 * h, rel=1e-14, abs=0)
    assert propose(h, h, np.nan) == pytest.approx(0.2 * h, rel=1e-14, abs=0)       # a non-finite step
    assert propose(h, h, np.inf) == pytest.approx(0.2 * h, rel=1e-14, abs=0)
    assert propose(h, 2 * h, 1.5) <= h                                          # never longer
    assert propose(h, h, 1.0) == pytest.approx(0.9 * h, rel=1e-14, abs=0)
    assert propose(h, h, 1.0 / 32.0) == pytest.approx(1.8 * h, rel=1e-14, abs=0)
    assert propose(h, h, 0.0) == pytest.approx(5.0 * h, rel=1e-14, abs=0)
    assert propose(h, h, 1e-30) == pytest.approx(5.0 * h, rel=1e-14, abs=0)
    # a step shortened to a wall at a tenth of the proposal: the cap is five times the proposal
    assert propose(0.1 * h, h, 0.0) == pytest.approx(5.0 * h, rel=1e-14, abs=0)
    assert propose(0.1 * h, h, 1.0) == pytest.approx(0.09 * h, rel=1e-14, abs=0)


def dense_of(poly):
    """Dense-output coefficients rc (5 x 6) whose z row is the polynomial ``poly`` of theta
    (numpy.polynomial coefficients, degree <= 4), the other rows zero."""
    thetas = np.linspace(0.0, 1.0, 5)
    u = 1.0 - thetas
    basis = np.stack([np.ones(5), thetas, thetas * u, thetas**2 * u, thetas**2 * u**2], axis=1)
    rc = np.zeros((5, 6))
    rc[:, 2] = np.linalg.solve(basis, np.polynomial.polynomial.polyval(thetas, poly))
    return rc


def test_plane_crossing_on_a_known_cubic():
    """The event bisection finds where a cubic z(theta) = z_p + s (theta - 0.3)(theta^2 + 1)
    crosses the plane z = z_p (its one real root, 0.3; calculus), rising and falling, to 2^-48 of
    the step, and reports no event before it."""
    field, _ = smooth_map()
    shapes = shapes_of(field.table)
    buf = np.empty(6)
    zp = 12e-3
    for sign in (1.0, -1.0):
        # (theta - 0.3)(theta^2 + 1) = theta^3 - 0.3 theta^2 + theta - 0.3
        rc = dense_of(np.array([zp - sign * 0.3e-3, sign * 1e-3, -sign * 0.3e-3, sign * 1e-3]))
        stepper.dense(rc, 0.3, buf)
        assert buf[2] == pytest.approx(zp, abs=1e-18)
        th = events.locate(rc, 0, 0.0, 1.0, events.EV_LINE, events.z_line(zp), sign > 0, shapes, buf)
        assert abs(th - 0.3) < 2.0**-47
        stepper.dense(rc, th, buf)
        assert events.is_event(events.EV_LINE, events.z_line(zp), sign > 0, buf[2], 0.0, shapes)
        stepper.dense(rc, th - 2.0**-40, buf)        # and not just before it
        assert not events.is_event(events.EV_LINE, events.z_line(zp), sign > 0, buf[2], 0.0, shapes)


def lane_steps(rng, h, rtol=1e-9, atol_x=1e-12, atol_p=1e-30):
    """One lane_step of protons from random states in a random cell polynomial: the workspace
    after the step, the right-hand side f(s) -> (rate, V) it used, and the start states."""
    a = tuple(rng.normal(size=16))
    grid = Nodes(0.0, 0.0, 1e-3, 1e-3, 11, 11, 1e-2, 1e-2)
    mass, charge = constants.m_p, constants.e
    row = np.empty((1, 6))

    def f(s):
        v = force.rate(a, 2e-3, 1e-3, grid, 0, mass, charge, s, row, 0, None, a)
        return row[0].copy(), v

    states = np.empty((bundles.LANES, 6))
    states[:, :3] = [2e-3, 1e-3, 3e-3] + 1e-4 * rng.normal(size=(bundles.LANES, 3))
    states[:, 3:] = [1e-23, -2e-23, 5e-22] * (1.0 + 0.1 * rng.normal(size=(bundles.LANES, 3)))
    w = np.zeros((bundles.W_ROWS, bundles.LANES))
    for lane, s in enumerate(states):
        w[bundles.W_Y0:bundles.W_Y0 + 6, lane] = s
        w[bundles.W_K:bundles.W_K + 6, lane] = f(s)[0]
        w[bundles.W_PATCH:bundles.W_PATCH + 16, lane] = a
    w[bundles.W_CZ], w[bundles.W_CR], w[bundles.W_H], w[bundles.W_ATOL] = 2e-3, 1e-3, h, atol_p
    stepper.lane_step(w, grid, 0, mass, charge, rtol, atol_x, None, None,
                      np.zeros(bundles.LANES, dtype=np.int64), None)
    return w, f, states


def test_dense_output_matches_scipy_interpolant():
    """The continuous extension of a lane step in Hairer's form equals scipy's RK45 dense output
    polynomial (Shampine 1986; library: scipy.integrate.RK45.P) over the step's stage rates."""
    h = 1e-9
    w, _, states = lane_steps(np.random.default_rng(3), h)
    out = np.empty(6)
    for lane, y0 in enumerate(states):
        ks = w[bundles.W_K:bundles.W_K + 42, lane].reshape(7, 6)
        rc = np.ascontiguousarray(w[bundles.W_DENSE:bundles.W_DENSE + 30, lane].reshape(5, 6))
        assert np.array_equal(rc[0], y0)
        for theta in (0.0, 0.13, 0.5, 0.77, 1.0):
            stepper.dense(rc, theta, out)
            ref = y0 + h * (ks.T @ RK45.P) @ (theta ** np.arange(1, 5))
            assert np.allclose(out, ref, rtol=1e-13, atol=0)
        stepper.dense(rc, 1.0, out)
        assert np.allclose(out, w[bundles.W_Y1:bundles.W_Y1 + 6, lane], rtol=1e-14, atol=0)


def test_lane_step_is_the_tableau_applied_to_the_rate():
    """Each lane's step equals the Dormand–Prince formulas written out with numpy over the same
    right-hand side (Dormand & Prince 1980: stage i at y0 + h sum_j a_ij k_j, y1 = y0 + h sum
    b_i k_i, error estimate h sum_j e_j k_j scaled by atol + rtol max(|y0|, |y1|))."""
    h, rtol, atol_x, atol_p = 1e-9, 1e-9, 1e-12, 1e-30
    w, f, states = lane_steps(np.random.default_rng(5), h, rtol, atol_x, atol_p)
    for lane, y0 in enumerate(states):
        ks = [f(y0)[0]]
        for st in range(1, 7):
            ks.append(f(y0 + h * (tableau.DP_A[st, :st] @ np.array(ks)))[0])
        ks = np.array(ks)
        y1 = w[bundles.W_Y1:bundles.W_Y1 + 6, lane]
        assert np.allclose(y1, y0 + h * (tableau.DP_B @ ks), rtol=1e-14, atol=0)
        assert np.allclose(w[bundles.W_K:bundles.W_K + 42, lane].reshape(7, 6), ks, rtol=1e-12,
                           atol=0)
        assert w[bundles.W_V1, lane] == f(y1)[1]
        scale = np.r_[np.full(3, atol_x), np.full(3, atol_p)] + rtol * np.maximum(abs(y0), abs(y1))
        err = np.sqrt(np.mean((h * (tableau.DP_E @ ks) / scale) ** 2))
        assert w[bundles.W_ERR, lane] == pytest.approx(err, rel=1e-10)
    assert len({w[bundles.W_Y1, lane] for lane in range(bundles.LANES)}) == bundles.LANES


def test_wall_prediction_continues_the_dense_output_and_finds_the_crossing():
    """The predicted path is the last step's dense output continued (its re-expansion about the
    step's end is the same quartic: Taylor's theorem), and the predicted exit time puts that path
    on a wall of the cell to the requested tolerance."""
    rng = np.random.default_rng(11)
    hp = 2e-9
    y0 = np.array([1.1e-3, 0.4e-3, 20.1e-3, 0.0, 0.0, 0.0])
    k0 = np.array([3e3, 4e3, 2e5, 0.0, 0.0, 0.0])
    rc = np.zeros((5, 6))
    rc[0] = y0 - hp * k0
    rc[1] = hp * k0
    rc[2:, :3] = rng.normal(scale=1e-7, size=(3, 3))
    q = np.empty((3, 5))
    walls.reach(rc, hp, y0, k0, constants.m_p, 2e-9, q)
    out = np.empty(6)
    for tau in (0.0, 0.7e-9, 2e-9, 5e-9):
        stepper.dense(rc, 1.0 + tau / hp, out)
        pred = [walls.series(q, i, tau)[0] for i in range(3)]
        assert np.allclose(pred, out[:3], rtol=1e-12, atol=1e-15)
    grid = Nodes(0.0, 0.0, 0.25e-3, 0.25e-3, 241, 33, 60e-3, 8e-3)
    tol = 2.5e-8
    box = np.empty(4)
    for h, crosses in ((2e-9, True), (0.5e-9, False)):
        walls.cell_box(grid, 80, 4, box)
        tau = walls.exit_time(q, y0, k0, 0, box, h, tol)
        if not crosses:
            assert tau == h          # the path stays inside the cell for the whole step
            continue
        assert 0.0 < tau < h
        z = walls.series(q, 2, tau)[0]
        assert abs(z - box[1]) < tol
        # the path is inside the cell before the crossing
        zs = [walls.series(q, 2, t)[0] for t in np.linspace(0.0, tau, 20)[:-1]]
        assert max(zs) < box[1]
    # a ray moving out across the cell's outer wall (r) before it reaches the next z wall
    y0 = np.array([1.2e-3, 0.1e-3, 20.01e-3, 0.0, 0.0, 0.0])
    k0 = np.array([2e5, 1e4, 5e4, 0.0, 0.0, 0.0])
    walls.reach(rc, 0.0, y0, k0, constants.m_p, 1e-9, q)     # no last step: constant rate
    walls.cell_box(grid, 80, 4, box)
    tau = walls.exit_time(q, y0, k0, 0, box, 1e-9, tol)
    x, y = walls.series(q, 0, tau)[0], walls.series(q, 1, tau)[0]
    assert 0.0 < tau < 1e-9 and abs(np.hypot(x, y) - box[3]) < tol
    assert walls.series(q, 2, tau)[0] < box[1]


def equations(field, mass, charge, sym):
    """Right-hand side for solve_ivp: the same physics as the kernel, written with numpy, on the
    same interpolant (tracer.fieldmap.hermite_eval)."""
    g = field.grid
    c = constants.c

    def rhs(_t, s):
        x, y, z, px, py, pz = s
        r = np.hypot(x, y) if sym == 0 else (abs(y) if sym == 2 else y)
        _, dvdz, dvdr = hermite_eval_many(field.hermite, g.z0, g.r0, g.hz, g.hr, g.nz, g.nr,
                                          sym != 1, np.array([z]), np.array([r]))
        er = -dvdr[0]
        if sym == 0:
            ex, ey = (er * x / r, er * y / r) if r > 0 else (0.0, 0.0)
        else:
            ex, ey = 0.0, (er * np.sign(y) if sym == 2 else er)
        gm = mass * np.sqrt(1.0 + (px * px + py * py + pz * pz) / (mass * c) ** 2)
        return [px / gm, py / gm, pz / gm, charge * ex, charge * ey, -charge * dvdz[0]]

    return rhs


@pytest.mark.parametrize("symmetry", ["axial", "planar", "mirror"])
def test_kernel_agrees_with_solve_ivp_dop853(symmetry):
    """Rays of the numba kernel end where scipy's DOP853 at rtol 1e-12 puts them on the same
    interpolated field (library: scipy.integrate.solve_ivp)."""
    field, beam = smooth_map(symmetry)
    assert symmetry_code(field.grid) == motion.SYMMETRY_CODE[symmetry]
    t_max = 1.0e-7  # protons at 500 eV fly about 30 mm in this time, through the bump
    run = trace(field, beam, rtol=1e-11, max_time_s=t_max)
    rec = run.records
    assert (rec["status"] == "time").all()
    sym = symmetry_code(field.grid)
    rhs = equations(field, beam.species.mass_kg, beam.species.charge_C, sym)
    for s0, end in zip(run.starts, rec):
        y0 = [s0[k] for k in ("x_m", "y_m", "z_m", "px", "py", "pz")]
        sol = solve_ivp(rhs, (0.0, t_max), y0, method="DOP853", rtol=1e-12, atol=1e-30)
        ref = sol.y[:, -1]
        got = np.array([end[k] for k in ("x_m", "y_m", "z_m", "px", "py", "pz")])
        p_scale = np.linalg.norm(ref[3:])
        print(np.abs(got[:3] - ref[:3]).max() / field.grid.hz, np.abs(got[3:] - ref[3:]).max() / p_scale)
        assert np.abs(got[:3] - ref[:3]).max() < 1e-8 * field.grid.hz
        assert np.abs(got[3:] - ref[3:]).max() < 1e-8 * p_scale
        assert abs(end["time_s"] - t_max) <= 1e-15 * t_max


def test_mirrored_planar_rays_are_mirror_images():
    """In a planar domain with a mirror plane a ray started at -y is the mirror image of the ray
    started at +y (the field's y component is odd in y: common practice)."""
    field, beam = smooth_map("mirror")
    up = dataclasses.replace(beam, start_r_m=1.5e-3, radius_m=0.0, half_angle_rad=0.0, count=1)
    down = dataclasses.replace(up, start_r_m=-1.5e-3)
    a = trace(field, up, max_time_s=1.0e-7).records[0]
    b = trace(field, down, max_time_s=1.0e-7).records[0]
    assert a["y_m"] == pytest.approx(-b["y_m"], rel=1e-12, abs=0)
    assert a["py"] == pytest.approx(-b["py"], rel=1e-12, abs=0)
    assert a["z_m"] == pytest.approx(b["z_m"], rel=1e-12, abs=0)
    assert abs(a["py"]) > 1e-3 * abs(a["pz"])  # the bump did deflect the ray


def test_quiet_cells_keep_the_event_search_near_surfaces_planes_and_edges():
    """Accepted steps skip the event search only in cells at least one cell away from any surface,
    plane and domain edge (steps end on cell walls, so they stay in their cell)."""
    cell = np.full((12, 10), -1, dtype=np.int64)
    cell[5, 6] = -2                      # a surface passes through this cell
    grid = Nodes(0.0, 0.0, 1e-3, 1e-3, 13, 11, 12e-3, 10e-3)
    quiet = motion.quiet_cells(cell, grid, np.array([[1.0, 0.0, 9.5e-3]]))   # a plane z = 9.5 mm in cell 9
    assert not quiet[0].any() and not quiet[-1].any()
    assert not quiet[:, 0].any() and not quiet[:, -1].any()
    assert not quiet[4:7, 5:8].any()     # the cut cell and its eight neighbours
    assert not quiet[8:11].any()         # within a cell of the plane
    assert quiet[2, 2] and quiet[5, 3] and quiet[7, 8]


@pytest.mark.parametrize("j", [1, 0])
@pytest.mark.parametrize("sym", [0, 1, 2])
def test_field_of_a_cell_is_the_map_interpolant_in_3d(sym, j):
    """The tracer's field in one cell is the map's interpolant (tracer.fieldmap.hermite_eval),
    continued past the cell's walls, with E_r split into E_x = E_r x / r and E_y = E_r y / r in
    axial symmetry, E_y = E_r in planar and E_y = sign(y) E_r above a mirror plane (common
    practice), for random node data; in a cell of the first row too, whose patch is even in r
    about an axis or a mirror plane."""
    rng = np.random.default_rng(3)
    hz, hr = 0.2e-3, 0.3e-3
    herm = rng.normal(size=(4, 6, 5)) * np.array([1.0, 1 / hz, 1 / hr, 1 / (hz * hr)])[:, None, None]
    grid = Nodes(0.0, 0.0, hz, hr, 6, 5, 5 * hz, 4 * hr)
    i = 2
    a = patch_coefficients(herm, i, j, hz, hr, sym != 1)
    even = sym != 1 and j == 0
    phi = rng.uniform(0.0, 2 * np.pi, 200)
    rho = rng.uniform(-0.5 * j, 1.5, 200) * hr + j * hr   # the grid starts at r = 0
    z = rng.uniform(-0.5, 1.5, 200) * hz + i * hz
    one_cell = np.ascontiguousarray(herm[:, i:i + 2, j:j + 2])
    for ph, rk, zk in zip(phi, rho, z):
        x, y = (rk * np.cos(ph), rk * np.sin(ph)) if sym == 0 else (0.0, rk if sym == 1 else -rk)
        v, ex, ey, ez = force.patch_field(a, i * hz, j * hr, grid, sym, x, y, zk)
        # the Hermite patch of a one-cell grid, which hermite_eval continues beyond it
        ref = hermite_eval_many(one_cell, i * hz, j * hr, hz, hr, 2, 2, even, np.array([zk]),
                                np.array([rk]))
        e_r = -ref[2][0]
        assert v == pytest.approx(ref[0][0], rel=1e-12, abs=1e-12)
        assert -ez == pytest.approx(ref[1][0], rel=1e-10, abs=1e-9)
        want = {0: (e_r * np.cos(ph), e_r * np.sin(ph)), 1: (0.0, e_r), 2: (0.0, -e_r)}[sym]
        assert (ex, ey) == pytest.approx(want, rel=1e-10, abs=1e-9)
