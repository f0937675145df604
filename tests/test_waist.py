"""The best focus of rays continued in straight lines (tracer.stats.straight_waist and
straight_d50_waist) against the closed form of a round Gaussian beam's waist."""

import math

import numpy as np
import pytest

from tracer.stats import straight_d50_waist, straight_waist

SIGMA_M = 1e-4            # the waist's standard deviation per transverse axis
SLOPE_RAD = 2e-3          # the slopes' standard deviation per axis (uncorrelated with the positions)
BEYOND_M = 0.05           # the waist lies this far beyond the plane the rays are given in
DEPTH_M = SIGMA_M / SLOPE_RAD


def gaussian_beam(seed, centre=(0.0, 0.0), tilt=(0.0, 0.0), n=50_000):
    """Positions and slopes at a plane BEYOND_M before the waist of a round Gaussian beam, its
    centroid at ``centre`` there and moving with ``tilt``."""
    rng = np.random.default_rng(seed)
    x0, y0 = rng.normal(0.0, SIGMA_M, (2, n))
    xs, ys = rng.normal(0.0, SLOPE_RAD, (2, n)) + np.array(tilt)[:, None]
    return x0 - xs * BEYOND_M + centre[0], y0 - ys * BEYOND_M + centre[1], xs, ys


@pytest.mark.parametrize("centre, tilt, weighted", [((0.0, 0.0), (0.0, 0.0), False),
                                                    ((3e-3, -1e-3), (0.01, -0.02), False),
                                                    ((3e-3, -1e-3), (0.01, -0.02), True)])
def test_the_waist_of_a_gaussian_beam(centre, tilt, weighted):
    """Each transverse axis of a Gaussian beam has sigma(u)^2 = sigma0^2 + sigma'^2 u^2 at a distance
    u from its waist, so its radius about the centroid is Rayleigh distributed: rms radius sqrt(2)
    sigma, median radius sigma sqrt(2 ln 2) (the Rayleigh distribution's median, common practice).
    The waist is smallest at u = 0, with rms radius sqrt(2) sigma0 and d50 = 2 sqrt(2 ln 2) sigma0,
    wherever the centroid is and however it moves (the figures are about the moving centroid);
    rays weighed by currents drawn independently of their positions have the same waist."""
    x, y, xs, ys = gaussian_beam(7, centre, tilt)
    weights = np.random.default_rng(8).uniform(0.5, 1.5, len(x)) if weighted else None
    s, rms = straight_waist(x, y, xs, ys, weights)
    assert s == pytest.approx(BEYOND_M, abs=0.02 * DEPTH_M)
    assert rms == pytest.approx(math.sqrt(2) * SIGMA_M, rel=0.01)
    s, d50 = straight_d50_waist(x, y, xs, ys, weights)
    assert s == pytest.approx(BEYOND_M, abs=0.05 * DEPTH_M)      # d50 is flat about its waist
    assert d50 == pytest.approx(2 * math.sqrt(2 * math.log(2)) * SIGMA_M, rel=0.01)


def test_a_waist_outside_the_window_is_not_reported():
    x, y, xs, ys = gaussian_beam(9)
    assert all(math.isnan(v) for v in straight_d50_waist(x, y, xs, ys, window=(-1.0, 0.5 * BEYOND_M)))
    s, _ = straight_d50_waist(x, y, xs, ys, window=(0.0, 2 * BEYOND_M))
    assert s == pytest.approx(BEYOND_M, abs=0.05 * DEPTH_M)
