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
    assert node_volumes(g).sum() == pytest.approx(whole, rel=1e-12)


def test_axis_volume_is_the_linear_weight_of_the_half_cell():
    # 2 pi integral_0^h (1 - r / h) r dr = pi h^2 / 3 (common practice for linear weighting)
    g = grid("axial")
    assert node_volumes(g)[5, 0] == pytest.approx(math.pi * g.hr**2 * g.hz / 3, rel=1e-12)
    assert node_volumes(g)[5, 4] == pytest.approx(2 * math.pi * g.r[4] * g.hr * g.hz, rel=1e-12)


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
    assert q == pytest.approx((current * 18e-3 / 2e6).sum(), rel=1e-12)


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
