"""Reading setups from TOML: SI conversion, defaults, every class of error, the geometry hash, fuzzing."""

import copy
import json
import math
import pickle
import re

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracer.config import (
    Arc,
    Beam,
    ConfigError,
    Domain,
    Electrode,
    GunSpec,
    OpticsSpec,
    Plane,
    Polygon,
    Rect,
    ScanSpec,
    Setup,
    TraceOptions,
    TuneSpec,
    load,
    loads,
)
from tracer.species import species

FULL = """\
title = "argon focus, illustrative"

[domain]
symmetry = "axial"
z_mm = [0.0, 160.0]
r_mm = 30.0
cell_mm = 0.1
edges = { z_min = "open", r_max = "ground" }

[[electrode]]
name = "extractor"
voltage_V = -500
[[electrode.rect]]
z_mm = [10.0, 12.0]
r_mm = [2.0, 30.0]

[[electrode]]
name = "focus"
voltage_V = 1200.0
[[electrode.rect]]
z_mm = [52.0, 100.0]
r_mm = [6.0, 7.0]
[[electrode.polygon]]
points_mm = [[110.0, 20.0], [120.0, 20.0], [115.0, 25.0]]
[[electrode.arc]]
center_z_mm = 80
radii_mm = [40, 42]
angles_deg = [0, 90]

[[beam]]
name = "argon"
species = "40Ar+"
energy_eV = 1500.0
energy_sigma_eV = 0.5
temperature_K = 1200
count = 2000
seed = 7
start_z_mm = 2.0
start_r_mm = 0.5
sigma_mm = 1.0
profile = "gaussian"
half_angle_deg = 0.5
angles = "cosine"
current_A = 1e-9

[[beam]]
name = "heavy"
mass_u = 1000.0
charge_e = -2
energy_eV = 0
start_z_mm = 0

[[plane]]
name = "image"
z_mm = 150.0
stop = true

[trace]
max_time_us = 50.0
rtol = 1e-8
ledger_threshold = 1e-5
keep_paths = 10

[scan]
focus = [800.0, 1600.0, 41]
extractor = [-600, -400, 3]

[tune]
vary = { focus = [800.0, 1600.0] }
goal = { landing_energy_eV = 5.0 }
at = "image"
seed = 3

[gun]
cathode = "extractor"
emission = "thermionic"
rays = 300
temperature_K = 1800
work_function_eV = 4.5
schottky = true
relaxation = 0.5
max_iterations = 20
tolerance = 1e-4

[optics]
species = "e-"
energy_eV = 100
object_z_mm = -50
"""


def base():
    """A small valid setup as a dict (three electrodes, one beam, one plane, every section)."""
    return {
        "title": "base",
        "domain": {"symmetry": "axial", "z_mm": [0.0, 100.0], "r_mm": 20.0, "cell_mm": 0.5},
        "electrode": [
            {"name": "ground", "voltage_V": 0.0, "rect": [{"z_mm": [0.0, 2.0], "r_mm": [3.0, 20.0]}]},
            {"name": "focus", "voltage_V": 800.0, "rect": [{"z_mm": [40.0, 60.0], "r_mm": [6.0, 7.0]}]},
            {"name": "exit", "voltage_V": 0.0,
             "rect": [{"z_mm": [90.0, 92.0], "r_mm": [3.0, 20.0]}],
             "polygon": [{"points_mm": [[70.0, 10.0], [80.0, 10.0], [75.0, 15.0]]}],
             "arc": [{"center_z_mm": 50.0, "radii_mm": [15.0, 16.0], "angles_deg": [30.0, 150.0]}]},
        ],
        "beam": [{"name": "ions", "species": "40Ar+", "energy_eV": 1000.0, "start_z_mm": 1.0}],
        "plane": [{"name": "image", "z_mm": 95.0}],
        "trace": {"max_time_us": 20.0},
        "scan": {"focus": [700.0, 900.0, 5]},
        "tune": {"vary": {"focus": [700.0, 900.0]}, "goal": "smallest_spot", "at": "image"},
        "gun": {"cathode": "ground", "emission": "space_charge"},
        "optics": {"species": "e-", "energy_eV": 50.0},
    }


# ---------------------------------------------------------------- a tiny TOML emitter (inline form)

BARE = re.compile(r"[A-Za-z0-9_\-]+")


def toml_key(key):
    return key if BARE.fullmatch(key) else json.dumps(key)


def toml_value(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(value)


def dumps(document):
    return "\n".join(f"{toml_key(k)} = {toml_value(v)}" for k, v in document.items()) + "\n"


def check(document):
    return loads(dumps(document))


def error_of(document):
    with pytest.raises(ConfigError) as caught:
        check(document)
    return caught.value


# ---------------------------------------------------------------- valid files


def test_full_config_round_trip_in_si(tmp_path):
    path = tmp_path / "setup.toml"
    path.write_text(FULL)
    setup = load(path)
    assert setup.source == path.resolve()
    assert setup.title == "argon focus, illustrative"
    assert setup.domain == Domain("axial", (0.0, 0.16), (0.0, 0.03), 1e-4, ("open", "ground", "axis", "ground"))
    assert setup.domain.mirror
    extractor, focus = setup.electrodes
    assert extractor == Electrode("extractor", -500.0, (Rect((0.010, 0.012), (0.002, 0.030)),))
    assert focus.voltage_V == 1200.0
    assert focus.shapes == (
        Rect((0.052, 0.100), (0.006, 0.007)),
        Polygon(((0.110, 0.020), (0.120, 0.020), (0.115, 0.025))),
        Arc(0.080, (0.040, 0.042), (0.0, math.pi / 2)),
    )
    argon, heavy = setup.beams
    assert argon == Beam(
        name="argon", species=species("40Ar+"), energy_eV=1500.0, start_z_m=0.002, energy_spread_eV=0.5,
        temperature_K=1200.0, count=2000, seed=7, start_r_m=0.0005, radius_m=0.001, profile="gaussian",
        half_angle_rad=math.radians(0.5), angles="cosine", current_A=1e-9, rays_csv=None,
    )
    assert heavy.species.mass_u == pytest.approx(1000.0)
    assert heavy.species.charge_e == pytest.approx(-2.0)
    assert heavy.energy_eV == 0.0 and heavy.start_z_m == 0.0
    assert setup.planes == (Plane("image", 0.150, True),)
    assert setup.trace == TraceOptions(max_time_s=5e-5, rtol=1e-8, ledger_threshold=1e-5, keep_paths=10)
    assert setup.scan == ScanSpec((("focus", 800.0, 1600.0, 41), ("extractor", -600.0, -400.0, 3)))
    assert setup.tune == TuneSpec((("focus", 800.0, 1600.0),), "landing_energy", 5.0, "image", 3)
    assert setup.gun == GunSpec("extractor", "thermionic", 300, 1800.0, 4.5, True, 0.5, 20, 1e-4, species("e-"))
    assert setup.optics == OpticsSpec(species("e-"), 100.0, -0.050)
    assert setup.voltages() == {"extractor": -500.0, "focus": 1200.0}


def test_defaults():
    document = base()
    for key in ("trace", "scan", "tune", "gun", "optics", "plane", "title"):
        del document[key]
    setup = check(document)
    assert setup.title == ""
    assert setup.domain.edges == ("ground", "ground", "axis", "ground")
    (beam,) = setup.beams
    assert (beam.energy_spread_eV, beam.temperature_K, beam.count, beam.seed) == (0.0, None, 100, 0)
    assert (beam.start_r_m, beam.radius_m, beam.profile) == (0.0, 0.0, "uniform")
    assert (beam.half_angle_rad, beam.angles, beam.current_A, beam.rays_csv) == (0.0, "uniform", None, None)
    assert setup.planes == ()
    assert setup.trace == TraceOptions(1e-4, 1e-9, 1e-6, 50)
    assert (setup.scan, setup.tune, setup.gun, setup.optics) == (None, None, None, None)
    assert setup.source is None


def test_gaussian_widths_are_standard_deviations():
    """sigma_mm, sigma_angle_deg and energy_sigma_eV are standard deviations; energy_fwhm_eV is the
    full width at half maximum, 2 sqrt(2 ln 2) sigma of a normal distribution (Gauss; common practice)."""
    document = base()
    beam_with(profile="gaussian", sigma_mm=1.0, angles="gaussian", sigma_angle_deg=0.25,
              energy_fwhm_eV=2.0)(document)
    got = check(document).beams[0]
    assert (got.profile, got.radius_m, got.angles) == ("gaussian", 0.001, "gaussian")
    assert got.half_angle_rad == pytest.approx(math.radians(0.25))
    assert got.energy_spread_eV == pytest.approx(2.0 / (2.0 * math.sqrt(2.0 * math.log(2.0))))


def test_section_defaults():
    document = base()
    document["plane"][0].pop("stop", None)
    document["gun"] = {"cathode": "ground"}
    document["beam"][0]["angles"] = "cosine"
    setup = check(document)
    assert setup.planes[0].stop is False
    assert setup.gun == GunSpec("ground", "space_charge", 200, None, None, False, 0.3, 50, 1e-3, species("e-"))
    assert setup.beams[0].half_angle_rad == pytest.approx(math.pi / 2)  # Lambert emission: the whole hemisphere


def test_planar_with_y_range():
    document = base()
    document["domain"] = {"symmetry": "planar", "z_mm": [0.0, 100.0], "y_mm": [-20.0, 20.0], "cell_mm": 0.5,
                          "edges": {"y_min": "open", "z_max": "open"}}
    document["electrode"] = [
        {"name": "upper", "voltage_V": 100.0, "rect": [{"z_mm": [40.0, 60.0], "y_mm": [5.0, 6.0]}]},
        {"name": "lower", "voltage_V": -100.0, "rect": [{"z_mm": [40.0, 60.0], "y_mm": [-6.0, -5.0]}]},
    ]
    document["beam"][0]["start_y_mm"] = -1.5
    for key in ("scan", "tune", "gun"):
        del document[key]
    setup = check(document)
    assert setup.domain.r_m == (-0.020, 0.020)
    assert setup.domain.edges == ("ground", "open", "open", "ground")
    assert not setup.domain.mirror
    assert setup.electrodes[1].shapes == (Rect((0.040, 0.060), (-0.006, -0.005)),)
    assert setup.beams[0].start_r_m == -0.0015
    document["beam"][0]["radius_mm"] = 19.0  # the source strip would reach below y = -20 mm
    error = error_of(document)
    assert error.key == "beam[0].radius_mm" and "about y = -1.5 mm" in error.message


def test_planar_arc_about_any_centre_over_any_angles():
    """In a planar domain over a full y range an arc's centre may leave y = 0 and its angles may
    run past 0 and 180 degrees, up to a full turn; elsewhere the centre stays on the axis."""
    document = base()
    document["domain"] = {"symmetry": "planar", "z_mm": [0.0, 100.0], "y_mm": [-20.0, 20.0], "cell_mm": 0.5}
    sector = {"center_z_mm": 50.0, "center_y_mm": -12.0, "radii_mm": [15.0, 16.0], "angles_deg": [-45.0, 225.0]}
    document["electrode"] = [{"name": "outer", "voltage_V": 100.0, "arc": [sector]}]
    for key in ("scan", "tune", "gun"):
        del document[key]
    document["beam"][0]["start_y_mm"] = 0.0
    shape = check(document).electrodes[0].shapes[0]
    assert shape == Arc(0.050, (0.015, 0.016), (math.radians(-45.0), math.radians(225.0)), -0.012)
    for angles, fragment in (([-400.0, 0.0], "first angle -400.0 is below -360"),
                             ([0.0, 400.0], "spans more than a full turn"),
                             ([-90.0, 300.0], "spans more than a full turn")):
        sector["angles_deg"] = angles
        error = error_of(document)
        assert error.key == "electrode[0].arc[0].angles_deg" and fragment in error.message, error
    sector["angles_deg"], sector["center_y_mm"] = [0.0, 90.0], -40.0
    error = error_of(document)
    assert error.key == "electrode[0].arc[0]" and "wholly outside the domain" in error.message
    sector["center_y_mm"] = -12.0
    document["domain"] = {"symmetry": "planar", "z_mm": [0.0, 100.0], "r_mm": 20.0, "cell_mm": 0.5}
    document["beam"][0]["start_r_mm"] = document["beam"][0].pop("start_y_mm")
    error = error_of(document)
    assert error.key == "electrode[0].arc[0].center_y_mm" and "the mirror plane" in error.message


def test_planar_with_mirror_plane():
    document = base()
    document["domain"]["symmetry"] = "planar"
    setup = check(document)
    assert setup.domain.mirror and setup.domain.edges[2] == "axis"


def test_rays_csv_is_resolved_against_the_config_folder(tmp_path):
    (tmp_path / "rays.csv").write_text("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,1,0,0,1,5\n")
    document = base()
    document["beam"][0] = {"name": "measured", "species": "e-", "rays_csv": "rays.csv", "current_A": 1e-6}
    path = tmp_path / "setup.toml"
    path.write_text(dumps(document))
    beam = load(path).beams[0]
    assert beam.rays_csv == tmp_path / "rays.csv"
    assert (beam.energy_eV, beam.start_z_m, beam.count, beam.current_A) == (None, None, None, 1e-6)


def test_scan_csv(tmp_path):
    (tmp_path / "sets.csv").write_text("focus_V,exit_V\n800,0\n900,10\n")
    document = base()
    document["scan"] = {"csv": "sets.csv"}
    setup = loads(dumps(document), source=tmp_path / "setup.toml")
    assert setup.scan == ScanSpec((), tmp_path / "sets.csv")


def test_tune_goals():
    document = base()
    document["tune"]["goal"] = {"focus_z_mm": 80.0}
    assert check(document).tune.goal_value == pytest.approx(0.080)
    document["tune"]["goal"] = "most_transmitted"
    del document["tune"]["at"]
    assert check(document).tune == TuneSpec((("focus", 700.0, 900.0),), "most_transmitted", None, None, 0)


def test_trace_in_nanoseconds():
    document = base()
    document["trace"] = {"max_time_ns": 250}
    assert check(document).trace.max_time_s == pytest.approx(2.5e-7, rel=1e-15, abs=0)


# ---------------------------------------------------------------- errors


def beam_with(**keys):
    """A mutation of the base document: these keys added to its beam."""

    def mutate(document):
        document["beam"][0] |= keys

    return mutate


def put(path, value):
    """A mutation of the base document: set the value at a path of keys and indices (None deletes)."""

    def mutate(document):
        node = document
        for key in path[:-1]:
            node = node[key]
        if isinstance(node, dict) != isinstance(path[-1], str):
            raise TypeError(f"no key {path[-1]!r} in {type(node).__name__}")
        if value is None:
            del node[path[-1]]
        elif isinstance(node, list) and path[-1] == len(node):
            node.append(value)
        else:
            node[path[-1]] = value

    return mutate


ERRORS = [
    # the example of the design: 0-based indices, the bad values named
    (put(["electrode", 2, "rect", 0, "r_mm"], [7.0, 6.0]), "electrode[2].rect[0].r_mm", "inner radius 7.0 exceeds outer 6.0"),
    # wrong types
    (put(["domain", "cell_mm"], "0.1"), "domain.cell_mm", "expected a number, got '0.1'"),
    (put(["electrode", 1, "voltage_V"], True), "electrode[1].voltage_V", "expected a number, got true"),
    (put(["beam", 0, "count"], 100.0), "beam[0].count", "expected an integer, got 100.0"),
    (put(["plane", 0, "stop"], 1), "plane[0].stop", "expected true or false, got 1"),
    (put(["domain"], 5), "domain", "expected a table, got 5"),
    (put(["electrode"], {"name": "x"}), "electrode", "expected an array of tables [[electrode]]"),
    (put(["electrode", 0, "rect"], {"z_mm": [0, 1]}), "electrode[0].rect", "[[electrode.rect]]"),
    (put(["title"], 3), "title", "expected a string, got 3"),
    (put(["domain", "z_mm"], [0.0, "100"]), "domain.z_mm[1]", "'100'"),
    (put(["domain", "z_mm"], [0.0, 50.0, 100.0]), "domain.z_mm", "expected 2 values, got 3"),
    (put(["beam", 0, "species"], 40), "beam[0].species", "expected a string, got 40"),
    # zero, negative, NaN, inf where they make no sense
    (put(["domain", "cell_mm"], 0), "domain.cell_mm", "must be > 0, got 0"),
    (put(["domain", "cell_mm"], -0.1), "domain.cell_mm", "got -0.1"),
    (put(["domain", "cell_mm"], math.nan), "domain.cell_mm", "must be finite, got nan"),
    (put(["domain", "r_mm"], math.inf), "domain.r_mm", "must be finite, got inf"),
    (put(["domain", "r_mm"], -20.0), "domain.r_mm", "must be > 0, got -20.0"),
    (put(["beam", 0, "count"], 0), "beam[0].count", "must be >= 1, got 0"),
    (put(["beam", 0, "radius_mm"], -1.0), "beam[0].radius_mm", "got -1.0"),
    (put(["beam", 0, "energy_eV"], -5.0), "beam[0].energy_eV", "must be >= 0, got -5.0"),
    (put(["beam", 0, "energy_sigma_eV"], -0.1), "beam[0].energy_sigma_eV", "got -0.1"),
    (put(["beam", 0, "temperature_K"], 0), "beam[0].temperature_K", "got 0"),
    (put(["beam", 0, "current_A"], -1e-6), "beam[0].current_A", "got -1e-06"),
    (put(["beam", 0, "seed"], -1), "beam[0].seed", "got -1"),
    (put(["trace", "rtol"], 0.0), "trace.rtol", "must be > 0, got 0.0"),
    (put(["trace", "rtol"], 1.5), "trace.rtol", "must be < 1, got 1.5"),
    (put(["trace", "max_time_us"], 0), "trace.max_time_us", "got 0"),
    (put(["trace", "max_time_us"], -1.0), "trace.max_time_us", "got -1.0"),
    (put(["trace", "ledger_threshold"], 0), "trace.ledger_threshold", "got 0"),
    (put(["trace", "keep_paths"], -3), "trace.keep_paths", "got -3"),
    (put(["optics", "energy_eV"], 0.0), "optics.energy_eV", "got 0.0"),
    (put(["gun", "relaxation"], 1.5), "gun.relaxation", "got 1.5"),
    (put(["gun", "rays"], 0), "gun.rays", "got 0"),
    (put(["gun", "tolerance"], 0), "gun.tolerance", "got 0"),
    (put(["gun", "max_iterations"], 0), "gun.max_iterations", "got 0"),
    (put(["beam", 0, "mass_u"], 40.0), "beam[0].mass_u", "give species or mass_u + charge_e, not both"),
    # reversed and empty ranges
    (put(["domain", "z_mm"], [100.0, 0.0]), "domain.z_mm", "start 100.0 exceeds end 0.0"),
    (put(["electrode", 0, "rect", 0, "z_mm"], [2.0, 1.0]), "electrode[0].rect[0].z_mm", "start 2.0 exceeds end 1.0"),
    (put(["electrode", 1, "rect", 0, "r_mm"], [6.0, 6.0]), "electrode[1].rect[0].r_mm", "inner radius 6.0 equals outer 6.0"),
    (put(["electrode", 2, "arc", 0, "radii_mm"], [16.0, 15.0]), "electrode[2].arc[0].radii_mm", "inner radius 16.0 exceeds outer 15.0"),
    (put(["electrode", 2, "arc", 0, "radii_mm"], [-1.0, 15.0]), "electrode[2].arc[0].radii_mm", "-1.0"),
    (put(["scan", "focus"], [900.0, 700.0, 5]), "scan.focus", "from 900.0 exceeds to 700.0"),
    (put(["scan", "focus"], [700.0, 900.0, 1]), "scan.focus", "count 1"),
    (put(["scan", "focus"], [700.0, 900.0, 2.0]), "scan.focus[2]", "expected an integer, got 2.0"),
    (put(["scan", "focus"], 800.0), "scan.focus", "expected an array, got 800.0"),
    (put(["tune", "vary", "focus"], [900.0, 700.0]), "tune.vary.focus", "lo 900.0 exceeds hi 700.0"),
    # angles
    (put(["electrode", 2, "arc", 0, "angles_deg"], [30.0, 190.0]), "electrode[2].arc[0].angles_deg", "second angle 190.0 exceeds 180"),
    (put(["electrode", 2, "arc", 0, "angles_deg"], [-10.0, 90.0]), "electrode[2].arc[0].angles_deg", "first angle -10.0 is below 0"),
    (put(["electrode", 2, "arc", 0, "angles_deg"], [90.0, 30.0]), "electrode[2].arc[0].angles_deg", "first angle 90.0 exceeds second 30.0"),
    (put(["beam", 0, "half_angle_deg"], 95.0), "beam[0].half_angle_deg", "must be <= 90, got 95.0"),
    (put(["beam", 0, "half_angle_deg"], -1), "beam[0].half_angle_deg", "got -1"),
    # polygons
    (put(["electrode", 2, "polygon", 0, "points_mm"], [[70.0, 10.0], [80.0, 10.0]]), "electrode[2].polygon[0].points_mm", "at least 3 points, got 2"),
    (put(["electrode", 2, "polygon", 0, "points_mm"], [[70.0, 10.0], [75.0, 12.0], [80.0, 14.0]]), "electrode[2].polygon[0].points_mm", "zero area"),
    (put(["electrode", 2, "polygon", 0, "points_mm"], [[70.0, 10.0], [80.0, -1.0], [75.0, 15.0]]), "electrode[2].polygon[0].points_mm[1]", "r -1.0 is below 0 (the axis)"),
    (put(["electrode", 2, "polygon", 0, "points_mm"], [[70.0, 10.0], [80.0], [75.0, 15.0]]), "electrode[2].polygon[0].points_mm[1]", "expected 2 values"),
    # duplicate names
    (put(["electrode", 2, "name"], "ground"), "electrode[2].name", "duplicate electrode name 'ground' (also electrode[0])"),
    (put(["beam", 1], {"name": "ions", "species": "e-", "energy_eV": 1.0, "start_z_mm": 1.0}), "beam[1].name", "duplicate beam name 'ions'"),
    (put(["plane", 1], {"name": "image", "z_mm": 50.0}), "plane[1].name", "duplicate plane name 'image'"),
    (put(["electrode", 0, "name"], "my lens"), "electrode[0].name", "bad name 'my lens'"),
    (put(["electrode", 0, "name"], "csv"), "electrode[0].name", "'csv' is reserved"),
    # names that must refer to electrodes or planes
    (put(["scan", "focs"], [1.0, 2.0, 2]), "scan.focs", "no electrode named 'focs'; did you mean 'focus'?"),
    (put(["tune", "vary", "exti"], [1.0, 2.0]), "tune.vary.exti", "no electrode named 'exti'; did you mean 'exit'?"),
    (put(["gun", "cathode"], "grund"), "gun.cathode", "no electrode named 'grund'; did you mean 'ground'?"),
    (put(["tune", "at"], "imag"), "tune.at", "no plane named 'imag'; did you mean 'image'?"),
    (put(["tune", "vary"], {}), "tune.vary", "empty"),
    (put(["scan"], {}), "scan", "empty"),
    # positions outside the domain
    (put(["plane", 0, "z_mm"], 170.0), "plane[0].z_mm", "170.0 is outside the domain's z range 0..100 mm"),
    (put(["beam", 0, "start_z_mm"], -1.0), "beam[0].start_z_mm", "-1.0 is outside the domain's z range 0..100 mm"),
    (put(["beam", 0, "start_r_mm"], 25.0), "beam[0].start_r_mm", "25.0 is outside the domain's r range 0..20 mm"),
    (put(["beam", 0, "radius_mm"], 21.0), "beam[0].radius_mm", "radius 21.0 mm"),
    (put(["tune", "goal"], {"focus_z_mm": 120.0}), "tune.goal.focus_z_mm", "120.0 is outside"),
    (put(["electrode", 1, "rect", 0, "z_mm"], [170.0, 180.0]), "electrode[1].rect[0]", "wholly outside the domain: z 170..180 mm"),
    (put(["electrode", 1, "rect", 0, "r_mm"], [20.0, 25.0]), "electrode[1].rect[0]", "wholly outside the domain"),
    (put(["electrode", 2, "arc", 0, "center_z_mm"], 130.0), "electrode[2].arc[0]", "wholly outside the domain"),
    (put(["electrode", 1, "rect", 0, "r_mm"], [-1.0, 7.0]), "electrode[1].rect[0].r_mm", "inner radius -1.0 is below 0 (the axis)"),
    (put(["electrode", 1, "rect"], None), "electrode[1]", "electrode 'focus': no shapes"),
    (put(["electrode"], []), "electrode", "at least one [[electrode]]"),
    (put(["electrode"], None), "electrode", "at least one [[electrode]]"),
    # edges
    (put(["domain", "edges"], "grounded"), "domain.edges", "unknown value 'grounded'; did you mean 'ground'?"),
    (put(["domain", "edges"], {"r_min": "open"}), "domain.edges.r_min", "not allowed: r = 0 is the axis"),
    (put(["domain", "edges"], {"y_max": "open"}), "domain.edges.y_max", "only with domain.y_mm"),
    (put(["domain", "edges"], {"z_mn": "open"}), "domain.edges.z_mn", "did you mean 'z_min'?"),
    (put(["domain", "edges"], {"z_min": "opn"}), "domain.edges.z_min", "unknown value 'opn'; did you mean 'open'?"),
    (put(["domain", "edges"], 0), "domain.edges", "expected a table, got 0"),
    # r_mm / y_mm and the symmetry
    (put(["domain", "y_mm"], [-20.0, 20.0]), "domain.y_mm", "give r_mm or y_mm, not both"),
    (put(["domain", "symmetry"], "axis"), "domain.symmetry", "unknown value 'axis'; did you mean 'axial'?"),
    (put(["domain", "r_mm"], None), "domain.r_mm", "missing"),
    # a grid too large, a grid too coarse
    (put(["domain", "cell_mm"], 1e-4), "domain.cell_mm", "use a coarser cell_mm"),
    (put(["domain", "cell_mm"], 1e-12), "domain.cell_mm", "more than 1e+09 cells"),
    (put(["domain", "cell_mm"], 15.0), "domain.cell_mm", "15.0 is coarser than half the r extent 20 mm"),
    # unknown keys and values, with did-you-mean
    (put(["domain", "cel_mm"], 0.5), "domain.cel_mm", "unknown key 'cel_mm'; did you mean 'cell_mm'?"),
    (put(["electrod"], []), "electrod", "unknown top-level key 'electrod'; did you mean 'electrode'?"),
    (put(["electrode", 0, "rect", 0, "rr_mm"], [0, 1]), "electrode[0].rect[0].rr_mm", "did you mean 'r_mm'?"),
    (put(["beam", 0, "energy_ev"], 5.0), "beam[0].energy_ev", "did you mean 'energy_eV'?"),
    (put(["beam", 0, "profile"], "gauss"), "beam[0].profile", "did you mean 'gaussian'?"),
    (put(["beam", 0, "angles"], "lambert"), "beam[0].angles", "unknown value 'lambert'; expected one of"),
    (put(["trace", "rtoll"], 1e-9), "trace.rtoll", "did you mean 'rtol'?"),
    (put(["optics", "energy"], 5.0), "optics.energy", "did you mean 'energy_eV'?"),
    (put(["tune", "goal"], "smalest_spot"), "tune.goal", "did you mean 'smallest_spot'?"),
    (put(["zz top"], 1), '"zz top"', "unknown top-level key 'zz top'"),
    (put(["beam", 0, "start_y_mm"], 1.0), "beam[0].start_y_mm", "positions across z are r here"),
    (put(["electrode", 0, "rect", 0, "y_mm"], [0.0, 1.0]), "electrode[0].rect[0].y_mm", "positions across z are r here"),
    # species
    (put(["beam", 0, "species"], "Xx+"), "beam[0].species", "unknown species 'Xx+'"),
    (put(["optics", "species"], "40Ar"), "optics.species", "no charge sign"),
    (put(["beam", 0, "species"], None), "beam[0].species", "missing"),
    # Gaussian widths: a key that says what it is (issue 22: a sigma is not a radius)
    (beam_with(energy_spread_eV=1.0), "beam[0].energy_spread_eV", "energy_sigma_eV (the standard deviation"),
    (beam_with(energy_sigma_eV=1.0, energy_fwhm_eV=1.0), "beam[0].energy_fwhm_eV", "not both"),
    (beam_with(profile="gaussian", radius_mm=1.0), "beam[0].radius_mm", "with 'gaussian' give sigma_mm"),
    (beam_with(sigma_mm=1.0), "beam[0].sigma_mm", "with 'uniform' give radius_mm"),
    (beam_with(angles="gaussian", half_angle_deg=0.5), "beam[0].half_angle_deg",
     "with 'gaussian' give sigma_angle_deg"),
    (beam_with(angles="cosine", sigma_angle_deg=1.0), "beam[0].sigma_angle_deg", "with 'cosine' give half_angle_deg"),
    # mutually exclusive or dependent keys
    (put(["trace", "max_time_ns"], 5.0), "trace.max_time_ns", "not both"),
    (put(["gun", "emission"], "thermionic"), "gun.temperature_K", "missing"),
    (put(["gun", "schottky"], True), "gun.schottky", "needs emission = 'thermionic'"),
    (put(["tune", "goal"], "landing_energy"), "tune.goal", "needs a value: goal = { landing_energy_eV = ... }"),
    (put(["tune", "goal"], {"landing_energy_eV": 5.0, "focus_z_mm": 50.0}), "tune.goal", "got 2"),
    (put(["tune", "goal"], {"landing_energy_eV": -5.0}), "tune.goal.landing_energy_eV", "got -5.0"),
    (put(["beam", 0, "rays_csv"], "no_such_rays.csv"), "beam[0].rays_csv", "no such file 'no_such_rays.csv'"),
    (put(["scan"], {"csv": "no_such_sets.csv"}), "scan.csv", "no such file 'no_such_sets.csv'"),
    # waveforms on electrodes and start times: the key as written, with its unit
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0, "delay_ns": 5.0, "rise_ns": -5}]),
     "electrode[1].pulse[0].rise_ns", "must be >= 0, got -5"),
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0}]), "electrode[1].pulse[0].delay_ns", "missing"),
    (put(["electrode", 1, "pulse"], [{"delay_ns": 1.0}]), "electrode[1].pulse[0].high_V", "missing"),
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0, "delay_ns": 5.0, "delay_us": 1.0}]),
     "electrode[1].pulse[0].delay_us", "give delay_ns or delay_us, not both"),
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0, "delay_us": 1.0, "count": 3}]),
     "electrode[1].pulse[0].width_ns", "needs a finite width"),
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0, "delay_us": 1.0, "count": 3, "width_us": 1.0,
                                      "period_us": 0.5}]),
     "electrode[1].pulse[0].period_us", "shorter than rise + width + fall"),
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0, "delay_us": 1.0, "period_us": 0.0}]),
     "electrode[1].pulse[0].period_us", "must be > 0, got 0.0"),
    (put(["electrode", 1, "pulse"], [{"high_V": 1.0, "delay_us": 1.0, "rise": 1.0}]),
     "electrode[1].pulse[0].rise", "unknown key 'rise'; did you mean"),
    (put(["electrode", 1, "pulse"], {"high_V": 1.0, "delay_us": 1.0}),
     "electrode[1].pulse", "expected an array of tables [[electrode.pulse]]"),
    (put(["electrode", 1, "sine"], [{"amplitude_V": 1.0, "frequency_MHz": 0}]),
     "electrode[1].sine[0].frequency_MHz", "must be > 0, got 0"),
    (put(["electrode", 1, "sine"], [{"amplitude_V": 1.0}]), "electrode[1].sine[0].frequency_MHz", "missing"),
    (put(["electrode", 1, "sine"], [{"amplitude_V": math.nan, "frequency_kHz": 5.0}]),
     "electrode[1].sine[0].amplitude_V", "must be finite, got nan"),
    (put(["electrode", 1, "sine"], [{"amplitude_V": 1.0, "frequency_MHz": 1.0, "phase": 1.0}]),
     "electrode[1].sine[0].phase", "did you mean 'phase_deg'?"),
    (put(["electrode", 1, "table"], {"file": "no_such_wave.csv"}),
     "electrode[1].table.file", "no such file 'no_such_wave.csv'"),
    (put(["beam", 0, "start_spread_ns"], -1.0), "beam[0].start_spread_ns", "must be >= 0, got -1.0"),
    (put(["beam", 0, "start_times"], "gauss"), "beam[0].start_times", "did you mean 'gaussian'?"),
    (put(["beam", 0, "start_time_us"], "1"), "beam[0].start_time_us", "expected a number, got '1'"),
    (put(["trace", "time_zero_ns"], math.inf), "trace.time_zero_ns", "must be finite, got inf"),
    # scans over waveform parameters
    (put(["scan"], {"focus.pulse[0].delay_ns": [1.0, 2.0, 2]}), "scan.\"focus.pulse[0].delay_ns\"",
     "electrode 'focus' has 0 pulse part(s), no [0]"),
    (put(["scan"], {"nosuch.sine[0].phase_deg": [1.0, 2.0, 2]}), "scan.\"nosuch.sine[0].phase_deg\"",
     "no electrode named 'nosuch'"),
    (put(["scan"], {"focus.sine[0].phase": [1.0, 2.0, 2]}), "scan.\"focus.sine[0].phase\"",
     "neither an electrode nor a waveform parameter"),
]

PULSED_FOCUS = [{"high_V": 5.0, "delay_ns": 10.0, "rise_ns": 2.0}]
ERRORS += [
    (lambda d: (put(["electrode", 1, "pulse"], PULSED_FOCUS)(d),
                put(["scan"], {"focus.pulse[0].rise_ns": [-1.0, 2.0, 2]})(d)),
     "scan.\"focus.pulse[0].rise_ns\"", "-1: must be >= 0"),
    (lambda d: (put(["electrode", 1, "pulse"], PULSED_FOCUS)(d),
                put(["scan"], {"focus.pulse[0].rise_ns": [3.0, 2.0, 2]})(d)),
     "scan.\"focus.pulse[0].rise_ns\"", "from 3.0 exceeds to 2.0"),
]


@pytest.mark.parametrize("mutate, key, fragment", ERRORS)
def test_errors_name_the_key_path_and_the_bad_value(mutate, key, fragment):
    document = base()
    mutate(document)
    error = error_of(document)
    assert error.key == key
    assert fragment in error.message
    assert str(error) == f"{key}: {error.message}"


def test_waveform_keys_in_si(tmp_path):
    """Pulses, sines and a table on electrodes and start times of a beam, read into SI: times
    divided (250 ns is the double nearest 2.5e-7 s), frequencies multiplied, phases in radians;
    voltage_V is the DC part and may be left out beside a waveform."""
    (tmp_path / "gate.csv").write_text("# illustrative\ntime_ns,voltage_V\n0,0\n12,180\n30,200\n")
    document = base()
    document["electrode"][1]["pulse"] = [{"high_V": 2000.0, "low_V": -5.0, "delay_ns": 250.0, "rise_ns": 2.0,
                                          "width_us": 1.0, "fall_ns": 3.0, "period_us": 5.0, "count": 4}]
    document["electrode"][1]["sine"] = [{"amplitude_V": 450.0, "frequency_MHz": 1.5, "phase_deg": 90.0},
                                        {"amplitude_V": -3.0, "frequency_kHz": 20.0}]
    del document["electrode"][2]["voltage_V"]
    document["electrode"][2]["table"] = {"file": "gate.csv"}
    document["beam"][0] |= {"start_time_us": 1.5, "start_spread_ns": 4.0, "start_times": "gaussian"}
    setup = loads(dumps(document), source=tmp_path / "setup.toml")
    focus, exit_ = setup.electrodes[1], setup.electrodes[2]
    assert focus.voltage_V == 800.0 and focus.waveform.dc_V == 800.0
    (pulse,) = focus.waveform.pulses
    assert (pulse.high_V, pulse.low_V, pulse.count) == (2000.0, -5.0, 4)
    assert (pulse.delay_s, pulse.rise_s, pulse.width_s, pulse.fall_s, pulse.period_s) == (
        2.5e-7, 2e-9, 1e-6, 3e-9, 5e-6)
    assert [(s.amplitude_V, s.frequency_Hz) for s in focus.waveform.sinusoids] == [(450.0, 1.5e6), (-3.0, 2e4)]
    assert focus.waveform.sinusoids[0].phase_rad == pytest.approx(math.pi / 2, rel=1e-15, abs=0)
    assert exit_.voltage_V == 0.0 and exit_.waveform.table.time_s == (0.0, 1.2e-8, 3e-8)
    assert exit_.waveform.table.voltage_V == (0.0, 180.0, 200.0)
    assert setup.electrodes[0].waveform is None and setup.electrodes[0].drive == 0.0
    assert setup.drives()["focus"] is focus.waveform and setup.in_time
    beam = setup.beams[0]
    assert (beam.start_time_s, beam.start_spread_s, beam.start_times) == (1.5e-6, 4e-9, "gaussian")
    assert setup.time_zero_s == 2.5e-7                 # the earliest pulse's start
    document["trace"]["time_zero_ns"] = 100.0
    assert loads(dumps(document), source=tmp_path / "setup.toml").time_zero_s == 1e-7


def test_a_static_setup_is_not_in_time():
    """No waveform parts, or parts that do not vary (zero amplitude), leave the setup static."""
    setup = check(base())
    assert not setup.in_time and setup.beams[0].start_time_s == 0.0 and setup.time_zero_s is None
    document = base()
    document["electrode"][1]["sine"] = [{"amplitude_V": 0.0, "frequency_MHz": 1.0}]
    assert not check(document).in_time


def test_a_bad_wave_table_names_the_file_and_line(tmp_path):
    (tmp_path / "gate.csv").write_text("time_ns,voltage_V\n0,0\n12,x\n")
    document = base()
    document["electrode"][1]["table"] = {"file": "gate.csv"}
    with pytest.raises(ConfigError) as caught:
        loads(dumps(document), source=tmp_path / "setup.toml")
    assert caught.value.key == "electrode[1].table.file"
    assert "'gate.csv': line 3" in caught.value.message and "not two finite numbers" in caught.value.message


def test_errors_in_an_electrode_name_it():
    """An error inside an electrode's table names the electrode, not only its index (issue 22)."""
    document = base()
    document["electrode"][1]["rect"] = [{"z_mm": [300.0, 310.0], "r_mm": [1.0, 2.0]}]
    error = error_of(document)
    assert error.key == "electrode[1].rect[0]" and error.message.startswith("electrode 'focus': wholly outside")
    document["electrode"][1]["voltage_V"] = "high"
    assert error_of(document).message.startswith("electrode 'focus': expected a number")


def test_a_scan_names_only_electrodes_as_choices():
    document = base()
    document["scan"] = {"qqq": [1.0, 2.0, 2]}
    error = error_of(document)
    assert error.key == "scan.qqq"
    assert error.message == "no electrode named 'qqq'; expected one of 'ground', 'focus', 'exit'"


def test_mass_u_without_charge_e():
    document = base()
    del document["beam"][0]["species"]
    document["beam"][0]["mass_u"] = 40.0
    assert error_of(document).key == "beam[0].charge_e"
    document["beam"][0]["charge_e"] = 0
    assert error_of(document).message.startswith("must be non-zero, got 0")


def test_axial_symmetry_takes_no_y_range():
    document = base()
    del document["domain"]["r_mm"]
    document["domain"]["y_mm"] = [-20.0, 20.0]
    error = error_of(document)
    assert (error.key, error.message) == ("domain.y_mm", "axial symmetry takes r_mm (the outer radius), not y_mm")


def test_planar_y_range_errors():
    document = base()
    document["domain"] = {"symmetry": "planar", "z_mm": [0.0, 100.0], "y_mm": [20.0, -20.0], "cell_mm": 0.5}
    error = error_of(document)
    assert (error.key, error.message) == ("domain.y_mm", "lower y 20.0 exceeds upper -20.0")
    document["domain"]["y_mm"] = [-20.0, 20.0]
    error = error_of(document)  # the shapes now need y_mm instead of r_mm
    assert error.key == "electrode[0].rect[0].r_mm" and "gives y_mm" in error.message
    document["domain"]["edges"] = {"r_max": "open"}
    error = error_of(document)
    assert error.key == "domain.edges.r_max" and "y_min, y_max" in error.message


def test_mirror_plane_names_the_mirror():
    document = base()
    document["domain"]["symmetry"] = "planar"
    document["domain"]["edges"] = {"r_min": "ground"}
    assert error_of(document).message == "not allowed: r = 0 is the mirror plane"


def test_rays_csv_excludes_the_generated_distribution(tmp_path):
    (tmp_path / "rays.csv").write_text("x_mm\n")
    document = base()
    document["beam"][0]["rays_csv"] = "rays.csv"
    with pytest.raises(ConfigError) as caught:
        loads(dumps(document), source=tmp_path / "setup.toml")
    assert caught.value.key == "beam[0].energy_eV"
    assert "not used with rays_csv" in caught.value.message


def test_scan_csv_header_names_electrodes(tmp_path):
    document = base()
    document["scan"] = {"csv": "sets.csv"}
    (tmp_path / "sets.csv").write_text("focus_V,exti_V\n800,0\n")
    with pytest.raises(ConfigError) as caught:
        loads(dumps(document), source=tmp_path / "setup.toml")
    assert caught.value.key == "scan.csv"
    assert "'exti_V'" in caught.value.message and "did you mean 'exit_V'?" in caught.value.message
    document["scan"]["focus"] = [700.0, 900.0, 5]
    with pytest.raises(ConfigError, match="give ranges or csv, not both"):
        loads(dumps(document), source=tmp_path / "setup.toml")


def test_tune_at_without_planes():
    document = base()
    del document["plane"]
    error = error_of(document)
    assert (error.key, error.message) == ("tune.at", "no plane named 'image'; the setup has no [[plane]]")


def test_grid_memory_refusal_suggests_a_cell():
    document = base()
    document["domain"]["cell_mm"] = 1e-4
    message = error_of(document).message
    suggested = float(re.search(r"e\.g\. ([0-9.e+-]+)$", message).group(1))
    document["domain"]["cell_mm"] = suggested
    check(document)  # the suggested cell is accepted


@pytest.mark.parametrize(
    "text, key, fragment",
    [
        ('title = "a"\n[domain]\nsymmetry = "axial"\nz_mm = [0.0, 100.0\nr_mm = 20.0\n', "line 5, column 1", "Unclosed array"),
        ('title = "a"\n\n\n[domain\n', "line 4, column 8", ""),
        ('title = "a"\ntitle = "b"\n', "line 2, column 12", "Cannot overwrite a value"),
        ('title = "unterminated\n', "line 1, column 22", "Illegal character"),
        ("x = ", "line 1, column 5", "at the end of the file"),
    ],
)
def test_toml_syntax_errors_give_line_and_column(text, key, fragment):
    with pytest.raises(ConfigError) as caught:
        loads(text)
    assert caught.value.key == key
    assert fragment in caught.value.message
    assert str(caught.value).startswith(f"{key}: ")


def test_load_errors(tmp_path):
    with pytest.raises(ConfigError, match="cannot read the file"):
        load(tmp_path / "missing.toml")
    (tmp_path / "latin.toml").write_bytes(b'title = "\xe9"\n')
    with pytest.raises(ConfigError, match="not UTF-8"):
        load(tmp_path / "latin.toml")


def test_config_error_pickles():
    error = ConfigError("domain.cell_mm", "must be > 0, got 0")
    again = pickle.loads(pickle.dumps(error))
    assert (again.key, again.message, str(again)) == (error.key, error.message, str(error))


# ---------------------------------------------------------------- the geometry hash


def test_geometry_hash_ignores_voltages_and_sees_shapes():
    document = base()
    reference = check(document).geometry_hash()
    assert re.fullmatch(r"[0-9a-f]{64}", reference)
    assert check(copy.deepcopy(document)).geometry_hash() == reference
    document["electrode"][1]["voltage_V"] = 1234.5
    document["beam"][0]["energy_eV"] = 10.0
    assert check(document).geometry_hash() == reference
    for path, value in [
        (["electrode", 1, "rect", 0, "r_mm"], [6.0, 7.5]),
        (["electrode", 2, "arc", 0, "angles_deg"], [30.0, 151.0]),
        (["electrode", 2, "name"], "outlet"),
        (["domain", "cell_mm"], 0.25),
        (["domain", "edges"], "open"),
    ]:
        changed = copy.deepcopy(document)
        put(path, value)(changed)
        assert check(changed).geometry_hash() != reference, path


def test_setup_constructed_directly_hashes():
    domain = Domain("axial", (0.0, 0.1), (0.0, 0.02), 5e-4, ("ground", "ground", "axis", "ground"))
    setup = Setup("t", domain, (Electrode("a", 1.0, (Rect((0.01, 0.02), (0.0, 0.005)),)),))
    assert setup.geometry_hash() == check(
        {"title": "t", "domain": {"symmetry": "axial", "z_mm": [0.0, 100.0], "r_mm": 20.0, "cell_mm": 0.5},
         "electrode": [{"name": "a", "voltage_V": 7.0, "rect": [{"z_mm": [10.0, 20.0], "r_mm": [0.0, 5.0]}]}]}
    ).geometry_hash()


# ---------------------------------------------------------------- fuzzing: only ConfigError may escape


def only_config_errors(text):
    try:
        setup = loads(text)
    except ConfigError as error:
        assert str(error) == f"{error.key}: {error.message}"
        return
    assert isinstance(setup, Setup)
    setup.geometry_hash()


TOKENS = ["[", "]", "[[", "]]", "{", "}", "=", ",", ".", '"', "'", "\n", " ", "#", "0", "1.5", "-2", "nan", "inf",
          "true", "1979-05-27", "domain", "electrode", "rect", "beam", "z_mm", "r_mm", "cell_mm", "name", "x", "é"]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.sampled_from(TOKENS), max_size=40).map("".join))
def test_fuzz_toml_ish_text(text):
    only_config_errors(text)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, len(FULL)), st.integers(0, 8), st.text(max_size=6))
def test_fuzz_spliced_full_config(position, cut, insert):
    only_config_errors(FULL[:position] + insert + FULL[position + cut:])


KEYS = ["title", "domain", "electrode", "beam", "plane", "trace", "scan", "tune", "gun", "optics", "symmetry",
        "z_mm", "r_mm", "y_mm", "cell_mm", "edges", "name", "voltage_V", "rect", "polygon", "arc", "points_mm",
        "species", "energy_eV", "count", "start_z_mm", "stop", "vary", "goal", "at", "cathode", "csv", "focus"]
SCALARS = (
    st.integers(-10**20, 10**20)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.booleans()
    | st.sampled_from(["axial", "planar", "ground", "open", "40Ar+", "e-", "focus", "ground", "image", "x"])
    | st.text(max_size=5)
)
VALUES = st.recursive(
    SCALARS,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.sampled_from(KEYS) | st.text(max_size=4), inner, max_size=4),
    max_leaves=12,
)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.dictionaries(st.sampled_from(KEYS), VALUES, max_size=6))
def test_fuzz_random_documents(document):
    only_config_errors(dumps(document))


def paths(node, prefix=()):
    """Every (path) into a nested document of dicts and lists."""
    yield prefix
    items = node.items() if isinstance(node, dict) else enumerate(node) if isinstance(node, list) else ()
    for key, child in items:
        yield from paths(child, prefix + (key,))


BASE_PATHS = [p for p in paths(base()) if p]


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(BASE_PATHS), VALUES), min_size=1, max_size=3))
def test_fuzz_mutated_base_document(mutations):
    document = base()
    for path, value in mutations:
        try:
            put(list(path), value)(document)
        except (KeyError, IndexError, TypeError):
            pass  # an earlier mutation removed the way there
    only_config_errors(dumps(document))
