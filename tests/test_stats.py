"""Beam statistics: plane moments, emittance, landings and loss counts."""

import math
import warnings

import numpy as np
import pytest
from scipy import constants

from tracer.sources import momentum
from tracer.species import species
from tracer.stats import landing_stats, landings, loss_reasons, plane_stats, rms_emittance

# the record fields of DESIGN §6, with the weight column the sources provide
RECORD = np.dtype([("ray", np.int64), ("status", "U8"), ("electrode", "U8"), ("time_s", float),
                   ("x_m", float), ("y_m", float), ("z_m", float),
                   ("px", float), ("py", float), ("pz", float),
                   ("energy_eV", float), ("ledger_eV", float), ("weight_A", float)])

PROTON = species("p+")


def rows_from(x, y, xs, ys, energy_eV, sp=PROTON, time_s=0.0):
    """Records of rays at positions (x, y) with slopes (xs, ys) and kinetic energies."""
    n = len(x)
    out = np.zeros(n, dtype=RECORD)
    out["ray"] = np.arange(n)
    out["status"] = "plane"
    out["x_m"], out["y_m"] = x, y
    p = momentum(np.broadcast_to(energy_eV, (n,)), sp.mass_kg)
    norm = np.sqrt(1 + xs ** 2 + ys ** 2)
    out["px"], out["py"], out["pz"] = p * xs / norm, p * ys / norm, p / norm
    out["energy_eV"] = energy_eV
    out["time_s"] = time_s
    return out


def test_focused_beam_has_zero_emittance():
    # Lapostolle 1971 / Sacherer 1971 rms emittance: slopes x' = x/f are fully correlated
    # with x, so sqrt(<x^2><x'^2> - <x x'>^2) vanishes (to rounding).
    rng = np.random.default_rng(1)
    x, y = rng.normal(0, 1e-3, (2, 10_000))
    f = 0.2
    s = plane_stats(rows_from(x, y, -x / f, -y / f, 1000.0), PROTON, 10_000)
    assert s.emittance_x_m_rad < 1e-12 * s.rms_x_m * s.rms_divergence_x_rad
    assert s.emittance_y_m_rad < 1e-12 * s.rms_y_m * s.rms_divergence_y_rad
    assert s.rms_divergence_x_rad == pytest.approx(s.rms_x_m / f, rel=1e-12)


def test_uncorrelated_beam_emittance_is_product_of_rms():
    # Lapostolle 1971 / Sacherer 1971: independent x and x' give eps = sigma_x sigma_x';
    # the correlation term <x x'>^2 has relative size ~ 1/N, the sigmas standard errors
    # 1/sqrt(2N) each, so the product within 5 * 1/sqrt(N) (N = 40,000: 2.5 %).
    rng = np.random.default_rng(2)
    n = 40_000
    x, y = rng.normal(0, 2e-3, (2, n))
    xs, ys = rng.normal(0, 1e-3, (2, n))
    s = plane_stats(rows_from(x, y, xs, ys, 500.0), PROTON, n)
    assert s.emittance_x_m_rad == pytest.approx(2e-3 * 1e-3, rel=5 / math.sqrt(n))
    assert s.emittance_y_m_rad == pytest.approx(2e-3 * 1e-3, rel=5 / math.sqrt(n))
    # and exactly the determinant of the sample moments, whatever the centroid
    assert rms_emittance(x + 1.0, xs + 0.5) == pytest.approx(
        math.sqrt(np.var(x) * np.var(xs) - np.cov(x, xs, bias=True)[0, 1] ** 2), rel=1e-9)


@pytest.mark.parametrize("name, energy_eV", [("e-", 100e3), ("p+", 10e6)])
def test_normalized_emittance_factor(name, energy_eV):
    # special relativity (common practice; scipy.constants): gamma = 1 + K/(m c^2),
    # beta gamma = sqrt(gamma^2 - 1)
    sp = species(name)
    gamma = 1 + energy_eV * constants.e / (sp.mass_kg * constants.c ** 2)
    rng = np.random.default_rng(3)
    x, y, xs, ys = rng.normal(0, 1e-3, (4, 1000))
    s = plane_stats(rows_from(x, y, xs, ys, energy_eV, sp), sp, 1000)
    assert s.beta_gamma == pytest.approx(math.sqrt(gamma ** 2 - 1), rel=1e-12)
    assert s.norm_emittance_x_m_rad == pytest.approx(s.beta_gamma * s.emittance_x_m_rad, rel=1e-15)


def test_radii_about_centroid_and_axis():
    # parallel-axis identity of second moments (common practice):
    # <r^2> about the axis = <r^2> about the centroid + |centroid|^2
    rng = np.random.default_rng(4)
    x = rng.uniform(-1e-3, 1e-3, 5000) + 3e-3
    y = rng.uniform(-1e-3, 1e-3, 5000) - 1e-3
    s = plane_stats(rows_from(x, y, 0 * x, 0 * y, 10.0), PROTON, 10_000)
    assert s.centroid_x_m == pytest.approx(x.mean()) and s.centroid_y_m == pytest.approx(y.mean())
    assert s.rms_radius_axis_m ** 2 == pytest.approx(
        s.rms_radius_m ** 2 + s.centroid_x_m ** 2 + s.centroid_y_m ** 2, rel=1e-12)
    assert s.rms_radius_m ** 2 == pytest.approx(s.rms_x_m ** 2 + s.rms_y_m ** 2, rel=1e-12)
    assert s.fraction == 0.5 and s.count == 5000


def test_energy_and_time_moments_and_repeated_crossings():
    e = np.array([10.0, 12.0, 14.0])
    rows = rows_from(np.zeros(3), np.zeros(3), np.zeros(3), np.zeros(3), e,
                     time_s=np.array([1e-6, 2e-6, 3e-6]))
    rows["ray"] = [0, 0, 1]       # ray 0 crosses twice
    s = plane_stats(rows, PROTON, 4)
    assert s.energy_mean_eV == pytest.approx(12.0)
    assert s.energy_std_eV == pytest.approx(math.sqrt(8 / 3))
    assert s.time_mean_s == pytest.approx(2e-6) and s.time_std_s == pytest.approx(math.sqrt(2 / 3) * 1e-6)
    assert s.count == 3 and s.fraction == 0.5


def test_empty_selections_are_nan_without_warnings():
    empty = np.zeros(0, dtype=RECORD)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = plane_stats(empty, PROTON, 100)
        land = landing_stats(empty, "target")
        none = plane_stats(empty, PROTON, 0)
    assert s.count == 0 and s.fraction == 0.0 and math.isnan(none.fraction)
    for v in (s.centroid_x_m, s.rms_radius_m, s.emittance_x_m_rad, s.norm_emittance_y_m_rad,
              s.energy_mean_eV, s.time_std_s, land.energy_mean_eV, land.radius_max_m):
        assert math.isnan(v)
    assert land.count == 0 and land.current_A == 0.0


def landing_records():
    rec = np.zeros(6, dtype=RECORD)
    rec["ray"] = np.arange(6)
    rec["status"] = ["landed", "landed", "left", "landed", "time", "landed"]
    rec["electrode"] = ["target", "target", "", "lens", "", "target"]
    rec["x_m"] = [3e-3, 0.0, 0.0, 1e-3, 0.0, -1e-3]
    rec["y_m"] = [4e-3, -2e-3, 0.0, 0.0, 0.0, 0.0]
    rec["energy_eV"] = [5.0, 6.0, 100.0, 900.0, 50.0, 7.0]
    rec["weight_A"] = [1e-9, 2e-9, 4e-9, 8e-9, 16e-9, 32e-9]
    return rec


def test_landing_stats():
    rec = landing_records()
    t = landing_stats(rec, "target")
    assert (t.count, t.fraction) == (3, 0.5)
    assert t.current_A == pytest.approx(35e-9)
    assert (t.energy_min_eV, t.energy_max_eV) == (5.0, 7.0)
    assert t.energy_mean_eV == pytest.approx(6.0) and t.energy_std_eV == pytest.approx(math.sqrt(2 / 3))
    assert (t.radius_min_m, t.radius_max_m) == pytest.approx((1e-3, 5e-3))
    planar = landing_stats(rec, "target", symmetry="planar")
    assert (planar.radius_min_m, planar.radius_max_m) == (-2e-3, 4e-3)
    # weights passed beside records without a weight column
    bare = rec[[n for n in rec.dtype.names if n != "weight_A"]]
    assert math.isnan(landing_stats(bare, "target").current_A)
    assert landing_stats(bare, "lens", weight_A=rec["weight_A"]).current_A == pytest.approx(8e-9)
    assert list(landings(rec)) == ["lens", "target"]


def test_loss_reasons():
    assert loss_reasons(landing_records()) == {"landed": 4, "left": 1, "time": 1}
