"""Beam sources: the distributions of start positions, directions and energies.

Statistical checks use large samples with fixed seeds; each tolerance is a few
standard errors of the estimated moment (the standard error is given beside it).
"""

import dataclasses
import math

import numpy as np
import pytest
from scipy import constants, stats as sps

from tracer.config import Beam
from tracer.sources import USER_RAY_DTYPE, momentum, read_rays_csv, start_states
from tracer.species import species

N = 200_000


def beam(**changes):
    """A beam of 1 keV protons from a point, along +z, with the given changes."""
    fields = dict(name="b", species=species("p+"), energy_eV=1000.0, energy_spread_eV=0.0,
                  temperature_K=None, count=N, seed=11, start_z_m=0.002, start_r_m=0.0,
                  radius_m=0.0, profile="uniform", half_angle_rad=0.0, angles="uniform",
                  current_A=None, rays_csv=None)
    fields.update(changes)
    return Beam(**fields)


def directions(s):
    """Unit direction vectors and polar angles of start states."""
    p = np.sqrt(s["px"] ** 2 + s["py"] ** 2 + s["pz"] ** 2)
    u = np.stack([s["px"], s["py"], s["pz"]]) / p
    return u, np.arccos(np.clip(u[2], -1.0, 1.0))


# ------------------------------------------------------------------ positions

def test_uniform_disc_rms_radius_about_axis():
    # common practice (moments of a uniform disc): <r^2> = R^2/2, rms radius R/sqrt(2);
    # r^2 is uniform on [0, R^2], so the standard error of <r^2> is R^2/sqrt(12 N).
    R = 1e-3
    s = start_states(beam(radius_m=R))
    r2 = s["x_m"] ** 2 + s["y_m"] ** 2
    assert r2.max() <= R * R * (1 + 1e-12)
    assert abs(r2.mean() - R * R / 2) < 5 * R * R / math.sqrt(12 * N)
    assert np.all(s["z_m"] == 0.002)


def test_gaussian_profile_sigma_per_coordinate_and_offset():
    # common practice (normal moments): each of x and y has sigma = radius, mean at the offset;
    # standard error of a sample sigma is sigma/sqrt(2N), of a mean sigma/sqrt(N).
    R, x0 = 0.5e-3, 3e-3
    s = start_states(beam(radius_m=R, profile="gaussian", start_r_m=x0))
    for u, centre in ((s["x_m"], x0), (s["y_m"], 0.0)):
        assert abs(u.std() - R) < 5 * R / math.sqrt(2 * N)
        assert abs(u.mean() - centre) < 5 * R / math.sqrt(N)
    # rms radius about the centre: sqrt(2) R for a round Gaussian (sum of the two variances)
    r2 = (s["x_m"] - x0) ** 2 + s["y_m"] ** 2
    assert abs(math.sqrt(r2.mean()) - math.sqrt(2) * R) < 5 * R / math.sqrt(N)


def test_planar_source_is_a_segment_in_y_with_a_fan_of_directions():
    # common practice (uniform distribution on [-R, R]): standard deviation R/sqrt(3),
    # standard error about R/sqrt(3)/sqrt(N) * sqrt(0.8/2) (kurtosis 1.8 for a uniform law)
    R, y0 = 2e-3, 1e-3
    s = start_states(beam(radius_m=R, start_r_m=y0, half_angle_rad=0.1), symmetry="planar")
    assert np.all(s["x_m"] == 0.0) and np.all(s["px"] == 0.0)
    assert s["y_m"].min() >= y0 - R and s["y_m"].max() <= y0 + R
    assert abs(s["y_m"].std() - R / math.sqrt(3)) < 5 * R / math.sqrt(3 * N)
    # fan uniform in angle on [-alpha, alpha]: rms angle alpha/sqrt(3)
    theta = np.arctan2(s["py"], s["pz"])
    assert abs(theta.std() - 0.1 / math.sqrt(3)) < 5 * 0.1 / math.sqrt(3 * N)


# ------------------------------------------------------------------ directions

@pytest.mark.parametrize("alpha", [0.05, 0.6, math.pi])
def test_cone_uniform_in_solid_angle(alpha):
    # analytic (uniform in solid angle within theta <= alpha):
    #   <cos theta> = (1 + cos alpha)/2, standard error (1 - cos alpha)/sqrt(12 N);
    #   <theta^2> = (2 alpha sin alpha + (2 - alpha^2) cos alpha - 2)/(1 - cos alpha),
    #   from integrating theta^2 sin theta; standard error below alpha^2/sqrt(N).
    s = start_states(beam(half_angle_rad=alpha))
    u, theta = directions(s)
    assert theta.max() <= alpha + 1e-12
    c = math.cos(alpha)
    assert abs(u[2].mean() - (1 + c) / 2) < 5 * (1 - c) / math.sqrt(12 * N)
    theta2 = (2 * alpha * math.sin(alpha) + (2 - alpha ** 2) * c - 2) / (1 - c)
    assert abs((theta ** 2).mean() - theta2) < 5 * alpha ** 2 / math.sqrt(N)
    # azimuth uniform: the transverse direction averages to zero
    assert abs(u[0].mean()) < 5 / math.sqrt(N) and abs(u[1].mean()) < 5 / math.sqrt(N)


@pytest.mark.parametrize("alpha", [0.3, math.pi / 2, 2.0])
def test_cosine_law(alpha):
    # analytic (Lambert: P(theta) ~ cos theta sin theta on [0, min(alpha, pi/2)]):
    #   <sin^2 theta> = sin^2(alpha)/2 (sin^2 theta uniform on [0, sin^2 alpha]),
    #   standard error sin^2(alpha)/sqrt(12 N); over the hemisphere <cos theta> = 2/3.
    s = start_states(beam(half_angle_rad=alpha, angles="cosine"))
    u, theta = directions(s)
    edge = math.sin(min(alpha, math.pi / 2)) ** 2
    assert abs((1 - u[2] ** 2).mean() - edge / 2) < 5 * edge / math.sqrt(12 * N)
    assert u[2].min() >= 0.0
    if alpha >= math.pi / 2:
        assert abs(u[2].mean() - 2 / 3) < 5 / math.sqrt(18 * N)


def test_gaussian_slopes():
    # common practice (normal moments): slopes px/pz and py/pz have sigma = half angle,
    # standard error sigma/sqrt(2N); every ray moves forward.
    alpha = 0.02
    s = start_states(beam(half_angle_rad=alpha, angles="gaussian"))
    assert np.all(s["pz"] > 0)
    for slope in (s["px"] / s["pz"], s["py"] / s["pz"]):
        assert abs(slope.std() - alpha) < 5 * alpha / math.sqrt(2 * N)


# ------------------------------------------------------------------ energies and momenta

def test_relativistic_momentum():
    # special relativity (common practice), constants from scipy.constants:
    # gamma = 1 + K/(m c^2), p = gamma m beta c with beta = sqrt(1 - 1/gamma^2), written
    # gamma beta = sqrt((gamma - 1)(gamma + 1)) so that 1 eV (gamma - 1 = 2e-6) keeps its digits.
    m = constants.m_e
    for K in (1.0, 1e3, 511e3, 1e7):
        excess = K * constants.e / (m * constants.c ** 2)
        gamma = 1 + excess
        beta = math.sqrt(excess * (gamma + 1)) / gamma
        assert momentum(K, m) == pytest.approx(gamma * m * beta * constants.c, rel=1e-12, abs=0)
    # the start state carries that momentum, along the direction drawn
    s = start_states(beam(species=species("e-"), energy_eV=511e3, count=10, half_angle_rad=0.3))
    p = np.sqrt(s["px"] ** 2 + s["py"] ** 2 + s["pz"] ** 2)
    assert np.allclose(p, momentum(511e3, constants.m_e), rtol=1e-14, atol=0)
    # non-relativistic limit p = sqrt(2 m K) (common practice)
    assert momentum(1.0, constants.m_p) == pytest.approx(
        math.sqrt(2 * constants.m_p * constants.e), rel=1e-9, abs=0)


def test_thermal_energies_flux_weighted_maxwellian():
    # kinetic theory (flux through a surface from a Maxwellian gas, e.g. Reif 1965, from memory):
    # E ~ E exp(-E/kT)/(kT)^2, mean 2kT, variance 2 (kT)^2; k from scipy.constants.
    # Standard error of the mean: sqrt(2) kT / sqrt(N).
    T = 2000.0
    kT = constants.k * T / constants.e
    s = start_states(beam(energy_eV=0.0, temperature_K=T, angles="cosine",
                          half_angle_rad=math.pi / 2))
    e = s["energy_eV"]
    assert abs(e.mean() - 2 * kT) < 5 * math.sqrt(2) * kT / math.sqrt(N)
    assert abs(e.var() - 2 * kT ** 2) < 0.03 * 2 * kT ** 2   # sample variance, se ~ 0.6 %
    assert e.min() > 0.0


def test_gaussian_energy_spread_and_truncation():
    # normal moments (common practice): mean energy, sigma = spread; standard error spread/sqrt(N)
    s = start_states(beam(energy_eV=1000.0, energy_spread_eV=2.0))
    assert abs(s["energy_eV"].mean() - 1000.0) < 5 * 2.0 / math.sqrt(N)
    assert abs(s["energy_eV"].std() - 2.0) < 5 * 2.0 / math.sqrt(2 * N)
    # a spread comparable to the energy: the normal law conditioned on E > 0, whose mean and
    # standard deviation scipy.stats.truncnorm gives
    s = start_states(beam(energy_eV=0.5, energy_spread_eV=1.0))
    ref = sps.truncnorm(-0.5, np.inf, loc=0.5, scale=1.0)
    assert s["energy_eV"].min() > 0.0
    assert abs(s["energy_eV"].mean() - ref.mean()) < 5 * ref.std() / math.sqrt(N)
    assert abs(s["energy_eV"].std() - ref.std()) < 5 * ref.std() / math.sqrt(N)


# ------------------------------------------------------------------ seeds and currents

def test_seed_reproducibility():
    b = beam(count=500, radius_m=1e-3, half_angle_rad=0.1, energy_spread_eV=1.0,
             temperature_K=1000.0, profile="gaussian", angles="cosine")
    a = start_states(b)
    assert np.array_equal(a, start_states(b))
    other = start_states(dataclasses.replace(b, seed=12))
    assert not np.any(other["x_m"] == a["x_m"])
    assert np.array_equal(a["ray"], np.arange(500))


def test_current_per_ray():
    s = start_states(beam(count=400, current_A=2e-6))
    assert np.allclose(s["weight_A"], 2e-6 / 400, rtol=1e-5, atol=0)
    assert s["weight_A"].sum() == pytest.approx(2e-6)
    assert np.all(start_states(beam(count=10))["weight_A"] == 0.0)


def test_unknown_laws_are_refused():
    with pytest.raises(ValueError, match="profile"):
        start_states(beam(count=3, profile="flat"))
    with pytest.raises(ValueError, match="angles"):
        start_states(beam(count=3, angles="iso"))
    with pytest.raises(ValueError, match="symmetry"):
        start_states(beam(count=3), symmetry="cartesian")


# ------------------------------------------------------------------ CSV rays

def write(tmp_path, text, name="rays.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_csv_round_trip(tmp_path):
    s = start_states(beam(count=50, radius_m=1e-3, half_angle_rad=0.2, energy_spread_eV=5.0,
                          species=species("40Ar+")))
    p = np.sqrt(s["px"] ** 2 + s["py"] ** 2 + s["pz"] ** 2)
    lines = ["# our own rays, written by the test", "x_mm,y_mm,z_mm,ux,uy,uz,energy_keV,weight_nA"]
    for row, pp in zip(s, p):
        lines.append(",".join(repr(float(v)) for v in (
            row["x_m"] * 1e3, row["y_m"] * 1e3, row["z_m"] * 1e3,
            3 * row["px"] / pp, 3 * row["py"] / pp, 3 * row["pz"] / pp,   # not normalized
            row["energy_eV"] / 1e3, 1.0)))
    path = write(tmp_path, "\n".join(lines) + "\n")
    rays = read_rays_csv(path)
    assert rays.dtype == USER_RAY_DTYPE and len(rays) == 50
    back = start_states(beam(rays_csv=path, species=species("40Ar+"), current_A=1e-6))
    for f in ("x_m", "y_m", "z_m", "px", "py", "pz", "energy_eV"):
        assert np.allclose(back[f], s[f], rtol=1e-12, atol=1e-15 * np.abs(s[f]).max())
    assert np.allclose(back["weight_A"], 1e-6 / 50, rtol=1e-5, atol=0)     # equal weights rescaled to current_A
    # without a beam current the file's weights are the ray currents
    assert np.allclose(start_states(beam(rays_csv=path))["weight_A"], 1e-9, rtol=1e-5, atol=0)


def test_csv_slopes_and_units(tmp_path):
    path = write(tmp_path, "z_m, x_um, y_cm, dx/dz, dy/dz, energy_eV\n"
                           "0.01, 5, 0.1, 0.0, 0.0, 10\n"
                           "\n"
                           "0.01, 0, 0, 0.01, -0.02, 20\n")
    rays = read_rays_csv(path)
    assert rays["x_m"][0] == pytest.approx(5e-6) and rays["y_m"][0] == pytest.approx(1e-3)
    assert np.isnan(rays["weight_A"]).all()
    n = math.sqrt(1 + 0.01 ** 2 + 0.02 ** 2)
    assert rays["ux"][1] == pytest.approx(0.01 / n) and rays["uz"][1] == pytest.approx(1 / n)
    s = start_states(beam(rays_csv=path, current_A=3e-9))
    assert np.allclose(s["weight_A"], 1.5e-9, rtol=1e-5, atol=0)


@pytest.mark.parametrize("text, where", [
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,0,0,0,1,5\n0,abc,0,0,0,1,5\n", "line 3, column 'y_mm'"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,0,0,0,1\n", "line 2: 6 fields"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy\n0,0,0,0,0,1,5\n", "column 7"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV,spin\n", "column 8: not a column tracer knows"),
    ("x_inch,y_mm,z_mm,ux,uy,uz,energy_eV\n", "column 1: the x column has a unit tracer does not know; use one of x_m"),
    ("x_mm,y_mm,z_mm,ux,uy,energy_eV\n0,0,0,0,0,5\n", "missing column"),
    ("x_mm,x_m,y_mm,z_mm,ux,uy,uz,energy_eV\n", "repeats"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,0,0,0,1,5\n0,0,0,0,0,0,5\n", "line 3, column 'ux, uy, uz'"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,0,0,0,1,-5\n", "line 2, column 'energy_eV': negative"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,0,0,0,1,nan\n", "not a finite number"),
    ("x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n", "no rays"),
    ("# only a comment\n", "no header"),
])
def test_bad_csv_names_line_and_column(tmp_path, text, where):
    path = write(tmp_path, text)
    with pytest.raises(ValueError) as err:
        read_rays_csv(path)
    assert where in str(err.value) and str(path) in str(err.value)


# ------------------------------------------------------------------ start times

def test_start_times_uniform_and_gaussian():
    """A uniform spread w: times within [t0 - w/2, t0 + w/2], variance w^2/12 (standard error
    about 0.3 % at N); a Gaussian spread w is the FWHM: sigma = w / (2 sqrt(2 ln 2)) (the normal
    distribution's FWHM, scipy.stats.norm). Without a spread every ray starts at t0."""
    t0, w = 2e-6, 40e-9
    assert np.all(start_states(beam(count=10, start_time_s=t0))["time_s"] == t0)
    u = start_states(beam(start_time_s=t0, start_spread_s=w))["time_s"]
    assert u.min() >= t0 - w / 2 and u.max() <= t0 + w / 2
    assert u.mean() == pytest.approx(t0, abs=4 * w / math.sqrt(12 * N))
    assert u.var() == pytest.approx(w * w / 12, rel=0.01, abs=0)
    g = start_states(beam(start_time_s=t0, start_spread_s=w, start_times="gaussian"))["time_s"]
    sigma = w / (2 * math.sqrt(2 * math.log(2)))
    assert g.std() == pytest.approx(sigma, rel=0.01)
    assert sps.kstest((g - t0) / sigma, "norm").pvalue > 1e-3


def test_a_start_spread_leaves_the_rest_of_the_rays_alone():
    """The start times are drawn last: positions, directions and energies are those without them."""
    b = beam(count=300, radius_m=1e-3, half_angle_rad=0.1, energy_spread_eV=1.0)
    a = start_states(b)
    s = start_states(dataclasses.replace(b, start_spread_s=1e-8))
    for name in ("x_m", "y_m", "z_m", "px", "py", "pz", "energy_eV"):
        assert np.array_equal(a[name], s[name])
    assert np.ptp(s["time_s"]) > 0.0


@pytest.mark.parametrize("text", [
    "root:x:0:0:SECRET-TEXT:/root:/bin/sh\n",                         # another file's first line as a header
    "x_mm,y_mm,z_mm,ux,uy,uz,energy_SECRET-TEXT\n0,0,0,0,0,1,5\n",    # an unknown unit
    "x_mm,y_mm,z_mm,ux,uy,uz,energy_eV\n0,0,0,0,0,1,SECRET-TEXT\n",   # a field that is not a number
])
def test_a_rays_file_error_does_not_echo_the_file(tmp_path, text):
    """rays_csv may name any file: the message gives the line and column, never its text."""
    path = tmp_path / "rays.csv"
    path.write_text(text)
    with pytest.raises(ValueError) as error:
        read_rays_csv(path)
    assert "SECRET" not in str(error.value) and "line " in str(error.value)
