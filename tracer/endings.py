"""How the rays of a beam ended: a warning for each way other than landing or stopping on a plane,
where the rays that left the domain went, and the energy reference of the start.

A ray ends "landed" (on an electrode) or "plane" (on a detector plane that stops rays) when the
optics did what was asked of it.  Every other ending is a figure the user must see, because the
beam's other figures quietly leave those rays out:

* ``"time"``: still flying at ``[trace] max_time_us``;
* ``"inside"``: started inside an electrode, never traced;
* ``"left"``: left the domain through an outer edge;
* ``"stalled"``: the step size underflowed or the step budget ran out.

:func:`status_warnings` gives one line for each that occurs, with its count, its share of the rays
and what to change; :func:`left_summary` says through which edge the rays left and with what kinetic
energy; :func:`energy_reference` states the potential at the start, which ``energy_eV`` is measured
from, and :func:`expected_landing_eV` the landing energy it implies on an electrode (energy
conservation, E = E0 + q (V0 - V_electrode)).
"""

from __future__ import annotations

import numpy as np

from tracer.stats import extreme, mean, radius

ADVICE = {
    "time": ("still flying at the time limit", "raise [trace] max_time_us"),
    "inside": ("started inside an electrode and were not traced",
               "move the beam's start (start_z_mm, start_r_mm, its radius) out of the metal"),
    "left": ("left the domain through an outer edge", "widen [domain] if they should have landed or crossed a plane"),
    "stalled": ("stalled (step size underflow or step budget)", "loosen [trace] rtol or look for a sharp field"),
}
"""For each ending other than landed and plane: what it means, and what to change."""

GOOD = ("landed", "plane")
"""The endings that need no warning."""


def status_warnings(records) -> list[str]:
    """One warning line for each ending other than landed or plane that some ray had.

    Parameters
    ----------
    records : numpy.ndarray
        ``BeamRun.records`` (fields ``status`` and, for ``"inside"``, ``electrode``).

    Returns
    -------
    list of str
        For example ``"29 of 100 rays (29.0%) started inside an electrode and were not traced
        ('cup'): move the beam's start ..."``, in the order of :data:`ADVICE`.
    """
    n = len(records)
    out = []
    for status, (meaning, change) in ADVICE.items():
        hit = records["status"] == status
        count = int(hit.sum())
        if not count:
            continue
        where = ""
        if status == "inside":
            where = " (" + ", ".join(repr(str(e)) for e in np.unique(records["electrode"][hit])) + ")"
        out.append(f"{count} of {n} rays ({count / n:.1%}) {meaning}{where}: {change}")
    return out


def edges(symmetry, mirror=False):
    """The outer edges' names: ``z_min``, ``z_max`` and the transverse sides (the axis or a mirror
    plane is no edge)."""
    side = "r" if symmetry == "axial" else "y"
    return ("z_min", "z_max") + (() if mirror else (f"{side}_min",)) + (f"{side}_max",)


def left_summary(records, bounds_m, symmetry="axial", mirror=False) -> dict:
    """Where the rays that left the domain crossed its edge, and with what kinetic energy.

    Parameters
    ----------
    records : numpy.ndarray
        ``BeamRun.records``.
    bounds_m : tuple of float
        The domain ``(z_min, z_max, transverse_min, transverse_max)`` in metres.
    symmetry : {"axial", "planar"}
    mirror : bool
        True when the transverse minimum is the axis or a mirror plane (no edge).

    Returns
    -------
    dict
        By edge (:func:`edges`; only the edges some ray left through), ``count``, ``fraction`` (of
        all rays), ``energy_mean_eV``, ``energy_min_eV``, ``energy_max_eV``, ``z_min_m``,
        ``z_max_m`` and ``transverse_min_m``, ``transverse_max_m`` (r in axial, y in planar
        symmetry) of the exit points.  Empty when no ray left or the bounds are unknown.
    """
    rows = records[records["status"] == "left"]
    if not len(rows) or len(bounds_m) != 4:
        return {}
    z0, z1, t0, t1 = bounds_m
    z, t = rows["z_m"], radius(rows, symmetry)
    names = edges(symmetry, mirror)
    gaps = {"z_min": z - z0, "z_max": z1 - z, names[-1]: t1 - t}
    if not mirror:
        gaps[names[2]] = t - t0
    keys = list(gaps)
    nearest = np.argmin(np.abs(np.stack([gaps[k] for k in keys])), axis=0)
    out = {}
    for k, edge in enumerate(keys):
        sel = nearest == k
        if not sel.any():
            continue
        e = rows["energy_eV"][sel]
        out[edge] = {"count": int(sel.sum()), "fraction": float(sel.sum()) / len(records),
                     "energy_mean_eV": mean(e), "energy_min_eV": extreme(e, np.min),
                     "energy_max_eV": extreme(e, np.max),
                     "z_min_m": extreme(z[sel], np.min), "z_max_m": extreme(z[sel], np.max),
                     "transverse_min_m": extreme(t[sel], np.min), "transverse_max_m": extreme(t[sel], np.max)}
    return {edge: out[edge] for edge in names if edge in out}


def energy_reference(starts, start_potential_V) -> dict:
    """The potential at the rays' start points, which their ``energy_eV`` is measured from.

    Parameters
    ----------
    starts : numpy.ndarray
        ``BeamRun.starts`` (``energy_eV``: the kinetic energy at the start point).
    start_potential_V : numpy.ndarray
        The potential at each start point.

    Returns
    -------
    dict
        ``start_potential_V`` (mean), ``start_potential_min_V``, ``start_potential_max_V``,
        ``start_energy_eV`` (mean kinetic energy at the start); empty when the potentials are
        unknown (a result read from a file).
    """
    if len(start_potential_V) != len(starts) or not len(starts):
        return {}
    return {"start_potential_V": mean(start_potential_V),
            "start_potential_min_V": extreme(start_potential_V, np.min),
            "start_potential_max_V": extreme(start_potential_V, np.max),
            "start_energy_eV": mean(starts["energy_eV"])}


def expected_landing_eV(starts, start_potential_V, charge_e, voltage_V, rays=None) -> float:
    """The mean kinetic energy energy conservation gives on a surface at ``voltage_V``.

    E = E0 + q (V0 - V), E0 the kinetic energy and V0 the potential at each ray's start, q in e.

    Parameters
    ----------
    starts : numpy.ndarray
        ``BeamRun.starts``.
    start_potential_V : numpy.ndarray
        The potential at each start point.
    charge_e : float
        The species' charge in elementary charges (signed).
    voltage_V : float
        The electrode's voltage.
    rays : numpy.ndarray of int, optional
        The rays to average over (default: all).

    Returns
    -------
    float
        NaN when the start potentials are unknown or no ray is selected.
    """
    if len(start_potential_V) != len(starts):
        return float("nan")
    rays = slice(None) if rays is None else rays
    return mean(starts["energy_eV"][rays] + charge_e * (start_potential_V[rays] - voltage_V))
