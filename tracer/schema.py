"""The schema of a setup: the frozen dataclasses a config file is read into, and ConfigError.

Everything here is SI (metres, radians, seconds, volts; energies in eV). The TOML reader
(:mod:`tracer.config`) builds these objects and checks them; geometry (:mod:`tracer.geometry`)
reads the shapes. This module sits below both and imports neither.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import pathlib
import re
from dataclasses import dataclass, field

from tracer.species import Species, species
from tracer.waveforms import Waveform, first_pulse_s

NAME = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.+\-]*")
"""What a name may be (electrodes, beams, planes): letters, digits and _ . + -, not first . + -;
names become columns, groups and parts of file names, so files from elsewhere are held to it too."""

NAME_LENGTH = 100
"""The longest name: ``arrival_<beam>_<plane>.png`` stays under the 255 bytes a file name may
have on common file systems (common practice: ext4, XFS, APFS, NTFS)."""

TITLE_LENGTH = 300
"""The longest title: it heads every figure and table."""


class ConfigError(ValueError):
    """A bad setup: ``str(error) == f"{key}: {message}"``.

    Parameters
    ----------
    key : str
        Key path of the bad entry (``"electrode[2].rect[0].r_mm"``), or
        ``"line L, column C"`` for a TOML syntax error.
    message : str
        What is wrong, naming the bad value.
    """

    def __init__(self, key: str, message: str):
        super().__init__(f"{key}: {message}")
        self.key = key
        self.message = message

    def __reduce__(self):
        return (type(self), (self.key, self.message))


# ---------------------------------------------------------------- dataclasses


@dataclass(frozen=True)
class Rect:
    """A rectangle in the (z, r) half-plane; in axial symmetry a tube or a disc.

    Parameters
    ----------
    z_m : tuple of float
        (start, end) along z, metres.
    r_m : tuple of float
        (inner, outer) radius, or (lower, upper) y in planar symmetry, metres.
    """

    z_m: tuple[float, float]
    r_m: tuple[float, float]


@dataclass(frozen=True)
class Polygon:
    """A closed polygon in the (z, r) half-plane.

    Parameters
    ----------
    points_m : tuple of (float, float)
        Vertices (z, r) in metres, at least 3, non-zero area.
    """

    points_m: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class Arc:
    """A spherical-shell sector about (center_z, 0) (an annular sector in planar symmetry,
    about (center_z, center_r) in a planar domain with a full y range).

    Parameters
    ----------
    center_z_m : float
        Centre's z, metres.
    radii_m : tuple of float
        (inner, outer) radius, metres; inner may be 0 (a solid sector).
    angles_rad : tuple of float
        (first, second) polar angle from the +z direction towards +r: within 0..pi about a centre
        on the axis; any range up to a full turn (first < second) in a planar domain with a full
        y range.
    center_r_m : float
        Centre's y, metres (0 on the axis or mirror plane; only a full planar domain moves it).
    """

    center_z_m: float
    radii_m: tuple[float, float]
    angles_rad: tuple[float, float]
    center_r_m: float = 0.0


@dataclass(frozen=True)
class Electrode:
    """A named conductor held at a voltage.

    Parameters
    ----------
    name : str
        Unique name.
    voltage_V : float
        Voltage in volts; with a waveform, its constant (DC) part.
    shapes : tuple of Rect, Polygon or Arc
        Its shapes: the rects, then the polygons, then the arcs, each in file order.
    waveform : tracer.waveforms.Waveform or None
        The voltage as a function of time (its ``dc_V`` is ``voltage_V``); None for a constant
        voltage.
    """

    name: str
    voltage_V: float
    shapes: tuple[Rect | Polygon | Arc, ...]
    waveform: Waveform | None = None

    @property
    def drive(self) -> float | Waveform:
        """What the electrode carries: its waveform, or its constant voltage."""
        return self.voltage_V if self.waveform is None else self.waveform


@dataclass(frozen=True)
class Domain:
    """The solved region.

    Parameters
    ----------
    symmetry : str
        ``"axial"`` (rotation about z, coordinates (z, r)) or ``"planar"`` ((z, y), invariant in x).
    z_m : tuple of float
        (start, end) along z, metres.
    r_m : tuple of float
        (0, r_max) for axial or mirrored planar; (y_min, y_max) for planar with y_mm.
    cell_m : float
        Grid spacing, metres.
    edges : tuple of str
        (z_min, z_max, r_min, r_max), each ``"ground"`` or ``"open"`` (zero normal field);
        r_min is ``"axis"`` when r = 0 is the axis or a mirror plane.
    """

    symmetry: str
    z_m: tuple[float, float]
    r_m: tuple[float, float]
    cell_m: float
    edges: tuple[str, str, str, str]

    @property
    def mirror(self) -> bool:
        """True when r_min is the axis (axial) or a mirror plane (planar without y_mm)."""
        return self.edges[2] == "axis"


@dataclass(frozen=True)
class Beam:
    """A set of rays and where and how they start.

    Parameters
    ----------
    name : str
        Unique name.
    species : Species
        What the rays are.
    energy_eV : float or None
        Mean start kinetic energy, eV (None when the rays come from ``rays_csv``).
    start_z_m : float or None
        Source plane, metres (None with ``rays_csv``).
    energy_spread_eV : float
        Standard deviation of the start energy, eV.
    temperature_K : float or None
        Source temperature for thermal start energies, kelvin.
    count : int or None
        Number of rays (None with ``rays_csv``).
    seed : int
        Random seed for the start rays.
    start_r_m : float
        The source centre's offset from the axis (along x), or its y in planar symmetry, metres.
    radius_m : float
        Source radius (``"uniform"``) or its standard deviation (``"gaussian"``), metres.
    profile : str
        ``"uniform"`` or ``"gaussian"``.
    half_angle_rad : float
        Cone half-angle (standard deviation for ``"gaussian"``; cut-off for ``"cosine"``), 0..pi/2.
    angles : str
        ``"uniform"`` in solid angle, ``"gaussian"`` or ``"cosine"`` (Lambert).
    current_A : float or None
        Beam current, amperes.
    rays_csv : pathlib.Path or None
        A file of start rays (resolved against the config file's folder).
    start_time_s : float
        When the rays start on the trace's clock (the clock of the waveforms), seconds; with a
        spread, the middle of it.
    start_spread_s : float
        Full width of the start times, seconds (0: all at ``start_time_s``).
    start_times : str
        ``"uniform"`` over the spread, or ``"gaussian"`` with the spread as its full width at half
        maximum (a pulse's profile).
    """

    name: str
    species: Species
    energy_eV: float | None
    start_z_m: float | None
    energy_spread_eV: float = 0.0
    temperature_K: float | None = None
    count: int | None = 100
    seed: int = 0
    start_r_m: float = 0.0
    radius_m: float = 0.0
    profile: str = "uniform"
    half_angle_rad: float = 0.0
    angles: str = "uniform"
    current_A: float | None = None
    rays_csv: pathlib.Path | None = None
    start_time_s: float = 0.0
    start_spread_s: float = 0.0
    start_times: str = "uniform"


START_TIMES = ("uniform", "gaussian")
"""How a beam's start times spread: uniform over the spread, or Gaussian with it as the FWHM."""

DIRECTIONS = ("any", "forward", "backward")
"""The ``direction`` of a plane: the crossings its figures count (any, towards +z, towards -z)."""

CROSSINGS = ("first", "last", "all")
"""The named ``crossing`` choices of a plane; a whole number N >= 1 picks each ray's N-th crossing."""


Z_PLANE_RAD = math.pi / 2
"""The ``angle_rad`` of a plane z = const: its line runs along +r."""


@dataclass(frozen=True)
class Plane:
    """A detector plane: a line through a point of the (z, r) half-plane at an angle (in axial
    symmetry the cone, disc or cylinder it sweeps about the axis; in planar symmetry the plane it
    sweeps along x).  By default a plane z = const.

    Parameters
    ----------
    name : str
        Unique name.
    z_m : float
        The point's z, metres (inside the domain).
    stop : bool
        Whether rays end when they cross it.
    direction : str
        Which crossings its figures count: ``"any"``, ``"forward"`` (along the plane's normal; for
        a z plane towards +z) or ``"backward"``.
    crossing : str or int
        Of those, each ray's ``"first"``, ``"last"``, N-th (N >= 1) or ``"all"`` (the rule of
        :mod:`tracer.measure`).
    r_m : float
        The point's r (y in planar symmetry), metres.
    angle_rad : float
        Direction of the line from +z towards +r; ``Z_PLANE_RAD`` (pi/2, the default) for a plane
        z = const.  The normal, "forward", is the line's direction turned by -90 degrees (+z for
        a z plane).
    """

    name: str
    z_m: float
    stop: bool = False
    direction: str = "any"
    crossing: str | int = "first"
    r_m: float = 0.0
    angle_rad: float = Z_PLANE_RAD

    @property
    def tilted(self) -> bool:
        """True unless the plane is z = const."""
        return self.angle_rad != Z_PLANE_RAD

    def line(self) -> tuple[float, float, float]:
        """(n_z, n_r, d): the plane is n_z z + n_r r = d, with (n_z, n_r) its unit normal
        (exactly (1, 0, z) for a z plane)."""
        if not self.tilted:
            return 1.0, 0.0, self.z_m
        nz, nr = math.sin(self.angle_rad), -math.cos(self.angle_rad)
        return nz, nr, nz * self.z_m + nr * self.r_m


@dataclass(frozen=True)
class TraceOptions:
    """How rays are traced.

    Parameters
    ----------
    max_time_s : float
        Longest flight time of a ray, seconds.
    rtol : float
        Relative tolerance of the integrator, in (0, 1).
    ledger_threshold : float
        Relative energy-ledger error above which a ray is flagged.
    keep_paths : int
        Number of rays whose path points are kept for plots.
    time_zero_s : float or None
        The clock time arrival times count from for the resolving power (the extraction pulse);
        None: the start of the earliest pulse on any electrode, else each ray's own start
        (:meth:`Setup.time_zero_s`).
    """

    max_time_s: float = 1e-4
    rtol: float = 1e-9
    ledger_threshold: float = 1e-6
    keep_paths: int = 50
    time_zero_s: float | None = None


def scan_column(name: str, coils=()) -> str:
    """The scan-table column of a varied name: ``<electrode>_V`` for an electrode's voltage,
    ``<coil>_A`` for the current of a coil named in ``coils``, the path itself for a waveform
    parameter (``"repeller.pulse[0].delay_ns"``: it ends in its unit)."""
    return name if "[" in name else f"{name}_{scan_unit(name, coils)}"


def scan_unit(name: str, coils=()) -> str:
    """The unit of a varied name: ``V`` for a voltage, ``A`` for the current of a coil named in
    ``coils``, the suffix of a waveform parameter's key."""
    if "[" in name:
        return name.rpartition(".")[2].rpartition("_")[2]
    return "A" if name in coils else "V"


@dataclass(frozen=True)
class ScanSpec:
    """A batch of voltage sets.

    Parameters
    ----------
    ranges : tuple of (str, float, float, int)
        (name, from, to, count); the scan is the product of the ranges. The name is an electrode's
        (its voltage, volts), a coil's (its current, amperes) or a waveform parameter's path
        ``"<electrode>.pulse[i].<key>"`` or ``"<electrode>.sine[i].<key>"``, in the unit of its key
        (:func:`scan_column`).
    csv : pathlib.Path or None
        Instead of ranges, a CSV file whose header names ``<electrode>_V`` and ``<coil>_A``
        columns and waveform parameters (as ``ranges`` name them) and whose rows are the sets.
    """

    ranges: tuple[tuple[str, float, float, int], ...]
    csv: pathlib.Path | None = None


@dataclass(frozen=True)
class TuneSpec:
    """An optimiser over electrode voltages and coil currents.

    Parameters
    ----------
    vary : tuple of (str, float, float)
        (name, lo, hi): an electrode's voltage (V), a coil's current (A) or a waveform parameter
        (in its key's unit).
    goal : str
        ``"smallest_spot"``, ``"most_transmitted"``, ``"landing_energy"`` or ``"focus"``.
    goal_value : float or None
        The target landing energy (eV) or focus position z (m) for those goals, else None.
    at : str or None
        The plane where the goal is measured; None means where the rays end.
    seed : int
        Random seed of the optimiser.
    """

    vary: tuple[tuple[str, float, float], ...]
    goal: str
    goal_value: float | None = None
    at: str | None = None
    seed: int = 0


@dataclass(frozen=True)
class GunSpec:
    """A self-consistent run with space charge from an emitting electrode.

    Parameters
    ----------
    cathode : str
        The emitting electrode.
    emission : str
        ``"space_charge"`` (space-charge-limited) or ``"thermionic"`` (Richardson-Dushman).
    rays : int
        Number of emitted rays.
    temperature_K : float or None
        Cathode temperature, kelvin (needed for thermionic emission).
    work_function_eV : float or None
        Cathode work function, eV (needed for thermionic emission).
    schottky : bool
        Lower the work function by the Schottky effect (thermionic only).
    relaxation : float
        Under-relaxation of the space charge between iterations, in (0, 1].
    max_iterations : int
        Iteration budget.
    tolerance : float
        Relative change of the current at which the iteration has converged.
    species : Species
        The emitted particles (electrons unless given).
    """

    cathode: str
    emission: str = "space_charge"
    rays: int = 200
    temperature_K: float | None = None
    work_function_eV: float | None = None
    schottky: bool = False
    relaxation: float = 0.3
    max_iterations: int = 50
    tolerance: float = 1e-3
    species: Species = field(default_factory=lambda: species("e-"))


@dataclass(frozen=True)
class OpticsSpec:
    """Paraxial lens properties to compute.

    Parameters
    ----------
    species : Species
        The particles.
    energy_eV : float
        Kinetic energy at ``start_z_m`` on the axis, eV (> 0).
    object_z_m : float or None
        Object position, metres; None for an object at infinity.
    start_z_m : float or None
        Where on the axis the particle has ``energy_eV``, metres (a beam's energy reference is
        its start point); None: the first beam's ``start_z_m``, or the z_min end of the map
        when there is no beam.
    """

    species: Species
    energy_eV: float
    object_z_m: float | None = None
    start_z_m: float | None = None


GRIDS = (1, 2, 3)
"""The ``grids`` of ``[grid_error]``: 1 no estimate, 2 cells h and 2h, 3 a third grid as well."""

THIRD_GRIDS = ("coarse", "fine")
"""The ``third`` grid of ``[grid_error]``: cell 4h or h/2."""


@dataclass(frozen=True)
class GridErrorSpec:
    """The grid error bars of a run's figures (:mod:`tracer.errorbars`).

    Parameters
    ----------
    grids : int
        1: none; 2: solve on cells h and 2h and trace the same rays through both (Richardson);
        3: a third grid as well, to observe the order.
    third : str
        The third grid: ``"coarse"`` (cell 4h, cheap) or ``"fine"`` (cell h/2, four times the solve).
    safety : float or None
        The safety factor of the grid convergence index; None for Roache's (3 with two grids,
        1.25 where a third grid confirms the order).
    rays : int
        Rays of each beam traced again through the other grids' maps (all of them when fewer).
    warn_fraction : float
        A figure whose grid error exceeds this fraction of itself (of its spread, for a mean,
        when that is larger; of 1 for a fraction of rays) gets a warning.
    scan_rows : bool
        Whether ``tracer scan`` gives every figure of every row its grid error (two grids).
    """

    grids: int = 2
    third: str = "coarse"
    safety: float | None = None
    rays: int = 256
    warn_fraction: float = 0.01
    scan_rows: bool = False


@dataclass(frozen=True)
class MagneticSpec:
    """The static magnetic sources of a setup (``[[coil]]``, ``[[axial_field]]``,
    ``[[uniform_field]]``).

    Parameters
    ----------
    coils : tuple of tracer.magnetics.coil.Coil
        Coils about the axis; each a unit field combined by its current.
    profiles : tuple of tracer.magnetics.profile.AxialProfile
        Fields given on the axis (Glaser's bell or a table), continued off it.
    uniform : tuple of tracer.magnetics.uniform.UniformField
        Uniform fields, everywhere or in a box or sector.
    """

    coils: tuple = ()
    profiles: tuple = ()
    uniform: tuple = ()

    def __bool__(self) -> bool:
        return bool(self.coils or self.profiles or self.uniform)

    def currents(self) -> dict[str, float]:
        """Return the coil currents by name (A), in coil order."""
        return {c.name: c.current_A for c in self.coils}

    def digest(self) -> str:
        """sha256 hex digest of every source: coils (with their currents), axial fields (a table
        by its samples) and uniform fields."""
        parts = [repr(c) for c in self.coils] + [repr(u) for u in self.uniform]
        for p in self.profiles:
            parts.append(repr((p.name, p.peak_T, p.half_width_m, p.center_z_m)) if p.fit is None else
                         p.name + hashlib.sha256(p.fit.z.tobytes() + p.fit.samples.tobytes()).hexdigest())
        return hashlib.sha256("\n".join(parts).encode()).hexdigest()

    def overlapping_coils(self) -> tuple:
        """Pairs of coil names whose winding sections share area (or coincide, for thin
        windings): one winding, which carries one current."""
        return tuple((a.name, b.name) for i, a in enumerate(self.coils) for b in self.coils[i + 1:]
                     if all(_share(*sa, *sb) for sa, sb in ((a.z_m, b.z_m), (a.r_m, b.r_m))))


def _share(a0, a1, b0, b1) -> bool:
    """Whether the spans [a0, a1] and [b0, b1] overlap: over a length, or a span of no length
    strictly inside the other (equal when both have none)."""
    if a1 > a0 and b1 > b0:
        return min(a1, b1) > max(a0, b0)
    if a1 == a0 and b1 == b0:
        return a0 == b0
    (p, _), (lo, hi) = ((a0, a1), (b0, b1)) if a1 == a0 else ((b0, b1), (a0, a1))
    return lo < p < hi


@dataclass(frozen=True)
class Setup:
    """Everything a config file describes.

    Parameters
    ----------
    title : str
        What this setup is.
    domain : Domain
    electrodes : tuple of Electrode
    beams : tuple of Beam
    planes : tuple of Plane
    trace : TraceOptions
    scan, tune, gun, optics : ScanSpec, TuneSpec, GunSpec, OpticsSpec or None
        The optional sections.
    source : pathlib.Path or None
        The config file, for relative paths.
    grid_error : GridErrorSpec
        The grid error bars of the figures (``[grid_error]``).
    author : str
        Author and contact for the files a run writes (openPMD ``author``); "" leaves it to
        :func:`tracer.store.openpmd.default_author`.
    magnetic : MagneticSpec
        The static magnetic sources (none by default: an electric-only setup).
    """

    title: str
    domain: Domain
    electrodes: tuple[Electrode, ...]
    beams: tuple[Beam, ...] = ()
    planes: tuple[Plane, ...] = ()
    trace: TraceOptions = TraceOptions()
    scan: ScanSpec | None = None
    tune: TuneSpec | None = None
    gun: GunSpec | None = None
    optics: OpticsSpec | None = None
    source: pathlib.Path | None = None
    grid_error: GridErrorSpec = GridErrorSpec()
    author: str = ""
    magnetic: MagneticSpec = MagneticSpec()

    def voltages(self) -> dict[str, float]:
        """Return the electrode voltages by name, in electrode order (the DC part of a waveform)."""
        return {e.name: e.voltage_V for e in self.electrodes}

    def drives(self) -> dict[str, float | Waveform]:
        """Return what each electrode carries by name: its waveform, or its constant voltage."""
        return {e.name: e.drive for e in self.electrodes}

    @property
    def time_zero_s(self) -> float | None:
        """The clock time arrival times count from for the resolving power: ``[trace]
        time_zero``, else the start of the earliest pulse on any electrode (the extraction pulse),
        else None: with no pulse each ray's arrival times count from its own start (flight times,
        :func:`tracer.measure.arrival_times`)."""
        if self.trace.time_zero_s is not None:
            return self.trace.time_zero_s
        return first_pulse_s(self.drives().values())

    @property
    def in_time(self) -> bool:
        """True when an electrode's voltage changes in time."""
        return any(e.waveform is not None and e.waveform.split()[1] is not None
                   for e in self.electrodes)

    def geometry_hash(self) -> str:
        """Return the sha256 hex digest of the domain, electrode names and shapes (not voltages)."""
        payload = {
            "format": "tracer-geometry-1",
            "domain": dataclasses.asdict(self.domain),
            "electrodes": [
                {"name": e.name, "shapes": [{"kind": type(s).__name__, **dataclasses.asdict(s)} for s in e.shapes]}
                for e in self.electrodes
            ],
        }
        text = json.dumps(payload, sort_keys=True, separators=(",", ":"), allow_nan=False)
        return hashlib.sha256(text.encode()).hexdigest()
