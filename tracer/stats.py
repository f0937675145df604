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
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants


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
