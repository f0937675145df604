"""The statistics under the beam figures: moments, the transverse radius, the rms emittance.

Pure functions of arrays, or of the rows of a traced beam (fields ``x_m``,
``y_m``, ``px``, ``py``, ``pz``, ...); :mod:`tracer.measure` builds the figures
from them.  Moments are population moments (divided by N), or with weights (the rays' currents)
weighted ones, sum w a / sum w: a ray of twice the current counts as two rays.  Weights of no total
(None, or summing to 0) count the rays alike.  An empty selection gives NaN for every moment,
without a warning.

Emittance
---------
The rms emittance of the x-x' phase plane is the statistical (Lapostolle
1971, Sacherer 1971) value

    eps_x = sqrt(<dx^2> <dx'^2> - <dx dx'>^2),

with dx = x - <x> and dx' = x' - <x'> about the beam centroid and the slope
x' = px / pz; likewise for y.  It is zero for a beam whose slopes are a linear
function of the position (a perfectly focused or a laminar beam) and equals
sigma_x sigma_x' for an uncorrelated one.  In axial symmetry the x-x' value is
the one the trade quotes; 4 eps_x is the edge emittance of a uniformly
filled (Kapchinsky-Vladimirsky-like) beam.  The normalized emittance is
beta gamma eps, with beta gamma = <|p|> / (m c) from the mean momentum of the
rays.

Widths of a spot
----------------
The current-containing diameter d_k (d50, d90) is twice the radius about the centroid of the
smallest circle holding the share k of the beam's current (of the rays when they carry none): the
weighted lower quantile of the rays' distances from the centroid (common practice in probe-forming
optics; a uniformly filled disc of radius R has d_k = 2 R sqrt(k)).  In planar symmetry, where x
does not vary, the circle is a band |y - <y>| <= d_k / 2.

The FWHM of a distribution (:func:`fwhm`) is its full width at half maximum: the distance between
the outermost points where a smooth estimate of its density falls to half the density's peak.  The
density is a kernel density estimate (Rosenblatt 1956, Parzen 1962): a Gaussian kernel of bandwidth
h by Silverman's rule of thumb, h = 0.9 min(sigma, IQR / 1.34) n^(-1/5) (Silverman 1986, Density
Estimation, eq. 3.31; sigma and the interquartile range IQR of the values), cut at 4 h, evaluated on
a lattice of spacing h / 4 by binning the values to its nearest node (binned kernel estimation,
Silverman 1982; the binning adds h^2 / 192 to the variance); the crossings of half the peak are
interpolated linearly between lattice nodes.  Where the rays carry currents each value weighs by
its current, sigma and the IQR are weighted, and n is Kish's effective count (sum w)^2 / sum w^2
(Kish 1965).  Gaps wider than the kernel's reach are closed up in the lattice (the rays on either
side do not meet in any node), so a few far stragglers cost nothing and cannot coarsen the lattice.
The kernel widens a peak: a normal distribution of standard deviation sigma reads
2 sqrt(2 ln 2) sqrt(sigma^2 + h^2), 0.6 % wide at 40,000 rays, 1.9 % at 2,000, 4.8 % at 200, and
the estimate scatters from one set of rays to the next by a few per cent at a few thousand rays
(it reads the density at the peak and at the shoulders, not a quantile).  Exact for no shape,
it follows each: 2 sqrt(2 ln 2) sigma for a normal distribution, 2a for a uniform one on [-a, a]
(the kernel halves a sharp edge where it stands), sqrt(3) R for the projected profile of a
uniformly filled disc of radius R (half the peak at |x| = R sqrt(3) / 2), and the core's width when
a wide halo surrounds it.  Fewer than :data:`FWHM_LEAST` values (rays of non-zero current) give
NaN; values all equal give 0, and so do values whose standard deviation is below
:data:`FWHM_ROUND_OFF` of their largest magnitude: equal to round-off (rays of one energy through
a uniform field arrive at one time, to a few units in the last place).

Best focus of straight rays
---------------------------
Rays that go on in straight lines from a plane (no field beyond it) have, at a distance s further
on, the offsets dx + dx' s (about the moving centroid), so the squared rms radius is the quadratic
<dx^2 + dy^2> + 2 s <dx dx' + dy dy'> + s^2 <dx'^2 + dy'^2>, smallest at
s = -<dx dx' + dy dy'> / <dx'^2 + dy'^2> (:func:`straight_waist`).  The smallest d50 is found along
the same lines by a search (:func:`straight_d50_waist`).  A negative s is a waist behind the plane
(a virtual one, when the rays crossed a field on the way).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants, optimize


def mean(a, weights=None):
    """Mean of an array (weighted, module notes), NaN when empty."""
    if not len(a):
        return math.nan
    if weights is None or not np.sum(weights) > 0:
        return float(np.mean(a))
    return float(np.average(a, weights=weights))


def std(a, weights=None):
    """Population standard deviation (weighted, module notes), NaN when empty."""
    if weights is None or not len(a) or not np.sum(weights) > 0:
        return float(np.std(a)) if len(a) else math.nan
    return math.sqrt(mean((a - mean(a, weights)) ** 2, weights))


def extreme(a, fn):
    """``fn`` (np.min or np.max) of an array, NaN when empty."""
    return float(fn(a)) if len(a) else math.nan


def radius(rows, symmetry="axial"):
    """The transverse coordinate of the map: r = hypot(x, y) in axial symmetry, y in planar."""
    return rows["y_m"] if symmetry == "planar" else np.hypot(rows["x_m"], rows["y_m"])


def rms_emittance(u, slope, weights=None):
    """Statistical rms emittance sqrt(<du^2><du'^2> - <du du'>^2).

    Parameters
    ----------
    u : ndarray
        Transverse positions (m).
    slope : ndarray
        The slopes u' (rad) of the same rays.
    weights : ndarray, optional
        The rays' currents: weighted moments (module notes).

    Returns
    -------
    float
        The emittance in m rad, about the centroid (Lapostolle 1971,
        Sacherer 1971); NaN for no rays.
    """
    if not len(u):
        return math.nan
    du = u - mean(u, weights)
    ds = slope - mean(slope, weights)
    # <du^2><ds^2> - <du ds>^2 = <du^2> <(ds - k du)^2> with k = <du ds>/<du^2>: the
    # residual of the linear fit keeps its precision where the difference would cancel.
    var_u = mean(du * du, weights)
    if var_u == 0.0:
        return 0.0
    residual = ds - (mean(du * ds, weights) / var_u) * du
    return math.sqrt(var_u * mean(residual * residual, weights))


def beta_gamma(rows, mass_kg, weights=None):
    """<|p|> / (m c) of the rows (weighted, module notes): the factor from the rms to the normalized
    emittance; NaN for none."""
    px, py, pz = rows["px"], rows["py"], rows["pz"]
    return mean(np.sqrt(px * px + py * py + pz * pz), weights) / (mass_kg * constants.c)


FWHM_LEAST = 10
"""The fewest values (of non-zero weight) :func:`fwhm` measures; fewer give NaN."""

FWHM_ROUND_OFF = 1e-12
"""The relative spread below which :func:`fwhm` reads values as equal (0): round-off of the
integration, far below any tolerance it is run at."""

_REACH = 4.0
"""The kernel is cut at this many bandwidths."""

_NODES = 4
"""Lattice nodes per bandwidth."""


def weighted_quantile(a, weights, q):
    """Quantiles of values with weights: the linear interpolation of the sorted values at the
    midpoints of their cumulative weights (Hazen's plotting positions; the plain quantile of
    ``numpy.quantile(method="hazen")`` when the weights are equal).

    Parameters
    ----------
    a, weights : ndarray
        Values and their weights (>= 0, summing above 0).
    q : float or sequence of float
        The quantiles, in [0, 1].
    """
    order = np.argsort(a, kind="stable")
    w = weights[order]
    position = (np.cumsum(w) - 0.5 * w) / np.sum(w)
    return np.interp(q, position, a[order])


def fwhm(a, weights=None):
    """Full width at half maximum of a distribution (module notes: a kernel density estimate with
    Silverman's bandwidth, the outermost half-maximum crossings).

    Parameters
    ----------
    a : ndarray
        The values; those not finite are left out.
    weights : ndarray, optional
        The weight (current) of each value; None weighs them equally.  Values of weight 0 are
        left out.

    Returns
    -------
    float
        The width, in the values' unit; NaN for fewer than :data:`FWHM_LEAST` values, 0 when they
        are all equal (to :data:`FWHM_ROUND_OFF` of their magnitude).
    """
    a = np.asarray(a, dtype=float)
    w = np.ones(len(a)) if weights is None else np.asarray(weights, dtype=float)
    keep = np.isfinite(a) & (w > 0)
    a, w = a[keep], w[keep]
    if len(a) < FWHM_LEAST:
        return math.nan
    order = np.argsort(a, kind="stable")
    a, w = a[order], w[order] / np.sum(w)
    centre = np.sum(w * a)
    sigma = math.sqrt(np.sum(w * (a - centre) ** 2))
    if not sigma > FWHM_ROUND_OFF * np.abs(a).max():
        return 0.0
    q1, q3 = weighted_quantile(a, w, [0.25, 0.75])
    spread = min(sigma, (q3 - q1) / 1.34) if q3 > q1 else sigma
    h = 0.9 * spread * (1.0 / np.sum(w * w)) ** -0.2
    step = h / _NODES
    reach = int(_REACH * _NODES)
    # lattice positions, each gap wider than two kernels closed up to 2 reach + 1 nodes
    gaps = np.diff(a) / step
    wide = gaps > 2 * reach + 1
    closed = np.where(wide, 2 * reach + 1, gaps)
    position = np.concatenate([[0.0], np.cumsum(closed)]) + reach
    node = np.rint(position).astype(np.int64)
    mass = np.bincount(node, weights=w, minlength=node[-1] + reach + 1)
    kernel = np.exp(-0.5 * (np.arange(-reach, reach + 1) / _NODES) ** 2)
    density = np.convolve(mass, kernel, mode="same")
    half = 0.5 * density.max()
    above = np.flatnonzero(density >= half)
    lo, hi = above[0], above[-1]
    return float(_value_at(_crossing(density, half, hi, 1), node, position, a, step)
                 - _value_at(_crossing(density, half, lo, -1), node, position, a, step))


def _crossing(density, level, k, outward):
    """Where ``density`` falls to ``level`` between node k (at or above it) and the node next
    outward (below it), interpolated linearly, in lattice nodes."""
    return k + outward * (density[k] - level) / (density[k] - density[k + outward])


def _value_at(spot, node, position, a, step):
    """The value at lattice position ``spot``: counted from the value binned nearest to it, which
    lies on the same side of every closed gap."""
    j = min(int(np.searchsorted(node, spot)), len(node) - 1)
    if j > 0 and abs(node[j - 1] - spot) < abs(node[j] - spot):
        j -= 1
    return a[j] + (spot - position[j]) * step


def containing_diameter(dx, dy, share, weights=None):
    """Diameter of the circle about the centroid that holds ``share`` of the current (module notes).

    Parameters
    ----------
    dx, dy : ndarray
        Offsets of the rays from the centroid (m).
    share : float
        0 < share <= 1 (0.5 for d50).
    weights : ndarray, optional
        Current of each ray; None or a total of 0 counts rays.

    Returns
    -------
    float
        2 r with r the smallest distance such that the rays within r carry at least ``share`` of
        the total; NaN for no rays.
    """
    if not len(dx):
        return math.nan
    r = np.hypot(dx, dy)
    if weights is None or not np.sum(weights) > 0:     # counting rays: the k-th smallest radius
        k = min(max(math.ceil(share * float(len(r)) * (1 - 1e-12)) - 1, 0), len(r) - 1)
        return 2.0 * float(np.partition(r, k)[k])
    order = np.argsort(r)
    cumulative = np.cumsum(np.asarray(weights, float)[order])
    k = min(int(np.searchsorted(cumulative, share * cumulative[-1] * (1 - 1e-12))), len(r) - 1)
    return 2.0 * float(r[order][k])


def straight_waist(x, y, xs, ys, weights=None):
    """The waist of rays that go on in straight lines: where their rms radius is smallest.

    Parameters
    ----------
    x, y : ndarray
        Positions in a plane (m).
    xs, ys : ndarray
        Slopes dx/ds, dy/ds along the plane's normal (rad).
    weights : ndarray, optional
        The rays' currents: weighted moments (module notes).

    Returns
    -------
    s, radius : float
        The distance from the plane along its normal (m, negative behind it) and the rms radius
        about the centroid there (module notes); NaN for no rays or rays all parallel.
    """
    if not len(x):
        return math.nan, math.nan
    dx, dy, dxs, dys = (a - mean(a, weights) for a in (x, y, xs, ys))
    spread = mean(dx * dx + dy * dy, weights)
    tilt = mean(dx * dxs + dy * dys, weights)
    opening = mean(dxs * dxs + dys * dys, weights)
    if not opening > 0.0:
        return math.nan, math.nan
    s = -tilt / opening
    return s, math.sqrt(max(spread - tilt * tilt / opening, 0.0))


def straight_d50_waist(x, y, xs, ys, weights=None, window=(-math.inf, math.inf), samples=81):
    """Where the d50 of rays that go on in straight lines is smallest, and that d50.

    The search runs over s in [s0 - L, s0 + L], s0 the rms waist (:func:`straight_waist`) and L
    the distance over which the rms divergence doubles the rms size (L = sqrt(<dx^2 + dy^2> /
    <dx'^2 + dy'^2>), at least |s0|), cut to ``window``: ``samples`` points, then a bounded scalar
    minimisation (scipy.optimize.minimize_scalar) between the neighbours of the best.

    Parameters
    ----------
    x, y, xs, ys : ndarray
        As :func:`straight_waist`.
    weights : ndarray, optional
        Current of each ray (:func:`containing_diameter`).
    window : (float, float)
        The distances s searched at most.

    Returns
    -------
    s, d50 : float
        NaN for no rays, rays all parallel, an rms waist outside ``window`` or a smallest d50 at an
        end of the range searched (no waist found in it).
    """
    s0, _ = straight_waist(x, y, xs, ys, weights)
    if not window[0] <= s0 <= window[1]:
        return math.nan, math.nan
    dx, dy, dxs, dys = (a - mean(a, weights) for a in (x, y, xs, ys))
    reach = max(math.sqrt(mean(dx * dx + dy * dy, weights) / mean(dxs * dxs + dys * dys, weights)), abs(s0))

    def d50(s):
        return containing_diameter(dx + dxs * s, dy + dys * s, 0.5, weights)

    if reach == 0.0:
        return s0, d50(s0)
    grid = np.linspace(max(s0 - reach, window[0]), min(s0 + reach, window[1]), samples)
    k = int(np.argmin([d50(s) for s in grid]))
    if k in (0, samples - 1):
        return math.nan, math.nan
    lo, hi = grid[max(k - 1, 0)], grid[min(k + 1, samples - 1)]
    best = optimize.minimize_scalar(d50, bounds=(lo, hi), method="bounded",
                                    options={"xatol": 1e-6 * reach})
    s = float(best.x) if best.fun <= d50(grid[k]) else float(grid[k])
    return s, d50(s)
