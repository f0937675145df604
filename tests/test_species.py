"""Species names, masses and charges against scipy.constants (CODATA) and periodictable (NIST)."""

import math
import pickle

import periodictable
import pytest
from scipy import constants

import tracer
from tracer.cli import main
from tracer.config import ConfigError
from tracer.pipeline import CONFIGS
from tracer.species import Species, custom_species, species

U = constants.physical_constants["atomic mass constant"][0]
M_E = constants.m_e
M_E_U = constants.physical_constants["electron mass in u"][0]
E = constants.e
EV_PER_U = constants.physical_constants["atomic mass constant energy equivalent in MeV"][0] * 1e6


def atomic_kg(symbol, mass_number):
    """periodictable's NIST atomic mass of an isotope, in kg."""
    return getattr(periodictable, symbol)[mass_number].mass * U


def nist_u(atoms, charge):
    """Mass in u of atoms [(symbol, mass number or None for the element's mass, count)] less `charge`
    electrons: periodictable (NIST atomic masses and standard atomic weights), scipy.constants (m_e in u)."""
    total = 0.0
    for symbol, mass_number, count in atoms:
        element = periodictable.elements.symbol(symbol)
        total += count * (element.mass if mass_number is None else element[mass_number].mass)
    return total - charge * M_E_U


def test_electron_positron_proton_are_codata():
    # source: scipy.constants (CODATA) electron and proton masses, elementary charge
    assert species("e-") == Species("e-", M_E, -E)
    assert species("e+") == Species("e+", M_E, +E)
    assert species("p+") == Species("p+", constants.m_p, +E)
    assert species("e-").describe() == f"e-: e⁻, {M_E_U:.9g} u (CODATA electron mass), charge -1 e"



@pytest.mark.parametrize("word, same, key, charge", [
    ("electron", "e-", "electron mass", -1), ("positron", "e+", "electron mass", 1),
    ("proton", "p+", "proton mass", 1), ("deuteron", "D+", "deuteron mass", 1),
    ("triton", "T+", "triton mass", 1), ("helion", "3He^2+", "helion mass", 2),
    ("alpha", "4He^2+", "alpha particle mass", 2)])
def test_particle_words_are_codata(word, same, key, charge):
    # source: scipy.constants physical_constants (CODATA) particle masses, elementary charge
    s = species(word)
    assert s.mass_kg == constants.physical_constants[key][0] == species(same).mass_kg
    assert s.charge_C == charge * E == species(same).charge_C
    assert s.isotopic and s.mass_basis == f"CODATA {key}"
    assert s.describe().startswith(f"{word}: ")

@pytest.mark.parametrize(
    "name, nucleus, charge",
    [("1H+", "proton mass", 1), ("[1H]+", "proton mass", 1), ("D+", "deuteron mass", 1),
     ("2H+", "deuteron mass", 1), ("T+", "triton mass", 1), ("3He^2+", "helion mass", 2),
     ("4He^2+", "alpha particle mass", 2), ("4He++", "alpha particle mass", 2),
     ("[4He]^2+", "alpha particle mass", 2)],
)
def test_bare_nuclei_take_the_codata_nucleus_mass(name, nucleus, charge):
    # source: scipy.constants physical_constants (CODATA) nucleus masses
    s = species(name)
    assert s.mass_kg == pytest.approx(constants.physical_constants[nucleus][0], rel=1e-9, abs=0)
    assert s.charge_C == pytest.approx(charge * E, rel=1e-15, abs=0)
    assert s.isotopic and s.mass_basis == f"isotopic, CODATA {nucleus}"


@pytest.mark.parametrize(
    "name, symbol, mass_number, electrons, binding_eV",
    [("1H+", "H", 1, 1, 13.598), ("2H+", "H", 2, 1, 13.602), ("4He^2+", "He", 4, 2, 24.587 + 54.418)],
)
def test_nist_atom_minus_electrons_differs_from_the_nucleus_by_the_binding_energy(
    name, symbol, mass_number, electrons, binding_eV
):
    """The atomic-mass route (used for all other ions) and the CODATA nucleus differ by the
    electrons' binding energy: ionization energies from memory (NIST atomic spectra database)."""
    atom_minus_electrons = atomic_kg(symbol, mass_number) - electrons * M_E
    difference_eV = (atom_minus_electrons - species(name).mass_kg) / U * EV_PER_U
    assert difference_eV == pytest.approx(-binding_eV, abs=0.03)


@pytest.mark.parametrize(
    "name, atoms, charge, isotopic",
    [
        # atoms, natural averages and isotopes
        ("40Ar+", [("Ar", 40, 1)], 1, True),
        ("[40Ar]+", [("Ar", 40, 1)], 1, True),
        ("Ar+", [("Ar", None, 1)], 1, False),
        ("133Cs+", [("Cs", 133, 1)], 1, True),
        ("Cs+", [("Cs", 133, 1)], 1, True),            # a single natural isotope (periodictable: 100 %)
        ("H+", [("H", None, 1)], 1, False),             # natural hydrogen, not the proton
        ("4He+", [("He", 4, 1)], 1, True),
        ("238U+", [("U", 238, 1)], 1, True),
        # molecules with natural and given isotopes
        ("CO2+", [("C", None, 1), ("O", None, 2)], 1, False),
        ("CO2^+", [("C", None, 1), ("O", None, 2)], 1, False),
        ("13C16O+", [("C", 13, 1), ("O", 16, 1)], 1, True),
        ("[13C]O+", [("C", 13, 1), ("O", None, 1)], 1, False),
        ("12C16O2^+", [("C", 12, 1), ("O", 16, 2)], 1, True),
        ("C[18O]2^+", [("C", None, 1), ("O", 18, 2)], 1, False),
        ("1H216O+", [("H", 1, 2), ("O", 16, 1)], 1, True),
        ("H2O+", [("H", None, 2), ("O", None, 1)], 1, False),
        ("[2H]2O+", [("H", 2, 2), ("O", None, 1)], 1, False),
        ("D2O+", [("H", 2, 2), ("O", None, 1)], 1, False),
        ("16OD-", [("O", 16, 1), ("H", 2, 1)], -1, True),
        ("CH3OH+", [("C", None, 1), ("H", None, 4), ("O", None, 1)], 1, False),
        ("CH4+", [("C", None, 1), ("H", None, 4)], 1, False),
        ("H2+", [("H", None, 2)], 1, False),            # H has one electron: only H2 with one charge
        ("D2+", [("H", 2, 2)], 1, True),
        ("H3+", [("H", None, 3)], 1, False),
        ("N2^+", [("N", None, 2)], 1, False),
        # anions
        ("SF5-", [("S", None, 1), ("F", 19, 5)], -1, False),
        ("SF6-", [("S", None, 1), ("F", 19, 6)], -1, False),
        ("32S19F6-", [("S", 32, 1), ("F", 19, 6)], -1, True),
        ("O-", [("O", None, 1)], -1, False),
        ("O2-", [("O", None, 2)], -1, False),           # an atom binds one extra electron at most
        ("Au-", [("Au", 197, 1)], -1, True),
        ("Au2-", [("Au", 197, 2)], -1, True),
        # multiply charged ions
        ("Ar^2+", [("Ar", None, 1)], 2, False),
        ("Ar++", [("Ar", None, 1)], 2, False),
        ("40Ar+++", [("Ar", 40, 1)], 3, True),
        ("Xe^10+", [("Xe", None, 1)], 10, False),
        ("197Au^79+", [("Au", 197, 1)], 79, True),      # bare gold: no CODATA nucleus mass
        ("N2^2+", [("N", None, 2)], 2, False),
        ("CO^2+", [("C", None, 1), ("O", None, 1)], 2, False),
        ("CO2++", [("C", None, 1), ("O", None, 2)], 2, False),   # a repeated sign: the 2 is a count
        ("CO2^2+", [("C", None, 1), ("O", None, 2)], 2, False),
        # clusters, large counts
        ("C60+", [("C", None, 60)], 1, False),
        ("12C60+", [("C", 12, 60)], 1, True),
        ("C60^2+", [("C", None, 60)], 2, False),
        ("C60++", [("C", None, 60)], 2, False),
        ("C60^2-", [("C", None, 60)], -2, False),
        ("C602^+", [("C", None, 602)], 1, False),
        ("12C6000+", [("C", 12, 6000)], 1, True),
        ("Ar16^+", [("Ar", None, 16)], 1, False),
    ],
)
def test_mass_is_the_nist_sum_less_the_electrons(name, atoms, charge, isotopic):
    # source: periodictable (NIST atomic masses, standard atomic weights), scipy.constants (m_e in u)
    s = species(name)
    assert abs(s.mass_u - nist_u(atoms, charge)) <= 1e-9
    assert s.charge_C == charge * E
    assert s.charge_e == pytest.approx(charge, rel=1e-15, abs=0)
    assert s.isotopic is isotopic
    assert s.mass_basis == ("isotopic" if isotopic else "natural average")
    assert s.name == name


def test_a_few_masses_from_memory():
    # from memory (AME / IUPAC): m(40Ar) = 39.9623831 u, m(12C) = 12 u exactly (definition of the u),
    # standard atomic weight of copper 63.546
    assert species("40Ar+").mass_u == pytest.approx(39.9623831 - M_E_U, abs=1e-6)
    assert species("12C60+").mass_u == pytest.approx(720.0 - M_E_U, abs=1e-9)
    assert species("Cu+").mass_u == pytest.approx(63.546 - M_E_U, abs=1e-3)


def test_caret_and_repeated_signs_agree():
    assert species("Ar^2+").mass_kg == species("Ar++").mass_kg
    assert species("C60^2-").mass_kg == species("C60--").mass_kg
    assert species("40Ar+++").mass_kg == species("40Ar^3+").mass_kg
    # N2^+ holds one electron more than N2++ (scipy.constants m_e)
    assert species("N2^+").mass_kg == pytest.approx(species("N2++").mass_kg + M_E, rel=1e-14, abs=0)


@pytest.mark.parametrize(
    "name, formula",
    [("40Ar+", "⁴⁰Ar⁺"), ("13C16O+", "¹³C¹⁶O⁺"), ("CO2+", "CO₂⁺"), ("H2O+", "H₂O⁺"), ("SF5-", "SF₅⁻"),
     ("C60^2+", "C₆₀²⁺"), ("N2^+", "N₂⁺"), ("Ar++", "Ar²⁺"), ("[2H]2O+", "²H₂O⁺"), ("e+", "e⁺"),
     ("p+", "p⁺"), ("4He^2+", "⁴He²⁺")],
)
def test_formula_is_written_with_sub_and_superscripts(name, formula):
    assert species(name).formula == formula


def test_describe_is_one_line_with_mass_basis_and_charge():
    o2 = species("O2^+")
    assert o2.describe() == f"O2^+: O₂⁺, {o2.mass_u:.9g} u (natural average), charge +1 e"
    ar = species("40Ar^2+")
    assert ar.describe() == f"40Ar^2+: ⁴⁰Ar²⁺, {ar.mass_u:.9g} u (isotopic), charge +2 e"
    alpha = species("4He^2+")
    assert alpha.describe().endswith("u (isotopic, CODATA alpha particle mass), charge +2 e")
    assert "\n" not in species("SF5-").describe()


@pytest.mark.parametrize(
    "name, readings",
    # each reading: its formula and an unambiguous spelling the message offers
    [
        ("He2+", [("He₂⁺", "He2^+"), ("He²⁺", "He^2+")]),
        ("4He2+", [("⁴He₂⁺", "4He2^+"), ("⁴He²⁺", "4He^2+")]),
        ("3He2+", [("³He₂⁺", "3He2^+"), ("³He²⁺", "3He^2+")]),
        ("O2+", [("O₂⁺", "O2^+"), ("O²⁺", "O^2+")]),
        ("N2+", [("N₂⁺", "N2^+"), ("N²⁺", "N^2+")]),
        ("Ar2+", [("Ar₂⁺", "Ar2^+"), ("Ar²⁺", "Ar^2+")]),
        ("40Ar3+", [("⁴⁰Ar₃⁺", "40Ar3^+"), ("⁴⁰Ar³⁺", "40Ar^3+")]),
        ("Ar16+", [("Ar₁₆⁺", "Ar16^+"), ("Ar¹⁶⁺", "Ar^16+")]),
        ("Li3+", [("Li₃⁺", "Li3^+"), ("Li³⁺", "Li^3+")]),
        ("C602+", [("C₆₀₂⁺", "C602^+"), ("C₆₀²⁺", "C60^2+")]),
        ("C602-", [("C₆₀₂⁻", "C602^-"), ("C₆₀²⁻", "C60^2-")]),
        ("Au32+", [("Au₃₂⁺", "Au32^+"), ("Au³²⁺", "Au^32+"), ("Au₃²⁺", "Au3^2+")]),
        ("[13C]2+", [("¹³C₂⁺", "13C2^+"), ("¹³C²⁺", "13C^2+")]),
    ],
)
def test_ambiguous_names_are_refused_with_every_reading(name, readings):
    with pytest.raises(ValueError) as caught:
        species(name)
    message = str(caught.value)
    assert repr(name) in message and "ambiguous" in message and "\n" not in message
    for formula, spelling in readings:
        assert formula in message and repr(spelling) in message
        assert species(spelling).formula == formula       # each offered spelling means that reading
    assert message.count(" or ") == len(readings) - 1


def test_an_alpha_particle_reading_is_named():
    with pytest.raises(ValueError, match="an alpha particle, 4.001506 u, charge [+]2 e"):
        species("4He2+")


@pytest.mark.parametrize(
    "name, fragment",
    [
        ("Xx+", "no element 'Xx'"),
        ("ar+", "accepted"),
        ("", "accepted"),
        ("e", "accepted"),
        ("n+", "accepted"),
        ("He 2+", "accepted"),
        ("Ar+-", "accepted"),
        ("^2+", "accepted"),
        ("40Ar", "no charge sign"),
        ("Ar", "no charge sign"),
        ("Ar+2", "'Ar^2+' (or 'Ar++')"),
        ("Ar+16", "'Ar^16+'"),
        ("300Ar+", "no isotope 300Ar"),
        ("[300Ar]+", "no isotope 300Ar"),
        ("040Ar+", "no isotope 040Ar"),
        ("Ar^19+", "exceeds the 18 electrons"),
        ("H^2+", "exceeds the 1 electrons"),
        ("O^2-", "exceeds the one extra electron a free atom binds"),
        ("C2^3-", "exceeds one extra electron per atom"),
        ("U+", "give a mass number"),
        ("Tc+", "give a mass number"),
        ("2D+", "drop the mass number"),
        ("[2D]+", "drop the mass number"),
        ("Ar0+", "neither a count nor a charge"),
        ("Ar^0+", "must be 1 or more"),
        ("Ar^02+", "must be 1 or more"),
        ("C1O+", "'1' after C is not a count"),
        ("C0+", "neither a count nor a charge"),
        ("13CO+", "O has none"),
        ("13C[16O]+", "without brackets"),
        ("13C99O+", "'99' before O is no count followed by a mass number of O"),
    ],
)
def test_bad_names_say_what_is_wrong(name, fragment):
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
    assert s.mass_kg == pytest.approx(40.0 * U, rel=1e-15, abs=0)
    assert s.charge_C == pytest.approx(2 * E, rel=1e-15, abs=0)
    assert s.mass_u == pytest.approx(40.0)
    assert s.charge_e == pytest.approx(2.0)
    assert s.name == "40u+2e"
    assert not s.isotopic and s.mass_basis == "given" and s.formula == "40u+2e"
    assert s.describe() == "40u+2e: 40u+2e, 40 u (given), charge +2 e"


@pytest.mark.parametrize("mass, charge", [(0.0, 1), (-1.0, 1), (math.nan, 1), (math.inf, 1), (1.0, 0), (1.0, math.nan),
                                          ("40", 1), (1.0, True)])
def test_custom_species_refuses_bad_values(mass, charge):
    with pytest.raises(ValueError):
        custom_species(mass, charge)


def test_species_round_trips_through_pickle():
    s = species("133Cs+")
    back = pickle.loads(pickle.dumps(s))
    assert back == s and back.describe() == s.describe()


# ---------------------------------------------------------------- configs and the command line


@pytest.mark.parametrize("path", sorted(CONFIGS.glob("*.toml")), ids=lambda p: p.stem)
def test_bundled_configs_load_and_their_species_round_trip(path):
    setup = tracer.load(path)
    kinds = [b.species for b in setup.beams]
    kinds += [k.species for k in (setup.gun, setup.optics) if k is not None]
    assert kinds
    for kind in kinds:
        assert species(kind.name) == kind
        assert kind.describe().startswith(f"{kind.name}: ")


def test_the_soft_landing_beam_is_the_mass_selected_all_12c_ion():
    # source: the definition of the atomic mass unit, m(12C) = 12 u; scipy.constants electron mass in u
    beam = tracer.load(CONFIGS / "soft_landing.toml").beams[0]
    assert beam.species.mass_u == pytest.approx(720.0 - M_E_U, abs=1e-9)
    assert beam.species.isotopic


def test_an_ambiguous_species_in_a_config_names_the_key_and_the_readings(tmp_path):
    text = (CONFIGS / "einzel_argon.toml").read_text().replace('species = "40Ar+"', 'species = "4He2+"', 1)
    config = tmp_path / "ambiguous.toml"
    config.write_text(text)
    with pytest.raises(ConfigError) as caught:
        tracer.load(config)
    assert caught.value.key == "beam[0].species"
    assert "⁴He₂⁺" in caught.value.message and "⁴He²⁺" in caught.value.message



@pytest.mark.parametrize("name, words", [("Xx+", "unknown species 'Xx+': no element 'Xx'"),
                                         ("Ar2+", "species 'Ar2+' is ambiguous: Ar₂⁺"),
                                         ("Electron", "unknown species 'Electron'")])
def test_a_bad_species_on_the_command_line_exits_2_naming_key_and_value(name, words, tmp_path, capsys):
    text = (CONFIGS / "einzel_argon.toml").read_text().replace('species = "40Ar+"', f'species = "{name}"', 1)
    config = tmp_path / "bad.toml"
    config.write_text(text)
    assert main(["check", str(config)]) == 2
    captured = capsys.readouterr()
    err = captured.err.splitlines()
    assert len(err) == 1 and err[0].startswith(f"tracer: error: beam[0].species: {words}")
    assert "Traceback" not in captured.err + captured.out

def test_check_prints_each_beams_mass_charge_and_basis(capsys, tmp_path, monkeypatch):
    monkeypatch.setenv("TRACER_CACHE", str(tmp_path / "cache"))
    assert main(["check", str(CONFIGS / "einzel_argon.toml")]) == 0
    out = capsys.readouterr().out
    ar = species("40Ar+")
    assert f"beam argon: 500 x 40Ar+: ⁴⁰Ar⁺, {ar.mass_u:.9g} u (isotopic), charge +1 e; at 1500 eV" in out
