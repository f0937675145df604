"""The ranges of physical inputs tracer admits: what a real instrument could have, and more.

A finite number can still be absurd (a voltage of 1e308 V, an energy of 1e300 eV, a mass that
underflows to 0 kg): such numbers run for minutes or end in an internal fault far from their key.
Every physical input is checked against the range of its unit here, when it is read (config keys by
their unit suffix, the columns of a rays file by their unit), and a number outside is refused with
the range in the message.  The ranges admit what real work needs, with room to spare: kinetic
energies of 0 and 1 µeV, megavolt electrodes, masses from the electron's up to 1e12 u (clusters,
droplets), domains of tens of metres, magnetic fields ten times the strongest pulsed magnets'.

The table is the one place these ranges are written; ``docs/limits-and-trust.md`` repeats it for
the user.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Bound:
    """The range of one kind of input.

    Attributes
    ----------
    lo, hi : float
        The admitted range (inclusive); of the magnitude when ``magnitude`` is true.
    unit : str
        The unit of the numbers as written.
    why : str
        What the range covers, for the message.
    magnitude : bool
        The bound applies to the absolute value (a charge of either sign); with ``lo`` above 0,
        0 is then refused.
    """

    lo: float
    hi: float
    unit: str
    why: str
    magnitude: bool = False

    def admits(self, value):
        """True where ``value`` (a float or an array) is inside the range."""
        x = abs(value) if self.magnitude else value
        return (self.lo <= x) & (x <= self.hi)

    def range_text(self) -> str:
        """"outside the range tracer admits, <lo>..<hi> <unit> (<why>)"."""
        span = f"{'|value| ' if self.magnitude else ''}{self.lo:g}..{self.hi:g} {self.unit}".rstrip()
        return f"outside the range tracer admits, {span} ({self.why})"

    def problem(self, value: float) -> str:
        """Why ``value`` is outside the range, or "" when it is inside."""
        if self.admits(value):
            return ""
        if self.magnitude and value == 0:
            return f"must be non-zero, got {value!r} ({self.range_text()})"
        return f"{value!r} is {self.range_text()}"


# Keyed by the unit suffix of a config key (``voltage_V`` -> "_V"), or by a whole key name.
BOUNDS = {
    "_V": Bound(-1e8, 1e8, "V", "up to 100 MV, beyond the largest electrostatic machines"),
    "_eV": Bound(0.0, 1e12, "eV", "0 eV up to 1 TeV"),
    "_mm": Bound(-1e5, 1e5, "mm", "positions and sizes up to 100 m"),
    "_us": Bound(-1e9, 1e9, "us", "times up to 1000 s either side of zero"),
    "_ns": Bound(-1e12, 1e12, "ns", "times up to 1000 s either side of zero"),
    "_A": Bound(-1e6, 1e6, "A", "currents up to 1 MA, either sign; 0 A turns a coil off"),
    "_T": Bound(-1e3, 1e3, "T", "magnetic fields up to 1000 T either way, beyond the strongest magnets"),
    "_MHz": Bound(0.0, 1e6, "MHz", "frequencies up to 1 THz"),
    "_kHz": Bound(0.0, 1e9, "kHz", "frequencies up to 1 THz"),
    "_deg": Bound(-3600.0, 3600.0, "deg", "ten turns either way"),
    "_K": Bound(0.0, 1e6, "K", "temperatures up to 1e6 K"),
    "mass_u": Bound(1e-4, 1e12, "u", "from below the electron's 5.5e-4 u up to clusters and droplets of 1e12 u"),
    "charge_e": Bound(1e-3, 1e6, "e", "charges of 0.001 e up to 1e6 e, either sign", magnitude=True),
    "rtol": Bound(1e-14, 0.5, "", "a relative tolerance below 1e-14 is lost in float64 rounding"),
}


def bound_of(key: str) -> Bound | None:
    """The bound of a config key (``electrode[1].voltage_V``, ``domain.z_mm[0]``), by its name's
    unit suffix; None for a key without one (counts, fractions, angles have their own checks)."""
    name = key.rpartition(".")[2].partition("[")[0]
    if name in BOUNDS:
        return BOUNDS[name]
    suffix = "_" + name.rpartition("_")[2] if "_" in name else ""
    return BOUNDS.get(suffix)
