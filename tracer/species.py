"""Particle species: mass and charge from a name.

Names
-----
``"e-"``, ``"e+"`` and ``"p+"`` are the electron, the positron and the proton
(scipy.constants, CODATA). Every other name is an ion written as::

    [mass number] symbol [multiplicity] [^] [charge count] sign

for example ``"H+"``, ``"H-"``, ``"H2+"``, ``"D+"``, ``"4He+"``, ``"4He2+"``,
``"40Ar+"``, ``"Ar2+"``, ``"133Cs+"``, ``"O-"``, ``"C60+"``, ``"Au-"``.

* The symbol is any element symbol known to periodictable, plus ``D`` and
  ``T`` for deuterium and tritium.
* Without a mass number the element's most abundant natural isotope is used
  (periodictable's abundance table): a mass-selected beam holds one isotope,
  not the natural mixture, so the atomic weight would be the wrong mass.
  Elements without natural abundance data (Tc, Pm, U, ...) need a mass number.
* A multiplicity makes a homonuclear molecule or cluster (``H2``, ``C60``);
  mixed molecules are not parsed (use :func:`custom_species`).
* A single group of digits right before the sign is ambiguous (``"Ar2+"``
  means Ar²⁺, ``"H2+"`` means H₂⁺). It is read as the charge count of a cation
  when the atom has that many electrons to lose, and as a multiplicity
  otherwise (and always for anions, since free atomic anions carry one extra
  electron). A caret separates the two explicitly: ``"N2^+"`` is N₂⁺,
  ``"O^2+"`` is O²⁺, ``"C60^2+"`` is C₆₀²⁺.

Masses
------
periodictable's NIST isotope masses are atomic masses (electrons included).
An ion of charge state q gets ``n * m_atom - q * m_e``; the binding energies of
the removed (or added) electrons and of the molecule are neglected, at most a
few parts in 1e8 for light ions. A bare nucleus for which CODATA gives the mass
(proton, deuteron, triton, helion, alpha particle) takes the CODATA value from
scipy.constants instead.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import periodictable
from scipy import constants

_U_KG = constants.physical_constants["atomic mass constant"][0]

_NAMED = {
    "e-": ("electron mass", -1),
    "e+": ("electron mass", +1),
    "p+": ("proton mass", +1),
}

# bare nuclei (atomic number, mass number) with a CODATA mass
_NUCLEI = {
    (1, 1): "proton mass",
    (1, 2): "deuteron mass",
    (1, 3): "triton mass",
    (2, 3): "helion mass",
    (2, 4): "alpha particle mass",
}

_ION = re.compile(r"(\d+)?([A-Z][a-z]?)(\d+)?(?:(\^)(\d+)?)?([+-])")

_ACCEPTED = (
    "accepted: 'e-', 'e+', 'p+', or an ion '[mass number]symbol[multiplicity][^][charge count]sign' "
    "such as 'H+', 'H2+', 'D+', '4He2+', '40Ar+', 'Ar2+', 'C60+', 'O-', 'N2^+'; "
    "or give mass_u and charge_e"
)


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
        For a name that is not understood, with a message saying what is accepted.
    """
    if not isinstance(name, str):
        raise ValueError(f"species name must be a string, got {name!r}; {_ACCEPTED}")
    if name in _NAMED:
        key, sign = _NAMED[name]
        return Species(name, constants.physical_constants[key][0], sign * constants.e)
    match = _ION.fullmatch(name)
    if match is None:
        if _ION.fullmatch(name + "+"):
            raise ValueError(f"species {name!r} has no charge sign; write e.g. {name + '+'!r} or {name + '-'!r}")
        raise ValueError(f"unknown species {name!r}; {_ACCEPTED}")
    mass_number, symbol, digits, caret, count, sign = match.groups()
    isotope = _isotope(name, symbol, mass_number)
    atomic_number = isotope.element.number
    multiplicity, charge_state = _multiplicity_and_charge(name, atomic_number, digits, caret, count, sign)
    charge = charge_state if sign == "+" else -charge_state
    nucleus = _NUCLEI.get((atomic_number, isotope.isotope))
    if multiplicity == 1 and charge == atomic_number and nucleus is not None:
        mass = constants.physical_constants[nucleus][0]
    else:
        mass = multiplicity * isotope.mass * _U_KG - charge * constants.m_e
    return Species(name, mass, charge * constants.e)


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


def _is_number(value):
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _isotope(name, symbol, mass_number):
    """The periodictable isotope of a symbol and optional mass number."""
    try:
        found = periodictable.elements.symbol(symbol)
    except ValueError:
        raise ValueError(f"unknown species {name!r}: no element {symbol!r}; {_ACCEPTED}") from None
    if isinstance(found, periodictable.core.Isotope):  # D, T
        if mass_number is not None:
            raise ValueError(f"species {name!r}: {symbol} already names an isotope; drop the mass number")
        return found
    if found.number == 0:
        raise ValueError(f"unknown species {name!r}: {symbol!r} is the neutron, which has no charge")
    if mass_number is None:
        best = max(found.isotopes, key=lambda a: found[a].abundance)
        if found[best].abundance <= 0:
            raise ValueError(
                f"species {name!r}: {symbol} has no natural isotopic abundance data; give a mass number "
                f"({found.isotopes[0]}..{found.isotopes[-1]} are known)"
            )
        return found[best]
    if int(mass_number) not in found.isotopes:
        raise ValueError(
            f"species {name!r}: no isotope {int(mass_number)}{symbol} "
            f"(known mass numbers {found.isotopes[0]}..{found.isotopes[-1]})"
        )
    return found[int(mass_number)]


def _multiplicity_and_charge(name, atomic_number, digits, caret, count, sign):
    """Split the digits of an ion name into (multiplicity, charge state)."""
    if caret is None and digits is not None:  # one digit group: see the module docstring
        if sign == "+" and int(digits) <= atomic_number:
            multiplicity, charge_state = 1, int(digits)
        else:
            multiplicity, charge_state = int(digits), 1
    else:
        multiplicity = 1 if digits is None else int(digits)
        charge_state = 1 if count is None else int(count)
    if multiplicity == 0 or charge_state == 0:
        raise ValueError(f"species {name!r}: multiplicity and charge count must be at least 1")
    if sign == "+" and charge_state > multiplicity * atomic_number:
        raise ValueError(
            f"species {name!r}: charge {charge_state}+ exceeds the {multiplicity * atomic_number} "
            "electrons there are to remove"
        )
    return multiplicity, charge_state
