"""The potential on the axis of a round lens and its derivatives to the fourth.

The map's node values on the axis, V(z_i, 0), are fitted by a least-squares
spline of degree 7 (``scipy.interpolate.make_lsq_spline``) whose interior knots
lie every ``knot_cells`` grid cells (3 by default).  Degree 7 keeps the fourth
derivative smooth (continuous to the sixth) and its truncation error small
(order knot spacing^4).  Having several nodes per knot interval makes the fit a
smoother: noise on the node values (round-off, solver residual) is averaged
over the interval instead of being amplified by differencing (the gain of the
fit for each derivative is measured in tests/test_optics.py against that of
finite differences).
"""

from __future__ import annotations

import math

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import BSpline, make_lsq_spline

DEGREE = 7


@dataclass(frozen=True, eq=False)
class AxialPotential:
    """A smooth fit to the potential on the axis.

    Parameters
    ----------
    z : ndarray
        The sample positions (m), increasing.
    samples : ndarray
        The potential at ``z`` (V), as given.
    spline : scipy.interpolate.BSpline
        The fitted spline (degree ``DEGREE``).
    """

    z: np.ndarray
    samples: np.ndarray
    spline: BSpline

    def __call__(self, z, nu: int = 0) -> np.ndarray:
        """The fitted potential (``nu = 0``, V) or its ``nu``-th derivative (V/m^nu) at ``z``."""
        return self.spline(z, nu)

    def derivatives(self, z) -> np.ndarray:
        """V, V', V'', V''', V'''' at ``z``, as rows of a (5, len(z)) array."""
        z = np.asarray(z, dtype=float)
        return np.stack([self.spline(z, nu) for nu in range(5)])

    def pieces(self) -> tuple[float, float, np.ndarray]:
        """The spline as polynomial pieces, for numerical kernels.

        Returns
        -------
        z0 : float
            Start of the first piece (m).
        width : float
            Length of every piece (m); the knots are equally spaced.
        taylor : ndarray, shape (n_pieces, DEGREE + 1)
            Row i holds the Taylor coefficients V^(k)(z_i) / k!, k = 0..DEGREE, of
            the polynomial on [z_i, z_i + width], z_i = z0 + i width.
        """
        t = self.spline.t
        breaks = t[DEGREE:len(t) - DEGREE]
        left = breaks[:-1]
        taylor = np.column_stack([self.spline(left, k) / math.factorial(k)
                                  for k in range(DEGREE + 1)])
        return float(breaks[0]), float(breaks[1] - breaks[0]), taylor


def fit_axial(z, v, knot_cells: int = 3) -> AxialPotential:
    """Fit a least-squares spline of degree ``DEGREE`` to samples of the axial potential.

    Parameters
    ----------
    z : array_like
        Equally spaced, increasing sample positions (m).
    v : array_like
        The potential at ``z`` (V).
    knot_cells : int
        Interior knots every ``knot_cells`` sample intervals (>= 2).  Larger values
        smooth more; the truncation error of the fit grows as the knot spacing to
        the power 6 - (derivative order).

    Returns
    -------
    AxialPotential
    """
    z = np.asarray(z, dtype=float)
    v = np.asarray(v, dtype=float)
    if knot_cells < 2:
        raise ValueError(f"knot_cells must be >= 2, got {knot_cells}")
    n_int = (len(z) - 1) // knot_cells
    if n_int < 2:
        raise ValueError(f"{len(z)} axial samples are too few for knots every {knot_cells} cells")
    interior = np.linspace(z[0], z[-1], n_int + 1)[1:-1]
    knots = np.concatenate([np.full(DEGREE + 1, z[0]), interior, np.full(DEGREE + 1, z[-1])])
    return AxialPotential(z=z, samples=v, spline=make_lsq_spline(z, v, knots, k=DEGREE))


def axial_potential(field, knot_cells: int = 3, z_range_m=None) -> AxialPotential:
    """The axial potential of a potential map, sampled at the map's z nodes.

    The nodes used are the first unbroken run of axis nodes that lie in free space
    (not inside an electrode, when the map has a ``raster``) and within ``z_range_m``:
    the axis ends where it enters an electrode, such as a target plate.

    Parameters
    ----------
    field : PotentialMap
        Any object with ``potential(z, r)`` (V at arrays of points) and a ``grid``
        with ``z0``, ``z1`` (first and last node z, m) and ``hz`` (node spacing, m);
        optionally a ``raster`` whose ``owner[:, 0]`` is >= 0 at axis nodes inside
        an electrode.
    knot_cells : int
        See :func:`fit_axial`.
    z_range_m : (float, float), optional
        Use only the nodes with z in this closed interval.

    Returns
    -------
    AxialPotential

    Raises
    ------
    ValueError
        If too few nodes remain.
    """
    g = field.grid
    n = int(round((g.z1 - g.z0) / g.hz)) + 1
    z = np.linspace(g.z0, g.z1, n)
    use = np.ones(n, dtype=bool)
    raster = getattr(field, "raster", None)
    if raster is not None:
        use &= np.asarray(raster.owner)[:, 0] < 0
    if z_range_m is not None:
        lo, hi = z_range_m
        slack = 1e-9 * g.hz
        use &= (z >= lo - slack) & (z <= hi + slack)
    first = int(np.argmax(use))
    if not use[first]:
        raise ValueError("no axis node lies in free space within the range asked for")
    stop = first + (int(np.argmin(use[first:])) if not use[first:].all() else n - first)
    z = z[first:stop]
    return fit_axial(z, field.potential(z, np.zeros_like(z)), knot_cells)
