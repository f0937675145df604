"""Electrode voltages that change in time: waveforms and their numba evaluation.

A waveform is the sum of its parts,

    w(t) = dc + sum_j A_j cos(2 pi f_j t + phi_j) + sum_p pulse_p(t) + table(t),

with t the trace's clock in seconds (rays and pulses share its origin):

* **sinusoids** (amplitude A, frequency f, phase phi), on at every t;
* **pulses**: ``low_V`` until ``delay_s``, a straight rise over ``rise_s`` to ``high_V``, held for
  ``width_s`` (for ever when it is infinite), a straight fall over ``fall_s`` back to ``low_V``;
  repeated ``count`` times every ``period_s``. A zero rise or fall time is a jump;
* a **table** of (time, volts) points, joined by straight lines; before its first point it holds
  the first value, after its last point the last value (no extrapolation).

Pulses and the table are piecewise linear, and so is their sum. Its **corners** are the times
where the slope changes or the value jumps: the pulses' switching times and the ends of their
rises and falls, and the table's points. A Runge–Kutta step that straddles a corner is neither
accurate nor honestly estimated (the same reason steps end on cell walls), so the tracer ends its
steps on them; between corners every waveform is smooth.

Arrays for the kernel
---------------------
:class:`WaveArrays` holds any number K of waveforms as plain arrays. The corners of all K are
merged into one sorted list ``corner[M]``; they cut the time axis into M + 1 **pieces**, piece m
running from ``corner[m - 1]`` (inclusive) to ``corner[m]`` (exclusive), piece 0 from -inf and
piece M to +inf. On each piece each waveform's linear part is one straight line, so the kernel
finds its piece once per step, like its cell, and evaluates every stage on that piece's line
continued beyond the piece's ends (:func:`value`, :func:`rate`); a step on piece m ends at
``corner[m]`` with its time set to that corner exactly, which :func:`piece` then places in
piece m + 1. At a corner with a jump, :func:`jump_at` gives w(t+) - w(t-).

Sinusoids have no corners, but a step must still resolve them, also where there is no field to
slow the integrator down: :attr:`WaveArrays.max_step_s` is the shortest period divided by
:data:`STEPS_PER_PERIOD`, so one RF period takes at least that many steps and a bounded number
when the field is weak.

Description
-----------
:class:`Waveform` and its parts :class:`Sinusoid`, :class:`Pulse` and :class:`Table` are frozen
dataclasses in SI units (field names carry the unit: ``_V``, ``_Hz``, ``_rad``, ``_s``); they
check themselves when made and raise :class:`WaveformError`, which names the bad field (e.g.
``pulses[0].rise_s``) and value, for the config reader to map onto its keys (``rise_ns``).
Equal descriptions compare and hash equal, which is how electrodes that share a waveform are found.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import NamedTuple

import numpy as np
from scipy import constants

from tracer.jit import njit

STEPS_PER_PERIOD = 16
"""A sinusoid's period takes at least this many steps (:attr:`WaveArrays.max_step_s`)."""

MAX_CORNERS = 1_000_000
"""Refuse a waveform with more corners than this (repeated pulses, long tables)."""

TIME_UNITS = {"time_s": 1, "time_us": round(1 / constants.micro), "time_ns": round(1 / constants.nano)}
"""Time columns of a table file and their units per second (times are divided by it, so 12 ns
reads as the double nearest 1.2e-8 s)."""


class WaveformError(ValueError):
    """A bad waveform description: ``str(error) == f"{field}: {message}"``.

    Parameters
    ----------
    field : str
        Path of the bad field within the waveform, e.g. ``"pulses[0].rise_s"`` or
        ``"table.time_s[3]"``.
    value : object
        The bad value.
    message : str
        What is wrong with it, naming the value.
    """

    def __init__(self, field: str, value, message: str):
        super().__init__(f"{field}: {message}")
        self.field = field
        self.value = value
        self.message = message

    def __reduce__(self):
        return (type(self), (self.field, self.value, self.message))


def _finite(name, value):
    """``value`` as a float, or a WaveformError naming ``name`` when it is not a finite number."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise WaveformError(name, value, f"{value!r} is not a number") from None
    if not math.isfinite(x):
        raise WaveformError(name, value, f"{value!r} is not a finite number")
    return x


def _at_least(name, value, low, *, allow_inf=False, strict=False):
    """``value`` as a float >= low (> low when strict), optionally +inf."""
    x = float(value) if allow_inf and value == math.inf else _finite(name, value)
    if x < low or (strict and x == low):
        raise WaveformError(name, value, f"must be {'>' if strict else '>='} {low:g}, got {x:g}")
    return x


# --------------------------------------------------------------------------------------------
# Description


@dataclass(frozen=True)
class Sinusoid:
    """``amplitude_V * cos(2 pi frequency_Hz t + phase_rad)``.

    Attributes
    ----------
    amplitude_V : float
        Zero-to-peak amplitude, volts (either sign).
    frequency_Hz : float
        Frequency, > 0.
    phase_rad : float
        Phase at t = 0.
    """

    amplitude_V: float
    frequency_Hz: float
    phase_rad: float = 0.0

    def __post_init__(self):
        _check(self, "")

    def _validate(self, at):
        return {"amplitude_V": _finite(at + "amplitude_V", self.amplitude_V),
                "frequency_Hz": _at_least(at + "frequency_Hz", self.frequency_Hz, 0.0, strict=True),
                "phase_rad": _finite(at + "phase_rad", self.phase_rad)}

    def negated(self) -> Sinusoid:
        """The same sinusoid with the opposite sign."""
        return replace(self, amplitude_V=-self.amplitude_V)


@dataclass(frozen=True)
class Pulse:
    """A trapezoidal pulse, repeated ``count`` times every ``period_s``.

    Attributes
    ----------
    high_V : float
        Level while the pulse is on, volts.
    delay_s : float
        Start of the (first) rise on the trace's clock; may be negative.
    rise_s, fall_s : float
        Times of the straight rise and fall, >= 0; zero is a jump.
    width_s : float
        Time held at ``high_V`` between the rise and the fall, >= 0; ``inf`` (default): the pulse
        stays on, and has no fall.
    low_V : float
        Level before and after the pulse, volts (default 0).
    period_s : float
        Repetition period, at least rise + width + fall; ``inf`` (default) for a single pulse.
    count : int
        Number of pulses (default 1; more than one needs a finite period and width).
    """

    high_V: float
    delay_s: float
    rise_s: float = 0.0
    width_s: float = math.inf
    fall_s: float = 0.0
    low_V: float = 0.0
    period_s: float = math.inf
    count: int = 1

    def __post_init__(self):
        _check(self, "")

    def _validate(self, at):
        out = {"high_V": _finite(at + "high_V", self.high_V),
               "delay_s": _finite(at + "delay_s", self.delay_s),
               "rise_s": _at_least(at + "rise_s", self.rise_s, 0.0),
               "width_s": _at_least(at + "width_s", self.width_s, 0.0, allow_inf=True),
               "fall_s": _at_least(at + "fall_s", self.fall_s, 0.0),
               "low_V": _finite(at + "low_V", self.low_V),
               "period_s": _at_least(at + "period_s", self.period_s, 0.0, allow_inf=True,
                                     strict=True)}
        count = self.count
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
            raise WaveformError(at + "count", count, f"must be a whole number >= 1, got {count!r}")
        if count > 1 and out["width_s"] == math.inf:
            raise WaveformError(at + "width_s", self.width_s,
                                f"a pulse repeated {count} times needs a finite width")
        if count > 1 and out["period_s"] == math.inf:
            raise WaveformError(at + "period_s", self.period_s,
                                f"a pulse repeated {count} times needs a finite period")
        busy = out["rise_s"] + out["width_s"] + out["fall_s"]
        if count > 1 and out["period_s"] < busy:
            raise WaveformError(at + "period_s", self.period_s,
                                f"{out['period_s']:g} s is shorter than rise + width + fall "
                                f"= {busy:g} s")
        if 4 * count > MAX_CORNERS:
            raise WaveformError(at + "count", count, f"{count} pulses have more than "
                                f"{MAX_CORNERS} corners")
        out["count"] = int(count)
        return out

    def knots(self) -> np.ndarray:
        """Corners of the pulse as rows (time, value just before, value just after), in time
        order; constant before the first and after the last."""
        lo, hi = self.low_V, self.high_V
        rows = []
        for n in range(self.count):
            on = self.delay_s + n * self.period_s if n else self.delay_s   # no 0 * inf
            rows.append((on, lo, lo if self.rise_s > 0.0 else hi))
            if self.rise_s > 0.0:
                rows.append((on + self.rise_s, hi, hi))
            if self.width_s == math.inf:
                break
            off = on + self.rise_s + self.width_s
            rows.append((off, hi, hi if self.fall_s > 0.0 else lo))
            if self.fall_s > 0.0:
                rows.append((off + self.fall_s, lo, lo))
        return _merge_knots(np.array(rows, dtype=float))

    def negated(self) -> Pulse:
        """The same pulse with the opposite sign."""
        return replace(self, high_V=-self.high_V, low_V=-self.low_V)


@dataclass(frozen=True)
class Table:
    """A waveform given as (time, volts) points joined by straight lines.

    Before the first point it holds the first value, after the last point the last value.

    Attributes
    ----------
    time_s : tuple of float
        Times on the trace's clock, strictly increasing; at least two.
    voltage_V : tuple of float
        Volts at those times.
    source : str
        Where the points came from (a file name), for messages; not part of the comparison.
    """

    time_s: tuple
    voltage_V: tuple
    source: str = field(default="", compare=False)

    def __post_init__(self):
        object.__setattr__(self, "time_s", tuple(self.time_s))
        object.__setattr__(self, "voltage_V", tuple(self.voltage_V))
        _check(self, "")

    def _validate(self, at):
        of = f" ({self.source})" if self.source else ""
        if len(self.time_s) != len(self.voltage_V):
            raise WaveformError(at + "voltage_V", len(self.voltage_V),
                                f"{len(self.voltage_V)} voltages for {len(self.time_s)} times{of}")
        if len(self.time_s) < 2:
            raise WaveformError(at + "time_s", len(self.time_s),
                                f"a table needs at least two points, got {len(self.time_s)}{of}")
        if len(self.time_s) > MAX_CORNERS:
            raise WaveformError(at + "time_s", len(self.time_s),
                                f"more than {MAX_CORNERS} points{of}")
        times = [_finite(f"{at}time_s[{i}]", t) for i, t in enumerate(self.time_s)]
        volts = [_finite(f"{at}voltage_V[{i}]", v) for i, v in enumerate(self.voltage_V)]
        for i in range(1, len(times)):
            if not times[i] > times[i - 1]:
                raise WaveformError(f"{at}time_s[{i}]", times[i],
                                    f"times must increase: {times[i]:g} s follows "
                                    f"{times[i - 1]:g} s{of}")
        return {"time_s": tuple(times), "voltage_V": tuple(volts)}

    def knots(self) -> np.ndarray:
        """The points as rows (time, value just before, value just after)."""
        t = np.array(self.time_s, dtype=float)
        v = np.array(self.voltage_V, dtype=float)
        return np.stack([t, v, v], axis=1)

    def negated(self) -> Table:
        """The same table with the opposite sign."""
        return replace(self, voltage_V=tuple(-v for v in self.voltage_V))


@dataclass(frozen=True)
class Waveform:
    """An electrode's voltage as a function of time: the sum of its parts (module docstring).

    Attributes
    ----------
    dc_V : float
        Constant part, volts.
    sinusoids : tuple of Sinusoid
    pulses : tuple of Pulse
    table : Table or None
    """

    dc_V: float = 0.0
    sinusoids: tuple = ()
    pulses: tuple = ()
    table: Table | None = None

    def __post_init__(self):
        object.__setattr__(self, "sinusoids", tuple(self.sinusoids))
        object.__setattr__(self, "pulses", tuple(self.pulses))
        _check(self, "")

    def _validate(self, at):
        out = {"dc_V": _finite(at + "dc_V", self.dc_V)}
        for name, kind in (("sinusoids", Sinusoid), ("pulses", Pulse)):
            for i, part in enumerate(getattr(self, name)):
                if not isinstance(part, kind):
                    raise WaveformError(f"{at}{name}[{i}]", part,
                                        f"expected a {kind.__name__}, got {type(part).__name__}")
        if self.table is not None and not isinstance(self.table, Table):
            raise WaveformError(at + "table", self.table,
                                f"expected a Table, got {type(self.table).__name__}")
        corners = sum(4 * p.count for p in self.pulses) + len(self.table.time_s if self.table else ())
        if corners > MAX_CORNERS:
            raise WaveformError(at + "pulses", corners,
                                f"{corners} corners, more than {MAX_CORNERS}")
        return out

    # ---- the linear part

    def knots(self) -> np.ndarray:
        """Corners of the pulses and table together: rows (time, linear part just before, just
        after), sorted by time; the linear part is constant before the first and after the last."""
        parts = [p.knots() for p in self.pulses] + ([self.table.knots()] if self.table else [])
        if not parts:
            return np.empty((0, 3))
        times = np.unique(np.concatenate([k[:, 0] for k in parts]))
        before = np.zeros(times.size)
        after = np.zeros(times.size)
        for k in parts:
            b, a = _sides(k, times)
            before += b
            after += a
        return np.stack([times, before, after], axis=1)

    # ---- sharing and grouping

    def negated(self) -> Waveform:
        """The waveform with the opposite sign (exact: only signs flip)."""
        return Waveform(-self.dc_V, tuple(s.negated() for s in self.sinusoids),
                        tuple(p.negated() for p in self.pulses),
                        self.table.negated() if self.table else None)

    def split(self) -> tuple[float, Waveform | None]:
        """The constant and the varying part: ``(offset_V, varying)`` with w(t) = offset_V +
        varying(t), the varying part zero before its first corner, without its parts that do not
        vary (zero amplitudes, pulses with high = low, flat tables); ``varying`` is None when
        nothing varies."""
        offset = self.dc_V + sum(p.low_V for p in self.pulses)
        sines = tuple(s for s in self.sinusoids if s.amplitude_V != 0.0)
        pulses = tuple(replace(p, low_V=0.0, high_V=p.high_V - p.low_V) for p in self.pulses
                       if p.high_V != p.low_V)
        table = None
        if self.table is not None:
            first = self.table.voltage_V[0]
            offset += first
            if any(v != first for v in self.table.voltage_V):
                table = replace(self.table, voltage_V=tuple(v - first for v in self.table.voltage_V))
        if not (sines or pulses or table):
            return offset, None
        return offset, Waveform(0.0, sines, pulses, table)

    # ---- figures for the tracer and for reports

    @property
    def max_step_s(self) -> float:
        """Longest step that resolves every sinusoid: shortest period / STEPS_PER_PERIOD (inf
        without sinusoids)."""
        return max_step_s([self])

    @property
    def peak_V(self) -> float:
        """A bound on |w(t)| over all t: |dc| + sum |A| + max |linear part| (the energy scale a
        waveform can give a charge)."""
        k = self.knots()
        linear = float(np.abs(k[:, 1:]).max()) if k.size else 0.0
        return abs(self.dc_V) + sum(abs(s.amplitude_V) for s in self.sinusoids) + linear

    def describe(self) -> str:
        """The parts beside the DC part in a few words, e.g. ``"sine 450 V at 1 MHz; pulse to
        2000 V at 250 ns"`` ("" without parts)."""
        words = [f"sine {s.amplitude_V:g} V at {s.frequency_Hz / 1e6:g} MHz" for s in self.sinusoids]
        words += [f"pulse {p.low_V:g} -> {p.high_V:g} V at {p.delay_s * 1e9:g} ns"
                  + (f" x {p.count}" if p.count > 1 else "") for p in self.pulses]
        if self.table is not None:
            words.append(f"table of {len(self.table.time_s)} points"
                         + (f" ({Path(self.table.source).name})" if self.table.source else ""))
        return "; ".join(words)

    def arrays(self) -> WaveArrays:
        """This waveform alone as kernel arrays (K = 1)."""
        return wave_arrays([self])

    def value(self, t) -> np.ndarray:
        """w(t) in volts at times t (array_like, seconds); at a jump the value just after."""
        return sample(self.arrays(), 0, np.asarray(t, dtype=float).ravel())[0].reshape(np.shape(t))

    def rate(self, t) -> np.ndarray:
        """dw/dt in V/s at times t; at a corner the rate just after."""
        return sample(self.arrays(), 0, np.asarray(t, dtype=float).ravel())[1].reshape(np.shape(t))


def first_pulse_s(drives) -> float | None:
    """The start of the earliest pulse among ``drives`` (Waveforms; constant voltages are skipped),
    seconds: the time zero of arrival times, the extraction pulse; None when there is no pulse
    (arrival times then count from each ray's start, :func:`tracer.measure.arrival_times`)."""
    return min((p.delay_s for d in drives if isinstance(d, Waveform) for p in d.pulses), default=None)


def _check(obj, at):
    """Validate a description; store the normalised numbers (floats) back into the frozen object."""
    for name, value in obj._validate(at).items():
        object.__setattr__(obj, name, value)


def _merge_knots(rows):
    """Knot rows (time, before, after) with equal times merged: the first one's before, the last
    one's after."""
    keep = np.r_[True, np.diff(rows[:, 0]) > 0.0]
    last = np.r_[keep[1:], True]
    return np.stack([rows[keep, 0], rows[keep, 1], rows[last, 2]], axis=1)


def _sides(knots, times):
    """Values just before and just after each of ``times`` of the piecewise-linear function given
    by knot rows (time, before, after); constant outside the knots."""
    t, before, after = knots.T
    i = np.searchsorted(t, times)                         # first knot at or after each time
    at_knot = (i < t.size) & (t[np.minimum(i, t.size - 1)] == times)
    lo = np.clip(i - 1, 0, t.size - 1)
    hi = np.clip(i, 0, t.size - 1)
    span = t[hi] - t[lo]
    frac = np.where(span > 0.0, (times - t[lo]) / np.where(span > 0.0, span, 1.0), 0.0)
    between = after[lo] + frac * (before[hi] - after[lo])
    between = np.where(i == 0, before[0], np.where(i == t.size, after[-1], between))
    return (np.where(at_knot, before[hi], between), np.where(at_knot, after[hi], between))


def read_table(path) -> Table:
    """Read a table waveform from a CSV file.

    The first line that is not blank and does not start with ``#`` is the header: a time column
    ``time_s``, ``time_us`` or ``time_ns``, then ``voltage_V``. Every further such line is one
    point.

    Raises
    ------
    WaveformError
        Field ``"table"``, naming the file, the line and the bad text; or the table's own checks
        (times that do not increase, fewer than two points).
    OSError
        When the file cannot be read.
    """
    path = Path(path)
    with path.open(newline="", encoding="utf-8") as handle:
        lines = [(n, line) for n, line in enumerate(handle, start=1)
                 if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise WaveformError("table", str(path), f"{path}: no header line")
    number, head = lines[0]
    names = [s.strip() for s in next(csv.reader([head]))]
    if len(names) != 2 or names[0] not in TIME_UNITS or names[1] != "voltage_V":
        raise WaveformError("table", head.strip(),
                            f"{path}: line {number}: the header must be a time column ("
                            + ", ".join(TIME_UNITS) + f") and voltage_V, got {head.strip()!r}")
    per_s = TIME_UNITS[names[0]]
    times, volts = [], []
    for number, line in lines[1:]:
        fields = next(csv.reader([line]))
        if len(fields) != 2:
            raise WaveformError("table", line.strip(),
                                f"{path}: line {number}: {len(fields)} fields, the header has 2")
        try:
            t, v = (float(x) for x in fields)
        except ValueError:
            t = v = math.nan
        if not (math.isfinite(t) and math.isfinite(v)):
            raise WaveformError("table", line.strip(),
                                f"{path}: line {number}: {line.strip()!r} is not two finite numbers")
        times.append(t / per_s)
        volts.append(v)
    return Table(tuple(times), tuple(volts), source=str(path))


# --------------------------------------------------------------------------------------------
# Kernel arrays


class WaveArrays(NamedTuple):
    """K waveforms as arrays for numba kernels (module docstring: corners and pieces).

    Attributes
    ----------
    corner : float64[M]
        Sorted distinct corner times of all K waveforms, seconds.
    origin : float64[M + 1]
        Time at which each piece's straight line is anchored (its first corner; piece 0 uses the
        first corner, or 0 without corners).
    level : float64[K, M + 1]
        Linear part of each waveform at each piece's origin, from the right.
    slope : float64[K, M + 1]
        Its slope on each piece, V/s (zero on the first and the last piece).
    jump : float64[K, M]
        w(t+) - w(t-) of each waveform at each corner (exactly zero where it is continuous).
    dc : float64[K]
        Constant parts.
    amplitude, omega, phase : float64[K, S]
        Sinusoids (volts, rad/s, rad), padded with zero amplitudes.
    max_step_s : float
        Longest step that resolves every sinusoid (inf without sinusoids).
    """

    corner: np.ndarray
    origin: np.ndarray
    level: np.ndarray
    slope: np.ndarray
    jump: np.ndarray
    dc: np.ndarray
    amplitude: np.ndarray
    omega: np.ndarray
    phase: np.ndarray
    max_step_s: float


def max_step_s(waveforms) -> float:
    """Shortest sinusoid period among ``waveforms`` divided by STEPS_PER_PERIOD (inf if none)."""
    f = max((s.frequency_Hz for w in waveforms for s in w.sinusoids if s.amplitude_V != 0.0),
            default=0.0)
    return 1.0 / (f * STEPS_PER_PERIOD) if f > 0.0 else math.inf


def wave_arrays(waveforms) -> WaveArrays:
    """The kernel arrays of a sequence of K waveforms (K >= 0).

    Parameters
    ----------
    waveforms : sequence of Waveform
    """
    waveforms = tuple(waveforms)
    knots = [w.knots() for w in waveforms]
    corner = np.unique(np.concatenate([k[:, 0] for k in knots] + [np.empty(0)]))
    n_k, n_m = len(waveforms), corner.size
    origin = np.r_[corner[:1] if n_m else [0.0], corner]
    level = np.zeros((n_k, n_m + 1))
    slope = np.zeros((n_k, n_m + 1))
    jump = np.zeros((n_k, n_m))
    for k, kn in enumerate(knots):
        if not kn.size:
            continue
        before, after = _sides(kn, corner)
        level[k, 0] = before[0]
        level[k, 1:] = after
        slope[k, 1:-1] = (before[1:] - after[:-1]) / np.diff(corner)
        jump[k] = after - before
    n_s = max((len(w.sinusoids) for w in waveforms), default=0)
    amplitude = np.zeros((n_k, n_s))
    omega = np.zeros((n_k, n_s))
    phase = np.zeros((n_k, n_s))
    for k, w in enumerate(waveforms):
        for j, s in enumerate(w.sinusoids):
            amplitude[k, j] = s.amplitude_V
            omega[k, j] = 2.0 * math.pi * s.frequency_Hz
            phase[k, j] = s.phase_rad
    dc = np.array([w.dc_V for w in waveforms], dtype=float)
    return WaveArrays(corner, origin, level, slope, jump, dc, amplitude, omega, phase,
                      max_step_s(waveforms))


@njit(cache=True, error_model="numpy")
def piece(w, t):
    """Index of the piece holding time t: the number of corners at or before t."""
    return np.searchsorted(w.corner, t, side="right")


@njit(cache=True, error_model="numpy", forceinline=True)
def line(w, k, m, t):
    """The constant and straight-line part of waveform k at time t on piece m (its straight line
    continued beyond the piece), volts; its slope is ``w.slope[k, m]``."""
    return w.dc[k] + w.level[k, m] + w.slope[k, m] * (t - w.origin[m])


@njit(cache=True, error_model="numpy", forceinline=True)
def angle(w, k, j, t):
    """The angle of sinusoid j of waveform k at time t, radians."""
    return w.omega[k, j] * t + w.phase[k, j]


@njit(cache=True, error_model="numpy", forceinline=True)
def sinusoid(amplitude, omega, c, s):
    """A sinusoid of amplitude (volts) and angular frequency omega (rad/s) and its rate where the
    cosine and sine of its :func:`angle` are c and s: (volts, V/s)."""
    return amplitude * c, -(amplitude * omega * s)


MAX_TURN = 2.0 * math.pi / STEPS_PER_PERIOD
"""The largest angle a sinusoid turns through in one step (steps are at most
:attr:`WaveArrays.max_step_s` long): the range of :func:`turn`."""

_COS_SERIES = tuple((-1) ** n / math.factorial(2 * n) for n in range(8))
_SIN_SERIES = tuple((-1) ** n / math.factorial(2 * n + 1) for n in range(8))


@njit(cache=True, error_model="numpy", forceinline=True)
def _series(c, u):
    """``c[0] + c[1] u + ... + c[7] u^7`` (Horner)."""
    return c[0] + u * (c[1] + u * (c[2] + u * (c[3] + u * (c[4] + u * (c[5] + u * (c[6]
                                                                                   + u * c[7]))))))


@njit(cache=True, error_model="numpy", forceinline=True)
def turn(c, s, d):
    """The cosine and sine of a + d from c = cos a and s = sin a, for a turn |d| <= MAX_TURN:
    cos d and sin d from their Taylor series to d^14 and d^15 (the first term left out is below
    2e-20 there), no library call; it loses at most a few units of round-off against the cosine
    and sine of a + d (tests/test_waveforms.py)."""
    u = d * d
    cd = _series(_COS_SERIES, u)
    sd = d * _series(_SIN_SERIES, u)
    return c * cd - s * sd, s * cd + c * sd


@njit(cache=True, error_model="numpy", forceinline=True)
def value(w, k, m, t):
    """Waveform k at time t on piece m (its straight line continued beyond the piece), volts."""
    v = line(w, k, m, t)
    for j in range(w.amplitude.shape[1]):
        v += sinusoid(w.amplitude[k, j], w.omega[k, j], math.cos(angle(w, k, j, t)), 0.0)[0]
    return v


@njit(cache=True, error_model="numpy", forceinline=True)
def rate(w, k, m, t):
    """dw/dt of waveform k at time t on piece m, V/s."""
    r = w.slope[k, m]
    for j in range(w.amplitude.shape[1]):
        r += sinusoid(w.amplitude[k, j], w.omega[k, j], 0.0, math.sin(angle(w, k, j, t)))[1]
    return r


@njit(cache=True, error_model="numpy")
def next_corner(w, t):
    """The first corner of any waveform strictly after t (inf when there is none)."""
    m = piece(w, t)
    return w.corner[m] if m < w.corner.size else np.inf


@njit(cache=True, error_model="numpy")
def jump_at(w, k, t):
    """w_k(t+) - w_k(t-): the jump of waveform k at time t (zero unless t is a corner with a jump)."""
    m = piece(w, t)
    if m == 0 or w.corner[m - 1] != t:
        return 0.0
    return w.jump[k, m - 1]


@njit(cache=True, error_model="numpy")
def sample(w, k, times):
    """Values and rates of waveform k at an array of times (at a corner, from the right)."""
    v = np.empty(times.size)
    r = np.empty(times.size)
    for i in range(times.size):
        m = piece(w, times[i])
        v[i] = value(w, k, m, times[i])
        r[i] = rate(w, k, m, times[i])
    return v, r
