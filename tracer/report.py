"""Plain-text reports: the description of a setup and the summary tables of results."""

from __future__ import annotations

import math


def describe(setup) -> str:
    """A short description of a setup: domain, grid, electrodes, beams and planes.

    Parameters
    ----------
    setup : tracer.config.Setup

    Returns
    -------
    str
        Several lines of text, ready to print.
    """
    from tracer.grid import Grid

    d = setup.domain
    g = Grid.from_domain(d)
    side = "r" if d.symmetry == "axial" else "y"
    lines = [
        setup.title or "(untitled setup)",
        f"domain: {d.symmetry}, z {d.z_m[0] * 1e3:g}..{d.z_m[1] * 1e3:g} mm, "
        f"{side} {d.r_m[0] * 1e3:g}..{d.r_m[1] * 1e3:g} mm, cell {d.cell_m * 1e3:g} mm "
        f"({g.nz} x {g.nr} = {g.nz * g.nr:,} nodes)",
        "edges: " + ", ".join(f"{s} {k}" for s, k in
                              zip(("z_min", "z_max", f"{side}_min", f"{side}_max"), d.edges)) + _closed_ends(d),
        f"electrodes ({len(setup.electrodes)}):",
    ]
    for e in setup.electrodes:
        kinds = ", ".join(type(s).__name__.lower() for s in e.shapes)
        lines.append(f"  {e.name:<16s} {e.voltage_V:>10.1f} V   {kinds}")
        if e.waveform is not None:
            lines.append(f"  {'':<16s} + {e.waveform.describe()}")
    for b in setup.beams:
        if b.rays_csv is not None:
            lines.append(f"beam {b.name}: {b.species.describe()}; start rays from {b.rays_csv.name!r}")
            continue
        lines.append(f"beam {b.name}: {b.count} x {b.species.describe()}; at {b.energy_eV:g} eV, "
                     f"from z = {b.start_z_m * 1e3:g} mm; {_source_widths(b)}")
    for p in setup.planes:
        where = (f"the line through z = {p.z_m * 1e3:g} mm, {side} = {p.r_m * 1e3:g} mm at "
                 f"{math.degrees(p.angle_rad):g} deg from +z" if p.tilted else f"z = {p.z_m * 1e3:g} mm")
        lines.append(f"plane {p.name}: {where}" + (" (stops rays)" if p.stop else ""))
    lines += _describe_magnetic(setup)
    lines.append(_describe_grid_error(setup))
    return "\n".join(lines)


def _describe_magnetic(setup):
    """Lines on the coils, axial fields and uniform fields, and the peak field on the axis."""
    import numpy as np

    spec = setup.magnetic
    if not spec:
        return []
    lines = []
    for c in spec.coils:
        lines.append(f"coil {c.name}: z {c.z_m[0] * 1e3:g}..{c.z_m[1] * 1e3:g} mm, r {c.r_m[0] * 1e3:g}.."
                     f"{c.r_m[1] * 1e3:g} mm, {c.turns} turns x {c.current_A:g} A = "
                     f"{c.turns * c.current_A:g} ampere-turns")
    for p in spec.profiles:
        shown = (f"Glaser's bell, peak {p.peak_T:g} T, half-width {p.half_width_m * 1e3:g} mm at z = "
                 f"{p.center_z_m * 1e3:g} mm" if p.fit is None else
                 f"a table over z {p.fit.z[0] * 1e3:g}..{p.fit.z[-1] * 1e3:g} mm")
        lines.append(f"axial field {p.name}: {shown}")
    for u in spec.uniform:
        where = "everywhere" if u.region is None else f"in a {type(u.region).__name__.lower()}"
        lines.append(f"uniform field {u.name}: B = ({', '.join(f'{b:g}' for b in u.b_T)}) T {where}")
    if spec.coils or spec.profiles:
        from tracer.magnetics.profile import axial_field_T

        z = np.linspace(*setup.domain.z_m, 2001)
        bz = axial_field_T(spec, z)
        k = int(np.argmax(np.abs(bz)))
        lines.append(f"peak |B| on the axis (coils and axial fields): {abs(bz[k]):.4g} T at z = "
                     f"{z[k] * 1e3:.4g} mm")
    return lines


def _describe_grid_error(setup):
    """One line on the error bars a run will estimate (``[grid_error]``)."""
    from tracer.errorbars import cells as factors

    spec, cell_m = setup.grid_error, setup.domain.cell_m
    if spec.grids < 2:
        return "grid error: not estimated (grids = 1)"
    cells = [cell_m] + [cell_m * f for f in factors(setup)]
    return (f"grid error: cells {', '.join(f'{c * 1e3:g}' for c in cells)} mm, up to {spec.rays} rays "
            f"a beam traced again, warning above {spec.warn_fraction:.2%}")


def format_table(header: list[str], rows: list[list], title: str | None = None) -> str:
    """Align a table of strings and numbers in columns (numbers to 4 significant figures)."""
    def cell(v):
        if isinstance(v, float):
            return "-" if not math.isfinite(v) else f"{v:.4g}"
        return str(v)

    body = [[cell(v) for v in row] for row in rows]
    widths = [max(len(h), *(len(r[i]) for r in body)) if body else len(h)
              for i, h in enumerate(header)]
    out = [title] if title else []
    out.append("  ".join(h.ljust(w) for h, w in zip(header, widths)))
    out.append("  ".join("-" * w for w in widths))
    out += ["  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths)))
            for r in body]
    return "\n".join(out)


def _mm(v):
    return v * 1e3


def _plane(name, figures):
    """A plane's name with the crossings its figures count (absent from summaries stored before)."""
    return f"{name} ({figures['counted']})" if "counted" in figures else name


def _transverse(summary):
    """The plane figures that matter in the summary's symmetry: (label, field, factor) triples.

    Axial: the spot about the centroid, the x-x' slopes and emittance (x and y alike by symmetry);
    planar: the y quantities (nothing varies along x)."""
    if summary.get("symmetry") == "planar":
        return [("y0 mm", "centroid_y_m", 1e3), ("rms y mm", "rms_y_m", 1e3),
                ("rms y' mrad", "rms_divergence_y_rad", 1e3),
                ("rms emit y mm mrad", "emittance_y_m_rad", 1e6),
                ("norm rms emit y mm mrad", "norm_emittance_y_m_rad", 1e6)]
    return [("x0 mm", "centroid_x_m", 1e3), ("y0 mm", "centroid_y_m", 1e3), ("rms r mm", "rms_radius_m", 1e3),
            ("rms x' mrad", "rms_divergence_x_rad", 1e3), ("rms emit x mm mrad", "emittance_x_m_rad", 1e6),
            ("norm rms emit x mm mrad", "norm_emittance_x_m_rad", 1e6)]


def _spots(s):
    """The widths of the spot at each plane: sigma beside FWHM, d50 and d90 ("" for summaries stored
    before they were measured)."""
    planes = {name: d for name, d in s["planes"].items() if "d50_m" in d}
    if not planes:
        return ""
    axes = ("y",) if s.get("symmetry") == "planar" else ("x", "y")
    rows = [[_plane(name, d)] + [_mm(d[f"{k}_{a}_m"]) for a in axes for k in ("rms", "fwhm")]
            + [_mm(d["d50_m"]), _mm(d["d90_m"])] for name, d in planes.items()]
    header = ["plane"] + [f"{k} {a} mm" for a in axes for k in ("sigma", "FWHM")] + ["d50 mm", "d90 mm"]
    what = "band across y" if s.get("symmetry") == "planar" else "circle about the centroid"
    return format_table(header, rows, title=f"spot at each plane (FWHM: full width at half maximum of the "
                                            f"profile; d50, d90: the {what} holding 50 %, 90 % of the "
                                            f"{'current' if math.isfinite(s.get('current_A', math.nan)) else 'rays'})")


def _focus(s):
    """The best focus from each plane: where the rays continued in straight lines have their smallest
    rms radius and d50 ("" when no plane has one)."""
    planes = {name: d for name, d in s["planes"].items() if math.isfinite(d.get("focus_z_m", math.nan))}
    if not planes:
        return ""
    rows = [[_plane(name, d), _mm(d["focus_z_m"]), _mm(d["focus_rms_m"]), _mm(d["focus_d50_z_m"]),
             _mm(d["focus_d50_m"])] for name, d in planes.items()]
    side = "y" if s.get("symmetry") == "planar" else "r"
    return format_table(["from plane", "z (rms) mm", f"rms {side} mm", "z (d50) mm", "d50 mm"], rows,
                        title="best focus of the rays continued in straight lines from the plane "
                              "(true only where no field acts beyond it; a z before the plane is a "
                              "virtual focus)")


def _rotation(s):
    """The beam's rotation about the axis at each plane (``rotation_rad``, :func:`tracer.measure.beam_rotation`);
    "" when it is nowhere above 1e-9 rad (an electric field turns no beam)."""
    planes = {name: d["rotation_rad"] for name, d in s["planes"].items()
              if abs(d.get("rotation_rad", math.nan)) > 1e-9}
    if not planes:
        return ""
    return format_table(["plane", "rotation deg"], [[_plane(name, s["planes"][name]), math.degrees(v)]
                                                     for name, v in planes.items()],
                        title="rotation of the beam about the axis from its start (right-handed about +z; "
                              "modulo 180 deg, an inverted image being a half turn)")


def _arrivals(s):
    """The arrival times at each plane, their width and the resolving power, saying what they count
    from (``time_zero_s``, :func:`tracer.measure.arrival_times`); "" without planes."""
    timed = {name: d for name, d in s["planes"].items() if "resolving_power" in d}
    if not timed:
        return ""
    zero = s.get("time_zero_s")
    if zero is None:            # a summary stored before the key
        mean, title = "arrival mean ns", "arrival times (resolving power counted from the extraction pulse)"
    elif math.isnan(zero):
        mean, title = ("flight mean ns", "arrival times: each ray's flight time from its own start (no pulse "
                                         "and no [trace] time_zero; t / (2 FWHM) with t the mean flight time)")
    else:
        mean, title = ("arrival mean ns", f"arrival times on the clock (t / (2 FWHM) with t counted from "
                                          f"{zero * 1e9:.6g} ns: the extraction pulse, or [trace] time_zero)")
    return format_table(["plane", mean, "FWHM ns", "t / (2 FWHM)"],
                        [[_plane(name, d), d["time_mean_s"] * 1e9, d["time_fwhm_s"] * 1e9, d["resolving_power"]]
                         for name, d in timed.items()], title=title)


def _energy_reference(s):
    """The line that says where ``energy_eV`` is measured from ("" for summaries stored before)."""
    ref = s.get("energy_reference") or {}
    if not ref:
        return ""
    spread = ref["start_potential_max_V"] - ref["start_potential_min_V"]
    at = f"{ref['start_potential_V']:.6g} V" + (f" (from {ref['start_potential_min_V']:.6g} to "
                                               f"{ref['start_potential_max_V']:.6g} V)" if spread > 0 else "")
    return (f"energy reference: the start energy ({ref['start_energy_eV']:.6g} eV mean) is the kinetic "
            f"energy at the start point, where the potential is {at}; a ray arriving at a surface at "
            "V lands with E0 + q (V0 - V) (column 'E expect eV')")


def _left(s):
    """The table of where rays left the domain ("" when none did)."""
    left = s.get("left") or {}
    if not left:
        return ""
    side = "y" if s.get("symmetry") == "planar" else "r"
    rows = [[edge, d["count"], d["fraction"], _mm(d["z_min_m"]), _mm(d["z_max_m"]),
             _mm(d["transverse_min_m"]), _mm(d["transverse_max_m"]), d["energy_mean_eV"],
             d["energy_min_eV"], d["energy_max_eV"]] for edge, d in left.items()]
    return format_table(["edge", "rays", "fraction", "z min mm", "z max mm", f"{side} min mm",
                         f"{side} max mm", "E mean eV", "E min eV", "E max eV"], rows,
                        title="left the domain")


def _closed_ends(domain):
    """A note when an end of the domain is grounded metal (the default edges), else ""."""
    ends = [e for e, kind in zip(("z_min", "z_max"), domain.edges) if kind == "ground"]
    if not ends:
        return ""
    opened = ", ".join(f'{e} = "open"' for e in ends)
    return (f" ({' and '.join(ends)}: closed by grounded metal, the default for every side; "
            f"[domain] edges = {{{opened}}} opens {'them' if len(ends) > 1 else 'it'})")


def _source_widths(beam):
    """The beam's source widths in words that say what they are (a sigma is not a radius)."""
    if beam.profile == "gaussian":
        spot = f"Gaussian spot, sigma {beam.radius_m * 1e3:g} mm in x and in y"
    else:
        spot = f"uniform disc of radius {beam.radius_m * 1e3:g} mm"
    angle = math.degrees(beam.half_angle_rad)
    if beam.angles == "gaussian":
        cone = f"Gaussian slopes, sigma {angle:g} deg"
    else:
        cone = f"{beam.angles} cone of half-angle {angle:g} deg"
    energy = f", energy sigma {beam.energy_spread_eV:g} eV" if beam.energy_spread_eV else ""
    return f"{spot}, {cone}{energy}"


def format_summary(summary: dict) -> str:
    """The summary of one beam (``BeamRun.summary()``) as readable tables.

    A WARNING line stands first for every way rays ended other than landing or a stopping plane
    (:mod:`tracer.endings`), then the tables: landings with the energy the start implies, planes in
    the quantities of the symmetry (r and x-x' in axial, y and y-y' in planar), where rays left.

    Returns
    -------
    str
    """
    s = summary
    head = f"beam {s['beam']}: {s['rays']} rays of {s.get('species_note', s['species'])}"
    if math.isfinite(s.get("current_A", math.nan)):
        head += f", {s['current_A']:.4g} A"
    warnings = s.get("warnings", [s["warning"]] if s["warning"] else [])
    parts = ["\n".join([head] + [f"WARNING: {w}" for w in warnings])]
    status = ", ".join(f"{k} {v}" for k, v in s["status"].items() if v)
    parts.append(f"rays ended: {status or 'none'}")
    parts += [t for t in (_energy_reference(s),) if t]
    side = "y" if s.get("symmetry") == "planar" else "r"
    if s["landing"]:
        rows = [[name, d["count"], d["fraction"], d["current_A"], d["energy_mean_eV"],
                 d.get("energy_expected_eV", math.nan), d["energy_std_eV"], d["energy_min_eV"],
                 d["energy_max_eV"], _mm(d["radius_min_m"]), _mm(d["radius_max_m"])]
                for name, d in s["landing"].items()]
        parts.append(format_table(
            ["electrode", "rays", "fraction", "current A", "E mean eV", "E expect eV", "E std eV",
             "E min eV", "E max eV", f"{side} min mm", f"{side} max mm"], rows, title="landed on electrodes"))
    parts += [t for t in (_left(s),) if t]
    if s["planes"]:
        cols = _transverse(s)
        rows = [[_plane(name, d), d["fraction"], d["current_A"]]
                + [d[key] * factor for _, key, factor in cols]
                + [d["energy_mean_eV"], d["energy_std_eV"], d["time_mean_s"] * 1e9, d["time_std_s"] * 1e9]
                for name, d in s["planes"].items()]
        parts.append(format_table(
            ["plane", "fraction", "current A"] + [label for label, _, _ in cols]
            + ["E mean eV", "E std eV", "tof ns", "tof std ns"], rows,
            title="crossed planes (emittances rms, pi not in the unit"
                  + ("; every figure weighted by the rays' current)" if math.isfinite(s.get("current_A", math.nan))
                     else ")")))
        parts += [t for t in (_spots(s), _focus(s), _rotation(s)) if t]
        parts += [t for t in (_arrivals(s),) if t]
    if "ledger_time_work_eV" in s:
        parts.append(f"energy ledger in time: dKE = -q dV + q W (W = integral of dV/dt + jumps); "
                     f"|q dV| up to {s['ledger_potential_eV']:.4g} eV, |q W| up to "
                     f"{s['ledger_time_work_eV']:.4g} eV; worst |dKE + q dV - q W| = "
                     f"{s['ledger_worst_eV']:.3g} eV ({s['ledger_worst_relative']:.2g} of the energy "
                     f"scale); {s['ledger_suspects']} ray(s) above {s['ledger_threshold']:.0e}")
    else:
        parts.append(f"energy ledger: worst |dKE - q dV| = {s['ledger_worst_eV']:.3g} eV "
                     f"({s['ledger_worst_relative']:.2g} of the energy scale); "
                     f"{s['ledger_suspects']} ray(s) above {s['ledger_threshold']:.0e}")
    if "uncertainty" in s:
        parts.append(format_error_bars(s))
    return "\n\n".join(parts)


_UNITS = (("_m_rad", "mm mrad", 1e6), ("_rad", "mrad", 1e3), ("_m", "mm", 1e3), ("_s", "ns", 1e9),
          ("_eV", "eV", 1.0), ("_A", "A", 1.0))
"""Display unit of a figure by the suffix of its name, and the factor from SI."""


def _unit(name):
    for suffix, unit, factor in _UNITS:
        if name.endswith(suffix):
            return name[:-len(suffix)], unit, factor
    return name, "", 1.0


def figure_text(name, value) -> str:
    """A figure named with an SI suffix (``spot_rms_m``) as the reports print it: ``spot_rms =
    0.1234 mm``."""
    short, unit, factor = _unit(name)
    return f"{short} = {value * factor:.6g}" + (f" {unit}" if unit else "")


def _digits(value, error):
    """``value`` with the digits down to the leading digit of ``error`` (at least 4 significant)."""
    shown = 4
    if math.isfinite(error) and error > 0 and value != 0:
        shown = max(shown, math.floor(math.log10(abs(value))) - math.floor(math.log10(error)) + 1)
    return f"{value:.{min(shown, 15)}g}"


def format_error_bars(summary: dict) -> str:
    """The error bars of a beam summary's figures (its ``"uncertainty"``, :mod:`tracer.errorbars`):
    one row per figure, value ± grid error ± Monte Carlo error, then a WARNING line per figure whose
    grid error is too large or whose observed order is off.

    Returns
    -------
    str
    """
    u = summary["uncertainty"]
    cells = ", ".join(f"{c * 1e3:g}" for c in u["cells_m"])
    rows = []
    for section, label in (("planes", "plane"), ("landing", "on")):
        for where, figs in u[section].items():
            values = summary[section][where]
            for name, bar in figs.items():
                if not math.isfinite(values[name]):
                    continue
                short, unit, factor = _unit(name)
                rows.append([f"{label} {where}", short, _digits(values[name] * factor, bar["grid"] * factor),
                             bar["grid"] * factor, bar["monte_carlo"] * factor, unit, bar["observed_order"]])
    head = (f"error bars: grid from cells {cells} mm (Roache's GCI, p = 2), {u['rays']} rays traced "
            f"again on each, {u['seconds']:.2g} s; rays: jackknife over 10 groups")
    header = ["where", "figure", "value", "± grid", "± rays", "unit"]
    if len(u["cells_m"]) > 2:
        header.append("order")
    else:
        rows = [r[:-1] for r in rows]
    parts = [format_table(header, rows, title=head) if rows else
             f"{head}\n(no figures: no plane was crossed and nothing landed)"]
    parts += [f"WARNING: {w}" for w in u["warnings"]]
    return "\n".join(parts)


def format_optics(props, bars=None) -> str:
    """Lens properties (``tracer.optics.LensProperties``) as a table in millimetres.

    Parameters
    ----------
    props : tracer.optics.LensProperties
    bars : tracer.errorbars.LensBars, optional
        Their grid errors (:func:`tracer.pipeline.optics_error_bars`): a column "± grid mm", the
        cells, and its WARNING lines.
    """
    errors = bars.errors if bars is not None else {}
    head = f"{props.species} entering at {props.energy_eV:g} eV, leaving at {props.exit_energy_eV:.6g} eV"
    if math.isfinite(getattr(props, "start_potential_V", math.nan)):
        head += (f"\nenergy reference: {props.energy_eV:g} eV is the kinetic energy at z = "
                 f"{props.start_z_m * 1e3:.6g} mm on the axis, where the potential is "
                 f"{props.start_potential_V:.6g} V (as a beam's energy_eV at its start point)")
    if props.mirror:
        return f"{head}\nthe particle turns back at z = {props.turning_z_m * 1e3:.6g} mm: a mirror"
    rows = [["focal length, image side", props.f_image_m], ["focal length, object side", props.f_object_m],
            ["image focus z", props.focus_image_z_m], ["object focus z", props.focus_object_z_m],
            ["image principal plane z", props.principal_image_z_m],
            ["object principal plane z", props.principal_object_z_m],
            ["Cs (image side, object at infinity)", props.cs_m],
            ["Cc (image side, object at infinity)", props.cc_m]]
    rows = [[name, value * 1e3] for name, value in rows]
    if math.isfinite(props.object_z_m):
        rows += [["object z", props.object_z_m * 1e3], ["image z", props.image_z_m * 1e3],
                 ["Cs (image side, this object)", props.image_cs_m * 1e3],
                 ["Cc (image side, this object)", props.image_cc_m * 1e3]]
    names = ["f_image_m", "f_object_m", "focus_image_z_m", "focus_object_z_m", "principal_image_z_m",
             "principal_object_z_m", "cs_m", "cc_m", "object_z_m", "image_z_m", "image_cs_m", "image_cc_m"]
    header = ["quantity", "mm"]
    if errors:
        header.append("± grid mm")
        rows = [[label, _digits(value, errors[name].error * 1e3) if name in errors else value,
                 errors[name].error * 1e3 if name in errors else math.nan]
                for (label, value), name in zip(rows, names)]
    table = format_table(header, rows)
    if math.isfinite(props.object_z_m):
        table += f"\nmagnification {props.magnification:.6g}"
        if errors and "magnification" in errors:
            table += f" ± {errors['magnification'].error:.2g} (grid)"
    if bars is not None:
        cells = ", ".join(f"{c * 1e3:g}" for c in bars.cells_m)
        table += f"\n(grid: Roache's GCI from cells {cells} mm, p = 2)"
        table += "".join(f"\nWARNING: {w}" for w in bars.warnings)
    return f"{head}\n{table}"
