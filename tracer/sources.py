"""Beam sources: the start state of every ray of a beam.

A source is described by a :class:`tracer.config.Beam`: where the rays start
(a disc, uniform or Gaussian, possibly offset from the axis), in which
directions (a cone uniform in solid angle, Gaussian slopes, or Lambert's
cosine law), and with what kinetic energy (monoenergetic, a Gaussian spread,
a thermal emitter, or a mix).  A user may instead give the rays in a CSV file
(:func:`read_rays_csv`).  Everything is drawn from ``numpy.random.default_rng``
seeded with the beam's seed, so a beam always starts the same rays.

Geometry
--------
z is the optical axis; rays start in the plane ``z = start_z`` and move
towards +z.

* Axial symmetry: the source is a disc centred at ``x = start_r``, ``y = 0``;
  the cone of directions is a full cone about +z.
* Planar symmetry (the fields do not depend on x: a slit source): the disc
  becomes a line segment across the slit, in y, centred at ``y = start_r``;
  every ray starts at ``x = 0`` with no x momentum, and the cone becomes a fan
  in the (y, z) plane.

Profiles (``radius`` is R)
--------------------------
``"uniform"``
    Uniform over the disc of radius R (axial), or over ``|y - start_r| <= R``
    (planar).  Moments: <r^2> = R^2 / 2 (rms radius R/sqrt(2), rms x and y
    R/2); planar: rms y R/sqrt(3).
``"gaussian"``
    R is the standard deviation *per transverse coordinate*: x and y are each
    normal with sigma R, so the rms radius about the centre is sqrt(2) R in
    the axial case; planar: y has sigma R.

Angular distributions (``half_angle`` is alpha)
-----------------------------------------------
``"uniform"``
    Uniform in solid angle within the cone of polar angle theta <= alpha
    (alpha up to 180 degrees, the full sphere): cos(theta) is uniform on
    [cos(alpha), 1].  Planar: theta uniform on [-alpha, alpha].
``"gaussian"``
    The slopes x' = px/pz and y' = py/pz are each normal with sigma alpha
    (the small-angle Gaussian; rays always move forward).  Planar: only y'.
``"cosine"``
    Lambert's cosine law of a thermal or diffuse emitter: the number of rays
    per unit solid angle is proportional to cos(theta), so
    P(theta) ∝ cos(theta) sin(theta) on [0, alpha] and sin^2(theta) is
    uniform on [0, sin^2(alpha)].  Lambert emission fills at most the forward
    hemisphere: any alpha >= 90 degrees gives the full hemisphere.  Planar:
    P(theta) ∝ cos(theta) on [-alpha, alpha], sin(theta) uniform.

Kinetic energies
----------------
The kinetic energy at the start is the sum of

* ``energy_eV`` plus, when ``energy_spread_eV > 0``, a normal deviate of that
  standard deviation; this part is truncated to positive values (drawn from
  the normal distribution conditioned on a positive result);
* when ``temperature_K`` is given, a thermal part drawn from the energy
  distribution of the particles that cross a surface out of a Maxwellian gas
  at temperature T (the emitted flux), E exp(-E/kT) / (kT)^2, a gamma
  distribution of shape 2 and scale kT with mean 2kT (common practice; the
  flux, or effusion, distribution of kinetic theory, e.g. Reif 1965).  Set
  ``energy_eV = 0`` for a purely thermal emitter; pair it with
  ``angles = "cosine"``, the angular law of the same flux.

Momenta follow from the kinetic energy relativistically,
p c = sqrt(K^2 + 2 K m c^2).

Start times
-----------
Rays start at ``start_time`` on the trace's clock (the clock of the electrode
waveforms), or spread about it over ``start_spread``: ``"uniform"`` over
[start_time - spread/2, start_time + spread/2], or ``"gaussian"`` with the
spread as its full width at half maximum (sigma = FWHM / (2 sqrt(2 ln 2)), the
profile of a short ionising pulse).  The times are drawn after everything
else, so a spread leaves the rays' positions, directions and energies as they
are without it.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
from scipy import constants
from scipy.special import ndtr, ndtri

from tracer.bounds import BOUNDS
from tracer.schema import START_TIMES

SYMMETRIES = ("axial", "planar")
PROFILES = ("uniform", "gaussian")
ANGLES = ("uniform", "gaussian", "cosine")

START_DTYPE = np.dtype([
    ("ray", np.int64),
    ("x_m", np.float64), ("y_m", np.float64), ("z_m", np.float64),
    ("px", np.float64), ("py", np.float64), ("pz", np.float64),
    ("energy_eV", np.float64),
    ("weight_A", np.float64),
    ("time_s", np.float64),
])
"""The start state of a ray: position (m), momentum (kg m/s), kinetic energy
(eV), the current the ray carries (A) and its start time on the trace's
clock (s)."""

USER_RAY_DTYPE = np.dtype([
    ("x_m", np.float64), ("y_m", np.float64), ("z_m", np.float64),
    ("ux", np.float64), ("uy", np.float64), ("uz", np.float64),
    ("energy_eV", np.float64),
    ("weight_A", np.float64),
])
"""A ray read from a CSV file: position (m), unit direction, kinetic energy
(eV) and current (A; NaN when the file has no weight column)."""


def momentum(energy_eV, mass_kg):
    """Relativistic momentum from kinetic energy.

    Parameters
    ----------
    energy_eV : float or ndarray
        Kinetic energy K in eV (>= 0).
    mass_kg : float
        Rest mass m in kg.

    Returns
    -------
    float or ndarray
        |p| in kg m/s, from p c = sqrt(K^2 + 2 K m c^2).
    """
    c = constants.c
    kinetic_J = np.asarray(energy_eV, dtype=np.float64) * constants.e
    return np.sqrt(kinetic_J * (kinetic_J + 2.0 * mass_kg * c * c)) / c


def start_states(beam, *, symmetry="axial"):
    """The start state of every ray of a beam.

    Parameters
    ----------
    beam : tracer.config.Beam
        The source: species, energies, disc, cone, count, seed, current, or
        ``rays_csv`` (then the rays are the file's rows, in order, and
        ``count`` does not apply).
    symmetry : {"axial", "planar"}
        The setup's symmetry; in planar symmetry the disc is a line segment in
        y and the cone a fan in the (y, z) plane (see the module notes).

    Returns
    -------
    ndarray
        Structured array of dtype :data:`START_DTYPE`, one row per ray, with
        ``ray`` = 0, 1, ...  ``weight_A`` is ``current_A / count`` for every
        ray, or 0 when the beam gives no current; for CSV rays it is the
        file's ``weight_A`` column (rescaled to sum to ``current_A`` when the
        beam gives one as well), else as for drawn rays.

    Raises
    ------
    ValueError
        An unknown symmetry, profile or angular law, or a bad CSV file.
    """
    if symmetry not in SYMMETRIES:
        raise ValueError(f"symmetry must be one of {SYMMETRIES}, not {symmetry!r}")
    rng = np.random.default_rng(beam.seed)
    if beam.rays_csv is not None:
        rays = read_rays_csv(beam.rays_csv)
        position = (rays["x_m"], rays["y_m"], rays["z_m"])
        direction = (rays["ux"], rays["uy"], rays["uz"])
        energy = rays["energy_eV"]
        weight = _user_weights(rays["weight_A"], beam.current_A)
    else:
        n = int(beam.count)
        x, y = _positions(rng, n, beam.profile, beam.radius_m, beam.start_r_m, symmetry)
        position = (x, y, np.full(n, float(beam.start_z_m)))
        direction = _directions(rng, n, beam.angles, beam.half_angle_rad, symmetry)
        energy = _energies(rng, n, beam.energy_eV, beam.energy_spread_eV, beam.temperature_K)
        weight = np.full(n, 0.0 if beam.current_A is None else beam.current_A / max(n, 1))
    out = rays_from(position, direction, energy, weight, beam.species.mass_kg)
    out["time_s"] = start_times(rng, len(out), beam.start_time_s, beam.start_spread_s, beam.start_times)
    return out


def start_times(rng, n, start_s, spread_s, law="uniform"):
    """Start times of n rays (module notes): ``start_s`` for all when ``spread_s`` is 0, else
    spread about it, ``"uniform"`` over the spread or ``"gaussian"`` with it as the FWHM."""
    if law not in START_TIMES:
        raise ValueError(f"start_times must be one of {START_TIMES}, not {law!r}")
    if spread_s == 0.0:
        return np.full(n, float(start_s))
    if law == "uniform":
        return start_s + spread_s * (rng.random(n) - 0.5)
    return start_s + spread_s / (2.0 * math.sqrt(2.0 * math.log(2.0))) * rng.standard_normal(n)


def rays_from(position, direction, energy_eV, weight_A, mass_kg):
    """Start states from positions, unit directions, kinetic energies and currents.

    Parameters
    ----------
    position, direction : tuple of three arrays
        (x, y, z) in metres, and the unit direction (ux, uy, uz) of each ray.
    energy_eV, weight_A : ndarray
        Kinetic energy (eV) and current (A) of each ray.
    mass_kg : float

    Returns
    -------
    numpy.ndarray
        Structured array of dtype :data:`START_DTYPE`, rays numbered 0, 1, ...
    """
    energy = np.asarray(energy_eV, dtype=np.float64)
    out = np.zeros(len(energy), dtype=START_DTYPE)
    out["ray"] = np.arange(len(energy))
    out["x_m"], out["y_m"], out["z_m"] = position
    p = momentum(energy, mass_kg)
    out["px"], out["py"], out["pz"] = (p * u for u in direction)
    out["energy_eV"] = energy
    out["weight_A"] = weight_A
    return out


def _user_weights(weight_A, current_A):
    """Per-ray currents for CSV rays (see :func:`start_states`)."""
    n = len(weight_A)
    if np.isnan(weight_A).any():
        return np.full(n, 0.0 if current_A is None else current_A / n)
    if current_A is None:
        return weight_A
    total = weight_A.sum()
    if total <= 0.0:
        raise ValueError("rays file: the weight_A column sums to zero, cannot share current_A")
    return weight_A * (current_A / total)


def _positions(rng, n, profile, radius, offset, symmetry):
    """Transverse start positions (x, y): offset along x (axial) or y (planar)."""
    if profile not in PROFILES:
        raise ValueError(f"profile must be one of {PROFILES}, not {profile!r}")
    if symmetry == "planar":
        y = (radius * (2.0 * rng.random(n) - 1.0) if profile == "uniform"
             else radius * rng.standard_normal(n))
        return np.zeros(n), offset + y
    if profile == "gaussian":
        return offset + radius * rng.standard_normal(n), radius * rng.standard_normal(n)
    r = radius * np.sqrt(rng.random(n))
    phi = 2.0 * np.pi * rng.random(n)
    return offset + r * np.cos(phi), r * np.sin(phi)


def _directions(rng, n, law, half_angle, symmetry):
    """Unit direction vectors (ux, uy, uz) about +z."""
    if law not in ANGLES:
        raise ValueError(f"angles must be one of {ANGLES}, not {law!r}")
    alpha = min(float(half_angle), math.pi)
    if law == "gaussian":
        sy = alpha * rng.standard_normal(n)
        sx = np.zeros(n) if symmetry == "planar" else alpha * rng.standard_normal(n)
        norm = np.sqrt(1.0 + sx * sx + sy * sy)
        return sx / norm, sy / norm, 1.0 / norm
    if symmetry == "planar":
        u = 2.0 * rng.random(n) - 1.0
        if law == "uniform":
            theta = alpha * u
            return np.zeros(n), np.sin(theta), np.cos(theta)
        sin_t = u * math.sin(min(alpha, math.pi / 2))
        return np.zeros(n), sin_t, np.sqrt(1.0 - sin_t * sin_t)
    u = rng.random(n)
    if law == "uniform":
        cos_t = 1.0 - u * (1.0 - math.cos(alpha))
        sin_t = np.sqrt(np.maximum(0.0, 1.0 - cos_t * cos_t))
    else:
        sin_t = np.sqrt(u) * math.sin(min(alpha, math.pi / 2))
        cos_t = np.sqrt(1.0 - sin_t * sin_t)
    phi = 2.0 * np.pi * rng.random(n)
    return sin_t * np.cos(phi), sin_t * np.sin(phi), cos_t


def _energies(rng, n, energy_eV, spread_eV, temperature_K):
    """Kinetic energies in eV (see the module notes)."""
    if spread_eV > 0.0:
        # normal(energy, spread) conditioned on > 0, by inverting the upper tail:
        # P(Z > z) = ndtr(-z), drawn uniformly in (0, ndtr(energy / spread)].
        tail = ndtr(energy_eV / spread_eV)
        z = -ndtri((1.0 - rng.random(n)) * tail)
        energy = energy_eV + spread_eV * z
    else:
        energy = np.full(n, float(energy_eV))
    if temperature_K is not None:
        kT_eV = constants.k * temperature_K / constants.e
        energy = energy + rng.gamma(2.0, kT_eV, n)
    return energy


# --------------------------------------------------------------------------- CSV rays

_LENGTH = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "nm": 1e-9}
_ENERGY = {"eV": 1.0, "keV": 1e3, "MeV": 1e6}
_CURRENT = {"A": 1.0, "mA": 1e-3, "uA": 1e-6, "nA": 1e-9, "pA": 1e-12}
_UNITS = {"x": _LENGTH, "y": _LENGTH, "z": _LENGTH, "energy": _ENERGY, "weight": _CURRENT}
_FIELD = {"x": "x_m", "y": "y_m", "z": "z_m", "energy": "energy_eV", "weight": "weight_A"}
_UNITLESS = ("ux", "uy", "uz", "dx/dz", "dy/dz")
# (quantity, its bound, factor from the SI value to the bound's unit): the ranges of tracer.bounds
_BOUNDED = (("x", BOUNDS["_mm"], 1e3), ("y", BOUNDS["_mm"], 1e3), ("z", BOUNDS["_mm"], 1e3),
            ("energy", BOUNDS["_eV"], 1.0), ("weight", BOUNDS["_A"], 1.0))
# A direction shorter than this is not normalized to a unit vector without losing digits.
_SMALLEST_LENGTH = 1e-150


_RAY_COLUMNS = ("x_mm", "y_mm", "z_mm", "ux", "uy", "uz", "energy_eV", "weight_A")
"""The columns of a landings file that make a start ray."""


def _stopped_rays(path, names, lines):
    """The header and lines of a landings file reduced to the rays stopped on a plane and the
    columns of a start ray (``weight_A`` only when every such ray has one)."""
    rows = [(number, next(csv.reader([line]))) for number, line in lines[1:]]
    status = names.index("status")
    rows = [(number, fields) for number, fields in rows if len(fields) == len(names) and fields[status] == "plane"]
    if not rows:
        raise ValueError(f"{path}: a landings file with no ray stopped on a plane (status 'plane')")
    keep = [c for c in _RAY_COLUMNS if c in names and not (
        c == "weight_A" and any(not math.isfinite(float(f[names.index(c)])) for _, f in rows))]
    at = [names.index(c) for c in keep]
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="")
    lines = [(lines[0][0], ",".join(keep))]
    for number, fields in rows:
        writer.writerow([fields[k] for k in at])
        lines.append((number, out.getvalue()))
        out.seek(0)
        out.truncate()
    return keep, lines


def _column(name, where):
    """(quantity, scale to SI) of a header name such as ``x_mm``."""
    if name in _UNITLESS:
        return name, 1.0
    quantity, _, unit = name.rpartition("_")
    if quantity in _UNITS and unit in _UNITS[quantity]:
        return quantity, _UNITS[quantity][unit]
    base = name if name in _UNITS else quantity
    if base in _UNITS:   # the file's own text is not echoed (it may be any file): only tracer's names
        units = ", ".join(f"{base}_{u}" for u in _UNITS[base])
        problem = "needs a unit" if base == name else "has a unit tracer does not know"
        raise ValueError(f"{where}: the {base} column {problem}; use one of {units}")
    known = "x_mm, y_mm, z_mm (or _m, _um, ...), ux, uy, uz or dx/dz, dy/dz, energy_eV, weight_A"
    raise ValueError(f"{where}: not a column tracer knows; the columns are {known}")


def read_rays_csv(path):
    """Read a user's start rays from a CSV file.

    The first non-comment line is the header; every other non-blank line not
    starting with ``#`` is one ray.  Columns, in any order, each name carrying
    its unit:

    * ``x_<u>``, ``y_<u>``, ``z_<u>``: the start position, ``<u>`` one of
      m, cm, mm, um, nm (required);
    * the direction, either ``ux, uy, uz`` (any vector, normalized by the
      reader) or the slopes ``dx/dz, dy/dz`` (a ray moving towards +z);
    * ``energy_<u>``: kinetic energy, ``<u>`` eV, keV or MeV (required, >= 0);
    * ``weight_<u>``: optional current carried by the ray, ``<u>`` A, mA,
      uA, nA or pA (>= 0).

    A ``landings.csv`` written by a run reads as the rays that stopped on a plane
    (status ``plane``: where an earlier stage ended), with their positions,
    directions, energies and, when the beam had a current, weights; its other
    columns are ignored.

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    ndarray
        Structured array of dtype :data:`USER_RAY_DTYPE` in SI units, one row
        per ray in file order; ``weight_A`` is NaN when there is no weight
        column.

    Raises
    ------
    ValueError
        A missing, unknown, unitless or repeated column, a row with the wrong
        number of fields, a value that is not a finite number, a negative
        energy or weight, a zero direction, or no rays at all; the message
        names the file, the line and the column.
    """
    path = Path(path)
    with path.open(newline="", encoding="utf-8") as handle:
        lines = [(i, line) for i, line in enumerate(handle, start=1)
                 if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise ValueError(f"{path}: no header line")
    head_line, head = lines[0]
    names = [s.strip() for s in next(csv.reader([head]))]
    if {"beam", "status"} <= set(names):
        names, lines = _stopped_rays(path, names, lines)
    columns = {}
    for k, name in enumerate(names, start=1):
        where = f"{path}: line {head_line}, column {k}"
        quantity, scale = _column(name, where)
        if quantity in columns:
            raise ValueError(f"{where}: column {name!r} repeats {names[columns[quantity][0]]!r}")
        columns[quantity] = (k - 1, scale)
    slopes = "dx/dz" in columns or "dy/dz" in columns
    needed = ["x", "y", "z", "energy"] + (["dx/dz", "dy/dz"] if slopes else ["ux", "uy", "uz"])
    missing = [q for q in needed if q not in columns]
    if missing:
        raise ValueError(f"{path}: line {head_line}: missing column(s) "
                         + ", ".join(m if m in _UNITLESS else f"{m}_<unit>" for m in missing)
                         + ("" if slopes else " (or the slopes dx/dz, dy/dz)"))
    if slopes and any(q in columns for q in ("ux", "uy", "uz")):
        raise ValueError(f"{path}: line {head_line}: give the direction as ux, uy, uz "
                         "or as dx/dz, dy/dz, not both")
    values = np.empty((len(lines) - 1, len(names)))
    for row, (number, line) in enumerate(lines[1:]):
        fields = next(csv.reader([line]))
        if len(fields) != len(names):
            raise ValueError(f"{path}: line {number}: {len(fields)} fields, "
                             f"the header has {len(names)}")
        for k, text in enumerate(fields):
            try:
                values[row, k] = float(text)
            except ValueError:
                values[row, k] = math.nan
            if not math.isfinite(values[row, k]):
                raise ValueError(f"{path}: line {number}, column {names[k]!r}: "
                                 "not a finite number")
    if not len(values):
        raise ValueError(f"{path}: no rays below the header")
    rays = np.zeros(len(values), dtype=USER_RAY_DTYPE)
    for quantity, (k, scale) in columns.items():
        if quantity in _FIELD:
            with np.errstate(over="ignore"):   # an overflow is refused below, by the bounds
                rays[_FIELD[quantity]] = values[:, k] * scale
    if "weight" not in columns:
        rays["weight_A"] = math.nan
    if slopes:
        d = np.stack([values[:, columns["dx/dz"][0]], values[:, columns["dy/dz"][0]],
                      np.ones(len(values))], axis=1)
    else:
        d = values[:, [columns[q][0] for q in ("ux", "uy", "uz")]]
    with np.errstate(over="ignore", under="ignore"):
        norm = np.sqrt((d * d).sum(axis=1))
    checks = [("energy", rays["energy_eV"] < 0.0, "negative"),
              ("weight", rays["weight_A"] < 0.0, "negative"),
              ("direction", (d == 0.0).all(axis=1), "a zero vector"),
              ("direction", ~np.isfinite(norm), "its length overflows; give components of a "
               "reasonable size (any length is normalized)"),
              ("direction", norm < _SMALLEST_LENGTH, "its length underflows; give "
               "components of a reasonable size (any length is normalized)")]
    for quantity, bound, factor in _BOUNDED:
        if quantity in columns:
            with np.errstate(over="ignore"):
                checks.append((quantity, ~bound.admits(rays[_FIELD[quantity]] * factor), bound.range_text()))
    for quantity, bad, what in checks:
        if bad.any():
            number = lines[int(np.argmax(bad)) + 1][0]
            column = ("dx/dz, dy/dz" if slopes else "ux, uy, uz") if quantity == "direction" \
                else names[columns[quantity][0]]
            raise ValueError(f"{path}: line {number}, column {column!r}: {what}")
    total = float(rays["weight_A"].sum())
    if "weight" in columns and total > BOUNDS["_A"].hi:
        raise ValueError(f"{path}: column {names[columns['weight'][0]]!r}: the weights sum to {total:g} A, "
                         + BOUNDS["_A"].range_text())
    rays["ux"], rays["uy"], rays["uz"] = (d / norm[:, None]).T
    return rays
