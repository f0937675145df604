"""Electrode shapes in the (z, r) half-plane: point tests, exact surface crossings, rasterizing.

Shapes
------
Every shape is a closed region of the (z, r) plane (``r`` is the radius in axial symmetry, ``y`` in
planar symmetry).  A ``Rect`` becomes a 4-vertex polygon; a ``Polygon`` may be concave and is tested
by its crossing number; an ``Arc`` is the sector ``rho_in <= rho <= rho_out``,
``theta_lo <= theta <= theta_hi`` about its centre (cz, cr) with ``rho = hypot(z - cz, r - cr)``
and ``theta = atan2(r - cr, z - cz)`` measured from the +z direction toward +r.  In axial symmetry
and in a mirrored planar domain the centre lies on the axis (cr = 0) and callers pass ``r >= 0``,
so ``theta`` lies in [0, pi] and ``rho_in = 0`` with angles [0, pi] is a solid ball (or a solid
cylinder along x in planar symmetry).  In a planar domain with a full y range the centre may lie
anywhere and ``theta`` runs over [-pi, pi] toward +y, so an arc with angles [0, pi] is only the
half above its centre and a full disc needs [-pi, pi]; the angle test works modulo 2 pi, so a
range such as [pi/2, 3 pi/2] is the sector on the -z side.

Shapes are clipped to the domain: each shape's bounding box is cut to the domain rectangle, points
outside it are outside the shape and surface crossings outside it are ignored.

Rasterizing
-----------
A node counts as inside an electrode when it lies in one of its shapes or within ``SNAP`` of a
spacing (along z, r or a diagonal) of one: such nodes are snapped onto the conductor so that no free
node has a vanishingly short arm.  The cell map is built from the shape boundaries sampled at no more
than a quarter of the smaller spacing; every cell within reach of a sample is marked as cut, which
over-marks cells close to a surface but never leaves a cell that a surface touches marked free.
Boundary pieces lying on the axis or mirror plane (``r = 0`` in a mirrored domain) are not surfaces
and mark no cells.
Cells that no boundary of a shape reaches are wholly inside or wholly outside that shape; one point
test per run of such cells along r decides which.
"""

import math
from dataclasses import dataclass

import numpy as np

from tracer.jit import njit
from tracer.schema import Arc, ConfigError, Polygon, Rect

POLYGON = 0
SECTOR = 1
SNAP = 1e-6
"""Nodes closer than this fraction of a spacing to a surface are snapped into the conductor."""

_TWO_PI = 2.0 * math.pi
_ANGLE_TOL = 1e-12
_EDGE_TOL = 1e-12
_OVERLAP_SAMPLES = 512


@dataclass(frozen=True, eq=False)
class ShapeTable:
    """All electrode shapes as flat arrays for the numba kernels.

    Attributes
    ----------
    kind : int64[n]
        ``POLYGON`` (0) or ``SECTOR`` (1) per shape.
    owner : int64[n]
        Electrode index of each shape (order of the electrodes given).
    start, count : int64[n]
        Slice of ``points`` holding a polygon's vertices (count 0 for sectors).
    points : float64[m, 2]
        Polygon vertices (z, r) in metres.
    sector : float64[n, 6]
        ``(cz, rho_in, rho_out, theta_lo, theta_hi, cr)`` for sector rows, (cz, cr) the centre
        (zeros otherwise).
    bbox : float64[n, 4]
        ``(zlo, zhi, rlo, rhi)``: the shape's bounding box cut to the domain.
    names : tuple of str
        Electrode names by index.
    """

    kind: np.ndarray
    owner: np.ndarray
    start: np.ndarray
    count: np.ndarray
    points: np.ndarray
    sector: np.ndarray
    bbox: np.ndarray
    names: tuple[str, ...]

    def arrays(self):
        """``(kind, owner, start, count, points, sector, bbox)``, the kernels' trailing arguments."""
        return self.kind, self.owner, self.start, self.count, self.points, self.sector, self.bbox


def index_dtype(n):
    """The smallest signed integer dtype that holds electrode indices -2 .. n - 1."""
    for dtype in (np.int8, np.int16, np.int32):
        if n <= np.iinfo(dtype).max:
            return np.dtype(dtype)
    return np.dtype(np.int64)


@dataclass(frozen=True, eq=False)
class Raster:
    """The geometry on a node grid.

    Attributes
    ----------
    owner : int[nz, nr]
        -1 for a free node; k for a node inside (or on, or within ``SNAP`` of) electrode k.
    arm : float64[nz, nr, 4]
        For free nodes, the distance to the first conductor surface in directions
        (+z, -z, +r, -r) as a fraction of hz or hr; 1.0 when the neighbour node is reached first.
        Conductor nodes and arms leaving the grid carry 1.0.  On the axis or mirror row the -r arm
        is the mirror image of the +r arm.
    arm_owner : int[nz, nr, 4]
        Electrode met on that arm: the surface's electrode when ``arm < 1``, the neighbour node's
        owner when the arm ends on a conductor node, -1 when it ends on a free node (or leaves the grid).
    cell : int[nz - 1, nr - 1]
        Cell ``[iz, ir]`` spans nodes ``iz..iz+1`` and ``ir..ir+1``: -1 no surface touches it,
        -2 a surface passes through or near it (or a shape lies inside it), k wholly inside electrode k.

    The integer arrays are stored in the smallest signed dtype that holds their electrode indices
    (``index_dtype``, int8 for up to 127 electrodes), whatever dtype they are given in.
    """

    owner: np.ndarray
    arm: np.ndarray
    arm_owner: np.ndarray
    cell: np.ndarray

    def __post_init__(self):
        labels = ("owner", "arm_owner", "cell")
        top = max(int(np.max(getattr(self, name), initial=-1)) for name in labels)
        dtype = index_dtype(top + 1)
        for name in labels:
            object.__setattr__(self, name, np.ascontiguousarray(getattr(self, name), dtype=dtype))
        object.__setattr__(self, "arm", np.ascontiguousarray(self.arm, dtype=np.float64))


# ----------------------------------------------------------------------------------------------
# point tests


@njit(cache=True, error_model="numpy")
def _in_angle(theta, lo, hi):
    """True when ``theta`` lies in [lo, hi] modulo 2 pi."""
    span = hi - lo
    if span >= _TWO_PI - _ANGLE_TOL:
        return True
    d = theta - lo
    d -= _TWO_PI * math.floor(d / _TWO_PI)
    if d > _TWO_PI - _ANGLE_TOL:
        d -= _TWO_PI
    return d <= span + _ANGLE_TOL


@njit(cache=True, error_model="numpy", inline="always")
def sector_row(sector, j):
    """(cz, rho_in, rho_out, theta_lo, theta_hi, cr) of sector row j."""
    return sector[j, 0], sector[j, 1], sector[j, 2], sector[j, 3], sector[j, 4], sector[j, 5]


@njit(cache=True, error_model="numpy")
def _inside_polygon(z, r, points, s, n):
    inside = False
    az = points[s + n - 1, 0]
    ar = points[s + n - 1, 1]
    for i in range(s, s + n):
        bz = points[i, 0]
        br = points[i, 1]
        if (ar > r) != (br > r):
            if z < az + (r - ar) * (bz - az) / (br - ar):
                inside = not inside
        az = bz
        ar = br
    return inside


@njit(cache=True, error_model="numpy")
def _inside_sector(z, r, row):
    dz = z - row[0]
    dr = r - row[5]
    rho2 = dz * dz + dr * dr
    if rho2 < row[1] * row[1] or rho2 > row[2] * row[2]:
        return False
    return _in_angle(math.atan2(dr, dz), row[3], row[4])


@njit(cache=True, error_model="numpy")
def _contains(j, z, r, kind, start, count, points, sector):
    """Shape j (unclipped) contains the point."""
    if kind[j] == POLYGON:
        return _inside_polygon(z, r, points, start[j], count[j])
    return _inside_sector(z, r, sector[j])


@njit(cache=True, error_model="numpy")
def _inside_shape(j, z, r, kind, start, count, points, sector, bbox):
    if z < bbox[j, 0] or z > bbox[j, 1] or r < bbox[j, 2] or r > bbox[j, 3]:
        return False
    return _contains(j, z, r, kind, start, count, points, sector)


@njit(cache=True, error_model="numpy")
def electrode_at(z, r, kind, owner, start, count, points, sector, bbox):
    """The electrode containing a point.

    Parameters
    ----------
    z, r : float
        The point (r >= 0 in axial symmetry and in a mirrored planar domain).
    kind, owner, start, count, points, sector, bbox
        ``ShapeTable.arrays()``.

    Returns
    -------
    int
        Electrode index, or -1 in free space.  A point exactly on a surface may go either way.
    """
    for j in range(kind.size):
        # the box test stays inline: a call per shape would cost reference counting on every array
        if z < bbox[j, 0] or z > bbox[j, 1] or r < bbox[j, 2] or r > bbox[j, 3]:
            continue
        if _contains(j, z, r, kind, start, count, points, sector):
            return owner[j]
    return -1


# ----------------------------------------------------------------------------------------------
# surface crossings


@njit(cache=True, error_model="numpy")
def _hit_edge(z, r, dz, dr, az, ar, bz, br):
    """Parameter t in [0, 1] where the segment meets edge a-b, or 2.0 (parallel or missed)."""
    ez = bz - az
    er = br - ar
    den = dz * er - dr * ez
    if den == 0.0:
        return 2.0
    wz = az - z
    wr = ar - r
    t = (wz * er - wr * ez) / den
    s = (wz * dr - wr * dz) / den
    if 0.0 <= t <= 1.0 and -_EDGE_TOL <= s <= 1.0 + _EDGE_TOL:
        return t
    return 2.0


@njit(cache=True, error_model="numpy")
def _hit_circle(z, r, dz, dr, row, rho):
    """Smallest t in [0, 1] where the segment meets the sector's arc of radius rho, or 2.0."""
    fz = z - row[0]
    fr = r - row[5]
    a = dz * dz + dr * dr
    b = fz * dz + fr * dr
    c = fz * fz + fr * fr - rho * rho
    disc = b * b - a * c
    if disc < 0.0 or a == 0.0:
        return 2.0
    q = -(b + math.copysign(math.sqrt(disc), b))
    t1 = q / a
    t2 = c / q if q != 0.0 else t1
    best = 2.0
    for t in (min(t1, t2), max(t1, t2)):
        if 0.0 <= t <= 1.0 and _in_angle(math.atan2(fr + t * dr, fz + t * dz), row[3], row[4]):
            best = t
            break
    return best


@njit(cache=True, error_model="numpy")
def _hit_sector(z, r, dz, dr, row):
    t = _hit_circle(z, r, dz, dr, row, row[2])
    if row[1] > 0.0:
        t = min(t, _hit_circle(z, r, dz, dr, row, row[1]))
    if row[4] - row[3] < _TWO_PI - _ANGLE_TOL:
        for a in (row[3], row[4]):
            c = math.cos(a)
            s = math.sin(a)
            t = min(t, _hit_edge(z, r, dz, dr, row[0] + row[1] * c, row[5] + row[1] * s, row[0] + row[2] * c,
                                 row[5] + row[2] * s))
    return t


@njit(cache=True, error_model="numpy")
def _hit_shape(j, z, r, dz, dr, kind, start, count, points, sector):
    """Smallest t in [0, 1] where the segment meets shape j's boundary (unclipped), or 2.0."""
    if kind[j] == SECTOR:
        return _hit_sector(z, r, dz, dr, sector[j])
    s = start[j]
    n = count[j]
    t = 2.0
    az = points[s + n - 1, 0]
    ar = points[s + n - 1, 1]
    for i in range(s, s + n):
        bz = points[i, 0]
        br = points[i, 1]
        t = min(t, _hit_edge(z, r, dz, dr, az, ar, bz, br))
        az = bz
        ar = br
    return t


@njit(cache=True, error_model="numpy")
def first_hit(z, r, dz, dr, kind, owner, start, count, points, sector, bbox):
    """The first conductor surface on a straight segment.

    Parameters
    ----------
    z, r : float
        Start of the segment.
    dz, dr : float
        The segment runs from (z, r) to (z + dz, r + dr).
    kind, owner, start, count, points, sector, bbox
        ``ShapeTable.arrays()``.

    Returns
    -------
    t : float
        Smallest t in [0, 1] where the segment meets a shape boundary inside the domain; 2.0 if none.
    who : int
        Electrode of that surface, -1 if none.
    """
    zlo = min(z, z + dz)
    zhi = max(z, z + dz)
    rlo = min(r, r + dr)
    rhi = max(r, r + dr)
    best = 2.0
    who = -1
    for j in range(kind.size):
        if zhi < bbox[j, 0] or zlo > bbox[j, 1] or rhi < bbox[j, 2] or rlo > bbox[j, 3]:
            continue
        t = _hit_shape(j, z, r, dz, dr, kind, start, count, points, sector)
        if t < best:
            hz = z + t * dz
            hr = r + t * dr
            if bbox[j, 0] <= hz <= bbox[j, 1] and bbox[j, 2] <= hr <= bbox[j, 3]:
                best = t
                who = owner[j]
    return best, who


@njit(cache=True, error_model="numpy", inline="always")
def _boxes_meet(zlo, zhi, rlo, rhi, az, ar, bz, br):
    """True when the box (zlo..zhi, rlo..rhi) meets the bounding box of segment a-b."""
    return not (max(az, bz) < zlo or min(az, bz) > zhi or max(ar, br) < rlo or min(ar, br) > rhi)


@njit(cache=True, error_model="numpy")
def near_boundary(zlo, zhi, rlo, rhi, kind, owner, start, count, points, sector, bbox):
    """Whether a shape boundary may pass through a box of the (z, r) plane (never False when one
    does): a polygon edge whose bounding box meets it, a sector arc whose radius lies between the
    box's nearest and farthest distances from the centre, or a sector side as an edge."""
    for j in range(kind.size):
        if zhi < bbox[j, 0] or zlo > bbox[j, 1] or rhi < bbox[j, 2] or rlo > bbox[j, 3]:
            continue
        if kind[j] == POLYGON:
            s, n = start[j], count[j]
            for i in range(n):
                a, b = s + (i - 1) % n, s + i
                if _boxes_meet(zlo, zhi, rlo, rhi, points[a, 0], points[a, 1], points[b, 0], points[b, 1]):
                    return True
            continue
        cz, rho_in, rho_out, lo, hi, cr = sector_row(sector, j)
        near_z = min(max(cz, zlo), zhi) - cz
        near_r = min(max(cr, rlo), rhi) - cr
        far_z = max(abs(zlo - cz), abs(zhi - cz))
        far_r = max(abs(rlo - cr), abs(rhi - cr))
        d_lo, d_hi = math.hypot(near_z, near_r), math.hypot(far_z, far_r)
        if d_lo <= rho_out <= d_hi or (rho_in > 0.0 and d_lo <= rho_in <= d_hi):
            return True
        if hi - lo < _TWO_PI - _ANGLE_TOL:
            for a in (lo, hi):
                c, s_ = math.cos(a), math.sin(a)
                if _boxes_meet(zlo, zhi, rlo, rhi, cz + rho_in * c, cr + rho_in * s_, cz + rho_out * c,
                               cr + rho_out * s_):
                    return True
    return False


@njit(cache=True, error_model="numpy")
def _edge_normal(z, r, az, ar, bz, br, sign):
    """Distance from (z, r) to segment a-b and its unit normal (rotated clockwise from a-b,
    times ``sign``); distance inf for a segment of no length."""
    ez = bz - az
    er = br - ar
    length2 = ez * ez + er * er
    if length2 == 0.0:
        return math.inf, 0.0, 0.0
    t = min(1.0, max(0.0, ((z - az) * ez + (r - ar) * er) / length2))
    length = math.sqrt(length2)
    return math.hypot(z - az - t * ez, r - ar - t * er), sign * er / length, -sign * ez / length


@njit(cache=True, error_model="numpy")
def surface_normal(z, r, electrode, axis, kind, owner, start, count, points, sector, bbox):
    """Outward unit normal (n_z, n_r) of the surface of an electrode nearest a point.

    Parameters
    ----------
    z, r : float
        A point on (or near) the electrode's surface, e.g. where a ray landed.
    electrode : int
        The electrode's index.
    axis : bool
        True when r = 0 is the axis or a mirror plane: boundary pieces lying on it are not
        surfaces and are skipped.
    kind, owner, start, count, points, sector, bbox
        ``ShapeTable.arrays()``.

    Returns
    -------
    (n_z, n_r) : float
        Pointing out of the conductor; (0, 0) when the electrode has no surface.  Polygon edges
        take their outward side from the polygon's orientation; a sector's arcs are radial, its
        straight sides tangential.
    """
    best, nz, nr = math.inf, 0.0, 0.0
    for j in range(kind.size):
        if owner[j] != electrode:
            continue
        if kind[j] == POLYGON:
            s, n = start[j], count[j]
            area = 0.0
            for i in range(n):
                a, b = s + (i - 1) % n, s + i
                area += points[a, 0] * points[b, 1] - points[b, 0] * points[a, 1]
            sign = 1.0 if area >= 0.0 else -1.0
            for i in range(n):
                a, b = s + (i - 1) % n, s + i
                if axis and points[a, 1] == 0.0 and points[b, 1] == 0.0:
                    continue
                d, ez, er = _edge_normal(z, r, points[a, 0], points[a, 1], points[b, 0],
                                         points[b, 1], sign)
                if d < best:
                    best, nz, nr = d, ez, er
            continue
        cz, rho_in, rho_out, lo, hi, cr = sector_row(sector, j)
        rho = math.hypot(z - cz, r - cr)
        theta = math.atan2(r - cr, z - cz)
        if _in_angle(theta, lo, hi) and rho > 0.0:
            for radius, sign in ((rho_out, 1.0), (rho_in, -1.0)):
                if radius > 0.0 and abs(rho - radius) < best:
                    best, nz, nr = abs(rho - radius), sign * (z - cz) / rho, sign * (r - cr) / rho
        if hi - lo < _TWO_PI - _ANGLE_TOL:
            for a, sign in ((lo, -1.0), (hi, 1.0)):
                c, s_ = math.cos(a), math.sin(a)
                # the straight side from rho_in to rho_out at angle a; outward turns away from the sector
                d = _edge_normal(z, r, cz + rho_in * c, cr + rho_in * s_, cz + rho_out * c,
                                 cr + rho_out * s_, 1.0)[0]
                if d < best:
                    best, nz, nr = d, -sign * s_, sign * c
    return nz, nr


@njit(cache=True, error_model="numpy")
def surface_normals(z, r, electrode, axis, kind, owner, start, count, points, sector, bbox):
    """:func:`surface_normal` at many points (arrays); (0, 0) where ``electrode`` is -1."""
    nz = np.zeros(z.size)
    nr = np.zeros(z.size)
    for k in range(z.size):
        if electrode[k] >= 0:
            nz[k], nr[k] = surface_normal(z[k], r[k], electrode[k], axis, kind, owner, start,
                                          count, points, sector, bbox)
    return nz, nr


# ----------------------------------------------------------------------------------------------
# building the table


def sector_bbox(cz, rho_in, rho_out, lo, hi, cr=0.0):
    """(zlo, zhi, rlo, rhi): the bounding box of the sector about (cz, cr) (a ``sector`` row)."""
    angles = [lo, hi] + [k * math.pi / 2 for k in range(4) if _in_angle(k * math.pi / 2, lo, hi)]
    zs, rs = [], []
    for rho in (rho_in, rho_out):
        for a in angles:
            zs.append(cz + rho * math.cos(a))
            rs.append(cr + rho * math.sin(a))
    return min(zs), max(zs), min(rs), max(rs)


def _rows(electrodes):
    """Per shape: (electrode index, key path, kind, vertices or sector row)."""
    rows = []
    for i, electrode in enumerate(electrodes):
        seen = {"rect": 0, "polygon": 0, "arc": 0}
        for shape in electrode.shapes:
            if isinstance(shape, Rect):
                name = "rect"
                (z0, z1), (r0, r1) = shape.z_m, shape.r_m
                data = ((z0, r0), (z1, r0), (z1, r1), (z0, r1))
            elif isinstance(shape, Polygon):
                name = "polygon"
                data = tuple(shape.points_m)
            elif isinstance(shape, Arc):
                name = "arc"
                data = (shape.center_z_m, *shape.radii_m, *shape.angles_rad, shape.center_r_m)
            else:
                raise TypeError(f"electrode[{i}]: unknown shape {shape!r}")
            rows.append((i, f"electrode[{i}].{name}[{seen[name]}]", name, data))
            seen[name] += 1
    return rows


@njit(cache=True, error_model="numpy")
def _meets_rect(j, zlo, zhi, rlo, rhi, kind, start, count, points, sector, bbox):
    """True when shape j and the closed rectangle have a point in common."""
    cz = (zlo, zhi, zhi, zlo)
    cr = (rlo, rlo, rhi, rhi)
    for k in range(4):
        if _inside_shape(j, cz[k], cr[k], kind, start, count, points, sector, bbox):
            return True
        m = (k + 1) % 4
        if _hit_shape(j, cz[k], cr[k], cz[m] - cz[k], cr[m] - cr[k], kind, start, count, points, sector) <= 1.0:
            return True
    if kind[j] == POLYGON:
        pz = points[start[j], 0]
        pr = points[start[j], 1]
    else:
        row = sector[j]
        pz = row[0] + row[2] * math.cos(row[3])
        pr = row[5] + row[2] * math.sin(row[3])
    return zlo <= pz <= zhi and rlo <= pr <= rhi


@njit(cache=True, error_model="numpy")
def _overlap(ja, jb, zlo, zhi, rlo, rhi, nz, nr, kind, start, count, points, sector, bbox):
    """True when a sample of an nz x nr lattice over the box, with a small plus-shaped
    neighbourhood, lies inside both shapes."""
    sz = (zhi - zlo) / nz
    sr = (rhi - rlo) / nr
    d = 0.25 * min(sz, sr)
    oz = (0.0, d, -d, 0.0, 0.0)
    orr = (0.0, 0.0, 0.0, d, -d)
    for iz in range(nz):
        for ir in range(nr):
            z = zlo + (iz + 0.5) * sz
            r = rlo + (ir + 0.5) * sr
            both = True
            for k in range(5):
                if not (
                    _inside_shape(ja, z + oz[k], r + orr[k], kind, start, count, points, sector, bbox)
                    and _inside_shape(jb, z + oz[k], r + orr[k], kind, start, count, points, sector, bbox)
                ):
                    both = False
                    break
            if both:
                return True
    return False


def _share_area(table, a, b, bb, cell):
    """True when shapes a and b share area (bb: the shapes' bounding boxes cut to the domain)."""
    zlo, zhi = max(bb[a, 0], bb[b, 0]), min(bb[a, 1], bb[b, 1])
    rlo, rhi = max(bb[a, 2], bb[b, 2]), min(bb[a, 3], bb[b, 3])
    if zhi <= zlo or rhi <= rlo:
        return False
    nz = min(_OVERLAP_SAMPLES, max(4, math.ceil(4 * (zhi - zlo) / cell)))
    nr = min(_OVERLAP_SAMPLES, max(4, math.ceil(4 * (rhi - rlo) / cell)))
    return _overlap(a, b, zlo, zhi, rlo, rhi, nz, nr,
                    table.kind, table.start, table.count, table.points, table.sector, table.bbox)


def overlapping_electrodes(table, cell):
    """Pairs ``(i, j)``, i < j, of electrodes whose shapes share area (at the same voltage, as
    ``shape_table`` refuses the others); such electrodes must keep one voltage.

    Parameters
    ----------
    table : ShapeTable
    cell : float
        The cell (m), which sets how finely a shared box is sampled.
    """
    pairs = set()
    for a in range(table.kind.size):
        for b in range(a + 1, table.kind.size):
            i, j = sorted((int(table.owner[a]), int(table.owner[b])))
            if i != j and (i, j) not in pairs and _share_area(table, a, b, table.bbox, cell):
                pairs.add((i, j))
    return tuple(sorted(pairs))


def _check_overlaps(table, electrodes, keys, bb, cell):
    """Raise ConfigError when shapes of two electrodes at different voltages share area
    (bb: the shapes' bounding boxes cut to the domain)."""
    for a in range(table.kind.size):
        for b in range(a + 1, table.kind.size):
            ea, eb = electrodes[table.owner[a]], electrodes[table.owner[b]]
            if table.owner[a] == table.owner[b] or ea.drive == eb.drive:
                continue
            if _share_area(table, a, b, bb, cell):
                raise ConfigError(
                    keys[b],
                    f"overlaps {keys[a]} of electrode {ea.name!r} ({_carries(ea)}) while "
                    f"electrode {eb.name!r} is at {_carries(eb)}",
                )


def _carries(electrode):
    """What an electrode carries, in words: its voltage, and whether a waveform rides on it."""
    return f"{electrode.voltage_V:g} V" + ("" if electrode.waveform is None else " with a waveform")


def shape_table(electrodes, domain):
    """Collect the electrodes' shapes into a ShapeTable, clipped to the domain.

    Parameters
    ----------
    electrodes : sequence of tracer.schema.Electrode
    domain : tracer.schema.Domain

    Returns
    -------
    ShapeTable

    Raises
    ------
    ConfigError
        A shape wholly outside the domain (key ``electrode[i].<kind>[j]``), or shapes of two
        electrodes at different voltages that share area (overlaps narrower than about a
        quarter of a cell are not detected).
    """
    rows = _rows(electrodes)
    n = len(rows)
    kind = np.zeros(n, dtype=np.int64)
    owner = np.zeros(n, dtype=np.int64)
    start = np.zeros(n, dtype=np.int64)
    count = np.zeros(n, dtype=np.int64)
    sector = np.zeros((n, 6))
    bbox = np.zeros((n, 4))
    points = []
    for j, (i, _, name, data) in enumerate(rows):
        owner[j] = i
        if name == "arc":
            kind[j] = SECTOR
            sector[j] = data
            bbox[j] = sector_bbox(*data)
        else:
            kind[j] = POLYGON
            start[j] = len(points)
            count[j] = len(data)
            points.extend(data)
            zs, rs = zip(*data)
            bbox[j] = (min(zs), max(zs), min(rs), max(rs))
    points = np.array(points, dtype=np.float64).reshape(-1, 2)
    (z0, z1), (r0, r1) = domain.z_m, domain.r_m
    for j, (i, key, _, _) in enumerate(rows):
        if not _meets_rect(j, z0, z1, r0, r1, kind, start, count, points, sector, bbox):
            raise ConfigError(key, f"electrode {electrodes[i].name!r}: the shape lies wholly outside the domain")
    clipped = np.column_stack(
        (np.maximum(bbox[:, 0], z0), np.minimum(bbox[:, 1], z1), np.maximum(bbox[:, 2], r0), np.minimum(bbox[:, 3], r1))
    )
    tol = 1e-9 * max(z1 - z0, r1 - r0)  # so that crossings on the domain's sides count
    table = ShapeTable(
        kind=kind,
        owner=owner,
        start=start,
        count=count,
        points=points,
        sector=sector,
        bbox=clipped + np.array([-tol, tol, -tol, tol]),
        names=tuple(e.name for e in electrodes),
    )
    _check_overlaps(table, electrodes, [key for _, key, _, _ in rows], clipped, domain.cell_m)
    return table


# ----------------------------------------------------------------------------------------------
# rasterizing


@njit(cache=True, error_model="numpy")
def _cell_range(lo, hi, x0, h, ncell):
    """Cells [i0, i1] whose closed span [x0 + i h, x0 + (i + 1) h] meets [lo, hi], clamped."""
    i0 = max(int(math.ceil((lo - x0) / h)) - 1, 0)
    i1 = min(int(math.floor((hi - x0) / h)), ncell - 1)
    return i0, i1


@njit(cache=True, error_model="numpy")
def _mark(pz, pr, j, geo, stamp, touched):
    """Mark every cell within reach of the boundary sample (pz, pr) as touched by shape j."""
    z0, r0, hz, hr, reach_z, reach_r = geo[0], geo[1], geo[2], geo[3], geo[4], geo[5]
    ncz, ncr = stamp.shape
    iz0, iz1 = _cell_range(pz - reach_z, pz + reach_z, z0, hz, ncz)
    ir0, ir1 = _cell_range(pr - reach_r, pr + reach_r, r0, hr, ncr)
    for iz in range(iz0, iz1 + 1):
        for ir in range(ir0, ir1 + 1):
            stamp[iz, ir] = j
            touched[iz, ir] = True


@njit(cache=True, error_model="numpy")
def _mark_segment(az, ar, bz, br, j, step, geo, stamp, touched):
    if geo[6] > 0.0 and max(ar, br) <= geo[1] + 1e-9 * geo[3]:
        return  # lies on the axis or mirror plane: not a surface
    n = max(1, int(math.ceil(math.hypot(bz - az, br - ar) / step)))
    for i in range(n + 1):
        f = i / n
        _mark(az + f * (bz - az), ar + f * (br - ar), j, geo, stamp, touched)


@njit(cache=True, error_model="numpy")
def _mark_arc(cz, cr, rho, lo, span, j, step, geo, stamp, touched):
    n = max(8, int(math.ceil(rho * span / step)))
    for i in range(n + 1):
        a = lo + span * i / n
        _mark(cz + rho * math.cos(a), cr + rho * math.sin(a), j, geo, stamp, touched)


@njit(cache=True, error_model="numpy")
def _mark_boundary(j, kind, start, count, points, sector, step, geo, stamp, touched):
    """Sample shape j's boundary at spacing <= step and mark the cells it may touch."""
    if kind[j] == POLYGON:
        s = start[j]
        n = count[j]
        for i in range(n):
            k = s + (i + 1) % n
            _mark_segment(points[s + i, 0], points[s + i, 1], points[k, 0], points[k, 1], j, step, geo, stamp, touched)
        return
    cz, rho_in, rho_out, lo, hi, cr = sector_row(sector, j)
    span = min(hi - lo, _TWO_PI)
    _mark_arc(cz, cr, rho_out, lo, span, j, step, geo, stamp, touched)
    if rho_in > 0.0:
        _mark_arc(cz, cr, rho_in, lo, span, j, step, geo, stamp, touched)
    if span < _TWO_PI - _ANGLE_TOL:
        for a in (lo, hi):
            c = math.cos(a)
            s = math.sin(a)
            _mark_segment(cz + rho_in * c, cr + rho_in * s, cz + rho_out * c, cr + rho_out * s, j, step, geo,
                          stamp, touched)


@njit(cache=True, error_model="numpy")
def _snapped_inside(j, z, r, dz, dr, kind, start, count, points, sector, bbox):
    """Shape j contains the point or one of its eight neighbours at offsets (dz, dr)."""
    for oz in (0.0, -dz, dz):
        for orr in (0.0, -dr, dr):
            if _inside_shape(j, z + oz, r + orr, kind, start, count, points, sector, bbox):
                return True
    return False


@njit(cache=True, error_model="numpy")
def _fill_shape(j, kind, owner, start, count, points, sector, bbox, geo, stamp, inside, node):
    """Decide cells and nodes in shape j's box: cells untouched by its boundary by one point test
    per run along r, nodes next to its boundary by an exact (snapped) test."""
    z0, r0, hz, hr, reach_z, reach_r = geo[0], geo[1], geo[2], geo[3], geo[4], geo[5]
    ncz, ncr = stamp.shape
    iz0, iz1 = _cell_range(bbox[j, 0] - reach_z, bbox[j, 1] + reach_z, z0, hz, ncz)
    ir0, ir1 = _cell_range(bbox[j, 2] - reach_r, bbox[j, 3] + reach_r, r0, hr, ncr)
    if iz1 < iz0 or ir1 < ir0:
        return
    state = np.empty((iz1 - iz0 + 1, ir1 - ir0 + 1), dtype=np.int8)  # 0 out, 1 in, 2 touched
    for iz in range(iz0, iz1 + 1):
        run = -1
        for ir in range(ir0, ir1 + 1):
            if stamp[iz, ir] == j:
                run = -1
                state[iz - iz0, ir - ir0] = 2
                continue
            if run < 0:
                zc = z0 + (iz + 0.5) * hz
                rc = r0 + (ir + 0.5) * hr
                run = 1 if _inside_shape(j, zc, rc, kind, start, count, points, sector, bbox) else 0
            state[iz - iz0, ir - ir0] = run
            if run == 1 and inside[iz, ir] < 0:
                inside[iz, ir] = owner[j]
    dz = SNAP * hz
    dr = SNAP * hr
    for iz in range(iz0, iz1 + 2):
        for ir in range(ir0, ir1 + 2):
            if node[iz, ir] >= 0:
                continue
            known = -1
            cut = False
            for cz in range(max(iz - 1, iz0), min(iz, iz1) + 1):
                for cr in range(max(ir - 1, ir0), min(ir, ir1) + 1):
                    s = state[cz - iz0, cr - ir0]
                    if s == 2:
                        cut = True
                    else:
                        known = s
            if cut:
                z = z0 + iz * hz
                r = r0 + ir * hr
                if _snapped_inside(j, z, r, dz, dr, kind, start, count, points, sector, bbox):
                    node[iz, ir] = owner[j]
            elif known == 1:
                node[iz, ir] = owner[j]


_DZ = (1, -1, 0, 0)
_DR = (0, 0, 1, -1)


@njit(cache=True, error_model="numpy")
def _arms(node, touched, kind, owner, start, count, points, sector, bbox, geo, mirror, arm, arm_owner):
    """Arms of the free nodes at corners of touched cells; snap nodes with arms shorter than SNAP."""
    z0, r0, hz, hr = geo[0], geo[1], geo[2], geo[3]
    nz, nr = node.shape
    near = np.zeros((nz, nr), dtype=np.bool_)
    for iz in range(nz - 1):
        for ir in range(nr - 1):
            if touched[iz, ir]:
                near[iz : iz + 2, ir : ir + 2] = True
    for iz in range(nz):
        for ir in range(nr):
            if not near[iz, ir] or node[iz, ir] >= 0:
                continue
            z = z0 + iz * hz
            r = r0 + ir * hr
            snap = -1
            for k in range(4):
                jz = iz + _DZ[k]
                jr = ir + _DR[k]
                if jz < 0 or jz >= nz or jr < 0 or jr >= nr:
                    continue
                t, who = first_hit(z, r, _DZ[k] * hz, _DR[k] * hr, kind, owner, start, count, points, sector, bbox)
                if who >= 0:
                    arm[iz, ir, k] = t
                    arm_owner[iz, ir, k] = who
                    if t < SNAP:
                        snap = who
            if snap >= 0:
                node[iz, ir] = snap
                arm[iz, ir, :] = 1.0
                arm_owner[iz, ir, :] = -1
    for iz in range(nz):
        for ir in range(nr):
            if not near[iz, ir] or node[iz, ir] >= 0:
                continue
            for k in range(4):
                jz = iz + _DZ[k]
                jr = ir + _DR[k]
                if jz < 0 or jz >= nz or jr < 0 or jr >= nr:
                    continue
                if arm_owner[iz, ir, k] < 0 and node[jz, jr] >= 0:
                    arm_owner[iz, ir, k] = node[jz, jr]
    if mirror:
        for iz in range(nz):
            arm[iz, 0, 3] = arm[iz, 0, 2]
            arm_owner[iz, 0, 3] = arm_owner[iz, 0, 2]


@njit(cache=True, error_model="numpy")
def _rasterize(kind, owner, start, count, points, sector, bbox, z0, r0, hz, hr, mirror, node, arm, arm_owner, cell):
    """Fill the Raster arrays ``node`` (-1), ``arm`` (1.0), ``arm_owner`` (-1) and ``cell`` (-1),
    given with those values."""
    nz, nr = node.shape
    step = 0.25 * min(hz, hr)
    geo = np.array([z0, r0, hz, hr, 0.5 * step + 1e-3 * hz, 0.5 * step + 1e-3 * hr, 1.0 if mirror else 0.0])
    stamp = np.full((nz - 1, nr - 1), -1, dtype=np.int32)
    touched = np.zeros((nz - 1, nr - 1), dtype=np.bool_)
    for j in range(kind.size):
        _mark_boundary(j, kind, start, count, points, sector, step, geo, stamp, touched)
        _fill_shape(j, kind, owner, start, count, points, sector, bbox, geo, stamp, cell, node)
    _arms(node, touched, kind, owner, start, count, points, sector, bbox, geo, mirror, arm, arm_owner)
    for iz in range(nz - 1):  # cells not wholly inside an electrode: touched (-2) or free (-1)
        for ir in range(nr - 1):
            if cell[iz, ir] < 0 and touched[iz, ir]:
                cell[iz, ir] = -2


def rasterize(table, grid):
    """Rasterize the shapes on a grid: node owners, Shortley–Weller arms and the cell map.

    Parameters
    ----------
    table : ShapeTable
    grid : tracer.grid.Grid

    Returns
    -------
    Raster
    """
    dtype = index_dtype(len(table.names))
    nz, nr = grid.nz, grid.nr
    node = np.full((nz, nr), -1, dtype=dtype)
    arm = np.ones((nz, nr, 4))
    arm_owner = np.full((nz, nr, 4), -1, dtype=dtype)
    cell = np.full((nz - 1, nr - 1), -1, dtype=dtype)
    _rasterize(*table.arrays(), grid.z0, grid.r0, grid.hz, grid.hr, grid.mirror, node, arm, arm_owner, cell)
    return Raster(owner=node, arm=arm, arm_owner=arm_owner, cell=cell)
