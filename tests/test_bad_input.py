"""Malformed configs through the command line: exit code 2, one line on stderr naming the key path
and the bad value, no traceback, and nothing written (no output folder, no cache file).

The corpus mutates one small valid setup (``TRAP``, also used by ``test_faults.py``); most cases run
in-process through ``tracer.cli.main``, a handful through ``python -m tracer`` in a subprocess.
"""

import os
import subprocess
import sys

import pytest

from tracer.cli import main

TRAP = """\
title = "ion trap between two repelling end caps (illustrative)"

[domain]
symmetry = "axial"
z_mm = [0.0, 22.0]
r_mm = 6.0
cell_mm = 0.25
edges = "ground"

[[electrode]]
name = "cap_in"
voltage_V = 100.0
[[electrode.rect]]
z_mm = [1.0, 2.0]
r_mm = [0.0, 5.0]

[[electrode]]
name = "ring"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [5.0, 17.0]
r_mm = [5.0, 5.5]

[[electrode]]
name = "cap_out"
voltage_V = 100.0
[[electrode.rect]]
z_mm = [20.0, 21.0]
r_mm = [0.0, 5.0]

[[beam]]
name = "trapped"
species = "40Ar+"
energy_eV = 10.0
count = 1
start_z_mm = 11.0

[[beam]]
name = "buried"
species = "p+"
energy_eV = 10.0
count = 3
start_z_mm = 1.5
start_r_mm = 1.0

[[beam]]
name = "spray"
species = "p+"
energy_eV = 30.0
energy_sigma_eV = 2.0
count = 200
seed = 11
start_z_mm = 11.0
radius_mm = 1.0
half_angle_deg = 40.0

[[plane]]
name = "mid"
z_mm = 14.0

[trace]
max_time_us = 20.0
"""


def sub(old, new):
    """An edit of the text: replace the one occurrence of ``old``."""

    def edit(text):
        assert text.count(old) == 1, old
        return text.replace(old, new)

    return edit


def add(tail):
    """An edit of the text: append lines (keys land in the last table, [trace], unless a header leads)."""
    return lambda text: text + "\n" + tail + "\n"


def line_of(start):
    """1-based line number of the line of TRAP that starts with ``start``."""
    return next(i for i, line in enumerate(TRAP.splitlines(), 1) if line.startswith(start))


def electrode(shape):
    """A fourth electrode, 'extra' at 50 V, made of the given shape table."""
    return add(f'[[electrode]]\nname = "extra"\nvoltage_V = 50.0\n{shape}')


def arc(center, radii, angles):
    return electrode(f"[[electrode.arc]]\ncenter_z_mm = {center}\nradii_mm = {radii}\nangles_deg = {angles}")


def TIED(tail):
    """A fourth electrode, 'sleeve', overlapping 'ring' at its voltage (0 V), then ``tail``."""
    return add('[[electrode]]\nname = "sleeve"\nvoltage_V = 0.0\n[[electrode.rect]]\nz_mm = [10.0, 12.0]\n'
               f'r_mm = [4.0, 5.2]\n{tail}')


def PULSED(parts):
    """A fourth electrode, 'gate' at 0 V far from the others, driven by the waveform ``parts``."""
    return add('[[electrode]]\nname = "gate"\nvoltage_V = 0.0\n[[electrode.rect]]\nz_mm = [3.0, 4.0]\n'
               f'r_mm = [5.0, 5.5]\n{parts}')


GATE_PULSE = "[[electrode.pulse]]\nhigh_V = 5.0\ndelay_ns = 10.0"


def CSV_SCAN(text):
    """A pulsed 'gate' scanned by the file sets.csv of ``text``: (edit, files, key)."""
    return PULSED(f"{GATE_PULSE}\n[scan]\ncsv = 'sets.csv'"), {"sets.csv": text}, "scan.csv"


PLANE_NAME_LINE = line_of('name = "mid"')
RAYS_HEAD = "x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n"
RAYS_BEAM = add('[[beam]]\nname = "measured"\nspecies = "p+"\nrays_csv = "rays.csv"')

# (id, edit of TRAP, extra files beside the config, key path, a fragment of the message with the bad value)
CASES = [
    # zero, negative, NaN and infinite numbers
    ("cell-zero", sub("cell_mm = 0.25", "cell_mm = 0.0"), {}, "domain.cell_mm", "must be > 0, got 0.0"),
    ("radius-negative", sub("r_mm = 6.0", "r_mm = -6.0"), {}, "domain.r_mm", "must be > 0, got -6.0"),
    ("voltage-nan", sub("voltage_V = 0.0", "voltage_V = nan"), {}, "electrode[1].voltage_V", "must be finite, got nan"),
    ("energy-negative", sub("energy_eV = 30.0", "energy_eV = -30.0"), {}, "beam[2].energy_eV", "got -30.0"),
    ("time-inf", sub("max_time_us = 20.0", "max_time_us = inf"), {}, "trace.max_time_us", "must be finite, got inf"),
    ("count-zero", sub("count = 200", "count = 0"), {}, "beam[2].count", "must be >= 1, got 0"),
    ("spread-nan", sub("energy_sigma_eV = 2.0", "energy_sigma_eV = -nan"), {}, "beam[2].energy_sigma_eV",
     "must be finite, got nan"),
    ("rtol-zero", add("rtol = 0.0"), {}, "trace.rtol", "must be > 0, got 0.0"),
    # reversed ranges
    ("domain-reversed", sub("z_mm = [0.0, 22.0]", "z_mm = [22.0, 0.0]"), {}, "domain.z_mm", "start 22.0 exceeds end 0.0"),
    ("rect-reversed", sub("z_mm = [5.0, 17.0]", "z_mm = [17.0, 5.0]"), {}, "electrode[1].rect[0].z_mm",
     "start 17.0 exceeds end 5.0"),
    ("tube-reversed", sub("r_mm = [5.0, 5.5]", "r_mm = [5.5, 5.0]"), {}, "electrode[1].rect[0].r_mm",
     "inner radius 5.5 exceeds outer 5.0"),
    ("scan-reversed", add("[scan]\nring = [50.0, -50.0, 5]"), {}, "scan.ring", "from 50.0 exceeds to -50.0"),
    ("tune-reversed", add("[tune]\nvary = { ring = [50.0, -50.0] }\ngoal = 'most_transmitted'"), {}, "tune.vary.ring",
     "lo 50.0 exceeds hi -50.0"),
    # angles out of range
    ("half-angle", sub("half_angle_deg = 40.0", "half_angle_deg = 120.0"), {}, "beam[2].half_angle_deg",
     "must be <= 90, got 120.0"),
    ("arc-angle-high", arc(11.0, "[3.0, 3.5]", "[0.0, 200.0]"), {}, "electrode[3].arc[0].angles_deg",
     "second angle 200.0 exceeds 180"),
    ("arc-angle-low", arc(11.0, "[3.0, 3.5]", "[-5.0, 90.0]"), {}, "electrode[3].arc[0].angles_deg",
     "first angle -5.0 is below 0"),
    ("arc-centre-off-axis", electrode("[[electrode.arc]]\ncenter_z_mm = 11.0\ncenter_y_mm = 1.0\n"
                                      "radii_mm = [3.0, 3.5]\nangles_deg = [0.0, 90.0]"), {},
     "electrode[3].arc[0].center_y_mm", "1.0: here an arc's centre lies on the axis"),
    # species
    ("species-unknown", sub('species = "40Ar+"', 'species = "Zz+"'), {}, "beam[0].species", "unknown species 'Zz+'"),
    ("species-no-charge", sub('species = "40Ar+"', 'species = "40Ar"'), {}, "beam[0].species",
     "'40Ar' has no charge sign"),
    ("species-neutral", sub('species = "p+"\nenergy_eV = 30.0', 'mass_u = 1.0\ncharge_e = 0\nenergy_eV = 30.0'), {},
     "beam[2].charge_e", "must be non-zero, got 0"),
    # duplicate names
    ("electrode-twice", sub('name = "cap_out"', 'name = "cap_in"'), {}, "electrode[2].name",
     "duplicate electrode name 'cap_in' (also electrode[0])"),
    ("beam-twice", sub('name = "spray"', 'name = "trapped"'), {}, "beam[2].name", "duplicate beam name 'trapped'"),
    ("plane-twice", add('[[plane]]\nname = "mid"\nz_mm = 8.0'), {}, "plane[1].name", "duplicate plane name 'mid'"),
    # electrodes outside the domain
    ("rect-beyond-z", sub("z_mm = [20.0, 21.0]", "z_mm = [30.0, 31.0]"), {}, "electrode[2].rect[0]",
     "wholly outside the domain: z 30..31 mm"),
    ("rect-beyond-r", sub("r_mm = [5.0, 5.5]", "r_mm = [7.0, 8.0]"), {}, "electrode[1].rect[0]",
     "wholly outside the domain: z 5..17 mm, r 7..8 mm"),
    ("polygon-beyond", electrode("[[electrode.polygon]]\npoints_mm = [[30.0, 1.0], [32.0, 1.0], [31.0, 3.0]]"), {},
     "electrode[3].polygon[0]", "wholly outside the domain: z 30..32 mm"),
    # its box reaches into the domain, the shell itself (radius 40 mm about z = -5 mm) does not
    ("arc-shell-beyond", arc(-5.0, "[40.0, 41.0]", "[0.0, 90.0]"), {}, "electrode[3].arc[0]", "wholly outside the domain"),
    # electrodes overlapping at different voltages
    ("overlap-rect", electrode("[[electrode.rect]]\nz_mm = [10.0, 12.0]\nr_mm = [4.0, 5.2]"), {}, "electrode[3].rect[0]",
     "overlaps electrode[1].rect[0] of electrode 'ring' (0 V) while electrode 'extra' is at 50 V"),
    ("overlap-arc", arc(11.0, "[4.8, 5.2]", "[60.0, 120.0]"), {}, "electrode[3].arc[0]",
     "overlaps electrode[1].rect[0] of electrode 'ring' (0 V)"),
    # electrodes overlapping at one voltage are one conductor: no scan or tune may set them apart
    ("tied-scan-one", TIED("[scan]\nring = [-10.0, 10.0, 3]"), {}, "scan.ring",
     "electrodes 'ring' and 'sleeve' overlap, so they are one conductor at one voltage; the scan would set "
     "'ring' to -10.0..10.0 V"),
    ("tied-scan-both", TIED("[scan]\nsleeve = [-10.0, 10.0, 3]\nring = [-10.0, 10.0, 3]"), {}, "scan.sleeve",
     "the scan would set 'sleeve' to -10.0..10.0 V"),
    ("tied-scan-single", TIED("[scan]\nsleeve = [5.0, 5.0, 1]"), {}, "scan.sleeve", "'ring' and 'sleeve' overlap"),
    ("tied-scan-waveform", PULSED(f"{GATE_PULSE}\n[[electrode]]\nname = 'gate2'\nvoltage_V = 0.0\n[[electrode.rect]]\n"
                                  f"z_mm = [3.5, 4.5]\nr_mm = [5.0, 5.5]\n{GATE_PULSE}\n"
                                  "[scan]\n'gate.pulse[0].high_V' = [1.0, 5.0, 2]"), {},
     'scan."gate.pulse[0].high_V"', "electrodes 'gate' and 'gate2' overlap, so they are one conductor at one "
                                    "voltage; the scan would set 'gate.pulse[0].high_V' to 1.0..5.0:"),
    ("tied-tune", TIED("[tune]\nvary = { sleeve = [0.0, 50.0] }\ngoal = 'most_transmitted'"), {}, "tune.vary.sleeve",
     "'ring' and 'sleeve' overlap, so they are one conductor at one voltage; tune would vary them apart"),
    # planes outside the domain
    ("plane-beyond", sub("z_mm = 14.0", "z_mm = 25.0"), {}, "plane[0].z_mm", "25.0 is outside the domain's z range 0..22 mm"),
    ("plane-before", sub("z_mm = 14.0", "z_mm = -1.0"), {}, "plane[0].z_mm", "-1.0 is outside the domain's z range"),
    # names that must be electrodes (or planes)
    ("scan-name", add("[scan]\nrign = [-50.0, 50.0, 5]"), {}, "scan.rign", "no electrode named 'rign'; did you mean 'ring'?"),
    ("tune-name", add("[tune]\nvary = { lens = [0.0, 50.0] }\ngoal = 'smallest_spot'"), {}, "tune.vary.lens",
     "no electrode named 'lens'"),
    ("tune-plane", add("[tune]\nvary = { ring = [0.0, 50.0] }\ngoal = 'smallest_spot'\nat = 'middle'"), {}, "tune.at",
     "no plane named 'middle'; did you mean 'mid'?"),
    ("gun-cathode", add("[gun]\ncathode = 'filament'"), {}, "gun.cathode", "no electrode named 'filament'"),
    ("scan-csv-column", add("[scan]\ncsv = 'sets.csv'"), {"sets.csv": "ring_V,lens_V\n0,0\n"}, "scan.csv",
     "no electrode for column 'lens_V'"),
    ("scan-csv-parameter-key", *CSV_SCAN("ring_V,gate.pulse[0].delay\n0,10\n"),
     "'sets.csv' column 'gate.pulse[0].delay': 'gate.pulse[0].delay' is neither an electrode nor a waveform parameter"),
    ("scan-csv-parameter-part", *CSV_SCAN("gate.sine[0].phase_deg\n0\n"),
     "'sets.csv' column 'gate.sine[0].phase_deg': electrode 'gate' has 0 sinusoid part(s), no [0]"),
    ("scan-csv-parameter-electrode", *CSV_SCAN("grid.pulse[0].delay_ns\n0\n"),
     "'sets.csv' column 'grid.pulse[0].delay_ns': no electrode named 'grid'"),
    ("scan-csv-parameter-twice", *CSV_SCAN("gate.pulse[0].delay_ns,gate.pulse[0].delay_us\n10,0.01\n"),
     "'sets.csv': columns 'gate.pulse[0].delay_ns' and 'gate.pulse[0].delay_us' set the same parameter"),
    # a grid too large for memory, refused with advice
    ("grid-too-large", sub("cell_mm = 0.25", "cell_mm = 0.00002"), {}, "domain.cell_mm",
     "2e-05 mm gives a grid of 3.3e+11 nodes"),
    # misspelt keys and values: did you mean
    ("misspelt-symmetry", sub('symmetry = "axial"', 'symetry = "axial"'), {}, "domain.symetry",
     "unknown key 'symetry'; did you mean 'symmetry'?"),
    ("misspelt-energy", sub("energy_eV = 10.0\ncount = 1\n", "energy_ev = 10.0\ncount = 1\n"), {}, "beam[0].energy_ev",
     "did you mean 'energy_eV'?"),
    ("misspelt-time", add("max_time = 5.0"), {}, "trace.max_time", "did you mean 'max_time_us'?"),
    ("misspelt-section", sub("[[plane]]", "[[planes]]"), {}, "planes", "unknown top-level key 'planes'; did you mean 'plane'?"),
    ("misspelt-shape", sub("[[electrode.rect]]\nz_mm = [5.0", "[[electrode.rectangle]]\nz_mm = [5.0"), {},
     "electrode[1].rectangle", "did you mean 'rect'?"),
    ("misspelt-edges", sub('edges = "ground"', 'edges = "grnd"'), {}, "domain.edges",
     "unknown value 'grnd'; did you mean 'ground'?"),
    # TOML syntax errors: line and column
    ("toml-no-value", sub("count = 1\n", "count = \n"), {}, f"line {line_of('count = 1')}, column 9", "Invalid value"),
    ("toml-twice", sub("seed = 11", "seed = 11\nseed = 12"), {}, f"line {line_of('seed = 11') + 1}, column 10",
     "Cannot overwrite a value"),
    ("toml-open-string", sub('name = "mid"', 'name = "mid'), {}, f"line {PLANE_NAME_LINE}, column 12",
     "Illegal character"),
    ("toml-open-header", sub("[trace]", "[trace"), {}, f"line {line_of('[trace]')}, column 7", "Expected ']'"),
    # more than memory can hold (tracer.footprint): the largest item named with its estimate
    ("memory-rays", sub("count = 200", "count = 1000000000000"), {}, "beam[2].count",
     "1,000,000,000,000 rays need about"),
    ("memory-kept-paths", lambda text: add("keep_paths = 10000000000")(sub("count = 200", "count = 10000000000")(text)),
     {}, "trace.keep_paths", "10,000,000,004 kept paths of up to 4096 points need about"),
    # names and titles too long, names whose pictures or scan columns would come twice
    ("name-too-long", sub('name = "mid"', 'name = "' + "m" * 101 + '"'), {}, "plane[0].name",
     "a name of 101 characters; at most 100"),
    ("title-huge", sub('title = "ion trap', 'title = "' + "x" * 100_000 + ' ion trap'), {}, "title",
     "a title of 100,055 characters; at most 300"),
    ("names-same-picture", lambda text: sub("[[plane]]\n", '[[plane]]\nname = "mid_mid"\nz_mm = 15.0\n\n[[plane]]\n')(
        sub('name = "buried"', 'name = "spray_mid"')(text)), {}, "plane",
     "beam 'spray' at plane 'mid_mid' and beam 'spray_mid' at plane 'mid' would draw the same picture "
     "phase_spray_mid_mid.png"),
    ("names-same-column", lambda text: add("[scan]\ncap_in = [90.0, 100.0, 2]")(
        sub('name = "buried"', 'name = "spray.ring"')(text)), {}, "scan",
     "the table's column 'spray.ring.landed' would come twice"),
    # integers longer than Python reads (4300 digits, sys.get_int_max_str_digits): the key on their line
    ("toml-integer-4301-digits", sub("count = 200", "count = " + "9" * 4301), {},
     f"line {line_of('count = 200')}, column 9", "count: an integer of 4301 digits; tracer reads at most 4300"),
    ("toml-integer-in-an-array", sub("z_mm = [0.0, 22.0]", "z_mm = [0.0, -1_" + "0" * 5000 + "]"), {},
     f"line {line_of('z_mm = [0.0, 22.0]')}, column 14", "z_mm: an integer of 5001 digits"),
    # wrong types
    ("type-voltage", sub("voltage_V = 0.0", 'voltage_V = "0 V"'), {}, "electrode[1].voltage_V",
     "expected a number, got '0 V'"),
    ("type-count", sub("count = 200", "count = 2.5e2"), {}, "beam[2].count", "expected an integer, got 250.0"),
    ("type-edges", sub('edges = "ground"', "edges = 3"), {}, "domain.edges", "expected a table, got 3"),
    ("type-stop", sub("z_mm = 14.0", 'z_mm = 14.0\nstop = "yes"'), {}, "plane[0].stop", "expected true or false, got 'yes'"),
    ("plane-direction", sub("z_mm = 14.0", 'z_mm = 14.0\ndirection = "back"'), {}, "plane[0].direction",
     "unknown value 'back'; did you mean 'backward'?"),
    ("plane-crossing-word", sub("z_mm = 14.0", 'z_mm = 14.0\ncrossing = "second"'), {}, "plane[0].crossing",
     "unknown value 'second'; expected one of 'first', 'last', 'all' or a whole number from 1"),
    ("plane-crossing-zero", sub("z_mm = 14.0", "z_mm = 14.0\ncrossing = 0"), {}, "plane[0].crossing",
     "must be >= 1, got 0"),
    ("plane-crossing-float", sub("z_mm = 14.0", "z_mm = 14.0\ncrossing = 2.0"), {}, "plane[0].crossing",
     "or a whole number from 1, got 2.0"),
    ("plane-crossing-stop", sub("z_mm = 14.0", "z_mm = 14.0\nstop = true\ncrossing = 2"), {}, "plane[0].crossing",
     "2 counts nothing: a plane with stop = true ends each ray at its first crossing"),
    ("plane-angle", sub("z_mm = 14.0", "z_mm = 14.0\nangle_deg = 200.0"), {}, "plane[0].angle_deg",
     "must be <= 180, got 200.0"),
    ("plane-point-r", sub("z_mm = 14.0", "z_mm = 14.0\nr_mm = 7.0\nangle_deg = 45.0"), {}, "plane[0].r_mm",
     "7.0 is outside the domain's r range 0..6 mm"),
    ("plane-point-y", sub("z_mm = 14.0", "z_mm = 14.0\ny_mm = 1.0"), {}, "plane[0].y_mm",
     "positions across z are r here"),
    ("type-radius", sub("r_mm = 6.0", "r_mm = [0.0, 6.0]"), {}, "domain.r_mm", "expected a number, got [0.0, 6.0]"),
    ("type-title", sub('title = "ion trap between two repelling end caps (illustrative)"', "title = 1979-05-27"), {},
     "title", "expected a string, got the date/time 1979-05-27"),
    # files of start rays: read at load time, the error names the line
    ("rays-word", RAYS_BEAM, {"rays.csv": RAYS_HEAD + "0,0,11,0,0,1,10\n0,0,11,0,0,1,ten\n"}, "beam[3].rays_csv",
     "'rays.csv': line 3, column 'energy_eV': not a finite number"),
    ("rays-short-row", RAYS_BEAM, {"rays.csv": "# measured at the source\n" + RAYS_HEAD + "0,0,11,0,0,1\n"},
     "beam[3].rays_csv", "'rays.csv': line 3: 6 fields, the header has 7"),
    ("rays-no-energy", RAYS_BEAM, {"rays.csv": "x_mm,y_mm,z_mm,ux,uy,uz\n0,0,11,0,0,1\n"}, "beam[3].rays_csv",
     "line 1: missing column(s) energy_<unit>"),
    ("rays-negative", RAYS_BEAM, {"rays.csv": RAYS_HEAD + "0,0,11,0,0,1,-3\n"}, "beam[3].rays_csv",
     "line 2, column 'energy_eV': negative"),
    ("rays-no-rows", RAYS_BEAM, {"rays.csv": RAYS_HEAD}, "beam[3].rays_csv", "'rays.csv': no rays below the header"),
    ("rays-not-utf8", RAYS_BEAM, {"rays.csv": RAYS_HEAD.encode() + b"0,0,11,0,0,1,\xff\n"}, "beam[3].rays_csv",
     "can't decode byte 0xff"),
    ("rays-zero-weights", add('[[beam]]\nname = "measured"\nspecies = "p+"\nrays_csv = "rays.csv"\ncurrent_A = 1e-6'),
     {"rays.csv": "x_mm,y_mm,z_mm,ux,uy,uz,energy_eV,weight_A\n0,0,11,0,0,1,10,0\n"}, "beam[3].rays_csv",
     "the weight column sums to 0"),
    ("rays-missing", RAYS_BEAM, {}, "beam[3].rays_csv", "no such file 'rays.csv'"),
    # rays files: numbers that overflow, refused with the line and the column
    ("rays-direction-overflow", RAYS_BEAM, {"rays.csv": RAYS_HEAD + "0,0,11,0,0,1,10\n0,0,11,1e200,1e200,1e200,10\n"},
     "beam[3].rays_csv", "'rays.csv': line 3, column 'ux, uy, uz': its length overflows"),
    ("rays-direction-underflow", RAYS_BEAM, {"rays.csv": RAYS_HEAD + "0,0,11,1e-200,0,1e-200,10\n"},
     "beam[3].rays_csv", "'rays.csv': line 2, column 'ux, uy, uz': its length underflows"),
    ("rays-energy-overflow", RAYS_BEAM, {"rays.csv": "x_mm,y_mm,z_mm,ux,uy,uz,energy_MeV\n0,0,11,0,0,1,1e303\n"},
     "beam[3].rays_csv", "'rays.csv': line 2, column 'energy_MeV': outside the range tracer admits, 0..1e+12 eV"),
    ("rays-weight-huge", RAYS_BEAM, {"rays.csv": RAYS_HEAD.replace("\n", ",weight_A\n") + "0,0,11,0,0,1,10,1e308\n"},
     "beam[3].rays_csv", "line 2, column 'weight_A': outside the range tracer admits, -1e+06..1e+06 A"),
    ("rays-weights-sum", RAYS_BEAM, {"rays.csv": RAYS_HEAD.replace("\n", ",weight_A\n") + "0,0,11,0,0,1,10,9e5\n" * 2},
     "beam[3].rays_csv", "column 'weight_A': the weights sum to 1.8e+06 A, outside the range tracer admits"),
    ("rays-position-absurd", RAYS_BEAM, {"rays.csv": "x_m,y_mm,z_mm,ux,uy,uz,energy_eV\n1e306,0,11,0,0,1,10\n"},
     "beam[3].rays_csv", "line 2, column 'x_m': outside the range tracer admits, -100000..100000 mm"),
    # absurd but finite numbers: the range a real instrument could have, stated in the message
    ("voltage-absurd", sub("voltage_V = 0.0", "voltage_V = 1e308"), {}, "electrode[1].voltage_V",
     "1e+308 is outside the range tracer admits, -1e+08..1e+08 V"),
    ("energy-absurd", sub("energy_eV = 30.0", "energy_eV = 1e300"), {}, "beam[2].energy_eV",
     "1e+300 is outside the range tracer admits, 0..1e+12 eV"),
    ("rtol-absurd", add("rtol = 1e-300"), {}, "trace.rtol", "1e-300 is outside the range tracer admits, 1e-14..0.5"),
    ("mass-underflow", sub('species = "p+"\nenergy_eV = 30.0', 'mass_u = 1e-320\ncharge_e = 1\nenergy_eV = 30.0'), {},
     "beam[2].mass_u", "1e-320 is outside the range tracer admits, 0.0001..1e+12 u"),
    ("charge-underflow", sub('species = "p+"\nenergy_eV = 30.0', 'mass_u = 1.0\ncharge_e = -1e-320\nenergy_eV = 30.0'), {},
     "beam[2].charge_e", "-1e-320 is outside the range tracer admits, |value| 0.001..1e+06 e"),
    ("domain-absurd", sub("z_mm = [0.0, 22.0]", "z_mm = [0.0, 1e200]"), {}, "domain.z_mm[1]",
     "1e+200 is outside the range tracer admits, -100000..100000 mm"),
    ("time-absurd", sub("max_time_us = 20.0", "max_time_us = 1e300"), {}, "trace.max_time_us",
     "1e+300 is outside the range tracer admits, -1e+09..1e+09 us"),
    ("scan-absurd", add("[scan]\nring = [0.0, 1e300, 3]"), {}, "scan.ring[1]",
     "1e+300 is outside the range tracer admits, -1e+08..1e+08 V"),
    ("tune-absurd", add("[tune]\nvary = { ring = [-1e300, 50.0] }\ngoal = 'most_transmitted'"), {}, "tune.vary.ring[0]",
     "-1e+300 is outside the range tracer admits"),
    ("frequency-absurd", PULSED("[[electrode.sine]]\namplitude_V = 5.0\nfrequency_MHz = 1e300"), {},
     "electrode[3].sine[0].frequency_MHz", "1e+300 is outside the range tracer admits, 0..1e+06 MHz"),
    ("phase-absurd", PULSED("[[electrode.sine]]\namplitude_V = 5.0\nfrequency_MHz = 1.0\nphase_deg = -1e300"), {},
     "electrode[3].sine[0].phase_deg", "-1e+300 is outside the range tracer admits, -3600..3600 deg"),
    ("delay-absurd", PULSED("[[electrode.pulse]]\nhigh_V = 5.0\ndelay_ns = 1e300"), {},
     "electrode[3].pulse[0].delay_ns", "1e+300 is outside the range tracer admits, -1e+12..1e+12 ns"),
    ("scan-delay-absurd", PULSED("[[electrode.pulse]]\nhigh_V = 5.0\ndelay_ns = 10.0\n"
                                 "[scan]\n'gate.pulse[0].delay_ns' = [0.0, 1e300, 2]"), {},
     'scan."gate.pulse[0].delay_ns"[1]', "1e+300 is outside the range tracer admits, -1e+12..1e+12 ns"),
    ("current-absurd", sub('name = "spray"', 'name = "spray"\ncurrent_A = 1e300'), {}, "beam[2].current_A",
     "1e+300 is outside the range tracer admits, -1e+06..1e+06 A"),
    ("temperature-absurd", sub('name = "spray"', 'name = "spray"\ntemperature_K = 1e300'), {},
     "beam[2].temperature_K", "1e+300 is outside the range tracer admits, 0..1e+06 K"),
    # a config that is not text
    ("config-not-utf8", lambda text: text.replace("cap_in", "cap_\xe9").encode("latin-1"), {}, "bad.toml",
     "not UTF-8 text (byte"),
]


@pytest.fixture
def cache(tmp_path, monkeypatch):
    path = tmp_path / "cache"
    monkeypatch.setenv("TRACER_CACHE", str(path))
    return path


def write_case(folder, edit, files):
    """Write the edited config and its files into ``folder``; return the config path."""
    for name, content in files.items():
        (folder / name).write_bytes(content if isinstance(content, bytes) else content.encode())
    text = edit(TRAP)
    config = folder / "bad.toml"
    config.write_bytes(text if isinstance(text, bytes) else text.encode())
    return config


def assert_refused(code, out_text, err_text, key, fragment):
    assert code == 2
    lines = err_text.splitlines()
    assert len(lines) == 1, err_text
    assert "Traceback" not in err_text
    assert lines[0].startswith("tracer: error: ")
    culprit = lines[0].removeprefix("tracer: error: ")
    if key.endswith(".toml"):        # errors of the file itself are keyed by its path
        assert culprit.split(": ")[0].endswith(key), culprit
    else:
        assert culprit.startswith(f"{key}: "), culprit
    assert fragment in culprit, culprit
    assert out_text == ""


def test_the_corpus_is_large_and_its_cases_distinct():
    assert len(CASES) >= 40
    assert len({c[0] for c in CASES}) == len(CASES)
    texts = [c[1](TRAP) for c in CASES]
    assert TRAP not in texts


@pytest.mark.parametrize("edit, files, key, fragment", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_a_bad_config_is_one_line_exit_2_and_writes_nothing(tmp_path, cache, capsys, edit, files, key, fragment):
    config = write_case(tmp_path, edit, files)
    out = tmp_path / "out"
    code = main(["run", str(config), "--out", str(out), "--quiet"])
    captured = capsys.readouterr()
    assert_refused(code, captured.out, captured.err, key, fragment)
    assert not out.exists()
    assert not cache.exists()


def test_the_unchanged_base_is_accepted(tmp_path, cache, capsys):
    """The corpus's refusals come from its edits: the base itself passes the check."""
    config = write_case(tmp_path, lambda text: text, {})
    assert main(["check", str(config)]) == 0
    assert "electrodes (3)" in capsys.readouterr().out
    assert not cache.exists()


OVERLAP = next(c for c in CASES if c[0] == "overlap-rect")


@pytest.mark.parametrize("command", ["check", "solve", "run", "scan", "tune", "gun", "optics"])
def test_every_command_refuses_an_overlap_before_any_work(tmp_path, cache, capsys, command):
    """The overlap is found while loading, so no command solves, caches or writes anything."""
    _, edit, files, key, fragment = OVERLAP
    config = write_case(tmp_path, edit, files)
    out = tmp_path / "out"
    argv = [command, str(config)] + ([] if command == "check" else ["--out", str(out)])
    code = main(argv)
    captured = capsys.readouterr()
    assert_refused(code, captured.out, captured.err, key, fragment)
    assert not out.exists() and not cache.exists()


@pytest.mark.parametrize("case", ["toml-open-string", "overlap-arc", "rays-word", "grid-too-large"])
def test_python_m_tracer_run_refuses_bad_configs(tmp_path, case):
    _, edit, files, key, fragment = next(c for c in CASES if c[0] == case)
    config = write_case(tmp_path, edit, files)
    out, cache = tmp_path / "out", tmp_path / "cache"
    proc = subprocess.run([sys.executable, "-m", "tracer", "run", str(config), "--out", str(out)],
                          capture_output=True, text=True, env={**os.environ, "TRACER_CACHE": str(cache)},
                          timeout=120)
    assert_refused(proc.returncode, proc.stdout, proc.stderr, key, fragment)
    assert not out.exists() and not cache.exists()


def test_a_waveform_parameter_is_bounded_by_its_own_unit(tmp_path, cache, capsys):
    """A delay of 1e9 ns (1 s) is past the voltage range but inside the range of times: a scan of
    it is admitted (each scanned or tuned quantity is checked in its own unit)."""
    config = write_case(tmp_path, PULSED("[[electrode.pulse]]\nhigh_V = 5.0\ndelay_ns = 10.0\n"
                                         "[scan]\n'gate.pulse[0].delay_ns' = [0.0, 1e9, 2]"), {})
    assert main(["check", str(config)]) == 0, capsys.readouterr().err


@pytest.mark.parametrize("scan, verdict", [
    ("cap_in = [50.0, 150.0, 3]", 0),                  # another electrode: free to scan
    ("ring = [0.0, 0.0, 1]\nsleeve = [0.0, 0.0, 1]", 0),  # both held at their one voltage
    ("ring = [7.0, 7.0, 1]\nsleeve = [7.0, 7.0, 1]", 0),  # both moved together to one value
    ("ring = [7.0, 7.0, 1]", 2),                       # ring moved, sleeve left at 0 V
])
def test_overlapping_electrodes_may_be_scanned_only_together(tmp_path, cache, capsys, scan, verdict):
    config = write_case(tmp_path, TIED(f"[scan]\n{scan}"), {})
    assert main(["check", str(config)]) == verdict
    err = capsys.readouterr().err
    assert ("'ring' and 'sleeve' overlap" in err) == bool(verdict), err


@pytest.mark.parametrize("rows, refusal", [
    ("0,0\n5,5\n", None),
    ("0,0\n5,4\n", "'sets.csv' row 3: electrodes 'ring' and 'sleeve' overlap, so they are one conductor at one "
                    "voltage; the row sets 'ring' to 5 V and 'sleeve' to 4 V"),
    ("0,0\n1e300,1e300\n", "'sets.csv' row 3, column ring_V: 1e+300 is outside the range tracer admits, "
                            "-1e+08..1e+08 V"),
])
def test_a_csv_scan_that_sets_overlapping_electrodes_apart_is_refused_before_any_work(
        tmp_path, cache, capsys, rows, refusal):
    """CSV rows are read before the solve: the row that sets them apart, or an absurd voltage, is
    named (line 3)."""
    config = write_case(tmp_path, TIED("[scan]\ncsv = 'sets.csv'"), {"sets.csv": "ring_V,sleeve_V\n" + rows})
    read = scan_verdict(config, tmp_path, cache, capsys, refusal)
    if refusal is None:
        names, sets = read
        assert names == ("ring", "sleeve") and sets.tolist() == [[0.0, 0.0], [5.0, 5.0]]


def scan_verdict(config, tmp_path, cache, capsys, refusal):
    """A refusal: check that `tracer scan` refuses the config with it before any work (None
    returned); None: the rows are fine, read them without the work of a scan (voltage_sets)."""
    if refusal is None:
        from tracer import load
        from tracer.scans import voltage_sets
        return voltage_sets(load(config))
    out = tmp_path / "out"
    code = main(["scan", str(config), "--out", str(out), "--quiet"])
    captured = capsys.readouterr()
    assert_refused(code, captured.out, captured.err, "scan.csv", refusal)
    assert not out.exists() and not cache.exists()
    return None


def test_a_csv_scan_of_a_parameter_of_overlapping_electrodes_is_refused(tmp_path, cache, capsys):
    """Overlapping electrodes are one conductor: a column of a waveform parameter of either would
    set them apart, as a [scan] range of it would."""
    tied = PULSED(f"{GATE_PULSE}\n[[electrode]]\nname = 'gate2'\nvoltage_V = 0.0\n[[electrode.rect]]\n"
                  f"z_mm = [3.5, 4.5]\nr_mm = [5.0, 5.5]\n{GATE_PULSE}\n[scan]\ncsv = 'sets.csv'")
    config = write_case(tmp_path, tied, {"sets.csv": "cap_in_V,gate2.pulse[0].high_V\n100,5\n"})
    scan_verdict(config, tmp_path, cache, capsys, "'sets.csv' column gate2.pulse[0].high_V: electrodes 'gate' and "
                 "'gate2' overlap, so they are one conductor at one voltage; the file would set "
                 "'gate2.pulse[0].high_V' for one of them")


REPEATED = "[[electrode.pulse]]\nhigh_V = 5.0\ndelay_ns = 10.0\nwidth_ns = 100.0\nperiod_ns = 1000.0\ncount = 2"


@pytest.mark.parametrize("rows, refusal", [
    # width and period grow together: each alone against the config's pulse would be refused
    ("100,1000,10\n2000,5000,10\n", None),
    ("100,1000,10\n50,40,10\n", "'sets.csv' row 3, column gate.pulse[0].period_ns: 40: 4e-08 s is shorter than "
                                  "rise + width + fall = 5e-08 s"),
    ("100,1000,10\n-5,1000,10\n", "'sets.csv' row 3, column gate.pulse[0].width_ns: -5: must be >= 0, got -5e-09"),
    ("100,1000,1e300\n", "'sets.csv' row 2, column gate.pulse[0].delay_ns: 1e+300 is outside the range tracer "
                          "admits, -1e+12..1e+12 ns"),
])
def test_a_csv_scan_of_waveform_parameters_refuses_a_bad_row_before_any_work(tmp_path, cache, capsys, rows, refusal):
    """A CSV row of waveform parameters is checked as the scan would set it (the parameters of one
    pulse together) before the solve; the refusal names the row (line) and the column."""
    config = write_case(tmp_path, PULSED(f"{REPEATED}\n[scan]\ncsv = 'sets.csv'"),
                        {"sets.csv": "gate.pulse[0].width_ns,gate.pulse[0].period_ns,gate.pulse[0].delay_ns\n" + rows})
    read = scan_verdict(config, tmp_path, cache, capsys, refusal)
    if refusal is None:
        names, sets = read
        assert names == ("gate.pulse[0].width_ns", "gate.pulse[0].period_ns", "gate.pulse[0].delay_ns")
        assert sets.tolist() == [[100.0, 1000.0, 10.0], [2000.0, 5000.0, 10.0]]


EDGES_OF_REAL_WORK = """\
title = "a long megavolt column with heavy droplets and resting ions (illustrative)"
[domain]
symmetry = "axial"
z_mm = [0.0, 3000.0]
r_mm = 500.0
cell_mm = 20.0
[[electrode]]
name = "terminal"
voltage_V = 5e6
[[electrode.rect]]
z_mm = [1000.0, 2000.0]
r_mm = [400.0, 420.0]
[[beam]]
name = "droplets"
mass_u = 1e9
charge_e = 100
energy_eV = 1e-6
start_z_mm = 100.0
[[beam]]
name = "resting"
species = "p+"
energy_eV = 0.0
start_z_mm = 100.0
[[beam]]
name = "measured"
species = "e-"
rays_csv = "rays.csv"
[trace]
rtol = 1e-13
max_time_us = 1e6
"""


def test_real_work_at_the_edges_is_admitted(tmp_path, capsys):
    """The bounds leave room for real instruments: energies of 0 and 1 ueV, megavolt electrodes,
    masses of 1e9 u, domains of metres, rays files in MeV (common practice)."""
    (tmp_path / "rays.csv").write_text("x_m,y_m,z_m,dx/dz,dy/dz,energy_MeV\n0,0,0.5,0,0,0\n0.01,0,0.5,1e-3,0,2.5\n")
    config = tmp_path / "edges.toml"
    config.write_text(EDGES_OF_REAL_WORK)
    assert main(["check", str(config)]) == 0, capsys.readouterr().err
    from tracer import load
    from tracer.sources import start_states
    setup = load(config)
    assert [b.energy_eV for b in setup.beams[:2]] == [1e-6, 0.0]
    rays = start_states(setup.beams[2])
    assert rays["energy_eV"].tolist() == [0.0, 2.5e6]


def test_the_guide_states_every_range():
    """docs/limits-and-trust.md has a row for every range of tracer/bounds.py, with its limits."""
    from pathlib import Path

    from tracer.bounds import BOUNDS

    guide = (Path(__file__).parents[1] / "docs" / "limits-and-trust.md").read_text()
    rows = {line.split("|")[1]: line for line in guide.splitlines() if line.startswith("| `")}
    for key, bound in BOUNDS.items():
        row = next((line for cell, line in rows.items() if f"`{key}`" in cell), None)
        assert row is not None, f"no row for {key} in the guide"
        top = f"{bound.hi:.0e}".replace("e+0", "e").replace("e+", "e") if bound.hi >= 1e4 else f"{bound.hi:g}"
        assert f".. {top} " in row, row
