"""Species names, masses and charges against scipy.constants (CODATA) and periodictable (NIST)."""

import math
import pickle

import periodictable
import pytest
from scipy import constants

from tracer.species import Species, custom_species, species

U = constants.physical_constants["atomic mass constant"][0]
M_E = constants.m_e
E = constants.e
EV_PER_U = constants.physical_constants["atomic mass constant energy equivalent in MeV"][0] * 1e6


def atomic_kg(symbol, mass_number):
    """periodictable's NIST atomic mass of an isotope, in kg."""
    return getattr(periodictable, symbol)[mass_number].mass * U


def test_electron_positron_proton_are_codata():
    # source: scipy.constants (CODATA) electron and proton masses, elementary charge
    assert species("e-") == Species("e-", M_E, -E)
    assert species("e+") == Species("e+", M_E, +E)
    assert species("p+") == Species("p+", constants.m_p, +E)


@pytest.mark.parametrize(
    "name, nucleus, charge",
    [("H+", "proton mass", 1), ("1H+", "proton mass", 1), ("D+", "deuteron mass", 1), ("2H+", "deuteron mass", 1),
     ("T+", "triton mass", 1), ("3He2+", "helion mass", 2), ("4He2+", "alpha particle mass", 2),
     ("He2+", "alpha particle mass", 2)],
)
def test_bare_nuclei_take_the_codata_nucleus_mass(name, nucleus, charge):
    # source: scipy.constants physical_constants (CODATA) nucleus masses
    s = species(name)
    assert s.mass_kg == pytest.approx(constants.physical_constants[nucleus][0], rel=1e-9)
    assert s.charge_C == pytest.approx(charge * E, rel=1e-15)


@pytest.mark.parametrize(
    "symbol, mass_number, electrons, binding_eV",
    [("H", 1, 1, 13.598), ("H", 2, 1, 13.602), ("He", 4, 2, 24.587 + 54.418)],
)
def test_nist_atom_minus_electrons_differs_from_the_nucleus_by_the_binding_energy(
    symbol, mass_number, electrons, binding_eV
):
    """The atomic-mass route (used for all other ions) and the CODATA nucleus differ by the
    electrons' binding energy: ionization energies from memory (NIST atomic spectra database)."""
    nucleus = species(f"{mass_number}{symbol}{electrons}+" if electrons > 1 else f"{mass_number}{symbol}+")
    atom_minus_electrons = atomic_kg(symbol, mass_number) - electrons * M_E
    difference_eV = (atom_minus_electrons - nucleus.mass_kg) / U * EV_PER_U
    assert difference_eV == pytest.approx(-binding_eV, abs=0.03)


def test_40ar_plus_is_the_nist_atom_less_one_electron():
    # source: periodictable (NIST isotope masses), scipy.constants m_e
    s = species("40Ar+")
    assert s.mass_kg == pytest.approx(atomic_kg("Ar", 40) - M_E, rel=1e-12)
    assert s.charge_C == E
    assert s.mass_u == pytest.approx(39.9618, abs=1e-4)  # 39.9624 u for the atom, from memory (AME)


@pytest.mark.parametrize(
    "name, symbol, mass_number",
    # most abundant natural isotopes, from memory (IUPAC isotopic compositions)
    [("Ar+", "Ar", 40), ("Xe+", "Xe", 132), ("Ga+", "Ga", 69), ("In+", "In", 115), ("Cs+", "Cs", 133),
     ("133Cs+", "Cs", 133), ("4He+", "He", 4), ("Kr+", "Kr", 84), ("Ne+", "Ne", 20), ("Cu+", "Cu", 63)],
)
def test_singly_charged_cations_use_the_named_or_most_abundant_isotope(name, symbol, mass_number):
    s = species(name)
    assert s.mass_kg == pytest.approx(atomic_kg(symbol, mass_number) - M_E, rel=1e-12)
    assert s.charge_e == pytest.approx(1.0)


@pytest.mark.parametrize("name, symbol, mass_number", [("H-", "H", 1), ("O-", "O", 16), ("Au-", "Au", 197)])
def test_anions_carry_an_extra_electron(name, symbol, mass_number):
    # source: periodictable (NIST), scipy.constants m_e
    s = species(name)
    assert s.mass_kg == pytest.approx(atomic_kg(symbol, mass_number) + M_E, rel=1e-12)
    assert s.charge_e == pytest.approx(-1.0)


def test_c60_plus_is_720_u_less_an_electron():
    # source: the definition of the atomic mass unit, m(12C) = 12 u; scipy.constants electron mass in u
    s = species("C60+")
    assert s.mass_u == pytest.approx(720.0 - constants.physical_constants["electron mass in u"][0], rel=1e-12)
    assert s.charge_e == pytest.approx(1.0)


@pytest.mark.parametrize(
    "name, symbol, mass_number, multiplicity, charge",
    [
        ("H2+", "H", 1, 2, 1),      # H2 molecular ion: H cannot lose 2 electrons
        ("H3+", "H", 1, 3, 1),
        ("D2+", "H", 2, 2, 1),
        ("Ar2+", "Ar", 40, 1, 2),   # a single digit group is a charge count when the atom allows it
        ("40Ar3+", "Ar", 40, 1, 3),
        ("Xe3+", "Xe", 132, 1, 3),
        ("N2^+", "N", 14, 2, 1),    # the caret makes the digits a multiplicity
        ("O^2+", "O", 16, 1, 2),
        ("C60^2+", "C", 12, 60, 2),
        ("Au2-", "Au", 197, 2, -1),  # anions: the digits are a multiplicity
        ("C60^2-", "C", 12, 60, -2),
    ],
)
def test_multiplicity_and_charge_state(name, symbol, mass_number, multiplicity, charge):
    s = species(name)
    assert s.charge_C == pytest.approx(charge * E)
    expected = multiplicity * atomic_kg(symbol, mass_number) - charge * M_E
    assert s.mass_kg == pytest.approx(expected, rel=1e-12)
    assert s.name == name


@pytest.mark.parametrize(
    "name, fragment",
    [
        ("Xx+", "no element 'Xx'"),
        ("ar+", "accepted"),
        ("", "accepted"),
        ("e", "accepted"),
        ("40Ar", "no charge sign"),
        ("Ar", "no charge sign"),
        ("300Ar+", "no isotope 300Ar"),
        ("Ar^19+", "exceeds the 18 electrons"),
        ("U+", "give a mass number"),
        ("2D+", "drop the mass number"),
        ("Ar0+", "at least 1"),
        ("Ar^0+", "at least 1"),
        ("He 2+", "accepted"),
        ("n+", "accepted"),
    ],
)
def test_unknown_names_say_what_is_accepted(name, fragment):
    with pytest.raises(ValueError) as caught:
        species(name)
    assert fragment in str(caught.value)
    assert repr(name) in str(caught.value)


def test_non_string_name_is_a_value_error():
    with pytest.raises(ValueError, match="must be a string"):
        species(40)


def test_custom_species():
    # source: scipy.constants atomic mass constant and elementary charge
    s = custom_species(40.0, 2)
    assert s.mass_kg == pytest.approx(40.0 * U, rel=1e-15)
    assert s.charge_C == pytest.approx(2 * E, rel=1e-15)
    assert s.mass_u == pytest.approx(40.0)
    assert s.charge_e == pytest.approx(2.0)
    assert s.name == "40u+2e"


@pytest.mark.parametrize("mass, charge", [(0.0, 1), (-1.0, 1), (math.nan, 1), (math.inf, 1), (1.0, 0), (1.0, math.nan),
                                          ("40", 1), (1.0, True)])
def test_custom_species_refuses_bad_values(mass, charge):
    with pytest.raises(ValueError):
        custom_species(mass, charge)


def test_species_round_trips_through_pickle():
    s = species("133Cs+")
    assert pickle.loads(pickle.dumps(s)) == s
