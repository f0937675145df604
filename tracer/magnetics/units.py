"""Unit fields of coils on the map's grid, combined by current.

B is linear in the coil currents as V is in the electrode voltages, so each coil's field at 1 A
(its *unit field*) is sampled once per geometry onto the electric map's grid (once per process,
and kept in the maps cache when there is one: :func:`coil_unit`), and the field of any
set of currents is the weighted sum (the weights looked up by
:func:`tracer.fieldmap.named_settings`, as for voltages).  Axial profiles are no coils: their sum
is one fixed term added to every combination.

What is sampled is the azimuthal vector potential A_theta, as node data (A, dA/dz, dA/dr,
d2A/dzdr) of the bicubic Hermite patch of :mod:`tracer.fieldmap`, with::

    dA/dz = -B_r,   dA/dr = B_z - A/r  (B_z/2 on the axis),
    d2A/dzdr = d/dz (dA/dr) = dB_z/dz + B_r/r  (dB_z/dz / 2 on the axis),

each from the source's closed form (dB_z/dz too: :func:`tracer.magnetics.loop.loop_unit`, the
profiles' series), the nodes shared among numba's threads for coils.

The field is then the exact curl of the interpolated A_theta::

    B_z = A/r + dA/dr  (2 dA/dr on the axis, where A = 0),   B_r = -dA/dz,

so div B = 0 holds exactly and a ray's canonical angular momentum r p_theta + q r A_theta is
conserved exactly in the interpolated field (Busch's theorem, the magnetic twin of the energy
ledger).  The interpolation error of A_theta falls as the cell to the fourth power, that of B
as its third.
"""

from __future__ import annotations

import dataclasses
import functools
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from tracer.fieldmap import hermite_eval, named_settings
from tracer.jit import njit
from tracer.magnetics.coil import coil_field
from tracer.magnetics.loop import over_points

def node_data(z, r, source) -> np.ndarray:
    """Hermite node data of A_theta at points from a source's closed form (module docstring).

    Parameters
    ----------
    z, r : ndarray
        Points (m, r >= 0), of one shape.
    source : callable
        ``source(z, r) -> (A_phi, B_z, B_r, dB_z/dz)`` at arrays of points.

    Returns
    -------
    float64[4, *z.shape]
    """
    a, bz, br, bz_z = source(z, r)
    off = r > 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.stack([a, -br, np.where(off, bz - a / r, 0.5 * bz),
                         np.where(off, bz_z + br / r, 0.5 * bz_z)])


def grid_data(grid, source) -> np.ndarray:
    """Hermite node data of A_theta at every node of an axially symmetric grid: float64[4, nz, nr]."""
    return node_data(*np.meshgrid(grid.z, grid.r, indexing="ij"), source)


def coil_sampler(grid, coil):
    """``sample(z, r)``: the node data of a coil's A_theta at 1 A at points (of ``grid``)."""
    return lambda z, r: node_data(z, r, lambda zz, rr: coil_field(coil, zz, rr, 1.0, slope=True,
                                                                    threads=True))


_SAMPLED: OrderedDict = OrderedDict()
"""Coils' unit fields sampled in this process, by grid and winding; the newest ``KEEP_SAMPLED``."""
KEEP_SAMPLED = 16


def coil_unit(grid, coil, cache_dir=None) -> np.ndarray:
    """A coil's unit field on a grid: the node data of its A_theta at 1 A, float64[4, nz, nr]
    (read-only).

    Sampled once per grid and winding (section and turns; not the name or the current) in a
    process; with a ``cache_dir``, read from the maps cache instead, or sampled and written there
    (:func:`tracer.cache.cached_coil_field`).
    """
    key = (grid, coil.winding)
    if key in _SAMPLED:
        _SAMPLED.move_to_end(key)
        return _SAMPLED[key]
    sample = coil_sampler(grid, coil)
    if cache_dir is None:
        data = sample(*np.meshgrid(grid.z, grid.r, indexing="ij"))
    else:
        from tracer.cache import cached_coil_field

        data = cached_coil_field(grid, coil, cache_dir, sample)
    data.flags.writeable = False
    _SAMPLED[key] = data
    while len(_SAMPLED) > KEEP_SAMPLED:
        _SAMPLED.popitem(last=False)
    return data


@njit(cache=True, error_model="numpy")
def magnetic_eval(h, z0, hz, hr, nz, nr, z, r):
    """A_theta, B_z and B_r at one point from the node data of A_theta (module docstring).

    r may be negative (a point across the axis in a cut through it): A_theta and B_r then change
    sign with r, as components along the direction of +r.
    """
    ra = abs(r)
    a, az, ar = hermite_eval(h, z0, 0.0, hz, hr, nz, nr, False, z, ra)
    bz = 2.0 * ar if ra == 0.0 else a / ra + ar
    if r < 0.0:
        return -a, bz, az
    return a, bz, -az


@njit(cache=True, error_model="numpy")
def _eval_many(h, z0, hz, hr, nz, nr, z, r, a, bz, br):
    for k in range(z.size):
        a[k], bz[k], br[k] = magnetic_eval(h, z0, hz, hr, nz, nr, z[k], r[k])


@dataclass(frozen=True, eq=False)
class MagneticMap:
    """The axially symmetric magnetic field of one set of coil currents, on the map's grid.

    Attributes
    ----------
    grid : tracer.grid.Grid
    names : tuple of str
        Coil names.
    currents : tuple of float
        Each coil's current (A).
    hermite : float64[4, nz, nr]
        Node data of A_theta (T m).
    """

    grid: object
    names: tuple
    currents: tuple
    hermite: np.ndarray

    def evaluate(self, z, r):
        """(A_theta, B_z, B_r) at points (T m, T, T), z and r broadcast together."""
        g = self.grid
        return over_points(_eval_many, (self.hermite, g.z0, g.hz, g.hr, g.nz, g.nr), z, r)

    def field(self, z, r):
        """(B_z, B_r) in tesla at points: the curl of the interpolated A_theta."""
        return self.evaluate(z, r)[1:]

    def on_axis(self, z) -> np.ndarray:
        """B_z on the axis (T) at z: the field paraxial optics uses."""
        return self.evaluate(z, 0.0)[1]


@dataclass(frozen=True, eq=False)
class MagneticUnits:
    """The unit field of every coil (1 A) and the fixed field of the axial profiles, on a grid.

    Attributes
    ----------
    grid : tracer.grid.Grid
    names : tuple of str
        Coil names, in the order of the setup.
    currents : tuple of float
        The setup's currents, the defaults for ``combine``.
    unit : float64[n_coils, 4, nz, nr]
        Node data of each coil's A_theta at 1 A.
    fixed : float64[4, nz, nr]
        Node data of the profiles' A_theta.
    """

    grid: object
    names: tuple
    currents: tuple
    unit: np.ndarray
    fixed: np.ndarray

    @classmethod
    def build(cls, grid, coils=(), profiles=(), cache_dir=None) -> MagneticUnits:
        """The coils' unit fields (:func:`coil_unit`, with its cache) and the profiles sampled
        onto an axially symmetric grid."""
        if grid.symmetry != "axial":
            raise ValueError(f"coils and axial profiles need an axially symmetric grid, "
                             f"not {grid.symmetry!r}")
        unit = np.stack([coil_unit(grid, c, cache_dir) for c in coils]
                        ) if coils else np.zeros((0, 4, grid.nz, grid.nr))
        fixed = np.zeros((4, grid.nz, grid.nr))
        for p in profiles:
            fixed += grid_data(grid, functools.partial(p.field, slope=True))
        return cls(grid, tuple(c.name for c in coils), tuple(float(c.current_A) for c in coils),
                   unit, fixed)

    def settings(self, given: Mapping[str, float] | None = None) -> dict:
        """Every coil's current: the ``given`` one where named, else the setup's (ValueError for
        an unknown coil)."""
        return named_settings(self.names, self.currents, given, "coil")

    def combine(self, currents: Mapping[str, float] | None = None) -> MagneticMap:
        """The magnetic map of a set of currents (A); coils not named keep the setup's."""
        amps = {n: float(v) for n, v in self.settings(currents).items()}
        weights = np.array([amps[n] for n in self.names])
        hermite = self.fixed + np.tensordot(weights, self.unit, axes=1)
        return MagneticMap(self.grid, self.names, tuple(weights.tolist()), hermite)


@functools.lru_cache(maxsize=8)
def profiles_field(grid, profiles) -> np.ndarray:
    """The node data of the axial profiles' A_theta on a grid, computed once per grid in a process."""
    return MagneticUnits.build(grid, (), profiles).fixed


def unit_fields(grid, coils, profiles, cache_dir=None) -> MagneticUnits:
    """:meth:`MagneticUnits.build` of coils and axial profiles on a grid: each coil's unit field
    and the profiles' field computed once per grid in a process (a scan's rows and the error bars'
    grids reuse them), the coils' also cached in ``cache_dir`` when given."""
    if not profiles:
        return MagneticUnits.build(grid, coils, (), cache_dir)
    return dataclasses.replace(MagneticUnits.build(grid, coils, (), cache_dir),
                               fixed=profiles_field(grid, profiles))


def traced_sources(spec, grid, currents: Mapping[str, float] | None = None, cache_dir=None):
    """The magnetic sources of a setup as :func:`tracer.beam.trace` takes them, or None.

    Parameters
    ----------
    spec : tracer.schema.MagneticSpec
        The setup's coils, axial fields and uniform fields.
    grid : tracer.grid.Grid
        The grid of the potential map the rays are traced through.
    currents : mapping of str to float, optional
        Coil currents (A) that replace the setup's.
    cache_dir : str or os.PathLike, optional
        The maps cache, where the coils' unit fields are read or written (:func:`coil_unit`).

    Returns
    -------
    tuple or None
        The :class:`MagneticMap` of the coils and axial fields (when there are any), then the
        uniform fields; None without any source.
    """
    if not spec:
        return None
    maps = (unit_fields(grid, spec.coils, spec.profiles, cache_dir).combine(currents),) if (
        spec.coils or spec.profiles) else ()
    return maps + tuple(spec.uniform)



def node_field(sources, grid) -> dict:
    """B at the nodes of a map's grid (T), by component, from the sources as the kernel traces
    them (:func:`traced_sources`; None or empty: ``{}``).

    In axial symmetry ``{"z", "r"}``: the field of the coils and axial fields (the curl of their
    interpolated A_theta, as the rays see it); a uniform field there has no rotational symmetry
    and is left out.  In planar symmetry ``{"x", "y", "z"}``: the uniform fields in the plane
    x = 0 of the rays.  ``{}`` when there is nothing to show in the grid's symmetry.
    """
    z, r = np.meshgrid(grid.z, grid.r, indexing="ij")
    sources = tuple(sources or ())
    if grid.symmetry == "axial":
        parts = [s.field(z, r) for s in sources if isinstance(s, MagneticMap)]
        return dict(zip("zr", (sum(c) for c in zip(*parts)))) if parts else {}
    parts = [s.field(0.0, r, z) for s in sources if not isinstance(s, MagneticMap)]
    return dict(zip("xyz", (sum(c) for c in zip(*parts)))) if parts else {}
