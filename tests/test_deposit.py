"""Charge deposition: node volumes, time weighting, a uniform beam's density."""

import math

import numpy as np
import pytest

from tracer.deposit import charge_density, node_volumes
from tracer.grid import Grid


def grid(symmetry, nz=21, nr=11, h=1e-3):
    return Grid(symmetry=symmetry, mirror=True, z0=0.0, r0=0.0, hz=h, hr=h, nz=nz, nr=nr,
                edges=("ground", "ground", "axis", "ground"))


@pytest.mark.parametrize("symmetry", ["axial", "planar"])
def test_volumes_fill_the_domain(symmetry):
    # the node volumes tile the domain: pi R^2 L (axial) or L H per unit length (planar)
    g = grid(symmetry)
    length, top = g.z1 - g.z0, g.r1
    whole = math.pi * top**2 * length if symmetry == "axial" else length * top
    assert node_volumes(g).sum() == pytest.approx(whole, rel=1e-12, abs=0)


def test_axis_volume_is_the_linear_weight_of_the_half_cell():
    # 2 pi integral_0^h (1 - r / h) r dr = pi h^2 / 3 (common practice for linear weighting)
    g = grid("axial")
    assert node_volumes(g)[5, 0] == pytest.approx(math.pi * g.hr**2 * g.hz / 3, rel=1e-12, abs=0)
    assert node_volumes(g)[5, 4] == pytest.approx(2 * math.pi * g.r[4] * g.hr * g.hz, rel=1e-12, abs=0)


def straight_rays(radii, z0, z1, speed, points=15):
    """Rays along z at fixed radii, at constant speed, as (z, r, t) paths."""
    z = np.linspace(z0, z1, points)
    t = (z - z0) / speed
    return [np.column_stack([z, np.full(points, r), t]) for r in radii]


def test_deposited_charge_is_current_times_transit_time():
    # each path leaves I times its flight time inside the grid (charge conservation)
    g = grid("axial")
    rng = np.random.default_rng(3)
    paths = straight_rays(rng.uniform(0, 9e-3, 12), 1e-3, 19e-3, 2e6)
    current = rng.uniform(0.1, 1.0, 12)
    q = (charge_density(g, paths, current) * node_volumes(g)).sum()
    assert q == pytest.approx((current * 18e-3 / 2e6).sum(), rel=1e-12, abs=0)


def test_uniform_round_beam_density_including_the_axis():
    # a uniform beam of current I and radius R at speed v has rho = I / (pi R^2 v) (continuity,
    # common practice); rays on rings of equal area sample it
    g = grid("axial", nr=21, h=0.5e-3)
    n, radius, speed, current = 4000, 8e-3, 1e6, 2.0
    radii = radius * np.sqrt((np.arange(n) + 0.5) / n)
    rho = charge_density(g, straight_rays(radii, -1e-3, 11e-3, speed), np.full(n, current / n))
    expected = current / (math.pi * radius**2 * speed)
    inside = rho[4:17, : int(radius / g.hr) - 1]
    np.testing.assert_allclose(inside, expected, rtol=0.01)
    assert rho[10, 0] == pytest.approx(expected, rel=0.01)   # the axis node


def test_planar_sheet_density():
    # a sheet of current I (per unit length) between y = 0 and H at speed v: rho = I / (H v)
    g = grid("planar", nr=21, h=0.5e-3)
    n, height, speed, current = 400, 6e-3, 1e6, 0.5
    ys = height * (np.arange(n) + 0.5) / n
    rho = charge_density(g, straight_rays(ys, -1e-3, 11e-3, speed), np.full(n, current / n))
    np.testing.assert_allclose(rho[4:17, : int(height / g.hr) - 1], current / (height * speed), rtol=0.01)


@pytest.mark.parametrize("degrees", [30.0, 45.0, 70.0])
def test_oblique_flow_gives_the_load_the_five_point_rows_are_exact_for(degrees):
    # a sheet of parallel rays along n whose density a + b x^2 changes along x = n.p (time
    # weighting: 1 / speed ~ density); the node density must equal minus the five-point Laplacian
    # of the potential V with V'' = -rho along n (the solver's rows are exact for that load,
    # common practice for finite differences of a quartic); the bilinear weights are off by
    # b h^2 (1 - n_z^4 - n_r^4) / 6 (up to 4 % here; measured within 4e-4 of the load)
    h, n_cells = 1e-3, 40
    g = Grid(symmetry="planar", mirror=False, z0=0.0, r0=0.0, hz=h, hr=h, nz=n_cells + 1, nr=n_cells + 1,
             edges=("ground",) * 4)
    n = np.array([math.cos(math.radians(degrees)), math.sin(math.radians(degrees))])
    across = np.array([-n[1], n[0]])
    centre = np.array([20 * h, 20 * h])
    a, b = 1.0, 0.5 / h**2
    spacing, current = h / 40, 1e-3
    paths = []
    for k, c in enumerate(np.arange(-15 * h, 15 * h, spacing) + 0.5 * spacing):
        s = np.arange(-30 * h, 30 * h, 0.1 * h) + (0.618 * k % 1.0) * 0.1 * h  # points staggered
        t = spacing / current * (a * s + b * s**3 / 3)   # dt/ds = rho spacing / I
        paths.append(np.column_stack([*(centre[:, None] + c * across[:, None] + s * n[:, None]), t]))
    rho = charge_density(g, paths, np.full(len(paths), current), reach_cells=100.0)

    def potential(p):
        x = (p - centre) @ n
        return -(a * x**2 / 2 + b * x**4 / 12)

    nodes = np.array([(iz, ir) for iz in range(16, 25) for ir in range(16, 25)])
    p = nodes * h
    steps = [np.array(e) * h for e in ((1, 0), (-1, 0), (0, 1), (0, -1))]
    load = -(sum(potential(p + e) for e in steps) - 4 * potential(p)) / h**2
    np.testing.assert_allclose(rho[nodes[:, 0], nodes[:, 1]], load, rtol=1e-3)
