"""The full width at half maximum (tracer.stats.fwhm, docs/reference.md "Widths") against the widths
of known distributions, and where the beam figures take it from."""

import math

import numpy as np
import pytest
from scipy import optimize, stats

from tracer.stats import FWHM_LEAST, fwhm, weighted_quantile

from test_measure import PROTON, disc, rows_from, started
from tracer.measure import plane_stats

GAUSS = 2 * math.sqrt(2 * math.log(2))
"""FWHM of a normal distribution in standard deviations (analytic)."""

N = 20_001
EVEN = (np.arange(N) + 0.5) / N
"""Evenly spread probabilities: a distribution's quantiles at them are a sample without noise."""


def silverman(x):
    """Silverman's rule-of-thumb bandwidth, 0.9 min(sigma, IQR / 1.34) n^(-1/5) (Silverman 1986,
    eq. 3.31)."""
    q1, q3 = np.quantile(x, [0.25, 0.75])
    return 0.9 * min(np.std(x), (q3 - q1) / 1.34) * len(x) ** -0.2


def test_normal_distribution():
    """2 sqrt(2 ln 2) sigma (analytic), read through the Gaussian kernel: a normal distribution
    convolved with a Gaussian kernel of width h is normal with variance sigma^2 + h^2 (plus h^2/192
    from binning to a lattice of h/4: the variance of a uniform bin, common practice)."""
    x = stats.norm.ppf(EVEN, scale=3e-4)
    h = silverman(x)
    assert fwhm(x) == pytest.approx(GAUSS * math.sqrt(np.var(x) + h * h * (1 + 1 / 192)), rel=1e-3)
    assert fwhm(x) == pytest.approx(GAUSS * 3e-4, rel=0.01)


def test_random_normal_samples_scatter_about_the_width():
    """Normal samples of 40,000 (scipy's generator): the widths of ten samples average to
    2 sqrt(2 ln 2) sigma within 1 % and each lies within 5 % of it (the scatter measured is 1.3 %)."""
    rng = np.random.default_rng(11)
    widths = np.array([fwhm(rng.normal(5.0, 2.0, 40_000)) for _ in range(10)]) / (GAUSS * 2.0)
    assert np.mean(widths) == pytest.approx(1.0, abs=0.01)
    assert np.all(np.abs(widths - 1) < 0.05)


def test_uniform_distribution():
    """A uniform distribution on [-a, a] has FWHM 2a (analytic; its density is flat to the edge,
    and a symmetric kernel halves a sharp edge where it stands).  The span of its central 76.1 %
    would read 1.52 a."""
    assert fwhm(stats.uniform.ppf(EVEN, -2.0, 4.0)) == pytest.approx(4.0, rel=1e-3)


def test_projected_uniform_disc():
    """The x profile of a uniformly filled disc of radius R is a semicircle, 2 sqrt(R^2 - x^2) / (pi
    R^2), at half its peak at |x| = R sqrt(3) / 2: FWHM = sqrt(3) R (analytic).  The kernel lowers
    the curved shoulders more than the top (1.2 % here)."""
    x, y = disc(N, 1.0)
    for u in (x, y):
        assert fwhm(u) == pytest.approx(math.sqrt(3), rel=0.02)


def test_triangular_distribution():
    """The triangular density on [-1, 1] with its peak at 0 falls to half at +-1/2: FWHM 1
    (analytic).  The Gaussian kernel lowers the sharp peak by h E|Z| = h sqrt(2/pi) (the mean of
    |Z| for a standard normal Z) and leaves the straight flanks, so the width reads
    1 + h sqrt(2/pi)."""
    x = stats.triang.ppf(EVEN, 0.5, -1.0, 2.0)
    assert fwhm(x) == pytest.approx(1 + silverman(x) * math.sqrt(2 / math.pi), rel=3e-3)
    assert fwhm(x) == pytest.approx(1.0, rel=0.05)


def test_core_with_a_wide_halo():
    """80 % of the rays in a normal core (sigma 1) and 20 % in a halo ten times wider: the mixture's
    density falls to half its peak at the x solving 0.8 phi(x) + 0.02 phi(x / 10) = half the value
    at 0 (scipy.optimize.brentq on scipy.stats.norm's density), 2.40, near the core's 2.35 and far
    from 2 sqrt(2 ln 2) times the mixture's sigma (10.8)."""

    def density(x):
        return 0.8 * stats.norm.pdf(x) + 0.2 * stats.norm.pdf(x, scale=10.0)

    width = 2 * optimize.brentq(lambda x: density(x) - density(0) / 2, 0, 10)
    rng = np.random.default_rng(4)
    x = rng.normal(0, 1, 100_000)
    x[rng.random(len(x)) < 0.2] *= 10.0
    assert fwhm(x) == pytest.approx(width, rel=0.03)
    assert fwhm(x) < 0.3 * GAUSS * np.std(x)


def test_far_stragglers_change_nothing():
    """A few rays far out (1e9 and 1e12 widths away) leave the width of the rest as it was: gaps
    wider than the kernel are closed up, so the lattice keeps its step."""
    x = stats.norm.ppf(EVEN)
    wide = np.concatenate([x, [1e9, -1e12, 3e9]])
    assert fwhm(wide) == pytest.approx(fwhm(x), rel=0.01)


def test_few_values_and_degenerate_ones():
    """Fewer than ten values (of non-zero weight) give NaN, not a width from a handful; values all
    equal give 0; values not finite are left out."""
    rng = np.random.default_rng(2)
    x = rng.normal(0, 1, FWHM_LEAST)
    assert FWHM_LEAST == 10
    assert math.isnan(fwhm(x[:-1])) and math.isnan(fwhm(np.zeros(0)))
    assert math.isfinite(fwhm(x)) and fwhm(x) > 0
    assert math.isnan(fwhm(x, weights=np.r_[np.ones(9), 0.0]))
    assert fwhm(np.full(50, 2.5)) == 0.0
    # values that differ by round-off only (a few units in the last place) are equal; a spread of
    # 1e-11 of their magnitude is a width
    ulps = 3.3e-7 + np.spacing(3.3e-7) * rng.integers(-8, 9, 50)
    assert np.ptp(ulps) > 0 and fwhm(ulps) == 0.0
    assert fwhm(3.3e-7 * (1.0 + 1e-11 * rng.normal(0, 1, 50))) > 0.0
    assert fwhm(np.r_[x, np.nan, np.inf]) == fwhm(x)


def test_weights_are_currents():
    """Weights count as many rays: a narrow population carrying the current and a wide one carrying
    a trace of it reads the narrow one's width (2 sqrt(2 ln 2) sigma, analytic); unweighted, the
    two populations of equal counts read wider."""
    narrow = stats.norm.ppf(EVEN)
    wide = stats.norm.ppf(EVEN, scale=4.0)
    x = np.r_[narrow, wide]
    w = np.r_[np.ones(N), np.full(N, 1e-6)]
    assert fwhm(x, w) == pytest.approx(GAUSS, rel=0.01)
    assert fwhm(x) > 1.1 * GAUSS


def test_weighted_quantile():
    """Equal weights give numpy's quantile with Hazen's plotting positions (numpy.quantile
    method="hazen"); a weight of 3 counts as three copies of the value."""
    rng = np.random.default_rng(8)
    a = rng.normal(0, 1, 101)
    q = [0.1, 0.25, 0.5, 0.75, 0.9]
    assert weighted_quantile(a, np.ones(101), q) == pytest.approx(np.quantile(a, q, method="hazen"))
    b = np.array([1.0, 2.0, 3.0])
    assert weighted_quantile(b, np.array([1.0, 3.0, 1.0]), 0.5) == pytest.approx(
        np.quantile([1.0, 2.0, 2.0, 2.0, 3.0], 0.5, method="hazen"))


def test_spot_and_arrival_widths_at_a_plane():
    """At a plane: a uniformly filled disc spot of radius R reads sqrt(3) R across x and y (the
    span of the central 76.1 % read 1.29 R); arrival times uniform over [t0 - a, t0 + a] read 2a,
    and the resolving power is t0 / (2 * 2a) (common practice, t / (2 dt_FWHM))."""
    n = 20_000
    x, y = disc(n, 1e-3)
    rows = rows_from(x, y, 0 * x, 0 * y, 100.0)
    rows["time_s"] = 5e-6 + stats.uniform.ppf((np.arange(n) + 0.5) / n, -2e-9, 4e-9)[np.random.default_rng(
        1).permutation(n)]
    s = plane_stats(rows, PROTON, started(n))
    assert s.fwhm_x_m == pytest.approx(math.sqrt(3) * 1e-3, rel=0.02)
    assert s.fwhm_y_m == pytest.approx(math.sqrt(3) * 1e-3, rel=0.02)
    assert s.time_fwhm_s == pytest.approx(4e-9, rel=1e-3)
    assert s.resolving_power == pytest.approx(5e-6 / 8e-9, rel=1e-3)


def test_plane_widths_follow_the_current():
    """With currents the plane's widths weigh each ray by its current (the d50/d90 rule): rays
    carrying a trace of the current, spread 4 times wider in x and in arrival time, do not widen
    them (2 sqrt(2 ln 2) sigma of the others, analytic)."""
    n = N
    core, halo = stats.norm.ppf(EVEN, scale=1e-4), stats.norm.ppf(EVEN, scale=4e-4)
    order = np.random.default_rng(3).permutation(n)
    x = np.r_[core, halo]
    y = np.r_[core[order], halo[order]]
    rows = rows_from(x, y, 0 * x, 0 * y, 100.0, time_s=1e-6 + x * 1e-5)
    current = np.r_[np.full(n, 1e-6), np.full(n, 1e-13)]
    s = plane_stats(rows, PROTON, started(2 * n, weight_A=current))
    assert s.fwhm_x_m == pytest.approx(GAUSS * 1e-4, rel=0.01)
    assert s.fwhm_y_m == pytest.approx(GAUSS * 1e-4, rel=0.01)
    assert s.time_fwhm_s == pytest.approx(GAUSS * 1e-9, rel=0.01)
    bare = plane_stats(rows, PROTON, started(2 * n))
    assert bare.fwhm_x_m > 1.1 * GAUSS * 1e-4
