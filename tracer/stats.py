"""The statistics under the beam figures: moments, the transverse radius, the rms emittance.

Pure functions of arrays, or of the rows of a traced beam (fields ``x_m``,
``y_m``, ``px``, ``py``, ``pz``, ...); :mod:`tracer.measure` builds the figures
from them.  Moments are population moments (divided by N).  An empty selection
gives NaN for every moment, without a warning.

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

The FWHM of a distribution (:func:`fwhm`) is the span of its central erf(sqrt(ln 2)) = 76.1 %:
the full width at half maximum of a normal distribution, 2 sqrt(2 ln 2) sigma, read from the
quantiles, so it is unmoved by a few stragglers and needs no histogram bins.  For another shape it
is that span, not the width where the histogram falls to half its peak (a uniform disc's x profile
has a half-maximum width of sqrt(3) R = 1.73 R; this span is 1.29 R).

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


def mean(a):
    """Mean of an array, NaN when empty."""
    return float(np.mean(a)) if len(a) else math.nan


def std(a):
    """Population standard deviation, NaN when empty."""
    return float(np.std(a)) if len(a) else math.nan


def extreme(a, fn):
    """``fn`` (np.min or np.max) of an array, NaN when empty."""
    return float(fn(a)) if len(a) else math.nan


def radius(rows, symmetry="axial"):
    """The transverse coordinate of the map: r = hypot(x, y) in axial symmetry, y in planar."""
    return rows["y_m"] if symmetry == "planar" else np.hypot(rows["x_m"], rows["y_m"])


def rms_emittance(u, slope):
    """Statistical rms emittance sqrt(<du^2><du'^2> - <du du'>^2).

    Parameters
    ----------
    u : ndarray
        Transverse positions (m).
    slope : ndarray
        The slopes u' (rad) of the same rays.

    Returns
    -------
    float
        The emittance in m rad, about the centroid (Lapostolle 1971,
        Sacherer 1971); NaN for no rays.
    """
    if not len(u):
        return math.nan
    du = u - u.mean()
    ds = slope - slope.mean()
    # <du^2><ds^2> - <du ds>^2 = <du^2> <(ds - k du)^2> with k = <du ds>/<du^2>: the
    # residual of the linear fit keeps its precision where the difference would cancel.
    var_u = np.mean(du * du)
    if var_u == 0.0:
        return 0.0
    residual = ds - (np.mean(du * ds) / var_u) * du
    return math.sqrt(var_u * np.mean(residual * residual))


def beta_gamma(rows, mass_kg):
    """<|p|> / (m c) of the rows: the factor from the rms to the normalized emittance; NaN for none."""
    px, py, pz = rows["px"], rows["py"], rows["pz"]
    return mean(np.sqrt(px * px + py * py + pz * pz)) / (mass_kg * constants.c)


FWHM_SHARE = math.erf(math.sqrt(math.log(2.0)))
"""Share of a normal distribution within its full width at half maximum (0.761)."""


def fwhm(a):
    """The FWHM of a distribution as the span of its central 76.1 % (module notes); NaN for fewer
    than two values."""
    if len(a) < 2:
        return math.nan
    lo, hi = np.quantile(a, [0.5 - FWHM_SHARE / 2, 0.5 + FWHM_SHARE / 2])
    return float(hi - lo)


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
    order = np.argsort(r)
    w = np.ones(len(r)) if weights is None or not np.sum(weights) > 0 else np.asarray(weights, float)
    cumulative = np.cumsum(w[order])
    k = min(int(np.searchsorted(cumulative, share * cumulative[-1] * (1 - 1e-12))), len(r) - 1)
    return 2.0 * float(r[order][k])


def straight_waist(x, y, xs, ys):
    """The waist of rays that go on in straight lines: where their rms radius is smallest.

    Parameters
    ----------
    x, y : ndarray
        Positions in a plane (m).
    xs, ys : ndarray
        Slopes dx/ds, dy/ds along the plane's normal (rad).

    Returns
    -------
    s, radius : float
        The distance from the plane along its normal (m, negative behind it) and the rms radius
        about the centroid there (module notes); NaN for no rays or rays all parallel.
    """
    if not len(x):
        return math.nan, math.nan
    dx, dy, dxs, dys = (a - np.mean(a) for a in (x, y, xs, ys))
    spread = float(np.mean(dx * dx + dy * dy))
    tilt = float(np.mean(dx * dxs + dy * dys))
    opening = float(np.mean(dxs * dxs + dys * dys))
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
    s0, _ = straight_waist(x, y, xs, ys)
    if not window[0] <= s0 <= window[1]:
        return math.nan, math.nan
    dx, dy, dxs, dys = (a - np.mean(a) for a in (x, y, xs, ys))
    reach = max(math.sqrt(np.mean(dx * dx + dy * dy) / np.mean(dxs * dxs + dys * dys)), abs(s0))

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
