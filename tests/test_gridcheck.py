"""Tests of the grid-error arithmetic (tracer.gridcheck): Richardson and Roache's GCI (Roache 1994)
on sequences with closed-form limits, observed orders, flags and the cell that fixes an error."""

import math

import numpy as np
import pytest

from tracer import gridcheck
from tracer.gridcheck import GridError, cell_for, gci, observed_order, three_grids, two_grids


def trapezoid(n):
    """The trapezoidal rule for the integral of sin over [0, pi] (exactly 2) with n intervals:
    second order in the spacing (common practice)."""
    x = np.linspace(0.0, math.pi, n + 1)
    y = np.sin(x)
    return float((y[:-1] + y[1:]).sum() * (math.pi / n) / 2)


def left_sum(n):
    """The left Riemann sum of exp over [0, 1] (exactly e - 1) with n intervals: first order."""
    x = np.arange(n) / n
    return float(np.exp(x).sum() / n)


def simpson(n):
    """Simpson's rule for the integral of sin over [0, pi] (exactly 2), n even: fourth order."""
    x = np.linspace(0.0, math.pi, n + 1)
    y = np.sin(x)
    return float((y[0] + y[-1] + 4 * y[1:-1:2].sum() + 2 * y[2:-1:2].sum()) * (math.pi / n) / 3)


def test_gci_is_roache_formula():
    """GCI = F_s |f1 - f2| / (r^p - 1) (Roache 1994), with its two recommended safety factors."""
    assert gci(1.0, 1.3, safety=3.0, order=2, ratio=2) == pytest.approx(0.3)
    assert gci(1.0, 1.3, safety=1.25, order=2, ratio=2) == pytest.approx(1.25 * 0.3 / 3)
    assert gci(1.0, 1.3, safety=1.0, order=1, ratio=2) == pytest.approx(0.3)
    assert gridcheck.SAFETY_TWO_GRIDS == 3.0 and gridcheck.SAFETY_THREE_GRIDS == 1.25
    assert math.isnan(gci(math.nan, 1.0))


@pytest.mark.parametrize("n", [8, 16, 64])
def test_two_grids_cover_a_second_order_error(n):
    """Two grids on the trapezoidal rule (second order): the interval covers the true error and is
    at most 5x it (the issue's bound); with p = 2 and F_s = 3 it is about 3x."""
    e = two_grids(trapezoid(n), trapezoid(n // 2))
    true = abs(e.value - 2.0)
    assert true <= e.error <= 5 * true
    assert e.error / true == pytest.approx(3.0, rel=0.05)
    assert math.isnan(e.third) and math.isnan(e.observed_order) and e.flag == ""


@pytest.mark.parametrize("fn,n,order", [(trapezoid, 32, 2.0), (left_sum, 64, 1.0), (simpson, 32, 4.0)])
def test_observed_order_of_known_rules(fn, n, order):
    """The observed order of rules of known order (trapezoid 2, left sum 1, Simpson 4; common
    practice) from three grids of ratio 2."""
    assert observed_order(fn(n), fn(n // 2), fn(n // 4)) == pytest.approx(order, abs=0.05)


def test_third_grid_confirms_second_order_coarse_and_fine():
    """A third grid (4h or h/2) on a second-order rule: the order is confirmed, F_s = 1.25, no flag,
    and the interval of the h value still covers its true error within 5x."""
    for e in (three_grids(trapezoid(16), trapezoid(8), trapezoid(4), third_coarser=True),
              three_grids(trapezoid(16), trapezoid(8), trapezoid(32), third_coarser=False)):
        assert e.flag == "" and e.safety == gridcheck.SAFETY_THREE_GRIDS
        assert e.observed_order == pytest.approx(2.0, abs=0.05)
        true = abs(e.value - 2.0)
        assert true <= e.error <= 5 * true


def test_third_grid_flags_other_orders():
    """A first-order or fourth-order sequence is flagged "refine cell_mm" and keeps F_s = 3."""
    for fn in (left_sum, simpson):
        e = three_grids(fn(16), fn(8), fn(4), third_coarser=True)
        assert e.flag.startswith("refine cell_mm") and "observed order" in e.flag
        assert e.safety == gridcheck.SAFETY_TWO_GRIDS


def test_oscillating_values_are_flagged():
    """Differences of opposite sign give no order and a flag."""
    e = three_grids(1.0, 1.1, 1.05, third_coarser=True)
    assert math.isnan(e.observed_order)
    assert e.flag.startswith("refine cell_mm")


def test_grid_free_figure_has_round_off_error_and_no_flag():
    """A figure equal on every grid up to round-off: error at round-off, no order, no flag."""
    v = 1500.0
    e = three_grids(v, v * (1 + 1e-15), v * (1 - 1e-15), third_coarser=True)
    assert e.error <= 1e-12 * v
    assert math.isnan(e.observed_order) and e.flag == ""


def test_nan_values_give_nan_error_and_no_flag():
    """A figure of no rays (NaN) on any grid: NaN error, no flag."""
    e = three_grids(math.nan, 1.0, 1.0, third_coarser=True)
    assert math.isnan(e.error) and e.flag == ""
    assert math.isnan(two_grids(1.0, math.nan).error)


def test_cell_for_brings_a_second_order_error_under_the_tolerance():
    """The suggested cell, put back into error ~ h^2, meets the tolerance; it has two significant
    figures and never exceeds the present cell."""
    h = 0.1e-3
    for error, tol in [(4e-3, 1e-3), (1e-2, 1e-5), (1.01e-3, 1e-3)]:
        new = cell_for(error, tol, h)
        assert error * (new / h) ** 2 <= tol
        assert new < h
        assert float(f"{new:.2g}") == new
    assert cell_for(1e-4, 1e-3, h) == h
    assert cell_for(math.nan, 1e-3, h) == h


def test_grid_error_is_frozen():
    e = GridError(1.0, 1.1, 0.1, 3.0)
    with pytest.raises(AttributeError):
        e.value = 2.0
