"""Batch tracing of a beam through a potential map: landing records, plane crossings, summary.

:func:`trace` draws the beam's start states (:func:`start_states`), hands them to the parallel
kernel of :mod:`tracer.motion`, and packs what comes back into a :class:`BeamRun`.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field as dataclass_field

import numba
import numpy as np
from scipy import constants

from tracer import endings, footprint, ledger, measure, motion, sources
from tracer.groups import GroupedMaps
from tracer.fieldmap import PotentialMap
from tracer.geometry import surface_normals
from tracer.schema import Beam, Plane
from tracer.display import Shown, listing, number
from tracer.interrupts import check, held_back
from tracer.magnetics.uniform import UniformField
from tracer.magnetics.units import MagneticMap
from tracer.stats import radius

STATUS = {
    motion.LANDED: "landed",      # hit an electrode; the state is at its surface
    motion.PLANE: "plane",        # stopped on a detector plane with stop = true
    motion.LEFT: "left",          # left the domain through an outer edge
    motion.TIME: "time",          # still flying at max_time
    motion.INSIDE: "inside",      # started inside an electrode; not traced
    motion.STALLED: "stalled",    # step size underflow or max_steps reached
}

STATE_FIELDS = [
    ("ray", np.int64),
    ("status", "U8"),
    ("time_s", np.float64),
    ("x_m", np.float64), ("y_m", np.float64), ("z_m", np.float64),
    ("px", np.float64), ("py", np.float64), ("pz", np.float64),
    ("energy_eV", np.float64),
    ("ledger_eV", np.float64),
]


def state_dtype(names, extra=()):
    """Record dtype: the state fields plus ``electrode`` wide enough for the electrode names."""
    width = max([1] + [len(n) for n in names])
    return np.dtype(STATE_FIELDS[:2] + [("electrode", f"U{width}")] + STATE_FIELDS[2:] + list(extra))


def symmetry_code(grid):
    """Kernel code of a grid's symmetry: 0 axial, 1 planar, 2 planar with a mirror plane at r0."""
    if grid.symmetry == "axial":
        return motion.SYMMETRY_CODE["axial"]
    return motion.SYMMETRY_CODE["mirror" if grid.mirror else "planar"]


def start_states(beam, field, drawn=None):
    """Start state of every ray of a beam, as records.

    The rays are drawn by :func:`tracer.sources.start_states` (disc or CSV rays, cone of directions,
    energy spread; seeded), unless ``drawn`` gives them. Rays that start inside an electrode are
    marked ``"inside"`` with the electrode's name; all other rows have status "" and electrode "".

    Parameters
    ----------
    beam : tracer.config.Beam
    field : tracer.fieldmap.PotentialMap
    drawn : numpy.ndarray, optional
        Start states of :data:`tracer.sources.START_DTYPE` to use instead of drawing them.

    Returns
    -------
    numpy.ndarray
        Structured array of :func:`state_dtype` with the start time ``time_s``, ``ledger_eV`` = 0 and the
        current each ray carries, ``weight_A`` (0 when the beam gives no current).
    """
    if drawn is None:
        drawn = sources.start_states(beam, symmetry=field.grid.symmetry)
    out = np.zeros(len(drawn), dtype=state_dtype(field.names, [("weight_A", np.float64)]))
    for name in ("ray", "time_s", "x_m", "y_m", "z_m", "px", "py", "pz", "energy_eV", "weight_A"):
        out[name] = drawn[name]
    return out


@dataclass(frozen=True, repr=False)
class BeamRun(Shown):
    """The result of tracing one beam.

    Attributes
    ----------
    name : str
        The beam's name.
    species : tracer.species.Species
    starts : numpy.ndarray
        Start state of each ray (fields as ``records``).
    records : numpy.ndarray
        One row per ray: ``ray``, ``status`` ("landed", "plane", "left", "time", "inside",
        "stalled"), ``electrode`` (where it landed, else ""), ``time_s``, ``x_m``, ``y_m``, ``z_m``,
        ``px``, ``py``, ``pz`` (kg m/s), ``energy_eV`` (kinetic), ``ledger_eV`` (worst
        |ΔKE − qΔV| over the ray's steps), ``weight_A`` (the current it carries), ``steps``
        (accepted steps), ``evaluations`` (field evaluations), and for a landing
        ``incidence_deg`` (from the surface normal) and ``normal_energy_eV`` (:func:`incidence`;
        NaN for rays that did not land).
    crossings : numpy.ndarray
        Every plane crossing: the state fields plus ``plane`` (name) and ``crossing`` (0 for the
        ray's first crossing of that plane, 1 for the next, ...); ``ledger_eV`` is the ray's worst
        residual up to the crossing; ``u_m``, ``v_m`` (transverse coordinates in the plane),
        ``pu``, ``pv`` (the momentum along them) and ``pn`` (along the plane's normal), see
        :func:`plane_coordinates`.
    paths : tuple of numpy.ndarray
        Path points of the first ``keep_paths`` rays, one array per ray with ``time_s``, ``x_m``,
        ``y_m``, ``z_m``, ``px``, ``py``, ``pz``, ``energy_eV`` and the signed per-step ledger
        ``ledger_eV`` = ΔKE − qΔV (a point per accepted step, thinned evenly for long rays).
    planes : tuple of str
        Names of the detector planes.
    ledger : tracer.ledger.LedgerReport
    energy_scale_eV : numpy.ndarray
        The per-ray energy scale the ledger threshold refers to.
    symmetry : str
        The map's symmetry ("axial" or "planar"), for the landing radius.
    crossing_rules : tuple of tracer.measure.CrossingRule
        Which crossings of each plane count for its figures (:mod:`tracer.measure`), in the order
        of ``planes``; planes beyond the tuple follow the default rule (each ray's first crossing).
    work_eV : numpy.ndarray or None
        With voltages that change in time, each ray's energy from them, q (∫∂V/∂t dt + jumps), eV:
        the ledger's second term, ΔKE = −qΔV + work_eV (:mod:`tracer.ledger`); None in a static
        field.
    time_zero_s : float or None
        The clock time the planes' resolving power counts arrival times from (the extraction
        pulse; :class:`tracer.measure.PlaneStats`); None: the planes' arrival times are each ray's
        flight time from its own start (:func:`tracer.measure.arrival_times`).
    bounds_m : tuple of float
        The domain (z_min, z_max, transverse_min, transverse_max) in metres, and ``mirror`` whether
        the transverse minimum is the axis or a mirror plane: where rays that left went
        (:mod:`tracer.endings`); empty when unknown.
    mirror : bool
    start_potential_V : numpy.ndarray
        The potential at each ray's start point, which ``energy_eV`` is measured from (empty when
        unknown).
    electrode_voltages : dict of str to float
        The electrodes' voltages of the map traced, for the landing energies the start implies.
    tilted_planes : tuple of str
        The planes that are not z = const (their crossings' ``u_m``, ``v_m`` are the local
        coordinates of :func:`plane_coordinates`, not x and y).
    """

    name: str
    species: object
    starts: np.ndarray
    records: np.ndarray
    crossings: np.ndarray
    paths: tuple
    planes: tuple
    ledger: ledger.LedgerReport
    energy_scale_eV: np.ndarray = dataclass_field(repr=False)
    symmetry: str = "axial"
    crossing_rules: tuple = ()
    bounds_m: tuple = ()
    mirror: bool = False
    start_potential_V: np.ndarray = dataclass_field(default_factory=lambda: np.zeros(0), repr=False)
    electrode_voltages: dict = dataclass_field(default_factory=dict)
    work_eV: np.ndarray | None = dataclass_field(default=None, repr=False)
    time_zero_s: float | None = None
    tilted_planes: tuple = ()

    def _facts(self):
        status, counts = np.unique(self.records["status"], return_counts=True)
        return {"name": repr(self.name), "species": self.species.name, "rays": str(len(self.records)),
                "ended": listing(f"{n} {s}" for s, n in zip(status, counts)),
                "planes": listing(self.planes), "paths kept": str(len(self.paths)),
                "ledger worst": number(self.ledger.worst_eV, "eV")}

    def at_plane(self, name):
        """The rays where they crossed plane ``name``, one row per crossing (time order per ray).

        Raises
        ------
        KeyError
            When there is no plane of that name.
        """
        if name not in self.planes:
            raise KeyError(f"no plane {name!r}; the planes are {list(self.planes)}")
        return self.crossings[self.crossings["plane"] == name]

    def crossing_rule(self, name):
        """Which crossings of plane ``name`` count for its figures (:class:`tracer.measure.CrossingRule`)."""
        rules = dict(zip(self.planes, self.crossing_rules))
        return rules.get(name, measure.CrossingRule())

    def summary(self):
        """The beam's figures (:mod:`tracer.measure`): what landed where, what crossed each plane,
        what was lost and where it went, the energy reference of the start, the ledger.

        Returns
        -------
        dict
            ``beam``, ``species``, ``species_note`` (its resolved mass, charge and whether the mass
            is of one isotope), ``rays``, ``current_A`` (the beam's current, or NaN), ``symmetry``;
            ``status`` {status: count} for every status; ``transmission`` {plane: fraction of the
            rays counted at it}; ``planes`` {plane: :class:`tracer.measure.PlaneStats` fields as a
            dict over the crossings that count, plus ``counted``, the label of the plane's
            :class:`tracer.measure.CrossingRule`}; ``time_zero_s``, the clock time the planes'
            arrival times and resolving power count from (NaN: each ray's flight time from its own
            start, :func:`tracer.measure.arrival_times`); ``landing`` {electrode:
            :class:`tracer.measure.LandingStats` fields as a dict, plus ``energy_expected_eV``, the
            mean landing energy the start's energy reference implies}; ``left`` {edge: where and
            with what energy rays left, :func:`tracer.endings.left_summary`};
            ``energy_reference`` (:func:`tracer.endings.energy_reference`); ``ledger_worst_eV``,
            ``ledger_worst_relative``, ``ledger_threshold``, ``ledger_suspects``; with voltages that change in time also the ledger's two terms, ΔKE = −qΔV + q W: the largest
            |qΔV| (``ledger_potential_eV``) and the largest |q W| (``ledger_time_work_eV``,
            W = ∫∂V/∂t dt + jumps) over the traced rays; ``warnings`` (one
            line each) and ``warning`` (the same, joined by "; ", or "").
        """
        rec = self.records
        n = len(rec)
        status = {s: 0 for s in STATUS.values()} | measure.loss_reasons(rec)
        current = float(self.starts["weight_A"].sum())
        planes = {p: asdict(measure.plane_figures(self, p)) | {"counted": self.crossing_rule(p).label}
                  for p in self.planes}
        weights = rec["weight_A"] if current > 0 else np.full(n, math.nan)
        landing = {name: asdict(ls) | {"energy_expected_eV": endings.expected_landing_eV(
                       self.starts, self.start_potential_V, self.species.charge_e,
                       self.electrode_voltages.get(name, math.nan),
                       rec["ray"][(rec["status"] == "landed") & (rec["electrode"] == name)])}
                   for name, ls in measure.landings(rec, weight_A=weights, symmetry=self.symmetry).items()}
        warnings = endings.status_warnings(rec) + [w for w in (self.ledger.warning,) if w]
        return {
            "beam": self.name,
            "species": self.species.name,
            "species_note": self.species.describe(),
            "rays": n,
            "current_A": current if current > 0 else math.nan,
            "symmetry": self.symmetry,
            "status": status,
            "transmission": {p: planes[p]["fraction"] for p in self.planes},
            "planes": planes,
            "time_zero_s": math.nan if self.time_zero_s is None else self.time_zero_s,
            "landing": landing,
            "left": endings.left_summary(rec, self.bounds_m, self.symmetry, self.mirror),
            "energy_reference": endings.energy_reference(self.starts, self.start_potential_V),
            "ledger_worst_eV": self.ledger.worst_eV,
            "ledger_worst_relative": self.ledger.worst_relative,
            "ledger_threshold": self.ledger.threshold,
            "ledger_suspects": self.ledger.suspects,
            "warnings": warnings,
            "warning": "; ".join(warnings),
        } | self._time_terms()

    def _time_terms(self):
        """The ledger's terms with voltages in time (see :meth:`summary`); {} in a static field."""
        if self.work_eV is None:
            return {}
        traced = self.records["status"] != "inside"
        gained = self.records["energy_eV"] - self.starts["energy_eV"]
        return {"ledger_potential_eV": float(np.abs(gained - self.work_eV)[traced].max(initial=0.0)),
                "ledger_time_work_eV": float(np.abs(self.work_eV)[traced].max(initial=0.0))}


def trace(field: PotentialMap | GroupedMaps, beam: Beam, planes: Sequence[Plane] = (),
          rtol: float = 1e-9,
          max_time_s: float = 1e-4, *, keep_paths: int = 0, max_path_points: int = 4096,
          ledger_threshold: float = ledger.DEFAULT_THRESHOLD, max_step_cells: float = 1.0,
          sample_cells: float = 0.5, fine_cells: float = 1 / 32, max_steps: int = 10_000_000,
          max_crossings: int = 16, progress: Callable[[int, int], object] | None = None,
          starts: np.ndarray | None = None, time_zero_s: float | None = None,
          magnetic: MagneticMap | UniformField | Sequence[MagneticMap | UniformField] | None = None
          ) -> BeamRun:
    """Trace a beam through a potential map, and a magnetic field when given.

    Parameters
    ----------
    field : tracer.fieldmap.PotentialMap or tracer.groups.GroupedMaps
        The field; grouped maps (:func:`tracer.groups.group_maps`) for voltages that change in
        time: rays then start at their start times (``time_s`` of the starts), every time is on
        the waveforms' clock, a ray flies for at most ``max_time_s`` from its start, and
        ``BeamRun.work_eV`` holds the energy each ray took from the changing voltages.
    beam : tracer.config.Beam
        The source (species, energies, positions, directions, count, seed).
    planes : sequence of tracer.schema.Plane
        Detector planes (z = const, or lines at an angle: :class:`tracer.schema.Plane`); every
        crossing is recorded, and a plane with ``stop`` true ends the ray there (status "plane").  Their ``direction`` and
        ``crossing``, when given, say which crossings count for the figures (:mod:`tracer.measure`).
    rtol : float
        Relative tolerance of the Runge–Kutta steps; absolute tolerances are rtol × cell for
        positions and rtol × the ray's momentum scale (the momentum at its energy scale, see
        :mod:`tracer.ledger`) for momenta.
    max_time_s : float
        Flight time after which a ray stops with status "time".
    keep_paths : int
        Keep the path points and the per-step ledger of the first ``keep_paths`` rays.
    max_path_points : int
        Points kept per path (at least 3); longer paths are thinned evenly.
    ledger_threshold : float
        Relative ledger threshold for the suspect count (default 1e-6 of the energy scale).
    max_step_cells, sample_cells, fine_cells : float
        Longest step, the spacing at which each step's dense output is checked, and the finer
        spacing used next to surfaces, all in cells (see :mod:`tracer.motion`).
    max_steps : int
        Step budget per ray (accepted plus rejected) before it is stopped as "stalled".
    max_crossings : int
        Room for plane crossings a ray in the first pass; every crossing is recorded all the same:
        a ray that crosses more often is traced again with room for all of its crossings.
    progress : callable, optional
        Called as ``progress(done, total)`` as the rays are traced (in chunks of about 5 %).
    starts : numpy.ndarray, optional
        Start states (:data:`tracer.sources.START_DTYPE`) to trace instead of drawing the beam's;
        the beam then gives only its name and species.
    time_zero_s : float or None
        The clock time the planes' resolving power counts arrival times from (the extraction
        pulse); None (the default): the planes' arrival times are each ray's flight time from its
        own start (:func:`tracer.measure.arrival_times`).
    magnetic : MagneticMap, UniformField or a sequence of them, optional
        Static magnetic fields: the force is then q (E + v x B). At most one
        :class:`tracer.magnetics.units.MagneticMap` (coils and axial profiles, on the field's grid)
        and any :class:`tracer.magnetics.uniform.UniformField` (see
        :func:`tracer.motion.bundles.magnet_of`). The ledger is unchanged: B does no work.

    Returns
    -------
    BeamRun
    """
    if rtol <= 0.0 or max_time_s <= 0.0:
        raise ValueError("rtol and max_time_s must be positive")
    grid = field.grid
    sym = symmetry_code(grid)
    magnet = motion.magnet_of(grid, magnetic)
    sp = beam.species
    starts = start_states(beam, field, starts)
    n = len(starts)
    in_time = isinstance(field, GroupedMaps) and field.in_time
    waves = driven = None      # a static field: the kernel compiled without voltages in time
    if isinstance(field, GroupedMaps):
        herm, volts = field.static, field.peaks_V()
        if in_time:
            waves, driven = field.arrays, np.ascontiguousarray(field.driven)
    else:
        herm, volts = field.hermite, field.voltages
    herm = np.ascontiguousarray(herm, dtype=np.float64)
    scale = ledger.energy_scale_eV(starts["energy_eV"], sp.charge_C, volts)
    atol_p = rtol * sources.momentum(scale, sp.mass_kg)
    cell = min(grid.hz, grid.hr)
    planes = tuple(planes)
    rules = tuple(measure.CrossingRule.of(p) for p in planes)   # a bad rule is refused before any work
    plane_lines = np.array([p.line() for p in planes], dtype=np.float64).reshape(-1, 3)
    plane_stop = np.array([bool(getattr(p, "stop", False)) for p in planes], dtype=np.bool_)
    keep = min(int(keep_paths), n)
    paths_buf = np.zeros((keep, max(3, int(max_path_points)), motion.ROW_LEN))
    nodes = motion.nodes_of(grid)
    bounds = np.array([grid.z0, grid.z1, grid.r0, grid.r1], dtype=np.float64)
    state = np.stack([starts[k] for k in ("x_m", "y_m", "z_m", "px", "py", "pz")], axis=1)
    shapes = motion.shapes_of(field.table)
    cell_map = np.ascontiguousarray(field.raster.cell)
    quiet = motion.quiet_cells(cell_map, nodes, plane_lines)
    no_paths = np.zeros((0, 3, motion.ROW_LEN))

    def kernel(rows, width, paths):
        """The kernel over the rays ``rows`` (a slice or indices), with room for ``width``
        crossings a ray."""
        count = len(atol_p[rows])
        group = max(motion.LANES, -(-count // (2 * numba.get_num_threads())))  # two per thread
        with held_back():   # a signal's handler run inside the kernel's callbacks may crash it
            return motion.trace_rays(
                np.ascontiguousarray(state[rows]), np.ascontiguousarray(starts["time_s"][rows]),
                herm, waves, driven, nodes, sym, bounds, cell_map, shapes,
                float(sp.mass_kg), float(sp.charge_C), float(max_time_s), float(rtol),
                np.ascontiguousarray(atol_p[rows]), max_step_cells * cell, sample_cells * cell,
                fine_cells * cell, plane_lines, plane_stop, int(max_steps), int(width), paths, quiet, group,
                magnet)

    chunk = max(256, -(-n // 20))   # between chunks, progress is shown and Ctrl-C acts
    parts = []
    for lo in range(0, max(n, 1), chunk):
        hi = min(n, lo + chunk)
        parts.append(kernel(slice(lo, hi), max_crossings, paths_buf[lo:min(hi, keep)]))
        check()
        if progress is not None:
            progress(hi, n)
    final, info, cross_plane, cross_state, spent = (np.concatenate([p[k] for p in parts])
                                                    for k in range(5))
    counts = info[:, motion.C_CROSSINGS]
    footprint.check_crossings(counts, max_crossings, (motion.ROW_LEN + 1) * 8)
    over = np.flatnonzero(counts > max_crossings)
    ray_idx, plane_idx, cross_rows = _gathered(np.where(counts > max_crossings, 0, counts), cross_plane,
                                               cross_state)
    if over.size:   # rays that crossed planes more often than there was room for: traced again with room for all
        final[over], info[over], wide_plane, wide_state, spent[over] = kernel(over, counts[over].max(), no_paths)
        more_ray, more_plane, more_rows = _gathered(info[over, motion.C_CROSSINGS], wide_plane, wide_state)
        order = np.argsort(np.concatenate([ray_idx, over[more_ray]]), kind="stable")
        ray_idx = np.concatenate([ray_idx, over[more_ray]])[order]
        plane_idx = np.concatenate([plane_idx, more_plane])[order]
        cross_rows = np.concatenate([cross_rows, more_rows])[order]
    if in_time:
        scale = ledger.energy_scale_in_time_eV(starts["energy_eV"], sp.charge_C, volts, spent[:, 1])

    names = np.array(list(field.names) + [""])
    electrode = names[info[:, motion.C_ELECTRODE]]          # index -1 picks ""
    codes = info[:, motion.C_CODE]
    inside = codes == motion.INSIDE
    starts["status"] = np.where(inside, "inside", "")
    starts["electrode"] = np.where(inside, electrode, "")

    dtype = state_dtype(field.names, [("weight_A", np.float64), ("steps", np.int64),
                                      ("evaluations", np.int64), ("incidence_deg", np.float64),
                                      ("normal_energy_eV", np.float64)])
    records = np.zeros(n, dtype=dtype)
    records["ray"] = starts["ray"]
    records["weight_A"] = starts["weight_A"]
    records["status"] = [STATUS[c] for c in codes]
    records["electrode"] = np.where(codes == motion.LANDED, electrode, "")
    records["electrode"][inside] = electrode[inside]
    _fill_state(records, final)
    records["steps"] = info[:, motion.C_STEPS]
    records["evaluations"] = info[:, motion.C_EVALS]
    records["incidence_deg"], records["normal_energy_eV"] = incidence(
        records, np.where(codes == motion.LANDED, info[:, motion.C_ELECTRODE], -1), field.table, grid,
        sp.mass_kg)

    crossings = np.zeros(len(ray_idx), dtype=state_dtype(
        field.names, [("plane", f"U{max([1] + [len(p.name) for p in planes])}"),
                      ("crossing", np.int64)] + [(k, np.float64) for k in LOCAL_FIELDS]))
    crossings["ray"] = ray_idx
    crossings["status"] = "plane"
    _fill_state(crossings, cross_rows)
    crossings["plane"] = np.array([p.name for p in planes] + [""])[plane_idx]
    crossings["crossing"] = _occurrence(ray_idx, plane_idx, len(planes))
    for q, plane in enumerate(planes):
        rows = plane_idx == q
        local = plane_coordinates(crossings[rows], plane, grid)
        for k, name in enumerate(LOCAL_FIELDS):
            crossings[name][rows] = local[k]

    paths = tuple(_path_records(paths_buf[k, :info[k, motion.C_PATH]]) for k in range(keep))
    report = ledger.ledger_report(records["ledger_eV"], scale, ledger_threshold, traced=~inside)
    return BeamRun(name=getattr(beam, "name", ""), species=sp, starts=starts, records=records,
                   crossings=crossings, paths=paths, planes=tuple(p.name for p in planes),
                   ledger=report, energy_scale_eV=scale,
                   symmetry=grid.symmetry,
                   crossing_rules=rules,
                   work_eV=spent[:, 0] * sp.charge_C / constants.e if in_time else None,
                   time_zero_s=None if time_zero_s is None else float(time_zero_s),
                   tilted_planes=tuple(p.name for p in planes if p.tilted), **run_context(field, starts))


LOCAL_FIELDS = ("u_m", "v_m", "pu", "pv", "pn")
"""The fields of a crossing in the plane's own frame (:func:`plane_coordinates`)."""


def plane_coordinates(rows, plane, grid):
    """Where and how rays cross a detector plane, in the plane's own frame.

    A plane z = const keeps the Cartesian frame: (u, v) = (x, y), (pu, pv, pn) = (px, py, pz).
    A tilted plane (a line through (z0, r0) at angle a, :class:`tracer.schema.Plane`) has v, the
    distance from (z0, r0) along its line (direction (cos a, sin a) in (z, r)), and u across the
    map plane: x in planar symmetry (y mirrored to |y| in a mirrored map), the arc r phi about
    the axis (phi = atan2(y, x)) in axial symmetry, where pr and p_phi replace py and px.  pn is
    the momentum along the plane's normal (positive forward).

    Parameters
    ----------
    rows : numpy.ndarray
        Crossing states (``x_m``, ``y_m``, ``z_m``, ``px``, ``py``, ``pz``).
    plane : tracer.schema.Plane
    grid : tracer.grid.Grid

    Returns
    -------
    tuple of numpy.ndarray
        u_m, v_m, pu, pv, pn.
    """
    x, y, z, px, py, pz = (rows[k] for k in ("x_m", "y_m", "z_m", "px", "py", "pz"))
    if not plane.tilted:
        return x, y, px, py, pz
    if grid.symmetry == "axial":
        r = np.hypot(x, y)
        with np.errstate(invalid="ignore", divide="ignore"):
            pr = np.where(r > 0, (x * px + y * py) / r, np.hypot(px, py))
            p_phi = np.where(r > 0, (x * py - y * px) / r, 0.0)
        u, pu = r * np.arctan2(y, x), p_phi
    else:
        side = np.where(grid.mirror & (y < 0.0), -1.0, 1.0)
        r, pr, u, pu = side * y, side * py, x, px
    nz, nr, _ = plane.line()
    tz, tr = math.cos(plane.angle_rad), math.sin(plane.angle_rad)
    return u, (z - plane.z_m) * tz + (r - plane.r_m) * tr, pu, pz * tz + pr * tr, pz * nz + pr * nr


def _gathered(counts, cross_plane, cross_state):
    """The crossings held in per-ray buffers, ray by ray in order of time: (ray, plane, state row)
    for the first ``counts[k]`` slots of each ray k."""
    ray = np.repeat(np.arange(len(counts)), counts)
    slot = np.arange(len(ray)) - np.repeat(np.cumsum(counts) - counts, counts)
    return ray, cross_plane[ray, slot], cross_state[ray, slot]


def incidence(rows, electrode, table, grid, mass):
    """Angle of incidence (degrees from the surface normal) and normal energy (eV) of landings.

    The normal is the outward normal of the landing electrode's surface nearest the landing point
    (:func:`tracer.geometry.surface_normal`), turned about the axis (axial symmetry) or mirrored
    with y (a mirrored planar map).  The normal energy is what the motion along the normal adds
    to the kinetic energy, E(p) - E(p_t) with E(p) = sqrt((p c)^2 + (m c^2)^2) and p_t the
    momentum along the surface: p_n^2 / 2m = E_kin cos^2 of the angle at low energy.

    Parameters
    ----------
    rows : numpy.ndarray
        States (``x_m``, ``y_m``, ``z_m``, ``px``, ``py``, ``pz``).
    electrode : int array
        The electrode each ray landed on; -1 for rays that did not land (NaN in both results).
    table : tracer.geometry.ShapeTable
    grid : tracer.grid.Grid
    mass : float
        Rest mass, kg.

    Returns
    -------
    incidence_deg, normal_energy_eV : numpy.ndarray
    """
    x, y, z = rows["x_m"], rows["y_m"], rows["z_m"]
    if grid.symmetry == "axial":
        r = np.hypot(x, y)
        nz, nr = surface_normals(z, r, electrode, True, *table.arrays())
        with np.errstate(invalid="ignore", divide="ignore"):
            n = np.stack([np.where(r > 0, nr * x / r, 0.0), np.where(r > 0, nr * y / r, 0.0), nz])
    else:
        side = np.where(grid.mirror & (y < 0.0), -1.0, 1.0)
        nz, nr = surface_normals(z, side * y, electrode, bool(grid.mirror), *table.arrays())
        n = np.stack([np.zeros(len(z)), side * nr, nz])
    p = np.stack([rows["px"], rows["py"], rows["pz"]])
    size = np.sqrt((p * p).sum(axis=0))
    n_size = np.sqrt((n * n).sum(axis=0))
    ok = (electrode >= 0) & (size > 0.0) & (n_size > 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        pn = -(p * n).sum(axis=0) / n_size
        angle = np.where(ok, np.degrees(np.arccos(np.clip(pn / size, -1.0, 1.0))), np.nan)
        pt = np.sqrt(np.maximum(size * size - pn * pn, 0.0))
        mc = mass * constants.c
        # E(p) - E(p_t) = p_n^2 c^2 / (E(p) + E(p_t)), free of cancellation
        normal_eV = np.where(ok, pn * pn / (np.hypot(size, mc) + np.hypot(pt, mc))
                             * constants.c / constants.e, np.nan)
    return angle, normal_eV


def run_context(field, starts):
    """What a :class:`BeamRun` knows of the map it was traced through: the domain's bounds, the
    potential at each start point (at its start time when voltages change in time) and the
    electrodes' voltages (keyword arguments of BeamRun).  With voltages in time there are no
    fixed voltages, so no landing energy is implied (``electrode_voltages`` is empty)."""
    g = field.grid
    r = radius(starts, g.symmetry)
    if isinstance(field, GroupedMaps):
        potential = np.zeros(len(starts))
        for t in np.unique(starts["time_s"]):
            at = starts["time_s"] == t
            potential[at] = field.at(float(t)).potential(starts["z_m"][at], r[at])
        voltages = {} if field.in_time else dict(zip(field.names, field.voltages(0.0)))
    else:
        potential = field.potential(starts["z_m"], r)
        voltages = dict(zip(field.names, map(float, field.voltages)))
    return {"bounds_m": (g.z0, g.z1, g.r0, g.r1), "mirror": bool(g.mirror),
            "start_potential_V": np.asarray(potential, dtype=np.float64), "electrode_voltages": voltages}


def _fill_state(rec, rows):
    """Copy kernel rows (t, x, y, z, px, py, pz, ke_J, ledger_J) into record fields."""
    rec["time_s"] = rows[:, motion.ROW_T]
    for k, name in enumerate(("x_m", "y_m", "z_m", "px", "py", "pz")):
        rec[name] = rows[:, motion.ROW_STATE + k]
    rec["energy_eV"] = rows[:, motion.ROW_KE] / constants.e
    rec["ledger_eV"] = rows[:, motion.ROW_LEDGER] / constants.e


def _occurrence(ray, plane, n_planes):
    """For each crossing, how many earlier crossings the same ray made of the same plane."""
    return measure.occurrence(ray * max(n_planes, 1) + plane)[0]


PATH_DTYPE = np.dtype([(k, np.float64) for k in (
    "time_s", "x_m", "y_m", "z_m", "px", "py", "pz", "energy_eV", "ledger_eV")])


def _path_records(rows):
    """Path points as a structured array (the per-step ledger is signed)."""
    out = np.zeros(len(rows), dtype=PATH_DTYPE)
    _fill_state(out, rows)
    return out
