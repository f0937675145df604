"""Basis maps, potential maps and their C1 interpolant.

The potential between nodes is a bicubic Hermite patch per cell, built from node data
``(V, dV/dz, dV/dr, d2V/dzdr)``; the field is minus the analytic gradient of that patch, so
``field`` is exactly ``-grad potential`` wherever the patch is used.

The cells that touch the axis (axial symmetry) or the mirror plane (mirrored planar) are even in
r instead.  A potential symmetric about r = 0 is a function of r^2 (V(z) - V''(z) r^2 / 4 +
V''''(z) r^4 / 64 - ... about an axis, V(z) - V''(z) y^2 / 2 + ... about a plane; Hawkes & Kasper,
Principles of Electron Optics), so E_r / r has no term odd in r; a bicubic in r has an r^3 term,
which bends rays thinner than a cell like a spherical aberration of the map.  Those cells use,
for each of the four cubic Hermite functions in z, the quadratic in s = r^2 through the value on
the axis and the value and slope at the cell's outer row.  It needs no dV/dr on the axis (that
slope is zero for any quadratic in s), keeps C1 continuity with the next row (same value and
slope there) and along the axis (the same node data as the neighbours' shared wall), and
represents the first two terms of either series exactly, whatever the charge density, so it
holds under space charge too.  Its field is still minus its gradient.

Node data are built per basis map in three linear steps, so a potential map for any voltage set is
the weighted sum of the basis data:

1. Ghost extension.  Conductor nodes next to free space get the value of the free-space solution
   continued through the surface: a quadratic through the conductor's surface value at the arm
   distance and the one or two nearest free nodes behind it, evaluated at the conductor node.  An arm
   shorter than ``ARM_MIN`` of the spacing drops the free node next to the surface (it would
   amplify its error by about 2 / arm) and uses the two free nodes behind it instead.  The values
   continued along z and along r are averaged, except along an axis with free nodes on both sides
   (a plate one node thick, or the tip of a curved surface): no single number continues both sides,
   so that axis is left out, and a node with no other axis keeps its own value.  Conductor nodes
   that touch free space only diagonally get the value that gives their cell the mixed difference
   of the next cell along the same diagonal (third-order accurate, like the quadratic above).
   Cells that straddle a surface then carry the smooth free-space solution instead of a kink.
2. ``dV/dz`` and ``dV/dr`` by second-order central differences over free and ghost nodes;
   one-sided second-order differences next to conductor nodes that were not extended and at
   "ground" edges; "open" edges, the axis and a mirror plane reflect the map, so the normal
   derivative vanishes there (which also makes the mirrored interpolant C1 across r = 0).
   One row off the axis or mirror plane, ``dV/dr`` is the slope of the quartic even in r through
   the first three rows (:func:`even_slope`), which the even patch needs for its r^4 term.
3. ``d2V/dzdr = d/dr (dV/dz)`` with the same difference rules (and :func:`even_slope` one row
   off the axis).

Points outside the grid are evaluated with the polynomial of the nearest boundary cell (the cell
index is clamped); this is only meaningful close to the grid, and the ray tracer stops rays that leave
the domain.  Points inside an electrode get the electrode's voltage and zero field.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from tracer.display import Shown, grid_text, megabytes, voltage_text
from tracer.geometry import electrode_at, shape_table
from tracer.grid import Grid
from tracer.jit import njit

ARM_MIN = 0.5
"""Arms shorter than this fraction of the spacing do not use the free node next to the surface."""

_STEP_Z = (1, -1, 0, 0)
_STEP_R = (0, 0, 1, -1)


# --------------------------------------------------------------------------------------------
# Evaluation of the bicubic Hermite patch


@njit(cache=True, error_model="numpy", forceinline=True)
def cell_index(x, x0, h, n):
    """Index of the cell holding coordinate x on a line of n nodes, clamped to [0, n - 2].

    NaN gives 0 (the interpolant then returns NaN); +-inf the boundary cells.
    """
    u = (x - x0) / h
    if u >= n - 2:
        return n - 2
    if u > 0.0:
        return int(u)
    return 0


@njit(cache=True, error_model="numpy", forceinline=True)
def _to_power(v0, v1, s0, s1):
    """Power-form coefficients (1, u, u^2, u^3) of the cubic on u in [0, 1] with end values v0, v1
    and end slopes s0, s1 (per unit u): the cubic Hermite basis written out."""
    return v0, s0, 3.0 * (v1 - v0) - 2.0 * s0 - s1, 2.0 * (v0 - v1) + s0 + s1


@njit(cache=True, error_model="numpy", forceinline=True)
def even_row(mirror, j):
    """Whether the patches of cell row j are even in r: the first row of a map whose ``r = r0`` row
    is the axis or a mirror plane (``mirror``)."""
    return mirror and j == 0


@njit(cache=True, error_model="numpy", forceinline=True)
def _to_even(v0, v1, s1):
    """Power-form coefficients (1, s, s^2, s^3) of the quadratic in s = w^2, w in [0, 1], with
    value v0 at w = 0, value v1 and slope s1 (per unit w) at w = 1: the slope in s there is s1 / 2,
    the s^3 coefficient zero."""
    return v0, 2.0 * (v1 - v0) - 0.5 * s1, 0.5 * s1 - (v1 - v0), 0.0


@njit(cache=True, error_model="numpy", forceinline=True)
def patch_coefficients(h, i, j, hz, hr, mirror):
    """The patch of cell (i, j) in power form.

    Parameters
    ----------
    h : float64[4, nz, nr]
        Node data (V, dV/dz, dV/dr, d2V/dzdr).
    i, j : int
        The cell (nodes i, i + 1 along z and j, j + 1 along r).
    hz, hr : float
        Grid spacings.
    mirror : bool
        The ``r = r0`` row is the axis or a mirror plane: the cells of the first row
        (:func:`even_row`) get the patch even in r described in the module docstring.

    Returns
    -------
    tuple of 16 float
        ``a[4 p + q]``, the coefficient of u^p x^q, u and w the fractions of the cell along z and
        r, x = w (bicubic) or x = w^2 (even row; see :func:`patch_eval`).
    """
    v0 = _to_power(h[0, i, j], h[0, i + 1, j], hz * h[1, i, j], hz * h[1, i + 1, j])
    v1 = _to_power(h[0, i, j + 1], h[0, i + 1, j + 1], hz * h[1, i, j + 1], hz * h[1, i + 1, j + 1])
    s1 = _to_power(hr * h[2, i, j + 1], hr * h[2, i + 1, j + 1], hz * hr * h[3, i, j + 1],
                   hz * hr * h[3, i + 1, j + 1])
    if even_row(mirror, j):
        return (_to_even(v0[0], v1[0], s1[0]) + _to_even(v0[1], v1[1], s1[1])
                + _to_even(v0[2], v1[2], s1[2]) + _to_even(v0[3], v1[3], s1[3]))
    s0 = _to_power(hr * h[2, i, j], hr * h[2, i + 1, j], hz * hr * h[3, i, j], hz * hr * h[3, i + 1, j])
    return (_to_power(v0[0], v1[0], s0[0], s1[0]) + _to_power(v0[1], v1[1], s0[1], s1[1])
            + _to_power(v0[2], v1[2], s0[2], s1[2]) + _to_power(v0[3], v1[3], s0[3], s1[3]))


@njit(cache=True, error_model="numpy", forceinline=True)
def patch_eval(a, u, w, even):
    """A patch in power form (:func:`patch_coefficients`) and its derivatives at (u, w).

    Parameters
    ----------
    a : tuple of 16 float
    u, w : float
        Fractions of the cell along z and r; they may lie outside [0, 1]: the polynomial is
        continued beyond the cell's walls.
    even : bool
        The patch is a polynomial in w^2 (:func:`even_row`).

    Returns
    -------
    (V, dV/du, dV/dw) : tuple of float
    """
    x = w * w if even else w
    # the cubic in x of each power of u, and its x-derivative (constant indices: the tuple stays
    # in registers)
    c0, d0 = _cubic(a[0], a[1], a[2], a[3], x)
    c1, d1 = _cubic(a[4], a[5], a[6], a[7], x)
    c2, d2 = _cubic(a[8], a[9], a[10], a[11], x)
    c3, d3 = _cubic(a[12], a[13], a[14], a[15], x)
    v, vu = _cubic(c0, c1, c2, c3, u)
    return v, vu, _cubic(d0, d1, d2, d3, u)[0] * (2.0 * w if even else 1.0)


@njit(cache=True, error_model="numpy", forceinline=True)
def _cubic(a0, a1, a2, a3, x):
    """``a0 + a1 x + a2 x^2 + a3 x^3`` and its derivative (Horner)."""
    return a0 + x * (a1 + x * (a2 + x * a3)), a1 + x * (2.0 * a2 + 3.0 * x * a3)


@njit(cache=True, error_model="numpy", forceinline=True)
def hermite_eval(h, z0, r0, hz, hr, nz, nr, mirror, z, r):
    """The map's interpolant (bicubic Hermite; even in r next to a mirror) and its gradient at one
    point.

    Parameters
    ----------
    h : float64[4, nz, nr]
        Node data (V, dV/dz, dV/dr, d2V/dzdr), e.g. ``PotentialMap.hermite``.
    z0, r0, hz, hr : float
        First node and spacings of the grid.
    nz, nr : int
        Node counts.
    mirror : bool
        Even symmetry about r = r0 (the axis or a mirror plane): r is reflected, the sign of dV/dr
        follows, and the first cell row is even in r (:func:`even_row`).
    z, r : float
        The point.  Outside the grid the nearest boundary cell's polynomial is used.

    Returns
    -------
    (V, dV/dz, dV/dr) : tuple of float
    """
    sign = 1.0
    if mirror and r < r0:
        r = 2.0 * r0 - r
        sign = -1.0
    i = cell_index(z, z0, hz, nz)
    j = cell_index(r, r0, hr, nr)
    v, vu, vw = patch_eval(patch_coefficients(h, i, j, hz, hr, mirror), (z - z0) / hz - i,
                           (r - r0) / hr - j, even_row(mirror, j))
    return v, vu / hz, sign * vw / hr


@njit(cache=True, error_model="numpy")
def hermite_eval_many(h, z0, r0, hz, hr, nz, nr, mirror, z, r):
    """``hermite_eval`` over 1-D arrays of points; returns (V, dV/dz, dV/dr) arrays."""
    n = z.size
    v = np.empty(n)
    vz = np.empty(n)
    vr = np.empty(n)
    for k in range(n):
        v[k], vz[k], vr[k] = hermite_eval(h, z0, r0, hz, hr, nz, nr, mirror, z[k], r[k])
    return v, vz, vr


# --------------------------------------------------------------------------------------------
# Node data: ghost extension and finite differences


@njit(cache=True, error_model="numpy")
def _lagrange_at_one(x, y, n):
    """Value at x = 1 of the polynomial through the first n points (x[k], y[k])."""
    s = 0.0
    for a in range(n):
        w = 1.0
        for b in range(n):
            if b != a:
                w *= (1.0 - x[b]) / (x[a] - x[b])
        s += w * y[a]
    return s


@njit(cache=True, error_model="numpy")
def _free_behind(owner, arm, iz, ir, k, m):
    """True when the node m steps behind (iz, ir) against arm k is free with an unbroken arm k."""
    nz, nr = owner.shape
    jz = iz - m * _STEP_Z[k]
    jr = ir - m * _STEP_R[k]
    if jz < 0 or jz >= nz or jr < 0 or jr >= nr:
        return False
    return owner[jz, jr] < 0 and arm[jz, jr, k] >= 1.0


@njit(cache=True, error_model="numpy")
def _extrapolate(v, owner, arm, arm_owner, surface, iz, ir, k):
    """Continue the free-space solution from free node (iz, ir) along arm k to the conductor node.

    Positions are in spacings from the free node: the surface at ``arm``, the target at 1.
    """
    a = arm[iz, ir, k]
    hit = arm_owner[iz, ir, k]
    if hit < 0 or a >= 1.0:
        hit = owner[iz + _STEP_Z[k], ir + _STEP_R[k]]
        a = 1.0
    x = np.empty(3)
    y = np.empty(3)
    x[0] = a
    y[0] = surface[hit]
    n = 1
    first = 0 if a >= ARM_MIN else 1
    for m in range(first, first + 2):
        if m > 0 and not _free_behind(owner, arm, iz, ir, k, m):
            break
        x[n] = -m
        y[n] = v[iz - m * _STEP_Z[k], ir - m * _STEP_R[k]]
        n += 1
    return _lagrange_at_one(x, y, n)


@njit(cache=True, error_model="numpy")
def _twist(g, usable, iz, ir, sz, sr):
    """Mixed difference of the cell beyond free node (iz, ir) in direction (sz, sr); 0 if unusable."""
    nz, nr = g.shape
    jz = iz + sz
    jr = ir + sr
    if jz < 0 or jz >= nz or jr < 0 or jr >= nr:
        return 0.0
    if not (usable[jz, ir] and usable[iz, jr] and usable[jz, jr]):
        return 0.0
    return g[jz, jr] - g[jz, ir] - g[iz, jr] + g[iz, ir]


@njit(cache=True, error_model="numpy")
def ghost_extend(v, owner, arm, arm_owner, surface):
    """Node values with conductor nodes next to free space replaced by the continued solution.

    Parameters
    ----------
    v : float64[nz, nr]
        Node values (a basis map, or any linear combination of basis maps).
    owner, arm, arm_owner : arrays
        From the Raster.
    surface : float64[n_electrodes]
        Value of ``v`` on each electrode (1 on the basis map's own electrode, 0 on the others).

    Returns
    -------
    g : float64[nz, nr]
        Extended values (equal to ``v`` on free nodes and on conductor nodes not extended).
    extended : bool[nz, nr]
        True on free nodes and on extended conductor nodes.
    """
    nz, nr = v.shape
    g = v.copy()
    extended = owner < 0
    thin = np.zeros((nz, nr), dtype=np.bool_)
    for iz in range(nz):
        for ir in range(nr):
            if owner[iz, ir] < 0:
                continue
            total = np.zeros(4)
            sides = np.zeros(4, dtype=np.bool_)
            for k in range(4):
                fz = iz - _STEP_Z[k]
                fr = ir - _STEP_R[k]
                if fz < 0 or fz >= nz or fr < 0 or fr >= nr or owner[fz, fr] >= 0:
                    continue
                total[k] = _extrapolate(v, owner, arm, arm_owner, surface, fz, fr, k)
                sides[k] = True
            s = 0.0
            count = 0
            for axis in range(2):
                k = 2 * axis
                if sides[k] != sides[k + 1]:
                    s += total[k] + total[k + 1]
                    count += 1
            if count > 0:
                g[iz, ir] = s / count
                extended[iz, ir] = True
            elif sides.any():
                thin[iz, ir] = True
    first = extended.copy()
    for iz in range(nz):
        for ir in range(nr):
            if first[iz, ir] or thin[iz, ir]:
                continue
            total = 0.0
            count = 0
            for sz in (-1, 1):
                for sr in (-1, 1):
                    fz = iz + sz
                    fr = ir + sr
                    if fz < 0 or fz >= nz or fr < 0 or fr >= nr or owner[fz, fr] >= 0:
                        continue
                    if first[fz, ir] and first[iz, fr]:
                        total += g[fz, ir] + g[iz, fr] - v[fz, fr] + _twist(g, first, fz, fr, sz, sr)
                        count += 1
            if count > 0:
                g[iz, ir] = total / count
                extended[iz, ir] = True
    return g, extended


@njit(cache=True, error_model="numpy")
def _partner(i, n, reflect_lo, reflect_hi):
    """Index holding the value at node i (reflected at mirroring edges); -1 if there is none."""
    if i < 0:
        i = -i if reflect_lo else -1
    elif i >= n:
        i = 2 * (n - 1) - i if reflect_hi else -1
    if i < 0 or i >= n:
        return -1
    return i


@njit(cache=True, error_model="numpy")
def diff_z(g, extended, h, reflect_lo, reflect_hi):
    """d/dz (first array axis) over extended nodes; zero elsewhere.

    Central differences where both neighbours are extended, one-sided second-order where only one
    side is (first order when that side has a single node), zero when neither is.  Edges that
    reflect the map supply mirrored neighbours.
    """
    nz, nr = g.shape
    out = np.zeros((nz, nr))
    for iz in range(nz):
        ip = _partner(iz + 1, nz, reflect_lo, reflect_hi)
        im = _partner(iz - 1, nz, reflect_lo, reflect_hi)
        ipp = _partner(iz + 2, nz, reflect_lo, reflect_hi)
        imm = _partner(iz - 2, nz, reflect_lo, reflect_hi)
        for ir in range(nr):
            if not extended[iz, ir]:
                continue
            up = ip >= 0 and extended[ip, ir]
            dn = im >= 0 and extended[im, ir]
            if up and dn:
                out[iz, ir] = (g[ip, ir] - g[im, ir]) / (2.0 * h)
            elif up and ipp >= 0 and extended[ipp, ir]:
                out[iz, ir] = (-3.0 * g[iz, ir] + 4.0 * g[ip, ir] - g[ipp, ir]) / (2.0 * h)
            elif dn and imm >= 0 and extended[imm, ir]:
                out[iz, ir] = (3.0 * g[iz, ir] - 4.0 * g[im, ir] + g[imm, ir]) / (2.0 * h)
            elif up:
                out[iz, ir] = (g[ip, ir] - g[iz, ir]) / h
            elif dn:
                out[iz, ir] = (g[iz, ir] - g[im, ir]) / h
    return out


@njit(cache=True, error_model="numpy", forceinline=True)
def even_slope(v0, v1, v2, h):
    """Slope one node off a mirror of a function even about it, from the values on the mirror
    (``v0``) and one and two nodes off it (``v1``, ``v2``; spacing ``h``).

    The even quartic a + b r^2 + c r^4 through the three values has the slope
    ``(-9 v0 + 8 v1 + v2) / (6 h)`` at r = h: exact for the first three terms of the series in
    r^2 (error O(h^5) against the slope's O(h)), where the central difference
    ``(v2 - v0) / (2 h)`` = 2 b h + 8 c h^3 doubles the r^3 term.  The even patch of the first cell
    row takes its r^4 term from this slope (:func:`_to_even`), and its r^2 term (the paraxial
    focusing) from this slope and the value, so the central difference would triple the one and
    shift the other by 2 c h^2.
    """
    return (-9.0 * v0 + 8.0 * v1 + v2) / (6.0 * h)


@njit(cache=True, error_model="numpy")
def hermite_data(v, owner, arm, arm_owner, surface, hz, hr, reflect, mirror):
    """Hermite node data (V, dV/dz, dV/dr, d2V/dzdr) of one map.

    Parameters
    ----------
    v, owner, arm, arm_owner, surface
        As for ``ghost_extend``.
    hz, hr : float
        Grid spacings.
    reflect : bool[4]
        Whether each edge (z_min, z_max, r_min, r_max) mirrors the map ("open", axis, mirror plane).
    mirror : bool
        The ``r = r0`` row is the axis or a mirror plane: the map is even in r there, and the nodes
        one row off it take dV/dr and d2V/dzdr from :func:`even_slope` wherever the first three
        rows are extended (both patches that share that row use them, so the map stays C1).

    Returns
    -------
    float64[4, nz, nr]
    """
    g, extended = ghost_extend(v, owner, arm, arm_owner, surface)
    nz, nr = v.shape
    out = np.empty((4, nz, nr))
    out[0] = g
    out[1] = diff_z(g, extended, hz, reflect[0], reflect[1])
    out[2] = diff_z(g.T, extended.T, hr, reflect[2], reflect[3]).T
    out[3] = diff_z(out[1].T, extended.T, hr, reflect[2], reflect[3]).T
    if mirror and nr >= 3:
        for iz in range(nz):
            if extended[iz, 0] and extended[iz, 1] and extended[iz, 2]:
                out[2, iz, 1] = even_slope(g[iz, 0], g[iz, 1], g[iz, 2], hr)
                out[3, iz, 1] = even_slope(out[1, iz, 0], out[1, iz, 1], out[1, iz, 2], hr)
    return out


def map_hermite(grid, raster, v, surface) -> np.ndarray:
    """Hermite data (:func:`hermite_data`) of node values ``v`` on a grid and its raster.

    Parameters
    ----------
    grid : tracer.grid.Grid
    raster : tracer.geometry.Raster
    v : float64[nz, nr]
        Node values.
    surface : float64[n_electrodes]
        Value of ``v`` on each electrode.
    """
    return hermite_data(v, raster.owner, raster.arm, raster.arm_owner,
                        np.asarray(surface, dtype=np.float64), grid.hz, grid.hr,
                        edge_reflection(grid.edges), bool(grid.mirror))


def edge_reflection(edges) -> np.ndarray:
    """Which edges mirror the map: every edge that is not "ground" (open, axis, mirror plane)."""
    return np.array([e != "ground" for e in edges], dtype=np.bool_)


def basis_hermite(grid, raster, unit) -> np.ndarray:
    """Hermite data of every basis map.

    Parameters
    ----------
    grid : tracer.grid.Grid
    raster : tracer.geometry.Raster
    unit : float64[n_electrodes, nz, nr]
        Basis maps: map k is 1 V on electrode k and 0 V on the others.

    Returns
    -------
    float64[n_electrodes, 4, nz, nr]
    """
    n = unit.shape[0]
    out = np.empty((n, 4) + unit.shape[1:])
    for k in range(n):
        out[k] = map_hermite(grid, raster, unit[k], np.eye(n)[k])
    return out


# --------------------------------------------------------------------------------------------
# Potential maps


def named_settings(names, defaults, given: Mapping[str, object] | None, what: str) -> dict:
    """Every source's setting: the ``given`` one where named, else its default.

    The fields are linear in their sources (electrode voltages, coil currents), so a map for any
    setting is the weighted sum of unit maps; this is the one place the weights are looked up.

    Parameters
    ----------
    names, defaults : sequence
        The sources' names and default settings, in the same order.
    given : mapping of name to setting, optional
    what : str
        What a source is called in the error ("electrode", "coil").

    Raises
    ------
    ValueError
        For a name that is not one of ``names``.
    """
    out = dict(zip(names, defaults))
    for name, value in (given or {}).items():
        if name not in out:
            raise ValueError(f"unknown {what} {name!r}; the {what}s are "
                             + (", ".join(repr(n) for n in names) or "none"))
        out[name] = value
    return out


@njit(cache=True, error_model="numpy")
def _evaluate(h, z0, r0, hz, hr, nz, nr, mirror, cell, kind, owner, start, count, points, sector,
              bbox, volts, z, r, v, ez, er):
    """Potential and field at points; electrode voltage and zero field inside conductors."""
    for k in range(z.size):
        zk = z[k]
        ra = r[k]
        if mirror and ra < r0:
            ra = 2.0 * r0 - ra
        c = cell[cell_index(zk, z0, hz, nz), cell_index(ra, r0, hr, nr)]
        if c == -2:
            c = electrode_at(zk, ra, kind, owner, start, count, points, sector, bbox)
        if c >= 0:
            v[k] = volts[c]
            ez[k] = 0.0
            er[k] = 0.0
        else:
            vk, vz, vr = hermite_eval(h, z0, r0, hz, hr, nz, nr, mirror, zk, r[k])
            v[k] = vk
            ez[k] = -vz
            er[k] = -vr


@dataclass(frozen=True, eq=False, repr=False)
class PotentialMap(Shown):
    """The potential of one voltage set, with its C1 interpolant.

    Attributes
    ----------
    grid, table, raster
        The grid, shape table and raster the map was solved on.
    names : tuple of str
        Electrode names, in the order of the setup.
    voltages : tuple of float
        Voltage of each electrode (V).
    hermite : float64[4, nz, nr]
        Node data (V, dV/dz, dV/dr, d2V/dzdr) for ``hermite_eval``.
    """

    grid: object
    table: object
    raster: object
    names: tuple
    voltages: tuple
    hermite: np.ndarray

    def _facts(self):
        return {"grid": grid_text(self.grid), "voltages": voltage_text(self.names, self.voltages),
                "data": megabytes(self.hermite)}

    def _evaluate(self, z, r):
        z, r = np.broadcast_arrays(np.asarray(z, dtype=np.float64), np.asarray(r, dtype=np.float64))
        shape = z.shape
        zf = np.ascontiguousarray(z).ravel()
        rf = np.ascontiguousarray(r).ravel()
        v = np.empty(zf.size)
        ez = np.empty(zf.size)
        er = np.empty(zf.size)
        g = self.grid
        _evaluate(self.hermite, g.z0, g.r0, g.hz, g.hr, g.nz, g.nr, g.mirror, self.raster.cell,
                  *self.table.arrays(), np.asarray(self.voltages, dtype=np.float64), zf, rf, v, ez, er)
        return v.reshape(shape), ez.reshape(shape), er.reshape(shape)

    def potential(self, z, r) -> np.ndarray:
        """Potential (V) at points; inside an electrode, its voltage.

        Parameters
        ----------
        z, r : array_like
            Coordinates in metres (broadcast together).  In axial symmetry r >= 0; in a mirrored
            planar domain negative r is reflected.
        """
        return self._evaluate(z, r)[0]

    def field(self, z, r) -> tuple[np.ndarray, np.ndarray]:
        """Electric field (E_z, E_r) in V/m: minus the gradient of ``potential``; zero inside electrodes."""
        _, ez, er = self._evaluate(z, r)
        return ez, er


@dataclass(frozen=True, eq=False, repr=False)
class BasisMaps(Shown):
    """One basis map per electrode (1 V on it, 0 V on the others), ready to combine.

    Attributes
    ----------
    grid, table, raster
        The grid, shape table and raster of the solve.
    names : tuple of str
        Electrode names, in the order of the setup.
    voltages : tuple of float
        The setup's voltages, the defaults for ``combine``.
    unit : float64[n_electrodes, nz, nr]
        Node values of the basis maps.
    hermite : float64[n_electrodes, 4, nz, nr]
        Ghost-extended Hermite node data of each basis map.
    history : tuple of ndarray
        Relative residual after each solver cycle, per electrode.
    geometry_hash : str
        ``Setup.geometry_hash()`` of the solved geometry.
    """

    grid: object
    table: object
    raster: object
    names: tuple
    voltages: tuple
    unit: np.ndarray
    hermite: np.ndarray
    history: tuple
    geometry_hash: str

    def _facts(self):
        return {"grid": grid_text(self.grid), "electrodes": str(len(self.names)),
                "voltages": voltage_text(self.names, self.voltages),
                "geometry_hash": self.geometry_hash[:12], "data": megabytes(self.unit, self.hermite)}

    @classmethod
    def build(cls, grid, table, raster, names, voltages, unit, history, geometry_hash) -> BasisMaps:
        """Basis maps from node values, computing the Hermite data."""
        return cls(grid, table, raster, tuple(names), tuple(float(v) for v in voltages), unit,
                   basis_hermite(grid, raster, unit), tuple(history), geometry_hash)

    def settings(self, given: Mapping[str, object] | None = None) -> dict:
        """Every electrode's setting: the ``given`` one where named, else the setup's voltage.

        Raises
        ------
        ValueError
            For a name that is not an electrode of these maps.
        """
        return named_settings(self.names, self.voltages, given, "electrode")

    def combine(self, voltages: Mapping[str, float] | None = None) -> PotentialMap:
        """The potential map of a voltage set.

        Parameters
        ----------
        voltages : mapping of electrode name to volts, optional
            Electrodes not named keep the setup's voltage.

        Raises
        ------
        ValueError
            For a name that is not an electrode of these maps.
        """
        volts = {name: float(value) for name, value in self.settings(voltages).items()}
        weights = np.array([volts[n] for n in self.names])
        hermite = np.tensordot(weights, self.hermite, axes=1)
        return PotentialMap(self.grid, self.table, self.raster, self.names, tuple(weights.tolist()),
                            hermite)


def basis_maps(setup, unit_solution) -> BasisMaps:
    """Basis maps of a setup from its solved unit maps.

    Parameters
    ----------
    setup : tracer.config.Setup
    unit_solution : tracer.solver.UnitSolution
        The unit maps solved on ``Grid.from_domain(setup.domain)``.
    """
    names = tuple(e.name for e in setup.electrodes)
    volts = setup.voltages()
    return BasisMaps.build(Grid.from_domain(setup.domain), shape_table(setup.electrodes, setup.domain),
                           unit_solution.raster, names, [volts[n] for n in names], unit_solution.unit,
                           unit_solution.history, setup.geometry_hash())


def solve_basis(setup, *, rtol: float = 1e-10, progress=None) -> BasisMaps:
    """Solve the unit maps of a setup and return its basis maps (no cache).

    Parameters
    ----------
    setup : tracer.config.Setup
    rtol : float
        Relative residual the solver converges to.
    progress : callable, optional
        Passed to the solver.
    """
    from tracer.solver import solve_unit_maps  # the solver's kernels compile only when solving

    grid = Grid.from_domain(setup.domain)
    table = shape_table(setup.electrodes, setup.domain)
    return basis_maps(setup, solve_unit_maps(grid, table, rtol=rtol, progress=progress))
