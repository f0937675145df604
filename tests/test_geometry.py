"""Electrode shapes: point tests, exact surface crossings, arms and the cell map.

Every expected value is a geometry fact worked out by hand (source: analytic geometry).
"""

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracer.config import Arc, ConfigError, Domain, Electrode, Polygon, Rect
from tracer.geometry import SNAP, Raster, electrode_at, first_hit, index_dtype, rasterize, shape_table
from tracer.grid import Grid, locate

AXIAL = Domain("axial", (0.0, 0.04), (0.0, 0.02), 1e-3, ("ground", "ground", "axis", "ground"))
FULL_Y = Domain("planar", (0.0, 0.04), (-0.02, 0.02), 1e-3, ("ground",) * 4)


def _table(*shapes_per_electrode, domain=AXIAL, voltages=None):
    voltages = voltages or [float(i) for i in range(len(shapes_per_electrode))]
    electrodes = tuple(Electrode(f"e{i}", v, tuple(s)) for i, (s, v) in enumerate(zip(shapes_per_electrode, voltages)))
    return shape_table(electrodes, domain)


def _at(table, z, r):
    return electrode_at(z, r, *table.arrays())


def _hit(table, z, r, dz, dr):
    return first_hit(z, r, dz, dr, *table.arrays())


# ------------------------------------------------------------------------------- point tests


def test_rect_inside_and_outside():
    t = _table([Rect((0.01, 0.02), (0.005, 0.008))])
    assert _at(t, 0.015, 0.006) == 0
    assert _at(t, 0.015, 0.004) == -1
    assert _at(t, 0.021, 0.006) == -1
    assert _at(t, 0.009, 0.006) == -1


def test_concave_polygon_notch_is_free():
    # a U opening toward +r: the notch z in (0.015, 0.025), r > 0.006 is outside
    u = Polygon(((0.01, 0.0), (0.03, 0.0), (0.03, 0.015), (0.025, 0.015), (0.025, 0.006),
                 (0.015, 0.006), (0.015, 0.015), (0.01, 0.015)))
    t = _table([u])
    assert _at(t, 0.02, 0.01) == -1  # in the notch
    assert _at(t, 0.02, 0.003) == 0  # under the notch
    assert _at(t, 0.012, 0.012) == 0  # left arm
    assert _at(t, 0.028, 0.012) == 0  # right arm
    assert _at(t, 0.02, 0.016) == -1  # above


def test_arc_shell_sector():
    # shell 5..6 mm about z = 20 mm, polar angles 30..90 deg from +z
    t = _table([Arc(0.02, (0.005, 0.006), (math.radians(30), math.radians(90)))])
    rho, a = 0.0055, math.radians(60)
    assert _at(t, 0.02 + rho * math.cos(a), rho * math.sin(a)) == 0
    a = math.radians(20)  # angle out of range
    assert _at(t, 0.02 + rho * math.cos(a), rho * math.sin(a)) == -1
    a = math.radians(100)
    assert _at(t, 0.02 + rho * math.cos(a), rho * math.sin(a)) == -1
    assert _at(t, 0.02 + 0.004 * math.cos(1.0), 0.004 * math.sin(1.0)) == -1  # inside the hollow


def test_arc_with_zero_inner_radius_and_full_angles_is_a_ball():
    t = _table([Arc(0.02, (0.0, 0.005), (0.0, math.pi))])
    assert _at(t, 0.02, 0.0) == 0
    assert _at(t, 0.0165, 0.0) == 0  # behind the centre on the axis
    assert _at(t, 0.02 + 0.003, 0.0039) == 0  # 3-4-5: rho = 4.9 mm
    assert _at(t, 0.02 + 0.003, 0.0041) == -1


def test_planar_arc_measures_angles_toward_plus_y():
    upper = _table([Arc(0.02, (0.0, 0.005), (0.0, math.pi))], domain=FULL_Y)
    assert _at(upper, 0.02, 0.002) == 0
    assert _at(upper, 0.02, -0.002) == -1
    disc = _table([Arc(0.02, (0.0, 0.005), (-math.pi, math.pi))], domain=FULL_Y)
    assert _at(disc, 0.02, -0.002) == 0 and _at(disc, 0.017, -0.001) == 0
    back = _table([Arc(0.02, (0.0, 0.005), (math.pi / 2, 3 * math.pi / 2))], domain=FULL_Y)
    assert _at(back, 0.018, -0.002) == 0 and _at(back, 0.022, 0.002) == -1


# a sector about (21, -3.3) mm over polar angles -60..240 deg: across y = 0 and past the -z
# direction, so its gap is the wedge -120..-60 deg below the centre
OFF = (0.021, -0.0033)
OFF_RADII = (0.005, 0.007)
OFF_ANGLES = (math.radians(-60.0), math.radians(240.0))


def _off_axis():
    return _table([Arc(OFF[0], OFF_RADII, OFF_ANGLES, OFF[1])], domain=FULL_Y)


def _polar(z, r):
    """Radius about the sector's centre, and whether the polar angle lies in its range."""
    rho = np.hypot(z - OFF[0], r - OFF[1])
    angle = np.degrees(np.arctan2(r - OFF[1], z - OFF[0]))
    return rho, (angle >= -60.0) | (angle <= -120.0)


def test_an_arc_about_a_centre_off_the_axis_is_the_circles_sector():
    """Points inside exactly where the circle's radius and polar angle say (analytic geometry),
    also for the nodes of the grid; the box is the circle's."""
    t = _off_axis()
    np.testing.assert_allclose(t.bbox[0], [0.014, 0.028, OFF[1] - 0.007 * math.sin(math.radians(60.0)),
                                           OFF[1] + 0.007], atol=1e-9 * 0.04 + 1e-15)
    z, r = np.random.default_rng(5).uniform((0.012, -0.012), (0.03, 0.006), (3000, 2)).T
    rho, wide = _polar(z, r)
    exact = (rho >= OFF_RADII[0]) & (rho <= OFF_RADII[1]) & wide
    assert 300 < exact.sum() < 2700
    assert [_at(t, a, b) == 0 for a, b in zip(z, r)] == list(exact)
    g = _grid(FULL_Y)
    ras = rasterize(t, g)
    zz, rr = np.meshgrid(g.z, g.r, indexing="ij")
    rho, wide = _polar(zz, rr)
    exact = (rho >= OFF_RADII[0]) & (rho <= OFF_RADII[1]) & wide
    clear = (np.abs(rho - OFF_RADII[0]) > 1e-9) & (np.abs(rho - OFF_RADII[1]) > 1e-9)
    assert clear.sum() > 0.99 * clear.size
    assert ((ras.owner >= 0) == exact)[clear].all()


def test_crossings_normals_and_boxes_of_an_arc_off_the_axis():
    """From the centre a segment meets the inner circle at its radius, and none in the gap; along
    the gap a segment meets the sector's straight side where the line at -60 deg cuts it; the
    outward normal is radial about the centre; a box that holds a piece of the boundary is seen
    by near_boundary and the hollow round the centre is not (analytic geometry)."""
    from tracer.geometry import near_boundary, surface_normal
    t = _off_axis()
    cz, cr = OFF
    for deg in (100.0, -30.0, 230.0):
        c, s = math.cos(math.radians(deg)), math.sin(math.radians(deg))
        t_hit, who = _hit(t, cz, cr, 0.01 * c, 0.01 * s)
        assert who == 0 and abs(t_hit * 0.01 - OFF_RADII[0]) < 1e-15
        nz, nr = surface_normal(cz + 0.007 * c, cr + 0.007 * s, 0, False, *t.arrays())
        assert (nz, nr) == pytest.approx((c, s), abs=1e-12)
        nz, nr = surface_normal(cz + 0.005 * c, cr + 0.005 * s, 0, False, *t.arrays())
        assert (nz, nr) == pytest.approx((-c, -s), abs=1e-12)
    assert _hit(t, cz, cr, 0.0, -0.01) == (2.0, -1)  # straight down the gap
    # along z at 6 mm below the centre: the side at -60 deg is where z = cz + 6 mm / tan(60 deg)
    t_hit, who = _hit(t, cz, cr - 0.006, 0.01, 0.0)
    assert who == 0 and abs(t_hit * 0.01 - 0.006 / math.tan(math.radians(60.0))) < 1e-15
    assert not near_boundary(cz - 0.001, cz + 0.001, cr - 0.001, cr + 0.001, *t.arrays())
    rng = np.random.default_rng(8)
    for deg in rng.uniform(-60.0, 240.0, 40):
        for radius in OFF_RADII:
            z = cz + radius * math.cos(math.radians(deg))
            r = cr + radius * math.sin(math.radians(deg))
            dz, dr = rng.uniform(0.0, 2e-4, 2)
            assert near_boundary(z - dz, z + 2e-4 - dz, r - dr, r + 2e-4 - dr, *t.arrays())


# ------------------------------------------------------------------------------- first_hit


def test_first_hit_on_a_rect_face_and_miss():
    t = _table([Rect((0.01, 0.02), (0.005, 0.008))])
    s, who = _hit(t, 0.0, 0.006, 0.02, 0.0)
    assert who == 0 and s == pytest.approx(0.5, abs=1e-15)  # face z = 10 mm of a 20 mm segment
    assert _hit(t, 0.0, 0.006, 0.009, 0.0) == (2.0, -1)  # stops short
    assert _hit(t, 0.0, 0.004, 0.03, 0.0) == (2.0, -1)  # passes under


def test_first_hit_through_a_polygon_vertex():
    # a diamond with a vertex at (10, 5) mm; the segment along r = 5 mm meets it exactly there
    t = _table([Polygon(((0.01, 0.005), (0.015, 0.0), (0.02, 0.005), (0.015, 0.01)))])
    s, who = _hit(t, 0.0, 0.005, 0.02, 0.0)
    assert who == 0 and s == pytest.approx(0.5, abs=1e-15)


def test_first_hit_on_a_sphere_is_exact():
    cz, radius = 0.02, 0.0073
    t = _table([Arc(cz, (0.0, radius), (0.0, math.pi))])
    r = 0.0041
    s, who = _hit(t, 0.001, r, 0.02, 0.0)
    z_hit = cz - math.sqrt(radius**2 - r**2)  # the circle's chord at height r
    assert who == 0
    assert abs(0.001 + s * 0.02 - z_hit) < 1e-12 * radius
    # oblique segment: the hit point lies on the circle to round-off
    s, _ = _hit(t, 0.003, 0.019, 0.02, -0.017)
    zh, rh = 0.003 + s * 0.02, 0.019 - s * 0.017
    assert abs(math.hypot(zh - cz, rh) - radius) < 1e-12 * radius


def test_first_hit_inner_surface_and_radial_edge_of_a_shell_sector():
    cz = 0.02
    t = _table([Arc(cz, (0.005, 0.006), (0.0, math.pi / 2))])
    # from inside the hollow, outward along r at z = cz + 1 mm: inner sphere at sqrt(25 - 1) mm
    s, who = _hit(t, cz + 0.001, 0.0, 0.0, 0.01)
    assert who == 0 and abs(s * 0.01 - math.sqrt(0.005**2 - 0.001**2)) < 1e-15
    # along z at r = 5.5 mm from behind the sector: the radial edge at 90 deg is the plane z = cz
    s, who = _hit(t, 0.01, 0.0055, 0.02, 0.0)
    assert who == 0 and abs(0.01 + s * 0.02 - cz) < 1e-15


def test_first_hit_reports_the_nearest_of_two_electrodes():
    t = _table([Rect((0.03, 0.035), (0.0, 0.01))], [Rect((0.02, 0.025), (0.0, 0.01))])
    s, who = _hit(t, 0.005, 0.002, 0.03, 0.0)
    assert who == 1 and s == pytest.approx(0.5, abs=1e-15)


# ------------------------------------------------------------------------------- rasterizing


def _grid(domain):
    return Grid.from_domain(domain)


def test_nodes_follow_the_shapes():
    t = _table([Rect((0.01, 0.0205), (0.0, 0.0084))], [Arc(0.03, (0.0, 0.0052), (0.0, math.pi))])
    g = _grid(AXIAL)
    ras = rasterize(t, g)
    for iz, z in enumerate(g.z):
        for ir, r in enumerate(g.r):
            assert ras.owner[iz, ir] == _at(t, z, r)  # no node lies within SNAP of a surface here


def test_arms_near_a_sphere_are_exact():
    cz, radius = 0.0203, 0.00737
    t = _table([Arc(cz, (0.0, radius), (0.0, math.pi))])
    g = _grid(AXIAL)
    ras = rasterize(t, g)
    checked = 0
    for iz, z in enumerate(g.z):
        for ir, r in enumerate(g.r):
            if ras.owner[iz, ir] >= 0:
                continue
            for k, (ez, er, h) in enumerate(((1, 0, g.hz), (-1, 0, g.hz), (0, 1, g.hr), (0, -1, g.hr))):
                a = ras.arm[iz, ir, k]
                if ras.arm_owner[iz, ir, k] == 0 and a < 1.0:
                    zh, rh = z + ez * a * h, abs(r + er * a * h)
                    assert abs(math.hypot(zh - cz, rh) - radius) < 1e-12 * radius
                    if ez:  # along z the crossing is cz -+ sqrt(R^2 - r^2)
                        expected = abs(cz - ez * math.sqrt(radius**2 - r**2) - z) / h
                        assert abs(a - expected) < 1e-12
                    checked += 1
    assert checked >= 25  # about one arm per grid line crossing the half circle


def test_thin_plate_between_nodes_is_seen_by_arms_and_cells():
    # plate 0.3 .. 0.5 of a cell past the node at z = 10 mm, from r = 2 mm to 8.5 mm
    g = _grid(AXIAL)
    t = _table([Rect((0.0103, 0.0105), (0.002, 0.0085))])
    ras = rasterize(t, g)
    assert (ras.owner == -1).all()
    for ir in range(2, 9):
        assert ras.arm[10, ir, 0] == pytest.approx(0.3, abs=1e-12) and ras.arm_owner[10, ir, 0] == 0
        assert ras.arm[11, ir, 1] == pytest.approx(0.5, abs=1e-12) and ras.arm_owner[11, ir, 1] == 0
        assert ras.cell[10, ir] == -2
    assert ras.arm[10, 9, 0] == 1.0 and ras.arm_owner[10, 9, 0] == -1  # above the plate
    assert ras.cell[10, 8] == -2  # the plate's top edge is inside this cell
    assert ras.cell[5, 5] == -1 and ras.cell[10, 12] == -1


def test_small_ball_on_the_axis_between_two_nodes():
    g = _grid(AXIAL)
    cz, radius = 0.0155, 0.0002  # centre half-way between the nodes at 15 and 16 mm
    t = _table([Arc(cz, (0.0, radius), (0.0, math.pi))])
    ras = rasterize(t, g)
    assert (ras.owner == -1).all()
    assert ras.arm[15, 0, 0] == pytest.approx((cz - radius - 0.015) / g.hz, abs=1e-12)
    assert ras.arm[16, 0, 1] == pytest.approx((0.016 - cz - radius) / g.hz, abs=1e-12)
    assert ras.cell[15, 0] == -2
    assert ras.cell[14, 0] == -1 and ras.cell[15, 1] == -1


def test_small_disc_on_a_node_row_marks_both_cells():
    # planar, full y range: a disc of radius 0.1 mm centred between the nodes z = 10 and 11 mm on y = 0
    g = _grid(FULL_Y)
    t = _table([Arc(0.0105, (0.0, 0.0001), (-math.pi, math.pi))], domain=FULL_Y)
    ras = rasterize(t, g)
    assert g.r[20] == 0.0
    assert ras.cell[10, 19] == -2 and ras.cell[10, 20] == -2
    assert (ras.cell == -2).sum() == 2
    assert ras.arm[10, 20, 0] == pytest.approx(0.4, abs=1e-12) and ras.arm[11, 20, 1] == pytest.approx(0.4, abs=1e-12)
    assert (ras.arm[:, 19] == 1.0).all() and (ras.arm[:, 21] == 1.0).all()


def test_nodes_within_snap_distance_become_conductor():
    g = _grid(AXIAL)
    near = 0.01 - 0.3 * SNAP * g.hz  # face 0.3 SNAP short of the node at z = 10 mm
    far = 0.01 - 1e-3 * g.hz  # face 1e-3 of a spacing short of it
    t_near = _table([Rect((0.005, near), (0.0, 0.01))])
    t_far = _table([Rect((0.005, far), (0.0, 0.01))])
    assert rasterize(t_near, g).owner[10, 3] == 0
    ras = rasterize(t_far, g)
    assert ras.owner[10, 3] == -1
    assert ras.arm[10, 3, 1] == pytest.approx(1e-3, rel=1e-9) and ras.arm_owner[10, 3, 1] == 0


def test_arm_conventions_and_mirror():
    t = _table([Rect((0.01, 0.0205), (0.0, 0.0084))], [Arc(0.03, (0.0032, 0.0052), (0.0, math.pi))])
    g = _grid(AXIAL)
    ras = rasterize(t, g)
    steps = ((1, 0), (-1, 0), (0, 1), (0, -1))
    for iz in range(g.nz):
        for ir in range(g.nr):
            if ras.owner[iz, ir] >= 0:
                continue
            for k, (ez, er) in enumerate(steps):
                jz, jr = iz + ez, ir + er
                if not (0 <= jz < g.nz and 0 <= jr < g.nr):
                    continue
                a, who = ras.arm[iz, ir, k], ras.arm_owner[iz, ir, k]
                assert SNAP <= a <= 1.0
                if who < 0:  # ends on a free neighbour
                    assert a == 1.0 and ras.owner[jz, jr] == -1
                elif a == 1.0:  # ends on a conductor node
                    assert ras.owner[jz, jr] == who
    np.testing.assert_array_equal(ras.arm[:, 0, 3], ras.arm[:, 0, 2])
    np.testing.assert_array_equal(ras.arm_owner[:, 0, 3], ras.arm_owner[:, 0, 2])
    # in the hollow of the shell (inner radius 3.2 mm about z = 30 mm) the axis arms end on the inner sphere
    assert ras.owner[30, 0] == -1 and ras.arm_owner[30, 0, 0] == -1
    assert ras.arm[33, 0, 0] == pytest.approx(0.2, abs=1e-12) and ras.arm_owner[33, 0, 0] == 1
    assert ras.arm[27, 0, 1] == pytest.approx(0.2, abs=1e-12) and ras.arm_owner[27, 0, 1] == 1
    assert ras.arm[30, 3, 2] == pytest.approx(0.2, abs=1e-12) and ras.arm_owner[30, 3, 2] == 1


def test_cells_wholly_inside_carry_the_electrode():
    t = _table([Rect((0.01, 0.02), (0.0, 0.008))])
    ras = rasterize(t, _grid(AXIAL))
    assert (ras.cell[11:19, 0:7] == 0).all()  # the r = 0 side lies on the axis and is no surface
    assert (ras.cell[10, 0:8] == -2).all() and (ras.cell[19, 0:8] == -2).all()


shape_strategy = st.one_of(
    st.tuples(st.just("rect"), st.floats(0.001, 0.035), st.floats(0.0, 0.015),
              st.floats(0.00005, 0.004), st.floats(0.00005, 0.004)),
    st.tuples(st.just("ball"), st.floats(0.002, 0.038), st.floats(0.0, 0.0), st.floats(0.00005, 0.003),
              st.floats(0.0, 0.0)),
    st.tuples(st.just("shell"), st.floats(0.005, 0.035), st.floats(0.0, math.pi / 2), st.floats(0.001, 0.004),
              st.floats(0.00005, 0.002)),
    st.tuples(st.just("dart"), st.floats(0.001, 0.03), st.floats(0.0, 0.012), st.floats(0.0002, 0.008),
              st.floats(0.0002, 0.007)),
)


def _make(spec):
    name, a, b, c, d = spec
    if name == "rect":
        return Rect((a, a + c), (b, b + d))
    if name == "ball":
        return Arc(a, (0.0, c), (0.0, math.pi))
    if name == "dart":  # concave: an arrowhead pointing to +z with its notch at the back
        return Polygon(((a, b), (a + c, b + d / 2), (a, b + d), (a + c / 3, b + d / 2)))
    return Arc(a, (c, c + d), (b, b + math.pi / 3))


def _random_inside(shape, rng, n):
    """Points of the shape, and points on its outer boundary."""
    if isinstance(shape, Rect):
        (z0, z1), (r0, r1) = shape.z_m, shape.r_m
        u = rng.uniform(0, 1, (3, n))
        return np.vstack((np.column_stack((z0 + u[0] * (z1 - z0), r0 + u[1] * (r1 - r0))),
                          np.column_stack((z0 + u[2] * (z1 - z0), np.full(n, r1))),
                          np.column_stack((np.full(n, z1), r0 + u[2] * (r1 - r0)))))
    if isinstance(shape, Polygon):
        p = np.array(shape.points_m)
        # the dart is the union of two triangles fanned from its notch vertex 3
        tri = [p[[3, 0, 1]], p[[3, 1, 2]]]
        out = []
        for t in tri:
            u, v = rng.uniform(0, 1, (2, n))
            flip = u + v > 1
            u[flip], v[flip] = 1 - u[flip], 1 - v[flip]
            out.append(t[0] + u[:, None] * (t[1] - t[0]) + v[:, None] * (t[2] - t[0]))
            w = rng.uniform(0, 1, (n, 1))  # on the outer edges 0-1 and 1-2
            out.append(t[1] + w * (t[2] - t[1]))
        return np.vstack(out)
    rho = shape.radii_m[0] + (shape.radii_m[1] - shape.radii_m[0]) * rng.uniform(0, 1, n)
    rho[: n // 4] = shape.radii_m[1]  # on the outer surface
    theta = rng.uniform(*shape.angles_rad, n)
    return np.column_stack((shape.center_z_m + rho * np.cos(theta), rho * np.sin(theta)))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(shape_strategy, min_size=1, max_size=3), st.integers(0, 2**31))
def test_cell_map_is_conservative(specs, seed):
    """Points in or on a shape never fall in a cell marked free; k-cells lie inside electrode k."""
    shapes = [_make(s) for s in specs]
    g = _grid(AXIAL)
    t = _table(shapes, voltages=[1.0])
    ras = rasterize(t, g)
    rng = np.random.default_rng(seed)
    for shape in shapes:
        for z, r in _random_inside(shape, rng, 100):
            if not (g.z0 <= z <= g.z1 and g.r0 <= r <= g.r1):
                continue
            iz, _ = locate(z, g.z0, g.hz, g.nz)
            ir, _ = locate(r, g.r0, g.hr, g.nr)
            assert ras.cell[iz, ir] != -1
    full = np.argwhere(ras.cell == 0)
    for iz, ir in full[:: max(1, len(full) // 50)]:
        z, r = g.z[iz] + g.hz * rng.uniform(0, 1), g.r[ir] + g.hr * rng.uniform(0, 1)
        assert _at(t, z, r) == 0


# ------------------------------------------------------------------------------- the table


def test_rects_become_four_vertex_polygons_and_names_are_kept():
    t = _table([Rect((0.01, 0.02), (0.0, 0.008)), Arc(0.03, (0.0, 0.002), (0.0, math.pi))])
    assert list(t.kind) == [0, 1] and list(t.count) == [4, 0] and t.points.shape == (4, 2)
    assert t.names == ("e0",)
    np.testing.assert_allclose(t.sector[1], [0.03, 0.0, 0.002, 0.0, math.pi, 0.0])
    assert len(t.arrays()) == 7


def test_shapes_are_clipped_to_the_domain():
    t = _table([Rect((0.03, 0.06), (0.005, 0.03))])
    zlo, zhi, rlo, rhi = t.bbox[0]
    assert zhi == pytest.approx(0.04, abs=1e-9) and rhi == pytest.approx(0.02, abs=1e-9)
    assert _at(t, 0.035, 0.01) == 0 and _at(t, 0.045, 0.01) == -1
    # the face at z = 60 mm lies outside the domain and is not a surface
    assert _hit(t, 0.05, 0.01, 0.02, 0.0) == (2.0, -1)
    ras = rasterize(t, _grid(AXIAL))
    assert (ras.owner[30:, 5:] == 0).all() and (ras.owner[:30] == -1).all()


def test_shape_wholly_outside_names_its_key():
    with pytest.raises(ConfigError) as err:
        _table([Rect((0.01, 0.02), (0.0, 0.008))], [Rect((0.0, 0.01), (0.0, 0.01)), Rect((0.05, 0.06), (0.0, 0.01))])
    assert err.value.key == "electrode[1].rect[1]"
    # the shell's box overlaps the domain but the shell passes beyond its far corner (18 mm < 20 mm)
    d = Domain("axial", (0.0, 0.01), (0.0, 0.01), 1e-3, ("ground", "ground", "axis", "ground"))
    with pytest.raises(ConfigError) as err:
        _table([Arc(-0.005, (0.02, 0.021), (0.0, math.pi))], domain=d)
    assert err.value.key == "electrode[0].arc[0]" and "outside" in err.value.message


def test_overlap_at_different_voltages_is_refused():
    a = Rect((0.01, 0.02), (0.0, 0.008))
    with pytest.raises(ConfigError) as err:
        _table([a], [Rect((0.015, 0.025), (0.005, 0.01))], voltages=[100.0, 0.0])
    assert "e0" in str(err.value) and "e1" in str(err.value)
    assert err.value.key == "electrode[1].rect[0]"
    with pytest.raises(ConfigError):
        _table([a], [Arc(0.022, (0.0, 0.003), (0.0, math.pi))], voltages=[100.0, 0.0])


def test_touching_or_equal_voltage_shapes_are_accepted():
    a = Rect((0.01, 0.02), (0.0, 0.008))
    _table([a], [Rect((0.015, 0.025), (0.005, 0.01))], voltages=[5.0, 5.0])  # same voltage
    _table([a], [Rect((0.02, 0.03), (0.0, 0.008))], voltages=[5.0, 0.0])  # shares a face
    tri_a = Polygon(((0.01, 0.0), (0.02, 0.0), (0.02, 0.01)))
    tri_b = Polygon(((0.01, 0.0), (0.02, 0.01), (0.01, 0.01)))
    _table([tri_a], [tri_b], voltages=[5.0, 0.0])  # share the diagonal


def test_raster_integers_are_stored_compactly():
    """The Raster keeps its electrode indices in the smallest signed dtype that holds them, and an
    int64 Raster (as older map files hold) becomes the same compact Raster."""
    table = _table([Rect((0.01, 0.02), (0.0, 0.005))], [Arc(0.03, (0.0, 0.004), (0.0, math.pi))])
    grid = Grid.from_domain(AXIAL)
    raster = rasterize(table, grid)
    for a in (raster.owner, raster.arm_owner, raster.cell):
        assert a.dtype == np.int8
    assert raster.arm.dtype == np.float64
    wide = Raster(owner=raster.owner.astype(np.int64), arm=raster.arm, arm_owner=raster.arm_owner.astype(np.int64),
                  cell=raster.cell.astype(np.int64))
    for name in ("owner", "arm_owner", "cell"):
        assert getattr(wide, name).dtype == np.int8
        np.testing.assert_array_equal(getattr(wide, name), getattr(raster, name))
    assert index_dtype(127) == np.int8 and index_dtype(128) == np.int16 and index_dtype(40_000) == np.int32
