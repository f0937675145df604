"""Beam statistics over the structured arrays of a traced beam.

Pure functions of the per-ray rows (``BeamRun.records``, ``BeamRun.starts``,
``BeamRun.at_plane(name)``: fields ``ray``, ``status``, ``electrode``,
``time_s``, ``x_m``, ``y_m``, ``z_m``, ``px``, ``py``, ``pz``, ``energy_eV``).
Moments are population moments (divided by N).  An empty selection gives NaN
for every moment, without a warning.

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
from dataclasses import dataclass

import numpy as np
from scipy import constants


def _mean(a):
    """Mean of an array, NaN when empty."""
    return float(np.mean(a)) if len(a) else math.nan


def _std(a):
    """Population standard deviation, NaN when empty."""
    return float(np.std(a)) if len(a) else math.nan


def _extreme(a, fn):
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


@dataclass(frozen=True)
class PlaneStats:
    """Statistics of the rays that crossed a plane.

    Attributes
    ----------
    count : int
        Crossings recorded (rows).
    fraction : float
        Distinct rays that crossed, over the rays started.
    centroid_x_m, centroid_y_m : float
        Mean transverse position.
    rms_radius_m : float
        sqrt(<(x - <x>)^2 + (y - <y>)^2>): the rms radius about the centroid
        (the spot size).
    rms_radius_axis_m : float
        sqrt(<x^2 + y^2>): the rms radius about the axis.
    rms_x_m, rms_y_m : float
        Standard deviations of x and y.
    rms_divergence_x_rad, rms_divergence_y_rad : float
        Standard deviations of the slopes x' = px/pz and y' = py/pz.
    emittance_x_m_rad, emittance_y_m_rad : float
        rms emittances of the x-x' and y-y' planes (module notes).
    norm_emittance_x_m_rad, norm_emittance_y_m_rad : float
        beta gamma times the rms emittances.
    beta_gamma : float
        <|p|> / (m c).
    energy_mean_eV, energy_std_eV : float
        Kinetic energy mean and standard deviation.
    time_mean_s, time_std_s : float
        Time of flight to the plane, mean and standard deviation.
    """

    count: int
    fraction: float
    centroid_x_m: float
    centroid_y_m: float
    rms_radius_m: float
    rms_radius_axis_m: float
    rms_x_m: float
    rms_y_m: float
    rms_divergence_x_rad: float
    rms_divergence_y_rad: float
    emittance_x_m_rad: float
    emittance_y_m_rad: float
    norm_emittance_x_m_rad: float
    norm_emittance_y_m_rad: float
    beta_gamma: float
    energy_mean_eV: float
    energy_std_eV: float
    time_mean_s: float
    time_std_s: float


def plane_stats(rows, species, n_started):
    """Statistics of the rays recorded at a plane.

    Parameters
    ----------
    rows : ndarray
        Structured rows, one per crossing of the plane (``BeamRun.at_plane``); a ray
        that crosses twice contributes two rows to the moments but counts once in
        ``fraction``.
    species : tracer.species.Species
        The beam's species (its mass sets beta gamma).
    n_started : int
        Rays started in the beam (the denominator of ``fraction``).

    Returns
    -------
    PlaneStats
    """
    x, y = rows["x_m"], rows["y_m"]
    px, py, pz = rows["px"], rows["py"], rows["pz"]
    xs, ys = px / pz, py / pz
    cx, cy = _mean(x), _mean(y)
    beta_gamma = _mean(np.sqrt(px * px + py * py + pz * pz)) / (species.mass_kg * constants.c)
    ex, ey = rms_emittance(x, xs), rms_emittance(y, ys)
    return PlaneStats(
        count=len(rows),
        fraction=len(np.unique(rows["ray"])) / n_started if n_started else math.nan,
        centroid_x_m=cx,
        centroid_y_m=cy,
        rms_radius_m=math.sqrt(_mean((x - cx) ** 2 + (y - cy) ** 2)),
        rms_radius_axis_m=math.sqrt(_mean(x * x + y * y)),
        rms_x_m=_std(x),
        rms_y_m=_std(y),
        rms_divergence_x_rad=_std(xs),
        rms_divergence_y_rad=_std(ys),
        emittance_x_m_rad=ex,
        emittance_y_m_rad=ey,
        norm_emittance_x_m_rad=beta_gamma * ex,
        norm_emittance_y_m_rad=beta_gamma * ey,
        beta_gamma=beta_gamma,
        energy_mean_eV=_mean(rows["energy_eV"]),
        energy_std_eV=_std(rows["energy_eV"]),
        time_mean_s=_mean(rows["time_s"]),
        time_std_s=_std(rows["time_s"]),
    )


@dataclass(frozen=True)
class LandingStats:
    """The rays that landed on one electrode.

    Attributes
    ----------
    electrode : str
    count : int
    fraction : float
        ``count`` over all rays of the records.
    current_A : float
        Sum of the landed rays' ``weight_A`` (NaN when no weights are known).
    energy_mean_eV, energy_std_eV, energy_min_eV, energy_max_eV : float
        Landing kinetic energies.
    radius_min_m, radius_max_m : float
        Range of the landing radius: r = hypot(x, y) in axial symmetry, y (signed)
        in planar symmetry.
    """

    electrode: str
    count: int
    fraction: float
    current_A: float
    energy_mean_eV: float
    energy_std_eV: float
    energy_min_eV: float
    energy_max_eV: float
    radius_min_m: float
    radius_max_m: float


def landing_stats(records, electrode, weight_A=None, symmetry="axial"):
    """Statistics of the rays with status ``"landed"`` on one electrode.

    Parameters
    ----------
    records : ndarray
        ``BeamRun.records``: one row per ray started.
    electrode : str
        The electrode's name.
    weight_A : ndarray, optional
        The current of each row of ``records`` (same order; e.g. the start
        states' ``weight_A``, which are in ray order too).  Default: the
        records' own ``weight_A`` field if they have one.
    symmetry : {"axial", "planar"}
        Which transverse coordinate is the landing "radius".

    Returns
    -------
    LandingStats
    """
    if weight_A is None and "weight_A" in records.dtype.names:
        weight_A = records["weight_A"]
    hit = (records["status"] == "landed") & (records["electrode"] == electrode)
    rows = records[hit]
    r = radius(rows, symmetry)
    energy = rows["energy_eV"]
    return LandingStats(
        electrode=electrode,
        count=len(rows),
        fraction=len(rows) / len(records) if len(records) else math.nan,
        current_A=math.nan if weight_A is None else float(np.sum(np.asarray(weight_A)[hit])),
        energy_mean_eV=_mean(energy),
        energy_std_eV=_std(energy),
        energy_min_eV=_extreme(energy, np.min),
        energy_max_eV=_extreme(energy, np.max),
        radius_min_m=_extreme(r, np.min),
        radius_max_m=_extreme(r, np.max),
    )


def landings(records, weight_A=None, symmetry="axial"):
    """:func:`landing_stats` for every electrode that some ray landed on.

    Returns
    -------
    dict[str, LandingStats]
        In order of the electrode names.
    """
    names = np.unique(records["electrode"][records["status"] == "landed"])
    return {str(name): landing_stats(records, str(name), weight_A, symmetry) for name in names}


def loss_reasons(records):
    """How many rays ended with each status.

    Parameters
    ----------
    records : ndarray
        ``BeamRun.records``.

    Returns
    -------
    dict[str, int]
        Count per status (``"landed"``, ``"plane"``, ``"left"``, ``"time"``,
        ``"inside"``, ...), for the statuses that occur, sorted by name.
    """
    names, counts = np.unique(records["status"], return_counts=True)
    return {str(name): int(count) for name, count in zip(names, counts)}
