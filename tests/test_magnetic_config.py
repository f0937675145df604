"""The magnetic config keys ([[coil]], [[axial_field]], [[uniform_field]]): reading, refusals that
name the key, `tracer check`, and runs that trace through the field.

Sources: Busch's image rotation theta = sqrt(q / (8 m V*)) * integral of B dz (Busch 1926) for the
bundled solenoid's optics; the coil's centre field mu0 N I / sqrt(L^2 + 4 R^2) of a thin finite solenoid (common
practice) for the peak field `tracer check` shows; the cyclotron radius p / (|q| B)
(relativistic mechanics, Jackson 1999 §12.2) for a run through a uniform field.
"""

import math
import warnings

import numpy as np
import pytest
from scipy import constants

import tracer
from tracer.cli import main
from tracer.sources import momentum

BASE = """
title = "magnetic keys (illustrative)"
[domain]
symmetry = "{symmetry}"
z_mm = [0.0, 100.0]
{side}_mm = {extent}
cell_mm = 1.0
edges = "ground"
[[electrode]]
name = "corner"
voltage_V = 0.0
[[electrode.rect]]
z_mm = [99.0, 100.0]
{side}_mm = {corner}
[[beam]]
name = "e"
species = "e-"
energy_eV = 2000.0
count = 8
seed = 1
start_z_mm = 1.0
radius_mm = 0.5
[[plane]]
name = "end"
z_mm = 60.0
stop = true
"""
AXIAL = BASE.format(symmetry="axial", side="r", extent="10.0", corner="[9.0, 10.0]")
PLANAR = BASE.format(symmetry="planar", side="y", extent="[-10.0, 10.0]", corner="[9.0, 10.0]")

SOLENOID = """
[[coil]]
name = "lens"
z_mm = [40.0, 60.0]
r_mm = [15.0, 15.0]
turns = 200
current_A = 2.5
"""


def test_keys_are_read_in_si_units(tmp_path):
    table = tmp_path / "bell.csv"
    z = np.linspace(20.0, 80.0, 61)
    table.write_text("z_mm,B_T\n" + "".join(f"{a},{0.01 / (1 + ((a - 50) / 5) ** 2)}\n" for a in z))
    setup = tracer.loads(AXIAL + SOLENOID + """
[[axial_field]]
name = "bell"
peak_T = 0.02
half_width_mm = 4.0
center_z_mm = 70.0
[[axial_field]]
name = "measured"
csv = "bell.csv"
[[uniform_field]]
name = "guide"
B_T = [0.0, 0.0, 0.001]
box = { z_mm = [80.0, 90.0] }
""", source=tmp_path / "x.toml")
    m = setup.magnetic
    (coil,) = m.coils
    assert coil.z_m == (0.04, 0.06) and coil.r_m == (0.015, 0.015) and coil.turns == 200
    assert coil.current_A == 2.5 and m.currents() == {"lens": 2.5}
    bell, measured = m.profiles
    assert (bell.peak_T, bell.half_width_m, bell.center_z_m) == (0.02, 0.004, 0.07)
    assert measured.on_axis(np.array([0.05]))[0] == pytest.approx(0.01, rel=5e-3)   # a smoothing fit
    (guide,) = m.uniform
    assert guide.b_T == (0.0, 0.0, 0.001) and guide.region.z_m == (0.08, 0.09)
    assert not tracer.loads(AXIAL).magnetic


@pytest.mark.parametrize("extra, path, words", [
    ('[[coil]]\nname = "c"\nz_mm = [1, 2]\nr_mm = [3, 4]\ncurrent = 1', "coil[0].current", "current_A"),
    ('[[coil]]\nname = "c"\nz_mm = [2, 1]\nr_mm = [3, 4]\ncurrent_A = 1', "coil[0].z_mm", "exceeds"),
    ('[[coil]]\nname = "c"\nz_mm = [1, 2]\nr_mm = [0, 4]\ncurrent_A = 1', "coil[0].r_mm", "inner radius > 0"),
    ('[[coil]]\nname = "c"\nz_mm = [1, 2]\nr_mm = [3, 4]\nturns = 0\ncurrent_A = 1', "coil[0].turns", ">= 1"),
    ('[[coil]]\nname = "c"\nz_mm = [1, 2]\nr_mm = [3, 4]\ncurrent_A = "2"', "coil[0].current_A", "number"),
    ('[[coil]]\nname = "c"\nz_mm = [1, 2]\nr_mm = [3, 4]\ncurrent_A = 1\n[[uniform_field]]\nname = "c"\n'
     'B_T = [0, 0, 1]', "uniform_field[0].name", "duplicate"),
    ('[[axial_field]]\nname = "a"\npeak_T = 1\nhalf_width_mm = 2', "axial_field[0].center_z_mm", "missing"),
    ('[[axial_field]]\nname = "a"\npeak_T = 1\nhalf_width_mm = -2\ncenter_z_mm = 1',
     "axial_field[0].half_width_mm", "> 0"),
    ('[[axial_field]]\nname = "a"', "axial_field[0]", "Glaser"),
    ('[[uniform_field]]\nname = "u"\nB_T = [0, 1]', "uniform_field[0].B_T", "3 values"),
    ('[[uniform_field]]\nname = "u"\nB_T = [0, 0, 1]\nbox = { w_mm = [0, 1] }', "uniform_field[0].box.w_mm",
     "unknown key"),
    ('[[uniform_field]]\nname = "u"\nB_T = [0, 0, 1]\nsector = { entrance_z_mm = 1, radius_mm = 5, '
     'angle_deg = 90, half_gap_mm = 6 }', "uniform_field[0].sector.half_gap_mm", "below radius_mm"),
    ('[[uniform_field]]\nname = "u"\nB_T = [0, 0, 1]\nsector = { entrance_z_mm = 1, radius_mm = 5, '
     'angle_deg = 0, half_gap_mm = 1 }', "uniform_field[0].sector.angle_deg", "0 < |angle|"),
    ('[[coils]]\nname = "c"', "coils", "did you mean 'coil'"),
])
def test_bad_keys_name_their_path(extra, path, words):
    with pytest.raises(tracer.ConfigError) as caught:
        tracer.loads(AXIAL + extra)
    assert caught.value.key == path and words in str(caught.value)


def test_coils_need_an_axial_domain():
    with pytest.raises(tracer.ConfigError) as caught:
        tracer.loads(PLANAR + SOLENOID.replace("r_mm", "y_mm"))
    assert caught.value.key.startswith("coil[0]")
    with pytest.raises(tracer.ConfigError, match="axially symmetric"):
        tracer.loads(PLANAR + SOLENOID)


def test_axial_table_must_be_equally_spaced(tmp_path):
    (tmp_path / "t.csv").write_text("z_mm,B_T\n0,0\n1,0.1\n3,0.2\n4,0.1\n")
    with pytest.raises(tracer.ConfigError, match="equal steps") as caught:
        tracer.loads(AXIAL + '[[axial_field]]\nname = "t"\ncsv = "t.csv"', source=tmp_path / "x.toml")
    assert caught.value.key == "axial_field[0].csv"


def test_check_describes_coils_and_the_peak_field(tmp_path, capsys):
    """The coil's peak is the thin solenoid's centre field mu0 N I / sqrt(L^2 + 4 R^2)
    (common practice)."""
    config = tmp_path / "coil.toml"
    config.write_text(AXIAL + SOLENOID)
    assert main(["check", str(config)]) == 0
    out = capsys.readouterr().out
    assert "coil lens: z 40..60 mm, r 15..15 mm, 200 turns x 2.5 A = 500 ampere-turns" in out
    peak = constants.mu_0 * 200 * 2.5 / math.hypot(0.02, 0.03)
    shown = float(out.split("peak |B| on the axis (coils and axial fields): ")[1].split(" T")[0])
    assert shown == pytest.approx(peak, rel=1e-3)
    assert "at z = 50 mm" in out


def test_bad_magnetic_key_exits_2_with_one_line(tmp_path, capsys):
    config = tmp_path / "bad.toml"
    config.write_text(AXIAL + SOLENOID.replace("turns = 200", "turns = 2.5"))
    assert main(["check", str(config)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "coil[0].turns" in err[0]



def _loop(z_mm, radius_mm):
    return (f'[[coil]]\nname = "loop"\nz_mm = [{z_mm}, {z_mm}]\nr_mm = [{radius_mm}, {radius_mm}]\n'
            'current_A = 3.0\n')


def _cut_warnings(text):
    from tracer.magnetics.ends import CutFieldWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        tracer.loads(text)
    return [str(w.message) for w in caught if issubclass(w.category, CutFieldWarning)]


@pytest.mark.parametrize("z_mm, radius_mm, cut_ends", [(50.0, 15.0, (0.0, 100.0)), (10.0, 3.0, (0.0,)),
                                                       (50.0, 3.0, ())])
def test_a_coil_cut_by_the_domain_ends_is_warned_of(z_mm, radius_mm, cut_ends):
    """A loop's field on its axis falls as (R^2 / (R^2 + d^2))^(3/2) of its centre value at a
    distance d (Jackson 1999 §5.5): the warning names each end of the domain (z 0..100 mm) where that
    is above 1 % of the peak, with the share, and no other."""
    found = _cut_warnings(AXIAL + _loop(z_mm, radius_mm))
    if not cut_ends:
        assert found == []
        return
    shares = [(radius_mm ** 2 / (radius_mm ** 2 + (end - z_mm) ** 2)) ** 1.5 for end in cut_ends]
    where = " and ".join(f"{share:.1%} at z = {end:g} mm" for share, end in zip(shares, cut_ends))
    assert found == [f"WARNING: coil[0] ('loop'): |B| on the axis is {where}, of its peak (at z = {z_mm:g} mm): "
                     "the domain cuts the field there. Rays meet none of it beyond, and the paraxial optics "
                     "take the ends as field-free (the focal lengths for an object at infinity are those of "
                     "the cut lens); extend domain.z_mm until it is below 1% where that matters"]


@pytest.mark.parametrize("half_width_mm, cut", [(10.0, True), (3.0, False)])
def test_an_axial_field_cut_by_the_domain_ends_is_warned_of(half_width_mm, cut):
    """Glaser's bell B0 / (1 + (d/a)^2) (Glaser 1941) is 3.8 % of its peak 50 mm from its centre
    for a = 10 mm, 0.36 % for a = 3 mm."""
    bell = (f'[[axial_field]]\nname = "bell"\npeak_T = 0.01\nhalf_width_mm = {half_width_mm}\n'
            'center_z_mm = 50.0\n')
    found = _cut_warnings(AXIAL + bell)
    share = 1.0 / (1.0 + (50.0 / half_width_mm) ** 2)
    assert len(found) == cut
    if cut:
        assert found[0].startswith(f"WARNING: axial_field[0] ('bell'): |B| on the axis is {share:.1%} at "
                                   f"z = 0 mm and {share:.1%} at z = 100 mm, of its peak (at z = 50 mm)")


def test_check_warns_of_a_cut_coil_in_one_line(tmp_path, capsys):
    config = tmp_path / "coil.toml"
    config.write_text(AXIAL + _loop(50.0, 15.0))
    assert main(["check", str(config)]) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("WARNING: coil[0] ('loop'): |B| on the axis is 2.4% at z = 0 mm")


def test_a_run_traces_through_the_uniform_field():
    """Electrons in a uniform B across their path bend on circles of radius p / (|q| B)
    (Jackson 1999 §12.2): each lands on the stop plane displaced by R - sqrt(R^2 - L^2)."""
    radius = 0.2
    b = momentum(2000.0, constants.m_e) / (constants.e * radius)
    setup = tracer.loads(PLANAR.replace("radius_mm = 0.5", "radius_mm = 0.0") +
                         f'[[uniform_field]]\nname = "bend"\nB_T = [{float(b)!r}, 0.0, 0.0]\n')
    run = tracer.run(setup).beams["e"]
    rec = run.records
    assert (rec["status"] == "plane").all()
    length = 0.059
    shift = radius - math.sqrt(radius ** 2 - length ** 2)
    np.testing.assert_allclose(np.abs(rec["y_m"] - run.starts["y_m"]), shift, rtol=1e-6)
    np.testing.assert_allclose(rec["energy_eV"], 2000.0, rtol=1e-9)


def test_optics_of_the_bundled_solenoid_turn_the_image_by_busch():
    """`tracer optics` passes the coils to the paraxial optics: the bundled solenoid images the
    anode aperture near the target and turns the image by sqrt(q / (8 m V*)) * integral B dz
    (Busch 1926; V* the relativistically corrected 5 kV), the integral of the coil's closed form
    over the axis the optics used."""
    from tracer.magnetics.profile import axial_field_T
    from tracer.pipeline import CONFIGS, lens

    setup = tracer.load(CONFIGS / "solenoid_focus.toml")
    props = lens(setup, tracer.solve(setup).combine())
    assert props.image_z_m == pytest.approx(0.19, abs=0.01)
    z = np.linspace(props.z_m[0], props.z_m[-1], 20001)   # the axis the optics used
    b = axial_field_T(setup.magnetic, z)
    v_star = 5000.0 * (1.0 + constants.e * 5000.0 / (2.0 * constants.m_e * constants.c ** 2))
    theta = math.sqrt(constants.e / (8.0 * constants.m_e * v_star)) * np.trapezoid(b, z)
    assert abs(props.rotation_rad) == pytest.approx(theta, rel=1e-3)


# ---------------------------------------------------------------- coil currents in scans and tuning

SCANNED = AXIAL + SOLENOID + "[scan]\nlens = [0.0, 2.5, 2]\n"


def test_a_scan_varies_coil_currents_through_the_unit_fields(monkeypatch):
    """A scan's `<coil>_A` column sets the coil's current: each row is bit for bit the run with the
    coil at that current (0 A: no field at all), and the unit field is sampled once for all rows
    (B is linear in the currents)."""
    from tracer import measure
    from tracer.magnetics import units

    built = []
    sampler = units.coil_sampler
    monkeypatch.setattr(units, "coil_sampler", lambda *a: built.append(1) or sampler(*a))
    units._SAMPLED.clear()
    setup = tracer.loads(SCANNED)
    result = tracer.scan(setup, workers=1)
    assert result.table.dtype.names[0] == "lens_A" and result.coils == ("lens",)
    assert result.table["lens_A"].tolist() == [0.0, 2.5] and len(built) == 1
    field = tracer.solve(setup).combine()
    no_coil = tracer.trace(field, setup.beams[0], planes=setup.planes, rtol=setup.trace.rtol,
                           max_time_s=setup.trace.max_time_s)
    at_setup = tracer.run(setup).beams["e"]
    names = [e.name for e in setup.electrodes]
    for k, run in enumerate((no_coil, at_setup)):
        expect = np.array(measure.row(run, names))
        got = np.array([result.table[c][k] for c in result.figures])
        np.testing.assert_array_equal(got, expect)
    assert result.table["spot_rms_m"][1] != result.table["spot_rms_m"][0]


def test_scanned_currents_read_back_from_the_table(tmp_path):
    result = tracer.scan(tracer.loads(SCANNED), workers=1, out=tmp_path)
    back = tracer.read_scan(tmp_path)
    assert back.names == ("lens",) and back.coils == ("lens",) and back.table.dtype.names[0] == "lens_A"
    np.testing.assert_array_equal(back.table["spot_rms_m"], result.table["spot_rms_m"])
    assert back.smallest("spot_rms_m")[1] == result.smallest("spot_rms_m")[1]


def test_a_csv_of_sets_takes_currents_with_their_bound(tmp_path):
    (tmp_path / "sets.csv").write_text("lens_A,corner_V\n0,0\n1.5,0\n")
    setup = tracer.loads(AXIAL + SOLENOID + '[scan]\ncsv = "sets.csv"\n', source=tmp_path / "x.toml")
    from tracer.scans import voltage_sets

    names, sets = voltage_sets(setup)
    assert names == ("lens", "corner") and sets.tolist() == [[0.0, 0.0], [1.5, 0.0]]
    (tmp_path / "sets.csv").write_text("lens_A\n2e7\n")
    with pytest.raises(tracer.ConfigError, match=r"row 2, column lens_A: 2.*1e\+06 A"):
        voltage_sets(setup)
    (tmp_path / "sets.csv").write_text("lens_V\n1\n")
    with pytest.raises(tracer.ConfigError, match="no electrode or coil for column 'lens_V'"):
        tracer.loads(AXIAL + SOLENOID + '[scan]\ncsv = "sets.csv"\n', source=tmp_path / "x.toml")


SECOND = SOLENOID.replace('"lens"', '"trim"')


@pytest.mark.parametrize("extra, path, words", [
    ("[scan]\nlens = [0.0, 2e7, 2]", "scan.lens[1]", "1e+06 A"),
    ("[scan]\nlense = [0.0, 1.0, 2]", "scan.lense", "no electrode or coil named 'lense'; did you mean 'lens'"),
    (SECOND.replace("2.5", "1.0"), "coil[1].current_A", "one winding with one current"),
    (SECOND + "[scan]\nlens = [0.0, 1.0, 2]", "scan.lens", "the scan would set 'lens' to 0.0..1.0 A"),
    (SECOND + "[tune]\nvary = { trim = [0.0, 1.0] }\ngoal = 'smallest_spot'\nat = 'end'", "tune.vary.trim",
     "tune would vary them apart"),
    (SOLENOID.replace('"lens"', '"corner"').replace("40.0, 60.0", "10.0, 20.0"), "coil[1].name",
     "also an electrode's name"),
])
def test_scanned_currents_are_refused_like_voltages(extra, path, words):
    """Currents keep the bound of amperes, and overlapping coils (one winding) one current."""
    with pytest.raises(tracer.ConfigError) as caught:
        tracer.loads(AXIAL + SOLENOID + extra)
    assert caught.value.key == path and words in str(caught.value)


def test_separate_coils_scan_apart_and_a_tune_varies_a_current():
    setup = tracer.loads(AXIAL + SOLENOID + SECOND.replace("40.0, 60.0", "70.0, 80.0")
                         + "[scan]\nlens = [1.0, 1.0, 1]\ntrim = [0.0, 1.0, 2]\n"
                         + "[tune]\nvary = { lens = [0.0, 3.0] }\ngoal = 'smallest_spot'\nat = 'end'\n")
    assert [r[0] for r in setup.scan.ranges] == ["lens", "trim"]
    tuned = tracer.tune(setup, grid_points=3)
    assert tuned.coils == ("lens",) and tuned.points.dtype.names[0] == "lens_A"
    assert 0.0 <= tuned.voltages["lens"] <= 3.0 and "lens" in repr(tuned) and " A" in repr(tuned)


def test_the_scan_journal_sees_the_magnetic_sources():
    """A scan resumed after a coil, its current or an axial field changed starts a fresh table."""
    from tracer.journal import config_hash

    def digest(text):
        setup = tracer.loads(text)
        return config_hash(setup, ("corner",), np.zeros((1, 1)))

    base = digest(AXIAL + SOLENOID)
    assert digest(AXIAL + SOLENOID) == base
    assert digest(AXIAL) != base
    assert digest(AXIAL + SOLENOID.replace("current_A = 2.5", "current_A = 2.0")) != base
    assert digest(AXIAL + SOLENOID.replace("turns = 200", "turns = 201")) != base
    bell = '[[axial_field]]\nname = "b"\npeak_T = 0.01\nhalf_width_mm = 3.0\ncenter_z_mm = 50.0\n'
    assert digest(AXIAL + SOLENOID + bell) != digest(AXIAL + SOLENOID + bell.replace("0.01", "0.02"))


# ---------------------------------------------------------------- the beam's rotation at a plane

FAR_COIL = AXIAL.replace("z_mm = 60.0\nstop = true", "z_mm = 90.0\nstop = true").replace("count = 8", "count = 12") + """
[[coil]]
name = "lens"
z_mm = [50.0, 70.0]
r_mm = [15.0, 15.0]
turns = 200
current_A = {current}
"""


@pytest.mark.parametrize("current", [0.25, 0.0])
def test_the_beam_turns_by_the_larmor_angle(current):
    """Busch's theorem (Busch 1926): rays that start with no azimuthal velocity keep their canonical
    angular momentum, so in a weak lens the beam turns by sqrt(q / (8 m V*)) * integral of
    (B(z) - B(z_start)) dz from the start to the plane, V* the relativistically corrected 2 kV; with
    the coil off it does not turn at all (an electric field has no torque about the axis)."""
    from tracer.magnetics.coil import coil_field

    setup = tracer.loads(FAR_COIL.format(current=current))
    run = tracer.run(setup).beams["e"]
    figures = run.summary()["planes"]["end"]
    assert figures["fraction"] == 1.0
    z = np.linspace(run.starts["z_m"][0], 0.09, 20001)
    b = coil_field(setup.magnetic.coils[0], z, np.zeros_like(z))[1]
    v_star = 2000.0 * (1.0 + constants.e * 2000.0 / (2.0 * constants.m_e * constants.c ** 2))
    larmor = math.sqrt(constants.e / (8.0 * constants.m_e * v_star)) * np.trapezoid(b - b[0], z)
    if current:
        assert larmor > 0.15 and figures["rotation_rad"] == pytest.approx(larmor, rel=2e-3)
    else:
        assert abs(figures["rotation_rad"]) < 1e-12


def test_the_rotation_is_modulo_a_half_turn_and_only_about_an_axis():
    """An inverted image is a half turn: rays through a crossover give the same rotation as before
    it (pure geometry); planar symmetry has no axis to turn about (NaN)."""
    from tracer.measure import beam_rotation

    rng = np.random.default_rng(3)
    n = 40
    starts = np.zeros(n, dtype=[("ray", int), ("x_m", float), ("y_m", float), ("px", float), ("py", float),
                                ("pz", float)])
    starts["ray"] = np.arange(n)
    starts["x_m"], starts["y_m"] = rng.normal(0, 1e-3, (2, n))
    starts["px"], starts["py"] = rng.normal(0, 1e-2, (2, n))
    starts["pz"] = 1.0
    w0, s0 = starts["x_m"] + 1j * starts["y_m"], starts["px"] + 1j * starts["py"]
    rows = np.zeros(n, dtype=[("ray", int), ("x_m", float), ("y_m", float)])
    rows["ray"] = starts["ray"]
    for g, h, theta in ((0.8, 0.05, 0.4), (-0.5, 0.02, 0.4), (-0.5, 0.02, 0.4 + math.pi), (1.0, 0.0, -1.2)):
        w = (g * w0 + h * s0) * np.exp(1j * theta)
        rows["x_m"], rows["y_m"] = w.real, w.imag
        expect = math.remainder(theta, math.pi)
        assert beam_rotation(rows, starts) == pytest.approx(expect, abs=1e-12)
    run = tracer.run(tracer.loads(PLANAR)).beams["e"]
    assert math.isnan(run.summary()["planes"]["end"]["rotation_rad"])


# ---------------------------------------------------------------- bounds of fields and currents

@pytest.mark.parametrize("extra, path", [
    ('[[axial_field]]\nname = "a"\npeak_T = 5e3\nhalf_width_mm = 2\ncenter_z_mm = 50', "axial_field[0].peak_T"),
    ('[[uniform_field]]\nname = "u"\nB_T = [0, -2e3, 0]', "uniform_field[0].B_T[1]"),
    (SOLENOID.replace("current_A = 2.5", "current_A = -2e6"), "coil[0].current_A"),
])
def test_fields_and_currents_keep_their_range(extra, path):
    """Tesla and amperes have ranges as volts do (tracer/bounds.py, docs/limits-and-trust.md)."""
    with pytest.raises(tracer.ConfigError, match="outside the range tracer admits") as caught:
        tracer.loads(AXIAL + extra)
    assert caught.value.key == path


def test_a_table_of_the_axial_field_keeps_the_range_of_tesla(tmp_path):
    (tmp_path / "t.csv").write_text("z_mm,B_T\n0,0\n1,0.1\n2,5000\n3,0.1\n")
    with pytest.raises(tracer.ConfigError, match="row 4, column B_T: 5000.0 is outside") as caught:
        tracer.loads(AXIAL + '[[axial_field]]\nname = "t"\ncsv = "t.csv"', source=tmp_path / "x.toml")
    assert caught.value.key == "axial_field[0].csv"


def test_a_coil_may_carry_no_current_or_a_negative_one():
    """0 A turns a coil off (no field on the axis); a negative current reverses B_z."""
    off = tracer.loads(AXIAL + SOLENOID.replace("current_A = 2.5", "current_A = 0"))
    back = tracer.loads(AXIAL + SOLENOID.replace("current_A = 2.5", "current_A = -2.5"))
    on = tracer.loads(AXIAL + SOLENOID)
    from tracer.magnetics.profile import axial_field_T

    z = np.linspace(0.0, 0.1, 11)
    assert off.magnetic.currents() == {"lens": 0.0} and not axial_field_T(off.magnetic, z).any()
    np.testing.assert_array_equal(axial_field_T(back.magnetic, z), -axial_field_T(on.magnetic, z))


# ---------------------------------------------------------------- B in result.h5

def _written(tmp_path, text):
    from tracer.store.result_file import write_result

    setup = tracer.loads(text)
    result = tracer.run(setup)
    return setup, write_result(tmp_path / "result.h5", result.field, result.beams, setup=setup)


def test_result_file_keeps_the_coils_field_as_an_openpmd_mesh(tmp_path):
    """B_z on the axis read back from result.h5 is the thin solenoid's closed form
    (mu0 N I / 2L)(cos a1 - cos a2) (common practice) to the interpolation's accuracy, with
    openPMD 1.1.0's unitSI and unitDimension of tesla (kg s^-2 A^-1)."""
    import h5py

    from tracer.magnetics.profile import axial_field_T

    setup, path = _written(tmp_path, AXIAL + SOLENOID)
    back = tracer.read_result(path)
    assert set(back.b) == {"z", "r"} and back.b["z"].shape == back.phi.shape
    z = back.grid.z
    expect = axial_field_T(setup.magnetic, z)
    l, a, zc = 0.02, 0.015, 0.05
    closed = constants.mu_0 * 200 * 2.5 / (2 * l) * ((z - zc + l / 2) / np.hypot(z - zc + l / 2, a)
                                                     - (z - zc - l / 2) / np.hypot(z - zc - l / 2, a))
    np.testing.assert_allclose(expect, closed, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(back.b["z"][:, 0], closed, rtol=0, atol=1e-4 * closed.max())
    assert np.abs(back.b["r"][:, 0]).max() == 0.0
    with h5py.File(path, "r") as f:
        record = f["data/0/meshes/B"]
        assert record.attrs["unitDimension"].tolist() == [0.0, 1.0, -2.0, -1.0, 0.0, 0.0, 0.0]
        assert record.attrs["geometry"] == b"thetaMode"
        assert all(record[c].attrs["unitSI"] == 1.0 for c in ("z", "r"))


def test_result_file_keeps_a_planar_uniform_field_and_none_without_one(tmp_path):
    _, path = _written(tmp_path, PLANAR + '[[uniform_field]]\nname = "u"\nB_T = [0.01, 0.0, 0.0]\n'
                                          'box = { z_mm = [20.0, 40.0] }\n')
    back = tracer.read_result(path)
    assert set(back.b) == {"x", "y", "z"}
    inside = (back.grid.z >= 0.02) & (back.grid.z <= 0.04)
    assert (back.b["x"][inside] == 0.01).all() and (back.b["x"][~inside] == 0.0).all()
    assert not back.b["y"].any() and not back.b["z"].any()
    (tmp_path / "none").mkdir()
    assert tracer.read_result(_written(tmp_path / "none", AXIAL)[1]).b == {}


@pytest.mark.parametrize("damage, words", [
    (lambda record: (record.__delitem__("z"), record.create_dataset("z", data=np.zeros((1, 3, 3))))[-1],
     "the magnetic field mesh z"),
    (lambda record: record.move("r", "q"), "components are not those of its symmetry"),
])
def test_a_damaged_magnetic_mesh_is_refused(tmp_path, damage, words):
    """A result file from elsewhere is checked before use (tracer/store/trust.py): B too."""
    import h5py

    from tracer.store import StoreError

    _, path = _written(tmp_path, AXIAL + SOLENOID)
    with h5py.File(path, "r+") as f:
        damage(f["data/0/meshes/B"])
    with pytest.raises(StoreError, match=words):
        tracer.read_result(path)
