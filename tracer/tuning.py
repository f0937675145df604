"""Tuning: the electrode voltages and coil currents (1 to 4, within bounds) that best meet a goal.

Every trial traces the setup's first beam at one voltage set (with coil currents: through the
coils' unit fields combined by current) through the combined basis maps and measures it with :func:`tracer.measure.row`, so a trial is exactly a scan row.  Goals
(``[tune] goal``, docs/reference.md) and what is minimised:

``smallest_spot`` (at a plane)
    The rms spot radius about the centroid, with the rays that never reach the plane counted at the
    domain's transverse size L: ``sqrt(T s^2 + (1 - T) L^2)`` for transmission T and spot s, so that
    losing rays never looks like focusing them.
``most_transmitted``
    Minus the transmission to the plane, or minus the fraction of rays that do not land on an
    electrode when no plane is named.
``landing_energy`` (a target E in eV)
    ``f |<E_land> - E| + (1 - f) 10 max(E, 1 eV)``: the landed fraction f weighs the miss of the
    mean landing energy (of all landed rays, or the kinetic energy at the plane) against a penalty
    for the rays that do not land (do not cross the plane).
``focus`` (a z position)
    The smallest spot, as above, at a plane placed at that z.

Methods: for one voltage, a coarse grid of ``grid_points`` trials over the bounds, then scipy's
bounded Brent search (``minimize_scalar(method="bounded")``) between the neighbours of the best
grid point, so a narrow optimum is not missed between grid points.  For several voltages, scipy's
differential evolution (a Latin-hypercube start and mutations drawn from the config's
``[tune] seed``) over the bounds scaled to [0, 1], then a bounded Nelder-Mead polish from its best
point.  Trials are deterministic, so a tune is reproducible.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from tracer import footprint
from tracer.display import Shown, number, voltage_text
from tracer.executors import Context
from tracer.schema import ConfigError, Plane, Setup, scan_column

if TYPE_CHECKING:
    from tracer.fieldmap import BasisMaps

LOST_PENALTY = 10.0
"""Landing-energy goal: a ray that does not land counts as a miss of this many times the target."""


@dataclass(frozen=True, repr=False)
class TuneResult(Shown):
    """The best voltages found for a goal.

    Attributes
    ----------
    voltages : dict of str to float
        The best voltage of each varied electrode, volts (amperes for a varied coil, the key's
        unit for a waveform parameter).
    value : float
        The goal's figure there: the spot rms radius (m), the transmission (fraction) or the mean
        landing energy (eV).
    objective : float
        The minimised quantity there (module notes).
    goal : str
    figure : str
        The name of the figure in ``value`` (a scan column name).
    points : numpy structured array
        Every trial in the order tried: ``<electrode>_V`` per varied electrode and ``<coil>_A``
        per varied coil, ``value`` and ``objective``.
    method : str
        The optimiser's description.
    coils : tuple of str
        The varied names that are coils.
    """

    voltages: dict
    value: float
    objective: float
    goal: str
    figure: str
    points: np.ndarray
    method: str
    coils: tuple = ()

    def _facts(self):
        return {"goal": self.goal, "voltages": voltage_text(self.voltages, self.voltages.values(), self.coils),
                self.figure: number(self.value), "evaluations": str(self.evaluations), "method": self.method}

    @property
    def evaluations(self) -> int:
        """Number of voltage sets traced."""
        return len(self.points)


def _target(setup, spec):
    """The plane to trace (or None) and the figure column the goal is read from."""
    planes = {p.name: p for p in setup.planes}
    if spec.goal == "focus":
        return Plane("focus", spec.goal_value), "spot_rms_m"
    plane = planes.get(spec.at) if spec.at is not None else None
    if spec.goal == "smallest_spot":
        if plane is None:
            raise ConfigError("tune.at", "goal 'smallest_spot' needs the plane where the spot is measured")
        return plane, "spot_rms_m"
    if spec.goal == "most_transmitted":
        return plane, "transmission" if plane is not None else "landed"
    return plane, "energy_mean_eV" if plane is not None else "landing_mean_eV"


def _objective(spec, figures, figure, size):
    """The minimised quantity from one trial's figures (a dict by column name)."""
    arrived = figures["transmission"] if "transmission" in figures else figures["landed"]
    value = figures[figure]
    if spec.goal in ("smallest_spot", "focus"):
        spot = value if arrived > 0 else 0.0
        return math.sqrt(arrived * spot * spot + (1.0 - arrived) * size * size)
    if spec.goal == "most_transmitted":
        return -(arrived if figure == "transmission" else 1.0 - arrived)
    miss = abs(value - spec.goal_value) if arrived > 0 else 0.0
    return arrived * miss + (1.0 - arrived) * LOST_PENALTY * max(spec.goal_value, 1.0)


class _Trials:
    """Memoised trials in unit coordinates u in [0, 1]^n, with the record of every one traced."""

    def __init__(self, setup, maps, spec, cache_dir=None):
        self.spec = spec
        self.names = tuple(v[0] for v in spec.vary)
        self.lo = np.array([v[1] for v in spec.vary], dtype=np.float64)
        self.hi = np.array([v[2] for v in spec.vary], dtype=np.float64)
        plane, self.figure = _target(setup, spec)
        self.context = Context.of(setup, maps, self.names, planes=() if plane is None else (plane,),
                                  beams=setup.beams[:1], cache_dir=cache_dir)
        self.columns = self.context.columns
        g = maps.grid
        self.size = g.r1 - g.r0
        self.seen = {}

    def volts(self, u):
        return self.lo + np.clip(np.asarray(u, dtype=np.float64), 0.0, 1.0) * (self.hi - self.lo)

    def __call__(self, u):
        v = self.volts(np.atleast_1d(u))
        key = tuple(v.tolist())
        if key not in self.seen:
            values, _ = self.context.run(v)
            figures = dict(zip(self.columns, values.tolist()))
            self.seen[key] = (figures[self.figure], _objective(self.spec, figures, self.figure, self.size))
        return self.seen[key][1]

    def points(self):
        dtype = [(scan_column(n, self.context.currents), np.float64) for n in self.names] + [
            ("value", np.float64), ("objective", np.float64)]
        return np.array([(*k, *r) for k, r in self.seen.items()], dtype=dtype)


def _one(trials, grid_points):
    """Coarse grid, then bounded Brent between the best grid point's neighbours."""
    from scipy.optimize import minimize_scalar

    u = np.linspace(0.0, 1.0, grid_points)
    best = int(np.argmin([trials([x]) for x in u]))
    lo, hi = u[max(best - 1, 0)], u[min(best + 1, grid_points - 1)]
    minimize_scalar(lambda x: trials([x]), bounds=(lo, hi), method="bounded",
                    options={"xatol": 1e-4 / (grid_points - 1)})
    return f"grid of {grid_points} then bounded Brent (scipy minimize_scalar)"


def _several(trials, seed, popsize, maxiter):
    """Differential evolution with a fixed seed, then a bounded Nelder-Mead polish."""
    from scipy.optimize import differential_evolution, minimize

    n = len(trials.names)
    de = differential_evolution(trials, [(0.0, 1.0)] * n, seed=seed, popsize=popsize,
                                maxiter=maxiter, polish=False, init="latinhypercube", tol=1e-3)
    minimize(trials, de.x, method="Nelder-Mead", bounds=[(0.0, 1.0)] * n,
             options={"xatol": 1e-4, "fatol": 0.0, "maxfev": 40 * n})
    return (f"differential evolution (seed {seed}, popsize {popsize}, maxiter {maxiter}) "
            "then bounded Nelder-Mead (scipy)")


def tune(setup: Setup, maps: BasisMaps | None = None, *, cache_dir: str | os.PathLike | None = None,
         grid_points: int = 11, popsize: int = 8, maxiter: int = 20) -> TuneResult:
    """Find the voltages of the setup's ``[tune]`` that best meet its goal.

    Parameters
    ----------
    setup : tracer.config.Setup
        With ``setup.tune`` (the varied electrodes and bounds, the goal, the plane, the seed) and at
        least one beam (the first beam is traced).
    maps : tracer.fieldmap.BasisMaps, optional
        The setup's basis maps (solved, or loaded from ``cache_dir``, when not given).
    cache_dir : str or os.PathLike, optional
        Cache of basis maps used when ``maps`` is None, and of the coils' unit fields.
    grid_points : int
        One voltage: trials of the coarse grid before the Brent search (at least 3).
    popsize, maxiter : int
        Several voltages: differential evolution's population size (times the number of voltages)
        and generations.

    Returns
    -------
    TuneResult
        The best trial (ties: the one tried first).

    Raises
    ------
    tracer.config.ConfigError
        For a setup without ``[tune]`` or beams, or a goal that needs a plane without one.
    """
    spec = setup.tune
    if spec is None:
        raise ConfigError("tune", "missing: the setup has no [tune] section")
    if not setup.beams:
        raise ConfigError("beam", "missing: tuning traces the setup's first [[beam]]")
    footprint.check(setup)
    if maps is None:
        from tracer.pipeline import solve

        maps = solve(setup, cache_dir=cache_dir)
    trials = _Trials(setup, maps, spec, cache_dir)
    if len(trials.names) == 1:
        method = _one(trials, max(3, int(grid_points)))
    else:
        method = _several(trials, spec.seed, int(popsize), int(maxiter))
    points = trials.points()
    k = int(np.argmin(points["objective"]))
    coils = trials.context.currents
    voltages = {n: float(points[scan_column(n, coils)][k]) for n in trials.names}
    return TuneResult(voltages, float(points["value"][k]), float(points["objective"][k]), spec.goal,
                      trials.figure, points, method, coils)
