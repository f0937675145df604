"""The figures of a traced beam: one definition of each.

The run summary (:meth:`tracer.beam.BeamRun.summary`), the scan tables (:mod:`tracer.scans`), the
tuning goals (:mod:`tracer.tuning`) and the gun report all take their figures from here, so the same
rays give the same numbers wherever they are shown.  The moments, the radius and the emittance are
computed by :mod:`tracer.stats`.

Which crossings of a plane count
--------------------------------
A ray can cross a detector plane more than once: a retarding field or a mirror sends it back
through, a reflectron returns it.  One rule holds for every figure of a plane, with two choices
per plane (``[[plane]]`` keys ``direction`` and ``crossing``, :class:`CrossingRule`):

1. Of a ray's crossings of the plane, in time order, only those in the plane's ``direction``
   count: ``"any"`` (the default), ``"forward"`` (moving along the plane's normal there, pn > 0;
   towards +z for a z plane) or ``"backward"`` (pn < 0).
2. Of those, ``crossing`` picks: ``"first"`` (the default: each ray once, where it first crossed),
   ``"last"``, a number N (the N-th, counting from 1; a ray with fewer does not count) or
   ``"all"`` (every one).

The counted crossings are the rows of the plane's moments (a ray counted at two crossings, with
``"all"``, adds two rows).  Every figure of a plane weighs each row by its ray's current
(:func:`ray_weights`) when the beam carries one, and counts the rows alike when it carries none: the
centroid, the rms sizes, divergences and emittances, the FWHM, d50 and d90, the energy and time
moments and the best focus (a ray of twice the current counts as two rays).  ``fraction`` (the scan tables' ``transmission``) is the share of the
rays started that have a counted crossing, and ``current_A`` the current those rays carry, each ray
once.  A ray that turns exactly at the plane (pn = 0 at the crossing) counts only in direction
``"any"``.  Labels such as ``"first crossing"`` or ``"2nd crossing, -z"`` (:attr:`CrossingRule.label`)
say which rule a figure follows.

Arrival times
-------------
The time figures of a plane (``time_mean_s``, ``time_std_s``, ``time_fwhm_s``,
``resolving_power``) take the crossings' times by one rule (:func:`arrival_times`).  A run with a
time zero (the extraction pulse: the earliest pulse on any electrode, or ``[trace] time_zero``)
keeps the clock, and its resolving power counts the mean arrival time from that time zero.  A run
with neither (static electrodes, an RF-only run) counts each crossing from its own ray's start:
flight times, whatever the rays' start times, and the resolving power is the mean flight time
over twice their FWHM.  Rays that all start at t = 0 read the same either way.

Scan columns
------------
First one column ``<electrode>_V`` per varied electrode (:mod:`tracer.scans`), then for each beam
(in config order) the figures of :func:`columns`:

* at each plane (the crossings that count): ``transmission`` (the plane's ``fraction``),
  ``spot_rms_m`` (rms radius about the centroid), ``centroid_x_m``, ``centroid_y_m``,
  ``divergence_x_rad``, ``divergence_y_rad`` (rms slopes px/pz, py/pz), ``energy_mean_eV``,
  ``energy_std_eV``, ``tof_mean_s``, ``tof_std_s`` (the arrival times, Arrival times above), ``tof_fwhm_s`` and
  ``resolving_power`` (the arrival times' width and t / (2 Δt_FWHM), :class:`PlaneStats`),
  ``d50_m``, ``d90_m`` (current-containing diameters), ``fwhm_x_m``, ``fwhm_y_m`` (the profiles'
  full widths at half maximum), ``focus_z_m`` and ``focus_d50_z_m`` (the best focus of the rays continued in straight
  lines from the plane, by the rms radius and by the d50), ``rotation_rad`` (the beam's rotation
  about the axis from its start, :func:`beam_rotation`);
* on each electrode: ``landed`` (fraction of the rays that landed on it), ``landing_mean_eV``,
  ``landing_std_eV``;
* for the whole beam: ``landed``, ``landing_mean_eV``, ``landing_std_eV`` (all landed rays),
  ``left`` (fraction that left the domain through an outer edge) and ``ledger_worst_eV`` (the
  worst energy-ledger residual of any ray).

A figure's column name is ``[beam.][where.]figure``: the beam's name only when the setup has
several beams; ``where`` is the plane's name only when there are several planes, the electrode's
name always for a figure on one electrode, and nothing for a whole-beam figure.  Figure names have
no dot, so the part after the last dot is always the figure.  With one beam and one plane the
columns read ``transmission``, ``spot_rms_m``, ..., ``focus.landed``, ..., ``landed``, ...
A figure of no rays (nothing crossed a plane, nothing landed) is NaN.  These names and their values
are SI (``ScanResult.table``); the scan files give them in landings.csv's units, mm, ns and mrad
(:func:`file_column`: ``spot_rms_mm``, ``tof_mean_ns``, ``divergence_x_mrad``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tracer.schema import CROSSINGS, DIRECTIONS
from tracer.stats import (beta_gamma, containing_diameter, extreme, fwhm, mean, radius, rms_emittance, std,
                          straight_d50_waist, straight_waist)

_SIDE = {"any": "", "forward": ", +z", "backward": ", -z"}


def _ordinal(n):
    suffix = "th" if n % 100 in (11, 12, 13) else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def occurrence(keys):
    """For each element, how many earlier elements have the same key, and how many have it in all.

    Parameters
    ----------
    keys : int64[n]

    Returns
    -------
    index, count : int64[n]
        ``index`` is 0 for the first element of each key (in array order), 1 for the next, ...;
        ``count`` is the number of elements with that key.
    """
    order = np.argsort(keys, kind="stable")
    ordered = keys[order]
    first = np.searchsorted(ordered, ordered, side="left")
    index = np.empty(len(keys), dtype=np.int64)
    count = np.empty(len(keys), dtype=np.int64)
    index[order] = np.arange(len(keys)) - first
    count[order] = np.searchsorted(ordered, ordered, side="right") - first
    return index, count


@dataclass(frozen=True)
class CrossingRule:
    """Which crossings of a plane count for its figures (module notes).

    Attributes
    ----------
    direction : str
        ``"any"``, ``"forward"`` (pn > 0) or ``"backward"`` (pn < 0).
    crossing : str or int
        ``"first"``, ``"last"``, ``"all"`` or N >= 1 (the N-th crossing in that direction).
    """

    direction: str = "any"
    crossing: str | int = "first"

    def __post_init__(self):
        if self.direction not in DIRECTIONS:
            raise ValueError(f"direction {self.direction!r}: expected one of {', '.join(DIRECTIONS)}")
        number = isinstance(self.crossing, int) and not isinstance(self.crossing, bool)
        if not (self.crossing in CROSSINGS if not number else self.crossing >= 1):
            raise ValueError(f"crossing {self.crossing!r}: expected one of {', '.join(CROSSINGS)} "
                             "or a whole number from 1")

    @classmethod
    def of(cls, plane):
        """The rule of a detector plane (its ``direction`` and ``crossing``; defaults when absent)."""
        return cls(getattr(plane, "direction", "any"), getattr(plane, "crossing", "first"))

    @property
    def label(self) -> str:
        """``"first crossing"``, ``"last crossing, +z"``, ``"2nd crossing, -z"``, ``"every crossing"``."""
        which = {"all": "every"}.get(self.crossing, self.crossing)
        if isinstance(which, int):
            which = _ordinal(which)
        return f"{which} crossing{_SIDE[self.direction]}"

    def select(self, rows):
        """The rows that count, in their order.

        Parameters
        ----------
        rows : numpy.ndarray
            The crossings of one plane, each ray's in time order (``BeamRun.at_plane``).
        """
        if self.direction != "any":
            pn = frame(rows)[4]
            rows = rows[pn > 0] if self.direction == "forward" else rows[pn < 0]
        if self.crossing == "all":
            return rows
        index, count = occurrence(rows["ray"])
        if self.crossing == "first":
            return rows[index == 0]
        if self.crossing == "last":
            return rows[index == count - 1]
        return rows[index == self.crossing - 1]


def frame(rows):
    """(u, v, pu, pv, pn) of crossing rows: the plane's own frame (``tracer.beam.plane_coordinates``;
    x, y, px, py, pz for rows stored without it)."""
    names = ("u_m", "v_m", "pu", "pv", "pn") if "pn" in rows.dtype.names else ("x_m", "y_m", "px", "py", "pz")
    return tuple(rows[k] for k in names)


def counted(run, plane):
    """The crossings of plane ``plane`` (a name) that count for its figures, by the run's rule."""
    return run.crossing_rule(plane).select(run.at_plane(plane))


# --------------------------------------------------------------------------------------------
# At a plane


@dataclass(frozen=True)
class PlaneStats:
    """The figures of a beam at a plane, over the crossings that count (module notes), each weighted
    by the rays' current when the beam carries one.

    On a tilted plane x, y, px, py and pz stand for the plane's own u, v, pu, pv and pn
    (:func:`tracer.beam.plane_coordinates`, :func:`frame`).

    Attributes
    ----------
    count : int
        Crossings counted (rows).
    fraction : float
        Distinct rays counted, over the rays started.
    centroid_x_m, centroid_y_m : float
        Mean transverse position.
    rms_radius_m : float
        sqrt(<(x - <x>)^2 + (y - <y>)^2>): the rms radius about the centroid
        (the spot size).
    rms_radius_axis_m : float
        sqrt(<x^2 + y^2>): the rms radius about the axis.
    rms_x_m, rms_y_m : float
        Standard deviations of x and y.
    fwhm_x_m, fwhm_y_m : float
        Full widths at half maximum of the x and y profiles, weighted by the rays' current when they
        carry one (:func:`tracer.stats.fwhm`: a kernel density estimate's outermost half-maximum
        crossings); NaN for fewer than ten rows.
    d50_m, d90_m : float
        Diameters about the centroid holding 50 % and 90 % of the current (of the rays when they
        carry none; :func:`tracer.stats.containing_diameter`).
    rms_divergence_x_rad, rms_divergence_y_rad : float
        Standard deviations of the slopes x' = px/pz and y' = py/pz.
    emittance_x_m_rad, emittance_y_m_rad : float
        rms emittances of the x-x' and y-y' planes (:mod:`tracer.stats`).
    norm_emittance_x_m_rad, norm_emittance_y_m_rad : float
        beta gamma times the rms emittances.
    beta_gamma : float
        <|p|> / (m c).
    energy_mean_eV, energy_std_eV : float
        Kinetic energy mean and standard deviation.
    time_mean_s, time_std_s : float
        Arrival time at the plane, mean and standard deviation, by the run's time origin
        (:func:`arrival_times`): the clock time when a run counts from a clock time zero (the
        extraction pulse), each ray's flight time from its own start when it does not.
    time_fwhm_s : float
        Width of the arrival times: the full width at half maximum of their distribution (current
        weighted, :func:`tracer.stats.fwhm`, as the profiles' widths); NaN for fewer than ten rows.
    resolving_power : float
        Mass-resolving power of a time-of-flight analyser at this plane, t / (2 Δt_FWHM), with t
        the mean arrival time counted from ``time_zero_s`` (the extraction pulse), or the mean
        flight time when the run counts from each ray's start (common practice, m / Δm =
        t / (2 Δt) since t ∝ sqrt(m)).
    current_A : float
        The current of the rays counted, each ray once (NaN when the rays carry none).
    focus_z_m, focus_rms_m : float
        Best focus of the rays continued in straight lines from the plane (no field beyond it;
        :func:`tracer.stats.straight_waist`): the z where their rms radius about the centroid is
        smallest, and that radius.  Behind the plane (z less than the plane's) for rays that
        diverge from it (a virtual waist).  NaN on a tilted plane (its ``focus`` distance along the
        normal is not a z), for rays all parallel and for a waist outside the window searched
        (:func:`focus_window`: the domain and a domain length beyond each end).
    focus_d50_z_m, focus_d50_m : float
        The same for the smallest d50 (:func:`tracer.stats.straight_d50_waist`).
    rotation_rad : float
        The beam's rotation about the axis from its start to the plane, right-handed about +z,
        modulo a half turn, in (-pi/2, pi/2] (:func:`beam_rotation`: the Larmor rotation in a
        magnetic field, 0 in an electric one); NaN in planar symmetry, on a tilted plane and when
        the start states are not given.
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
    time_fwhm_s: float
    resolving_power: float
    current_A: float
    fwhm_x_m: float
    fwhm_y_m: float
    d50_m: float
    d90_m: float
    focus_z_m: float
    focus_rms_m: float
    focus_d50_z_m: float
    focus_d50_m: float
    rotation_rad: float = math.nan


def beam_rotation(rows, starts) -> float:
    """The beam's rotation about the axis from its start to a plane z = const (rad).

    The rays' transverse positions at the plane, w = x + i y, are fitted by least squares as a
    linear function of their start positions and slopes, w = a w0 + b w0' (w0' = (px + i py)/pz
    at the start; each column scaled to unit rms, a column of zeros left out).  A round lens maps
    w0 and w0' alike: a = g e^(i theta), b = h e^(i theta) with real g and h, so theta =
    arg(a^2 + b^2) / 2 is the turn of the beam's pattern about the axis, right-handed about +z.
    An image inverted through the axis (g < 0) is a half turn, so theta is known modulo pi and is
    given in (-pi/2, pi/2]: 0 in a round electric lens before and after a crossover, the Larmor
    angle (Busch 1926) in a magnetic one.

    Parameters
    ----------
    rows : numpy.ndarray
        Crossing rows (``x_m``, ``y_m``, ``ray``) of a plane z = const.
    starts : numpy.ndarray
        The rays' start states (``BeamRun.starts``: ``ray``, ``x_m``, ``y_m``, ``px``, ``py``,
        ``pz``), sorted by ``ray``.

    Returns
    -------
    float
        NaN for fewer than two rows or rays that all start on the axis, parallel to it.
    """
    start = starts[np.searchsorted(starts["ray"], rows["ray"])]
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = (start["px"] + 1j * start["py"]) / start["pz"]
    w = rows["x_m"] + 1j * rows["y_m"]
    w0 = start["x_m"] + 1j * start["y_m"]
    ok = np.isfinite(w) & np.isfinite(w0) & np.isfinite(slope)
    if ok.sum() < 2:
        return math.nan
    sizes = [math.sqrt(np.mean(np.abs(c[ok]) ** 2)) for c in (w0, slope)]
    scaled = [c[ok] / size for c, size in zip((w0, slope), sizes) if size > 0]
    if not scaled:
        return math.nan
    coef = np.linalg.lstsq(np.column_stack(scaled), w[ok], rcond=1e-9)[0]
    turn = np.sum(coef ** 2)
    return float(np.angle(turn)) / 2.0 if abs(turn) > 0 else math.nan


def plane_stats(rows, species, records, time_zero_s=0.0, along_z=True, focus_window_m=(-math.inf, math.inf),
                starts=None, times=None):
    """The figures of the given crossing rows.

    Parameters
    ----------
    rows : numpy.ndarray
        Structured rows, one per crossing counted (:func:`counted`); a ray with two rows adds
        two to the moments but counts once in ``fraction`` and ``current_A``.
    species : tracer.species.Species
        The beam's species (its mass sets beta gamma).
    records : numpy.ndarray
        The rays started (``BeamRun.records``): the denominator of ``fraction``, and their
        ``weight_A`` (when the field is there and sums above 0) the current.
    time_zero_s : float
        The time the resolving power counts ``times`` from (the extraction pulse on the clock; 0
        for flight times).
    along_z : bool
        Whether the plane is z = const (the best focus is a z only there).
    focus_window_m : (float, float)
        The z range a best focus is looked for in (:func:`focus_window`); a waist beyond it is NaN.
    starts : numpy.ndarray, optional
        The rays' start states in axial symmetry, for ``rotation_rad`` (NaN without them).
    times : numpy.ndarray, optional
        The rows' arrival times (:func:`arrival_times`); their clock times ``time_s`` when not given.

    Returns
    -------
    PlaneStats
    """
    x, y, pu, pv, pn = frame(rows)
    xs, ys = pu / pn, pv / pn
    n = len(records)
    weights = records["weight_A"] if "weight_A" in records.dtype.names else np.zeros(n)
    charged = weights.sum() > 0
    w = ray_weights(records, rows)
    cx, cy = mean(x, w), mean(y, w)
    bg = beta_gamma(rows, species.mass_kg, w)
    ex, ey = rms_emittance(x, xs, w), rms_emittance(y, ys, w)
    t = rows["time_s"] if times is None else times
    width = fwhm(t, w)
    z0 = mean(rows["z_m"]) if along_z else math.nan
    on = np.isfinite(xs) & np.isfinite(ys)        # a ray turning in the plane has no straight line
    line = (x[on], y[on], xs[on], ys[on], None if w is None else w[on])
    s_rms, focus_rms = straight_waist(*line)
    if not focus_window_m[0] <= z0 + s_rms <= focus_window_m[1]:
        s_rms, focus_rms = math.nan, math.nan
    s_d50, focus_d50 = straight_d50_waist(*line, window=(focus_window_m[0] - z0, focus_window_m[1] - z0))
    return PlaneStats(
        count=len(rows),
        fraction=len(np.unique(rows["ray"])) / n if n else math.nan,
        centroid_x_m=cx,
        centroid_y_m=cy,
        rms_radius_m=math.sqrt(mean((x - cx) ** 2 + (y - cy) ** 2, w)),
        rms_radius_axis_m=math.sqrt(mean(x * x + y * y, w)),
        rms_x_m=std(x, w),
        rms_y_m=std(y, w),
        rms_divergence_x_rad=std(xs, w),
        rms_divergence_y_rad=std(ys, w),
        emittance_x_m_rad=ex,
        emittance_y_m_rad=ey,
        norm_emittance_x_m_rad=bg * ex,
        norm_emittance_y_m_rad=bg * ey,
        beta_gamma=bg,
        energy_mean_eV=mean(rows["energy_eV"], w),
        energy_std_eV=std(rows["energy_eV"], w),
        time_mean_s=mean(t, w),
        time_std_s=std(t, w),
        time_fwhm_s=width,
        resolving_power=(mean(t, w) - time_zero_s) / (2.0 * width) if width > 0.0 else math.nan,
        current_A=(float(weights[np.isin(records["ray"], rows["ray"])].sum()) if charged else math.nan),
        fwhm_x_m=fwhm(x, w),
        fwhm_y_m=fwhm(y, w),
        d50_m=containing_diameter(x - cx, y - cy, 0.5, w),
        d90_m=containing_diameter(x - cx, y - cy, 0.9, w),
        focus_z_m=z0 + s_rms,
        focus_rms_m=focus_rms if along_z else math.nan,
        focus_d50_z_m=z0 + s_d50,
        focus_d50_m=focus_d50 if along_z else math.nan,
        rotation_rad=beam_rotation(rows, starts) if along_z and starts is not None else math.nan,
    )


def ray_weights(records, rows):
    """The current each of ``rows`` carries (its ray's ``weight_A`` in ``records``, the rays started
    in ray order), or None when they carry none: the weights of every figure of a plane (module
    notes)."""
    if "weight_A" not in records.dtype.names or not records["weight_A"].sum() > 0:
        return None
    w = records["weight_A"][np.searchsorted(records["ray"], rows["ray"])]
    return w if w.sum() > 0 else None


def plane_figures(run, plane):
    """The figures of a traced beam at plane ``plane`` (a name), by the plane's rule.

    Parameters
    ----------
    run : tracer.beam.BeamRun

    Returns
    -------
    PlaneStats
    """
    rows = counted(run, plane)
    times, zero = arrival_times(run, rows)
    return plane_stats(rows, run.species, run.records, zero,
                       along_z=plane not in getattr(run, "tilted_planes", ()), focus_window_m=focus_window(run),
                       starts=getattr(run, "starts", None) if getattr(run, "symmetry", None) == "axial" else None,
                       times=times)


def arrival_times(run, rows):
    """The arrival times of crossing rows of a run, by the run's time origin, and the time its
    resolving power counts them from.

    A run with a time zero (``run.time_zero_s``: the extraction pulse, the earliest pulse on any
    electrode, or ``[trace] time_zero``) keeps the clock: the rows' ``time_s``, counted from that
    time zero.  A run without one (``time_zero_s`` None: no pulse and no ``[trace] time_zero``; a
    static run, an RF-only run) counts each row from its own ray's start: the flight times
    ``time_s`` minus the ray's start time (``run.starts``), counted from 0.  Rays that all start at
    t = 0 read the same either way.

    Parameters
    ----------
    run : tracer.beam.BeamRun
    rows : numpy.ndarray
        Crossing rows of the run (``ray``, ``time_s``).

    Returns
    -------
    times : numpy.ndarray
        One time per row, seconds.
    zero : float
        The time ``times`` are counted from by the resolving power.
    """
    if run.time_zero_s is not None:
        return rows["time_s"], run.time_zero_s
    starts = run.starts
    return rows["time_s"] - starts["time_s"][np.searchsorted(starts["ray"], rows["ray"])], 0.0


def focus_window(run):
    """The z range a best focus is looked for in: the domain and one domain length beyond each
    end (a waist farther off belongs to a beam so nearly parallel that it has no focus to speak
    of); unbounded when the run does not know its domain."""
    bounds = getattr(run, "bounds_m", ())
    if len(bounds) < 2:
        return -math.inf, math.inf
    length = bounds[1] - bounds[0]
    return bounds[0] - length, bounds[1] + length


# --------------------------------------------------------------------------------------------
# On electrodes, and how rays ended


@dataclass(frozen=True)
class LandingStats:
    """The rays that landed on one electrode (or on any).

    Attributes
    ----------
    electrode : str
        Its name ("" for any electrode).
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


def landing_stats(records, electrode=None, weight_A=None, symmetry="axial"):
    """Statistics of the rays with status ``"landed"`` on one electrode, or on any.

    Parameters
    ----------
    records : ndarray
        ``BeamRun.records``: one row per ray started.
    electrode : str, optional
        The electrode's name; None for every landed ray.
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
    hit = records["status"] == "landed"
    if electrode is not None:
        hit &= records["electrode"] == electrode
    rows = records[hit]
    r = radius(rows, symmetry)
    energy = rows["energy_eV"]
    return LandingStats(
        electrode=electrode or "",
        count=len(rows),
        fraction=len(rows) / len(records) if len(records) else math.nan,
        current_A=math.nan if weight_A is None else float(np.sum(np.asarray(weight_A)[hit])),
        energy_mean_eV=mean(energy),
        energy_std_eV=std(energy),
        energy_min_eV=extreme(energy, np.min),
        energy_max_eV=extreme(energy, np.max),
        radius_min_m=extreme(r, np.min),
        radius_max_m=extreme(r, np.max),
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


# --------------------------------------------------------------------------------------------
# A scan row


PLANE_COLUMNS = {"transmission": "fraction", "spot_rms_m": "rms_radius_m", "centroid_x_m": "centroid_x_m",
                 "centroid_y_m": "centroid_y_m", "divergence_x_rad": "rms_divergence_x_rad",
                 "divergence_y_rad": "rms_divergence_y_rad", "energy_mean_eV": "energy_mean_eV",
                 "energy_std_eV": "energy_std_eV", "tof_mean_s": "time_mean_s", "tof_std_s": "time_std_s",
                 "tof_fwhm_s": "time_fwhm_s", "resolving_power": "resolving_power", "d50_m": "d50_m",
                 "d90_m": "d90_m", "fwhm_x_m": "fwhm_x_m", "fwhm_y_m": "fwhm_y_m", "focus_z_m": "focus_z_m",
                 "focus_d50_z_m": "focus_d50_z_m", "rotation_rad": "rotation_rad"}
"""Scan column of each plane figure: the :class:`PlaneStats` field it is."""

LANDING_COLUMNS = {"landed": "fraction", "landing_mean_eV": "energy_mean_eV", "landing_std_eV": "energy_std_eV"}
"""Scan column of each landing figure: the :class:`LandingStats` field it is."""

BEAM_COLUMNS = tuple(LANDING_COLUMNS) + ("left", "ledger_worst_eV")
"""Scan columns of the whole beam: its landings on any electrode, the share that left, the ledger."""


def columns(beams, planes, electrodes):
    """Figure column names for beams (names), planes (names) and electrodes (names); module notes."""
    out = []
    for beam in beams:
        b = f"{beam}." if len(beams) > 1 else ""
        for plane in planes:
            p = f"{plane}." if len(planes) > 1 else ""
            out += [f"{b}{p}{f}" for f in PLANE_COLUMNS]
        for electrode in electrodes:
            out += [f"{b}{electrode}.{f}" for f in LANDING_COLUMNS]
        out += [f"{b}{f}" for f in BEAM_COLUMNS]
    return tuple(out)


SCAN_UNITS = ("_m", "_rad", "_eV", "_s", "_A", "_V")
"""The unit suffixes of scan columns (SI; a share of the rays or a ratio has none)."""

FILE_UNITS = (("_m", "_mm", 3), ("_s", "_ns", 9), ("_rad", "_mrad", 3))
"""How the scan files (``scan.csv``, ``scan.journal``, ``scan.h5``) and pictures give the SI figure
columns: in landings.csv's units, mm and ns, and angles in mrad (the SI suffix, the file's suffix,
the power of ten between them); eV, V, A and bare figures as they are."""


def file_column(name):
    """The scan files' name of an SI scan column and the power of ten from its value to theirs
    (:data:`FILE_UNITS`: ``spot_rms_m`` -> (``spot_rms_mm``, 3), ``tof_mean_s`` -> (``tof_mean_ns``,
    9), ``lens_V`` -> (``lens_V``, 0)); a waveform parameter's column (``<electrode>.<part>[i].<key>``,
    in its config unit already) as it is."""
    if "[" not in name:
        for si, unit, power in FILE_UNITS:
            if name.endswith(si):
                return name.removesuffix(si) + unit, power
    return name, 0


def si_column(name):
    """The SI name of a scan files' column and the power of ten from its value to the SI one
    (the inverse of :func:`file_column`; a name already SI, as in the files of an earlier tracer,
    as it is)."""
    if "[" not in name:
        for si, unit, power in FILE_UNITS:
            if name.endswith(unit):
                return name.removesuffix(unit) + si, -power
    return name, 0


def grid_column(figure):
    """The scan column of a figure's grid error (``[grid_error] scan_rows``): ``_grid`` before the
    unit suffix, so that the name still ends in its unit (``spot_rms_m`` -> ``spot_rms_grid_m``,
    ``transmission`` -> ``transmission_grid``)."""
    for unit in SCAN_UNITS:
        if figure.endswith(unit):
            return f"{figure[:-len(unit)]}_grid{unit}"
    return f"{figure}_grid"


def row(run, electrodes):
    """The figures of one traced beam, in the order of :func:`columns` for that beam.

    Parameters
    ----------
    run : tracer.beam.BeamRun
    electrodes : sequence of str
        The electrode names (all electrodes of the setup).

    Returns
    -------
    tuple of float
    """
    rec = run.records
    n = len(rec)
    out = []
    for plane in run.planes:
        s = plane_figures(run, plane)
        out += (getattr(s, name) for name in PLANE_COLUMNS.values())
    for s in [landing_stats(rec, e) for e in electrodes] + [landing_stats(rec)]:
        out += (getattr(s, name) for name in LANDING_COLUMNS.values())
    out.append(loss_reasons(rec).get("left", 0) / n if n else math.nan)
    out.append(run.ledger.worst_eV if n else math.nan)
    return tuple(out)
