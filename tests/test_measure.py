"""Beam figures: plane moments, emittance, landings and loss counts; which crossings of a plane
count, and the summary and a scan row agreeing on the same rays."""

import dataclasses
import math
import warnings

import numpy as np
import pytest
from scipy import constants

from tracer.sources import momentum
from tracer.species import species
from tracer.beam import trace
from tracer.measure import (PLANE_COLUMNS, CrossingRule, columns, landing_stats, landings, loss_reasons,
                            plane_stats, row)
from tracer.report import format_summary
from tracer.stats import containing_diameter, rms_emittance

from test_trace import plates

# the record fields of the result (docs/reference.md), with the weight column the sources provide
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


def started(n, weight_A=0.0):
    """Records of n rays started (ray 0 .. n-1), each carrying ``weight_A``."""
    out = np.zeros(n, dtype=RECORD)
    out["ray"] = np.arange(n)
    out["weight_A"] = weight_A
    return out


def test_focused_beam_has_zero_emittance():
    # Lapostolle 1971 / Sacherer 1971 rms emittance: slopes x' = x/f are fully correlated
    # with x, so sqrt(<x^2><x'^2> - <x x'>^2) vanishes (to rounding).
    rng = np.random.default_rng(1)
    x, y = rng.normal(0, 1e-3, (2, 10_000))
    f = 0.2
    s = plane_stats(rows_from(x, y, -x / f, -y / f, 1000.0), PROTON, started(10_000))
    assert s.emittance_x_m_rad < 1e-12 * s.rms_x_m * s.rms_divergence_x_rad
    assert s.emittance_y_m_rad < 1e-12 * s.rms_y_m * s.rms_divergence_y_rad
    assert s.rms_divergence_x_rad == pytest.approx(s.rms_x_m / f, rel=1e-12, abs=0)


def test_uncorrelated_beam_emittance_is_product_of_rms():
    # Lapostolle 1971 / Sacherer 1971: independent x and x' give eps = sigma_x sigma_x';
    # the correlation term <x x'>^2 has relative size ~ 1/N, the sigmas standard errors
    # 1/sqrt(2N) each, so the product within 5 * 1/sqrt(N) (N = 40,000: 2.5 %).
    rng = np.random.default_rng(2)
    n = 40_000
    x, y = rng.normal(0, 2e-3, (2, n))
    xs, ys = rng.normal(0, 1e-3, (2, n))
    s = plane_stats(rows_from(x, y, xs, ys, 500.0), PROTON, started(n))
    assert s.emittance_x_m_rad == pytest.approx(2e-3 * 1e-3, rel=5 / math.sqrt(n))
    assert s.emittance_y_m_rad == pytest.approx(2e-3 * 1e-3, rel=5 / math.sqrt(n))
    # and exactly the determinant of the sample moments, whatever the centroid
    assert rms_emittance(x + 1.0, xs + 0.5) == pytest.approx(
        math.sqrt(np.var(x) * np.var(xs) - np.cov(x, xs, bias=True)[0, 1] ** 2), rel=1e-9, abs=0)


@pytest.mark.parametrize("name, energy_eV", [("e-", 100e3), ("p+", 10e6)])
def test_normalized_emittance_factor(name, energy_eV):
    # special relativity (common practice; scipy.constants): gamma = 1 + K/(m c^2),
    # beta gamma = sqrt(gamma^2 - 1)
    sp = species(name)
    gamma = 1 + energy_eV * constants.e / (sp.mass_kg * constants.c ** 2)
    rng = np.random.default_rng(3)
    x, y, xs, ys = rng.normal(0, 1e-3, (4, 1000))
    s = plane_stats(rows_from(x, y, xs, ys, energy_eV, sp), sp, started(1000))
    assert s.beta_gamma == pytest.approx(math.sqrt(gamma ** 2 - 1), rel=1e-12, abs=0)
    assert s.norm_emittance_x_m_rad == pytest.approx(s.beta_gamma * s.emittance_x_m_rad, rel=1e-15, abs=0)


def test_radii_about_centroid_and_axis():
    # parallel-axis identity of second moments (common practice):
    # <r^2> about the axis = <r^2> about the centroid + |centroid|^2
    rng = np.random.default_rng(4)
    x = rng.uniform(-1e-3, 1e-3, 5000) + 3e-3
    y = rng.uniform(-1e-3, 1e-3, 5000) - 1e-3
    s = plane_stats(rows_from(x, y, 0 * x, 0 * y, 10.0), PROTON, started(10_000))
    assert s.centroid_x_m == pytest.approx(x.mean()) and s.centroid_y_m == pytest.approx(y.mean())
    assert s.rms_radius_axis_m ** 2 == pytest.approx(
        s.rms_radius_m ** 2 + s.centroid_x_m ** 2 + s.centroid_y_m ** 2, rel=1e-12, abs=0)
    assert s.rms_radius_m ** 2 == pytest.approx(s.rms_x_m ** 2 + s.rms_y_m ** 2, rel=1e-12, abs=0)
    assert s.fraction == 0.5 and s.count == 5000


def test_energy_and_time_moments_and_repeated_crossings():
    e = np.array([10.0, 12.0, 14.0])
    rows = rows_from(np.zeros(3), np.zeros(3), np.zeros(3), np.zeros(3), e,
                     time_s=np.array([1e-6, 2e-6, 3e-6]))
    rows["ray"] = [0, 0, 1]       # ray 0 crosses twice
    s = plane_stats(rows, PROTON, started(4, weight_A=1e-9))
    assert s.current_A == 2e-9   # each ray's current once
    assert math.isnan(plane_stats(rows, PROTON, started(4)).current_A)
    assert s.energy_mean_eV == pytest.approx(12.0)
    assert s.energy_std_eV == pytest.approx(math.sqrt(8 / 3))
    assert s.time_mean_s == pytest.approx(2e-6, rel=1e-6, abs=0) and s.time_std_s == pytest.approx(math.sqrt(2 / 3) * 1e-6, rel=1e-6, abs=0)
    assert s.count == 3 and s.fraction == 0.5


def test_empty_selections_are_nan_without_warnings():
    empty = np.zeros(0, dtype=RECORD)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = plane_stats(empty, PROTON, started(100))
        land = landing_stats(empty, "target")
        none = plane_stats(empty, PROTON, started(0))
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
    assert t.current_A == pytest.approx(35e-9, rel=1e-6, abs=0)
    assert (t.energy_min_eV, t.energy_max_eV) == (5.0, 7.0)
    assert t.energy_mean_eV == pytest.approx(6.0) and t.energy_std_eV == pytest.approx(math.sqrt(2 / 3))
    assert (t.radius_min_m, t.radius_max_m) == pytest.approx((1e-3, 5e-3))
    planar = landing_stats(rec, "target", symmetry="planar")
    assert (planar.radius_min_m, planar.radius_max_m) == (-2e-3, 4e-3)
    # weights passed beside records without a weight column
    bare = rec[[n for n in rec.dtype.names if n != "weight_A"]]
    assert math.isnan(landing_stats(bare, "target").current_A)
    assert landing_stats(bare, "lens", weight_A=rec["weight_A"]).current_A == pytest.approx(8e-9, rel=1e-6, abs=0)
    assert list(landings(rec)) == ["lens", "target"]


def test_loss_reasons():
    assert loss_reasons(landing_records()) == {"landed": 4, "left": 1, "time": 1}


def test_crossing_rules_pick_by_direction_and_index():
    """Rows of one plane, each ray's in time order: ray 0 out and back and out again, ray 1 out
    and back, ray 2 out only, ray 3 back only."""
    rows = rows_from(np.zeros(7), np.zeros(7), np.zeros(7), np.zeros(7), 10.0,
                     time_s=np.arange(7.0))
    rows["ray"] = [0, 0, 0, 1, 1, 2, 3]
    rows["pz"] *= [1, -1, 1, 1, -1, 1, -1]

    def picked(direction, crossing):
        return CrossingRule(direction, crossing).select(rows)["time_s"].tolist()

    assert picked("any", "first") == [0, 3, 5, 6]
    assert picked("any", "last") == [2, 4, 5, 6]
    assert picked("any", "all") == list(range(7))
    assert picked("any", 2) == [1, 4]
    assert picked("any", 3) == [2]
    assert picked("forward", "first") == [0, 3, 5]
    assert picked("forward", 2) == [2]
    assert picked("forward", "last") == [2, 3, 5]
    assert picked("backward", "first") == [1, 4, 6]
    assert picked("backward", 2) == []
    turning = rows.copy()
    turning["pz"][0] = 0.0        # a ray that turns exactly at the plane counts only in "any"
    assert CrossingRule("forward").select(turning)["time_s"].tolist() == [2, 3, 5]
    assert CrossingRule("any").select(turning)["time_s"].tolist() == [0, 3, 5, 6]
    assert [CrossingRule(d, c).label for d, c in (("any", "first"), ("forward", "last"), ("backward", 2),
                                                  ("any", "all"), ("any", 11), ("any", 23))] == [
        "first crossing", "last crossing, +z", "2nd crossing, -z", "every crossing", "11th crossing",
        "23rd crossing"]
    for bad in (("sideways", "first"), ("any", 0), ("any", "second"), ("any", True)):
        with pytest.raises(ValueError):
            CrossingRule(*bad)


MIRROR_PLANES = """
[[plane]]
name = "p3"
z_mm = 3.0
[[plane]]
name = "out"
z_mm = 3.0
direction = "forward"
[[plane]]
name = "back"
z_mm = 3.0
direction = "backward"
[[plane]]
name = "second"
z_mm = 3.0
crossing = 2
[[plane]]
name = "every"
z_mm = 3.0
crossing = "all"
"""


@pytest.fixture(scope="module")
def mirror():
    """Protons of 500 eV in a cone of 10 degrees sent against 1000 V over 10 mm: each turns at
    z = 1 mm + 5 mm and crosses the planes at z = 3 mm twice, out and back."""
    field, setup = plates(volts=1000.0, species_name="p+", energy=500.0, count=50, angle=10.0,
                          extra=MIRROR_PLANES)
    return field, setup, trace(field, setup.beams[0], planes=setup.planes)


def test_the_summary_and_a_scan_row_agree_on_a_mirror(mirror):
    """The same rays measured by the run summary and by a scan row give the same figures, for
    every rule, also where every ray crosses the plane twice."""
    field, setup, run = mirror
    assert (run.at_plane("p3")["crossing"].max()) == 1 and len(run.at_plane("p3")) == 2 * len(run.records)
    summary = run.summary()
    values = dict(zip(columns([run.name], run.planes, field.names), row(run, field.names)))
    for plane in run.planes:
        figures = summary["planes"][plane]
        for column, name in PLANE_COLUMNS.items():
            value = values[f"{plane}.{column}"]
            assert value == figures[name] or math.isnan(value) and math.isnan(figures[name]), (plane, column)
        assert summary["transmission"][plane] == values[f"{plane}.transmission"]
    assert summary["landing"]["back"]["energy_mean_eV"] == values["back.landing_mean_eV"]
    assert summary["ledger_worst_eV"] == values["ledger_worst_eV"]
    # the default counts each ray's first crossing: the rays on their way out
    assert summary["planes"]["p3"]["count"] == 50
    assert summary["planes"]["p3"]["rms_radius_m"] == summary["planes"]["out"]["rms_radius_m"]
    assert summary["planes"]["every"]["count"] == 100 and summary["planes"]["every"]["fraction"] == 1.0
    assert summary["planes"]["second"]["rms_radius_m"] == summary["planes"]["back"]["rms_radius_m"]
    # rays come back wider than they went out
    assert summary["planes"]["back"]["rms_radius_m"] > 2 * summary["planes"]["out"]["rms_radius_m"]
    labels = {p: summary["planes"][p]["counted"] for p in run.planes}
    assert labels == {"p3": "first crossing", "out": "first crossing, +z", "back": "first crossing, -z",
                      "second": "2nd crossing", "every": "every crossing"}
    assert "back (first crossing, -z)" in format_summary(summary)


def test_returning_rays_cross_when_uniform_field_motion_says(mirror):
    """Crossing times out and back in the uniform retarding field (any mechanics text: dp/dt = F
    along z, the transverse momentum kept; relativistic p at 500 - 200 = 300 eV) against the rays
    each direction rule picks."""
    field, setup, run = mirror
    force = -constants.e * 1000.0 / 10e-3
    mc2 = setup.beams[0].species.mass_kg * constants.c**2
    p_plane = math.sqrt(300.0 * constants.e * (300.0 * constants.e + 2 * mc2)) / constants.c
    s = run.starts
    pz_plane = np.sqrt(p_plane**2 - s["px"] ** 2 - s["py"] ** 2)
    out = CrossingRule("forward").select(run.at_plane("p3"))
    back = CrossingRule("backward").select(run.at_plane("p3"))
    assert out["ray"].tolist() == back["ray"].tolist() == list(range(50))
    assert np.allclose(out["time_s"], (pz_plane - s["pz"]) / force, rtol=1e-8, atol=0)
    assert np.allclose(back["time_s"], (-pz_plane - s["pz"]) / force, rtol=1e-8, atol=0)
    assert np.allclose(back["energy_eV"], 300.0, rtol=1e-10)


def test_a_bad_rule_from_python_is_refused_before_tracing(mirror):
    field, setup, _ = mirror
    plane = dataclasses.replace(setup.planes[0], direction="sideways")
    with pytest.raises(ValueError, match="direction 'sideways'"):
        trace(field, setup.beams[0], planes=(plane,))


def test_the_rms_ellipse_encloses_pi_times_the_rms_emittance():
    """The phase-space figure's ellipse: area π ε_rms (Lapostolle 1971; Sacherer 1971), centred on
    the centroid, through the points with d^T S^-1 d = 1."""
    from tracer.plot import rms_ellipse
    from tracer.stats import rms_emittance

    rng = np.random.default_rng(3)
    u = 1e-3 * rng.standard_normal(5000) + 2e-4
    slope = 0.4 * u + 2e-3 * rng.standard_normal(5000)
    eu, es = rms_ellipse(u, slope, points=4001)
    area = 0.5 * abs(np.dot(eu, np.roll(es, 1)) - np.dot(es, np.roll(eu, 1)))     # shoelace
    assert area == pytest.approx(np.pi * rms_emittance(u, slope), rel=1e-5)
    d = np.stack([eu - u.mean(), es - slope.mean()])
    inside = np.einsum("ik,ij,jk->k", d, np.linalg.inv(np.cov(np.stack([u, slope]), bias=True)), d)
    assert np.allclose(inside, 1.0, rtol=1e-9, atol=0)
    assert rms_ellipse(u[:1], slope[:1]) is None
    assert rms_ellipse(np.zeros(5), np.zeros(5)) is None


def disc(n, radius_m):
    """n points filling a disc of radius radius_m evenly (Vogel's sunflower spiral, 1979: point k
    at radius R sqrt((k + 1/2) / n), turned by the golden angle), so each annulus holds its share."""
    k = np.arange(n)
    r = radius_m * np.sqrt((k + 0.5) / n)
    t = k * math.pi * (3 - math.sqrt(5))
    return r * np.cos(t), r * np.sin(t)


def test_containing_diameters_of_a_uniform_disc():
    """A uniformly filled disc of radius R holds the share k of its rays within R sqrt(k)
    (area ratio, analytic): d50 = 2 R sqrt(0.5), d90 = 2 R sqrt(0.9); the current weights them."""
    x, y = disc(4000, 1e-3)
    x, y = x + 2e-3, y - 1e-3               # about the centroid, not the axis
    s = plane_stats(rows_from(x, y, 0 * x, 0 * y, 100.0), PROTON, started(4000))
    assert s.d50_m == pytest.approx(2e-3 * math.sqrt(0.5), rel=1e-3)
    assert s.d90_m == pytest.approx(2e-3 * math.sqrt(0.9), rel=1e-3)
    # the inner half of the rays carry all but a trace of the current: d90 shrinks inside them
    current = np.where(np.arange(4000) < 2000, 1e-6, 1e-12)
    w = plane_stats(rows_from(x, y, 0 * x, 0 * y, 100.0), PROTON, started(4000, weight_A=current))
    assert w.d90_m == pytest.approx(2e-3 * math.sqrt(0.5 * 0.9), rel=1e-3)


def test_containing_diameter_is_the_order_statistic_of_the_radii():
    """Counting rays, the circle holding a share p of n rays has the radius of the ceil(p n)-th
    nearest ray: numpy's quantile of the radii by the inverted empirical distribution (Hyndman and
    Fan 1996, type 1), ties and tiny beams included."""
    rng = np.random.default_rng(7)
    for n in (1, 2, 3, 7, 10, 99, 500, 1001):
        dx, dy = rng.normal(size=(2, n))
        dx[: n // 3], dy[: n // 3] = np.round(dx[: n // 3], 1), 0.0       # equal radii
        r = np.hypot(dx, dy)
        for share in (0.01, 0.1, 1 / 3, 0.5, 0.9, 1.0):
            expected = 2.0 * np.quantile(r, share, method="inverted_cdf")
            assert containing_diameter(dx, dy, share) == expected


def test_fwhm_of_a_gaussian_spot():
    """FWHM = 2 sqrt(2 ln 2) sigma of a normal distribution (analytic), beside sigma itself."""
    rng = np.random.default_rng(5)
    x, y = rng.normal(0, 0.3e-3, 40_000), rng.normal(0, 0.1e-3, 40_000)
    s = plane_stats(rows_from(x, y, 0 * x, 0 * y, 100.0), PROTON, started(40_000))
    k = 2 * math.sqrt(2 * math.log(2))
    assert s.fwhm_x_m == pytest.approx(k * s.rms_x_m, rel=0.02)
    assert s.fwhm_y_m == pytest.approx(k * 0.1e-3, rel=0.02)


def test_best_focus_of_a_cone_is_its_apex():
    """Rays from a disc at z = 40 mm aimed at the point 25 mm further on (or away from the point
    25 mm behind) meet there: straight lines through one apex (geometry).  The rms and the d50 waist
    are both at the apex, with a spot of zero size."""
    x, y = disc(2000, 1e-3)
    f = 25e-3
    for sign, apex in ((-1, 65e-3), (1, 15e-3)):
        rows = rows_from(x, y, sign * x / f, sign * y / f, 100.0)
        rows["z_m"] = 40e-3
        s = plane_stats(rows, PROTON, started(2000))
        assert s.focus_z_m == pytest.approx(apex, abs=1e-12) and s.focus_rms_m < 1e-12
        assert s.focus_d50_z_m == pytest.approx(apex, abs=1e-9) and s.focus_d50_m < 1e-9


def test_best_focus_with_spherical_aberration_is_between_the_foci():
    """Slopes -r/f - a r^3 (third-order spherical aberration, common practice): the marginal rays
    cross before the paraxial focus, and both waists (rms and d50) lie between the marginal and the
    paraxial focus with a spot smaller than at either."""
    x, y = disc(4000, 1e-3)
    f, a = 25e-3, 40.0
    r = np.hypot(x, y)
    slope = 1 / f + a * r ** 2
    rows = rows_from(x, y, -x * slope, -y * slope, 100.0)
    s = plane_stats(rows, PROTON, started(4000))
    marginal = 1 / (1 / f + a * 1e-6)
    for z in (s.focus_z_m, s.focus_d50_z_m):
        assert marginal < z < f
    at = {z: plane_stats(rows_from(x - z * x * slope, y - z * y * slope, 0 * x, 0 * y, 100.0), PROTON,
                         started(4000)) for z in (marginal, f)}
    assert s.focus_rms_m < min(v.rms_radius_m for v in at.values())
    assert s.focus_d50_m < min(v.d50_m for v in at.values())


def test_parallel_rays_have_no_focus_and_empty_planes_no_widths():
    x, y = disc(100, 1e-3)
    s = plane_stats(rows_from(x, y, 0 * x, 0 * y, 100.0), PROTON, started(100))
    assert math.isnan(s.focus_z_m) and math.isnan(s.focus_d50_z_m) and s.d50_m > 0
    none = plane_stats(np.zeros(0, dtype=RECORD), PROTON, started(10))
    one = plane_stats(rows_from(x[:1], y[:1], x[:1], y[:1], 100.0), PROTON, started(10))
    for v in (none.d50_m, none.d90_m, none.fwhm_x_m, none.focus_z_m, one.fwhm_x_m, one.focus_z_m):
        assert math.isnan(v)
    assert one.d50_m == 0.0
    tilted = plane_stats(rows_from(x, y, -x, -y, 100.0), PROTON, started(100), along_z=False)
    assert math.isnan(tilted.focus_z_m) and math.isnan(tilted.focus_d50_m)
    # a waist 1 km off (slopes of 1e-6 rad per mm) is outside a window of the domain and its length
    # beyond each end; a waist inside it is found
    for apex, window in ((1e3, (-0.1, 0.2)), (1e3, (-math.inf, math.inf)), (0.05, (-0.1, 0.2))):
        rows = rows_from(x, y, -x / apex, -y / apex, 100.0)
        s = plane_stats(rows, PROTON, started(100), focus_window_m=window)
        found = window[0] <= apex <= window[1]
        assert (s.focus_z_m == pytest.approx(apex)) if found else math.isnan(s.focus_z_m)
        assert (s.focus_d50_z_m == pytest.approx(apex, rel=1e-6)) if found else math.isnan(s.focus_d50_z_m)


def test_the_report_prints_the_spot_widths_and_the_best_focus(mirror):
    """The printed summary carries d50, d90, sigma beside FWHM and the best focus of each plane, in
    mm, from the same summary figures (one definition)."""
    _, _, run = mirror
    summary = run.summary()
    text = format_summary(summary)
    p3 = summary["planes"]["p3"]
    spot = text[text.index("spot at each plane"):].split("\n")
    assert spot[1].split() == ["plane", "sigma", "x", "mm", "FWHM", "x", "mm", "sigma", "y", "mm", "FWHM",
                               "y", "mm", "d50", "mm", "d90", "mm"]
    line = next(l for l in spot if l.startswith("p3 "))
    assert line.split()[-2:] == [f"{p3['d50_m'] * 1e3:.4g}", f"{p3['d90_m'] * 1e3:.4g}"]
    assert p3["d50_m"] < p3["d90_m"]
    focus = text[text.index("best focus"):].split("\n")
    line = next(l for l in focus if l.startswith("p3 "))
    assert line.split()[3] == f"{p3['focus_z_m'] * 1e3:.4g}"
    # rays from a point source in the cone diverge from the plane: their straight lines meet behind it
    assert p3["focus_z_m"] < 3e-3 and p3["focus_rms_m"] < p3["rms_radius_m"]


def test_every_plane_figure_weighs_the_rays_by_their_current():
    """A ray carrying k times the current counts as k rays (a weighted moment, sum w a / sum w;
    common practice): rays of uneven currents 1, 2 and 3 units give every figure of a plane that the
    same rays repeated 1, 2 and 3 times give without currents -- centroid, rms sizes, divergences,
    emittances, energy and time moments, d50, d90 and the best focus.  (The FWHM takes its kernel's
    width from Kish's count of the currents, not the repeated count, so it is left out.)"""
    rng = np.random.default_rng(21)
    n = 600
    x, y = rng.normal(0.2e-3, 1e-3, n), rng.normal(0, 0.5e-3, n)
    xs, ys = -x / 0.05 + rng.normal(0, 1e-3, n), -y / 0.08 + rng.normal(0, 1e-3, n)
    energy = 1000.0 + rng.normal(0, 2.0, n)
    rows = rows_from(x, y, xs, ys, energy, time_s=1e-6 + rng.normal(0, 1e-9, n))
    rows["z_m"] = 0.1
    k = rng.integers(1, 4, n)
    weighted = plane_stats(rows, PROTON, started(n, weight_A=k * 1e-9))
    repeated = rows[np.repeat(np.arange(n), k)]
    repeated["ray"] = np.arange(len(repeated))
    plain = plane_stats(repeated, PROTON, started(len(repeated)))
    skip = {"count", "fraction", "current_A", "fwhm_x_m", "fwhm_y_m", "time_fwhm_s", "resolving_power",
            "rotation_rad"}
    for field in dataclasses.fields(weighted):
        if field.name not in skip:
            assert getattr(weighted, field.name) == pytest.approx(getattr(plain, field.name), rel=1e-9, abs=0), field.name
    assert weighted.current_A == pytest.approx(k.sum() * 1e-9)
    # the same rays counted alike differ, so the currents were not ignored
    alike = plane_stats(rows, PROTON, started(n))
    assert abs(alike.centroid_x_m - weighted.centroid_x_m) > 1e-6 and alike.rms_x_m != weighted.rms_x_m
