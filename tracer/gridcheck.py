"""The grid error of a figure from solves on two or three cell sizes: Richardson and Roache's GCI.

Pure arithmetic on the values one figure takes on grids of cell h (the config's), 2h and, when
asked, a third grid (h/2 or 4h); :mod:`tracer.errorbars` runs the solves and traces.

Method
------
The solver is second order (Shortley-Weller five-point stencils, :mod:`tracer.solver.stencil`), so
in the asymptotic range a figure computed on cell h is f_h = f + C h^p + ..., p = 2.  With f_2h
from the same rays on a grid of cell 2h, Richardson's extrapolation gives the error of f_h as
(f_h - f_2h) / (2^p - 1).  Roache's grid convergence index (Roache 1994, "Perspective: a method
for uniform reporting of grid refinement studies", J. Fluids Eng. 116) widens it by a safety
factor F_s:

    GCI = F_s |f_h - f_2h| / (2^p - 1),

with F_s = 3 when two grids are used and p is assumed, and F_s = 1.25 when a third grid confirms
the order (Roache 1994).  With p = 2 and F_s = 3 the interval is |f_h - f_2h| itself.

Three grids of ratio 2, finest first (f_1, f_2, f_3), give the observed order

    p_obs = ln((f_3 - f_2) / (f_2 - f_1)) / ln 2

(Roache 1994).  A figure whose observed order is far from 2 (outside :data:`ORDER_BAND`), or whose
differences change sign (oscillating convergence), is not yet in the asymptotic range: its error
keeps F_s = 3 and it is flagged "refine cell_mm".  Differences at the level of round-off
(:data:`ROUND_OFF` of the figure's size) mean the figure does not depend on the grid: no order is
observed and nothing is flagged.

The cell that brings an error e down to a tolerance t follows from e ~ h^p:
h' = h (t / e)^(1/p) (:func:`cell_for`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

ORDER = 2
"""The formal order of the field solver (Shortley-Weller stencils)."""

RATIO = 2.0
"""The ratio of the cells of neighbouring grids."""

SAFETY_TWO_GRIDS = 3.0
"""Roache's (1994) safety factor for two grids with the order assumed."""

SAFETY_THREE_GRIDS = 1.25
"""Roache's (1994) safety factor when a third grid confirms the order."""

ORDER_BAND = (1.5, 2.5)
"""Observed orders inside this band count as second order (asymptotic range)."""

ROUND_OFF = 1e-11
"""Differences below this fraction of a figure's size are round-off: the figure is grid-independent."""


@dataclass(frozen=True)
class GridError:
    """The grid error of one figure.

    Attributes
    ----------
    value : float
        The figure on the config's cell h.
    coarse : float
        The same figure on cell 2h.
    error : float
        The grid convergence index: ``safety * |value - coarse| / (2**order - 1)``.
    safety : float
        The safety factor used (3 for two grids, 1.25 with a confirmed order).
    third : float
        The figure on the third grid (h/2 or 4h); NaN with two grids.
    observed_order : float
        The order observed on three grids; NaN with two grids, or when the figure does not
        change with the grid, or when its differences change sign.
    flag : str
        ``""``, or why the figure is not in the asymptotic range (``"refine cell_mm: ..."``).
    """

    value: float
    coarse: float
    error: float
    safety: float
    third: float = math.nan
    observed_order: float = math.nan
    flag: str = ""


def gci(fine, coarse, safety=SAFETY_TWO_GRIDS, order=ORDER, ratio=RATIO):
    """Roache's grid convergence index of the finer value: ``safety |fine - coarse| / (ratio**order - 1)``.

    Parameters
    ----------
    fine, coarse : float
        A figure on the finer grid and on the grid ``ratio`` times coarser.
    safety : float
        The safety factor F_s.
    order : float
        The order p of the discretization.
    ratio : float
        The ratio of the cells (> 1).

    Returns
    -------
    float
        NaN when either value is NaN.
    """
    return safety * abs(fine - coarse) / (ratio ** order - 1.0)


def _size(*values):
    return max((abs(v) for v in values if math.isfinite(v)), default=0.0)


def observed_order(f1, f2, f3, ratio=RATIO):
    """The order observed on three grids of ratio ``ratio``, finest first.

    Parameters
    ----------
    f1, f2, f3 : float
        A figure on cells h1 < h2 = ratio h1 < h3 = ratio h2.

    Returns
    -------
    float
        ln((f3 - f2) / (f2 - f1)) / ln(ratio); NaN when the two differences differ in sign, when
        either is round-off (:data:`ROUND_OFF`) or when a value is NaN.
    """
    d21, d32 = f2 - f1, f3 - f2
    floor = ROUND_OFF * _size(f1, f2, f3)
    if not (math.isfinite(d21) and math.isfinite(d32)) or abs(d21) <= floor or abs(d32) <= floor:
        return math.nan
    if d21 * d32 < 0.0:
        return math.nan
    return math.log(d32 / d21) / math.log(ratio)


def two_grids(value, coarse, safety=SAFETY_TWO_GRIDS):
    """The grid error of ``value`` (cell h) from the same figure on cell 2h, order 2 assumed.

    Returns
    -------
    GridError
    """
    return GridError(value=value, coarse=coarse, error=gci(value, coarse, safety), safety=safety)


def three_grids(value, coarse, third, third_coarser, safety=None):
    """The grid error of ``value`` (cell h) with a third grid that checks the order.

    Parameters
    ----------
    value, coarse : float
        The figure on cells h and 2h.
    third : float
        The figure on the third grid.
    third_coarser : bool
        True when the third grid has cell 4h, False when it has cell h/2.
    safety : float, optional
        The safety factor; default 1.25 when the observed order is in :data:`ORDER_BAND`, else 3.

    Returns
    -------
    GridError
        ``error`` is the GCI of ``value`` from h and 2h with p = 2; ``flag`` says
        "refine cell_mm" when the differences change sign or the observed order is outside
        :data:`ORDER_BAND`.
    """
    f1, f2, f3 = (value, coarse, third) if third_coarser else (third, value, coarse)
    p = observed_order(f1, f2, f3)
    d21, d32 = f2 - f1, f3 - f2
    floor = ROUND_OFF * _size(f1, f2, f3)
    changes = math.isfinite(d21 + d32) and (abs(d21) > floor or abs(d32) > floor)   # else grid-free
    flag = ""
    if changes and math.isnan(p):
        flag = "refine cell_mm: the three grids show no converging order"
    elif changes and not ORDER_BAND[0] <= p <= ORDER_BAND[1]:
        flag = f"refine cell_mm: observed order {p:.2g}, expected {ORDER}"
    if safety is None:
        safety = SAFETY_THREE_GRIDS if not flag and math.isfinite(p) else SAFETY_TWO_GRIDS
    return GridError(value=value, coarse=coarse, error=gci(value, coarse, safety), safety=safety,
                     third=third, observed_order=p, flag=flag)


def cell_for(error, tolerance, cell, order=ORDER):
    """The cell that brings a grid error down to a tolerance, from error ~ cell**order.

    Parameters
    ----------
    error : float
        The grid error on ``cell``.
    tolerance : float
        The error wanted (> 0).
    cell : float
        The present cell.

    Returns
    -------
    float
        ``cell * (tolerance / error) ** (1 / order)`` rounded down to two significant figures;
        ``cell`` itself when the error is already within the tolerance.
    """
    if not error > tolerance:
        return cell
    h = cell * (tolerance / error) ** (1.0 / order)
    digits = 10.0 ** (math.floor(math.log10(h)) - 1)
    return float(f"{math.floor(h / digits) * digits:.2g}")
