"""Read a setup from TOML into the frozen dataclasses of :mod:`tracer.schema`.

The schema is that of the user's guide (docs/reference.md). Every key that
carries a unit says so in its suffix; inside, everything is SI (mm -> m,
deg -> rad, us/ns -> s). All checks happen here, before any work: every
problem raises a :class:`ConfigError` whose text is ``"<key path>: <message>"``
and names the bad value, e.g.
``electrode[2].rect[0].r_mm: inner radius 7.0 exceeds outer 6.0`` (indices
count from 0, in file order).

The second coordinate of shapes and of a beam's start follows the domain:
``r_mm`` when the domain gives ``r_mm`` (axial, or planar above a mirror plane
y = 0), ``y_mm`` when a planar domain gives ``y_mm = [lower, upper]``.

Keys (defaults in brackets; "r" stands for "y" in a domain with y_mm)::

    title                               [""]
    author                              [""; then $TRACER_AUTHOR, then the login name] the
                                        openPMD ``author`` of the files a run writes
    [domain]     symmetry "axial"|"planar", z_mm [a, b], r_mm R or y_mm [a, b], cell_mm,
                 edges "ground"|"open" or {z_min, z_max, r_max | y_min, y_max} ["ground"]
    [[electrode]] name, voltage_V, and one or more of
                 [[electrode.rect]] z_mm, r_mm;  [[electrode.polygon]] points_mm [[z, r], ...];
                 [[electrode.arc]] center_z_mm, radii_mm, angles_deg (polar angle from +z, 0..180;
                 in a planar domain with y_mm: center_y_mm [0] and any range up to a full turn,
                 -360..360, towards +y);
                 a voltage that changes in time (docs/time-dependent-voltages.md): voltage_V [0] is
                 the DC part of [[electrode.pulse]] high_V, low_V [0], delay_ns|us, rise_ns|us [0],
                 width_ns|us [on for ever], fall_ns|us [0], period_ns|us, count [1];
                 [[electrode.sine]] amplitude_V, frequency_MHz|kHz, phase_deg [0];
                 [electrode.table] file (columns time_ns|time_us|time_s, voltage_V)
    [[beam]]     name, species (or mass_u + charge_e), energy_eV, start_z_mm,
                 energy_sigma_eV or energy_fwhm_eV [0] (a normal spread), temperature_K,
                 count [100], seed [0], start_r_mm [0], profile "uniform"|"gaussian" with
                 radius_mm [0] (uniform) or sigma_mm (gaussian: of x and of y), angles
                 "uniform"|"gaussian"|"cosine" with half_angle_deg [0; 90 for cosine] (0..90;
                 uniform, cosine) or sigma_angle_deg (gaussian), current_A;
                 or rays_csv (a file of start rays) in place of the distribution keys;
                 start_time_ns|us [0], start_spread_ns|us [0], start_times "uniform"|"gaussian" (FWHM)
    [[plane]]    name, z_mm, r_mm [0], angle_deg [90] (the plane's line through (z, r), from +z
                 towards +r, -180..180; 90 is z = const), stop [false],
                 direction "any"|"forward"|"backward" ["any"], crossing "first"|"last"|"all"|N
                 (from 1) ["first"]
    [trace]      max_time_us or max_time_ns [100 us] (each ray's, from its start), rtol [1e-9],
                 ledger_threshold [1e-6], keep_paths [50], time_zero_ns|us [the earliest pulse's
                 start, else each ray's own start] (arrival times and the resolving power count
                 from it)
    [scan]       <electrode> = [from_V, to_V, count], "<electrode>.pulse[i].<key>" = [from, to, count]
                 (a waveform parameter in its key's unit; also .sine[i]), ...;  or csv = "sets.csv"
                 (<electrode>_V columns, and waveform parameters named as the keys)
    [tune]       vary = {<electrode> = [lo_V, hi_V], "<electrode>.pulse[i].<key>" = [lo, hi], ...}, goal = "smallest_spot" | "most_transmitted"
                 | {landing_energy_eV = E} | {focus_z_mm = z}, at (a plane), seed [0]
    [gun]        cathode, emission "space_charge"|"thermionic", rays [200], temperature_K and
                 work_function_eV (thermionic), schottky [false], relaxation [0.3],
                 max_iterations [50], tolerance [1e-3], species ["e-"]
    [optics]     species, energy_eV, object_z_mm [at infinity], start_z_mm [the first beam's start]
    [grid_error] grids 1|2|3 [2], third "coarse"|"fine" ["coarse"], safety [Roache's: 3, or 1.25
                 with an order confirmed], rays [256], warn_fraction [0.01], scan_rows [false]
"""

from __future__ import annotations

import csv
import dataclasses
import datetime
import difflib
import json
import math
import os
import pathlib
import re
import sys
import tomllib
import warnings
from dataclasses import dataclass

from scipy import constants

from tracer import footprint
from tracer.bounds import BOUNDS, bound_of
from tracer.geometry import overlapping_electrodes, sector_bbox, shape_table
from tracer.measure import columns
from tracer.schema import (CROSSINGS, NAME, NAME_LENGTH, TITLE_LENGTH, DIRECTIONS, GRIDS, START_TIMES, THIRD_GRIDS, Arc, Beam, ConfigError, Domain,
                           Electrode, GridErrorSpec, GunSpec, MagneticSpec, OpticsSpec, Plane, Polygon, Rect, ScanSpec,
                           Setup, TraceOptions, TuneSpec, Z_PLANE_RAD, scan_unit)
from tracer.species import custom_species, species
from tracer.waveforms import Pulse, Sinusoid, Waveform, WaveformError, read_table

__all__ = ["Arc", "Beam", "ConfigError", "Domain", "Electrode", "GunSpec", "OpticsSpec", "Plane", "Polygon",
           "Rect", "ScanSpec", "Setup", "TraceOptions", "TuneSpec", "load", "loads"]

_MM_PER_M = round(1 / constants.milli)   # conversions divide, so 52 mm -> 0.052 m exactly rounded
_DEG = constants.degree
_PER_S = {"max_time_us": round(1 / constants.micro), "max_time_ns": round(1 / constants.nano)}

_MAX_CELLS = 1e9             # per side, so that node counts stay finite numbers
_INT64_MAX = 2**63 - 1
_BARE_KEY = re.compile(r"[A-Za-z0-9_\-]+")
_REQUIRED = object()

_TOP = ("title", "author", "domain", "electrode", "beam", "plane", "trace", "scan", "tune", "gun", "optics", "grid_error",
        "coil", "axial_field", "uniform_field")


# ---------------------------------------------------------------- entry points


def load(path: str | os.PathLike) -> Setup:
    """Read a setup from a TOML file.

    Parameters
    ----------
    path : str or os.PathLike
        The config file; relative paths inside it are taken from its folder.

    Returns
    -------
    Setup

    Raises
    ------
    ConfigError
        For an unreadable file or any bad entry.
    """
    source = pathlib.Path(path).resolve()
    try:
        text = source.read_bytes().decode("utf-8")
    except OSError as error:
        raise ConfigError(str(path), f"cannot read the file: {error.strerror or error}") from None
    except UnicodeDecodeError as error:
        raise ConfigError(str(path), f"not UTF-8 text (byte {error.start})") from None
    return loads(text, source=source)


def loads(text: str, source: str | os.PathLike | None = None) -> Setup:
    """Read a setup from TOML text.

    Parameters
    ----------
    text : str
        The TOML document.
    source : str, os.PathLike or None
        The file it came from; relative paths are taken from its folder (else the current folder).

    Returns
    -------
    Setup

    Raises
    ------
    ConfigError
        For a TOML syntax error (key ``"line L, column C"``) or any bad entry.
    """
    source = None if source is None else pathlib.Path(source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise _syntax_error(str(error), text) from None
    except RecursionError:
        raise ConfigError("document", "nested too deeply to read") from None
    except ValueError as error:   # an integer longer than Python reads (sys.get_int_max_str_digits)
        raise _long_integer(text) or error from None
    return _setup(data, source)


def _long_integer(text):
    """The ConfigError of the first integer in ``text`` longer than Python reads, naming the key
    on its line; None when there is none."""
    limit = sys.get_int_max_str_digits()
    match = re.search(r"(?<![\w.])[+-]?[0-9](?:_?[0-9]){%d,}" % limit, text) if limit else None
    if match is None:
        return None
    start = text.rfind("\n", 0, match.start()) + 1
    key = re.match(r"\s*([^=\s]+)\s*=", text[start:match.start()])
    digits = sum(c.isdigit() for c in match[0])
    return ConfigError(f"line {text.count(chr(10), 0, start) + 1}, column {match.start() - start + 1}",
                       f"{key[1] + ': ' if key else ''}an integer of {digits} digits; tracer reads at most "
                       f"{limit} (Python's limit), and no input needs more")


def _syntax_error(message, text):
    """Turn a tomllib message '... (at line L, column C)' into a ConfigError keyed 'line L, column C'."""
    match = re.fullmatch(r"(.*) \(at line (\d+), column (\d+)\)", message, flags=re.S)
    if match:
        return ConfigError(f"line {match[2]}, column {match[3]}", match[1])
    match = re.fullmatch(r"(.*) \(at end of document\)", message, flags=re.S)
    lines = text.split("\n")
    where = f"line {len(lines)}, column {len(lines[-1]) + 1}"
    return ConfigError(where, (match[1] if match else message) + " (at the end of the file)")


# ---------------------------------------------------------------- the reading machinery


def _show(value) -> str:
    """A short display of a TOML value, in TOML spelling."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, (datetime.date, datetime.time)):
        return f"the date/time {value.isoformat()}"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _join(path: str, key: str) -> str:
    """Key path of `key` inside `path`, quoting keys that are not bare TOML keys."""
    shown = key if _BARE_KEY.fullmatch(key) else json.dumps(key)
    return f"{path}.{shown}" if path else shown


def _not_found(path, name, choices, what, none="there is none to choose from"):
    """The error for a `name` that is not one of `choices`, with a did-you-mean hint."""
    close = difflib.get_close_matches(name, choices, n=1)
    if close:
        hint = f"did you mean {close[0]!r}?"
    elif choices:
        hint = "expected one of " + ", ".join(repr(c) for c in choices)
    else:
        hint = none
    return ConfigError(path, f"{what} {name!r}; {hint}")


def _unknown(path, key, choices, what="unknown key"):
    """The error for a key of the table at `path` that is not one of `choices`."""
    return _not_found(_join(path, key), key, choices, what)


class _Table:
    """A TOML table being read: its key path, checked against the keys it may hold."""

    def __init__(self, value, path, keys, what="unknown key", hints=None, shown=None):
        if not isinstance(value, dict):
            raise ConfigError(path, f"expected a table, got {_show(value)}")
        for key in value:
            if key not in keys:
                if hints and key in hints:
                    raise ConfigError(_join(path, key), hints[key])
                raise _unknown(path, key, tuple(keys if shown is None else shown), what)
        self.data = value
        self.path = path

    def has(self, key):
        return key in self.data

    def at(self, key):
        return _join(self.path, key)

    def get(self, key, read, default=_REQUIRED, **options):
        """Read `key` with `read(value, path, **options)`, or return the default when absent."""
        if key not in self.data:
            if default is _REQUIRED:
                raise ConfigError(self.at(key), "missing (required)")
            return default
        return read(self.data[key], self.at(key), **options)


def _number(value, path, low=None, high=None, low_open=False, high_open=False, unit=None):
    """A finite number within optional bounds and within the range of its unit
    (:func:`tracer.bounds.bound_of` the key, or of ``unit``, a suffix such as "_V"), as float."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(path, f"expected a number, got {_show(value)}")
    try:
        number = float(value)
    except OverflowError:
        raise ConfigError(path, f"{_show(value)} is too large") from None
    if not math.isfinite(number):
        raise ConfigError(path, f"must be finite, got {_show(value)}")
    if low is not None and (number <= low if low_open else number < low):
        raise ConfigError(path, f"must be {'>' if low_open else '>='} {low:g}, got {_show(value)}")
    if high is not None and (number >= high if high_open else number > high):
        raise ConfigError(path, f"must be {'<' if high_open else '<='} {high:g}, got {_show(value)}")
    bound = BOUNDS.get(unit) if unit else bound_of(path)
    if bound is not None and bound.problem(number):
        raise ConfigError(path, bound.problem(number))
    return number


def _positive(value, path):
    return _number(value, path, low=0.0, low_open=True)


def _fraction(value, path):
    """A number in the open interval (0, 1)."""
    return _number(value, path, low=0.0, high=1.0, low_open=True, high_open=True)


def _integer(value, path, low=0):
    """An integer >= low (a float such as 100.0 is refused)."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise ConfigError(path, f"expected an integer, got {_show(value)}")
    if value < low:
        raise ConfigError(path, f"must be >= {low}, got {value}")
    if value > _INT64_MAX:
        raise ConfigError(path, f"{_show(value)} is too large")
    return value


def _raw(value, path):
    return value


def _string(value, path):
    if not isinstance(value, str):
        raise ConfigError(path, f"expected a string, got {_show(value)}")
    return value


def _boolean(value, path):
    if not isinstance(value, bool):
        raise ConfigError(path, f"expected true or false, got {_show(value)}")
    return value


def _choice(value, path, choices):
    """One of the strings `choices`."""
    text = _string(value, path)
    if text not in choices:
        raise _not_found(path, text, choices, "unknown value")
    return text


def _name(value, path):
    """A name: letters, digits and _ . + - (it becomes a column and group name)."""
    text = _string(value, path)
    if not NAME.fullmatch(text):
        raise ConfigError(path, f"bad name {_show(text)}: use letters, digits and _ . + - (not starting with . + -)")
    if len(text) > NAME_LENGTH:
        raise ConfigError(path, f"a name of {len(text)} characters; at most {NAME_LENGTH} (names become parts "
                                "of file names)")
    return text


def _title(value, path):
    """The title: text of at most TITLE_LENGTH characters (it heads every figure and table)."""
    text = _string(value, path)
    if len(text) > TITLE_LENGTH:
        raise ConfigError(path, f"a title of {len(text):,} characters; at most {TITLE_LENGTH} (it heads every "
                                "figure and table)")
    return text


def _check_output_names(beams, planes, electrodes, scan):
    """Refuse names whose pictures (``phase_<beam>_<plane>.png``) or scan columns
    (``<beam>.<plane>.<figure>``, ``<beam>.<electrode>.<figure>``) would come out twice."""
    drawn = {}
    for b in beams:
        for p in planes:
            other = drawn.setdefault(f"{b.name}_{p.name}", (b.name, p.name))
            if other != (b.name, p.name):
                raise ConfigError("plane", f"beam {b.name!r} at plane {p.name!r} and beam {other[0]!r} at plane "
                                           f"{other[1]!r} would draw the same picture phase_{b.name}_{p.name}.png; "
                                           "rename one of them")
    if scan is None:
        return
    names = columns([b.name for b in beams], [p.name for p in planes], [e.name for e in electrodes])
    twice = next((c for k, c in enumerate(names) if c in names[:k]), None)
    if twice is not None:
        raise ConfigError("scan", f"the table's column {twice!r} would come twice (beam, plane and electrode "
                                  "names are joined by '.'): rename a beam, plane or electrode")


def _array(value, path, length=None):
    if not isinstance(value, list):
        raise ConfigError(path, f"expected an array, got {_show(value)}")
    if length is not None and len(value) != length:
        raise ConfigError(path, f"expected {length} values, got {len(value)}: {_show(value)}")
    return value


def _range(value, path, words, low=None, unit=None):
    """A pair [a, b] of numbers with a < b; `words` names the two ends in messages."""
    pair = _array(value, path, 2)
    a, b = (_number(v, f"{path}[{i}]", unit=unit) for i, v in enumerate(pair))
    if a > b:
        raise ConfigError(path, f"{words[0]} {_show(pair[0])} exceeds {words[1]} {_show(pair[1])}")
    if a == b:
        raise ConfigError(path, f"{words[0]} {_show(pair[0])} equals {words[1]} {_show(pair[1])}: an empty range")
    if low is not None and a < low[0]:
        raise ConfigError(path, f"{words[0]} {_show(pair[0])} is below {low[0]:g} ({low[1]})")
    return a, b


def _tables(value, path, header):
    """An array of tables ([[header]]): yields (item, key path)."""
    if isinstance(value, dict):
        raise ConfigError(path, f"expected an array of tables [[{header}]], got a single table [{header}]")
    for i, item in enumerate(_array(value, path)):
        yield item, f"{path}[{i}]"


def _file(value, path, base):
    """An existing file, resolved against `base`."""
    text = _string(value, path)
    try:
        resolved = (base / text).resolve()
        exists = resolved.is_file()
    except (OSError, ValueError) as error:
        raise ConfigError(path, f"bad file name {text!r}: {error}") from None
    if not exists:
        raise ConfigError(path, f"no such file {text!r} (looked for {str(resolved)!r})")
    return resolved


def _unique(names, path, what):
    """Refuse duplicate names; `names` are in file order."""
    seen = {}
    for i, name in enumerate(names):
        if name in seen:
            raise ConfigError(f"{path}[{i}].name", f"duplicate {what} name {name!r} (also {path}[{seen[name]}])")
        seen[name] = i


def _metres(values_mm):
    """A tuple of lengths in mm as metres."""
    return tuple(v / _MM_PER_M for v in values_mm)


def _within(x, span, path, shown, axis):
    """Refuse a position `x` (m) outside `span` (m); `shown` is the value as written."""
    if not span[0] <= x <= span[1]:
        lo, hi = (v * _MM_PER_M for v in span)
        raise ConfigError(path, f"{_show(shown)} is outside the domain's {axis} range {lo:g}..{hi:g} mm")


# ---------------------------------------------------------------- the sections


def _setup(data, source):
    top = _Table(data, "", _TOP, what="unknown top-level key")
    base = source.parent if source is not None else pathlib.Path.cwd()
    title = top.get("title", _title, default="")
    author = top.get("author", _string, default="")
    domain = _domain(top.get("domain", _raw))
    if not top.has("electrode"):
        raise ConfigError("electrode", "missing: give at least one [[electrode]]")
    electrodes = tuple(_electrode(v, p, domain, base)
                       for v, p in _tables(top.data["electrode"], "electrode", "electrode"))
    if not electrodes:
        raise ConfigError("electrode", "empty: give at least one [[electrode]]")
    names = tuple(e.name for e in electrodes)
    _unique(names, "electrode", "electrode")
    _check_memory(domain, len(electrodes))
    tied = _check_geometry(electrodes, domain)
    beams = tuple(_beam(v, p, domain, base) for v, p in _tables(top.data.get("beam", []), "beam", "beam"))
    _unique([b.name for b in beams], "beam", "beam")
    planes = tuple(_plane(v, p, domain) for v, p in _tables(top.data.get("plane", []), "plane", "plane"))
    plane_names = tuple(p.name for p in planes)
    _unique(plane_names, "plane", "plane")
    trace = top.get("trace", _trace, default=TraceOptions())
    magnetic = _magnetic(top, domain, base, names)
    coils = tuple(magnetic.currents())
    scan = top.get("scan", _scan, default=None, names=names, base=base, electrodes=electrodes, coils=coils)
    tune = top.get("tune", _tune, default=None, names=names, planes=plane_names, domain=domain,
                   electrodes=electrodes, coils=coils)
    _check_tied(tied, electrodes, magnetic, scan, tune)
    _check_output_names(beams, planes, electrodes, scan)
    _warn_cut_fields(magnetic, domain)
    return Setup(
        title=title,
        author=author,
        domain=domain,
        electrodes=electrodes,
        beams=beams,
        planes=planes,
        trace=trace,
        scan=scan,
        tune=tune,
        gun=top.get("gun", _gun, default=None, names=names),
        optics=top.get("optics", _optics, default=None),
        source=source,
        grid_error=top.get("grid_error", _grid_error, default=GridErrorSpec()),
        magnetic=magnetic,
    )


@dataclass(frozen=True)
class _Side:
    """How the domain names its second coordinate ("r" or "y"), the words for a range's two
    ends, the lower limit of shapes with its name (mirror domains), and why the other letter is wrong."""

    letter: str
    words: tuple[str, str]
    below: tuple[float, str] | None
    why_not_other: str

    def hint(self, key):
        """The hint for `key` (with "{}" for the letter) written with the other letter."""
        other = "y" if self.letter == "r" else "r"
        return {key.format(other): self.why_not_other}


def _side(domain):
    if not domain.mirror:
        return _Side("y", ("lower y", "upper"), None, "this planar domain gives y_mm, so positions across z are y")
    why = "positions across z are r here (y only when the domain gives y_mm)"
    if domain.symmetry == "axial":
        return _Side("r", ("inner radius", "outer"), (0.0, "the axis"), why)
    return _Side("r", ("lower r", "upper"), (0.0, "the mirror plane"), why)


def _domain(value):
    t = _Table(value, "domain", ("symmetry", "z_mm", "r_mm", "y_mm", "cell_mm", "edges"))
    symmetry = t.get("symmetry", _choice, choices=("axial", "planar"))
    z = t.get("z_mm", _range, words=("start", "end"))
    if t.has("r_mm") and t.has("y_mm"):
        raise ConfigError("domain.y_mm", f"give r_mm or y_mm, not both (r_mm = {_show(t.data['r_mm'])} is also given)")
    if t.has("y_mm"):
        if symmetry == "axial":
            raise ConfigError("domain.y_mm", "axial symmetry takes r_mm (the outer radius), not y_mm")
        r = t.get("y_mm", _range, words=("lower y", "upper"))
    else:
        r = (0.0, t.get("r_mm", _positive))
    cell = t.get("cell_mm", _positive)
    shown = _show(t.data["cell_mm"])
    for axis, (lo, hi) in (("z", z), ("r" if t.has("r_mm") else "y", r)):
        cells = (hi - lo) / cell
        if not cells >= 2:
            raise ConfigError("domain.cell_mm", f"{shown} is coarser than half the {axis} extent {hi - lo:g} mm")
        if not cells <= _MAX_CELLS:
            raise ConfigError("domain.cell_mm", f"{shown} gives more than {_MAX_CELLS:g} cells across {axis}")
    mirror = not t.has("y_mm")
    edges = _edges(t.data.get("edges", "ground"), symmetry, mirror)
    return Domain(symmetry, _metres(z), _metres(r), cell / _MM_PER_M, edges)


def _edges(value, symmetry, mirror):
    path = "domain.edges"
    kinds = ("ground", "open")
    if mirror:
        sides = ("z_min", "z_max", "r_max")
        axis = "the axis" if symmetry == "axial" else "the mirror plane"
        only = "only with domain.y_mm; here the sides are z_min, z_max, r_max"
        hints = {"r_min": f"not allowed: r = 0 is {axis}", "y_min": only, "y_max": only}
    else:
        sides = ("z_min", "z_max", "y_min", "y_max")
        hints = dict.fromkeys(("r_min", "r_max"), "this domain gives y_mm: its sides are z_min, z_max, y_min, y_max")
    if isinstance(value, str):
        kind = _choice(value, path, kinds)
        chosen = dict.fromkeys(sides, kind)
    else:
        t = _Table(value, path, sides, hints=hints)
        chosen = {side: t.get(side, _choice, default="ground", choices=kinds) for side in sides}
    if mirror:
        return (chosen["z_min"], chosen["z_max"], "axis", chosen["r_max"])
    return (chosen["z_min"], chosen["z_max"], chosen["y_min"], chosen["y_max"])


def _check_geometry(electrodes, domain):
    """Refuse shapes that miss the domain or overlap another electrode's at a different voltage;
    return the pairs of electrode names that overlap (at one voltage)."""
    pairs = overlapping_electrodes(shape_table(electrodes, domain), domain.cell_m)
    return tuple((electrodes[i].name, electrodes[j].name) for i, j in pairs)


def _check_tied(pairs, electrodes, magnetic, scan, tune):
    """Refuse a scan or tune that would set overlapping electrodes (``pairs`` of names) or
    overlapping coils apart.

    Overlapping electrodes are one conductor, overlapping coils one winding: a scan's ranges must
    give both the one voltage (current) they share (a range of one value), and a tune may vary
    neither; neither electrode may have a waveform parameter scanned or tuned.  A CSV scan's rows
    are checked when they are read (:func:`tracer.scans.voltage_sets`).
    """
    settings = {e.name: e.voltage_V for e in electrodes} | magnetic.currents()
    tied = [(a, b, "electrodes") for a, b in pairs] + [(a, b, "coils") for a, b in magnetic.overlapping_coils()]
    ranges = {name: (lo, hi) for name, lo, hi, _ in scan.ranges} if scan is not None else {}
    fixed = settings | {n: lo if lo == hi else None for n, (lo, hi) in ranges.items()}

    def owner(name):
        return name if name in settings else waveform_parameter(name)[0]

    for name, *_ in tune.vary if tune is not None else ():
        for a, b, kind in tied:
            if owner(name) in (a, b):
                raise ConfigError(_join("tune.vary", name), tied_message(a, b, "tune would vary them apart", kind))
    for name, (lo, hi) in ranges.items():
        for a, b, kind in tied:
            if owner(name) in (a, b) and (name not in settings or fixed[a] is None or fixed[a] != fixed[b]):
                unit = "" if name not in settings else " " + scan_unit(name, tuple(magnetic.currents()))
                raise ConfigError(_join("scan", name), tied_message(
                    a, b, f"the scan would set {name!r} to {_show(lo)}..{_show(hi)}{unit}", kind))


_TIED = {"electrodes": ("one conductor at one voltage", "join their shapes into one electrode, or separate them"),
         "coils": ("one winding with one current", "join them into one coil, or separate their sections")}


def tied_message(a, b, why, kind="electrodes"):
    """The refusal of a set that sets overlapping ``kind`` ("electrodes" or "coils") ``a`` and
    ``b`` apart."""
    one, fix = _TIED[kind]
    return f"{kind} {a!r} and {b!r} overlap, so they are {one}; {why}: {fix}"


def _check_memory(domain, n_electrodes):
    """Refuse a grid whose field solution would not fit in memory (:mod:`tracer.footprint`)."""
    cell = domain.cell_m
    nodes = footprint.grid_nodes(domain)
    need = nodes * footprint.NODE_BYTES * n_electrodes
    limit = footprint.memory_limit()
    if need > limit:
        coarser = cell * _MM_PER_M * math.sqrt(need / limit) * 1.01   # margin for the +1 node per side
        step = 10.0 ** (math.floor(math.log10(coarser)) - 1) if math.isfinite(coarser) else math.inf
        raise ConfigError(
            "domain.cell_mm",
            f"{cell * _MM_PER_M:g} mm gives a grid of {nodes:.3g} nodes, which for {n_electrodes} electrode(s) "
            f"needs about {need / 1e9:.3g} GB, more than {limit / 1e9:.3g} GB ({footprint.MEMORY_SHARE:.0%} of this "
            f"machine's memory); use a coarser cell_mm, e.g. {math.ceil(coarser / step) * step:.3g}",
        )


def _electrode(value, path, domain, base):
    t = _Table(value, path, ("name", "voltage_V", "rect", "polygon", "arc") + _WAVE_PARTS)
    name = t.get("name", _name)
    if name == "csv":
        raise ConfigError(t.at("name"), "'csv' is reserved (it is the [scan] key for a file of voltage sets)")
    try:
        return _electrode_body(t, path, domain, base)
    except ConfigError as error:   # the path gives the index; the message names the electrode
        raise ConfigError(error.key, f"electrode {name!r}: {error.message}") from None


def _electrode_body(t, path, domain, base):
    """The electrode of table t (its name read): its voltage or waveform and its shapes."""
    in_time = any(t.has(part) for part in _WAVE_PARTS)
    voltage = t.get("voltage_V", _number, default=0.0 if in_time else _REQUIRED)
    waveform = _waveform(t, voltage, base) if in_time else None
    side = _side(domain)
    shapes = []
    for kind, read in (("rect", _rect), ("polygon", _polygon), ("arc", _arc)):
        for item, item_path in _tables(t.data.get(kind, []), t.at(kind), f"electrode.{kind}"):
            shape, box = read(item, item_path, side)
            _check_inside(box, item_path, domain, side)
            shapes.append(shape)
    if not shapes:
        tables = "[[electrode.rect]], [[electrode.polygon]] or [[electrode.arc]]"
        raise ConfigError(path, f"no shapes; give {tables}")
    return Electrode(t.data["name"], voltage, tuple(shapes), waveform)


# ---------------------------------------------------------------- magnetic sources


def _magnetic(top, domain, base, electrodes):
    """The ``[[coil]]``, ``[[axial_field]]`` and ``[[uniform_field]]`` tables; names unique among
    them all, and a coil's none of the ``electrodes`` (a scan or tune names either by it, and its
    ``<name>_A`` column); overlapping coils at one current."""
    coils = tuple(_coil(v, p, domain) for v, p in _tables(top.data.get("coil", []), "coil", "coil"))
    profiles = tuple(_axial_field(v, p, domain, base)
                     for v, p in _tables(top.data.get("axial_field", []), "axial_field", "axial_field"))
    uniform = tuple(_uniform_field(v, p) for v, p in
                    _tables(top.data.get("uniform_field", []), "uniform_field", "uniform_field"))
    seen = {}
    for key, items in (("coil", coils), ("axial_field", profiles), ("uniform_field", uniform)):
        for i, item in enumerate(items):
            if item.name in seen:
                raise ConfigError(f"{key}[{i}].name", f"duplicate magnetic source name {item.name!r} "
                                                      f"(also {seen[item.name]})")
            seen[item.name] = f"{key}[{i}]"
    for i, c in enumerate(coils):
        if c.name in electrodes:
            raise ConfigError(f"coil[{i}].name", f"{c.name!r} is also an electrode's name; a scan or tune "
                                                 "names either by it: rename one")
    spec = MagneticSpec(coils, profiles, uniform)
    amps = spec.currents()
    for a, b in spec.overlapping_coils():
        if amps[a] != amps[b]:
            raise ConfigError(f"coil[{list(amps).index(b)}].current_A", tied_message(
                a, b, f"{b!r} carries {amps[b]:g} A and {a!r} {amps[a]:g} A", "coils"))
    return spec


def _warn_cut_fields(magnetic, domain):
    """Warn, once the config is read, of each round magnetic source cut by the domain's ends."""
    if not (magnetic.coils or magnetic.profiles):
        return
    from tracer.magnetics.ends import CutFieldWarning, cut_fields

    for message in cut_fields(magnetic, domain.z_m):
        warnings.warn(f"WARNING: {message}", CutFieldWarning, stacklevel=4)


def _axial_only(path, domain, what):
    if domain.symmetry != "axial":
        raise ConfigError(path, f"{what} needs an axially symmetric domain (domain.symmetry = \"axial\"); "
                                "in a planar domain give a [[uniform_field]]")


def _coil(value, path, domain):
    from tracer.magnetics.coil import Coil

    t = _Table(value, path, ("name", "z_mm", "r_mm", "turns", "current_A"),
               hints={"current": "give current_A (amperes, in each turn)",
                      "y_mm": "a coil lies about the axis: give r_mm = [inner, outer]"})
    _axial_only(path, domain, "a coil")
    name = t.get("name", _name)
    z = _span(t, "z_mm", ("start", "end"))
    r = _span(t, "r_mm", ("inner radius", "outer"))
    if r[0] < 0.0:
        raise ConfigError(t.at("r_mm"), f"inner radius {_show(t.data['r_mm'][0])} is below 0 (the axis)")
    if r[1] == 0.0:
        raise ConfigError(t.at("r_mm"), "a winding on the axis carries no field; give its radius")
    if r[0] == 0.0 and r[1] > 0.0:
        raise ConfigError(t.at("r_mm"), "a winding from the axis outwards crosses the axis; give inner radius > 0")
    return Coil(name, _metres(z), _metres(r), t.get("turns", _integer, default=1, low=1),
                t.get("current_A", _number))


def _span(t, key, words):
    """A pair [a, b] with a <= b (equal ends: a thin winding)."""
    pair = t.get(key, _array, length=2)
    a, b = (_number(v, f"{t.at(key)}[{i}]") for i, v in enumerate(pair))
    if a > b:
        raise ConfigError(t.at(key), f"{words[0]} {_show(pair[0])} exceeds {words[1]} {_show(pair[1])}")
    return a, b


def _axial_field(value, path, domain, base):
    from tracer.magnetics.profile import AxialProfile

    t = _Table(value, path, ("name", "peak_T", "half_width_mm", "center_z_mm", "csv"))
    _axial_only(path, domain, "a field on the axis")
    name = t.get("name", _name)
    bell = [k for k in ("peak_T", "half_width_mm", "center_z_mm") if t.has(k)]
    if t.has("csv"):
        if bell:
            raise ConfigError(t.at(bell[0]), "give csv (a table of the field) or Glaser's peak_T, half_width_mm, "
                                             "center_z_mm, not both")
        z, b = _field_table(t.get("csv", _file, base=base), t.at("csv"))
        try:
            return AxialProfile.table(name, z, b)
        except ValueError as error:
            raise ConfigError(t.at("csv"), str(error)) from None
    if not bell:
        raise ConfigError(path, "give Glaser's bell (peak_T, half_width_mm, center_z_mm) or csv = a table of B on the axis")
    return AxialProfile.glaser(name, t.get("peak_T", _number), t.get("half_width_mm", _positive) / _MM_PER_M,
                               t.get("center_z_mm", _number) / _MM_PER_M)


def _field_table(file, path):
    """z (m) and B (T) from a CSV file with the header z_mm, B_T; equally spaced, increasing z."""
    try:
        with open(file, newline="", encoding="utf-8") as handle:
            rows = [row for row in csv.reader(handle) if row and not row[0].lstrip().startswith("#")]
    except (OSError, UnicodeDecodeError, csv.Error) as error:
        raise ConfigError(path, f"cannot read {str(file)!r}: {error}") from None
    if not rows or [c.strip() for c in rows[0]] != ["z_mm", "B_T"]:
        raise ConfigError(path, f"{str(file)!r}: the first line must be the header z_mm,B_T")
    z, b = [], []
    for n, row in enumerate(rows[1:], start=2):
        try:
            zv, bv = (float(c) for c in row)
        except ValueError:
            raise ConfigError(path, f"{str(file)!r}: row {n} is not two numbers: {','.join(row)!r}") from None
        if not (math.isfinite(zv) and math.isfinite(bv)):
            raise ConfigError(path, f"{str(file)!r}: row {n} is not finite")
        for column, unit, value in (("z_mm", "_mm", zv), ("B_T", "_T", bv)):
            if problem := BOUNDS[unit].problem(value):
                raise ConfigError(path, f"{str(file)!r}: row {n}, column {column}: {problem}")
        z.append(zv / _MM_PER_M)
        b.append(bv)
    if len(z) < 4:
        raise ConfigError(path, f"{str(file)!r}: give at least 4 rows, got {len(z)}")
    step = (z[-1] - z[0]) / (len(z) - 1)
    if not step > 0 or any(abs(zk - (z[0] + k * step)) > 1e-6 * step for k, zk in enumerate(z)):
        raise ConfigError(path, f"{str(file)!r}: z_mm must increase in equal steps")
    return z, b


def _uniform_field(value, path):
    from tracer.magnetics.uniform import Box, Sector, UniformField

    t = _Table(value, path, ("name", "B_T", "box", "sector"))
    name = t.get("name", _name)
    b = tuple(_number(v, f"{t.at('B_T')}[{i}]") for i, v in enumerate(t.get("B_T", _array, length=3)))
    if t.has("box") and t.has("sector"):
        raise ConfigError(t.at("sector"), "give a box or a sector, not both")
    region = None
    if t.has("box"):
        bt = _Table(t.data["box"], t.at("box"), ("x_mm", "y_mm", "z_mm"))
        region = Box(*(_metres(bt.get(k, _range, default=(-math.inf, math.inf), words=("lower", "upper")))
                       for k in ("x_mm", "y_mm", "z_mm")))
    if t.has("sector"):
        st = _Table(t.data["sector"], t.at("sector"), ("entrance_z_mm", "radius_mm", "angle_deg", "half_gap_mm",
                                                       "entrance_face_deg", "exit_face_deg"))
        radius = st.get("radius_mm", _positive)
        if st.has("half_gap_mm") and st.get("half_gap_mm", _positive) >= radius:
            raise ConfigError(st.at("half_gap_mm"), f"{_show(st.data['half_gap_mm'])} must be below radius_mm "
                                                    f"{_show(st.data['radius_mm'])}")
        if st.get("angle_deg", _number) == 0.0:
            raise ConfigError(st.at("angle_deg"), "a sector bends by 0 < |angle| <= 180 degrees, got 0")
        try:
            region = Sector(st.get("entrance_z_mm", _number) / _MM_PER_M, radius / _MM_PER_M,
                            st.get("angle_deg", _number, low=-180.0, high=180.0),
                            st.get("half_gap_mm", _positive) / _MM_PER_M,
                            st.get("entrance_face_deg", _number, default=0.0, low=-90.0, high=90.0, low_open=True,
                                   high_open=True),
                            st.get("exit_face_deg", _number, default=0.0, low=-90.0, high=90.0, low_open=True,
                                   high_open=True))
        except ValueError as error:
            raise ConfigError(t.at("sector"), str(error)) from None
    return UniformField(name, b, region)


# ---------------------------------------------------------------- waveforms

_WAVE_PARTS = ("pulse", "sine", "table")
# unit -> (multiply, divide) to SI; dividing by 1e9 rounds 250 ns to the nearest double of 2.5e-7 s
_TIME_KEYS = {"ns": (1, round(1 / constants.nano)), "us": (1, round(1 / constants.micro))}
_FREQUENCY_KEYS = {"MHz": (round(constants.mega), 1), "kHz": (round(constants.kilo), 1)}


def _in_units(t, stem, units, default=_REQUIRED, **bounds):
    """A quantity given as one of ``stem_<unit>`` (e.g. delay_ns or delay_us), in SI; the default
    when none is given."""
    given = [u for u in units if t.has(f"{stem}_{u}")]
    if len(given) > 1:
        raise ConfigError(t.at(f"{stem}_{given[1]}"), f"give {stem}_{given[0]} or {stem}_{given[1]}, not both")
    if not given:
        if default is _REQUIRED:
            raise ConfigError(t.at(f"{stem}_{next(iter(units))}"), "missing (required)")
        return default
    multiply, divide = units[given[0]]
    return t.get(f"{stem}_{given[0]}", _number, **bounds) * multiply / divide


def _unit_key(t, name):
    """The config key of a waveform field (``rise_s`` -> ``rise_ns`` or ``rise_us``, as given)."""
    for suffix, units in (("_s", _TIME_KEYS), ("_Hz", _FREQUENCY_KEYS)):
        if name.endswith(suffix):
            stem = name.removesuffix(suffix)
            keys = [f"{stem}_{u}" for u in units]
            return t.at(next((k for k in keys if t.has(k)), keys[0]))
    return t.at("phase_deg" if name == "phase_rad" else name)


def _part(t, make, **values):
    """A waveform part made from SI values; its own checks turned into a ConfigError on its key."""
    try:
        return make(**values)
    except WaveformError as error:
        raise ConfigError(_unit_key(t, error.field), error.message) from None


def _pulse(value, path):
    stems = ("delay", "rise", "width", "fall", "period")
    t = _Table(value, path, ("high_V", "low_V", "count") + tuple(f"{s}_{u}" for s in stems for u in _TIME_KEYS))
    return _part(t, Pulse,
                 high_V=t.get("high_V", _number), low_V=t.get("low_V", _number, default=0.0),
                 delay_s=_in_units(t, "delay", _TIME_KEYS),
                 rise_s=_in_units(t, "rise", _TIME_KEYS, default=0.0, low=0.0),
                 width_s=_in_units(t, "width", _TIME_KEYS, default=math.inf, low=0.0),
                 fall_s=_in_units(t, "fall", _TIME_KEYS, default=0.0, low=0.0),
                 period_s=_in_units(t, "period", _TIME_KEYS, default=math.inf, low=0.0, low_open=True),
                 count=t.get("count", _integer, default=1, low=1))


def _sine(value, path):
    t = _Table(value, path, ("amplitude_V", "phase_deg") + tuple(f"frequency_{u}" for u in _FREQUENCY_KEYS))
    return _part(t, Sinusoid, amplitude_V=t.get("amplitude_V", _number),
                 frequency_Hz=_in_units(t, "frequency", _FREQUENCY_KEYS, low=0.0, low_open=True),
                 phase_rad=t.get("phase_deg", _number, default=0.0) * _DEG)


def _table(value, path, base):
    t = _Table(value, path, ("file",))
    file = t.get("file", _file, base=base)
    try:
        return read_table(file)
    except WaveformError as error:
        raise ConfigError(t.at("file"), error.message.replace(str(file), repr(file.name))) from None
    except (OSError, UnicodeDecodeError) as error:
        raise ConfigError(t.at("file"), f"cannot read {file.name!r}: {error}") from None


def _waveform(t, voltage, base):
    """The waveform of an electrode table: its DC part ``voltage`` and its pulse, sine and table parts."""
    pulses = tuple(_pulse(v, p) for v, p in _tables(t.data.get("pulse", []), t.at("pulse"), "electrode.pulse"))
    sines = tuple(_sine(v, p) for v, p in _tables(t.data.get("sine", []), t.at("sine"), "electrode.sine"))
    table = t.get("table", _table, default=None, base=base)
    try:
        return Waveform(voltage, sines, pulses, table)
    except WaveformError as error:
        key = {"pulses": "pulse", "sinusoids": "sine", "table": "table"}.get(error.field.split("[")[0], "voltage_V")
        raise ConfigError(t.at(key), error.message) from None


def _rect(value, path, side):
    key = f"{side.letter}_mm"
    t = _Table(value, path, ("z_mm", key), hints=side.hint("{}_mm"))
    z = t.get("z_mm", _range, words=("start", "end"))
    r = t.get(key, _range, words=side.words, low=side.below)
    return Rect(_metres(z), _metres(r)), (*z, *r)


def _polygon(value, path, side):
    t = _Table(value, path, ("points_mm",))
    points_path = t.at("points_mm")
    raw = t.get("points_mm", _array)
    if len(raw) < 3:
        raise ConfigError(points_path, f"a polygon needs at least 3 points, got {len(raw)}")
    points = []
    for i, pair in enumerate(raw):
        point_path = f"{points_path}[{i}]"
        z, r = (_number(v, f"{point_path}[{j}]") for j, v in enumerate(_array(pair, point_path, 2)))
        if side.below is not None and r < side.below[0]:
            raise ConfigError(point_path, f"r {_show(pair[1])} is below {side.below[0]:g} ({side.below[1]})")
        points.append((z, r))
    zs, rs = [p[0] for p in points], [p[1] for p in points]
    area = 0.5 * abs(sum(z0 * r1 - z1 * r0 for (z0, r0), (z1, r1) in zip(points, points[1:] + points[:1])))
    size = max(max(zs) - min(zs), max(rs) - min(rs))
    if not area > 1e-12 * size * size:
        raise ConfigError(points_path, f"the polygon has zero area: {_show(raw)}")
    shape = Polygon(tuple(_metres(p) for p in points))
    return shape, (min(zs), max(zs), min(rs), max(rs))


def _arc(value, path, side):
    t = _Table(value, path, ("center_z_mm", "center_y_mm", "radii_mm", "angles_deg"))
    cz = t.get("center_z_mm", _number)
    if t.has("center_y_mm") and side.below is not None:
        raise ConfigError(t.at("center_y_mm"), f"{_show(t.data['center_y_mm'])}: here an arc's centre lies on "
                                               f"{side.below[1]}; it moves off it only in a planar domain "
                                               "with y_mm")
    cy = t.get("center_y_mm", _number, default=0.0)
    rho = t.get("radii_mm", _range, words=("inner radius", "outer"), low=(0.0, "a radius"))
    if side.below is None:
        theta = t.get("angles_deg", _range, words=("first angle", "second"), low=(-360.0, "a turn below +z"))
        if theta[1] > 360 or theta[1] - theta[0] > 360:
            shown = _show(t.data["angles_deg"])
            raise ConfigError(t.at("angles_deg"), f"{shown} spans more than a full turn (second angle at "
                                                  "most first + 360 and 360)")
    else:
        theta = t.get("angles_deg", _range, words=("first angle", "second"), low=(0.0, "the +z direction"))
        if theta[1] > 180:
            shown = _show(t.data["angles_deg"][1])
            raise ConfigError(t.at("angles_deg"), f"second angle {shown} exceeds 180 (the -z direction)")
    lo, hi = theta[0] * _DEG, theta[1] * _DEG
    shape = Arc(cz / _MM_PER_M, _metres(rho), (lo, hi), cy / _MM_PER_M)
    return shape, sector_bbox(cz, *rho, lo, hi, cy)


def _check_inside(box, path, domain, side):
    """Refuse a shape whose bounding box (in mm) does not reach into the domain."""
    zlo, zhi, rlo, rhi = box
    z0, z1 = (v * _MM_PER_M for v in domain.z_m)
    r0, r1 = (v * _MM_PER_M for v in domain.r_m)
    if zhi <= z0 or zlo >= z1 or rhi <= r0 or rlo >= r1:
        c = side.letter
        raise ConfigError(
            path,
            f"wholly outside the domain: z {zlo:g}..{zhi:g} mm, {c} {rlo:g}..{rhi:g} mm; "
            f"the domain spans z {z0:g}..{z1:g} mm, {c} {r0:g}..{r1:g} mm",
        )


def _species_of(t, default=_REQUIRED):
    """The species of a table: `species` (a name) or `mass_u` + `charge_e`."""
    if t.has("species"):
        for key in ("mass_u", "charge_e"):
            if t.has(key):
                raise ConfigError(t.at(key), "give species or mass_u + charge_e, not both")
        name = t.get("species", _string)
        try:
            return species(name)
        except ValueError as error:
            raise ConfigError(t.at("species"), str(error)) from None
    if t.has("mass_u") or t.has("charge_e"):
        mass = t.get("mass_u", _positive)
        charge = t.get("charge_e", _number)
        if charge == 0:
            raise ConfigError(t.at("charge_e"), "must be non-zero, got 0 (a neutral particle is not steered)")
        return custom_species(mass, charge)
    if default is _REQUIRED:
        raise ConfigError(t.at("species"), "missing (required; a name such as '40Ar+', or mass_u + charge_e)")
    return default


def _beam(value, path, domain, base):
    side = _side(domain)
    start_r = f"start_{side.letter}_mm"
    distribution = ("energy_eV", "energy_sigma_eV", "energy_fwhm_eV", "temperature_K", "count", "start_z_mm",
                    start_r, "radius_mm", "sigma_mm", "profile", "half_angle_deg", "sigma_angle_deg", "angles")
    timing = tuple(f"{stem}_{u}" for stem in ("start_time", "start_spread") for u in _TIME_KEYS)
    keys = ("name", "species", "mass_u", "charge_e", "seed", "current_A", "rays_csv", "start_times") \
        + timing + distribution
    t = _Table(value, path, keys, hints=side.hint("start_{}_mm") | _SPREAD_HINT)
    name = t.get("name", _name)
    kind = _species_of(t)
    seed = t.get("seed", _integer, default=0)
    current = t.get("current_A", _positive, default=None)
    when = {"start_time_s": _in_units(t, "start_time", _TIME_KEYS, default=0.0),
            "start_spread_s": _in_units(t, "start_spread", _TIME_KEYS, default=0.0, low=0.0),
            "start_times": t.get("start_times", _choice, default="uniform", choices=START_TIMES)}
    if t.has("rays_csv"):
        rays_csv = t.get("rays_csv", _file, base=base)
        for key in distribution:
            if t.has(key):
                raise ConfigError(t.at(key), f"not used with rays_csv (the start rays come from {rays_csv.name!r})")
        _check_rays_csv(rays_csv, t.at("rays_csv"), current)
        return Beam(name, kind, None, None, count=None, seed=seed, current_A=current, rays_csv=rays_csv, **when)
    angles = t.get("angles", _choice, default="uniform", choices=("uniform", "gaussian", "cosine"))
    profile = t.get("profile", _choice, default="uniform", choices=("uniform", "gaussian"))
    beam = Beam(
        name,
        kind,
        energy_eV=t.get("energy_eV", _number, low=0.0),
        start_z_m=t.get("start_z_mm", _number) / _MM_PER_M,
        energy_spread_eV=_energy_sigma(t),
        temperature_K=t.get("temperature_K", _positive, default=None),
        count=t.get("count", _integer, default=100, low=1),
        seed=seed,
        start_r_m=t.get(start_r, _number, default=0.0) / _MM_PER_M,
        radius_m=_width(t, profile, "radius_mm", "sigma_mm", _PROFILE_WORDS) / _MM_PER_M,
        profile=profile,
        half_angle_rad=_width(t, angles, "half_angle_deg", "sigma_angle_deg", _ANGLE_WORDS,
                              default=90.0 if angles == "cosine" else 0.0, high=90.0) * _DEG,
        angles=angles,
        current_A=current,
        **when,
    )
    _check_start(beam, t, domain, side.letter)
    return beam


_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
"""Full width at half maximum of a normal distribution, in standard deviations."""

_SPREAD_HINT = {"energy_spread_eV": "say which width the energy spread is: energy_sigma_eV (the standard "
                                    "deviation of a normal spread) or energy_fwhm_eV (its full width at half maximum)"}

_PROFILE_WORDS = {"radius_mm": "the radius of a uniform disc",
                  "sigma_mm": "the standard deviation of x and of y of a Gaussian profile"}
_ANGLE_WORDS = {"half_angle_deg": "the half-angle of a cone (uniform or cosine angles)",
                "sigma_angle_deg": "the standard deviation of the slopes x' and y' of Gaussian angles"}


def _energy_sigma(t):
    """The energy spread's standard deviation in eV, from energy_sigma_eV or energy_fwhm_eV."""
    if t.has("energy_sigma_eV") and t.has("energy_fwhm_eV"):
        raise ConfigError(t.at("energy_fwhm_eV"), "give energy_sigma_eV or energy_fwhm_eV, not both")
    if t.has("energy_fwhm_eV"):
        return t.get("energy_fwhm_eV", _number, low=0.0) / _FWHM_PER_SIGMA
    return t.get("energy_sigma_eV", _number, default=0.0, low=0.0)


def _width(t, law, uniform_key, gaussian_key, words, default=0.0, high=None):
    """A source width that says what it is: ``uniform_key`` (a radius or half-angle) for every law
    but "gaussian", ``gaussian_key`` (a standard deviation) for "gaussian"; the other one is refused."""
    key, wrong = (gaussian_key, uniform_key) if law == "gaussian" else (uniform_key, gaussian_key)
    if t.has(wrong):
        raise ConfigError(t.at(wrong), f"{words[wrong]}; with {law!r} give {key} ({words[key]})")
    return t.get(key, _number, default=default, low=0.0, high=high)


def _check_rays_csv(file, path, current):
    """Read a file of start rays now, so that a malformed one is refused before any work."""
    from .sources import read_rays_csv

    try:
        rays = read_rays_csv(file)
    except (OSError, ValueError) as error:   # UnicodeDecodeError is a ValueError
        raise ConfigError(path, str(error).replace(str(file), repr(file.name))) from None
    weights = rays["weight_A"]
    if current is not None and not math.isnan(weights[0]) and not weights.sum() > 0:
        raise ConfigError(path, f"{file.name!r}: the weight column sums to {weights.sum():g}, "
                                "so current_A cannot be shared among the rays")


def _check_start(beam, t, domain, c):
    """Refuse a beam whose source centre, or uniform disc, is outside the domain (`c` is "r" or "y")."""
    start_r = f"start_{c}_mm"
    _within(beam.start_z_m, domain.z_m, t.at("start_z_mm"), t.data["start_z_mm"], "z")
    _within(beam.start_r_m, domain.r_m, t.at(start_r), t.data.get(start_r, 0.0), c)
    if beam.profile == "uniform" and beam.radius_m > 0:
        r0, r1 = domain.r_m
        near, far = beam.start_r_m - beam.radius_m, beam.start_r_m + beam.radius_m
        if far > r1 or (not domain.mirror and near < r0):
            raise ConfigError(
                t.at("radius_mm"),
                f"the source disc of radius {_show(t.data['radius_mm'])} mm about {c} = "
                f"{beam.start_r_m * _MM_PER_M:g} mm reaches outside the domain's {c} range "
                f"{r0 * _MM_PER_M:g}..{r1 * _MM_PER_M:g} mm",
            )


def _plane(value, path, domain):
    side = _side(domain)
    across = f"{side.letter}_mm"
    t = _Table(value, path, ("name", "z_mm", across, "angle_deg", "stop", "direction", "crossing"),
               hints=side.hint("{}_mm"))
    name = t.get("name", _name)
    z = t.get("z_mm", _number) / _MM_PER_M
    _within(z, domain.z_m, t.at("z_mm"), t.data["z_mm"], "z")
    r = t.get(across, _number, default=0.0) / _MM_PER_M
    if t.has(across):
        _within(r, domain.r_m, t.at(across), t.data[across], side.letter)
    angle = t.get("angle_deg", _number, default=90.0, low=-180.0, high=180.0)
    stop = t.get("stop", _boolean, default=False)
    direction = t.get("direction", _choice, default="any", choices=DIRECTIONS)
    crossing = t.get("crossing", _crossing, default="first")
    if stop and crossing not in CROSSINGS + (1,):
        raise ConfigError(t.at("crossing"), f"{crossing} counts nothing: a plane with stop = true ends each ray "
                                            "at its first crossing")
    return Plane(name, z, stop, direction, crossing, r, Z_PLANE_RAD if angle == 90.0 else angle * _DEG)


def _crossing(value, path):
    """Which crossing of a plane counts: "first", "last", "all" or a whole number from 1."""
    expected = f"expected one of {', '.join(repr(c) for c in CROSSINGS)} or a whole number from 1"
    if isinstance(value, str) and value not in CROSSINGS:
        close = difflib.get_close_matches(value, CROSSINGS, n=1)
        raise ConfigError(path, f"unknown value {value!r}; " + (f"did you mean {close[0]!r}?" if close else expected))
    if isinstance(value, str):
        return value
    if isinstance(value, bool) or not isinstance(value, int):
        raise ConfigError(path, f"{expected}, got {_show(value)}")
    return _integer(value, path, low=1)


def _trace(value, path):
    t = _Table(value, path, ("max_time_us", "max_time_ns", "rtol", "ledger_threshold", "keep_paths")
               + tuple(f"time_zero_{u}" for u in _TIME_KEYS))
    if t.has("max_time_us") and t.has("max_time_ns"):
        raise ConfigError(t.at("max_time_ns"), "give max_time_us or max_time_ns, not both")
    defaults = TraceOptions()
    max_time = defaults.max_time_s
    for key, per_s in _PER_S.items():
        if t.has(key):
            max_time = t.get(key, _positive) / per_s
    return TraceOptions(
        max_time_s=max_time,
        rtol=t.get("rtol", _fraction, default=defaults.rtol),
        ledger_threshold=t.get("ledger_threshold", _fraction, default=defaults.ledger_threshold),
        keep_paths=t.get("keep_paths", _integer, default=defaults.keep_paths),
        time_zero_s=_in_units(t, "time_zero", _TIME_KEYS, default=None),
    )


def _grid_error(value, path):
    t = _Table(value, path, ("grids", "third", "safety", "rays", "warn_fraction", "scan_rows"))
    d = GridErrorSpec()
    grids = t.get("grids", _integer, default=d.grids, low=1)
    if grids not in GRIDS:
        raise ConfigError(t.at("grids"), f"expected one of {', '.join(map(str, GRIDS))}, got {grids}")
    return GridErrorSpec(
        grids=grids,
        third=t.get("third", _choice, default=d.third, choices=THIRD_GRIDS),
        safety=t.get("safety", _number, default=d.safety, low=1.0),
        rays=t.get("rays", _integer, default=d.rays, low=2),
        warn_fraction=t.get("warn_fraction", _fraction, default=d.warn_fraction),
        scan_rows=t.get("scan_rows", _boolean, default=d.scan_rows),
    )


def _varied_what(coils):
    """What a scan or tune key (or a CSV column) that names nothing lacks."""
    return "no electrode or coil" if coils else "no electrode"


def _scan(value, path, names, base, electrodes, coils=()):
    parameters = tuple(k for k in value if "[" in k) if isinstance(value, dict) else ()
    t = _Table(value, path, names + coils + ("csv",) + parameters, what=f"{_varied_what(coils)} named",
               shown=names + coils)
    if t.has("csv"):
        if len(t.data) > 1:
            other = next(k for k in t.data if k != "csv")
            raise ConfigError(t.at(other), "give ranges or csv, not both")
        file = t.get("csv", _file, base=base)
        _check_scan_header(file, t.at("csv"), names, coils, electrodes)
        return ScanSpec((), file)
    if not t.data:
        raise ConfigError(path, "empty: give ranges such as focus = [800.0, 1600.0, 41], or csv = 'sets.csv'")
    ranges = tuple(_scan_range(t.data[name], t.at(name), name, _unit_of(name, coils)) for name in t.data)
    _check_parameters(t, parameters, ranges, names, electrodes)
    return ScanSpec(ranges)


def _check_parameters(t, parameters, ranges, names, electrodes):
    """Refuse a waveform parameter of table t that names none, or whose range (name, from, to,
    ...) has an end its part refuses."""
    drives = dict(zip(names, (e.drive for e in electrodes)))
    for name, lo, hi, *_ in ranges:
        if name in parameters:
            for end in (lo, hi):
                with_parameters(drives, {name: end}, t.at)


_PARAMETER = re.compile(r"(?P<electrode>.+)\.(?P<part>pulse|sine)\[(?P<index>\d+)\]\.(?P<key>\w+)")
_PARAMETER_KEYS = {
    "pulse": {"high_V": ("high_V", (1, 1)), "low_V": ("low_V", (1, 1))}
    | {f"{stem}_{u}": (f"{stem}_s", _TIME_KEYS[u]) for stem in ("delay", "rise", "width", "fall", "period")
       for u in _TIME_KEYS},
    "sine": {"amplitude_V": ("amplitude_V", (1, 1)), "phase_deg": ("phase_rad", (_DEG, 1))}
    | {f"frequency_{u}": ("frequency_Hz", _FREQUENCY_KEYS[u]) for u in _FREQUENCY_KEYS},
}


def waveform_parameter(name, path="scan"):
    """A waveform parameter named by its path, e.g. ``"repeller.pulse[0].delay_ns"``, as
    ``(electrode, parts, index, field, multiply, divide)``: the Waveform attribute of the parts
    ("pulses", "sinusoids"), the part's SI field, and value_SI = value * multiply / divide.

    Raises
    ------
    ConfigError
        Keyed ``path``, for a path that names no parameter."""
    match = _PARAMETER.fullmatch(name)
    keys = _PARAMETER_KEYS.get(match["part"]) if match else None
    if not keys or match["key"] not in keys:
        choices = ", ".join(f"{p}: {', '.join(k)}" for p, k in _PARAMETER_KEYS.items())
        raise ConfigError(path, f"{name!r} is neither an electrode nor a waveform parameter "
                                f"'<electrode>.pulse[i].<key>' or '<electrode>.sine[i].<key>' ({choices})")
    field, (multiply, divide) = keys[match["key"]]
    parts = "pulses" if match["part"] == "pulse" else "sinusoids"
    return match["electrode"], parts, int(match["index"]), field, multiply, divide


def with_parameters(drives, values, key=lambda name: "scan"):
    """The drives with waveform parameters set, the electrodes' waveforms otherwise as they were.

    Parameters
    ----------
    drives : dict
        What each electrode carries by name (``Setup.drives``).
    values : dict of str to float
        Each parameter's value in its key's unit, by its path (:func:`waveform_parameter`).  The
        parameters of one part are set together, so a pulse's width and period may grow together.
    key : callable
        ``key(name)``: the key path an error about the parameter ``name`` is keyed by.

    Raises
    ------
    ConfigError
        Keyed ``key(name)``, for a name that is no parameter, an electrode without that part, or a
        value the part refuses (the parameter of the part's field it names, else its first)."""
    by_part = {}
    for name, value in values.items():
        parameter = waveform_parameter(name, key(name))
        by_part.setdefault(parameter[:3], []).append((name, parameter, value))
    for (electrode, parts, index), given in by_part.items():
        have = _parts_of(drives, given[0][1], key(given[0][0]))
        try:
            part = dataclasses.replace(have[index], **{p[3]: v * p[4] / p[5] for _, p, v in given})
            drive = dataclasses.replace(drives[electrode], **{parts: have[:index] + (part,) + have[index + 1:]})
        except WaveformError as error:
            name, _, value = next((g for g in given if error.field.rpartition(".")[2] == g[1][3]), given[0])
            raise ConfigError(key(name), f"{value:g}: {error.message}") from None
        drives = drives | {electrode: drive}
    return drives


def _parts_of(drives, parameter, path):
    """The parts (pulses or sinusoids) of the electrode a waveform parameter names, refused keyed
    ``path`` when there is no such electrode or it has no part of that index."""
    electrode, parts, index = parameter[:3]
    have = getattr(drives.get(electrode), parts, ())
    if index >= len(have):
        raise ConfigError(path, f"electrode {electrode!r} has {len(have)} {parts[:-1]} part(s), "
                                f"no [{index}]" if electrode in drives else f"no electrode named {electrode!r}")
    return have


def _unit_of(name, coils=()):
    """The unit suffix of a scanned or tuned quantity (:func:`tracer.schema.scan_unit`): "_V" for
    an electrode's voltage, "_A" for a coil's current, the suffix of its key for a waveform
    parameter (``repeller.pulse[0].delay_ns`` -> "_ns")."""
    return "_" + scan_unit(name, coils)


def _scan_range(value, path, name, unit):
    triple = _array(value, path, 3)
    start, stop = (_number(v, f"{path}[{i}]", unit=unit) for i, v in enumerate(triple[:2]))
    count = _integer(triple[2], f"{path}[2]", low=1)
    if start > stop:
        raise ConfigError(path, f"from {_show(triple[0])} exceeds to {_show(triple[1])}")
    if (start == stop) != (count == 1):
        raise ConfigError(path, f"from {_show(triple[0])}, to {_show(triple[1])} with count {count}: "
                                "a single value needs from = to and count 1, a range from < to and count >= 2")
    return (name, start, stop, count)


def _check_scan_header(file, path, names, coils=(), electrodes=()):
    """The CSV's header must name `<electrode>_V` and `<coil>_A` columns, and waveform parameters
    as ``[scan]`` keys name them (``<electrode>.pulse[i].<key>``), each parameter once."""
    try:
        with open(file, newline="", encoding="utf-8") as handle:
            header = next(csv.reader(handle), [])
    except (OSError, UnicodeDecodeError, csv.Error) as error:
        raise ConfigError(path, f"cannot read {file.name!r}: {error}") from None
    columns = [c.strip() for c in header]
    if not columns:
        raise ConfigError(path, f"{file.name!r} has no header row of <electrode>_V columns")
    if len(set(columns)) < len(columns):
        raise ConfigError(path, f"{file.name!r} repeats a column: {columns}")
    known = tuple(n + "_V" for n in names) + tuple(c + "_A" for c in coils)
    drives = {e.name: e.drive for e in electrodes}
    seen = {}
    for column in columns:
        if "[" in column:
            try:
                parameter = waveform_parameter(column, path)
                _parts_of(drives, parameter, path)
            except ConfigError as error:
                raise ConfigError(path, f"{file.name!r} column {column!r}: {error.message}") from None
            other = seen.setdefault(parameter[:4], column)
            if other != column:
                raise ConfigError(path, f"{file.name!r}: columns {other!r} and {column!r} set the same parameter")
        elif column not in known:
            raise _not_found(path, column, known, f"{file.name!r}: {_varied_what(coils)} for column")


_GOALS = ("smallest_spot", "most_transmitted", "landing_energy", "focus")
_GOAL_KEYS = {"landing_energy": "landing_energy_eV", "focus": "focus_z_mm"}   # goals that take a value


def _tune(value, path, names, planes, domain, electrodes, coils=()):
    t = _Table(value, path, ("vary", "goal", "at", "seed"))
    given = t.get("vary", _raw)
    parameters = tuple(k for k in given if "[" in k) if isinstance(given, dict) else ()
    vary = _Table(given, t.at("vary"), names + coils + parameters, what=f"{_varied_what(coils)} named")
    if not vary.data:
        raise ConfigError(vary.path, "empty: name the electrodes to vary, e.g. vary = { focus = [800.0, 1600.0] }")
    ranges = tuple((name, *vary.get(name, _range, words=("lo", "hi"), unit=_unit_of(name, coils)))
                   for name in vary.data)
    _check_parameters(vary, parameters, ranges, names, electrodes)
    goal, goal_value = t.get("goal", _goal, domain=domain)
    at = t.get("at", _string, default=None)
    if at is not None and at not in planes:
        raise _not_found(t.at("at"), at, planes, "no plane named", none="the setup has no [[plane]]")
    return TuneSpec(ranges, goal, goal_value, at, t.get("seed", _integer, default=0))


def _goal(value, path, domain):
    """(goal, value): a goal name, or a one-key table {landing_energy_eV = x} / {focus_z_mm = z}."""
    if isinstance(value, str):
        goal = _choice(value, path, _GOALS)
        if goal in _GOAL_KEYS:
            raise ConfigError(path, f"{goal!r} needs a value: goal = {{ {_GOAL_KEYS[goal]} = ... }}")
        return goal, None
    t = _Table(value, path, tuple(_GOAL_KEYS.values()))
    if len(t.data) != 1:
        raise ConfigError(path, f"expected one key of {', '.join(_GOAL_KEYS.values())}, got {len(t.data)}")
    if t.has("landing_energy_eV"):
        return "landing_energy", t.get("landing_energy_eV", _number, low=0.0)
    z = t.get("focus_z_mm", _number) / _MM_PER_M
    _within(z, domain.z_m, t.at("focus_z_mm"), t.data["focus_z_mm"], "z")
    return "focus", z


def _gun(value, path, names):
    t = _Table(value, path, ("cathode", "emission", "rays", "temperature_K", "work_function_eV", "schottky",
                             "relaxation", "max_iterations", "tolerance", "species", "mass_u", "charge_e"))
    cathode = t.get("cathode", _string)
    if cathode not in names:
        raise _not_found(t.at("cathode"), cathode, names, "no electrode named")
    emission = t.get("emission", _choice, default="space_charge", choices=("space_charge", "thermionic"))
    thermionic = emission == "thermionic"
    needed = _REQUIRED if thermionic else None
    temperature = t.get("temperature_K", _positive, default=needed)
    work_function = t.get("work_function_eV", _positive, default=needed)
    schottky = t.get("schottky", _boolean, default=False)
    if schottky and not thermionic:
        raise ConfigError(t.at("schottky"), "true needs emission = 'thermionic'")
    defaults = GunSpec(cathode)
    return GunSpec(
        cathode=cathode,
        emission=emission,
        rays=t.get("rays", _integer, default=defaults.rays, low=1),
        temperature_K=temperature,
        work_function_eV=work_function,
        schottky=schottky,
        relaxation=t.get("relaxation", _number, default=defaults.relaxation, low=0.0, high=1.0, low_open=True),
        max_iterations=t.get("max_iterations", _integer, default=defaults.max_iterations, low=1),
        tolerance=t.get("tolerance", _fraction, default=defaults.tolerance),
        species=_species_of(t, default=defaults.species),
    )


def _optics(value, path):
    t = _Table(value, path, ("species", "mass_u", "charge_e", "energy_eV", "object_z_mm", "start_z_mm"))
    kind = _species_of(t)
    energy = t.get("energy_eV", _positive)
    z = t.get("object_z_mm", _number, default=None)
    start = t.get("start_z_mm", _number, default=None)
    return OpticsSpec(kind, energy, None if z is None else z / _MM_PER_M,
                      None if start is None else start / _MM_PER_M)
