"""The map's symmetry: how a 3-D point sees the (z, r) map.

* axial symmetry (code 0): r = hypot(x, y), E_x = E_r x / r, E_y = E_r y / r (zero on the axis);
* planar (code 1): the map's r is y, E_x = 0;
* mirrored planar (code 2): the map is looked up at |y| and E_y takes the sign of y.
"""

import math

from tracer.jit import njit

SYMMETRY_CODE = {"axial": 0, "planar": 1, "mirror": 2}


@njit(cache=True, error_model="numpy", inline="always")
def map_r(sym, x, y):
    """The map coordinate r of a 3-D point (hypot(x, y), |y| or y)."""
    rr = math.sqrt(x * x + y * y)     # selects, no branches: loops over lanes stay SIMD
    return rr if sym == 0 else (abs(y) if sym == 2 else y)


@njit(cache=True, error_model="numpy", inline="always")
def r_rate(sym, s, k):
    """dr/dt of the map coordinate r for state s with derivative k."""
    if sym == 0:
        r = math.sqrt(s[0] * s[0] + s[1] * s[1])
        return (s[0] * k[0] + s[1] * k[1]) / r if r > 0.0 else math.sqrt(k[0] * k[0] + k[1] * k[1])
    if sym == 2 and s[1] < 0.0:
        return -k[1]
    return k[1]


@njit(cache=True, error_model="numpy", inline="always")
def closest_to_axis(s, k):
    """Time at which the straight line from state s (velocity k[:3]) passes closest to the z axis."""
    v2 = k[0] * k[0] + k[1] * k[1]
    if v2 == 0.0:
        return -1.0
    return -(s[0] * k[0] + s[1] * k[1]) / v2
