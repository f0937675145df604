"""The node grid: extents, spacing, coarsening and cell location (all facts analytic)."""

import math

import numpy as np
import pytest

from tracer.config import Domain
from tracer.grid import Grid, locate


def _domain(z=(0.0, 0.1), r=(0.0, 0.03), cell=1e-3, edges=("ground", "open", "axis", "ground")):
    return Domain("axial", z, r, cell, edges)


def test_from_domain_cells_and_spacing():
    g = Grid.from_domain(_domain(z=(0.01, 0.1), r=(0.0, 0.0304), cell=1e-3))
    assert g.cells == (90, 30)  # round(90.0), round(30.4)
    assert g.shape == (91, 31)
    assert g.hz == pytest.approx(0.09 / 90, rel=1e-15, abs=0)
    assert g.hr == pytest.approx(0.0304 / 30, rel=1e-15, abs=0)
    assert g.z1 == pytest.approx(0.1, rel=1e-15, abs=0)
    assert g.r1 == pytest.approx(0.0304, rel=1e-15, abs=0)
    assert g.z[0] == 0.01 and g.z.shape == (91,)
    assert g.r[-1] == pytest.approx(0.0304, rel=1e-15, abs=0) and g.r.shape == (31,)
    assert g.mirror and g.symmetry == "axial"
    assert g.edges == ("ground", "open", "axis", "ground")


def test_from_domain_keeps_at_least_two_cells():
    g = Grid.from_domain(_domain(z=(0.0, 1.0), r=(0.0, 0.7), cell=1.0))
    assert g.cells == (2, 2)
    assert g.hz == 0.5 and g.hr == pytest.approx(0.35)


def test_planar_full_range_is_not_mirrored():
    d = Domain("planar", (0.0, 0.02), (-0.01, 0.01), 1e-3, ("ground", "ground", "ground", "ground"))
    g = Grid.from_domain(d)
    assert not g.mirror
    assert g.r0 == -0.01 and g.r1 == pytest.approx(0.01, rel=1e-15, abs=0)
    assert g.cells == (20, 20)


@pytest.mark.parametrize("cells", [(90, 30), (91, 31), (3, 2), (2, 2)])
def test_coarsen_halves_cells_over_the_same_extent(cells):
    edges = ("ground", "ground", "axis", "open")
    g = Grid("axial", True, 0.01, 0.0, 0.09 / cells[0], 0.03 / cells[1], cells[0] + 1, cells[1] + 1, edges)
    c = g.coarsen()
    assert c.cells == (math.ceil(cells[0] / 2), math.ceil(cells[1] / 2))
    assert c.z0 == g.z0 and c.r0 == g.r0
    assert c.z1 == pytest.approx(g.z1, rel=1e-14, abs=0)
    assert c.r1 == pytest.approx(g.r1, rel=1e-14, abs=0)
    assert (c.symmetry, c.mirror, c.edges) == (g.symmetry, g.mirror, g.edges)


def test_locate_interior_points_and_clamping():
    # node i at x0 + i h; cell i spans [x_i, x_{i+1}]
    assert locate(0.35, 0.0, 0.1, 11) == (3, pytest.approx(0.5))
    assert locate(-1.0, 0.0, 0.1, 11) == (0, 0.0)
    assert locate(5.0, 0.0, 0.1, 11) == (9, 1.0)
    i, t = locate(1.0, 0.0, 0.1, 11)  # the last node belongs to the last cell
    assert i == 9 and t == pytest.approx(1.0)


def test_index_matches_locate_for_arrays():
    g = Grid.from_domain(_domain())
    rng = np.random.default_rng(3)
    z = rng.uniform(-0.01, 0.11, size=(7, 5))
    r = rng.uniform(-0.001, 0.031, size=(7, 5))
    iz, tz, ir, tr = g.index(z, r)
    assert iz.shape == (7, 5) and tr.shape == (7, 5)
    for k in np.ndindex(z.shape):
        assert (iz[k], tz[k]) == locate(z[k], g.z0, g.hz, g.nz)
        assert (ir[k], tr[k]) == locate(r[k], g.r0, g.hr, g.nr)
    inside = (z >= g.z0) & (z <= g.z1)
    np.testing.assert_allclose((g.z0 + (iz + tz) * g.hz)[inside], z[inside], rtol=0, atol=1e-15)
    assert iz.min() >= 0 and iz.max() <= g.nz - 2 and tz.min() >= 0 and tz.max() <= 1
