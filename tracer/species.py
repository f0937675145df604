"""Particle species: mass and charge from an unambiguous name.

Names
-----
``"e-"``, ``"e+"`` and ``"p+"`` are the electron, the positron and the proton; the
words ``"electron"``, ``"positron"``, ``"proton"``, ``"deuteron"``, ``"triton"``,
``"helion"`` (³He²⁺) and ``"alpha"`` (⁴He²⁺) name those particles too (their masses
from scipy.constants, CODATA). Every other name is a formula followed by a charge:

==========================  =====================================  =========================
part                        how it is written                      examples
==========================  =====================================  =========================
formula                     element symbols, each followed by its  ``Ar``, ``H2O``, ``CO2``,
                            count (2 or more) when there are       ``SF5``, ``C60``, ``CH3OH``
                            several
isotopes, in brackets       ``[mass number symbol]`` for one atom  ``[13C]O``, ``[2H]2O``,
                                                                   ``C[18O]2``
isotopes, nuclide notation  a name that starts with a mass number  ``40Ar``, ``13C16O``,
                            gives one to every atom, before its    ``12C16O2``, ``1H216O``
                            symbol
deuterium, tritium          ``D``, ``T``                           ``D2O``, ``16OD``
charge one                  ``+`` or ``-``                         ``Ar+``, ``SF6-``
charge above one            ``^`` then the number then the sign,   ``Ar^2+``, ``C60^3-``,
                            or the sign repeated                   ``Ar++``, ``N2^+``
==========================  =====================================  =========================

Digits after a symbol are always a count, never a charge; a charge above one is
written ``^2+`` (or ``++``). Digits right before a lone sign are where the two
habits meet (``Ar2+`` is Ar²⁺ to an atomic physicist, ``N2+`` is N₂⁺ to a mass
spectrometrist), so:

* a name of one element that ends in digits and a lone sign is refused, with its
  readings, whenever the digits could also be a charge (or a count and a
  charge) the element can carry: ``He2+`` (He²⁺ or He₂⁺), ``O2+``, ``Ar16+``,
  ``4He2+``, ``C602+`` (C₆₀²⁺ or C₆₀₂⁺). When the count is the only possible
  reading the name is taken: ``H2+`` is H₂⁺ (hydrogen has one electron),
  ``C60+`` is C₆₀⁺, ``O2-`` is O₂⁻ (an atom binds one extra electron at most);
* in a formula of two or more atom groups the digits are the last atom's count,
  as mass spectrometrists write them: ``CO2+`` is CO₂⁺, ``CH4+`` is CH₄⁺,
  ``SF5-`` is SF₅⁻ (write ``CO^2+`` for the dication).

In nuclide notation the digits between two symbols are a count followed by the
next atom's mass number (``12C16O2+`` is ¹²C¹⁶O₂⁺, ``1H216O+`` is ¹H₂¹⁶O⁺); a
name where two such splits fit is refused with both. A charge may not exceed the
electrons there are to remove, and an anion carries at most one extra electron
per atom (no free atom binds two: from memory, common practice).

Masses
------
Sums of periodictable's NIST atomic masses (electrons included), less the
electrons of a cation, plus those of an anion (electron mass from
scipy.constants); the binding energies of those electrons and of the molecule
are neglected, at most a few parts in 1e8 for light ions. An atom takes

* its isotope's mass when its mass number is given, for ``D`` and ``T``, and
  for an element with a single natural isotope (F, Na, Al, P, Co, As, I, Cs,
  Au, ...: periodictable's abundance of 100 %);
* otherwise its element's standard atomic weight, the natural average
  (periodictable's element mass). Elements without natural abundance data
  (Tc, Pm, U, ...) need a mass number.

The mass is *isotopic* when every atom takes an isotope's mass, so that it is
the mass of one kind of particle; otherwise it is a *natural average*, the mean
over an isotope mixture that no single ion has (``Cu+`` is 63.546 u, while the
ions are 63Cu and 65Cu). A bare nucleus for which CODATA gives the mass
(proton, deuteron, triton, helion, alpha particle: ``1H+``, ``D+``, ``T+``,
``3He^2+``, ``4He^2+``) takes the CODATA value from scipy.constants instead.
"""

from __future__ import annotations

import functools
import itertools
import math
import re
from dataclasses import dataclass
from typing import NamedTuple

import periodictable
from scipy import constants

_U_KG = constants.physical_constants["atomic mass constant"][0]

_NAMED = {
    "e-": ("e⁻", "electron mass", -1),
    "e+": ("e⁺", "electron mass", +1),
    "p+": ("p⁺", "proton mass", +1),
    "electron": ("e⁻", "electron mass", -1),
    "positron": ("e⁺", "electron mass", +1),
    "proton": ("p⁺", "proton mass", +1),
    "deuteron": ("d⁺", "deuteron mass", +1),
    "triton": ("t⁺", "triton mass", +1),
    "helion": ("h²⁺", "helion mass", +2),
    "alpha": ("α²⁺", "alpha particle mass", +2),
}
"""The names of particles with a CODATA mass: formula, scipy.constants key, charge number."""

# bare nuclei (atomic number, mass number) with a CODATA mass
_NUCLEI = {
    (1, 1): "proton mass",
    (1, 2): "deuteron mass",
    (1, 3): "triton mass",
    (2, 3): "helion mass",
    (2, 4): "alpha particle mass",
}

_CHARGE = re.compile(r"(?P<body>.*?)(?:\^(?P<number>\d*)(?P<sign>[+-])|(?P<signs>\++|-+))")
_TOKEN = re.compile(r"(?P<digits>\d+)|\[(?P<mass>\d+)(?P<isotope>[A-Z][a-z]?)\]|(?P<symbol>[A-Z][a-z]?)")

_SUPERSCRIPT = str.maketrans("0123456789+-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁺⁻")
_SUBSCRIPT = str.maketrans("0123456789", "₀₁₂₃₄₅₆₇₈₉")

_ACCEPTED = (
    "accepted: 'e-', 'e+', 'p+', the words 'electron', 'positron', 'proton', 'deuteron', 'triton', "
    "'helion', 'alpha', or a formula and a charge such as 'Ar+', 'H2O+', 'SF5-', 'C60+', "
    "'[13C]O+', '13C16O+', '40Ar^2+', 'Ar++', 'N2^+', 'D+'; or give mass_u and charge_e"
)


class Atom(NamedTuple):
    """One group of a formula: an element (or D, T), its mass number if given, and its count."""

    symbol: str
    mass_number: int | None
    count: int


class Reading(NamedTuple):
    """One meaning of a name: its atom groups and its signed charge number."""

    atoms: tuple[Atom, ...]
    charge: int


class About(NamedTuple):
    """What a name resolves to, for reports: formula, whether the mass is of one kind of particle,
    and where the mass comes from."""

    formula: str
    isotopic: bool
    basis: str


@dataclass(frozen=True)
class Species:
    """A particle kind.

    Parameters
    ----------
    name : str
        The name it was made from.
    mass_kg : float
        Rest mass in kg.
    charge_C : float
        Charge in coulomb (signed).
    """

    name: str
    mass_kg: float
    charge_C: float

    @property
    def mass_u(self) -> float:
        """Rest mass in unified atomic mass units."""
        return self.mass_kg / _U_KG

    @property
    def charge_e(self) -> float:
        """Charge in units of the elementary charge (signed)."""
        return self.charge_C / constants.e

    @property
    def formula(self) -> str:
        """The formula the name stands for, with sub- and superscripts (``"O₂⁺"``); the name itself
        for a species given by mass and charge."""
        return _about(self.name).formula

    @property
    def isotopic(self) -> bool:
        """True when the mass is that of one kind of particle (every atom a given isotope, D, T,
        or of a single-isotope element; or a CODATA particle), False for a natural average or a
        given mass."""
        return _about(self.name).isotopic

    @property
    def mass_basis(self) -> str:
        """Where the mass comes from: ``"isotopic"``, ``"natural average"``, ``"given"`` (mass_u),
        or a CODATA particle (``"CODATA electron mass"``, ``"isotopic, CODATA alpha particle
        mass"``)."""
        return _about(self.name).basis

    def describe(self) -> str:
        """One line: name, formula, mass in u and its basis, charge in e.

        Returns
        -------
        str
            For example ``"O2^+: O₂⁺, 31.9982514 u (natural average), charge +1 e"``.
        """
        return f"{self.name}: {self.formula}, {self.mass_u:.9g} u ({self.mass_basis}), charge {self.charge_e:+g} e"


def species(name: str) -> Species:
    """Return the species for a name such as ``"40Ar+"`` (see the module docstring).

    Parameters
    ----------
    name : str
        Species name.

    Returns
    -------
    Species

    Raises
    ------
    ValueError
        For a name that is not understood, with a message saying what is accepted, or a name
        that can be read in more than one way, with its readings and how to write each.
    """
    if not isinstance(name, str):
        raise ValueError(f"species name must be a string, got {name!r}; {_ACCEPTED}")
    if name in _NAMED:
        _, key, charge = _NAMED[name]
        return Species(name, constants.physical_constants[key][0], charge * constants.e)
    reading = _read(name)
    return Species(name, _mass_kg(reading), reading.charge * constants.e)


def custom_species(mass_u: float, charge_e: float) -> Species:
    """Return a species of given mass and charge.

    Parameters
    ----------
    mass_u : float
        Rest mass in unified atomic mass units (> 0).
    charge_e : float
        Charge in units of the elementary charge (signed, non-zero).

    Returns
    -------
    Species
        Named like ``"40u+1e"``.

    Raises
    ------
    ValueError
        For a mass that is not positive and finite or a charge that is zero or not finite.
    """
    if not (_is_number(mass_u) and math.isfinite(mass_u) and mass_u > 0):
        raise ValueError(f"mass_u must be a positive finite number, got {mass_u!r}")
    if not (_is_number(charge_e) and math.isfinite(charge_e) and charge_e != 0):
        raise ValueError(f"charge_e must be a non-zero finite number, got {charge_e!r}")
    return Species(f"{mass_u:g}u{charge_e:+g}e", mass_u * _U_KG, charge_e * constants.e)


def _read(name: str) -> Reading:
    """The one reading of an ion's name (not ``"e-"``, ``"e+"``, ``"p+"``).

    Parameters
    ----------
    name : str
        Species name (see the module docstring).

    Returns
    -------
    Reading

    Raises
    ------
    ValueError
        For a name with no reading, or with several (the message gives each, and how to write it).
    """
    found = _readings(name)
    if len(found) > 1:
        choices = " or ".join(f"{_formula(r)} ({_nucleus_words(r)}{_mass_kg(r) / _U_KG:.6f} u, charge "
                              f"{r.charge:+d} e)" for r in found)
        spell = ", ".join(f"{_spelling(r)!r} for {_formula(r)}" for r in found)
        raise ValueError(f"species {name!r} is ambiguous: {choices}; write {spell}")
    return found[0]


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool)


# ---------------------------------------------------------------- reading a name


def _readings(name):
    """Every reading of a name the rules allow (at least one; else a ValueError saying why)."""
    match = _CHARGE.fullmatch(name)
    if match is None:
        _refuse_without_charge(name)
    body = match["body"]
    lead, groups = _tokens(name, body)
    if match["signs"]:
        sign = 1 if match["signs"][0] == "+" else -1
        number, lone = len(match["signs"]), len(match["signs"]) == 1
    else:
        sign = 1 if match["sign"] == "+" else -1
        number, lone = _charge_number(name, match["number"]), False
    runs = _run_choices(name, lead, groups, lone)
    readings, refusals = [], []
    for choice in itertools.product(*runs):
        values = dict(pair for alternative in choice for pair in alternative)
        atoms = tuple(Atom(symbol, values[("mass", i)], values[("count", i)])
                      for i, (symbol, _, _) in enumerate(groups))
        reading = Reading(atoms, sign * values.get("charge", number))
        refusal = _impossible(name, reading)
        if refusal:
            refusals.append(refusal)
        elif reading not in readings:
            readings.append(reading)
    if not readings:
        raise ValueError(refusals[0])
    return readings


def _refuse_without_charge(name):
    """Raise the error for a name without a charge at its end."""
    written_after = re.fullmatch(r"(.+?)([+-])(\d+)", name)
    if written_after and _parses(written_after[1]):
        body, sign, number = written_after.groups()
        repeated = f" (or {body + sign * int(number)!r})" if 1 < int(number) <= 3 else ""
        raise ValueError(f"species {name!r}: a charge above one is written after the formula with a caret, "
                         f"{body + '^' + number + sign!r}{repeated}")
    if _parses(name):
        raise ValueError(f"species {name!r} has no charge sign; write e.g. {name + '+'!r} or {name + '-'!r}")
    raise ValueError(f"unknown species {name!r}; {_ACCEPTED}")


def _parses(body):
    try:
        _tokens(body, body)
    except ValueError:
        return False
    return True


def _tokens(name, body):
    """Split a formula into its leading mass number (or None) and (symbol, bracketed mass number,
    digits after) per atom group."""
    lead, groups, at = None, [], 0
    while at < len(body):
        token = _TOKEN.match(body, at)
        if token is None:
            raise ValueError(f"unknown species {name!r}; {_ACCEPTED}")
        at = token.end()
        if token["digits"] is None:
            groups.append([token["symbol"] or token["isotope"], token["mass"], None])
        elif groups:
            groups[-1][2] = token["digits"]
        else:
            lead = token["digits"]
    if not groups:
        raise ValueError(f"unknown species {name!r}; {_ACCEPTED}")
    for symbol, _, _ in groups:
        _element(name, symbol)
    if lead is not None and any(mass is not None for _, mass, _ in groups):
        raise ValueError(f"species {name!r}: a name that starts with a mass number gives every atom its "
                         "mass number before its symbol, without brackets (e.g. '13C16O+')")
    return lead, [tuple(g) for g in groups]


def _charge_number(name, digits):
    """The charge number written after a caret (one when no digits are written)."""
    if digits == "":
        return 1
    if _as_number(digits, least=1) is None:
        raise ValueError(f"species {name!r}: charge ^{digits} must be 1 or more, without leading zeros")
    return int(digits)


def _run_choices(name, lead, groups, lone):
    """For each run of digits, its possible meanings, each a tuple of ((what, atom), value) pairs."""
    nuclide = lead is not None
    first, first_mass = groups[0][0], lead if nuclide else groups[0][1]
    runs = [[((("mass", 0), _mass_number(name, first, first_mass)),)]]
    for i in range(len(groups) - 1):
        digits, following = groups[i][2], groups[i + 1][0]
        if nuclide and not _is_nuclide(following):
            runs.append(_count_and_mass(name, i, digits, following))
        else:
            runs.append([((("count", i), _count(name, groups[i][0], digits)),
                          (("mass", i + 1), _mass_number(name, following, groups[i + 1][1])))])
    last = len(groups) - 1
    digits = groups[last][2]
    if lone and last == 0 and digits is not None:
        runs.append(_count_or_charge(name, last, digits))
    else:
        runs.append([((("count", last), _count(name, groups[last][0], digits)),)])
    return runs


def _count_and_mass(name, i, digits, following):
    """Nuclide notation between two symbols: the first atom's count, then the next's mass number."""
    if digits is None:
        raise ValueError(f"species {name!r}: a name that starts with a mass number gives every atom one, "
                         f"and {following} has none; write it before {following}, or use brackets "
                         "for some atoms only (e.g. '[13C]O+')")
    splits = []
    for k in range(len(digits)):
        count = 1 if k == 0 else _as_number(digits[:k], least=2)
        mass = _as_number(digits[k:], least=1)
        if count is not None and mass is not None and mass in _element(name, following).isotopes:
            splits.append(((("count", i), count), (("mass", i + 1), mass)))
    if not splits:
        raise ValueError(f"species {name!r}: {digits!r} before {following} is no count followed by a "
                         f"mass number of {following} (known {_known(_element(name, following))})")
    return splits


def _count_or_charge(name, i, digits):
    """Digits before a lone sign in a name of one element: a count, or a count and a charge."""
    choices = []
    if _as_number(digits, least=2) is not None:
        choices.append(((("count", i), int(digits)),))
    for k in range(len(digits)):
        count = 1 if k == 0 else _as_number(digits[:k], least=2)
        charge = _as_number(digits[k:], least=2)
        if count is not None and charge is not None:
            choices.append(((("count", i), count), ("charge", charge)))
    if not choices:
        raise ValueError(f"species {name!r}: {digits!r} before the sign is neither a count nor a charge "
                         "(each 2 or more, without leading zeros)")
    return choices


def _count(name, symbol, digits):
    """A count written after a symbol (one when none is written)."""
    if digits is None:
        return 1
    if _as_number(digits, least=2) is None:
        raise ValueError(f"species {name!r}: {digits!r} after {symbol} is not a count "
                         "(2 or more, without leading zeros)")
    return int(digits)


def _as_number(digits, least):
    """The integer of a digit string if it has no leading zero and is at least ``least``, else None."""
    if digits.startswith("0") or int(digits) < least:
        return None
    return int(digits)


def _mass_number(name, symbol, digits):
    """The mass number written before a symbol (None when none is written)."""
    found = _element(name, symbol)
    if digits is None:
        return None
    if _is_nuclide(symbol):
        raise ValueError(f"species {name!r}: {symbol} already names an isotope; drop the mass number")
    if digits.startswith("0") or int(digits) not in found.isotopes:
        raise ValueError(f"species {name!r}: no isotope {digits}{symbol} (known {_known(found)})")
    return int(digits)


def _known(element):
    return f"mass numbers {element.isotopes[0]}..{element.isotopes[-1]}"


def _element(name, symbol):
    """periodictable's element (or isotope, for D and T) of a symbol."""
    try:
        found = periodictable.elements.symbol(symbol)
    except ValueError:
        raise ValueError(f"unknown species {name!r}: no element {symbol!r}; {_ACCEPTED}") from None
    if not isinstance(found, periodictable.core.Isotope) and found.number == 0:  # the neutron, 'n'
        raise ValueError(f"unknown species {name!r}: {symbol!r} is the neutron, which has no charge")
    return found


def _is_nuclide(symbol):
    """True for D and T, symbols that name an isotope."""
    return isinstance(periodictable.elements.symbol(symbol), periodictable.core.Isotope)


def _impossible(name, reading):
    """Why a reading cannot be (a message), or None."""
    electrons = sum(a.count * _atom(name, a).number for a in reading.atoms)
    atoms = sum(a.count for a in reading.atoms)
    if reading.charge > electrons:
        return (f"species {name!r}: charge {reading.charge}+ exceeds the {electrons} electrons there are "
                "to remove")
    if -reading.charge > atoms:
        return (f"species {name!r}: charge {-reading.charge}- exceeds one extra electron per atom "
                f"(a free atom binds one at most; this has {atoms})" if atoms > 1 else
                f"species {name!r}: charge {-reading.charge}- exceeds the one extra electron a free atom "
                "binds")
    return None


# ---------------------------------------------------------------- masses and words


def _atom(name, atom):
    """periodictable's isotope of an atom group, or its element for a natural average."""
    found = _element(name, atom.symbol)
    if isinstance(found, periodictable.core.Isotope):
        return found
    if atom.mass_number is not None:
        return found[atom.mass_number]
    single = [a for a in found.isotopes if found[a].abundance == 100]
    if single:
        return found[single[0]]
    if not any(found[a].abundance > 0 for a in found.isotopes):
        raise ValueError(f"species {name!r}: {atom.symbol} has no natural isotopic abundance data; give "
                         f"a mass number ({_known(found)})")
    return found


def _isotopic(reading):
    return all(isinstance(_atom("", a), periodictable.core.Isotope) for a in reading.atoms)


def _nucleus(reading):
    """The CODATA name of a bare nucleus reading (``"alpha particle mass"``), or None."""
    if len(reading.atoms) != 1 or reading.atoms[0].count != 1 or not _isotopic(reading):
        return None
    isotope = _atom("", reading.atoms[0])
    if reading.charge != isotope.number:
        return None
    return _NUCLEI.get((isotope.number, isotope.isotope))


def _nucleus_words(reading):
    nucleus = _nucleus(reading)
    if nucleus is None:
        return ""
    particle = nucleus.removesuffix(" mass")
    return f"{'an' if particle[0] in 'aeiou' else 'a'} {particle}, "


def _mass_kg(reading):
    """Sum of the atoms' masses less the electrons of a cation, plus those of an anion (or CODATA's
    mass of a bare nucleus)."""
    nucleus = _nucleus(reading)
    if nucleus is not None:
        return constants.physical_constants[nucleus][0]
    return sum(a.count * _atom("", a).mass for a in reading.atoms) * _U_KG - reading.charge * constants.m_e


def _formula(reading):
    """The formula with sub- and superscripts, as in ``"¹³C¹⁶O⁺"`` or ``"C₆₀²⁺"``."""
    text = "".join((str(a.mass_number or "")).translate(_SUPERSCRIPT) + a.symbol
                   + (str(a.count) if a.count > 1 else "").translate(_SUBSCRIPT) for a in reading.atoms)
    q = abs(reading.charge)
    return text + (f"{q if q > 1 else ''}{'+' if reading.charge > 0 else '-'}").translate(_SUPERSCRIPT)


def _spelling(reading):
    """A name with this one reading: nuclide notation when every atom has a mass number (and that is
    unambiguous), else the formula with bracketed isotopes."""
    q, sign = abs(reading.charge), "+" if reading.charge > 0 else "-"

    def written(body):
        return body + (sign if q == 1 and not body[-1].isdigit() else f"^{q if q > 1 else ''}{sign}")

    def counted(atom, text):
        return text + (str(atom.count) if atom.count > 1 else "")

    if all(a.mass_number is not None or _is_nuclide(a.symbol) for a in reading.atoms) \
            and reading.atoms[0].mass_number is not None:
        nuclide = written("".join(counted(a, f"{a.mass_number or ''}{a.symbol}") for a in reading.atoms))
        if _readings(nuclide) == [reading]:
            return nuclide
    return written("".join(counted(a, f"[{a.mass_number}{a.symbol}]" if a.mass_number else a.symbol)
                           for a in reading.atoms))


@functools.lru_cache(maxsize=256)
def _about(name):
    """Formula, isotopic flag and mass basis of a species name (a given mass when the name is no
    species name)."""
    if name in _NAMED:
        formula, key, _ = _NAMED[name]
        return About(formula, True, f"CODATA {key}")
    try:
        reading = _read(name)
        isotopic = _isotopic(reading)
    except ValueError:
        return About(name, False, "given")
    nucleus = _nucleus(reading)
    basis = "isotopic" if isotopic else "natural average"
    return About(_formula(reading), isotopic, basis if nucleus is None else f"{basis}, CODATA {nucleus}")
